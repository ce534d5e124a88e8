"""The result of a line fit: LineFit, SlopeTest, ConfidenceInterval, and their JSON form.

:mod:`scaling.stats.lines` computes lines from moments (the method registry,
intervals, tests); this module packages one fit as a :class:`LineFit`
(:func:`line_fit_from_moments`, :func:`line_fit_from_result`, and
:func:`fit_line` for one sample of x and y), tests its slope with the test
whose inversion is its interval (:meth:`LineFit.test_slope`, including the
Deming, Theil-Sen and bootstrap tests of the methods fitted in
:mod:`scaling.stats.robust`), and writes it to and reads it from plain JSON
types (:func:`fit_to_dict`, :func:`fit_from_dict`).  Words about a fit are
made in :mod:`scaling.render`.
"""

from __future__ import annotations

import math
import operator
import warnings
from dataclasses import dataclass, field

import numpy as np
from . import tails

from ._display import frame_html, short_repr
from ..errors import ConfigError, DataError, DegenerateDataWarning
from .deming import deming_slope_test
from .fit_rows import fit_values
from .lines import (METHOD_INFO, METHODS, exact_fit, exponent_value, fit_moments, get_method,
                    ma_minor_side, slope_test_statistic, validate_xy)
from .logscale import base_label, parse_log_base, to_log
from .moments import HIGHER_KEYS, Moments, moments as _moments
from .predictions import inverse_predict as _inverse_predict, predict as _predict
from .schema import EXACT_NOTE, check_confidence, method_label

__all__ = [
    "ConfidenceInterval",
    "accepted_ranges",
    "LineFit",
    "SlopeTest",
    "fit_line",
    "line_fit_from_moments",
    "line_fit_from_result",
    "line_fits_from_result",
    "slope_tests_for",
    "tie_term",
    "DICT_FORMAT",
    "fit_to_dict",
    "fit_from_dict",
]


# --------------------------------------------------------------------------
# result objects


@dataclass(frozen=True, slots=True)
class ConfidenceInterval:
    """Bounds of a confidence interval (``low`` <= ``high``; NaN if not estimable)."""

    low: float
    high: float


def accepted_ranges(ci: ConfidenceInterval, gap_low: float = math.nan,
                    gap_high: float = math.nan) -> tuple:
    """The accepted slopes as ranges: ``(ci,)``, or ``ci`` split at the gap
    ``gap_low .. gap_high`` into two ranges when both ends of the gap are finite."""
    if np.isfinite(gap_low) and np.isfinite(gap_high):
        return (ConfidenceInterval(ci.low, float(gap_low)),
                ConfidenceInterval(float(gap_high), ci.high))
    return (ci,)


@dataclass(frozen=True, slots=True, kw_only=True)
class SlopeTest:
    """Test of the slope (exponent) against a hypothesised value.

    Attributes
    ----------
    method : str
    hypothesis : str
        Name given to the exponent (e.g. ``"three_quarters"``).
    exponent : float
        The hypothesised slope b0.
    estimate : float
        The fitted slope.
    statistic : float
        ``statistic_type`` ``"t"``: t on ``df`` degrees of freedom;
        ``"z"``: standard normal (Theil-Sen, Kendall's S / its SD);
        ``"boot_share_above"``: the share of bootstrap slopes above b0.
        Positive t or z (share above 0.5) when the slope is above b0.
    df : float
        NaN for ``z`` and bootstrap tests.
    p_value : float
        Two-sided.
    statistic_type : str
    p_method : str
        How ``p_value`` was got (the vocabulary of
        :data:`scaling.stats.schema.SLOPE_P_METHODS`): ``"t"``, ``"normal"``,
        ``"bootstrap_percentile(B)"`` (B finite replicates; p is at least
        2/(B + 1)), and for a common slope ``"lr_t"`` or
        ``"lr_parametric_bootstrap(B)"`` (p at least 1/(B + 1)).
    note : str
        ``EXACT_NOTE`` when the points have no residual scatter (then p is 1
        if b0 equals the slope up to rounding and 0 otherwise).
    """

    method: str
    hypothesis: str
    exponent: float
    estimate: float
    statistic: float
    df: float
    p_value: float
    statistic_type: str = "t"
    p_method: str = "t"
    note: str = ""

    def to_frame(self):
        import pandas as pd
        return pd.DataFrame([{
            "method": self.method, "hypothesis": self.hypothesis,
            "exponent": self.exponent, "estimate": self.estimate,
            "statistic": self.statistic, "statistic_type": self.statistic_type,
            "df": self.df, "p_value": self.p_value, "p_method": self.p_method,
            "note": self.note,
        }])

    def __repr__(self) -> str:
        return short_repr(self, {"method": self.method, "hypothesis": self.hypothesis,
                                 "exponent": self.exponent, "estimate": self.estimate,
                                 "statistic": self.statistic, "p_value": self.p_value})

    def _repr_html_(self) -> str:
        # The sentence reading the test is made in render
        # (scaling.render.wording.describe_test); here the table alone.
        return frame_html(self.to_frame(), title=f"{method_label(self.method)} slope test")


def _deming_test(m: Moments, lam, b0: float) -> tuple:
    """t, df, p of the Deming slope test: the MA test on (X, Y/sqrt(lam))."""
    if lam is None:
        raise ConfigError("a Deming fit needs its error-variance ratio (lam) to be tested")
    t, df, p = deming_slope_test(m, lam, b0)
    return float(t), float(df), float(p)


def _tie_term(values: np.ndarray) -> float:
    _, counts = np.unique(values, return_counts=True)
    counts = counts[counts > 1].astype(float)
    return float(np.sum(counts * (counts - 1) * (2 * counts + 5)))


#: Public name for the tie correction used by robust.theil_sen.
def tie_term(values: np.ndarray) -> float:
    """The tie term of Kendall's variance (see :func:`_kendall_slope_test`)."""
    return _tie_term(values)


def _kendall_slope_test(X, Y, b0: float) -> tuple:
    """z and p of Sen's (1968) Kendall test of slope = b0 (see LineFit.test_slope)."""
    X = np.asarray(X, dtype=float)
    Y = np.asarray(Y, dtype=float)
    n = X.size
    i, j = np.triu_indices(n, k=1)
    dx = X[j] - X[i]
    keep = dx != 0
    slopes = (Y[j] - Y[i])[keep] / dx[keep]
    s = float(np.count_nonzero(slopes > b0) - np.count_nonzero(slopes < b0))
    # Kendall's S of X against R = Y - b0 X: its null variance counts ties
    # in X and in R (Sen 1968, JASA 63:1379, eq. 2.6), not ties in Y.  Two
    # rows tie in R when their pairwise slope equals b0 (up to rounding).
    R = Y - b0 * X
    tol = 1e-10 * (np.max(np.abs(Y)) + abs(b0) * np.max(np.abs(X)) + 1e-300)
    var = (n * (n - 1) * (2 * n + 5) - _tie_term(X) - _tie_term(np.round(R / tol))) / 18.0
    if var <= 0:
        return math.nan, math.nan
    z = s / math.sqrt(var)
    return z, float(2 * tails.normal_upper(abs(z)))


def _bootstrap_slope_test(replicates, b0: float) -> tuple:
    """Share of replicates above b0 and the percentile-bootstrap p (LineFit.test_slope)."""
    r = np.asarray(replicates, dtype=float)
    r = r[np.isfinite(r)]
    if r.size == 0:
        return math.nan, math.nan
    below = np.count_nonzero(r <= b0)
    above = np.count_nonzero(r >= b0)
    p = min(1.0, 2.0 * (1 + min(below, above)) / (r.size + 1))
    return float(np.count_nonzero(r > b0) / r.size), float(p)


@dataclass(frozen=True, slots=True, kw_only=True)
class LineFit:
    """A straight line fitted to log y against log x.

    ``slope`` is the exponent b of y = a x^b; ``intercept`` is log(a) in
    ``log_base``.  Intervals are at level ``confidence``.

    Attributes
    ----------
    method, n, slope, slope_ci, slope_se, intercept, intercept_ci,
    intercept_se, r, r2, resid_sd, df, log_base, confidence, moments,
    x_range, y_range, note
        ``resid_sd`` is the SD of vertical residuals Y - a - bX on the log
        scale (n - 2 df); ``x_range`` and ``y_range`` are the natural-unit
        extremes of the data (``None`` when fitted from moments alone);
        ``note`` is empty, says why the fit is not estimable, or is a fixed
        label of :mod:`scaling.stats.schema` (``EXACT_NOTE``,
        ``BOTH_SIGNS_NOTE``, ...).
    lam : float or None
        Error-variance ratio var(error in log y)/var(error in log x) of a
        Deming fit (None for other methods).
    interval_method : str
        How the intervals were made: ``"analytic"`` (formulas above),
        ``"kendall_slope_bootstrap_intercept"`` (Theil-Sen: Sen's interval
        for the slope, percentile bootstrap for the intercept) or
        ``"bootstrap_percentile"`` (Siegel, robust SMA/MA).
    slope_gap_low, slope_gap_high : float
        NaN unless the accepted slopes are two ranges (an SMA fit noted
        ``BOTH_SIGNS_NOTE``): then they are ``slope_ci.low .. slope_gap_low``
        and ``slope_gap_high .. slope_ci.high``, ``slope_ci`` is their hull
        and the slopes inside the gap are rejected; :attr:`accepted_slopes`
        gives the ranges.
    slope_replicates : ndarray or None
        Bootstrap slopes behind a bootstrap interval (used by the test).
    log_data : (ndarray, ndarray) or None
        Log x and log y, kept by Theil-Sen for its rank test.
    smearing_factor, ratio_factor : float or None
        Correction factors computed from the fit's own residuals on its
        fitting data (Duan 1983 smearing; Snowdon 1991 ratio), set by
        :func:`scaling.fit_line`; :meth:`predict` uses them by default.
        None for fits made from moments alone (pass ``residuals`` or a
        saved factor to :func:`scaling.stats.predictions.predict` then).
    """

    method: str
    n: int
    slope: float
    slope_ci: ConfidenceInterval
    slope_se: float
    intercept: float
    intercept_ci: ConfidenceInterval
    intercept_se: float
    r: float
    r2: float
    resid_sd: float
    df: float
    log_base: float | None
    confidence: float
    moments: Moments = field(repr=False)
    x_range: tuple | None = None
    y_range: tuple | None = None
    note: str = ""
    lam: float | None = None
    interval_method: str = "analytic"
    slope_gap_low: float = field(default=math.nan, repr=False, compare=False)
    slope_gap_high: float = field(default=math.nan, repr=False, compare=False)
    slope_replicates: np.ndarray | None = field(default=None, repr=False, compare=False)
    log_data: tuple | None = field(default=None, repr=False, compare=False)
    smearing_factor: float | None = field(default=None, repr=False, compare=False)
    ratio_factor: float | None = field(default=None, repr=False, compare=False)

    @property
    def b(self) -> float:
        """Exponent of y = a x^b (same as ``slope``)."""
        return self.slope

    @property
    def a(self) -> float:
        """Coefficient of y = a x^b in natural units (median, not bias-corrected)."""
        if self.log_base is None:
            return self.intercept
        return float(self.log_base ** self.intercept)

    @property
    def estimable(self) -> bool:
        return np.isfinite(self.slope)

    @property
    def accepted_slopes(self) -> tuple:
        """The slopes :meth:`test_slope` accepts at level ``confidence``, as ranges.

        Returns
        -------
        tuple of ConfidenceInterval
            One range, ``(slope_ci,)``, or two when the accepted set is split
            (an SMA fit whose correlation is not significant accepts slopes
            of either sign: ``slope_ci.low .. slope_gap_low`` and
            ``slope_gap_high .. slope_ci.high``; the gap between them is
            rejected).

        Examples
        --------
        >>> import warnings, scaling
        >>> with warnings.catch_warnings():
        ...     warnings.simplefilter("ignore")
        ...     fit = scaling.fit_line(range(1, 11), [3, 9, 2, 7, 4, 10, 1, 6, 8, 5],
        ...                            method="sma")
        >>> [(round(r.low, 3), round(r.high, 3)) for r in fit.accepted_slopes]
        [(-2.098, -0.477), (0.477, 2.098)]
        """
        return accepted_ranges(self.slope_ci, self.slope_gap_low, self.slope_gap_high)

    def test_slope(self, exponent: float, *, hypothesis: str = "") -> SlopeTest:
        """Test slope = ``exponent`` (two-sided) with the test behind the interval.

        OLS, SMA, MA
            :func:`slope_test_statistic` (t on n - 2 df); the intervals are
            its inversion.
        Deming (``lam`` set)
            The MA test of :func:`slope_test_statistic` on (X, Y/sqrt(lam))
            against b0/sqrt(lam): the interval of
            :func:`scaling.stats.robust.deming` is its inversion.
        Theil-Sen
            Kendall's S = #(pairwise slopes > b0) - #(pairwise slopes < b0)
            over pairs with distinct x (the S of X against Y - b0 X), with
            Sen's (1968, *JASA* 63:1379, eq. 2.6) variance counting ties in
            x and in Y - b0 X; z = S/sd and p = 2 Phi(-|z|).  Sen's slope
            interval (:func:`scaling.stats.robust.theil_sen`, ties in x) is the set
            of b0 this test does not reject, up to one step of S at the
            order statistics.
        Siegel, robust SMA, robust MA
            Percentile-bootstrap p-value from the stored slope replicates:
            p = min(1, 2 (1 + min(#{b* <= b0}, #{b* >= b0})) / (B + 1)),
            B the finite replicates (the +1 keeps p above 0, as for
            permutation p-values).  b0 outside the percentile interval gives
            p < 1 - confidence, up to 2/(B + 1) and the quantile
            interpolation.  The statistic is the share of b* above b0.
        """
        b0 = exponent_value(exponent)
        kind, df, how = "t", float(self.df), "t"
        if not self.estimable:
            t, p = math.nan, math.nan
            if self.method not in METHODS and self.method != "deming":
                kind, df = ("z" if self.method == "theil_sen" else "boot_share_above"), math.nan
                how = "normal" if kind == "z" else "bootstrap_percentile"
        elif self.method in METHODS:
            t, df, p = (float(v) for v in slope_test_statistic(self.moments, self.method, b0))
        elif self.method == "deming":
            t, df, p = _deming_test(self.moments, self.lam, b0)
        elif self.method == "theil_sen" and self.log_data is not None:
            t, p = _kendall_slope_test(self.log_data[0], self.log_data[1], b0)
            kind, df, how = "z", math.nan, "normal"
        elif self.slope_replicates is not None:
            t, p = _bootstrap_slope_test(self.slope_replicates, b0)
            finite = int(np.count_nonzero(np.isfinite(self.slope_replicates)))
            kind, df, how = "boot_share_above", math.nan, f"bootstrap_percentile({finite})"
        else:
            raise ConfigError(f"the {method_label(self.method)} fit carries neither data nor "
                              "bootstrap replicates, so its slope cannot be tested")
        note = ""
        if self.estimable and self.method in METHODS and bool(exact_fit(self.moments)):
            note = EXACT_NOTE
        label = exponent.strip() if isinstance(exponent, str) else f"{b0:g}"
        return SlopeTest(method=self.method, hypothesis=hypothesis or label,
                         exponent=b0, estimate=self.slope, statistic=t, df=df,
                         p_value=p, statistic_type=kind, p_method=how, note=note)

    def to_frame(self):
        """One tidy row with the column names of ``fits.csv``."""
        import pandas as pd
        return pd.DataFrame([self.to_record()])

    def to_record(self) -> dict:
        """The fit's columns of ``fits.csv`` (:func:`scaling.stats.fit_rows.fit_values`)."""
        return fit_values(self)

    def plot(self, *, ax=None, **style):
        """Draw the points (when kept), the line and its confidence band on log axes
        labelled in natural units; returns the matplotlib Axes.

        See :func:`scaling.render.plots.plot_fit` for the options (``x=``,
        ``y=`` to draw points a fit from moments does not keep).
        """
        from ..render.plots import plot_fit
        return plot_fit(self, ax=ax, **style)

    def __reduce_ex__(self, protocol):
        # Thousands of fits travel to the figure process in a run of many groups: a fit
        # whose numbers are Python floats and whose moments numpy floats goes as one
        # bytes object of them (exact) with its other fields; any other as a dataclass.
        floats = _FLOATS(self)
        mom = self.moments
        if (type(mom) is Moments and type(self.slope_ci) is ConfidenceInterval
                and type(self.intercept_ci) is ConfidenceInterval
                and set(map(type, floats)) == {float}):
            values = _MOMENT_VALUES(mom)
            if values[6] is None and values[7] is None and values[8] is None:
                values = values[:6]
            if set(map(type, values)) == {np.float64}:
                return (_unpacked_line_fit, (np.array(floats + values).tobytes(),
                                             _OTHERS(self)))
        return object.__reduce_ex__(self, protocol)

    def summary(self) -> str:
        """A few lines of text describing the fit."""
        from ..render.summaries import line_fit_summary
        return line_fit_summary(self)

    def __repr__(self) -> str:
        fields = {"method": self.method, "n": self.n, "slope": self.slope,
                  "slope_ci": (float(self.slope_ci.low), float(self.slope_ci.high)),
                  "intercept": self.intercept, "r2": self.r2,
                  "log_base": base_label(self.log_base), "confidence": self.confidence}
        if self.lam is not None:
            fields["lam"] = self.lam
        if self.note:
            fields["note"] = self.note
        return short_repr(self, fields)

    def _repr_html_(self) -> str:
        return frame_html(self.to_frame(), title=f"{method_label(self.method)} line",
                          notes=[self.summary()])

    # predict and inverse_predict are late-bound delegations to scaling.stats.predictions,
    # which registers them with register_delegate when imported (``import
    # scaling`` does); lines sits below predict and does not import it.

    def predict(self, x, *, correction="smearing", interval="prediction",
                confidence=None, residuals=None):
        """Predictions of y at ``x`` in natural units, as a DataFrame.

        Parameters
        ----------
        x : float or array_like
            Positive x in natural units (logs when ``log_base`` is None).
        correction : {"smearing", "parametric", "ratio", "none"}
            Back-transformation correction.  A fit made by
            :func:`scaling.fit_line` carries its smearing and ratio factors,
            so the default works on a fresh fit; a fit made from moments
            alone needs ``residuals`` for smearing (or use ``"parametric"``).
        interval : {"prediction", "confidence"}
        confidence : float, optional
            Defaults to the fit's level.
        residuals : array_like, optional
            Log-scale residuals of the fitting data (override the carried
            smearing factor).

        Returns
        -------
        DataFrame
            ``x, y, y_low, y_high, interval, correction, extrapolated, method``.

        Notes
        -----
        See :func:`scaling.stats.predictions.predict` (smearing: Duan 1983, *JASA*
        78:605; intervals and how the correction meets the bounds are in
        :mod:`scaling.stats.predictions`).

        Examples
        --------
        >>> import scaling
        >>> fit = scaling.fit_line([1, 2, 4, 8, 16], [3.1, 11.8, 49, 190, 770], method="ols")
        >>> table = fit.predict([3, 10])
        >>> table[["x", "extrapolated"]].values.tolist()
        [[3.0, False], [10.0, False]]
        >>> bool(table["y_low"].lt(table["y"]).all())
        True
        """
        return _predict(self, x, correction=correction, interval=interval,
                        confidence=confidence, residuals=residuals).to_frame()

    def inverse_predict(self, y, *, interval="prediction", confidence=None):
        """Estimates of x from observed ``y`` (e.g. body mass from a bone size), as a DataFrame.

        Parameters
        ----------
        y : float or array_like
            Positive observed y in natural units (logs when ``log_base`` is None).
        interval : {"prediction", "confidence"}
            For the x of the individual whose y was observed, or for the x at
            which the line equals y.
        confidence : float, optional
            Defaults to the fit's level.

        Returns
        -------
        DataFrame
            ``y, x, x_low, x_high, interval, correction, extrapolated, method``
            (``x_low``/``x_high`` NaN where the interval is unbounded).

        Notes
        -----
        See :func:`scaling.stats.predictions.inverse_predict`: OLS uses the Fieller-type
        calibration interval (Draper & Smith 1998, sec. 3.2); symmetric lines
        swap the roles of x and y.

        Examples
        --------
        >>> import scaling
        >>> fit = scaling.fit_line([1, 2, 4, 8, 16], [3.1, 11.8, 49, 190, 770], method="sma")
        >>> table = fit.inverse_predict(100)
        >>> bool(table["x_low"][0] < table["x"][0] < table["x_high"][0])
        True
        """
        return _inverse_predict(self, y, interval=interval, confidence=confidence).to_frame()


# --------------------------------------------------------------------------
# a LineFit to and from plain JSON types (saved with a run; scaling predict)

#: Format tag of :func:`fit_to_dict` dictionaries.
DICT_FORMAT = "scaling.linefit/1"


def _json_float(v):
    v = float(v)
    return v if math.isfinite(v) else None


def _json_clean(obj):
    if isinstance(obj, dict):
        return {k: _json_clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_json_clean(v) for v in obj]
    if isinstance(obj, (float, np.floating)):
        return _json_float(obj)
    return obj


def _float(v) -> float:
    return math.nan if v is None else float(v)


def fit_to_dict(fit: LineFit, *, smearing_factor: float | None = None,
                ratio_factor: float | None = None) -> dict:
    """Everything needed to predict later without the data, as JSON-ready types.

    Parameters
    ----------
    fit : LineFit
    smearing_factor, ratio_factor : float, optional
        Correction factors computed on the fitting data (see
        :func:`data_factors`); stored so that ``smearing`` and ``ratio``
        predictions work from the dictionary alone.  Default: the factors
        the fit carries (set by :func:`scaling.fit_line`), if any.

    Returns
    -------
    dict
        Plain str, int, float, list and None (NaN is written as None).
    """
    if smearing_factor is None:
        smearing_factor = fit.smearing_factor
    if ratio_factor is None:
        ratio_factor = fit.ratio_factor
    for name, value in (("smearing_factor", smearing_factor), ("ratio_factor", ratio_factor)):
        if value is not None and not (isinstance(value, (int, float, np.floating))
                                      and not isinstance(value, bool)):
            raise ConfigError(f"{name} must be a number or None, not {value!r}")
    d = {
        "format": DICT_FORMAT,
        "method": fit.method, "n": int(fit.n),
        "slope": fit.slope, "slope_ci": [fit.slope_ci.low, fit.slope_ci.high],
        "slope_se": fit.slope_se,
        "intercept": fit.intercept,
        "intercept_ci": [fit.intercept_ci.low, fit.intercept_ci.high],
        "intercept_se": fit.intercept_se,
        "r": fit.r, "r2": fit.r2, "resid_sd": fit.resid_sd, "df": fit.df,
        "log_base": base_label(fit.log_base), "confidence": fit.confidence,
        "moments": fit.moments.to_dict(),
        "x_range": None if fit.x_range is None else [float(v) for v in fit.x_range],
        "y_range": None if fit.y_range is None else [float(v) for v in fit.y_range],
        "note": fit.note, "lam": fit.lam, "interval_method": fit.interval_method,
        "smearing_factor": smearing_factor, "ratio_factor": ratio_factor,
    }
    if np.isfinite(fit.slope_gap_low) and np.isfinite(fit.slope_gap_high):
        d["slope_gap"] = [fit.slope_gap_low, fit.slope_gap_high]
    return _json_clean(d)


_REQUIRED = ("method", "n", "slope", "slope_ci", "slope_se", "intercept", "intercept_ci",
             "intercept_se", "r", "r2", "resid_sd", "df", "log_base", "confidence", "moments")


def fit_from_dict(d: dict) -> LineFit:
    """Rebuild the :class:`LineFit` written by :func:`fit_to_dict`.

    Raises
    ------
    DataError
        If a key is missing or the format is not recognised.
    """
    if not isinstance(d, dict):
        raise DataError(f"a saved fit must be a dict, not {type(d).__name__}")
    if d.get("format", DICT_FORMAT) != DICT_FORMAT:
        raise DataError(f"saved fit has format {d.get('format')!r}; expected {DICT_FORMAT!r}")
    missing = [k for k in _REQUIRED if k not in d]
    if missing:
        raise DataError(f"saved fit lacks key(s): {', '.join(missing)}")
    if d["method"] not in METHOD_INFO:
        raise DataError(f"saved fit has unknown method {d['method']!r}")
    try:
        base = parse_log_base(d["log_base"])
    except (ValueError, ConfigError) as exc:
        raise DataError(f"saved fit: {exc}") from None
    mom = {k: (np.nan if v is None else v) for k, v in d["moments"].items()}
    rng = lambda v: None if v is None else (float(v[0]), float(v[1]))  # noqa: E731
    gap = d.get("slope_gap") or (None, None)
    return LineFit(
        method=d["method"], n=int(d["n"]), slope=_float(d["slope"]),
        slope_ci=ConfidenceInterval(_float(d["slope_ci"][0]), _float(d["slope_ci"][1])),
        slope_se=_float(d["slope_se"]), intercept=_float(d["intercept"]),
        intercept_ci=ConfidenceInterval(_float(d["intercept_ci"][0]),
                                        _float(d["intercept_ci"][1])),
        intercept_se=_float(d["intercept_se"]), r=_float(d["r"]), r2=_float(d["r2"]),
        resid_sd=_float(d["resid_sd"]), df=_float(d["df"]), log_base=base,
        confidence=float(d["confidence"]), moments=Moments.from_dict(mom),
        x_range=rng(d.get("x_range")), y_range=rng(d.get("y_range")),
        note=str(d.get("note", "")), lam=d.get("lam"),
        interval_method=str(d.get("interval_method", "analytic")),
        smearing_factor=d.get("smearing_factor"), ratio_factor=d.get("ratio_factor"),
        slope_gap_low=_gap_value(gap[0]), slope_gap_high=_gap_value(gap[1]),
    )



def line_fit_from_moments(m: Moments, method: str, *, confidence: float = 0.95,
                          log_base: float | None = 10.0, x_range=None,
                          y_range=None) -> LineFit:
    """Package the fit of one set of (0-d) moments as a :class:`LineFit`."""
    res = fit_moments(m, method, confidence=confidence)
    return line_fit_from_result(res, None, m, method, confidence=confidence,
                                log_base=log_base, x_range=x_range, y_range=y_range)


def line_fit_from_result(res: dict, i, m: Moments, method: str, *, confidence: float,
                         log_base: float | None, x_range=None, y_range=None,
                         lam: float | None = None) -> LineFit:
    """The :class:`LineFit` of entry ``i`` of a vectorised :func:`fit_moments` result.

    ``i`` None reads 0-d results; ``m`` are that entry's moments.  Lets a run
    fit every group in one pass and package each fit without computing it again.
    """
    def pick(v):
        if isinstance(v, np.ndarray):
            return v.item() if i is None else v[i]
        return v
    f = {k: pick(v) for k, v in res.items()}
    note = f["note"]
    if isinstance(note, np.ndarray):
        note = str(note.reshape(-1)[0])
    return LineFit(
        method=method, n=int(np.asarray(m.n).item()),
        slope=float(f["slope"]),
        slope_ci=ConfidenceInterval(float(f["slope_low"]), float(f["slope_high"])),
        slope_se=float(f["slope_se"]),
        intercept=float(f["intercept"]),
        intercept_ci=ConfidenceInterval(float(f["intercept_low"]), float(f["intercept_high"])),
        intercept_se=float(f["intercept_se"]),
        r=float(f["r"]), r2=float(f["r2"]), resid_sd=float(f["resid_sd"]),
        df=float(f["df"]), log_base=log_base, confidence=confidence, moments=m,
        x_range=x_range, y_range=y_range, note=str(note), lam=lam,
        slope_gap_low=_gap_value(f.get("slope_gap_low")),
        slope_gap_high=_gap_value(f.get("slope_gap_high")),
    )


def line_fits_from_result(res: dict, m: Moments, method: str, *, confidence: float,
                          log_base: float | None, x_ranges=None, y_ranges=None,
                          lam: float | None = None, keep=None) -> list:
    """The :class:`LineFit` of every entry of a vectorised :func:`fit_moments` result.

    The same fits as ``line_fit_from_result(res, i, m[i], ...)`` for each ``i``,
    with each column read out of its array once rather than once per fit.

    Parameters
    ----------
    res : dict
        A vectorised result (1-d arrays) of :func:`~scaling.stats.lines.fit_moments`
        or :func:`~scaling.stats.robust.deming_moments`.
    m : Moments
        The moments ``res`` was fitted to (1-d arrays).
    x_ranges, y_ranges : sequence of (low, high), optional
        Each entry's fitted ranges.
    keep : array_like of bool, optional
        Package only these entries (default: all).

    Returns
    -------
    list
        A LineFit for each kept entry, None for the others.
    """
    size = np.size(m.n)
    keep = np.ones(size, dtype=bool) if keep is None else np.asarray(keep, dtype=bool)
    cols = {k: np.asarray(res[k], dtype=float).reshape(-1).tolist() for k in
            ("slope", "slope_low", "slope_high", "slope_se", "intercept", "intercept_low",
             "intercept_high", "intercept_se", "r", "r2", "resid_sd", "df")}
    gaps = [_gap_column(np.broadcast_to(np.asarray(res.get(k, math.nan), dtype=float),
                                        (size,)))
            for k in ("slope_gap_low", "slope_gap_high")]
    notes = list(map(str, np.asarray(res["note"], dtype=object).reshape(-1)))
    # Iterating an array gives numpy scalars, as indexing it one entry at a time does.
    names = _MOMENT_KEYS + (HIGHER_KEYS if m.has_higher else ())
    parts = zip(*(list(getattr(m, k)) for k in names))
    keep = keep.tolist()
    out = []
    for i in range(size):
        mi = next(parts)
        if not keep[i]:
            out.append(None)
            continue
        mi = (Moments(n=mi[0], mean_x=mi[1], mean_y=mi[2], sxx=mi[3], syy=mi[4], sxy=mi[5])
              if len(mi) == 6 else
              Moments(n=mi[0], mean_x=mi[1], mean_y=mi[2], sxx=mi[3], syy=mi[4], sxy=mi[5],
                      sxxx=mi[6], sxxxx=mi[7], sxxy=mi[8]))
        out.append(LineFit(
            method=method, n=int(mi.n),
            slope=cols["slope"][i],
            slope_ci=ConfidenceInterval(cols["slope_low"][i], cols["slope_high"][i]),
            slope_se=cols["slope_se"][i],
            intercept=cols["intercept"][i],
            intercept_ci=ConfidenceInterval(cols["intercept_low"][i], cols["intercept_high"][i]),
            intercept_se=cols["intercept_se"][i],
            r=cols["r"][i], r2=cols["r2"][i], resid_sd=cols["resid_sd"][i],
            df=cols["df"][i], log_base=log_base, confidence=confidence, moments=mi,
            x_range=None if x_ranges is None else x_ranges[i],
            y_range=None if y_ranges is None else y_ranges[i],
            note=notes[i], lam=lam, slope_gap_low=gaps[0][i], slope_gap_high=gaps[1][i],
        ))
    return out


def _gap_column(values: np.ndarray) -> list:
    """:func:`_gap_value` of each entry of a float array, in one array pass."""
    out = values.tolist()
    for i in np.flatnonzero(~np.isfinite(values)).tolist():
        out[i] = math.nan
    return out


#: The moments every fit carries (the higher sums come after them when carried).
_MOMENT_KEYS = ("n", "mean_x", "mean_y", "sxx", "syy", "sxy")


def slope_tests_for(fits, exponent, *, hypothesis: str = "") -> list:
    """Test the slope of many fits against one exponent: ``[f.test_slope(exponent) ...]``.

    The fits of a moment method (OLS, SMA, MA) are tested together, one
    vectorised :func:`~scaling.stats.lines.slope_test_statistic` (one call of
    the t distribution) per method; any other fit (Deming, robust lines, a
    fit that is not estimable, an object that is not a :class:`LineFit`) by
    its own ``test_slope``.

    Parameters
    ----------
    fits : sequence
        Fits with a ``test_slope`` method.
    exponent : float or str
        The hypothesised slope b0 (a number or a fraction such as ``"3/4"``).
    hypothesis : str
        Name given to the exponent (default: the exponent as written).

    Returns
    -------
    list of SlopeTest
        In the order of ``fits``, equal to each fit's own ``test_slope``.
    """
    fits = list(fits)
    b0 = exponent_value(exponent)
    label = hypothesis or (exponent.strip() if isinstance(exponent, str) else f"{b0:g}")
    out: list = [None] * len(fits)
    by_method: dict = {}
    for i, fit in enumerate(fits):
        if type(fit) is LineFit and fit.method in METHODS and fit.estimable:
            by_method.setdefault(fit.method, []).append(i)
    for method, idx in by_method.items():
        stacked = Moments(**{k: np.array([getattr(fits[i].moments, k) for i in idx],
                                         dtype=float)
                             for k in ("n", "mean_x", "mean_y", "sxx", "syy", "sxy")})
        t, df, p = (np.asarray(v, dtype=float).tolist() for v in np.broadcast_arrays(
            *slope_test_statistic(stacked, method, b0)))
        exact = exact_fit(stacked).tolist()
        # On the minor-axis side the MA statistic squares with ``**``, which numpy
        # computes with pow() for a scalar (a fit's own moments) and by multiplying
        # for an array; the two can differ in the last digit, so those fits take
        # their own test.
        own = (ma_minor_side(stacked, b0).tolist() if method == "ma"
               else [False] * len(idx))
        for j, i in enumerate(idx):
            if own[j]:
                continue
            out[i] = SlopeTest(method=method, hypothesis=label, exponent=b0,
                               estimate=fits[i].slope, statistic=t[j], df=df[j], p_value=p[j],
                               statistic_type="t", p_method="t",
                               note=EXACT_NOTE if exact[j] else "")
    for i, fit in enumerate(fits):
        if out[i] is None:
            out[i] = fit.test_slope(exponent, hypothesis=hypothesis)
    return out


#: What :meth:`LineFit.__reduce_ex__` packs as floats, and the rest it sends as is.
_FLOATS = operator.attrgetter("slope", "slope_ci.low", "slope_ci.high", "slope_se",
                              "intercept", "intercept_ci.low", "intercept_ci.high",
                              "intercept_se", "r", "r2", "resid_sd", "df", "confidence",
                              "slope_gap_low", "slope_gap_high")
_OTHERS = operator.attrgetter("method", "n", "log_base", "x_range", "y_range", "note", "lam",
                              "interval_method", "slope_replicates", "log_data",
                              "smearing_factor", "ratio_factor")
_MOMENT_VALUES = operator.attrgetter(*_MOMENT_KEYS, *HIGHER_KEYS)


def _unpacked_line_fit(packed: bytes, others: tuple) -> LineFit:
    """The fit packed by :meth:`LineFit.__reduce_ex__`."""
    values = np.frombuffer(packed, dtype=np.float64)
    (slope, slope_low, slope_high, slope_se, intercept, intercept_low, intercept_high,
     intercept_se, r, r2, resid_sd, df, confidence, gap_low,
     gap_high) = values[:15].tolist()
    mom = values[15:]          # iterating gives numpy scalars, as the fit held
    if mom.size == 6:
        n, mean_x, mean_y, sxx, syy, sxy = mom
        moments = Moments(n=n, mean_x=mean_x, mean_y=mean_y, sxx=sxx, syy=syy, sxy=sxy)
    else:
        n, mean_x, mean_y, sxx, syy, sxy, sxxx, sxxxx, sxxy = mom
        moments = Moments(n=n, mean_x=mean_x, mean_y=mean_y, sxx=sxx, syy=syy, sxy=sxy,
                          sxxx=sxxx, sxxxx=sxxxx, sxxy=sxxy)
    (method, n, log_base, x_range, y_range, note, lam, interval_method, replicates,
     log_data, smearing_factor, ratio_factor) = others
    return LineFit(
        method=method, n=n, slope=slope, slope_ci=ConfidenceInterval(slope_low, slope_high),
        slope_se=slope_se, intercept=intercept,
        intercept_ci=ConfidenceInterval(intercept_low, intercept_high),
        intercept_se=intercept_se, r=r, r2=r2, resid_sd=resid_sd, df=df, log_base=log_base,
        confidence=confidence, moments=moments, x_range=x_range, y_range=y_range, note=note,
        lam=lam, interval_method=interval_method,
        slope_gap_low=gap_low if gap_low == gap_low else math.nan,   # NaN: the one nan
        slope_gap_high=gap_high if gap_high == gap_high else math.nan,
        slope_replicates=replicates, log_data=log_data, smearing_factor=smearing_factor,
        ratio_factor=ratio_factor)


def _gap_value(v) -> float:
    """A slope-gap end as a float; the one ``math.nan`` when there is none (so
    records of fits without a gap compare equal)."""
    v = math.nan if v is None else float(v)
    return v if math.isfinite(v) else math.nan


def fit_line(x, y, *, method: str = "sma", confidence: float = 0.95,
             log_base=10) -> LineFit:
    """Fit y = a x^b as a straight line on log-log scales (the moment methods).

    The public :func:`scaling.fit_line` (in :mod:`scaling.api`) takes every
    configured method and returns a fit carrying its correction factors;
    this one fits OLS, SMA and MA from moments and carries none.

    Parameters
    ----------
    x, y : array_like
        Positive values in natural units (or logs when ``log_base`` is None).
    method : {"ols", "sma", "ma"}
        OLS of log y on log x (to predict y), standardised major axis or
        major axis (to describe the symmetric relationship).
    confidence : float
        Level of the slope and intercept intervals.
    log_base : {10, "e", 2, None}
        Base of the logarithms; None means x and y are already logs.

    Returns
    -------
    LineFit

    Notes
    -----
    Formulas and sources are in the module docstring of :mod:`scaling.stats.lines`.
    A sample with n < 3, or with no variation in x or y, returns a fit whose
    estimates are NaN and whose ``note`` says why, with a
    :class:`~scaling.errors.DegenerateDataWarning`.

    Examples
    --------
    >>> import scaling
    >>> fit = scaling.fit_line([1, 2, 4, 8], [1, 4.1, 15.8, 64.5], method="ols")
    >>> round(fit.slope, 2)
    2.0
    """
    spec = get_method(method)
    base = parse_log_base(log_base)
    confidence = check_confidence(confidence)
    x, y = validate_xy(x, y, base)
    X, Y = to_log(x, base), to_log(y, base)
    m = _moments(X, Y)
    x_range = (float(x.min()), float(x.max())) if x.size else None
    y_range = (float(y.min()), float(y.max())) if y.size else None
    fit = line_fit_from_moments(m, spec.name, confidence=confidence, log_base=base,
                                x_range=x_range, y_range=y_range)
    if fit.note:
        warnings.warn(fit.note, DegenerateDataWarning, stacklevel=2)
    return fit
