"""Plain-language sentences for checks and cautions (to move into wording.py).

Each sentence is a small function so the report, ``summary.md``, the
terminal and ``scaling predict`` say the same thing in the same words.
Nothing here computes a statistic.
"""

from __future__ import annotations

import math

__all__ = [
    "influence_reason", "smearing_reason", "estimate_outside_reason",
    "group_residuals_reason", "range_words", "range_warning", "medians_vs_means",
    "dose_caution", "mechanism_caution", "ancestry_caution", "curvature_ok",
    "symmetric_prediction_note", "predicted_unit", "clean_timestamp",
]


def _g(v: float) -> str:
    return f"{v:.3g}"


def _who(row: int | None, label: str) -> str:
    return f"row {row}" + (f" ({label})" if label else "")


def influence_reason(row: int, label: str, *, cook: float, slope: float,
                     slope_without: float, se: float, method: str) -> str:
    """Why one point gets a strong warning."""
    from .lines import method_label
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
    from .lines import p_text
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
    strong = (f" Beyond about 2× the range they are guesses, not estimates: the power law "
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


def ancestry_caution(tree_key: str = "data.tree") -> str:
    """When group or average_within is set."""
    return ("Species share ancestry, so their values are not independent: intervals and "
            "p-values here are too narrow without a phylogenetic correction "
            f"({tree_key} offers one).")


def curvature_ok(verdict: str) -> str:
    """The curvature verdict when no curvature is detected."""
    return (f"Power law: {verdict}, so there is no evidence against one exponent within the "
            "data range.")


def symmetric_prediction_note(methods: list) -> str:
    """Predictions from SMA/MA lines overestimate means at the edges."""
    from .lines import method_label
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


def clean_timestamp(iso: str) -> str:
    """'2026-12-02T04:40:00+00:00' -> '2026-12-02 04:40 UTC'."""
    text = str(iso).replace("T", " ")
    for tail in ("+00:00", "Z"):
        if text.endswith(tail):
            text = text[: -len(tail)]
    if len(text) >= 19 and text[16] == ":":
        text = text[:16]
    return text.strip() + " UTC"
