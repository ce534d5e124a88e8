"""Run stages for several predictors and for units (called from ``pipeline.analyse``).

* :func:`apply_model_units` converts the cleaned columns to ``model.units``
  before the fit (x' = c_x x, y' = c_y y; on the log scale a shift by
  log c, so species means of logs convert exactly as well).
* :func:`constant_columns` adds ``term, a, a_low, a_high, a_unit`` to the fits
  table: the normalisation constant a = base^intercept of y = a x^b, its
  interval base^(intercept bounds) in natural units, and its unit
  [y]·[x]^-b (see :mod:`scaling.stats.units`).
* :func:`several_stage` is the whole fitting when ``data.x`` lists several
  columns: OLS of log y on the logs (:func:`scaling.stats.several_predictors.fit_multi`), the
  exponent tests, the combined-term test, bias-corrected predictions with
  intervals and, with ``prediction.total``, the total over the new rows.

Sentences for the report are small functions here (to move to wording.py).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from ..errors import DataError, ExtrapolationWarning, ScalingError
from ..stats.lines import base_label, method_label
from ..stats.units import conversion_factor, normalisation_constant
from ..stats.several_groups import predict_groups, predict_total_groups
from ..stats.several_predictors import fit_multi, multi_fit_to_dict
from ..render.summaries import total_range_note
from ..render.wording import p_text, plural
from .several_checks import several_diagnostics, several_groups

__all__ = ["apply_model_units", "constant_columns", "SeveralStage", "several_stage",
           "exponent_hypotheses", "MULTI_SLOPE_TEST_COLUMNS"]

MULTI_SLOPE_TEST_COLUMNS = ["scope", "group", "method", "term", "hypothesis", "exponent",
                            "estimate", "statistic", "statistic_type", "df", "p_value",
                            "p_method"]


# --------------------------------------------------------------------------
# units


def _factors(cfg) -> tuple[list, float]:
    """Conversion factors (one per x column, and y) from data.units to model.units."""
    du, mu = cfg.data.units, cfg.model.units
    xs = cfg.data.x_columns
    fx = [1.0] * len(xs)
    if mu.get("x") is not None:
        src = du["x"] if isinstance(du["x"], tuple) else (du["x"],)
        dst = mu["x"] if isinstance(mu["x"], tuple) else (mu["x"],)
        fx = [conversion_factor(s, d, key="model.units.x" + (f"[{j}]" if len(xs) > 1 else ""))
              for j, (s, d) in enumerate(zip(src, dst))]
    fy = 1.0
    if mu.get("y") is not None:
        fy = conversion_factor(du["y"], mu["y"], key="model.units.y")
    return fx, fy


def apply_model_units(data, cfg, base):
    """Return ``(data, message)`` with the columns converted to ``model.units``.

    Parameters
    ----------
    data : CleanData
    cfg : Config
    base : float or None
        Log base of the run (None: the data are already logs; no conversion).

    Notes
    -----
    x' = c_x x and log x' = log x + log c_x (c from
    :func:`scaling.stats.units.conversion_factor`); the same for y.  Exponents are
    unchanged by this; the constant a changes by c_y / prod c_xj^b_j.
    """
    mu = cfg.model.units
    if not mu or base is None:
        return data, ""
    fx, fy = _factors(cfg)
    pts = data.points.copy()
    ln_b = math.log(base)
    several = isinstance(cfg.data.x, tuple)
    for j, c in enumerate(fx):
        col = f"x{j}" if several else "x"
        pts[col] = pts[col] * c
        pts[f"log_{col}"] = pts[f"log_{col}"] + math.log(c) / ln_b
    if several:
        pts["x"], pts["log_x"] = pts["x0"], pts["log_x0"]
    pts["y"] = pts["y"] * fy
    pts["log_y"] = pts["log_y"] + math.log(fy) / ln_b
    units = dict(data.units)
    units.update({k: v for k, v in mu.items()})
    parts = []
    if mu.get("x") is not None:
        parts.append(f"x from {_unit_text(cfg.data.units['x'])} to {_unit_text(mu['x'])}")
    if mu.get("y") is not None:
        parts.append(f"y from {cfg.data.units['y']} to {mu['y']}")
    message = f"Fitted in model units: {' and '.join(parts)} (model.units)."
    return replace(data, points=pts, units=units), message


def _unit_text(u) -> str:
    return ", ".join(u) if isinstance(u, tuple) else str(u)


def _unit_string(y_unit, x_units, slopes, base, intercept, ci):
    return normalisation_constant(intercept, ci, slopes, x_units=x_units, y_unit=y_unit,
                                  log_base=base)


def constant_columns(fits: pd.DataFrame, units: dict, base) -> pd.DataFrame:
    """Add ``term`` (blank: one predictor), ``a``, ``a_low``, ``a_high``, ``a_unit``.

    ``a = base^intercept`` and its interval ``base^intercept_low`` to
    ``base^intercept_high`` (the median of y where x is 1 unit; no bias
    correction).  ``a_unit`` is [y]·[x]^-b when both units are known, else
    blank.  Rows without an estimate stay blank.
    """
    out = fits.copy()
    if "term" not in out.columns:
        out["term"] = ""
    a = np.full(len(out), np.nan)
    lo, hi = a.copy(), a.copy()
    unit = [""] * len(out)
    if base is not None:
        icpt = pd.to_numeric(out["intercept"], errors="coerce").to_numpy(dtype=float)
        a = np.power(base, icpt)
        lo = np.power(base, pd.to_numeric(out["intercept_low"], errors="coerce").to_numpy(float))
        hi = np.power(base, pd.to_numeric(out["intercept_high"], errors="coerce").to_numpy(float))
        ux, uy = units.get("x"), units.get("y")
        if ux and uy and not isinstance(ux, tuple):
            for i, (b, c) in enumerate(zip(out["slope"], icpt)):
                if np.isfinite(b) and np.isfinite(c):
                    try:
                        unit[i] = _unit_string(uy, ux, b, base, c, (c, c)).unit
                    except ScalingError:   # a label pint cannot read (e.g. from a units row)
                        unit[i] = ""
    out["a"], out["a_low"], out["a_high"], out["a_unit"] = a, lo, hi, unit
    return out


def constant_sentence(fit, units: dict, base, confidence: float) -> str:
    """'a = 3.2 W·kg^-0.75 (95% CI 2.9 to 3.5) ...' for a pooled single-x fit."""
    ux, uy = units.get("x"), units.get("y")
    if base is None or not (ux and uy) or isinstance(ux, tuple):
        return ""
    try:
        c = _unit_string(uy, ux, fit.slope, base, fit.intercept,
                         (fit.intercept_ci.low, fit.intercept_ci.high))
    except Exception:  # noqa: BLE001 -- a label pint cannot read: no sentence
        return ""
    return (f"Normalisation constant of the pooled {method_label(fit.method)} line: "
            f"a = {c.value:.4g} {c.unit} ({100 * confidence:g}% CI "
            f"{c.low:.4g} to {c.high:.4g}), the median y at x = 1 {ux}.")


# --------------------------------------------------------------------------
# several predictors


def exponent_hypotheses(exponents: dict, names: tuple) -> dict:
    """name -> {column: exponent} from the config's lists or mappings."""
    out = {}
    for label, value in exponents.items():
        if isinstance(value, tuple):
            out[label] = dict(zip(names, value))
        else:
            out[label] = dict(value)
    return out


def _new_rows(cfg, names) -> pd.DataFrame | None:
    """The new rows to predict: prediction.x (mapping) and/or prediction.from (CSV)."""
    pc = cfg.prediction
    frames = []
    if pc.x_table:
        frames.append(pd.DataFrame({n: list(pc.x_table[n]) for n in names}))
    if pc.from_file is not None:
        path = pc.from_file
        if not path.exists():
            raise DataError(f"{path}: prediction.from file not found")
        try:
            table = pd.read_csv(path)
        except Exception as exc:  # noqa: BLE001 -- any parse failure is a data error
            raise DataError(f"{path}: prediction.from cannot be read as CSV "
                            f"({type(exc).__name__})") from None
        missing = [n for n in names if n not in table.columns]
        if missing:
            raise DataError(f"{path}: prediction.from lacks the column '{missing[0]}' "
                            f"(needs {', '.join(names)})")
        for n in names:
            values = pd.to_numeric(table[n], errors="coerce")
            bad = np.flatnonzero(~(values > 0).to_numpy())
            if bad.size:
                raise DataError(f"{path}: prediction.from row {bad[0] + 1}, column '{n}': "
                                f"'{table[n].iloc[bad[0]]}' is not a positive number")
        keep = [c for c in table.columns if c not in names]
        frame = table[list(names)].astype(float)
        for c in keep:   # identifiers (tree, plot) travel with the predictions
            frame[c] = table[c]
        frames.append(frame)
    if not frames:
        return None
    return pd.concat(frames, ignore_index=True)


def _fits_rows(fit, units: dict, base) -> pd.DataFrame:
    frame = fit.to_frame()
    frame["note"] = ""
    ux, uy = units.get("x"), units.get("y")
    a = base ** fit.intercept
    frame["a"] = a
    frame["a_low"] = base ** fit.intercept_ci.low
    frame["a_high"] = base ** fit.intercept_ci.high
    unit = ""
    if uy and isinstance(ux, tuple):
        unit = _unit_string(uy, ux, fit.slopes, base, fit.intercept,
                            (fit.intercept, fit.intercept)).unit
    frame["a_unit"] = unit
    frame["y_min"], frame["y_max"] = fit.y_range
    return frame


def exponent_sentence(label: str, tests, alpha: float) -> str:
    """One line per hypothesis: each exponent against its value, with the verdict."""
    parts = []
    for t in tests:
        verdict = "differs" if t.p_value < alpha else "consistent"
        parts.append(f"{t.term} {t.estimate:.3f} vs {t.exponent:g}: t = {t.statistic:.2f}, "
                     f"{p_text(t.p_value)} ({verdict})")
    return f"  Hypothesis '{label}': " + "; ".join(parts) + "."


def combined_sentence(c, alpha: float) -> str:
    """The F test of the combined term and its exponent against the hypothesis."""
    pct = f"{100 * c.confidence:g}%"
    adequate = ("one combined term describes the data as well as separate exponents"
                if c.p_value >= alpha else
                "separate exponents fit better than the combined term")
    return (f"  Combined term {c.label}: exponent {c.exponent:.3f} ({pct} CI "
            f"{c.exponent_ci.low:.3f}–{c.exponent_ci.high:.3f}), vs {c.hypothesis:g}: "
            f"{p_text(c.t_p_value)}; against separate exponents F = {c.f_statistic:.2f} on "
            f"({c.df_num:g}, {c.df_den:g}) df, {p_text(c.p_value)}: {adequate}.")


def total_sentence(total, y_unit: str, source: str = "") -> str:
    """The total of the new rows with its interval (``source``: which lines predicted
    them, when not the pooled fit)."""
    u = f" {y_unit}" if y_unit else ""
    source = f", {source}" if source else ""
    flag = (f"; {total.n_extrapolated} of them extrapolated" if total.n_extrapolated else "")
    return (f"Total over the {total.n_new} new rows{source}: {total.total:,.4g}{u} "
            f"({100 * total.confidence:g}% interval {total.low:,.4g} to {total.high:,.4g}{u}; "
            f"{total.correction} correction; parameter and scatter uncertainty combined, "
            f"see prediction_total.csv{flag}).{total_range_note(total)}")


@dataclass(frozen=True, slots=True, kw_only=True)
class SeveralStage:
    """The fit of several predictors and what follows from it.

    Attributes
    ----------
    fits : DataFrame
        One row per term (``term`` column; ``a, a_low, a_high, a_unit``).
    slope_tests : DataFrame
        ``term`` column; one row per term and hypothesis.
    tables : dict
        ``combined_term`` (``model.combined``), ``predictions`` (new rows,
        natural units, intervals) and ``prediction_total`` (``prediction.total``).
    multi_fit : MultiFit
    comparison : MultiGroupComparison or None
        With ``data.group``: each group's fit, the common exponents, the tests.
    saved_fits : dict
        ``("pooled", "", "ols") -> saved-fit dict`` (for ``scaling predict``).
    messages, notes : tuple of str
        The plot total, when asked for, leads the messages.
    manifest : dict
        The run's manifest entries of this stage (``predictors``).
    """

    fits: pd.DataFrame
    slope_tests: pd.DataFrame
    tables: dict
    multi_fit: object
    saved_fits: dict
    messages: tuple = ()
    notes: tuple = ()
    manifest: dict
    comparison: object = None


def several_stage(cfg, state) -> SeveralStage:
    """Fit log y on the logs of every column of ``data.x`` (OLS), test, predict.

    Raises
    ------
    DataError
        No log base, or fewer usable rows than predictors + 2.
    """
    data, base = state.data, state.base
    if base is None:
        raise DataError(f"{cfg.data.file}: several predictors need model.log_base 10, e or 2")
    pts = data.points
    messages: list[str] = []
    notes: list[str] = []
    head = 0   # the plot total, when asked for, leads the summary
    names = cfg.data.x_columns
    k = len(names)
    if len(pts) < k + 2:
        raise DataError(f"{cfg.data.file}: {k} predictors need at least {k + 2} usable rows, "
                        f"got {len(pts)}")
    x = {n: pts[f"x{j}"].to_numpy() for j, n in enumerate(names)}
    fit = fit_multi(x, pts["y"].to_numpy(), confidence=cfg.model.confidence,
                    log_base=base)
    units = data.units
    alpha = 1 - cfg.model.confidence
    pct = f"{100 * cfg.model.confidence:g}%"
    fits = _fits_rows(fit, units, base)
    terms = ", ".join(f"{n} {b:.3f} ({pct} CI {lo:.3f}–{hi:.3f})" for n, b, lo, hi in
                      zip(names, fit.slopes, fit.slope_low, fit.slope_high))
    messages.append(f"Pooled OLS on {k} predictors, exponents: {terms}; r² = {fit.r2:.3f}, "
                    f"n = {fit.n}.")
    if fits["a_unit"].iloc[0]:
        messages.append(f"  Normalisation constant a = {fits['a'].iloc[0]:.4g} "
                        f"{fits['a_unit'].iloc[0]} ({pct} CI {fits['a_low'].iloc[0]:.4g} to "
                        f"{fits['a_high'].iloc[0]:.4g}).")
    test_rows = []
    for label, hyp in exponent_hypotheses(cfg.exponents, names).items():
        tests = fit.test_exponents(hyp, label=label)
        messages.append(exponent_sentence(label, tests, alpha))
        for t in tests:
            test_rows.append({"scope": "pooled", "group": "", "method": "ols", "term": t.term,
                              "hypothesis": label, "exponent": t.exponent,
                              "estimate": t.estimate, "statistic": t.statistic,
                              "statistic_type": "t", "df": t.df, "p_value": t.p_value,
                              "p_method": "t"})
    tables: dict = {}
    comparison = None
    if "group" in pts.columns:   # data.group: each group's fit, common exponents, tests
        grouped = several_groups(pts, names, exponent_hypotheses(cfg.exponents, names), cfg,
                                 base, units)
        fits = pd.concat([fits, grouped.fits], ignore_index=True)
        test_rows += list(grouped.slope_rows)
        tables.update(grouped.tables)
        messages += list(grouped.messages)
        notes += list(grouped.notes)
        comparison = grouped.comparison
    if cfg.diagnostics.enabled:
        checked = several_diagnostics(fit, pts, cfg, comparison)
        tables.update(checked.tables)
        notes += list(checked.notes)
    slope_tests = pd.DataFrame(test_rows, columns=MULTI_SLOPE_TEST_COLUMNS)
    # saved for 'scaling predict' (results.json "saved_fits"): predictions without the data
    saved = {**multi_fit_to_dict(fit), "scope": "pooled", "group": ""}
    comb = cfg.model.combined
    if comb is not None:
        c = fit.test_combined(comb["weights"], exponent=comb["exponent"],
                              label=comb.get("label"))
        tables["combined_term"] = c.to_frame()
        messages.append(combined_sentence(c, alpha))
    new = _new_rows(cfg, names)
    if new is not None:
        pc = cfg.prediction
        model, said = _prediction_model(cfg, comparison, new)
        notes += said
        with warnings.catch_warnings(record=True):   # the run notes extrapolation itself
            warnings.simplefilter("always", ExtrapolationWarning)
            if model is None:
                pred = fit.predict(new[list(names)], correction=pc.correction,
                                   interval=pc.interval)
                total = (fit.predict_total(new[list(names)], correction=pc.correction)
                         if pc.total else None)
            else:
                pred, total = _predict_by_group(cfg, comparison, new, names, model)
        frame = pred.to_frame()
        for c in new.columns:
            if c not in names:
                frame.insert(0, c, new[c].to_numpy())
        if model is not None:   # which line predicted: each group's own, or the common one
            frame.insert(0, "scope", model)
        tables["predictions"] = frame
        n_ext = int(frame["extrapolated"].sum())
        if n_ext:
            notes.append(f"{n_ext} of {len(frame)} predictions lie outside the fitted data "
                         "(a predictor out of its range, or an unusual combination); flagged "
                         "in predictions.csv.")
        if total is not None:
            tables["prediction_total"] = total.to_frame()
            source = (_source_words(model, cfg.data.group) if not said else
                      f"from the pooled fit, which mixes {plural(str(cfg.data.group))}")
            messages.insert(head, total_sentence(total, units.get("y", ""), source))
    messages.append(f"  Residual SD (log{base_label(base)}) {fit.resid_sd:.4f}; "
                    f"adjusted r² {fit.adj_r2:.3f}; smearing factor {fit.factors['smearing']:.4f}.")
    return SeveralStage(fits=fits, slope_tests=slope_tests, tables=tables, multi_fit=fit,
                        saved_fits={("pooled", "", "ols"): saved}, messages=tuple(messages),
                        notes=tuple(notes), manifest={"predictors": list(names)},
                        comparison=comparison)


def _prediction_model(cfg, comparison, new: pd.DataFrame) -> tuple:
    """(model, notes): which line predicts the new rows when the groups were compared.

    ``"group"`` (each group's own fit) when the groups' exponents differ;
    ``"common"`` (the common exponents at each group's elevation) when they
    share exponents but not the elevation; None (the pooled fit) when they
    share both, or when the new rows have no group column (then one note
    says that the pooled fit predicts and mixes the groups).
    """
    if comparison is None:
        return None, []
    alpha = 1 - cfg.model.confidence
    lead = comparison.leading(alpha)
    elev = comparison.intercepts_equal[3]
    differ = lead == "group" or (np.isfinite(elev) and elev <= alpha)
    if not differ:
        return None, []
    word = str(cfg.data.group)
    what = "exponents" if lead == "group" else "elevation"
    column = cfg.data.group
    if column in new.columns and new[column].notna().all():
        return lead if lead == "group" else "common", []
    return None, [f"The {plural(word)} differ in their {what}, but the new rows have no complete "
                  f"{word} column, so their predictions come from the pooled fit, which mixes "
                  f"{plural(word)}; add a {word} column to the prediction table to predict "
                  f"each row from the line of its own {word}."]


def _source_words(model: str | None, word) -> str:
    """Which lines predicted the new rows, in words ('' for the pooled fit)."""
    if model == "group":
        return f"each from the fit of its own {word}"
    if model == "common":
        return f"each from the common exponents at the elevation of its {word}"
    return ""


def _predict_by_group(cfg, comparison, new: pd.DataFrame, names, model: str) -> tuple:
    """(MultiPrediction, TotalPrediction or None) of the new rows from their groups' lines."""
    pc = cfg.prediction
    x = {n: new[n].to_numpy(dtype=float) for n in names}
    groups = new[cfg.data.group].astype(str).to_numpy()
    where = pc.from_file if pc.from_file is not None else "prediction.x"
    try:
        pred, _ = predict_groups(comparison, x, groups, model=model,
                                 correction=pc.correction, interval=pc.interval)
        total = (predict_total_groups(comparison, x, groups, model=model,
                                      correction=pc.correction) if pc.total else None)
    except DataError as exc:
        raise DataError(f"{where}: {exc}") from None
    return pred, total


def prediction_sentences(tables: dict, cfg, units: dict, *, most: int = 6) -> list:
    """One line with the pooled predictions of the first method (at most ``most`` values).

    E.g. for a fossil: 'Predicted y (pooled OLS, smearing): at x = 118 mm,
    153.9 kg (95% prediction interval 97.41 to 232.7)'.  Longer lists stay in
    predictions.csv / inverse_predictions.csv.
    """
    out = []
    method = cfg.model.methods[0]
    ux, uy = units.get("x", ""), units.get("y", "")
    ux = "" if isinstance(ux, tuple) else ux
    for name, given, got, gu, pu in (("predictions", "x", "y", ux, uy),
                                     ("inverse_predictions", "y", "x", uy, ux)):
        table = tables.get(name)
        if not isinstance(table, pd.DataFrame) or "scope" not in table.columns:
            continue
        rows = table[(table["scope"] == "pooled") & (table["method"] == method)]
        if not len(rows) or len(rows) > most:
            continue
        r0 = rows.iloc[0]
        how = f", {r0['correction']}" if "correction" in rows.columns else ""
        parts = []
        for r in rows.itertuples(index=False):
            r = r._asdict()
            flag = " — extrapolated" if r.get("extrapolated") else ""
            parts.append(f"at {given} = {r[given]:.4g}{' ' + gu if gu else ''}, "
                         f"{r[got]:.4g}{' ' + pu if pu else ''} ({100 * r['confidence']:g}% "
                         f"{r['interval']} interval {r[got + '_low']:.4g} to "
                         f"{r[got + '_high']:.4g}){flag}")
        word = "Predicted" if name == "predictions" else "Inverse prediction of"
        out.append(f"{word} {got} (pooled {method.upper()}{how}): " + "; ".join(parts) + ".")
    return out
