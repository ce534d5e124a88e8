"""The Deming line as a rescaled major axis: the one place the rescaling is written.

With lam = var(error in Y) / var(error in X), dividing Y by k = sqrt(lam)
makes the two error variances equal, so the Deming line of (X, Y) is the
MA line of (X, Y' = Y/k) with its slope and intercept multiplied by k, and
a test of slope = b0 is the MA test of (X, Y') against b0' = b0/k (exact
algebra; Deming 1943, see :mod:`scaling.stats.robust`).  Fits
(:func:`scaling.stats.robust.deming_moments`), tests
(:meth:`scaling.stats.line_results.LineFit.test_slope`, :func:`scaling.fit_groups`),
bootstrap replicates and permutation tests (:mod:`scaling.stats.resampling`,
:mod:`scaling.stats.permutation`) all go through these functions.
"""

from __future__ import annotations

import math

from .lines import slope_test_statistic
from .moments import Moments

__all__ = ["deming_factor", "to_ma_scale", "deming_slope_test"]


def deming_factor(lam: float) -> float:
    """k = sqrt(lam): Y' = Y/k and b0' = b0/k; slopes and intercepts scale back by k."""
    return math.sqrt(lam)


def to_ma_scale(m: Moments, lam: float) -> tuple[Moments, float]:
    """The moments of (X, Y/sqrt(lam)) and the factor k = sqrt(lam) that scales back.

    Vectorised: ``m`` may hold any number of groups or resamples.
    """
    k = deming_factor(lam)
    scaled = Moments(n=m.n, mean_x=m.mean_x, mean_y=m.mean_y / k, sxx=m.sxx,
                     syy=m.syy / lam, sxy=m.sxy / k)
    return scaled, k


def deming_slope_test(m: Moments, lam: float, b0) -> tuple:
    """t, df and two-sided p of the Deming test of slope = ``b0`` (vectorised over ``m``).

    The MA test of :func:`scaling.stats.lines.slope_test_statistic` on
    (X, Y/sqrt(lam)) against b0/sqrt(lam); the Deming interval is its inversion.
    """
    scaled, k = to_ma_scale(m, lam)
    return slope_test_statistic(scaled, "ma", b0 / k)
