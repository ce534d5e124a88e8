"""The slope common to several groups: estimation, interval, tests of its value.

Notation: X = log x, Y = log y; for group i of G groups, n_i rows, the
means Xbar_i, Ybar_i and centred sums Sxx_i, Syy_i, Sxy_i come from one
vectorised pass of :func:`scaling.stats.moments.group_moments`; nu_i = n_i - 1.

Comparing SMA or MA lines (Warton & Weber 2002, Biom. J. 44:161;
Warton, Wright, Falster & Westoby 2006, Biol. Rev. 81:259)
------------------------------------------------------------------------
For a slope b define per row the *residual axis* score r = Y - bX and the
*fitted axis* score

* SMA: f = Y + bX.  The SMA slope of a bivariate normal is the b at which
  cov(r, f) = var(Y) - b^2 var(X) = 0;
* MA:  f = X + bY.  cov(r, f) = cov(X,Y)(1 - b^2) + b(var Y - var X) = 0
  exactly at the major-axis slope.

So "group i has slope b" means r and f are uncorrelated in group i, and
(X, Y) -> (r, f) is a linear map with |Jacobian| 2|b| (SMA) or 1 + b^2 (MA).

Likelihood.  We use the likelihood of the centred sums, S_i ~ Wishart(nu_i,
Sigma_i) (the likelihood after the group means are removed, which is why
nu_i = n_i - 1 and not n_i appears).  With Sigma_i diagonal in (r, f)
coordinates and the two variances profiled out (sigma_r^2 = Srr_i(b)/nu_i,
sigma_f^2 = Sff_i(b)/nu_i) the log-likelihood of a common slope is, up to a
constant, -F(b)/2 with

* SMA: F = sum_i nu_i log(q_i + sinh^2(u - m_i)),  u = log|b|,
  m_i = log sqrt(Syy_i/Sxx_i) (the group's own SMA slope), q_i = 1 - r_i^2;
* MA:  F = sum_i nu_i log(q_i + (1 - q_i) sin^2(w - phi_i)),  w = 2 atan(b),
  phi_i = atan2(2 Sxy_i, Sxx_i - Syy_i) (twice the angle of the group's own
  major axis), q_i = 4 det(S_i)/tr(S_i)^2.

(Derivation: Srr Sff = Srf^2 + J^2 det S, so Srr Sff / J^2 = det S/(1 - r_rf^2),
and rewriting with the group's own slope gives the forms above.)  Each term
is smallest (= log q_i) at the group's own slope, so the saturated model
(separate slopes) has F_sep = sum nu_i log q_i and

    LR = F(b_common) - F_sep,  df = G - 1            (Warton & Weber 2002).

The common slope minimises F.  F' changes sign between the smallest and
largest group slopes (every term pulls towards its own slope), so it is found
by a safeguarded Newton iteration on that bracket, vectorised over any number
of datasets at once.  The SMA likelihood depends on |b| only; the sign of the
common SMA slope is the sign of the pooled within-group covariance sum Sxy_i
(a warning is given if a group's correlation has the other sign).  The MA
likelihood cannot tell an axis from its perpendicular (F has period pi in
w); we take the one nearest the pooled within-group major axis.

Interval for the common slope: the profile-likelihood set
{b : F(b) - F(b_hat) <= c} with the small-sample threshold
c = nu log(1 + F_{1-alpha}(1, nu - 1)/(nu - 1)), nu = sum nu_i.  For one group
F(b) - F(b_hat) = -nu log(1 - r_rf^2(b)), so this set is exactly the interval
of Warton et al. (2006) obtained by inverting the correlation test of one
slope; with several groups it is the same rule with pooled degrees of freedom
(our generalisation).  When the tests are bootstrapped (below), c is
replaced by the ``confidence`` quantile of F*(b_hat) - F*(b_hat*) over the
bootstrap replicates, which brings coverage of small, many-group designs
from 0.92 to 0.94-0.96 (docs/group_tests.md).
The standard error of the common slope is from the observed information of
the profile likelihood: var(u) = 2/F''(u_hat) (SMA; var(b) = b^2 var(u)),
var(w) = 2/F''(w_hat) (MA; var(b) = ((1 + b^2)/2)^2 var(w)).

The parametric-bootstrap calibration of the group tests (module
:mod:`scaling.stats.group_comparisons`) also yields the bootstrap profile
statistics that calibrate the common-slope interval and
:meth:`CommonSlope.test_slope`.  :func:`common_slope` calibrates the same way
on its own (:func:`_null_profile`: the same null model, the same draws as
``compare_groups`` with the same seed, so the two give the same interval):
with ``calibration="auto"`` whenever an SMA/MA slope is shared by two or
more groups and the smallest has fewer than ``AUTO_BOOTSTRAP_BELOW`` points.
The F-referred threshold is liberal there: the test of the true common SMA
slope rejects 0.12 (six groups of 6), 0.087 (of 8) and 0.075 (of 10) of the
time at nominal 0.05 (MA: 0.13, 0.09, 0.08); calibrated, 0.049 (of 8) and
0.05 (of 10), and 0.06 (of 6: the null variances come from 5 df each); 2000-
4000 replicates of 39 draws, tests/test_groups.py checks six groups of 8.
With one group the F-referred interval is exact (Warton et al. 2006) and is
kept.

OLS: the common slope of parallel lines
---------------------------------------
b_w = sum Sxy_i/sum Sxx_i with se^2 = RSS_par/(N - G - 1)/sum Sxx_i,
RSS_par = sum Syy_i - (sum Sxy_i)^2/sum Sxx_i (the parallel-lines model of
the analysis of covariance; Sokal & Rohlf, Biometry, 4th ed., 2012, ch. 14).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from . import tails
from .roots import brent_root

from ..errors import ConfigError, DataError
from ._group_common import EXACT_FIT_TOL, check_logs, factorize
from ._profile_grid import grid_values, grid_values_pruned
from .lines import METHODS, exponent_value, fit_notes
from .line_results import ConfidenceInterval, SlopeTest
from .moments import Moments, group_moments
from .schema import DEFAULT_SEED, EXACT_NOTE, check_confidence, check_count, check_method

__all__ = ["CommonSlope", "common_slope", "common_slope_from_moments", "CALIBRATIONS",
           "AUTO_BOOTSTRAP_BELOW"]

#: ``calibration="auto"`` (here and in ``compare_groups``) uses the parametric
#: bootstrap when the smallest compared group has fewer points than this (see
#: docs/group_tests.md for the measured chi-square sizes that set it).
AUTO_BOOTSTRAP_BELOW = 100

#: How :func:`common_slope` calibrates its interval and tests (as ``compare_groups``).
CALIBRATIONS = ("auto", "chi2", "bootstrap")


# --------------------------------------------------------------------------
# the vectorised core for SMA and MA: arrays of shape (M, G)


def _profile_terms(method: str, x, loc, q, nu, order: int = 2, *, first: bool = True):
    """F, F' and F'' of the profile objective at x (shape (M,)), summed over groups
    (``first=False``: F' left out, None in its place)."""
    parts = _profile_parts(method, x, loc, q, nu, value=True, first=order >= 1 and first,
                           second=order >= 2)
    return parts[:order + 1]


def _profile_slopes(method: str, x, loc, q, nu):
    """F' and F'' of the profile objective at x (shape (M,)), without F (which
    Newton steps do not read)."""
    return tuple(_profile_parts(method, x, loc, q, nu, value=False)[1:])


def _nu_sum(nu, term):
    np.multiply(nu, term, out=term)
    return np.sum(term, axis=-1)


def _profile_parts(method: str, x, loc, q, nu, *, value: bool = True, first: bool = True,
                   second: bool = True) -> list:
    """[F, F', F''] at x (shape (M,)) summed over groups; None for a term not asked for.

    Each group's terms, times nu: SMA (t = clip(x - loc, +-100), d = q + sinh(t)^2)
    log d, sinh(2t)/d, (1 + cosh(2t)(2q - 1))/d^2; MA (psi = x - loc, k = 1 - q,
    d = q + k sin(psi)^2) log d, k sin(2 psi)/d, (2k cos(2 psi) d - (k sin(2 psi))^2)/d^2;
    computed in place, operation for operation as written (to the same last bit)."""
    t = np.subtract(x[:, None], loc)
    shape = np.broadcast_shapes(t.shape, np.shape(q), np.shape(nu))
    if t.shape != shape:
        t = np.array(np.broadcast_to(t, shape))
    out = [None, None, None]
    if method == "sma":
        np.clip(t, -100.0, 100.0, out=t)
        d = np.sinh(t)
        np.multiply(d, d, out=d)
        np.add(q, d, out=d)                       # d = q + sinh(t)^2
        if value:
            out[0] = _nu_sum(nu, np.log(d))
        if not (first or second):
            return out
        np.multiply(t, 2, out=t)                  # 2t
        c2 = np.cosh(t) if second else None
        if first:
            g1 = np.sinh(t, out=t)
            np.divide(g1, d, out=g1)
            out[1] = _nu_sum(nu, g1)
        if second:
            w = 2 * q
            np.subtract(w, 1, out=w)
            np.multiply(c2, w, out=c2)
            np.add(c2, 1.0, out=c2)               # 1 + cosh(2t)(2q - 1)
            np.multiply(d, d, out=d)
            np.divide(c2, d, out=c2)
            out[2] = _nu_sum(nu, c2)
        return out
    k = np.subtract(1.0, q)
    s = np.sin(t)
    d = np.multiply(k, s)
    np.multiply(d, s, out=d)
    np.add(q, d, out=d)                           # d = q + (k sin psi) sin psi
    if value:
        out[0] = _nu_sum(nu, np.log(d, out=s))
    if not (first or second):
        return out
    np.multiply(t, 2, out=t)                      # 2 psi
    ks2 = np.sin(t, out=s)
    np.multiply(k, ks2, out=ks2)                  # k sin(2 psi)
    if first:
        g1 = np.divide(ks2, d)
        out[1] = _nu_sum(nu, g1)
    if second:
        c2 = np.cos(t, out=t)
        np.multiply(k, 2, out=k)
        np.multiply(k, c2, out=c2)
        np.multiply(c2, d, out=c2)                # 2k cos(2 psi) d
        np.multiply(ks2, ks2, out=ks2)
        np.subtract(c2, ks2, out=c2)
        np.multiply(d, d, out=d)
        np.divide(c2, d, out=c2)
        out[2] = _nu_sum(nu, c2)
    return out


def _newton_bracketed(method, loc, q, nu, lo, hi, x0, *, iters: int = 80):
    """Root of F' in [lo, hi] (F'(lo) <= 0 <= F'(hi)), Newton with bisection fallback.

    All rows step until every row has converged.  A row whose Newton step returns
    exactly its own x stays there at every later step (the step reads only that
    row's x) and is set aside, so every row ends where stepping all would leave it.
    """
    x = x0.copy()
    rows = None             # the rows still stepped (None: all of them)
    xa, la, ha = x.copy(), lo.copy(), hi.copy()
    L, Q, N = loc, q, np.broadcast_to(nu, np.shape(loc))
    for _ in range(iters):
        g1, g2 = _profile_slopes(method, xa, L, Q, N)
        neg = g1 < 0
        la = np.where(neg, xa, la)
        ha = np.where(neg, ha, xa)
        with np.errstate(divide="ignore", invalid="ignore"):
            xn = xa - g1 / g2
        bad = ~(g2 > 0) | ~(xn >= la) | ~(xn <= ha) | ~np.isfinite(xn)
        xn = np.where(bad, 0.5 * (la + ha), xn)
        done = np.all(np.abs(xn - xa) <= 1e-12 * (1.0 + np.abs(xa)))
        fixed = (xn == xa) & ~bad
        xa = xn
        if done:
            break
        n_fixed = int(np.count_nonzero(fixed))
        if n_fixed and n_fixed * 8 >= xa.size:   # set aside when it shrinks the work
            if rows is None:
                rows = np.arange(xa.size)
            x[rows[fixed]] = xa[fixed]
            keep = ~fixed
            rows = rows[keep]
            xa, la, ha = xa[keep], la[keep], ha[keep]
            L, Q, N = L[keep], Q[keep], N[keep]
    if rows is None:
        return xa
    x[rows] = xa
    return x


def _golden(method, loc, q, nu, lo, hi, *, iters: int = 80):
    """Minimise F on [lo, hi] by golden-section search (rows in parallel)."""
    ratio = (math.sqrt(5) - 1) / 2
    a, b = lo.copy(), hi.copy()
    c = b - ratio * (b - a)
    d = a + ratio * (b - a)
    fc = _profile_terms(method, c, loc, q, nu, order=0)[0]
    fd = _profile_terms(method, d, loc, q, nu, order=0)[0]
    for _ in range(iters):
        left = fc < fd
        b = np.where(left, d, b)
        a = np.where(left, a, c)
        c_new = b - ratio * (b - a)
        d_new = a + ratio * (b - a)
        c, d = c_new, d_new
        fc = _profile_terms(method, c, loc, q, nu, order=0)[0]
        fd = _profile_terms(method, d, loc, q, nu, order=0)[0]
    return 0.5 * (a + b)


def _grid_minimum(method, loc, q, nu, lo, hi, *, points: int = 361):
    """Global minimum of F on [lo, hi] by a grid, then golden section nearby.

    A fine grid is evaluated only where each row's minimum can be
    (:func:`~scaling.stats._profile_grid.grid_values_pruned`, rows in parallel): the
    same argmin as the whole grid, bit for bit.  Under 64 (row, group) terms the
    bound costs more than it saves.
    """
    grid = lo[:, None] + (hi - lo)[:, None] * np.linspace(0.0, 1.0, points)
    if points >= 256 and loc.shape[0] * loc.shape[-1] >= 64:
        values = grid_values_pruned(method, grid, loc, q, nu)
    else:
        values = grid_values(method, grid, loc, q, nu)
    j = np.argmin(values, axis=1)
    step = (hi - lo) / (points - 1)
    centre = grid[np.arange(grid.shape[0]), j]
    x = _golden(method, loc, q, nu, np.maximum(centre - step, lo), np.minimum(centre + step, hi))
    # Golden section compares values of F, which are flat to rounding within about
    # sqrt(eps F / F'') of the minimum (1e-9 here); Newton steps on F' finish the job.
    for _ in range(3):
        g1, g2 = _profile_slopes(method, x, loc, q, nu)
        with np.errstate(divide="ignore", invalid="ignore"):
            dx = -g1 / g2
        x = np.where((g2 > 0) & np.isfinite(dx) & (np.abs(dx) <= step), x + dx, x)
    return x


def _axis_params(method, sxx, syy, sxy):
    """Per-group location (m_i or phi_i), q_i, and the search window, arrays (M, G)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        if method == "sma":
            loc = 0.5 * (np.log(syy) - np.log(sxx))
            q = 1.0 - sxy * sxy / (sxx * syy)
            sign = np.where(np.sum(sxy, axis=-1) < 0, -1.0, 1.0)
            return loc, np.maximum(q, 1e-300), sign, None
        trace = sxx + syy
        q = 4.0 * (sxx * syy - sxy * sxy) / (trace * trace)
        phi = np.arctan2(2 * sxy, sxx - syy)
        phi0 = np.arctan2(2 * np.sum(sxy, axis=-1), np.sum(sxx - syy, axis=-1))
        # Bring each phi_i within pi/2 of phi0 (F has period pi in w).
        loc = phi0[:, None] + np.mod(phi - phi0[:, None] + np.pi / 2, np.pi) - np.pi / 2
        return loc, np.clip(q, 1e-300, 1.0), None, phi0


def _fit_common(method: str, n, sxx, syy, sxy, *, exact: bool = False) -> dict:
    """Common SMA/MA slope, LR statistic and profile quantities, rows in parallel.

    Arrays have shape (M, G).  ``exact`` adds a grid search for the global
    minimum (used for observed data; bootstrap replicates use Newton only).
    """
    nu = n - 1.0
    loc, q, sign, phi0 = _axis_params(method, sxx, syy, sxy)
    lo, hi = loc.min(axis=-1), loc.max(axis=-1)
    x0 = np.clip(np.sum(nu * loc, axis=-1) / np.sum(nu, axis=-1), lo, hi)
    x = _newton_bracketed(method, loc, q, nu, lo, hi, x0)
    if method == "ma":
        wide = (hi - lo) >= np.pi / 2  # bracket not guaranteed: search the window
        if np.any(wide):
            idx = np.flatnonzero(wide)
            x[idx] = _grid_minimum(method, loc[idx], q[idx], nu[idx],
                                   phi0[idx] - np.pi / 2, phi0[idx] + np.pi / 2)
    if exact:
        if method == "sma":
            wlo, whi = lo, hi
        else:
            wlo, whi = phi0 - np.pi / 2, phi0 + np.pi / 2
        xg = _grid_minimum(method, loc, q, nu, wlo, whi, points=2001)
        fx = _profile_terms(method, x, loc, q, nu, order=0)[0]
        fg = _profile_terms(method, xg, loc, q, nu, order=0)[0]
        x = np.where(fg < fx - 1e-10 * (1 + np.abs(fx)), xg, x)
    fval, _, f2 = _profile_terms(method, x, loc, q, nu, first=False)
    lr = fval - np.sum(nu * np.log(q), axis=-1)
    if method == "sma":
        b = sign * np.exp(x)
        with np.errstate(divide="ignore", invalid="ignore"):
            var_b = b * b * 2.0 / f2
    else:
        x = np.mod(x + np.pi, 2 * np.pi) - np.pi   # slope angle theta = x/2 in [-pi/2, pi/2)
        b = np.tan(x / 2)
        with np.errstate(divide="ignore", invalid="ignore"):
            var_b = ((1 + b * b) / 2) ** 2 * 2.0 / f2
    return {"x": x, "b": b, "lr": np.maximum(lr, 0.0), "var_b": var_b, "fval": fval,
            "loc": loc, "q": q, "nu": nu, "sign": sign}


def _first_over(method: str, grid, loc, q, nu, f_hat: float, crit: float) -> float | None:
    """The first point of ``grid`` where the profile objective F exceeds
    ``f_hat + crit`` (``F - f_hat - crit > 0``, in that order), None if none does.

    The grid is evaluated in blocks of 1, 4, 16, ... points and the search stops
    at the first block with such a point: with many rows the interval is narrow
    and the first point already lies outside it.  Each point's F is a sum over
    the groups of its own row, so it has the same bits whatever block it is in.
    """
    start, size = 0, 1
    while start < grid.size:
        part = grid[start:start + size]
        shape = (part.size, loc.shape[1])
        vals = _profile_terms(method, part, np.broadcast_to(loc, shape),
                              np.broadcast_to(q, (part.size, q.shape[1])),
                              np.broadcast_to(nu, (part.size, nu.shape[1])), order=0)[0]
        over = np.flatnonzero(vals - f_hat - crit > 0)
        if over.size:
            return float(part[over[0]])
        start += size
        size *= 4
    return None


def _profile_interval(method: str, fit: dict, confidence: float,
                      crit: float | None = None) -> tuple[float, float]:
    """Bounds of {b : F(b) - F(b_hat) <= c} for one dataset (see module notes).

    ``crit`` defaults to the small-sample threshold
    c = nu log(1 + F_conf(1, nu - 1)/(nu - 1)); the bootstrap passes its own.
    """
    loc, q, nu = fit["loc"][:1], fit["q"][:1], fit["nu"][:1]
    if crit is None:
        nu_tot = float(np.sum(nu))
        df2 = nu_tot - 1
        if df2 <= 0:
            return math.nan, math.nan
        crit = nu_tot * math.log1p(tails.f_quantile(confidence, 1, df2) / df2)
    x_hat = float(fit["x"][0])
    f_hat = float(fit["fval"][0])

    def excess(x):
        value = _profile_terms(method, np.array([x]), loc, q, nu, order=0)[0][0]
        return float(value) - f_hat - crit

    bounds = []
    for direction in (-1.0, 1.0):
        if method == "sma":
            reach = 1.0
            while excess(x_hat + direction * reach) <= 0 and reach < 200:
                reach *= 2
            far = x_hat + direction * reach
        else:
            grid = x_hat + direction * np.linspace(0, np.pi / 2, 721)[1:]
            far = _first_over(method, grid, loc, q, nu, f_hat, crit)
            if far is None:
                bounds.append(math.nan)
                continue
        if excess(far) <= 0:
            bounds.append(math.nan)
            continue
        bounds.append(brent_root(excess, x_hat, far, xtol=1e-13) if far != x_hat
                      else x_hat)
    lo_x, hi_x = bounds
    if method == "sma":
        sign = float(fit["sign"][0])
        ends = (sorted([sign * math.exp(lo_x), sign * math.exp(hi_x)])
                if np.isfinite(lo_x) and np.isfinite(hi_x) else [math.nan, math.nan])
        return ends[0], ends[1]
    # MA: slope = tan(w/2); past the vertical (|w| >= pi) the interval is unbounded.
    if not (np.isfinite(lo_x) and np.isfinite(hi_x)) or lo_x <= -np.pi or hi_x >= np.pi:
        return math.nan, math.nan
    return math.tan(lo_x / 2), math.tan(hi_x / 2)


def _profile_test(method: str, fit: dict, b0, sums) -> dict:
    """Test of common slope = b0 that inverts :func:`_profile_interval`, rows in parallel.

    Parameters
    ----------
    fit : dict
        :func:`_fit_common` output for M datasets.
    b0 : float or ndarray (M,)
    sums : tuple of ndarray (M,)
        Pooled within-group sums (sum Sxx_i, sum Syy_i, sum Sxy_i), for the
        SMA test of a slope of the other sign.

    Returns
    -------
    dict
        ``excess`` D = F(b0) - F(b_hat) (the profile likelihood-ratio
        statistic), ``t``, ``df`` and the t-referred ``p`` (M,).

    Notes
    -----
    With nu = sum nu_i the interval of :func:`_profile_interval` is
    {b : D(b) <= nu log(1 + F_conf(1, nu - 1)/(nu - 1))}.  Solving for the F
    quantile gives the statistic

        Fstat = (nu - 1) (exp(D/nu) - 1)  on (1, nu - 1) df,   t = +-sqrt(Fstat),

    so p = P(F(1, nu - 1) >= Fstat) equals 1 - confidence exactly at either
    bound of the interval.  For one group D = -nu log(1 - r_rf^2(b0)) and
    Fstat = (n - 2) r^2/(1 - r^2): the square of the correlation t of
    Warton et al. (2006, Biol. Rev. 81:259, Table 4) used by
    :func:`scaling.stats.lines.slope_test_statistic`.  The sign of t is that of
    b_hat - b0 (SMA: of |b_hat| - |b0|, times the sign of b_hat).  SMA: b0 of the other sign than the common slope gets, when
    larger, the t of the pooled within-group correlation (as the one-group
    test does).  MA: a b0 more than 45 degrees from the common axis (the
    minor-axis side) gets the statistic at 45 degrees, as in the one-group
    test.
    """
    b0 = np.broadcast_to(np.asarray(b0, dtype=float), fit["b"].shape)
    loc, q, nu = fit["loc"], fit["q"], fit["nu"]
    nu_tot = np.sum(nu, axis=-1)
    df2 = nu_tot - 1.0
    b_hat = fit["b"]
    opposite = np.zeros(b_hat.shape, dtype=bool)
    with np.errstate(divide="ignore", invalid="ignore"):
        if method == "sma":
            x0 = np.log(np.abs(b0))
            opposite = b0 * fit["sign"] < 0
        else:
            d = np.mod(2 * np.arctan(b0) - fit["x"] + np.pi, 2 * np.pi) - np.pi
            x0 = fit["x"] + np.clip(d, -np.pi / 2, np.pi / 2)
        f0 = np.where(np.isfinite(x0),
                      _profile_terms(method, np.where(np.isfinite(x0), x0, 0.0), loc, q, nu,
                                     order=0)[0], np.inf)
        excess = np.maximum(f0 - fit["fval"], 0.0)
        fstat = df2 * np.expm1(excess / nu_tot)
        if method == "sma":   # sign as in the one-group test: |b_hat| against |b0|
            t = fit["sign"] * np.sign(fit["x"] - x0) * np.sqrt(fstat)
        else:
            t = np.sign(b_hat - b0) * np.sqrt(fstat)
        if method == "sma":
            sxx, syy, sxy = sums
            r_w = sxy / np.sqrt(sxx * syy)
            t_corr = np.abs(r_w) * np.sqrt(df2 / (1 - r_w * r_w)) * fit["sign"]
            use_corr = opposite & (np.abs(t_corr) > np.abs(t))
            t = np.where(use_corr, t_corr, t)
        else:
            use_corr = opposite
        p = 2 * tails.t_upper(np.abs(t), df2)
    return {"excess": excess, "t": t, "df": df2, "p": p, "use_corr": use_corr}


def _common_test_arrays(method: str, n, mx, my, sxx, syy, sxy, b0) -> dict:
    """Common slope and its test against b0 for M datasets of G groups (M, G) at once.

    OLS: t = (b_w - b0)/se on N - G - 1 df, b_w = sum Sxy_i/sum Sxx_i and
    se^2 = RSS_par/(N - G - 1)/sum Sxx_i (the parallel-lines model; the
    coefficient t test of ``logy ~ C(group) + logx``).  SMA/MA:
    :func:`_profile_test`.  Returns ``b``, ``t``, ``df``, ``p`` (M,).
    """
    n, mx, my, sxx, syy, sxy = (np.atleast_2d(np.asarray(a, dtype=float))
                                for a in (n, mx, my, sxx, syy, sxy))
    sums = (np.sum(sxx, -1), np.sum(syy, -1), np.sum(sxy, -1))
    if method == "ols":
        G = n.shape[-1]
        df = np.sum(n, -1) - G - 1.0
        b = sums[2] / sums[0]
        with np.errstate(divide="ignore", invalid="ignore"):
            rss = np.maximum(sums[1] - sums[2] ** 2 / sums[0], 0.0)
            se = np.sqrt(rss / df / sums[0])
            t = (b - b0) / se
        return {"b": b, "t": t, "df": df, "p": 2 * tails.t_upper(np.abs(t), df), "se": se}
    fit = _fit_common(method, n, sxx, syy, sxy)
    out = _profile_test(method, fit, b0, sums)
    out["b"] = fit["b"]
    return out



def _null_profile(method: str, n, sxx, syy, sxy, fit: dict, n_boot: int, rng, *,
                  chunk: int = 200_000) -> np.ndarray:
    """Parametric bootstrap of the profile statistic at the fitted common slope, (B, M).

    The null model is the fitted one: in every group the residual-axis and
    fitted-axis scores at the common slope b_hat are uncorrelated, with the
    variances Srr_i(b_hat)/nu_i and Sff_i(b_hat)/nu_i.  Each replicate draws
    the centred sums S_i* ~ Wishart(nu_i, Sigma_i) by the Bartlett
    decomposition, finds the common slope b* of the replicate and returns
    D* = F*(b_hat) - F*(b*), the statistic whose ``confidence`` quantile
    replaces the F-referred threshold of the profile interval.  The draws are
    those of :func:`scaling.stats.group_comparisons._bootstrap_counts` (same
    order and chunks, the group means drawn too), so a seed gives the same
    D* as ``compare_groups``.  Arrays (M, G); all M datasets in one pass.
    """
    M, G = n.shape
    nu = n - 1.0
    b = fit["b"][:, None]
    srr = syy - 2 * b * sxy + b * b * sxx
    sff = (syy + 2 * b * sxy + b * b * sxx if method == "sma"
           else sxx + 2 * b * sxy + b * b * syy)
    sr2, sf2 = srr / nu, sff / nu
    sr, sf = np.sqrt(sr2), np.sqrt(sf2)
    x_true = np.log(np.abs(fit["b"])) if method == "sma" else fit["x"]
    per = max(1, chunk // max(M * G, 1))
    out, done = [], 0
    while done < n_boot:
        B = min(per, n_boot - done)
        size = (B, M, G)
        a11 = rng.chisquare(nu, size=size)
        a22 = rng.chisquare(nu - 1, size=size)
        a21 = rng.standard_normal(size)
        rng.standard_normal(size)       # the group means compare_groups draws here:
        rng.standard_normal(size)       # kept so that one seed gives the same replicates
        r_rr = sr2 * a11
        r_rf = sr * sf * np.sqrt(a11) * a21
        r_ff = sf2 * (a21 * a21 + a22)
        if method == "sma":
            sxx_b = (r_ff - 2 * r_rf + r_rr) / (4 * b * b)
            syy_b = (r_rr + 2 * r_rf + r_ff) / 4
            sxy_b = (r_ff - r_rr) / (4 * b)
        else:
            k = 1 + b * b
            sxx_b = (b * b * r_rr - 2 * b * r_rf + r_ff) / (k * k)
            syy_b = (r_rr + 2 * b * r_rf + b * b * r_ff) / (k * k)
            sxy_b = (-b * r_rr + (1 - b * b) * r_rf + b * r_ff) / (k * k)
        flat = lambda a: np.broadcast_to(a, size).reshape(B * M, G)  # noqa: E731
        fit_b = _fit_common(method, flat(n), flat(sxx_b), flat(syy_b), flat(sxy_b))
        xt = np.broadcast_to(x_true, (B, M)).reshape(B * M)
        f_true = _profile_terms(method, xt, fit_b["loc"], fit_b["q"], fit_b["nu"], order=0)[0]
        out.append((f_true - fit_b["fval"]).reshape(B, M))
        done += B
    return np.concatenate(out, axis=0)


def _calibrated_p(method: str, fit: dict, b0, sums, boot: np.ndarray) -> np.ndarray:
    """p of common slope = b0 against the bootstrap profile statistics ``boot`` (B, M).

    p = (1 + #{D* >= D})/(B + 1) (Davison & Hinkley 1997, eq. 4.11), as
    :meth:`CommonSlope.test_slope`; an SMA b0 of the other sign that the
    pooled correlation test rejects more strongly keeps the t-referred p.
    """
    res = _profile_test(method, fit, b0, sums)
    d = res["excess"]
    p = (1 + np.sum(boot >= d - 1e-9 * (1 + np.abs(d)), axis=0)) / (boot.shape[0] + 1)
    return np.where(res["use_corr"], res["p"], p)


# --------------------------------------------------------------------------
# OLS: parallel lines from moments


def _parallel_lines(n, sxx, syy, sxy) -> dict:
    """OLS common slope of G parallel lines (1-d arrays of group moments).

    Returns ``b`` (b_w), ``se``, ``df_par`` = N - G - 1, ``rss_par`` and
    ``exact_par``: the parallel-lines residual sum is at most
    :data:`~scaling.stats._group_common.EXACT_FIT_TOL` times sum Syy_i (no
    residual scatter), when ``se`` is exactly 0.
    """
    G = n.size
    N = float(n.sum())
    tol = EXACT_FIT_TOL * float(np.sum(syy))
    b_w = float(np.sum(sxy) / np.sum(sxx))
    rss_par = np.float64(np.sum(syy) - np.sum(sxy) ** 2 / np.sum(sxx))
    exact_par = bool(rss_par <= tol)
    df_par = N - G - 1
    if df_par <= 0:
        se = math.nan
    elif exact_par:
        se = 0.0
    else:
        se = math.sqrt(max(float(rss_par), 0.0) / df_par / float(np.sum(sxx)))
    return {"b": b_w, "se": se, "df_par": df_par, "rss_par": rss_par, "exact_par": exact_par}


def _pool(n, mx, my, sxx, syy, sxy) -> Moments:
    """Moments of the union of groups from the group moments (exact identity)."""
    N = n.sum()
    gx, gy = np.sum(n * mx) / N, np.sum(n * my) / N
    return Moments(n=np.asarray(N), mean_x=np.asarray(gx), mean_y=np.asarray(gy),
                   sxx=np.asarray(np.sum(sxx) + np.sum(n * (mx - gx) ** 2)),
                   syy=np.asarray(np.sum(syy) + np.sum(n * (my - gy) ** 2)),
                   sxy=np.asarray(np.sum(sxy) + np.sum(n * (mx - gx) * (my - gy))))


# --------------------------------------------------------------------------
# common slope alone


@dataclass(frozen=True, slots=True, kw_only=True)
class CommonSlope:
    """The slope shared by several groups (lines allowed to differ in elevation).

    Attributes
    ----------
    method : str
    slope : float
    slope_ci : ConfidenceInterval
        At level ``confidence``; NaN bounds if unbounded (MA, weak correlation).
    slope_se : float
    n_groups : int
    n : int
        Total points.
    confidence : float
    """

    method: str
    slope: float
    slope_ci: ConfidenceInterval
    slope_se: float
    n_groups: int
    n: int
    confidence: float
    groups: tuple = ()
    df_resid: float = math.nan
    profile: dict | None = field(default=None, repr=False, compare=False)
    boot_profile: np.ndarray | None = field(default=None, repr=False, compare=False)

    def test_slope(self, exponent, *, hypothesis: str = "") -> SlopeTest:
        """Test common slope = ``exponent`` (two-sided): the inversion of ``slope_ci``.

        Parameters
        ----------
        exponent : float or str
            b0, e.g. ``0.75`` or ``"3/4"``.
        hypothesis : str
            Name recorded in the result.

        Returns
        -------
        SlopeTest
            ``statistic_type`` "t" on ``df_resid`` = N - G - 1 df, positive
            when the common slope is above b0 (``p_method`` "t" for OLS,
            "lr_t" for the SMA/MA profile statistic); when the p-value comes
            from the parametric bootstrap, ``statistic_type`` "lr": the
            statistic is D, df NaN, ``p_method`` "lr_parametric_bootstrap(B)".

        Notes
        -----
        OLS: t = (b_w - b0)/se(b_w) of the parallel-lines model (the
        coefficient test of ``logy ~ C(group) + logx``); the interval is
        b_w +- t_conf se.  SMA/MA: the profile likelihood-ratio statistic
        D = F(b0) - F(b_hat) (group means free) as
        t^2 = (nu - 1)(exp(D/nu) - 1) on nu - 1 df, nu = N - G, which is
        exactly the rule of the profile interval (see :func:`_profile_test`);
        p = 1 - confidence at the interval's bounds.  When the interval was
        calibrated by the parametric bootstrap (``boot_profile`` set),
        p = (1 + #{D* >= D})/(B + 1) over the same bootstrap profile
        statistics D* (Davison & Hinkley 1997, eq. 4.11), so p is about
        1 - confidence at the bounds, up to Monte Carlo discreteness.  With
        one group this is the test of :meth:`scaling.stats.lines.LineFit.test_slope`.
        """
        b0 = exponent_value(exponent)
        label = exponent.strip() if isinstance(exponent, str) else f"{b0:g}"
        common = dict(method=self.method, hypothesis=hypothesis or label, exponent=b0,
                      estimate=self.slope, df=self.df_resid, statistic_type="t")
        if not np.isfinite(self.slope) or not np.isfinite(self.slope_se):
            return SlopeTest(**common, statistic=math.nan, p_value=math.nan)
        if self.slope_se == 0:
            same = abs(b0 - self.slope) <= 1e-9 * max(abs(self.slope), 1e-300)
            return SlopeTest(**common, statistic=0.0 if same else math.copysign(
                math.inf, self.slope - b0), p_value=1.0 if same else 0.0, note=EXACT_NOTE)
        if self.method == "ols" or self.profile is None:
            t = (self.slope - b0) / self.slope_se
            return SlopeTest(**common, statistic=float(t),
                             p_value=float(2 * tails.t_upper(abs(t), self.df_resid)))
        res = _profile_test(self.method, self.profile, b0, self.profile["sums"])
        t, p = float(res["t"][0]), float(res["p"][0])
        if bool(res["use_corr"][0]):
            return SlopeTest(**common, statistic=t, p_value=p)
        if self.boot_profile is not None:
            # The p is the bootstrap's: report the statistic it calibrates (D).
            d = float(res["excess"][0])
            boot = self.boot_profile
            p = float((1 + np.sum(boot >= d - 1e-9 * (1 + abs(d)))) / (boot.size + 1))
            return SlopeTest(**{**common, "df": math.nan, "statistic_type": "lr"}, statistic=d,
                             p_value=p, p_method=f"lr_parametric_bootstrap({boot.size})")
        return SlopeTest(**common, statistic=t, p_value=p, p_method="lr_t")


def _common_from_arrays(method, n, mx, my, sxx, syy, sxy, confidence, *, full=False):
    if method == "ols":
        res = _parallel_lines(n, sxx, syy, sxy)
        t = (tails.t_quantile(0.5 + confidence / 2, res["df_par"]) if res["df_par"] > 0
             else math.nan)
        ci = ConfidenceInterval(float(res["b"] - t * res["se"]), float(res["b"] + t * res["se"]))
        return (res["b"], ci, res["se"], None) if full else (res["b"], ci, res["se"])
    fit = _fit_common(method, n[None], sxx[None], syy[None], sxy[None], exact=True)
    lo, hi = _profile_interval(method, fit, confidence)
    out = float(fit["b"][0]), ConfidenceInterval(lo, hi), float(np.sqrt(fit["var_b"][0]))
    return out + (_profile_state(fit, sxx, syy, sxy),) if full else out


def _profile_state(fit: dict, sxx, syy, sxy) -> dict:
    """The first dataset of a :func:`_fit_common` result, kept for slope tests."""
    keep = {k: (None if fit[k] is None else np.asarray(fit[k])[:1])
            for k in ("x", "b", "fval", "loc", "q", "nu", "sign")}
    keep["sums"] = tuple(np.atleast_1d(float(np.sum(a))) for a in (sxx, syy, sxy))
    return keep


def common_slope(log_x, log_y, groups, *, method: str = "sma",
                 confidence: float = 0.95, calibration: str = "auto", n_boot: int = 999,
                 seed: int | None = DEFAULT_SEED) -> CommonSlope:
    """Estimate the slope common to all groups, with its interval.

    Parameters
    ----------
    log_x, log_y : array_like, shape (n,)
        Values on the log scale.
    groups : array_like, shape (n,)
        Group label of each row; every group needs at least 3 points with
        x and y varying.
    method : {"ols", "sma", "ma"}
    confidence : float
    calibration : {"auto", "chi2", "bootstrap"}
        How the SMA/MA interval and :meth:`CommonSlope.test_slope` are
        calibrated, as in :func:`scaling.stats.group_comparisons.compare_groups`:
        ``"chi2"`` the F-referred profile threshold, ``"bootstrap"`` the
        parametric bootstrap of the profile statistic, ``"auto"`` the
        bootstrap when two or more groups share the slope and the smallest has
        fewer than ``AUTO_BOOTSTRAP_BELOW`` (100) points.  OLS and a single
        group are exact and never bootstrapped.
    n_boot : int
        Bootstrap replicates (at least 19).
    seed : int or None
        Seed of ``np.random.default_rng`` for the bootstrap; the same seed
        gives the same interval as ``compare_groups``.

    Returns
    -------
    CommonSlope
        ``boot_profile`` holds the bootstrap statistics when the bootstrap
        was used (and ``test_slope`` then refers to them).

    Notes
    -----
    OLS: the pooled within-group slope sum Sxy_i/sum Sxx_i with a t interval
    on N - G - 1 df (parallel-lines ANCOVA).  SMA/MA: maximum likelihood
    common slope and profile interval (Warton & Weber 2002; see the module
    notes).  With one group these are the ordinary one-group estimates and
    intervals.  Calibration: module notes (the F-referred interval of
    several small groups covers 0.88-0.93).

    Examples
    --------
    >>> import numpy as np, scaling.stats.common_slope as cs
    >>> rng = np.random.default_rng(1)
    >>> X = rng.normal(0, 1, 40); Y = 0.75 * X + rng.normal(0, 0.2, 40)
    >>> c = cs.common_slope(X, Y, np.repeat(["a", "b", "c", "d"], 10))
    >>> c.boot_profile.size        # four groups of 10: calibrated by 999 draws
    999
    """

    X, Y = check_logs(log_x, log_y)
    codes, labels = factorize(groups, X.size)
    m = group_moments(X, Y, codes, n_groups=len(labels))
    return common_slope_from_moments(m, labels, method=method, confidence=confidence,
                                     calibration=calibration, n_boot=n_boot, seed=seed)


def common_slope_from_moments(m: Moments, labels, *, method: str = "sma",
                              confidence: float = 0.95, calibration: str = "auto",
                              n_boot: int = 999,
                              seed: int | None = DEFAULT_SEED) -> CommonSlope:
    """:func:`common_slope` from per-group moments.

    Parameters
    ----------
    m : Moments
        Arrays of shape (G,), one element per group, on the log scale.
    labels : sequence
        The G group labels, in the order of ``m``.
    method, confidence, calibration, n_boot, seed
        As for :func:`common_slope`; the same seed gives the same draws.

    Returns
    -------
    CommonSlope
        Equal to :func:`common_slope` on the rows behind ``m``.
    """
    method = check_method(method, METHODS, lower=True)
    confidence = check_confidence(confidence)
    if calibration not in CALIBRATIONS:
        raise ConfigError(f"calibration must be one of {', '.join(CALIBRATIONS)}, "
                          f"not {calibration!r}")
    n_boot = check_count(n_boot, "n_boot", 19)
    if seed is not None:
        seed = check_count(seed, "seed", 0)
    labels = tuple(labels)
    if len(labels) != np.size(m.n):
        raise DataError(f"labels must name each of the {np.size(m.n)} groups, "
                        f"not {len(labels)}")
    notes = fit_notes(m, method)
    bad = [f"{labels[i]!r}: {notes[i]}" for i in range(len(labels)) if notes[i]]
    if bad:
        raise DataError("groups cannot share a slope estimate: " + "; ".join(bad))
    b, ci, se, state = _common_from_arrays(method, m.n, m.mean_x, m.mean_y, m.sxx, m.syy,
                                           m.sxy, confidence, full=True)
    boot_profile = None
    wanted = calibration == "bootstrap" or (calibration == "auto"
                                            and float(m.n.min()) < AUTO_BOOTSTRAP_BELOW)
    if (wanted and method != "ols" and len(labels) > 1 and state is not None
            and np.isfinite(b) and se > 0):
        sums = tuple(np.asarray(a, dtype=float)[None] for a in (m.n, m.sxx, m.syy, m.sxy))
        fit = _fit_common(method, *sums, exact=True)
        boot_profile = _null_profile(method, *sums, fit, n_boot,
                                     np.random.default_rng(seed))[:, 0]
        lo, hi = _profile_interval(method, fit, confidence,
                                   float(np.quantile(boot_profile, confidence)))
        ci = ConfidenceInterval(lo, hi)
    return CommonSlope(method=method, slope=b, slope_ci=ci, slope_se=se,
                       n_groups=len(labels), n=int(m.n.sum()), confidence=confidence,
                       groups=tuple(labels), df_resid=float(m.n.sum() - len(labels) - 1),
                       profile=state, boot_profile=boot_profile)
