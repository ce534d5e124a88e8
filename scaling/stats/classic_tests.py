"""Two classic tests on rows: Shapiro-Wilk normality and the one-way ANOVA F.

Shapiro-Wilk
    Shapiro & Wilk (1965), *Biometrika* 52:591, W the squared correlation
    between the ordered sample and the normal-scores coefficients a;
    coefficients and p value by Royston's approximations (Royston 1992,
    *Statistics and Computing* 2:117-119; Royston 1995, *Applied Statistics*
    44:547-551, Algorithm AS R94):

    - m_i = Phi^-1((i - 3/8)/(n + 1/4)), the approximate expected normal
      order statistics (Royston 1992, eq. 2; Blom's plotting positions),
      with Phi^-1 by Algorithm AS 111 (Beasley & Springer 1977, *Applied
      Statistics* 26:118), as in AS R94;
    - u = 1/sqrt(n); the two most extreme coefficients
      a_n = c_n + 0.221157 u - 0.147981 u^2 - 2.071190 u^3 + 4.434685 u^4
      - 2.706056 u^5 and a_(n-1) = c_(n-1) + 0.042981 u - 0.293762 u^2
      - 1.752461 u^3 + 5.682633 u^4 - 3.582633 u^5, c = m / ||m||
      (Royston 1992, eqs. 4 and 5); the others m_i / sqrt(eps) with the
      normalising eps of Royston 1992, eq. 6 (only a_n is corrected for
      n <= 5);
    - W = 1 - (1 - W) with 1 - W computed as (sqrt(SaSx) - Sax)(sqrt(SaSx)
      + Sax)/(SaSx) to keep its digits for W near 1 (AS R94);
    - p value: n = 3 exact, p = 1 - (6/pi) arccos(sqrt(W)) (Royston 1995,
      section 2, after Shapiro & Wilk 1965); 4 <= n <= 11,
      -log(gamma - log(1 - W)) with gamma = -2.273 + 0.459 n is normal
      with mean 0.5440 - 0.39978 n + 0.025054 n^2 - 0.0006714 n^3 and
      log sd 1.3822 - 0.77857 n + 0.062767 n^2 - 0.0020322 n^3 (Royston
      1992, eqs. 9-11; p = 1e-19 when log(1 - W) >= gamma); n >= 12,
      log(1 - W) is normal with mean -1.5861 - 0.31082 v - 0.083751 v^2
      + 0.0038915 v^3 and log sd -0.4803 - 0.082676 v + 0.0030302 v^2,
      v = log n (Royston 1992, eqs. 12-14); the normal upper tail by
      Algorithm AS 66 (Hill 1973, *Applied Statistics* 22:424), as in AS R94.

    The steps and constants are those of AS R94, so :func:`shapiro_wilk`
    gives ``scipy.stats.shapiro``'s numbers (which also follows AS R94) to
    the last digits.  The approximations are designed for 3 <= n <= 5000.

One-way ANOVA
    F = (SSB/(k - 1)) / (SSW/(N - k)) on k groups of N values, p from the
    F(k - 1, N - k) upper tail (Fisher 1925); sums about the grand mean as
    ``scipy.stats.f_oneway`` forms them, so the same bits.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np
from scipy import special

__all__ = ["TestResult", "shapiro_wilk", "one_way_anova"]


@dataclass(frozen=True, slots=True)
class TestResult:
    """A test statistic and its p value.

    Attributes
    ----------
    statistic : float
    pvalue : float
    """

    statistic: float
    pvalue: float

    def __iter__(self):
        return iter((self.statistic, self.pvalue))


# AS R94's constants (Royston 1992 eqs. 4-5, 9-14; Royston 1995)
_C1 = (0.0, 0.221157, -0.147981, -2.071190, 4.434685, -2.706056)
_C2 = (0.0, 0.042981, -0.293762, -1.752461, 5.682633, -3.582633)
_C3 = (0.5440, -0.39978, 0.025054, -0.6714e-3)
_C4 = (1.3822, -0.77857, 0.062767, -0.0020322)
_C5 = (-1.5861, -0.31082, -0.083751, 0.0038915)
_C6 = (-0.4803, -0.082676, 0.0030302)
_G = (-2.273, 0.459)
_SMALL = 1e-19


def _poly(c, x: float) -> float:
    """c[0] + c[1] x + ... by AS R94's Horner order (c[0] added last)."""
    if len(c) == 1:
        return c[0]
    p = x * c[-1]
    for cj in c[-2:0:-1]:
        p = (p + cj) * x
    return c[0] + p


def _normal_scores(p: np.ndarray) -> np.ndarray:
    """Phi^-1(p) for 0 < p < 1/2 by Algorithm AS 111 (Beasley & Springer 1977)."""
    q = p - 0.5
    out = np.empty_like(p)
    mid = np.abs(q) <= 0.42
    qm = q[mid]
    r = qm * qm
    out[mid] = (qm * (((-25.44106049637 * r + 41.39119773534) * r - 18.61500062529) * r
                      + 2.50662823884)
                / ((((3.13082909833 * r - 21.06224101826) * r + 23.08336743743) * r
                    - 8.47351093090) * r + 1.0))
    tail = np.flatnonzero(~mid)
    if tail.size:
        # libm's log, as AS R94 compiled, not numpy's vectorised one (map: no Python
        # frame per value; -log negated as an array, the same bits)
        logs = np.fromiter(map(math.log, p[tail].tolist()), dtype=float, count=tail.size)
        s = np.sqrt(np.negative(logs, out=logs))
        out[tail] = -((((2.32121276858 * s + 4.85014127135) * s - 2.29796479134) * s
                       - 2.78718931138) / ((1.63706781897 * s + 3.54388924762) * s + 1.0))
    return out


def _coefficients(n: int) -> np.ndarray:
    """The n//2 coefficients a_1 >= a_2 >= ... of AS R94 (the upper half of a)."""
    n2 = n // 2
    if n == 3:
        return np.array([math.sqrt(0.5)])
    m = _normal_scores((np.arange(1, n2 + 1) - 0.375) / (n + 0.25))
    summ2 = float(np.cumsum(m * m)[-1]) * 2.0   # a running sum, in AS R94's order
    ssumm2 = math.sqrt(summ2)
    rsn = 1.0 / math.sqrt(n)
    a1 = _poly(_C1, rsn) - m[0] / ssumm2
    a = np.empty(n2)
    if n > 5:
        a2 = -m[1] / ssumm2 + _poly(_C2, rsn)
        fac = math.sqrt((summ2 - 2.0 * (m[0] * m[0]) - 2.0 * (m[1] * m[1]))
                        / (1.0 - 2.0 * (a1 * a1) - 2.0 * (a2 * a2)))
        a[1] = a2
        first = 2
    else:
        fac = math.sqrt((summ2 - 2.0 * (m[0] * m[0])) / (1.0 - 2.0 * (a1 * a1)))
        first = 1
    a[0] = a1
    a[first:] = -m[first:] * (1.0 / fac)   # by the reciprocal, as AS R94 is run
    return a


@functools.lru_cache(maxsize=32)
def _centred_weights(n: int) -> tuple:
    """(a_i - mean a, sum of their squares) in sorted-sample order, for size n.

    The coefficient of the i-th smallest value is -a_i in the lower half,
    +a_(n+1-i) in the upper half and 0 in the middle of an odd sample.  They
    depend on n alone, so they are cached (read-only) for the next sample.
    """
    a = _coefficients(n)
    n2 = n // 2
    coef = np.zeros(n)
    coef[:n2] = -a
    coef[n - n2:] = a[::-1]
    sa = float(np.cumsum(coef)[-1]) / n   # AS R94's running sums, first to last
    asa = coef - sa
    ssa = float(np.cumsum(asa * asa)[-1])
    asa.flags.writeable = False
    return asa, ssa


def _upper_normal(z: float) -> float:
    """P(Z > z) by Algorithm AS 66 (Hill 1973, *Applied Statistics* 22:424)."""
    up = True
    if z < 0:
        up, z = False, -z
    if z <= 7.0 or (up and z <= 38.0):
        y = 0.5 * z * z
        if z > 1.28:
            p = (0.398942280385 * math.exp(-y)
                 / (z - 3.8052e-8 + 1.00000615302
                    / (z + 3.98064794e-4 + 1.98615381364
                       / (z - 0.151679116635 + 5.29330324926
                          / (z + 4.8385912808 - 15.1508972451
                             / (z + 0.742380924027 + 30.789933034
                                / (z + 3.99019417011)))))))
        else:
            p = 0.5 - z * (0.398942280444 - 0.399903438504 * y
                           / (y + 5.75885480458 - 29.8213557808
                              / (y + 2.62433121679 + 48.6959930692 / (y + 5.92885724438))))
    else:
        p = 0.0
    return p if up else 1.0 - p


def shapiro_wilk(x) -> TestResult:
    """Shapiro-Wilk test of normality (W and its p value, Algorithm AS R94).

    Parameters
    ----------
    x : array_like
        The sample (at least 3 values; the approximations are designed for
        n <= 5000).

    Returns
    -------
    TestResult
        ``statistic`` W (in (0, 1]; small W is evidence against normality) and
        ``pvalue``.  NaN and NaN for fewer than 3 values or any NaN; NaN and 1
        with an infinite value; W = 1 and p = 1 when the values span less than
        1e-19 (no spread to test).

    Notes
    -----
    Royston (1992), *Statistics and Computing* 2:117; Royston (1995), *Applied
    Statistics* 44:547; equations in the module docstring.  The values are
    sorted and shifted by the middle value of the sample as given (a shift
    that keeps the digits of samples far from 0), then W is the squared
    correlation of the sorted values with the antisymmetric coefficients.
    """
    x = np.ravel(np.asarray(x, dtype=np.float64))
    n = x.size
    if n < 3:
        return TestResult(math.nan, math.nan)
    if not np.isfinite(x).all():   # one pass when all are finite, as usual
        if np.isnan(x).any():
            return TestResult(math.nan, math.nan)
        return TestResult(math.nan, 1.0)   # no W; AS R94 leaves p at its starting 1
    y = np.sort(x)
    y -= x[n // 2]
    rng = y[-1] - y[0]
    if rng < _SMALL:
        return TestResult(1.0, 1.0)
    asa, ssa = _centred_weights(n)
    # the running sums of AS R94 in its order (np.cumsum adds first to last)
    y /= rng
    sx = float(np.cumsum(y)[-1]) / n
    y -= sx
    w = y * y
    ssx = float(np.cumsum(w, out=w)[-1])
    np.multiply(asa, y, out=w)
    sax = float(np.cumsum(w, out=w)[-1])
    ssassx = math.sqrt(ssa * ssx)
    w1 = (ssassx - sax) * (ssassx + sax) / (ssa * ssx)
    w = 1.0 - w1
    return TestResult(w, _shapiro_p(w, w1, n))


def _shapiro_p(w: float, w1: float, n: int) -> float:
    if n == 3:
        return max(1.0 - 6.0 / math.pi * math.acos(math.sqrt(w)), 0.0)
    y = math.log(w1)
    if n <= 11:
        gamma = _poly(_G, float(n))
        if y >= gamma:
            return _SMALL
        y = -math.log(gamma - y)
        m = _poly(_C3, float(n))
        s = math.exp(_poly(_C4, float(n)))
    else:
        v = math.log(n)
        m = _poly(_C5, v)
        s = math.exp(_poly(_C6, v))
    return _upper_normal((y - m) / s)


def one_way_anova(*samples) -> TestResult:
    """One-way analysis of variance of two or more samples.

    Parameters
    ----------
    *samples : array_like
        One-dimensional samples, one per group.

    Returns
    -------
    TestResult
        ``statistic`` F = (SSB/(k - 1)) / (SSW/(N - k)) and ``pvalue``, the
        F(k - 1, N - k) upper tail.  F is inf when every group is constant but
        they differ, NaN when all values are equal; both NaN when a sample is
        empty or every sample has one value.

    Notes
    -----
    Fisher (1925).  The sums are centred on the grand mean first (a shift
    that keeps their digits); the steps are those of ``scipy.stats.f_oneway``,
    so the result is the same to the last bit.
    """
    samples = [np.asarray(s, dtype=np.float64) for s in samples]
    if len(samples) < 2:
        raise ValueError(f"one_way_anova needs at least two samples, not {len(samples)}")
    k = len(samples)
    if any(s.size == 0 for s in samples) or all(s.size == 1 for s in samples):
        return TestResult(np.float64(np.nan), np.float64(np.nan))
    alldata = np.concatenate(samples)
    bign = alldata.shape[-1]
    offset = np.mean(alldata, axis=-1, keepdims=True)
    alldata = alldata - offset
    normalized_ss = np.sum(alldata, axis=-1) ** 2. / bign
    sstot = np.vecdot(alldata, alldata, axis=-1) - normalized_ss
    ssbn = 0
    for s in samples:
        ssbn = ssbn + np.sum(s - offset, axis=-1) ** 2. / s.shape[-1]
    ssbn = ssbn - normalized_ss
    sswn = sstot - ssbn
    dfbn, dfwn = k - 1, bign - k
    with np.errstate(divide="ignore", invalid="ignore"):
        f = (ssbn / dfbn) / (sswn / dfwn)
    # constant groups: F infinite if they differ, undefined if all values agree
    if all(np.ptp(s) == 0 for s in samples):
        f = np.float64(np.inf)
    if np.ptp(alldata) == 0:
        f = np.float64(np.nan)
    p = special.fdtrc(dfbn, dfwn, f)
    return TestResult(np.float64(f), np.float64(p))
