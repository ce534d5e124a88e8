"""Checks of a fit with several predictors: residuals, curvature per term, influence,
collinearity.

:func:`check_multi` reads a :class:`~scaling.stats.several_predictors.MultiFit`
(its log-scale design and residuals) and returns a :class:`MultiChecks` with
one :class:`~scaling.stats.residual_checks.Check` per question, the
``term`` of each check (blank for whole-model checks) and the collinearity
numbers.  Findings are data; the words are in :mod:`scaling.render.answer_several`.

Normality
    Shapiro & Wilk (1965), *Biometrika* 52:591 (``classic_tests.shapiro_wilk``) of
    the log-scale residuals, as for one predictor.
Constant variance
    Breusch & Pagan (1979), *Econometrica* 47:1287, studentised (Koenker 1981)
    n R^2 of e^2 on the whole design (1, X1..Xk), chi-square k df --
    ``statsmodels.stats.diagnostic.het_breuschpagan``.
Curvature, per term
    For each term j, the model with one more column (X_j - mean X_j)^2
    (Kolokotrones, Savage, Deeds & Fontana 2010, *Nature* 464:753, their
    quadratic term, here in one predictor's log with the others held in the
    model); t = c / se(c) on n - k - 2 df.
Influence
    Cook's (1977, *Technometrics* 19:15) distance
    D_i = e_i^2 h_i / (p s^2 (1 - h_i)^2), p = k + 1, flagged above 4/n
    (common practice, no single source); leverage h_i = diag of the hat
    matrix, flagged above 2p/n -- a row whose combination of predictors lies
    beyond the bulk of the data (Belsley, Kuh & Welsch 1980, *Regression
    Diagnostics*, ch. 2; from memory).
Collinearity
    Variance inflation factor of term j, VIF_j = 1 / (1 - R_j^2), R_j^2 of
    X_j on the other logs with an intercept (as
    ``statsmodels.stats.outliers_influence.variance_inflation_factor`` on a
    design with a constant); flagged above :data:`VIF_LIMIT` (common
    practice, no single source).  sqrt(VIF_j) is the factor by which the
    exponent's interval is wider than it would be with uncorrelated
    predictors.  Condition number of the design [1, X1..Xk],
    sqrt(largest / smallest eigenvalue of D'D), as statsmodels'
    ``RegressionResults.condition_number``; flagged above
    :data:`CONDITION_LIMIT` (the level above which statsmodels' regression
    summary warns of strong multicollinearity).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np
from . import tails
from .classic_tests import shapiro_wilk

from ..errors import DataError
from .residual_checks import MIN_N, Check

__all__ = ["VIF_LIMIT", "CONDITION_LIMIT", "MultiChecks", "check_multi", "check_multi_groups",
           "variance_inflation", "condition_number", "term_curvature"]

#: A term's variance inflation factor above this is flagged.
VIF_LIMIT = 10.0
#: The design's condition number above this is flagged.
CONDITION_LIMIT = 1000.0


def _flag(flagged: bool) -> str:
    return "flagged" if flagged else "clear"


def variance_inflation(log_x, lead=None) -> np.ndarray:
    """VIF of each column of ``log_x`` (n, k): 1 / (1 - R^2) of it on the others.

    ``lead`` are the design's other columns (default a constant; one indicator
    per group for the common-exponents model), kept in every regression.

    Examples
    --------
    >>> import numpy as np
    >>> x = np.array([[0., 1], [1, 0], [0, -1], [-1, 0]])   # orthogonal columns
    >>> variance_inflation(x).round(6).tolist()
    [1.0, 1.0]
    """
    lx = np.asarray(log_x, dtype=float)
    n, k = lx.shape
    lead = np.ones((n, 1)) if lead is None else np.asarray(lead, dtype=float)
    if k < 2 and lead.shape[1] == 1:
        return np.ones(k)
    out = np.empty(k)
    for j in range(k):
        others = np.column_stack([lead, np.delete(lx, j, axis=1)])
        beta = np.linalg.lstsq(others, lx[:, j], rcond=None)[0]
        resid = lx[:, j] - others @ beta
        centred = lx[:, j] - lx[:, j].mean()
        sst = float(centred @ centred)
        r2 = 1 - float(resid @ resid) / sst if sst > 0 else 1.0
        out[j] = 1 / (1 - r2) if r2 < 1 else math.inf
    return out


def condition_number(log_x, lead=None) -> float:
    """sqrt(max / min eigenvalue) of D'D for the design D = [lead, log_x] (statsmodels' form;
    ``lead`` a constant by default)."""
    lx = np.asarray(log_x, dtype=float)
    lead = np.ones((lx.shape[0], 1)) if lead is None else np.asarray(lead, dtype=float)
    design = np.column_stack([lead, lx])
    eig = np.linalg.eigvalsh(design.T @ design)
    return float(math.sqrt(eig.max() / eig.min())) if eig.min() > 0 else math.inf


def term_curvature(log_x, log_y, lead=None) -> list:
    """Per term j: dict(quadratic, quadratic_se, statistic, df, p_value) of the model
    with (X_j - mean X_j)^2 added to [lead, X1..Xk] (``lead`` a constant by default)."""
    lx = np.asarray(log_x, dtype=float)
    ly = np.asarray(log_y, dtype=float)
    n, k = lx.shape
    lead = np.ones((n, 1)) if lead is None else np.asarray(lead, dtype=float)
    base = np.column_stack([lead, lx])
    df = n - base.shape[1] - 1
    out = []
    for j in range(k):
        c = lx[:, j] - lx[:, j].mean()
        design = np.column_stack([base, c * c])
        if df < 1 or np.linalg.matrix_rank(design) < design.shape[1]:
            out.append({"quadratic": math.nan, "quadratic_se": math.nan,
                        "statistic": math.nan, "df": float(df), "p_value": math.nan})
            continue
        beta, *_ = np.linalg.lstsq(design, ly, rcond=None)
        resid = ly - design @ beta
        s2 = float(resid @ resid) / df
        cov = s2 * np.linalg.inv(design.T @ design)
        se = math.sqrt(cov[-1, -1])
        t = float(beta[-1]) / se if se > 0 else math.nan
        p = float(2 * tails.t_upper(abs(t), df)) if np.isfinite(t) else math.nan
        out.append({"quadratic": float(beta[-1]), "quadratic_se": se, "statistic": t,
                    "df": float(df), "p_value": p})
    return out


@dataclass(frozen=True, slots=True, kw_only=True)
class MultiChecks:
    """The checks of one fit with several predictors.

    Attributes
    ----------
    n, k : int
    alpha : float
    checks : tuple of Check
        normality, constant_variance, curvature (one per term), influence,
        leverage, collinearity (one VIF per term, then the condition number).
    terms : tuple of str
        The term of each check ("" for a whole-model check).
    vif : ndarray, shape (k,)
    condition_number : float
    cooks_distance, leverage : ndarray, shape (n,)
    rows : ndarray
        Row numbers of the fitted points (as given, else 0..n-1).
    """

    n: int
    k: int
    alpha: float
    checks: tuple
    terms: tuple
    vif: np.ndarray = field(repr=False)
    condition_number: float
    cooks_distance: np.ndarray = field(repr=False)
    leverage: np.ndarray = field(repr=False)
    rows: np.ndarray = field(repr=False)

    def to_frame(self):
        """One row per check: term, check, test, statistic, df, p_value, estimate, flagged,
        finding."""
        import pandas as pd
        frame = pd.DataFrame([c.to_record() for c in self.checks])
        frame.insert(0, "term", list(self.terms))
        return frame

    def collinear_terms(self) -> tuple:
        """(term, VIF) of the terms whose VIF exceeds :data:`VIF_LIMIT`."""
        return tuple((t, float(c.statistic)) for c, t in zip(self.checks, self.terms)
                     if c.check == "collinearity" and c.test == "VIF" and c.flagged)


def check_multi(fit, *, rows=None, alpha: float = 0.05) -> MultiChecks:
    """Residual, curvature, influence and collinearity checks of a MultiFit.

    Parameters
    ----------
    fit : MultiFit
        Carries its log-scale data (``log_x``, ``log_y``) and residuals.
    rows : array_like of int, optional
        Row numbers of the fitted points (default 0..n-1), used to name
        influential rows.
    alpha : float
        Level at which a test is flagged.

    Returns
    -------
    MultiChecks

    Raises
    ------
    DataError
        Fewer than :data:`scaling.stats.residual_checks.MIN_N` points.

    Examples
    --------
    >>> import numpy as np
    >>> from scaling.stats.several_predictors import fit_multi
    >>> rng = np.random.default_rng(1)
    >>> d, h = 10 ** rng.uniform(1, 2, 60), 10 ** rng.uniform(0.5, 1.5, 60)
    >>> fit = fit_multi({"d": d, "h": h}, 0.05 * d**2 * h * 10 ** rng.normal(0, .05, 60))
    >>> [c.check for c in check_multi(fit).checks][:4]
    ['normality', 'constant_variance', 'curvature', 'curvature']
    """
    lx = np.asarray(fit.log_x, dtype=float)
    return _check_design(np.ones((lx.shape[0], 1)), lx, np.asarray(fit.log_y, dtype=float),
                         fit.names, rows=rows, alpha=alpha)


def check_multi_groups(log_x, log_y, groups, names, *, rows=None,
                       alpha: float = 0.05) -> MultiChecks:
    """The checks of the common-exponents model Y = a_g + sum_j b_j X_j (one elevation per
    group), on log-scale data.

    The same questions as :func:`check_multi`, asked of the model with one
    indicator column per group in place of the constant: Breusch-Pagan on
    that design (G + k - 1 df), curvature per term with the group
    elevations, Cook's distance and leverage with p = G + k, VIF of each term
    given the others and the groups, the condition number of that design.
    """
    lx = np.asarray(log_x, dtype=float)
    _, codes = np.unique(np.asarray(groups).astype(str), return_inverse=True)
    lead = (codes[:, None] == np.arange(codes.max() + 1)[None, :]).astype(float)
    return _check_design(lead, lx, np.asarray(log_y, dtype=float), names, rows=rows,
                         alpha=alpha)


def _check_design(lead, lx, ly, names, *, rows, alpha) -> MultiChecks:
    """Every check of the OLS model Y = lead·a + X·b (see the module notes)."""
    n, k = lx.shape
    if n < MIN_N:
        raise DataError(f"the checks need at least {MIN_N} points, got {n}")
    rows = np.arange(n) if rows is None else np.asarray(rows)
    design = np.column_stack([lead, lx])
    p = design.shape[1]
    if n <= p:
        raise DataError(f"the checks need more points than the model's {p} coefficients")
    xtx_inv = np.linalg.inv(design.T @ design)
    resid = ly - design @ (xtx_inv @ (design.T @ ly))
    s2 = float(resid @ resid) / (n - p)
    checks, terms = [], []

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)   # scipy's n > 5000 accuracy note
        sw = shapiro_wilk(resid)
    flagged = bool(sw.pvalue < alpha)
    checks.append(Check(check="normality", test="Shapiro-Wilk", statistic=float(sw.statistic),
                        df=math.nan, p_value=float(sw.pvalue), estimate=math.nan,
                        flagged=flagged, finding=_flag(flagged)))
    terms.append("")

    # Breusch-Pagan (Koenker): n R^2 of e^2 on the design, chi-square on k df
    e2 = resid * resid
    beta = np.linalg.lstsq(design, e2, rcond=None)[0]
    fitted = design @ beta
    sst = float(np.sum((e2 - e2.mean()) ** 2))
    lm = n * float(np.sum((fitted - e2.mean()) ** 2)) / sst if sst > 0 else math.nan
    p_bp = float(tails.chi2_upper(lm, p - 1)) if np.isfinite(lm) else math.nan
    flagged = bool(p_bp < alpha)
    trend = 0
    if flagged:
        y_hat = ly - resid   # the scatter grows (+1) or shrinks (-1) with the fitted value
        trend = 1 if np.polyfit(y_hat, e2, 1)[0] > 0 else -1
    checks.append(Check(check="constant_variance", test="Breusch-Pagan", statistic=lm,
                        df=float(p - 1), p_value=p_bp, estimate=math.nan, flagged=flagged,
                        finding=_flag(flagged), direction=trend))
    terms.append("")

    for name, q in zip(names, term_curvature(lx, ly, lead)):
        flagged = bool(q["p_value"] < alpha)
        checks.append(Check(check="curvature", test="quadratic term t", statistic=q["statistic"],
                            df=q["df"], p_value=q["p_value"], estimate=q["quadratic"],
                            flagged=flagged, finding=_flag(flagged),
                            direction=(int(np.sign(q["quadratic"]))
                                       if np.isfinite(q["quadratic"]) else 0)))
        terms.append(name)

    lev = np.einsum("np,pq,nq->n", design, xtx_inv, design)
    with np.errstate(divide="ignore", invalid="ignore"):
        cooks = resid ** 2 * lev / (p * s2 * (1 - lev) ** 2) if s2 > 0 else np.zeros(n)
    threshold = 4 / n
    above = np.flatnonzero(cooks > threshold)
    above = above[np.argsort(-cooks[above], kind="stable")]
    top = float(np.nanmax(cooks)) if n else math.nan
    checks.append(Check(check="influence", test="Cook's distance", statistic=top, df=math.nan,
                        p_value=math.nan, estimate=top, flagged=bool(above.size),
                        finding=_flag(bool(above.size)), rows=tuple(rows[above].tolist())))
    terms.append("")
    lev_limit = 2 * p / n
    high = np.flatnonzero(lev > lev_limit)
    high = high[np.argsort(-lev[high], kind="stable")]
    checks.append(Check(check="leverage", test="hat value", statistic=float(lev.max()),
                        df=math.nan, p_value=math.nan, estimate=lev_limit,
                        flagged=bool(high.size), finding=_flag(bool(high.size)),
                        rows=tuple(rows[high].tolist())))
    terms.append("")

    vif = variance_inflation(lx, lead)
    for name, v in zip(names, vif):
        flagged = bool(v > VIF_LIMIT)
        checks.append(Check(check="collinearity", test="VIF", statistic=float(v), df=math.nan,
                            p_value=math.nan, estimate=float(math.sqrt(v)), flagged=flagged,
                            finding=_flag(flagged)))
        terms.append(name)
    cond = condition_number(lx, lead)
    flagged = bool(cond > CONDITION_LIMIT)
    checks.append(Check(check="collinearity", test="condition number", statistic=cond,
                        df=math.nan, p_value=math.nan, estimate=math.nan, flagged=flagged,
                        finding=_flag(flagged)))
    terms.append("")
    return MultiChecks(n=n, k=k, alpha=alpha, checks=tuple(checks), terms=tuple(terms),
                       vif=vif, condition_number=cond, cooks_distance=cooks, leverage=lev,
                       rows=rows)
