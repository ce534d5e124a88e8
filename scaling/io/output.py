"""Writing a run: the results document, the manifest's file facts, atomic writes.

:func:`write_outputs` builds every file of a :class:`~scaling.run.pipeline.RunResult`
in a temporary folder beside the output folder and moves them into place only
when all were written.  It writes the tables itself and is handed what it does
not make (the figure drawer, the report writer, the caution text), so this floor
knows nothing of words or figures.  :func:`json_safe` is the one JSON cleaner of
the package (NaN/inf -> null, numpy scalars -> Python).  Nothing here computes
statistics.
"""

from __future__ import annotations

import csv
import datetime as _dt
import hashlib
import json
import math
import os
import platform
import re
import shutil
import tempfile
from dataclasses import replace
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd

from .._version import __version__
from ..errors import OutputError

__all__ = ["json_safe", "records", "results_document", "check_out_dir", "staging_folder",
           "write_outputs",
           "write_csv", "write_json", "file_sha256", "versions", "CSV_ONLY"]

#: Per-row tables written to their CSV file only: in ``results.json`` they would
#: hold most of its bytes (a row per flagged point of every fit) and nothing
#: ``scaling predict`` or a reader of the fits needs.  ``results.json`` names
#: their files under ``csv_only``.
CSV_ONLY = frozenset({"influential_rows"})


def json_safe(obj):
    kind = type(obj)   # the plain types first: most values of a document are these
    if kind is float:
        return obj if math.isfinite(obj) else None
    if kind is str or kind is int or kind is bool or obj is None:
        return obj
    if kind is dict:
        return {k if type(k) is str else str(k): json_safe(v) for k, v in obj.items()}
    if kind is list:
        return [json_safe(v) for v in obj]
    if isinstance(obj, dict):
        return {str(k): json_safe(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [json_safe(v) for v in obj]
    if isinstance(obj, str):
        return str(obj)   # also numpy str_, which YAML/JSON writers refuse
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        return None if not math.isfinite(float(obj)) else float(obj)
    if isinstance(obj, (np.bool_,)):
        return bool(obj)
    if isinstance(obj, Path):
        return str(obj)
    if isinstance(obj, np.ndarray):
        return json_safe(obj.tolist())
    if obj is pd.NA or obj is None:
        return None
    return obj


def _column_values(column: pd.Series) -> list:
    """One column as JSON-ready Python values (NaN/inf -> None), cleaned column-wise."""
    dtype = column.dtype
    if isinstance(dtype, np.dtype) and dtype.kind == "f":
        v = column.to_numpy()
        out = v.tolist()
        for i in np.flatnonzero(~np.isfinite(v)).tolist():
            out[i] = None
        return out
    if isinstance(dtype, np.dtype) and dtype.kind in "iub":
        return column.to_numpy().tolist()
    if isinstance(dtype, pd.StringDtype):   # text or missing: nothing for json_safe to do
        return column.to_numpy(dtype=object, na_value=None).tolist()
    return [json_safe(v) for v in column.astype(object).where(column.notna(), None)]


def records(frame: pd.DataFrame) -> list:
    """Rows of ``frame`` as JSON-ready dicts (what :func:`json_safe` makes of them).

    Numeric columns are cleaned as whole arrays; only object columns go value
    by value through :func:`json_safe`.
    """
    keys = [str(k) for k in frame.columns]
    if not keys:
        return [{} for _ in range(len(frame))]
    columns = [_column_values(frame.iloc[:, j]) for j in range(len(keys))]
    return [dict(zip(keys, row)) for row in zip(*columns)]


def _document(result, *, caution: str) -> dict:
    """:func:`results_document` with each table left a DataFrame (encoded column-wise
    by :func:`_json_part`)."""
    cfg = result.config
    doc = {
        "title": cfg.title,
        "fits": result.fits,
        "slope_tests": result.slope_tests,
        "dropped_rows": result.dropped,
        "messages": list(result.messages),
        "warnings": list(result.warnings),
        "caution": caution,
        "saved_fits": _Plain(result.saved_fits.values()),
        "data_summary": {
            "rows_read": result.data.n_read,
            # the large-data road counts rows instead of listing them
            "rows_dropped": result.manifest.get("large_data", {}).get("rows_dropped",
                                                                      len(result.dropped)),
            "points_fitted": result.manifest.get("large_data", {}).get(
                "points_fitted", len(result.data.points)),
            "averaged_within": result.data.averaged_within,
            "units": result.data.units, "x": cfg.data.x, "y": cfg.data.y,
            "group": cfg.data.group,
        },
        "manifest": result.manifest,
    }
    csv_only = {}
    for name, table in result.tables.items():
        if isinstance(table, pd.DataFrame) and not name.startswith("_"):
            if name in CSV_ONLY:
                csv_only[name] = f"{name}.csv"
                continue
            doc[name] = table
    if csv_only:
        doc["csv_only"] = csv_only
    # the saved fits (dicts with text keys, one per fit) are cleaned while encoded
    return {str(k): v if isinstance(v, (pd.DataFrame, _Plain)) else json_safe(v)
            for k, v in doc.items()}


def results_document(result, *, caution: str) -> dict:
    """The content of ``results.json`` (``caution``: the caution text it carries)."""
    return {k: records(v) if isinstance(v, pd.DataFrame) else json_safe(v)
            for k, v in _document(result, caution=caution).items()}


class _Plain(list):
    """A list of dicts with text keys whose values :func:`_json_part` cleans as it encodes
    them (:func:`_encode_plain`), instead of :func:`json_safe` first."""


def _plain_default(obj):
    """The encoder's hook for what :func:`json_safe` turns into plain values."""
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    if isinstance(obj, (np.ndarray, Path)) or obj is pd.NA:
        return json_safe(obj)
    raise TypeError(type(obj).__name__)   # anything else: json_safe decides


_encode_raw = json.JSONEncoder(ensure_ascii=False, allow_nan=False,
                               default=_plain_default).encode


def _encode_plain(item) -> str:
    """``_encode(json_safe(item))`` for a dict with text keys, in one encoder pass when the
    item holds no NaN, infinity or other value that :func:`json_safe` changes.

    The encoder writes a float (numpy's float64 too) by ``float.__repr__``, a tuple as
    a list and numpy integers and booleans through the hook, as :func:`json_safe`
    would make them; a non-finite float stops it and the item is cleaned first."""
    try:
        return _encode_raw(item)
    except (ValueError, TypeError):
        return _encode(json_safe(item))


def _plain_rows(items: list, known: "_TableText | None" = None) -> str | None:
    """``",\n".join("    " + _encode_plain(item) for item in items)`` built a key at a
    time, when every item is a dict with the same text keys in the same order (the saved
    fits); None otherwise.  Each key's values are made into text together
    (:func:`_plain_column`), so a value recurring down the items is written once.

    ``known``: the text of fits.csv, whose numbers recur in the saved fits
    (:data:`_FITS_COLUMNS`): a float written there is not written again."""
    columns = _plain_columns(items, known)
    if columns is None:
        return None
    keys, texts = columns
    line = "    {" + ", ".join(_encode(k).replace("%", "%%") + ": %s" for k in keys) + "}"
    if not keys:
        return ",\n".join(["    {}"] * len(items))
    return ",\n".join(map(line.__mod__, zip(*texts)))


def _plain_columns(items: list, known=None, path: tuple = ()) -> tuple | None:
    """(keys, text of each key's values) of dicts sharing their text keys, or None."""
    if type(items[0]) is not dict:
        return None
    keys = tuple(items[0])
    if any(type(k) is not str for k in keys):
        return None
    for item in items:
        if type(item) is not dict or tuple(item) != keys:
            return None
    return keys, [_plain_column([item[k] for item in items], known, path + (k,))
                  for k in keys]


def _plain_column(values: list, known=None, path: tuple = ()) -> list:
    """:func:`_encode_plain` of each value, made for the whole column at once where its
    values share a type: floats (one ``float.__repr__`` per distinct value, ``null``
    where not finite, as :func:`json_safe` makes them), text, whole numbers, lists or
    tuples of one length and dicts of the same keys (a column per position or key)."""
    kinds = set(map(type, values))
    if kinds == {type(None)}:
        return ["null"] * len(values)
    if kinds in ({float, type(None)}, {np.float64, type(None)}):   # a number where set
        return _float_json(np.array([math.nan if x is None else x for x in values],
                                    dtype=np.float64), _known_texts(known, path))
    if len(kinds) != 1:
        return list(map(_encode_plain, values))
    kind = kinds.pop()
    if kind is float or kind is np.float64:
        return _float_json(np.array(values, dtype=np.float64), _known_texts(known, path))
    if kind is str:
        words = {w: _encode_str(w) for w in dict.fromkeys(values)}
        return list(map(words.__getitem__, values))
    if kind is int:
        return list(map(int.__repr__, values))
    if kind is list or kind is tuple:
        sizes = set(map(len, values))
        if len(sizes) == 1:
            size = sizes.pop()
            if size == 0:
                return ["[]"] * len(values)
            parts = [_plain_column([v[i] for v in values], known, path + (i,))
                     for i in range(size)]
            line = "[" + ", ".join(["%s"] * size) + "]"
            return list(map(line.__mod__, zip(*parts)))
    if kind is dict:
        columns = _plain_columns(values, known, path)
        if columns is not None:
            keys, texts = columns
            if not keys:
                return ["{}"] * len(values)
            line = "{" + ", ".join(_encode(k).replace("%", "%%") + ": %s" for k in keys) + "}"
            return list(map(line.__mod__, zip(*texts)))
    return list(map(_encode_plain, values))


#: The fits.csv column holding the numbers of a saved fit's entry (key, or key and position).
_FITS_COLUMNS = {("slope",): "slope", ("slope_ci", 0): "slope_low",
                 ("slope_ci", 1): "slope_high", ("slope_se",): "slope_se",
                 ("intercept",): "intercept", ("intercept_ci", 0): "intercept_low",
                 ("intercept_ci", 1): "intercept_high", ("intercept_se",): "intercept_se",
                 ("r",): "r", ("r2",): "r2", ("resid_sd",): "resid_sd",
                 ("smearing_factor",): "smearing_factor", ("ratio_factor",): "ratio_factor",
                 ("x_range", 0): "x_min", ("x_range", 1): "x_max",
                 ("y_range", 0): "y_min", ("y_range", 1): "y_max"}


def _known_texts(known, path: tuple) -> dict | None:
    """``bits -> text`` of the floats of the fits.csv column of a saved fit's ``path``
    (None without one)."""
    name = _FITS_COLUMNS.get(path)
    if known is None or name is None:
        return None
    labels = [str(c) for c in known.frame.columns]
    if labels.count(name) != 1 or labels.index(name) not in known._floats:
        return None
    v, text = known._floats[labels.index(name)]
    return dict(zip(np.ascontiguousarray(v).view(np.int64).tolist(), text))


def _float_json(v: np.ndarray, known: dict | None = None) -> list:
    """The encoder's text of each :func:`json_safe` float of ``v`` (``null`` where not
    finite); ``known``: texts already made, by the bits of their float."""
    text = _float_texts(v, known)
    for i in np.flatnonzero(~np.isfinite(v)).tolist():
        text[i] = "null"
    return text


def write_json(doc: dict, path: Path) -> None:
    """Write ``doc`` as JSON: one top-level key per line block, one list item per line.

    Each item is encoded by the C encoder of :mod:`json` (one encoder, without
    ``indent``: ``indent`` would send millions of values through the
    pure-Python encoder, and ``json.dumps`` with options builds an encoder per call).
    A DataFrame value is written as its :func:`records`, a column at a time
    (:func:`_json_rows`).  The file stays readable line by line and parses to
    the same document.
    """
    _write_json_parts(_json_parts(doc), path)


_encode = json.JSONEncoder(ensure_ascii=False, allow_nan=False).encode   # one encoder


def _json_part(key, value, text=None) -> str:
    """One top-level entry of :func:`write_json`'s layout (``text``: the table's
    :class:`_TableText` when its CSV was written from it)."""
    if isinstance(value, pd.DataFrame):
        if len(value):
            return f"  {_encode(str(key))}: [\n{_json_rows(value, text)}\n  ]"
        value = []
    if isinstance(value, _Plain) and value:
        body = _plain_rows(value, text)
        if body is None:
            body = ",\n".join("    " + _encode_plain(item) for item in value)
        return f"  {_encode(str(key))}: [\n{body}\n  ]"
    if isinstance(value, list) and value:
        body = ",\n".join("    " + _encode(item) for item in value)
        return f"  {_encode(str(key))}: [\n{body}\n  ]"
    return f"  {_encode(str(key))}: {_encode(value)}"


def _json_parts(doc: dict, texts: dict | None = None) -> dict:
    """``key -> encoded entry`` of ``doc``, in its order (entries can be replaced later).

    ``texts``: ``id(table) -> _TableText`` of tables whose CSV was written already
    (their numbers are not turned into text twice)."""
    texts = texts or {}
    return {key: _json_part(key, value, texts.get(id(value))) for key, value in doc.items()}


def _write_json_parts(parts: dict, path: Path) -> None:
    """Write the entries one after another: joined into one string, a single character
    beyond ASCII in any entry (a dash in a warning) would widen every character of
    the megabytes of tables, and the whole would be copied and encoded again."""
    with open(path, "w", encoding="utf-8") as fh:
        if not parts:
            fh.write("{}\n")
            return
        fh.write("{\n")
        for i, part in enumerate(parts.values()):
            if i:
                fh.write(",\n")
            fh.write(part)
        fh.write("\n}\n")


# --------------------------------------------------------------------------
# tables as text, a column at a time (CSV and results.json)


_MaskedDtype = pd.core.dtypes.dtypes.BaseMaskedDtype   # Int64, boolean, ...
_JSON_WORDS = {True: "true", False: "false", None: "null"}


def _json_value(v) -> str:
    """The C encoder's text of one JSON-ready value (the common types without a call)."""
    kind = type(v)
    if kind is str:
        return _encode_str(v)
    if kind is float:
        return float.__repr__(v)
    if kind is int:
        return int.__repr__(v)
    if v is None or kind is bool:
        return _JSON_WORDS[v]
    return _encode(v)


_encode_str = json.encoder.encode_basestring   # the encoder's own (ensure_ascii=False)


def _csv_object(v) -> str:
    """The text the :mod:`csv` writer makes of a value: ``str`` (a float's str is its repr)."""
    return v if type(v) is str else str(v)


def _csv_texts(values: list) -> list:
    """:func:`_csv_object` of each value (a column of text as it is)."""
    if set(map(type, values)) <= {str}:
        return values
    return list(map(_csv_object, values))


def _float_texts(v: np.ndarray, known: dict | None = None) -> list:
    """``float.__repr__`` of each value of a float64 array, each distinct value written
    once: the same value recurs down many columns (a confidence level, an exponent, the
    Cook's distances of the pooled points under each method).  Values are told apart by
    their bits (0.0 and -0.0 are two texts).  ``known``: texts made already, by bits
    (a value found there is not written again)."""
    if v.size < 64:
        return list(map(float.__repr__, v.tolist()))
    codes, distinct = pd.factorize(np.ascontiguousarray(v).view(np.int64))
    if known:
        words = np.array(list(map(known.get, distinct.tolist())), dtype=object)
        todo = np.flatnonzero(words == None)   # noqa: E711 (elementwise)
        new = list(map(float.__repr__, distinct.view(np.float64)[todo].tolist()))
        for i, word in zip(todo.tolist(), new):
            words[i] = word
    else:
        words = np.array(list(map(float.__repr__, distinct.view(np.float64).tolist())),
                         dtype=object)
    return words[codes].tolist()


def _int_texts(v: np.ndarray) -> list:
    """``int.__repr__`` of each value of an integer array, each distinct value written
    once (a row number recurs once per method in a table of flagged rows)."""
    if v.size < 64:
        return list(map(int.__repr__, v.tolist()))
    codes, distinct = pd.factorize(v)
    return np.array(list(map(int.__repr__, distinct.tolist())), dtype=object)[codes].tolist()


class _TableText:
    """A table's cells as text, made once a column at a time: ``csv`` (what
    ``DataFrame.to_csv`` writes in each cell, before quoting) and, on demand,
    ``json`` (what the JSON encoder writes for each value of :func:`records`).

    ``ok`` is False for a column type handled only by pandas (then neither is used).
    Floats are written by ``float.__repr__`` once for both files: pandas writes a
    float64 column with numpy's ``astype(str)`` and the encoder with
    ``float.__repr__``, both the shortest text that reads back as the same float.
    """

    __slots__ = ("frame", "csv", "_floats", "_words", "ok")

    def __init__(self, frame: pd.DataFrame):
        self.frame = frame
        self.csv, self._floats, self._words, self.ok = [], {}, {}, True
        for j in range(frame.shape[1]):
            column = frame.iloc[:, j]
            dtype = column.dtype
            if isinstance(dtype, np.dtype) and dtype.kind == "f" and dtype.itemsize == 8:
                v = column.to_numpy()
                text = _float_texts(v)
                self._floats[j] = (v, text)
                nan = np.flatnonzero(np.isnan(v)).tolist()
                if nan:
                    text = text.copy()
                    for i in nan:
                        text[i] = ""
                self.csv.append(text)
            elif isinstance(dtype, np.dtype) and dtype.kind in "iu":
                self.csv.append(_int_texts(column.to_numpy()))
            elif isinstance(dtype, np.dtype) and dtype.kind == "b":
                self.csv.append(["True" if v else "False" for v in column.to_numpy().tolist()])
            elif isinstance(dtype, np.dtype) and dtype.kind == "O":
                values = column.to_numpy(dtype=object, copy=True)
                values[pd.isna(values)] = ""
                self.csv.append(_csv_texts(values.tolist()))
            elif isinstance(dtype, pd.StringDtype):
                # a few distinct words over many rows (scope, group, method, label):
                # each distinct word is handled once and the cells taken by their codes
                codes, words = pd.factorize(column)
                words = [str(w) for w in words]   # text as it is; a missing cell is ""
                self._words[j] = (codes, words)
                self.csv.append(np.array(words + [""], dtype=object)[codes].tolist())
            elif isinstance(dtype, _MaskedDtype) and dtype.kind in "iu":
                # what pandas writes through astype(object): str of each whole number
                values = column.array
                text = _int_texts(values.to_numpy(dtype=dtype.numpy_dtype, na_value=0))
                for i in np.flatnonzero(values.isna()).tolist():
                    text[i] = ""
                self.csv.append(text)
            elif isinstance(dtype, _MaskedDtype) and dtype.kind == "b":
                # pandas writes these through astype(object): the same values
                values = column.to_numpy(dtype=object)
                values[column.isna().to_numpy()] = ""
                self.csv.append(_csv_texts(values.tolist()))
            else:
                self.ok = False
                return

    def quoted(self, j: int) -> bool:
        """Whether some cell of column ``j`` holds a character the csv writer quotes."""
        if j in self._floats or self.frame.dtypes.iloc[j].kind in "iub":
            return False   # numbers and True/False are never quoted
        cells = self._words[j][1] if j in self._words else self.csv[j]
        return _QUOTED.search("".join(cells)) is not None

    def json(self, j: int) -> list:
        """Column ``j`` as the JSON encoder writes each of its :func:`records` values."""
        if j in self._floats:
            v, text = self._floats[j]
            bad = np.flatnonzero(~np.isfinite(v)).tolist()
            if bad:
                text = text.copy()
                for i in bad:
                    text[i] = "null"
            return text
        if j in self._words:   # text, or null where missing
            codes, words = self._words[j]
            return np.array([_encode_str(w) for w in words] + ["null"],
                            dtype=object)[codes].tolist()
        column = self.frame.iloc[:, j]
        dtype = column.dtype
        if isinstance(dtype, np.dtype) and dtype.kind in "iu":
            return self.csv[j]
        if isinstance(dtype, np.dtype) and dtype.kind == "b":
            return ["true" if v else "false" for v in column.to_numpy().tolist()]
        return list(map(_json_value, _column_values(column)))


#: Characters that make the csv writer quote a cell (any of them: the writer is used).
_QUOTED = re.compile(r'[,"\r\n]')


#: Characters of a cell the csv writer quotes that :func:`_csv_rows` leaves to it.
_LINE_BREAK = re.compile(r"[\r\n]")


def _csv_rows(text: _TableText) -> str | None:
    """The body of the CSV (one line per row), or None when some cell holds a line break
    or the table has a single column (whose empty cells the writer quotes).

    A cell holding a comma or a double quote is quoted as the csv writer quotes it
    (``QUOTE_MINIMAL``: in double quotes, each double quote doubled)."""
    if len(text.csv) < 2:
        return None
    columns = list(text.csv)
    for j, cells in enumerate(columns):
        if not text.quoted(j):
            continue
        if _LINE_BREAK.search("".join(cells)) is not None:
            return None
        columns[j] = [_csv_quoted(c) if _QUOTED.search(c) is not None else c for c in cells]
    if not columns[0]:
        return ""
    return "\n".join(map(",".join, zip(*columns))) + "\n"   # every cell is text already


def _csv_quoted(cell: str) -> str:
    return '"' + cell.replace('"', '""') + '"'


def _json_rows(frame: pd.DataFrame, text: _TableText | None = None) -> str:
    """``",\n".join("    " + encode(row) for row in records(frame))``, built a column at
    a time: each value is turned into text once and each row is one ``%`` format."""
    keys = [str(k) for k in frame.columns]
    if text is None:
        text = _TableText(frame)
    if not keys or len(set(keys)) < len(keys) or not text.ok:
        return ",\n".join("    " + _encode(item) for item in records(frame))
    line = "    {" + ", ".join(_encode(k).replace("%", "%%") + ": %s" for k in keys) + "}"
    return ",\n".join(map(line.__mod__, zip(*(text.json(j) for j in range(len(keys))))))


def check_out_dir(out_dir: Path, force: bool) -> None:
    if out_dir.exists() and not out_dir.is_dir():
        raise OutputError(f"{out_dir}: output path exists and is not a folder")
    if out_dir.exists() and any(out_dir.iterdir()) and not force:
        raise OutputError(f"{out_dir}: output folder is not empty; use --force to replace "
                          "the files scaling writes there (other files are left alone)")


def staging_folder(out_dir: Path | str, force: bool = False) -> Path:
    """A new temporary folder beside ``out_dir`` for :func:`write_outputs` to fill (``folder``).

    Made before the files are written, so files that take long to make (the figures)
    can be drawn into it while the run still computes; :func:`write_outputs` moves its
    files into place and removes it.  Refuses as :func:`check_out_dir` does.
    """
    out_dir = Path(out_dir)
    check_out_dir(out_dir, force)
    out_dir.parent.mkdir(parents=True, exist_ok=True)
    return Path(tempfile.mkdtemp(prefix=".scaling-tmp-", dir=out_dir.parent))


def write_outputs(result, out_dir: Path | str, *, draw_figures: Callable,
                  write_report: Callable, caution: str, force: bool = False,
                  prepare_report: Callable | None = None, folder: Path | None = None):
    """Write the output folder atomically and return the result with ``files`` set.

    Files are built in a temporary folder beside ``out_dir`` and moved into
    place only when all of them were written, so a failure leaves
    ``out_dir`` as it was.  A non-empty ``out_dir`` is refused unless
    ``force``; with ``force`` only the files written here are replaced.

    Parameters
    ----------
    result : RunResult
    out_dir : path
    draw_figures : callable
        ``draw_figures(result, folder)`` draws the figures into ``folder / "figures"``
        and returns (relative paths, skip notes), or a handle whose ``wait()`` returns
        them once drawn elsewhere (and whose ``cancel()``, if any, stops the drawing
        when writing fails), so the tables are written meanwhile.
    write_report : callable
        ``write_report(result, folder, written) -> relative paths``: writes the
        report files, given the files written so far.
    caution : str
        The caution ``results.json`` carries.
    force : bool
        Replace the files written here in a non-empty ``out_dir``.
    prepare_report : callable, optional
        ``prepare_report(result) -> write_report``: does the report's work that needs
        no figure while they are drawn, and returns the writer used in place of
        ``write_report``.
    folder : path, optional
        The temporary folder to fill, made earlier by :func:`staging_folder` for this
        ``out_dir`` (figures may be being drawn into it); removed here once writing
        began, as the folder made here otherwise is.
    """
    out_dir = Path(out_dir)
    inputs = [Path(result.config.data.file)] + (
        [Path(result.config.source)] if result.config.source else [])
    check_out_dir(out_dir, force)   # (refused here, a folder given stays the caller's)
    tmp = staging_folder(out_dir, force) if folder is None else Path(folder)
    try:
        written, result = _write_all(result, tmp, draw_figures, write_report, caution,
                                     prepare_report)
        # Never overwrite an input, even with --force.
        protected = {p.resolve() for p in inputs}
        for rel in written:
            if (out_dir / rel).resolve() in protected:
                raise OutputError(f"{out_dir / rel}: refusing to overwrite an input file")
        out_dir.mkdir(parents=True, exist_ok=True)
        for rel in written:
            target = out_dir / rel
            target.parent.mkdir(parents=True, exist_ok=True)
            os.replace(tmp / rel, target)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    files = tuple(out_dir / rel for rel in written)
    return replace(result, out_dir=out_dir, files=files)


def write_csv(frame: pd.DataFrame, path: Path):
    """Write ``frame`` as ``frame.to_csv(path, index=False, lineterminator="\\n")`` does,
    byte for byte, with its cells made into text a column at a time.

    Returns the table's :class:`_TableText` (reused for ``results.json``), or None
    when pandas wrote the file (a column type this writer leaves to it, or column
    labels that are not plain).
    """
    text = _TableText(frame)
    if not text.ok or isinstance(frame.columns, pd.MultiIndex):
        frame.to_csv(path, index=False, lineterminator="\n")
        return None
    with open(path, "w", encoding="utf-8", newline="") as fh:
        writer = csv.writer(fh, lineterminator="\n")
        writer.writerow(list(frame.columns))
        body = _csv_rows(text)
        if body is None:
            writer.writerows(zip(*text.csv))
        else:
            fh.write(body)
    return text


def _write_all(result, folder: Path, draw_figures, write_report, caution,
               prepare_report=None) -> tuple:
    """Write every file into ``folder``; return (relative paths, result with figure notes).

    The figures are started first and drawn elsewhere (when ``draw_figures`` returns a
    handle with ``wait()``) while the tables and most of ``results.json`` are made here;
    the report, which embeds the figures, is written once they exist.
    """
    written: list[Path] = []
    (folder / "figures").mkdir(exist_ok=True)
    drawing = draw_figures(result, folder)
    try:
        texts = {}   # each table's cells as text, made once for its CSV and results.json
        for name, frame in _tables(result):
            texts[id(frame)] = write_csv(frame, folder / name)
            written.append(Path(name))
        doc = _document(result, caution=caution)
        if isinstance(doc.get("saved_fits"), _Plain):   # their numbers recur in fits.csv
            texts[id(doc["saved_fits"])] = texts.get(id(result.fits))
        parts = _json_parts(doc, texts)   # all but the figure notes and the file list, now
        del texts, doc   # the cells' text (a hundred thousand rows' worth): not held past here
        if prepare_report is not None:
            write_report = prepare_report(result)
        paths, skipped = drawing.wait() if hasattr(drawing, "wait") else drawing
    except BaseException:
        if hasattr(drawing, "cancel"):   # end the drawing processes of a failed run
            drawing.cancel()
        raise
    written += [Path(p) for p in paths]
    if skipped:   # a skipped figure is a note of the run: terminal, report and results.json
        result = replace(result, warnings=tuple(result.warnings) + tuple(skipped))
        parts["warnings"] = _json_part("warnings", json_safe(list(result.warnings)))
    written += write_report(result, folder, written)
    files = sorted(str(p) for p in written) + ["results.json"]
    parts["files"] = _json_part("files", files)
    _write_json_parts(parts, folder / "results.json")
    written.append(Path("results.json"))
    return written, result


def _tables(result):
    """(file name, table) of every CSV of a run, in the order they are written."""
    yield "fits.csv", result.fits
    yield "slope_tests.csv", result.slope_tests
    yield "dropped_rows.csv", result.dropped
    for name, table in result.tables.items():
        if isinstance(table, pd.DataFrame) and not name.startswith("_"):
            yield f"{name}.csv", table


def file_sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def manifest_header(cfg, input_sha256: str | None = None) -> dict:
    """The first entries of every run's manifest: version, time, config, input hash
    (``input_sha256``: the hash when the caller has it already)."""
    path = Path(cfg.data.file)
    return {
        "scaling_version": __version__,
        "created_utc": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "config_file": str(cfg.source) if cfg.source else None,
        "config": json_safe(cfg.raw),
        "input_file": str(cfg.data.file),
        "input_sha256": (input_sha256 if input_sha256 is not None
                         else file_sha256(path) if path.is_file() else None),
        "versions": versions(),
    }


def versions() -> dict:
    # Installed versions from package metadata: importing statsmodels and matplotlib
    # only to read __version__ cost about a second in runs that use neither.
    from importlib.metadata import version
    return {"python": platform.python_version(), "scaling": __version__,
            "numpy": np.__version__, "scipy": version("scipy"), "pandas": pd.__version__,
            "statsmodels": version("statsmodels"), "matplotlib": version("matplotlib"),
            "pyyaml": version("PyYAML")}
