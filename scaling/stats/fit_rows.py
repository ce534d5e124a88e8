"""The rows of ``fits.csv``, built in one place.

:func:`fit_row` builds one row (a dict in the column order of
:data:`scaling.stats.schema.FIT_COLUMNS`) from a fit object, from plain
values, or from both (values given by keyword win).  :func:`fit_rows` is its
vectorised twin: the same columns for many groups at once, from arrays, as a
DataFrame.  The twin exists because the grouped fits of large tables hold one
array per column for thousands of groups; building a dict per group there
would put a Python loop over groups back into the vectorised path.

Every site that writes a fits row calls one of the two: the run's stages
(ordinary, group means, common slope, phylogenetic), the per-group fits of
large tables, and :func:`scaling.fit_groups`.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from .logscale import base_label
from .schema import FIT_COLUMNS

__all__ = ["ESTIMATE_COLUMNS", "RANGE_COLUMNS", "fit_row", "fit_rows", "fit_values"]

#: The numeric columns of a fit's estimates (blank when the fit is not estimable;
#: the slope gap is blank too unless the accepted slopes are two ranges).
ESTIMATE_COLUMNS = ("slope", "slope_low", "slope_high", "intercept", "intercept_low",
                    "intercept_high", "r", "r2", "slope_se", "intercept_se", "resid_sd",
                    "slope_gap_low", "slope_gap_high")
#: The fitted ranges, in natural units (logs when the run has no log base).
RANGE_COLUMNS = ("x_min", "x_max", "y_min", "y_max")

_NAN_PAIR = (math.nan, math.nan)
_FIT_SET = frozenset(FIT_COLUMNS)


def fit_values(fit) -> dict:
    """The columns a fit object knows about itself.

    Reads the attributes shared by :class:`~scaling.stats.lines.LineFit` and
    :class:`~scaling.stats.phylogeny.PhyloFit` (``slope_ci``, ``intercept_ci``,
    ``r``, ...); an attribute a fit lacks stays blank.  ``deming_lambda`` is
    the error-variance ratio of a Deming line and None otherwise (a
    phylogenetic fit's ``lam`` is Pagel's lambda, not this).
    """
    out = {"method": fit.method, "n": fit.n}
    for name, value in (("slope", "slope"), ("intercept", "intercept")):
        out[name] = getattr(fit, value, math.nan)
        ci = getattr(fit, f"{value}_ci", None)
        out[f"{name}_low"], out[f"{name}_high"] = (ci.low, ci.high) if ci is not None else _NAN_PAIR
    for name in ("r", "r2", "slope_se", "intercept_se", "resid_sd", "slope_gap_low",
                 "slope_gap_high"):
        out[name] = getattr(fit, name, math.nan)
    if hasattr(fit, "log_base"):
        out["log_base"] = base_label(fit.log_base)
    out["confidence"] = fit.confidence
    out["note"] = getattr(fit, "note", "")
    out["interval_method"] = getattr(fit, "interval_method", "analytic")
    lam = getattr(fit, "lam", None)
    out["deming_lambda"] = float(lam) if fit.method == "deming" and lam is not None else None
    return out


def fit_row(fit=None, *, scope: str = "", group: str = "", x_range=None, y_range=None,
            **columns) -> dict:
    """One row of ``fits.csv``.

    Parameters
    ----------
    fit : LineFit, PhyloFit or None
        Read for ``method, n``, the estimates and their intervals, ``r``,
        ``r2``, the standard errors, the slope gap (``slope_gap_low``,
        ``slope_gap_high``), ``log_base`` (written as its label),
        ``confidence``, ``note``, ``interval_method`` and (Deming)
        ``deming_lambda``.  None: every value comes from ``columns``.
    scope, group : str
        Which fit the row is (``pooled``, ``group``, ``group_means``,
        ``common``, ``phylo``; ``group`` blank unless scope is ``group``).
    x_range, y_range : (low, high), optional
        The fitted ranges (``x_min, x_max, y_min, y_max``); default: the
        fit's own ``x_range`` / ``y_range`` when it has them, else blank.
    **columns
        Any column of :data:`~scaling.stats.schema.FIT_COLUMNS` (given values
        win over those read from ``fit``; ``log_base`` as its label, "10",
        "e", "2" or "none").  Keys outside that list (e.g. the phylogenetic
        ``lambda`` columns) are kept after the fits columns.

    Returns
    -------
    dict
        Every column of ``FIT_COLUMNS`` in order (NaN where nothing was
        given), then the extra keys of ``columns``.

    Examples
    --------
    >>> row = fit_row(scope="pooled", method="ols", n=2, log_base="10",
    ...               confidence=0.95, note="n = 2 < 3: too few points to fit a line")
    >>> list(row)[:4], row["slope"]
    (['scope', 'group', 'method', 'n'], nan)
    """
    if x_range is None:
        x_range = getattr(fit, "x_range", None) or _NAN_PAIR
    if y_range is None:
        y_range = getattr(fit, "y_range", None) or _NAN_PAIR
    # every column in order, NaN until given; later sources win (the fit's values, the
    # scope and ranges, then ``columns``, whose keys outside FIT_COLUMNS follow in order)
    row = dict.fromkeys(FIT_COLUMNS, math.nan)
    if fit is not None:
        row.update((k, v) for k, v in fit_values(fit).items() if k in _FIT_SET)
    row.update(scope=scope, group=group, x_min=x_range[0], x_max=x_range[1],
               y_min=y_range[0], y_max=y_range[1])
    row.update(columns)
    return row


def fit_rows(n_rows: int, **columns) -> pd.DataFrame:
    """Many rows of ``fits.csv`` at once: the vectorised twin of :func:`fit_row`.

    Parameters
    ----------
    n_rows : int
        Number of rows (groups).
    **columns
        Column -> array of ``n_rows`` values, or one value for every row
        (text as an object column, numbers as floats).  A column of
        ``FIT_COLUMNS`` not given is NaN.

    Returns
    -------
    DataFrame
        Columns ``FIT_COLUMNS`` in order.
    """
    data = {}
    for c in FIT_COLUMNS:
        v = columns.get(c, math.nan)
        if isinstance(v, str):
            v = np.full(n_rows, v, dtype=object)
        elif np.ndim(v) == 0:
            v = np.full(n_rows, v)
        data[c] = v
    return pd.DataFrame(data, columns=FIT_COLUMNS)
