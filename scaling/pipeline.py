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
from .errors import DataError, OutputError, ScalingError
from .lines import (MIN_N, METHODS, base_label, describe_test, fit_moments,
                    line_fit_from_moments, parse_log_base, slope_test_statistic)
from .moments import group_moments, moments

__all__ = ["RunResult", "analyse", "write_outputs", "run_config", "FIT_COLUMNS",
           "SLOPE_TEST_COLUMNS", "DROPPED_COLUMNS", "CAUTION"]

FIT_COLUMNS = ["scope", "group", "method", "n", "slope", "slope_low", "slope_high",
               "intercept", "intercept_low", "intercept_high", "r", "r2", "log_base",
               "confidence", "note", "slope_se", "intercept_se", "resid_sd",
               "x_min", "x_max", "y_min", "y_max"]
SLOPE_TEST_COLUMNS = ["scope", "group", "method", "hypothesis", "exponent", "estimate",
                      "statistic", "statistic_type", "df", "p_value"]
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


def analyse(config: Config) -> RunResult:
    """Compute every table of a run (reads the data file; writes nothing).

    Raises
    ------
    ScalingError
        For bad data (the message names file, column or row).
    """
    cfg = config
    base = parse_log_base(cfg.model.log_base)
    data = load_data(cfg.data, log_base=base)
    pts = data.points
    X, Y = pts["log_x"].to_numpy(), pts["log_y"].to_numpy()
    messages: list[str] = []
    notes: list[str] = []

    n_dropped = len(data.dropped)
    unit_word = f" ({cfg.data.average_within} means of {data.n_rows_used} rows)" \
        if data.averaged_within else ""
    messages.append(f"Read {data.n_read} data rows; dropped {n_dropped}; "
                    f"fitting {len(pts)} points{unit_word}.")
    if n_dropped:
        notes.append(f"{n_dropped} rows were dropped; see dropped_rows.csv for each reason.")

    rows: list[dict] = []
    pooled_m = moments(X, Y)
    pooled_m = type(pooled_m)(**{k: np.atleast_1d(getattr(pooled_m, k)) for k in
                                ("n", "mean_x", "mean_y", "sxx", "syy", "sxy")})
    ranges = [(_range(pts["x"].to_numpy()), _range(pts["y"].to_numpy()))]
    for method in cfg.model.methods:
        rows += _fit_rows("pooled", [""], pooled_m, method, cfg, base, ranges)

    group_names: list[str] = []
    if data.has_groups:
        codes, uniques = pd.factorize(pts["group"], sort=True)
        group_names = [str(u) for u in uniques]
        gm = group_moments(X, Y, codes, n_groups=len(group_names))
        granges = []
        for i in range(len(group_names)):
            sel = codes == i
            granges.append((_range(pts["x"].to_numpy()[sel]), _range(pts["y"].to_numpy()[sel])))
        for method in cfg.model.methods:
            rows += _fit_rows("group", group_names, gm, method, cfg, base, granges)
        small = [g for g, n in zip(group_names, gm.n) if n < MIN_N]
        if small:
            notes.append(f"Group fits skipped for n < {MIN_N}: {', '.join(small)}.")

    # LineFit objects for every estimable row (used by tests, predictions, figures).
    line_fits = {}
    for r in rows:
        if not np.isfinite(r["slope"]) or r["note"] and "unbounded" not in r["note"]:
            continue
        m = pooled_m[0] if r["scope"] == "pooled" else gm[group_names.index(r["group"])]
        line_fits[(r["scope"], r["group"], r["method"])] = line_fit_from_moments(
            m, r["method"], confidence=cfg.model.confidence, log_base=base,
            x_range=(r["x_min"], r["x_max"]), y_range=(r["y_min"], r["y_max"]))

    tables: dict = {}
    point_sets = {("pooled", ""): pts}
    for g in group_names:
        point_sets[("group", g)] = pts[pts["group"] == g]

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

    fits = pd.DataFrame([_blank_numbers(r) for r in rows], columns=FIT_COLUMNS)
    slope_tests = _slope_tests(line_fits, cfg)

    # Prediction stage: accuracy and correction factors per fit, then predictions.
    saved, extra_cols = _accuracy_and_factors(line_fits, point_sets)
    fits = _add_columns(fits, extra_cols)
    pred_tables, pred_notes = _predictions(line_fits, saved, cfg)
    tables.update(pred_tables)
    notes += pred_notes
    tables["_saved_fits"] = saved

    for (scope, group, method), fit in line_fits.items():
        if scope == "pooled":
            pct = f"{100 * cfg.model.confidence:g}%"
            messages.append(
                f"Pooled {method.upper()} exponent {fit.slope:.3f} ({pct} CI "
                f"{fit.slope_ci.low:.3f}–{fit.slope_ci.high:.3f}), r² = {fit.r2:.3f}, n = {fit.n}.")
            for name, b0 in cfg.exponents.items():
                test = fit.test_slope(b0, hypothesis=name)
                messages.append("  " + describe_test(test, alpha=1 - cfg.model.confidence))

    messages += g_messages
    manifest = {
        "scaling_version": __version__,
        "created_utc": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "config_file": str(cfg.source) if cfg.source else None,
        "config": cfg.raw,
        "input_file": str(cfg.data.file),
        "input_sha256": _file_sha256(Path(cfg.data.file)),
        "versions": _versions(),
    }
    return RunResult(config=cfg, data=data, fits=fits, slope_tests=slope_tests,
                     dropped=data.dropped[DROPPED_COLUMNS], line_fits=line_fits,
                     tables=tables, messages=tuple(messages), warnings=tuple(notes),
                     manifest=manifest)


def _fit_row(scope: str, group: str, fit, ranges) -> dict:
    (x_lo, x_hi), (y_lo, y_hi) = ranges
    rec = fit.to_record()
    rec.update({"scope": scope, "group": group, "n": fit.n,
                "x_min": x_lo, "x_max": x_hi, "y_min": y_lo, "y_max": y_hi})
    return rec


def _group_stage(pts: pd.DataFrame, cfg: Config, base):
    """Group means, lines through the means, and comparisons of groups."""
    from .groups import compare_groups, fit_group_means, group_means
    rows, fits, g_tables, messages, notes = [], {}, {}, [], []
    X, Y, labels = pts["log_x"].to_numpy(), pts["log_y"].to_numpy(), pts["group"].to_numpy()
    means = group_means(X, Y, labels, n_rows=pts["n_rows"].to_numpy())
    frame = means.to_frame()
    g_tables["group_means"] = frame
    means_points = None
    if cfg.groups.fit_group_means:
        mx, my = frame["mean_log_x"].to_numpy(), frame["mean_log_y"].to_numpy()
        means_points = pd.DataFrame({"group": frame["group"], "log_x": mx, "log_y": my,
                                     "x": np.power(base, mx), "y": np.power(base, my)})
        ranges = (_range(means_points["x"].to_numpy()), _range(means_points["y"].to_numpy()))
        for method in cfg.model.methods:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                fit = fit_group_means(X, Y, labels, method=method,
                                      confidence=cfg.model.confidence, log_base=base,
                                      weighted=cfg.groups.weight_means)
            fit = _with_ranges(fit, ranges)
            if fit.note and len(frame) < MIN_N:
                fit = _with_note(fit, f"{len(frame)} groups < {MIN_N}: no line through "
                                      "the group means")
            rows.append(_fit_row("group_means", "", fit, ranges))
            if fit.estimable:
                fits[("group_means", "", method)] = fit
    if cfg.groups.compare:
        test_frames, pair_frames = [], []
        data = pts[["x", "y", "group"]] if base is not None else \
            pts.assign(x=pts["log_x"], y=pts["log_y"])[["x", "y", "group"]]
        for method in cfg.model.methods:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                comp = compare_groups(data, "x", "y", "group", method=method,
                                      confidence=cfg.model.confidence, log_base=base)
            summary = comp.summary().replace(f"{len(comp.groups)} group groups",
                                             f"{len(comp.groups)} {cfg.data.group} groups")
            summary = summary.replace(" group groups", f" {cfg.data.group} groups")
            messages.append(summary)
            if comp.compared:
                test_frames.append(comp.to_frame())
                pair_frames.append(comp.pairwise_frame())
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


def _predictions(line_fits: dict, saved: dict, cfg: Config):
    """predictions.csv (and inverse_predictions.csv) for the config's values."""
    from .predict import fit_from_dict, inverse_predict, predict_from_dict
    pc = cfg.prediction
    rows, inv_rows, notes = [], [], []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for key, d in saved.items():
            scope, group, method = key
            if pc.x:
                p = predict_from_dict(d, list(pc.x), correction=pc.correction,
                                      interval=pc.interval)
                f = p.to_frame()
                f.insert(0, "scope", scope)
                f.insert(1, "group", group)
                f["method"] = method
                f["confidence"] = p.confidence
                rows.append(f)
            if pc.y:
                q = inverse_predict(fit_from_dict(d), list(pc.y), interval=pc.interval)
                f = q.to_frame()
                f.insert(0, "scope", scope)
                f.insert(1, "group", group)
                f["method"] = method
                f["confidence"] = q.confidence
                inv_rows.append(f)
    tables = {}
    if pc.x:
        table = pd.concat(rows, ignore_index=True)[PREDICTION_COLUMNS] if rows else \
            pd.DataFrame(columns=PREDICTION_COLUMNS)
        tables["predictions"] = table
        n_ext = int(table["extrapolated"].sum()) if len(table) else 0
        if n_ext:
            xs = sorted(set(table.loc[table["extrapolated"], "x"]))
            notes.append(f"{n_ext} predictions are extrapolations outside the fitted x range "
                         f"(x = {', '.join(f'{v:g}' for v in xs)}); treat them with caution.")
    if pc.y:
        table = pd.concat(inv_rows, ignore_index=True)[INVERSE_COLUMNS] if inv_rows else \
            pd.DataFrame(columns=INVERSE_COLUMNS)
        tables["inverse_predictions"] = table
        n_ext = int(table["extrapolated"].sum()) if len(table) else 0
        if n_ext:
            notes.append(f"{n_ext} inverse predictions use y outside the fitted y range "
                         "(extrapolations).")
    return tables, notes


def _slope_tests(line_fits: dict, cfg: Config) -> pd.DataFrame:
    rows = []
    for (scope, group, method), fit in line_fits.items():
        for name, b0 in cfg.exponents.items():
            t = fit.test_slope(b0, hypothesis=name)
            rows.append({"scope": scope, "group": group, "method": method,
                         "hypothesis": name, "exponent": b0, "estimate": fit.slope,
                         "statistic": t.statistic, "statistic_type": "t", "df": t.df,
                         "p_value": t.p_value})
    return pd.DataFrame(rows, columns=SLOPE_TEST_COLUMNS)


# --------------------------------------------------------------------------
# writing


def _json_safe(obj):
    if isinstance(obj, dict):
        return {str(k): _json_safe(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_json_safe(v) for v in obj]
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
        written = _write_all(result, tmp, writers or [])
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


def _write_all(result: RunResult, folder: Path, writers: list) -> list[Path]:
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
    (folder / "figures").mkdir(exist_ok=True)
    written += _figures.write_figures(result, folder)
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
    return written


def run_config(config, *, out: Path | str | None = None, force: bool = False,
               write: bool = True) -> RunResult:
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
        result = analyse(config)
    if not write:
        return result
    return write_outputs(result, out_dir, force=force)
