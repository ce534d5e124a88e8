"""The answer first: at most three sentences for the line that answers the question.

Pure functions over a run's tables (``fits``, ``slope_tests``, ``group_tests``,
``pairwise_tests``) and a few config facts; nothing is recomputed here.

Which line answers the question
-------------------------------
* The *primary method* leads: ``model.primary``, by default the first
  symmetric method requested (SMA, MA, Deming, robust SMA, robust MA), else
  OLS (:func:`primary_method`).  If groups were compared but not with the
  primary method (e.g. Deming), the comparison of the first compared method
  in the order SMA, MA, OLS is read.
* No groups compared: the pooled exponent, its interval and its verdict
  against each hypothesised exponent.
* Groups compared and their slopes do not differ (p > 1 - confidence): the
  common within-group exponent (scope ``common``), its interval and its
  verdicts; then whether the groups differ in elevation or position along
  the common axis.  When elevations differ and the pooled exponent lies
  outside the common exponent's interval, the pooled line mixes groups and
  under- or overstates the within-group exponent: said plainly (pooling
  across groups at different elevations biases the pooled slope; e.g.
  Warton et al. 2006, Biol. Rev. 81:259, section on shifts in elevation).
* Slopes differ: no single exponent; a per-group verdict table
  (``group_table``).

Verdicts use :func:`scaling.render.wording.verdict_phrase` at alpha = 1 - confidence.

A point that moves the answer
-----------------------------
When removing one point moves the leading exponent by more than its standard
error or changes a verdict (rows of kind ``moves_answer`` in
``points_to_check``), the answer says so in one more sentence naming the row
(:func:`influence_sentence`).
"""

from __future__ import annotations

import math
from collections import namedtuple
from functools import lru_cache
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..stats.schema import method_label
from .wording import (at_floor, calibrated_p_text, format_p, plural as plural_of, possessive,
                      slope_interval_text, verdict_phrase)

__all__ = ["SYMMETRIC_ORDER", "Headline", "primary_method", "build_headline",
           "exponent_words", "answer_line", "influence_sentence"]

#: Symmetric methods in the order the default primary method is chosen.
SYMMETRIC_ORDER = ("sma", "ma", "deming", "sma_robust", "ma_robust")

_FRACTIONS = {0.75: "3/4", 2 / 3: "2/3", 1.0: "1", 0.5: "1/2", 1 / 3: "1/3", 0.25: "1/4",
              3.0: "3", 2.0: "2"}
_LINE_WORDS = {"pooled": "pooled", "common": "common within-group", "group_means":
               "through the group means", "group": "group"}


@dataclass(frozen=True, slots=True, kw_only=True)
class Headline:
    """The opening of the report.

    Attributes
    ----------
    primary : str
        The method whose line leads.
    line : str
        ``"pooled"`` (no groups compared), ``"common"`` (slopes do not differ)
        or ``"groups"`` (slopes differ).
    sentences : tuple of str
        At most three.
    exponent_table : DataFrame
        One row per fit (line, method, exponent, interval) and one column per
        hypothesised exponent holding the verdict and p-value.
    group_table : DataFrame or None
        Per-group verdicts of the primary method when slopes differ.
    matrices : dict
        Test name -> groups x groups DataFrame of Holm-adjusted p-values
        (upper triangle; ``*`` marks p <= 1 - confidence), for the method read.
    """

    primary: str
    line: str
    sentences: tuple
    exponent_table: pd.DataFrame = field(compare=False)
    group_table: pd.DataFrame | None = field(default=None, compare=False)
    matrices: dict = field(default_factory=dict, compare=False)


def ordinary_rows(table: pd.DataFrame | None) -> pd.DataFrame | None:
    """The ordinary rows of group_tests / pairwise_tests (all rows when unscoped): the
    phylogenetic rows (scope ``phylo``) lead only through :mod:`scaling.render.answer_phylo`."""
    if table is None or "scope" not in table.columns:
        return table
    return table[table["scope"] != "phylo"].reset_index(drop=True)


def primary_method(methods, primary: str | None = None) -> str:
    """The leading method: ``primary`` if requested, else the first symmetric one, else OLS.

    >>> primary_method(["ols", "ma", "sma"])
    'ma'
    >>> primary_method(["ols", "theil_sen"])
    'ols'
    """
    methods = list(methods)
    if primary is not None and primary in methods:
        return primary
    for m in methods:
        if m in SYMMETRIC_ORDER:
            return m
    return "ols" if "ols" in methods else methods[0]


def answer_line(group_tests: pd.DataFrame | None, methods, primary: str | None = None,
                confidence: float = 0.95) -> tuple:
    """Which model the answer reports: ``(line, method)``, the rule of :func:`build_headline`.

    ``line`` is ``"pooled"`` (no groups compared), ``"common"`` (groups
    compared and their slopes do not differ: the parallel-lines model with
    the common slope of ``method``) or ``"groups"`` (slopes differ: each
    group's own line of ``method``).

    >>> answer_line(None, ["ols", "sma"])
    ('pooled', 'sma')
    """
    lead = primary_method(methods, primary)
    group_tests = ordinary_rows(group_tests)
    usable = (group_tests is not None and len(group_tests)
              and {"method", "test", "p_value"} <= set(group_tests.columns))
    compared = list(dict.fromkeys(group_tests["method"])) if usable else []
    read = lead if lead in compared else next(
        (m for m in ("sma", "ma", "ols") if m in compared), None)
    if read is None:
        return "pooled", lead
    gt = group_tests[(group_tests["method"] == read) & (group_tests["test"] == "slopes_equal")]
    p = float(gt["p_value"].iloc[0]) if len(gt) else math.nan
    if np.isfinite(p) and p <= 1 - confidence:
        return "groups", lead
    return "common", read


_VERDICT_WORDS = {"above": "above", "below": "below", "not_different": "not different",
                  "not_tested": "not tested"}


def influence_sentence(row, context=(), *, slope: float, slope_without: float,
                       changes=(), exponent_of: str = "", widens_by: float | None = None
                       ) -> str:
    """One sentence naming a row that moves the answer.

    >>> influence_sentence(35, (("stem_mm", 4.1), ("habitat", "shade")), slope=1.845,
    ...                    slope_without=1.818)
    'Row 35 (stem_mm 4.1, habitat shade) moves this exponent from 1.845 to 1.818: check it first.'

    Parameters
    ----------
    row : int or None
    context : sequence of (name, value)
        What identifies the point besides its row (its x, its group, its label).
    slope, slope_without : float
        The exponent with the point and refitted without it.
    changes : sequence of (target, before, after)
        Verdicts that change: the hypothesised exponent as written and the
        verdict codes with and without the point.
    exponent_of : str
        The group whose exponent moves ("" for the one exponent of the answer).
    widens_by : float, optional
        How much wider the point makes the exponent's interval (0.4: 40 % wider),
        given when removing it narrows the interval by more than a quarter
        (:func:`scaling.stats.influence.narrows`, decided where the point was refitted).
    """
    def value(v):
        return f"{v:.3g}" if isinstance(v, (float, np.floating)) else str(v)

    what = ", ".join(f"{name} {value(v)}" if name else value(v) for name, v in context)
    who = (f"Row {row}" if row is not None else "One point") + (f" ({what})" if what else "")
    which = f"the {exponent_of} exponent" if exponent_of else "this exponent"
    if np.isfinite(slope_without):
        moved = f"moves {which} from {slope:.3f} to {slope_without:.3f}"
    else:
        moved = f"holds up {which} ({slope:.3f}): without it the exponent cannot be estimated"
    if widens_by is not None:
        moved += f" and widens its interval by {100 * widens_by:.0f}%"
    verdicts = [f"against {t} from {_VERDICT_WORDS.get(a, a)} to {_VERDICT_WORDS.get(b, b)}"
                for t, a, b in changes]
    if verdicts:
        moved += (" and its verdict " if len(verdicts) == 1 else " and its verdicts ") + (
            "; ".join(verdicts))
    return f"{who} {moved}: check it first."


def _moves_sentence(points: pd.DataFrame | None) -> str:
    """The answer's sentence on rows that move it (from ``points_to_check``), or ""."""
    if points is None or not len(points) or "kind" not in points.columns:
        return ""
    moving = points[points["kind"] == "moves_answer"]
    if not len(moving):
        return ""
    first = str(moving["reason"].iloc[0])
    if len(moving) == 1:
        return first
    more = len(moving) - 1
    return (first.removesuffix(": check it first.")
            + f"; {more} more row{'s' if more > 1 else ''} move{'' if more > 1 else 's'} it "
            "too (points_to_check.csv): check them first.")


def exponent_words(name: str, value: float) -> str:
    """'3/4' for 0.75, else the value to four significant digits."""
    for v, text in _FRACTIONS.items():
        if math.isclose(value, v, rel_tol=1e-9):
            return text
    return f"{value:.4g}"


def _ci(lo, hi, pct: str, gap_low=math.nan, gap_high=math.nan) -> str:
    """The interval in words; two ranges when an SMA accepted set is split by a gap."""
    if np.isfinite(lo) and np.isfinite(hi):
        return f"{pct} CI {slope_interval_text(lo, hi, _num(gap_low), _num(gap_high))}"
    return f"{pct} CI unbounded"


def _num(value) -> float:
    """A table cell as a float (blank or missing -> NaN)."""
    try:
        return float(value)
    except (TypeError, ValueError):
        return math.nan


def _gap(row) -> tuple:
    """``slope_gap_low, slope_gap_high`` of a fits row (NaN where the table has none)."""
    return tuple(_num(row.get(k, math.nan)) if hasattr(row, "get")
                 else _num(getattr(row, k, math.nan)) for k in ("slope_gap_low", "slope_gap_high"))


@lru_cache(maxsize=1 << 16)
def _short_verdict(est, b0, p, alpha, p_method="") -> str:
    """The verdict cell of an exponent table (cached: a line's verdicts are written in the
    exponent table and again in the groups' table, thousands of times over many groups;
    the cache holds every verdict of a run of 10 000 groups and two exponents, so the
    groups' table finds each one made)."""
    if not np.isfinite(p):
        return "not tested"
    if p < alpha:
        return f"{'above' if est > b0 else 'below'} ({calibrated_p_text(p, p_method)})"
    return f"not different ({calibrated_p_text(p, p_method)})"


def _p_method(record) -> str:
    """The ``p_method`` of a slope_tests or group_tests row ("" in tables without it)."""
    value = record.get("p_method", "") if hasattr(record, "get") else getattr(
        record, "p_method", "")
    return value if isinstance(value, str) else ""


def _verdict_list(tests: pd.DataFrame, alpha: float) -> str:
    parts = []
    for r in tests.itertuples(index=False):
        target = exponent_words(str(r.hypothesis), float(r.exponent))
        parts.append(f"{verdict_phrase(r.estimate, r.exponent, r.p_value, alpha=alpha, target=target)}"
                     f" ({calibrated_p_text(r.p_value, _p_method(r))})"
                     if np.isfinite(r.p_value) else f"could not be tested against {target}")
    if not parts:
        return ""
    return parts[0] if len(parts) == 1 else ", ".join(parts[:-1]) + " and " + parts[-1]


def _row(frame: pd.DataFrame, scope: str, method: str, group: str = "") -> pd.Series | None:
    if frame is None or not len(frame):
        return None
    sel = frame[(frame["scope"] == scope) & (frame["method"] == method)
                & (frame["group"].fillna("").astype(str) == group)]
    return sel.iloc[0] if len(sel) else None


def _tests(slope_tests: pd.DataFrame, scope: str, method: str, group: str = ""):
    if slope_tests is None or not len(slope_tests):
        return slope_tests.iloc[:0] if slope_tests is not None else pd.DataFrame()
    return slope_tests[(slope_tests["scope"] == scope) & (slope_tests["method"] == method)
                       & (slope_tests["group"].fillna("").astype(str) == group)]


def _test_index(slope_tests: pd.DataFrame | None) -> dict:
    """Rows of ``slope_tests`` (as dicts of :data:`_TEST_FIELDS`, in table order) by
    (scope, method, group).

    One pass over the table, so that looking up the tests of each of many
    groups does not filter the whole table once per group.  ``group`` is the
    group label as text ("" for none), as :func:`_tests` compares it.
    """
    out: dict = {}
    if slope_tests is None or not len(slope_tests):
        return out
    keys = zip(slope_tests["scope"].tolist(), slope_tests["method"].tolist(),
               slope_tests["group"].fillna("").astype(str).tolist())
    # records from column lists (to_dict boxes every cell of an Arrow text column), of
    # the columns the headline reads
    columns = {c: slope_tests[c].tolist() for c in _TEST_FIELDS if c in slope_tests.columns}
    for key, values in zip(keys, zip(*columns.values())):
        out.setdefault(key, []).append(dict(zip(columns, values)))
    return out


#: The columns of slope_tests rows that :func:`_test_index` keeps.
_TEST_FIELDS = ("hypothesis", "exponent", "estimate", "p_value", "p_method")


def _exponent_table(fits, slope_tests, primary, alpha, pct, index=None) -> pd.DataFrame:
    """Fit x hypothesis: every pooled, common and group-means fit, and the
    primary method's per-group fits (``index``: :func:`_test_index` of ``slope_tests``)."""
    rows = []
    if fits is None or not len(fits):
        return pd.DataFrame()
    hyps = ([] if slope_tests is None or not len(slope_tests)
            else list(dict.fromkeys(zip(slope_tests["hypothesis"].tolist(),
                                        slope_tests["exponent"].tolist()))))
    order = {"common": 0, "pooled": 1, "group_means": 2, "group": 3}
    keep = fits[(fits["scope"] != "group") | (fits["method"] == primary)]
    keep = keep.assign(_o=keep["scope"].map(order).fillna(9),
                       _p=(keep["method"] != primary).astype(int))
    keep = keep.sort_values(["_o", "_p"], kind="stable")
    index = _test_index(slope_tests) if index is None else index
    labels = [f"vs {exponent_words(str(name), float(b0))}" for name, b0 in hyps]
    gaps = _gap_reader(keep)
    for r in _rows(keep, ("scope", "group", "method", "slope", "slope_low", "slope_high",
                          "slope_gap_low", "slope_gap_high")):
        group = "" if pd.isna(r.group) else str(r.group)
        line = _LINE_WORDS.get(r.scope, r.scope) + (f" {group}" if group else "")
        rec = {"line": line, "method": method_label(str(r.method)),
               "exponent": r.slope, "low": r.slope_low, "high": r.slope_high,
               **gaps(r)}
        first: dict = {}   # the first test of each hypothesis for this line
        for t in index.get((r.scope, r.method, group), ()):
            first.setdefault(t["hypothesis"], t)
        for (name, b0), label in zip(hyps, labels):
            t = first.get(name)
            rec[label] = (_short_verdict(float(t["estimate"]), float(b0),
                                         float(t["p_value"]), alpha, _p_method(t))
                          if t is not None else "")
        rows.append(rec)
    return _drop_empty_gaps(pd.DataFrame(rows))


def _rows(frame: pd.DataFrame, columns) -> map:
    """``frame[columns].itertuples(index=False)`` (of the columns present), each column read
    as one list (itertuples reads an Arrow text column value by value)."""
    names = [c for c in columns if c in frame.columns]
    row = namedtuple("Row", names)
    return map(row._make, zip(*(frame[c].tolist() for c in names)))


def _gap_cells(r) -> dict:
    """``gap_low``, ``gap_high`` of a fits row: the slopes between them are rejected
    (an SMA accepted set of two ranges, ``low .. gap_low`` and ``gap_high .. high``)."""
    gap_low, gap_high = _gap(r)
    return {"gap_low": gap_low, "gap_high": gap_high}


def _gap_reader(frame: pd.DataFrame):
    """:func:`_gap_cells`, or the same cells read straight from a row of :func:`_rows`
    when both gap columns of ``frame`` hold float64 (whose values ``_num`` keeps as
    they are)."""
    names = ("slope_gap_low", "slope_gap_high")
    if all(c in frame.columns and frame[c].dtype == np.float64 for c in names):
        return lambda r: {"gap_low": r.slope_gap_low, "gap_high": r.slope_gap_high}
    return _gap_cells


def _drop_empty_gaps(table: pd.DataFrame) -> pd.DataFrame:
    """The gap columns are shown only when some row's accepted slopes are two ranges."""
    if "gap_low" in table.columns and not np.isfinite(
            table["gap_low"].to_numpy(dtype=float)).any():
        return table.drop(columns=["gap_low", "gap_high"])
    return table


def _matrices(pairwise: pd.DataFrame | None, method: str, groups, alpha) -> dict:
    out = {}
    need = {"method", "test", "group_a", "group_b", "p_adjusted"}
    if pairwise is None or not len(pairwise) or not need <= set(pairwise.columns):
        return out
    sub = pairwise[pairwise["method"] == method]
    for test, block in sub.groupby("test", sort=False):
        names = ([str(g) for g in groups] if groups else
                 sorted(set(block["group_a"].astype(str)) | set(block["group_b"].astype(str))))
        mat = pd.DataFrame("", index=names, columns=names)
        for r in block.itertuples(index=False):
            a, b = str(r.group_a), str(r.group_b)
            if a in mat.index and b in mat.columns:
                p = float(r.p_adjusted)
                mark = "*" if np.isfinite(p) and p <= alpha else ""
                # a Holm p from a resampled p at its floor is an upper bound
                bound = ("≤ " if at_floor([r.p_value], [getattr(r, "p_method", "")])[0]
                         else "")
                mat.loc[a, b] = (bound + format_p(p) + mark) if np.isfinite(p) else "–"
        mat = mat.loc[names[:-1], names[1:]] if len(names) > 1 else mat
        mat.index.name = "group"
        out[str(test)] = mat
    return out


def build_headline(fits: pd.DataFrame, slope_tests: pd.DataFrame,
                   group_tests: pd.DataFrame | None = None,
                   pairwise_tests: pd.DataFrame | None = None, *, methods,
                   primary: str | None = None, confidence: float = 0.95,
                   group_word: str = "group") -> Headline:
    """The headline of a run from its tables (see the module notes for the rules).

    Parameters
    ----------
    fits, slope_tests : DataFrame
        As in ``fits.csv`` and ``slope_tests.csv`` (with scope ``common``
        rows when groups were compared).
    group_tests, pairwise_tests : DataFrame or None
        As in ``group_tests.csv`` and ``pairwise_tests.csv``.
    methods : sequence of str
        The methods requested, in order.
    primary : str or None
        ``model.primary``.
    confidence : float
    group_word : str
        What a group is called (the group column's name, e.g. "clade").

    Returns
    -------
    Headline
    """
    alpha = 1 - confidence
    pct = f"{100 * confidence:g}%"
    lead = primary_method(methods, primary)
    group_tests, pairwise_tests = ordinary_rows(group_tests), ordinary_rows(pairwise_tests)
    index = _test_index(slope_tests)   # the tests of each line, read once
    table = _exponent_table(fits, slope_tests, lead, alpha, pct, index)
    usable = (group_tests is not None and len(group_tests)
              and {"method", "test", "p_value"} <= set(group_tests.columns))
    compared = list(dict.fromkeys(group_tests["method"])) if usable else []
    read = lead if lead in compared else next(
        (m for m in ("sma", "ma", "ols") if m in compared), None)
    plural = plural_of(group_word)

    if (read is None and "term" in fits.columns
            and fits["term"].fillna("").astype(str).ne("").any()):
        return Headline(primary=lead, line="pooled",
                        sentences=_several_predictors(fits, slope_tests, lead, alpha, pct),
                        exponent_table=table)
    if read is None:
        fit = _row(fits, "pooled", lead)
        if fit is None or not np.isfinite(fit["slope"]):
            sentences = (f"The {method_label(lead)} line could not be fitted; see the notes.",)
        else:
            tests = _tests(slope_tests, "pooled", lead)
            s1 = (f"The {method_label(lead)} exponent is {fit['slope']:.3f} "
                  f"({_ci(fit['slope_low'], fit['slope_high'], pct, *_gap(fit))}, "
                  f"n = {int(fit['n'])}).")
            verdicts = _verdict_list(tests, alpha)
            sentences = (s1,) + ((f"It {verdicts}.",) if verdicts else ())
        return Headline(primary=lead, line="pooled", sentences=sentences,
                        exponent_table=table)

    gt = group_tests[group_tests["method"] == read].set_index("test")
    label = method_label(read)
    matrices = _matrices(pairwise_tests, read, None, alpha)

    def p_of(test):
        return float(gt.loc[test, "p_value"]) if test in gt.index else math.nan

    def p_words(test):
        how = gt.loc[test, "p_method"] if test in gt.index and "p_method" in gt.columns else ""
        return calibrated_p_text(p_of(test), how if isinstance(how, str) else "")

    p_slope, p_elev, p_axis = (p_of(t) for t in ("slopes_equal", "intercepts_equal",
                                                 "shift_along_axis"))
    common = _row(fits, "common", read)
    n_groups = ""
    if common is not None and isinstance(common.get("note", ""), str):
        n_groups = common["note"].split(" groups")[0].replace("common within-group slope of ", "")

    if np.isfinite(p_slope) and p_slope <= alpha:
        gfits = fits[(fits["scope"] == "group") & (fits["method"] == lead)]
        rows, words = [], {}
        gaps = _gap_reader(gfits)
        for r in _rows(gfits, ("group", "n", "slope", "slope_low", "slope_high",
                               "slope_gap_low", "slope_gap_high")):
            rec = {group_word: r.group,
                   "n": r.n, "exponent": r.slope, "low": r.slope_low, "high": r.slope_high,
                   **gaps(r)}
            for t in index.get(("group", lead, str(r.group)), ()):
                which = (t["hypothesis"], t["exponent"])   # the column's words, made once
                column = words.get(which) or words.setdefault(
                    which, f"vs {exponent_words(str(which[0]), float(which[1]))}")
                rec[column] = _short_verdict(t["estimate"], t["exponent"], t["p_value"], alpha,
                                             _p_method(t))
            rows.append(rec)
        s1 = (f"The {plural} do not share one exponent: their {label} slopes differ "
              f"({p_words('slopes_equal')}), so each {group_word} has its own; the table below gives each "
              f"{possessive(group_word)} exponent and verdict.")
        out = [s1]
        pooled = _row(fits, "pooled", lead)
        if pooled is not None and np.isfinite(pooled["slope"]):
            out.append(f"The pooled {method_label(lead)} exponent "
                       f"({pooled['slope']:.3f}) only averages these differing slopes.")
        return Headline(primary=lead, line="groups", sentences=tuple(out),
                        exponent_table=table, group_table=_drop_empty_gaps(pd.DataFrame(rows)),
                        matrices=matrices)

    if common is None or not np.isfinite(common["slope"]):
        sentences = (f"The {plural}' {label} slopes could not be compared for a common "
                     "exponent; see the group comparisons.",)
        return Headline(primary=read, line="common", sentences=sentences,
                        exponent_table=table, matrices=matrices)
    tests = _tests(slope_tests, "common", read)
    how = "do not differ" if np.isfinite(p_slope) else "were not compared"
    s1 = (f"Within {plural}, the common {label} exponent is {common['slope']:.3f} "
          f"({_ci(common['slope_low'], common['slope_high'], pct, *_gap(common))}; "
          f"{n_groups} {plural}, n = {int(common['n'])}; the {plural}' slopes {how}"
          + (f", {p_words('slopes_equal')})." if np.isfinite(p_slope) else ")."))
    verdicts = _verdict_list(tests, alpha)
    out = [s1] + ([f"This within-{group_word} exponent {verdicts}."] if verdicts else [])
    elev_differs = np.isfinite(p_elev) and p_elev <= alpha
    axis_differs = np.isfinite(p_axis) and p_axis <= alpha
    pos = "position along the common axis" if read != "ols" else "mean size (log x)"
    if elev_differs:
        s3 = f"The {plural} differ in elevation ({p_words('intercepts_equal')})"
    elif np.isfinite(p_elev):
        s3 = (f"The {plural} do not differ detectably in elevation "
              f"({p_words('intercepts_equal')})")
    else:
        s3 = f"Elevations of the {plural} were not compared"
    if np.isfinite(p_axis):
        s3 += (f" and {'differ' if axis_differs else 'do not differ detectably'} in {pos} "
               f"({p_words('shift_along_axis')})")
    pooled = _row(fits, "pooled", read)
    if elev_differs and pooled is not None and np.isfinite(pooled["slope"]):
        b_pool, lo, hi = float(pooled["slope"]), common["slope_low"], common["slope_high"]
        if np.isfinite(lo) and np.isfinite(hi) and not lo <= b_pool <= hi:
            word = "understates" if b_pool < lo else "overstates"
            s3 += (f"; the pooled line ({b_pool:.3f}) mixes {plural} and {word} the "
                   f"within-{group_word} exponent")
    out.append(s3 + ".")
    return Headline(primary=read, line="common", sentences=tuple(out[:3]),
                    exponent_table=table, matrices=matrices)


def _several_predictors(fits, slope_tests, lead, alpha, pct) -> tuple:
    """Exponents of a power law in several predictors, then their tests per hypothesis."""
    rows = fits[(fits["scope"] == "pooled") & (fits["method"] == lead)]
    parts = [f"{r.slope:.3f} for {r.term} ({_ci(r.slope_low, r.slope_high, pct, *_gap(r))})"
             for r in rows.itertuples(index=False)]
    n = int(rows["n"].iloc[0]) if len(rows) else 0
    s1 = (f"The {method_label(lead)} exponents are " + "; ".join(parts) + f" (n = {n}).")
    tests = slope_tests[(slope_tests["scope"] == "pooled") & (slope_tests["method"] == lead)]
    said = []
    if "term" in tests.columns:
        for name, t in tests.groupby("hypothesis", sort=False):
            each = ", ".join(f"{r.term} vs {r.exponent:g} "
                             f"{_short_verdict(r.estimate, r.exponent, r.p_value, alpha, _p_method(r))}"
                             for r in t.itertuples(index=False))
            said.append(f"against {name}: {each}")
    return (s1,) + ((("Tested " + "; ".join(said) + "."),) if said else ())
