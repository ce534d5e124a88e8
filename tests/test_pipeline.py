"""Tests of scaling.run.pipeline: analyse() and the run's stages.

Fits with notes still reach the slope tests; the later stages (diagnostics,
robust and Deming lines, bootstrap, permutations) report.  Runs of the demo
(configs/demo.yaml) are smoke tests: they check files, columns and that every
stage reports, and compare the run with the library called directly (internal
consistency) or with a reference library on the same points.  Verdicts and
p-values are checked on seeded simulations with a known truth.
"""
from __future__ import annotations

import json
import warnings

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from scipy import stats

from scaling.io.config import config_from_dict, load_config
from scaling.io.tables import load_data
from scaling.errors import DegenerateDataWarning
from scaling.stats.line_results import fit_line
from scaling.stats.schema import BOTH_SIGNS_NOTE, EXACT_NOTE
from scaling.run.pipeline import (BOOTSTRAP_COLUMNS, CURVATURE_COLUMNS, DIAGNOSTIC_COLUMNS,
                              ERROR_STRUCTURE_COLUMNS, INFLUENCE_COLUMNS, analyse)
from scaling.stats.resampling import bootstrap_lines
from scaling.stats.robust import deming, sma_robust

from conftest import DEMO_CONFIG


def _run(tmp_path, x, y, methods=("ols", "sma", "ma")):
    path = tmp_path / "d.csv"
    pd.DataFrame({"mass": x, "rate": y}).to_csv(path, index=False)
    raw = {"data": {"file": str(path), "x": "mass", "y": "rate"},
           "model": {"methods": list(methods)}, "diagnostics": {"enabled": False},
           "exponents": {"three_quarters": "3/4"}}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return analyse(config_from_dict(raw))


class TestAnalyse:
    def test_exact_power_law_tested_without_false_verdict(self, tmp_path):
        x = np.linspace(1.0, 50.0, 12)
        res = _run(tmp_path, x, 3.0 * x ** 0.75)
        tests = res.slope_tests
        # exact law: y = 3 x^0.75 has slope 0.75 exactly: p = 1 for every method
        assert len(tests) == 3 and np.all(tests["p_value"] == 1.0)
        assert set(res.fits["note"]) == {EXACT_NOTE}
        assert any("equals 0.75" in m for m in res.messages)

    def test_sma_of_either_sign_keeps_its_fit(self, tmp_path):
        rng = np.random.default_rng(3)
        X = rng.normal(0.0, 0.3, 8)
        Y = 0.1 * X + rng.normal(0.0, 0.3, 8)
        res = _run(tmp_path, 10 ** X, 10 ** Y, methods=("sma",))
        note = res.fits["note"].iloc[0]
        assert note.startswith(BOTH_SIGNS_NOTE)
        # the estimable fit is tested (before: a note dropped it from the tests)
        assert len(res.slope_tests) == 1
        assert 0.0 <= res.slope_tests["p_value"].iloc[0] <= 1.0


# --------------------------------------------------------------------------
# the run's later stages

N_BOOT, N_PERM, SEED = 1999, 999, 1       # configs/demo.yaml resampling section
DEMO_LAMBDA = 0.0021 / 0.000125           # configs/demo.yaml model.error_variances, y / x


@pytest.fixture
def demo(demo_run_shared):
    # The session's one demo run (tests/conftest.py): read only, never written into.
    assert demo_run_shared.code == 0
    return demo_run_shared.out


@pytest.fixture(scope="module")
def demo_points():
    cfg = load_config(DEMO_CONFIG)
    return cfg, load_data(cfg.data, log_base=10).points


@pytest.fixture(scope="module")
def extended(demo_points):
    """The demo with every kind of method (resampling off: robust lines use 999 resamples)."""
    import dataclasses
    cfg, _ = demo_points
    quick = dataclasses.replace(cfg, resampling=dataclasses.replace(
        cfg.resampling, bootstrap=0, permutations=0))
    classic = dataclasses.replace(quick, model=dataclasses.replace(
        quick.model, methods=("ols", "sma", "ma")))
    wide = dataclasses.replace(quick, model=dataclasses.replace(
        quick.model, methods=("ols", "theil_sen", "sma", "deming", "ma", "sma_robust")))
    return analyse(classic), analyse(wide)


def _read(path) -> pd.DataFrame:
    """A CSV of the run with blank group/label cells as "" (numbers stay numbers)."""
    frame = pd.read_csv(path)
    for col in ("group", "label"):
        if col in frame:
            frame[col] = frame[col].fillna("").astype(str)
    return frame


def _sma(x, y, axis=-1):
    # SMA slope written out for scipy.stats.bootstrap (independent of scaling's code).
    xc = x - x.mean(axis=axis, keepdims=True)
    yc = y - y.mean(axis=axis, keepdims=True)
    return np.sign(np.sum(xc * yc, axis=axis)) * np.sqrt(
        np.sum(yc * yc, axis=axis) / np.sum(xc * xc, axis=axis))


class TestRunFiles:
    def test_new_files_and_columns(self, demo):
        assert list(pd.read_csv(demo / "diagnostics.csv").columns) == DIAGNOSTIC_COLUMNS
        assert list(pd.read_csv(demo / "influential_rows.csv").columns) == INFLUENCE_COLUMNS
        assert list(pd.read_csv(demo / "error_structure.csv").columns) == \
            ERROR_STRUCTURE_COLUMNS
        assert list(pd.read_csv(demo / "curvature.csv").columns) == CURVATURE_COLUMNS
        assert list(pd.read_csv(demo / "bootstrap.csv").columns) == BOOTSTRAP_COLUMNS
        tests = pd.read_csv(demo / "slope_tests.csv")
        assert {"p_permutation", "n_perm", "statistic_type"} <= set(tests.columns)
        assert set(tests["n_perm"]) == {N_PERM}
        fits = pd.read_csv(demo / "fits.csv")
        assert {"interval_method", "deming_lambda"} <= set(fits.columns)

    def test_diagnostics_cover_every_fit(self, demo):
        diag = _read(demo / "diagnostics.csv")
        fits = _read(demo / "fits.csv")
        # the common slope is checked (parallel-lines model) for the answer's method only
        fits = fits[(fits["scope"] != "common") | (fits["method"] == "sma")]
        keys = {tuple(k) for k in fits[["scope", "group", "method"]].to_numpy()}
        assert {tuple(k) for k in diag[["scope", "group", "method"]].to_numpy()} == keys
        assert set(diag["check"]) == {"normality", "constant_variance", "curvature", "influence"}

    def test_curvature_against_statsmodels(self, demo, demo_points):
        # Reference library: statsmodels OLS of log y on (1, log x, log x^2); the
        # quadratic term's two-sided p-value (Kolokotrones et al. 2010 curvature test).
        import statsmodels.api as sm
        _, pts = demo_points
        X, Y = pts["log_x"].to_numpy(), pts["log_y"].to_numpy()
        ref = sm.OLS(Y, np.column_stack([np.ones_like(X), X, X * X])).fit()
        diag = _read(demo / "diagnostics.csv")
        row = diag[(diag["scope"] == "pooled") & (diag["method"] == "ols")
                   & (diag["check"] == "curvature")].iloc[0]
        assert_allclose(row["p_value"], ref.pvalues[2], rtol=1e-8)
        assert_allclose(row["estimate"], ref.params[2], rtol=1e-8)

    def test_influential_rows_against_statsmodels(self, demo, demo_points):
        # Reference library: statsmodels OLSInfluence Cook's distances, rule D > 4/n.
        import statsmodels.api as sm
        from statsmodels.stats.outliers_influence import OLSInfluence
        _, pts = demo_points
        X, Y = pts["log_x"].to_numpy(), pts["log_y"].to_numpy()
        cooks = OLSInfluence(sm.OLS(Y, sm.add_constant(X)).fit()).cooks_distance[0]
        expected = set(pts["row"].to_numpy()[cooks > 4 / len(X)].tolist())
        infl = _read(demo / "influential_rows.csv")
        got = infl[(infl["scope"] == "pooled") & (infl["method"] == "ols")]
        assert set(got["row"].astype(int)) == expected and expected

    def test_error_structure(self, demo, demo_points):
        _, pts = demo_points
        es = _read(demo / "error_structure.csv")
        pooled = es[es["scope"] == "pooled"].set_index("model")
        # Exact law: the multiplicative model is OLS on logs, whose slope does not depend
        # on the base of the logs, so it equals the pooled OLS exponent on log10 scales.
        ols = fit_line(pts["x"], pts["y"], method="ols")
        assert_allclose(pooled.loc["multiplicative", "b"], ols.slope, rtol=1e-10)
        # Exact law: delta_aicc = AICc(additive) - AICc(multiplicative).
        assert_allclose(pooled.loc["additive", "delta_aicc"],
                        pooled.loc["additive", "aicc"] - pooled.loc["multiplicative", "aicc"],
                        rtol=1e-12)
        assert set(es["group"]) == {"", "Burrower", "Canopy", "Dunefoot", "Marshrunner",
                                    "Ridgeback"}

    def test_verdicts_in_results_json(self, demo):
        doc = json.loads((demo / "results.json").read_text())
        text = "\n".join(doc["messages"])
        for start in ("Power law within clades (common SMA slope",
                      "Residuals of the common within-clade SMA model", "Influence: ",
                      "Error structure: ", "Line method: ", "Bootstrap (", "Permutation tests ("):
            assert any(m.lstrip().startswith(start) for m in doc["messages"]), start
        # Smoke test on the demo: every verdict is there (their content is checked
        # on simulations with a known truth in TestVerdictsOnSimulations).
        assert "Group comparisons are available for OLS, SMA and MA; none was made for " \
               "Deming." in text

    def test_manifest_records_resampling(self, demo):
        man = json.loads((demo / "results.json").read_text())["manifest"]
        rs = man["resampling"]
        assert (rs["bootstrap"], rs["interval"], rs["permutations"], rs["seed"]) == \
            (N_BOOT, "bca", N_PERM, SEED)
        assert rs["stratified_by_group"] is True
        assert_allclose(man["deming_lambda"], DEMO_LAMBDA, rtol=1e-12)  # exact law: y / x

    def test_predict_from_saved_robust_fit(self, extended):
        # Internal consistency: predict() on the LineFit itself (the saved dict must rebuild it).
        from scaling.stats.predictions import predict
        from scaling.run.saved_predictions import predict_from_dict
        _, wide = extended
        saved = wide.saved_fits[("pooled", "", "sma_robust")]
        fit = wide.line_fits[("pooled", "", "sma_robust")]
        got = predict_from_dict(saved, [10.0, 100.0], correction="parametric")
        ref = predict(fit, [10.0, 100.0], correction="parametric")
        assert_allclose(got.y_low, ref.y_low, rtol=1e-12)
        assert_allclose(got.y_high, ref.y_high, rtol=1e-12)


class TestBootstrapTable:
    def test_equals_bootstrap_lines_called_directly(self, demo, demo_points):
        # Internal consistency: our own core, resample.bootstrap_lines, with the run's seed and
        # settings (rows resampled within clades); the run must not alter the draws.
        cfg, pts = demo_points
        X, Y = pts["log_x"].to_numpy(), pts["log_y"].to_numpy()
        res = bootstrap_lines(X, Y, methods=("ols", "sma", "ma", "deming"),
                              groups=pts["group"].astype(str).to_numpy(), n_boot=N_BOOT,
                              confidence=0.95, lam=DEMO_LAMBDA, seed=SEED)
        table = _read(demo / "bootstrap.csv")
        assert set(table["interval"]) == {"bca"} and set(table["seed"]) == {SEED}
        checked = 0
        for item in res.intervals:
            group = "" if item.group is None else item.group
            row = table[(table["scope"] == item.scope) & (table["group"] == group)
                        & (table["method"] == item.method)
                        & (table["parameter"] == item.parameter)]
            assert len(row) == 1
            # CSV text round-trips doubles (repr), so equality to rounding
            assert_allclose([row["low"].iloc[0], row["high"].iloc[0]],
                            [item.bca.low, item.bca.high], rtol=1e-12)
            checked += 1
        assert checked == 6 * 4 * 2   # pooled + 5 clades, 4 methods, slope and intercept
        # Lines through the 5 clade means: the groups themselves are resampled.
        means = pts.groupby("group")[["log_x", "log_y"]].mean()
        with warnings.catch_warnings():   # a few resamples of 5 means repeat one group
            warnings.simplefilter("ignore", DegenerateDataWarning)
            gm = bootstrap_lines(means["log_x"].to_numpy(), means["log_y"].to_numpy(),
                                 methods=("sma",), n_boot=N_BOOT, lam=DEMO_LAMBDA, seed=SEED)
        row = table[(table["scope"] == "group_means") & (table["method"] == "sma")
                    & (table["parameter"] == "slope")].iloc[0]
        assert_allclose([row["low"], row["high"]], [gm.get("sma").bca.low,
                                                    gm.get("sma").bca.high], rtol=1e-12)

    def test_pooled_sma_equals_scipy_bootstrap(self, small_csv):
        # Reference library: scipy.stats.bootstrap(paired=True, method="BCa") draws the
        # same index matrix from the same seed (unstratified: no group in this config).
        raw = {"data": {"file": str(small_csv), "x": "mass", "y": "rate"},
               "model": {"methods": ["sma"]}, "diagnostics": {"enabled": False},
               "resampling": {"bootstrap": 999, "interval": "bca", "seed": 3}}
        result = analyse(config_from_dict(raw))
        pts = result.data.points
        X, Y = pts["log_x"].to_numpy(), pts["log_y"].to_numpy()
        ref = stats.bootstrap((X, Y), _sma, paired=True, vectorized=True, n_resamples=999,
                              method="BCa", rng=np.random.default_rng(3))
        row = result.tables["bootstrap"].query("parameter == 'slope'").iloc[0]
        assert_allclose([row["low"], row["high"]], [ref.confidence_interval.low,
                                                    ref.confidence_interval.high], rtol=1e-9)

    def test_percentile_interval_option(self, small_csv):
        # Internal consistency: resample.bootstrap_lines' percentile interval (our core).
        raw = {"data": {"file": str(small_csv), "x": "mass", "y": "rate"},
               "model": {"methods": ["ols"]}, "diagnostics": {"enabled": False},
               "resampling": {"bootstrap": 199, "interval": "percentile", "seed": 4}}
        result = analyse(config_from_dict(raw))
        pts = result.data.points
        ref = bootstrap_lines(pts["log_x"], pts["log_y"], methods=("ols",), n_boot=199,
                              seed=4).get("ols")
        row = result.tables["bootstrap"].query("parameter == 'slope'").iloc[0]
        assert row["interval"] == "percentile"
        assert_allclose([row["low"], row["high"]], [ref.percentile.low, ref.percentile.high],
                        rtol=1e-12)


def _simulated_run(folder, x, y, labels=None, **config):
    """run_config (no files) on invented points with a known truth."""
    from scaling.run.pipeline import run_config
    table = pd.DataFrame({"x": x, "y": y})
    data = {"file": str(folder / "sim.csv"), "x": "x", "y": "y"}
    if labels is not None:
        table["g"] = labels
        data["group"] = "g"
    table.to_csv(folder / "sim.csv", index=False)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return run_config({"data": data, **config}, write=False)


class TestVerdictsOnSimulations:
    """The plain-language verdicts, on seeded simulations whose truth is known."""

    def _curved(self, tmp_path, c):
        rng = np.random.default_rng(41)
        lx = rng.uniform(0, 3, 200)
        ly = 0.3 + 0.75 * lx + c * (lx - 1.5) ** 2 + rng.normal(0, 0.05, 200)
        return _simulated_run(tmp_path, 10 ** lx, 10 ** ly, model={"methods": ["ols"]})

    def test_curvature_flagged_when_the_law_bends(self, tmp_path):
        # Truth: quadratic term 0.1 in log10 x over 3 decades, sd 0.05, n = 200; its
        # standard error is about 0.05 / (0.67 sqrt(200)) = 0.005, so z is about 19 and
        # the test (Kolokotrones et al. 2010, Nature 464:753) flags it for any seed.
        text = "\n".join(self._curved(tmp_path, 0.1).messages)
        assert "Power law: NOT a straight line on log-log scales" in text

    def test_straight_law_not_flagged(self, tmp_path):
        # Truth: no curvature.  A level-0.05 test flags 5% of seeds; this seed is one
        # of the other 95% (size of the curvature test: test_diagnostics.py).
        text = "\n".join(self._curved(tmp_path, 0.0).messages)
        assert "Power law: no detectable curvature" in text

    def test_error_structure_verdict_follows_the_truth(self, tmp_path):
        # Xiao et al. 2011 (Ecology 92:1887): lognormal scatter favours the log-scale
        # fit, constant normal scatter the nonlinear one.  n = 200 over two decades
        # with scatter of 25% (multiplicative) or sd 3 on y from 11 to 356 (additive):
        # the AICc differences are in the hundreds, far from the |ΔAICc| < 2 band.
        rng = np.random.default_rng(43)
        x = 10 ** rng.uniform(1, 3, 200)
        mult = _simulated_run(tmp_path, x, 2 * x ** 0.75 * 10 ** rng.normal(0, 0.1, 200),
                              model={"methods": ["ols"]})
        assert any("multiplicative (lognormal) error is supported" in m for m in mult.messages)
        add = _simulated_run(tmp_path, x, 2 * x ** 0.75 + rng.normal(0, 3, 200),
                             model={"methods": ["ols"]})
        assert any(m.startswith("Error structure: additive (normal) error") for m in
                   add.messages)


class TestPermutationColumn:
    def test_agrees_with_t_tests_under_normal_errors(self, tmp_path):
        # Simulation with a known truth: normal errors on the log scale, where the t
        # tests (Warton et al. 2006) are exact, so permutation and t p-values estimate
        # the same thing.  Tolerance: 4 Monte Carlo SEs sqrt(p(1-p)/n_perm) plus the
        # floor 1/(n_perm+1) of a permutation p-value for the pooled line (n = 40); for
        # the group lines (n = 8) a further 0.05, because the permutation and t
        # reference distributions agree only asymptotically (common practice, no
        # source for the allowance).
        rng = np.random.default_rng(47)
        lx = rng.uniform(0, 2, 40)
        ly = 0.2 + 0.72 * lx + rng.normal(0, 0.1, 40)
        result = _simulated_run(tmp_path, 10 ** lx, 10 ** ly,
                                labels=np.repeat(list("abcde"), 8),
                                model={"methods": ["ols", "sma"]},
                                exponents={"three_quarters": 0.75, "two_thirds": 0.6667},
                                groups={"compare": False, "fit_group_means": False},
                                resampling={"permutations": N_PERM, "seed": SEED})
        tests = result.slope_tests
        t = tests[(tests["statistic_type"] == "t") & tests["scope"].isin(["pooled", "group"])]
        assert len(t) == 6 * 2 * 2
        p, pp = t["p_value"].to_numpy(float), t["p_permutation"].to_numpy(float)
        mc = 4 * np.sqrt(p * (1 - p) / N_PERM) + 1 / (N_PERM + 1)
        extra = np.where(t["scope"] == "pooled", 0.0, 0.05)
        assert np.all(np.abs(pp - p) <= mc + extra), np.abs(pp - p) - mc

    def test_every_slope_test_has_a_permutation_p_value(self, demo):
        # Smoke test on the demo run: robust lines included.
        tests = _read(demo / "slope_tests.csv")
        common = tests["scope"] == "common"      # no permutation test of the common slope
        assert tests.loc[~common, "p_permutation"].astype(float).notna().all()
        assert tests.loc[common, "p_permutation"].astype(float).isna().all()


class TestRobustAndDeming:
    def test_robust_rows_have_intervals(self, extended, demo_points):
        _, wide = extended
        fits = wide.fits
        for method, kind in (("sma_robust", "bootstrap_percentile"),
                             ("theil_sen", "kendall_slope_bootstrap_intercept")):
            rob = fits[fits["method"] == method]
            assert len(rob) == 7   # pooled, 5 clades, group means
            assert set(rob["interval_method"]) == {kind}
            assert np.all(rob["slope_low"] < rob["slope"]) and np.all(rob["slope"] <
                                                                       rob["slope_high"])
            assert np.all(rob["intercept_low"] < rob["intercept_high"])
        # Internal consistency: our own core, robust.sma_robust with n_boot 999 (resampling.bootstrap
        # is 0 here) and the run's seed.
        _, pts = demo_points
        ref = sma_robust(pts["x"], pts["y"], n_boot=999, seed=SEED)
        pooled = fits[(fits["method"] == "sma_robust") & (fits["scope"] == "pooled")].iloc[0]
        assert_allclose([pooled["slope"], pooled["slope_low"], pooled["slope_high"]],
                        [ref.slope, ref.slope_ci.low, ref.slope_ci.high], rtol=1e-12)
        # robust fits have slope tests too (bootstrap / Kendall)
        kinds = set(wide.slope_tests.loc[wide.slope_tests["method"] == "theil_sen",
                                         "statistic_type"])
        assert kinds == {"z"}

    def test_deming_rows(self, demo, demo_points):
        fits = _read(demo / "fits.csv")
        dem = fits[fits["method"] == "deming"]
        assert len(dem) == 7
        assert_allclose(dem["deming_lambda"].astype(float), DEMO_LAMBDA, rtol=1e-12)
        # Internal consistency: robust.deming on the same points with the same lambda.
        _, pts = demo_points
        ref = deming(pts["x"], pts["y"], lam=DEMO_LAMBDA)
        row = dem[dem["scope"] == "pooled"].iloc[0]
        assert_allclose([row["slope"], row["slope_low"], row["slope_high"]],
                        [ref.slope, ref.slope_ci.low, ref.slope_ci.high], rtol=1e-12)

    def test_lambda_from_error_variances_equals_direct(self, small_csv):
        # Exact law: error_variances {x: vx, y: vy} means lambda = vy / vx.
        base = {"data": {"file": str(small_csv), "x": "mass", "y": "rate", "group": "grp"},
                "diagnostics": {"enabled": False}}
        a = analyse(config_from_dict({**base, "model": {
            "methods": ["deming"], "error_variances": {"x": 0.002, "y": 0.005}}}))
        b = analyse(config_from_dict({**base, "model": {"methods": ["deming"],
                                                        "deming_lambda": 2.5}}))
        cols = ["slope", "slope_low", "slope_high", "intercept", "intercept_low",
                "intercept_high"]
        assert_allclose(a.fits[cols].to_numpy(float), b.fits[cols].to_numpy(float),
                        rtol=1e-12)
        assert_allclose(a.fits["deming_lambda"].astype(float), 2.5, rtol=1e-12)
        # and lambda matters: the default 1 (the MA line) gives another slope
        c = analyse(config_from_dict({**base, "model": {"methods": ["deming"]}}))
        assert not np.allclose(c.fits["slope"].to_numpy(float), a.fits["slope"].to_numpy(float))

    def test_group_tests_unaffected_by_extra_methods(self, extended):
        a, b = extended
        pd.testing.assert_frame_equal(a.tables["group_tests"], b.tables["group_tests"])
        pd.testing.assert_frame_equal(a.tables["pairwise_tests"], b.tables["pairwise_tests"])
        assert "Group comparisons are available for OLS, SMA and MA; none was made for " \
               "Theil-Sen or Deming or robust SMA." in b.messages
        assert any(m.strip().startswith("Robust check: robust SMA exponent") for m in b.messages)

    def test_all_methods_run_without_groups(self, small_csv):
        raw = {"data": {"file": str(small_csv), "x": "mass", "y": "rate"},
               "model": {"methods": ["ols", "deming", "theil_sen", "siegel", "sma_robust",
                                     "ma_robust"]},
               "resampling": {"bootstrap": 199, "permutations": 99, "seed": 2}}
        result = analyse(config_from_dict(raw))
        assert result.fits["slope"].notna().all()
        assert result.slope_tests.empty   # no exponents configured
        # The conftest simulation has exponent 0.75 (tests/conftest.py small_csv).
        assert np.all(np.abs(result.fits["slope"] - 0.75) < 0.05)


def _bones_run(tmp_path, planted: bool):
    """Invented femur length (mm) and body mass (g) of 30 species (truth b = 2.8)."""
    rng = np.random.default_rng(11)
    lx = rng.uniform(1.3, 2.6, 30)
    ly = -1.5 + 2.8 * lx + rng.normal(0.0, 0.1, 30)
    length = 10 ** lx
    if planted:
        length[7] /= 10          # one femur entered in cm among mm
    path = tmp_path / "bones.csv"
    pd.DataFrame({"species": [f"sp{i}" for i in range(30)], "femur": length,
                  "mass": 10 ** ly}).to_csv(path, index=False)
    raw = {"data": {"file": str(path), "x": "femur", "y": "mass",
                    "average_within": "species"},
           "model": {"methods": ["ols", "sma"]}, "prediction": {"x": [100]},
           "exponents": {"cube": 3}}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return analyse(config_from_dict(raw))


class TestPointsToCheckInTheRun:
    def test_planted_unit_error_warns_strongly_with_row_and_label(self, tmp_path):
        res = _bones_run(tmp_path, planted=True)
        strong = [w for w in res.warnings if w.startswith("STRONG")]
        # planted error (simulation with known truth): row 8 of the file is sp7
        assert any("row 8 (sp7)" in w for w in strong)
        table = res.tables["points_to_check"]
        assert {"influence"} <= set(table["kind"])
        assert res.warnings[0].startswith("STRONG")   # strong warnings come first

    def test_clean_data_no_strong_warning(self, tmp_path):
        res = _bones_run(tmp_path, planted=False)
        # simulation with known truth, no planted error
        assert not [w for w in res.warnings if w.startswith("STRONG")]
        assert len(res.tables["points_to_check"]) == 0
