"""Text in the exponent figures fits: titles inside the canvas, labels apart from each other
and from the tick labels, with many groups and with close hypothesised exponents.

Layout rules (common practice, no source): text stays within the figure and no two labels
overlap.  Extents are measured with matplotlib's renderer after the layout the saved file
gets, at the screen resolution and at the print resolution.
"""
from __future__ import annotations

import warnings
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
from matplotlib.text import Text

from scaling.render.figure_exponents import (SPREAD_LABEL_MAX, make_exponents,
                                             make_group_exponents)
from scaling.run.pipeline import run_config

from helpers_figures import demo

THIN = "\u2009"


@pytest.fixture(scope="module")
def many_groups(tmp_path_factory):
    """Invented: 1 000 groups of 5 points, y = a_g x^b_g with b_g spread around 3/4."""
    rng = np.random.default_rng(20)
    groups, per = 1000, 5
    g = np.repeat(np.arange(groups), per)
    slope = rng.normal(0.75, 0.08, groups)
    log_x = rng.uniform(0.0, 3.0, g.size)
    log_y = rng.normal(0.3, 0.2, groups)[g] + slope[g] * log_x + rng.normal(0, 0.03, g.size)
    path = tmp_path_factory.mktemp("many") / "many.csv"
    pd.DataFrame({"species": [f"sp{k:05d}" for k in g], "mass": 10 ** log_x,
                  "rate": 10 ** log_y}).to_csv(path, index=False)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return run_config({"data": {"file": str(path), "x": "mass", "y": "rate",
                                    "group": "species"},
                           "exponents": {"three_quarters": 0.75, "two_thirds": 0.6667},
                           "model": {"methods": ["ols"]},
                           "groups": {"compare": True, "diagnostics_max": 10}}, write=False)


def _laid_out(fig, dpi):
    fig.set_dpi(dpi)
    fig.draw_without_rendering()
    return fig.canvas.get_renderer()


def _overlap(a, b) -> bool:
    return a.x0 < b.x1 and b.x0 < a.x1 and a.y0 < b.y1 and b.y0 < a.y1


def _with_exponents(result, exponents: dict):
    return replace(result, config=replace(result.config, exponents=exponents))


class TestManyGroupsTitle:
    @pytest.mark.parametrize("dpi", [100, 300])
    def test_title_lies_within_the_figure(self, many_groups, dpi):
        fig = make_exponents(many_groups)
        renderer = _laid_out(fig, dpi)
        title = fig.axes[0]._left_title
        box = title.get_window_extent(renderer)
        # layout rule (common practice, no source): the title is inside the canvas
        assert box.x0 >= 0 and box.x1 <= fig.bbox.x1 and box.y1 <= fig.bbox.y1
        text = title.get_text().replace("\n", " ")
        # exact: the count with thin-space digit groups, and where the exponents are
        assert text.startswith(f"1{THIN}000 groups")
        assert "group_exponents figure" in text and "fits.csv" in text


class TestReferenceLabels:
    CASES = {
        "two close": {"a": 0.75, "b": 0.74},
        "two far": {"a": 0.5, "b": 1.0},
        "three close": {"a": 0.75, "b": 2 / 3, "c": 0.7},
        "three mixed": {"a": 0.75, "b": 0.74, "c": 1.0},
        "four close": {"a": 0.75, "b": 2 / 3, "c": 0.7, "d": 0.8},
        "four far": {"a": 0.25, "b": 0.5, "c": 0.75, "d": 1.0},
    }

    @staticmethod
    def _labels(fig):
        ax = fig.axes[0]
        return [t for t in ax.texts if t.get_bbox_patch() is not None]

    @pytest.mark.parametrize("case", list(CASES))
    @pytest.mark.parametrize("dpi", [100, 300])
    def test_no_two_hypothesis_labels_overlap(self, case, dpi):
        exponents = self.CASES[case]
        fig = make_exponents(_with_exponents(demo(grouped=True), exponents))
        renderer = _laid_out(fig, dpi)
        labels = self._labels(fig)
        boxes = [t.get_window_extent(renderer) for t in labels]
        # layout rule (common practice, no source): no two label boxes intersect
        assert not any(_overlap(a, b) for i, a in enumerate(boxes) for b in boxes[i + 1:])
        # every hypothesis is named exactly once (joined labels list each of theirs)
        named = [part for t in labels for part in t.get_text().split(", ")]
        assert len(named) == len(exponents)

    def test_labels_apart_when_the_axis_is_stretched(self, many_groups):
        fig = make_exponents(many_groups)
        renderer = _laid_out(fig, 100)
        labels = self._labels(fig)
        boxes = [t.get_window_extent(renderer) for t in labels]
        # layout rule (common practice, no source): no two label boxes intersect
        assert not any(_overlap(a, b) for i, a in enumerate(boxes) for b in boxes[i + 1:])
        named = sorted(part for t in labels for part in t.get_text().split(", "))
        assert named == ["2/3", "3/4"]


class TestFlaggedGroupNames:
    @pytest.mark.parametrize("dpi", [100, 300])
    def test_names_clear_of_each_other_and_the_tick_labels(self, many_groups, dpi):
        fig = make_group_exponents(many_groups)
        renderer = _laid_out(fig, dpi)
        ax = fig.axes[0]
        names = [t for t in ax.texts if t.get_text().startswith("sp")]
        assert 2 <= len(names) <= SPREAD_LABEL_MAX
        assert all(t.arrow_patch is not None for t in names)   # leader lines kept
        # the names' own boxes (an annotation's extent also spans its leader line)
        boxes = [Text.get_window_extent(t, renderer) for t in names]
        ticks = [t.get_window_extent(renderer)
                 for t in ax.get_xticklabels() + ax.get_yticklabels()
                 if t.get_visible() and t.get_text()]
        # layout rule (common practice, no source): no two boxes intersect
        assert not any(_overlap(a, b) for i, a in enumerate(boxes) for b in boxes[i + 1:])
        assert not any(_overlap(a, t) for a in boxes for t in ticks)
        axes_box = ax.get_window_extent(renderer)
        assert all(axes_box.x0 <= b.x0 and b.x1 <= axes_box.x1 for b in boxes)
