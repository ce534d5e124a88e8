"""Predictions from a fit on several predictors: values, intervals, totals.

:class:`~scaling.stats.several_predictors.MultiFit` (the fit and its tests) hands
its ``predict`` and ``predict_total`` to :func:`predict_multi` and
:func:`predict_total` here; this module reads the fit's fields and does not
import the fit's module.

Predictions in natural units
    Fitted log value mu0 = d0' beta at d0 = (1, X0_1, ..., X0_k);
    var_line = d0' cov(beta) d0, var_new = var_line + s^2 (as statsmodels'
    ``get_prediction``: ``mean_ci`` and ``obs_ci``).  The median of y is
    base^mu0; the mean is that times a correction factor from
    :func:`scaling.stats.predictions.correction_factor` (smearing, Duan 1983, JASA
    78:605; parametric, Baskerville 1972, Can. J. For. Res. 2:49; ratio,
    Snowdon 1991, Can. J. For. Res. 21:720; none).  As in
    :mod:`scaling.stats.predictions`, confidence bounds (for the line) are multiplied by
    the factor and prediction bounds (quantiles of one new individual) are not.

Extrapolation
    Per predictor: a value outside the fitted range of that predictor.
    Jointly: a combination whose leverage h0 = d0'(D'D)^-1 d0 exceeds the
    largest leverage of the fitting data (each predictor may be inside its
    range while the combination, e.g. a short thick tree, lies outside the
    cloud of the data; "common practice, no source": the maximum data
    leverage bounds an ellipsoid containing the data).

Total over a set of new individuals (e.g. the biomass of a plot)
    The estimate is T = sum_j CF * base^{mu_j}.  Its interval is for the
    *actual* total of those individuals (a prediction interval for a sum),
    combining two variances:

    * parameter uncertainty, by the delta method on the log-scale covariance:
      grad = ln(base) * sum_j yhat_j d_j, var_param = grad' cov(beta) grad
      (the predictions share the estimated line, so they are correlated;
      this term is the full covariance, not the sum of variances);
    * scatter of the individuals about the line, independent between them:
      var_scatter = sum_j med_j^2 * V, med_j = base^{mu_j}, V the variance
      of base^e: for ``parametric`` (and ``ratio``) exp(s^2 L^2)(exp(s^2 L^2) - 1)
      with L = ln(base) (a log-normal); for ``smearing`` the empirical
      mean(base^{2e}) - mean(base^e)^2 over the residuals (Duan's smearing
      idea applied to the second moment).

    ``se``, ``se_parameters`` and ``se_scatter`` report V_T = var_param +
    var_scatter and its two parts.

    The interval is made by simulating the total from the fit's sampling
    distribution (a predictive simulation): per draw, s*^2 = s^2 df / chi^2_df,
    beta* ~ N(beta, s*^2 (D'D)^-1), e*_j ~ N(0, s*^2) independently per new
    individual, T* = sum_j base^(d_j' beta* + e*_j); the interval is the
    (1 -+ conf)/2 quantiles of ``TOTAL_DRAWS`` such T* with the package's
    default seed (so a run is reproducible).  For one individual this is the
    exact t prediction interval back-transformed; for a sum it is the
    predictive distribution under a flat prior on (beta, log s) (Box & Tiao
    1973, Bayesian Inference in Statistical Analysis, sec. 2.8; Gelman et al.
    2013, Bayesian Data Analysis, 3rd ed., sec. 14.2), whose frequentist
    coverage is checked by a seeded simulation in tests/test_multi.py:
    0.95 +- 0.015 at log10 scatter 0.1 to 0.5 (``SCATTER_SHOWN``).  The
    draws assume normal log-scale scatter whatever the correction: the
    correction sets the point estimate, not the interval.  An earlier
    closed form (delta method plus a log-normal matched to the two moments,
    Fenton 1960, IRE Trans. Commun. Syst. 8:57) covered 0.93 with smearing
    and 0.966 with the parametric factor at scatter 0.35 to 0.5.  Above
    ``SCATTER_SHOWN`` the result carries ``beyond_shown_range``.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from typing import Mapping

import numpy as np
from . import tails

from ..errors import ConfigError, DataError, ExtrapolationWarning
from .predictions import CORRECTIONS, INTERVALS
from .schema import DEFAULT_SEED, SCATTER_SHOWN, check_confidence

__all__ = ["MultiPrediction", "TotalPrediction", "predict_multi", "predict_total",
           "total_piece", "combine_total_pieces", "TOTAL_DRAWS"]


# --------------------------------------------------------------------------
# shared helpers (also used by the fit)


def _frozen(a) -> np.ndarray:
    a = np.array(a)
    a.setflags(write=False)
    return a


def _check_positive(mat: np.ndarray, names, what: str) -> None:
    bad = ~np.isfinite(mat) | (mat <= 0)
    if np.any(bad):
        i, j = np.argwhere(bad)[0]
        raise DataError(f"{what} {names[j]!r} row {i + 1}: {float(mat[i, j])!r} is not a positive "
                        "finite number (logarithms need positive values)")


# --------------------------------------------------------------------------
# vectorised cores of a total (leading axes broadcast: replicates in simulations)


#: Draws of the total behind its interval (quantile error of the 2.5% bound
#: about 0.3% of the total's spread).
TOTAL_DRAWS = 10_000


# draws x rows held in memory at once
_BLOCK = 2_000_000


def _total_moments(d0: np.ndarray, beta, s2, xtx_inv, *, factor, scatter_var, base: float):
    """Total of base^(d0 beta) * factor over the rows of d0 and its two variances.

    Broadcasts over leading axes of ``beta`` (..., p), ``s2``, ``factor`` and
    ``scatter_var`` (...,).  Returns (total, var_param, var_scatter).
    """
    ln_b = math.log(base)
    med = base ** (np.asarray(beta)[..., None, :] * d0).sum(-1)     # (..., m)
    factor = np.asarray(factor, dtype=float)
    yhat = med * factor[..., None]
    total = yhat.sum(-1)
    grad = ln_b * np.einsum("...m,mp->...p", yhat, d0)
    cov = np.asarray(s2, dtype=float)[..., None, None] * xtx_inv
    var_param = np.einsum("...p,...pq,...q->...", grad, cov, grad)
    var_scatter = np.asarray(scatter_var, dtype=float) * (med * med).sum(-1)
    return total, var_param, var_scatter


def _total_draws(d0: np.ndarray, beta, s2, xtx_inv, *, base: float, df: float, draws: int,
                 rng: np.random.Generator) -> np.ndarray:
    """Totals simulated from the fit's sampling distribution (module docstring).

    Broadcasts over leading axes of ``beta`` (..., p) and ``s2`` (...,);
    returns shape (..., draws).
    """
    beta = np.asarray(beta, dtype=float)
    s2 = np.asarray(s2, dtype=float)
    lead, p, m = beta.shape[:-1], beta.shape[-1], d0.shape[0]
    chol = np.linalg.cholesky(xtx_inv)
    s2_draw = s2[..., None] * df / rng.chisquare(df, lead + (draws,))       # (..., B)
    z = rng.standard_normal(lead + (draws, p)) @ chol.T
    beta_draw = beta[..., None, :] + np.sqrt(s2_draw)[..., None] * z      # (..., B, p)
    ln_b = math.log(base)
    out = np.empty(lead + (draws,))
    step = max(1, _BLOCK // max(m * max(int(np.prod(lead)), 1), 1))
    for i in range(0, draws, step):   # blocks of draws keep draws x rows in memory small
        sl = slice(i, i + step)
        mu = beta_draw[..., sl, :] @ d0.T                                  # (..., b, m)
        e = rng.standard_normal(mu.shape) * np.sqrt(s2_draw[..., sl])[..., None]
        with np.errstate(over="ignore"):
            out[..., sl] = np.exp((mu + e) * ln_b).sum(-1)
    return out


def _total_interval(totals: np.ndarray, confidence: float):
    """Equal-tailed quantiles of simulated totals along the last axis."""
    tail = (1 - confidence) / 2
    return np.quantile(totals, tail, axis=-1), np.quantile(totals, 1 - tail, axis=-1)


def _beyond_shown(s2, base: float):
    """True where the scatter exceeds ``SCATTER_SHOWN`` on the log10 scale."""
    return np.sqrt(np.asarray(s2, dtype=float)) * math.log(base) > SCATTER_SHOWN * math.log(10)


def _scatter_variance(kind: str, s2, residuals, base: float):
    """Variance of base^e for one new individual (see the module docstring)."""
    ln_b = math.log(base)
    if kind == "smearing":
        e = np.exp(np.asarray(residuals) * ln_b)
        return np.mean(e * e, axis=-1) - np.mean(e, axis=-1) ** 2
    v = np.asarray(s2) * ln_b * ln_b
    return np.exp(v) * np.expm1(v)


# --------------------------------------------------------------------------
# results


@dataclass(frozen=True, slots=True, kw_only=True)
class MultiPrediction:
    """Predictions of y from several predictors, in natural units.

    Attributes
    ----------
    names : tuple of str
    x : ndarray, shape (m, k)
        The predictor values asked for (natural units).
    y, y_low, y_high : ndarray, shape (m,)
        Point estimate (median times ``factor``) and interval bounds.
    interval, correction : str
    factor, confidence : float
    extrapolated : ndarray of bool, shape (m, k)
        True where a predictor lies outside its fitted range.
    outside_data : ndarray of bool, shape (m,)
        True where the leverage of the combination exceeds the largest
        leverage of the fitting data.
    leverage : ndarray, shape (m,)
    log_fit, log_se, log_low, log_high : ndarray
        On the log scale; ``log_se`` of the line or of a new individual.
    log_base : float
    df : float
    """

    names: tuple
    x: np.ndarray
    y: np.ndarray
    y_low: np.ndarray
    y_high: np.ndarray
    interval: str
    correction: str
    factor: float
    confidence: float
    extrapolated: np.ndarray
    outside_data: np.ndarray
    leverage: np.ndarray
    log_fit: np.ndarray
    log_se: np.ndarray
    log_low: np.ndarray
    log_high: np.ndarray
    log_base: float
    df: float

    @property
    def any_extrapolated(self) -> np.ndarray:
        """True per row where any predictor is out of range or the combination is."""
        return self.extrapolated.any(axis=1) | self.outside_data

    def to_frame(self):
        """One row per prediction: the predictors, ``y, y_low, y_high, interval,
        correction, extrapolated`` (any flag), ``outside_range`` (names of the
        predictors out of range) and ``outside_data``."""
        import pandas as pd
        cols = {name: self.x[:, j] for j, name in enumerate(self.names)}
        k = self.y.size
        out_names = [",".join(n for n, f in zip(self.names, row) if f)
                     for row in self.extrapolated]
        return pd.DataFrame(cols | {
            "y": self.y, "y_low": self.y_low, "y_high": self.y_high,
            "interval": [self.interval] * k, "correction": [self.correction] * k,
            "extrapolated": self.any_extrapolated, "outside_range": out_names,
            "outside_data": self.outside_data.astype(bool), "method": ["ols"] * k,
        })


@dataclass(frozen=True, slots=True, kw_only=True)
class TotalPrediction:
    """Sum of the predicted y of a set of new individuals, with an interval.

    Attributes
    ----------
    total : float
        Sum of the bias-corrected predictions.
    se : float
        sqrt(var_param + var_scatter) (see the module docstring).
    low, high : float
        Interval for the actual total of these individuals.
    se_parameters, se_scatter : float
        The two parts of ``se``.
    n_new : int
    correction : str
    confidence : float
    n_extrapolated : int
        Rows flagged as extrapolated (any predictor or the combination).
    method : str
        How the interval was made (``"predictive_simulation"``).
    draws : int
        Simulated totals behind the interval.
    scatter_log10 : float
        Residual SD of the fit on the log10 scale.
    beyond_shown_range : bool
        True when ``scatter_log10`` exceeds ``SCATTER_SHOWN``, the scatter up to
        which the interval's coverage was shown by simulation.
    """

    total: float
    se: float
    low: float
    high: float
    se_parameters: float
    se_scatter: float
    n_new: int
    correction: str
    confidence: float
    n_extrapolated: int
    method: str = "predictive_simulation"
    draws: int = TOTAL_DRAWS
    scatter_log10: float = float("nan")
    beyond_shown_range: bool = False

    def to_frame(self):
        import pandas as pd
        return pd.DataFrame([{
            "n": self.n_new, "total": self.total, "total_low": self.low,
            "total_high": self.high, "se": self.se, "se_parameters": self.se_parameters,
            "se_scatter": self.se_scatter, "correction": self.correction,
            "confidence": self.confidence, "extrapolated": self.n_extrapolated,
            "interval_method": self.method, "beyond_shown_range": self.beyond_shown_range,
        }])

    def summary(self) -> str:
        """One line: the total, its interval and correction."""
        from ..render.summaries import total_prediction_summary
        return total_prediction_summary(self)


# --------------------------------------------------------------------------
# predicting from a fit


def _design(fit, x_new) -> tuple[np.ndarray, np.ndarray]:
    if isinstance(x_new, Mapping) or hasattr(x_new, "columns"):
        keys = list(x_new.keys()) if isinstance(x_new, Mapping) else list(x_new.columns)
        missing = [n for n in fit.names if n not in keys]
        if missing:
            raise DataError(f"new values lack the predictor {missing[0]!r} "
                            f"(needed: {', '.join(fit.names)})")
        try:
            mat = np.column_stack([np.atleast_1d(np.asarray(x_new[n], dtype=float))
                                   for n in fit.names])
        except (TypeError, ValueError):
            raise DataError("new predictor values must be numbers") from None
    else:
        try:
            mat = np.asarray(x_new, dtype=float)
        except (TypeError, ValueError):
            raise DataError("new predictor values must be numbers") from None
        if mat.ndim == 1 and mat.size == fit.k:
            mat = mat[None, :]
        if mat.ndim != 2 or mat.shape[1] != fit.k:
            raise DataError(f"new predictor values must have {fit.k} columns "
                            f"({', '.join(fit.names)}), got shape {mat.shape}")
    if mat.shape[0] == 0:
        raise DataError("no new predictor values given")
    _check_positive(mat, fit.names, "new value of")
    logs = np.log(mat) / math.log(fit.log_base)
    return mat, np.column_stack([np.ones(mat.shape[0]), logs])

def _flags(fit, mat, d0):
    lo = np.array([r[0] for r in fit.x_ranges])
    hi = np.array([r[1] for r in fit.x_ranges])
    out_range = (mat < lo) | (mat > hi)
    lev = np.einsum("mp,pq,mq->m", d0, fit.xtx_inv, d0)
    outside = lev > fit.max_leverage * (1 + 1e-9)
    if np.any(out_range) or np.any(outside):
        rows = int((out_range.any(axis=1) | outside).sum())
        warnings.warn(f"{rows} of {mat.shape[0]} predictions lie outside the fitted data "
                      "(a predictor out of its range, or an unusual combination): "
                      "extrapolated, flagged", ExtrapolationWarning, stacklevel=4)
    return out_range, outside, lev

def _factor(fit, correction) -> float:
    if not isinstance(correction, str) or correction not in CORRECTIONS:
        raise ConfigError(f"correction must be one of {', '.join(CORRECTIONS)}, "
                          f"not {correction!r}")
    return float(fit.factors[correction])


def predict_multi(fit, x_new, *, correction: str = "smearing", interval: str = "prediction",
                  confidence: float | None = None) -> MultiPrediction:
    """Predict y in natural units from new predictor values (see :meth:`MultiFit.predict`).

    ``fit`` is a :class:`~scaling.stats.several_predictors.MultiFit`.
    """
    if confidence is None:
        confidence = fit.confidence
    confidence = check_confidence(confidence)
    if not isinstance(interval, str) or interval not in INTERVALS:
        raise ConfigError(f"interval must be one of {', '.join(INTERVALS)}, "
                          f"not {interval!r}")
    factor = _factor(fit, correction)
    mat, d0 = _design(fit, x_new)
    out_range, outside, lev = _flags(fit, mat, d0)
    beta = np.concatenate([[fit.intercept], fit.slopes])
    fitted = d0 @ beta
    var = np.einsum("mp,pq,mq->m", d0, fit.cov, d0)
    if interval == "prediction":
        var = var + fit.resid_sd ** 2
    se = np.sqrt(var)
    tcrit = tails.t_quantile(0.5 + confidence / 2, fit.df)
    low, high = fitted - tcrit * se, fitted + tcrit * se
    bf = factor if interval == "confidence" else 1.0
    base = fit.log_base
    return MultiPrediction(
        names=fit.names, x=_frozen(mat), y=_frozen(factor * base ** fitted),
        y_low=_frozen(bf * base ** low), y_high=_frozen(bf * base ** high),
        interval=interval, correction=correction, factor=factor, confidence=confidence,
        extrapolated=_frozen(out_range), outside_data=_frozen(outside),
        leverage=_frozen(lev), log_fit=_frozen(fitted), log_se=_frozen(se),
        log_low=_frozen(low), log_high=_frozen(high), log_base=base, df=float(fit.df))


def predict_total(fit, x_new, *, correction: str = "smearing",
                  confidence: float | None = None,
                  seed: int | None = DEFAULT_SEED) -> TotalPrediction:
    """Total of the predictions of new individuals (see :meth:`MultiFit.predict_total`).

    ``fit`` is a :class:`~scaling.stats.several_predictors.MultiFit`; ``seed``
    seeds the simulated totals behind the interval (module docstring).
    """
    if fit.residuals.size == 0:
        raise DataError("this fit was read back from a results folder without its "
                        "residuals; a total's interval needs them: rerun 'scaling run' "
                        "with prediction.total")
    if confidence is None:
        confidence = fit.confidence
    confidence = check_confidence(confidence)
    if correction == "none":
        raise ConfigError("correction 'none' gives medians, whose sum is not an estimate "
                          "of a total; use smearing, parametric or ratio")
    factor = _factor(fit, correction)
    mat, d0 = _design(fit, x_new)
    out_range, outside, _ = _flags(fit, mat, d0)
    beta = np.concatenate([[fit.intercept], fit.slopes])
    piece = total_piece(d0, beta, fit.resid_sd ** 2, fit.xtx_inv, residuals=fit.residuals,
                        df=fit.df, base=fit.log_base, correction=correction, factor=factor,
                        rng=np.random.default_rng(seed))
    return combine_total_pieces(
        [piece], confidence=confidence, correction=correction, n_new=int(mat.shape[0]),
        n_extrapolated=int((out_range.any(axis=1) | outside).sum()),
        resid_sd=fit.resid_sd, base=fit.log_base)


def total_piece(d0: np.ndarray, beta, s2: float, xtx_inv, *, residuals, df: float,
                base: float, correction: str, factor: float,
                rng: np.random.Generator) -> tuple:
    """(total, var_param, var_scatter, simulated totals) of the rows ``d0`` of one model.

    ``d0`` are design rows of the model whose coefficients are ``beta`` with
    covariance ``s2 * xtx_inv``; pieces from models fitted to disjoint data
    are independent and add (:func:`combine_total_pieces`).
    """
    scatter = _scatter_variance(correction, s2, residuals, base)
    total, var_param, var_scatter = _total_moments(d0, beta, s2, xtx_inv, factor=factor,
                                                   scatter_var=scatter, base=base)
    sims = _total_draws(d0, beta, s2, xtx_inv, base=base, df=df, draws=TOTAL_DRAWS, rng=rng)
    return float(total), float(var_param), float(var_scatter), sims


def combine_total_pieces(pieces, *, confidence: float, correction: str, n_new: int,
                         n_extrapolated: int, resid_sd: float, base: float) -> TotalPrediction:
    """The total of independent pieces (:func:`total_piece`): sums of the totals, of the
    variances and of the simulated totals draw by draw.  ``resid_sd`` is the largest
    residual SD among the models (for ``beyond_shown_range``)."""
    total = sum(p[0] for p in pieces)
    var_param = sum(p[1] for p in pieces)
    var_scatter = sum(p[2] for p in pieces)
    low, high = _total_interval(sum(p[3] for p in pieces), confidence)
    return TotalPrediction(
        total=float(total), se=math.sqrt(float(var_param + var_scatter)),
        low=float(low), high=float(high), se_parameters=math.sqrt(float(var_param)),
        se_scatter=math.sqrt(float(var_scatter)), n_new=n_new,
        correction=correction, confidence=confidence, n_extrapolated=n_extrapolated,
        draws=TOTAL_DRAWS, scatter_log10=float(resid_sd * math.log10(base)),
        beyond_shown_range=bool(_beyond_shown(resid_sd ** 2, base)))
