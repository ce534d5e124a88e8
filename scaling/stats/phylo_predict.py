"""Predictions from the phylogenetic (PGLS) line, and its residual checks.

Two predictions, both on the log scale of the fit, with ``t`` intervals on
n - 2 degrees of freedom (the residual variance s^2 = RSS/(n - 2) in the
V^-1 metric, lambda held at its estimate):

A typical new species (:func:`new_species_line`, :func:`predict_new_species`)
    Its place in the tree is unknown, so it is taken to join the tree at the
    root with a branch as long as the tips' mean root-to-tip depth T-bar: it
    shares no history with the fitted species beyond the root state, which
    the GLS intercept estimates.  Under Brownian motion and lambda (lambda
    keeps the tips' heights) its own variance is s^2 T-bar, so
        var(pred) = x0' cov(beta) x0 + s^2 T-bar,
        cov(beta) = s^2 (X'V^-1 X)^-1,
    which the O(n) pass gives (1'V^-1 1, the GLS means and Sxx).  The choice
    of T-bar (rather than the tallest tip) is ours: with fossil tips the
    heights differ and T-bar is the typical one.

A species in the tree without y (:func:`predict_tips`)
    Given all fitted relatives, the best linear unbiased predictor
    (Goldberger 1962, JASA 57:369; for trees Garland & Ives 2000, Am. Nat.
    155:346, whose contrast-based computation gives the same numbers)
        y-hat = x' beta + c' V^-1 (y - X beta),
        var = s^2 (v_00 - c' V^-1 c) + d' cov(beta) d,   d = x - X' V^-1 c,
    c the covariances of the new tip with the fitted ones and v_00 its own
    variance, all from V_lambda.  With beta known this is the conditional
    mean and variance of the joint multivariate normal (an exact law); the
    second term adds beta's estimation.  Computed densely (Cholesky of the
    fitted tips' V): at most :data:`MAX_DENSE_TIPS` tips.

Residual checks (:func:`residual_checks`)
    Whitened residuals L^-1 e (L the Cholesky factor of V) are independent
    N(0, s^2) under the model: normality by Shapiro-Wilk on them.  The
    species-level standardised residual is the conditional one,
        r_i = (V^-1 e)_i / sqrt((V^-1)_ii) / s,
    the gap between y_i and its prediction from all other species in units
    of that prediction's residual spread (attached to species i, unlike
    the whitened residuals, which mix species).  Constant variance: Spearman
    correlation of |r_i| with log x.  Species with |r_i| > 3 are flagged
    (common practice for phylogenetic outlier screens, e.g. on standardised
    contrasts; no single source).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from . import tails
from .classic_tests import shapiro_wilk

from .lines import base_label, parse_log_base
from .phylogeny import PassResult, Tree, tree_covariance

__all__ = ["MAX_DENSE_TIPS", "OUTLIER_CUT", "PHYLO_DICT_FORMAT", "NewSpeciesLine",
           "new_species_line", "new_species_to_dict", "new_species_from_dict", "back_transform",
           "predict_new_species", "lambda_covariance", "TipPrediction", "predict_tips",
           "ResidualChecks", "residual_checks", "parametric_factor"]

MAX_DENSE_TIPS = 4000
OUTLIER_CUT = 3.0
#: ``format`` of a saved PGLS line in results.json (``scaling predict --method pgls``).
PHYLO_DICT_FORMAT = "phylo_new_species"


@dataclass(frozen=True, slots=True, kw_only=True)
class NewSpeciesLine:
    """What a prediction for a typical new species needs (log scale, V unscaled).

    ``sum_w`` = 1'V^-1 1; ``mean_x`` the GLS mean of log x; ``sxx`` its
    centred sum of squares in the V^-1 metric; ``s2`` = RSS/(n - 2);
    ``depth`` the tips' mean root-to-tip depth (the new tip's branch).
    """

    intercept: float
    slope: float
    mean_x: float
    sum_w: float
    sxx: float
    s2: float
    depth: float
    n: int

    @property
    def df(self) -> int:
        return self.n - 2

    def to_dict(self) -> dict:
        return {k: getattr(self, k) for k in ("intercept", "slope", "mean_x", "sum_w", "sxx",
                                              "s2", "depth", "n")}


def new_species_line(res: PassResult, n: int, depth: float) -> NewSpeciesLine:
    """The PGLS line at one lambda from a pass (entry 0) and the tips' mean depth."""
    sxx, syy, sxy = (float(res.css[0, i, j]) for i, j in ((0, 0), (1, 1), (0, 1)))
    mx, my = float(res.mean[0, 0]), float(res.mean[0, 1])
    b = sxy / sxx
    return NewSpeciesLine(intercept=my - b * mx, slope=b, mean_x=mx, sum_w=float(res.sum_w[0]),
                          sxx=sxx, s2=(syy - b * sxy) / (n - 2), depth=float(depth), n=int(n))


def predict_new_species(line: NewSpeciesLine, log_x, *, confidence: float = 0.95,
                        interval: str = "prediction") -> tuple:
    """Log-scale prediction, its standard error, low and high, and the residual variance.

    ``interval="confidence"`` leaves out the new tip's own variance (an
    interval for the line).  Returns arrays ``(fit, se, low, high, tip_var)``,
    ``tip_var`` = s^2 T-bar (for the back-transformation factor).
    """
    x0 = np.asarray(log_x, dtype=float)
    fit = line.intercept + line.slope * x0
    var_line = line.s2 * (1.0 / line.sum_w + (x0 - line.mean_x) ** 2 / line.sxx)
    tip_var = line.s2 * line.depth
    var = var_line + (tip_var if interval == "prediction" else 0.0)
    se = np.sqrt(var)
    q = tails.t_quantile(0.5 + confidence / 2, line.df)
    return fit, se, fit - q * se, fit + q * se, np.full_like(fit, tip_var)


def new_species_to_dict(line: NewSpeciesLine, *, log_base, confidence: float, lam: float,
                        x_range) -> dict:
    """A JSON-ready dict of the line, for results.json (``scope`` phylo, method ols)."""
    return {"format": PHYLO_DICT_FORMAT, "scope": "phylo", "group": "", "method": "ols",
            **{k: float(v) for k, v in line.to_dict().items()}, "n": int(line.n),
            "log_base": base_label(log_base), "confidence": float(confidence),
            "lambda": float(lam), "x_range": [float(x_range[0]), float(x_range[1])]}


def new_species_from_dict(d: dict) -> tuple:
    """``(line, log_base)`` from :func:`new_species_to_dict`'s dict."""
    line = NewSpeciesLine(**{k: float(d[k]) for k in ("intercept", "slope", "mean_x", "sum_w",
                                                      "sxx", "s2", "depth")}, n=int(d["n"]))
    return line, parse_log_base(d["log_base"])


def back_transform(fit, low, high, resid_var, correction: str, interval: str, base) -> tuple:
    """Natural units ``(y, y_low, y_high)`` and the correction applied.

    The median base^fit times a factor: 1 for ``none``; otherwise the
    lognormal mean factor :func:`parametric_factor` of the prediction's own
    residual variance (Duan's smearing and the ratio estimator assume
    independent residuals, which related species are not), so the correction
    is reported as ``parametric``.  Bounds carry the factor only for a
    confidence interval, as in :func:`scaling.stats.predictions.predict`.
    """
    fit, low, high = (np.asarray(v, dtype=float) for v in (fit, low, high))
    if base is None:
        return fit, low, high, "none"
    cf = np.ones_like(fit) if correction == "none" else parametric_factor(resid_var, base)
    bound = cf if interval == "confidence" else 1.0
    with np.errstate(over="ignore"):
        return (cf * np.power(base, fit), bound * np.power(base, low),
                bound * np.power(base, high), "none" if correction == "none" else "parametric")


def lambda_covariance(tree: Tree, tips, lam: float) -> np.ndarray:
    """Dense V_lambda = lambda V + (1 - lambda) diag(V) with rows in ``tips`` (node ids) order."""
    v = tree_covariance(tree)
    pos = np.searchsorted(tree.tips, np.asarray(tips))
    v = v[np.ix_(pos, pos)]
    out = lam * v
    out[np.diag_indices_from(out)] = np.diag(v)
    return out


@dataclass(frozen=True, slots=True, kw_only=True)
class TipPrediction:
    """Conditional predictions for tips without y (log scale), and the fitted line.

    ``fit``, ``se``, ``low``, ``high``, ``cond_var`` (s^2 (v_00 - c'V^-1 c),
    the residual part) per target; ``beta`` (intercept, slope); ``s2``; ``df``.
    """

    fit: np.ndarray
    se: np.ndarray
    low: np.ndarray
    high: np.ndarray
    cond_var: np.ndarray
    beta: np.ndarray
    s2: float
    df: int


def predict_tips(cov, X, Y, x_new, *, confidence: float = 0.95,
                 interval: str = "prediction") -> TipPrediction:
    """BLUP of y for tips without data given the fitted ones (module docstring).

    Parameters
    ----------
    cov : ndarray, shape (n + m, n + m)
        V_lambda; the first n rows are the fitted tips, the last m the targets.
    X, Y : array_like, shape (n,)
        Log x and log y of the fitted tips.
    x_new : array_like, shape (m,)
        Log x of the targets.
    interval : {"prediction", "confidence"}
        ``confidence`` leaves out s^2 (v_00 - c'V^-1 c), the target's own
        deviation (an interval for its expected value given its relatives).
    """
    from scipy.linalg import cho_factor, cho_solve   # lazy: only the phylogeny road

    X, Y = np.asarray(X, dtype=float), np.asarray(Y, dtype=float)
    x_new = np.atleast_1d(np.asarray(x_new, dtype=float))
    n = X.size
    cov = np.asarray(cov, dtype=float)
    v, c, v00 = cov[:n, :n], cov[:n, n:], np.diag(cov)[n:]
    cf = cho_factor(v, lower=True)
    D = np.column_stack([np.ones(n), X])
    vi_d = cho_solve(cf, D)
    xtx = D.T @ vi_d
    beta = np.linalg.solve(xtx, vi_d.T @ Y)
    e = Y - D @ beta
    s2 = float(e @ cho_solve(cf, e)) / (n - 2)
    vi_c = cho_solve(cf, c)
    D_new = np.column_stack([np.ones(x_new.size), x_new])
    fit = D_new @ beta + vi_c.T @ e
    cond = s2 * (v00 - np.einsum("ij,ij->j", c, vi_c))
    d = D_new - vi_c.T @ D
    var_beta = s2 * np.einsum("ij,jk,ik->i", d, np.linalg.inv(xtx), d)
    var = var_beta + (cond if interval == "prediction" else 0.0)
    se = np.sqrt(var)
    q = tails.t_quantile(0.5 + confidence / 2, n - 2)
    return TipPrediction(fit=fit, se=se, low=fit - q * se, high=fit + q * se, cond_var=cond,
                         beta=beta, s2=s2, df=n - 2)


def parametric_factor(resid_var, base) -> np.ndarray:
    """exp(var ln(base)^2 / 2): the lognormal mean correction for a prediction whose own
    residual variance on the log scale is ``resid_var`` (Baskerville 1972; Sprugel 1983)."""
    ln_b = 1.0 if base is None or base == math.e else math.log(base)
    return np.exp(np.asarray(resid_var, dtype=float) * ln_b * ln_b / 2)


@dataclass(frozen=True, slots=True, kw_only=True)
class ResidualChecks:
    """Phylogenetic residual checks (module docstring).

    ``whitened`` L^-1 e / s; ``standardised`` r_i per species (data order);
    ``normality`` (W, p) Shapiro-Wilk on the whitened residuals; ``spread``
    (Spearman rho, p) of |r_i| against log x; ``flagged`` indices with
    |r_i| > :data:`OUTLIER_CUT`.
    """

    whitened: np.ndarray
    standardised: np.ndarray
    normality: tuple
    spread: tuple
    flagged: np.ndarray


def residual_checks(cov, X, Y) -> ResidualChecks:
    """Normality, constant variance and outlying species of the PGLS residuals."""
    from scipy import stats   # lazy: only the phylogeny road
    from scipy.linalg import cho_solve, solve_triangular

    X, Y = np.asarray(X, dtype=float), np.asarray(Y, dtype=float)
    n = X.size
    cov = np.asarray(cov, dtype=float)
    chol = np.linalg.cholesky(cov)
    D = np.column_stack([np.ones(n), X])
    wd = solve_triangular(chol, D, lower=True)
    wy = solve_triangular(chol, Y, lower=True)
    beta = np.linalg.lstsq(wd, wy, rcond=None)[0]
    we = wy - wd @ beta
    s = math.sqrt(float(we @ we) / (n - 2))
    e = Y - D @ beta
    vinv = cho_solve((chol, True), np.eye(n))
    r = (vinv @ e) / np.sqrt(np.diag(vinv)) / s
    w = we / s
    normality = tuple(float(v) for v in shapiro_wilk(w)) if n >= 3 else (math.nan, math.nan)
    rho = stats.spearmanr(np.abs(r), X)
    return ResidualChecks(whitened=w, standardised=r, normality=normality,
                          spread=(float(rho.statistic), float(rho.pvalue)),
                          flagged=np.flatnonzero(np.abs(r) > OUTLIER_CUT))
