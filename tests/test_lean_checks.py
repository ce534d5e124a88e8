"""The checks' leaner steps give the same numbers as the steps they replace.

Internal consistency throughout: each function is compared with the numpy or
package call it stands in for, bit for bit.
"""

from __future__ import annotations

import numpy as np
import pytest

from scaling.stats.cooks import SPAN, ols_cooks_distances, sliced_sums
from scaling.stats.error_structure import _polyfit_line
from scaling.stats.influence import leave_one_out_slopes, points_to_check, strong_influence
from scaling.stats.residual_checks import quadratic_solve, quadratic_t


@pytest.mark.parametrize("n", [5, 17, 1000, 70_001])
def test_log_line_is_numpy_polyfit_bit_for_bit(n):
    rng = np.random.default_rng(n)
    for _ in range(4):
        lx = rng.normal(size=n) * rng.uniform(0.01, 30) + rng.uniform(-50, 50)
        ly = 0.7 * lx + rng.normal(size=n) * rng.uniform(1e-6, 3)
        slope, intercept = np.polyfit(lx, ly, 1)   # reference: numpy
        assert _polyfit_line(lx, ly) == (slope, intercept)


def test_log_line_of_an_exact_line_is_polyfits():
    lx = np.log(np.array([1.0, 2.0, 4.0, 8.0, 16.0]))
    ly = 2.0 * lx - 1.0   # exact law: slope 2, intercept -1 (up to rounding)
    assert _polyfit_line(lx, ly) == tuple(np.polyfit(lx, ly, 1))


def test_points_to_check_without_labels_names_flagged_points_with_empty_text():
    rng = np.random.default_rng(5)
    x = rng.normal(size=60)
    y = 0.75 * x + rng.normal(scale=0.05, size=60)
    x[7], y[7] = 6.0, -4.0   # one far point pulls the line
    without = points_to_check(x, y, rows=np.arange(1, 61))
    given = points_to_check(x, y, rows=np.arange(1, 61), labels=np.full(60, "", dtype=object))
    assert without == given
    assert any(c.kind == "influence" and c.row == 8 and c.label == "" for c in without)
    with pytest.raises(Exception, match="one value per point"):
        points_to_check(x, y, labels=np.full(59, "", dtype=object))


def _quadratic_plain(X, Y):
    # the steps of the quadratic fit written out plainly (each sum and mean recomputed)
    mx = X.mean(axis=-1, keepdims=True)
    c = X - mx
    q = c * c
    q = q - q.mean(axis=-1, keepdims=True)
    yc = Y - Y.mean(axis=-1, keepdims=True)
    sums = [np.sum(a * b, axis=-1) for a, b in ((c, c), (c, q), (q, q), (c, yc), (q, yc),
                                                 (yc, yc))]
    gc, gq, se, t, p = quadratic_solve(*sums, X.shape[-1])
    b1 = gc - 2 * gq * mx[..., 0]
    b0 = Y.mean(axis=-1) - b1 * X.mean(axis=-1) - gq * np.mean(X * X, axis=-1)
    return {"intercept": b0, "linear": b1, "quadratic": gq, "quadratic_se": se,
            "statistic": t, "p_value": p}


@pytest.mark.parametrize("shape", [(3,), (4,), (1000,), (5, 7), (2, 3, 50), (SPAN + 1,),
                                   (3 * SPAN + 77,)])
def test_quadratic_fit_equals_its_plain_steps_bit_for_bit(shape):
    # internal consistency: the shared sums (c^2 once, the means once) give the same bits
    rng = np.random.default_rng(5)
    X = rng.normal(2, 1, shape)
    cases = [(X, 0.7 * X + rng.normal(0, 0.1, shape)),   # scatter
             (X, 0.7 * X + 0.3),                          # exact line
             (np.full(shape, 1.5), rng.normal(0, 1, shape)),   # constant x
             (np.where(X > 2.5, np.nan, X), X)]           # NaN
    for x, y in cases:
        with np.errstate(all="ignore"):
            got, want = quadratic_t(x, y), _quadratic_plain(x, y)
        for k, v in want.items():
            assert np.array_equal(got[k], v, equal_nan=True), (shape, k)


@pytest.mark.parametrize("n", [1, 7, 8, 129, SPAN, SPAN + 1, 2 * SPAN + 8, 5 * SPAN + 13,
                               1_000_003])
def test_sliced_sums_are_numpys_sums_bit_for_bit(n):
    # internal consistency: the slices follow numpy's pairwise order, so each sum is the
    # float numpy.sum gives the whole array (values of many magnitudes and both signs)
    rng = np.random.default_rng(n)
    a = rng.standard_normal(n) * 10.0 ** rng.uniform(-8, 8, n)
    b = rng.standard_normal(n)
    got = sliced_sums(lambda lo, hi: (a[lo:hi] * b[lo:hi], a[lo:hi] * a[lo:hi], b[lo:hi]), n)
    want = [np.sum(a * b), np.sum(a * a), np.sum(b)]
    assert [float(v) for v in got] == [float(v) for v in want]
    assert np.array_equal(np.array(want).view(np.int64), got.view(np.int64))


def _cooks_plain(X, Y):
    # Cook's distances written out plainly on whole arrays (Cook 1977's formula)
    n = X.size
    xc, yc = X - X.mean(), Y - Y.mean()
    sxx = np.sum(xc * xc)
    b = np.sum(xc * yc) / sxx
    e = yc - b * xc
    s2 = np.sum(e * e) / (n - 2)
    h = 1.0 / n + xc * xc / sxx
    return e * e * h / (2 * s2 * (1 - h) ** 2)


def _long_cases(n):
    rng = np.random.default_rng(n)
    X = rng.normal(1.5, 0.6, n)
    return [(X, 0.3 + 0.75 * X + rng.normal(0, 0.1, n)),    # scatter
            (X, 0.3 + 0.75 * X),                             # exact line
            (np.full(n, 1.5), rng.normal(0, 1, n)),          # constant x
            (np.where(X > 2.9, np.nan, X), X)]               # NaN


@pytest.mark.parametrize("n", [SPAN + 1, 3 * SPAN + 77])
def test_long_line_influence_equals_the_plain_whole_array_steps(n):
    # internal consistency: a long line's Cook's distances, leave-one-out slopes and
    # strong-influence screen, taken a slice at a time, are the plain steps' bits (the
    # Cook's distances written out above; the others as the stacked, many-sample form)
    for X, Y in _long_cases(n):
        with np.errstate(all="ignore"):
            assert np.array_equal(ols_cooks_distances(X, Y), _cooks_plain(X, Y),
                                  equal_nan=True)
            if np.isnan(X).any():
                continue   # the public checks refuse NaN before any sum
            for method in ("ols", "sma", "ma"):
                assert np.array_equal(leave_one_out_slopes(X, Y, method=method),
                                      leave_one_out_slopes(X[None], Y[None], method=method)[0],
                                      equal_nan=True)
                got = strong_influence(X, Y, method=method)
                want = strong_influence(X[None], Y[None], method=method)
                for k, v in got.items():
                    assert np.array_equal(v, np.asarray(want[k])[0], equal_nan=True), (k, method)
