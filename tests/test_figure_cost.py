"""Drawing a run's figures costs less without changing what they show: a figure laid out
once is saved without savefig's drawing pass without output, and a scatter of many groups
is drawn by colour rather than with a colour per point.

Every check here is internal consistency: matplotlib's own savefig, and the scatter with
a colour per point, are the references.
"""
from __future__ import annotations

import io
from collections import Counter

import matplotlib
import numpy as np
import pytest
from matplotlib.collections import PathCollection
from matplotlib.colors import to_hex
from matplotlib.figure import Figure
from matplotlib.lines import Line2D

from helpers_figures import demo, with_figures
import scaling.render.figure_style as fs
from scaling.render.figures import make_figure, write_figures


def _drawn_points(ax) -> Counter:
    """Every marker of ``ax`` as (x, y, face colour), counted."""
    out: Counter = Counter()
    for line in ax.lines:
        if line.get_gid() == "points":
            colour = to_hex(line.get_markerfacecolor())
            out.update((float(x), float(y), colour) for x, y in line.get_xydata())
    for coll in ax.collections:
        if isinstance(coll, PathCollection):
            faces = [to_hex(c) for c in coll.get_facecolors()]
            out.update((float(x), float(y), c) for (x, y), c in zip(coll.get_offsets(), faces))
    return out


class TestScatterByColour:
    @pytest.fixture
    def points(self):
        rng = np.random.default_rng(4)
        n = 2000
        return rng.normal(size=n), rng.normal(size=n), rng.integers(0, len(fs.PALETTE), n)

    def test_every_point_once_in_its_colour(self, points):
        x, y, colours = points
        ax = fs.new_figure("single", 0.8).add_subplot()
        fs.scatter_by_colour(ax, x, y, colours, seed=1, s=9, edgecolor="white", linewidth=0.3,
                             alpha=0.85, zorder=2)
        expected = Counter((float(a), float(b), to_hex(fs.PALETTE[c]))
                           for a, b, c in zip(x, y, colours))
        assert _drawn_points(ax) == expected

    def test_the_last_points_are_drawn_one_by_one_on_top(self, points):
        x, y, colours = points
        ax = fs.new_figure("single", 0.8).add_subplot()
        artists = fs.scatter_by_colour(ax, x, y, colours, seed=1, s=9, edgecolor="white",
                                       linewidth=0.3, zorder=2)
        top = artists[-1]
        assert isinstance(top, PathCollection)   # drawn last: same zorder, added last
        assert len(top.get_offsets()) == int(np.ceil(fs.SCATTER_TOP_SHARE * len(x)))
        # a mix of every colour, not one colour over the rest
        assert len({to_hex(c) for c in top.get_facecolors()}) == len(fs.PALETTE)
        under = artists[:-1]
        assert all(isinstance(a, Line2D) and a.get_linestyle() == "None" for a in under)
        # each round lays its colours in another order
        firsts = [to_hex(a.get_markerfacecolor()) for a in under]
        rounds = [firsts[i:i + len(fs.PALETTE)] for i in range(0, len(firsts), len(fs.PALETTE))]
        assert len(rounds) == fs.SCATTER_ROUNDS and rounds[0] != rounds[1]

    def test_same_size_and_limits_as_one_scatter(self, points):
        x, y, colours = points
        ref = fs.new_figure("single", 0.8).add_subplot()
        ref.scatter(x, y, s=12, facecolor=[fs.PALETTE[c] for c in colours])
        ours = fs.new_figure("single", 0.8).add_subplot()
        fs.scatter_by_colour(ours, x, y, colours, seed=1, s=12, edgecolor="white",
                             linewidth=0.3)
        assert ours.get_xlim() == ref.get_xlim() and ours.get_ylim() == ref.get_ylim()
        # marker diameter in points is the square root of the scatter's area in pt²
        assert {line.get_markersize() for line in ours.lines} == {np.sqrt(12)}

    def test_few_points_and_none(self):
        ax = fs.new_figure("single", 0.8).add_subplot()
        assert fs.scatter_by_colour(ax, [], [], np.array([], dtype=int), seed=1, s=9,
                                    edgecolor="white", linewidth=0.3) == []
        one = fs.scatter_by_colour(ax, [1.0], [2.0], np.array([3]), seed=1, s=9,
                                   edgecolor="white", linewidth=0.3)
        assert _drawn_points(ax) == Counter({(1.0, 2.0, to_hex(fs.PALETTE[3])): 1})
        assert len(one) == 1


def _count_draws(monkeypatch) -> list:
    calls = []
    real = Figure.draw

    def counted(self, renderer):
        calls.append(type(renderer).__name__)
        return real(self, renderer)
    monkeypatch.setattr(Figure, "draw", counted)
    return calls


class TestOneDrawPerFile:
    def test_png_is_drawn_once(self, monkeypatch):
        fig = make_figure(demo(), "residuals")
        calls = _count_draws(monkeypatch)
        fs.save_figure(fig, io.BytesIO(), "png", 60)
        assert len(calls) == 1

    @pytest.mark.parametrize("fmt", ["pdf", "svg"])
    def test_vector_after_png_same_bytes_as_savefig(self, fmt, monkeypatch):
        def saved(short: bool) -> bytes:
            fig = make_figure(demo(), "scaling")
            fs.save_figure(fig, io.BytesIO(), "png", 80)
            fig.set_layout_engine("none")   # as the figure writer does after the first format
            buf = io.BytesIO()
            meta = {"pdf": {"CreationDate": None, "Producer": None},
                    "svg": {"Date": None}}[fmt]
            if short:
                calls = _count_draws(monkeypatch)
                fs.save_figure(fig, buf, fmt, 80)
                assert len(calls) == 1
                monkeypatch.undo()
            else:
                with matplotlib.rc_context(fs.STYLE):
                    fig.savefig(buf, format=fmt, dpi=80, metadata=meta)
            return buf.getvalue()
        assert saved(True) == saved(False)

    def test_written_files_unchanged_by_a_second_write(self, tmp_path):
        result = with_figures(demo(), formats=("png", "pdf"), kinds=("scaling",), dpi=60)
        first = write_figures(result, tmp_path / "a")
        second = write_figures(result, tmp_path / "b")
        assert [str(p) for p in first] == [str(p) for p in second] != []
        for rel in first:
            assert (tmp_path / "a" / rel).read_bytes() == (tmp_path / "b" / rel).read_bytes()


class TestOpaquePng:
    def test_an_opaque_figure_is_written_in_rgb_with_the_same_pixels(self):
        from PIL import Image
        fig = make_figure(demo(), "exponents")
        ours, theirs = io.BytesIO(), io.BytesIO()
        fs.save_figure(fig, ours, "png", 70)
        with matplotlib.rc_context(fs.STYLE):
            fig.savefig(theirs, format="png", dpi=70, metadata={"Software": None})
        a, b = Image.open(ours), Image.open(theirs)
        assert a.mode == "RGB" and a.info["dpi"] == b.info["dpi"]
        np.testing.assert_array_equal(np.asarray(a.convert("RGBA")), np.asarray(b))
        assert len(ours.getvalue()) < len(theirs.getvalue())

    def test_a_see_through_figure_keeps_its_alpha(self):
        from PIL import Image
        fig = make_figure(demo(), "exponents")
        fig.patch.set_alpha(0.0)
        for ax in fig.axes:
            ax.patch.set_alpha(0.0)
        ours, theirs = io.BytesIO(), io.BytesIO()
        fs.save_figure(fig, ours, "png", 70)
        with matplotlib.rc_context(fs.STYLE):
            fig.savefig(theirs, format="png", dpi=70, metadata={"Software": None})
        a, b = Image.open(ours), Image.open(theirs)
        assert a.mode == "RGBA"
        np.testing.assert_array_equal(np.asarray(a), np.asarray(b))


class TestRunObjectsLeftAlone:
    def test_frozen_while_drawing_and_thawed_after(self, tmp_path, monkeypatch):
        import gc

        import scaling.render.figures as figs
        seen = []
        real = figs._draw_and_save
        monkeypatch.setattr(figs, "_draw_and_save", lambda *a: (seen.append(gc.get_freeze_count()),
                                                                 real(*a))[1])
        assert gc.get_freeze_count() == 0
        write_figures(with_figures(demo(), formats=("png",), kinds=("exponents",), dpi=50),
                      tmp_path)
        assert seen and seen[0] > 0   # the run's objects were set aside while drawing
        assert gc.get_freeze_count() == 0

    def test_a_caller_s_freeze_is_left_to_the_caller(self, tmp_path):
        import gc
        gc.freeze()
        try:
            write_figures(with_figures(demo(), formats=("png",), kinds=("exponents",), dpi=50),
                          tmp_path)
            assert gc.get_freeze_count() > 0   # not thawed by the figure writer
        finally:
            gc.unfreeze()


def test_a_tight_bounding_box_is_left_to_savefig():
    from PIL import Image
    fig = make_figure(demo(), "exponents")
    ours, theirs = io.BytesIO(), io.BytesIO()
    with matplotlib.rc_context({"savefig.bbox": "tight"}):
        fs.save_figure(fig, ours, "png", 50)
        with matplotlib.rc_context(fs.STYLE):
            fig.savefig(theirs, format="png", dpi=50, metadata={"Software": None},
                        pil_kwargs={"compress_level": fs.PNG_COMPRESSION})
    assert Image.open(ours).size == Image.open(theirs).size
    assert ours.getvalue() == theirs.getvalue()


def test_group_lines_left_out_of_the_layout_change_no_pixel(tmp_path):
    # internal consistency: the same figure laid out with every artist taking part
    from helpers_figures import simulated
    result = simulated(tmp_path, groups=[f"g{i:02d}" for i in range(30)], n=8, seed=6)
    fig = make_figure(result, "scaling")
    out = [a for ax in fig.axes for a in ax.get_children() if not a.get_in_layout()
           and a.get_gid() is None and type(a).__name__ == "LineCollection"]
    assert out   # the 30 group lines and the bars of the 30 means
    lean = io.BytesIO()
    fs.save_figure(fig, lean, "png", 100)
    fig = make_figure(result, "scaling")
    for ax in fig.axes:
        for a in ax.get_children():
            if type(a).__name__ == "LineCollection":
                a.set_in_layout(True)
    full = io.BytesIO()
    fs.save_figure(fig, full, "png", 100)
    assert lean.getvalue() == full.getvalue()
