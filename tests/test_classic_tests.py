"""Shapiro-Wilk and one-way ANOVA of stats.classic_tests against scipy.stats.

Reference library: scipy.stats.shapiro (which runs Royston's Algorithm AS R94,
Royston 1995, Applied Statistics 44:547) and scipy.stats.f_oneway.  Both are
matched bit for bit (tolerance 0) on seeded samples of every size from 3 to 60
and larger ones up to 5000 and beyond.
"""

import math
import warnings

import numpy as np
import pytest
from scipy import stats

from scaling.stats.classic_tests import one_way_anova, shapiro_wilk


def _samples(rng, n):
    yield rng.standard_normal(n)
    yield rng.standard_normal(n) * 7.5 + 1e4          # far from 0: the shift matters
    yield np.exp(rng.standard_normal(n))              # skewed: small p
    yield rng.standard_t(3, n)                        # heavy tails
    yield np.round(rng.standard_normal(n), 1)         # ties


@pytest.mark.parametrize("sizes", [range(3, 61), [100, 128, 257, 999, 1000, 2001, 4999, 5000,
                                                  5001, 20000]])
def test_shapiro_wilk_equals_scipy_stats_bits(sizes):
    rng = np.random.default_rng(20)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for n in sizes:
            for x in _samples(rng, n):
                want = stats.shapiro(x)
                got = shapiro_wilk(x)
                # scipy.stats.shapiro as reference library: the same bits
                assert got.statistic == want.statistic, (n, got, want)
                assert got.pvalue == want.pvalue, (n, got, want)


def test_shapiro_wilk_edges_as_scipy_stats():
    cases = ([1, 1, 1], [2.0] * 6, [1.0] * 14 + [2.0], [0, 0, 1e-20], [0, 1, 1e-9],
             [1, 2, np.nan], [1, 2, np.inf, 3], [-np.inf] + list(range(13)),
             [1e308, -1e308, 3], [1e300, 2e300, 5e300, 0], [1, 2])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for x in cases:
            want, got = stats.shapiro(x), shapiro_wilk(x)   # scipy.stats, reference library
            assert np.array_equal([got.statistic, got.pvalue], [want.statistic, want.pvalue],
                                  equal_nan=True), (x, got, want)


def test_shapiro_wilk_small_samples_exact_law():
    # n = 3: p = 1 - (6/pi) arccos(sqrt(W)) exactly (Shapiro & Wilk 1965; Royston
    # 1995, section 2); W for three equally spaced values is 1 (a perfect line
    # through the normal scores), for (1, 2, 4) it is 27/28 (exact law: the sample
    # variance 7/3 and the extreme contrast (4 - 1)^2/2 give W = 9/2 / (14/3)).
    w, p = shapiro_wilk([1.0, 2.0, 4.0])
    assert w == pytest.approx(27 / 28, rel=1e-15)
    assert p == pytest.approx(1 - 6 / math.pi * math.acos(math.sqrt(27 / 28)), rel=1e-14)
    assert shapiro_wilk([5.0, 6.0, 7.0]).statistic == pytest.approx(1.0, rel=1e-15)


def test_shapiro_wilk_detects_what_it_should():
    # Royston (1992): the test rejects clearly skewed samples and keeps normal ones.
    rng = np.random.default_rng(7)
    assert shapiro_wilk(np.exp(rng.standard_normal(500))).pvalue < 1e-10
    assert shapiro_wilk(rng.standard_normal(500)).pvalue > 0.01


def test_one_way_anova_equals_scipy_stats_bits():
    rng = np.random.default_rng(5)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for k in (2, 3, 7, 40):
            for _ in range(5):
                groups = [rng.standard_normal(rng.integers(1, 30)) + rng.uniform(-1, 1)
                          for _ in range(k)]
                want, got = stats.f_oneway(*groups), one_way_anova(*groups)
                # scipy.stats.f_oneway as reference library: the same bits
                assert got.statistic == want.statistic and got.pvalue == want.pvalue
        big = np.split(rng.standard_normal(200_000) * 3 + 50, np.arange(1, 1000) * 200)
        want, got = stats.f_oneway(*big), one_way_anova(*big)
        assert got.statistic == want.statistic and got.pvalue == want.pvalue
        for groups in ([[1, 1, 1], [2, 2]], [[3, 3], [3, 3, 3]], [[1], [2]], [[1, 2], []],
                       [[1, 2, np.nan], [3, 4]], [[1.0, 2.0], [1.0, 2.0]]):
            want, got = stats.f_oneway(*groups), one_way_anova(*groups)
            assert np.array_equal([got.statistic, got.pvalue], [want.statistic, want.pvalue],
                                  equal_nan=True), (groups, got, want)


def test_one_way_anova_known_value():
    # exact law: groups (1, 2, 3) and (4, 5, 6): SSB = 13.5, SSW = 4, F = 13.5 / (4/4)
    f, p = one_way_anova([1, 2, 3], [4, 5, 6])
    assert f == pytest.approx(13.5, rel=1e-14)
    assert 0.01 < p < 0.05


def test_shapiro_normal_scores_equal_the_plain_scalar_steps():
    # internal consistency: the vectorised normal scores of AS 111 equal the value-by-value
    # evaluation with libm's log in both branches (central |q| <= 0.42 and the tails)
    from scaling.stats.classic_tests import _normal_scores
    n = 200_001
    p = (np.arange(1, n // 2 + 1) - 0.375) / (n + 0.25)
    want = []
    for v in p.tolist():
        q = v - 0.5
        if abs(q) <= 0.42:
            r = q * q
            want.append(q * (((-25.44106049637 * r + 41.39119773534) * r - 18.61500062529) * r
                             + 2.50662823884)
                        / ((((3.13082909833 * r - 21.06224101826) * r + 23.08336743743) * r
                            - 8.47351093090) * r + 1.0))
        else:
            s = math.sqrt(-math.log(v))
            want.append(-((((2.32121276858 * s + 4.85014127135) * s - 2.29796479134) * s
                           - 2.78718931138) / ((1.63706781897 * s + 3.54388924762) * s + 1.0)))
    assert np.array_equal(_normal_scores(p), np.array(want))
