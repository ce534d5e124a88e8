"""ResidualSums sums the residual checks only for the sets that will be checked.

A run with more groups than ``groups.diagnostics_max`` checks the pooled line
alone, and lists strong points of the pooled line alone; the groups then
need only their accuracy figures and correction factors.  Every check here is
internal consistency: the sets asked for get, to the last bit, what the
accumulator gives when every set is checked.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from numpy.testing import assert_array_equal

from scaling.stats.lines import fit_moments
from scaling.stats.moments import group_moments
from scaling.stats import streaming_residuals as sr
from scaling.stats.streaming_residuals import ResidualSums

METHODS = ("ols", "sma", "ma")
CHECKS = ("skewness", "kurtosis", "normality_statistic", "normality_p", "bp_statistic",
          "bp_p", "cooks_distance")
FACTORS = ("see", "percent_see", "percent_pe", "smearing", "ratio", "parametric")


def _params(X, Y, codes, S):
    m = group_moments(X, Y, codes, n_groups=S)
    lines = {k: np.column_stack([fit_moments(m, meth)[k] for meth in METHODS])
             for k in ("intercept", "slope", "resid_sd", "slope_se")}
    return dict(intercept=lines["intercept"], slope=lines["slope"], mean_x=m.mean_x,
                mean_y=m.mean_y, sxx=m.sxx, syy=m.syy, sxy=m.sxy, n=m.n,
                resid_sd=lines["resid_sd"], log_base=10.0, influence_method="sma",
                influence_slope=lines["slope"][:, 1], slope_se=lines["slope_se"][:, 1])


def _feed(acc, X, Y, codes, chunk=61):
    rows = np.arange(1, X.size + 1)
    for start in range(0, X.size, chunk):
        sl = slice(start, start + chunk)
        # the pooled set (0) and the groups (1..) are added apart, as the second pass does
        acc.add(np.zeros(X[sl].size, dtype=np.intp), X[sl], Y[sl], rows[sl])
        acc.add(1 + codes[sl], X[sl], Y[sl], rows[sl])
    return acc.result()


@pytest.fixture(scope="module")
def data():
    rng = np.random.default_rng(8)
    n, g = 900, 6
    codes = rng.integers(0, g, n)
    X = rng.uniform(0, 3, n)
    Y = 0.2 + (0.7 + 0.05 * codes) * X + rng.gamma(2.0, 0.1, n) * (0.5 + 0.3 * X)
    X[5], Y[5] = 9.0, 0.0          # one strong point of the pooled line
    return X, Y, codes, g + 1


def test_checked_sets_equal_an_accumulator_that_checks_every_set(data):
    X, Y, codes, S = data
    m = group_moments(np.concatenate([X, X]), np.concatenate([Y, Y]),
                      np.concatenate([np.zeros(X.size, np.intp), 1 + codes]), n_groups=S)
    params = _params(np.concatenate([X, X]), np.concatenate([Y, Y]),
                     np.concatenate([np.zeros(X.size, np.intp), 1 + codes]), S)
    # the pooled set's moments are those of every row once, not twice
    pooled = group_moments(X, Y, np.zeros(X.size, np.intp), n_groups=1)
    for k in ("mean_x", "mean_y", "sxx", "syy", "sxy", "n"):
        params[k] = np.concatenate([np.atleast_1d(getattr(pooled, k)), getattr(m, k)[1:]])
    full = _feed(ResidualSums(**params), X, Y, codes)
    only = np.zeros(S, dtype=bool)
    only[0] = True
    part = _feed(ResidualSums(**params, checked=only, strong=only), X, Y, codes)
    for name in FACTORS + ("n",):
        assert_array_equal(getattr(part, name), getattr(full, name), err_msg=name)
    for name in CHECKS + ("cooks_rows", "n_influential", "bp_direction"):
        assert_array_equal(getattr(part, name)[0], getattr(full, name)[0], err_msg=name)
    for name in CHECKS:
        assert np.isnan(getattr(part, name)[1:]).all(), name
    assert (part.cooks_rows[1:] == -1).all() and (part.n_influential[1:] == 0).all()
    # strong points: the pooled line's as before; none looked for in the groups
    for name in ("strong_cooks", "strong_rows", "strong_slope_without"):
        assert_array_equal(getattr(part, name)[0], getattr(full, name)[0], err_msg=name)
    assert full.strong_rows[0, 0] == 6      # the planted point (row numbers from 1)
    assert (part.strong_rows[1:] == -1).all()


def test_default_checks_every_set(data):
    X, Y, codes, S = data
    params = _params(X, Y, codes, S - 1)
    a = ResidualSums(**params)
    b = ResidualSums(**params, checked=np.ones(S - 1, bool), strong=np.ones(S - 1, bool))
    rows = np.arange(1, X.size + 1)
    a.add(codes, X, Y, rows)
    b.add(codes, X, Y, rows)
    ra, rb = a.result(), b.result()
    for f in dataclasses.fields(ra):
        assert_array_equal(getattr(ra, f.name), getattr(rb, f.name), err_msg=f.name)


@pytest.mark.parametrize("n", [1, 7, 128, 129, 1000, 4099, 70001])
@pytest.mark.parametrize("block", [128, 1000, 1 << 16])
def test_pairwise_blocks_reproduce_numpy_sum_bit_for_bit(n, block):
    # reference: numpy's own np.sum of the whole array (its pairwise summation)
    rng = np.random.default_rng(n)
    v = rng.normal(size=n) * 10.0 ** rng.uniform(-6, 6, n)
    blocks = sr._pairwise_blocks(n, block)
    assert blocks[0][0] == 0 and blocks[-1][1] == n
    assert all(a[1] == b[0] for a, b in zip(blocks, blocks[1:]))
    parts = np.array([[v[lo:hi].sum(), (v[lo:hi] ** 3).sum()] for lo, hi in blocks])
    total = sr._pairwise_join(parts, n, block)
    assert total[0] == v.sum() and total[1] == (v ** 3).sum()


def test_one_set_in_small_blocks_equals_the_whole_chunk(data, monkeypatch):
    X, Y, codes, S = data
    params = _params(X, Y, np.zeros(X.size, dtype=np.intp), 1)    # the pooled set
    rows = np.arange(1, X.size + 1)
    results = []
    for block in (1 << 16, 128):
        monkeypatch.setattr(sr, "_BLOCK", block)
        acc = ResidualSums(**params)
        acc.add(np.zeros(X.size, dtype=np.intp), X, Y, rows)   # one set, many blocks
        acc.add(np.zeros(300, dtype=np.intp), X[:300], Y[:300], rows[:300])
        results.append(acc.result())
    assert sr._pairwise_blocks(X.size, 128)[1:]       # several blocks were used
    for f in dataclasses.fields(results[0]):
        assert_array_equal(getattr(results[0], f.name), getattr(results[1], f.name),
                           err_msg=f.name)


def test_many_sets_in_small_blocks_equal_one_bincount_of_the_chunk(data, monkeypatch):
    X, Y, codes, S = data
    params = _params(X, Y, codes, S - 1)
    rows = np.arange(1, X.size + 1)
    results, sums = [], []
    for block in (1 << 16, 128):
        monkeypatch.setattr(sr, "_BLOCK", block)
        acc = ResidualSums(**params)
        acc.add(codes, X, Y, rows)
        results.append(acc.result())
        sums.append({k: v.copy() for k, v in acc.sums.items()})
    for f in dataclasses.fields(results[0]):
        assert_array_equal(getattr(results[0], f.name), getattr(results[1], f.name),
                           err_msg=f.name)
    # reference: one bincount of the chunk's values, as the sums were first written
    a, b = params["intercept"], params["slope"]
    for j in range(len(METHODS)):
        e = Y - a[codes, j] - b[codes, j] * X
        want = np.bincount(codes, weights=e * e, minlength=S - 1)
        assert_array_equal(sums[1]["se2"][:, j], want)
        assert_array_equal(sums[1]["smear"][:, j],
                           np.bincount(codes, weights=np.exp(e * np.log(10.0)),
                                       minlength=S - 1))
