"""Which points a scatter draws: the seeded subset, without matplotlib.

The in-memory figures thin their points with it, and the moments path's second
pass (:mod:`scaling.run.second_pass`) collects the same points while the rows
stream past, so both roads draw the same points (without importing a plotting
library into the run's process).
"""

from __future__ import annotations

import numpy as np

__all__ = ["MAX_DRAWN_POINTS", "DRAWN_TABLE", "subset_index"]

#: Scatter plots draw a seeded random subset of this many points above it (stated on the axes).
MAX_DRAWN_POINTS = 5_000

#: A moments-path result's table of the points its figures draw (``result.tables``; the
#: leading underscore keeps it out of the CSV files, results.json and the report).
DRAWN_TABLE = "_drawn_points"


def subset_index(n: int, limit: int = MAX_DRAWN_POINTS):
    """Sorted indices of the seeded random subset of ``limit`` of ``n`` points, or None
    when all ``n`` are drawn (``n <= limit``).

    The positions depend on ``n`` and ``limit`` only, so a pass that sees the points
    one chunk at a time, in the same order, finds the same points.
    """
    if n <= limit:
        return None
    return np.sort(np.random.default_rng(0).choice(n, limit, replace=False))
