"""The words of a run with several predictors: the Answer, the exponent table, the checks.

The Answer follows the one-predictor rule (:mod:`scaling.render.headline`):

* no groups: the pooled exponents with their intervals, then each
  hypothesis (named as in the config) with each term's own test;
* groups whose exponents do not differ (the group x term interactions F
  test): the common within-group exponents with intervals and the
  interactions' p; their verdicts; then whether the elevations differ;
* groups whose exponents differ: no common exponents; each group's
  exponents are in the table below the Answer.

Everything is read from the run's tables (``fits``, ``slope_tests``,
``group_tests``); nothing is recomputed.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from .headline import Headline, _ci, _p_method, _short_verdict, exponent_words
from .wording import calibrated_p_text, plural as plural_of

__all__ = ["several_headline", "several_exponent_table", "several_check_verdict",
           "collinearity_warning", "several_group_sentences", "partial_model"]

_LINE = {"pooled": "pooled", "common": "common within-group", "group": "group"}


def _interval(lo, hi, pct: str) -> str:
    """'95% CI 1.688–2.017'; 'to' where a bound is negative (a dash would read as minus)."""
    if np.isfinite(lo) and np.isfinite(hi) and min(lo, hi) < 0:
        return f"{pct} CI {lo:.3f} to {hi:.3f}"
    return _ci(lo, hi, pct)


def _terms(rows: pd.DataFrame, pct: str) -> str:
    parts = [f"{r.slope:.3f} for {r.term} ({_interval(r.slope_low, r.slope_high, pct)})"
             for r in rows.itertuples(index=False)]
    return parts[0] if len(parts) == 1 else "; ".join(parts[:-1]) + " and " + parts[-1]


def _tested(tests: pd.DataFrame, alpha: float) -> str:
    """'against cylinder: diameter_cm vs 2 not different (p = 0.078), ...' per hypothesis."""
    said = []
    for name, t in tests.groupby("hypothesis", sort=False):
        each = ", ".join(f"{r.term} vs {exponent_words('', float(r.exponent))} "
                         f"{_short_verdict(r.estimate, r.exponent, r.p_value, alpha, _p_method(r))}"
                         for r in t.itertuples(index=False))
        said.append(f"against {name}: {each}")
    return "; ".join(said)


def _group_p(gt: pd.DataFrame, test: str) -> tuple:
    if gt is None or test not in set(gt["test"]):
        return math.nan, ""
    r = gt[gt["test"] == test].iloc[0]
    stat = (f"F = {float(r['statistic']):.2f} on ({float(r['df']):g}, "
            f"{float(r['df_resid']):g}) df, " if np.isfinite(float(r["statistic"])) else "")
    return float(r["p_value"]), stat + calibrated_p_text(float(r["p_value"]), "F")


def _vif(value: float) -> str:
    """A variance inflation factor as read: '1,107', '23.4'."""
    return f"{value:,.0f}" if value >= 100 else f"{value:.3g}"


def _collinear_sentence(diagnostics: pd.DataFrame | None, scope: str = "pooled",
                        group_word: str = "group") -> str:
    """One sentence when a term's VIF passes 10 in the model the Answer reports
    (``scope`` of diagnostics.csv): the Answer's intervals are inflated."""
    if diagnostics is None or not len(diagnostics) or "test" not in diagnostics.columns:
        return ""
    vif = diagnostics[(diagnostics["test"] == "VIF") & (diagnostics["scope"] == scope)]
    vif = vif[vif["flagged"].astype(bool)]
    if not len(vif):
        return ""
    top = float(vif["statistic"].max())
    who, whose = "The predictors are", "these intervals are"
    if scope == "group":   # each group's own fit: name the groups whose predictors are
        groups = list(dict.fromkeys(vif["group"].astype(str)))
        who = f"Within {_listed(groups)} the predictors are"
        whose = "their exponents' intervals are"
    elif scope == "common":
        who = f"Within {plural_of(group_word)} the predictors are"
    return (f"{who} strongly correlated (variance inflation factor up to "
            f"{_vif(top)}), so {whose} about {math.sqrt(top):.2g} times as wide as "
            "with uncorrelated predictors.")


def _listed(names: list) -> str:
    """'a', 'a and b', 'a, b and c'."""
    return names[0] if len(names) == 1 else ", ".join(names[:-1]) + " and " + names[-1]


def several_headline(fits: pd.DataFrame, slope_tests: pd.DataFrame,
                     group_tests: pd.DataFrame | None, *, confidence: float = 0.95,
                     group_word: str = "group",
                     diagnostics: pd.DataFrame | None = None) -> Headline:
    """The Answer of a run with several predictors (see the module notes)."""
    head = _several_headline(fits, slope_tests, group_tests, confidence=confidence,
                             group_word=group_word)
    scope = {"groups": "group", "common": "common"}.get(head.line, "pooled")
    said = _collinear_sentence(diagnostics, scope, group_word)
    if said and len(head.sentences) < 3:
        return Headline(primary=head.primary, line=head.line,
                        sentences=tuple(head.sentences) + (said,),
                        exponent_table=head.exponent_table, group_table=head.group_table)
    return head


def _several_headline(fits, slope_tests, group_tests, *, confidence, group_word) -> Headline:
    alpha = 1 - confidence
    pct = f"{100 * confidence:g}%"
    table = several_exponent_table(fits, slope_tests, alpha)
    tests = slope_tests if slope_tests is not None else pd.DataFrame(
        columns=["scope", "hypothesis"])
    if group_tests is None or not len(group_tests):
        rows = fits[fits["scope"] == "pooled"]
        n = int(rows["n"].iloc[0]) if len(rows) else 0
        out = [f"The OLS exponents are {_terms(rows, pct)} (n = {n})."]
        said = _tested(tests[tests["scope"] == "pooled"], alpha)
        if said:
            out.append(f"Tested {said}.")
        return Headline(primary="ols", line="pooled", sentences=tuple(out),
                        exponent_table=table)
    plural = plural_of(group_word)
    p_slope, slope_words = _group_p(group_tests, "slopes_equal")
    p_elev, elev_words = _group_p(group_tests, "intercepts_equal")
    common = fits[fits["scope"] == "common"]
    if np.isfinite(p_slope) and p_slope <= alpha:
        out = [f"The {plural} do not share their exponents: the {group_word} × term "
               f"interactions differ from zero ({slope_words}), so each {group_word} has its "
               "own; the table below gives each one's exponents and verdicts."]
        pooled = fits[fits["scope"] == "pooled"]
        if len(pooled):
            out.append("The pooled exponents (" + ", ".join(
                f"{r.term} {r.slope:.3f}" for r in pooled.itertuples(index=False))
                + f") only average these differing {plural}.")
        group_table = table[table["line"] == "group"].drop(columns=["line"])
        return Headline(primary="ols", line="groups", sentences=tuple(out),
                        exponent_table=table,
                        group_table=group_table.rename(columns={"group": group_word}))
    n_groups = common["note"].iloc[0].split(" groups")[0].rsplit(" ", 1)[-1] if len(common) else ""
    n = int(common["n"].iloc[0]) if len(common) else 0
    how = (f"the {plural}' exponents do not differ, {slope_words}" if np.isfinite(p_slope)
           else f"the {plural}' exponents were not compared")
    out = [f"Within {plural}, the common OLS exponents are {_terms(common, pct)} "
           f"({n_groups} {plural}, n = {n}; {how})."]
    said = _tested(tests[tests["scope"] == "common"], alpha)
    if said:
        out.append(f"These within-{group_word} exponents, {said}.")
    if np.isfinite(p_elev):
        word = "differ" if p_elev <= alpha else "do not differ detectably"
        s3 = f"At these exponents the {plural} {word} in elevation ({elev_words})"
        pooled = fits[fits["scope"] == "pooled"].set_index("term")
        off = [f"{r.term} {float(pooled.loc[r.term, 'slope']):.3f}"
               for r in common.itertuples(index=False)
               if p_elev <= alpha and r.term in pooled.index
               and not r.slope_low <= float(pooled.loc[r.term, "slope"]) <= r.slope_high]
        if off:   # pooling groups at different elevations biases the pooled exponents
            s3 += (f"; the pooled fit mixes {plural} and misstates the within-{group_word} "
                   f"exponents ({', '.join(off)})")
        out.append(s3 + ".")
    else:
        out.append(f"Elevations of the {plural} were not compared.")
    return Headline(primary="ols", line="common", sentences=tuple(out[:3]),
                    exponent_table=table)


def several_exponent_table(fits: pd.DataFrame, slope_tests: pd.DataFrame | None,
                           alpha: float) -> pd.DataFrame:
    """One row per line and term; one column per hypothesis with that row's own test.

    Columns ``line, group, term, n, exponent, low, high`` and ``vs <name>``
    (the config's hypothesis name) holding the verdict and p of the test of
    that term against the hypothesis's value for it.
    """
    if fits is None or not len(fits):
        return pd.DataFrame()
    tests = slope_tests if slope_tests is not None else pd.DataFrame()
    hyps = list(dict.fromkeys(tests["hypothesis"])) if len(tests) else []
    index = {}
    for r in (tests.to_dict(orient="records") if len(tests) else []):
        index[(r["scope"], str(r["group"] if isinstance(r["group"], str) else ""),
               r["term"], r["hypothesis"])] = r
    order = {"common": 0, "pooled": 1, "group": 2}
    rows = []
    keep = fits.assign(_o=fits["scope"].map(order).fillna(9)).sort_values("_o", kind="stable")
    for r in keep.to_dict(orient="records"):
        group = r["group"] if isinstance(r["group"], str) else ""
        rec = {"line": r["scope"], "group": group, "term": r["term"], "n": r["n"],
               "exponent": r["slope"], "low": r["slope_low"], "high": r["slope_high"]}
        for h in hyps:
            t = index.get((r["scope"], group, r["term"], h))
            rec[f"vs {h}"] = ("" if t is None else
                              f"{exponent_words('', float(t['exponent']))}: "
                              + _short_verdict(t["estimate"], t["exponent"], t["p_value"],
                                               alpha, _p_method(t)))
        rows.append(rec)
    frame = pd.DataFrame(rows)
    if not frame["group"].astype(str).ne("").any():
        frame = frame.drop(columns=["group"])
    return frame


def several_check_verdict(check, term: str = "") -> str:
    """Plain words for one check of a fit with several predictors."""
    what = f" in {term}" if term else ""
    if check.check == "normality":
        return ("residuals depart from normal" if check.flagged
                else "no departure from normal residuals detected")
    if check.check == "constant_variance":
        if not check.flagged:
            return "no change of scatter with the predictors detected"
        return ("scatter grows with the fitted value" if check.direction > 0
                else "scatter shrinks with the fitted value")
    if check.check == "curvature":
        if not check.flagged:
            return f"no curvature{what} detected"
        bend = "steepens" if check.direction > 0 else "flattens"
        return f"curved{what}: the exponent {bend} as {term} grows"
    if check.check == "influence":
        if not check.flagged:
            return "no row above Cook's distance 4/n"
        return (f"{_rows(check.rows)} above Cook's distance 4/n "
                f"(largest {check.statistic:.3g})")
    if check.check == "leverage":
        if not check.flagged:
            return "no row beyond twice the mean leverage"
        return (f"{_rows(check.rows)}: an unusual combination of predictors "
                f"(leverage above {check.estimate:.3g})")
    if check.check == "collinearity" and check.test == "VIF":
        return (f"{term}'s interval is {check.estimate:.2g} times as wide as with "
                "uncorrelated predictors" + (" (VIF above 10)" if check.flagged else ""))
    if check.check == "collinearity":
        return ("the design is close to singular" if check.flagged
                else "the design is well conditioned")
    return check.finding


def _rows(rows, most: int = 5) -> str:
    """'rows 12, 40 and 7' (at most ``most`` named, then 'and N more')."""
    named = [str(int(r)) for r in rows[:most]]
    if len(rows) > most:
        return f"rows {', '.join(named)} and {len(rows) - most} more"
    if len(named) == 1:
        return f"row {named[0]}"
    return f"rows {', '.join(named[:-1])} and {named[-1]}"


def collinearity_warning(flagged, names, *, model: str = "pooled",
                         group_word: str = "group") -> str:
    """The summary's warning when a VIF passes 10, saying what it does to the intervals.

    ``flagged`` maps a group ('' for the pooled or common-exponents model) to
    its (term, VIF) pairs above 10 (a sequence of pairs is read as the
    pooled fit's); ``model`` is the one the Answer reports (``pooled``,
    ``common`` or ``group``).
    """
    if not isinstance(flagged, dict):
        flagged = {"": tuple(flagged)} if flagged else {}
    flagged = {g: t for g, t in flagged.items() if t}
    if not flagged:
        return ""
    widest = max(v for t in flagged.values() for _, v in t)
    if model == "group":
        each = "; ".join(f"{g} " + ", ".join(f"{t} {_vif(v)}" for t, v in terms)
                         for g, terms in flagged.items())
    else:
        each = ", ".join(f"{t} {_vif(v)}" for t, v in next(iter(flagged.values())))
    within = f" within {plural_of(group_word)}" if model in ("common", "group") else ""
    return (f"The predictors are strongly correlated on the log scale{within} (variance "
            f"inflation factor {each}; above 10): each exponent's interval is about "
            f"{math.sqrt(widest):.2g} times as wide as with uncorrelated predictors, and the "
            f"data cannot tell the exponents of {', '.join(names)} apart well (a combination "
            "of them is better determined than either; see diagnostics.csv).")


def several_group_sentences(group_tests: pd.DataFrame, alpha: float, group_word: str) -> list:
    """One sentence per group test of several predictors."""
    plural = plural_of(group_word)
    out = []
    for test, subject in (("slopes_equal", f"the {plural} share the exponents "
                                           f"({group_word} × term interactions)"),
                          ("intercepts_equal", f"the {plural} share one elevation at the "
                                               "common exponents")):
        p, words = _group_p(group_tests, test)
        if not np.isfinite(p):
            continue
        verdict = "rejected" if p <= alpha else "not rejected"
        out.append(f"That {subject}: {verdict} ({words}).")
    return out


def partial_model(result) -> str:
    """The model the partial figures draw: ``"pooled"``, ``"common"`` or ``"group"``
    (the Answer's line; :meth:`MultiGroupComparison.leading`)."""
    comparison = getattr(result, "multi_groups", None)
    pts = result.data.points
    if comparison is None or "group" not in pts.columns or len(pts) != result.multi_fit.n:
        return "pooled"
    return comparison.leading(1 - result.config.model.confidence)
