"""The scaling figure of a run: the data on natural-unit log axes, fitted lines, bands,
group means, per-group lines and the equation box.

The lines and bands are drawn by :func:`scaling.render.plots.plot_fit`, the
function a Python user calls on a fit, so the run's figure and a notebook's
agree; the per-group lines under the common slope pass through the run's
group means as :func:`scaling.render.plots.plot_comparison` draws them.
"""

from __future__ import annotations

import math

import matplotlib
import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.collections import LineCollection
from matplotlib.figure import Figure
from matplotlib.lines import Line2D

from ..stats.logscale import to_log
from ..stats.schema import method_label
from .figure_inputs import (axis_label, common_slope_fit, drawn_primary, factor_of, fit_xrange,
                            drawn_points, fitted_n, group_means_table, group_sizes, points_drawn,
                            run_base,
                            run_groups, run_methods, scatter_shown_groups, shown_groups,
                            shown_groups_handle, slopes_agree)
from .figure_style import (LEGEND_MAX_GROUPS, METHOD_DASHES, METHOD_SHADES, PALETTE,
                           PHYLO_COLOUR, STYLE, THIN, figure_legend, group_style, log_margins,
                           many_groups_handle, natural_log_axis, new_figure, plain_number,
                           scatter_by_colour, scatter_coded, styled)
from .plots import common_line, plot_fit, unlog
from .prediction_words import answer_primary, inverse_run
from .wording import number_text, plural as plural_of, possessive

__all__ = ["plot_scaling", "make_scaling", "equation_text", "common_slope_text"]

# At most this many fitted equations are written on the scaling plot; the
# legend names every line (more would crowd the data off the axes).
MAX_EQUATIONS = 3


def equation_text(fit, *, digits: int = 3, factor: float | None = None,
                  correction: str = "", label: str | None = None) -> str:
    """The fitted line in natural units: ``median y = a·x^b`` with b's interval (mathtext).

    The back-transformed line gives the median of y; with ``factor`` (the
    correction factor of ``correction``) the box also says mean = median × factor.
    ``label`` replaces the method's label at the start (e.g. "SMA, all clades").
    """
    a = fit.a
    pct = f"{100 * fit.confidence:g}%"
    lo, hi = fit.slope_ci.low, fit.slope_ci.high
    ci = (f"{pct} CI {lo:.{digits}f}–{hi:.{digits}f}" if np.isfinite(lo) and np.isfinite(hi)
          else f"{pct} CI unbounded")
    a_text = (plain_number(a, digits) if 1e-3 <= abs(a) < 1e6
              else f"{a / 10 ** math.floor(math.log10(a)):.{digits - 1}f}"
                   f"\\times10^{{{math.floor(math.log10(a))}}}")
    a_text = a_text.replace(THIN, r"\,")
    factor_text = ""
    if factor is not None and np.isfinite(factor):
        factor_text = f"\nline = median; mean = median × {number_text(factor, 3)}"
    return (f"{label or method_label(fit.method)}: $y = {a_text}\\,x^{{{fit.slope:.{digits}f}}}$ "
            f"({ci}){factor_text}")


def common_slope_text(slope: float, low: float, high: float, *, method: str, confidence: float,
                      groups_word: str, digits: int = 3) -> str:
    """The common within-group exponent, for the head of the scaling plot's equation box.

    Each group keeps its own constant, so the line is written y ∝ x^b.

    Examples
    --------
    >>> common_slope_text(0.7372, 0.701, 0.781, method="sma", confidence=0.95,
    ...                   groups_word="clades")
    'SMA within clades: $y \\propto x^{0.737}$ (95% CI 0.701–0.781)'
    """
    pct = f"{100 * confidence:g}%"
    ci = (f"{pct} CI {low:.{digits}f}–{high:.{digits}f}"
          if np.isfinite(low) and np.isfinite(high) else f"{pct} CI unbounded")
    return (f"{method_label(method)} within {groups_word}: "
            f"$y \\propto x^{{{slope:.{digits}f}}}$ ({ci})")


def slopes_differ_in(result, method: str) -> bool:
    """True when the run compared groups by ``method`` and found their slopes differ."""
    table = (result.tables or {}).get("group_tests")
    if table is None or not len(table) or "test" not in table:
        return False
    rows = table[(table["method"] == method) & (table["test"] == "slopes_equal")]
    return bool(len(rows)) and float(rows["p_value"].iloc[0]) <= 1 - result.config.model.confidence


def _group_line(fit, xs, common, means) -> np.ndarray:
    """Log-scale fitted values of one group's line at ``xs``: through the group's own
    mean with the common slope when ``common`` is given, else the group's own line."""
    if common is None or means is None:   # fit_band's fitted values, without its band
        return fit.intercept + fit.slope * np.asarray(to_log(xs, fit.log_base), dtype=float)
    return common_line(common.slope, means[0], means[1], xs, fit.log_base)


# --------------------------------------------------------------------------
# scaling plot


@styled
def plot_scaling(result, *, ax=None, methods=None, scope: str = "pooled",
                 group_lines: str | bool | None = "auto", band: bool = True,
                 equation: bool = True, means: bool = True, legend: bool = True,
                 size: str = "single"):
    """Data on log-log axes in natural units, with fitted lines and bands.

    Parameters
    ----------
    result : RunResult
    ax : matplotlib Axes, optional
        Draw here; by default a new Figure of width ``size`` is made.
    methods : sequence of str, optional
        Methods whose ``scope`` lines are drawn; defaults to the run's primary
        method (``model.primary``, else the first symmetric method, else OLS).
    scope : {"pooled", "group_means"}
        Which fit's lines carry the band and the equation.
    group_lines : "auto", method name, or False
        Per-group lines (thin, in the group colour, no band) for one method;
        "auto" draws them for SMA (else the first method) when there are groups.
    band : bool
        Shade the confidence band of each line.
    equation : bool
        Write y = a·x^b with the interval of b in the emptiest corner.
    means : bool
        Draw group means (larger symbols, ± 1 SE bars back-transformed).
    legend : bool
    size : {"single", "double"}

    Returns
    -------
    matplotlib.axes.Axes

    Notes
    -----
    Bands: var(fitted at X0) = s_r^2/n + (X0 - mean_x)^2 var(b), t quantile on
    n - 2 df (exact for OLS; Warton et al. 2006, Biol. Rev. 81:259 for SMA
    and MA).  Lines and bands span the fitted range of x only.
    """
    own = ax is None
    if own:
        ax = new_figure(size, 0.92).add_subplot()
    pts, total = drawn_points(result)   # at most MAX_DRAWN_POINTS, the same on every road
    base = run_base(result)
    if methods is None:   # the primary method's line; other methods only when asked
        drawn = list(result.config.model.methods)
        methods = [drawn_primary(drawn, result)] if drawn else drawn
        if drawn and inverse_run(result.config):   # the line that reads x off leads
            methods = [answer_primary(result.config)]
    methods = run_methods(result, methods)
    groups = run_groups(result)
    group_word = str(result.config.data.group or "group")
    plural = plural_of(group_word)
    handles: list = []
    gm = None
    xs_all, ys_all = [pts["x"].to_numpy()], [pts["y"].to_numpy()]
    # points to draw: in memory, or collected by a large-data run's second pass; without
    # them (a large-data result made before they were collected) lines and means, said so
    held = points_drawn(result)
    unheld = Line2D([], [], ls="none", marker="none",
                    label="points not drawn: large-data run"
                          + ("" if groups else f" (n = {fitted_n(result)})"))

    # data
    shown = shown_groups(result, groups)   # all, or GROUP_LINES_MAX spread over the slopes
    if groups:
        gm = group_means_table(result)
        if held:
            scatter_shown_groups(ax, pts, groups, shown, total=total, s=12,
                                 edgecolor="white", linewidth=0.3, alpha=0.75, zorder=2)
        if len(shown) < len(groups):
            handles.append(shown_groups_handle(len(groups), len(shown), plural))
        elif len(groups) <= LEGEND_MAX_GROUPS:
            sizes = group_sizes(result, groups)
            for i, g in enumerate(groups):
                colour, marker = group_style(i)
                handles.append(Line2D([], [], ls="none", marker=marker, color=colour,
                                      markeredgecolor="white", markeredgewidth=0.3,
                                      markersize=4.5, label=f"{g} (n = {sizes[i]})"))
        else:
            handles.append(many_groups_handle(len(groups)))
        if means and gm is not None:
            # all means at once: index of each table row among the drawn groups
            where = {g: i for i, g in enumerate(shown)}
            idx = np.array([where.get(str(g), -1) for g in gm["group"]], dtype=int)
            keep = idx >= 0
            lx = gm["mean_log_x"].to_numpy(float)[keep]
            ly = gm["mean_log_y"].to_numpy(float)[keep]
            sx = np.nan_to_num(gm["se_log_x"].to_numpy(float)[keep], nan=0.0)
            sy = np.nan_to_num(gm["se_log_y"].to_numpy(float)[keep], nan=0.0)
            idx = idx[keep]
            mx, my = unlog(lx, base), unlog(ly, base)
            if not held:   # the equation box keeps clear of the means instead
                xs_all.append(mx)
                ys_all.append(my)
            xerr = np.vstack([mx - unlog(lx - sx, base), unlog(lx + sx, base) - mx])
            yerr = np.vstack([my - unlog(ly - sy, base), unlog(ly + sy, base) - my])
            if len(shown) <= LEGEND_MAX_GROUPS:
                for j, i in enumerate(idx):
                    colour, marker = group_style(int(i))
                    ax.errorbar(mx[j:j + 1], my[j:j + 1], xerr=xerr[:, j:j + 1],
                                yerr=yerr[:, j:j + 1], fmt="none", ecolor="black",
                                elinewidth=0.7, capsize=1.5, capthick=0.6, zorder=5)
                    ax.scatter(mx[j:j + 1], my[j:j + 1], s=42, marker=marker,
                               facecolor=colour, edgecolor="black", linewidth=0.8, zorder=6)
            elif idx.size:
                # many groups: small symbols, one artist, a seeded random drawing order
                # (large symbols of hundreds of means would hide the data and each other)
                bars = ax.errorbar(mx, my, xerr=xerr, yerr=yerr, fmt="none", ecolor="black",
                                   elinewidth=0.4, capsize=0, zorder=5, alpha=0.6)
                for part in bars.lines[2]:   # clipped to the axes: nothing for the layout
                    part.set_in_layout(False)
                scatter_by_colour(ax, mx, my, idx % len(PALETTE), seed=2, s=14,
                                  edgecolor="black", linewidth=0.5, zorder=6)
            handles.append(Line2D([], [], ls="none", marker="o", markerfacecolor="white",
                                  markeredgecolor="black", markersize=6,
                                  label=f"{group_word} mean ± 1 SE"))
    elif not held:
        handles.append(unheld)
    else:
        scatter_coded(ax, pts["x"].to_numpy(), pts["y"].to_numpy(),
                       np.zeros(len(pts), dtype=int), 1, total=total, s=12, edgecolor="white",
                       linewidth=0.3, alpha=0.8, zorder=2)   # same look; thinned above a size
        handles.append(Line2D([], [], ls="none", marker="o", color=PALETTE[0],
                              markersize=4.5, label=f"data (n = {total})"))

    # per-group lines
    common, gmethod = None, None
    if len(groups) > 1 and group_lines:
        gmethod = drawn_primary(methods, result) if group_lines == "auto" else str(group_lines)
        drawn = False
        segments, seg_colours = [], []
        # the common slope through each group's mean only when the groups share it;
        # when their slopes differ each group's own line is drawn
        common = (common_slope_fit(result, gmethod) if slopes_agree(result, gmethod)
                  else None)
        means_of = {} if common is None or gm is None else {
            str(r.group): (r.mean_log_x, r.mean_log_y) for r in gm.itertuples(index=False)}
        for i, g in enumerate(shown):
            fit = result.line_fits.get(("group", g, gmethod))
            if fit is None:
                continue
            lo, hi = fit_xrange(fit, result)
            if len(shown) > LEGEND_MAX_GROUPS:
                # a straight line on log-log axes: its two ends suffice
                xs = np.array([lo, hi])
                fitted = _group_line(fit, xs, common, means_of.get(g))
                segments.append(np.column_stack([xs, unlog(fitted, base)]))
                seg_colours.append(group_style(i)[0])
                drawn = True
                continue
            xs = np.geomspace(lo, hi, 40)
            fitted = _group_line(fit, xs, common, means_of.get(g))
            ax.plot(xs, unlog(fitted, base), color=group_style(i)[0], lw=0.9,
                    ls=METHOD_DASHES.get(gmethod, "-"), zorder=3)
            drawn = True
        if segments:
            lines = ax.add_collection(LineCollection(
                segments, colors=seg_colours, linewidths=0.9,
                linestyles=METHOD_DASHES.get(gmethod, "-"), zorder=3, gid="group-lines"))
            # clipped to the axes, so they cannot move the layout, which otherwise
            # measures each of a thousand paths once more through the log transform
            lines.set_in_layout(False)
        if drawn:
            handles.append(Line2D([], [], color="#888888", lw=0.9,
                                  ls=METHOD_DASHES.get(gmethod, "-"),
                                  label=(f"{method_label(gmethod)} common slope in each "
                                         f"{group_word}" if common is not None else
                                         f"{method_label(gmethod)}, each {possessive(group_word)} own "
                                         "line")))

    # main lines with bands; the equation box leads with the answer: the common
    # within-group exponent when the groups' slopes do not differ (as the report does)
    eq_lines = []
    lead_line = ""
    if scope == "pooled" and common is not None and slopes_agree(result, gmethod):
        lead_line = common_slope_text(common.slope, common.slope_ci.low, common.slope_ci.high,
                                      method=gmethod, confidence=result.config.model.confidence,
                                      groups_word=plural)
    elif scope == "pooled" and gmethod is not None and slopes_differ_in(result, gmethod):
        lead_line = f"{method_label(gmethod)} slopes differ: {plural}' own lines"
    for method in methods:
        fit = result.line_fits.get((scope, "", method))
        if fit is None:
            continue
        lo, hi = fit_xrange(fit, result)
        if scope == "group_means" and gm is not None:
            mxs = unlog(gm["mean_log_x"].to_numpy(dtype=float), base)
            lo, hi = float(np.min(mxs)), float(np.max(mxs))
        shade = METHOD_SHADES.get(method, "#333333")
        plot_fit(fit, ax=ax, x_range=(lo, hi), band=band, color=shade, band_alpha=0.14,
                 lw=1.3, ls=METHOD_DASHES.get(method, "-"), zorder=4)
        xs_all.append(np.asarray(ax.lines[-1].get_xdata()))
        ys_all.append(np.asarray(ax.lines[-1].get_ydata()))
        where = "group means" if scope == "group_means" else (
            f"all {plural}" if groups else "")
        label = method_label(method) + (f" ({where})" if where else "")
        handles.append(Line2D([], [], color=shade, lw=1.3, ls=METHOD_DASHES.get(method, "-"),
                              label=label))
        if len(eq_lines) < MAX_EQUATIONS:
            # an inverse run reads x off the line: no mean of y, so no factor in the box
            factor = {} if inverse_run(result.config) else factor_of(result, scope, "", method)
            eq_lines.append(equation_text(
                fit, **factor,
                label=f"{method_label(method)}, all {plural}" if lead_line else None))
    if scope == "pooled":   # phylogenetic lines (scaling/phylo_stage.py), no band
        for method in methods:
            fit = result.line_fits.get(("phylo", "", method))
            if fit is None:
                continue
            plot_fit(fit, ax=ax, x_range=fit_xrange(fit, result), band=False,
                     color=PHYLO_COLOUR, lw=0.9, ls=METHOD_DASHES.get(method, "-"), zorder=4.5)
            handles.append(Line2D([], [], color=PHYLO_COLOUR, lw=0.9,
                                  ls=METHOD_DASHES.get(method, "-"),
                                  label=f"phylogenetic {method_label(method)}"))
            if len(eq_lines) < MAX_EQUATIONS + 2:   # room for the phylogenetic pair
                eq_lines.append("phylo. " + equation_text(fit))
    if band and eq_lines:
        handles.append(matplotlib.patches.Patch(color="#4d4d4d", alpha=0.25, lw=0,
                                                label=f"{100 * result.config.model.confidence:g}% "
                                                      "confidence band"))
    if groups and not held:   # the group entries above count each group's points
        handles.append(unheld)

    natural_log_axis(ax)
    log_margins(ax, 0.05)
    natural_log_axis(ax)   # again: locators depend on the final span
    ax.set_xlabel(axis_label(result, "x"))
    ax.set_ylabel(axis_label(result, "y"))

    if legend and handles:
        if own:
            ncol = 4 if size == "double" else 3   # the legend keeps to about a quarter
            figure_legend(ax.figure, handles, ncol, handlelength=2.0, columnspacing=0.8,
                           handletextpad=0.4, fontsize=STYLE["font.size"] - 1)
        else:
            ax.legend(handles=handles, loc="best", handlelength=2.6)
    if lead_line:
        eq_lines.insert(0, lead_line)
    if equation and eq_lines:
        text = ax.text(0.02, 0.98, "\n".join(eq_lines), transform=ax.transAxes,
                       ha="left", va="top", fontsize=STYLE["font.size"] - 0.5,
                       linespacing=1.35, zorder=8,
                       bbox=dict(boxstyle="round,pad=0.25", facecolor="white",
                                 edgecolor="none", alpha=0.85))
        text.set_gid("equation")
        if len(groups) <= LEGEND_MAX_GROUPS:
            # the corner search redraws the figure up to 11 times: too slow with many
            # groups, where the equation stays upper left
            _place_in_emptiest_corner(ax, text, np.concatenate(xs_all),
                                      np.concatenate(ys_all))
    return ax


_CORNERS = {"upper left": (0.02, 0.98, "left", "top"),
            "lower right": (0.98, 0.02, "right", "bottom"),
            "upper right": (0.98, 0.98, "right", "top"),
            "lower left": (0.02, 0.02, "left", "bottom")}


def _laid_out(fig):
    """Run the figure's layout (positions only; nothing is drawn) and return the renderer."""
    engine = fig.get_layout_engine()
    if engine is None:
        fig.draw_without_rendering()
        return None
    canvas = fig.canvas if isinstance(fig.canvas, FigureCanvasAgg) else FigureCanvasAgg(fig)
    engine.execute(fig)
    return canvas.get_renderer()


def _covered(ax, text, xs, ys, renderer=None) -> int:
    """Number of data points / line samples under ``text`` once laid out (``renderer``:
    the figure is laid out already)."""
    renderer = renderer or _laid_out(ax.figure)
    box = text.get_window_extent(renderer).padded(2.0)
    disp = ax.transData.transform(np.column_stack([xs, ys]))
    inside = ((disp[:, 0] >= box.x0) & (disp[:, 0] <= box.x1)
              & (disp[:, 1] >= box.y0) & (disp[:, 1] <= box.y1))
    return int(np.sum(inside))


def _inside(ax, text, renderer) -> bool:
    """True when ``text`` lies within the axes: then where it sits does not change the
    layout (the axes' own box already bounds it), and moving it needs no new layout."""
    box, axbox = text.get_window_extent(renderer), ax.get_window_extent(renderer)
    return (box.x0 >= axbox.x0 and box.x1 <= axbox.x1 and box.y0 >= axbox.y0
            and box.y1 <= axbox.y1)


def _place_in_emptiest_corner(ax, text, xs, ys) -> str:
    """Move ``text`` to the axes corner that covers fewest points (after layout).

    Tries the corners in the order of :data:`_CORNERS`, stops at the first
    that covers nothing; if every corner covers something, raises the top of
    the y-axis until the upper-left corner is clear.  Returns the corner.
    """
    counts = {}
    renderer = None   # set while the layout holds: it was found with the text inside the axes
    for name, (x, y, ha, va) in _CORNERS.items():
        text.set_position((x, y))
        text.set_ha(ha)
        text.set_va(va)
        if renderer is not None and not _inside(ax, text, renderer):
            renderer = None
        if renderer is None:
            renderer = _laid_out(ax.figure)
            renderer = renderer if renderer is not None and _inside(ax, text, renderer) else None
        counts[name] = _covered(ax, text, xs, ys, renderer)
        if counts[name] == 0:
            return name
    name = "upper left"
    x, y, ha, va = _CORNERS[name]
    text.set_position((x, y))
    text.set_ha(ha)
    text.set_va(va)
    log_scale = ax.get_yscale() == "log"
    fwd = (np.log10 if log_scale else (lambda v: v))
    inv = ((lambda v: 10 ** v) if log_scale else (lambda v: v))
    for _ in range(6):
        renderer = _laid_out(ax.figure)
        box = text.get_window_extent(renderer).padded(2.0)
        axbox = ax.get_window_extent()
        frac = (box.y0 - axbox.y0) / axbox.height      # text bottom, axes fraction
        lo, hi = (fwd(v) for v in ax.get_ylim())
        top = fwd(float(np.max(ys)))
        if frac <= 0.05:
            break
        new_hi = lo + (top - lo) / (frac - 0.02)
        ax.set_ylim(inv(lo), inv(max(new_hi, hi)))
        if log_scale:
            natural_log_axis(ax, "y")
        if _covered(ax, text, xs, ys) == 0:
            break
    return name


@styled
def make_scaling(result, *, size: str = "single", **kwargs) -> Figure:
    """The scaling plot as a Figure (see :func:`plot_scaling`)."""
    return plot_scaling(result, size=size, **kwargs).figure
