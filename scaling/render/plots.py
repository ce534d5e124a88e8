"""Drawing fitted lines for a Python user: one fit, a group comparison, a fits table.

:func:`plot_fit` draws a :class:`~scaling.stats.lines.LineFit`, a
:class:`~scaling.stats.phylogeny.PhyloFit` or a
:class:`~scaling.stats.several_predictors.MultiFit`; :func:`plot_comparison`
the result of :func:`scaling.compare_groups`; :func:`plot_groups` the table
of :func:`scaling.fit_groups`.  Each draws on a given Axes, or on a new
:class:`matplotlib.figure.Figure` in the house style
(:mod:`scaling.render.figure_style`), and returns the Axes; nothing here uses
pyplot state or calls ``show()`` (the caller saves or displays the figure).

Axes are log-scaled with tick labels in natural units (1, 10, 100, 1 000),
the axes of the run's scaling figure, which is drawn with these functions
(:mod:`scaling.render.figure_scaling`).  The functions draw the numbers the
fit objects and tables carry and never estimate anything again: lines and
bands are evaluated from the fit's own parameters.
"""

from __future__ import annotations

import contextlib

import matplotlib
import numpy as np
from ..stats import tails

from ..errors import DataError
from ..stats.logscale import parse_log_base, to_log
from ..stats.intervals import log_interval
from .figure_style import (METHOD_DASHES, PALETTE, STYLE, group_style, log_margins,
                           natural_log_axis, new_figure)

__all__ = ["plot_fit", "plot_comparison", "plot_groups", "fit_band", "common_line", "unlog"]

#: Points drawn by these functions: the look of the run's scaling figure.
POINT_STYLE = dict(s=12, edgecolor="white", linewidth=0.3, alpha=0.8, zorder=2)
#: Samples along a drawn line (a straight line on log-log axes; a band is curved).
LINE_SAMPLES = 80


def unlog(values, base):
    """Natural units of log-scale ``values`` (``base ** values``)."""
    return np.power(base, values)


def fit_band(fit, xs: np.ndarray, *, interval: str = "confidence"):
    """Fitted line and band on the log scale at natural ``xs``: (fit, low, high).

    ``fit`` is any line carrying ``intercept, slope, slope_se, resid_sd, n, df,
    confidence, log_base`` and ``moments.mean_x`` (a LineFit or a PhyloFit).

    Notes
    -----
    var = s_r^2/n + (X0 - mean_x)^2 var(b) (+ s_r^2 for a prediction band),
    bounds at the t quantile on ``fit.df``; see :func:`scaling.stats.intervals.log_interval`
    (exact for OLS; Warton et al. 2006, Biol. Rev. 81:259 for SMA/MA; for a
    PhyloFit the moments are the phylogenetic ones, scaled so 1'V^-1 1 = n,
    which makes the same formula the GLS variance of the fitted value).
    """
    X0 = to_log(xs, fit.log_base)
    fitted, _se, lo, hi = log_interval(
        X0, intercept=fit.intercept, slope=fit.slope, slope_se=fit.slope_se,
        resid_sd=fit.resid_sd, n=float(fit.n),
        mean_x=float(np.asarray(fit.moments.mean_x)), df=float(fit.df),
        confidence=fit.confidence, interval=interval)
    return fitted, lo, hi


def common_line(slope: float, mean_log_x: float, mean_log_y: float, xs, base) -> np.ndarray:
    """Log-scale values at natural ``xs`` of the line of slope ``slope`` through the
    centroid (``mean_log_x``, ``mean_log_y``): a group's line under a common slope."""
    X = np.asarray(xs, dtype=float) if base is None else np.log(xs) / np.log(base)
    return mean_log_y + slope * (X - mean_log_x)


def _house_style(own: bool):
    """The house style while drawing a figure this module makes (a given Axes keeps its own)."""
    return matplotlib.rc_context(STYLE) if own else contextlib.nullcontext()


def _natural_axes(ax, base) -> None:
    """Log axes labelled in natural units, limits with a 5% margin (as the run's figures)."""
    if base is None:   # values given as logs: the base is unknown, the axes stay linear
        ax.margins(0.05)
        return
    natural_log_axis(ax)
    log_margins(ax, 0.05)
    natural_log_axis(ax)   # again: locators depend on the final span


def _grid(lo: float, hi: float, base, n: int = LINE_SAMPLES) -> np.ndarray:
    return np.geomspace(lo, hi, n) if base is not None else np.linspace(lo, hi, n)


def _is_multi(fit) -> bool:
    return hasattr(fit, "slopes") and hasattr(fit, "names")


def _line_range(fit, x, x_range) -> tuple:
    """Natural-unit x range of the drawn line: given, else the fit's, else the points',
    else (a fit from moments alone) the mean of log x ± 2 SD of its moments."""
    if x_range is not None:
        return float(x_range[0]), float(x_range[1])
    if getattr(fit, "x_range", None) is not None:
        return tuple(float(v) for v in fit.x_range)
    if x is not None and len(x):
        return float(np.min(x)), float(np.max(x))
    logs = getattr(fit, "log_data", None)
    base = fit.log_base
    if logs is not None:
        lx = np.asarray(logs[0], dtype=float)
        return (float(unlog(lx.min(), base)), float(unlog(lx.max(), base))) if base else (
            float(lx.min()), float(lx.max()))
    m = fit.moments
    mean = float(np.asarray(m.mean_x))
    sd = float(np.sqrt(np.asarray(m.sxx) / max(float(np.asarray(m.n)) - 1, 1)))
    lo, hi = mean - 2 * sd, mean + 2 * sd
    return (float(unlog(lo, base)), float(unlog(hi, base))) if base else (lo, hi)


def plot_fit(fit, *, ax=None, x=None, y=None, x_range=None, band: bool = True,
             interval: str = "confidence", term: str | None = None,
             color: str = "black", band_alpha: float = 0.14, point_color: str = PALETTE[0],
             **style):
    """Draw a fitted power law: its points, its line and its band, on natural-unit log axes.

    Parameters
    ----------
    fit : LineFit, PhyloFit or MultiFit
        Any line of :func:`scaling.fit_line` (OLS, SMA, MA, Deming, robust
        lines), of :func:`scaling.fit_phylo`, or of :func:`scaling.fit_multi`.
    ax : matplotlib Axes, optional
        Draw here (in its own style); by default a new Figure in the house
        style (85 mm wide) is made.
    x, y : array_like, optional
        The points in natural units (logs when ``fit.log_base`` is None), drawn
        as dots.  A LineFit keeps no points (a Theil-Sen fit keeps its logs,
        which are drawn when ``x`` is not given); a PhyloFit keeps none; a
        MultiFit keeps its own and ignores these.
    x_range : (float, float), optional
        Natural-unit x span of the line.  Defaults to the fit's fitted range
        (``fit.x_range``), else the range of ``x``, else -- a fit from
        moments alone, a PhyloFit -- the mean of log x ± 2 SD of the fit's
        moments (the phylogenetic ones for a PhyloFit).
    band : bool
        Shade the band of the line.
    interval : {"confidence", "prediction"}
        The band: for the line (mean of log y), or for a new observation.
    term : str, optional
        MultiFit only: the predictor drawn on the x-axis (default the first).
    color : str
        Colour of the line and its band.
    band_alpha : float
        Opacity of the band.
    point_color : str
        Colour of the points.
    **style
        Passed to :meth:`matplotlib.axes.Axes.plot` for the line (``ls``,
        ``lw``, ``label``, ``zorder``, ...).

    Returns
    -------
    matplotlib.axes.Axes

    Notes
    -----
    The line and band come from the fit's own numbers (:func:`fit_band`:
    var = s_r^2/n + (X0 - mean_x)^2 var(b), t quantile on ``fit.df``); nothing
    is estimated again.  With ``fit.log_base`` None the values are logs of an
    unknown base: the axes stay linear, in log units.

    A MultiFit is drawn as a *partial* plot against ``term``: the points are
    partial residuals log y - sum_{i != j} b_i (log x_i - mean log x_i)
    (e.g. Draper & Smith 1998, sec. 8.3, from memory) against x_j, and the
    line is a + b_j log x_j + sum_{i != j} b_i mean log x_i over the fitted
    range of x_j, i.e. y against x_j with the other predictors at their
    geometric means; its band has variance d' C d with d = (1, the other
    predictors' mean logs, log x_j) and C the fit's covariance of
    (intercept, slopes), on ``fit.df`` degrees of freedom.
    """
    own = ax is None
    with _house_style(own):
        if own:
            ax = new_figure("single", 0.92).add_subplot()
        if _is_multi(fit):
            return _plot_multi(fit, ax, term=term, band=band, interval=interval, color=color,
                               band_alpha=band_alpha, point_color=point_color, own=own,
                               **style)
        base = fit.log_base
        if x is None and y is None and getattr(fit, "log_data", None) is not None:
            lx, ly = (np.asarray(v, dtype=float) for v in fit.log_data)
            x, y = (unlog(lx, base), unlog(ly, base)) if base is not None else (lx, ly)
        if x is not None and y is not None:
            ax.scatter(np.asarray(x, dtype=float), np.asarray(y, dtype=float),
                       facecolor=point_color, **POINT_STYLE)
        lo, hi = _line_range(fit, None if x is None else np.asarray(x, dtype=float), x_range)
        xs = _grid(lo, hi, base)
        fitted, blo, bhi = fit_band(fit, xs, interval=interval)
        back = (lambda v: unlog(v, base)) if base is not None else (lambda v: v)
        if band:
            ax.fill_between(xs, back(blo), back(bhi), color=color, alpha=band_alpha,
                            linewidth=0, zorder=1)
        ax.plot(xs, back(fitted), color=color, **{"lw": 1.3, "zorder": 4, **style})
        _natural_axes(ax, base)
    return ax


def _plot_multi(fit, ax, *, term, band, interval, color, band_alpha, point_color, own,
                **style):
    """The partial plot of a MultiFit against ``term`` (see :func:`plot_fit`)."""
    j = 0 if term is None else fit.names.index(term) if term in fit.names else None
    if j is None:
        raise DataError(f"term {term!r} is not a predictor of the fit; the predictors are "
                        f"{', '.join(fit.names)}")
    base = fit.log_base
    lx, ly = np.asarray(fit.log_x), np.asarray(fit.log_y)
    means = lx.mean(axis=0)
    others = [i for i in range(fit.k) if i != j]
    adj = ly - sum(fit.slopes[i] * (lx[:, i] - means[i]) for i in others)
    ax.scatter(base ** lx[:, j], base ** adj, s=12, color=point_color, edgecolor="white",
               linewidth=0.3, alpha=0.8, zorder=2)
    grid = np.linspace(lx[:, j].min(), lx[:, j].max(), 50)
    line = fit.intercept + fit.slopes[j] * grid + sum(fit.slopes[i] * means[i] for i in others)
    if band:
        d = np.zeros((grid.size, fit.k + 1))
        d[:, 0] = 1.0
        d[:, 1 + j] = grid
        for i in others:
            d[:, 1 + i] = means[i]
        se = np.sqrt(np.einsum("ij,jk,ik->i", d, np.asarray(fit.cov), d)
                     + (fit.resid_sd ** 2 if interval == "prediction" else 0.0))
        t = tails.t_quantile(0.5 + fit.confidence / 2, fit.df)
        ax.fill_between(base ** grid, base ** (line - t * se), base ** (line + t * se),
                        color=color, alpha=band_alpha, linewidth=0, zorder=1)
    ax.plot(base ** grid, base ** line, color=color, **{"lw": 1.2, "zorder": 3, **style})
    log_margins(ax, 0.05)
    natural_log_axis(ax)
    if own:
        ax.set_xlabel(str(fit.names[j]))
        held = ", ".join(f"{fit.names[i]} = {base ** means[i]:.3g}" for i in others)
        ax.set_ylabel(f"y at {held}" if held else "y")
    return ax


def _group_centroids(comparison, data, x, y, average_within) -> dict:
    """group -> (mean log x, mean log y, min log x, max log x) of the compared groups.

    From ``comparison.group_means`` when the comparison carries it (a table
    ``group, mean_log_x, mean_log_y`` with optional ``log_x_min, log_x_max``),
    else from ``data``: the means of the logs of each compared group's rows
    (of its units' means with ``average_within``) -- the centroid each
    group's line passes through under the common slope.
    """
    base = comparison.log_base
    table = getattr(comparison, "group_means", None)
    out = {}
    if table is not None:
        for r in table.itertuples(index=False):
            lo = getattr(r, "log_x_min", r.mean_log_x)
            hi = getattr(r, "log_x_max", r.mean_log_x)
            out[str(r.group)] = (float(r.mean_log_x), float(r.mean_log_y), float(lo), float(hi))
        return out
    if data is None or x is None or y is None:
        raise DataError("the comparison does not keep the groups' means: pass data=, x= and "
                        "y= (the table and columns given to compare_groups)")
    frame = data.assign(_lx=to_log(data[x].to_numpy(dtype=float), base),
                        _ly=to_log(data[y].to_numpy(dtype=float), base),
                        _g=data[comparison.group_column].astype(str).str.strip())
    if average_within is not None:
        frame = frame.groupby([average_within, "_g"], sort=False, as_index=False)[
            ["_lx", "_ly"]].mean()
    for g, sub in frame.groupby("_g", sort=True):
        out[str(g)] = (float(sub["_lx"].mean()), float(sub["_ly"].mean()),
                       float(sub["_lx"].min()), float(sub["_lx"].max()))
    return out


def plot_comparison(comparison, *, ax=None, data=None, x: str | None = None,
                    y: str | None = None, average_within: str | None = None,
                    means: bool = True, **style):
    """Draw a group comparison: each group's points and mean, and its line with the common slope.

    Parameters
    ----------
    comparison : GroupComparison
        The result of :func:`scaling.compare_groups`.
    ax : matplotlib Axes, optional
        Draw here; by default a new Figure in the house style.
    data : DataFrame, optional
        The table given to ``compare_groups``, with columns ``x``, ``y`` and
        the comparison's group column: its points are drawn, and each group's
        centroid and x range are read from it.  Needed unless the comparison
        carries its groups' means (``comparison.group_means``).
    x, y : str, optional
        The columns of ``data`` (natural units; logs when the comparison's
        ``log_base`` is None).
    average_within : str, optional
        As given to ``compare_groups``: the groups' means are then means of
        the units' means.
    means : bool
        Mark each group's mean (larger symbol, black edge).
    **style
        Passed to :meth:`matplotlib.axes.Axes.plot` for the group lines.

    Returns
    -------
    matplotlib.axes.Axes
        One line per compared group (``Line2D``, labelled with the group),
        over that group's range of x.

    Notes
    -----
    Under a common slope b each group's line passes through its centroid
    (mean log x, mean log y): the group's elevation is mean log y - b mean log x
    (OLS ANCOVA; the maximum-likelihood elevation of SMA/MA given the common
    slope, Warton et al. 2006, Biol. Rev. 81:259).  The slope is the
    comparison's ``common_slope``; only means are taken, nothing is fitted.
    Groups the comparison left out (``comparison.excluded``) are not drawn.
    """
    own = ax is None
    with _house_style(own):
        if own:
            ax = new_figure("single", 0.92).add_subplot()
        base = comparison.log_base
        back = (lambda v: unlog(v, base)) if base is not None else (lambda v: v)
        centroids = _group_centroids(comparison, data, x, y, average_within)
        groups = [str(g) for g in comparison.groups]
        slope = float(comparison.common_slope)
        dash = METHOD_DASHES.get(comparison.method, "-")
        for i, g in enumerate(groups):
            colour, marker = group_style(i)
            if data is not None and x is not None and y is not None:
                rows = data[data[comparison.group_column].astype(str).str.strip() == g]
                ax.scatter(rows[x].to_numpy(dtype=float), rows[y].to_numpy(dtype=float),
                           marker=marker, facecolor=colour, **{**POINT_STYLE, "alpha": 0.75})
            if g not in centroids:
                continue
            mx, my, lo, hi = centroids[g]
            if means:
                ax.scatter([back(mx)], [back(my)], s=42, marker=marker, facecolor=colour,
                           edgecolor="black", linewidth=0.8, zorder=6)
            if np.isfinite(slope) and hi > lo:
                xs = _grid(float(back(lo)), float(back(hi)), base, 40)
                ax.plot(xs, back(common_line(slope, mx, my, xs, base)),
                        **{"color": colour, "lw": 0.9, "ls": dash, "zorder": 3, "label": g,
                           **style})
        _natural_axes(ax, base)
    return ax


def plot_groups(frame, data=None, *, x: str | None = None, y: str | None = None,
                group: str | None = None, method: str | None = None, ax=None, **style):
    """Draw the lines of a fits table (:func:`scaling.fit_groups`), one per group, and the points.

    Parameters
    ----------
    frame : DataFrame
        The table of ``fit_groups`` (or rows of ``fits.csv``): ``group``,
        ``method``, ``slope``, ``intercept``, ``log_base``, ``x_min``, ``x_max``.
    data : DataFrame, optional
        The table given to ``fit_groups``: each group's points are drawn.
    x, y, group : str, optional
        The columns of ``data`` (``group`` None: one pooled set of points).
    method : str, optional
        The method whose lines are drawn; default the first in ``frame``.
    ax : matplotlib Axes, optional
        Draw here; by default a new Figure in the house style.
    **style
        Passed to :meth:`matplotlib.axes.Axes.plot` for the lines.

    Returns
    -------
    matplotlib.axes.Axes
        One ``Line2D`` per estimable row (labelled with its group), over the
        row's range ``x_min`` to ``x_max``, from the row's intercept and slope.

    Notes
    -----
    A fits table keeps no mean of log x, so no band is drawn (the band needs
    it); the lines are the table's own numbers, nothing is fitted again.
    """
    if method is None:
        method = str(frame["method"].iloc[0]) if len(frame) else None
    rows = frame[frame["method"] == method] if method is not None else frame
    own = ax is None
    with _house_style(own):
        if own:
            ax = new_figure("single", 0.92).add_subplot()
        bases = {parse_log_base(str(b)) for b in rows["log_base"]} if len(rows) else {10.0}
        base = bases.pop() if len(bases) == 1 else 10.0
        back = (lambda v: unlog(v, base)) if base is not None else (lambda v: v)
        dash = METHOD_DASHES.get(str(method), "-")
        for i, r in enumerate(rows.itertuples(index=False)):
            colour, marker = group_style(i)
            label = str(r.group)
            if data is not None and x is not None and y is not None:
                pts = (data if group is None
                       else data[data[group].astype(str).str.strip() == label])
                ax.scatter(pts[x].to_numpy(dtype=float), pts[y].to_numpy(dtype=float),
                           marker=marker, facecolor=colour, **{**POINT_STYLE, "alpha": 0.75})
            lo, hi = float(r.x_min), float(r.x_max)
            if not (np.isfinite(r.slope) and np.isfinite(lo) and np.isfinite(hi)):
                continue
            xs = _grid(lo, hi, base, 40)
            fitted = r.intercept + r.slope * to_log(xs, base)
            ax.plot(xs, back(fitted), **{"color": colour, "lw": 0.9, "ls": dash,
                                         "zorder": 3, "label": label or "pooled", **style})
        _natural_axes(ax, base)
    return ax
