"""Shared fixtures: paths to the demo, one demo run per session, small tables in tmp_path."""
from __future__ import annotations

import contextlib
import io
from dataclasses import dataclass
from pathlib import Path

import matplotlib
import pytest

matplotlib.use("Agg")

ROOT = Path(__file__).resolve().parents[1]
DEMO_CONFIG = ROOT / "configs" / "demo.yaml"
DEMO_DATA = ROOT / "demo_data" / "resting_rate.csv"


@pytest.fixture
def write_config(tmp_path):
    """Write a YAML config (text) into tmp_path and return its path."""
    def write(text: str, name: str = "run.yaml") -> Path:
        path = tmp_path / name
        path.write_text(text, encoding="utf-8")
        return path
    return write


@pytest.fixture
def small_csv(tmp_path):
    """A tidy two-group table with a known exponent (invented; simulation use only)."""
    import numpy as np
    import pandas as pd
    rng = np.random.default_rng(7)
    n = 30
    mass = 10 ** rng.uniform(0, 3, 2 * n)
    rate = 3.0 * mass ** 0.75 * 10 ** rng.normal(0, 0.05, 2 * n)
    table = pd.DataFrame({"grp": ["a"] * n + ["b"] * n, "mass": mass, "rate": rate})
    path = tmp_path / "small.csv"
    table.to_csv(path, index=False)
    return path


@dataclass(frozen=True)
class DemoRun:
    """The demo's ``scaling run`` (exit code, output folder, what it printed)."""

    code: int
    out: Path
    stdout: str


@pytest.fixture(scope="session")
def demo_run_shared(tmp_path_factory) -> DemoRun:
    """``scaling run configs/demo.yaml`` once per session, for tests that only READ its
    output folder (never write into ``out``: other tests share it).  Run without
    ``--quiet`` so the printed summary can be checked too; the input file must be
    left unchanged."""
    from scaling.cli import main
    out = tmp_path_factory.mktemp("demo") / "out"
    before = DEMO_DATA.read_bytes()
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed):
        code = main(["run", str(DEMO_CONFIG), "--out", str(out)])
    assert DEMO_DATA.read_bytes() == before   # input never modified
    return DemoRun(code=code, out=out, stdout=printed.getvalue())


@pytest.fixture(scope="session")
def penguins():
    """The Palmer penguins with body mass, flipper and bill length and species (rows with
    any of them missing dropped), plus their log10 columns lm, lf, lb.  Data: Gorman,
    Williams & Fraser 2014, PLoS ONE 9:e90081, shipped by the palmerpenguins package
    (Horst, Hill & Gorman 2020); skipped where the package is absent."""
    import numpy as np
    palmerpenguins = pytest.importorskip("palmerpenguins")
    d = palmerpenguins.load_penguins().dropna(
        subset=["body_mass_g", "flipper_length_mm", "bill_length_mm", "species"])
    d = d.reset_index(drop=True)
    return d.assign(lm=np.log10(d["body_mass_g"]), lf=np.log10(d["flipper_length_mm"]),
                    lb=np.log10(d["bill_length_mm"]))
