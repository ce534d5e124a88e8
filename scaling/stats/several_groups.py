"""Groups with several predictors: each group's fit, shared exponents, shared elevations.

With groups g = 1..G and predictors X_1..X_k (logs), three nested OLS
models on the log scale (the analysis of covariance with several
covariates; e.g. Draper & Smith 1998, *Applied Regression Analysis*, 3rd
ed., ch. 14, from memory):

    separate  Y = a_g + sum_j b_gj X_j      (group x term interactions), G(k+1) parameters
    parallel  Y = a_g + sum_j b_j  X_j      (common exponents),          G + k
    pooled    Y = a   + sum_j b_j  X_j      (one line),                  1 + k

Do the groups share the exponents?  The extra-sum-of-squares F test of
parallel against separate, ((SSR_par - SSR_sep) / ((G-1)k)) /
(SSR_sep / (n - G(k+1))).  Do they share the elevation, given common
exponents?  Pooled against parallel, ((SSR_pool - SSR_par) / (G-1)) /
(SSR_par / (n - G - k)).  Both equal statsmodels' ``compare_f_test`` of the
nested OLS fits (checked in the tests).  The common exponents are those of
the parallel model, with se from s^2_par (D'D)^-1 and t intervals and tests
on n - G - k df.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Mapping

import numpy as np
from . import tails

from ..errors import ConfigError, DataError
from .schema import check_confidence
from .line_results import ConfidenceInterval
from .predictions import correction_factor
from .several_predictors import MultiFit, TermTest, _as_matrix, _check_base, fit_multi
from .multi_predictions import (MultiPrediction, TotalPrediction, _check_positive, _design,
                                _factor, _flags, _frozen, combine_total_pieces, predict_multi,
                                total_piece)
from .schema import DEFAULT_SEED

__all__ = ["MultiGroupComparison", "compare_groups_multi", "nested_f", "predict_groups",
           "predict_total_groups", "GROUP_MODELS"]

#: The models a grouped prediction can come from: each group's own fit, or the
#: common exponents with each group's elevation.
GROUP_MODELS = ("group", "common")


def _ssr(design: np.ndarray, y: np.ndarray) -> tuple:
    beta, *_ = np.linalg.lstsq(design, y, rcond=None)
    resid = y - design @ beta
    return float(resid @ resid), beta


def nested_f(ssr_small: float, df_small: float, ssr_big: float, df_big: float) -> tuple:
    """(F, df_num, df_den, p) of a restricted model (small) against a larger one (big).

    ``df_*`` are residual degrees of freedom.
    """
    df_num = df_small - df_big
    if df_num <= 0 or df_big <= 0 or ssr_big <= 0:
        return math.nan, float(df_num), float(df_big), math.nan
    f = ((ssr_small - ssr_big) / df_num) / (ssr_big / df_big)
    return float(f), float(df_num), float(df_big), float(tails.f_upper(f, df_num, df_big))


@dataclass(frozen=True, slots=True, kw_only=True)
class MultiGroupComparison:
    """Each group's fit with several predictors and the tests across groups.

    Attributes
    ----------
    names : tuple of str
        The predictors.
    groups : tuple of str
        Groups compared (those with at least k + 2 rows).
    skipped : tuple of str
        Groups with too few rows for their own fit (still in the tests when
        they have rows: they add elevations).
    group_fits : dict
        group -> MultiFit.
    n : int
    slopes, slope_se, slope_low, slope_high : ndarray, shape (k,)
        The common within-group exponents (parallel model).
    df : float
        Residual df of the parallel model, n - G - k.
    elevations : dict
        group -> intercept (log scale) of the parallel model.
    slopes_equal, intercepts_equal : tuple
        (F, df_num, df_den, p) of the two nested tests.
    resid_sd : float
        Residual SD of the parallel model.
    log_base : float
    confidence : float
    common_fits : dict
        group -> MultiFit of the parallel model seen from that group: its
        elevation as intercept, the common exponents, and the covariance of
        (elevation, exponents) taken from the parallel model's (so its
        ``predict`` equals the parallel model's prediction for that group).
    labels : tuple of str
        Every group in the parallel model's order (skipped ones too).
    common_beta, common_xtx_inv, common_residuals : ndarray
        The parallel model's coefficients (one elevation per label, then the
        exponents), (D'D)^-1 and residuals, for totals over several groups.
    """

    names: tuple
    groups: tuple
    skipped: tuple
    group_fits: dict = field(repr=False)
    n: int
    slopes: np.ndarray
    slope_se: np.ndarray
    slope_low: np.ndarray
    slope_high: np.ndarray
    df: float
    elevations: dict = field(repr=False)
    slopes_equal: tuple
    intercepts_equal: tuple
    resid_sd: float
    log_base: float
    confidence: float
    common_fits: dict = field(repr=False, default_factory=dict)
    labels: tuple = ()
    common_beta: np.ndarray = field(repr=False, default=None)
    common_xtx_inv: np.ndarray = field(repr=False, default=None)
    common_residuals: np.ndarray = field(repr=False, default=None)

    def leading(self, alpha: float) -> str:
        """The model an Answer leads with: ``"group"`` (each group's own exponents) when
        the group x term interactions are significant at ``alpha``, else ``"common"``."""
        p = self.slopes_equal[3]
        return "group" if np.isfinite(p) and p <= alpha else "common"

    def test_exponents(self, hypothesis: Mapping[str, float], *, label: str = "") -> tuple:
        """t tests of the common exponents against ``{term: value}`` (n - G - k df)."""
        out = []
        for term, value in hypothesis.items():
            j = self.names.index(term)
            t = (float(self.slopes[j]) - float(value)) / float(self.slope_se[j])
            out.append(TermTest(term=term, hypothesis=label or f"{value:g}", estimate=float(self.slopes[j]),
                                exponent=float(value), se=float(self.slope_se[j]),
                                statistic=t, df=self.df,
                                p_value=float(2 * tails.t_upper(abs(t), self.df))))
        return tuple(out)

    def to_frame(self):
        """Rows as in fits.csv: each group's terms (scope ``group``), then the common
        exponents (scope ``common``)."""
        import pandas as pd
        frames = []
        for g in self.groups:
            f = self.group_fits[g].to_frame()
            f["scope"], f["group"] = "group", g
            frames.append(f)
        rows = []
        for j, name in enumerate(self.names):
            rows.append({"scope": "common", "group": "", "method": "ols", "term": name,
                         "n": self.n, "slope": float(self.slopes[j]),
                         "slope_low": float(self.slope_low[j]),
                         "slope_high": float(self.slope_high[j]),
                         "slope_se": float(self.slope_se[j]), "intercept": math.nan,
                         "intercept_low": math.nan, "intercept_high": math.nan, "r": math.nan,
                         "r2": math.nan, "adj_r2": math.nan, "resid_sd": self.resid_sd,
                         "confidence": self.confidence,
                         "note": f"common within-group exponent of {len(self.groups)} groups"})
        frames.append(pd.DataFrame(rows))
        return pd.concat(frames, ignore_index=True)

    def tests_frame(self):
        """group_tests rows: slopes_equal (group x term interactions) and intercepts_equal."""
        import pandas as pd
        rows = []
        for test, (f, d1, d2, p) in (("slopes_equal", self.slopes_equal),
                                     ("intercepts_equal", self.intercepts_equal)):
            rows.append({"method": "ols", "test": test, "statistic": f, "df": d1,
                         "df_resid": d2, "p_value": p, "p_method": "F",
                         "common_slope": math.nan, "common_slope_low": math.nan,
                         "common_slope_high": math.nan})
        return pd.DataFrame(rows)


def compare_groups_multi(x, y, groups, *, names=None, confidence: float = 0.95,
                         log_base=10) -> MultiGroupComparison:
    """Fit y = a_g prod_j x_j^b_gj in each group and test shared exponents and elevations.

    Parameters
    ----------
    x : mapping of name -> values, DataFrame, or array (n, k)
        Positive predictors in natural units.
    y : array_like (n,)
        Positive responses.
    groups : array_like (n,)
        Group labels.
    names : sequence of str, optional
    confidence : float
    log_base : {10, "e", 2}

    Returns
    -------
    MultiGroupComparison

    Raises
    ------
    DataError
        Fewer than two groups, or too few rows for the separate model.

    Notes
    -----
    See the module docstring for the three models and the F tests.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(3)
    >>> d, h = 10 ** rng.uniform(1, 2, 90), 10 ** rng.uniform(.5, 1.5, 90)
    >>> g = np.repeat(["a", "b", "c"], 30)
    >>> m = np.where(g == "a", .05, .08) * d**2 * h * 10 ** rng.normal(0, .05, 90)
    >>> cmp = compare_groups_multi({"d": d, "h": h}, m, g)
    >>> cmp.groups, bool(cmp.intercepts_equal[3] < 0.05)
    (('a', 'b', 'c'), True)
    """
    confidence = check_confidence(confidence)
    base = _check_base(log_base)
    mat, names = _as_matrix(x, names)
    yv = np.asarray(y, dtype=float)
    gv = np.asarray(groups).astype(str)
    if yv.shape != (mat.shape[0],) or gv.shape != (mat.shape[0],):
        raise DataError(f"x, y and groups must have the same length ({mat.shape[0]} rows)")
    _check_positive(mat, names, "predictor")
    _check_positive(yv[:, None], ("y",), "response")
    n, k = mat.shape
    labels, codes = np.unique(gv, return_inverse=True)
    G = len(labels)
    if G < 2:
        raise DataError("comparing groups needs at least two groups")
    ln_b = math.log(base)
    lx, ly = np.log(mat) / ln_b, np.log(yv) / ln_b
    dummies = (codes[:, None] == np.arange(G)[None, :]).astype(float)
    pooled = np.column_stack([np.ones(n), lx])
    parallel = np.column_stack([dummies, lx])
    separate = np.column_stack([dummies] + [dummies * lx[:, [j]] for j in range(k)])
    df_sep, df_par, df_pool = n - G * (k + 1), n - G - k, n - k - 1
    if df_sep < 1:
        raise DataError(f"{G} groups with {k} predictors need more than {G * (k + 1)} rows "
                        f"for each group's own exponents, got {n}")
    for design, what in ((parallel, "common exponents"), (separate, "each group's exponents")):
        if np.linalg.matrix_rank(design) < design.shape[1]:
            raise DataError(f"the logs of the predictors are collinear within a group; "
                            f"{what} cannot be separated")
    ssr_sep, _ = _ssr(separate, ly)
    ssr_par, beta = _ssr(parallel, ly)
    ssr_pool, _ = _ssr(pooled, ly)
    s2 = ssr_par / df_par
    cov = s2 * np.linalg.inv(parallel.T @ parallel)
    se = np.sqrt(np.diag(cov))[G:]
    b = beta[G:]
    tcrit = tails.t_quantile(0.5 + confidence / 2, df_par)
    common = _common_fits(parallel, ly, beta, s2, df_par, mat, yv, labels, names,
                          base=base, confidence=confidence, tcrit=tcrit)
    fits, skipped = {}, []
    for i, g in enumerate(labels):
        sel = codes == i
        if sel.sum() < k + 2:
            skipped.append(str(g))
            continue
        fits[str(g)] = fit_multi(mat[sel], yv[sel], names=names, confidence=confidence,
                                 log_base=base)
    return MultiGroupComparison(
        names=names, groups=tuple(fits), skipped=tuple(skipped), group_fits=fits, n=n,
        slopes=b.copy(), slope_se=se, slope_low=b - tcrit * se, slope_high=b + tcrit * se,
        df=float(df_par), elevations={str(g): float(beta[i]) for i, g in enumerate(labels)},
        slopes_equal=nested_f(ssr_par, df_par, ssr_sep, df_sep),
        intercepts_equal=nested_f(ssr_pool, df_pool, ssr_par, df_par),
        resid_sd=math.sqrt(s2), log_base=base, confidence=confidence,
        common_fits=common, labels=tuple(str(g) for g in labels), common_beta=_frozen(beta),
        common_xtx_inv=_frozen(np.linalg.inv(parallel.T @ parallel)),
        common_residuals=_frozen(ly - parallel @ beta))


def _common_fits(parallel, ly, beta, s2, df, mat, yv, labels, names, *, base, confidence,
                 tcrit) -> dict:
    """group -> MultiFit of the parallel model with that group's elevation (see the class)."""
    G, k = len(labels), mat.shape[1]
    xtx_inv = np.linalg.inv(parallel.T @ parallel)
    resid = ly - parallel @ beta
    lev = np.einsum("np,pq,nq->n", parallel, xtx_inv, parallel)
    sd = math.sqrt(s2)
    y_hat = base ** (parallel @ beta)
    factors = {
        "none": 1.0,
        "smearing": correction_factor("smearing", resid_sd=sd, log_base=base, residuals=resid),
        "parametric": correction_factor("parametric", resid_sd=sd, log_base=base),
        "ratio": correction_factor("ratio", resid_sd=sd, log_base=base, y=yv, y_hat=y_hat),
    }
    syy = float(np.sum((ly - ly.mean()) ** 2))
    r2 = 1 - float(resid @ resid) / syy if syy > 0 else math.nan
    n = len(ly)
    lx = parallel[:, G:]
    out = {}
    for i, g in enumerate(labels):
        idx = np.r_[i, G:G + k]
        sub = xtx_inv[np.ix_(idx, idx)]
        se = np.sqrt(s2 * np.diag(sub))
        b = beta[G:]
        sel = parallel[:, i] == 1
        out[str(g)] = MultiFit(
            names=names, n=n, slopes=_frozen(b), slope_se=_frozen(se[1:]),
            slope_low=_frozen(b - tcrit * se[1:]), slope_high=_frozen(b + tcrit * se[1:]),
            intercept=float(beta[i]), intercept_se=float(se[0]),
            intercept_ci=ConfidenceInterval(float(beta[i] - tcrit * se[0]),
                                            float(beta[i] + tcrit * se[0])),
            cov=_frozen(s2 * sub), resid_sd=sd, df=float(df), r2=float(r2),
            adj_r2=float(1 - (1 - r2) * (n - 1) / df), log_base=base, confidence=confidence,
            x_ranges=tuple((float(c.min()), float(c.max())) for c in mat.T),
            y_range=(float(yv.min()), float(yv.max())), max_leverage=float(lev.max()),
            residuals=_frozen(resid), factors={k_: float(v) for k_, v in factors.items()},
            xtx_inv=_frozen(sub), log_x=_frozen(lx[sel]), log_y=_frozen(ly[sel]))
    return out


def _group_rows(comparison, x_new, groups_new, model: str) -> tuple:
    """(labels of the new rows as str, the fit each group predicts from)."""
    if model not in GROUP_MODELS:
        raise ValueError(f"model must be one of {', '.join(GROUP_MODELS)}, not {model!r}")
    gv = np.atleast_1d(np.asarray(groups_new)).astype(str)
    source = comparison.group_fits if model == "group" else comparison.common_fits
    unknown = [str(g) for g in dict.fromkeys(gv) if g not in source]
    if unknown:
        what = ("no exponents of its own (too few rows or not in the data)" if model == "group"
                else "no rows in the data")
        raise DataError(f"group {unknown[0]!r} of the new rows has {what}; groups with a "
                        f"fit: {', '.join(source)}")
    return gv, source


def predict_groups(comparison: MultiGroupComparison, x_new, groups_new, *,
                   model: str = "group", correction: str = "smearing",
                   interval: str = "prediction",
                   confidence: float | None = None) -> tuple:
    """Predict y for new rows, each from its group's line.

    Parameters
    ----------
    comparison : MultiGroupComparison
    x_new : mapping of name -> values or DataFrame
        Natural-unit predictor values of the new rows.
    groups_new : array_like
        The group of each new row.
    model : {"group", "common"}
        ``"group"``: each group's own fit (when the groups' exponents differ);
        ``"common"``: the common exponents with that group's elevation (the
        parallel model; when they share exponents but not the elevation).
    correction, interval, confidence
        As :meth:`MultiFit.predict`; the correction factor is that of the
        model predicting (each group's own residuals, or the parallel
        model's).

    Returns
    -------
    tuple of (MultiPrediction, ndarray of str)
        The predictions in the order of the new rows, and their groups.

    Raises
    ------
    DataError
        A new row's group has no fit (or no rows) in the data.
    """
    gv, source = _group_rows(comparison, x_new, groups_new, model)
    parts = {}
    for g in dict.fromkeys(gv):
        sel = np.flatnonzero(gv == g)
        rows = {n: np.atleast_1d(np.asarray(x_new[n], dtype=float))[sel]
                for n in comparison.names}
        parts[g] = (sel, predict_multi(source[g], rows, correction=correction,
                                       interval=interval, confidence=confidence))
    first = next(iter(parts.values()))[1]
    m = gv.size

    def gather(attr, shape=()):
        out = np.empty((m,) + shape, dtype=getattr(first, attr).dtype)
        for sel, p in parts.values():
            out[sel] = getattr(p, attr)
        return _frozen(out)

    k = len(comparison.names)
    pred = MultiPrediction(
        names=first.names, x=gather("x", (k,)), y=gather("y"), y_low=gather("y_low"),
        y_high=gather("y_high"), interval=first.interval, correction=first.correction,
        factor=math.nan if len(parts) > 1 else first.factor, confidence=first.confidence,
        extrapolated=gather("extrapolated", (k,)), outside_data=gather("outside_data"),
        leverage=gather("leverage"), log_fit=gather("log_fit"), log_se=gather("log_se"),
        log_low=gather("log_low"), log_high=gather("log_high"), log_base=first.log_base,
        df=first.df if model == "common" else math.nan)
    return pred, gv


def predict_total_groups(comparison: MultiGroupComparison, x_new, groups_new, *,
                         model: str = "group", correction: str = "smearing",
                         confidence: float | None = None,
                         seed: int | None = DEFAULT_SEED) -> TotalPrediction:
    """Total of the predictions of new rows, each from its group's line.

    ``model`` as :func:`predict_groups`.  With ``"group"`` the groups' fits
    come from disjoint data, so their totals, variances and simulated totals
    add; with ``"common"`` the groups share the exponents, and the total is
    simulated from the one parallel model (design rows: the group's
    indicator and the logs), keeping the covariance between groups.
    """
    if confidence is None:
        confidence = comparison.confidence
    if correction == "none":
        raise ConfigError("correction 'none' gives medians, whose sum is not an estimate "
                          "of a total; use smearing, parametric or ratio")
    gv, source = _group_rows(comparison, x_new, groups_new, model)
    rng = np.random.default_rng(seed)
    base = comparison.log_base
    pieces, n_ext, sds = [], 0, []
    if model == "common":
        ref = next(iter(source.values()))
        mat, d0 = _design(ref, {n: x_new[n] for n in comparison.names})
        for g in dict.fromkeys(gv):
            sel = gv == g
            out_range, outside, _ = _flags(source[g], mat[sel], d0[sel])
            n_ext += int((out_range.any(axis=1) | outside).sum())
        dummies = (gv[:, None] == np.array(comparison.labels)[None, :]).astype(float)
        design = np.column_stack([dummies, d0[:, 1:]])
        s2 = comparison.resid_sd ** 2
        pieces.append(total_piece(design, comparison.common_beta, s2, comparison.common_xtx_inv,
                                  residuals=comparison.common_residuals, df=comparison.df,
                                  base=base, correction=correction,
                                  factor=_factor(ref, correction), rng=rng))
        sds.append(comparison.resid_sd)
    else:
        for g in dict.fromkeys(gv):
            fit, sel = source[g], gv == g
            mat, d0 = _design(fit, {n: np.atleast_1d(np.asarray(x_new[n], dtype=float))[sel]
                                    for n in comparison.names})
            out_range, outside, _ = _flags(fit, mat, d0)
            n_ext += int((out_range.any(axis=1) | outside).sum())
            beta = np.concatenate([[fit.intercept], fit.slopes])
            pieces.append(total_piece(d0, beta, fit.resid_sd ** 2, fit.xtx_inv,
                                      residuals=fit.residuals, df=fit.df, base=base,
                                      correction=correction,
                                      factor=_factor(fit, correction), rng=rng))
            sds.append(fit.resid_sd)
    return combine_total_pieces(pieces, confidence=confidence, correction=correction,
                                n_new=int(gv.size), n_extrapolated=n_ext,
                                resid_sd=max(sds), base=base)
