"""Power laws with several predictors: y = a * x1^b1 * x2^b2 * ..., fitted by OLS.

On the log scale (base ``log_base``), with Y = log y and X_j = log x_j,

    Y = a + b1 X1 + b2 X2 + ... + bk Xk + e,   e ~ N(0, s^2),

fitted by ordinary least squares (a QR decomposition of the design matrix
D = [1, X1, ..., Xk] via :func:`numpy.linalg.lstsq`).  SMA and MA are
single-predictor (bivariate) line methods; :func:`scaling.stats.schema.check_predictor_methods` refuses
them when there is more than one predictor.

Estimates and intervals (textbook multiple regression, e.g. Draper & Smith
1998, Applied Regression Analysis, 3rd ed., ch. 5; from memory)
    beta = (D'D)^-1 D'Y; residual SD s = sqrt(SSR / (n - k - 1));
    cov(beta) = s^2 (D'D)^-1; interval beta_j +- t_{(1+conf)/2}(n-k-1) se_j;
    test of b_j = beta0_j: t = (b_j - beta0_j) / se_j on n - k - 1 df.
    These equal statsmodels ``OLS`` on the log columns (checked in the tests).

Combined term (e.g. volume against D^2 H)
    A combined predictor z = prod_j x_j^{w_j} with given weights w means the
    restricted model Y = a + c * sum_j w_j X_j, i.e. b = c w (k - 1 linear
    restrictions: the exponents are proportional to the weights).  The F test
    of the restricted against the full model is
        F = ((SSR_r - SSR_f) / (k - 1)) / (SSR_f / (n - k - 1))
    on (k - 1, n - k - 1) df (the extra-sum-of-squares test; it equals
    statsmodels' ``compare_f_test`` of the nested models).  The exponent c of
    the combined term has its own interval and t test (against 1 by
    default, "D^2 H to the first power") on n - 2 df.

Predictions in natural units, extrapolation flags and totals over a set of
new individuals (with their interval) are in :mod:`scaling.stats.multi_predictions`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Mapping, Sequence

import numpy as np
from . import tails

from ._display import frame_html, short_repr
from ..errors import ConfigError, DataError
from .line_results import ConfidenceInterval
from .logscale import base_label, parse_log_base
from .multi_predictions import (MultiPrediction, TotalPrediction, _check_positive, _frozen,
                                predict_multi, predict_total)
from .predictions import correction_factor
from .schema import check_confidence

__all__ = [
    "SINGLE_PREDICTOR_METHODS",
    "MultiFit",
    "TermTest",
    "CombinedTermTest",
    "fit_multi",
    "MULTI_DICT_FORMAT",
    "multi_fit_to_dict",
    "multi_fit_from_dict",
]

SINGLE_PREDICTOR_METHODS = ("sma", "ma", "deming", "theil_sen", "siegel", "sma_robust",
                            "ma_robust")


# --------------------------------------------------------------------------
# input checks


def _check_base(log_base) -> float:
    base = parse_log_base(log_base)
    if base is None:
        raise ConfigError("log_base must be 10, 'e' or 2 for a multi-predictor fit "
                          "(values are given in natural units)")
    return base


def _as_matrix(x, names) -> tuple[np.ndarray, tuple]:
    if isinstance(x, Mapping) or hasattr(x, "columns"):
        keys = list(x.keys()) if isinstance(x, Mapping) else list(x.columns)
        if names is not None:
            raise ConfigError("names cannot be given when x is a mapping or DataFrame "
                              "(its keys are the names)")
        names = tuple(str(k) for k in keys)
        try:
            cols = [np.asarray(x[k], dtype=float) for k in keys]
        except (TypeError, ValueError):
            raise DataError("x must hold numbers") from None
        if not cols:
            raise DataError("x has no predictor columns")
        if any(c.ndim != 1 or c.size != cols[0].size for c in cols):
            raise DataError("every predictor in x must be a 1-D column of the same length")
        mat = np.column_stack(cols)
    else:
        try:
            mat = np.asarray(x, dtype=float)
        except (TypeError, ValueError):
            raise DataError("x must hold numbers") from None
        if mat.ndim == 1:
            mat = mat[:, None]
        if mat.ndim != 2:
            raise DataError(f"x must be a table of shape (n, k), not {mat.ndim}-dimensional")
        if names is None:
            names = tuple(f"x{j + 1}" for j in range(mat.shape[1]))
        names = tuple(str(v) for v in names)
        if len(names) != mat.shape[1]:
            raise ConfigError(f"names has {len(names)} entries but x has {mat.shape[1]} columns")
    if len(set(names)) != len(names):
        raise ConfigError(f"predictor names must differ, got {list(names)}")
    return mat, names


# --------------------------------------------------------------------------
# vectorised cores (leading axes broadcast: replicates in simulations)


def _ols_core(design: np.ndarray, Y: np.ndarray):
    """OLS of Y (..., n) on a fixed design (n, p): beta (..., p), residuals, s2, inverse."""
    n, p = design.shape
    q, r = np.linalg.qr(design)
    if Y.ndim > 1:
        beta = np.linalg.solve(r, q.T @ Y[..., :, None])[..., 0]
    else:
        beta = np.linalg.lstsq(design, Y, rcond=None)[0]
    resid = Y - beta @ design.T
    s2 = np.sum(resid * resid, axis=-1) / (n - p)
    r_inv = np.linalg.inv(r)
    xtx_inv = r_inv @ r_inv.T
    return beta, resid, s2, xtx_inv


# --------------------------------------------------------------------------
# results


@dataclass(frozen=True, slots=True, kw_only=True)
class TermTest:
    """t test of one exponent against a hypothesised value.

    Attributes
    ----------
    term : str
        Predictor name.
    hypothesis : str
        Label of the hypothesis (e.g. ``"cylinder"``), or the value as text.
    exponent : float
        Hypothesised exponent.
    estimate, se : float
        Fitted exponent and its standard error.
    statistic : float
        t = (estimate - exponent) / se.
    df : float
        n - k - 1.
    p_value : float
        Two-sided.
    """

    term: str
    hypothesis: str
    exponent: float
    estimate: float
    se: float
    statistic: float
    df: float
    p_value: float

    def to_frame(self):
        """One row in the style of ``slope_tests.csv``, with a ``term`` column."""
        import pandas as pd
        return pd.DataFrame([{
            "scope": "pooled", "group": "", "method": "ols", "term": self.term,
            "hypothesis": self.hypothesis, "exponent": self.exponent,
            "estimate": self.estimate, "statistic": self.statistic,
            "statistic_type": "t", "df": self.df, "p_value": self.p_value,
        }])


@dataclass(frozen=True, slots=True, kw_only=True)
class CombinedTermTest:
    """The combined predictor prod x_j^{w_j} against the full model.

    Attributes
    ----------
    label : str
        E.g. ``"diameter^2*height"``.
    terms : tuple of str
    weights : ndarray
        w_j of the combined predictor.
    f_statistic, df_num, df_den, p_value : float
        Extra-sum-of-squares F test of b = c w (exponents proportional to the
        weights) against the full model.
    ssr_full, ssr_restricted : float
        Residual sums of squares on the log scale.
    exponent : float
        Fitted exponent c of the combined predictor (restricted model).
    exponent_se : float
    exponent_ci : ConfidenceInterval
    intercept : float
        Log intercept of the restricted model.
    hypothesis : float
        The value c is tested against (1: y proportional to the combined term).
    t_statistic, t_df, t_p_value : float
        t test of c = ``hypothesis`` in the restricted model (n - 2 df).
    confidence : float
    """

    label: str
    terms: tuple
    weights: np.ndarray
    f_statistic: float
    df_num: float
    df_den: float
    p_value: float
    ssr_full: float
    ssr_restricted: float
    exponent: float
    exponent_se: float
    exponent_ci: ConfidenceInterval
    intercept: float
    hypothesis: float
    t_statistic: float
    t_df: float
    t_p_value: float
    confidence: float

    def to_frame(self):
        """One row: the F test and the combined exponent with its interval and t test."""
        import pandas as pd
        return pd.DataFrame([{
            "term": self.label, "test": "combined_term", "statistic": self.f_statistic,
            "df_num": self.df_num, "df_den": self.df_den, "p_value": self.p_value,
            "exponent": self.exponent, "exponent_low": self.exponent_ci.low,
            "exponent_high": self.exponent_ci.high, "intercept": self.intercept,
            "hypothesis": self.hypothesis, "t_statistic": self.t_statistic,
            "t_df": self.t_df, "t_p_value": self.t_p_value,
        }])

    def summary(self) -> str:
        """One sentence reading the test."""
        from ..render.summaries import combined_term_summary
        return combined_term_summary(self)


@dataclass(frozen=True, slots=True, kw_only=True)
class MultiFit:
    """OLS fit of log y on the logs of several predictors.

    y = a * prod_j x_j^{b_j}; ``slopes`` are the exponents b_j, ``intercept``
    is log(a) in ``log_base``.  Intervals at level ``confidence``.

    Attributes
    ----------
    names : tuple of str
        Predictor names, in the order of ``slopes``.
    n : int
    slopes, slope_se, slope_low, slope_high : ndarray, shape (k,)
    intercept, intercept_se : float
    intercept_ci : ConfidenceInterval
    cov : ndarray, shape (k + 1, k + 1)
        Covariance of (intercept, slopes) on the log scale.
    resid_sd : float
        Residual SD on the log scale (n - k - 1 df).
    df : float
    r2, adj_r2 : float
    log_base : float
    confidence : float
    x_ranges : tuple of (float, float)
        Natural-unit range of each predictor in the fitting data.
    y_range : (float, float)
    max_leverage : float
        Largest leverage of the fitting data (the joint extrapolation limit).
    residuals : ndarray
        Log-scale residuals (used by smearing).
    factors : dict
        Correction factors on the fitting data: none, smearing, parametric, ratio.
    """

    names: tuple
    n: int
    slopes: np.ndarray
    slope_se: np.ndarray
    slope_low: np.ndarray
    slope_high: np.ndarray
    intercept: float
    intercept_se: float
    intercept_ci: ConfidenceInterval
    cov: np.ndarray = field(repr=False)
    resid_sd: float
    df: float
    r2: float
    adj_r2: float
    log_base: float
    confidence: float
    x_ranges: tuple
    y_range: tuple
    max_leverage: float
    residuals: np.ndarray = field(repr=False)
    factors: dict = field(repr=False)
    xtx_inv: np.ndarray = field(repr=False)
    log_x: np.ndarray = field(repr=False)
    log_y: np.ndarray = field(repr=False)

    @property
    def a(self) -> float:
        """Coefficient a in natural units (the median at all x_j = 1; not bias-corrected)."""
        return float(self.log_base ** self.intercept)

    @property
    def b(self) -> dict:
        """Exponents by predictor name."""
        return {n: float(v) for n, v in zip(self.names, self.slopes)}

    @property
    def k(self) -> int:
        return len(self.names)

    # ---- tests

    def _index(self, term) -> int:
        if term not in self.names:
            raise ConfigError(f"unknown term {term!r}; the predictors are {', '.join(self.names)}")
        return self.names.index(term)

    def test_exponents(self, hypothesis: Mapping[str, float], *,
                       label: str = "") -> tuple:
        """t tests of exponents against hypothesised values.

        Parameters
        ----------
        hypothesis : mapping of term -> float
            E.g. ``{"diameter": 2, "height": 1}``; terms left out are not tested.
        label : str
            Name of the hypothesis (e.g. ``"cylinder"``).

        Returns
        -------
        tuple of TermTest

        Notes
        -----
        t = (b_j - beta0_j) / se(b_j) on n - k - 1 df, two-sided.

        Examples
        --------
        >>> import numpy as np
        >>> rng = np.random.default_rng(1)
        >>> d, h = 10 ** rng.uniform(1, 2, 40), 10 ** rng.uniform(0.5, 1.5, 40)
        >>> m = 0.05 * d**2 * h * 10 ** rng.normal(0, 0.05, 40)
        >>> fit = fit_multi({"d": d, "h": h}, m)
        >>> tests = fit.test_exponents({"d": 2, "h": 1}, label="cylinder")
        >>> [(t.term, t.exponent, t.df) for t in tests]
        [('d', 2.0, 37.0), ('h', 1.0, 37.0)]
        """
        if not isinstance(hypothesis, Mapping) or not hypothesis:
            raise ConfigError("hypothesis must be a non-empty mapping of term -> exponent")
        out = []
        for term, value in hypothesis.items():
            j = self._index(term)
            try:
                b0 = float(value)
            except (TypeError, ValueError):
                raise ConfigError(f"hypothesised exponent of {term!r} must be a number, "
                                  f"not {value!r}") from None
            t = (self.slopes[j] - b0) / self.slope_se[j]
            p = 2 * tails.t_upper(abs(t), self.df)
            out.append(TermTest(term=term, hypothesis=label or f"{b0:g}", exponent=b0,
                                estimate=float(self.slopes[j]), se=float(self.slope_se[j]),
                                statistic=float(t), df=float(self.df), p_value=float(p)))
        return tuple(out)

    def test_combined(self, weights: Mapping[str, float], *, exponent: float = 1.0,
                      label: str | None = None) -> CombinedTermTest:
        """Test the combined predictor prod x_j^{w_j} against separate exponents.

        Parameters
        ----------
        weights : mapping of term -> float
            Weight of every predictor in the combined term, e.g.
            ``{"diameter": 2, "height": 1}`` for D^2 H.  Every predictor must
            be given (weight 0 drops a predictor from the combined model).
        exponent : float
            Value the combined term's exponent is tested against (default 1).
        label : str, optional
            Display name; by default built from the weights.

        Returns
        -------
        CombinedTermTest

        Notes
        -----
        Restricted model Y = a + c sum_j w_j X_j; F = ((SSR_r - SSR_f)/(k-1)) /
        (SSR_f/(n-k-1)) (extra sum of squares; e.g. Draper & Smith 1998,
        sec. 9.1, from memory).  See the module docstring.

        Examples
        --------
        >>> import numpy as np
        >>> rng = np.random.default_rng(2)
        >>> d, h = 10 ** rng.uniform(1, 2, 60), 10 ** rng.uniform(0.5, 1.5, 60)
        >>> v = 0.04 * d**2 * h * 10 ** rng.normal(0, 0.03, 60)
        >>> c = fit_multi({"d": d, "h": h}, v).test_combined({"d": 2, "h": 1})
        >>> c.label, round(c.exponent, 2), c.df_num
        ('d^2*h', 1.0, 1.0)
        """
        if not isinstance(weights, Mapping):
            raise ConfigError("weights must be a mapping of term -> weight")
        missing = [n for n in self.names if n not in weights]
        extra = [n for n in weights if n not in self.names]
        if extra:
            raise ConfigError(f"unknown term {extra[0]!r} in weights; the predictors are "
                              f"{', '.join(self.names)}")
        if missing:
            raise ConfigError(f"weights must give every predictor; missing "
                              f"{', '.join(missing)}")
        try:
            w = np.array([float(weights[n]) for n in self.names])
        except (TypeError, ValueError):
            raise ConfigError("weights must be numbers") from None
        if not np.all(np.isfinite(w)) or np.all(w == 0):
            raise ConfigError("weights must be finite and not all zero")
        if self.k < 2:
            raise ConfigError("a combined term needs at least two predictors")
        if label is None:
            label = "*".join(n if wj == 1 else f"{n}^{wj:g}"
                             for n, wj in zip(self.names, w) if wj != 0)
        z = self.log_x @ w
        design = np.column_stack([np.ones(self.n), z])
        beta_r, resid_r, s2_r, inv_r = _ols_core(design, self.log_y)
        ssr_r = float(resid_r @ resid_r)
        ssr_f = float(self.residuals @ self.residuals)
        df_num = self.k - 1
        f = ((ssr_r - ssr_f) / df_num) / (ssr_f / self.df)
        p = tails.f_upper(f, df_num, self.df)
        df_r = self.n - 2
        se_c = math.sqrt(s2_r * inv_r[1, 1])
        tcrit = tails.t_quantile(0.5 + self.confidence / 2, df_r)
        t = (beta_r[1] - exponent) / se_c
        return CombinedTermTest(
            label=label, terms=self.names, weights=_frozen(w), f_statistic=float(f),
            df_num=float(df_num), df_den=float(self.df), p_value=float(p),
            ssr_full=ssr_f, ssr_restricted=ssr_r, exponent=float(beta_r[1]),
            exponent_se=se_c, exponent_ci=ConfidenceInterval(float(beta_r[1] - tcrit * se_c),
                                                             float(beta_r[1] + tcrit * se_c)),
            intercept=float(beta_r[0]), hypothesis=float(exponent), t_statistic=float(t),
            t_df=float(df_r), t_p_value=float(2 * tails.t_upper(abs(t), df_r)),
            confidence=self.confidence)

    # ---- predictions

    def predict(self, x_new, *, correction: str = "smearing", interval: str = "prediction",
                confidence: float | None = None) -> MultiPrediction:
        """Predict y in natural units from new predictor values.

        Parameters
        ----------
        x_new : mapping of name -> values, DataFrame, or array of shape (m, k)
            Natural units; columns in the order of ``names`` for an array.
        correction : {"smearing", "parametric", "ratio", "none"}
        interval : {"prediction", "confidence"}
        confidence : float, optional
            Defaults to the fit's level.

        Returns
        -------
        MultiPrediction

        Warns
        -----
        ExtrapolationWarning
            When a row lies outside the fitted data (flagged).

        Notes
        -----
        var_line = d0' cov d0; var_new = var_line + s^2; bounds on the log scale
        +- t(n-k-1); see the module docstring for how the correction meets them.

        Examples
        --------
        >>> import numpy as np
        >>> rng = np.random.default_rng(3)
        >>> d, h = 10 ** rng.uniform(1, 2, 50), 10 ** rng.uniform(0.5, 1.5, 50)
        >>> m = 0.05 * d**2 * h * 10 ** rng.normal(0, 0.05, 50)
        >>> p = fit_multi({"d": d, "h": h}, m).predict({"d": [20.0], "h": [10.0]})
        >>> bool(p.y_low[0] < 0.05 * 20**2 * 10 < p.y_high[0])
        True
        """
        return predict_multi(self, x_new, correction=correction, interval=interval,
                             confidence=confidence)

    def predict_total(self, x_new, *, correction: str = "smearing",
                      confidence: float | None = None) -> TotalPrediction:
        """Sum of the predicted y of new individuals, with an interval for their actual total.

        Parameters
        ----------
        x_new : mapping, DataFrame or array (m, k)
            Predictor values of the new individuals (natural units).
        correction : {"smearing", "parametric", "ratio"}
            A total of natural-unit values needs means, so ``none`` is refused.
        confidence : float, optional

        Returns
        -------
        TotalPrediction

        Notes
        -----
        The interval is the quantiles of totals simulated from the fit's
        sampling distribution with normal log-scale scatter per individual; see
        :mod:`scaling.stats.multi_predictions`.

        Examples
        --------
        >>> import numpy as np
        >>> rng = np.random.default_rng(4)
        >>> d, h = 10 ** rng.uniform(1, 2, 80), 10 ** rng.uniform(0.5, 1.5, 80)
        >>> m = 0.05 * d**2 * h * 10 ** rng.normal(0, 0.05, 80)
        >>> plot = {"d": [15.0, 30.0, 45.0], "h": [8.0, 12.0, 20.0]}
        >>> t = fit_multi({"d": d, "h": h}, m).predict_total(plot)
        >>> bool(t.low < t.total < t.high), t.n_new
        (True, 3)
        """
        return predict_total(self, x_new, correction=correction, confidence=confidence)

    # ---- output

    def to_frame(self):
        """One row per term in the style of ``fits.csv``, with a ``term`` column.

        Columns: ``scope, group, method, term, n, slope, slope_low, slope_high,
        slope_se, intercept, intercept_low, intercept_high, r, r2, adj_r2,
        resid_sd, log_base, confidence, x_min, x_max, note``.  ``r`` is blank
        (a partial exponent has no single correlation); the intercept columns
        repeat on every row (one intercept per model).

        Examples
        --------
        >>> import numpy as np
        >>> d = np.array([10., 20, 30, 40, 50, 15, 25, 35])
        >>> h = np.array([8., 15, 12, 20, 18, 9, 22, 14])
        >>> frame = fit_multi({"d": d, "h": h}, 0.05 * d**2 * h).to_frame()
        >>> frame[["term", "slope", "x_min", "x_max"]].round(6).values.tolist()
        [['d', 2.0, 10.0, 50.0], ['h', 1.0, 8.0, 22.0]]
        """
        import pandas as pd
        rows = []
        for j, name in enumerate(self.names):
            rows.append({
                "scope": "pooled", "group": "", "method": "ols", "term": name, "n": self.n,
                "slope": float(self.slopes[j]), "slope_low": float(self.slope_low[j]),
                "slope_high": float(self.slope_high[j]), "slope_se": float(self.slope_se[j]),
                "intercept": self.intercept, "intercept_low": self.intercept_ci.low,
                "intercept_high": self.intercept_ci.high, "r": math.nan, "r2": self.r2,
                "adj_r2": self.adj_r2, "resid_sd": self.resid_sd,
                "log_base": base_label(self.log_base), "confidence": self.confidence,
                "x_min": self.x_ranges[j][0], "x_max": self.x_ranges[j][1], "note": "",
            })
        return pd.DataFrame(rows)

    def __repr__(self) -> str:
        return short_repr(self, {"names": self.names, "n": self.n,
                                 "slopes": tuple(float(b) for b in self.slopes),
                                 "intercept": self.intercept, "r2": self.r2,
                                 "log_base": base_label(self.log_base),
                                 "confidence": self.confidence})

    def _repr_html_(self) -> str:
        return frame_html(self.to_frame(), title="OLS fit on several predictors",
                          notes=[self.summary()])

    def plot(self, *, ax=None, term: str | None = None, **style):
        """Draw the partial relationship with one predictor (``term``, default the
        first) at the geometric means of the others, on natural-unit log axes;
        returns the Axes (:func:`scaling.render.plots.plot_fit`)."""
        from ..render.plots import plot_fit
        return plot_fit(self, ax=ax, term=term, **style)

    def summary(self) -> str:
        """A few lines of text describing the fit.

        Examples
        --------
        >>> import numpy as np
        >>> rng = np.random.default_rng(5)
        >>> d, h = 10 ** rng.uniform(1, 2, 40), 10 ** rng.uniform(0.5, 1.5, 40)
        >>> m = 0.05 * d**2 * h * 10 ** rng.normal(0, 0.05, 40)
        >>> print(fit_multi({"d": d, "h": h}, m).summary().splitlines()[0])
        OLS fit of log10 y on 2 predictors (d, h), n = 40
        """
        from ..render.summaries import multi_fit_summary
        return multi_fit_summary(self)


# --------------------------------------------------------------------------
# the fit


def fit_multi(x, y, *, names: Sequence[str] | None = None, confidence: float = 0.95,
              log_base=10) -> MultiFit:
    """Fit y = a * prod_j x_j^{b_j} by OLS on log scales.

    Parameters
    ----------
    x : mapping of name -> values, DataFrame, or array of shape (n, k)
        Positive predictor values in natural units.
    y : array_like, shape (n,)
        Positive responses in natural units.
    names : sequence of str, optional
        Predictor names when ``x`` is an array (default ``x1, x2, ...``).
    confidence : float
        Level of the intervals.
    log_base : {10, "e", 2}

    Returns
    -------
    MultiFit

    Raises
    ------
    DataError
        Non-positive or non-finite values (naming the column and row),
        mismatched lengths, too few rows, or predictors that are collinear
        on the log scale.

    Notes
    -----
    beta = (D'D)^-1 D'Y by QR (numpy lstsq); s^2 = SSR/(n-k-1);
    cov = s^2 (D'D)^-1; see the module docstring.

    Examples
    --------
    >>> import numpy as np
    >>> d = np.array([10., 20, 30, 40, 50, 15, 25, 35])
    >>> h = np.array([8., 15, 12, 20, 18, 9, 22, 14])
    >>> fit = fit_multi({"d": d, "h": h}, 0.05 * d**2 * h)   # exact power law
    >>> round(fit.b["d"], 6), round(fit.b["h"], 6), round(fit.a, 6)
    (2.0, 1.0, 0.05)
    """
    confidence = check_confidence(confidence)
    base = _check_base(log_base)
    mat, names = _as_matrix(x, names)
    try:
        yv = np.asarray(y, dtype=float)
    except (TypeError, ValueError):
        raise DataError("y must hold numbers") from None
    if yv.ndim != 1 or yv.size != mat.shape[0]:
        raise DataError(f"y must be one column as long as x ({mat.shape[0]} rows), "
                        f"got shape {yv.shape}")
    _check_positive(mat, names, "predictor")
    _check_positive(yv[:, None], ("y",), "response")
    n, k = mat.shape
    if n < k + 2:
        raise DataError(f"{k} predictors need at least {k + 2} rows (one residual df), "
                        f"got {n}")
    ln_b = math.log(base)
    log_x = np.log(mat) / ln_b
    log_y = np.log(yv) / ln_b
    design = np.column_stack([np.ones(n), log_x])
    if np.linalg.matrix_rank(design) < k + 1:
        raise DataError(f"the logs of the predictors ({', '.join(names)}) are collinear "
                        "(or one is constant); their exponents cannot be separated")
    beta, resid, s2, xtx_inv = _ols_core(design, log_y)
    df = n - k - 1
    cov = s2 * xtx_inv
    se = np.sqrt(np.diag(cov))
    tcrit = tails.t_quantile(0.5 + confidence / 2, df)
    syy = float(np.sum((log_y - log_y.mean()) ** 2))
    ssr = float(resid @ resid)
    r2 = 1 - ssr / syy if syy > 0 else math.nan
    adj = 1 - (1 - r2) * (n - 1) / df
    lev = np.einsum("np,pq,nq->n", design, xtx_inv, design)
    sd = math.sqrt(s2)
    y_hat = base ** (design @ beta)
    factors = {
        "none": 1.0,
        "smearing": correction_factor("smearing", resid_sd=sd, log_base=base, residuals=resid),
        "parametric": correction_factor("parametric", resid_sd=sd, log_base=base),
        "ratio": correction_factor("ratio", resid_sd=sd, log_base=base, y=yv, y_hat=y_hat),
    }
    return MultiFit(
        names=names, n=n, slopes=_frozen(beta[1:]), slope_se=_frozen(se[1:]),
        slope_low=_frozen(beta[1:] - tcrit * se[1:]), slope_high=_frozen(beta[1:] + tcrit * se[1:]),
        intercept=float(beta[0]), intercept_se=float(se[0]),
        intercept_ci=ConfidenceInterval(float(beta[0] - tcrit * se[0]),
                                        float(beta[0] + tcrit * se[0])),
        cov=_frozen(cov), resid_sd=sd, df=float(df), r2=float(r2), adj_r2=float(adj),
        log_base=base, confidence=confidence,
        x_ranges=tuple((float(c.min()), float(c.max())) for c in mat.T),
        y_range=(float(yv.min()), float(yv.max())), max_leverage=float(lev.max()),
        residuals=_frozen(resid), factors={k_: float(v) for k_, v in factors.items()},
        xtx_inv=_frozen(xtx_inv), log_x=_frozen(log_x), log_y=_frozen(log_y))


# --------------------------------------------------------------------------
# a MultiFit to and from plain JSON types (results.json; scaling predict)

#: Format tag of :func:`multi_fit_to_dict` dictionaries.
MULTI_DICT_FORMAT = "scaling.multifit/1"

_MULTI_REQUIRED = ("predictors", "n", "slopes", "slope_se", "slope_low", "slope_high",
                   "intercept", "intercept_se", "intercept_ci", "cov", "resid_sd", "df",
                   "log_base", "confidence", "x_ranges", "y_range", "max_leverage",
                   "xtx_inv", "factors")


def _plain(v):
    """JSON-ready: arrays to lists, NaN and inf to None."""
    if isinstance(v, dict):
        return {k: _plain(x) for k, x in v.items()}
    if isinstance(v, (list, tuple, np.ndarray)):
        return [_plain(x) for x in (v.tolist() if isinstance(v, np.ndarray) else v)]
    if isinstance(v, (float, np.floating)):
        return float(v) if math.isfinite(v) else None
    if isinstance(v, np.integer):
        return int(v)
    return v


def multi_fit_to_dict(fit: MultiFit) -> dict:
    """What predicting from a :class:`MultiFit` needs, as JSON-ready types.

    Coefficients, their covariance, (X'X)^-1 and the largest leverage (the
    joint extrapolation check), residual SD and df, the correction factors
    computed on the fitting data and each predictor's fitted range.  The
    residuals are not kept, so a fit read back predicts individuals but not
    a total (:meth:`MultiFit.predict_total`).

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(3)
    >>> d, h = 10 ** rng.uniform(1, 2, 30), 10 ** rng.uniform(0.5, 1.5, 30)
    >>> fit = fit_multi({"d": d, "h": h}, 0.05 * d**2 * h * 10 ** rng.normal(0, 0.05, 30))
    >>> back = multi_fit_from_dict(multi_fit_to_dict(fit))
    >>> bool(np.allclose(back.predict({"d": [20.0], "h": [10.0]}).y,
    ...                  fit.predict({"d": [20.0], "h": [10.0]}).y, rtol=1e-12))
    True
    """
    return _plain({
        "format": MULTI_DICT_FORMAT, "method": "ols", "predictors": list(fit.names),
        "n": int(fit.n), "slopes": fit.slopes, "slope_se": fit.slope_se,
        "slope_low": fit.slope_low, "slope_high": fit.slope_high,
        "intercept": fit.intercept, "intercept_se": fit.intercept_se,
        "intercept_ci": [fit.intercept_ci.low, fit.intercept_ci.high],
        "cov": fit.cov, "resid_sd": fit.resid_sd, "df": fit.df, "r2": fit.r2,
        "adj_r2": fit.adj_r2, "log_base": base_label(fit.log_base),
        "confidence": fit.confidence, "x_ranges": [list(r) for r in fit.x_ranges],
        "y_range": list(fit.y_range), "max_leverage": fit.max_leverage,
        "xtx_inv": fit.xtx_inv, "factors": dict(fit.factors),
    })


def multi_fit_from_dict(d: dict) -> MultiFit:
    """Rebuild the :class:`MultiFit` written by :func:`multi_fit_to_dict` (no residuals).

    Raises
    ------
    DataError
        Not such a dictionary, or a key is missing.
    """
    if not isinstance(d, dict) or d.get("format") != MULTI_DICT_FORMAT:
        raise DataError(f"a saved several-predictor fit must be a dict of format "
                        f"{MULTI_DICT_FORMAT!r}")
    missing = [k for k in _MULTI_REQUIRED if k not in d]
    if missing:
        raise DataError(f"saved several-predictor fit lacks key(s): {', '.join(missing)}")

    def arr(v):
        return _frozen(np.array([math.nan if x is None else x for x in v], dtype=float))

    def mat(v):
        return _frozen(np.array([[math.nan if x is None else x for x in row] for row in v],
                                dtype=float))

    def num(v):
        return math.nan if v is None else float(v)

    base = parse_log_base(d["log_base"])
    empty = _frozen(np.empty(0))
    return MultiFit(
        names=tuple(str(n) for n in d["predictors"]), n=int(d["n"]), slopes=arr(d["slopes"]),
        slope_se=arr(d["slope_se"]), slope_low=arr(d["slope_low"]),
        slope_high=arr(d["slope_high"]), intercept=num(d["intercept"]),
        intercept_se=num(d["intercept_se"]),
        intercept_ci=ConfidenceInterval(num(d["intercept_ci"][0]), num(d["intercept_ci"][1])),
        cov=mat(d["cov"]), resid_sd=num(d["resid_sd"]), df=num(d["df"]),
        r2=num(d.get("r2")), adj_r2=num(d.get("adj_r2")), log_base=base,
        confidence=float(d["confidence"]),
        x_ranges=tuple((num(r[0]), num(r[1])) for r in d["x_ranges"]),
        y_range=(num(d["y_range"][0]), num(d["y_range"][1])),
        max_leverage=num(d["max_leverage"]), residuals=empty,
        factors={k: num(v) for k, v in d["factors"].items()}, xtx_inv=mat(d["xtx_inv"]),
        log_x=empty, log_y=empty)
