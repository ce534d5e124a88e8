"""The quadratic-term curvature test from per-group moments (no rows).

The curvature check of :mod:`scaling.stats.residual_checks` fits
Y = b0 + b1 X + b2 X^2 by OLS on the log scale and tests b2 by
t = b2 / se(b2) on n - 3 df (Kolokotrones, Savage, Deeds & Fontana 2010,
*Nature* 464:753).  Its normal equations, written on centred X
(c = X - mean X, q = c^2 - mean c^2), need only

    S_cc = Sxx,  S_cq = Sxxx,  S_qq = Sxxxx - Sxx^2 / n,
    S_cy = Sxy,  S_qy = Sxxy,  S_yy = Syy,

so :func:`quadratic_from_moments` gives the same numbers as
:func:`scaling.stats.residual_checks.quadratic_t` from a
:class:`~scaling.stats.moments.Moments` carrying the higher sums
(``group_moments(..., higher=True)``), vectorised over groups;
:func:`within_quadratic_from_moments` gives the common quadratic term with one
elevation per group (the parallel-lines model's curvature test,
:func:`scaling.stats.residual_checks.within_quadratic_t`) from the groups'
moments.
"""

from __future__ import annotations

import numpy as np
from . import tails

from ..errors import DataError
from .moments import Moments
from .residual_checks import quadratic_solve

__all__ = ["quadratic_from_moments", "within_quadratic_from_moments", "local_exponents"]


def quadratic_from_moments(m: Moments) -> dict:
    """OLS fit of Y = b0 + b1 X + b2 X^2 from moments, vectorised over their shape.

    Parameters
    ----------
    m : Moments
        With the higher sums ``sxxx``, ``sxxxx``, ``sxxy``.

    Returns
    -------
    dict of ndarray
        ``intercept, linear, quadratic, quadratic_se, statistic, df,
        p_value`` with the moments' shape (the keys of
        :func:`scaling.stats.residual_checks.quadratic_t`).

    Raises
    ------
    DataError
        The moments do not carry the higher sums.

    Notes
    -----
    The 2 x 2 normal equations of :func:`~scaling.stats.residual_checks.quadratic_t`
    with the sums of the module docstring; b2 = g_q, b1 = g_c - 2 g_q mean(X),
    b0 = mean(Y) - b1 mean(X) - b2 mean(X^2) with
    mean(X^2) = mean(X)^2 + Sxx / n.
    """
    if not m.has_higher:
        raise DataError("the moments do not carry sxxx, sxxxx and sxxy; compute them "
                        "with group_moments(..., higher=True)")
    n = np.asarray(m.n, dtype=float)
    scc, scq, scy, sqy, syy = m.sxx, m.sxxx, m.sxy, m.sxxy, m.syy
    with np.errstate(divide="ignore", invalid="ignore"):
        sqq = m.sxxxx - scc * scc / n
        gc, gq, se, t, p = quadratic_solve(scc, scq, sqq, scy, sqy, syy, n)
        b1 = gc - 2 * gq * m.mean_x
        b0 = m.mean_y - b1 * m.mean_x - gq * (m.mean_x * m.mean_x + scc / n)
    return {"intercept": b0, "linear": b1, "quadratic": gq, "quadratic_se": se,
            "statistic": t, "df": n - 3, "p_value": p}


def within_quadratic_from_moments(m: Moments) -> dict:
    """OLS fit of Y = a_g + b1 X + b2 (X - mean X)^2 from per-group moments.

    Parameters
    ----------
    m : Moments
        Arrays of shape (G,), one element per group, with the higher sums.

    Returns
    -------
    dict of float
        ``intercept`` (NaN: each group has its own), ``linear, quadratic,
        quadratic_se, statistic, df, p_value`` as
        :func:`scaling.stats.residual_checks.within_quadratic_t`.

    Notes
    -----
    With the overall mean X-bar = sum n_g mean_g / N and each group's offset
    delta_g = mean_g - X-bar, the within-group centred quadratic regressor
    of row i in group g is q_i = d_i^2 + 2 delta_g d_i - Sxx_g / n_g
    (d_i = X_i - mean_g), so by Frisch-Waugh-Lovell the normal equations need

        S_cc = sum Sxx_g,  S_cq = sum (Sxxx_g + 2 delta_g Sxx_g),
        S_qq = sum (Sxxxx_g + 4 delta_g Sxxx_g + 4 delta_g^2 Sxx_g - Sxx_g^2 / n_g),
        S_cy = sum Sxy_g,  S_qy = sum (Sxxy_g + 2 delta_g Sxy_g),  S_yy = sum Syy_g,

    on N - G - 2 residual degrees of freedom; b1 = g_c - 2 g_q X-bar.
    """
    if not m.has_higher:
        raise DataError("the moments do not carry sxxx, sxxxx and sxxy; compute them "
                        "with group_moments(..., higher=True)")
    n = np.asarray(m.n, dtype=float)
    live = n > 0
    n = n[live]
    mx, sxx, sxy, syy = m.mean_x[live], m.sxx[live], m.sxy[live], m.syy[live]
    s3, s4, sxxy = m.sxxx[live], m.sxxxx[live], m.sxxy[live]
    total = float(n.sum())
    grand = float(np.sum(n * mx) / total)
    delta = mx - grand
    scc = float(np.sum(sxx))
    scq = float(np.sum(s3 + 2 * delta * sxx))
    sqq = float(np.sum(s4 + 4 * delta * s3 + 4 * delta * delta * sxx - sxx * sxx / n))
    scy = float(np.sum(sxy))
    sqy = float(np.sum(sxxy + 2 * delta * sxy))
    syy_t = float(np.sum(syy))
    df = total - n.size - 2
    if df < 1:
        raise DataError(f"{int(total)} points in {n.size} groups leave no degrees of freedom "
                        "for the quadratic term (need n - G - 2 >= 1)")
    det = scc * sqq - scq * scq
    with np.errstate(divide="ignore", invalid="ignore"):
        gc = (sqq * scy - scq * sqy) / det
        gq = (scc * sqy - scq * scy) / det
        s2 = max(syy_t - gc * scy - gq * sqy, 0.0) / df
        se = np.sqrt(s2 * scc / det)
        t = gq / se
    return {"intercept": float("nan"), "linear": gc - 2 * gq * grand, "quadratic": gq,
            "quadratic_se": float(se), "statistic": float(t), "df": float(df),
            "p_value": float(2 * tails.t_upper(abs(t), df))}


def local_exponents(quad: dict, log_x) -> np.ndarray:
    """Local exponent b1 + 2 b2 X of a quadratic fit at log-scale positions ``log_x``."""
    return quad["linear"] + 2 * quad["quadratic"] * np.asarray(log_x, dtype=float)
