"""Residual, curvature and influence checks of a phylogenetic model (PGLS, phylogenetic SMA/MA).

The ordinary checks (:mod:`scaling.stats.residual_checks`) take the points as
independent.  With a tree the model that answers is a generalised least
squares (GLS) model, Y = Z beta + e, e ~ N(0, s^2 V_lambda), with Z = [1, X]
(one phylogenetic line) or Z = [D, X] (the phylogenetic common within-group
slope: D the group indicators, each group its own elevation).  Its
residuals are correlated along the tree, so they are checked after
whitening: with a square root S of V^-1 (S'S = V^-1), the whitened residuals
S e are independent N(0, s^2) under the model.

The square root
    S = V^-1/2, the symmetric one (eigen-decomposition of V).  Any square
    root gives independent residuals under the model; the symmetric one
    does not depend on the order of the species, and its whitened value i
    is the one most closely attached to species i.

Residuals
    OLS: the GLS residuals e = Y - Z beta-hat.  SMA and MA: the residuals of
    the data about the stated line in the method's own residual direction,
    e = Y - a - bX for SMA (its residual score, which Warton, Wright,
    Falster & Westoby 2006, Biol. Rev. 81:259, plot against the fitted-axis
    score) and the perpendicular distance (Y - a - bX)/sqrt(1 + b^2) for MA
    (the direction MA minimises), with b the phylogenetic (common) slope
    and a (a_g) the GLS mean of Y - bX (of each group).  Both are
    proportional to Y - a - bX, so the tests below, which are unchanged by
    a common factor, are the same functions of the vertical residuals.

Normality
    Shapiro-Wilk (:func:`scaling.stats.classic_tests.shapiro_wilk`, ``scipy.stats.shapiro``'s
    numbers) on S e.
Constant variance
    Breusch-Pagan, studentised (Koenker 1981) as
    ``statsmodels.stats.diagnostic.het_breuschpagan``: (S e)^2 on (1, S X),
    chi^2 on 1 df -- does the whitened scatter change with whitened size?
Curvature
    The t test of the quadratic term q = (X - mean X)^2 added to the GLS
    design, Y = Z beta + g q + e (Kolokotrones, Savage, Deeds & Fontana
    2010, Nature 464:753, with shared ancestry); the GLS t = g/se(g) on
    n - p - 1 df (p columns of Z) is exact for a known V.  Whatever the line
    method, as for the ordinary check: the quadratic test needs a
    least-squares fit.  Lambda: by default the model's own; the run passes
    the REML estimate under the straight-line design Z
    (:func:`curvature_lambda`), because with the ML lambda of the answer's
    model the test is liberal when groups absorb most of the tree's
    structure (in simulation, four clades of 12 on a Brownian tree: 0.081 at
    alpha = 0.05 with the ML lambda of the full group model, 0.052 with this
    REML lambda; tests/test_phylo_checks.py).
Influence (deleting one species)
    Deleting species i from a GLS fit is adding its indicator u_i to the
    design (partitioned least squares in the V^-1 metric).  With
    A = Z'V^-1 Z, Q = V^-1 Z A^-1 Z' V^-1 and P = V^-1 - Q:
    standardised residual r_i = (V^-1 e)_i / (s sqrt(P_ii)), s^2 = e'V^-1 e/(n - p)
    (the GLS internally studentised residual; the gap between y_i and its
    prediction from all other species and the fitted line);
    leverage h_i = Q_ii / (V^-1)_ii (the share of species i's precision the
    fit uses); Cook's distance D_i = (PY)_i^2 Q_ii / (P_ii^2 p s_ols^2), the
    change beta-hat - beta-hat_(-i) = A^-1 Z'V^-1 u_i (PY)_i / P_ii measured in
    the metric A.  With V = I these are the ordinary internally studentised
    residual, hat value and Cook's (1977) distance.  For SMA and MA the
    residuals are the stated line's, leverage and Cook's distance those of
    the GLS (OLS) fit of the same design, a proxy as in the ordinary checks.
    A species is strong when |r_i| > 3 (the cut of phylogenetic outlier
    screens on studentised residuals, e.g. Jones & Purvis 1997, from memory),
    D_i > 1 or h_i > 3p/n (common practice, no source).

Checks (tests/test_phylo_checks.py): each statistic equals scipy.stats and
statsmodels (GLS with the lambda covariance built from dendropy's
patristic distances) on the same whitened data; with V proportional to I
every check equals the ordinary one.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np
from . import tails

from ..errors import DataError
from .influence import COOK_STRONG
from .phylo_groups import gram_matrices
from .phylo_profile import _GRID, _maximise
from .phylogeny import PhyloPlan
from .residual_checks import (MIN_N, Diagnostics, _check_alpha, _constant_variance, _curvature,
                              _influence, _normality)

__all__ = ["OUTLIER_CUT", "LEVERAGE_FACTOR", "PhyloChecks", "whitening_root",
           "gls_quadratic_t", "curvature_lambda", "phylo_model_checks"]

#: |standardised residual| above this makes a species strong.
OUTLIER_CUT = 3.0
#: A leverage above LEVERAGE_FACTOR * p / n makes a species strong.
LEVERAGE_FACTOR = 3.0


@dataclass(frozen=True, slots=True, kw_only=True)
class PhyloChecks:
    """The checks of one phylogenetic model.

    Attributes
    ----------
    diagnostics : Diagnostics
        normality, constant_variance, curvature, influence (as the ordinary
        checks; ``residuals`` are the whitened residuals S e, ``cooks_distance``
        the GLS Cook's distances).
    whitened_residuals, whitened_x : ndarray
        S e and S X (the data the normality and constant-variance tests read).
    standardised, leverage, cooks : ndarray, shape (n,)
        Per species, in data order (module docstring).
    strong : ndarray of int
        Positions of the strong species, largest Cook's distance first.
    n_params : int
        p, columns of the GLS design.
    """

    diagnostics: Diagnostics
    whitened_residuals: np.ndarray = field(repr=False)
    whitened_x: np.ndarray = field(repr=False)
    standardised: np.ndarray = field(repr=False)
    leverage: np.ndarray = field(repr=False)
    cooks: np.ndarray = field(repr=False)
    strong: np.ndarray
    n_params: int


def whitening_root(cov) -> np.ndarray:
    """The symmetric square root S = V^-1/2 of the inverse of ``cov`` (S S = V^-1)."""
    v = np.asarray(cov, dtype=float)
    w, u = np.linalg.eigh((v + v.T) / 2)
    if w.min() <= 0:
        raise DataError("the tree's covariance matrix is not positive definite "
                        "(zero-length tip branches at lambda = 1?)")
    return (u / np.sqrt(w)) @ u.T


def _design(X: np.ndarray, codes: np.ndarray | None) -> np.ndarray:
    """Z = [1, X] or [D, X] along the last axis (X of shape (..., n))."""
    if codes is None:
        return np.stack([np.ones_like(X), X], axis=-1)
    G = int(codes.max()) + 1
    D = (codes[:, None] == np.arange(G)).astype(float)
    return np.concatenate([np.broadcast_to(D, X.shape + (G,)), X[..., None]], axis=-1)


def gls_quadratic_t(root, log_x, log_y, codes=None) -> dict:
    """GLS t test of a quadratic term in log x, vectorised over leading axes.

    Parameters
    ----------
    root : ndarray, shape (n, n)
        S with S'S = V^-1 (:func:`whitening_root`).
    log_x, log_y : array_like, shape (..., n)
        One or many samples (all replicates of a simulation at once).
    codes : ndarray of int, shape (n,), optional
        Group of each species: one elevation per group (the parallel-lines
        design [D, X]); None: one line.

    Returns
    -------
    dict of ndarray
        ``linear`` (b1 of uncentred X), ``quadratic``, ``quadratic_se``,
        ``statistic``, ``df``, ``p_value``; ``intercept`` (NaN with groups).
    """
    X = np.asarray(log_x, dtype=float)
    Y = np.asarray(log_y, dtype=float)
    mx = X.mean(axis=-1, keepdims=True)
    Z = _design(X, codes)
    Z = np.concatenate([Z, ((X - mx) ** 2)[..., None]], axis=-1)
    n, k = Z.shape[-2], Z.shape[-1]
    W = np.einsum("ij,...jk->...ik", root, Z)
    y = np.einsum("ij,...j->...i", root, Y)
    A = np.swapaxes(W, -1, -2) @ W
    Ainv = np.linalg.inv(A)
    coef = np.einsum("...ij,...j->...i", Ainv, np.einsum("...ji,...j->...i", W, y))
    resid = y - np.einsum("...ij,...j->...i", W, coef)
    df = n - k
    s2 = np.sum(resid * resid, axis=-1) / df
    with np.errstate(divide="ignore", invalid="ignore"):
        se = np.sqrt(s2 * Ainv[..., -1, -1])
        t = coef[..., -1] / se
    g = coef[..., -1]
    return {"intercept": (coef[..., 0] + g * mx[..., 0] ** 2 if codes is None
                          else np.full(np.shape(t), np.nan)),
            "linear": coef[..., -2] - 2 * g * mx[..., 0], "quadratic": g,
            "quadratic_se": se, "statistic": t, "df": np.full(np.shape(t), float(df)),
            "p_value": 2 * tails.t_upper(np.abs(t), df)}


def curvature_lambda(plan: PhyloPlan, log_x, log_y, groups=None) -> float:
    """REML estimate of Pagel's lambda under the straight-line GLS design (the null model
    of the curvature test): Z = [1, X], or [D, X] with ``groups``.

    The restricted log-likelihood (V unscaled, p columns of Z)
    l = -1/2 [(n - p) log 2pi + log|V| + log|Z'V^-1 Z| + (n - p) log(RSS/(n - p)) + n - p]
    (Patterson & Thompson 1971, Biometrika 58:545), from one O(n) pass per set of
    lambda values (:func:`scaling.stats.phylo_groups.gram_matrices`), maximised on
    [0, 1] as the other lambdas of the package.
    """
    X = np.asarray(log_x, dtype=float)
    Y = np.asarray(log_y, dtype=float)
    codes = None
    if groups is not None:
        _, codes = np.unique(np.asarray(groups, dtype=str), return_inverse=True)
    Z = _design(X, codes)
    n, p = Z.shape
    cols = np.column_stack([Z, Y])

    def ll_many(lams):
        gram, logdet, _ = gram_matrices(plan, cols, lams)
        gzz = gram[:, :p, :p]
        gzy = gram[:, :p, p]
        coef = np.linalg.solve(gzz, gzy[..., None])[..., 0]
        rss = gram[:, p, p] - np.sum(coef * gzy, axis=-1)
        m = n - p
        with np.errstate(divide="ignore", invalid="ignore"):
            return -0.5 * (m * math.log(2 * math.pi) + logdet + np.linalg.slogdet(gzz)[1]
                           + m * np.log(rss / m) + m)

    lam, _ = _maximise(lambda t: float(ll_many([t])[0]), ll_many(_GRID), ll_many)
    return float(lam)


def phylo_model_checks(cov, log_x, log_y, *, groups=None, method: str = "ols",
                       slope: float | None = None, rows=None, exponent_targets=(),
                       alpha: float = 0.05, log_base: float | None = None,
                       curvature_cov=None) -> PhyloChecks:
    """Whitened-residual, curvature and influence checks of a phylogenetic model.

    Parameters
    ----------
    cov : ndarray, shape (n, n)
        V_lambda of the species, in data order (any scale).
    log_x, log_y : array_like, shape (n,)
        Species means on the log scale.
    groups : array_like, shape (n,), optional
        Group of each species: the model is the phylogenetic common
        within-group line (each group its own elevation); None: one line.
    method : {"ols", "sma", "ma"}
    slope : float, optional
        SMA and MA: the phylogenetic (common) slope of the stated line.
        OLS: ignored (the GLS slope is the model's).
    rows : array_like of int, optional
        Input row of each species (default 0, ..., n - 1).
    exponent_targets : sequence of float
        Exponents whose crossing the curvature check locates.
    alpha : float
    log_base : float or None
    curvature_cov : ndarray, shape (n, n), optional
        The covariance the curvature test uses (e.g. at the lambda of
        :func:`curvature_lambda`); default ``cov``.

    Returns
    -------
    PhyloChecks

    Notes
    -----
    Formulas and sources are in the module docstring.
    """
    alpha = _check_alpha(alpha)
    X = np.asarray(log_x, dtype=float)
    Y = np.asarray(log_y, dtype=float)
    n = X.size
    if X.shape != Y.shape or X.ndim != 1 or n < MIN_N:
        raise DataError(f"the phylogenetic checks need at least {MIN_N} species with x and y")
    V = np.asarray(cov, dtype=float)
    if V.shape != (n, n):
        raise DataError(f"cov must be {n} x {n}, not {V.shape}")
    rows = np.arange(n) if rows is None else np.asarray(rows)
    codes = None
    if groups is not None:
        _, codes = np.unique(np.asarray(groups, dtype=str), return_inverse=True)
    S = whitening_root(V)
    Vi = S @ S
    Z = _design(X, codes)
    p = Z.shape[1]
    if n - p - 1 < 1:
        raise DataError(f"{n} species leave no degrees of freedom for the checks")
    A = Z.T @ Vi @ Z
    Ainv = np.linalg.inv(A)
    beta = Ainv @ (Z.T @ Vi @ Y)
    e_ols = Y - Z @ beta
    if method == "ols" or slope is None or not np.isfinite(slope):
        e = e_ols
    else:
        b = float(slope)
        r0 = Y - b * X
        D = Z[:, :-1]       # the elevation columns: 1, or the group indicators
        a = np.linalg.solve(D.T @ Vi @ D, D.T @ Vi @ r0)
        e = r0 - D @ a
        if method == "ma":
            e = e / math.sqrt(1.0 + b * b)
    we, wx = S @ e, S @ X
    targets = tuple(float(t) for t in exponent_targets)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        from statsmodels.stats.diagnostic import het_breuschpagan
        checks = [_normality(we, alpha), _constant_variance(we, wx, het_breuschpagan, alpha)]
        S_q = S if curvature_cov is None else whitening_root(curvature_cov)
        q = {k: float(v) for k, v in gls_quadratic_t(S_q, X, Y, codes).items()}
        curv, check = _curvature(q, X, targets, log_base, alpha)
        checks.append(check)
    # deletion diagnostics of the GLS fit (module docstring)
    Q = Vi @ Z @ Ainv @ Z.T @ Vi
    P_ii = np.diag(Vi) - np.diag(Q)
    u = Vi @ e
    s2 = float(e @ Vi @ e) / (n - p)
    s2_ols = float(e_ols @ Vi @ e_ols) / (n - p)
    with np.errstate(divide="ignore", invalid="ignore"):
        r = u / np.sqrt(s2 * P_ii)
        lev = np.diag(Q) / np.diag(Vi)
        cook = (Vi @ e_ols) ** 2 * np.diag(Q) / (P_ii ** 2 * p * s2_ols)
    threshold = 4.0 / n
    checks.append(_influence(cook, rows, threshold))
    diag = Diagnostics(method=method, n=n, alpha=alpha, checks=tuple(checks), curvature=curv,
                       residuals=we, cooks_distance=cook, influence_threshold=threshold,
                       influential_rows=checks[-1].rows, rows=rows)
    strong = np.flatnonzero((np.abs(r) > OUTLIER_CUT) | (cook > COOK_STRONG)
                            | (lev > LEVERAGE_FACTOR * p / n))
    strong = strong[np.argsort(-cook[strong], kind="stable")]
    return PhyloChecks(diagnostics=diag, whitened_residuals=we, whitened_x=wx,
                       standardised=r, leverage=lev, cooks=cook, strong=strong, n_params=p)
