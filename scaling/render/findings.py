"""Words for the findings of the numeric core: groups, residual checks, points to check.

``scaling.stats`` returns findings as data (a code and the numbers in the
fields of a frozen dataclass); these functions turn them into the sentences
that tables, the run summary and notebooks show.  The sentence templates of
single checks stay in :mod:`scaling.render.wording`.
"""

from __future__ import annotations

import numpy as np

from ..stats.schema import EXACT_LINE_NOTE, EXACT_NOTE, ROW_METHOD_NAMES, method_label
from .headline import influence_sentence
from .wording import (possessive, curvature_ok, diag_method, error_structure_words,
                      estimate_outside_reason, format_p, group_residuals_reason,
                      influence_reason, p_text, smearing_reason, calibrated_p_text)

__all__ = ["point_check_reason", "spread_summary", "exclusion_reason", "excluded_text",
           "means_left_out_text", "comparison_note", "comparison_summary",
           "common_slope_note", "check_verdict", "diagnostics_summary",
           "error_structure_verdict", "diagnostics_messages"]


def point_check_reason(check) -> str:
    """The plain-language reason of one :class:`~scaling.stats.influence.PointCheck`.

    Parameters
    ----------
    check : PointCheck
        Its ``kind`` says which sentence; its numeric fields fill it.

    Returns
    -------
    str
    """
    if check.kind == "influence":
        return influence_reason(check.row, check.label, cook=check.value, slope=check.slope,
                                slope_without=check.slope_without, se=check.slope_se,
                                method=check.method)
    if check.kind == "moves_answer":
        return influence_sentence(check.row, check.context, slope=check.slope,
                                  slope_without=check.slope_without, changes=check.changes,
                                  exponent_of=check.exponent_of,
                                  widens_by=(check.slope_se / check.slope_se_without - 1
                                             if check.narrowed else None))
    if check.kind == "smearing":
        return smearing_reason(check.smearing_factor, check.parametric_factor, check.limit)
    if check.kind == "outside_interval":
        return estimate_outside_reason(check.label, check.value, check.low, check.high)
    if check.kind == "group_residuals":
        return group_residuals_reason(check.statistic, check.df1, check.df2, check.value)
    raise ValueError(f"kind must be one of influence, moves_answer, smearing, "
                     f"outside_interval, group_residuals, not {check.kind!r}")


#: How the mean exponent's interval was made, and on which scale the exponents were averaged.
_SPREAD_INTERVAL_WORDS = {"z": "z", "knapp_hartung": "Knapp-Hartung",
                          "knapp_hartung_plain": "Knapp-Hartung, untruncated"}
_SPREAD_SCALE_WORDS = {"log": ", averaged as log|b|", "angle": ", averaged as angles atan(b)"}


def spread_summary(spread) -> str:
    """Lines describing an :class:`~scaling.stats.spread.ExponentSpread`.

    The mean exponent with its interval (and the scale the exponents were
    averaged on), the between-group SD tau with its Q-profile interval,
    Cochran's Q and I^2, and one line per hypothesised exponent.
    """
    pct = f"{100 * spread.confidence:g}%"
    what = f"{spread.method.upper()} exponents" if spread.method else "exponents"
    how = _SPREAD_INTERVAL_WORDS.get(spread.mean_interval, spread.mean_interval)
    lines = [
        f"{what} of {spread.k} groups, random effects ({spread.tau2_method.upper()})"
        f"{_SPREAD_SCALE_WORDS.get(spread.scale, '')}:",
        f"  mean exponent {spread.mean:.4g} ({pct} CI {spread.mean_ci.low:.4g} to "
        f"{spread.mean_ci.high:.4g}, {how})",
        f"  between-group SD tau {spread.tau:.3g} ({pct} CI {spread.tau_ci.low:.3g} to "
        f"{spread.tau_ci.high:.3g}, Q-profile)",
        f"  heterogeneity Q = {spread.q:.4g} on {spread.q_df:g} df "
        f"(p {format_p(spread.q_p_value)}), I^2 = {100 * spread.i2:.1f}%",
    ]
    for t in spread.tests:
        lines.append(f"  mean vs {t['hypothesis']} ({t['exponent']:g}): "
                     f"statistic {t['statistic']:.3g}, p {format_p(t['p_value'])}")
    return "\n".join(lines)


# --------------------------------------------------------------------------
# groups: which are left out, comparisons, the common slope

#: Why a group is left out of comparisons, for the reasons without numbers.
_EXCLUSION_WORDS = {
    "x_constant": "x does not vary (log x constant up to rounding): no line to compare",
    "y_constant": "y does not vary (log y constant up to rounding): no line to compare",
    "exact_line": EXACT_LINE_NOTE,
}


def exclusion_reason(exclusion) -> str:
    """Why one group is left out, from a :class:`~scaling.stats.group_means.Exclusion`.

    Examples
    --------
    >>> from scaling.stats.group_means import Exclusion
    >>> exclusion_reason(Exclusion(group="b", reason="too_few", n=2, min_n=3))
    'n = 2 < 3'
    """
    if exclusion.reason == "too_few":
        return f"n = {exclusion.n} < {exclusion.min_n}"
    if exclusion.reason == "not_estimable":
        return str(exclusion.note)
    try:
        return _EXCLUSION_WORDS[exclusion.reason]
    except KeyError:
        raise ValueError(f"reason must be one of too_few, not_estimable, "
                         f"{', '.join(_EXCLUSION_WORDS)}, not {exclusion.reason!r}") from None


def excluded_text(excluded, limit: int = 12) -> str:
    """'a (n = 1 < 3), b (...)' for groups left out, at most ``limit`` named.

    Parameters
    ----------
    excluded : sequence of Exclusion
    limit : int
    """
    shown = ", ".join(f"{e.group} ({exclusion_reason(e)})" for e in excluded[:limit])
    more = f" and {len(excluded) - limit} more" if len(excluded) > limit else ""
    return shown + more


def means_left_out_text(excluded) -> str:
    """The ``note`` of a line through the group means that leaves groups out ("" if none)."""
    if not excluded:
        return ""
    return f"groups left out of the line through the means: {excluded_text(excluded)}"


def comparison_note(comparison, *, max_key: str = "pairwise_max") -> str:
    """What a :class:`~scaling.stats.group_comparisons.GroupComparison` did not do, in words.

    Each code of ``comparison.notes`` gives one clause; clauses are joined by
    "; " ("" when there is none).  ``max_key`` names the pairwise limit as
    the reader set it (the config says ``groups.pairwise_max``).
    """
    n_used = len(comparison.groups)
    clauses = []
    for code in comparison.notes:
        if code == "too_few_groups":
            clauses.append(f"fewer than two groups have at least {comparison.min_n} usable "
                           f"points ({n_used} of {n_used + len(comparison.excluded)}), so "
                           "there is nothing to compare")
        elif code in ("exact_all", "exact_all_slopes_differ"):
            clauses.append(f"{EXACT_NOTE} in every group: the tests need residual scatter "
                           "and are not made"
                           + ("; the groups' exact slopes differ, so there is no common slope"
                              if code == "exact_all_slopes_differ" else ""))
        elif code == "exact_ols":
            clauses.append(f"{EXACT_NOTE} in every group: the slope and elevation tests "
                           "need residual scatter and are not made (NaN)")
        elif code == "pairwise_skipped":
            clauses.append(f"pairwise comparisons skipped: {n_used} groups exceed "
                           f"{max_key} = {comparison.pairwise_max}")
        else:
            raise ValueError(f"unknown comparison note code {code!r}")
    return "; ".join(clauses)


def comparison_summary(comparison, *, list_pairs: bool = True, group_word: str | None = None,
                       max_key: str = "pairwise_max") -> str:
    """Plain-language sentences on slopes, elevations and axis shifts of a comparison.

    Parameters
    ----------
    comparison : GroupComparison
        From :func:`scaling.compare_groups`.
    list_pairs : bool
        False gives the number of differing pairs instead of naming them
        (the pairs are then read from a matrix).
    group_word : str, optional
        What the groups are called (default: the group column's name).
    max_key : str
        How the pairwise limit is named ("pairwise_max", or the config key).

    Returns
    -------
    str

    Examples
    --------
    >>> import pandas as pd, scaling
    >>> d = pd.DataFrame({"m": [1, 2, 4, 8, 1, 2, 4, 8], "r": [1, 2.1, 3.9, 8.2, 2, 4.1, 8, 15.8],
    ...                   "g": list("aaaabbbb")})
    >>> comparison_summary(scaling.compare_groups(d, "m", "r", "g", method="ols"))[:40]
    'Slopes do not differ among the 2 g group'
    """
    c = comparison
    label = c.method.upper()
    word = c.group_column if group_word is None else group_word
    what = f"{len(c.groups)} {word} groups"
    note = comparison_note(c, max_key=max_key)
    if not c.compared:
        return f"No {label} comparison of {word} groups: {note}"
    alpha = 1 - c.confidence
    pct = f"{100 * c.confidence:g}%"

    def numbers(t, name: str) -> str:
        df = f"{t.df:g}" if not np.isfinite(t.df_resid) else f"{t.df:g}, {t.df_resid:g}"
        boot = ", parametric bootstrap" if t.p_method.startswith("parametric") else ""
        return (f"{name} = {t.statistic:.3g}, df = {df}, "
                f"{calibrated_p_text(t.p_value, t.p_method)}{boot}")

    def differing(test: str) -> str:
        pairs = [f"{p.group_a} vs {p.group_b}" for p in c.pairwise
                 if p.test == test and p.p_adjusted <= alpha]
        if pairs and not list_pairs:
            total = sum(p.test == test for p in c.pairwise)
            return f" {len(pairs)} of {total} pairs differ (Holm-adjusted)."
        return f" Pairs that differ (Holm-adjusted): {', '.join(pairs)}." if pairs else ""

    lo, hi = c.common_slope_ci.low, c.common_slope_ci.high
    ci = (f"({pct} CI {lo:.3g}\u2013{hi:.3g})" if np.isfinite(lo) and np.isfinite(hi)
          else f"({pct} CI unbounded)")
    slopes = c.test("slopes_equal")
    if not any(np.isfinite(t.p_value) for t in c.tests):
        slope = (f"common slope {c.common_slope:.3g} {ci}"
                 if np.isfinite(lo) and np.isfinite(hi) else "no common slope")
        return f"No {label} tests among the {what}: {note}; {slope}."
    stat = "F" if c.method == "ols" else "LR"
    out = []
    if not np.isfinite(slopes.p_value):
        out.append(f"Slopes of the {what} not compared ({label}): {note}; "
                   f"common slope {c.common_slope:.3g} {ci}.")
    elif slopes.p_value <= alpha:
        out.append(f"Slopes differ among the {what} ({label}, {numbers(slopes, stat)}); "
                   f"a common slope of {c.common_slope:.3g} {ci} only summarises "
                   f"differing slopes.{differing('slopes_equal')}")
    else:
        out.append(f"Slopes do not differ among the {what} ({label}, "
                   f"{numbers(slopes, stat)}); common slope {c.common_slope:.3g} {ci}.")
    caveat = " (read with care: slopes differ)" if slopes.p_value <= alpha else ""
    inter = c.test("intercepts_equal")
    stat = "F" if c.method == "ols" else "Wald"
    verb = "differ" if inter.p_value <= alpha else "do not differ"
    if np.isfinite(inter.p_value):
        out.append(f"Given a common slope, elevations (intercepts) {verb}{caveat} "
                   f"({numbers(inter, stat)}).{differing('intercepts_equal')}")
    else:
        out.append("Elevations not compared (no residual scatter).")
    axis = c.test("shift_along_axis")
    if c.method == "ols":
        verb = "differs" if axis.p_value <= alpha else "does not differ"
        out.append(f"Mean log x {verb} among groups (one-way ANOVA, "
                   f"{numbers(axis, 'F')}).{differing('shift_along_axis')}")
    else:
        verb = "are" if axis.p_value <= alpha else "are not detectably"
        out.append(f"Groups {verb} shifted along the common axis{caveat} "
                   f"({numbers(axis, 'Wald')}).{differing('shift_along_axis')}")
    if c.pairwise_skipped:
        out.append("Pairwise comparisons skipped: "
                   f"{len(c.groups)} groups exceed {max_key} = {c.pairwise_max}.")
    if c.excluded:
        out.append(f"Left out: {excluded_text(c.excluded)}.")
    return " ".join(out)


def common_slope_note(common) -> str:
    """The ``fits.csv`` note of a common within-group slope (scope ``common``)."""
    names = ", ".join(map(str, common.groups))
    return (f"common within-group slope of {common.n_groups} groups ({names}); "
            "each group keeps its own elevation")


# --------------------------------------------------------------------------
# residual checks and error structure


def check_verdict(check, *, groups: dict | None = None) -> str:
    """Plain-language reading of one :class:`~scaling.stats.residual_checks.Check`.

    ``groups`` (point number -> group name) names the points of a line through
    group means by their group rather than by a row number.
    """
    if check.finding == "exact_fit":
        return f"{EXACT_NOTE}; residual checks do not apply"
    p = p_text(check.p_value)
    if check.check == "normality":
        if check.flagged:
            return (f"residuals depart from a normal distribution ({p}); "
                    "intervals for predictions may be off")
        return f"no detectable departure from normal residuals ({p})"
    if check.check == "constant_variance":
        if check.flagged:
            trend = "grows" if check.direction > 0 else "shrinks"
            return (f"scatter around the line {trend} with size ({p}); "
                    "consider weighting or a different error model")
        return f"no detectable change in scatter with size ({p})"
    if check.check == "curvature":
        if check.flagged:
            direction = "rises" if check.direction > 0 else "falls"
            return (f"residuals show curvature: the exponent {direction} with size "
                    f"(from {check.exponent_low:.3g} to {check.exponent_high:.3g} across "
                    f"the data; {p})")
        return f"no detectable curvature on log-log scales ({p})"
    if check.check == "influence":
        if check.flagged:
            rows = check.rows
            more = f" and {len(rows) - 5} more" if len(rows) > 5 else ""
            if groups is not None:
                shown = ", ".join(f"group {groups.get(r, r)}" for r in rows[:5])
                return (f"{len(rows)} group mean(s) pull the line strongly (Cook's distance "
                        f"> 4/n): {shown}{more}; check them and refit without them to see "
                        "the effect")
            shown = ", ".join(str(r) for r in rows[:5])
            return (f"{len(rows)} row(s) pull the line strongly (Cook's distance > 4/n): "
                    f"row {shown}{more}; check them and refit without them to see the effect")
        return "no row has an outsized pull on the line (all Cook's distances <= 4/n)"
    raise ValueError(f"check must be one of normality, constant_variance, curvature, "
                     f"influence, not {check.check!r}")


def diagnostics_summary(diagnostics) -> str:
    """The verdicts of a :class:`~scaling.stats.residual_checks.Diagnostics`, one per line."""
    return "\n".join(f"{c.check}: {check_verdict(c)}" for c in diagnostics.checks)


def error_structure_verdict(es) -> str:
    """Which error model an :class:`~scaling.stats.error_structure.ErrorStructure` favours."""
    add, mult, delta = es.additive, es.multiplicative, es.delta_aicc
    if not add.converged:
        return ("only the multiplicative (log-scale) model could be fitted; "
                f"its exponent is {mult.b:.3g}")
    if es.preferred == "neither":
        return (f"the data do not clearly favour either error model (AICc difference "
                f"{abs(delta):.2g} < 2); exponents {mult.b:.3g} (multiplicative) and "
                f"{add.b:.3g} (additive) -- consider reporting both")
    if es.preferred == "multiplicative":
        return (f"scatter grows with size (multiplicative, lognormal error; AICc lower by "
                f"{delta:.3g}): fitting on log scales is appropriate; exponent {mult.b:.3g}")
    return (f"scatter is constant on the arithmetic scale (additive normal error; AICc "
            f"lower by {-delta:.3g}): the nonlinear fit is better supported; exponent "
            f"{add.b:.3g} (the log-scale fit gives {mult.b:.3g})")


def diagnostics_messages(results: dict, es_results: dict, point_sets: dict, cfg, *,
                         answer: tuple | None = None, points=None) -> list:
    """The plain-language verdicts of the diagnostics stage, for the answer's model.

    Parameters
    ----------
    results : dict
        ``(scope, group, method) -> Diagnostics`` (scope ``common`` for the
        parallel-lines model of the common slope).
    es_results : dict
        ``(scope, group) -> ErrorStructure``.
    point_sets : dict
        ``(scope, group) -> points``.
    cfg : Config
    answer : (line, method), optional
        The answer's model (:func:`scaling.render.headline.answer_line`):
        ``"pooled"``, ``"common"`` or ``"groups"``.  Default: the pooled line
        of the method whose residuals the pooled checks read.
    points : DataFrame, optional
        ``points_to_check``: rows of kind ``moves_answer`` (or strong
        ``influence`` rows of the answer's model) replace the reassurance
        that flags at 4/n are common in clean data.
    """
    dc = cfg.diagnostics
    methods = list(cfg.model.methods)
    line, method = answer if answer is not None else ("pooled", diag_method(methods))
    g_word = str(cfg.data.group) if cfg.data.group else "group"
    group_word = f"{cfg.data.group} groups" if cfg.data.group else "groups"
    pooled = results.get(("pooled", "", method)) or results.get(
        ("pooled", "", diag_method(methods))) or next(
        (d for (s, _, _), d in results.items() if s == "pooled"), None)
    common = results.get(("common", "", method)) if line == "common" else None
    groups = {g: d for (s, g, m), d in results.items() if s == "group" and m == method}
    if line == "common" and common is None:
        line = "pooled"
    if line == "groups" and not groups:
        line = "pooled"
    if line == "pooled" and pooled is None:
        return ["Diagnostics: too few points (fewer than 4) to check the pooled line."]
    label = method_label(method if line != "pooled" else pooled.method)
    strong = _strong_words(points, line)
    messages = []
    if line == "common":
        what = f"the common within-{g_word} {label} model"
        mixes = "at different elevations"
        how = f"one slope, each {g_word} at its own elevation"
        messages.append(_curvature_words(
            common, f" within {plural_word(g_word)} (common {label} slope, each {g_word} at its "
                    "own elevation)"))
        messages += _group_curvature(results, method, group_word, dc.alpha)
        messages.append(f"Residuals of {what} ({how}): "
                        f"{check_verdict(common.check('normality'))}; "
                        f"{check_verdict(common.check('constant_variance'))}.")
        messages.append(_influence_words(common, point_sets, what, strong, methods))
    elif line == "groups":
        what = f"each {possessive(g_word)} own {label} line"
        mixes = "whose lines differ"
        messages += _groups_words(groups, what, group_word, dc.alpha)
        rows = sorted({r for d in groups.values() for r in d.influential_rows})
        if rows:
            messages.append(f"Influence: {len(rows)} point(s) pull {what} more than usual "
                            f"(Cook's distance > 4/n): row {', '.join(map(str, rows[:4]))}"
                            + (f" and {len(rows) - 4} more" if len(rows) > 4 else "")
                            + ". " + (strong or _clean_data_words(methods)))
        else:
            messages.append(f"Influence: no point pulls {what} unduly "
                            "(all Cook's distances ≤ 4/n).")
    else:
        messages.append(_curvature_words(pooled, ""))
        messages += _group_curvature(results, pooled.method, group_word, dc.alpha)
        normal, spread = pooled.check("normality"), pooled.check("constant_variance")
        messages.append(f"Residuals of the pooled {label} line: {check_verdict(normal)}; "
                        f"{check_verdict(spread)}.")
        messages.append(_influence_words(pooled, point_sets, "the pooled line", strong,
                                         methods))
    if line != "pooled" and pooled is not None:
        flagged = [f"{_CHECK_NAMES[c.check]} ({p_text(c.p_value)})" for c in pooled.checks
                   if c.flagged and c.check != "influence"]
        if flagged:
            messages.append(f"The pooled {method_label(pooled.method)} line is not the answer "
                            f"and its own checks flag {', '.join(flagged)}: it mixes "
                            f"{plural_word(g_word)} {mixes}; read its "
                            "predictions with this in mind (diagnostics.csv, scope pooled).")
    es = es_results.get(("pooled", ""))
    if es is not None:
        messages.append("Error structure: " + error_structure_words(es))
        g_pref = [(g, e.preferred) for (s, g), e in es_results.items() if s == "group"]
        if g_pref:
            same = [g for g, p in g_pref if p == es.preferred]
            other = [f"{g}: {p if p != 'neither' else 'no clear preference'}"
                     for g, p in g_pref if p != es.preferred]
            word = {"neither": "no clear preference"}.get(es.preferred, es.preferred)
            text = f"  Within {group_word}: {word} also in {len(same)} of {len(g_pref)}"
            if other:
                text += f" ({'; '.join(other)})"
            messages.append(text + (" — small groups rarely decide this." if other else "."))
    return messages


_CHECK_NAMES = {"curvature": "curvature", "normality": "non-normal residuals",
                "constant_variance": "scatter changing with size"}


def plural_word(word: str) -> str:
    """'clades' for 'clade', 'species' for 'species' (the group word in sentences)."""
    return word if word.endswith("s") else word + "s"


def _curvature_words(d, where: str) -> str:
    curv = d.check("curvature")
    if not curv.flagged:
        if not where:
            return curvature_ok(check_verdict(curv))
        return (f"Power law{where}: {check_verdict(curv)}, so there is no evidence against "
                "one exponent within the data range.")
    c = d.curvature
    xs = [f"{t:g} at x ≈ {x:.3g}" for t, x, inside in c.crossings if inside]
    at = f"; the local exponent reaches {', '.join(xs)}" if xs else ""
    return (f"Power law{where}: NOT a straight line on log-log scales — {check_verdict(curv)}"
            f"{at}. One exponent summarises these data only roughly; see curvature.csv.")


def _group_curvature(results: dict, method: str, group_word: str, alpha: float) -> list:
    g_curved = [(g, d.check("curvature").p_value) for (s, g, m), d in results.items()
                if s == "group" and m == method and d.check("curvature").flagged]
    n_groups = sum(1 for (s, g, m) in results if s == "group" and m == method)
    if not n_groups:
        return []
    if g_curved:
        listed = ", ".join(f"{g}, {p_text(p)}" for g, p in g_curved)
        return [f"  Within {group_word}: curvature in {len(g_curved)} of {n_groups}: "
                f"{listed} (each tested at α = {alpha:g}; by chance alone about "
                f"{alpha * n_groups:.2g} of {n_groups} would be flagged)."]
    return [f"  Within {group_word}: no detectable curvature in any of the {n_groups}."]


def _groups_words(groups: dict, what: str, group_word: str, alpha: float) -> list:
    """Curvature, then normality and scatter, of each group's own line, counted."""
    n = len(groups)
    chance = f"(each tested at α = {alpha:g}; by chance alone about {alpha * n:.2g} of {n})"
    said = {}
    for name, ok in (("curvature", "no detectable curvature on log-log scales"),
                     ("normality", "no detectable departure from normal residuals"),
                     ("constant_variance", "no detectable change in scatter with size")):
        hit = [(g, d.check(name).p_value) for g, d in groups.items() if d.check(name).flagged]
        if hit:
            listed = ", ".join(f"{g}, {p_text(p)}" for g, p in hit)
            said[name] = (f"{_CHECK_NAMES[name]} in {len(hit)} of {n} {group_word}: "
                          f"{listed} {chance}")
        else:
            said[name] = f"{ok} in any of the {n} {group_word}"
    return [f"Power law, {what}: {said['curvature']}.",
            f"Residuals of {what}: {said['normality']}; {said['constant_variance']}."]


def _clean_data_words(methods) -> str:
    return ("Such flags are common in clean data; check them in influential_rows.csv"
            + ("." if any(m in ROW_METHOD_NAMES for m in methods) else
               ", or add a robust line (sma_robust, theil_sen) to model.methods "
               "to see whether the exponent moves."))


def _strong_words(points, line: str) -> str:
    """What the strong rows of the answer's model say, or "" when there are none."""
    if points is None or not len(points) or "kind" not in points.columns:
        return ""
    mine = points[points["scope"].isin(["pooled"] if line == "pooled"
                                       else ["common", "group"])]
    moving = mine[mine["kind"] == "moves_answer"]
    if len(moving):
        rows = _rows_words(moving["row"].tolist())
        return (f"{rows} move{'s' if len(moving) == 1 else ''} the answer's exponent or a "
                "verdict when left out: the answer names it; check it first "
                "(points_to_check.csv).")
    strong = mine[mine["kind"] == "influence"]
    if len(strong):   # strong, but none moves the answer
        rows = _rows_words(strong["row"].tolist())
        return (f"{rows} {'is' if len(strong) == 1 else 'are'} strong (Cook's distance "
                "> 1, or a change of more than one standard error), though leaving "
                f"{'it' if len(strong) == 1 else 'each'} out does not change the answer; "
                "see points_to_check.csv.")
    return ""


def _rows_words(rows: list) -> str:
    """'Row 7', 'Rows 7, 9', 'Rows 1, 2, 3, 4 and 2 more' (first four named)."""
    named = ", ".join(str(r) for r in rows[:4])
    more = f" and {len(rows) - 4} more" if len(rows) > 4 else ""
    return f"Row {named}" if len(rows) == 1 else f"Rows {named}{more}"


def _influence_words(d, point_sets: dict, what: str, strong: str, methods) -> str:
    infl = d.check("influence")
    if not infl.flagged:
        return (f"Influence: no point pulls {what} unduly (all Cook's distances ≤ 4/n).")
    rows = list(d.influential_rows)
    sel = point_sets.get(("pooled", ""))
    unit = (dict(zip(sel["row"].tolist(), sel["unit"].astype(str)))
            if sel is not None and "unit" in sel else {})
    shown = ", ".join(f"row {r}" + (f" ({unit[r]})" if r in unit else "") for r in rows[:4])
    more = f" and {len(rows) - 4} more" if len(rows) > 4 else ""
    return (f"Influence: {len(rows)} point(s) pull {what} more than usual (Cook's distance "
            f"> 4/n): {shown}{more}. " + (strong or _clean_data_words(methods)))
