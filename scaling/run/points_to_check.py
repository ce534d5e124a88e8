"""The run's graded checks: which points and numbers to look at before use.

:func:`check_run` reads what :func:`scaling.run.pipeline.analyse` has computed
(the fits, their points, correction factors and predictions), calls
:func:`scaling.stats.influence.points_to_check` and returns the
``points_to_check`` table and the warnings it adds to the run.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import pandas as pd

from ..errors import ScalingError
from ..render.headline import primary_method as primary_method_of
from ..stats.lines import method_label

__all__ = ["POINTS_TO_CHECK_COLUMNS", "PointsToCheck", "primary_method", "check_run"]

from ..stats.schema import POINTS_TO_CHECK_COLUMNS  # noqa: E402 (the vocabulary's home)
from ..stats.influence import fit_checks, points_to_check
from ..render.findings import point_check_reason
MAX_LISTED = 5


def primary_method(cfg) -> str:
    """``model.primary`` (resolved by the config: given, else the first symmetric method
    requested, else OLS); the rule itself lives in :func:`scaling.render.headline.primary_method`."""
    return primary_method_of(cfg.model.methods, getattr(cfg.model, "primary", None))


def _scope_words(scope: str, group: str) -> str:
    return {"pooled": "pooled", "group_means": "group-means"}.get(scope, f"group {group}")


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
    table, warn = _check(cfg, state.line_fits, state.point_sets, state.fits, state.tables)
    return PointsToCheck(table=table, notes=tuple(warn))


def _check(cfg, line_fits: dict, point_sets: dict, fits: pd.DataFrame, tables: dict) -> tuple:
    alpha = cfg.diagnostics.alpha
    records, warn = [], []
    preds = tables.get("predictions")
    factors = {(r.scope, r.group, r.method): (r.smearing_factor, r.parametric_factor)
               for r in fits.itertuples(index=False)} if "smearing_factor" in fits else {}
    primary = primary_method(cfg)
    pooled_key = ("pooled", "", primary)
    if pooled_key not in line_fits:
        pooled_key = next((k for k in line_fits if k[0] == "pooled"), None)
    for key, fit in line_fits.items():
        scope, group, method = key
        sel = point_sets.get((scope, group))
        if sel is None or len(sel) != fit.n or len(sel) < 4:
            continue
        whole = key == pooled_key
        est = ()
        if preds is not None and len(preds):
            mine = preds[(preds["scope"] == scope) & (preds["group"] == group)
                         & (preds["method"] == method)]
            est = [(f"at x = {r.x:g} ", r.y, r.y_low, r.y_high)
                   for r in mine.itertuples(index=False)]
        smear, param = factors.get(key, (None, None))
        labels = sel["unit"].astype(str).to_numpy() if "unit" in sel else None
        groups = (sel["group"].astype(str).to_numpy()
                  if whole and "group" in sel and scope == "pooled" else None)
        x, y = sel["log_x"].to_numpy(), sel["log_y"].to_numpy()
        rows = sel["row"].to_numpy() if "row" in sel else None
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                if whole:
                    found = points_to_check(x, y, method=method, rows=rows, labels=labels,
                                            groups=groups, smearing_factor=smear,
                                            parametric_factor=param, estimates=est,
                                            alpha=alpha)
                else:   # fit-level checks only; points are checked on the primary line
                    found = fit_checks(smearing_factor=smear, parametric_factor=param,
                                       estimates=est)
        except ScalingError:
            continue
        for c in found:
            records.append({"scope": scope, "group": group, "method": method,
                            **c.to_record(), "reason": point_check_reason(c)})
    table = pd.DataFrame(records, columns=POINTS_TO_CHECK_COLUMNS)
    if "row" in table:
        table["row"] = table["row"].astype("Int64")
    if not len(table):
        return table, warn
    infl = table[table["kind"] == "influence"]
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
