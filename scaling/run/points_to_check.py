"""The run's graded checks: which points and numbers to look at before use.

:func:`check_run` reads what :func:`scaling.run.pipeline.analyse` has computed
(the fits, their points, correction factors and predictions), calls
:func:`scaling.stats.influence.points_to_check` and returns the
``points_to_check`` table and the warnings it adds to the run.

Influence is also measured on what the answer states (:func:`answer_points`):
the strong points of the answer's model (the parallel-lines model of the
common within-group slope, each group's own line when slopes differ, the
pooled line without groups; and, with a common slope, the points strong in
their own group's line) are removed one at a time and the answer's model is
refitted by the run's own estimator; a point that moves the exponent by more
than its standard error or changes a verdict is a ``moves_answer`` row, and
the answer names it.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import ScalingError
from ..render.headline import answer_line, exponent_words
from ..render.prediction_words import answer_primary
from ..render.headline import primary_method as primary_method_of
from ..stats.group_comparisons import compare_groups
from ..stats.group_means import compared_groups
from ..stats.line_results import fit_line
from ..stats.residual_checks import GroupCodes, group_order, unique_codes
from ..stats.lines import METHODS, method_label

__all__ = ["POINTS_TO_CHECK_COLUMNS", "PointsToCheck", "primary_method", "check_run",
           "answer_points", "in_groups", "coded_groups", "coded_points"]

from ..stats.schema import POINTS_TO_CHECK_COLUMNS  # noqa: E402 (the vocabulary's home)
from ..stats.influence import (COOK_STRONG, SMEARING_RATIO_LIMIT, PointCheck, fit_checks,
                               moves_answer, narrows, points_to_check, strong_influence,
                               strong_influence_each, strong_parallel_influence, verdict_code)
from ..render.findings import point_check_reason
from ..stats.cooks import SPAN
from .fits import known_group_codes, known_moments, set_columns
from .predictions import chunk_runs
from .phylo_checks import answer_model_checks, answer_point_rows, point_context
MAX_LISTED = 5
#: Most strong points of the answer's model refitted one at a time (largest Cook's distance first).
MAX_REFITS = 10


def primary_method(cfg) -> str:
    """``model.primary`` (resolved by the config: given, else the first symmetric method
    requested, else OLS); the rule itself lives in :func:`scaling.render.headline.primary_method`."""
    return primary_method_of(cfg.model.methods, getattr(cfg.model, "primary", None))


def _scope_words(scope: str, group: str) -> str:
    return {"pooled": "pooled", "group_means": "group-means",
            "common": "common within-group"}.get(scope, f"group {group}")


@dataclass(frozen=True, slots=True, kw_only=True)
class PointsToCheck:
    """The ``points_to_check`` table and the warnings it adds to the run."""

    table: pd.DataFrame
    notes: tuple = ()


def check_run(cfg, state) -> PointsToCheck:
    """The ``points_to_check`` table and the warnings for one run.

    Parameters
    ----------
    cfg : Config
    state : RunState
        Reads ``line_fits`` (``(scope, group, method) -> LineFit``),
        ``point_sets`` (``(scope, group) -> DataFrame`` with ``log_x, log_y,
        row`` and ``unit``, ``group`` when present), ``fits`` (with
        ``smearing_factor`` and ``parametric_factor``) and ``tables``
        (``predictions`` when present).
    """
    answer = answer_points(cfg, state)
    table, warn = _check(cfg, state.line_fits, state.point_sets, state.fits, state.tables,
                         answer)
    if cfg.data.tree is not None:   # the phylogenetic model the Answer leads with
        records, p_warn = answer_point_rows(cfg, state, answer_model_checks(cfg, state))
        if records:
            extra = pd.DataFrame(records, columns=POINTS_TO_CHECK_COLUMNS)
            table = pd.concat([extra, table], ignore_index=True) if len(table) else extra
            table["row"] = table["row"].astype("Int64")
            warn = p_warn + warn
    return PointsToCheck(table=table, notes=tuple(warn))


def _check(cfg, line_fits: dict, point_sets: dict, fits: pd.DataFrame, tables: dict,
           answer: list) -> tuple:
    alpha = cfg.diagnostics.alpha
    records, warn = [], []
    preds = tables.get("predictions")
    factors = dict(zip(zip(*(fits[c].tolist() for c in ("scope", "group", "method"))),
                       zip(fits["smearing_factor"].tolist(), fits["parametric_factor"].tolist()))
                   ) if "smearing_factor" in fits else {}
    primary = primary_method(cfg)
    pooled_key = ("pooled", "", primary)
    if pooled_key not in line_fits:
        pooled_key = next((k for k in line_fits if k[0] == "pooled"), None)
    # the prediction rows of each fit, in table order (one pass, not one filter per fit)
    pred_rows: dict = {}
    if preds is not None and len(preds):
        for r in preds.itertuples(index=False):
            pred_rows.setdefault((r.scope, r.group, r.method), []).append(r)
    sizes = {k: len(sel) for k, sel in point_sets.items()}   # each set's size taken once
    agree = _factors_agree(factors)
    with warnings.catch_warnings():   # one silenced context for every fit's checks
        warnings.simplefilter("ignore")
        for key, fit in line_fits.items():
            scope, group, method = key
            whole = key == pooled_key
            if not whole and key not in pred_rows and (key in agree or key not in factors):
                continue   # nothing for fit_checks to find (most of a thousand groups' fits)
            size = sizes.get((scope, group))
            if size is None or size != fit.n or size < 4:
                continue
            sel = point_sets[(scope, group)]
            est = [(f"at x = {r.x:g} ", r.y, r.y_low, r.y_high)
                   for r in pred_rows.get(key, ())] if preds is not None and len(preds) else ()
            smear, param = factors.get(key, (None, None))
            if whole:   # the points are read for the primary pooled line only
                labels = sel["unit"].astype(str).to_numpy() if "unit" in sel else None
                # the groups as codes in the order of their names (factorized by pandas:
                # no Python string per row)
                codes = (coded_points(sel).codes
                         if "group" in sel and scope == "pooled" else None)
                x, y = sel["log_x"].to_numpy(), sel["log_y"].to_numpy()
                rows = sel["row"].to_numpy() if "row" in sel else None
            try:
                if whole:
                    found = points_to_check(x, y, method=method, rows=rows, labels=labels,
                                            group_codes=codes, smearing_factor=smear,
                                            parametric_factor=param, estimates=est, alpha=alpha,
                                            sample_moments=known_moments(sel))
                else:   # fit-level checks only; points are checked on the primary line
                    found = fit_checks(smearing_factor=smear, parametric_factor=param,
                                       estimates=est)
            except ScalingError:
                continue
            if whole and answer and answer[0][0] == "pooled":
                # the pooled line is the answer: its strong points are the answer's
                found = [c for c in found if c.kind != "influence"]
                records += [{"scope": sc, "group": g, "method": m, **c.to_record(),
                             "reason": point_check_reason(c)} for sc, g, m, c in answer]
                answer = []
            for c in found:
                records.append({"scope": scope, "group": group, "method": method,
                                **c.to_record(), "reason": point_check_reason(c)})
    records += [{"scope": sc, "group": g, "method": m, **c.to_record(),
                 "reason": point_check_reason(c)} for sc, g, m, c in answer]
    table = pd.DataFrame(records, columns=POINTS_TO_CHECK_COLUMNS)
    if "row" in table:
        table["row"] = table["row"].astype("Int64")
    if not len(table):
        return table, warn
    # a row that moves the answer is named by the answer; listed here only when it has
    # no strong influence row of its own
    infl = table[(table["kind"] == "influence") | ((table["kind"] == "moves_answer") & ~table[
        "row"].isin(table.loc[table["kind"] == "influence", "row"]))]
    for r in infl.head(MAX_LISTED).itertuples(index=False):
        warn.append(f"STRONG — {_scope_words(r.scope, r.group)} {method_label(r.method)}: "
                    f"{r.reason}")
    if len(infl) > MAX_LISTED:
        warn.append(f"STRONG — {len(infl) - MAX_LISTED} more influential point(s) are listed "
                    "in points_to_check.csv.")
    for kind in ("smearing", "outside_interval"):
        part = table[table["kind"] == kind]
        if len(part):
            first = part.iloc[0]
            where = ", ".join(sorted({f"{_scope_words(r.scope, r.group)} "
                                      f"{method_label(r.method)}"
                                      for r in part.itertuples(index=False)}))
            warn.append(f"STRONG — {where}: {first['reason']}"
                        + (f" ({len(part)} cases; see points_to_check.csv)"
                           if len(part) > 1 else ""))
    for r in table[table["kind"] == "group_residuals"].itertuples(index=False):
        warn.append(f"Note — {method_label(r.method)} line: {r.reason}")
    return table, warn


def _factors_agree(factors: dict) -> set:
    """The fits whose smearing and parametric factors agree well inside the limits of
    :func:`~scaling.stats.influence.fit_checks` (their ratio at least 1 % inside
    [1 / SMEARING_RATIO_LIMIT, SMEARING_RATIO_LIMIT], far beyond rounding): taken in
    one array pass, so that the checks are called only for the fits they may flag."""
    if not factors:
        return set()
    pairs = np.array(list(factors.values()), dtype=float).reshape(-1, 2)
    smear, param = pairs[:, 0], pairs[:, 1]
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = smear / param
        inside = (np.isfinite(smear) & np.isfinite(param) & (param > 0)
                  & (ratio > 1.01 / SMEARING_RATIO_LIMIT) & (ratio < SMEARING_RATIO_LIMIT / 1.01))
    return {key for key, ok in zip(factors, inside.tolist()) if ok}


# --------------------------------------------------------------------------
# influence on what the answer states


def answer_points(cfg, state) -> list:
    """The strong points of the answer's model, each refitted out: ``(scope, group, method, PointCheck)``.

    The answer's model is the one :func:`scaling.render.headline.answer_line`
    reads from the group tests: the pooled line of the primary method (no
    groups), the parallel-lines model of the common slope, or each group's
    own line.  With a tree the phylogenetic model should lead; the answer
    does not lead with it yet, so the checks follow the answer as it is
    (common slope or pooled line) and the tree case is left to the
    phylogenetic answer.  Only the moment methods (OLS, SMA, MA) are refitted;
    other primary methods keep the pooled checks of :func:`check_run`.
    """
    pooled = state.point_sets.get(("pooled", ""))
    if pooled is None or len(pooled) < 4 or state.fits is None:
        return []
    line, method = answer_line(state.tables.get("group_tests"), cfg.model.methods,
                               answer_primary(cfg), cfg.model.confidence)
    if method not in METHODS:
        return []
    hyps = [(exponent_words(str(k), float(v)), float(v)) for k, v in cfg.exponents.items()]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            if line == "common":
                return _common_points(cfg, state, pooled, method, hyps)
            if line == "groups":
                # each group's columns read once (a column of a frame costs tens of µs)
                sets = [(g, sel, *set_columns(sel, "log_x", "log_y"))
                        for g, sel in _group_sets(state, method)]
                sets = [s for s in sets if np.ptp(s[2]) > 0]
                screens = _screened([(X, Y) for _, _, X, Y in sets], method)
                stated = _Stated(state)
                return [p for (g, sel, X, Y), inf in zip(sets, screens)
                        for p in _line_points(cfg, state, sel, "group", g, method, hyps,
                                              inf=inf, xy=(X, Y), stated=stated)]
            return _line_points(cfg, state, pooled, "pooled", "", method, hyps)
        except ScalingError:
            return []


def in_groups(labels: np.ndarray, names) -> np.ndarray:
    """``np.isin(labels, np.asarray(names, dtype=str))`` for text labels, by one hash
    look-up per label (numpy compares every label with every name: a million rows
    times a thousand groups)."""
    return pd.Series(labels, dtype=object, copy=False).isin([str(n) for n in names]).to_numpy()


def coded_groups(column: pd.Series) -> GroupCodes:
    """A group column's names as :class:`~scaling.stats.residual_checks.GroupCodes`
    (codes in the order of the names as text), factorized by pandas without making a
    Python string per row; a column with a missing name is coded through its text."""
    codes, names = pd.factorize(column.astype(str), sort=True)
    if codes.size and codes.min() < 0:
        return GroupCodes(*unique_codes(column.astype(str).to_numpy()))
    return GroupCodes(codes, np.asarray(names, dtype=str))


def coded_points(points: pd.DataFrame) -> GroupCodes:
    """:func:`coded_groups` of ``points["group"]``, taken from the fitting stage when these
    are the points it coded (the same codes: text names factorized in sorted order)."""
    known = known_group_codes(points)
    return GroupCodes(*known) if known is not None else coded_groups(points["group"])


def _screened(pairs: list, method: str):
    """:func:`~scaling.stats.influence.strong_influence_each` of the samples ``pairs``,
    yielded a run of about ``2 * SPAN`` points at a time (every run in one array pass),
    so the screens of the groups looked at are let go before the next run is made."""
    for lo, hi in chunk_runs([X.size for X, _ in pairs], 2 * SPAN):
        yield from strong_influence_each(pairs[lo:hi], method=method)


def _group_sets(state, method: str):
    for (scope, g), sel in state.point_sets.items():
        if scope == "group" and ("group", g, method) in state.line_fits and len(sel) >= 4:
            yield g, sel


def _rows_of(sel: pd.DataFrame) -> np.ndarray:
    return sel["row"].to_numpy() if "row" in sel else np.arange(len(sel))


class _Stated:
    """The answer's exponent, its standard error and its verdicts, as the tables state
    them, for any (scope, group, method): the tables are read once into look-ups (a
    filter of the whole fits and slope_tests tables per group would be quadratic in
    the number of groups)."""

    __slots__ = ("_fits", "_tests", "_first", "_by_key", "_columns")

    def __init__(self, state):
        self._fits, self._tests = state.fits, state.slope_tests
        self._first = self._by_key = self._columns = None

    @staticmethod
    def _keys(table: pd.DataFrame):
        return zip(table["scope"].tolist(), table["group"].fillna("").astype(str).tolist(),
                   table["method"].tolist())

    def __call__(self, scope: str, group: str, method: str, hyps) -> tuple:
        if self._first is None:
            self._first = {}
            for i, key in enumerate(self._keys(self._fits)):
                self._first.setdefault(key, i)   # the first row of each fit, as iloc[0]
            t = self._tests
            self._by_key = {}
            if t is not None:
                for key, b0, p in zip(self._keys(t), t["exponent"].tolist(),
                                      t["p_value"].tolist()):
                    self._by_key.setdefault(key, []).append((float(b0), float(p)))
            f = self._fits
            self._columns = {c: f[c].tolist() for c in ("slope", "slope_se", "confidence")
                             if c in f}
        i = self._first.get((scope, group, method))
        if i is None:
            return np.nan, np.nan, ()
        cols = self._columns
        slope = float(cols["slope"][i])
        se = float(cols["slope_se"][i]) if "slope_se" in cols else np.nan
        by_value = dict(self._by_key.get((scope, group, method), ()))
        alpha = 1 - float(cols["confidence"][i]) if "confidence" in cols else 0.05
        return slope, se, tuple(verdict_code(slope, b0, by_value.get(b0, np.nan), alpha)
                                for _, b0 in hyps)


def _stated(state, scope: str, group: str, method: str, hyps) -> tuple:
    """The answer's exponent, its standard error and its verdicts, as the tables state them."""
    return _Stated(state)(scope, group, method, hyps)


def _finding(cfg, sel, i, *, scope, group, method, cook, slope, se, before, slope_without,
             after, hyps, exponent_of="", evidence=None, se_without=np.nan) -> list:
    """The rows of point ``i``: its own strong ``evidence`` ((scope, group, PointCheck);
    None: the answer's model's numbers; False: none), then ``moves_answer`` when refitting
    the answer without it moves the answer."""
    rows = _rows_of(sel)
    label = str(sel["unit"].iloc[i]) if "unit" in sel else ""
    common = dict(severity="strong", row=int(rows[i]), label=label, value=float(cook),
                  method=method, slope=float(slope), slope_without=float(slope_without),
                  slope_se=float(se))
    out = []
    if evidence is None:
        out.append((scope, group, method, PointCheck(kind="influence", **common)))
    elif evidence is not False:
        out.append((evidence[0], evidence[1], method, evidence[2]))
    if moves_answer(slope, se, slope_without, before, after, slope_se_without=se_without):
        changes = tuple((t, a, b) for (t, _), a, b in zip(hyps, before, after) if a != b)
        out.append((scope, group, method, PointCheck(
            kind="moves_answer", context=point_context(cfg, sel, i), exponent_of=exponent_of,
            changes=changes, slope_se_without=float(se_without),
            narrowed=narrows(se, se_without), **common)))
    return out


def _line_points(cfg, state, sel, scope: str, group: str, method: str, hyps,
                 inf: dict | None = None, xy: tuple | None = None,
                 stated: _Stated | None = None) -> list:
    """Strong points of one line (pooled, or a group's when slopes differ), refitted out.

    ``inf``: the line's :func:`scaling.stats.influence.strong_influence`, when the
    caller has screened many lines at once (a line with varying x); ``xy``: the
    line's log x and log y when the caller has read them; ``stated``: the look-up of
    the tables' exponents and verdicts shared by many lines."""
    if inf is not None and not inf["flag"].any():   # nothing to refit (most groups)
        return []
    X, Y = xy if xy is not None else (sel["log_x"].to_numpy(), sel["log_y"].to_numpy())
    if np.ptp(X) == 0:
        return []
    if inf is None:
        inf = strong_influence(X, Y, method=method)
    flagged = np.flatnonzero(inf["flag"])
    flagged = flagged[np.argsort(-inf["cook"][flagged], kind="stable")][:MAX_REFITS]
    if not flagged.size:   # nothing to refit: skip the table look-up (once per group)
        return []
    slope, se, before = (stated or _Stated(state))(scope, group, method, hyps)
    out = []
    for i in flagged:
        keep = np.arange(X.size) != i
        fit = fit_line(X[keep], Y[keep], method=method, confidence=cfg.model.confidence,
                       log_base=None)
        after = tuple(verdict_code(fit.slope, b0, fit.test_slope(b0).p_value,
                                   1 - cfg.model.confidence) for _, b0 in hyps)
        out += _finding(cfg, sel, i, scope=scope, group=group, method=method,
                        cook=inf["cook"][i], slope=slope, se=se, before=before,
                        slope_without=fit.slope, after=after, hyps=hyps,
                        exponent_of=group if scope == "group" else "", se_without=fit.slope_se)
    return out


def _common_points(cfg, state, pooled, method: str, hyps) -> list:
    """Strong points of the parallel-lines model and of the groups' own lines, refitted out
    of the common slope by :func:`scaling.stats.group_comparisons.compare_groups`.

    Refitted: Cook's distance above the strong threshold in the parallel-lines
    model, a deletion change of the common OLS slope above its standard error
    (for SMA/MA a screen only), and the points strong in their own group's line.
    Listed: those that move the answer, and those strong by their own
    numbers (the parallel-lines Cook's distance, or the group's line).
    """
    X, Y = pooled["log_x"].to_numpy(), pooled["log_y"].to_numpy()
    labels = pooled["group"].astype(str).to_numpy()
    used, _ = compared_groups(X, Y, labels, method=method)
    inside = in_groups(labels, used)
    if len(used) < 2:
        return []
    every = bool(inside.all())   # usually every group is compared: no copies
    sel = pooled if every else pooled[inside]
    Xs, Ys, gs = (X, Y, labels) if every else (X[inside], Y[inside], labels[inside])
    codes, names = unique_codes(gs)   # coded once, for the model and for the split
    par = strong_parallel_influence(Xs, Ys, GroupCodes(codes, names))
    rank = {int(k): float(par["cook"][k]) for k in np.flatnonzero(par["flag"])}
    own: dict = {}   # point -> its strong finding in its group's own line
    # each group's points in row order (one stable sort, not one comparison per group)
    split = np.split(group_order(codes, len(names)),
                     np.cumsum(np.bincount(codes, minlength=len(names)))[:-1])
    where = {str(name): i for i, name in enumerate(names)}
    members = [(str(g), mine) for g, mine in ((g, split[where[str(g)]]) for g in used)
               if mine.size >= 4 and np.ptp(Xs[mine]) > 0]
    screens = _screened([(Xs[mine], Ys[mine]) for _, mine in members], method)
    for (g, mine), inf in zip(members, screens):
        for j in np.flatnonzero(inf["flag"]):
            k = int(mine[j])
            own[k] = ("group", str(g), PointCheck(
                severity="strong", kind="influence", row=int(_rows_of(sel)[k]),
                label=str(sel["unit"].iloc[k]) if "unit" in sel else "",
                value=float(inf["cook"][j]), method=method, slope=float(inf["slope"]),
                slope_without=float(inf["slope_without"][j]), slope_se=float(inf["slope_se"])))
            rank[k] = max(rank.get(k, 0.0), float(inf["cook"][j]))
    order = sorted(rank, key=lambda k: -rank[k])[:MAX_REFITS]
    slope, se, before = _stated(state, "common", "", method, hyps)
    base = state.base
    data = (sel[["x", "y", "group"]] if base is not None
            else sel.assign(x=sel["log_x"], y=sel["log_y"])[["x", "y", "group"]])
    out = []
    for k in order:
        comp = compare_groups(data.drop(index=data.index[k]), "x", "y", "group", method=method,
                              confidence=cfg.model.confidence, log_base=base, pairwise_max=2,
                              calibration=cfg.groups.calibration, seed=cfg.resampling.seed)
        c = comp.common
        without = c.slope if c is not None else np.nan
        after = tuple(verdict_code(without, b0, c.test_slope(b0).p_value if c is not None
                                   else np.nan, 1 - cfg.model.confidence) for _, b0 in hyps)
        strong_here = bool(par["cook"][k] > COOK_STRONG)
        out += _finding(cfg, sel, k, scope="common", group="", method=method,
                        cook=float(par["cook"][k]), slope=slope, se=se, before=before,
                        slope_without=without, after=after, hyps=hyps,
                        evidence=None if strong_here else own.get(k, False),
                        se_without=c.slope_se if c is not None else np.nan)
    return out
