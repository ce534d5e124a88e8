"""Run a configuration end to end: data -> fits -> tests -> files.

:func:`analyse` computes everything and returns a :class:`RunResult` (no files
written); :func:`write_outputs` writes the output folder atomically;
:func:`run_config` does both.  The CLI is a thin layer over these.

This module only orchestrates.  The stages live in their own modules
(``stage_fits``, ``stage_groups``, ``stage_predict``, ``stage_diagnostics``,
``stage_resample``), the table columns and method facts in :mod:`scaling.stats.schema`,
the sentences in :mod:`scaling.render.wording` and the file writing in
:mod:`scaling.io.output`.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ..io.config import Config, config_from_dict, load_config
from ..io.tables import CleanData, load_data
from ..stats._display import frame_html, short_repr
from ..errors import DataError, ScalingWarning
from .groups import common_slope_rows
from ..stats.lines import MIN_N, base_label, parse_log_base
from ..stats.moments import group_moments, moments
from . import several_predictors as multi_stage
from ..io.output import check_out_dir, manifest_header, results_document, write_outputs  # noqa: F401
from ..render.figure_worker import start_worker
from ..stats.schema import (BOOTSTRAP_COLUMNS, CURVATURE_COLUMNS, DIAGNOSTIC_COLUMNS,  # noqa: F401 (aliases)
                     DROPPED_COLUMNS, ERROR_STRUCTURE_COLUMNS, FIT_COLUMNS,
                     INFLUENCE_COLUMNS, INVERSE_COLUMNS, PREDICTION_COLUMNS,
                     SLOPE_TEST_COLUMNS, is_moment_method)
from .diagnostics import diagnostics_stage, exponent_targets
from .fits import (blank_numbers, fit_moment_rows, nothing_estimable, row_method_fit,
                         slope_tests as make_slope_tests, value_range)
from .points_to_check import check_run
from .moments_path import analyse_moments, bounded_diagnostics, finish, use_moments_path
from .phylogeny import add_phylo_columns, phylo_messages, phylo_stage
from .prediction_lines import prediction_fits
from .groups import group_stage
from .predictions import accuracy_and_factors, add_accuracy_columns, prediction_stage
from .resampling import bootstrap_stage, permutation_stage, resampling_manifest
from ..render.wording import (CAUTION, dropped_note, line_method_messages,  # noqa: F401
                      pooled_fit_messages, read_message)

# The column lists, CAUTION, write_outputs and results_document are imported
# from scaling.stats.schema / wording / output and stay importable from here (aliases).
__all__ = ["RunResult", "analyse", "write_outputs", "run_config", "results_document",
           "FIT_COLUMNS", "SLOPE_TEST_COLUMNS", "DROPPED_COLUMNS", "CAUTION"]


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

    def __repr__(self) -> str:
        return short_repr(self, {"title": self.config.title, "fits": len(self.fits),
                                 "tables": tuple(k for k in self.tables if not k.startswith("_")),
                                 "out_dir": None if self.out_dir is None else str(self.out_dir)})

    def _repr_html_(self) -> str:
        return frame_html(self.fits, title=self.config.title, notes=["\n".join(self.messages)])

    def fit(self, method: str, *, scope: str = "pooled", group: str = ""):
        """The :class:`~scaling.stats.lines.LineFit` for one row of ``fits``."""
        try:
            return self.line_fits[(scope, group, method)]
        except KeyError:
            raise KeyError(f"no estimable fit for scope={scope!r}, group={group!r}, "
                           f"method={method!r}") from None


# --------------------------------------------------------------------------
# analysis


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
    reason = use_moments_path(cfg)   # large data: the run reads per-group moments only
    if reason:
        return finish(RunResult(**analyse_moments(cfg, reason)))
    base = parse_log_base(cfg.model.log_base)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ScalingWarning)
        data = load_data(cfg.data, log_base=base)
    data, units_message = multi_stage.apply_model_units(data, cfg, base)   # model.units
    pts = data.points
    X, Y = pts["log_x"].to_numpy(), pts["log_y"].to_numpy()
    messages: list[str] = []
    notes: list[str] = []
    for w in caught:   # e.g. an exclude value matching nothing: a note of the run, and re-warned
        if issubclass(w.category, ScalingWarning):
            notes.append(str(w.message))
        warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)

    n_dropped = len(data.dropped)
    messages.append(read_message(data, cfg))
    if n_dropped:
        notes.append(dropped_note(n_dropped))
    if units_message:
        messages.append(units_message)
    if isinstance(cfg.data.x, tuple):   # several predictors: OLS stage of its own
        return RunResult(**multi_stage.analyse_several(cfg, data, base, messages, notes))

    moment_methods = [m for m in cfg.model.methods if is_moment_method(m)]
    row_methods = [m for m in cfg.model.methods if m not in moment_methods]

    # Fitting stage: every fit computed once (moment lines for all groups at once).
    rows: list[dict] = []
    line_fits: dict = {}
    pooled_m = moments(X, Y)
    pooled_m = type(pooled_m)(**{k: np.atleast_1d(getattr(pooled_m, k)) for k in
                                ("n", "mean_x", "mean_y", "sxx", "syy", "sxy")})
    ranges = [(value_range(pts["x"].to_numpy()), value_range(pts["y"].to_numpy()))]
    for method in cfg.model.methods:
        if method in moment_methods:
            new_rows, new_fits = fit_moment_rows("pooled", [""], pooled_m, method, cfg, base,
                                                 ranges)
            rows += new_rows
            line_fits.update(new_fits)
        else:
            row, fit = row_method_fit("pooled", "", method, pts, cfg, base)
            rows.append(row)
            if fit is not None:
                line_fits[("pooled", "", method)] = fit

    group_names: list[str] = []
    if data.has_groups:
        codes, uniques = pd.factorize(pts["group"], sort=True)
        group_names = [str(u) for u in uniques]
        gm = group_moments(X, Y, codes, n_groups=len(group_names))
        granges = []
        for i in range(len(group_names)):
            sel = codes == i
            granges.append((value_range(pts["x"].to_numpy()[sel]),
                            value_range(pts["y"].to_numpy()[sel])))
        for method in cfg.model.methods:
            if method in moment_methods:
                new_rows, new_fits = fit_moment_rows("group", group_names, gm, method, cfg,
                                                     base, granges)
                rows += new_rows
                line_fits.update(new_fits)
                continue
            for g in group_names:
                row, fit = row_method_fit("group", g, method, pts[pts["group"] == g], cfg, base)
                rows.append(row)
                if fit is not None:
                    line_fits[("group", g, method)] = fit
        small = [g for g, n in zip(group_names, gm.n) if n < MIN_N]
        if small:
            notes.append(f"Group fits skipped for n < {MIN_N}: {', '.join(small)}.")

    # rows of each group, split in one pass (not one scan of the table per group)
    group_rows = ({str(g): sub for g, sub in pts.groupby("group", sort=True)}
                  if group_names else {})
    tables: dict = {}
    point_sets = {("pooled", ""): pts}
    for g in group_names:
        point_sets[("group", g)] = group_rows[g]

    g_messages: list[str] = []
    common_test_rows: list = []
    if data.has_groups:
        group_rows, group_fits, means_points, g_tables, g_messages, g_notes = \
            group_stage(pts, cfg, base)
        rows += group_rows
        line_fits.update(group_fits)
        tables.update(g_tables)
        # scope "common": the common within-group slope of each compared method
        common_fit_rows, common_test_rows = common_slope_rows(
            tables.get("_common_slopes", {}), cfg.exponents, log_base=base_label(base))
        rows += common_fit_rows
        notes += g_notes
        if means_points is not None:
            point_sets[("group_means", "")] = means_points

    phylo = None
    if cfg.data.tree is not None:   # phylogenetic lines: scaling/phylo_stage.py
        phylo = phylo_stage(pts, cfg, base)
        rows += phylo.rows
        line_fits.update(phylo.line_fits)
        notes += phylo.notes

    if not line_fits:
        raise DataError(nothing_estimable(cfg, pts, rows, n_dropped))

    # Keep line_fits in the order of the fits table.
    order = {(r["scope"], r["group"], r["method"]): i for i, r in enumerate(rows)}
    line_fits = dict(sorted(line_fits.items(), key=lambda kv: order.get(kv[0], len(order))))

    fits = pd.DataFrame([blank_numbers(r) for r in rows], columns=FIT_COLUMNS)
    if phylo is not None:
        fits = add_phylo_columns(fits, phylo)
    slope_tests = make_slope_tests(line_fits, cfg)
    if common_test_rows:
        slope_tests = pd.concat([slope_tests, pd.DataFrame(common_test_rows,
                                 columns=SLOPE_TEST_COLUMNS)], ignore_index=True)

    # Prediction stage: accuracy and correction factors per fit, then predictions.
    saved, extra_cols = accuracy_and_factors(line_fits, point_sets)
    fits = add_accuracy_columns(fits, extra_cols)
    fits = multi_stage.constant_columns(fits, data.units, base)   # term, a, a_low, a_high, a_unit
    predicting, pred_notes0 = prediction_fits(saved, cfg)   # which lines predict (default OLS)
    pred_tables, pred_notes = prediction_stage(line_fits, predicting, cfg)
    pred_notes = pred_notes0 + pred_notes
    tables.update(pred_tables)
    notes += pred_notes
    tables["_saved_fits"] = saved

    messages += pooled_fit_messages(line_fits, cfg)
    lead = line_fits.get(("pooled", "", cfg.model.primary))
    if lead is not None:   # the normalisation constant a of the primary line, with its units
        a_line = multi_stage.constant_sentence(lead, data.units, base, cfg.model.confidence)
        if a_line:
            messages.append(a_line)
    messages += multi_stage.prediction_sentences(tables, cfg, data.units)

    if phylo is not None:
        messages += phylo_messages(phylo, {m: f for (s, g, m), f in line_fits.items()
                                           if s == "pooled"}, cfg, has_groups=data.has_groups)
    messages += g_messages

    # Diagnostics stage: is the power law, its error structure and its line right?
    if cfg.diagnostics.enabled:
        d_fits, d_sets, d_note = bounded_diagnostics(line_fits, point_sets, cfg)
        notes += d_note
        d_tables, d_messages = diagnostics_stage(d_fits, d_sets, cfg)
        tables.update(d_tables)
        messages += d_messages
    messages += line_method_messages(line_fits, cfg)
    # graded points to check: strong warnings first
    tables["points_to_check"], check_notes = check_run(cfg, line_fits, point_sets, fits, tables)
    notes = check_notes + notes

    # Resampling stage: bootstrap intervals and permutation p-values.
    resampling = resampling_manifest(cfg, row_methods, data)
    if cfg.resampling.bootstrap:
        boot, b_messages, b_notes = bootstrap_stage(line_fits, point_sets, cfg, moment_methods,
                                                     quiet=quiet)
        tables["bootstrap"] = boot
        messages += b_messages
        notes += b_notes
    if cfg.resampling.permutations:
        slope_tests, p_messages = permutation_stage(slope_tests, line_fits, point_sets, cfg)
        messages += p_messages

    manifest = {
        **manifest_header(cfg),
        "resampling": resampling,
        "diagnostics": {"enabled": cfg.diagnostics.enabled, "alpha": cfg.diagnostics.alpha,
                        "error_structure": cfg.diagnostics.error_structure,
                        "exponent_at": list(exponent_targets(cfg))},
        "deming_lambda": cfg.model.deming_lambda if "deming" in cfg.model.methods else None,
    }
    return finish(RunResult(config=cfg, data=data, fits=fits, slope_tests=slope_tests,
                     dropped=data.dropped[DROPPED_COLUMNS] if phylo is None else pd.concat(
                         [data.dropped[DROPPED_COLUMNS], phylo.dropped], ignore_index=True),
                     line_fits=line_fits,
                     tables=tables, messages=tuple(messages), warnings=tuple(notes),
                     manifest=manifest))


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
        check_out_dir(out_dir, force)
    # Drawing the figures needs matplotlib, which a forked worker imports while
    # the numbers are computed (scaling.render.figure_worker); None: drawn here later.
    worker = start_worker(config) if write else None
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            result = analyse(config, quiet=quiet)
        if not write:
            return result
        return write_outputs(result, out_dir, force=force, worker=worker)
    finally:
        if worker is not None:
            worker.close()
