"""The PGLS slope's profile likelihood over Pagel's lambda (interval and test).

With lambda estimated, the t interval at lambda-hat treats lambda as known
and is too narrow (at 64 tips and lambda = 0.5 it covers about 0.93).  The
slope interval of :func:`scaling.stats.phylogeny.fit_phylo` (method ``ols``,
``lam="ml"``) is instead the profile-likelihood interval (Pawitan 2001, *In
All Likelihood*, Oxford, sections 2.4 and 3.4): the set of slopes b0 whose
likelihood, maximised over lambda and the other parameters, is close enough
to the overall maximum; lambda's uncertainty enters through that
maximisation.  The PGLS likelihood with lambda is Revell's (2010, Methods
Ecol. Evol. 1:319).

For a fixed slope b0 the residual r = Y - b0 X follows r = a + e,
e ~ N(0, s^2 V_lambda); profiled over a and s^2 its log-likelihood is, up to
constants,

    ML    f(lambda, b0) = -1/2 [log|V| + n log RSS0]
    REML  f(lambda, b0) = -1/2 [log|V| + log(1'V^-1 1 Sxx) + (n - 2) log RSS0]

with RSS0 = Syy - 2 b0 Sxy + b0^2 Sxx, the centred sums in the V_lambda^-1
metric (at b0 = b-hat(lambda) these are the regression likelihoods of
:func:`scaling.stats.phylogeny.phylo_loglik`; the REML form is that
restricted likelihood with the residual sum of squares taken at b0).  The
profile is l(b0) = max over lambda in [0, 1] of f(lambda, b0), and
D(b0) = 2 (max l - l(b0)).

Calibration.  With lambda held fixed, D(b0) = m log(1 + t^2/(n - 2)), t the
usual PGLS t statistic and m = n (ML) or n - 2 (REML); the interval
{b0 : D(b0) <= m log(1 + t_{n-2}^2/(n - 2))} is then exactly the t
interval.  The same cut is used with lambda free, so the interval reduces
to the familiar one when lambda is known and widens by what lambda's
freedom adds (a Bartlett-type small-sample calibration of Wilks' chi2_1
cut, which on its own would be slightly liberal at small n).  The slope
test inverts the same statistic: t_eq = sign(b-hat - b0)
sqrt((n - 2)(exp(D/m) - 1)) on n - 2 df.

Computation.  One O(n) pass per lambda gives log|V|, 1'V^-1 1 and the
centred sums (:func:`scaling.stats.phylogeny.phylo_pass`); f is then a
closed form in b0 for all lambdas at once.  The maximum over lambda is
taken on a grid of 101 values with parabolic refinement through the best
grid point and its neighbours (checked against a bounded scalar search on
the dense likelihood in tests/test_phylo.py).  Interval bounds are found by
bisection outward from the estimate, vectorised over data sets.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
from . import tails
from .roots import brent_root

from .line_results import ConfidenceInterval

__all__ = ["PROFILE_GRID", "SlopeProfile", "slope_profile", "profile_deviance",
           "profile_cut", "profile_interval", "profile_test"]

PROFILE_GRID = np.linspace(0.0, 1.0, 101)
_GRID = np.linspace(0.0, 1.0, 11)      # the grid that starts the search for lambda-hat


@dataclass(frozen=True, slots=True, kw_only=True)
class SlopeProfile:
    """What the profile over lambda needs, per grid lambda (axis 0) and data set.

    ``logdet``, ``sum_w`` (L,); ``sxx``, ``sxy``, ``syy`` (L,) or (L, B):
    unscaled pass quantities on :data:`PROFILE_GRID`; ``n`` species;
    ``reml`` the likelihood form; ``l_max`` the profile's maximum, (B,) or ().
    """

    logdet: np.ndarray
    sum_w: np.ndarray
    sxx: np.ndarray
    sxy: np.ndarray
    syy: np.ndarray
    n: int
    reml: bool
    l_max: np.ndarray


def _m(n: int, reml: bool) -> int:
    return n - 2 if reml else n


def _grid_max(f: np.ndarray) -> np.ndarray:
    """Maximum over axis 0 (the lambda grid): best grid value, refined by the
    vertex of the parabola through it and its neighbours when that is higher."""
    L = f.shape[0]
    j = np.argmax(f, axis=0)
    best = np.take_along_axis(f, j[None], axis=0)[0]
    jc = np.clip(j, 1, L - 2)
    a = np.take_along_axis(f, (jc - 1)[None], axis=0)[0]
    c = np.take_along_axis(f, jc[None], axis=0)[0]
    d = np.take_along_axis(f, (jc + 1)[None], axis=0)[0]
    curv = a - 2 * c + d
    with np.errstate(divide="ignore", invalid="ignore"):
        delta = (a - d) / (2 * curv)
        vertex = c - (a - d) * delta / 4
    ok = (curv < 0) & (np.abs(delta) <= 1) & np.isfinite(vertex)
    return np.where(ok, np.maximum(best, vertex), best)


def _f_each(prof: SlopeProfile, b0) -> np.ndarray:
    """f(lambda, b0) on the grid, shape (L, ...); ``b0`` broadcasts against (L, ...)."""
    rss0 = prof.syy - 2 * b0 * prof.sxy + b0 * b0 * prof.sxx
    extra = (1,) * (np.ndim(rss0) - 1)
    logdet = prof.logdet.reshape(-1, *extra)
    with np.errstate(divide="ignore", invalid="ignore"):
        if prof.reml:
            adj = np.log(prof.sum_w.reshape(-1, *extra) * prof.sxx)
            return -0.5 * (logdet + adj + (prof.n - 2) * np.log(rss0))
        return -0.5 * (logdet + prof.n * np.log(rss0))


def _f(prof: SlopeProfile, b0) -> np.ndarray:
    """f(lambda, b0) for one b0 per data set (or one for all)."""
    return _f_each(prof, np.asarray(b0, dtype=float)[None])


def slope_profile(logdet, sum_w, css, n: int, *, reml: bool = False) -> SlopeProfile:
    """Build the profile from pass quantities on :data:`PROFILE_GRID`.

    Parameters
    ----------
    logdet, sum_w : array_like, shape (L,)
    css : array_like, shape (L, 2, 2) or (L, B, 2, 2)
        Centred sums of (X, Y) in the V^-1 metric (unscaled).
    n : int
    reml : bool
        Profile the restricted (True) or the ordinary likelihood.
    """
    css = np.asarray(css, dtype=float)
    sxx, sxy, syy = css[..., 0, 0], css[..., 0, 1], css[..., 1, 1]
    prof = SlopeProfile(logdet=np.asarray(logdet, float), sum_w=np.asarray(sum_w, float),
                        sxx=sxx, sxy=sxy, syy=syy, n=int(n), reml=bool(reml),
                        l_max=np.zeros(sxx.shape[1:]))
    # at each lambda f is largest at the GLS slope Sxy/Sxx (RSS0 = RSS there)
    with np.errstate(divide="ignore", invalid="ignore"):
        b_hat = sxy / sxx
        f_hat = _f_each(prof, b_hat)
    return SlopeProfile(logdet=prof.logdet, sum_w=prof.sum_w, sxx=sxx, sxy=sxy, syy=syy,
                        n=prof.n, reml=prof.reml, l_max=_grid_max(f_hat))


def profile_deviance(prof: SlopeProfile, b0) -> np.ndarray:
    """D(b0) = 2 (max l - l(b0)) >= 0; b0 scalar or one per data set."""
    return np.maximum(2 * (prof.l_max - _grid_max(_f(prof, b0))), 0.0)


def profile_cut(n: int, confidence: float, *, reml: bool = False) -> float:
    """m log(1 + t^2/(n - 2)), t the two-sided ``confidence`` quantile on n - 2 df."""
    t = tails.t_quantile(0.5 + confidence / 2, n - 2)
    return float(_m(n, reml) * np.log1p(t * t / (n - 2)))


def profile_interval(prof: SlopeProfile, estimate, scale, confidence: float):
    """Bounds {b0 : D(b0) <= cut}, by bisection outward from ``estimate``.

    ``scale`` (e.g. the slope's standard error at lambda-hat) sets the first
    step.  Returns (low, high), arrays shaped like ``estimate``.
    """
    cut = profile_cut(prof.n, confidence, reml=prof.reml)
    est = np.asarray(estimate, dtype=float)
    step = np.where(np.isfinite(scale) & (np.asarray(scale) > 0), scale, 1.0) * 3.0
    out = []
    for sign in (-1.0, 1.0):
        inner = est.copy()
        outer = est + sign * step
        far = profile_deviance(prof, outer) > cut
        for _ in range(200):                  # widen until the cut is crossed
            if np.all(far | ~np.isfinite(outer)):
                break
            inner = np.where(far, inner, outer)
            outer = np.where(far, outer, est + 2 * (outer - est))
            far = profile_deviance(prof, outer) > cut
        for _ in range(64):                   # bisection to rounding
            mid = 0.5 * (inner + outer)
            above = profile_deviance(prof, mid) > cut
            outer = np.where(above, mid, outer)
            inner = np.where(above, inner, mid)
        out.append(0.5 * (inner + outer))
    return out[0], out[1]


def profile_test(prof: SlopeProfile, estimate, b0: float):
    """(t_eq, df, p) of slope = b0 from D(b0), calibrated as the interval."""
    d = profile_deviance(prof, b0)
    df = prof.n - 2
    t = np.sign(np.asarray(estimate) - b0) * np.sqrt(df * np.expm1(d / _m(prof.n, prof.reml)))
    return t, float(df), 2 * tails.t_upper(np.abs(t), df)


# --------------------------------------------------------------------------
# lambda-hat and its own profile interval (used by fit_phylo)


_H = 1e-4   # step of the central-difference derivative of the log-likelihood in lambda


def _maximise(loglik: Callable, grid_values: np.ndarray,
              ll_many: Callable) -> tuple[float, float]:
    """Maximise loglik(lam) on [0, 1], starting from its values on ``_GRID``.

    Inside (0, 1) the maximum is the zero of the derivative, found by
    Brent's root search on the central difference (both points in one
    pass via ``ll_many``) between the grid neighbours of the best grid
    point.  The zero of the derivative is determined to about machine
    epsilon / curvature, whereas searching on the function value stops where
    the likelihood is flat to rounding (about sqrt(epsilon)).  When the
    derivative does not change sign there (maximum at or next to 0 or 1),
    bounded Brent search on the value is used and the ends are checked.
    """
    from scipy import optimize   # lazy: only the phylogeny road

    g = int(np.nanargmax(grid_values))
    lo = float(_GRID[max(g - 1, 0)])
    hi = float(_GRID[min(g + 1, _GRID.size - 1)])

    def grad(t):
        a, b = ll_many([t - _H, t + _H])
        return (b - a) / (2 * _H)

    if lo - _H >= 0 and hi + _H <= 1:
        g_lo, g_hi = grad(lo), grad(hi)
        if np.isfinite(g_lo) and np.isfinite(g_hi) and g_lo > 0 > g_hi:
            t = brent_root(grad, lo, hi, xtol=1e-10)
            return float(t), loglik(t)
    r = optimize.minimize_scalar(lambda t: -loglik(t), bounds=(lo, hi), method="bounded",
                                 options={"xatol": 1e-10, "maxiter": 200})
    best_lam, best_ll = float(r.x), float(-r.fun)
    for edge in {lo, hi}:              # bounded Brent never evaluates the ends
        ll = float(grid_values[int(round(edge * (_GRID.size - 1)))])
        if ll > best_ll:
            best_lam, best_ll = float(edge), ll
    return best_lam, best_ll


def _profile_interval(loglik: Callable, lam_hat: float, ll_hat: float,
                      confidence: float, grid_values: np.ndarray) -> ConfidenceInterval:
    """{lambda in [0, 1]: 2 (l_max - l(lambda)) <= chi2_1(confidence)} (Wilks).

    The grid values bracket each crossing of the cut; Brent's root search
    finds it.  A side where the grid never falls below the cut ends at 0 or 1.
    """
    cut = ll_hat - tails.chi2_quantile(confidence, 1) / 2

    def f(t):
        return loglik(t) - cut

    below = grid_values < cut
    left = np.flatnonzero(below & (_GRID < lam_hat))
    right = np.flatnonzero(below & (_GRID > lam_hat))
    if left.size:
        i = int(left[-1])
        low = brent_root(f, _GRID[i], min(_GRID[i + 1], lam_hat), xtol=1e-9)
    else:
        low = 0.0
    if right.size:
        i = int(right[0])
        high = brent_root(f, max(_GRID[i - 1], lam_hat), _GRID[i], xtol=1e-9)
    else:
        high = 1.0
    return ConfidenceInterval(float(low), float(high))
