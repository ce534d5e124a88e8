"""Which points and numbers to look at: leverage, Cook's distance, points to check.

:func:`cooks_distances` and :func:`leave_one_out_slopes` measure each point's
pull on the line, all points (and many samples) at once;
:func:`points_to_check` grades them, with the checks of a whole fit
(:func:`fit_checks`), into :class:`PointCheck` findings: a ``kind`` code and
the numbers behind it (the words are made in :mod:`scaling.render.findings`).

Points to check (:func:`points_to_check`)
    Graded warnings.  *Strong*: a point with Cook's distance D_i > 1 (Cook
    & Weisberg 1982, *Residuals and Influence in Regression*, the usual
    absolute cut-off), or whose removal moves the exponent by more than
    its standard error (|b_(-i) - b| > se(b); the absolute DFBETA cut-off of
    Belsley, Kuh & Welsch 1980, with se(b) of the full fit).  b_(-i) comes
    from the moments downdated by point i (exact: n' = n - 1,
    S'_xx = S_xx - n/(n-1) (X_i - mean X)^2, likewise S'_xy, S'_yy), all
    points at once.  A smearing factor (Duan 1983) whose ratio to the
    parametric factor exp(s^2 ln(base)^2 / 2) lies outside
    [1/SMEARING_RATIO_LIMIT, SMEARING_RATIO_LIMIT] (1.25; common practice, no
    source: normal residuals put the two within a few per cent) is strong.
    A back-transformed estimate outside its own interval is strong (it
    happens when one huge residual inflates the smearing factor).  *Mild*:
    pooled residuals that differ between groups by one-way ANOVA
    (:func:`one_way_f`, ``scipy.stats.f_oneway``'s numbers) at ``alpha``.

Points that move the answer (:func:`strong_parallel_influence`, :func:`verdict_code`,
:func:`moves_answer`)
    The same strong rule applied to the model the answer states: for parallel
    lines (a common within-group slope), Cook's distance in the
    parallel-lines OLS model above :data:`COOK_STRONG`, or a deletion change
    of the common OLS slope above its standard error.  The caller refits the
    answer's own model without each strong point; the point *moves the
    answer* when the exponent changes by more than its standard error (of
    the fit with the point) or a verdict against a hypothesised exponent
    (above / below / not different at alpha) changes (kind
    ``"moves_answer"``).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
from scipy import special

from .classic_tests import one_way_anova

from ..errors import DataError
from .lines import MIN_N as LINE_MIN_N
from .lines import METHODS, exact_fit, fit_moments, get_method
from .cooks import SPAN, ols_cooks_distances, sliced_sums
from .cooks import spans as _spans
from .moments import Moments, moments
from .residual_checks import (MIN_N, _check_alpha, group_order, parallel_lines_influence,
                              unique_codes)
from .schema import check_method

__all__ = ["PointCheck", "leave_one_out_slopes", "cooks_distances", "points_to_check",
           "strong_influence", "strong_influence_each", "fit_checks", "SMEARING_RATIO_LIMIT", "COOK_STRONG",
           "strong_parallel_influence", "verdict_code", "moves_answer", "narrows",
           "NARROWS"]

# --------------------------------------------------------------------------
# points to check, graded

SMEARING_RATIO_LIMIT = 1.25
COOK_STRONG = 1.0


@dataclass(frozen=True, slots=True, kw_only=True)
class PointCheck:
    """One thing the user should look at.

    Attributes
    ----------
    severity : str
        ``"strong"`` (look at this before using the numbers) or ``"mild"``
        (a note).
    kind : str
        ``"influence"``, ``"moves_answer"``, ``"smearing"``,
        ``"outside_interval"`` or ``"group_residuals"``.
    row : int or None
        Input row number of the point (None for checks of the whole fit).
    label : str
        The point's label (e.g. its species), or what the check is about.
    value : float
        Cook's distance, smearing/parametric ratio, the estimate, or the
        ANOVA p-value.
    method : str
        ``"influence"``: the line method refitted without the point.
    slope, slope_without, slope_se : float
        ``"influence"``: the exponent, the exponent without the point, and
        the exponent's standard error.
    slope_se_without : float
        ``"moves_answer"``: the standard error of the refit without the point.
    narrowed : bool
        ``"moves_answer"``: removing the point narrows the interval by more than
        a quarter (:func:`narrows`).
    smearing_factor, parametric_factor, limit : float
        ``"smearing"``: the two correction factors and
        :data:`SMEARING_RATIO_LIMIT`.
    low, high : float
        ``"outside_interval"``: the estimate's interval.
    statistic : float
    df1, df2 : int or None
        ``"group_residuals"``: the one-way ANOVA F and its degrees of freedom.
    context : tuple of (str, object)
        ``"moves_answer"``: what identifies the point besides its row (e.g.
        ``(("stem_mm", 4.1), ("habitat", "shade"))``).
    exponent_of : str
        ``"moves_answer"``: the group whose exponent moves when the answer
        gives one per group, else "".
    changes : tuple of (str, str, str)
        ``"moves_answer"``: (hypothesised exponent as written, verdict code
        with the point, verdict code without it) for each verdict that
        changes (:func:`verdict_code`).

    Notes
    -----
    A finding is data; :func:`scaling.render.findings.point_check_reason`
    words it.
    """

    severity: str
    kind: str
    row: int | None
    label: str
    value: float
    method: str = ""
    slope: float = math.nan
    slope_without: float = math.nan
    slope_se: float = math.nan
    slope_se_without: float = math.nan
    narrowed: bool = False
    smearing_factor: float = math.nan
    parametric_factor: float = math.nan
    limit: float = math.nan
    low: float = math.nan
    high: float = math.nan
    statistic: float = math.nan
    df1: int | None = None
    df2: int | None = None
    context: tuple = ()
    exponent_of: str = ""
    changes: tuple = ()

    def to_record(self) -> dict:
        """The columns of ``points_to_check.csv`` that are numbers and codes (not ``reason``)."""
        return {"severity": self.severity, "kind": self.kind, "row": self.row,
                "label": self.label, "value": self.value}


def _moments_last_axis(X: np.ndarray, Y: np.ndarray) -> Moments:
    n = X.shape[-1]
    mx, my = X.mean(axis=-1), Y.mean(axis=-1)
    if X.ndim == 1 and n > SPAN:   # one long sample: the same sums a slice at a time
        def products(lo, hi):
            d, f = X[lo:hi] - mx, Y[lo:hi] - my
            return d * d, f * f, d * f
        sxx, syy, sxy = sliced_sums(products, n)
    else:
        d, f = X - mx[..., None], Y - my[..., None]
        sxx, syy, sxy = np.sum(d * d, axis=-1), np.sum(f * f, axis=-1), np.sum(d * f, axis=-1)
    return Moments(n=np.full(mx.shape, float(n)), mean_x=mx, mean_y=my, sxx=sxx, syy=syy,
                   sxy=sxy)


def _centred(X: np.ndarray, Y: np.ndarray) -> tuple:
    """(Moments along the last axis, X and Y minus their means): the centred values
    are what the influence measures are made of, taken once."""
    m = _moments_last_axis(X, Y)
    return m, X - m.mean_x[..., None], Y - m.mean_y[..., None]


def _xy(log_x, log_y, what: str) -> tuple:
    X = np.asarray(log_x, dtype=float)
    Y = np.asarray(log_y, dtype=float)
    if X.ndim < 1 or X.shape != Y.shape:
        raise DataError("log_x and log_y must be arrays of equal shape (..., n)")
    if X.shape[-1] < MIN_N:
        raise DataError(f"log_x and log_y need at least {MIN_N} rows for {what}, "
                        f"not {X.shape[-1]}")
    return X, Y


def cooks_distances(log_x, log_y) -> np.ndarray:
    """Cook's distance of every point in the OLS regression of Y on X.

    Parameters
    ----------
    log_x, log_y : array_like, shape (..., n)
        One sample, or many (leading axes, e.g. simulation replicates).

    Returns
    -------
    ndarray, shape (..., n)

    Notes
    -----
    D_i = e_i^2 h_i / (2 s^2 (1 - h_i)^2), h_i = 1/n + (X_i - mean X)^2 / S_xx,
    s^2 = sum e^2 / (n - 2) (Cook 1977, *Technometrics* 19:15).
    """
    X, Y = _xy(log_x, log_y, "Cook's distances")
    return ols_cooks_distances(X, Y)


def leave_one_out_slopes(log_x, log_y, *, method: str = "ols") -> np.ndarray:
    """The exponent refitted without each point in turn, all at once.

    Parameters
    ----------
    log_x, log_y : array_like, shape (..., n)
        One sample, or many (leading axes).
    method : str
        A moment method of :data:`scaling.stats.lines.METHODS` (ols, sma, ma).

    Returns
    -------
    ndarray, shape (..., n)
        b_(-i), the slope of the same method without point i.

    Notes
    -----
    Downdating (exact algebra of centred sums): with d_i = X_i - mean X and
    f_i = Y_i - mean Y, removing point i gives n - 1 points with
    S_xx - n/(n-1) d_i^2, S_yy - n/(n-1) f_i^2, S_xy - n/(n-1) d_i f_i and
    means shifted by -d_i/(n-1), -f_i/(n-1).
    """
    method = check_method(method, METHODS)
    X, Y = _xy(log_x, log_y, "leaving one out")
    n = X.shape[-1]
    m = _moments_last_axis(X, Y)
    k = n / (n - 1)
    out = np.empty(X.shape)
    for lo, hi in _spans(n):   # elementwise: a slice of the points at a time
        d, f = X[..., lo:hi] - m.mean_x[..., None], Y[..., lo:hi] - m.mean_y[..., None]
        down = Moments(n=np.full(d.shape, n - 1.0), mean_x=m.mean_x[..., None] - d / (n - 1),
                       mean_y=m.mean_y[..., None] - f / (n - 1),
                       sxx=m.sxx[..., None] - k * d * d, syy=m.syy[..., None] - k * f * f,
                       sxy=m.sxy[..., None] - k * d * f)
        out[..., lo:hi] = _slopes(down, method)
    return out


def _slopes(m: Moments, method: str) -> np.ndarray:
    """``fit_moments(m, method)["slope"]`` without the intervals (the same floats)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        b = np.asarray(get_method(method).slope(m), dtype=float)
    return np.where(_no_line(m, method).reshape(np.shape(m.n)), np.nan, b)


def _no_line(m: Moments, method: str) -> np.ndarray:
    """``fit_notes(m, method) != ""`` without the notes' text (a million points' worth of
    strings when every point is left out in turn): the same conditions, as booleans."""
    n = np.atleast_1d(m.n)
    sxx, syy, sxy = (np.atleast_1d(a) for a in (m.sxx, m.syy, m.sxy))
    bad = sxx <= (n * (1e-12 * (np.abs(np.atleast_1d(m.mean_x)) + 1.0)) ** 2)
    bad |= syy <= (n * (1e-12 * (np.abs(np.atleast_1d(m.mean_y)) + 1.0)) ** 2)
    if method != "ols":
        bad |= sxy == 0
    bad |= n < LINE_MIN_N
    return bad


def strong_influence(log_x, log_y, *, method: str = "ols") -> dict:
    """Which points get a strong influence warning, for one sample or many.

    Returns
    -------
    dict of ndarray
        ``flag`` (..., n) bool: D_i > 1 or |b_(-i) - b| > se(b);
        ``cook``, ``slope_without`` (..., n); ``slope``, ``slope_se`` (...).

    Notes
    -----
    Rules and sources are in the module docstring.
    """
    X, Y = _xy(log_x, log_y, "influence")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        full = fit_moments(_moments_last_axis(X, Y), method)
    b, se = np.asarray(full["slope"], float), np.asarray(full["slope_se"], float)
    loo = leave_one_out_slopes(X, Y, method=method)
    cook = cooks_distances(X, Y)
    with np.errstate(invalid="ignore"):
        moved = np.abs(loo - b[..., None]) > se[..., None]
        # exact fits (se = 0; D is rounding noise) are never flagged
        flag = ((cook > COOK_STRONG) | moved) & (se[..., None] > 0)
    return {"flag": flag, "cook": cook, "slope_without": loo, "slope": b, "slope_se": se}


def _strong_points(X: np.ndarray, Y: np.ndarray, method: str) -> tuple:
    """The points :func:`strong_influence` flags in one sample (1-d ``X``, ``Y``), the
    strongest first: ``(positions, cook, slope_without, slope, slope_se)``.

    The same floats as ``strong_influence(X, Y, method=method)`` (its steps, in its
    order), a span of :data:`~scaling.stats.cooks.SPAN` points at a time from the
    centred values taken once: no array of every point's distance, refitted slope and
    flag, and the sums of a million points are not taken three times over.
    """
    n = X.size
    m, d, f = _centred(X, Y)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        full = fit_moments(m, method)
    b, se = np.asarray(full["slope"], float), np.asarray(full["slope_se"], float)
    none = np.zeros(0, dtype=np.intp), np.zeros(0), np.zeros(0)
    if not np.all(se > 0):   # an exact fit (or none): nothing is flagged
        return (*none, b, se)
    k = n / (n - 1)
    found = []
    with np.errstate(divide="ignore", invalid="ignore"):
        # Cook's distances (the algebra of ols_cooks_distances): the OLS slope, the sum
        # of squared residuals over every point at once (numpy's order of addition)
        slope = m.sxy / m.sxx
        e = np.multiply(d, slope)
        np.subtract(f, e, out=e)
        np.multiply(e, e, out=e)
        s2 = np.sum(e, axis=-1) / (n - 2)
        del e
        for lo, hi in _spans(n):
            ds, fs = d[lo:hi], f[lo:hi]
            # leave one out (the algebra of leave_one_out_slopes)
            down = Moments(n=np.full(ds.shape, n - 1.0),
                           mean_x=m.mean_x[..., None] - ds / (n - 1),
                           mean_y=m.mean_y[..., None] - fs / (n - 1),
                           sxx=m.sxx[..., None] - k * ds * ds,
                           syy=m.syy[..., None] - k * fs * fs,
                           sxy=m.sxy[..., None] - k * ds * fs)
            loo = _slopes(down, method)
            es = fs - slope * ds
            h = 1.0 / n + ds * ds / m.sxx
            cook = es * es * h / (2 * s2 * (1 - h) ** 2)
            moved = np.abs(loo - b[..., None]) > se[..., None]
            at = np.flatnonzero((cook > COOK_STRONG) | moved)
            if at.size:
                found.append((at + lo, cook[at], loo[at]))
    if not found:
        return (*none, b, se)
    where, cook, loo = (np.concatenate(part) for part in zip(*found))
    strongest = np.argsort(-cook, kind="stable")
    return where[strongest], cook[strongest], loo[strongest], b, se


def strong_influence_each(samples, *, method: str = "ols") -> list:
    """:func:`strong_influence` of many samples of different sizes, in one array pass.

    Parameters
    ----------
    samples : sequence of (log_x, log_y)
        One-dimensional samples, each of at least :data:`MIN_N` points.
    method : str

    Returns
    -------
    list of dict
        One per sample, the same numbers :func:`strong_influence` gives it.

    Notes
    -----
    The samples are laid end to end and every sum is a segmented reduction
    (``np.add.reduceat``) over segments each led by a zero, which adds each
    segment in the order :func:`numpy.sum` adds the sample alone, so the
    floats are the same.  Consecutive samples are taken a run of about
    ``2 * SPAN`` points at a time (a larger sample alone), so the temporary
    arrays stay a few megabytes whatever the number of samples.
    """
    method = check_method(method, METHODS)
    pairs = [_xy(x, y, "influence") for x, y in samples]
    if any(X.ndim != 1 for X, _ in pairs):
        raise DataError("each sample must be one-dimensional")
    out, lo, filled = [], 0, 0
    for i, (X, _) in enumerate(pairs):
        if i > lo and filled + X.size > 2 * SPAN:
            out += _influence_run(pairs[lo:i], method)
            lo, filled = i, 0
        filled += X.size
    return out + _influence_run(pairs[lo:], method)


def _influence_run(pairs: list, method: str) -> list:
    """:func:`strong_influence_each` of checked samples, all in one array pass."""
    if not pairs:
        return []
    sizes = np.array([X.size for X, _ in pairs])
    starts = np.concatenate(([0], np.cumsum(sizes)[:-1]))
    X = np.concatenate([X for X, _ in pairs])
    Y = np.concatenate([Y for _, Y in pairs])
    n = sizes.astype(float)

    def spread(v):   # each sample's value over its points (contiguous: no gather)
        return np.repeat(v, sizes)

    # each segment led by a zero: reduceat then adds 0 + (the segment's pairwise sum),
    # numpy.sum's order (without it, the first element is added last); the values go
    # to every slot but the heads, by a mask of bytes
    heads = starts + np.arange(sizes.size)
    slots = np.ones(X.size + sizes.size, dtype=bool)
    slots[heads] = False

    def total(v):
        padded = np.zeros(slots.size)
        padded[slots] = v
        return np.add.reduceat(padded, heads)

    mx, my = total(X) / n, total(Y) / n
    mx_e, my_e = spread(mx), spread(my)
    d, f = X - mx_e, Y - my_e
    del X, Y
    dd = d * d
    sxx, syy, sxy = total(dd), total(f * f), total(d * f)
    b, se = _slopes_and_ses(Moments(n=n, mean_x=mx, mean_y=my, sxx=sxx, syy=syy, sxy=sxy),
                            method)
    sxx_e = spread(sxx)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        # leave one out (the algebra of leave_one_out_slopes)
        ne, k = spread(n), spread(n / (n - 1))
        down = Moments(n=ne - 1.0, mean_x=mx_e - d / (ne - 1), mean_y=my_e - f / (ne - 1),
                       sxx=sxx_e - k * d * d, syy=spread(syy) - k * f * f,
                       sxy=spread(sxy) - k * d * f)
        del mx_e, my_e, k
        loo = _slopes(down, method)
        del down
    with np.errstate(divide="ignore", invalid="ignore"):
        # Cook's distances (the algebra of cooks_distances)
        e = f - spread(sxy / sxx) * d
        s2 = spread(total(e * e) / (n - 2))
        h = 1.0 / ne + dd / sxx_e
        cook = e * e * h / (2 * s2 * (1 - h) ** 2)
        moved = np.abs(loo - spread(b)) > spread(se)
        flag = ((cook > COOK_STRONG) | moved) & spread(se > 0)
    return [{"flag": flag[a:a + m], "cook": cook[a:a + m], "slope_without": loo[a:a + m],
             "slope": np.asarray(b[i], float), "slope_se": np.asarray(se[i], float)}
            for i, (a, m) in enumerate(zip(starts.tolist(), sizes.tolist()))]


def _slopes_and_ses(m: Moments, method: str) -> tuple:
    """``fit_moments(m[i], method)``'s ``slope`` and ``slope_se`` of each sample i of
    one-dimensional moments, each equal to the float of sample i fitted alone.

    The slope, the exact-fit and note tests are elementwise arithmetic (the same
    floats for an array as for one sample).  So is the slope variance but for its
    powers: numpy squares a lone sample's value with C ``pow()`` and an array's by
    multiplying, which can differ in the last digit (SMA, MA); the variance is taken
    on :class:`_LonePowers` arrays, whose ``**`` raises each value as a lone float.
    """
    spec = get_method(method)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        b = np.asarray(spec.slope(m), dtype=float)
        exact = exact_fit(m) & np.isfinite(b)
        lone = Moments(**{k: np.asarray(getattr(m, k), dtype=float).view(_LonePowers)
                          for k in ("n", "mean_x", "mean_y", "sxx", "syy", "sxy")})
        var = np.asarray(spec.slope_var(lone, b.view(_LonePowers)), dtype=float)
        se = np.sqrt(np.where(exact, 0.0, var))
    bad = _no_line(m, method).reshape(b.shape)
    return np.where(bad, np.nan, b), np.where(bad, np.nan, se)


class _LonePowers(np.ndarray):
    """A float array whose ``**`` gives, value by value, what numpy gives one sample's
    float (a numpy scalar raised alone: C ``pow()``), not the array's square by
    multiplication; every other operation is elementwise, the same for an array as
    for one value, and keeps the type."""

    def __pow__(self, other):
        if np.ndim(other) != 0:   # the formulas raise to a number; anything else is new
            raise TypeError("a power of one number per value is expected")
        lone = [v ** other for v in np.asarray(self).ravel()]   # numpy scalars, one by one
        return np.array(lone, dtype=float).reshape(self.shape).view(_LonePowers)


def fit_checks(*, smearing_factor: float | None = None,
               parametric_factor: float | None = None, estimates=None) -> list:
    """The checks of :func:`points_to_check` that need no data points.

    Parameters
    ----------
    smearing_factor, parametric_factor : float, optional
    estimates : iterable of (label, estimate, low, high), optional

    Returns
    -------
    list of PointCheck
        Strong warnings: smearing/parametric ratio outside
        [1/SMEARING_RATIO_LIMIT, SMEARING_RATIO_LIMIT]; estimates outside
        [low, high].
    """
    out = []
    if (smearing_factor is not None and parametric_factor is not None
            and np.isfinite(smearing_factor) and np.isfinite(parametric_factor)
            and parametric_factor > 0):
        ratio = smearing_factor / parametric_factor
        if not 1 / SMEARING_RATIO_LIMIT <= ratio <= SMEARING_RATIO_LIMIT:
            out.append(PointCheck(
                severity="strong", kind="smearing", row=None, label="", value=float(ratio),
                smearing_factor=float(smearing_factor),
                parametric_factor=float(parametric_factor), limit=SMEARING_RATIO_LIMIT))
    for label, est, low, high in (estimates or ()):
        if (np.isfinite(est) and np.isfinite(low) and np.isfinite(high)
                and not low <= est <= high):
            out.append(PointCheck(severity="strong", kind="outside_interval", row=None,
                                  label=str(label), value=float(est), low=float(low),
                                  high=float(high)))
    return out


def points_to_check(log_x, log_y, *, method: str = "ols", rows=None, labels=None,
                    groups=None, smearing_factor: float | None = None,
                    parametric_factor: float | None = None, estimates=None,
                    alpha: float = 0.05, group_codes=None, sample_moments=None) -> tuple:
    """Graded warnings: influential points, odd correction factors, grouped residuals.

    Parameters
    ----------
    log_x, log_y : array_like, shape (n,)
        The log-scale data of the fit.
    method : str
        Line method whose exponent is refitted without each point (a moment
        method; others are checked through OLS).
    rows, labels : array_like, optional
        Input row number and label of each point.
    groups : array_like, optional
        Group of each point; residuals are compared between groups (taken in
        the order of their labels as text).
    group_codes : array_like of int, optional
        Instead of ``groups``: each point's group as a code 0 .. G - 1, codes in
        the order of the labels as text (e.g. ``pandas.factorize(labels.astype(str),
        sort=True)``), which spares making a million labels into text.
    smearing_factor, parametric_factor : float, optional
        The two correction factors of the fit.
    estimates : iterable of (label, estimate, low, high), optional
        Back-transformed estimates and their intervals.
    alpha : float
        Level of the group-residual test.
    sample_moments : Moments, optional
        ``scaling.stats.moments.moments(log_x, log_y)`` when the caller has it (the
        line whose residuals are compared between groups is fitted to it), so a
        million points are not summed again.

    Returns
    -------
    tuple of PointCheck
        Strong ones first.

    Notes
    -----
    Rules and sources are in the module docstring.
    """
    alpha = _check_alpha(alpha)
    X = np.asarray(log_x, dtype=float)
    Y = np.asarray(log_y, dtype=float)
    if X.ndim != 1 or X.shape != Y.shape:
        raise DataError("log_x and log_y must be one-dimensional and of equal length")
    n = X.size
    if n < MIN_N:
        raise DataError(f"log_x and log_y need at least {MIN_N} rows for points_to_check, "
                        f"not {n}")
    rows = np.arange(n) if rows is None else np.asarray(rows)
    # no labels: "" for each flagged point, without an array of a million ""
    labels = None if labels is None else np.asarray(labels, dtype=object)
    if rows.shape != (n,) or (labels is not None and labels.shape != (n,)):
        raise DataError(f"rows and labels must give one value per point ({n})")
    use = method if method in METHODS else "ols"
    out = []
    if np.ptp(X) > 0:
        where, cook, loo, b, se = _strong_points(X, Y, use)
        b, se = float(b), float(se)
        for i, value, without in zip(where.tolist(), cook.tolist(), loo.tolist()):
            out.append(PointCheck(
                severity="strong", kind="influence", row=int(rows[i]),
                label="" if labels is None else str(labels[i]),
                value=value, method=use, slope=b, slope_without=without, slope_se=se))
    out += fit_checks(smearing_factor=smearing_factor, parametric_factor=parametric_factor,
                      estimates=estimates)
    if groups is not None or group_codes is not None:
        if group_codes is not None:
            codes = np.asarray(group_codes)
            if codes.shape != (n,) or codes.dtype.kind not in "iu":
                raise DataError(f"group_codes must give one integer code per point ({n})")
            n_groups = int(codes.max()) + 1
        else:
            g = np.asarray(groups, dtype=object)
            if g.shape != (n,):
                raise DataError(f"groups must give one value per point ({n})")
            codes, uniq = unique_codes(g)
            n_groups = len(uniq)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            b_line = fit_moments(_one(X, Y) if sample_moments is None
                                 else _as_one(sample_moments), use)
        # Y - a - b X, with one temporary array at a time (the same floats)
        resid = np.subtract(Y, float(b_line["intercept"][0]))
        line = np.multiply(float(b_line["slope"][0]), X)
        np.subtract(resid, line, out=resid)
        del line
        # one stable sort splits the residuals by group, in row order within each
        order = group_order(codes, n_groups)
        counts = np.bincount(codes, minlength=n_groups)
        resid = resid[order]
        del order   # each array let go once used: this runs on every pooled point
        kept = counts >= 2   # a group of one point has no spread to compare
        if np.count_nonzero(kept) >= 2:
            if not kept.all():
                resid = resid[np.repeat(kept, counts)]
            sizes = counts[kept]
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                statistic, pvalue = one_way_f(resid, sizes)
            p = float(pvalue)
            if np.isfinite(p) and p < alpha:
                out.append(PointCheck(
                    severity="mild", kind="group_residuals", row=None, label="",
                    value=p, statistic=float(statistic), df1=int(sizes.size) - 1,
                    df2=int(sizes.sum()) - int(sizes.size)))
    out.sort(key=lambda c: c.severity != "strong")
    return tuple(out)


def one_way_f(values, sizes) -> tuple:
    """``scipy.stats.f_oneway(*samples)``'s statistic and p-value, the same floats, for
    samples laid end to end (``values``: sample 0's values, then sample 1's, ...;
    ``sizes``: their lengths), without a Python call per sample.

    Parameters
    ----------
    values : ndarray, shape (n,)
    sizes : array_like of int
        At least two samples, each of at least two values.

    Returns
    -------
    (statistic, p_value) : numpy floats

    Notes
    -----
    The one-way ANOVA F = (SS_between / (k - 1)) / (SS_within / (n - k)) in scipy's
    order of operations (values shifted by their mean; SS_total by ``np.vecdot``; each
    sample's shifted sum squared and divided by its size, added sample after sample),
    so the floats are scipy's; each sample's sum is a segmented reduction led by a
    zero (numpy's order for the sample alone).  Samples with a constant one, or values
    that are not finite, are left to :func:`~scaling.stats.classic_tests.one_way_anova`
    (the same steps, sample by sample).
    """
    values = np.asarray(values, dtype=float)
    sizes = np.asarray(sizes, dtype=np.int64)
    starts = np.concatenate(([0], np.cumsum(sizes)[:-1]))
    if (sizes.size < 2 or sizes.min() < 2 or values.size != int(sizes.sum())
            or not np.all(np.isfinite(values))
            or np.any(np.minimum.reduceat(values, starts) == np.maximum.reduceat(values, starts))):
        res = one_way_anova(*np.split(values, starts[1:]))
        return res.statistic, res.pvalue
    k, bign = sizes.size, values.size
    offset = np.mean(values, axis=-1, keepdims=True)
    shifted = values - offset
    normalized_ss = np.sum(shifted, axis=-1) ** 2. / bign
    sstot = np.vecdot(shifted, shifted, axis=-1) - normalized_ss
    # each sample's sum led by a zero: numpy.sum's order (the values go to every slot
    # but the heads, by a mask of bytes rather than an index of eight-byte positions)
    heads = starts + np.arange(k)
    padded = np.zeros(bign + k)
    slots = np.ones(bign + k, dtype=bool)
    slots[heads] = False
    padded[slots] = shifted
    del slots
    sums = np.add.reduceat(padded, heads)
    ssbn = 0
    for total, size in zip(sums, sizes.tolist()):   # added in turn, as scipy adds them
        ssbn = ssbn + total ** 2. / size
    ssbn = ssbn - normalized_ss
    sswn = sstot - ssbn
    dfbn, dfwn = k - 1, bign - k
    with np.errstate(divide="ignore", invalid="ignore"):
        f = (ssbn / dfbn) / (sswn / dfwn)
    return f, np.asarray(special.fdtrc(dfbn, dfwn, f), dtype=f.dtype)[()]


def _one(X: np.ndarray, Y: np.ndarray) -> Moments:
    return _as_one(moments(X, Y))


def _as_one(m: Moments) -> Moments:
    """The moments of one sample as arrays of one value (what the fit takes)."""
    return Moments(**{k: np.atleast_1d(getattr(m, k)) for k in
                      ("n", "mean_x", "mean_y", "sxx", "syy", "sxy")})


# --------------------------------------------------------------------------
# the answer's model: parallel lines, verdicts, whether a point moves it


def strong_parallel_influence(log_x, log_y, groups) -> dict:
    """Which points get a strong influence warning in the parallel-lines model.

    Parameters
    ----------
    log_x, log_y, groups : array_like, shape (n,)
        The points of the groups sharing a slope (at least 2 per group);
        ``groups`` may be a :class:`scaling.stats.residual_checks.GroupCodes`.

    Returns
    -------
    dict
        ``flag`` (n,) bool: D_i > :data:`COOK_STRONG` or |b_(-i) - b| > se(b)
        in the OLS model Y = a_g + b X; ``cook``, ``slope_without`` (n,);
        ``slope``, ``slope_se``.  An exact fit flags nothing.

    Notes
    -----
    Closed forms of :func:`scaling.stats.residual_checks.parallel_lines_influence`.
    """
    inf = parallel_lines_influence(log_x, log_y, groups)
    se = inf["slope_se"]
    with np.errstate(invalid="ignore"):
        flag = ((inf["cook"] > COOK_STRONG) | (np.abs(inf["slope_change"]) > se)) & (se > 0)
    return {"flag": np.asarray(flag, dtype=bool), "cook": inf["cook"],
            "slope_without": inf["slope"] + inf["slope_change"], "slope": inf["slope"],
            "slope_se": se}


def verdict_code(estimate: float, exponent: float, p_value: float, alpha: float) -> str:
    """``"above"``, ``"below"``, ``"not_different"`` (p >= alpha) or ``"not_tested"``.

    >>> verdict_code(0.80, 0.75, 0.01, 0.05), verdict_code(0.76, 0.75, 0.4, 0.05)
    ('above', 'not_different')
    """
    if not np.isfinite(p_value) or not np.isfinite(estimate):
        return "not_tested"
    if p_value < alpha:
        return "above" if estimate > exponent else "below"
    return "not_different"


#: A point whose removal leaves the slope's standard error below this share of
#: its value with the point narrows the answer's interval by more than a quarter.
NARROWS = 0.75


def narrows(slope_se: float, slope_se_without: float) -> bool:
    """True when removing a point narrows the slope's interval by more than a quarter."""
    return bool(np.isfinite(slope_se) and np.isfinite(slope_se_without)
                and slope_se > 0 and slope_se_without < NARROWS * slope_se)


def moves_answer(slope: float, slope_se: float, slope_without: float, before=(),
                 after=(), slope_se_without: float = math.nan) -> bool:
    """True when the exponent moves by more than its standard error or a verdict changes.

    Parameters
    ----------
    slope, slope_se : float
        The answer's exponent and its standard error (with the point).
    slope_without : float
        The exponent refitted without the point.
    before, after : sequence of str
        Verdict codes (:func:`verdict_code`) with and without the point, one
        per hypothesised exponent, in the same order.
    slope_se_without : float, optional
        The standard error of the refit.  The move is measured against the
        larger of the two standard errors, so that dropping a point that
        carried much of the x range (and so widens the interval) is not
        mistaken for a point that moves the answer (common practice, no source).
        A point whose removal narrows the interval by more than a quarter
        (``slope_se_without < NARROWS * slope_se``: the point inflates the
        scatter, as a mistyped value does) also moves the answer: it states
        the exponent less precisely than the data do (common practice, no source).
    """
    if np.isfinite(slope) and np.isfinite(slope_without) and np.isfinite(slope_se):
        scale = max(slope_se, slope_se_without) if np.isfinite(slope_se_without) else slope_se
        if abs(slope_without - slope) > scale or narrows(slope_se, slope_se_without):
            return True
    elif np.isfinite(slope) != np.isfinite(slope_without):
        return True
    return any(a != b for a, b in zip(before, after))
