"""Plain delimited files read by pyarrow: no Python string per cell.

Two readers, both shortcuts and not a second set of rules: each answers only
for files on which it is sure to give what :mod:`scaling.io.tables` gives with
pandas (the reference), and returns ``None`` otherwise, so that the caller
reads the file the pandas way and every drop reason, warning and error message
comes from one place.

* :func:`read_plain_columns` reads just the columns a fit needs, the numbers
  straight to float64 and the labels (group, unit) as Arrow text, when no row
  would be dropped: then no table of text is made at all.
* :func:`read_plain_text` reads every cell as Arrow text, the table
  ``pandas.read_csv(dtype=str)`` gives, for the cleaning to go through.

A plain file is UTF-8 without a byte-order mark, its lines end in ``\\n`` only,
it holds no quote character, no NUL byte and no plus sign but an exponent's,
its delimiter is one character and every line under the header line has as
many cells as the header line.  On such a file pyarrow and pandas split lines
and cells the same way (a blank line is a row of empty cells).
:func:`read_plain_columns` asks more: header names distinct and not blank,
every number finite and positive (a blank, missing, censored, zero, negative
or infinite value would be a dropped row) and every label given.  The number
grammar pyarrow accepts is then a subset of what the text reading accepts
after trimming, and both round correctly (as Python's ``float`` does), so the
values are the same bits.  (With a leading plus sign pandas' ``to_numeric`` is
sometimes one unit in the last place off the correctly rounded value, while
pyarrow is not: such files are left to pandas, whose values they keep.)
"""

from __future__ import annotations

import codecs
import os
import threading
from pathlib import Path

import numpy as np

__all__ = ["read_plain_columns", "PLAIN_DELIMITERS", "plain_columns_args", "read_ahead",
           "settle_reads", "sniff_delimiter", "text_encoding", "EXCEL_SUFFIXES"]

#: Spreadsheet files (read by pandas and openpyxl, never by these readers).
EXCEL_SUFFIXES = (".xlsx", ".xlsm", ".xls")


def text_encoding(cfg) -> str:
    """The encoding a text file of ``cfg`` (a DataConfig) is opened with: UTF-8 files
    through ``utf-8-sig`` (a byte-order mark is dropped)."""
    enc = cfg.encoding.lower().replace("_", "-")
    return "utf-8-sig" if enc in ("utf-8", "utf8") else cfg.encoding


def sniff_delimiter(path: Path, cfg) -> str:
    """The delimiter of ``data.delimiter: auto``: the one of comma, tab and semicolon most
    frequent in the header line (not the comma with ``data.decimal: ","``), else a comma."""
    with open(path, encoding=text_encoding(cfg), errors="replace", newline="") as fh:
        for _ in range(cfg.skip_rows):
            fh.readline()
        header = fh.readline()
    counts = {d: header.count(d) for d in (",", "\t", ";")}
    if cfg.decimal == ",":
        counts.pop(",")
    best = max(counts, key=counts.get)
    return best if counts[best] > 0 else ","


def plain_columns_args(cfg) -> dict | None:
    """The arguments of :func:`read_plain_columns` (but the path) for ``cfg``'s file (a
    DataConfig), or None when the config needs the text reading whatever the file holds:
    several predictors, decimal ",", ``data.exclude``, a units row, another encoding
    than UTF-8, a spreadsheet or Parquet file, or no such file."""
    path = Path(cfg.file)
    if (isinstance(cfg.x, tuple) or cfg.decimal != "." or cfg.exclude or cfg.units_row
            or text_encoding(cfg) != "utf-8-sig" or not path.is_file()
            or path.suffix.lower() in (*EXCEL_SUFFIXES, ".parquet")):
        return None
    sep = sniff_delimiter(path, cfg) if cfg.delimiter == "auto" else cfg.delimiter
    labels = tuple(c for c in (cfg.group, cfg.average_within) if c)
    return dict(sep=sep, skip_rows=cfg.skip_rows, numbers=(cfg.x, cfg.y), labels=labels)


#: Reads started ahead (:func:`read_ahead`): ``key -> (thread, answer box)``.
_AHEAD: dict = {}


def _ahead_key(path, sep: str, skip_rows: int, numbers: tuple, labels: tuple):
    """What a read ahead must match to stand for a read now: the same file, unchanged
    (size and modification time), read with the same arguments; None: no such file."""
    try:
        st = os.stat(path)
        where = str(Path(path).resolve())
    except OSError:
        return None
    return (where, st.st_size, st.st_mtime_ns, sep, skip_rows, tuple(numbers), tuple(labels))


def read_ahead(path, *, sep: str, skip_rows: int, numbers: tuple, labels: tuple) -> None:
    """Start :func:`read_plain_columns` of ``path`` in a thread; the next call with the same
    arguments on the same unchanged file takes its answer instead of reading again.

    ``scaling run`` starts it before it imports what the run needs: pyarrow parses
    the file (without the interpreter lock) while pandas and scipy are imported.
    Anything the read raises is dropped: the call that takes its place reads again
    and raises it there.
    """
    key = _ahead_key(path, sep, skip_rows, numbers, labels)
    if key is None or key in _AHEAD:
        return
    box: dict = {}

    def read() -> None:
        try:
            box["columns"] = _read_plain_columns(path, sep=sep, skip_rows=skip_rows,
                                                 numbers=numbers, labels=labels)
        except BaseException:  # noqa: BLE001 -- read again where it is wanted
            pass

    thread = threading.Thread(target=read, name="scaling-read-ahead", daemon=True)
    _AHEAD[key] = (thread, box)
    thread.start()


def settle_reads() -> None:
    """Wait for the reads started ahead (their answers are kept): before a fork, whose
    child would otherwise inherit locks a reading thread holds."""
    for thread, _ in list(_AHEAD.values()):
        thread.join()

#: Delimiters the shortcut takes (the sniffed ones and the pipe).
PLAIN_DELIMITERS = (",", "\t", ";", "|")

_SCAN_BYTES = 1 << 20   # one pass over the file, 1 MB at a time
#: Bytes of the file pyarrow parses at a time (its default is 1 MB): each block's columns
#: are pieces that the whole columns are then copied out of, and a thousand pieces of
#: a few hundred kB leave holes in the heap that outlast the reading (about 20 MB on a
#: 45 MB file); blocks of 16 MB leave few.  The values do not depend on it.
BLOCK_BYTES = 16 << 20
_BOM = codecs.BOM_UTF8


def _file_is_plain(path: Path) -> bool:
    """Whether the whole file is UTF-8 without BOM, and free of quotes, ``\\r`` and NUL."""
    decoder = codecs.getincrementaldecoder("utf-8")()
    with open(path, "rb") as fh:
        first = True
        while True:
            block = fh.read(_SCAN_BYTES)
            if not block:
                break
            if first and block.startswith(_BOM):
                return False
            first = False
            if b'"' in block or b"\r" in block or b"\0" in block:
                return False
            # a plus sign other than an exponent's ("+1.5"): pandas' to_numeric, which the
            # text reading uses, is then one unit in the last place off Python's float()
            # for some numbers, so such files keep the text reading's values
            if b"+" in block and (block.count(b"+")
                                   != block.count(b"e+") + block.count(b"E+")):
                return False
            if not block.isascii():
                try:
                    decoder.decode(block)
                except UnicodeDecodeError:
                    return False
    try:
        decoder.decode(b"", final=True)
    except UnicodeDecodeError:
        return False
    return True


def _header_cells(path: Path, skip_rows: int, sep: str) -> list | None:
    """The cells of the header line (line ``skip_rows`` from 0), or None past the end."""
    with open(path, encoding="utf-8", newline="") as fh:
        for _ in range(skip_rows):
            if not fh.readline():
                return None
        line = fh.readline()
    if not line:
        return None
    return line.removesuffix("\n").split(sep)


def read_plain_columns(path, *, sep: str, skip_rows: int, numbers: tuple,
                       labels: tuple) -> dict | None:
    """Read the columns ``numbers`` (float64) and ``labels`` (trimmed text) of a plain file.

    Parameters
    ----------
    path : path-like
        A delimited text file.
    sep : str
        Its delimiter, one of :data:`PLAIN_DELIMITERS`.
    skip_rows : int
        Lines above the header line.
    numbers, labels : tuple of str
        Header names (as trimmed) of the columns to read as numbers and as text.

    Returns
    -------
    dict or None
        ``{name: ndarray}`` for the number columns (finite, positive) and
        ``{name: pyarrow.Array}`` (large_string, trimmed, none empty) for the
        label columns, all of one length >= 1; ``None`` when the file is not
        plain, pyarrow is missing, a name is absent or used twice, or any cell
        would be dropped or flagged by the text reading.
    """
    if _AHEAD:   # a read started ahead of this one (scaling run)
        job = _AHEAD.pop(_ahead_key(path, sep, skip_rows, numbers, labels), None)
        if job is not None:
            job[0].join()
            if "columns" in job[1]:
                return job[1]["columns"]
    return _read_plain_columns(path, sep=sep, skip_rows=skip_rows, numbers=numbers,
                               labels=labels)


def _read_plain_columns(path, *, sep: str, skip_rows: int, numbers: tuple,
                        labels: tuple) -> dict | None:
    try:
        import pyarrow as pa
        import pyarrow.compute as pc
        import pyarrow.csv  # noqa: F401 -- needed by _arrow_read
    except ImportError:
        return None
    path = Path(path)
    wanted = (*numbers, *labels)
    if sep not in PLAIN_DELIMITERS or len(set(wanted)) != len(wanted):
        return None
    if not _file_is_plain(path):
        return None
    cells = _header_cells(path, skip_rows, sep)
    if cells is None:
        return None
    names = [c.strip() for c in cells]
    if "" in names or len(set(names)) != len(names) or not set(wanted) <= set(names):
        return None
    raw = dict(zip(names, cells))   # pyarrow matches header names as written
    types = {raw[n]: pa.float64() for n in numbers} | {raw[n]: pa.large_string() for n in labels}
    pool = pa.system_memory_pool()
    try:
        # the system allocator: what Arrow frees, numpy can use again
        table = _arrow_read(path, skip_rows=skip_rows, names=cells, sep=sep, types=types,
                            include=[raw[n] for n in wanted], pool=pool)
    except (pa.ArrowException, ValueError, OSError):
        return None   # a line with another number of cells, a cell that is no number, ...
    if table.num_rows == 0:
        return None
    out: dict = {}
    for name in numbers:
        column = table.column(raw[name])
        if column.null_count:
            return None
        values = column.to_numpy()
        del column
        table = table.drop_columns([raw[name]])   # each column is let go once converted
        # finite and positive, and so neither NaN, infinite, zero nor negative
        if not np.all((values > 0) & (values < np.inf)):
            return None
        out[name] = values if values.flags.writeable else values.copy()
    for name in labels:
        text = table.column(raw[name])
        table = table.drop_columns([raw[name]])
        text = pc.utf8_trim_whitespace(text, memory_pool=pool)   # as str.strip does
        if pc.any(pc.equal(text, "")).as_py():
            return None
        out[name] = text.combine_chunks(pool)   # large_string: what pandas holds
    return out


def read_plain_text(path, *, sep: str, skip_rows: int, n_columns: int) -> list | None:
    """Every cell of a plain file as written, one large_string Arrow array per column.

    What ``pandas.read_csv(dtype=str, na_filter=False, skip_blank_lines=False)``
    gives for the lines under the header line (a blank line: a row of ""),
    without a Python string per cell.  ``None`` when the file is not plain (see
    the module doc), has a line with another number of cells than
    ``n_columns``, or pyarrow is missing: the caller then reads it with pandas.
    """
    try:
        import pyarrow as pa
        import pyarrow.csv  # noqa: F401 -- needed by _arrow_read
    except ImportError:
        return None
    path = Path(path)
    if sep not in PLAIN_DELIMITERS or n_columns < 1 or not _file_is_plain(path):
        return None
    cells = _header_cells(path, skip_rows, sep)
    if cells is None or len(cells) != n_columns:
        return None
    names = [f"c{j}" for j in range(n_columns)]
    pool = pa.system_memory_pool()
    try:
        table = _arrow_read(path, skip_rows=skip_rows, names=names, sep=sep,
                            types={n: pa.large_string() for n in names}, include=[],
                            pool=pool)
    except (pa.ArrowException, ValueError, OSError):
        return None
    return [table.column(n) for n in names]


def _arrow_read(path, *, skip_rows: int, names: list, sep: str, types: dict, include: list,
                pool):
    """``pyarrow.csv.read_csv`` of the lines under the header, as both readers need it:
    one thread (as fast on two shared cores, a third less memory at its peak), no quoting,
    blank lines kept, no cell read as null; ``include``: the columns (empty: all)."""
    import pyarrow.csv as pcsv
    return pcsv.read_csv(
        path,
        read_options=pcsv.ReadOptions(skip_rows=skip_rows + 1, column_names=names,
                                      use_threads=False, block_size=BLOCK_BYTES),
        parse_options=pcsv.ParseOptions(delimiter=sep, quote_char=False, double_quote=False,
                                        ignore_empty_lines=False),
        convert_options=pcsv.ConvertOptions(column_types=types, include_columns=include,
                                            strings_can_be_null=False),
        memory_pool=pool)
