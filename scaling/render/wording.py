"""Every plain-language sentence of a run: findings, verdicts, notes, the caution.

The run summary (``RunResult.messages`` / ``warnings``), the report and the
CLI read these functions, so one finding is worded in one place.  Functions
take results (fits, tests, tables) and return strings; they estimate
nothing new (a few ask a fit for its slope test, ``LineFit.test_slope``).  The fixed
note labels (``EXACT_NOTE``, ``BOTH_SIGNS_NOTE``) are vocabulary of
:mod:`scaling.stats.schema`; sentences built on them are made here.
"""

from __future__ import annotations

import math
import re
from fractions import Fraction

import numpy as np

from ..stats.schema import CATALOGUE, CLASSIC_METHODS, ROW_METHOD_NAMES, method_label
from ..stats.schema import BOTH_SIGNS_NOTE, EXACT_NOTE

__all__ = [
    "influence_reason", "smearing_reason", "estimate_outside_reason",
    "group_residuals_reason", "range_words", "range_warning", "medians_vs_means",
    "dose_caution", "mechanism_caution", "mechanism_applies", "ancestry_caution", "curvature_ok",
    "units_share_ancestry", "dose_scaling_applies", "number_text", "interval_numbers",
    "unit_text", "count_words", "possessive",
    "symmetric_prediction_note", "predicted_unit", "clean_timestamp", "units_line", "plural", "CAUTION",
    "EXACT_NOTE", "BOTH_SIGNS_NOTE", "verdict_phrase", "describe_test", "exponent_label",
    "p_text", "format_p", "calibrated_p_text", "p_floor", "at_floor", "slope_interval_text", "scope_words", "read_message", "dropped_note",
    "pooled_fit_messages", "uncompared_message", "pairwise_skipped_note",
    "means_left_out_note", "extrapolation_note", "inverse_extrapolation_note",
    "unbounded_inverse_note", "diag_method",
    "error_structure_words", "line_method_messages", "bootstrap_message",
    "bootstrap_means_note", "bootstrap_unstratified_note", "permutation_message"]

def exponent_label(value: float) -> str:
    """A hypothesised exponent as a small fraction where it is one (0.75 -> 3/4).

    Examples
    --------
    >>> exponent_label(0.75), exponent_label(2 / 3), exponent_label(0.7)
    ('3/4', '2/3', '7/10')
    """
    frac = Fraction(value).limit_denominator(12)
    if frac.denominator > 1 and abs(float(frac) - value) < 5e-4:
        return f"{frac.numerator}/{frac.denominator}"
    return f"{value:g}"


#: Shown in every report and results.json.
CAUTION = ("Results are statistical estimates from the data supplied, not clinical, "
           "veterinary or regulatory advice. Predictions outside the fitted range are "
           "extrapolations and are flagged. Interspecies dose scaling and any clinical or "
           "regulatory use must defer to the applicable guidance and licensed practice.")


# --------------------------------------------------------------------------
# p-values and slope tests


def verdict_phrase(estimate: float, exponent: float, p_value: float, *, alpha: float,
                 target: str) -> str:
    """The verb phrase of a slope test: "is above 3/4", "does not differ detectably from 3/4"."""
    if not np.isfinite(p_value):
        return f"could not be tested against {target}"
    if p_value < alpha:
        return f"is {'above' if estimate > exponent else 'below'} {target}"
    return f"does not differ detectably from {target}"


def describe_test(test, *, alpha: float = 0.05) -> str:
    """Plain-language reading of a slope test."""
    label = method_label(test.method)
    if not np.isfinite(test.p_value):
        return f"The {label} slope could not be tested against {test.exponent:g}."
    b0 = f"{test.exponent:.4g}"
    if test.hypothesis and test.hypothesis != f"{test.exponent:g}":
        b0 = f"{b0} ({test.hypothesis})"
    if test.note == EXACT_NOTE:
        relation = "equals" if test.p_value >= alpha else (
            "is above" if test.estimate > test.exponent else "is below")
        return f"The {label} exponent {test.estimate:.6g} {relation} {b0} ({test.note})."
    verdict = verdict_phrase(test.estimate, test.exponent, test.p_value, alpha=alpha, target=b0)
    if test.statistic_type == "t":
        stat = f"t = {test.statistic:.2f}, df = {test.df:g}, "
    elif test.statistic_type == "z":
        stat = f"z = {test.statistic:.2f}, "
    elif test.statistic_type == "lr":
        stat = f"LR = {test.statistic:.2f}, parametric bootstrap, "
    else:
        stat = "bootstrap, "
    p = calibrated_p_text(test.p_value, getattr(test, "p_method", ""))
    return f"The {label} exponent {test.estimate:.3g} {verdict} ({stat}{p})."


def p_text(p: float) -> str:
    """A p-value in a sentence: 'p = 0.031', 'p = 0.0042' or 'p < 0.0001'.

    With :func:`format_p`, the one way the package writes a p-value in words.
    """
    text = format_p(p)
    return f"p {text}" if text.startswith("<") else f"p = {text}"


def format_p(p: float) -> str:
    """A p-value as people write it: '0.031' (three decimals from 0.01 up), '0.0042' (two
    significant digits below 0.01), '< 0.0001' below 0.0001, 'n/a' when not finite.

    The one p formatter of the package: sentences (:func:`p_text`), the report's
    tables and the headline's tables of words all write p-values with it.
    """
    if not np.isfinite(p):
        return "n/a"
    if p < 1e-4:
        return "< 0.0001"
    return f"{p:.2g}" if p < 0.01 else f"{p:.3f}"


_DRAWN = re.compile(r"([a-z_]+)\((\d+)\)")


def p_floor(p_method) -> tuple:
    """The smallest p a resampled test can give, and its number of draws.

    ``p_method`` as written in slope_tests.csv and group_tests.csv:
    ``"parametric_bootstrap(B)"``, ``"lr_parametric_bootstrap(B)"`` and
    ``"permutation(B)"`` give p = (1 + #{as extreme})/(B + 1), at least
    1/(B + 1) (Davison & Hinkley 1997, eq. 4.11; Phipson & Smyth 2010);
    ``"bootstrap_percentile(B)"`` gives p = 2(1 + #)/(B + 1), at least
    2/(B + 1).  Any other method: ``(nan, None)``.

    Examples
    --------
    >>> p_floor("parametric_bootstrap(999)"), p_floor("t")
    ((0.001, 999), (nan, None))
    """
    match = _DRAWN.fullmatch(str(p_method or "").strip())
    if not match:
        return math.nan, None
    draws = int(match.group(2))
    floor = (2.0 if match.group(1).startswith("bootstrap_percentile") else 1.0) / (draws + 1)
    return min(floor, 1.0), draws


def at_floor(p_values, p_methods) -> np.ndarray:
    """Which resampled p-values sit at the floor of their draws (:func:`p_floor`): such a
    p, and a Holm-adjusted p computed from it, is written "≤" in sentences and tables."""
    out = []
    for p, method in zip(p_values, p_methods):
        floor, draws = p_floor(method if isinstance(method, str) else "")
        out.append(draws is not None and np.isfinite(float(p))
                   and float(p) <= floor * (1 + 1e-9))
    return np.asarray(out, dtype=bool)


def calibrated_p_text(p: float, p_method="") -> str:
    """A p-value in a sentence that says when it sits at the floor of its draws.

    A resampled p (``p_method`` like ``"parametric_bootstrap(999)"`` or
    ``"permutation(999)"``, see :func:`p_floor`) at its floor is only known
    to be at most that floor: 'p ≤ 0.001 (999 draws)'.  Every other p is
    written by :func:`p_text`.

    Examples
    --------
    >>> calibrated_p_text(0.001, "parametric_bootstrap(999)")
    'p ≤ 0.001 (999 draws)'
    >>> calibrated_p_text(0.004, "permutation(999)"), calibrated_p_text(0.001, "t")
    ('p = 0.004', 'p = 0.001')
    """
    floor, draws = p_floor(p_method)
    if draws is None or not np.isfinite(p) or p > floor * (1 + 1e-9):
        return p_text(p)
    shown = format_p(floor) if floor >= 1e-4 else f"{floor:.1g}"
    return f"p ≤ {shown} ({draws} draws)"


def slope_interval_text(low: float, high: float, gap_low: float = math.nan,
                        gap_high: float = math.nan, *, fmt=None) -> str:
    """A slope interval in words: '0.626–0.699', or the two accepted ranges
    '-2.098 to -0.477 or 0.477 to 2.098' when the gap ``gap_low .. gap_high``
    (an SMA fit whose correlation is not significant) splits it.

    ``fmt`` writes one number (default: three decimals).

    Examples
    --------
    >>> slope_interval_text(0.6261, 0.6994)
    '0.626–0.699'
    >>> slope_interval_text(-2.0977, 2.0977, -0.4767, 0.4767)
    '-2.098 to -0.477 or 0.477 to 2.098'
    """
    fmt = fmt or (lambda v: f"{v:.3f}")
    if np.isfinite(gap_low) and np.isfinite(gap_high):
        return f"{fmt(low)} to {fmt(gap_low)} or {fmt(gap_high)} to {fmt(high)}"
    return f"{fmt(low)}–{fmt(high)}"


def fit_interval_text(fit, *, fmt=None) -> str:
    """:func:`slope_interval_text` of a fit object's ``slope_ci`` and gap."""
    return slope_interval_text(fit.slope_ci.low, fit.slope_ci.high,
                               getattr(fit, "slope_gap_low", math.nan),
                               getattr(fit, "slope_gap_high", math.nan), fmt=fmt)


def scope_words(scope: str, group: str) -> str:
    return {"pooled": "pooled", "group_means": "group-means"}.get(scope, f"group {group}")


# --------------------------------------------------------------------------
# the fits


def read_message(data, cfg) -> str:
    """"Read N data rows; dropped M; fitting K points (...)."""
    unit_word = (f" ({cfg.data.average_within} means of {data.n_rows_used} rows)"
                 if data.averaged_within else "")
    return (f"Read {data.n_read} data rows; dropped {len(data.dropped)}; "
            f"fitting {len(data.points)} points{unit_word}.")


def dropped_note(n_dropped: int) -> str:
    return f"{n_dropped} rows were dropped; see dropped_rows.csv for each reason."


def pooled_fit_messages(line_fits: dict, cfg) -> list:
    """Each pooled exponent with its interval, then its tests against the exponents."""
    messages = []
    pct = f"{100 * cfg.model.confidence:g}%"
    for (scope, group, method), fit in line_fits.items():
        if scope == "pooled":
            how = "" if fit.interval_method == "analytic" else ", bootstrap"
            lam = f" (λ = {fit.lam:.3g})" if fit.lam is not None else ""
            messages.append(
                f"Pooled {method_label(method)}{lam} exponent {fit.slope:.3f} ({pct} CI "
                f"{fit_interval_text(fit)}{how}), r² = {fit.r2:.3f}, "
                f"n = {fit.n}.")
            for name, b0 in cfg.exponents.items():
                test = fit.test_slope(b0, hypothesis=name)
                messages.append("  " + describe_test(test, alpha=1 - cfg.model.confidence))
    return messages


def line_method_messages(line_fits: dict, cfg) -> list:
    """Does the choice of line matter for these data?  One or two plain sentences."""
    pooled = {m: f for (s, g, m), f in line_fits.items() if s == "pooled"}
    classic = [m for m in CLASSIC_METHODS if m in pooled]
    out = []
    alpha = 1 - cfg.model.confidence
    if len(classic) >= 2:
        fits = [pooled[m] for m in classic]
        slopes = [f.slope for f in fits]
        spread = max(slopes) - min(slopes)
        widths = [f.slope_ci.high - f.slope_ci.low for f in fits
                  if np.isfinite(f.slope_ci.high - f.slope_ci.low)]
        width = min(widths) if widths else np.nan
        r2 = fits[0].r2
        listed = ", ".join(f"{method_label(m)} {pooled[m].slope:.3f}" for m in classic)
        ratio = spread / width if np.isfinite(width) and width > 0 else np.inf
        if ratio < 0.25:
            verdict = (f"they differ by {spread:.3f}, under a quarter of the narrowest "
                       f"{100 * cfg.model.confidence:g}% CI ({width:.3f}), so the choice of "
                       "line does not change the conclusions")
        else:
            verdict = (f"they differ by {spread:.3f}, {ratio:.1f} times the narrowest CI "
                       f"width ({width:.3f}): the choice matters — use OLS to predict y "
                       "from x, SMA or MA to describe how y scales with x")
        out.append(f"Line method: r² = {r2:.3f} ({listed}); {verdict}.")
        disagree = []
        for name, b0 in cfg.exponents.items():
            verdicts = {m: pooled[m].test_slope(b0).p_value < alpha for m in classic}
            if len(set(verdicts.values())) > 1:
                rej = [method_label(m) for m, v in verdicts.items() if v]
                acc = [method_label(m) for m, v in verdicts.items() if not v]
                disagree.append(f"{name} ({'/'.join(rej)} reject it, {'/'.join(acc)} do not)")
        if disagree:
            out.append("  The lines disagree on " + "; ".join(disagree) + ".")
    deming = pooled.get("deming")
    if deming is not None:
        near = ""
        if "ols" in pooled and "ma" in pooled:
            closer = ("OLS" if abs(deming.slope - pooled["ols"].slope)
                      <= abs(deming.slope - pooled["ma"].slope) else "MA")
            near = (f"; it lies between MA (λ = 1) and OLS (λ → ∞), here closer to {closer}"
                    + (", as most error is in y" if closer == "OLS" else ""))
        out.append(f"  Deming line with λ = {deming.lam:.3g} (error variance of log y over log x):"
                   f" exponent {deming.slope:.3f} ({deming.slope_ci.low:.3f}–"
                   f"{deming.slope_ci.high:.3f}){near}.")
    elif classic:
        out.append("  If x is measured with error, the OLS exponent is biased towards 0 "
                   "(regression dilution) and MA assumes equal error variances on both log "
                   "scales; add deming to model.methods with model.deming_lambda (or "
                   "model.error_variances) to fit the line for a stated error ratio λ.")
    robust = [m for m in ROW_METHOD_NAMES if m in pooled]
    for m in robust:
        ref = CATALOGUE[m].permutation_pair   # the classical line it is checked against
        classic_fit = pooled.get(ref)
        f = pooled[m]
        if classic_fit is None:
            continue
        diff = abs(f.slope - classic_fit.slope)
        half = (classic_fit.slope_ci.high - classic_fit.slope_ci.low) / 2
        if diff < half / 2:
            judged = "so outlying points do not drive the classical line"
        else:
            judged = ("a difference as large as the CI half-width: a few points may drive "
                      "the classical line (see influential_rows.csv)")
        out.append(f"  Robust check: {method_label(m)} exponent {f.slope:.3f} vs "
                   f"{method_label(ref)} {classic_fit.slope:.3f}, {judged}.")
    return out



# --------------------------------------------------------------------------
# groups


def uncompared_message(uncompared: list) -> str:
    return ("Group comparisons are available for OLS, SMA and MA; none was made for "
            f"{' or '.join(method_label(m) for m in uncompared)}.")


def pairwise_skipped_note(method: str, n_groups: int, pairwise_max: int) -> str:
    return (f"{method_label(method)}: pairwise comparisons skipped: "
            f"{n_groups} groups exceed groups.pairwise_max = {pairwise_max}.")


def means_left_out_note(left_out_text: str, n_left_out: int) -> str:
    return (f"Line through the group means: {n_left_out} group(s) left out, "
            f"as in the comparisons: {left_out_text}.")


# --------------------------------------------------------------------------
# predictions


def extrapolation_note(table) -> str:
    """The note on predictions outside the x range of their fit ("" if none)."""
    n_ext = int(table["extrapolated"].sum()) if len(table) else 0
    if not n_ext:
        return ""
    ext = table[table["extrapolated"]]
    by_scope = ext.groupby("scope", sort=False)["x"].agg(lambda v: sorted(set(v)))
    parts = []
    for scope, xs in by_scope.items():
        what = {"pooled": "pooled fits", "group": "group fits",
                "group_means": "lines through group means"}.get(scope, scope)
        parts.append(f"{what}: x = {', '.join(f'{v:g}' for v in xs)}")
    return (f"{n_ext} of {len(table)} predictions lie outside the x range of the "
            f"fit that made them ({'; '.join(parts)}); they are extrapolations, "
            "flagged in predictions.csv; treat them with caution.")


def inverse_extrapolation_note(table) -> str:
    n_ext = int(table["extrapolated"].sum()) if len(table) else 0
    if not n_ext:
        return ""
    return f"{n_ext} inverse predictions use y outside the fitted y range (extrapolations)."


def unbounded_inverse_note(fits: list, interval: str, confidence: float) -> str:
    """The note for inverse predictions whose interval has no finite bounds."""
    return (f"Inverse predictions ({', '.join(fits)}): the {100 * confidence:g}% {interval} "
            "interval for x is unbounded, because the slope does not differ from 0 at this "
            "level; x_low and x_high are blank in inverse_predictions.csv, and y says little "
            "about x here.")


# --------------------------------------------------------------------------
# diagnostics


def diag_method(methods) -> str:
    """The method whose residuals the plain-language verdicts read: OLS if fitted."""
    return "ols" if "ols" in methods else methods[0]


def error_structure_words(es) -> str:
    d = es.delta_aicc
    if es.preferred == "multiplicative" and np.isfinite(d):
        return (f"multiplicative (lognormal) error is supported over additive "
                f"(ΔAICc = {d:.1f}), so fitting on logs is appropriate.")
    if es.preferred == "multiplicative":
        return "only the multiplicative (log-scale) model could be fitted."
    if es.preferred == "additive":
        return (f"additive (normal) error on the arithmetic scale is supported over "
                f"multiplicative (ΔAICc = {-d:.1f}): the exponent from a nonlinear fit "
                f"({es.additive.b:.3g}) may be more appropriate than the log-scale one "
                f"({es.multiplicative.b:.3g}); see error_structure.csv.")
    return (f"the data do not favour multiplicative or additive error (ΔAICc = {d:.1f}, "
            f"|ΔAICc| < 2); exponents {es.multiplicative.b:.3g} (log scale) and "
            f"{es.additive.b:.3g} (nonlinear) — consider reporting both.")


# --------------------------------------------------------------------------
# resampling


def bootstrap_message(pooled, line_fits: dict, cfg, *, stratified: bool) -> str:
    """The pooled bootstrap intervals beside the analytic ones.

    ``pooled``: the pooled slope rows of bootstrap.csv.
    """
    rs = cfg.resampling
    kind = "BCa" if rs.interval == "bca" else "percentile"
    strat = f" within {cfg.data.group} groups" if stratified else ""
    parts = []
    for r in pooled.itertuples():
        fit = line_fits[("pooled", "", r.method)]
        parts.append(f"{method_label(r.method)} {r.low:.3f}–{r.high:.3f} (analytic "
                     f"{fit_interval_text(fit)})")
    return (f"Bootstrap ({rs.bootstrap} resamples{strat}, {kind}, seed {rs.seed}): "
            f"pooled exponent {100 * cfg.model.confidence:g}% CIs "
            + "; ".join(parts) + ". Every fit's bootstrap interval is in "
            "bootstrap.csv.")


def bootstrap_unstratified_note() -> str:
    return ("Bootstrap: groups with fewer than 3 points are not resampled; "
            "the pooled bootstrap is not stratified by group.")


def bootstrap_means_note(n_means: int) -> str:
    return (f"The bootstrap of the line through the {n_means} group means "
            "resamples the groups themselves; with fewer than 10 groups its "
            "interval is rough.")


def permutation_message(out, cfg) -> list:
    """Do the permutation p-values (column p_permutation) agree with the t-tests?"""
    rs = cfg.resampling
    messages = []
    alpha = 1 - cfg.model.confidence
    valid = out.dropna(subset=["p_value", "p_permutation"])
    valid = valid[valid["statistic_type"] == "t"]
    if len(valid):
        lo = np.minimum(valid["p_value"], valid["p_permutation"])
        hi = np.maximum(valid["p_value"], valid["p_permutation"])
        clash = valid[(lo < alpha) & (hi > 2 * alpha)]
        diff = float(np.max(np.abs(valid["p_value"] - valid["p_permutation"])))
        text = (f"Permutation tests ({rs.permutations} permutations per test, seed {rs.seed}) "
                f"against the t-test p-values: largest difference {diff:.3f}")
        if len(clash):
            shown = "; ".join(
                f"{scope_words(f.scope, f.group)} {method_label(f.method)} vs {f.hypothesis}: "
                f"{p_text(f.p_value)} (t), "
                f"{calibrated_p_text(f.p_permutation, f'permutation({int(f.n_perm)})')} "
                "(permutation)"
                for f in clash.head(3).itertuples())
            more = f" and {len(clash) - 3} more" if len(clash) > 3 else ""
            text += (f"; {len(clash)} test(s) disagree ({shown}{more}). There the t-test "
                     "leans on normal errors: prefer the permutation p-value.")
        else:
            text += (f"; no test is significant by one (p < {alpha:g}) and clearly not by the "
                     f"other (p > {2 * alpha:g}), so the t-tests' reliance on normal errors does "
                     "not matter here.")
        messages.append(text + " p_permutation is in slope_tests.csv.")
    return messages


# --------------------------------------------------------------------------
# checks and cautions


def _g(v: float) -> str:
    return f"{v:.3g}"


def _significant(text: str) -> int:
    """Significant digits written in a number's text ("0.0300" -> 3, "1" -> 1, "1000" -> 1)."""
    mantissa = text.lower().split("e")[0].lstrip("+-")
    digits = mantissa.replace(".", "").lstrip("0")
    if "." not in mantissa:
        digits = digits.rstrip("0")
    return max(len(digits), 1)


def number_text(value: float, digits: int = 4) -> str:
    """A number to ``digits`` significant digits that never reads as a rounder one.

    ``f"{v:.4g}"`` writes 0.99997 as "1" and 2000.4 as "2000": a bound that
    looks exact.  When the text has lost two or more of its ``digits``
    significant digits to rounding (and is not the exact value), digits are
    added (up to 10) until it shows ``digits - 1`` of them; "0.0177" for
    0.017701 keeps its usual form.

    Examples
    --------
    >>> number_text(0.99997), number_text(1.5), number_text(1.2441), number_text(2000.4)
    ('0.99997', '1.5', '1.244', '2000.4')
    >>> number_text(1.0), number_text(0.0177012)
    ('1', '0.0177')
    """
    v = float(value)
    if not math.isfinite(v):
        return "unbounded" if math.isinf(v) else "–"
    d = digits
    text = f"{v:.{d}g}"
    while d < 10 and float(text) != v and _significant(text) < digits - 1:
        d += 1
        text = f"{v:.{d}g}"
    return text


def interval_numbers(low: float, high: float, digits: int = 4) -> str:
    """An interval's two bounds in words, each by :func:`number_text` ("0.99997 to 1.529")."""
    return f"{number_text(low, digits)} to {number_text(high, digits)}"


_SUPERSCRIPTS = str.maketrans("0123456789-", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻")


def unit_text(unit) -> str:
    """A unit as the run writes it in sentences: "(cm**2)" -> "cm²", "(kg*m**-1)" -> "kg·m⁻¹".

    Examples
    --------
    >>> unit_text("(cm**2)"), unit_text("kg"), unit_text("(g/cm**3)"), unit_text(None)
    ('cm²', 'kg', 'g/cm³', '')
    """
    if not unit or not isinstance(unit, str):
        return ""
    text = unit.strip()
    if text.startswith("(") and text.endswith(")"):
        text = text[1:-1]
    text = re.sub(r"\*\*\s*(-?\d+)", lambda m: m.group(1).translate(_SUPERSCRIPTS), text)
    text = re.sub(r"\^\s*(-?\d+)", lambda m: m.group(1).translate(_SUPERSCRIPTS), text)
    return text.replace(" * ", "·").replace("*", "·").replace(" ", "")


def count_words(n: int, word: str) -> str:
    """A count with its noun in the right number ("1 row", "3 rows", "1 species")."""
    return f"{n} {word if n == 1 else plural(word)}"


def possessive(word: str) -> str:
    """A noun's possessive: "group's", "genus's", "class's", but "species'" and
    "plots'" (a word the same in both numbers, or a plural, takes the apostrophe only;
    Chicago Manual of Style, 17th ed., 7.17-7.19)."""
    low = word.lower()
    if low.endswith(("species", "series")) or (low.endswith("s")
                                               and not low.endswith(("ss", "us", "is"))):
        return f"{word}'"
    return f"{word}'s"


def _who(row: int | None, label: str) -> str:
    return f"row {row}" + (f" ({label})" if label else "")


def influence_reason(row: int, label: str, *, cook: float, slope: float,
                     slope_without: float, se: float, method: str) -> str:
    """Why one point gets a strong warning."""
    return (f"{_who(row, label)} drives the fit: Cook's distance {cook:.2g}"
            f"{' (> 1)' if cook > 1 else ''}; without it the {method_label(method)} exponent is "
            f"{slope_without:.3f} instead of {slope:.3f}, a change of "
            f"{abs(slope_without - slope) / se:.1f} standard errors. Check this value "
            "(a unit or typing error?) before using the results.")


def smearing_reason(smearing: float, parametric: float, limit: float) -> str:
    """Why a smearing factor far from the parametric one is a warning."""
    return (f"the smearing correction factor ({_g(smearing)}) is far from the parametric one "
            f"({_g(parametric)}; ratio outside 1/{limit:g}–{limit:g}): a few large residuals "
            "dominate it, and back-transformed means are unreliable until they are checked.")


def estimate_outside_reason(label: str, estimate: float, low: float, high: float) -> str:
    """Why an estimate outside its own interval is a warning."""
    return (f"the estimate {label}= {_g(estimate)} lies outside its own interval "
            f"({_g(low)}–{_g(high)}): the correction factor is inflated by outlying "
            "points; do not use it until they are checked.")


def group_residuals_reason(f: float, df1: int, df2: int, p: float) -> str:
    """Pooled residuals cluster by group."""
    return (f"pooled residuals differ between groups (one-way ANOVA F = {f:.3g} on {df1} "
            f"and {df2} df, {p_text(p)}): the groups sit at different elevations, so the "
            "pooled line mixes them; prefer the within-group (common-slope) exponent.")


def range_words(ratio: float) -> str:
    """How far outside the fitted range an x lies, from its range_ratio."""
    if not math.isfinite(ratio) or ratio <= 1:
        return "inside the fitted range"
    if ratio <= 2:
        return f"{ratio:.2g}× beyond the fitted range: an extrapolation"
    return (f"{ratio:.3g}× beyond the fitted range: far outside the data; the power law "
            "may not hold there and the interval understates the uncertainty")


def range_warning(n_out: int, n_all: int, lo: float, hi: float, worst: float,
                  what: str = "predictions", role: str = "x") -> str:
    """The extrapolation warning, stating the fitted range."""
    strong = (" Beyond about 2× the range they are guesses, not estimates: the power law "
              "may not hold there." if worst > 2 else "")
    return (f"{n_out} of {n_all} {what} lie outside the fitted {role} range "
            f"({_g(lo)}–{_g(hi)}{' for the widest fit' if what else ''}; each fit's own "
            f"range applies), up to {worst:.3g}× beyond it: extrapolations, flagged with "
            f"range_ratio > 1.{strong}")


def medians_vs_means() -> str:
    """Back-transformed lines give medians; corrected values estimate means."""
    return ("A line fitted on logs predicts the median y at a given x; the corrected "
            "values (smearing, parametric or ratio factor) estimate the mean, which is "
            "higher by that factor.")


def dose_caution() -> str:
    """The dose sentence required wherever predictions are shown."""
    return ("Allometric scaling of doses between species must follow pharmacological or "
            "veterinary guidance and local regulation; an allometric fit is not a dose.")


def mechanism_caution() -> str:
    """Under exponent tests."""
    return ("Agreement with 3/4 or 2/3 does not by itself confirm a mechanism: several "
            "explanations predict the same exponent, and a test that does not reject only "
            "fails to find a difference.")


def mechanism_applies(fits_slope_tests) -> bool:
    """True when 3/4 or 2/3 is among the hypothesised exponents of ``slope_tests``: the
    mechanism caution (:func:`mechanism_caution`) names them, so it is said only then."""
    if fits_slope_tests is None or not len(fits_slope_tests):
        return False
    values = fits_slope_tests["exponent"].astype(float).to_numpy()
    return bool(np.any(np.isclose(values, 0.75)) or np.any(np.isclose(values, 2 / 3, atol=1e-3)))


def ancestry_caution(tree_key: str = "data.tree") -> str:
    """Where the units can share ancestry (:func:`units_share_ancestry`)."""
    return ("Species share ancestry, so their values are not independent: intervals and "
            "p-values here are too narrow without a phylogenetic correction "
            f"({tree_key} offers one).")


#: Words naming species or higher taxa in a column name (matched per word of the
#: name: "species", "Order", "taxon_id", "clade_name").
TAXON_WORDS = frozenset({
    "species", "subspecies", "genus", "genera", "family", "families", "subfamily",
    "superfamily", "tribe", "order", "orders", "suborder", "infraorder", "class",
    "subclass", "phylum", "phyla", "kingdom", "clade", "clades", "taxon", "taxa",
    "lineage", "lineages"})

#: Words that name a rate or a dose in a column name, label or unit.
RATE_WORDS = frozenset({
    "rate", "rates", "dose", "doses", "dosage", "metabolic", "metabolism", "bmr", "fmr",
    "rmr", "smr", "vo2", "clearance", "consumption", "uptake", "intake", "expenditure",
    "flux", "turnover", "excretion"})

_POWER_UNITS = frozenset({"w", "mw", "kw", "uw", "µw", "watt", "watts", "milliwatt"})
_TIME_UNITS = frozenset({"s", "sec", "min", "h", "hr", "d", "day", "yr", "year"})


def _words(text) -> set:
    return {w for w in re.split(r"[^a-z0-9µ]+", str(text or "").lower()) if w}


def units_share_ancestry(cfg) -> bool:
    """True when the run's units can share ancestry: the caution applies.

    The rule, from config facts only: a tree is given (``data.tree``), or the
    group column (``data.group``) or the averaging unit (``data.average_within``)
    names species or a higher taxon (a word of :data:`TAXON_WORDS` in the column
    name).  Stocks, sites, plots, sexes or treatments of one species share no
    ancestry the analysis could correct for, so they get no caution.
    """
    data = cfg.data
    if getattr(data, "tree", None) is not None:
        return True
    return any(_words(name) & TAXON_WORDS
               for name in (data.group, data.average_within) if name)


def _names_rate(cfg) -> bool:
    labels = getattr(cfg.figures, "labels", None) or {}
    y = cfg.data.y if isinstance(cfg.data.y, str) else ""
    units = getattr(cfg.data, "units", None) or {}
    unit = str(units.get("y", "") or "") if isinstance(units, dict) else ""
    if (_words(y) | _words(labels.get("y", ""))) & RATE_WORDS:
        return True
    low = unit.strip().lower()
    if low in _POWER_UNITS:
        return True
    per = re.split(r"/|\bper\b", low)
    return len(per) > 1 and bool(_words(per[-1]) & _TIME_UNITS)


def dose_scaling_applies(cfg) -> bool:
    """True when the dose-scaling caution fits the data.

    The rule: the response is a rate or a dose (its column name or axis label
    has a word of :data:`RATE_WORDS`, or its unit is a power such as mW or a
    quantity per unit time such as ml/min) and it is scaled across species
    (:func:`units_share_ancestry`).  A length-weight relation of fish stocks or
    a bone against body mass is not a dose.
    """
    return units_share_ancestry(cfg) and _names_rate(cfg)


def curvature_ok(verdict: str) -> str:
    """The curvature verdict when no curvature is detected."""
    return (f"Power law: {verdict}, so there is no evidence against one exponent within the "
            "data range.")


def symmetric_prediction_note(methods: list) -> str:
    """Predictions from SMA/MA lines overestimate means at the edges."""
    names = ", ".join(method_label(m) for m in methods)
    return (f"Predictions from {names} were made because prediction.methods asks for them. "
            "Symmetric lines describe how y scales with x; they do not predict y from x. "
            "Their predictions drift away from the mean of y towards the edges of the data "
            "(in a seeded simulation SMA with smearing overestimated mean y by about 20% at "
            "the data's edge and 33% beyond it); use OLS predictions to estimate y.")


def predicted_unit(average_within: str | None, y_name: str) -> str:
    """What one predicted value stands for."""
    if average_within:
        return (f"Each prediction is for a new {average_within} mean (the mean of log "
                f"{y_name} over a {average_within}), not for an individual: individuals "
                "scatter more widely.")
    return f"Each prediction is for one new row of the kind in the data ({y_name})."


#: Plurals of the group words biologists use that an "s" would get wrong.
_IRREGULAR_PLURALS = {"genus": "genera", "taxon": "taxa", "phylum": "phyla",
                      "species": "species", "subspecies": "subspecies", "series": "series",
                      "family": "families", "subfamily": "subfamilies", "class": "classes",
                      "subclass": "subclasses", "locus": "loci", "stratum": "strata",
                      "datum": "data", "criterion": "criteria", "fungus": "fungi",
                      "individual": "individuals", "sex": "sexes", "mouse": "mice",
                      "fish": "fish", "sheep": "sheep", "deer": "deer"}


def plural(word: str) -> str:
    """English plural of a group word, for sentences ("clade" -> "clades").

    Examples
    --------
    >>> [plural(w) for w in ("clade", "genus", "family", "Taxon", "species", "stock", "box")]
    ['clades', 'genera', 'families', 'Taxa', 'species', 'stocks', 'boxes']
    """
    text = str(word)
    low = text.lower()
    if low in _IRREGULAR_PLURALS:
        out = _IRREGULAR_PLURALS[low]
        return out[0].upper() + out[1:] if text[:1].isupper() else out
    if low.endswith(("s", "x", "z", "ch", "sh")):
        return text + "es"
    if low.endswith("y") and len(low) > 1 and low[-2] not in "aeiou":
        return text[:-1] + "ies"
    return text + "s"


def units_line(x_names, x_units, y_name: str, y_unit) -> str:
    """The units of a prediction table, or "" when none are known.

    Examples
    --------
    >>> units_line(["diameter_cm", "height_m"], ["cm", "m"], "biomass_kg", "t")
    'Units: diameter_cm in cm, height_m in m; y (biomass_kg) in t.'
    """
    names = [x_names] if isinstance(x_names, str) else list(x_names or [])
    units = [x_units] if isinstance(x_units, str) else list(x_units or [])
    parts = [f"{n} in {u}" for n, u in zip(names, units) if u]
    if y_unit:
        parts.append(f"y ({y_name}) in {y_unit}" if y_name else f"y in {y_unit}")
    if not parts:
        return ""
    x_part = ", ".join(p for p in parts if not p.startswith("y"))
    y_part = next((p for p in parts if p.startswith("y")), "")
    return "Units: " + "; ".join(p for p in (x_part, y_part) if p) + "."


def clean_timestamp(iso: str) -> str:
    """'2026-12-02T04:40:00+00:00' -> '2026-12-02 04:40 UTC'."""
    text = str(iso).replace("T", " ")
    for tail in ("+00:00", "Z"):
        if text.endswith(tail):
            text = text[: -len(tail)]
    if len(text) >= 19 and text[16] == ":":
        text = text[:16]
    return text.strip() + " UTC"


# --------------------------------------------------------------------------
# the note cell of a fit (numbers the fit carries, written out)


def accepted_slopes_note(note: str, slope_high: float, gap_low: float, gap_high: float) -> str:
    """The ``note`` of a fit with its accepted slopes written out where they are two ranges.

    An SMA fit noted ``BOTH_SIGNS_NOTE`` accepts ``-slope_high .. gap_low`` and
    ``gap_high .. slope_high`` (its interval is their hull; see
    :func:`scaling.stats.lines.fit_moments`).  Any other note comes back as it is.

    Examples
    --------
    >>> accepted_slopes_note(BOTH_SIGNS_NOTE, 2.0, -0.5, 0.5)[len(BOTH_SIGNS_NOTE):]
    ': the accepted slopes are -2 to -0.5 or 0.5 to 2 (slope_low to slope_high is their hull)'
    >>> accepted_slopes_note("", 2.0, math.nan, math.nan)
    ''
    """
    if not (str(note).startswith(BOTH_SIGNS_NOTE) and np.isfinite(gap_low)
            and np.isfinite(gap_high)):
        return note
    text = slope_interval_text(-slope_high, slope_high, gap_low, gap_high,
                               fmt=lambda v: f"{v:.4g}")
    ranges = f": the accepted slopes are {text} (slope_low to slope_high is their hull)"
    return BOTH_SIGNS_NOTE + ranges + str(note)[len(BOTH_SIGNS_NOTE):]


def fit_note(fit) -> str:
    """:func:`accepted_slopes_note` of a fit object (a LineFit or a PhyloFit)."""
    return accepted_slopes_note(fit.note, fit.slope_ci.high, fit.slope_gap_low,
                                fit.slope_gap_high)


def fit_notes_column(res: dict) -> np.ndarray:
    """The ``note`` column of a vectorised :func:`scaling.stats.lines.fit_moments` result."""
    notes = np.asarray(res["note"], dtype=object)
    shape = notes.shape
    flat = notes.reshape(-1).copy()
    high, low_gap, high_gap = (np.broadcast_to(res.get(k, np.nan), shape).reshape(-1)
                               for k in ("slope_high", "slope_gap_low", "slope_gap_high"))
    for i in np.flatnonzero(np.isfinite(np.asarray(low_gap, dtype=float))):
        flat[i] = accepted_slopes_note(flat[i], high[i], low_gap[i], high_gap[i])
    return flat.reshape(shape)


def worded_fits(group_fits):
    """The ``fits`` table of a :class:`~scaling.stats.grouped_fits.GroupFits` with each
    SMA note of two accepted ranges written out (:func:`accepted_slopes_note`)."""
    fits = group_fits.fits
    if not np.isfinite(fits["slope_gap_low"].to_numpy(dtype=float)).any():
        return fits
    res = {"note": fits["note"].to_numpy(dtype=object),
           **{k: fits[k].to_numpy(dtype=float)
              for k in ("slope_high", "slope_gap_low", "slope_gap_high")}}
    return fits.assign(note=fit_notes_column(res))


__all__ += ["accepted_slopes_note", "fit_note", "fit_notes_column", "worded_fits",
            "fit_interval_text"]
