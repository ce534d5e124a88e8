"""How the figures tell groups apart and draw their points (scaling.render.figure_style):
a colour and marker of its own for each of up to 64 groups, points of a few groups
interleaved so that none lies always on top, and legend columns chosen by the entries,
not by the note of a subset drawn."""
from __future__ import annotations

import numpy as np
from matplotlib.lines import Line2D

from scaling.render import figure_style as fs


def test_each_of_64_groups_has_its_own_colour_and_marker():
    styles = [fs.group_style(i) for i in range(64)]
    assert len(set(styles)) == 64
    # the first eight as ever: colour and marker of the same rank
    assert styles[:8] == list(zip(fs.PALETTE, fs.MARKERS))


def _scatters(ax):
    return [c for c in ax.collections if len(c.get_offsets())]


def test_points_of_a_few_groups_are_drawn_in_rounds_in_changing_order():
    rng = np.random.default_rng(0)
    n = 3_000
    codes = rng.integers(0, 3, n)
    x, y = rng.normal(size=n), rng.normal(size=n)
    fig = fs.agg_figure()
    ax = fig.add_subplot()
    fs.scatter_coded(ax, x, y, codes, 3)
    drawn = _scatters(ax)
    assert len(drawn) == fs.INTERLEAVE_ROUNDS * 3
    # every point once (exact counts)
    assert sum(len(c.get_offsets()) for c in drawn) == n
    got = np.concatenate([c.get_offsets()[:, 0] for c in drawn])
    np.testing.assert_array_equal(np.sort(got), np.sort(x))
    # the group drawn last in each round (on top of that round) is not always the same
    colours = [tuple(c.get_facecolor()[0]) for c in drawn]
    last = {colours[3 * r + 2] for r in range(fs.INTERLEAVE_ROUNDS)}
    assert len(last) > 1


def test_few_points_are_drawn_a_group_at_a_time_in_group_order():
    rng = np.random.default_rng(1)
    n = 300
    codes = rng.integers(0, 3, n)
    fig = fs.agg_figure()
    ax = fig.add_subplot()
    fs.scatter_coded(ax, rng.normal(size=n), rng.normal(size=n), codes, 3)
    drawn = _scatters(ax)
    assert len(drawn) == 3
    assert [len(c.get_offsets()) for c in drawn] == np.bincount(codes).tolist()


def test_legend_columns_follow_the_entries_not_a_wide_title():
    handles = [Line2D([], [], ls="none", marker="o", label=f"g{i}") for i in range(12)]

    def columns(**kwargs) -> int:
        fig = fs.agg_figure(figsize=(4, 3))
        fig.add_subplot()
        return fs.figure_legend(fig, handles, 3, **kwargs)._ncols

    plain = columns()
    assert plain == 3   # short names: three columns fit a 4-inch figure
    wide = "a note as wide as the figure, " * 4
    assert columns(title=wide) == plain


def test_many_marked_predictions_draw_the_bars_and_caps_errorbar_draws():
    from scaling.render import figure_natural as fn
    rng = np.random.default_rng(2)
    n = fn.MARKED_ONE_BY_ONE + 10   # above it: one artist per colour
    x = rng.uniform(1, 100, n)
    y = rng.uniform(10, 50, n)
    low, high = y - rng.uniform(0, 5, n), y + rng.uniform(0, 5, n)
    colours = np.array(["#000000"] * n, dtype=object)
    for across in (False, True):
        fig = fs.agg_figure()
        ax = fig.add_subplot()
        mid = x if across else y
        lo, hi = (x - 3, x + 4) if across else (low, high)
        fn._mark_rows(ax, x, y, mid, lo, hi, colours, across=across, marker="D", mfc=None,
                      ls="-", ms=4, small=False, gid="prediction")
        ref = fs.agg_figure().add_subplot()
        err = np.vstack([mid - lo, hi - mid])
        cont = ref.errorbar(x, y, **({"xerr": err} if across else {"yerr": err}), fmt="none",
                            capsize=2.5, capthick=0.8)
        # internal consistency: errorbar's own bar segments and caps, the same numbers
        segments = cont.lines[2][0].get_segments()
        bars = ax.lines[0].get_xydata().reshape(-1, 3, 2)[:, :2]
        np.testing.assert_allclose(bars, np.asarray(segments), rtol=1e-15)
        caps = np.concatenate([c.get_xydata() for c in cont.lines[1]])
        got = ax.lines[1].get_xydata()
        np.testing.assert_allclose(np.sort(got, axis=0), np.sort(caps, axis=0), rtol=1e-15)
        assert ax.lines[1].get_marker() == cont.lines[1][0].get_marker()
        assert ax.lines[1].get_markersize() == cont.lines[1][0].get_markersize()
        assert not ax.collections   # no collection of a path per bar
