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

import os
from dataclasses import dataclass, field

import numpy as np

__all__ = ["MAX_DRAWN_POINTS", "DRAWN_TABLE", "FIGURE_DIGEST", "subset_index",
           "line_residual", "RankedResiduals", "rank_residuals", "rank_positions",
           "ranked_with_codes", "small_codes", "PendingRanks",
           "RanksToFollow", "FigureDigest"]

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


def rank_residuals(resid: np.ndarray, codes, keep: np.ndarray) -> RankedResiduals:
    """The residuals ``resid`` of all the points at the ranks ``keep`` (and the codes
    ``codes`` of their points), as the residual figure's normal-quantile panel draws them:
    ``numpy.argsort``, its quartiles by ``numpy.percentile`` of the sorted residuals."""
    return ranked_with_codes(rank_positions(resid, keep), codes)


def rank_positions(resid: np.ndarray, keep: np.ndarray) -> tuple:
    """(the sorted residuals at the ranks ``keep``, the positions of their points, the
    quartiles, the largest absolute residual): :func:`rank_residuals` without the
    points' group codes, which :func:`ranked_with_codes` adds (so a process that has
    the residuals but not the codes can rank them)."""
    order = np.argsort(resid)
    ranked = resid[order]
    q1, q3 = np.percentile(ranked, [25, 75])
    return ranked[keep], order[keep], (float(q1), float(q3)), float(np.max(np.abs(resid)))


def ranked_with_codes(parts: tuple, codes) -> RankedResiduals:
    """The :class:`RankedResiduals` of :func:`rank_positions`'s ``parts`` and the group
    codes ``codes`` of all the points (None without groups)."""
    values, positions, quartiles, largest = parts
    return RankedResiduals(values=values,
                           codes=None if codes is None else small_codes(codes[positions]),
                           quartiles=quartiles, largest=largest)


def small_codes(codes: np.ndarray) -> np.ndarray:
    """``codes`` in the smallest integer type that holds them (two bytes a point below
    32 768 groups)."""
    return codes.astype(np.min_scalar_type(int(codes.max()) if codes.size else 0))


class PendingRanks:
    """``method -> RankedResiduals`` of the pooled lines ``fits`` over all the points,
    made on first use (:meth:`ranks`), so a run can hand its figures over before it has
    ranked a million residuals per line.  Pickled, it is the ranks made."""

    __slots__ = ("_inputs", "_ranks")

    def __init__(self, fits: dict, X: np.ndarray, Y: np.ndarray, codes, keep: np.ndarray,
                 ahead=None):
        self._inputs = (fits, X, Y, codes, keep, ahead)
        self._ranks = None

    def ranks(self) -> dict:
        """``method -> RankedResiduals`` (made once; the points are let go then).

        ``ahead(method, fit)``, when given, is :func:`rank_positions` of that line made
        elsewhere (a process started once the lines were fitted), or None: then it is
        made here."""
        if self._ranks is None:
            fits, X, Y, codes, keep, ahead = self._inputs
            ranks = {}
            for method, fit in fits.items():
                parts = None if ahead is None else ahead(method, fit)
                if parts is None:
                    parts = rank_positions(line_residual(fit, X, Y), keep)
                ranks[method] = ranked_with_codes(parts, codes)
            self._ranks = ranks
            self._inputs = None
        return self._ranks

    def __reduce__(self):
        return dict, (list(self.ranks().items()),)


class RanksToFollow:
    """In place of :class:`PendingRanks` in a run sent to the figure worker: the ranks
    come after the run on the same stream (:mod:`scaling.render.figure_worker`), read
    by :meth:`ranks` in the process that reads the stream (:meth:`follow_from`)."""

    __slots__ = ("_read", "_pid", "_ranks")

    def __init__(self) -> None:
        self._read = self._pid = self._ranks = None

    def follow_from(self, read) -> None:
        """``read()`` gives the ranks, in this process only (the processes it forks share
        the stream but must not read it)."""
        self._read, self._pid = read, os.getpid()

    def ranks(self) -> dict:
        """``method -> RankedResiduals``, read on first use."""
        if self._ranks is None:
            if self._read is None or self._pid != os.getpid():
                raise RuntimeError("the ranked residuals follow the run in another process")
            self._ranks, self._read = self._read(), None
        return self._ranks


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
    residuals : dict or PendingRanks or RanksToFollow
        ``method -> RankedResiduals`` of each pooled line the residual figure draws (or
        the means to them: :func:`scaling.render.figure_inputs.residual_ranks`).
    """

    n: int
    groups: tuple = ()
    sizes: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    x_range: tuple = (np.nan, np.nan)
    residuals: dict = field(default_factory=dict)


#: Above this many groups the scaling and natural figures draw the own lines, means,
#: curves and predictions of this many of them (:func:`groups_spread_over_slopes`): ten
#: thousand lines hide the points and one another, and cost seconds to draw.
GROUP_LINES_MAX = 50


def groups_spread_over_slopes(groups: list, slopes: dict) -> list:
    """The groups whose own lines the figures draw: all of ``groups`` that have a slope
    in ``slopes`` (group -> the finite slope of its own line) up to
    :data:`GROUP_LINES_MAX` of them; above, :data:`GROUP_LINES_MAX` at evenly spaced
    ranks of their slopes (ties by their place in ``groups``), the lowest and the
    highest among them.  In the order of ``groups``; none with a slope: ``groups``
    spaced evenly (a run without lines of its groups)."""
    names = [g for g in groups if g in slopes]
    if not names:
        names, values = list(groups), np.zeros(len(groups))
    else:
        values = np.array([slopes[g] for g in names], dtype=float)
    if len(names) <= GROUP_LINES_MAX:
        return names
    order = np.lexsort((np.arange(len(names)), values))
    picks = order[np.round(np.linspace(0, len(names) - 1, GROUP_LINES_MAX)).astype(int)]
    return [names[i] for i in np.sort(picks)]


def drawn_line_slopes(result) -> dict:
    """:func:`group_line_slopes` of the method whose group lines the figures draw: the
    run's primary method (``model.primary``, else as
    :func:`~scaling.render.headline.primary_method` picks), else SMA, else the first."""
    from .headline import primary_method   # pandas, not matplotlib
    methods = list(result.config.model.methods)
    if not methods or not result.line_fits:
        return {}
    chosen = primary_method(methods, getattr(result.config.model, "primary", None))
    method = chosen if chosen in methods else ("sma" if "sma" in methods else methods[0])
    return group_line_slopes(result.line_fits, method)


def group_line_slopes(line_fits: dict, method) -> dict:
    """``group -> slope`` of each group's own estimable ``method`` line with a finite
    slope (what :func:`groups_spread_over_slopes` ranks)."""
    out = {}
    for (scope, group, m), fit in line_fits.items():
        if scope == "group" and m == method and getattr(fit, "estimable", True):
            slope = float(fit.slope)
            if np.isfinite(slope):
                out[group] = slope
    return out
