"""One Python call for what a config can do: every line method, every group.

:func:`fit_line` fits one sample with any method a config may name
(:data:`scaling.io.config.METHOD_NAMES`), taking the method's options as
keywords, and returns a :class:`~scaling.stats.lines.LineFit` that carries its
fitted ranges and its correction factors, so ``fit.predict(x)`` works with
its defaults.  :func:`fit_groups` fits every group of a DataFrame and returns
the tidy ``fits.csv`` table.

This module sits above :mod:`scaling.stats.lines` (moment methods),
:mod:`scaling.stats.robust` (Deming and the row-based lines),
:mod:`scaling.stats.predictions` (correction factors),
:mod:`scaling.run.table_moments` (per-group moments of a table) and
:mod:`scaling.stats.grouped_fits` (every group at once), and imports them at module level; none of them
imports it.

Correction factors carried by a fit (computed once, from its own
residuals e_i = Y_i - a - b X_i on the fitting data):
smearing mean_i base^(e_i) (Duan 1983, *JASA* 78:605) and ratio
mean(y) / mean(base^(a + b X)) (Snowdon 1991, *Can. J. For. Res.* 21:720);
see :func:`scaling.stats.predictions.data_factors`.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import replace

import numpy as np
import pandas as pd

from .render.wording import fit_note, worded_fits
from .io.config import METHOD_NAMES
from .run.table_moments import frame_moments
from .errors import ConfigError, DataError
from .stats.deming import deming_slope_test
from .stats.line_results import LineFit, fit_line as _fit_moment_line
from .stats.lines import METHODS, MIN_N, base_label, parse_log_base, slope_test_statistic
from .stats.logscale import to_log
from .stats.predictions import data_factors
from .stats.fit_rows import ESTIMATE_COLUMNS, fit_row, fit_rows
from .stats.grouped_fits import FIT_TABLE_COLUMNS, fit_groups_from_moments
from .stats.robust import ROW_METHODS, deming, deming_moments
from .stats.schema import DEFAULT_SEED, check_confidence, check_exponents, check_method

__all__ = ["fit_line", "fit_groups", "METHOD_OPTIONS", "ROW_METHOD_DEFAULTS"]

#: Keyword options each method accepts (beyond confidence and log_base).
METHOD_OPTIONS: dict[str, tuple[str, ...]] = {
    "ols": (), "sma": (), "ma": (),
    "deming": ("lam", "error_variances"),
    "theil_sen": ("n_boot", "seed"),
    "siegel": ("n_boot", "seed"),
    "sma_robust": ("n_boot", "seed", "q"),
    "ma_robust": ("n_boot", "seed", "q"),
}

#: Defaults of the row-based methods' options: those of a config run
#: (``resampling.bootstrap`` 0 -> 999 resamples, ``resampling.seed``
#: :data:`~scaling.stats.schema.DEFAULT_SEED`), so a call with defaults gives the
#: numbers a run with defaults gives.
ROW_METHOD_DEFAULTS = {"n_boot": 999, "seed": DEFAULT_SEED}


# --------------------------------------------------------------------------
# input checks


def _check_options(methods, options: dict) -> None:
    """Every option must belong to (one of) the method(s) asked for."""
    allowed = {o for m in methods for o in METHOD_OPTIONS[m]}
    for name in options:
        if name not in allowed:
            names = ", ".join(methods)
            takes = ", ".join(sorted(allowed)) or "no options"
            raise ConfigError(f"option {name!r} does not apply to method {names} "
                              f"(it takes {takes})")


def _deming_lam(options: dict) -> float:
    """lam from ``lam`` or ``error_variances`` ({"x": vx, "y": vy} -> vy/vx); default 1."""
    lam, ev = options.get("lam"), options.get("error_variances")
    if lam is not None and ev is not None:
        raise ConfigError("give either lam or error_variances (which sets lam = y / x), "
                          "not both")
    if ev is None:
        return 1.0 if lam is None else lam
    if not isinstance(ev, dict) or set(ev) != {"x", "y"}:
        raise ConfigError(f"error_variances must be a mapping {{'x': vx, 'y': vy}} of the "
                          f"error variances of log x and log y, not {ev!r}")
    for key in ("x", "y"):
        v = ev[key]
        if (isinstance(v, bool) or not isinstance(v, (int, float, np.floating))
                or not (math.isfinite(v) and v > 0)):
            raise ConfigError(f"error_variances['{key}'] must be a positive number, not {v!r}")
    return float(ev["y"]) / float(ev["x"])


def _with_factors(fit: LineFit, x, y) -> LineFit:
    """The fit with its smearing and ratio factors on its own data (None without a log
    base) and its points on the log scale (``log_data``: what ``fit.plot()`` draws)."""
    if fit.log_data is None and x.shape == y.shape:
        fit = replace(fit, log_data=(to_log(x, fit.log_base), to_log(y, fit.log_base)))
    if fit.log_base is None or not fit.estimable:
        return fit
    factors = data_factors(fit, x, y)
    return replace(fit, smearing_factor=float(factors["smearing"]),
                   ratio_factor=float(factors["ratio"]))


# --------------------------------------------------------------------------
# one sample


def fit_line(x, y, *, method: str = "sma", confidence: float = 0.95, log_base=10,
             **options) -> LineFit:
    """Fit y = a x^b as a straight line on log-log scales, with any configured method.

    Parameters
    ----------
    x, y : array_like
        Positive values in natural units (or logs when ``log_base`` is None).
    method : {"ols", "sma", "ma", "deming", "theil_sen", "siegel", "sma_robust", "ma_robust"}
        OLS of log y on log x (to predict y); standardised major axis or
        major axis (the symmetric relationship); Deming (measurement error in
        both); Theil-Sen, Siegel, robust SMA or MA (resistant to outliers).
    confidence : float
        Level of the slope and intercept intervals.
    log_base : {10, "e", 2, None}
        Base of the logarithms; None means x and y are already logs.
    **options
        The method's own options (anything else is a ConfigError naming the
        option and the method):

        ``deming``: ``lam`` (error variance of log y over that of log x,
        default 1) or ``error_variances={"x": vx, "y": vy}`` (lam = vy/vx).
        ``theil_sen``, ``siegel``: ``n_boot`` (bootstrap resamples, default
        999) and ``seed`` (default 1; both as in a config run).
        ``sma_robust``, ``ma_robust``: ``n_boot``, ``seed`` and ``q`` (Huber
        cut-off quantile, default 0.9).

    Returns
    -------
    LineFit
        With ``x_range``, ``y_range`` and (natural units) the
        ``smearing_factor`` and ``ratio_factor`` of its own residuals, so
        ``fit.predict(x)`` and ``fit.inverse_predict(y)`` work with their
        defaults.

    Raises
    ------
    ConfigError
        Unknown method, an option the method does not take, bad values.
    DataError
        x and y of different lengths, not finite, not positive; for the
        row-based methods also fewer than 3 rows or no variation in x.

    Notes
    -----
    OLS, SMA, MA: :func:`scaling.stats.lines.fit_line` (formulas in
    :mod:`scaling.stats.lines`); a degenerate sample returns NaN estimates with a
    note and a DegenerateDataWarning.  Deming and the row-based lines:
    :mod:`scaling.stats.robust` (Deming 1943; Sen 1968; Siegel 1982; Taskinen &
    Warton 2011).  The numbers equal those of a config run with the same
    options on the same points.

    Examples
    --------
    >>> import scaling
    >>> x = [1, 2, 4, 8, 16, 32]
    >>> y = [2.9, 12.3, 47, 205, 760, 3150]
    >>> fit = scaling.fit_line(x, y, method="ols")
    >>> round(fit.slope, 2)
    2.01
    >>> round(scaling.fit_line(x, y, method="deming", lam=4).slope, 2)
    2.01
    >>> fit.predict([10])["y"].round(0).tolist()
    [305.0]
    """
    method = check_method(method, METHOD_NAMES)
    _check_options([method], options)
    if method in METHODS:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            fit = _fit_moment_line(x, y, method=method, confidence=confidence,
                                   log_base=log_base)
        for w in caught:   # re-warned here, so that they point at the caller
            warnings.warn(w.message, w.category, stacklevel=2)
    elif method == "deming":
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            fit = deming(x, y, lam=_deming_lam(options), confidence=confidence,
                         log_base=log_base)
        for w in caught:
            warnings.warn(w.message, w.category, stacklevel=2)
    else:
        kwargs = ROW_METHOD_DEFAULTS | options
        fit = ROW_METHODS[method](x, y, confidence=confidence, log_base=log_base, **kwargs)
    return _with_factors(fit, np.asarray(x, dtype=float), np.asarray(y, dtype=float))


# --------------------------------------------------------------------------
# every group


def _clean_frame(df, x: str, y: str, group: str | None, base) -> pd.DataFrame:
    """x, y as floats and the group as text; bad values are a DataError naming the column."""
    if not isinstance(df, pd.DataFrame):
        raise DataError(f"df must be a pandas DataFrame, not {type(df).__name__}")
    for role, name in (("x", x), ("y", y)) + ((("group", group),) if group is not None else ()):
        if name not in df.columns:
            raise DataError(f"{role} column {name!r} not found; columns are "
                            f"{', '.join(map(str, df.columns))}")
    out = {}
    for name in (x, y):
        col = pd.to_numeric(df[name], errors="coerce").to_numpy(dtype=float)
        bad = ~np.isfinite(col) | ((col <= 0) if base is not None else False)
        if np.any(bad):
            first = df.index[np.argmax(bad)]
            what = ("missing, non-numeric, infinite or <= 0 (no logarithm)" if base is not None
                    else "missing, non-numeric or infinite")
            raise DataError(f"column {name!r} has {int(bad.sum())} value(s) {what} (first at "
                            f"row index {first!r}); clean the data first")
        out[name] = col
    frame = pd.DataFrame({"x": out[x], "y": out[y]})
    if group is not None:
        labels = df[group]
        if labels.isna().any():
            raise DataError(f"group column {group!r} has missing labels (first at row index "
                            f"{df.index[np.argmax(labels.isna().to_numpy())]!r}); drop or name "
                            "those rows")
        frame["group"] = labels.astype(str).str.strip().to_numpy(dtype=object)
    return frame


def _deming_rows(gm, lam: float, confidence: float, scope: str) -> pd.DataFrame:
    """The fits rows of the Deming line for every group (one vectorised call)."""
    res = deming_moments(gm.moments, lam, confidence=confidence)
    return fit_rows(
        gm.labels.size, scope=scope, group=gm.labels.astype(object), method="deming",
        n=np.asarray(gm.moments.n).astype(np.int64),
        **{k: np.asarray(res[k], dtype=float) for k in ESTIMATE_COLUMNS},
        log_base=base_label(gm.log_base), confidence=float(confidence),
        note=np.asarray(res["note"], dtype=object), x_min=gm.x_min, x_max=gm.x_max,
        y_min=gm.y_min, y_max=gm.y_max, interval_method="analytic", deming_lambda=float(lam))


def _row_method_rows(frame: pd.DataFrame, labels, method: str, confidence: float, base,
                     options: dict, scope: str) -> tuple:
    """Fits rows and LineFits of a row-based method, one group at a time."""
    kwargs = ROW_METHOD_DEFAULTS | {k: v for k, v in options.items()
                                    if k in METHOD_OPTIONS[method]}
    parts = (dict(tuple(frame.groupby("group", sort=False))) if "group" in frame
             else {"": frame})
    rows, fits = [], {}
    for label in labels:
        sub = parts[label]
        xv, yv = sub["x"].to_numpy(), sub["y"].to_numpy()
        fit, note = None, ""
        if xv.size < MIN_N:
            note = f"n = {xv.size} < {MIN_N}: too few points to fit a line"
        else:
            try:
                fit = ROW_METHODS[method](xv, yv, confidence=confidence, log_base=base,
                                          **kwargs)
            except DataError as exc:
                note = str(exc).replace("x and y need", "needs")
        ranges = {"x_range": (float(xv.min()), float(xv.max())),
                  "y_range": (float(yv.min()), float(yv.max()))}
        if fit is not None:
            rows.append(fit_row(fit, scope=scope, group=label, note=fit_note(fit), **ranges))
            fits[label] = fit
        else:
            rows.append(fit_row(scope=scope, group=label, method=method, n=int(xv.size),
                                log_base=base_label(base), confidence=confidence, note=note,
                                interval_method="bootstrap_percentile", **ranges))
    return pd.DataFrame(rows, columns=FIT_TABLE_COLUMNS), fits


def fit_groups(df, *, x: str, y: str, group: str | None = None,
               methods=("ols", "sma", "ma"), confidence: float = 0.95, log_base=10,
               exponents=None, **options) -> pd.DataFrame:
    """Fit every method to every group of a DataFrame: the tidy ``fits.csv`` table.

    Parameters
    ----------
    df : DataFrame
        One row per point (long format).
    x, y : str
        Columns of the predictor and response, positive, in natural units
        (logs when ``log_base`` is None).
    group : str, optional
        Column of group names (compared as text, stripped).  Without it all
        rows form one line with scope ``pooled``.
    methods : sequence of str
        Any of the methods of :func:`fit_line`.
    confidence : float
    log_base : {10, "e", 2, None}
    exponents : dict or sequence of float, optional
        Hypothesised exponents ``{name: value}`` (a sequence is named by its
        values).  Each adds a column ``p_<name>``: the two-sided p-value of
        the method's test of slope = value (the ``p_value`` of
        ``slope_tests.csv``), NaN where the fit is not estimable.
    **options
        The methods' options, as for :func:`fit_line` (``lam`` or
        ``error_variances`` for deming; ``n_boot``, ``seed``, ``q`` for the
        row-based lines); an option none of ``methods`` takes is a ConfigError.

    Returns
    -------
    DataFrame
        The columns of ``fits.csv`` before the accuracy columns
        (:data:`scaling.run.pipeline.FIT_COLUMNS`), one row per method and
        group: methods in the order given, groups sorted; ``scope`` is
        ``group`` (``pooled`` without a group column).  A group that cannot
        be fitted has NaN numbers and a ``note`` saying why.

    Raises
    ------
    DataError
        A column is missing; x or y missing, non-numeric, infinite or not
        positive; a group label missing.
    ConfigError
        Unknown method or option, bad confidence, base or exponent.

    Notes
    -----
    OLS, SMA, MA and Deming: per-group moments in one pass
    (:func:`scaling.run.table_moments.frame_moments`) and one vectorised fit per method
    over all groups (:func:`scaling.stats.grouped_fits.fit_groups_from_moments`,
    :func:`scaling.stats.robust.deming_moments`); formulas in :mod:`scaling.stats.lines`
    and :mod:`scaling.stats.robust`.  The row-based lines (Theil-Sen, Siegel,
    robust SMA/MA) need the rows: they are fitted group by group (a Python
    loop over groups, each with its own bootstrap of ``n_boot`` resamples
    seeded with ``seed``), which is far slower for many groups.  Every row
    equals :func:`fit_line` on that group's points up to rounding.

    Examples
    --------
    >>> import pandas as pd, scaling
    >>> d = pd.DataFrame({"mass": [1, 2, 4, 8, 1, 2, 4, 8],
    ...                   "rate": [1, 1.7, 2.9, 4.6, 2, 3.3, 5.8, 9.7],
    ...                   "clade": list("aaaabbbb")})
    >>> fits = scaling.fit_groups(d, x="mass", y="rate", group="clade", methods=["ols"],
    ...                           exponents={"three_quarters": 0.75})
    >>> fits[["group", "method", "n"]].values.tolist()
    [['a', 'ols', 4], ['b', 'ols', 4]]
    >>> fits["slope"].round(2).tolist()
    [0.74, 0.76]
    """
    if isinstance(methods, str):
        methods = [methods]
    methods = [check_method(m, METHOD_NAMES) for m in methods]
    if not methods:
        raise ConfigError(f"methods must name at least one of {', '.join(METHOD_NAMES)}")
    _check_options(methods, options)
    confidence = check_confidence(confidence)
    base = parse_log_base(log_base)
    exps = check_exponents(exponents)
    frame = _clean_frame(df, x, y, group, base)
    scope = "group" if group is not None else "pooled"
    gm = frame_moments(frame, x="x", y="y", group="group" if group is not None else None,
                       log_base=base)
    labels = [str(v) for v in gm.labels]
    parts, row_fits = [], {}
    for method in methods:
        if method in METHODS:
            parts.append(worded_fits(fit_groups_from_moments(
                gm, methods=[method], confidence=confidence, scope=scope)))
        elif method == "deming":
            parts.append(_deming_rows(gm, _deming_lam(options), confidence, scope))
        else:
            rows, fits = _row_method_rows(frame, labels, method, confidence, base, options,
                                          scope)
            parts.append(rows)
            row_fits[method] = fits
    out = pd.concat(parts, ignore_index=True)
    # The engine keeps ranges on the log scale; take the natural-unit extremes
    # from the rows themselves, as a run writes them (no rounding round trip).
    keys = frame["group"] if group is not None else np.zeros(len(frame), dtype=int)
    ext = frame.groupby(keys, sort=False).agg(x_min=("x", "min"), x_max=("x", "max"),
                                               y_min=("y", "min"), y_max=("y", "max"))
    ext.index = ext.index.astype(str) if group is not None else [""]
    for col in ("x_min", "x_max", "y_min", "y_max"):
        out[col] = out["group"].map(ext[col]).to_numpy(dtype=float)
    if exps:
        out = _add_p_values(out, gm, methods, row_fits, exps, options)
    return out


def _add_p_values(out: pd.DataFrame, gm, methods, row_fits: dict, exps: dict,
                  options: dict) -> pd.DataFrame:
    """Columns ``p_<name>``: the method's slope test against each exponent."""
    out = out.copy()
    m = gm.moments
    index = {label: i for i, label in enumerate(str(v) for v in gm.labels)}
    for name, b0 in exps.items():
        p = np.full(len(out), np.nan)
        for method in methods:
            rows = np.flatnonzero(out["method"].to_numpy() == method)
            ok = rows[np.isfinite(out["slope"].to_numpy()[rows])]
            idx = np.array([index[g] for g in out["group"].to_numpy()[ok]], dtype=np.intp)
            if method in METHODS:
                p[ok] = slope_test_statistic(m[idx], method, b0)[2]
            elif method == "deming":
                # The Deming test is the MA test of (X, Y/sqrt(lam)) against
                # b0/sqrt(lam) (see LineFit.test_slope), vectorised here.
                p[ok] = deming_slope_test(m[idx], _deming_lam(options), b0)[2]
            else:
                for r in ok:
                    p[r] = row_fits[method][out["group"].iloc[r]].test_slope(b0).p_value
        out[f"p_{name}"] = p
    return out
