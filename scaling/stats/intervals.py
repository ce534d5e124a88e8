"""Fitted values and intervals on the log scale, vectorised by broadcasting.

The interval of the fitted value (or of a new observation) at given log x, and
the OLS calibration interval of x given an observed log y, for one line or for
many lines at once (groups, replicates).  Used by :mod:`scaling.stats.predictions`
and by the drawing of bands (:mod:`scaling.render.plots`); kept apart from the
result objects so that drawing needs nothing but these formulas.
"""

from __future__ import annotations

import numpy as np
from . import tails

from .schema import INTERVALS, check_choice as _check_choice

__all__ = ["log_interval", "inverse_log_interval"]


def log_interval(X0, *, intercept, slope, slope_se, resid_sd, n, mean_x, df,
                 confidence: float = 0.95, interval: str = "prediction") -> tuple:
    """Fitted value and interval on the log scale, vectorised by broadcasting.

    Parameters
    ----------
    X0 : array_like
        Log of the x values.
    intercept, slope, slope_se, resid_sd, n, mean_x, df : float or ndarray
        Line parameters (e.g. from :func:`scaling.stats.lines.fit_moments` for many
        groups or replicates at once).
    confidence : float
    interval : {"prediction", "confidence"}

    Returns
    -------
    fitted, se, low, high : ndarray

    Notes
    -----
    var_line = s_r^2/n + (X0 - mean_x)^2 var(b); the prediction variance adds
    s_r^2; bounds fitted +- t_{(1+confidence)/2}(df) sqrt(var).  See the module
    docstring for sources.
    """
    _check_choice(interval, INTERVALS, "interval")
    X0 = np.asarray(X0, dtype=float)
    s2 = np.asarray(resid_sd, dtype=float) ** 2
    fitted = intercept + slope * X0
    with np.errstate(divide="ignore", invalid="ignore"):
        var = s2 / n + (X0 - mean_x) ** 2 * np.asarray(slope_se, dtype=float) ** 2
        if interval == "prediction":
            var = var + s2
        tcrit = tails.t_quantile(0.5 + confidence / 2, df)
    se = np.sqrt(var)
    return fitted, se, fitted - tcrit * se, fitted + tcrit * se


def inverse_log_interval(Y0, *, intercept, slope, slope_se, resid_sd, n, mean_x, df,
                         confidence: float = 0.95, interval: str = "prediction") -> tuple:
    """OLS calibration (Fieller-type) interval for X given an observed Y0.

    Vectorised by broadcasting, like :func:`log_interval`.

    Returns
    -------
    fitted, low, high : ndarray
        ``fitted = (Y0 - intercept)/slope``; ``low``/``high`` are NaN where
        the interval is unbounded (b^2 <= t^2 var(b)).

    Notes
    -----
    The set of X whose ``interval`` for Y contains Y0: with u = X - mean_x,
    d = Y0 - (a + b mean_x), A = b^2 - t^2 var(b), v0 = s_r^2 (1 + 1/n)
    (s_r^2/n for ``confidence``), the roots of A u^2 - 2 b d u + d^2 - t^2 v0
    (Draper & Smith 1998, Applied Regression Analysis, 3rd ed., sec. 3.2;
    from memory).  For A > 0 the discriminant is positive, so the interval
    always exists and contains the point estimate.
    """
    _check_choice(interval, INTERVALS, "interval")
    Y0 = np.asarray(Y0, dtype=float)
    b = np.asarray(slope, dtype=float)
    s2 = np.asarray(resid_sd, dtype=float) ** 2
    with np.errstate(divide="ignore", invalid="ignore"):
        tcrit = tails.t_quantile(0.5 + confidence / 2, df)
        mean_y_line = intercept + b * mean_x
        d = Y0 - mean_y_line
        fitted = mean_x + d / b
        v0 = s2 / n + (s2 if interval == "prediction" else 0.0)
        big_a = b * b - tcrit ** 2 * np.asarray(slope_se, dtype=float) ** 2
        c = d * d - tcrit ** 2 * v0
        root = np.sqrt(np.maximum(b * b * d * d - big_a * c, 0.0))
        u1 = (b * d - root) / big_a
        u2 = (b * d + root) / big_a
    bounded = big_a > 0
    low = np.where(bounded, mean_x + np.minimum(u1, u2), np.nan)
    high = np.where(bounded, mean_x + np.maximum(u1, u2), np.nan)
    return fitted, low, high
