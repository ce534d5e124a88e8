"""Saved fits: `scaling predict` and `scaling.load_results` reproduce the run."""
from __future__ import annotations

import math

import pandas as pd
import pytest
from numpy.testing import assert_allclose

import scaling
from scaling.cli import main



@pytest.fixture
def demo_out(demo_run_shared):
    # The session's one demo run (tests/conftest.py): read only, never written into.
    assert demo_run_shared.code == 0
    return demo_run_shared.out


@pytest.fixture(scope="module")
def nogroup_out(tmp_path_factory):
    import numpy as np
    folder = tmp_path_factory.mktemp("nogroup")
    rng = np.random.default_rng(3)
    x = 10 ** rng.uniform(0, 2, 25)
    y = 2 * x ** 0.7 * 10 ** rng.normal(0, 0.05, 25)
    pd.DataFrame({"m": x, "r": y}).to_csv(folder / "d.csv", index=False)
    (folder / "c.yaml").write_text("data: {file: d.csv, x: m, y: r}\nprediction: {x: [3]}\n")
    assert main(["run", str(folder / "c.yaml"), "--out", str(folder / "out"), "--quiet"]) == 0
    return folder / "out"


class TestPredictCommand:
    def test_same_numbers_as_run(self, demo_out, tmp_path, monkeypatch, capsys):
        # Internal consistency: the run's predictions.csv against predicting later from the
        # saved fits must reproduce it exactly (same formulas, saved factors).
        # The run predicts from OLS only (prediction.methods not set).
        run = pd.read_csv(demo_out / "predictions.csv")
        assert set(run["method"]) == {"ols"}
        monkeypatch.chdir(tmp_path)
        for method in ("ols",):
            xs = run.loc[(run["scope"] == "pooled") & (run["method"] == method), "x"]
            code = main(["predict", str(demo_out), "--x", *map(str, xs), "--method", method,
                         "--out", f"p_{method}.csv"])
            assert code == 0
            new = pd.read_csv(tmp_path / f"p_{method}.csv")
            ref = run[(run["scope"] == "pooled") & (run["method"] == method)]
            assert_allclose(new["y"], ref["y"], rtol=1e-12)
            assert_allclose(new["y_low"], ref["y_low"], rtol=1e-12)
            assert_allclose(new["y_high"], ref["y_high"], rtol=1e-12)
        printed = capsys.readouterr().out
        assert "wrote p_ols.csv" in printed
        assert "an allometric fit is not a dose" in printed and "median" in printed

    def test_group_and_from_file(self, demo_out, tmp_path, monkeypatch):
        run = pd.read_csv(demo_out / "predictions.csv")
        ref = run[(run["group"] == "Canopy") & (run["method"] == "ols")]
        (tmp_path / "new.csv").write_text("body_mass\n" + "\n".join(map(str, ref["x"])) + "\n")
        monkeypatch.chdir(tmp_path)
        assert main(["predict", str(demo_out), "--from", "new.csv", "--group", "Canopy"]) == 0
        new = pd.read_csv(tmp_path / "predictions.csv")
        assert_allclose(new["y"], ref["y"], rtol=1e-12)  # internal consistency: the run itself

    def test_from_file_carries_ids_and_names_columns(self, demo_out, tmp_path, monkeypatch):
        (tmp_path / "new.csv").write_text("species,body_mass,site\nA,40,north\nB,2e5,south\n")
        monkeypatch.chdir(tmp_path)
        assert main(["predict", str(demo_out), "--from", "new.csv"]) == 0
        new = pd.read_csv(tmp_path / "predictions.csv")
        assert list(new.columns[:2]) == ["species", "site"]
        assert list(new["species"]) == ["A", "B"]
        assert_allclose(new["body_mass"], new["x"], rtol=0)        # named copy
        assert_allclose(new["resting_rate"], new["y"], rtol=0)
        fits = pd.read_csv(demo_out / "fits.csv")
        hi = fits.loc[(fits["scope"] == "pooled") & (fits["method"] == "ols"), "x_max"].iloc[0]
        # definition of range_ratio: 1 inside, x / x_max above the fitted range
        assert_allclose(new["range_ratio"], [1.0, 2e5 / hi], rtol=1e-6)

    def test_inverse_round_trip(self, demo_out):
        saved = scaling.load_results(demo_out)
        fwd = saved.predict([40.0], method="sma", correction="none")
        back = saved.predict(fwd["y"].to_numpy(), method="sma", inverse=True)
        # exact law: SMA inverse prediction solves the same line for x
        assert_allclose(back["x"], [40.0], rtol=1e-10)

    def test_refuses_group_without_groups(self, nogroup_out, capsys):
        code = main(["predict", str(nogroup_out), "--x", "5", "--group", "a"])
        err = capsys.readouterr().err
        assert code == 2 and "fitted without groups" in err

    def test_unknown_group_suggests(self, demo_out, capsys):
        code = main(["predict", str(demo_out), "--x", "5", "--group", "Canopi"])
        assert code == 2 and "did you mean 'Canopy'" in capsys.readouterr().err

    @pytest.mark.parametrize("value, pattern", [("-3", "not a positive number"),
                                                ("0", "not a positive number"),
                                                ("abc", "'abc' is not a number")])
    def test_bad_x(self, demo_out, capsys, value, pattern):
        code = main(["predict", str(demo_out), "--x", value])
        err = capsys.readouterr().err
        assert code == 2 and pattern in err and err.startswith("error: --x")

    def test_bad_method(self, demo_out, capsys):
        code = main(["predict", str(demo_out), "--x", "5", "--method", "smaa"])
        assert code == 2 and "did you mean 'sma'" in capsys.readouterr().err

    def test_refuses_overwrite(self, demo_out, tmp_path, capsys):
        out = tmp_path / "p.csv"
        out.write_text("mine")
        code = main(["predict", str(demo_out), "--x", "5", "--out", str(out)])
        assert code == 2 and "--force" in capsys.readouterr().err
        assert out.read_text() == "mine"

    def test_not_a_results_folder(self, tmp_path, capsys):
        code = main(["predict", str(tmp_path), "--x", "5"])
        assert code == 2 and "no results.json" in capsys.readouterr().err

    def test_extrapolation_warned(self, demo_out, tmp_path, capsys):
        code = main(["predict", str(demo_out), "--x", "1e7", "--out", str(tmp_path / "p.csv")])
        out = capsys.readouterr().out
        assert code == 0 and "outside the fitted range" in out
        assert pd.read_csv(tmp_path / "p.csv")["extrapolated"].all()


@pytest.fixture(scope="module")
def forestry_out(tmp_path_factory):
    """The forestry example (two predictors: diameter and height; invented data whose
    truth demo_data/make_forestry.py states), run once for these tests."""
    from conftest import ROOT
    out = tmp_path_factory.mktemp("forestry") / "out"
    assert main(["run", str(ROOT / "configs" / "forestry.yaml"), "--out", str(out),
                 "--quiet"]) == 0
    return out


class TestSeveralPredictors:
    def test_predict_from_file_reproduces_the_runs_predictions(self, forestry_out, tmp_path,
                                                               monkeypatch, capsys):
        # internal consistency: the same saved coefficients, covariance and smearing
        # factor give the run's predictions.csv byte for byte (IDs first, flags included)
        from conftest import ROOT
        monkeypatch.chdir(tmp_path)
        plot = ROOT / "demo_data" / "forest_plot.csv"
        assert main(["predict", str(forestry_out), "--from", str(plot), "--out", "p.csv"]) == 0
        assert (tmp_path / "p.csv").read_bytes() == (forestry_out / "predictions.csv").read_bytes()
        # the units the run fitted in (model.units.y: t), said once under the table
        assert "Units: diameter_cm in cm, height_m in m; y (biomass_kg) in t." in \
            capsys.readouterr().out

    def test_python_api_names_the_predictors(self, forestry_out):
        saved = scaling.load_results(forestry_out)
        assert saved.predictors == ("diameter_cm", "height_m")
        frame = saved.predict({"diameter_cm": [30.0], "height_m": [25.0]})
        # exact law of the fitted model: y = smearing factor x 10^(a + b1 log D + b2 log H)
        fit = saved.fit()
        expected = fit.factors["smearing"] * 10 ** (
            fit.intercept + fit.slopes[0] * math.log10(30.0) + fit.slopes[1] * math.log10(25.0))
        assert_allclose(frame["y"], [expected], rtol=1e-12)

    def test_one_value_or_an_inverse_is_refused_with_the_predictor_names(self, forestry_out,
                                                                         capsys):
        assert main(["predict", str(forestry_out), "--x", "30"]) == 2
        err = capsys.readouterr().err
        assert err.startswith("error: --x: the run in ") and "2 predictors (diameter_cm, " \
            "height_m); give their values as columns of a CSV with --from" in err
        assert main(["predict", str(forestry_out), "--x", "0.5", "--inverse"]) == 2
        assert "it estimates y only" in capsys.readouterr().err

    def test_missing_predictor_column_names_the_file_and_column(self, forestry_out, tmp_path,
                                                                capsys):
        (tmp_path / "new.csv").write_text("tree,diameter_cm\nA,30\n")
        assert main(["predict", str(forestry_out), "--from", str(tmp_path / "new.csv"),
                     "--out", str(tmp_path / "p.csv")]) == 2
        err = capsys.readouterr().err.strip()
        assert err.startswith(f"error: {tmp_path / 'new.csv'}: no column 'height_m'")
        assert not (tmp_path / "p.csv").exists()

    def test_a_fit_read_back_predicts_but_refuses_a_total(self, forestry_out):
        from scaling.errors import DataError
        fit = scaling.load_results(forestry_out).fit()
        with pytest.raises(DataError, match="without its residuals"):
            fit.predict_total({"diameter_cm": [30.0], "height_m": [25.0]})
