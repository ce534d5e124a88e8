"""The prediction stage of a run: accuracy and correction factors per fit, predictions.

:func:`prediction_stage` computes the correction factors of every fit once
(on the fit's own points), stores them in the saved-fit dictionaries
(``RunResult.saved_fits``, written to results.json) and in fits.csv, and
passes them on to the predictions and to the figures; nothing computes them
again.  It adds the accuracy, correction-factor and normalisation-constant
columns to fits.csv and writes predictions.csv and inverse_predictions.csv.

Which lines predict
    :func:`prediction_fits` keeps the fits of ``prediction.methods``, by
    default OLS (the line that estimates y from x); symmetric lines (SMA,
    MA, ...) predict only when asked, with a note.

range_ratio
    For a value v and the fitted range [lo, hi] of the fit that made the
    prediction: ``v / hi`` above the range, ``lo / v`` below it, 1 inside
    (so 2 means twice the largest, or half the smallest, fitted value).  For
    ``predictions.csv`` v is the requested x and the range that of x; for
    ``inverse_predictions.csv`` v is the given y and the range that of y.
    With log_base none (data already logs), the ratio is base-free: 1 +
    distance outside the range / range width.
"""

from __future__ import annotations

import math
import operator
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..render.wording import fit_note
from ..render.wording import (range_warning, scope_words, symmetric_prediction_note,
                              unbounded_inverse_note)
from ..stats.lines import is_symmetric, to_log
from ..stats.line_results import DICT_FORMAT, fit_to_dict
from ..stats.logscale import base_label
from ..stats.predictions import (LinePredictions, accuracy, data_factors, inverse_predict_lines,
                                 predict_lines, saved_factor)
from ..stats.schema import FIT_ACCURACY_COLUMNS, INVERSE_COLUMNS, PREDICTION_COLUMNS, method_label
from ..render.headline import answer_line
from ..render.prediction_words import answer_primary, predicting_method, prediction_sentence
from .fits import set_columns
from .several_predictors import constant_columns, constant_sentence

__all__ = ["PredictionStage", "prediction_stage", "predictions_from_factors",
           "saved_fits_of", "accuracy_and_factors",
           "add_accuracy_columns", "factors_by_group", "prediction_methods",
           "prediction_fits", "range_ratio", "add_range_ratio", "row_keys", "chunk_runs",
           "CHUNK_ROWS"]


@dataclass(frozen=True, slots=True, kw_only=True)
class PredictionStage:
    """Correction factors, the completed fits table and the predictions.

    Attributes
    ----------
    fits : DataFrame
        fits.csv with the accuracy, correction-factor and constant columns.
    saved_fits : dict
        ``(scope, group, method) -> saved-fit dict`` (with smearing and ratio
        factors) of every fit evaluated on its points.
    tables : dict
        ``predictions`` and ``inverse_predictions`` when asked for.
    messages, notes : tuple of str
    """

    fits: pd.DataFrame
    saved_fits: dict
    tables: dict
    messages: tuple = ()
    notes: tuple = ()


def prediction_stage(cfg, state) -> PredictionStage:
    """Factors per fit, the fits table's extra columns, and predictions for the config's values.

    Reads ``state.line_fits``, ``state.point_sets``, ``state.fits`` (the
    assembled fits table) and ``state.data.units``.
    """
    saved, extra = accuracy_and_factors(state.line_fits, state.point_sets)
    return predictions_from_factors(cfg, fits=state.fits, line_fits=state.line_fits,
                                    saved=saved, extra=extra, units=state.data.units,
                                    base=state.base,
                                    group_tests=state.tables.get("group_tests"))


def predictions_from_factors(cfg, *, fits: pd.DataFrame, line_fits: dict, saved: dict,
                             extra: dict, units: dict, base,
                             group_tests: pd.DataFrame | None = None) -> PredictionStage:
    """The prediction stage once each fit's accuracy and factors are known.

    ``extra`` (``(scope, group, method) -> accuracy and factor columns``) and
    ``saved`` (:func:`saved_fits_of`) come from the fits' points in memory
    (:func:`accuracy_and_factors`) or from a streaming pass over the rows
    (:mod:`scaling.run.second_pass`); nothing here reads the rows.  ``group_tests``:
    when the groups' slopes differ, each group predicts from its own line.
    """
    fits = add_accuracy_columns(fits, extra)
    fits = constant_columns(fits, units, base)   # term, a, a_low, a_high, a_unit
    predicting, choice_notes = prediction_fits(saved, cfg)   # which lines predict (default OLS)
    tables, notes = _predictions(line_fits, predicting, cfg)
    messages = []
    lead = line_fits.get(("pooled", "", answer_primary(cfg)))   # the Answer's line
    if lead is not None:   # the normalisation constant a of the primary line, with its units
        a_line = constant_sentence(lead, units, base, cfg.model.confidence)
        if a_line:
            messages.append(a_line)
    # groups whose slopes differ predict from their own lines (the pooled one mixes them)
    differ = (isinstance(group_tests, pd.DataFrame) and len(group_tests) > 0
              and answer_line(group_tests, cfg.model.methods, answer_primary(cfg),
                              cfg.model.confidence)[0] == "groups")
    messages += prediction_sentence(tables, cfg, units, slopes_differ=differ)
    return PredictionStage(fits=fits, saved_fits=saved, tables=tables,
                           messages=tuple(messages), notes=tuple(choice_notes + notes))


def _extra_of(fit, x, y) -> dict:
    """Accuracy and correction factors of one fit on its points (the per-fit reference)."""
    factors = data_factors(fit, x, y)
    acc = accuracy(fit, x, y)
    return {"see": acc.see, "percent_see": acc.percent_see, "percent_pe": acc.percent_pe,
            "smearing_factor": float(factors["smearing"]),
            "parametric_factor": float(factors["parametric"]),
            "ratio_factor": float(factors["ratio"])}


def factors_by_group(fits: list, x: np.ndarray, y: np.ndarray, codes: np.ndarray,
                     log_base: float, *, logs: tuple | None = None,
                     shared: dict | None = None) -> dict:
    """Accuracy and correction factors of many fits at once, one fit per group code.

    Parameters
    ----------
    fits : list of LineFit
        ``fits[k]`` is fitted to the rows with ``codes == k``; all estimable,
        all on the log base ``log_base`` (not None).
    x, y : ndarray
        Natural units, every row of every group (positive, finite).
    codes : ndarray of int
        Group code of each row, 0 .. len(fits) - 1, sorted (each group's rows
        contiguous), every code with >= 3 rows.
    log_base : float
    logs : (ndarray, ndarray), optional
        ``to_log(x, log_base)`` and ``to_log(y, log_base)`` when the caller has them
        (several methods' fits to the same points).
    shared : dict, optional
        An empty dict the caller passes again with other fits to the same ``x``, ``y``
        and ``codes`` (several methods): what does not depend on the line (the
        groups' sizes and summing plan, the mean of y) is kept in it and made once.

    Returns
    -------
    dict
        Arrays (one value per fit) under the keys of :func:`_extra_of`.

    Notes
    -----
    The same formulas as :func:`scaling.stats.predictions.accuracy` and
    :func:`scaling.stats.predictions.data_factors`, with the per-group sums taken over blocks of equal-sized groups
    (no Python loop over groups): residuals e = Y - (a + b X);
    SEE = sqrt(sum e^2 / (n - 2)); %SEE = 100 (base^SEE - 1);
    %PE = 100 mean |y - yhat| / yhat with yhat = base^(a + b X);
    smearing = mean(base^e) (Duan 1983, JASA 78:605); parametric =
    exp(SEE_fit^2 ln(base)^2 / 2) (Baskerville 1972, Can. J. For. Res. 2:49);
    ratio = mean(y) / mean(yhat) (Snowdon 1991, Can. J. For. Res. 21:720).
    """
    k = len(fits)
    shared = {} if shared is None else shared
    if "total" not in shared:
        shared.update(_summing_plan(np.bincount(codes, minlength=k)))
    sizes, n, total = shared["sizes"], shared["n"], shared["total"]
    sd = np.array([f.resid_sd for f in fits], dtype=float)
    ln_base = math.log(log_base)
    X, Y = logs if logs is not None else (to_log(x, log_base), to_log(y, log_base))
    # a + b X, each group's a and b repeated over its (contiguous) rows (one line: the
    # numbers themselves, the same products and sums), in place
    def spread(values):
        v = np.array(values, dtype=float)
        return v[0] if k == 1 else np.repeat(v, sizes)
    line = np.multiply(spread([f.slope for f in fits]), X)
    line += spread([f.intercept for f in fits])
    res = Y - line
    y_hat = np.power(log_base, line, out=line)

    spare = np.multiply(res, res)   # squared residuals, then |y - y_hat| in the same array
    see = np.sqrt(total(spare) / (n - 2))
    # base ** SEE with Python's pow on each float, as accuracy() does (numpy's
    # vectorised power can differ in the last bit).
    percent_see = np.array([100 * (log_base ** v - 1) for v in see.tolist()])
    res *= ln_base
    smearing = total(np.exp(res, out=res)) / n
    del res
    gap = np.subtract(y, y_hat, out=spare)
    del spare
    np.abs(gap, out=gap)
    percent_pe = 100 * (total(np.divide(gap, y_hat, out=gap)) / n)
    del gap
    return {"see": see, "percent_see": percent_see, "percent_pe": percent_pe,
            "smearing_factor": smearing,
            "parametric_factor": np.exp(sd * sd * ln_base * ln_base / 2),
            "ratio_factor": _mean_y(shared, y) / (total(y_hat) / n)}


def _summing_plan(sizes) -> dict:
    """What :func:`factors_by_group` keeps in ``shared``: the groups' sizes (rows of
    each code), as floats, and their :func:`_group_sums`."""
    sizes = np.asarray(sizes, dtype=np.intp)
    return {"sizes": sizes, "n": sizes.astype(float),
            "total": _group_sums(sizes, np.concatenate(([0], np.cumsum(sizes[:-1]))))}


def _mean_y(shared: dict, y: np.ndarray) -> np.ndarray:
    """Each group's mean of y, taken once for every line fitted to the same points."""
    if "mean_y" not in shared:
        shared["mean_y"] = shared["total"](y) / shared["n"]
    return shared["mean_y"]


def _group_sums(sizes: np.ndarray, starts: np.ndarray):
    """A function summing an array's values group by group (groups contiguous), each in
    the (pairwise) order of ``np.sum`` on that group alone, so every number equals the
    per-fit one to the last bit.

    A few groups: one sum of each group's slice.  Many: the values laid out with a
    zero before each group and summed by one ``np.add.reduceat`` (which adds a
    segment's first value to the pairwise sum of the rest: led by a zero, that is
    ``np.sum``'s order), without a Python loop over groups.
    """
    k = sizes.size
    if k <= _FEW_GROUPS:
        bounds = list(zip(starts.tolist(), (starts + sizes).tolist()))
        add = np.add.reduce

        def total(w):
            return np.array([add(w[a:b]) for a, b in bounds], dtype=float)
        return total
    heads = starts + np.arange(k)
    slots = np.ones(int(sizes.sum()) + k, dtype=bool)   # every place but the heads
    slots[heads] = False

    def total(w):
        padded = np.zeros(slots.size)
        padded[slots] = w
        return np.add.reduceat(padded, heads)
    return total


#: At most this many groups are summed one slice each (:func:`_group_sums`).
_FEW_GROUPS = 64
#: Rows of the point sets evaluated together by :func:`accuracy_and_factors` (a larger
#: set alone): the temporary arrays stay a few megabytes, whatever the number of groups.
CHUNK_ROWS = 1 << 17


def accuracy_and_factors(line_fits: dict, point_sets: dict):
    """Saved-fit dicts (with smearing and ratio factors) and accuracy columns per fit.

    Estimable fits on a log scale are evaluated together, per method and
    log base, by :func:`factors_by_group` (no Python loop over the groups'
    rows), a chunk of about :data:`CHUNK_ROWS` rows of whole point sets at a
    time (the numbers do not depend on the chunks: every sum is one group's);
    the others one by one.
    """
    extra = {}
    batches: dict = {}
    for key, fit in line_fits.items():
        scope, group, method = key
        sel = point_sets.get((scope, group))
        if sel is None or len(sel) < 3:
            continue
        if fit.log_base is None or not fit.estimable:
            extra[key] = _extra_of(fit, sel["x"].to_numpy(), sel["y"].to_numpy())
        else:
            batches.setdefault((method, fit.log_base), []).append(key)
    # The methods' batches usually hold the same point sets: they are evaluated
    # together, a chunk of whole point sets at a time (about CHUNK_ROWS rows), each
    # chunk's columns read and its logs taken once for every method.
    by_sets: dict = {}
    for (_, base), keys in batches.items():
        by_sets.setdefault(tuple((s, g) for s, g, _ in keys), []).append((base, keys))
    for sets, jobs in by_sets.items():
        for lo, hi in chunk_runs([len(point_sets[k]) for k in sets], CHUNK_ROWS):
            cols = [tuple(np.asarray(c, dtype=float)
                          for c in set_columns(point_sets[k], "x", "y"))
                    for k in sets[lo:hi]]
            x = cols[0][0] if len(cols) == 1 else np.concatenate([c[0] for c in cols])
            y = cols[0][1] if len(cols) == 1 else np.concatenate([c[1] for c in cols])
            if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))
                    and np.all(x > 0) and np.all(y > 0)):
                for _, keys in jobs:   # let the per-fit path raise its clear error
                    for key in keys[lo:hi]:
                        t = point_sets[key[:2]]
                        extra[key] = _extra_of(line_fits[key], t["x"].to_numpy(),
                                               t["y"].to_numpy())
                continue
            # the smallest integers that hold the codes (a byte a row for the pooled set)
            lengths = [c[0].size for c in cols]
            codes = np.repeat(np.arange(hi - lo, dtype=np.min_scalar_type(hi - lo)), lengths)
            logs: dict = {}
            # the groups' sums plan (from the sets' lengths: the codes' counts) and mean y,
            # made once per chunk for every method
            shared = _summing_plan(lengths)
            for base, keys in jobs:
                if base not in logs:
                    logs[base] = (to_log(x, base), to_log(y, base))
                part = keys[lo:hi]
                got = factors_by_group([line_fits[k] for k in part], x, y, codes, base,
                                       logs=logs[base], shared=shared)
                for i, key in enumerate(part):
                    extra[key] = {c: float(v[i]) for c, v in got.items()}
    extra = {key: extra[key] for key in line_fits if key in extra}   # the fits' order
    return saved_fits_of(line_fits, extra), extra


def chunk_runs(lengths: list, rows: int) -> list:
    """``(start, stop)`` runs of consecutive items whose lengths add up to at most
    ``rows`` (an item longer than ``rows`` alone)."""
    out, lo, filled = [], 0, 0
    for i, m in enumerate(lengths):
        if i > lo and filled + m > rows:
            out.append((lo, i))
            lo, filled = i, 0
        filled += m
    if lo < len(lengths):
        out.append((lo, len(lengths)))
    return out


def saved_fits_of(line_fits: dict, extra: dict) -> dict:
    """Saved-fit dicts (with smearing and ratio factors) of the fits that have ``extra``.

    Each is the dict of :func:`~scaling.stats.line_results.fit_to_dict` with the
    fit's ``scope``, ``group`` and ``note``; fits whose factors are floats are
    built together, a field at a time (:func:`_saved_dicts`)."""
    keys = [k for k in line_fits if k in extra]
    plain = [k for k in keys if type(extra[k]["smearing_factor"]) is float
             and type(extra[k]["ratio_factor"]) is float]
    built = dict(zip(plain, _saved_dicts([line_fits[k] for k in plain],
                                         [extra[k]["smearing_factor"] for k in plain],
                                         [extra[k]["ratio_factor"] for k in plain])))
    saved = {}
    for key in keys:
        fit = line_fits[key]
        d = built.get(key)
        if d is None:   # None (the fit's own factors) or another type: the reference checks it
            d = fit_to_dict(fit, smearing_factor=extra[key]["smearing_factor"],
                            ratio_factor=extra[key]["ratio_factor"])
        d.update({"scope": key[0], "group": key[1], "note": fit_note(fit)})
        saved[key] = d
    return saved


def _clean(v):
    """The cleaning of :func:`~scaling.stats.line_results.fit_to_dict`: floats (numpy
    ones too) as finite floats or None, lists and tuples as lists, the rest as is."""
    kind = type(v)
    if kind is float or kind is np.float64:
        v = float(v)
        return v if math.isfinite(v) else None
    if isinstance(v, dict):
        return {k: _clean(u) for k, u in v.items()}
    if isinstance(v, (list, tuple)):
        return [_clean(u) for u in v]
    if isinstance(v, (float, np.floating)):
        v = float(v)
        return v if math.isfinite(v) else None
    return v


def _column(values: list) -> list:
    """:func:`_clean` of each value; all floats in one array pass."""
    if all(type(v) is float or type(v) is np.float64 for v in values):
        arr = np.array(values, dtype=float)
        out = arr.tolist()
        for i in np.flatnonzero(~np.isfinite(arr)).tolist():
            out[i] = None
        return out
    return [_clean(v) for v in values]


_SCALARS = ("slope", "slope_se", "intercept", "intercept_se", "r", "r2", "resid_sd", "df",
            "confidence")
_MOMENTS = ("n", "mean_x", "mean_y", "sxx", "syy", "sxy")


def _moment_column(values: list) -> list:
    """The moments' field of each fit as :meth:`~scaling.stats.moments.Moments.to_dict`
    then :func:`_clean` give it; numpy float scalars in one array pass."""
    if all(type(v) is np.float64 or type(v) is float for v in values):
        return _column(values)
    return _column([np.asarray(v).tolist() for v in values])


#: What :func:`_saved_dicts` reads of each fit, in one C-level call per fit.
_READ = operator.attrgetter(
    *_SCALARS, "slope_ci.low", "slope_ci.high", "intercept_ci.low", "intercept_ci.high",
    *(f"moments.{name}" for name in _MOMENTS))


#: The rest of a fit :func:`_saved_dicts` reads, as it is.
_OTHERS = operator.attrgetter("method", "n", "log_base", "x_range", "y_range", "note", "lam",
                              "interval_method", "slope_gap_low", "slope_gap_high")


def _saved_dicts(fits: list, smearing: list, ratio: list) -> list:
    """``fit_to_dict(fit, smearing_factor=s, ratio_factor=r)`` of each fit, the same
    dicts (a test holds them equal, types and key order included), built a field
    at a time instead of by a recursive cleaning of each fit's dict."""
    read = list(zip(*map(_READ, fits))) or [()] * (len(_SCALARS) + 4 + len(_MOMENTS))
    k = len(_SCALARS)
    col = {name: _column(list(read[i])) for i, name in enumerate(_SCALARS)}
    ci = {"slope_ci": (_column(list(read[k])), _column(list(read[k + 1]))),
          "intercept_ci": (_column(list(read[k + 2])), _column(list(read[k + 3])))}
    mom = {name: _moment_column(list(read[k + 4 + i])) for i, name in enumerate(_MOMENTS)}
    factors = _column(smearing), _column(ratio)
    labels: dict = {}
    out = []
    columns = (map(_OTHERS, fits), *(col[name] for name in _SCALARS), *ci["slope_ci"],
               *ci["intercept_ci"], zip(*(mom[name] for name in _MOMENTS)), *factors)
    for ((method, n, log_base, x_range, y_range, note, lam, how, gap_low, gap_high),
         slope, slope_se, intercept, intercept_se, r, r2, resid_sd, df, confidence,
         slope_low, slope_high, intercept_low, intercept_high, moments, smearing_factor,
         ratio_factor) in zip(*columns):
        if log_base not in labels:
            labels[log_base] = base_label(log_base)
        d = {"format": DICT_FORMAT, "method": method, "n": int(n),
             "slope": slope, "slope_ci": [slope_low, slope_high], "slope_se": slope_se,
             "intercept": intercept, "intercept_ci": [intercept_low, intercept_high],
             "intercept_se": intercept_se, "r": r, "r2": r2, "resid_sd": resid_sd, "df": df,
             "log_base": labels[log_base], "confidence": confidence,
             "moments": dict(zip(_MOMENTS, moments)),
             "x_range": None if x_range is None else [_clean(float(v)) for v in x_range],
             "y_range": None if y_range is None else [_clean(float(v)) for v in y_range],
             "note": note, "lam": _clean(lam), "interval_method": how,
             "smearing_factor": smearing_factor, "ratio_factor": ratio_factor}
        if math.isfinite(gap_low) and math.isfinite(gap_high):
            d["slope_gap"] = [_clean(gap_low), _clean(gap_high)]
        out.append(d)
    return out


def row_keys(table: pd.DataFrame):
    """``(scope, group, method)`` of each row (column lists: no row objects)."""
    return zip(*(table[c].tolist() for c in ("scope", "group", "method")))


def add_accuracy_columns(fits: pd.DataFrame, extra: dict) -> pd.DataFrame:
    """fits.csv with the accuracy and correction-factor columns (NaN where not computed)."""
    blank = dict.fromkeys(FIT_ACCURACY_COLUMNS, np.nan)
    rows = [extra.get(key, blank) for key in row_keys(fits)]
    try:   # every row with every column (as the passes make them): one C-level read each
        read = list(zip(*map(operator.itemgetter(*FIT_ACCURACY_COLUMNS), rows)))
        values = {c: list(v) for c, v in zip(FIT_ACCURACY_COLUMNS, read)} if rows else None
    except KeyError:
        values = None
    if values is None:
        values = {c: [row.get(c, np.nan) for row in rows] for c in FIT_ACCURACY_COLUMNS}
    out = fits.copy()
    for c in FIT_ACCURACY_COLUMNS:
        out[c] = values[c]
    return out


def _columns(keys: list, batch: LinePredictions, role: str) -> dict:
    """The columns of predictions.csv (``role`` "x") or inverse_predictions.csv ("y"),
    without range_ratio: one row per line of ``keys`` and value, line by line."""
    k, f = batch.given.size, len(keys)
    names = ("x", "y", "y_low", "y_high") if role == "x" else ("y", "x", "x_low", "x_high")
    cols = {"scope": [s for s, _, _ in keys for _ in range(k)],
            "group": [g for _, g, _ in keys for _ in range(k)]}
    cols.update(zip(names, (np.tile(batch.given, f), batch.estimate.ravel(),
                            batch.low.ravel(), batch.high.ravel())))
    cols.update({"interval": [batch.interval] * (k * f),
                 "correction": [batch.correction] * (k * f),
                 "extrapolated": batch.extrapolated.ravel().astype(bool),
                 "method": [m for _, _, m in keys for _ in range(k)],
                 "confidence": np.repeat(batch.confidence.astype(float), k)})
    return cols


def _many(keys: list, line_fits: dict, make) -> LinePredictions:
    """``make(fits)`` for the lines ``keys``, one call per log base, rows in ``keys``' order."""
    by_base: dict = {}
    for i, key in enumerate(keys):
        by_base.setdefault(line_fits[key].log_base, []).append(i)
    parts = [(idx, make(idx)) for idx in by_base.values()]
    if len(parts) == 1:
        return parts[0][1]
    order = np.argsort(np.concatenate([idx for idx, _ in parts]), kind="stable")
    first = parts[0][1]
    stack = {f: np.concatenate([getattr(p, f) for _, p in parts])[order]
             for f in ("estimate", "low", "high", "extrapolated", "bounded", "confidence")}
    return LinePredictions(given=first.given, interval=first.interval,
                           correction=first.correction, **stack)


def _quiet(keys: list, line_fits: dict, make) -> LinePredictions:
    """:func:`_many` with numpy's floating-point warnings silenced (an overflowing
    or undefined value is written as inf or NaN and the tables say why)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return _many(keys, line_fits, make)


def _predictions(line_fits: dict, saved: dict, cfg):
    """predictions.csv (and inverse_predictions.csv) for the config's values, and notes.

    Every line predicts at once (:func:`~scaling.stats.predictions.predict_lines`,
    one array pass instead of a call and a t quantile per line)."""
    pc = cfg.prediction
    keys = list(saved)
    tables, notes, unbounded = {}, [], []
    for wanted, columns, role, name in (
            (pc.x, PREDICTION_COLUMNS, "x", "predictions"),
            (pc.y, INVERSE_COLUMNS, "y", "inverse_predictions")):
        if not wanted:
            continue
        keep = columns[:-1]   # range_ratio, the last column, is added here
        if not keys:
            table = pd.DataFrame(columns=keep)
        elif role == "x":
            batch = _quiet(keys, line_fits, lambda idx: predict_lines(
                [line_fits[keys[i]] for i in idx], list(pc.x), correction=pc.correction,
                interval=pc.interval,
                factors=[saved_factor(saved[keys[i]], pc.correction) for i in idx]))
            table = pd.DataFrame(_columns(keys, batch, "x"))[keep]
        else:
            batch = _quiet(keys, line_fits, lambda idx: inverse_predict_lines(
                [line_fits[keys[i]] for i in idx], list(pc.y), interval=pc.interval))
            table = pd.DataFrame(_columns(keys, batch, "y"))[keep]
            unbounded = [scope_words(s, g) + " " + method_label(m)
                         for (s, g, m), ok in zip(keys, batch.bounded.all(axis=1)) if not ok]
        table, range_notes = add_range_ratio(table, saved, role)
        tables[name] = table
        notes += range_notes
    if pc.y and unbounded:
        notes.append(unbounded_inverse_note(unbounded, pc.interval, cfg.model.confidence))
    return tables, notes


# --------------------------------------------------------------------------
# which lines predict, and how far outside the fitted range


def prediction_methods(cfg, fitted: list) -> tuple:
    """The methods whose lines make predictions.

    ``prediction.methods`` if given; else OLS if it was fitted; else the
    first method fitted.
    """
    asked = tuple(getattr(cfg.prediction, "methods", ()) or ())
    if asked:
        return asked
    return (predicting_method(cfg, fitted),)


def prediction_fits(saved: dict, cfg) -> tuple:
    """The saved fits that predict, and the notes about that choice."""
    fitted = list(dict.fromkeys(m for (_, _, m) in saved))
    chosen = prediction_methods(cfg, fitted)
    keep = {k: d for k, d in saved.items() if k[2] in chosen}
    notes = []
    if not (cfg.prediction.x or cfg.prediction.y):
        return keep, notes
    symmetric = [m for m in chosen if m in fitted and _symmetric(m)]
    if symmetric:
        notes.append(symmetric_prediction_note(symmetric))
    missing = [m for m in chosen if m not in fitted]
    if missing:
        notes.append(f"prediction.methods asks for {', '.join(missing)}, which model.methods "
                     "does not fit (or could not fit); no predictions from "
                     f"{'it' if len(missing) == 1 else 'them'}.")
    return keep, notes


def _symmetric(method: str) -> bool:
    try:
        return bool(is_symmetric(method))
    except Exception:   # an unknown name is not symmetric
        return False


def range_ratio(values, low, high, *, logs: bool = False) -> np.ndarray:
    """How far outside [low, high] each value lies (1 inside); see the module notes."""
    v = np.asarray(values, dtype=float)
    lo = np.asarray(low, dtype=float)
    hi = np.asarray(high, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        if logs:
            width = np.where(hi > lo, hi - lo, 1.0)
            out = np.where(v > hi, 1 + (v - hi) / width,
                           np.where(v < lo, 1 + (lo - v) / width, 1.0))
        else:
            out = np.where(v > hi, v / hi, np.where(v < lo, lo / v, 1.0))
    return np.where(np.isfinite(lo) & np.isfinite(hi), out, np.nan)


def add_range_ratio(table: pd.DataFrame, saved: dict, role: str) -> tuple:
    """``table`` with a ``range_ratio`` column, and the warning naming the fitted range.

    Parameters
    ----------
    table : DataFrame
        predictions (``role="x"``) or inverse predictions (``role="y"``) with
        ``scope, group, method`` columns.
    saved : dict
        ``(scope, group, method) -> saved-fit dict`` with ``x_range``,
        ``y_range`` and ``log_base``.
    """
    out = table.copy()
    if not len(out):
        out["range_ratio"] = pd.Series(dtype=float)
        return out, []
    lo, hi, logs = [], [], []
    for key in row_keys(out):
        d = saved.get(key, {})
        rng = d.get(f"{role}_range") or (np.nan, np.nan)
        lo.append(rng[0])
        hi.append(rng[1])
        logs.append(d.get("log_base") in (None, "none"))
    out["range_ratio"] = range_ratio(out[role].to_numpy(float), lo, hi,
                                     logs=bool(all(logs)))
    outside = out["range_ratio"] > 1
    notes = []
    if outside.any():
        what = "predictions" if role == "x" else "inverse predictions (given y)"
        notes.append(range_warning(int(outside.sum()), len(out), float(np.nanmin(lo)),
                                   float(np.nanmax(hi)), float(out["range_ratio"].max()),
                                   what=what, role=role))
    return out, notes
