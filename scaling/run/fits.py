"""The fitting stage of a run: fits.csv rows and LineFit objects, each fit computed once.

:func:`fit_stage` fits the pooled line and every group's line.  Moment lines
(OLS, SMA, MA, Deming) are fitted to every group at once from group moments;
each fits.csv row (:func:`scaling.stats.fit_rows.fit_row`) and each
:class:`~scaling.stats.lines.LineFit` is read from that one vectorised result.
Row-based lines (robust lines) are fitted per set of points by
:data:`scaling.stats.robust.ROW_METHODS`.

:func:`fits_table_stage` assembles ``fits.csv`` and ``slope_tests.csv`` from
the rows and fits of every stage before it (ordinary, group means, common
slope, phylogenetic).
"""

from __future__ import annotations

import warnings
import weakref
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from ..render.wording import fit_note, fit_notes_column
from ..errors import DataError
from ..render.wording import line_method_messages, pooled_fit_messages
from ..stats.fit_rows import ESTIMATE_COLUMNS, fit_row
from ..stats.lines import MIN_N, base_label, fit_moments
from ..stats.line_results import line_fits_from_result, slope_tests_for
from ..stats.moments import group_extremes, group_moments, moments, sort_by_group
from ..stats.robust import ROW_METHODS, deming_moments
from ..stats.schema import FIT_COLUMNS, PHYLO_FIT_COLUMNS, SLOPE_TEST_COLUMNS, is_moment_method

__all__ = ["FitStage", "FitsTable", "fit_stage", "fits_table_stage", "value_range",
           "fit_moment_rows", "row_method_fit", "blank_numbers", "robust_n_boot",
           "nothing_estimable", "slope_tests", "with_note", "with_ranges", "split_by_group",
           "set_columns", "known_group_codes", "GroupPoints"]


@dataclass(frozen=True, slots=True, kw_only=True)
class FitStage:
    """The pooled and per-group fits.

    Attributes
    ----------
    rows : tuple of dict
        fits.csv rows (estimable or not), pooled first, then the groups.
    line_fits : dict
        ``(scope, group, method) -> LineFit`` for the estimable ones.
    point_sets : dict
        ``("pooled", "")`` -> the points fitted (a DataFrame); ``("group", name)`` ->
        the group's rows of them (a :class:`GroupPoints`).
    notes : tuple of str
    """

    rows: tuple
    line_fits: dict
    point_sets: dict
    notes: tuple = ()


@dataclass(frozen=True, slots=True, kw_only=True)
class FitsTable:
    """``fits.csv`` and ``slope_tests.csv`` as assembled from every fitting stage.

    Attributes
    ----------
    fits, slope_tests : DataFrame
    line_fits : dict
        The estimable fits in the order of the fits table.
    messages : tuple of str
        The pooled exponents and their tests (they lead the findings).
    method_messages : tuple of str
        Whether the choice of line matters for these data.
    """

    fits: pd.DataFrame
    slope_tests: pd.DataFrame
    line_fits: dict
    messages: tuple = ()
    method_messages: tuple = ()


def value_range(values: np.ndarray) -> tuple:
    return (float(np.min(values)), float(np.max(values)))


def robust_n_boot(cfg) -> int:
    """Resamples behind the robust lines' intervals: resampling.bootstrap, else 999."""
    return cfg.resampling.bootstrap or 999


def fit_stage(cfg, state) -> FitStage:
    """Fit every method to the pooled points and to each group (``state.data.points``)."""
    base = state.base
    pts = state.data.points
    X, Y = pts["log_x"].to_numpy(), pts["log_y"].to_numpy()
    rows: list[dict] = []
    line_fits: dict = {}
    notes: list[str] = []
    pooled_m = moments(X, Y)
    # kept for the diagnostics, which would otherwise compute the same moments again
    _MOMENTS[id(pts)] = (weakref.ref(pts, _forget(id(pts), _MOMENTS)), pooled_m)
    pooled_m = type(pooled_m)(**{k: np.atleast_1d(getattr(pooled_m, k)) for k in
                                 ("n", "mean_x", "mean_y", "sxx", "syy", "sxy")})
    ranges = [(value_range(pts["x"].to_numpy()), value_range(pts["y"].to_numpy()))]
    for method in cfg.model.methods:
        if is_moment_method(method):
            new_rows, new_fits = fit_moment_rows("pooled", [""], pooled_m, method, cfg, base,
                                                 ranges)
            rows += new_rows
            line_fits.update(new_fits)
        else:
            row, fit = row_method_fit("pooled", "", method, pts, cfg, base)
            rows.append(row)
            if fit is not None:
                line_fits[("pooled", "", method)] = fit
    point_sets = {("pooled", ""): pts}
    if state.data.has_groups:
        codes, uniques = pd.factorize(pts["group"], sort=True)
        group_names = [str(u) for u in uniques]
        if isinstance(pts["group"].dtype, pd.StringDtype) and (not codes.size or codes.min() >= 0):
            # text names sorted as text: the codes later stages take the groups by
            # kept as small integers while the run lasts (2 bytes a row below 32768 groups)
            _CODED[id(pts)] = (weakref.ref(pts, _forget(id(pts), _CODED)),
                               codes.astype(np.min_scalar_type(max(len(group_names) - 1, 0))),
                               np.asarray(group_names, dtype=str))
        gm = group_moments(X, Y, codes, n_groups=len(group_names))
        # One stable sort by group serves the ranges and the split into groups
        # (no scan of the table per group).
        order, bounds = sort_by_group(codes, n_groups=len(group_names))
        x_lo, x_hi = group_extremes(pts["x"].to_numpy(), order, bounds)
        y_lo, y_hi = group_extremes(pts["y"].to_numpy(), order, bounds)
        granges = list(zip(zip(x_lo.tolist(), x_hi.tolist()), zip(y_lo.tolist(), y_hi.tolist())))
        group_rows = split_by_group(pts, order, bounds, group_names)
        for method in cfg.model.methods:
            if is_moment_method(method):
                new_rows, new_fits = fit_moment_rows("group", group_names, gm, method, cfg,
                                                     base, granges)
                rows += new_rows
                line_fits.update(new_fits)
                continue
            for g in group_names:
                row, fit = row_method_fit("group", g, method, group_rows[g], cfg, base)
                rows.append(row)
                if fit is not None:
                    line_fits[("group", g, method)] = fit
        small = [g for g, n in zip(group_names, gm.n) if n < MIN_N]
        if small:
            notes.append(f"Group fits skipped for n < {MIN_N}: {', '.join(small)}.")
        for g in group_names:
            point_sets[("group", g)] = group_rows[g]
    return FitStage(rows=tuple(rows), line_fits=line_fits, point_sets=point_sets,
                    notes=tuple(notes))


def split_by_group(pts: pd.DataFrame, order: np.ndarray, bounds: np.ndarray,
                   names: list) -> dict:
    """Each group's rows of ``pts`` (``name -> GroupPoints``).

    No copy of the table: each group is a :class:`GroupPoints`, the positions
    ``order[bounds[g]:bounds[g + 1]]`` of ``pts``, whose columns are read out of
    ``pts`` when asked for (the rows, index, columns and values of the frames
    ``pts.groupby("group")`` yields).  ``order`` and ``bounds`` are those of
    :func:`scaling.stats.moments.sort_by_group`.
    """
    # positions as 32-bit integers below 2**31 rows: half the memory of the index
    small = len(pts) <= np.iinfo(np.int32).max
    source = _Sorted(pts, np.asarray(order, dtype=np.int32 if small else np.intp))
    return {name: GroupPoints(source, a, b) for name, a, b in
            zip(names, bounds[:-1].tolist(), bounds[1:].tolist())}


class _Sorted:
    """The points behind the :class:`GroupPoints` of :func:`split_by_group`: the table,
    the positions of its rows group by group, and each numeric column read out of the
    table once (reading a column of a frame costs pandas about 0.1 ms: a thousand
    groups' columns one at a time cost 0.1 s)."""

    __slots__ = ("frame", "order", "columns")

    def __init__(self, frame: pd.DataFrame, order: np.ndarray):
        self.frame, self.order, self.columns = frame, order, {}

    def column(self, name: str):
        """The column as an array (None when it is not a plain numeric numpy column)."""
        if name not in self.columns:
            values = None
            if name in self.frame.columns:
                dtype = self.frame.dtypes[name]
                if isinstance(dtype, np.dtype) and dtype.kind in "iufb":
                    values = self.frame[name].to_numpy()
            self.columns[name] = values
        return self.columns[name]


class GroupPoints:
    """One group's rows of the points fitted, read out of the points when asked for.

    What a reader of a group's point set uses of a DataFrame: ``len``, ``in``
    (a column name), ``columns``, ``index``, ``shape`` and ``points[name]`` (a
    Series: the column's values and index labels of the group's rows, in
    table order; a list of names gives a DataFrame); :meth:`to_frame` gives
    the whole frame (``pts[pts["group"] == name]``).  Read-only: each read
    takes the rows out of the table, so no copy of the table is held while the
    run lasts.  :func:`set_columns` reads several columns of many groups at
    array speed.
    """

    __slots__ = ("_source", "_start", "_stop")

    def __init__(self, source: _Sorted, start: int, stop: int):
        self._source, self._start, self._stop = source, start, stop

    @property
    def positions(self) -> np.ndarray:
        """The group's row positions in the points (ascending)."""
        return self._source.order[self._start:self._stop]

    def __len__(self) -> int:
        return self._stop - self._start

    def __contains__(self, name) -> bool:
        return name in self._source.frame.columns

    @property
    def columns(self) -> pd.Index:
        return self._source.frame.columns

    @property
    def index(self) -> pd.Index:
        return self._source.frame.index[self.positions]

    @property
    def shape(self) -> tuple:
        return (len(self), len(self.columns))

    def __getitem__(self, name):
        return self._source.frame[name].take(self.positions)

    def to_frame(self) -> pd.DataFrame:
        """The group's rows as a DataFrame (a copy)."""
        return self._source.frame.take(self.positions)

    def __repr__(self) -> str:
        return f"GroupPoints({len(self)} rows)"


#: ``id(points) -> (weak reference to them, codes, names)``: the groups of the points
#: fitted, coded by :func:`fit_stage` (names in text order).
_CODED: dict = {}


#: ``id(points) -> (weak reference to them, Moments)``: the moments of the points'
#: ``log_x`` and ``log_y`` as :func:`scaling.stats.moments.moments` gives them.
_MOMENTS: dict = {}


def known_moments(frame: pd.DataFrame):
    """:func:`scaling.stats.moments.moments` of ``frame``'s ``log_x`` and ``log_y``
    when :func:`fit_stage` computed them for this very frame (its pooled points),
    else None."""
    entry = _MOMENTS.get(id(frame))
    if entry is not None and entry[0]() is frame:
        return entry[1]
    return None


def _forget(key: int, registry: dict):
    def drop(_ref):
        registry.pop(key, None)
    return drop


def known_group_codes(frame: pd.DataFrame):
    """``(codes, names)`` of the ``group`` column of the points :func:`fit_stage` fitted
    (``pandas.factorize`` of the text names, sorted), or None for any other frame."""
    entry = _CODED.get(id(frame))
    if entry is not None and entry[0]() is frame:
        return entry[1].astype(np.intp), entry[2]
    return None


def set_columns(frame, *names: str) -> tuple:
    """``tuple(frame[name].to_numpy() for name in names)``, without pandas' cost per
    column for the :class:`GroupPoints` of :func:`split_by_group` (their numeric
    columns are taken out of the points' arrays read once for every group).
    """
    if isinstance(frame, GroupPoints):
        source, at = frame._source, frame.positions
        cols = [source.column(name) for name in names]
        if all(c is not None for c in cols):
            return tuple(c[at] for c in cols)
    return tuple(frame[name].to_numpy() for name in names)


def fit_moment_rows(scope: str, groups: list, m, method: str, cfg, base, ranges):
    """fits.csv rows and LineFits of a moment method for every group of ``m`` at once.

    Returns
    -------
    rows : list of dict
        One per group (estimable or not).
    fits : dict
        ``(scope, group, method) -> LineFit`` for the estimable ones, packaged
        from the same vectorised result as the rows.
    """
    lam = cfg.model.deming_lambda if method == "deming" else None
    if method == "deming":
        res = deming_moments(m, lam, confidence=cfg.model.confidence)
    else:
        res = fit_moments(m, method, confidence=cfg.model.confidence)
    notes = fit_notes_column(res)   # the SMA note of two accepted ranges, written out
    # Each column read out of its array once (python floats, as float(res[k][i]) gives).
    cols = {k: np.asarray(res[k], dtype=float).reshape(-1).tolist() for k in ESTIMATE_COLUMNS}
    sizes = np.asarray(m.n).reshape(-1).tolist()
    shared = {"method": method, "log_base": base_label(base),
              "confidence": cfg.model.confidence, "interval_method": "analytic",
              "deming_lambda": lam if method == "deming" else np.nan}
    rows = []
    for i, name in enumerate(groups):
        x_range, y_range = ranges[i]
        rows.append(fit_row(scope=scope, group=name, n=int(sizes[i]),
                            **{k: cols[k][i] for k in ESTIMATE_COLUMNS}, **shared,
                            note=str(notes[i]), x_range=x_range, y_range=y_range))
    # Notes on estimable fits (unbounded interval, SMA of either sign,
    # exact power law) keep the fit.
    estimable = np.isfinite(np.asarray(cols["slope"], dtype=float))
    packaged = line_fits_from_result(res, m, method, confidence=cfg.model.confidence,
                                     log_base=base, x_ranges=[r[0] for r in ranges],
                                     y_ranges=[r[1] for r in ranges], lam=lam, keep=estimable)
    fits = {(scope, name, method): fit for name, fit in zip(groups, packaged)
            if fit is not None}
    return rows, fits


def blank_numbers(row: dict) -> dict:
    if row["note"] and not np.isfinite(row["slope"]):
        for k in ESTIMATE_COLUMNS:
            row[k] = np.nan
    return row


def row_method_fit(scope: str, group: str, method: str, points: pd.DataFrame, cfg, base):
    """fits.csv row and LineFit (None if not estimable) of a robust line."""
    x, y = points["x"].to_numpy(), points["y"].to_numpy()
    n = len(points)
    rng_x = value_range(x) if n else (np.nan, np.nan)
    rng_y = value_range(y) if n else (np.nan, np.nan)
    fit, note = None, ""
    if n < MIN_N:
        note = f"n = {n} < {MIN_N}: too few points to fit a line"
    else:
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                fit = ROW_METHODS[method](x, y, confidence=cfg.model.confidence,
                                          log_base=base, n_boot=robust_n_boot(cfg),
                                          seed=cfg.resampling.seed)
        except DataError as exc:
            note = str(exc).replace("x and y need", "needs")
        if fit is not None and not np.isfinite(fit.slope):
            note, fit = fit.note or "the line could not be fitted", None
    if fit is not None:
        return (fit_row(fit, scope=scope, group=group, note=fit_note(fit), x_range=rng_x,
                        y_range=rng_y), fit)
    return fit_row(scope=scope, group=group, method=method, n=n, log_base=base_label(base),
                   confidence=cfg.model.confidence, note=note, x_range=rng_x, y_range=rng_y,
                   interval_method="bootstrap_percentile"), None


def with_ranges(fit, ranges):
    return replace(fit, x_range=ranges[0], y_range=ranges[1])


def with_note(fit, note):
    return replace(fit, note=note)


def fits_table_stage(cfg, state) -> FitsTable:
    """fits.csv and slope_tests.csv from ``state.rows``, ``state.line_fits`` and ``state.test_rows``.

    Raises
    ------
    DataError
        No line at all could be fitted (:func:`nothing_estimable` says why).
    """
    pts = state.data.points
    rows = list(state.rows)
    line_fits = state.line_fits
    if not line_fits:
        raise DataError(nothing_estimable(cfg, pts, rows, len(state.data.dropped)))
    # Keep line_fits in the order of the fits table.
    order = {(r["scope"], r["group"], r["method"]): i for i, r in enumerate(rows)}
    line_fits = dict(sorted(line_fits.items(), key=lambda kv: order.get(kv[0], len(order))))
    fits = pd.DataFrame([blank_numbers(r) for r in rows], columns=FIT_COLUMNS)
    if state.phylo is not None:
        fits = add_phylo_columns(fits, state.phylo)
    tests = slope_tests(line_fits, cfg, phylo_fits=state.phylo.fits if state.phylo else {})
    if state.test_rows:
        tests = pd.concat([tests, pd.DataFrame(list(state.test_rows),
                                               columns=SLOPE_TEST_COLUMNS)], ignore_index=True)
    return FitsTable(fits=fits, slope_tests=tests, line_fits=line_fits,
                     messages=tuple(pooled_fit_messages(line_fits, cfg)),
                     method_messages=tuple(line_method_messages(line_fits, cfg)))


def nothing_estimable(cfg, pts: pd.DataFrame, rows: list, n_dropped: int) -> str:
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


def slope_tests(line_fits: dict, cfg, *, phylo_fits=None) -> pd.DataFrame:
    """slope_tests.csv: every fit against every hypothesised exponent (phylogenetic
    rows by their PhyloFit, whose PGLS test profiles over lambda)."""
    keys = list(line_fits)
    fits = [(phylo_fits or {}).get(method, fit) if scope == "phylo" else fit
            for (scope, group, method), fit in line_fits.items()]
    # Every fit against one exponent at a time: one array pass per moment method.
    tests = [slope_tests_for(fits, b0, hypothesis=name) for name, b0 in cfg.exponents.items()]
    rows = []
    for k, ((scope, group, method), fit) in enumerate(zip(keys, fits)):
        for (name, b0), by_fit in zip(cfg.exponents.items(), tests):
            t = by_fit[k]
            rows.append({"scope": scope, "group": group, "method": method,
                         "hypothesis": name, "exponent": b0, "estimate": fit.slope,
                         "statistic": t.statistic, "statistic_type": t.statistic_type,
                         "df": t.df, "p_value": t.p_value, "p_method": t.p_method})
    return pd.DataFrame(rows, columns=SLOPE_TEST_COLUMNS)


def add_phylo_columns(fits: pd.DataFrame, stage) -> pd.DataFrame:
    """``fits`` with the lambda/loglik/aic columns (blank except on phylo rows);
    ``stage``: the run's :class:`~scaling.run.phylogeny.PhyloStage` or None."""
    out = fits.copy()
    for c in PHYLO_FIT_COLUMNS:
        out[c] = np.nan if c != "lambda_estimate" else ""
    if stage is None:
        return out
    for r in stage.rows:
        sel = (out["scope"] == r["scope"]) & (out["method"] == r["method"])
        for c in PHYLO_FIT_COLUMNS:
            if c in r:
                out.loc[sel, c] = r[c]
    return out
