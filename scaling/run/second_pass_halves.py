"""The second pass's residual sums over the row spill, in two halves on two cores.

The moments path's second pass (:func:`scaling.run.second_pass.residual_sums`)
adds every usable row to a :class:`~scaling.stats.streaming_residuals.ResidualSums`
and, grouped, a :class:`~scaling.stats.streaming_residuals.GroupResidualSums`.
Read from the first pass's spill (:class:`~scaling.run.table_moments.RowSpill`),
the chunks are split into two contiguous halves (:func:`split_point`): a forked
process (:class:`~scaling.run.background.Background`) sums the second half into
sums of its own while the run's process sums the first; then the child's sums
are merged into the first half's.  The halves are always summed apart and merged
in that order, whether the child forked or the call was made in the run's process
(``SCALING_ONE_PROCESS=1``, not Linux, one core, other threads running, or a child
that died), so the numbers do not depend on the machine.  They differ from one
sequential sum of every chunk only in the last bits of the sums (one more
addition: first half + second half); the counts and the kept influential rows
(a selection by value, ties by row number) are the same.

The points the figures draw (:class:`~scaling.run.second_pass.DrawnPoints`) are
counted in file order: each half picks its own, the second half's counted from the
first half's usable rows (the spill holds usable rows only), and the second half's
picks follow the first's; so each process reads only its half of the spill.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..stats.streaming_residuals import GroupResidualSums, ResidualSums
from .background import Background

__all__ = ["MIN_SPLIT_ROWS", "split_point", "spill_sums", "add_rows"]

#: Usable rows in the spill below which one process sums every chunk.  Forking the
#: run (a few ms for its page tables), pickling the child's sums back (S x M arrays:
#: 9 MB at 1e4 groups and 3 methods) and merging them cost some 20-50 ms, and the
#: sums go at about 6e6 rows a second; a half of 1e5 rows (under 20 ms) no longer
#: pays for that.
MIN_SPLIT_ROWS = 200_000


def split_point(sizes) -> int | None:
    """Where the second half of the spill's chunks starts, or None: one process.

    Parameters
    ----------
    sizes : sequence of int
        Rows of each chunk, in order.

    Returns
    -------
    int or None
        The first chunk of the second half: of the cuts between chunks, the one
        nearest half of the rows (the earlier on a tie).  None below
        :data:`MIN_SPLIT_ROWS` rows or with fewer than two chunks.
    """
    sizes = np.asarray(sizes, dtype=np.int64)
    if sizes.size < 2 or int(sizes.sum()) < MIN_SPLIT_ROWS:
        return None
    before = np.cumsum(sizes)[:-1]          # rows before each possible cut
    return int(np.argmin(np.abs(2 * before - int(sizes.sum())))) + 1


def add_rows(acc: ResidualSums | None, between, labels, codes, X, Y, rows, label_index,
             grouped: bool, drawn=None, x=None, y=None) -> None:
    """Add a chunk's usable rows (log x, log y, chunk group codes, row numbers; ``x, y``
    in natural units when at hand) to the sums and to the points drawn (``drawn``, a
    :class:`~scaling.run.second_pass.DrawnPoints`, when not None); ``acc`` None: only
    to the points drawn."""
    if not X.size:
        return
    local = (label_index.get_indexer(pd.Index(labels).astype(str))[codes] if grouped
             else None)
    if drawn is not None:
        drawn.add(X, Y, rows, local, x, y)
    if acc is None:
        return
    acc.add(np.zeros(X.size, dtype=np.intp), X, Y, rows)          # the pooled set
    if grouped:
        acc.add(1 + local, X, Y, rows)
        between.add(local, X, Y)


def half_sums(spill, start: int, stop: int | None, params: dict, between_params: dict,
              label_index: pd.Index, grouped: bool, drawn=None, first: int = 0) -> tuple:
    """The residual sums of the spill's chunks ``start`` to ``stop`` (excluded), in sums
    of their own, and the points ``drawn`` picks among them, its first point being the
    run's point ``first``: ``(ResidualSums, GroupResidualSums, parts or None)``
    (``drawn`` itself is left as it is)."""
    acc = ResidualSums(**params)
    between = GroupResidualSums(**between_params)
    picker = None if drawn is None else drawn.starting_at(first)
    for chunk in spill.chunks(start, stop):
        add_rows(acc, between, chunk.labels, chunk.codes, chunk.X, chunk.Y, chunk.rows,
                 label_index, grouped, picker)
    return acc, between, (None if picker is None else picker.parts)


def spill_sums(spill, params: dict, between_params: dict, label_index: pd.Index,
               grouped: bool, drawn=None) -> tuple:
    """Every chunk of ``spill`` summed: ``(ResidualSums, GroupResidualSums)``.

    Parameters
    ----------
    spill : RowSpill
        The first pass's rows (usable).
    params, between_params : dict
        Arguments of the two kinds of sums (the lines and the sets' moments).
    label_index : Index
        The run's group names (chunk labels are placed among them).
    grouped : bool
    drawn : DrawnPoints, optional
        The points drawn, picked in file order (filled in place).

    Notes
    -----
    At :data:`MIN_SPLIT_ROWS` rows and two chunks or more, the chunks from
    :func:`split_point` on are summed by :func:`half_sums` in a forked child
    while this process sums the others; the child's sums are merged into these.
    Should the child fail (die, or raise), its half is summed here by the same
    function, so the numbers are the same.
    """
    sizes = spill.chunk_sizes()        # flushes the spill before any fork
    cut = split_point(sizes)
    if cut is None:
        acc = ResidualSums(**params)
        between = GroupResidualSums(**between_params)
        for chunk in spill.chunks():
            add_rows(acc, between, chunk.labels, chunk.codes, chunk.X, chunk.Y, chunk.rows,
                     label_index, grouped, drawn)
        return acc, between
    first = int(sum(sizes[:cut]))     # the spill holds usable rows only: points
    args = (spill, cut, None, params, between_params, label_index, grouped, drawn, first)
    child = Background(half_sums, *args)
    try:
        acc = ResidualSums(**params)
        between = GroupResidualSums(**between_params)
        for chunk in spill.chunks(0, cut):
            add_rows(acc, between, chunk.labels, chunk.codes, chunk.X, chunk.Y, chunk.rows,
                     label_index, grouped, drawn)
        try:
            later, later_between, parts = child.result()
        except Exception:  # noqa: BLE001 -- the child's failure: its half summed here
            later, later_between, parts = half_sums(*args)
    finally:
        child.stop()       # the child never outlives this call (no-op once read)
    acc.merge(later)
    between.merge(later_between)
    if drawn is not None:   # the second half's points drawn follow the first half's
        drawn.parts += parts
        drawn.seen += int(sum(sizes[cut:]))
    return acc, between
