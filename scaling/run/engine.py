"""Per-group moments of large tables in bounded memory, and every group fit at once.

The whole grouped fit is one aggregation: the five sums behind
:class:`~scaling.stats.moments.Moments` per group.  This module

* reads a table in chunks (csv through pandas or pyarrow, parquet through
  pyarrow's ``iter_batches``), or walks an in-memory DataFrame in slices,
  or lets Dask compute the same per-partition summaries (``engine="dask"``);
* cleans each chunk by the rules of :mod:`scaling.io.tables` (missing,
  non-numeric, censored, infinite, zero and negative values, and rows with a
  missing group are dropped), counting drops per reason instead of listing
  rows;
* reduces each chunk to per-group moments centred on the chunk's own group
  means (:func:`~scaling.stats.moments.group_moments`, ``np.bincount``; no Python
  loop over groups) and merges them exactly
  (:func:`~scaling.stats.moments.merge_moments`,
  :func:`~scaling.stats.moments.combine_moments`; Chan, Golub & LeVeque 1983);
* fits every method to every group in one vectorised call of
  :func:`scaling.stats.lines.fit_moments` (:func:`fit_groups_from_moments`), giving
  the ``fits.csv`` and ``slope_tests.csv`` tables.

Memory is bounded by the chunk size plus a few arrays of length G (groups).
Dask is optional (``pip install 'scaling[dask]'``); without a ``scheduler``
it runs on Dask's local threaded scheduler, with an address
(``"tcp://host:8786"``) it connects a ``dask.distributed`` client to that
cluster.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ..io.tables import parse_numbers
from ..errors import ConfigError, DataError
from ..stats.lines import (METHODS, get_method, base_label, fit_moments,
                    parse_log_base, slope_test_statistic)
from ..stats.moments import Moments, combine_moments, group_moments, merge_moments
from ..render.wording import fit_notes_column
from ..stats.schema import FIT_COLUMNS, SLOPE_TEST_COLUMNS, check_confidence, check_exponents

__all__ = [
    "GroupedMoments",
    "GroupFits",
    "frame_moments",
    "read_moments",
    "fit_groups_from_moments",
    "fit_frame",
    "pooled_view",
    "ENGINES",
    "READERS",
    "FIT_TABLE_COLUMNS",
    "SLOPE_TEST_TABLE_COLUMNS",
]

ENGINES = ("pandas", "dask")
READERS = ("pandas", "pyarrow")

#: Columns of the fits table and of the slope-test table (from scaling.stats.schema).
FIT_TABLE_COLUMNS = FIT_COLUMNS
SLOPE_TEST_TABLE_COLUMNS = SLOPE_TEST_COLUMNS

_SUMMARY_COLUMNS = ["label", "n", "mean_x", "mean_y", "sxx", "syy", "sxy",
                    "lx_min", "lx_max", "ly_min", "ly_max"]
_MOMENT_KEYS = ("n", "mean_x", "mean_y", "sxx", "syy", "sxy")


# --------------------------------------------------------------------------
# results


@dataclass(frozen=True, slots=True, kw_only=True)
class GroupedMoments:
    """Per-group moments of a cleaned, log-transformed table.

    Attributes
    ----------
    labels : ndarray of str
        Group names, sorted (``[""]`` when there is no group column).
    moments : Moments
        Arrays of shape (G,), on the log scale of ``log_base``.
    pooled : Moments
        Moments of all rows (arrays of shape (1,)), merged from the groups.
    x_min, x_max, y_min, y_max : ndarray
        Natural-unit range of each group (logs when ``log_base`` is None).
    n_read : int
        Data rows read.
    dropped : dict
        ``reason -> number of rows`` (a row with two problems counts under both).
    n_dropped : int
        Rows dropped (each once).
    log_base : float or None
    """

    labels: np.ndarray
    moments: Moments
    pooled: Moments
    x_min: np.ndarray
    x_max: np.ndarray
    y_min: np.ndarray
    y_max: np.ndarray
    n_read: int
    dropped: dict = field(default_factory=dict)
    n_dropped: int = 0
    log_base: float | None = 10.0

    @property
    def n_groups(self) -> int:
        return int(self.labels.size)

    def dropped_frame(self) -> pd.DataFrame:
        """Columns ``reason, rows``: the drop counts, most frequent first."""
        frame = pd.DataFrame({"reason": list(self.dropped), "rows": list(self.dropped.values())},
                             columns=["reason", "rows"])
        return frame.sort_values("rows", ascending=False, kind="stable").reset_index(drop=True)

    def to_frame(self) -> pd.DataFrame:
        """One row per group: ``group, n, mean_log_x, mean_log_y, sxx, syy, sxy``."""
        m = self.moments
        return pd.DataFrame({"group": self.labels, "n": m.n, "mean_log_x": m.mean_x,
                             "mean_log_y": m.mean_y, "sxx": m.sxx, "syy": m.syy,
                             "sxy": m.sxy})


@dataclass(frozen=True, slots=True, kw_only=True)
class GroupFits:
    """Every group fitted with every method: the ``fits`` and ``slope_tests`` tables."""

    fits: pd.DataFrame
    slope_tests: pd.DataFrame
    moments: GroupedMoments | None = None

    def summary(self) -> str:
        f = self.fits
        ok = f["note"].eq("") | f["note"].str.contains("unbounded", regex=False)
        parts = []
        for method, sub in f[ok].groupby("method", sort=False):
            q = sub["slope"].quantile([0.25, 0.5, 0.75]).to_numpy()
            parts.append(f"  {method}: median exponent {q[1]:.4g} "
                         f"(quartiles {q[0]:.4g} to {q[2]:.4g})")
        n_groups = f["group"].nunique()
        head = (f"{n_groups} groups fitted with {f['method'].nunique()} methods; "
                f"{int((~ok).sum())} fits not estimable")
        return "\n".join([head] + parts)


# --------------------------------------------------------------------------
# cleaning one chunk


def _check_column(columns, name: str, key: str, where: str) -> None:
    if name not in columns:
        shown = ", ".join(map(str, list(columns)[:12]))
        raise DataError(f"{where}: column '{name}' ({key}) not found. Columns are: {shown}")


def _numbers(col: pd.Series, decimal: str):
    """Float values and a problem array ('' where usable) by the rules of :mod:`scaling.io.tables`."""
    if pd.api.types.is_numeric_dtype(col.dtype) and not pd.api.types.is_bool_dtype(col.dtype):
        v = col.to_numpy(dtype=float, na_value=np.nan)
        ok = (v > 0) & (v < np.inf)
        if ok.all():
            return v, None
        problem = np.full(v.size, "", dtype=object)
        problem[np.isnan(v)] = "missing"
        problem[np.isinf(v)] = "infinite"
        problem[v == 0] = "zero"
        problem[v < 0] = "negative"
        return v, problem
    v, problem, _ = parse_numbers(   # the text rules of data.py, unchanged
        col.reset_index(drop=True), decimal)
    return v, (problem if (problem != "").any() else None)


_WORDS = {"missing": "is missing", "non-numeric": "is not a number",
          "censored": "is censored", "infinite": "is infinite",
          "zero": "is zero: no logarithm", "negative": "is negative: no logarithm"}


def _labels_of(uniques) -> pd.Index:
    """Group names as text (as :mod:`scaling.io.tables` writes them)."""
    idx = pd.Index(uniques)
    if pd.api.types.is_float_dtype(idx.dtype):
        # 3.0 -> "3", as a csv read as text would show it when written as "3"
        return pd.Index([f"{v:g}" for v in idx.to_numpy()], dtype=object)
    return idx.astype(str)


def _group_codes(col: pd.Series):
    """Codes, cleaned names and the missing mask of a group column (names cleaned once)."""
    codes, uniques = pd.factorize(col, sort=False)
    labels = pd.Index(_labels_of(uniques).astype(str).str.strip(), dtype=object)
    if labels.has_duplicates:      # e.g. "a" and " a", or 3 and "3"
        codes, labels = _dedupe(codes, labels)
    missing = codes < 0
    empty = np.asarray(labels == "", dtype=bool)
    if empty.any():
        missing |= empty[codes]
    return codes, labels, missing


#: Rows per slice of the numeric work: temporaries stay in cache.
_SLICE = 1 << 16


def _to_log(v: np.ndarray, base) -> np.ndarray:
    # the formula of scaling.stats.lines.to_log, so that results match a run bit for bit
    return v if base is None else np.log(v) / math.log(base)


def _summarise(part: pd.DataFrame, x: str, y: str, group: str | None, base, decimal: str):
    """Clean one chunk and reduce it to per-group moments.

    Returns ``(labels, moments, ranges, counts, n_rows, n_dropped)`` for the
    groups with rows in the chunk; ``ranges`` are the log minima and maxima
    of x and y.  The numeric work runs over slices of :data:`_SLICE` rows
    merged exactly, so temporaries are small whatever the chunk size.
    """
    n = len(part)
    counts: dict[str, int] = {}
    bad = None
    values = []
    for role, name in (("x", x), ("y", y)):
        v, problem = _numbers(part[name], decimal)
        if problem is not None:
            hit = problem != ""
            bad = hit if bad is None else (bad | hit)
            kinds, k = np.unique(problem[hit], return_counts=True)
            for kind, c in zip(kinds, k):
                reason = f"{role} ({name}) {_WORDS[kind]}"
                counts[reason] = counts.get(reason, 0) + int(c)
        values.append(v)
    if group is not None:
        codes, labels, missing = _group_codes(part[group])
        if missing.any():
            counts[f"group ({group}) is missing"] = int(missing.sum())
            bad = missing if bad is None else (bad | missing)
    else:
        codes, labels = None, pd.Index([""], dtype=object)
    n_dropped = 0 if bad is None else int(bad.sum())
    g = len(labels)
    total = Moments(n=np.zeros(g), mean_x=np.full(g, np.nan), mean_y=np.full(g, np.nan),
                    sxx=np.zeros(g), syy=np.zeros(g), sxy=np.zeros(g))
    ranges = [np.full(g, np.inf), np.full(g, -np.inf), np.full(g, np.inf),
              np.full(g, -np.inf)]
    step = max(_SLICE, 8 * g)      # keeps the O(G) merges small against the rows
    vx, vy = values
    for start in range(0, n, step):
        sl = slice(start, start + step)
        lx, ly = vx[sl], vy[sl]
        c = codes[sl] if codes is not None else np.zeros(lx.size, dtype=np.intp)
        if bad is not None:
            keep = ~bad[sl]
            lx, ly, c = lx[keep], ly[keep], c[keep]
        if not lx.size:
            continue
        lx, ly = _to_log(lx, base), _to_log(ly, base)
        total = merge_moments(total, group_moments(lx, ly, c, n_groups=g))
        np.minimum.at(ranges[0], c, lx)
        np.maximum.at(ranges[1], c, lx)
        np.minimum.at(ranges[2], c, ly)
        np.maximum.at(ranges[3], c, ly)
    used = total.n > 0
    if not used.all():
        labels, total, ranges = labels[used], total[used], [r[used] for r in ranges]
    return labels, total, ranges, counts, n, n_dropped


def _dedupe(codes, labels: pd.Index):
    new_codes, uniq = pd.factorize(labels.to_numpy(), sort=False)
    return np.where(codes < 0, -1, new_codes[codes]), pd.Index(uniq, dtype=object)


class _Accumulator:
    """Running per-group moments, merged exactly chunk by chunk."""

    def __init__(self):
        self.index = pd.Index([], dtype=object)
        self.m = {k: np.zeros(0) for k in _MOMENT_KEYS}
        self.ranges = [np.zeros(0) for _ in range(4)]
        self.counts: dict[str, int] = {}
        self.n_read = 0
        self.n_dropped = 0

    def _grow(self, new_labels: pd.Index) -> None:
        k = len(new_labels)
        self.index = self.index.append(new_labels)
        fill = {"n": 0.0, "mean_x": np.nan, "mean_y": np.nan, "sxx": 0.0, "syy": 0.0,
                "sxy": 0.0}
        for key in _MOMENT_KEYS:
            self.m[key] = np.concatenate([self.m[key], np.full(k, fill[key])])
        for i, start in enumerate((np.inf, -np.inf, np.inf, -np.inf)):
            self.ranges[i] = np.concatenate([self.ranges[i], np.full(k, start)])

    def add_counts(self, counts: dict, n_rows: int, n_dropped: int) -> None:
        self.n_read += n_rows
        self.n_dropped += n_dropped
        for reason, k in counts.items():
            self.counts[reason] = self.counts.get(reason, 0) + k

    def add(self, labels: pd.Index, m: Moments, ranges) -> None:
        pos = self.index.get_indexer(labels)
        if (pos < 0).any():
            self._grow(labels[pos < 0])
            pos = self.index.get_indexer(labels)
        old = Moments(**{k: self.m[k][pos] for k in _MOMENT_KEYS})
        new = merge_moments(old, m)
        for key in _MOMENT_KEYS:
            self.m[key][pos] = getattr(new, key)
        for i, fn in enumerate((np.fmin, np.fmax, np.fmin, np.fmax)):
            self.ranges[i][pos] = fn(self.ranges[i][pos], ranges[i])

    def result(self, base) -> GroupedMoments:
        return _finish(self.index, Moments(**self.m), self.ranges, n_read=self.n_read,
                       counts=self.counts, n_dropped=self.n_dropped, base=base)


def _finish(index: pd.Index, m: Moments, ranges, *, n_read, counts, n_dropped,
            base) -> GroupedMoments:
    labels = np.asarray(index, dtype=object)
    order = np.argsort(labels.astype(str), kind="stable")
    m = m[order]
    ranges = [np.asarray(r)[order] for r in ranges]
    if base is None:
        nat = ranges
    else:
        nat = [np.power(base, r) for r in ranges]
    pooled = combine_moments(m, np.zeros(m.n.size, dtype=np.intp), n_groups=1)
    return GroupedMoments(labels=labels[order].astype(str), moments=m, pooled=pooled,
                          x_min=nat[0], x_max=nat[1], y_min=nat[2], y_max=nat[3],
                          n_read=int(n_read), dropped=dict(counts),
                          n_dropped=int(n_dropped), log_base=base)


# --------------------------------------------------------------------------
# entry points


def _check_chunk_size(chunk_size) -> int:
    if isinstance(chunk_size, bool) or not isinstance(chunk_size, (int, np.integer)) \
            or chunk_size < 1:
        raise ConfigError(f"chunk_size must be a positive whole number of rows, "
                          f"not {chunk_size!r}")
    return int(chunk_size)


def _no_rows(where: str, acc_result: GroupedMoments) -> None:
    if acc_result.n_read == 0:
        raise DataError(f"{where}: has no data rows under the header line")
    if float(acc_result.pooled.n[0]) == 0:
        common = max(acc_result.dropped, key=acc_result.dropped.get) \
            if acc_result.dropped else "the table is empty"
        raise DataError(f"{where}: no usable rows: all {acc_result.n_read} data rows were "
                        f"dropped (most common reason: {common})")


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
        _check_column(df.columns, name, key, "table")
    size = len(df) if chunk_size is None else _check_chunk_size(chunk_size)
    acc = _Accumulator()
    for start in range(0, max(len(df), 1), max(size, 1)):
        part = df.iloc[start:start + size]
        _feed(acc, part, x, y, group, base, decimal)
    result = acc.result(base)
    _no_rows("table", result)
    return result


def _feed(acc: _Accumulator, part: pd.DataFrame, x, y, group, base, decimal) -> None:
    labels, m, ranges, counts, n_rows, n_dropped = _summarise(part, x, y, group, base,
                                                              decimal)
    acc.add_counts(counts, n_rows, n_dropped)
    if len(labels):
        acc.add(labels, m, ranges)


def _file_kind(path: Path) -> str:
    suffix = path.suffix.lower()
    if suffix == ".parquet" or path.is_dir():
        return "parquet"
    if suffix in (".csv", ".tsv", ".txt", ".gz", ".bz2", ".zip", ".xz"):
        return "csv"
    raise DataError(f"{path}: chunked reading handles csv/tsv and parquet files, "
                    f"not '{suffix}'")


def read_moments(path, *, x: str, y: str, group: str | None = None, log_base=10,
                 chunk_size: int = 1_000_000, engine: str = "pandas",
                 reader: str = "pandas", scheduler: str | None = None, sep: str = ",",
                 decimal: str = ".") -> GroupedMoments:
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

    Returns
    -------
    GroupedMoments

    Notes
    -----
    Memory is bounded by one chunk plus O(G) arrays; chunks are merged by
    :func:`scaling.stats.moments.merge_moments` (Chan, Golub & LeVeque 1983), Dask
    partitions by :func:`scaling.stats.moments.combine_moments`.
    """
    path = Path(path)
    base = parse_log_base(log_base)
    if engine not in ENGINES:
        raise ConfigError(f"engine must be one of {', '.join(ENGINES)}, not {engine!r}")
    if reader not in READERS:
        raise ConfigError(f"reader must be one of {', '.join(READERS)}, not {reader!r}")
    chunk_size = _check_chunk_size(chunk_size)
    if scheduler is not None and engine != "dask":
        raise ConfigError("scheduler is only used with engine 'dask'")
    is_glob = any(ch in str(path) for ch in "*?[")
    if not is_glob and not path.exists():
        raise DataError(f"{path}: data file not found (data.file)")
    kind = "parquet" if (is_glob and ".parquet" in str(path)) else \
        ("csv" if is_glob else _file_kind(path))
    columns = [x, y] + ([group] if group else [])
    if engine == "dask":
        result = _dask_moments(path, kind, columns, x, y, group, base, chunk_size,
                               scheduler, sep, decimal)
    else:
        acc = _Accumulator()
        for file in _files(path, kind):
            for part in _chunks(file, kind, columns, chunk_size, reader, sep, decimal):
                _feed(acc, part, x, y, group, base, decimal)
        result = acc.result(base)
    _no_rows(str(path), result)
    return result


def _files(path: Path, kind: str) -> list:
    """The files behind a path: itself, the files of a folder, or a glob's matches."""
    if any(ch in str(path) for ch in "*?["):
        files = sorted(Path(path.anchor or ".").glob(str(path.relative_to(path.anchor)))
                       if path.is_absolute() else Path(".").glob(str(path)))
    elif path.is_dir():
        suffix = ".parquet" if kind == "parquet" else ".csv"
        files = sorted(p for p in path.iterdir() if p.suffix.lower() == suffix)
    else:
        return [path]
    if not files:
        raise DataError(f"{path}: no {kind} files found (data.file)")
    return files


def _chunks(path: Path, kind: str, columns: list, chunk_size: int, reader: str, sep: str,
            decimal: str):
    keys = dict(zip(columns, ("data.x", "data.y", "data.group")))
    if kind == "parquet":
        try:
            import pyarrow.parquet as pq
        except ImportError:
            raise DataError(f"{path}: reading Parquet files needs the 'parquet' extra: "
                            "pip install 'scaling[parquet]'") from None
        names = pq.ParquetFile(path).schema_arrow.names
        for c in columns:
            _check_column(names, c, keys[c], str(path))
        # The group column as a dictionary (categorical): names are factorized once per
        # batch from the dictionary, not row by row.  pre_buffer=False and a read buffer:
        # pyarrow's default pre-buffering holds the whole file's column chunks in memory.
        pf = pq.ParquetFile(path, read_dictionary=columns[2:], pre_buffer=False,
                            buffer_size=1 << 20)
        for batch in pf.iter_batches(batch_size=chunk_size, columns=columns):
            yield batch.to_pandas()
        return
    header = pd.read_csv(path, sep=sep, nrows=0).columns
    header = [str(c).strip() for c in header]
    for c in columns:
        _check_column(header, c, keys[c], str(path))
    if reader == "pyarrow":
        from pyarrow import csv as pacsv
        opts = pacsv.ConvertOptions(include_columns=columns)
        # ~ 24 bytes a row for three short fields: aim near chunk_size rows per block
        ro = pacsv.ReadOptions(block_size=max(1 << 16, min(chunk_size * 24, 1 << 30)))
        try:
            stream = pacsv.open_csv(path, read_options=ro, convert_options=opts,
                                    parse_options=pacsv.ParseOptions(delimiter=sep))
            for batch in stream:
                yield batch.to_pandas()
        except Exception as exc:   # pyarrow.lib.ArrowInvalid: a cell that is not a number
            raise DataError(f"{path}: the pyarrow csv reader failed "
                            f"({str(exc).splitlines()[0]}); use reader 'pandas', "
                            "which drops bad cells with a reason") from None
        return
    try:
        for part in pd.read_csv(path, sep=sep, usecols=lambda c: str(c).strip() in columns,
                                chunksize=chunk_size, decimal=decimal,
                                skipinitialspace=True):
            part.columns = [str(c).strip() for c in part.columns]
            yield part
    except (ValueError, pd.errors.ParserError) as exc:
        raise DataError(f"{path}: cannot read table: {str(exc).splitlines()[0]}") from None


# --------------------------------------------------------------------------
# Dask


def _partition_summary(pdf: pd.DataFrame, x, y, group, base, decimal):
    """Per-group moments of one partition (a small frame) and its drop counts."""
    pdf.columns = [str(c).strip() for c in pdf.columns]
    labels, m, ranges, counts, n_rows, n_dropped = _summarise(pdf, x, y, group, base,
                                                              decimal)
    if len(labels):
        frame = pd.DataFrame({"label": np.asarray(labels, dtype=object),
                              **{k: getattr(m, k) for k in _MOMENT_KEYS},
                              "lx_min": ranges[0], "lx_max": ranges[1],
                              "ly_min": ranges[2], "ly_max": ranges[3]})
    else:
        frame = pd.DataFrame({c: [] for c in _SUMMARY_COLUMNS})
    return frame, counts, len(pdf), n_dropped


def _dask_moments(path, kind, columns, x, y, group, base, chunk_size, scheduler, sep,
                  decimal) -> GroupedMoments:
    try:
        import dask
        import dask.dataframe as dd
    except ImportError:
        raise ConfigError("engine 'dask' needs the 'dask' extra: "
                          "pip install 'scaling[dask]'") from None
    keys = dict(zip(columns, ("data.x", "data.y", "data.group")))
    if kind == "parquet":
        names = [str(c).strip() for c in dd.read_parquet(str(path)).columns]
        for c in columns:
            _check_column(names, c, keys[c], str(path))
        ddf = dd.read_parquet(str(path), columns=columns)     # reads only these columns
    else:
        ddf = dd.read_csv(str(path), sep=sep, decimal=decimal, skipinitialspace=True,
                          blocksize=max(1 << 16, chunk_size * 24), dtype="object")
    for c in columns:
        _check_column([str(s).strip() for s in ddf.columns], c, keys[c], str(path))
    ddf = ddf[[c for c in ddf.columns if str(c).strip() in columns]]
    tasks = [dask.delayed(_partition_summary)(part, x, y, group, base, decimal)
             for part in ddf.to_delayed()]
    client = None
    kwargs = {}
    if scheduler is not None:
        if "://" in scheduler:
            try:
                from dask.distributed import Client
            except ImportError:
                raise ConfigError("a scheduler address needs dask.distributed: "
                                  "pip install 'dask[distributed]'") from None
            client = Client(scheduler)
        elif scheduler in ("threads", "processes", "synchronous", "sync", "single-threaded"):
            kwargs["scheduler"] = scheduler
        else:
            raise ConfigError(f"scheduler must be 'threads', 'processes', 'synchronous' or "
                              f"an address like 'tcp://host:8786', not {scheduler!r}")
    try:
        parts = dask.compute(*tasks, **kwargs)
    finally:
        if client is not None:
            client.close()
    counts: dict[str, int] = {}
    n_read = n_dropped = 0
    frames = []
    for frame, c, n_rows, n_drop in parts:        # one small item per partition
        frames.append(frame)
        n_read += n_rows
        n_dropped += n_drop
        for reason, k in c.items():
            counts[reason] = counts.get(reason, 0) + k
    table = pd.concat(frames, ignore_index=True) if frames else \
        pd.DataFrame({c: [] for c in _SUMMARY_COLUMNS})
    codes, uniques = pd.factorize(table["label"].astype(object), sort=False)
    g = len(uniques)
    parts_m = Moments(**{k: table[k].to_numpy(dtype=float) for k in _MOMENT_KEYS})
    m = combine_moments(parts_m, codes, n_groups=g)
    ranges = []
    for col, fn in (("lx_min", np.minimum), ("lx_max", np.maximum),
                    ("ly_min", np.minimum), ("ly_max", np.maximum)):
        out = np.full(g, np.inf if fn is np.minimum else -np.inf)
        fn.at(out, codes, table[col].to_numpy(dtype=float))
        ranges.append(out)
    return _finish(pd.Index(uniques, dtype=object), m, ranges, n_read=n_read, counts=counts,
                   n_dropped=n_dropped, base=base)


# --------------------------------------------------------------------------
# every group fitted at once


def _check_methods(methods) -> list:
    if isinstance(methods, str):
        methods = [methods]
    methods = list(methods)
    if not methods:
        raise ConfigError("methods must name at least one of " + ", ".join(METHODS))
    for method in methods:
        get_method(method)
    return methods


def pooled_view(gm: GroupedMoments) -> GroupedMoments:
    """The pooled moments of ``gm`` as a one-group :class:`GroupedMoments` (label "")."""
    with np.errstate(invalid="ignore"):
        ranges = [np.atleast_1d(f(r)) if r.size else np.array([np.nan]) for f, r in
                  ((np.nanmin, gm.x_min), (np.nanmax, gm.x_max),
                   (np.nanmin, gm.y_min), (np.nanmax, gm.y_max))]
    return GroupedMoments(labels=np.array([""]), moments=gm.pooled, pooled=gm.pooled,
                          x_min=ranges[0], x_max=ranges[1], y_min=ranges[2],
                          y_max=ranges[3], n_read=gm.n_read, dropped=dict(gm.dropped),
                          n_dropped=gm.n_dropped, log_base=gm.log_base)


def fit_groups_from_moments(gm: GroupedMoments, *, methods=("ols", "sma", "ma"),
                            confidence: float = 0.95, exponents=None,
                            scope: str = "group", pooled: bool = False) -> GroupFits:
    """Fit every method to every group at once; the ``fits`` and ``slope_tests`` tables.

    Parameters
    ----------
    gm : GroupedMoments
    methods : sequence of {"ols", "sma", "ma"}
    confidence : float
    exponents : dict or sequence, optional
        Hypothesised exponents ``{name: value}`` (a sequence is named by its
        values); each is tested for every estimable fit.
    scope : str
        Written in the ``scope`` column of the group rows.
    pooled : bool
        Also fit all rows together: rows with scope ``"pooled"`` and group
        "" come first (as in a run).

    Returns
    -------
    GroupFits
        ``fits`` with :data:`FIT_TABLE_COLUMNS` (rows method by method, groups
        in ``gm.labels`` order) and ``slope_tests`` with
        :data:`SLOPE_TEST_TABLE_COLUMNS` (rows for estimable fits only, as in
        a run).

    Notes
    -----
    One call of :func:`scaling.stats.lines.fit_moments` and one of
    :func:`scaling.stats.lines.slope_test_statistic` per method and exponent, each
    vectorised over the G groups; formulas and sources are in
    :mod:`scaling.stats.lines`.  Results equal :func:`scaling.fit_line` group by
    group up to rounding.
    """
    methods = _check_methods(methods)
    confidence = check_confidence(confidence)
    exps = check_exponents(exponents)
    if pooled:
        head = fit_groups_from_moments(pooled_view(gm), methods=methods,
                                       confidence=confidence, exponents=exps, scope="pooled")
        body = fit_groups_from_moments(gm, methods=methods, confidence=confidence,
                                       exponents=exps, scope=scope)
        return GroupFits(fits=pd.concat([head.fits, body.fits], ignore_index=True),
                         slope_tests=pd.concat([head.slope_tests, body.slope_tests],
                                               ignore_index=True), moments=gm)
    m = gm.moments
    g = m.n.size
    frames, tests = [], []
    for method in methods:
        res = fit_moments(m, method, confidence=confidence)
        cols = {"scope": np.full(g, scope, dtype=object), "group": gm.labels.astype(object),
                "method": np.full(g, method, dtype=object), "n": m.n.astype(np.int64)}
        for key in ("slope", "slope_low", "slope_high", "intercept", "intercept_low",
                    "intercept_high", "r", "r2"):
            cols[key] = res[key]
        cols["log_base"] = np.full(g, base_label(gm.log_base), dtype=object)
        cols["confidence"] = np.full(g, confidence)
        cols["note"] = fit_notes_column(res)
        for key in ("slope_se", "intercept_se", "resid_sd"):
            cols[key] = res[key]
        cols.update(x_min=gm.x_min, x_max=gm.x_max, y_min=gm.y_min, y_max=gm.y_max,
                    interval_method=np.full(g, "analytic", dtype=object),
                    deming_lambda=np.full(g, np.nan))
        frames.append(pd.DataFrame(cols, columns=FIT_TABLE_COLUMNS))
        note = cols["note"]
        ok = np.isfinite(res["slope"]) & ((note == "") | pd.Series(note).str.contains(
            "unbounded", regex=False).to_numpy())
        mk = m[ok]
        for name, b0 in exps.items():
            t, df, p = slope_test_statistic(mk, method, b0)
            k = int(ok.sum())
            tests.append(pd.DataFrame({
                "scope": np.full(k, scope, dtype=object), "group": gm.labels[ok].astype(object),
                "method": np.full(k, method, dtype=object),
                "hypothesis": np.full(k, name, dtype=object), "exponent": np.full(k, b0),
                "estimate": res["slope"][ok], "statistic": t,
                "statistic_type": np.full(k, "t", dtype=object), "df": df, "p_value": p,
            }, columns=SLOPE_TEST_TABLE_COLUMNS))
    fits = pd.concat(frames, ignore_index=True)
    slope_tests = pd.concat(tests, ignore_index=True) if tests else \
        pd.DataFrame(columns=SLOPE_TEST_TABLE_COLUMNS)
    return GroupFits(fits=fits, slope_tests=slope_tests, moments=gm)


def fit_frame(df: pd.DataFrame, *, x: str, y: str, group: str | None = None,
              methods=("ols", "sma", "ma"), confidence: float = 0.95, exponents=None,
              log_base=10, chunk_size: int | None = None, pooled: bool = False) -> GroupFits:
    """:func:`frame_moments` then :func:`fit_groups_from_moments` (one call, any table size).

    The engine intended behind the public ``scaling.fit_groups``.
    """
    gm = frame_moments(df, x=x, y=y, group=group, log_base=log_base, chunk_size=chunk_size)
    return fit_groups_from_moments(gm, methods=methods, confidence=confidence,
                                   exponents=exponents, pooled=pooled)
