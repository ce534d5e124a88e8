"""Input checks and tolerances shared by the group modules.

:mod:`scaling.stats.group_means`, :mod:`scaling.stats.common_slope` and
:mod:`scaling.stats.group_comparisons` read their log values, group labels
and log base through these helpers, so every group analysis refuses the same
inputs with the same messages.
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
