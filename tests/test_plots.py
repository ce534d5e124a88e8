"""Drawing fits for a Python user (scaling.render.plots), and figures that never fit.

plot_fit, plot_comparison and plot_groups on the Agg backend (tests/conftest.py):
natural-unit log axes, one line per group, lines that are the fit's own numbers,
and no call of a fitting function while a run's figures are drawn.

Data: a cube's surface area against its volume (exact law: exponent 2/3,
log10 intercept log10 6) and a cylinder's volume against its diameter and
height (exact law: V = pi/4 D^2 H, exponents 2 and 1), with small log-normal
scatter where a line needs residuals (simulations with a known truth).
"""
from __future__ import annotations

import ast
import math
import re
import sys
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from numpy.testing import assert_allclose

import scaling
from scaling.render.figure_kinds import FIGURES, KINDS
from scaling.render.figures import make_figure
from scaling.render.plots import plot_comparison, plot_fit, plot_groups

from helpers_figures import demo

THIN = "\u2009"
#: A balanced tree of 8 species with unit branch lengths (invented, rendering only).
TREE = "(((a:1,b:1):1,(c:1,d:1):1):1,((e:1,f:1):1,(g:1,h:1):1):1);"
RENDER = Path(scaling.__file__).parent / "render"


def _cube(n: int = 30, seed: int = 5, scatter: float = 0.02):
    """Volume and surface area of cubes of side 1 to 40 with log-normal scatter."""
    rng = np.random.default_rng(seed)
    side = np.geomspace(1, 40, n)
    return side ** 3, 6 * side ** 2 * 10 ** rng.normal(0, scatter, n)


def _visible_labels(ax, axis: str) -> list:
    ax.figure.draw_without_rendering()
    lo, hi = sorted(getattr(ax, f"get_{axis}lim")())
    ticks = getattr(ax, f"get_{axis}ticks")()
    labels = getattr(ax, f"get_{axis}ticklabels")()
    return [lab.get_text() for t, lab in zip(ticks, labels) if lo <= t <= hi]


def _assert_natural_log_axes(ax) -> None:
    """Both axes log-scaled; every labelled major tick inside the view reads as its own
    value in natural units (10, 100, 1 000), not as a logarithm (1, 2, 3)."""
    assert ax.get_xscale() == "log" and ax.get_yscale() == "log"
    for axis in ("x", "y"):
        ax.figure.draw_without_rendering()
        lo, hi = sorted(getattr(ax, f"get_{axis}lim")())
        ticks = getattr(ax, f"get_{axis}ticks")()
        labels = getattr(ax, f"get_{axis}ticklabels")()
        shown = [(t, lab.get_text()) for t, lab in zip(ticks, labels)
                 if lo <= t <= hi and lab.get_text()]
        assert len(shown) >= 2
        for value, text in shown:
            # exact: the label reads as the tick's own value -- written out with thin-space
            # digit groups, or (an axis reaching past 0.001 or 100 000) as 10^k
            assert _label_value(text) == pytest.approx(value, rel=1e-9), text


def _label_value(text: str) -> float:
    """The number a tick label shows: '1 000' -> 1000, '$10^{-2}$' -> 0.01."""
    power = re.fullmatch(r"\$10\^\{(-?\d+)\}\$", text)
    if power:
        return 10.0 ** int(power.group(1))
    return float(text.replace(THIN, ""))


def _drawn_lines(ax) -> list:
    """The Line2D artists with more than two samples (fitted lines, not markers)."""
    return [ln for ln in ax.lines if isinstance(ln, Line2D) and len(ln.get_xdata()) > 2]


def _log_slope(line) -> float:
    x, y = np.log10(line.get_xdata()), np.log10(line.get_ydata())
    return float(np.polyfit(x, y, 1)[0])


class TestPlotFit:
    @pytest.mark.parametrize("method", ["ols", "sma", "ma"])
    def test_line_fit_on_natural_log_axes(self, method):
        x, y = _cube()
        fit = scaling.fit_line(x, y, method=method)
        ax = plot_fit(fit, x=x, y=y)
        assert isinstance(ax.figure, Figure)
        _assert_natural_log_axes(ax)
        (line,) = _drawn_lines(ax)
        # exact law: the drawn line is y = a x^b of the fit itself, over its fitted range
        assert_allclose(line.get_ydata(), fit.a * np.asarray(line.get_xdata()) ** fit.slope,
                        rtol=1e-10)
        assert_allclose([line.get_xdata()[0], line.get_xdata()[-1]], fit.x_range, rtol=1e-12)
        # exact: the points given are drawn, one dot each
        assert [len(c.get_offsets()) for c in ax.collections
                if c.__class__.__name__ == "PathCollection"] == [x.size]

    def test_line_fit_band_contains_the_line(self):
        x, y = _cube()
        fit = scaling.fit_line(x, y, method="sma")
        ax = plot_fit(fit)
        (band,) = [c for c in ax.collections if c.__class__.__name__ in
                   ("PolyCollection", "FillBetweenPolyCollection")]
        (line,) = _drawn_lines(ax)
        verts = band.get_paths()[0].vertices
        # exact: the line lies inside its own confidence band at every sample
        for xv, yv in zip(line.get_xdata(), line.get_ydata()):
            edge = verts[np.isclose(verts[:, 0], xv, rtol=1e-12), 1]
            assert edge.min() < yv < edge.max()
        assert fit.slope == pytest.approx(2 / 3, abs=0.02)   # exact law 2/3, scatter 0.02

    def test_a_given_axes_is_drawn_on_and_returned(self):
        x, y = _cube()
        ax = Figure().add_subplot()
        # exact: the same object comes back
        assert plot_fit(scaling.fit_line(x, y, method="ols"), ax=ax, x=x, y=y) is ax
        _assert_natural_log_axes(ax)

    def test_phylogenetic_fit(self, tmp_path):
        # a balanced tree of 8 species (invented, rendering only); the line spans the
        # species given as points
        (tmp_path / "tree.nwk").write_text(TREE, encoding="utf-8")
        tree = scaling.read_newick(tmp_path / "tree.nwk")
        names = list("abcdefgh")
        x, y = _cube(n=8, seed=2, scatter=0.05)
        fit = scaling.fit_phylo(x, y, tree, names, method="ols", lam=1.0)
        ax = plot_fit(fit, x=x, y=y, color="#b2182b")
        _assert_natural_log_axes(ax)
        (line,) = _drawn_lines(ax)
        # exact law: the PGLS line y = 10^intercept x^slope, over the species' range of x
        assert_allclose(np.log10(line.get_ydata()),
                        fit.intercept + fit.slope * np.log10(line.get_xdata()), rtol=1e-10)
        assert_allclose([line.get_xdata()[0], line.get_xdata()[-1]], [x.min(), x.max()],
                        rtol=1e-12)

    def test_phylogenetic_fit_without_points_spans_its_moments(self):
        x, y = _cube(n=8, seed=2, scatter=0.05)
        fit = scaling.fit_phylo(x, y, TREE, list("abcdefgh"), method="sma", lam=1.0)
        ax = plot_fit(fit)
        (line,) = _drawn_lines(ax)
        m = fit.moments
        sd = math.sqrt(float(m.sxx) / (float(m.n) - 1))
        # by construction (documented): mean of log x +- 2 SD of the fit's own moments
        assert_allclose(np.log10([line.get_xdata()[0], line.get_xdata()[-1]]),
                        [float(m.mean_x) - 2 * sd, float(m.mean_x) + 2 * sd], rtol=1e-10)
        _assert_natural_log_axes(ax)

    def test_several_predictors_partial_plot(self):
        rng = np.random.default_rng(8)
        d = 10 ** rng.uniform(0.5, 1.5, 40)
        h = 10 ** rng.uniform(0.8, 1.6, 40)
        v = math.pi / 4 * d ** 2 * h * 10 ** rng.normal(0, 0.02, 40)
        fit = scaling.fit_multi({"diameter": d, "height": h}, v)
        ax = plot_fit(fit)
        _assert_natural_log_axes(ax)
        (line,) = _drawn_lines(ax)
        # exact: the partial line's slope on log-log axes is the fit's first exponent
        # (and near the cylinder's 2, the exact law, within the scatter)
        assert _log_slope(line) == pytest.approx(fit.slopes[0], rel=1e-9)
        assert fit.slopes[0] == pytest.approx(2, abs=0.05)
        assert ax.get_xlabel() == "diameter"
        ax2 = plot_fit(fit, term="height")
        assert _log_slope(_drawn_lines(ax2)[0]) == pytest.approx(fit.slopes[1], rel=1e-9)
        # exact: the points are the fit's own n rows
        assert [len(c.get_offsets()) for c in ax.collections
                if c.__class__.__name__ == "PathCollection"] == [fit.n]

    @pytest.mark.parametrize("method", ["ols", "sma", "ma", "theil_sen"])
    def test_plot_method_of_a_line_fit_draws_its_own_points(self, method):
        x, y = _cube()
        fit = scaling.fit_line(x, y, method=method)
        ax = fit.plot()
        _assert_natural_log_axes(ax)
        (line,) = _drawn_lines(ax)
        # exact law: the fit's own line y = a x^b
        assert_allclose(line.get_ydata(), fit.a * np.asarray(line.get_xdata()) ** fit.slope,
                        rtol=1e-10)
        # exact: the n points the fit was given, in natural units
        (dots,) = [c for c in ax.collections if c.__class__.__name__ == "PathCollection"]
        assert_allclose(np.sort(dots.get_offsets()[:, 0]), np.sort(x), rtol=1e-12)

    def test_plot_method_of_phylogenetic_and_several_predictor_fits(self):
        x, y = _cube(n=8, seed=2, scatter=0.05)
        phylo = scaling.fit_phylo(x, y, TREE, list("abcdefgh"), method="sma", lam=1.0)
        ax = phylo.plot()
        _assert_natural_log_axes(ax)
        # exact: the method draws what plot_fit draws
        assert_allclose(_drawn_lines(ax)[0].get_ydata(),
                        _drawn_lines(plot_fit(phylo))[0].get_ydata(), rtol=0)
        rng = np.random.default_rng(8)
        d, h = 10 ** rng.uniform(0.5, 1.5, 40), 10 ** rng.uniform(0.8, 1.6, 40)
        multi = scaling.fit_multi({"diameter": d, "height": h},
                                  math.pi / 4 * d ** 2 * h * 10 ** rng.normal(0, 0.02, 40))
        ax = multi.plot(term="height")
        _assert_natural_log_axes(ax)
        assert _log_slope(_drawn_lines(ax)[0]) == pytest.approx(multi.slopes[1], rel=1e-9)

    def test_unknown_term(self):
        x = {"a": np.arange(1, 11.0), "b": np.arange(2, 12.0) ** 1.3}
        fit = scaling.fit_multi(x, np.arange(1, 11.0) ** 0.7 * np.arange(2, 12.0) ** 0.2
                                * np.linspace(0.9, 1.1, 10))
        with pytest.raises(scaling.DataError, match="term 'c' is not a predictor"):
            plot_fit(fit, term="c")


def _three_groups(seed: int = 4) -> pd.DataFrame:
    """Three groups of cubes whose areas are shifted by a factor (one common exponent 2/3)."""
    rng = np.random.default_rng(seed)
    parts = []
    for g, shift in (("a", 1.0), ("b", 1.5), ("c", 2.2)):
        side = 10 ** rng.uniform(0, 1.4, 15)
        parts.append(pd.DataFrame({"clade": g, "volume": side ** 3,
                                   "area": shift * 6 * side ** 2 * 10 ** rng.normal(0, 0.02, 15)}))
    return pd.concat(parts, ignore_index=True)


class TestPlotComparison:
    def test_one_line_per_group_with_the_common_slope(self):
        df = _three_groups()
        comp = scaling.compare_groups(df, "volume", "area", "clade", method="sma")
        ax = plot_comparison(comp, data=df, x="volume", y="area")
        lines = _drawn_lines(ax)
        # exact by construction: one line per compared group, labelled with it
        assert sorted(ln.get_label() for ln in lines) == ["a", "b", "c"]
        assert len([a for a in ax.get_children() if isinstance(a, Line2D)]) == 3
        logs = np.log10(df[["volume", "area"]])
        for ln in lines:
            # exact: the comparison's common slope, not a new estimate
            assert _log_slope(ln) == pytest.approx(comp.common_slope, rel=1e-9)
            # reference: pandas means of the group's logs; the line passes through them
            g = logs[df["clade"] == ln.get_label()].mean()
            xs, ys = np.log10(ln.get_xdata()), np.log10(ln.get_ydata())
            assert np.interp(g["volume"], xs, ys) == pytest.approx(g["area"], abs=1e-9)
        _assert_natural_log_axes(ax)

    def test_plot_method_draws_from_the_comparison_alone(self):
        df = _three_groups()
        comp = scaling.compare_groups(df, "volume", "area", "clade", method="ols")
        ax = comp.plot()
        lines = _drawn_lines(ax)
        # exact by construction: one line per compared group
        assert sorted(ln.get_label() for ln in lines) == ["a", "b", "c"]
        logs = np.log10(df[["volume", "area"]])
        for ln in lines:
            assert _log_slope(ln) == pytest.approx(comp.common_slope, rel=1e-9)
            # reference: pandas means and range of the group's logs -- the centroid the
            # line passes through and the span it is drawn over
            sub = logs[df["clade"] == ln.get_label()]
            xs, ys = np.log10(ln.get_xdata()), np.log10(ln.get_ydata())
            assert np.interp(sub["volume"].mean(), xs, ys) == pytest.approx(
                sub["area"].mean(), abs=1e-9)
            assert_allclose([xs[0], xs[-1]], [sub["volume"].min(), sub["volume"].max()],
                            rtol=1e-9)
        _assert_natural_log_axes(ax)

    def test_without_data_or_means_says_what_to_pass(self):
        df = _three_groups()
        comp = scaling.compare_groups(df, "volume", "area", "clade", method="ols")
        with pytest.raises(scaling.DataError, match="pass data=, x= and y="):
            plot_comparison(replace(comp, centroids=()))


class TestPlotGroups:
    def test_one_line_per_group_from_the_table(self):
        df = _three_groups()
        fits = scaling.fit_groups(df, x="volume", y="area", group="clade", methods=["ols", "sma"])
        ax = plot_groups(fits, df, x="volume", y="area", group="clade")
        lines = _drawn_lines(ax)
        # exact by construction: one line per group of the first method (ols)
        assert sorted(ln.get_label() for ln in lines) == ["a", "b", "c"]
        rows = fits[fits["method"] == "ols"].set_index("group")
        for ln in lines:
            r = rows.loc[ln.get_label()]
            # exact: the table's own numbers (line, range), nothing fitted again
            assert_allclose(np.log10(ln.get_ydata()),
                            r["intercept"] + r["slope"] * np.log10(ln.get_xdata()), rtol=1e-10)
            assert_allclose([ln.get_xdata()[0], ln.get_xdata()[-1]], [r["x_min"], r["x_max"]],
                            rtol=1e-12)
        # exact: every point is drawn, in its group's artist
        assert sum(len(c.get_offsets()) for c in ax.collections) == len(df)
        _assert_natural_log_axes(ax)

    def test_exported_from_the_package(self):
        # the public name (INTERFACE.md): scaling.plot_groups
        assert scaling.plot_groups is plot_groups


class TestRegistry:
    def test_registry_holds_the_config_kinds_in_order(self):
        from scaling.stats.schema import FIGURE_KINDS
        # internal consistency: one registry, the config's vocabulary
        assert KINDS == tuple(FIGURE_KINDS)
        assert all(FIGURES[k].caption and FIGURES[k].cost > 0 for k in FIGURES)

    def test_reading_the_registry_loads_no_matplotlib(self):
        import subprocess
        code = ("import sys; from scaling.render.figure_kinds import FIGURES; "
                "FIGURES['scaling'].caption; print('matplotlib' in sys.modules)")
        out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
        # common practice, no source: a fresh interpreter shows what was imported
        assert out.stdout.strip() == "False", out.stderr


#: The fitting entry points of the numeric floor: a figure must call none of them.
FITTING = {
    "scaling.api": ("fit_line", "fit_groups"),
    "scaling.stats.lines": ("fit_moments",),
    "scaling.stats.line_results": ("fit_line", "line_fit_from_moments"),
    "scaling.stats.common_slope": ("common_slope",),
    "scaling.stats.group_comparisons": ("compare_groups",),
    "scaling.stats.group_means": ("fit_group_means", "group_means"),
    "scaling.stats.robust": ("deming", "deming_from_moments", "deming_moments",
                             "theil_sen", "siegel"),
    "scaling.stats.phylogeny": ("fit_phylo",),
    "scaling.stats.several_predictors": ("fit_multi",),
    "scaling.stats.predictions": ("data_factors",),
}


class TestFiguresNeverFit:
    def test_no_figure_module_imports_a_fitting_function(self):
        # exact: read with ast, every import of the drawing modules
        fitting = {name for names in FITTING.values() for name in names}
        for path in sorted(RENDER.glob("figure*.py")) + [RENDER / "plots.py"]:
            tree = ast.parse(path.read_text(encoding="utf-8"))
            for node in ast.walk(tree):
                if isinstance(node, ast.ImportFrom) and "stats" in (node.module or ""):
                    assert not {a.name for a in node.names} & fitting, path.name
                if isinstance(node, ast.ImportFrom):
                    assert not (node.module or "").startswith("run"), path.name

    @pytest.mark.parametrize("without_common", [False, True],
                             ids=["demo", "demo-without-common-rows"])
    def test_drawing_a_runs_figures_calls_no_fitting_function(self, monkeypatch,
                                                              without_common):
        import dataclasses
        import importlib
        result = demo(grouped=True)    # the run computes first; then fitting is forbidden
        if without_common:   # no common slope in the tables: the figures draw none
            result = dataclasses.replace(result,
                                         fits=result.fits[result.fits["scope"] != "common"])
        calls = []
        for module_name, names in FITTING.items():
            module = importlib.import_module(module_name)
            for name in names:
                real = getattr(module, name)

                def forbidden(*args, _name=f"{module_name}.{name}", **kwargs):
                    calls.append(_name)
                    raise AssertionError(f"a figure called {_name}")

                # every binding of the function, wherever it was imported to
                for mod in list(sys.modules.values()):
                    if (getattr(mod, "__name__", "") or "").startswith("scaling"):
                        for attr, value in list(vars(mod).items()):
                            if value is real:
                                monkeypatch.setattr(mod, attr, forbidden)
        for kind in KINDS:
            make_figure(result, kind)
        fit = result.fit("sma")
        plot_fit(fit)
        assert calls == []   # exact: not one call
