"""The partial figures of a run with several predictors: y against each predictor with
the others held at their geometric means."""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure

from .figure_inputs import axis_label
from .figure_style import LEGEND_MAX_GROUPS, group_style, new_figure
from .plots import plot_fit

__all__ = ["plot_partial", "make_partial"]


def plot_partial(result, term: str, *, ax=None, size: str = "single"):
    """Partial relationship of y with one predictor, others held at their geometric means.

    Parameters
    ----------
    result : RunResult
        A run with several predictors (``data.x`` a list).
    term : str
        The predictor column to show.
    ax : matplotlib Axes, optional
    size : {"single", "double"}

    Returns
    -------
    matplotlib.axes.Axes

    Notes
    -----
    Partial residuals on the log scale (e.g. Draper & Smith 1998, sec. 8.3,
    from memory): log y_j* = log y - sum_{i != j} b_i (log x_i - mean log x_i),
    plotted against x_j on natural-unit log axes, with the fitted line
    a + b_j log x_j + sum_{i != j} b_i mean log x_i over the fitted range of x_j.
    The slope of the points about the line is the partial exponent b_j.
    The points and the line are :func:`scaling.render.plots.plot_fit`'s
    partial plot of the run's fit (without its band).
    """
    fit = result.multi_fit
    j = fit.names.index(term)
    own = ax is None
    if own:
        ax = new_figure(size, 0.92).add_subplot()
    pts = result.data.points
    grouped = "group" in pts.columns and len(pts) == fit.n
    label = (f"pooled, exponent {fit.slopes[j]:.3f}" if grouped else
             f"exponent {fit.slopes[j]:.3f} ({fit.slope_low[j]:.3f}–{fit.slope_high[j]:.3f})")
    plot_fit(fit, ax=ax, term=term, band=False, label=label)
    base = fit.log_base
    means = np.asarray(fit.log_x).mean(axis=0)
    others = [i for i in range(fit.k) if i != j]
    if grouped:   # the same partial points, coloured by group
        x_j, adj = _partial_points(fit, j, others, means)
        labels = pts["group"].astype(str).to_numpy()
        for i, g in enumerate(sorted(set(labels))):
            colour, marker = group_style(i)[:2]
            sel = labels == g
            ax.scatter(base ** x_j[sel], base ** adj[sel], s=14, color=colour, marker=marker,
                       edgecolor="white", linewidth=0.3, zorder=2.5,
                       label=g if i < LEGEND_MAX_GROUPS else None)
    units = result.data.units or {}
    ux = units.get("x")
    unit = ux[j] if isinstance(ux, tuple) else None
    ax.set_xlabel(f"{term} ({unit})" if unit else term)
    held = ", ".join(f"{fit.names[i]} = {base ** means[i]:.3g}" for i in others)
    ax.set_ylabel(axis_label(result, "y") + f"\nat {held}")
    ax.legend(loc="upper left", fontsize="x-small" if grouped else "small", frameon=False)
    _limits_around_points(ax, fit, j, others, means)
    return ax


def _partial_points(fit, j: int, others: list, means) -> tuple:
    """(log x_j, log y adjusted to the others' mean logs) of every fitted point."""
    lx, ly = np.asarray(fit.log_x), np.asarray(fit.log_y)
    return lx[:, j], ly - sum(fit.slopes[i] * (lx[:, i] - means[i]) for i in others)


def _limits_around_points(ax, fit, j: int, others: list, means) -> None:
    """Log axes that hold every partial point and the line, with 5% of a decade-span margin
    at each side (no point drawn half outside the frame)."""
    x_j, adj = _partial_points(fit, j, others, means)
    base = fit.log_base
    for values, setter in ((x_j, ax.set_xlim), (adj, ax.set_ylim)):
        lo, hi = float(np.min(values)), float(np.max(values))
        pad = 0.05 * (hi - lo) if hi > lo else 0.1
        setter(base ** (lo - pad), base ** (hi + pad))


def make_partial(result, *, size: str = "single", term: str | None = None) -> Figure:
    """The partial figure of ``term`` (default the first predictor) as a Figure."""
    fit = result.multi_fit
    return plot_partial(result, fit.names[0] if term is None else term, size=size).figure
