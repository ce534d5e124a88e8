"""Robust lines and the measurement-error (Deming) line on log-log scales.

Each function takes x and y in natural units (or logs with
``log_base=None``), fits on the log scale and returns a
:class:`scaling.stats.line_results.LineFit` whose ``method`` names the estimator:
``"theil_sen"``, ``"siegel"``, ``"sma_robust"``, ``"ma_robust"``,
``"deming"``.  ``r``, ``r2``, ``moments`` and ``resid_sd`` describe the log
data as for the classical lines (``resid_sd`` is the SD of the vertical
residuals from the fitted line, n - 2 df); ``r`` of the robust SMA/MA lines
is the correlation of the robust scatter matrix.

Theil-Sen
    Slope: median of the pairwise slopes (Theil 1950; Sen 1968, *JASA*
    63:1379); intercept median(Y) - b median(X); both and the slope
    interval (Sen's distribution-free interval) from
    ``scipy.stats.theilslopes``.  The intercept interval is a percentile
    bootstrap; the slope's pairwise slopes are sorted once and each
    resample's median is a weighted median with pair weights
    ``c_i c_j`` (counts of the two rows), so no resample is rebuilt.
Siegel (repeated medians)
    Siegel (1982), *Biometrika* 69:242, via ``scipy.stats.siegelslopes``
    (hierarchical intercept).  No analytic interval: slope and intercept
    intervals are percentile bootstrap (a loop over resamples; the
    estimator is O(n^2) per resample).
Robust SMA and MA
    The plug-in approach studied by Taskinen & Warton (2011, "Robust
    estimation and inference for bivariate line-fitting in allometry",
    *Biometrical Journal* 53:652 -- citation from memory): the SMA and MA
    slopes are computed from a robust estimate of the 2 x 2 scatter matrix
    instead of the sample covariance.  The scatter here is Huber's
    M-estimator of location and scatter (Maronna 1976, *Ann. Stat.* 4:51;
    Huber 1981, *Robust Statistics*, ch. 8): with squared Mahalanobis
    distances d_i^2 and cut-off c^2 = chi2_2 quantile ``q`` (0.9 by
    default), iterate mu = sum w1_i z_i / sum w1_i with w1 = min(1, c/d),
    V = sum w2_i (z_i - mu)(z_i - mu)' / (n tau) with w2 = min(1, c^2/d^2)
    and tau = E[min(chi2_2, c^2)]/2 = F_4(c^2) + (c^2/2)(1 - F_2(c^2)), which
    makes V consistent for the covariance at the normal.  Intercept
    mu_y - b mu_x.  Taskinen & Warton's influence-function standard errors
    are NOT implemented; slope and intercept intervals are percentile
    bootstrap, vectorised over resamples (the M-iterations run on all
    resamples at once with row counts as weights).
Deming
    Deming (1943); slope with lambda = var(error in Y)/var(error in X):
    b = [Syy - lam Sxx + sqrt((Syy - lam Sxx)^2 + 4 lam Sxy^2)] / (2 Sxy)
    (e.g. Cornbleet & Gochman 1979, *Clin. Chem.* 25:432, eq. for
    lambda-weighted Deming -- from memory).  lam = 1 is the MA line and
    lam -> infinity the OLS line.  Dividing Y by sqrt(lam) makes the error
    variances equal, so the Deming line is the MA line of
    (X, Y/sqrt(lam)) scaled back by sqrt(lam) (exact algebra).  Its
    interval is therefore the MA interval of the rescaled data: the
    inversion of the Warton et al. (2006, *Biol. Rev.* 81:259) MA slope
    test, as in :mod:`scaling.stats.lines`, with the intercept interval of that
    module; all slope and intercept quantities scale by sqrt(lam).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import replace

import numpy as np
from . import tails

from ..errors import ConfigError, DataError, DegenerateDataWarning
from .deming import to_ma_scale
from .line_results import (ConfidenceInterval, LineFit, line_fit_from_moments,
                           tie_term as _tie_term)
from .lines import METHODS, exact_fit, fit_moments, parse_log_base, to_log, validate_xy
from .moments import Moments, moments as _moments
from .resampling import bootstrap_se, percentile_interval, make_rng, draw_counts
from .schema import check_confidence, check_lam

__all__ = [
    "theil_sen",
    "siegel",
    "sma_robust",
    "ma_robust",
    "deming",
    "deming_moments",
    "deming_from_moments",
    "huber_scatter",
    "ROW_METHODS",
]

MIN_N = 3


# --------------------------------------------------------------------------
# shared input handling


def _prepare(x, y, log_base, *, need_spread: bool = True):
    base = parse_log_base(log_base)
    x, y = validate_xy(x, y, base)
    if x.size < MIN_N:
        raise DataError(f"x and y need at least {MIN_N} rows, not {x.size}")
    X, Y = to_log(x, base), to_log(y, base)
    if need_spread and np.ptp(X) == 0:
        raise DataError("x does not vary: no line can be fitted")
    ranges = (float(x.min()), float(x.max())), (float(y.min()), float(y.max()))
    return base, X, Y, ranges


def _check_boot(n_boot) -> int:
    if isinstance(n_boot, bool) or not isinstance(n_boot, (int, np.integer)) or n_boot < 2:
        raise ConfigError(f"n_boot must be an integer >= 2, not {n_boot!r}")
    return int(n_boot)


def _package(method, X, Y, *, slope, intercept, slope_ci, intercept_ci, slope_se,
             intercept_se, r, base, confidence, ranges, boot_slopes=None,
             interval_method="bootstrap_percentile") -> LineFit:
    n = X.size
    resid = Y - intercept - slope * X
    m = _moments(X, Y)
    # Points on one line (the tolerance of the classical lines): what is
    # left is rounding of the logs, not scatter.
    resid_sd = 0.0 if bool(exact_fit(m)) else float(math.sqrt(np.sum(resid ** 2) / (n - 2)))
    return LineFit(
        method=method, n=n, slope=float(slope), slope_ci=slope_ci,
        slope_se=float(slope_se), intercept=float(intercept),
        intercept_ci=intercept_ci, intercept_se=float(intercept_se),
        r=float(r), r2=float(r) ** 2,
        resid_sd=resid_sd,
        df=float(n - 2), log_base=base, confidence=confidence,
        moments=m, x_range=ranges[0], y_range=ranges[1],
        interval_method=interval_method,
        slope_replicates=None if boot_slopes is None else np.asarray(boot_slopes, dtype=float),
        log_data=(X, Y) if method == "theil_sen" else None,
    )


# --------------------------------------------------------------------------
# weighted medians for resampled data


def _weighted_median_sorted(values: np.ndarray, counts: np.ndarray) -> np.ndarray:
    """Median of the expanded sample, for each row of integer ``counts``.

    ``values`` is sorted ascending (shape (P,)); ``counts`` has shape (B, P).
    The result equals ``np.median(np.repeat(values, counts[i]))`` for each
    row i (mean of the two middle values when the total is even).
    """
    cum = np.cumsum(counts, axis=1)
    total = cum[:, -1]
    lo = (total - 1) // 2
    hi = total // 2
    i_lo = (cum <= lo[:, None]).sum(axis=1)
    i_hi = (cum <= hi[:, None]).sum(axis=1)
    i_lo = np.minimum(i_lo, values.size - 1)
    i_hi = np.minimum(i_hi, values.size - 1)
    out = (values[i_lo] + values[i_hi]) / 2
    return np.where(total > 0, out, np.nan)


def _theil_sen_boot(X, Y, counts_iter):
    """Theil-Sen slope and intercept of each resample given by counts."""
    i, j = np.triu_indices(X.size, k=1)
    dx = X[j] - X[i]
    keep = dx != 0
    i, j, dx = i[keep], j[keep], dx[keep]
    slopes = (Y[j] - Y[i]) / dx
    order = np.argsort(slopes, kind="stable")
    slopes, i, j = slopes[order], i[order], j[order]
    ox, oy = np.argsort(X, kind="stable"), np.argsort(Y, kind="stable")
    xs, ys = X[ox], Y[oy]
    out_b, out_a = [], []
    for counts in counts_iter:
        b = _weighted_median_sorted(slopes, counts[:, i] * counts[:, j])
        a = _weighted_median_sorted(ys, counts[:, oy]) - b * _weighted_median_sorted(xs, counts[:, ox])
        out_b.append(b)
        out_a.append(a)
    return np.concatenate(out_b), np.concatenate(out_a)


def _count_chunks(rng, n, n_boot, cells_per_row):
    chunk = max(1, min(n_boot, 8_000_000 // max(cells_per_row, 1)))
    done = 0
    while done < n_boot:
        size = min(chunk, n_boot - done)
        yield draw_counts(rng, n, size)
        done += size


# --------------------------------------------------------------------------
# Theil-Sen and Siegel


def _sen_interval(X, Y, confidence: float) -> tuple:
    """Sen's (1968) slope interval: order statistics of the pairwise slopes.

    With N pairwise slopes (pairs of distinct x) sorted, C = z_{1-alpha/2} sd(S)
    and the bounds are the slopes of rank round((N - C)/2) - 1 and
    round((N + C)/2) (0-based), as in ``scipy.stats.theilslopes``; sd(S)
    counts ties in x only -- ties in y do not matter to the test of a slope,
    ties in Y - b0 X do (see :meth:`scaling.stats.lines.LineFit.test_slope`), and
    away from the pairwise slopes there are none.  Equal to
    ``theilslopes`` when y has no ties.
    """
    n = X.size
    i, j = np.triu_indices(n, k=1)
    dx = X[j] - X[i]
    keep = dx != 0
    slopes = np.sort((Y[j] - Y[i])[keep] / dx[keep])
    nt = slopes.size
    if nt == 0:
        return math.nan, math.nan
    z = tails.normal_quantile(0.5 + confidence / 2)
    sd = math.sqrt(max((n * (n - 1) * (2 * n + 5) - _tie_term(X)) / 18.0, 0.0))
    upper = min(int(np.round((nt + z * sd) / 2.0)), nt - 1)
    lower = max(int(np.round((nt - z * sd) / 2.0)) - 1, 0)
    return float(slopes[lower]), float(slopes[upper])


def theil_sen(x, y, *, confidence: float = 0.95, log_base=10, n_boot: int = 999,
              seed=None) -> LineFit:
    """Theil-Sen line of log y on log x.

    Parameters
    ----------
    x, y : array_like
        Positive values in natural units (logs when ``log_base`` is None).
    confidence : float
    log_base : {10, "e", 2, None}
    n_boot : int
        Bootstrap resamples for the intercept interval and standard errors.
    seed : int, numpy.random.Generator or None

    Returns
    -------
    LineFit
        ``method="theil_sen"``; slope interval by Sen (1968), intercept
        interval percentile bootstrap; ``slope_se``/``intercept_se`` are
        robust bootstrap standard deviations (IQR / 1.349 of the replicates,
        :func:`scaling.stats.resampling.bootstrap_se`).

    Notes
    -----
    See the module docstring.  Cost O(n_boot n^2): a few seconds for
    n = 1000.
    """
    confidence = check_confidence(confidence)
    n_boot = _check_boot(n_boot)
    base, X, Y, ranges = _prepare(x, y, log_base)
    rng = make_rng(seed)
    from scipy import stats   # lazy: robust lines are not on the default road

    res = stats.theilslopes(Y, X, alpha=confidence)
    low, high = _sen_interval(X, Y, confidence)
    pairs = X.size * (X.size - 1) // 2
    boot_b, boot_a = _theil_sen_boot(X, Y, _count_chunks(rng, X.size, n_boot, 3 * pairs))
    return _package(
        "theil_sen", X, Y, slope=res.slope, intercept=res.intercept,
        slope_ci=ConfidenceInterval(low, high),
        intercept_ci=percentile_interval(boot_a, confidence),
        slope_se=bootstrap_se(boot_b), intercept_se=bootstrap_se(boot_a),
        r=_moments(X, Y).r, base=base, confidence=confidence, ranges=ranges,
        boot_slopes=boot_b, interval_method="kendall_slope_bootstrap_intercept")


def siegel(x, y, *, confidence: float = 0.95, log_base=10, n_boot: int = 999,
           seed=None) -> LineFit:
    """Siegel repeated-medians line of log y on log x.

    Parameters
    ----------
    x, y, confidence, log_base, n_boot, seed
        As for :func:`theil_sen`.

    Returns
    -------
    LineFit
        ``method="siegel"``; slope and intercept intervals are percentile
        bootstrap.

    Notes
    -----
    Estimates from ``scipy.stats.siegelslopes`` (Siegel 1982, *Biometrika*
    69:242).  The bootstrap calls it once per resample (about 1 ms per
    resample at n = 100, 30 ms at n = 1000).
    """
    confidence = check_confidence(confidence)
    n_boot = _check_boot(n_boot)
    base, X, Y, ranges = _prepare(x, y, log_base)
    rng = make_rng(seed)
    from scipy import stats   # lazy: robust lines are not on the default road

    res = stats.siegelslopes(Y, X)
    n = X.size
    boot = np.empty((n_boot, 2))
    for k in range(n_boot):  # no vectorised repeated median; see Notes
        idx = rng.integers(0, n, n)
        if np.ptp(X[idx]) == 0:
            boot[k] = np.nan
            continue
        r = stats.siegelslopes(Y[idx], X[idx])
        boot[k] = r.slope, r.intercept
    return _package(
        "siegel", X, Y, slope=res.slope, intercept=res.intercept,
        slope_ci=percentile_interval(boot[:, 0], confidence),
        intercept_ci=percentile_interval(boot[:, 1], confidence),
        slope_se=bootstrap_se(boot[:, 0]), intercept_se=bootstrap_se(boot[:, 1]),
        r=_moments(X, Y).r, base=base, confidence=confidence, ranges=ranges,
        boot_slopes=boot[:, 0])


# --------------------------------------------------------------------------
# Huber M-estimator of scatter and the robust SMA / MA lines


def _huber_tau(c2: float) -> float:
    return float(tails.chi2_lower(c2, 4) + c2 / 2 * tails.chi2_upper(c2, 2))


def _weighted_scatter(w: np.ndarray, D: np.ndarray) -> np.ndarray:
    """sum_n w[b, n] D[b, n, i] D[b, n, j] for each b (the 2 x 2 case of an einsum, faster)."""
    d0, d1 = D[..., 0], D[..., 1]
    wd0 = w * d0
    v00 = np.sum(wd0 * d0, axis=1)
    v01 = np.sum(wd0 * d1, axis=1)
    v11 = np.sum(w * d1 * d1, axis=1)
    return np.stack([np.stack([v00, v01], -1), np.stack([v01, v11], -1)], -2)


def huber_scatter(X, Y, *, weights=None, q: float = 0.9, tol: float = 1e-9,
                  max_iter: int = 500):
    """Huber M-estimate of bivariate location and scatter.

    Parameters
    ----------
    X, Y : array_like, shape (n,)
    weights : array_like, shape (..., n), optional
        Row counts (e.g. bootstrap counts); leading axes are estimated at
        once.  Default: every row once.
    q : float
        The cut-off c^2 is the ``q`` quantile of chi-square with 2 df.
    tol : float
        Stop when no location or scatter entry changes by more than
        ``tol`` times the classical scale.
    max_iter : int

    Returns
    -------
    mu : ndarray, shape (..., 2)
    V : ndarray, shape (..., 2, 2)
    converged : ndarray of bool, shape (...)

    Notes
    -----
    Fixed-point iteration of the Huber-type M-estimating equations
    (Maronna 1976, *Ann. Stat.* 4:51; Huber 1981 ch. 8), started from the
    classical mean and covariance; formulas in the module docstring.  Huber
    weights are monotone, so the solution is unique for data not
    concentrated on a line (Maronna 1976) and the start does not matter.
    """
    if not (isinstance(q, (int, float)) and 0 < q < 1):
        raise ConfigError(f"q must be a number between 0 and 1, not {q!r}")
    Z = np.stack([np.asarray(X, dtype=float), np.asarray(Y, dtype=float)], axis=-1)
    n = Z.shape[0]
    w = np.ones(n) if weights is None else np.asarray(weights, dtype=float)
    shape = w.shape[:-1]
    w = w.reshape(-1, n)
    centre = Z.mean(axis=0)
    Zc = Z - centre
    scale = float(np.sqrt(np.mean(Zc ** 2))) or 1.0
    Zc = Zc / scale
    c2 = float(tails.chi2_quantile(q, 2))
    tau = _huber_tau(c2)
    total = w.sum(axis=1)
    mu = (w @ Zc) / total[:, None]
    D = Zc[None, :, :] - mu[:, None, :]
    V = _weighted_scatter(w, D) / total[:, None, None]
    converged = np.zeros(w.shape[0], dtype=bool)
    # Iterate only the estimates still moving (each row of w is its own problem).
    active = np.arange(w.shape[0])
    for _ in range(max_iter):
        Va, Da, wa = V[active], D[active], w[active]
        det = Va[:, 0, 0] * Va[:, 1, 1] - Va[:, 0, 1] ** 2
        with np.errstate(divide="ignore", invalid="ignore"):
            inv00, inv11, inv01 = Va[:, 1, 1] / det, Va[:, 0, 0] / det, -Va[:, 0, 1] / det
            d2 = (Da[..., 0] ** 2 * inv00[:, None] + Da[..., 1] ** 2 * inv11[:, None]
                  + 2 * Da[..., 0] * Da[..., 1] * inv01[:, None])
            u2 = np.minimum(1.0, c2 / d2)
        # A distance that rounding makes negative (a singular scatter: the
        # points on one line) is a zero distance: full weight.
        u2 = np.where(np.isfinite(u2) & (u2 >= 0), u2, 1.0)
        u1 = np.sqrt(u2) * wa
        mu_new = (u1 @ Zc) / u1.sum(axis=1)[:, None]
        D_new = Zc[None, :, :] - mu_new[:, None, :]
        V_new = _weighted_scatter(u2 * wa, D_new) / (tau * total[active, None, None])
        change = np.maximum(np.abs(mu_new - mu[active]).max(axis=1),
                            np.abs(V_new - Va).reshape(Va.shape[0], -1).max(axis=1))
        mu[active], V[active], D[active] = mu_new, V_new, D_new
        done = change < tol
        converged[active[done]] = True
        active = active[~(done | ~np.isfinite(change))]
        if active.size == 0:
            break
    mu = mu * scale + centre
    V = V * scale ** 2
    return mu.reshape(shape + (2,)), V.reshape(shape + (2, 2)), converged.reshape(shape)


def _scatter_moments(mu, V, n) -> Moments:
    """Pseudo-moments whose centred sums are (n - 1) V (for the slope formulas)."""
    return Moments(n=np.asarray(n, dtype=float), mean_x=mu[..., 0], mean_y=mu[..., 1],
                   sxx=(n - 1) * V[..., 0, 0], syy=(n - 1) * V[..., 1, 1],
                   sxy=(n - 1) * V[..., 0, 1])


def _robust_axis(kind, x, y, *, confidence, log_base, n_boot, seed, q) -> LineFit:
    confidence = check_confidence(confidence)
    n_boot = _check_boot(n_boot)
    base, X, Y, ranges = _prepare(x, y, log_base)
    rng = make_rng(seed)
    n = X.size
    mu, V, ok = huber_scatter(X, Y, q=q)
    if not bool(ok):
        warnings.warn(f"{kind}_robust: the Huber M-estimator did not converge; "
                      "the line may be inaccurate", DegenerateDataWarning, stacklevel=3)
    m = _scatter_moments(mu, V, n)
    spec = METHODS[kind]
    b = float(spec.slope(m))
    a = float(mu[1] - b * mu[0])
    boot_b, boot_a = [], []
    for counts in _count_chunks(rng, n, n_boot, 8 * n):
        bm, bV, _ = huber_scatter(X, Y, weights=counts, q=q)
        bb = spec.slope(_scatter_moments(bm, bV, n))
        boot_b.append(bb)
        with np.errstate(invalid="ignore"):  # a replicate with no slope: NaN
            boot_a.append(bm[:, 1] - bb * bm[:, 0])
    boot_b, boot_a = np.concatenate(boot_b), np.concatenate(boot_a)
    r = float(V[0, 1] / math.sqrt(V[0, 0] * V[1, 1]))
    return _package(
        f"{kind}_robust", X, Y, slope=b, intercept=a,
        slope_ci=percentile_interval(boot_b, confidence),
        intercept_ci=percentile_interval(boot_a, confidence),
        slope_se=bootstrap_se(boot_b), intercept_se=bootstrap_se(boot_a), r=r, base=base,
        confidence=confidence, ranges=ranges, boot_slopes=boot_b)


def sma_robust(x, y, *, confidence: float = 0.95, log_base=10, n_boot: int = 999,
               seed=None, q: float = 0.9) -> LineFit:
    """SMA line from a Huber M-estimate of the log-scale scatter matrix.

    Parameters
    ----------
    x, y, confidence, log_base, n_boot, seed
        As for :func:`theil_sen`.
    q : float
        Huber cut-off as a chi-square(2) quantile (see :func:`huber_scatter`).

    Returns
    -------
    LineFit
        ``method="sma_robust"``; slope sign(v_xy) sqrt(v_yy/v_xx) of the
        robust scatter V, intercept mu_y - b mu_x; intervals percentile
        bootstrap; ``r`` from V.

    Notes
    -----
    Plug-in robust SMA of Taskinen & Warton (2011); see the module docstring
    for what is and is not implemented.
    """
    return _robust_axis("sma", x, y, confidence=confidence, log_base=log_base,
                        n_boot=n_boot, seed=seed, q=q)


def ma_robust(x, y, *, confidence: float = 0.95, log_base=10, n_boot: int = 999,
              seed=None, q: float = 0.9) -> LineFit:
    """MA line from a Huber M-estimate of the log-scale scatter matrix.

    Same parameters and returns as :func:`sma_robust` (``method="ma_robust"``;
    slope the first eigenvector of the robust scatter V).
    """
    return _robust_axis("ma", x, y, confidence=confidence, log_base=log_base,
                        n_boot=n_boot, seed=seed, q=q)


# --------------------------------------------------------------------------
# Deming


def deming_moments(m: Moments, lam: float, *, confidence: float = 0.95) -> dict:
    """Deming line for every set of moments in ``m`` (as :func:`scaling.stats.lines.fit_moments`).

    Parameters
    ----------
    m : Moments
    lam : float
        var(error in Y) / var(error in X), > 0.
    confidence : float

    Returns
    -------
    dict of ndarray
        The keys of :func:`scaling.stats.lines.fit_moments`.

    Notes
    -----
    MA fit of the moments of (X, Y/sqrt(lam)), with slope, intercept, their
    bounds and standard errors and the residual SD multiplied by sqrt(lam);
    r and df unchanged.  See the module docstring.
    """
    lam = check_lam(lam)
    confidence = check_confidence(confidence)
    mr, k = to_ma_scale(m, lam)
    out = dict(fit_moments(mr, "ma", confidence=confidence))
    for key in ("slope", "slope_low", "slope_high", "slope_se", "intercept",
                "intercept_low", "intercept_high", "intercept_se", "resid_sd",
                "slope_gap_low", "slope_gap_high"):
        out[key] = out[key] * k
    notes = np.asarray(out["note"], dtype=object).copy()
    notes[notes == "x and y are uncorrelated: the MA slope is undefined"] = (
        "x and y are uncorrelated: the Deming slope is undefined")
    out["note"] = notes
    return out


def deming_from_moments(m: Moments, lam: float, *, confidence: float = 0.95,
                        log_base: float | None = 10.0, x_range=None,
                        y_range=None) -> LineFit:
    """The Deming line of one set of (0-d) log-scale moments, as a :class:`LineFit`.

    Parameters
    ----------
    m : Moments
    lam : float
        var(error in Y) / var(error in X), > 0.
    confidence : float
    log_base : float or None
        The numeric base the logs were taken in (labels the result).
    x_range, y_range : tuple, optional
        Natural-unit extremes of the data.

    Returns
    -------
    LineFit
        ``method="deming"``, ``lam`` set; estimates NaN with a ``note`` when
        the line cannot be fitted (no warning: the caller decides).

    Notes
    -----
    The MA fit of (X, Y/sqrt(lam)) scaled back by sqrt(lam); see the module
    docstring.
    """
    lam = check_lam(lam)
    confidence = check_confidence(confidence)
    mr, k = to_ma_scale(m, lam)
    fit = line_fit_from_moments(mr, "ma", confidence=confidence, log_base=log_base,
                                x_range=x_range, y_range=y_range)
    note = fit.note.replace("MA slope", "Deming slope")
    return replace(
        fit, method="deming", moments=m, note=note,
        slope=fit.slope * k, slope_se=fit.slope_se * k,
        slope_ci=ConfidenceInterval(fit.slope_ci.low * k, fit.slope_ci.high * k),
        intercept=fit.intercept * k, intercept_se=fit.intercept_se * k,
        intercept_ci=ConfidenceInterval(fit.intercept_ci.low * k, fit.intercept_ci.high * k),
        resid_sd=fit.resid_sd * k, lam=lam,
    )


def deming(x, y, *, lam: float = 1.0, confidence: float = 0.95, log_base=10) -> LineFit:
    """Deming (errors-in-variables) line of log y and log x.

    Parameters
    ----------
    x, y : array_like
        Positive values in natural units (logs when ``log_base`` is None).
    lam : float
        Ratio of error variances, var(error in log y) / var(error in log x).
        1 gives the MA line; large values approach OLS of log y on log x.
    confidence : float
    log_base : {10, "e", 2, None}

    Returns
    -------
    LineFit
        ``method="deming"``; ``moments`` are those of the log data.

    Notes
    -----
    Slope formula of Deming (1943); the interval is the MA test inversion
    of Warton et al. (2006) on the data with Y divided by sqrt(lam), scaled
    back (module docstring).  A fit that cannot be estimated returns NaN
    estimates with a note and a DegenerateDataWarning, like
    :func:`scaling.stats.lines.fit_line`.
    """
    lam = check_lam(lam)
    confidence = check_confidence(confidence)
    base, X, Y, ranges = _prepare(x, y, log_base, need_spread=False)
    fit = deming_from_moments(_moments(X, Y), lam, confidence=confidence, log_base=base,
                              x_range=ranges[0], y_range=ranges[1])
    note = fit.note
    if note and not np.isfinite(fit.slope):
        warnings.warn(note, DegenerateDataWarning, stacklevel=2)
    return fit


#: Methods fitted from the rows (not from moments): name -> function with the
#: signature ``f(x, y, *, confidence, log_base, n_boot, seed) -> LineFit``.
#: Their intervals are bootstrap (Theil-Sen's slope: Sen's interval).
ROW_METHODS = {"theil_sen": theil_sen, "siegel": siegel, "sma_robust": sma_robust,
               "ma_robust": ma_robust}
