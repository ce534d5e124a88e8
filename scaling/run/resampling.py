"""The resampling stage of a run: bootstrap intervals and permutation p-values.

bootstrap.csv from :func:`scaling.stats.resampling.bootstrap_lines` (every moment line
at once, stratified by group); ``p_permutation`` / ``n_perm`` added to
slope_tests.csv from :func:`scaling.stats.resampling.permutation_slope_test`;
:func:`resampling_stage` runs both as the config asks.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..stats.permutation import permutation_slope_test
from ..stats.resampling import bootstrap_lines
from ..stats.schema import BOOTSTRAP_COLUMNS, is_moment_method
from .fits import robust_n_boot
from ..render.wording import (bootstrap_means_note, bootstrap_message, bootstrap_unstratified_note,
                      permutation_message)

__all__ = ["ResamplingStage", "resampling_stage", "bootstrap_table", "permutation_p_values",
           "resampling_manifest"]


@dataclass(frozen=True, slots=True, kw_only=True)
class ResamplingStage:
    """Bootstrap intervals and permutation p-values.

    Attributes
    ----------
    slope_tests : DataFrame
        The run's slope tests, with ``p_permutation`` and ``n_perm`` when
        ``resampling.permutations`` is set (else unchanged).
    tables : dict
        ``bootstrap`` when ``resampling.bootstrap`` is set.
    messages, notes : tuple of str
    manifest : dict
        What was resampled, how and with which seed.
    """

    slope_tests: pd.DataFrame
    tables: dict
    messages: tuple = ()
    notes: tuple = ()
    manifest: dict


def resampling_stage(cfg, state) -> ResamplingStage:
    """Bootstrap every moment line and permute every slope test, as the config asks."""
    methods = cfg.model.methods
    moment_methods = [m for m in methods if is_moment_method(m)]
    row_methods = [m for m in methods if m not in moment_methods]
    tables, messages, notes = {}, [], []
    slope_tests = state.slope_tests
    if cfg.resampling.bootstrap:
        boot, b_messages, b_notes = bootstrap_table(state.line_fits, state.point_sets, cfg,
                                                    moment_methods, quiet=state.quiet)
        tables["bootstrap"] = boot
        messages += b_messages
        notes += b_notes
    if cfg.resampling.permutations:
        slope_tests, p_messages = permutation_p_values(slope_tests, state.line_fits,
                                                       state.point_sets, cfg)
        messages += p_messages
    return ResamplingStage(slope_tests=slope_tests, tables=tables, messages=tuple(messages),
                           notes=tuple(notes),
                           manifest=resampling_manifest(cfg, row_methods, state.data))


def resampling_manifest(cfg, row_methods: list, data) -> dict:
    """The resampling part of the manifest: what was resampled, how and with which seed."""
    rs = cfg.resampling
    return {
        "bootstrap": rs.bootstrap, "interval": rs.interval, "permutations": rs.permutations,
        "seed": rs.seed,
        "stratified_by_group": bool(rs.bootstrap and data.has_groups),
        "robust_methods_n_boot": robust_n_boot(cfg) if row_methods else None,
        "seeding": ("every resampling call (bootstrap_lines, each robust fit, each "
                    "permutation test) is seeded with numpy.random.default_rng(seed)"),
    }


def bootstrap_table(line_fits: dict, point_sets: dict, cfg, moment_methods: list,
                    *, quiet: bool):
    """bootstrap.csv: bootstrap intervals of every moment-method fit."""
    rs = cfg.resampling
    messages, notes = [], []
    frame_rows = []
    if not moment_methods:
        return pd.DataFrame(columns=BOOTSTRAP_COLUMNS), messages, notes
    pts = point_sets[("pooled", "")]
    X, Y = pts["log_x"].to_numpy(), pts["log_y"].to_numpy()
    kwargs = dict(methods=tuple(moment_methods), n_boot=rs.bootstrap,
                  confidence=cfg.model.confidence, lam=cfg.model.deming_lambda,
                  seed=rs.seed, quiet=quiet)
    results = []   # (scope override or None, BootstrapResult, keep scopes)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if len(pts) >= 3:
            groups = pts["group"].astype(str).to_numpy() if "group" in pts else None
            sizes = pd.Series(groups).value_counts() if groups is not None else None
            if groups is None or sizes.min() >= 3:
                results.append((None, bootstrap_lines(X, Y, groups=groups, **kwargs)))
            else:
                results.append((None, bootstrap_lines(X, Y, **kwargs)))
                ok = np.isin(groups, sizes.index[sizes >= 3])
                if ok.any():
                    res = bootstrap_lines(X[ok], Y[ok], groups=groups[ok], **kwargs)
                    results.append(("groups_only", res))
                notes.append(bootstrap_unstratified_note())
        means = point_sets.get(("group_means", ""))
        if means is not None and len(means) >= 3:
            res = bootstrap_lines(means["log_x"].to_numpy(), means["log_y"].to_numpy(),
                                  **kwargs)
            results.append(("group_means", res))
    for override, res in results:
        for item in res.intervals:
            scope, group = item.scope, "" if item.group is None else str(item.group)
            if override == "group_means":
                scope = "group_means"
            elif override == "groups_only" and scope == "pooled":
                continue
            ci = item.bca if rs.interval == "bca" else item.percentile
            frame_rows.append({"scope": scope, "group": group, "method": item.method,
                               "parameter": item.parameter, "estimate": item.estimate,
                               "low": ci.low, "high": ci.high, "interval": rs.interval,
                               "n_boot": res.n_boot, "seed": rs.seed, "boot_se": item.se,
                               "n_valid": item.n_valid, "confidence": res.confidence})
    table = pd.DataFrame(frame_rows, columns=BOOTSTRAP_COLUMNS)
    # keep only lines that were fitted (estimable) and order like the fits
    keep = np.array([(r.scope, r.group, r.method) in line_fits for r in table.itertuples()],
                    dtype=bool)   # a boolean array, also when empty (a [] selects columns)
    table = table[keep].reset_index(drop=True)

    pooled = table[(table["scope"] == "pooled") & (table["parameter"] == "slope")]
    if len(pooled):
        messages.append(bootstrap_message(pooled, line_fits, cfg, stratified="group" in pts))
    if means is not None and len(means) < 10 and (table["scope"] == "group_means").any():
        notes.append(bootstrap_means_note(len(means)))
    return table, messages, notes


def permutation_p_values(slope_tests: pd.DataFrame, line_fits: dict, point_sets: dict, cfg):
    """Add p_permutation and n_perm to the slope tests; one plain sentence."""
    rs = cfg.resampling
    out = slope_tests.copy()
    p_perm = []
    for r in out.itertuples(index=False):
        sel = point_sets.get((r.scope, r.group))
        fit = line_fits.get((r.scope, r.group, r.method))
        if sel is None or fit is None or len(sel) < 3:
            p_perm.append(np.nan)
            continue
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            test = permutation_slope_test(
                sel["log_x"].to_numpy(), sel["log_y"].to_numpy(), float(r.exponent),
                method=r.method, n_perm=rs.permutations,
                lam=cfg.model.deming_lambda, seed=rs.seed)
        p_perm.append(test.p_value)
    out["p_permutation"] = p_perm
    out["n_perm"] = rs.permutations
    return out, permutation_message(out, cfg)
