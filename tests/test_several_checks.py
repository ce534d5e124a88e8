"""Checks of a fit with several predictors: residuals, curvature per term, influence,
collinearity.

Reference data: the Palmer penguins (Horst, Hill & Gorman 2020, palmerpenguins
R package, shipped for Python by the ``palmerpenguins`` package; data from
Gorman, Williams & Fraser 2014, PLoS ONE 9:e90081): body mass against flipper
length and bill length.  Reference values: statsmodels (OLS, OLSInfluence,
het_breuschpagan, variance_inflation_factor, condition_number) and
scipy.stats.shapiro on the same log10 columns.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from numpy.testing import assert_allclose
from scipy import stats
from statsmodels.stats.diagnostic import het_breuschpagan
from statsmodels.stats.outliers_influence import OLSInfluence, variance_inflation_factor

import scaling
from scaling.errors import DataError
from scaling.render.answer_several import collinearity_warning
from scaling.stats.several_checks import (VIF_LIMIT, check_multi, check_multi_groups,
                                          condition_number,
                                          variance_inflation)
from scaling.stats.several_predictors import fit_multi

palmerpenguins = pytest.importorskip("palmerpenguins")


@pytest.fixture(scope="module")
def data():
    d = palmerpenguins.load_penguins().dropna(
        subset=["body_mass_g", "flipper_length_mm", "bill_length_mm"]).reset_index(drop=True)
    x = d[["flipper_length_mm", "bill_length_mm"]]
    fit = fit_multi(x, d["body_mass_g"])
    exog = sm.add_constant(np.log10(x.to_numpy()))
    ref = sm.OLS(np.log10(d["body_mass_g"].to_numpy()), exog).fit()
    return fit, check_multi(fit), exog, ref


def _check(checks, name, term=""):
    return next(c for c, t in zip(checks.checks, checks.terms) if c.check == name and t == term)


class TestCheckMulti:
    def test_coefficients_and_se_equal_statsmodels(self, data):
        fit, _, _, ref = data
        # statsmodels OLS on the log10 columns
        assert_allclose(fit.slopes, ref.params[1:], rtol=0, atol=1e-8)
        assert_allclose(fit.slope_se, ref.bse[1:], rtol=0, atol=1e-8)
        assert_allclose(fit.intercept, ref.params[0], rtol=0, atol=1e-8)

    def test_vif_equals_statsmodels(self, data):
        fit, checks, exog, _ = data
        ref = [variance_inflation_factor(exog, j) for j in (1, 2)]   # statsmodels
        assert_allclose(checks.vif, ref, rtol=0, atol=1e-8)
        vifs = [c.statistic for c in checks.checks if c.test == "VIF"]
        assert_allclose(vifs, ref, rtol=0, atol=1e-8)

    def test_condition_number_equals_statsmodels(self, data):
        _, checks, _, ref = data
        # statsmodels RegressionResults.condition_number of the same design
        assert_allclose(checks.condition_number, ref.condition_number, rtol=1e-8)

    def test_normality_equals_scipy_shapiro(self, data):
        _, checks, _, ref = data
        sw = stats.shapiro(ref.resid)   # scipy.stats
        c = _check(checks, "normality")
        assert_allclose([c.statistic, c.p_value], [sw.statistic, sw.pvalue], rtol=1e-8)

    def test_constant_variance_equals_het_breuschpagan(self, data):
        _, checks, exog, ref = data
        lm, p, _, _ = het_breuschpagan(ref.resid, exog)   # statsmodels (Koenker form)
        c = _check(checks, "constant_variance")
        assert_allclose([c.statistic, c.p_value], [lm, p], rtol=1e-8)
        assert c.df == 2

    @pytest.mark.parametrize("j,term", [(0, "flipper_length_mm"), (1, "bill_length_mm")])
    def test_curvature_per_term_equals_statsmodels(self, data, j, term):
        _, checks, exog, ref = data
        c = exog[:, 1 + j] - exog[:, 1 + j].mean()
        quad = sm.OLS(ref.model.endog, np.column_stack([exog, c * c])).fit()   # statsmodels
        got = _check(checks, "curvature", term)
        assert_allclose([got.estimate, got.statistic, got.p_value, got.df],
                        [quad.params[-1], quad.tvalues[-1], quad.pvalues[-1], quad.df_resid],
                        rtol=1e-8)

    def test_cooks_distance_and_leverage_equal_olsinfluence(self, data):
        _, checks, _, ref = data
        infl = OLSInfluence(ref)   # statsmodels
        assert_allclose(checks.cooks_distance, infl.cooks_distance[0], rtol=1e-8, atol=1e-12)
        assert_allclose(checks.leverage, infl.hat_matrix_diag, rtol=1e-8, atol=1e-12)
        n = checks.n
        # common practice, no source: Cook's D above 4/n and leverage above 2p/n are flagged
        assert _check(checks, "influence").rows == tuple(
            sorted(np.flatnonzero(infl.cooks_distance[0] > 4 / n),
                   key=lambda i: -infl.cooks_distance[0][i]))
        assert set(_check(checks, "leverage").rows) == set(
            np.flatnonzero(infl.hat_matrix_diag > 2 * 3 / n))

    def test_frame_has_a_term_column(self, data):
        _, checks, _, _ = data
        frame = checks.to_frame()
        assert list(frame.columns[:3]) == ["term", "check", "test"]
        assert list(frame.loc[frame["check"] == "curvature", "term"]) == [
            "flipper_length_mm", "bill_length_mm"]

    def test_too_few_points(self):
        fit = fit_multi({"a": [1., 2, 3]}, [1., 2, 5])   # one predictor, three rows
        with pytest.raises(DataError, match="at least 4 points"):
            check_multi(fit)

    def test_public_name(self):
        assert scaling.check_multi is check_multi


class TestCollinearity:
    def test_orthogonal_columns_have_vif_one(self):
        # exact law: uncorrelated centred columns have R^2 = 0, VIF = 1
        x = np.array([[0., 1], [1, 0], [0, -1], [-1, 0]])
        assert_allclose(variance_inflation(x), [1.0, 1.0], atol=1e-12)

    def test_correlated_predictors_are_flagged_and_warned(self):
        rng = np.random.default_rng(11)
        d = 10 ** rng.uniform(1, 2, 80)
        h = d * 10 ** rng.normal(0, 0.01, 80)   # log h = log d + small noise: r about 0.99+
        m = 0.05 * d ** 2 * h * 10 ** rng.normal(0, 0.05, 80)
        checks = check_multi(fit_multi({"d": d, "h": h}, m))
        flagged = checks.collinear_terms()
        assert [t for t, _ in flagged] == ["d", "h"]
        assert all(v > VIF_LIMIT for _, v in flagged)
        text = collinearity_warning(flagged, ("d", "h"))
        assert "above 10" in text and "times as wide" in text
        # exact law: the interval widens by sqrt(VIF)
        assert f"{np.sqrt(max(v for _, v in flagged)):.2g} times" in text

    def test_condition_number_of_a_constant_design(self):
        # exact law: D = [1, x] with x = (-1, 1) has D'D = 2 I, condition number 1
        assert_allclose(condition_number(np.array([[-1.0], [1.0]])), 1.0)


class TestCheckMultiGroups:
    def test_common_exponents_model_equals_statsmodels(self):
        d = palmerpenguins.load_penguins().dropna(
            subset=["body_mass_g", "flipper_length_mm", "bill_length_mm"]).reset_index(drop=True)
        lx = np.log10(d[["flipper_length_mm", "bill_length_mm"]].to_numpy())
        ly = np.log10(d["body_mass_g"].to_numpy())
        dummies = pd.get_dummies(d["species"]).to_numpy(dtype=float)
        exog = np.column_stack([dummies, lx])
        ref = sm.OLS(ly, exog).fit()   # statsmodels: species elevations, common exponents
        checks = check_multi_groups(lx, ly, d["species"], ("f", "b"))
        infl = OLSInfluence(ref)
        assert_allclose(checks.cooks_distance, infl.cooks_distance[0], rtol=1e-8, atol=1e-12)
        assert_allclose(checks.leverage, infl.hat_matrix_diag, rtol=1e-8, atol=1e-12)
        # statsmodels variance_inflation_factor: each term on the other term and the groups
        # (its own check of the whole design, indicators included, warns: not ours)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ref_vif = [variance_inflation_factor(exog, j) for j in (3, 4)]
        assert_allclose(checks.vif, ref_vif, rtol=1e-8)
        assert_allclose(checks.condition_number, ref.condition_number, rtol=1e-8)
        # statsmodels wants an explicit constant: the same column space as constant,
        # two species indicators and the logs (4 df)
        same_space = sm.add_constant(np.column_stack([dummies[:, 1:], lx]))
        lm, p, _, _ = het_breuschpagan(ref.resid, same_space)
        c = _check(checks, "constant_variance")
        assert_allclose([c.statistic, c.p_value], [lm, p], rtol=1e-8)
        for j, term in enumerate(("f", "b")):
            cj = lx[:, j] - lx[:, j].mean()
            quad = sm.OLS(ly, np.column_stack([exog, cj * cj])).fit()   # statsmodels
            got = _check(checks, "curvature", term)
            assert_allclose([got.statistic, got.p_value], [quad.tvalues[-1], quad.pvalues[-1]],
                            rtol=1e-8)
