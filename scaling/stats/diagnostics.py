"""Checks of a fitted line: residuals, curvature, influence, error structure.

:func:`diagnose` reads a fitted :class:`scaling.stats.lines.LineFit` and the log
data it was fitted to and returns a :class:`Diagnostics` with one
:class:`Check` per question and plain-language verdicts.
:func:`compare_error_structure` asks whether the scatter around the power
law is multiplicative (lognormal, the assumption behind fitting on logs) or
additive (normal on the arithmetic scale).

Residuals are the vertical residuals e_i = Y_i - a - b X_i on the log
scale, whatever the fitting method.

Normality
    Shapiro & Wilk (1965), *Biometrika* 52:591, via ``scipy.stats.shapiro``.
Constant variance
    Breusch & Pagan (1979), *Econometrica* 47:1287, studentised (Koenker
    1981) LM form as computed by ``statsmodels.stats.diagnostic.
    het_breuschpagan``: n R^2 of e^2 regressed on (1, X), chi-square 1 df.
Curvature
    The quadratic term b2 of Y = b0 + b1 X + b2 X^2 fitted by OLS
    (Kolokotrones, Savage, Deeds & Fontana 2010, *Nature* 464:753), tested
    by t = b2 / se(b2) on n - 3 df.  The local exponent at X is
    dY/dX = b1 + 2 b2 X, so it equals a target beta at
    X* = (beta - b1) / (2 b2), x* = base^X*.  X is centred before fitting
    for numerical stability; the coefficients reported are those of the
    uncentred X.
Influence
    Cook's (1977, *Technometrics* 19:15) distance of each row in the OLS
    regression of Y on X, via ``statsmodels``' ``OLSInfluence``; rows with
    D > 4/n are listed (a common rule of thumb, no single source).  For SMA
    and MA fits the OLS distances are a proxy: they measure influence on
    the least-squares line through the same points.
Error structure
    Xiao, White, Hooten & Durham (2011), *Ecology* 92:1887: fit
    y = a x^b + e, e ~ N(0, s^2) by nonlinear least squares
    (``scipy.optimize.curve_fit`` started from the log-scale OLS fit) and
    log y = log a + b log x + e, e ~ N(0, s^2) by OLS on natural logs; both
    maximised likelihoods are written for y on the arithmetic scale (the
    lognormal one includes the Jacobian -sum log y_i) and compared by
    AICc = -2 logL + 2k + 2k(k+1)/(n-k-1) with k = 3 (a, b, s).  A
    difference below 2 is reported as no clear preference (a common rule
    of thumb; Burnham & Anderson 2002).
Points to check (:func:`points_to_check`)
    Graded warnings.  *Strong*: a point with Cook's distance D_i > 1 (Cook
    & Weisberg 1982, *Residuals and Influence in Regression*, the usual
    absolute cut-off), or whose removal moves the exponent by more than
    its standard error (|b_(-i) - b| > se(b); the absolute DFBETA cut-off of
    Belsley, Kuh & Welsch 1980, with se(b) of the full fit).  b_(-i) comes
    from the moments downdated by point i (exact: n' = n - 1,
    S'_xx = S_xx - n/(n-1) (X_i - mean X)^2, likewise S'_xy, S'_yy), all
    points at once.  A smearing factor (Duan 1983) whose ratio to the
    parametric factor exp(s^2 ln(base)^2 / 2) lies outside
    [1/SMEARING_RATIO_LIMIT, SMEARING_RATIO_LIMIT] (1.25; common practice, no
    source: normal residuals put the two within a few per cent) is strong.
    A back-transformed estimate outside its own interval is strong (it
    happens when one huge residual inflates the smearing factor).  *Mild*:
    pooled residuals that differ between groups by one-way ANOVA
    (``scipy.stats.f_oneway``) at ``alpha``.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np
from scipy import optimize, stats

from ..errors import ConfigError, DataError, DegenerateDataWarning
from .line_results import LineFit
from .lines import METHODS, exact_fit, fit_moments
from .moments import Moments, moments
from .schema import EXACT_NOTE
from ..render.wording import estimate_outside_reason, group_residuals_reason, influence_reason, smearing_reason
from ..render.wording import p_text

__all__ = [
    "Check",
    "Curvature",
    "Diagnostics",
    "ErrorModel",
    "ErrorStructure",
    "diagnose",
    "quadratic_t",
    "compare_error_structure",
    "PointCheck",
    "leave_one_out_slopes",
    "cooks_distances",
    "points_to_check",
    "strong_influence",
    "fit_checks",
    "SMEARING_RATIO_LIMIT",
]

MIN_N = 4


# --------------------------------------------------------------------------
# results


@dataclass(frozen=True, slots=True, kw_only=True)
class Check:
    """One diagnostic test.

    Attributes
    ----------
    check : str
        ``"normality"``, ``"constant_variance"``, ``"curvature"`` or
        ``"influence"``.
    test : str
        The test used (e.g. ``"Shapiro-Wilk"``).
    statistic, df, p_value, estimate : float
        ``estimate`` is the quadratic coefficient for curvature, the largest
        Cook's distance for influence and NaN otherwise; ``df`` is NaN where
        the test has none.
    flagged : bool
        True when the check finds a problem at level ``alpha``.
    verdict : str
        Plain-language reading.
    """

    check: str
    test: str
    statistic: float
    df: float
    p_value: float
    estimate: float
    flagged: bool
    verdict: str

    def to_record(self) -> dict:
        return {"check": self.check, "test": self.test, "statistic": self.statistic,
                "df": self.df, "p_value": self.p_value, "estimate": self.estimate,
                "flagged": self.flagged, "verdict": self.verdict}


@dataclass(frozen=True, slots=True, kw_only=True)
class Curvature:
    """Quadratic fit Y = b0 + b1 X + b2 X^2 on the log scale.

    Attributes
    ----------
    intercept, linear, quadratic : float
        b0, b1, b2 (uncentred X).
    quadratic_se, statistic, df, p_value : float
        se(b2), t = b2/se(b2), n - 3, two-sided p.
    log_base : float or None
        Base of the logs (None when the data were given as logs).
    crossings : tuple of (float, float, bool)
        ``(target exponent, x*, inside data range)`` for each requested
        target; x* in natural units (on the log scale when ``log_base`` is
        None); NaN when b2 = 0.
    """

    intercept: float
    linear: float
    quadratic: float
    quadratic_se: float
    statistic: float
    df: float
    p_value: float
    log_base: float | None
    crossings: tuple = ()

    def local_exponent(self, log_x) -> np.ndarray:
        """Local slope b1 + 2 b2 X at log-scale positions ``log_x``."""
        return self.linear + 2 * self.quadratic * np.asarray(log_x, dtype=float)

    def x_at_exponent(self, exponent: float) -> float:
        """x (natural units, or log when ``log_base`` is None) where the local slope is ``exponent``."""
        if self.quadratic == 0 or not np.isfinite(self.quadratic):
            return math.nan
        log_x = (exponent - self.linear) / (2 * self.quadratic)
        if self.log_base is None:
            return float(log_x)
        with np.errstate(over="ignore"):
            return float(np.power(np.float64(self.log_base), log_x))


@dataclass(frozen=True, slots=True, kw_only=True)
class Diagnostics:
    """Residual, curvature and influence checks of one fitted line.

    Attributes
    ----------
    method : str
        Method of the fit checked.
    n : int
    alpha : float
        Level at which a check is flagged.
    checks : tuple of Check
        normality, constant_variance, curvature, influence (in this order).
    curvature : Curvature
    residuals : ndarray
        Vertical log-scale residuals Y - a - b X.
    cooks_distance : ndarray
    influence_threshold : float
        4 / n.
    influential_rows : tuple of int
        Row numbers (from ``rows``) whose Cook's distance exceeds the
        threshold, largest first.
    """

    method: str
    n: int
    alpha: float
    checks: tuple
    curvature: Curvature
    residuals: np.ndarray = field(repr=False)
    cooks_distance: np.ndarray = field(repr=False)
    influence_threshold: float
    influential_rows: tuple
    rows: np.ndarray = field(repr=False)

    def check(self, name: str) -> Check:
        for c in self.checks:
            if c.check == name:
                return c
        raise ConfigError(f"no diagnostic check named {name!r}; "
                          f"choose from {', '.join(c.check for c in self.checks)}")

    def to_frame(self):
        """One row per check (columns check, test, statistic, df, p_value, estimate, flagged, verdict)."""
        import pandas as pd
        frame = pd.DataFrame([c.to_record() for c in self.checks])
        frame.insert(0, "method", self.method)
        return frame

    def crossings_frame(self):
        """One row per target exponent: where the local exponent reaches it."""
        import pandas as pd
        return pd.DataFrame([{"exponent": t, "x": x, "within_data": inside}
                             for t, x, inside in self.curvature.crossings],
                            columns=["exponent", "x", "within_data"])

    def influence_frame(self):
        """Rows above the Cook's distance threshold (columns row, cooks_distance)."""
        import pandas as pd
        pos = {int(r): i for i, r in enumerate(self.rows)}
        return pd.DataFrame([{"row": r, "cooks_distance": float(self.cooks_distance[pos[r]])}
                             for r in self.influential_rows],
                            columns=["row", "cooks_distance"])

    def summary(self) -> str:
        """The verdicts, one per line."""
        return "\n".join(f"{c.check}: {c.verdict}" for c in self.checks)


# --------------------------------------------------------------------------
# curvature, vectorised


def quadratic_t(log_x, log_y) -> dict:
    """OLS fit of Y = b0 + b1 X + b2 X^2, vectorised over leading axes.

    Parameters
    ----------
    log_x, log_y : array_like, shape (..., n)
        One or many samples (all replicates of a simulation at once).

    Returns
    -------
    dict of ndarray
        ``intercept, linear, quadratic, quadratic_se, statistic, df,
        p_value`` with the leading shape.

    Notes
    -----
    Normal equations on centred X (c = X - mean X): with centred sums
    S_cc, S_cq, S_qq of c and q = c^2 (q centred), and S_cy, S_qy, the
    coefficients of (c, q) solve the 2 x 2 system; the residual variance is
    (S_yy - g_c S_cy - g_q S_qy)/(n - 3) and var(g_q) = s^2 S_cc / det.
    Back in uncentred X: b2 = g_q, b1 = g_c - 2 g_q mean(X),
    b0 = mean(Y) - b1 mean(X) - b2 mean(X^2).
    """
    X = np.asarray(log_x, dtype=float)
    Y = np.asarray(log_y, dtype=float)
    n = X.shape[-1]
    mx = X.mean(axis=-1, keepdims=True)
    c = X - mx
    q = c * c
    q = q - q.mean(axis=-1, keepdims=True)
    yc = Y - Y.mean(axis=-1, keepdims=True)
    scc = np.sum(c * c, axis=-1)
    scq = np.sum(c * q, axis=-1)
    sqq = np.sum(q * q, axis=-1)
    scy = np.sum(c * yc, axis=-1)
    sqy = np.sum(q * yc, axis=-1)
    syy = np.sum(yc * yc, axis=-1)
    det = scc * sqq - scq * scq
    with np.errstate(divide="ignore", invalid="ignore"):
        gc = (sqq * scy - scq * sqy) / det
        gq = (scc * sqy - scq * scy) / det
        s2 = np.maximum(syy - gc * scy - gq * sqy, 0.0) / (n - 3)
        se = np.sqrt(s2 * scc / det)
        t = gq / se
    p = 2 * stats.t.sf(np.abs(t), n - 3)
    mx = mx[..., 0]
    b2 = gq
    b1 = gc - 2 * gq * mx
    b0 = Y.mean(axis=-1) - b1 * X.mean(axis=-1) - b2 * np.mean(X * X, axis=-1)
    return {"intercept": b0, "linear": b1, "quadratic": b2, "quadratic_se": se,
            "statistic": t, "df": np.full(np.shape(t), float(n - 3)), "p_value": p}


# --------------------------------------------------------------------------
# diagnose


def _check_alpha(alpha) -> float:
    if isinstance(alpha, bool) or not isinstance(alpha, (int, float)) or not 0 < alpha < 1:
        raise ConfigError(f"alpha must be a number between 0 and 1, not {alpha!r}")
    return float(alpha)


def diagnose(fit: LineFit, log_x, log_y, *, rows=None, exponent_targets=(),
             alpha: float = 0.05) -> Diagnostics:
    """Residual normality, constant variance, curvature and influence of a fit.

    Parameters
    ----------
    fit : LineFit
        The fitted line (any method) whose ``slope`` and ``intercept`` give
        the residuals.
    log_x, log_y : array_like, shape (n,)
        The log-scale data the line was fitted to.
    rows : array_like of int, optional
        Input row number of each point, used to report influential rows
        (default 0, 1, ..., n - 1).
    exponent_targets : sequence of float
        Exponents at which to report where the local exponent of the
        quadratic fit reaches them.
    alpha : float
        Level at which checks are flagged.

    Returns
    -------
    Diagnostics

    Notes
    -----
    Formulas and sources are in the module docstring.
    """
    if not isinstance(fit, LineFit):
        raise ConfigError(f"fit must be a LineFit, not {type(fit).__name__}")
    alpha = _check_alpha(alpha)
    X = np.asarray(log_x, dtype=float)
    Y = np.asarray(log_y, dtype=float)
    if X.ndim != 1 or X.shape != Y.shape:
        raise DataError("log_x and log_y must be one-dimensional and of equal length")
    if not (np.all(np.isfinite(X)) and np.all(np.isfinite(Y))):
        raise DataError("log_x and log_y must be finite numbers (no NaN or inf)")
    n = X.size
    if n < MIN_N:
        raise DataError(f"log_x and log_y need at least {MIN_N} rows for diagnostics, not {n}")
    if n != fit.n:
        raise DataError(f"log_x has {n} rows but the fit was made on {fit.n}")
    if not fit.estimable:
        raise DataError(f"the {fit.method} fit has no estimate to diagnose: {fit.note}")
    if rows is None:
        rows = np.arange(n)
    rows = np.asarray(rows)
    if rows.shape != (n,):
        raise DataError(f"rows must give one row number per point ({n}), not shape {rows.shape}")
    try:
        targets = tuple(float(t) for t in exponent_targets)
    except (TypeError, ValueError):
        raise ConfigError("exponent_targets must be a sequence of numbers") from None
    if np.ptp(X) == 0:
        raise DataError("log_x does not vary: nothing to diagnose")

    if bool(exact_fit(moments(X, Y))):
        return _exact_diagnostics(fit, X, Y, rows, alpha)

    from statsmodels.regression.linear_model import OLS
    from statsmodels.stats.diagnostic import het_breuschpagan
    from statsmodels.stats.outliers_influence import OLSInfluence

    resid = Y - fit.intercept - fit.slope * X
    exog = np.column_stack([np.ones(n), X])
    checks = []

    # normality
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # scipy's n > 5000 accuracy note
        sw = stats.shapiro(resid)
    w_stat, p_sw = float(sw.statistic), float(sw.pvalue)
    flagged = p_sw < alpha
    verdict = (f"residuals depart from a normal distribution ({p_text(p_sw)}); "
               "intervals for predictions may be off" if flagged else
               f"no detectable departure from normal residuals ({p_text(p_sw)})")
    checks.append(Check(check="normality", test="Shapiro-Wilk", statistic=w_stat,
                        df=math.nan, p_value=p_sw, estimate=math.nan,
                        flagged=flagged, verdict=verdict))

    # constant variance
    if np.ptp(resid) == 0:
        warnings.warn("residuals are all equal: the constant-variance test is not defined",
                      DegenerateDataWarning, stacklevel=2)
        lm, p_bp = math.nan, math.nan
    else:
        lm, p_bp, _, _ = het_breuschpagan(resid, exog)
        lm, p_bp = float(lm), float(p_bp)
    flagged = bool(p_bp < alpha)
    if flagged:
        slope_sq = np.polyfit(X, resid ** 2, 1)[0]
        trend = "grows" if slope_sq > 0 else "shrinks"
        verdict = (f"scatter around the line {trend} with size ({p_text(p_bp)}); "
                   "consider weighting or a different error model")
    else:
        verdict = f"no detectable change in scatter with size ({p_text(p_bp)})"
    checks.append(Check(check="constant_variance", test="Breusch-Pagan", statistic=lm,
                        df=1.0, p_value=p_bp, estimate=math.nan, flagged=flagged,
                        verdict=verdict))

    # curvature
    q = quadratic_t(X, Y)
    qv = {k: float(v) for k, v in q.items()}
    base = fit.log_base
    lo, hi = float(X.min()), float(X.max())
    crossings = []
    for target in targets:
        if qv["quadratic"] == 0 or not np.isfinite(qv["quadratic"]):
            crossings.append((target, math.nan, False))
            continue
        lx = (target - qv["linear"]) / (2 * qv["quadratic"])
        with np.errstate(over="ignore"):
            # numpy power: a crossing far outside the data gives inf, not OverflowError
            xs = float(lx) if base is None else float(np.power(np.float64(base), lx))
        crossings.append((target, xs, bool(lo <= lx <= hi)))
    curv = Curvature(intercept=qv["intercept"], linear=qv["linear"],
                     quadratic=qv["quadratic"], quadratic_se=qv["quadratic_se"],
                     statistic=qv["statistic"], df=qv["df"], p_value=qv["p_value"],
                     log_base=base, crossings=tuple(crossings))
    flagged = bool(qv["p_value"] < alpha)
    if flagged:
        direction = "rises" if qv["quadratic"] > 0 else "falls"
        e_lo, e_hi = curv.local_exponent([lo, hi])
        verdict = (f"residuals show curvature: the exponent {direction} with size "
                   f"(from {e_lo:.3g} to {e_hi:.3g} across the data; {p_text(qv['p_value'])})")
    else:
        verdict = f"no detectable curvature on log-log scales ({p_text(qv['p_value'])})"
    checks.append(Check(check="curvature", test="quadratic term t", statistic=qv["statistic"],
                        df=qv["df"], p_value=qv["p_value"], estimate=qv["quadratic"],
                        flagged=flagged, verdict=verdict))

    # influence
    infl = OLSInfluence(OLS(Y, exog).fit())
    cooks = np.asarray(infl.cooks_distance[0], dtype=float)
    threshold = 4.0 / n
    above = np.flatnonzero(cooks > threshold)
    above = above[np.argsort(-cooks[above], kind="stable")]
    influential = tuple(rows[above].tolist())
    flagged = above.size > 0
    if flagged:
        shown = ", ".join(str(r) for r in influential[:5])
        more = f" and {len(influential) - 5} more" if len(influential) > 5 else ""
        verdict = (f"{len(influential)} row(s) pull the line strongly (Cook's distance > 4/n): "
                   f"row {shown}{more}; check them and refit without them to see the effect")
    else:
        verdict = "no row has an outsized pull on the line (all Cook's distances <= 4/n)"
    checks.append(Check(check="influence", test="Cook's distance", statistic=float(cooks.max()),
                        df=math.nan, p_value=math.nan, estimate=float(cooks.max()),
                        flagged=flagged, verdict=verdict))

    return Diagnostics(method=fit.method, n=n, alpha=alpha, checks=tuple(checks),
                       curvature=curv, residuals=resid, cooks_distance=cooks,
                       influence_threshold=threshold, influential_rows=influential,
                       rows=rows)


def _exact_diagnostics(fit: LineFit, X, Y, rows, alpha: float) -> Diagnostics:
    """Diagnostics of points on an exact power law: no check applies.

    With no residual scatter (r = +-1 up to rounding) the residuals are
    rounding noise, so normality, constant-variance, curvature and influence
    statistics would read noise as signal (a curvature t of 1e3 is common).
    Every check is reported unflagged with NaN statistics and says why.
    """
    n = X.size
    why = f"{EXACT_NOTE}; residual checks do not apply"
    checks = tuple(
        Check(check=name, test=test, statistic=math.nan, df=math.nan, p_value=math.nan,
              estimate=math.nan, flagged=False, verdict=why)
        for name, test in (("normality", "Shapiro-Wilk"),
                           ("constant_variance", "Breusch-Pagan"),
                           ("curvature", "quadratic term t"),
                           ("influence", "Cook's distance")))
    curv = Curvature(intercept=fit.intercept, linear=fit.slope, quadratic=0.0,
                     quadratic_se=math.nan, statistic=math.nan, df=float(n - 3),
                     p_value=math.nan, log_base=fit.log_base, crossings=())
    return Diagnostics(method=fit.method, n=n, alpha=alpha, checks=checks, curvature=curv,
                       residuals=Y - fit.intercept - fit.slope * X,
                       cooks_distance=np.zeros(n), influence_threshold=4.0 / n,
                       influential_rows=(), rows=rows)


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
        ``"multiplicative"``, ``"additive"`` or ``"neither"`` (|delta| < 2).
    verdict : str
    """

    n: int
    additive: ErrorModel
    multiplicative: ErrorModel
    delta_aicc: float
    weight_multiplicative: float
    preferred: str
    verdict: str

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
    ``scipy.optimize.curve_fit`` from the log-scale OLS estimates; if it
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
    b_log, ln_a = np.polyfit(lx, ly, 1)
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

    def power(xv, a, b):
        return a * np.power(xv, b)

    converged = True
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", optimize.OptimizeWarning)
            with np.errstate(over="ignore", invalid="ignore"):
                (a_s, b_nl), _ = optimize.curve_fit(
                    power, xs, ys, p0=(math.exp(ln_a + b_log * ln_cx - ln_cy), b_log),
                    maxfev=5000)
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
        verdict = ("only the multiplicative (log-scale) model could be fitted; "
                   f"its exponent is {mult.b:.3g}")
    elif abs(delta) < 2:
        preferred = "neither"
        verdict = (f"the data do not clearly favour either error model (AICc difference "
                   f"{abs(delta):.2g} < 2); exponents {mult.b:.3g} (multiplicative) and "
                   f"{add.b:.3g} (additive) -- consider reporting both")
    elif delta > 0:
        preferred = "multiplicative"
        verdict = (f"scatter grows with size (multiplicative, lognormal error; AICc lower by "
                   f"{delta:.3g}): fitting on log scales is appropriate; exponent {mult.b:.3g}")
    else:
        preferred = "additive"
        verdict = (f"scatter is constant on the arithmetic scale (additive normal error; AICc "
                   f"lower by {-delta:.3g}): the nonlinear fit is better supported; exponent "
                   f"{add.b:.3g} (the log-scale fit gives {mult.b:.3g})")
    return ErrorStructure(n=n, additive=add, multiplicative=mult, delta_aicc=delta,
                          weight_multiplicative=w_mult, preferred=preferred, verdict=verdict)


# --------------------------------------------------------------------------
# points to check, graded

SMEARING_RATIO_LIMIT = 1.25
COOK_STRONG = 1.0


@dataclass(frozen=True, slots=True, kw_only=True)
class PointCheck:
    """One thing the user should look at.

    Attributes
    ----------
    severity : str
        ``"strong"`` (look at this before using the numbers) or ``"mild"``
        (a note).
    kind : str
        ``"influence"``, ``"smearing"``, ``"outside_interval"`` or
        ``"group_residuals"``.
    row : int or None
        Input row number of the point (None for checks of the whole fit).
    label : str
        The point's label (e.g. its species), or what the check is about.
    value : float
        Cook's distance, smearing/parametric ratio, the estimate, or the
        ANOVA p-value.
    reason : str
        Plain-language reason.
    """

    severity: str
    kind: str
    row: int | None
    label: str
    value: float
    reason: str

    def to_record(self) -> dict:
        return {"severity": self.severity, "kind": self.kind, "row": self.row,
                "label": self.label, "value": self.value, "reason": self.reason}


def _moments_last_axis(X: np.ndarray, Y: np.ndarray) -> Moments:
    n = X.shape[-1]
    mx, my = X.mean(axis=-1), Y.mean(axis=-1)
    d, f = X - mx[..., None], Y - my[..., None]
    return Moments(n=np.full(mx.shape, float(n)), mean_x=mx, mean_y=my,
                   sxx=np.sum(d * d, axis=-1), syy=np.sum(f * f, axis=-1),
                   sxy=np.sum(d * f, axis=-1))


def _xy(log_x, log_y, what: str) -> tuple:
    X = np.asarray(log_x, dtype=float)
    Y = np.asarray(log_y, dtype=float)
    if X.ndim < 1 or X.shape != Y.shape:
        raise DataError("log_x and log_y must be arrays of equal shape (..., n)")
    if X.shape[-1] < MIN_N:
        raise DataError(f"log_x and log_y need at least {MIN_N} rows for {what}, "
                        f"not {X.shape[-1]}")
    return X, Y


def cooks_distances(log_x, log_y) -> np.ndarray:
    """Cook's distance of every point in the OLS regression of Y on X.

    Parameters
    ----------
    log_x, log_y : array_like, shape (..., n)
        One sample, or many (leading axes, e.g. simulation replicates).

    Returns
    -------
    ndarray, shape (..., n)

    Notes
    -----
    D_i = e_i^2 h_i / (2 s^2 (1 - h_i)^2), h_i = 1/n + (X_i - mean X)^2 / S_xx,
    s^2 = sum e^2 / (n - 2) (Cook 1977, *Technometrics* 19:15).
    """
    X, Y = _xy(log_x, log_y, "Cook's distances")
    n = X.shape[-1]
    xc = X - X.mean(axis=-1, keepdims=True)
    yc = Y - Y.mean(axis=-1, keepdims=True)
    sxx = np.sum(xc * xc, axis=-1, keepdims=True)
    with np.errstate(divide="ignore", invalid="ignore"):
        b = np.sum(xc * yc, axis=-1, keepdims=True) / sxx
        e = yc - b * xc
        s2 = np.sum(e * e, axis=-1, keepdims=True) / (n - 2)
        h = 1.0 / n + xc * xc / sxx
        return e * e * h / (2 * s2 * (1 - h) ** 2)


def leave_one_out_slopes(log_x, log_y, *, method: str = "ols") -> np.ndarray:
    """The exponent refitted without each point in turn, all at once.

    Parameters
    ----------
    log_x, log_y : array_like, shape (..., n)
        One sample, or many (leading axes).
    method : str
        A moment method of :data:`scaling.stats.lines.METHODS` (ols, sma, ma).

    Returns
    -------
    ndarray, shape (..., n)
        b_(-i), the slope of the same method without point i.

    Notes
    -----
    Downdating (exact algebra of centred sums): with d_i = X_i - mean X and
    f_i = Y_i - mean Y, removing point i gives n - 1 points with
    S_xx - n/(n-1) d_i^2, S_yy - n/(n-1) f_i^2, S_xy - n/(n-1) d_i f_i and
    means shifted by -d_i/(n-1), -f_i/(n-1).
    """
    if method not in METHODS:
        raise ConfigError(f"leave_one_out_slopes: method must be one of "
                          f"{', '.join(METHODS)}, not {method!r}")
    X, Y = _xy(log_x, log_y, "leaving one out")
    n = X.shape[-1]
    m = _moments_last_axis(X, Y)
    d, f = X - m.mean_x[..., None], Y - m.mean_y[..., None]
    k = n / (n - 1)
    down = Moments(n=np.full(X.shape, n - 1.0), mean_x=m.mean_x[..., None] - d / (n - 1),
                   mean_y=m.mean_y[..., None] - f / (n - 1),
                   sxx=m.sxx[..., None] - k * d * d, syy=m.syy[..., None] - k * f * f,
                   sxy=m.sxy[..., None] - k * d * f)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return np.asarray(fit_moments(down, method)["slope"], dtype=float)


def strong_influence(log_x, log_y, *, method: str = "ols") -> dict:
    """Which points get a strong influence warning, for one sample or many.

    Returns
    -------
    dict of ndarray
        ``flag`` (..., n) bool: D_i > 1 or |b_(-i) - b| > se(b);
        ``cook``, ``slope_without`` (..., n); ``slope``, ``slope_se`` (...).

    Notes
    -----
    Rules and sources are in the module docstring.
    """
    X, Y = _xy(log_x, log_y, "influence")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        full = fit_moments(_moments_last_axis(X, Y), method)
    b, se = np.asarray(full["slope"], float), np.asarray(full["slope_se"], float)
    loo = leave_one_out_slopes(X, Y, method=method)
    cook = cooks_distances(X, Y)
    with np.errstate(invalid="ignore"):
        moved = np.abs(loo - b[..., None]) > se[..., None]
        # exact fits (se = 0; D is rounding noise) are never flagged
        flag = ((cook > COOK_STRONG) | moved) & (se[..., None] > 0)
    return {"flag": flag, "cook": cook, "slope_without": loo, "slope": b, "slope_se": se}


def fit_checks(*, smearing_factor: float | None = None,
               parametric_factor: float | None = None, estimates=None) -> list:
    """The checks of :func:`points_to_check` that need no data points.

    Parameters
    ----------
    smearing_factor, parametric_factor : float, optional
    estimates : iterable of (label, estimate, low, high), optional

    Returns
    -------
    list of PointCheck
        Strong warnings: smearing/parametric ratio outside
        [1/SMEARING_RATIO_LIMIT, SMEARING_RATIO_LIMIT]; estimates outside
        [low, high].
    """
    out = []
    if smearing_factor is not None and parametric_factor is not None \
            and np.isfinite(smearing_factor) and np.isfinite(parametric_factor) \
            and parametric_factor > 0:
        ratio = smearing_factor / parametric_factor
        if not 1 / SMEARING_RATIO_LIMIT <= ratio <= SMEARING_RATIO_LIMIT:
            out.append(PointCheck(
                severity="strong", kind="smearing", row=None, label="", value=float(ratio),
                reason=smearing_reason(smearing_factor, parametric_factor,
                                       SMEARING_RATIO_LIMIT)))
    for label, est, low, high in (estimates or ()):
        if np.isfinite(est) and np.isfinite(low) and np.isfinite(high) \
                and not low <= est <= high:
            out.append(PointCheck(severity="strong", kind="outside_interval", row=None,
                                  label=str(label), value=float(est),
                                  reason=estimate_outside_reason(str(label), est, low, high)))
    return out


def points_to_check(log_x, log_y, *, method: str = "ols", rows=None, labels=None,
                    groups=None, smearing_factor: float | None = None,
                    parametric_factor: float | None = None, estimates=None,
                    alpha: float = 0.05) -> tuple:
    """Graded warnings: influential points, odd correction factors, grouped residuals.

    Parameters
    ----------
    log_x, log_y : array_like, shape (n,)
        The log-scale data of the fit.
    method : str
        Line method whose exponent is refitted without each point (a moment
        method; others are checked through OLS).
    rows, labels : array_like, optional
        Input row number and label of each point.
    groups : array_like, optional
        Group of each point; residuals are compared between groups.
    smearing_factor, parametric_factor : float, optional
        The two correction factors of the fit.
    estimates : iterable of (label, estimate, low, high), optional
        Back-transformed estimates and their intervals.
    alpha : float
        Level of the group-residual test.

    Returns
    -------
    tuple of PointCheck
        Strong ones first.

    Notes
    -----
    Rules and sources are in the module docstring.
    """
    alpha = _check_alpha(alpha)
    X = np.asarray(log_x, dtype=float)
    Y = np.asarray(log_y, dtype=float)
    if X.ndim != 1 or X.shape != Y.shape:
        raise DataError("log_x and log_y must be one-dimensional and of equal length")
    n = X.size
    if n < MIN_N:
        raise DataError(f"log_x and log_y need at least {MIN_N} rows for points_to_check, "
                        f"not {n}")
    rows = np.arange(n) if rows is None else np.asarray(rows)
    labels = np.full(n, "", dtype=object) if labels is None else np.asarray(labels, dtype=object)
    if rows.shape != (n,) or labels.shape != (n,):
        raise DataError(f"rows and labels must give one value per point ({n})")
    use = method if method in METHODS else "ols"
    out = []
    if np.ptp(X) > 0:
        inf = strong_influence(X, Y, method=use)
        cook, loo, flag = inf["cook"], inf["slope_without"], inf["flag"]
        b, se = float(inf["slope"]), float(inf["slope_se"])
        for i in np.flatnonzero(flag)[np.argsort(-cook[flag], kind="stable")]:
            out.append(PointCheck(
                severity="strong", kind="influence", row=int(rows[i]), label=str(labels[i]),
                value=float(cook[i]),
                reason=influence_reason(int(rows[i]), str(labels[i]), cook=float(cook[i]),
                                        slope=b, slope_without=float(loo[i]), se=se,
                                        method=use)))
    out += fit_checks(smearing_factor=smearing_factor, parametric_factor=parametric_factor,
                      estimates=estimates)
    if groups is not None:
        g = np.asarray(groups, dtype=object)
        if g.shape != (n,):
            raise DataError(f"groups must give one value per point ({n})")
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            b_line = fit_moments(_one(X, Y), use)
        resid = Y - float(b_line["intercept"][0]) - float(b_line["slope"][0]) * X
        codes, uniq = _codes(g)
        samples = [resid[codes == k] for k in range(len(uniq))]
        samples = [s for s in samples if s.size >= 2]
        if len(samples) >= 2:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                res = stats.f_oneway(*samples)
            p = float(res.pvalue)
            if np.isfinite(p) and p < alpha:
                df2 = sum(s.size for s in samples) - len(samples)
                out.append(PointCheck(
                    severity="mild", kind="group_residuals", row=None, label="",
                    value=p, reason=group_residuals_reason(float(res.statistic),
                                                           len(samples) - 1, df2, p)))
    out.sort(key=lambda c: c.severity != "strong")
    return tuple(out)


def _one(X: np.ndarray, Y: np.ndarray) -> Moments:
    m = moments(X, Y)
    return Moments(**{k: np.atleast_1d(getattr(m, k)) for k in
                      ("n", "mean_x", "mean_y", "sxx", "syy", "sxy")})


def _codes(values: np.ndarray) -> tuple:
    uniq, codes = np.unique(values.astype(str), return_inverse=True)
    return codes, uniq
