"""The look of every figure: palette, sizes, text style, natural-unit log axes, saving.

Look (our own): open axes with outward ticks, log axes labelled in natural
units (1, 10, 100, 1 000 ...; powers of ten written 10^k once the axis
spans values outside 0.001 to 100 000), groups told apart by colour *and*
marker from the Okabe & Ito (2008) colour-blind-safe palette, fitted lines
drawn only over the range of x they were fitted to.

Sizes follow common journal column widths: ``single`` 85 mm, ``double``
180 mm (common practice, no source).  Text is 7 pt (tick labels 6.5 pt) at
print size.  PDF and SVG keep text as text (TrueType fonts embedded in PDF;
SVG text left as ``<text>``).  Nothing here uses pyplot state.
"""

from __future__ import annotations

import contextlib
import functools
import io
import math
import textwrap

import matplotlib
import numpy as np
from matplotlib import cbook
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.layout_engine import PlaceHolderLayoutEngine
from matplotlib.lines import Line2D
from matplotlib.ticker import Formatter, LogLocator, NullFormatter
from PIL import Image
from PIL.PngImagePlugin import PngInfo

from ..stats.schema import CATALOGUE
from .thinning import MAX_DRAWN_POINTS as _MAX_DRAWN_POINTS, subset_index

__all__ = ["STYLE", "PALETTE", "MARKERS", "SIZES", "METHOD_DASHES", "METHOD_SHADES",
           "METHOD_MARKERS", "PHYLO_COLOUR", "LEGEND_MAX_GROUPS", "MAX_DRAWN_POINTS",
           "format_natural", "NaturalLogFormatter", "natural_log_axis", "styled",
           "save_figure", "thinned_index", "scatter_by_colour", "thinned_notes_to_legend"]

# Okabe & Ito (2008) colour-blind-safe palette (yellow last: weak on white).
PALETTE = ["#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9",
           "#000000", "#F0E442"]
MARKERS = ["o", "s", "^", "D", "v", "P", "X", "h"]
# Methods are told apart by dash pattern (lines) and by a neutral shade.
METHOD_DASHES = {name: m.dash for name, m in CATALOGUE.items()}
METHOD_SHADES = {name: m.shade for name, m in CATALOGUE.items()}
METHOD_MARKERS = {name: m.marker for name, m in CATALOGUE.items()}
PHYLO_COLOUR = "#b2182b"   # phylogenetic lines in the scaling plot (one colour, method dashes)
#: Above this many groups figures list no group in the legend (one entry says
#: so) and draw the groups in a few batched artists instead of one per group.
LEGEND_MAX_GROUPS = 12
PAGE_HEIGHT = 9.0        # inches: an A4 or letter page less its margins
#: Scatter plots draw a seeded random subset of this many points above it (stated on the axes).
MAX_DRAWN_POINTS = _MAX_DRAWN_POINTS
MM = 1 / 25.4
SIZES = {"single": 85 * MM, "double": 180 * MM}
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


def styled(func):
    """Run ``func`` inside :data:`STYLE` (text sizes are fixed when artists are made)."""
    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        with matplotlib.rc_context(STYLE):
            return func(*args, **kwargs)
    return wrapper


# --------------------------------------------------------------------------
# numbers and ticks in natural units


def group_digits(text: str) -> str:
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


def plain_number(value: float, digits: int = 3) -> str:
    """``value`` with ``digits`` significant digits, never in e-notation, digits grouped."""
    if value == 0 or not math.isfinite(value):
        return "0" if value == 0 else str(value)
    k = math.floor(math.log10(abs(value)))
    decimals = max(digits - 1 - k, 0)
    text = f"{round(value, decimals):.{decimals}f}"
    return group_digits(text)


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
    text = plain_number(value, 3)
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


def log_margins(ax, margin: float) -> None:
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


def arith_formatter(value, _pos=None) -> str:
    if not math.isfinite(value):
        return ""
    if value == 0:
        return "0"
    text = f"{value:.6g}"
    if "e" in text:
        return f"{value:.1e}"
    return group_digits(text)


def group_style(i: int) -> tuple:
    """(colour, marker) of the ``i``-th group: the first eight pair colour and marker
    alike; from the ninth on, the marker moves one place further each round of colours,
    so no two of up to 64 groups look the same."""
    return PALETTE[i % len(PALETTE)], MARKERS[(i + i // len(PALETTE)) % len(MARKERS)]


def thinned_index(n: int):
    """Sorted indices of the seeded random subset of :data:`MAX_DRAWN_POINTS` of ``n``
    points a scatter plot draws, or None when all ``n`` are drawn
    (:func:`scaling.render.thinning.subset_index`, which the moments path's second
    pass uses to collect the same points)."""
    return subset_index(n, MAX_DRAWN_POINTS)


def scatter_coded(ax, x, y, codes, n_groups: int, *, total: int | None = None,
                  **kwargs) -> None:
    """Scatter with group ``codes``: one artist per group present, or, above
    :data:`LEGEND_MAX_GROUPS` groups, the points by colour in a seeded random order
    (:func:`scatter_by_colour`: no group's colour always lies on top).

    Above :data:`MAX_DRAWN_POINTS` points the subset :func:`thinned_index` is drawn,
    and a note on the axes says so.  ``total``: the arrays are that subset already of
    ``total`` points (a caller that computes values for the drawn points only).
    """
    x, y, codes = np.asarray(x), np.asarray(y), np.asarray(codes)
    n_all = len(x) if total is None else total
    keep = thinned_index(n_all) if total is None else None
    if keep is not None:   # drawing cost grows with points: a stated subsample
        x, y, codes = x[keep], y[keep], codes[keep]
    if n_all > MAX_DRAWN_POINTS:
        # on a figure of ours, figure_legend moves this note into the legend (once)
        note = ax.text(0.99, 0.03, f"{group_digits(str(MAX_DRAWN_POINTS))} of "
                       f"{group_digits(str(n_all))} points\nshown; all are fitted",
                       transform=ax.transAxes, ha="right", va="bottom", fontsize=5.5,
                       color="#555555", zorder=9, linespacing=1.1,
                       gid=f"{_THINNED_NOTE}{n_all}",
                       bbox=dict(boxstyle="square,pad=0.15", facecolor="white", alpha=0.75,
                                 edgecolor="none"))
        note.set_in_layout(False)   # a note inside the axes must not squeeze the layout
    if n_groups <= LEGEND_MAX_GROUPS:
        present = np.unique(codes)
        if len(x) < INTERLEAVE_FROM_POINTS or len(present) < 2:
            rounds = [(np.arange(len(x)), present)]
        else:   # dealt into rounds, the groups in a new order each round
            rng = np.random.default_rng(1)
            rounds = [(np.sort(part), rng.permutation(present)) for part in
                      np.array_split(rng.permutation(len(x)), INTERLEAVE_ROUNDS)]
        for part, order in rounds:
            for c in order:
                colour, marker = group_style(int(c))
                sel = part[codes[part] == c]
                ax.scatter(x[sel], y[sel], marker=marker, facecolor=colour, **kwargs)
        return
    scatter_by_colour(ax, x, y, codes % len(PALETTE), seed=1, **kwargs)


#: From this many points drawn, a scatter of a few groups deals its points into
#: :data:`INTERLEAVE_ROUNDS` rounds, one artist per group in each, the groups in a seeded
#: random order each round: where points pile up no group lies always on top (drawn
#: one group after the other, the last group drawn hid the others).
INTERLEAVE_FROM_POINTS = 1_000
INTERLEAVE_ROUNDS = 4


#: A scatter of many colours draws this share of its points (the last in its random order)
#: one by one on top, and the others by colour (see :func:`scatter_by_colour`).
SCATTER_TOP_SHARE = 0.2
#: ... the others in this many rounds.
SCATTER_ROUNDS = 2


def scatter_by_colour(ax, x, y, colours, *, seed: int, s: float | None = None,
                      edgecolor="face", linewidth: float | None = None, alpha: float = 1.0,
                      zorder: float = 2) -> list:
    """Round markers coloured ``PALETTE[colours]``, drawn in a seeded random order so that
    no colour lies always on top; returns the artists.  ``s``, ``edgecolor``,
    ``linewidth``, ``alpha``, ``zorder`` as for ``ax.scatter``.

    Where points pile up only the last drawn show: the last
    :data:`SCATTER_TOP_SHARE` of the random order are drawn one by one (one scatter with
    a colour per point).  The points under them are dealt into
    :data:`SCATTER_ROUNDS` rounds, each drawn as one artist per colour in a random
    order of the colours: an artist of one colour is stamped by the renderer
    (``draw_markers``), while a colour per point goes through Agg's path collections,
    several times slower.
    """
    x, y, colours = np.asarray(x), np.asarray(y), np.asarray(colours)
    rng = np.random.default_rng(seed)
    order = rng.permutation(len(x))
    split = len(order) - int(math.ceil(SCATTER_TOP_SHARE * len(order)))
    if s is None:   # ax.scatter's defaults
        s = matplotlib.rcParams["lines.markersize"] ** 2
    if linewidth is None:
        linewidth = matplotlib.rcParams["lines.linewidth"]
    size = math.sqrt(s)   # scatter sizes are areas in pt², markers are diameters in pt
    artists = []
    for part in np.array_split(order[:split], SCATTER_ROUNDS):
        in_part = colours[part]
        for colour in rng.permutation(len(PALETTE)):
            sel = part[in_part == colour]
            if not sel.size:
                continue
            # ax.plot, not ax.scatter: a line of markers is cheaper to make and draw;
            # its colour is given so the axes' colour cycle is left as it is
            artists += ax.plot(x[sel], y[sel], ls="none", marker="o", markersize=size,
                               color=PALETTE[colour], markerfacecolor=PALETTE[colour],
                               markeredgecolor=(PALETTE[colour] if str(edgecolor) == "face"
                                                else edgecolor),
                               markeredgewidth=linewidth,
                               alpha=alpha, zorder=zorder, gid="points")
    top = order[split:]
    if top.size:
        shades = np.asarray(PALETTE, dtype=object)[colours[top]]
        artists.append(ax.scatter(x[top], y[top], s=s, marker="o", facecolor=list(shades),
                                  edgecolor=edgecolor, linewidth=linewidth, alpha=alpha,
                                  zorder=zorder, gid="points"))
    return artists


def many_groups_handle(n_groups: int):
    """The one legend entry standing for groups too many to list."""
    return Line2D([], [], ls="none", marker="o", color="#888888", markersize=4,
                  label=f"{group_digits(str(n_groups))} groups (colours cycle; too many "
                        "to list)")

def new_figure(size: str, aspect: float) -> Figure:
    width = SIZES.get(size, SIZES["single"])
    return agg_figure(figsize=(width, width * aspect), layout="constrained")


#: gid prefix of a thinned scatter's note on its axes (the number of points follows).
_THINNED_NOTE = "thinned-note-"


def thinned_notes_to_legend(fig: Figure) -> str:
    """The notes of thinned scatters on ``fig``'s axes, removed and returned as one line
    for the legend's title ("" when no scatter is thinned): said once under the figure,
    not in every panel over the points."""
    notes = [t for ax in fig.axes for t in ax.texts
             if str(t.get_gid() or "").startswith(_THINNED_NOTE)]
    if not notes:
        return ""
    total = max(int(str(t.get_gid())[len(_THINNED_NOTE):]) for t in notes)
    for t in notes:
        t.remove()
    where = " in each panel" if len(notes) > 1 else ""
    return (f"{group_digits(str(MAX_DRAWN_POINTS))} of {group_digits(str(total))} points "
            f"shown{where} (random); all are fitted")


def figure_legend(fig: Figure, handles: list, ncol: int, **kwargs):
    """Legend below the axes; fewer columns while it is wider than the figure.  A note
    that a scatter shows a subset of the points becomes its title."""
    note = thinned_notes_to_legend(fig)
    if note:
        kwargs.update(title=note, title_fontsize=kwargs.get("fontsize",
                                                            STYLE["legend.fontsize"]))
    elif not handles:
        return None
    ncol = max(1, min(ncol, len(handles)))
    # The columns are chosen by the entries alone: a title (the subset note) as wide as
    # the figure would otherwise put every entry in one column and squeeze the panels.
    entries = {k: v for k, v in kwargs.items() if k not in ("title", "title_fontsize")}
    while ncol > 1:
        legend = fig.legend(handles=handles, loc="outside lower center", ncol=ncol,
                            **entries)
        # The legend's width depends only on its entries and fonts, not on where the
        # layout puts it: measured with the figure's renderer, no draw of the figure
        # (a draw_without_rendering here ran constrained layout once per try).
        fits = legend.get_window_extent().width <= fig.bbox.width * 0.98
        if fits and entries == kwargs:
            return legend
        legend.remove()
        if fits:
            break
        ncol -= 1
    return fig.legend(handles=handles, loc="outside lower center", ncol=ncol, **kwargs)

def agg_figure(**kwargs) -> Figure:
    """A Figure with an Agg canvas attached (no pyplot): layout and text sizes are then
    measured with the renderer that draws the PNG, which is also faster than a bare canvas."""
    fig = Figure(**kwargs)
    FigureCanvasAgg(fig)
    return fig

def save_figure(fig: Figure, target, fmt: str, dpi: int) -> None:
    """Save ``fig`` as ``fmt`` in the house style, without dates (reruns give the same file)."""
    # No creation dates in the files, so reruns give identical figures.
    meta = {"png": {"Software": None}, "pdf": {"CreationDate": None, "Producer": None},
            "svg": {"Date": None}}.get(fmt, {})
    with matplotlib.rc_context(STYLE), ticks_found_once(fig):
        engine = fig.get_layout_engine()
        laid_out = (isinstance(engine, PlaceHolderLayoutEngine)   # fixed by an earlier save
                    or (fmt == "png" and _lay_out(fig, engine, dpi)))
        if not laid_out:
            _save(fig, target, fmt, dpi, meta)
            return
        # Laid out already, as savefig would do it.  With no engine at all (the placeholder
        # "none" leaves one) savefig also skips its drawing pass without output before the
        # real one: every tick, text and collection handled once more for nothing.
        with matplotlib.rc_context(_NO_LAYOUT):
            fig.set_layout_engine(None)
        try:
            _save(fig, target, fmt, dpi, meta)
        finally:
            fig.set_layout_engine(engine)


#: zlib level of the PNG files: 3 compresses a figure (mostly white ground, a few
#: colours) to within a few per cent of the default 6, in two thirds of the time.
PNG_COMPRESSION = 3


def _save(fig: Figure, target, fmt: str, dpi: int, meta: dict) -> None:
    """``fig.savefig``; a PNG whose every pixel is opaque (a figure on its white ground)
    is written in RGB, not RGBA: the same picture, a tenth smaller, a third faster to
    compress.  Its file otherwise has what savefig writes (resolution; no text chunk)."""
    png = {"pil_kwargs": {"compress_level": PNG_COMPRESSION}} if fmt == "png" else {}
    if fmt != "png" or matplotlib.rcParams["savefig.bbox"] == "tight":   # cropped: savefig
        fig.savefig(target, format=fmt, dpi=dpi, metadata=meta, **png)
        return
    buf = io.BytesIO()
    fig.savefig(buf, format="rgba", dpi=dpi)   # the pixels savefig's PNG would hold
    raw = buf.getbuffer()
    width = int(fig.get_figwidth() * dpi)
    if not width or len(raw) % (4 * width):   # not the size expected: let savefig write it
        fig.savefig(target, format=fmt, dpi=dpi, metadata=meta, **png)
        return
    image = Image.frombuffer("RGBA", (width, len(raw) // (4 * width)), raw, "raw", "RGBA", 0, 1)
    if np.frombuffer(raw, dtype=np.uint8)[3::4].min() == 255:
        image = image.convert("RGB")
    info = PngInfo()
    for key, value in meta.items():
        if value is not None:
            info.add_text(key, value)
    image.save(target, format="png", dpi=(dpi, dpi), pnginfo=info,
               compress_level=PNG_COMPRESSION)


@contextlib.contextmanager
def ticks_found_once(fig: Figure):
    """Within this block each axis of ``fig`` finds its ticks (locations, labels, those in
    view) once per view interval and axes size, not again at every measurement: a save
    asks for them about fifteen times per axis (the layout's two passes measure the
    tick labels, spines, axis labels and titles; the draw once more), each time
    running the locator, the formatter and a scale transform per tick.  The ticks
    found depend only on what the key holds, so the figure drawn is the same."""
    axes = [axis for ax in fig.axes for axis in (ax.xaxis, ax.yaxis)
            if "_update_ticks" not in vars(axis)]
    for axis in axes:
        axis._update_ticks = _tick_memo(axis, axis._update_ticks)
    try:
        yield
    finally:
        for axis in axes:
            vars(axis).pop("_update_ticks", None)


def _tick_memo(axis, update):
    """``axis._update_ticks`` remembered per state of everything it reads."""
    found: dict = {}

    def remembered():
        key = (tuple(axis.get_view_interval()), axis.axes.bbox.bounds, id(axis._scale),
               id(axis.major.locator), id(axis.major.formatter), id(axis.minor.locator),
               id(axis.minor.formatter), id(vars(axis).get("majorTicks")),
               id(vars(axis).get("minorTicks")), repr(axis._major_tick_kw),
               repr(axis._minor_tick_kw))
        ticks = found.get(key)
        if ticks is None:
            ticks = found[key] = update()
        return list(ticks)
    return remembered


#: ``set_layout_engine(None)`` falls back on these settings: off, so it leaves no engine.
_NO_LAYOUT = {"figure.autolayout": False, "figure.constrained_layout.use": False}


def _lay_out(fig: Figure, engine, dpi: int) -> bool:
    """Run ``fig``'s layout engine at the PNG's resolution, as ``savefig`` does; True when
    it ran.  ``savefig`` runs it inside a whole draw of the figure without output (every
    tick, text and path of a thousand lines handled once more) before the real draw."""
    if (engine is None or isinstance(engine, PlaceHolderLayoutEngine) or not fig.axes
            or not isinstance(fig.canvas, FigureCanvasAgg)):
        return False
    with cbook._setattr_cm(fig, dpi=dpi):   # the renderer savefig's layout uses
        try:
            engine.execute(fig)
        except ValueError:   # as Figure.draw: the layout is then left as it is
            pass
    return True



# --------------------------------------------------------------------------
# text that must fit: measured with the renderer that draws the figure


def lay_out_now(fig: Figure):
    """Run ``fig``'s layout engine (if any) now and return its renderer, so positions and
    text extents can be measured before the figure is saved (the save lays it out again,
    the same way, at the output resolution: text in points scales with the axes)."""
    renderer = fig.canvas.get_renderer()
    engine = fig.get_layout_engine()
    if engine is not None and not isinstance(engine, PlaceHolderLayoutEngine) and fig.axes:
        try:
            engine.execute(fig)
        except ValueError:   # as Figure.draw: the layout is then left as it is
            pass
    return renderer


def wrap_to_width(artist, right: float, renderer) -> None:
    """Re-wrap a text artist's words onto more lines until its right edge (display
    pixels) lies left of ``right``; a single word wider than that stays as it is.
    Only plain spaces break lines (a thin space inside "1 000" never does)."""
    words = [w for w in artist.get_text().replace("\n", " ").split(" ") if w]
    if artist.get_window_extent(renderer).x1 <= right or len(words) < 2:
        return
    width = len(" ".join(words))
    while width > 1:
        width -= 1
        artist.set_text(textwrap.fill(" ".join(words), width, break_on_hyphens=False))
        if artist.get_window_extent(renderer).x1 <= right:
            return


def spread_apart(centres, height: float, low: float, high: float) -> np.ndarray:
    """Positions near ``centres`` (sorted ascending) at least ``height`` apart and within
    ``low`` .. ``high`` where there is room (else from ``low`` upward).

    One pass up pushes each position clear of the one below, one pass down pulls
    them under ``high``, a last pass up keeps them above ``low``.
    """
    pos = np.asarray(centres, dtype=float).copy()
    n = len(pos)
    for i in range(1, n):
        pos[i] = max(pos[i], pos[i - 1] + height)
    if n:
        pos[-1] = min(pos[-1], high)
    for i in range(n - 2, -1, -1):
        pos[i] = min(pos[i], pos[i + 1] - height)
    if n:
        pos[0] = max(pos[0], low)
    for i in range(1, n):
        pos[i] = max(pos[i], pos[i - 1] + height)
    return pos
