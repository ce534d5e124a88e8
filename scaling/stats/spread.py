"""How exponents vary across many groups: a random-effects summary.

Given per-group exponents b_i with sampling variances v_i (the squared
``slope_se`` of a fit), the model is theta_i = mu + u_i + e_i on an
*analysis scale* theta = g(b), with u_i ~ N(0, tau^2) between groups and
e_i ~ N(0, s_i) within.  ``mu`` is the typical value and ``tau`` the
between-group standard deviation; the summary is reported on the exponent
scale.

Analysis scale (``scale``)
    A random-effects mean weights each group by 1/(s_i + tau^2).  If s_i is
    correlated with the estimate, the weights favour one side and the mean is
    biased.  For an SMA slope var(b) = b^2 (1 - r^2)/(n - 2) (Warton, Wright,
    Falster & Westoby 2006, *Biol. Rev.* 81:259): larger estimates get less
    weight, and the mean of 30 groups falls low (about -0.010 at b = 0.75,
    tau = 0.05; 95% intervals covering 0.89-0.91, table below).  The MA slope has the same
    defect through var(b) = (1 + b^2)^2 var(atan b).  So each method is
    summarised where its variance does not depend on the estimate:

    ``"log"`` (SMA): theta = log|b|, s = v/b^2 = (1 - r^2)/(n - 2) (delta
    method).  log|b| = (log Syy - log Sxx)/2; for bivariate normal data,
    swapping the standardised x and y maps its error to minus itself and
    keeps r, so the error is uncorrelated with s.
    ``"angle"`` (MA): theta = atan b, s = v/(1 + b^2)^2
    = l1 l2/((n - 2)(l1 - l2)^2) (Warton et al. 2006); a reflection about the
    true axis likewise flips the error and keeps the eigenvalues l1, l2.
    ``"slope"`` (OLS and anything else): theta = b, s = v.  The OLS slope is
    independent of its residual variance under normal errors.
    ``"auto"`` (default) picks by ``method``: log for SMA, angle for MA, slope
    otherwise.  SMA exponents of mixed signs cannot be averaged as log|b| and
    fall back to the slope scale (``scale`` records what was used).

Mean exponent
    On the analysis scale mu = sum w* theta / sum w*, w* = 1/(s + tau^2).
    Back on the exponent scale the reported ``mean`` is the mean of the group
    exponents, not just g^-1(mu): ``sign exp(mu + tau^2/2)`` (the mean of a
    lognormal; log scale) and, to second order in tau,
    ``tan(mu) (1 + (1 + tan^2 mu) tau^2)`` (angle scale).  Its interval is the
    same map applied to the bounds on the analysis scale; ``mean_se`` is the
    delta-method SE (derivative of that map at mu).
    Interval ``"knapp_hartung"`` (default): se^2 = max(1, q) / sum w* with
    q = sum w* (theta - mu)^2/(k - 1), and t on k - 1 df (Hartung & Knapp
    2001, *Stat. Med.* 20:3875; Knapp & Hartung 2003, *Stat. Med.* 22:2693,
    whose ad hoc modification max(1, q) keeps the interval from being
    narrower than the z interval; Roever, Knapp & Friede 2015, *BMC Med. Res.
    Methodol.* 15:99).  Without the truncation (``"knapp_hartung_plain"``, the
    Hartung-Knapp-Sidik-Jonkman interval) coverage is 0.94 in the
    simulation below: the group variances are estimated from the groups
    themselves, not known.
    Interval ``"z"``: mu -+ z / sqrt(sum w*) (DerSimonian & Laird 1986,
    *Control. Clin. Trials* 7:177); liberal with estimated variances.
    Measured coverage of the 95% interval (30 groups of 10-60 bivariate
    normal points, r 0.6-0.96, group exponents N(0.75, 0.05^2), REML;
    12 seeds x 2000 sets; tests/test_spread.py runs one seed):

    ========  =============  ===================  =====  ==================
    method    knapp_hartung  knapp_hartung_plain  z      on the slope scale
    ========  =============  ===================  =====  ==================
    OLS       0.949          0.944                0.935  (same)
    SMA       0.951          0.944                0.935  0.906
    MA        0.948          0.940                0.932  0.913
    ========  =============  ===================  =====  ==================

    The test of mu = beta0 for each hypothesised exponent is the interval
    inverted: beta0 is mapped to the analysis scale by the same map and
    referred to the same distribution (a beta0 of the other sign than log-
    scale exponents gets an infinite statistic).
Estimators of tau^2 (on the analysis scale)
    ``"dl"``: DerSimonian & Laird (1986, eq. 8): with w_i = 1/s_i, the
    fixed-effect mean m_w = sum w theta / sum w, Q = sum w (theta - m_w)^2 and
    C = sum w - sum w^2 / sum w, tau^2 = max(0, (Q - (k - 1)) / C).
    ``"reml"`` (default): the maximiser on [0, upper] of the restricted
    log-likelihood (Viechtbauer 2005, *J. Educ. Behav. Stat.* 30:261)

        l_R(tau^2) = -1/2 [sum log(s_i + tau^2) + log sum w_i
                           + sum w_i (theta_i - mu)^2],   w_i = 1/(s_i + tau^2),

    by Fisher scoring, tau^2 <- tau^2 + (sum w^2 (theta - mu)^2 - tr P)/tr(PP),
    P = W - W 1 1' W / sum w, started at the DL value and kept inside a
    bracket of [0, upper] whose ends have a positive and a negative score; a
    step that leaves the bracket, or does not shrink fast enough, is replaced
    by the bracket's midpoint, so the iteration cannot cycle.  A set that has
    not converged after ``max_iter`` steps, or whose maximum is at the upper
    bound, warns (:class:`~scaling.errors.DegenerateDataWarning`) and
    returns the last iterate.
Between-group SD on the exponent scale
    ``tau2``/``tau`` are reported on the exponent scale by the delta method
    at the centre: tau_b = |d g^-1/d theta| tau (exp(mu) tau on the log
    scale, (1 + tan^2 mu) tau on the angle scale), the Q-profile bounds
    mapped the same way; the analysis-scale value is ``scale_tau2``.
Interval for tau^2 (Q-profile; Viechtbauer 2007, *Stat. Med.* 26:37)
    The generalised Q(tau^2) = sum (theta - mu(tau^2))^2 / (s + tau^2) is
    chi^2 on k - 1 df at the true tau^2 and decreases in tau^2; the bounds
    solve Q = chi^2_{1-alpha/2} and Q = chi^2_{alpha/2} (0 where Q(0) is
    already below the quantile).  ``tau_ci`` is its square root.
Heterogeneity (analysis scale)
    Cochran's Q with its chi^2 p-value and I^2 = max(0, (Q - (k-1))/Q)
    (Higgins & Thompson 2002, *Stat. Med.* 21:1539).

All estimators are vectorised over leading axes (``b`` and ``v`` of shape
(..., k)), so a simulation of many replicates is one array pass
(:func:`spread_arrays`).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from . import tails

from ._display import frame_html, short_repr
from ..errors import ConfigError, DataError, DegenerateDataWarning
from .line_results import ConfidenceInterval
from .schema import check_confidence

__all__ = ["ExponentSpread", "exponent_spread", "spread_from_fits", "spread_arrays",
           "tau2_dl", "tau2_reml", "tau2_q_profile", "TAU2_METHODS",
           "MEAN_INTERVALS", "SCALES", "SPREAD_COLUMNS", "SPREAD_TEST_COLUMNS"]

TAU2_METHODS = ("reml", "dl")
MEAN_INTERVALS = ("z", "knapp_hartung", "knapp_hartung_plain")
SCALES = ("auto", "slope", "log", "angle")
#: The analysis scale ``scale="auto"`` uses for each line method (others: "slope").
_METHOD_SCALE = {"sma": "log", "ma": "angle"}
SPREAD_COLUMNS = ["method", "tau2_method", "k", "mean", "mean_se", "mean_low", "mean_high",
                  "mean_interval", "tau", "tau_low", "tau_high", "tau2", "tau2_low",
                  "tau2_high", "q", "q_df", "q_p_value", "i2", "confidence", "scale"]
SPREAD_TEST_COLUMNS = ["method", "hypothesis", "exponent", "estimate", "statistic",
                       "statistic_type", "df", "p_value"]


# --------------------------------------------------------------------------
# vectorised estimators (last axis: groups)


def _fixed(b, v):
    w = 1.0 / v
    sw = w.sum(-1)
    mu = (w * b).sum(-1) / sw
    q = (w * (b - mu[..., None]) ** 2).sum(-1)
    return w, sw, mu, q


def tau2_dl(b, v) -> np.ndarray:
    """DerSimonian & Laird (1986, eq. 8) tau^2, vectorised over leading axes."""
    b, v = np.asarray(b, float), np.asarray(v, float)
    w, sw, _, q = _fixed(b, v)
    c = sw - (w * w).sum(-1) / sw
    k = b.shape[-1]
    return np.maximum(0.0, (q - (k - 1)) / c)


def _reml_score(b, v, t2):
    """Score (times 2) and expected information (times 2) of l_R at t2 (module docstring)."""
    w = 1.0 / (v + t2[..., None])
    sw = w.sum(-1)
    mu = (w * b).sum(-1) / sw
    sw2 = (w * w).sum(-1)
    sw3 = (w ** 3).sum(-1)
    tr_p = sw - sw2 / sw
    tr_pp = sw2 - 2 * sw3 / sw + (sw2 / sw) ** 2
    score = (w * w * (b - mu[..., None]) ** 2).sum(-1) - tr_p
    return score, tr_pp


def tau2_reml(b, v, *, tol: float = 1e-12, max_iter: int = 200) -> np.ndarray:
    """REML tau^2 by bounded, bracketed Fisher scoring (see module docstring).

    Parameters
    ----------
    b, v : array_like, shape (..., k)
        Estimates and their sampling variances; leading axes are independent sets.
    tol : float
        Converged when the step, or the bracket, is below ``tol`` times
        (tau^2 + the median of v).
    max_iter : int
        Steps before giving up.

    Returns
    -------
    ndarray, shape (...)

    Warns
    -----
    DegenerateDataWarning
        If a set has not converged after ``max_iter`` steps or its maximum is
        at the upper bound of the search interval.

    Notes
    -----
    The search keeps a bracket [lo, hi] of [0, upper] with a positive score
    at lo and a negative score at hi, so it always holds a maximum of l_R.
    Each step is the Fisher-scoring step, or the midpoint of the bracket when
    that step would leave it or is not at most half the step before last
    (as in a safeguarded Newton root finder); the bracket shrinks at every
    step, so the iteration cannot cycle (plain Fisher scoring can: the expected
    information may be half the observed one near the maximum, and the
    iterates then jump from side to side).  A set whose score at 0 is not
    positive has its maximum at 0.
    """
    b, v = np.asarray(b, float), np.asarray(v, float)
    # The maximiser lies well inside [0, upper]: l_R falls like -(k-1)/2 log tau^2
    # once tau^2 dwarfs the spread of the estimates and their variances.
    upper = 10.0 * (np.ptp(b, axis=-1) ** 2 + v.max(-1)) + 1e-300
    scale = np.median(v, axis=-1)
    lo, hi = np.zeros(upper.shape), upper.copy()
    active = _reml_score(b, v, lo)[0] > 0
    t2 = np.where(active, np.clip(tau2_dl(b, v), 0.0, upper), 0.0)
    last = np.full(t2.shape, np.inf)     # the step before the previous one
    prev = np.full(t2.shape, np.inf)
    for _ in range(max_iter):          # iterations, not replicates: all sets run together
        if not active.any():
            break
        score, info = _reml_score(b, v, t2)
        up = score > 0
        lo = np.where(active & up, t2, lo)
        hi = np.where(active & ~up, t2, hi)
        with np.errstate(divide="ignore", invalid="ignore"):
            prop = t2 + score / info
        # bisect when the scoring step leaves the bracket or does not at least halve
        # every two steps (it can oscillate slowly about the maximum)
        good = (prop > lo) & (prop < hi) & (np.abs(prop - t2) <= 0.5 * np.abs(last))
        new = np.where(good, prop, 0.5 * (lo + hi))
        last, prev = prev, np.where(active, new - t2, prev)
        small = tol * (t2 + scale)
        done = (np.abs(new - t2) <= small) | (hi - lo <= small)
        t2 = np.where(active, new, t2)
        active &= ~done
    at_top = t2 >= upper * (1 - 1e-9)
    if np.any(active) or np.any(at_top):
        bad = int(np.sum(active | at_top))
        warnings.warn(f"REML tau^2 did not converge in {max_iter} steps for {bad} of "
                      f"{t2.size} set(s) (the restricted likelihood is flat or its maximum "
                      "is at the edge of the search interval); the last iterate is returned. "
                      "Suggestion: compare with tau2_method='dl'.",
                      DegenerateDataWarning, stacklevel=2)
    return t2


def _random_mean(b, v, t2):
    w = 1.0 / (v + t2[..., None])
    sw = w.sum(-1)
    mu = (w * b).sum(-1) / sw
    return w, sw, mu


def _gen_q(b, v, t2):
    w, _, mu = _random_mean(b, v, t2)
    return (w * (b - mu[..., None]) ** 2).sum(-1)


def tau2_q_profile(b, v, confidence: float = 0.95, *, iters: int = 200) -> tuple:
    """Q-profile interval for tau^2 (Viechtbauer 2007), by vectorised bisection."""
    b, v = np.asarray(b, float), np.asarray(v, float)
    k = b.shape[-1]
    alpha = 1 - confidence
    hi_q, lo_q = tails.chi2_quantile(1 - alpha / 2, k - 1), tails.chi2_quantile(alpha / 2, k - 1)
    q0 = _gen_q(b, v, np.zeros(b.shape[:-1]))
    spread = b.max(-1) - b.min(-1)
    top = np.maximum(100.0 * (spread ** 2 + v.max(-1)), 1e-12)

    def solve(target):
        # Q(tau^2) decreases from q0 to about 0: root of Q - target on [0, top]
        lo = np.zeros(q0.shape)
        hi = top.copy()
        grow = _gen_q(b, v, hi) > target
        while grow.any():               # widen the bracket where needed (rare)
            hi = np.where(grow, hi * 10, hi)
            grow = _gen_q(b, v, hi) > target
        for _ in range(iters):
            mid = 0.5 * (lo + hi)
            above = _gen_q(b, v, mid) > target
            lo = np.where(above, mid, lo)
            hi = np.where(above, hi, mid)
            if np.all(hi - lo <= 1e-14 * np.maximum(hi, 1e-300)):
                break
        root = 0.5 * (lo + hi)
        return np.where(q0 > target, root, 0.0)

    return solve(hi_q), solve(lo_q)


# --------------------------------------------------------------------------
# analysis scales: to the scale, back to exponents (mean of the group exponents)


def _to_scale(b, v, scale):
    b, v = np.asarray(b, float), np.asarray(v, float)
    if scale == "log":
        with np.errstate(divide="ignore"):
            return np.log(np.abs(b)), v / (b * b)
    if scale == "angle":
        return np.arctan(b), v / (1.0 + b * b) ** 2
    return b, v


def _back(x, t2, scale, sign):
    """Mean exponent from the analysis-scale centre x and between-group variance t2."""
    if scale == "log":
        return sign * np.exp(x + t2 / 2)
    if scale == "angle":
        t = np.tan(x)
        return t * (1.0 + (1.0 + t * t) * t2)
    return x


def _back_slope(x, t2, scale, sign):
    """d _back / d x (for the delta-method SE of the mean)."""
    if scale == "log":
        return np.abs(_back(x, t2, scale, sign))
    if scale == "angle":
        sec2 = 1.0 + np.tan(x) ** 2
        return sec2 * (1.0 + sec2 * t2) + 2.0 * np.tan(x) ** 2 * sec2 * t2
    return np.ones_like(np.asarray(x, float))


def _tau_factor(x, scale):
    """|d g^-1 / d theta| at the centre: the between-group SD back on the exponent scale."""
    if scale == "log":
        return np.exp(x)
    if scale == "angle":
        return 1.0 + np.tan(x) ** 2
    return np.ones_like(np.asarray(x, float))


def _from_exponent(b0, t2, scale, sign):
    """The analysis-scale centre whose mean exponent is b0 (inverse of :func:`_back`)."""
    b0 = np.asarray(b0, float)
    if scale == "log":
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(b0 * sign > 0, np.log(np.abs(b0)) - t2 / 2, np.nan)
    if scale == "angle":
        # t2 t^3 + (1 + t2) t - b0 = 0: increasing in t, one real root (Newton from b0)
        t = b0 / (1.0 + t2)
        for _ in range(100):
            f = t2 * t ** 3 + (1.0 + t2) * t - b0
            t = t - f / (3 * t2 * t * t + 1.0 + t2)
            if np.all(np.abs(f) <= 1e-15 * (1.0 + np.abs(b0))):
                break
        return np.arctan(t)
    return b0


def spread_arrays(estimates, variances, *, scale: str = "slope", tau2_method: str = "reml",
                  mean_interval: str = "knapp_hartung",
                  confidence: float = 0.95) -> dict:
    """The random-effects mean and its interval for many sets at once.

    Parameters
    ----------
    estimates, variances : array_like, shape (..., k)
        Per-group exponents and sampling variances; leading axes are sets.
    scale : {"slope", "log", "angle"}
        Analysis scale (module docstring).  On the log scale the sign of each
        set is that of the sum of its estimates.
    tau2_method, mean_interval, confidence
        As in :func:`exponent_spread`.

    Returns
    -------
    dict of ndarray, shape (...)
        ``mean``, ``low``, ``high``, ``mean_se`` (exponent scale); ``centre``,
        ``centre_se``, ``crit``, ``df``, ``tau2`` (analysis scale); ``sign``.
    """
    b, v = np.asarray(estimates, float), np.asarray(variances, float)
    theta, s = _to_scale(b, v, scale)
    sign = np.where(b.sum(-1) < 0, -1.0, 1.0)
    k = b.shape[-1]
    t2 = tau2_dl(theta, s) if tau2_method == "dl" else tau2_reml(theta, s)
    w, sw, mu = _random_mean(theta, s, t2)
    if mean_interval == "z":
        se = np.sqrt(1.0 / sw)
        df = math.inf
        crit = tails.normal_quantile(0.5 + confidence / 2)
    else:
        q = (w * (theta - mu[..., None]) ** 2).sum(-1) / (k - 1)
        if mean_interval == "knapp_hartung":
            q = np.maximum(q, 1.0)     # Knapp & Hartung's (2003) ad hoc truncation
        se = np.sqrt(q / sw)
        df = float(k - 1)
        crit = tails.t_quantile(0.5 + confidence / 2, df)
    ends = _back(mu - crit * se, t2, scale, sign), _back(mu + crit * se, t2, scale, sign)
    return {"mean": _back(mu, t2, scale, sign), "low": np.minimum(*ends),
            "high": np.maximum(*ends), "mean_se": _back_slope(mu, t2, scale, sign) * se,
            "centre": mu, "centre_se": se, "crit": crit, "df": df, "tau2": t2, "sign": sign}


# --------------------------------------------------------------------------
# result


@dataclass(frozen=True, slots=True, kw_only=True)
class ExponentSpread:
    """Random-effects summary of per-group exponents.

    Attributes
    ----------
    method : str
        The line method whose exponents were summarised ("" if unknown).
    tau2_method : {"reml", "dl"}
    k : int
        Number of groups.
    mean, mean_se : float
        Random-effects mean exponent and its (delta-method) standard error;
        with the Knapp-Hartung intervals the SE is the Knapp-Hartung one.
    mean_ci : ConfidenceInterval
    mean_interval : {"knapp_hartung", "z", "knapp_hartung_plain"}
    mean_df : float
        inf for z, k - 1 for Knapp-Hartung.
    tau2, tau : float
        Between-group variance and SD of the exponent (delta method from the
        analysis scale).
    tau2_ci, tau_ci : ConfidenceInterval
        Q-profile interval.
    q, q_df, q_p_value, i2 : float
        Cochran's Q, its df and p-value, and I^2 (analysis scale).
    confidence : float
    tests : tuple of dict
        One per hypothesised exponent: ``hypothesis, exponent, statistic, df,
        p_value``.
    scale : {"slope", "log", "angle"}
        The analysis scale used.
    scale_mean, scale_mean_se, scale_tau2 : float
        Centre, its SE and tau^2 on the analysis scale.
    """

    method: str
    tau2_method: str
    k: int
    mean: float
    mean_se: float
    mean_ci: ConfidenceInterval
    mean_interval: str
    mean_df: float
    tau2: float
    tau: float
    tau2_ci: ConfidenceInterval
    tau_ci: ConfidenceInterval
    q: float
    q_df: float
    q_p_value: float
    i2: float
    confidence: float
    tests: tuple = ()
    scale: str = "slope"
    scale_mean: float = math.nan
    scale_mean_se: float = math.nan
    scale_tau2: float = math.nan

    def to_frame(self) -> pd.DataFrame:
        """One row with :data:`SPREAD_COLUMNS`."""
        return pd.DataFrame([{
            "method": self.method, "tau2_method": self.tau2_method, "k": self.k,
            "mean": self.mean, "mean_se": self.mean_se, "mean_low": self.mean_ci.low,
            "mean_high": self.mean_ci.high, "mean_interval": self.mean_interval,
            "tau": self.tau, "tau_low": self.tau_ci.low, "tau_high": self.tau_ci.high,
            "tau2": self.tau2, "tau2_low": self.tau2_ci.low, "tau2_high": self.tau2_ci.high,
            "q": self.q, "q_df": self.q_df, "q_p_value": self.q_p_value, "i2": self.i2,
            "confidence": self.confidence, "scale": self.scale,
        }], columns=SPREAD_COLUMNS)

    def tests_frame(self) -> pd.DataFrame:
        """One row per hypothesised exponent, :data:`SPREAD_TEST_COLUMNS`."""
        kind = "z" if self.mean_interval == "z" else "t"
        return pd.DataFrame([{"method": self.method, **t, "estimate": self.mean,
                              "statistic_type": kind} for t in self.tests],
                            columns=SPREAD_TEST_COLUMNS)

    def __repr__(self) -> str:
        return short_repr(self, {"method": self.method, "k": self.k, "mean": self.mean,
                                 "mean_ci": (float(self.mean_ci.low), float(self.mean_ci.high)),
                                 "tau": self.tau, "i2": self.i2, "q_p_value": self.q_p_value})

    def _repr_html_(self) -> str:
        return frame_html(self.to_frame(), title="Spread of exponents among groups",
                          notes=[self.summary()])

    def summary(self) -> str:
        """The mean exponent, the spread between groups and the tests, in lines of text
        (:func:`scaling.render.findings.spread_summary`)."""
        from ..render.summaries import spread_summary
        return spread_summary(self)


# --------------------------------------------------------------------------
# public functions


def _check(estimates, variances):
    b = np.asarray(estimates, dtype=float)
    v = np.asarray(variances, dtype=float)
    if b.ndim != 1 or v.shape != b.shape:
        raise DataError(f"estimates and variances must be 1-d of one length, not shapes "
                        f"{b.shape} and {v.shape}")
    if b.size < 2:
        raise DataError(f"a random-effects summary needs at least 2 groups, not {b.size}")
    if not (np.all(np.isfinite(b)) and np.all(np.isfinite(v))):
        raise DataError("estimates and variances must be finite; drop groups whose "
                        "exponent is not estimable first")
    if np.any(v <= 0):
        raise DataError("variances must be positive (a group with a perfect fit has none)")
    return b, v


def _pick_scale(scale: str, method: str, b: np.ndarray) -> str:
    if scale not in SCALES:
        raise ConfigError(f"scale must be one of {', '.join(SCALES)}, not {scale!r}")
    one_sign = bool(np.all(b > 0) or np.all(b < 0))
    if scale == "auto":
        wanted = _METHOD_SCALE.get(str(method).lower(), "slope")
        return wanted if wanted != "log" or one_sign else "slope"
    if scale == "log" and not one_sign:
        raise DataError("scale='log' needs exponents of one sign (none zero); "
                        "use scale='slope'")
    return scale


def exponent_spread(estimates, variances, *, tau2_method: str = "reml",
                    mean_interval: str = "knapp_hartung", confidence: float = 0.95,
                    exponents=None, method: str = "", scale: str = "auto") -> ExponentSpread:
    """Random-effects mean exponent, between-group SD, their intervals and tests.

    Parameters
    ----------
    estimates : array_like, shape (k,)
        Per-group exponents.
    variances : array_like, shape (k,)
        Their sampling variances (``slope_se**2``), not standard errors.
    tau2_method : {"reml", "dl"}
    mean_interval : {"knapp_hartung", "z", "knapp_hartung_plain"}
        Default Knapp-Hartung with the ad hoc truncation max(1, q);
        ``"knapp_hartung_plain"`` without it; ``"z"`` the normal interval.
    confidence : float
    exponents : dict or sequence, optional
        Hypothesised exponents; the mean is tested against each.
    method : str
        The line method (echoed; with ``scale="auto"`` it chooses the scale).
    scale : {"auto", "slope", "log", "angle"}
        Analysis scale: ``"auto"`` is log|b| for SMA, atan b for MA and b
        otherwise.

    Returns
    -------
    ExponentSpread

    Warns
    -----
    DegenerateDataWarning
        If the REML iteration does not converge.

    Notes
    -----
    SMA and MA exponents are averaged where their sampling variance does not
    depend on the estimate (log|b|, var (1 - r^2)/(n - 2), Warton et al.
    2006, Biol. Rev. 81:259, with the delta method; MA on the angle atan b),
    and the mean of the group exponents is mapped back; OLS exponents are
    averaged as they are.  The default interval is Knapp-Hartung (Knapp &
    Hartung 2003, Stat. Med. 22:2693) with t on k - 1 df.  Formulas,
    references and the measured coverage are in the module docstring.
    """
    if tau2_method not in TAU2_METHODS:
        raise ConfigError(f"tau2_method must be one of {', '.join(TAU2_METHODS)}, "
                          f"not {tau2_method!r}")
    if mean_interval not in MEAN_INTERVALS:
        raise ConfigError(f"mean_interval must be one of {', '.join(MEAN_INTERVALS)}, "
                          f"not {mean_interval!r}")
    confidence = check_confidence(confidence)
    b, v = _check(estimates, variances)
    scale = _pick_scale(scale, method, b)
    k = b.size
    res = spread_arrays(b, v, scale=scale, tau2_method=tau2_method,
                        mean_interval=mean_interval, confidence=confidence)
    theta, s = _to_scale(b, v, scale)
    _, _, _, q = _fixed(theta, s)
    mu, se, t2 = float(res["centre"]), float(res["centre_se"]), float(res["tau2"])
    df = float(res["df"])
    sign = float(res["sign"])
    factor = float(_tau_factor(mu, scale))
    lo2, hi2 = (float(t) * factor ** 2 for t in tau2_q_profile(theta, s, confidence))
    tests = []
    if exponents is not None:
        items = (exponents.items() if isinstance(exponents, dict)
                 else ((f"{float(e):g}", e) for e in exponents))
        for name, b0 in items:
            if isinstance(b0, bool) or not isinstance(b0, (int, float, np.floating)):
                raise ConfigError(f"exponents.{name} must be a number, not {b0!r}")
            x0 = float(_from_exponent(float(b0), t2, scale, sign))
            # oriented so that a positive statistic means the mean lies above b0
            stat = (sign if scale == "log" else 1.0) * (mu - x0) / se
            if math.isnan(x0):    # b0 of the other sign than log-scale exponents
                stat = math.copysign(math.inf, sign)
            p = 2 * (tails.normal_upper(abs(stat)) if math.isinf(df)
                     else tails.t_upper(abs(stat), df))
            tests.append({"hypothesis": str(name), "exponent": float(b0),
                          "statistic": stat, "df": df, "p_value": float(p)})
    tau2 = t2 * factor ** 2
    return ExponentSpread(
        method=method, tau2_method=tau2_method, k=k, mean=float(res["mean"]),
        mean_se=float(res["mean_se"]),
        mean_ci=ConfidenceInterval(float(res["low"]), float(res["high"])),
        mean_interval=mean_interval, mean_df=df, tau2=tau2, tau=math.sqrt(tau2),
        tau2_ci=ConfidenceInterval(lo2, hi2),
        tau_ci=ConfidenceInterval(math.sqrt(lo2), math.sqrt(hi2)),
        q=float(q), q_df=float(k - 1), q_p_value=float(tails.chi2_upper(q, k - 1)),
        i2=float(max(0.0, (q - (k - 1)) / q)) if q > 0 else 0.0,
        confidence=float(confidence), tests=tuple(tests), scale=scale,
        scale_mean=mu, scale_mean_se=se, scale_tau2=t2)


def spread_from_fits(fits: pd.DataFrame, method: str, **options) -> ExponentSpread:
    """:func:`exponent_spread` of the estimable group rows of a ``fits`` table.

    Uses ``slope`` and ``slope_se**2`` of rows with ``scope == "group"`` and
    the given ``method``; groups whose slope or SE is not finite (or SE is 0)
    are left out.  ``options`` go to :func:`exponent_spread` (by default SMA
    exponents are averaged as log|b|, MA as atan b, with a Knapp-Hartung
    interval).
    """
    for col in ("scope", "method", "slope", "slope_se"):
        if col not in fits.columns:
            raise DataError(f"fits table has no column '{col}'")
    rows = fits[(fits["scope"] == "group") & (fits["method"] == method)]
    se = rows["slope_se"].to_numpy(dtype=float)
    b = rows["slope"].to_numpy(dtype=float)
    ok = np.isfinite(b) & np.isfinite(se) & (se > 0)
    if ok.sum() < 2:
        raise DataError(f"fewer than 2 groups with an estimable {method} exponent "
                        f"({int(ok.sum())}); no summary across groups")
    return exponent_spread(b[ok], se[ok] ** 2, method=method, **options)
