"""Exponent figures of a run: every fitted exponent with its interval against the
hypothesised exponents, and the exponents of many groups ordered with their mean."""

from __future__ import annotations

import textwrap
from types import SimpleNamespace

import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.ticker import MaxNLocator

from ..stats.line_results import ConfidenceInterval
from ..stats.schema import method_label
from .figure_inputs import common_slope_fit, drawn_primary, run_groups, run_methods, slopes_agree
from .figure_style import (LEGEND_MAX_GROUPS, MARKERS, METHOD_MARKERS, METHOD_SHADES, PALETTE,
                           SIZES, STYLE, agg_figure, figure_legend, group_digits, new_figure,
                           styled)
from .wording import exponent_label, plural as plural_of

__all__ = ["plot_exponents", "make_exponents", "plot_group_exponents", "make_group_exponents",
           "SPREAD_LABEL_MAX", "SPREAD_BARS_MAX"]


def _exponent_rows(result, methods) -> list:
    """(label, scope, group) for every fit scope present.

    Pooled first -- unless the groups' slopes do not differ (by the primary
    method's group test), when the common within-group slope, the answer the
    report leads with, comes first.
    """
    rows = []
    keys = result.line_fits.keys()
    groups = run_groups(result)
    word = str(result.config.data.group or "group")
    plural = plural_of(word)
    if any(k[0] == "pooled" for k in keys):
        rows.append(("Pooled" if not groups else f"Pooled (all {plural})", "pooled", ""))
    if len(groups) <= LEGEND_MAX_GROUPS:   # above: no row per group (see plot_exponents)
        fitted = {k[1] for k in keys if k[0] == "group"}
        rows += [(g, "group", g) for g in groups if g in fitted]
    if len(groups) > 1 and any(common_slope_fit(result, m) is not None
                               for m in (methods or ())):
        common = (f"Common slope within {plural}", "common", "")
        if slopes_agree(result, drawn_primary(list(methods), result)):
            rows.insert(0, common)
        else:
            rows.append(common)
    if any(k[0] == "group_means" for k in keys):
        rows.append((f"Through {word} means", "group_means", ""))
    # with a tree the phylogenetic lines lead, as in the Answer
    phylo = []
    if any(_table_fit(result, "phylo_common", m) is not None for m in (methods or ())):
        phylo.append((f"Phylogenetic common slope within {plural}", "phylo_common", ""))
    if any(k[0] == "phylo" for k in keys):
        phylo.append(("Phylogenetic" + (f" (all {plural})" if groups else ""), "phylo", ""))
    return phylo + rows


def _table_fit(result, scope: str, method: str):
    """The fits.csv row of ``scope`` and ``method`` as an object with ``slope`` and
    ``slope_ci`` (None when absent or not estimable); nothing is estimated here."""
    fits = result.fits
    if fits is None or not len(fits) or "scope" not in fits:
        return None
    rows = fits[(fits["scope"] == scope) & (fits["method"] == method)]
    if not len(rows) or not np.isfinite(float(rows["slope"].iloc[0])):
        return None
    row = rows.iloc[0]
    return SimpleNamespace(slope=float(row["slope"]),
                           slope_ci=ConfidenceInterval(float(row["slope_low"]),
                                                       float(row["slope_high"])))


def _accepted_ranges(fits, scope: str, group: str, method: str, lo: float, hi: float) -> list:
    """The interval as drawn: one range, or SMA's two accepted ranges when fits.csv has a
    gap (``slope_gap_low`` .. ``slope_gap_high`` is rejected by the test)."""
    if fits is None or "slope_gap_low" not in fits:
        return [(lo, hi)]
    row = fits[(fits["scope"] == scope) & (fits["group"].astype(str) == str(group))
               & (fits["method"] == method)]
    if not len(row):
        return [(lo, hi)]
    gap_lo, gap_hi = float(row["slope_gap_low"].iloc[0]), float(row["slope_gap_high"].iloc[0])
    if np.isfinite(gap_lo) and np.isfinite(gap_hi):
        return [(lo, gap_lo), (gap_hi, hi)]
    return [(lo, hi)]


@styled
def plot_exponents(result, *, ax=None, methods=None, size: str = "single"):
    """Every fitted exponent with its interval, and the hypothesised exponents.

    One row per fit scope (pooled, each group, the line through the group
    means); within a row one dot-and-whisker per method.  Vertical lines mark
    each hypothesised exponent of ``config.exponents``, labelled on top.
    Above :data:`LEGEND_MAX_GROUPS` groups there is no row per group (the
    figure would grow without bound); a note in the figure says so.

    Returns
    -------
    matplotlib.axes.Axes
    """
    methods = run_methods(result, methods)
    rows = _exponent_rows(result, methods)
    own = ax is None
    if own:
        width = SIZES.get(size, SIZES["single"])
        height = (0.75 + 0.22 * max(len(rows), 1) * max(1.0, len(methods) / 3)) + 0.45
        ax = agg_figure(figsize=(width, max(height, 1.8)), layout="constrained").add_subplot()
    k = len(methods)
    n_groups = len(run_groups(result))
    if n_groups > LEGEND_MAX_GROUPS:
        ax.set_title(f"{n_groups} groups: per-group exponents not drawn "
                     "(see fits.csv)", loc="left", fontsize=STYLE["font.size"] - 1)
    offsets = (np.arange(k) - (k - 1) / 2) * (0.6 / max(k, 1))
    handles = []
    lows, highs = [], []
    for j, method in enumerate(methods):
        shade = METHOD_SHADES.get(method, "#333333")
        marker = METHOD_MARKERS.get(method, MARKERS[j % len(MARKERS)])
        any_drawn = False
        for i, (_label_text, scope, group) in enumerate(rows):
            fit = (common_slope_fit(result, method) if scope == "common"
                   else _table_fit(result, scope, method) if scope == "phylo_common"
                   else result.line_fits.get((scope, group, method)))
            if fit is None:
                continue
            y = i + offsets[j]
            lo, hi = fit.slope_ci.low, fit.slope_ci.high
            if np.isfinite(lo) and np.isfinite(hi):
                for a, b in _accepted_ranges(result.fits, scope, group, method, lo, hi):
                    ax.plot([a, b], [y, y], color=shade, lw=1.0, solid_capstyle="butt",
                            zorder=2)
                lows.append(lo)
                highs.append(hi)
            else:
                ax.annotate("CI unbounded", (fit.slope, y), xytext=(6, 0),
                            textcoords="offset points", va="center", fontsize=6,
                            color=shade)
            ax.plot([fit.slope], [y], ls="none", marker=marker, markersize=3.6,
                    markerfacecolor=shade, markeredgecolor="white",
                    markeredgewidth=0.4, zorder=3)
            lows.append(fit.slope)
            highs.append(fit.slope)
            any_drawn = True
        if any_drawn:
            handles.append(Line2D([], [], color=shade, lw=1.0, marker=marker, markersize=3.6,
                                  markeredgecolor="white", markeredgewidth=0.4,
                                  label=method_label(method)))
    # reference exponents
    refs = list(result.config.exponents.items())
    values = [v for _, v in refs]
    if not rows:
        ax.text(0.5, 0.5, "no estimable fit to show (see the note column of fits.csv)",
                transform=ax.transAxes, ha="center", va="center", color="#4d4d4d")
    if lows:
        lo_all = min(lows + values)
        hi_all = max(highs + values)
        pad = 0.08 * (hi_all - lo_all or 0.1)
        ax.set_xlim(lo_all - pad, hi_all + pad)
    # first row on top; at least one row's height when no fit is estimable
    ax.set_ylim(max(len(rows), 1) - 0.5, -0.5 - (0.55 if refs else 0))
    span = np.diff(ax.get_xlim())[0]
    placed: list = []
    for name, value in sorted(refs, key=lambda kv: kv[1]):
        ax.axvline(value, color="#9a9a9a", lw=0.7, ls=(0, (3, 2)), zorder=0)
        level = 0
        while any(abs(value - v) < 0.12 * span and lvl == level for v, lvl in placed):
            level += 1
        placed.append((value, level))
        text = exponent_label(value)
        ax.text(value, -0.5 - 0.05 - 0.25 * level, text, ha="center", va="bottom",
                fontsize=6.5, color="#4d4d4d", zorder=4,
                bbox=dict(boxstyle="square,pad=0.1", facecolor="white", edgecolor="none"))
    ax.set_yticks(range(len(rows)))
    labels = ax.set_yticklabels([textwrap.fill(r[0], 22) for r in rows])
    if rows and rows[0][1] in ("common", "phylo_common"):   # the answer, first and in bold
        labels[0].set_fontweight("bold")
    ax.tick_params(axis="y", length=0)
    ax.spines["left"].set_visible(False)
    pct = f"{100 * result.config.model.confidence:g}%"
    ax.set_xlabel(f"Exponent b with {pct} CI")
    ax.xaxis.set_major_locator(MaxNLocator(6))
    for i in range(len(rows)):
        if i % 2 == 1:
            ax.axhspan(i - 0.5, i + 0.5, color="#f2f2f2", lw=0, zorder=-1)
    if handles:
        if own:
            figure_legend(ax.figure, handles, len(handles))
        else:
            ax.legend(handles=handles, loc="best")
    return ax


@styled
def make_exponents(result, *, size: str = "single", **kwargs) -> Figure:
    """The exponent plot as a Figure (see :func:`plot_exponents`)."""
    return plot_exponents(result, size=size, **kwargs).figure


# --------------------------------------------------------------------------
# exponents of many groups, ordered (the summary across groups)

#: At most this many flagged groups are named in the group-exponent figure.
SPREAD_LABEL_MAX = 8
#: Above this many groups the intervals are drawn as one band, not one bar each.
SPREAD_BARS_MAX = 150


@styled
def plot_group_exponents(result, *, method: str | None = None, ax=None,
                         size: str = "single"):
    """Per-group exponents with their intervals, ordered, and the mean across groups.

    Groups are placed by rank of their exponent; intervals are bars (up to
    :data:`SPREAD_BARS_MAX` groups) or a shaded band.  The random-effects
    mean and its interval (``result.tables["exponent_spread"]``) are a line
    and a band; hypothesised exponents are dotted lines.  Only groups whose
    interval excludes the mean are "flagged"; the most extreme
    :data:`SPREAD_LABEL_MAX` of them are named, so the figure stays readable
    with 10 000 groups.
    """
    spread = result.tables.get("exponent_spread")
    if method is None:
        method = (str(spread["method"].iloc[0]) if spread is not None and len(spread)
                  else drawn_primary(list(result.config.model.methods)))
    f = result.fits
    rows = f[(f["scope"] == "group") & (f["method"] == method) & np.isfinite(f["slope"])]
    rows = rows.sort_values("slope", kind="stable")
    k = len(rows)
    if ax is None:
        ax = new_figure(size, 0.7).subplots()
    rank = np.arange(1, k + 1)
    b = rows["slope"].to_numpy(float)
    lo, hi = rows["slope_low"].to_numpy(float), rows["slope_high"].to_numpy(float)
    finite = np.isfinite(lo) & np.isfinite(hi)
    if k <= SPREAD_BARS_MAX:
        ax.vlines(rank[finite], lo[finite], hi[finite], color="#9a9a9a", lw=0.8)
    else:
        ax.fill_between(rank, np.where(finite, lo, b), np.where(finite, hi, b),
                        color="#c8c8c8", lw=0, step="mid",
                        label=f"{100 * result.config.model.confidence:g}% intervals")
    ax.plot(rank, b, ls="none", marker="o", ms=3 if k <= SPREAD_BARS_MAX else 1,
            color=PALETTE[0], label=f"{method.upper()} exponent per group")
    flagged = np.zeros(k, dtype=bool)
    if spread is not None and (spread["method"] == method).any():
        s = spread[spread["method"] == method].iloc[0]
        ax.axhspan(s["mean_low"], s["mean_high"], color=PALETTE[1], alpha=0.2, lw=0)
        ax.axhline(s["mean"], color=PALETTE[1], lw=1.2,
                   label=f"mean {s['mean']:.3g}, between-group SD {s['tau']:.2g}")
        flagged = finite & ((lo > s["mean"]) | (hi < s["mean"]))
        far = np.abs(b - s["mean"])
        order = np.argsort(-np.where(flagged, far, -np.inf))[:min(SPREAD_LABEL_MAX,
                                                                  int(flagged.sum()))]
        names = rows["group"].astype(str).to_numpy()
        seen = {True: 0, False: 0}   # stagger the names on each side so they do not overlap
        for i in order:
            up = bool(b[i] > s["mean"])
            j = seen[up]
            seen[up] += 1
            ax.annotate(names[i], (rank[i], b[i]), xytext=(-4, (-8 - 7 * j) if up else 3 + 7 * j),
                        textcoords="offset points", fontsize=5.5, color="#333333",
                        ha="right" if up else "left",
                        arrowprops=dict(arrowstyle="-", lw=0.3, color="#999999"))
    for name, value in result.config.exponents.items():
        ax.axhline(value, color="#555555", ls=":", lw=0.9)
        ax.annotate(f"{name} ({value:g})", (1, value), xycoords=("axes fraction", "data"),
                    xytext=(-2, 2), textcoords="offset points", ha="right", fontsize=6)
    ax.set_xlim(0, k + 1)
    ax.set_xlabel(f"{thousands_plain(k)} groups, ordered by exponent\n"
                  f"{thousands_plain(int(flagged.sum()))} flagged: interval excludes the mean")
    ax.set_ylabel(f"{method.upper()} exponent")
    ax.legend(loc="upper left", fontsize=6, frameon=False)
    return ax


def thousands_plain(n: int) -> str:
    return group_digits(str(int(n)))


@styled
def make_group_exponents(result, *, size: str = "single") -> Figure:
    """The group-exponent figure as a Figure (see :func:`plot_group_exponents`)."""
    return plot_group_exponents(result, size=size).figure
