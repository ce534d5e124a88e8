"""Shared fixtures: paths to the demo, small tables written to tmp_path."""
from __future__ import annotations

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
