"""fits.csv rows: the row builder equals its plain definition.

Internal consistency throughout: :func:`scaling.stats.fit_rows.fit_row` against the
column-by-column lookup it stands for (the same keys in the same order, the same values).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from scaling.stats.fit_rows import fit_row, fit_values
from scaling.stats.line_results import fit_line
from scaling.stats.schema import FIT_COLUMNS


def _plain_row(fit=None, *, scope="", group="", x_range=None, y_range=None, **columns):
    known = fit_values(fit) if fit is not None else {}
    if x_range is None:
        x_range = getattr(fit, "x_range", None) or (math.nan, math.nan)
    if y_range is None:
        y_range = getattr(fit, "y_range", None) or (math.nan, math.nan)
    known.update({"scope": scope, "group": group, "x_min": x_range[0], "x_max": x_range[1],
                  "y_min": y_range[0], "y_max": y_range[1]})
    known.update(columns)
    row = {c: known.get(c, math.nan) for c in FIT_COLUMNS}
    row.update({k: v for k, v in columns.items() if k not in row})
    return row


def _same(a: dict, b: dict) -> bool:
    return list(a) == list(b) and all(
        (isinstance(v, float) and isinstance(b[k], float) and math.isnan(v) and math.isnan(b[k]))
        or v is b[k] or v == b[k] for k, v in a.items())


@pytest.mark.parametrize("n", [1, 3, 50])
def test_fit_row_equals_its_plain_lookup(n):
    rng = np.random.default_rng(n)
    x = np.exp(rng.normal(0, 1, n))
    fits = [None]
    if n >= 3:
        fits.append(fit_line(x, 2 * x ** 0.75 * np.exp(rng.normal(0, 0.1, n)), method="ols"))
        fits.append(fit_line(x, 2 * x ** 0.75, method="sma"))   # exact data
    for fit in fits:
        for kw in ({}, {"scope": "group", "group": "a"},
                   {"x_range": (1.0, 2.0), "y_range": (3.0, 4.0), "slope": 0.5, "n": 7},
                   {"note": "n = 1 < 3", "lambda": 0.3, "lambda_low": 0.1, "x_min": 9.0},
                   {"method": "ma", "log_base": "e", "slope": math.nan}):
            got, want = fit_row(fit, **kw), _plain_row(fit, **kw)
            assert _same(got, want), (fit, kw)
            assert list(got)[:len(FIT_COLUMNS)] == list(FIT_COLUMNS)
