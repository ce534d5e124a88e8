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

__all__ = ["SPAN", "spans", "sliced_sums", "ols_cooks_distances"]

#: Points handled at a time by the elementwise steps of the influence measures (the
#: numbers do not depend on it; the temporary arrays stay a few megabytes).
SPAN = 1 << 16


def spans(n: int) -> list:
    """``(start, stop)`` slices of 0 .. n - 1, :data:`SPAN` points each."""
    return [(lo, min(lo + SPAN, n)) for lo in range(0, n, SPAN)] or [(0, 0)]


def sliced_sums(terms, n: int) -> np.ndarray:
    """``[numpy.sum(t) for t in terms(0, n)]``, the same floats, from slices of at
    most :data:`SPAN` points (no temporary array of all n points).

    Parameters
    ----------
    terms : callable
        ``terms(lo, hi)`` -> sequence of one-dimensional float arrays, the terms of
        points ``lo .. hi - 1`` (elementwise in the points).
    n : int

    Returns
    -------
    ndarray, shape (k,)

    Notes
    -----
    numpy adds a float64 array pairwise: a part longer than 128 values is cut in
    two, the first half rounded down to a multiple of 8, each half summed alike
    and the two sums added; the whole sum is added to 0.  The slices follow those
    cuts, so each part's sum is the float numpy gives it (pinned by the tests).
    """
    def total(lo: int, hi: int) -> np.ndarray:
        if hi - lo <= SPAN:
            return np.array([np.sum(t) for t in terms(lo, hi)], dtype=float)
        half = (hi - lo) // 2
        half -= half % 8
        return total(lo, lo + half) + total(lo + half, hi)
    return 0.0 + total(0, n)


def ols_cooks_distances(X: np.ndarray, Y: np.ndarray) -> np.ndarray:
    """Cook's distances of the OLS line of ``Y`` on ``X`` (arrays of shape (..., n)).

    No checks of the input (see :func:`scaling.stats.influence.cooks_distances`
    for the checked public form).

    Returns
    -------
    ndarray, shape (..., n)
    """
    n = X.shape[-1]
    if X.ndim == 1 and n > SPAN:
        return _sliced_cooks(X, Y)
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


def _sliced_cooks(X: np.ndarray, Y: np.ndarray) -> np.ndarray:
    """:func:`ols_cooks_distances` of one long line, the same floats, a slice of the
    points at a time (:func:`sliced_sums`): the distances are the only array of n."""
    n = X.size
    mx, my = X.mean(axis=-1, keepdims=True), Y.mean(axis=-1, keepdims=True)

    def centred(lo, hi):
        return X[lo:hi] - mx, Y[lo:hi] - my

    def cross(lo, hi):
        xc, yc = centred(lo, hi)
        return xc * xc, xc * yc

    sxx, sxy = (v.reshape(1) for v in sliced_sums(cross, n))
    with np.errstate(divide="ignore", invalid="ignore"):
        b = sxy / sxx

        def squared_residuals(lo, hi):
            xc, yc = centred(lo, hi)
            e = yc - b * xc
            return (e * e,)

        s2 = sliced_sums(squared_residuals, n).reshape(1) / (n - 2)
        out = np.empty(n)
        for lo, hi in spans(n):
            xs, ys = centred(lo, hi)
            es = ys - b * xs
            h = 1.0 / n + xs * xs / sxx
            out[lo:hi] = es * es * h / (2 * s2 * (1 - h) ** 2)
        return out
