"""The Answer when a tree is given: the phylogenetic result leads.

With ``data.tree`` the species are not independent, so the Answer's first
sentences are the phylogenetic ones, read from the run's tables:

1. Pagel's lambda with its interval and the phylogenetic common within-group
   exponent (fits.csv scope ``phylo_common``) with its interval, or the
   phylogenetic pooled exponent (scope ``phylo``) when no groups were compared;
2. its verdicts against each hypothesised exponent;
3. the phylogenetic group verdicts (group_tests.csv scope ``phylo``) and, in
   one clause, what accounting for ancestry changed against the ordinary
   analysis (a group difference the ordinary tests declare and the
   phylogenetic ones do not, or the reverse; a verdict on an exponent that
   changes).

The ordinary answer is still in the summary and the tables.  Nothing is
computed here.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pandas as pd

from ..stats.schema import method_label
from .headline import answer_line, exponent_words, ordinary_rows
from .wording import possessive, calibrated_p_text, plural as plural_of, verdict_phrase

__all__ = ["phylo_answer", "phylo_group_messages", "answer_model",
           "answer_points",
           "phylo_check_messages", "phylo_strong_reason"]

_PHYLO = "phylo"
_COMMON = "phylo_common"
_TESTS = ("slopes_equal", "intercepts_equal", "shift_along_axis")


def _num(v) -> float:
    try:
        return float(v)
    except (TypeError, ValueError):
        return math.nan


def _lam_text(row, pct: str) -> str:
    lam, lo, hi = (_num(row.get(k)) for k in ("lambda", "lambda_low", "lambda_high"))
    if np.isfinite(lo) and np.isfinite(hi):
        return f"Pagel's λ = {lam:.2f}, {pct} CI {lo:.2f}–{hi:.2f}"
    return f"Pagel's λ fixed at {lam:g}"


def _interval(row, pct: str) -> str:
    lo, hi = _num(row.get("slope_low")), _num(row.get("slope_high"))
    if np.isfinite(lo) and np.isfinite(hi):
        return f"{pct} CI {lo:.3f}–{hi:.3f}"
    return f"{pct} CI unbounded"


def _target(name: str, value: float) -> str:
    return exponent_words(name, value)


def _verdicts(tests: pd.DataFrame, alpha: float) -> list:
    out = []
    for r in tests.itertuples(index=False):
        target = _target(str(r.hypothesis), float(r.exponent))
        how = r.p_method if isinstance(getattr(r, "p_method", ""), str) else ""
        if np.isfinite(r.p_value):
            out.append(f"{verdict_phrase(r.estimate, r.exponent, r.p_value, alpha=alpha, target=target)}"
                       f" ({calibrated_p_text(r.p_value, how)})")
        else:
            out.append(f"could not be tested against {target}")
    return out


def _joined(parts: list) -> str:
    return parts[0] if len(parts) == 1 else ", ".join(parts[:-1]) + " and " + parts[-1]


def _p(table: pd.DataFrame, method: str, test: str) -> tuple:
    rows = table[(table["method"] == method) & (table["test"] == test)]
    if not len(rows):
        return math.nan, ""
    r = rows.iloc[0]
    how = r.get("p_method", "")
    return _num(r["p_value"]), how if isinstance(how, str) else ""


_WHAT = {"slopes_equal": "slope", "intercepts_equal": "elevation",
         "shift_along_axis": "position along the common axis"}


def _what(test: str, method: str) -> str:
    if test == "shift_along_axis" and method == "ols":
        return "mean size (log x)"
    return _WHAT[test]


def _group_clause(phylo: pd.DataFrame, ordinary: pd.DataFrame | None, method: str,
                  alpha: float, plural: str) -> tuple:
    """(verdict sentence of the phylogenetic group tests, clause on what ancestry changed)."""
    differ, same = [], []
    changed_to_none, changed_to_diff = [], []
    for test in _TESTS[1:]:
        p, how = _p(phylo, method, test)
        if not np.isfinite(p):
            continue
        what = _what(test, method)
        (differ if p < alpha else same).append(f"{what} ({calibrated_p_text(p, how)})")
        if ordinary is not None and len(ordinary):
            po, _ = _p(ordinary, method, test)
            if np.isfinite(po) and (po < alpha) != (p < alpha):
                (changed_to_none if po < alpha else changed_to_diff).append(what)
    parts = []
    if differ:
        parts.append(f"differ in {_joined(differ)}")
    if same:
        parts.append(f"do not differ detectably in {_joined(same)}")
    sentence = f"With ancestry accounted for, the {plural} {' but '.join(parts)}" if parts else ""
    if changed_to_none:
        clause = (f"ignoring ancestry would have declared the {plural} different in "
                  f"{_joined(changed_to_none)}")
    elif changed_to_diff:
        clause = (f"the ordinary tests, which treat species as independent, miss the "
                  f"difference in {_joined(changed_to_diff)}")
    else:
        clause = "the ordinary tests reach the same group verdicts"
    return sentence, clause


def phylo_answer(head, result):
    """``head`` with the phylogenetic sentences leading, when the run has a tree.

    Parameters
    ----------
    head : Headline
        The ordinary headline (:func:`scaling.render.headline.build_headline`).
    result : RunResult

    Returns
    -------
    Headline
        Unchanged without phylogenetic rows in ``fits``.
    """
    cfg = result.config
    fits = result.fits
    if getattr(cfg.data, "tree", None) is None or fits is None or "scope" not in fits:
        return head
    conf = cfg.model.confidence
    alpha, pct = 1 - conf, f"{100 * conf:g}%"
    tables = result.tables or {}
    gt = tables.get("group_tests")
    phylo_gt = (gt[gt["scope"] == _PHYLO] if gt is not None and "scope" in gt.columns
                else None)
    group_word = str(cfg.data.group or "group")
    plural = plural_of(group_word)
    tests = result.slope_tests
    methods = list(fits.loc[fits["scope"] == _PHYLO, "method"])
    if not methods:
        return head
    method = head.primary if head.primary in methods else methods[0]
    common = fits[(fits["scope"] == _COMMON) & (fits["method"] == method)]
    label = method_label(method)
    ordinary_gt = ordinary_rows(gt)
    if len(common) and phylo_gt is not None and len(phylo_gt):
        row = common.iloc[0]
        p_slope, how = _p(phylo_gt, method, "slopes_equal")
        if np.isfinite(p_slope) and p_slope < alpha:
            s1 = (f"Accounting for shared ancestry ({_lam_text(row, pct)}), the {plural}' "
                  f"{label} slopes differ ({calibrated_p_text(p_slope, how)}), so there is no "
                  "single phylogenetic exponent; each "
                  f"{possessive(group_word)} ordinary line is in the table below.")
            return replace(head, sentences=(s1,) + tuple(head.sentences))
        s1 = (f"Accounting for shared ancestry ({_lam_text(row, pct)}), the common "
              f"within-{group_word} {label} exponent is {_num(row['slope']):.3f} "
              f"({_interval(row, pct)}; {int(_num(row['n']))} species; the {plural}' slopes "
              f"do not differ, {calibrated_p_text(p_slope, how)}).")
        scope = _COMMON
        ordinary_scope = "common"
    else:
        row = fits[(fits["scope"] == _PHYLO) & (fits["method"] == method)].iloc[0]
        if not np.isfinite(_num(row["slope"])):
            return head
        s1 = (f"Accounting for shared ancestry ({_lam_text(row, pct)}), the phylogenetic "
              f"{label} exponent is {_num(row['slope']):.3f} ({_interval(row, pct)}, "
              f"{int(_num(row['n']))} species).")
        scope = _PHYLO
        ordinary_scope = "pooled"
    out = [s1]
    own = (tests[(tests["scope"] == scope) & (tests["method"] == method)]
           if tests is not None else pd.DataFrame())
    verdicts = _verdicts(own, alpha) if len(own) else []
    changed = _changed_verdicts(tests, scope, ordinary_scope, method, alpha)
    if scope == _PHYLO:
        ordinary = fits[(fits["scope"] == "pooled") & (fits["method"] == method)]
        if len(ordinary) and np.isfinite(_num(ordinary["slope"].iloc[0])):
            o = ordinary.iloc[0]
            changed = (changed or "ignoring ancestry gives the same verdicts") + (
                f" (ordinary {label} {_num(o['slope']):.3f}, {_interval(o, pct)})")
    if verdicts:
        out.append(f"This exponent {_joined(verdicts)}"
                   + (f"; {changed}" if changed else "") + ".")
    if scope == _COMMON:
        sentence, clause = _group_clause(phylo_gt, ordinary_gt, method, alpha, plural)
        if sentence:
            out.append(f"{sentence}; {clause}.")
    return replace(head, sentences=tuple(out))


def _changed_verdicts(tests, scope, ordinary_scope, method, alpha) -> str:
    """'without the correction it would be declared above 3/4' when a verdict flips."""
    if tests is None or not len(tests):
        return ""
    own = tests[(tests["scope"] == scope) & (tests["method"] == method)]
    ordi = tests[(tests["scope"] == ordinary_scope) & (tests["method"] == method)]
    flips = []
    for r in own.itertuples(index=False):
        o = ordi[ordi["hypothesis"] == r.hypothesis]
        if not len(o) or not np.isfinite(r.p_value):
            continue
        po, est = float(o["p_value"].iloc[0]), float(o["estimate"].iloc[0])
        if np.isfinite(po) and (po < alpha) != (r.p_value < alpha):
            target = _target(str(r.hypothesis), float(r.exponent))
            flips.append(verdict_phrase(est, r.exponent, po, alpha=alpha, target=target))
    if not flips:
        return ""
    return "ignoring ancestry, the exponent " + _joined(flips)


def phylo_group_messages(compared: dict, ordinary: pd.DataFrame | None, cfg) -> list:
    """Summary sentences of the phylogenetic group comparisons, one per method.

    ``compared`` maps method -> :class:`~scaling.stats.phylo_groups.PhyloGroupTests`;
    ``ordinary`` is the ordinary group_tests table.
    """
    alpha = 1 - cfg.model.confidence
    pct = f"{100 * cfg.model.confidence:g}%"
    group_word = str(cfg.data.group or "group")
    plural = plural_of(group_word)
    out = []
    for method, c in compared.items():
        label = method_label(method)
        lam = (f"Pagel's λ = {c.lam:.2f} ({pct} CI {c.lam_ci.low:.2f}–{c.lam_ci.high:.2f}, "
               f"{c.lam_estimate.upper()}, estimated with every {group_word} its own line)"
               if c.lam_estimate != "fixed" else f"Pagel's λ fixed at {c.lam:g}")
        parts = []
        for i, test in enumerate(_TESTS):
            p = float(c.p_value[i])
            if not np.isfinite(p):
                continue
            stat = "F" if c.p_method == "F" else ("LR" if test == "slopes_equal" else "Wald")
            df = (f"df = {c.df[i]:g}, {c.df_resid[i]:g}" if np.isfinite(c.df_resid[i])
                  else f"df = {c.df[i]:g}")
            word = "differ" if p < alpha else "do not differ detectably"
            parts.append(f"{_what(test, method)}: {word} ({stat} = {c.statistic[i]:.3g}, {df}, "
                         f"{calibrated_p_text(p, c.p_method)})")
        ci = c.common.slope_ci
        text = (f"Phylogenetic group comparisons ({label}, {lam}): " + "; ".join(parts)
                + f". Phylogenetic common slope {c.common.slope:.3f} ({pct} CI "
                f"{ci.low:.3f}–{ci.high:.3f}).")
        if ordinary is not None and len(ordinary):
            _, clause = _group_clause(c.to_frame(), ordinary, method, alpha, plural)
            text += f" Against the ordinary tests: {clause}."
        out.append(text)
    return out



# --------------------------------------------------------------------------
# the checks of the model the Answer reports


def answer_model(fits: pd.DataFrame | None, group_tests: pd.DataFrame | None, primary: str,
                 confidence: float) -> tuple | None:
    """``(scope, method)`` of the phylogenetic model the Answer leads with, or None.

    The rule of :func:`phylo_answer`: the primary method if it was fitted
    phylogenetically (else the first phylogenetic method); its phylogenetic
    common within-group line (scope ``phylo_common``) when groups were
    compared with the tree and their phylogenetic slopes do not differ, the
    phylogenetic pooled line (scope ``phylo``) when no groups were compared;
    None when the phylogenetic slopes differ (the Answer then gives each
    group's line) or no phylogenetic line was fitted.
    """
    if fits is None or "scope" not in fits:
        return None
    methods = list(fits.loc[fits["scope"] == _PHYLO, "method"])
    if not methods:
        return None
    method = primary if primary in methods else methods[0]
    phylo_gt = (group_tests[group_tests["scope"] == _PHYLO]
                if group_tests is not None and "scope" in group_tests.columns else None)
    common = fits[(fits["scope"] == _COMMON) & (fits["method"] == method)]
    if len(common) and phylo_gt is not None and len(phylo_gt):
        p_slope, _ = _p(phylo_gt, method, "slopes_equal")
        if np.isfinite(p_slope) and p_slope < 1 - confidence:
            return None
        return _COMMON, method
    row = fits[(fits["scope"] == _PHYLO) & (fits["method"] == method)]
    if not len(row) or not np.isfinite(_num(row["slope"].iloc[0])):
        return None
    return _PHYLO, method


def answer_points(points: pd.DataFrame | None, result) -> pd.DataFrame | None:
    """The rows of ``points_to_check`` that speak of the model the Answer reports.

    With a tree and a phylogenetic Answer, only the phylogenetic model's rows
    (the ordinary model's rows that move the ordinary exponent stay in the
    table and the summary, but are not the Answer's); otherwise all rows.
    """
    cfg = result.config
    if points is None or getattr(cfg.data, "tree", None) is None or "scope" not in points:
        return points
    tables = result.tables or {}
    from .prediction_words import answer_primary
    primary = answer_line(tables.get("group_tests"), cfg.model.methods, answer_primary(cfg),
                          cfg.model.confidence)[1]
    model = answer_model(result.fits, tables.get("group_tests"), primary,
                         cfg.model.confidence)
    if model is None:
        return points
    return points[points["scope"] == model[0]]


def _model_words(scope: str, method: str, group_word: str) -> str:
    label = method_label(method)
    if scope == _COMMON:
        return f"the phylogenetic common within-{group_word} {label} model"
    return f"the phylogenetic {label} line"


def phylo_strong_reason(*, scope: str, method: str, group_word: str, row, label: str,
                        standardised: float, cook: float, leverage: float, slope: float,
                        slope_without: float) -> str:
    """Why one species is strong in the phylogenetic model of the Answer (points_to_check)."""
    who = f"row {row}" + (f" ({label})" if label else "")
    moved = (f"without it the exponent is {slope_without:.3f} instead of {slope:.3f} "
             "(λ held at its estimate)" if np.isfinite(slope_without)
             else "it was not refitted out")
    return (f"{who} is strong in {_model_words(scope, method, group_word)}: standardised "
            f"residual {standardised:+.2f}, Cook's distance {cook:.2g}, leverage "
            f"{leverage:.2f}; {moved}")


def phylo_check_messages(diag, *, scope: str, method: str, lam: float, group_word: str,
                         strong: list, moving: list, lam_curvature: float = math.nan) -> list:
    """The diagnostics sentences of the phylogenetic model the Answer reports.

    Parameters
    ----------
    diag : Diagnostics
        From :func:`scaling.stats.phylo_checks.phylo_model_checks`.
    scope, method : str
        The Answer's model (:func:`answer_model`).
    lam : float
        Pagel's lambda the residual and influence checks were made at.
    lam_curvature : float
        Pagel's lambda of the curvature test (REML under the straight-line
        design); NaN: ``lam``.
    group_word : str
    strong : list of (row, label)
        The strong species (refitted out of the Answer).
    moving : list of int
        The rows among them that move the Answer's exponent or a verdict.
    """
    from .findings import check_verdict
    plural = plural_of(group_word)
    what = _model_words(scope, method, group_word)
    at = (f"GLS at λ = {lam_curvature:.2f}, REML under the straight-line model"
          if np.isfinite(lam_curvature) else f"GLS at λ = {lam:.2f}")
    curv = diag.check("curvature")
    where = (f" within {plural}, with ancestry accounted for (phylogenetic common "
             f"{method_label(method)} slope, each {group_word} at its own elevation; {at})"
             if scope == _COMMON else
             f", with ancestry accounted for (phylogenetic {method_label(method)} line; {at})")
    if curv.flagged:
        out = [f"Power law{where}: NOT a straight line on log-log scales — "
               f"{check_verdict(curv)}. One exponent summarises these data only roughly; see "
               f"curvature.csv (scope {scope})."]
    else:
        out = [f"Power law{where}: {check_verdict(curv)}, so there is no evidence against "
               "one exponent within the data range."]
    out.append(f"Residuals of {what} (whitened by the tree at λ = {lam:.2f}, held at its "
               "estimate): "
               f"{check_verdict(diag.check('normality'))}; "
               f"{check_verdict(diag.check('constant_variance'))}.")
    rule = ("|standardised residual| > 3, Cook's distance > 1 or leverage > 3p/n "
            "in the whitened regression")
    if not strong:
        out.append(f"Influence on {what}: no species is strong ({rule}).")
        return out
    shown = ", ".join(f"row {r}" + (f" ({lab})" if lab else "") for r, lab in strong[:4])
    more = f" and {len(strong) - 4} more" if len(strong) > 4 else ""
    head = (f"Influence on {what}: {len(strong)} species "
            f"{'is' if len(strong) == 1 else 'are'} strong ({rule}): {shown}{more}")
    if moving:
        rows = ", ".join(str(r) for r in moving[:4])
        out.append(f"{head}; refitted without {'it' if len(strong) == 1 else 'each'} (λ held "
                   f"at its estimate), row{'s' if len(moving) > 1 else ''} {rows} "
                   f"move{'' if len(moving) > 1 else 's'} the exponent by more than its "
                   "standard error or change a verdict: the answer names it; check it first "
                   "(points_to_check.csv).")
    else:
        out.append(f"{head}; refitted without {'it' if len(strong) == 1 else 'each'} (λ held "
                   "at its estimate), none moves the exponent by more than its standard error "
                   "or changes a verdict (points_to_check.csv).")
    return out
