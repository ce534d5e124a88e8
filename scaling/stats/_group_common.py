"""Input checks and tolerances shared by the group modules.

:mod:`scaling.stats.group_means`, :mod:`scaling.stats.common_slope` and
:mod:`scaling.stats.group_comparisons` read their log values, group labels
and log base through these helpers, so every group analysis refuses the same
inputs with the same messages.  :func:`holm_adjust` adjusts the pairwise p-values
of the ordinary and the phylogenetic group comparisons alike.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..errors import ConfigError, DataError
from .logscale import parse_log_base

#: Within-group residual share 1 - r^2 below which the data count as an exact
#: power law (no residual scatter), for the whole comparison (OLS) or a group
#: (SMA, MA).
EXACT_FIT_TOL = 2e-12


def check_base(log_base):
    """The log base as a number (or None), ConfigError naming the value otherwise."""
    try:
        return parse_log_base(log_base)
    except ValueError as exc:
        raise ConfigError(str(exc)) from None


def factorize(groups, n_rows: int):
    """Integer codes (sorted labels) of one group label per row, and the labels."""
    if isinstance(groups, pd.Series):
        groups = groups.to_numpy(dtype=object)
    else:
        groups = np.asarray(groups, dtype=object)
    if groups.ndim != 1 or groups.size != n_rows:
        raise DataError(f"groups must be one label per row ({n_rows} rows), "
                        f"not shape {groups.shape}")
    codes, labels = pd.factorize(pd.Series(groups), sort=True, use_na_sentinel=True)
    if np.any(codes < 0):
        raise DataError("groups has missing labels; drop or name those rows first")
    return codes.astype(np.intp), tuple(labels.tolist())


def check_logs(log_x, log_y):
    """``log_x`` and ``log_y`` as finite 1-d float arrays of one length."""
    X = np.asarray(log_x, dtype=float)
    Y = np.asarray(log_y, dtype=float)
    if X.ndim != 1 or X.shape != Y.shape:
        raise DataError(f"log_x and log_y must be 1-d arrays of one length, "
                        f"not shapes {X.shape} and {Y.shape}")
    if not (np.all(np.isfinite(X)) and np.all(np.isfinite(Y))):
        raise DataError("log_x and log_y must be finite numbers (no NaN or inf)")
    return X, Y


def holm_adjust(p) -> np.ndarray:
    """Holm (1979, Scand. J. Statist. 6:65) step-down adjusted p-values.

    The i-th smallest of m finite p-values becomes
    ``max_{j <= i} min(1, (m - j + 1) p_(j))``; non-finite p-values stay NaN
    and do not count in m.

    Parameters
    ----------
    p : array_like
        Unadjusted p-values, in any order.

    Returns
    -------
    ndarray
        Adjusted p-values in the order given.

    Examples
    --------
    >>> holm_adjust([0.01, 0.04, 0.03]).round(3).tolist()
    [0.03, 0.06, 0.06]
    """
    # Written here rather than calling statsmodels' multipletests, which runs a
    # full garbage collection on every call (about 0.09 s each in a demo run).
    p = np.asarray(p, dtype=float)
    out = np.full(p.shape, np.nan)
    ok = np.isfinite(p)
    q = p[ok]
    if q.size:
        order = np.argsort(q)
        adjusted = np.maximum.accumulate(q[order] * np.arange(q.size, 0, -1))
        adjusted[adjusted > 1] = 1
        values = np.empty_like(adjusted)
        values[order] = adjusted
        out[ok] = values
    return out
