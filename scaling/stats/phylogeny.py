"""Phylogenetic OLS (PGLS), SMA and MA under Brownian motion and Pagel's lambda.

Species share history, so their log traits are correlated with covariance
proportional to V, V_ij = height of the most recent common ancestor of i
and j (Brownian motion; Felsenstein 1985, Am. Nat. 125:1).  Pagel's (1999,
Nature 401:877) lambda multiplies the off-diagonal of V by lambda: every
internal branch is scaled by lambda and each tip branch is lengthened so
that tip heights stay as they were (tip branch -> lambda b + (1 - lambda) h,
h the tip's height).  lambda = 0 is a star tree (independent species; an
ordinary fit when the tree is ultrametric), lambda = 1 plain Brownian
motion.

Phylogenetic moments
--------------------
Every line method of :mod:`scaling.stats.lines` reads moments (n, means, centred
sums).  The phylogenetic versions are the generalised-least-squares ones:
means mu = 1'V^-1 z / 1'V^-1 1 (the GLS means, i.e. the root-state
estimates) and centred sums S_uv = (u - mu_u 1)' V^-1 (v - mu_v 1).  V is
only known up to a factor (the Brownian rate is estimated), so it is scaled
to make 1'V^-1 1 = n; then the ordinary formulas of ``lines.fit_moments``
give exactly the GLS results: OLS on these moments is PGLS (Grafen 1989,
Phil. Trans. R. Soc. B 326:119; Martins & Hansen 1997, Am. Nat. 149:646) -
slope Sxy/Sxx, s^2 = (Syy - b Sxy)/(n - 2), var(slope) = s^2/Sxx and
var(intercept) = s^2 (1/1'V^-1 1 + mu_x^2/Sxx) - and SMA and MA on them are
the phylogenetic SMA and MA of Ives, Midford & Garland (2007, Syst. Biol.
56:252), read from the GLS covariance matrix of log x and log y.  Slope
tests and intervals are those of :mod:`scaling.stats.lines` on n - 2 degrees of
freedom, as in the ordinary case (they treat lambda as known).  On a star
tree with equal tip heights V = I after scaling, so every result equals the
ordinary one exactly.  Exception: PGLS with lambda estimated takes its slope
interval and slope test from the profile likelihood over lambda
(:mod:`scaling.stats.phylo_profile`), so that they carry lambda's uncertainty;
its intercept interval still treats lambda as known.

Linear time
-----------
The GLS quantities and log det V come from one post-order pass
(Felsenstein's 1985 pruning, in the form of the three-point algorithm of
Ho & Ane 2014, Syst. Biol. 63:397; Freckleton 2012, Methods Ecol. Evol.
3:940).  Each child c of node k hands up a value z_c (tip: its data) and an
extra variance p_c (tip: 0); with e_c = branch_c + p_c and w_c = 1/e_c,
    z_k = sum w_c z_c / W_k,  p_k = 1/W_k,  W_k = sum_c w_c,
which handles polytomies directly.  Then
    log det V = sum over branches log e_c - sum over internal non-root k of log p_k,
    1'V^-1 1 = 1/p_root,  GLS mean = z_root,
    S_uv = sum over branches w_c (u_c - u_k)(v_c - v_k)
(the Gaussian identity prod_c N(z_c; t, e_c) = N(z_k; t, p_k) x the contrast
term, applied from the tips to the root).  Nodes are grouped by their height
in branches above the tips; one level is one set of numpy operations
(``np.add.reduceat`` over children sorted by parent), so a pass costs O(n)
arithmetic and one Python step per level.  A pass is vectorised over any
number of lambda values at once (a grid is evaluated in one pass).
:func:`dense_phylo_moments` is the n x n Cholesky reference used in tests.

Likelihoods and the choice of lambda (per method)
-------------------------------------------------
``ols`` (PGLS)
    lambda maximises the likelihood of the regression Y = a + bX + e,
    e ~ N(0, s^2 V_lambda) (the PGLS residual likelihood, the usual choice
    for regression, Revell 2010 Methods Ecol. Evol. 1:319), profiled over a,
    b, s^2:  ML  l = -1/2 [n log 2pi + log|V| + n log(RSS/n) + n];
    REML l = -1/2 [(n-2) log 2pi + log|V| + log|X'V^-1X| + (n-2) log(RSS/(n-2)) + n - 2],
    RSS = Syy - Sxy^2/Sxx in the V^-1 metric, |X'V^-1X| = (1'V^-1 1) Sxx.
    Parameters: a, b, s^2 (+ lambda).
``sma``, ``ma``
    These lines describe the joint variation of X and Y, so lambda
    maximises the joint bivariate Brownian-motion likelihood of (X, Y) with
    one lambda, free means and a free 2x2 rate matrix R (symmetric in X and
    Y, so swapping the axes gives the same lambda and the reciprocal slope):
    ML  l = -1/2 [2n log 2pi + 2 log|V| + n log det(S/n) + 2n];
    REML l = -1/2 [2(n-1) log 2pi + 2 log|V| + 2 log(1'V^-1 1) + (n-1) log det(S/(n-1)) + 2(n-1)],
    S the 2x2 matrix of centred sums.  Parameters: 2 means, 3 rates (+ lambda).
The REML forms omit the constant log|X'X| term (as several packages do),
so REML log-likelihoods compare only between fits with the same design.
AIC = -2 l + 2 k, k counting lambda when it is estimated.

lambda is estimated on [0, 1] by evaluating a grid of 11 values in one pass
and refining the best one by Brent's root search on the central-difference
derivative between its grid neighbours (bounded Brent search on the value
when the maximum is at or next to 0 or 1).  Its profile-likelihood
interval is {lambda : 2 (l_max - l(lambda)) <= chi2_1(confidence)} (Wilks),
found by root search on each side between the grid values that bracket the
cut, and clipped to [0, 1].
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from .fit_rows import fit_values
from ._display import frame_html, short_repr
from ..errors import ConfigError, DataError
from .line_results import (ConfidenceInterval, LineFit, SlopeTest, accepted_ranges,
                           line_fit_from_moments)
from .lines import (METHODS, validate_xy, base_label, fit_moments, method_label,
                    parse_log_base, slope_test_statistic, to_log)
from .moments import Moments
from .newick import Tree, parse_newick, read_newick
from .phylo_profile import (PROFILE_GRID, SlopeProfile, _GRID, _maximise, _profile_interval,
                            profile_interval, profile_test, slope_profile)
from .schema import check_confidence

__all__ = [
    "Tree",
    "parse_newick",
    "read_newick",
    "TipMatch",
    "normalise_name",
    "match_species",
    "prune_tree",
    "pagel_lambda",
    "tree_covariance",
    "PhyloPlan",
    "phylo_pass",
    "pass_with_lengths",
    "phylo_moments",
    "dense_phylo_moments",
    "phylo_loglik",
    "PhyloFit",
    "fit_phylo",
]

# --------------------------------------------------------------------------
# names and pruning


def normalise_name(name) -> str:
    """The matching key of a species or tip name: trimmed, ``_`` read as a space."""
    return " ".join(str(name).replace("_", " ").split())


@dataclass(frozen=True, slots=True, kw_only=True)
class TipMatch:
    """How a species column meets the tips of a tree.

    Attributes
    ----------
    tip_of_species : ndarray of int
        For each (unique) species in ``species`` order, the node index of its
        tip, or -1 when the tree has no such tip.
    species : tuple of str
        The unique species, in order of first appearance.
    missing_species : tuple of str
        Species without a tip (dropped from the fit).
    pruned_tips : tuple of str
        Tip names without data (pruned from the tree).
    """

    tip_of_species: np.ndarray
    species: tuple
    missing_species: tuple
    pruned_tips: tuple


def match_species(species, tree: Tree) -> TipMatch:
    """Match species names to the tips of ``tree``.

    Names match exactly after trimming and treating ``_`` and space alike
    (runs of blanks count as one).

    Raises
    ------
    DataError
        If two tips share a name, or a species name is empty.
    """
    tips = tree.tips
    index: dict[str, int] = {}
    for node in tips:
        key = normalise_name(tree.names[node])
        if not key:
            raise DataError(f"tree {tree.source}: a tip has no name"
                            + (f" (character {int(tree.offsets[node])})"
                               if tree.offsets is not None else ""))
        if key in index:
            raise DataError(f"tree {tree.source}: two tips are named {key!r}")
        index[key] = int(node)
    uniq: list[str] = []
    seen: set[str] = set()
    for s in species:
        key = normalise_name(s)
        if not key:
            raise DataError("species column: an empty species name")
        if key not in seen:
            seen.add(key)
            uniq.append(key)
    tip_of = np.array([index.get(s, -1) for s in uniq], dtype=np.intp)
    used = set(int(t) for t in tip_of if t >= 0)
    return TipMatch(
        tip_of_species=tip_of,
        species=tuple(uniq),
        missing_species=tuple(s for s, t in zip(uniq, tip_of) if t < 0),
        pruned_tips=tuple(tree.names[t] for t in tips if int(t) not in used),
    )


def _heights(parent: np.ndarray, length: np.ndarray) -> np.ndarray:
    """Distance of every node from the root (pre-order: one sweep)."""
    h = length.tolist()
    par = parent.tolist()
    h[0] = 0.0
    for i in range(1, len(h)):
        h[i] += h[par[i]]
    return np.asarray(h)


def prune_tree(tree: Tree, keep_tips) -> Tree:
    """The tree restricted to ``keep_tips`` (node indices), unary nodes merged.

    The new root is the most recent common ancestor of the kept tips
    (branches above it play no part in V); a node left with one child is
    removed and its branch added to the child's, so every path length from
    the new root is unchanged.  Tips keep their pre-order.

    Raises
    ------
    DataError
        If fewer than two tips are kept.
    """
    keep = np.zeros(tree.n_nodes, dtype=bool)
    keep[np.asarray(keep_tips, dtype=np.intp)] = True
    keep &= tree.is_tip
    if np.count_nonzero(keep) < 2:
        raise DataError(f"tree {tree.source}: fewer than 2 tips have data")
    par = tree.parent
    n = tree.n_nodes
    count = keep.astype(np.intp).tolist()
    plist = par.tolist()
    for i in range(n - 1, 0, -1):
        if count[i]:
            count[plist[i]] += count[i]
    alive = np.asarray(count) > 0
    child_alive = np.bincount(par[1:][alive[1:]], minlength=n)
    node_kept = alive & (tree.is_tip | (child_alive >= 2))
    kept_idx = np.flatnonzero(node_kept)
    root = int(kept_idx[0])
    h = _heights(par, tree.length)
    # nearest kept ancestor of every alive node, in one pre-order sweep
    anc = [-1] * n
    kept_l = node_kept.tolist()
    for i in np.flatnonzero(alive).tolist():
        anc[i] = i if kept_l[i] else (anc[plist[i]] if i else -1)
    new_id = np.full(n, -1, dtype=np.intp)
    new_id[kept_idx] = np.arange(kept_idx.size)
    anc_a = np.asarray(anc)
    old_par = np.where(kept_idx == root, -1, anc_a[np.maximum(par[kept_idx], 0)])
    new_par = np.where(old_par >= 0, new_id[np.maximum(old_par, 0)], -1)
    new_len = np.where(old_par >= 0, h[kept_idx] - h[np.maximum(old_par, 0)], 0.0)
    new_par[0] = -1
    new_len[0] = 0.0
    offs = None if tree.offsets is None else tree.offsets[kept_idx]
    return Tree(parent=new_par, length=np.maximum(new_len, 0.0),
                names=tuple(tree.names[i] for i in kept_idx),
                is_tip=tree.is_tip[kept_idx].copy(), source=tree.source, offsets=offs)


def pagel_lambda(tree: Tree, lam: float) -> Tree:
    """Pagel's lambda transform: internal branches x lambda, tip heights kept.

    Notes
    -----
    Tip branch b of a tip at height h becomes lambda b + (1 - lambda) h,
    internal branches lambda b (Pagel 1999, Nature 401:877), so that
    V_lambda = lambda V + (1 - lambda) diag(V).
    """
    lam = float(lam)
    h = _heights(tree.parent, tree.length)
    new = np.where(tree.is_tip, lam * tree.length + (1 - lam) * h, lam * tree.length)
    new[0] = 0.0
    return Tree(parent=tree.parent, length=new, names=tree.names, is_tip=tree.is_tip,
                source=tree.source, offsets=tree.offsets)


def tree_covariance(tree: Tree, lam: float = 1.0) -> np.ndarray:
    """Dense Brownian covariance of the tips (tips in pre-order), under lambda.

    V_ij = sum of branch lengths shared by the root-to-tip paths of i and j.
    For tests and small trees only (n x n memory).
    """
    from scipy import sparse
    t = pagel_lambda(tree, lam) if lam != 1.0 else tree
    tips = tree.tips
    # ancestor indicator A (tips x nodes): tip i lies below the branch of node k
    rows, cols = [], []
    par = tree.parent.tolist()
    for r, tip in enumerate(tips.tolist()):
        k = tip
        while k > 0:
            rows.append(r)
            cols.append(k)
            k = par[k]
    a = sparse.csr_matrix((np.ones(len(rows)), (rows, cols)), shape=(tips.size, tree.n_nodes))
    return np.asarray((a.multiply(t.length[None, :]) @ a.T).todense())


# --------------------------------------------------------------------------
# the linear-time pass


@dataclass(frozen=True, slots=True, kw_only=True)
class PhyloPlan:
    """A tree prepared for repeated O(n) passes (levels of children sorted by parent).

    Build it with :meth:`from_tree`; ``tips`` are node indices in the order
    of the data rows the pass will receive.  Node ids inside the plan are
    renumbered (root 0; the children of one level are consecutive ids), so
    ``tips`` and ``internal_nonroot`` are plan ids, not the tree's.
    """

    n: int
    n_nodes: int
    tips: np.ndarray
    child: np.ndarray            # child node of each branch: 1..N-1 (nodes renumbered so that
                                 # branches are ordered by (level of parent, parent))
    parent_of_child: np.ndarray
    length: np.ndarray           # branch length of each sorted child
    tip_height: np.ndarray       # height of the child if it is a tip, else 0
    levels: tuple                # per level: (slice of sorted children, reduceat starts, parents)
    internal_nonroot: np.ndarray

    @classmethod
    def from_tree(cls, tree: Tree, tips=None) -> "PhyloPlan":
        """Prepare ``tree``; ``tips`` (node indices, default all tips) orders the data.

        Raises
        ------
        DataError
            If a tip branch has length zero (the covariance would be singular
            at lambda = 1) or a node has no child.
        """
        par = tree.parent
        n_nodes = tree.n_nodes
        tips = tree.tips if tips is None else np.asarray(tips, dtype=np.intp)
        if tips.size != tree.n_tips or np.unique(tips).size != tips.size:
            raise DataError(f"tree {tree.source}: the data must give every tip exactly once")
        zero = tree.is_tip & (tree.length <= 0)
        zero[0] = False
        if np.any(zero):
            i = int(np.flatnonzero(zero)[0])
            raise DataError(
                f"tree {tree.source}: tip {tree.names[i]!r} has a branch of length zero, so "
                "two species would be identical under Brownian motion; give it a positive length")
        # height of each node in branches above the tips: level 0 = tips
        level = [0] * n_nodes
        plist = par.tolist()
        for i in range(n_nodes - 1, 0, -1):
            p = plist[i]
            if level[i] + 1 > level[p]:
                level[p] = level[i] + 1
        level = np.asarray(level)
        # Renumber the nodes so that the children handled at one level are one
        # contiguous run of ids, ordered by their parent's (new) id: each level
        # of the pass then reads a slice and writes its parents in increasing
        # order, instead of gathering from all over the arrays (cache misses
        # above ~10 000 tips).  New id = 1 + position of the branch in the
        # (level of parent, new id of parent) order; assigned from the top level
        # down, so a parent's id is known before its children are placed.
        children = np.arange(1, n_nodes)
        plevel_old = level[par[1:]]
        by_level = np.argsort(plevel_old, kind="stable")
        top = int(level[0])
        bounds = np.searchsorted(plevel_old[by_level], np.arange(1, top + 2))
        new_id = np.empty(n_nodes, dtype=np.intp)
        new_id[0] = 0
        for lv in range(top, 0, -1):
            lo, hi = int(bounds[lv - 1]), int(bounds[lv])
            members = children[by_level[lo:hi]]
            key = new_id[par[members]]
            new_id[members[np.argsort(key, kind="stable")]] = np.arange(lo + 1, hi + 1)
        h = _heights(par, tree.length)
        old_of_new = np.empty(n_nodes, dtype=np.intp)
        old_of_new[new_id] = np.arange(n_nodes)
        pc = new_id[par[old_of_new[1:]]]          # parent of new node 1..N-1
        child = np.arange(1, n_nodes)
        levels = []
        for lv in range(1, top + 1):
            lo, hi = int(bounds[lv - 1]), int(bounds[lv])
            seg = pc[lo:hi]
            starts = np.flatnonzero(np.r_[True, seg[1:] != seg[:-1]])
            levels.append((slice(lo, hi), starts, seg[starts]))
        internal = ~tree.is_tip
        internal[0] = False
        old_child = old_of_new[1:]
        return cls(n=int(tips.size), n_nodes=n_nodes, tips=new_id[tips], child=child,
                   parent_of_child=pc, length=tree.length[old_child],
                   tip_height=np.where(tree.is_tip[old_child], h[old_child], 0.0),
                   levels=tuple(levels), internal_nonroot=new_id[np.flatnonzero(internal)])


@dataclass(frozen=True, slots=True, kw_only=True)
class PassResult:
    """Output of :func:`phylo_pass` for L lambda values and k traits.

    ``logdet`` (L,) log det V_lambda; ``sum_w`` (L,) 1'V^-1 1; ``mean`` (L, k)
    GLS means; ``css`` (L, k, k) centred sums in the V^-1 metric (V unscaled).
    """

    logdet: np.ndarray
    sum_w: np.ndarray
    mean: np.ndarray
    css: np.ndarray


def phylo_pass(plan: PhyloPlan, values, lams) -> PassResult:
    """One post-order pass for every lambda in ``lams`` at once.

    Parameters
    ----------
    plan : PhyloPlan
    values : array_like, shape (n, k) or (n, B, k)
        Trait values of the tips, in ``plan.tips`` order; an optional middle
        axis holds B data sets on the same tree (e.g. simulation replicates).
    lams : array_like, shape (L,)

    Returns
    -------
    PassResult
        ``logdet`` and ``sum_w`` of shape (L,); ``mean`` (L, k) or (L, B, k);
        ``css`` (L, k, k) or (L, B, k, k).

    Notes
    -----
    The pruning recursion of the module docstring; cost and memory
    O(n L B k), one numpy step per tree level.
    """
    lams = np.atleast_1d(np.asarray(lams, dtype=float))
    # branch lengths under each lambda: internal b -> lambda b, tip b -> lambda b + (1 - lambda) h
    blen = plan.length[:, None] * lams[None, :] + plan.tip_height[:, None] * (1 - lams)[None, :]
    return pass_with_lengths(plan, values, blen)


def pass_with_lengths(plan: PhyloPlan, values, blen) -> PassResult:
    """The pass of :func:`phylo_pass` on given branch lengths (the transform hook).

    Parameters
    ----------
    plan : PhyloPlan
    values : array_like, shape (n, k) or (n, B, k)
    blen : array_like, shape (n_nodes - 1, L)
        Branch lengths in the plan's branch order (``plan.length`` order), one
        column per transformed tree (Pagel's lambda, Grafen's kappa, Pagel's
        delta, Ornstein-Uhlenbeck, added tip variance, ...).

    Returns
    -------
    PassResult
        As :func:`phylo_pass`, with L the number of columns of ``blen``.
    """
    z_tips = np.asarray(values, dtype=float)
    batched = z_tips.ndim == 3
    if not batched:
        z_tips = z_tips[:, None, :]
    blen = np.asarray(blen, dtype=float)
    L = blen.shape[1]
    n, B, k = z_tips.shape
    # one column per (lambda, data set, trait), lambda slowest
    p = np.zeros((plan.n_nodes, L))
    z = np.zeros((plan.n_nodes, L * B * k))
    z[plan.tips] = np.broadcast_to(z_tips.reshape(n, 1, B * k), (n, L, B * k)).reshape(n, -1)
    e_all = np.empty_like(blen)
    for sl, starts, parents in plan.levels:
        c = slice(sl.start + 1, sl.stop + 1)    # child ids are 1 + branch positions
        e = blen[sl] + p[c]
        e_all[sl] = e
        w = 1.0 / e
        big_w = np.add.reduceat(w, starts, axis=0)
        wz = np.add.reduceat(w[:, :, None] * z[c].reshape(sl.stop - sl.start, L, -1), starts,
                             axis=0)
        wz /= big_w[:, :, None]
        z[parents] = wz.reshape(parents.size, -1)
        p[parents] = 1.0 / big_w
    logdet = np.log(e_all).sum(axis=0) - np.log(p[plan.internal_nonroot]).sum(axis=0)
    d = (z[1:] - z[plan.parent_of_child]).reshape(-1, L, B, k)   # child ids are 1..N-1
    dw = d / e_all[:, :, None, None]
    css = np.empty((L, B, k, k))
    for i in range(k):
        for j in range(i, k):
            css[:, :, i, j] = css[:, :, j, i] = np.einsum("elb,elb->lb", dw[..., i], d[..., j])
    mean = z[0].reshape(L, B, k)
    if not batched:
        mean, css = mean[:, 0], css[:, 0]
    return PassResult(logdet=logdet, sum_w=1.0 / p[0], mean=mean, css=css)


def _dense_pass(v1: np.ndarray, values, lam: float) -> PassResult:
    """The same quantities from the n x n covariance and its Cholesky factor.

    ``v1`` is the Brownian covariance (lambda = 1) with rows in data order;
    V_lambda = lambda V + (1 - lambda) diag(V) (Pagel 1999).
    """
    from scipy.linalg import cho_factor, cho_solve
    v = lam * v1
    v[np.diag_indices_from(v)] = np.diag(v1)
    z = np.asarray(values, dtype=float)
    cf = cho_factor(v, lower=True)
    logdet = 2.0 * np.sum(np.log(np.diag(cf[0])))
    ones = np.ones(z.shape[0])
    vi1 = cho_solve(cf, ones)
    sum_w = ones @ vi1
    mean = (vi1 @ z) / sum_w
    zc = z - mean
    css = zc.T @ cho_solve(cf, zc)
    return PassResult(logdet=np.array([logdet]), sum_w=np.array([sum_w]),
                      mean=mean[None, :], css=css[None])


def _dense_cov(tree: Tree, tips) -> np.ndarray:
    pos = np.searchsorted(tree.tips, np.asarray(tips))   # rows of V are tips in pre-order
    return tree_covariance(tree)[np.ix_(pos, pos)]


# --------------------------------------------------------------------------
# moments and likelihoods


def _moments_from_pass(res: PassResult, n: int, i=0) -> Moments:
    """Moments of pass entry ``i`` (an index into the lambda axis, or a tuple
    (lambda index, replicate index) arrays for batched passes)."""
    scale = n / np.asarray(res.sum_w)[np.asarray(i if not isinstance(i, tuple) else i[0])]
    s = res.css[i]                 # V scaled so that 1'V^-1 1 = n
    mean = res.mean[i]
    return Moments(n=np.full(np.shape(scale), float(n)), mean_x=np.asarray(mean[..., 0]),
                   mean_y=np.asarray(mean[..., 1]), sxx=np.asarray(s[..., 0, 0] * scale),
                   syy=np.asarray(s[..., 1, 1] * scale), sxy=np.asarray(s[..., 0, 1] * scale))


def phylo_loglik(res: PassResult, n: int, *, model: str, reml: bool = False) -> np.ndarray:
    """Profile log-likelihood per lambda of a pass (formulas in the module docstring).

    ``model`` is ``"regression"`` (PGLS residual likelihood of Y given X) or
    ``"bivariate"`` (joint Brownian motion of X and Y).
    """
    two_pi = math.log(2 * math.pi)
    sxx, syy, sxy = res.css[..., 0, 0], res.css[..., 1, 1], res.css[..., 0, 1]
    extra = (1,) * (sxx.ndim - 1)      # broadcast (L,) over a replicate axis
    res = PassResult(logdet=res.logdet.reshape(-1, *extra), sum_w=res.sum_w.reshape(-1, *extra),
                     mean=res.mean, css=res.css)
    with np.errstate(divide="ignore", invalid="ignore"):
        if model == "regression":
            rss = syy - sxy * sxy / sxx
            if reml:
                m = n - 2
                return -0.5 * (m * two_pi + res.logdet + np.log(res.sum_w * sxx)
                               + m * np.log(rss / m) + m)
            return -0.5 * (n * two_pi + res.logdet + n * np.log(rss / n) + n)
        if model == "bivariate":
            det = sxx * syy - sxy * sxy
            if reml:
                m = n - 1
                return -0.5 * (2 * m * two_pi + 2 * res.logdet + 2 * np.log(res.sum_w)
                               + m * np.log(det / (m * m)) + 2 * m)
            return -0.5 * (2 * n * two_pi + 2 * res.logdet + n * np.log(det / (n * n)) + 2 * n)
    raise ConfigError(f"model must be 'regression' or 'bivariate', not {model!r}")


def _model_of(method: str) -> str:
    return "regression" if method == "ols" else "bivariate"


def phylo_moments(tree: Tree, X, Y, lam: float, *, tips=None) -> Moments:
    """Phylogenetic moments of (X, Y) at a given lambda by the O(n) pass.

    ``X``, ``Y`` are already on the log scale, one value per tip in ``tips``
    order (default: the tree's tips in pre-order).
    """
    plan = PhyloPlan.from_tree(tree, tips)
    res = phylo_pass(plan, np.column_stack([X, Y]), [lam])
    return _moments_from_pass(res, plan.n)


def dense_phylo_moments(tree: Tree, X, Y, lam: float, *, tips=None) -> Moments:
    """Reference for :func:`phylo_moments`: n x n covariance and Cholesky (tests only)."""
    tips = tree.tips if tips is None else tips
    res = _dense_pass(_dense_cov(tree, tips), np.column_stack([X, Y]), lam)
    return _moments_from_pass(res, len(tips))


# --------------------------------------------------------------------------
# lambda estimation



# --------------------------------------------------------------------------
# result and entry point


@dataclass(frozen=True, slots=True, kw_only=True)
class PhyloFit:
    """A phylogenetically corrected line (PGLS, phylogenetic SMA or MA).

    Attributes
    ----------
    method : str
        ``"ols"`` (PGLS), ``"sma"`` or ``"ma"``.
    n, slope, slope_ci, slope_se, intercept, intercept_ci, intercept_se, r, r2, resid_sd, df
        As in :class:`~scaling.stats.line_results.LineFit`, computed from the phylogenetic
        moments (``r`` is the phylogenetic correlation; ``resid_sd`` is on the
        scale where 1'V^-1 1 = n).
    lam : float
        Pagel's lambda used (estimated or given).
    lam_ci : ConfidenceInterval
        Profile-likelihood interval (NaN bounds when lambda was given).
    lam_estimate : str
        ``"ml"``, ``"reml"`` or ``"fixed"``.
    lam_model : str
        ``"regression"`` (PGLS residual likelihood) or ``"bivariate"``.
    loglik, aic : float
        At ``lam``; ``n_params`` parameters counted in the AIC.
    missing_species, pruned_tips : tuple of str
        Species without a tip (dropped) and tips without data (pruned).
    note, slope_gap_low, slope_gap_high
        As in :class:`~scaling.stats.line_results.LineFit`.
    slope_profile : SlopeProfile or None
        PGLS with lambda estimated: the profile over lambda that gives
        ``slope_ci`` and :meth:`test_slope` (:mod:`scaling.stats.phylo_profile`).
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
    lam: float
    lam_ci: ConfidenceInterval
    lam_estimate: str
    lam_model: str
    loglik: float
    aic: float
    n_params: int
    log_base: float | None
    confidence: float
    moments: Moments = field(repr=False)
    missing_species: tuple = ()
    pruned_tips: tuple = ()
    note: str = ""
    slope_gap_low: float = field(default=math.nan, compare=False)
    slope_gap_high: float = field(default=math.nan, compare=False)
    slope_profile: SlopeProfile | None = field(default=None, repr=False, compare=False)

    @property
    def b(self) -> float:
        return self.slope

    @property
    def estimable(self) -> bool:
        return bool(np.isfinite(self.slope))

    def test_slope(self, exponent: float, *, hypothesis: str = "") -> SlopeTest:
        """Test slope = ``exponent`` with the tests of :mod:`scaling.stats.lines` on the
        phylogenetic moments (t on n - 2 df; the slope interval is its inversion);
        PGLS with lambda estimated: the profile test over lambda, as a t on n - 2 df."""
        if isinstance(exponent, bool) or not isinstance(exponent, (int, float, np.floating)):
            raise ConfigError(f"exponent must be a number, not {exponent!r}")
        b0 = float(exponent)
        if self.estimable and self.slope_profile is not None:
            t, df, p = (float(v) for v in profile_test(self.slope_profile, self.slope, b0))
        elif self.estimable:
            t, df, p = (float(v) for v in slope_test_statistic(self.moments, self.method, b0))
        else:
            t, df, p = math.nan, float(self.df), math.nan
        return SlopeTest(method=self.method, hypothesis=hypothesis or f"{exponent:g}",
                         exponent=b0, estimate=self.slope, statistic=t, df=df, p_value=p)

    def line_fit(self) -> LineFit:
        """The same line as a :class:`~scaling.stats.line_results.LineFit` (for figures and predictions)."""
        return line_fit_from_moments(self.moments, self.method, confidence=self.confidence,
                                     log_base=self.log_base)

    @property
    def accepted_slopes(self) -> tuple:
        """The slopes :meth:`test_slope` accepts, as one range or two (as
        :attr:`scaling.stats.line_results.LineFit.accepted_slopes`)."""
        return accepted_ranges(self.slope_ci, self.slope_gap_low, self.slope_gap_high)

    def to_record(self) -> dict:
        """One row with the columns of ``fits.csv`` plus lambda, loglik and aic."""
        return {**fit_values(self),
                "lambda": self.lam, "lambda_low": self.lam_ci.low, "lambda_high": self.lam_ci.high,
                "lambda_estimate": self.lam_estimate, "loglik": self.loglik, "aic": self.aic}

    def plot(self, *, ax=None, **style):
        """Draw the phylogenetic line and its band on natural-unit log axes (points
        with ``x=``, ``y=``); returns the Axes (:func:`scaling.render.plots.plot_fit`)."""
        from ..render.plots import plot_fit
        return plot_fit(self, ax=ax, **style)

    def to_frame(self):
        import pandas as pd
        return pd.DataFrame([self.to_record()])

    def __repr__(self) -> str:
        fields = {"method": self.method, "n": self.n, "slope": self.slope,
                  "slope_ci": (float(self.slope_ci.low), float(self.slope_ci.high)),
                  "intercept": self.intercept, "lam": self.lam,
                  "lam_estimate": self.lam_estimate, "log_base": base_label(self.log_base)}
        if self.note:
            fields["note"] = self.note
        return short_repr(self, fields)

    def _repr_html_(self) -> str:
        return frame_html(self.to_frame(), notes=[self.summary()],
                          title=f"phylogenetic {method_label(self.method)} line")

    def summary(self) -> str:
        """A few lines of text describing the fit."""
        from ..render.summaries import phylo_fit_summary
        return phylo_fit_summary(self)


def _species_means(species, X, Y):
    keys = [normalise_name(s) for s in species]
    uniq, first, inv = np.unique(np.asarray(keys, dtype=object), return_index=True,
                                 return_inverse=True)
    order = np.argsort(first)              # unique species in order of first appearance
    rank = np.empty_like(order)
    rank[order] = np.arange(order.size)
    lab = rank[inv]
    cnt = np.bincount(lab)
    return (np.bincount(lab, weights=X) / cnt, np.bincount(lab, weights=Y) / cnt,
            [str(u) for u in uniq[order]])


def _check_lam(lam):
    if isinstance(lam, str):
        if lam.strip().lower() == "ml":
            return "ml"
        raise ConfigError(f"lam must be 'ml' or a number between 0 and 1, not {lam!r}")
    if (isinstance(lam, bool) or not isinstance(lam, (int, float, np.floating))
            or not 0 <= float(lam) <= 1):
        raise ConfigError(f"lam must be 'ml' or a number between 0 and 1, not {lam!r}")
    return float(lam)


def fit_phylo(x, y, tree, species, *, method: str = "ols", lam="ml", reml: bool = False,
              confidence: float = 0.95, log_base=10, reference: bool = False) -> PhyloFit:
    """Fit y = a x^b across species, correcting for shared ancestry.

    Parameters
    ----------
    x, y : array_like
        Positive values in natural units (logs when ``log_base`` is None);
        several rows per species are averaged on the log scale first.
    tree : Tree or str
        A parsed tree, or Newick text.
    species : sequence of str
        Species of each row, matched to tip names (trimmed, ``_`` = space).
    method : {"ols", "sma", "ma"}
        PGLS, phylogenetic SMA or MA.
    lam : "ml" or float in [0, 1]
        Estimate Pagel's lambda (by ML, or REML with ``reml=True``) or fix it.
    reml : bool
        Use the restricted likelihood to estimate lambda (and in ``loglik``).
    confidence : float
        Level of the slope, intercept and lambda intervals.
    log_base : {10, "e", 2, None}
    reference : bool
        Use the dense n x n Cholesky path instead of the O(n) pass (for tests
        and small trees; same optimiser, same formulas).

    Returns
    -------
    PhyloFit

    Raises
    ------
    DataError
        Bad tree, fewer than 3 species with a tip, or bad x/y.
    ConfigError
        Unknown method, bad ``lam`` or ``confidence``.

    Notes
    -----
    Formulas, the lambda design per method and sources are in the module
    docstring.  Species without a tip are dropped and tips without data
    pruned; both lists are kept on the result.
    """
    if method not in METHODS:
        raise ConfigError(f"method must be one of {', '.join(METHODS)}, not {method!r}")
    lam_opt = _check_lam(lam)
    confidence = check_confidence(confidence)
    base = parse_log_base(log_base)
    x, y = validate_xy(x, y, base)
    species = list(species)
    if len(species) != x.size:
        raise DataError(f"species has {len(species)} entries but x and y have {x.size}")
    if isinstance(tree, str):
        tree = parse_newick(tree)
    if not isinstance(tree, Tree):
        raise ConfigError(f"tree must be a Tree or Newick text, not {type(tree).__name__}")
    X, Y, names = _species_means(species, to_log(x, base), to_log(y, base))
    match = match_species(names, tree)
    has = match.tip_of_species >= 0
    if np.count_nonzero(has) < 3:
        raise DataError(f"only {np.count_nonzero(has)} species match a tip of tree "
                        f"{tree.source}; at least 3 are needed"
                        + (f" (unmatched: {', '.join(match.missing_species[:5])})"
                           if match.missing_species else ""))
    tips_old = match.tip_of_species[has]
    X, Y = X[has], Y[has]
    pruned = prune_tree(tree, tips_old)
    # map old tip node -> new tip node via names (pruning keeps tip names)
    new_index = {normalise_name(pruned.names[t]): int(t) for t in pruned.tips}
    tips_new = np.array([new_index[normalise_name(tree.names[t])] for t in tips_old])
    plan = PhyloPlan.from_tree(pruned, tips_new)
    n = plan.n
    values = np.column_stack([X, Y])
    model = _model_of(method)

    v1 = _dense_cov(pruned, tips_new) if reference else None

    def run(lams) -> PassResult:
        if not reference:
            return phylo_pass(plan, values, lams)
        parts = [_dense_pass(v1, values, t) for t in np.atleast_1d(lams)]
        return PassResult(**{key: np.concatenate([getattr(r, key) for r in parts])
                             for key in ("logdet", "sum_w", "mean", "css")})

    def ll_of(lams):
        return phylo_loglik(run(lams), n, model=model, reml=reml)

    def loglik(t):
        return float(ll_of([t])[0])

    if lam_opt == "ml":
        grid_values = ll_of(_GRID)
        lam_hat, ll_hat = _maximise(loglik, grid_values, ll_of)
        lam_ci = _profile_interval(loglik, lam_hat, ll_hat, confidence, grid_values)
        estimate = "reml" if reml else "ml"
    else:
        lam_hat = lam_opt
        ll_hat = loglik(lam_hat)
        lam_ci = ConfidenceInterval(math.nan, math.nan)
        estimate = "fixed"
    m = _moments_from_pass(run([lam_hat]), n)
    k = (3 if model == "regression" else 5) + (estimate != "fixed")
    res = fit_moments(m, method, confidence=confidence)
    f = {key: (v.item() if isinstance(v, np.ndarray) else v) for key, v in res.items()}
    note = str(np.asarray(f["note"]).reshape(-1)[0])
    prof = None
    if method == "ols" and estimate != "fixed" and np.isfinite(f["slope"]):
        # lambda's uncertainty enters the slope interval through the profile over lambda
        parts = [run(PROFILE_GRID[i:i + 17]) for i in range(0, PROFILE_GRID.size, 17)]
        prof = slope_profile(np.concatenate([r.logdet for r in parts]),
                             np.concatenate([r.sum_w for r in parts]),
                             np.concatenate([r.css for r in parts]), n, reml=reml)
        lo, hi = profile_interval(prof, f["slope"], f["slope_se"], confidence)
        f["slope_low"], f["slope_high"] = float(lo), float(hi)
    return PhyloFit(
        method=method, n=n, slope=float(f["slope"]),
        slope_ci=ConfidenceInterval(float(f["slope_low"]), float(f["slope_high"])),
        slope_se=float(f["slope_se"]), intercept=float(f["intercept"]),
        intercept_ci=ConfidenceInterval(float(f["intercept_low"]), float(f["intercept_high"])),
        intercept_se=float(f["intercept_se"]), r=float(f["r"]), r2=float(f["r2"]),
        resid_sd=float(f["resid_sd"]), df=float(f["df"]), lam=float(lam_hat), lam_ci=lam_ci,
        lam_estimate=estimate, lam_model=model, loglik=float(ll_hat), note=note,
        aic=float(-2 * ll_hat + 2 * k), n_params=k, log_base=base, confidence=confidence,
        moments=m, missing_species=match.missing_species, pruned_tips=match.pruned_tips,
        slope_gap_low=float(f["slope_gap_low"]), slope_gap_high=float(f["slope_gap_high"]),
        slope_profile=prof)
