"""Tests of scaling.pipeline.analyse: fits with notes still reach the slope tests."""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from scaling.config import config_from_dict
from scaling.lines import BOTH_SIGNS_NOTE, EXACT_NOTE
from scaling.pipeline import analyse


def _run(tmp_path, x, y, methods=("ols", "sma", "ma")):
    path = tmp_path / "d.csv"
    pd.DataFrame({"mass": x, "rate": y}).to_csv(path, index=False)
    raw = {"data": {"file": str(path), "x": "mass", "y": "rate"},
           "model": {"methods": list(methods)}, "diagnostics": {"enabled": False},
           "exponents": {"three_quarters": "3/4"}}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return analyse(config_from_dict(raw))


class TestAnalyse:
    def test_exact_power_law_tested_without_false_verdict(self, tmp_path):
        x = np.linspace(1.0, 50.0, 12)
        res = _run(tmp_path, x, 3.0 * x ** 0.75)
        tests = res.slope_tests
        # exact law: y = 3 x^0.75 has slope 0.75 exactly: p = 1 for every method
        assert len(tests) == 3 and np.all(tests["p_value"] == 1.0)
        assert set(res.fits["note"]) == {EXACT_NOTE}
        assert any("equals 0.75" in m for m in res.messages)

    def test_sma_of_either_sign_keeps_its_fit(self, tmp_path):
        rng = np.random.default_rng(3)
        X = rng.normal(0.0, 0.3, 8)
        Y = 0.1 * X + rng.normal(0.0, 0.3, 8)
        res = _run(tmp_path, 10 ** X, 10 ** Y, methods=("sma",))
        note = res.fits["note"].iloc[0]
        assert note.startswith(BOTH_SIGNS_NOTE)
        # the estimable fit is tested (before: a note dropped it from the tests)
        assert len(res.slope_tests) == 1
        assert 0.0 <= res.slope_tests["p_value"].iloc[0] <= 1.0


def _bones_run(tmp_path, planted: bool):
    """Invented femur length (mm) and body mass (g) of 30 species (truth b = 2.8)."""
    rng = np.random.default_rng(11)
    lx = rng.uniform(1.3, 2.6, 30)
    ly = -1.5 + 2.8 * lx + rng.normal(0.0, 0.1, 30)
    length = 10 ** lx
    if planted:
        length[7] /= 10          # one femur entered in cm among mm
    path = tmp_path / "bones.csv"
    pd.DataFrame({"species": [f"sp{i}" for i in range(30)], "femur": length,
                  "mass": 10 ** ly}).to_csv(path, index=False)
    raw = {"data": {"file": str(path), "x": "femur", "y": "mass",
                    "average_within": "species"},
           "model": {"methods": ["ols", "sma"]}, "prediction": {"x": [100]},
           "exponents": {"cube": 3}}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return analyse(config_from_dict(raw))


class TestPointsToCheckInTheRun:
    def test_planted_unit_error_warns_strongly_with_row_and_label(self, tmp_path):
        res = _bones_run(tmp_path, planted=True)
        strong = [w for w in res.warnings if w.startswith("STRONG")]
        # planted error (simulation with known truth): row 8 of the file is sp7
        assert any("row 8 (sp7)" in w for w in strong)
        table = res.tables["points_to_check"]
        assert {"influence"} <= set(table["kind"])
        assert res.warnings[0].startswith("STRONG")   # strong warnings come first

    def test_clean_data_no_strong_warning(self, tmp_path):
        res = _bones_run(tmp_path, planted=False)
        # simulation with known truth, no planted error
        assert not [w for w in res.warnings if w.startswith("STRONG")]
        assert len(res.tables["points_to_check"]) == 0
