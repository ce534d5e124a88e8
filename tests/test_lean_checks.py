"""The checks' leaner steps give the same numbers as the steps they replace.

Internal consistency throughout: each function is compared with the numpy or
package call it stands in for, bit for bit.
"""

from __future__ import annotations

import numpy as np
import pytest

from scaling.stats.error_structure import _polyfit_line
from scaling.stats.influence import points_to_check


@pytest.mark.parametrize("n", [5, 17, 1000, 70_001])
def test_log_line_is_numpy_polyfit_bit_for_bit(n):
    rng = np.random.default_rng(n)
    for _ in range(4):
        lx = rng.normal(size=n) * rng.uniform(0.01, 30) + rng.uniform(-50, 50)
        ly = 0.7 * lx + rng.normal(size=n) * rng.uniform(1e-6, 3)
        slope, intercept = np.polyfit(lx, ly, 1)   # reference: numpy
        assert _polyfit_line(lx, ly) == (slope, intercept)


def test_log_line_of_an_exact_line_is_polyfits():
    lx = np.log(np.array([1.0, 2.0, 4.0, 8.0, 16.0]))
    ly = 2.0 * lx - 1.0   # exact law: slope 2, intercept -1 (up to rounding)
    assert _polyfit_line(lx, ly) == tuple(np.polyfit(lx, ly, 1))


def test_points_to_check_without_labels_names_flagged_points_with_empty_text():
    rng = np.random.default_rng(5)
    x = rng.normal(size=60)
    y = 0.75 * x + rng.normal(scale=0.05, size=60)
    x[7], y[7] = 6.0, -4.0   # one far point pulls the line
    without = points_to_check(x, y, rows=np.arange(1, 61))
    given = points_to_check(x, y, rows=np.arange(1, 61), labels=np.full(60, "", dtype=object))
    assert without == given
    assert any(c.kind == "influence" and c.row == 8 and c.label == "" for c in without)
    with pytest.raises(Exception, match="one value per point"):
        points_to_check(x, y, labels=np.full(59, "", dtype=object))
