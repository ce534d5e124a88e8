"""Phylogenetic group comparisons: the ordinary group tests with shared ancestry.

Species of one clade share history, so clade differences in elevation or
slope are tested with far fewer independent data than species (the
textbook case of inflated tests).  This module gives every ordinary group
test of :mod:`scaling.stats.group_comparisons` its phylogenetic counterpart,
at one Pagel's lambda per method.

Notation: n species with tips, G groups, D the n x G group indicator
matrix, X = log x, Y = log y, V_lambda the Pagel covariance of the tips
(Pagel 1999, Nature 401:877) scaled so that 1'V^-1 1 = n (as in
:mod:`scaling.stats.phylogeny`).  Every quantity below is a quadratic form
Z'V^-1 Z of a few columns Z, which one O(n) post-order pass of
:func:`scaling.stats.phylogeny.phylo_pass` gives for all columns at once
(the pass returns GLS means m and centred sums S, so Z'V^-1 Z = S + 1'V^-1 1 m m').

OLS: phylogenetic ANCOVA by GLS
-------------------------------
Generalised least squares of Y on a design Z has residual sum
RSS(Z) = Y'V^-1 Y - Y'V^-1 Z (Z'V^-1 Z)^-1 Z'V^-1 Y: the ordinary residual sum
of the data whitened by V^-1/2, all columns (the intercept and the group
indicators too) whitened alike (Grafen 1989, Phil. Trans. R. Soc. B 326:119;
Rohlf 2001, Evolution 55:2143).  With three designs

    full     D, D*X   (each group its own line)          RSS_full, n - 2G df
    parallel D, X     (common slope, own elevations)      RSS_par,  n - G - 1 df
    one      1, X     (one line)                          RSS_one

the tests are the F tests of the ordinary ANCOVA on these sums:
slopes equal F = ((RSS_par - RSS_full)/(G - 1)) / (RSS_full/(n - 2G)),
elevations equal given a common slope
F = ((RSS_one - RSS_par)/(G - 1)) / (RSS_par/(n - G - 1)), and, as the ordinary
one-way ANOVA of X, the group difference in mean log x (the shift along the
axis) F = ((RSS_X(1) - RSS_X(D))/(G - 1)) / (RSS_X(D)/(n - G)).  The common
slope is the X coefficient of the parallel design with its t interval on
n - G - 1 df.  These are exact GLS results for any grouping (monophyletic or
not).

Which lambda.  Lambda is estimated (ML or REML) under the full interaction
model (every group its own intercept and slope), once per method, and the
same lambda is used for every row of that method.  The full model is the
largest one: estimating lambda under a null (one line) would let the
unexplained group differences pass for phylogenetic signal -- clades that
differ in elevation look like strong signal -- and inflate lambda, which
in turn weakens the very test of that null.  Lambda is treated as known in
the F tests (as in the usual PGLS practice; its interval is reported beside
each row).

SMA and MA: the tests on phylogenetically transformed data
----------------------------------------------------------
The ordinary tests (Warton & Weber 2002, Biom. J. 44:161; Warton, Wright,
Falster & Westoby 2006, Biol. Rev. 81:259) read, per group, the centred sums
Sxx_i, Syy_i, Sxy_i and the group means.  The phylogenetic transformation
(Garland & Ives 2000, Am. Nat. 155:346; Ives, Midford & Garland 2007,
Syst. Biol. 56:252; Revell 2009, Evolution 63:3258) whitens the data,
Z~ = V^-1/2 Z; the ordinary statistics are then applied to Z~.  The group
indicators must be whitened too: D~ = V^-1/2 D is no longer a 0/1 matrix,
so "the sums of group i" of the whitened data are the parts of the
whitened quadratic forms that belong to group i:

* Group means: the GLS means of each group, M = (D'V^-1 D)^-1 D'V^-1 [X Y]
  (the least-squares coefficients of whitened X and Y on whitened D), with
  covariance sigma^2 (D'V^-1 D)^-1.
* Within-group sums: the residual cross-products of whitened X and Y after
  projecting out whitened D.  When the groups are clades (monophyletic),
  V_lambda = B + D A D' with B block-diagonal by group (A: the branches
  shared between clades, above their ancestors), and a GLS residual
  quadratic form of a design containing D is unchanged by adding D A D'
  (its residual projection is K(K'VK)^-1 K' with K'D = 0).  So the
  within-group sums split exactly into per-group sums, S_i = the GLS
  centred sums of group i on its own subtree of the lambda-transformed tree
  (branches above the group's ancestor dropped), which are independent
  across groups.  They are what this module uses; for groups that are not
  monophyletic they drop the residual covariance between groups (an
  approximation; the OLS tests above stay exact).
* Common slope and its test: the Warton & Weber maximum-likelihood common
  slope and likelihood-ratio statistic from the S_i, exactly as in
  :mod:`scaling.stats.common_slope`, and its profile interval.
* Elevation and axis shift: the Wald statistics of Warton et al. (2006),
  W = min_mu (t - mu 1)' Sigma^-1 (t - mu 1) on G - 1 df, for the group
  means t of the residual scores r = Y - bX and the axis scores
  (Y + bX for SMA, X + bY for MA), with
  Sigma = diag(s_i) R diag(s_i) + var(b) c c',  R = (D'V^-1 D)^-1,
  s_i^2 = Srr_i/(n_i - 1) (or Sff_i) and c_i = dt_i/db.  With V = I,
  R = diag(1/n_i) and this is the ordinary Sigma = diag(s_i^2/n_i) + var(b) c c'
  exactly; on a tree, R carries the covariance of the group means that
  shared ancestry creates (the ordinary tests take it as zero, hence their
  inflation).  Referred to chi^2(G - 1) these are liberal in small groups
  (as the ordinary ones), so p-values come from a parametric bootstrap of
  the fitted null model simulated on the tree (:func:`_bootstrap`; the
  ordinary bootstrap with the species' scores correlated by V_lambda),
  p = (1 + #{T* >= T})/(B + 1) (Davison & Hinkley 1997, eq. 4.11).

Checks (tests/test_phylo_groups.py): on an ultrametric tree with lambda = 0,
or on a star tree whatever lambda, V is proportional to I and every
statistic equals the ordinary one; the OLS statistics and common slope equal
statsmodels GLS with the dense lambda covariance; sizes by simulation are in
docs/phylogeny.md.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from . import tails

from ..errors import DataError
from .common_slope import CommonSlope, _common_from_arrays, _fit_common
from .group_comparisons import PAIRWISE_MAX, _axis_scores, holm_adjust
from .line_results import ConfidenceInterval
from .newick import Tree
from .phylo_profile import _GRID, _maximise, _profile_interval
from .phylogeny import (PhyloPlan, match_species, normalise_name, pagel_lambda, phylo_pass,
                        prune_tree, tree_covariance)
from .schema import DEFAULT_SEED, check_confidence

__all__ = ["PHYLO_GROUP_SCOPE", "PhyloGroupTests", "phylo_group_tests", "gram_matrices"]

#: ``scope`` of the phylogenetic rows of group_tests.csv and pairwise_tests.csv.
PHYLO_GROUP_SCOPE = "phylo"
_TESTS = ("slopes_equal", "intercepts_equal", "shift_along_axis")
_LOG2PI = math.log(2 * math.pi)
#: Above this many species the SMA/MA tests are referred to chi^2 (the bootstrap
#: simulates with a dense n x n Cholesky factor).
BOOTSTRAP_MAX_N = 3000


@dataclass(frozen=True, slots=True, kw_only=True)
class PhyloGroupTests:
    """Phylogenetic group comparisons of one method at one lambda.

    Attributes
    ----------
    method : str
    lam : float
        Pagel's lambda used by every test (estimated under the full model,
        or given).
    lam_ci : ConfidenceInterval
        Its profile-likelihood interval (NaN bounds when given).
    lam_estimate : str
        ``"ml"``, ``"reml"`` or ``"fixed"``.
    groups : tuple of str
    n : ndarray
        Species per group.
    statistic, df, df_resid, p_value : ndarray, shape (3,)
        The tests ``slopes_equal``, ``intercepts_equal``, ``shift_along_axis``
        (F tests for OLS; LR and Wald on chi^2 for SMA and MA, ``df_resid`` NaN).
    p_method : str
        ``"F"`` or ``"chi2"``.
    common : CommonSlope
        The phylogenetic common within-group slope (``slope_ci``,
        ``test_slope``).
    pairwise : tuple of dict
        Pairwise tests (rows of ``pairwise_tests.csv``) for each test that
        rejects at ``1 - confidence``.
    """

    method: str
    lam: float
    lam_ci: ConfidenceInterval
    lam_estimate: str
    groups: tuple
    n: np.ndarray
    statistic: np.ndarray
    df: np.ndarray
    df_resid: np.ndarray
    p_value: np.ndarray
    p_method: str
    common: CommonSlope = field(repr=False)
    pairwise: tuple = ()
    confidence: float = 0.95

    def _lam_cols(self) -> dict:
        return {"scope": PHYLO_GROUP_SCOPE, "lambda": self.lam,
                "lambda_low": self.lam_ci.low, "lambda_high": self.lam_ci.high}

    def to_frame(self) -> pd.DataFrame:
        """Rows of ``group_tests.csv`` (scope ``phylo``, with the lambda used)."""
        ci = self.common.slope_ci
        return pd.DataFrame([{**self._lam_cols(), "method": self.method, "test": t,
                              "statistic": float(self.statistic[i]), "df": float(self.df[i]),
                              "df_resid": float(self.df_resid[i]),
                              "p_value": float(self.p_value[i]), "p_method": self.p_method,
                              "common_slope": self.common.slope,
                              "common_slope_low": ci.low, "common_slope_high": ci.high}
                             for i, t in enumerate(_TESTS)])

    def pairwise_frame(self) -> pd.DataFrame:
        """Rows of ``pairwise_tests.csv`` (scope ``phylo``)."""
        cols = ["scope", "lambda", "lambda_low", "lambda_high", "method", "test", "group_a",
                "group_b", "statistic", "df", "p_value", "p_adjusted", "p_method"]
        return pd.DataFrame([{**self._lam_cols(), **r} for r in self.pairwise], columns=cols)

    def differ(self, test: str, alpha: float) -> bool:
        """Whether ``test`` rejects at level ``alpha``."""
        p = float(self.p_value[_TESTS.index(test)])
        return bool(np.isfinite(p) and p < alpha)


# --------------------------------------------------------------------------
# quadratic forms in one pass


def gram_matrices(plan: PhyloPlan, columns, lams):
    """Z'V^-1 Z for the columns Z (n, k) or (n, B, k) under each lambda, one pass.

    Returns ``(gram, logdet, sum_w)``: ``gram`` (L, k, k) or (L, B, k, k)
    with V unscaled, ``logdet`` and ``sum_w`` = 1'V^-1 1 of shape (L,).
    """
    res = phylo_pass(plan, columns, lams)
    m = res.mean
    sw = res.sum_w.reshape((-1,) + (1,) * (m.ndim - 1))
    gram = res.css + (sw * m)[..., :, None] * m[..., None, :]
    return gram, res.logdet, res.sum_w


def _rss(gram, design, target):
    """GLS residual sum of column ``target`` on ``design`` columns (leading axes kept)."""
    d = list(design)
    gzz = gram[..., d, :][..., :, d]
    gzy = gram[..., d, target]
    coef = np.linalg.solve(gzz, gzy[..., None])[..., 0]
    return gram[..., target, target] - np.sum(coef * gzy, axis=-1), coef, gzz


def _ols_columns(X, Y, codes, G):
    """Columns D (G), D*X (G), X, Y, 1 of the ANCOVA designs (last axis)."""
    D = (codes[:, None] == np.arange(G)[None, :]).astype(float)
    shape = X.shape + (G,)
    Dk = np.broadcast_to(D.reshape(D.shape[0], *(1,) * (X.ndim - 1), G), shape)
    return np.concatenate([Dk, Dk * X[..., None], X[..., None], Y[..., None],
                           np.ones(X.shape + (1,))], axis=-1)


def _ols_stats(gram, n, G):
    """The three F statistics, their dfs, the common slope and its se (leading axes kept)."""
    iD = list(range(G))
    iDX = list(range(G, 2 * G))
    iX, iY, i1 = 2 * G, 2 * G + 1, 2 * G + 2
    rss_full = _rss(gram, iD + iDX, iY)[0]
    rss_par, coef_par, gzz = _rss(gram, iD + [iX], iY)
    rss_one = _rss(gram, [i1, iX], iY)[0]
    rss_xd = _rss(gram, iD, iX)[0]
    rss_x1 = _rss(gram, [i1], iX)[0]
    df_full, df_par, df_xd = n - 2 * G, n - G - 1, n - G
    with np.errstate(divide="ignore", invalid="ignore"):
        f = np.stack([((rss_par - rss_full) / (G - 1)) / (rss_full / df_full),
                      ((rss_one - rss_par) / (G - 1)) / (rss_par / df_par),
                      ((rss_x1 - rss_xd) / (G - 1)) / (rss_xd / df_xd)], axis=-1)
        inv = np.linalg.inv(gzz)[..., G, G]
        se = np.sqrt(rss_par / df_par * inv)
    return {"f": f, "df_resid": np.array([df_full, df_par, df_xd], dtype=float),
            "b": coef_par[..., G], "se": se, "rss_full": rss_full}


def _ols_loglik(gram, logdet, n, G, reml):
    """Profile log-likelihood of the full interaction model, per lambda (unscaled V)."""
    design = list(range(2 * G))
    rss, _, gzz = _rss(gram, design, 2 * G + 1)
    ld = logdet.reshape((-1,) + (1,) * (rss.ndim - 1))
    with np.errstate(divide="ignore", invalid="ignore"):
        if reml:
            m = n - 2 * G
            return -0.5 * (m * _LOG2PI + ld + np.linalg.slogdet(gzz)[1] + m * np.log(rss / m) + m)
        return -0.5 * (n * _LOG2PI + ld + n * np.log(rss / n) + n)


def _axis_loglik(gram, logdet, n, G, reml):
    """Bivariate Brownian log-likelihood of (X, Y) with free group means, per lambda."""
    iD = list(range(G))
    gdd = gram[..., iD, :][..., :, iD]
    gdz = gram[..., iD, G:G + 2]
    w = gram[..., G:G + 2, G:G + 2] - np.swapaxes(gdz, -1, -2) @ np.linalg.solve(gdd, gdz)
    det = w[..., 0, 0] * w[..., 1, 1] - w[..., 0, 1] ** 2
    ld = logdet.reshape((-1,) + (1,) * (det.ndim - 1))
    with np.errstate(divide="ignore", invalid="ignore"):
        if reml:
            m = n - G
            return -0.5 * (2 * m * _LOG2PI + 2 * ld + 2 * np.linalg.slogdet(gdd)[1]
                           + m * np.log(det / (m * m)) + 2 * m)
        return -0.5 * (2 * n * _LOG2PI + 2 * ld + n * np.log(det / (n * n)) + 2 * n)


def _wald_general(t, s, R, var_b, c):
    """W = min_mu (t - mu 1)' Sigma^-1 (t - mu 1), Sigma = diag(s) R diag(s) + var_b c c'.

    Rows (leading axis) in parallel: t, s, c of shape (B, G), var_b (B,).
    """
    sigma = (s[:, :, None] * R[None] * s[:, None, :]
             + np.asarray(var_b)[:, None, None] * c[:, :, None] * c[:, None, :])
    one = np.ones_like(t)
    a = np.linalg.solve(sigma, np.stack([t, one], axis=-1))
    w = (np.sum(t * a[..., 0], -1) - np.sum(one * a[..., 0], -1) ** 2
         / np.sum(one * a[..., 1], -1))
    return np.maximum(w, 0.0)


# --------------------------------------------------------------------------
# the prepared problem


@dataclass(frozen=True, slots=True)
class _Problem:
    tree: Tree          # pruned to the species with data
    plan: PhyloPlan
    tips: np.ndarray    # node of each data row
    X: np.ndarray
    Y: np.ndarray
    codes: np.ndarray
    groups: tuple


def _prepare(tree: Tree, X, Y, species, labels) -> _Problem:
    match = match_species(species, tree)
    if match.missing_species:
        raise DataError(f"species {match.missing_species[0]!r} has no tip in tree {tree.source}")
    if len(match.species) != len(species):
        raise DataError("each species must appear once (average rows within species first)")
    pruned = prune_tree(tree, match.tip_of_species)
    index = {normalise_name(pruned.names[t]): int(t) for t in pruned.tips}
    tips = np.array([index[normalise_name(s)] for s in species], dtype=np.intp)
    groups, codes = np.unique(np.asarray(labels, dtype=str), return_inverse=True)
    return _Problem(tree=pruned, plan=PhyloPlan.from_tree(pruned, tips), tips=tips,
                    X=np.asarray(X, float), Y=np.asarray(Y, float), codes=codes,
                    groups=tuple(str(g) for g in groups))


def _subset(p: _Problem, keep: np.ndarray) -> _Problem:
    sub = prune_tree(p.tree, p.tips[keep])
    index = {normalise_name(sub.names[t]): int(t) for t in sub.tips}
    tips = np.array([index[normalise_name(p.tree.names[t])] for t in p.tips[keep]])
    groups, codes = np.unique(p.codes[keep], return_inverse=True)
    return _Problem(tree=sub, plan=PhyloPlan.from_tree(sub, tips), tips=tips, X=p.X[keep],
                    Y=p.Y[keep], codes=codes, groups=tuple(p.groups[g] for g in groups))


def _group_sums(p: _Problem, lam: float, scale: float, X, Y):
    """Per-group GLS centred sums (group mean free) on each group's subtree of the
    lambda-transformed tree; X, Y of shape (n, B) -> (3, B, G): Sxx, Syy, Sxy."""
    t_lam = pagel_lambda(p.tree, lam)
    G = len(p.groups)
    sums = np.zeros((3, X.shape[1], G))
    for g in range(G):
        rows = np.flatnonzero(p.codes == g)
        sub = prune_tree(t_lam, p.tips[rows])
        index = {normalise_name(sub.names[t]): int(t) for t in sub.tips}
        tips = np.array([index[normalise_name(t_lam.names[t])] for t in p.tips[rows]])
        res = phylo_pass(PhyloPlan.from_tree(sub, tips),
                         np.stack([X[rows], Y[rows]], axis=-1), [1.0])
        css = res.css[0] * scale                          # (B, 2, 2)
        sums[:, :, g] = css[:, 0, 0], css[:, 1, 1], css[:, 0, 1]
    return sums


def _estimate_lam(p: _Problem, method: str, lam, reml: bool, confidence: float):
    G, n = len(p.groups), p.X.size
    if method == "ols":
        cols = _ols_columns(p.X, p.Y, p.codes, G)
        loglik_of = _ols_loglik
    else:
        cols = np.column_stack([(p.codes[:, None] == np.arange(G)).astype(float), p.X, p.Y])
        loglik_of = _axis_loglik

    def ll_many(lams):
        gram, logdet, _ = gram_matrices(p.plan, cols, lams)
        return loglik_of(gram, logdet, n, G, reml)

    if lam != "ml":
        return float(lam), ConfidenceInterval(math.nan, math.nan), "fixed"
    grid_values = ll_many(_GRID)
    lam_hat, ll_hat = _maximise(lambda t: float(ll_many([t])[0]), grid_values, ll_many)
    ci = _profile_interval(lambda t: float(ll_many([t])[0]), lam_hat, ll_hat, confidence,
                           grid_values)
    return float(lam_hat), ci, "reml" if reml else "ml"


def _tests_at(p: _Problem, method: str, lam: float, confidence: float, n_boot: int = 0,
              seed: int | None = None):
    """(statistic, df, df_resid, p, CommonSlope) of the three tests at a fixed lambda."""
    G, n = len(p.groups), p.X.size
    n_g = np.bincount(p.codes, minlength=G).astype(float)
    if method == "ols":
        gram, _, _ = gram_matrices(p.plan, _ols_columns(p.X, p.Y, p.codes, G), [lam])
        r = _ols_stats(gram[0], n, G)
        f = r["f"]
        p_val = np.array([tails.f_upper(f[i], G - 1, r["df_resid"][i]) if np.isfinite(f[i])
                          else math.nan for i in range(3)])
        df_par = n - G - 1
        tq = tails.t_quantile(0.5 + confidence / 2, df_par)
        b, se = float(r["b"]), float(r["se"])
        common = CommonSlope(method=method, slope=b,
                             slope_ci=ConfidenceInterval(b - tq * se, b + tq * se),
                             slope_se=se, n_groups=G, n=n, confidence=confidence,
                             groups=p.groups, df_resid=float(df_par))
        return f, np.full(3, G - 1.0), r["df_resid"], p_val, common, "F"
    r = _axis_stats(p, method, lam, p.X, p.Y)
    sxx, syy, sxy = r["sums"]
    b, ci, se, prof = _common_from_arrays(method, n_g, r["mx"], r["my"], sxx, syy, sxy,
                                          confidence, full=True)
    common = CommonSlope(method=method, slope=float(b), slope_ci=ci, slope_se=float(se),
                         n_groups=G, n=n, confidence=confidence, groups=p.groups,
                         df_resid=float(n - G - 1), profile=prof)
    stat = r["statistic"]
    if not n_boot or n > BOOTSTRAP_MAX_N:
        return (stat, np.full(3, G - 1.0), np.full(3, math.nan), tails.chi2_upper(stat, G - 1),
                common, "chi2")
    boot = _bootstrap(p, method, lam, r, n_boot, np.random.default_rng(seed))[0]
    tol = 1e-9 * (1 + np.abs(stat))
    p_val = (1.0 + np.sum(boot >= stat - tol, axis=0)) / (n_boot + 1.0)
    return (stat, np.full(3, G - 1.0), np.full(3, math.nan), p_val, common,
            f"parametric_bootstrap({n_boot})")


def _bootstrap(p: _Problem, method: str, lam: float, r: dict, n_boot: int, rng, *,
               chunk: int = 20_000) -> np.ndarray:
    """Statistics (M, n_boot, 3) under the fitted null models, simulated on the tree.

    ``r`` is :func:`_axis_stats` of M data sets (``mx``, ``my`` (M, G), ``sums``
    (3, M, G)).  As the ordinary bootstrap (:mod:`scaling.stats.group_comparisons`):
    common slope b; residual scores r and axis scores f independent, group i
    with variances s_r,i^2 and s_f,i^2; for the elevation test (and the slope
    LR) all group means of r equal (their weighted mean), f's as observed; for
    the axis test the reverse.  Here the scores of the species are correlated
    along the tree: r* = mean + s_r,g(i) (L z)_i, L L' = V_lambda (scaled), so
    the group means have the covariance diag(s) R diag(s) the Wald statistics
    assume.  Replicates are simulated for all data sets in array passes of
    about ``chunk`` data sets.
    """
    G, n = len(p.groups), p.X.size
    mx, my = np.atleast_2d(r["mx"]), np.atleast_2d(r["my"])
    sums = r["sums"] if np.ndim(r["sums"]) == 3 else r["sums"][:, None, :]
    M = mx.shape[0]
    n_g = np.broadcast_to(np.bincount(p.codes, minlength=G).astype(float), (M, G))
    fit = _fit_common(method, n_g, *sums, exact=M == 1)
    sc = _axis_scores(method, fit["b"], n_g, mx, my, *sums)
    b = fit["b"]
    pos = np.searchsorted(p.tree.tips, p.tips)
    v = tree_covariance(p.tree, lam)[np.ix_(pos, pos)]
    one = np.ones(n)
    v *= float(one @ np.linalg.solve(v, one)) / n        # 1'V^-1 1 = n
    L = np.linalg.cholesky(v)
    w_r, w_f = n_g / sc["sr2"], n_g / sc["sf2"]
    r_pool = np.sum(w_r * sc["rbar"], -1, keepdims=True) / np.sum(w_r, -1, keepdims=True)
    f_pool = np.sum(w_f * sc["fbar"], -1, keepdims=True) / np.sum(w_f, -1, keepdims=True)
    nulls = ((np.broadcast_to(r_pool, (M, G)), sc["fbar"]),
             (sc["rbar"], np.broadcast_to(f_pool, (M, G))))
    out = np.empty((M, n_boot, 3))
    per = max(1, chunk // M)
    for start in range(0, n_boot, per):
        B = min(per, n_boot - start)
        # (n, M, B): the same draws serve both null models
        zr = np.sqrt(sc["sr2"]).T[p.codes][:, :, None] * (
            L @ rng.standard_normal((n, M * B))).reshape(n, M, B)
        zf = np.sqrt(sc["sf2"]).T[p.codes][:, :, None] * (
            L @ rng.standard_normal((n, M * B))).reshape(n, M, B)
        bb = b[None, :, None]
        res = []
        for r_mean, f_mean in nulls:
            rr = r_mean.T[p.codes][:, :, None] + zr
            ff = f_mean.T[p.codes][:, :, None] + zf
            if method == "sma":
                X, Y = (ff - rr) / (2 * bb), (rr + ff) / 2
            else:
                X, Y = (ff - bb * rr) / (1 + bb * bb), (rr + bb * ff) / (1 + bb * bb)
            res.append(_axis_stats(p, method, lam, X.reshape(n, M * B),
                                   Y.reshape(n, M * B))["statistic"].reshape(M, B, 3))
        out[:, start:start + B] = np.concatenate([res[0][..., :2], res[1][..., 2:]], axis=-1)
    return out


def _axis_stats(p: _Problem, method: str, lam: float, X, Y) -> dict:
    """LR and the two Wald statistics for data X, Y of shape (n,) or (n, B) (replicates)."""
    G, n = len(p.groups), p.X.size
    batched = np.ndim(X) == 2
    Xb = X if batched else X[:, None]
    Yb = Y if batched else Y[:, None]
    B = Xb.shape[1]
    D = (p.codes[:, None] == np.arange(G)).astype(float)
    cols = np.concatenate([np.broadcast_to(D[:, None, :], (n, B, G)), Xb[..., None],
                           Yb[..., None]], axis=-1)
    gram, _, sum_w = gram_matrices(p.plan, cols, [lam])
    scale = n / float(sum_w[0])            # V scaled so that 1'V^-1 1 = n
    gram = gram[0] * scale                  # (B, G + 2, G + 2)
    R = np.linalg.inv(gram[0, :G, :G])      # the same for every replicate
    means = np.einsum("gh,bhk->bgk", R, gram[:, :G, G:G + 2])
    mx, my = means[..., 0], means[..., 1]
    sums = _group_sums(p, lam, scale, Xb, Yb)          # (3, B, G)
    n_g = np.broadcast_to(np.bincount(p.codes, minlength=G).astype(float), (B, G))
    fit = _fit_common(method, n_g, *sums, exact=not batched)
    sc = _axis_scores(method, fit["b"], n_g, mx, my, *sums)
    w_int = _wald_general(sc["rbar"], np.sqrt(sc["sr2"]), R, fit["var_b"], sc["c_r"])
    w_axis = _wald_general(sc["fbar"], np.sqrt(sc["sf2"]), R, fit["var_b"], sc["c_f"])
    stat = np.stack([fit["lr"], w_int, w_axis], axis=-1)
    out = {"statistic": stat, "mx": mx, "my": my, "sums": sums}
    if not batched:
        out = {"statistic": stat[0], "mx": mx[0], "my": my[0], "sums": sums[:, 0]}
    return out


def phylo_group_tests(X, Y, species, groups, tree: Tree, *, method: str = "ols", lam="ml",
                      reml: bool = False, confidence: float = 0.95, pairwise: bool = True,
                      pairwise_max: int = PAIRWISE_MAX, n_boot: int = 999,
                      seed: int | None = DEFAULT_SEED) -> PhyloGroupTests:
    """Phylogenetic slopes-equal, elevations-equal and shift-along-axis tests.

    Parameters
    ----------
    X, Y : array_like, shape (n,)
        Log values, one per species.
    species : sequence of str
        Tip name of each row (each species once).
    groups : array_like, shape (n,)
        Group of each species; at least 2 groups of at least 3 species.
    tree : Tree
    method : {"ols", "sma", "ma"}
    lam : "ml" or float in [0, 1]
        Estimate Pagel's lambda under the full model (ML, REML with
        ``reml=True``) or fix it.
    confidence : float
        Level of the lambda and common-slope intervals; pairwise tests are
        made for tests with p < 1 - confidence.
    pairwise : bool
    pairwise_max : int
        Pairwise tests only for at most this many groups (as the ordinary ones).
    n_boot : int
        SMA and MA: replicates of the parametric bootstrap on the tree that
        calibrates the p-values (0: chi^2; also above :data:`BOOTSTRAP_MAX_N`
        species).  OLS F tests are exact and never bootstrapped.
    seed : int or None
        Seed of the bootstrap.

    Returns
    -------
    PhyloGroupTests

    Raises
    ------
    DataError
        A species without a tip, a repeated species, fewer than 2 groups or a
        group with fewer than 3 species.

    Notes
    -----
    Formulas, the choice of lambda and sources are in the module docstring.
    """
    confidence = check_confidence(confidence)
    p = _prepare(tree, X, Y, list(species), groups)
    n_g = np.bincount(p.codes, minlength=len(p.groups))
    if len(p.groups) < 2 or n_g.min() < 3:
        raise DataError("phylogenetic group tests need at least 2 groups of at least 3 species")
    lam_hat, lam_ci, estimate = _estimate_lam(p, method, lam, reml, confidence)
    stat, df, df_resid, p_val, common, p_method = _tests_at(p, method, lam_hat, confidence,
                                                            n_boot, seed)
    pairs = []
    alpha = 1 - confidence
    if pairwise and 2 < len(p.groups) <= pairwise_max:
        for i, test in enumerate(_TESTS):
            if not (np.isfinite(p_val[i]) and p_val[i] < alpha) or test == "slopes_equal":
                continue
            rows = []
            for a, b in itertools.combinations(range(len(p.groups)), 2):
                sub = _subset(p, (p.codes == a) | (p.codes == b))
                s2, d2, _, pv, _, pm = _tests_at(sub, method, lam_hat, confidence, n_boot,
                                                 seed)
                rows.append({"method": method, "test": test, "group_a": p.groups[a],
                             "group_b": p.groups[b], "statistic": float(s2[i]),
                             "df": float(d2[i]), "p_value": float(pv[i]), "p_method": pm})
            adj = holm_adjust([r["p_value"] for r in rows])
            pairs += [{**r, "p_adjusted": float(q)} for r, q in zip(rows, adj)]
    return PhyloGroupTests(method=method, lam=lam_hat, lam_ci=lam_ci, lam_estimate=estimate,
                           groups=p.groups, n=n_g, statistic=stat, df=df, df_resid=df_resid,
                           p_value=p_val, p_method=p_method, common=common,
                           pairwise=tuple(pairs), confidence=confidence)
