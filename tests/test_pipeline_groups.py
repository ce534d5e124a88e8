"""The group stage of a run: many groups, exact data, groups left out of the means line.

Invented tables with a known truth (simulation use only).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from scaling.io.config import config_from_dict
from scaling.run.pipeline import analyse


def _config(tmp_path, table: pd.DataFrame, **sections):
    path = tmp_path / "groups.csv"
    table.to_csv(path, index=False)
    raw = {"data": {"file": str(path), "x": "mass", "y": "rate", "group": "taxon"},
           "output": {"dir": str(tmp_path / "out")}}
    raw.update(sections)
    return config_from_dict(raw, base_dir=tmp_path)


def _many_groups(G: int, per: int, seed: int = 3) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    g = np.repeat(np.arange(G), per)
    lx = rng.uniform(0.5, 3.0, G)[g] + 0.4 * rng.standard_normal(g.size)
    ly = rng.normal(0.5, 0.2, G)[g] + 0.75 * lx + rng.normal(0, 0.05, g.size)
    return pd.DataFrame({"taxon": [f"g{k:03d}" for k in g], "mass": 10 ** lx,
                         "rate": 10 ** ly})


class TestAnalyseManyGroups:
    def test_pairwise_skipped_and_no_pair_table(self, tmp_path):
        G = 40
        cfg = _config(tmp_path, _many_groups(G, 6), diagnostics={"enabled": False})
        res = analyse(cfg)
        # known truth: elevations differ among groups (sd 0.2 against noise 0.05)
        tests = res.tables["group_tests"]
        assert set(tests["method"]) == {"ols", "sma", "ma"} and len(tests) == 9
        # (p <= 0.001: the parametric bootstrap floor with B = 999)
        assert (tests.query("test == 'intercepts_equal'")["p_value"] <= 0.001).all()
        # no G x G table: pairwise tests are skipped above groups.pairwise_max (default 20)
        assert len(res.tables["pairwise_tests"]) == 0
        text = " ".join(res.messages)
        assert f"Pairwise comparisons skipped: {G} groups exceed groups.pairwise_max = 20" \
            in text
        assert any(f"pairwise comparisons skipped: {G} groups exceed groups.pairwise_max = 20"
                   in w for w in res.warnings)
        assert len(res.tables["group_means"]) == G
        assert (res.fits["scope"] == "group").sum() == 3 * G

    def test_pairwise_max_from_config(self, tmp_path):
        cfg = _config(tmp_path, _many_groups(6, 6), groups={"pairwise_max": 5},
                      model={"methods": ["ols"]}, diagnostics={"enabled": False})
        res = analyse(cfg)
        assert len(res.tables["pairwise_tests"]) == 0
        assert "exceed groups.pairwise_max = 5" in " ".join(res.messages)
        cfg = _config(tmp_path, _many_groups(6, 6), groups={"pairwise_max": 6},
                      model={"methods": ["ols"]}, diagnostics={"enabled": False})
        assert len(analyse(cfg).tables["pairwise_tests"]) > 0


class TestCalibrationFromConfig:
    """``groups.calibration`` reaches the SMA/MA group tests and the common-slope rows."""

    def test_chi2_gives_chi_square_p_values_and_the_common_rows_follow(self, tmp_path):
        from scipy import stats
        cfg = _config(tmp_path, _many_groups(4, 8), groups={"calibration": "chi2"},
                      diagnostics={"enabled": False})
        res = analyse(cfg)
        tests = res.tables["group_tests"]
        sym = tests[tests["method"].isin(["sma", "ma"])]
        assert set(sym["p_method"]) == {"chi2"}
        # reference: scipy.stats chi-square survival function of the reported statistic
        assert_allclose(sym["p_value"], stats.chi2.sf(sym["statistic"], sym["df"]),
                        rtol=1e-12, atol=1e-300)
        fits = res.fits
        for method in ("sma", "ma"):
            row = fits[(fits["scope"] == "common") & (fits["method"] == method)].iloc[0]
            test = sym[sym["method"] == method].iloc[0]
            # internal consistency: fits.csv's common row is the group test's common slope
            assert row["slope_low"] == pytest.approx(test["common_slope_low"], rel=1e-12)

    def test_bootstrap_even_for_large_groups_and_auto_not(self, tmp_path):
        table = _many_groups(3, 120)   # every group above the auto threshold of 100 points
        auto = analyse(_config(tmp_path, table, diagnostics={"enabled": False}))
        boot = analyse(_config(tmp_path, table, groups={"calibration": "bootstrap"},
                               diagnostics={"enabled": False}))
        methods = auto.tables["group_tests"].set_index(["method", "test"])["p_method"]
        assert methods.loc["sma"].eq("chi2").all()
        b = boot.tables["group_tests"].set_index(["method", "test"])
        assert b.loc["sma", "p_method"].eq("parametric_bootstrap(999)").all()
        # exact law of the bootstrap p-value (k + 1) / (B + 1) with B = 999: a multiple of 1/1000
        k = b.loc["sma", "p_value"].to_numpy() * 1000
        assert_allclose(k, np.round(k), atol=1e-9)

    def test_mistyped_value_names_the_key(self, tmp_path):
        from scaling.errors import ConfigError
        with pytest.raises(ConfigError, match="groups.calibration"):
            _config(tmp_path, _many_groups(3, 5), groups={"calibration": "bootsrap"})


class TestAnalyseExactAndOnePointGroups:
    def test_exact_power_law_with_groups_runs(self, tmp_path):
        rng = np.random.default_rng(3)
        x = rng.uniform(1, 1000, 20)
        table = pd.DataFrame({"taxon": np.repeat(["a", "b"], 10), "mass": x,
                              "rate": 3 * x ** 0.75})
        res = analyse(_config(tmp_path, table))   # raised ZeroDivisionError before
        tests = res.tables["group_tests"]
        assert not np.isinf(tests["statistic"]).any()
        # exact law: y = 3 x^0.75, so every common slope is 0.75
        assert_allclose(tests["common_slope"], 0.75, rtol=1e-12)
        assert "no residual scatter: an exact power law" in " ".join(res.messages)

    def test_means_line_leaves_out_one_point_group(self, tmp_path):
        table = _many_groups(5, 8)
        table = pd.concat([table, pd.DataFrame({"taxon": ["solo"], "mass": [30.0],
                                                "rate": [40.0]})], ignore_index=True)
        res = analyse(_config(tmp_path, table, diagnostics={"enabled": False}))
        means = res.fits[res.fits["scope"] == "group_means"]
        assert (means["n"] == 5).all()   # the five compared groups, not six
        assert means["note"].str.contains("solo \\(n = 1 < 3\\)").all()
        assert "solo (n = 1 < 3)" in " ".join(res.messages)   # left out of comparisons too
        assert len(res.tables["group_means"]) == 6   # the means table lists every group


def _forest(seed: int = 11) -> pd.DataFrame:
    """Stem diameter (mm) and dry biomass (g) of trees in four habitats (invented, known
    truth: biomass = 0.05 D^2.4, habitats at different elevations, log10 SD 0.08)."""
    rng = np.random.default_rng(seed)
    habitat = np.repeat(["edge", "gap", "shade", "sun"], 15)
    d = 10 ** rng.uniform(np.log10(5), np.log10(60), habitat.size)
    shift = pd.Series(habitat).map({"edge": 0.0, "gap": 0.12, "shade": 0.1, "sun": -0.05})
    log_b = (np.log10(0.05) + 2.4 * np.log10(d) + shift.to_numpy()
             + rng.normal(0, 0.08, habitat.size))
    return pd.DataFrame({"stem_mm": d, "biomass_g": 10 ** log_b, "habitat": habitat})


class TestChecksFollowTheAnswer:
    def _run(self, tmp_path, table, methods=("ols",)):
        path = tmp_path / "trees.csv"
        table.to_csv(path, index=False)
        cfg = config_from_dict({"data": {"file": str(path), "x": "stem_mm", "y": "biomass_g",
                                         "group": "habitat"},
                                "model": {"methods": list(methods)},
                                "exponents": {"square": 2, "truth": 2.4},
                                "diagnostics": {"error_structure": False},
                                "output": {"dir": str(tmp_path / "out")}}, base_dir=tmp_path)
        return analyse(cfg)

    def test_a_planted_typo_is_named_in_the_answer(self, tmp_path):
        from scaling.render.answer import headline_of

        table = _forest()
        i = table.loc[table["habitat"] == "shade", "stem_mm"].idxmax()
        table.loc[i, "stem_mm"] /= 10          # a value in cm among mm
        res = self._run(tmp_path, table)
        head = headline_of(res)
        assert head.line == "common"
        said = head.sentences[-1]
        # dropped_rows.csv numbering: row 1 is the first line after the header
        assert said.startswith(f"Row {i + 1} (stem_mm {table.loc[i, 'stem_mm']:.3g}, "
                               "habitat shade) moves this exponent from ")
        assert said.endswith(": check it first.")
        moved = res.tables["points_to_check"].query("kind == 'moves_answer'")
        assert moved["row"].tolist() == [i + 1] and moved["scope"].tolist() == ["common"]
        text = " ".join(res.messages)
        assert "common in clean data" not in text.split("Influence:")[1].split("\n")[0]

    def test_clean_data_name_no_row_and_checks_read_the_common_model(self, tmp_path):
        from scaling.render.answer import headline_of

        res = self._run(tmp_path, _forest())
        assert len(headline_of(res).sentences) == 3
        diag = res.tables["diagnostics"]
        # the answer's model (scope common) is checked beside the pooled line
        assert set(diag.loc[diag["scope"] == "common", "check"]) == {
            "normality", "constant_variance", "curvature", "influence"}
        assert {"pooled", "group"} <= set(diag["scope"])
        assert "common" in set(res.tables["curvature"]["scope"])
        text = "\n".join(res.messages)
        assert "Power law within habitats (common OLS slope" in text
        assert "Residuals of the common within-habitat OLS model" in text


class TestExactLawRun:
    def test_a_run_on_an_exact_law_writes_no_scatter_and_no_runtime_warning(self, tmp_path):
        import warnings
        x = np.array([1.0, 2, 5, 10, 30, 100, 400, 3, 7, 50, 200, 20])
        table = pd.DataFrame({"taxon": np.repeat(["Dunefoot", "Saltmarsh", "Ridge"], 4),
                              "mass": x, "rate": 3 * x ** 0.75})
        cfg = _config(tmp_path, table, model={"methods": ["ols", "sma", "ma"]},
                      figures={"formats": []})
        with warnings.catch_warnings():
            warnings.simplefilter("error", RuntimeWarning)
            res = analyse(cfg)
        fits = res.fits[res.fits["scope"].isin(["pooled", "group", "group_means"])]
        assert (fits["resid_sd"] == 0).all()   # exact law: y = 3 x^0.75
        assert_allclose(fits["slope"], 0.75, rtol=1e-12)   # exact law


class TestGroupMeansPointsNamed:
    def test_influential_group_means_are_named_by_group(self, tmp_path):
        # Five groups whose means lie near one line but one far out along x and off
        # it (a strong pull on the means line, Cook's distance > 4/n by construction).
        rng = np.random.default_rng(7)
        names = ["Dunefoot", "Saltmarsh", "Ridge", "Hollow", "Canopy"]
        centre = {"Dunefoot": 1.0, "Saltmarsh": 1.2, "Ridge": 1.4, "Hollow": 1.6,
                  "Canopy": 4.0}
        lift = {"Canopy": 1.0}
        rows = []
        for g in names:
            lx = centre[g] + 0.1 * rng.standard_normal(6)
            ly = 0.75 * lx + lift.get(g, 0.0) + 0.02 * rng.standard_normal(6)
            rows.append(pd.DataFrame({"taxon": g, "mass": 10 ** lx, "rate": 10 ** ly}))
        cfg = _config(tmp_path, pd.concat(rows, ignore_index=True),
                      model={"methods": ["ols"]}, figures={"formats": []})
        res = analyse(cfg)
        diag = res.tables["diagnostics"]
        verdict = diag[(diag["scope"] == "group_means") & (diag["check"] == "influence")]
        text = " ".join(verdict["verdict"])
        assert "group Canopy" in text and "row " not in text
        infl = res.tables["influential_rows"]
        assert "Canopy" in set(infl.loc[infl["scope"] == "group_means", "label"])
