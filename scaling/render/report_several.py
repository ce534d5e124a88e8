"""The report of a run with several predictors: what was fitted, drawn and listed.

:func:`build_several_report` is :func:`scaling.render.report.build_report` for
a run whose ``data.x`` lists several columns.  It builds the same content
model (:class:`~scaling.render.report.Section` of
:class:`~scaling.render.report.Block`), rendered by the same HTML and
Markdown writers, with what such a run fitted: the partial-relationship
figures (one per predictor), a ``term`` column in the fits and exponent
tables, each test's own p, the hypothesis names of the config, the group
comparison of several predictors, and the checks (``diagnostics.csv``).
It computes nothing.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from .answer_several import partial_model, several_group_sentences
from .answer import headline_of
from . import report_parts   # its TABLE_MAX_ROWS is read when a report is built
from .figure_kinds import partial_figure_name
from .figure_worker import report_png
from .report_parts import (Block, Section, _bounded, _headline_section,
                           _interval_text, _manifest_section, _summary_section)
from .wording import (CAUTION, dose_caution, mechanism_applies, mechanism_caution, medians_vs_means,
                      predicted_unit)

__all__ = ["build_several_report"]

_PARTIAL_CAPTION = ("Partial relationship of y with {term}: each point is y adjusted to the "
                    "geometric means of the other predictors ({others}){lines}. Log axes in "
                    "natural units.")

#: What the partial figure's lines are, by the model the Answer leads with.
_PARTIAL_LINES = {
    "pooled": "; the line has the fitted exponent of {term}",
    "common": ("; one line per {word}, each at its elevation, all with the common "
               "within-{word} exponent of {term} (points adjusted by the common exponents)"),
    "group": ("; one line per {word} with its own exponent of {term} (points adjusted by "
              "the exponents of their own {word})"),
}


def _partial_png(result, term: str) -> bytes:
    from .figures import partial_png   # matplotlib only for a figure not drawn yet
    return partial_png(result, term)


def _figure_blocks(result, folder: Path, written: list) -> list:
    """One image per predictor: the partial figure written by the run (else drawn here)."""
    names = result.multi_fit.names
    written_set = {Path(p).as_posix() for p in written}
    blocks = []
    for term in names:
        rel = f"figures/{partial_figure_name(term)}.png"
        if rel in written_set and (folder / rel).exists():
            png, path = (folder / rel).read_bytes(), rel
        else:   # drawn with the figures (e.g. figures.formats: [pdf]), else here
            png, path = report_png(folder, partial_figure_name(term),
                                   lambda term=term: _partial_png(result, term)), ""
            if png is None:   # the writer has noted the missing figure
                continue
        others = ", ".join(n for n in names if n != term)
        lines = _PARTIAL_LINES[partial_model(result)].format(
            term=term, word=str(result.config.data.group))
        blocks.append(Block(kind="img", png=png, path=path, name=partial_figure_name(term),
                            text=_PARTIAL_CAPTION.format(term=term, others=others,
                                                         lines=lines)))
    return blocks


def _which_line(table: pd.DataFrame, result) -> str:
    """'Predicted y for the new rows' and, with groups, from which line (the scope column:
    each group's own fit, or the common exponents at the group's elevation)."""
    scopes = set(table["scope"]) if "scope" in table.columns else set()
    word = str(result.config.data.group or "group")
    if scopes == {"group"}:
        return f"Predicted y for the new rows, each from the fit of its own {word} (scope group)."
    if scopes == {"common"}:
        return (f"Predicted y for the new rows, each from the common exponents at the elevation "
                f"of its {word} (scope common).")
    if getattr(result, "multi_groups", None) is not None:
        return f"Predicted y for the new rows from the pooled fit (all {word} values together)."
    return "Predicted y for the new rows."


def _unit_text(unit) -> str:
    return f" ({unit})" if unit else ""


def _data_section(result) -> Section:
    cfg, data = result.config, result.data
    units = data.units or {}
    ux = units.get("x") or ()
    ux = ux if isinstance(ux, tuple) else (ux,) * len(cfg.data.x_columns)
    xs = ", ".join(f"{n}{_unit_text(u)}" for n, u in zip(cfg.data.x_columns, ux))
    facts = [
        f"Input file: {Path(str(cfg.data.file)).name}",
        f"Rows read: {data.n_read}",
        f"Rows dropped: {len(result.dropped)}",
        f"Points fitted: {len(data.points)}",
        f"Predictors (x): {xs}",
        f"Response (y): {cfg.data.y}{_unit_text(units.get('y'))}",
        f"Log base: {cfg.model.log_base}; method: OLS on the logs of every predictor; "
        f"confidence {100 * cfg.model.confidence:g}%",
    ]
    blocks = [Block(kind="ul", items=tuple(facts))]
    pts = data.points
    if "group" in pts.columns:
        counts = pts.groupby("group", sort=True).size()
        blocks.append(Block(kind="p", text=f"Groups ({cfg.data.group}): " + "; ".join(
            f"{g} (n = {n})" for g, n in counts.items())))
    dropped = result.dropped
    if dropped is not None and len(dropped):
        counts = dropped.groupby("reason", sort=False).size().reset_index()
        counts.columns = ["reason", "rows"]
        blocks.append(Block(kind="p", text="Rows dropped, by reason (every row in "
                                           "dropped_rows.csv):"))
        blocks.append(Block(kind="table", frame=counts, name="dropped rows by reason"))
    else:
        blocks.append(Block(kind="p", text="No rows were dropped."))
    return Section(title="Data", blocks=blocks, anchor="data")


def _fits_display(fits: pd.DataFrame) -> pd.DataFrame:
    rows = []
    for r in fits.head(report_parts.TABLE_MAX_ROWS).to_dict(orient="records"):
        group = r.get("group", "")
        rows.append({"scope": r["scope"], "group": group if isinstance(group, str) else "",
                     "term": r["term"], "n": r["n"], "b": r["slope"],
                     "b interval": _interval_text(r["slope_low"], r["slope_high"]),
                     "log a": r["intercept"],
                     "log a interval": _interval_text(r["intercept_low"], r["intercept_high"]),
                     "r2": r.get("r2", np.nan), "resid_sd": r.get("resid_sd", np.nan),
                     "note": r.get("note", "") if isinstance(r.get("note", ""), str) else ""})
    frame = pd.DataFrame(rows)
    if len(frame) and not frame["group"].ne("").any():
        frame = frame.drop(columns=["group"])
    return frame


def build_several_report(result, folder: Path | None = None, written=()) -> list:
    """The report's content for a run with several predictors (a list of Section)."""
    folder = Path(folder) if folder is not None else Path(".")
    written = list(written or ())
    cfg = result.config
    conf = cfg.model.confidence
    alpha = 1 - conf
    tables = {k: v for k, v in (result.tables or {}).items()
              if not str(k).startswith("_") and isinstance(v, pd.DataFrame)}
    head = headline_of(result)
    sections = [_headline_section(head)]
    sections.append(_summary_section(tuple(m.strip() for m in result.messages),
                                     result.warnings))
    sections.append(_data_section(result))
    sections.append(Section(title="Figures", anchor="figures",
                            blocks=_figure_blocks(result, folder, written)))

    fit_blocks = [Block(kind="p", text=(
        f"The model is y = a·x1^b1·x2^b2…, fitted by OLS on log{cfg.model.log_base} scales: "
        "one row per term (predictor), b its exponent with its "
        f"{100 * conf:g}% confidence interval; log a is the intercept of the whole model, "
        "the same on every row of a line. Every column, unrounded, is in fits.csv."))]
    fit_blocks.append(Block(kind="table", frame=_fits_display(result.fits), name="fits"))
    if len(result.fits) > report_parts.TABLE_MAX_ROWS:
        fit_blocks.append(Block(kind="p", text=f"First {report_parts.TABLE_MAX_ROWS} of "
                                               f"{len(result.fits):,} rows shown."))
    sections.append(Section(title="Fits", blocks=fit_blocks, anchor="fits"))

    tests = result.slope_tests
    test_blocks = []
    if tests is None or not len(tests):
        test_blocks.append(Block(kind="p", text="No hypothesised exponents were given."))
    else:
        names = ", ".join(dict.fromkeys(tests["hypothesis"].astype(str)))
        test_blocks.append(Block(kind="p", text=(
            f"Each exponent against its value under each hypothesis ({names}): t test on "
            "the residual df, verdict at the level "
            f"{alpha:g} (every test in slope_tests.csv).")))
        test_blocks.append(Block(kind="table", frame=head.exponent_table,
                                 name="exponent tests"))
        test_blocks.append(Block(kind="table", frame=tests, name="slope_tests"))
        if mechanism_applies(tests):
            test_blocks.append(Block(kind="p", text=mechanism_caution()))
    sections.append(Section(title="Exponent tests", blocks=test_blocks, anchor="tests"))

    if "group_tests" in tables:
        word = str(cfg.data.group or "group")
        sections.append(Section(title="Group comparisons", anchor="groups", blocks=[
            Block(kind="ul", items=tuple(several_group_sentences(tables["group_tests"],
                                                                 alpha, word))),
            Block(kind="table", name="group_tests",   # one-predictor columns left blank: hidden
                  frame=tables["group_tests"].dropna(axis=1, how="all"))]))

    if "predictions" in tables:
        t = tables["predictions"]
        flags = tuple(bool(v) for v in t["extrapolated"]) if "extrapolated" in t else ()
        n_ext = sum(flags)
        note = (f" {n_ext} of {len(t)} {'is an extrapolation' if n_ext == 1 else 'are extrapolations'}"
                " (a predictor outside its fitted range, or a combination unlike the data) "
                "and highlighted." if n_ext else " None is an extrapolation.")
        pred_blocks = [Block(kind="p", text=_which_line(t, result) + note),
                       Block(kind="table", frame=t, name="predictions", highlight=flags)]
        pred_blocks += [Block(kind="p", text=s) for s in (
            predicted_unit(cfg.data.average_within, cfg.data.y), medians_vs_means())]
        sections.append(Section(title="Predictions", blocks=pred_blocks, anchor="predictions"))

    if "diagnostics" in tables:
        sections.append(Section(title="Diagnostics", anchor="diagnostics", blocks=[
            Block(kind="p", text=(
                "Checks of the pooled fit (and, with groups, of the common-exponents model "
                "with one elevation per group): normality of the log-scale residuals "
                "(Shapiro-Wilk), constant variance against all predictors (Breusch-Pagan), "
                "curvature in each term (a quadratic in that term's log), influence (Cook's "
                "distance above 4/n), leverage (rows whose combination of predictors lies "
                "beyond the data's bulk, above 2p/n), and collinearity (each term's variance "
                "inflation factor, flagged above 10; the condition number of the design).")),
            Block(kind="table", frame=tables["diagnostics"], name="diagnostics")]))

    handled = {"group_tests", "predictions", "diagnostics"}
    others = [Block(kind="table", frame=t, name=k) for k, t in tables.items()
              if k not in handled]
    if others:
        sections.append(Section(title="Further tables", blocks=others, anchor="more"))
    caution = [Block(kind="caution", text=CAUTION)]
    if _dose_like(cfg):
        caution.append(Block(kind="p", text=dose_caution()))
    sections.append(Section(title="Cautions", blocks=caution, anchor="cautions"))
    files = sorted({Path(p).as_posix() for p in written} |
                   {"report.html", "summary.md", "fits.tex", "results.json"})
    sections.append(Section(title="Files", anchor="files",
                            blocks=[Block(kind="links", items=tuple(files))]))
    sections.append(_manifest_section(result))
    return _bounded(sections)


def _dose_like(cfg) -> bool:
    """The dose-scaling caution only where the response reads as a dose or rate."""
    text = str(cfg.data.y).lower()
    return any(w in text for w in ("dose", "rate", "clearance", "metabol"))
