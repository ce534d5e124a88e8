"""Checks of a fitted line's residuals: normality, constant variance, curvature, influence.

:func:`diagnose` reads a fitted :class:`scaling.stats.lines.LineFit` and the log
data it was fitted to and returns a :class:`Diagnostics` with one
:class:`Check` per question.

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
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np
from scipy import stats

from ..errors import ConfigError, DataError, DegenerateDataWarning
from .lines import exact_fit
from .line_results import LineFit
from .moments import moments

__all__ = ["Check", "Curvature", "Diagnostics", "diagnose", "quadratic_t", "MIN_N"]

#: Fewest points a diagnostic check reads.
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
    finding : str
        ``"flagged"``, ``"clear"`` or ``"exact_fit"`` (no residual scatter:
        the check does not apply).  The plain-language reading is
        :func:`scaling.render.findings.check_verdict`.
    direction : int
        constant_variance: +1 when the scatter grows with size, -1 when it
        shrinks; curvature: the sign of the quadratic term; 0 otherwise.
    exponent_low, exponent_high : float
        curvature: the local exponent at the smallest and largest x (NaN
        for the other checks).
    rows : tuple of int
        influence: the rows above the threshold, largest distance first.
    """

    check: str
    test: str
    statistic: float
    df: float
    p_value: float
    estimate: float
    flagged: bool
    finding: str
    direction: int = 0
    exponent_low: float = math.nan
    exponent_high: float = math.nan
    rows: tuple = ()

    def to_record(self) -> dict:
        return {"check": self.check, "test": self.test, "statistic": self.statistic,
                "df": self.df, "p_value": self.p_value, "estimate": self.estimate,
                "flagged": self.flagged, "finding": self.finding}


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
        """One row per check (columns method, check, test, statistic, df, p_value, estimate,
        flagged, finding)."""
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


def _finding(flagged) -> str:
    return "flagged" if flagged else "clear"


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
    checks.append(Check(check="normality", test="Shapiro-Wilk", statistic=w_stat,
                        df=math.nan, p_value=p_sw, estimate=math.nan,
                        flagged=flagged, finding=_finding(flagged)))

    # constant variance
    if np.ptp(resid) == 0:
        warnings.warn("residuals are all equal: the constant-variance test is not defined",
                      DegenerateDataWarning, stacklevel=2)
        lm, p_bp = math.nan, math.nan
    else:
        lm, p_bp, _, _ = het_breuschpagan(resid, exog)
        lm, p_bp = float(lm), float(p_bp)
    flagged = bool(p_bp < alpha)
    trend = 0
    if flagged:
        # which way the squared residuals trend with size
        trend = 1 if np.polyfit(X, resid ** 2, 1)[0] > 0 else -1
    checks.append(Check(check="constant_variance", test="Breusch-Pagan", statistic=lm,
                        df=1.0, p_value=p_bp, estimate=math.nan, flagged=flagged,
                        finding=_finding(flagged), direction=trend))

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
    e_lo, e_hi = (float(e) for e in curv.local_exponent([lo, hi]))
    checks.append(Check(check="curvature", test="quadratic term t", statistic=qv["statistic"],
                        df=qv["df"], p_value=qv["p_value"], estimate=qv["quadratic"],
                        flagged=flagged, finding=_finding(flagged),
                        direction=1 if qv["quadratic"] > 0 else -1,
                        exponent_low=e_lo, exponent_high=e_hi))

    # influence
    infl = OLSInfluence(OLS(Y, exog).fit())
    cooks = np.asarray(infl.cooks_distance[0], dtype=float)
    threshold = 4.0 / n
    above = np.flatnonzero(cooks > threshold)
    above = above[np.argsort(-cooks[above], kind="stable")]
    influential = tuple(rows[above].tolist())
    flagged = above.size > 0
    checks.append(Check(check="influence", test="Cook's distance", statistic=float(cooks.max()),
                        df=math.nan, p_value=math.nan, estimate=float(cooks.max()),
                        flagged=flagged, finding=_finding(flagged), rows=influential))

    return Diagnostics(method=fit.method, n=n, alpha=alpha, checks=tuple(checks),
                       curvature=curv, residuals=resid, cooks_distance=cooks,
                       influence_threshold=threshold, influential_rows=influential,
                       rows=rows)


def _exact_diagnostics(fit: LineFit, X, Y, rows, alpha: float) -> Diagnostics:
    """Diagnostics of points on an exact power law: no check applies.

    With no residual scatter (r = +-1 up to rounding) the residuals are
    rounding noise, so normality, constant-variance, curvature and influence
    statistics would read noise as signal (a curvature t of 1e3 is common).
    Every check is reported unflagged with NaN statistics and finding
    ``"exact_fit"``.
    """
    n = X.size
    checks = tuple(
        Check(check=name, test=test, statistic=math.nan, df=math.nan, p_value=math.nan,
              estimate=math.nan, flagged=False, finding="exact_fit")
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

