"""The partial figures of a run with several predictors: y against each predictor with
the others held at their geometric means, drawn from the model the Answer leads with.

* no groups: the pooled fit;
* groups sharing the exponents (the Answer's common within-group
  exponents): one line per group at its elevation, all of the common slope;
* groups whose exponents differ: each group's own fit, its points adjusted
  by its own exponents.
"""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure

from .wording import possessive
from .answer_several import partial_model
from .figure_inputs import axis_label
from .figure_style import LEGEND_MAX_GROUPS, group_style, natural_log_axis, new_figure
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
    The b_i and a are those of the model the Answer leads with
    (:func:`partial_model`): the pooled fit; with groups sharing the
    exponents, the common exponents and each group's elevation (one line per
    group); with groups whose exponents differ, each group's own fit (its
    points adjusted by its own exponents).  The means of the logs are those
    of all the data, so every group is held at the same values.
    """
    fit = result.multi_fit
    j = fit.names.index(term)
    own = ax is None
    if own:
        ax = new_figure(size, 0.92).add_subplot()
    model = partial_model(result)
    base = fit.log_base
    means = np.asarray(fit.log_x).mean(axis=0)
    others = [i for i in range(fit.k) if i != j]
    if model == "pooled":
        plot_fit(fit, ax=ax, term=term, band=False, label=(
            f"exponent {fit.slopes[j]:.3f} ({fit.slope_low[j]:.3f}–{fit.slope_high[j]:.3f})"))
        x_j, adj = _partial_points(fit, j, others, means)
    else:
        x_j, adj = _draw_groups(ax, result, model, j, others, means)
    units = result.data.units or {}
    ux = units.get("x")
    unit = ux[j] if isinstance(ux, tuple) else None
    ax.set_xlabel(f"{term} ({unit})" if unit else term)
    held = ", ".join(f"{fit.names[i]} = {base ** means[i]:.3g}" for i in others)
    ax.set_ylabel(axis_label(result, "y") + f"\nat {held}")
    if model == "pooled":
        ax.legend(loc="upper left", fontsize="small", frameon=False)
    _limits_around_points(ax, base, x_j, adj)
    return ax


def _draw_groups(ax, result, model: str, j: int, others: list, means) -> tuple:
    """Each group's partial points and line (common exponents at its elevation, or its
    own fit); returns every drawn point's (log x_j, adjusted log y)."""
    fit, comparison = result.multi_fit, result.multi_groups
    base = fit.log_base
    lx, ly = np.asarray(fit.log_x), np.asarray(fit.log_y)
    labels = result.data.points["group"].astype(str).to_numpy()
    word = str(result.config.data.group)
    adj = np.empty_like(ly)
    handles, names = [], []
    for i, g in enumerate(sorted(set(labels))):
        colour, marker = group_style(i)[:2]
        sel = labels == g
        line = (comparison.group_fits.get(g) if model == "group"
                else comparison.common_fits.get(g))
        b = comparison.slopes if line is None else np.asarray(line.slopes)
        adj[sel] = ly[sel] - sum(b[k] * (lx[sel, k] - means[k]) for k in others)
        dots = ax.scatter(base ** lx[sel, j], base ** adj[sel], s=14, color=colour,
                          marker=marker, edgecolor="white", linewidth=0.3, zorder=2.5)
        drawn = None
        if line is not None:   # a group with too few rows for its own exponents: points only
            grid = np.linspace(lx[sel, j].min(), lx[sel, j].max(), 50)
            level = line.intercept + sum(b[k] * means[k] for k in others)
            drawn, = ax.plot(base ** grid, base ** (level + b[j] * grid), color=colour,
                             lw=1.2, zorder=3)
        if i < LEGEND_MAX_GROUPS:   # one entry per group: its marker on its line
            handles.append(dots if drawn is None else (dots, drawn))
            names.append(f"{g}: {b[j]:.3f}" if model == "group" and drawn is not None else g)
    title = (f"each {possessive(word)} own exponent" if model == "group" else
             f"common exponent {comparison.slopes[j]:.3f}\n"
             f"({comparison.slope_low[j]:.3f}–{comparison.slope_high[j]:.3f}), "
             f"each {word}\nat its elevation")
    ax.legend(handles, names, title=title, loc="upper left", fontsize="x-small",
              title_fontsize="x-small", frameon=False, alignment="left")
    natural_log_axis(ax)
    return lx[:, j], adj


def _partial_points(fit, j: int, others: list, means) -> tuple:
    """(log x_j, log y adjusted to the others' mean logs) of every fitted point."""
    lx, ly = np.asarray(fit.log_x), np.asarray(fit.log_y)
    return lx[:, j], ly - sum(fit.slopes[i] * (lx[:, i] - means[i]) for i in others)


def _limits_around_points(ax, base, x_j, adj) -> None:
    """Log axes that hold every partial point and the line, with 5% of a decade-span margin
    at each side (no point drawn half outside the frame)."""
    for values, setter in ((x_j, ax.set_xlim), (adj, ax.set_ylim)):
        lo, hi = float(np.min(values)), float(np.max(values))
        pad = 0.05 * (hi - lo) if hi > lo else 0.1
        setter(base ** (lo - pad), base ** (hi + pad))


def make_partial(result, *, size: str = "single", term: str | None = None) -> Figure:
    """The partial figure of ``term`` (default the first predictor) as a Figure."""
    fit = result.multi_fit
    return plot_partial(result, fit.names[0] if term is None else term, size=size).figure
