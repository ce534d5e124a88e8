"""Figures on log-log axes labelled in natural units.

Each ``plot_*`` function draws on a given Axes (or a new
:class:`matplotlib.figure.Figure`) and returns the Axes; nothing here uses
pyplot state or calls ``show()``.  :func:`write_figures` saves the figures a
run asks for and returns their paths relative to the output folder.
"""

from __future__ import annotations

import math
from pathlib import Path

import matplotlib
import numpy as np
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

__all__ = ["plot_scaling", "natural_log_axis", "format_natural", "write_figures",
           "PALETTE", "MARKERS"]

# Okabe & Ito (2008) colour-blind-safe palette, ordered for contrast on white.
PALETTE = ["#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9",
           "#000000", "#F0E442"]
MARKERS = ["o", "s", "^", "D", "v", "P", "X", "h"]
METHOD_STYLES = {"ols": "-", "sma": "--", "ma": ":"}
MM = 1 / 25.4
SIZES = {"single": 85 * MM, "double": 180 * MM}


def format_natural(value: float, _pos=None) -> str:
    """Tick text for a power of ten: 0.01, 0.1, 1, 10, 1 000, 10 000 (thin-space grouping)."""
    if value <= 0 or not math.isfinite(value):
        return ""
    exponent = math.log10(value)
    if abs(exponent - round(exponent)) > 1e-9:
        return ""
    k = int(round(exponent))
    if -3 <= k <= 5:
        if k < 0:
            return f"{value:.{-k}f}"
        return f"{int(round(value)):,}".replace(",", "\u2009")
    return f"$10^{{{k}}}$"


def natural_log_axis(ax, which: str = "both") -> None:
    """Put log scale on ``ax`` with major ticks at powers of ten written as numbers."""
    for name in ("x", "y") if which == "both" else (which,):
        axis = ax.xaxis if name == "x" else ax.yaxis
        getattr(ax, f"set_{name}scale")("log")
        axis.set_major_locator(LogLocator(base=10, numticks=12))
        axis.set_major_formatter(FuncFormatter(format_natural))
        axis.set_minor_locator(LogLocator(base=10, subs=np.arange(2, 10), numticks=12))
        axis.set_minor_formatter(NullFormatter())


def _label(result, role: str) -> str:
    cfg = result.config
    labels = cfg.figures.labels
    name = labels.get(role) or (cfg.data.x if role == "x" else cfg.data.y)
    unit = result.data.units.get(role)
    return f"{name} ({unit})" if unit else name


def _new_axes(size: str = "single", aspect: float = 0.85):
    width = SIZES.get(size, SIZES["single"])
    fig = Figure(figsize=(width, width * aspect), layout="constrained")
    return fig.add_subplot()


def plot_scaling(result, *, methods=None, ax=None, size: str = "single"):
    """Data on log-log axes with the pooled (or per-group) fitted lines.

    Parameters
    ----------
    result : RunResult
    methods : sequence of str, optional
        Methods to draw; defaults to the run's methods.
    ax : matplotlib Axes, optional

    Returns
    -------
    matplotlib.axes.Axes
    """
    if ax is None:
        ax = _new_axes(size)
    pts = result.data.points
    methods = list(methods or result.config.model.methods)
    base = result.line_fits and next(iter(result.line_fits.values())).log_base
    groups = sorted(pts["group"].unique()) if "group" in pts.columns else [None]
    for i, g in enumerate(groups):
        sel = pts if g is None else pts[pts["group"] == g]
        ax.scatter(sel["x"], sel["y"], s=14, marker=MARKERS[i % len(MARKERS)],
                   facecolor=PALETTE[i % len(PALETTE)] + "99",
                   edgecolor=PALETTE[i % len(PALETTE)], linewidth=0.5,
                   label=str(g) if g is not None else "data", zorder=2)
    for method in methods:
        fit = result.line_fits.get(("pooled", "", method))
        if fit is None or fit.x_range is None:
            continue
        xs = np.geomspace(*fit.x_range, 50)
        ys = np.power(base, fit.intercept + fit.slope * np.log(xs) / math.log(base))
        ax.plot(xs, ys, METHOD_STYLES.get(method, "-"), color="#222222", linewidth=1.2,
                label=f"{method.upper()}: b = {fit.slope:.3f}", zorder=3)
    natural_log_axis(ax)
    ax.set_xlabel(_label(result, "x"))
    ax.set_ylabel(_label(result, "y"))
    ax.legend(fontsize=6, frameon=False, loc="upper left")
    return ax


def write_figures(result, folder: Path) -> list[Path]:
    """Save the run's figures under ``folder/figures``; return relative paths."""
    cfg = result.config.figures
    out = []
    (folder / "figures").mkdir(exist_ok=True)
    with matplotlib.rc_context({"font.size": 7, "axes.titlesize": 7,
                                "axes.labelsize": 7, "pdf.fonttype": 42,
                                "svg.fonttype": "none"}):
        ax = plot_scaling(result, size=cfg.size)
        for fmt in cfg.formats:
            rel = Path("figures") / f"scaling.{fmt}"
            ax.figure.savefig(folder / rel, dpi=cfg.dpi)
            out.append(rel)
    return out
