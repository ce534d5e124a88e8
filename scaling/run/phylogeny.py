"""The phylogenetic stage of a run: PGLS, phylogenetic SMA and MA next to the ordinary fits.

With ``data.tree`` (a Newick file) and ``data.species`` (the column naming
its tips) in the config, every requested OLS, SMA and MA line is also fitted
across species with :func:`scaling.stats.phylogeny.fit_phylo` (Pagel's lambda as set
by ``model.phylogeny.lambda``: ``ml``, ``reml`` or a fixed number in
[0, 1]).  Rows are averaged within species first (``data.average_within``
is the species column), so the ordinary pooled fit and the phylogenetic one
read the same species means and differ only by the correction.

The phylogenetic fits are rows of ``fits.csv`` and ``slope_tests.csv`` with
scope ``phylo`` (group blank); ``fits.csv`` gains the columns ``lambda``,
``lambda_low``, ``lambda_high``, ``lambda_estimate``, ``loglik`` and
``aic`` (blank for ordinary fits).  Species without a tip and tips without
data are listed in ``dropped_rows.csv``; the tips are pruned.

With groups compared (``groups.compare``), every ordinary group test gets its
phylogenetic counterpart (:func:`scaling.stats.phylo_groups.phylo_group_tests`):
``group_tests.csv`` and ``pairwise_tests.csv`` gain the columns ``scope``
(``ordinary`` or ``phylo``), ``lambda``, ``lambda_low`` and ``lambda_high``
(the lambda each phylogenetic row used, estimated under the full group model),
and the phylogenetic common within-group slope is a ``fits.csv`` row of scope
``phylo_common`` with its slope tests.  Without a tree those tables keep their
columns.  Per-group phylogenetic fits are not done: the summary says so.

The numeric work is in :mod:`scaling.stats.phylogeny`; this module only reads the
tree, calls it and phrases the result (its sentences will move to
``wording.py``).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import pandas as pd

from ..render.wording import fit_note
from ..stats.fit_rows import fit_row
from ..stats.lines import method_label
from ..stats.line_results import line_fit_from_moments
from ..render.wording import describe_test, fit_interval_text
from ..errors import DataError
from ..stats.phylogeny import PhyloFit, fit_phylo, match_species, read_newick
from ..stats.phylo_groups import PHYLO_GROUP_SCOPE, phylo_group_tests
from ..render.answer_phylo import phylo_group_messages
from ..stats.schema import PHYLO_FIT_COLUMNS  # noqa: F401 (importable from here too)

__all__ = ["PHYLO_SCOPE", "PHYLO_COMMON_SCOPE", "ORDINARY_SCOPE", "PHYLO_METHODS", "PHYLO_FIT_COLUMNS", "PhyloStage", "phylo_stage"]

PHYLO_SCOPE = "phylo"
#: fits.csv scope of the phylogenetic common within-group slope.
PHYLO_COMMON_SCOPE = "phylo_common"
#: ``scope`` of the ordinary rows of group_tests.csv and pairwise_tests.csv when a
#: tree adds phylogenetic rows beside them.
ORDINARY_SCOPE = "ordinary"
PHYLO_METHODS = ("ols", "sma", "ma")


@dataclass(frozen=True, slots=True, kw_only=True)
class PhyloStage:
    """What the phylogenetic stage adds to a run.

    Attributes
    ----------
    rows : list of dict
        ``fits.csv`` rows (scope ``phylo``), with the lambda columns.
    fits : dict
        method -> :class:`~scaling.stats.phylogeny.PhyloFit`.
    line_fits : dict
        ``("phylo", "", method) -> LineFit`` (the same lines, for slope tests,
        figures; not used for predictions, whose interval for a new species is not
        defined here yet).
    points : DataFrame
        The species points with a tip (what the phylogenetic lines were fitted to).
    dropped : DataFrame
        ``row, reason`` entries for species without a tip and pruned tips.
    messages, notes : tuple of str
        The sentences (lambda, the phylogenetic exponent and what the
        correction changed against the pooled ordinary line) and the notes.
    group_tests : dict
        method -> :class:`~scaling.stats.phylo_groups.PhyloGroupTests` (with
        groups compared).
    tables : dict
        ``group_tests`` and ``pairwise_tests`` with a ``scope`` column
        (``ordinary`` and ``phylo`` rows) and the lambda used, when groups
        are compared.
    test_rows : tuple of dict
        ``slope_tests.csv`` rows of the phylogenetic common slope.
    """

    rows: tuple
    fits: dict
    line_fits: dict
    points: pd.DataFrame
    dropped: pd.DataFrame
    messages: tuple = ()
    notes: tuple = ()
    group_tests: dict = field(default_factory=dict)
    tables: dict = field(default_factory=dict)
    test_rows: tuple = ()


def phylo_stage(cfg, state) -> PhyloStage:
    """Fit every requested OLS/SMA/MA line phylogenetically over ``cfg.data.tree``.

    Parameters
    ----------
    cfg : Config
    state : RunState
        ``state.data.points`` holds the run's points, one per species (column
        ``unit`` holds the species); ``state.line_fits`` the pooled ordinary
        fits the phylogenetic ones are compared with.

    Raises
    ------
    DataError
        If the tree file cannot be read or parsed (the message names the
        file and the character), has a negative or missing branch length, or
        fewer than 3 species match a tip.
    """
    dc = cfg.data
    pts, base = state.data.points, state.base
    tree = read_newick(dc.tree)
    name = Path(dc.tree).name
    species = pts["unit"].astype(str).tolist()
    match = match_species(species, tree)
    shown = {_key(u): str(u) for u in pts["unit"]}
    case_only = _case_only(match)
    n_matched = int(np.count_nonzero(match.tip_of_species >= 0))
    if n_matched < 3 and case_only:   # the fit would refuse: say why the names missed
        raise DataError(f"only {n_matched} species of column {dc.species} match a tip of tree "
                        f"{name}; at least 3 are needed; {_case_text(case_only, shown)}")
    has_tip = np.isin(np.asarray([_key(s) for s in species], dtype=object),
                      np.asarray([s for s, t in zip(match.species, match.tip_of_species)
                                  if t >= 0], dtype=object))
    used = pts[has_tip]
    lam = cfg.model.phylogeny["lambda"]
    kwargs = dict(lam="ml" if lam in ("ml", "reml") else lam, reml=lam == "reml",
                  confidence=cfg.model.confidence, log_base=base)
    x, y = pts["x"].to_numpy(), pts["y"].to_numpy()
    ranges = ((float(used["x"].min()), float(used["x"].max())),
              (float(used["y"].min()), float(used["y"].max())))
    rows, fits, line_fits = [], {}, {}
    for method in [m for m in cfg.model.methods if m in PHYLO_METHODS]:
        fit = fit_phylo(x, y, tree, species, method=method, **kwargs)
        fits[method] = fit
        rows.append(fit_row(fit, scope=PHYLO_SCOPE, x_range=ranges[0], y_range=ranges[1],
                            interval_method="analytic", deming_lambda=np.nan,
                            note=fit_note(fit),
                            **_lambda_columns(fit)))
        if fit.estimable:
            line_fits[(PHYLO_SCOPE, "", method)] = line_fit_from_moments(
                fit.moments, method, confidence=fit.confidence, log_base=base,
                x_range=ranges[0], y_range=ranges[1])
    dropped = _dropped(pts, match, dc.species, name, case_only)
    notes = []
    if cfg.prediction.x or cfg.prediction.y:
        notes.append("The predictions at the requested x come from the ordinary lines; the "
                     "PGLS line's predictions (a typical new species, and species in the "
                     "tree without y) are the scope 'phylo' rows of predictions.csv.")
    if len(dropped):
        notes.append(_drop_note(match, name, shown))
    if case_only:
        notes.append(_case_text(case_only, shown) + ".")
    ordinary = {m: f for (s, g, m), f in state.line_fits.items() if s == "pooled"}
    compared = _group_comparisons(cfg, state, used, tree, kwargs, notes)
    common_rows, test_rows = _phylo_common_rows(compared, cfg, base)
    stage = PhyloStage(rows=tuple(rows + common_rows), fits=fits, line_fits=line_fits,
                       points=used, dropped=dropped, notes=tuple(notes), group_tests=compared,
                       tables=_scoped_tables(state.tables, compared) if compared else {},
                       test_rows=tuple(test_rows))
    messages = phylo_messages(stage, ordinary, cfg, has_groups=state.data.has_groups)
    if compared:
        messages += phylo_group_messages(compared, state.tables.get("group_tests"), cfg)
    return replace(stage, messages=tuple(messages))


def _group_comparisons(cfg, state, used: pd.DataFrame, tree, kwargs: dict, notes: list) -> dict:
    """method -> PhyloGroupTests for each compared method (groups of >= 3 species)."""
    if not (state.data.has_groups and cfg.groups.compare) or "group" not in used:
        return {}
    counts = used["group"].astype(str).value_counts()
    keep = used[used["group"].astype(str).isin(counts.index[counts >= 3])]
    if keep["group"].nunique() < 2:
        return {}
    out = {}
    for method in [m for m in cfg.model.methods if m in PHYLO_METHODS]:
        try:
            out[method] = _one_comparison(keep, tree, method, kwargs, cfg)
        except (DataError, np.linalg.LinAlgError) as exc:   # the ordinary tests still stand
            notes.append(f"Phylogenetic group comparison ({method_label(method)}) not made: "
                         f"{exc}.")
    return out


def _one_comparison(keep: pd.DataFrame, tree, method: str, kwargs: dict, cfg):
    """The phylogenetic group tests of one method on the species with a tip."""
    return phylo_group_tests(
        keep["log_x"].to_numpy(), keep["log_y"].to_numpy(),
        keep["unit"].astype(str).tolist(), keep["group"].astype(str).to_numpy(), tree,
        method=method, lam=kwargs["lam"], reml=kwargs["reml"],
        confidence=kwargs["confidence"], pairwise_max=cfg.groups.pairwise_max,
        seed=cfg.resampling.seed)


def _phylo_common_rows(compared: dict, cfg, base) -> tuple[list, list]:
    """fits.csv and slope_tests.csv rows (scope ``phylo_common``) of the common slopes."""
    if not compared:
        return [], []
    from .groups import common_slope_rows
    from ..stats.lines import base_label
    rows, tests = common_slope_rows({m: c.common for m, c in compared.items()},
                                    cfg.exponents, log_base=base_label(base))
    for r in rows:
        c = compared[r["method"]]
        r.update(scope=PHYLO_COMMON_SCOPE, note=r["note"] + "; phylogenetic (GLS at the "
                 "lambda of the full group model)",
                 interval_method="t" if c.method == "ols" else "profile_likelihood",
                 **{"lambda": c.lam, "lambda_low": c.lam_ci.low, "lambda_high": c.lam_ci.high,
                    "lambda_estimate": c.lam_estimate})
    for t in tests:
        t["scope"] = PHYLO_COMMON_SCOPE
    return rows, tests


def _scoped_tables(tables: dict, compared: dict) -> dict:
    """group_tests and pairwise_tests with ``scope`` (ordinary, phylo) and the lambda used."""
    out = {}
    for name, frame_of in (("group_tests", lambda c: c.to_frame()),
                           ("pairwise_tests", lambda c: c.pairwise_frame())):
        ordinary = tables.get(name)
        ordinary = (ordinary.assign(scope=ORDINARY_SCOPE) if ordinary is not None
                    else pd.DataFrame({"scope": []}))
        for c in ("lambda", "lambda_low", "lambda_high"):
            ordinary[c] = np.nan
        phylo = [frame_of(c) for c in compared.values()]
        phylo = [f for f in phylo if len(f)]
        frame = pd.concat([ordinary] + phylo, ignore_index=True) if phylo else ordinary
        lead = ["scope"]
        out[name] = frame[lead + [c for c in frame.columns if c not in lead]]
    return out


def _lambda_columns(fit: PhyloFit) -> dict:
    """The columns of :data:`PHYLO_FIT_COLUMNS` of one phylogenetic fit."""
    return {"lambda": fit.lam, "lambda_low": fit.lam_ci.low, "lambda_high": fit.lam_ci.high,
            "lambda_estimate": fit.lam_estimate, "loglik": fit.loglik, "aic": fit.aic}


def _key(name) -> str:
    return " ".join(str(name).replace("_", " ").split())


def _case_only(match) -> dict:
    """Species without a tip -> the unused tip whose name differs from it only in letter case.

    Names are matched exactly (``_`` read as a space); a case difference is
    reported, never matched, since 'Mus musculus' and 'mus musculus' may be a
    typo or two names the user keeps apart on purpose.
    """
    tips = {}
    for t in match.pruned_tips:
        tips.setdefault(_key(t).casefold(), t)
    return {s: tips[s.casefold()] for s in match.missing_species if s.casefold() in tips}


def _case_text(case_only: dict, shown: dict) -> str:
    """"N species match a tip except for letter case (e.g. 'A b' vs 'a_b'): ..." """
    species, tip = next(iter(case_only.items()))
    n = len(case_only)
    return (f"{n} species match{'es' if n == 1 else ''} a tip except for letter case "
            f"(e.g. {shown.get(species, species)!r} vs {tip!r}); names must match exactly, "
            "so correct the spelling in the data or in the tree")


def _dropped(pts: pd.DataFrame, match, column: str, tree_name: str,
             case_only: dict | None = None) -> pd.DataFrame:
    """Species without a tip (their first input row) and tips without data (row blank)."""
    first_row = {_key(u): int(r) for u, r in zip(pts["unit"], pts["row"])}
    n_rows = {_key(u): int(k) for u, k in zip(pts["unit"], pts["n_rows"])}
    shown = {_key(u): str(u) for u in pts["unit"]}
    case_only = case_only or {}
    rows = [{"row": first_row[s],
             "reason": f"{column} {shown[s]!r} has no tip in tree {tree_name}"
                       + (f" (tip {case_only[s]!r} differs only in letter case)"
                          if s in case_only else "")
                       + f": left out of the phylogenetic fits only ({n_rows[s]} row(s) of "
                         "this species, first shown)"}
            for s in match.missing_species]
    near = {t: shown.get(s, s) for s, t in case_only.items()}
    rows += [{"row": pd.NA,
              "reason": f"tree {tree_name} tip {t!r} has no data in column {column}"
                        + (f" ({column} {near[t]!r} differs only in letter case)"
                           if t in near else "")
                        + ": pruned from the tree"}
             for t in match.pruned_tips]
    out = pd.DataFrame(rows, columns=["row", "reason"])
    out["row"] = out["row"].astype("Int64")
    return out


def _drop_note(match, tree_name: str, shown: dict) -> str:
    missing = [shown.get(s, s) for s in match.missing_species]
    parts = []
    if match.missing_species:
        parts.append(f"{len(match.missing_species)} species have no tip in {tree_name} and "
                     f"are left out of the phylogenetic fits ({_listed(missing)})")
    if match.pruned_tips:
        parts.append(f"{len(match.pruned_tips)} tips of {tree_name} have no data and were "
                     f"pruned ({_listed(match.pruned_tips)})")
    return "; ".join(parts) + "; see dropped_rows.csv."


def _listed(names, limit: int = 5) -> str:
    shown = ", ".join(names[:limit])
    return shown + (f" and {len(names) - limit} more" if len(names) > limit else "")


def phylo_messages(stage: PhyloStage, ordinary: dict, cfg, *, has_groups: bool) -> list:
    """Plain-language sentences: lambda, the phylogenetic exponent and what changed.

    ``ordinary`` maps method -> the pooled ordinary LineFit (on all species).
    """
    pct = f"{100 * cfg.model.confidence:g}%"
    alpha = 1 - cfg.model.confidence
    out = []
    tree_name = Path(cfg.data.tree).name
    for method, fit in stage.fits.items():
        label = method_label(method)
        if not fit.estimable:
            out.append(f"Phylogenetic {label}: not estimable ({fit.note}).")
            continue
        if fit.lam_estimate == "fixed":
            lam = f"Pagel's λ fixed at {fit.lam:g}"
        else:
            lam = (f"Pagel's λ = {fit.lam:.2f} ({pct} profile CI {fit.lam_ci.low:.2f}–"
                   f"{fit.lam_ci.high:.2f}, {fit.lam_estimate.upper()})")
        text = (f"Phylogenetic {label} over tree {tree_name} ({fit.n} species, {lam}): "
                f"exponent {fit.slope:.3f} ({pct} CI {fit_interval_text(fit)})")
        o = ordinary.get(method)
        if o is not None:
            w_p = fit.slope_ci.high - fit.slope_ci.low
            w_o = o.slope_ci.high - o.slope_ci.low
            change = (f"; ordinary {label} {o.slope:.3f} ({fit_interval_text(o)}, "
                      f"n = {o.n}): the correction moved the exponent "
                      f"by {fit.slope - o.slope:+.3f}")
            if np.isfinite(w_p) and np.isfinite(w_o) and w_o > 0:
                change += (f" and made its interval {abs(w_p / w_o - 1) * 100:.0f}% "
                           f"{'wider' if w_p > w_o else 'narrower'}")
            text += change
        out.append(text + ".")
        for hyp, b0 in cfg.exponents.items():
            t = fit.test_slope(b0, hypothesis=hyp)
            line = "  " + describe_test(t, alpha=alpha).rstrip(".")
            if o is not None:
                ot = o.test_slope(b0, hypothesis=hyp)
                if (t.p_value < alpha) != (ot.p_value < alpha):
                    line += (f"; the ordinary {label} "
                         f"{'rejects' if ot.p_value < alpha else 'does not reject'} it, so "
                         "the verdict changes with the correction")
                else:
                    line += f"; same verdict as the ordinary {label}"
            out.append(line + ".")
    if has_groups:
        out.append("Not yet phylogenetic: the line through the group means treats the group "
                   "means as independent.")
    return out


def tree_check_lines(cfg, pts: pd.DataFrame) -> list:
    """What ``scaling check`` says about ``data.tree``: how species met the tips.

    Reads and parses the tree (a bad file raises the run's DataError), matches
    the species column of ``pts`` (the points to fit, ``unit`` holding the
    species) to the tips as the run does, and says which groups are clades
    (monophyletic among the matched tips), which the phylogenetic SMA and MA
    group tests treat exactly.
    """
    tree = read_newick(cfg.data.tree)
    name = Path(cfg.data.tree).name
    species = pts["unit"].astype(str).tolist()
    match = match_species(species, tree)
    shown = {_key(u): str(u) for u in pts["unit"]}
    n_sp = len(match.species)
    n_ok = int(np.count_nonzero(match.tip_of_species >= 0))
    lines = [f"tree OK: {name} ({tree.n_tips} tips): {n_ok} of {n_sp} species match a tip"]
    if match.missing_species:
        lines.append(f"  note: {len(match.missing_species)} species have no tip and will be "
                     "left out of the phylogenetic fits ("
                     + _listed([shown.get(s, s) for s in match.missing_species]) + ")")
    if match.pruned_tips:
        lines.append(f"  note: {len(match.pruned_tips)} tips have no data and will be pruned ("
                     + _listed(list(match.pruned_tips)) + ")")
    case_only = _case_only(match)
    if case_only:
        lines.append("  note: " + _case_text(case_only, shown))
    if n_ok < 3:
        lines.append("  note: fewer than 3 species match a tip: the phylogenetic fits will "
                     "refuse to run")
    if "group" in pts and cfg.data.group and n_ok >= 3:
        tip_of = dict(zip(match.species, match.tip_of_species.tolist()))
        keys = [_key(s) for s in species]
        by_group: dict = {}
        for k, g in zip(keys, pts["group"].astype(str)):
            if tip_of.get(k, -1) >= 0:
                by_group.setdefault(g, set()).add(tip_of[k])
        used = set(t for t in tip_of.values() if t >= 0)
        below = _used_below(tree, used)
        not_clades = [g for g, tips in by_group.items()
                      if len(tips) > 1 and not _is_clade(tree, tips, below)]
        if not_clades:
            lines.append(f"  note: {len(not_clades)} of {len(by_group)} groups are not clades "
                         f"of the tree ({_listed(sorted(not_clades))}): the phylogenetic SMA/MA "
                         "group tests then ignore the covariance between groups' residuals "
                         "(OLS tests stay exact)")
        else:
            lines.append(f"  all {len(by_group)} groups are clades of the tree")
    return lines


def _is_clade(tree, tips: set, used_below: list) -> bool:
    """Whether no other used tip lies below the most recent common ancestor of ``tips``."""
    par = tree.parent.tolist()
    common = None
    for t in tips:
        anc = []
        while t > 0:
            anc.append(t)
            t = par[t]
        anc.append(0)
        common = anc if common is None else [a for a in anc if a in common_set]
        common_set = set(common)
    return used_below[common[0]] == len(tips)


def _used_below(tree, used: set) -> list:
    """Number of used tips below every node (one post-order sweep)."""
    count = [1 if i in used else 0 for i in range(tree.n_nodes)]
    par = tree.parent.tolist()
    for i in range(tree.n_nodes - 1, 0, -1):
        count[par[i]] += count[i]
    return count
