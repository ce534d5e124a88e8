"""The words of a run's predictions: the Answer's prediction sentence and the notes under
the predictions table.

Which sentence a run gets
    * An *inverse run* (``prediction.y`` given, ``prediction.x`` not) predicts x
      from y; its Answer leads with the line that makes those predictions
      (:func:`answer_primary`) and its sentence says that the values are
      medians of x for the given y, with no back-transformation correction
      (:func:`inverse_sentence`).
    * Groups whose slopes differ: each group's own line predicts
      (:func:`group_prediction_sentence`); the pooled line mixes groups and
      its rows in predictions.csv are labelled so under the table.
    * Otherwise the pooled line's predictions (:func:`pooled_prediction_sentence`).

Why no correction applies to an inverse estimate
    A line fitted on logs gives the median of y at a given x; smearing (Duan
    1983, JASA 78:605) and the parametric and ratio factors turn it into the
    mean of y by undoing the scatter of y about the line at that x.  An
    inverse estimate is the x at which the line reaches the given y (the line
    solved for log x, then back-transformed): there is no distribution of y at
    that x to average over, and the log-scale estimate sits in the middle of
    its (symmetric) log-scale interval, so its back-transform is a median of x
    for the given y.  The same reading is in docs/inverse_vs_forward.md.
"""

from __future__ import annotations

import re

import pandas as pd

from ..stats.schema import method_label
from .wording import possessive, count_words, interval_numbers, number_text, plural, unit_text

__all__ = ["DOCS_INVERSE", "inverse_run", "predicting_method", "answer_primary",
           "inverse_sentence", "pooled_prediction_sentence", "group_prediction_sentence",
           "group_inverse_sentence",
           "prediction_sentence", "prediction_notes", "mass_from_measurement",
           "extrapolation_words"]

#: Where the two routes to a fossil's mass are compared (in the source tree).
DOCS_INVERSE = "docs/inverse_vs_forward.md"

#: At most this many values (with their intervals) are written in one sentence;
#: longer lists stay in predictions.csv / inverse_predictions.csv.
MOST_VALUES = 6
#: With groups: at most this many values in all, written without intervals.
MOST_GROUP_VALUES = 24


def inverse_run(cfg) -> bool:
    """True when the run predicts x from y only (``prediction.y`` and no ``prediction.x``)."""
    return bool(cfg.prediction.y) and not cfg.prediction.x


def predicting_method(cfg, fitted=None) -> str:
    """The first method whose line predicts: ``prediction.methods``, else OLS if fitted,
    else the first method fitted."""
    asked = tuple(getattr(cfg.prediction, "methods", ()) or ())
    if asked:
        return asked[0]
    fitted = list(cfg.model.methods if fitted is None else fitted)
    if "ols" in fitted or not fitted:
        return "ols"
    return fitted[0]


def answer_primary(cfg):
    """The method the Answer leads with: in an inverse run the line that predicts,
    else ``model.primary`` (None: the default rule of the headline)."""
    if inverse_run(cfg):
        return predicting_method(cfg)
    return getattr(cfg.model, "primary", None)


def _unit(units: dict, role: str) -> str:
    u = (units or {}).get(role, "")
    return "" if isinstance(u, tuple) else unit_text(u)


def _with_unit(value: float, unit: str) -> str:
    return number_text(value) + (f" {unit}" if unit else "")


def _interval(row, got: str) -> str:
    return (f"{100 * float(row['confidence']):g}% {row['interval']} interval "
            f"{interval_numbers(row[got + '_low'], row[got + '_high'])}")


def inverse_sentence(table: pd.DataFrame, cfg, units: dict, method: str) -> str:
    """The inverse predictions of the pooled ``method`` line in one sentence, or ""."""
    rows = table[(table["scope"] == "pooled") & (table["method"] == method)]
    if not len(rows) or len(rows) > MOST_VALUES:
        return ""
    uy, ux = _unit(units, "y"), _unit(units, "x")
    parts = [f"at y = {_with_unit(r['y'], uy)}, {_with_unit(r['x'], ux)} "
             f"({_interval(r, 'x')})" + (" — extrapolated" if r.get("extrapolated") else "")
             for r in rows.to_dict("records")]
    return (f"Inverse prediction of x (the pooled {method_label(method)} line solved for x; "
            "medians of x for the given y, with no back-transformation correction: smearing "
            "corrects the scatter of y about the line at a given x, which an x read off the "
            "line does not have): " + "; ".join(parts) + ".")


def pooled_prediction_sentence(table: pd.DataFrame, cfg, units: dict, method: str) -> str:
    """The pooled ``method`` line's predictions in one sentence, or ""."""
    rows = table[(table["scope"] == "pooled") & (table["method"] == method)]
    if not len(rows) or len(rows) > MOST_VALUES:
        return ""
    ux, uy = _unit(units, "x"), _unit(units, "y")
    how = f", {rows['correction'].iloc[0]}" if "correction" in rows.columns else ""
    parts = [f"at x = {_with_unit(r['x'], ux)}, {_with_unit(r['y'], uy)} ({_interval(r, 'y')})"
             + (" — extrapolated" if r.get("extrapolated") else "")
             for r in rows.to_dict("records")]
    return f"Predicted y (pooled {method_label(method)}{how}): " + "; ".join(parts) + "."


def group_prediction_sentence(table: pd.DataFrame, cfg, units: dict, method: str) -> str:
    """Each group's own ``method`` line's predictions in one sentence, or "".

    Used when the groups' slopes differ: a pooled line would mix them.  With
    few values the intervals are written; else the values only, with the
    intervals in predictions.csv.
    """
    rows = table[(table["scope"] == "group") & (table["method"] == method)]
    if not len(rows) or len(rows) > MOST_GROUP_VALUES:
        return ""
    correction = str(rows["correction"].iloc[0]) if "correction" in rows.columns else "none"
    what = "medians" if correction == "none" else f"{correction}-corrected means"
    word = str(cfg.data.group or "group")
    return _group_values(rows, cfg, units, "x", "y", (
        f"Predicted y{{unit}} (each {possessive(word)} own {method_label(method)} line, {what}{{where}}; "
        f"the {plural(word)}' slopes differ, so the pooled line, which mixes them, does not "
        "predict)"), "predictions.csv")


def group_inverse_sentence(table: pd.DataFrame, cfg, units: dict, method: str) -> str:
    """Each requested y read off every group's own ``method`` line, in one sentence, or "".

    Used when the groups' slopes differ.  A requested y carries no group, so
    every group's line is solved for x and each value is labelled with its
    group (inverse_predictions.csv, scope ``group``): the row of the
    specimen's group is its estimate, and the spread across groups shows
    what the choice of group does when that is uncertain.
    """
    rows = table[(table["scope"] == "group") & (table["method"] == method)]
    if not len(rows) or len(rows) > MOST_GROUP_VALUES:
        return ""
    word = str(cfg.data.group or "group")
    return _group_values(rows, cfg, units, "y", "x", (
        f"Inverse prediction of x{{unit}} (each {possessive(word)} own {method_label(method)} line "
        f"solved for x, since the {plural(word)}' slopes differ and the pooled line mixes "
        "them; medians of x for the given y, with no back-transformation correction"
        "{where}; read the row of the specimen's own " + word + ")"),
        "inverse_predictions.csv")


def _group_values(rows: pd.DataFrame, cfg, units: dict, given: str, got: str, lead: str,
                  where_file: str) -> str:
    """'<lead> at <given> = v1, v2 unit: g1 a, b; g2 c, d.' (intervals when few values)."""
    unit_given, unit_got = _unit(units, given), _unit(units, got)
    at_values = list(dict.fromkeys(rows[given].tolist()))
    with_intervals = len(rows) <= MOST_VALUES
    parts = []
    for g, sub in rows.groupby("group", sort=False):
        values = []
        for r in sub.to_dict("records"):
            text = number_text(r[got])
            if with_intervals:
                text += f" ({_interval(r, got)})"
            values.append(text + (" (extrapolated)" if r.get("extrapolated") else ""))
        parts.append(f"{g} " + ", ".join(values))
    at = ", ".join(number_text(v) for v in at_values) + (f" {unit_given}" if unit_given else "")
    where = "" if with_intervals else (
        f"; {100 * float(rows['confidence'].iloc[0]):g}% {rows['interval'].iloc[0]} "
        f"intervals in {where_file}")
    head = lead.format(unit=", in " + unit_got if unit_got else "", where=where)
    return f"{head} at {given} = {at}: " + "; ".join(parts) + "."


def prediction_sentence(tables: dict, cfg, units: dict, *, slopes_differ: bool = False) -> list:
    """The run's prediction sentences (forward, then inverse) for the summary and the Answer."""
    method = predicting_method(cfg)
    out = []
    forward = tables.get("predictions")
    if isinstance(forward, pd.DataFrame) and "scope" in forward.columns:
        text = (group_prediction_sentence(forward, cfg, units, method) if slopes_differ
                else "") or pooled_prediction_sentence(forward, cfg, units, method)
        if text:
            out.append(text)
    inverse = tables.get("inverse_predictions")
    if isinstance(inverse, pd.DataFrame) and "scope" in inverse.columns:
        text = (group_inverse_sentence(inverse, cfg, units, method) if slopes_differ
                else "") or inverse_sentence(inverse, cfg, units, method)
        if text:
            out.append(text)
    return out


def mass_from_measurement(cfg) -> bool:
    """True when forward predictions estimate a body mass from another measurement
    (y's column or label has the word "mass" and x's does not): the case of
    docs/inverse_vs_forward.md, a mass from a bone or another proxy, where inverse
    prediction is the other route.  A weight at length of fish stocks is not
    counted: it is the quantity of interest in its own right, not a proxy
    reading (and "biomass" is not the word "mass")."""
    def words(text):
        return {w for w in re.split(r"[^a-z]+", str(text or "").lower()) if w}

    labels = getattr(cfg.figures, "labels", None) or {}
    masses = {"mass"}
    x = cfg.data.x if isinstance(cfg.data.x, str) else ""
    y = cfg.data.y if isinstance(cfg.data.y, str) else ""
    return bool((words(y) | words(labels.get("y", ""))) & masses
                and not (words(x) | words(labels.get("x", ""))) & masses)


def prediction_notes(cfg, tables: dict, units: dict, *, slopes_differ: bool = False) -> list:
    """The paragraphs under the predictions tables of the report and summary.md.

    What one value stands for (in its own unit), median or mean, the pooled
    line's rows when the groups' slopes differ, and where the two routes to a
    mass from a measurement are compared.
    """
    notes = []
    unit_of = {"x": _unit(units, "x"), "y": _unit(units, "y")}
    for name, got in (("predictions", "y"), ("inverse_predictions", "x")):
        if name not in tables:
            continue
        column = str(cfg.data.y if got == "y" else cfg.data.x)
        unit = unit_of[got]
        what = f"Each {'inverse estimate' if got == 'x' else 'prediction'} ({column})"
        what += f" is in {unit} and" if unit else ""
        if cfg.data.average_within:
            notes.append(f"{what} is for a new {cfg.data.average_within} mean (the mean of log "
                         f"{column} over a {cfg.data.average_within}), not for an individual: "
                         "individuals scatter more widely.")
        else:
            notes.append(f"{what} is for one new row of the kind in the data"
                         + (", whose y was measured." if got == "x" else "."))
    if "predictions" in tables:
        notes.append("A line fitted on logs predicts the median y at a given x; the corrected "
                     "values (smearing, parametric or ratio factor) estimate the mean, which is "
                     "higher by that factor.")
    if "inverse_predictions" in tables:
        notes.append("Inverse estimates are medians of x for the given y and carry no "
                     "back-transformation correction: the line is solved for log x and "
                     "back-transformed, and a correction such as smearing undoes the scatter "
                     "of y about the line at a given x, which an x read off the line does not "
                     f"have. Forward regression of x on y is the other route; {DOCS_INVERSE} "
                     "(in the scaling source) says when to use which.")
    elif "predictions" in tables and mass_from_measurement(cfg):
        notes.append("These are forward predictions (the regression of y on x), right for "
                     "individuals like the reference sample. For one outside its range or kind "
                     "(a fossil beyond the living species' sizes), inverse prediction "
                     f"(prediction.y) is the other route; {DOCS_INVERSE} (in the scaling "
                     "source) says when to use which.")
    word = str(cfg.data.group or "group")
    for name in ("predictions", "inverse_predictions"):
        table = tables.get(name)
        if not (slopes_differ and isinstance(table, pd.DataFrame) and "scope" in table.columns):
            continue
        n_pooled = int((table["scope"] == "pooled").sum())
        if n_pooled:
            where = "" if name == "predictions" else " of inverse_predictions.csv"
            notes.append(f"The {plural(word)}' slopes differ: use each {possessive(word)} own rows "
                         f"(scope group{where}). The {count_words(n_pooled, 'row')} of scope "
                         f"pooled come from the pooled line, which mixes {plural(word)} whose "
                         "lines differ.")
        if name == "inverse_predictions" and (table["scope"] == "group").any():
            notes.append(f"A given y carries no {word}: each y is read off every {possessive(word)} own "
                         f"line and labelled with the {word}; use the row of the specimen's "
                         f"own {word} (the spread across {plural(word)} shows what the choice "
                         "does when it is uncertain).")
    return notes


def extrapolation_words(n_ext: int) -> str:
    """How many rows of a predictions table are extrapolations."""
    if not n_ext:
        return " None is an extrapolation."
    verb = "is an extrapolation" if n_ext == 1 else "are extrapolations"
    return (f" {count_words(n_ext, 'row')} {verb} outside the fitted range and "
            f"{'is' if n_ext == 1 else 'are'} highlighted.")

