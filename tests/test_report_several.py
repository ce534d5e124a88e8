"""The report of a run with several predictors, read as a user reads it.

The forestry worked example (configs/forestry.yaml, invented data stated in
demo_data/make_forestry.py) is run into a temporary folder, with and without
``data.group``; its report.html is parsed with the standard library's HTML
parser and checked against the CSV files the same run wrote (internal
consistency: the page must show what the tables hold).
"""

from __future__ import annotations

import base64
import re
from html.parser import HTMLParser
from pathlib import Path

import pandas as pd
import pytest
import yaml

import scaling

ROOT = Path(__file__).resolve().parents[1]


class _Page(HTMLParser):
    """Visible text, the embedded images and every table (name -> rows of cells)."""

    def __init__(self):
        super().__init__()
        self.text, self.images, self.tables = [], [], {}
        self._skip = 0
        self._table = None
        self._row = None
        self._cell = None

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if tag in ("style", "pre"):
            self._skip += 1
        if tag == "img":
            self.images.append(attrs.get("src", ""))
        if tag == "table":
            self._table = attrs.get("data-table", "")
            self.tables[self._table] = []
        if tag == "tr" and self._table is not None:
            self._row = []
        if tag in ("td", "th") and self._row is not None:
            self._cell = []

    def handle_endtag(self, tag):
        if tag in ("style", "pre"):
            self._skip -= 1
        if tag in ("td", "th") and self._cell is not None:
            self._row.append("".join(self._cell).strip())
            self._cell = None
        if tag == "tr" and self._row is not None:
            self.tables[self._table].append(self._row)
            self._row = None
        if tag == "table":
            self._table = None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell.append(data)
        if not self._skip:
            self.text.append(data)


def _run(tmp_path: Path, name: str, group: str | None = None):
    raw = yaml.safe_load((ROOT / "configs" / "forestry.yaml").read_text())
    raw["data"]["file"] = str(ROOT / "demo_data" / "forest_trees.csv")
    raw["prediction"]["from"] = str(ROOT / "demo_data" / "forest_plot.csv")
    if group:
        raw["data"]["group"] = group
    out = tmp_path / name
    raw["output"]["dir"] = str(out)
    path = tmp_path / f"{name}.yaml"
    path.write_text(yaml.safe_dump(raw))
    scaling.run_config(path, quiet=True)
    page = _Page()
    page.feed((out / "report.html").read_text(encoding="utf-8"))
    return out, page


@pytest.fixture(scope="module")
def pooled(tmp_path_factory):
    return _run(tmp_path_factory.mktemp("forestry"), "pooled")


@pytest.fixture(scope="module")
def grouped(tmp_path_factory):
    return _run(tmp_path_factory.mktemp("forestry"), "grouped", group="species_group")


def _as_frame(rows):
    return pd.DataFrame(rows[1:], columns=rows[0])


def _digits(text: str) -> int:
    return len(text.split(".")[1]) if "." in text else 0


def _same_p(shown: str, value: float) -> bool:
    """The printed p equals the CSV's p to the printed digits ('< 0.001': below it)."""
    shown = shown.strip()
    if shown[:1] in "<≤":
        return value <= float(shown[1:].strip())
    shown = shown.lstrip("= ")
    if "e" in shown:
        digits = _digits(shown.split("e")[0])
        return float(f"{value:.{digits}e}") == float(shown)
    return round(value, _digits(shown)) == pytest.approx(float(shown), abs=1e-12)


@pytest.mark.parametrize("which", ["pooled", "grouped"])
class TestSeveralPredictorReport:
    def _get(self, request, which):
        return request.getfixturevalue(which)

    def test_every_figure_file_is_embedded_once(self, request, which):
        out, page = self._get(request, which)
        pngs = sorted((out / "figures").glob("*.png"))
        assert [p.stem for p in pngs] == ["partial_diameter_cm", "partial_height_m"]
        for png in pngs:
            data = base64.b64encode(png.read_bytes()).decode("ascii")
            assert sum(src.endswith(data) for src in page.images) == 1, png.name
        assert len(page.images) == len(pngs)   # exact: nothing else, no one-predictor figures

    def test_no_python_repr_reaches_the_page(self, request, which):
        _, page = self._get(request, which)
        text = "".join(page.text)
        for bad in ("('", "**", "(('"):
            assert bad not in text
        assert "diameter_cm (cm), height_m (m)" in text
        # the hypotheses are a cylinder's 2 and 1: no sentence about 3/4 or 2/3
        assert "3/4 or 2/3" not in text

    def test_tables_have_a_term_column(self, request, which):
        _, page = self._get(request, which)
        for name in ("fits", "exponent tests", "slope_tests", "diagnostics"):
            assert "term" in page.tables[name][0], name

    def test_each_p_in_the_tables_equals_the_csv(self, request, which):
        out, page = self._get(request, which)
        csv = pd.read_csv(out / "slope_tests.csv", keep_default_na=False)
        shown = _as_frame(page.tables["slope_tests"])
        assert len(shown) == len(csv)
        for (_, s), (_, c) in zip(shown.iterrows(), csv.iterrows()):
            assert (s["term"], s["hypothesis"]) == (c["term"], c["hypothesis"])
            # internal consistency: the page's p is slope_tests.csv's, to the printed digits
            assert _same_p(s["p_value"], float(c["p_value"]))
        table = _as_frame(page.tables["exponent tests"])
        n_checked = 0
        for _, r in table.iterrows():
            scope, group = r["line"], r.get("group", "")
            row = csv[(csv["scope"] == scope) & (csv["group"] == group)
                      & (csv["term"] == r["term"]) & (csv["hypothesis"] == "cylinder")]
            m = re.search(r"p (= |< |≤ )([0-9.e-]+)", r["vs cylinder"])
            assert m and len(row) == 1
            # internal consistency: each cell of the exponent table is its own test's p
            assert _same_p(m.group(1).strip("= ") + m.group(2), float(row["p_value"].iloc[0]))
            n_checked += 1
        assert n_checked == len(csv)
        diag = pd.read_csv(out / "diagnostics.csv", keep_default_na=False)
        shown = _as_frame(page.tables["diagnostics"])
        for (_, s), (_, c) in zip(shown.iterrows(), diag.iterrows()):
            if c["p_value"] != "":
                # internal consistency: the page's p is diagnostics.csv's
                assert _same_p(s["p_value"], float(c["p_value"]))

    def test_diagnostics_list_collinearity(self, request, which):
        out, _ = self._get(request, which)
        diag = pd.read_csv(out / "diagnostics.csv")
        # with groups, the common-exponents model (the Answer's) is checked too
        scopes = ["pooled", "common"] if which == "grouped" else ["pooled"]
        assert list(dict.fromkeys(diag["scope"])) == scopes
        for scope in scopes:
            d = diag[diag["scope"] == scope]
            # exact by construction: one VIF per predictor, one condition number per model
            assert list(d.loc[d["test"] == "VIF", "term"]) == ["diameter_cm", "height_m"]
            assert (d["test"] == "condition number").sum() == 1
        assert set(diag["check"]) == {"normality", "constant_variance", "curvature",
                                      "influence", "leverage", "collinearity"}


class TestGroupedReport:
    def test_group_p_values_equal_the_csv(self, grouped):
        out, page = grouped
        csv = pd.read_csv(out / "group_tests.csv")
        shown = _as_frame(page.tables["group_tests"])
        assert list(shown["test"]) == ["slopes_equal", "intercepts_equal"]
        for (_, s), (_, c) in zip(shown.iterrows(), csv.iterrows()):
            # internal consistency: the page's p is group_tests.csv's
            assert _same_p(s["p_value"], float(c["p_value"]))

    def test_answer_has_three_sentences_on_common_exponents(self, grouped):
        out, _ = grouped
        answer = (out / "summary.md").read_text().split("## Answer")[1].split("##")[0]
        assert "common OLS exponents" in answer
        assert "elevation" in answer
        fits = pd.read_csv(out / "fits.csv", keep_default_na=False)
        common = fits[fits["scope"] == "common"]
        assert list(common["term"]) == ["diameter_cm", "height_m"]
        for b in common["slope"]:
            # internal consistency: the Answer states fits.csv's common exponents
            # (their values against statsmodels: tests/test_several_groups.py)
            assert f"{b:.3f}" in answer
        groups = fits[fits["scope"] == "group"]
        # the species groups written by demo_data/make_forestry.py (invented demo data)
        assert sorted(set(groups["group"])) == ["ash", "beech", "maple", "oak"]
