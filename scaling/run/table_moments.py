"""Per-group moments of a table in memory or on disk, in bounded memory.

The road of large tables joins two floors: :mod:`scaling.io.chunked` reads
and cleans the rows a chunk at a time (csv through pandas or pyarrow,
parquet through pyarrow, Dask partitions), and
:mod:`scaling.stats.grouped_fits` reduces each cleaned chunk to per-group
moments merged exactly (Chan, Golub & LeVeque 1983) and fits every group at
once.  :func:`frame_moments` and :func:`read_moments` do both;
:func:`fit_frame` adds the fits.

Memory is bounded by the chunk size plus a few arrays of length G (groups).
Dask is optional (``pip install 'scaling[dask]'``); without a ``scheduler``
it runs on Dask's local threaded scheduler, with an address
(``"tcp://host:8786"``) it connects a ``dask.distributed`` client to that
cluster.
"""

from __future__ import annotations

import tempfile
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
import pandas as pd

from ..render.wording import worded_fits
from ..errors import DataError
from ..io.chunked import (check_chunk_size, check_column, check_reading, clean_chunk,
                          dask_compute, dask_partitions, file_kind, files_of, frame_chunks,
                          read_chunks)
from ..stats.grouped_fits import (UNIT_COLUMNS, GroupedMoments, GroupFits,
                                  MomentAccumulator, combine_summaries,
                                  fit_groups_from_moments, merge_unit_sums, summarise_rows,
                                  summary_frame, unit_sums, units_to_groups)
from ..stats.logscale import parse_log_base, to_log

__all__ = ["frame_moments", "read_moments", "fit_frame", "RowSpill", "SpilledChunk"]


@dataclass(frozen=True, slots=True)
class SpilledChunk:
    """The usable rows of one chunk as the first pass cleaned them.

    Attributes
    ----------
    labels : Index
        Group names met in the chunk (``codes`` index into them).
    codes : ndarray of int32 or None
        Group code of each row (None without a group column).
    X, Y : ndarray
        Log x and log y of each row.
    rows : ndarray of int64
        Data-row number of each row (1 = the first line under the header).
    """

    labels: pd.Index
    codes: np.ndarray | None
    X: np.ndarray
    Y: np.ndarray
    rows: np.ndarray


class RowSpill:
    """The first pass's cleaned rows kept in a temporary binary file for the second pass.

    The second pass of the moments path needs every usable row again (log x,
    log y, group, row number).  Parsing a csv file a second time costs more
    than everything the pass computes; so the first pass appends each
    cleaned chunk here as raw arrays (20 bytes a row: two float64 logs, an
    int32 group code; the int64 row numbers only for a chunk that lost rows)
    and the second pass reads them back chunk by chunk, with the same chunk
    boundaries, so its sums are those of a second read of the file to the
    last bit.  Memory stays one chunk; the folder (under the system's
    temporary folder, ``TMPDIR``) is deleted by :meth:`close` (and, failing
    that, when the object is collected).  Should a write fail (a full disk),
    the spill gives up (``usable`` False, its file deleted) and the second
    pass reads the file again.
    """

    def __init__(self) -> None:
        self._dir = tempfile.TemporaryDirectory(prefix="scaling-rows-")
        self._path = Path(self._dir.name) / "rows.bin"
        self._fh = open(self._path, "wb")
        self._chunks: list[tuple] = []    # (labels, n, has codes, has rows, first row)
        self.usable = True

    def write(self, labels: pd.Index, codes, X, Y, keep, first_row: int,
              n_rows: int) -> None:
        """Append a chunk: ``keep`` (None: every row) marks the usable rows of its
        ``n_rows``, numbered from ``first_row + 1``."""
        if not self.usable:
            return
        rows = None
        if keep is not None:
            codes = codes[keep] if codes is not None else None
            X, Y = X[keep], Y[keep]
            rows = first_row + 1 + np.flatnonzero(keep).astype(np.int64)
        try:
            for arr, dtype in ((X, np.float64), (Y, np.float64), (codes, np.int32),
                               (rows, np.int64)):
                if arr is not None:
                    self._fh.write(np.ascontiguousarray(arr, dtype=dtype).data)
        except OSError:
            self.close()
            return
        self._chunks.append((labels, int(X.size), codes is not None, rows is not None,
                             int(first_row)))

    def chunk_sizes(self) -> list[int]:
        """Rows of each chunk written, in order; the writing is finished first (its
        buffer flushed), so a process forked after this reads every chunk written."""
        if not self.usable:
            raise RuntimeError("the row spill was closed")
        self._fh.close()
        return [n for _, n, _, _, _ in self._chunks]

    def chunks(self, start: int = 0, stop: int | None = None):
        """Yield the chunks written, in order, as :class:`SpilledChunk`; those from
        number ``start`` up to ``stop`` (excluded; None: the last) only, when given."""
        if not self.usable:
            raise RuntimeError("the row spill was closed")
        self._fh.close()
        # bytes a chunk takes: two float64 logs, int32 codes, int64 row numbers if any
        sizes = [n * (16 + 4 * has_codes + 8 * has_rows)
                 for _, n, has_codes, has_rows, _ in self._chunks[:start]]
        with open(self._path, "rb") as fh:
            fh.seek(sum(sizes))
            for labels, n, has_codes, has_rows, first in self._chunks[start:stop]:
                X = np.fromfile(fh, dtype=np.float64, count=n)
                Y = np.fromfile(fh, dtype=np.float64, count=n)
                codes = np.fromfile(fh, dtype=np.int32, count=n) if has_codes else None
                rows = (np.fromfile(fh, dtype=np.int64, count=n) if has_rows
                        else first + np.arange(1, n + 1, dtype=np.int64))
                yield SpilledChunk(labels=labels, codes=codes, X=X, Y=Y, rows=rows)

    def close(self) -> None:
        """Delete the file and its folder (idempotent)."""
        self.usable = False
        self._fh.close()
        self._dir.cleanup()


def _no_rows(where: str, result: GroupedMoments) -> None:
    if result.n_read == 0:
        raise DataError(f"{where}: has no data rows under the header line")
    if float(result.pooled.n[0]) == 0:
        common = (max(result.dropped, key=result.dropped.get) if result.dropped
                  else "the table is empty")
        raise DataError(f"{where}: no usable rows: all {result.n_read} data rows were "
                        f"dropped (most common reason: {common})")


def _feed(acc: MomentAccumulator, part: pd.DataFrame, x, y, group, base, decimal,
          spill: RowSpill | None = None) -> None:
    c = clean_chunk(part, x, y, group, decimal)
    first_row = acc.n_read
    acc.add_counts(c.counts, c.n_rows, c.n_dropped)
    if spill is None or not spill.usable:
        acc.add_rows(c.labels, c.codes, c.x, c.y, c.bad, base)
        return
    # Logs of every row once (the dropped ones are masked out below and in the
    # summary): the same values the summary would take, kept for the second pass.
    with np.errstate(divide="ignore", invalid="ignore"):
        X, Y = to_log(c.x, base), to_log(c.y, base)
    acc.add_rows(c.labels, c.codes, X, Y, c.bad, None)
    spill.write(c.labels, c.codes, X, Y, None if c.bad is None else ~c.bad, first_row,
                c.n_rows)


def frame_moments(df: pd.DataFrame, *, x: str, y: str, group: str | None = None,
                  log_base=10, chunk_size: int | None = None,
                  decimal: str = ".") -> GroupedMoments:
    """Per-group moments of an in-memory table.

    Parameters
    ----------
    df : DataFrame
    x, y : str
        Columns of the predictor and response, in natural units (or logs
        with ``log_base=None``).
    group : str, optional
        Column of group names; without it every row is one group named "".
    log_base : {10, "e", 2, None}
    chunk_size : int, optional
        Walk the table in slices of this many rows (bounds the temporary
        memory); the result equals the unchunked one up to rounding.
    decimal : str
        Decimal mark of numbers stored as text.

    Returns
    -------
    GroupedMoments

    Raises
    ------
    DataError
        A column is missing, or no row is usable.
    """
    base = parse_log_base(log_base)
    for name, key in ((x, "x"), (y, "y")) + (((group, "group"),) if group else ()):
        check_column(df.columns, name, key, "table")
    acc = MomentAccumulator()
    for part in frame_chunks(df, chunk_size):
        _feed(acc, part, x, y, group, base, decimal)
    result = acc.result(base)
    _no_rows("table", result)
    return result


def read_moments(path, *, x: str, y: str, group: str | None = None, log_base=10,
                 chunk_size: int = 1_000_000, engine: str = "pandas",
                 reader: str = "pandas", scheduler: str | None = None, sep: str = ",",
                 decimal: str = ".", unit: str | None = None,
                 spill: RowSpill | None = None,
                 partition_points: list | None = None) -> GroupedMoments:
    """Per-group moments of a csv or parquet file, read in chunks.

    Parameters
    ----------
    path : str or Path
        A csv/tsv file, a parquet file, or (Dask) a folder or glob of them.
    x, y, group, log_base, decimal
        As for :func:`frame_moments`.
    chunk_size : int
        Rows per chunk (pandas engine) or per Dask partition (approximately,
        through ``blocksize`` for csv; parquet partitions follow row groups).
    engine : {"pandas", "dask"}
        Read chunk by chunk in this process, or let Dask compute the
        per-partition summaries.
    reader : {"pandas", "pyarrow"}
        csv parser of the pandas engine (parquet always uses pyarrow).
        ``pyarrow`` is faster but needs numeric x and y columns.
    scheduler : str, optional
        Dask only: ``"threads"``, ``"processes"``, ``"synchronous"``, or the
        address of a ``dask.distributed`` scheduler (``"tcp://host:8786"``).
        Default: Dask's local threaded scheduler.
    sep : str
        csv field separator.
    unit : str, optional
        Column of units (``data.average_within``): each unit's rows become
        one point, the means of their logs, before the groups are summed.
    spill : RowSpill, optional
        The pandas engine without ``unit`` appends every cleaned chunk to it
        (log x, log y, group code, row number) for a second pass that
        should not parse the file again; ignored otherwise.
    partition_points : list, optional
        Dask without ``unit``: filled with each partition's (rows read, points used),
        in file order, so a second pass over the same partitions knows where each
        partition's points start; ignored otherwise.

    Returns
    -------
    GroupedMoments
        With ``unit``, ``n_rows`` holds the rows behind each group.

    Notes
    -----
    Memory is bounded by one chunk plus O(G) arrays; chunks are merged by
    :func:`scaling.stats.moments.merge_moments` (Chan, Golub & LeVeque 1983), Dask
    partitions by :func:`scaling.stats.moments.combine_moments`.  With
    ``unit`` the reduction has two levels: per-unit row counts and sums of
    the logs are merged across chunks (memory: one row per unit), then the
    unit means are reduced to group moments; with Dask the per-partition
    unit sums are merged by a Dask groupby on the unit.
    """
    path = Path(path)
    base = parse_log_base(log_base)
    check_reading(engine, reader, scheduler)
    chunk_size = check_chunk_size(chunk_size)
    kind = file_kind(path)
    columns = [x, y] + ([group] if group else []) + ([unit] if unit else [])
    keys = {x: "data.x", y: "data.y", **({group: "data.group"} if group else {}),
            **({unit: "data.average_within"} if unit else {})}
    if engine == "dask":
        result = _dask_moments(path, kind, columns, keys, x, y, group, unit, base, chunk_size,
                               scheduler, sep, decimal, partition_points)
    elif unit:
        pieces, counts, n_read, n_dropped, units = [], {}, 0, 0, None
        for file in files_of(path, kind):
            for part in read_chunks(file, kind, columns, chunk_size, reader, sep, decimal,
                                    keys):
                frame, c, n_rows, n_drop = _partition_units(part, x, y, group, unit, base,
                                                            decimal, n_read)
                pieces.append(frame)
                n_read, n_dropped = n_read + n_rows, n_dropped + n_drop
                _add_counts(counts, c)
                if len(pieces) >= 8:      # merge as we go: memory stays one row per unit
                    units = merge_unit_sums([units] + pieces if units is not None else pieces)
                    pieces = []
        units = merge_unit_sums(([units] if units is not None else []) + pieces)
        result = _unit_groups(units, str(path), group, unit, n_read=n_read, counts=counts,
                              n_dropped=n_dropped, base=base)
    else:
        acc = MomentAccumulator()
        for file in files_of(path, kind):
            for part in read_chunks(file, kind, columns, chunk_size, reader, sep, decimal,
                                    keys):
                _feed(acc, part, x, y, group, base, decimal, spill)
        result = acc.result(base)
    _no_rows(str(path), result)
    return result


def _add_counts(total: dict, counts: dict) -> None:
    for reason, k in counts.items():
        total[reason] = total.get(reason, 0) + k


def _unit_groups(units: pd.DataFrame, where: str, group, unit, **kw) -> GroupedMoments:
    """Group moments of the unit means; a unit in two groups is a DataError naming it."""
    split = units["group_min"] != units["group_max"]
    if split.any():
        row = units[split].iloc[0]
        raise DataError(f"{where}: {unit} '{row['unit']}' appears in more than one group "
                        f"({group}: {row['group_min']}, {row['group_max']}, ...); "
                        "each unit must belong to one group")
    return units_to_groups(units, **kw)


def _partition_summary(pdf: pd.DataFrame, x, y, group, base, decimal):
    """Per-group moments of one Dask partition (a small table) and its drop counts."""
    pdf.columns = [str(c).strip() for c in pdf.columns]
    c = clean_chunk(pdf, x, y, group, decimal)
    frame = summary_frame(*summarise_rows(c.labels, c.codes, c.x, c.y, c.bad, base))
    return frame, c.counts, len(pdf), c.n_dropped


def _tail(item: tuple) -> tuple:
    return item[1:]


#: A Dask partition's row numbers are ``(partition << _PART_SHIFT) + row within it``
#: until the partitions' lengths are known: the minimum stays the first row in file order.
_PART_SHIFT = 40


def _partition_units(pdf: pd.DataFrame, x, y, group, unit, base, decimal, first_row=0):
    """Per-unit sums of one chunk or Dask partition and its drop counts; rows are
    numbered from ``first_row + 1``."""
    pdf.columns = [str(c).strip() for c in pdf.columns]
    c = clean_chunk(pdf, x, y, group, decimal, unit=unit)
    rows = first_row + np.arange(1, len(pdf) + 1, dtype=np.int64)
    frame = unit_sums(c.unit_labels, c.unit_codes, c.labels, c.codes, c.x, c.y, c.bad, base,
                      rows=rows)
    return frame, c.counts, len(pdf), c.n_dropped


def _dask_moments(path, kind, columns, keys, x, y, group, unit, base, chunk_size, scheduler,
                  sep, decimal, partition_points: list | None = None) -> GroupedMoments:
    partitions = dask_partitions(path, kind, columns, chunk_size, sep, decimal, keys)
    import dask   # dask_partitions has checked that it is installed
    if unit:
        import dask.dataframe as dd
        tasks = [dask.delayed(_partition_units)(part, x, y, group, unit, base, decimal,
                                                i << _PART_SHIFT)
                 for i, part in enumerate(partitions)]
        frames = [t[0] for t in tasks]
        meta = pd.DataFrame({"unit": pd.Series(dtype=object),
                             "group_min": pd.Series(dtype=object),
                             "group_max": pd.Series(dtype=object),
                             "n": pd.Series(dtype=float), "sum_x": pd.Series(dtype=float),
                             "sum_y": pd.Series(dtype=float),
                             "row_min": pd.Series(dtype=np.int64)})[UNIT_COLUMNS]
        # the groupby on the unit runs on the cluster; the driver gets one row per unit
        merged = (dd.from_delayed(frames, meta=meta, verify_meta=False).groupby("unit")
                  .agg({"group_min": "min", "group_max": "max", "n": "sum", "sum_x": "sum",
                        "sum_y": "sum", "row_min": "min"}))
        extras = [dask.delayed(_tail)(t) for t in tasks]
        units, *rest = dask_compute([merged] + extras, scheduler)
        counts: dict[str, int] = {}
        n_read = n_dropped = 0
        offsets = []
        for c, n_rows, n_drop in rest:        # partitions in file order
            offsets.append(n_read)
            _add_counts(counts, c)
            n_read, n_dropped = n_read + n_rows, n_dropped + n_drop
        units = units.reset_index()[UNIT_COLUMNS]
        coded = units["row_min"].to_numpy(dtype=np.int64)
        part = coded >> _PART_SHIFT
        units["row_min"] = (np.asarray(offsets, dtype=np.int64)[part]
                            + (coded - (part << _PART_SHIFT)))
        return _unit_groups(units, str(path), group, unit, n_read=n_read, counts=counts,
                            n_dropped=n_dropped, base=base)
    tasks = [dask.delayed(_partition_summary)(part, x, y, group, base, decimal)
             for part in partitions]
    parts = dask_compute(tasks, scheduler)
    counts = {}
    n_read = n_dropped = 0
    frames = []
    for frame, c, n_rows, n_drop in parts:        # one small item per partition
        if partition_points is not None:
            partition_points.append((n_rows, n_rows - n_drop))
        frames.append(frame)
        n_read += n_rows
        n_dropped += n_drop
        _add_counts(counts, c)
    return combine_summaries(frames, n_read=n_read, counts=counts, n_dropped=n_dropped,
                             base=base)


def fit_frame(df: pd.DataFrame, *, x: str, y: str, group: str | None = None,
              methods=("ols", "sma", "ma"), confidence: float = 0.95, exponents=None,
              log_base=10, chunk_size: int | None = None, pooled: bool = False) -> GroupFits:
    """:func:`frame_moments` then :func:`~scaling.stats.grouped_fits.fit_groups_from_moments`.

    One call, any table size; the engine behind :func:`scaling.fit_groups`.
    """
    gm = frame_moments(df, x=x, y=y, group=group, log_base=log_base, chunk_size=chunk_size)
    fitted = fit_groups_from_moments(gm, methods=methods, confidence=confidence,
                                     exponents=exponents, pooled=pooled)
    return replace(fitted, fits=worded_fits(fitted))
