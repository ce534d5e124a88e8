"""The residual figure of a run: for each method, residuals of the pooled line on the
log scale against position along the line, and against normal quantiles."""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.ticker import MaxNLocator
from ..stats import tails

from ..stats.schema import method_label
from .figure_inputs import (drawn_points, group_codes, points_held, residual_ranks, reused,
                            run_groups, run_methods, scatter_shown_coded, shown_codes,
                            shown_groups, shown_groups_handle)
from .wording import plural
from .figure_style import (LEGEND_MAX_GROUPS, PAGE_HEIGHT, SIZES, STYLE, agg_figure,
                           figure_legend, group_style, many_groups_handle, new_figure,
                           scatter_coded, styled, thinned_index)
from .thinning import line_residual

__all__ = ["plot_residuals", "make_residuals"]


def _residuals(fit, X: np.ndarray, Y: np.ndarray) -> tuple:
    """(position along the line, residual) on the log scale for one fit.

    OLS: fitted value a + bX against the vertical residual Y - a - bX.
    SMA: Y + bX against Y - bX - a; MA: X + bY against Y - bX - a (the
    residual and the axis score are uncorrelated for these lines; Warton,
    Wright, Falster & Westoby 2006, Biol. Rev. 81:259, section on
    checking assumptions).
    """
    return _position(fit, X, Y), _residual(fit, X, Y)


def _residual(fit, X: np.ndarray, Y: np.ndarray) -> np.ndarray:
    """Y - a - bX (see :func:`_residuals`)."""
    return line_residual(fit, X, Y)


def _position(fit, X: np.ndarray, Y: np.ndarray) -> np.ndarray:
    """Position along the line (see :func:`_residuals`)."""
    b, a = fit.slope, fit.intercept
    if fit.method == "sma":
        return Y + b * X
    if fit.method == "ma":
        return X + b * Y
    return a + b * X


def _point_residuals(fit, pts) -> tuple:
    """(X, Y, residuals, largest absolute residual) of every point: within
    :func:`~scaling.render.figure_inputs.reuse_inputs` found once for both panels of a fit."""
    def compute():
        X, Y = pts["log_x"].to_numpy(float), pts["log_y"].to_numpy(float)
        resid = _residual(fit, X, Y)
        return X, Y, resid, float(np.max(np.abs(resid))) if resid.size else 0.0
    return reused(("residuals", id(fit), id(pts)), (fit, pts), compute)


def _residual_points(result) -> tuple:
    """(points whose residuals are drawn, points fitted).

    In memory: all points (the normal-quantile panel places the drawn ones at their
    ranks among all residuals, and the limits hold every residual).  A large-data
    run never holds them all: the points its second pass collected
    (:func:`~scaling.render.figure_inputs.drawn_points`), the same as the in-memory
    figure draws; up to :data:`~scaling.render.figure_style.MAX_DRAWN_POINTS` points
    they are all the points and the panels are the same, above it their quantiles
    and limits are those of the drawn points (ranking every residual needs all rows
    at once) and the run says so in a note.  An in-memory run handed to its figures
    with a :func:`~scaling.render.figure_inputs.figure_digest` (the points drawn, and of
    all the residuals the ranked ones drawn, the quartiles and the largest) draws the
    panels of all its points from it.
    """
    if points_held(result):
        return result.data.points, len(result.data.points)
    return drawn_points(result)


_FITTED_LABEL = {"ols": "Fitted value (log scale)"}
_POSITION_LABEL = "Position along the line (log scale)"


def _normal_quantiles(n: int, ranks=None) -> np.ndarray:
    """Blom (1958) plotting positions (i - 3/8)/(n + 1/4) as standard normal quantiles.

    ``ranks`` (0-based) selects the positions wanted of ``n`` (default all):
    a scatter drawing a subset needs only those.

    Blom, G. (1958) *Statistical Estimates and Transformed Beta-Variables*.
    Wiley, New York (citation from memory).
    """
    i = np.arange(1, n + 1) if ranks is None else np.asarray(ranks) + 1
    return tails.normal_quantile((i - 0.375) / (n + 0.25))


@styled
def plot_residuals(result, *, ax=None, method: str | None = None, kind: str = "fitted",
                   scope: str = "pooled", size: str = "single"):
    """One residual panel for one fit: against fitted position, or normal quantiles.

    Parameters
    ----------
    result : RunResult
    ax : Axes, optional
    method : str, optional
        Defaults to the run's first method.
    kind : {"fitted", "normal"}
        ``fitted``: residuals against position along the line;
        ``normal``: ordered residuals against normal quantiles, with the line
        through the quartiles.
    scope : {"pooled"}
        Residuals are drawn for the pooled fit (the one fitted to the points).

    Returns
    -------
    matplotlib.axes.Axes
    """
    method = method or result.config.model.methods[0]
    if ax is None:
        ax = new_figure(size, 0.8).add_subplot()
    fit = result.line_fits.get((scope, "", method))
    pts, total = _residual_points(result)
    if fit is None:
        ax.text(0.5, 0.5, f"{method_label(method)}: no estimable fit", ha="center",
                va="center", transform=ax.transAxes)
        return ax
    X, Y, resid, largest = _point_residuals(fit, pts)
    groups = run_groups(result)
    shown = shown_groups(result, groups)   # all, or GROUP_LINES_MAX in colour, others grey
    codes = group_codes(pts, shown) if groups else np.zeros(len(pts), dtype=int)
    scatter = scatter_shown_coded if len(shown) < len(groups) else scatter_coded
    n = resid.size
    ranks = residual_ranks(result, method)
    if ranks is not None:   # every residual of the run, ranked in its process
        n, largest = total, ranks.largest
    if kind == "normal":
        # quantiles of the drawn points only (a million ppf calls cost a quarter second)
        drawn = thinned_index(n)
        drawn = np.arange(n) if drawn is None else drawn
        if ranks is None:
            order = np.argsort(resid)
            ranked = resid[order]   # sorted: its quartiles are those of resid, found faster
            shown_values, drawn_codes = ranked[drawn], codes[order[drawn]]
        else:
            shown_values = ranks.values
            drawn_codes = (shown_codes(groups, shown, ranks.codes) if groups
                           else np.zeros(shown_values.size, dtype=int))
        q = _normal_quantiles(n, drawn)
        scatter(ax, q, shown_values, drawn_codes, len(shown), total=total, s=9,
                edgecolor="white", linewidth=0.3, alpha=0.85, zorder=2)
        if n >= 4:
            q1, q3 = (np.percentile(ranked, [25, 75]) if ranks is None
                      else ranks.quartiles)
            z1, z3 = tails.normal_quantile([0.25, 0.75])
            slope = (q3 - q1) / (z3 - z1)
            zz = _normal_quantiles(n, [0, n - 1])   # the smallest and largest
            ax.plot(zz, q1 + slope * (zz - z1), color="#4d4d4d", lw=0.8, zorder=1)
        ax.set_xlabel("Expected if normal")
        ax.set_ylabel("Residual (log scale)")
        ax.set_title(f"{method_label(method)}: normality", loc="left",
                     fontsize=STYLE["font.size"] - 0.5)
    else:
        # positions of the drawn points only
        drawn = thinned_index(resid.size)   # none of a digest's: its points are drawn
        drawn = slice(None) if drawn is None else drawn
        scatter(ax, _position(fit, X[drawn], Y[drawn]), resid[drawn], codes[drawn],
                len(shown), total=total, s=9, edgecolor="white", linewidth=0.3,
                alpha=0.85, zorder=2)
        ax.axhline(0, color="#4d4d4d", lw=0.7, zorder=1)
        ax.set_xlabel(_FITTED_LABEL.get(method, _POSITION_LABEL))
        ax.set_ylabel("Residual (log scale)")
        ax.set_title(f"{method_label(method)}: residuals", loc="left",
                     fontsize=STYLE["font.size"] - 0.5)
    lim = largest * 1.15 if n else 1.0
    if not lim > 0:   # perfect fit: all residuals zero
        lim = 1.0
    ax.set_ylim(-lim, lim)
    # at most four intervals on x: the panels are half a column wide, and five
    # labels such as "−1.5" run into each other; normal quantiles in whole numbers
    ax.xaxis.set_major_locator(MaxNLocator(4, integer=True, symmetric=True)
                               if kind == "normal" else MaxNLocator(4))
    ax.yaxis.set_major_locator(MaxNLocator(5, symmetric=True))
    return ax


@styled
def make_residuals(result, *, size: str = "single", methods=None) -> Figure:
    """Residual panels: one row per method, residuals vs position and normal quantiles."""
    methods = run_methods(result, methods)
    width = SIZES.get(size, SIZES["single"])
    row_h = width * (0.42 if size == "single" else 0.26)
    row_h = min(row_h, PAGE_HEIGHT / len(methods))   # the whole figure fits a page
    fig = agg_figure(figsize=(width, row_h * len(methods) + 0.35), layout="constrained")
    axes = fig.subplots(len(methods), 2, squeeze=False)
    for i, method in enumerate(methods):
        plot_residuals(result, ax=axes[i, 0], method=method, kind="fitted")
        plot_residuals(result, ax=axes[i, 1], method=method, kind="normal")
    groups = run_groups(result)
    shown = shown_groups(result, groups)
    if len(shown) < len(groups):
        figure_legend(fig, [shown_groups_handle(len(groups), len(shown), plural(
            str(result.config.data.group or "group")))], 1)
    elif len(groups) > LEGEND_MAX_GROUPS:
        figure_legend(fig, [many_groups_handle(len(groups))], 1)
    elif groups:
        handles = [Line2D([], [], ls="none", marker=group_style(i)[1],
                          color=group_style(i)[0], markersize=4, label=g)
                   for i, g in enumerate(groups)]
        figure_legend(fig, handles, min(len(groups), 3 if size == "single" else 6))
    else:   # no groups: a legend only to say the points are a subset, if they are
        figure_legend(fig, [], 1)
    return fig
