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
from pathlib import Path

import numpy as np

__all__ = ["read_plain_columns", "PLAIN_DELIMITERS"]

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
