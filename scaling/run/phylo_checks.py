"""Checks of the model the Answer reports when a tree is given.

With ``data.tree`` the Answer leads with a phylogenetic model
(:func:`scaling.render.answer_phylo.answer_model`): the phylogenetic common
within-group line (scope ``phylo_common``, at the lambda of the phylogenetic
group tests) when groups lead, else the phylogenetic pooled line (scope
``phylo``, at its own lambda).  This module checks that model:

- :func:`answer_model_checks`: whitened-residual normality and constant
  variance and the GLS deletion diagnostics of each species, with Pagel's
  lambda held at the Answer's estimate, and the GLS curvature test at the
  REML lambda of the straight-line design
  (:func:`scaling.stats.phylo_checks.phylo_model_checks`, ``curvature_lambda``);
- :func:`diagnostic_rows`: their rows of ``diagnostics.csv``,
  ``curvature.csv`` and ``influential_rows.csv`` (under the model's scope)
  and their sentences;
- :func:`answer_point_rows`: each strong species refitted out of the Answer
  (lambda held at its estimate: the refit does not re-estimate it) and its
  ``points_to_check`` rows; a species that moves the exponent by more than
  its standard error or changes a verdict gets a ``moves_answer`` row, which
  the Answer names.

The ordinary models keep their own checks (:mod:`scaling.run.diagnostics`,
:mod:`scaling.run.points_to_check`).  Other evolutionary models than
lambda (``model.phylogeny.model``) are not checked here.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import ScalingError
from ..render.answer_phylo import answer_model, phylo_check_messages, phylo_strong_reason
from ..render.findings import check_verdict, point_check_reason
from ..render.headline import answer_line, exponent_words
from ..render.prediction_words import answer_primary
from ..stats.influence import PointCheck, moves_answer, narrows, verdict_code
from ..stats.phylo_checks import PhyloChecks, curvature_lambda, phylo_model_checks
from ..stats.phylo_groups import phylo_group_tests
from ..stats.phylo_predict import MAX_DENSE_TIPS, lambda_covariance
from ..stats.phylogeny import (PhyloPlan, fit_phylo, match_species, normalise_name, prune_tree,
                               read_newick)

__all__ = ["AnswerChecks", "answer_model_checks", "diagnostic_rows", "answer_point_rows"]

#: Most strong species refitted out of the Answer (largest Cook's distance first).
MAX_REFITS = 10


def point_context(cfg, sel: pd.DataFrame, i: int) -> tuple:
    """What names point ``i`` of ``sel`` besides its row: its label, x and group (the
    ordinary and the phylogenetic points to check name points alike)."""
    out = []
    if "unit" in sel:
        out.append(("", str(sel["unit"].iloc[i])))
    if isinstance(cfg.data.x, str) and "x" in sel:
        out.append((cfg.data.x, float(sel["x"].iloc[i])))
    if cfg.data.group and "group" in sel:
        out.append((str(cfg.data.group), str(sel["group"].iloc[i])))
    return tuple(out)


@dataclass(frozen=True, slots=True, kw_only=True)
class AnswerChecks:
    """The checks of the Answer's phylogenetic model.

    ``scope`` (``phylo_common`` or ``phylo``), ``method``, ``lam`` (held at its
    estimate), ``lam_curvature`` (the REML lambda of the straight-line design the
    curvature test uses, :func:`scaling.stats.phylo_checks.curvature_lambda`), ``points`` (the species checked, data order), ``checks``
    (:class:`~scaling.stats.phylo_checks.PhyloChecks`), ``tree`` (the tree as
    read) and ``slope`` (the Answer's exponent).
    """

    scope: str
    method: str
    lam: float
    lam_curvature: float
    slope: float
    points: pd.DataFrame
    checks: PhyloChecks
    tree: object


def answer_model_checks(cfg, state) -> AnswerChecks | None:
    """The checks of the Answer's phylogenetic model, or None (no tree, no phylogenetic
    Answer, another evolutionary model than lambda, too few or too many species)."""
    phylo = getattr(state, "phylo", None)
    if cfg.data.tree is None or phylo is None or state.fits is None:
        return None
    gt = state.tables.get("group_tests")
    primary = answer_line(gt, cfg.model.methods, answer_primary(cfg), cfg.model.confidence)[1]
    model = answer_model(state.fits, gt, primary, cfg.model.confidence)
    if model is None:
        return None
    scope, method = model
    pts = phylo.points
    if scope == "phylo_common":
        comp = phylo.group_tests.get(method)
        if comp is None:
            return None
        pts = pts[pts["group"].astype(str).isin(comp.groups)]
        lam, slope = float(comp.lam), float(comp.common.slope)
    else:
        fit = phylo.fits.get(method)
        if fit is None or (method == "ols" and cfg.model.phylogeny.get("model", "lambda")
                           not in ("lambda", None)):
            return None
        lam, slope = float(fit.lam), float(fit.slope)
    if not (4 <= len(pts) <= MAX_DENSE_TIPS) or not np.isfinite(slope):
        return None
    pts = pts.reset_index(drop=True)
    tree = read_newick(cfg.data.tree)
    groups = pts["group"].astype(str).to_numpy() if scope == "phylo_common" else None
    try:
        pruned, tips = _pruned(tree, pts["unit"].astype(str).tolist())
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            lam_c = curvature_lambda(PhyloPlan.from_tree(pruned, tips),
                                     pts["log_x"].to_numpy(float), pts["log_y"].to_numpy(float),
                                     groups)
            checks = phylo_model_checks(
                lambda_covariance(pruned, tips, lam), pts["log_x"].to_numpy(float),
                pts["log_y"].to_numpy(float), groups=groups, method=method, slope=slope, rows=pts["row"].to_numpy(),
                exponent_targets=tuple(cfg.diagnostics.exponent_at)
                or tuple(cfg.exponents.values()),
                alpha=cfg.diagnostics.alpha, log_base=state.base,
                curvature_cov=lambda_covariance(pruned, tips, lam_c))
    except (ScalingError, np.linalg.LinAlgError):
        return None
    return AnswerChecks(scope=scope, method=method, lam=lam, lam_curvature=lam_c, slope=slope,
                        points=pts, checks=checks, tree=tree)


def _pruned(tree, species: list) -> tuple:
    """The tree pruned to ``species`` (each with a tip) and their tip ids, in their order."""
    match = match_species(species, tree)
    pruned = prune_tree(tree, match.tip_of_species)
    index = {normalise_name(pruned.names[t]): int(t) for t in pruned.tips}
    return pruned, np.array([index[normalise_name(tree.names[t])]
                             for t in match.tip_of_species])


def diagnostic_rows(cfg, ac: AnswerChecks, points: pd.DataFrame | None) -> tuple:
    """``(diagnostics frame, influential rows, curvature rows, messages)`` of the checks.

    ``points`` is the run's ``points_to_check`` (its ``moves_answer`` rows of the
    Answer's scope say which strong species move the Answer).
    """
    d = ac.checks.diagnostics
    frame = d.to_frame()
    frame["verdict"] = [check_verdict(c) for c in d.checks]
    frame.insert(0, "scope", ac.scope)
    frame.insert(1, "group", "")
    labels = dict(zip(ac.points["row"].tolist(), ac.points["unit"].astype(str)))
    infl = [{"scope": ac.scope, "group": "", "method": ac.method, "row": int(r["row"]),
             "label": labels.get(int(r["row"]), ""), "cooks_distance": r["cooks_distance"]}
            for r in d.influence_frame().to_dict(orient="records")]
    c = d.curvature
    x = ac.points["log_x"].to_numpy(float)
    e_lo, e_hi = c.local_exponent([x.min(), x.max()])
    common = {"scope": ac.scope, "group": "", "n": d.n, "quadratic": c.quadratic,
              "quadratic_se": c.quadratic_se, "statistic": c.statistic, "df": c.df,
              "p_value": c.p_value, "exponent_at_x_min": e_lo, "exponent_at_x_max": e_hi}
    curv = ([{**common, "exponent": t, "x_at_exponent": xs, "within_data": inside}
             for t, xs, inside in c.crossings]
            or [{**common, "exponent": np.nan, "x_at_exponent": np.nan, "within_data": None}])
    strong = [(int(ac.points["row"].iloc[i]), str(ac.points["unit"].iloc[i]))
              for i in ac.checks.strong[:MAX_REFITS]]
    moving = []
    if points is not None and len(points) and "kind" in points:
        mine = points[(points["scope"] == ac.scope) & (points["kind"] == "moves_answer")]
        moving = [int(r) for r in mine["row"].dropna()]
    messages = phylo_check_messages(d, scope=ac.scope, method=ac.method, lam=ac.lam,
                                    lam_curvature=ac.lam_curvature,
                                    group_word=str(cfg.data.group or "group"), strong=strong,
                                    moving=moving)
    return frame, infl, curv, messages


def _stated(state, scope: str, method: str, hyps, alpha: float) -> tuple:
    """The Answer's exponent, its standard error and its verdicts, as the tables state them."""
    f = state.fits
    row = f[(f["scope"] == scope) & (f["method"] == method)]
    if not len(row):
        return np.nan, np.nan, ()
    slope = float(row["slope"].iloc[0])
    se = float(row["slope_se"].iloc[0]) if "slope_se" in row else np.nan
    t = state.slope_tests
    tests = t[(t["scope"] == scope) & (t["method"] == method)] if t is not None else None
    by_value = ({float(r.exponent): float(r.p_value) for r in tests.itertuples(index=False)}
                if tests is not None else {})
    return slope, se, tuple(verdict_code(slope, b0, by_value.get(b0, np.nan), alpha)
                            for _, b0 in hyps)


def _refit(cfg, ac: AnswerChecks, keep: np.ndarray) -> tuple:
    """(exponent, its se, its test of each b0) of the Answer refitted on ``keep``, lambda held."""
    p = ac.points[keep]
    conf = cfg.model.confidence
    if ac.scope == "phylo_common":
        comp = phylo_group_tests(p["log_x"].to_numpy(float), p["log_y"].to_numpy(float),
                                 p["unit"].astype(str).tolist(),
                                 p["group"].astype(str).to_numpy(), ac.tree, method=ac.method,
                                 lam=ac.lam, confidence=conf, pairwise=False, n_boot=0)
        c = comp.common
        return c.slope, c.slope_se, c.test_slope
    fit = fit_phylo(p["log_x"].to_numpy(float), p["log_y"].to_numpy(float), ac.tree,
                    p["unit"].astype(str).tolist(), method=ac.method, lam=ac.lam,
                    confidence=conf, log_base=None)
    return fit.slope, fit.slope_se, fit.test_slope


def answer_point_rows(cfg, state, ac: AnswerChecks | None) -> tuple:
    """``(points_to_check records, warnings)``: the strong species of the Answer's
    phylogenetic model, each refitted out (lambda held at its estimate)."""
    if ac is None or not ac.checks.strong.size:
        return [], []
    hyps = [(exponent_words(str(k), float(v)), float(v)) for k, v in cfg.exponents.items()]
    alpha = 1 - cfg.model.confidence
    slope, se, before = _stated(state, ac.scope, ac.method, hyps, alpha)
    pc = ac.checks
    group_word = str(cfg.data.group or "group")
    records, warn = [], []
    n = len(ac.points)
    for i in pc.strong[:MAX_REFITS]:
        keep = np.arange(n) != i
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                without, se_without, test = _refit(cfg, ac, keep)
                after = tuple(verdict_code(without, b0, test(b0).p_value, alpha)
                              for _, b0 in hyps)
        except (ScalingError, np.linalg.LinAlgError):
            without, se_without, after = np.nan, np.nan, None
        row, label = int(ac.points["row"].iloc[i]), str(ac.points["unit"].iloc[i])
        base = {"scope": ac.scope, "group": "", "method": ac.method, "row": row,
                "label": label}
        records.append({**base, "severity": "warning", "kind": "phylo_influence",
                        "value": float(pc.cooks[i]),
                        "reason": phylo_strong_reason(
                            scope=ac.scope, method=ac.method, group_word=group_word, row=row,
                            label=label, standardised=float(pc.standardised[i]),
                            cook=float(pc.cooks[i]), leverage=float(pc.leverage[i]),
                            slope=slope, slope_without=float(without))})
        if after is None or not moves_answer(slope, se, without, before, after,
                                             slope_se_without=se_without):
            continue
        changes = tuple((t, a, b) for (t, _), a, b in zip(hyps, before, after) if a != b)
        check = PointCheck(severity="strong", kind="moves_answer", row=row, label=label,
                           value=float(pc.cooks[i]), method=ac.method, slope=slope,
                           slope_without=float(without), slope_se=se,
                           slope_se_without=float(se_without),
                           narrowed=narrows(se, se_without),
                           context=point_context(cfg, ac.points, int(i)), changes=changes)
        reason = point_check_reason(check)
        records.append({**base, **check.to_record(), "reason": reason})
        warn.append(f"STRONG — the phylogenetic answer: {reason}")
    return records, warn
