"""The run's report: one self-contained ``report.html``, ``summary.md`` and ``fits.tex``.

The report renders results; it computes nothing.  :func:`build_report`
turns a :class:`~scaling.run.pipeline.RunResult` into a small content model (a
list of :class:`Section` holding paragraphs, lists, tables, images and
preformatted text, all as raw strings and numbers); :func:`render_html` and
:func:`render_markdown` write that one model out, each escaping every string
exactly once on the way (``html.escape`` for HTML; Markdown and LaTeX
escaping for the others).  Numbers are rounded only when rendered.

The HTML file holds everything it shows: figures as base64 PNG data URIs,
CSS inline, no scripts, and no external addresses of any kind; links point
only to the files written beside it.
"""

from __future__ import annotations

import base64
import html
import math
import re
from itertools import repeat
from pathlib import Path

import numpy as np
import pandas as pd

from .answer import headline_of
from .figure_kinds import FIGURES
from .figure_worker import report_png
from . import report_parts   # its TABLE_MAX_ROWS is the one cap, read when a report is built
from .report_parts import (Block, Section, _bounded,  # noqa: F401
                           _headline_section, _interval_text, _manifest_section, _num,
                           _summary_section)
from .prediction_words import extrapolation_words, prediction_notes
from .wording import (CAUTION, ancestry_caution, unit_text, clean_timestamp, dose_caution,
                      at_floor, calibrated_p_text, dose_scaling_applies, format_p, mechanism_applies,
                      mechanism_caution, method_label, units_share_ancestry)

__all__ = ["write_report", "prepare_report", "build_report", "render_html", "render_markdown",
           "render_fits_tex", "Section", "Block", "latex_escape", "markdown_escape",
           "format_value", "format_values"]

# Tables longer than this are folded (<details>) in the HTML report.
FOLD_ROWS = 30

GROUP_TEST_WORDS = {
    "slopes_equal": ("a common slope (exponent) for all groups",
                     "the groups' slopes differ"),
    "intercepts_equal": ("a common elevation (intercept) given the common slope",
                         "the groups' lines differ in elevation"),
    "shift_along_axis": ("no shift of the groups along the common line",
                         "the groups are shifted along the common line"),
}


# --------------------------------------------------------------------------
# content model


# --------------------------------------------------------------------------
# rendering numbers


_P_COLUMNS = re.compile(r"^(p|p_value|p_adjusted|p_adj|p_.*value.*|.*_p)$")
_INT_COLUMNS = {"n", "row", "df", "rows", "n_rows", "count"}


def format_value(value, column: str = "") -> str:
    """Text of one table cell: p-values as people write them, others 4 significant digits.

    Integer columns (n, row, df) as integers; booleans yes/no; missing as "–".
    Large numbers keep all their integer digits (never e-notation below 10^9).
    """
    if value is None or value is pd.NA:
        return "–"
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        v = float(value)
        if not math.isfinite(v):
            return "–" if math.isnan(v) else ("∞" if v > 0 else "−∞")
        if _P_COLUMNS.match(column or ""):
            return format_p(v)
        if column in _INT_COLUMNS and v == round(v):
            return str(int(round(v)))
        if v == 0:
            return "0"
        k = math.floor(math.log10(abs(v)))
        if k >= 9 or k < -4:
            return f"{v:.3e}"
        decimals = max(3 - k, 0)
        text = f"{v:.{decimals}f}"
        if "." in text:
            text = text.rstrip("0").rstrip(".")
        return text
    return str(value)


def format_values(values, column: str = "") -> list:
    """:func:`format_value` of every value of a column, the numbers formatted a few
    array passes at a time (the same text, value for value).

    A float column is split by what :func:`format_value` does with each value
    (missing or infinite, p-value, whole number of an integer column, zero, e-notation,
    or the number of decimals that gives 4 significant digits) and each part is
    written by one ``map`` of one format; other columns go value by value.
    """
    v = values.to_numpy() if isinstance(values, pd.Series) else np.asarray(values)
    if v.dtype.kind in "iu":
        return list(map(str, v.tolist()))
    if v.dtype.kind != "f":
        return [format_value(x, column) for x in (v.tolist() if v.dtype.kind == "b" else v)]
    v = v.astype(float, copy=False)
    floats = v.tolist()
    out = np.full(len(floats), "", dtype=object)   # filled a part at a time, in one step

    def put(mask, texts):
        where = np.flatnonzero(mask)
        if where.size:
            cells = np.empty(where.size, dtype=object)
            cells[:] = list(texts)
            out[where] = cells

    def pick(mask):
        return [floats[i] for i in np.flatnonzero(mask).tolist()]

    finite = np.isfinite(v)
    if not finite.all():
        put(~finite, ["–" if math.isnan(x) else ("∞" if x > 0 else "−∞")
                      for x in pick(~finite)])
    if _P_COLUMNS.match(column or ""):
        put(finite, map(format_p, pick(finite)))
        return out.tolist()
    left = finite
    if column in _INT_COLUMNS:
        whole = finite & (v == np.round(v))
        put(whole, (str(int(round(x))) for x in pick(whole)))
        left = finite & ~whole
    zero = left & (v == 0)
    put(zero, ["0"] * int(zero.sum()))
    left = left & ~zero
    a = np.abs(np.where(left, v, 1.0))
    with np.errstate(divide="ignore", invalid="ignore"):
        lg = np.log10(a)
    k = np.floor(lg)
    # near a power of ten numpy's log10 may differ from math.log10 in the last bit
    for i in np.flatnonzero(left & (np.abs(lg - np.round(lg)) < 1e-9)).tolist():
        k[i] = math.floor(math.log10(abs(floats[i])))
    sci = left & ((k >= 9) | (k < -4))
    put(sci, map("{:.3e}".format, pick(sci)))
    left = left & ~sci
    decimals = np.where(left, np.maximum(3 - k, 0), -1)
    for d in np.unique(decimals[left]).tolist():
        part = decimals == d
        texts = map(f"{{:.{int(d)}f}}".format, pick(part))
        # t.rstrip("0").rstrip(".") of each text, by two maps of str.rstrip
        put(part, map(str.rstrip, map(str.rstrip, texts, repeat("0")), repeat("."))
            if d > 0 else texts)
    return out.tolist()


def _group_test_sentences(table: pd.DataFrame, alpha: float) -> list:
    out = []
    for _, r in table.iterrows():
        test = str(r.get("test", ""))
        method = (("phylogenetic " if r.get("scope", "") == "phylo" else "")
                  + method_label(str(r.get("method", ""))))
        p = r.get("p_value", np.nan)
        null, alt = GROUP_TEST_WORDS.get(test, (f"the null hypothesis of {test}",
                                                f"{test} is rejected"))
        stat = r.get("statistic", np.nan)
        df = r.get("df", np.nan)
        detail = []
        if isinstance(stat, (int, float, np.floating)) and np.isfinite(stat):
            detail.append(f"statistic {_num(stat)}")
        if isinstance(df, (int, float, np.floating)) and np.isfinite(df):
            detail.append(f"df = {format_value(df, 'df')}")
        if isinstance(p, (int, float, np.floating)) and np.isfinite(p):
            detail.append(calibrated_p_text(float(p), str(r.get("p_method", ""))))
            verdict = (f"evidence that {alt}" if p < alpha
                       else f"consistent with {null}")
        else:
            verdict = "not tested"
        common = r.get("common_slope", np.nan)
        extra = ""
        if (test == "slopes_equal" and isinstance(common, (int, float, np.floating))
                and np.isfinite(common)):
            extra = f" Common slope {_num(common)}."
        out.append(f"{method} {test.replace('_', ' ')}: {verdict} "
                   f"({', '.join(detail)}).{extra}")
    return out


def _data_section(result) -> Section:
    cfg = result.config
    data = result.data
    pts = data.points
    units = data.units or {}
    blocks = []
    large = (result.manifest or {}).get("large_data", {})   # counted, not listed, rows
    facts = [
        f"Input file: {Path(str(cfg.data.file)).name}",
        f"Rows read: {data.n_read}",
        f"Rows dropped: {large.get('rows_dropped', len(result.dropped))}",
        f"Points fitted: {large.get('points_fitted', len(pts))}",
        f"x: {cfg.data.x}" + (f" ({unit_text(units['x'])})" if units.get("x") else ""),
        f"y: {cfg.data.y}" + (f" ({unit_text(units['y'])})" if units.get("y") else ""),
        f"Log base: {cfg.model.log_base}; methods: "
        f"{', '.join(method_label(m) for m in cfg.model.methods)}; confidence "
        f"{100 * cfg.model.confidence:g}%",
    ]
    if getattr(data, "averaged_within", None):
        facts.append(f"Each point is the mean (of logs) of the rows of one "
                     f"{data.averaged_within} ({getattr(data, 'n_rows_used', '')} rows used)")
    blocks.append(Block(kind="ul", items=tuple(facts)))
    means = (result.tables or {}).get("group_means")
    if "group" in pts.columns or (large and means is not None):
        counts = (pts.groupby("group", sort=True).size() if "group" in pts.columns
                  else means.set_index("group")["n"])
        blocks.append(Block(kind="p", text=f"Groups ({cfg.data.group}): " + "; ".join(
            f"{g} (n = {n})" for g, n in counts.items())))
    dropped = result.dropped
    if dropped is not None and len(dropped):
        summary = (dropped.groupby("reason", sort=False)["row"]
                   .agg(lambda rows: ", ".join(str(int(v)) for v in list(rows)[:12]
                                               if pd.notna(v))   # tree tips: no row
                        + (" …" if len(rows) > 12 else ""))
                   .reset_index())
        summary.insert(1, "rows", dropped.groupby("reason", sort=False).size().to_numpy())
        summary.columns = ["reason", "rows", "row numbers"]
        blocks.append(Block(kind="p", text="Rows dropped, by reason (row 1 is the first line "
                                           "after the header; all are listed in "
                                           "dropped_rows.csv):"))
        blocks.append(Block(kind="table", frame=summary, name="dropped rows by reason"))
    elif large.get("rows_dropped"):
        blocks.append(Block(kind="p", text="Rows dropped, by reason (a row with two problems "
                                           "counts under both; in dropped_counts.csv):"))
        blocks.append(Block(kind="table", frame=result.tables["dropped_counts"],
                            name="dropped rows by reason"))
    else:
        blocks.append(Block(kind="p", text="No rows were dropped."))
    return Section(title="Data", blocks=blocks, anchor="data")


def _figure_blocks(result, folder: Path, written: list) -> list:
    blocks = []
    written_set = {Path(p).as_posix() for p in written}
    for kind in result.config.figures.kinds:
        rel = f"figures/{kind}.png"
        if rel in written_set and (folder / rel).exists():
            png = (folder / rel).read_bytes()
            path = rel
        else:   # drawn with the figures (no png format), else here; None: left out
            png = report_png(folder, kind, lambda kind=kind: _draw_png(result, kind))
            if png is None:
                continue
            path = ""
        blocks.append(Block(kind="img", png=png, path=path, name=kind,
                            text=FIGURES[kind].caption if kind in FIGURES else kind))
    rel = "figures/group_exponents.png"   # summary across many groups (scaling.run.moments_path)
    if rel in written_set and (folder / rel).exists():
        blocks.append(Block(kind="img", png=(folder / rel).read_bytes(), path=rel,
                            name="group_exponents", text=FIGURES["group_exponents"].caption))
    return blocks


def _draw_png(result, kind: str) -> bytes:
    from .figures import figure_png   # matplotlib: only for a figure not drawn yet
    return figure_png(result, kind)


def _fits_display(result) -> pd.DataFrame:
    """The fits table as shown: intervals as one text cell, the line in natural units."""
    fits = result.fits.head(report_parts.TABLE_MAX_ROWS)   # bounded; build_report notes the rest
    rows = []
    for r in fits.to_dict(orient="records"):
        fit = result.line_fits.get((r["scope"], r["group"], r["method"]))
        eq = (f"{_num(fit.a)}·x^{_num(fit.slope)}"
              if fit is not None and fit.log_base is not None and np.isfinite(fit.slope)
              else "–")
        row = {"scope": r["scope"], "group": r["group"], "method": method_label(str(r["method"])),
               "n": r["n"], "b": r["slope"], "b interval": _interval_text(
                   r["slope_low"], r["slope_high"], r.get("slope_gap_low", np.nan),
                   r.get("slope_gap_high", np.nan)),
               "log a": r["intercept"], "log a interval": _interval_text(
                   r["intercept_low"], r["intercept_high"]),
               "y = a·x^b": eq, "r2": r["r2"], "resid_sd": r.get("resid_sd", np.nan)}
        if "percent_see" in r:
            row["%SEE"] = r["percent_see"]
        row["note"] = r.get("note", "")
        rows.append(row)
    return pd.DataFrame(rows)


def build_report(result, folder: Path | None = None, written=(), *, head=None) -> list:
    """The report's content as a list of :class:`Section` (no escaping, no rounding).

    ``head``: the run's Answer (:func:`~scaling.render.answer.headline_of`) when made
    already."""
    if getattr(result, "multi_fit", None) is not None:   # several predictors: their own
        from .report_several import build_several_report
        return build_several_report(result, folder, written)
    folder = Path(folder) if folder is not None else Path(".")
    written = list(written or ())
    cfg = result.config
    conf = cfg.model.confidence
    tables = {k: v for k, v in (result.tables or {}).items()
              if not str(k).startswith("_") and isinstance(v, pd.DataFrame)}
    sections = []

    head = head if head is not None else headline_of(result)
    sections.append(_headline_section(head))
    # the per-method exponent-test bullets are replaced by the one exponent table
    sections.append(_summary_section(
        tuple(m.strip() for m in result.messages if not m.startswith("  The ")),
        result.warnings))
    sections.append(_data_section(result))
    sections.append(Section(title="Figures", anchor="figures",
                            blocks=_figure_blocks(result, folder, written)))

    fit_blocks = [Block(kind="p", text=(
        f"b is the exponent of y = a·x^b and log a the intercept on log{cfg.model.log_base} "
        f"scales, each with its {100 * conf:g}% confidence interval; a is the median of y at "
        "x = 1; resid_sd is the SD of the residuals on the log scale. Every column, unrounded, "
        "is in fits.csv."))]
    fit_blocks.append(Block(kind="table", frame=_fits_display(result), name="fits"))
    if len(result.fits) > report_parts.TABLE_MAX_ROWS:
        fit_blocks.append(Block(kind="p", text=(
            f"First {report_parts.TABLE_MAX_ROWS} of {len(result.fits):,} fits shown; every fit is in "
            "fits.csv.")))
    sections.append(Section(title="Fits", blocks=fit_blocks, anchor="fits"))

    # one sentence per test was made here only to ask whether there is any test
    sentences = result.slope_tests is not None and len(result.slope_tests) > 0
    test_blocks = []
    if sentences:   # one table of exponent tests (fit x hypothesis) instead of bullets
        test_blocks.append(Block(kind="table", frame=head.exponent_table,
                                 name="exponent tests (every fit in slope_tests.csv)"))
    if not sentences:
        test_blocks.append(Block(kind="p", text="No hypothesised exponents were given."))
    if result.slope_tests is not None and len(result.slope_tests):
        test_blocks.append(Block(kind="table", frame=result.slope_tests, name="slope_tests"))
    if sentences and mechanism_applies(result.slope_tests):   # it names 3/4 and 2/3
        test_blocks.append(Block(kind="p", text=mechanism_caution()))
    # species or higher taxa, or a tree (the rule in wording); with a tree the fits correct it
    if units_share_ancestry(cfg) and cfg.data.tree is None:
        test_blocks.append(Block(kind="p", text=ancestry_caution()))
    sections.append(Section(title="Exponent tests", blocks=test_blocks, anchor="tests"))

    group_blocks = []
    if "group_tests" in tables:
        group_blocks.append(Block(kind="ul", items=tuple(
            _group_test_sentences(tables["group_tests"], 1 - conf))))
        group_blocks.append(Block(kind="table", frame=tables["group_tests"],
                                  name="group_tests"))
    for test, matrix in head.matrices.items():
        group_blocks.append(Block(kind="p", text=(
            f"Pairwise {test.replace('_', ' ')} ({method_label(head.primary)}): "
            f"Holm-adjusted p, * where p <= {1 - conf:g}; every pair and method in "
            "pairwise_tests.csv.")))
        group_blocks.append(Block(kind="table", frame=matrix.reset_index(),
                                  name=f"pairwise {test}"))
    for name, intro in (("pairwise_tests", "Every pair, test and method:"),
                        ("group_means", "Group means on the log scale:")):
        if name in tables:
            group_blocks.append(Block(kind="p", text=intro))
            group_blocks.append(Block(kind="table", frame=tables[name], name=name))
    if group_blocks:
        sections.append(Section(title="Group comparisons", blocks=group_blocks,
                                anchor="groups"))

    pred_blocks = []
    for name, intro in (("predictions", "Predicted y at the requested x"),
                        ("inverse_predictions", "Estimated x from the requested y")):
        if name in tables:
            t = tables[name]
            flags = tuple(bool(v) for v in t["extrapolated"]) if "extrapolated" in t else ()
            n_ext = sum(flags)
            pred_blocks.append(Block(kind="p", text=intro + "." + extrapolation_words(n_ext)))
            pred_blocks.append(Block(kind="table", frame=t, name=name, highlight=flags))
    if pred_blocks:
        pred_blocks += [Block(kind="p", text=t) for t in (
            prediction_notes(cfg, tables, result.data.units or {},
                             slopes_differ=head.line == "groups")
            + ([dose_caution()] if dose_scaling_applies(cfg) else []))]
        sections.append(Section(title="Predictions", blocks=pred_blocks,
                                anchor="predictions"))

    if "diagnostics" in tables:
        sections.append(Section(title="Diagnostics", anchor="diagnostics", blocks=[
            Block(kind="table", frame=tables["diagnostics"], name="diagnostics")]))
    handled = {"group_tests", "pairwise_tests", "group_means", "predictions",
               "inverse_predictions", "diagnostics"}
    others = [Block(kind="table", frame=t, name=k) for k, t in tables.items()
              if k not in handled]
    if others:
        sections.append(Section(title="Further tables", blocks=others, anchor="more"))

    caution = [Block(kind="caution", text=CAUTION)]
    sections.append(Section(title="Cautions", blocks=caution, anchor="cautions"))

    files = sorted({Path(p).as_posix() for p in written} |
                   {"report.html", "summary.md", "fits.tex", "results.json"})
    sections.append(Section(title="Files", anchor="files",
                            blocks=[Block(kind="links", items=tuple(files))]))
    sections.append(_manifest_section(result))
    return _bounded(sections)


# --------------------------------------------------------------------------
# HTML


CSS = """
:root { --ink: #1d232b; --muted: #5b6470; --rule: #c9ced6; --band: #f4f6f8;
        --flag: #fff1d6; --flag-edge: #b86e00; --accent: #0b5d8f; }
* { box-sizing: border-box; }
body { margin: 0; color: var(--ink); background: #fff;
       font: 15px/1.5 "DejaVu Sans", "Segoe UI", Helvetica, Arial, sans-serif; }
main { max-width: 66rem; margin: 0 auto; padding: 1.5rem 1.5rem 4rem; }
header { border-bottom: 3px solid var(--ink); margin-bottom: 1rem; }
h1 { font-size: 1.6rem; margin: 0.2rem 0 0.4rem; line-height: 1.25; }
.stamp { color: var(--muted); font-size: 0.85rem; margin: 0 0 0.6rem; }
nav { font-size: 0.85rem; margin: 0.4rem 0 1rem; }
nav a { color: var(--accent); margin-right: 0.9rem; text-decoration: none; }
h2 { font-size: 1.15rem; margin: 2.2rem 0 0.6rem; padding-bottom: 0.15rem;
     border-bottom: 1px solid var(--rule); }
ul { padding-left: 1.3rem; }
li { margin: 0.15rem 0; }
.tablewrap { overflow-x: auto; margin: 0.6rem 0 1rem; }
table { border-collapse: collapse; font-size: 0.8rem; font-variant-numeric: tabular-nums; }
caption { text-align: left; font-weight: 600; color: var(--muted); padding-bottom: 0.2rem; }
th, td { padding: 0.2rem 0.55rem; border-bottom: 1px solid var(--rule); white-space: nowrap; }
th { text-align: left; border-bottom: 1.5px solid var(--ink); font-weight: 600; }
td.num { text-align: right; }
tbody tr:nth-child(even) { background: var(--band); }
tr.flag, tr.flag:nth-child(even) { background: var(--flag); }
tr.flag td:first-child { box-shadow: inset 3px 0 0 var(--flag-edge); }
.flagnote { color: var(--flag-edge); font-weight: 600; }
figure { margin: 1rem 0 1.6rem; }
figure img { display: block; width: 100%; max-width: 34rem; height: auto;
             border: 1px solid var(--rule); }
figure.wide img { max-width: 40rem; }
figcaption { font-size: 0.85rem; color: var(--muted); max-width: 40rem; margin-top: 0.3rem; }
pre { background: var(--band); padding: 0.7rem 0.9rem; overflow-x: auto; font-size: 0.8rem;
      border-left: 3px solid var(--rule); }
.caution { border-left: 4px solid var(--flag-edge); background: var(--flag);
           padding: 0.6rem 0.9rem; }
a { color: var(--accent); }
details { margin: 0.4rem 0 1rem; }
summary { cursor: pointer; color: var(--accent); }
@media print { nav { display: none; } main { max-width: none; } }
"""


def _esc(text) -> str:
    return html.escape(str(text), quote=True)


def _is_num_column(series: pd.Series) -> bool:
    return pd.api.types.is_numeric_dtype(series) and not pd.api.types.is_bool_dtype(series)


def _column_decimals(series: pd.Series, column: str):
    """Fixed decimals for a float column (4 significant digits at its typical size).

    None (format each value alone) for p-values, integer columns, or values
    spanning more than two decades.
    """
    if (_P_COLUMNS.match(column) or column in _INT_COLUMNS
            or not pd.api.types.is_float_dtype(series)):
        return None
    v = np.abs(series.to_numpy(dtype=float))
    v = v[np.isfinite(v)]
    if v.size and np.all(v == np.round(v)) and v.max() < 1e9:
        return 0                      # whole numbers stored as floats (df, counts)
    v = v[v > 0]
    if not v.size or np.all(v == v[0]):
        return None                   # empty or constant (e.g. confidence): as is
    if v.max() / v.min() > 100:
        return None
    k = math.floor(math.log10(float(np.median(v))))
    if k >= 9 or k < -4:
        return None
    return int(min(max(3 - k, 0), 6))


#: p columns that inherit "≤" from a ``p_value`` at the floor of its draws (``p_method``).
_FLOOR_P_COLUMNS = ("p_value", "p_adjusted")


def _floor_rows(frame: pd.DataFrame) -> np.ndarray:
    """Rows whose ``p_value`` sits at the floor of its resampling draws."""
    if "p_method" not in frame.columns or "p_value" not in frame.columns:
        return np.zeros(len(frame), dtype=bool)
    return at_floor(pd.to_numeric(frame["p_value"], errors="coerce").to_numpy(float),
                    frame["p_method"].tolist())


def _cell(value, column: str, decimals) -> str:
    if (decimals is None or not isinstance(value, (float, np.floating))
            or not math.isfinite(float(value))):
        return format_value(value, column)
    return f"{float(value):.{decimals}f}"


def _html_table(block: Block) -> str:
    frame = block.frame
    cols = list(frame.columns)
    numeric = {c: _is_num_column(frame[c]) for c in cols}
    decimals = {c: _column_decimals(frame[c], str(c)) for c in cols}
    head = "".join(f"<th scope=\"col\">{_esc(c)}</th>" for c in cols)
    rows = []
    flags = block.highlight or ()
    floor = _floor_rows(frame)
    for i, values in enumerate(frame.itertuples(index=False, name=None)):
        flagged = i < len(flags) and flags[i]
        cells = []
        for c, v in zip(cols, values):
            cls = " class=\"num\"" if numeric[c] else ""
            text = _esc(_cell(v, str(c), decimals[c]))
            if floor[i] and c in _FLOOR_P_COLUMNS:
                text = f"≤ {text}"
            if flagged and c == "extrapolated":
                text = f"<span class=\"flagnote\">{text} (extrapolated)</span>"
            cells.append(f"<td{cls}>{text}</td>")
        attr = " class=\"flag\"" if flagged else ""
        rows.append(f"<tr{attr}>{''.join(cells)}</tr>")
    caption = f"<caption>{_esc(block.name)}</caption>" if block.name else ""
    return (f"<div class=\"tablewrap\"><table data-table=\"{_esc(block.name)}\">{caption}"
            f"<thead><tr>{head}</tr></thead><tbody>{''.join(rows)}</tbody></table></div>")


def _html_block(block: Block) -> str:
    if block.kind == "p":
        return f"<p>{_esc(block.text)}</p>"
    if block.kind == "ul":
        return "<ul>" + "".join(f"<li>{_esc(t)}</li>" for t in block.items) + "</ul>"
    if block.kind == "table":
        table = _html_table(block)
        if block.frame is not None and len(block.frame) > FOLD_ROWS and not any(block.highlight):
            # Long tables stay in the file but folded, so the report reads top-down;
            # tables with flagged rows (extrapolations) always stay open.
            return (f"<details class=\"table\"><summary>{_esc(block.name)}: "
                    f"{len(block.frame)} rows (click to show)</summary>{table}</details>")
        return table
    if block.kind == "img":
        data = base64.b64encode(block.png).decode("ascii")
        wide = " class=\"wide\"" if block.name == "residuals" else ""
        link = (f" <a href=\"{_esc(block.path)}\">{_esc(block.path)}</a>"
                if block.path else "")
        return (f"<figure{wide}><img alt=\"{_esc(block.name)} figure\" "
                f"src=\"data:image/png;base64,{data}\">"
                f"<figcaption>{_esc(block.text)}{link}</figcaption></figure>")
    if block.kind == "pre":
        return f"<pre>{_esc(block.text)}</pre>"
    if block.kind == "details":
        return (f"<details><summary>{_esc(block.text)}</summary><ul>"
                + "".join(f"<li>{_esc(t)}</li>" for t in block.items) + "</ul></details>")
    if block.kind == "links":
        return "<ul>" + "".join(f"<li><a href=\"{_esc(p)}\">{_esc(p)}</a></li>"
                                for p in block.items) + "</ul>"
    if block.kind == "caution":
        return f"<p class=\"caution\">{_esc(block.text)}</p>"
    raise ValueError(f"unknown block kind {block.kind!r}")


def _clean_stamp(iso) -> str:
    return clean_timestamp(iso)


def render_html(result, sections: list) -> str:
    """The whole report as one HTML document (every string escaped here)."""
    title = result.config.title or "Scaling analysis"
    man = result.manifest or {}
    stamp = " · ".join(s for s in (
        f"scaling {man.get('scaling_version', '')}".strip(),
        f"created {_clean_stamp(man['created_utc'])}" if man.get("created_utc") else "")
        if s)
    nav = "".join(f"<a href=\"#{_esc(s.anchor)}\">{_esc(s.title)}</a>"
                  for s in sections if s.anchor)
    body = []
    for s in sections:
        inner = "".join(_html_block(b) for b in s.blocks)
        body.append(f"<section id=\"{_esc(s.anchor)}\"><h2>{_esc(s.title)}</h2>{inner}"
                    "</section>")
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
            "<meta name=\"referrer\" content=\"no-referrer\">"
            f"<title>{_esc(title)}</title><style>{CSS}</style></head><body><main>"
            f"<header><h1>{_esc(title)}</h1><p class=\"stamp\">{_esc(stamp)}</p></header>"
            f"<nav>{nav}</nav>{''.join(body)}</main></body></html>\n")


# --------------------------------------------------------------------------
# Markdown


_MD_SPECIAL = re.compile(r"([\\`*_\[\]{}#|!])")


#: What Markdown would read as raw HTML: a tag (``<`` before a letter, ``/``, ``!`` or ``?``)
#: or an entity.  Only these are escaped, so "p < 0.0001" stays readable as plain text.
_MD_TAG = re.compile(r"<[A-Za-z/!?][^<>]*>?")
_MD_ENTITY = re.compile(r"&(?=#?[A-Za-z0-9]+;)")


def markdown_escape(text) -> str:
    """Escape Markdown syntax and HTML in ``text`` (one line; pipes escaped for tables)."""
    text = str(text).replace("\r", " ").replace("\n", " ")
    text = _MD_ENTITY.sub("&amp;", text)
    text = _MD_TAG.sub(lambda m: html.escape(m.group(0), quote=False), text)
    return _MD_SPECIAL.sub(r"\\\1", text)


#: summary.md shows tables up to this many rows; longer ones are linked to their CSV
#: (report.html shows them all, folded).
MD_MAX_ROWS = 12


def _md_table(block: Block) -> str:
    frame = block.frame
    if len(frame) > MD_MAX_ROWS:
        if re.fullmatch(r"\w+", block.name) and not block.csv:
            return (f"*{markdown_escape(block.name)}*: {len(frame)} rows, in "
                    f"[{block.name}.csv]({block.name}.csv) (and in report.html).")
        return f"*{markdown_escape(block.name)}*: {len(frame)} rows, in report.html."
    cols = [str(c) for c in frame.columns]
    lines = ["| " + " | ".join(markdown_escape(c) for c in cols) + " |",
             "|" + "|".join("---:" if _is_num_column(frame[c]) else "---"
                            for c in frame.columns) + "|"]
    flags = block.highlight or ()
    decimals = {c: _column_decimals(frame[c], c) for c in frame.columns}
    floor = _floor_rows(frame)
    for i, values in enumerate(frame.itertuples(index=False, name=None)):
        cells = []
        for c, v in zip(cols, values):
            text = markdown_escape(_cell(v, c, decimals[c]))
            if floor[i] and c in _FLOOR_P_COLUMNS:
                text = f"≤ {text}"
            if i < len(flags) and flags[i] and c == "extrapolated":
                text = f"**{text} (extrapolated)**"
            cells.append(text)
        lines.append("| " + " | ".join(cells) + " |")
    title = f"*{markdown_escape(block.name)}*\n\n" if block.name else ""
    return title + "\n".join(lines)


def _md_block(block: Block) -> str:
    if block.kind == "p":
        return markdown_escape(block.text)
    if block.kind == "ul":
        return "\n".join(f"- {markdown_escape(t)}" for t in block.items)
    if block.kind == "details":
        return (markdown_escape(block.text) + ":\n\n"
                + "\n".join(f"- {markdown_escape(t)}" for t in block.items))
    if block.kind == "table":
        return _md_table(block)
    if block.kind == "img":
        if block.path:
            return (f"![{markdown_escape(block.name)} figure]({block.path})\n\n"
                    f"{markdown_escape(block.text)}")
        return f"({markdown_escape(block.name)} figure: see report.html)"
    if block.kind == "pre":
        fence = "````" if "```" in block.text else "```"
        return f"{fence}yaml\n{block.text.rstrip()}\n{fence}"
    if block.kind == "links":
        return "\n".join(f"- [{markdown_escape(p)}]({p})" for p in block.items)
    if block.kind == "caution":
        return "> " + markdown_escape(block.text)
    raise ValueError(f"unknown block kind {block.kind!r}")


def render_markdown(result, sections: list) -> str:
    """The report as Markdown (figures linked, not embedded)."""
    title = result.config.title or "Scaling analysis"
    parts = [f"# {markdown_escape(title)}"]
    for s in sections:
        parts.append(f"## {markdown_escape(s.title)}")
        parts += [_md_block(b) for b in s.blocks]
    return "\n\n".join(parts) + "\n"


# --------------------------------------------------------------------------
# LaTeX


_LATEX = {"\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#",
          "_": r"\_", "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}",
          "^": r"\textasciicircum{}", "<": r"\textless{}", ">": r"\textgreater{}"}
_LATEX_RE = re.compile("|".join(re.escape(k) for k in _LATEX))


def latex_escape(text) -> str:
    """Escape LaTeX special characters (\\ & % $ # _ { } ~ ^ < >) in ``text``."""
    return _LATEX_RE.sub(lambda m: _LATEX[m.group(0)], str(text))


def _tex_num(v, column: str) -> str:
    text = format_value(v, column)
    if text == "–":
        return "--"
    text = text.replace("−", "-")
    if text.startswith("-"):   # a math minus: a bare "-" sets as a hyphen beside the dash
        return "$-$" + latex_escape(text[1:])
    return latex_escape(text)


def _tex_interval(lo, hi, column: str) -> str:
    """``lo--hi``, or ``lo to hi`` when a bound is negative (a dash beside a minus misreads)."""
    if not (np.isfinite(lo) and np.isfinite(hi)):
        return "--"
    joint = " to " if min(lo, hi) < 0 else "--"
    return f"{_tex_num(lo, column)}{joint}{_tex_num(hi, column)}"


def _tex_texts(texts: list) -> list:
    """:func:`_tex_num` of each text of :func:`format_values` (escaped only when needed)."""
    escape = _LATEX_RE.search("".join(texts)) is not None
    if not escape:   # most cells are plain numbers, written as they are
        return [text if text[:1] not in _TEX_MARKED else _tex_text(text, False)
                for text in texts]
    return [_tex_text(text, True) for text in texts]


#: First characters of a cell that :func:`_tex_text` rewrites (missing value, minus).
_TEX_MARKED = frozenset(("–", "−", "-"))


def _tex_text(text: str, escape: bool) -> str:
    """:func:`_tex_num` of one text of :func:`format_values` (``escape``: LaTeX-escape)."""
    if text == "–":
        return "--"
    if text.startswith("−"):
        text = "-" + text[1:]
    if text.startswith("-"):
        return "$-$" + (latex_escape(text[1:]) if escape else text[1:])
    return latex_escape(text) if escape else text


def _tex_nums(values, column: str) -> list:
    """:func:`_tex_num` of every value of a column."""
    return _tex_texts(format_values(values, column))


def _tex_intervals(lo: np.ndarray, hi: np.ndarray, column: str) -> list:
    """:func:`_tex_interval` of every pair of bounds."""
    lo_text, hi_text = _tex_nums(lo, column), _tex_nums(hi, column)
    with np.errstate(invalid="ignore"):
        both = (np.isfinite(lo) & np.isfinite(hi)).tolist()
        negative = (np.minimum(lo, hi) < 0).tolist()
    return [(a + (" to " if neg else "--") + b) if ok else "--"
            for a, b, ok, neg in zip(lo_text, hi_text, both, negative)]


def _text_cells(column: pd.Series) -> list:
    """:func:`latex_escape` of each cell of a text column (each distinct value once)."""
    values = column.tolist()
    done = {}
    return [done[v] if v in done else done.setdefault(v, latex_escape(v)) for v in values]


def render_fits_tex(result) -> str:
    """A LaTeX ``tabular`` of the fits (needs no package beyond plain LaTeX).

    Each column is formatted at once (:func:`format_values`); a row reads as
    :func:`_tex_num` and :func:`_tex_interval` write its cells one at a time."""
    conf = f"{100 * result.config.model.confidence:g}"
    base = latex_escape(result.config.model.log_base)
    head = ["Scope", "Group", "Method", "$n$", "$b$", f"{conf}\\% CI of $b$",
            f"$\\log_{{{base}}} a$", f"{conf}\\% CI of $\\log_{{{base}}} a$", "$r^2$"]
    lines = [f"% Fits of {latex_escape(result.config.title)}; written by scaling "
             f"{latex_escape((result.manifest or {}).get('scaling_version', ''))}",
             "\\begin{tabular}{lllrrcrcr}", "\\hline", " & ".join(head) + " \\\\", "\\hline"]
    fits = result.fits
    if len(fits):
        def num(name):
            return pd.to_numeric(fits[name]).to_numpy(dtype=float)

        def gap(name):
            return num(name) if name in fits.columns else np.full(len(fits), np.nan)

        lo, hi = num("slope_low"), num("slope_high")
        gap_lo, gap_hi = gap("slope_gap_low"), gap("slope_gap_high")
        ci_b = _tex_intervals(lo, hi, "slope_low")
        split = np.flatnonzero(np.isfinite(gap_lo) & np.isfinite(gap_hi))
        if split.size:   # SMA's accepted set: two ranges
            left = _tex_intervals(lo[split], gap_lo[split], "slope_low")
            right = _tex_intervals(gap_hi[split], hi[split], "slope_low")
            for i, a, b in zip(split.tolist(), left, right):
                ci_b[i] = f"{a} or {b}"
        labels = {}
        methods = [labels[m] if m in labels else labels.setdefault(
            m, latex_escape(method_label(m))) for m in fits["method"].tolist()]
        n = fits["n"]
        columns = (_text_cells(fits["scope"]), _text_cells(fits["group"]), methods,
                   _tex_nums(n if n.dtype.kind in "iuf" else n.astype(object), "n"),
                   _tex_nums(num("slope"), "slope"), ci_b,
                   _tex_nums(num("intercept"), "intercept"),
                   _tex_intervals(num("intercept_low"), num("intercept_high"), "x"),
                   _tex_nums(num("r2"), "r2"))
        lines += map(" & ".join, zip(*columns))
        lines[5:] = [line + " \\\\" for line in lines[5:]]
    lines += ["\\hline", "\\end{tabular}", ""]
    return "\n".join(lines)


# --------------------------------------------------------------------------
# writing


def write_report(result, folder: Path, written) -> list[Path]:
    """Write ``report.html``, ``summary.md`` and ``fits.tex`` into ``folder``.

    Parameters
    ----------
    result : RunResult
    folder : Path
        The (temporary) output folder; figures already written there are
        embedded rather than drawn again.
    written : list of Path
        Paths relative to ``folder`` written so far (linked from the report).

    Returns
    -------
    list of Path
        The three paths written, relative to ``folder``.
    """
    return _write_report(result, Path(folder), written)


def _write_report(result, folder: Path, written, *, head=None, tex=None) -> list[Path]:
    sections = build_report(result, folder, written, head=head)
    (folder / "report.html").write_text(render_html(result, sections), encoding="utf-8")
    (folder / "summary.md").write_text(render_markdown(result, sections), encoding="utf-8")
    (folder / "fits.tex").write_text(tex if tex is not None else render_fits_tex(result),
                                     encoding="utf-8")
    return [Path("report.html"), Path("summary.md"), Path("fits.tex")]


def prepare_report(result):
    """:func:`write_report` with what needs no figure made now: the Answer and fits.tex.

    Called while the figures are drawn elsewhere; the function returned writes the
    same files as :func:`write_report`.  The parts made here serve this very
    ``result`` only (a run whose figure notes were added is a new result, written
    from the start).
    """
    several = getattr(result, "multi_fit", None) is not None
    head = None if several else headline_of(result)
    tex = render_fits_tex(result)

    def write(res, folder: Path, written) -> list[Path]:
        if res is not result:
            return write_report(res, folder, written)
        return _write_report(res, Path(folder), written, head=head, tex=tex)
    return write
