"""The group stage of a run: group means, lines through the means, group comparisons.

The numbers come from :mod:`scaling.stats.group_means`,
:mod:`scaling.stats.group_comparisons` and :mod:`scaling.stats.common_slope`;
the notes and sentences from :mod:`scaling.render.findings`.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..render.wording import fit_note
from ..stats.fit_rows import fit_row
from ..stats.group_comparisons import compare_group_moments
from ..stats.group_means import (compared_groups_from_moments, fit_group_means_from_moments,
                                 group_means_from_moments)
from ..stats.lines import MIN_N, base_label
from ..stats.moments import group_extremes, group_moments, moments, sort_by_group
from ..stats.robust import deming_from_moments
from ..stats.schema import (GROUP_COMPARISON_METHODS, GROUP_TEST_COLUMNS, PAIRWISE_COLUMNS,
                     is_moment_method)
from .fits import row_method_fit, value_range, with_note, with_ranges
from ..render.findings import (common_slope_note, comparison_summary, excluded_text,
                               means_left_out_text)
from ..render.wording import means_left_out_note, pairwise_skipped_note, uncompared_message

__all__ = ["GroupStage", "group_stage", "groups_from_moments", "common_slope_rows"]


@dataclass(frozen=True, slots=True, kw_only=True)
class GroupStage:
    """Group means, lines through the means, comparisons and the common slope.

    Attributes
    ----------
    rows : tuple of dict
        fits.csv rows: the lines through the group means, then the common
        within-group slope of each compared method (scope ``common``).
    line_fits : dict
        ``("group_means", "", method) -> LineFit`` for the estimable ones.
    point_sets : dict
        ``("group_means", "")`` -> the group means, when they were fitted.
    tables : dict
        ``group_means``, ``group_tests``, ``pairwise_tests``.
    test_rows : tuple of dict
        slope_tests.csv rows of the common slopes.
    messages, notes : tuple of str
    """

    rows: tuple
    line_fits: dict
    point_sets: dict
    tables: dict
    test_rows: tuple = ()
    messages: tuple = ()
    notes: tuple = ()


def group_stage(cfg, state) -> GroupStage:
    """Group means, lines through the means, and comparisons of groups.

    The rows in memory are reduced to per-group moments (one vectorised pass)
    and handed to :func:`groups_from_moments`, the code the large-data road
    calls with the moments it reads chunk by chunk.
    """
    pts = state.data.points
    group = pts["group"]
    if not isinstance(group.dtype, pd.StringDtype):
        group = pd.Series(group.to_numpy(dtype=object))
    # A text column is factorised as it is: a Series of its objects would infer
    # the same dtype back, at the cost of two conversions.
    codes, uniques = pd.factorize(group, sort=True)
    labels = tuple(uniques.tolist())
    g = len(labels)
    X, Y = pts["log_x"].to_numpy(), pts["log_y"].to_numpy()
    m = group_moments(X, Y, codes, n_groups=g)
    lo, hi = group_extremes(X, *sort_by_group(codes, n_groups=g))
    n_rows = np.bincount(codes, weights=pts["n_rows"].to_numpy(dtype=float), minlength=g)
    return groups_from_moments(cfg, m, labels, base=state.base, n_rows=n_rows,
                               log_x_range=(lo, hi))


def groups_from_moments(cfg, m, labels, *, base, n_rows=None, log_x_range=None,
                        methods=None) -> GroupStage:
    """The group stage from per-group moments: the one code of every road.

    Parameters
    ----------
    cfg : Config
    m : Moments
        Arrays of shape (G,) on the log scale of ``base``: per group, the
        points (rows, or units after ``data.average_within``) and their sums.
    labels : tuple
        The G group names, sorted, in the order of ``m``.
    base : float or None
    n_rows : ndarray, optional
        Input rows behind each group (the ``n_rows`` column of group_means.csv).
    log_x_range : (ndarray, ndarray), optional
        Smallest and largest log x per group (drawn by the comparison figure).
    methods : sequence of str, optional
        The line methods to use (default ``cfg.model.methods``).

    Returns
    -------
    GroupStage
        The same tables, rows and sentences for the same moments, whichever
        road produced them; the comparisons are calibrated with
        ``resampling.seed``.
    """
    methods = list(cfg.model.methods if methods is None else methods)
    rows, fits, g_tables, messages, notes, commons = [], {}, {}, [], [], {}
    if n_rows is None:
        n_rows = m.n
    means = group_means_from_moments(m, labels, n_rows=n_rows)
    frame = means.to_frame()
    g_tables["group_means"] = frame
    means_points = None
    if cfg.groups.fit_group_means:
        # The line through the means uses the groups the comparisons use (OLS rule for
        # the methods compare_groups does not cover; fit_group_means applies each
        # method's own rule and names the groups it leaves out in its note).
        keep, left_out = compared_groups_from_moments(m, labels, method="ols", min_n=MIN_N)
        # a set lookup per name: Series.isin on a text column costs ~0.1 s per 1e4 groups
        kept = set(keep)
        inside = np.fromiter((g in kept for g in frame["group"].tolist()), dtype=bool,
                             count=len(frame))
        frame = frame[inside].reset_index(drop=True)
        left_note = means_left_out_text(left_out)
        if left_out:
            notes.append(means_left_out_note(excluded_text(left_out), len(left_out)))
        mx, my = frame["mean_log_x"].to_numpy(), frame["mean_log_y"].to_numpy()
        # Each point is a group: its name is its label (unit) wherever points are named.
        means_points = pd.DataFrame({"group": frame["group"], "unit": frame["group"],
                                     "log_x": mx, "log_y": my,
                                     "x": _natural(mx, base), "y": _natural(my, base)})
        ranges = ((value_range(means_points["x"].to_numpy()),
                   value_range(means_points["y"].to_numpy()))
                  if len(means_points) else ((np.nan, np.nan), (np.nan, np.nan)))
        for method in methods:
            if not is_moment_method(method):
                row, fit = row_method_fit("group_means", "", method, means_points, cfg, base)
                if fit is not None and left_note:
                    fit = with_note(fit, left_note)
                    row["note"] = left_note
                rows.append(row)
                if fit is not None:
                    fits[("group_means", "", method)] = fit
                continue
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                if method == "deming":
                    fit = deming_from_moments(moments(mx, my), cfg.model.deming_lambda,
                                              confidence=cfg.model.confidence, log_base=base)
                    if left_note and fit.estimable:
                        fit = with_note(fit, f"{fit.note}; {left_note}" if fit.note
                                         else left_note)
                else:
                    fit = fit_group_means_from_moments(
                        m, labels, method=method, confidence=cfg.model.confidence,
                        log_base=base, weighted=cfg.groups.weight_means)
                    # the groups this method's own rule leaves out
                    own_note = means_left_out_text(
                        compared_groups_from_moments(m, labels, method=method)[1])
                    if own_note:
                        fit = with_note(fit, f"{fit.note}; {own_note}" if fit.note
                                        else own_note)
            fit = with_ranges(fit, ranges)
            if fit.note and len(frame) < MIN_N:
                fit = with_note(fit, f"{len(frame)} groups < {MIN_N}: no line through "
                                      "the group means"
                                      + (f"; {left_note}" if left_note else ""))
            rows.append(fit_row(fit, scope="group_means", note=fit_note(fit), x_range=ranges[0],
                                y_range=ranges[1]))
            if fit.estimable:
                fits[("group_means", "", method)] = fit
    if cfg.groups.compare:
        test_frames, pair_frames = [], []
        uncompared = [m_ for m_ in methods if m_ not in GROUP_COMPARISON_METHODS]
        for method in methods:
            if method not in GROUP_COMPARISON_METHODS:
                continue
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                comp = compare_group_moments(m, labels, method=method,
                                             confidence=cfg.model.confidence, log_base=base,
                                             pairwise_max=cfg.groups.pairwise_max,
                                             calibration=cfg.groups.calibration,
                                             seed=cfg.resampling.seed,
                                             group_column="group", log_x_range=log_x_range)
            messages.append(comparison_summary(comp, list_pairs=False,
                                               group_word=str(cfg.data.group),
                                               max_key="groups.pairwise_max"))
            if comp.pairwise_skipped:
                notes.append(pairwise_skipped_note(method, len(comp.groups), comp.pairwise_max))
            if comp.compared:
                test_frames.append(comp.to_frame())
                pair_frames.append(comp.pairwise_frame())
                commons[method] = comp.common
        if uncompared:
            messages.append(uncompared_message(uncompared))
        g_tables["group_tests"] = (pd.concat(test_frames, ignore_index=True) if test_frames
                                   else pd.DataFrame(columns=GROUP_TEST_COLUMNS))
        pairs = [f for f in pair_frames if len(f)]
        g_tables["pairwise_tests"] = (pd.concat(pairs, ignore_index=True) if pairs
                                      else pd.DataFrame(columns=PAIRWISE_COLUMNS))
    # scope "common": the common within-group slope of each compared method
    common_rows, test_rows = common_slope_rows(commons, cfg.exponents, log_base=base_label(base))
    point_sets = {("group_means", ""): means_points} if means_points is not None else {}
    return GroupStage(rows=tuple(rows + common_rows), line_fits=fits, point_sets=point_sets,
                      tables=g_tables, test_rows=tuple(test_rows), messages=tuple(messages),
                      notes=tuple(notes))


def _natural(logs: np.ndarray, base) -> np.ndarray:
    return logs if base is None else np.power(base, logs)


def common_slope_rows(commons: dict, exponents: dict, *, log_base: str) -> tuple[list, list]:
    """Rows of ``fits.csv`` and ``slope_tests.csv`` (scope ``common``) for common slopes.

    Parameters
    ----------
    commons : dict
        method -> :class:`~scaling.stats.common_slope.CommonSlope` (from
        :attr:`GroupComparison.common`).
    exponents : dict
        Hypothesis name -> exponent.
    log_base : str
        The ``log_base`` label written in ``fits.csv``.

    Returns
    -------
    fit_rows, test_rows : list of dict
        ``n`` is the total number of points; the intercept columns are left
        out (each group has its own elevation); ``note`` names the groups
        (:func:`scaling.render.findings.common_slope_note`).
    """
    fit_rows, test_rows = [], []
    for method, c in commons.items():
        if c is None:
            continue
        if c.method == "ols":
            how = "t"
        elif c.boot_profile is not None:
            how = f"profile_likelihood_bootstrap({c.boot_profile.size})"
        else:
            how = "profile_likelihood"
        fit_rows.append(fit_row(
            scope="common", method=method, n=c.n, slope=c.slope, slope_low=c.slope_ci.low,
            slope_high=c.slope_ci.high, log_base=log_base, confidence=c.confidence,
            slope_se=c.slope_se, note=common_slope_note(c), interval_method=how))
        for name, b0 in exponents.items():
            t = c.test_slope(b0, hypothesis=name)
            test_rows.append({"scope": "common", "group": "", "method": method,
                              "hypothesis": name, "exponent": t.exponent,
                              "estimate": t.estimate, "statistic": t.statistic,
                              "statistic_type": t.statistic_type, "df": t.df,
                              "p_value": t.p_value, "p_method": t.p_method})
    return fit_rows, test_rows
