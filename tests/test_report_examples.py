"""report.html of the worked examples, read back as a reader sees it: every figure the run
wrote embedded once, no Python repr text on the page, every p in a table equal to the CSV's
to the printed digits, and the cautions that fit each example's data."""
from __future__ import annotations

import base64
import re
from html.parser import HTMLParser
from pathlib import Path

import pandas as pd
import pytest

from scaling.render.wording import at_floor, format_p, p_text
from scaling.run.pipeline import run_config, write_outputs

from helpers_figures import demo, with_figures

ROOT = Path(__file__).resolve().parents[1]
_P_COLUMN = re.compile(r"^(p|p_value|p_adjusted|p_adj|p_.*value.*|.*_p)$")


class Page(HTMLParser):
    """Images (their base64 data), tables (name, header, rows of cell text) and the text."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.images, self.tables, self.text = [], [], []
        self._cell = None
        self._in_style = self._in_pre = False

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "img" and a.get("src", "").startswith("data:image/png;base64,"):
            self.images.append(a["src"].split(",", 1)[1])
        elif tag == "table":
            self.tables.append({"name": a.get("data-table", ""), "head": [], "rows": []})
        elif tag == "tr" and self.tables:
            self._row = []
        elif tag in ("td", "th") and self.tables:
            self._cell = []
        elif tag == "style":
            self._in_style = True
        elif tag == "pre":
            self._in_pre = True

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._cell is not None:
            self._row.append("".join(self._cell).strip())
            self._cell = None
        elif tag == "tr" and self.tables:
            table = self.tables[-1]
            if not table["head"]:
                table["head"] = self._row
            else:
                table["rows"].append(self._row)
        elif tag == "style":
            self._in_style = False
        elif tag == "pre":
            self._in_pre = False

    def handle_data(self, data):
        if self._cell is not None:
            self._cell.append(data)
        if not (self._in_style or self._in_pre):   # the config as read is YAML, not prose
            self.text.append(data)


def _page(out: Path) -> Page:
    page = Page()
    page.feed((out / "report.html").read_text(encoding="utf-8"))
    page.close()
    return page


def _run(name: str, tmp_path_factory):
    out = tmp_path_factory.mktemp(name) / "out"
    return run_config(ROOT / "configs" / f"{name}.yaml", out=out, quiet=True)


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    done = {name: _run(name, tmp_path_factory)
            for name in ("palaeo", "palaeo_forward", "fisheries")}
    # the demo run is shared with the figure tests (computed once); written here as PNGs
    done["demo"] = write_outputs(with_figures(demo(), dpi=72, formats=("png",)),
                                 tmp_path_factory.mktemp("demo") / "out")
    return done


EXAMPLES = ("palaeo", "palaeo_forward", "fisheries", "demo")


@pytest.mark.parametrize("name", EXAMPLES)
class TestWorkedExampleReports:
    def test_every_figure_file_embedded_once(self, runs, name):
        out = runs[name].out_dir
        page = _page(out)
        files = sorted((out / "figures").glob("*.png"))
        assert files
        for f in files:
            data = base64.b64encode(f.read_bytes()).decode("ascii")
            assert page.images.count(data) == 1, f.name
        assert len(page.images) == len(files)

    def test_no_python_repr_reaches_the_page(self, runs, name):
        page = _page(runs[name].out_dir)
        text = " ".join(page.text)
        assert "('" not in text and "**" not in text
        for table in page.tables:
            cells = " ".join(" ".join(r) for r in table["rows"]) + " ".join(table["head"])
            assert "('" not in cells and "**" not in cells, table["name"]

    def test_every_p_in_a_table_equals_the_csv(self, runs, name):
        out = runs[name].out_dir
        page = _page(out)
        checked = 0
        for table in page.tables:
            path = out / f"{table['name']}.csv"
            columns = [c for c in table["head"] if _P_COLUMN.match(c)]
            if not path.is_file() or not columns:
                continue
            csv = pd.read_csv(path, keep_default_na=False, na_values=[""])
            for column in columns:
                j = table["head"].index(column)
                shown = [row[j] for row in table["rows"]]
                # internal consistency: the page writes the CSV's value by format_p, after
                # "≤ " where the row's p sits at the floor of its draws (p_method)
                floor = (at_floor(csv["p_value"], csv["p_method"])
                         if {"p_value", "p_method"} <= set(csv.columns)
                         and column in ("p_value", "p_adjusted")
                         else [False] * len(csv))
                expected = [("≤ " if f else "") + format_p(float(v)) if pd.notna(v) else "–"
                            for v, f in zip(csv[column].tolist()[:len(shown)], floor)]
                assert shown == expected, (table["name"], column)
                checked += len(shown)
        assert checked > 0


class TestAnswerGroupTable:
    def test_answer_group_table_p_equals_slope_tests(self, runs):
        out = runs["fisheries"].out_dir   # the example whose stocks differ in slope
        page = _page(out)
        tables = [t for t in page.tables if t["name"].endswith("exponent of each group")]
        (table,) = tables
        tests = pd.read_csv(out / "slope_tests.csv")
        method = table["name"].split()[0].lower()
        word = table["head"][0]
        for row in table["rows"]:
            for column, cell in zip(table["head"], row):
                if not column.startswith("vs "):
                    continue
                t = tests[(tests["scope"] == "group") & (tests["group"] == row[0])
                          & (tests["method"] == method)]
                assert len(t) == 1, (word, row[0])
                # internal consistency: the cell's p is the group's own test's p
                assert f"({p_text(float(t['p_value'].iloc[0]))})" in cell


class TestCautionsFitTheData:
    def test_stocks_of_one_species_get_neither_caution(self, runs):
        text = (runs["fisheries"].out_dir / "report.html").read_text(encoding="utf-8")
        assert "Species share ancestry" not in text
        assert "an allometric fit is not a dose" not in text

    def test_rates_across_clades_of_species_get_both(self, runs):
        text = (runs["demo"].out_dir / "report.html").read_text(encoding="utf-8")
        assert "Species share ancestry" in text
        assert "an allometric fit is not a dose" in text

    def test_bone_against_mass_is_not_a_dose(self, runs):
        for name in ("palaeo", "palaeo_forward"):
            text = (runs[name].out_dir / "report.html").read_text(encoding="utf-8")
            assert "an allometric fit is not a dose" not in text, name

    def test_both_palaeo_runs_point_to_the_comparison_of_routes(self, runs):
        for name in ("palaeo", "palaeo_forward"):
            for file in ("report.html", "summary.md"):
                text = (runs[name].out_dir / file).read_text(encoding="utf-8")
                assert "inverse_vs_forward.md" in text.replace("\\_", "_"), (name, file)

    def test_predicted_values_are_in_the_unit_they_are_written_in(self, runs):
        text = (runs["fisheries"].out_dir / "summary.md").read_text(encoding="utf-8")
        # model.units: y fitted and predicted in kg, not in the column's g
        assert "Each prediction (weight\\_g) is in kg" in text
        assert "1 rows" not in text
