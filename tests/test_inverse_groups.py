"""Inverse prediction with groups whose slopes differ: each group's own line solved for x.

Invented data with a known truth (a simulation, allowed for a check of the
wording and the figure): y = a_g x^b_g with three groups of clearly
different exponents.  The expected x of a given y is the group's forward
line solved for x, x = base^((log y - intercept_g) / slope_g) (exact law),
from the group rows of fits.csv.
"""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

import numpy as np
import pandas as pd
import pytest
from matplotlib.colors import to_hex
from numpy.testing import assert_allclose

import scaling
from scaling.io.config import config_from_dict
from scaling.render.figure_natural import plot_natural
from scaling.render.figure_style import group_style
from scaling.render.answer import headline_of
from scaling.render.wording import number_text

GIVEN = [60.0, 150.0]
GROUPS = ("lemurs", "shrews", "voles")


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    rng = np.random.default_rng(17)
    rows = []
    for g, b in zip(GROUPS, (0.30, 0.38, 0.46)):
        mass = 10 ** rng.uniform(0, 3, 25)
        bone = 20 * mass ** b * 10 ** rng.normal(0, 0.02, 25)
        rows.append(pd.DataFrame({"clade": g, "mass_kg": mass, "bone_mm": bone}))
    path = tmp_path_factory.mktemp("inv") / "bones.csv"
    pd.concat(rows).to_csv(path, index=False)
    raw = {"data": {"file": str(path), "x": "mass_kg", "y": "bone_mm", "group": "clade",
                    "units": {"x": "kg", "y": "mm"}},
           "model": {"methods": ["ols", "sma"]}, "exponents": {"third": 1 / 3},
           "prediction": {"y": GIVEN}, "figures": {"formats": ["png"], "dpi": 60}}
    return scaling.run_config(config_from_dict(raw), write=False, quiet=True)


def _solved(run) -> dict:
    """(group, y) -> x from the group's OLS row of fits.csv solved for x (exact law)."""
    fits = run.fits
    out = {}
    for g in GROUPS:
        r = fits[(fits["scope"] == "group") & (fits["group"] == g)
                 & (fits["method"] == "ols")].iloc[0]
        for y in GIVEN:
            out[(g, y)] = 10 ** ((np.log10(y) - r["intercept"]) / r["slope"])
    return out


class TestInverseSentencePerGroup:
    def test_answer_reads_each_groups_own_line(self, run):
        head = headline_of(run)
        assert head.line == "groups"
        said = [s for s in head.sentences if s.startswith("Inverse prediction")]
        assert len(said) == 1
        text = said[0]
        assert "each clade's own OLS line solved for x" in text
        assert "pooled OLS line" not in text
        for (g, y), x in _solved(run).items():
            assert f"{g} " in text and number_text(x) in text

    def test_table_rows_equal_the_lines_solved_for_x(self, run):
        table = run.tables["inverse_predictions"]
        for (g, y), x in _solved(run).items():
            row = table[(table["scope"] == "group") & (table["group"] == g)
                        & (table["method"] == "ols") & (table["y"] == y)]
            assert_allclose(row["x"].iloc[0], x, rtol=1e-10)   # exact law

    def test_notes_say_which_row_to_read(self, run):
        from scaling.render.prediction_words import prediction_notes
        notes = prediction_notes(run.config, run.tables, run.data.units, slopes_differ=True)
        assert any("carries no clade" in n for n in notes)


class TestNaturalFigurePerGroup:
    def test_each_group_curve_and_one_marker_per_group_and_given_y(self, run):
        ax = plot_natural(run)
        curves = [ln for ln in ax.get_lines() if str(ln.get_gid()).startswith("group-curve:")]
        assert sorted(ln.get_gid().split(":", 1)[1] for ln in curves) == list(GROUPS)
        markers = [ln for ln in ax.get_lines()
                   if ln.get_gid() in ("inverse", "inverse-extrapolated")]
        assert len(markers) == len(GROUPS) * len(GIVEN)
        solved = _solved(run)
        colour = {to_hex(group_style(i)[0]): g for i, g in enumerate(sorted(GROUPS))}
        for m in markers:
            x, y = float(m.get_xdata()[0]), float(m.get_ydata()[0])
            g = colour[to_hex(m.get_markeredgecolor())]
            assert_allclose(x, solved[(g, y)], rtol=1e-10)   # exact law
        # each curve passes through its group's markers: the line solved for x
        for ln in curves:
            g = ln.get_gid().split(":", 1)[1]
            xs, ys = ln.get_xdata(), ln.get_ydata()
            for y in GIVEN:
                x = solved[(g, y)]
                if xs[0] <= x <= xs[-1]:
                    assert_allclose(np.interp(x, xs, ys), y, rtol=2e-3)
