"""Which points a scatter draws, and what the figures read of all the points, without
matplotlib.

The in-memory figures thin their points with :func:`subset_index`, and the moments
path's second pass (:mod:`scaling.run.second_pass`) collects the same points while the
rows stream past, so both roads draw the same points (without importing a plotting
library into the run's process).  Above :data:`MAX_DRAWN_POINTS` points an in-memory
run hands its figures those points and a :class:`FigureDigest` of all of them
(:mod:`scaling.run.figure_digest`) instead of every point: the few numbers its figures
read of all the points, made once in the run's process.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["MAX_DRAWN_POINTS", "DRAWN_TABLE", "FIGURE_DIGEST", "subset_index",
           "line_residual", "RankedResiduals", "FigureDigest"]

#: Scatter plots draw a seeded random subset of this many points above it (stated on the axes).
MAX_DRAWN_POINTS = 5_000

#: A moments-path result's table of the points its figures draw (``result.tables``; the
#: leading underscore keeps it out of the CSV files, results.json and the report).
DRAWN_TABLE = "_drawn_points"

#: The :class:`FigureDigest` of a result cut for its figures (``result.tables``; never
#: part of a run's own result, only of what its figures are handed).
FIGURE_DIGEST = "_figure_digest"


def subset_index(n: int, limit: int = MAX_DRAWN_POINTS):
    """Sorted indices of the seeded random subset of ``limit`` of ``n`` points, or None
    when all ``n`` are drawn (``n <= limit``).

    The positions depend on ``n`` and ``limit`` only, so a pass that sees the points
    one chunk at a time, in the same order, finds the same points.
    """
    if n <= limit:
        return None
    return np.sort(np.random.default_rng(0).choice(n, limit, replace=False))


def line_residual(fit, X: np.ndarray, Y: np.ndarray) -> np.ndarray:
    """``Y - a - bX`` of a line fit on the log scale (element by element, so a subset's
    residuals are those of the whole, bit for bit)."""
    return Y - fit.intercept - fit.slope * X


@dataclass(frozen=True, slots=True, kw_only=True)
class RankedResiduals:
    """What a normal-quantile panel reads of the residuals of all ``n`` points of a line.

    Attributes
    ----------
    values : ndarray
        The sorted residuals at the ranks :func:`subset_index` picks of ``n``.
    codes : ndarray or None
        The group codes of the points at those ranks, in the smallest integer type that
        holds them (None without groups).
    quartiles : tuple of float
        25th and 75th percentiles of all the residuals (``numpy.percentile``).
    largest : float
        The largest absolute residual.
    """

    values: np.ndarray
    codes: np.ndarray | None
    quartiles: tuple
    largest: float


@dataclass(frozen=True, slots=True, kw_only=True)
class FigureDigest:
    """What a run's figures read of all its points, when they are handed only the points
    they draw (``result.tables[DRAWN_TABLE]``).

    Attributes
    ----------
    n : int
        Points of the run.
    groups : tuple of str
        The groups of the points, sorted as text (empty without groups).
    sizes : ndarray
        Points in each of ``groups``.
    x_range : tuple of float
        Smallest and largest natural x of the points.
    residuals : dict
        ``method -> RankedResiduals`` of each pooled line the residual figure draws.
    """

    n: int
    groups: tuple = ()
    sizes: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    x_range: tuple = (np.nan, np.nan)
    residuals: dict = field(default_factory=dict)
