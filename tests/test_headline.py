"""The headline: which line answers the question, in at most three sentences.

Where expected values come from: seeded simulations with a known truth (stated
beside each check), the demo (its truth is stated in demo_data/make_demo.py:
common within-clade exponent 0.72, clades at different elevations), the worked
examples' seeded scripts in demo_data/, and invented tables whose numbers are
copied into the expected sentences (exact by construction: formatting only).
"""
from __future__ import annotations

import re
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from scaling.io.config import config_from_dict
from scaling.errors import ConfigError
from scaling.render.answer import headline_of
from scaling.render.headline import build_headline, exponent_words, primary_method
from scaling.run.pipeline import analyse, write_outputs

ROOT = Path(__file__).resolve().parents[1]
VERDICT = r"(is above|is below|does not differ detectably from)"


def _run(tmp_path, table: pd.DataFrame, group: bool = True, **model):
    path = tmp_path / "sim.csv"
    table.to_csv(path, index=False)
    data = {"file": str(path), "x": "mass", "y": "rate"}
    if group:
        data["group"] = "taxon"
    cfg = config_from_dict({"data": data, "model": {"methods": ["ols", "sma"], **model},
                            "exponents": {"three_quarters": "3/4", "two_thirds": "2/3"},
                            "diagnostics": {"enabled": False},
                            "output": {"dir": str(tmp_path / "out")}}, base_dir=tmp_path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return analyse(cfg)


def _groups(seed, slopes, x_centres, elevations, n=30, sd=0.05):
    """Groups on y = 10^e_i x^b_i with log-normal scatter (known truth)."""
    rng = np.random.default_rng(seed)
    rows = []
    for i, (b, c, e) in enumerate(zip(slopes, x_centres, elevations)):
        lx = c + rng.uniform(-0.6, 0.6, n)
        ly = e + b * lx + rng.normal(0, sd, n)
        rows.append(pd.DataFrame({"taxon": f"t{i}", "mass": 10 ** lx, "rate": 10 ** ly}))
    return pd.concat(rows, ignore_index=True)


class TestPrimaryMethod:
    def test_first_symmetric_else_ols(self):
        assert primary_method(["ols", "ma", "sma"]) == "ma"      # first symmetric requested
        assert primary_method(["ols", "theil_sen"]) == "ols"
        assert primary_method(["theil_sen", "siegel"]) == "theil_sen"
        assert primary_method(["ols", "sma"], "ols") == "ols"    # config wins

    def test_config_key(self, tmp_path):
        raw = {"data": {"file": "d.csv", "x": "a", "y": "b"},
               "model": {"methods": ["ols", "ma", "sma"]}}
        assert config_from_dict(raw, base_dir=tmp_path).model.primary == "ma"
        raw["model"]["primary"] = "ols"
        assert config_from_dict(raw, base_dir=tmp_path).model.primary == "ols"
        raw["model"]["primary"] = "deming"
        with pytest.raises(ConfigError, match=r"model\.primary: 'deming' is not one of "
                                              r"model\.methods \(ols, ma, sma\)"):
            config_from_dict(raw, base_dir=tmp_path)


class TestExponentWords:
    def test_fractions(self):
        # exact laws of writing fractions: 0.75 = 3/4, 2/3 = 0.666...
        assert exponent_words("three_quarters", 0.75) == "3/4"
        assert exponent_words("x", 2 / 3) == "2/3"
        assert exponent_words("x", 0.8) == "0.8"


class TestOnePFormatter:
    """Every p written in words goes through render.wording.format_p: three decimals from
    0.01 up, two significant digits below, "< 0.0001" below 0.0001 (common practice, no
    source; formatting only, exact strings)."""

    def test_the_convention(self):
        from scaling.render.wording import format_p, p_text
        assert [format_p(p) for p in (0.7304, 0.052, 0.0042, 0.00042, 0.00002)] == [
            "0.730", "0.052", "0.0042", "0.00042", "< 0.0001"]
        assert p_text(0.052) == "p = 0.052" and p_text(3e-9) == "p < 0.0001"
        assert p_text(float("nan")) == "p = n/a"

    def test_headline_verdicts_use_it(self):
        from scaling.render.headline import _short_verdict
        assert _short_verdict(0.9, 0.75, 0.00042, 0.05) == "above (p = 0.00042)"
        assert _short_verdict(0.9, 0.75, 1e-9, 0.05) == "above (p < 0.0001)"
        assert _short_verdict(0.76, 0.75, 0.41, 0.05) == "not different (p = 0.410)"

    def test_cached_verdicts_equal_the_verdicts_made_afresh(self):
        # internal consistency: the cache gives what the function makes, for edge values,
        # ties of p, an int and a float of one value, and a run's worth of verdicts
        from scaling.render.headline import _short_verdict
        make = _short_verdict.__wrapped__
        nan, inf = float("nan"), float("inf")
        cases = [(0.9, 0.75, p, 0.05, how) for p in (nan, inf, -0.0, 0.0, 1e-300, 1e300,
                                                     0.05, 0.05, 0.049999, 1.0)
                 for how in ("", "t", "parametric_bootstrap(999)")]
        cases += [(1, 1, 0.5, 0.05, ""), (1.0, 1.0, 0.5, 0.05, ""), (0.75, 0.75, 0.01, 0.05, ""),
                  (-0.0, 0.0, 1e-5, 0.05, "permutation(99)")]
        rng = np.random.default_rng(5)
        cases += [(float(e), 0.75, float(p), 0.05, "") for e, p in
                  zip(rng.normal(0.75, 0.1, 25000), rng.uniform(0, 1, 25000) ** 4)]
        for _ in range(2):   # made, then found in the cache
            assert [_short_verdict(*c) for c in cases] == [make(*c) for c in cases]
        assert _short_verdict.cache_info().maxsize >= 2 * 20000

    def test_gap_cells_read_from_float_columns_equal_the_cells_made_per_row(self):
        # internal consistency: the straight read gives _gap_cells' values, bit for bit
        from scaling.render.headline import _gap_cells, _gap_reader, _rows
        values = [np.nan, -0.0, 0.0, np.inf, -np.inf, 1e-300, 1e300, 0.5]
        frame = pd.DataFrame({"slope_gap_low": values, "slope_gap_high": values[::-1]})
        names = ("slope_gap_low", "slope_gap_high")
        got = [reader(r) for reader in (_gap_reader(frame), _gap_cells)
               for r in _rows(frame, names)]
        assert [np.float64(list(c.values())).tobytes() for c in got[:8]] == [
            np.float64(list(c.values())).tobytes() for c in got[8:]]
        # text or missing gap columns are read per row
        for other in (frame.astype(object), frame.drop(columns="slope_gap_high")):
            assert _gap_reader(other) is _gap_cells

    def test_several_predictor_sentences_use_it(self):
        from types import SimpleNamespace

        from scaling.run.several_predictors import combined_sentence, exponent_sentence
        test = SimpleNamespace(term="diameter", estimate=2.31, exponent=2.0, statistic=3.9,
                               p_value=0.00042)
        assert "t = 3.90, p = 0.00042 (differs)" in exponent_sentence("cylinder", [test], 0.05)
        test.p_value = 2e-7
        assert "p < 0.0001 (differs)" in exponent_sentence("cylinder", [test], 0.05)
        ci = SimpleNamespace(low=0.98, high=1.03)
        combined = SimpleNamespace(confidence=0.95, p_value=0.0042, label="D^2 H",
                                   exponent=1.004, exponent_ci=ci, hypothesis=1.0,
                                   t_p_value=0.73, f_statistic=8.1, df_num=1, df_den=117)
        text = combined_sentence(combined, 0.05)
        assert "vs 1: p = 0.730;" in text and "(1, 117) df, p = 0.0042:" in text


class TestBuildHeadline:
    def test_one_group_gives_the_exponent_and_its_tests(self, tmp_path):
        table = _groups(1, [0.75], [1.0], [0.3], n=40).drop(columns="taxon")
        head = headline_of(_run(tmp_path, table, group=False))
        assert head.line == "pooled" and head.primary == "sma"
        assert len(head.sentences) == 2
        assert head.sentences[0].startswith("The SMA exponent is 0.7")   # known truth 0.75
        assert re.search(VERDICT + r" 3/4 \(p", head.sentences[1])
        assert re.search(VERDICT + r" 2/3 \(p", head.sentences[1])
        assert head.group_table is None and head.matrices == {}

    def test_common_slope_with_elevation_shifts_names_the_biased_pooled_line(self, tmp_path):
        # known truth: slope 0.75 in every group; groups further right sit lower, so the
        # pooled line through all points is flatter than the within-group slope
        table = _groups(2, [0.75] * 4, [0.0, 1.0, 2.0, 3.0], [0.0, -0.3, -0.6, -0.9])
        res = _run(tmp_path, table)
        head = headline_of(res)
        assert head.line == "common" and len(head.sentences) == 3
        common = res.fits.query("scope == 'common' and method == 'sma'").iloc[0]
        pooled = res.fits.query("scope == 'pooled' and method == 'sma'").iloc[0]
        assert common["slope_low"] <= 0.75 <= common["slope_high"]   # known truth 0.75
        assert pooled["slope"] < common["slope_low"]                 # the pooled line is biased
        s1, s2, s3 = head.sentences
        assert s1.startswith(f"Within taxa, the common SMA exponent is {common['slope']:.3f} "
                             f"(95% CI {common['slope_low']:.3f}–{common['slope_high']:.3f}")
        assert re.search(VERDICT + r" 3/4", s2) and re.search(VERDICT + r" 2/3", s2)
        assert "differ in elevation" in s3
        # English plural of the group column "taxon" (wording.plural), not "taxons"
        assert "mixes taxa and understates the within-taxon exponent" in s3

    def test_slopes_that_differ_give_a_per_group_table(self, tmp_path):
        # known truth: slopes 0.5, 0.75 and 1.0
        table = _groups(3, [0.5, 0.75, 1.0], [1.0, 1.0, 1.0], [0.0, 0.0, 0.0])
        head = headline_of(_run(tmp_path, table))
        assert head.line == "groups"
        assert head.sentences[0].startswith("The taxa do not share one exponent")
        assert len(head.sentences) <= 3
        g = head.group_table
        assert list(g["taxon"]) == ["t0", "t1", "t2"]
        np.testing.assert_allclose(g["exponent"], [0.5, 0.75, 1.0], atol=0.05)  # known truth
        assert {"vs 3/4", "vs 2/3"} <= set(g.columns)
        assert "slopes_equal" in head.matrices                   # the pairs, as a matrix
        assert head.matrices["slopes_equal"].shape == (2, 2)

    def test_invented_tables_without_group_tests(self):
        fits = pd.DataFrame({"scope": ["pooled"], "group": [""], "method": ["ols"], "n": [10],
                             "slope": [0.7], "slope_low": [0.6], "slope_high": [0.8]})
        tests = pd.DataFrame({"scope": ["pooled"], "group": [""], "method": ["ols"],
                              "hypothesis": ["k"], "exponent": [0.75], "estimate": [0.7],
                              "p_value": [0.3]})
        head = build_headline(fits, tests, methods=["ols"])
        # exact by construction: the numbers of the invented tables above, formatted
        assert head.sentences == ("The OLS exponent is 0.700 (95% CI 0.600–0.800, n = 10).",
                                  "It does not differ detectably from 3/4 (p = 0.300).")
        assert head.exponent_table.loc[0, "vs 3/4"] == "not different (p = 0.300)"


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """The demo run, written without figures (figures are not part of these checks).

    The analysis is the session's one cached ``analyse`` of configs/demo.yaml
    (helpers_figures.demo, shared with the figure and report tests)."""
    from helpers_figures import demo as demo_result, with_figures
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return write_outputs(with_figures(demo_result(), formats=()),
                             tmp_path_factory.mktemp("demo") / "out")


class TestDemoHeadline:
    def test_first_sentences_give_the_common_exponent_and_the_pooled_bias(self, demo):
        head = headline_of(demo)
        s1, s2, s3 = head.sentences[:3]     # a fourth names a row that moves the answer
        m = re.search(r"common SMA exponent is (\d\.\d+) \(95% CI (\d\.\d+)–(\d\.\d+)", s1)
        assert m and s1.startswith("Within clades")
        low, high = float(m.group(2)), float(m.group(3))
        assert low <= 0.72 <= high          # known truth of the demo (make_demo.py): 0.72
        assert re.search(VERDICT + r" 3/4 \(p", s2) and re.search(VERDICT + r" 2/3 \(p", s2)
        assert "pooled line" in s3 and "understates the within-clade exponent" in s3

    def test_summary_opens_with_the_answer_and_is_small(self, demo):
        md = (demo.out_dir / "summary.md").read_text(encoding="utf-8")
        assert len(md.encode()) < 20_000    # a size limit of ours (common practice, no source)
        assert md.index("## Answer") < md.index("## Summary")
        assert "Within clades, the common SMA exponent" in md
        assert "Pairs that differ (Holm-adjusted):" not in md    # matrices instead


class TestHeadlineOfWorkedExamples:
    """The answer of the forestry and palaeobiology users is on the first lines."""

    def _run(self, tmp_path, name):
        from scaling.cli import main
        assert main(["init", "--example", name, str(tmp_path / name)]) == 0
        from scaling.run.pipeline import run_config
        return run_config(tmp_path / name / f"{name}.yaml", write=False, quiet=True)

    def test_several_predictors_name_each_exponent_and_its_test(self, tmp_path):
        from scaling.render.answer import headline_of
        head = headline_of(self._run(tmp_path, "forestry"))
        # demo_data/make_forestry.py (invented, stated truth): exponents 2 (diameter)
        # and 1 (height) of a cylinder; the headline names both terms and both tests
        assert "diameter_cm" in head.sentences[0] and "height_m" in head.sentences[0]
        assert "vs 2" in head.sentences[1] and "vs 1" in head.sentences[1]
        assert head.sentences[2].startswith("Total over")   # the plot total is the answer

    def test_inverse_prediction_of_a_fossil_is_the_last_sentence(self, tmp_path):
        from scaling.render.answer import headline_of
        head = headline_of(self._run(tmp_path, "palaeo"))
        # demo_data/make_palaeo.py: fossil F1's femur circumference is 118 mm
        assert len(head.sentences) <= 3
        assert head.sentences[-1].startswith("Inverse prediction of")
        assert "118 mm" in head.sentences[-1]


class TestTwoAcceptedRanges:
    """An SMA fit whose correlation is not significant accepts slopes in two ranges;
    every sentence and table of words names both (invented tables: formatting only)."""

    def _tables(self):
        fits = pd.DataFrame({"scope": ["pooled"], "group": [""], "method": ["sma"], "n": [10],
                             "slope": [1.0], "slope_low": [-2.0977], "slope_high": [2.0977],
                             "slope_gap_low": [-0.4767], "slope_gap_high": [0.4767]})
        tests = pd.DataFrame({"scope": ["pooled"], "group": [""], "method": ["sma"],
                              "hypothesis": ["k"], "exponent": [0.75], "estimate": [1.0],
                              "p_value": [0.6], "p_method": ["t"]})
        return fits, tests

    def test_the_answer_says_both_ranges(self):
        head = build_headline(*self._tables(), methods=["sma"])
        assert head.sentences[0] == ("The SMA exponent is 1.000 (95% CI -2.098 to -0.477 or "
                                     "0.477 to 2.098, n = 10).")
        row = head.exponent_table.iloc[0]
        assert (row["low"], row["gap_low"], row["gap_high"], row["high"]) == (
            -2.0977, -0.4767, 0.4767, 2.0977)

    def test_no_gap_columns_when_every_set_is_one_range(self):
        fits, tests = self._tables()
        fits[["slope_gap_low", "slope_gap_high"]] = np.nan
        head = build_headline(fits, tests, methods=["sma"])
        assert "gap_low" not in head.exponent_table.columns
        assert "(95% CI -2.098–2.098, n = 10)" in head.sentences[0]

    def test_a_run_of_weakly_correlated_data_writes_them(self, tmp_path):
        # y a permutation of x (r = 0.11, n = 10): SMA accepts either sign
        table = pd.DataFrame({"mass": np.arange(1.0, 11.0),
                              "rate": [3.0, 9, 2, 7, 4, 10, 1, 6, 8, 5]})
        res = _run(tmp_path, table, group=False)
        sma = res.fits.query("method == 'sma'").iloc[0]
        assert np.isfinite(sma["slope_gap_low"]) and np.isfinite(sma["slope_gap_high"])
        assert res.fits.query("method == 'ols'")[["slope_gap_low", "slope_gap_high"]].isna().all().all()
        head = headline_of(res)
        assert "95% CI -2.098 to -0.477 or 0.477 to 2.098" in head.sentences[0]
        assert any("Pooled SMA exponent 1.000 (95% CI -2.098 to -0.477 or 0.477 to 2.098)"
                   in m for m in res.messages)
        from scaling.render.report import render_fits_tex
        sma_row = [ln for ln in render_fits_tex(res).splitlines()
                   if ln.startswith("pooled & ") and "SMA" in ln][0]
        assert "$-$2.098 to $-$0.4767 or 0.4767--2.098" in sma_row   # the two accepted ranges
        from scaling.render.figure_exponents import plot_exponents
        ax = plot_exponents(res, methods=["sma"])
        bars = sorted(tuple(np.round(ln.get_xdata(), 3)) for ln in ax.lines
                      if len(ln.get_xdata()) == 2 and ln.get_ydata()[0] == ln.get_ydata()[1])
        assert bars == [(-2.098, -0.477), (0.477, 2.098)]   # the gap is not drawn as accepted


class TestCalibratedPAtItsFloor:
    """A p from B resampled draws is at least 1/(B + 1) (Davison & Hinkley 1997,
    Bootstrap Methods, eq. 4.11; Phipson & Smyth 2010, Stat. Appl. Genet. Mol. Biol. 9:39);
    at that floor it is written 'p ≤ 1/(B + 1) (B draws)' (formatting only)."""

    def test_the_helper(self):
        from scaling.render.wording import calibrated_p_text, p_floor
        assert calibrated_p_text(0.001, "parametric_bootstrap(999)") == "p ≤ 0.001 (999 draws)"
        assert calibrated_p_text(0.001, "lr_parametric_bootstrap(999)") == (
            "p ≤ 0.001 (999 draws)")
        assert calibrated_p_text(1 / 10000, "permutation(9999)") == "p ≤ 0.0001 (9999 draws)"
        assert calibrated_p_text(0.002, "bootstrap_percentile(999)") == "p ≤ 0.002 (999 draws)"
        assert calibrated_p_text(0.002, "parametric_bootstrap(999)") == "p = 0.002"
        assert calibrated_p_text(0.001, "t") == calibrated_p_text(0.001, "") == "p = 0.001"
        assert p_floor("permutation(99)") == (0.01, 99)

    def test_headline_sentences_and_tables_of_words(self):
        from scaling.render.headline import _short_verdict
        assert _short_verdict(0.9, 0.75, 0.001, 0.05, "lr_parametric_bootstrap(999)") == (
            "above (p ≤ 0.001 (999 draws))")
        fits = pd.DataFrame({"scope": ["pooled", "common"], "group": ["", ""],
                             "method": ["sma", "sma"], "n": [40, 40], "slope": [0.67, 0.74],
                             "slope_low": [0.64, 0.70], "slope_high": [0.71, 0.78],
                             "note": ["", "common within-group slope of 5 groups"]})
        tests = pd.DataFrame({"scope": ["common"], "group": [""], "method": ["sma"],
                              "hypothesis": ["k"], "exponent": [2 / 3], "estimate": [0.74],
                              "p_value": [0.001], "p_method": ["lr_parametric_bootstrap(999)"]})
        groups = pd.DataFrame({"method": ["sma"] * 3,
                               "test": ["slopes_equal", "intercepts_equal", "shift_along_axis"],
                               "p_value": [0.356, 0.001, 0.004],
                               "p_method": ["parametric_bootstrap(999)"] * 3})
        head = build_headline(fits, tests, groups, methods=["sma"], group_word="clade")
        s1, s2, s3 = head.sentences
        assert "slopes do not differ, p = 0.356)" in s1
        assert s2 == "This within-clade exponent is above 2/3 (p ≤ 0.001 (999 draws))."
        assert s3.startswith("The clades differ in elevation (p ≤ 0.001 (999 draws)) and "
                             "differ in position along the common axis (p = 0.004)")

        assert head.exponent_table.loc[0, "vs 2/3"] == "above (p ≤ 0.001 (999 draws))"

    def test_every_sentence_of_the_demo_reads_at_most(self, demo):
        # The demo's SMA/MA group tests and common-slope tests are calibrated with 999
        # parametric-bootstrap draws; several sit at the floor 0.001.
        groups = demo.tables["group_tests"]
        floor = groups[groups["p_method"].str.startswith("parametric_bootstrap")
                       & (groups["p_value"] <= 1 / 1000 + 1e-12)]
        tests = demo.slope_tests
        common = tests[tests["p_method"].str.startswith("lr_parametric_bootstrap")
                       & (tests["p_value"] <= 1 / 1000 + 1e-12)]
        assert len(floor) and len(common)
        # no p-value that is not resampled would be written "0.001" here, so every
        # "p = 0.001" would be a floor written as exact
        from scaling.render.wording import format_p
        others = pd.concat([groups.loc[~groups["p_method"].str.contains(r"\("), "p_value"],
                            tests.loc[~tests["p_method"].str.contains(r"\("), "p_value"]])
        assert "0.001" not in {format_p(p) for p in others}
        md = (demo.out_dir / "summary.md").read_text(encoding="utf-8")
        html = (demo.out_dir / "report.html").read_text(encoding="utf-8")
        words = [md, html, *demo.messages, *headline_of(demo).sentences]
        assert not any("p = 0.001" in text for text in words)
        assert "p ≤ 0.001 (999 draws)" in md and "p ≤ 0.001 (999 draws)" in html

    def test_pairwise_holm_p_from_a_floor_p_is_written_as_a_bound(self):
        # Holm (1979, Scand. J. Stat. 6:65) adjusts by multiplying: a raw p that is only
        # known to be at most 1/(B + 1) gives an adjusted p that is only an upper bound.
        from scaling.render.headline import _matrices
        from scaling.render.report import Block, _md_table
        pairs = pd.DataFrame({"method": ["sma"] * 3, "test": ["intercepts_equal"] * 3,
                              "group_a": ["a", "a", "b"], "group_b": ["b", "c", "c"],
                              "statistic": [30.0, 2.0, 9.0], "df": [1.0] * 3,
                              "p_value": [0.001, 0.2, 0.004], "p_adjusted": [0.003, 0.2, 0.008],
                              "p_method": ["parametric_bootstrap(999)"] * 3})
        mat = _matrices(pairs, "sma", ["a", "b", "c"], 0.05)["intercepts_equal"]
        assert mat.loc["a", "b"] == "≤ 0.003*" and mat.loc["a", "c"] == "0.200"
        assert mat.loc["b", "c"] == "0.008*"
        md = _md_table(Block(kind="table", frame=pairs, name="pairwise_tests"))
        rows = md.splitlines()[-3:]
        assert "| ≤ 0.001 | ≤ 0.003 |" in rows[0] and "≤" not in rows[1] + rows[2]


class TestInfluenceSentence:
    def test_names_the_row_its_values_and_the_move(self):
        from scaling.render.headline import influence_sentence
        said = influence_sentence(35, (("stem_mm", 4.1), ("habitat", "shade")), slope=1.845,
                                  slope_without=1.818)
        assert said == ("Row 35 (stem_mm 4.1, habitat shade) moves this exponent from 1.845 "
                        "to 1.818: check it first.")

    def test_a_changed_verdict_and_a_group_exponent(self):
        from scaling.render.headline import influence_sentence
        said = influence_sentence(7, (("", "sp_a"),), slope=0.76, slope_without=0.74,
                                  changes=(("3/4", "not_different", "below"),),
                                  exponent_of="shade")
        assert said == ("Row 7 (sp_a) moves the shade exponent from 0.760 to 0.740 and its "
                        "verdict against 3/4 from not different to below: check it first.")

    def test_headline_of_appends_the_moves_answer_rows(self, demo):
        from dataclasses import replace
        from scaling.render.answer import headline_of
        points = pd.DataFrame({"scope": ["common", "common"], "group": ["", ""],
                               "method": ["sma", "sma"], "severity": ["strong", "strong"],
                               "kind": ["moves_answer", "moves_answer"], "row": [3, 9],
                               "label": ["", ""], "value": [2.0, 1.5],
                               "reason": ["Row 3 (x 1) moves this exponent from 0.700 to "
                                          "0.800: check it first.", "Row 9 ..."]})
        head = headline_of(replace(demo, tables={**demo.tables, "points_to_check": points}))
        assert head.sentences[-1] == ("Row 3 (x 1) moves this exponent from 0.700 to 0.800; "
                                      "1 more row moves it too (points_to_check.csv): check "
                                      "them first.")


class TestAnswerLine:
    def _tests(self, p_slope):
        return pd.DataFrame({"method": ["sma"] * 3, "test": ["slopes_equal", "intercepts_equal",
                                                             "shift_along_axis"],
                             "p_value": [p_slope, 0.001, 0.2]})

    def test_the_rule_of_the_headline(self):
        from scaling.render.headline import answer_line
        assert answer_line(None, ["ols", "sma"]) == ("pooled", "sma")
        assert answer_line(self._tests(0.4), ["ols", "sma"]) == ("common", "sma")
        assert answer_line(self._tests(0.01), ["ols", "sma"]) == ("groups", "sma")
        assert answer_line(self._tests(0.4), ["ols", "deming"]) == ("common", "sma")

    def test_agrees_with_the_demo_headline(self, demo):
        from scaling.render.headline import answer_line
        head = headline_of(demo)
        cfg = demo.config
        # internal consistency: the checks and the headline read the same model
        assert answer_line(demo.tables["group_tests"], cfg.model.methods, cfg.model.primary,
                           cfg.model.confidence) == (head.line, head.primary)
