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
(``group_moments(..., higher=True)``), vectorised over groups.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from ..errors import DataError
from .moments import Moments

__all__ = ["quadratic_from_moments", "local_exponents"]


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
        det = scc * sqq - scq * scq
        gc = (sqq * scy - scq * sqy) / det
        gq = (scc * sqy - scq * scy) / det
        s2 = np.maximum(syy - gc * scy - gq * sqy, 0.0) / (n - 3)
        se = np.sqrt(s2 * scc / det)
        t = gq / se
        p = 2 * stats.t.sf(np.abs(t), n - 3)
        b1 = gc - 2 * gq * m.mean_x
        b0 = m.mean_y - b1 * m.mean_x - gq * (m.mean_x * m.mean_x + scc / n)
    return {"intercept": b0, "linear": b1, "quadratic": gq, "quadratic_se": se,
            "statistic": t, "df": n - 3, "p_value": p}


def local_exponents(quad: dict, log_x) -> np.ndarray:
    """Local exponent b1 + 2 b2 X of a quadratic fit at log-scale positions ``log_x``."""
    return quad["linear"] + 2 * quad["quadratic"] * np.asarray(log_x, dtype=float)
