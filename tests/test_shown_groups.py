"""Figures of many groups draw the own lines of some of them (scaling.render.figure_inputs.
shown_groups): up to GROUP_LINES_MAX groups every line; above, that many groups spread
evenly over the ranks of their exponents, in colour, the other groups' points grey, and
only the drawn groups' means, curves and predictions."""
from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
from matplotlib.collections import LineCollection

from scaling.render import figure_inputs as fi
from scaling.render.figures import make_figure
from scaling.run.pipeline import run_config


def _run(folder, n_groups: int, *, per_group: int = 10, seed: int = 5):
    """A run whose groups' slopes differ (simulation with a known truth: slopes spread
    from 0.4 to 1.1, so each group's own line is drawn)."""
    rng = np.random.default_rng(seed)
    slopes = rng.permutation(np.linspace(0.4, 1.1, n_groups))
    rows = []
    for i, b in enumerate(slopes):
        x = 10 ** rng.uniform(0, 2, per_group)
        rows.append(pd.DataFrame({"grp": f"g{i:04d}", "mass": x,
                                  "rate": 2.0 * x ** b * 10 ** rng.normal(0, 0.02, per_group)}))
    path = folder / f"groups_{n_groups}.csv"
    pd.concat(rows).to_csv(path, index=False)
    return run_config({"data": {"file": str(path), "x": "mass", "y": "rate", "group": "grp"},
                       "prediction": {"x": [10.0]},
                       "figures": {"formats": ["png"], "dpi": 60}}, write=False)


@pytest.fixture(scope="module")
def many(tmp_path_factory):
    return _run(tmp_path_factory.mktemp("many"), 3 * fi.GROUP_LINES_MAX)


def _slopes(result, groups) -> np.ndarray:
    method = fi.drawn_primary(list(result.config.model.methods), result)
    return np.array([result.line_fits[("group", g, method)].slope for g in groups])


def test_up_to_the_limit_every_group_is_drawn(tmp_path):
    res = _run(tmp_path, fi.GROUP_LINES_MAX)
    assert fi.shown_groups(res) == fi.run_groups(res)


def test_above_the_limit_groups_are_spread_evenly_over_their_exponents(many):
    # the expected picks follow from the definition (common practice, no source):
    # ranks round(linspace(0, n - 1, k)) of the slopes sorted, in the groups' order
    groups = fi.run_groups(many)
    shown = fi.shown_groups(many)
    assert len(shown) == fi.GROUP_LINES_MAX
    assert shown == sorted(shown)   # in the groups' (text) order, as their colours
    slopes = _slopes(many, groups)
    ranks = np.argsort(np.argsort(slopes, kind="stable"), kind="stable")
    got = np.sort(ranks[[groups.index(g) for g in shown]])
    want = np.round(np.linspace(0, len(groups) - 1, fi.GROUP_LINES_MAX)).astype(int)
    np.testing.assert_array_equal(got, want)   # lowest and highest among them


def test_groups_without_a_line_are_never_drawn(many):
    groups = fi.run_groups(many)
    method = fi.drawn_primary(list(many.config.model.methods), many)
    lowest = groups[int(np.argmin(_slopes(many, groups)))]
    fits = dict(many.line_fits)
    del fits[("group", lowest, method)]
    shown = fi.shown_groups(replace(many, line_fits=fits))
    assert lowest not in shown and len(shown) == fi.GROUP_LINES_MAX


def _group_lines(ax) -> int:
    """Own lines drawn as one collection (above LEGEND_MAX_GROUPS groups)."""
    return sum(len(c.get_segments()) for c in ax.collections
               if isinstance(c, LineCollection) and c.get_gid() in ("group-lines",
                                                                   "group-curves"))


def test_scaling_figure_draws_the_shown_groups_lines_and_means(many):
    fig = make_figure(many, "scaling")
    ax = fig.axes[0]
    k = fi.GROUP_LINES_MAX
    assert _group_lines(ax) == k   # one own line per group drawn, not one per group
    bars = [c for c in ax.collections if isinstance(c, LineCollection)
            and c.get_gid() is None]   # the means' error bars, x and y
    assert sorted(len(c.get_segments()) for c in bars) == [k, k]
    # every point drawn once: the other groups' points grey, the drawn groups' coloured
    grey = [ln for ln in ax.lines if ln.get_gid() == "points-other-groups"]
    assert len(grey) == 1
    codes = fi.group_codes(many.data.points, fi.shown_groups(many))
    assert len(grey[0].get_xdata()) == int(np.sum(codes < 0))
    # (the means are drawn the same way, above the points)
    coloured = sum(len(ln.get_xdata()) for ln in ax.lines
                   if ln.get_gid() == "points" and ln.get_zorder() == 2)
    coloured += sum(len(c.get_offsets()) for c in ax.collections
                    if c.get_gid() == "points" and c.get_zorder() == 2)
    assert coloured == int(np.sum(codes >= 0))
    texts = [t.get_text() for t in fig.legends[0].get_texts()]
    assert any(t.startswith(f"{k} of {3 * k} grps in colour") for t in texts), texts


def test_natural_figure_marks_the_shown_groups_predictions(many):
    preds = many.tables["predictions"]
    assert (preds["scope"] == "group").sum() == 3 * fi.GROUP_LINES_MAX   # all kept there
    fig = make_figure(many, "natural")
    ax = fig.axes[0]
    marked = sum(len(ln.get_xdata()) for ln in ax.lines
                 if str(ln.get_gid()).startswith("prediction"))
    assert marked == fi.GROUP_LINES_MAX
    assert _group_lines(ax) == fi.GROUP_LINES_MAX


def test_few_groups_draw_no_grey_points(tmp_path):
    res = _run(tmp_path, 20)
    ax = make_figure(res, "scaling").axes[0]
    assert not [ln for ln in ax.lines if ln.get_gid() == "points-other-groups"]
    assert _group_lines(ax) == 20


def test_residual_panels_grey_the_groups_not_shown(many):
    fig = make_figure(many, "residuals")
    codes = fi.group_codes(many.data.points, fi.shown_groups(many))
    for ax in fig.axes:
        grey = [ln for ln in ax.lines if ln.get_gid() == "points-other-groups"]
        assert len(grey) == 1 and len(grey[0].get_xdata()) == int(np.sum(codes < 0))
    texts = [t.get_text() for t in fig.legends[0].get_texts()]
    assert any(t.startswith(f"{fi.GROUP_LINES_MAX} of ") for t in texts), texts


def test_the_figures_get_only_the_drawn_groups_fit_objects_and_draw_the_same(many):
    # internal consistency: the figures drawn from the run cut for sending equal, byte for
    # byte, those drawn from the whole run
    import io
    from scaling.render import figure_worker as fw
    from scaling.render.figure_style import save_figure
    view = fw.figure_view(many)
    shown = set(fi.shown_groups(many))
    assert {k[1] for k in view.line_fits if k[0] == "group"} == shown
    assert {k[1] for k in view.saved_fits if k[0] == "group"} == shown
    assert {k for k in many.line_fits if k[0] != "group"} <= set(view.line_fits)
    assert fi.shown_groups(view) == fi.shown_groups(many)
    for kind in ("scaling", "natural", "residuals", "exponents"):
        pngs = []
        for res in (many, view):
            fh = io.BytesIO()
            save_figure(make_figure(res, kind), fh, "png", 40)
            pngs.append(fh.getvalue())
        assert pngs[0] == pngs[1], kind


def test_few_groups_send_every_fit_object(tmp_path):
    from scaling.render import figure_worker as fw
    res = _run(tmp_path, fi.GROUP_LINES_MAX)
    assert fw.figure_view(res).line_fits is res.line_fits
