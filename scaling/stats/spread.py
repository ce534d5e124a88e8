"""How exponents vary across many groups: a random-effects summary.

Given per-group exponents b_i with sampling variances v_i (the squared
``slope_se`` of a fit), the model is b_i = mu + u_i + e_i with
u_i ~ N(0, tau^2) between groups and e_i ~ N(0, v_i) within.  ``mu`` is the
typical exponent and ``tau`` the between-group standard deviation.

Estimators of tau^2
    ``"dl"``: DerSimonian & Laird (1986, *Control. Clin. Trials* 7:177,
    eq. 8): with w_i = 1/v_i, the fixed-effect mean m_w = sum w b / sum w,
    Q = sum w (b - m_w)^2 and C = sum w - sum w^2 / sum w,
    tau^2 = max(0, (Q - (k - 1)) / C).
    ``"reml"``: restricted maximum likelihood, by Fisher scoring
    (Viechtbauer 2005, *J. Educ. Behav. Stat.* 30:261, eq. 12 family):
    with w_i = 1/(v_i + tau^2) and P = W - W 1 1' W / sum w,
    tau^2 <- tau^2 + (sum w^2 (b - mu)^2 - tr P) / tr(P P), truncated at 0.
Mean exponent
    mu = sum w* b / sum w*, w* = 1/(v + tau^2), se = 1/sqrt(sum w*).
    Interval ``"z"``: mu -+ z se (DerSimonian & Laird 1986).
    Interval ``"knapp_hartung"``: se_KH^2 = sum w* (b - mu)^2 / ((k - 1) sum w*)
    and t on k - 1 df (Knapp & Hartung 2003, *Stat. Med.* 22:2693; also
    Hartung & Knapp 2001) -- better coverage with few groups.
    Test of mu = beta0 for each hypothesised exponent uses the same
    statistic and distribution as the interval.
Interval for tau^2 (Q-profile; Viechtbauer 2007, *Stat. Med.* 26:37)
    The generalised Q(tau^2) = sum (b - mu(tau^2))^2 / (v + tau^2) is
    chi^2 on k - 1 df at the true tau^2 and decreases in tau^2; the bounds
    solve Q = chi^2_{1-alpha/2} and Q = chi^2_{alpha/2} (0 where Q(0) is
    already below the quantile).  ``tau_ci`` is its square root.
Heterogeneity
    Cochran's Q with its chi^2 p-value and I^2 = max(0, (Q - (k-1))/Q)
    (Higgins & Thompson 2002, *Stat. Med.* 21:1539).

All estimators are vectorised over leading axes (``b`` and ``v`` of shape
(..., k)), so a simulation of many replicates is one array pass.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from ._display import frame_html, short_repr
from ..errors import ConfigError, DataError
from .line_results import ConfidenceInterval
from .schema import check_confidence

__all__ = ["ExponentSpread", "exponent_spread", "spread_from_fits", "tau2_dl", "tau2_reml",
           "tau2_q_profile", "TAU2_METHODS",
           "MEAN_INTERVALS", "SPREAD_COLUMNS", "SPREAD_TEST_COLUMNS"]

TAU2_METHODS = ("reml", "dl")
MEAN_INTERVALS = ("z", "knapp_hartung")
SPREAD_COLUMNS = ["method", "tau2_method", "k", "mean", "mean_se", "mean_low", "mean_high",
                  "mean_interval", "tau", "tau_low", "tau_high", "tau2", "tau2_low",
                  "tau2_high", "q", "q_df", "q_p_value", "i2", "confidence"]
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


def tau2_reml(b, v, *, tol: float = 1e-12, max_iter: int = 500) -> np.ndarray:
    """REML tau^2 by Fisher scoring from the DL value (see module docstring)."""
    b, v = np.asarray(b, float), np.asarray(v, float)
    t2 = tau2_dl(b, v)
    active = np.ones(t2.shape, dtype=bool)
    for _ in range(max_iter):          # iterations, not replicates: all run together
        w = 1.0 / (v + t2[..., None])
        sw = w.sum(-1)
        mu = (w * b).sum(-1) / sw
        sw2 = (w * w).sum(-1)
        sw3 = (w ** 3).sum(-1)
        tr_p = sw - sw2 / sw
        tr_pp = sw2 - 2 * sw3 / sw + (sw2 / sw) ** 2
        score = (w * w * (b - mu[..., None]) ** 2).sum(-1) - tr_p
        new = np.maximum(0.0, t2 + score / tr_pp)
        step = np.abs(new - t2)
        t2 = np.where(active, new, t2)
        active &= step > tol * np.maximum(1.0, t2)
        if not active.any():
            break
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
    hi_q, lo_q = stats.chi2.ppf(1 - alpha / 2, k - 1), stats.chi2.ppf(alpha / 2, k - 1)
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
        Random-effects mean exponent and its standard error (``mean_se`` is
        the Knapp-Hartung SE when ``mean_interval`` is ``"knapp_hartung"``).
    mean_ci : ConfidenceInterval
    mean_interval : {"z", "knapp_hartung"}
    mean_df : float
        inf for z, k - 1 for Knapp-Hartung.
    tau2, tau : float
        Between-group variance and SD of the exponent.
    tau2_ci, tau_ci : ConfidenceInterval
        Q-profile interval.
    q, q_df, q_p_value, i2 : float
        Cochran's Q, its df and p-value, and I^2.
    confidence : float
    tests : tuple of dict
        One per hypothesised exponent: ``hypothesis, exponent, statistic, df,
        p_value``.
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

    def to_frame(self) -> pd.DataFrame:
        """One row with :data:`SPREAD_COLUMNS`."""
        return pd.DataFrame([{
            "method": self.method, "tau2_method": self.tau2_method, "k": self.k,
            "mean": self.mean, "mean_se": self.mean_se, "mean_low": self.mean_ci.low,
            "mean_high": self.mean_ci.high, "mean_interval": self.mean_interval,
            "tau": self.tau, "tau_low": self.tau_ci.low, "tau_high": self.tau_ci.high,
            "tau2": self.tau2, "tau2_low": self.tau2_ci.low, "tau2_high": self.tau2_ci.high,
            "q": self.q, "q_df": self.q_df, "q_p_value": self.q_p_value, "i2": self.i2,
            "confidence": self.confidence,
        }], columns=SPREAD_COLUMNS)

    def tests_frame(self) -> pd.DataFrame:
        """One row per hypothesised exponent, :data:`SPREAD_TEST_COLUMNS`."""
        kind = "t" if self.mean_interval == "knapp_hartung" else "z"
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


def exponent_spread(estimates, variances, *, tau2_method: str = "reml",
                    mean_interval: str = "z", confidence: float = 0.95,
                    exponents=None, method: str = "") -> ExponentSpread:
    """Random-effects mean exponent, between-group SD, their intervals and tests.

    Parameters
    ----------
    estimates : array_like, shape (k,)
        Per-group exponents.
    variances : array_like, shape (k,)
        Their sampling variances (``slope_se**2``).
    tau2_method : {"reml", "dl"}
    mean_interval : {"z", "knapp_hartung"}
    confidence : float
    exponents : dict or sequence, optional
        Hypothesised exponents; the mean is tested against each.
    method : str
        Label of the line method (echoed).

    Returns
    -------
    ExponentSpread

    Notes
    -----
    Formulas and references are in the module docstring.
    """
    if tau2_method not in TAU2_METHODS:
        raise ConfigError(f"tau2_method must be one of {', '.join(TAU2_METHODS)}, "
                          f"not {tau2_method!r}")
    if mean_interval not in MEAN_INTERVALS:
        raise ConfigError(f"mean_interval must be one of {', '.join(MEAN_INTERVALS)}, "
                          f"not {mean_interval!r}")
    confidence = check_confidence(confidence)
    b, v = _check(estimates, variances)
    k = b.size
    _, _, _, q = _fixed(b, v)
    t2 = float(tau2_dl(b, v) if tau2_method == "dl" else tau2_reml(b, v))
    w, sw, mu = _random_mean(b, v, np.asarray(t2))
    mu = float(mu)
    if mean_interval == "z":
        se = math.sqrt(1.0 / sw)
        df = math.inf
        crit = stats.norm.ppf(0.5 + confidence / 2)
    else:
        se = math.sqrt(float((w * (b - mu) ** 2).sum()) / ((k - 1) * sw))
        df = float(k - 1)
        crit = stats.t.ppf(0.5 + confidence / 2, df)
    lo2, hi2 = (float(t) for t in tau2_q_profile(b, v, confidence))
    tests = []
    if exponents is not None:
        items = (exponents.items() if isinstance(exponents, dict)
                 else ((f"{float(e):g}", e) for e in exponents))
        for name, b0 in items:
            if isinstance(b0, bool) or not isinstance(b0, (int, float, np.floating)):
                raise ConfigError(f"exponents.{name} must be a number, not {b0!r}")
            stat = (mu - float(b0)) / se
            p = 2 * (stats.norm.sf(abs(stat)) if math.isinf(df) else stats.t.sf(abs(stat), df))
            tests.append({"hypothesis": str(name), "exponent": float(b0),
                          "statistic": stat, "df": df, "p_value": float(p)})
    return ExponentSpread(
        method=method, tau2_method=tau2_method, k=k, mean=mu, mean_se=se,
        mean_ci=ConfidenceInterval(mu - crit * se, mu + crit * se),
        mean_interval=mean_interval, mean_df=df, tau2=t2, tau=math.sqrt(t2),
        tau2_ci=ConfidenceInterval(lo2, hi2),
        tau_ci=ConfidenceInterval(math.sqrt(lo2), math.sqrt(hi2)),
        q=float(q), q_df=float(k - 1), q_p_value=float(stats.chi2.sf(q, k - 1)),
        i2=float(max(0.0, (q - (k - 1)) / q)) if q > 0 else 0.0,
        confidence=float(confidence), tests=tuple(tests))


def spread_from_fits(fits: pd.DataFrame, method: str, **options) -> ExponentSpread:
    """:func:`exponent_spread` of the estimable group rows of a ``fits`` table.

    Uses ``slope`` and ``slope_se**2`` of rows with ``scope == "group"`` and
    the given ``method``; groups whose slope or SE is not finite (or SE is 0)
    are left out.  ``options`` go to :func:`exponent_spread`.
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
