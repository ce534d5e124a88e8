"""The second pass of the moments path: what needs residuals, read chunk by chunk again.

The first pass (:func:`scaling.run.table_moments.read_moments`) gives per-group
moments and so the fitted lines.  With the lines known, :func:`second_pass`
reads the rows again chunk by chunk and adds their residual sums to a
:class:`~scaling.stats.streaming_residuals.ResidualSums` (pooled rows and
every group, every line method; the groups' residual checks only when each
group is checked, ``groups.diagnostics_max``).  Read in this process, the
rows come back from the first pass's temporary binary file
(:class:`~scaling.run.table_moments.RowSpill`: log x, log y, group code and
row number of each cleaned chunk, the same chunks, summed in two halves on
two cores above a size: :mod:`scaling.run.second_pass_halves`), not from
parsing the file again; with Dask the partitions are read and cleaned again
on the same scheduler (persisting them would hold every row in the workers'
memory);
with ``data.average_within`` the points are the unit means held in memory.
From those sums and the moments it builds what the in-memory road writes
from the rows:

* the accuracy and correction-factor columns of fits.csv (SEE, %SEE, %PE,
  smearing, parametric and ratio factors) and the constant ``a`` columns;
* predictions and inverse predictions (:func:`scaling.run.predictions.predictions_from_factors`)
  and the saved fits of results.json;
* the ``diagnostics`` table: normality (D'Agostino-Pearson from residual
  skewness and kurtosis: Shapiro-Wilk needs the sorted rows), constant
  variance (Breusch-Pagan), curvature (the quadratic term, from the higher
  moments, :func:`scaling.stats.moment_curvature.quadratic_from_moments`) and
  influence (Cook's distance), with ``curvature`` and ``influential_rows``
  (at most :data:`~scaling.stats.streaming_residuals.TOP_K` rows per fit);
* the fit-level rows of ``points_to_check`` (odd correction factors,
  estimates outside their interval).

What needs all rows at once (row bootstrap, permutation tests, row-based
robust lines, leave-one-out refits) is not done; one note names it.
The plain-language notes are small functions here (to move into
``wording.py`` at merge time), as in :mod:`scaling.run.moments_path`.
"""

from __future__ import annotations

import gc
import math
import warnings
from contextlib import contextmanager
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import ScalingError
from ..io.chunked import (clean_chunk, dask_compute, dask_partitions, file_kind, files_of,
                          read_chunks)
from ..render.findings import check_verdict, diagnostics_messages, point_check_reason
from ..render.headline import answer_line
from ..render.thinning import DRAWN_TABLE, MAX_DRAWN_POINTS, subset_index
from ..stats.influence import SMEARING_RATIO_LIMIT, PointCheck, fit_checks
from ..stats.line_results import line_fits_from_result
from ..stats.lines import exact_fit, fit_moments
from ..stats.logscale import to_log
from ..stats.moment_curvature import local_exponents, quadratic_from_moments
from ..stats.residual_checks import MIN_N, Check, Curvature, Diagnostics
from ..stats.schema import CURVATURE_COLUMNS, DIAGNOSTIC_COLUMNS, POINTS_TO_CHECK_COLUMNS
from ..stats.streaming_residuals import (TOP_K, GroupResidualSums, ResidualSums,
                                         StreamedChecks)
from .diagnostics import exponent_targets, influence_table
from .moments_path import _sep
from .points_to_check import primary_method
from .predictions import (accuracy_and_factors, predictions_from_factors, row_keys,
                          saved_fits_of)
from .second_pass_halves import add_rows, spill_sums

__all__ = ["SecondPass", "second_pass", "residual_sums", "ROW_ONLY_STAGES"]

#: What the moments path cannot do without holding every row at once.
ROW_ONLY_STAGES = ("row bootstrap", "permutation tests", "row-based robust lines",
                   "leave-one-out refits (points that move the answer)")


@dataclass(frozen=True, slots=True, kw_only=True)
class SecondPass:
    """What the second pass adds to a moments-path run.

    Attributes
    ----------
    fits : DataFrame
        fits.csv with the accuracy, correction-factor and constant columns.
    saved_fits : dict
        ``(scope, group, method) -> saved-fit dict`` of every estimable fit.
    tables : dict
        ``predictions`` / ``inverse_predictions`` (when asked for),
        ``diagnostics``, ``curvature``, ``influential_rows`` (when
        ``diagnostics.enabled``) and ``points_to_check``.
    checks : StreamedChecks
        The raw sums' results (set 0 pooled, set 1 + g group g).
    line_fits : dict
        ``(scope, group, method) -> LineFit`` of every estimable fit (the path's
        own and each group's), as the in-memory road holds them (figures, report).
    messages, notes : tuple of str
    """

    fits: pd.DataFrame
    saved_fits: dict
    tables: dict
    checks: StreamedChecks
    line_fits: dict
    messages: tuple = ()
    notes: tuple = ()


# --------------------------------------------------------------------------
# the sets and lines of a run


def _sets(gm, grouped: bool):
    """Moments of the point sets: pooled first, then each group (when grouped)."""
    if not grouped:
        return gm.pooled, [("pooled", "")]
    m = gm.moments
    both = {k: np.concatenate([np.atleast_1d(getattr(gm.pooled, k)), getattr(m, k)])
            for k in ("n", "mean_x", "mean_y", "sxx", "syy", "sxy")}
    if gm.pooled.has_higher and m.has_higher:
        both.update({k: np.concatenate([getattr(gm.pooled, k), getattr(m, k)])
                     for k in ("sxxx", "sxxxx", "sxxy")})
    keys = [("pooled", "")] + [("group", str(g)) for g in gm.labels]
    return type(m)(**both), keys


def _lines(fits: pd.DataFrame, keys: list, methods: list) -> dict:
    """Arrays (S, M) of intercept, slope and residual SD read from the fits table."""
    index = {k: i for i, k in enumerate(keys)}
    out = {c: np.full((len(keys), len(methods)), np.nan)
           for c in ("intercept", "slope", "resid_sd", "slope_se")}
    values = {c: fits[c].to_numpy(dtype=float) for c in out}
    for row, (scope, group, method) in enumerate(row_keys(fits)):
        i = index.get((scope, group))
        if i is None or method not in methods:
            continue
        j = methods.index(method)
        for c in out:
            out[c][i, j] = values[c][row]
    return out


# --------------------------------------------------------------------------
# the points the figures draw


class DrawnPoints:
    """The points the figures draw, picked while the points stream past in file order.

    Of the run's ``n`` points, those at the positions
    :func:`~scaling.render.thinning.subset_index` picks (all of them up to
    :data:`~scaling.render.thinning.MAX_DRAWN_POINTS`): the points the in-memory
    figures draw, whose points are the cleaned rows in file order.  Each chunk costs
    one ``searchsorted`` on the sorted positions; at most ``MAX_DRAWN_POINTS`` points
    are held.

    Parameters
    ----------
    n : int
        Points of the run (the pooled n).
    labels : sequence of str
        The run's group names (``codes`` index into them); None without groups.
    base : float or None
        Log base (natural x and y are ``base ** log`` when a chunk has only the logs).
    start : int
        Position of the first point this collector sees.
    positions : array of int, optional
        Sorted positions to pick instead of those of ``n`` (a Dask partition's own,
        counted from its first usable row).
    """

    def __init__(self, n: int, labels=None, base=None, *, start: int = 0,
                 positions=None) -> None:
        if positions is None:
            keep = subset_index(n, MAX_DRAWN_POINTS)
            positions = np.arange(n, dtype=np.int64) if keep is None else keep
        self.positions = np.asarray(positions, dtype=np.int64)
        #: every point is drawn (at most MAX_DRAWN_POINTS): positions 0, 1, ..., n - 1
        self.every = bool(self.positions.size <= MAX_DRAWN_POINTS and (
            not self.positions.size or self.positions[-1] == self.positions.size - 1))
        self.labels = None if labels is None else np.asarray(labels, dtype=object)
        self.base = base
        self.seen = start
        self.parts: list = []

    def starting_at(self, start: int) -> "DrawnPoints":
        """An empty collector of the same positions whose first point is at ``start``
        (a later run of chunks, read elsewhere; its ``parts`` follow this one's)."""
        return DrawnPoints(0, self.labels, self.base, start=start, positions=self.positions)

    def add(self, X, Y, rows, codes=None, x=None, y=None) -> None:
        """The next ``len(X)`` points (log x, log y, row numbers, group codes; natural
        ``x, y`` when at hand)."""
        first = self.seen
        self.seen += int(X.size)
        lo, hi = np.searchsorted(self.positions, (first, self.seen))
        if hi <= lo:
            return
        i = self.positions[lo:hi] - first
        self.parts.append((np.asarray(rows)[i], _natural(X[i], x, i, self.base),
                           _natural(Y[i], y, i, self.base), X[i], Y[i],
                           None if codes is None else np.asarray(codes)[i]))

    def table(self) -> pd.DataFrame:
        """``row, x, y, log_x, log_y`` (and ``group``) of the points picked, in order."""
        cols = list(zip(*self.parts)) if self.parts else [[]] * 6
        out = {name: (np.concatenate(c) if len(c) else np.empty(0, dtype=dtype))
               for name, c, dtype in zip(("row", "x", "y", "log_x", "log_y"), cols,
                                         (np.int64, float, float, float, float))}
        frame = pd.DataFrame(out)
        if self.labels is not None:
            codes = np.concatenate(cols[5]) if len(cols[5]) else np.empty(0, dtype=np.intp)
            frame["group"] = self.labels[codes]
        return frame


def _natural(logs, values, i, base):
    """Natural units of the picked points: the values read when at hand, else ``base ** log``."""
    if values is not None:
        return np.asarray(values, dtype=float)[i]
    if base is None:
        return np.array(logs, dtype=float)
    return np.power(base, logs)


def _unit_points(units: pd.DataFrame, base, grouped: bool) -> pd.DataFrame:
    """The points drawn among the unit means (held in memory, in row order as in memory)."""
    keep = subset_index(len(units), MAX_DRAWN_POINTS)
    pts = units if keep is None else units.iloc[keep]
    lx, ly = (pts[c].to_numpy(dtype=float) for c in ("log_x", "log_y"))
    frame = pd.DataFrame({"row": pts["row"].to_numpy(dtype=np.int64),
                          "unit": pts["unit"].to_numpy(),
                          "x": lx if base is None else np.power(base, lx),
                          "y": ly if base is None else np.power(base, ly),
                          "log_x": lx, "log_y": ly})
    if grouped:
        frame["group"] = pts["group"].astype(str).to_numpy()
    return frame


# --------------------------------------------------------------------------
# reading the rows again


def _params(m, lines: dict, base, methods: list, checked: str, check_groups: bool) -> dict:
    """ResidualSums arguments; ``checked`` is the method whose strong points are listed
    (those of the pooled line only, set 0: points_to_check reads no other), and the
    groups' residual checks are summed only when ``check_groups`` (the diagnostics
    stage checks each group)."""
    j = methods.index(checked)
    sets = np.zeros(np.size(m.n), dtype=bool)
    sets[0] = True
    return dict(intercept=lines["intercept"], slope=lines["slope"], mean_x=m.mean_x,
                mean_y=m.mean_y, sxx=m.sxx, syy=m.syy, sxy=m.sxy, n=m.n,
                resid_sd=lines["resid_sd"], log_base=base, influence_method=checked,
                influence_slope=lines["slope"][:, j], slope_se=lines["slope_se"][:, j],
                checked=np.ones_like(sets) if check_groups else sets, strong=sets)


def _feed(acc: ResidualSums | None, between, part, cfg, base, label_index, grouped: bool,
          first_row: int, drawn: DrawnPoints | None = None) -> tuple:
    """Clean one chunk and add its usable rows; (rows read, rows used).  ``acc`` None:
    the rows are only looked at for the points drawn."""
    d = cfg.data
    c = clean_chunk(part, d.x, d.y, d.group, d.decimal)
    rows = first_row + np.arange(c.n_rows, dtype=np.int64) + 1      # 1-based data rows
    x, y = c.x, c.y
    codes = c.codes
    if c.bad is not None:
        keep = ~c.bad
        x, y, rows = x[keep], y[keep], rows[keep]
        codes = codes[keep] if codes is not None else None
    if not x.size:
        return c.n_rows, 0
    add_rows(acc, between, c.labels, codes, to_log(x, base), to_log(y, base), rows,
             label_index, grouped, drawn, x, y)
    return c.n_rows, int(x.size)


def _feed_points(acc: ResidualSums, between, points: pd.DataFrame, label_index,
                 grouped: bool) -> None:
    """Add points held in memory (``row, group, log_x, log_y``) to the sums."""
    X = points["log_x"].to_numpy(dtype=float)
    Y = points["log_y"].to_numpy(dtype=float)
    rows = points["row"].to_numpy(dtype=np.int64)
    acc.add(np.zeros(X.size, dtype=np.intp), X, Y, rows)          # the pooled set
    if grouped:
        local = label_index.get_indexer(points["group"].astype(str))
        acc.add(1 + local, X, Y, rows)
        between.add(local, X, Y)


def _partition_sums(pdf, cfg, base, params, between_params, labels, grouped, positions):
    """The residual sums of one Dask partition (rows numbered from 1 within it), its rows
    read and used, and, when ``positions`` (sorted, among its usable rows) is not None,
    its points at those positions, the points the figures draw."""
    pdf.columns = [str(col).strip() for col in pdf.columns]
    acc = ResidualSums(**params)
    between = GroupResidualSums(**between_params)
    drawn = DrawnPoints(0, positions=positions) if positions is not None else None
    n_rows, n_used = _feed(acc, between, pdf, cfg, base, pd.Index(labels), grouped, 0, drawn)
    return acc, between, n_rows, n_used, (drawn.parts if drawn is not None else None)


def _partition_drawn(pdf, cfg, base, labels, grouped, positions):
    """The points of one Dask partition at ``positions`` (among its usable rows)."""
    pdf.columns = [str(col).strip() for col in pdf.columns]
    drawn = DrawnPoints(0, positions=positions)
    _feed(None, None, pdf, cfg, base, pd.Index(labels), grouped, 0, drawn)
    return drawn.parts


def _partition_picks(drawn: DrawnPoints | None, partition_points, n_parts: int) -> list:
    """Each Dask partition's positions (among its usable rows) to pick for ``drawn``, or
    None: all its points when every point is drawn; else those the first pass's counts
    (``partition_points``) place in it; without counts, none (a further read picks)."""
    if drawn is None:
        return [None] * n_parts
    if drawn.every:
        return [np.arange(drawn.positions.size)] * n_parts
    if partition_points is None or len(partition_points) != n_parts:
        return [None] * n_parts
    used = np.cumsum([0] + [u for _, u in partition_points])
    cut = np.searchsorted(drawn.positions, used)
    return [drawn.positions[cut[i]:cut[i + 1]] - used[i] if cut[i + 1] > cut[i] else None
            for i in range(n_parts)]


def _offset_parts(parts, rows: int) -> list:
    """A partition's picked points with its row numbers moved on by ``rows``."""
    return [(p[0] + rows, *p[1:]) for p in parts]


def residual_sums(cfg, gm, fits: pd.DataFrame, methods: list, base, checked: str,
                  spill=None, drawn: DrawnPoints | None = None,
                  partition_points=None) -> tuple:
    """Read the rows again: the filled :class:`ResidualSums`, the group-residual sums of
    the pooled ``checked`` line, the set keys and the sets' moments.

    ``spill``: the first pass's :class:`~scaling.run.table_moments.RowSpill`; when
    usable its chunks are read instead of the file (the same rows, chunk for chunk).
    ``drawn``: also pick the points the figures draw (filled in place).  With Dask a
    partition's points are numbered from where the partitions before it end:
    ``partition_points``, each partition's (rows read, points used) counted by the first
    pass, tells where, so the points are picked in this one read; without those counts
    (or should a partition's count differ) they are picked in a further read of the
    partitions that hold some (holding the partitions would hold every row).
    """
    d = cfg.data
    grouped = bool(d.group)
    m, keys = _sets(gm, grouped)
    lines = _lines(fits, keys, methods)
    # the groups are checked one by one only up to groups.diagnostics_max (_diagnostics)
    check_groups = (cfg.diagnostics.enabled
                    and len(keys) - 1 <= cfg.groups.diagnostics_max)
    params = _params(m, lines, base, methods, checked, check_groups)
    j = methods.index(checked)
    between_params = dict(intercept=float(lines["intercept"][0, j]),
                          slope=float(lines["slope"][0, j]),
                          mean_x=gm.moments.mean_x, mean_y=gm.moments.mean_y)
    label_index = pd.Index(np.asarray(gm.labels, dtype=str))
    acc = ResidualSums(**params)
    between = GroupResidualSums(**between_params)
    if gm.units is not None:
        # data.average_within: the points are the unit means the first pass kept (one
        # row per unit, numbered by its first row), not the rows of the file.
        _feed_points(acc, between, gm.units, label_index, grouped)
        return acc, (between if grouped else None), keys, m
    path = Path(d.file)
    kind = file_kind(path)
    columns = [d.x, d.y] + ([d.group] if d.group else [])
    sep = _sep(cfg)
    if spill is not None and spill.usable:   # in two halves on two cores (above a size)
        acc, between = spill_sums(spill, params, between_params, label_index, grouped, drawn)
    elif cfg.engine == "dask":
        # Dask partitions are read and cleaned again: holding them (persist) would keep
        # every row in the workers' memory, which this road exists to avoid.
        import dask   # the first pass has checked that it is installed
        parts = dask_partitions(path, kind, columns, d.chunk_size, sep, d.decimal)
        picks = _partition_picks(drawn, partition_points, len(parts))
        tasks = [dask.delayed(_partition_sums)(p, cfg, base, params, between_params,
                                               list(label_index), grouped, pick)
                 for p, pick in zip(parts, picks)]
        offset = used = 0
        firsts = []   # (first row, first point) of each partition
        seen, found = [], []   # each partition's (rows read, points used); points picked
        for part, part_between, n_rows, n_used, picked in dask_compute(tasks, cfg.scheduler):
            part.offset_rows(offset)    # file order
            acc.merge(part)
            between.merge(part_between)
            found += _offset_parts(picked, offset) if picked else []
            firsts.append((offset, used))
            seen.append((n_rows, n_used))
            offset, used = offset + n_rows, used + n_used
        # picked right: every point, or positions placed by the counts this read saw too
        picked_here = drawn is not None and (drawn.every or (
            partition_points is not None
            and [tuple(c) for c in partition_points] == seen))
        if picked_here:
            drawn.parts += found
        if drawn is not None and not picked_here:
            ends = [u for _, u in firsts[1:]] + [used]
            cut = np.searchsorted(drawn.positions, [u for _, u in firsts] + [used])
            later, where = [], []
            for i, (p, (rows, first)) in enumerate(zip(parts, firsts)):
                if cut[i + 1] > cut[i] and ends[i] > first:
                    later.append(dask.delayed(_partition_drawn)(
                        p, cfg, base, list(label_index), grouped,
                        drawn.positions[cut[i]:cut[i + 1]] - first))
                    where.append(rows)
            for picked, rows in zip(dask_compute(later, cfg.scheduler) if later else (),
                                    where):
                drawn.parts += _offset_parts(picked, rows)
    else:
        offset = 0
        for file in files_of(path, kind):
            for part in read_chunks(file, kind, columns, d.chunk_size, "pandas", sep,
                                    d.decimal):
                offset += _feed(acc, between, part, cfg, base, label_index, grouped, offset,
                                drawn)[0]
    return acc, (between if grouped else None), keys, m


# --------------------------------------------------------------------------
# the run's tables


def second_pass(cfg, gm, fits: pd.DataFrame, line_fits: dict, *, units: dict,
                base, other_tables: dict | None = None,
                point_sets: dict | None = None, spill=None,
                partition_points=None) -> SecondPass:
    """Residual sums over a second read of the file, and the tables they give.

    Parameters
    ----------
    cfg : Config
    gm : GroupedMoments
        The first pass's moments (with the higher sums).
    fits : DataFrame
        The moments path's fits table (pooled and group rows).
    line_fits : dict
        The path's LineFits (pooled); group fits are packaged here for the
        predictions and saved fits.
    units : dict
    base : float or None
    other_tables : dict, optional
        The run's tables so far (``group_tests`` decides the answer's model,
        whose checks the verdict sentences speak of).
    point_sets : dict, optional
        ``(scope, group) -> points`` held in memory (the group means): their fits'
        accuracy and factors are measured on them, as on the in-memory road.
    spill : RowSpill, optional
        The first pass's rows on disk (read instead of the file when usable).
    partition_points : sequence, optional
        With Dask: each partition's (rows read, points used) from the first pass
        (:func:`residual_sums`).
    """
    other_tables = other_tables or {}
    methods = list(dict.fromkeys(fits["method"]))
    # the pooled line whose points are checked one by one, as in memory (points_to_check)
    checked = primary_method(cfg)
    if checked not in methods:
        checked = methods[0]
    n_points = int(np.atleast_1d(gm.pooled.n)[0])
    drawn = (None if gm.units is not None or not _draws_points(cfg)
             else DrawnPoints(n_points, gm.labels if cfg.data.group else None, base))
    acc, between, keys, m = residual_sums(cfg, gm, fits, methods, base, checked, spill,
                                          drawn, partition_points)
    res = acc.result()
    # a point's name: its unit under data.average_within (as in memory), else none
    names = ({} if gm.units is None
             else dict(zip(gm.units["row"].tolist(), gm.units["unit"].tolist())))

    # LineFits of every estimable fit (pooled ones as the path made them); each method
    # fitted to every set in one vectorised call, then packaged set by set.
    all_fits = dict(line_fits)
    rng = dict(zip(row_keys(fits), zip(*(fits[c].tolist()
                                       for c in ("slope", "x_min", "x_max", "y_min", "y_max")))))
    fitted = {}
    for method in methods:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            fitted[method] = fit_moments(m, method, confidence=cfg.model.confidence)
    for method in methods:   # listed method by method, as the fits always were
        keep, x_ranges, y_ranges = [], [], []
        for scope, group in keys:
            key = (scope, group, method)
            r = rng.get(key)   # slope, x_min, x_max, y_min, y_max
            new = not (key in all_fits or r is None or not np.isfinite(r[0]))
            keep.append(new)
            x_ranges.append((r[1], r[2]) if new else None)
            y_ranges.append((r[3], r[4]) if new else None)
        made = line_fits_from_result(fitted[method], m, method,
                                     confidence=cfg.model.confidence, log_base=base,
                                     x_ranges=x_ranges, y_ranges=y_ranges, keep=keep)
        for (scope, group), new, fit in zip(keys, keep, made):
            if new:
                all_fits[(scope, group, method)] = fit
    extra = _accuracy(res, keys, methods, all_fits)
    if point_sets:   # the line through the group means: its points are in memory
        held = {k: f for k, f in all_fits.items() if (k[0], k[1]) in point_sets}
        extra.update(accuracy_and_factors(held, point_sets)[1])
    saved = saved_fits_of(all_fits, extra)
    predicted = predictions_from_factors(cfg, fits=fits, line_fits=all_fits, saved=saved,
                                         extra=extra, units=units, base=base,
                                         group_tests=(other_tables or {}).get("group_tests"))
    tables = dict(predicted.tables)
    notes = list(predicted.notes)
    messages = list(predicted.messages)
    # before the diagnostics, whose words read it (as in memory)
    tables["points_to_check"] = _points_to_check(
        predicted.fits, all_fits, tables.get("predictions"), res,
        ("pooled", "", checked), between.anova() if between is not None else None,
        cfg.diagnostics.alpha, names)
    if cfg.diagnostics.enabled:
        diag, diag_notes, diag_messages = _diagnostics(cfg, res, m, keys, methods, all_fits,
                                                       base, tables, other_tables, names)
        tables.update(diag)
        notes += diag_notes
        messages += diag_messages
    notes.append(skipped_note(cfg.diagnostics.enabled and cfg.diagnostics.error_structure))
    if gm.units is not None and _draws_points(cfg):
        tables[DRAWN_TABLE] = _unit_points(gm.units, base, bool(cfg.data.group))
    elif drawn is not None:
        tables[DRAWN_TABLE] = drawn.table()
    if (DRAWN_TABLE in tables and "residuals" in cfg.figures.kinds
            and n_points > MAX_DRAWN_POINTS):
        notes.append(drawn_quantiles_note(n_points))
    return SecondPass(fits=predicted.fits, saved_fits=predicted.saved_fits, tables=tables,
                      checks=res, line_fits=all_fits, messages=tuple(messages),
                      notes=tuple(notes))


#: The accuracy and factor columns of fits.csv and the :class:`StreamedChecks` field of each.
_ACCURACY = (("see", "see"), ("percent_see", "percent_see"), ("percent_pe", "percent_pe"),
             ("smearing_factor", "smearing"), ("parametric_factor", "parametric"),
             ("ratio_factor", "ratio"))


def _accuracy(res: StreamedChecks, keys: list, methods: list, all_fits: dict) -> dict:
    """``(scope, group, method) -> {column: float}`` of the accuracy and factor columns,
    for every fit of ``all_fits`` whose set has at least 3 points; set by set, method by
    method (the order of the dict), each column read out of its array once."""
    names = [c for c, _ in _ACCURACY]
    values = [np.asarray(getattr(res, name), dtype=float) for _, name in _ACCURACY]
    big = np.flatnonzero(~(np.asarray(res.n) < 3)).tolist()
    rows = {j: list(zip(*(v[big, j].tolist() for v in values)))
            for j in range(len(methods))}
    extra = {}
    for at, i in enumerate(big):
        scope, group = keys[i]
        for j, method in enumerate(methods):
            key = (scope, group, method)
            if key in all_fits:
                extra[key] = dict(zip(names, rows[j][at]))
    return extra


#: Figure kinds that draw the run's points.
POINT_FIGURES = ("scaling", "natural", "residuals")


def _draws_points(cfg) -> bool:
    """True when a figure of the run draws its points (its second pass picks them)."""
    return any(kind in POINT_FIGURES for kind in cfg.figures.kinds)


def drawn_quantiles_note(n: int) -> str:
    """What the residual figure of a large-data run shows differently (above the points drawn)."""
    shown = f"{MAX_DRAWN_POINTS:,}".replace(",", "\u2009")
    total = f"{n:,}".replace(",", "\u2009")
    return (f"The residual figure's normal-quantile panels rank the {shown} points drawn "
            f"among themselves, and its limits hold those points: ranking all {total} "
            "residuals needs every row at once (the other panels and figures are those of "
            "the in-memory run).")


def skipped_note(error_structure: bool = False) -> str:
    """The one note naming what the moments path leaves out."""
    left = ROW_ONLY_STAGES + (("the additive-versus-multiplicative error comparison "
                               "(an iterative fit on the natural scale)",)
                              if error_structure else ())
    return ("The large-data path reads the rows twice (moments, then residual sums) and "
            "never holds them all, so it leaves out what needs every row at once: "
            f"{', '.join(left)}; its normality check is D'Agostino-Pearson "
            "(residual skewness and kurtosis) instead of Shapiro-Wilk, and it lists at most "
            f"{TOP_K} influential rows per fit.")


def _many_influential(n_above: int, rows) -> str:
    """The influence verdict when more rows pass 4/n than the pass keeps."""
    shown = ", ".join(str(r) for r in rows[:5])
    return (f"{n_above} row(s) pull the line strongly (Cook's distance > 4/n): row {shown} "
            f"and {n_above - min(len(rows), 5)} more; the {len(rows)} largest are in "
            "influential_rows.csv; check them and refit without them to see the effect")


def _diagnostics(cfg, res: StreamedChecks, m, keys, methods, all_fits, base, tables: dict,
                 other_tables: dict, names: dict) -> tuple:
    """diagnostics, curvature and influential_rows tables, notes and verdict sentences."""
    alpha = cfg.diagnostics.alpha
    n_groups = len(keys) - 1
    notes = []
    todo = range(len(keys))
    if n_groups > cfg.groups.diagnostics_max:
        todo = [0]
        notes.append(f"Per-group diagnostics skipped: {n_groups} groups is more than "
                     f"groups.diagnostics_max = {cfg.groups.diagnostics_max}; the pooled "
                     "line is checked.")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        quad = quadratic_from_moments(m) if m.has_higher else None
        exact = np.asarray(exact_fit(m), dtype=bool)
    targets = exponent_targets(cfg)
    diag, infl, curv = [], [], []
    results: dict = {}
    for i in todo:
        scope, group = keys[i]
        n = int(res.n[i])
        if n < MIN_N or not (m.sxx[i] > 0):
            continue
        fitted = [j for j, meth in enumerate(methods) if (scope, group, meth) in all_fits]
        if not fitted:
            continue
        lx = to_log(np.array([all_fits[(scope, group, methods[fitted[0]])].x_range[0],
                              all_fits[(scope, group, methods[fitted[0]])].x_range[1]]),
                    base)
        q = ({k: float(np.asarray(v)[i]) for k, v in quad.items()} if quad is not None
             else None)
        threshold = 4.0 / n
        cooks = res.cooks_distance[i]
        above = np.flatnonzero(cooks > threshold)
        top = float(np.nanmax(cooks)) if np.isfinite(cooks).any() else math.nan
        n_above = int(res.n_influential[i])
        curvature = _curvature(q, lx, targets, base, exact[i], n, all_fits, keys[i], methods,
                               fitted)
        for j in fitted:
            method = methods[j]
            checks = _checks(res, i, j, q, lx, exact[i], top, res.cooks_rows[i][above], alpha)
            results[(scope, group, method)] = Diagnostics(
                method=method, n=n, alpha=alpha, checks=tuple(checks), curvature=curvature,
                residuals=np.empty(0), cooks_distance=cooks[np.isfinite(cooks)],
                influence_threshold=threshold, influential_rows=checks[-1].rows,
                rows=res.cooks_rows[i][res.cooks_rows[i] >= 0])
            for c in checks:
                verdict = (_many_influential(n_above, c.rows)
                           if c.check == "influence" and c.flagged and n_above > len(c.rows)
                           else check_verdict(c))
                diag.append({"scope": scope, "group": group, "method": method,
                             **c.to_record(), "verdict": verdict})
            if not exact[i]:
                for k in above:
                    infl.append({"scope": scope, "group": group, "method": method,
                                 "row": int(res.cooks_rows[i][k]),
                                 "label": names.get(int(res.cooks_rows[i][k]), ""),
                                 "cooks_distance": float(cooks[k])})
        e_lo, e_hi = (float(v) for v in curvature.local_exponent(lx))
        common = {"scope": scope, "group": group, "n": n, "quadratic": curvature.quadratic,
                  "quadratic_se": curvature.quadratic_se, "statistic": curvature.statistic,
                  "df": curvature.df, "p_value": curvature.p_value, "exponent_at_x_min": e_lo,
                  "exponent_at_x_max": e_hi}
        for target, xs, inside in curvature.crossings:
            curv.append({**common, "exponent": target, "x_at_exponent": xs,
                         "within_data": inside})
        if not curvature.crossings:
            curv.append({**common, "exponent": np.nan, "x_at_exponent": np.nan,
                         "within_data": None})
    out = {
        "diagnostics": pd.DataFrame(diag, columns=DIAGNOSTIC_COLUMNS),
        "influential_rows": influence_table(infl),
        "curvature": pd.DataFrame(curv, columns=CURVATURE_COLUMNS),
    }
    answer = answer_line(other_tables.get("group_tests"), cfg.model.methods,
                         getattr(cfg.model, "primary", None), cfg.model.confidence)
    # the verdicts name a point by its unit (data.average_within), as in memory
    named = ({("pooled", ""): pd.DataFrame({"row": list(names), "unit": list(names.values())})}
             if names else {})
    messages = diagnostics_messages(results, {}, named, cfg, answer=answer,
                                    points=tables.get("points_to_check")) if results else []
    where = {k: i for i, k in enumerate(keys)}
    if any(res.n_influential[where[k[:2]]] > len(d.influential_rows)
           for k, d in results.items()):   # the sentence counts every row, not the k kept
        messages = [_recount(t, results, res, keys, answer) if t.startswith("Influence:")
                    else t for t in messages]
    return out, notes, messages


def _recount(text: str, results: dict, res: StreamedChecks, keys, answer) -> str:
    """The influence sentence with the rows above 4/n counted in the pass (not the k kept)."""
    line, method = answer
    if line == "groups":
        chosen = [(g, d) for (s, g, m), d in results.items() if s == "group" and m == method]
        kept = len({r for _, d in chosen for r in d.influential_rows})
        where = {k: i for i, k in enumerate(keys)}
        total = int(sum(res.n_influential[where[("group", g)]] for g, _ in chosen))
    else:
        pooled = next((d for (s, _, _), d in results.items() if s == "pooled"), None)
        kept = len(pooled.influential_rows) if pooled is not None else 0
        total = int(res.n_influential[0])
    if total <= kept:
        return text
    text = text.replace(f"Influence: {kept} point(s)", f"Influence: {total} point(s)", 1)
    if kept > 4:
        return text.replace(f" and {kept - 4} more.", f" and {total - 4} more.", 1)
    return text


def _curvature(q, lx, targets, base, exact: bool, n: int, all_fits, key, methods, fitted):
    """The :class:`Curvature` record of one set (what the verdict sentences read)."""
    if q is None or exact:
        first = all_fits[(key[0], key[1], methods[fitted[0]])]
        return Curvature(intercept=first.intercept, linear=first.slope, quadratic=0.0,
                         quadratic_se=math.nan, statistic=math.nan, df=float(n - 3),
                         p_value=math.nan, log_base=base, crossings=())
    return Curvature(intercept=q["intercept"], linear=q["linear"], quadratic=q["quadratic"],
                     quadratic_se=q["quadratic_se"], statistic=q["statistic"], df=q["df"],
                     p_value=q["p_value"], log_base=base,
                     crossings=tuple(_crossings(q, targets, lx, base)))


def _crossings(q: dict, targets, lx, base) -> list:
    """(target, x*, inside the data) where the local exponent reaches each target."""
    out = []
    for target in targets:
        if q["quadratic"] == 0 or not np.isfinite(q["quadratic"]):
            out.append((target, math.nan, False))
            continue
        at = (target - q["linear"]) / (2 * q["quadratic"])
        with np.errstate(over="ignore"):
            xs = float(at) if base is None else float(np.power(np.float64(base), at))
        out.append((target, xs, bool(lx[0] <= at <= lx[1])))
    return out


def _checks(res: StreamedChecks, i: int, j: int, q, lx, exact: bool, top: float, rows,
            alpha: float) -> list:
    """The four checks of one fit, as :class:`Check` records (the in-memory road's shape)."""
    if exact:
        return [Check(check=name, test=test, statistic=math.nan, df=math.nan,
                      p_value=math.nan, estimate=math.nan, flagged=False, finding="exact_fit")
                for name, test in (("normality", "D'Agostino-Pearson"),
                                   ("constant_variance", "Breusch-Pagan"),
                                   ("curvature", "quadratic term t"),
                                   ("influence", "Cook's distance"))]
    out = []
    p = float(res.normality_p[i, j])
    flagged = bool(p < alpha)
    out.append(Check(check="normality", test="D'Agostino-Pearson",
                     statistic=float(res.normality_statistic[i, j]), df=2.0, p_value=p,
                     estimate=math.nan, flagged=flagged,
                     finding="flagged" if flagged else "clear"))
    p = float(res.bp_p[i, j])
    flagged = bool(p < alpha)
    out.append(Check(check="constant_variance", test="Breusch-Pagan",
                     statistic=float(res.bp_statistic[i, j]), df=1.0, p_value=p,
                     estimate=math.nan, flagged=flagged,
                     finding="flagged" if flagged else "clear",
                     direction=int(res.bp_direction[i, j]) if flagged else 0))
    if q is not None:
        flagged = bool(q["p_value"] < alpha)
        e_lo, e_hi = (float(v) for v in local_exponents(q, lx))
        out.append(Check(check="curvature", test="quadratic term t", statistic=q["statistic"],
                         df=q["df"], p_value=q["p_value"], estimate=q["quadratic"],
                         flagged=flagged, finding="flagged" if flagged else "clear",
                         direction=1 if q["quadratic"] > 0 else -1,
                         exponent_low=e_lo, exponent_high=e_hi))
    flagged = len(rows) > 0
    out.append(Check(check="influence", test="Cook's distance", statistic=top, df=math.nan,
                     p_value=math.nan, estimate=top, flagged=flagged,
                     finding="flagged" if flagged else "clear",
                     rows=tuple(int(r) for r in rows)))
    return out


def _point_checks(res: StreamedChecks, fit, anova, alpha: float, names: dict) -> list:
    """Strong points of the pooled line and its residuals between groups (set 0)."""
    out = []
    for i in np.flatnonzero(res.strong_rows[0] >= 0):
        out.append(PointCheck(severity="strong", kind="influence",
                              row=int(res.strong_rows[0][i]),
                              label=names.get(int(res.strong_rows[0][i]), ""),
                              value=float(res.strong_cooks[0][i]), method=fit.method,
                              slope=float(fit.slope),
                              slope_without=float(res.strong_slope_without[0][i]),
                              slope_se=float(fit.slope_se)))
    if anova is not None and np.isfinite(anova["p_value"]) and anova["p_value"] < alpha:
        out.append(PointCheck(severity="mild", kind="group_residuals", row=None, label="",
                              value=anova["p_value"], statistic=float(anova["statistic"]),
                              df1=int(anova["df1"]), df2=int(anova["df2"])))
    return out


def _points_to_check(fits: pd.DataFrame, all_fits: dict, preds, res: StreamedChecks,
                     checked_key, anova, alpha: float, names: dict) -> pd.DataFrame:
    """points_to_check: the pooled line's strong points and residuals between groups,
    and every fit's factor and interval checks (as :func:`scaling.stats.influence.points_to_check`
    and :func:`~scaling.stats.influence.fit_checks`).

    The factor ratios and the estimates' intervals of all fits are screened in
    array passes first; :func:`~scaling.stats.influence.fit_checks` (which finds
    nothing elsewhere) then runs only on the fits the screen keeps and on the
    checked pooled line.
    """
    keys = list(row_keys(fits))
    nan = np.full(len(fits), np.nan)
    smearing, parametric = (fits[c].to_numpy(dtype=float) if c in fits.columns else nan
                            for c in ("smearing_factor", "parametric_factor"))
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        ratio = smearing / parametric
        odd = (np.isfinite(smearing) & np.isfinite(parametric) & (parametric > 0)
               & ~((1 / SMEARING_RATIO_LIMIT <= ratio) & (ratio <= SMEARING_RATIO_LIMIT)))
    pred_keys: list = []
    if preds is not None and len(preds):
        pred_keys = list(row_keys(preds))
        y, lo, hi = (preds[c].to_numpy(dtype=float) for c in ("y", "y_low", "y_high"))
        with np.errstate(invalid="ignore"):
            outside = (np.isfinite(y) & np.isfinite(lo) & np.isfinite(hi)
                       & ~((lo <= y) & (y <= hi)))
        flagged = {pred_keys[i] for i in np.flatnonzero(outside)}
    else:
        flagged = set()
    chosen = [i for i, key in enumerate(keys)
              if odd[i] or key == checked_key or key in flagged]
    wanted = {keys[i] for i in chosen}
    estimates: dict = {}      # (scope, group, method) -> the predictions' estimates, once
    if pred_keys and wanted:
        xs, ys, los, his = (preds[c].tolist() for c in ("x", "y", "y_low", "y_high"))
        for i, key in enumerate(pred_keys):
            if key in wanted:
                estimates.setdefault(key, []).append(
                    (f"at x = {xs[i]:g} ", ys[i], los[i], his[i]))
    ns = fits["n"].tolist()
    records = []
    for i in chosen:
        key = keys[i]
        if key not in all_fits or not np.isfinite(smearing[i]):
            continue
        est = estimates.get(key, ())
        try:
            found = fit_checks(smearing_factor=float(smearing[i]),
                               parametric_factor=float(parametric[i]), estimates=est)
        except ScalingError:
            continue
        if key == checked_key and ns[i] >= MIN_N:
            found = _point_checks(res, all_fits[key], anova, alpha, names) + found
            found.sort(key=lambda c: c.severity != "strong")
        records += [{"scope": key[0], "group": key[1], "method": key[2],
                     **c.to_record(), "reason": point_check_reason(c)} for c in found]
    table = pd.DataFrame(records, columns=POINTS_TO_CHECK_COLUMNS)
    table["row"] = table["row"].astype("Int64")
    return table


@contextmanager
def _collector_paused():
    """Python's cyclic garbage collector paused (as it was after): the pass makes fit
    objects and dicts by the ten thousand, none in a reference cycle, and each burst of
    new objects would otherwise set off collections that walk every live object."""
    was = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was:
            gc.enable()


def with_second_pass(result, cfg, gm, units, base, *, point_sets: dict | None = None,
                     spill=None, partition_points=None):
    """``result`` (a RunResult of the moments path) with the second pass's tables;
    ``point_sets``: points held in memory (the group means), measured as in memory;
    ``spill``: the first pass's rows on disk, read instead of the file and then deleted;
    ``partition_points``: with Dask, each partition's (rows read, points used)."""
    try:
        with _collector_paused():
            extra = second_pass(cfg, gm, result.fits, result.line_fits, units=units,
                                base=base, other_tables=result.tables,
                                point_sets=point_sets, spill=spill,
                                partition_points=partition_points)
    finally:
        if spill is not None:
            spill.close()
    return replace(result, fits=extra.fits, saved_fits=extra.saved_fits,
                   line_fits=extra.line_fits, tables={**result.tables, **extra.tables},
                   messages=result.messages + extra.messages,
                   warnings=result.warnings + extra.notes)
