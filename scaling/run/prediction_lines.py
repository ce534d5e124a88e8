"""Which lines predict, and how far outside the fitted range each value lies.

:func:`prediction_fits` keeps the fits that make predictions: those of
``prediction.methods``, by default OLS (the line that estimates y from x);
symmetric lines (SMA, MA, ...) predict only when asked, with a note.
:func:`add_range_ratio` adds ``range_ratio`` to a predictions table.

range_ratio
    For a value v and the fitted range [lo, hi] of the fit that made the
    prediction: hi / lo is not used; ``v / hi`` above the range,
    ``lo / v`` below it, 1 inside (so 2 means twice the largest, or half the
    smallest, fitted value).  For ``predictions.csv`` v is the requested x
    and the range that of x; for ``inverse_predictions.csv`` v is the given
    y and the range that of y.  With log_base none (data already logs), the
    ratio is base-free: 1 + distance outside the range / range width.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..stats.lines import is_symmetric
from ..render.wording import range_warning, symmetric_prediction_note

__all__ = ["prediction_methods", "prediction_fits", "range_ratio", "add_range_ratio"]


def prediction_methods(cfg, fitted: list) -> tuple:
    """The methods whose lines make predictions.

    ``prediction.methods`` if given; else OLS if it was fitted; else the
    first method fitted.
    """
    asked = tuple(getattr(cfg.prediction, "methods", ()) or ())
    if asked:
        return asked
    if "ols" in fitted or not fitted:
        return ("ols",)
    return (fitted[0],)


def prediction_fits(saved: dict, cfg) -> tuple:
    """The saved fits that predict, and the notes about that choice."""
    fitted = list(dict.fromkeys(m for (_, _, m) in saved))
    chosen = prediction_methods(cfg, fitted)
    keep = {k: d for k, d in saved.items() if k[2] in chosen}
    notes = []
    if not (cfg.prediction.x or cfg.prediction.y):
        return keep, notes
    symmetric = [m for m in chosen if m in fitted and _symmetric(m)]
    if symmetric:
        notes.append(symmetric_prediction_note(symmetric))
    missing = [m for m in chosen if m not in fitted]
    if missing:
        notes.append(f"prediction.methods asks for {', '.join(missing)}, which model.methods "
                     "does not fit (or could not fit); no predictions from "
                     f"{'it' if len(missing) == 1 else 'them'}.")
    return keep, notes


def _symmetric(method: str) -> bool:
    try:
        return bool(is_symmetric(method))
    except Exception:   # an unknown name is not symmetric
        return False


def range_ratio(values, low, high, *, logs: bool = False) -> np.ndarray:
    """How far outside [low, high] each value lies (1 inside); see the module notes."""
    v = np.asarray(values, dtype=float)
    lo = np.asarray(low, dtype=float)
    hi = np.asarray(high, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        if logs:
            width = np.where(hi > lo, hi - lo, 1.0)
            out = np.where(v > hi, 1 + (v - hi) / width,
                           np.where(v < lo, 1 + (lo - v) / width, 1.0))
        else:
            out = np.where(v > hi, v / hi, np.where(v < lo, lo / v, 1.0))
    return np.where(np.isfinite(lo) & np.isfinite(hi), out, np.nan)


def add_range_ratio(table: pd.DataFrame, saved: dict, role: str) -> tuple:
    """``table`` with a ``range_ratio`` column, and the warning naming the fitted range.

    Parameters
    ----------
    table : DataFrame
        predictions (``role="x"``) or inverse predictions (``role="y"``) with
        ``scope, group, method`` columns.
    saved : dict
        ``(scope, group, method) -> saved-fit dict`` with ``x_range``,
        ``y_range`` and ``log_base``.
    """
    out = table.copy()
    if not len(out):
        out["range_ratio"] = pd.Series(dtype=float)
        return out, []
    lo, hi, logs = [], [], []
    for r in out.itertuples(index=False):
        d = saved.get((r.scope, r.group, r.method), {})
        rng = d.get(f"{role}_range") or (np.nan, np.nan)
        lo.append(rng[0])
        hi.append(rng[1])
        logs.append(d.get("log_base") in (None, "none"))
    out["range_ratio"] = range_ratio(out[role].to_numpy(float), lo, hi,
                                     logs=bool(all(logs)))
    outside = out["range_ratio"] > 1
    notes = []
    if outside.any():
        what = "predictions" if role == "x" else "inverse predictions (given y)"
        notes.append(range_warning(int(outside.sum()), len(out), float(np.nanmin(lo)),
                                   float(np.nanmax(hi)), float(out["range_ratio"].max()),
                                   what=what, role=role))
    return out, notes
