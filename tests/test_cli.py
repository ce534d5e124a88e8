"""The command line, end to end: files, columns, exit codes, clean errors."""
from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

from scaling import __version__
from scaling.cli import main

from conftest import DEMO_CONFIG, DEMO_DATA, ROOT

FITS_COLUMNS = ["scope", "group", "method", "n", "slope", "slope_low", "slope_high",
                "intercept", "intercept_low", "intercept_high", "r", "r2", "log_base",
                "confidence", "note"]
SLOPE_TEST_COLUMNS = ["scope", "group", "method", "hypothesis", "exponent", "statistic",
                      "df", "p_value"]


def _run(argv, capsys):
    code = main([str(a) for a in argv])
    out = capsys.readouterr()
    return code, out.out, out.err


@pytest.fixture
def demo_run(demo_run_shared):
    # The session's one demo run (tests/conftest.py); it checks the input is unchanged.
    return demo_run_shared.code, demo_run_shared.out


class TestRun:
    def test_demo_exit_and_files(self, demo_run):
        code, out = demo_run
        assert code == 0
        for name in ("fits.csv", "slope_tests.csv", "dropped_rows.csv", "results.json"):
            assert (out / name).is_file(), name
        assert (out / "figures" / "scaling.png").is_file()
        assert (out / "figures" / "scaling.pdf").is_file()

    def test_demo_columns(self, demo_run):
        _, out = demo_run
        fits = pd.read_csv(out / "fits.csv")
        assert list(fits.columns[:len(FITS_COLUMNS)]) == FITS_COLUMNS
        assert set(fits["scope"]) >= {"pooled", "group"}
        tests = pd.read_csv(out / "slope_tests.csv")
        assert set(SLOPE_TEST_COLUMNS) <= set(tests.columns)
        dropped = pd.read_csv(out / "dropped_rows.csv")
        assert list(dropped.columns) == ["row", "reason"]
        # the demo plants 6 bad rows and 5 outgroup rows (demo_data/make_demo.py)
        assert len(dropped) == 11

    def test_group_files(self, demo_run):
        _, out = demo_run
        means = pd.read_csv(out / "group_means.csv")
        assert list(means.columns[:6]) == ["group", "n", "mean_log_x", "mean_log_y",
                                           "se_log_x", "se_log_y"]
        # the demo has 8 species in each of 5 clades (demo_data/make_demo.py)
        assert list(means["n"]) == [8] * 5
        tests = pd.read_csv(out / "group_tests.csv")
        assert {"method", "test", "statistic", "df", "p_value", "common_slope",
                "p_method"} <= set(tests.columns)
        assert set(tests["test"]) == {"slopes_equal", "intercepts_equal", "shift_along_axis"}
        assert set(tests["method"]) == {"ols", "sma", "ma"}
        pairs = pd.read_csv(out / "pairwise_tests.csv")
        assert list(pairs.columns) == ["method", "test", "group_a", "group_b", "statistic",
                                       "df", "p_value", "p_adjusted", "p_method"]
        fits = pd.read_csv(out / "fits.csv")
        assert set(fits.loc[fits["scope"] == "group_means", "n"]) == {5}

    def test_demo_answers_the_comparative_question(self, demo_run):
        # Smoke test on the demo: the group verdicts are written (their content is
        # checked on a simulation with a known truth below).
        _, out = demo_run
        doc = json.loads((out / "results.json").read_text())
        text = " ".join(doc["messages"])
        assert "among the 5 clade groups (SMA" in text
        tests = pd.read_csv(out / "group_tests.csv").set_index(["method", "test"])
        assert tests["p_value"].between(0, 1).all()

    def test_shifted_groups_with_one_slope(self, tmp_path, write_config, capsys):
        # Simulation with a known truth: five groups share the exponent 0.72 and are
        # shifted in elevation by 0.3 log10 units each (sd 0.05, 20 points per group
        # over 2 decades).  Each shift is about 19 standard errors (0.05 sqrt(2/20)), so the
        # intercept test rejects for any seed; the common slope lies within 4 of its
        # standard errors of 0.72 (SE about 0.05 / (0.58 sqrt(100)) = 0.009: 0.04).
        import numpy as np
        rng = np.random.default_rng(53)
        g = np.repeat(list("abcde"), 20)
        lx = rng.uniform(0, 2, 100)
        ly = 0.72 * lx + 0.3 * np.repeat(np.arange(5), 20) + rng.normal(0, 0.05, 100)
        pd.DataFrame({"g": g, "m": 10 ** lx, "r": 10 ** ly}).to_csv(tmp_path / "d.csv",
                                                                    index=False)
        cfg = write_config("data: {file: d.csv, x: m, y: r, group: g}\n"
                           "figures: {kinds: [scaling], dpi: 60}\n")
        code, out, err = _run(["run", cfg, "--out", tmp_path / "o"], capsys)
        assert code == 0, err
        assert "elevations (intercepts) differ" in out
        tests = pd.read_csv(tmp_path / "o" / "group_tests.csv").set_index(["method", "test"])
        for method in ("ols", "sma", "ma"):
            assert tests.loc[(method, "intercepts_equal"), "p_value"] < 0.01
            assert abs(tests.loc[(method, "slopes_equal"), "common_slope"] - 0.72) < 0.04

    def test_manifest(self, demo_run):
        import hashlib
        _, out = demo_run
        doc = json.loads((out / "results.json").read_text())
        man = doc["manifest"]
        # exact: the SHA-256 of the input file as hashlib computes it
        assert man["input_sha256"] == hashlib.sha256(DEMO_DATA.read_bytes()).hexdigest()
        assert man["versions"]["scaling"] == __version__
        assert man["config"]["data"]["x"] == "body_mass"
        assert "created_utc" in man

    def test_refuses_non_empty_output(self, demo_run, capsys):
        _, out = demo_run
        before = sorted(p.name for p in out.iterdir())
        code, _, err = _run(["run", DEMO_CONFIG, "--out", out], capsys)
        assert code == 2
        assert err.startswith("error: ") and "not empty" in err and "--force" in err
        assert err.count("\n") == 1
        assert sorted(p.name for p in out.iterdir()) == before

    def test_force_keeps_other_files(self, tmp_path, small_csv, write_config, capsys):
        # a small two-group table: --force's behaviour does not depend on the data
        out = tmp_path / "out"
        out.mkdir()
        (out / "my_notes.txt").write_text("keep me")
        cfg = write_config(f"data: {{file: {small_csv.name}, x: mass, y: rate, group: grp}}\n")
        code, stdout, _ = _run(["run", cfg, "--out", out, "--force"], capsys)
        assert code == 0
        assert (out / "my_notes.txt").read_text() == "keep me"
        assert "wrote" in stdout and "fits.csv" not in stdout.splitlines()[0]
        assert not list(tmp_path.glob(".scaling-tmp-*"))

    def test_failed_run_leaves_output_alone(self, tmp_path, write_config, capsys):
        out = tmp_path / "out"
        out.mkdir()
        (out / "fits.csv").write_text("old")
        cfg = write_config("data: {file: missing.csv, x: a, y: b}\n")
        code, _, err = _run(["run", cfg, "--out", out, "--force"], capsys)
        assert code == 2 and "data file not found" in err
        assert (out / "fits.csv").read_text() == "old"

    def test_summary_printed(self, demo_run_shared):
        code, stdout = demo_run_shared.code, demo_run_shared.stdout
        assert code == 0
        assert "Pooled SMA exponent" in stdout
        assert "scaling.png" in stdout

    def test_small_group_skipped_not_error(self, tmp_path, write_config, capsys):
        (tmp_path / "d.csv").write_text("g,m,r\n" + "".join(
            f"a,{m},{2 * m ** 0.75:.4f}\n" for m in (1, 2, 4, 8, 16)) + "b,3,5\nb,6,9\n")
        cfg = write_config("data: {file: d.csv, x: m, y: r, group: g}\n")
        code, stdout, _ = _run(["run", cfg, "--out", tmp_path / "o"], capsys)
        assert code == 0
        fits = pd.read_csv(tmp_path / "o" / "fits.csv")
        row = fits[(fits["group"] == "b") & (fits["method"] == "sma")].iloc[0]
        assert "n = 2 < 3" in row["note"] and pd.isna(row["slope"])
        assert "skipped" in stdout


class TestEdgeCases:
    @pytest.mark.parametrize("rows", [
        "m,r\n1,2\n2,4\n4,8\n8,16\n16,32\n",              # perfect power law, b = 1
    ])
    def test_degenerate_data_runs_cleanly(self, tmp_path, write_config, capsys, rows):
        import warnings
        (tmp_path / "d.csv").write_text(rows)
        cfg = write_config("data: {file: d.csv, x: m, y: r}\nexponents: {iso: 1}\n"
                           "prediction: {x: [3]}\n"
                           "resampling: {bootstrap: 199, permutations: 99}\n")
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            code, _, err = _run(["run", cfg, "--out", tmp_path / "o"], capsys)
        assert code == 0, err
        assert err == ""
        leaked = [w for w in caught if "matplotlib" in str(w.filename)
                  or "scaling" in str(w.filename)]
        assert not leaked, [str(w.message) for w in leaked]
        assert (tmp_path / "o" / "report.html").is_file()

    @pytest.mark.parametrize("rows, reason", [
        ("m,r\n1,2\n2,3\n", r"only 2 usable points \(a line needs at least 3\)"),
        ("m,r\n1,2\n1,3\n1,5\n1,6\n",
         r"x \(m\) has the same value \(1\) in all 4 points, so there is no slope"),
        ("m,r\n1,4\n2,4\n3,4\n4,4\n",
         r"y \(r\) has the same value \(4\) in all 4 points, so there is no relationship"),
        ("m,r\n1,2\n2,3\n0,5\n",
         r"only 2 usable points \(a line needs at least 3\); 1 rows were dropped"),
    ])
    def test_nothing_estimable_is_one_error_line(self, tmp_path, write_config, capsys,
                                                 rows, reason):
        # No line can be fitted at all: exit 2 and one line saying why, no folder of
        # empty tables (before: exit 0 and blank fits.csv).
        import re
        (tmp_path / "d.csv").write_text(rows)
        cfg = write_config("data: {file: d.csv, x: m, y: r}\nexponents: {iso: 1}\n"
                           "prediction: {x: [3]}\n"
                           "resampling: {bootstrap: 199, permutations: 99}\n")
        code, out, err = _run(["run", cfg, "--out", tmp_path / "o"], capsys)
        assert code == 2
        assert err.startswith("error: ") and err.count("\n") == 1, err
        assert "no line can be fitted" in err and re.search(reason, err), err
        assert "fewer than 4" not in err + out
        assert not (tmp_path / "o").exists()


class TestNothingSilent:
    """What the run ignores or cannot bound is said in the terminal and the files."""

    def test_unmatched_exclude_is_a_note_of_the_run(self, tmp_path, write_config, capsys):
        (tmp_path / "d.csv").write_text("m,r,g\n1,2,Saltoria\n2,3.1,Saltoria\n4,5.2,Ensifera\n"
                                        "8,9,Ensifera\n16,15,Ensifera\n")
        cfg = write_config("data: {file: d.csv, x: m, y: r, exclude: {g: [Saltoriaa]}}\n")
        code, out, err = _run(["run", cfg, "--out", tmp_path / "o"], capsys)
        assert code == 0, err
        note = [line for line in out.splitlines() if "Saltoriaa" in line]
        assert note and note[0].startswith("note: ") and "closest values: 'Saltoria'" in note[0]
        assert "Saltoriaa" in (tmp_path / "o" / "summary.md").read_text()
        doc = json.loads((tmp_path / "o" / "results.json").read_text())
        assert any("Saltoriaa" in w for w in doc["warnings"])
        code, out, _ = _run(["check", cfg], capsys)
        assert code == 0 and "note: " in out and "Saltoriaa" in out

    def test_unbounded_inverse_interval_is_warned_everywhere(self, tmp_path, write_config,
                                                             capsys, monkeypatch):
        # y does not depend on x (invented, shuffled values): OLS slope p > 0.05, so
        # the Fieller-type interval for x from y is unbounded (Draper & Smith 1998).
        (tmp_path / "d.csv").write_text("m,r\n1,5\n2,3\n3,7\n4,2\n5,6\n6,4\n")
        cfg = write_config("data: {file: d.csv, x: m, y: r}\nmodel: {methods: [ols]}\n"
                           "prediction: {y: [4]}\n")
        code, out, err = _run(["run", cfg, "--out", tmp_path / "o"], capsys)
        assert code == 0, err
        inv = pd.read_csv(tmp_path / "o" / "inverse_predictions.csv")
        assert inv["x_low"].isna().all() and inv["x_high"].isna().all()
        assert any(line.startswith("note: Inverse predictions") and "unbounded" in line
                   for line in out.splitlines())
        assert "interval for x is unbounded" in (tmp_path / "o" / "summary.md").read_text()
        doc = json.loads((tmp_path / "o" / "results.json").read_text())
        assert any("interval for x is unbounded" in w for w in doc["warnings"])
        code, out, err = _run(["predict", tmp_path / "o", "--x", "4", "--inverse",
                               "--out", tmp_path / "p.csv"], capsys)
        assert code == 0, err
        assert any(line.startswith("warning: ") and "unbounded" in line
                   for line in out.splitlines())
        # the default output file is the one --help names
        monkeypatch.chdir(tmp_path)
        assert _run(["predict", tmp_path / "o", "--x", "4", "--inverse"], capsys)[0] == 0
        assert (tmp_path / "predictions.csv").is_file()

    def test_check_lists_every_drop_reason(self, tmp_path, write_config, capsys):
        # Twelve distinct reasons (before: only the first eight were printed).
        bad = [f"w{i}" for i in range(12)]
        (tmp_path / "d.csv").write_text("m,r\n" + "".join(f"{b},2\n" for b in bad)
                                        + "1,2\n2,3\n4,5\n")
        cfg = write_config("data: {file: d.csv, x: m, y: r}\n")
        code, out, _ = _run(["check", cfg], capsys)
        assert code == 0
        for i, b in enumerate(bad):
            assert f"1 × x (m) is not a number: '{b}' (row {i + 1})" in out

    def test_predict_help_states_the_default_output_file(self, capsys):
        code, out, _ = _run(["predict", "--help"], capsys)
        assert code == 0
        assert "default: predictions.csv in the current folder" in " ".join(out.split())
        assert "predictions_cli" not in out

    def test_predict_uses_the_method_its_help_names(self, tmp_path, small_csv, write_config,
                                                    capsys):
        # SMA is the run's first method; --help says OLS is used when fitted, and it is
        code, out, _ = _run(["predict", "--help"], capsys)
        assert "--method M line method (default: ols, the line that predicts y from x, " \
               "when the run fitted it; else the run's first)" in " ".join(out.split())
        cfg = write_config(f"data: {{file: {small_csv.name}, x: mass, y: rate}}\n"
                           "model: {methods: [sma, ols]}\nfigures: {formats: []}\n")
        assert _run(["run", cfg, "--out", tmp_path / "o", "--quiet"], capsys)[0] == 0
        code, _, err = _run(["predict", tmp_path / "o", "--x", "10",
                             "--out", tmp_path / "p.csv"], capsys)
        assert code == 0, err
        assert list(pd.read_csv(tmp_path / "p.csv")["method"]) == ["ols"]


class TestExtremeMagnitudes:
    """Values near 1e±300: the numbers are fine, and figures must not fail the run."""

    @pytest.mark.parametrize("low, high", [(-300, -298), (298, 300), (-300, 300)],
                             ids=["1e-300", "1e300", "1e-300_to_1e300"])
    def test_run_succeeds_with_numeric_outputs(self, tmp_path, write_config, capsys, low,
                                               high):
        import numpy as np
        import statsmodels.api as sm
        # Simulation with a known truth: y = x^1 * lognormal scatter, x and y both
        # spanning 10^low .. 10^high (before: exit 1 from an underflow in the
        # error-structure check near 1e-300, and from the scaling figure's axis
        # margins overflowing to inf for 1e-300 .. 1e300).
        rng = np.random.default_rng(3)
        lx = np.linspace(low, high, 20)
        ly = np.clip(lx + rng.normal(0, 0.05, 20), low, high)
        pd.DataFrame({"x": [f"{v:.6e}" for v in 10.0 ** lx],
                      "y": [f"{v:.6e}" for v in 10.0 ** ly]}).to_csv(tmp_path / "d.csv",
                                                                      index=False)
        cfg = write_config("data: {file: d.csv, x: x, y: y}\nfigures: {dpi: 60}\n")
        code, out, err = _run(["run", cfg, "--out", tmp_path / "o"], capsys)
        assert code == 0, err
        fits = pd.read_csv(tmp_path / "o" / "fits.csv").set_index("method")
        X, Y = np.log10(pd.read_csv(tmp_path / "d.csv")[["x", "y"]].to_numpy()).T
        ref = sm.OLS(Y, sm.add_constant(X)).fit()
        # reference library: statsmodels OLS on the log10 values
        assert fits.loc["ols", "slope"] == pytest.approx(ref.params[1], rel=1e-9)
        assert (tmp_path / "o" / "figures" / "scaling.png").is_file()

    def test_a_figure_failure_is_a_note_not_a_failed_run(self, tmp_path, write_config,
                                                          capsys, monkeypatch):
        from dataclasses import replace
        from scaling.render.figure_kinds import FIGURES

        def broken(result, *, size="single", **kwargs):
            raise OverflowError("int too large to convert to float")

        monkeypatch.setitem(FIGURES, "exponents", replace(FIGURES["exponents"], maker=broken))
        (tmp_path / "d.csv").write_text("m,r\n1,2\n2,3.1\n4,5.2\n8,9\n16,15\n")
        cfg = write_config("data: {file: d.csv, x: m, y: r}\nfigures: {dpi: 60}\n")
        code, out, err = _run(["run", cfg, "--out", tmp_path / "o"], capsys)
        assert code == 0, err
        assert "note: Figure 'exponents' was not drawn (OverflowError" in out
        assert "Figure 'exponents' was not drawn" in (tmp_path / "o" / "summary.md").read_text()
        doc = json.loads((tmp_path / "o" / "results.json").read_text())
        assert any("Figure 'exponents' was not drawn" in w for w in doc["warnings"])
        assert not (tmp_path / "o" / "figures" / "exponents.png").exists()
        assert (tmp_path / "o" / "figures" / "scaling.png").is_file()


class TestErrors:
    @pytest.mark.parametrize("text, pattern", [
        ("data: {file: d.csv, x: m, y: r\n", r"YAML syntax error at line"),
        ("data: {file: d.csv, x: m, y: r}\nmodel: {methds: [ols]}\n",
         r"model.methds: unknown key; did you mean 'methods'\?"),
        ("data: {file: d.csv, x: m, y: r}\nmodel: {confidence: [1]}\n",
         r"model.confidence: expected a number"),
        ("data: {file: d.csv, x: mass, y: r}\n", r"column 'mass' \(data.x\) not found"),
        ("data: {file: nothere.csv, x: m, y: r}\n", r"nothere.csv: data file not found"),
        ("data: {file: zeros.csv, x: m, y: r}\n", r"no usable rows"),
        ("data: {file: twice.csv, x: m, y: r}\n",
         r"twice.csv: the header line names the same column more than once: 'm' \(data.x\)"),
        ("data: {file: titled.csv, x: m, y: r}\n",
         r"titled.csv: column .m. \(data.x\) not found; line 2 holds the columns m, r: "
         r"set data.skip_rows: 1\. Columns are: Measured 2026"),
    ])
    def test_bad_input_exit_2(self, tmp_path, write_config, capsys, text, pattern):
        (tmp_path / "d.csv").write_text("m,r\n1,2\n2,3\n3,5\n")
        (tmp_path / "zeros.csv").write_text("m,r\n0,2\n0,3\n")
        (tmp_path / "twice.csv").write_text("m,r,m\n1,2,5\n2,3,5\n3,5,5\n")
        (tmp_path / "titled.csv").write_text("Measured 2026\nm,r\n1,2\n2,3\n3,5\n")
        cfg = write_config(text)
        code, _, err = _run(["run", cfg, "--out", tmp_path / "o"], capsys)
        assert code == 2
        assert err.startswith("error: ")
        assert len(err.strip().splitlines()) == 1
        import re
        assert re.search(pattern, err), err
        assert not (tmp_path / "o").exists()

    def test_missing_config(self, tmp_path, capsys):
        code, _, err = _run(["run", tmp_path / "none.yaml"], capsys)
        assert code == 2 and "config file not found" in err

    def test_usage_error(self, capsys):
        code, _, err = _run(["run"], capsys)
        assert code == 2 and "error:" in err

    def test_no_command(self, capsys):
        code, _, _ = _run([], capsys)
        assert code == 2


class TestCheck:
    @pytest.mark.parametrize("table, x, pattern", [
        ("m,r\n5,1\n5,2\n5,3\n5,4\n", "m",
         r"no line can be fitted: x \(m\) has the same value \(5\) in all 4 points"),
        ("m,r\n1,3\n2,3\n4,3\n8,3\n", "m",
         r"no line can be fitted: y \(r\) has the same value \(3\) in all 4 points"),
        ("m,r\n1,2\n2,3\nx,4\n", "m",
         r"no line can be fitted: only 2 usable points \(a line needs at least 3\); "
         r"1 rows were dropped"),
        ("h,d,r\n1,5,1\n2,5,2\n3,5,3\n4,5,4.5\n5,5,6\n", "[h, d]",
         r"the logs of the predictors \(h, d\) are collinear \(or one is constant\)"),
    ], ids=["constant_x", "constant_y", "two_points", "constant_predictor"])
    def test_check_refuses_what_run_refuses_with_the_same_line(self, tmp_path, write_config,
                                                               capsys, table, x, pattern):
        import re
        (tmp_path / "d.csv").write_text(table)
        methods = "[ols]" if x.startswith("[") else "[ols, sma]"
        cfg = write_config(f"data: {{file: d.csv, x: {x}, y: r}}\n"
                           f"model: {{methods: {methods}}}\nfigures: {{formats: []}}\n")
        code_run, _, err_run = _run(["run", cfg, "--out", tmp_path / "o"], capsys)
        code_check, out_check, err_check = _run(["check", cfg], capsys)
        assert code_run == code_check == 2
        assert err_check == err_run and len(err_check.splitlines()) == 1
        assert re.search(pattern, err_check) and err_check.startswith("error: ")
        assert "data OK" not in out_check

    def test_check_demo(self, capsys):
        code, out, _ = _run(["check", DEMO_CONFIG], capsys)
        assert code == 0
        assert "298 data rows read, 11 dropped, 40 points" in out
        assert "5 groups" in out

    def test_check_bad(self, write_config, capsys):
        code, _, err = _run(["check", write_config("data: {x: m, y: r}\n")], capsys)
        assert code == 2 and "data.file: is required" in err


class TestInit:
    @pytest.mark.parametrize("example", ["basic", "groups", "length_weight"])
    def test_init_writes_valid_config(self, tmp_path, capsys, example):
        from scaling.io.config import load_config
        path = tmp_path / f"{example}.yaml"
        code, out, _ = _run(["init", "--example", example, path], capsys)
        assert code == 0 and path.exists()
        load_config(path)  # the starter itself validates

    def test_init_refuses_existing(self, tmp_path, capsys):
        path = tmp_path / "c.yaml"
        path.write_text("mine")
        code, _, err = _run(["init", path], capsys)
        assert code == 2 and "already exists" in err
        assert path.read_text() == "mine"

    def test_init_unknown_example(self, tmp_path, capsys):
        code, _, err = _run(["init", "--example", "grups", tmp_path / "c.yaml"], capsys)
        assert code == 2 and "did you mean 'groups'" in err


class TestInstalledCommand:
    def test_version(self):
        exe = shutil.which("scaling", path=str(Path(sys.executable).parent))
        if exe is None:
            pytest.skip("the scaling console script is not installed beside this Python")
        proc = subprocess.run([exe, "--version"], capture_output=True, text=True)
        assert proc.returncode == 0 and proc.stdout.strip() == f"scaling {__version__}"

    def test_error_through_real_command(self, tmp_path):
        exe = shutil.which("scaling", path=str(Path(sys.executable).parent))
        if exe is None:
            pytest.skip("the scaling console script is not installed beside this Python")
        proc = subprocess.run([exe, "check", str(tmp_path / "x.yaml")],
                              capture_output=True, text=True)
        assert proc.returncode == 2
        assert proc.stderr.startswith("error: ") and "Traceback" not in proc.stderr


class TestReadme:
    def test_quick_start_has_two_commands_and_ci_runs_the_second(self):
        import re
        text = (ROOT / "README.md").read_text()
        section = text.split("## Quick start", 1)[1].split("\n## ", 1)[0]
        blocks = re.findall(r"```(?:bash|sh|console)?\n(.*?)```", section, re.S)
        assert len(blocks) == 2
        assert "scaling run configs/demo.yaml" in blocks[0]
        assert "pytest" in blocks[1]
        ci = (ROOT / ".ci" / "run").read_text()
        assert "blocks[1]" in ci  # .ci/run executes the README's second block verbatim


class TestCliStages:
    def test_mistyped_key_exit_2(self, tmp_path, write_config, capsys):
        (tmp_path / "d.csv").write_text("m,r\n1,2\n2,3\n3,5\n4,6\n")
        cfg = write_config("data: {file: d.csv, x: m, y: r}\nresampling: {permutatons: 99}\n")
        code = main(["run", str(cfg), "--out", str(tmp_path / "o")])
        err = capsys.readouterr().err
        assert code == 2
        assert err.startswith("error: ") and len(err.strip().splitlines()) == 1
        assert "resampling.permutatons: unknown key; did you mean 'permutations'?" in err
        cfg = write_config("data: {file: d.csv, x: m, y: r}\ndiagnostics: {enabld: false}\n")
        code = main(["run", str(cfg), "--out", str(tmp_path / "o")])
        assert code == 2 and "did you mean 'enabled'?" in capsys.readouterr().err

    def test_progress_silent_when_not_a_terminal(self, small_csv, write_config, capsys):
        # Under pytest stderr is not a terminal: no progress bar even without --quiet.
        cfg = write_config(f"data: {{file: {small_csv}, x: mass, y: rate, group: grp}}\n"
                           "model: {methods: [sma]}\nresampling: {bootstrap: 199, "
                           "permutations: 99}\nfigures: {formats: [png], kinds: [scaling]}\n")
        code = main(["run", str(cfg), "--out", str(small_csv.parent / "o")])
        out = capsys.readouterr()
        assert code == 0 and out.err == ""
        assert "Bootstrap (199 resamples within grp groups, BCa, seed 1)" in out.out


_FREED = r"""
import sys
import numpy as np
import pyarrow
from scaling import cli

def rss():
    return int([l.split()[1] for l in open("/proc/self/status") if l.startswith("VmRSS")][0])

if sys.argv[1] == "run":   # the command, on a small table
    assert cli.main(["run", sys.argv[2], "--quiet", "--force"]) == 0
start = rss()
for _ in range(3):   # a 16 MB column, every page touched, made and freed
    a = np.ones(2_000_000)
    del a
print(rss() - start, pyarrow.default_memory_pool().backend_name)
"""


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="glibc's malloc")
def test_run_command_gives_freed_columns_back_to_the_system(tmp_path):
    # exact law of the setting (glibc's M_MMAP_THRESHOLD): a freed 16 MB column leaves the
    # process when the run's setting is in force, and stays in the heap without it
    # (common practice, no source: glibc raises its threshold to the largest block freed)
    pd.DataFrame({"m": [1.0, 2.0, 4.0, 8.0, 16.0], "r": [1.1, 1.9, 3.2, 5.9, 9.5]}).to_csv(
        tmp_path / "t.csv", index=False)
    cfg = tmp_path / "c.yaml"
    cfg.write_text("data:\n  file: t.csv\n  x: m\n  y: r\nfigures:\n  formats: []\n"
                   "output:\n  dir: out\n", encoding="utf-8")

    def child(mode):
        out = subprocess.run([sys.executable, "-c", _FREED, mode, str(cfg)],
                             capture_output=True, text=True, check=True).stdout.split()
        return int(out[0]), out[1]

    kept, pool = child("run")
    assert kept < 4_000 and pool == "system"   # kB
    kept, pool = child("import")
    assert kept > 15_000 and pool != "system"
