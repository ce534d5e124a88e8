"""The checks and the group comparison of a run with several predictors.

Called from :func:`scaling.run.several_predictors.several_stage`:

* :func:`several_diagnostics` -- ``diagnostics.csv`` (normality, constant
  variance, curvature per term, influence, leverage, VIF per term and the
  condition number; :func:`scaling.stats.several_checks.check_multi`) and the
  summary's collinearity warning when a VIF passes 10;
* :func:`several_groups` -- with ``data.group``: each group's fit, the
  common within-group exponents, their tests and ``group_tests.csv``
  (:func:`scaling.stats.several_groups.compare_groups_multi`).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import pandas as pd

from ..errors import ScalingError
from ..render.answer_several import (collinearity_warning, several_check_verdict,
                                     several_group_sentences)
from ..stats.several_checks import check_multi, check_multi_groups
from ..stats.several_groups import compare_groups_multi

__all__ = ["SEVERAL_DIAGNOSTIC_COLUMNS", "SeveralExtras", "several_diagnostics",
           "several_groups"]

#: diagnostics.csv of a run with several predictors (the one-predictor columns and ``term``).
SEVERAL_DIAGNOSTIC_COLUMNS = ["scope", "group", "method", "term", "check", "test", "statistic",
                              "df", "p_value", "estimate", "flagged", "verdict"]


@dataclass(frozen=True, slots=True, kw_only=True)
class SeveralExtras:
    """Rows and tables the checks and the group comparison add to the stage."""

    fits: pd.DataFrame | None = None
    slope_rows: tuple = ()
    tables: dict
    messages: tuple = ()
    notes: tuple = ()
    comparison: object = None
    checks: object = None


def several_diagnostics(fit, pts: pd.DataFrame, cfg, comparison=None) -> SeveralExtras:
    """diagnostics.csv of the pooled fit (and, with groups, of the common-exponents
    model; with groups whose exponents differ, of each group's own fit too), and the
    collinearity warning of the model the Answer reports.

    The Answer leads with the pooled fit without groups, the common
    exponents when the groups share them, each group's own fit when they
    differ (:meth:`MultiGroupComparison.leading`); the warning reads the
    variance inflation factors of that model (of every group's fit, naming
    the groups, in the last case).
    """
    rows = pts["row"].to_numpy() if "row" in pts.columns else None
    alpha = cfg.diagnostics.alpha
    todo = [("pooled", "", lambda: check_multi(fit, rows=rows, alpha=alpha))]
    lead = "pooled"
    if "group" in pts.columns and pts["group"].nunique() > 1:
        todo.append(("common", "", lambda: check_multi_groups(
            fit.log_x, fit.log_y, pts["group"].to_numpy(), fit.names, rows=rows, alpha=alpha)))
        if comparison is not None:
            lead = comparison.leading(1 - cfg.model.confidence)
        if lead == "group":   # the Answer's lines are each group's own fit: check each
            labels = pts["group"].astype(str).to_numpy()
            for g, own in comparison.group_fits.items():
                sel = labels == g
                todo.append(("group", g, lambda own=own, sel=sel: check_multi(
                    own, rows=None if rows is None else rows[sel], alpha=alpha)))
    frames, read = [], {}
    for scope, group, run in todo:
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                checks = run()
        except ScalingError:
            continue
        read[(scope, group)] = checks
        frame = checks.to_frame()
        frame["verdict"] = [several_check_verdict(c, t)
                            for c, t in zip(checks.checks, checks.terms)]
        frame.insert(0, "scope", scope)
        frame.insert(1, "group", group)
        frame.insert(2, "method", "ols")
        frames.append(frame[SEVERAL_DIAGNOSTIC_COLUMNS])
    if not read:
        return SeveralExtras(tables={})
    answered = {key: c for key, c in read.items() if key[0] == lead} or {
        next(iter(read)): next(iter(read.values()))}
    flagged = {key[1]: c.collinear_terms() for key, c in answered.items()
               if c.collinear_terms()}
    warning = collinearity_warning(flagged, fit.names, model=lead,
                                   group_word=str(cfg.data.group or "group"))
    return SeveralExtras(tables={"diagnostics": pd.concat(frames, ignore_index=True)},
                         notes=(warning,) if warning else (), checks=next(iter(read.values())))


def several_groups(pts: pd.DataFrame, names: tuple, hypotheses: dict, cfg, base,
                   units: dict) -> SeveralExtras:
    """Each group's fit, the common exponents and the group tests (``data.group``)."""
    x = {n: pts[f"x{j}"].to_numpy() for j, n in enumerate(names)}
    comparison = compare_groups_multi(x, pts["y"].to_numpy(), pts["group"].to_numpy(),
                                      confidence=cfg.model.confidence, log_base=base)
    fits = comparison.to_frame()
    common = fits["scope"] == "common"
    fits.loc[common, "log_base"] = fits.loc[~common, "log_base"].iloc[0] if (~common).any() else ""
    for col in ("", "_low", "_high"):   # a = base^intercept of each group's own line
        fits["a" + col] = base ** pd.to_numeric(fits["intercept" + col])
    slope_rows = []
    for label, hyp in hypotheses.items():
        for g in comparison.groups:
            for t in comparison.group_fits[g].test_exponents(hyp, label=label):
                slope_rows.append(_test_row("group", g, t))
        for t in comparison.test_exponents(hyp, label=label):
            slope_rows.append(_test_row("common", "", t))
    tests = comparison.tests_frame()
    word = str(cfg.data.group)
    messages = tuple("  " + s for s in several_group_sentences(
        tests, 1 - cfg.model.confidence, word))
    notes = ()
    if comparison.skipped:
        notes += (f"{len(comparison.skipped)} {word} value(s) with fewer than "
                 f"{len(names) + 2} rows have no exponents of their own "
                 f"({', '.join(comparison.skipped)}); they count in the group tests.",)
    return SeveralExtras(fits=fits, slope_rows=tuple(slope_rows),
                         tables={"group_tests": tests}, messages=messages, notes=notes,
                         comparison=comparison)


def _test_row(scope: str, group: str, t) -> dict:
    return {"scope": scope, "group": group, "method": "ols", "term": t.term,
            "hypothesis": t.hypothesis, "exponent": t.exponent, "estimate": t.estimate,
            "statistic": t.statistic, "statistic_type": "t", "df": t.df,
            "p_value": t.p_value, "p_method": "t"}
