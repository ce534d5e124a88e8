"""Small runs shared by the figure, report and browser tests (invented data: rendering only)."""
from __future__ import annotations

import functools
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd

from scaling.run.pipeline import run_config

ROOT = Path(__file__).resolve().parents[1]
DEMO_CONFIG = ROOT / "configs" / "demo.yaml"
DEMO_DATA = ROOT / "demo_data" / "resting_rate.csv"
SCRIPT_GROUP = "<script>alert(1)</script>"


def with_figures(result, **changes):
    """The result with its figure settings changed (e.g. formats, dpi)."""
    cfg = result.config
    return replace(result, config=replace(cfg, figures=replace(cfg.figures, **changes)))


@functools.lru_cache(maxsize=None)
def demo(grouped: bool = True):
    """The demo run, with its clade groups or pooled only.

    Computed once per test session and shared by the figure and report tests:
    read it, change it only through ``dataclasses.replace`` (``with_figures``).
    """
    if grouped:
        return run_config(DEMO_CONFIG, write=False)
    return run_config({
        "title": "Demo without groups",
        "data": {"file": str(DEMO_DATA), "x": "body_mass", "y": "resting_rate",
                 "units": {"x": "g", "y": "mW"}},
        "exponents": {"three_quarters": 0.75},
        "prediction": {"x": [5, 500, 50000]},
    }, write=False)


def simulated(folder: Path, *, groups, decades: tuple = (0, 3), n: int = 30,
              seed: int = 3, title: str = "Simulated"):
    """A run on y = 2 x^0.75 with log-normal scatter (simulation with a known truth)."""
    rng = np.random.default_rng(seed)
    rows = []
    for g in groups:
        x = 10 ** rng.uniform(decades[0], decades[1], n)
        y = 2.0 * x ** 0.75 * 10 ** rng.normal(0, 0.08, n)
        rows.append(pd.DataFrame({"grp": g, "mass": x, "rate": y}))
    path = folder / f"sim_{seed}.csv"
    pd.concat(rows).to_csv(path, index=False)
    return run_config({
        "title": title,
        "data": {"file": str(path), "x": "mass", "y": "rate", "group": "grp",
                 "units": {"x": "kg", "y": "W"}},
        "exponents": {"three_quarters": 0.75, "two_thirds": 2 / 3},
        "prediction": {"x": [float(10 ** decades[0]), float(10 ** decades[1] * 10)]},
        "figures": {"formats": ["png"], "dpi": 100},
    }, write=False)
