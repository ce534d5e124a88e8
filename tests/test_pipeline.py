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
