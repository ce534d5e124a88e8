"""Predicting from a finished run without its data: ``scaling.load_results`` and
``scaling predict``.

:mod:`scaling.io.saved` reads the results folder into plain dictionaries; here
the saved fits become fit objects again (:func:`scaling.stats.lines.fit_from_dict`,
:func:`scaling.stats.several_predictors.multi_fit_from_dict`) and predict with the
correction factors saved with them.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, fields
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import ConfigError, DegenerateDataWarning, ExtrapolationWarning, OutputError
from ..io.saved import SavedRun, hint, parse_numbers, read_column, read_predictors, read_results
from ..render.wording import dose_caution, medians_vs_means, units_line
from ..stats.line_results import fit_from_dict
from ..stats.predictions import Prediction, inverse_predict, predict, saved_factor
from ..stats.schema import CORRECTIONS, INTERVALS, check_choice
from ..stats.several_predictors import MULTI_DICT_FORMAT, multi_fit_from_dict
from ..stats.logscale import to_log
from ..stats.phylo_predict import (PHYLO_DICT_FORMAT, back_transform, new_species_from_dict,
                                   predict_new_species)
from .predictions import range_ratio

__all__ = ["SavedResults", "load_results", "predict_command", "predict_from_dict"]


def predict_from_dict(d: dict, x, *, correction: str = "smearing",
                      interval: str = "prediction",
                      confidence: float | None = None) -> Prediction:
    """Predict from a saved fit dictionary, using the factor saved with it.

    ``smearing`` and ``ratio`` need ``smearing_factor`` / ``ratio_factor`` in
    ``d``; ``parametric`` and ``none`` need nothing more.
    """
    fit = fit_from_dict(d)
    correction = check_choice(correction, CORRECTIONS, "correction")
    factor = saved_factor(d, correction)
    return predict(fit, x, correction=correction, interval=interval,
                   confidence=confidence, factor=factor)


@dataclass(frozen=True, slots=True, kw_only=True)
class SavedResults(SavedRun):
    """The fits of a finished run, usable for prediction: the attributes of
    :class:`scaling.io.saved.SavedRun`, with the saved fits rebuilt as fit objects
    (:attr:`predictors`, :meth:`fit`) and :meth:`predict`.
    """

    @property
    def predictors(self) -> tuple:
        """The predictor columns of a several-predictor run (empty for one predictor)."""
        for d in self.fits:
            if d.get("format") == MULTI_DICT_FORMAT:
                return tuple(d["predictors"])
        return ()

    def fit(self, *, method: str | None = None, group: str | None = None):
        """The :class:`LineFit` of one saved fit (a
        :class:`~scaling.stats.several_predictors.MultiFit` for a several-predictor run)."""
        d = self.saved_fit(method=method, group=group)
        return (multi_fit_from_dict(d) if d.get("format") == MULTI_DICT_FORMAT
                else fit_from_dict(d))

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
        if d.get("format") == PHYLO_DICT_FORMAT:
            if inverse:
                raise ConfigError("--inverse: the PGLS line predicts y from x only")
            frame = _predict_new_species(d, x, correction or self.correction, interval)
        elif inverse:
            frame = inverse_predict(fit_from_dict(d), x, interval=interval).to_frame()
        else:
            frame = predict_from_dict(d, x, correction=correction or self.correction,
                                      interval=interval).to_frame()
        frame.insert(0, "group", "" if group is None else group)
        return frame


def _predict_new_species(d: dict, x, correction: str, interval: str) -> pd.DataFrame:
    """A typical new species by the saved PGLS line (:mod:`scaling.stats.phylo_predict`)."""
    check_choice(correction, CORRECTIONS, "correction")
    line, base = new_species_from_dict(d)
    x = np.atleast_1d(np.asarray(x, dtype=float))
    fit, _, lo, hi, tip_var = predict_new_species(
        line, to_log(x, base) if base is not None else x, confidence=d["confidence"],
        interval=interval)
    y, y_lo, y_hi, used = back_transform(fit, lo, hi, tip_var, correction, interval, base)
    low, high = d["x_range"]
    out = (x < low) | (x > high)
    if np.any(out):
        warnings.warn("x outside the fitted range", ExtrapolationWarning, stacklevel=3)
    return pd.DataFrame({"x": x, "y": y, "y_low": y_lo, "y_high": y_hi, "interval": interval,
                         "correction": used, "extrapolated": out, "method": "pgls"})


def load_results(folder) -> SavedResults:
    """Read a results folder written by ``scaling run``.

    Raises
    ------
    DataError
        If the folder or its ``results.json`` is missing or unreadable.
    """
    run = read_results(folder)
    return SavedResults(**{f.name: getattr(run, f.name) for f in fields(run)})


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
        values, ids = read_predictors(Path(args.from_file), names)
    elif args.x:
        values = parse_numbers(args.x, "--x")
    else:
        column = saved.y_name if args.inverse else saved.x_name
        values, ids = read_column(Path(args.from_file), column, "--from")
    for option, allowed in (("correction", CORRECTIONS), ("interval", INTERVALS)):
        value = getattr(args, option)
        if value is not None and value not in allowed:
            raise ConfigError(f"--{option}: '{value}' is not one of {', '.join(allowed)}"
                              f"{hint(value, allowed)}")
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


def _with_names(frame: pd.DataFrame, saved: SavedResults, ids, *, inverse: bool,
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
