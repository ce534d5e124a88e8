"""Read a measurement table, keep the usable rows, and say why others went.

The result is a :class:`CleanData`: the points to fit (natural and log
values, group, and input row numbers) and an audit table ``dropped`` with
one row per input row removed and the reason.  Row numbers: row 1
is the first line after the header line, counting every line (blank lines and
a units row too), so header line + row = file line, which lets a user find a
dropped row in any editor.
"""

from __future__ import annotations

import csv
import difflib
import math
import re
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from .config import DataConfig
from .fast_csv import (EXCEL_SUFFIXES as _EXCEL_SUFFIXES, plain_columns_args,
                       read_plain_columns, read_plain_text, sniff_delimiter as _sniff_delimiter,
                       text_encoding as _encoding)
from ..errors import DataError, DataWarning
from ..stats.logscale import to_log

__all__ = ["CleanData", "load_data", "read_table", "clean_table"]

# "3,5" or "-0,25" or "1,5e3": a number written with a decimal comma.
_DECIMAL_COMMA = re.compile(r"^[-+]?\d*,\d+(?:[eE][-+]?\d+)?$")
_DECIMAL_HINT = 'if "," is the decimal mark, set data.decimal: ","'

_MISSING_TOKENS = {"", "na", "n/a", "nan", "null", "none", "missing", "-", "--", "?", ".", "#n/a"}

#: Lines (sheet rows) searched for the header when the x and y columns are not found.
_HEADER_SEARCH_LINES = 50


@dataclass(frozen=True, slots=True, kw_only=True)
class CleanData:
    """Points ready to fit, and the audit of what was removed.

    Attributes
    ----------
    points : DataFrame
        Columns ``row`` (input row, or first row of the unit), ``x``, ``y``
        (natural units; geometric means after averaging), ``log_x``,
        ``log_y``, ``group`` (or absent), ``n_rows`` (rows behind the point)
        and ``unit`` when averaged.
    dropped : DataFrame
        Columns ``row, reason``.
    n_read : int
        Data rows read (excluding a units row).
    units : dict
        ``{"x": ..., "y": ...}`` labels, from the config or the units row.
    averaged_within : str or None
        Column whose units were averaged.
    """

    points: pd.DataFrame
    dropped: pd.DataFrame
    n_read: int
    units: dict = field(default_factory=dict)
    averaged_within: str | None = None
    n_rows_used: int = 0

    @property
    def has_groups(self) -> bool:
        return "group" in self.points.columns


def read_table(cfg: DataConfig) -> pd.DataFrame:
    """Read the raw table as given, every cell as text (csv/tsv) or as stored.

    The returned frame has a default index 0..N-1 where index i is row i + 1
    of the module's row numbering.
    """
    path = Path(cfg.file)
    if not path.exists():
        raise DataError(f"{path}: data file not found (data.file)")
    if path.is_dir():
        raise DataError(f"{path}: is a folder, not a data file (data.file)")
    suffix = path.suffix.lower()
    header = None    # the header line's cells as written (pandas renames duplicates)
    try:
        if suffix in _EXCEL_SUFFIXES:
            try:
                import openpyxl  # noqa: F401
            except ImportError:
                raise DataError(f"{path}: reading Excel files needs the 'excel' extra: "
                                "pip install 'scaling[excel]'") from None
            _check_sheet(path, cfg.sheet)
            table = pd.read_excel(path, sheet_name=cfg.sheet, skiprows=cfg.skip_rows,
                                  header=0, dtype=object)
            header = pd.read_excel(path, sheet_name=cfg.sheet, skiprows=cfg.skip_rows,
                                   header=None, nrows=1, dtype=object)
        elif suffix == ".parquet":
            try:
                import pyarrow  # noqa: F401
            except ImportError:
                raise DataError(f"{path}: reading Parquet files needs the 'parquet' extra: "
                                "pip install 'scaling[parquet]'") from None
            table = pd.read_parquet(path)
        else:
            if cfg.delimiter == cfg.decimal:
                raise DataError(f"{path}: data.delimiter and data.decimal are both "
                                f"{cfg.delimiter!r}")
            sep = _sniff_delimiter(path, cfg) if cfg.delimiter == "auto" else cfg.delimiter
            options = dict(sep=sep, skiprows=cfg.skip_rows, dtype=str, keep_default_na=False,
                           na_filter=False, skip_blank_lines=False, encoding=_encoding(cfg),
                           engine="python" if len(sep) > 1 else "c")
            header = pd.read_csv(path, header=None, nrows=1, **options)
            table = _read_plain_text(path, sep, cfg, options)
            if table is None:
                table = pd.read_csv(path, header=0, **options)
    except DataError:
        raise
    except UnicodeDecodeError as exc:
        raise DataError(f"{path}: cannot decode as {cfg.encoding} ({exc.reason}); "
                        "set data.encoding (e.g. latin-1)") from None
    except Exception as exc:  # parser errors from pandas / engines
        raise DataError(f"{path}: cannot read table: {str(exc).splitlines()[0]}"
                        f"{_skip_rows_hint(cfg, path)}") from None
    names = (list(table.columns) if header is None or not len(header)
             else header.iloc[0].tolist())
    table.columns = [str(c).strip() for c in table.columns]
    table = table.reset_index(drop=True)
    table.attrs["duplicated_columns"] = _duplicated(names)
    return table


def _read_plain_text(path: Path, sep: str, cfg: DataConfig, options: dict):
    """``pd.read_csv(path, header=0, **options)`` for a plain UTF-8 file, its cells
    held by Arrow as read (no Python string per cell); None for any other file."""
    if _encoding(cfg) != "utf-8-sig":
        return None
    columns = pd.read_csv(path, header=0, nrows=0, **options).columns   # pandas' names
    arrays = read_plain_text(path, sep=sep, skip_rows=cfg.skip_rows, n_columns=len(columns))
    if arrays is None:
        return None
    table = pd.DataFrame({j: pd.array(a, dtype=_TEXT_DTYPE) for j, a in enumerate(arrays)},
                         copy=False)
    table.columns = columns
    return table


def _check_sheet(path: Path, sheet) -> None:
    """A DataError listing the workbook's sheets when ``data.sheet`` names none of them."""
    try:
        with pd.ExcelFile(path) as book:
            names = list(book.sheet_names)
    except Exception:   # not a workbook: reported by the reader itself
        return
    if isinstance(sheet, int) and not isinstance(sheet, bool):
        if 0 <= sheet < len(names):
            return
        what = f"no sheet number {sheet} (data.sheet counts from 0)"
    elif str(sheet) in names:
        return
    else:
        what = f"no sheet named {str(sheet)!r} (data.sheet)"
    shown = ", ".join(repr(n) for n in names)
    close = difflib.get_close_matches(str(sheet), names, n=1, cutoff=0.6)
    hint = f"; did you mean {close[0]!r}?" if close and not isinstance(sheet, int) else ""
    raise DataError(f"{path}: {what}; the workbook's sheets are: {shown}{hint}")


def _duplicated(names) -> dict:
    """Header names written more than once (after trimming; blank cells ignored) ->
    their positions in the header line, counted from 1."""
    where: dict[str, list] = {}
    for i, name in enumerate(names, 1):
        text = _cell_text(name)
        if text:
            where.setdefault(text, []).append(i)
    return {c: tuple(at) for c, at in where.items() if len(at) > 1}


def _cell_text(value) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return ""
    return str(value).strip()


def _first_rows(cfg: DataConfig, path: Path) -> list:
    """The cells of the first lines (csv) or sheet rows (Excel), as sets of trimmed text.

    Counted from the top of the file, as ``data.skip_rows`` counts: entry i is
    the line that ``data.skip_rows: i`` would make the header line.
    """
    if path.suffix.lower() in _EXCEL_SUFFIXES:
        frame = pd.read_excel(path, sheet_name=cfg.sheet, header=None,
                              nrows=_HEADER_SEARCH_LINES, dtype=object)
        return [{_cell_text(v) for v in row} for row in frame.itertuples(index=False)]
    if path.suffix.lower() == ".parquet":
        return []
    seps = (",", "\t", ";") if cfg.delimiter == "auto" else (cfg.delimiter,)
    rows = []
    with open(path, encoding=_encoding(cfg), errors="replace", newline="") as fh:
        for _ in range(_HEADER_SEARCH_LINES):
            line = fh.readline()
            if not line:
                break
            cells = set()
            for sep in seps:
                if len(sep) == 1:
                    cells |= {c.strip() for c in next(csv.reader([line], delimiter=sep), [])}
            rows.append(cells)
    return rows


def _skip_rows_hint(cfg: DataConfig, path: Path) -> str:
    """"; line N holds the x and y columns: set data.skip_rows: K" when such a line is
    near the top and is not the header line read; "" otherwise."""
    wanted = [*cfg.x_columns, cfg.y]
    try:
        rows = _first_rows(cfg, path)
    except Exception:   # the hint is a courtesy: never let it replace the real error
        return ""
    for i, cells in enumerate(rows):
        if set(wanted) <= cells and i != cfg.skip_rows:
            where = "row" if path.suffix.lower() in _EXCEL_SUFFIXES else "line"
            return (f"; {where} {i + 1} holds the columns {', '.join(wanted)}: "
                    f"set data.skip_rows: {i}")
    return ""


def missing_column_message(name: str, key: str, columns, where, *, skip: str = "") -> str:
    """The one line for a config key naming a column the file lacks: the closest
    header name ("did you mean"; not beside a ``skip`` hint) and the columns there are.
    Every road (whole table, chunks, Dask partitions) says it the same way."""
    columns = [str(c) for c in columns]
    close = difflib.get_close_matches(name, columns, n=1, cutoff=0.6)
    hint = f"; did you mean '{close[0]}'?" if close and not skip else ""
    head = f"{where}: column '{name}' ({key}) not found{hint}{skip}"
    return f"{head}{' ' if head.endswith('?') else '. '}Columns are: {', '.join(columns[:12])}"


def _column(table: pd.DataFrame, name: str, key: str, path: Path,
            cfg: DataConfig | None = None) -> pd.Series:
    if name not in table.columns:
        skip = _skip_rows_hint(cfg, path) if cfg is not None else ""
        raise DataError(missing_column_message(name, key, table.columns, path, skip=skip))
    col = table[name]
    if isinstance(col, pd.DataFrame):
        raise DataError(f"{path}: column '{name}' ({key}) appears more than once in the header")
    return col


def _check_duplicated(table: pd.DataFrame, cfg: DataConfig, path: Path) -> None:
    """A header name written twice: an error when the config reads that column, else a warning.

    pandas keeps the first and renames the others (``mass.1``), so which copy
    is analysed would depend on column order; a copy the config never reads
    changes nothing, and refusing the file for it would only be in the way.
    """
    duplicated = table.attrs.get("duplicated_columns", {})
    if not duplicated:
        return
    keys = {name: f"data.x[{j}]" if len(cfg.x_columns) > 1 else "data.x"
            for j, name in enumerate(cfg.x_columns)}
    keys.setdefault(cfg.y, "data.y")
    for name, key in ((cfg.group, "data.group"), (cfg.average_within, "data.average_within"),
                      (cfg.species, "data.species")):
        if name:
            keys.setdefault(name, key)
    for column in cfg.exclude:
        keys.setdefault(column, f"data.exclude.{column}")
    used = [c for c in duplicated if c in keys]
    if used:
        shown = "; ".join(f"'{c}' ({keys[c]}) in {_positions(duplicated[c])}" for c in used)
        raise DataError(f"{path}: the header line names the same column more than once: "
                        f"{shown}; which copy to read is unclear, so rename or remove the "
                        "extra copies")
    shown = "; ".join(f"'{c}' in {_positions(at)}" for c, at in duplicated.items())
    warnings.warn(f"{path}: the header line names the same column more than once ({shown}); "
                  f"the config reads {'none of these columns' if len(duplicated) > 1 else 'no copy of it'}"
                  ", so the results are unaffected",
                  DataWarning, stacklevel=3)


def _positions(at) -> str:
    return "columns " + ", ".join(map(str, at[:-1])) + f" and {at[-1]}"


def _text(v) -> str:
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return ""
    return str(v).strip()


def _as_text(series: pd.Series) -> pd.Series:
    """Each cell as stripped text ("" for a missing cell), in one pass over the values.

    A column of text (what ``read_csv`` gives) is stripped by ``str.strip``
    directly; any other cell goes through :func:`_text`.
    """
    dtype = series.dtype
    if isinstance(dtype, pd.StringDtype) and dtype.na_value is np.nan:
        # what read_csv gives: stripped in Arrow, no Python string per cell (Arrow's
        # whitespace is Python's, checked for every code point); missing -> ""
        return series.str.strip().fillna("")
    values = series.to_numpy(dtype=object)
    try:
        out = [v.strip() for v in values]
    except (AttributeError, TypeError):   # numbers, NaN, None, dates: cell by cell
        out = [_text(v) for v in values]
    # object dtype: building an Arrow string column of a million cells costs more
    # than the stripping; the text rules below build one for the few cells they need
    return pd.Series(out, index=series.index, dtype=object)


class _Texts:
    """:func:`_as_text` of a table's columns, each made once (cleaning reads a column's
    text for blank lines, exclusions, groups and numbers).  Columns are held by
    position: two header cells may strip to the same name."""

    def __init__(self, table: pd.DataFrame) -> None:
        self.table = table
        self.made: dict = {}

    def at(self, j: int) -> pd.Series:
        if j not in self.made:
            self.made[j] = _as_text(self.table.iloc[:, j])
        return self.made[j]

    def __call__(self, column) -> pd.Series:
        """The text of the column named ``column`` (one the config names: unique)."""
        return self.at(self.table.columns.get_loc(column))

    def to_parse(self, column) -> pd.Series | None:
        """The text :func:`_parse_numbers` reads (None for a number column: not needed)."""
        j = self.table.columns.get_loc(column)
        dtype = self.table.iloc[:, j].dtype
        numeric = pd.api.types.is_numeric_dtype(dtype) and not pd.api.types.is_bool_dtype(dtype)
        return None if numeric else self.at(j)

    def blank(self, j: int) -> np.ndarray:
        """Mask of the cells of column ``j`` whose text is "" (a number column: only its
        missing cells)."""
        series = self.table.iloc[:, j]
        dtype = series.dtype
        if isinstance(dtype, np.dtype) and dtype.kind in "biuf":
            return series.isna().to_numpy()
        return (self.at(j) == "").to_numpy()


_CENSORED = r"^[<>]\s*=?\s*[-+]?\d"


def _parse_numbers(series: pd.Series, decimal: str, *, text: pd.Series | None = None):
    """Return (values, problem, raw) arrays: float values, '' or a problem word, and the text.

    Numbers are parsed for the whole column at once; the text rules (missing
    tokens, censored values) are applied only to the cells that did not parse.
    ``text``: the column's :func:`_as_text`, when the caller has it already.
    """
    n = len(series)
    if pd.api.types.is_numeric_dtype(series.dtype) and not pd.api.types.is_bool_dtype(series.dtype):
        values = series.to_numpy(dtype=float, na_value=np.nan)
        raw = np.full(n, "", dtype=object)
    else:
        text = _as_text(series) if text is None else text
        cleaned = text.str.replace(",", ".", regex=False) if decimal == "," else text
        values = _to_numbers(cleaned)
        raw = text.array   # read cell by cell only where a cell failed
    problem = np.full(n, "", dtype=object)
    nan = np.isnan(values)
    failed = np.flatnonzero(nan)
    if failed.size:
        sub = pd.Series(raw[failed], dtype="str")
        missing = (sub.str.lower().isin(_MISSING_TOKENS) | (sub == "")).to_numpy()
        censored = sub.str.match(_CENSORED).to_numpy(dtype=bool)
        words = np.full(failed.size, "non-numeric", dtype=object)
        words[censored] = "censored"
        words[missing] = "missing"
        problem[failed] = words
    finite = np.isfinite(values)
    problem[~nan & ~finite] = "infinite"
    problem[finite & (values == 0)] = "zero"
    problem[finite & (values < 0)] = "negative"
    return values, problem, raw


#: Public name: the engine parses chunks with the same text rules.
parse_numbers = _parse_numbers

#: A number written plainly: digits, at most one point, an exponent; no sign, no spaces.
_PLAIN_NUMBER = r"^(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][-+]?[0-9]+)?$"


def _to_numbers(text: pd.Series) -> np.ndarray:
    """``pd.to_numeric(text, errors="coerce")`` as float64, the same bits, without a
    Python string per cell when ``text`` is Arrow text (what ``read_csv`` gives).

    Plainly written numbers are converted by Arrow; the other cells (missing,
    censored, words) by ``to_numeric``.  Both round correctly (Python's ``float`` is
    the reference), so a plain number gets the same bits either way.  When one of
    the other cells is a number too (a sign, "inf", ...), the whole column goes
    through ``to_numeric`` as before: its reading of a signed number depends on
    the column around it (integers read exactly when every cell is one).
    """
    arrow = _arrow_text(text)
    if arrow is None or not len(text):
        return pd.to_numeric(text, errors="coerce").to_numpy(dtype=float)
    import pyarrow as pa
    import pyarrow.compute as pc
    plain = pc.fill_null(pc.match_substring_regex(arrow, _PLAIN_NUMBER), False)
    mask = plain.to_numpy(zero_copy_only=False)
    values = np.full(len(text), np.nan)
    try:
        values[mask] = pc.cast(pc.filter(arrow, plain), pa.float64()).to_numpy()
    except pa.ArrowInvalid:   # not expected for plain numbers; the old way then
        return pd.to_numeric(text, errors="coerce").to_numpy(dtype=float)
    rest = np.flatnonzero(~mask)
    if rest.size:
        others = pd.to_numeric(text.iloc[rest], errors="coerce").to_numpy(dtype=float)
        if not np.isnan(others).all():
            return pd.to_numeric(text, errors="coerce").to_numpy(dtype=float)
        values[rest] = others
    return values


def _reason(role: str, column: str, problem: str, raw: str, decimal: str = ".") -> str:
    what = f"{role} ({column})"
    if problem == "missing":
        return f"{what} is missing"
    if problem == "non-numeric":
        if decimal != "," and _DECIMAL_COMMA.match(raw):
            return f"{what} is not a number: {raw!r} ({_DECIMAL_HINT})"
        return f"{what} is not a number: {raw!r}"
    if problem == "censored":
        return f"{what} is censored: {raw!r}"
    if problem == "infinite":
        return f"{what} is infinite"
    if problem == "zero":
        return f"{what} is zero: no logarithm"
    return f"{what} is negative: no logarithm"


def _matches(raw_text: pd.Series, targets) -> np.ndarray:
    hit = np.zeros(len(raw_text), dtype=bool)
    numbers = pd.to_numeric(raw_text, errors="coerce").to_numpy(dtype=float)
    for target in targets:
        hit |= (raw_text == str(target).strip()).to_numpy()
        if isinstance(target, (int, float)) and not isinstance(target, bool):
            hit |= numbers == float(target)
    return hit


class _Reasons:
    """The drop reasons of a table's rows, kept only for rows that have one.

    ``add(rows, text)`` appends ``text`` (a string, or one string per row) to
    each row of the index array ``rows``; reasons of a row keep their order.
    """

    def __init__(self, n: int) -> None:
        self.n = n
        self.by_row: dict[int, list[str]] = {}

    def add(self, rows, text) -> None:
        texts = [text] * len(rows) if isinstance(text, str) else text
        for i, t in zip(np.asarray(rows).tolist(), texts):
            self.by_row.setdefault(i, []).append(t)

    def mask(self) -> np.ndarray:
        out = np.zeros(self.n, dtype=bool)
        out[list(self.by_row)] = True
        return out


def _blank_and_excluded(table, keep, reasons, cfg, path, texts: _Texts):
    """Note blank lines and rows matched by ``data.exclude`` in ``reasons``; warn about
    exclude values that match nothing.  Returns the mask of rows still active."""
    blank = np.ones(len(table), dtype=bool)
    for j in range(table.shape[1]):
        blank &= texts.blank(j)
    reasons.add(np.flatnonzero(blank & keep), "blank line")
    active = keep & ~blank
    for column, values in cfg.exclude.items():
        text = texts(column)
        hit = _matches(text, values)
        at = np.flatnonzero(hit & active)
        shown = text.to_numpy(dtype=object)[at]
        reasons.add(at, [f"excluded: {column} is {v!r}" for v in shown])
        _warn_unmatched(column, values, text[keep & ~blank], path)
    return active & ~(reasons.mask() & active)


def _dropped_and_used(reasons, rows, keep, n_read: int, path):
    """The dropped-rows table (row, reasons joined by "; ") and the mask of rows used.

    Raises DataError when the table has no data rows or every row was dropped
    (naming the most common reason).
    """
    dropped_mask = reasons.mask() & keep
    at = np.flatnonzero(dropped_mask)
    dropped = pd.DataFrame({
        "row": rows[dropped_mask].astype(int),
        "reason": ["; ".join(reasons.by_row[i]) for i in at.tolist()],
    })
    use = keep & ~dropped_mask
    if n_read == 0:
        raise DataError(f"{path}: has no data rows under the header line")
    if not use.any():
        common = dropped["reason"].value_counts().index[0] if len(dropped) else "the table is empty"
        raise DataError(f"{path}: no usable rows: all {n_read} data rows were dropped "
                        f"(most common reason: {common})")
    return dropped, use


def clean_table(table: pd.DataFrame, cfg: DataConfig, *, log_base=10.0) -> CleanData:
    """Select, exclude, coerce, drop and (optionally) average; see module doc."""
    path = Path(cfg.file)
    units = dict(cfg.units)
    rows = np.arange(1, len(table) + 1)
    keep = np.ones(len(table), dtype=bool)
    if cfg.units_row:
        if len(table) == 0:
            raise DataError(f"{path}: data.units_row is true but there is no line under the header")
        first = table.iloc[0]
        _check_units_row(first, cfg, path)
        for role, name in (("x", cfg.x), ("y", cfg.y)):
            if name in table.columns and role not in units:
                unit = str(first[name]).strip()
                if unit and unit.lower() != "nan":
                    units[role] = unit
        keep[0] = False
    n_read = int(keep.sum())

    _check_duplicated(table, cfg, path)
    x_col = _column(table, cfg.x, "data.x", path, cfg)
    y_col = _column(table, cfg.y, "data.y", path, cfg)
    g_col = _column(table, cfg.group, "data.group", path) if cfg.group else None
    u_key = ("data.species" if cfg.tree is not None and cfg.average_within == cfg.species
             else "data.average_within")
    u_col = _column(table, cfg.average_within, u_key, path) if cfg.average_within else None
    for column in cfg.exclude:
        _column(table, column, f"data.exclude.{column}", path)

    reasons = _Reasons(len(table))
    texts = _Texts(table)
    active = _blank_and_excluded(table, keep, reasons, cfg, path, texts)

    if g_col is not None:
        g_text = texts(cfg.group)
        reasons.add(np.flatnonzero((g_text == "").to_numpy() & active),
                    f"group ({cfg.group}) is missing")
    if u_col is not None:
        u_text = texts(cfg.average_within)
        reasons.add(np.flatnonzero((u_text == "").to_numpy() & active),
                    f"{cfg.average_within} (data.average_within) is missing")

    x_val, x_prob, x_raw = _parse_numbers(x_col, cfg.decimal, text=texts.to_parse(cfg.x))
    y_val, y_prob, y_raw = _parse_numbers(y_col, cfg.decimal, text=texts.to_parse(cfg.y))
    for role, column, prob, raw in (("x", cfg.x, x_prob, x_raw), ("y", cfg.y, y_prob, y_raw)):
        _check_decimal_comma(role, column, prob[active], raw[active], cfg, path)
        at = np.flatnonzero((prob != "") & active)
        reasons.add(at, [_reason(role, column, p, str(r), cfg.decimal)
                         for p, r in zip(prob[at], np.asarray(raw[at], dtype=object))])

    dropped, use = _dropped_and_used(reasons, rows, keep, n_read, path)
    # the text table and the number columns' text are not needed past here
    del texts, table, x_col, y_col, g_col, u_col, x_raw, y_raw, x_prob, y_prob
    pts = _points(rows[use].astype(int), x_val[use], y_val[use],
                  _used_labels(g_text, use) if cfg.group else None,
                  _used_labels(u_text, use) if cfg.average_within else None, cfg, path, log_base)
    return CleanData(points=pts, dropped=dropped, n_read=n_read, units=units,
                     averaged_within=cfg.average_within, n_rows_used=int(use.sum()))


def _arrow_text(series: pd.Series):
    """The Arrow array (chunked) behind a column of pandas' default text dtype, or None."""
    dtype = series.dtype
    if (isinstance(dtype, pd.StringDtype) and dtype.storage == "pyarrow"
            and dtype.na_value is np.nan):
        return series.array.__arrow_array__()
    return None


def _used_labels(text: pd.Series, use: np.ndarray):
    """The labels of the used rows as ``points`` holds them (pandas' default text dtype):
    taken in Arrow when the text is Arrow's, with no Python string per row."""
    arrow = _arrow_text(text)
    if arrow is None:
        return text.to_numpy()[use]
    import pyarrow as pa
    import pyarrow.compute as pc
    kept = pc.filter(arrow, pa.array(use)).combine_chunks()
    return pd.array(kept, dtype=_TEXT_DTYPE)


def _points(rows, x, y, group, unit, cfg: DataConfig, path: Path, base) -> pd.DataFrame:
    """The ``points`` of a :class:`CleanData` from the used rows' numbers, group and unit
    (``group``, ``unit``: one label per row, or None); averaged within units when given."""
    # the arrays become the frame's columns as they are (no copy into one block); each
    # point is one row, and the column saying so is one number seen n times (a read-only
    # array of stride 0: eight bytes, not eight a row; pandas copies it if written)
    columns = {"row": rows, "x": x, "y": y, "log_x": to_log(np.asarray(x), base),
               "log_y": to_log(np.asarray(y), base)}
    if group is not None:
        columns["group"] = group
    columns["n_rows"] = np.broadcast_to(np.int64(1), (len(rows),))
    pts = pd.DataFrame(columns, copy=False)
    if unit is not None:
        pts["unit"] = unit
        pts = _average_within(pts, cfg, path, base)
    return pts.reset_index(drop=True)


def _clean_plain(cfg: DataConfig, *, log_base=10.0) -> CleanData | None:
    """:func:`clean_table` of a plain delimited file read by
    :func:`~scaling.io.fast_csv.read_plain_columns`, or None when the file or the
    config needs the text reading (it alone words drop reasons, warnings and errors).

    Taken when nothing could be dropped or warned about: one predictor, decimal ".",
    UTF-8, no ``data.exclude``, no units row (and, by the reader, every number finite
    and positive and every group and unit given).
    """
    path = Path(cfg.file)
    args = plain_columns_args(cfg)
    if args is None:
        return None
    labels = args["labels"]
    columns = read_plain_columns(path, **args)
    if columns is None:
        return None
    n = len(columns[cfg.x])
    rows = np.arange(1, n + 1)
    keep = np.ones(n, dtype=bool)
    dropped, _ = _dropped_and_used(_Reasons(n), rows, keep, n, path)
    text = {c: pd.array(columns.pop(c), dtype=_TEXT_DTYPE) for c in labels}
    pts = _points(rows, columns.pop(cfg.x), columns.pop(cfg.y), text.get(cfg.group),
                  text.get(cfg.average_within), cfg, path, log_base)
    return CleanData(points=pts, dropped=dropped, n_read=n, units=dict(cfg.units),
                     averaged_within=cfg.average_within, n_rows_used=n)


#: What the text reading gives a column of labels (pandas' default string dtype).
_TEXT_DTYPE = pd.Series(np.array([""], dtype=object)).dtype


def _check_units_row(first: pd.Series, cfg: DataConfig, path: Path) -> None:
    """Refuse a 'units row' whose x and y cells are numbers: it is a data row."""
    cells = {}
    for name in (cfg.x, cfg.y):
        if name not in first.index:
            return   # the missing column is reported by _column, with its hint
        raw = first[name]
        raw = raw.iloc[0] if isinstance(raw, pd.Series) else raw
        values, problem, _ = _parse_numbers(pd.Series([raw], dtype=object), cfg.decimal)
        if problem[0] not in ("", "zero", "negative"):
            return   # text (a unit), empty or censored: not a plain number
        cells[name] = str(raw).strip()
    shown = ", ".join(f"{k} = {v}" for k, v in cells.items())
    raise DataError(f"{path}: data.units_row is true, but row 1 (the line under the header) "
                    f"holds numbers ({shown}), not units; it would be lost as data. Set "
                    "data.units_row: false, or add the units line to the file")


def _warn_unmatched(column: str, values, text: pd.Series, path: Path) -> None:
    """Warn for each exclude value that matches no row of ``column`` (a typo?)."""
    present = sorted(set(text) - {""})
    for value in values:
        if _matches(text, [value]).any():
            continue
        close = difflib.get_close_matches(str(value).strip(), present, n=3, cutoff=0.6)
        if close:
            hint = "closest values: " + ", ".join(repr(c) for c in close)
        else:
            hint = ("values there include: " + ", ".join(repr(c) for c in present[:5])
                    + (", ..." if len(present) > 5 else "")) if present else "the column is empty"
        warnings.warn(f"{path}: data.exclude.{column}: {str(value)!r} matches no row of "
                      f"column '{column}', so nothing was excluded for it ({hint})",
                      DataWarning, stacklevel=3)


def _check_decimal_comma(role: str, column: str, problem: np.ndarray, raw: np.ndarray,
                         cfg: DataConfig, path: Path) -> None:
    """A whole column unreadable because of decimal commas: one error with the fix."""
    if cfg.decimal == "," or not len(problem):
        return
    present = problem != "missing"
    if not present.any() or not (problem[present] == "non-numeric").all():
        return
    commas = [str(v) for v in raw[present] if _DECIMAL_COMMA.match(str(v))]
    if not commas:
        return
    shown = ", ".join(repr(v) for v in commas[:3])
    raise DataError(f"{path}: column '{column}' (data.{role}) holds no number read with "
                    f"data.decimal \".\" (values like {shown}); {_DECIMAL_HINT}")


def _average_within(pts: pd.DataFrame, cfg: DataConfig, path: Path, base) -> pd.DataFrame:
    """Collapse rows to one point per unit: means of the logs (geometric means)."""
    if "group" in pts.columns:
        spans = pts.groupby("unit", sort=False)["group"].nunique()
        bad = spans[spans > 1]
        if len(bad):
            unit = bad.index[0]
            groups = sorted(pts.loc[pts["unit"] == unit, "group"].unique())
            raise DataError(f"{path}: {cfg.average_within} '{unit}' appears in more than one "
                            f"group ({cfg.group}: {', '.join(map(str, groups))}); "
                            "each unit must belong to one group")
    agg = {"row": ("row", "min"), "log_x": ("log_x", "mean"), "log_y": ("log_y", "mean"),
           "n_rows": ("n_rows", "sum")}
    if "group" in pts.columns:
        agg["group"] = ("group", "first")
    out = pts.groupby("unit", sort=False).agg(**agg).reset_index()
    if base is None:
        out["x"], out["y"] = out["log_x"], out["log_y"]
    else:
        out["x"] = np.power(base, out["log_x"])
        out["y"] = np.power(base, out["log_y"])
    cols = (["row", "unit", "x", "y", "log_x", "log_y"]
            + (["group"] if "group" in out.columns else []) + ["n_rows"])
    return out[cols].sort_values("row", kind="stable")


def clean_table_several(table: pd.DataFrame, cfg: DataConfig, *, log_base=10.0) -> CleanData:
    """:func:`clean_table` for several predictor columns (``data.x`` a list).

    The same drop reasons as for one predictor, per column (``x (height_m)
    is missing``).  ``points`` holds ``row, y, log_y, n_rows`` and, for the
    j-th predictor (from 0), ``x{j}`` and ``log_x{j}``; ``x`` and ``log_x``
    repeat the first predictor; ``group`` with ``data.group``.  Averaging is not
    available here (refused by the config).
    """
    path = Path(cfg.file)
    units = dict(cfg.units)
    xs = cfg.x_columns
    rows = np.arange(1, len(table) + 1)
    keep = np.ones(len(table), dtype=bool)
    if cfg.units_row:
        if len(table) == 0:
            raise DataError(f"{path}: data.units_row is true but there is no line under the header")
        keep[0] = False
    n_read = int(keep.sum())
    _check_duplicated(table, cfg, path)
    x_cols = [_column(table, name, f"data.x[{j}]", path, cfg) for j, name in enumerate(xs)]
    y_col = _column(table, cfg.y, "data.y", path, cfg)
    for column in cfg.exclude:
        _column(table, column, f"data.exclude.{column}", path)
    g_col = _column(table, cfg.group, "data.group", path) if cfg.group else None
    reasons = _Reasons(len(table))
    texts = _Texts(table)
    active = _blank_and_excluded(table, keep, reasons, cfg, path, texts)
    if g_col is not None:
        g_text = texts(cfg.group).to_numpy()
        reasons.add(np.flatnonzero((g_text == "") & active), f"group ({cfg.group}) is missing")
    parsed = [("x", name, *_parse_numbers(col, cfg.decimal, text=texts.to_parse(name)))
              for name, col in zip(xs, x_cols)]
    parsed.append(("y", cfg.y, *_parse_numbers(y_col, cfg.decimal, text=texts.to_parse(cfg.y))))
    for role, column, _, prob, raw in parsed:
        _check_decimal_comma(role, column, prob[active], raw[active], cfg, path)
        at = np.flatnonzero((prob != "") & active)
        reasons.add(at, [_reason(role, column, p, str(r), cfg.decimal)
                         for p, r in zip(prob[at], np.asarray(raw[at], dtype=object))])
    dropped, use = _dropped_and_used(reasons, rows, keep, n_read, path)
    pts = pd.DataFrame({"row": rows[use].astype(int)})
    for j, (_, _, values, _, _) in enumerate(parsed[:-1]):
        pts[f"x{j}"] = values[use]
        pts[f"log_x{j}"] = to_log(values[use], log_base)
    pts["y"] = parsed[-1][2][use]
    pts["log_y"] = to_log(pts["y"].to_numpy(), log_base)
    pts["x"], pts["log_x"] = pts["x0"], pts["log_x0"]
    if g_col is not None:
        pts["group"] = g_text[use]
    pts["n_rows"] = 1
    return CleanData(points=pts.reset_index(drop=True), dropped=dropped, n_read=n_read,
                     units=units, averaged_within=None, n_rows_used=int(use.sum()))


def load_data(cfg: DataConfig, *, log_base=10.0) -> CleanData:
    """Read and clean the table named by ``cfg`` (see :func:`clean_table`)."""
    if isinstance(cfg.x, tuple):   # several predictors
        return clean_table_several(read_table(cfg), cfg, log_base=log_base)
    plain = _clean_plain(cfg, log_base=log_base)
    if plain is not None:
        return plain
    return clean_table(read_table(cfg), cfg, log_base=log_base)
