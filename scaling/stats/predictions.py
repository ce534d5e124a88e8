"""Predictions in natural units from a fitted log-log line, with intervals.

Forward prediction (y from x), inverse prediction (x from y), the
back-transformation corrections, accuracy figures, and a small JSON-ready
dictionary from which a saved fit predicts later without its data.

Notation: X = log x, Y = log y in the fit's ``log_base``; the fitted line is
Y = a + b X; n, mean_x, mean_y are the sample size and means of X and Y;
s_r is ``fit.resid_sd``, the SD of the vertical residuals Y - a - b X on
n - 2 df; var(b) = ``fit.slope_se**2``; t = t_{(1+confidence)/2}(n - 2).

Point prediction
    The line gives the median of y at x: base^(a + b X0) (for log-normal
    scatter the back-transformed mean of the logs is the median).  The mean
    of y at x is that median times a correction factor CF:

    ``none``        CF = 1 (the median).
    ``smearing``    CF = mean_i base^(e_i), e_i the log-scale residuals of the
                    fitting data (Duan 1983, JASA 78:605, eq. for the smearing
                    estimate).  Needs the residuals, or the factor saved earlier.
    ``parametric``  CF = exp(s_r^2 ln(base)^2 / 2), the mean of a log-normal
                    (Baskerville 1972, Can. J. For. Res. 2:49; Sprugel 1983,
                    Ecology 64:209).
    ``ratio``       CF = mean(y) / mean(base^(a + b X)) on the fitting data
                    (Snowdon 1991, Can. J. For. Res. 21:720).

Intervals on the log scale (all methods)
    var_line(X0) = s_r^2 / n + (X0 - mean_x)^2 var(b)
    var_new(X0)  = s_r^2 + var_line(X0)
    ``confidence`` interval (for the line): fitted +- t sqrt(var_line);
    ``prediction`` interval (for one new individual): fitted +- t sqrt(var_new).
    For OLS var(b) = s_r^2 / Sxx, so these are the textbook intervals (e.g.
    Sokal & Rohlf, Biometry, 4th ed., 2012, ch. 14; they equal statsmodels'
    ``get_prediction``).  For SMA and MA, var(b) is the large-sample slope
    variance of :mod:`scaling.stats.lines` and the variance of the fitted value is
    the intercept variance of Warton, Wright, Falster & Westoby (2006)
    Biol. Rev. 81:259 moved from X = 0 to X0 (the sample means are
    independent of the sample covariance for bivariate normal data, so the
    cross term vanishes).  At X0 = 0 it reproduces ``fit.intercept_ci``.
    Caution: an SMA or MA line is not the conditional mean of Y given X, so
    its prediction interval has the stated coverage on average over new
    individuals drawn like the fitting data, but not at every fixed x (it
    undercovers far from the mean of x when the correlation is weak).

How the correction meets the bounds (our choice, stated)
    The bounds are computed on the log scale and back-transformed with
    base^bound, which maps quantiles to quantiles.

    * ``interval="confidence"``: the interval is for the line, i.e. for the
      median of y at x.  Since the mean is CF times the median, the interval
      for the *mean* is the median's interval multiplied by the same CF (CF
      is treated as known).  So both bounds ARE multiplied by CF, and the
      interval brackets the corrected point estimate.
    * ``interval="prediction"``: the bounds are quantiles of one new
      individual's y (the 2.5% and 97.5% points for 95%), and a quantile of
      y is base^(quantile of Y) whatever the mean is.  So the bounds are NOT
      multiplied by CF; only the point estimate (the mean) is.  The point
      estimate then sits above the centre of the interval, as it should for
      a right-skewed distribution.

Inverse prediction (x from an observed y)
    Point estimate: the line solved for X, X0 = (Y0 - a) / b, back-transformed
    without correction (it is the x at which the line's median equals y).

    OLS: the calibration interval of Fieller type, the set of X whose
    prediction interval for Y contains Y0 (Draper & Smith 1998, Applied
    Regression Analysis, 3rd ed., section 3.2, inverse regression; from
    memory).  With u = X - mean_x, d = Y0 - mean_y and v0 = s_r^2 (1 + 1/n)
    (s_r^2 / n for ``interval="confidence"``, the x at which the *line* takes
    the value Y0), it is the solution set of
        (b^2 - t^2 var(b)) u^2 - 2 b d u + d^2 - t^2 v0 <= 0.
    When b^2 > t^2 var(b) (the slope differs from 0 at this level) it is the
    bounded interval between the roots; otherwise it is unbounded and the
    bounds are NaN (with a :class:`~scaling.errors.DegenerateDataWarning`).

    SMA and MA: the line is symmetric, so the fit of X on Y is the same line
    with slope 1/b, intercept -a/b, residual SD s_r/|b| (horizontal
    residuals) and var(1/b) = var(b)/b^4 (delta method; this equals the
    slope variance computed from the swapped moments exactly, for SMA and
    MA).  The forward formulas above are applied with the roles of X and Y
    swapped; the interval is symmetric on the log scale.

Accuracy
    SEE: the standard error of estimate on the log scale, sqrt(sum e_i^2 /
    (n - 2)) with e_i the vertical residuals (equals ``fit.resid_sd`` on the
    fitting data).  %SEE = 100 (base^SEE - 1) and %SEE- = 100 (1 - base^-SEE):
    the percentage above and below the line that one SEE covers in natural
    units (usage in body-mass estimation after Smith 1984, Am. J. Physiol.
    246:R152 and e.g. Ruff 2003; from memory).  %PE = 100 mean |y - yhat| /
    yhat on the data given, yhat the back-transformed prediction (Smith 1984;
    from memory).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, replace
from typing import Any, Protocol

import numpy as np

from ..errors import (ConfigError, DataError, DegenerateDataWarning,
                     ExtrapolationWarning)
from .intervals import inverse_log_interval, log_interval
from .logscale import base_label, parse_log_base, to_log
from .schema import (CORRECTIONS, INTERVALS, check_choice as _check_choice, check_confidence,
                     is_symmetric, method_label)


class FittedLine(Protocol):
    """What prediction reads from a fitted line: :class:`scaling.stats.lines.LineFit` has it.

    (A protocol, not an import: :mod:`scaling.stats.lines` imports this module for
    ``LineFit.predict``, so this module does not import it back.)
    """

    method: str
    n: int
    slope: float
    slope_se: float
    intercept: float
    resid_sd: float
    df: float
    log_base: float | None
    confidence: float
    moments: Any
    x_range: tuple | None
    y_range: tuple | None
    note: str

    @property
    def estimable(self) -> bool: ...

    @property
    def intercept_ci(self) -> Any: ...

__all__ = [
    "CORRECTIONS",
    "INTERVALS",
    "Prediction",
    "InversePrediction",
    "Accuracy",
    "correction_factor",
    "data_factors",
    "log_residuals",
    "predict",
    "inverse_predict",
    "LinePredictions",
    "predict_lines",
    "inverse_predict_lines",
    "saved_factor",
    "accuracy",
]


# --------------------------------------------------------------------------
# input checks


def _check_confidence(confidence, fit: FittedLine) -> float:
    """The fit's level when ``confidence`` is None, else the checked value."""
    return float(fit.confidence) if confidence is None else check_confidence(confidence)


def _check_values(values, name: str, base) -> np.ndarray:
    try:
        arr = np.atleast_1d(np.asarray(values, dtype=float))
    except (TypeError, ValueError):
        raise DataError(f"{name} must be numbers, not {values!r}") from None
    if arr.ndim != 1:
        raise DataError(f"{name} must be a number or a one-dimensional list of numbers")
    if not np.all(np.isfinite(arr)):
        raise DataError(f"{name} must be finite numbers (no NaN or inf)")
    if base is not None and np.any(arr <= 0):
        bad = arr[arr <= 0][0]
        raise DataError(f"{name} must be positive to take logarithms, found {bad:g}")
    return arr


def _check_factor(factor) -> float:
    if (isinstance(factor, bool) or not isinstance(factor, (int, float, np.floating))
            or not (np.isfinite(factor) and factor > 0)):
        raise ConfigError(f"factor must be a positive number, not {factor!r}")
    return float(factor)


def _outside(values: np.ndarray, rng) -> np.ndarray:
    if rng is None:
        return np.zeros(values.shape, dtype=bool)
    lo, hi = rng
    return (values < lo) | (values > hi)


def _warn_outside(flags: np.ndarray, rng, name: str) -> None:
    if np.any(flags):
        warnings.warn(
            f"{int(flags.sum())} of {flags.size} {name} values lie outside the fitted "
            f"range of {name} ({rng[0]:g} to {rng[1]:g}): extrapolated, flagged",
            ExtrapolationWarning, stacklevel=3)


# --------------------------------------------------------------------------
# correction factors


def log_residuals(fit: FittedLine, x, y) -> np.ndarray:
    """Vertical residuals Y - a - b X on the fit's log scale.

    Parameters
    ----------
    fit : LineFit
    x, y : array_like
        Natural units (logs when ``fit.log_base`` is None).
    """
    x = _check_values(x, "x", fit.log_base)
    y = _check_values(y, "y", fit.log_base)
    if x.shape != y.shape:
        raise DataError(f"x and y must have the same length, not {x.size} and {y.size}")
    return to_log(y, fit.log_base) - (fit.intercept + fit.slope * to_log(x, fit.log_base))


def correction_factor(kind: str, *, resid_sd, log_base, residuals=None, y=None,
                      y_hat=None):
    """Factor that turns the back-transformed line (a median) into a mean.

    Parameters
    ----------
    kind : {"smearing", "parametric", "ratio", "none"}
    resid_sd : float or ndarray
        SD of the log-scale residuals (``fit.resid_sd``); used by ``parametric``.
    log_base : {10, "e", 2}
        Base of the logarithms.
    residuals : array_like, optional
        Log-scale residuals of the fitting data, shape (..., n); needed by
        ``smearing``.  Leading axes are kept (one factor per row).
    y, y_hat : array_like, optional
        Observed y and naive predictions base^(a + b X) of the fitting data,
        in natural units, shape (..., n); needed by ``ratio``.

    Returns
    -------
    float or ndarray
        1 for ``none``; ``mean(base**residuals)`` for ``smearing``;
        ``exp(resid_sd**2 * ln(base)**2 / 2)`` for ``parametric``;
        ``mean(y) / mean(y_hat)`` for ``ratio``.

    Notes
    -----
    Smearing: Duan (1983) JASA 78:605.  Parametric: Baskerville (1972)
    Can. J. For. Res. 2:49; Sprugel (1983) Ecology 64:209.  Ratio: Snowdon
    (1991) Can. J. For. Res. 21:720.
    """
    _check_choice(kind, CORRECTIONS, "correction")
    if kind == "none":
        return 1.0
    try:
        base = parse_log_base(log_base)
    except (ValueError, ConfigError) as exc:
        raise ConfigError(str(exc)) from None
    if base is None:
        raise ConfigError(f"correction {kind!r} needs a log base: values given as logs "
                          "are not back-transformed; use correction='none'")
    ln_base = math.log(base)
    if kind == "parametric":
        sd = np.asarray(resid_sd, dtype=float)
        out = np.exp(sd * sd * ln_base * ln_base / 2)
    elif kind == "smearing":
        if residuals is None:
            raise ConfigError("correction 'smearing' needs the log-scale residuals of the "
                              "fitting data (residuals=...) or a saved factor; "
                              "correction='parametric' needs neither")
        res = np.asarray(residuals, dtype=float)
        if res.size == 0 or not np.all(np.isfinite(res)):
            raise DataError("residuals must be a non-empty array of finite numbers")
        out = np.mean(np.exp(res * ln_base), axis=-1)
    else:  # ratio
        if y is None or y_hat is None:
            raise ConfigError("correction 'ratio' needs y and y_hat of the fitting data "
                              "(or data=(x, y), or a saved factor)")
        y = np.asarray(y, dtype=float)
        y_hat = np.asarray(y_hat, dtype=float)
        if y.shape != y_hat.shape or y.size == 0:
            raise DataError("y and y_hat must be non-empty and of the same shape")
        out = np.mean(y, axis=-1) / np.mean(y_hat, axis=-1)
    return float(out) if np.ndim(out) == 0 else out


def data_factors(fit: FittedLine, x, y) -> dict:
    """All correction factors of ``fit`` on its fitting data ``x``, ``y``.

    Returns
    -------
    dict
        ``{"none": 1.0, "smearing": ..., "parametric": ..., "ratio": ...}``,
        floats (NaN when the fit is not estimable or has no log base).
    """
    out = {"none": 1.0}
    if fit.log_base is None or not fit.estimable:
        return out | {k: math.nan for k in ("smearing", "parametric", "ratio")}
    res = log_residuals(fit, x, y)
    # the ratio is unchanged by a common scale: dividing by base^max(log y) keeps
    # y and y_hat finite near the float limit (1.8e308), where their means overflow
    log_y = to_log(_check_values(y, "y", fit.log_base), fit.log_base)
    top = float(np.max(log_y))
    y_nat = fit.log_base ** (log_y - top)
    with np.errstate(over="ignore"):
        y_hat = fit.log_base ** (fit.intercept + fit.slope * to_log(x, fit.log_base) - top)
    out["smearing"] = correction_factor("smearing", resid_sd=fit.resid_sd,
                                        log_base=fit.log_base, residuals=res)
    out["parametric"] = correction_factor("parametric", resid_sd=fit.resid_sd,
                                          log_base=fit.log_base)
    out["ratio"] = correction_factor("ratio", resid_sd=fit.resid_sd, log_base=fit.log_base,
                                     y=y_nat, y_hat=y_hat)
    return out


def _factor_for(fit: FittedLine, correction: str, *, residuals, data, factor) -> float:
    if factor is not None:
        if correction == "none":
            raise ConfigError("factor cannot be given with correction='none'")
        return _check_factor(factor)
    if correction == "none":
        return 1.0
    if not fit.estimable:
        return math.nan
    carried = getattr(fit, f"{correction}_factor", None)   # set by scaling.fit_line
    if residuals is None and data is None and carried is not None:
        return float(carried)
    if data is not None:
        if not (isinstance(data, (tuple, list)) and len(data) == 2):
            raise ConfigError("data must be a pair (x, y) of the fitting data")
        return data_factors(fit, data[0], data[1])[correction]
    return correction_factor(correction, resid_sd=fit.resid_sd, log_base=fit.log_base,
                             residuals=residuals)


# --------------------------------------------------------------------------
# results


def _frozen(a) -> np.ndarray:
    a = np.array(a)
    a.setflags(write=False)
    return a


@dataclass(frozen=True, slots=True, kw_only=True)
class Prediction:
    """Predictions of y from x by one fitted line.

    Attributes
    ----------
    method : str
        Line method of the fit (``ols``, ``sma``, ``ma``).
    x : ndarray
        The x values asked for (natural units).
    y : ndarray
        Point estimates in natural units: the median base^(a + b X) times
        ``factor`` (the mean of y at x, unless ``correction`` is ``none``).
    y_low, y_high : ndarray
        Bounds of the ``interval`` at level ``confidence`` in natural units
        (confidence bounds multiplied by ``factor``; prediction bounds not;
        see the module docstring).
    interval : {"prediction", "confidence"}
    correction : {"smearing", "parametric", "ratio", "none"}
    factor : float
        The correction factor applied (1 for ``none``).
    confidence : float
    extrapolated : ndarray of bool
        True where x lies outside the fitted range of x (``fit.x_range``;
        all False when the fit has no range, e.g. fitted from moments alone).
    log_fit, log_se, log_low, log_high : ndarray
        Fitted value, its standard error (of the line, or of a new
        observation for ``prediction``) and the bounds on the log scale.
    log_base : float or None
    df : float
    """

    method: str
    x: np.ndarray
    y: np.ndarray
    y_low: np.ndarray
    y_high: np.ndarray
    interval: str
    correction: str
    factor: float
    confidence: float
    extrapolated: np.ndarray
    log_fit: np.ndarray
    log_se: np.ndarray
    log_low: np.ndarray
    log_high: np.ndarray
    log_base: float | None
    df: float

    def to_frame(self):
        """One row per x: ``x, y, y_low, y_high, interval, correction, extrapolated, method``."""
        import pandas as pd
        k = self.x.size
        return pd.DataFrame({
            "x": self.x, "y": self.y, "y_low": self.y_low, "y_high": self.y_high,
            "interval": [self.interval] * k, "correction": [self.correction] * k,
            "extrapolated": self.extrapolated.astype(bool), "method": [self.method] * k,
        })

    def summary(self) -> str:
        """A few lines of text, one per x."""
        from ..render.summaries import prediction_summary
        return prediction_summary(self)


@dataclass(frozen=True, slots=True, kw_only=True)
class InversePrediction:
    """Estimates of x from observed y by one fitted line.

    Attributes
    ----------
    method : str
    y : ndarray
        The observed y values (natural units).
    x : ndarray
        The line solved for x, back-transformed without correction.
    x_low, x_high : ndarray
        Interval bounds in natural units (NaN where unbounded).
    interval : {"prediction", "confidence"}
        ``prediction``: for the x of an individual whose y was observed;
        ``confidence``: for the x at which the line takes the value y.
    correction : str
        Always ``"none"``.
    confidence : float
    extrapolated : ndarray of bool
        True where y lies outside the fitted range of y.
    bounded : ndarray of bool
        False where the interval is unbounded (OLS slope not different from
        zero at this level).
    log_fit, log_low, log_high : ndarray
        Point estimate and bounds of X on the log scale.
    log_base : float or None
    """

    method: str
    y: np.ndarray
    x: np.ndarray
    x_low: np.ndarray
    x_high: np.ndarray
    interval: str
    correction: str
    confidence: float
    extrapolated: np.ndarray
    bounded: np.ndarray
    log_fit: np.ndarray
    log_low: np.ndarray
    log_high: np.ndarray
    log_base: float | None

    def to_frame(self):
        """One row per y: ``y, x, x_low, x_high, interval, correction, extrapolated, method``."""
        import pandas as pd
        k = self.y.size
        return pd.DataFrame({
            "y": self.y, "x": self.x, "x_low": self.x_low, "x_high": self.x_high,
            "interval": [self.interval] * k, "correction": [self.correction] * k,
            "extrapolated": self.extrapolated.astype(bool), "method": [self.method] * k,
        })

    def summary(self) -> str:
        """A few lines of text, one per y."""
        from ..render.summaries import inverse_prediction_summary
        return inverse_prediction_summary(self)


@dataclass(frozen=True, slots=True, kw_only=True)
class Accuracy:
    """Accuracy of a fit's predictions on a sample (normally its fitting data).

    Attributes
    ----------
    method : str
    n : int
    see : float
        Standard error of estimate on the log scale, sqrt(sum e^2 / (n - 2)).
    percent_see : float
        100 (base^SEE - 1): how far above the line one SEE reaches, in percent.
    percent_see_minus : float
        100 (1 - base^-SEE): how far below.
    percent_pe : float
        Mean absolute percent prediction error 100 mean |y - yhat| / yhat.
    correction : str
        Correction used for yhat in ``percent_pe``.
    factor : float
    log_base : float or None
    """

    method: str
    n: int
    see: float
    percent_see: float
    percent_see_minus: float
    percent_pe: float
    correction: str
    factor: float
    log_base: float | None

    def to_frame(self):
        import pandas as pd
        return pd.DataFrame([{
            "method": self.method, "n": self.n, "see": self.see,
            "percent_see": self.percent_see, "percent_see_minus": self.percent_see_minus,
            "percent_pe": self.percent_pe, "correction": self.correction,
            "log_base": base_label(self.log_base),
        }])

    def summary(self) -> str:
        """One line: SEE, %SEE and %PE."""
        from ..render.summaries import accuracy_summary
        return accuracy_summary(self)


@dataclass(frozen=True, slots=True, kw_only=True)
class LinePredictions:
    """Predictions of many fitted lines at the same values, one row per line.

    Made by :func:`predict_lines` (y from x) and :func:`inverse_predict_lines`
    (x from y); row ``i`` is what :func:`predict` / :func:`inverse_predict` give line ``i``.

    Attributes
    ----------
    given : ndarray (K,)
        The values asked about (x forward, y inverse), natural units.
    estimate, low, high : ndarray (F, K)
        Point estimates and interval bounds in natural units.
    extrapolated : ndarray of bool (F, K)
        True where the value lies outside the line's fitted range.
    bounded : ndarray of bool (F, K)
        False where an inverse interval is unbounded (all True forward).
    confidence : ndarray (F,)
    interval, correction : str
    """

    given: np.ndarray
    estimate: np.ndarray
    low: np.ndarray
    high: np.ndarray
    extrapolated: np.ndarray
    bounded: np.ndarray
    confidence: np.ndarray
    interval: str
    correction: str


# --------------------------------------------------------------------------
# the public functions


def _line_params(fit: FittedLine) -> dict:
    return {
        "intercept": fit.intercept, "slope": fit.slope, "slope_se": fit.slope_se,
        "resid_sd": fit.resid_sd, "n": float(fit.n),
        "mean_x": float(np.asarray(fit.moments.mean_x)), "df": float(fit.df),
    }


def _swapped_params(fit: FittedLine) -> dict:
    """The same symmetric line written as X on Y (slope 1/b); see module docstring."""
    b = fit.slope
    mean_x = float(np.asarray(fit.moments.mean_x))
    with np.errstate(divide="ignore", invalid="ignore"):
        return {
            "intercept": -fit.intercept / b, "slope": 1.0 / b,
            "slope_se": fit.slope_se / (b * b), "resid_sd": fit.resid_sd / abs(b),
            "n": float(fit.n), "mean_x": fit.intercept + b * mean_x, "df": float(fit.df),
        }


def _unlog(values, base):
    return values if base is None else np.power(base, values)


def predict(fit: FittedLine, x, *, correction: str = "smearing",
            interval: str = "prediction", confidence: float | None = None,
            residuals=None, data=None, factor: float | None = None) -> Prediction:
    """Predict y at ``x`` in natural units, with a confidence or prediction interval.

    Parameters
    ----------
    fit : LineFit
        Any method (``ols``, ``sma``, ``ma``).
    x : float or array_like
        Positive x values in natural units (logs when ``fit.log_base`` is None).
    correction : {"smearing", "parametric", "ratio", "none"}
        Back-transformation correction; see :func:`correction_factor`.
    interval : {"prediction", "confidence"}
        Interval for a new individual, or for the line (the mean).
    confidence : float, optional
        Level of the interval; defaults to ``fit.confidence``.
    residuals : array_like, optional
        Log-scale residuals of the fitting data (for ``smearing``).
    data : (x, y), optional
        The fitting data in natural units (for ``smearing`` or ``ratio``).
    factor : float, optional
        A correction factor computed earlier (e.g. saved by
        :func:`scaling.stats.lines.fit_to_dict`); overrides ``residuals`` and ``data``.

    Returns
    -------
    Prediction

    Warns
    -----
    ExtrapolationWarning
        When some x lie outside ``fit.x_range`` (they are flagged).
    DegenerateDataWarning
        When the fit is not estimable (the predictions are NaN).

    Notes
    -----
    Formulas, sources and how the correction applies to the bounds are in the
    module docstring of :mod:`scaling.stats.predictions`.  With ``fit.log_base`` None
    the values stay on the log scale and only ``correction='none'`` is allowed.
    """
    correction = _check_choice(correction, CORRECTIONS, "correction")
    interval = _check_choice(interval, INTERVALS, "interval")
    confidence = _check_confidence(confidence, fit)
    base = fit.log_base
    if base is None and correction != "none":
        raise ConfigError(f"correction {correction!r} needs a log base: values given as "
                          "logs are not back-transformed; use correction='none'")
    x = _check_values(x, "x", base)
    cf = _factor_for(fit, correction, residuals=residuals, data=data, factor=factor)
    extrapolated = _outside(x, fit.x_range)
    _warn_outside(extrapolated, fit.x_range, "x")
    if not fit.estimable:
        warnings.warn(f"{method_label(fit.method)} fit not estimable ({fit.note}): predictions are NaN",
                      DegenerateDataWarning, stacklevel=2)
    fitted, se, lo, hi = log_interval(to_log(x, base), confidence=confidence,
                                      interval=interval, **_line_params(fit))
    bound_cf = cf if interval == "confidence" else 1.0
    with np.errstate(over="ignore"):       # beyond 1.8e308: inf, with a warning, never 0
        y = cf * _unlog(fitted, base)
        y_low, y_high = bound_cf * _unlog(lo, base), bound_cf * _unlog(hi, base)
    if np.any(np.isinf(y_high) & np.isfinite(hi)):
        warnings.warn("some predictions exceed the largest floating-point number (about "
                      "1.8e308): they and their bounds are reported as inf; the log-scale "
                      "values (log_fit, log_low, log_high) are exact",
                      DegenerateDataWarning, stacklevel=2)
    return Prediction(
        method=fit.method, x=_frozen(x), y=_frozen(y),
        y_low=_frozen(y_low), y_high=_frozen(y_high),
        interval=interval, correction=correction, factor=float(cf), confidence=confidence,
        extrapolated=_frozen(extrapolated), log_fit=_frozen(fitted), log_se=_frozen(se),
        log_low=_frozen(lo), log_high=_frozen(hi), log_base=base, df=float(fit.df),
    )


def inverse_predict(fit: FittedLine, y, *, interval: str = "prediction",
                    confidence: float | None = None) -> InversePrediction:
    """Estimate x from observed ``y`` (e.g. body mass from a bone measurement).

    Parameters
    ----------
    fit : LineFit
    y : float or array_like
        Positive observed y in natural units (logs when ``fit.log_base`` is None).
    interval : {"prediction", "confidence"}
        ``prediction``: interval for the x of the individual whose y was
        observed; ``confidence``: for the x at which the line equals y.
    confidence : float, optional
        Defaults to ``fit.confidence``.

    Returns
    -------
    InversePrediction

    Warns
    -----
    ExtrapolationWarning
        When some y lie outside ``fit.y_range``.
    DegenerateDataWarning
        When an OLS interval is unbounded, or the fit is not estimable.

    Notes
    -----
    Point estimate: the line solved for X, back-transformed uncorrected.
    OLS: Fieller-type calibration interval (Draper & Smith 1998, sec. 3.2).
    SMA, MA: the symmetric line's forward interval with X and Y swapped
    (slope 1/b, residual SD s_r/|b|, var(1/b) = var(b)/b^4).  Details in the
    module docstring.
    """
    interval = _check_choice(interval, INTERVALS, "interval")
    confidence = _check_confidence(confidence, fit)
    base = fit.log_base
    y = _check_values(y, "y", base)
    extrapolated = _outside(y, fit.y_range)
    _warn_outside(extrapolated, fit.y_range, "y")
    if not fit.estimable:
        warnings.warn(f"{method_label(fit.method)} fit not estimable ({fit.note}): estimates are NaN",
                      DegenerateDataWarning, stacklevel=2)
    Y0 = to_log(y, base)
    if is_symmetric(fit.method):
        fitted, _, lo, hi = log_interval(Y0, confidence=confidence, interval=interval,
                                         **_swapped_params(fit))
    else:
        fitted, lo, hi = inverse_log_interval(Y0, confidence=confidence, interval=interval,
                                              **_line_params(fit))
    bounded = np.isfinite(lo) & np.isfinite(hi)
    if fit.estimable and not np.all(bounded):
        warnings.warn(f"the {100 * confidence:g}% inverse interval is unbounded: the "
                      f"{method_label(fit.method)} slope does not differ from 0 at this level",
                      DegenerateDataWarning, stacklevel=2)
    return InversePrediction(
        method=fit.method, y=_frozen(y), x=_frozen(_unlog(fitted, base)),
        x_low=_frozen(_unlog(lo, base)), x_high=_frozen(_unlog(hi, base)),
        interval=interval, correction="none", confidence=confidence,
        extrapolated=_frozen(extrapolated), bounded=_frozen(bounded),
        log_fit=_frozen(fitted), log_low=_frozen(lo), log_high=_frozen(hi), log_base=base,
    )


def _one_base(fits: list):
    if len(bases := {f.log_base for f in fits}) > 1:
        raise ConfigError("lines predicted together must share one log base")
    return bases.pop() if bases else 10.0


def _stacked(params) -> dict:
    """Per-line parameter dicts as (F, 1) columns (broadcast against (1, K) values)."""
    params = list(params)
    return {k: np.array([p[k] for p in params], dtype=float)[:, None] for k in params[0]}


def _ranges_outside(values: np.ndarray, ranges: list) -> np.ndarray:
    """(F, K) flags of :func:`_outside` for every line's range (None: never outside)."""
    lim = np.array([(np.nan, np.nan) if r is None else r[:2] for r in ranges]).reshape(-1, 2)
    return (values[None, :] < lim[:, :1]) | (values[None, :] > lim[:, 1:])


def predict_lines(fits, x, *, correction: str = "smearing", interval: str = "prediction",
                  factors=None) -> LinePredictions:
    """:func:`predict` for many lines at the same ``x``, in one array pass.

    Parameters
    ----------
    fits : sequence of LineFit
        Lines sharing one ``log_base``; each at its own ``confidence``.
    x, correction, interval
        As for :func:`predict`.
    factors : sequence, optional
        Per line, the ``factor`` argument of :func:`predict` (a saved factor or None).

    Returns
    -------
    LinePredictions
        Row ``i`` equals ``predict(fits[i], x, ..., factor=factors[i])`` to the
        last bit (same operations, elementwise); nothing is warned.
    """
    correction = _check_choice(correction, CORRECTIONS, "correction")
    interval = _check_choice(interval, INTERVALS, "interval")
    fits = list(fits)
    factors = [None] * len(fits) if factors is None else list(factors)
    base = _one_base(fits)
    if base is None and correction != "none":
        raise ConfigError(f"correction {correction!r} needs a log base: values given as "
                          "logs are not back-transformed; use correction='none'")
    x = _check_values(x, "x", base)
    if not fits:
        return replace(inverse_predict_lines([], x, interval=interval), correction=correction)
    level = np.array([_check_confidence(None, f) for f in fits])
    cf = np.array([_factor_for(f, correction, residuals=None, data=None, factor=k)
                   for f, k in zip(fits, factors)])[:, None]
    fitted, _, lo, hi = log_interval(to_log(x, base)[None, :], confidence=level[:, None],
                                     interval=interval, **_stacked(map(_line_params, fits)))
    bound_cf = cf if interval == "confidence" else 1.0
    with np.errstate(over="ignore"):
        y = cf * _unlog(fitted, base)
        y_low, y_high = bound_cf * _unlog(lo, base), bound_cf * _unlog(hi, base)
    return LinePredictions(given=x, estimate=y, low=y_low, high=y_high,
                           extrapolated=_ranges_outside(x, [f.x_range for f in fits]),
                           bounded=np.ones(y.shape, dtype=bool), confidence=level,
                           interval=interval, correction=correction)


def inverse_predict_lines(fits, y, *, interval: str = "prediction") -> LinePredictions:
    """:func:`inverse_predict` for many lines at the same ``y``, in one array pass.

    Parameters
    ----------
    fits : sequence of LineFit
        Lines sharing one ``log_base`` (symmetric lines and OLS each their own way).
    y, interval
        As for :func:`inverse_predict`.

    Returns
    -------
    LinePredictions
        ``estimate``, ``low``, ``high`` are x; row ``i`` equals
        ``inverse_predict(fits[i], y, ...)`` to the last bit; nothing is warned.
    """
    interval = _check_choice(interval, INTERVALS, "interval")
    fits = list(fits)
    base = _one_base(fits)
    y = _check_values(y, "y", base)
    fitted, lo, hi = (np.full((len(fits), y.size), np.nan) for _ in range(3))
    level = np.array([_check_confidence(None, f) for f in fits])
    Y0 = to_log(y, base)[None, :]
    symmetric = np.array([bool(is_symmetric(f.method)) for f in fits], dtype=bool)
    for sym in (True, False):
        idx = np.flatnonzero(symmetric == sym)
        if not idx.size:
            continue
        if sym:
            params = _stacked([_swapped_params(fits[i]) for i in idx])
            f_, _, l_, h_ = log_interval(Y0, confidence=level[idx][:, None],
                                         interval=interval, **params)
        else:
            params = _stacked([_line_params(fits[i]) for i in idx])
            f_, l_, h_ = inverse_log_interval(Y0, confidence=level[idx][:, None],
                                              interval=interval, **params)
        fitted[idx], lo[idx], hi[idx] = f_, l_, h_
    with np.errstate(over="ignore"):
        x, x_low, x_high = (_unlog(v, base) for v in (fitted, lo, hi))
    return LinePredictions(given=y, estimate=x, low=x_low, high=x_high,
                           extrapolated=_ranges_outside(y, [f.y_range for f in fits]),
                           bounded=np.isfinite(lo) & np.isfinite(hi), confidence=level,
                           interval=interval, correction="none")


def accuracy(fit: FittedLine, x, y, *, correction: str = "none") -> Accuracy:
    """SEE, %SEE and %PE of ``fit`` on the sample ``x``, ``y`` (its fitting data).

    Parameters
    ----------
    fit : LineFit
    x, y : array_like
        Natural units.
    correction : {"none", "smearing", "parametric", "ratio"}
        Correction of the predictions yhat used in %PE (factor computed on
        ``x``, ``y``).  Default ``none`` (yhat is the back-transformed line).

    Returns
    -------
    Accuracy

    Notes
    -----
    SEE = sqrt(sum e^2/(n - 2)), e the vertical log-scale residuals;
    %SEE = 100 (base^SEE - 1), %SEE- = 100 (1 - base^-SEE);
    %PE = 100 mean |y - yhat|/yhat (Smith 1984, Am. J. Physiol. 246:R152;
    from memory).  With no log base the percentages are NaN.  n - 2 degrees of
    freedom are right for the fitting data; on a separate test sample SEE
    is then slightly inflated.
    """
    correction = _check_choice(correction, CORRECTIONS, "correction")
    base = fit.log_base
    res = log_residuals(fit, x, y)
    n = res.size
    if n < 3:
        raise DataError(f"accuracy needs at least 3 observations, not {n}")
    see = float(np.sqrt(np.sum(res * res) / (n - 2)))
    if base is None:
        if correction != "none":
            raise ConfigError(f"correction {correction!r} needs a log base: values given as "
                              "logs are not back-transformed; use correction='none'")
        return Accuracy(method=fit.method, n=n, see=see, percent_see=math.nan,
                        percent_see_minus=math.nan, percent_pe=math.nan,
                        correction=correction, factor=1.0, log_base=None)
    cf = data_factors(fit, x, y)[correction]
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    y_hat = cf * base ** (fit.intercept + fit.slope * to_log(x, base))
    return Accuracy(
        method=fit.method, n=n, see=see,
        percent_see=100 * (base ** see - 1), percent_see_minus=100 * (1 - base ** -see),
        percent_pe=float(100 * np.mean(np.abs(y - y_hat) / y_hat)),
        correction=correction, factor=float(cf), log_base=base,
    )


# --------------------------------------------------------------------------
# saving and restoring a fit


def saved_factor(d: dict, correction: str):
    """The correction factor stored with a saved fit (:func:`scaling.stats.lines.fit_to_dict`).

    None for ``parametric`` and ``none`` (computed from the fit itself); the
    stored ``smearing_factor`` / ``ratio_factor`` otherwise.

    Raises
    ------
    ConfigError
        If the needed factor was not saved.
    """
    if correction not in ("smearing", "ratio"):
        return None
    factor = d.get(f"{correction}_factor")
    if factor is None:
        raise ConfigError(f"the saved fit has no {correction}_factor; "
                          "use correction='parametric' or 'none'")
    return factor
