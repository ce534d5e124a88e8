"""Groups: their means, the line through the means, and comparisons of lines.

Notation: X = log x, Y = log y; for group i of G groups, n_i rows, the
means Xbar_i, Ybar_i and centred sums Sxx_i, Syy_i, Sxy_i come from one
vectorised pass of :func:`scaling.stats.moments.group_moments`; nu_i = n_i - 1.

Comparing SMA or MA lines (Warton & Weber 2002, Biom. J. 44:161;
Warton, Wright, Falster & Westoby 2006, Biol. Rev. 81:259)
------------------------------------------------------------------------
For a slope b define per row the *residual axis* score r = Y - bX and the
*fitted axis* score

* SMA: f = Y + bX.  The SMA slope of a bivariate normal is the b at which
  cov(r, f) = var(Y) - b^2 var(X) = 0;
* MA:  f = X + bY.  cov(r, f) = cov(X,Y)(1 - b^2) + b(var Y - var X) = 0
  exactly at the major-axis slope.

So "group i has slope b" means r and f are uncorrelated in group i, and
(X, Y) -> (r, f) is a linear map with |Jacobian| 2|b| (SMA) or 1 + b^2 (MA).

Likelihood.  We use the likelihood of the centred sums, S_i ~ Wishart(nu_i,
Sigma_i) (the likelihood after the group means are removed, which is why
nu_i = n_i - 1 and not n_i appears).  With Sigma_i diagonal in (r, f)
coordinates and the two variances profiled out (sigma_r^2 = Srr_i(b)/nu_i,
sigma_f^2 = Sff_i(b)/nu_i) the log-likelihood of a common slope is, up to a
constant, -F(b)/2 with

* SMA: F = sum_i nu_i log(q_i + sinh^2(u - m_i)),  u = log|b|,
  m_i = log sqrt(Syy_i/Sxx_i) (the group's own SMA slope), q_i = 1 - r_i^2;
* MA:  F = sum_i nu_i log(q_i + (1 - q_i) sin^2(w - phi_i)),  w = 2 atan(b),
  phi_i = atan2(2 Sxy_i, Sxx_i - Syy_i) (twice the angle of the group's own
  major axis), q_i = 4 det(S_i)/tr(S_i)^2.

(Derivation: Srr Sff = Srf^2 + J^2 det S, so Srr Sff / J^2 = det S/(1 - r_rf^2),
and rewriting with the group's own slope gives the forms above.)  Each term
is smallest (= log q_i) at the group's own slope, so the saturated model
(separate slopes) has F_sep = sum nu_i log q_i and

    LR = F(b_common) - F_sep,  df = G - 1            (Warton & Weber 2002).

The common slope minimises F.  F' changes sign between the smallest and
largest group slopes (every term pulls towards its own slope), so it is found
by a safeguarded Newton iteration on that bracket, vectorised over any number
of datasets at once.  The SMA likelihood depends on |b| only; the sign of the
common SMA slope is the sign of the pooled within-group covariance sum Sxy_i
(a warning is given if a group's correlation has the other sign).  The MA
likelihood cannot tell an axis from its perpendicular (F has period pi in
w); we take the one nearest the pooled within-group major axis.

Interval for the common slope: the profile-likelihood set
{b : F(b) - F(b_hat) <= c} with the small-sample threshold
c = nu log(1 + F_{1-alpha}(1, nu - 1)/(nu - 1)), nu = sum nu_i.  For one group
F(b) - F(b_hat) = -nu log(1 - r_rf^2(b)), so this set is exactly the interval
of Warton et al. (2006) obtained by inverting the correlation test of one
slope; with several groups it is the same rule with pooled degrees of freedom
(our generalisation).  When the tests are bootstrapped (below), c is
replaced by the ``confidence`` quantile of F*(b_hat) - F*(b_hat*) over the
bootstrap replicates, which brings coverage of small, many-group designs
from 0.92 to 0.94-0.96 (docs/group_tests.md).
The standard error of the common slope is from the observed information of
the profile likelihood: var(u) = 2/F''(u_hat) (SMA; var(b) = b^2 var(u)),
var(w) = 2/F''(w_hat) (MA; var(b) = ((1 + b^2)/2)^2 var(w)).  With one group
these reduce to b^2 (1 - r^2)/nu and (1 + b^2)^2 l1 l2/(nu (l1 - l2)^2).

Given the common slope b, the group means of the axis scores are
rbar_i = Ybar_i - b Xbar_i (the elevation, i.e. intercept) and fbar_i
(Ybar_i + b Xbar_i for SMA; Xbar_i + b Ybar_i for MA: position along the
axis).  Each is tested for equality among groups with a Wald statistic

    W = min_mu (t - mu 1)' V^{-1} (t - mu 1),   df = G - 1,

V = diag(s_i^2/n_i) + var(b) c c', where s_i^2 = Srr_i(b)/nu_i (elevation)
or Sff_i(b)/nu_i (axis) and c_i = d t_i/d b (= -Xbar_i for elevation; Xbar_i
for the SMA axis, Ybar_i for the MA axis): the second term carries the
uncertainty of the common slope into both tests (Warton et al. 2006, tests
for shift in elevation and shift along the common axis).  W is computed with
the Sherman-Morrison inverse, vectorised.  The axis-shift test is meaningful
mainly once slopes (and elevations) are found equal.

Calibration.  LR and W are referred to chi^2(G - 1); in small groups that
reference is liberal (measured sizes in ``docs/group_tests.md``).  The
default (``calibration="auto"``) therefore uses a parametric bootstrap when
the smallest group has fewer than :data:`AUTO_BOOTSTRAP_BELOW` points: the
fitted null model (common slope; Sigma_i diagonal in (r, f) with the
profiled variances; for the elevation test all rbar_i equal, fbar_i as
observed; for the axis test all fbar_i equal, rbar_i as observed) is
simulated B times for all groups in one array pass -- S_i* by the Bartlett
decomposition of a 2x2 Wishart(nu_i, Sigma_i), the means as independent
normals N(mu_i, Sigma_i/n_i) -- the statistics are recomputed on every
replicate, and p = (1 + #{T* >= T})/(B + 1) (Davison & Hinkley 1997,
Bootstrap Methods and their Application, eq. 4.11).  All three statistics are
invariant to the location of the data, so this is exact up to Monte Carlo
error whenever the null distribution does not depend on the nuisance
parameters, and a good approximation when it depends on them weakly.

Comparing OLS lines: analysis of covariance from moments
---------------------------------------------------------
RSS_sep = sum_i (Syy_i - Sxy_i^2/Sxx_i) on N - 2G df (separate lines);
RSS_par = sum Syy_i - (sum Sxy_i)^2/sum Sxx_i on N - G - 1 df (parallel lines,
common slope b_w = sum Sxy_i/sum Sxx_i); RSS_one from the pooled moments on
N - 2 df.  slopes_equal: F = ((RSS_par - RSS_sep)/(G - 1))/(RSS_sep/(N - 2G));
intercepts_equal (given parallel lines): F = ((RSS_one - RSS_par)/(G - 1)) /
(RSS_par/(N - G - 1)).  shift_along_axis for OLS is the one-way ANOVA F of
log x among groups (the groups' positions along the x axis), on
(G - 1, N - G) df.  (Textbook ANCOVA, e.g. Sokal & Rohlf, Biometry, 4th ed.,
2012, ch. 14; checked against statsmodels ``anova_lm`` in the tests.)
"""

from __future__ import annotations

import itertools
import math
import warnings
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd
from scipy import optimize, stats

from ._display import frame_html, short_repr
from ..errors import ConfigError, DataError, DegenerateDataWarning
from .line_results import ConfidenceInterval, LineFit, SlopeTest, line_fit_from_moments
from .lines import METHODS, exponent_value, fit_notes, parse_log_base, to_log
from .moments import Moments, group_moments, moments, weighted_moments
from .schema import EXACT_NOTE, GROUP_TEST_COLUMNS, PAIRWISE_COLUMNS, check_confidence
from ..render.wording import p_text

__all__ = [
    "TESTS",
    "AUTO_BOOTSTRAP_BELOW",
    "GroupMeansResult",
    "group_means",
    "fit_group_means",
    "compared_groups",
    "excluded_text",
    "CommonSlope",
    "common_slope",
    "GroupTest",
    "PairwiseTest",
    "holm_adjust",
    "GroupComparison",
    "compare_groups",
    "common_slope_rows",
]

#: Names of the three comparisons, in the order they are reported.
TESTS = ("slopes_equal", "intercepts_equal", "shift_along_axis")

#: ``calibration="auto"`` uses the parametric bootstrap when the smallest
#: compared group has fewer points than this (see docs/group_tests.md for the
#: measured chi-square sizes that set it).
AUTO_BOOTSTRAP_BELOW = 100

_CALIBRATIONS = ("auto", "chi2", "bootstrap")
_TEST_COLUMNS = tuple(GROUP_TEST_COLUMNS)
_PAIR_COLUMNS = tuple(PAIRWISE_COLUMNS)


# --------------------------------------------------------------------------
# validation helpers (messages name the argument)


def _check_method(method) -> str:
    if not isinstance(method, str) or method.lower() not in METHODS:
        raise ConfigError(f"method must be one of {', '.join(METHODS)}, not {method!r}")
    return method.lower()


def _check_base(log_base):
    try:
        return parse_log_base(log_base)
    except ValueError as exc:
        raise ConfigError(str(exc)) from None


def _check_int(value, name: str, minimum: int) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < minimum:
        raise ConfigError(f"{name} must be an integer >= {minimum}, not {value!r}")
    return int(value)


def _factorize(groups, n_rows: int):
    groups = np.asarray(groups, dtype=object) if not isinstance(groups, pd.Series) \
        else groups.to_numpy(dtype=object)
    if groups.ndim != 1 or groups.size != n_rows:
        raise DataError(f"groups must be one label per row ({n_rows} rows), "
                        f"not shape {groups.shape}")
    codes, labels = pd.factorize(pd.Series(groups), sort=True, use_na_sentinel=True)
    if np.any(codes < 0):
        raise DataError("groups has missing labels; drop or name those rows first")
    return codes.astype(np.intp), tuple(labels.tolist())


def _check_logs(log_x, log_y):
    X = np.asarray(log_x, dtype=float)
    Y = np.asarray(log_y, dtype=float)
    if X.ndim != 1 or X.shape != Y.shape:
        raise DataError(f"log_x and log_y must be 1-d arrays of one length, "
                        f"not shapes {X.shape} and {Y.shape}")
    if not (np.all(np.isfinite(X)) and np.all(np.isfinite(Y))):
        raise DataError("log_x and log_y must be finite numbers (no NaN or inf)")
    return X, Y


#: Relative spread below which a group's log x or log y counts as constant:
#: S <= (eps * scale)^2 n with scale the root mean square of the values (see
#: :func:`_no_variation`).  Two-pass centred sums of equal values carry
#: rounding of about n * 1e-16 * |value| in the mean, far below this.
NO_VARIATION_EPS = 1e-9

#: Within-group residual share 1 - r^2 below which the data count as an exact
#: power law (no residual scatter), for the whole comparison (OLS) or a group
#: (SMA, MA).
EXACT_FIT_TOL = 2e-12

#: ``pairwise_max`` default: pairwise tests are made for at most this many groups.
PAIRWISE_MAX = 20



def _no_variation(n, mean, ss):
    """True where a group's values do not vary relative to their scale.

    Notes
    -----
    With S the centred sum of squares and scale^2 = mean^2 + S/n (the mean
    square of the values), flags S <= (eps * scale)^2 * n, eps =
    :data:`NO_VARIATION_EPS`: the spread is below eps times the size of the
    values, which for logs of equal numbers is pure rounding (y = 0.3 in
    every row gives S of about 1e-32, not 0).  Rearranged without division:
    S (1 - eps^2) <= eps^2 n mean^2.
    """
    n, mean, ss = (np.asarray(a, dtype=float) for a in (n, mean, ss))
    eps2 = NO_VARIATION_EPS ** 2
    with np.errstate(invalid="ignore"):
        return ~(ss * (1.0 - eps2) > eps2 * n * mean * mean)


def _exclusion_reasons(m: Moments, labels, method: str, min_n: int) -> list:
    """Why each group is left out of comparisons ("" if it is used).

    The same rule decides the groups of :func:`compare_groups` and of
    :func:`fit_group_means`, so the line through the means and the comparisons
    use exactly the same groups.
    """
    notes = fit_notes(m, method)
    flat_x = _no_variation(m.n, m.mean_x, m.sxx)
    flat_y = _no_variation(m.n, m.mean_y, m.syy)
    reasons = []
    for i in range(len(labels)):
        if m.n[i] < min_n:
            reasons.append(f"n = {int(m.n[i])} < {min_n}")
        elif flat_x[i]:
            reasons.append("x does not vary (log x constant up to rounding): "
                           "no line to compare")
        elif flat_y[i]:
            reasons.append("y does not vary (log y constant up to rounding): "
                           "no line to compare")
        elif notes[i]:
            reasons.append(str(notes[i]))
        elif method != "ols" and 1.0 - float(m.r[i]) ** 2 <= EXACT_FIT_TOL:
            reasons.append(_EXACT_LINE)
        else:
            reasons.append("")
    return reasons


_EXACT_LINE = "points lie exactly on a line: no scatter to compare"


def _compared_groups(m: Moments, labels, method: str, min_n: int):
    """Indices of the groups compared, (label, reason) of those left out, all-exact flag.

    SMA/MA leave out a group lying exactly on a line when others have
    scatter; when every usable group is an exact line they are all kept and
    compared as exact data (``all_exact``).
    """
    reasons = _exclusion_reasons(m, labels, method, min_n)
    used = [i for i, why in enumerate(reasons) if not why]
    exact_only = [i for i, why in enumerate(reasons) if why == _EXACT_LINE]
    all_exact = not used and len(exact_only) >= 2
    if all_exact:
        used = exact_only
        reasons = ["" if i in used else why for i, why in enumerate(reasons)]
    excluded = tuple((labels[i], reasons[i]) for i in range(len(labels)) if reasons[i])
    return used, excluded, all_exact


# --------------------------------------------------------------------------
# group means


@dataclass(frozen=True, slots=True, kw_only=True)
class GroupMeansResult:
    """Per-group means of the logs and their standard errors.

    Attributes
    ----------
    groups : tuple
        Group labels, sorted.
    n : ndarray of int
        Points (units) per group.
    mean_log_x, mean_log_y : ndarray
        Group means of log x and log y.
    se_log_x, se_log_y : ndarray
        Standard errors sd/sqrt(n) (sd with n - 1 divisor; NaN for n = 1).
    n_rows : ndarray of int or None
        Input rows behind the units of each group, when given.
    """

    groups: tuple
    n: np.ndarray
    mean_log_x: np.ndarray
    mean_log_y: np.ndarray
    se_log_x: np.ndarray
    se_log_y: np.ndarray
    n_rows: np.ndarray | None = None

    def to_frame(self) -> pd.DataFrame:
        """One row per group with the columns of ``group_means.csv``."""
        out = pd.DataFrame({
            "group": list(self.groups), "n": self.n.astype(int),
            "mean_log_x": self.mean_log_x, "mean_log_y": self.mean_log_y,
            "se_log_x": self.se_log_x, "se_log_y": self.se_log_y,
        })
        if self.n_rows is not None:
            out["n_rows"] = self.n_rows.astype(int)
        return out


def _means_from_moments(m: Moments):
    with np.errstate(divide="ignore", invalid="ignore"):
        var_x = np.where(m.n > 1, m.sxx / (m.n - 1), np.nan)
        var_y = np.where(m.n > 1, m.syy / (m.n - 1), np.nan)
        return np.sqrt(var_x / m.n), np.sqrt(var_y / m.n)


def group_means(log_x, log_y, groups, *, n_rows=None) -> GroupMeansResult:
    """Means and standard errors of log x and log y in every group.

    Parameters
    ----------
    log_x, log_y : array_like, shape (n,)
        Values already on the log scale.
    groups : array_like, shape (n,)
        Group label of each row.
    n_rows : array_like of int, shape (n,), optional
        Input rows behind each point (after averaging within units); summed
        per group into the ``n_rows`` column.

    Returns
    -------
    GroupMeansResult

    Notes
    -----
    se = sqrt(S/(n - 1))/sqrt(n) with S the centred sum of squares from
    :func:`scaling.stats.moments.group_moments` (all groups in one pass).
    """
    X, Y = _check_logs(log_x, log_y)
    codes, labels = _factorize(groups, X.size)
    m = group_moments(X, Y, codes, n_groups=len(labels))
    se_x, se_y = _means_from_moments(m)
    rows = None
    if n_rows is not None:
        counts = np.asarray(n_rows, dtype=float)
        if counts.shape != X.shape or np.any(~np.isfinite(counts)) or np.any(counts < 1):
            raise DataError("n_rows must give a positive count for every row")
        rows = np.bincount(codes, weights=counts, minlength=len(labels)).astype(int)
    return GroupMeansResult(groups=labels, n=m.n.astype(int), mean_log_x=m.mean_x,
                            mean_log_y=m.mean_y, se_log_x=se_x, se_log_y=se_y,
                            n_rows=rows)


def fit_group_means(log_x, log_y, groups, *, method: str, confidence: float = 0.95,
                    log_base=10, weighted: bool = False, min_n: int = 3) -> LineFit:
    """Fit one line through the means of the groups that :func:`compare_groups` compares.

    Parameters
    ----------
    log_x, log_y : array_like, shape (n,)
        Values on the log scale.
    groups : array_like, shape (n,)
        Group label of each row.
    method : {"ols", "sma", "ma"}
    confidence : float
    log_base : {10, "e", 2, None}
        Base the logs were taken in (labels the intercept of the result).
    weighted : bool
        Weight each group mean by its number of points.  Available for OLS
        only (weighted least squares).
    min_n : int
        As in :func:`compare_groups`: groups with fewer points are left out.

    Returns
    -------
    LineFit
        ``n`` is the number of groups used; intervals use n - 2 df.  Groups
        left out are named with their reasons in ``note`` ("groups left out
        of the line through the means: ...") and in a
        :class:`~scaling.errors.DegenerateDataWarning`.

    Notes
    -----
    The groups used are exactly those :func:`compare_groups` compares with
    the same ``method`` and ``min_n``: a group with fewer than ``min_n``
    points (a one-point group has a mean but no line), with no variation in
    log x or log y (relative to their size), or (SMA, MA) lying exactly on a
    line while others scatter, is left out of both, with the same reason.

    Unweighted: the fit of :func:`scaling.stats.lines.line_fit_from_moments` to the
    moments of the G means.  Weighted OLS: the weighted moments with weights
    w_i = G n_i / sum n_i (normalised to sum to G), so that the usual formulas
    give weighted least squares: b = Sxy_w/Sxx_w, s^2 = sum w e^2/(G - 2),
    var(b) = s^2/Sxx_w, var(a) = s^2 (1/sum w + xbar_w^2/Sxx_w) (Draper &
    Smith, Applied Regression Analysis, 3rd ed., 1998, sec. 9.2; equal to
    statsmodels WLS in the tests).  No weighted SMA or MA with intervals we
    could cite is implemented, so ``weighted=True`` is refused for them.
    """
    method = _check_method(method)
    confidence = check_confidence(confidence)
    base = _check_base(log_base)
    min_n = _check_int(min_n, "min_n", 3)
    if weighted and method != "ols":
        raise ConfigError(f"weighted=True is available only for method='ols' (weighted least "
                          f"squares), not {method!r}: no weighted {method.upper()} estimator "
                          "with valid intervals is implemented")
    X, Y = _check_logs(log_x, log_y)
    codes, labels = _factorize(groups, X.size)
    gm = group_moments(X, Y, codes, n_groups=len(labels))
    used, excluded, _ = _compared_groups(gm, labels, method, min_n)
    idx = np.asarray(used, dtype=np.intp)
    mx, my, counts = gm.mean_x[idx], gm.mean_y[idx], gm.n[idx]
    if weighted:
        w = counts * (len(mx) / counts.sum()) if len(mx) else counts
        m = weighted_moments(mx, my, w)
    else:
        m = moments(mx, my)
    fit = line_fit_from_moments(m, method, confidence=confidence, log_base=base)
    if fit.note:
        warnings.warn(f"line through group means: {fit.note}", DegenerateDataWarning,
                      stacklevel=2)
    if excluded:
        left = excluded_text(excluded)
        warnings.warn(f"groups left out of the line through the means: {left}",
                      DegenerateDataWarning, stacklevel=2)
        text = f"groups left out of the line through the means: {left}"
        fit = replace(fit, note=f"{fit.note}; {text}" if fit.note else text)
    return fit


def compared_groups(log_x, log_y, groups, *, method: str = "sma", min_n: int = 3):
    """Labels of the groups :func:`compare_groups` compares, and those it leaves out.

    Returns
    -------
    used : tuple
        Labels (sorted) of the groups compared.
    excluded : tuple of (label, reason)

    Notes
    -----
    The rule of :func:`compare_groups` and :func:`fit_group_means`: fewer than
    ``min_n`` points; log x or log y not varying relative to its size (S <=
    (1e-9 scale)^2 n, scale^2 = mean^2 + S/n); a line that cannot be
    estimated; (SMA, MA) an exact line while other groups scatter.
    """
    method = _check_method(method)
    min_n = _check_int(min_n, "min_n", 3)
    X, Y = _check_logs(log_x, log_y)
    codes, labels = _factorize(groups, X.size)
    gm = group_moments(X, Y, codes, n_groups=len(labels))
    used, excluded, _ = _compared_groups(gm, labels, method, min_n)
    return tuple(labels[i] for i in used), excluded


def excluded_text(excluded, limit: int = 12) -> str:
    """'a (n = 1 < 3), b (...)' for (label, reason) pairs, at most ``limit`` named."""
    shown = ", ".join(f"{g} ({why})" for g, why in excluded[:limit])
    more = f" and {len(excluded) - limit} more" if len(excluded) > limit else ""
    return shown + more


# --------------------------------------------------------------------------
# the vectorised core for SMA and MA: arrays of shape (M, G)


def _profile_terms(method: str, x, loc, q, nu, order: int = 2):
    """F, F' and F'' of the profile objective at x (shape (M,)), summed over groups."""
    if method == "sma":
        t = np.clip(x[:, None] - loc, -100.0, 100.0)
        sh = np.sinh(t)
        d = q + sh * sh
        terms = [np.log(d)]
        if order >= 1:
            terms.append(np.sinh(2 * t) / d)
        if order >= 2:
            terms.append((1.0 + np.cosh(2 * t) * (2 * q - 1)) / (d * d))
    else:
        psi = x[:, None] - loc
        s = np.sin(psi)
        k = 1.0 - q
        d = q + k * s * s
        terms = [np.log(d)]
        if order >= 1:
            terms.append(k * np.sin(2 * psi) / d)
        if order >= 2:
            terms.append((2 * k * np.cos(2 * psi) * d - (k * np.sin(2 * psi)) ** 2) / (d * d))
    return [np.sum(nu * term, axis=-1) for term in terms]


def _newton_bracketed(method, loc, q, nu, lo, hi, x0, *, iters: int = 80):
    """Root of F' in [lo, hi] (F'(lo) <= 0 <= F'(hi)), Newton with bisection fallback."""
    x = x0.copy()
    lo, hi = lo.copy(), hi.copy()
    for _ in range(iters):
        _, g1, g2 = _profile_terms(method, x, loc, q, nu)
        neg = g1 < 0
        lo = np.where(neg, x, lo)
        hi = np.where(neg, hi, x)
        with np.errstate(divide="ignore", invalid="ignore"):
            xn = x - g1 / g2
        bad = ~(g2 > 0) | ~(xn >= lo) | ~(xn <= hi) | ~np.isfinite(xn)
        xn = np.where(bad, 0.5 * (lo + hi), xn)
        done = np.all(np.abs(xn - x) <= 1e-12 * (1.0 + np.abs(x)))
        x = xn
        if done:
            break
    return x


def _golden(method, loc, q, nu, lo, hi, *, iters: int = 80):
    """Minimise F on [lo, hi] by golden-section search (rows in parallel)."""
    ratio = (math.sqrt(5) - 1) / 2
    a, b = lo.copy(), hi.copy()
    c = b - ratio * (b - a)
    d = a + ratio * (b - a)
    fc = _profile_terms(method, c, loc, q, nu, order=0)[0]
    fd = _profile_terms(method, d, loc, q, nu, order=0)[0]
    for _ in range(iters):
        left = fc < fd
        b = np.where(left, d, b)
        a = np.where(left, a, c)
        c_new = b - ratio * (b - a)
        d_new = a + ratio * (b - a)
        c, d = c_new, d_new
        fc = _profile_terms(method, c, loc, q, nu, order=0)[0]
        fd = _profile_terms(method, d, loc, q, nu, order=0)[0]
    return 0.5 * (a + b)


def _grid_values(method, grid, loc, q, nu, *, block: int = 2_000_000):
    """F at every point of ``grid`` (M, P): blocks of grid points in one array pass.

    Each block holds at most about ``block`` (row, point, group) terms, so
    memory stays bounded for any number of groups.
    """
    M, P = grid.shape
    per = max(1, block // max(M * loc.shape[-1], 1))
    out = np.empty((M, P))
    for j0 in range(0, P, per):
        g = grid[:, j0:j0 + per, None]
        if method == "sma":
            sh = np.sinh(np.clip(g - loc[:, None, :], -100.0, 100.0))
            d = q[:, None, :] + sh * sh
        else:
            s = np.sin(g - loc[:, None, :])
            d = q[:, None, :] + (1.0 - q[:, None, :]) * s * s
        out[:, j0:j0 + per] = np.sum(nu[:, None, :] * np.log(d), axis=-1)
    return out


def _grid_minimum(method, loc, q, nu, lo, hi, *, points: int = 361):
    """Global minimum of F on [lo, hi] by a grid, then golden section nearby."""
    grid = lo[:, None] + (hi - lo)[:, None] * np.linspace(0.0, 1.0, points)
    values = _grid_values(method, grid, loc, q, nu)
    j = np.argmin(values, axis=1)
    step = (hi - lo) / (points - 1)
    centre = grid[np.arange(grid.shape[0]), j]
    return _golden(method, loc, q, nu, np.maximum(centre - step, lo),
                   np.minimum(centre + step, hi))


def _axis_params(method, sxx, syy, sxy):
    """Per-group location (m_i or phi_i), q_i, and the search window, arrays (M, G)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        if method == "sma":
            loc = 0.5 * (np.log(syy) - np.log(sxx))
            q = 1.0 - sxy * sxy / (sxx * syy)
            sign = np.where(np.sum(sxy, axis=-1) < 0, -1.0, 1.0)
            return loc, np.maximum(q, 1e-300), sign, None
        trace = sxx + syy
        q = 4.0 * (sxx * syy - sxy * sxy) / (trace * trace)
        phi = np.arctan2(2 * sxy, sxx - syy)
        phi0 = np.arctan2(2 * np.sum(sxy, axis=-1), np.sum(sxx - syy, axis=-1))
        # Bring each phi_i within pi/2 of phi0 (F has period pi in w).
        loc = phi0[:, None] + np.mod(phi - phi0[:, None] + np.pi / 2, np.pi) - np.pi / 2
        return loc, np.clip(q, 1e-300, 1.0), None, phi0


def _fit_common(method: str, n, sxx, syy, sxy, *, exact: bool = False) -> dict:
    """Common SMA/MA slope, LR statistic and profile quantities, rows in parallel.

    Arrays have shape (M, G).  ``exact`` adds a grid search for the global
    minimum (used for observed data; bootstrap replicates use Newton only).
    """
    nu = n - 1.0
    loc, q, sign, phi0 = _axis_params(method, sxx, syy, sxy)
    lo, hi = loc.min(axis=-1), loc.max(axis=-1)
    x0 = np.clip(np.sum(nu * loc, axis=-1) / np.sum(nu, axis=-1), lo, hi)
    x = _newton_bracketed(method, loc, q, nu, lo, hi, x0)
    if method == "ma":
        wide = (hi - lo) >= np.pi / 2  # bracket not guaranteed: search the window
        if np.any(wide):
            idx = np.flatnonzero(wide)
            x[idx] = _grid_minimum(method, loc[idx], q[idx], nu[idx],
                                   phi0[idx] - np.pi / 2, phi0[idx] + np.pi / 2)
    if exact:
        if method == "sma":
            wlo, whi = lo, hi
        else:
            wlo, whi = phi0 - np.pi / 2, phi0 + np.pi / 2
        xg = _grid_minimum(method, loc, q, nu, wlo, whi, points=2001)
        fx = _profile_terms(method, x, loc, q, nu, order=0)[0]
        fg = _profile_terms(method, xg, loc, q, nu, order=0)[0]
        x = np.where(fg < fx - 1e-10 * (1 + np.abs(fx)), xg, x)
    fval, _, f2 = _profile_terms(method, x, loc, q, nu)
    lr = fval - np.sum(nu * np.log(q), axis=-1)
    if method == "sma":
        b = sign * np.exp(x)
        with np.errstate(divide="ignore", invalid="ignore"):
            var_b = b * b * 2.0 / f2
    else:
        x = np.mod(x + np.pi, 2 * np.pi) - np.pi   # slope angle theta = x/2 in [-pi/2, pi/2)
        b = np.tan(x / 2)
        with np.errstate(divide="ignore", invalid="ignore"):
            var_b = ((1 + b * b) / 2) ** 2 * 2.0 / f2
    return {"x": x, "b": b, "lr": np.maximum(lr, 0.0), "var_b": var_b, "fval": fval,
            "loc": loc, "q": q, "nu": nu, "sign": sign}


def _axis_scores(method, b, n, mx, my, sxx, syy, sxy):
    """Per-group residual/fitted axis variances and means at slope b (M,) -> (M, G)."""
    nu = n - 1.0
    bb = b[:, None]
    srr = syy - 2 * bb * sxy + bb * bb * sxx
    rbar = my - bb * mx
    if method == "sma":
        sff = syy + 2 * bb * sxy + bb * bb * sxx
        fbar = my + bb * mx
        c_f = mx
    else:
        sff = sxx + 2 * bb * sxy + bb * bb * syy
        fbar = mx + bb * my
        c_f = my
    return {"sr2": srr / nu, "sf2": sff / nu, "rbar": rbar, "fbar": fbar,
            "c_r": -mx, "c_f": c_f}


def _wald_equal(theta, d, c, v):
    """W = min_mu (t - mu)' V^-1 (t - mu), V = diag(d) + v c c' (rows in parallel)."""
    w = 1.0 / d
    sw = np.sum(w, axis=-1, keepdims=True)
    tc = theta - np.sum(w * theta, axis=-1, keepdims=True) / sw
    cc = c - np.sum(w * c, axis=-1, keepdims=True) / sw
    vv = v[:, None] if np.ndim(v) else v
    k = vv / (1.0 + vv * np.sum(w * cc * cc, axis=-1, keepdims=True))
    out = np.sum(w * tc * tc, axis=-1, keepdims=True) - k * np.sum(w * tc * cc, axis=-1,
                                                                  keepdims=True) ** 2
    return np.maximum(out[..., 0], 0.0)


def _wald_tests(method, fit, n, mx, my, sxx, syy, sxy):
    s = _axis_scores(method, fit["b"], n, mx, my, sxx, syy, sxy)
    w_int = _wald_equal(s["rbar"], s["sr2"] / n, s["c_r"], fit["var_b"])
    w_axis = _wald_equal(s["fbar"], s["sf2"] / n, s["c_f"], fit["var_b"])
    return w_int, w_axis, s


def _from_axis_coords(method, b, srr, srf, sff, rbar, fbar):
    """(r, f) sums and means back to (X, Y) for slope b (broadcasting)."""
    if method == "sma":
        sxx = (sff - 2 * srf + srr) / (4 * b * b)
        syy = (srr + 2 * srf + sff) / 4
        sxy = (sff - srr) / (4 * b)
        mx = (fbar - rbar) / (2 * b)
        my = (rbar + fbar) / 2
    else:
        k = 1 + b * b
        sxx = (b * b * srr - 2 * b * srf + sff) / (k * k)
        syy = (srr + 2 * b * srf + b * b * sff) / (k * k)
        sxy = (-b * srr + (1 - b * b) * srf + b * sff) / (k * k)
        mx = (fbar - b * rbar) / k
        my = (rbar + b * fbar) / k
    return sxx, syy, sxy, mx, my


def _bootstrap_counts(method, n, fit, scores, observed, n_boot: int, rng, *,
                      chunk: int = 200_000):
    """Counts of bootstrap statistics >= observed, shape (M, 3), for the three tests.

    Simulates ``n_boot`` datasets of the fitted null model for every row and
    group in array passes (rows are processed in chunks of about ``chunk``
    datasets to bound memory).
    """
    M, G = n.shape
    nu = n - 1.0
    counts = np.zeros((M, 3))
    profile = []
    per = max(1, chunk // max(M * G, 1))
    done = 0
    sr, sf = np.sqrt(scores["sr2"]), np.sqrt(scores["sf2"])
    wr, wf = n / scores["sr2"], n / scores["sf2"]
    r_pool = np.sum(wr * scores["rbar"], -1, keepdims=True) / np.sum(wr, -1, keepdims=True)
    f_pool = np.sum(wf * scores["fbar"], -1, keepdims=True) / np.sum(wf, -1, keepdims=True)
    b = fit["b"][:, None]
    while done < n_boot:
        B = min(per, n_boot - done)
        size = (B, M, G)
        a11 = rng.chisquare(nu, size=size)
        a22 = rng.chisquare(nu - 1, size=size)
        a21 = rng.standard_normal(size)
        z_r = rng.standard_normal(size) / np.sqrt(n)
        z_f = rng.standard_normal(size) / np.sqrt(n)
        srr = scores["sr2"] * a11
        srf = sr * sf * np.sqrt(a11) * a21
        sff = scores["sf2"] * (a21 * a21 + a22)
        # null for elevation: common rbar; null for axis: common fbar
        r_a, f_a = r_pool + sr * z_r, scores["fbar"] + sf * z_f
        r_b, f_b = scores["rbar"] + sr * z_r, f_pool + sf * z_f
        sxx, syy, sxy, mx_a, my_a = _from_axis_coords(method, b, srr, srf, sff, r_a, f_a)
        _, _, _, mx_b, my_b = _from_axis_coords(method, b, srr, srf, sff, r_b, f_b)
        flat = lambda a: np.broadcast_to(a, size).reshape(B * M, G)  # noqa: E731
        nn = flat(n)
        fit_b = _fit_common(method, nn, flat(sxx), flat(syy), flat(sxy))
        w_int, _, _ = _wald_tests(method, fit_b, nn, flat(mx_a), flat(my_a),
                                  flat(sxx), flat(syy), flat(sxy))
        _, w_axis, _ = _wald_tests(method, fit_b, nn, flat(mx_b), flat(my_b),
                                   flat(sxx), flat(syy), flat(sxy))
        boot = np.stack([fit_b["lr"], w_int, w_axis], axis=-1).reshape(B, M, 3)
        tol = 1e-9 * (1 + np.abs(observed))
        counts += np.sum(boot >= observed - tol, axis=0)
        # profile statistic F*(b_hat) - F*(b_hat*) at the slope the data were made with
        x_true = np.broadcast_to(fit["x"], (B, M)).reshape(B * M)
        if method == "sma":
            x_true = np.log(np.abs(np.broadcast_to(fit["b"], (B, M)).reshape(B * M)))
        f_true = _profile_terms(method, x_true, fit_b["loc"], fit_b["q"], fit_b["nu"],
                                order=0)[0]
        profile.append((f_true - fit_b["fval"]).reshape(B, M))
        done += B
    return counts, np.concatenate(profile, axis=0)


def _axis_tests(method: str, n, mx, my, sxx, syy, sxy, *, bootstrap: int | None, rng,
                exact: bool = False) -> dict:
    """Slope LR and elevation/axis Wald tests for SMA or MA, rows in parallel.

    Parameters
    ----------
    n, mx, my, sxx, syy, sxy : ndarray, shape (M, G)
        Moments of G groups in each of M datasets.
    bootstrap : int or None
        Replicates of the parametric bootstrap (None: chi-square p-values).

    Returns
    -------
    dict
        ``b`` and ``var_b`` (M,), ``statistic``, ``p_chi2`` and ``p_value``
        (M, 3) for the tests in :data:`TESTS` order, ``df`` = G - 1.
    """
    G = n.shape[-1]
    fit = _fit_common(method, n, sxx, syy, sxy, exact=exact)
    w_int, w_axis, scores = _wald_tests(method, fit, n, mx, my, sxx, syy, sxy)
    statistic = np.stack([fit["lr"], w_int, w_axis], axis=-1)
    p_chi2 = stats.chi2.sf(statistic, G - 1)
    profile = None
    if bootstrap:
        counts, profile = _bootstrap_counts(method, n, fit, scores, statistic, bootstrap, rng)
        p_value = (1.0 + counts) / (bootstrap + 1.0)
    else:
        p_value = p_chi2
    return {"b": fit["b"], "var_b": fit["var_b"], "statistic": statistic, "p_chi2": p_chi2,
            "p_value": p_value, "df": G - 1, "fit": fit, "boot_profile": profile}


def _profile_interval(method: str, fit: dict, confidence: float,
                      crit: float | None = None) -> tuple[float, float]:
    """Bounds of {b : F(b) - F(b_hat) <= c} for one dataset (see module notes).

    ``crit`` defaults to the small-sample threshold
    c = nu log(1 + F_conf(1, nu - 1)/(nu - 1)); the bootstrap passes its own.
    """
    loc, q, nu = fit["loc"][:1], fit["q"][:1], fit["nu"][:1]
    if crit is None:
        nu_tot = float(np.sum(nu))
        df2 = nu_tot - 1
        if df2 <= 0:
            return math.nan, math.nan
        crit = nu_tot * math.log1p(stats.f.ppf(confidence, 1, df2) / df2)
    x_hat = float(fit["x"][0])
    f_hat = float(fit["fval"][0])

    def excess(x):
        return float(_profile_terms(method, np.array([x]), loc, q, nu, order=0)[0][0]) \
            - f_hat - crit

    bounds = []
    for direction in (-1.0, 1.0):
        if method == "sma":
            reach = 1.0
            while excess(x_hat + direction * reach) <= 0 and reach < 200:
                reach *= 2
            far = x_hat + direction * reach
        else:
            grid = x_hat + direction * np.linspace(0, np.pi / 2, 721)[1:]
            vals = _profile_terms(method, grid, np.broadcast_to(loc, (grid.size, loc.shape[1])),
                                  np.broadcast_to(q, (grid.size, q.shape[1])),
                                  np.broadcast_to(nu, (grid.size, nu.shape[1])), order=0)[0]
            over = np.flatnonzero(vals - f_hat - crit > 0)
            if over.size == 0:
                bounds.append(math.nan)
                continue
            far = float(grid[over[0]])
        if excess(far) <= 0:
            bounds.append(math.nan)
            continue
        bounds.append(optimize.brentq(excess, x_hat, far, xtol=1e-13) if far != x_hat
                      else x_hat)
    lo_x, hi_x = bounds
    if method == "sma":
        sign = float(fit["sign"][0])
        ends = sorted([sign * math.exp(lo_x), sign * math.exp(hi_x)]) \
            if np.isfinite(lo_x) and np.isfinite(hi_x) else [math.nan, math.nan]
        return ends[0], ends[1]
    # MA: slope = tan(w/2); past the vertical (|w| >= pi) the interval is unbounded.
    if not (np.isfinite(lo_x) and np.isfinite(hi_x)) or lo_x <= -np.pi or hi_x >= np.pi:
        return math.nan, math.nan
    return math.tan(lo_x / 2), math.tan(hi_x / 2)


def _profile_test(method: str, fit: dict, b0, sums) -> dict:
    """Test of common slope = b0 that inverts :func:`_profile_interval`, rows in parallel.

    Parameters
    ----------
    fit : dict
        :func:`_fit_common` output for M datasets.
    b0 : float or ndarray (M,)
    sums : tuple of ndarray (M,)
        Pooled within-group sums (sum Sxx_i, sum Syy_i, sum Sxy_i), for the
        SMA test of a slope of the other sign.

    Returns
    -------
    dict
        ``excess`` D = F(b0) - F(b_hat) (the profile likelihood-ratio
        statistic), ``t``, ``df`` and the t-referred ``p`` (M,).

    Notes
    -----
    With nu = sum nu_i the interval of :func:`_profile_interval` is
    {b : D(b) <= nu log(1 + F_conf(1, nu - 1)/(nu - 1))}.  Solving for the F
    quantile gives the statistic

        Fstat = (nu - 1) (exp(D/nu) - 1)  on (1, nu - 1) df,   t = +-sqrt(Fstat),

    so p = P(F(1, nu - 1) >= Fstat) equals 1 - confidence exactly at either
    bound of the interval.  For one group D = -nu log(1 - r_rf^2(b0)) and
    Fstat = (n - 2) r^2/(1 - r^2): the square of the correlation t of
    Warton et al. (2006, Biol. Rev. 81:259, Table 4) used by
    :func:`scaling.stats.lines.slope_test_statistic`.  The sign of t is that of
    b_hat - b0 (SMA: of |b_hat| - |b0|, times the sign of b_hat).  SMA: b0 of the other sign than the common slope gets, when
    larger, the t of the pooled within-group correlation (as the one-group
    test does).  MA: a b0 more than 45 degrees from the common axis (the
    minor-axis side) gets the statistic at 45 degrees, as in the one-group
    test.
    """
    b0 = np.broadcast_to(np.asarray(b0, dtype=float), fit["b"].shape)
    loc, q, nu = fit["loc"], fit["q"], fit["nu"]
    nu_tot = np.sum(nu, axis=-1)
    df2 = nu_tot - 1.0
    b_hat = fit["b"]
    opposite = np.zeros(b_hat.shape, dtype=bool)
    with np.errstate(divide="ignore", invalid="ignore"):
        if method == "sma":
            x0 = np.log(np.abs(b0))
            opposite = b0 * fit["sign"] < 0
        else:
            d = np.mod(2 * np.arctan(b0) - fit["x"] + np.pi, 2 * np.pi) - np.pi
            x0 = fit["x"] + np.clip(d, -np.pi / 2, np.pi / 2)
        f0 = np.where(np.isfinite(x0),
                      _profile_terms(method, np.where(np.isfinite(x0), x0, 0.0), loc, q, nu,
                                     order=0)[0], np.inf)
        excess = np.maximum(f0 - fit["fval"], 0.0)
        fstat = df2 * np.expm1(excess / nu_tot)
        if method == "sma":   # sign as in the one-group test: |b_hat| against |b0|
            t = fit["sign"] * np.sign(fit["x"] - x0) * np.sqrt(fstat)
        else:
            t = np.sign(b_hat - b0) * np.sqrt(fstat)
        if method == "sma":
            sxx, syy, sxy = sums
            r_w = sxy / np.sqrt(sxx * syy)
            t_corr = np.abs(r_w) * np.sqrt(df2 / (1 - r_w * r_w)) * fit["sign"]
            use_corr = opposite & (np.abs(t_corr) > np.abs(t))
            t = np.where(use_corr, t_corr, t)
        else:
            use_corr = opposite
        p = 2 * stats.t.sf(np.abs(t), df2)
    return {"excess": excess, "t": t, "df": df2, "p": p, "use_corr": use_corr}


def _common_test_arrays(method: str, n, mx, my, sxx, syy, sxy, b0) -> dict:
    """Common slope and its test against b0 for M datasets of G groups (M, G) at once.

    OLS: t = (b_w - b0)/se on N - G - 1 df, b_w = sum Sxy_i/sum Sxx_i and
    se^2 = RSS_par/(N - G - 1)/sum Sxx_i (the parallel-lines model; the
    coefficient t test of ``logy ~ C(group) + logx``).  SMA/MA:
    :func:`_profile_test`.  Returns ``b``, ``t``, ``df``, ``p`` (M,).
    """
    n, mx, my, sxx, syy, sxy = (np.atleast_2d(np.asarray(a, dtype=float))
                                for a in (n, mx, my, sxx, syy, sxy))
    sums = (np.sum(sxx, -1), np.sum(syy, -1), np.sum(sxy, -1))
    if method == "ols":
        G = n.shape[-1]
        df = np.sum(n, -1) - G - 1.0
        b = sums[2] / sums[0]
        with np.errstate(divide="ignore", invalid="ignore"):
            rss = np.maximum(sums[1] - sums[2] ** 2 / sums[0], 0.0)
            se = np.sqrt(rss / df / sums[0])
            t = (b - b0) / se
        return {"b": b, "t": t, "df": df, "p": 2 * stats.t.sf(np.abs(t), df), "se": se}
    fit = _fit_common(method, n, sxx, syy, sxy)
    out = _profile_test(method, fit, b0, sums)
    out["b"] = fit["b"]
    return out


# --------------------------------------------------------------------------
# OLS: analysis of covariance from moments


def _ols_tests(n, mx, my, sxx, syy, sxy) -> dict:
    """ANCOVA F tests for one dataset of G groups (1-d arrays); see module notes.

    Exact data (within-group residual sum RSS_sep <= :data:`EXACT_FIT_TOL`
    times sum Syy_i: no residual scatter) give NaN slope and intercept tests
    (their F would be 0/0 or x/0, i.e. rounding noise or inf) and, when the
    parallel-lines residuals vanish too, a standard error of exactly 0 for the
    common slope; ``exact`` is then True.
    """
    G = n.size
    N = float(n.sum())
    tol = EXACT_FIT_TOL * float(np.sum(syy))
    rss_sep = np.float64(np.sum(syy - sxy * sxy / sxx))
    b_w = float(np.sum(sxy) / np.sum(sxx))
    rss_par = np.float64(np.sum(syy) - np.sum(sxy) ** 2 / np.sum(sxx))
    pooled = _pool(n, mx, my, sxx, syy, sxy)
    rss_one = np.float64(pooled.syy - pooled.sxy ** 2 / pooled.sxx)
    exact_sep, exact_par = bool(rss_sep <= tol), bool(rss_par <= tol)
    df_sep, df_par = N - 2 * G, N - G - 1
    out = {"b": b_w, "rows": [], "exact": exact_sep}
    f_slope = f_int = f_axis = math.nan
    with np.errstate(divide="ignore", invalid="ignore"):
        if G > 1 and df_sep > 0 and not exact_sep:
            f_slope = float(((rss_par - rss_sep) / (G - 1)) / (rss_sep / df_sep))
        if G > 1 and df_par > 0 and not exact_par:
            f_int = float(((rss_one - rss_par) / (G - 1)) / (rss_par / df_par))
        if G > 1 and N > G and float(np.sum(sxx)) > 0:
            ss_between = float(np.sum(n * (mx - pooled.mean_x) ** 2))
            f_axis = (ss_between / (G - 1)) / (float(np.sum(sxx)) / (N - G))
    for stat, d1, d2 in ((f_slope, G - 1, df_sep), (f_int, G - 1, df_par),
                         (f_axis, G - 1, N - G)):
        p = float(stats.f.sf(stat, d1, d2)) if np.isfinite(stat) else math.nan
        out["rows"].append((float(stat), float(d1), float(d2), p))
    if df_par <= 0:
        out["se"] = math.nan
    elif exact_par:
        out["se"] = 0.0
    else:
        out["se"] = math.sqrt(max(float(rss_par), 0.0) / df_par / float(np.sum(sxx)))
    out["df_par"] = df_par
    return out


def _pool(n, mx, my, sxx, syy, sxy) -> Moments:
    """Moments of the union of groups from the group moments (exact identity)."""
    N = n.sum()
    gx, gy = np.sum(n * mx) / N, np.sum(n * my) / N
    return Moments(n=np.asarray(N), mean_x=np.asarray(gx), mean_y=np.asarray(gy),
                   sxx=np.asarray(np.sum(sxx) + np.sum(n * (mx - gx) ** 2)),
                   syy=np.asarray(np.sum(syy) + np.sum(n * (my - gy) ** 2)),
                   sxy=np.asarray(np.sum(sxy) + np.sum(n * (mx - gx) * (my - gy))))


# --------------------------------------------------------------------------
# common slope alone


@dataclass(frozen=True, slots=True, kw_only=True)
class CommonSlope:
    """The slope shared by several groups (lines allowed to differ in elevation).

    Attributes
    ----------
    method : str
    slope : float
    slope_ci : ConfidenceInterval
        At level ``confidence``; NaN bounds if unbounded (MA, weak correlation).
    slope_se : float
    n_groups : int
    n : int
        Total points.
    confidence : float
    """

    method: str
    slope: float
    slope_ci: ConfidenceInterval
    slope_se: float
    n_groups: int
    n: int
    confidence: float
    groups: tuple = ()
    df_resid: float = math.nan
    profile: dict | None = field(default=None, repr=False, compare=False)
    boot_profile: np.ndarray | None = field(default=None, repr=False, compare=False)

    def test_slope(self, exponent, *, hypothesis: str = "") -> SlopeTest:
        """Test common slope = ``exponent`` (two-sided): the inversion of ``slope_ci``.

        Parameters
        ----------
        exponent : float or str
            b0, e.g. ``0.75`` or ``"3/4"``.
        hypothesis : str
            Name recorded in the result.

        Returns
        -------
        SlopeTest
            ``statistic_type`` "t" on ``df_resid`` = N - G - 1 df; positive
            when the common slope is above b0.

        Notes
        -----
        OLS: t = (b_w - b0)/se(b_w) of the parallel-lines model (the
        coefficient test of ``logy ~ C(group) + logx``); the interval is
        b_w +- t_conf se.  SMA/MA: the profile likelihood-ratio statistic
        D = F(b0) - F(b_hat) (group means free) as
        t^2 = (nu - 1)(exp(D/nu) - 1) on nu - 1 df, nu = N - G, which is
        exactly the rule of the profile interval (see :func:`_profile_test`);
        p = 1 - confidence at the interval's bounds.  When the interval was
        calibrated by the parametric bootstrap (``boot_profile`` set),
        p = (1 + #{D* >= D})/(B + 1) over the same bootstrap profile
        statistics D* (Davison & Hinkley 1997, eq. 4.11), so p is about
        1 - confidence at the bounds, up to Monte Carlo discreteness.  With
        one group this is the test of :meth:`scaling.stats.lines.LineFit.test_slope`.
        """
        b0 = exponent_value(exponent)
        label = exponent.strip() if isinstance(exponent, str) else f"{b0:g}"
        common = dict(method=self.method, hypothesis=hypothesis or label, exponent=b0,
                      estimate=self.slope, df=self.df_resid, statistic_type="t")
        if not np.isfinite(self.slope) or not np.isfinite(self.slope_se):
            return SlopeTest(**common, statistic=math.nan, p_value=math.nan)
        if self.slope_se == 0:
            same = abs(b0 - self.slope) <= 1e-9 * max(abs(self.slope), 1e-300)
            return SlopeTest(**common, statistic=0.0 if same else math.copysign(
                math.inf, self.slope - b0), p_value=1.0 if same else 0.0, note=EXACT_NOTE)
        if self.method == "ols" or self.profile is None:
            t = (self.slope - b0) / self.slope_se
            return SlopeTest(**common, statistic=float(t),
                             p_value=float(2 * stats.t.sf(abs(t), self.df_resid)))
        res = _profile_test(self.method, self.profile, b0, self.profile["sums"])
        t, p = float(res["t"][0]), float(res["p"][0])
        if self.boot_profile is not None and not bool(res["use_corr"][0]):
            d = float(res["excess"][0])
            boot = self.boot_profile
            p = float((1 + np.sum(boot >= d - 1e-9 * (1 + abs(d)))) / (boot.size + 1))
        return SlopeTest(**common, statistic=t, p_value=p)


def _common_from_arrays(method, n, mx, my, sxx, syy, sxy, confidence, *, full=False):
    if method == "ols":
        res = _ols_tests(n, mx, my, sxx, syy, sxy)
        t = stats.t.ppf(0.5 + confidence / 2, res["df_par"]) if res["df_par"] > 0 else math.nan
        ci = ConfidenceInterval(float(res["b"] - t * res["se"]), float(res["b"] + t * res["se"]))
        return (res["b"], ci, res["se"], None) if full else (res["b"], ci, res["se"])
    fit = _fit_common(method, n[None], sxx[None], syy[None], sxy[None], exact=True)
    lo, hi = _profile_interval(method, fit, confidence)
    out = float(fit["b"][0]), ConfidenceInterval(lo, hi), float(np.sqrt(fit["var_b"][0]))
    return out + (_profile_state(fit, sxx, syy, sxy),) if full else out


def _profile_state(fit: dict, sxx, syy, sxy) -> dict:
    """The first dataset of a :func:`_fit_common` result, kept for slope tests."""
    keep = {k: (None if fit[k] is None else np.asarray(fit[k])[:1])
            for k in ("x", "b", "fval", "loc", "q", "nu", "sign")}
    keep["sums"] = tuple(np.atleast_1d(float(np.sum(a))) for a in (sxx, syy, sxy))
    return keep


def common_slope(log_x, log_y, groups, *, method: str = "sma",
                 confidence: float = 0.95) -> CommonSlope:
    """Estimate the slope common to all groups, with its interval.

    Parameters
    ----------
    log_x, log_y : array_like, shape (n,)
        Values on the log scale.
    groups : array_like, shape (n,)
        Group label of each row; every group needs at least 3 points with
        x and y varying.
    method : {"ols", "sma", "ma"}
    confidence : float

    Returns
    -------
    CommonSlope

    Notes
    -----
    OLS: the pooled within-group slope sum Sxy_i/sum Sxx_i with a t interval
    on N - G - 1 df (parallel-lines ANCOVA).  SMA/MA: maximum likelihood
    common slope and profile interval (Warton & Weber 2002; see the module
    notes).  With one group these are the ordinary one-group estimates and
    intervals.
    """
    method = _check_method(method)
    confidence = check_confidence(confidence)
    X, Y = _check_logs(log_x, log_y)
    codes, labels = _factorize(groups, X.size)
    m = group_moments(X, Y, codes, n_groups=len(labels))
    notes = fit_notes(m, method)
    bad = [f"{labels[i]!r}: {notes[i]}" for i in range(len(labels)) if notes[i]]
    if bad:
        raise DataError("groups cannot share a slope estimate: " + "; ".join(bad))
    b, ci, se, state = _common_from_arrays(method, m.n, m.mean_x, m.mean_y, m.sxx, m.syy,
                                           m.sxy, confidence, full=True)
    return CommonSlope(method=method, slope=b, slope_ci=ci, slope_se=se,
                       n_groups=len(labels), n=int(m.n.sum()), confidence=confidence,
                       groups=tuple(labels), df_resid=float(m.n.sum() - len(labels) - 1),
                       profile=state)


# --------------------------------------------------------------------------
# comparison results


@dataclass(frozen=True, slots=True, kw_only=True)
class GroupTest:
    """One comparison among all groups.

    ``df`` is the numerator df (G - 1); ``df_resid`` the denominator df of an
    F test (NaN for LR and Wald tests).  ``p_method`` is ``"chi2"``,
    ``"parametric_bootstrap(B)"`` or ``"F"``.
    """

    method: str
    test: str
    statistic: float
    df: float
    df_resid: float
    p_value: float
    p_method: str
    common_slope: float
    common_slope_low: float = math.nan
    common_slope_high: float = math.nan

    def to_record(self) -> dict:
        return {name: getattr(self, name) for name in _TEST_COLUMNS}


@dataclass(frozen=True, slots=True, kw_only=True)
class PairwiseTest:
    """One comparison between two groups; ``p_adjusted`` by Holm's method."""

    method: str
    test: str
    group_a: object
    group_b: object
    statistic: float
    df: float
    p_value: float
    p_adjusted: float

    def to_record(self) -> dict:
        return {name: getattr(self, name) for name in _PAIR_COLUMNS}


@dataclass(frozen=True, slots=True, kw_only=True)
class GroupComparison:
    """Do groups share a slope, an elevation, a position along the axis?

    Attributes
    ----------
    method : str
    group_column : str
    groups : tuple
        Labels of the groups compared (sorted).
    group_n : tuple of int
        Points in each compared group.
    excluded : tuple of (label, reason)
        Groups left out and why.
    common_slope, common_slope_se : float
    common_slope_ci : ConfidenceInterval
    tests : tuple of GroupTest
        In the order of :data:`TESTS`; empty when no comparison was possible.
    pairwise : tuple of PairwiseTest
        Pairs, for each test that rejected at 1 - ``confidence``.
    confidence : float
    log_base : float or None
    calibration : str
        As requested ("auto", "chi2" or "bootstrap").
    n_boot, seed : int
    note : str
        Empty, or why no comparison was made, or what was not made: tests
        left NaN for exact data ("no residual scatter: an exact power law
        ..."), pairwise comparisons skipped for too many groups.  Several
        notes are joined by "; ".
    pairwise_max : int
        Pairwise comparisons are made only for at most this many groups.
    pairwise_skipped : bool
        True if a test rejected but pairwise comparisons were skipped because
        more than ``pairwise_max`` groups were compared.
    common : CommonSlope or None
        The common slope of the compared groups with its interval, whose
        :meth:`CommonSlope.test_slope` tests it against an exponent (None
        when fewer than two groups were compared).
    """

    method: str
    group_column: str
    groups: tuple
    group_n: tuple
    excluded: tuple
    common_slope: float
    common_slope_ci: ConfidenceInterval
    common_slope_se: float
    tests: tuple
    pairwise: tuple
    confidence: float
    log_base: float | None
    calibration: str
    n_boot: int
    seed: int | None
    note: str = ""
    pairwise_max: int = PAIRWISE_MAX
    pairwise_skipped: bool = False
    common: CommonSlope | None = None

    @property
    def compared(self) -> bool:
        """True if at least two groups were compared."""
        return bool(self.tests)

    def test(self, name: str) -> GroupTest:
        """The :class:`GroupTest` named ``name`` (one of :data:`TESTS`)."""
        for t in self.tests:
            if t.test == name:
                return t
        if name not in TESTS:
            raise ConfigError(f"test must be one of {', '.join(TESTS)}, not {name!r}")
        raise DataError(f"no {name} test: {self.note or 'not computed'}")

    def to_frame(self) -> pd.DataFrame:
        """One row per test with the columns of ``group_tests.csv``."""
        return pd.DataFrame([t.to_record() for t in self.tests], columns=list(_TEST_COLUMNS))

    def __repr__(self) -> str:
        shown = self.groups if len(self.groups) <= 6 else f"{len(self.groups)} groups"
        fields = {"method": self.method, "group_column": self.group_column, "groups": shown,
                  "common_slope": self.common_slope,
                  "common_slope_ci": (float(self.common_slope_ci.low),
                                      float(self.common_slope_ci.high))}
        fields.update({f"p_{t.test}": float(t.p_value) for t in self.tests})
        if self.note:
            fields["note"] = self.note
        return short_repr(self, fields)

    def _repr_html_(self) -> str:
        compared = ", ".join(f"{g} (n = {n})" for g, n in zip(self.groups, self.group_n))
        return frame_html(self.to_frame(), notes=[self.summary(), f"groups: {compared}"],
                          title=f"{self.method.upper()} comparison of {self.group_column} groups")

    def pairwise_frame(self) -> pd.DataFrame:
        """One row per pair and test."""
        return pd.DataFrame([t.to_record() for t in self.pairwise],
                            columns=list(_PAIR_COLUMNS))

    def summary(self, *, list_pairs: bool = True) -> str:
        """Plain-language sentences on slopes, elevations and axis shifts.

        ``list_pairs=False`` gives the number of differing pairs instead of
        naming them (the pairs are then read from a matrix).
        """
        label = self.method.upper()
        what = f"{len(self.groups)} {self.group_column} groups"
        if not self.compared:
            return f"No {label} comparison of {self.group_column} groups: {self.note}"
        alpha = 1 - self.confidence
        pct = f"{100 * self.confidence:g}%"

        def numbers(t: GroupTest, name: str) -> str:
            df = f"{t.df:g}" if not np.isfinite(t.df_resid) else f"{t.df:g}, {t.df_resid:g}"
            boot = ", parametric bootstrap" if t.p_method.startswith("parametric") else ""
            return f"{name} = {t.statistic:.3g}, df = {df}, {p_text(t.p_value)}{boot}"

        def differing(test: str) -> str:
            pairs = [f"{p.group_a} vs {p.group_b}" for p in self.pairwise
                     if p.test == test and p.p_adjusted <= alpha]
            if pairs and not list_pairs:
                total = sum(p.test == test for p in self.pairwise)
                return f" {len(pairs)} of {total} pairs differ (Holm-adjusted)."
            return f" Pairs that differ (Holm-adjusted): {', '.join(pairs)}." if pairs else ""

        lo, hi = self.common_slope_ci.low, self.common_slope_ci.high
        ci = (f"({pct} CI {lo:.3g}\u2013{hi:.3g})" if np.isfinite(lo) and np.isfinite(hi)
              else f"({pct} CI unbounded)")
        slopes = self.test("slopes_equal")
        if not any(np.isfinite(t.p_value) for t in self.tests):
            slope = (f"common slope {self.common_slope:.3g} {ci}"
                     if np.isfinite(lo) and np.isfinite(hi) else "no common slope")
            return f"No {label} tests among the {what}: {self.note}; {slope}."
        stat = "F" if self.method == "ols" else "LR"
        out = []
        if not np.isfinite(slopes.p_value):
            out.append(f"Slopes of the {what} not compared ({label}): {self.note}; "
                       f"common slope {self.common_slope:.3g} {ci}.")
        elif slopes.p_value <= alpha:
            out.append(f"Slopes differ among the {what} ({label}, {numbers(slopes, stat)}); "
                       f"a common slope of {self.common_slope:.3g} {ci} only summarises "
                       f"differing slopes.{differing('slopes_equal')}")
        else:
            out.append(f"Slopes do not differ among the {what} ({label}, "
                       f"{numbers(slopes, stat)}); common slope {self.common_slope:.3g} {ci}.")
        caveat = " (read with care: slopes differ)" if slopes.p_value <= alpha else ""
        inter = self.test("intercepts_equal")
        stat = "F" if self.method == "ols" else "Wald"
        verb = "differ" if inter.p_value <= alpha else "do not differ"
        if np.isfinite(inter.p_value):
            out.append(f"Given a common slope, elevations (intercepts) {verb}{caveat} "
                       f"({numbers(inter, stat)}).{differing('intercepts_equal')}")
        else:
            out.append("Elevations not compared (no residual scatter).")
        axis = self.test("shift_along_axis")
        if self.method == "ols":
            verb = "differs" if axis.p_value <= alpha else "does not differ"
            out.append(f"Mean log x {verb} among groups (one-way ANOVA, "
                       f"{numbers(axis, 'F')}).{differing('shift_along_axis')}")
        else:
            verb = "are" if axis.p_value <= alpha else "are not detectably"
            out.append(f"Groups {verb} shifted along the common axis{caveat} "
                       f"({numbers(axis, 'Wald')}).{differing('shift_along_axis')}")
        if self.pairwise_skipped:
            out.append("Pairwise comparisons skipped: "
                       f"{len(self.groups)} groups exceed pairwise_max = {self.pairwise_max}.")
        if self.excluded:
            out.append(f"Left out: {excluded_text(self.excluded)}.")
        return " ".join(out)


# --------------------------------------------------------------------------
# compare_groups


def _xy_columns(df, x, y, group, base):
    if not isinstance(df, pd.DataFrame):
        raise DataError(f"df must be a pandas DataFrame, not {type(df).__name__}")
    for role, name in (("x", x), ("y", y), ("group", group)):
        if name not in df.columns:
            raise DataError(f"{role} column {name!r} not found; columns are "
                            f"{', '.join(map(str, df.columns))}")
    values = []
    for name in (x, y):
        col = pd.to_numeric(df[name], errors="coerce").to_numpy(dtype=float)
        bad = ~np.isfinite(col)
        if np.any(bad):
            raise DataError(f"column {name!r} has {int(bad.sum())} missing, non-numeric or "
                            f"infinite values (first at row index {df.index[np.argmax(bad)]!r}); "
                            "clean the data first")
        if base is not None and np.any(col <= 0):
            raise DataError(f"column {name!r} has values <= 0, which have no logarithm; "
                            "pass log_base=None if the values are logs already")
        values.append(to_log(col, base))
    if df[group].isna().any():
        raise DataError(f"group column {group!r} has missing labels; drop or name those rows")
    return values[0], values[1], df[group].to_numpy(dtype=object)


def _average_units(X, Y, labels, df, unit: str, group: str):
    """Per-unit means of the log values (one point per unit), as ``data.average_within``.

    A unit whose rows carry two group labels is a DataError naming it.
    """
    if unit not in df.columns:
        raise DataError(f"average_within column {unit!r} not found; columns are "
                        f"{', '.join(map(str, df.columns))}")
    if unit == group:
        raise ConfigError(f"average_within {unit!r} is the group column")
    units = df[unit]
    if units.isna().any():
        raise DataError(f"average_within column {unit!r} has missing labels (first at row "
                        f"index {df.index[np.argmax(units.isna().to_numpy())]!r})")
    pts = pd.DataFrame({"unit": units.to_numpy(dtype=object), "log_x": X, "log_y": Y,
                        "group": labels})
    spans = pts.groupby("unit", sort=False)["group"].nunique()
    if (spans > 1).any():
        bad = spans.index[np.argmax(spans.to_numpy() > 1)]
        groups_of = sorted(map(str, pts.loc[pts["unit"] == bad, "group"].unique()))
        raise DataError(f"{unit} {bad!r} appears in more than one group ({group}: "
                        f"{', '.join(groups_of)}); each unit must belong to one group")
    out = pts.groupby("unit", sort=False).agg(log_x=("log_x", "mean"), log_y=("log_y", "mean"),
                                               group=("group", "first"))
    return (out["log_x"].to_numpy(), out["log_y"].to_numpy(),
            out["group"].to_numpy(dtype=object))


def _p_method(method: str, calibration: str, min_group_n: float, n_boot: int) -> str:
    if method == "ols":
        return "F"
    if calibration == "bootstrap" or (calibration == "auto"
                                      and min_group_n < AUTO_BOOTSTRAP_BELOW):
        return f"parametric_bootstrap({n_boot})"
    return "chi2"


def compare_groups(df, x: str, y: str, group: str, *, method: str = "sma",
                   confidence: float = 0.95, log_base=10, min_n: int = 3,
                   calibration: str = "auto", n_boot: int = 999,
                   seed: int | None = 0, pairwise_max: int = PAIRWISE_MAX,
                   average_within: str | None = None) -> GroupComparison:
    """Test whether groups share a slope, an elevation and a position along the axis.

    Parameters
    ----------
    df : DataFrame
        One row per point (long format).
    x, y, group : str
        Column names.  x and y in natural units (positive), or logs when
        ``log_base`` is None.
    method : {"sma", "ma", "ols"}
    confidence : float
        Level of the common-slope interval; a test rejects when
        p <= 1 - confidence, and pairwise comparisons are made for a test
        that rejects.
    log_base : {10, "e", 2, None}
    min_n : int
        Groups with fewer points are left out (recorded in ``excluded``).
    calibration : {"auto", "chi2", "bootstrap"}
        How SMA/MA p-values are referred: chi-square, parametric bootstrap,
        or bootstrap when the smallest group has fewer than
        :data:`AUTO_BOOTSTRAP_BELOW` points.  OLS always uses exact F tests.
    n_boot : int
        Bootstrap replicates.
    seed : int or None
        Seed of ``np.random.default_rng`` for the bootstrap.
    average_within : str, optional
        Column of units (e.g. species) whose rows are collapsed to one point
        first: the means of log x and log y over the unit's rows, as the
        config's ``data.average_within`` does.  Compare orders on species
        means, not on individuals (pseudoreplication).  A unit found in two
        groups is a DataError naming it.

    Returns
    -------
    GroupComparison
        With fewer than two usable groups, a result with no tests whose
        ``note`` says why (no exception).

    Notes
    -----
    SMA/MA: likelihood-ratio test of a common slope and Wald tests of equal
    elevation and of no shift along the common axis (Warton & Weber 2002,
    Biom. J. 44:161; Warton et al. 2006, Biol. Rev. 81:259).  OLS: ANCOVA F
    tests; the axis shift is the one-way ANOVA of log x.  Formulas in the
    module docstring of :mod:`scaling.stats.groups`.  Pairwise tests repeat the
    test on each pair of groups (same calibration) and adjust by Holm (1979,
    Scand. J. Statist. 6:65), :func:`holm_adjust`.

    Examples
    --------
    >>> import pandas as pd, scaling.stats.groups as sg
    >>> d = pd.DataFrame({"m": [1, 2, 4, 8, 1, 2, 4, 8], "r": [1, 2.1, 3.9, 8.2, 2, 4.1, 8, 15.8],
    ...                   "g": list("aaaabbbb")})
    >>> res = sg.compare_groups(d, "m", "r", "g", method="ols")
    >>> res.to_frame()["test"].tolist()
    ['slopes_equal', 'intercepts_equal', 'shift_along_axis']

    Two individuals per species, species averaged first:

    >>> e = pd.DataFrame({"m": [1, 1.2, 2, 2.4, 4, 5, 1, 1.3, 2, 2.2, 4, 4.4],
    ...                   "r": [1, 1.3, 2, 2.3, 3.9, 4.6, 2, 2.5, 4.1, 4.4, 8, 8.6],
    ...                   "g": list("aaaaaabbbbbb"), "sp": [f"s{i // 2}" for i in range(12)]})
    >>> sg.compare_groups(e, "m", "r", "g", method="ols", average_within="sp").group_n
    (3, 3)
    """
    method = _check_method(method)
    confidence = check_confidence(confidence)
    base = _check_base(log_base)
    min_n = _check_int(min_n, "min_n", 3)
    if calibration not in _CALIBRATIONS:
        raise ConfigError(f"calibration must be one of {', '.join(_CALIBRATIONS)}, "
                          f"not {calibration!r}")
    n_boot = _check_int(n_boot, "n_boot", 19)
    pairwise_max = _check_int(pairwise_max, "pairwise_max", 2)
    if seed is not None:
        seed = _check_int(seed, "seed", 0)
    X, Y, labels_raw = _xy_columns(df, x, y, group, base)
    if average_within is not None:
        X, Y, labels_raw = _average_units(X, Y, labels_raw, df, average_within, group)
    codes, labels = _factorize(labels_raw, X.size)
    m = group_moments(X, Y, codes, n_groups=len(labels))

    used, excluded, all_exact = _compared_groups(m, labels, method, min_n)
    if excluded:
        shown = "; ".join(f"{g}: {why}" for g, why in excluded[:10])
        more = f"; and {len(excluded) - 10} more" if len(excluded) > 10 else ""
        warnings.warn("groups left out of the comparison: " + shown + more,
                      DegenerateDataWarning, stacklevel=2)
    common = dict(method=method, group_column=str(group), confidence=confidence,
                  log_base=base, calibration=calibration, n_boot=n_boot, seed=seed,
                  excluded=excluded, groups=tuple(labels[i] for i in used),
                  group_n=tuple(int(m.n[i]) for i in used))
    if len(used) < 2:
        return GroupComparison(
            **common, common_slope=math.nan,
            common_slope_ci=ConfidenceInterval(math.nan, math.nan),
            common_slope_se=math.nan, tests=(), pairwise=(),
            note=f"fewer than two groups have at least {min_n} usable points "
                 f"({len(used)} of {len(labels)}), so there is nothing to compare")

    idx = np.asarray(used)
    arrays = tuple(np.asarray(getattr(m, k))[idx]
                   for k in ("n", "mean_x", "mean_y", "sxx", "syy", "sxy"))
    n = arrays[0]
    rng = np.random.default_rng(seed)
    p_method = _p_method(method, calibration, float(n.min()), n_boot)
    boot = n_boot if p_method.startswith("parametric") else None
    notes = []

    state, boot_profile = None, None
    if all_exact:
        b, ci, se, agree = _exact_common(method, *arrays[3:])
        tests = [GroupTest(method=method, test=name, statistic=math.nan, df=float(len(used) - 1),
                           df_resid=math.nan, p_value=math.nan, p_method="none",
                           common_slope=b) for name in TESTS]
        notes.append(f"{EXACT_NOTE} in every group: the tests need residual scatter "
                     "and are not made"
                     + ("" if agree else "; the groups' exact slopes differ, so there is "
                                         "no common slope"))
    else:
        if method == "ols":
            b, ci, se = _common_from_arrays(method, *arrays, confidence)
            axis_res = None
        else:
            axis_res = _axis_tests(method, *(a[None] for a in arrays), bootstrap=boot,
                                   rng=rng, exact=True)
            crit = None
            if boot:
                # parametric-bootstrap quantile of the profile statistic at the fitted slope
                crit = float(np.quantile(axis_res["boot_profile"][:, 0], confidence))
            lo, hi = _profile_interval(method, axis_res["fit"], confidence, crit)
            b, ci = float(axis_res["b"][0]), ConfidenceInterval(lo, hi)
            se = float(np.sqrt(axis_res["var_b"][0]))
            state = _profile_state(axis_res["fit"], *arrays[3:])
            if boot:
                boot_profile = np.asarray(axis_res["boot_profile"][:, 0], dtype=float)
        tests = _run_tests(method, arrays, axis_res, p_method, b)
        if method == "ols" and _ols_tests(*arrays)["exact"]:
            notes.append(f"{EXACT_NOTE} in every group: the slope and elevation tests "
                         "need residual scatter and are not made (NaN)")
    tests = [replace(t, common_slope_low=ci.low, common_slope_high=ci.high) for t in tests]
    common_fit = CommonSlope(method=method, slope=b, slope_ci=ci, slope_se=se,
                             n_groups=len(used), n=int(np.sum(n)), confidence=confidence,
                             groups=common["groups"], df_resid=float(np.sum(n) - len(used) - 1),
                             profile=state, boot_profile=boot_profile)
    if method == "sma":
        sign = np.sign(np.sum(arrays[5]))
        other = [labels[i] for i in used if np.sign(m.sxy[i]) not in (0, sign)]
        if other:
            warnings.warn(f"the SMA comparison uses slope magnitudes; group(s) "
                          f"{', '.join(map(str, other))} have a correlation of the opposite "
                          f"sign to the common slope", DegenerateDataWarning, stacklevel=2)
    alpha = 1 - confidence
    pairwise = []
    rejected = [t.test for t in tests if t.p_value <= alpha]
    pairwise_skipped = bool(rejected) and len(used) > pairwise_max
    if pairwise_skipped:
        notes.append(f"pairwise comparisons skipped: {len(used)} groups exceed "
                     f"pairwise_max = {pairwise_max}")
    elif rejected and len(used) > 2:
        pairs = list(itertools.combinations(range(len(used)), 2))
        pair_idx = np.array(pairs)
        pair_arrays = tuple(a[pair_idx] for a in arrays)   # each (P, 2)
        results = _pair_tests(method, pair_arrays, boot, rng)
        for k, name in enumerate(TESTS):
            if name not in rejected:
                continue
            stat, df1, p = results[:, k, 0], results[:, k, 1], results[:, k, 2]
            p_adj = holm_adjust(p)
            for j, (a, c) in enumerate(pairs):
                pairwise.append(PairwiseTest(
                    method=method, test=name, group_a=labels[used[a]],
                    group_b=labels[used[c]], statistic=float(stat[j]), df=float(df1[j]),
                    p_value=float(p[j]), p_adjusted=float(p_adj[j])))
    elif rejected:
        # Two groups: the omnibus test is the pairwise test.
        for t in tests:
            if t.test in rejected:
                pairwise.append(PairwiseTest(
                    method=method, test=t.test, group_a=labels[used[0]],
                    group_b=labels[used[1]], statistic=t.statistic, df=t.df,
                    p_value=t.p_value, p_adjusted=t.p_value))
    return GroupComparison(**common, common_slope=b, common_slope_ci=ci,
                           common_slope_se=se, tests=tuple(tests),
                           pairwise=tuple(pairwise), pairwise_max=pairwise_max,
                           pairwise_skipped=pairwise_skipped, note="; ".join(notes),
                           common=common_fit)


def _exact_common(method, sxx, syy, sxy):
    """Common slope of groups that each lie exactly on a line (no residual scatter).

    Each group's slope is then known without error (SMA: sign(Sxy) sqrt(Syy/Sxx);
    MA: tan of half atan2(2 Sxy, Sxx - Syy), the major-axis angle).  If they
    agree to 1e-9 relative, that slope is the common slope with an interval
    of zero width and standard error 0; otherwise the (Sxx-weighted) mean is
    returned with NaN interval and ``agree`` False.
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        if method == "sma":
            slopes = np.sign(sxy) * np.sqrt(syy / sxx)
        else:
            slopes = np.tan(0.5 * np.arctan2(2 * sxy, sxx - syy))
    spread = float(np.max(slopes) - np.min(slopes))
    agree = spread <= 1e-9 * max(float(np.max(np.abs(slopes))), 1e-300)
    b = float(np.sum(sxx * slopes) / np.sum(sxx))
    if agree:
        return b, ConfidenceInterval(b, b), 0.0, True
    return b, ConfidenceInterval(math.nan, math.nan), math.nan, False


def holm_adjust(p) -> np.ndarray:
    """Holm (1979, Scand. J. Statist. 6:65) step-down adjusted p-values.

    The i-th smallest of m finite p-values becomes
    ``max_{j <= i} min(1, (m - j + 1) p_(j))``; non-finite p-values stay NaN
    and do not count in m.

    Parameters
    ----------
    p : array_like
        Unadjusted p-values, in any order.

    Returns
    -------
    ndarray
        Adjusted p-values in the order given.

    Examples
    --------
    >>> holm_adjust([0.01, 0.04, 0.03]).round(3).tolist()
    [0.03, 0.06, 0.06]
    """
    # Written here rather than calling statsmodels' multipletests, which runs a
    # full garbage collection on every call (about 0.09 s each in a demo run).
    p = np.asarray(p, dtype=float)
    out = np.full(p.shape, np.nan)
    ok = np.isfinite(p)
    q = p[ok]
    if q.size:
        order = np.argsort(q)
        adjusted = np.maximum.accumulate(q[order] * np.arange(q.size, 0, -1))
        adjusted[adjusted > 1] = 1
        values = np.empty_like(adjusted)
        values[order] = adjusted
        out[ok] = values
    return out


def _run_tests(method, arrays, res, p_method, b) -> list:
    rows = []
    if method == "ols":
        res = _ols_tests(*arrays)
        for name, (stat, d1, d2, p) in zip(TESTS, res["rows"]):
            rows.append(GroupTest(method=method, test=name, statistic=stat, df=d1,
                                  df_resid=d2, p_value=p, p_method="F", common_slope=b))
        return rows
    for k, name in enumerate(TESTS):
        rows.append(GroupTest(method=method, test=name,
                              statistic=float(res["statistic"][0, k]), df=float(res["df"]),
                              df_resid=math.nan, p_value=float(res["p_value"][0, k]),
                              p_method=p_method, common_slope=b))
    return rows


def _pair_tests(method, pair_arrays, boot, rng) -> np.ndarray:
    """(P, 3, 3) array: for each pair and test, statistic, df and p-value."""
    P = pair_arrays[0].shape[0]
    out = np.empty((P, 3, 3))
    if method == "ols":
        for j in range(P):
            res = _ols_tests(*(a[j] for a in pair_arrays))
            for k, (stat, d1, _d2, p) in enumerate(res["rows"]):
                out[j, k] = (stat, d1, p)
        return out
    res = _axis_tests(method, *pair_arrays, bootstrap=boot, rng=rng, exact=True)
    out[:, :, 0] = res["statistic"]
    out[:, :, 1] = res["df"]
    out[:, :, 2] = res["p_value"]
    return out


def common_slope_rows(commons: dict, exponents: dict, *, log_base: str) -> tuple[list, list]:
    """Rows of ``fits.csv`` and ``slope_tests.csv`` (scope ``common``) for common slopes.

    Parameters
    ----------
    commons : dict
        method -> :class:`CommonSlope` (from :attr:`GroupComparison.common`).
    exponents : dict
        Hypothesis name -> exponent.
    log_base : str
        The ``log_base`` label written in ``fits.csv``.

    Returns
    -------
    fit_rows, test_rows : list of dict
        ``n`` is the total number of points; the intercept columns are left
        out (each group has its own elevation); ``note`` names the groups.
    """
    fit_rows, test_rows = [], []
    for method, c in commons.items():
        if c is None:
            continue
        names = ", ".join(map(str, c.groups))
        if c.method == "ols":
            how = "t"
        elif c.boot_profile is not None:
            how = f"profile_likelihood_bootstrap({c.boot_profile.size})"
        else:
            how = "profile_likelihood"
        fit_rows.append({
            "scope": "common", "group": "", "method": method, "n": c.n, "slope": c.slope,
            "slope_low": c.slope_ci.low, "slope_high": c.slope_ci.high,
            "log_base": log_base, "confidence": c.confidence, "slope_se": c.slope_se,
            "note": f"common within-group slope of {c.n_groups} groups ({names}); "
                    "each group keeps its own elevation",
            "interval_method": how})
        for name, b0 in exponents.items():
            t = c.test_slope(b0, hypothesis=name)
            test_rows.append({"scope": "common", "group": "", "method": method,
                              "hypothesis": name, "exponent": t.exponent,
                              "estimate": t.estimate, "statistic": t.statistic,
                              "statistic_type": t.statistic_type, "df": t.df,
                              "p_value": t.p_value})
    return fit_rows, test_rows
