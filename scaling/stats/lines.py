"""Line estimators on the log scale: OLS, SMA and MA, read from moments.

Each method is a :class:`LineMethod`: three small vectorised functions of
:class:`~scaling.stats.moments.Moments` (slope, slope test, slope interval) plus
the slope variance used for the intercept interval.  :func:`fit_moments`
adds intercepts, intervals and correlations for any number of groups at
once.  The result objects (:class:`~scaling.stats.line_results.LineFit`,
:class:`~scaling.stats.line_results.SlopeTest`), their JSON form and
:func:`~scaling.stats.line_results.fit_line`, which packages one sample as a
LineFit, are in :mod:`scaling.stats.line_results`.

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
    reported as the hull -hi..hi with the note ``BOTH_SIGNS_NOTE`` and the
    gap between the two ranges, -lo..lo, as ``slope_gap_low`` and
    ``slope_gap_high`` (p = 1 - confidence at all four ends; fits.csv columns
    of those names, ``LineFit.accepted_slopes``).  Seeded coverage at
    correlation 0.3: 0.945 (n = 8) and 0.950 (n = 20) for the accepted set;
    at 0.2 and n = 10, 0.946: the sign rule loses the samples whose
    correlation is significant with the wrong sign (tests).
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
``EXACT_NOTE`` of :mod:`scaling.stats.schema`; its test gives p = 1 for b0 equal
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
:data:`METHOD_INFO`) return the same
:class:`~scaling.stats.line_results.LineFit`;
:meth:`~scaling.stats.line_results.LineFit.test_slope` then uses the test whose inversion is the
reported interval (see its docstring): Deming, the MA test after rescaling
by lambda; Theil-Sen, Kendall's S of (X, Y - b0 X) as in Sen (1968);
Siegel and robust SMA/MA, the percentile-bootstrap p-value.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np
from . import tails

from ..errors import ConfigError, DataError
from .logscale import base_label, log_word, parse_log_base, to_log  # noqa: F401 -- re-exported
from .moments import Moments
from .schema import (BOTH_SIGNS_NOTE, CATALOGUE, EXACT_NOTE, is_symmetric,  # noqa: F401
                     method_label, check_confidence, fraction_value)

__all__ = [
    "LineMethod",
    "METHODS",
    "METHOD_INFO",
    "MIN_N",
    "method_label",
    "is_symmetric",
    "get_method",
    "fit_moments",
    "fit_notes",
    "slope_test_statistic",
    "ma_minor_side",
    "parse_log_base",
    "base_label",
    "log_word",
    "exponent_value",
    "exact_fit",
    "validate_xy",
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
    if (isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating))
            or not math.isfinite(value)):
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


def _ma_spreads(m: Moments, b0) -> tuple:
    """Sums of squares along b0 (va) and across it (vb)."""
    va = m.syy - 2 * b0 * m.sxy + b0 * b0 * m.sxx
    vb = m.sxx + 2 * b0 * m.sxy + b0 * b0 * m.syy
    return va, vb


def ma_minor_side(m: Moments, b0) -> np.ndarray:
    """True where the direction b0 spreads less than its perpendicular (the MA
    test's minor-axis side, where its statistic is read from the eigenvalues)."""
    va, vb = _ma_spreads(m, np.asarray(b0, dtype=float))
    with np.errstate(invalid="ignore"):
        return np.asarray(va > vb)


def _ma_test(m: Moments, b0) -> np.ndarray:
    b0 = np.asarray(b0, dtype=float)
    c = m.sxy * (1 - b0 * b0) + b0 * (m.syy - m.sxx)
    va, vb = _ma_spreads(m, b0)
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
        # On an exact line t_max is infinite and side may be 0 (b0 = slope).
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
        # sign(0) * inf where b0 = b is computed and discarded by the where.
        with np.errstate(invalid="ignore"):
            same = np.abs(b - b0) <= 1e-9 * np.maximum(1.0, np.abs(b))
            t = np.where(exact, np.where(same, 0.0, np.sign(b - b0) * np.inf), t)
    df = m.n - 2
    with np.errstate(invalid="ignore"):
        p = 2 * tails.t_upper(np.abs(t), df)
    return t, df, p


#: (q, df) -> scipy's t quantile, for :func:`t_quantiles` (emptied when it grows past
#: ``_T_CACHE_MAX`` entries).
_T_CACHE: dict = {}
_T_CACHE_MAX = 8192


def t_quantiles(q: float, df) -> np.ndarray:
    """``scipy.stats.t.ppf(q, df)`` elementwise, each distinct (q, df) computed once.

    A run calls the fits of small samples thousands of times (a group at a time,
    a point left out at a time), where scipy's per-call set-up costs more than the
    quantile; the values are scipy's own.  The quantiles not yet cached are
    computed in one array call (scipy's quantile is elementwise: the same values
    as one call per df).
    """
    q = float(q)
    df = np.asarray(df, dtype=float)
    values, where = np.unique(df.ravel(), return_inverse=True)   # nan sorts last, once each
    keys = values.tolist()
    found = {d: _T_CACHE.get((q, d)) for d in keys}
    missing = [d for d, v in found.items() if v is None]
    if missing:
        computed = np.asarray(tails.t_quantile(q, np.asarray(missing, dtype=float)),
                              dtype=float).tolist()
        found.update(zip(missing, computed))
        if len(_T_CACHE) + len(missing) > _T_CACHE_MAX:
            _T_CACHE.clear()
        # A NaN key would never be found again (nan != nan): not cached.
        _T_CACHE.update(((q, d), v) for d, v in zip(missing, computed) if d == d)
    quantiles = np.asarray([found[d] for d in keys], dtype=float)
    return quantiles[where].reshape(df.shape)


def fit_moments(m: Moments, method: str, *, confidence: float = 0.95) -> dict:
    """Fit ``method`` to every group of moments at once.

    Returns
    -------
    dict of ndarray
        ``slope, slope_low, slope_high, slope_se, intercept, intercept_low,
        intercept_high, intercept_se, r, r2, resid_sd, df, note, slope_gap_low,
        slope_gap_high`` with the shape of ``m.n``.  Estimates are NaN where
        ``note`` says the fit is not estimable.  ``slope_gap_low`` and
        ``slope_gap_high`` are NaN except for an SMA fit noted
        ``BOTH_SIGNS_NOTE``: its accepted slopes are the two ranges
        ``slope_low``..``slope_gap_low`` and ``slope_gap_high``..``slope_high``.
    """
    spec = get_method(method)
    confidence = check_confidence(confidence)
    df = m.n - 2
    with np.errstate(invalid="ignore"):
        tcrit = t_quantiles(0.5 + confidence / 2, df)
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
        # The residuals are rounding of the logs, not scatter: report none.
        se_a = np.where(exact, 0.0, se_a)
        resid_var = np.where(exact, 0.0, resid_var)
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
    out["slope_gap_low"] = np.full(np.shape(both), np.nan)
    out["slope_gap_high"] = np.full(np.shape(both), np.nan)
    if method == "sma" and np.any(both):
        # The accepted set is two ranges, -top..-inner and inner..top; the
        # interval reports their hull, the gap -inner..inner is kept beside
        # it (both ends have p = 1 - confidence).
        with np.errstate(divide="ignore", invalid="ignore"):
            big_b = (1.0 - m.r ** 2) * tcrit ** 2 / (m.n - 2)
            inner = np.broadcast_to(np.abs(b) * (np.sqrt(big_b + 1) - np.sqrt(big_b)),
                                    np.shape(both))
        notes = np.asarray(out["note"], dtype=object).copy()
        notes[both] = BOTH_SIGNS_NOTE
        out["note"] = notes
        out["slope_gap_low"] = np.where(both, -inner, np.nan)
        out["slope_gap_high"] = np.where(both, inner, np.nan)
    if np.any(exact & ~bad):
        notes = np.asarray(out["note"], dtype=object).copy()
        notes[exact & ~bad] = EXACT_NOTE
        out["note"] = notes
    return out



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
