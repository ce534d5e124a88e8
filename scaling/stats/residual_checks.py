"""Checks of a fitted line's residuals: normality, constant variance, curvature, influence.

:func:`diagnose` reads a fitted :class:`scaling.stats.lines.LineFit` and the log
data it was fitted to and returns a :class:`Diagnostics` with one
:class:`Check` per question.

Residuals are the vertical residuals e_i = Y_i - a - b X_i on the log
scale, whatever the fitting method.

Normality
    Shapiro & Wilk (1965), *Biometrika* 52:591, by Royston's algorithm
    (:func:`scaling.stats.classic_tests.shapiro_wilk`; ``scipy.stats.shapiro``'s numbers).
Constant variance
    Breusch & Pagan (1979), *Econometrica* 47:1287, studentised (Koenker
    1981, *J. Econometrics* 17:107) LM form, the default of
    ``statsmodels.stats.diagnostic.het_breuschpagan``: n R^2 of e^2
    regressed on (1, X), chi-square 1 df.  With one regressor R^2 is the
    squared correlation of e^2 and X, so LM = n S_wx^2 / (S_xx S_ww) from
    centred sums (:func:`breusch_pagan`), for one line or every group at once.
Curvature
    The quadratic term b2 of Y = b0 + b1 X + b2 X^2 fitted by OLS
    (Kolokotrones, Savage, Deeds & Fontana 2010, *Nature* 464:753), tested
    by t = b2 / se(b2) on n - 3 df.  The local exponent at X is
    dY/dX = b1 + 2 b2 X, so it equals a target beta at
    X* = (beta - b1) / (2 b2), x* = base^X*.  X is centred before fitting
    for numerical stability; the coefficients reported are those of the
    uncentred X.
Influence
    Cook's (1977, *Technometrics* 19:15) distance of each row in the OLS
    regression of Y on X, in closed form (:mod:`scaling.stats.cooks`); rows with
    D > 4/n are listed (a common rule of thumb, no single source).  For SMA
    and MA fits the OLS distances are a proxy: they measure influence on
    the least-squares line through the same points.

The parallel-lines model (:func:`diagnose_parallel`)
    When groups share one slope b and each keeps its own elevation, the
    model is Y = a_g + b X + e.  The same four questions are asked of it,
    all by closed forms on within-group centred values (X~ = X - mean_g X;
    by Frisch-Waugh-Lovell this is the OLS fit with one dummy per group),
    so one pass serves four groups or ten thousand:
    residuals e = (Y - mean_g Y) - b X~ (the stated lines, vertical);
    curvature: one common quadratic term in centred log x with per-group
    intercepts, Y = a_g + b1 c + b2 c^2, c = X - mean X (Kolokotrones et
    al. 2010's quadratic term, with the group elevations the answer allows),
    t = b2/se(b2) on n - G - 2 df (:func:`within_quadratic_t`); normality
    and Breusch-Pagan on e as above; Cook's distance of the parallel-lines
    OLS model, p = G + 1 parameters, leverage h = 1/n_g + X~^2/sum X~^2
    (:func:`parallel_lines_influence`).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from . import tails
from .classic_tests import shapiro_wilk

from ..errors import ConfigError, DataError, DegenerateDataWarning
from ._group_common import EXACT_FIT_TOL
from .breusch_pagan import _breusch_pagan_centred, _centred, breusch_pagan
from .cooks import SPAN, ols_cooks_distances, sliced_sums
from .lines import exact_fit
from .line_results import LineFit
from .moments import moments

__all__ = ["Check", "Curvature", "Diagnostics", "diagnose", "quadratic_t", "MIN_N",
           "within_quadratic_t", "parallel_lines_influence", "diagnose_parallel",
           "unique_codes", "group_order", "GroupCodes"]

#: Fewest points a diagnostic check reads.
MIN_N = 4


# --------------------------------------------------------------------------
# results


@dataclass(frozen=True, slots=True, kw_only=True)
class Check:
    """One diagnostic test.

    Attributes
    ----------
    check : str
        ``"normality"``, ``"constant_variance"``, ``"curvature"`` or
        ``"influence"``.
    test : str
        The test used (e.g. ``"Shapiro-Wilk"``).
    statistic, df, p_value, estimate : float
        ``estimate`` is the quadratic coefficient for curvature, the largest
        Cook's distance for influence and NaN otherwise; ``df`` is NaN where
        the test has none.
    flagged : bool
        True when the check finds a problem at level ``alpha``.
    finding : str
        ``"flagged"``, ``"clear"`` or ``"exact_fit"`` (no residual scatter:
        the check does not apply).  The plain-language reading is
        :func:`scaling.render.findings.check_verdict`.
    direction : int
        constant_variance: +1 when the scatter grows with size, -1 when it
        shrinks; curvature: the sign of the quadratic term; 0 otherwise.
    exponent_low, exponent_high : float
        curvature: the local exponent at the smallest and largest x (NaN
        for the other checks).
    rows : tuple of int
        influence: the rows above the threshold, largest distance first.
    """

    check: str
    test: str
    statistic: float
    df: float
    p_value: float
    estimate: float
    flagged: bool
    finding: str
    direction: int = 0
    exponent_low: float = math.nan
    exponent_high: float = math.nan
    rows: tuple = ()

    def to_record(self) -> dict:
        return {"check": self.check, "test": self.test, "statistic": self.statistic,
                "df": self.df, "p_value": self.p_value, "estimate": self.estimate,
                "flagged": self.flagged, "finding": self.finding}


@dataclass(frozen=True, slots=True, kw_only=True)
class Curvature:
    """Quadratic fit Y = b0 + b1 X + b2 X^2 on the log scale.

    Attributes
    ----------
    intercept, linear, quadratic : float
        b0, b1, b2 (uncentred X).
    quadratic_se, statistic, df, p_value : float
        se(b2), t = b2/se(b2), n - 3, two-sided p.
    log_base : float or None
        Base of the logs (None when the data were given as logs).
    crossings : tuple of (float, float, bool)
        ``(target exponent, x*, inside data range)`` for each requested
        target; x* in natural units (on the log scale when ``log_base`` is
        None); NaN when b2 = 0.
    """

    intercept: float
    linear: float
    quadratic: float
    quadratic_se: float
    statistic: float
    df: float
    p_value: float
    log_base: float | None
    crossings: tuple = ()

    def local_exponent(self, log_x) -> np.ndarray:
        """Local slope b1 + 2 b2 X at log-scale positions ``log_x``."""
        return self.linear + 2 * self.quadratic * np.asarray(log_x, dtype=float)

    def x_at_exponent(self, exponent: float) -> float:
        """x (natural units, or log when ``log_base`` is None) where the local slope is ``exponent``."""
        if self.quadratic == 0 or not np.isfinite(self.quadratic):
            return math.nan
        log_x = (exponent - self.linear) / (2 * self.quadratic)
        if self.log_base is None:
            return float(log_x)
        with np.errstate(over="ignore"):
            return float(np.power(np.float64(self.log_base), log_x))


@dataclass(frozen=True, slots=True, kw_only=True)
class Diagnostics:
    """Residual, curvature and influence checks of one fitted line.

    Attributes
    ----------
    method : str
        Method of the fit checked.
    n : int
    alpha : float
        Level at which a check is flagged.
    checks : tuple of Check
        normality, constant_variance, curvature, influence (in this order).
    curvature : Curvature
    residuals : ndarray
        Vertical log-scale residuals Y - a - b X.
    cooks_distance : ndarray
    influence_threshold : float
        4 / n.
    influential_rows : tuple of int
        Row numbers (from ``rows``) whose Cook's distance exceeds the
        threshold, largest first.
    """

    method: str
    n: int
    alpha: float
    checks: tuple
    curvature: Curvature
    residuals: np.ndarray = field(repr=False)
    cooks_distance: np.ndarray = field(repr=False)
    influence_threshold: float
    influential_rows: tuple
    rows: np.ndarray = field(repr=False)

    def check(self, name: str) -> Check:
        for c in self.checks:
            if c.check == name:
                return c
        raise ConfigError(f"no diagnostic check named {name!r}; "
                          f"choose from {', '.join(c.check for c in self.checks)}")

    def to_frame(self):
        """One row per check (columns method, check, test, statistic, df, p_value, estimate,
        flagged, finding)."""
        import pandas as pd
        frame = pd.DataFrame([c.to_record() for c in self.checks])
        frame.insert(0, "method", self.method)
        return frame

    def crossings_frame(self):
        """One row per target exponent: where the local exponent reaches it."""
        import pandas as pd
        return pd.DataFrame([{"exponent": t, "x": x, "within_data": inside}
                             for t, x, inside in self.curvature.crossings],
                            columns=["exponent", "x", "within_data"])

    def influence_frame(self):
        """Rows above the Cook's distance threshold (columns row, cooks_distance)."""
        import pandas as pd
        if not self.influential_rows:
            return pd.DataFrame([], columns=["row", "cooks_distance"])
        rows, cooks = self.influence_values()
        return pd.DataFrame({"row": rows, "cooks_distance": cooks},
                            columns=["row", "cooks_distance"])

    def influence_values(self) -> tuple:
        """(flagged rows, their Cook's distances) as lists: the columns of
        :meth:`influence_frame`, without building a frame."""
        if not self.influential_rows:
            return [], []
        rows = np.asarray(self.rows, dtype=np.int64)
        # position of each flagged row (the last one should a row number repeat)
        flagged = np.asarray(self.influential_rows, dtype=np.int64)
        if rows.size and rows[-1] - rows[0] == rows.size - 1 and bool(
                np.all(np.diff(rows) == 1)):   # consecutive row numbers: positions by offset
            at = flagged - rows[0]
        elif rows.size < 2 or bool(np.all(rows[1:] >= rows[:-1])):   # in order already
            at = np.searchsorted(rows, flagged, side="right") - 1
        else:
            sorter = np.argsort(rows, kind="stable")
            at = sorter[np.searchsorted(rows, flagged, side="right", sorter=sorter) - 1]
        return list(self.influential_rows), np.asarray(self.cooks_distance, dtype=float)[at].tolist()


# --------------------------------------------------------------------------
# curvature, vectorised


def quadratic_t(log_x, log_y) -> dict:
    """OLS fit of Y = b0 + b1 X + b2 X^2, vectorised over leading axes.

    Parameters
    ----------
    log_x, log_y : array_like, shape (..., n)
        One or many samples (all replicates of a simulation at once).

    Returns
    -------
    dict of ndarray
        ``intercept, linear, quadratic, quadratic_se, statistic, df,
        p_value`` with the leading shape.

    Notes
    -----
    Normal equations on centred X (c = X - mean X): with centred sums
    S_cc, S_cq, S_qq of c and q = c^2 (q centred), and S_cy, S_qy, the
    coefficients of (c, q) solve the 2 x 2 system; the residual variance is
    (S_yy - g_c S_cy - g_q S_qy)/(n - 3) and var(g_q) = s^2 S_cc / det.
    Back in uncentred X: b2 = g_q, b1 = g_c - 2 g_q mean(X),
    b0 = mean(Y) - b1 mean(X) - b2 mean(X^2).
    """
    X = np.asarray(log_x, dtype=float)
    Y = np.asarray(log_y, dtype=float)
    n = X.shape[-1]
    mx = X.mean(axis=-1, keepdims=True)
    if X.ndim == 1 and n > SPAN:   # one long sample: the same sums a slice at a time
        scc, scq, sqq, scy, sqy, syy, sxx0, my = _sliced_quadratic_sums(X, Y, mx)
    else:
        c = X - mx
        cc = c * c   # read twice: centred into q, summed into S_cc
        q = cc - cc.mean(axis=-1, keepdims=True)
        my = Y.mean(axis=-1, keepdims=True)
        yc = Y - my
        scc = np.sum(cc, axis=-1)
        del cc
        scq = np.sum(c * q, axis=-1)
        sqq = np.sum(q * q, axis=-1)
        scy = np.sum(c * yc, axis=-1)
        sqy = np.sum(q * yc, axis=-1)
        syy = np.sum(yc * yc, axis=-1)
        sxx0 = np.sum(X * X, axis=-1)
    gc, gq, se, t, p = quadratic_solve(scc, scq, sqq, scy, sqy, syy, n)
    mx = mx[..., 0]
    b2 = gq
    b1 = gc - 2 * gq * mx
    b0 = my[..., 0] - b1 * mx - b2 * (sxx0 / n)
    return {"intercept": b0, "linear": b1, "quadratic": b2, "quadratic_se": se,
            "statistic": t, "df": np.full(np.shape(t), float(n - 3)), "p_value": p}


def _sliced_quadratic_sums(X: np.ndarray, Y: np.ndarray, mx: np.ndarray) -> tuple:
    """The centred sums of :func:`quadratic_t` for one long sample (shape (n,)), the
    same floats, a slice of the points at a time (:func:`~scaling.stats.cooks.sliced_sums`):
    ``S_cc, S_cq, S_qq, S_cy, S_qy, S_yy``, the plain sum of X^2, and mean Y (shape (1,))."""
    n = X.size
    my = Y.mean(axis=-1, keepdims=True)

    def squares(lo, hi):
        c = X[lo:hi] - mx
        return (c * c,)

    scc = sliced_sums(squares, n)[0]
    mcc = np.reshape(scc, 1) / n   # cc.mean(axis=-1, keepdims=True)

    def products(lo, hi):
        c = X[lo:hi] - mx
        q = c * c - mcc
        yc = Y[lo:hi] - my
        return c * q, q * q, c * yc, q * yc, yc * yc, X[lo:hi] * X[lo:hi]

    return (scc, *sliced_sums(products, n), my)


def quadratic_solve(scc, scq, sqq, scy, sqy, syy, n) -> tuple:
    """``(g_c, g_q, se(g_q), t, p)`` of the quadratic term from centred sums (the 2 x 2
    normal equations of :func:`quadratic_t`'s notes; t on n - 3 df).  Shared by the
    row road and the moments road (:mod:`scaling.stats.moment_curvature`)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        det = scc * sqq - scq * scq
        gc = (sqq * scy - scq * sqy) / det
        gq = (scc * sqy - scq * scy) / det
        s2 = np.maximum(syy - gc * scy - gq * sqy, 0.0) / (n - 3)
        se = np.sqrt(s2 * scc / det)
        t = gq / se
        p = 2 * tails.t_upper(np.abs(t), n - 3)
    return gc, gq, se, t, p


# --------------------------------------------------------------------------
# diagnose


def _finding(flagged) -> str:
    return "flagged" if flagged else "clear"


def _check_alpha(alpha) -> float:
    if isinstance(alpha, bool) or not isinstance(alpha, (int, float)) or not 0 < alpha < 1:
        raise ConfigError(f"alpha must be a number between 0 and 1, not {alpha!r}")
    return float(alpha)


def _checked_logs(log_x, log_y) -> tuple:
    """The logs as float arrays: one-dimensional, equal length, finite, at least MIN_N."""
    X = np.asarray(log_x, dtype=float)
    Y = np.asarray(log_y, dtype=float)
    if X.ndim != 1 or X.shape != Y.shape:
        raise DataError("log_x and log_y must be one-dimensional and of equal length")
    if not (np.all(np.isfinite(X)) and np.all(np.isfinite(Y))):
        raise DataError("log_x and log_y must be finite numbers (no NaN or inf)")
    if X.size < MIN_N:
        raise DataError(f"log_x and log_y need at least {MIN_N} rows for diagnostics, "
                        f"not {X.size}")
    return X, Y


def diagnose(fit: LineFit, log_x, log_y, *, rows=None, exponent_targets=(),
             alpha: float = 0.05, memo: dict | None = None,
             constant_variance: tuple | None = None) -> Diagnostics:
    """Residual normality, constant variance, curvature and influence of a fit.

    Parameters
    ----------
    fit : LineFit
        The fitted line (any method) whose ``slope`` and ``intercept`` give
        the residuals.
    log_x, log_y : array_like, shape (n,)
        The log-scale data the line was fitted to.
    rows : array_like of int, optional
        Input row number of each point, used to report influential rows
        (default 0, 1, ..., n - 1).
    exponent_targets : sequence of float
        Exponents at which to report where the local exponent of the
        quadratic fit reaches them.
    alpha : float
        Level at which checks are flagged.
    memo : dict, optional
        One empty dict per set of points, passed to every call for lines
        fitted to those same points: the parts that do not depend on the
        line (the quadratic fit, the OLS Cook's distances) are computed by the
        first call and read by the others.  A caller that has the points'
        moments may set ``memo["exact"]`` to ``exact_fit`` of them.
    constant_variance : (float, float), optional
        The Breusch-Pagan statistic and p-value of this line's residuals when
        the caller has them (every group of a method at once:
        :func:`breusch_pagan` with group codes).

    Returns
    -------
    Diagnostics

    Notes
    -----
    Formulas and sources are in the module docstring.
    """
    if not isinstance(fit, LineFit):
        raise ConfigError(f"fit must be a LineFit, not {type(fit).__name__}")
    alpha = _check_alpha(alpha)
    X, Y = _checked_logs(log_x, log_y)
    n = X.size
    if n != fit.n:
        raise DataError(f"log_x has {n} rows but the fit was made on {fit.n}")
    if not fit.estimable:
        raise DataError(f"the {fit.method} fit has no estimate to diagnose: {fit.note}")
    if rows is None:
        rows = np.arange(n)
    rows = np.asarray(rows)
    if rows.shape != (n,):
        raise DataError(f"rows must give one row number per point ({n}), not shape {rows.shape}")
    try:
        targets = tuple(float(t) for t in exponent_targets)
    except (TypeError, ValueError):
        raise ConfigError("exponent_targets must be a sequence of numbers") from None
    if np.ptp(X) == 0:
        raise DataError("log_x does not vary: nothing to diagnose")

    memo = {} if memo is None else memo
    if "exact" not in memo:   # the points' moments, once per set of points
        memo["exact"] = bool(exact_fit(moments(X, Y)))
    if memo["exact"]:
        return _exact_diagnostics(fit, X, Y, rows, alpha)

    resid = Y - fit.intercept - fit.slope * X
    checks = [_normality(resid, alpha)]
    if (level := np.ptp(resid) == 0):
        warnings.warn("residuals are all equal: the constant-variance test is not defined",
                      DegenerateDataWarning, stacklevel=2)
    if "centred" not in memo:   # X's part of the Breusch-Pagan test, once per set
        memo["centred"] = _centred(X)
    checks.append(_constant_variance(resid, X, alpha=alpha, given=constant_variance,
                                     centred=memo["centred"], level=level))
    if "quadratic" not in memo:   # the same for every line through these points
        memo["quadratic"] = {k: float(v) for k, v in quadratic_t(X, Y).items()}
        memo["cooks"] = ols_cooks_distances(X, Y)
    curv, check = _curvature(memo["quadratic"], X, targets, fit.log_base, alpha)
    checks.append(check)
    cooks = memo["cooks"]
    threshold = 4.0 / n
    # the OLS Cook's distances are the same for every line through these points: so is
    # the check, when the row numbers are (the same Check object, so callers see it)
    seen = memo.get("influence")
    if seen is None or not (seen[0] is rows or np.array_equal(seen[0], rows)):
        seen = memo["influence"] = (rows, _influence(cooks, rows, threshold))
    checks.append(seen[1])
    influential = checks[-1].rows

    return Diagnostics(method=fit.method, n=n, alpha=alpha, checks=tuple(checks),
                       curvature=curv, residuals=resid, cooks_distance=cooks,
                       influence_threshold=threshold, influential_rows=influential,
                       rows=rows)


def _exact_diagnostics(fit: LineFit, X, Y, rows, alpha: float) -> Diagnostics:
    """Diagnostics of points on an exact power law: no check applies.

    With no residual scatter (r = +-1 up to rounding) the residuals are
    rounding noise, so normality, constant-variance, curvature and influence
    statistics would read noise as signal (a curvature t of 1e3 is common).
    Every check is reported unflagged with NaN statistics and finding
    ``"exact_fit"``.
    """
    n = X.size
    checks = tuple(
        Check(check=name, test=test, statistic=math.nan, df=math.nan, p_value=math.nan,
              estimate=math.nan, flagged=False, finding="exact_fit")
        for name, test in (("normality", "Shapiro-Wilk"),
                           ("constant_variance", "Breusch-Pagan"),
                           ("curvature", "quadratic term t"),
                           ("influence", "Cook's distance")))
    curv = Curvature(intercept=fit.intercept, linear=fit.slope, quadratic=0.0,
                     quadratic_se=math.nan, statistic=math.nan, df=float(n - 3),
                     p_value=math.nan, log_base=fit.log_base, crossings=())
    return Diagnostics(method=fit.method, n=n, alpha=alpha, checks=checks, curvature=curv,
                       residuals=Y - fit.intercept - fit.slope * X,
                       cooks_distance=np.zeros(n), influence_threshold=4.0 / n,
                       influential_rows=(), rows=rows)



# --------------------------------------------------------------------------
# the parallel-lines model: groups share a slope, each keeps its elevation


@dataclass(frozen=True, slots=True)
class GroupCodes:
    """Groups already coded: ``labels[codes[i]]`` is point i's group, ``labels`` sorted
    as text (what :func:`unique_codes` returns).  Passed as ``groups`` to the
    parallel-lines functions, it spares coding a million labels once per function."""

    codes: np.ndarray
    labels: np.ndarray


def _group_codes(groups, n: int) -> tuple:
    if isinstance(groups, GroupCodes):
        if np.shape(groups.codes) != (n,):
            raise DataError(f"groups must give one value per point ({n}), "
                            f"not shape {np.shape(groups.codes)}")
        return np.asarray(groups.codes), np.asarray(groups.labels)
    g = np.asarray(groups)
    if g.shape != (n,):
        raise DataError(f"groups must give one value per point ({n}), not shape {g.shape}")
    return unique_codes(g)


def unique_codes(values) -> tuple:
    """(codes, labels): ``np.unique(values.astype(str), return_inverse=True)`` reversed,
    through one hash pass (sorting a million strings costs about a second; only the
    distinct labels are sorted here)."""
    values = np.asarray(values)
    if values.dtype == object and pd.api.types.infer_dtype(values, skipna=False) == "string":
        # already text: hash the objects; only the distinct labels become a numpy str array
        text = values
    else:
        text = values.astype(str)
    if not text.size:
        return np.zeros(0, dtype=np.intp), text
    first, uniq = pd.factorize(text)
    uniq = np.asarray(uniq).astype(str)
    order = np.argsort(uniq, kind="stable")
    rank = np.empty(order.size, dtype=np.intp)
    rank[order] = np.arange(order.size)
    return rank[first], uniq[order]


def group_order(codes, n_groups: int) -> np.ndarray:
    """``np.argsort(codes, kind="stable")``: the points of group 0, then of group 1, ...,
    each group's in their order.  Codes below 2^15 are sorted as 16-bit integers, which
    numpy's stable sort does by radix (a stable order is unique: the same positions)."""
    codes = np.asarray(codes)
    if codes.dtype.kind in "iu" and 0 < n_groups <= np.iinfo(np.int16).max:
        codes = codes.astype(np.int16)
    return np.argsort(codes, kind="stable")


def _within(A: np.ndarray, codes: np.ndarray, n_groups: int) -> np.ndarray:
    """A minus its group means along the last axis (any leading shape; codes (n,))."""
    lead = A.shape[:-1]
    M = int(np.prod(lead)) if lead else 1
    flat = A.reshape(M, A.shape[-1])
    idx = (codes[None, :] + n_groups * np.arange(M)[:, None]).ravel()
    sums = np.bincount(idx, weights=flat.ravel(), minlength=M * n_groups)
    counts = np.bincount(codes, minlength=n_groups).astype(float)
    means = sums.reshape(M, n_groups) / counts
    return (flat - means[:, codes]).reshape(A.shape)


def within_quadratic_t(log_x, log_y, groups) -> dict:
    """OLS fit of Y = a_g + b1 X + b2 X^2 (one elevation per group), vectorised.

    Parameters
    ----------
    log_x, log_y : array_like, shape (..., n)
        One or many samples (all replicates of a simulation at once).
    groups : array_like, shape (n,)
        Group of each point, the same for every sample.

    Returns
    -------
    dict of ndarray
        ``linear, quadratic, quadratic_se, statistic, df, p_value`` with the
        leading shape; ``intercept`` is NaN (each group has its own).

    Notes
    -----
    By Frisch-Waugh-Lovell the coefficients of X and q = (X - mean X)^2 in
    the model with group dummies are those of the regression of the
    within-group centred Y on the within-group centred X and q; the
    2 x 2 normal equations are then those of :func:`quadratic_t` with
    n - G - 2 residual degrees of freedom.  The linear coefficient is
    returned for uncentred X: b1 = g_c - 2 g_q mean(X).
    """
    X = np.asarray(log_x, dtype=float)
    Y = np.asarray(log_y, dtype=float)
    if X.ndim < 1 or X.shape != Y.shape:
        raise DataError("log_x and log_y must be arrays of equal shape (..., n)")
    n = X.shape[-1]
    codes, labels = _group_codes(groups, n)
    G = labels.size
    if n - G - 2 < 1:
        raise DataError(f"{n} points in {G} groups leave no degrees of freedom for the "
                        "quadratic term (need n - G - 2 >= 1)")
    mx = X.mean(axis=-1, keepdims=True)
    c = _within(X, codes, G)
    q = _within((X - mx) ** 2, codes, G)
    yc = _within(Y, codes, G)
    scc = np.sum(c * c, axis=-1)
    scq = np.sum(c * q, axis=-1)
    sqq = np.sum(q * q, axis=-1)
    scy = np.sum(c * yc, axis=-1)
    sqy = np.sum(q * yc, axis=-1)
    syy = np.sum(yc * yc, axis=-1)
    det = scc * sqq - scq * scq
    df = n - G - 2
    with np.errstate(divide="ignore", invalid="ignore"):
        gc = (sqq * scy - scq * sqy) / det
        gq = (scc * sqy - scq * scy) / det
        s2 = np.maximum(syy - gc * scy - gq * sqy, 0.0) / df
        se = np.sqrt(s2 * scc / det)
        t = gq / se
    p = 2 * tails.t_upper(np.abs(t), df)
    return {"intercept": np.full(np.shape(t), np.nan), "linear": gc - 2 * gq * mx[..., 0],
            "quadratic": gq, "quadratic_se": se, "statistic": t,
            "df": np.full(np.shape(t), float(df)), "p_value": p}


def parallel_lines_influence(log_x, log_y, groups) -> dict:
    """Cook's distance and slope change of each point in the parallel-lines OLS model.

    Parameters
    ----------
    log_x, log_y : array_like, shape (n,)
    groups : array_like, shape (n,)
        Every group needs at least two points.

    Returns
    -------
    dict
        ``cook`` (n,): Cook's distance in the model Y = a_g + b X;
        ``slope_change`` (n,): b_(-i) - b, the common OLS slope without
        point i minus the slope with it; ``slope``, ``slope_se`` (floats);
        ``leverage`` (n,); ``exact`` (bool: no residual scatter).

    Notes
    -----
    With X~ the within-group centred X, S = sum X~^2, b = sum X~ Y~ / S,
    e = Y~ - b X~, p = G + 1 and s^2 = sum e^2/(n - G - 1):
    h_i = 1/n_g + X~_i^2/S, D_i = e_i^2 h_i / (p s^2 (1 - h_i)^2)
    (Cook 1977), and by the deletion formula of least squares
    b_(-i) - b = -X~_i e_i / (S (1 - h_i)) (the slope row of
    (X'X)^-1 x_i e_i/(1 - h_i); Belsley, Kuh & Welsch 1980, DFBETA).
    """
    X = np.asarray(log_x, dtype=float)
    Y = np.asarray(log_y, dtype=float)
    if X.ndim != 1 or X.shape != Y.shape:
        raise DataError("log_x and log_y must be one-dimensional and of equal length")
    n = X.size
    codes, labels = _group_codes(groups, n)
    G = labels.size
    counts = np.bincount(codes, minlength=G)
    if counts.min() < 2:
        small = ", ".join(str(labels[k]) for k in np.flatnonzero(counts < 2))
        raise DataError(f"every group needs at least 2 points for the parallel-lines "
                        f"model; {small} has fewer")
    xt, yt = _within(X, codes, G), _within(Y, codes, G)
    S = float(np.sum(xt * xt))
    if not S > 0:
        raise DataError("log_x does not vary within groups: nothing to diagnose")
    b = float(np.sum(xt * yt) / S)
    e = yt - b * xt
    df = n - G - 1
    rss = float(np.sum(e * e))
    exact = bool(rss <= EXACT_FIT_TOL * float(np.sum(yt * yt)))
    h = 1.0 / counts[codes] + xt * xt / S
    with np.errstate(divide="ignore", invalid="ignore"):
        s2 = rss / df if df > 0 else math.nan
        cook = e * e * h / ((G + 1) * s2 * (1 - h) ** 2)
        change = -xt * e / (S * (1 - h))
    if exact:
        cook = np.zeros(n)
    return {"cook": cook, "slope_change": change, "slope": b,
            "slope_se": math.sqrt(s2 / S) if df > 0 and not exact else (0.0 if exact
                                                                         else math.nan),
            "leverage": h, "exact": exact}


def diagnose_parallel(slope: float, log_x, log_y, groups, *, method: str = "ols",
                      rows=None, exponent_targets=(), alpha: float = 0.05,
                      log_base: float | None = None) -> Diagnostics:
    """Residual, curvature and influence checks of parallel lines (one slope, own elevations).

    Parameters
    ----------
    slope : float
        The common within-group slope the lines are drawn with (the answer's
        exponent, of any method).
    log_x, log_y : array_like, shape (n,)
        The log-scale points of the groups that share the slope.
    groups : array_like, shape (n,)
        Group of each point (at least 2 points each).
    method : str
        Method of the common slope (recorded in the result).
    rows : array_like of int, optional
        Input row number of each point (default 0, ..., n - 1).
    exponent_targets : sequence of float
        Exponents at which to report where the local exponent of the
        common quadratic reaches them.
    alpha : float
    log_base : float or None
        Base of the logs (for the crossings in natural units).

    Returns
    -------
    Diagnostics
        ``curvature.intercept`` is NaN (one elevation per group).

    Notes
    -----
    Residuals are the vertical residuals of the stated lines:
    e = Y - a_g - b X with a_g = mean_g Y - b mean_g X, the line of slope b
    through each group's centroid.  For an SMA or MA common slope these are
    the answer's own lines, and their vertical residuals are what the
    normality and constant-variance checks of a single line read too
    (:func:`diagnose`), so the two are told apart by the model only.
    Normality is Shapiro-Wilk and constant variance Breusch-Pagan on
    regressors (1, X) (does the scatter change with size?), as for one
    line.  Curvature and Cook's distance are those of the parallel-lines
    OLS model whatever the method: the quadratic test needs a least-squares
    fit, and for SMA/MA the OLS distances are a proxy, as for one line.
    Formulas are in the module docstring.
    """
    alpha = _check_alpha(alpha)
    X, Y = _checked_logs(log_x, log_y)
    n = X.size
    if not np.isfinite(slope):
        raise DataError("the common slope is not a finite number: nothing to diagnose")
    rows = np.arange(n) if rows is None else np.asarray(rows)
    if rows.shape != (n,):
        raise DataError(f"rows must give one row number per point ({n}), not shape {rows.shape}")
    try:
        targets = tuple(float(t) for t in exponent_targets)
    except (TypeError, ValueError):
        raise ConfigError("exponent_targets must be a sequence of numbers") from None
    codes, labels = _group_codes(groups, n)
    groups = GroupCodes(codes, labels)   # coded once for the functions below
    infl = parallel_lines_influence(X, Y, groups)
    xt, yt = _within(X, codes, labels.size), _within(Y, codes, labels.size)
    resid = yt - float(slope) * xt
    threshold = 4.0 / n
    if infl["exact"]:
        fit = _Line(method=method, slope=float(slope), log_base=log_base)
        checks = _exact_diagnostics(fit, X, Y, rows, alpha).checks
        curv = Curvature(intercept=math.nan, linear=float(slope), quadratic=0.0,
                         quadratic_se=math.nan, statistic=math.nan,
                         df=float(n - labels.size - 2), p_value=math.nan,
                         log_base=log_base, crossings=())
        return Diagnostics(method=method, n=n, alpha=alpha, checks=checks, curvature=curv,
                           residuals=resid, cooks_distance=np.zeros(n),
                           influence_threshold=threshold, influential_rows=(), rows=rows)
    checks = [_normality(resid, alpha)]
    checks.append(_constant_variance(resid, X, alpha=alpha))
    q = {k: float(v) for k, v in within_quadratic_t(X, Y, groups).items()}
    curv, check = _curvature(q, X, targets, log_base, alpha)
    checks.append(check)
    cooks = np.asarray(infl["cook"], dtype=float)
    checks.append(_influence(cooks, rows, threshold))
    return Diagnostics(method=method, n=n, alpha=alpha, checks=tuple(checks), curvature=curv,
                       residuals=resid, cooks_distance=cooks, influence_threshold=threshold,
                       influential_rows=checks[-1].rows, rows=rows)


@dataclass(frozen=True, slots=True)
class _Line:
    """What :func:`_exact_diagnostics` reads of a fit (parallel lines have no one intercept)."""

    method: str
    slope: float
    log_base: float | None
    intercept: float = math.nan


def _normality(resid, alpha) -> Check:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # scipy's n > 5000 accuracy note
        sw = shapiro_wilk(resid)
    flagged = bool(sw.pvalue < alpha)
    return Check(check="normality", test="Shapiro-Wilk", statistic=float(sw.statistic),
                 df=math.nan, p_value=float(sw.pvalue), estimate=math.nan,
                 flagged=flagged, finding=_finding(flagged))


def _constant_variance(resid, X, het_breuschpagan=None, alpha=0.05, given=None,
                       centred=None, level=None) -> Check:
    """Breusch-Pagan check on (1, X): ``given`` (statistic, p), else the closed form
    (:func:`breusch_pagan`; ``centred``: :func:`_centred` of X when the caller has it),
    or ``het_breuschpagan(resid, exog)`` when a function of that signature is given;
    ``level``: whether the residuals are all equal, when the caller knows."""
    w = None   # e^2, kept for the trend's sign below
    if np.ptp(resid) == 0 if level is None else level:
        lm, p_bp = math.nan, math.nan
    elif given is not None:
        lm, p_bp = float(given[0]), float(given[1])
    elif het_breuschpagan is None and centred is not None:
        e = np.asarray(resid, dtype=float)
        lm, p_bp = _breusch_pagan_centred(w := e * e, centred)
    elif het_breuschpagan is None:
        lm, p_bp = breusch_pagan(resid, X)
    else:
        lm, p_bp, _, _ = het_breuschpagan(resid, np.column_stack([np.ones(X.size), X]))
        lm, p_bp = float(lm), float(p_bp)
    flagged = bool(p_bp < alpha)
    trend = 0
    if flagged:
        # the sign of the OLS slope of e^2 on X is the sign of their centred cross
        # product (a significant test puts it far from rounding's zero)
        xc = X - X.mean() if centred is None else centred[0]
        trend = 1 if np.dot(xc, resid ** 2 if w is None else w) > 0 else -1
    return Check(check="constant_variance", test="Breusch-Pagan", statistic=lm, df=1.0,
                 p_value=p_bp, estimate=math.nan, flagged=flagged, finding=_finding(flagged),
                 direction=trend)


def _curvature(qv: dict, X, targets, base, alpha) -> tuple:
    lo, hi = float(X.min()), float(X.max())
    crossings = []
    for target in targets:
        if qv["quadratic"] == 0 or not np.isfinite(qv["quadratic"]):
            crossings.append((target, math.nan, False))
            continue
        lx = (target - qv["linear"]) / (2 * qv["quadratic"])
        with np.errstate(over="ignore"):
            xs = float(lx) if base is None else float(np.power(np.float64(base), lx))
        crossings.append((target, xs, bool(lo <= lx <= hi)))
    curv = Curvature(intercept=qv["intercept"], linear=qv["linear"],
                     quadratic=qv["quadratic"], quadratic_se=qv["quadratic_se"],
                     statistic=qv["statistic"], df=qv["df"], p_value=qv["p_value"],
                     log_base=base, crossings=tuple(crossings))
    flagged = bool(qv["p_value"] < alpha)
    e_lo, e_hi = (float(e) for e in curv.local_exponent([lo, hi]))
    return curv, Check(check="curvature", test="quadratic term t", statistic=qv["statistic"],
                       df=qv["df"], p_value=qv["p_value"], estimate=qv["quadratic"],
                       flagged=flagged, finding=_finding(flagged),
                       direction=1 if qv["quadratic"] > 0 else -1,
                       exponent_low=e_lo, exponent_high=e_hi)


def _influence(cooks, rows, threshold) -> Check:
    above = np.flatnonzero(cooks > threshold)
    above = above[np.argsort(-cooks[above], kind="stable")]
    flagged = above.size > 0
    top = float(cooks.max()) if cooks.size else math.nan
    return Check(check="influence", test="Cook's distance", statistic=top, df=math.nan,
                 p_value=math.nan, estimate=top, flagged=flagged, finding=_finding(flagged),
                 rows=tuple(rows[above].tolist()))
