"""Is the scatter about y = a x^b multiplicative (lognormal) or additive (normal)?

:func:`compare_error_structure` asks whether the scatter around the power
law is multiplicative (lognormal, the assumption behind fitting on logs) or
additive (normal on the arithmetic scale).

Error structure
    Xiao, White, Hooten & Durham (2011), *Ecology* 92:1887: fit
    y = a x^b + e, e ~ N(0, s^2) by nonlinear least squares
    (Levenberg-Marquardt, :func:`scaling.stats.nonlinear.fit_nonlinear`, the steps of
    ``scipy.optimize.curve_fit``, started from the log-scale OLS fit) and
    log y = log a + b log x + e, e ~ N(0, s^2) by OLS on natural logs; both
    maximised likelihoods are written for y on the arithmetic scale (the
    lognormal one includes the Jacobian -sum log y_i) and compared by
    AICc = -2 logL + 2k + 2k(k+1)/(n-k-1) with k = 3 (a, b, s).  A
    difference below 2 is reported as no clear preference (a common rule
    of thumb; Burnham & Anderson 2002).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np

from ..errors import DataError, DegenerateDataWarning
from .nonlinear import fit_nonlinear

__all__ = ["ErrorModel", "ErrorStructure", "compare_error_structure"]


# --------------------------------------------------------------------------
# error structure


@dataclass(frozen=True, slots=True, kw_only=True)
class ErrorModel:
    """One error model for y = a x^b.

    Attributes
    ----------
    name : str
        ``"additive"`` (normal error on y) or ``"multiplicative"``
        (lognormal error, i.e. normal error on log y).
    a, b : float
        Coefficient (natural units) and exponent.
    sigma : float
        Maximum-likelihood SD of the error (on y for additive, on ln y for
        multiplicative).
    log_likelihood : float
        Of y on the arithmetic scale (Jacobian included for lognormal).
    aicc : float
    converged : bool
    """

    name: str
    a: float
    b: float
    sigma: float
    log_likelihood: float
    aicc: float
    converged: bool = True


@dataclass(frozen=True, slots=True, kw_only=True)
class ErrorStructure:
    """Comparison of additive and multiplicative error (Xiao et al. 2011).

    Attributes
    ----------
    n : int
    additive, multiplicative : ErrorModel
    delta_aicc : float
        AICc(additive) - AICc(multiplicative): positive favours the
        multiplicative (log-scale) model.
    weight_multiplicative : float
        Akaike weight of the multiplicative model.
    preferred : str
        ``"multiplicative"``, ``"additive"`` or ``"neither"`` (|delta| < 2);
        ``"multiplicative"`` also when the additive model did not converge
        (``additive.converged`` False).  The words are made by
        :func:`scaling.render.findings.error_structure_verdict`.
    """

    n: int
    additive: ErrorModel
    multiplicative: ErrorModel
    delta_aicc: float
    weight_multiplicative: float
    preferred: str

    def to_frame(self):
        """One row per model."""
        import pandas as pd
        rows = []
        for m in (self.additive, self.multiplicative):
            rows.append({"error_model": m.name, "a": m.a, "b": m.b, "sigma": m.sigma,
                         "log_likelihood": m.log_likelihood, "aicc": m.aicc,
                         "preferred": m.name == self.preferred})
        return pd.DataFrame(rows)


def _aicc(loglik: float, k: int, n: int) -> float:
    return -2 * loglik + 2 * k + 2 * k * (k + 1) / (n - k - 1)


def _polyfit_line(lx: np.ndarray, ly: np.ndarray) -> tuple:
    """``np.polyfit(lx, ly, 1)`` (slope, intercept) by the same steps -- a Vandermonde
    matrix scaled by its column norms, solved by ``np.linalg.lstsq`` -- so the same
    bits, without the two copies of the data polyfit makes (``lx``, ``ly``: float64,
    no negative zero, as logs are)."""
    lhs = np.empty((lx.size, 2))   # np.vander(lx, 2): the columns lx and 1, built directly
    lhs[:, 0] = lx
    lhs[:, 1] = 1.0
    scale = np.sqrt((lhs * lhs).sum(axis=0))
    lhs /= scale
    c, _, rank, _ = np.linalg.lstsq(lhs, ly, len(lx) * np.finfo(lx.dtype).eps)
    if rank != 2:
        warnings.warn("Polyfit may be poorly conditioned", np.exceptions.RankWarning,
                      stacklevel=3)
    c = (c.T / scale).T
    return c[0], c[1]


def compare_error_structure(x, y) -> ErrorStructure:
    """Is the scatter about y = a x^b multiplicative or additive?

    Parameters
    ----------
    x, y : array_like
        Positive values in natural units.

    Returns
    -------
    ErrorStructure

    Notes
    -----
    Xiao, White, Hooten & Durham (2011), *Ecology* 92:1887; formulas in the
    module docstring.  Nonlinear least squares uses
    :func:`scaling.stats.nonlinear.fit_nonlinear` (``scipy.optimize.curve_fit``'s
    numbers) from the log-scale OLS estimates; if it
    fails, the additive model is reported with NaN and the multiplicative
    model is preferred by default, with a DegenerateDataWarning.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if x.ndim != 1 or x.shape != y.shape:
        raise DataError("x and y must be one-dimensional and of equal length")
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
        raise DataError("x and y must be finite numbers (no NaN or inf)")
    if np.any(x <= 0) or np.any(y <= 0):
        raise DataError("x and y must be positive: the multiplicative model needs logarithms")
    n = x.size
    k = 3
    if n <= k + 1:
        raise DataError(f"x and y need at least {k + 2} rows to compare error structures, not {n}")
    lx, ly = np.log(x), np.log(y)
    if np.ptp(lx) == 0:
        raise DataError("x does not vary: no power law can be fitted")

    # multiplicative: OLS on natural logs
    b_log, ln_a = _polyfit_line(lx, ly)
    res_log = ly - ln_a - b_log * lx
    s2_log = float(np.mean(res_log ** 2))
    if s2_log <= 1e-20 * max(float(np.var(ly)), np.finfo(float).tiny):
        raise DataError("the points lie exactly on a power law; no error structure to compare")
    ll_log = -n / 2 * (math.log(2 * math.pi * s2_log) + 1) - float(np.sum(ly))
    mult = ErrorModel(name="multiplicative", a=float(math.exp(ln_a)), b=float(b_log),
                      sigma=math.sqrt(s2_log), log_likelihood=ll_log, aicc=_aicc(ll_log, k, n))

    # additive: nonlinear least squares on the arithmetic scale.  It is fitted to
    # x/cx and y/cy (cx, cy the geometric means), so values near 1e-300 or 1e300 do
    # not underflow or overflow when squared; y = a x^b becomes y/cy = a' (x/cx)^b
    # with a = a' cy / cx^b, and every log-likelihood of y/cy is that of y plus
    # n ln cy (the Jacobian), the same shift for both models, so AICc differences
    # are unchanged (exact law of a change of scale).
    ln_cx, ln_cy = float(np.mean(lx)), float(np.mean(ly))
    xs, ys = np.exp(lx - ln_cx), np.exp(ly - ln_cy)
    del lx, ly, res_log   # the nonlinear fit's own arrays are the peak on many points

    def power(xv, a, b):
        out = np.power(xv, b)
        out *= a   # in place: a * x^b with one array of n points, not two
        return out

    converged = True
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            with np.errstate(over="ignore", invalid="ignore"):
                a_s, b_nl = fit_nonlinear(
                    power, xs, ys, (math.exp(ln_a + b_log * ln_cx - ln_cy), b_log),
                    max_evaluations=5000).params
        rss_s = float(np.sum((ys - power(xs, a_s, b_nl)) ** 2))
        if not np.isfinite(rss_s) or rss_s <= 0 or a_s == 0:
            raise RuntimeError("non-finite residuals")
    except RuntimeError:
        converged = False
        a_nl = b_nl = math.nan
        warnings.warn("compare_error_structure: the nonlinear (additive-error) fit did not "
                      "converge", DegenerateDataWarning, stacklevel=2)
    if converged:
        with np.errstate(over="ignore"):
            a_nl = math.copysign(float(np.exp(math.log(abs(a_s)) + ln_cy - b_nl * ln_cx)), a_s)
            sigma_nl = float(np.exp(0.5 * math.log(rss_s / n) + ln_cy))
        ll_nl = -n / 2 * (math.log(2 * math.pi * rss_s / n) + 1) - n * ln_cy
        add = ErrorModel(name="additive", a=float(a_nl), b=float(b_nl), sigma=sigma_nl,
                         log_likelihood=ll_nl, aicc=_aicc(ll_nl, k, n))
        delta = add.aicc - mult.aicc
        w_mult = 1.0 / (1.0 + math.exp(-delta / 2)) if delta > -1400 else 0.0
    else:
        add = ErrorModel(name="additive", a=math.nan, b=math.nan, sigma=math.nan,
                         log_likelihood=math.nan, aicc=math.nan, converged=False)
        delta, w_mult = math.nan, math.nan

    if not converged:
        preferred = "multiplicative"
    elif abs(delta) < 2:
        preferred = "neither"
    elif delta > 0:
        preferred = "multiplicative"
    else:
        preferred = "additive"
    return ErrorStructure(n=n, additive=add, multiplicative=mult, delta_aicc=delta,
                          weight_multiplicative=w_mult, preferred=preferred)

