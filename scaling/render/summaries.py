"""The few lines of text each result of ``scaling.stats`` shows with ``.summary()``.

A result in :mod:`scaling.stats` carries numbers only; its ``summary`` method
is a door that hands the result to the function here that words it (the way
its ``plot`` method hands it to :mod:`scaling.render.plots`), so
``print(fit.summary())`` keeps working while every sentence is made on this
floor.  One function per kind of result, named after it and called by name
from its door: a door says exactly which words it opens onto, and this module
imports no result class (a summary of a line does not load the phylogeny).
Each function reads the fields of the result it is given and computes
nothing new.
"""

from __future__ import annotations

from ..stats.logscale import base_label, log_word
from ..stats.schema import SCATTER_SHOWN, method_label
from .findings import comparison_summary, spread_summary  # noqa: F401 (doors of stats)
from .wording import p_text

__all__ = [
    "line_fit_summary", "phylo_fit_summary", "multi_fit_summary", "combined_term_summary",
    "total_prediction_summary", "total_range_note", "prediction_summary", "inverse_prediction_summary",
    "accuracy_summary", "normalisation_constant_summary", "group_fits_summary"]


def _percent(confidence: float) -> str:
    return f"{100 * confidence:g}%"


def line_fit_summary(fit) -> str:
    """A :class:`~scaling.stats.line_results.LineFit` in a few lines: the line,
    its exponent and intercept with intervals, r, and y = a * x^b.

    Parameters
    ----------
    fit : LineFit

    Returns
    -------
    str
        One line with the reason when the fit is not estimable.
    """
    label = method_label(fit.method)
    if not fit.estimable:
        return f"{label} fit, n = {fit.n}: {fit.note}"
    pct = _percent(fit.confidence)
    lines = [
        f"{label} line on {log_word(fit.log_base)} scales, n = {fit.n}"
        + (f" (lambda = {fit.lam:g})" if fit.lam is not None else ""),
        f"  exponent b = {fit.slope:.4g}  ({pct} CI "
        + " or ".join(f"{r.low:.4g} to {r.high:.4g}" for r in fit.accepted_slopes) + ")",
        f"  intercept log a = {fit.intercept:.4g}  ({pct} CI {fit.intercept_ci.low:.4g} to "
        f"{fit.intercept_ci.high:.4g})",
        f"  r = {fit.r:.4f}, r^2 = {fit.r2:.4f}, residual SD (log scale) = {fit.resid_sd:.4g}",
    ]
    if fit.log_base is not None:
        lines.append(f"  y = {fit.a:.4g} * x^{fit.slope:.4g}")
    if fit.note:
        lines.append(f"  note: {fit.note}")
    return "\n".join(lines)


def phylo_fit_summary(fit) -> str:
    """A :class:`~scaling.stats.phylogeny.PhyloFit` in three lines: the line and
    lambda, the exponent with its interval, the log-likelihood and AIC.

    Parameters
    ----------
    fit : PhyloFit

    Returns
    -------
    str
        One line with the reason when the fit is not estimable.
    """
    label = f"phylogenetic {method_label(fit.method)}"
    if not fit.estimable:
        return f"{label} fit, n = {fit.n}: {fit.note}"
    pct = _percent(fit.confidence)
    lam = (f"lambda = {fit.lam:.3g} ({fit.lam_estimate}, {pct} profile CI "
           f"{fit.lam_ci.low:.3g} to {fit.lam_ci.high:.3g})"
           if fit.lam_estimate != "fixed" else f"lambda = {fit.lam:g} (fixed)")
    return "\n".join([
        f"{label} line on log{base_label(fit.log_base)} scales, n = {fit.n} species, {lam}",
        f"  exponent b = {fit.slope:.4g}  ({pct} CI "
        + " or ".join(f"{r.low:.4g} to {r.high:.4g}" for r in fit.accepted_slopes) + ")",
        f"  log-likelihood = {fit.loglik:.4f}, AIC = {fit.aic:.4f}",
    ])


def multi_fit_summary(fit) -> str:
    """A :class:`~scaling.stats.several_predictors.MultiFit` in a few lines: one
    per exponent, the intercept, r^2 and y = a * x1^b1 * ...

    Parameters
    ----------
    fit : MultiFit

    Returns
    -------
    str
    """
    pct = _percent(fit.confidence)
    lines = [f"OLS fit of log{base_label(fit.log_base)} y on {fit.k} predictors "
             f"({', '.join(fit.names)}), n = {fit.n}"]
    for j, name in enumerate(fit.names):
        lines.append(f"  exponent of {name} = {fit.slopes[j]:.4g}  ({pct} CI "
                     f"{fit.slope_low[j]:.4g} to {fit.slope_high[j]:.4g})")
    lines.append(f"  intercept log a = {fit.intercept:.4g}  ({pct} CI "
                 f"{fit.intercept_ci.low:.4g} to {fit.intercept_ci.high:.4g})")
    lines.append(f"  r^2 = {fit.r2:.4f}, residual SD (log scale) = {fit.resid_sd:.4g}, "
                 f"df = {fit.df:g}")
    terms = " * ".join(f"{n}^{b:.4g}" for n, b in zip(fit.names, fit.slopes))
    lines.append(f"  y = {fit.a:.4g} * {terms}")
    return "\n".join(lines)


def combined_term_summary(test) -> str:
    """A :class:`~scaling.stats.several_predictors.CombinedTermTest` in one
    sentence: its F test against the separate exponents, its exponent and t test.

    Parameters
    ----------
    test : CombinedTermTest

    Returns
    -------
    str
    """
    pct = _percent(test.confidence)
    return (f"Combined term {test.label}: F = {test.f_statistic:.3g} on "
            f"({test.df_num:g}, {test.df_den:g}) df, {p_text(test.p_value)} against the "
            f"separate exponents; its exponent {test.exponent:.4g} ({pct} CI "
            f"{test.exponent_ci.low:.4g} to {test.exponent_ci.high:.4g}), t = "
            f"{test.t_statistic:.2f} against {test.hypothesis:g}, {p_text(test.t_p_value)}.")


def total_prediction_summary(total) -> str:
    """A :class:`~scaling.stats.multi_predictions.TotalPrediction` in one line:
    the total, its interval and correction, and how many were extrapolated.

    Parameters
    ----------
    total : TotalPrediction

    Returns
    -------
    str
    """
    flag = (f" ({total.n_extrapolated} of {total.n_new} extrapolated)"
            if total.n_extrapolated else "")
    return (f"Total of {total.n_new} predictions: {total.total:.4g} "
            f"({_percent(total.confidence)} interval {total.low:.4g} to {total.high:.4g}; "
            f"correction {total.correction}){flag}{total_range_note(total)}")


def total_range_note(total) -> str:
    """A sentence (with a leading space) when a total's scatter lies beyond the
    range where its interval's coverage was shown; "" otherwise.

    Parameters
    ----------
    total : TotalPrediction

    Returns
    -------
    str
    """
    if not getattr(total, "beyond_shown_range", False):
        return ""
    return (f" The scatter about the line (log10 SD {total.scatter_log10:.2g}) is beyond "
            f"{SCATTER_SHOWN:g}, the largest at which this interval was shown by simulation "
            "to hold its confidence: read it as approximate.")


def prediction_summary(pred) -> str:
    """A :class:`~scaling.stats.predictions.Prediction` in a few lines, one per x.

    Parameters
    ----------
    pred : Prediction

    Returns
    -------
    str
        A heading (method, mean or median, correction, interval), then
        ``x = ...: y = ... (low to high)``, extrapolated values marked.
    """
    pct = _percent(pred.confidence)
    what = "mean" if pred.correction != "none" else "median"
    lines = [f"{method_label(pred.method)} predictions of y ({what}, correction "
             f"{pred.correction}, {pct} {pred.interval} interval)"]
    for i in range(pred.x.size):
        flag = "  [extrapolated]" if pred.extrapolated[i] else ""
        lines.append(f"  x = {pred.x[i]:.4g}: y = {pred.y[i]:.4g} "
                     f"({pred.y_low[i]:.4g} to {pred.y_high[i]:.4g}){flag}")
    return "\n".join(lines)


def inverse_prediction_summary(pred) -> str:
    """An :class:`~scaling.stats.predictions.InversePrediction` in a few lines,
    one per y.

    Parameters
    ----------
    pred : InversePrediction

    Returns
    -------
    str
        A heading, then ``y = ...: x = ... (low to high)`` ("unbounded" where
        the interval is), extrapolated values marked.
    """
    pct = _percent(pred.confidence)
    lines = [f"{method_label(pred.method)} estimates of x from y ({pct} {pred.interval} interval)"]
    for i in range(pred.y.size):
        flag = "  [extrapolated]" if pred.extrapolated[i] else ""
        span = (f"{pred.x_low[i]:.4g} to {pred.x_high[i]:.4g}" if pred.bounded[i]
                else "unbounded")
        lines.append(f"  y = {pred.y[i]:.4g}: x = {pred.x[i]:.4g} ({span}){flag}")
    return "\n".join(lines)


def accuracy_summary(acc) -> str:
    """An :class:`~scaling.stats.predictions.Accuracy` in one line: SEE, %SEE
    above and below, %PE.

    Parameters
    ----------
    acc : Accuracy

    Returns
    -------
    str
    """
    return (f"{method_label(acc.method)}: SEE = {acc.see:.4g} ({log_word(acc.log_base)}), "
            f"%SEE = +{acc.percent_see:.3g}% / -{acc.percent_see_minus:.3g}%, "
            f"%PE = {acc.percent_pe:.3g}% (n = {acc.n}, correction {acc.correction})")


def normalisation_constant_summary(const) -> str:
    """A :class:`~scaling.stats.units.NormalisationConstant` in one line:
    a with its unit and interval.

    Parameters
    ----------
    const : NormalisationConstant

    Returns
    -------
    str
    """
    level = "" if const.confidence is None else f"{_percent(const.confidence)} "
    return (f"a = {const.value:.4g} {const.unit} ({level}interval {const.low:.4g} to "
            f"{const.high:.4g})")


def group_fits_summary(fits) -> str:
    """A :class:`~scaling.stats.grouped_fits.GroupFits` in a few lines: how many
    groups and fits, then the quartiles of the exponent for each method.

    Parameters
    ----------
    fits : GroupFits

    Returns
    -------
    str
        Fits whose only note is an unbounded interval count as estimable.
    """
    f = fits.fits
    ok = f["note"].eq("") | f["note"].str.contains("unbounded", regex=False)
    parts = []
    for method, sub in f[ok].groupby("method", sort=False):
        q = sub["slope"].quantile([0.25, 0.5, 0.75]).to_numpy()
        parts.append(f"  {method}: median exponent {q[1]:.4g} "
                     f"(quartiles {q[0]:.4g} to {q[2]:.4g})")
    n_groups = f["group"].nunique()
    head = (f"{n_groups} groups fitted with {f['method'].nunique()} methods; "
            f"{int((~ok).sum())} fits not estimable")
    return "\n".join([head] + parts)
