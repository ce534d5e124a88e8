"""Predictions of several predictors from each group's line (data.group).

Reference data: the Palmer penguins (Horst, Hill & Gorman 2020, palmerpenguins
R package, shipped for Python by the ``palmerpenguins`` package; data from
Gorman, Williams & Fraser 2014, PLoS ONE 9:e90081): body mass against flipper
length and bill length, by species.  Reference values: statsmodels OLS
``get_prediction`` on each species' rows, and on the model with species
dummies (common exponents, one elevation per species).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from numpy.testing import assert_allclose

from scaling.errors import DataError
from scaling.stats.several_groups import (compare_groups_multi, predict_groups,
                                          predict_total_groups)

palmerpenguins = pytest.importorskip("palmerpenguins")

NEW = pd.DataFrame({"flipper_length_mm": [190.0, 215.0, 200.0, 181.0, 222.0],
                    "bill_length_mm": [39.0, 47.5, 49.0, 36.0, 50.0],
                    "species": ["Adelie", "Gentoo", "Chinstrap", "Adelie", "Gentoo"]})
X_NEW = {"flipper_length_mm": NEW["flipper_length_mm"].to_numpy(),
         "bill_length_mm": NEW["bill_length_mm"].to_numpy()}


@pytest.fixture(scope="module")
def comparison(penguins):
    x = penguins[["flipper_length_mm", "bill_length_mm"]]
    return compare_groups_multi(x, penguins["body_mass_g"], penguins["species"])


def _new_logs():
    return pd.DataFrame({"lf": np.log10(NEW["flipper_length_mm"]),
                         "lb": np.log10(NEW["bill_length_mm"]), "species": NEW["species"]})


class TestPredictGroups:
    @pytest.mark.parametrize("interval,low,high", [("prediction", "obs_ci_lower", "obs_ci_upper"),
                                                   ("confidence", "mean_ci_lower",
                                                    "mean_ci_upper")])
    def test_each_group_equals_statsmodels_on_its_rows(self, comparison, penguins, interval,
                                                       low, high):
        pred, groups = predict_groups(comparison, X_NEW, NEW["species"], model="group",
                                      correction="none", interval=interval)
        assert list(groups) == list(NEW["species"])
        logs = _new_logs()
        for i, row in logs.iterrows():
            # statsmodels OLS get_prediction on that species' rows only
            ref = smf.ols("lm ~ lf + lb", penguins[penguins["species"] == row["species"]]).fit()
            frame = ref.get_prediction(logs.iloc[[i]]).summary_frame(alpha=0.05)
            assert_allclose(pred.log_fit[i], frame["mean"].iloc[0], rtol=0, atol=1e-8)
            assert_allclose(pred.log_low[i], frame[low].iloc[0], rtol=0, atol=1e-8)
            assert_allclose(pred.log_high[i], frame[high].iloc[0], rtol=0, atol=1e-8)

    @pytest.mark.parametrize("interval,low,high", [("prediction", "obs_ci_lower", "obs_ci_upper"),
                                                   ("confidence", "mean_ci_lower",
                                                    "mean_ci_upper")])
    def test_common_model_equals_statsmodels_with_group_dummies(self, comparison, penguins,
                                                                interval, low, high):
        pred, _ = predict_groups(comparison, X_NEW, NEW["species"], model="common",
                                 correction="none", interval=interval)
        # statsmodels OLS with species dummies: common exponents, one elevation per species
        ref = smf.ols("lm ~ C(species) + lf + lb", penguins).fit()
        frame = ref.get_prediction(_new_logs()).summary_frame(alpha=0.05)
        assert_allclose(pred.log_fit, frame["mean"], rtol=0, atol=1e-8)
        assert_allclose(pred.log_low, frame[low], rtol=0, atol=1e-8)
        assert_allclose(pred.log_high, frame[high], rtol=0, atol=1e-8)
        assert_allclose(pred.y, 10 ** frame["mean"].to_numpy(), rtol=1e-10)

    def test_smearing_uses_the_predicting_model_residuals(self, comparison, penguins):
        pred, _ = predict_groups(comparison, X_NEW, NEW["species"], model="group",
                                 correction="smearing")
        ref = smf.ols("lm ~ lf + lb", penguins[penguins["species"] == "Gentoo"]).fit()
        # Duan 1983 (JASA 78:605): the mean of base^residual of the fit that predicts
        smear = np.mean(10 ** ref.resid)
        assert_allclose(pred.y[1], smear * 10 ** pred.log_fit[1], rtol=1e-10)
        common, _ = predict_groups(comparison, X_NEW, NEW["species"], model="common",
                                   correction="smearing")
        par = smf.ols("lm ~ C(species) + lf + lb", penguins).fit()
        assert_allclose(common.y, np.mean(10 ** par.resid) * 10 ** common.log_fit, rtol=1e-10)

    def test_unknown_group_is_an_error_that_names_it(self, comparison):
        with pytest.raises(DataError, match="'Emperor'"):
            predict_groups(comparison, X_NEW, ["Emperor"] * 5, model="group")


class TestPredictTotalGroups:
    @pytest.mark.parametrize("model", ["group", "common"])
    def test_total_is_the_sum_of_the_rows(self, comparison, model):
        pred, _ = predict_groups(comparison, X_NEW, NEW["species"], model=model)
        total = predict_total_groups(comparison, X_NEW, NEW["species"], model=model)
        # exact law: the total of the bias-corrected predictions is their sum
        assert_allclose(total.total, pred.y.sum(), rtol=1e-12)
        assert total.low < total.total < total.high
        assert total.n_new == 5

    def test_separate_groups_add_their_variances(self, comparison):
        total = predict_total_groups(comparison, X_NEW, NEW["species"], model="group")
        parts = [predict_total_groups(comparison, {k: v[NEW["species"] == g]
                                                   for k, v in X_NEW.items()},
                                      NEW["species"][NEW["species"] == g], model="group")
                 for g in ("Adelie", "Chinstrap", "Gentoo")]
        # exact law: fits to disjoint rows are independent, so their variances add
        assert_allclose(total.se ** 2, sum(p.se ** 2 for p in parts), rtol=1e-10)


class TestGroupedRunPredictions:
    """A run with data.group and a prediction table: which line predicts each row."""

    def _run(self, penguins, tmp_path, with_group: bool):
        import scaling
        from scaling.io.config import config_from_dict
        path = tmp_path / "penguins.csv"
        penguins.to_csv(path, index=False)
        new = NEW if with_group else NEW.drop(columns=["species"])
        new_path = tmp_path / "new.csv"
        new.to_csv(new_path, index=False)
        raw = {"data": {"file": str(path), "x": ["flipper_length_mm", "bill_length_mm"],
                        "y": "body_mass_g", "group": "species"},
               "model": {"methods": ["ols"]}, "exponents": {"isometry": [3, 3]},
               "prediction": {"from": str(new_path), "total": True}}
        return scaling.run_config(config_from_dict(raw), write=False, quiet=True)

    def test_groups_at_different_elevations_predict_from_the_common_model(
            self, penguins, comparison, tmp_path):
        # the penguin species share exponents (interaction p > 0.05) but not the elevation
        assert comparison.slopes_equal[3] > 0.05 and comparison.intercepts_equal[3] < 0.05
        res = self._run(penguins, tmp_path, with_group=True)
        table = res.tables["predictions"]
        assert set(table["scope"]) == {"common"}
        ref = smf.ols("lm ~ C(species) + lf + lb", penguins).fit()   # statsmodels, dummies
        frame = ref.get_prediction(_new_logs()).summary_frame(alpha=0.05)
        smear = np.mean(10 ** ref.resid)   # Duan 1983 (JASA 78:605) on the dummies model
        assert_allclose(table["y"], smear * 10 ** frame["mean"].to_numpy(), rtol=1e-8)
        # prediction bounds are quantiles of one new tree: not multiplied by the factor
        assert_allclose(table["y_low"], 10 ** frame["obs_ci_lower"].to_numpy(), rtol=1e-8)
        assert "each from the common exponents at the elevation of its species" in " ".join(
            res.messages)

    def test_without_a_group_column_one_note_says_the_pooled_fit_mixes_groups(
            self, penguins, tmp_path):
        res = self._run(penguins, tmp_path, with_group=False)
        assert "scope" not in res.tables["predictions"].columns
        said = [w for w in res.warnings if "pooled fit, which mixes" in w]
        assert len(said) == 1 and "species column" in said[0]

    def test_a_group_without_a_fit_is_an_error_naming_the_file(self, penguins, tmp_path):
        import scaling
        from scaling.io.config import config_from_dict
        path = tmp_path / "penguins.csv"
        penguins.to_csv(path, index=False)
        new_path = tmp_path / "new.csv"
        NEW.assign(species=["Adelie", "Emperor", "Gentoo", "Adelie", "Gentoo"]).to_csv(
            new_path, index=False)
        raw = {"data": {"file": str(path), "x": ["flipper_length_mm", "bill_length_mm"],
                        "y": "body_mass_g", "group": "species"},
               "model": {"methods": ["ols"]}, "prediction": {"from": str(new_path)}}
        with pytest.raises(DataError, match=r"new\.csv: group 'Emperor'"):
            scaling.run_config(config_from_dict(raw), write=False, quiet=True)
