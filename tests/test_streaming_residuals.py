"""Tests of scaling.stats.streaming_residuals: residual sums taken chunk by chunk.

Expected values come from scipy.stats (normaltest, skew, kurtosis) and
statsmodels (het_breuschpagan, OLSInfluence) run on the residuals held in
memory (reference libraries computing the same statistics from the rows), or
from the in-memory road's own formulas (internal consistency); each check says
which beside it.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import stats

from scaling.stats.lines import fit_moments
from scaling.stats.moments import group_moments
from scaling.stats.streaming_residuals import (TOP_K, ResidualSums, breusch_pagan,
                                               dagostino_pearson)

METHODS = ("ols", "sma", "ma")


def _sample(n=400, offset=0.0, seed=1, skewed=False):
    rng = np.random.default_rng(seed)
    X = offset + rng.uniform(0, 3, n)
    noise = rng.gamma(2.0, 0.1, n) - 0.2 if skewed else rng.normal(0, 0.15, n)
    # scatter growing with size, so Breusch-Pagan has something to find
    Y = -offset + 0.5 + 0.75 * (X - offset) + noise * (0.5 + 0.4 * (X - offset))
    return X, Y


def _accumulate(X, Y, codes, S, *, chunk=53, base=10.0, split=False):
    """ResidualSums of S sets fed in chunks (or as two accumulators merged, as Dask does)."""
    m = group_moments(X, Y, codes, n_groups=S)
    lines = {k: np.column_stack([fit_moments(m, meth)[k] for meth in METHODS])
             for k in ("intercept", "slope", "resid_sd")}
    params = dict(intercept=lines["intercept"], slope=lines["slope"], mean_x=m.mean_x,
                  mean_y=m.mean_y, sxx=m.sxx, syy=m.syy, sxy=m.sxy, n=m.n,
                  resid_sd=lines["resid_sd"], log_base=base)
    rows = np.arange(1, X.size + 1)
    accs = [ResidualSums(**params), ResidualSums(**params)] if split else [ResidualSums(**params)]
    for k, start in enumerate(range(0, X.size, chunk)):
        sl = slice(start, start + chunk)
        accs[k % len(accs)].add(codes[sl], X[sl], Y[sl], rows[sl])
    if split:
        accs[0].merge(accs[1])
    return accs[0].result(), lines


@pytest.mark.parametrize("offset", [0.0, 12.0, -12.0])
@pytest.mark.parametrize("split", [False, True])
def test_residual_checks_equal_scipy_and_statsmodels(offset, split):
    from statsmodels.regression.linear_model import OLS
    from statsmodels.stats.diagnostic import het_breuschpagan
    from statsmodels.stats.outliers_influence import OLSInfluence

    X, Y = _sample(offset=offset, skewed=True)
    codes = (np.arange(X.size) % 3 == 0).astype(np.intp)     # two sets, interleaved
    res, lines = _accumulate(X, Y, codes, 2, split=split)
    for s in range(2):
        x, y = X[codes == s], Y[codes == s]
        rows = np.flatnonzero(codes == s) + 1
        exog = np.column_stack([np.ones(x.size), x])
        for j, meth in enumerate(METHODS):
            e = y - lines["intercept"][s, j] - lines["slope"][s, j] * x
            k2 = stats.normaltest(e)
            # reference library: scipy.stats.normaltest (D'Agostino-Pearson K^2)
            assert_allclose(res.normality_statistic[s, j], k2.statistic, rtol=1e-9)
            assert_allclose(res.normality_p[s, j], k2.pvalue, rtol=1e-9)
            # reference library: scipy.stats.skew and kurtosis (biased, Pearson)
            assert_allclose(res.skewness[s, j], stats.skew(e), rtol=1e-9)
            assert_allclose(res.kurtosis[s, j], stats.kurtosis(e, fisher=False), rtol=1e-9)
            lm, p, _, _ = het_breuschpagan(e, exog)
            # reference library: statsmodels het_breuschpagan (Koenker's LM on (1, X))
            assert_allclose(res.bp_statistic[s, j], lm, rtol=1e-9)
            assert_allclose(res.bp_p[s, j], p, rtol=1e-9)
            assert res.bp_direction[s, j] == np.sign(np.polyfit(x, e * e, 1)[0])
            # internal consistency: the in-memory road's formulas
            # (scaling.run.predictions.factors_by_group)
            yhat = 10.0 ** (y - e)
            assert_allclose(res.see[s, j], np.sqrt(np.sum(e * e) / (x.size - 2)), rtol=1e-9)
            assert_allclose(res.smearing[s, j], np.mean(10.0 ** e), rtol=1e-9)
            assert_allclose(res.ratio[s, j], np.mean(10.0 ** y) / np.mean(yhat), rtol=1e-9)
            assert_allclose(res.percent_pe[s, j],
                            100 * np.mean(np.abs(10.0 ** y - yhat) / yhat), rtol=1e-9)
            assert_allclose(res.parametric[s, j],
                            np.exp(lines["resid_sd"][s, j] ** 2 * np.log(10) ** 2 / 2),
                            rtol=1e-12)
        cooks = OLSInfluence(OLS(y, exog).fit()).cooks_distance[0]
        order = np.argsort(-cooks, kind="stable")[:TOP_K]
        # reference library: statsmodels OLSInfluence, the k largest Cook's distances
        assert_allclose(res.cooks_distance[s], cooks[order], rtol=1e-9)
        assert list(res.cooks_rows[s]) == list(rows[order])
        # reference library: statsmodels' distances above the 4/n rule, all counted
        assert res.n_influential[s] == np.sum(cooks > 4 / x.size)
        assert res.n[s] == x.size


def test_fewer_rows_than_k_pad_the_heap():
    X, Y = _sample(n=12, seed=4)
    res, _ = _accumulate(X, Y, np.zeros(12, dtype=np.intp), 1, chunk=5)
    assert np.isfinite(res.cooks_distance[0][:10]).all()
    res6, _ = _accumulate(X[:6], Y[:6], np.zeros(6, dtype=np.intp), 1, chunk=4)
    # common practice, no source: unused slots are blank, not zero
    assert np.isnan(res6.cooks_distance[0][6:]).all()
    assert (res6.cooks_rows[0][6:] == -1).all()


@pytest.mark.parametrize("n", [8, 20, 101, 5000])
@pytest.mark.parametrize("skewed", [False, True])
def test_dagostino_pearson_equals_scipy_normaltest(n, skewed):
    rng = np.random.default_rng(n)
    e = rng.exponential(size=n) if skewed else rng.normal(size=n)
    with np.errstate(all="ignore"):
        import warnings
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ref = stats.normaltest(e)
    k2, p = dagostino_pearson(n, stats.skew(e), stats.kurtosis(e, fisher=False))
    # reference library: scipy.stats.normaltest from the same skewness and kurtosis
    assert_allclose(k2, ref.statistic, rtol=1e-12)
    assert_allclose(p, ref.pvalue, rtol=1e-10)


def test_dagostino_pearson_is_blank_below_eight_points():
    k2, p = dagostino_pearson(7, 0.3, 2.5)
    # scipy.stats.skewtest needs n >= 8 (D'Agostino 1970's transformation)
    assert np.isnan(k2) and np.isnan(p)


def test_breusch_pagan_from_sums_equals_statsmodels():
    from statsmodels.stats.diagnostic import het_breuschpagan
    X, Y = _sample(n=90, seed=8)
    e = Y - Y.mean()
    w = e * e - np.mean(e * e)
    xc = X - X.mean()
    lm, p = breusch_pagan(X.size, np.sum(w * xc), np.sum(xc * xc), np.sum(w * w))
    ref = het_breuschpagan(e, np.column_stack([np.ones(X.size), X]))
    # reference library: statsmodels het_breuschpagan
    assert_allclose([lm, p], ref[:2], rtol=1e-10)


@pytest.mark.parametrize("method", METHODS)
def test_strong_rows_equal_refits_without_each_point(method):
    from scaling.stats.influence import strong_influence
    from scaling.stats.moments import moments
    X, Y = _sample(n=30, seed=12)
    X[4], Y[4] = 4.5, Y.mean() - 1.5            # a far point off the line
    Y[9] += 0.8                                  # and one off the line in the middle
    codes = np.zeros(X.size, dtype=np.intp)
    m = group_moments(X, Y, codes, n_groups=1)
    fit = fit_moments(m, method)
    lines = {k: np.column_stack([fit_moments(m, meth)[k] for meth in METHODS])
             for k in ("intercept", "slope", "resid_sd")}
    acc = ResidualSums(intercept=lines["intercept"], slope=lines["slope"], mean_x=m.mean_x,
                       mean_y=m.mean_y, sxx=m.sxx, syy=m.syy, sxy=m.sxy, n=m.n,
                       resid_sd=lines["resid_sd"], log_base=10.0, influence_method=method,
                       influence_slope=fit["slope"], slope_se=fit["slope_se"])
    for start in range(0, X.size, 7):
        sl = slice(start, start + 7)
        acc.add(codes[sl], X[sl], Y[sl], np.arange(X.size)[sl])
    res = acc.result()
    ref = strong_influence(X, Y, method=method)
    flagged = np.flatnonzero(ref["flag"])
    flagged = flagged[np.argsort(-ref["cook"][flagged], kind="stable")][:TOP_K]
    assert flagged.size >= 1
    got = res.strong_rows[0][res.strong_rows[0] >= 0]
    # internal consistency: the in-memory rule on the rows (scaling.stats.influence)
    assert list(got) == list(flagged)
    assert_allclose(res.strong_cooks[0][:got.size], ref["cook"][flagged], rtol=1e-9)
    for k, i in enumerate(got):
        keep = np.arange(X.size) != i
        refit = fit_moments(moments(X[keep], Y[keep]), method)["slope"]
        # exact law: the slope refitted to the sample without the point
        assert_allclose(res.strong_slope_without[0][k], refit, rtol=1e-9)


def test_group_residual_anova_equals_scipy_f_oneway():
    from scaling.stats.streaming_residuals import GroupResidualSums
    X, Y = _sample(n=200, seed=6)
    g = np.arange(X.size) % 4
    Y = Y + 0.05 * g                              # groups at slightly different elevations
    m = group_moments(X, Y, g)
    acc = GroupResidualSums(intercept=0.4, slope=0.8, mean_x=m.mean_x, mean_y=m.mean_y)
    for start in range(0, X.size, 33):
        sl = slice(start, start + 33)
        acc.add(g[sl], X[sl], Y[sl])
    out = acc.anova()
    e = Y - 0.4 - 0.8 * X
    ref = stats.f_oneway(*[e[g == k] for k in range(4)])
    # reference library: scipy.stats.f_oneway on the residuals
    assert_allclose([out["statistic"], out["p_value"]], [ref.statistic, ref.pvalue], rtol=1e-9)
    assert (out["df1"], out["df2"]) == (3, 196)
