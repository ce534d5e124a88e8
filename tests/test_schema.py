"""The vocabulary of scaling.stats.schema: the tables a run writes and the method catalogue."""
from __future__ import annotations

import csv
import warnings

import pytest
import yaml

from scaling.stats import schema
from scaling.io.config import config_from_dict
from scaling.errors import ConfigError
from scaling.run.pipeline import run_config

from conftest import DEMO_CONFIG


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    """The demo config, plus inverse predictions and permutations, one figure."""
    raw = yaml.safe_load(DEMO_CONFIG.read_text(encoding="utf-8"))
    raw["prediction"]["y"] = [100, 1000]
    raw.setdefault("resampling", {})["permutations"] = 99
    raw["figures"] = {"kinds": ["scaling"], "formats": ["png"]}
    cfg = config_from_dict(raw, base_dir=DEMO_CONFIG.parent)
    out = tmp_path_factory.mktemp("schema") / "out"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return run_config(cfg, out=out, quiet=True)


def _header(path):
    with open(path, newline="", encoding="utf-8") as fh:
        return next(csv.reader(fh))


class TestTableColumns:
    def test_every_csv_of_a_demo_run_has_the_schema_columns(self, demo_run):
        written = sorted(p for p in demo_run.files if p.suffix == ".csv")
        stems = {p.stem for p in written}
        # the demo with inverse predictions and permutations writes every table
        assert stems == set(schema.TABLE_COLUMNS)
        for path in written:
            expected = schema.TABLE_COLUMNS[path.stem] + [
                c for c in schema.OPTIONAL_COLUMNS.get(path.stem, [])
                if c in _header(path)]
            assert _header(path) == expected, path.name   # internal consistency

    def test_fits_table_has_every_schema_column(self, demo_run):
        # 26 line columns (the slope gap last), 6 accuracy/correction columns, 5 for the
        # constant a and the term
        assert list(demo_run.fits.columns) == schema.FIT_ALL_COLUMNS
        assert len(schema.FIT_ALL_COLUMNS) == 37
        assert schema.FIT_COLUMNS[-2:] == ["slope_gap_low", "slope_gap_high"]
        # no demo fit accepts slopes of either sign: the gap is blank in every row
        assert demo_run.fits[["slope_gap_low", "slope_gap_high"]].isna().all().all()

    def test_every_slope_test_says_how_its_p_was_got(self, demo_run):
        tests = demo_run.slope_tests
        assert schema.SLOPE_TEST_COLUMNS[-2:] == ["p_value", "p_method"]
        assert tests["p_method"].notna().all() and tests["p_method"].ne("").all()
        ordinary = tests[tests["scope"].isin(["pooled", "group", "group_means"])]
        assert ordinary["p_method"].eq("t").all()
        # the demo's common SMA/MA slopes are calibrated by the parametric bootstrap
        # (groups of 8 points): their statistic is the likelihood ratio, without t df
        common = tests[(tests["scope"] == "common") & tests["method"].isin(["sma", "ma"])]
        assert len(common)
        assert common["p_method"].eq("lr_parametric_bootstrap(999)").all()
        assert common["statistic_type"].eq("lr").all() and common["df"].isna().all()
        assert (common["statistic"] >= 0).all()
        ols = tests[(tests["scope"] == "common") & (tests["method"] == "ols")]
        assert ols["p_method"].eq("t").all() and ols["statistic_type"].eq("t").all()


class TestCatalogue:
    def test_every_method_has_one_entry_read_by_config_lines_and_figures(self):
        from scaling.io import config
        from scaling.render import figure_style
        from scaling.stats import lines, resampling as resample, robust
        assert config.METHOD_NAMES == tuple(schema.CATALOGUE)
        assert set(schema.MOMENT_METHODS) == set(lines.METHODS) | {"deming"}
        assert set(schema.ROW_METHOD_NAMES) == set(robust.ROW_METHODS)
        assert resample.MOMENT_METHODS == schema.MOMENT_METHODS
        assert set(resample.RANK_PAIRS) == set(schema.ROW_METHOD_NAMES)
        assert set(figure_style.METHOD_DASHES) == set(schema.CATALOGUE)
        assert lines.METHOD_INFO["sma_robust"] == ("robust SMA", True)

    def test_labels_and_symmetry(self):
        assert schema.method_label("theil_sen") == "Theil-Sen"
        assert schema.method_label("other") == "OTHER"
        assert schema.is_symmetric("deming") and not schema.is_symmetric("ols")
        assert schema.is_moment_method("deming") and not schema.is_moment_method("siegel")
        assert schema.GROUP_COMPARISON_METHODS == ("ols", "sma", "ma")

    def test_unknown_method_is_refused(self):
        with pytest.raises(ConfigError, match="method must be one of ols, sma"):
            schema.method_info("lasso")


class TestChoices:
    def test_check_choice_names_the_options(self):
        assert schema.check_choice("ratio", schema.CORRECTIONS, "correction") == "ratio"
        with pytest.raises(ConfigError, match="interval must be one of prediction, confidence"):
            schema.check_choice("wide", schema.INTERVALS, "interval")


class TestOptionChecks:
    def test_check_confidence_accepts_numbers_strictly_between_0_and_1(self):
        # common practice, no source: a confidence level is a probability in (0, 1)
        import numpy as np
        from scaling.stats.schema import check_confidence
        assert check_confidence(0.95) == 0.95
        assert check_confidence(np.float32(0.5)) == 0.5
        for bad in (0, 1, 1.5, -0.1, float("nan"), True, "0.95", None):
            with pytest.raises(ConfigError, match=r"^confidence must be a number between "
                                                  r"0 and 1, not "):
                check_confidence(bad)

    def test_check_lam_accepts_positive_finite_numbers(self):
        # Deming's lambda is a ratio of variances: positive and finite (Deming 1943)
        from scaling.stats.schema import check_lam
        assert check_lam(2) == 2.0
        for bad in (0, -1, float("inf"), float("nan"), False, "1"):
            with pytest.raises(ConfigError, match=r"^lam \(error-variance ratio\) must be"):
                check_lam(bad)


class TestArgumentChecks:
    """One check per argument: a method, several methods, a count (rules of the house)."""

    def test_check_method_names_the_argument_and_the_choices(self):
        assert schema.check_method("sma", ("ols", "sma", "ma")) == "sma"
        assert schema.check_method("SMA", ("ols", "sma", "ma"), lower=True) == "sma"
        assert schema.check_method("deming") == "deming"   # every catalogue method by default
        with pytest.raises(ConfigError, match=r"^method must be one of ols, sma, ma, not 'SMA'$"):
            schema.check_method("SMA", ("ols", "sma", "ma"))
        with pytest.raises(ConfigError, match=r"^line must be one of ols, sma, not 3$"):
            schema.check_method(3, ("ols", "sma"), name="line")

    def test_check_methods_takes_one_name_or_several(self):
        assert schema.check_methods("ols", ("ols", "sma")) == ("ols",)
        assert schema.check_methods(["sma", "ols"], ("ols", "sma")) == ("sma", "ols")
        with pytest.raises(ConfigError, match=r"^methods must name at least one of ols, sma$"):
            schema.check_methods([], ("ols", "sma"))
        with pytest.raises(ConfigError, match=r"^methods must be among ols, sma \(each method "
                                              r"must be one of these\), not \['wls'\]$"):
            schema.check_methods(["ols", "wls"], ("ols", "sma"))

    def test_check_count_wants_a_whole_number_at_least_the_minimum(self):
        import numpy as np
        assert schema.check_count(np.int64(5), "n_boot", 2) == 5
        assert schema.check_count(0, "seed", 0) == 0
        for bad in (1, 2.0, True, "3", None):
            with pytest.raises(ConfigError, match=r"^n_boot must be an integer >= 2, not "):
                schema.check_count(bad, "n_boot", 2)

    def test_notes_are_fixed_labels(self):
        # vocabulary: fits.csv notes carry no numbers
        assert schema.EXACT_NOTE == "no residual scatter: an exact power law"
        assert not any(ch.isdigit() for ch in schema.EXACT_NOTE + schema.EXACT_LINE_NOTE)
