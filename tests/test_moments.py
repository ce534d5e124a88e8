"""Tests of scaling.stats.moments: sufficient statistics per group, weighted, single.

Expected values come from plain numpy computations of the same sums (a
reference library computing the same thing another way) or from exact
identities; each check says which beside it.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from numpy.testing import assert_allclose, assert_array_equal

from scaling.stats.moments import HIGHER_KEYS, Moments, group_moments, moments, weighted_moments


def _numpy_moments(x: np.ndarray, y: np.ndarray) -> dict:
    """Reference: the centred sums written directly with numpy."""
    dx, dy = x - np.mean(x), y - np.mean(y)
    return {"n": float(x.size), "mean_x": np.mean(x), "mean_y": np.mean(y),
            "sxx": np.sum(dx * dx), "syy": np.sum(dy * dy), "sxy": np.sum(dx * dy)}


def _assert_moments_close(m: Moments, ref: dict, rtol: float, atol: float = 0.0) -> None:
    for key, value in ref.items():
        assert_allclose(getattr(m, key), value, rtol=rtol, atol=atol, err_msg=key)


class TestMoments:
    def test_matches_numpy_sums(self):
        rng = np.random.default_rng(11)
        x = rng.normal(2.0, 0.7, 57)
        y = 0.8 * x + rng.normal(0.0, 0.3, 57)
        m = moments(x, y)
        assert np.shape(m.n) == ()
        # reference library: numpy mean / sum of centred products
        _assert_moments_close(m, _numpy_moments(x, y), rtol=1e-12)
        # reference library: numpy.cov with ddof=0 times n gives the centred sums
        c = np.cov(x, y, ddof=0) * x.size
        assert_allclose([m.sxx, m.syy, m.sxy], [c[0, 0], c[1, 1], c[0, 1]], rtol=1e-12)

    def test_large_offset_keeps_precision(self):
        # exact law: adding a constant to x and y leaves the centred sums
        # unchanged (the two-pass algorithm must not lose them to cancellation)
        rng = np.random.default_rng(12)
        x = rng.normal(0.0, 1.0, 200)
        y = rng.normal(0.0, 1.0, 200)
        base = moments(x, y)
        shifted = moments(x + 1e6, y - 1e6)
        assert_allclose([shifted.sxx, shifted.syy, shifted.sxy],
                        [base.sxx, base.syy, base.sxy], rtol=1e-8)  # exact law (translation invariance)

    def test_r_is_nan_without_variance(self):
        m = moments([1.0, 1.0, 1.0], [1.0, 2.0, 3.0])
        assert np.isnan(m.r)  # definition: r = Sxy / sqrt(Sxx Syy) is 0/0 here

    def test_swapped_exchanges_roles(self):
        rng = np.random.default_rng(13)
        x, y = rng.normal(size=20), rng.normal(size=20)
        # exact law: moments of (y, x) are those of (x, y) with roles exchanged
        _assert_moments_close(moments(x, y).swapped(),
                              _numpy_moments(y, x), rtol=1e-12)

    def test_dict_round_trip(self):
        rng = np.random.default_rng(14)
        labels = np.repeat(np.arange(3), 5)
        m = group_moments(rng.normal(size=15), rng.normal(size=15), labels)
        back = Moments.from_dict(m.to_dict())
        for key in ("n", "mean_x", "mean_y", "sxx", "syy", "sxy"):
            assert_array_equal(getattr(back, key), getattr(m, key))  # exact: JSON floats round-trip


class TestGroupMoments:
    def test_equals_per_group_numpy(self):
        rng = np.random.default_rng(21)
        sizes = [3, 8, 1, 25, 12]
        labels = rng.permutation(np.repeat(np.arange(len(sizes)), sizes))
        x = rng.normal(1.0, 2.0, labels.size)
        y = -0.5 * x + rng.normal(3.0, 1.0, labels.size)
        m = group_moments(x, y, labels)
        assert m.n.shape == (len(sizes),)
        for g in range(len(sizes)):
            sel = labels == g
            # reference library: numpy on the rows of group g alone
            _assert_moments_close(m[g], _numpy_moments(x[sel], y[sel]), rtol=1e-12, atol=1e-13)

    def test_empty_group_and_n_groups(self):
        labels = np.array([0, 0, 0, 2, 2, 2])
        x = np.array([1.0, 2.0, 3.0, 4.0, 5.0, 7.0])
        y = np.array([2.0, 1.0, 5.0, 0.0, 1.0, 1.5])
        m = group_moments(x, y, labels, n_groups=4)
        assert m.n.shape == (4,)
        assert_array_equal(m.n, [3.0, 0.0, 3.0, 0.0])  # exact: counts of labels
        assert np.all(np.isnan(m.mean_x[[1, 3]]))  # documented: empty groups have NaN means
        # reference library: numpy on group 2
        _assert_moments_close(m[2], _numpy_moments(x[3:], y[3:]), rtol=1e-12)

    def test_stacked_replicates_one_pass(self):
        # replicates stacked as groups give the moments of each replicate
        rng = np.random.default_rng(22)
        z = rng.normal(size=(500, 20, 2))
        labels = np.repeat(np.arange(500), 20)
        m = group_moments(z[..., 0].ravel(), z[..., 1].ravel(), labels, n_groups=500)
        xc = z[..., 0] - z[..., 0].mean(axis=1, keepdims=True)
        yc = z[..., 1] - z[..., 1].mean(axis=1, keepdims=True)
        # reference library: numpy sums along the replicate axis
        assert_allclose(m.sxy, (xc * yc).sum(axis=1), rtol=1e-10, atol=1e-12)
        assert_allclose(m.sxx, (xc * xc).sum(axis=1), rtol=1e-12)


class TestWeightedMoments:
    def test_integer_weights_equal_repeated_sample(self):
        rng = np.random.default_rng(31)
        x = rng.normal(5.0, 1.5, 30)
        y = 0.7 * x + rng.normal(0.0, 0.4, 30)
        w = rng.integers(0, 4, 30)
        m = weighted_moments(x, y, w)
        # exact identity: integer weights = moments of the explicitly repeated sample
        _assert_moments_close(m, _numpy_moments(np.repeat(x, w), np.repeat(y, w)),
                              rtol=1e-10)

    def test_vectorised_over_leading_axes(self):
        rng = np.random.default_rng(32)
        x = rng.normal(size=15)
        y = x + rng.normal(size=15)
        counts = rng.multinomial(15, np.full(15, 1 / 15), size=(4, 6))
        m = weighted_moments(x, y, counts)
        assert m.n.shape == (4, 6)
        for i in range(4):
            for j in range(6):
                xs, ys = np.repeat(x, counts[i, j]), np.repeat(y, counts[i, j])
                # exact identity: bootstrap counts = moments of the resample
                _assert_moments_close(m[i, j], _numpy_moments(xs, ys), rtol=1e-10, atol=1e-12)

    def test_unit_weights_equal_moments(self):
        rng = np.random.default_rng(33)
        x, y = rng.normal(size=40), rng.normal(size=40)
        a, b = weighted_moments(x, y, np.ones(40)), moments(x, y)
        for key in ("n", "mean_x", "mean_y", "sxx", "syy", "sxy"):
            # exact identity: weights of one are the plain sample
            assert_allclose(getattr(a, key), getattr(b, key), rtol=1e-12, atol=1e-14, err_msg=key)


_finite = st.floats(min_value=-1e3, max_value=1e3, allow_nan=False, allow_infinity=False)


class TestCorrelationProperty:
    @settings(max_examples=200, deadline=None)
    @given(data=arrays(np.float64, st.tuples(st.integers(3, 40), st.just(2)), elements=_finite))
    def test_r_equals_corrcoef(self, data):
        x, y = data[:, 0], data[:, 1]
        # keep away from (near-)constant columns, where r is 0/0 or pure rounding noise
        assume(np.std(x) > 1e-6 * (1 + np.max(np.abs(x))))
        assume(np.std(y) > 1e-6 * (1 + np.max(np.abs(y))))
        # reference library: numpy.corrcoef
        assert_allclose(moments(x, y).r, np.corrcoef(x, y)[0, 1], rtol=1e-9, atol=1e-9)


# --------------------------------------------------------------------------
# higher sums (sxxx, sxxxx, sxxy): exact merging and the curvature test from moments


def _numpy_higher(x: np.ndarray, y: np.ndarray) -> dict:
    """Reference: the higher centred sums written directly with numpy (two passes)."""
    dx, dy = x - np.mean(x), y - np.mean(y)
    return {"sxxx": np.sum(dx ** 3), "sxxxx": np.sum(dx ** 4), "sxxy": np.sum(dx * dx * dy)}


#: Merged sums agree with the one-pass sums to MERGE_TOL of the sum of the
#: absolute terms (a few hundred float64 rounding errors, eps = 2.2e-16), plus
#: what moving the centres by CENTRE_TOL (1 + |log|) changes: logs near +-12 are
#: stored to about 12 eps = 2.7e-15, so any two ways of computing a mean differ
#: by some eps of the offset, and a centred power inherits that (common
#: practice of rounding-error analysis, no source).
MERGE_TOL = 1e-11
CENTRE_TOL = 1e-13

_POWERS = {"sxx": (2, 0), "syy": (0, 2), "sxy": (1, 1), "sxxx": (3, 0), "sxxxx": (4, 0),
           "sxxy": (2, 1)}


def _tolerance(x: np.ndarray, y: np.ndarray) -> dict:
    """Allowed difference of each sum: the sum of |terms| with the centres moved."""
    shift = CENTRE_TOL * (1 + max(np.max(np.abs(x)), np.max(np.abs(y))))
    dx, dy = np.abs(x - np.mean(x)), np.abs(y - np.mean(y))
    out = {}
    for key, (p, q) in _POWERS.items():
        plain = np.sum(dx ** p * dy ** q)
        moved = np.sum((dx + shift) ** p * (dy + shift) ** q)
        out[key] = MERGE_TOL * plain + (moved - plain) + 1e-300
    return out


class TestHigherMomentMerge:
    @settings(max_examples=150, deadline=None)
    @given(n=st.integers(4, 60), offset=st.sampled_from([-12.0, 0.0, 12.0]),
           spread=st.sampled_from([1e-3, 0.3, 3.0]), seed=st.integers(0, 2**32 - 1),
           n_cuts=st.integers(0, 8), n_groups=st.integers(1, 4))
    def test_any_split_merges_to_the_one_pass_sums(self, n, offset, spread, seed, n_cuts,
                                                   n_groups):
        from scaling.stats.moments import combine_moments, merge_moments
        rng = np.random.default_rng(seed)
        # logs near -12, 0 or +12 (data near 1e-12, 1 or 1e12)
        x = offset + spread * rng.standard_normal(n)
        y = -offset + 0.7 * (x - offset) + spread * rng.standard_normal(n)
        labels = rng.integers(0, n_groups, n)
        cuts = np.sort(rng.integers(0, n + 1, n_cuts))
        pieces = np.split(np.arange(n), cuts)
        one = group_moments(x, y, labels, n_groups=n_groups, higher=True)
        running = None
        parts, part_codes = [], []
        for idx in pieces:
            m = group_moments(x[idx], y[idx], labels[idx], n_groups=n_groups, higher=True)
            running = m if running is None else merge_moments(running, m)
            parts.append(m)
            part_codes.append(np.arange(n_groups))
        stacked = Moments(**{k: np.concatenate([getattr(p, k) for p in parts])
                             for k in ("n", "mean_x", "mean_y", "sxx", "syy", "sxy",
                                       "sxxx", "sxxxx", "sxxy")})
        combined = combine_moments(stacked, np.concatenate(part_codes), n_groups=n_groups)
        for g in range(n_groups):
            sel = labels == g
            if not sel.any():
                continue
            ref = {**_numpy_higher(x[sel], y[sel])}
            tol = _tolerance(x[sel], y[sel])
            for merged in (running, combined, one):
                for key, value in ref.items():
                    # reference library: numpy sums of centred powers, two passes
                    assert abs(getattr(merged, key)[g] - value) <= tol[key], key
                for key in ("sxx", "syy", "sxy"):
                    # internal consistency: the second-order sums merge as before
                    assert abs(getattr(merged, key)[g] - getattr(one, key)[g]) <= tol[key], key

    def test_merge_without_higher_sums_keeps_old_behaviour(self):
        from scaling.stats.moments import merge_moments
        rng = np.random.default_rng(3)
        x, y = rng.normal(size=20), rng.normal(size=20)
        a, b = moments(x[:7], y[:7]), moments(x[7:], y[7:])
        m = merge_moments(a, b)
        assert m.sxxx is None and not m.has_higher
        # reference library: numpy sums of the whole sample
        _assert_moments_close(m, _numpy_moments(x, y), rtol=1e-12)


class TestCurvatureFromMoments:
    def _data(self, offset=0.0, n=300, seed=5):
        rng = np.random.default_rng(seed)
        x = offset + rng.uniform(0, 4, n)
        c = x - offset
        y = 1.0 + 0.75 * c + 0.04 * c * c + rng.normal(0, 0.2, n)
        return x, y

    def test_equals_statsmodels_quadratic_ols(self):
        import statsmodels.api as sm
        from scaling.stats.moment_curvature import quadratic_from_moments
        from scaling.stats.grouped_fits import MomentAccumulator
        x, y = self._data()
        acc = MomentAccumulator()     # chunked, as the large-data road reads
        import pandas as pd
        for start in range(0, x.size, 37):
            sl = slice(start, start + 37)
            acc.add_rows(pd.Index([""]), None, x[sl], y[sl], None, None)
        q = quadratic_from_moments(acc.result(None).moments)
        fit = sm.OLS(y, np.column_stack([np.ones(x.size), x, x * x])).fit()
        # reference library: statsmodels OLS of Y on (1, X, X^2)
        assert_allclose(q["quadratic"][0], fit.params[2], rtol=1e-9)
        assert_allclose(q["linear"][0], fit.params[1], rtol=1e-9)
        assert_allclose(q["intercept"][0], fit.params[0], rtol=1e-9)
        assert_allclose(q["quadratic_se"][0], fit.bse[2], rtol=1e-9)
        assert_allclose(q["statistic"][0], fit.tvalues[2], rtol=1e-9)
        assert_allclose(q["p_value"][0], fit.pvalues[2], rtol=1e-9)
        assert q["df"][0] == fit.df_resid

    def test_equals_the_in_memory_test_far_from_zero(self):
        from scaling.stats.moment_curvature import quadratic_from_moments
        from scaling.stats.moments import combine_moments
        from scaling.stats.residual_checks import quadratic_t
        for offset in (-12.0, 12.0):
            x, y = self._data(offset=offset, n=250, seed=9)
            labels = np.arange(x.size) % 5         # five parts, merged
            parts = group_moments(x, y, labels, higher=True)
            m = combine_moments(parts, np.zeros(5, dtype=np.intp), n_groups=1)
            q = quadratic_from_moments(m)
            ref = quadratic_t(x, y)
            # internal consistency: the in-memory road's curvature test on the rows
            for key in ("quadratic", "linear", "quadratic_se", "statistic", "p_value"):
                assert_allclose(q[key][0], ref[key], rtol=1e-9, err_msg=f"{key} at {offset}")

    def test_common_quadratic_with_group_elevations_equals_statsmodels(self):
        import statsmodels.api as sm
        from scaling.stats.moment_curvature import within_quadratic_from_moments
        from scaling.stats.moments import combine_moments
        from scaling.stats.residual_checks import within_quadratic_t
        rng = np.random.default_rng(21)
        sizes = (12, 40, 7, 90)
        g = np.repeat(np.arange(4), sizes)
        for offset in (0.0, 12.0):
            x = offset + rng.uniform(0, 3, g.size) + 0.4 * g
            c = x - offset
            y = 0.2 * g + 0.7 * c + 0.05 * c * c + rng.normal(0, 0.1, g.size)
            # each group read in two parts and merged, as chunks are
            half = (np.arange(g.size) % 2) + 2 * g
            parts = group_moments(x, y, half, n_groups=8, higher=True)
            m = combine_moments(parts, np.arange(8) // 2, n_groups=4)
            q = within_quadratic_from_moments(m)
            ref = within_quadratic_t(x, y, g)
            for key in ("linear", "quadratic", "quadratic_se", "statistic", "p_value", "df"):
                # internal consistency: the in-memory parallel-lines curvature test
                assert_allclose(q[key], ref[key], rtol=1e-9, err_msg=f"{key} at {offset}")
            if offset == 0.0:
                dummies = (g[:, None] == np.arange(4)).astype(float)
                design = np.column_stack([dummies, x, x * x])
                fit = sm.OLS(y, design).fit()
                # reference library: statsmodels OLS with one dummy per group
                assert_allclose(q["quadratic"], fit.params[5], rtol=1e-9)
                assert_allclose(q["linear"], fit.params[4], rtol=1e-9)
                assert_allclose(q["statistic"], fit.tvalues[5], rtol=1e-9)
                assert_allclose(q["df"], fit.df_resid)


@pytest.mark.parametrize("higher", [False, True])
def test_indexing_takes_every_sum_at_the_index(higher):
    # internal consistency: m[i] is each field indexed by i (higher sums only when all
    # three are carried)
    rng = np.random.default_rng(11)
    x, y = rng.normal(size=60), rng.normal(size=60)
    m = group_moments(x, y, rng.integers(0, 5, 60), n_groups=5, higher=higher)
    for index in (0, 4, -1, slice(1, 3), np.array([3, 0])):
        part = m[index]
        for name in ("n", "mean_x", "mean_y", "sxx", "syy", "sxy", *HIGHER_KEYS):
            whole = getattr(m, name)
            got = getattr(part, name)
            if whole is None:
                assert got is None
            else:
                assert np.array_equal(got, whole[index])
        assert part.has_higher == higher
    partial = Moments(n=m.n, mean_x=m.mean_x, mean_y=m.mean_y, sxx=m.sxx, syy=m.syy,
                      sxy=m.sxy, sxxx=m.sxx)        # one higher sum alone is not carried
    assert partial[1].sxxx is None and not partial[1].has_higher


def _same_moments(a: Moments, b: Moments) -> None:
    for name in ("n", "mean_x", "mean_y", "sxx", "syy", "sxy", *HIGHER_KEYS):
        va, vb = getattr(a, name), getattr(b, name)
        assert type(va) is type(vb), name
        if va is not None:
            assert np.asarray(va).tobytes() == np.asarray(vb).tobytes(), name   # same bits


@pytest.mark.parametrize("higher", [False, True])
def test_pickled_moments_come_back_bit_for_bit(higher):
    # internal consistency: numpy scalars take the packed road, anything else the
    # dataclass one; both give the same types and bits back
    import pickle
    rng = np.random.default_rng(12)
    x, y = rng.normal(size=40), rng.normal(size=40)
    m = group_moments(x, y, rng.integers(0, 4, 40), n_groups=5, higher=higher)  # group 4 empty
    special = Moments(n=np.float64(2.0), mean_x=np.float64(np.nan), mean_y=np.float64(-0.0),
                      sxx=np.float64(np.inf), syy=np.float64(5e-324), sxy=np.float64(-1e308),
                      **({k: np.float64(-0.0) for k in HIGHER_KEYS} if higher else {}))
    partial = Moments(n=m.n[0], mean_x=m.mean_x[0], mean_y=m.mean_y[0], sxx=m.sxx[0],
                      syy=m.syy[0], sxy=m.sxy[0], sxxx=m.sxx[0])
    mixed = Moments(n=3.0, mean_x=m.mean_x[0], mean_y=m.mean_y[0], sxx=m.sxx[0],
                    syy=m.syy[0], sxy=m.sxy[0])
    zero_d = Moments(**{k: np.asarray(getattr(m, k)[1]) for k in
                        ("n", "mean_x", "mean_y", "sxx", "syy", "sxy")})
    for item in (m, m[0], m[4], special, partial, mixed, zero_d, moments(x, y)):
        for protocol in (2, pickle.HIGHEST_PROTOCOL):
            _same_moments(pickle.loads(pickle.dumps(item, protocol=protocol)), item)
    assert len(pickle.dumps(m[1])) < 200      # nine numbers in one bytes object
