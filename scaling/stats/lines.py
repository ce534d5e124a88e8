"""Line estimators on the log scale: OLS, SMA and MA, read from moments.

Each method is a :class:`LineMethod`: three small vectorised functions of
:class:`~scaling.stats.moments.Moments` (slope, slope test, slope interval) plus
the slope variance used for the intercept interval.  :func:`fit_moments`
adds intercepts, intervals and correlations for any number of groups at
once; :func:`fit_line` packages one sample as a :class:`LineFit`.

Notation: X = log x, Y = log y; n, Sxx, Syy, Sxy the size and centred sums;
r = Sxy / sqrt(Sxx Syy); t and F quantiles have n - 2 degrees of freedom.

OLS (Model I regression of Y on X)
    b = Sxy/Sxx, s^2 = (Syy - b Sxy)/(n - 2), se(b) = sqrt(s^2/Sxx),
    test of b = b0 by t = (b - b0)/se(b); intercept interval
    a +- t * sqrt(s^2 (1/n + mean_x^2/Sxx)).  (Textbook; e.g. Sokal & Rohlf,
    Biometry, 4th ed., 2012, ch. 14.)
SMA (standardised major axis)
    b = sign(r) sqrt(Syy/Sxx).  Test of b = b0: the correlation r* of
    (Y - b0 X) with (Y + b0 X) is zero under H0; t = r* sqrt((n-2)/(1-r*^2))
    on n - 2 df (equivalently F(1, n-2) = t^2).  Interval by inverting that
    test: b (sqrt(B+1) -+ sqrt(B)), B = (1 - r^2) F_{1-alpha}(1, n-2)/(n-2).
    Warton, Wright, Falster & Westoby (2006) Biol. Rev. 81:259, section on
    inference for one line.
    r* is also zero at -b0, so that test alone cannot see the sign.  A b0
    of the other sign than the fit is rejected when either that test or the
    test of zero correlation (t_r = r sqrt((n-2)/(1-r^2))) rejects: t is the
    larger of the two (both on n - 2 df).  The accepted set is then the
    interval above when the correlation is significant, and that interval
    together with its mirror image -hi..-lo when it is not; the latter is
    reported as the hull -hi..hi with a note naming the two ranges (p =
    1 - confidence at all four ends).  Seeded coverage at correlation 0.3:
    0.945 (n = 8) and 0.950 (n = 20) for the accepted set (tests).
MA (major axis)
    b is the direction of the first eigenvector of [[Sxx, Sxy], [Sxy, Syy]].
    Test of b = b0: correlation of (Y - b0 X) with (X + b0 Y), t as for SMA.
    Interval by inverting that test.  Writing theta = atan(b) and
    l1 >= l2 for the eigenvalues, the correlation after rotating by
    theta + d is zero-centred and r*^2 = u/(l1 l2 + u) with
    u = (l1 - l2)^2 sin^2(2d)/4, so the bounds are tan(theta -+ d) with
    sin^2(2d) = 4 F l1 l2 / ((n - 2)(l1 - l2)^2); if that exceeds 1, or
    theta + d passes the vertical, the interval is unbounded (that end is
    reported as -inf or +inf; beyond the vertical it would continue into
    slopes of the other sign).
    (Same test as Warton et al. 2006; the closed form is our derivation,
    checked in the tests by the p-value at the bounds.)  r* is zero along
    the minor axis too (|d| = pi/2): a b0 on the minor-axis side (its
    direction spreads less than its perpendicular, |d| > pi/4) gets the
    largest statistic of the major side, r = (l1 - l2)/(l1 + l2), so it is
    rejected exactly when the two axes differ significantly; the arc
    interval stays the exact inversion.  The slope is computed as
    (d + sqrt(d^2 + 4 Sxy^2))/(2 Sxy) for d = Syy - Sxx >= 0 and as the
    equal 2 Sxy/(sqrt(d^2 + 4 Sxy^2) - d) for d < 0 (no cancellation).

Exact and constant data: a fit whose points lie on the line up to rounding
(:func:`exact_fit`) gets the exact slope, zero-width intervals and the note
"no residual scatter: an exact power law"; its test gives p = 1 for b0 equal
to the slope up to rounding and p = 0 otherwise.  No variation in x or y is
judged relative to the scale of the values (see :func:`fit_notes`).

Intercepts for SMA and MA: a = mean_y - b mean_x with
var(a) = s_r^2/n + mean_x^2 var(b), where s_r^2 = sum (Y - b X - a)^2/(n - 2)
(Warton et al. 2006, intercept interval; means are independent of the
sample covariance for bivariate normal data).  var(b) is the large-sample
variance consistent with the slope test: b^2 (1 - r^2)/(n - 2) for SMA,
(1 + b^2)^2 l1 l2 / ((n - 2)(l1 - l2)^2) for MA (delta method on theta).
Intervals are a +- t_{1-alpha/2}(n-2) sqrt(var(a)).

Other methods (fitted in :mod:`scaling.stats.robust`, listed in
:data:`METHOD_INFO`) return the same :class:`LineFit`;
:meth:`LineFit.test_slope` then uses the test whose inversion is the
reported interval (see its docstring): Deming, the MA test after rescaling
by lambda; Theil-Sen, Kendall's S of (X, Y - b0 X) as in Sen (1968);
Siegel and robust SMA/MA, the percentile-bootstrap p-value.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
from scipy import stats

from ._display import frame_html, short_repr
from ..errors import ConfigError, DataError, DegenerateDataWarning
from .logscale import base_label, log_word, parse_log_base, to_log  # noqa: F401 -- re-exported
from .moments import Moments, moments as _moments
from .predictions import inverse_predict as _inverse_predict, predict as _predict
from .schema import CATALOGUE, is_symmetric, method_label, check_confidence, fraction_value
# Sentences live in wording; these names stay importable from lines (aliases).
from ..render.wording import (BOTH_SIGNS_NOTE, EXACT_NOTE, describe_test, format_p,  # noqa: F401
                      p_text, verdict_phrase)

__all__ = [
    "ConfidenceInterval",
    "LineFit",
    "SlopeTest",
    "LineMethod",
    "METHODS",
    "METHOD_INFO",
    "method_label",
    "is_symmetric",
    "fit_line",
    "fit_moments",
    "slope_test_statistic",
    "parse_log_base",
    "base_label",
    "log_word",
    "exponent_value",
    "exact_fit",
    "EXACT_NOTE",
    "BOTH_SIGNS_NOTE",
    "to_log",
]

MIN_N = 3


# --------------------------------------------------------------------------
# exponents


def exponent_value(exponent) -> float:
    """A hypothesised exponent as a float: a number, or a fraction written "3/4".

    Accepts what the configuration accepts for an exponent.

    Raises
    ------
    ConfigError
        If ``exponent`` is neither a finite number nor such a fraction.
    """
    try:
        value = fraction_value(exponent)
    except ValueError:
        raise ConfigError(f"cannot read exponent {exponent!r} as a fraction") from None
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)) \
            or not math.isfinite(value):
        raise ConfigError(f"exponent must be a number or a fraction like '3/4', not {exponent!r}")
    return float(value)


# --------------------------------------------------------------------------
# the estimators, vectorised over moments


def _sign(m: Moments) -> np.ndarray:
    return np.sign(m.sxy)


def _ols_slope(m: Moments) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return m.sxy / m.sxx


def _ols_slope_var(m: Moments, b: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        s2 = (m.syy - b * m.sxy) / (m.n - 2)
        return np.maximum(s2, 0.0) / m.sxx


def _ols_test(m: Moments, b0) -> np.ndarray:
    b = _ols_slope(m)
    with np.errstate(divide="ignore", invalid="ignore"):
        return (b - b0) / np.sqrt(_ols_slope_var(m, b))


def _ols_bounds(m: Moments, tcrit: np.ndarray):
    b = _ols_slope(m)
    half = tcrit * np.sqrt(_ols_slope_var(m, b))
    return b - half, b + half


def _sma_slope(m: Moments) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return _sign(m) * np.sqrt(m.syy / m.sxx)


def _sma_slope_var(m: Moments, b: np.ndarray) -> np.ndarray:
    r2 = m.r ** 2
    with np.errstate(divide="ignore", invalid="ignore"):
        return b * b * (1.0 - r2) / (m.n - 2)


def _corr_to_t(c, va, vb, n) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        rho = c / np.sqrt(va * vb)
        rho = np.clip(rho, -1.0, 1.0)
        return rho * np.sqrt((n - 2) / (1.0 - rho * rho))


def _corr_t(m: Moments) -> np.ndarray:
    """t of the test of zero correlation between X and Y (n - 2 df)."""
    return _corr_to_t(m.sxy, m.sxx, m.syy, m.n)


def _sma_test(m: Moments, b0) -> np.ndarray:
    b0 = np.asarray(b0, dtype=float)
    c = m.syy - b0 * b0 * m.sxx
    va = m.syy - 2 * b0 * m.sxy + b0 * b0 * m.sxx
    vb = m.syy + 2 * b0 * m.sxy + b0 * b0 * m.sxx
    # Oriented so that t > 0 means the fitted slope lies above b0, as for OLS.
    t_ratio = _sign(m) * _corr_to_t(c, va, vb, m.n)
    # The ratio test sees only |b0|.  A slope of the other sign than the fit
    # also needs the sign of the correlation to be undetermined: it is
    # rejected when either test rejects (t is the larger of the two).
    opposite = (b0 * _sign(m)) < 0
    t_corr = np.abs(_corr_t(m)) * _sign(m)
    with np.errstate(invalid="ignore"):
        use_corr = opposite & (np.abs(t_corr) > np.abs(t_ratio))
    return np.where(use_corr, t_corr, t_ratio)


def _sma_bounds(m: Moments, tcrit: np.ndarray):
    b = _sma_slope(m)
    with np.errstate(divide="ignore", invalid="ignore"):
        big_b = (1.0 - m.r ** 2) * tcrit ** 2 / (m.n - 2)
    lo = b * (np.sqrt(big_b + 1) - np.sqrt(big_b))
    hi = b * (np.sqrt(big_b + 1) + np.sqrt(big_b))
    lo, hi = np.minimum(lo, hi), np.maximum(lo, hi)
    # Correlation not significant: slopes of the other sign are accepted too
    # (the mirror image of the interval); report the hull -top .. top.
    with np.errstate(invalid="ignore"):
        both = np.abs(_corr_t(m)) < tcrit
    top = np.maximum(np.abs(lo), np.abs(hi))
    return np.where(both, -top, lo), np.where(both, top, hi)


def _eigen(m: Moments):
    half_trace = (m.sxx + m.syy) / 2
    disc = np.sqrt(((m.sxx - m.syy) / 2) ** 2 + m.sxy ** 2)
    # The covariance matrix is positive semi-definite: l2 < 0 is rounding
    # (collinear data) and would turn the interval and SE into NaN.
    return half_trace + disc, np.maximum(half_trace - disc, 0.0)


def _ma_slope(m: Moments) -> np.ndarray:
    d = m.syy - m.sxx
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        root = np.hypot(d, 2 * m.sxy)
        # Two algebraically equal forms; each avoids cancellation on its side
        # of d = 0 (for d < 0, d + root loses every digit when Sxy is tiny).
        return np.where(d >= 0, (d + root) / (2 * m.sxy), 2 * m.sxy / (root - d))


def _ma_slope_var(m: Moments, b: np.ndarray) -> np.ndarray:
    l1, l2 = _eigen(m)
    with np.errstate(divide="ignore", invalid="ignore"):
        var_theta = l1 * l2 / ((m.n - 2) * (l1 - l2) ** 2)
    return (1 + b * b) ** 2 * var_theta


def _ma_test(m: Moments, b0) -> np.ndarray:
    b0 = np.asarray(b0, dtype=float)
    c = m.sxy * (1 - b0 * b0) + b0 * (m.syy - m.sxx)
    va = m.syy - 2 * b0 * m.sxy + b0 * b0 * m.sxx
    vb = m.sxx + 2 * b0 * m.sxy + b0 * b0 * m.syy
    t = _corr_to_t(c, va, vb, m.n)
    # The correlation is zero along the minor axis too.  A b0 whose direction
    # has less spread than its perpendicular (va > vb) lies on the minor-axis
    # side: give it the largest statistic of the major side (45 degrees off
    # the fitted axis), r = (l1 - l2)/(l1 + l2), i.e. reject it exactly when
    # the two axes differ significantly.  The arc interval stays the inversion.
    l1, l2 = _eigen(m)
    with np.errstate(divide="ignore", invalid="ignore"):
        t_max = _corr_to_t(l1 - l2, l1 + l2, l1 + l2, m.n)
        minor = va > vb
        side = np.sign(_ma_slope(m) - b0)
    return np.where(minor, side * np.abs(t_max), t)


def _ma_bounds(m: Moments, tcrit: np.ndarray):
    b = _ma_slope(m)
    theta = np.arctan(b)
    l1, l2 = _eigen(m)
    with np.errstate(divide="ignore", invalid="ignore"):
        s2 = 4 * tcrit ** 2 * l1 * l2 / ((m.n - 2) * (l1 - l2) ** 2)
        delta = 0.5 * np.arcsin(np.sqrt(np.where(s2 <= 1, s2, np.nan)))
    # The acceptance region is an arc of directions.  When it passes the
    # vertical, slopes beyond it are accepted without limit: report that end
    # as -inf/+inf (the arc then continues into slopes of the other sign,
    # which a single interval cannot show).  With s2 > 1 every slope is accepted.
    lo_angle, hi_angle = theta - delta, theta + delta
    everything = np.isfinite(theta) & (s2 > 1)
    lo = np.where((lo_angle <= -np.pi / 2) | everything, -np.inf, np.tan(lo_angle))
    hi = np.where((hi_angle >= np.pi / 2) | everything, np.inf, np.tan(hi_angle))
    return lo, hi


@dataclass(frozen=True, slots=True)
class LineMethod:
    """One moment-based line method, as vectorised functions of moments.

    Its name, label and symmetry are the catalogue's (:data:`scaling.stats.schema.
    CATALOGUE`); adding a moment method means one catalogue entry, these
    four functions and one entry in :data:`METHODS`; intercepts, intervals,
    tests and packaging follow.
    """

    name: str
    slope: Callable[[Moments], np.ndarray]
    slope_var: Callable[[Moments, np.ndarray], np.ndarray]
    test: Callable[[Moments, object], np.ndarray]
    bounds: Callable[[Moments, np.ndarray], tuple]

    @property
    def label(self) -> str:
        return CATALOGUE[self.name].label

    @property
    def symmetric(self) -> bool:
        """True if swapping x and y inverts the slope."""
        return CATALOGUE[self.name].symmetric


METHODS: dict[str, LineMethod] = {
    "ols": LineMethod("ols", _ols_slope, _ols_slope_var, _ols_test, _ols_bounds),
    "sma": LineMethod("sma", _sma_slope, _sma_slope_var, _sma_test, _sma_bounds),
    "ma": LineMethod("ma", _ma_slope, _ma_slope_var, _ma_test, _ma_bounds),
}


#: Every method name a fit may carry -> (label, symmetric): an alias kept for
#: old imports, read from the one catalogue in :mod:`scaling.stats.schema`.
METHOD_INFO: dict[str, tuple[str, bool]] = {
    name: (info.label, info.symmetric) for name, info in CATALOGUE.items()}


def get_method(method: str) -> LineMethod:
    """The moment formulas of ``method`` (:data:`METHODS`); ConfigError naming them if unknown."""
    try:
        return METHODS[method]
    except (KeyError, TypeError):
        raise ConfigError(
            f"method must be one of {', '.join(METHODS)}, not {method!r}"
        ) from None


def fit_notes(m: Moments, method: str) -> np.ndarray:
    """Why a fit cannot be estimated ("" where it can), per group."""
    n = np.atleast_1d(m.n)
    sxx, syy, sxy = (np.atleast_1d(a) for a in (m.sxx, m.syy, m.sxy))
    notes = np.full(n.shape, "", dtype=object)
    # No variation relative to the scale of the values: logs of one repeated
    # value (y = 0.3 in every row) differ by rounding only.
    tiny_x = sxx <= (n * (1e-12 * (np.abs(np.atleast_1d(m.mean_x)) + 1.0)) ** 2)
    tiny_y = syy <= (n * (1e-12 * (np.abs(np.atleast_1d(m.mean_y)) + 1.0)) ** 2)
    notes[tiny_y & ~tiny_x] = "y does not vary: no line can be fitted"
    notes[tiny_x] = "x does not vary: no line can be fitted"
    if method != "ols":
        notes[(sxy == 0) & (notes == "")] = (
            f"x and y are uncorrelated: the {method.upper()} slope is undefined")
    notes[n < MIN_N] = f"n = {{n}} < {MIN_N}: too few points to fit a line"
    for i in np.flatnonzero(n < MIN_N):
        notes[i] = notes[i].format(n=int(n[i]))
    return notes


def exact_fit(m: Moments) -> np.ndarray:
    """True where the points lie on a straight line up to rounding (r = +-1).

    The residual share 1 - r^2 is compared with what rounding the logs to
    double precision leaves: about n (eps |X|)^2 / Sxx + n (eps |Y|)^2 / Syy,
    with a generous factor (1e4) and a floor of 1e-12.
    """
    eps = np.finfo(float).eps
    with np.errstate(divide="ignore", invalid="ignore"):
        one_minus = 1.0 - (m.sxy * m.sxy) / (m.sxx * m.syy)
        sx = np.abs(m.mean_x) + np.sqrt(m.sxx / m.n)
        sy = np.abs(m.mean_y) + np.sqrt(m.syy / m.n)
        tol = 1e-12 + 1e4 * eps * eps * m.n * (sx * sx / m.sxx + sy * sy / m.syy)
        return np.asarray((m.sxx > 0) & (m.syy > 0) & (one_minus <= tol))


def slope_test_statistic(m: Moments, method: str, b0) -> tuple:
    """t statistic, df and two-sided p-value of the test of slope = ``b0``.

    Vectorised over moments.  For SMA and MA the statistic is the
    correlation test of Warton et al. (2006) written as a t on n - 2 df
    (F(1, n - 2) = t^2).  A positive t means the fitted slope lies above b0.
    """
    spec = get_method(method)
    t = spec.test(m, b0)
    # Exact fit (no residual scatter): the slope is known; b0 equal to it up
    # to rounding is accepted (t = 0, p = 1), any other value rejected.
    exact = exact_fit(m)
    if np.any(exact):
        b = spec.slope(m)
        with np.errstate(invalid="ignore"):
            same = np.abs(b - b0) <= 1e-9 * np.maximum(1.0, np.abs(b))
        t = np.where(exact, np.where(same, 0.0, np.sign(b - b0) * np.inf), t)
    df = m.n - 2
    with np.errstate(invalid="ignore"):
        p = 2 * stats.t.sf(np.abs(t), df)
    return t, df, p


def fit_moments(m: Moments, method: str, *, confidence: float = 0.95) -> dict:
    """Fit ``method`` to every group of moments at once.

    Returns
    -------
    dict of ndarray
        ``slope, slope_low, slope_high, slope_se, intercept, intercept_low,
        intercept_high, intercept_se, r, r2, resid_sd, df, note`` with the shape of
        ``m.n``.  Estimates are NaN where ``note`` is not empty.
    """
    spec = get_method(method)
    confidence = check_confidence(confidence)
    df = m.n - 2
    with np.errstate(invalid="ignore"):
        tcrit = stats.t.ppf(0.5 + confidence / 2, df)
    b = spec.slope(m)
    lo, hi = spec.bounds(m, tcrit)
    var_b = spec.slope_var(m, b)
    exact = exact_fit(m) & np.isfinite(b)
    if np.any(exact):
        # Zero-width intervals at the exact slope (rounding aside).
        lo, hi = np.where(exact, b, lo), np.where(exact, b, hi)
        var_b = np.where(exact, 0.0, var_b)
    with np.errstate(divide="ignore", invalid="ignore"):
        a = m.mean_y - b * m.mean_x
        resid_ss = np.maximum(m.syy - 2 * b * m.sxy + b * b * m.sxx, 0.0)
        resid_var = resid_ss / df
        if method == "ols":
            var_a = resid_var * (1 / m.n + m.mean_x ** 2 / m.sxx)
        else:
            var_a = resid_var / m.n + m.mean_x ** 2 * var_b
        se_a = np.sqrt(var_a)
    if np.any(exact):
        se_a = np.where(exact, 0.0, se_a)
    r = m.r
    out = {
        "slope": b,
        "slope_low": lo,
        "slope_high": hi,
        "slope_se": np.sqrt(var_b),
        "intercept": a,
        "intercept_low": a - tcrit * se_a,
        "intercept_high": a + tcrit * se_a,
        "intercept_se": se_a,
        "r": r,
        "r2": r * r,
        "resid_sd": np.sqrt(resid_var),
        "df": df,
    }
    notes = fit_notes(m, method).reshape(np.shape(m.n))
    bad = notes != ""
    for key in out:
        if key != "df":
            out[key] = np.where(bad, np.nan, np.asarray(out[key], dtype=float))
    out["note"] = notes
    # A bounded estimate with an unbounded MA interval is estimable; say so.
    unbounded = ~bad & ~(np.isfinite(out["slope_low"]) & np.isfinite(out["slope_high"]))
    if np.any(unbounded):
        notes = notes.copy()
        notes[unbounded] = "slope interval unbounded (correlation too weak)"
        out["note"] = notes
    both = ~bad & (out["slope_low"] < 0) & (out["slope_high"] > 0) & (out["note"] == "")
    if method == "sma" and np.any(both):
        # The accepted set is two ranges, -top..-inner and inner..top; the
        # interval reports their hull, the note the gap (both ends have
        # p = 1 - confidence).
        with np.errstate(divide="ignore", invalid="ignore"):
            big_b = (1.0 - m.r ** 2) * tcrit ** 2 / (m.n - 2)
            inner = np.broadcast_to(np.abs(b) * (np.sqrt(big_b + 1) - np.sqrt(big_b)),
                                    np.shape(both))
        shape = np.shape(both)
        notes = np.asarray(out["note"], dtype=object).reshape(-1).copy()
        top = np.broadcast_to(out["slope_high"], shape).reshape(-1)
        inner = inner.reshape(-1)
        for i in np.flatnonzero(both):
            notes[i] = (f"{BOTH_SIGNS_NOTE}: the accepted slopes are {-top[i]:.4g} to "
                        f"{-inner[i]:.4g} and {inner[i]:.4g} to {top[i]:.4g} (the interval "
                        "reported is their hull)")
        out["note"] = notes.reshape(shape)
    if np.any(exact & ~bad):
        notes = np.asarray(out["note"], dtype=object).copy()
        notes[exact & ~bad] = EXACT_NOTE
        out["note"] = notes
    return out


# --------------------------------------------------------------------------
# result objects


@dataclass(frozen=True, slots=True)
class ConfidenceInterval:
    """Bounds of a confidence interval (``low`` <= ``high``; NaN if not estimable)."""

    low: float
    high: float


@dataclass(frozen=True, slots=True, kw_only=True)
class SlopeTest:
    """Test of the slope (exponent) against a hypothesised value.

    Attributes
    ----------
    method : str
    hypothesis : str
        Name given to the exponent (e.g. ``"three_quarters"``).
    exponent : float
        The hypothesised slope b0.
    estimate : float
        The fitted slope.
    statistic : float
        ``statistic_type`` ``"t"``: t on ``df`` degrees of freedom;
        ``"z"``: standard normal (Theil-Sen, Kendall's S / its SD);
        ``"boot_share_above"``: the share of bootstrap slopes above b0.
        Positive t or z (share above 0.5) when the slope is above b0.
    df : float
        NaN for ``z`` and bootstrap tests.
    p_value : float
        Two-sided.
    statistic_type : str
    note : str
        ``EXACT_NOTE`` when the points have no residual scatter (then p is 1
        if b0 equals the slope up to rounding and 0 otherwise).
    """

    method: str
    hypothesis: str
    exponent: float
    estimate: float
    statistic: float
    df: float
    p_value: float
    statistic_type: str = "t"
    note: str = ""

    def to_frame(self):
        import pandas as pd
        return pd.DataFrame([{
            "method": self.method, "hypothesis": self.hypothesis,
            "exponent": self.exponent, "estimate": self.estimate,
            "statistic": self.statistic, "statistic_type": self.statistic_type,
            "df": self.df, "p_value": self.p_value, "note": self.note,
        }])

    def summary(self, confidence: float = 0.95) -> str:
        """One plain sentence."""
        return describe_test(self, alpha=1 - confidence)

    def __repr__(self) -> str:
        return short_repr(self, {"method": self.method, "hypothesis": self.hypothesis,
                                 "exponent": self.exponent, "estimate": self.estimate,
                                 "statistic": self.statistic, "p_value": self.p_value})

    def _repr_html_(self) -> str:
        return frame_html(self.to_frame(), title=f"{method_label(self.method)} slope test",
                          notes=[self.summary()])


def _deming_test(m: Moments, lam, b0: float) -> tuple:
    """t, df, p of the Deming slope test: the MA test on (X, Y/sqrt(lam))."""
    if lam is None:
        raise ConfigError("a Deming fit needs its error-variance ratio (lam) to be tested")
    k = math.sqrt(lam)
    mr = Moments(n=m.n, mean_x=m.mean_x, mean_y=m.mean_y / k, sxx=m.sxx,
                 syy=m.syy / lam, sxy=m.sxy / k)
    t, df, p = slope_test_statistic(mr, "ma", b0 / k)
    return float(t), float(df), float(p)


def _tie_term(values: np.ndarray) -> float:
    _, counts = np.unique(values, return_counts=True)
    counts = counts[counts > 1].astype(float)
    return float(np.sum(counts * (counts - 1) * (2 * counts + 5)))


#: Public name for the tie correction used by robust.theil_sen.
def tie_term(values: np.ndarray) -> float:
    """The tie term of Kendall's variance (see :func:`_kendall_slope_test`)."""
    return _tie_term(values)


def _kendall_slope_test(X, Y, b0: float) -> tuple:
    """z and p of Sen's (1968) Kendall test of slope = b0 (see LineFit.test_slope)."""
    X = np.asarray(X, dtype=float)
    Y = np.asarray(Y, dtype=float)
    n = X.size
    i, j = np.triu_indices(n, k=1)
    dx = X[j] - X[i]
    keep = dx != 0
    slopes = (Y[j] - Y[i])[keep] / dx[keep]
    s = float(np.count_nonzero(slopes > b0) - np.count_nonzero(slopes < b0))
    # Kendall's S of X against R = Y - b0 X: its null variance counts ties
    # in X and in R (Sen 1968, JASA 63:1379, eq. 2.6), not ties in Y.  Two
    # rows tie in R when their pairwise slope equals b0 (up to rounding).
    R = Y - b0 * X
    tol = 1e-10 * (np.max(np.abs(Y)) + abs(b0) * np.max(np.abs(X)) + 1e-300)
    var = (n * (n - 1) * (2 * n + 5) - _tie_term(X) - _tie_term(np.round(R / tol))) / 18.0
    if var <= 0:
        return math.nan, math.nan
    z = s / math.sqrt(var)
    return z, float(2 * stats.norm.sf(abs(z)))


def _bootstrap_slope_test(replicates, b0: float) -> tuple:
    """Share of replicates above b0 and the percentile-bootstrap p (LineFit.test_slope)."""
    r = np.asarray(replicates, dtype=float)
    r = r[np.isfinite(r)]
    if r.size == 0:
        return math.nan, math.nan
    below = np.count_nonzero(r <= b0)
    above = np.count_nonzero(r >= b0)
    p = min(1.0, 2.0 * (1 + min(below, above)) / (r.size + 1))
    return float(np.count_nonzero(r > b0) / r.size), float(p)


@dataclass(frozen=True, slots=True, kw_only=True)
class LineFit:
    """A straight line fitted to log y against log x.

    ``slope`` is the exponent b of y = a x^b; ``intercept`` is log(a) in
    ``log_base``.  Intervals are at level ``confidence``.

    Attributes
    ----------
    method, n, slope, slope_ci, slope_se, intercept, intercept_ci,
    intercept_se, r, r2, resid_sd, df, log_base, confidence, moments,
    x_range, y_range, note
        ``resid_sd`` is the SD of vertical residuals Y - a - bX on the log
        scale (n - 2 df); ``x_range`` and ``y_range`` are the natural-unit
        extremes of the data (``None`` when fitted from moments alone);
        ``note`` is empty or says why the fit is not estimable.
    lam : float or None
        Error-variance ratio var(error in log y)/var(error in log x) of a
        Deming fit (None for other methods).
    interval_method : str
        How the intervals were made: ``"analytic"`` (formulas above),
        ``"kendall_slope_bootstrap_intercept"`` (Theil-Sen: Sen's interval
        for the slope, percentile bootstrap for the intercept) or
        ``"bootstrap_percentile"`` (Siegel, robust SMA/MA).
    slope_replicates : ndarray or None
        Bootstrap slopes behind a bootstrap interval (used by the test).
    log_data : (ndarray, ndarray) or None
        Log x and log y, kept by Theil-Sen for its rank test.
    smearing_factor, ratio_factor : float or None
        Correction factors computed from the fit's own residuals on its
        fitting data (Duan 1983 smearing; Snowdon 1991 ratio), set by
        :func:`scaling.fit_line`; :meth:`predict` uses them by default.
        None for fits made from moments alone (pass ``residuals`` or a
        saved factor to :func:`scaling.stats.predictions.predict` then).
    """

    method: str
    n: int
    slope: float
    slope_ci: ConfidenceInterval
    slope_se: float
    intercept: float
    intercept_ci: ConfidenceInterval
    intercept_se: float
    r: float
    r2: float
    resid_sd: float
    df: float
    log_base: float | None
    confidence: float
    moments: Moments = field(repr=False)
    x_range: tuple | None = None
    y_range: tuple | None = None
    note: str = ""
    lam: float | None = None
    interval_method: str = "analytic"
    slope_replicates: np.ndarray | None = field(default=None, repr=False, compare=False)
    log_data: tuple | None = field(default=None, repr=False, compare=False)
    smearing_factor: float | None = field(default=None, repr=False, compare=False)
    ratio_factor: float | None = field(default=None, repr=False, compare=False)

    @property
    def b(self) -> float:
        """Exponent of y = a x^b (same as ``slope``)."""
        return self.slope

    @property
    def a(self) -> float:
        """Coefficient of y = a x^b in natural units (median, not bias-corrected)."""
        if self.log_base is None:
            return self.intercept
        return float(self.log_base ** self.intercept)

    @property
    def estimable(self) -> bool:
        return np.isfinite(self.slope)

    def test_slope(self, exponent: float, *, hypothesis: str = "") -> SlopeTest:
        """Test slope = ``exponent`` (two-sided) with the test behind the interval.

        OLS, SMA, MA
            :func:`slope_test_statistic` (t on n - 2 df); the intervals are
            its inversion.
        Deming (``lam`` set)
            The MA test of :func:`slope_test_statistic` on (X, Y/sqrt(lam))
            against b0/sqrt(lam): the interval of
            :func:`scaling.stats.robust.deming` is its inversion.
        Theil-Sen
            Kendall's S = #(pairwise slopes > b0) - #(pairwise slopes < b0)
            over pairs with distinct x (the S of X against Y - b0 X), with
            Sen's (1968, *JASA* 63:1379, eq. 2.6) variance counting ties in
            x and in Y - b0 X; z = S/sd and p = 2 Phi(-|z|).  Sen's slope
            interval (:func:`scaling.stats.robust.theil_sen`, ties in x) is the set
            of b0 this test does not reject, up to one step of S at the
            order statistics.
        Siegel, robust SMA, robust MA
            Percentile-bootstrap p-value from the stored slope replicates:
            p = min(1, 2 (1 + min(#{b* <= b0}, #{b* >= b0})) / (B + 1)),
            B the finite replicates (the +1 keeps p above 0, as for
            permutation p-values).  b0 outside the percentile interval gives
            p < 1 - confidence, up to 2/(B + 1) and the quantile
            interpolation.  The statistic is the share of b* above b0.
        """
        b0 = exponent_value(exponent)
        kind, df = "t", float(self.df)
        if not self.estimable:
            t, p = math.nan, math.nan
            if self.method not in METHODS and self.method != "deming":
                kind, df = ("z" if self.method == "theil_sen" else "boot_share_above"), math.nan
        elif self.method in METHODS:
            t, df, p = (float(v) for v in slope_test_statistic(self.moments, self.method, b0))
        elif self.method == "deming":
            t, df, p = _deming_test(self.moments, self.lam, b0)
        elif self.method == "theil_sen" and self.log_data is not None:
            t, p = _kendall_slope_test(self.log_data[0], self.log_data[1], b0)
            kind, df = "z", math.nan
        elif self.slope_replicates is not None:
            t, p = _bootstrap_slope_test(self.slope_replicates, b0)
            kind, df = "boot_share_above", math.nan
        else:
            raise ConfigError(f"the {method_label(self.method)} fit carries neither data nor "
                              "bootstrap replicates, so its slope cannot be tested")
        note = ""
        if self.estimable and self.method in METHODS and bool(exact_fit(self.moments)):
            note = EXACT_NOTE
        label = exponent.strip() if isinstance(exponent, str) else f"{b0:g}"
        return SlopeTest(method=self.method, hypothesis=hypothesis or label,
                         exponent=b0, estimate=self.slope, statistic=t, df=df,
                         p_value=p, statistic_type=kind, note=note)

    def to_frame(self):
        """One tidy row with the column names of ``fits.csv``."""
        import pandas as pd
        return pd.DataFrame([self.to_record()])

    def to_record(self) -> dict:
        return {
            "method": self.method, "n": self.n,
            "slope": self.slope, "slope_low": self.slope_ci.low,
            "slope_high": self.slope_ci.high,
            "intercept": self.intercept, "intercept_low": self.intercept_ci.low,
            "intercept_high": self.intercept_ci.high,
            "r": self.r, "r2": self.r2, "slope_se": self.slope_se,
            "intercept_se": self.intercept_se, "resid_sd": self.resid_sd,
            "log_base": base_label(self.log_base), "confidence": self.confidence,
            "note": self.note, "interval_method": self.interval_method,
            "deming_lambda": None if self.lam is None else float(self.lam),
        }

    def summary(self) -> str:
        """A few lines of text describing the fit."""
        label = method_label(self.method)
        if not self.estimable:
            return f"{label} fit, n = {self.n}: {self.note}"
        pct = f"{100 * self.confidence:g}%"
        lines = [
            f"{label} line on {log_word(self.log_base)} scales, n = {self.n}"
            + (f" (lambda = {self.lam:g})" if self.lam is not None else ""),
            f"  exponent b = {self.slope:.4g}  ({pct} CI {self.slope_ci.low:.4g} to {self.slope_ci.high:.4g})",
            f"  intercept log a = {self.intercept:.4g}  ({pct} CI {self.intercept_ci.low:.4g} to {self.intercept_ci.high:.4g})",
            f"  r = {self.r:.4f}, r^2 = {self.r2:.4f}, residual SD (log scale) = {self.resid_sd:.4g}",
        ]
        if self.log_base is not None:
            lines.append(f"  y = {self.a:.4g} * x^{self.slope:.4g}")
        if self.note:
            lines.append(f"  note: {self.note}")
        return "\n".join(lines)

    def __repr__(self) -> str:
        fields = {"method": self.method, "n": self.n, "slope": self.slope,
                  "slope_ci": (float(self.slope_ci.low), float(self.slope_ci.high)),
                  "intercept": self.intercept, "r2": self.r2,
                  "log_base": base_label(self.log_base), "confidence": self.confidence}
        if self.lam is not None:
            fields["lam"] = self.lam
        if self.note:
            fields["note"] = self.note
        return short_repr(self, fields)

    def _repr_html_(self) -> str:
        return frame_html(self.to_frame(), title=f"{method_label(self.method)} line",
                          notes=[self.summary()])

    # predict and inverse_predict are late-bound delegations to scaling.stats.predictions,
    # which registers them with register_delegate when imported (``import
    # scaling`` does); lines sits below predict and does not import it.

    def predict(self, x, *, correction="smearing", interval="prediction",
                confidence=None, residuals=None):
        """Predictions of y at ``x`` in natural units, as a DataFrame.

        Parameters
        ----------
        x : float or array_like
            Positive x in natural units (logs when ``log_base`` is None).
        correction : {"smearing", "parametric", "ratio", "none"}
            Back-transformation correction.  A fit made by
            :func:`scaling.fit_line` carries its smearing and ratio factors,
            so the default works on a fresh fit; a fit made from moments
            alone needs ``residuals`` for smearing (or use ``"parametric"``).
        interval : {"prediction", "confidence"}
        confidence : float, optional
            Defaults to the fit's level.
        residuals : array_like, optional
            Log-scale residuals of the fitting data (override the carried
            smearing factor).

        Returns
        -------
        DataFrame
            ``x, y, y_low, y_high, interval, correction, extrapolated, method``.

        Notes
        -----
        See :func:`scaling.stats.predictions.predict` (smearing: Duan 1983, *JASA*
        78:605; intervals and how the correction meets the bounds are in
        :mod:`scaling.stats.predictions`).

        Examples
        --------
        >>> import scaling
        >>> fit = scaling.fit_line([1, 2, 4, 8, 16], [3.1, 11.8, 49, 190, 770], method="ols")
        >>> table = fit.predict([3, 10])
        >>> table[["x", "extrapolated"]].values.tolist()
        [[3.0, False], [10.0, False]]
        >>> bool(table["y_low"].lt(table["y"]).all())
        True
        """
        return _predict(self, x, correction=correction, interval=interval,
                        confidence=confidence, residuals=residuals).to_frame()

    def inverse_predict(self, y, *, interval="prediction", confidence=None):
        """Estimates of x from observed ``y`` (e.g. body mass from a bone size), as a DataFrame.

        Parameters
        ----------
        y : float or array_like
            Positive observed y in natural units (logs when ``log_base`` is None).
        interval : {"prediction", "confidence"}
            For the x of the individual whose y was observed, or for the x at
            which the line equals y.
        confidence : float, optional
            Defaults to the fit's level.

        Returns
        -------
        DataFrame
            ``y, x, x_low, x_high, interval, correction, extrapolated, method``
            (``x_low``/``x_high`` NaN where the interval is unbounded).

        Notes
        -----
        See :func:`scaling.stats.predictions.inverse_predict`: OLS uses the Fieller-type
        calibration interval (Draper & Smith 1998, sec. 3.2); symmetric lines
        swap the roles of x and y.

        Examples
        --------
        >>> import scaling
        >>> fit = scaling.fit_line([1, 2, 4, 8, 16], [3.1, 11.8, 49, 190, 770], method="sma")
        >>> table = fit.inverse_predict(100)
        >>> bool(table["x_low"][0] < table["x"][0] < table["x_high"][0])
        True
        """
        return _inverse_predict(self, y, interval=interval, confidence=confidence).to_frame()


# --------------------------------------------------------------------------
# a LineFit to and from plain JSON types (saved with a run; scaling predict)

#: Format tag of :func:`fit_to_dict` dictionaries.
DICT_FORMAT = "scaling.linefit/1"


def _json_float(v):
    v = float(v)
    return v if math.isfinite(v) else None


def _json_clean(obj):
    if isinstance(obj, dict):
        return {k: _json_clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_json_clean(v) for v in obj]
    if isinstance(obj, (float, np.floating)):
        return _json_float(obj)
    return obj


def _float(v) -> float:
    return math.nan if v is None else float(v)


def fit_to_dict(fit: LineFit, *, smearing_factor: float | None = None,
                ratio_factor: float | None = None) -> dict:
    """Everything needed to predict later without the data, as JSON-ready types.

    Parameters
    ----------
    fit : LineFit
    smearing_factor, ratio_factor : float, optional
        Correction factors computed on the fitting data (see
        :func:`data_factors`); stored so that ``smearing`` and ``ratio``
        predictions work from the dictionary alone.  Default: the factors
        the fit carries (set by :func:`scaling.fit_line`), if any.

    Returns
    -------
    dict
        Plain str, int, float, list and None (NaN is written as None).
    """
    if smearing_factor is None:
        smearing_factor = fit.smearing_factor
    if ratio_factor is None:
        ratio_factor = fit.ratio_factor
    for name, value in (("smearing_factor", smearing_factor), ("ratio_factor", ratio_factor)):
        if value is not None and not (isinstance(value, (int, float, np.floating))
                                      and not isinstance(value, bool)):
            raise ConfigError(f"{name} must be a number or None, not {value!r}")
    d = {
        "format": DICT_FORMAT,
        "method": fit.method, "n": int(fit.n),
        "slope": fit.slope, "slope_ci": [fit.slope_ci.low, fit.slope_ci.high],
        "slope_se": fit.slope_se,
        "intercept": fit.intercept,
        "intercept_ci": [fit.intercept_ci.low, fit.intercept_ci.high],
        "intercept_se": fit.intercept_se,
        "r": fit.r, "r2": fit.r2, "resid_sd": fit.resid_sd, "df": fit.df,
        "log_base": base_label(fit.log_base), "confidence": fit.confidence,
        "moments": fit.moments.to_dict(),
        "x_range": None if fit.x_range is None else [float(v) for v in fit.x_range],
        "y_range": None if fit.y_range is None else [float(v) for v in fit.y_range],
        "note": fit.note, "lam": fit.lam, "interval_method": fit.interval_method,
        "smearing_factor": smearing_factor, "ratio_factor": ratio_factor,
    }
    return _json_clean(d)


_REQUIRED = ("method", "n", "slope", "slope_ci", "slope_se", "intercept", "intercept_ci",
             "intercept_se", "r", "r2", "resid_sd", "df", "log_base", "confidence", "moments")


def fit_from_dict(d: dict) -> LineFit:
    """Rebuild the :class:`LineFit` written by :func:`fit_to_dict`.

    Raises
    ------
    DataError
        If a key is missing or the format is not recognised.
    """
    if not isinstance(d, dict):
        raise DataError(f"a saved fit must be a dict, not {type(d).__name__}")
    if d.get("format", DICT_FORMAT) != DICT_FORMAT:
        raise DataError(f"saved fit has format {d.get('format')!r}; expected {DICT_FORMAT!r}")
    missing = [k for k in _REQUIRED if k not in d]
    if missing:
        raise DataError(f"saved fit lacks key(s): {', '.join(missing)}")
    if d["method"] not in METHOD_INFO:
        raise DataError(f"saved fit has unknown method {d['method']!r}")
    try:
        base = parse_log_base(d["log_base"])
    except (ValueError, ConfigError) as exc:
        raise DataError(f"saved fit: {exc}") from None
    mom = {k: (np.nan if v is None else v) for k, v in d["moments"].items()}
    rng = lambda v: None if v is None else (float(v[0]), float(v[1]))  # noqa: E731
    return LineFit(
        method=d["method"], n=int(d["n"]), slope=_float(d["slope"]),
        slope_ci=ConfidenceInterval(_float(d["slope_ci"][0]), _float(d["slope_ci"][1])),
        slope_se=_float(d["slope_se"]), intercept=_float(d["intercept"]),
        intercept_ci=ConfidenceInterval(_float(d["intercept_ci"][0]),
                                        _float(d["intercept_ci"][1])),
        intercept_se=_float(d["intercept_se"]), r=_float(d["r"]), r2=_float(d["r2"]),
        resid_sd=_float(d["resid_sd"]), df=_float(d["df"]), log_base=base,
        confidence=float(d["confidence"]), moments=Moments.from_dict(mom),
        x_range=rng(d.get("x_range")), y_range=rng(d.get("y_range")),
        note=str(d.get("note", "")), lam=d.get("lam"),
        interval_method=str(d.get("interval_method", "analytic")),
        smearing_factor=d.get("smearing_factor"), ratio_factor=d.get("ratio_factor"),
    )



def line_fit_from_moments(m: Moments, method: str, *, confidence: float = 0.95,
                          log_base: float | None = 10.0, x_range=None,
                          y_range=None) -> LineFit:
    """Package the fit of one set of (0-d) moments as a :class:`LineFit`."""
    res = fit_moments(m, method, confidence=confidence)
    return line_fit_from_result(res, None, m, method, confidence=confidence,
                                log_base=log_base, x_range=x_range, y_range=y_range)


def line_fit_from_result(res: dict, i, m: Moments, method: str, *, confidence: float,
                         log_base: float | None, x_range=None, y_range=None,
                         lam: float | None = None) -> LineFit:
    """The :class:`LineFit` of entry ``i`` of a vectorised :func:`fit_moments` result.

    ``i`` None reads 0-d results; ``m`` are that entry's moments.  Lets a run
    fit every group in one pass and package each fit without computing it again.
    """
    def pick(v):
        if isinstance(v, np.ndarray):
            return v.item() if i is None else v[i]
        return v
    f = {k: pick(v) for k, v in res.items()}
    note = f["note"]
    if isinstance(note, np.ndarray):
        note = str(note.reshape(-1)[0])
    return LineFit(
        method=method, n=int(np.asarray(m.n).item()),
        slope=float(f["slope"]),
        slope_ci=ConfidenceInterval(float(f["slope_low"]), float(f["slope_high"])),
        slope_se=float(f["slope_se"]),
        intercept=float(f["intercept"]),
        intercept_ci=ConfidenceInterval(float(f["intercept_low"]), float(f["intercept_high"])),
        intercept_se=float(f["intercept_se"]),
        r=float(f["r"]), r2=float(f["r2"]), resid_sd=float(f["resid_sd"]),
        df=float(f["df"]), log_base=log_base, confidence=confidence, moments=m,
        x_range=x_range, y_range=y_range, note=str(note), lam=lam,
    )


def validate_xy(x, y, base):
    """``x`` and ``y`` as equal-length 1-d float arrays, finite, and positive when logs
    will be taken (``base`` not None); DataError saying what is wrong otherwise."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if x.ndim != 1 or y.ndim != 1:
        raise DataError("x and y must be one-dimensional")
    if x.shape != y.shape:
        raise DataError(f"x and y must have the same length, not {x.size} and {y.size}")
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
        raise DataError("x and y must be finite numbers (no NaN or inf); clean them first")
    if base is not None and (np.any(x <= 0) or np.any(y <= 0)):
        raise DataError("x and y must be positive to take logarithms; "
                        "pass log_base=None if they are logs already")
    return x, y


def fit_line(x, y, *, method: str = "sma", confidence: float = 0.95,
             log_base=10) -> LineFit:
    """Fit y = a x^b as a straight line on log-log scales (the moment methods).

    The public :func:`scaling.fit_line` (in :mod:`scaling.api`) takes every
    configured method and returns a fit carrying its correction factors;
    this one fits OLS, SMA and MA from moments and carries none.

    Parameters
    ----------
    x, y : array_like
        Positive values in natural units (or logs when ``log_base`` is None).
    method : {"ols", "sma", "ma"}
        OLS of log y on log x (to predict y), standardised major axis or
        major axis (to describe the symmetric relationship).
    confidence : float
        Level of the slope and intercept intervals.
    log_base : {10, "e", 2, None}
        Base of the logarithms; None means x and y are already logs.

    Returns
    -------
    LineFit

    Notes
    -----
    Formulas and sources are in the module docstring of :mod:`scaling.stats.lines`.
    A sample with n < 3, or with no variation in x or y, returns a fit whose
    estimates are NaN and whose ``note`` says why, with a
    :class:`~scaling.errors.DegenerateDataWarning`.

    Examples
    --------
    >>> import scaling
    >>> fit = scaling.fit_line([1, 2, 4, 8], [1, 4.1, 15.8, 64.5], method="ols")
    >>> round(fit.slope, 2)
    2.0
    """
    spec = get_method(method)
    base = parse_log_base(log_base)
    confidence = check_confidence(confidence)
    x, y = validate_xy(x, y, base)
    X, Y = to_log(x, base), to_log(y, base)
    m = _moments(X, Y)
    x_range = (float(x.min()), float(x.max())) if x.size else None
    y_range = (float(y.min()), float(y.max())) if y.size else None
    fit = line_fit_from_moments(m, spec.name, confidence=confidence, log_base=base,
                                x_range=x_range, y_range=y_range)
    if fit.note:
        warnings.warn(fit.note, DegenerateDataWarning, stacklevel=2)
    return fit
