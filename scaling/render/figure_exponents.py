"""Exponent figures of a run: every fitted exponent with its interval against the
hypothesised exponents, and the exponents of many groups ordered with their mean."""

from __future__ import annotations

import textwrap
from types import SimpleNamespace

import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.text import Text
from matplotlib.ticker import MaxNLocator

from ..stats.line_results import ConfidenceInterval
from ..stats.schema import method_label
from .figure_inputs import common_slope_fit, drawn_primary, run_groups, run_methods, slopes_agree
from .figure_style import (LEGEND_MAX_GROUPS, MARKERS, METHOD_MARKERS, METHOD_SHADES, PALETTE,
                           SIZES, STYLE, agg_figure, figure_legend, group_digits, lay_out_now,
                           new_figure, spread_apart, styled, wrap_to_width)
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
    title = None
    if n_groups > LEGEND_MAX_GROUPS:
        spread = result.tables.get("exponent_spread")
        where = ("the group_exponents figure and fits.csv"
                 if spread is not None and len(spread) else "fits.csv")
        title = ax.set_title(f"{group_digits(str(n_groups))} groups: per-group exponents "
                             f"not drawn here (see {where})", loc="left",
                             fontsize=STYLE["font.size"] - 1)
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
    for value in values:
        ax.axvline(value, color="#9a9a9a", lw=0.7, ls=(0, (3, 2)), zorder=0)
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
    laid_out = title is not None and own
    if laid_out:   # wrapping moves only what is above the axes: one layout serves both
        wrap_to_width(title, ax.figure.bbox.x1 - 3 * ax.figure.dpi / 72,
                      lay_out_now(ax.figure))
    _reference_labels(ax, values, own, laid_out)
    return ax


def _reference_labels(ax, values: list, own: bool, laid_out: bool = False) -> None:
    """Label the hypothesised exponents' lines on top, one label per line; labels that
    would touch are joined into one ("2/3, 3/4") centred over their lines, so no two
    labels overlap however close the exponents lie on the axis.

    Widths are measured after the layout (``own`` figure): labels at the edges can
    narrow the axes, so the layout and the check run again until nothing is joined.
    """
    clusters = [[v] for v in sorted(set(values))]
    gap = 2 * ax.figure.dpi / 72   # 2 pt between labels

    def draw(cluster):
        return ax.text((cluster[0] + cluster[-1]) / 2, -0.5 - 0.05,
                       ", ".join(exponent_label(v) for v in cluster), ha="center",
                       va="bottom", fontsize=6.5, color="#4d4d4d", zorder=4,
                       bbox=dict(boxstyle="square,pad=0.1", facecolor="white",
                                 edgecolor="none"))

    texts = [draw(c) for c in clusters]
    for round_ in range(3):
        if len(texts) < 2:
            return
        renderer = (lay_out_now(ax.figure) if own and not (laid_out and round_ == 0)
                    else ax.figure.canvas.get_renderer())
        joined = False
        while len(texts) > 1:
            boxes = [t.get_window_extent(renderer) for t in texts]
            touching = [i for i in range(len(texts) - 1)
                        if boxes[i].x1 + gap > boxes[i + 1].x0]
            if not touching:
                break
            i = touching[0]   # join the leftmost pair that touches, then look again
            texts[i].remove()
            texts[i + 1].remove()
            clusters[i:i + 2] = [clusters[i] + clusters[i + 1]]
            texts[i:i + 2] = [draw(clusters[i])]
            joined = True
        if not joined:
            return


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
        marks = [(names[i], rank[i], b[i], bool(b[i] > s["mean"])) for i in order]
    else:
        marks = []
    for name, value in result.config.exponents.items():
        ax.axhline(value, color="#555555", ls=":", lw=0.9)
        ax.annotate(f"{name} ({value:g})", (1, value), xycoords=("axes fraction", "data"),
                    xytext=(-2, 2), textcoords="offset points", ha="right", fontsize=6)
    ax.set_xlim(0, k + 1)
    ax.set_xlabel(f"{thousands_plain(k)} groups, ordered by exponent\n"
                  f"{thousands_plain(int(flagged.sum()))} flagged: interval excludes the mean")
    ax.set_ylabel(f"{method.upper()} exponent")
    ax.legend(loc="upper left", fontsize=6, frameon=False)
    _name_flagged(ax, marks)
    return ax


def _name_flagged(ax, marks: list) -> None:
    """Name flagged groups beside the ends of the ordered curve, with leader lines.

    ``marks`` are (name, rank, exponent, above the mean).  Names of the low end
    stand in a column right of and below their points, those of the high end
    left of and above theirs -- the empty sides of a rising curve -- spread
    apart vertically so no two touch, and kept inside the axes (clear of the
    tick labels).  Positions are measured after the layout, in points from
    each point, so they hold at any output resolution.
    """
    if not marks:
        return
    fig = ax.figure
    renderer = lay_out_now(fig)
    px = fig.dpi / 72   # display pixels per point
    box = ax.get_window_extent(renderer)
    to_display = ax.transData.transform
    for up in (False, True):
        side = sorted((m for m in marks if m[3] == up), key=lambda m: m[2])
        if not side:
            continue
        texts = [ax.annotate(name, (r, v), xytext=(0, 0), textcoords="offset points",
                             fontsize=5.5, color="#333333", va="center",
                             ha="right" if up else "left",
                             arrowprops=dict(arrowstyle="-", lw=0.3, color="#999999",
                                             shrinkA=1, shrinkB=1))
                 for name, r, v, _ in side]
        extents = [Text.get_window_extent(t, renderer) for t in texts]   # not the leader
        height = max(e.height for e in extents) + 1.0 * px
        width = max(e.width for e in extents)
        points = to_display([(r, v) for _, r, v, _ in side])
        dx = 14 * px   # the column stands this far beside the outermost point
        lo_y, hi_y = box.y0 + height / 2 + 1, box.y1 - height / 2 - 1
        if up:   # stacked upward from the lowest named point, left of the end
            x = min(points[:, 0].min() - dx, box.x1 - 2 * px)
            x = max(x, box.x0 + width + 2 * px)
            ys = spread_apart(np.full(len(side), points[:, 1].min() + height / 2), height,
                              lo_y, hi_y)
        else:    # stacked downward from the highest named point, right of the end
            x = max(points[:, 0].max() + dx, box.x0 + 2 * px)
            x = min(x, box.x1 - width - 2 * px)
            top = points[:, 1].max() - height / 2
            ys = spread_apart(top - height * np.arange(len(side))[::-1], height, lo_y, hi_y)
        for t, (px_x, px_y), y in zip(texts, points, ys):
            t.xyann = ((x - px_x) / px, (y - px_y) / px)


def thousands_plain(n: int) -> str:
    return group_digits(str(int(n)))


@styled
def make_group_exponents(result, *, size: str = "single") -> Figure:
    """The group-exponent figure as a Figure (see :func:`plot_group_exponents`)."""
    return plot_group_exponents(result, size=size).figure
