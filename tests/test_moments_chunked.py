"""Moments of many rows, summed a chunk at a time, are the bits of the one-pass sums.

:func:`scaling.stats.moments.group_moments` handles tables longer than its chunk a
chunk at a time (to bound its temporary arrays); each sum carries on from the
previous chunk's in row order, so the result equals the single ``np.bincount`` pass
exactly.  The reference here is that pass, written out (internal consistency).
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_array_equal

import scaling.stats.moments as mom

KEYS = ("n", "mean_x", "mean_y", "sxx", "syy", "sxy")


def one_pass(x, y, labels, n_groups, higher=False):
    """The two-pass moments over all rows at once (no chunks)."""
    n = np.bincount(labels, minlength=n_groups).astype(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        mx = np.bincount(labels, weights=x, minlength=n_groups) / n
        my = np.bincount(labels, weights=y, minlength=n_groups) / n
    dx, dy = x - mx[labels], y - my[labels]
    out = {"n": n, "mean_x": mx, "mean_y": my,
           "sxx": np.bincount(labels, weights=dx * dx, minlength=n_groups),
           "syy": np.bincount(labels, weights=dy * dy, minlength=n_groups),
           "sxy": np.bincount(labels, weights=dx * dy, minlength=n_groups)}
    if higher:
        out |= {"sxxx": np.bincount(labels, weights=dx * dx * dx, minlength=n_groups),
                "sxxxx": np.bincount(labels, weights=(dx * dx) * (dx * dx),
                                     minlength=n_groups),
                "sxxy": np.bincount(labels, weights=dx * dx * dy, minlength=n_groups)}
    return out


@pytest.fixture
def small_chunks(monkeypatch):
    monkeypatch.setattr(mom, "_CHUNK", 7)


@pytest.mark.parametrize("n_groups", [1, 2, 5, 40])
@pytest.mark.parametrize("higher", [False, True])
def test_chunked_group_moments_equal_one_pass_bit_for_bit(small_chunks, n_groups, higher):
    rng = np.random.default_rng(7)
    n = 103   # 15 chunks of 7 rows and a short last one; groups cross chunk ends
    x = rng.normal(size=n) * 2 + 1e6   # a large offset: the centring matters
    y = 0.75 * x + rng.normal(size=n)
    labels = rng.integers(0, n_groups, size=n)
    got = mom.group_moments(x, y, labels, n_groups=n_groups + 1, higher=higher)
    want = one_pass(x, y, labels, n_groups + 1, higher)   # the last group is empty
    for k in want:
        assert_array_equal(getattr(got, k), want[k], err_msg=k)
    assert np.isnan(got.mean_x[-1]) and got.n[-1] == 0


def test_chunked_moments_of_one_sample_equal_one_pass(small_chunks):
    rng = np.random.default_rng(3)
    x, y = rng.lognormal(size=50), rng.lognormal(size=50)
    got = mom.moments(x, y, higher=True)
    want = one_pass(x, y, np.zeros(50, dtype=np.intp), 1, higher=True)
    for k in want:
        assert_array_equal(np.atleast_1d(getattr(got, k)), want[k], err_msg=k)
    assert np.ndim(got.sxx) == 0


def test_chunked_moments_carry_nan_and_a_lone_point(small_chunks):
    x = np.arange(30.0)
    y = np.sqrt(x)
    x[11] = np.nan   # NaN spreads to its group only, as in one pass
    labels = np.r_[np.zeros(29, dtype=np.intp), 1]   # group 1: one point
    got = mom.group_moments(x, y, labels, n_groups=2)
    want = one_pass(x, y, labels, 2)
    for k in want:
        assert_array_equal(getattr(got, k), want[k], err_msg=k)
    assert got.sxx[1] == 0.0 and np.isnan(got.sxx[0])


def test_labels_outside_the_groups_take_the_one_pass_road(small_chunks):
    # a label >= n_groups makes bincount's result longer: the chunked sums do not apply
    x = np.arange(20.0)
    labels = np.r_[np.zeros(19, dtype=np.intp), 3]
    got = mom.group_moments(x, x, labels, n_groups=2)
    assert got.n.shape == (4,)


@pytest.mark.parametrize("add_at", [False, True])
@pytest.mark.parametrize("n_groups", [1, 40, 20_000])
def test_carried_sums_equal_one_pass_by_either_scatter(small_chunks, monkeypatch, add_at,
                                                        n_groups):
    # np.add.at (numpy >= 1.25) and np.bincount over seeds and rows both add in row order
    monkeypatch.setattr(mom, "_ADD_AT_IN_ORDER", add_at)
    rng = np.random.default_rng(8)
    n = 211
    x = rng.normal(size=n) * 3 - 2e5
    y = 0.7 * x + rng.normal(size=n)
    x[17] = np.nan                      # a NaN stays in its own group's sums
    labels = rng.integers(0, n_groups, size=n)
    got = mom.group_moments(x, y, labels, n_groups=n_groups, higher=True)
    want = one_pass(x, y, labels, n_groups, higher=True)
    for k in want:
        assert_array_equal(getattr(got, k), want[k], err_msg=k)
