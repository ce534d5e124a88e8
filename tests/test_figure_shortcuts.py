"""The run's figures take shortcuts that must not change what they show: quantiles of the
drawn points only, the thinned scatter handed over ready, the groups of the points found
once, and the PNG laid out without savefig's silent draw.

Every check here is internal consistency: the long way (all quantiles, matplotlib's own
savefig, a fresh look-up per call) is the reference for the short one.
"""
from __future__ import annotations

import io

import matplotlib
import numpy as np
import pytest
from matplotlib.collections import PathCollection
from scipy import stats

from helpers_figures import demo, simulated
import scaling.render.figure_inputs as fi
import scaling.render.figure_style as fs
from scaling.render.figure_residuals import make_residuals, plot_residuals


def _offsets(ax) -> np.ndarray:
    """Every scatter point of ``ax`` as rows (x, y), sorted."""
    rows = np.vstack([c.get_offsets() for c in ax.collections if isinstance(c, PathCollection)])
    return rows[np.lexsort((rows[:, 1], rows[:, 0]))]


@pytest.fixture(scope="module")
def grouped_run(tmp_path_factory):
    # 3 groups of 60 points: with MAX_DRAWN_POINTS lowered to 40 the thinning is exercised
    return simulated(tmp_path_factory.mktemp("sim"), groups=["a", "b", "c"], n=60, seed=5)


class TestNormalQuantilePanel:
    def test_draws_the_quantiles_of_all_points_at_the_drawn_ranks(self, grouped_run,
                                                                   monkeypatch):
        monkeypatch.setattr(fs, "MAX_DRAWN_POINTS", 40)
        fit = grouped_run.line_fits[("pooled", "", "ols")]
        pts = grouped_run.data.points
        resid = pts["log_y"].to_numpy(float) - fit.intercept - fit.slope * pts["log_x"].to_numpy(
            float)
        n = resid.size
        # the long way: Blom positions of all n points, then the seeded subset
        q_all = stats.norm.ppf((np.arange(1, n + 1) - 0.375) / (n + 0.25))
        keep = np.sort(np.random.default_rng(0).choice(n, 40, replace=False))
        expected = np.column_stack([q_all[keep], np.sort(resid)[keep]])
        expected = expected[np.lexsort((expected[:, 1], expected[:, 0]))]
        ax = plot_residuals(grouped_run, method="ols", kind="normal")
        np.testing.assert_array_equal(_offsets(ax), expected)
        line = [ln for ln in ax.get_lines() if len(ln.get_xdata()) == 2][0]
        np.testing.assert_array_equal(line.get_xdata(), [q_all.min(), q_all.max()])
        assert any("40 of 180 points" in t.get_text() for t in ax.texts)

    def test_all_points_drawn_below_the_limit(self, grouped_run):
        fit = grouped_run.line_fits[("pooled", "", "sma")]
        ax = plot_residuals(grouped_run, method="sma", kind="normal")
        n = len(grouped_run.data.points)
        q_all = stats.norm.ppf((np.arange(1, n + 1) - 0.375) / (n + 0.25))
        np.testing.assert_array_equal(np.sort(_offsets(ax)[:, 0]), q_all)
        assert not ax.texts
        assert fit.method == "sma"


class TestScatterOfAThinnedSubset:
    @pytest.mark.parametrize("n_groups", [3, 30])   # one artist per group; one for all
    def test_handing_over_the_subset_draws_the_same(self, n_groups, monkeypatch):
        monkeypatch.setattr(fs, "MAX_DRAWN_POINTS", 50)
        rng = np.random.default_rng(11)
        x, y = rng.normal(size=400), rng.normal(size=400)
        codes = rng.integers(0, n_groups, 400)
        whole, ready = fs.new_figure("single", 0.8), fs.new_figure("single", 0.8)
        a, b = whole.add_subplot(), ready.add_subplot()
        fs.scatter_coded(a, x, y, codes, n_groups, s=9)
        keep = fs.thinned_index(400)
        fs.scatter_coded(b, x[keep], y[keep], codes[keep], n_groups, total=400, s=9)
        assert len(a.collections) == len(b.collections)
        for ca, cb in zip(a.collections, b.collections):
            np.testing.assert_array_equal(ca.get_offsets(), cb.get_offsets())
            np.testing.assert_array_equal(ca.get_facecolors(), cb.get_facecolors())
        assert len(a.lines) == len(b.lines)   # many groups: markers of one colour each
        for la, lb in zip(a.lines, b.lines):
            np.testing.assert_array_equal(la.get_xydata(), lb.get_xydata())
            assert la.get_markerfacecolor() == lb.get_markerfacecolor()
        assert [t.get_text() for t in a.texts] == [t.get_text() for t in b.texts] != []

    def test_no_subset_at_or_below_the_limit(self):
        assert fs.thinned_index(fs.MAX_DRAWN_POINTS) is None
        keep = fs.thinned_index(fs.MAX_DRAWN_POINTS + 1)
        assert len(keep) == fs.MAX_DRAWN_POINTS and np.all(np.diff(keep) > 0)


class TestGroupsFoundOnce:
    def test_inside_the_block_codes_are_found_once_and_equal(self, grouped_run, monkeypatch):
        calls = []
        real = fi._group_codes
        monkeypatch.setattr(fi, "_group_codes",
                            lambda pts, groups: (calls.append(1), real(pts, groups))[1])
        pts, groups = grouped_run.data.points, fi.run_groups(grouped_run)
        fresh = fi.group_codes(pts, groups)
        with fi.reuse_inputs():
            first = fi.group_codes(pts, groups)
            again = fi.group_codes(pts, groups)
            assert fi.run_groups(grouped_run) == groups
        assert len(calls) == 2   # once outside, once inside the block
        np.testing.assert_array_equal(first, fresh)
        assert again is first and not first.flags.writeable
        fi.group_codes(pts, groups)   # outside again: nothing kept
        assert len(calls) == 3

    def test_a_changed_table_is_not_mistaken_for_the_kept_one(self, grouped_run):
        pts = grouped_run.data.points
        groups = fi.run_groups(grouped_run)
        with fi.reuse_inputs():
            fi.group_codes(pts, groups)
            other = pts.assign(group=pts["group"].iloc[::-1].to_numpy())
            np.testing.assert_array_equal(fi.group_codes(other, groups),
                                          fi._group_codes(other, groups))

    def test_residual_figure_is_unchanged_by_the_block(self, grouped_run):
        def png(fig):
            buf = io.BytesIO()
            fs.save_figure(fig, buf, "png", 60)
            return buf.getvalue()
        plain = png(make_residuals(grouped_run))
        with fi.reuse_inputs():
            kept = png(make_residuals(grouped_run))
        assert plain == kept


class TestPngLayout:
    @pytest.mark.parametrize("kind", ["scaling", "residuals", "exponents"])
    def test_same_picture_as_matplotlib_laying_out_in_savefig(self, kind):
        from PIL import Image
        from scaling.render.figures import make_figure
        result = demo()
        ours, theirs = io.BytesIO(), io.BytesIO()
        fs.save_figure(make_figure(result, kind), ours, "png", 120)
        fig = make_figure(result, kind)
        with matplotlib.rc_context(fs.STYLE):   # savefig lays out inside a silent draw
            fig.savefig(theirs, format="png", dpi=120, metadata={"Software": None})
        a, b = Image.open(ours), Image.open(theirs)
        # the same pixels (ours in RGB: every pixel of the figure is opaque) and resolution
        assert (a.mode, b.mode) == ("RGB", "RGBA")
        assert a.info.get("dpi") == b.info.get("dpi") and a.info.keys() == b.info.keys()
        np.testing.assert_array_equal(np.asarray(a.convert("RGBA")), np.asarray(b))

    def test_layout_engine_is_given_back(self):
        from scaling.render.figures import make_figure
        fig = make_figure(demo(), "exponents")
        engine = fig.get_layout_engine()
        fs.save_figure(fig, io.BytesIO(), "png", 60)
        assert fig.get_layout_engine() is engine


class TestEquationCorner:
    def test_same_figure_as_laying_out_for_every_corner(self, monkeypatch):
        import scaling.render.figure_scaling as fsc
        from scaling.render.figures import make_figure

        def png():
            buf = io.BytesIO()
            fs.save_figure(make_figure(demo(), "scaling"), buf, "png", 100)
            return buf.getvalue()
        calls = []
        real = fsc._laid_out
        monkeypatch.setattr(fsc, "_laid_out", lambda fig: (calls.append(1), real(fig))[1])
        short, n_short = png(), len(calls)
        monkeypatch.setattr(fsc, "_inside", lambda ax, text, renderer: False)
        calls.clear()
        assert png() == short
        assert n_short < len(calls)   # the shortcut saved layouts on the demo


class TestTicksFoundOnce:
    @staticmethod
    def _saved(kind: str, fmt: str) -> bytes:
        from scaling.render.figures import make_figure
        buf = io.BytesIO()
        fs.save_figure(make_figure(demo(), kind), buf, fmt, 100)
        return buf.getvalue()

    @pytest.mark.parametrize("kind", ["scaling", "natural", "residuals", "exponents"])
    def test_same_files_as_finding_the_ticks_at_every_measurement(self, kind, monkeypatch):
        import contextlib
        short = {fmt: self._saved(kind, fmt) for fmt in ("png", "pdf", "svg")}
        monkeypatch.setattr(fs, "ticks_found_once", lambda fig: contextlib.nullcontext())
        for fmt, data in short.items():
            assert self._saved(kind, fmt) == data, fmt

    def test_ticks_are_found_fewer_times_and_the_axes_given_back(self, monkeypatch):
        import contextlib
        from matplotlib.axis import Axis
        from scaling.render.figures import make_figure
        calls = []
        real = Axis._update_ticks
        monkeypatch.setattr(Axis, "_update_ticks", lambda self: (calls.append(1), real(self))[1])
        fig = make_figure(demo(), "residuals")
        fs.save_figure(fig, io.BytesIO(), "png", 60)
        n_short = len(calls)
        assert all("_update_ticks" not in vars(ax.xaxis) for ax in fig.axes)
        calls.clear()
        monkeypatch.setattr(fs, "ticks_found_once", lambda fig: contextlib.nullcontext())
        fs.save_figure(make_figure(demo(), "residuals"), io.BytesIO(), "png", 60)
        assert 2 * n_short < len(calls)

    def test_a_changed_view_gets_its_own_ticks(self):
        fig = fs.new_figure("single", 0.8)
        ax = fig.add_subplot()
        ax.plot([0, 10], [0, 1])
        with fs.ticks_found_once(fig):
            first = [t.get_loc() for t in ax.xaxis._update_ticks()]
            ax.set_xlim(0, 1000)
            second = [t.get_loc() for t in ax.xaxis._update_ticks()]
        assert max(first) <= 10 < max(second)   # internal consistency: the limits set
