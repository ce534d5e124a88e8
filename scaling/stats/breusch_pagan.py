"""Breusch-Pagan test of constant variance in closed form (one set of points or many groups).

Koenker's studentised Breusch-Pagan LM on the regressors (1, X): LM = n R^2 of e^2 on
(1, X), chi-square with 1 df (Breusch & Pagan 1979, *Econometrica* 47:1287; Koenker
1981, *J. Econometrics* 17:107).  Used by :mod:`scaling.stats.residual_checks`.
"""

from __future__ import annotations

import numpy as np

from . import tails
from ..errors import DataError

__all__ = ["breusch_pagan"]


def breusch_pagan(resid, log_x, groups=None, *, n_groups: int | None = None) -> tuple:
    """Koenker's studentised Breusch-Pagan LM on regressors (1, X) and its p-value.

    Parameters
    ----------
    resid, log_x : array_like, shape (n,)
        Residuals e and the regressor X.
    groups : array_like of int, shape (n,), optional
        Integer group code (0 .. n_groups - 1) of each point: one test per
        group, all in one pass (``np.bincount``).  None: one test of all points.
    n_groups : int, optional
        Number of groups (default ``groups.max() + 1``).

    Returns
    -------
    statistic, p_value : float, or ndarray of shape (n_groups,)
        LM = n R^2, chi-square 1 df; NaN where e^2 or X does not vary.

    Notes
    -----
    With w = e^2, the R^2 of w regressed on (1, X) is the squared
    correlation of w and X, so LM = n S_wx^2 / (S_xx S_ww) with the centred
    sums S_wx, S_xx, S_ww (Breusch & Pagan 1979, *Econometrica* 47:1287;
    Koenker 1981, *J. Econometrics* 17:107).  ``het_breuschpagan`` of
    statsmodels (default ``robust=True``) computes the same as n (1 - RSS/TSS)
    by least squares; the two agree to rounding.
    """
    e = np.asarray(resid, dtype=float)
    X = np.asarray(log_x, dtype=float)
    if e.ndim != 1 or e.shape != X.shape:
        raise DataError("resid and log_x must be one-dimensional and of equal length")
    w = e * e
    if groups is None:
        return _breusch_pagan_centred(w, _centred(X))
    codes = np.asarray(groups)
    if codes.shape != X.shape or codes.dtype.kind not in "iu":
        raise DataError("groups must be integer codes, one per point")
    k = int(codes.max()) + 1 if n_groups is None and codes.size else int(n_groups or 0)
    n = np.bincount(codes, minlength=k).astype(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        wc = w - (np.bincount(codes, weights=w, minlength=k) / n)[codes]
        xc = X - (np.bincount(codes, weights=X, minlength=k) / n)[codes]
    swx = np.bincount(codes, weights=wc * xc, minlength=k)
    sxx = np.bincount(codes, weights=xc * xc, minlength=k)
    sww = np.bincount(codes, weights=wc * wc, minlength=k)
    with np.errstate(divide="ignore", invalid="ignore"):
        lm = n * swx * swx / (sxx * sww)
    lm = np.where((sxx > 0) & (sww > 0), lm, np.nan)
    return lm, tails.chi2_upper(lm, 1)


def _centred(X: np.ndarray) -> tuple:
    """``(X - mean X, sum of its squares)``: the regressor's part of :func:`breusch_pagan`,
    the same for every line through the same points."""
    xc = X - X.mean()
    return xc, np.sum(xc * xc)


def _breusch_pagan_centred(w: np.ndarray, centred: tuple) -> tuple:
    """:func:`breusch_pagan` of one set of points from w = e^2 and :func:`_centred` of X."""
    xc, sxx = centred
    wc = w - w.mean()
    n, swx, sww = float(xc.size), np.sum(wc * xc), np.sum(wc * wc)
    with np.errstate(divide="ignore", invalid="ignore"):
        lm = n * swx * swx / (sxx * sww)
    lm = np.where((sxx > 0) & (sww > 0), lm, np.nan)
    return float(lm), float(tails.chi2_upper(lm, 1))
