"""Reading a large table a chunk at a time, and cleaning each chunk.

This module reads; it does not summarise.  It

* lists the files behind a path (a file, a folder of csv or parquet files, a
  glob) and yields their rows in chunks: csv through pandas or pyarrow,
  parquet through pyarrow's ``iter_batches``, an in-memory DataFrame in
  slices (:func:`read_chunks`, :func:`frame_chunks`);
* opens the same files as a Dask DataFrame and computes Dask tasks on the
  scheduler asked for (:func:`dask_partitions`, :func:`dask_compute`);
* cleans one chunk by the rules of :mod:`scaling.io.tables` (missing,
  non-numeric, censored, infinite, zero and negative values, and rows with a
  missing group are dropped), counting the drops per reason instead of
  listing rows (:func:`clean_chunk`).

The per-group moments of the cleaned chunks are numbers and live in
:mod:`scaling.stats.grouped_fits`; :mod:`scaling.run.table_moments` joins the
two (this floor may not import the numbers beyond the vocabulary).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import ConfigError, DataError
from .tables import missing_column_message, parse_numbers

__all__ = ["ENGINES", "READERS", "CleanChunk", "check_chunk_size", "check_column",
           "check_reading", "file_kind", "files_of", "read_chunks", "frame_chunks",
           "clean_chunk", "dask_partitions", "dask_compute"]

ENGINES = ("pandas", "dask")
READERS = ("pandas", "pyarrow")

_WORDS = {"missing": "is missing", "non-numeric": "is not a number",
          "censored": "is censored", "infinite": "is infinite",
          "zero": "is zero: no logarithm", "negative": "is negative: no logarithm"}


@dataclass(frozen=True, slots=True, kw_only=True)
class CleanChunk:
    """One chunk read and cleaned, before any summary.

    Attributes
    ----------
    labels : Index
        Group names met in the chunk, cleaned (``[""]`` without a group column).
    codes : ndarray of int or None
        Group code of each row (None without a group column).
    x, y : ndarray
        The values in natural units (logs when the data are logs), one per row.
    bad : ndarray of bool or None
        Rows to drop (None: every row is usable).
    counts : dict
        ``reason -> rows`` (a row with two problems counts under both).
    n_rows, n_dropped : int
    unit_labels : Index or None
        Names of the units met in the chunk (``data.average_within``), cleaned.
    unit_codes : ndarray of int or None
        Unit code of each row (None without a unit column).
    """

    labels: pd.Index
    codes: np.ndarray | None
    x: np.ndarray
    y: np.ndarray
    bad: np.ndarray | None
    counts: dict
    n_rows: int
    n_dropped: int
    unit_labels: pd.Index | None = None
    unit_codes: np.ndarray | None = None


# --------------------------------------------------------------------------
# checks


def check_column(columns, name: str, key: str, where: str) -> None:
    """DataError naming the column, its config key and the columns there are."""
    if name not in columns:
        raise DataError(missing_column_message(name, key, columns, where))


def check_chunk_size(chunk_size) -> int:
    """``chunk_size`` as an int if it is a positive whole number; ConfigError otherwise."""
    if (isinstance(chunk_size, bool) or not isinstance(chunk_size, (int, np.integer))
            or chunk_size < 1):
        raise ConfigError(f"chunk_size must be a positive whole number of rows, "
                          f"not {chunk_size!r}")
    return int(chunk_size)


def check_reading(engine: str, reader: str, scheduler) -> None:
    """ConfigError for an unknown engine or reader, or a scheduler without Dask."""
    if engine not in ENGINES:
        raise ConfigError(f"engine must be one of {', '.join(ENGINES)}, not {engine!r}")
    if reader not in READERS:
        raise ConfigError(f"reader must be one of {', '.join(READERS)}, not {reader!r}")
    if scheduler is not None and engine != "dask":
        raise ConfigError("scheduler is only used with engine 'dask'")


# --------------------------------------------------------------------------
# files and chunks


def _is_glob(path) -> bool:
    return any(ch in str(path) for ch in "*?[")


def file_kind(path: Path) -> str:
    """"parquet" or "csv" for a path (a glob is csv unless it names parquet files).

    Raises
    ------
    DataError
        The path does not exist, or its suffix is neither csv-like nor parquet.
    """
    if _is_glob(path):
        return "parquet" if ".parquet" in str(path) else "csv"
    if not path.exists():
        raise DataError(f"{path}: data file not found (data.file)")
    suffix = path.suffix.lower()
    if suffix == ".parquet" or path.is_dir():
        return "parquet"
    if suffix in (".csv", ".tsv", ".txt", ".gz", ".bz2", ".zip", ".xz"):
        return "csv"
    raise DataError(f"{path}: chunked reading handles csv/tsv and parquet files, "
                    f"not '{suffix}'")


def files_of(path: Path, kind: str) -> list:
    """The files behind a path: itself, the files of a folder, or a glob's matches."""
    if _is_glob(path):
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


def _keys(columns: list) -> dict:
    return dict(zip(columns, ("data.x", "data.y", "data.group")))


def read_chunks(path: Path, kind: str, columns: list, chunk_size: int, reader: str, sep: str,
                decimal: str, keys: dict | None = None):
    """Yield the ``columns`` of one file as DataFrames of about ``chunk_size`` rows.

    Raises
    ------
    DataError
        A column is missing, Parquet support is not installed, or the file
        cannot be parsed (pyarrow reader: a cell that is not a number).
    """
    keys = keys or _keys(columns)
    if kind == "parquet":
        try:
            import pyarrow.parquet as pq
        except ImportError:
            raise DataError(f"{path}: reading Parquet files needs the 'parquet' extra: "
                            "pip install 'scaling[parquet]'") from None
        names = pq.ParquetFile(path).schema_arrow.names
        for c in columns:
            check_column(names, c, keys[c], str(path))
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
        check_column(header, c, keys[c], str(path))
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


def frame_chunks(df: pd.DataFrame, chunk_size: int | None):
    """Yield an in-memory table in slices of ``chunk_size`` rows (whole when None)."""
    size = len(df) if chunk_size is None else check_chunk_size(chunk_size)
    for start in range(0, max(len(df), 1), max(size, 1)):
        yield df.iloc[start:start + size]


# --------------------------------------------------------------------------
# cleaning one chunk


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
    v, problem, _ = parse_numbers(   # the text rules of scaling.io.tables, unchanged
        col.reset_index(drop=True), decimal)
    return v, (problem if (problem != "").any() else None)


def _labels_of(uniques) -> pd.Index:
    """Group names as text (as :mod:`scaling.io.tables` writes them)."""
    idx = pd.Index(uniques)
    if pd.api.types.is_float_dtype(idx.dtype):
        # 3.0 -> "3", as a csv read as text would show it when written as "3"
        return pd.Index([f"{v:g}" for v in idx.to_numpy()], dtype=object)
    return idx.astype(str)


def _dedupe(codes, labels: pd.Index):
    new_codes, uniq = pd.factorize(labels.to_numpy(), sort=False)
    return np.where(codes < 0, -1, new_codes[codes]), pd.Index(uniq, dtype=object)


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


def clean_chunk(part: pd.DataFrame, x: str, y: str, group: str | None,
                decimal: str, unit: str | None = None) -> CleanChunk:
    """Parse the numbers and group names of one chunk and mark the rows to drop.

    Parameters
    ----------
    part : DataFrame
        The chunk, with the columns ``x``, ``y`` (and ``group``).
    x, y, group : str
        Column names (``group`` None: one group named "").
    decimal : str
        Decimal mark of numbers stored as text.
    unit : str, optional
        Column of units whose rows are averaged (``data.average_within``); a
        row with no unit is dropped, as :mod:`scaling.io.tables` does.
    """
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
    u_codes = u_labels = None
    if unit is not None:
        u_codes, u_labels, missing = _group_codes(part[unit])
        if missing.any():
            counts[f"{unit} (data.average_within) is missing"] = int(missing.sum())
            bad = missing if bad is None else (bad | missing)
    return CleanChunk(labels=labels, codes=codes, x=values[0], y=values[1], bad=bad,
                      counts=counts, n_rows=len(part),
                      n_dropped=0 if bad is None else int(bad.sum()),
                      unit_labels=u_labels, unit_codes=u_codes)


# --------------------------------------------------------------------------
# Dask


def dask_partitions(path: Path, kind: str, columns: list, chunk_size: int, sep: str,
                    decimal: str, keys: dict | None = None) -> list:
    """The Dask partitions (delayed DataFrames) of the ``columns`` of a file, folder or glob.

    Raises
    ------
    ConfigError
        Dask is not installed.
    DataError
        A column is missing.
    """
    try:
        import dask.dataframe as dd
    except ImportError:
        raise ConfigError("engine 'dask' needs the 'dask' extra: "
                          "pip install 'scaling[dask]'") from None
    keys = keys or _keys(columns)
    if kind == "parquet":
        names = [str(c).strip() for c in dd.read_parquet(str(path)).columns]
        for c in columns:
            check_column(names, c, keys[c], str(path))
        ddf = dd.read_parquet(str(path), columns=columns)     # reads only these columns
    else:
        ddf = dd.read_csv(str(path), sep=sep, decimal=decimal, skipinitialspace=True,
                          blocksize=max(1 << 16, chunk_size * 24), dtype="object")
    for c in columns:
        check_column([str(s).strip() for s in ddf.columns], c, keys[c], str(path))
    ddf = ddf[[c for c in ddf.columns if str(c).strip() in columns]]
    return list(ddf.to_delayed())


def dask_compute(tasks: list, scheduler: str | None) -> tuple:
    """Compute Dask tasks on a local scheduler by name or on a cluster by address.

    Raises
    ------
    ConfigError
        An unknown scheduler name, or an address without ``dask.distributed``.
    """
    import dask
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
        return dask.compute(*tasks, **kwargs)
    finally:
        if client is not None:
            client.close()
