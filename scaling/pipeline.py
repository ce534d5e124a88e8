"""Run a configuration end to end: data -> fits -> tests -> files.

:func:`analyse` computes everything and returns a :class:`RunResult` (no files
written); :func:`write_outputs` writes the output folder atomically;
:func:`run_config` does both.  The CLI is a thin layer over these.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
import math
import os
import platform
import shutil
import tempfile
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ._version import __version__
from .config import Config, config_from_dict, load_config
from .data import CleanData, load_data
from .errors import DataError, OutputError, ScalingError, ScalingWarning
from .lines import (MIN_N, METHODS, base_label, describe_test, fit_moments,
                    line_fit_from_moments, method_label, parse_log_base)
from .moments import group_moments, moments

__all__ = ["RunResult", "analyse", "write_outputs", "run_config", "FIT_COLUMNS",
           "SLOPE_TEST_COLUMNS", "DROPPED_COLUMNS", "CAUTION"]

FIT_COLUMNS = ["scope", "group", "method", "n", "slope", "slope_low", "slope_high",
               "intercept", "intercept_low", "intercept_high", "r", "r2", "log_base",
               "confidence", "note", "slope_se", "intercept_se", "resid_sd",
               "x_min", "x_max", "y_min", "y_max", "interval_method", "deming_lambda"]
SLOPE_TEST_COLUMNS = ["scope", "group", "method", "hypothesis", "exponent", "estimate",
                      "statistic", "statistic_type", "df", "p_value"]
PERMUTATION_COLUMNS = ["p_permutation", "n_perm"]
DIAGNOSTIC_COLUMNS = ["scope", "group", "method", "check", "test", "statistic", "df",
                      "p_value", "estimate", "flagged", "verdict"]
INFLUENCE_COLUMNS = ["scope", "group", "method", "row", "label", "cooks_distance"]
ERROR_STRUCTURE_COLUMNS = ["scope", "group", "model", "a", "b", "sigma", "loglik", "aicc",
                           "delta_aicc", "preferred"]
CURVATURE_COLUMNS = ["scope", "group", "n", "quadratic", "quadratic_se", "statistic", "df",
                     "p_value", "exponent_at_x_min", "exponent_at_x_max", "exponent",
                     "x_at_exponent", "within_data"]
BOOTSTRAP_COLUMNS = ["scope", "group", "method", "parameter", "estimate", "low", "high",
                     "interval", "n_boot", "seed", "boot_se", "n_valid", "confidence"]
DROPPED_COLUMNS = ["row", "reason"]

CAUTION = ("Results are statistical estimates from the data supplied, not clinical, "
           "veterinary or regulatory advice. Predictions outside the fitted range are "
           "extrapolations and are flagged. Interspecies dose scaling and any clinical or "
           "regulatory use must defer to the applicable guidance and licensed practice.")


@dataclass(frozen=True, slots=True, kw_only=True)
class RunResult:
    """Everything one run computed, as tidy DataFrames plus the fit objects.

    Attributes
    ----------
    config : Config
    data : CleanData
    fits, slope_tests, dropped : DataFrame
        The tables of ``fits.csv``, ``slope_tests.csv``, ``dropped_rows.csv``.
    line_fits : dict
        ``(scope, group, method) -> LineFit`` for every estimable fit
        (``group`` is "" for pooled and group-means fits).
    tables : dict
        Further tables by file stem (``group_means``, ``group_tests``, ...)
        added by the optional stages.
    messages : tuple of str
        Plain-language findings, in order.
    warnings : tuple of str
        Things the user should look at (skipped fits, extrapolation, ...).
    manifest : dict
        Config, input hash, versions, time.
    out_dir : Path or None
        Where the files were written, once written.
    """

    config: Config
    data: CleanData
    fits: pd.DataFrame
    slope_tests: pd.DataFrame
    dropped: pd.DataFrame
    line_fits: dict
    tables: dict = field(default_factory=dict)
    messages: tuple = ()
    warnings: tuple = ()
    manifest: dict = field(default_factory=dict)
    out_dir: Path | None = None
    files: tuple = ()

    @property
    def group_means(self) -> pd.DataFrame | None:
        return self.tables.get("group_means")

    @property
    def group_tests(self) -> pd.DataFrame | None:
        return self.tables.get("group_tests")

    @property
    def predictions(self) -> pd.DataFrame | None:
        return self.tables.get("predictions")

    def fit(self, method: str, *, scope: str = "pooled", group: str = ""):
        """The :class:`~scaling.lines.LineFit` for one row of ``fits``."""
        try:
            return self.line_fits[(scope, group, method)]
        except KeyError:
            raise KeyError(f"no estimable fit for scope={scope!r}, group={group!r}, "
                           f"method={method!r}") from None


# --------------------------------------------------------------------------
# analysis


def _range(values: np.ndarray) -> tuple:
    return (float(np.min(values)), float(np.max(values)))


def _fit_rows(scope: str, groups: list, m, method: str, cfg: Config, base, ranges):
    if method == "deming":
        from .robust import deming_moments
        res = deming_moments(m, cfg.model.deming_lambda, confidence=cfg.model.confidence)
    else:
        res = fit_moments(m, method, confidence=cfg.model.confidence)
    rows = []
    for i, name in enumerate(groups):
        (x_lo, x_hi), (y_lo, y_hi) = ranges[i]
        rows.append({
            "scope": scope, "group": name, "method": method, "n": int(m.n[i]),
            **{k: float(res[k][i]) for k in ("slope", "slope_low", "slope_high", "intercept",
                                              "intercept_low", "intercept_high", "r", "r2",
                                              "slope_se", "intercept_se", "resid_sd")},
            "log_base": base_label(base), "confidence": cfg.model.confidence,
            "note": str(res["note"][i]),
            "x_min": x_lo, "x_max": x_hi, "y_min": y_lo, "y_max": y_hi,
            "interval_method": "analytic",
            "deming_lambda": cfg.model.deming_lambda if method == "deming" else np.nan,
        })
    return rows


def _blank_numbers(row: dict) -> dict:
    if row["note"] and not np.isfinite(row["slope"]):
        for k in ("slope", "slope_low", "slope_high", "intercept", "intercept_low",
                  "intercept_high", "r", "r2", "slope_se", "intercept_se", "resid_sd"):
            row[k] = np.nan
    return row


def _file_sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def _versions() -> dict:
    import matplotlib
    import scipy
    import statsmodels
    import yaml
    return {"python": platform.python_version(), "scaling": __version__,
            "numpy": np.__version__, "scipy": scipy.__version__, "pandas": pd.__version__,
            "statsmodels": statsmodels.__version__, "matplotlib": matplotlib.__version__,
            "pyyaml": yaml.__version__}


def analyse(config: Config, *, quiet: bool = True) -> RunResult:
    """Compute every table of a run (reads the data file; writes nothing).

    Parameters
    ----------
    config : Config
    quiet : bool
        No progress bar for the resampling stage (a bar is shown only when
        False, tqdm is installed and stderr is a terminal).

    Raises
    ------
    ScalingError
        For bad data (the message names file, column or row).
    """
    cfg = config
    from . import large as _large   # large-data path and the summary across groups
    reason = _large.use_moments_path(cfg)
    if reason:
        return _large.finish(_large.analyse_moments(cfg, reason))
    base = parse_log_base(cfg.model.log_base)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ScalingWarning)
        data = load_data(cfg.data, log_base=base)
    pts = data.points
    X, Y = pts["log_x"].to_numpy(), pts["log_y"].to_numpy()
    messages: list[str] = []
    notes: list[str] = []
    for w in caught:   # e.g. an exclude value matching nothing: a note of the run, and re-warned
        if issubclass(w.category, ScalingWarning):
            notes.append(str(w.message))
        warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)

    n_dropped = len(data.dropped)
    unit_word = f" ({cfg.data.average_within} means of {data.n_rows_used} rows)" \
        if data.averaged_within else ""
    messages.append(f"Read {data.n_read} data rows; dropped {n_dropped}; "
                    f"fitting {len(pts)} points{unit_word}.")
    if n_dropped:
        notes.append(f"{n_dropped} rows were dropped; see dropped_rows.csv for each reason.")

    moment_methods = [m for m in cfg.model.methods if m in METHODS or m == "deming"]
    row_methods = [m for m in cfg.model.methods if m not in moment_methods]

    rows: list[dict] = []
    line_fits: dict = {}
    pooled_m = moments(X, Y)
    pooled_m = type(pooled_m)(**{k: np.atleast_1d(getattr(pooled_m, k)) for k in
                                ("n", "mean_x", "mean_y", "sxx", "syy", "sxy")})
    ranges = [(_range(pts["x"].to_numpy()), _range(pts["y"].to_numpy()))]
    for method in cfg.model.methods:
        if method in moment_methods:
            rows += _fit_rows("pooled", [""], pooled_m, method, cfg, base, ranges)
        else:
            row, fit = _row_method_fit("pooled", "", method, pts, cfg, base)
            rows.append(row)
            if fit is not None:
                line_fits[("pooled", "", method)] = fit

    group_names: list[str] = []
    gm = None
    if data.has_groups:
        codes, uniques = pd.factorize(pts["group"], sort=True)
        group_names = [str(u) for u in uniques]
        gm = group_moments(X, Y, codes, n_groups=len(group_names))
        granges = []
        for i in range(len(group_names)):
            sel = codes == i
            granges.append((_range(pts["x"].to_numpy()[sel]), _range(pts["y"].to_numpy()[sel])))
        for method in cfg.model.methods:
            if method in moment_methods:
                rows += _fit_rows("group", group_names, gm, method, cfg, base, granges)
                continue
            for g in group_names:
                row, fit = _row_method_fit("group", g, method, pts[pts["group"] == g], cfg, base)
                rows.append(row)
                if fit is not None:
                    line_fits[("group", g, method)] = fit
        small = [g for g, n in zip(group_names, gm.n) if n < MIN_N]
        if small:
            notes.append(f"Group fits skipped for n < {MIN_N}: {', '.join(small)}.")

    # LineFit objects for every estimable moment-method row (tests, predictions, figures).
    group_index = {g: i for i, g in enumerate(group_names)}
    # rows of each group, split in one pass (not one scan of the table per group)
    group_rows = ({str(g): sub for g, sub in pts.groupby("group", sort=True)}
                  if group_names else {})
    for r in rows:
        if r["method"] not in moment_methods:
            continue
        # Notes on estimable fits (unbounded interval, SMA of either sign,
        # exact power law) keep the fit.
        if not np.isfinite(r["slope"]):
            continue
        m = pooled_m[0] if r["scope"] == "pooled" else gm[group_index[r["group"]]]
        line_fits[(r["scope"], r["group"], r["method"])] = _moment_line_fit(
            m, r["method"], cfg, base, x_range=(r["x_min"], r["x_max"]),
            y_range=(r["y_min"], r["y_max"]))

    tables: dict = {}
    point_sets = {("pooled", ""): pts}
    for g in group_names:
        point_sets[("group", g)] = group_rows[g]

    g_messages: list[str] = []
    if data.has_groups:
        group_rows, group_fits, means_points, g_tables, g_messages, g_notes = \
            _group_stage(pts, cfg, base)
        rows += group_rows
        line_fits.update(group_fits)
        tables.update(g_tables)
        notes += g_notes
        if means_points is not None:
            point_sets[("group_means", "")] = means_points

    if not line_fits:
        raise DataError(_nothing_estimable(cfg, pts, rows, n_dropped))

    # Keep line_fits in the order of the fits table.
    order = {(r["scope"], r["group"], r["method"]): i for i, r in enumerate(rows)}
    line_fits = dict(sorted(line_fits.items(), key=lambda kv: order.get(kv[0], len(order))))

    fits = pd.DataFrame([_blank_numbers(r) for r in rows], columns=FIT_COLUMNS)
    slope_tests = _slope_tests(line_fits, cfg)

    # Prediction stage: accuracy and correction factors per fit, then predictions.
    saved, extra_cols = _accuracy_and_factors(line_fits, point_sets)
    fits = _add_columns(fits, extra_cols)
    pred_tables, pred_notes = _predictions(line_fits, saved, cfg)
    tables.update(pred_tables)
    notes += pred_notes
    tables["_saved_fits"] = saved

    pct = f"{100 * cfg.model.confidence:g}%"
    for (scope, group, method), fit in line_fits.items():
        if scope == "pooled":
            how = "" if fit.interval_method == "analytic" else ", bootstrap"
            lam = f" (λ = {fit.lam:.3g})" if fit.lam is not None else ""
            messages.append(
                f"Pooled {method_label(method)}{lam} exponent {fit.slope:.3f} ({pct} CI "
                f"{fit.slope_ci.low:.3f}–{fit.slope_ci.high:.3f}{how}), r² = {fit.r2:.3f}, "
                f"n = {fit.n}.")
            for name, b0 in cfg.exponents.items():
                test = fit.test_slope(b0, hypothesis=name)
                messages.append("  " + describe_test(test, alpha=1 - cfg.model.confidence))

    messages += g_messages

    # Diagnostics stage: is the power law, its error structure and its line right?
    if cfg.diagnostics.enabled:
        d_fits, d_sets, d_note = _large.bounded_diagnostics(line_fits, point_sets, cfg)
        notes += d_note
        d_tables, d_messages = _diagnostics_stage(d_fits, d_sets, cfg, base, data)
        tables.update(d_tables)
        messages += d_messages
    messages += _line_method_messages(line_fits, cfg)

    # Resampling stage: bootstrap intervals and permutation p-values.
    resampling_manifest = _resampling_manifest(cfg, row_methods, data)
    if cfg.resampling.bootstrap:
        boot, b_messages, b_notes = _bootstrap_stage(line_fits, point_sets, cfg, moment_methods,
                                                     quiet=quiet)
        tables["bootstrap"] = boot
        messages += b_messages
        notes += b_notes
    if cfg.resampling.permutations:
        slope_tests, p_messages = _permutation_stage(slope_tests, line_fits, point_sets, cfg)
        messages += p_messages

    manifest = {
        "scaling_version": __version__,
        "created_utc": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "config_file": str(cfg.source) if cfg.source else None,
        "config": _json_safe(cfg.raw),
        "input_file": str(cfg.data.file),
        "input_sha256": _file_sha256(Path(cfg.data.file)),
        "versions": _versions(),
        "resampling": resampling_manifest,
        "diagnostics": {"enabled": cfg.diagnostics.enabled, "alpha": cfg.diagnostics.alpha,
                        "error_structure": cfg.diagnostics.error_structure,
                        "exponent_at": list(_exponent_targets(cfg))},
        "deming_lambda": cfg.model.deming_lambda if "deming" in cfg.model.methods else None,
    }
    return _large.finish(RunResult(config=cfg, data=data, fits=fits, slope_tests=slope_tests,
                     dropped=data.dropped[DROPPED_COLUMNS], line_fits=line_fits,
                     tables=tables, messages=tuple(messages), warnings=tuple(notes),
                     manifest=manifest))


def _nothing_estimable(cfg: Config, pts: pd.DataFrame, rows: list, n_dropped: int) -> str:
    """Why no line at all could be fitted, in one line naming the file and columns."""
    n = len(pts)
    where = f"{cfg.data.file}: no line can be fitted"
    if n < MIN_N:
        dropped = ""
        if n_dropped:
            dropped = f"; {n_dropped} rows were dropped ('scaling check' lists why)"
        return (f"{where}: only {n} usable point{'s' if n != 1 else ''} "
                f"(a line needs at least {MIN_N}){dropped}")
    for role, column in (("x", cfg.data.x), ("y", cfg.data.y)):
        logs = pts[f"log_{role}"].to_numpy()
        if np.ptp(logs) <= 1e-12 * (np.abs(logs).max() + 1.0):
            value = float(pts[role].iloc[0])
            why = "no slope to estimate" if role == "x" else "no relationship to fit"
            return (f"{where}: {role} ({column}) has the same value ({value:g}) in all "
                    f"{n} points, so there is {why}")
    notes = sorted({str(r["note"]) for r in rows if r["scope"] == "pooled" and r["note"]})
    return f"{where}: " + ("; ".join(notes) if notes else "no fit was estimable")


def _robust_n_boot(cfg: Config) -> int:
    """Resamples behind the robust lines' intervals: resampling.bootstrap, else 999."""
    return cfg.resampling.bootstrap or 999


def _resampling_manifest(cfg: Config, row_methods: list, data) -> dict:
    rs = cfg.resampling
    return {
        "bootstrap": rs.bootstrap, "interval": rs.interval, "permutations": rs.permutations,
        "seed": rs.seed,
        "stratified_by_group": bool(rs.bootstrap and data.has_groups),
        "robust_methods_n_boot": _robust_n_boot(cfg) if row_methods else None,
        "seeding": ("every resampling call (bootstrap_lines, each robust fit, each "
                    "permutation test) is seeded with numpy.random.default_rng(seed)"),
    }


def _moment_line_fit(m, method: str, cfg: Config, base, *, x_range, y_range):
    if method == "deming":
        from .robust import deming_from_moments
        return deming_from_moments(m, cfg.model.deming_lambda,
                                   confidence=cfg.model.confidence, log_base=base,
                                   x_range=x_range, y_range=y_range)
    return line_fit_from_moments(m, method, confidence=cfg.model.confidence, log_base=base,
                                 x_range=x_range, y_range=y_range)


def _row_method_fit(scope: str, group: str, method: str, points: pd.DataFrame,
                    cfg: Config, base):
    """fits.csv row and LineFit (None if not estimable) of a robust line."""
    from .robust import ROW_METHODS
    x, y = points["x"].to_numpy(), points["y"].to_numpy()
    n = len(points)
    rng_x = _range(x) if n else (np.nan, np.nan)
    rng_y = _range(y) if n else (np.nan, np.nan)
    fit, note = None, ""
    if n < MIN_N:
        note = f"n = {n} < {MIN_N}: too few points to fit a line"
    else:
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                fit = ROW_METHODS[method](x, y, confidence=cfg.model.confidence,
                                          log_base=base, n_boot=_robust_n_boot(cfg),
                                          seed=cfg.resampling.seed)
        except DataError as exc:
            note = str(exc).replace("x and y need", "needs")
        if fit is not None and not np.isfinite(fit.slope):
            note, fit = fit.note or "the line could not be fitted", None
    if fit is not None:
        row = _fit_row(scope, group, fit, (rng_x, rng_y))
        return row, fit
    row = {c: np.nan for c in FIT_COLUMNS}
    row.update({"scope": scope, "group": group, "method": method, "n": n,
                "log_base": base_label(base), "confidence": cfg.model.confidence,
                "note": note, "x_min": rng_x[0], "x_max": rng_x[1], "y_min": rng_y[0],
                "y_max": rng_y[1], "interval_method": "bootstrap_percentile"})
    return row, None


def _fit_row(scope: str, group: str, fit, ranges) -> dict:
    (x_lo, x_hi), (y_lo, y_hi) = ranges
    rec = fit.to_record()
    rec.update({"scope": scope, "group": group, "n": fit.n,
                "x_min": x_lo, "x_max": x_hi, "y_min": y_lo, "y_max": y_hi})
    return rec


def _group_stage(pts: pd.DataFrame, cfg: Config, base):
    """Group means, lines through the means, and comparisons of groups."""
    from .groups import (compare_groups, compared_groups, excluded_text, fit_group_means,
                         group_means)
    rows, fits, g_tables, messages, notes = [], {}, {}, [], []
    X, Y, labels = pts["log_x"].to_numpy(), pts["log_y"].to_numpy(), pts["group"].to_numpy()
    means = group_means(X, Y, labels, n_rows=pts["n_rows"].to_numpy())
    frame = means.to_frame()
    g_tables["group_means"] = frame
    means_points = None
    if cfg.groups.fit_group_means:
        # The line through the means uses the groups the comparisons use (OLS rule for
        # the methods compare_groups does not cover; fit_group_means applies each
        # method's own rule and names the groups it leaves out in its note).
        keep, left_out = compared_groups(X, Y, labels, method="ols", min_n=MIN_N)
        frame = frame[frame["group"].isin(keep)].reset_index(drop=True)
        left_note = (f"groups left out of the line through the means: "
                     f"{excluded_text(left_out)}") if left_out else ""
        if left_out:
            notes.append(f"Line through the group means: {len(left_out)} group(s) left out, "
                         f"as in the comparisons: {excluded_text(left_out)}.")
        mx, my = frame["mean_log_x"].to_numpy(), frame["mean_log_y"].to_numpy()
        means_points = pd.DataFrame({"group": frame["group"], "log_x": mx, "log_y": my,
                                     "x": np.power(base, mx), "y": np.power(base, my)})
        ranges = ((_range(means_points["x"].to_numpy()), _range(means_points["y"].to_numpy()))
                  if len(means_points) else ((np.nan, np.nan), (np.nan, np.nan)))
        for method in cfg.model.methods:
            if method not in METHODS and method != "deming":
                row, fit = _row_method_fit("group_means", "", method, means_points, cfg, base)
                if fit is not None and left_note:
                    fit = _with_note(fit, left_note)
                    row["note"] = left_note
                rows.append(row)
                if fit is not None:
                    fits[("group_means", "", method)] = fit
                continue
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                if method == "deming":
                    fit = _moment_line_fit(moments(mx, my), method, cfg, base,
                                           x_range=None, y_range=None)
                    if left_note and fit.estimable:
                        fit = _with_note(fit, f"{fit.note}; {left_note}" if fit.note
                                         else left_note)
                else:
                    fit = fit_group_means(X, Y, labels, method=method,
                                          confidence=cfg.model.confidence, log_base=base,
                                          weighted=cfg.groups.weight_means)
            fit = _with_ranges(fit, ranges)
            if fit.note and len(frame) < MIN_N:
                fit = _with_note(fit, f"{len(frame)} groups < {MIN_N}: no line through "
                                      "the group means"
                                      + (f"; {left_note}" if left_note else ""))
            rows.append(_fit_row("group_means", "", fit, ranges))
            if fit.estimable:
                fits[("group_means", "", method)] = fit
    if cfg.groups.compare:
        test_frames, pair_frames = [], []
        data = pts[["x", "y", "group"]] if base is not None else \
            pts.assign(x=pts["log_x"], y=pts["log_y"])[["x", "y", "group"]]
        uncompared = [m for m in cfg.model.methods if m not in METHODS]
        for method in cfg.model.methods:
            if method not in METHODS:
                continue
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                comp = compare_groups(data, "x", "y", "group", method=method,
                                      confidence=cfg.model.confidence, log_base=base,
                                      pairwise_max=cfg.groups.pairwise_max)
            summary = comp.summary().replace(f"{len(comp.groups)} group groups",
                                             f"{len(comp.groups)} {cfg.data.group} groups")
            summary = summary.replace(" group groups", f" {cfg.data.group} groups")
            summary = summary.replace("exceed pairwise_max", "exceed groups.pairwise_max")
            messages.append(summary)
            if comp.pairwise_skipped:
                notes.append(f"{method_label(method)}: pairwise comparisons skipped: "
                             f"{len(comp.groups)} groups exceed groups.pairwise_max = "
                             f"{comp.pairwise_max}.")
            if comp.compared:
                test_frames.append(comp.to_frame())
                pair_frames.append(comp.pairwise_frame())
        if uncompared:
            messages.append(
                "Group comparisons are available for OLS, SMA and MA; none was made for "
                f"{' or '.join(method_label(m) for m in uncompared)}.")
        from .groups import _PAIR_COLUMNS, _TEST_COLUMNS
        g_tables["group_tests"] = pd.concat(test_frames, ignore_index=True) if test_frames \
            else pd.DataFrame(columns=list(_TEST_COLUMNS))
        pairs = [f for f in pair_frames if len(f)]
        g_tables["pairwise_tests"] = pd.concat(pairs, ignore_index=True) if pairs \
            else pd.DataFrame(columns=list(_PAIR_COLUMNS))
    return rows, fits, means_points, g_tables, messages, notes


def _with_ranges(fit, ranges):
    from dataclasses import replace
    return replace(fit, x_range=ranges[0], y_range=ranges[1])


def _with_note(fit, note):
    from dataclasses import replace
    return replace(fit, note=note)


def _accuracy_and_factors(line_fits: dict, point_sets: dict):
    """Saved-fit dicts (with smearing and ratio factors) and accuracy columns per fit."""
    from .predict import accuracy, data_factors, fit_to_dict
    saved, extra = {}, {}
    for key, fit in line_fits.items():
        scope, group, _ = key
        sel = point_sets.get((scope, group))
        if sel is None or len(sel) < 3:
            continue
        x, y = sel["x"].to_numpy(), sel["y"].to_numpy()
        factors = data_factors(fit, x, y)
        acc = accuracy(fit, x, y)
        d = fit_to_dict(fit, smearing_factor=float(factors["smearing"]),
                        ratio_factor=float(factors["ratio"]))
        d.update({"scope": scope, "group": group})
        saved[key] = d
        extra[key] = {"see": acc.see, "percent_see": acc.percent_see,
                      "percent_pe": acc.percent_pe,
                      "smearing_factor": float(factors["smearing"]),
                      "parametric_factor": float(factors["parametric"]),
                      "ratio_factor": float(factors["ratio"])}
    return saved, extra


def _add_columns(fits: pd.DataFrame, extra: dict) -> pd.DataFrame:
    cols = ["see", "percent_see", "percent_pe", "smearing_factor", "parametric_factor",
            "ratio_factor"]
    values = {c: [] for c in cols}
    for r in fits.itertuples(index=False):
        row = extra.get((r.scope, r.group, r.method), {})
        for c in cols:
            values[c].append(row.get(c, np.nan))
    out = fits.copy()
    for c in cols:
        out[c] = values[c]
    return out


PREDICTION_COLUMNS = ["scope", "group", "method", "x", "y", "y_low", "y_high", "interval",
                      "correction", "extrapolated", "confidence"]
INVERSE_COLUMNS = ["scope", "group", "method", "y", "x", "x_low", "x_high", "interval",
                   "extrapolated", "confidence"]


def _tagged(prediction, scope: str, group: str, method: str) -> pd.DataFrame:
    """A prediction's table with the columns that say which fit made it."""
    f = prediction.to_frame()
    f.insert(0, "scope", scope)
    f.insert(1, "group", group)
    f["method"] = method
    f["confidence"] = prediction.confidence
    return f


def _predictions(line_fits: dict, saved: dict, cfg: Config):
    """predictions.csv (and inverse_predictions.csv) for the config's values."""
    from .predict import fit_from_dict, inverse_predict, predict_from_dict
    pc = cfg.prediction
    rows, inv_rows, notes, unbounded = [], [], [], []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for key, d in saved.items():
            scope, group, method = key
            if pc.x:
                p = predict_from_dict(d, list(pc.x), correction=pc.correction,
                                      interval=pc.interval)
                rows.append(_tagged(p, scope, group, method))
            if pc.y:
                q = inverse_predict(fit_from_dict(d), list(pc.y), interval=pc.interval)
                inv_rows.append(_tagged(q, scope, group, method))
                if not np.all(q.bounded):
                    unbounded.append(_scope_words(scope, group) + " " + method_label(method))
    tables = {}
    if pc.x:
        table = pd.concat(rows, ignore_index=True)[PREDICTION_COLUMNS] if rows else \
            pd.DataFrame(columns=PREDICTION_COLUMNS)
        tables["predictions"] = table
        n_ext = int(table["extrapolated"].sum()) if len(table) else 0
        if n_ext:
            ext = table[table["extrapolated"]]
            by_scope = ext.groupby("scope", sort=False)["x"].agg(lambda v: sorted(set(v)))
            parts = []
            for scope, xs in by_scope.items():
                what = {"pooled": "pooled fits", "group": "group fits",
                        "group_means": "lines through group means"}.get(scope, scope)
                parts.append(f"{what}: x = {', '.join(f'{v:g}' for v in xs)}")
            notes.append(f"{n_ext} of {len(table)} predictions lie outside the x range of the "
                         f"fit that made them ({'; '.join(parts)}); they are extrapolations, "
                         "flagged in predictions.csv; treat them with caution.")
    if pc.y:
        table = pd.concat(inv_rows, ignore_index=True)[INVERSE_COLUMNS] if inv_rows else \
            pd.DataFrame(columns=INVERSE_COLUMNS)
        tables["inverse_predictions"] = table
        n_ext = int(table["extrapolated"].sum()) if len(table) else 0
        if n_ext:
            notes.append(f"{n_ext} inverse predictions use y outside the fitted y range "
                         "(extrapolations).")
        if unbounded:
            notes.append(_unbounded_inverse_note(unbounded, pc.interval, cfg.model.confidence))
    return tables, notes


def _unbounded_inverse_note(fits: list, interval: str, confidence: float) -> str:
    """The note for inverse predictions whose interval has no finite bounds."""
    return (f"Inverse predictions ({', '.join(fits)}): the {100 * confidence:g}% {interval} "
            "interval for x is unbounded, because the slope does not differ from 0 at this "
            "level; x_low and x_high are blank in inverse_predictions.csv, and y says little "
            "about x here.")


def _slope_tests(line_fits: dict, cfg: Config) -> pd.DataFrame:
    rows = []
    for (scope, group, method), fit in line_fits.items():
        for name, b0 in cfg.exponents.items():
            t = fit.test_slope(b0, hypothesis=name)
            rows.append({"scope": scope, "group": group, "method": method,
                         "hypothesis": name, "exponent": b0, "estimate": fit.slope,
                         "statistic": t.statistic, "statistic_type": t.statistic_type,
                         "df": t.df, "p_value": t.p_value})
    return pd.DataFrame(rows, columns=SLOPE_TEST_COLUMNS)


# --------------------------------------------------------------------------
# diagnostics stage


def _exponent_targets(cfg: Config) -> tuple:
    return tuple(cfg.diagnostics.exponent_at) or tuple(cfg.exponents.values())


def _scope_words(scope: str, group: str) -> str:
    return {"pooled": "pooled", "group_means": "group-means"}.get(scope, f"group {group}")


def _diag_method(methods) -> str:
    """The method whose residuals the plain-language verdicts read: OLS if fitted."""
    return "ols" if "ols" in methods else methods[0]


def _diagnostics_stage(line_fits: dict, point_sets: dict, cfg: Config, base, data):
    """diagnostics, influential_rows, curvature and error_structure tables and verdicts."""
    from .diagnostics import compare_error_structure, diagnose
    from .lines import p_text
    dc = cfg.diagnostics
    targets = _exponent_targets(cfg)
    diag_frames, infl_rows, curv_rows, es_rows = [], [], [], []
    results: dict = {}
    for (scope, group, method), fit in line_fits.items():
        sel = point_sets.get((scope, group))
        if sel is None or len(sel) != fit.n:
            continue
        if scope == "group_means":
            rows = np.arange(len(sel))
            labels = {i: str(g) for i, g in enumerate(sel["group"])}
        else:
            rows = sel["row"].to_numpy()
            labels = dict(zip(rows.tolist(), sel["unit"].astype(str))) if "unit" in sel \
                else {}
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                d = diagnose(fit, sel["log_x"].to_numpy(), sel["log_y"].to_numpy(), rows=rows,
                             exponent_targets=targets, alpha=dc.alpha)
        except ScalingError:
            continue   # too few points (n < 4) or nothing to diagnose
        results[(scope, group, method)] = d
        frame = d.to_frame()
        frame.insert(0, "scope", scope)
        frame.insert(1, "group", group)
        diag_frames.append(frame)
        for rec in d.influence_frame().to_dict(orient="records"):
            row = int(rec["row"])
            infl_rows.append({"scope": scope, "group": group, "method": method,
                              "row": None if scope == "group_means" else row,
                              "label": labels.get(row, ""),
                              "cooks_distance": rec["cooks_distance"]})
        if (scope, group) not in {(r["scope"], r["group"]) for r in curv_rows}:
            c = d.curvature
            x = sel["log_x"].to_numpy()
            e_lo, e_hi = c.local_exponent([x.min(), x.max()])
            common = {"scope": scope, "group": group, "n": d.n, "quadratic": c.quadratic,
                      "quadratic_se": c.quadratic_se, "statistic": c.statistic, "df": c.df,
                      "p_value": c.p_value, "exponent_at_x_min": e_lo,
                      "exponent_at_x_max": e_hi}
            if c.crossings:
                for target, xs, inside in c.crossings:
                    curv_rows.append({**common, "exponent": target, "x_at_exponent": xs,
                                      "within_data": inside})
            else:
                curv_rows.append({**common, "exponent": np.nan, "x_at_exponent": np.nan,
                                  "within_data": None})
    es_results: dict = {}
    if dc.error_structure:
        for (scope, group), sel in point_sets.items():
            if scope == "group_means":
                continue
            try:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    es = compare_error_structure(sel["x"].to_numpy(), sel["y"].to_numpy())
            except ScalingError:
                continue
            es_results[(scope, group)] = es
            for m in (es.additive, es.multiplicative):
                es_rows.append({"scope": scope, "group": group, "model": m.name, "a": m.a,
                                "b": m.b, "sigma": m.sigma, "loglik": m.log_likelihood,
                                "aicc": m.aicc, "delta_aicc": es.delta_aicc,
                                "preferred": es.preferred})

    tables = {
        "diagnostics": pd.concat(diag_frames, ignore_index=True)[DIAGNOSTIC_COLUMNS]
        if diag_frames else pd.DataFrame(columns=DIAGNOSTIC_COLUMNS),
        "influential_rows": pd.DataFrame(infl_rows, columns=INFLUENCE_COLUMNS),
        "curvature": pd.DataFrame(curv_rows, columns=CURVATURE_COLUMNS),
    }
    if dc.error_structure:
        tables["error_structure"] = pd.DataFrame(es_rows, columns=ERROR_STRUCTURE_COLUMNS)

    # ---- plain-language verdicts
    messages = []
    methods = [m for m in cfg.model.methods]
    key_method = _diag_method(methods)
    pooled = results.get(("pooled", "", key_method)) or next(
        (d for (s, _, _), d in results.items() if s == "pooled"), None)
    group_word = f"{cfg.data.group} groups" if cfg.data.group else "groups"
    if pooled is None:
        messages.append("Diagnostics: too few points (fewer than 4) to check the pooled line.")
        return tables, messages
    curv = pooled.check("curvature")
    if curv.flagged:
        c = pooled.curvature
        xs = [f"{t:g} at x ≈ {x:.3g}" for t, x, inside in c.crossings if inside]
        where = (f"; the local exponent reaches {', '.join(xs)}" if xs else "")
        messages.append(f"Power law: NOT a straight line on log-log scales — {curv.verdict}"
                        f"{where}. One exponent summarises these data only roughly; see "
                        "curvature.csv.")
    else:
        messages.append(f"Power law: {curv.verdict}, so a single exponent describes the data.")
    g_curved = [(g, d.check("curvature").p_value) for (s, g, m), d in results.items()
                if s == "group" and m == pooled.method and d.check("curvature").flagged]
    n_groups = sum(1 for (s, g, m) in results if s == "group" and m == pooled.method)
    if n_groups:
        if g_curved:
            listed = ", ".join(f"{g}, {p_text(p)}" for g, p in g_curved)
            messages.append(f"  Within {group_word}: curvature in {len(g_curved)} of {n_groups}: "
                            f"{listed} (each tested at α = {dc.alpha:g}; by chance alone about "
                            f"{dc.alpha * n_groups:.2g} of {n_groups} would be flagged).")
        else:
            messages.append(f"  Within {group_word}: no detectable curvature in any of the "
                            f"{n_groups}.")
    label = method_label(pooled.method)
    normal, spread = pooled.check("normality"), pooled.check("constant_variance")
    messages.append(f"Residuals of the pooled {label} line: {normal.verdict}; {spread.verdict}.")
    infl = pooled.check("influence")
    if infl.flagged:
        rows = list(pooled.influential_rows)
        sel = point_sets[("pooled", "")]
        unit = dict(zip(sel["row"].tolist(), sel["unit"].astype(str))) if "unit" in sel else {}
        shown = ", ".join(f"row {r}" + (f" ({unit[r]})" if r in unit else "") for r in rows[:4])
        more = f" and {len(rows) - 4} more" if len(rows) > 4 else ""
        messages.append(f"Influence: {len(rows)} point(s) pull the pooled line more than "
                        f"usual (Cook's distance > 4/n): {shown}{more}. Such flags are common "
                        "in clean data; check them in influential_rows.csv"
                        + ("." if any(m in _ROBUST for m in methods) else
                           ", or add a robust line (sma_robust, theil_sen) to model.methods "
                           "to see whether the exponent moves."))
    else:
        messages.append("Influence: no point pulls the pooled line unduly "
                        "(all Cook's distances ≤ 4/n).")
    es = es_results.get(("pooled", ""))
    if es is not None:
        messages.append("Error structure: " + _error_structure_words(es))
        g_pref = [(g, e.preferred) for (s, g), e in es_results.items() if s == "group"]
        if g_pref:
            same = [g for g, p in g_pref if p == es.preferred]
            other = [f"{g}: {p if p != 'neither' else 'no clear preference'}"
                     for g, p in g_pref if p != es.preferred]
            word = {"neither": "no clear preference"}.get(es.preferred, es.preferred)
            text = f"  Within {group_word}: {word} also in {len(same)} of {len(g_pref)}"
            if other:
                text += f" ({'; '.join(other)})"
            messages.append(text + (" — small groups rarely decide this." if other else "."))
    return tables, messages


_ROBUST = ("theil_sen", "siegel", "sma_robust", "ma_robust")


def _error_structure_words(es) -> str:
    d = es.delta_aicc
    if es.preferred == "multiplicative" and np.isfinite(d):
        return (f"multiplicative (lognormal) error is supported over additive "
                f"(ΔAICc = {d:.1f}), so fitting on logs is appropriate.")
    if es.preferred == "multiplicative":
        return "only the multiplicative (log-scale) model could be fitted."
    if es.preferred == "additive":
        return (f"additive (normal) error on the arithmetic scale is supported over "
                f"multiplicative (ΔAICc = {-d:.1f}): the exponent from a nonlinear fit "
                f"({es.additive.b:.3g}) may be more appropriate than the log-scale one "
                f"({es.multiplicative.b:.3g}); see error_structure.csv.")
    return (f"the data do not favour multiplicative or additive error (ΔAICc = {d:.1f}, "
            f"|ΔAICc| < 2); exponents {es.multiplicative.b:.3g} (log scale) and "
            f"{es.additive.b:.3g} (nonlinear) — consider reporting both.")


def _line_method_messages(line_fits: dict, cfg: Config) -> list:
    """Does the choice of line matter for these data?  One or two plain sentences."""
    pooled = {m: f for (s, g, m), f in line_fits.items() if s == "pooled"}
    classic = [m for m in ("ols", "sma", "ma") if m in pooled]
    out = []
    alpha = 1 - cfg.model.confidence
    if len(classic) >= 2:
        fits = [pooled[m] for m in classic]
        slopes = [f.slope for f in fits]
        spread = max(slopes) - min(slopes)
        widths = [f.slope_ci.high - f.slope_ci.low for f in fits
                  if np.isfinite(f.slope_ci.high - f.slope_ci.low)]
        width = min(widths) if widths else np.nan
        r2 = fits[0].r2
        listed = ", ".join(f"{method_label(m)} {pooled[m].slope:.3f}" for m in classic)
        ratio = spread / width if np.isfinite(width) and width > 0 else np.inf
        if ratio < 0.25:
            verdict = (f"they differ by {spread:.3f}, under a quarter of the narrowest "
                       f"{100 * cfg.model.confidence:g}% CI ({width:.3f}), so the choice of "
                       "line does not change the conclusions")
        else:
            verdict = (f"they differ by {spread:.3f}, {ratio:.1f} times the narrowest CI "
                       f"width ({width:.3f}): the choice matters — use OLS to predict y "
                       "from x, SMA or MA to describe how y scales with x")
        out.append(f"Line method: r² = {r2:.3f} ({listed}); {verdict}.")
        disagree = []
        for name, b0 in cfg.exponents.items():
            verdicts = {m: pooled[m].test_slope(b0).p_value < alpha for m in classic}
            if len(set(verdicts.values())) > 1:
                rej = [method_label(m) for m, v in verdicts.items() if v]
                acc = [method_label(m) for m, v in verdicts.items() if not v]
                disagree.append(f"{name} ({'/'.join(rej)} reject it, {'/'.join(acc)} do not)")
        if disagree:
            out.append("  The lines disagree on " + "; ".join(disagree) + ".")
    deming = pooled.get("deming")
    if deming is not None:
        near = ""
        if "ols" in pooled and "ma" in pooled:
            closer = "OLS" if abs(deming.slope - pooled["ols"].slope) <= \
                abs(deming.slope - pooled["ma"].slope) else "MA"
            near = (f"; it lies between MA (λ = 1) and OLS (λ → ∞), here closer to {closer}"
                    + (", as most error is in y" if closer == "OLS" else ""))
        out.append(f"  Deming line with λ = {deming.lam:.3g} (error variance of log y over log x):"
                   f" exponent {deming.slope:.3f} ({deming.slope_ci.low:.3f}–"
                   f"{deming.slope_ci.high:.3f}){near}.")
    elif classic:
        out.append("  If x is measured with error, the OLS exponent is biased towards 0 "
                   "(regression dilution) and MA assumes equal error variances on both log "
                   "scales; add deming to model.methods with model.deming_lambda (or "
                   "model.error_variances) to fit the line for a stated error ratio λ.")
    robust = [m for m in ("theil_sen", "siegel", "sma_robust", "ma_robust") if m in pooled]
    for m in robust:
        ref = {"theil_sen": "ols", "siegel": "ols", "sma_robust": "sma",
               "ma_robust": "ma"}[m]
        classic_fit = pooled.get(ref)
        f = pooled[m]
        if classic_fit is None:
            continue
        diff = abs(f.slope - classic_fit.slope)
        half = (classic_fit.slope_ci.high - classic_fit.slope_ci.low) / 2
        if diff < half / 2:
            judged = "so outlying points do not drive the classical line"
        else:
            judged = ("a difference as large as the CI half-width: a few points may drive "
                      "the classical line (see influential_rows.csv)")
        out.append(f"  Robust check: {method_label(m)} exponent {f.slope:.3f} vs "
                   f"{method_label(ref)} {classic_fit.slope:.3f}, {judged}.")
    return out


# --------------------------------------------------------------------------
# resampling stage


def _bootstrap_stage(line_fits: dict, point_sets: dict, cfg: Config, moment_methods: list,
                     *, quiet: bool):
    """bootstrap.csv: bootstrap intervals of every moment-method fit."""
    from .resample import bootstrap_lines
    rs = cfg.resampling
    messages, notes = [], []
    frame_rows = []
    if not moment_methods:
        return pd.DataFrame(columns=BOOTSTRAP_COLUMNS), messages, notes
    pts = point_sets[("pooled", "")]
    X, Y = pts["log_x"].to_numpy(), pts["log_y"].to_numpy()
    kwargs = dict(methods=tuple(moment_methods), n_boot=rs.bootstrap,
                  confidence=cfg.model.confidence, lam=cfg.model.deming_lambda,
                  seed=rs.seed, quiet=quiet)
    results = []   # (scope override or None, BootstrapResult, keep scopes)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if len(pts) >= 3:
            groups = pts["group"].astype(str).to_numpy() if "group" in pts else None
            sizes = pd.Series(groups).value_counts() if groups is not None else None
            if groups is None or sizes.min() >= 3:
                results.append((None, bootstrap_lines(X, Y, groups=groups, **kwargs)))
            else:
                results.append((None, bootstrap_lines(X, Y, **kwargs)))
                ok = np.isin(groups, sizes.index[sizes >= 3])
                if ok.any():
                    res = bootstrap_lines(X[ok], Y[ok], groups=groups[ok], **kwargs)
                    results.append(("groups_only", res))
                notes.append("Bootstrap: groups with fewer than 3 points are not resampled; "
                             "the pooled bootstrap is not stratified by group.")
        means = point_sets.get(("group_means", ""))
        if means is not None and len(means) >= 3:
            res = bootstrap_lines(means["log_x"].to_numpy(), means["log_y"].to_numpy(),
                                  **kwargs)
            results.append(("group_means", res))
    for override, res in results:
        for item in res.intervals:
            scope, group = item.scope, "" if item.group is None else str(item.group)
            if override == "group_means":
                scope = "group_means"
            elif override == "groups_only" and scope == "pooled":
                continue
            ci = item.bca if rs.interval == "bca" else item.percentile
            frame_rows.append({"scope": scope, "group": group, "method": item.method,
                               "parameter": item.parameter, "estimate": item.estimate,
                               "low": ci.low, "high": ci.high, "interval": rs.interval,
                               "n_boot": res.n_boot, "seed": rs.seed, "boot_se": item.se,
                               "n_valid": item.n_valid, "confidence": res.confidence})
    table = pd.DataFrame(frame_rows, columns=BOOTSTRAP_COLUMNS)
    # keep only lines that were fitted (estimable) and order like the fits
    keep = np.array([(r.scope, r.group, r.method) in line_fits for r in table.itertuples()],
                    dtype=bool)   # a boolean array, also when empty (a [] selects columns)
    table = table[keep].reset_index(drop=True)

    pooled = table[(table["scope"] == "pooled") & (table["parameter"] == "slope")]
    if len(pooled):
        kind = "BCa" if rs.interval == "bca" else "percentile"
        strat = f" within {cfg.data.group} groups" if "group" in pts else ""
        parts = []
        for r in pooled.itertuples():
            fit = line_fits[("pooled", "", r.method)]
            parts.append(f"{method_label(r.method)} {r.low:.3f}–{r.high:.3f} (analytic "
                         f"{fit.slope_ci.low:.3f}–{fit.slope_ci.high:.3f})")
        messages.append(f"Bootstrap ({rs.bootstrap} resamples{strat}, {kind}, seed {rs.seed}): "
                        f"pooled exponent {100 * cfg.model.confidence:g}% CIs "
                        + "; ".join(parts) + ". Every fit's bootstrap interval is in "
                        "bootstrap.csv.")
    if means is not None and len(means) < 10 and (table["scope"] == "group_means").any():
        notes.append(f"The bootstrap of the line through the {len(means)} group means "
                     "resamples the groups themselves; with fewer than 10 groups its "
                     "interval is rough.")
    return table, messages, notes


def _permutation_stage(slope_tests: pd.DataFrame, line_fits: dict, point_sets: dict,
                       cfg: Config):
    """Add p_permutation and n_perm to the slope tests; one plain sentence."""
    from .lines import p_text
    from .resample import permutation_slope_test
    rs = cfg.resampling
    out = slope_tests.copy()
    p_perm = []
    for r in out.itertuples(index=False):
        sel = point_sets.get((r.scope, r.group))
        fit = line_fits.get((r.scope, r.group, r.method))
        if sel is None or fit is None or len(sel) < 3:
            p_perm.append(np.nan)
            continue
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            test = permutation_slope_test(
                sel["log_x"].to_numpy(), sel["log_y"].to_numpy(), float(r.exponent),
                method=r.method, n_perm=rs.permutations,
                lam=cfg.model.deming_lambda, seed=rs.seed)
        p_perm.append(test.p_value)
    out["p_permutation"] = p_perm
    out["n_perm"] = rs.permutations
    messages = []
    alpha = 1 - cfg.model.confidence
    valid = out.dropna(subset=["p_value", "p_permutation"])
    valid = valid[valid["statistic_type"] == "t"]
    if len(valid):
        lo = np.minimum(valid["p_value"], valid["p_permutation"])
        hi = np.maximum(valid["p_value"], valid["p_permutation"])
        clash = valid[(lo < alpha) & (hi > 2 * alpha)]
        diff = float(np.max(np.abs(valid["p_value"] - valid["p_permutation"])))
        text = (f"Permutation tests ({rs.permutations} permutations per test, seed {rs.seed}) "
                f"against the t-test p-values: largest difference {diff:.3f}")
        if len(clash):
            shown = "; ".join(
                f"{_scope_words(f.scope, f.group)} {method_label(f.method)} vs {f.hypothesis}: "
                f"{p_text(f.p_value)} (t), {p_text(f.p_permutation)} (permutation)"
                for f in clash.head(3).itertuples())
            more = f" and {len(clash) - 3} more" if len(clash) > 3 else ""
            text += (f"; {len(clash)} test(s) disagree ({shown}{more}). There the t-test "
                     "leans on normal errors: prefer the permutation p-value.")
        else:
            text += (f"; no test is significant by one (p < {alpha:g}) and clearly not by the "
                     f"other (p > {2 * alpha:g}), so the t-tests' reliance on normal errors does "
                     "not matter here.")
        messages.append(text + " p_permutation is in slope_tests.csv.")
    return out, messages


# --------------------------------------------------------------------------
# writing


def _json_safe(obj):
    if isinstance(obj, dict):
        return {str(k): _json_safe(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_json_safe(v) for v in obj]
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
        return _json_safe(obj.tolist())
    if obj is pd.NA or obj is None:
        return None
    return obj


def _records(frame: pd.DataFrame) -> list:
    return _json_safe(frame.astype(object).where(frame.notna(), None).to_dict(orient="records"))


def results_document(result: RunResult) -> dict:
    """The content of ``results.json``."""
    cfg = result.config
    doc = {
        "title": cfg.title,
        "fits": _records(result.fits),
        "slope_tests": _records(result.slope_tests),
        "dropped_rows": _records(result.dropped),
        "messages": list(result.messages),
        "warnings": list(result.warnings),
        "caution": CAUTION,
        "saved_fits": list(result.tables.get("_saved_fits", {}).values()),
        "data_summary": {
            "rows_read": result.data.n_read, "rows_dropped": len(result.dropped),
            "points_fitted": len(result.data.points),
            "averaged_within": result.data.averaged_within,
            "units": result.data.units, "x": cfg.data.x, "y": cfg.data.y,
            "group": cfg.data.group,
        },
        "manifest": result.manifest,
    }
    for name, table in result.tables.items():
        if isinstance(table, pd.DataFrame) and not name.startswith("_"):
            doc[name] = _records(table)
    return _json_safe(doc)


def _check_out_dir(out_dir: Path, force: bool) -> None:
    if out_dir.exists() and not out_dir.is_dir():
        raise OutputError(f"{out_dir}: output path exists and is not a folder")
    if out_dir.exists() and any(out_dir.iterdir()) and not force:
        raise OutputError(f"{out_dir}: output folder is not empty; use --force to replace "
                          "the files scaling writes there (other files are left alone)")


def write_outputs(result: RunResult, out_dir: Path | str, *, force: bool = False,
                  writers: list | None = None) -> RunResult:
    """Write the output folder atomically and return the result with ``files`` set.

    Files are built in a temporary folder beside ``out_dir`` and moved into
    place only when all of them were written, so a failure leaves
    ``out_dir`` as it was.  A non-empty ``out_dir`` is refused unless
    ``force``; with ``force`` only the files written here are replaced.
    """
    out_dir = Path(out_dir)
    inputs = [Path(result.config.data.file)] + \
        ([Path(result.config.source)] if result.config.source else [])
    _check_out_dir(out_dir, force)
    out_dir.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=".scaling-tmp-", dir=out_dir.parent))
    try:
        written, result = _write_all(result, tmp, writers or [])
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
    return _replace(result, out_dir=out_dir, files=files)


def _replace(result: RunResult, **changes) -> RunResult:
    from dataclasses import replace
    return replace(result, **changes)


def _write_csv(frame: pd.DataFrame, path: Path) -> None:
    frame.to_csv(path, index=False, lineterminator="\n")


def _write_all(result: RunResult, folder: Path, writers: list) -> tuple:
    """Write every file into ``folder``; return (relative paths, result with figure notes)."""
    written: list[Path] = []

    def csv(name, frame):
        _write_csv(frame, folder / name)
        written.append(Path(name))

    csv("fits.csv", result.fits)
    csv("slope_tests.csv", result.slope_tests)
    csv("dropped_rows.csv", result.dropped)
    for name, table in result.tables.items():
        if isinstance(table, pd.DataFrame) and not name.startswith("_"):
            csv(f"{name}.csv", table)
    # Figures and report are optional stages; each returns relative paths.
    from . import figures as _figures
    from .errors import FigureWarning
    (folder / "figures").mkdir(exist_ok=True)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", FigureWarning)
        written += _figures.write_figures(result, folder)
    skipped = [str(w.message) for w in caught if issubclass(w.category, FigureWarning)]
    if skipped:   # a skipped figure is a note of the run: terminal, report and results.json
        result = _replace(result, warnings=tuple(result.warnings) + tuple(skipped))
    try:
        from . import report as _report
    except ImportError:  # report stage not present
        _report = None
    if _report is not None and hasattr(_report, "write_report"):
        written += _report.write_report(result, folder, written)
    for writer in writers:
        written += writer(result, folder)
    doc = results_document(result)
    doc["files"] = sorted(str(p) for p in written) + ["results.json"]
    with open(folder / "results.json", "w", encoding="utf-8") as fh:
        json.dump(doc, fh, indent=2, ensure_ascii=False, allow_nan=False)
    written.append(Path("results.json"))
    return written, result


def run_config(config, *, out: Path | str | None = None, force: bool = False,
               write: bool = True, quiet: bool = False) -> RunResult:
    """Run a config file (or a :class:`Config`, or a dict) end to end.

    Parameters
    ----------
    config : path, Config or dict
        A YAML file; a validated config; or a mapping (paths relative to the
        current folder).
    out : path, optional
        Output folder; defaults to the config's ``output.dir``.
    force : bool
        Replace files in a non-empty output folder.
    write : bool
        False to compute only.
    quiet : bool
        No progress bar during resampling (a bar appears only when tqdm is
        installed and stderr is a terminal).

    Returns
    -------
    RunResult
    """
    if isinstance(config, dict):
        config = config_from_dict(config, base_dir=Path.cwd())
    elif not isinstance(config, Config):
        config = load_config(config)
    out_dir = Path(out) if out is not None else config.output.dir
    if write:
        # Refuse early, before any work, if the folder is not usable.
        _check_out_dir(out_dir, force)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = analyse(config, quiet=quiet)
    if not write:
        return result
    return write_outputs(result, out_dir, force=force)
