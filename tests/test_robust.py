"""Tests of scaling.stats.robust: Theil-Sen, Siegel, robust SMA/MA and the Deming line."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import stats

from scaling.errors import ConfigError, DataError, DegenerateDataWarning
from scaling.stats.line_results import LineFit, fit_line
from scaling.stats.moments import Moments, moments
from scaling.stats.resampling import draw_counts
from scaling.stats.robust import (_theil_sen_boot, deming, deming_moments, huber_scatter,
                            ma_robust, siegel, sma_robust, theil_sen)


def _data(n=60, seed=2, slope=0.75, noise=0.3):
    rng = np.random.default_rng(seed)
    X = rng.normal(2.0, 0.6, n)
    return X, slope * X + noise * rng.normal(size=n)


class TestTheilSen:
    def test_equals_scipy_theilslopes(self):
        # Reference library: scipy.stats.theilslopes (Sen 1968 slope interval).
        X, Y = _data()
        fit = theil_sen(10 ** X, 10 ** Y, n_boot=199, seed=0)
        ref = stats.theilslopes(Y, X, alpha=0.95)
        assert isinstance(fit, LineFit) and fit.method == "theil_sen"
        assert_allclose([fit.slope, fit.intercept, fit.slope_ci.low, fit.slope_ci.high],
                        [ref.slope, ref.intercept, ref.low_slope, ref.high_slope], rtol=1e-10)

    def test_confidence_passed_to_scipy(self):
        # Reference library: scipy.stats.theilslopes with alpha = 0.9.
        X, Y = _data(seed=5)
        fit = theil_sen(X, Y, log_base=None, confidence=0.9, n_boot=50, seed=0)
        ref = stats.theilslopes(Y, X, alpha=0.9)
        assert_allclose([fit.slope_ci.low, fit.slope_ci.high], [ref.low_slope, ref.high_slope],
                        rtol=1e-12)

    def test_bootstrap_replicates_are_theilslopes_of_resamples(self):
        # Reference library: the weighted-median shortcut gives exactly
        # scipy.stats.theilslopes of the expanded resample (ties in x included).
        X, Y = _data(n=30, seed=3)
        X[5] = X[6]  # a tie in x, which theilslopes skips
        counts = draw_counts(np.random.default_rng(4), 30, 8)
        b, a = _theil_sen_boot(X, Y, [counts])
        for k in range(8):
            idx = np.repeat(np.arange(30), counts[k])
            ref = stats.theilslopes(Y[idx], X[idx])
            assert_allclose([b[k], a[k]], [ref.slope, ref.intercept], rtol=1e-12)

    def test_intercept_interval_and_seed(self):
        # Exact law: a percentile interval contains the median of the replicates and the
        # same seed reproduces it; the estimate lies inside for well-behaved data.
        X, Y = _data()
        a = theil_sen(X, Y, log_base=None, n_boot=299, seed=11)
        b = theil_sen(X, Y, log_base=None, n_boot=299, seed=11)
        assert a.intercept_ci == b.intercept_ci
        assert a.intercept_ci.low < a.intercept < a.intercept_ci.high
        assert a.slope_se > 0 and a.intercept_se > 0

    def test_errors(self):
        X, Y = _data()
        with pytest.raises(ConfigError, match="n_boot must be an integer >= 2"):
            theil_sen(X, Y, log_base=None, n_boot=1)
        with pytest.raises(ConfigError, match="confidence must be a number between 0 and 1"):
            theil_sen(X, Y, log_base=None, confidence=1.5)
        with pytest.raises(ConfigError, match="log_base must be 10, 'e', 2 or None"):
            theil_sen(X, Y, log_base=3)
        with pytest.raises(DataError, match="x and y must be positive"):
            theil_sen(-np.abs(X), Y)
        with pytest.raises(DataError, match="x and y must be one-dimensional"):
            theil_sen(X[:, None], Y, log_base=None)
        with pytest.raises(DataError, match="x and y must have the same length"):
            theil_sen(X, Y[:-1], log_base=None)
        with pytest.raises(DataError, match="x and y must be finite"):
            theil_sen(np.r_[X[:-1], np.inf], Y, log_base=None)
        with pytest.raises(DataError, match="at least 3 rows"):
            theil_sen(X[:2], Y[:2], log_base=None)
        with pytest.raises(DataError, match="x does not vary"):
            theil_sen(np.ones(5), np.arange(5.0), log_base=None)
        with pytest.raises(ConfigError, match="seed must be an integer"):
            theil_sen(X, Y, log_base=None, seed=1.5)


class TestKendallSlopeTest:
    def test_variance_is_the_permutation_variance_with_ties_in_y(self):
        # Exact law: under H0 Kendall's S of X against R = Y - b0 X has, over all
        # n! permutations of R, mean 0 and variance n(n-1)(2n+5)/18 less the tie
        # terms of X and of R (Kendall 1970, Rank Correlation Methods, ch. 4;
        # Sen 1968, JASA 63:1379, eq. 2.6).  Here y has ties but R has none, so
        # no tie term applies: counting ties in y (as before) understated it.
        import itertools
        from scaling.stats.line_results import _kendall_slope_test
        X = np.array([0.1, 0.5, 0.9, 1.3, 1.6, 2.2, 2.9])
        Y = np.array([0.3, 0.3, 0.8, 0.8, 0.8, 1.4, 1.9])   # ties in y
        b0 = 0.37
        R = Y - b0 * X
        perms = np.array(list(itertools.permutations(range(X.size))))
        i, j = np.triu_indices(X.size, k=1)
        sx = np.sign(X[j] - X[i])
        s_all = np.sign(R[perms][:, j] - R[perms][:, i]) @ sx
        s_obs = float(np.sign(R[j] - R[i]) @ sx)
        z, _ = _kendall_slope_test(X, Y, b0)
        assert_allclose(z, s_obs / math.sqrt(np.mean(s_all ** 2)), rtol=1e-12)

    def test_reported_bounds_have_nominal_p_up_to_one_step(self):
        # Exact law: Sen's interval is the set of b0 the Kendall test accepts; at
        # a bound |S| is within one step (2) of C = z sd(S) however y is rounded.
        rng = np.random.default_rng(12)
        X = rng.normal(0, 1, 25)
        Y = np.round(0.8 * X + rng.normal(0, 0.5, 25), 1)   # many ties in y
        fit = theil_sen(X, Y, log_base=None, n_boot=20, seed=0)
        sd = math.sqrt(25 * 24 * 55 / 18)
        for bound in (fit.slope_ci.low, fit.slope_ci.high):
            z = fit.test_slope(bound).statistic
            assert abs(abs(z) * sd - 1.959964 * sd) <= 2.0 + 1e-9


class TestSiegel:
    def test_equals_scipy_siegelslopes(self):
        # Reference library: scipy.stats.siegelslopes (Siegel 1982, hierarchical).
        X, Y = _data(n=40)
        fit = siegel(X, Y, log_base=None, n_boot=199, seed=0)
        ref = stats.siegelslopes(Y, X)
        assert fit.method == "siegel"
        assert_allclose([fit.slope, fit.intercept], [ref.slope, ref.intercept], rtol=1e-12)

    def test_bootstrap_interval(self):
        # Known truth (slope 0.75): the percentile interval covers it for this seed
        # and has the width of about 4 bootstrap SE (normal theory, from memory).
        X, Y = _data(n=80, seed=9)
        fit = siegel(X, Y, log_base=None, n_boot=499, seed=1)
        assert fit.slope_ci.low < 0.75 < fit.slope_ci.high
        width = fit.slope_ci.high - fit.slope_ci.low
        assert_allclose(width, 2 * 1.96 * fit.slope_se, rtol=0.3)  # rough normal-theory check


class TestHuberScatter:
    def test_solves_its_estimating_equations(self):
        # Exact law: at the solution mu = sum w1 z / sum w1 and
        # V = sum w2 (z-mu)(z-mu)' / (n tau) (Maronna 1976, Ann. Stat. 4:51), recomputed here.
        X, Y = _data(n=100, seed=7)
        Y[:8] += 2.0
        mu, V, ok = huber_scatter(X, Y)
        assert bool(ok)
        Z = np.column_stack([X, Y])
        D = Z - mu
        d2 = np.einsum("ni,ij,nj->n", D, np.linalg.inv(V), D)
        c2 = stats.chi2.ppf(0.9, 2)
        w2 = np.minimum(1, c2 / d2)
        tau = stats.chi2.cdf(c2, 4) + c2 / 2 * stats.chi2.sf(c2, 2)
        assert_allclose(mu, (np.sqrt(w2)[:, None] * Z).sum(0) / np.sqrt(w2).sum(), rtol=1e-7)
        assert_allclose(V, (w2[:, None, None] * D[:, :, None] * D[:, None, :]).sum(0)
                        / (100 * tau), rtol=1e-6)

    def test_affine_equivariance(self):
        # Exact law: for z' = A z + c, mu' = A mu + c and V' = A V A' (Maronna 1976).
        X, Y = _data(n=50, seed=1)
        A = np.array([[2.0, 0.3], [-0.5, 1.5]])
        c = np.array([1.0, -3.0])
        Z2 = np.column_stack([X, Y]) @ A.T + c
        mu, V, _ = huber_scatter(X, Y)
        mu2, V2, _ = huber_scatter(Z2[:, 0], Z2[:, 1])
        assert_allclose(mu2, A @ mu + c, rtol=1e-6)
        assert_allclose(V2, A @ V @ A.T, rtol=1e-6)

    def test_consistent_at_the_normal(self):
        # Known truth: with the tau factor, V estimates the covariance of normal data.
        # Monte Carlo, n = 20000: tolerance 3% (SE of a variance ~ 1.1% here).
        rng = np.random.default_rng(12)
        cov = np.array([[1.0, 0.6], [0.6, 0.8]])
        Z = rng.multivariate_normal([0, 0], cov, size=20000)
        _, V, _ = huber_scatter(Z[:, 0], Z[:, 1])
        assert_allclose(V, cov, rtol=0.03, atol=0.02)

    def test_counts_equal_expanded_data(self):
        # Exact law: integer weights are the same as repeating rows.
        X, Y = _data(n=30, seed=4)
        counts = draw_counts(np.random.default_rng(0), 30, 3)
        mu, V, _ = huber_scatter(X, Y, weights=counts)
        for k in range(3):
            idx = np.repeat(np.arange(30), counts[k])
            m1, V1, _ = huber_scatter(X[idx], Y[idx])
            assert_allclose(mu[k], m1, rtol=1e-6)
            assert_allclose(V[k], V1, rtol=1e-6)

    def test_errors(self):
        with pytest.raises(ConfigError, match="q must be a number between 0 and 1"):
            huber_scatter([1.0, 2, 3], [1.0, 2, 4], q=1.0)


class TestSmaRobust:
    def test_close_to_sma_on_clean_data(self):
        # Internal consistency: the classical SMA (scaling.stats.lines, Warton et al. 2006).  On clean
        # bivariate normal data the robust slope differs only by its lower efficiency:
        # tolerance 0.04 (about 2 SE of the SMA slope, SE ~ 0.019 here).
        rng = np.random.default_rng(0)
        X = rng.normal(2, 0.6, 200)
        Y = 0.75 * X + 0.15 * rng.normal(size=200)
        classical = fit_line(X, Y, method="sma", log_base=None)
        robust = sma_robust(X, Y, log_base=None, n_boot=199, seed=1)
        assert robust.method == "sma_robust"
        assert abs(robust.slope - classical.slope) < 0.04
        assert robust.slope_ci.low < robust.slope < robust.slope_ci.high

    def test_resists_gross_outliers(self):
        # Known truth: SMA slope of the clean population sqrt(0.75^2 * 0.36 + 0.0225)/0.6
        # = 0.7906.  10% of rows shifted up by 2 log10 units (100-fold): the classical SMA
        # moves by > 0.2, the robust one stays within 0.1 (tolerances stated here; the
        # Huber M-estimator bounds but does not remove the outliers' influence).
        rng = np.random.default_rng(0)
        X = rng.normal(2, 0.6, 200)
        Y = 0.75 * X + 0.15 * rng.normal(size=200)
        Y[rng.choice(200, 20, replace=False)] += 2.0
        true = math.sqrt(0.75 ** 2 * 0.36 + 0.15 ** 2) / 0.6
        classical = fit_line(X, Y, method="sma", log_base=None)
        robust = sma_robust(X, Y, log_base=None, n_boot=199, seed=1)
        assert abs(classical.slope - true) > 0.2
        assert abs(robust.slope - true) < 0.1
        robust_ma = ma_robust(X, Y, log_base=None, n_boot=199, seed=1)
        classical_ma = fit_line(X, Y, method="ma", log_base=None)
        assert abs(robust_ma.slope - true) < abs(classical_ma.slope - true) / 3

    def test_slope_from_scatter(self):
        # Exact law: SMA slope sign(v_xy) sqrt(v_yy/v_xx), intercept mu_y - b mu_x.
        X, Y = _data()
        fit = sma_robust(X, Y, log_base=None, n_boot=20, seed=0)
        mu, V, _ = huber_scatter(X, Y)
        b = math.copysign(math.sqrt(V[1, 1] / V[0, 0]), V[0, 1])
        assert_allclose([fit.slope, fit.intercept], [b, mu[1] - b * mu[0]], rtol=1e-12)
        assert_allclose(fit.r, V[0, 1] / math.sqrt(V[0, 0] * V[1, 1]), rtol=1e-12)


class TestMaRobust:
    def test_is_principal_axis_of_scatter(self):
        # Reference library: numpy.linalg.eigh of the robust scatter matrix.
        X, Y = _data()
        fit = ma_robust(X, Y, log_base=None, n_boot=20, seed=0)
        _, V, _ = huber_scatter(X, Y)
        vec = np.linalg.eigh(V)[1][:, 1]
        assert fit.method == "ma_robust"
        assert_allclose(fit.slope, vec[1] / vec[0], rtol=1e-10)

    def test_close_to_ma_on_clean_data(self):
        # Internal consistency: classical MA (scaling.stats.lines); tolerance 0.04 as for SMA.
        rng = np.random.default_rng(1)
        X = rng.normal(2, 0.6, 200)
        Y = 0.75 * X + 0.15 * rng.normal(size=200)
        assert abs(ma_robust(X, Y, log_base=None, n_boot=50, seed=0).slope
                   - fit_line(X, Y, method="ma", log_base=None).slope) < 0.04


class TestDeming:
    def test_lambda_one_is_ma(self):
        # Exact law: with equal error variances the Deming line is the major axis.
        X, Y = _data()
        dem = deming(10 ** X, 10 ** Y, lam=1.0)
        ma = fit_line(10 ** X, 10 ** Y, method="ma")
        for name in ("slope", "intercept", "slope_se", "intercept_se", "r", "resid_sd"):
            assert_allclose(getattr(dem, name), getattr(ma, name), rtol=1e-12)  # exact law
        assert_allclose([dem.slope_ci.low, dem.slope_ci.high, dem.intercept_ci.low],
                        [ma.slope_ci.low, ma.slope_ci.high, ma.intercept_ci.low], rtol=1e-12)
        assert dem.method == "deming"

    def test_large_lambda_approaches_ols(self):
        # Reference library: statsmodels OLS slope; Deming -> OLS as lambda -> inf with
        # error O(1/lambda) (expand the closed form), so 1e-6 at lambda = 1e8 is ample.
        import statsmodels.api as sm
        X, Y = _data()
        ols = sm.OLS(Y, sm.add_constant(X)).fit()
        dem = deming(X, Y, lam=1e8, log_base=None)
        assert_allclose([dem.intercept, dem.slope], ols.params, rtol=1e-6)

    @pytest.mark.parametrize("lam", [1e12, 1e16])
    def test_huge_lambda_equals_ols(self, lam):
        # Reference library: statsmodels OLS; Deming -> OLS with error O(1/lambda),
        # so 1e-9 relative at lambda >= 1e12 -- only with a cancellation-free
        # closed form of the slope (the naive one loses every digit here).
        import statsmodels.api as sm
        X, Y = _data()
        ols = sm.OLS(Y, sm.add_constant(X)).fit()
        dem = deming(X, Y, lam=lam, log_base=None)
        assert_allclose([dem.intercept, dem.slope], ols.params, rtol=1e-9)

    def test_equals_orthogonal_distance_regression(self):
        # Reference library: scipy.odr with sx = 1, sy = sqrt(lambda) minimises
        # sum(dx^2 + dy^2/lambda), the Deming criterion (Boggs & Rogers 1990).
        odr = pytest.importorskip("scipy.odr")
        X, Y = _data(seed=6)
        lam = 4.0
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", DeprecationWarning)  # scipy.odr deprecated in 1.17
            data = odr.RealData(X, Y, sx=np.ones_like(X), sy=np.full_like(Y, math.sqrt(lam)))
            out = odr.ODR(data, odr.unilinear, beta0=[0.7, 0.0], sstol=1e-14, partol=1e-14,
                          maxit=1000).run()
        dem = deming(X, Y, lam=lam, log_base=None)
        # atol for the intercept near 0: ODR stops at its own convergence tolerance.
        assert_allclose([dem.slope, dem.intercept], out.beta, rtol=1e-6, atol=1e-6)

    def test_closed_form(self):
        # Published: b = [Syy - l Sxx + sqrt((Syy - l Sxx)^2 + 4 l Sxy^2)] / (2 Sxy)
        # (Deming 1943; Cornbleet & Gochman 1979, Clin. Chem. 25:432 -- from memory).
        X, Y = _data(seed=8)
        m = moments(X, Y)
        lam = 0.3
        d = float(m.syy - lam * m.sxx)
        b = (d + math.sqrt(d * d + 4 * lam * float(m.sxy) ** 2)) / (2 * float(m.sxy))
        assert_allclose(deming(X, Y, lam=lam, log_base=None).slope, b, rtol=1e-12)

    def test_interval_coverage(self):
        # Monte Carlo, known truth: structural errors-in-variables model, true slope 1.5,
        # xi ~ N(0, 1), var(dx) = 0.25, var(dy) = lambda * 0.25 with lambda = 2.  The
        # observed (X, Y) are bivariate normal, so the inverted MA test on the rescaled
        # data (Warton et al. 2006) is exact: coverage 0.95 +- 0.015 (4 Monte Carlo SE),
        # 4000 data sets of n = 25 through one stacked call of deming_moments.
        rng = np.random.default_rng(77)
        R, n, lam, beta = 4000, 25, 2.0, 1.5
        xi = rng.normal(size=(R, n))
        X = xi + 0.5 * rng.normal(size=(R, n))
        Y = 0.2 + beta * xi + 0.5 * math.sqrt(lam) * rng.normal(size=(R, n))
        xc, yc = X - X.mean(1, keepdims=True), Y - Y.mean(1, keepdims=True)
        m = Moments(n=np.full(R, float(n)), mean_x=X.mean(1), mean_y=Y.mean(1),
                    sxx=(xc * xc).sum(1), syy=(yc * yc).sum(1), sxy=(xc * yc).sum(1))
        out = deming_moments(m, lam)
        covered = (out["slope_low"] <= beta) & (beta <= out["slope_high"])
        assert abs(covered.mean() - 0.95) <= 0.015, covered.mean()  # observed 0.9545

    def test_degenerate_warns(self):
        # Uncorrelated x and y: the Deming slope is undefined; warned, NaN, like fit_line.
        X = np.array([0.0, 1.0, 0.0, 1.0])
        Y = np.array([0.0, 0.0, 1.0, 1.0])
        with pytest.warns(DegenerateDataWarning, match="the Deming slope is undefined"):
            fit = deming(X, Y, lam=2.0, log_base=None)
        assert math.isnan(fit.slope)

    def test_errors(self):
        X, Y = _data()
        with pytest.raises(ConfigError, match="lam .error-variance ratio. must be a positive"):
            deming(X, Y, lam=-1.0, log_base=None)
        with pytest.raises(ConfigError, match="lam .error-variance ratio. must be a positive"):
            deming_moments(moments(X, Y), float("inf"))
