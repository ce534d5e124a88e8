"""Saved fits: read a results folder back and predict without the data.

``results.json`` holds, for every estimable fit, the coefficients, moments,
residual SD, correction factors and fitted ranges (see
:func:`scaling.stats.lines.fit_to_dict`).  :func:`load_results` turns a results
folder into a :class:`SavedResults`; ``scaling predict`` is
:func:`predict_command`.
"""

from __future__ import annotations

import difflib
import json
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import (ConfigError, DataError, DegenerateDataWarning, ExtrapolationWarning,
                     OutputError)
from ..stats.line_results import fit_from_dict
from ..stats.several_predictors import MULTI_DICT_FORMAT, multi_fit_from_dict
from ..stats.predictions import CORRECTIONS, Prediction, inverse_predict, predict, saved_factor
from ..stats.schema import check_choice as _check_choice
from ..render.wording import dose_caution, medians_vs_means, units_line
from ..run.prediction_lines import range_ratio

__all__ = ["SavedResults", "load_results", "predict_command", "predict_from_dict"]


def predict_from_dict(d: dict, x, *, correction: str = "smearing",
                      interval: str = "prediction",
                      confidence: float | None = None) -> Prediction:
    """Predict from a saved fit dictionary, using the factor saved with it.

    ``smearing`` and ``ratio`` need ``smearing_factor`` / ``ratio_factor`` in
    ``d``; ``parametric`` and ``none`` need nothing more.
    """
    fit = fit_from_dict(d)
    correction = _check_choice(correction, CORRECTIONS, "correction")
    factor = saved_factor(d, correction)
    return predict(fit, x, correction=correction, interval=interval,
                   confidence=confidence, factor=factor)


@dataclass(frozen=True, slots=True, kw_only=True)
class SavedResults:
    """The fits of a finished run, usable for prediction.

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
        method = method or ("ols" if "ols" in self.methods else self.methods[0])
        if method not in self.methods:
            raise ConfigError(f"--method: '{method}' was not fitted in {self.folder}"
                              f"{_hint(method, self.methods)}")
        if group is not None:
            if not self.groups:
                raise ConfigError(f"--group: the run in {self.folder} was fitted without "
                                  "groups (no data.group); leave --group out")
            if group not in self.groups:
                raise ConfigError(f"--group: no group '{group}' in {self.folder}"
                                  f"{_hint(group, self.groups)}")
        scope, name = ("pooled", "") if group is None else ("group", group)
        for d in self.fits:
            if d.get("scope") == scope and d.get("group", "") == name and d["method"] == method:
                return d
        where = "the pooled data" if group is None else f"group '{group}'"
        raise DataError(f"{self.folder}: no estimable {method.upper()} fit for {where} "
                        "(see the note in fits.csv)")

    @property
    def predictors(self) -> tuple:
        """The predictor columns of a several-predictor run (empty for one predictor)."""
        for d in self.fits:
            if d.get("format") == MULTI_DICT_FORMAT:
                return tuple(d["predictors"])
        return ()

    def fit(self, *, method: str | None = None, group: str | None = None):
        """The :class:`LineFit` of one saved fit (a :class:`~scaling.stats.several_predictors.MultiFit` for a
        several-predictor run)."""
        d = self.saved_fit(method=method, group=group)
        return multi_fit_from_dict(d) if d.get("format") == MULTI_DICT_FORMAT \
            else fit_from_dict(d)

    def predict(self, x, *, method=None, group=None, correction=None, interval=None,
                inverse: bool = False) -> pd.DataFrame:
        """Predict y at ``x`` (or x at ``y`` with ``inverse``) in natural units.

        For a several-predictor run ``x`` is a DataFrame or mapping with one
        column per predictor (:attr:`predictors`).
        """
        d = self.saved_fit(method=method, group=group)
        interval = interval or self.interval
        if d.get("format") == MULTI_DICT_FORMAT:
            if inverse:
                raise ConfigError("--inverse: a fit with several predictors "
                                  f"({', '.join(self.predictors)}) estimates y only")
            frame = multi_fit_from_dict(d).predict(
                x, correction=correction or self.correction, interval=interval).to_frame()
            frame.insert(0, "group", "" if group is None else group)
            return frame
        if inverse:
            frame = inverse_predict(fit_from_dict(d), x, interval=interval).to_frame()
        else:
            frame = predict_from_dict(d, x, correction=correction or self.correction,
                                      interval=interval).to_frame()
        frame.insert(0, "group", "" if group is None else group)
        return frame


def _hint(word, options) -> str:
    close = difflib.get_close_matches(str(word), [str(o) for o in options], n=1)
    if close:
        return f"; did you mean '{close[0]}'?"
    return f"; available: {', '.join(map(str, options))}"


def load_results(folder) -> SavedResults:
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
    return SavedResults(folder=folder, fits=tuple(doc["saved_fits"]),
                        methods=tuple(str(m).lower() for m in methods),
                        groups=tuple(groups),
                        x_name=summary.get("x") or "x", y_name=summary.get("y") or "y",
                        correction=str(pred.get("correction", "smearing")).lower(),
                        interval=str(pred.get("interval", "prediction")).lower(),
                        document=doc)


def _numbers(values, label: str) -> np.ndarray:
    out = []
    for i, v in enumerate(values):
        try:
            number = float(str(v).replace(",", "")) if isinstance(v, str) else float(v)
        except ValueError:
            raise DataError(f"{label}: '{v}' is not a number") from None
        if not np.isfinite(number) or number <= 0:
            raise DataError(f"{label}: {v} is not a positive number (natural units)")
        out.append(number)
    return np.asarray(out, dtype=float)


def _values_from_file(path: Path, column: str, flag: str) -> np.ndarray:
    return _table_from_file(path, column, flag)[0]


def _table_from_file(path: Path, column: str, flag: str) -> tuple:
    """(values of ``column``, the file's other columns as text: IDs to carry through)."""
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
        raise DataError(f"{path}: no column '{column}'{_hint(column, list(table.columns))}")
    values = []
    for i, v in enumerate(table[column]):
        values.append(v)
        try:
            _numbers([v], "")
        except DataError:
            raise DataError(f"{path}: row {i + 1}, column '{column}': '{v}' is not a positive "
                            "number") from None
    return _numbers(values, str(path)), table.drop(columns=[column]).reset_index(drop=True)


def _predictors_from_file(path: Path, names) -> tuple:
    """(DataFrame of the predictor columns, the file's other columns as text)."""
    values = {}
    ids = None
    for name in names:
        values[name], rest = _table_from_file(path, name, "--from")
        ids = rest if ids is None else ids
    ids = ids.drop(columns=[c for c in names if c in ids.columns])
    return pd.DataFrame(values), ids


def predict_command(args) -> int:
    """``scaling predict``: print a table and write it to a CSV file."""
    saved = load_results(args.results)
    ids = None
    names = saved.predictors
    if names and args.inverse:
        raise ConfigError(f"--inverse: the run in {saved.folder} has several predictors "
                          f"({', '.join(names)}); it estimates y only")
    if names and args.x:
        raise ConfigError(f"--x: the run in {saved.folder} has {len(names)} predictors "
                          f"({', '.join(names)}); give their values as columns of a CSV "
                          "with --from")
    if names:
        values, ids = _predictors_from_file(Path(args.from_file), names)
    elif args.x:
        values = _numbers(args.x, "--x")
    else:
        column = saved.y_name if args.inverse else saved.x_name
        values, ids = _table_from_file(Path(args.from_file), column, "--from")
    for option, allowed in (("correction", ("smearing", "parametric", "ratio", "none")),
                            ("interval", ("prediction", "confidence"))):
        value = getattr(args, option)
        if value is not None and value not in allowed:
            raise ConfigError(f"--{option}: '{value}' is not one of {', '.join(allowed)}"
                              f"{_hint(value, allowed)}")
    out = Path(args.out) if args.out else Path("predictions.csv")
    if out.exists() and not args.force:
        raise OutputError(f"{out}: already exists; use --force to overwrite it or --out to "
                          "choose another file")
    method = args.method.lower() if args.method else None
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ExtrapolationWarning)
        warnings.simplefilter("always", DegenerateDataWarning)
        frame = saved.predict(values, method=method, group=args.group,
                              correction=args.correction, interval=args.interval,
                              inverse=args.inverse)
    if names:   # ID columns of the --from file first, as in the run's predictions.csv
        frame = frame.drop(columns="group") if args.group is None else frame
        if ids is not None and len(ids.columns):
            frame = pd.concat([ids.reset_index(drop=True), frame], axis=1)
    else:
        frame = _with_names(frame, saved, ids, inverse=args.inverse,
                            method=method, group=args.group)
    frame.to_csv(out, index=False, lineterminator="\n")
    shown = frame.copy()
    print(shown.to_string(index=False, float_format=lambda v: f"{v:.4g}"))
    if any(issubclass(w.category, ExtrapolationWarning) for w in caught):
        print("warning: some values lie outside the fitted range (extrapolated = True); "
              "treat those predictions with caution")
    for w in caught:
        if issubclass(w.category, DegenerateDataWarning):
            print(f"warning: {w.message}" + ("; x_low and x_high are blank"
                                             if "unbounded" in str(w.message) else ""))
    summary = saved.document.get("data_summary") or {}
    units = summary.get("units") or {}
    line = units_line(summary.get("x"), units.get("x"), saved.y_name, units.get("y"))
    if line:
        print(line)
    print(medians_vs_means())
    print(dose_caution())
    print(f"wrote {out}")
    return 0


def _with_names(frame: pd.DataFrame, saved: "SavedResults", ids, *, inverse: bool,
                method, group) -> pd.DataFrame:
    """ID columns of the --from file first; copies of x and y named after the variables;
    range_ratio (how far outside the fitted range each given value lies)."""
    out = frame.copy()
    d = saved.saved_fit(method=method, group=group)
    role = "y" if inverse else "x"
    rng = d.get(f"{role}_range") or (np.nan, np.nan)
    out["range_ratio"] = range_ratio(out[role].to_numpy(float), rng[0], rng[1],
                                     logs=d.get("log_base") in (None, "none"))
    for role, name in (("x", saved.x_name), ("y", saved.y_name)):
        if name and name not in out.columns:
            out[name] = out[role]
    if ids is not None and len(ids.columns) and len(ids) == len(out):
        keep = ids[[c for c in ids.columns if c not in out.columns]]
        out = pd.concat([keep, out], axis=1)
    return out
