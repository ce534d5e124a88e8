"""The natural-scale figure of a run: back-transformed curves with their bands and the
requested predictions, on arithmetic axes (y always in natural units)."""

from __future__ import annotations

import matplotlib
import numpy as np
import pandas as pd
from matplotlib.collections import LineCollection
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.ticker import FuncFormatter, MaxNLocator

from ..stats.logscale import to_log
from ..stats.predictions import predict, saved_factor
from ..stats.schema import method_label
from .figure_inputs import (axis_label, drawn_points, fit_xrange, reused, run_groups,
                            run_methods, scatter_shown_groups, shown_groups,
                            shown_groups_handle)
from .headline import answer_line
from .prediction_words import answer_primary, inverse_run, predicting_method
from .wording import plural as plural_of, possessive
from .figure_style import (LEGEND_MAX_GROUPS, METHOD_DASHES, METHOD_SHADES, PALETTE, STYLE,
                           arith_formatter, figure_legend, group_style, many_groups_handle,
                           new_figure, scatter_coded, styled)

__all__ = ["plot_natural", "make_natural", "groups_differ"]

#: Above this many decades of x the natural-scale plot zooms on the central data
#: (x up to :data:`NATURAL_ZOOM_QUANTILE`) and adds a full-range panel (or inset).
NATURAL_ZOOM_DECADES = 2.0
NATURAL_ZOOM_QUANTILE = 90.0
_PRED_COLOUR = "#000000"


def groups_differ(result) -> bool:
    """True when the Answer reports each group's own line (the groups' slopes differ;
    :func:`scaling.render.headline.answer_line` with the Answer's method)."""
    table = (result.tables or {}).get("group_tests")
    if not isinstance(table, pd.DataFrame) or not len(table):
        return False
    cfg = result.config
    return answer_line(table, cfg.model.methods, answer_primary(cfg),
                       cfg.model.confidence)[0] == "groups"


def _natural_predictions(result, methods: list, *, inverse: bool = False,
                         scope: str = "pooled"):
    """Rows of the run's ``predictions`` table (``inverse_predictions`` when ``inverse``)
    drawn on the natural-scale plot: of ``scope`` (``pooled``, or ``group`` when each
    group's own curve is drawn), for the methods drawn; None if there are none."""
    name, value = ("inverse_predictions", "x") if inverse else ("predictions", "y")
    table = (result.tables or {}).get(name)
    if not isinstance(table, pd.DataFrame) or not len(table) or "scope" not in table:
        return None
    rows = table[(table["scope"] == scope) & table["method"].isin(methods)]
    rows = rows[np.isfinite(rows[value].to_numpy(dtype=float))]
    return rows if len(rows) else None


def _row_colours(preds, groups: list | None) -> list:
    """Each prediction row's colour: its group's (rows of scope group) or black."""
    if not groups or "group" not in preds or not (preds["scope"] == "group").any():
        return [_PRED_COLOUR] * len(preds)
    index = {g: i for i, g in enumerate(groups)}
    return [group_style(index[str(g)])[0] if str(g) in index else _PRED_COLOUR
            for g in preds["group"]]


#: Up to this many marked predictions each is its own artist; above, one artist per colour
#: (a thousand groups' predictions drawn one by one take seconds).
MARKED_ONE_BY_ONE = 40


def _mark_rows(ax, x, y, mid, low, high, colours, *, across: bool, marker: str, mfc, ls,
               ms: float, small: bool, gid: str) -> None:
    """Markers at (x, y) with the interval ``low``-``high`` around ``mid`` as a bar
    (``across``: horizontal, for an x read off the line; else vertical), in each row's
    colour; ``mfc`` None: filled in that colour."""
    finite = np.isfinite(low) & np.isfinite(high)
    bar_kw = dict(fmt="none", elinewidth=0.8, capsize=2.0 if small else 2.5, capthick=0.8,
                  zorder=6)
    if len(x) <= MARKED_ONE_BY_ONE:
        batches = [([i], colours[i]) for i in range(len(x))]
    else:
        batches = [(np.flatnonzero(colours == c), c) for c in dict.fromkeys(colours)]
    for rows, c in batches:
        bars = [i for i in rows if finite[i]]
        if len(rows) > 1 and bars:   # many rows of one colour: their bars as one line
            _bars_as_one_line(ax, x[bars], y[bars], mid[bars], low[bars], high[bars], c,
                              across=across, ls=ls, **bar_kw)
        elif len(rows) == 1 or bars:
            err = (np.vstack([np.maximum(mid[bars] - low[bars], 0.0),
                              np.maximum(high[bars] - mid[bars], 0.0)]) if bars else None)
            at = rows if len(rows) == 1 else bars
            cont = ax.errorbar(x[at], y[at], **({"xerr": err} if across else {"yerr": err}),
                               ecolor=c, **bar_kw)
            if err is not None:
                for bar in cont.lines[2]:
                    bar.set_linestyle(ls)
        ax.plot(x[rows], y[rows], ls="none", marker=marker, markersize=ms,
                markerfacecolor=mfc or c, markeredgecolor=c, markeredgewidth=0.8, zorder=7,
                gid=gid)


def _bars_as_one_line(ax, x, y, mid, low, high, colour, *, across: bool, ls, elinewidth,
                      capsize, capthick, zorder, fmt=None) -> None:
    """The bars and caps ``ax.errorbar`` draws for these rows, as one line broken between
    the bars and one line of caps: the same marks, without a path object per bar (twenty
    thousand predictions of ten thousand groups took errorbar seconds)."""
    centre = x if across else y
    ends = np.column_stack([centre - np.maximum(mid - low, 0.0),
                            centre + np.maximum(high - mid, 0.0)])
    at = np.column_stack([y if across else x] * 2)
    gap = np.full((len(centre), 1), np.nan)
    bar_x, bar_y = (ends, at) if across else (at, ends)
    ax.plot(np.hstack([bar_x, gap]).ravel(), np.hstack([bar_y, gap]).ravel(), color=colour,
            lw=elinewidth, ls=ls, zorder=zorder, solid_capstyle="butt")
    ax.plot(bar_x.ravel(), bar_y.ravel(), ls="none", marker="|" if across else "_",
            markersize=2 * capsize, markeredgewidth=capthick, color=colour, zorder=zorder)


def _inverse_markers(ax, result, preds, handles, xs_all, ys_all, *, small: bool,
                     groups: list | None = None) -> None:
    """Each requested y marked on the line at the x read off it, with the x interval as a
    horizontal bar; extrapolated ones (y outside the fitted y range) open, bars dashed.
    Rows of each group's own line take the group's colour."""
    colours = np.array(_row_colours(preds, groups), dtype=object)
    x = preds["x"].to_numpy(float)
    y = preds["y"].to_numpy(float)
    low = preds["x_low"].to_numpy(float)
    high = preds["x_high"].to_numpy(float)
    extra = preds["extrapolated"].astype(bool).to_numpy()
    pct = f"{100 * result.config.model.confidence:g}%"
    kinds = preds["interval"].iloc[0] if "interval" in preds else "prediction"
    ms = 3.0 if small else 4.5
    for flag, style, label in (
            (False, dict(mfc=None, ls="-"), f"given y: x ± {pct} {kinds} interval"),
            (True, dict(mfc="white", ls=(0, (2, 1.5))),
             "given y beyond the fitted y range (extrapolated)")):
        sel = extra == flag
        if not np.any(sel):
            continue
        _mark_rows(ax, x[sel], y[sel], x[sel], low[sel], high[sel], colours[sel],
                   across=True, marker="s", mfc=style["mfc"], ls=style["ls"], ms=ms,
                   small=small, gid="inverse-extrapolated" if flag else "inverse")
        handles.append(Line2D([], [], color=_PRED_COLOUR, lw=0.8, ls=style["ls"], marker="s",
                              markersize=4, markerfacecolor=style["mfc"] or _PRED_COLOUR,
                              markeredgecolor=_PRED_COLOUR, label=label))
        xs_all += [x[sel], np.where(np.isfinite(high[sel]), high[sel], x[sel])]
        ys_all += [y[sel], y[sel]]


def _run_factor(result, method: str, correction: str):
    """The run's correction factor of the pooled ``method`` line (smearing, ratio), or None
    (parametric and none follow from the fit itself).

    The factors were computed once by the prediction stage (the saved fits;
    else the fits table's ``<correction>_factor`` column); the figure never
    computes them from the points again.
    """
    if correction not in ("smearing", "ratio"):
        return None
    saved = result.saved_fits.get(("pooled", "", method))
    if saved is not None:
        return saved_factor(saved, correction)
    fits, col = result.fits, f"{correction}_factor"
    if fits is not None and col in fits:
        row = fits[(fits["scope"] == "pooled") & (fits["method"] == method)]
        if len(row) and np.isfinite(float(row[col].iloc[0])):
            return float(row[col].iloc[0])
    return None


def _group_factor(result, group: str, method: str, correction: str):
    """The run's correction factor of one group's own line (see :func:`_run_factor`)."""
    if correction not in ("smearing", "ratio"):
        return None
    saved = result.saved_fits.get(("group", group, method))
    return saved_factor(saved, correction) if saved is not None else None


def _curve_y(fit, xs: np.ndarray, correction: str, interval: str, factor) -> np.ndarray:
    """The corrected curve of ``fit`` at ``xs``: ``predict(...).y`` without its interval
    (the same arithmetic: factor * base ** (a + b log_base x)); anything unusual (no log
    base, no usable factor) goes through :func:`predict`, which says why."""
    base = fit.log_base
    cf = _plain_factor(fit, correction, factor)
    if cf is None:
        return np.asarray(predict(fit, xs, correction=correction, interval=interval,
                                  factor=factor).y, float)
    fitted = fit.intercept + fit.slope * to_log(xs, base)
    with np.errstate(over="ignore"):
        return cf * np.power(base, fitted)


def _plain_factor(fit, correction: str, factor) -> float | None:
    """The factor of :func:`_curve_y`'s plain arithmetic, or None where it goes through
    :func:`predict` (no log base, no usable factor)."""
    if correction == "none":
        cf = 1.0 if factor is None else None
    elif factor is None:
        cf = getattr(fit, f"{correction}_factor", None)
    else:
        cf = factor
    if fit.log_base is None or cf is None or not (np.isfinite(cf) and cf > 0):
        return None
    return float(cf)


def _group_curves(ax, result, method, groups, correction, interval, *, small: bool,
                  xs_all: list, ys_all: list) -> list:
    """Each group's own ``method`` curve (no band: they would hide one another) in the
    group's colour over the group's fitted x range; returns the legend handles.

    Up to :data:`LEGEND_MAX_GROUPS` groups each curve is its own artist (gid
    ``group-curve:<group>``); more are drawn as one collection (gid ``group-curves``).
    """
    curves = reused(("group curves", id(result), method, correction, interval, tuple(groups)),
                    (result,), lambda: _group_curve_points(result, method, groups, correction,
                                                           interval))
    segments, colours = [], []
    for g, xs, y, colour in curves:
        segments.append(np.column_stack([xs, y]))
        colours.append(colour)
        xs_all.append(xs)
        ys_all.append(y)
        if len(groups) <= LEGEND_MAX_GROUPS:
            ax.plot(xs, y, color=colours[-1], lw=0.9 if small else 1.2,
                    ls=METHOD_DASHES.get(method, "-"), zorder=4, gid=f"group-curve:{g}")
    if not segments:
        return []
    if len(groups) > LEGEND_MAX_GROUPS:   # one artist draws a thousand curves in a blink
        ax.add_collection(LineCollection(segments, colors=colours,
                                         linewidths=0.9 if small else 1.2,
                                         linestyles=METHOD_DASHES.get(method, "-"), zorder=4,
                                         gid="group-curves"))
    word = str(result.config.data.group or "group")
    return [Line2D([], [], color="#4d4d4d", lw=1.2, ls=METHOD_DASHES.get(method, "-"),
                   label=f"each {possessive(word)} own {method_label(method)} line")]


def _group_curve_points(result, method, groups, correction, interval) -> list:
    """``(group, x, corrected y, colour)`` of each group's own curve (see
    :func:`_group_curves`; the zoomed panel and the full range draw the same curves)."""
    drawn = []   # (position, group, fit, x range, factor) of each estimable line
    for i, g in enumerate(groups):
        fit = result.line_fits.get(("group", g, method))
        if fit is None or not getattr(fit, "estimable", True):
            continue
        drawn.append((i, g, fit, fit_xrange(fit, result),
                      _group_factor(result, g, method, correction)))
    # the curves of plain arithmetic, many groups in one array pass per log base: each
    # row the numbers _curve_y makes for its group alone (elementwise, the same steps)
    plain: dict = {}
    for k, (_, _, fit, _, factor) in enumerate(drawn):
        cf = _plain_factor(fit, correction, factor)
        if cf is not None:
            plain.setdefault(fit.log_base, []).append((k, cf))
    curves: dict = {}
    for base, rows in plain.items():
        at = [k for k, _ in rows]
        lo = np.array([drawn[k][3][0] for k in at], dtype=float)
        hi = np.array([drawn[k][3][1] for k in at], dtype=float)
        xs = np.linspace(lo, hi, _CURVE_POINTS, axis=1)
        xs[:, 0], xs[:, -1] = lo, hi
        a = np.array([float(drawn[k][2].intercept) for k in at])
        b = np.array([float(drawn[k][2].slope) for k in at])
        cf = np.array([c for _, c in rows])
        with np.errstate(over="ignore"):
            y = cf[:, None] * np.power(base, a[:, None] + b[:, None] * to_log(xs, base))
        curves.update({k: (xs[j], y[j]) for j, k in enumerate(at)})
    out = []
    for k, (i, g, fit, (lo, hi), factor) in enumerate(drawn):
        if k not in curves:   # unusual: through predict, which says why
            xs = np.linspace(lo, hi, _CURVE_POINTS)
            xs[0], xs[-1] = lo, hi
            curves[k] = (xs, _curve_y(fit, xs, correction, interval, factor))
        out.append((g, *curves[k], group_style(i)[0]))
    return out


#: Points along each group's curve.
_CURVE_POINTS = 240


def _natural_layers(ax, result, methods, groups, correction, interval, preds, *,
                    small: bool = False, own_lines: bool = False) -> tuple:
    """Points, corrected curves with bands, and prediction markers on ``ax``.

    ``own_lines``: each group's own curve of ``methods[0]`` in place of the pooled
    curves (the groups' slopes differ).  Returns (legend handles, (x, y) arrays of
    everything drawn for the limits).
    """
    pts, total = drawn_points(result)   # limits follow the points drawn
    size = 5 if small else 10
    handles = []
    xs_all, ys_all = [pts["x"].to_numpy(float)], [pts["y"].to_numpy(float)]
    shown = shown_groups(result, groups)   # all, or GROUP_LINES_MAX spread over the slopes
    if groups:
        scatter_shown_groups(ax, pts, groups, shown, total=total, s=size, edgecolor="white",
                             linewidth=0.3, alpha=0.75, zorder=2)
        if len(shown) < len(groups):
            handles.append(shown_groups_handle(len(groups), len(shown), plural_of(
                str(result.config.data.group or "group"))))
        elif len(groups) <= LEGEND_MAX_GROUPS:
            for i, g in enumerate(groups):
                colour, marker = group_style(i)
                handles.append(Line2D([], [], ls="none", marker=marker, color=colour,
                                      markersize=4, label=g))
        else:
            handles.append(many_groups_handle(len(groups)))
    else:
        scatter_coded(ax, pts["x"].to_numpy(), pts["y"].to_numpy(),
                      np.zeros(len(pts), dtype=int), 1, total=total, s=size,
                      edgecolor="white", linewidth=0.3, alpha=0.8, zorder=2)
        handles.append(Line2D([], [], ls="none", marker="o", color=PALETTE[0],
                              markersize=4, label="data"))
    n_curves = 0
    if own_lines:
        handles += _group_curves(ax, result, methods[0], shown, correction, interval,
                                 small=small, xs_all=xs_all, ys_all=ys_all)
    for method in ([] if own_lines else methods):
        fit = result.line_fits.get(("pooled", "", method))
        if fit is None:
            continue
        lo, hi = fit_xrange(fit, result)
        xs = np.linspace(lo, hi, 240)
        xs[0], xs[-1] = lo, hi
        pred = predict(fit, xs, correction=correction, interval=interval,
                       factor=_run_factor(result, method, correction))
        shade = METHOD_SHADES.get(method, "#333333")
        ax.fill_between(xs, pred.y_low, pred.y_high, color=shade, alpha=0.10, lw=0, zorder=1)
        ax.plot(xs, pred.y, color=shade, lw=0.9 if small else 1.2,
                ls=METHOD_DASHES.get(method, "-"), zorder=4)
        xs_all += [xs, xs]
        ys_all += [np.asarray(pred.y_high, float), np.asarray(pred.y, float)]
        n_curves += 1
        handles.append(Line2D([], [], color=shade, lw=1.2, ls=METHOD_DASHES.get(method, "-"),
                              label=method_label(method)))
    if n_curves:
        handles.append(matplotlib.patches.Patch(
            color="#4d4d4d", alpha=0.2, lw=0,
            label=f"{100 * result.config.model.confidence:g}% {interval} band"))
    if preds is not None and len(shown) < len(groups) and "group" in preds:
        # the predictions of the groups drawn (all of them are in predictions.csv)
        preds = preds[~(preds["scope"] == "group").to_numpy()
                      | preds["group"].astype(str).isin(shown).to_numpy()]
        preds = preds if len(preds) else None
    if preds is not None and "x_low" in preds:   # inverse predictions: x from given y
        _inverse_markers(ax, result, preds, handles, xs_all, ys_all, small=small,
                         groups=shown)
    elif preds is not None:
        colours = np.array(_row_colours(preds, shown), dtype=object)
        x = preds["x"].to_numpy(float)
        y = preds["y"].to_numpy(float)
        low = preds["y_low"].to_numpy(float)
        high = preds["y_high"].to_numpy(float)
        extra = preds["extrapolated"].astype(bool).to_numpy()
        pct = f"{100 * result.config.model.confidence:g}%"
        kinds = preds["interval"].iloc[0] if "interval" in preds else interval
        ms = 3.0 if small else 4.5
        for flag, style, label in (
                (False, dict(marker="D", mfc=None, ls="-"),
                 f"prediction ± {pct} {kinds} interval"),
                (True, dict(marker="D", mfc="white", ls=(0, (2, 1.5))),
                 "extrapolated prediction (beyond fitted x)")):
            sel = extra == flag
            if not np.any(sel):
                continue
            _mark_rows(ax, x[sel], y[sel], y[sel], low[sel], high[sel], colours[sel],
                       across=False, marker=style["marker"], mfc=style["mfc"], ls=style["ls"],
                       ms=ms, small=small,
                       gid="prediction-extrapolated" if flag else "prediction")
            handles.append(Line2D([], [], color=_PRED_COLOUR, lw=0.8, ls=style["ls"],
                                  marker=style["marker"], markersize=4,
                                  markerfacecolor=style["mfc"] or _PRED_COLOUR,
                                  markeredgecolor=_PRED_COLOUR, label=label))
            xs_all.append(x[sel])
            ys_all += [np.where(np.isfinite(high[sel]), high[sel], y[sel])]
    return handles, (np.concatenate(xs_all), np.concatenate(ys_all))


def _natural_limits(ax, drawn, x_hi: float) -> None:
    """Arithmetic axes from 0 to just past ``x_hi`` and to the top of what is drawn there."""
    x, y = drawn
    ok = np.isfinite(x) & np.isfinite(y) & (x <= x_hi * 1.04)
    top = float(np.max(y[ok])) if np.any(ok) else 1.0
    ax.set_xlim(0, x_hi * 1.04)
    ax.set_ylim(0, top * 1.05 if top > 0 else 1.0)
    for axis in (ax.xaxis, ax.yaxis):
        axis.set_major_locator(MaxNLocator(5, steps=[1, 2, 2.5, 5, 10], min_n_ticks=3))
        axis.set_major_formatter(FuncFormatter(arith_formatter))


def _inset_corner(ax, drawn) -> list:
    """Bounds (axes fraction) of the inset corner covering fewest drawn samples."""
    x, y = drawn
    ok = np.isfinite(x) & np.isfinite(y)
    frac = ax.transLimits.transform(np.column_stack([x[ok], y[ok]]))
    w, h = 0.42, 0.38
    best, best_n = None, None
    for x0, y0 in ((0.56, 0.04), (0.06, 0.58), (0.56, 0.58), (0.06, 0.04)):
        n = int(np.sum((frac[:, 0] >= x0 - 0.04) & (frac[:, 0] <= x0 + w + 0.02)
                       & (frac[:, 1] >= y0 - 0.06) & (frac[:, 1] <= y0 + h + 0.02)))
        if best_n is None or n < best_n:
            best, best_n = [x0, y0, w, h], n
    return best


@styled
def plot_natural(result, *, ax=None, methods=None, correction: str | None = None,
                 interval: str = "prediction", size: str = "single"):
    """Back-transformed pooled curves with their bands and the requested predictions,
    on arithmetic axes (y always in natural units).

    Parameters
    ----------
    result : RunResult
    ax : Axes, optional
    methods : sequence of str, optional
    correction : {"smearing", "parametric", "ratio", "none"}, optional
        Back-transformation correction; defaults to ``prediction.correction``
        of the config.
    interval : {"prediction", "confidence"}
    size : {"single", "double"}

    Returns
    -------
    matplotlib.axes.Axes
        The main panel.

    Notes
    -----
    Curves and bands from :func:`scaling.stats.predictions.predict` (corrected mean,
    prediction bounds as quantiles; Duan 1983 for smearing), over the fitted
    range of x only.

    Data spanning decades: when x spans more than :data:`NATURAL_ZOOM_DECADES`
    decades, an arithmetic axis over the whole range would push most points
    into its left corner.  The main panel then shows x from 0 to the
    :data:`NATURAL_ZOOM_QUANTILE`-th percentile of x (y scaled to what is drawn
    there), and a second, smaller panel below it (an inset in the emptiest
    corner when ``ax`` is given) shows the full range with the zoomed window
    shaded.  Both axes stay arithmetic, so the curve, its bias-corrected mean
    and its band are read in natural units; no log, square-root or symlog scale.

    Points: above :data:`~scaling.render.figure_style.MAX_DRAWN_POINTS` the seeded
    subset is drawn (:func:`~scaling.render.figure_inputs.drawn_points`, stated
    under the figure), and the zoom, the limits and the inset's corner follow the
    points drawn, so a large-data run, which collects the same subset, draws the
    same figure.

    Groups whose slopes differ (the Answer reports each group's own line,
    :func:`groups_differ`): each group's own curve of the predicting method
    is drawn in the group's colour over its fitted x range (no bands: they
    would hide one another), in place of the pooled curves, and the
    predictions marked are those of scope ``group``, in their group's colour.

    Predictions: the rows of the run's ``predictions`` table for the pooled
    curves drawn (scope ``pooled``, the methods drawn) are marked as black
    diamonds with their interval as an error bar; extrapolated ones (outside
    the fitted x range) are open diamonds with dashed bars, with their own
    legend entry.  Predictions beyond the zoomed window appear in the
    full-range panel only.
    """
    own = ax is None
    pts, _ = drawn_points(result)   # the zoom follows the points drawn
    x = pts["x"].to_numpy(dtype=float)
    x = x[np.isfinite(x) & (x > 0)]
    decades = float(np.log10(x.max() / x.min())) if len(x) else 0.0
    zoom = decades > NATURAL_ZOOM_DECADES
    overview = None
    if own:
        if zoom:
            fig = new_figure(size, 1.2)
            grid = fig.add_gridspec(2, 1, height_ratios=[2.4, 1.0])
            ax = fig.add_subplot(grid[0])
            overview = fig.add_subplot(grid[1])
        else:
            ax = new_figure(size, 0.85).add_subplot()
    methods = run_methods(result, methods)
    groups = run_groups(result)
    inverse = inverse_run(result.config)
    own_lines = bool(groups) and groups_differ(result)
    if own_lines:   # each group's own line of the method that predicts, as the Answer says
        methods = [predicting_method(result.config, methods)]
    # an inverse run reads x off the line itself: the curve is the median (no correction)
    correction = correction or ("none" if inverse else result.config.prediction.correction)
    preds = _natural_predictions(result, methods, inverse=inverse,
                                 scope="group" if own_lines else "pooled")
    handles, drawn = _natural_layers(ax, result, methods, groups, correction, interval, preds,
                                     own_lines=own_lines)
    x_all = np.concatenate([x, drawn[0][np.isfinite(drawn[0])]])
    x_max = float(np.max(x_all)) if len(x_all) else 1.0
    x_hi = float(np.percentile(x, NATURAL_ZOOM_QUANTILE)) if zoom else x_max
    _natural_limits(ax, drawn, x_hi)
    curves = own_lines or any(isinstance(h, matplotlib.patches.Patch) for h in handles)
    if curves:
        title = (f"Mean of y ({correction} correction)" if correction != "none"
                 else "Median of y (the fitted line, no correction)")
        if own_lines:
            word = str(result.config.data.group or "group")
            title += f", each {possessive(word)} own line"
        if inverse and preds is not None:
            lines = ", ".join(dict.fromkeys(method_label(m) for m in preds["method"]))
            title = (f"Given y read off each {possessive(word)} {lines} line (medians of x)"
                     if own_lines else f"Each given y read off the {lines} line (medians of x)")
        if zoom:
            title += (f"\nx up to its {NATURAL_ZOOM_QUANTILE:g}th percentile"
                      + ("; full range below" if own else ""))
        ax.set_title(title, loc="left", fontsize=STYLE["font.size"] - 0.5)
    if zoom:
        if overview is None:
            overview = ax.inset_axes(_inset_corner(ax, drawn))
            overview.tick_params(labelsize=5, length=2, pad=1)
        _natural_layers(overview, result, methods, groups, correction, interval, preds,
                        small=True, own_lines=own_lines)
        _natural_limits(overview, drawn, x_max)
        overview.axvspan(0, x_hi * 1.04, color="#000000", alpha=0.06, lw=0, zorder=0)
        note = "Full range (shaded: the panel above)" if own else "Full range (shaded: main view)"
        overview.set_title(note, loc="left", fontsize=STYLE["font.size"] - (1 if own else 2),
                           pad=2)
        if own:
            overview.set_xlabel(axis_label(result, "x"))
    if not (zoom and own):
        ax.set_xlabel(axis_label(result, "x"))
    ax.set_ylabel(axis_label(result, "y"))
    if own:
        figure_legend(ax.figure, handles, 3 if len(handles) > 4 else 2, handlelength=2.0,
                       columnspacing=0.8, handletextpad=0.4,
                       fontsize=STYLE["font.size"] - 1)   # about a quarter of the height
    else:
        ax.legend(handles=handles, loc="best")
    return ax


@styled
def make_natural(result, *, size: str = "single", **kwargs) -> Figure:
    """The natural-scale plot as a Figure (see :func:`plot_natural`)."""
    return plot_natural(result, size=size, **kwargs).figure
