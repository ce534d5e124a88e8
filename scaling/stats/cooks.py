"""Cook's distance of every point of a straight OLS line, in closed form.

D_i = e_i^2 h_i / (2 s^2 (1 - h_i)^2), with the leverage
h_i = 1/n + (X_i - mean X)^2 / S_xx and s^2 = sum e^2 / (n - 2) (Cook 1977,
*Technometrics* 19:15).  It is the same quantity as statsmodels'
``OLSInfluence(...).cooks_distance[0]``, computed from centred sums instead of
a hat matrix, a slice of the points at a time: no n-by-2 design matrix and no
model object per line, which on a million-point pooled line is most of the
memory of the residual checks.  Digits beyond about the twelfth can differ
from statsmodels' (a different order of operations).
"""

from __future__ import annotations

import numpy as np

__all__ = ["SPAN", "spans", "ols_cooks_distances"]

#: Points handled at a time by the elementwise steps of the influence measures (the
#: numbers do not depend on it; the temporary arrays stay a few megabytes).
SPAN = 1 << 16


def spans(n: int) -> list:
    """``(start, stop)`` slices of 0 .. n - 1, :data:`SPAN` points each."""
    return [(lo, min(lo + SPAN, n)) for lo in range(0, n, SPAN)] or [(0, 0)]


def ols_cooks_distances(X: np.ndarray, Y: np.ndarray) -> np.ndarray:
    """Cook's distances of the OLS line of ``Y`` on ``X`` (arrays of shape (..., n)).

    No checks of the input (see :func:`scaling.stats.influence.cooks_distances`
    for the checked public form).

    Returns
    -------
    ndarray, shape (..., n)
    """
    n = X.shape[-1]
    xc = X - X.mean(axis=-1, keepdims=True)
    yc = Y - Y.mean(axis=-1, keepdims=True)
    sxx = np.sum(xc * xc, axis=-1, keepdims=True)
    with np.errstate(divide="ignore", invalid="ignore"):
        b = np.sum(xc * yc, axis=-1, keepdims=True) / sxx
        e = yc - b * xc
        del yc
        s2 = np.sum(e * e, axis=-1, keepdims=True) / (n - 2)
        out = np.empty(e.shape)
        for lo, hi in spans(n):   # elementwise from here: a slice at a time
            xs, es = xc[..., lo:hi], e[..., lo:hi]
            h = 1.0 / n + xs * xs / sxx
            out[..., lo:hi] = es * es * h / (2 * s2 * (1 - h) ** 2)
        return out
