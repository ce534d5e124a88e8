"""Residual sums of fitted lines, accumulated chunk by chunk (the second pass of large data).

Once the lines are known (from per-group moments), everything the run says
about residuals reduces to sums over rows, which merge by addition: the
correction factors, the accuracy figures, the residual normality and
constant-variance tests, and the most influential rows.  One
:class:`ResidualSums` holds them for S point sets (the pooled rows and each
group) by M line methods; :meth:`ResidualSums.add` takes a chunk of rows,
:meth:`ResidualSums.merge` joins two accumulators (Dask partitions), and
:meth:`ResidualSums.result` gives a :class:`StreamedChecks`.

Residuals are vertical on the log scale, e = Y - a - b X, whatever the
method (as in :mod:`scaling.stats.residual_checks`).  Their mean and their
sum of squares follow from the moments before the pass
(mean e = mean Y - a - b mean X; sum e^2 = Syy - 2 b Sxy + b^2 Sxx + n mean_e^2),
so the pass sums values already centred on known centres, and no large
sums cancel.

Accuracy and correction factors (the formulas of
:func:`scaling.run.predictions.factors_by_group`)
    SEE = sqrt(sum e^2 / (n - 2)), %SEE = 100 (base^SEE - 1),
    %PE = 100 mean |y - yhat| / yhat = 100 mean |base^e - 1|,
    smearing = mean base^e (Duan 1983, *JASA* 78:605),
    ratio = mean y / mean yhat (Snowdon 1991, *Can. J. For. Res.* 21:720),
    parametric = exp(s_r^2 ln(base)^2 / 2) from the fit's residual SD
    (Baskerville 1972, *Can. J. For. Res.* 2:49).
Normality
    D'Agostino-Pearson K^2 = Z(sqrt b1)^2 + Z(b2)^2 on chi-square 2 df from
    the residuals' sample skewness and kurtosis (D'Agostino, Belanger &
    D'Agostino 1990, *Am. Stat.* 44:316; Z(b2) after Anscombe & Glynn 1983,
    *Biometrika* 70:227), as ``scipy.stats.normaltest``.  Shapiro-Wilk, which
    the in-memory road uses, needs the sorted rows and has no streaming form.
Constant variance
    Breusch & Pagan (1979) in Koenker's (1981) studentised form, as
    ``statsmodels.stats.diagnostic.het_breuschpagan``: LM = n R^2 of e^2
    regressed on (1, X), chi-square 1 df; R^2 = S_wx^2 / (S_xx S_ww) with
    w = e^2 centred.
Influence
    Cook's (1977) distance in the OLS regression of Y on X (as
    ``statsmodels``' ``OLSInfluence``): D_i = e_i^2 h_i / (2 s^2 (1 - h_i)^2),
    h_i = 1/n + (X_i - mean X)^2 / Sxx, s^2 = sum e_OLS^2 / (n - 2).  The
    ranking needs no s^2, so each chunk keeps per set the k rows with the
    largest e_i^2 h_i / (1 - h_i)^2 (a bounded selection, ties by row
    number) and s^2 is applied at the end.
Strong influence (the rule of :func:`scaling.stats.influence.strong_influence`)
    With ``influence_method`` given, each row's leave-one-out slope of that
    method comes from the set's moments downdated by the row (exact algebra
    of centred sums, as :func:`scaling.stats.influence.leave_one_out_slopes`);
    a row is strong when D_i > 1 or |b_(-i) - b| > se(b), and the k
    strongest by Cook's distance are kept per set.
Residuals between groups (:class:`GroupResidualSums`)
    The one-way ANOVA F of one line's residuals across groups (as
    ``scipy.stats.f_oneway`` on the rows), from per-group sums of residuals
    centred on their known group means.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from . import tails

from .influence import COOK_STRONG
from .lines import METHODS, fit_moments
from .moments import Moments

__all__ = ["TOP_K", "ResidualSums", "StreamedChecks", "GroupResidualSums",
           "dagostino_pearson", "breusch_pagan"]

#: Most influential rows kept per point set (largest Cook's distance first).
TOP_K = 10

_SUMS = ("se2", "sd2", "sd3", "sd4", "smear", "sy", "syhat", "spe", "bw", "bww", "bwx")
#: The sums only the residual checks (normality, constant variance) read.
_CHECK_SUMS = ("sd2", "sd3", "sd4", "bw", "bww", "bwx")


@dataclass(frozen=True, slots=True, kw_only=True)
class StreamedChecks:
    """What the second pass found, per point set (axis 0) and line method (axis 1).

    Attributes
    ----------
    n : ndarray, shape (S,)
    see, percent_see, percent_pe, smearing, ratio, parametric : ndarray, shape (S, M)
        NaN for the percentages and factors without a log base.
    skewness, kurtosis : ndarray, shape (S, M)
        Sample (biased) skewness and Pearson kurtosis of the residuals.
    normality_statistic, normality_p : ndarray, shape (S, M)
        D'Agostino-Pearson K^2 and its p (NaN below 8 points).
    bp_statistic, bp_p : ndarray, shape (S, M)
        Breusch-Pagan LM and its p.
    bp_direction : ndarray of int, shape (S, M)
        Sign of the slope of e^2 on X (+1: scatter grows with size).
    cooks_distance, cooks_rows : ndarray, shape (S, k)
        The k largest Cook's distances of each set (NaN-padded, largest
        first) and their row numbers (-1 padded).
    n_influential : ndarray, shape (S,)
        Rows with Cook's distance above 4/n (all of them, not only the k kept).
    strong_cooks, strong_rows, strong_slope_without : ndarray, shape (S, k)
        The k strongest rows of each set under the strong-influence rule
        (NaN / -1 padded; all padding without ``influence_method``).

    The checks (skewness to ``n_influential``) are NaN (rows -1, counts 0)
    for a set the sums were told not to check (``ResidualSums(checked=...)``).
    """

    n: np.ndarray
    see: np.ndarray
    percent_see: np.ndarray
    percent_pe: np.ndarray
    smearing: np.ndarray
    ratio: np.ndarray
    parametric: np.ndarray
    skewness: np.ndarray
    kurtosis: np.ndarray
    normality_statistic: np.ndarray
    normality_p: np.ndarray
    bp_statistic: np.ndarray
    bp_p: np.ndarray
    bp_direction: np.ndarray
    cooks_distance: np.ndarray
    cooks_rows: np.ndarray
    n_influential: np.ndarray
    strong_cooks: np.ndarray
    strong_rows: np.ndarray
    strong_slope_without: np.ndarray


class ResidualSums:
    """Running residual sums of S point sets x M lines, merged by addition.

    Parameters
    ----------
    intercept, slope : array_like, shape (S, M)
        The lines on the log scale (NaN: not estimable; its sums stay NaN).
    mean_x, mean_y, sxx, syy, sxy, n : array_like, shape (S,)
        Each set's moments (from the first pass).
    resid_sd : array_like, shape (S, M)
        Each fit's residual SD (for the parametric factor).
    log_base : float or None
    k : int
        Influential rows kept per set.
    influence_method : str, optional
        Line method whose leave-one-out slopes give the strong-influence rows;
        ``slope_se`` (S,) is then that method's slope standard error per set
        and ``influence_slope`` (S,) its slope.
    checked : array_like of bool, shape (S,), optional
        Sets whose residual checks (normality, constant variance, Cook's
        distances) are summed; the others get only the accuracy figures and
        factors, which is less than half the work per row.  Default: all.
    strong : array_like of bool, shape (S,), optional
        Sets whose rows go through the strong-influence rule (with
        ``influence_method``).  Default: all.
    """

    def __init__(self, *, intercept, slope, mean_x, mean_y, sxx, syy, sxy, n, resid_sd,
                 log_base, k: int = TOP_K, influence_method: str | None = None,
                 influence_slope=None, slope_se=None, checked=None, strong=None):
        self.a = np.atleast_2d(np.asarray(intercept, dtype=float))
        self.b = np.atleast_2d(np.asarray(slope, dtype=float))
        S, M = self.a.shape
        self.mx, self.my = np.asarray(mean_x, float), np.asarray(mean_y, float)
        self.sxx, self.syy, self.sxy = (np.asarray(v, float) for v in (sxx, syy, sxy))
        self.n_moments = np.asarray(n, float)
        self.resid_sd = np.atleast_2d(np.asarray(resid_sd, dtype=float))
        self.base = log_base
        self.k = int(k)
        with np.errstate(divide="ignore", invalid="ignore"):
            # Known centres: the mean residual and the mean squared residual of each line.
            self.mean_e = self.my[:, None] - self.a - self.b * self.mx[:, None]
            e2 = (self.syy[:, None] - 2 * self.b * self.sxy[:, None]
                  + self.b * self.b * self.sxx[:, None])
            self.mean_e2 = e2 / self.n_moments[:, None] + self.mean_e ** 2
            # The OLS line of each set, for Cook's distances.
            self.b_ols = self.sxy / self.sxx
            self.a_ols = self.my - self.b_ols * self.mx
        self.shape = (S, M)
        self.checked = (np.ones(S, dtype=bool) if checked is None
                        else np.asarray(checked, dtype=bool).reshape(S))
        self.strong = (np.ones(S, dtype=bool) if strong is None
                       else np.asarray(strong, dtype=bool).reshape(S))
        self.n = np.zeros(S)
        self.sums = {key: np.zeros((S, M)) for key in _SUMS}
        self.so2 = np.zeros(S)            # sum of squared OLS residuals
        self.top_u = np.full((S, self.k), -np.inf)
        self.top_rows = np.full((S, self.k), -1, dtype=np.int64)
        self.influence_method = influence_method
        if influence_method is not None:
            self.b_infl = np.asarray(influence_slope, dtype=float)
            self.se_infl = np.asarray(slope_se, dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            # s^2 of the OLS line from the moments: only decides the flags D > 4/n and D > 1
            self.s2_moments = ((self.syy - self.sxy * self.sxy / self.sxx)
                               / (self.n_moments - 2))
        self.n_above = np.zeros(S)        # rows with Cook's distance > 4/n
        self.strong_u = np.full((S, self.k), -np.inf)
        self.strong_rows = np.full((S, self.k), -1, dtype=np.int64)
        self.strong_loo = np.full((S, self.k), np.nan)

    # ------------------------------------------------------------------
    def add(self, codes, X, Y, rows) -> None:
        """Add a chunk: set code (0..S-1), log x, log y and row number of each row."""
        codes = np.asarray(codes, dtype=np.intp)
        if not codes.size:
            return
        X, Y = np.asarray(X, float), np.asarray(Y, float)
        rows = np.asarray(rows, dtype=np.int64)
        S, M = self.shape
        # One set in the chunk (the pooled rows): its line's numbers are scalars and its
        # sums plain sums, not gathers and bincounts over every row.
        one = int(codes[0]) if codes[0] == codes.min() == codes.max() else None
        counts = np.bincount(codes, minlength=S)
        self.n += counts
        # A chunk with no checked set sums only the factors and accuracy figures.
        checks = bool(self.checked[counts > 0].any())
        if one is not None:
            self._add_one(one, X, Y, rows, checks)
            return
        # Blocks that stay in the cache; each sum is scattered in row order onto the
        # chunk's totals (from 0, as one bincount of the chunk would add them).
        totals: dict = {}
        for lo in range(0, X.size, _BLOCK):
            part = codes[lo:lo + _BLOCK]
            for key, j, v in self._values(X[lo:lo + _BLOCK], Y[lo:lo + _BLOCK],
                                          lambda table: table[part], checks):
                if (key, j) not in totals:
                    totals[key, j] = np.zeros(S)
                np.add.at(totals[key, j], part, v)
        for (key, j), total in totals.items():
            if j is None:     # the same for every method
                for jj in range(M):
                    self.sums[key][:, jj] += total
            else:
                self.sums[key][:, j] += total
        if checks:
            self._add_checks(codes, X, Y, rows)

    def _values(self, X, Y, take, checks: bool):
        """Yield ``(key, method column or None, values)`` of every sum of a piece of rows.

        ``take(table)`` gives each row's entry of a per-set table.  The values
        live in work arrays reused by the next item (each is the plain
        expression in the comments, operation for operation).
        """
        size = X.size
        e, e2, t = np.empty(size), np.empty(size), np.empty(size)
        if checks:
            xc = X - take(self.mx)
            d, d2, w = np.empty(size), np.empty(size), np.empty(size)
        if self.base is not None:
            ln_base = math.log(self.base)
            # Natural y scaled by a common power per set (the ratio is unchanged by it),
            # so values near 1e+-12 neither overflow nor underflow.
            y_scaled = np.exp((Y - take(self.my)) * ln_base)
            yield "sy", None, y_scaled
            be = np.empty(size)
        for j in range(self.shape[1]):   # one method at a time: gathers from 1-d tables
            np.multiply(take(self.b[:, j]), X, out=t)
            np.subtract(Y, take(self.a[:, j]), out=e)
            np.subtract(e, t, out=e)                        # e = Y - a - b X
            np.multiply(e, e, out=e2)
            yield "se2", j, e2
            if checks:
                np.subtract(e, take(self.mean_e[:, j]), out=d)      # d = e - mean e
                np.multiply(d, d, out=d2)
                yield "sd2", j, d2
                yield "sd3", j, np.multiply(d2, d, out=t)
                yield "sd4", j, np.multiply(d2, d2, out=t)
                np.subtract(e2, take(self.mean_e2[:, j]), out=w)    # w = e^2 - mean e^2
                yield "bw", j, w
                yield "bww", j, np.multiply(w, w, out=t)
                yield "bwx", j, np.multiply(w, xc, out=t)
            if self.base is not None:
                np.exp(np.multiply(e, ln_base, out=be), out=be)    # base^e
                yield "smear", j, be
                yield "spe", j, np.abs(np.subtract(be, 1.0, out=t), out=t)
                yield "syhat", j, np.divide(y_scaled, be, out=t)  # yhat = y / base^e

    def _add_one(self, one: int, X, Y, rows, checks: bool) -> None:
        """Add a chunk of one set in blocks that stay in the processor's cache.

        The blocks are the subtrees of numpy's pairwise summation over the
        chunk (:func:`_pairwise_blocks`), and their sums are joined as that
        summation joins them, so every sum equals ``values.sum()`` over the
        whole chunk to the last bit; the sum of squared OLS residuals, which
        is taken in row order, is carried from block to block.
        """
        def take(table):
            return table[one]

        blocks = _pairwise_blocks(X.size, _BLOCK)
        items, partials = None, []
        so2 = None
        for lo, hi in blocks:
            found = [(key, j, float(v.sum()))
                     for key, j, v in self._values(X[lo:hi], Y[lo:hi], take, checks)]
            items = items or [(key, j) for key, j, _ in found]
            partials.append([v for _, _, v in found])
            if checks:
                so2 = self._add_checks(None, X[lo:hi], Y[lo:hi], rows[lo:hi], one,
                                       so2_start=0.0 if so2 is None else so2)
        totals = _pairwise_join(np.array(partials), X.size, _BLOCK)
        for (key, j), total in zip(items, totals):
            if j is None:
                self.sums[key][one, :] += total
            else:
                self.sums[key][one, j] += total
        if so2 is not None:
            self.so2[one] += so2

    def _add_checks(self, codes, X, Y, rows, one: int | None = None,
                    so2_start: float | None = None) -> float | None:
        """Cook's distances (the k largest per set, rows above 4/n) and strong rows;
        ``one``: the piece's only set (its numbers are then scalars, not gathers;
        ``codes`` may be None).  With ``so2_start`` the squared OLS residuals are
        summed in row order onto it and the sum returned, not added."""
        S = self.shape[0]
        if codes is None:
            codes = np.full(X.size, one, dtype=np.intp)

        def take(table):
            return table[one] if one is not None else table[codes]

        # Cook's distance up to each set's factor 1 / (2 s^2).
        with np.errstate(divide="ignore", invalid="ignore"):
            eo = Y - take(self.a_ols) - take(self.b_ols) * X
            h = 1.0 / take(self.n_moments) + (X - take(self.mx)) ** 2 / take(self.sxx)
            u = eo * eo * h / (1.0 - h) ** 2
        carried = None
        if so2_start is None:
            self.so2 += np.bincount(codes, weights=eo * eo, minlength=S)
        else:   # in row order, as bincount sums: the last of the running sums
            carried = float(np.add.accumulate(np.concatenate(([so2_start], eo * eo)))[-1])
        u = np.where(np.isfinite(u), u, -np.inf)
        rows = np.asarray(rows, dtype=np.int64)
        with np.errstate(divide="ignore", invalid="ignore"):
            above = u / (2 * take(self.s2_moments)) > 4.0 / take(self.n_moments)
        if one is None:
            self.n_above += np.bincount(codes, weights=above, minlength=S)
        else:
            self.n_above[one] += np.count_nonzero(above)
        # Only rows that beat their set's k-th largest so far, and a lower bound of the
        # chunk's own k-th largest, can enter (keeps the sort small).
        if one is None:
            live = (u >= self.top_u[codes, -1]) & (u >= self._chunk_floor(codes, u)[codes])
        else:   # one set: the floor is the smallest of the k slices' maxima
            floor = min((float(u[j::self.k].max()) if u[j::self.k].size else -np.inf)
                        for j in range(self.k))
            live = u >= max(self.top_u[one, -1], floor)
        self._keep_top(self.top_u, self.top_rows, None, codes[live], u[live], rows[live], None)
        if self.influence_method is not None:
            if one is not None:
                if self.strong[one]:
                    self._add_strong(codes, X, Y, u, rows, one)
                return carried
            strong = self.strong[codes]
            if strong.all():
                self._add_strong(codes, X, Y, u, rows)
            elif strong.any():
                self._add_strong(codes[strong], X[strong], Y[strong], u[strong], rows[strong])
        return carried

    def _chunk_floor(self, codes, u) -> np.ndarray:
        """Per set, a lower bound of the k-th largest ``u`` of a chunk: the smallest of
        the maxima of k disjoint strided slices (k distinct rows reach it; -inf for a
        set missing from a slice)."""
        S = self.shape[0]
        floor = np.full(S, np.inf)
        top = np.empty(S)
        for j in range(self.k):
            top.fill(-np.inf)
            np.maximum.at(top, codes[j::self.k], u[j::self.k])
            np.minimum(floor, top, out=floor)
        return floor

    def _add_strong(self, codes, X, Y, u, rows, one: int | None = None) -> None:
        """Rows under the strong-influence rule, with their leave-one-out slopes."""
        def take(table):
            return table[one] if one is not None else table[codes]

        n = take(self.n_moments)
        mx, my = take(self.mx), take(self.my)
        d, f = X - mx, Y - my
        k = n / (n - 1)
        sxx = take(self.sxx) - k * d * d
        syy = take(self.syy) - k * f * f
        sxy = take(self.sxy) - k * d * f
        # Every row's leave-one-out slope reads only the centred sums (the means
        # are placeholders here; the rows kept get theirs below).
        with np.errstate(divide="ignore", invalid="ignore"):
            loo = METHODS[self.influence_method].slope(
                Moments(n=n - 1, mean_x=mx, mean_y=my, sxx=sxx, syy=syy, sxy=sxy))
            cook = u / (2 * take(self.s2_moments))
            se = take(self.se_infl)
            flag = ((cook > COOK_STRONG) | (np.abs(loo - take(self.b_infl)) > se)) & (se > 0)
        if not np.any(flag):
            return
        idx = np.flatnonzero(np.broadcast_to(flag, X.shape))
        n_i = np.broadcast_to(n, X.shape)[idx]
        down = Moments(n=n_i - 1, mean_x=np.broadcast_to(mx, X.shape)[idx] - d[idx] / (n_i - 1),
                       mean_y=np.broadcast_to(my, X.shape)[idx] - f[idx] / (n_i - 1),
                       sxx=sxx[idx], syy=syy[idx], sxy=sxy[idx])
        # the run's own estimator for the rows kept (its notes and guards included)
        with np.errstate(divide="ignore", invalid="ignore"):
            exact = np.asarray(fit_moments(down, self.influence_method)["slope"], float)
        self._keep_top(self.strong_u, self.strong_rows, self.strong_loo, codes[idx], u[idx],
                       rows[idx], exact)

    def _keep_top(self, heap_u, heap_rows, heap_extra, codes, u, rows, extra) -> None:
        """Keep in ``heap_*`` (S, k) the k largest ``u`` per set (ties: smaller row first).

        Only the sets with candidates are sorted again (the others' rows are
        already in that order).
        """
        if not np.size(codes):
            return
        k = heap_u.shape[1]
        sets = np.unique(codes)
        all_codes = np.concatenate([np.repeat(sets, k), codes])
        all_u = np.concatenate([heap_u[sets].ravel(), u])
        all_rows = np.concatenate([heap_rows[sets].ravel(), rows])
        order = np.lexsort((all_rows, -all_u, all_codes))
        sc = all_codes[order]
        first = np.searchsorted(sc, sets)
        rank = np.arange(sc.size) - first[np.searchsorted(sets, sc)]
        keep = order[rank < k]
        kc = all_codes[keep]
        slot = rank[rank < k]
        heap_u[kc, slot] = all_u[keep]
        heap_rows[kc, slot] = all_rows[keep]
        if heap_extra is not None:
            heap_extra[kc, slot] = np.concatenate([heap_extra[sets].ravel(), extra])[keep]

    def merge(self, other: "ResidualSums") -> None:
        """Add another accumulator of the same lines (e.g. another Dask partition)."""
        self.n += other.n
        for key in _SUMS:
            self.sums[key] += other.sums[key]
        self.so2 += other.so2
        self.n_above += other.n_above
        S, k = self.top_u.shape
        codes = np.repeat(np.arange(S), k)
        live = other.top_rows.ravel() >= 0
        self._keep_top(self.top_u, self.top_rows, None, codes[live],
                       other.top_u.ravel()[live], other.top_rows.ravel()[live], None)
        live = other.strong_rows.ravel() >= 0
        self._keep_top(self.strong_u, self.strong_rows, self.strong_loo, codes[live],
                       other.strong_u.ravel()[live], other.strong_rows.ravel()[live],
                       other.strong_loo.ravel()[live])

    def offset_rows(self, offset: int) -> None:
        """Shift the kept row numbers by ``offset`` (a Dask partition numbered from 1)."""
        for rows in (self.top_rows, self.strong_rows):
            rows[rows >= 0] += offset

    # ------------------------------------------------------------------
    def result(self) -> StreamedChecks:
        """The factors, accuracy figures, tests and top influential rows."""
        s = self.sums
        n = self.n[:, None]
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            see = np.sqrt(s["se2"] / (n - 2))
            m2, m3, m4 = s["sd2"] / n, s["sd3"] / n, s["sd4"] / n
            skew = m3 / m2 ** 1.5
            kurt = m4 / (m2 * m2)
            k2, p_norm = dagostino_pearson(n, skew, kurt)
            sww = s["bww"] - s["bw"] ** 2 / n
            lm, p_bp = breusch_pagan(n, s["bwx"], self.sxx[:, None], sww)
            direction = np.sign(s["bwx"]).astype(int)
            if self.base is None:
                nan = np.full(self.shape, np.nan)
                percent_see = percent_pe = smearing = ratio = parametric = nan
            else:
                ln_base = math.log(self.base)
                percent_see = 100 * (np.power(self.base, see) - 1)
                percent_pe = 100 * s["spe"] / n
                smearing = s["smear"] / n
                ratio = s["sy"] / s["syhat"]
                parametric = np.exp(self.resid_sd ** 2 * ln_base ** 2 / 2)
            s2 = self.so2 / (self.n - 2)
            cooks = self.top_u / (2 * s2[:, None])
            strong = self.strong_u / (2 * s2[:, None])
        rows = self.top_rows.copy()
        cooks = np.where(rows >= 0, cooks, np.nan)
        strong_rows = self.strong_rows.copy()
        strong = np.where(strong_rows >= 0, strong, np.nan)
        n_above = self.n_above.copy()
        if not self.checked.all():   # sets whose checks were not summed
            off = ~self.checked
            for v in (skew, kurt, k2, p_norm, lm, p_bp):
                v[off] = np.nan
            direction[off] = 0
            cooks[off] = np.nan
            rows[off] = -1
            n_above[off] = 0
        return StreamedChecks(n=self.n.copy(), see=see, percent_see=percent_see,
                              percent_pe=percent_pe, smearing=smearing, ratio=ratio,
                              parametric=parametric, skewness=skew, kurtosis=kurt,
                              normality_statistic=k2, normality_p=p_norm, bp_statistic=lm,
                              bp_p=p_bp, bp_direction=direction, cooks_distance=cooks,
                              cooks_rows=rows, n_influential=n_above,
                              strong_cooks=strong, strong_rows=strong_rows,
                              strong_slope_without=np.where(strong_rows >= 0,
                                                            self.strong_loo, np.nan))


#: Rows per block of a one-set chunk (temporaries of 0.5 MB stay in the cache).
_BLOCK = 1 << 16


def _pairwise_blocks(n: int, block: int) -> list:
    """The (start, stop) of the subtrees of numpy's pairwise summation of ``n`` values
    that are at most ``block`` long (``block`` >= 128), in order.

    ``np.sum`` of a contiguous float64 array splits ``n`` values into
    ``n2 = n // 2 - (n // 2) % 8`` and ``n - n2`` until at most 128 remain;
    the sum of one subtree is ``np.sum`` of its slice.
    """
    out = []

    def split(start: int, size: int) -> None:
        if size <= block:
            out.append((start, start + size))
            return
        half = size // 2
        half -= half % 8
        split(start, half)
        split(start + half, size - half)

    split(0, n)
    return out


def _pairwise_join(partials: np.ndarray, n: int, block: int) -> np.ndarray:
    """Join the sums of :func:`_pairwise_blocks` (rows of ``partials``) as the
    pairwise summation of ``n`` values joins them."""
    it = iter(partials)

    def join(size: int):
        if size <= block:
            return next(it)
        half = size // 2
        half -= half % 8
        return join(half) + join(size - half)

    return join(n)


class GroupResidualSums:
    """Per-group sums of one line's residuals, for the one-way ANOVA across groups.

    Parameters
    ----------
    intercept, slope : float
        The line (e.g. the pooled fit).
    mean_x, mean_y : array_like, shape (G,)
        Each group's means (from the moments), which give each group's mean
        residual before the pass, so the sums are of centred values.
    """

    def __init__(self, *, intercept: float, slope: float, mean_x, mean_y):
        self.centre = (np.asarray(mean_y, float) - intercept
                       - slope * np.asarray(mean_x, float))
        self.a, self.b = float(intercept), float(slope)
        g = self.centre.size
        self.n, self.s1, self.s2 = np.zeros(g), np.zeros(g), np.zeros(g)

    def add(self, codes, X, Y) -> None:
        """Add rows: group code (0..G-1), log x and log y of each."""
        codes = np.asarray(codes, dtype=np.intp)
        d = np.asarray(Y, float) - self.a - self.b * np.asarray(X, float) - self.centre[codes]
        g = self.centre.size
        self.n += np.bincount(codes, minlength=g)
        self.s1 += np.bincount(codes, weights=d, minlength=g)
        self.s2 += np.bincount(codes, weights=d * d, minlength=g)

    def merge(self, other: "GroupResidualSums") -> None:
        self.n += other.n
        self.s1 += other.s1
        self.s2 += other.s2

    def anova(self) -> dict:
        """``statistic, df1, df2, p_value`` of the one-way ANOVA over groups of >= 2 rows.

        As ``scipy.stats.f_oneway`` on the residuals: F = (SSB/(k - 1)) /
        (SSW/(N - k)); NaN with fewer than two such groups.
        """
        use = self.n >= 2
        k = int(use.sum())
        if k < 2:
            return {"statistic": math.nan, "df1": k - 1, "df2": 0, "p_value": math.nan}
        n, s1, s2 = self.n[use], self.s1[use], self.s2[use]
        means = self.centre[use] + s1 / n
        total = float(n.sum())
        grand = float(np.sum(n * means) / total)
        ssw = float(np.sum(s2 - s1 * s1 / n))
        ssb = float(np.sum(n * (means - grand) ** 2))
        df1, df2 = k - 1, int(total) - k
        with np.errstate(divide="ignore", invalid="ignore"):
            f = (ssb / df1) / (ssw / df2)
        return {"statistic": f, "df1": df1, "df2": df2,
                "p_value": float(tails.f_upper(f, df1, df2))}


def dagostino_pearson(n, skewness, kurtosis):
    """D'Agostino-Pearson K^2 and its p from sample size, skewness and kurtosis.

    Parameters
    ----------
    n : array_like
        Sample sizes (NaN results below 8).
    skewness : array_like
        Sample skewness sqrt(b1) = m3 / m2^1.5 (biased moments).
    kurtosis : array_like
        Sample Pearson kurtosis b2 = m4 / m2^2.

    Returns
    -------
    statistic, p_value : ndarray

    Notes
    -----
    Z(sqrt b1) by D'Agostino's (1970) transformation to normality and Z(b2)
    by Anscombe & Glynn (1983), combined as K^2 = Z1^2 + Z2^2 on chi-square
    2 df (D'Agostino, Belanger & D'Agostino 1990, *Am. Stat.* 44:316,
    eqs. for the skewness and kurtosis tests); ``scipy.stats.normaltest``
    computes the same from the rows.
    """
    n = np.asarray(n, dtype=float)
    g1 = np.asarray(skewness, dtype=float)
    b2 = np.asarray(kurtosis, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        y = g1 * np.sqrt((n + 1) * (n + 3) / (6.0 * (n - 2)))
        beta2 = (3.0 * (n * n + 27 * n - 70) * (n + 1) * (n + 3)
                 / ((n - 2.0) * (n + 5) * (n + 7) * (n + 9)))
        w2 = -1 + np.sqrt(2 * (beta2 - 1))
        delta = 1 / np.sqrt(0.5 * np.log(w2))
        alpha = np.sqrt(2.0 / (w2 - 1))
        y = np.where(y == 0, 1, y)
        z1 = delta * np.log(y / alpha + np.sqrt((y / alpha) ** 2 + 1))

        mean_b2 = 3.0 * (n - 1) / (n + 1)
        var_b2 = 24.0 * n * (n - 2) * (n - 3) / ((n + 1) * (n + 1.0) * (n + 3) * (n + 5))
        x = (b2 - mean_b2) / np.sqrt(var_b2)
        root_beta1 = (6.0 * (n * n - 5 * n + 2) / ((n + 7) * (n + 9))
                      * np.sqrt(6.0 * (n + 3) * (n + 5) / (n * (n - 2) * (n - 3))))
        a = 6.0 + 8.0 / root_beta1 * (2.0 / root_beta1 + np.sqrt(1 + 4.0 / root_beta1 ** 2))
        term1 = 1 - 2 / (9.0 * a)
        denom = 1 + x * np.sqrt(2 / (a - 4.0))
        term2 = np.sign(denom) * np.where(denom == 0.0, np.nan,
                                          ((1 - 2.0 / a) / np.abs(denom)) ** (1 / 3.0))
        z2 = (term1 - term2) / np.sqrt(2 / (9.0 * a))
        k2 = z1 * z1 + z2 * z2
    k2 = np.where(n >= 8, k2, np.nan)
    return k2, tails.chi2_upper(k2, 2)


def breusch_pagan(n, swx, sxx, sww):
    """Koenker's studentised Breusch-Pagan LM on regressors (1, X), and its p.

    Parameters
    ----------
    n : array_like
    swx : array_like
        sum (w - mean w)(X - mean X), w the squared residuals.
    sxx : array_like
        sum (X - mean X)^2.
    sww : array_like
        sum (w - mean w)^2.

    Returns
    -------
    statistic, p_value : ndarray
        LM = n R^2, R^2 = swx^2 / (sxx sww); chi-square 1 df (Koenker 1981,
        *J. Econometrics* 17:107; ``het_breuschpagan`` of statsmodels).
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        lm = np.asarray(n, float) * swx * swx / (sxx * sww)
    return lm, tails.chi2_upper(lm, 1)
