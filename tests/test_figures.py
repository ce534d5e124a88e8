"""Figures: every kind and format, natural-unit ticks, equation, bands, residuals."""
from __future__ import annotations

import io
import math
import re
import warnings
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from numpy.testing import assert_allclose
from PIL import Image

from scaling.errors import ConfigError
from scaling.run.pipeline import run_config
from scaling.render.figure_exponents import plot_exponents
from scaling.render.figure_kinds import FIGURES, KINDS
from scaling.render.figure_natural import plot_natural
from scaling.render.figure_residuals import plot_residuals
from scaling.render.figure_scaling import plot_scaling
from scaling.render.figure_style import format_natural
from scaling.render.figures import make_figure, write_figures
from scaling.render.plots import fit_band

from helpers_figures import demo, simulated, with_figures

THIN = "\u2009"


@pytest.fixture(scope="module")
def grouped():
    return demo(grouped=True)


@pytest.fixture(scope="module")
def pooled_only():
    return demo(grouped=False)


def _visible_major_labels(ax, axis: str) -> list:
    ax.figure.draw_without_rendering()
    lo, hi = sorted(getattr(ax, f"get_{axis}lim")())
    ticks = getattr(ax, f"get_{axis}ticks")()
    labels = getattr(ax, f"get_{axis}ticklabels")()
    return [lab.get_text() for t, lab in zip(ticks, labels) if lo <= t <= hi]


class TestFormatNatural:
    def test_powers_of_ten_written_out_with_thin_space_groups(self):
        # Expected: SI digit grouping in threes by a thin space (BIPM SI Brochure,
        # 9th ed. 2019, sec. 5.4.4); exact strings.
        assert format_natural(0.01) == "0.01"
        assert format_natural(1) == "1"
        assert format_natural(10) == "10"
        assert format_natural(1000) == f"1{THIN}000"
        assert format_natural(100000) == f"100{THIN}000"
        assert format_natural(2) == "2"

    def test_outside_the_written_range_uses_powers(self):
        # exact: 10^6 and 10^-4 are outside [0.001, 100 000]
        assert format_natural(1e6) == "$10^{6}$"
        assert format_natural(1e-4) == "$10^{-4}$"
        assert format_natural(0) == ""


class TestWriteFigures:
    @pytest.mark.parametrize("grouped_run", [True, False], ids=["groups", "no-groups"])
    def test_every_kind_in_every_format(self, grouped_run, grouped, pooled_only, tmp_path):
        base = grouped if grouped_run else pooled_only
        result = with_figures(base, formats=("png", "pdf", "svg"), dpi=72)
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            paths = write_figures(result, tmp_path)
        expected = {f"figures/{k}.{f}" for k in KINDS for f in ("png", "pdf", "svg")}
        assert {p.as_posix() for p in paths} == expected
        for kind in KINDS:
            assert (tmp_path / f"figures/{kind}.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
            pdf = (tmp_path / f"figures/{kind}.pdf").read_bytes()
            assert pdf[:5] == b"%PDF-"
            # pdf.fonttype 42: TrueType fonts embedded, text kept as text
            assert b"/FontFile2" in pdf
            svg = (tmp_path / f"figures/{kind}.svg").read_text(encoding="utf-8")
            assert "<text" in svg          # svg.fonttype none: text is text

    def test_png_width_and_dpi_follow_the_config(self, pooled_only, tmp_path):
        result = with_figures(pooled_only, formats=("png",), kinds=("scaling",), dpi=120,
                              size="double")
        write_figures(result, tmp_path)
        with Image.open(tmp_path / "figures/scaling.png") as im:
            # exact law: 180 mm = 180/25.4 in, times dpi pixels
            assert abs(im.size[0] - 180 / 25.4 * 120) <= 1
            assert_allclose(im.info["dpi"], (120, 120), rtol=1e-3)  # exact: config dpi

    def test_kinds_select_figures(self, pooled_only, tmp_path):
        result = with_figures(pooled_only, formats=("svg",), kinds=("exponents",))
        paths = write_figures(result, tmp_path)
        assert [p.as_posix() for p in paths] == ["figures/exponents.svg"]


    def test_a_figure_that_fails_is_skipped_with_a_warning(self, pooled_only, tmp_path,
                                                          monkeypatch):
        from scaling.errors import FigureWarning

        def broken(result, *, size="single", **kwargs):
            raise OverflowError("cannot convert float infinity to integer")

        monkeypatch.setitem(FIGURES, "natural", replace(FIGURES["natural"], maker=broken))
        result = with_figures(pooled_only, formats=("png", "svg"), dpi=72)
        with pytest.warns(FigureWarning, match=r"Figure 'natural' was not drawn "
                                               r"\(OverflowError: cannot convert"):
            paths = write_figures(result, tmp_path)
        kinds = {p.stem for p in paths}
        assert "natural" not in kinds and kinds == set(KINDS) - {"natural"}
        assert not list((tmp_path / "figures").glob("natural.*"))


class TestMakeFigure:
    def test_unknown_kind(self, pooled_only):
        with pytest.raises(ConfigError, match="figure kind must be one of"):
            make_figure(pooled_only, "pie")


class TestPlotScaling:
    def test_major_ticks_are_natural_powers_of_ten(self, grouped):
        ax = plot_scaling(grouped)
        for axis in ("x", "y"):
            lo, hi = sorted(getattr(ax, f"get_{axis}lim")())
            # exact: the powers of ten inside the axis limits, written out
            expected = [format_natural(10.0 ** k)
                        for k in range(math.ceil(math.log10(lo)), math.floor(math.log10(hi)) + 1)]
            assert _visible_major_labels(ax, axis) == expected
        assert f"1{THIN}000" in _visible_major_labels(ax, "x")
        assert "10" in _visible_major_labels(ax, "y")

    def test_default_draws_the_primary_method_with_median_and_factor(self, grouped):
        ax = plot_scaling(grouped)
        (text,) = [t for t in ax.texts if t.get_gid() == "equation"]
        body = text.get_text()
        # primary: first symmetric method of [ols, sma, ma, deming] is SMA; the clades'
        # slopes do not differ, so the box leads with the common within-clade exponent
        assert body.startswith("SMA within clades: ") and "OLS" not in body
        assert "\nSMA, all clades: $y = " in body
        factor = grouped.fits.query("scope == 'pooled' and method == 'sma'")[
            "smearing_factor"].iloc[0]
        # internal consistency: the factor shown is the run's smearing factor
        assert f"line = median; mean = median × {factor:.3g}" in body

    def test_equation_matches_the_fits(self, grouped):
        ax = plot_scaling(grouped, methods=["ols", "sma", "ma"])
        (text,) = [t for t in ax.texts if t.get_gid() == "equation"]
        pattern = re.compile(r"(OLS|SMA|MA), all clades: \$y = ([\d.]+)\\,x\^\{([\d.]+)\}\$ "
                             r"\(95% CI ([\d.]+)–([\d.]+)\)")
        found = pattern.findall(text.get_text())
        assert [f[0] for f in found] == ["OLS", "SMA", "MA"]
        for method, a, b, lo, hi in found:
            fit = grouped.fit(method.lower())
            # expected: the fit itself (a = 10^intercept), rounded to the digits shown
            assert_allclose(float(a), fit.a, rtol=5e-3)
            assert_allclose([float(b), float(lo), float(hi)],
                            [fit.slope, fit.slope_ci.low, fit.slope_ci.high], rtol=0, atol=5e-4)

    def test_equation_leads_with_the_common_slope_the_report_gives(self, grouped):
        # internal consistency: the first line is fits.csv's common SMA row (the report's
        # answer), not a second estimate; the clades' slopes do not differ (group_tests)
        ax = plot_scaling(grouped)
        (text,) = [t for t in ax.texts if t.get_gid() == "equation"]
        first = text.get_text().splitlines()[0]
        m = re.fullmatch(r"SMA within clades: \$y \\propto x\^\{([\d.]+)\}\$ "
                         r"\(95% CI ([\d.]+)–([\d.]+)\)", first)
        assert m, first
        row = grouped.fits.query("scope == 'common' and method == 'sma'").iloc[0]
        assert_allclose([float(v) for v in m.groups()],
                        [row["slope"], row["slope_low"], row["slope_high"]], rtol=0, atol=5e-4)

    def test_equation_does_not_claim_a_common_slope_when_slopes_differ(self, grouped):
        import dataclasses
        tests = grouped.tables["group_tests"].copy()
        tests.loc[tests["test"] == "slopes_equal", "p_value"] = 0.001
        differ = dataclasses.replace(grouped, tables={**grouped.tables, "group_tests": tests})
        ax = plot_scaling(differ)
        (text,) = [t for t in ax.texts if t.get_gid() == "equation"]
        assert "within" not in text.get_text()
        # the box says the slopes differ, then gives the pooled line as a pooled line
        first, second = text.get_text().split("\n")[:2]
        assert first == "SMA slopes differ: clades' own lines"
        assert second.startswith("SMA, all clades: $y = ")
        # each clade's own line, not the common slope through its mean
        legend = [t.get_text() for lg in ax.figure.legends for t in lg.get_texts()]
        assert "SMA, each clade's own line" in legend
        assert not any("common slope" in t for t in legend)

    def test_equation_covers_no_data(self, grouped):
        ax = plot_scaling(grouped)
        (text,) = [t for t in ax.texts if t.get_gid() == "equation"]
        ax.figure.draw_without_rendering()
        box = text.get_window_extent()
        pts = grouped.data.points
        disp = ax.transData.transform(np.column_stack([pts["x"], pts["y"]]))
        inside = ((disp[:, 0] >= box.x0) & (disp[:, 0] <= box.x1)
                  & (disp[:, 1] >= box.y0) & (disp[:, 1] <= box.y1))
        assert not inside.any()     # exact: no data point under the text

    def test_lines_span_the_fitted_range_only(self, pooled_only):
        ax = plot_scaling(pooled_only, band=False, methods=["ols", "sma", "ma"])
        fit = pooled_only.fit("ols")
        lines = [ln for ln in ax.lines if len(ln.get_xdata()) > 2]
        assert len(lines) == 3
        for ln in lines:
            # exact: the fitted range is the data range of x
            assert_allclose([min(ln.get_xdata()), max(ln.get_xdata())], fit.x_range, rtol=1e-12)
        ols = lines[0]
        # exact law: y = a x^b on the line
        assert_allclose(ols.get_ydata(), fit.a * np.asarray(ols.get_xdata()) ** fit.slope,
                        rtol=1e-10)

    def test_ols_band_matches_statsmodels(self, pooled_only):
        fit = pooled_only.fit("ols")
        pts = pooled_only.data.points
        xs = np.geomspace(*fit.x_range, 7)
        _, lo, hi = fit_band(fit, xs)
        model = sm.OLS(pts["log_y"].to_numpy(), sm.add_constant(pts["log_x"].to_numpy())).fit()
        ref = model.get_prediction(sm.add_constant(np.log10(xs))).conf_int(alpha=0.05)
        # reference library: statsmodels OLS get_prediction, mean confidence interval
        assert_allclose(np.column_stack([lo, hi]), ref, rtol=1e-9)

    def test_group_means_with_se_bars(self, grouped):
        ax = plot_scaling(grouped)
        bars = [c for c in ax.containers if c.__class__.__name__ == "ErrorbarContainer"]
        pts = grouped.data.points
        ref = pts.groupby("group")["log_y"].agg(["mean", "sem"])
        assert len(bars) == len(ref)
        for bar, (_g, row) in zip(bars, ref.iterrows()):
            segs = bar.lines[2][1].get_segments()       # the y error bar
            y_lo, y_hi = segs[0][0][1], segs[0][1][1]
            # reference: pandas mean and SEM of log y, back-transformed (10^(mean -+ SE))
            assert_allclose([y_lo, y_hi], [10 ** (row["mean"] - row["sem"]),
                                           10 ** (row["mean"] + row["sem"])], rtol=1e-9)

    def test_twelve_decades_render_without_warnings(self, tmp_path):
        result = simulated(tmp_path, groups=["a", "b"], decades=(-6, 6))
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            for kind in KINDS:
                buf = io.BytesIO()
                make_figure(result, kind).savefig(buf, format="png", dpi=60)
            ax = plot_scaling(result)
            labels = _visible_major_labels(ax, "x")
        assert labels and all(re.fullmatch(r"\$10\^\{-?\d+\}\$", s) for s in labels)
        # exact: every label is a power of ten; at least 10^-6 ... 10^6 in view
        assert "$10^{0}$" in labels

    def test_data_from_1e_minus_300_to_1e300_draws(self, tmp_path):
        # 600 decades: a 5% margin would reach 1e330 (inf); the axes must stay finite.
        rng = np.random.default_rng(11)
        lx = np.linspace(-300, 300, 20)
        x, y = 10.0 ** lx, 10.0 ** (0.5 * lx + rng.normal(0, 0.05, 20))
        pd.DataFrame({"x": x, "y": y}).to_csv(tmp_path / "wide.csv", index=False)
        result = run_config({"data": {"file": str(tmp_path / "wide.csv"), "x": "x", "y": "y"},
                             "figures": {"formats": ["png"], "dpi": 72}}, write=False)
        ax = plot_scaling(result)
        lo, hi = ax.get_xlim()
        # exact: the limits hold the data and stay inside the float range
        assert 0 < lo <= x.min() and x.max() <= hi < np.inf
        assert np.all(np.isfinite(ax.get_ylim()))

    def test_single_group_renders_without_warnings(self, tmp_path):
        result = simulated(tmp_path, groups=["only"], decades=(1, 2.2), n=12)
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            for kind in KINDS:
                buf = io.BytesIO()
                make_figure(result, kind).savefig(buf, format="png", dpi=60)
            ax = plot_scaling(result)
        # span ~1.2 decades: majors at 1-2-5 steps, still plain numbers
        assert all(re.fullmatch(r"[\d\u2009.]+", s) for s in _visible_major_labels(ax, "x"))
        assert len(_visible_major_labels(ax, "x")) >= 3

    def test_draws_on_a_given_axes(self, pooled_only):
        from matplotlib.figure import Figure
        ax = Figure().add_subplot()
        assert plot_scaling(pooled_only, ax=ax) is ax


class TestPlotNatural:
    def test_uncorrected_curve_is_the_power_law(self, pooled_only):
        ax = plot_natural(pooled_only, methods=["sma"], correction="none")
        fit = pooled_only.fit("sma")
        (line,) = [ln for ln in ax.lines if len(ln.get_xdata()) > 2]
        x = np.asarray(line.get_xdata())
        # exact law: median curve y = a x^b
        assert_allclose(line.get_ydata(), fit.a * x ** fit.slope, rtol=1e-10)
        assert ax.get_xscale() == "linear"
        assert ax.get_yscale() == "linear"   # y stays in natural units

    @staticmethod
    def _markers(fig, gid):
        return [ln for ax in fig.axes for ln in ax.lines if ln.get_gid() == gid]

    def test_requested_predictions_are_marked_with_their_intervals(self, grouped):
        ax = plot_natural(grouped)
        table = grouped.tables["predictions"]
        rows = table[(table["scope"] == "pooled")
                     & table["method"].isin(grouped.config.model.methods)]
        main = [ln for ln in ax.lines if ln.get_gid() == "prediction"]
        # internal consistency: one marker per pooled row of the run's predictions table
        assert len(rows) == 4 and len(main) == len(rows)
        got = sorted((float(ln.get_xdata()[0]), float(ln.get_ydata()[0])) for ln in main)
        assert_allclose(got, sorted(zip(rows["x"], rows["y"])), rtol=1e-12)
        # error bars: caps at y_low and y_high of each row (internal consistency)
        caps = sorted(round(float(c.get_ydata()[0]), 9) for cont in ax.containers
                      for c in cont.lines[1])
        assert_allclose(caps, sorted(np.r_[rows["y_low"], rows["y_high"]]), rtol=1e-8)
        labels = [t.get_text() for lg in ax.figure.legends for t in lg.get_texts()]
        assert "prediction ± 95% prediction interval" in labels
        # the demo's pooled predictions all lie inside the data: no extrapolated entry
        assert not any("extrapolated" in t for t in labels)

    def test_extrapolated_predictions_are_styled_apart(self, pooled_only):
        from matplotlib.colors import to_rgba
        fig = plot_natural(pooled_only).figure
        table = pooled_only.tables["predictions"]
        extra = table[table["extrapolated"].astype(bool)]
        inside = table[~table["extrapolated"].astype(bool)]
        assert len(extra) == 1 and len(inside) == 2   # x = 50 000 lies beyond 15 669 g
        main = fig.axes[0]
        ex = [ln for ln in main.lines if ln.get_gid() == "prediction-extrapolated"]
        ok = [ln for ln in main.lines if ln.get_gid() == "prediction"]
        assert [float(ln.get_xdata()[0]) for ln in ex] == list(extra["x"])
        assert len(ok) == len(inside)
        # open marker for extrapolated, filled for the others (common practice, no source)
        assert all(to_rgba(ln.get_markerfacecolor()) == to_rgba("white") for ln in ex)
        assert all(to_rgba(ln.get_markerfacecolor()) != to_rgba("white") for ln in ok)
        bars = [cont.lines[2][0] for cont in main.containers]
        styles = {tuple(np.round(b.get_linestyle()[0][1] or (), 3))
                  if b.get_linestyle()[0][1] else "solid" for b in bars}
        assert len(styles) == 2   # dashed bars apart from solid ones
        labels = [t.get_text() for lg in fig.legends for t in lg.get_texts()]
        assert "extrapolated prediction (beyond fitted x)" in labels
        assert "prediction ± 95% prediction interval" in labels

    def test_four_decades_spread_the_bulk_of_the_points(self, tmp_path):
        res = simulated(tmp_path, groups=["a"], decades=(0, 4), n=200, seed=5)
        fig = make_figure(res, "natural")
        fig.draw_without_rendering()
        main = fig.axes[0]
        off = np.concatenate([c.get_offsets() for c in main.collections
                              if hasattr(c, "get_offsets") and len(c.get_offsets()) > 10])
        x = off[:, 0]
        lo, hi = np.percentile(res.data.points["x"], [10, 90])
        bulk = np.column_stack([[lo, hi], [1.0, 1.0]])
        disp = main.transData.transform(bulk)[:, 0]
        box = main.get_window_extent()
        share = (disp[1] - disp[0]) / box.width
        # the 10th-90th percentile of x spans at least 60% of the main axes width
        # (display coordinates; common practice, no source). One arithmetic axis over
        # all four decades puts them in 10^3.6 / 10^4 = 40% of it.
        assert share >= 0.6
        assert len(x) == 200 and main.get_xscale() == "linear"
        # the full range is in the second panel: every point inside its x limits
        over = fig.axes[1]
        assert over.get_xlim()[1] >= res.data.points["x"].max()
        w, h = fig.bbox.width, fig.bbox.height
        texts = TestReadableFigures._drawn_texts(fig)
        outside = [t.get_text() for t in texts
                   if ((e := t.get_window_extent()).x0 < -1 or e.y0 < -1
                        or e.x1 > w + 1 or e.y1 > h + 1)]
        assert outside == []   # exact geometry of the drawn figure

    def test_under_two_decades_one_panel_over_all_the_data(self, tmp_path):
        res = simulated(tmp_path, groups=["a"], decades=(0, 1.5), n=40, seed=7)
        fig = make_figure(res, "natural")
        (ax,) = fig.axes
        # one arithmetic panel reaches every point (common practice, no source)
        assert ax.get_xlim()[1] >= res.data.points["x"].max()
        assert ax.child_axes == []

    def test_on_a_given_axes_the_full_range_is_an_inset(self, grouped):
        from matplotlib.figure import Figure
        ax = Figure(figsize=(5, 4)).add_subplot()
        assert plot_natural(grouped, ax=ax) is ax
        (inset,) = ax.child_axes
        assert inset.get_xlim()[1] >= grouped.data.points["x"].max()
        assert ax.get_xlim()[1] < grouped.data.points["x"].max()


class TestPlotExponents:
    def test_whiskers_and_reference_lines(self, grouped):
        ax = plot_exponents(grouped)
        whiskers = [ln for ln in ax.lines if len(ln.get_xdata()) == 2
                    and ln.get_ydata()[0] == ln.get_ydata()[1]]
        from scaling.render.figure_inputs import common_slope_fit
        common = [common_slope_fit(grouped, m) for m in ("ols", "sma", "ma")]
        expected = sorted([(f.slope_ci.low, f.slope_ci.high) for f in grouped.line_fits.values()]
                          + [(c.slope_ci.low, c.slope_ci.high) for c in common])
        got = sorted((float(ln.get_xdata()[0]), float(ln.get_xdata()[1])) for ln in whiskers)
        # expected: the fits' own intervals, one whisker per fit, and the common-slope row
        assert_allclose(got, expected, rtol=1e-12)
        refs = sorted(float(ln.get_xdata()[0]) for ln in ax.lines
                      if len(ln.get_xdata()) == 2 and ln.get_xdata()[0] == ln.get_xdata()[1])
        assert_allclose(refs, [2 / 3, 0.75], rtol=1e-12)   # exact: the config's exponents
        texts = {t.get_text() for t in ax.texts}
        assert {"2/3", "3/4"} <= texts
        labels = [t.get_text().replace("\n", " ") for t in ax.get_yticklabels()]
        # slopes agree: the answer (common slope) first, then pooled, then the clades
        assert labels[:2] == ["Common slope within clades", "Pooled (all clades)"]
        assert "Canopy" in labels


class TestPlotResiduals:
    def test_ols_residuals_match_statsmodels(self, grouped):
        ax = plot_residuals(grouped, method="ols", kind="fitted")
        pts = grouped.data.points
        model = sm.OLS(pts["log_y"].to_numpy(), sm.add_constant(pts["log_x"].to_numpy())).fit()
        got = np.concatenate([c.get_offsets()[:, 1] for c in ax.collections])
        # reference library: statsmodels OLS residuals
        assert_allclose(np.sort(got), np.sort(model.resid), rtol=1e-9, atol=1e-12)

    def test_normal_panel_orders_residuals(self, pooled_only):
        ax = plot_residuals(pooled_only, method="sma", kind="normal")
        off = np.concatenate([c.get_offsets() for c in ax.collections])
        off = off[np.argsort(off[:, 0])]
        assert np.all(np.diff(off[:, 1]) >= 0)    # exact: a quantile plot is monotone
        n = len(off)
        # Blom (1958) positions; compare with scipy.stats.norm at (i - 3/8)/(n + 1/4)
        from scipy import stats
        assert_allclose(off[:, 0], stats.norm.ppf((np.arange(1, n + 1) - 0.375) / (n + 0.25)),
                        rtol=1e-12)


class TestReadableFigures:
    """Text inside the canvas, legend share, intermediate ticks, plain labels."""

    @staticmethod
    def _drawn_texts(fig):
        out = []
        for ax in fig.axes:
            for axis in (ax.xaxis, ax.yaxis):
                lo, hi = sorted(axis.get_view_interval())
                out += [t.label1 for t in axis.get_major_ticks()
                        if lo * (1 - 1e-9) <= t.get_loc() <= hi * (1 + 1e-9)
                        and t.label1.get_visible()]
            out += list(ax.texts) + [ax.title, ax._left_title, ax.xaxis.label, ax.yaxis.label]
        for legend in fig.legends:
            out += legend.get_texts()
        return [t for t in out if t.get_visible() and t.get_text()]

    @pytest.mark.parametrize("kind", ["scaling", "residuals", "natural", "exponents"])
    def test_no_text_outside_the_canvas(self, grouped, kind):
        fig = make_figure(grouped, kind)
        fig.draw_without_rendering()
        w, h = fig.bbox.width, fig.bbox.height
        clipped = [t.get_text() for t in self._drawn_texts(fig)
                   if (e := t.get_window_extent()).x0 < -1 or e.y0 < -1
                   or e.x1 > w + 1 or e.y1 > h + 1]
        assert clipped == []   # exact geometry of the drawn figure

    def test_scaling_legend_at_most_about_a_quarter(self, grouped):
        fig = make_figure(grouped, "scaling")
        fig.draw_without_rendering()
        share = sum(lg.get_window_extent().height for lg in fig.legends) / fig.bbox.height
        assert share <= 0.26   # our target, about a quarter (common practice, no source)

    def test_thirty_groups_legend_is_a_note(self, tmp_path):
        from helpers_figures import simulated
        res = simulated(tmp_path, groups=[f"g{i:02d}" for i in range(30)], n=6)
        fig = make_figure(res, "scaling")
        fig.draw_without_rendering()
        texts = [t.get_text() for lg in fig.legends for t in lg.get_texts()]
        assert not any(t.startswith("g0") for t in texts)
        share = sum(lg.get_window_extent().height for lg in fig.legends) / fig.bbox.height
        assert share <= 0.26

    def test_narrow_span_labels_two_and_five(self):
        from matplotlib.figure import Figure
        from scaling.render.figure_style import natural_log_axis
        ax = Figure().add_subplot()
        ax.plot([12, 80], [12, 80])
        ax.set_xlim(12, 80)
        natural_log_axis(ax)
        fig = ax.figure
        fig.draw_without_rendering()
        shown = {t.get_text() for t in ax.xaxis.get_ticklabels() if t.get_text()}
        # under two decades the 2 and 5 ticks are labelled (common practice, no source)
        assert {"20", "50"} <= shown

    def test_default_labels_do_not_repeat_units(self, tmp_path):
        from scaling.render.figure_inputs import axis_label
        from helpers_figures import simulated
        res = simulated(tmp_path, groups=["a"], n=8)
        cfg = res.config
        res = replace(res, config=replace(cfg, data=replace(cfg.data, x="mass_kg"),
                                          figures=replace(cfg.figures, labels={})))
        assert axis_label(res, "x") == "mass (kg)"
        assert axis_label(res, "y") == "rate (W)"

    def test_common_slope_row_and_lines(self, grouped):
        from scaling.stats.common_slope import common_slope
        ax = plot_exponents(grouped)
        labels = [t.get_text().replace("\n", " ") for t in ax.get_yticklabels()]
        # the clades' slopes do not differ: the common slope is the first row
        assert labels[0] == "Common slope within clades"
        assert ax.get_yticklabels()[0].get_fontweight() == "bold"
        pts = grouped.data.points
        ref = common_slope(pts["log_x"], pts["log_y"], pts["group"].astype(str),
                           method="sma")
        row = labels.index("Common slope within clades")
        dots = [ln for ln in ax.lines if len(ln.get_xdata()) == 1
                and abs(ln.get_ydata()[0] - row) < 0.4]
        # internal consistency: the row shows groups.common_slope's SMA estimate
        assert any(abs(d.get_xdata()[0] - ref.slope) < 1e-12 for d in dots)
        # ... with the interval of fits.csv's common row (the report's numbers)
        row_ci = grouped.fits.query("scope == 'common' and method == 'sma'").iloc[0]
        bars = [ln for ln in ax.lines if len(ln.get_xdata()) == 2
                and abs(ln.get_ydata()[0] - row) < 0.4]
        assert any(np.allclose(b.get_xdata(), [row_ci["slope_low"], row_ci["slope_high"]],
                               rtol=0, atol=1e-12) for b in bars)
        ax = plot_scaling(grouped)
        texts = [t.get_text() for lg in ax.figure.legends for t in lg.get_texts()]
        assert "SMA common slope in each clade" in texts and "SMA (all clades)" in texts


class TestManyGroupsFigures:
    def test_residuals_of_many_groups_keep_their_layout(self, tmp_path):
        # exact geometry of the drawn figure: with 20 groups of 300 points (6 000 > 5 000
        # drawn) the subset is said once, as the legend's title under the panels (not
        # over the points of every panel), and the layout does not collapse
        from helpers_figures import simulated
        from scaling.render.figure_style import MAX_DRAWN_POINTS
        result = simulated(tmp_path, groups=[f"g{i:02d}" for i in range(20)], n=300, seed=4)
        assert len(result.data.points) > MAX_DRAWN_POINTS
        with warnings.catch_warnings():
            warnings.simplefilter("error", UserWarning)   # "constrained_layout not applied"
            fig = make_figure(result, "residuals")
            fig.draw_without_rendering()
        w = fig.bbox.width
        assert not [t for ax in fig.axes for t in ax.texts if "shown" in t.get_text()]
        for ax in fig.axes:
            assert ax.get_window_extent().width > 0.25 * w
        (legend,) = fig.legends
        assert legend.get_title().get_text() == (
            "5\u2009000 of 6\u2009000 points shown in each panel (random); all are fitted")
        box = legend.get_window_extent()
        assert box.x0 >= -1 and box.x1 <= w + 1   # the title fits the figure's width
        assert [t.get_text() for t in legend.get_texts()] == [
            "20 groups (colours cycle; too many to list)"]

    def test_subset_note_without_groups_and_on_a_users_axes(self, tmp_path):
        import matplotlib
        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
        from scaling.render.figure_residuals import plot_residuals
        from scaling.run.pipeline import run_config
        rng = np.random.default_rng(5)   # simulation with a known truth: y = 2 x^0.75
        x = 10 ** rng.uniform(0, 3, 6000)
        pd.DataFrame({"mass": x, "rate": 2 * x ** 0.75 * 10 ** rng.normal(0, 0.08, 6000)}
                     ).to_csv(tmp_path / "one.csv", index=False)
        result = run_config({"data": {"file": str(tmp_path / "one.csv"), "x": "mass",
                                      "y": "rate"}}, write=False)
        fig = make_figure(result, "residuals")
        (legend,) = fig.legends   # no groups: a legend only for the note
        assert legend.get_title().get_text().startswith("5\u2009000 of 6\u2009000 points")
        assert legend.get_texts() == []
        # a user's own axes: the figure is theirs, so the note stays on the axes
        fig2, ax = plt.subplots()
        plot_residuals(result, ax=ax, method="ols", kind="fitted")
        assert [t.get_text() for t in ax.texts] == [
            "5\u2009000 of 6\u2009000 points\nshown; all are fitted"]
        assert fig2.legends == []
        plt.close(fig2)


class TestGroupCurveValues:
    @pytest.mark.parametrize("correction", ["smearing", "parametric", "none"])
    def test_many_groups_curves_equal_each_groups_own(self, tmp_path, correction,
                                                       monkeypatch):
        # internal consistency: the curves made for all groups in one array pass are the
        # numbers _curve_y makes for each group alone, to the last bit; a group whose
        # factor is unusable goes through predict (which refuses it, as for one group)
        from scaling.render import figure_natural as fn
        res = simulated(tmp_path, groups=[f"g{i:02d}" for i in range(15)], n=30, seed=4)
        groups = sorted({str(g) for g in res.fits.loc[res.fits["scope"] == "group", "group"]})
        got = fn._group_curve_points(res, "sma", groups, correction, "prediction")
        assert [g for g, *_ in got] == groups
        for g, xs, y, _ in got:
            fit = res.line_fits[("group", g, "sma")]
            lo, hi = fn.fit_xrange(fit, res)
            ref_x = np.linspace(lo, hi, 240)
            ref_x[0], ref_x[-1] = lo, hi
            factor = fn._group_factor(res, g, "sma", correction)
            assert np.array_equal(xs, ref_x)
            assert np.array_equal(y, fn._curve_y(fit, ref_x, correction, "prediction", factor))
        if correction == "smearing":
            plain = fn._group_factor
            monkeypatch.setattr(fn, "_group_factor", lambda r, g, m, c: (
                float("nan") if g == "g03" else plain(r, g, m, c)))
            with pytest.raises(ConfigError):
                fn._group_curve_points(res, "sma", groups, correction, "prediction")

    @pytest.mark.parametrize("method", ["ols", "sma", "ma"])
    def test_curve_is_predicts_corrected_mean(self, method):
        # internal consistency: the natural figure's group curves are predict(...).y,
        # computed without the interval, to the last bit
        from scaling.render.figure_natural import _curve_y
        from scaling.stats.line_results import fit_line
        from scaling.stats.predictions import predict
        rng = np.random.default_rng(8)
        x = 10 ** rng.uniform(0.0, 3.0, 40)
        y = 2.0 * x ** 0.75 * 10 ** rng.normal(0.0, 0.1, 40)
        fit = fit_line(x, y, method=method, log_base=10)
        xs = np.linspace(*fit.x_range, 240)
        for correction, factor in (("parametric", None), ("smearing", 1.07), ("ratio", 0.98),
                                   ("none", None)):
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                ref = predict(fit, xs, correction=correction, factor=factor).y
            assert np.array_equal(_curve_y(fit, xs, correction, "prediction", factor), ref)
        with pytest.raises(ConfigError):   # no usable factor: predict's own message
            _curve_y(fit, xs, "smearing", "prediction", float("nan"))
