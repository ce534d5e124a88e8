"""Comparisons of groups' lines: slopes equal, elevations equal, shift along the axis.

:func:`compare_groups` asks whether groups share a slope, an elevation and a
position along the common axis, with pairwise tests for each test that
rejects (Holm-adjusted, :func:`holm_adjust`).  Notation and the
profile-likelihood common slope are in :mod:`scaling.stats.common_slope`: X =
log x, Y = log y; group i of G has n_i rows, means Xbar_i, Ybar_i and centred
sums Sxx_i, Syy_i, Sxy_i; nu_i = n_i - 1; the likelihood-ratio statistic of
a common slope is LR = F(b_common) - F_sep on G - 1 df (Warton & Weber 2002,
Biom. J. 44:161; Warton, Wright, Falster & Westoby 2006, Biol. Rev. 81:259).

Elevation and axis shift (SMA, MA)
----------------------------------
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
"""

from __future__ import annotations

import itertools
import math
import warnings
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd
from . import tails

from ._display import frame_html, short_repr
from ..errors import ConfigError, DataError, DegenerateDataWarning
from ._group_common import EXACT_FIT_TOL, check_base, factorize, holm_adjust
from .common_slope import (AUTO_BOOTSTRAP_BELOW, CommonSlope, _common_from_arrays,
                           _fit_common, _parallel_lines, _pool, _profile_interval,
                           _profile_state, _profile_terms)
from .group_means import _compared_groups, _exclusion_warning
from .lines import METHODS
from .line_results import ConfidenceInterval
from .logscale import to_log
from .moments import Moments, group_moments
from .schema import (DEFAULT_SEED, GROUP_TEST_COLUMNS, PAIRWISE_COLUMNS, check_confidence,
                     check_count, check_method)

__all__ = [
    "TESTS",
    "NOTE_CODES",
    "AUTO_BOOTSTRAP_BELOW",
    "PAIRWISE_MAX",
    "GroupTest",
    "PairwiseTest",
    "holm_adjust",
    "GroupComparison",
    "compare_groups",
    "compare_group_moments",
]

#: Names of the three comparisons, in the order they are reported.
TESTS = ("slopes_equal", "intercepts_equal", "shift_along_axis")

#: What a comparison did not do (:attr:`GroupComparison.notes`): fewer than two
#: usable groups; every group an exact line (SMA, MA), their exact slopes
#: differing or not; every group an exact line (OLS); pairwise comparisons
#: skipped for more than ``pairwise_max`` groups.
NOTE_CODES = ("too_few_groups", "exact_all", "exact_all_slopes_differ", "exact_ols",
              "pairwise_skipped")

#: ``pairwise_max`` default: pairwise tests are made for at most this many groups.
PAIRWISE_MAX = 20

_CALIBRATIONS = ("auto", "chi2", "bootstrap")
_TEST_COLUMNS = tuple(GROUP_TEST_COLUMNS)
_PAIR_COLUMNS = tuple(PAIRWISE_COLUMNS)


# --------------------------------------------------------------------------
# elevation and axis-shift tests (SMA, MA), and their parametric bootstrap


def _axis_scores(method, b, n, mx, my, sxx, syy, sxy):
    """Per-group residual/fitted axis variances and means at slope b (M,) -> (M, G)."""
    sr2, sf2 = _axis_variances(method, b, n, sxx, syy, sxy)
    rbar, fbar, c_f = _axis_means(method, b, mx, my)
    return {"sr2": sr2, "sf2": sf2, "rbar": rbar, "fbar": fbar, "c_r": -mx, "c_f": c_f}


def _axis_variances(method, b, n, sxx, syy, sxy):
    """Residual- and fitted-axis variances Srr/nu, Sff/nu at slope b (M,) -> (M, G)."""
    nu = n - 1.0
    bb = b[:, None]
    srr = syy - 2 * bb * sxy + bb * bb * sxx
    if method == "sma":
        sff = syy + 2 * bb * sxy + bb * bb * sxx
    else:
        sff = sxx + 2 * bb * sxy + bb * bb * syy
    return srr / nu, sff / nu


def _axis_means(method, b, mx, my):
    """Residual- and fitted-axis means at slope b, and d fbar / d b (M,) -> (M, G)."""
    bb = b[:, None]
    rbar = my - bb * mx
    if method == "sma":
        return rbar, my + bb * mx, mx
    return rbar, mx + bb * my, my


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
    return _sums_from_axis(method, b, srr, srf, sff) + _means_from_axis(method, b, rbar, fbar)


def _sums_from_axis(method, b, srr, srf, sff):
    """(r, f) centred sums back to Sxx, Syy, Sxy for slope b (broadcasting)."""
    if method == "sma":
        sxx = (sff - 2 * srf + srr) / (4 * b * b)
        syy = (srr + 2 * srf + sff) / 4
        sxy = (sff - srr) / (4 * b)
    else:
        k = 1 + b * b
        sxx = (b * b * srr - 2 * b * srf + sff) / (k * k)
        syy = (srr + 2 * b * srf + b * b * sff) / (k * k)
        sxy = (-b * srr + (1 - b * b) * srf + b * sff) / (k * k)
    return sxx, syy, sxy


def _means_from_axis(method, b, rbar, fbar):
    """(r, f) means back to the means of X and Y for slope b (broadcasting)."""
    if method == "sma":
        return (fbar - rbar) / (2 * b), (rbar + fbar) / 2
    k = 1 + b * b
    return (fbar - b * rbar) / k, (rbar + b * fbar) / k


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
    root_n = np.sqrt(n)
    tol = 1e-9 * (1 + np.abs(observed))
    while done < n_boot:
        B = min(per, n_boot - done)
        size = (B, M, G)
        a11 = rng.chisquare(nu, size=size)
        a22 = rng.chisquare(nu - 1, size=size)
        a21 = rng.standard_normal(size)
        z_r = rng.standard_normal(size) / root_n
        z_f = rng.standard_normal(size) / root_n
        srr = scores["sr2"] * a11
        srf = sr * sf * np.sqrt(a11) * a21
        sff = scores["sf2"] * (a21 * a21 + a22)
        # null for elevation: common rbar; null for axis: common fbar
        e_r, e_f = sr * z_r, sf * z_f
        r_a, f_a = r_pool + e_r, scores["fbar"] + e_f
        r_b, f_b = scores["rbar"] + e_r, f_pool + e_f
        sxx, syy, sxy = _sums_from_axis(method, b, srr, srf, sff)
        mx_a, my_a = _means_from_axis(method, b, r_a, f_a)
        mx_b, my_b = _means_from_axis(method, b, r_b, f_b)
        flat = lambda a: np.broadcast_to(a, size).reshape(B * M, G)  # noqa: E731
        nn = flat(n)
        sxx, syy, sxy = flat(sxx), flat(syy), flat(sxy)
        fit_b = _fit_common(method, nn, sxx, syy, sxy)
        # each null's Wald statistic only (the sums, so the variances, are shared)
        sr2_b, sf2_b = _axis_variances(method, fit_b["b"], nn, sxx, syy, sxy)
        mx_a, my_a, mx_b, my_b = flat(mx_a), flat(my_a), flat(mx_b), flat(my_b)
        rbar_a = _axis_means(method, fit_b["b"], mx_a, my_a)[0]
        _, fbar_b, c_f = _axis_means(method, fit_b["b"], mx_b, my_b)
        w_int = _wald_equal(rbar_a, sr2_b / nn, -mx_a, fit_b["var_b"])
        w_axis = _wald_equal(fbar_b, sf2_b / nn, c_f, fit_b["var_b"])
        boot = np.stack([fit_b["lr"], w_int, w_axis], axis=-1).reshape(B, M, 3)
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
    p_chi2 = tails.chi2_upper(statistic, G - 1)
    profile = None
    if bootstrap:
        counts, profile = _bootstrap_counts(method, n, fit, scores, statistic, bootstrap, rng)
        p_value = (1.0 + counts) / (bootstrap + 1.0)
    else:
        p_value = p_chi2
    return {"b": fit["b"], "var_b": fit["var_b"], "statistic": statistic, "p_chi2": p_chi2,
            "p_value": p_value, "df": G - 1, "fit": fit, "boot_profile": profile}


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
    par = _parallel_lines(n, sxx, syy, sxy)
    rss_par, exact_par, df_par = par["rss_par"], par["exact_par"], par["df_par"]
    pooled = _pool(n, mx, my, sxx, syy, sxy)
    rss_one = np.float64(pooled.syy - pooled.sxy ** 2 / pooled.sxx)
    exact_sep = bool(rss_sep <= tol)
    df_sep = N - 2 * G
    out = {"b": par["b"], "rows": [], "exact": exact_sep}
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
        p = float(tails.f_upper(stat, d1, d2)) if np.isfinite(stat) else math.nan
        out["rows"].append((float(stat), float(d1), float(d2), p))
    out["se"], out["df_par"] = par["se"], df_par
    return out


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
    """One comparison between two groups; ``p_adjusted`` by Holm's method.

    ``p_method`` as for the omnibus test (``F``, ``chi2`` or
    ``parametric_bootstrap(B)``).  A resampled p at its floor 1/(B + 1) is only an
    upper bound, and so is the Holm-adjusted p computed from it.
    """

    method: str
    test: str
    group_a: object
    group_b: object
    statistic: float
    df: float
    p_value: float
    p_adjusted: float
    p_method: str = ""

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
    excluded : tuple of Exclusion
        Groups left out, each with its reason code and size
        (:class:`scaling.stats.group_means.Exclusion`).
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
    notes : tuple of str
        Codes (:data:`NOTE_CODES`) of what was not made: no comparison
        (fewer than two usable groups), tests left NaN for exact data,
        pairwise comparisons skipped for too many groups.  Empty when
        everything was made.  :func:`scaling.render.findings.comparison_note`
        words them, :func:`scaling.render.findings.comparison_summary` words
        the whole comparison.
    min_n : int
        Fewest points a compared group needs.
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
    notes: tuple = ()
    min_n: int = 3
    pairwise_max: int = PAIRWISE_MAX
    pairwise_skipped: bool = False
    common: CommonSlope | None = None
    #: Per compared group: (mean log x, mean log y, min log x, max log x), in
    #: ``groups`` order -- what :meth:`plot` draws each group's line through.
    centroids: tuple = ()

    @property
    def group_means(self):
        """The compared groups' centroids as a table: ``group, n, mean_log_x,
        mean_log_y, log_x_min, log_x_max`` (None when none were kept)."""
        if not self.centroids:
            return None
        import pandas as pd   # the numbers need no pandas; only this table does
        return pd.DataFrame([(g, n, *c) for g, n, c in
                             zip(self.groups, self.group_n, self.centroids)],
                            columns=["group", "n", "mean_log_x", "mean_log_y",
                                     "log_x_min", "log_x_max"])

    def summary(self) -> str:
        """The comparison in plain sentences (slopes, elevations, axis shifts, pairs):
        :func:`scaling.render.findings.comparison_summary`."""
        from ..render.summaries import comparison_summary
        return comparison_summary(self)

    def plot(self, *, ax=None, **style):
        """Draw each group's points or mean and its line with the common slope.

        See :func:`scaling.render.plots.plot_comparison` (``data=``, ``x=``,
        ``y=`` add each group's points); returns the matplotlib Axes.
        """
        from ..render.plots import plot_comparison
        return plot_comparison(self, ax=ax, **style)

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
        raise DataError(f"no {name} test: fewer than two groups were compared "
                        f"({len(self.groups)} of {len(self.groups) + len(self.excluded)} "
                        f"have at least {self.min_n} usable points)")

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
        if self.notes:
            fields["notes"] = ", ".join(self.notes)
        return short_repr(self, fields)

    def _repr_html_(self) -> str:
        # Tables only: the sentences are scaling.render.findings.comparison_summary.
        groups = pd.DataFrame({"group": list(self.groups), "n": list(self.group_n)})
        return (frame_html(self.to_frame(), title=f"{self.method.upper()} comparison of "
                                                  f"{self.group_column} groups")
                + "\n" + frame_html(groups))

    def pairwise_frame(self) -> pd.DataFrame:
        """One row per pair and test."""
        return pd.DataFrame([t.to_record() for t in self.pairwise],
                            columns=list(_PAIR_COLUMNS))


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


def _checked(method, confidence, log_base, min_n, calibration, n_boot, pairwise_max, seed):
    """The arguments of :func:`compare_groups` and :func:`compare_group_moments`, checked."""
    method = check_method(method, METHODS, lower=True)
    confidence = check_confidence(confidence)
    base = check_base(log_base)
    min_n = check_count(min_n, "min_n", 3)
    if calibration not in _CALIBRATIONS:
        raise ConfigError(f"calibration must be one of {', '.join(_CALIBRATIONS)}, "
                          f"not {calibration!r}")
    n_boot = check_count(n_boot, "n_boot", 19)
    pairwise_max = check_count(pairwise_max, "pairwise_max", 2)
    if seed is not None:
        seed = check_count(seed, "seed", 0)
    return method, confidence, base, min_n, n_boot, pairwise_max, seed


def compare_groups(df, x: str, y: str, group: str, *, method: str = "sma",
                   confidence: float = 0.95, log_base=10, min_n: int = 3,
                   calibration: str = "auto", n_boot: int = 999,
                   seed: int | None = DEFAULT_SEED, pairwise_max: int = PAIRWISE_MAX,
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
        Seed of ``np.random.default_rng`` for the bootstrap (default
        :data:`~scaling.stats.schema.DEFAULT_SEED`, the seed of a run).
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
        ``notes`` hold ``"too_few_groups"`` (no exception).

    Notes
    -----
    SMA/MA: likelihood-ratio test of a common slope and Wald tests of equal
    elevation and of no shift along the common axis (Warton & Weber 2002,
    Biom. J. 44:161; Warton et al. 2006, Biol. Rev. 81:259).  OLS: ANCOVA F
    tests; the axis shift is the one-way ANOVA of log x.  Formulas in the
    module docstrings of :mod:`scaling.stats.common_slope` and
    :mod:`scaling.stats.group_comparisons`.  Pairwise tests repeat the
    test on each pair of groups (same calibration) and adjust by Holm (1979,
    Scand. J. Statist. 6:65), :func:`holm_adjust`.

    Examples
    --------
    >>> import pandas as pd, scaling.stats.group_comparisons as sg
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
    method, confidence, base, min_n, n_boot, pairwise_max, seed = _checked(
        method, confidence, log_base, min_n, calibration, n_boot, pairwise_max, seed)
    X, Y, labels_raw = _xy_columns(df, x, y, group, base)
    if average_within is not None:
        X, Y, labels_raw = _average_units(X, Y, labels_raw, df, average_within, group)
    codes, labels = factorize(labels_raw, X.size)
    m = group_moments(X, Y, codes, n_groups=len(labels))
    lo = np.full(len(labels), np.inf)
    hi = np.full(len(labels), -np.inf)
    np.minimum.at(lo, codes, X)
    np.maximum.at(hi, codes, X)
    return _compare(m, labels, (lo, hi), method=method, group_column=str(group),
                    confidence=confidence, base=base, min_n=min_n, calibration=calibration,
                    n_boot=n_boot, seed=seed, pairwise_max=pairwise_max)


def compare_group_moments(m: Moments, labels, *, method: str = "sma",
                          confidence: float = 0.95, log_base=10, min_n: int = 3,
                          calibration: str = "auto", n_boot: int = 999,
                          seed: int | None = DEFAULT_SEED, pairwise_max: int = PAIRWISE_MAX,
                          group_column: str = "group",
                          log_x_range=None) -> GroupComparison:
    """:func:`compare_groups` from per-group moments: the road of every run.

    Parameters
    ----------
    m : Moments
        Arrays of shape (G,): n, means and centred sums of log x and log y
        in each group (rows, or units after averaging within units).
    labels : sequence
        The G group labels, in the order of ``m`` (the in-memory road sorts them).
    method, confidence, log_base, min_n, calibration, n_boot, seed, pairwise_max
        As for :func:`compare_groups`; the same seed gives the same
        bootstrap draws, so the rows and their moments give the same p-values.
    group_column : str
        Name of the group column (recorded in the result).
    log_x_range : (ndarray, ndarray), optional
        Smallest and largest log x of each group (what :meth:`GroupComparison.plot`
        draws each group's line over); NaN when not given.

    Returns
    -------
    GroupComparison

    Notes
    -----
    Every statistic of :func:`compare_groups` is a function of these moments
    (module notes): every road of a run calls this function.
    """
    method, confidence, base, min_n, n_boot, pairwise_max, seed = _checked(
        method, confidence, log_base, min_n, calibration, n_boot, pairwise_max, seed)
    labels = tuple(labels)
    g = len(labels)
    if g != np.size(m.n):
        raise DataError(f"labels must name each of the {np.size(m.n)} groups, not {g}")
    if log_x_range is None:
        log_x_range = (np.full(g, np.nan), np.full(g, np.nan))
    return _compare(m, labels, log_x_range, method=method, group_column=str(group_column),
                    confidence=confidence, base=base, min_n=min_n, calibration=calibration,
                    n_boot=n_boot, seed=seed, pairwise_max=pairwise_max)


def _compare(m: Moments, labels: tuple, log_x_range, *, method, group_column, confidence,
             base, min_n, calibration, n_boot, seed, pairwise_max) -> GroupComparison:
    """The comparison from checked arguments and per-group moments."""
    lo, hi = (np.asarray(r, dtype=float) for r in log_x_range)
    used, excluded, all_exact = _compared_groups(m, labels, method, min_n)
    if excluded:
        warnings.warn(_exclusion_warning("the comparison", excluded),
                      DegenerateDataWarning, stacklevel=3)
    common = dict(method=method, group_column=group_column, confidence=confidence,
                  log_base=base, calibration=calibration, n_boot=n_boot, seed=seed,
                  min_n=min_n,
                  excluded=excluded, groups=tuple(labels[i] for i in used),
                  group_n=tuple(int(v) for v in np.asarray(m.n)[used].tolist()),
                  centroids=tuple(zip(*(np.asarray(a, dtype=float)[used].tolist()
                                        for a in (m.mean_x, m.mean_y, lo, hi)))))
    if len(used) < 2:
        return GroupComparison(
            **common, common_slope=math.nan,
            common_slope_ci=ConfidenceInterval(math.nan, math.nan),
            common_slope_se=math.nan, tests=(), pairwise=(), notes=("too_few_groups",))

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
        notes.append("exact_all" if agree else "exact_all_slopes_differ")
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
            notes.append("exact_ols")
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
                          f"sign to the common slope", DegenerateDataWarning, stacklevel=3)
    alpha = 1 - confidence
    pairwise = []
    rejected = [t.test for t in tests if t.p_value <= alpha]
    pairwise_skipped = bool(rejected) and len(used) > pairwise_max
    if pairwise_skipped:
        notes.append("pairwise_skipped")
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
                    p_value=float(p[j]), p_adjusted=float(p_adj[j]),
                    p_method="F" if method == "ols" else p_method))
    elif rejected:
        # Two groups: the omnibus test is the pairwise test.
        for t in tests:
            if t.test in rejected:
                pairwise.append(PairwiseTest(
                    method=method, test=t.test, group_a=labels[used[0]],
                    group_b=labels[used[1]], statistic=t.statistic, df=t.df,
                    p_value=t.p_value, p_adjusted=t.p_value, p_method=t.p_method))
    return GroupComparison(**common, common_slope=b, common_slope_ci=ci,
                           common_slope_se=se, tests=tuple(tests),
                           pairwise=tuple(pairwise), pairwise_max=pairwise_max,
                           pairwise_skipped=pairwise_skipped, notes=tuple(notes),
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

