"""Groups: their means and the line through the means.

:func:`group_means` gives the mean of log x and log y in every group with its
standard error (one vectorised pass of
:func:`scaling.stats.moments.group_moments`); :func:`fit_group_means` fits
one line through the means of the groups that
:func:`scaling.stats.group_comparisons.compare_groups` compares.  The rule
that decides which groups those are (:func:`compared_groups`) lives here,
so both use exactly the same groups.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import ConfigError, DataError, DegenerateDataWarning
from ._group_common import EXACT_FIT_TOL, check_base, check_logs, factorize
from .lines import METHODS, fit_notes
from .line_results import LineFit, line_fit_from_moments
from .moments import Moments, group_moments, moments, weighted_moments
from .schema import check_confidence, check_count, check_method

__all__ = [
    "Exclusion",
    "EXCLUSION_REASONS",
    "GroupMeansResult",
    "group_means",
    "fit_group_means",
    "compared_groups",
    "group_means_from_moments",
    "fit_group_means_from_moments",
    "compared_groups_from_moments",
    "NO_VARIATION_EPS",
]

#: Why a group is left out of comparisons: too few points, log x or log y
#: constant, a line that cannot be estimated, (SMA, MA) an exact line while
#: other groups scatter.
EXCLUSION_REASONS = ("too_few", "x_constant", "y_constant", "not_estimable", "exact_line")


@dataclass(frozen=True, slots=True, kw_only=True)
class Exclusion:
    """A group left out of comparisons and of the line through the means.

    Attributes
    ----------
    group : object
        The group's label.
    reason : str
        One of :data:`EXCLUSION_REASONS`.
    n : int
        Points in the group.
    min_n : int
        Fewest points a compared group needs.
    note : str
        For ``"not_estimable"``: the fit's note saying why no line can be
        fitted ("" otherwise).

    The words are made by :func:`scaling.render.findings.exclusion_reason`.
    """

    group: object
    reason: str
    n: int
    min_n: int
    note: str = ""


# --------------------------------------------------------------------------
# which groups are compared

#: Relative spread below which a group's log x or log y counts as constant:
#: S <= (eps * scale)^2 n with scale the root mean square of the values (see
#: :func:`_no_variation`).  Two-pass centred sums of equal values carry
#: rounding of about n * 1e-16 * |value| in the mean, far below this.
NO_VARIATION_EPS = 1e-9


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
    """Why each group is left out of comparisons: a reason code and the fit's note.

    ("", "") for a group that is used.

    The same rule decides the groups of :func:`compare_groups` and of
    :func:`fit_group_means`, so the line through the means and the comparisons
    use exactly the same groups.
    """
    notes = fit_notes(m, method)
    n = np.atleast_1d(np.asarray(m.n, dtype=float))
    flat_x = _no_variation(m.n, m.mean_x, m.sxx)
    flat_y = _no_variation(m.n, m.mean_y, m.syy)
    has_note = np.array([bool(v) for v in np.atleast_1d(notes).tolist()], dtype=bool)
    if method != "ols":
        r = np.atleast_1d(np.asarray(m.r, dtype=float))
        with np.errstate(invalid="ignore"):
            exact = 1.0 - r ** 2 <= EXACT_FIT_TOL
    else:
        exact = np.zeros(n.shape, dtype=bool)
    # the first reason that applies, in this order (array passes, not a loop over groups)
    why = np.select([n < min_n, np.broadcast_to(flat_x, n.shape),
                     np.broadcast_to(flat_y, n.shape), has_note, exact],
                    ["too_few", "x_constant", "y_constant", "not_estimable", "exact_line"],
                    default="").astype(object)
    note = np.full(n.shape, "", dtype=object)
    pick = why == "not_estimable"
    note[pick] = [str(v) for v in np.atleast_1d(notes)[pick].tolist()]
    return list(zip(why[:len(labels)].tolist(), note[:len(labels)].tolist()))


def _compared_groups(m: Moments, labels, method: str, min_n: int):
    """Indices of the groups compared, :class:`Exclusion` of those left out, all-exact flag.

    SMA/MA leave out a group lying exactly on a line when others have
    scatter; when every usable group is an exact line they are all kept and
    compared as exact data (``all_exact``).
    """
    reasons = _exclusion_reasons(m, labels, method, min_n)
    used = [i for i, (why, _) in enumerate(reasons) if not why]
    exact_only = [i for i, (why, _) in enumerate(reasons) if why == "exact_line"]
    all_exact = not used and len(exact_only) >= 2
    if all_exact:
        used = exact_only
        chosen = set(used)
        reasons = [("", "") if i in chosen else why for i, why in enumerate(reasons)]
    excluded = tuple(Exclusion(group=labels[i], reason=why, n=int(m.n[i]), min_n=min_n,
                               note=note)
                     for i, (why, note) in enumerate(reasons) if why)
    return used, excluded, all_exact


def _exclusion_warning(what: str, excluded) -> str:
    """Warning text naming the groups left out of ``what``, with their reasons and sizes."""
    shown = "; ".join(f"{e.group}: {e.reason.replace('_', ' ')} (n = {e.n})"
                      for e in excluded[:10])
    more = f"; and {len(excluded) - 10} more" if len(excluded) > 10 else ""
    return f"groups left out of {what}: {shown}{more}"


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
    The rows are reduced to per-group moments
    (:func:`scaling.stats.moments.group_moments`, all groups in one pass) and
    handed to :func:`group_means_from_moments`.
    """
    X, Y = check_logs(log_x, log_y)
    codes, labels = factorize(groups, X.size)
    m = group_moments(X, Y, codes, n_groups=len(labels))
    rows = None
    if n_rows is not None:
        counts = np.asarray(n_rows, dtype=float)
        if counts.shape != X.shape or np.any(~np.isfinite(counts)) or np.any(counts < 1):
            raise DataError("n_rows must give a positive count for every row")
        rows = np.bincount(codes, weights=counts, minlength=len(labels))
    return group_means_from_moments(m, labels, n_rows=rows)


def group_means_from_moments(m: Moments, labels, *, n_rows=None) -> GroupMeansResult:
    """Means and standard errors of log x and log y from per-group moments.

    Parameters
    ----------
    m : Moments
        Arrays of shape (G,): one element per group, on the log scale.
    labels : sequence
        The G group labels, in the order of ``m``.
    n_rows : array_like of int, shape (G,), optional
        Input rows behind each group (more than ``n`` after averaging within
        units); written as the ``n_rows`` column.

    Returns
    -------
    GroupMeansResult

    Notes
    -----
    se = sqrt(S/(n - 1))/sqrt(n) with S the centred sum of squares (NaN for
    n = 1).  Every road of a run (rows in memory, chunks, Dask partitions)
    calls this with its per-group moments.
    """
    labels = tuple(labels)
    if len(labels) != np.size(m.n):
        raise DataError(f"labels must name each of the {np.size(m.n)} groups, "
                        f"not {len(labels)}")
    se_x, se_y = _means_from_moments(m)
    rows = None if n_rows is None else np.asarray(n_rows, dtype=float).astype(int)
    return GroupMeansResult(groups=labels, n=np.asarray(m.n).astype(int),
                            mean_log_x=np.asarray(m.mean_x), mean_log_y=np.asarray(m.mean_y),
                            se_log_x=se_x, se_log_y=se_y, n_rows=rows)


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
        left out are named with their reason codes in a
        :class:`~scaling.errors.DegenerateDataWarning`; :func:`compared_groups`
        returns them as :class:`Exclusion` records, and
        :func:`scaling.render.findings.means_left_out_text` words them.

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
    method = check_method(method, METHODS, lower=True)   # named before the data are read
    X, Y = check_logs(log_x, log_y)
    codes, labels = factorize(groups, X.size)
    gm = group_moments(X, Y, codes, n_groups=len(labels))
    return fit_group_means_from_moments(gm, labels, method=method, confidence=confidence,
                                        log_base=log_base, weighted=weighted, min_n=min_n)


def fit_group_means_from_moments(m: Moments, labels, *, method: str,
                                 confidence: float = 0.95, log_base=10,
                                 weighted: bool = False, min_n: int = 3) -> LineFit:
    """:func:`fit_group_means` from per-group moments (arrays of shape (G,)).

    Every road of a run calls this with its per-group moments; the groups
    used, the warnings and the fit are those of :func:`fit_group_means` on
    the rows behind ``m``.
    """
    method = check_method(method, METHODS, lower=True)
    confidence = check_confidence(confidence)
    base = check_base(log_base)
    min_n = check_count(min_n, "min_n", 3)
    if weighted and method != "ols":
        raise ConfigError(f"weighted=True is available only for method='ols' (weighted least "
                          f"squares), not {method!r}: no weighted {method.upper()} estimator "
                          "with valid intervals is implemented")
    return _fit_means(m, tuple(labels), method, confidence, base, weighted, min_n)


def _fit_means(gm: Moments, labels, method, confidence, base, weighted, min_n) -> LineFit:
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
                      stacklevel=3)
    if excluded:
        warnings.warn(_exclusion_warning("the line through the means", excluded),
                      DegenerateDataWarning, stacklevel=3)
    return fit


def compared_groups(log_x, log_y, groups, *, method: str = "sma", min_n: int = 3):
    """Labels of the groups :func:`compare_groups` compares, and those it leaves out.

    Returns
    -------
    used : tuple
        Labels (sorted) of the groups compared.
    excluded : tuple of Exclusion
        The groups left out, each with its reason code and size.

    Notes
    -----
    The rule of :func:`compare_groups` and :func:`fit_group_means`: fewer than
    ``min_n`` points; log x or log y not varying relative to its size (S <=
    (1e-9 scale)^2 n, scale^2 = mean^2 + S/n); a line that cannot be
    estimated; (SMA, MA) an exact line while other groups scatter.
    """
    method = check_method(method, METHODS, lower=True)
    min_n = check_count(min_n, "min_n", 3)
    X, Y = check_logs(log_x, log_y)
    codes, labels = factorize(groups, X.size)
    gm = group_moments(X, Y, codes, n_groups=len(labels))
    return compared_groups_from_moments(gm, labels, method=method, min_n=min_n)


def compared_groups_from_moments(m: Moments, labels, *, method: str = "sma",
                                 min_n: int = 3):
    """:func:`compared_groups` from per-group moments (arrays of shape (G,))."""
    method = check_method(method, METHODS, lower=True)
    min_n = check_count(min_n, "min_n", 3)
    labels = tuple(labels)
    used, excluded, _ = _compared_groups(m, labels, method, min_n)
    return tuple(labels[i] for i in used), excluded

