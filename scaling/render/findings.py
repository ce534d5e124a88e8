"""Words for the findings of the numeric core: points to check, the spread of exponents.

``scaling.stats`` returns findings as data (a code and the numbers in the
fields of a frozen dataclass); these functions turn them into the sentences
that tables, the run summary and notebooks show.  The sentence templates of
single checks stay in :mod:`scaling.render.wording`.
"""

from __future__ import annotations

from .wording import (estimate_outside_reason, format_p, group_residuals_reason,
                      influence_reason, smearing_reason)

__all__ = ["point_check_reason", "spread_summary"]


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
    if check.kind == "smearing":
        return smearing_reason(check.smearing_factor, check.parametric_factor, check.limit)
    if check.kind == "outside_interval":
        return estimate_outside_reason(check.label, check.value, check.low, check.high)
    if check.kind == "group_residuals":
        return group_residuals_reason(check.statistic, check.df1, check.df2, check.value)
    raise ValueError(f"kind must be one of influence, smearing, outside_interval, "
                     f"group_residuals, not {check.kind!r}")


def spread_summary(spread) -> str:
    """Lines describing an :class:`~scaling.stats.spread.ExponentSpread`.

    The mean exponent with its interval, the between-group SD tau with its
    Q-profile interval, Cochran's Q and I^2, and one line per hypothesised
    exponent.
    """
    pct = f"{100 * spread.confidence:g}%"
    what = f"{spread.method.upper()} exponents" if spread.method else "exponents"
    lines = [
        f"{what} of {spread.k} groups, random effects ({spread.tau2_method.upper()}):",
        f"  mean exponent {spread.mean:.4g} ({pct} CI {spread.mean_ci.low:.4g} to "
        f"{spread.mean_ci.high:.4g}, {spread.mean_interval.replace('_', '-')})",
        f"  between-group SD tau {spread.tau:.3g} ({pct} CI {spread.tau_ci.low:.3g} to "
        f"{spread.tau_ci.high:.3g}, Q-profile)",
        f"  heterogeneity Q = {spread.q:.4g} on {spread.q_df:g} df "
        f"(p {format_p(spread.q_p_value)}), I^2 = {100 * spread.i2:.1f}%",
    ]
    for t in spread.tests:
        lines.append(f"  mean vs {t['hypothesis']} ({t['exponent']:g}): "
                     f"statistic {t['statistic']:.3g}, p {format_p(t['p_value'])}")
    return "\n".join(lines)
