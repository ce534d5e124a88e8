"""Predictions of many lines in one array pass equal the line-by-line ones.

:func:`scaling.stats.predictions.predict_lines` and
:func:`~scaling.stats.predictions.inverse_predict_lines` give, row by row, what
:func:`~scaling.stats.predictions.predict` and
:func:`~scaling.stats.predictions.inverse_predict` give each line: the check is
internal consistency, exact to the last bit (same formulas, elementwise).
"""

from __future__ import annotations

import json
import warnings

import numpy as np
import pytest
from numpy.testing import assert_array_equal

import scaling
from scaling.errors import ConfigError
from scaling.stats.predictions import (inverse_predict, inverse_predict_lines, predict,
                                       predict_lines)


@pytest.fixture(scope="module")
def lines():
    """OLS, SMA and MA lines of groups of 5 to 400 points, two levels, one weak slope."""
    rng = np.random.default_rng(7)
    out = []
    for size, slope, noise, level in ((5, 0.75, 0.1, 0.95), (40, 0.7, 0.3, 0.9),
                                      (400, 0.8, 0.05, 0.95), (12, 0.02, 0.6, 0.99)):
        x = 10 ** rng.uniform(0, 3, size)
        y = 2.0 * x ** slope * 10 ** rng.normal(0, noise, size)
        with warnings.catch_warnings():   # the weak slope warns that it is weak
            warnings.simplefilter("ignore")
            out += [scaling.fit_line(x, y, method=m, confidence=level)
                    for m in ("ols", "sma", "ma")]
    return out


@pytest.mark.parametrize("correction", ["smearing", "parametric", "ratio", "none"])
@pytest.mark.parametrize("interval", ["prediction", "confidence"])
def test_predict_lines_equals_each_line_predicted_alone(lines, correction, interval):
    # internal consistency: one array pass against one call per line, exact
    x = [0.5, 10.0, 300.0, 5e4]   # below, inside and above the fitted ranges
    factors = [None if correction in ("parametric", "none") else 1.01 + 0.01 * i
               for i in range(len(lines))]
    batch = predict_lines(lines, x, correction=correction, interval=interval,
                          factors=factors)
    assert batch.estimate.shape == (len(lines), len(x))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for i, (fit, factor) in enumerate(zip(lines, factors)):
            one = predict(fit, x, correction=correction, interval=interval, factor=factor)
            assert_array_equal(batch.estimate[i], one.y)
            assert_array_equal(batch.low[i], one.y_low)
            assert_array_equal(batch.high[i], one.y_high)
            assert_array_equal(batch.extrapolated[i], one.extrapolated)
            assert batch.confidence[i] == one.confidence
    assert batch.extrapolated[:, 0].all() and batch.extrapolated[:, -1].all()


@pytest.mark.parametrize("interval", ["prediction", "confidence"])
def test_inverse_predict_lines_equals_each_line_alone(lines, interval):
    # internal consistency: symmetric lines and OLS (Fieller) mixed, exact
    y = [1.0, 20.0, 400.0]
    batch = inverse_predict_lines(lines, y, interval=interval)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for i, fit in enumerate(lines):
            one = inverse_predict(fit, y, interval=interval)
            assert_array_equal(batch.estimate[i], one.x)
            assert_array_equal(batch.low[i], one.x_low)
            assert_array_equal(batch.high[i], one.x_high)
            assert_array_equal(batch.bounded[i], one.bounded)
            assert_array_equal(batch.extrapolated[i], one.extrapolated)
    # the weak OLS slope (0.02 in noise 0.6 on 12 points) leaves its interval unbounded
    assert not batch.bounded[9].all()


def test_predict_lines_refuses_lines_on_different_log_bases():
    x = np.array([1.0, 2.0, 4.0, 8.0])
    y = np.array([1.1, 2.3, 3.9, 8.4])
    fits = [scaling.fit_line(x, y, log_base=10), scaling.fit_line(x, y, log_base="e")]
    with pytest.raises(ConfigError, match="one log base"):
        predict_lines(fits, [3.0], correction="none")


def test_predict_lines_of_no_lines_is_empty():
    batch = predict_lines([], [1.0, 2.0], correction="parametric")
    assert batch.estimate.shape == (0, 2) and batch.correction == "parametric"


def test_saved_fits_equal_fit_to_dict():
    # internal consistency: the saved-fit dicts built for many fits at once are the
    # dicts of fit_to_dict (plus scope, group and the fit's note), key for key
    from scaling.render.wording import fit_note
    from scaling.run.predictions import saved_fits_of
    from scaling.stats.line_results import fit_to_dict
    x = np.array([1.0, 2.0, 4.0, 8.0, 16.0])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fits = {("pooled", "", m): scaling.fit_line(x, 3 * x ** 0.7 * [1, 1.1, 0.9, 1, 1.05],
                                                    method=m) for m in ("ols", "sma", "ma")}
        # a weak slope (its interval has a gap) and an exact line (NaN intervals)
        fits[("group", "weak", "sma")] = scaling.fit_line(x, [2.0, 1.0, 3.0, 1.5, 2.5],
                                                          method="sma")
        fits[("group", "exact", "ols")] = scaling.fit_line(x, 2 * x ** 0.5)
    extra = {k: {"smearing_factor": 1.0 + i / 10, "ratio_factor": float("nan")}
             for i, k in enumerate(fits)}
    saved = saved_fits_of(fits, extra)
    for key, fit in fits.items():
        want = fit_to_dict(fit, smearing_factor=extra[key]["smearing_factor"],
                           ratio_factor=extra[key]["ratio_factor"])
        want.update({"scope": key[0], "group": key[1], "note": fit_note(fit)})
        # the same values, types (3 is not 3.0 in results.json) and key order
        assert json.dumps(saved[key]) == json.dumps(want)
    assert any("slope_gap" in d for d in saved.values())


def test_saved_fits_of_fits_from_arrays_equal_fit_to_dict():
    # internal consistency: fits packaged from a vectorised result (numpy-scalar moments
    # with the higher sums, as on the moments path), including a one-point group, an
    # exact line, a constant x and a weak SMA slope, give the dicts of fit_to_dict
    from scaling.render.wording import fit_note
    from scaling.run.predictions import saved_fits_of
    from scaling.stats.line_results import fit_to_dict, line_fits_from_result
    from scaling.stats.lines import fit_moments
    from scaling.stats.moments import group_moments
    rng = np.random.default_rng(5)
    X = np.concatenate([rng.normal(1, 0.5, 40), [0.3], [0.0, 1.0, 2.0, 3.0],
                        [1.2, 1.2, 1.2], [0.0, 1.0, 2.0, 3.0]])
    Y = np.concatenate([0.75 * X[:40] + rng.normal(0, 0.1, 40), [0.9], [0.1, 0.85, 1.6, 2.35],
                        [0.1, 0.5, 0.2], [1.0, 0.0, 0.0, 1.0]])
    labels = np.repeat(np.arange(5), [40, 1, 4, 3, 4])
    m = group_moments(X, Y, labels, n_groups=5, higher=True)
    fits, extra = {}, {}
    for method in ("ols", "sma", "ma"):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            made = line_fits_from_result(fit_moments(m, method), m, method, confidence=0.95,
                                         log_base=10.0, x_ranges=[(1.0, 2.0)] * 5,
                                         y_ranges=[(3.0, float("nan"))] * 5)
        for g, fit in enumerate(made):
            key = ("group", str(g), method)
            fits[key] = fit
            extra[key] = {"smearing_factor": 1.0 + g / 7, "ratio_factor": float("inf")}
    saved = saved_fits_of(fits, extra)
    for key, fit in fits.items():
        want = fit_to_dict(fit, smearing_factor=extra[key]["smearing_factor"],
                           ratio_factor=extra[key]["ratio_factor"])
        want.update({"scope": key[0], "group": key[1], "note": fit_note(fit)})
        assert json.dumps(saved[key]) == json.dumps(want), key
    assert list(saved) == list(fits)


@pytest.mark.parametrize("partial", [False, True])
def test_accuracy_columns_equal_the_row_by_row_reading(partial):
    # internal consistency: the columns read in one pass equal extra.get(key, {}).get(c)
    # row by row (fits without accuracy left NaN; a dict lacking a column too)
    import pandas as pd

    from scaling.run.predictions import add_accuracy_columns
    from scaling.stats.schema import FIT_ACCURACY_COLUMNS
    fits = pd.DataFrame({"scope": ["pooled", "group", "group", "group"],
                         "group": ["", "a", "b", "c"], "method": ["ols"] * 4,
                         "slope": [0.7, 0.8, np.nan, 0.6]})
    extra = {("pooled", "", "ols"): {c: 1.0 + i for i, c in enumerate(FIT_ACCURACY_COLUMNS)},
             ("group", "b", "ols"): {c: float("nan") for c in FIT_ACCURACY_COLUMNS},
             ("group", "c", "ols"): {c: -2.5 * i for i, c in enumerate(FIT_ACCURACY_COLUMNS)}}
    if partial:
        del extra[("group", "c", "ols")]["ratio_factor"]
    want = fits.copy()
    for c in FIT_ACCURACY_COLUMNS:
        want[c] = [extra.get(k, {}).get(c, np.nan)
                   for k in zip(fits["scope"], fits["group"], fits["method"])]
    got = add_accuracy_columns(fits, extra)
    pd.testing.assert_frame_equal(got, want)
    assert got.to_csv() == want.to_csv()
    empty = add_accuracy_columns(fits.iloc[:0], extra)
    assert list(empty.columns) == list(want.columns) and len(empty) == 0
