"""Run a configuration end to end: data -> fits -> tests -> files.

:func:`analyse` computes everything and returns a :class:`RunResult` (no files
written); :func:`write_outputs` writes the output folder atomically;
:func:`run_config` does both.  The CLI is a thin layer over these.

This module only orchestrates.  Every stage is a function
``stage(cfg, state) -> <its own frozen dataclass>`` in its own module
(:mod:`~scaling.run.reading`, :mod:`~scaling.run.fits`,
:mod:`~scaling.run.groups`, :mod:`~scaling.run.phylogeny`,
:mod:`~scaling.run.predictions`, :mod:`~scaling.run.diagnostics`,
:mod:`~scaling.run.points_to_check`, :mod:`~scaling.run.resampling`,
:mod:`~scaling.run.several_predictors`, :mod:`~scaling.run.moments_path`);
:func:`analyse` calls them in order, folds each result into the
:class:`~scaling.run.state.RunState` and assembles the :class:`RunResult`.
The table columns and method facts live in :mod:`scaling.stats.schema`, the
sentences in :mod:`scaling.render.wording` and the file writing in
:mod:`scaling.io.output`.
"""

from __future__ import annotations

import shutil
import warnings
from dataclasses import dataclass, field, replace
from pathlib import Path

import pandas as pd

from ..io.config import Config, config_from_dict, load_config
from ..io import output
from ..io.output import check_out_dir, manifest_header, results_document  # noqa: F401
from ..io.fast_csv import settle_reads
from ..io.tables import CleanData
from ..render.figure_worker import start_figures, start_worker
from ..render.thinning import MAX_DRAWN_POINTS, subset_index
from ..render.report import prepare_report, write_report
from ..render.wording import CAUTION  # noqa: F401 (alias)
from ..stats._display import frame_html, short_repr
from ..stats.schema import (BOOTSTRAP_COLUMNS, CURVATURE_COLUMNS, DIAGNOSTIC_COLUMNS,  # noqa: F401 (aliases)
                            DROPPED_COLUMNS, ERROR_STRUCTURE_COLUMNS, FIT_COLUMNS,
                            INFLUENCE_COLUMNS, INVERSE_COLUMNS, PREDICTION_COLUMNS,
                            SLOPE_TEST_COLUMNS)
from .diagnostics import (diagnostics_stage, early_checks, early_line_checks, early_ranks,
                          exponent_targets)
from .figure_digest import figure_result
from .fits import fit_stage, fits_table_stage
from .groups import group_stage
from .moments_path import (moments_group_stage, moments_stage, spread_stage,
                           use_moments_path, with_groups)
from .phylogeny import phylo_stage
from .phylo_extras import add_phylo_checks, finish_phylo_extras, phylo_extras_stage
from .points_to_check import check_run
from .predictions import prediction_stage
from .reading import read_stage
from .resampling import resampling_stage
from .second_pass import with_second_pass
from .several_predictors import several_stage
from ..stats.logscale import parse_log_base
from .state import RunState

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
    saved_fits : dict
        ``(scope, group, method) -> saved-fit dict`` (the fit with its
        correction factors; ``saved_fits`` of results.json, read back by
        ``scaling predict``).
    multi_fit : MultiFit or None
        The fit of several predictors, when ``data.x`` lists several columns.
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
    saved_fits: dict = field(default_factory=dict)
    multi_fit: object = None
    multi_groups: object = None   # several predictors with data.group: MultiGroupComparison

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
                                 # a leading "_": internal (the figures' picked points)
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
    return _analyse(config, quiet=quiet)


def _analyse(cfg: Config, *, quiet: bool = True, figure_inputs=None) -> RunResult:
    """:func:`analyse`; ``figure_inputs(result)``, when given, is called once, as soon as
    everything the figures draw exists (after the predictions and the spread across
    groups, before the points to check, diagnostics and resampling on the in-memory
    road), with a :class:`RunResult` of what exists then (its other tables are not made
    yet), so the figures are drawn while the rest is computed."""
    reason = use_moments_path(cfg)   # large data: the run reads per-group moments only
    if reason:
        return _handed(_moments_run(cfg, reason), figure_inputs)
    read = read_stage(cfg)
    state = RunState(data=read.data, base=read.base, quiet=quiet)
    if isinstance(cfg.data.x, tuple):   # several predictors: OLS stage of its own
        return _handed(_several_run(cfg, state, read), figure_inputs)
    early = early_checks(cfg, read.data.points)
    try:
        return _one_predictor(cfg, state, read, early, figure_inputs)
    finally:
        for job in early.values():   # not read (the run failed, or no diagnostics)
            job[1].stop()


def _one_predictor(cfg, state: RunState, read, early: dict, figure_inputs) -> RunResult:
    """:func:`_analyse` of one predictor in memory, its ``early`` checks started."""
    fitted = fit_stage(cfg, state)
    state = replace(state, rows=fitted.rows, line_fits=fitted.line_fits,
                    point_sets=fitted.point_sets)
    # the pooled lines' checks (and the residual figure's ranks), on the idle core while
    # groups are compared (large tables)
    early.update(early_line_checks(cfg, state.line_fits, state.point_sets,
                                   rank_keep=_rank_keep(cfg, state, figure_inputs)))
    grouped = group_stage(cfg, state) if read.data.has_groups else None
    if grouped is not None:
        state = replace(state, rows=state.rows + grouped.rows, test_rows=grouped.test_rows,
                        line_fits={**state.line_fits, **grouped.line_fits},
                        point_sets={**state.point_sets, **grouped.point_sets},
                        tables={**state.tables, **grouped.tables})
    phylo = phylo_stage(cfg, state) if cfg.data.tree is not None else None
    if phylo is not None:
        state = replace(state, rows=state.rows + phylo.rows, phylo=phylo,
                        line_fits={**state.line_fits, **phylo.line_fits},
                        test_rows=state.test_rows + phylo.test_rows,
                        tables={**state.tables, **phylo.tables})
    extras = phylo_extras_stage(cfg, state) if phylo is not None else None
    if extras is not None:   # models, predictions from the tree, per-group lines, checks
        state = replace(state, rows=extras.rows, phylo=extras.phylo, data=replace(
            state.data, dropped=extras.dropped), test_rows=state.test_rows + extras.test_rows,
            tables={**state.tables, **extras.tables},
            line_fits={**state.line_fits, **extras.phylo.line_fits})
    table = fits_table_stage(cfg, state)
    state = replace(state, fits=table.fits, slope_tests=table.slope_tests,
                    line_fits=table.line_fits)
    predicted = prediction_stage(cfg, state)
    state = replace(state, fits=predicted.fits, saved_fits=predicted.saved_fits,
                    tables={**state.tables, **predicted.tables})
    if extras is not None:
        fits_x, tables_x, saved_x = finish_phylo_extras(state, extras)
        state = replace(state, fits=fits_x, tables=tables_x, saved_fits=saved_x)
    # The fits are final here (the stages below add tables and slope tests only), so the
    # spread across groups, which reads the fits alone, is made now: with it, everything
    # the figures draw exists.
    spread = spread_stage(cfg, state)
    if figure_inputs is not None:
        figure_inputs(figure_result(RunResult(
            config=cfg, data=state.data, fits=state.fits, slope_tests=state.slope_tests,
            dropped=state.data.dropped, line_fits=state.line_fits,
            saved_fits=state.saved_fits, tables={**state.tables, **spread.tables}),
            ahead=early_ranks(early, state.data.points)))
    checked = check_run(cfg, state)   # before the diagnostics, whose words read it
    diagnosed = (diagnostics_stage(cfg, replace(state, tables={
        **state.tables, "points_to_check": checked.table}), early=early)
        if cfg.diagnostics.enabled else None)
    if diagnosed is not None:
        state = replace(state, tables={**state.tables, **diagnosed.tables})
    state = replace(state, tables={**state.tables, "points_to_check": add_phylo_checks(
        checked.table, extras)})
    resampled = resampling_stage(cfg, state)
    state = replace(state, slope_tests=resampled.slope_tests,
                    tables={**state.tables, **resampled.tables})

    def said(*stages, field_name):
        return tuple(t for stage in stages if stage is not None
                     for t in getattr(stage, field_name))

    messages = (read.messages + table.messages + predicted.messages
                + said(phylo, extras, grouped, diagnosed, field_name="messages")
                + table.method_messages + resampled.messages + spread.messages)
    notes = (checked.notes + read.notes + fitted.notes
             + said(grouped, phylo, extras, predicted, diagnosed, resampled, spread,
                    field_name="notes"))
    manifest = {
        **manifest_header(cfg),
        "resampling": resampled.manifest,
        "diagnostics": {"enabled": cfg.diagnostics.enabled, "alpha": cfg.diagnostics.alpha,
                        "error_structure": cfg.diagnostics.error_structure,
                        "exponent_at": list(exponent_targets(cfg))},
        "deming_lambda": cfg.model.deming_lambda if "deming" in cfg.model.methods else None,
    }
    dropped = state.data.dropped[DROPPED_COLUMNS]
    if phylo is not None:
        dropped = pd.concat([dropped, phylo.dropped], ignore_index=True)
    return RunResult(config=cfg, data=state.data, fits=state.fits,
                     slope_tests=state.slope_tests, dropped=dropped,
                     line_fits=state.line_fits, tables={**state.tables, **spread.tables},
                     messages=messages, warnings=notes, manifest=manifest,
                     saved_fits=state.saved_fits)


def _rank_keep(cfg, state: RunState, figure_inputs):
    """The ranks the residual figure draws of the run's points (above
    :data:`~scaling.render.thinning.MAX_DRAWN_POINTS` points, when the figures are
    handed over and draw it), else None."""
    n = len(state.data.points)
    if figure_inputs is None or "residuals" not in cfg.figures.kinds:
        return None
    return subset_index(n, MAX_DRAWN_POINTS)


def _handed(result: RunResult, figure_inputs) -> RunResult:
    """``result``, after handing it to ``figure_inputs`` (when given): the roads whose
    figure inputs exist only at their end."""
    if figure_inputs is not None:
        figure_inputs(result)
    return result


def _several_run(cfg, state: RunState, read) -> RunResult:
    """The run when ``data.x`` lists several predictors (no spread across groups)."""
    several = several_stage(cfg, state)
    return RunResult(config=cfg, data=state.data, fits=several.fits,
                     slope_tests=several.slope_tests,
                     dropped=state.data.dropped[DROPPED_COLUMNS], line_fits={},
                     tables=several.tables, messages=read.messages + several.messages,
                     warnings=read.notes + several.notes,
                     manifest={**manifest_header(cfg), **several.manifest},
                     saved_fits=several.saved_fits, multi_fit=several.multi_fit,
                     multi_groups=several.comparison)


def _moments_run(cfg, reason: str) -> RunResult:
    """The run from per-group moments (large data), with the spread across groups."""
    path = moments_stage(cfg, reason)
    cfg = path.config
    if cfg.data.group:  # group means, comparisons, common slope: the in-memory stage's code
        path = with_groups(path, moments_group_stage(cfg, path), cfg)
    state = RunState(data=path.data, base=None, fits=path.fits)
    spread = spread_stage(cfg, state)
    result = RunResult(config=cfg, data=path.data, fits=path.fits,
                       slope_tests=path.slope_tests, dropped=path.data.dropped,
                       line_fits=path.line_fits, tables={**path.tables, **spread.tables},
                       messages=path.messages + spread.messages,
                       warnings=path.notes + spread.notes,
                       manifest={**manifest_header(cfg, path.input_hash()),
                                 **path.manifest})
    # The second pass over the file: correction factors, residual checks, predictions.
    return with_second_pass(result, cfg, path.moments, path.data.units,
                            parse_log_base(cfg.model.log_base), point_sets=path.point_sets,
                            spill=path.spill, partition_points=path.partition_points)


def write_outputs(result: RunResult, out_dir, *, force: bool = False, worker=None) -> RunResult:
    """Write the output folder (:func:`scaling.io.output.write_outputs`) with the figures,
    report and caution of :mod:`scaling.render`.  ``worker``: a
    :class:`~scaling.render.figure_worker.FigureWorker` started with the run draws the
    figures; without one (or when it cannot) they are drawn here."""
    def figures(res, folder):
        # drawn while the tables are written; above 5 000 points from the points drawn
        return start_figures(figure_result(res), folder, worker)
    return _write(result, out_dir, force, figures)


def _write(result: RunResult, out_dir, force: bool, figures, folder=None) -> RunResult:
    return output.write_outputs(result, out_dir, force=force, draw_figures=figures,
                                write_report=write_report, caution=CAUTION,
                                prepare_report=prepare_report, folder=folder)


class _FiguresFirst:
    """The figures of a run started as soon as what they draw exists (``figure_inputs``
    of :func:`_analyse`), into the temporary folder the output writer then fills
    (:func:`scaling.io.output.staging_folder`): drawn while the points to check,
    diagnostics, resampling and tables are made."""

    def __init__(self, out_dir: Path, force: bool, worker) -> None:
        self.out_dir, self.force, self.worker = out_dir, force, worker
        self.folder = self.drawing = None

    def __call__(self, inputs: RunResult) -> None:
        self.folder = output.staging_folder(self.out_dir, self.force)
        self.drawing = start_figures(inputs, self.folder, self.worker)

    def write(self, result: RunResult) -> RunResult:
        """Write the run into the folder the figures are drawn into."""
        if self.drawing is None:   # no figure inputs were handed over
            return write_outputs(result, self.out_dir, force=self.force, worker=self.worker)
        return _write(result, self.out_dir, self.force, lambda res, folder: self.drawing,
                      self.folder)

    def end(self) -> None:
        """Stop a drawing not collected (the run failed), then remove the temporary
        folder if it is left (nothing draws into it any more)."""
        if self.drawing is not None:
            self.drawing.cancel()
        if self.folder is not None:
            shutil.rmtree(self.folder, ignore_errors=True)


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
    # A read `scaling run` started ahead ends before anything else: before any fork (a
    # child must not inherit the locks of a reading thread) and before a refusal ends the
    # process under it; its answer is kept for the read stage.
    settle_reads()
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
    figures = _FiguresFirst(out_dir, force, worker) if write else None
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            result = _analyse(config, quiet=quiet, figure_inputs=figures)
        if not write:
            return result
        return figures.write(result)
    finally:
        if figures is not None:
            figures.end()
        if worker is not None:
            worker.close()
