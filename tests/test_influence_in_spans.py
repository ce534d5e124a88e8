"""The influence screen of one large sample, taken a span of points at a time, and the
slope standard errors of many samples at once, equal their plain forms bit for bit.

Modules: scaling.stats.influence (``points_to_check``'s screen ``_strong_points``,
``_slopes_and_ses``, the ``sample_moments`` shortcut of ``points_to_check``),
scaling.run.points_to_check (the fits whose factor check is skipped).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from scaling.stats.influence import (SPAN, _slopes_and_ses, _strong_points, points_to_check,
                                     strong_influence)
from scaling.stats.lines import fit_moments, get_method
from scaling.stats.moments import Moments, moments


def _plain_screen(X, Y, method):
    """What points_to_check took from strong_influence: flagged points, strongest first."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        inf = strong_influence(X, Y, method=method)
    flag, cook = inf["flag"], inf["cook"]
    where = np.flatnonzero(flag)[np.argsort(-cook[flag], kind="stable")]
    return where, cook[where], inf["slope_without"][where], inf["slope"], inf["slope_se"]


def _samples():
    rng = np.random.default_rng(21)
    X4 = np.array([0.0, 0.4, 1.1, 2.0])
    Xe = np.linspace(0.1, 3.7, 9) ** 1.3
    planted = rng.uniform(0, 2, 60)
    y_planted = 0.6 * planted + 0.05 * rng.normal(size=60)
    planted[[7, 31]] = [4.0, 5.0]   # far out in x, and off the line
    y_planted[[7, 31]] = [0.2, 5.5]
    big = rng.uniform(0.0, 3.0, 2 * SPAN + 17)   # three spans, outliers in two of them
    y_big = 0.7 * big + rng.normal(0.0, 0.1, big.size)
    big[[5, SPAN + 3]] += 40.0
    y_nan = y_planted.copy()
    y_nan[3] = np.nan
    ties = np.array([0.0, 1.0, 2.0, 3.0, 4.0, 5.0])   # a symmetric pair of equal distances
    # n = 4 is the fewest points the screen takes (points_to_check refuses 3)
    return {"n = 4": (X4, np.array([0.1, 0.5, 0.8, 1.9])),
            "exact line": (Xe, 0.123 + 0.7 * Xe),
            "y constant": (X4, np.full(4, 0.3)),
            "x constant": (np.full(5, 1.2), np.arange(5.0)),
            "planted outliers": (planted, y_planted),
            "a missing value": (planted, y_nan),
            "equal distances": (ties, np.array([3.0, 0.0, 0.0, 0.0, 0.0, 3.0])),
            "three spans": (big, y_big)}


@pytest.mark.parametrize("method", ["ols", "sma", "ma"])
@pytest.mark.parametrize("name", list(_samples()))
def test_screen_in_spans_equals_strong_influence(method, name):
    # internal consistency: the span-by-span screen gives the flagged positions (in the
    # same order), their Cook's distances and refitted slopes, and the fit's slope and
    # standard error of strong_influence bit for bit
    X, Y = _samples()[name]
    want = _plain_screen(X, Y, method)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        got = _strong_points(X, Y, method)
    for g, w in zip(got, want):
        assert np.array_equal(np.asarray(g), np.asarray(w), equal_nan=True), name


def test_screen_finds_the_planted_points():
    # known truth: a point far out in x and 2 units off a line with scatter 0.05 pulls
    # the line (Cook's distance far above 1)
    X, Y = _samples()["planted outliers"]
    where = _strong_points(X, Y, "ols")[0]
    assert set(where.tolist()) >= {7}
    big_x, big_y = _samples()["three spans"]
    assert set(_strong_points(big_x, big_y, "sma")[0].tolist()) >= {5, SPAN + 3}


def _lone_fits(m: Moments, method: str) -> tuple:
    """The slope and its standard error of each sample's moments fitted alone."""
    slopes, ses = [], []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for i in range(m.n.size):
            one = Moments(n=np.full((), m.n[i]), mean_x=m.mean_x[i], mean_y=m.mean_y[i],
                          sxx=m.sxx[i], syy=m.syy[i], sxy=m.sxy[i])
            fit = fit_moments(one, method)
            slopes.append(float(np.asarray(fit["slope"])))
            ses.append(float(np.asarray(fit["slope_se"])))
    return np.array(slopes), np.array(ses)


def _many_moments() -> Moments:
    rng = np.random.default_rng(4)
    k = 6000
    n = rng.integers(3, 60, k).astype(float)
    sxx, syy = rng.uniform(0.01, 5.0, k), rng.uniform(0.01, 5.0, k)
    sxy = rng.uniform(-1.0, 1.0, k) * np.sqrt(sxx * syy)
    sxy[:3] = np.sqrt(sxx[:3] * syy[:3])   # exact lines
    sxy[3] = 0.0                            # no correlation
    n[4] = 3.0
    return Moments(n=n, mean_x=rng.normal(size=k), mean_y=rng.normal(size=k),
                   sxx=sxx, syy=syy, sxy=sxy)


@pytest.mark.parametrize("method", ["ols", "sma", "ma"])
def test_standard_errors_of_many_samples_equal_each_sample_alone(method):
    # internal consistency: bit for bit against each sample's moments fitted alone
    m = _many_moments()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        b, se = _slopes_and_ses(m, method)
        spec = get_method(method)
        plain = np.sqrt(np.asarray(spec.slope_var(m, np.asarray(spec.slope(m), dtype=float))))
    want_b, want_se = _lone_fits(m, method)
    assert np.isfinite(se).sum() > 5000
    assert np.array_equal(b, want_b, equal_nan=True)
    assert np.array_equal(se, want_se, equal_nan=True)
    if method != "ols":
        # the data have teeth: squaring the array by multiplication differs somewhere
        assert np.any((plain != want_se) & np.isfinite(want_se) & (want_se > 0))


def test_given_sample_moments_give_the_same_findings():
    # internal consistency: the line of the group-residual test from moments the
    # caller passes equals the one computed here
    rng = np.random.default_rng(6)
    codes = rng.integers(0, 30, 3000)
    X = rng.normal(size=codes.size)
    Y = 0.75 * X + 0.04 * codes + rng.normal(scale=0.1, size=codes.size)
    X[10], Y[10] = 8.0, -3.0   # far out in x and off the line: strong
    plain = points_to_check(X, Y, group_codes=codes, method="sma")
    given = points_to_check(X, Y, group_codes=codes, method="sma",
                            sample_moments=moments(X, Y))
    assert plain == given
    assert {c.kind for c in plain} == {"influence", "group_residuals"}


def test_fits_whose_factors_agree_are_those_the_factor_check_passes():
    # internal consistency: every fit left out of the checks (factors agreeing well
    # inside the limits) is one fit_checks finds nothing in; ratios at and around the
    # limits, NaN, infinite, zero and negative factors are checked by fit_checks
    from scaling.run.points_to_check import _factors_agree
    from scaling.stats.influence import SMEARING_RATIO_LIMIT, fit_checks
    rng = np.random.default_rng(17)
    lim = SMEARING_RATIO_LIMIT
    ratios = np.r_[rng.uniform(0.5, 1.6, 4000), lim, 1 / lim, np.nextafter(lim, 0),
                   np.nextafter(1 / lim, 2), 1.01 / lim, lim / 1.01, 1.0]
    param = rng.uniform(0.5, 3.0, ratios.size)
    pairs = [(float(r * p), float(p)) for r, p in zip(ratios, param)]
    pairs += [(np.nan, 1.0), (1.0, np.nan), (1.0, 0.0), (1.0, -1.0), (np.inf, 1.0), (1.0, 1.0)]
    factors = {("group", str(i), "ols"): pair for i, pair in enumerate(pairs)}
    agree = _factors_agree(factors)
    assert 0 < len(agree) < len(factors)
    for key, (smear, param_) in factors.items():
        found = fit_checks(smearing_factor=smear, parametric_factor=param_)
        if key in agree:
            assert found == []
    # known truth: a ratio of 1 agrees, one of 2 does not (limit 1.25)
    assert ("group", str(len(pairs) - 1), "ols") in agree
    assert not agree & {k for k, (s, p) in factors.items() if p > 0 and s / p > lim}
