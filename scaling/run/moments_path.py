"""Large-data runs: the moments path of a run, and the summary across many groups.

Two stages used by :func:`scaling.run.pipeline.analyse`:

* :func:`use_moments_path` / :func:`moments_stage` -- with ``engine: dask``,
  or a data file larger than ``data.moments_above_mb``, the run never holds
  the rows: :func:`scaling.run.table_moments.read_moments` reduces the file chunk by
  chunk (or Dask partition by partition) to per-group moments merged exactly
  (Chan, Golub & LeVeque 1983), and every OLS/SMA/MA fit, interval and slope
  test follows from them (:func:`scaling.stats.grouped_fits.fit_groups_from_moments`).
  With ``data.average_within`` the reduction has two levels (rows -> unit
  means -> groups) and the unit means themselves are kept (one row per
  unit, named and numbered by its first row: ``GroupedMoments.units``).
  :func:`moments_group_stage` then hands the per-group moments to
  :func:`scaling.run.groups.groups_from_moments`, the group stage of the
  in-memory run: group means, the line through them, the three group
  comparisons with pairwise tests and their calibration, and the common
  within-group slope with its slope tests, with the same seed.  Curvature
  and the local exponents come from the higher moments (Σx³, Σx⁴, Σx²y).
  What needs residuals comes from a second pass
  (:mod:`scaling.run.second_pass`, over the same chunks -- kept by the first
  pass in a temporary binary file, or read again with Dask -- or over the
  unit means with ``data.average_within``): correction factors, SEE, %SEE and
  %PE, predictions, the residual checks (D'Agostino-Pearson normality
  instead of Shapiro-Wilk, which needs the sorted rows; Breusch-Pagan;
  Cook's distance, top k rows per fit) and the points to check.  Only what
  needs every row at once is skipped, with one note: row bootstrap,
  permutation tests, row-based robust lines and leave-one-out refits beyond
  the pooled line.  Rows dropped while cleaning are counted per reason
  (``dropped_counts``), not listed one by one.  The figures are those of the
  in-memory run: the second pass picks the points they draw (at most
  ``MAX_DRAWN_POINTS``, the same seeded subset, :class:`scaling.run.second_pass.DrawnPoints`).
* :func:`spread_stage` -- with more groups than ``groups.spread_min``, the
  random-effects summary of the per-group exponents of each line method
  (:func:`scaling.stats.spread.spread_from_fits`): the mean exponent with its
  interval, the between-group SD tau with its Q-profile interval, and a test
  of the mean against each hypothesised exponent.

The plain-language sentences are small functions here (to move into
``wording.py`` at merge time).
"""

from __future__ import annotations

import warnings
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import pandas as pd

from ..render.wording import worded_fits
from ..errors import ConfigError, DataError, DegenerateDataWarning
from ..stats.spread import SPREAD_COLUMNS, SPREAD_TEST_COLUMNS, spread_from_fits
from ..io.tables import CleanData
from ..io.chunked import file_kind, files_of
from ..io.output import file_sha256
from .table_moments import RowSpill, read_moments
from ..stats.grouped_fits import fit_groups_from_moments
from ..stats.lines import METHODS, method_label, parse_log_base
from ..stats.line_results import line_fit_from_moments
from ..render.wording import describe_test, fit_interval_text
from ..stats.logscale import to_log
from ..stats.schema import DROPPED_COLUMNS, FIT_COLUMNS, SLOPE_TEST_COLUMNS
from .fits import blank_numbers, slope_tests
from .groups import groups_from_moments

__all__ = ["use_moments_path", "MomentsStage", "moments_stage", "moments_group_stage",
           "with_groups", "SpreadStage", "spread_stage", "spread_sentence",
           "bounded_diagnostics", "SPREAD_METHODS"]

#: Line methods whose per-group exponents carry a standard error for the spread summary.
SPREAD_METHODS = ("ols", "sma", "ma")


# --------------------------------------------------------------------------
# wording


def _thousands(n: int) -> str:
    return f"{n:,}".replace(",", "\u2009")


def spread_sentence(spread, group_word: str) -> str:
    """One sentence: the mean exponent, its interval and the between-group SD."""
    pct = f"{100 * spread.confidence:g}%"
    return (f"Across {_thousands(spread.k)} {group_word} the mean {spread.method.upper()} "
            f"exponent is {spread.mean:.3g} ({pct} CI {spread.mean_ci.low:.3g}–"
            f"{spread.mean_ci.high:.3g}), between-group SD "
            f"{spread.tau:.2g} ({spread.tau_ci.low:.2g}–{spread.tau_ci.high:.2g}); "
            f"I² = {100 * spread.i2:.0f}% of the variation among estimates is between groups.")


def _moments_path_sentence(reason: str, n_read: int, n_dropped: int, n_groups: int) -> str:
    return (f"Large-data run ({reason}): read {_thousands(n_read)} rows in chunks, dropped "
            f"{_thousands(n_dropped)}, fitted {_thousands(n_groups)} group(s) from "
            "per-group moments.")


# --------------------------------------------------------------------------
# summary across many groups


@dataclass(frozen=True, slots=True, kw_only=True)
class SpreadStage:
    """The summary across many groups.

    Attributes
    ----------
    tables : dict
        ``exponent_spread`` (one row per method, :data:`scaling.stats.spread.SPREAD_COLUMNS`)
        and ``exponent_spread_tests`` (method x hypothesised exponent), or nothing
        when there are at most ``groups.spread_min`` groups.
    messages, notes : tuple of str
    """

    tables: dict
    messages: tuple = ()
    notes: tuple = ()


def spread_stage(cfg, state) -> SpreadStage:
    """Random-effects summary of the group exponents (``state.fits``), when there are many groups."""
    fits = state.fits
    groups = fits.loc[fits["scope"] == "group", "group"]
    n_groups = int(groups.nunique())
    if n_groups <= cfg.groups.spread_min:
        return SpreadStage(tables={})
    frames, tests, messages, notes = [], [], [], []
    word = f"groups ({cfg.data.group})" if cfg.data.group else "groups"
    for method in cfg.model.methods:
        if method not in SPREAD_METHODS:
            continue
        try:
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always", DegenerateDataWarning)
                # SMA/MA exponents are averaged as log|b| / atan b (scale "auto")
                s = spread_from_fits(fits, method, tau2_method=cfg.groups.spread_tau2,
                                     mean_interval=cfg.groups.spread_interval,
                                     confidence=cfg.model.confidence, exponents=cfg.exponents)
        except DataError as exc:
            notes.append(f"No summary across groups for {method.upper()}: {exc}.")
            continue
        for w in caught:     # a REML iteration that did not converge becomes a note
            if issubclass(w.category, DegenerateDataWarning):
                notes.append(f"Summary across groups for {method.upper()}: {w.message}")
            else:
                warnings.warn(w.message, w.category, stacklevel=2)
        frames.append(s.to_frame())
        tests.append(s.tests_frame())
        messages.append(spread_sentence(s, word))
    if not frames:
        return SpreadStage(tables={}, messages=tuple(messages), notes=tuple(notes))
    tables = {"exponent_spread": pd.concat(frames, ignore_index=True)[SPREAD_COLUMNS],
              "exponent_spread_tests": pd.concat(tests, ignore_index=True)[SPREAD_TEST_COLUMNS]}
    return SpreadStage(tables=tables, messages=tuple(messages), notes=tuple(notes))


# --------------------------------------------------------------------------
# the moments path


def _file_mb(path: Path) -> float:
    try:
        if path.is_dir():
            return sum(p.stat().st_size for p in path.iterdir() if p.is_file()) / 2**20
        return path.stat().st_size / 2**20
    except OSError:
        return 0.0


def _unsupported(cfg) -> list:
    """Data keys the moments path cannot honour (it reads x, y, group and the unit column)."""
    d = cfg.data
    out = []
    if d.exclude:
        out.append("data.exclude")
    if d.skip_rows:
        out.append("data.skip_rows")
    if d.units_row:
        out.append("data.units_row")
    if Path(d.file).suffix.lower() in (".xlsx", ".xls"):
        out.append("data.file (xlsx)")
    if d.encoding.lower().replace("-", "") not in ("utf8", "utf8sig"):
        out.append("data.encoding")
    return out


def use_moments_path(cfg) -> str | None:
    """Why the run takes the moments path (``None``: the ordinary path).

    ``engine: dask`` always does (and a key the path cannot honour is an
    error); a file larger than ``data.moments_above_mb`` does unless such a
    key is set (then the ordinary path reads it whole).
    """
    keys = _unsupported(cfg)
    if cfg.engine == "dask":
        if keys:
            raise ConfigError(f"engine: dask reads x, y, group and average_within only; "
                              f"remove {', '.join(keys)} or use engine: pandas")
        return "engine: dask"
    size = _file_mb(Path(cfg.data.file))
    if size > cfg.data.moments_above_mb and not keys:
        return f"file of {size:,.0f} MB above data.moments_above_mb = {cfg.data.moments_above_mb:g}"
    return None


def _sep(cfg) -> str:
    if cfg.data.delimiter != "auto":
        return cfg.data.delimiter
    suffix = Path(cfg.data.file).suffix.lower()
    if suffix == ".tsv":
        return "\t"
    if suffix == ".parquet":
        return ","
    path = Path(cfg.data.file)
    kind = file_kind(path)
    if kind == "parquet":
        return ","
    # a folder or glob of csv files: the first file's header line decides
    with open(files_of(path, kind)[0], encoding="utf-8-sig", errors="replace") as fh:
        head = fh.readline()
    counts = {s: head.count(s) for s in (",", "\t", ";")}
    return max(counts, key=counts.get) if max(counts.values()) else ","


@dataclass(frozen=True, slots=True, kw_only=True)
class MomentsStage:
    """A whole run's fitting from per-group moments.

    Attributes
    ----------
    config : Config
        The run's config.
    data : CleanData
        ``points`` empty (no rows are kept: the figures' points are picked by the
        second pass), ``dropped`` empty.
    fits, slope_tests : DataFrame
        Equal to those of the ordinary run to rounding.
    line_fits : dict
        LineFits of the pooled lines only.
    tables : dict
        ``dropped_counts`` (``reason, rows``); after :func:`with_groups` also
        ``group_means``, ``group_tests`` and ``pairwise_tests``.
    messages, notes : tuple of str
    manifest : dict
        The run's manifest entries of this path (``large_data``).
    moments : GroupedMoments or None
        The per-group moments the fits came from (read again by the second pass).
    point_sets : dict
        After :func:`with_groups`: the group means as points (``("group_means", "")``),
        on which the second pass measures the line through them.
    spill : RowSpill or None
        The first pass's cleaned rows on disk, which the second pass reads
        instead of parsing the file again (and then deletes); None with Dask
        (its partitions are read again) and with ``data.average_within`` (the
        second pass reads the unit means held in ``moments``).
    partition_points : tuple or None
        With Dask (without ``data.average_within``): each partition's (rows read,
        points used) in file order, so the second pass picks the points the figures
        draw in its one read of the partitions.
    input_sha256 : Future or None
        The input file's SHA-256 for the manifest, computed in a thread while
        the first pass parses (hashlib lets go of the interpreter lock); None
        when ``data.file`` is not one file (a folder or glob).
    """

    config: object
    data: CleanData
    fits: pd.DataFrame
    slope_tests: pd.DataFrame
    line_fits: dict
    tables: dict
    messages: tuple = ()
    notes: tuple = ()
    manifest: dict
    moments: object = None   # the second pass (run/second_pass.py) reads them
    point_sets: dict = field(default_factory=dict)
    spill: RowSpill | None = None
    partition_points: tuple | None = None
    input_sha256: Future | None = None

    def input_hash(self) -> str | None:
        """The input file's SHA-256 (waits for the thread computing it)."""
        return None if self.input_sha256 is None else self.input_sha256.result()


def _hash_in_thread(path: Path) -> Future | None:
    """Start computing a plain file's SHA-256 in a thread (None for a folder or glob)."""
    try:
        if not path.is_file():
            return None
    except OSError:
        return None
    pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="input-sha256")
    try:
        return pool.submit(file_sha256, path)
    finally:
        pool.shutdown(wait=False)   # the thread ends when the hash is done


def moments_stage(cfg, reason: str) -> MomentsStage:
    """A whole run from per-group moments (the file is never held in memory).

    The first and only fitting stage of its road: it starts from the config
    and ``reason`` (why the road was taken, :func:`use_moments_path`), not
    from a state, since no rows are ever held.  Read chunk by chunk in this
    process, the cleaned rows are also kept on disk for the second pass
    (:class:`~scaling.run.table_moments.RowSpill`).
    """
    d = cfg.data
    digest = _hash_in_thread(Path(d.file))
    spill = RowSpill() if cfg.engine != "dask" and not d.average_within else None
    try:
        return replace(_moments_stage(cfg, reason, spill), input_sha256=digest)
    except BaseException:
        if spill is not None:
            spill.close()
        raise


def _moments_stage(cfg, reason: str, spill: RowSpill | None) -> MomentsStage:
    base = parse_log_base(cfg.model.log_base)
    d = cfg.data
    counted = [] if cfg.engine == "dask" and not d.average_within else None
    gm = read_moments(d.file, x=d.x, y=d.y, group=d.group, log_base=base,
                      chunk_size=d.chunk_size, engine=cfg.engine, scheduler=cfg.scheduler,
                      sep=_sep(cfg), decimal=d.decimal, unit=d.average_within, spill=spill,
                      partition_points=counted)
    methods = [m for m in cfg.model.methods if m in METHODS]
    others = [m for m in cfg.model.methods if m not in METHODS]
    notes: list[str] = []
    if not methods:
        raise DataError(f"{d.file}: the large-data path fits OLS, SMA and MA from moments; "
                        f"model.methods has only {', '.join(others)} (row-based)")
    res = fit_groups_from_moments(gm, methods=methods, confidence=cfg.model.confidence,
                                  exponents=cfg.exponents, pooled=True)
    fits = worded_fits(res)
    fits = fits[FIT_COLUMNS] if list(fits.columns) != FIT_COLUMNS else fits
    if not d.group:
        fits = fits[fits["scope"] == "pooled"].reset_index(drop=True)
    slope_tests = res.slope_tests
    if not d.group:
        slope_tests = slope_tests[slope_tests["scope"] == "pooled"].reset_index(drop=True)
    slope_tests = _in_fits_order(slope_tests[SLOPE_TEST_COLUMNS], fits, cfg.exponents)

    # LineFit objects for the pooled fits only (figures, predictions of the pooled line).
    line_fits = {}
    pooled = gm.pooled
    for row in fits[fits["scope"] == "pooled"].itertuples(index=False):
        if np.isfinite(row.slope):
            line_fits[("pooled", "", row.method)] = line_fit_from_moments(
                pooled[0], row.method, confidence=cfg.model.confidence, log_base=base,
                x_range=(row.x_min, row.x_max),
                y_range=(row.y_min, row.y_max))
    if not line_fits:
        raise DataError(f"{d.file}: no line could be fitted to the pooled rows")

    tables: dict = {"dropped_counts": gm.dropped_frame()}

    messages = [_moments_path_sentence(reason, gm.n_read, gm.n_dropped, gm.n_groups)]
    pct = f"{100 * cfg.model.confidence:g}%"
    for (_, _, method), fit in line_fits.items():
        messages.append(f"Pooled {method_label(method)} exponent {fit.slope:.3f} ({pct} CI "
                        f"{fit_interval_text(fit)}), r² = {fit.r2:.3f}, "
                        f"n = {fit.n}.")
        for name, b0 in cfg.exponents.items():
            messages.append("  " + describe_test(fit.test_slope(b0, hypothesis=name),
                                                 alpha=1 - cfg.model.confidence))
    if gm.n_dropped:
        notes.append(f"{gm.n_dropped} rows were dropped; dropped_counts.csv gives the number "
                     "per reason (the large-data path counts rows instead of listing them).")
    if others:
        notes.append(f"Row-based methods not fitted on the large-data path: "
                     f"{', '.join(others)}.")

    # every figure is drawn: the second pass picks the points they draw
    empty = pd.DataFrame({"row": pd.Series(dtype=np.int64), "x": pd.Series(dtype=float),
                          "y": pd.Series(dtype=float), "log_x": pd.Series(dtype=float),
                          "log_y": pd.Series(dtype=float), "n_rows": pd.Series(dtype=np.int64)})
    n_points = int(gm.pooled.n[0])
    n_used = int(gm.pooled.n[0] if gm.n_rows is None else gm.n_rows.sum())
    data = CleanData(points=empty, dropped=pd.DataFrame(columns=DROPPED_COLUMNS),
                     n_read=int(gm.n_read), units=dict(d.units),
                     averaged_within=d.average_within, n_rows_used=n_used)
    manifest = {
        "large_data": {"reason": reason, "engine": cfg.engine, "scheduler": cfg.scheduler,
                       "chunk_size": d.chunk_size, "rows_read": int(gm.n_read),
                       "rows_dropped": int(gm.n_dropped), "rows_used": n_used,
                       "points_fitted": n_points, "groups": gm.n_groups},
    }
    return MomentsStage(config=cfg, data=data, fits=fits, slope_tests=slope_tests,
                        line_fits=line_fits, tables=tables, messages=tuple(messages),
                        notes=tuple(notes), manifest=manifest, moments=gm, spill=spill,
                        partition_points=None if counted is None else tuple(counted))


def _in_fits_order(tests: pd.DataFrame, fits: pd.DataFrame, exponents: dict) -> pd.DataFrame:
    """Slope tests fit by fit in the order of the fits table (as the in-memory run)."""
    cols = ["scope", "group", "method"]
    where = pd.MultiIndex.from_frame(fits[cols].astype(object))
    position = np.arange(len(where))
    if not where.is_unique:   # the last row of a key counts
        last = ~where.duplicated(keep="last")
        where, position = where[last], position[last]
    # position of each test's fit in the fits table (after every fit when it has none)
    found = where.get_indexer(pd.MultiIndex.from_frame(tests[cols].astype(object)))
    first = np.where(found < 0, len(where), position[found])
    hyp = pd.Index(list(exponents), dtype=object)
    second = hyp.get_indexer(tests["hypothesis"].astype(object))
    second = np.where(second < 0, len(hyp), second)
    return tests.iloc[np.lexsort((second, first))].reset_index(drop=True)


def moments_group_stage(cfg, path: MomentsStage):
    """The group stage of the in-memory run, from the moments the path read.

    :func:`scaling.run.groups.groups_from_moments` with the per-group moments
    (of the unit means under ``data.average_within``), the rows behind each
    group, and the moment methods this path fits.
    """
    gm = path.moments
    base = gm.log_base
    methods = [m for m in cfg.model.methods if m in METHODS]
    n_rows = gm.moments.n if gm.n_rows is None else gm.n_rows
    log_range = (to_log(gm.x_min, base), to_log(gm.x_max, base))
    return groups_from_moments(cfg, gm.moments, tuple(gm.labels.tolist()), base=base,
                               n_rows=n_rows, log_x_range=log_range, methods=methods)


def with_groups(path: MomentsStage, grouped, cfg) -> MomentsStage:
    """The path's tables with the group stage's rows, tests, tables and sentences
    added in the order of the in-memory run (group means, then the common slopes)."""
    fits = pd.concat([path.fits, pd.DataFrame([blank_numbers(dict(r)) for r in grouped.rows],
                                              columns=FIT_COLUMNS)], ignore_index=True)
    tests = [path.slope_tests, slope_tests(grouped.line_fits, cfg)]
    if grouped.test_rows:
        tests.append(pd.DataFrame(list(grouped.test_rows), columns=SLOPE_TEST_COLUMNS))
    tests = [t for t in tests if len(t)]   # none without exponents to test
    tests = (pd.concat(tests, ignore_index=True)[SLOPE_TEST_COLUMNS] if tests
             else path.slope_tests)
    return replace(path, fits=fits, slope_tests=tests,
                   line_fits={**path.line_fits, **grouped.line_fits},
                   tables={**path.tables, **grouped.tables},
                   point_sets={**path.point_sets, **grouped.point_sets},
                   messages=path.messages + grouped.messages,
                   notes=path.notes + grouped.notes)


# --------------------------------------------------------------------------
# hooks of the ordinary run


def bounded_diagnostics(line_fits: dict, point_sets: dict, cfg) -> tuple[dict, dict, list]:
    """The fits and point sets the diagnostics stage should check.

    Above ``groups.diagnostics_max`` groups the per-group checks are left
    out (the pooled and group-means lines are still checked) and a note
    says so; otherwise everything is passed through.
    """
    n_groups = sum(1 for scope, _ in point_sets if scope == "group")
    if n_groups <= cfg.groups.diagnostics_max:
        return line_fits, point_sets, []
    fits = {k: v for k, v in line_fits.items() if k[0] != "group"}
    sets = {k: v for k, v in point_sets.items() if k[0] != "group"}
    note = (f"Per-group diagnostics skipped: {_thousands(n_groups)} groups is more than "
            f"groups.diagnostics_max = {cfg.groups.diagnostics_max}; the pooled line is "
            "checked.")
    return fits, sets, [note]

