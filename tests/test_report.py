"""report.html / summary.md / fits.tex: self-contained, escaped, every table present."""
from __future__ import annotations

import base64
import html
import re
from dataclasses import replace
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from scaling.render.wording import format_p
from scaling.run.pipeline import CAUTION, write_outputs
from scaling.render.report import (build_report, format_value, latex_escape, markdown_escape,
                            render_fits_tex, write_report)

from helpers_figures import SCRIPT_GROUP, demo, simulated, with_figures

VOID = {"meta", "img", "br", "hr", "link", "input", "source", "wbr", "col", "area", "base"}


class Checker(HTMLParser):
    """Collects tags and attributes; records nesting errors instead of ignoring them."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.stack, self.errors, self.starts, self.attrs = [], [], [], []
        self.text = []

    def handle_starttag(self, tag, attrs):
        self.starts.append(tag)
        self.attrs.append((tag, dict(attrs)))
        if tag not in VOID:
            self.stack.append(tag)

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"unexpected </{tag}> with open {self.stack[-3:]}")
        else:
            self.stack.pop()

    def handle_data(self, data):
        self.text.append(data)


def parse(text: str) -> Checker:
    c = Checker()
    c.feed(text)
    c.close()
    return c


def extra_tables(result):
    """Tables the later stages add, with invented values (rendering only)."""
    groups = sorted(result.data.points["group"].unique())
    t = dict(result.tables)
    t["group_tests"] = pd.DataFrame({
        "method": ["sma"] * 3, "test": ["slopes_equal", "intercepts_equal", "shift_along_axis"],
        "statistic": [3.1, 12.5, 0.4], "df": [1.0, 1.0, 1.0], "p_value": [0.078, 0.0004, 0.53],
        "common_slope": [0.75, np.nan, np.nan], "p_method": ["chi2"] * 3})
    t["pairwise_tests"] = pd.DataFrame({"group_1": [groups[0]], "group_2": [groups[-1]],
                                        "method": ["sma"], "p_value": [0.2]})
    t["group_means"] = pd.DataFrame({"group": groups, "n": [30] * len(groups),
                                     "mean_log_x": [1.0] * len(groups),
                                     "mean_log_y": [1.0] * len(groups),
                                     "se_log_x": [0.1] * len(groups),
                                     "se_log_y": [0.1] * len(groups)})
    t["diagnostics"] = pd.DataFrame({"scope": ["pooled"], "check": ["curvature"],
                                     "p_value": [0.4]})
    t["_private"] = {"not": "a table"}
    return replace(result, tables=t)


@pytest.fixture(scope="module")
def script_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("script")
    result = simulated(folder, groups=["plain", SCRIPT_GROUP], decades=(0, 3), n=15,
                       title="Title with <b>markup</b> & more")
    result = extra_tables(result)
    out = folder / "out"
    return write_outputs(result, out)


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    # The demo run is a smoke test of rendering: facts of the file (rows read, the
    # planted exclusions), never its statistical verdicts.
    out = tmp_path_factory.mktemp("demo") / "out"
    # PNG only: the report embeds the PNGs; the demo's PDFs are not read here
    return write_outputs(with_figures(demo(), dpi=72, formats=("png",)), out)


class TestWriteReport:
    def test_returns_relative_paths(self, script_run, tmp_path):
        written = write_report(script_run, tmp_path, [])
        assert written == [Path("report.html"), Path("summary.md"), Path("fits.tex")]
        assert all((tmp_path / p).stat().st_size > 0 for p in written)

    def test_html_parses_and_nests(self, script_run):
        c = parse((script_run.out_dir / "report.html").read_text(encoding="utf-8"))
        assert c.errors == [] and c.stack == []
        assert c.starts[0] == "html"

    def test_self_contained(self, script_run):
        c = parse((script_run.out_dir / "report.html").read_text(encoding="utf-8"))
        assert "script" not in c.starts          # no scripts at all
        for tag, attrs in c.attrs:
            for key in ("src", "href"):
                value = attrs.get(key)
                if value is None:
                    continue
                assert "http://" not in value and "https://" not in value and \
                    not value.startswith("//")
                if key == "src":
                    assert value.startswith("data:image/png;base64,")
                else:
                    assert value.startswith("#") or ":" not in value   # relative only

    def test_figures_embedded_as_written(self, script_run):
        c = parse((script_run.out_dir / "report.html").read_text(encoding="utf-8"))
        srcs = [a["src"] for t, a in c.attrs if t == "img"]
        kinds = script_run.config.figures.kinds
        assert len(srcs) == len(kinds)
        for src, kind in zip(srcs, kinds):
            png = base64.b64decode(src.split(",", 1)[1])
            assert png == (script_run.out_dir / f"figures/{kind}.png").read_bytes()

    def test_figures_rendered_when_no_png_written(self, tmp_path):
        result = with_figures(demo(grouped=False), formats=("svg",), kinds=("exponents",),
                              dpi=60)
        run = write_outputs(result, tmp_path / "out")
        c = parse((run.out_dir / "report.html").read_text(encoding="utf-8"))
        (src,) = [a["src"] for t, a in c.attrs if t == "img"]
        assert base64.b64decode(src.split(",", 1)[1])[:8] == b"\x89PNG\r\n\x1a\n"

    def test_group_name_escaped_never_raw(self, script_run):
        text = (script_run.out_dir / "report.html").read_text(encoding="utf-8")
        assert SCRIPT_GROUP not in text
        assert html.escape(SCRIPT_GROUP) in text
        assert "<b>markup</b>" not in text and "&lt;b&gt;markup&lt;/b&gt;" in text
        md = (script_run.out_dir / "summary.md").read_text(encoding="utf-8")
        assert SCRIPT_GROUP not in md and "&lt;script&gt;" in md
        tex = (script_run.out_dir / "fits.tex").read_text(encoding="utf-8")
        assert SCRIPT_GROUP not in tex and r"\textless{}script\textgreater{}" in tex

    def test_every_table_present(self, script_run):
        text = (script_run.out_dir / "report.html").read_text(encoding="utf-8")
        names = ["fits", "slope_tests"] + [k for k, v in script_run.tables.items()
                                           if isinstance(v, pd.DataFrame)
                                           and not k.startswith("_")]
        assert {"group_tests", "pairwise_tests", "group_means", "diagnostics",
                "predictions"} <= set(names)
        for name in names:
            assert f'data-table="{name}"' in text, name
        md = (script_run.out_dir / "summary.md").read_text(encoding="utf-8")
        for name in names:
            assert f"*{markdown_escape(name)}*" in md, name

    def test_fits_rows_and_numbers(self, script_run):
        text = (script_run.out_dir / "report.html").read_text(encoding="utf-8")
        fits = script_run.fits
        table = text.split('data-table="fits"', 1)[1].split("</table>", 1)[0]
        assert table.count("<tr>") + table.count('<tr class="flag">') == len(fits) + 1
        # rendered with 4 decimals at the slopes' size (rounding only when rendering)
        for slope in fits["slope"].dropna():
            assert f">{slope:.4f}<" in table
        for note in fits.loc[fits["slope"].isna(), "note"]:
            assert html.escape(note) in table      # not estimable: the reason is shown

    def test_extrapolated_predictions_highlighted(self, script_run):
        text = (script_run.out_dir / "report.html").read_text(encoding="utf-8")
        preds = script_run.tables["predictions"]
        table = text.split('data-table="predictions"', 1)[1].split("</table>", 1)[0]
        n_flag = int(preds["extrapolated"].sum())
        assert n_flag > 0        # x = 10 000 lies past the data (x <= 1 000)
        assert table.count('<tr class="flag">') == n_flag
        assert table.count("(extrapolated)") == n_flag

    def test_sentences_cautions_manifest(self, script_run):
        text = (script_run.out_dir / "report.html").read_text(encoding="utf-8")
        assert html.escape(CAUTION) in text                     # verbatim
        fit = script_run.fit("sma")
        t = fit.test_slope(2 / 3)
        side = "above" if fit.slope > 2 / 3 else "below"
        # the exponent tests are one table (fit x hypothesis), not one bullet per test
        from scaling.render.answer import headline_of
        head = headline_of(script_run)
        row = head.exponent_table.query("line == 'pooled' and method == 'SMA'").iloc[0]
        assert row["exponent"] == fit.slope          # internal consistency
        assert html.escape(row["vs 2/3"]) in text
        assert row["vs 2/3"].startswith(side if t.p_value < 0.05 else "not different")
        assert "Pooled: the SMA exponent" not in text
        # the answer opens the report, before the summary
        assert 0 <= text.index('<section id="answer">') < text.index('<section id="summary">')
        assert html.escape(head.sentences[0]) in text
        assert script_run.manifest["input_sha256"] in text
        assert "three_quarters: 0.75" in text                   # config as YAML
        assert "SMA slopes equal: consistent with a common slope" in text
        assert "SMA intercepts equal: evidence that" in text
        md = (script_run.out_dir / "summary.md").read_text(encoding="utf-8")
        assert markdown_escape(CAUTION) in md

    def test_demo_report(self, demo_run):
        text = (demo_run.out_dir / "report.html").read_text(encoding="utf-8")
        c = parse(text)
        assert c.errors == []
        body = " ".join(c.text)
        assert "Rows read: 298" in body           # demo_data/make_demo.py writes 298 rows
        assert "excluded: clade is 'outgroup'" in body
        assert "Ridgeback (n = 8)" in body

    def test_cautions_where_numbers_are_used(self, demo_run):
        text = (demo_run.out_dir / "report.html").read_text(encoding="utf-8")
        assert "an allometric fit is not a dose" in text
        assert "median y at a given x" in text
        assert "does not by itself confirm a mechanism" in text
        assert "phylogenetic correction" in text            # the demo has groups
        assert "a new species mean" in text                 # average_within: species
        assert "+00:00" not in text and " UTC" in text

    def test_long_tables_folded_but_predictions_open(self, demo_run):
        import re
        from scaling.render.report import FOLD_ROWS
        text = (demo_run.out_dir / "report.html").read_text(encoding="utf-8")
        folded = re.findall(r'<details class="table"><summary>([a-z_]+): (\d+) rows', text)
        assert folded and all(int(n) > FOLD_ROWS for _, n in folded)
        # predictions carry the extrapolation flags: never hidden, however long
        # (the demo predicts from OLS only, so its table is doubled to be long)
        from dataclasses import replace
        from scaling.render.report import build_report, render_html
        long = pd.concat([demo_run.tables["predictions"]] * 2, ignore_index=True)
        assert len(long) > FOLD_ROWS
        run = replace(demo_run, tables={**demo_run.tables, "predictions": long})
        html = render_html(run, build_report(run, demo_run.out_dir, demo_run.files))
        folded = re.findall(r'<details class="table"><summary>([a-z_]+): (\d+) rows', html)
        assert "predictions" not in {name for name, _ in folded}


class TestBuildReport:
    def test_sections_in_order(self, script_run):
        titles = [s.title for s in build_report(script_run, script_run.out_dir,
                                                list(p.relative_to(script_run.out_dir)
                                                     for p in script_run.files))]
        assert titles[:5] == ["Answer", "Summary", "Data", "Figures", "Fits"]
        assert titles[-3:] == ["Cautions", "Files", "Manifest"]
        assert "Group comparisons" in titles and "Predictions" in titles


class TestFormatValue:
    def test_values(self):
        # p-values through scaling.render.wording.format_p; others 4 significant digits (exact strings)
        assert format_value(0.00002, "p_value") == format_p(0.00002) == "< 0.0001"
        assert format_value(0.6625, "slope") == "0.6625"
        assert format_value(13447.23, "x") == "13447"
        assert format_value(np.nan, "slope") == "–"
        assert format_value(np.True_, "extrapolated") == "yes"
        assert format_value(38.0, "df") == "38"


class TestEscaping:
    def test_latex(self):
        # exact: the LaTeX special characters and their text-mode escapes
        assert latex_escape(r"a_b & 50% $x$ #1 {y} ~ ^ \ <>") == (
            r"a\_b \& 50\% \$x\$ \#1 \{y\} \textasciitilde{} \textasciicircum{} "
            r"\textbackslash{} \textless{}\textgreater{}")

    def test_markdown(self):
        assert markdown_escape("a|b *c* <d>") == r"a\|b \*c\* &lt;d&gt;"
        # CommonMark (spec 0.31, "Raw HTML"): "<" opens a tag only before a letter, "/",
        # "!" or "?", so a comparison stays plain text a reader can read.
        assert markdown_escape("p < 0.0001, p > 0.1, '<5'") == "p < 0.0001, p > 0.1, '<5'"
        assert markdown_escape("&amp; <!-- x -->") == "&amp;amp; &lt;\\!-- x --&gt;"

    def test_fits_tex_is_a_tabular(self, script_run):
        tex = render_fits_tex(script_run)
        lines = tex.splitlines()
        assert lines[1].startswith(r"\begin{tabular}") and lines[-1] == r"\end{tabular}"
        rows = [ln for ln in lines if ln.endswith(r"\\")]
        assert len(rows) == len(script_run.fits) + 1
        assert all(ln.count("&") == 8 for ln in rows)     # 9 columns
        assert tex.count("{") - tex.count(r"\{") == tex.count("}") - tex.count(r"\}")

    def test_fits_tex_writes_negative_numbers_with_a_math_minus(self, tmp_path):
        # y = 1e-5 x^0.75 with little scatter: log10 a = -5 (exact law of the simulation),
        # so the intercept and both bounds of its interval are negative
        from scaling.run.pipeline import run_config
        rng = np.random.default_rng(11)
        x = 10 ** rng.uniform(0, 3, 25)
        frame = pd.DataFrame({"mass": x, "rate": 1e-5 * x ** 0.75 * 10 ** rng.normal(0, 0.02, 25)})
        frame.to_csv(tmp_path / "neg.csv", index=False)
        result = run_config({"data": {"file": str(tmp_path / "neg.csv"), "x": "mass",
                                      "y": "rate"},
                             "model": {"methods": ["ols"]}, "figures": {"formats": []}},
                            write=False)
        assert result.fits["intercept_high"].iloc[0] < 0
        tex = render_fits_tex(result)
        row = [ln for ln in tex.splitlines() if ln.startswith("pooled")][0]
        cells = row.split(" & ")
        assert cells[6].startswith("$-$5.")                       # the intercept
        assert re.fullmatch(r"\$-\$5\.\d+ to \$-\$(5\.|4\.9)\d+", cells[7])   # its interval
        assert "---" not in tex and not re.search(r"(?<![$-])-\d", row)   # no bare minus
        assert re.fullmatch(r"0\.\d+--0\.\d+", cells[5])          # positive: the en dash


def test_a_cut_caption_table_names_the_files_that_hold_every_row():
    # common practice, no source: a pointer to the full table names a file that exists
    import pandas as pd
    from scaling.render import report_parts
    from scaling.render.report import _md_table
    from scaling.render.report_parts import Block, Section
    frame = pd.DataFrame({"group": [f"g{i}" for i in range(100)], "exponent": 0.75})
    caption = Block(kind="table", frame=frame, name="SMA exponent of each group",
                    csv="fits.csv (exponents) and slope_tests.csv (tests)")
    named = Block(kind="table", frame=frame, name="group_means")
    cut = report_parts._bounded([Section(title="Answer", blocks=[caption, named])])[0].blocks
    notes = [b.text for b in cut if b.kind == "p"]
    assert notes == [f"First {report_parts.TABLE_MAX_ROWS} of 100 rows shown; every row is in "
                     "fits.csv (exponents) and slope_tests.csv (tests).",
                     f"First {report_parts.TABLE_MAX_ROWS} of 100 rows shown; every row is in "
                     "group_means.csv."]
    assert _md_table(caption) == "*SMA exponent of each group*: 100 rows, in report.html."
    assert _md_table(named) == ("*group\\_means*: 100 rows, in [group_means.csv](group_means.csv) "
                                "(and in report.html).")
