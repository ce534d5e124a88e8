"""The tree beyond the one phylogenetic line: models, predictions, per-group lines, checks.

Runs after :mod:`scaling.run.phylogeny` when ``data.tree`` is set, on the
same species means (the species with a tip), and adds:

- ``phylo_models.csv``: the PGLS line under Pagel's lambda, Brownian motion
  (lambda = 1), independence (lambda = 0), Ornstein-Uhlenbeck, Pagel's kappa
  and delta, compared by AICc, with the likelihood-ratio tests of lambda = 0
  and lambda = 1 on the Brownian and independent rows; with
  ``model.phylogeny.sampling_error`` also lambda with within-species sampling
  error (:mod:`scaling.stats.phylo_models`).  The model named by
  ``model.phylogeny.model`` is marked ``chosen``.
- predictions (scope ``phylo``, method ``ols``) in ``predictions.csv``: for a
  typical new species at ``prediction.x`` (``species`` blank), and for each
  species in the tree whose rows have x but no y (``species`` named),
  predicted from its relatives; those rows leave ``dropped_rows.csv``
  (:mod:`scaling.stats.phylo_predict`).  Back-transformation: ``none`` keeps
  the median; the other corrections use the lognormal mean factor
  exp(v ln(base)^2 / 2) with v the prediction's own residual variance
  (Duan's smearing and the ratio estimator assume independent residuals,
  which species are not).
- per-group phylogenetic lines (scope ``phylo_group``), each on its group's
  subtree, with their slope tests;
- PGLS residual checks: normality and constant variance of the whitened
  residuals, and species whose standardised residual exceeds 3 in
  ``points_to_check.csv``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace as dc_replace
from pathlib import Path

import numpy as np
import pandas as pd

from ..io.tables import _as_text, _parse_numbers, _reason, read_table
from ..render.wording import fit_note, p_text
from ..stats.fit_rows import fit_row
from ..stats.line_results import ConfidenceInterval, line_fit_from_moments
from ..stats.logscale import to_log
from ..stats.phylo_models import (ModelFit, compare_models, fit_sampling_error, lambda_tests,
                                  pooled_within_variance, transform_tree)
from ..stats.phylo_predict import (MAX_DENSE_TIPS, OUTLIER_CUT, back_transform,
                                   lambda_covariance, new_species_line, new_species_to_dict,
                                   predict_new_species, predict_tips, residual_checks)
from ..stats.phylogeny import (PhyloPlan, fit_phylo, match_species, normalise_name,
                               phylo_pass, prune_tree, read_newick)
from ..stats.schema import POINTS_TO_CHECK_COLUMNS, PREDICTION_COLUMNS, method_label
from .predictions import range_ratio
from .several_predictors import _factors

__all__ = ["GROUP_SCOPE", "MODEL_COLUMNS", "PhyloExtras", "phylo_extras_stage",
           "finish_phylo_extras", "add_phylo_checks"]

GROUP_SCOPE = "phylo_group"
MODEL_COLUMNS = ["method", "model", "parameter", "estimate", "half_life", "loglik", "k", "n",
                 "aicc", "delta_aicc", "weight", "slope", "slope_se", "intercept",
                 "lr_statistic", "p_value", "chosen", "note"]
SAMPLING_MODEL = "lambda_sampling_error"


@dataclass(frozen=True, slots=True, kw_only=True)
class PhyloExtras:
    """What this stage adds (see the module docstring).

    ``rows`` are every fits.csv row of the run so far (the phylogenetic OLS row
    swapped for the named model's) and the per-group rows; ``test_rows`` go into
    slope_tests.csv;
    ``phylo`` is the phylogenetic stage with its OLS line under the model named
    by ``model.phylogeny.model`` (the stage itself when that is lambda);
    ``lambda_columns`` ((scope, group, method) -> the lambda columns) fill
    the group rows once fits.csv is assembled; ``tables`` holds
    ``phylo_models``; ``saved_fits`` the PGLS line for ``scaling predict --method
    pgls``; ``predictions`` and ``checks`` are appended to
    predictions.csv and points_to_check.csv; ``dropped`` is the run's
    dropped-rows table without the rows now predicted.
    """

    rows: tuple = ()
    test_rows: tuple = ()
    lambda_columns: dict
    phylo: object
    tables: dict
    saved_fits: dict
    predictions: pd.DataFrame
    checks: pd.DataFrame
    dropped: pd.DataFrame
    messages: tuple = ()
    notes: tuple = ()


def _tips_plan(tree, species):
    """Pruned tree, its tip ids in ``species`` order and the O(n) plan (all species have tips)."""
    match = match_species(species, tree)
    tips_old = match.tip_of_species
    pruned = prune_tree(tree, tips_old)
    new_index = {normalise_name(pruned.names[t]): int(t) for t in pruned.tips}
    tips = np.array([new_index[normalise_name(tree.names[t])] for t in tips_old])
    return pruned, tips, PhyloPlan.from_tree(pruned, tips)


def phylo_extras_stage(cfg, state) -> PhyloExtras:
    """Models, predictions, per-group lines and residual checks over ``cfg.data.tree``.

    Reads ``state.phylo`` (the phylogenetic stage: its species points and
    fits), ``state.data`` and ``state.base``.
    """
    phylo, base = state.phylo, state.base
    tree = read_newick(cfg.data.tree)
    name = Path(cfg.data.tree).name
    pts = phylo.points
    species = pts["unit"].astype(str).tolist()
    X, Y = pts["log_x"].to_numpy(float), pts["log_y"].to_numpy(float)
    settings = cfg.model.phylogeny
    reml = settings["lambda"] == "reml"
    messages, notes, rows, test_rows, lam_cols, saved = [], [], [], [], {}, {}
    tables, preds, checks = {}, [], []
    dropped = state.data.dropped
    ols = phylo.fits.get("ols")
    pruned, tips, plan = _tips_plan(tree, species)
    phylo_out = phylo
    if ols is not None and ols.estimable:
        table, m_msgs, model_fits = _models_table(cfg, state, plan, X, Y, reml)
        tables["phylo_models"] = table
        messages += m_msgs
        chosen = _chosen(settings.get("model", "lambda"), model_fits, notes)
        if chosen is None:       # the lambda line as fitted by the phylogenetic stage

            def cov_tree(sub):
                return sub, ols.lam
            line_fit = ols
        else:                    # the named model: GLS on the transformed tree
            mf, info = chosen, model_fits.get("_sampling")

            def cov_tree(sub):
                return _transformed(sub, mf, info), 1.0
            line_fit, phylo_out, c_msg = _chosen_line(cfg, phylo, pts, cov_tree(pruned)[0], mf,
                                                      base)
            messages.append(c_msg)
        t_tree, t_lam = cov_tree(pruned)
        res = phylo_pass(PhyloPlan.from_tree(t_tree, tips), np.column_stack([X, Y]), [t_lam])
        # a new species' own depth: without the fitted species' sampling error
        depth = float(np.mean(_tip_heights(
            t_tree if chosen is None or chosen.model != SAMPLING_MODEL
            else transform_tree(pruned, "lambda", chosen.estimate), tips)))
        line = new_species_line(res, plan.n, depth)
        x_range = (float(pts["x"].min()), float(pts["x"].max()))
        saved = {("phylo", "", "ols"): new_species_to_dict(
            line, log_base=base, confidence=ols.confidence, lam=t_lam, x_range=x_range)}
        if cfg.prediction.x:
            new_rows = _new_species_rows(cfg, line, base, x_range, ols.confidence)
            preds.append(new_rows)
            messages.append(_new_species_sentence(new_rows, state.data.units, depth))
        taken, tip_rows, tip_msgs = _unmeasured(cfg, state, tree, species, X, Y, line_fit,
                                                cov_tree, base, x_range, name)
        if len(tip_rows):
            preds.append(tip_rows)
            dropped = dropped[~dropped["row"].isin(taken)].reset_index(drop=True)
        messages += tip_msgs
        if plan.n <= MAX_DENSE_TIPS:
            chk, c_msgs = _residual_checks(t_tree, tips, t_lam, X, Y, pts)
            checks.append(chk)
            messages += c_msgs
        else:
            notes.append(f"Phylogenetic residual checks skipped: {plan.n} species exceed "
                         f"{MAX_DENSE_TIPS} (they need the dense covariance).")
    if state.data.has_groups:
        rows, test_rows, lam_cols = _group_lines(cfg, state, tree, pts, base)
        messages += _group_sentences(rows, lam_cols, cfg)
    pred_table = (pd.concat(preds, ignore_index=True) if preds
                  else pd.DataFrame(columns=PREDICTION_COLUMNS + ["species"]))
    check_table = (pd.concat(checks, ignore_index=True) if checks
                   else pd.DataFrame(columns=POINTS_TO_CHECK_COLUMNS))
    swap = {id(a): b for a, b in zip(phylo.rows, phylo_out.rows) if a is not b}
    rows = [swap.get(id(r), r) for r in state.rows] + list(rows)
    return PhyloExtras(rows=tuple(rows), test_rows=tuple(test_rows), lambda_columns=lam_cols,
                       phylo=phylo_out, tables=tables, saved_fits=saved, predictions=pred_table, checks=check_table,
                       dropped=dropped, messages=tuple(messages), notes=tuple(notes))


def finish_phylo_extras(state, extras: PhyloExtras) -> tuple:
    """``(fits, tables, saved_fits)``: fits.csv with the group rows' lambda columns,
    predictions.csv with this stage's rows and the saved PGLS line (called once those
    tables exist)."""
    fits = state.fits.copy()
    for (scope, group, method), cols in extras.lambda_columns.items():
        sel = ((fits["scope"] == scope) & (fits["group"] == group)
               & (fits["method"] == method))
        for c, v in cols.items():
            fits.loc[sel, c] = v
    tables = dict(state.tables)
    if len(extras.predictions):
        old = tables.get("predictions")
        if old is None:
            old = pd.DataFrame(columns=PREDICTION_COLUMNS)
        old = old.assign(species="") if "species" not in old else old
        tables["predictions"] = pd.concat([old, extras.predictions[list(old.columns)]],
                                          ignore_index=True)
    return fits, tables, {**state.saved_fits, **extras.saved_fits}


def add_phylo_checks(table: pd.DataFrame, extras: PhyloExtras | None) -> pd.DataFrame:
    """points_to_check.csv with the species the PGLS residual check flags."""
    if extras is None or not len(extras.checks):
        return table
    return pd.concat([table, extras.checks[list(table.columns)]], ignore_index=True)


# --------------------------------------------------------------------------
# models


def _models_table(cfg, state, plan, X, Y, reml: bool) -> tuple:
    fits = compare_models(plan, X, Y, reml=reml)
    # the tests compare the likelihood's maximum over lambda (also when the line's lambda is fixed)
    lam_fit = next(f for f in fits if f.model == "lambda")
    lt = lambda_tests(plan, X, Y, lam_fit.estimate, lam_fit.loglik, reml=reml)
    chosen = cfg.model.phylogeny.get("model", "lambda")
    if cfg.model.phylogeny.get("sampling_error") and chosen != "lambda":
        state_note = ("model.phylogeny.sampling_error applies to the lambda model only; "
                      f"the {chosen} line ignores it.")
    else:
        state_note = ""
    records = []
    for f in fits:
        lr = {"independent": (lt.stat_0, lt.p_0), "brownian": (lt.stat_1, lt.p_1)}.get(
            f.model, (math.nan, math.nan))
        records.append({"method": "ols", "model": f.model, "parameter": f.parameter,
                        "estimate": f.estimate, "half_life": f.half_life, "loglik": f.loglik,
                        "k": f.k, "n": f.n, "aicc": f.aicc, "slope": f.slope,
                        "slope_se": f.slope_se, "intercept": f.intercept,
                        "lr_statistic": lr[0], "p_value": lr[1],
                        "chosen": f.model == chosen, "note": f.note})
    sampling = _sampling_error(cfg, state, plan, X, Y)
    model_fits = {f.model: f for f in fits}
    if sampling is None and cfg.model.phylogeny.get("sampling_error") and chosen == "lambda":
        state_note = ("model.phylogeny.sampling_error is on but no species has two or more "
                      "rows with y, so there is no within-species variance; the line is the "
                      "plain lambda one.")
    if sampling is not None:
        row, mf, info = sampling
        row["chosen"] = chosen == "lambda"     # sampling error refines the lambda model
        records[0]["chosen"] = records[0]["chosen"] and chosen != "lambda"
        records.append(row)
        model_fits[SAMPLING_MODEL] = mf
        model_fits["_sampling"] = info
    table = pd.DataFrame(records)
    best = np.nanmin(table["aicc"].to_numpy(float))
    table["delta_aicc"] = table["aicc"] - best
    w = np.exp(-0.5 * table["delta_aicc"].to_numpy(float))
    table["weight"] = w / np.nansum(w)
    table = table[MODEL_COLUMNS]
    ok = table[table["note"] == ""]
    top = ok.loc[ok["aicc"].idxmin()]
    msgs = [f"Pagel's λ = {lt.lam:.2f} against λ = 0 (no phylogenetic signal): "
            f"LR = {lt.stat_0:.2f}, p {_p(lt.p_0)}; against λ = 1 (Brownian motion): "
            f"LR = {lt.stat_1:.2f}, p {_p(lt.p_1)} (χ² with 1 df, conservative at the "
            "boundary)."]
    msgs.append(f"Evolutionary models for the PGLS line (phylo_models.csv): lowest AICc "
                f"{top['model']} (exponent {top['slope']:.3f} ± {top['slope_se']:.3f} SE); "
                + ", ".join(f"{r.model} ΔAICc {r.delta_aicc:.1f}" for r in ok.itertuples()
                            if r.model != top["model"]) + f"; the phylogenetic line reported "
                f"uses the {table.loc[table['chosen'].astype(bool), 'model'].iloc[0]} model."
                + (" " + state_note if state_note else ""))
    return table, msgs, model_fits


def _chosen(name: str, model_fits: dict, notes: list):
    """The ModelFit the line uses, or None for lambda (also when the named model failed)."""
    if name == "lambda":
        return model_fits.get(SAMPLING_MODEL)    # None unless sampling_error is on
    mf = model_fits.get(name)
    if mf is None or mf.note or not np.isfinite(mf.loglik):
        notes.append(f"model.phylogeny.model is {name}, which could not be fitted "
                     f"({mf.note if mf is not None else 'unknown model'}); the phylogenetic "
                     "line uses Pagel's λ.")
        return None
    return mf


def _transformed(sub, mf, info):
    """``sub`` transformed by the model ``mf`` at its estimate; for lambda with sampling
    error the fitted species' tip branches are also lengthened by s2/(n_i sigma^2)."""
    if mf.model != SAMPLING_MODEL:
        return transform_tree(sub, mf.model, mf.estimate)
    t = transform_tree(sub, "lambda", mf.estimate)
    length = t.length.copy()
    for i in t.tips.tolist():
        length[i] += info["extra"].get(normalise_name(t.names[i]), 0.0) / info["sigma2"]
    return dc_replace(t, length=length)


def _chosen_line(cfg, phylo, pts, t_tree, mf, base) -> tuple:
    """The phylogenetic OLS line under the named model: GLS on the transformed tree
    (the model's parameters held at their estimates), as a PhyloFit, and the stage with it."""
    fit = fit_phylo(pts["x"].to_numpy(), pts["y"].to_numpy(), t_tree,
                    pts["unit"].astype(str).tolist(), method="ols", lam=1.0,
                    confidence=cfg.model.confidence, log_base=base)
    lam = mf.estimate if mf.model == SAMPLING_MODEL else math.nan
    fit = dc_replace(fit, lam=lam, lam_ci=ConfidenceInterval(math.nan, math.nan),
                     lam_estimate=mf.model, loglik=mf.loglik, aic=mf.aic, n_params=mf.k)
    ranges = ((float(pts["x"].min()), float(pts["x"].max())),
              (float(pts["y"].min()), float(pts["y"].max())))
    row = fit_row(fit, scope="phylo", x_range=ranges[0], y_range=ranges[1],
                  interval_method="analytic", deming_lambda=np.nan, note=fit_note(fit),
                  **{"lambda": lam, "lambda_low": math.nan, "lambda_high": math.nan,
                     "lambda_estimate": mf.model, "loglik": mf.loglik, "aic": mf.aic})
    rows = tuple(row if (r["scope"] == "phylo" and r["method"] == "ols") else r
                 for r in phylo.rows)
    line_fits = dict(phylo.line_fits)
    line_fits[("phylo", "", "ols")] = line_fit_from_moments(
        fit.moments, "ols", confidence=fit.confidence, log_base=base, x_range=ranges[0],
        y_range=ranges[1])
    stage = dc_replace(phylo, rows=rows, fits={**phylo.fits, "ols": fit}, line_fits=line_fits)
    par = (f", {mf.parameter} = {mf.estimate:.3g}" if mf.parameter else "")
    pct = f"{100 * cfg.model.confidence:g}%"
    key = ("model.phylogeny.sampling_error" if mf.model == SAMPLING_MODEL
           else "model.phylogeny.model")
    msg = (f"The phylogenetic OLS line uses the {mf.model} model ({key}{par}, "
           f"held at the estimate): exponent {fit.slope:.3f} ({pct} CI "
           f"{fit.slope_ci.low:.3f}–{fit.slope_ci.high:.3f}).")
    return fit, stage, msg


def _p(p: float) -> str:
    """'= 0.031' or '< 0.0001': the package's one p formatter, after 'p '."""
    return p_text(p)[2:]


def _sampling_error(cfg, state, plan, X, Y):
    """The lambda model with within-species sampling error: ``(phylo_models row, ModelFit,
    {"sigma2", "extra": species -> s2/n_i})``, or None."""
    if not cfg.model.phylogeny.get("sampling_error") or not cfg.data.average_within:
        return None
    table = read_table(cfg.data)
    y_val, y_prob, _ = _parse_numbers(table[cfg.data.y], cfg.data.decimal)
    unit = _as_text(table[cfg.data.average_within]).to_numpy()
    keys = {normalise_name(u): i for i, u in enumerate(state.phylo.points["unit"].astype(str))}
    code = np.array([keys.get(normalise_name(u), -1) if u else -1 for u in unit])
    ok = (code >= 0) & (y_prob == "") & np.isfinite(y_val) & (y_val > 0)
    ok &= ~np.isin(np.arange(1, len(table) + 1), state.data.dropped["row"].to_numpy())
    log_y = to_log(y_val[ok], state.base)
    s2, df = pooled_within_variance(code[ok], log_y)
    n_i = np.bincount(code[ok], minlength=plan.n)
    if not np.isfinite(s2) or np.any(n_i == 0):
        return None
    lam = cfg.model.phylogeny["lambda"]
    f = fit_sampling_error(plan, X, Y, s2 / n_i, lam="ml" if lam in ("ml", "reml") else lam,
                           s2=s2)
    k = 3 + (lam in ("ml", "reml"))   # a, b, sigma^2 (+ lambda); s2 comes from within species
    aicc = -2 * f.loglik + 2 * k + 2 * k * (k + 1) / (plan.n - k - 1)
    note = f"s2 = {s2:.4g} on {df} df (pooled within species)"
    row = {"method": "ols", "model": SAMPLING_MODEL, "parameter": "lambda",
           "estimate": f.lam, "half_life": math.nan, "loglik": f.loglik, "k": k, "n": plan.n,
           "aicc": aicc, "slope": f.slope, "slope_se": f.slope_se, "intercept": f.intercept,
           "lr_statistic": math.nan, "p_value": math.nan, "chosen": False, "note": note}
    mf = ModelFit(model=SAMPLING_MODEL, parameter="lambda", estimate=f.lam, loglik=f.loglik,
                  k=k, n=plan.n, aic=-2 * f.loglik + 2 * k, aicc=aicc, slope=f.slope,
                  slope_se=f.slope_se, intercept=f.intercept)
    names = [normalise_name(u) for u in state.phylo.points["unit"].astype(str)]
    return row, mf, {"sigma2": f.sigma2, "extra": dict(zip(names, s2 / n_i))}


# --------------------------------------------------------------------------
# predictions


def _tip_heights(tree, tips) -> np.ndarray:
    h = tree.length.tolist()
    par = tree.parent.tolist()
    h[0] = 0.0
    for i in range(1, len(h)):
        h[i] += h[par[i]]
    return np.asarray(h)[tips]


def _back(fit, low, high, resid_var, correction: str, interval: str, base):
    return back_transform(fit, low, high, resid_var, correction, interval, base)[:3]


def _correction_label(correction: str) -> str:
    return "none" if correction == "none" else "parametric"   # as back_transform


def _new_species_rows(cfg, line, base, x_range, confidence) -> pd.DataFrame:
    pc = cfg.prediction
    x = np.asarray(list(pc.x), dtype=float)
    fit, _, lo, hi, tip_var = predict_new_species(line, to_log(x, base) if base else x,
                                                  confidence=confidence, interval=pc.interval)
    y, y_lo, y_hi = _back(fit, lo, hi, tip_var, pc.correction, pc.interval, base)
    return _pred_frame(x, y, y_lo, y_hi, cfg, x_range, confidence, species="")


def _new_species_sentence(rows: pd.DataFrame, units: dict, depth: float) -> str:
    ux, uy = units.get("x", ""), units.get("y", "")
    listed = ", ".join(f"{r.x:g}{' ' + ux if ux else ''}: {r.y:.3g} ({r.y_low:.3g}–"
                       f"{r.y_high:.3g}{' ' + uy if uy else ''})" for r in rows.itertuples())
    return (f"A typical new species by the PGLS line ({100 * rows['confidence'].iloc[0]:g}% "
            f"{rows['interval'].iloc[0]} intervals; it is taken to join the tree at the root "
            f"with the tips' mean depth {depth:.3g}): {listed}.")


def _pred_frame(x, y, y_lo, y_hi, cfg, x_range, confidence, *, species) -> pd.DataFrame:
    rr = range_ratio(x, x_range[0], x_range[1])
    return pd.DataFrame({"scope": "phylo", "group": "", "method": "ols", "x": x, "y": y,
                         "y_low": y_lo, "y_high": y_hi, "interval": cfg.prediction.interval,
                         "correction": _correction_label(cfg.prediction.correction),
                         "extrapolated": rr > 1, "confidence": confidence,
                         "range_ratio": rr, "species": species})


def _unmeasured(cfg, state, tree, species, X, Y, ols, cov_tree, base, x_range, tree_name):
    """Rows with x, a species with a tip and a blank y: predicted from the fitted relatives."""
    dc = cfg.data
    reason = _reason("y", dc.y, "missing", "", dc.decimal)
    cand = state.data.dropped[state.data.dropped["reason"] == reason]
    if not len(cand) or not dc.average_within:
        return [], [], []
    table = read_table(dc)
    idx = cand["row"].to_numpy(int) - 1
    x_val, x_prob, _ = _parse_numbers(table[dc.x].iloc[idx], dc.decimal)
    unit = _as_text(table[dc.average_within].iloc[idx]).to_numpy()
    fitted = {normalise_name(s) for s in species}
    match = match_species([u for u in unit if u], tree)
    has_tip = {s for s, t in zip(match.species, match.tip_of_species) if t >= 0}
    ok = ((x_prob == "") & np.isfinite(x_val) & (x_val > 0 if base else True)
          & np.array([bool(u) and normalise_name(u) in has_tip
                      and normalise_name(u) not in fitted for u in unit]))
    if not np.any(ok):
        return [], [], []
    rows = cand["row"].to_numpy(int)[ok]
    fx = _factors(cfg)[0][0] if cfg.model.units and base else 1.0   # to model.units
    lx = to_log(x_val[ok] * fx, base) if base else x_val[ok]
    names = [normalise_name(u) for u in unit[ok]]
    frame = pd.DataFrame({"sp": names, "lx": lx, "shown": unit[ok]})
    means = frame.groupby("sp", sort=False).agg(lx=("lx", "mean"), shown=("shown", "first"))
    n_fit = len(species)
    if n_fit + len(means) > MAX_DENSE_TIPS:
        return [], [], [f"Species without y were not predicted: {n_fit + len(means)} tips "
                        f"exceed {MAX_DENSE_TIPS} (the prediction needs the dense covariance)."]
    all_species = list(species) + list(means.index)
    sub, tips, _ = _tips_plan(tree, all_species)
    t_tree, t_lam = cov_tree(sub)
    cov = lambda_covariance(t_tree, tips, t_lam)
    pc = cfg.prediction
    tp = predict_tips(cov, X, Y, means["lx"].to_numpy(), confidence=ols.confidence,
                      interval=pc.interval)
    y, y_lo, y_hi = _back(tp.fit, tp.low, tp.high, tp.cond_var, pc.correction, pc.interval,
                          base)
    x_nat = np.power(base, means["lx"].to_numpy()) if base else means["lx"].to_numpy()
    out = _pred_frame(x_nat, y, y_lo, y_hi, cfg, x_range, ols.confidence,
                      species=means["shown"].to_numpy())
    listed = ", ".join(f"{s} {v:.3g} ({lo:.3g}–{hi:.3g})" for s, v, lo, hi in
                       zip(means["shown"], y, y_lo, y_hi))
    unit_y = state.data.units.get("y", "")
    how = (f"PGLS at λ = {ols.lam:.2f}" if ols.lam_estimate in ("ml", "reml", "fixed")
           else f"PGLS under the {ols.lam_estimate} model")
    msg = (f"Predicted from their relatives in {tree_name} ({how}, "
           f"{100 * ols.confidence:g}% {pc.interval} intervals{', ' + unit_y if unit_y else ''}"
           f"): {listed}.")
    return rows.tolist(), out, [msg]


# --------------------------------------------------------------------------
# residual checks and per-group lines


def _residual_checks(pruned, tips, lam, X, Y, pts) -> tuple:
    rc = residual_checks(lambda_covariance(pruned, tips, lam), X, Y)
    recs = []
    for i in rc.flagged.tolist():
        recs.append({"scope": "phylo", "group": "", "method": "ols", "severity": "warning",
                     "kind": "phylo_outlier", "row": int(pts["row"].iloc[i]),
                     "label": str(pts["unit"].iloc[i]), "value": float(rc.standardised[i]),
                     "reason": f"phylogenetically standardised residual {rc.standardised[i]:+.2f}"
                               f" (|r| > {OUTLIER_CUT:g}): far from what its relatives predict"})
    w, p_norm = rc.normality
    rho, p_spread = rc.spread
    msg = (f"PGLS residual checks: whitened residuals normal (Shapiro–Wilk p {_p(p_norm)}"
           f"{', check' if p_norm < 0.05 else ''}); spread against log x "
           f"(Spearman ρ = {rho:.2f}, p {_p(p_spread)}"
           f"{', check' if p_spread < 0.05 else ''}); "
           + (f"{rc.flagged.size} species with |standardised residual| > {OUTLIER_CUT:g} "
              "(points_to_check.csv)." if rc.flagged.size
              else f"no species with |standardised residual| > {OUTLIER_CUT:g}."))
    return pd.DataFrame(recs, columns=POINTS_TO_CHECK_COLUMNS), [msg]


def _group_sentences(rows, lam_cols: dict, cfg) -> list:
    """One sentence per method: each group's phylogenetic exponent, interval and lambda."""
    out = []
    pct = f"{100 * cfg.model.confidence:g}%"
    for method in dict.fromkeys(r["method"] for r in rows):
        parts = [f"{r['group']} {r['slope']:.3f} ({r['slope_low']:.3f}–{r['slope_high']:.3f}, "
                 f"λ = {lam_cols[(GROUP_SCOPE, r['group'], method)]['lambda']:.2f})"
                 for r in rows if r["method"] == method and np.isfinite(r["slope"])]
        if parts:
            out.append(f"Phylogenetic {method_label(method)} within each group, on its own subtree "
                       f"(exponent, {pct} CI, λ; fits.csv scope {GROUP_SCOPE}): "
                       + "; ".join(parts) + ".")
    return out


def _group_lines(cfg, state, tree, pts, base) -> tuple:
    lam = cfg.model.phylogeny["lambda"]
    kwargs = dict(lam="ml" if lam in ("ml", "reml") else lam, reml=lam == "reml",
                  confidence=cfg.model.confidence, log_base=base)
    rows, tests, cols = [], [], {}
    for g, sel in pts.groupby("group", sort=True):   # the order of the ordinary group rows
        if len(sel) < 3:
            continue
        ranges = ((float(sel["x"].min()), float(sel["x"].max())),
                  (float(sel["y"].min()), float(sel["y"].max())))
        for method in [m for m in cfg.model.methods if m in state.phylo.fits]:
            fit = fit_phylo(sel["x"].to_numpy(), sel["y"].to_numpy(), tree,
                            sel["unit"].astype(str).tolist(), method=method, **kwargs)
            rows.append(fit_row(fit, scope=GROUP_SCOPE, group=str(g), x_range=ranges[0],
                                y_range=ranges[1], interval_method="analytic",
                                deming_lambda=np.nan, note=fit_note(fit)))
            cols[(GROUP_SCOPE, str(g), method)] = {
                "lambda": fit.lam, "lambda_low": fit.lam_ci.low, "lambda_high": fit.lam_ci.high,
                "lambda_estimate": fit.lam_estimate, "loglik": fit.loglik, "aic": fit.aic}
            if not fit.estimable:
                continue
            for hyp, b0 in cfg.exponents.items():
                t = fit.test_slope(b0, hypothesis=hyp)
                tests.append({"scope": GROUP_SCOPE, "group": str(g), "method": method,
                              "hypothesis": hyp, "exponent": b0, "estimate": t.estimate,
                              "statistic": t.statistic, "statistic_type": t.statistic_type,
                              "df": t.df, "p_value": t.p_value, "p_method": t.p_method})
    return rows, tests, cols
