"""Groups with several predictors: each group's fit, common exponents, the F tests.

Reference data: the Palmer penguins (Horst, Hill & Gorman 2020, palmerpenguins
R package, shipped for Python by the ``palmerpenguins`` package; data from
Gorman, Williams & Fraser 2014, PLoS ONE 9:e90081): body mass against flipper
length and bill length, by species.  Reference values: statsmodels OLS on the
same log10 columns, its ``compare_f_test`` and ``anova_lm`` of nested models.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from numpy.testing import assert_allclose
from statsmodels.stats.anova import anova_lm

import scaling
from scaling.errors import DataError
from scaling.stats.several_groups import compare_groups_multi, nested_f

palmerpenguins = pytest.importorskip("palmerpenguins")


@pytest.fixture(scope="module")
def comparison(penguins):
    x = penguins[["flipper_length_mm", "bill_length_mm"]]
    return compare_groups_multi(x, penguins["body_mass_g"], penguins["species"])


@pytest.fixture(scope="module")
def models(penguins):
    return {"pooled": smf.ols("lm ~ lf + lb", penguins).fit(),
            "parallel": smf.ols("lm ~ C(species) + lf + lb", penguins).fit(),
            "separate": smf.ols("lm ~ C(species) * (lf + lb)", penguins).fit()}


class TestCompareGroupsMulti:
    def test_common_exponents_and_se_equal_statsmodels(self, comparison, models):
        par = models["parallel"]
        # statsmodels OLS with species intercepts (the parallel model)
        assert_allclose(comparison.slopes, par.params[["lf", "lb"]], rtol=0, atol=1e-8)
        assert_allclose(comparison.slope_se, par.bse[["lf", "lb"]], rtol=0, atol=1e-8)
        ci = par.conf_int(0.05).loc[["lf", "lb"]].to_numpy()
        assert_allclose(comparison.slope_low, ci[:, 0], rtol=0, atol=1e-8)
        assert_allclose(comparison.slope_high, ci[:, 1], rtol=0, atol=1e-8)
        assert comparison.df == par.df_resid   # statsmodels: n - G - k

    def test_each_species_fit_equals_statsmodels(self, comparison, penguins):
        for g in ("Adelie", "Chinstrap", "Gentoo"):
            sub = penguins[penguins["species"] == g]
            ref = smf.ols("lm ~ lf + lb", sub).fit()   # statsmodels OLS within the species
            fit = comparison.group_fits[g]
            assert_allclose(fit.slopes, ref.params[["lf", "lb"]], rtol=0, atol=1e-8)
            assert_allclose(fit.slope_se, ref.bse[["lf", "lb"]], rtol=0, atol=1e-8)
            assert_allclose(fit.intercept, ref.params["Intercept"], rtol=0, atol=1e-8)

    def test_interaction_f_test_equals_compare_f_test_and_anova_lm(self, comparison, models):
        f, d1, d2, p = comparison.slopes_equal
        ref = models["separate"].compare_f_test(models["parallel"])   # statsmodels (F, p, df)
        assert_allclose([f, p, d1], [ref[0], ref[1], ref[2]], rtol=0, atol=1e-8)
        table = anova_lm(models["parallel"], models["separate"])       # statsmodels anova_lm
        assert_allclose([f, p, d2], [table["F"].iloc[1], table["Pr(>F)"].iloc[1],
                                     table["df_resid"].iloc[1]], rtol=0, atol=1e-8)

    def test_elevation_f_test_equals_compare_f_test(self, comparison, models):
        f, d1, d2, p = comparison.intercepts_equal
        ref = models["parallel"].compare_f_test(models["pooled"])   # statsmodels
        assert_allclose([f, p, d1], [ref[0], ref[1], ref[2]], rtol=0, atol=1e-8)
        assert d2 == models["parallel"].df_resid

    def test_common_exponent_tests_equal_statsmodels_t_test(self, comparison, models):
        tests = comparison.test_exponents({"flipper_length_mm": 1.0, "bill_length_mm": 0.5},
                                          label="guess")
        par = models["parallel"]
        for t, name, value in zip(tests, ("lf", "lb"), (1.0, 0.5)):
            ref = par.t_test(f"{name} = {value}")   # statsmodels t test of a coefficient
            assert_allclose(t.statistic, float(np.squeeze(ref.tvalue)), rtol=0, atol=1e-8)
            assert_allclose(t.p_value, float(np.squeeze(ref.pvalue)), rtol=0, atol=1e-8)
            assert t.hypothesis == "guess" and t.df == par.df_resid

    def test_tables_have_term_and_group_rows(self, comparison):
        fits = comparison.to_frame()
        assert set(fits["scope"]) == {"group", "common"}
        assert (fits["term"] != "").all()
        assert len(fits) == 3 * 2 + 2
        tests = comparison.tests_frame()
        assert list(tests["test"]) == ["slopes_equal", "intercepts_equal"]

    def test_public_name(self):
        assert scaling.compare_groups_multi is compare_groups_multi


class TestCompareGroupsMultiErrors:
    def test_one_group_is_an_error(self, penguins):
        x = penguins[["flipper_length_mm", "bill_length_mm"]]
        with pytest.raises(DataError, match="at least two groups"):
            compare_groups_multi(x, penguins["body_mass_g"], np.repeat("a", len(penguins)))

    def test_mismatched_lengths(self, penguins):
        x = penguins[["flipper_length_mm", "bill_length_mm"]]
        with pytest.raises(DataError, match="same length"):
            compare_groups_multi(x, penguins["body_mass_g"], ["a", "b"])

    def test_small_group_has_no_own_fit(self, penguins):
        keep = pd.concat([penguins[penguins["species"] != "Chinstrap"],
                          penguins[penguins["species"] == "Chinstrap"].head(3)])
        cmp = compare_groups_multi(keep[["flipper_length_mm", "bill_length_mm"]],
                                   keep["body_mass_g"], keep["species"])
        assert cmp.skipped == ("Chinstrap",) and "Chinstrap" not in cmp.group_fits


class TestNestedF:
    def test_exact_law(self):
        # exact law: equal residual sums give F = 0 and p = 1
        f, d1, d2, p = nested_f(10.0, 12, 10.0, 10)
        assert (f, d1, d2, p) == (0.0, 2.0, 10.0, 1.0)

    def test_no_df_is_nan(self):
        assert np.isnan(nested_f(1.0, 10, 1.0, 10)[0])


class TestGroupedRunAnswer:
    def test_answer_leads_with_common_exponents_and_flags_the_pooled_fit(self, penguins,
                                                                         models, tmp_path):
        from scaling.io.config import config_from_dict
        from scaling.render.answer import headline_of
        path = tmp_path / "penguins.csv"
        penguins.to_csv(path, index=False)
        raw = {"data": {"file": str(path), "x": ["flipper_length_mm", "bill_length_mm"],
                        "y": "body_mass_g", "group": "species"},
               "model": {"methods": ["ols"]}, "exponents": {"isometry": [3, 3]}}
        res = scaling.run_config(config_from_dict(raw), write=False, quiet=True)
        head = headline_of(res)
        assert head.line == "common" and len(head.sentences) == 3
        par = models["parallel"]   # statsmodels: species elevations, common exponents
        for name in ("lf", "lb"):
            assert f"{par.params[name]:.3f}" in head.sentences[0]
        # the species differ in elevation (F test against the pooled line, p < 1e-4 here)
        # and the pooled exponents lie outside the common intervals: said in the Answer
        assert "differ in elevation" in head.sentences[2]
        assert "the pooled fit mixes species" in head.sentences[2]
        gt = res.tables["group_tests"].set_index("test")
        ref = models["separate"].compare_f_test(models["parallel"])   # statsmodels
        assert_allclose(gt.loc["slopes_equal", "p_value"], ref[1], rtol=0, atol=1e-8)
