"""Publication figures of a run: scaling plot, natural-scale plot, exponents, residuals.

Every ``plot_*`` function draws on a given Axes (or on a new
:class:`matplotlib.figure.Figure` it makes) and returns the Axes; every
``make_*`` function returns the whole Figure.  Nothing here uses pyplot
state or calls ``show()``; :func:`write_figures` saves the figures a run
asks for and returns their paths relative to the output folder.

Look (our own): open axes with outward ticks, log axes labelled in natural
units (1, 10, 100, 1 000 ...; powers of ten written 10^k once the axis
spans values outside 0.001 to 100 000), groups told apart by colour *and*
marker from the Okabe & Ito (2008) colour-blind-safe palette, fitted lines
drawn only over the range of x they were fitted to.

Sizes follow common journal column widths: ``single`` 85 mm, ``double``
180 mm (common practice, no source).  Text is 7 pt (tick labels 6.5 pt) at
print size.  PDF and SVG keep text as text (TrueType fonts embedded in PDF;
SVG text left as ``<text>``).
"""

from __future__ import annotations

import functools
import io
import math
import textwrap
import warnings
from pathlib import Path
from types import SimpleNamespace

import matplotlib
import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.collections import LineCollection
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.ticker import (Formatter, LogLocator, MaxNLocator, NullFormatter,
                               FuncFormatter)
from scipy import stats

from ..errors import ConfigError, FigureWarning, ScalingError
from ..stats.line_results import ConfidenceInterval
from ..stats.lines import parse_log_base, to_log
from ..stats.predictions import log_interval, predict, saved_factor
from ..stats.schema import CATALOGUE, FIGURE_KINDS, method_label
from .wording import exponent_label, plural as plural_of
from ..run.points_to_check import primary_method
from ..stats.groups import common_slope

__all__ = ["plot_scaling", "plot_natural", "plot_exponents", "plot_residuals",
           "make_scaling", "make_natural", "make_exponents", "make_residuals",
           "make_figure", "figure_png", "write_figures", "natural_log_axis",
           "format_natural", "NaturalLogFormatter", "STYLE", "PALETTE", "MARKERS",
           "SIZES", "KINDS"]

# Okabe & Ito (2008) colour-blind-safe palette (yellow last: weak on white).
PALETTE = ["#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9",
           "#000000", "#F0E442"]
MARKERS = ["o", "s", "^", "D", "v", "P", "X", "h"]
# Methods are told apart by dash pattern (lines) and by a neutral shade.
METHOD_DASHES = {name: m.dash for name, m in CATALOGUE.items()}
METHOD_SHADES = {name: m.shade for name, m in CATALOGUE.items()}
METHOD_MARKERS = {name: m.marker for name, m in CATALOGUE.items()}
PHYLO_COLOUR = "#b2182b"   # phylogenetic lines in the scaling plot (one colour, method dashes)
# At most this many fitted equations are written on the scaling plot; the
# legend names every line (more would crowd the data off the axes).
MAX_EQUATIONS = 3
#: Above this many groups figures list no group in the legend (one entry says
#: so) and draw the groups in a few batched artists instead of one per group.
LEGEND_MAX_GROUPS = 12
PAGE_HEIGHT = 9.0        # inches: an A4 or letter page less its margins
#: Scatter plots draw a seeded random subset of this many points above it (stated on the axes).
MAX_DRAWN_POINTS = 5_000
MM = 1 / 25.4
SIZES = {"single": 85 * MM, "double": 180 * MM}
KINDS = FIGURE_KINDS
THIN = "\u2009"   # thin space between digit groups: 1 000, 10 000

STYLE = {
    "font.family": "DejaVu Sans",
    "font.size": 7,
    "axes.labelsize": 7,
    "axes.titlesize": 7,
    "axes.linewidth": 0.6,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "xtick.labelsize": 6.5,
    "ytick.labelsize": 6.5,
    "xtick.direction": "out",
    "ytick.direction": "out",
    "xtick.major.width": 0.6,
    "ytick.major.width": 0.6,
    "xtick.minor.width": 0.4,
    "ytick.minor.width": 0.4,
    "xtick.major.size": 3.0,
    "ytick.major.size": 3.0,
    "xtick.minor.size": 1.6,
    "ytick.minor.size": 1.6,
    "legend.fontsize": 6.5,
    "legend.frameon": False,
    "lines.linewidth": 1.0,
    "mathtext.default": "regular",
    "pdf.fonttype": 42,
    "ps.fonttype": 42,
    "svg.fonttype": "none",
    "svg.hashsalt": "scaling",
    "figure.dpi": 100,
}


def _styled(func):
    """Run ``func`` inside :data:`STYLE` (text sizes are fixed when artists are made)."""
    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        with matplotlib.rc_context(STYLE):
            return func(*args, **kwargs)
    return wrapper


# --------------------------------------------------------------------------
# numbers and ticks in natural units


def _group_digits(text: str) -> str:
    """Insert thin spaces every three digits left of the decimal point (5 digits up)."""
    sign = "-" if text.startswith("-") else ""
    text = text.lstrip("-")
    whole, _, frac = text.partition(".")
    if len(whole) >= 4:
        groups = []
        while whole:
            groups.insert(0, whole[-3:])
            whole = whole[:-3]
        whole = THIN.join(groups)
    return sign + whole + ("." + frac if frac else "")


def _plain_number(value: float, digits: int = 3) -> str:
    """``value`` with ``digits`` significant digits, never in e-notation, digits grouped."""
    if value == 0 or not math.isfinite(value):
        return "0" if value == 0 else str(value)
    k = math.floor(math.log10(abs(value)))
    decimals = max(digits - 1 - k, 0)
    text = f"{round(value, decimals):.{decimals}f}"
    return _group_digits(text)


def format_natural(value: float, _pos=None) -> str:
    """Tick text for a positive value on a log axis: 0.01, 0.1, 1, 2, 10, 1 000, 10 000.

    Values from 0.001 to 100 000 are written out (digits grouped by thin
    spaces); others as powers of ten in mathtext (``$10^{6}$``).
    """
    if not (value > 0 and math.isfinite(value)):
        return ""
    k = math.log10(value)
    if abs(k - round(k)) < 1e-9 and not -3 <= round(k) <= 5:
        return f"$10^{{{int(round(k))}}}$"
    text = _plain_number(value, 3)
    return text.rstrip("0").rstrip(".") if "." in text else text


class NaturalLogFormatter(Formatter):
    """Major tick labels of a log axis in natural units, one style per axis.

    If every labelled tick lies in [0.001, 100 000] the numbers are written
    out (``0.1``, ``1``, ``1 000``); otherwise every tick is written as a
    power of ten, so one axis never mixes the two styles.
    """

    def __init__(self):
        self._powers = False

    def set_locs(self, locs):
        super().set_locs(locs)
        lo, hi = self.axis.get_view_interval() if self.axis is not None else (1, 1)
        lo, hi = min(lo, hi), max(lo, hi)
        shown = [v for v in locs if v > 0 and lo * (1 - 1e-9) <= v <= hi * (1 + 1e-9)]
        self._powers = any(v < 1e-3 * (1 - 1e-9) or v > 1e5 * (1 + 1e-9) for v in shown)

    def __call__(self, value, pos=None):
        if not (value > 0 and math.isfinite(value)):
            return ""
        if self._powers:
            k = math.log10(value)
            if abs(k - round(k)) < 1e-6:
                return f"$10^{{{int(round(k))}}}$"
            mant = value / 10 ** math.floor(k)
            return f"${mant:.2g}\\times10^{{{int(math.floor(k))}}}$"
        return format_natural(value)


def natural_log_axis(ax, which: str = "both") -> None:
    """Log scale on ``ax`` with natural-unit major tick labels and minor ticks.

    Spans under two decades get majors at 1, 2, 5 x 10^k (2, 5, 20, 50 ...)
    so that intermediate values are labelled; wide spans get every decade (or every
    2nd, 3rd ... decade when more than ~8 decades are shown).
    """
    names = ("x", "y") if which == "both" else (which,)
    for name in names:
        axis = ax.xaxis if name == "x" else ax.yaxis
        getattr(ax, f"set_{name}scale")("log")
        lo, hi = sorted(getattr(ax, f"get_{name}lim")())
        # difference of logs, not log of the ratio: hi / lo overflows for 1e-300..1e300
        decades = math.log10(hi) - math.log10(lo) if lo > 0 and hi > 0 else 1.0
        if decades < 2.0:
            axis.set_major_locator(LogLocator(base=10, subs=(1.0, 2.0, 5.0), numticks=12))
            axis.set_minor_locator(LogLocator(base=10, subs=np.arange(1, 10) * 1.0,
                                              numticks=40))
        else:
            axis.set_major_locator(LogLocator(base=10, numticks=9))
            axis.set_minor_locator(LogLocator(base=10, subs=np.arange(2, 10) * 1.0,
                                              numticks=40 if decades <= 8 else 2))
        axis.set_major_formatter(NaturalLogFormatter())
        axis.set_minor_formatter(NullFormatter())


def _log_margins(ax, margin: float) -> None:
    """Autoscale log axes with ``margin``, or with none where a margin would leave the
    floating-point range (data spanning 1e-300 to 1e300: 5% of 600 decades is 1e330)."""
    ax.margins(margin)
    try:
        with np.errstate(over="ignore", invalid="ignore"):
            ax.autoscale_view()
        limits = np.array([*ax.get_xlim(), *ax.get_ylim()], dtype=float)
        ok = bool(np.all(np.isfinite(limits)) and np.all(limits > 0))
    except ValueError:
        ok = False
    if not ok:
        ax.margins(0)
        ax.autoscale_view()


def _arith_formatter(value, _pos=None) -> str:
    if not math.isfinite(value):
        return ""
    if value == 0:
        return "0"
    text = f"{value:.6g}"
    if "e" in text:
        return f"{value:.1e}"
    return _group_digits(text)


# --------------------------------------------------------------------------
# small helpers reading the result


def _base(result) -> float:
    for fit in result.line_fits.values():
        if fit.log_base is not None:
            return float(fit.log_base)
    return parse_log_base(result.config.model.log_base) or 10.0


def _label(result, role: str) -> str:
    """Axis label: figures.labels, else the column name in words; "(unit)" once.

    Without ``figures.labels`` a unit already in the column name is not
    repeated: ``mass_g`` with unit g reads "mass (g)", not "mass_g (g)".
    """
    cfg = result.config
    labels = cfg.figures.labels or {}
    unit = (result.data.units or {}).get(role)
    name = labels.get(role)
    if not name:
        name = str(cfg.data.x if role == "x" else cfg.data.y)
        if unit:
            for tail in (f"_{unit}", f" {unit}", f"({unit})", f"[{unit}]", f"_({unit})"):
                if name.lower().endswith(tail.lower()) and len(name) > len(tail):
                    name = name[: -len(tail)]
                    break
        name = name.replace("_", " ").strip()
    if unit and f"({unit})" in str(name):
        return str(name)
    return f"{name} ({unit})" if unit else str(name)


def _groups(result) -> list:
    pts = result.data.points
    if "group" not in pts.columns:
        return []
    return sorted(str(g) for g in pts["group"].unique())


def _group_style(i: int) -> tuple:
    return PALETTE[i % len(PALETTE)], MARKERS[i % len(MARKERS)]


def _group_codes(pts, groups: list) -> np.ndarray:
    """Index into the sorted ``groups`` of every point (one pass, not one per group)."""
    return np.searchsorted(np.asarray(groups, dtype=object),
                           pts["group"].astype(str).to_numpy(dtype=object))


def _scatter_groups(ax, pts, groups: list, **kwargs) -> None:
    """Points in their group's colour and marker (see :func:`_scatter_coded`)."""
    _scatter_coded(ax, pts["x"].to_numpy(), pts["y"].to_numpy(), _group_codes(pts, groups),
                   len(groups), **kwargs)


def _scatter_coded(ax, x, y, codes, n_groups: int, **kwargs) -> None:
    """Scatter with group ``codes``: one artist per group present, or, above
    :data:`LEGEND_MAX_GROUPS` groups, one artist with a colour per point, drawn in a
    seeded random order (so no group's colour always lies on top)."""
    x, y, codes = np.asarray(x), np.asarray(y), np.asarray(codes)
    n_all = len(x)
    if n_all > MAX_DRAWN_POINTS:   # drawing cost grows with points: a stated subsample
        keep = np.sort(np.random.default_rng(0).choice(n_all, MAX_DRAWN_POINTS,
                                                       replace=False))
        x, y, codes = x[keep], y[keep], codes[keep]
        note = ax.text(0.99, 0.01, f"{_group_digits(str(MAX_DRAWN_POINTS))} of "
                       f"{_group_digits(str(n_all))} points\nshown; all are fitted",
                       transform=ax.transAxes, ha="right", va="bottom", fontsize=5.5,
                       color="#555555", zorder=9, linespacing=1.1,
                       bbox=dict(boxstyle="square,pad=0.15", facecolor="white", alpha=0.75,
                                 edgecolor="none"))
        note.set_in_layout(False)   # a note inside the axes must not squeeze the layout
    if n_groups <= LEGEND_MAX_GROUPS:
        for c in np.unique(codes):
            colour, marker = _group_style(int(c))
            sel = codes == c
            ax.scatter(x[sel], y[sel], marker=marker, facecolor=colour, **kwargs)
        return
    order = np.random.default_rng(1).permutation(len(x))
    colours = np.asarray(PALETTE, dtype=object)[codes[order] % len(PALETTE)]
    ax.scatter(x[order], y[order], marker="o", facecolor=list(colours), **kwargs)


def _many_groups_handle(n_groups: int):
    """The one legend entry standing for groups too many to list."""
    return Line2D([], [], ls="none", marker="o", color="#888888", markersize=4,
                  label=f"{_group_digits(str(n_groups))} groups (colours cycle; too many "
                        "to list)")


def _methods(result, methods) -> list:
    return list(methods) if methods else list(result.config.model.methods)


def _primary_method(methods: list, result=None) -> str:
    """The method whose per-group lines are drawn: the run's primary method
    (``model.primary``, else the first symmetric method, else OLS) when drawn,
    else SMA if present, else the first."""
    if result is not None:
        chosen = primary_method(result.config)
        if chosen in methods:
            return chosen
    return "sma" if "sma" in methods else methods[0]


def _new_figure(size: str, aspect: float) -> Figure:
    width = SIZES.get(size, SIZES["single"])
    return _agg_figure(figsize=(width, width * aspect), layout="constrained")


def _figure_legend(fig: Figure, handles: list, ncol: int, **kwargs):
    """Legend below the axes; fewer columns while it is wider than the figure."""
    ncol = max(1, min(ncol, len(handles)))
    while True:
        legend = fig.legend(handles=handles, loc="outside lower center", ncol=ncol, **kwargs)
        if ncol == 1:
            return legend
        # The legend's width depends only on its entries and fonts, not on where the
        # layout puts it: measured with the figure's renderer, no draw of the figure
        # (a draw_without_rendering here ran constrained layout once per try).
        if legend.get_window_extent().width <= fig.bbox.width * 0.98:
            return legend
        legend.remove()
        ncol -= 1


def _group_means_table(result):
    """Group means on the log scale: the run's table, else computed from the points.

    Returns a DataFrame ``group, n, mean_log_x, mean_log_y, se_log_x, se_log_y``
    or None without groups.  SE = SD / sqrt(n) (textbook; common practice).
    """
    table = (result.tables or {}).get("group_means")
    if isinstance(table, pd.DataFrame) and len(table):
        return table
    pts = result.data.points
    if "group" not in pts.columns:
        return None
    rows = []
    for g, sub in pts.groupby("group", sort=True):
        n = len(sub)
        sd_x = sub["log_x"].std(ddof=1) if n > 1 else math.nan
        sd_y = sub["log_y"].std(ddof=1) if n > 1 else math.nan
        rows.append({"group": str(g), "n": n, "mean_log_x": sub["log_x"].mean(),
                     "mean_log_y": sub["log_y"].mean(),
                     "se_log_x": sd_x / math.sqrt(n), "se_log_y": sd_y / math.sqrt(n)})
    return pd.DataFrame(rows)


def _fit_band(fit, xs: np.ndarray, *, interval: str = "confidence"):
    """Fitted line and band on the log scale at natural ``xs``: (fit, low, high).

    Notes
    -----
    var = s_r^2/n + (X0 - mean_x)^2 var(b) (+ s_r^2 for a prediction band),
    bounds at the t quantile on ``fit.df``; see :func:`scaling.stats.predictions.log_interval`
    (exact for OLS; Warton et al. 2006, Biol. Rev. 81:259 for SMA/MA).
    """
    X0 = to_log(xs, fit.log_base)
    fitted, _se, lo, hi = log_interval(
        X0, intercept=fit.intercept, slope=fit.slope, slope_se=fit.slope_se,
        resid_sd=fit.resid_sd, n=float(fit.n),
        mean_x=float(np.asarray(fit.moments.mean_x)), df=float(fit.df),
        confidence=fit.confidence, interval=interval)
    return fitted, lo, hi


def _unlog(values, base):
    return np.power(base, values)


def _fit_xrange(fit, result):
    if fit.x_range is not None:
        return fit.x_range
    x = result.data.points["x"].to_numpy()
    return float(x.min()), float(x.max())


def _factor_of(result, scope: str, group: str, method: str) -> dict:
    """The run's correction factor of one fit, for the equation box."""
    kind = result.config.prediction.correction
    col = f"{kind}_factor"
    fits = result.fits
    if kind == "none" or col not in fits:
        return {}
    row = fits[(fits["scope"] == scope) & (fits["group"] == group) & (fits["method"] == method)]
    if not len(row):
        return {}
    return {"factor": float(row[col].iloc[0]), "correction": kind}


def _common_slope_fit(result, method: str):
    """The common within-group slope of ``method`` (object with ``slope``, ``slope_ci``),
    or None: from the run's fits (scope ``common``) when present, else estimated from
    the points when groups are compared (OLS, SMA, MA)."""
    fit = result.line_fits.get(("common", "", method))
    if fit is not None:
        return fit
    fits = result.fits
    if fits is not None and len(fits) and "scope" in fits:
        # the run's own estimate and interval (fits.csv, scope "common"): the numbers
        # the report leads with, not a second computation
        rows = fits[(fits["scope"] == "common") & (fits["method"] == method)]
        if len(rows) and np.isfinite(float(rows["slope"].iloc[0])):
            row = rows.iloc[0]
            return SimpleNamespace(slope=float(row["slope"]),
                                   slope_ci=ConfidenceInterval(float(row["slope_low"]),
                                                               float(row["slope_high"])))
    cfg = result.config
    pts = result.data.points
    if not (cfg.groups.compare and "group" in pts.columns) or method not in ("ols", "sma", "ma"):
        return None
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            fit = common_slope(pts["log_x"].to_numpy(float), pts["log_y"].to_numpy(float),
                               pts["group"].astype(str).to_numpy(), method=method,
                               confidence=cfg.model.confidence)
    except ScalingError:
        return None
    return fit if np.isfinite(fit.slope) else None


def _group_line(fit, xs, common, means) -> np.ndarray:
    """Log-scale fitted values of one group's line at ``xs``: through the group's own
    mean with the common slope when ``common`` is given, else the group's own line."""
    if common is None or means is None:
        return _fit_band(fit, xs)[0]
    mx, my = means
    base = fit.log_base
    X = np.asarray(xs, dtype=float) if base is None else np.log(xs) / np.log(base)
    return my + common.slope * (X - mx)


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
    a_text = _plain_number(a, digits) if 1e-3 <= abs(a) < 1e6 else \
        f"{a / 10 ** math.floor(math.log10(a)):.{digits - 1}f}" \
        f"\\times10^{{{math.floor(math.log10(a))}}}"
    a_text = a_text.replace(THIN, r"\,")
    factor_text = ""
    if factor is not None and np.isfinite(factor):
        factor_text = f"\nline = median; mean = median × {factor:.3g}"
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


def _slopes_agree(result, method: str) -> bool:
    """True when the run compared groups by ``method`` and found no difference in slope."""
    table = (result.tables or {}).get("group_tests")
    if table is None or not len(table) or "test" not in table:
        return False
    rows = table[(table["method"] == method) & (table["test"] == "slopes_equal")]
    return bool(len(rows)) and float(rows["p_value"].iloc[0]) > 1 - result.config.model.confidence


# --------------------------------------------------------------------------
# scaling plot


@_styled
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
        ax = _new_figure(size, 0.92).add_subplot()
    pts = result.data.points
    base = _base(result)
    if methods is None:   # the primary method's line; other methods only when asked
        drawn = list(result.config.model.methods)
        methods = [_primary_method(drawn, result)] if drawn else drawn
    methods = _methods(result, methods)
    groups = _groups(result)
    group_word = str(result.config.data.group or "group")
    plural = plural_of(group_word)
    handles: list = []
    gm = None
    xs_all, ys_all = [pts["x"].to_numpy()], [pts["y"].to_numpy()]

    # data
    if groups:
        gm = _group_means_table(result)
        _scatter_groups(ax, pts, groups, s=12, edgecolor="white", linewidth=0.3, alpha=0.75,
                        zorder=2)
        if len(groups) <= LEGEND_MAX_GROUPS:
            sizes = np.bincount(_group_codes(pts, groups), minlength=len(groups))
            for i, g in enumerate(groups):
                colour, marker = _group_style(i)
                handles.append(Line2D([], [], ls="none", marker=marker, color=colour,
                                      markeredgecolor="white", markeredgewidth=0.3,
                                      markersize=4.5, label=f"{g} (n = {sizes[i]})"))
        else:
            handles.append(_many_groups_handle(len(groups)))
        if means and gm is not None:
            # all means at once: index of each table row among the drawn groups
            where = {g: i for i, g in enumerate(groups)}
            idx = np.array([where.get(str(g), -1) for g in gm["group"]], dtype=int)
            keep = idx >= 0
            lx = gm["mean_log_x"].to_numpy(float)[keep]
            ly = gm["mean_log_y"].to_numpy(float)[keep]
            sx = np.nan_to_num(gm["se_log_x"].to_numpy(float)[keep], nan=0.0)
            sy = np.nan_to_num(gm["se_log_y"].to_numpy(float)[keep], nan=0.0)
            idx = idx[keep]
            mx, my = _unlog(lx, base), _unlog(ly, base)
            xerr = np.vstack([mx - _unlog(lx - sx, base), _unlog(lx + sx, base) - mx])
            yerr = np.vstack([my - _unlog(ly - sy, base), _unlog(ly + sy, base) - my])
            if len(groups) <= LEGEND_MAX_GROUPS:
                for j, i in enumerate(idx):
                    colour, marker = _group_style(int(i))
                    ax.errorbar(mx[j:j + 1], my[j:j + 1], xerr=xerr[:, j:j + 1],
                                yerr=yerr[:, j:j + 1], fmt="none", ecolor="black",
                                elinewidth=0.7, capsize=1.5, capthick=0.6, zorder=5)
                    ax.scatter(mx[j:j + 1], my[j:j + 1], s=42, marker=marker,
                               facecolor=colour, edgecolor="black", linewidth=0.8, zorder=6)
            elif idx.size:
                # many groups: small symbols, one artist, a seeded random drawing order
                # (large symbols of hundreds of means would hide the data and each other)
                ax.errorbar(mx, my, xerr=xerr, yerr=yerr, fmt="none", ecolor="black",
                            elinewidth=0.4, capsize=0, zorder=5, alpha=0.6)
                order = np.random.default_rng(2).permutation(idx.size)
                colours = np.asarray(PALETTE, dtype=object)[idx[order] % len(PALETTE)]
                ax.scatter(mx[order], my[order], s=14, marker="o", facecolor=list(colours),
                           edgecolor="black", linewidth=0.5, zorder=6)
            handles.append(Line2D([], [], ls="none", marker="o", markerfacecolor="white",
                                  markeredgecolor="black", markersize=6,
                                  label="group mean ± 1 SE"))
    else:
        _scatter_coded(ax, pts["x"].to_numpy(), pts["y"].to_numpy(),
                       np.zeros(len(pts), dtype=int), 1, s=12, edgecolor="white",
                       linewidth=0.3, alpha=0.8, zorder=2)   # same look; thinned above a size
        handles.append(Line2D([], [], ls="none", marker="o", color=PALETTE[0],
                              markersize=4.5, label=f"data (n = {len(pts)})"))

    # per-group lines
    common, gmethod = None, None
    if len(groups) > 1 and group_lines:
        gmethod = _primary_method(methods, result) if group_lines == "auto" else str(group_lines)
        drawn = False
        segments, seg_colours = [], []
        common = _common_slope_fit(result, gmethod)
        means_of = {} if common is None or gm is None else {
            str(r.group): (r.mean_log_x, r.mean_log_y) for r in gm.itertuples(index=False)}
        for i, g in enumerate(groups):
            fit = result.line_fits.get(("group", g, gmethod))
            if fit is None:
                continue
            lo, hi = _fit_xrange(fit, result)
            if len(groups) > LEGEND_MAX_GROUPS:
                # a straight line on log-log axes: its two ends suffice
                xs = np.array([lo, hi])
                fitted = _group_line(fit, xs, common, means_of.get(g))
                segments.append(np.column_stack([xs, _unlog(fitted, base)]))
                seg_colours.append(_group_style(i)[0])
                drawn = True
                continue
            xs = np.geomspace(lo, hi, 40)
            fitted = _group_line(fit, xs, common, means_of.get(g))
            ax.plot(xs, _unlog(fitted, base), color=_group_style(i)[0], lw=0.9,
                    ls=METHOD_DASHES.get(gmethod, "-"), zorder=3)
            drawn = True
        if segments:
            ax.add_collection(LineCollection(segments, colors=seg_colours, linewidths=0.9,
                                             linestyles=METHOD_DASHES.get(gmethod, "-"),
                                             zorder=3))
        if drawn:
            handles.append(Line2D([], [], color="#888888", lw=0.9,
                                  ls=METHOD_DASHES.get(gmethod, "-"),
                                  label=(f"{method_label(gmethod)} common slope in each "
                                         f"{group_word}" if common is not None else
                                         f"{method_label(gmethod)} line per {group_word}")))

    # main lines with bands; the equation box leads with the answer: the common
    # within-group exponent when the groups' slopes do not differ (as the report does)
    eq_lines = []
    lead_line = ""
    if scope == "pooled" and common is not None and _slopes_agree(result, gmethod):
        lead_line = common_slope_text(common.slope, common.slope_ci.low, common.slope_ci.high,
                                      method=gmethod, confidence=result.config.model.confidence,
                                      groups_word=plural)
    for method in methods:
        fit = result.line_fits.get((scope, "", method))
        if fit is None:
            continue
        lo, hi = _fit_xrange(fit, result)
        if scope == "group_means" and gm is not None:
            mxs = _unlog(gm["mean_log_x"].to_numpy(dtype=float), base)
            lo, hi = float(np.min(mxs)), float(np.max(mxs))
        xs = np.geomspace(lo, hi, 80)
        fitted, blo, bhi = _fit_band(fit, xs)
        shade = METHOD_SHADES.get(method, "#333333")
        if band:
            ax.fill_between(xs, _unlog(blo, base), _unlog(bhi, base), color=shade,
                            alpha=0.14, linewidth=0, zorder=1)
        ax.plot(xs, _unlog(fitted, base), color=shade, lw=1.3,
                ls=METHOD_DASHES.get(method, "-"), zorder=4)
        xs_all.append(xs)
        ys_all.append(_unlog(fitted, base))
        where = "group means" if scope == "group_means" else (
            f"all {plural}" if groups else "")
        label = method_label(method) + (f" ({where})" if where else "")
        handles.append(Line2D([], [], color=shade, lw=1.3, ls=METHOD_DASHES.get(method, "-"),
                              label=label))
        if len(eq_lines) < MAX_EQUATIONS:
            eq_lines.append(equation_text(
                fit, **_factor_of(result, scope, "", method),
                label=f"{method_label(method)}, all {plural}" if lead_line else None))
    if scope == "pooled":   # phylogenetic lines (scaling/phylo_stage.py), no band
        for method in methods:
            fit = result.line_fits.get(("phylo", "", method))
            if fit is None:
                continue
            xs = np.geomspace(*_fit_xrange(fit, result), 80)
            fitted, _, _ = _fit_band(fit, xs)
            ax.plot(xs, _unlog(fitted, base), color=PHYLO_COLOUR, lw=0.9,
                    ls=METHOD_DASHES.get(method, "-"), zorder=4.5)
            handles.append(Line2D([], [], color=PHYLO_COLOUR, lw=0.9,
                                  ls=METHOD_DASHES.get(method, "-"),
                                  label=f"phylogenetic {method_label(method)}"))
            if len(eq_lines) < MAX_EQUATIONS + 2:   # room for the phylogenetic pair
                eq_lines.append("phylo. " + equation_text(fit))
    if band and eq_lines:
        handles.append(matplotlib.patches.Patch(color="#4d4d4d", alpha=0.25, lw=0,
                                                label=f"{100 * result.config.model.confidence:g}% "
                                                      "confidence band"))

    natural_log_axis(ax)
    _log_margins(ax, 0.05)
    natural_log_axis(ax)   # again: locators depend on the final span
    ax.set_xlabel(_label(result, "x"))
    ax.set_ylabel(_label(result, "y"))

    if legend and handles:
        if own:
            ncol = 4 if size == "double" else 3   # the legend keeps to about a quarter
            _figure_legend(ax.figure, handles, ncol, handlelength=2.0, columnspacing=0.8,
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


def _agg_figure(**kwargs) -> Figure:
    """A Figure with an Agg canvas attached (no pyplot): layout and text sizes are then
    measured with the renderer that draws the PNG, which is also faster than a bare canvas."""
    fig = Figure(**kwargs)
    FigureCanvasAgg(fig)
    return fig


def _laid_out(fig):
    """Run the figure's layout (positions only; nothing is drawn) and return the renderer."""
    engine = fig.get_layout_engine()
    if engine is None:
        fig.draw_without_rendering()
        return None
    canvas = fig.canvas if isinstance(fig.canvas, FigureCanvasAgg) else FigureCanvasAgg(fig)
    engine.execute(fig)
    return canvas.get_renderer()


def _covered(ax, text, xs, ys) -> int:
    """Number of data points / line samples under ``text`` once laid out."""
    renderer = _laid_out(ax.figure)
    box = text.get_window_extent(renderer).padded(2.0)
    disp = ax.transData.transform(np.column_stack([xs, ys]))
    inside = ((disp[:, 0] >= box.x0) & (disp[:, 0] <= box.x1)
              & (disp[:, 1] >= box.y0) & (disp[:, 1] <= box.y1))
    return int(np.sum(inside))


def _place_in_emptiest_corner(ax, text, xs, ys) -> str:
    """Move ``text`` to the axes corner that covers fewest points (after layout).

    Tries the corners in the order of :data:`_CORNERS`, stops at the first
    that covers nothing; if every corner covers something, raises the top of
    the y-axis until the upper-left corner is clear.  Returns the corner.
    """
    counts = {}
    for name, (x, y, ha, va) in _CORNERS.items():
        text.set_position((x, y))
        text.set_ha(ha)
        text.set_va(va)
        counts[name] = _covered(ax, text, xs, ys)
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


# --------------------------------------------------------------------------
# natural-scale plot


def _smearing_data(result):
    pts = result.data.points
    return pts["x"].to_numpy(dtype=float), pts["y"].to_numpy(dtype=float)


#: Above this many decades of x the natural-scale plot zooms on the central data
#: (x up to :data:`NATURAL_ZOOM_QUANTILE`) and adds a full-range panel (or inset).
NATURAL_ZOOM_DECADES = 2.0
NATURAL_ZOOM_QUANTILE = 90.0
_PRED_COLOUR = "#000000"


def _natural_predictions(result, methods: list):
    """Rows of the run's ``predictions`` table drawn on the natural-scale plot:
    scope ``pooled`` (the curves drawn), for the methods drawn; None if there are none."""
    table = (result.tables or {}).get("predictions")
    if not isinstance(table, pd.DataFrame) or not len(table) or "scope" not in table:
        return None
    rows = table[(table["scope"] == "pooled") & table["method"].isin(methods)]
    rows = rows[np.isfinite(rows["y"].to_numpy(dtype=float))]
    return rows if len(rows) else None


def _natural_layers(ax, result, methods, groups, correction, interval, preds, *,
                    small: bool = False) -> tuple:
    """Points, corrected curves with bands, and prediction markers on ``ax``.

    Returns (legend handles, (x, y) arrays of everything drawn for the limits).
    """
    pts = result.data.points
    size = 5 if small else 10
    handles = []
    xs_all, ys_all = [pts["x"].to_numpy(float)], [pts["y"].to_numpy(float)]
    if groups:
        _scatter_groups(ax, pts, groups, s=size, edgecolor="white", linewidth=0.3,
                        alpha=0.75, zorder=2)
        if len(groups) <= LEGEND_MAX_GROUPS:
            for i, g in enumerate(groups):
                colour, marker = _group_style(i)
                handles.append(Line2D([], [], ls="none", marker=marker, color=colour,
                                      markersize=4, label=g))
        else:
            handles.append(_many_groups_handle(len(groups)))
    else:
        ax.scatter(pts["x"], pts["y"], s=size, facecolor=PALETTE[0], edgecolor="white",
                   linewidth=0.3, alpha=0.8, zorder=2)
        handles.append(Line2D([], [], ls="none", marker="o", color=PALETTE[0],
                              markersize=4, label="data"))
    n_curves = 0
    for method in methods:
        fit = result.line_fits.get(("pooled", "", method))
        if fit is None:
            continue
        lo, hi = _fit_xrange(fit, result)
        xs = np.linspace(lo, hi, 240)
        xs[0], xs[-1] = lo, hi
        saved = result.tables.get("_saved_fits", {}).get(("pooled", "", method))
        if saved is not None:   # the run's factors, computed once by the prediction stage
            pred = predict(fit, xs, correction=correction, interval=interval,
                           factor=saved_factor(saved, correction))
        else:
            pred = predict(fit, xs, correction=correction, interval=interval,
                           data=_smearing_data(result) if correction in ("smearing", "ratio")
                           else None)
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
    if preds is not None:
        x = preds["x"].to_numpy(float)
        y = preds["y"].to_numpy(float)
        low = preds["y_low"].to_numpy(float)
        high = preds["y_high"].to_numpy(float)
        extra = preds["extrapolated"].astype(bool).to_numpy()
        pct = f"{100 * result.config.model.confidence:g}%"
        kinds = preds["interval"].iloc[0] if "interval" in preds else interval
        ms = 3.0 if small else 4.5
        for flag, style, label in (
                (False, dict(marker="D", mfc=_PRED_COLOUR, ls="-"),
                 f"prediction ± {pct} {kinds} interval"),
                (True, dict(marker="D", mfc="white", ls=(0, (2, 1.5))),
                 "extrapolated prediction (beyond fitted x)")):
            sel = extra == flag
            if not np.any(sel):
                continue
            for xi, yi, li, hi_ in zip(x[sel], y[sel], low[sel], high[sel]):
                err = [[max(yi - li, 0.0)], [max(hi_ - yi, 0.0)]] \
                    if np.isfinite(li) and np.isfinite(hi_) else None
                cont = ax.errorbar([xi], [yi], yerr=err, fmt="none", ecolor=_PRED_COLOUR,
                                   elinewidth=0.8, capsize=2.0 if small else 2.5,
                                   capthick=0.8, zorder=6)
                if err is not None:
                    for bar in cont.lines[2]:
                        bar.set_linestyle(style["ls"])
                ax.plot([xi], [yi], ls="none", marker=style["marker"], markersize=ms,
                        markerfacecolor=style["mfc"], markeredgecolor=_PRED_COLOUR,
                        markeredgewidth=0.8, zorder=7,
                        gid="prediction-extrapolated" if flag else "prediction")
            handles.append(Line2D([], [], color=_PRED_COLOUR, lw=0.8, ls=style["ls"],
                                  marker=style["marker"], markersize=4,
                                  markerfacecolor=style["mfc"],
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
        axis.set_major_formatter(FuncFormatter(_arith_formatter))


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


@_styled
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

    Predictions: the rows of the run's ``predictions`` table for the pooled
    curves drawn (scope ``pooled``, the methods drawn) are marked as black
    diamonds with their interval as an error bar; extrapolated ones (outside
    the fitted x range) are open diamonds with dashed bars, with their own
    legend entry.  Predictions beyond the zoomed window appear in the
    full-range panel only.
    """
    own = ax is None
    pts = result.data.points
    x = pts["x"].to_numpy(dtype=float)
    x = x[np.isfinite(x) & (x > 0)]
    decades = float(np.log10(x.max() / x.min())) if len(x) else 0.0
    zoom = decades > NATURAL_ZOOM_DECADES
    overview = None
    if own:
        if zoom:
            fig = _new_figure(size, 1.2)
            grid = fig.add_gridspec(2, 1, height_ratios=[2.4, 1.0])
            ax = fig.add_subplot(grid[0])
            overview = fig.add_subplot(grid[1])
        else:
            ax = _new_figure(size, 0.85).add_subplot()
    methods = _methods(result, methods)
    groups = _groups(result)
    correction = correction or result.config.prediction.correction
    preds = _natural_predictions(result, methods)
    handles, drawn = _natural_layers(ax, result, methods, groups, correction, interval, preds)
    x_all = np.concatenate([x, drawn[0][np.isfinite(drawn[0])]])
    x_max = float(np.max(x_all)) if len(x_all) else 1.0
    x_hi = float(np.percentile(x, NATURAL_ZOOM_QUANTILE)) if zoom else x_max
    _natural_limits(ax, drawn, x_hi)
    if any(isinstance(h, matplotlib.patches.Patch) for h in handles):   # curves drawn
        what = "mean" if correction != "none" else "median"
        title = f"{what.capitalize()} of y ({correction} correction)"
        if zoom:
            title += (f"\nx up to its {NATURAL_ZOOM_QUANTILE:g}th percentile"
                      + ("; full range below" if own else ""))
        ax.set_title(title, loc="left", fontsize=STYLE["font.size"] - 0.5)
    if zoom:
        if overview is None:
            overview = ax.inset_axes(_inset_corner(ax, drawn))
            overview.tick_params(labelsize=5, length=2, pad=1)
        _natural_layers(overview, result, methods, groups, correction, interval, preds,
                        small=True)
        _natural_limits(overview, drawn, x_max)
        overview.axvspan(0, x_hi * 1.04, color="#000000", alpha=0.06, lw=0, zorder=0)
        note = "Full range (shaded: the panel above)" if own else "Full range (shaded: main view)"
        overview.set_title(note, loc="left", fontsize=STYLE["font.size"] - (1 if own else 2),
                           pad=2)
        if own:
            overview.set_xlabel(_label(result, "x"))
    if not (zoom and own):
        ax.set_xlabel(_label(result, "x"))
    ax.set_ylabel(_label(result, "y"))
    if own:
        _figure_legend(ax.figure, handles, 3 if len(handles) > 4 else 2, handlelength=2.0,
                       columnspacing=0.8, handletextpad=0.4,
                       fontsize=STYLE["font.size"] - 1)   # about a quarter of the height
    else:
        ax.legend(handles=handles, loc="best")
    return ax


# --------------------------------------------------------------------------
# exponent plot


def _exponent_rows(result, methods) -> list:
    """(label, scope, group) for every fit scope present.

    Pooled first -- unless the groups' slopes do not differ (by the primary
    method's group test), when the common within-group slope, the answer the
    report leads with, comes first.
    """
    rows = []
    keys = result.line_fits.keys()
    groups = _groups(result)
    word = str(result.config.data.group or "group")
    plural = plural_of(word)
    if any(k[0] == "pooled" for k in keys):
        rows.append(("Pooled" if not groups else f"Pooled (all {plural})", "pooled", ""))
    if len(groups) <= LEGEND_MAX_GROUPS:   # above: no row per group (see plot_exponents)
        fitted = {k[1] for k in keys if k[0] == "group"}
        rows += [(g, "group", g) for g in groups if g in fitted]
    if len(groups) > 1 and any(_common_slope_fit(result, m) is not None
                               for m in (methods or ())):
        common = (f"Common slope within {plural}", "common", "")
        if _slopes_agree(result, _primary_method(list(methods), result)):
            rows.insert(0, common)
        else:
            rows.append(common)
    if any(k[0] == "group_means" for k in keys):
        rows.append((f"Through {word} means", "group_means", ""))
    return rows


@_styled
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
    methods = _methods(result, methods)
    rows = _exponent_rows(result, methods)
    own = ax is None
    if own:
        width = SIZES.get(size, SIZES["single"])
        height = (0.75 + 0.22 * max(len(rows), 1) * max(1.0, len(methods) / 3)) + 0.45
        ax = _agg_figure(figsize=(width, max(height, 1.8)), layout="constrained").add_subplot()
    k = len(methods)
    n_groups = len(_groups(result))
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
            fit = (_common_slope_fit(result, method) if scope == "common"
                   else result.line_fits.get((scope, group, method)))
            if fit is None:
                continue
            y = i + offsets[j]
            lo, hi = fit.slope_ci.low, fit.slope_ci.high
            if np.isfinite(lo) and np.isfinite(hi):
                ax.plot([lo, hi], [y, y], color=shade, lw=1.0, solid_capstyle="butt", zorder=2)
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
    if rows and rows[0][1] == "common":   # the answer, first and in bold
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
            _figure_legend(ax.figure, handles, len(handles))
        else:
            ax.legend(handles=handles, loc="best")
    return ax


# --------------------------------------------------------------------------
# residual panels


def _residuals(fit, X: np.ndarray, Y: np.ndarray) -> tuple:
    """(position along the line, residual) on the log scale for one fit.

    OLS: fitted value a + bX against the vertical residual Y - a - bX.
    SMA: Y + bX against Y - bX - a; MA: X + bY against Y - bX - a (the
    residual and the axis score are uncorrelated for these lines; Warton,
    Wright, Falster & Westoby 2006, Biol. Rev. 81:259, section on
    checking assumptions).
    """
    b, a = fit.slope, fit.intercept
    resid = Y - a - b * X
    if fit.method == "sma":
        return Y + b * X, resid
    if fit.method == "ma":
        return X + b * Y, resid
    return a + b * X, resid


_FITTED_LABEL = {"ols": "Fitted value (log scale)"}
_POSITION_LABEL = "Position along the line (log scale)"


def _normal_quantiles(n: int) -> np.ndarray:
    """Blom (1958) plotting positions (i - 3/8)/(n + 1/4) as standard normal quantiles.

    Blom, G. (1958) *Statistical Estimates and Transformed Beta-Variables*.
    Wiley, New York (citation from memory).
    """
    i = np.arange(1, n + 1)
    return stats.norm.ppf((i - 0.375) / (n + 0.25))


@_styled
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
        ax = _new_figure(size, 0.8).add_subplot()
    fit = result.line_fits.get((scope, "", method))
    pts = result.data.points
    if fit is None:
        ax.text(0.5, 0.5, f"{method_label(method)}: no estimable fit", ha="center",
                va="center", transform=ax.transAxes)
        return ax
    X, Y = pts["log_x"].to_numpy(float), pts["log_y"].to_numpy(float)
    pos, resid = _residuals(fit, X, Y)
    groups = _groups(result)
    codes = (np.searchsorted(groups, pts["group"].astype(str).to_numpy())
             if groups else np.zeros(len(pts), dtype=int))
    if kind == "normal":
        order = np.argsort(resid)
        q = _normal_quantiles(resid.size)
        _scatter_coded(ax, q, resid[order], codes[order], len(groups), s=9,
                       edgecolor="white", linewidth=0.3, alpha=0.85, zorder=2)
        if resid.size >= 4:
            q1, q3 = np.percentile(resid, [25, 75])
            z1, z3 = stats.norm.ppf([0.25, 0.75])
            slope = (q3 - q1) / (z3 - z1)
            zz = np.array([q.min(), q.max()])
            ax.plot(zz, q1 + slope * (zz - z1), color="#4d4d4d", lw=0.8, zorder=1)
        ax.set_xlabel("Expected if normal")
        ax.set_ylabel("Residual (log scale)")
        ax.set_title(f"{method_label(method)}: normality", loc="left",
                     fontsize=STYLE["font.size"] - 0.5)
    else:
        _scatter_coded(ax, pos, resid, codes, len(groups), s=9, edgecolor="white",
                       linewidth=0.3, alpha=0.85, zorder=2)
        ax.axhline(0, color="#4d4d4d", lw=0.7, zorder=1)
        ax.set_xlabel(_FITTED_LABEL.get(method, _POSITION_LABEL))
        ax.set_ylabel("Residual (log scale)")
        ax.set_title(f"{method_label(method)}: residuals", loc="left",
                     fontsize=STYLE["font.size"] - 0.5)
    lim = float(np.max(np.abs(resid))) * 1.15 if resid.size else 1.0
    if not lim > 0:   # perfect fit: all residuals zero
        lim = 1.0
    ax.set_ylim(-lim, lim)
    ax.xaxis.set_major_locator(MaxNLocator(5))
    ax.yaxis.set_major_locator(MaxNLocator(5, symmetric=True))
    return ax


# --------------------------------------------------------------------------
# whole figures and saving


@_styled
def make_scaling(result, *, size: str = "single", **kwargs) -> Figure:
    """The scaling plot as a Figure (see :func:`plot_scaling`)."""
    return plot_scaling(result, size=size, **kwargs).figure


@_styled
def make_natural(result, *, size: str = "single", **kwargs) -> Figure:
    """The natural-scale plot as a Figure (see :func:`plot_natural`)."""
    return plot_natural(result, size=size, **kwargs).figure


@_styled
def make_exponents(result, *, size: str = "single", **kwargs) -> Figure:
    """The exponent plot as a Figure (see :func:`plot_exponents`)."""
    return plot_exponents(result, size=size, **kwargs).figure


@_styled
def make_residuals(result, *, size: str = "single", methods=None) -> Figure:
    """Residual panels: one row per method, residuals vs position and normal quantiles."""
    methods = _methods(result, methods)
    width = SIZES.get(size, SIZES["single"])
    row_h = width * (0.42 if size == "single" else 0.26)
    row_h = min(row_h, PAGE_HEIGHT / len(methods))   # the whole figure fits a page
    fig = _agg_figure(figsize=(width, row_h * len(methods) + 0.35), layout="constrained")
    axes = fig.subplots(len(methods), 2, squeeze=False)
    for i, method in enumerate(methods):
        plot_residuals(result, ax=axes[i, 0], method=method, kind="fitted")
        plot_residuals(result, ax=axes[i, 1], method=method, kind="normal")
    groups = _groups(result)
    if len(groups) > LEGEND_MAX_GROUPS:
        _figure_legend(fig, [_many_groups_handle(len(groups))], 1)
    elif groups:
        handles = [Line2D([], [], ls="none", marker=_group_style(i)[1],
                          color=_group_style(i)[0], markersize=4, label=g)
                   for i, g in enumerate(groups)]
        _figure_legend(fig, handles, min(len(groups), 3 if size == "single" else 6))
    return fig


_MAKERS = {"scaling": make_scaling, "natural": make_natural,
           "exponents": make_exponents, "residuals": make_residuals}


def make_figure(result, kind: str, *, size: str | None = None) -> Figure:
    """One figure of ``kind`` (``scaling``, ``natural``, ``exponents``, ``residuals``)."""
    if kind not in _MAKERS:
        raise ConfigError(f"figure kind must be one of {', '.join(KINDS)}, not {kind!r}")
    return _MAKERS[kind](result, size=size or result.config.figures.size)


def _save(fig: Figure, target, fmt: str, dpi: int) -> None:
    # No creation dates in the files, so reruns give identical figures.
    meta = {"png": {"Software": None}, "pdf": {"CreationDate": None, "Producer": None},
            "svg": {"Date": None}}.get(fmt, {})
    with matplotlib.rc_context(STYLE):
        fig.savefig(target, format=fmt, dpi=dpi, metadata=meta)


def figure_png(result, kind: str, *, dpi: int = 150, size: str | None = None) -> bytes:
    """PNG bytes of one figure (used by the report when no PNG was written)."""
    fig = make_figure(result, kind, size=size)
    buf = io.BytesIO()
    _save(fig, buf, "png", dpi)
    return buf.getvalue()


def _draw_and_save(result, kinds, folder: Path) -> list:
    """Draw each figure of ``kinds`` once and save it in every format.

    Returns ``[(kind, (relative paths, note)), ...]``; the note is empty, or
    says why the figure was skipped (its files are then removed).
    """
    cfg = result.config.figures
    drawn = []
    for kind in kinds:
        done: list[str] = []
        try:
            fig = make_figure(result, kind, size=cfg.size)
            for i, fmt in enumerate(cfg.formats):
                rel = Path("figures") / f"{kind}.{fmt}"
                _save(fig, folder / rel, fmt, cfg.dpi)
                done.append(str(rel))
                if i == 0:
                    # Same size in every format: keep the layout found for the first.
                    fig.set_layout_engine("none")
        except Exception as exc:  # noqa: BLE001 -- any drawing failure skips this figure only
            for rel in done:
                (folder / rel).unlink(missing_ok=True)
            reason = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
            drawn.append((kind, ([], f"Figure '{kind}' was not drawn ({type(exc).__name__}: "
                                     f"{reason}); the numeric results are complete in the "
                                     "tables.")))
            continue
        drawn.append((kind, (done, "")))
    return drawn


#: Rough relative cost of drawing and saving each figure (measured on the demo):
#: how :mod:`scaling.render.figure_worker` splits a run's figures between two processes.
DRAWING_COST = {"scaling": 3, "natural": 2, "exponents": 1, "residuals": 4}


def write_figures(result, folder: Path, *, kinds=None, extras: bool = True) -> list[Path]:
    """Save the run's figures under ``folder/figures``; return paths relative to ``folder``.

    ``config.figures.kinds`` selects the figures, ``.formats`` the files
    (``png`` at ``.dpi``; ``pdf`` and ``svg`` as vector with text kept as
    text), ``.size`` the width.  Files are ``figures/<kind>.<format>``.

    A figure that cannot be drawn or saved (e.g. axis limits beyond the
    floating-point range for values near 1e±300) is skipped, with a
    :class:`~scaling.errors.FigureWarning` naming it and the reason: a figure
    never turns a good fit into a failed run.

    ``kinds`` draws only these of ``config.figures.kinds``; ``extras=False``
    leaves out the figures beyond them (of many groups; of several
    predictors): :mod:`scaling.render.figure_worker` splits a run's figures between
    processes this way.
    """
    cfg = result.config.figures
    folder = Path(folder)
    (folder / "figures").mkdir(parents=True, exist_ok=True)
    if "_multi_fit" in (result.tables or {}):   # several predictors: partial relationships
        return _write_partial_figures(result, folder) if extras else []
    chosen = [k for k in cfg.kinds if kinds is None or k in kinds]
    out: list[Path] = []
    for kind, (done, note) in _draw_and_save(result, chosen, folder):
        if note:
            warnings.warn(note, FigureWarning, stacklevel=2)
        out += [Path(rel) for rel in done]
    if not extras:
        return out
    try:   # the summary across many groups (scaling.run.moments_path), when the run has one
        out += write_group_exponents(result, folder)
    except Exception as exc:  # noqa: BLE001 -- as above: skip the figure with a note
        warnings.warn(f"Figure 'group_exponents' was not drawn ({type(exc).__name__}: "
                      f"{str(exc).splitlines()[0] if str(exc) else ''}); the numeric results "
                      "are complete in exponent_spread.csv.", FigureWarning, stacklevel=2)
    return out


# --------------------------------------------------------------------------
# exponents of many groups, ordered (the summary across groups)

#: At most this many flagged groups are named in the group-exponent figure.
SPREAD_LABEL_MAX = 8
#: Above this many groups the intervals are drawn as one band, not one bar each.
SPREAD_BARS_MAX = 150


@_styled
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
        method = str(spread["method"].iloc[0]) if spread is not None and len(spread) \
            else _primary_method(list(result.config.model.methods))
    f = result.fits
    rows = f[(f["scope"] == "group") & (f["method"] == method) & np.isfinite(f["slope"])]
    rows = rows.sort_values("slope", kind="stable")
    k = len(rows)
    if ax is None:
        ax = _new_figure(size, 0.7).subplots()
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
    ax.set_xlabel(f"{_thousands_plain(k)} groups, ordered by exponent\n"
                  f"{_thousands_plain(int(flagged.sum()))} flagged: interval excludes the mean")
    ax.set_ylabel(f"{method.upper()} exponent")
    ax.legend(loc="upper left", fontsize=6, frameon=False)
    return ax


def _thousands_plain(n: int) -> str:
    return _group_digits(str(int(n)))


def write_group_exponents(result, folder: Path) -> list[Path]:
    """``figures/group_exponents.<format>`` when the run has a summary across groups."""
    spread = result.tables.get("exponent_spread")
    if spread is None or not len(spread):
        return []
    cfg = result.config.figures
    fig = plot_group_exponents(result, size=cfg.size).figure
    out = []
    for fmt in cfg.formats:
        rel = Path("figures") / f"group_exponents.{fmt}"
        _save(fig, Path(folder) / rel, fmt, cfg.dpi)
        out.append(rel)
    return out


# --------------------------------------------------------------------------
# several predictors: partial relationships


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
    """
    fit = result.tables["_multi_fit"]
    j = fit.names.index(term)
    own = ax is None
    if own:
        ax = _new_figure(size, 0.92).add_subplot()
    base = fit.log_base
    lx, ly = np.asarray(fit.log_x), np.asarray(fit.log_y)
    means = lx.mean(axis=0)
    others = [i for i in range(fit.k) if i != j]
    adj = ly - sum(fit.slopes[i] * (lx[:, i] - means[i]) for i in others)
    ax.scatter(base ** lx[:, j], base ** adj, s=12, color=PALETTE[0], edgecolor="white",
               linewidth=0.3, alpha=0.8, zorder=2)
    grid = np.linspace(lx[:, j].min(), lx[:, j].max(), 50)
    line = fit.intercept + fit.slopes[j] * grid + sum(fit.slopes[i] * means[i] for i in others)
    ax.plot(base ** grid, base ** line, color="black", lw=1.2, zorder=3,
            label=f"exponent {fit.slopes[j]:.3f} ({fit.slope_low[j]:.3f}–{fit.slope_high[j]:.3f})")
    _log_margins(ax, 0.05)
    natural_log_axis(ax)
    units = result.data.units or {}
    ux = units.get("x")
    unit = ux[j] if isinstance(ux, tuple) else None
    ax.set_xlabel(f"{term} ({unit})" if unit else term)
    held = ", ".join(f"{fit.names[i]} = {base ** means[i]:.3g}" for i in others)
    ax.set_ylabel(_label(result, "y") + f"\nat {held}")
    ax.legend(loc="upper left", fontsize="small", frameon=False)
    return ax


def _write_partial_figures(result, folder: Path) -> list[Path]:
    """One ``figures/partial_<term>.<format>`` per predictor (several-predictor runs)."""

    cfg = result.config.figures
    out: list[Path] = []
    for term in result.tables["_multi_fit"].names:
        safe = "".join(ch if ch.isalnum() or ch in "-_" else "_" for ch in term)
        try:
            ax = plot_partial(result, term, size=cfg.size)
            for fmt in cfg.formats:
                rel = Path("figures") / f"partial_{safe}.{fmt}"
                _save(ax.figure, folder / rel, fmt, cfg.dpi)
                out.append(rel)
        except Exception as exc:  # noqa: BLE001 -- a figure never fails the run
            warnings.warn(f"Figure 'partial_{safe}' was not drawn ({type(exc).__name__}: "
                          f"{exc}); the numeric results are complete in the tables.",
                          FigureWarning, stacklevel=2)
    return out
