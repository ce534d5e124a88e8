"""Other evolutionary models for the phylogenetic line, the lambda tests, and sampling error.

Every model here is a transform of the tree's branch lengths, so its
likelihood comes from the same O(n) pass as Pagel's lambda
(:func:`scaling.stats.phylogeny.pass_with_lengths`); the regression and
bivariate profile likelihoods are those of
:func:`scaling.stats.phylogeny.phylo_loglik` (the residual variance, the
intercept and the slope are profiled out, so only the transform's parameter
is searched).

Models (h = distance of a node from the root, T = the tips' height)
--------------------------------------------------------------------
``brownian``  the tree as given (Felsenstein 1985, Am. Nat. 125:1).
``lambda``    Pagel's lambda in [0, 1] (Pagel 1999, Nature 401:877), as in
              :mod:`scaling.stats.phylogeny`.
``kappa``     Pagel's kappa in [0, 3]: every branch length b -> b^kappa
              (Pagel 1994, Proc. R. Soc. B 255:37); kappa = 0 is a
              speciational model (every branch counts one).  Zero-length
              branches stay zero.
``delta``     Pagel's delta in [0.05, 3]: node heights h -> h^delta, so a
              branch from h_p to h_c becomes h_c^delta - h_p^delta (Pagel
              1999); delta < 1 puts change early, delta > 1 late.  The lower
              bound keeps the covariance away from singular.
``ou``        Ornstein-Uhlenbeck with one optimum, the root at the optimum
              and rate of attraction alpha in [0, 50/T] (Hansen 1997,
              Evolution 51:1341; Butler & King 2004, Am. Nat. 164:683):
              V_ij = exp(-alpha (t_i + t_j - 2 t_ij)) (1 - exp(-2 alpha t_ij)) / (2 alpha),
              t_ij the height of the common ancestor.  On an ultrametric
              tree (t_i = T for all tips) this is g(t_ij) with g increasing,
              g(h) = exp(-2 alpha (T - h)) (1 - exp(-2 alpha h)) / (2 alpha), so
              the node heights h -> g(h) give the OU covariance exactly; a
              branch becomes exp(-2 alpha (T - h_c)) (1 - exp(-2 alpha (h_c - h_p))) / (2 alpha)
              (written so that it does not cancel at small alpha; alpha -> 0
              is Brownian motion).  On a tree that is not ultrametric the OU
              covariance is not a tree, so the OU model is not fitted
              (:data:`OU_NOT_ULTRAMETRIC`).
``independent`` lambda = 0 (a star tree with the tips' heights).

Each estimated parameter is searched on [low, high] by evaluating a grid in
one pass and refining the best grid point by a bounded scalar search between
its neighbours.  Models are compared by AICc = AIC + 2k(k + 1)/(n - k - 1)
(Hurvich & Tsai 1989, Biometrika 76:297), k counting the intercept, slope,
rate and the transform's parameter (regression likelihood; the bivariate
likelihood counts two means and three rates).

Tests of lambda
---------------
The likelihood-ratio statistics 2 (l(lambda-hat) - l(lambda0)) for
lambda0 = 0 and 1 are referred to chi2 with 1 df.  Both nulls lie on the
boundary of [0, 1], where the statistic's null distribution is the 50:50
mixture of chi2_0 and chi2_1 (Self & Liang 1987, JASA 82:605), so the
chi2_1 p-value is conservative (twice the mixture's); it is the one
reported, as is common practice.

Sampling error (Ives, Midford & Garland 2007, Syst. Biol. 56:252)
-------------------------------------------------------------------
A species mean of n_i individuals carries sampling variance s^2/n_i, s^2
the pooled within-species variance of log y.  The covariance of the species
means becomes sigma^2 C_lambda + D, D = diag(s^2/n_i), which is no longer
proportional to a tree with a free rate; but for a given sigma^2 it is
sigma^2 times the tree with every tip branch lengthened by s^2/(n_i sigma^2).
So the likelihood
    l = -1/2 [n log 2pi + n log sigma^2 + log|C_lambda + D/sigma^2| + RSS/sigma^2]
(RSS the GLS residual sum of squares in the (C_lambda + D/sigma^2)^-1 metric)
still costs one O(n) pass per (lambda, sigma^2); sigma^2 is no longer
profiled in closed form and is searched with lambda (a grid in one pass,
then a bounded quasi-Newton refinement).  Only the y means carry error
here (x measured well, as in the regression model); D is taken as known.
The slope's standard error is sqrt(sigma^2 / Sxx) at the estimate, with
Sxx in the (C_lambda + D/sigma^2)^-1 metric (the GLS variance with the
covariance fixed at its estimate), on n - 2 df.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from . import tails

from .phylogeny import PassResult, PhyloPlan, Tree, _heights, pass_with_lengths, phylo_loglik

__all__ = ["MODELS", "OU_NOT_ULTRAMETRIC", "branch_heights", "is_ultrametric",
           "model_lengths", "transform_tree", "ModelFit", "fit_model", "compare_models", "LambdaTests",
           "lambda_tests", "aicc", "SamplingErrorFit", "pooled_within_variance",
           "fit_sampling_error", "sampling_error_loglik"]

# name -> (parameter name, low, high); the OU bound is in units of 1/T
MODELS = {
    "lambda": ("lambda", 0.0, 1.0),
    "brownian": ("", math.nan, math.nan),
    "independent": ("", math.nan, math.nan),
    "ou": ("alpha", 0.0, 50.0),
    "kappa": ("kappa", 0.0, 3.0),
    "delta": ("delta", 0.05, 3.0),
}
OU_NOT_ULTRAMETRIC = "tree not ultrametric: OU covariance is not a tree"
_GRID_SIZE = 13


def branch_heights(plan: PhyloPlan) -> tuple:
    """Heights (distance from the root) of each branch's child and parent, in plan order."""
    h = np.zeros(plan.n_nodes)
    for sl, _, _ in reversed(plan.levels):   # top level first: parents before children
        c = slice(sl.start + 1, sl.stop + 1)
        h[c] = h[plan.parent_of_child[sl]] + plan.length[sl]
    return h[1:], h[plan.parent_of_child]


def is_ultrametric(plan: PhyloPlan, rtol: float = 1e-4) -> bool:
    """True when every tip lies at the same height (relative tolerance ``rtol``: Newick
    lengths rounded to a few decimals leave tips a little apart)."""
    tip_h = branch_heights(plan)[0][plan.tips - 1]
    return bool(np.ptp(tip_h) <= rtol * max(float(np.max(tip_h)), 1e-300))


def model_lengths(plan: PhyloPlan, model: str, params) -> np.ndarray:
    """Branch lengths (n_nodes - 1, L) of ``model`` at each value in ``params``.

    ``params`` is ignored for ``brownian`` and ``independent``; for ``ou``
    it is alpha times the tips' height (dimensionless).
    """
    p = np.atleast_1d(np.asarray(params, dtype=float))[None, :]
    b = plan.length[:, None]
    th = plan.tip_height[:, None]
    if model == "brownian":
        return b.copy()
    if model == "independent":
        return np.where(th > 0, th, 0.0)
    if model == "lambda":
        return b * p + th * (1 - p)
    if model == "kappa":
        with np.errstate(divide="ignore"):
            return np.where(b > 0, np.power(np.where(b > 0, b, 1.0), p), 0.0)
    hc, hp = (a[:, None] for a in branch_heights(plan))
    if model == "delta":
        return np.power(hc, p) - np.power(hp, p)
    if model == "ou":
        T = float(np.max(hc))
        alpha = p / T
        small = alpha < 1e-12 / T
        a = np.where(small, 1.0, alpha)
        ou = np.exp(-2 * a * (T - hc)) * -np.expm1(-2 * a * (hc - hp)) / (2 * a)
        return np.where(small, b, ou)
    raise ValueError(f"unknown model {model!r}")


def transform_tree(tree: Tree, model: str, estimate: float) -> Tree:
    """The tree with its branch lengths transformed by ``model`` at ``estimate``.

    ``estimate`` as on :class:`ModelFit` (for ``ou`` alpha in 1/height units;
    ignored for ``brownian`` and ``independent``).  The same transforms as
    :func:`model_lengths`, on the tree's own arrays: Brownian GLS on the result
    (lambda = 1) is GLS under the model.
    """
    h = _heights(tree.parent, tree.length)
    hp = h[np.maximum(tree.parent, 0)]
    b = tree.length
    tip_h = np.where(tree.is_tip, h, 0.0)
    if model in ("brownian",) or (model != "independent" and not np.isfinite(estimate)):
        new = b.copy()
    elif model == "independent":
        new = tip_h
    elif model == "lambda":
        new = b * estimate + tip_h * (1 - estimate)
    elif model == "kappa":
        new = np.where(b > 0, np.power(np.where(b > 0, b, 1.0), estimate), 0.0)
    elif model == "delta":
        new = np.power(h, estimate) - np.power(hp, estimate)
    elif model == "ou":
        T = float(np.max(h))
        a = float(estimate)
        new = (b.copy() if a * T < 1e-12 else
               np.exp(-2 * a * (T - h)) * -np.expm1(-2 * a * (h - hp)) / (2 * a))
    else:
        raise ValueError(f"unknown model {model!r}")
    new = np.asarray(new, dtype=float).copy()
    new[0] = 0.0
    return Tree(parent=tree.parent, length=new, names=tree.names, is_tip=tree.is_tip,
                source=tree.source, offsets=tree.offsets)


def aicc(loglik, k: int, n: int):
    """AICc = -2 l + 2k + 2k(k + 1)/(n - k - 1) (infinite when n <= k + 1)."""
    corr = 2 * k * (k + 1) / (n - k - 1) if n - k - 1 > 0 else math.inf
    return -2 * np.asarray(loglik) + 2 * k + corr


@dataclass(frozen=True, slots=True, kw_only=True)
class ModelFit:
    """One evolutionary model fitted to the phylogenetic line.

    ``parameter`` is the transform's parameter name (blank when none) and
    ``estimate`` its value (for ``ou``: alpha in 1/height units, and
    ``half_life`` = log 2 / alpha); ``slope``, ``slope_se``, ``intercept``
    are the GLS (regression) or bivariate-moment values at the estimate;
    ``note`` says why a model was not fitted (numbers NaN).
    """

    model: str
    parameter: str
    estimate: float
    loglik: float
    k: int
    n: int
    aic: float
    aicc: float
    slope: float
    slope_se: float
    intercept: float
    half_life: float = math.nan
    note: str = ""


def _loglik_of(plan, values, model, params, likelihood, reml):
    res = pass_with_lengths(plan, values, model_lengths(plan, model, params))
    return phylo_loglik(res, plan.n, model=likelihood, reml=reml), res


def _search(f, low: float, high: float, grid_values, grid):
    """Maximise f on [low, high] from a grid: bounded Brent between the best point's neighbours."""
    i = int(np.nanargmax(grid_values))
    lo, hi = grid[max(i - 1, 0)], grid[min(i + 1, grid.size - 1)]
    from scipy import optimize   # lazy: only the phylogeny road

    r = optimize.minimize_scalar(lambda t: -f(t), bounds=(lo, hi), method="bounded",
                                 options={"xatol": 1e-10 * max(1.0, high - low)})
    best, val = (float(r.x), -float(r.fun))
    if grid_values[i] > val:      # the grid point itself (e.g. on the boundary)
        best, val = float(grid[i]), float(grid_values[i])
    return best, val


def fit_model(plan: PhyloPlan, X, Y, model: str, *, likelihood: str = "regression",
              reml: bool = False) -> ModelFit:
    """Fit one evolutionary model (module docstring) by its O(n) likelihood.

    Parameters
    ----------
    plan : PhyloPlan
        The tree, tips in data order.
    X, Y : array_like
        Log x and log y per tip.
    model : str
        A key of :data:`MODELS`.
    likelihood : {"regression", "bivariate"}
    reml : bool

    Returns
    -------
    ModelFit
    """
    if model not in MODELS:
        raise ValueError(f"unknown model {model!r}")
    values = np.column_stack([X, Y])
    name, low, high = MODELS[model]
    n = plan.n
    k0 = 3 if likelihood == "regression" else 5
    if model == "ou" and not is_ultrametric(plan):
        nan = math.nan
        return ModelFit(model=model, parameter=name, estimate=nan, loglik=nan, k=k0 + 1, n=n,
                        aic=nan, aicc=nan, slope=nan, slope_se=nan, intercept=nan,
                        note=OU_NOT_ULTRAMETRIC)
    if name:
        grid = (np.r_[0.0, np.geomspace(0.05, high, _GRID_SIZE - 1)] if model == "ou"
                else np.linspace(low, high, _GRID_SIZE))
        ll_grid, _ = _loglik_of(plan, values, model, grid, likelihood, reml)

        def f(t):
            return float(_loglik_of(plan, values, model, [t], likelihood, reml)[0][0])

        est, ll = _search(f, low, high, ll_grid, grid)
        k = k0 + 1
    else:
        est, k = math.nan, k0
        ll = float(_loglik_of(plan, values, model, [1.0], likelihood, reml)[0][0])
    _, res = _loglik_of(plan, values, model, [0.0 if math.isnan(est) else est],
                        likelihood, reml)
    slope, se, icpt = _gls_line(res, n)
    if model == "ou":
        T = float(np.max(branch_heights(plan)[0]))
        alpha = est / T
        half = math.log(2) / alpha if alpha > 0 else math.inf
        est_out = alpha
    else:
        half, est_out = math.nan, est
    return ModelFit(model=model, parameter=name, estimate=float(est_out), loglik=float(ll), k=k,
                    n=n, aic=float(-2 * ll + 2 * k), aicc=float(aicc(ll, k, n)), slope=slope,
                    slope_se=se, intercept=icpt, half_life=float(half))


def _gls_line(res: PassResult, n: int) -> tuple:
    """GLS slope, its standard error (s^2 = RSS/(n - 2)) and intercept from one pass entry."""
    sxx, syy, sxy = (float(res.css[0, i, j]) for i, j in ((0, 0), (1, 1), (0, 1)))
    mx, my = float(res.mean[0, 0]), float(res.mean[0, 1])
    b = sxy / sxx
    s2 = (syy - b * sxy) / (n - 2)
    return b, math.sqrt(max(s2, 0.0) / sxx), my - b * mx


def compare_models(plan: PhyloPlan, X, Y, *, models=("lambda", "brownian", "independent",
                                                     "ou", "kappa", "delta"),
                   likelihood: str = "regression", reml: bool = False) -> tuple:
    """Fit each model; returns a tuple of :class:`ModelFit` in ``models`` order.

    Compare them by ``aicc`` (smaller is better); a model with a ``note`` was
    not fitted.
    """
    return tuple(fit_model(plan, X, Y, m, likelihood=likelihood, reml=reml) for m in models)


@dataclass(frozen=True, slots=True, kw_only=True)
class LambdaTests:
    """Likelihood-ratio tests of lambda = 0 and lambda = 1 against lambda-hat (chi2, 1 df)."""

    lam: float
    loglik: float
    stat_0: float
    p_0: float
    stat_1: float
    p_1: float


def lambda_tests(plan: PhyloPlan, X, Y, lam_hat: float, ll_hat: float, *,
                 likelihood: str = "regression", reml: bool = False) -> LambdaTests:
    """LR tests of lambda = 0 and 1 given the fitted lambda-hat and its log-likelihood.

    The statistics are clipped at 0 (lambda-hat maximises over [0, 1], so a
    negative value is only rounding).  p-values from chi2_1: conservative on
    the boundary (module docstring).
    """
    values = np.column_stack([X, Y])
    ll, _ = _loglik_of(plan, values, "lambda", [0.0, 1.0], likelihood, reml)
    s0, s1 = (max(0.0, 2 * (ll_hat - float(v))) for v in ll)
    return LambdaTests(lam=float(lam_hat), loglik=float(ll_hat), stat_0=s0,
                       p_0=float(tails.chi2_upper(s0, 1)), stat_1=s1,
                       p_1=float(tails.chi2_upper(s1, 1)))


# --------------------------------------------------------------------------
# sampling error


def pooled_within_variance(unit_codes, log_y) -> tuple:
    """Pooled within-unit variance of log y and its degrees of freedom.

    s^2 = sum_i sum_j (y_ij - ybar_i)^2 / sum_i (n_i - 1), over units with
    at least two rows (df 0 and NaN when there is none).
    """
    codes = np.asarray(unit_codes)
    y = np.asarray(log_y, dtype=float)
    cnt = np.bincount(codes)
    mean = np.bincount(codes, weights=y) / np.maximum(cnt, 1)
    ss = float(np.sum((y - mean[codes]) ** 2))
    df = int(np.sum(np.maximum(cnt - 1, 0)))
    return (ss / df if df > 0 else math.nan), df


def _error_lengths(plan: PhyloPlan, lams, extra, sig2) -> np.ndarray:
    """Lambda-transformed lengths with tip branches lengthened by extra / sigma^2 (one column
    per (lambda, sigma^2) pair)."""
    blen = model_lengths(plan, "lambda", lams)
    add = np.zeros_like(blen)
    add[plan.tips - 1] = np.asarray(extra, dtype=float)[:, None] / np.asarray(sig2)[None, :]
    return blen + add


def sampling_error_loglik(plan: PhyloPlan, X, Y, extra, lams, sig2) -> np.ndarray:
    """Log-likelihood of the regression with covariance sigma^2 C_lambda + diag(extra),
    profiled over intercept and slope, for each (lambda, sigma^2) pair (vectorised).

    ``X``, ``Y`` may carry a replicate axis: shape (n,) or (n, B); the result
    is (L,) or (L, B).
    """
    lams = np.atleast_1d(np.asarray(lams, dtype=float))
    sig2 = np.broadcast_to(np.atleast_1d(np.asarray(sig2, dtype=float)), lams.shape)
    X, Y = np.asarray(X, dtype=float), np.asarray(Y, dtype=float)
    values = np.stack([X, Y], axis=-1)
    res = pass_with_lengths(plan, values, _error_lengths(plan, lams, extra, sig2))
    sxx, syy, sxy = res.css[..., 0, 0], res.css[..., 1, 1], res.css[..., 0, 1]
    rss = syy - sxy * sxy / sxx
    extra_dims = (1,) * (rss.ndim - 1)
    logdet = res.logdet.reshape(-1, *extra_dims)
    s2 = sig2.reshape(-1, *extra_dims)
    n = plan.n
    return -0.5 * (n * math.log(2 * math.pi) + n * np.log(s2) + logdet + rss / s2)


@dataclass(frozen=True, slots=True, kw_only=True)
class SamplingErrorFit:
    """PGLS with within-species sampling error (Ives, Midford & Garland 2007).

    ``s2`` the pooled within-species variance used (``extra`` = s2/n_i per
    species); ``sigma2`` the Brownian rate; ``lam`` lambda (estimated or
    fixed); ``loglik`` at the estimate (ML); ``slope_se`` as in the module
    docstring, ``df`` = n - 2.
    """

    n: int
    slope: float
    slope_se: float
    intercept: float
    lam: float
    sigma2: float
    s2: float
    loglik: float
    df: int


def fit_sampling_error(plan: PhyloPlan, X, Y, extra, *, lam="ml", s2: float = math.nan
                       ) -> SamplingErrorFit:
    """PGLS with covariance sigma^2 C_lambda + diag(extra), by ML over (lambda, sigma^2).

    Parameters
    ----------
    plan : PhyloPlan
    X, Y : array_like
        Species means of log x and log y, in ``plan.tips`` order.
    extra : array_like
        Sampling variance of each species mean of log y (s^2 / n_i).
    lam : "ml" or float
        Estimate lambda in [0, 1] or hold it fixed.
    s2 : float
        The pooled within-species variance (recorded on the result).
    """
    X, Y = np.asarray(X, dtype=float), np.asarray(Y, dtype=float)
    extra = np.asarray(extra, dtype=float)
    # starting scale: the rate of the plain Brownian fit
    res0 = pass_with_lengths(plan, np.column_stack([X, Y]), model_lengths(plan, "lambda", [1.0]))
    sxx, syy, sxy = (float(res0.css[0, i, j]) for i, j in ((0, 0), (1, 1), (0, 1)))
    s0 = max((syy - sxy * sxy / sxx) / plan.n, 1e-300)
    lam_grid = np.linspace(0, 1, 11) if lam == "ml" else np.array([float(lam)])
    sig_grid = s0 * np.geomspace(1e-3, 10, 13)
    L, S = (a.ravel() for a in np.meshgrid(lam_grid, sig_grid, indexing="ij"))
    # the grid in chunks of 16 columns: memory O(16 n), one pass each
    ll = np.concatenate([sampling_error_loglik(plan, X, Y, extra, L[i:i + 16], S[i:i + 16])
                         for i in range(0, L.size, 16)])
    i = int(np.nanargmax(ll))
    start = np.array([L[i], math.log(S[i])])

    def neg(p):
        lam_v = p[0] if lam == "ml" else float(lam)
        return -float(sampling_error_loglik(plan, X, Y, extra, [lam_v], [math.exp(p[1])])[0])

    bounds = [(0.0, 1.0) if lam == "ml" else (float(lam), float(lam)), (None, None)]
    from scipy import optimize   # lazy: only the phylogeny road

    r = optimize.minimize(neg, start, method="L-BFGS-B", bounds=bounds,
                          options={"ftol": 1e-13, "gtol": 1e-9})
    p = r.x if r.fun <= -ll[i] else start
    lam_hat = float(p[0]) if lam == "ml" else float(lam)
    sig2 = math.exp(float(p[1]))
    res = pass_with_lengths(plan, np.column_stack([X, Y]),
                            _error_lengths(plan, [lam_hat], extra, [sig2]))
    sxx, syy, sxy = (float(res.css[0, i, j]) for i, j in ((0, 0), (1, 1), (0, 1)))
    b = sxy / sxx
    return SamplingErrorFit(n=plan.n, slope=b, slope_se=math.sqrt(sig2 / sxx),
                            intercept=float(res.mean[0, 1]) - b * float(res.mean[0, 0]),
                            lam=lam_hat, sigma2=sig2, s2=float(s2), loglik=-float(neg(p)),
                            df=plan.n - 2)
