"""The tail probabilities and quantiles of stats.tails equal scipy.stats bit for bit.

Reference library throughout: scipy.stats (t, f, chi2, norm), which computes the
same laws through its distribution classes; every check is exact equality of the
float64 bits (NaN where scipy gives NaN), on grids that include the edges.
"""

import warnings

import numpy as np
import pytest
from scipy import stats

from scaling.stats import tails

DFS = np.array([0.0, -1.0, np.nan, 1e-3, 0.5, 1.0, 2.0, 3.7, 30.0, 1e6, 1e12, np.inf])
XS = np.concatenate([
    [0.0, -0.0, 1.0, -1.0, 1e-300, -1e-300, 5e-324, 1e-8, -1e-8, 1e300, -1e300,
     np.inf, -np.inf, np.nan, 37.5, -37.5, 8.3, 0.5],
    np.linspace(-12, 12, 97), np.geomspace(1e-6, 1e4, 41)])
QS = np.concatenate([
    [0.0, 1.0, -0.0, 0.5, 1e-300, 5e-324, 1 - 1e-16, 1 - 2.0 ** -53, 1e-17,
     -0.1, 1.1, np.nan, np.inf, -np.inf, 0.025, 0.975, 0.95, 0.995],
    np.linspace(0.001, 0.999, 61)])


def _same(got, want):
    """Bit for bit, NaN equal to NaN, and the same scalar/array kind."""
    assert np.ndim(got) == np.ndim(want)
    assert isinstance(got, np.ndarray) == isinstance(want, np.ndarray)
    g = np.asarray(got, dtype=float)
    w = np.asarray(want, dtype=float)
    assert g.shape == w.shape
    assert np.array_equal(g.view(np.int64), w.view(np.int64)) or (
        np.array_equal(g, w, equal_nan=True)
        and np.array_equal(np.signbit(g), np.signbit(w))), (g, w)


def _grid(points, *shapes):
    mesh = np.meshgrid(points, *shapes, indexing="ij")
    return [m.ravel() for m in mesh]


@pytest.mark.parametrize("ours, ref, lo", [
    (tails.t_upper, stats.t.sf, None), (tails.chi2_upper, stats.chi2.sf, None),
    (tails.chi2_lower, stats.chi2.cdf, None)])
def test_one_shape_probabilities_equal_scipy_stats_bits(ours, ref, lo):
    x, df = _grid(XS, DFS)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        _same(ours(x, df), ref(x, df))   # scipy.stats as reference library, exact
        for xi, di in zip(x[::37], df[::37]):   # scalar in, numpy scalar out
            _same(ours(float(xi), float(di)), ref(float(xi), float(di)))


@pytest.mark.parametrize("ours, ref", [
    (tails.t_quantile, stats.t.ppf), (tails.chi2_quantile, stats.chi2.ppf)])
def test_one_shape_quantiles_equal_scipy_stats_bits(ours, ref):
    q, df = _grid(QS, DFS)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        _same(ours(q, df), ref(q, df))   # scipy.stats as reference library, exact
        for qi, di in zip(q[::29], df[::29]):
            _same(ours(float(qi), float(di)), ref(float(qi), float(di)))


def test_f_law_equals_scipy_stats_bits():
    d = np.array([0.0, np.nan, 0.5, 1.0, 2.0, 3.7, 30.0, 1e6, np.inf])
    x, d1, d2 = _grid(XS[::3], d, d)
    q, e1, e2 = _grid(QS[::2], d, d)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        _same(tails.f_upper(x, d1, d2), stats.f.sf(x, d1, d2))   # scipy.stats, exact
        _same(tails.f_quantile(q, e1, e2), stats.f.ppf(q, e1, e2))   # scipy.stats, exact
        _same(tails.f_upper(3.2, 2, 17), stats.f.sf(3.2, 2, 17))
        _same(tails.f_quantile(0.95, 1, 17), stats.f.ppf(0.95, 1, 17))


def test_normal_law_equals_scipy_stats_bits():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        _same(tails.normal_upper(XS), stats.norm.sf(XS))   # scipy.stats, exact
        _same(tails.normal_quantile(QS), stats.norm.ppf(QS))   # scipy.stats, exact
        for v in (0.0, -0.0, 2.5, np.inf, -np.inf, np.nan):
            _same(tails.normal_upper(v), stats.norm.sf(v))
        for v in (0.0, 1.0, 0.975, 0.5, -1.0, np.nan):
            _same(tails.normal_quantile(v), stats.norm.ppf(v))
        _same(tails.normal_quantile([0.25, 0.75]), stats.norm.ppf([0.25, 0.75]))


def test_broadcasting_and_integer_inputs_as_scipy_stats():
    x = np.arange(-3, 4).reshape(7, 1)
    df = np.array([1, 2, 5])
    _same(tails.t_upper(x, df), stats.t.sf(x, df))   # scipy.stats as reference, exact
    _same(tails.chi2_upper(x, df), stats.chi2.sf(x, df))
    _same(tails.t_quantile(np.array([[0.9], [0.975]]), df),
          stats.t.ppf(np.array([[0.9], [0.975]]), df))
    _same(tails.f_upper(np.abs(x), df, 10), stats.f.sf(np.abs(x), df, 10))


def test_known_values():
    # exact laws: the t(1) law is Cauchy, P(T > 1) = 1/4; chi-square(2) is
    # exponential with mean 2, P(C > 2) = exp(-1); the normal median is 0.
    assert tails.t_upper(1.0, 1) == pytest.approx(0.25, rel=1e-15)
    assert tails.chi2_upper(2.0, 2) == pytest.approx(np.exp(-1), rel=1e-15)
    assert tails.normal_quantile(0.5) == 0.0
    # 1.959963984540054: the normal 0.975 quantile (from memory)
    assert tails.normal_quantile(0.975) == pytest.approx(1.959963984540054, rel=1e-15)
