"""The prediction stage of a run: accuracy and correction factors per fit, predictions.

The correction factors of every fit are computed once here (on the fit's own
points), stored in the saved-fit dictionaries (``RunResult.tables["_saved_fits"]``,
written to results.json) and in fits.csv, and passed on to the predictions
and to the figures; nothing computes them again.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from .predict import (accuracy, data_factors, fit_to_dict, inverse_predict, predict,
                      saved_factor)
from .schema import FIT_ACCURACY_COLUMNS, INVERSE_COLUMNS, PREDICTION_COLUMNS, method_label
from .predicting import add_range_ratio
from .wording import (scope_words,
                      unbounded_inverse_note)

__all__ = ["accuracy_and_factors", "add_accuracy_columns", "prediction_stage"]


def accuracy_and_factors(line_fits: dict, point_sets: dict):
    """Saved-fit dicts (with smearing and ratio factors) and accuracy columns per fit."""
    saved, extra = {}, {}
    for key, fit in line_fits.items():
        scope, group, _ = key
        sel = point_sets.get((scope, group))
        if sel is None or len(sel) < 3:
            continue
        x, y = sel["x"].to_numpy(), sel["y"].to_numpy()
        factors = data_factors(fit, x, y)
        acc = accuracy(fit, x, y)
        d = fit_to_dict(fit, smearing_factor=float(factors["smearing"]),
                        ratio_factor=float(factors["ratio"]))
        d.update({"scope": scope, "group": group})
        saved[key] = d
        extra[key] = {"see": acc.see, "percent_see": acc.percent_see,
                      "percent_pe": acc.percent_pe,
                      "smearing_factor": float(factors["smearing"]),
                      "parametric_factor": float(factors["parametric"]),
                      "ratio_factor": float(factors["ratio"])}
    return saved, extra


def add_accuracy_columns(fits: pd.DataFrame, extra: dict) -> pd.DataFrame:
    """fits.csv with the accuracy and correction-factor columns (NaN where not computed)."""
    values = {c: [] for c in FIT_ACCURACY_COLUMNS}
    for r in fits.itertuples(index=False):
        row = extra.get((r.scope, r.group, r.method), {})
        for c in FIT_ACCURACY_COLUMNS:
            values[c].append(row.get(c, np.nan))
    out = fits.copy()
    for c in FIT_ACCURACY_COLUMNS:
        out[c] = values[c]
    return out


def _tagged(prediction, scope: str, group: str, method: str) -> pd.DataFrame:
    """A prediction's table with the columns that say which fit made it."""
    f = prediction.to_frame()
    f.insert(0, "scope", scope)
    f.insert(1, "group", group)
    f["method"] = method
    f["confidence"] = prediction.confidence
    return f


def prediction_stage(line_fits: dict, saved: dict, cfg):
    """predictions.csv (and inverse_predictions.csv) for the config's values."""
    pc = cfg.prediction
    rows, inv_rows, notes, unbounded = [], [], [], []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for key, d in saved.items():
            scope, group, method = key
            fit = line_fits[key]
            if pc.x:
                p = predict(fit, list(pc.x), correction=pc.correction, interval=pc.interval,
                            factor=saved_factor(d, pc.correction))
                rows.append(_tagged(p, scope, group, method))
            if pc.y:
                q = inverse_predict(fit, list(pc.y), interval=pc.interval)
                inv_rows.append(_tagged(q, scope, group, method))
                if not np.all(q.bounded):
                    unbounded.append(scope_words(scope, group) + " " + method_label(method))
    tables = {}
    if pc.x:
        table = pd.concat(rows, ignore_index=True)[PREDICTION_COLUMNS[:-1]] if rows else \
            pd.DataFrame(columns=PREDICTION_COLUMNS[:-1])   # range_ratio added below
        table, range_notes = add_range_ratio(table, saved, "x")
        tables["predictions"] = table
        notes += range_notes
    if pc.y:
        table = pd.concat(inv_rows, ignore_index=True)[INVERSE_COLUMNS[:-1]] if inv_rows else \
            pd.DataFrame(columns=INVERSE_COLUMNS[:-1])   # range_ratio added below
        table, range_notes = add_range_ratio(table, saved, "y")
        tables["inverse_predictions"] = table
        notes += range_notes
        if unbounded:
            notes.append(unbounded_inverse_note(unbounded, pc.interval, cfg.model.confidence))
    return tables, notes
