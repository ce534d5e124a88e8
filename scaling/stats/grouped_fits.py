"""Per-group moments of a large table, and every group fitted at once.

The whole grouped fit is one aggregation: the five sums behind
:class:`~scaling.stats.moments.Moments` per group.  This module holds the
numbers of that road (reading and cleaning the table are in
:mod:`scaling.io.chunked`, joined to these in :mod:`scaling.run.table_moments`):

* :class:`MomentAccumulator` reduces cleaned rows, slice by slice, to
  per-group moments centred on each slice's own group means
  (:func:`~scaling.stats.moments.group_moments`, ``np.bincount``; no Python
  loop over groups) and merges them exactly
  (:func:`~scaling.stats.moments.merge_moments`; Chan, Golub & LeVeque 1983);
  :func:`summarise_rows` does the same for one piece of rows (a Dask
  partition) and :func:`combine_summaries` merges such pieces
  (:func:`~scaling.stats.moments.combine_moments`);
* :class:`GroupedMoments` is the result: moments, ranges and drop counts;
* :func:`fit_groups_from_moments` fits every method to every group in one
  vectorised call of :func:`scaling.stats.lines.fit_moments`, giving the
  ``fits.csv`` and ``slope_tests.csv`` tables.

Memory is bounded by one slice of rows plus a few arrays of length G (groups).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd


from .fit_rows import ESTIMATE_COLUMNS, fit_rows
from .lines import METHODS, fit_moments, slope_test_statistic
from .logscale import base_label, to_log
from .moments import HIGHER_KEYS, Moments, combine_moments, group_moments, merge_moments
from .schema import (FIT_COLUMNS, SLOPE_TEST_COLUMNS, check_confidence, check_exponents,
                     check_methods)

__all__ = [
    "GroupedMoments",
    "GroupFits",
    "MomentAccumulator",
    "summarise_rows",
    "combine_summaries",
    "grouped_moments",
    "fit_groups_from_moments",
    "pooled_view",
    "FIT_TABLE_COLUMNS",
    "SLOPE_TEST_TABLE_COLUMNS",
    "SUMMARY_COLUMNS",
    "summary_frame",
    "UNIT_COLUMNS",
    "UNIT_POINT_COLUMNS",
    "unit_sums",
    "merge_unit_sums",
    "units_to_groups",
]

#: Columns of the fits table and of the slope-test table (from scaling.stats.schema).
FIT_TABLE_COLUMNS = FIT_COLUMNS
SLOPE_TEST_TABLE_COLUMNS = SLOPE_TEST_COLUMNS

#: Columns of one piece's summary (:func:`summarise_rows` as a table).
SUMMARY_COLUMNS = ["label", "n", "mean_x", "mean_y", "sxx", "syy", "sxy",
                   "lx_min", "lx_max", "ly_min", "ly_max", *HIGHER_KEYS]
# The higher sums (sxxx, sxxxx, sxxy) ride along for the curvature test from moments.
_MOMENT_KEYS = ("n", "mean_x", "mean_y", "sxx", "syy", "sxy", *HIGHER_KEYS)

#: Rows per slice of the numeric work: temporaries stay in cache.
_SLICE = 1 << 16


# --------------------------------------------------------------------------
# results


@dataclass(frozen=True, slots=True, kw_only=True)
class GroupedMoments:
    """Per-group moments of a cleaned, log-transformed table.

    Attributes
    ----------
    labels : ndarray of str
        Group names, sorted (``[""]`` when there is no group column).
    moments : Moments
        Arrays of shape (G,), on the log scale of ``log_base``.
    pooled : Moments
        Moments of all rows (arrays of shape (1,)), merged from the groups.
    x_min, x_max, y_min, y_max : ndarray
        Natural-unit range of each group (logs when ``log_base`` is None).
    n_read : int
        Data rows read.
    dropped : dict
        ``reason -> number of rows`` (a row with two problems counts under both).
    n_dropped : int
        Rows dropped (each once).
    log_base : float or None
    n_rows : ndarray or None
        Input rows behind each group, when the points are unit means
        (``data.average_within``); None when every point is one row.
    units : DataFrame or None
        The unit means themselves (``data.average_within``), one row per unit
        sorted by ``row``: :data:`UNIT_POINT_COLUMNS` (``row`` is the unit's
        smallest data row number, as the in-memory road numbers it).  The
        second pass measures residuals on these points; None without units.
    """

    labels: np.ndarray
    moments: Moments
    pooled: Moments
    x_min: np.ndarray
    x_max: np.ndarray
    y_min: np.ndarray
    y_max: np.ndarray
    n_read: int
    dropped: dict = field(default_factory=dict)
    n_dropped: int = 0
    log_base: float | None = 10.0
    n_rows: np.ndarray | None = None
    units: pd.DataFrame | None = None

    @property
    def n_groups(self) -> int:
        return int(self.labels.size)

    def dropped_frame(self) -> pd.DataFrame:
        """Columns ``reason, rows``: the drop counts, most frequent first."""
        frame = pd.DataFrame({"reason": list(self.dropped), "rows": list(self.dropped.values())},
                             columns=["reason", "rows"])
        return frame.sort_values("rows", ascending=False, kind="stable").reset_index(drop=True)

    def to_frame(self) -> pd.DataFrame:
        """One row per group: ``group, n, mean_log_x, mean_log_y, sxx, syy, sxy``."""
        m = self.moments
        return pd.DataFrame({"group": self.labels, "n": m.n, "mean_log_x": m.mean_x,
                             "mean_log_y": m.mean_y, "sxx": m.sxx, "syy": m.syy,
                             "sxy": m.sxy})


@dataclass(frozen=True, slots=True, kw_only=True)
class GroupFits:
    """Every group fitted with every method: the ``fits`` and ``slope_tests`` tables."""

    fits: pd.DataFrame
    slope_tests: pd.DataFrame
    moments: GroupedMoments | None = None

    def summary(self) -> str:
        """A few lines: groups and fits, and the exponent's quartiles per method."""
        from ..render.summaries import group_fits_summary
        return group_fits_summary(self)


# --------------------------------------------------------------------------
# from rows to moments


def summarise_rows(labels: pd.Index, codes, x: np.ndarray, y: np.ndarray, bad, base):
    """Per-group moments of one piece of rows (a chunk or a Dask partition).

    Parameters
    ----------
    labels : Index
        Group names of the piece; ``codes`` index into it.
    codes : ndarray of int or None
        Group code of each row (None: one group).
    x, y : ndarray
        Natural units (logs when ``base`` is None).
    bad : ndarray of bool or None
        Rows to leave out.
    base : float or None

    Returns
    -------
    labels, moments, ranges
        For the groups with rows in the piece; ``ranges`` are the log minima
        and maxima of x and y (four arrays).

    Notes
    -----
    The rows are summed over slices of at most ``max(65536, 8 G)`` rows
    merged exactly, so temporaries are small whatever the piece's size.
    """
    g = len(labels)
    total = Moments(n=np.zeros(g), mean_x=np.full(g, np.nan), mean_y=np.full(g, np.nan),
                    sxx=np.zeros(g), syy=np.zeros(g), sxy=np.zeros(g),
                    **{k: np.zeros(g) for k in HIGHER_KEYS})
    ranges = [np.full(g, np.inf), np.full(g, -np.inf), np.full(g, np.inf),
              np.full(g, -np.inf)]
    step = max(_SLICE, 8 * g)      # keeps the O(G) merges small against the rows
    for start in range(0, len(x), step):
        sl = slice(start, start + step)
        lx, ly = x[sl], y[sl]
        c = codes[sl] if codes is not None else np.zeros(lx.size, dtype=np.intp)
        if bad is not None:
            keep = ~bad[sl]
            lx, ly, c = lx[keep], ly[keep], c[keep]
        if not lx.size:
            continue
        lx, ly = to_log(lx, base), to_log(ly, base)
        total = merge_moments(total, group_moments(lx, ly, c, n_groups=g, higher=True))
        np.minimum.at(ranges[0], c, lx)
        np.maximum.at(ranges[1], c, lx)
        np.minimum.at(ranges[2], c, ly)
        np.maximum.at(ranges[3], c, ly)
    used = total.n > 0
    if not used.all():
        labels, total, ranges = labels[used], total[used], [r[used] for r in ranges]
    return labels, total, ranges


def summary_frame(labels, m: Moments, ranges) -> pd.DataFrame:
    """A piece's summary as one small table (:data:`SUMMARY_COLUMNS`)."""
    if not len(labels):
        return pd.DataFrame({c: [] for c in SUMMARY_COLUMNS})
    return pd.DataFrame({"label": np.asarray(labels, dtype=object),
                         **{k: getattr(m, k) for k in _MOMENT_KEYS},
                         "lx_min": ranges[0], "lx_max": ranges[1],
                         "ly_min": ranges[2], "ly_max": ranges[3]})


def grouped_moments(index: pd.Index, m: Moments, ranges, *, n_read, counts, n_dropped,
                    base) -> GroupedMoments:
    """:class:`GroupedMoments` with the groups sorted by name and ranges in natural units."""
    labels = np.asarray(index, dtype=object)
    order = np.argsort(labels.astype(str), kind="stable")
    m = m[order]
    ranges = [np.asarray(r)[order] for r in ranges]
    if base is None:
        nat = ranges
    else:
        nat = [np.power(base, r) for r in ranges]
    pooled = combine_moments(m, np.zeros(m.n.size, dtype=np.intp), n_groups=1)
    return GroupedMoments(labels=labels[order].astype(str), moments=m, pooled=pooled,
                          x_min=nat[0], x_max=nat[1], y_min=nat[2], y_max=nat[3],
                          n_read=int(n_read), dropped=dict(counts),
                          n_dropped=int(n_dropped), log_base=base)


class MomentAccumulator:
    """Running per-group moments, merged exactly piece by piece."""

    def __init__(self):
        self.index = pd.Index([], dtype=object)
        self.m = {k: np.zeros(0) for k in _MOMENT_KEYS}
        self.ranges = [np.zeros(0) for _ in range(4)]
        self.counts: dict[str, int] = {}
        self.n_read = 0
        self.n_dropped = 0

    def _grow(self, new_labels: pd.Index) -> None:
        k = len(new_labels)
        self.index = self.index.append(new_labels)
        fill = {"n": 0.0, "mean_x": np.nan, "mean_y": np.nan, "sxx": 0.0, "syy": 0.0,
                "sxy": 0.0, **{name: 0.0 for name in HIGHER_KEYS}}
        for key in _MOMENT_KEYS:
            self.m[key] = np.concatenate([self.m[key], np.full(k, fill[key])])
        for i, start in enumerate((np.inf, -np.inf, np.inf, -np.inf)):
            self.ranges[i] = np.concatenate([self.ranges[i], np.full(k, start)])

    def add_counts(self, counts: dict, n_rows: int, n_dropped: int) -> None:
        """Rows read and dropped (``reason -> rows``) in one piece."""
        self.n_read += n_rows
        self.n_dropped += n_dropped
        for reason, k in counts.items():
            self.counts[reason] = self.counts.get(reason, 0) + k

    def add(self, labels: pd.Index, m: Moments, ranges) -> None:
        """Merge one piece's per-group moments and log ranges."""
        if not len(labels):
            return
        pos = self.index.get_indexer(labels)
        if (pos < 0).any():
            self._grow(labels[pos < 0])
            pos = self.index.get_indexer(labels)
        old = Moments(**{k: self.m[k][pos] for k in _MOMENT_KEYS})
        new = merge_moments(old, m)
        for key in _MOMENT_KEYS:
            self.m[key][pos] = getattr(new, key)
        for i, fn in enumerate((np.fmin, np.fmax, np.fmin, np.fmax)):
            self.ranges[i][pos] = fn(self.ranges[i][pos], ranges[i])

    def add_rows(self, labels: pd.Index, codes, x, y, bad, base) -> None:
        """Summarise rows (:func:`summarise_rows`) and merge them."""
        self.add(*summarise_rows(labels, codes, x, y, bad, base))

    def result(self, base) -> GroupedMoments:
        return grouped_moments(self.index, Moments(**self.m), self.ranges,
                               n_read=self.n_read, counts=self.counts,
                               n_dropped=self.n_dropped, base=base)


def combine_summaries(frames: list, *, n_read: int, counts: dict, n_dropped: int,
                      base) -> GroupedMoments:
    """Merge the summaries of many pieces (:func:`summary_frame`) at once."""
    table = (pd.concat(frames, ignore_index=True) if frames
             else pd.DataFrame({c: [] for c in SUMMARY_COLUMNS}))
    codes, uniques = pd.factorize(table["label"].astype(object), sort=False)
    g = len(uniques)
    parts_m = Moments(**{k: table[k].to_numpy(dtype=float) for k in _MOMENT_KEYS})
    m = combine_moments(parts_m, codes, n_groups=g)
    ranges = []
    for col, fn in (("lx_min", np.minimum), ("lx_max", np.maximum),
                    ("ly_min", np.minimum), ("ly_max", np.maximum)):
        out = np.full(g, np.inf if fn is np.minimum else -np.inf)
        fn.at(out, codes, table[col].to_numpy(dtype=float))
        ranges.append(out)
    return grouped_moments(pd.Index(uniques, dtype=object), m, ranges, n_read=n_read,
                           counts=counts, n_dropped=n_dropped, base=base)


# --------------------------------------------------------------------------
# every group fitted at once


def pooled_view(gm: GroupedMoments) -> GroupedMoments:
    """The pooled moments of ``gm`` as a one-group :class:`GroupedMoments` (label "")."""
    with np.errstate(invalid="ignore"):
        ranges = [np.atleast_1d(f(r)) if r.size else np.array([np.nan]) for f, r in
                  ((np.nanmin, gm.x_min), (np.nanmax, gm.x_max),
                   (np.nanmin, gm.y_min), (np.nanmax, gm.y_max))]
    return GroupedMoments(labels=np.array([""]), moments=gm.pooled, pooled=gm.pooled,
                          x_min=ranges[0], x_max=ranges[1], y_min=ranges[2],
                          y_max=ranges[3], n_read=gm.n_read, dropped=dict(gm.dropped),
                          n_dropped=gm.n_dropped, log_base=gm.log_base,
                          n_rows=None if gm.n_rows is None else np.atleast_1d(gm.n_rows.sum()))


def fit_groups_from_moments(gm: GroupedMoments, *, methods=("ols", "sma", "ma"),
                            confidence: float = 0.95, exponents=None,
                            scope: str = "group", pooled: bool = False) -> GroupFits:
    """Fit every method to every group at once; the ``fits`` and ``slope_tests`` tables.

    Parameters
    ----------
    gm : GroupedMoments
    methods : sequence of {"ols", "sma", "ma"}
    confidence : float
    exponents : dict or sequence, optional
        Hypothesised exponents ``{name: value}`` (a sequence is named by its
        values); each is tested for every estimable fit.
    scope : str
        Written in the ``scope`` column of the group rows.
    pooled : bool
        Also fit all rows together: rows with scope ``"pooled"`` and group
        "" come first (as in a run).

    Returns
    -------
    GroupFits
        ``fits`` with :data:`FIT_TABLE_COLUMNS` (rows method by method, groups
        in ``gm.labels`` order) and ``slope_tests`` with
        :data:`SLOPE_TEST_TABLE_COLUMNS` (rows for estimable fits only, as in
        a run).

    Notes
    -----
    One call of :func:`scaling.stats.lines.fit_moments` and one of
    :func:`scaling.stats.lines.slope_test_statistic` per method and exponent, each
    vectorised over the G groups; formulas and sources are in
    :mod:`scaling.stats.lines`.  Results equal :func:`scaling.fit_line` group by
    group up to rounding.
    """
    methods = list(check_methods(methods, tuple(METHODS)))
    confidence = check_confidence(confidence)
    exps = check_exponents(exponents)
    if pooled:
        head = fit_groups_from_moments(pooled_view(gm), methods=methods,
                                       confidence=confidence, exponents=exps, scope="pooled")
        body = fit_groups_from_moments(gm, methods=methods, confidence=confidence,
                                       exponents=exps, scope=scope)
        return GroupFits(fits=pd.concat([head.fits, body.fits], ignore_index=True),
                         slope_tests=pd.concat([head.slope_tests, body.slope_tests],
                                               ignore_index=True), moments=gm)
    m = gm.moments
    g = m.n.size
    frames, tests = [], []
    for method in methods:
        res = fit_moments(m, method, confidence=confidence)
        note = np.asarray(res["note"], dtype=object)
        frames.append(fit_rows(
            g, scope=scope, group=gm.labels.astype(object), method=method,
            n=m.n.astype(np.int64), **{k: res[k] for k in ESTIMATE_COLUMNS},
            log_base=base_label(gm.log_base), confidence=confidence, note=note,
            x_min=gm.x_min, x_max=gm.x_max, y_min=gm.y_min, y_max=gm.y_max,
            interval_method="analytic"))
        # Every estimable fit is tested, as in a run (an SMA fit accepting slopes
        # of either sign and an exact power law included).
        ok = np.isfinite(res["slope"])
        mk = m[ok]
        for name, b0 in exps.items():
            t, df, p = slope_test_statistic(mk, method, b0)
            k = int(ok.sum())
            tests.append(pd.DataFrame({
                "scope": np.full(k, scope, dtype=object), "group": gm.labels[ok].astype(object),
                "method": np.full(k, method, dtype=object),
                "hypothesis": np.full(k, name, dtype=object), "exponent": np.full(k, b0),
                "estimate": res["slope"][ok], "statistic": t,
                "statistic_type": np.full(k, "t", dtype=object), "df": df, "p_value": p,
                "p_method": np.full(k, "t", dtype=object),
            }, columns=SLOPE_TEST_TABLE_COLUMNS))
    fits = pd.concat(frames, ignore_index=True)
    slope_tests = (pd.concat(tests, ignore_index=True) if tests
                   else pd.DataFrame(columns=SLOPE_TEST_TABLE_COLUMNS))
    return GroupFits(fits=fits, slope_tests=slope_tests, moments=gm)


# --------------------------------------------------------------------------
# two levels: rows -> unit means -> groups (data.average_within)

#: Columns of the per-unit partial sums of a piece (:func:`unit_sums`).
UNIT_COLUMNS = ["unit", "group_min", "group_max", "n", "sum_x", "sum_y", "row_min"]

#: Columns of the unit means (:attr:`GroupedMoments.units`).
UNIT_POINT_COLUMNS = ["row", "unit", "group", "log_x", "log_y", "n_rows"]


def unit_sums(unit_labels: pd.Index, unit_codes, labels: pd.Index, codes, x, y, bad,
              base, rows=None) -> pd.DataFrame:
    """Per-unit row counts and sums of log x and log y of one piece of rows.

    Parameters
    ----------
    unit_labels, unit_codes
        Unit names of the piece and the unit code of each row.
    labels, codes
        Group names and the group code of each row (codes None: one group).
    x, y, bad, base
        As for :func:`summarise_rows`.
    rows : array_like of int, optional
        Row number of each row (default 1, 2, ...); ``row_min`` is the
        smallest of a unit's usable rows.

    Returns
    -------
    DataFrame
        :data:`UNIT_COLUMNS`, one row per unit met; ``group_min`` and
        ``group_max`` are the smallest and largest group name of its rows
        (they differ when a unit spans two groups).

    Notes
    -----
    The unit mean of the logs is sum/n once every piece's sums are merged
    (:func:`merge_unit_sums`); memory is one row per unit.
    """
    keep = slice(None) if bad is None else ~bad
    u = np.asarray(unit_codes)[keep]
    lx, ly = to_log(np.asarray(x)[keep], base), to_log(np.asarray(y)[keep], base)
    gc = (np.zeros(u.size, dtype=np.intp) if codes is None
          else np.asarray(codes, dtype=np.intp)[keep])
    k = len(unit_labels)
    n = np.bincount(u, minlength=k).astype(float)
    sx = np.bincount(u, weights=lx, minlength=k)
    sy = np.bincount(u, weights=ly, minlength=k)
    # group names ranked so that min/max of ranks are min/max of names
    names = np.asarray(labels, dtype=object).astype(str)
    rank = np.argsort(np.argsort(names, kind="stable"), kind="stable")
    gmin, gmax = np.full(k, names.size), np.full(k, -1)
    np.minimum.at(gmin, u, rank[gc])
    np.maximum.at(gmax, u, rank[gc])
    r = (np.arange(1, np.size(unit_codes) + 1, dtype=np.int64) if rows is None
         else np.asarray(rows, dtype=np.int64))[keep]
    rmin = np.full(k, np.iinfo(np.int64).max)
    np.minimum.at(rmin, u, r)
    used = n > 0
    by_rank = names[np.argsort(rank)] if names.size else names
    return pd.DataFrame({"unit": np.asarray(unit_labels, dtype=object)[used],
                         "group_min": by_rank[gmin[used]] if used.any() else [],
                         "group_max": by_rank[gmax[used]] if used.any() else [],
                         "n": n[used], "sum_x": sx[used], "sum_y": sy[used],
                         "row_min": rmin[used]},
                        columns=UNIT_COLUMNS)


def merge_unit_sums(frames: list) -> pd.DataFrame:
    """Merge per-unit sums of many pieces (a groupby on the unit)."""
    frames = [f for f in frames if len(f)]
    if not frames:
        return pd.DataFrame({c: [] for c in UNIT_COLUMNS})
    table = pd.concat(frames, ignore_index=True)
    return (table.groupby("unit", sort=False)
            .agg(group_min=("group_min", "min"), group_max=("group_max", "max"),
                 n=("n", "sum"), sum_x=("sum_x", "sum"), sum_y=("sum_y", "sum"),
                 row_min=("row_min", "min"))
            .reset_index()[UNIT_COLUMNS])


def units_to_groups(units: pd.DataFrame, *, n_read, counts, n_dropped, base) -> GroupedMoments:
    """Per-group moments of the unit means (each unit one point), with rows per group.

    ``units`` holds merged per-unit sums (:func:`merge_unit_sums`) whose
    units each lie in one group (``group_min == group_max``; the caller checks).
    The result keeps the unit means as points (``GroupedMoments.units``,
    sorted by their smallest row number, as the in-memory road orders them).
    """
    n = units["n"].to_numpy(dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        lx = units["sum_x"].to_numpy(dtype=float) / n
        ly = units["sum_y"].to_numpy(dtype=float) / n
    codes, uniques = pd.factorize(units["group_min"].astype(object), sort=False)
    g = len(uniques)
    m = group_moments(lx, ly, codes, n_groups=g, higher=True)   # curvature from moments
    ranges = []
    for v, fn, start in ((lx, np.minimum, np.inf), (lx, np.maximum, -np.inf),
                         (ly, np.minimum, np.inf), (ly, np.maximum, -np.inf)):
        out = np.full(g, start)
        fn.at(out, codes, v)
        ranges.append(out)
    rows = np.bincount(codes, weights=n, minlength=g)
    gm = grouped_moments(pd.Index(uniques, dtype=object), m, ranges, n_read=n_read,
                         counts=counts, n_dropped=n_dropped, base=base)
    order = np.argsort(np.asarray(uniques, dtype=object).astype(str), kind="stable")
    points = pd.DataFrame({"row": units["row_min"].to_numpy(dtype=np.int64),
                           "unit": units["unit"].astype(str).to_numpy(dtype=object),
                           "group": units["group_min"].astype(str).to_numpy(dtype=object),
                           "log_x": lx, "log_y": ly, "n_rows": n.astype(np.int64)},
                          columns=UNIT_POINT_COLUMNS)
    points = points.sort_values("row", kind="stable").reset_index(drop=True)
    return replace(gm, n_rows=rows[order], units=points)
