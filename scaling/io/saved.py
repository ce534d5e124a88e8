"""Saved results: read a results folder back into plain data.

``results.json`` holds, for every estimable fit, the coefficients, moments,
residual SD, correction factors and fitted ranges (see
:func:`scaling.stats.lines.fit_to_dict`); per-row tables named under its
``csv_only`` key (``influential_rows``) are in their CSV files only.  :func:`read_results` reads a results
folder into a :class:`SavedRun` of plain dictionaries; :func:`read_column` and
:func:`read_predictors` read the values to predict at from a CSV file.
Rebuilding fits and predicting from them is
:mod:`scaling.run.saved_predictions` (``scaling.load_results``, ``scaling predict``).
"""

from __future__ import annotations

import difflib
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import ConfigError, DataError

__all__ = ["SavedRun", "PGLS", "read_results", "hint", "parse_numbers", "read_column",
           "read_predictors"]


@dataclass(frozen=True, slots=True, kw_only=True)
class SavedRun:
    """The saved fits and settings of a finished run, as read from its folder.

    Attributes
    ----------
    folder : Path
    fits : tuple of dict
        Saved fit dictionaries (with ``scope``, ``group`` and ``method``).
    methods : tuple of str
        Methods of the run, in the config's order.
    groups : tuple of str
        Group names ("" only when the run had no groups).
    x_name, y_name : str
        Column names of x and y in the original data.
    correction, interval : str
        The run's prediction settings (defaults for new predictions).
    """

    folder: Path
    fits: tuple
    methods: tuple
    groups: tuple
    x_name: str
    y_name: str
    correction: str = "smearing"
    interval: str = "prediction"
    document: dict = field(default_factory=dict, repr=False)

    def saved_fit(self, *, method: str | None = None, group: str | None = None) -> dict:
        """The saved dict of one fit (pooled unless ``group`` is given)."""
        # default: OLS, the line that estimates y from x (else the first fitted)
        if method == PGLS:
            return self._phylo_fit(group)
        method = method or ("ols" if "ols" in self.methods else self.methods[0])
        if method not in self.methods:
            raise ConfigError(f"--method: '{method}' was not fitted in {self.folder}"
                              f"{hint(method, self.methods)}")
        if group is not None:
            if not self.groups:
                raise ConfigError(f"--group: the run in {self.folder} was fitted without "
                                  "groups (no data.group); leave --group out")
            if group not in self.groups:
                raise ConfigError(f"--group: no group '{group}' in {self.folder}"
                                  f"{hint(group, self.groups)}")
        scope, name = ("pooled", "") if group is None else ("group", group)
        for d in self.fits:
            if d.get("scope") == scope and d.get("group", "") == name and d["method"] == method:
                return d
        where = "the pooled data" if group is None else f"group '{group}'"
        raise DataError(f"{self.folder}: no estimable {method.upper()} fit for {where} "
                        "(see the note in fits.csv)")


    def _phylo_fit(self, group) -> dict:
        """The saved PGLS line (a typical new species; ``--method pgls``)."""
        if group is not None:
            raise ConfigError("--group: the PGLS line is fitted across all species; "
                              "leave --group out with --method pgls")
        for d in self.fits:
            if d.get("scope") == "phylo" and d.get("method") == "ols":
                return d
        raise ConfigError(f"--method pgls: the run in {self.folder} has no PGLS line "
                          "(it needs data.tree and ols in model.methods)")


#: ``--method`` value that predicts from the saved PGLS line.
PGLS = "pgls"


def hint(word, options) -> str:
    """"; did you mean 'x'?" for the closest option, else the list of options."""
    close = difflib.get_close_matches(str(word), [str(o) for o in options], n=1)
    if close:
        return f"; did you mean '{close[0]}'?"
    return f"; available: {', '.join(map(str, options))}"


def read_results(folder) -> SavedRun:
    """Read a results folder written by ``scaling run``.

    Raises
    ------
    DataError
        If the folder or its ``results.json`` is missing or unreadable.
    """
    folder = Path(folder)
    path = folder / "results.json"
    if not folder.is_dir():
        raise DataError(f"{folder}: results folder not found")
    if not path.is_file():
        raise DataError(f"{folder}: no results.json here; is this a folder written by "
                        "'scaling run'?")
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise DataError(f"{path}: not valid JSON ({exc})") from None
    if not isinstance(doc, dict) or "saved_fits" not in doc:
        raise DataError(f"{path}: has no saved fits (written by another tool or version?)")
    config = (doc.get("manifest") or {}).get("config") or {}
    model = config.get("model") or {}
    methods = model.get("methods") or sorted({d["method"] for d in doc["saved_fits"]})
    if isinstance(methods, str):
        methods = [methods]
    summary = doc.get("data_summary") or {}
    groups = sorted({d.get("group", "") for d in doc["saved_fits"] if d.get("scope") == "group"})
    pred = config.get("prediction") or {}
    return SavedRun(folder=folder, fits=tuple(doc["saved_fits"]),
                    methods=tuple(str(m).lower() for m in methods),
                    groups=tuple(groups),
                    x_name=summary.get("x") or "x", y_name=summary.get("y") or "y",
                    correction=str(pred.get("correction", "smearing")).lower(),
                    interval=str(pred.get("interval", "prediction")).lower(),
                    document=doc)


def parse_numbers(values, label: str) -> np.ndarray:
    """Positive finite numbers (natural units) from text or numbers; DataError naming ``label``."""
    out = []
    for v in values:
        try:
            number = float(str(v).replace(",", "")) if isinstance(v, str) else float(v)
        except ValueError:
            raise DataError(f"{label}: '{v}' is not a number") from None
        if not np.isfinite(number) or number <= 0:
            raise DataError(f"{label}: {v} is not a positive number (natural units)")
        out.append(number)
    return np.asarray(out, dtype=float)


def read_column(path: Path, column: str, flag: str) -> tuple:
    """(values of ``column``, the file's other columns as text: IDs to carry through).

    ``flag`` is the command-line option that named the file, for messages.
    """
    if not path.is_file():
        raise DataError(f"{path}: file not found ({flag})")
    try:
        with open(path, encoding="utf-8-sig", errors="replace") as fh:
            header = fh.readline()
        counts = {d: header.count(d) for d in (",", "\t", ";")}
        sep = max(counts, key=counts.get) if max(counts.values()) else ","
        table = pd.read_csv(path, sep=sep, dtype=str, keep_default_na=False,
                            encoding="utf-8-sig")
    except Exception as exc:
        raise DataError(f"{path}: cannot read table: {str(exc).splitlines()[0]}") from None
    table.columns = [str(c).strip() for c in table.columns]
    if column not in table.columns:
        raise DataError(f"{path}: no column '{column}'{hint(column, list(table.columns))}")
    values = []
    for i, v in enumerate(table[column]):
        values.append(v)
        try:
            parse_numbers([v], "")
        except DataError:
            raise DataError(f"{path}: row {i + 1}, column '{column}': '{v}' is not a positive "
                            "number") from None
    return parse_numbers(values, str(path)), table.drop(columns=[column]).reset_index(drop=True)


def read_predictors(path: Path, names) -> tuple:
    """(DataFrame of the predictor columns, the file's other columns as text)."""
    values = {}
    ids = None
    for name in names:
        values[name], rest = read_column(path, name, "--from")
        ids = rest if ids is None else ids
    ids = ids.drop(columns=[c for c in names if c in ids.columns])
    return pd.DataFrame(values), ids
