"""The fitting stage of a run: fits.csv rows and LineFit objects, each fit computed once.

Moment lines (OLS, SMA, MA, Deming) are fitted to every group at once from
group moments; each fits.csv row and each :class:`~scaling.stats.lines.LineFit` is
read from that one vectorised result.  Row-based lines (robust lines) are
fitted per set of points by :data:`scaling.stats.robust.ROW_METHODS`.
"""

from __future__ import annotations

import warnings
from dataclasses import replace

import numpy as np
import pandas as pd

from ..errors import DataError
from ..render.wording import fit_note, fit_notes_column
from ..stats.line_results import line_fit_from_result
from ..stats.lines import MIN_N, base_label, fit_moments
from ..stats.robust import ROW_METHODS, deming_moments
from ..stats.schema import FIT_COLUMNS, SLOPE_TEST_COLUMNS

__all__ = ["value_range", "fit_moment_rows", "row_method_fit", "fit_row", "blank_numbers",
           "robust_n_boot", "nothing_estimable", "slope_tests", "with_note", "with_ranges"]

#: The numeric columns of fits.csv read from a moment fit.
_NUMBERS = ("slope", "slope_low", "slope_high", "intercept", "intercept_low",
            "intercept_high", "r", "r2", "slope_se", "intercept_se", "resid_sd")


def value_range(values: np.ndarray) -> tuple:
    return (float(np.min(values)), float(np.max(values)))


def robust_n_boot(cfg) -> int:
    """Resamples behind the robust lines' intervals: resampling.bootstrap, else 999."""
    return cfg.resampling.bootstrap or 999


def fit_moment_rows(scope: str, groups: list, m, method: str, cfg, base, ranges):
    """fits.csv rows and LineFits of a moment method for every group of ``m`` at once.

    Returns
    -------
    rows : list of dict
        One per group (estimable or not).
    fits : dict
        ``(scope, group, method) -> LineFit`` for the estimable ones, packaged
        from the same vectorised result as the rows.
    """
    lam = cfg.model.deming_lambda if method == "deming" else None
    if method == "deming":
        res = deming_moments(m, lam, confidence=cfg.model.confidence)
    else:
        res = fit_moments(m, method, confidence=cfg.model.confidence)
    rows, fits = [], {}
    notes = fit_notes_column(res)
    for i, name in enumerate(groups):
        (x_lo, x_hi), (y_lo, y_hi) = ranges[i]
        row = {
            "scope": scope, "group": name, "method": method, "n": int(m.n[i]),
            **{k: float(res[k][i]) for k in _NUMBERS},
            "log_base": base_label(base), "confidence": cfg.model.confidence,
            "note": str(notes[i]),
            "x_min": x_lo, "x_max": x_hi, "y_min": y_lo, "y_max": y_hi,
            "interval_method": "analytic",
            "deming_lambda": lam if method == "deming" else np.nan,
        }
        rows.append(row)
        # Notes on estimable fits (unbounded interval, SMA of either sign,
        # exact power law) keep the fit.
        if np.isfinite(row["slope"]):
            fits[(scope, name, method)] = line_fit_from_result(
                res, i, m[i], method, confidence=cfg.model.confidence, log_base=base,
                x_range=(x_lo, x_hi), y_range=(y_lo, y_hi), lam=lam)
    return rows, fits


def blank_numbers(row: dict) -> dict:
    if row["note"] and not np.isfinite(row["slope"]):
        for k in _NUMBERS:
            row[k] = np.nan
    return row


def row_method_fit(scope: str, group: str, method: str, points: pd.DataFrame, cfg, base):
    """fits.csv row and LineFit (None if not estimable) of a robust line."""
    x, y = points["x"].to_numpy(), points["y"].to_numpy()
    n = len(points)
    rng_x = value_range(x) if n else (np.nan, np.nan)
    rng_y = value_range(y) if n else (np.nan, np.nan)
    fit, note = None, ""
    if n < MIN_N:
        note = f"n = {n} < {MIN_N}: too few points to fit a line"
    else:
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                fit = ROW_METHODS[method](x, y, confidence=cfg.model.confidence,
                                          log_base=base, n_boot=robust_n_boot(cfg),
                                          seed=cfg.resampling.seed)
        except DataError as exc:
            note = str(exc).replace("x and y need", "needs")
        if fit is not None and not np.isfinite(fit.slope):
            note, fit = fit.note or "the line could not be fitted", None
    if fit is not None:
        return fit_row(scope, group, fit, (rng_x, rng_y)), fit
    row = {c: np.nan for c in FIT_COLUMNS}
    row.update({"scope": scope, "group": group, "method": method, "n": n,
                "log_base": base_label(base), "confidence": cfg.model.confidence,
                "note": note, "x_min": rng_x[0], "x_max": rng_x[1], "y_min": rng_y[0],
                "y_max": rng_y[1], "interval_method": "bootstrap_percentile"})
    return row, None


def fit_row(scope: str, group: str, fit, ranges) -> dict:
    (x_lo, x_hi), (y_lo, y_hi) = ranges
    rec = fit.to_record()
    rec.update({"scope": scope, "group": group, "n": fit.n, "note": fit_note(fit),
                "x_min": x_lo, "x_max": x_hi, "y_min": y_lo, "y_max": y_hi})
    return rec


def with_ranges(fit, ranges):
    return replace(fit, x_range=ranges[0], y_range=ranges[1])


def with_note(fit, note):
    return replace(fit, note=note)


def nothing_estimable(cfg, pts: pd.DataFrame, rows: list, n_dropped: int) -> str:
    """Why no line at all could be fitted, in one line naming the file and columns."""
    n = len(pts)
    where = f"{cfg.data.file}: no line can be fitted"
    if n < MIN_N:
        dropped = ""
        if n_dropped:
            dropped = f"; {n_dropped} rows were dropped ('scaling check' lists why)"
        return (f"{where}: only {n} usable point{'s' if n != 1 else ''} "
                f"(a line needs at least {MIN_N}){dropped}")
    for role, column in (("x", cfg.data.x), ("y", cfg.data.y)):
        logs = pts[f"log_{role}"].to_numpy()
        if np.ptp(logs) <= 1e-12 * (np.abs(logs).max() + 1.0):
            value = float(pts[role].iloc[0])
            why = "no slope to estimate" if role == "x" else "no relationship to fit"
            return (f"{where}: {role} ({column}) has the same value ({value:g}) in all "
                    f"{n} points, so there is {why}")
    notes = sorted({str(r["note"]) for r in rows if r["scope"] == "pooled" and r["note"]})
    return f"{where}: " + ("; ".join(notes) if notes else "no fit was estimable")


def slope_tests(line_fits: dict, cfg) -> pd.DataFrame:
    """slope_tests.csv: every fit against every hypothesised exponent."""
    rows = []
    for (scope, group, method), fit in line_fits.items():
        for name, b0 in cfg.exponents.items():
            t = fit.test_slope(b0, hypothesis=name)
            rows.append({"scope": scope, "group": group, "method": method,
                         "hypothesis": name, "exponent": b0, "estimate": fit.slope,
                         "statistic": t.statistic, "statistic_type": t.statistic_type,
                         "df": t.df, "p_value": t.p_value})
    return pd.DataFrame(rows, columns=SLOPE_TEST_COLUMNS)
