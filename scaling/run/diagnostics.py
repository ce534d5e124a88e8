"""The diagnostics stage of a run: residual checks, influence, curvature, error structure.

Every line is checked and reported under its own scope (``pooled``, ``group``,
``group_means``); the model the answer reports is checked too
(:func:`scaling.render.headline.answer_line`): with a common within-group
slope, the parallel-lines model (scope ``common``, by
:func:`scaling.stats.residual_checks.diagnose_parallel`); when slopes differ,
each group's own line (the ``group`` rows); without groups, the pooled line.
The verdict sentences speak of the answer's model.

Tables from :mod:`scaling.stats.residual_checks` and
:mod:`scaling.stats.error_structure`; the ``verdict`` column from
:func:`scaling.render.findings.check_verdict` and the verdict sentences from
:func:`scaling.render.findings.diagnostics_messages`.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from ..stats.error_structure import compare_error_structure
from ..stats.group_means import compared_groups
from ..stats.lines import exact_fit
from ..stats.breusch_pagan import breusch_pagan
from ..stats.residual_checks import MIN_N, diagnose, diagnose_parallel
from ..errors import ScalingError
from ..stats.schema import (CURVATURE_COLUMNS, DIAGNOSTIC_COLUMNS, ERROR_STRUCTURE_COLUMNS,
                     INFLUENCE_COLUMNS)
from ..render.findings import check_verdict, diagnostics_messages
from ..render.headline import answer_line
from ..render.prediction_words import answer_primary
from ..render.thinning import line_residual, rank_positions
from .background import Background
from .fits import known_moments, set_columns
from .moments_path import bounded_diagnostics
from .phylo_checks import answer_model_checks, diagnostic_rows
from .points_to_check import coded_points, in_groups
from .predictions import CHUNK_ROWS, chunk_runs

__all__ = ["exponent_targets", "DiagnosticsStage", "diagnostics_stage", "early_checks",
           "early_line_checks", "early_ranks"]


@dataclass(frozen=True, slots=True, kw_only=True)
class DiagnosticsStage:
    """The diagnostics, influential_rows, curvature (and error_structure) tables and verdicts."""

    tables: dict
    messages: tuple = ()
    notes: tuple = ()


#: What a checked line keeps of its per-point arrays once its rows are tabled.
_NO_POINTS = np.empty(0)
_NO_POINTS.flags.writeable = False


def exponent_targets(cfg) -> tuple:
    """Exponents whose crossing the curvature check locates: diagnostics.exponent_at,
    else the hypothesised exponents."""
    return tuple(cfg.diagnostics.exponent_at) or tuple(cfg.exponents.values())


#: From this many pooled points the error-structure comparison is started early, in a
#: forked process (:func:`early_checks`): about 30 ms of its nonlinear fit, against a few
#: ms to fork.
EARLY_FROM_POINTS = 50_000


def early_checks(cfg, points: pd.DataFrame | None) -> dict:
    """``{(scope, group): (points, Background)}``: the checks that need only the cleaned
    ``points`` (the pooled line's error-structure comparison), started in a forked
    process as soon as the points exist, on a large table whose diagnostics will ask
    for them; ``{}`` otherwise.  :func:`diagnostics_stage` takes the answer for the
    very same points, and the caller stops what it did not take."""
    dc = cfg.diagnostics
    if (points is None or not (dc.enabled and dc.error_structure)
            or len(points) < EARLY_FROM_POINTS):
        return {}
    x, y = points["x"].to_numpy(), points["y"].to_numpy()
    return {("pooled", ""): (points, Background(_error_structure, x, y))}


def early_line_checks(cfg, line_fits: dict, point_sets: dict, *, rank_keep=None) -> dict:
    """``{("lines", "pooled", ""): (points, Background, fits, {})}`` (and ``("ranks",
    "pooled", "")`` with ``rank_keep``): the checks of the pooled
    lines (:func:`~scaling.stats.residual_checks.diagnose`: normality, constant
    variance, curvature, Cook's distances over every point), started in a forked
    process as soon as the lines are fitted, on a large table whose diagnostics will
    ask for them; ``{}`` otherwise.  They run on the core the run leaves idle while it
    compares groups and predicts, and the run's process never holds their per-point
    arrays.  :func:`diagnostics_stage` takes each answer whose line and points are the
    very ones it checks.  ``rank_keep`` (the ranks the residual figure draws,
    :func:`~scaling.render.thinning.subset_index`): a second process ranks each line's
    residuals for that figure (:func:`~scaling.render.thinning.rank_positions`;
    :func:`early_ranks` hands them on)."""
    dc = cfg.diagnostics
    sel = point_sets.get(("pooled", ""))
    if not dc.enabled or sel is None or len(sel) < EARLY_FROM_POINTS:
        return {}
    fits = {key[2]: fit for key, fit in line_fits.items()
            if key[:2] == ("pooled", "") and fit.estimable and fit.n == len(sel)}
    if not fits:
        return {}
    X, Y = set_columns(sel, "log_x", "log_y")
    rows = set_columns(sel, "row")[0]
    m = known_moments(sel)
    exact = None if m is None else bool(exact_fit(m))
    out = {}
    if rank_keep is not None:   # first: the figures ask for them first
        out[("ranks", "pooled", "")] = (sel, Background(_rank_lines, fits, X, Y, rank_keep),
                                        fits, {})
    out[("lines", "pooled", "")] = (sel, Background(_check_lines, fits, X, Y, rows,
                                                    exponent_targets(cfg), dc.alpha, exact),
                                    fits, {})
    return out


def _rank_lines(fits: dict, X, Y, keep) -> dict:
    """``method -> rank_positions`` of the residuals of each of ``fits`` at ``keep``."""
    return {method: rank_positions(line_residual(fit, X, Y), keep)
            for method, fit in fits.items()}


def _check_lines(fits: dict, X, Y, rows, targets: tuple, alpha: float, exact) -> dict:
    """``method -> Diagnostics`` (without its residuals and row numbers, which the caller
    has) or the ScalingError that refused it, of each of ``fits`` through the points
    ``X, Y``: :func:`diagnostics_stage`'s calls, with one memo for the set."""
    memo = {} if exact is None else {"exact": exact}
    out: dict = {}
    for method, fit in fits.items():
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                d = diagnose(fit, X, Y, rows=rows, exponent_targets=targets, alpha=alpha,
                             memo=memo)
        except ScalingError as exc:
            out[method] = exc
            continue
        out[method] = replace(d, residuals=_NO_POINTS, rows=_NO_POINTS)
    return out


def early_ranks(early: dict, points):
    """``ahead(method, fit)`` for :class:`~scaling.render.thinning.PendingRanks`: the ranks
    :func:`early_line_checks` made of this very line through ``points`` (the run's
    points, in their order), else None; None when none were started."""
    started = early.get(("ranks", "pooled", ""))
    if started is None or started[0] is not points:
        return None

    def ahead(method: str, fit):
        if not _same_line(started[2].get(method), fit):
            return None
        return _early_answer(started).get(method)
    return ahead


def _same_line(was, fit) -> bool:
    """Whether the line an early process was given is ``fit`` (slope, intercept, n)."""
    return was is not None and (was.slope, was.intercept, was.n) == (fit.slope,
                                                                      fit.intercept, fit.n)


def _early_answer(started) -> dict:
    """The answer of an :func:`early_line_checks` process, read once."""
    box = started[3]
    if "answer" not in box:
        box["answer"] = started[1].result()
    return box["answer"]


def _early_line(early: dict, scope: str, group: str, method: str, fit, sel, rows):
    """The Diagnostics :func:`early_line_checks` made of this very line through these very
    points (its row numbers ``rows`` put back), or None; raises the ScalingError that
    refused it there."""
    started = early.get(("lines", scope, group))
    if started is None or started[0] is not sel or fit is None:
        return None
    if not _same_line(started[2].get(method), fit):
        return None
    answer = _early_answer(started).get(method)
    if isinstance(answer, ScalingError):
        raise answer
    return None if answer is None else replace(answer, rows=rows)


def _error_structure(x, y):
    """:func:`compare_error_structure` of the points, its warnings silenced (the
    diagnostics report a failed fit in words)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return compare_error_structure(x, y)


def diagnostics_stage(cfg, state, *, early: dict | None = None) -> DiagnosticsStage:
    """diagnostics, influential_rows, curvature and error_structure tables and verdicts.

    ``early``: from :func:`early_checks`; each answer is read (once) where its point
    set is the very frame checked here, and computed here otherwise."""
    early = early if early is not None else {}
    line_fits, point_sets, notes = bounded_diagnostics(state.line_fits, state.point_sets, cfg)
    dc = cfg.diagnostics
    targets = exponent_targets(cfg)
    diag_records, curv_rows, es_rows = [], [], []
    curved: set = set()   # (scope, group) of the curvature rows so far
    # influential_rows: (scope, group, method, its set's flagged rows) of each line, made
    # into columns once every line is checked (a hundred thousand cells are not held
    # while the pooled line's checks run)
    flagged_lines: list = []
    memos: dict = {}   # (scope, group) -> what diagnose shares between the lines of a set
    pooled = point_sets.get(("pooled", ""))
    if pooled is not None and (m := known_moments(pooled)) is not None:
        # the fits' moments of these very points: what diagnose's exact-fit test reads
        memos[("pooled", "")] = {"exact": bool(exact_fit(m))}
    flagged_of: dict = {}   # (scope, group) -> the flagged rows, their distances and units
    results: dict = {}
    # The ordinary answer's model; with a tree the phylogenetic model the Answer leads
    # with is checked too (below), and the ordinary checks are said to be the ordinary's.
    answer = answer_line(state.tables.get("group_tests"), cfg.model.methods,
                         answer_primary(cfg), cfg.model.confidence)
    todo = [(key, fit, point_sets.get(key[:2])) for key, fit in line_fits.items()]
    if answer[0] == "common":
        todo.append((("common", "", answer[1]), None, _common_points(point_sets, answer[1])))
    logs: dict = {}   # (scope, group) -> (log x, log y): each set's columns read once
    bp = _groups_breusch_pagan(line_fits, point_sets, logs)
    for (scope, group, method), fit, sel in todo:
        if sel is None or (fit is not None and len(sel) != fit.n):
            continue
        if scope == "common":   # all the points again: the groups' columns are read
            logs.clear()
        if scope == "group_means":
            rows = np.arange(len(sel))
            labels = {i: str(g) for i, g in enumerate(sel["group"])}
        else:
            rows = set_columns(sel, "row")[0]
            labels = None   # the flagged rows' units, looked up below
        try:
            d = _early_line(early, scope, group, method, fit, sel, rows)
            X, Y = _logs(logs, (scope, group), sel)
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                if d is not None:
                    pass   # checked in the process started when the line was fitted
                elif fit is None:
                    d = diagnose_parallel(_common_slope(state.fits, method), X, Y,
                                          coded_points(sel), method=method,
                                          rows=rows, exponent_targets=targets,
                                          alpha=dc.alpha, log_base=state.base)
                else:
                    d = diagnose(fit, X, Y, rows=rows, exponent_targets=targets,
                                 alpha=dc.alpha, memo=memos.setdefault((scope, group), {}),
                                 constant_variance=bp.get((scope, group, method)))
        except ScalingError:
            continue   # too few points (n < 4) or nothing to diagnose
        # Points of the means line are groups: name them, not their positions.
        named = labels if scope == "group_means" else None
        # rows of d.to_frame() with scope, group and verdict; one table at the end
        diag_records += [{"scope": scope, "group": group, "method": d.method,
                          **c.to_record(), "verdict": check_verdict(c, groups=named)}
                         for c in d.checks]
        # the lines through one set of points share the OLS Cook's distances and so
        # the flagged rows (diagnose returns the same tuple): read and labelled once
        seen = flagged_of.get((scope, group))
        if seen is None or seen[0] is not d.influential_rows:
            flagged, cooks = d.influence_values()
            flagged = np.asarray(flagged, dtype=np.int64).tolist()
            named_rows = ([labels.get(r, "") for r in flagged] if labels is not None
                          else _unit_labels(sel, rows, flagged)) if flagged else []
            seen = flagged_of[(scope, group)] = (d.influential_rows, flagged, cooks,
                                                 named_rows)
        if seen[1]:
            flagged_lines.append((scope, group, method, seen))
        # the verdicts read the checks only: the per-point arrays (a million points
        # for the pooled line, one array per method) are let go once tabled
        d = results[(scope, group, method)] = replace(d, residuals=_NO_POINTS,
                                                      cooks_distance=_NO_POINTS)
        if (scope, group) not in curved:
            curved.add((scope, group))
            c = d.curvature
            e_lo, e_hi = c.local_exponent([X.min(), X.max()])
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
    del memos, logs   # the per-set Cook's distances: not needed past the checks
    es_results: dict = {}
    if dc.error_structure:
        for (scope, group), sel in point_sets.items():
            if scope == "group_means":
                continue
            started = early.pop((scope, group), None)
            try:
                if started is not None and started[0] is sel:
                    es = started[1].result()
                else:
                    es = _error_structure(*set_columns(sel, "x", "y"))
            except ScalingError:
                continue
            es_results[(scope, group)] = es
            for m in (es.additive, es.multiplicative):
                es_rows.append({"scope": scope, "group": group, "model": m.name, "a": m.a,
                                "b": m.b, "sigma": m.sigma, "loglik": m.log_likelihood,
                                "aicc": m.aicc, "delta_aicc": es.delta_aicc,
                                "preferred": es.preferred})

    infl: dict = {c: [] for c in INFLUENCE_COLUMNS}   # influential_rows, column by column
    for scope, group, method, (_, flagged, cooks, named_rows) in flagged_lines:
        k = len(flagged)
        infl["scope"] += [scope] * k
        infl["group"] += [group] * k
        infl["method"] += [method] * k
        infl["row"] += [None] * k if scope == "group_means" else flagged
        infl["label"] += named_rows
        infl["cooks_distance"] += cooks
    del flagged_lines, flagged_of
    messages = diagnostics_messages(results, es_results, point_sets, cfg, answer=answer,
                                    points=state.tables.get("points_to_check"))
    phylo = answer_model_checks(cfg, state) if cfg.data.tree is not None else None
    if phylo is not None:   # the Answer's model leads; the ordinary checks follow, named so
        frame, p_infl, p_curv, p_msgs = diagnostic_rows(cfg, phylo,
                                                        state.tables.get("points_to_check"))
        diag_records[:0] = frame.to_dict(orient="records")
        for c in INFLUENCE_COLUMNS:
            infl[c][:0] = [r[c] for r in p_infl]
        curv_rows[:0] = p_curv
        messages = p_msgs + [_ordinary(m) for m in messages]
    tables = {
        "diagnostics": pd.DataFrame(diag_records)[DIAGNOSTIC_COLUMNS]
        if diag_records else pd.DataFrame(columns=DIAGNOSTIC_COLUMNS),
        "influential_rows": influence_table(infl),
        "curvature": pd.DataFrame(curv_rows, columns=CURVATURE_COLUMNS),
    }
    if dc.error_structure:
        tables["error_structure"] = pd.DataFrame(es_rows, columns=ERROR_STRUCTURE_COLUMNS)

    return DiagnosticsStage(tables=tables, notes=tuple(notes), messages=tuple(messages))


def influence_table(rows) -> pd.DataFrame:
    """influential_rows.csv from its columns (a dict of lists) or its records (a list of
    dicts); ``row`` as whole numbers, blank where a point has no input row (a group
    mean, a species of the tree)."""
    empty = not rows["row"] if isinstance(rows, dict) else not len(rows)
    if not empty and isinstance(rows, dict):
        # the row numbers as one integer array and a mask of the blanks (pandas would
        # look at each of a hundred thousand values to find their type)
        given = np.array(rows["row"], dtype=object)
        blank = np.equal(given, None)
        if given.ndim == 1 and set(map(type, given[~blank].tolist())) <= {int}:
            values = np.where(blank, 0, given).astype(np.int64)
            rows = {**rows, "row": pd.arrays.IntegerArray(values, blank)}
    frame = pd.DataFrame([] if empty else rows, columns=INFLUENCE_COLUMNS)
    return frame.astype({"row": "Int64"})


#: Ordinary check sentences that, with a tree, are prefixed as the ordinary model's.
_ORDINARY_CHECKS = ("Power law", "Residuals of the ", "Influence: ")


def _ordinary(message: str) -> str:
    """With a tree: the ordinary model's check sentences say they take species as independent."""
    if message.startswith(_ORDINARY_CHECKS):
        return "Ignoring ancestry (species independent) — " + message
    return message


def _logs(cache: dict, key: tuple, sel, *, keep: bool = True) -> tuple:
    """A point set's log x and log y, read from its frame once (``cache`` by key);
    ``keep=False``: read (when not in ``cache``) without keeping them there."""
    if key in cache:
        return cache[key]
    xy = set_columns(sel, "log_x", "log_y")
    if keep:
        cache[key] = xy
    return xy


def _groups_breusch_pagan(line_fits: dict, point_sets: dict, cache: dict) -> dict:
    """``(scope, group, method) -> (statistic, p)`` of the Breusch-Pagan test of every
    group line, a method at a time in one pass over runs of whole groups of about
    :data:`~scaling.run.predictions.CHUNK_ROWS` rows
    (:func:`~scaling.stats.breusch_pagan.breusch_pagan` with group codes)."""
    by_method: dict = {}
    for key, fit in line_fits.items():
        sel = point_sets.get(key[:2])
        if (key[0] == "group" and sel is not None and len(sel) == fit.n
                and len(sel) >= MIN_N and fit.estimable):
            by_method.setdefault(key[2], []).append((key, fit, sel))
    out = {}
    runs = [lines[lo:hi] for lines in by_method.values()   # a few MB of rows at a time
            for lo, hi in chunk_runs([len(sel) for _, _, sel in lines], CHUNK_ROWS)]
    for run in runs:
        # each run's columns read here and let go (``cache`` is left to the lines, which
        # read the groups' columns after the pooled line's checks, the largest)
        lines = [(key, fit, _logs(cache, key[:2], sel, keep=key[:2] in cache))
                 for key, fit, sel in run]
        X = np.concatenate([xy[0] for _, _, xy in lines])
        e = np.concatenate([xy[1] - fit.intercept - fit.slope * xy[0] for _, fit, xy in lines])
        codes = np.repeat(np.arange(len(lines)), [xy[0].size for _, _, xy in lines])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            lm, p = breusch_pagan(e, X, codes, n_groups=len(lines))
        out.update({key: (lm[i], p[i]) for i, (key, _, _) in enumerate(lines)})
    return out


def _unit_labels(sel: pd.DataFrame, rows: np.ndarray, flagged: list) -> list:
    """The ``unit`` (as text) of each flagged row number, "" without a unit column; a
    row number that repeats takes its last point's unit."""
    if "unit" not in sel:
        return [""] * len(flagged)
    rows = np.asarray(rows, dtype=np.int64)
    if rows.size < 2 or bool(np.all(rows[1:] >= rows[:-1])):   # in order already
        at = np.searchsorted(rows, flagged, side="right") - 1
    else:
        order = np.argsort(rows, kind="stable")
        at = order[np.searchsorted(rows, flagged, side="right", sorter=order) - 1]
    return sel["unit"].iloc[at].astype(str).tolist()


def _common_points(point_sets: dict, method: str):
    """The pooled points of the groups the common slope of ``method`` is estimated from."""
    pooled = point_sets.get(("pooled", ""))
    if pooled is None or "group" not in pooled:
        return None
    labels = pooled["group"].astype(str).to_numpy()
    try:
        used, _ = compared_groups(pooled["log_x"].to_numpy(), pooled["log_y"].to_numpy(),
                                  labels, method=method)
    except ScalingError:
        return None
    if len(used) < 2:
        return None
    inside = in_groups(labels, used)
    return pooled if inside.all() else pooled[inside]   # usually every group: no copy


def _common_slope(fits: pd.DataFrame, method: str) -> float:
    row = fits[(fits["scope"] == "common") & (fits["method"] == method)]
    return float(row["slope"].iloc[0]) if len(row) else float("nan")
