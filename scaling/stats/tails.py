"""Tail probabilities and quantiles of the t, F, chi-square and normal laws.

The package's tests and intervals need a handful of distribution functions.
They are computed here straight from the special functions of
``scipy.special`` (incomplete beta and gamma integrals and their inverses,
Cephes), which load in a fraction of the time of the whole distribution
machinery of ``scipy.stats``; the in-memory road of a run never has to load
the latter.

Each function gives the same floating-point result as the matching
``scipy.stats`` call (the same special function with the same arguments, and
the same handling of the edges): a shape parameter that is not positive, or
NaN, gives NaN; an argument outside the support gives 0 or 1; a probability
outside [0, 1] gives NaN, 0 and 1 give the ends of the support.  Scalars in
give a NumPy float64 scalar out; arrays broadcast and give arrays.

=====================  ==========================  =========================
function               law                         special function
=====================  ==========================  =========================
:func:`t_upper`        P(T > x), Student t(df)     ``stdtr(df, -x)``
:func:`t_quantile`     t with P(T <= t) = q        ``stdtrit(df, q)``
:func:`f_upper`        P(F > x), F(d1, d2)         ``fdtrc(d1, d2, x)``
:func:`f_quantile`     F with P(F <= f) = q        ``fdtri(d1, d2, q)``
:func:`chi2_upper`     P(C > x), chi-square(df)    ``chdtrc(df, x)``
:func:`chi2_lower`     P(C <= x)                   ``chdtr(df, x)``
:func:`chi2_quantile`  c with P(C <= c) = q        ``2 gammaincinv(df/2, q)``
:func:`normal_upper`   P(Z > x), standard normal   ``ndtr(-x)``
:func:`normal_quantile`  z with P(Z <= z) = q      ``ndtri(q)``
=====================  ==========================  =========================
"""

from __future__ import annotations

import numpy as np
from scipy import special

__all__ = ["t_upper", "t_quantile", "f_upper", "f_quantile", "chi2_upper", "chi2_lower",
           "chi2_quantile", "normal_upper", "normal_quantile"]


def _shapes_ok(shapes) -> np.ndarray | bool:
    ok = True
    for s in shapes:
        ok = np.logical_and(ok, np.asarray(s) > 0)
    return ok


def _done(out: np.ndarray):
    return out[()] if out.ndim == 0 else out


def _probability(fn, x, shapes, low: float, high: float, upper: bool):
    """P(X > x) (``upper``) or P(X <= x) on the open support (low, high): ``fn``
    inside it, 1 or 0 at and beyond its ends, NaN for NaN or bad shapes."""
    x = np.asarray(x)
    x = np.asarray(x, dtype=np.promote_types(x.dtype, np.float64))
    shapes = tuple(np.asarray(s) for s in shapes)
    ok = _shapes_ok(shapes)
    with np.errstate(invalid="ignore"):
        inside = (low < x) & (x < high)
    beyond = ok & ((x <= low) if upper else (x >= high))
    cond = ok & inside
    out = np.zeros(np.shape(cond), x.dtype)
    np.place(out, np.logical_not(ok) | np.isnan(x), np.nan)
    np.place(out, beyond, 1.0)
    if np.any(cond):
        args = [np.extract(cond, np.broadcast_to(a, cond.shape)) for a in (x,) + shapes]
        np.place(out, cond, fn(*args))
    return _done(out)


def _quantile(fn, q, shapes, low: float, high: float):
    """x with P(X <= x) = q: ``fn`` for 0 < q < 1, the support's ends at 0 and 1,
    NaN elsewhere (q outside [0, 1], NaN, bad shapes)."""
    q = np.asarray(q)
    shapes = tuple(np.asarray(s) for s in shapes)
    ok = _shapes_ok(shapes)
    with np.errstate(invalid="ignore"):
        cond = ok & (0 < q) & (q < 1)
        at_low, at_high = ok & (q == 0), ok & (q == 1)
    out = np.full(np.shape(cond), np.nan)
    np.place(out, at_low, low)
    np.place(out, at_high, high)
    if np.any(cond):
        args = [np.extract(cond, np.broadcast_to(a, cond.shape)) for a in (q,) + shapes]
        # "+ 0.0" as scipy.stats adds its location: a zero quantile is +0.0
        np.place(out, cond, fn(*args) * 1.0 + 0.0)
    return _done(out)


def t_upper(x, df):
    """Upper tail P(T > x) of Student's t with ``df`` degrees of freedom.

    Parameters
    ----------
    x : array_like
        Points.
    df : array_like
        Degrees of freedom (> 0; ``inf`` gives the normal law).

    Returns
    -------
    numpy.float64 or numpy.ndarray
        As ``scipy.stats.t.sf(x, df)``.
    """
    return _probability(lambda v, d: special.stdtr(d, -v), x, (df,), -np.inf, np.inf, True)


def t_quantile(q, df):
    """Quantile of Student's t: the t with P(T <= t) = ``q``.

    Parameters
    ----------
    q : array_like
        Probabilities in [0, 1].
    df : array_like
        Degrees of freedom (> 0).

    Returns
    -------
    numpy.float64 or numpy.ndarray
        As ``scipy.stats.t.ppf(q, df)``.
    """
    return _quantile(lambda p, d: special.stdtrit(d, p), q, (df,), -np.inf, np.inf)


def f_upper(x, dfn, dfd):
    """Upper tail P(F > x) of the F law with (``dfn``, ``dfd``) degrees of freedom.

    Parameters
    ----------
    x : array_like
        Points (x <= 0 gives 1).
    dfn, dfd : array_like
        Numerator and denominator degrees of freedom (> 0).

    Returns
    -------
    numpy.float64 or numpy.ndarray
        As ``scipy.stats.f.sf(x, dfn, dfd)``.
    """
    return _probability(lambda v, d1, d2: special.fdtrc(d1, d2, v), x, (dfn, dfd),
                        0.0, np.inf, True)


def f_quantile(q, dfn, dfd):
    """Quantile of the F law: the f with P(F <= f) = ``q``.

    Parameters
    ----------
    q : array_like
        Probabilities in [0, 1].
    dfn, dfd : array_like
        Numerator and denominator degrees of freedom (> 0).

    Returns
    -------
    numpy.float64 or numpy.ndarray
        As ``scipy.stats.f.ppf(q, dfn, dfd)``.
    """
    return _quantile(lambda p, d1, d2: special.fdtri(d1, d2, p), q, (dfn, dfd), 0.0, np.inf)


def chi2_upper(x, df):
    """Upper tail P(C > x) of the chi-square law with ``df`` degrees of freedom.

    Parameters
    ----------
    x : array_like
        Points (x <= 0 gives 1).
    df : array_like
        Degrees of freedom (> 0).

    Returns
    -------
    numpy.float64 or numpy.ndarray
        As ``scipy.stats.chi2.sf(x, df)``.
    """
    return _probability(lambda v, d: special.chdtrc(d, v), x, (df,), 0.0, np.inf, True)


def chi2_lower(x, df):
    """Lower tail P(C <= x) of the chi-square law with ``df`` degrees of freedom.

    Parameters
    ----------
    x : array_like
        Points (x <= 0 gives 0).
    df : array_like
        Degrees of freedom (> 0).

    Returns
    -------
    numpy.float64 or numpy.ndarray
        As ``scipy.stats.chi2.cdf(x, df)``.
    """
    return _probability(lambda v, d: special.chdtr(d, v), x, (df,), 0.0, np.inf, False)


def chi2_quantile(q, df):
    """Quantile of the chi-square law: the c with P(C <= c) = ``q``.

    Parameters
    ----------
    q : array_like
        Probabilities in [0, 1].
    df : array_like
        Degrees of freedom (> 0).

    Returns
    -------
    numpy.float64 or numpy.ndarray
        As ``scipy.stats.chi2.ppf(q, df)`` (twice the inverse of the regularised
        lower incomplete gamma function at shape df/2).
    """
    return _quantile(lambda p, d: 2 * special.gammaincinv(d / 2, p), q, (df,), 0.0, np.inf)


def normal_upper(x):
    """Upper tail P(Z > x) of the standard normal law.

    Parameters
    ----------
    x : array_like
        Points.

    Returns
    -------
    numpy.float64 or numpy.ndarray
        As ``scipy.stats.norm.sf(x)``.
    """
    return _probability(lambda v: special.ndtr(-v), x, (), -np.inf, np.inf, True)


def normal_quantile(q):
    """Quantile of the standard normal law: the z with P(Z <= z) = ``q``.

    Parameters
    ----------
    q : array_like
        Probabilities in [0, 1].

    Returns
    -------
    numpy.float64 or numpy.ndarray
        As ``scipy.stats.norm.ppf(q)``.
    """
    return _quantile(special.ndtri, q, (), -np.inf, np.inf)
