"""Tests of scaling.run.predictions: which lines predict; range_ratio."""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
from numpy.testing import assert_allclose

from scaling.io.config import config_from_dict
from scaling.run.pipeline import analyse
from scaling.run.predictions import range_ratio


class TestRangeRatio:
    def test_above_below_inside(self):
        # exact law of the definition: v/hi above, lo/v below, 1 inside
        assert_allclose(range_ratio([5, 20, 40, 1], 10, 20), [2.0, 1.0, 2.0, 10.0], rtol=0)

    def test_logs_use_range_widths(self):
        # definition for data already on logs: 1 + distance / width
        assert_allclose(range_ratio([3.0, 0.0], 1.0, 2.0, logs=True), [2.0, 2.0], rtol=0)


def _run(tmp_path, **prediction):
    rng = np.random.default_rng(8)
    lx = rng.uniform(1, 3, 25)
    ly = 0.2 + 0.75 * lx + rng.normal(0, 0.1, 25)
    path = tmp_path / "d.csv"
    pd.DataFrame({"mass": 10 ** lx, "rate": 10 ** ly}).to_csv(path, index=False)
    raw = {"data": {"file": str(path), "x": "mass", "y": "rate"},
           "model": {"methods": ["ols", "sma"]}, "diagnostics": {"enabled": False},
           "prediction": {"x": [100, 1e4], "y": [10], **prediction}}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return analyse(config_from_dict(raw))


class TestPredictionMethods:
    def test_default_is_ols_only(self, tmp_path):
        res = _run(tmp_path)
        assert set(res.predictions["method"]) == {"ols"}
        assert set(res.tables["inverse_predictions"]["method"]) == {"ols"}

    def test_symmetric_lines_only_when_asked_with_a_note(self, tmp_path):
        res = _run(tmp_path, methods=["ols", "sma"])
        assert set(res.predictions["method"]) == {"ols", "sma"}
        assert any("Symmetric lines describe how y scales" in w for w in res.warnings)

    def test_range_ratio_and_fitted_range_in_warning(self, tmp_path):
        res = _run(tmp_path)
        p = res.predictions
        hi = res.fits.loc[res.fits["method"] == "ols", "x_max"].iloc[0]
        # definition: x above the range gives x / x_max; 100 lies inside (1)
        assert_allclose(p["range_ratio"], [1.0, 1e4 / hi], rtol=1e-12)
        assert any("outside the fitted x range" in w and "guesses" in w
                   for w in res.warnings)
        assert "range_ratio" in res.tables["inverse_predictions"]
