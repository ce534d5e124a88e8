"""The moments path's second pass sums the spilled rows in two halves on two cores.

Every check here is internal consistency: the halves summed apart and merged
must give the sequential pass's sums (to the last bits of a float sum taken in
another order), exactly its counts, kept rows and drawn points, and the same bits
whether the second half was summed in a forked child or in the run's process.
The sequential pass is itself compared with a second read of the file in
test_row_spill.py and with the in-memory road in test_second_pass.py.
"""

from __future__ import annotations

import dataclasses
import os
import sys

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from pandas.testing import assert_frame_equal

from scaling.io.config import config_from_dict
from scaling.render import figure_worker
from scaling.run import background, second_pass_halves
from scaling.run.moments_path import moments_stage
from scaling.run.pipeline import run_config
from scaling.run.second_pass import DrawnPoints, residual_sums
from scaling.run.second_pass_halves import MIN_SPLIT_ROWS, split_point

CHUNK = 211
METHODS = ["ols", "sma", "ma"]
#: Relative tolerance of a float sum of ~4000 terms taken in another order: each
#: partial sum rounds once more (a few units of 2**-52 each; observed <= 1e-15).
SUM_RTOL = 1e-12
#: A tail probability near exp(-K/2) carries the statistic's relative error times
#: about K/2 (K ~ 600 for the planted outliers: p ~ 1e-135), so p values get 1e-9,
#: the tolerance of the parity tests with the in-memory road.
P_RTOL = 1e-9

# counts, row numbers and the sign of a sum far from zero: equal whatever the order
_EXACT = ("n", "bp_direction", "cooks_rows", "n_influential", "strong_rows")


@pytest.fixture(scope="module")
def table(tmp_path_factory):
    """About 4000 rows in 7 groups split across chunks, some rows unusable, two planted
    outliers of high leverage so the pooled line has strong points."""
    rng = np.random.default_rng(7)
    n = 4000
    g = rng.integers(0, 7, n)
    lx = rng.uniform(-1, 3, n)
    ly = 0.3 + (0.6 + 0.04 * g) * lx + rng.normal(0, 0.15, n)
    lx[[1234, 2345]], ly[[1234, 2345]] = (8.0, 7.5), (0.0, 9.0)   # far out, off the line
    df = pd.DataFrame({"mass": (10 ** lx).astype(object), "rate": (10 ** ly).astype(object),
                       "clade": [f"g{k}" for k in g]})
    df.loc[[3, 800, 2801], "mass"] = -2.0          # no logarithm
    df.loc[[10, 211, 3999], "rate"] = "n/a"        # not a number
    path = tmp_path_factory.mktemp("halves") / "t.csv"
    df.to_csv(path, index=False)
    return path


def _cfg(path, group="clade", **data):
    return config_from_dict({
        "data": {"file": str(path), "x": "mass", "y": "rate", "group": group,
                 "moments_above_mb": 1e-9, "chunk_size": CHUNK, **data},
        "model": {"methods": METHODS}, "exponents": {"three_quarters": 0.75},
        "prediction": {"x": [1, 30]}, "figures": {"formats": []}})


@pytest.fixture(scope="module")
def cfg(table):
    return _cfg(table)


@pytest.fixture(scope="module")
def stage(cfg):
    """The first pass of the table, its rows spilled (read again by every test)."""
    path = moments_stage(cfg, "test")
    yield path
    path.spill.close()


class _Recorder(background.Background):
    """Background that remembers whether it forked and which child it made."""

    made: list = []

    def __init__(self, fn, *args):
        super().__init__(fn, *args)
        _Recorder.made.append(self._pid)


@pytest.fixture
def recorded(monkeypatch):
    _Recorder.made = []
    monkeypatch.setattr(second_pass_halves, "Background", _Recorder)
    return _Recorder.made


def _sums(cfg, stage, drawn=None):
    """The second pass's sums over the spill (and the points drawn, into ``drawn``)."""
    acc, between, _, _ = residual_sums(cfg, stage.moments, stage.fits, METHODS, 10.0, "sma",
                                       stage.spill, drawn)
    return acc.result(), between


def _split_small(monkeypatch, split: bool = True) -> None:
    """Split this small spill (or never split) by moving the threshold."""
    monkeypatch.setattr(second_pass_halves, "MIN_SPLIT_ROWS", 100 if split else 10 ** 12)


def _assert_same_bits(a, b) -> None:
    for f in dataclasses.fields(a):
        assert_array_equal(getattr(a, f.name), getattr(b, f.name), err_msg=f.name)


class TestWhereTheSpillIsCut:
    def test_a_range_of_spilled_chunks_is_that_slice_of_all(self, stage):
        every = list(stage.spill.chunks())
        assert stage.spill.chunk_sizes() == [c.X.size for c in every]
        # chunks with and without stored row numbers (rows dropped or not) precede the cut
        assert {c.rows[-1] - c.rows[0] + 1 == c.X.size for c in every[:9]} == {True, False}
        for start, stop in ((0, 3), (9, None), (4, 11), (len(every) - 1, None)):
            part = list(stage.spill.chunks(start, stop))
            assert len(part) == len(every[start:stop])
            for a, b in zip(part, every[start:stop]):
                for name in ("X", "Y", "codes", "rows"):
                    assert_array_equal(getattr(a, name), getattr(b, name))
                assert a.labels.equals(b.labels)

    def test_the_cut_is_the_chunk_boundary_nearest_half_the_rows(self):
        # by hand: cumulative rows before each cut against half of the total
        assert split_point([300_000, 300_000]) == 1
        assert split_point([100_000] * 4) == 2
        assert split_point([500_000, 100_000, 100_000]) == 1   # 5e5 of 7e5 beats 6e5
        assert split_point([100_000, 100_000, 500_000]) == 2   # 2e5 of 7e5 beats 1e5
        assert split_point([100_000, 200_000, 100_000]) == 1   # 1e5 and 3e5 tie: the earlier

    def test_a_small_spill_or_a_single_chunk_is_not_cut(self):
        assert split_point([MIN_SPLIT_ROWS - 1, 1]) == 1
        assert split_point([MIN_SPLIT_ROWS // 2, MIN_SPLIT_ROWS // 2 - 1]) is None
        assert split_point([10 * MIN_SPLIT_ROWS]) is None
        assert split_point([]) is None


class TestHalvesEqualOneSequentialPass:
    def test_sums_counts_and_kept_rows_match(self, cfg, stage, monkeypatch, recorded):
        _split_small(monkeypatch, split=False)
        seq, seq_between = _sums(cfg, stage)
        assert recorded == []
        _split_small(monkeypatch)
        halves, halves_between = _sums(cfg, stage)
        assert len(recorded) == 1
        for f in dataclasses.fields(seq):
            a, b = getattr(seq, f.name), getattr(halves, f.name)
            if f.name in _EXACT:
                assert_array_equal(a, b, err_msg=f.name)
            else:   # internal consistency: one float sum in another order
                rtol = P_RTOL if f.name.endswith("_p") else SUM_RTOL
                assert_allclose(a, b, rtol=rtol, atol=0, err_msg=f.name)
        assert {1235, 2346} <= set(seq.strong_rows[0])     # the planted rows (1-based) kept
        assert (seq.cooks_rows >= 0).all()
        assert seq_between.n.sum() == halves_between.n.sum() == seq.n[0]
        for key, value in seq_between.anova().items():
            assert halves_between.anova()[key] == pytest.approx(value, rel=SUM_RTOL)

    @pytest.mark.parametrize("every", [True, False])
    def test_the_points_drawn_are_the_same(self, cfg, stage, monkeypatch, recorded, every):
        n = int(stage.moments.pooled.n[0])
        positions = None if every else np.arange(5, n, 37)

        def drawn():
            return DrawnPoints(n, stage.moments.labels, 10.0, positions=positions)

        _split_small(monkeypatch, split=False)
        one = drawn()
        _sums(cfg, stage, one)
        _split_small(monkeypatch)
        two = drawn()
        _sums(cfg, stage, two)
        assert len(recorded) == 1
        assert one.seen == two.seen == n
        assert len(two.table()) == (n if every else positions.size)
        assert_frame_equal(one.table(), two.table())


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="forks on Linux only")
class TestForkedOrNotTheSameBits:
    def test_a_forked_child_and_the_run_process_give_the_same_bits(
            self, cfg, stage, monkeypatch, recorded):
        _split_small(monkeypatch)
        monkeypatch.setattr(background, "one_process", lambda: False)
        forked, forked_between = _sums(cfg, stage)
        monkeypatch.setattr(background, "one_process", lambda: True)
        here, here_between = _sums(cfg, stage)
        assert recorded[0] is not None and recorded[1] is None   # forked, then not
        _assert_same_bits(forked, here)
        assert forked_between.anova() == here_between.anova()

    def test_the_process_setting_forbids_the_fork_and_keeps_the_bits(
            self, cfg, stage, monkeypatch, recorded):
        _split_small(monkeypatch)
        monkeypatch.setattr(background, "one_process", lambda: False)
        forked, _ = _sums(cfg, stage)
        monkeypatch.setattr(background, "one_process", figure_worker.one_process)
        monkeypatch.setenv("SCALING_ONE_PROCESS", "1")
        here, _ = _sums(cfg, stage)
        assert recorded[1] is None
        _assert_same_bits(forked, here)

    @pytest.mark.parametrize("how", ["dies", "raises"])
    def test_a_failing_child_is_summed_in_the_run_process(self, cfg, stage, monkeypatch,
                                                          recorded, how):
        _split_small(monkeypatch)
        monkeypatch.setattr(background, "one_process", lambda: True)
        n = int(stage.moments.pooled.n[0])

        def drawn():
            return DrawnPoints(n, stage.moments.labels, 10.0, positions=np.arange(3, n, 11))

        expected_points = drawn()
        expected, _ = _sums(cfg, stage, expected_points)
        run = os.getpid()
        real = second_pass_halves.half_sums

        def failing_in_child(*args):
            if os.getpid() != run:
                if how == "dies":
                    os._exit(3)
                raise MemoryError("the child ran out")
            return real(*args)

        monkeypatch.setattr(second_pass_halves, "half_sums", failing_in_child)
        monkeypatch.setattr(background, "one_process", lambda: False)
        points = drawn()
        got, _ = _sums(cfg, stage, points)
        assert recorded[-1] is not None      # it did fork
        _assert_same_bits(expected, got)
        assert_frame_equal(points.table(), expected_points.table())

    def test_the_child_is_gone_when_the_run_process_fails(self, cfg, stage, monkeypatch,
                                                          recorded):
        _split_small(monkeypatch)
        monkeypatch.setattr(background, "one_process", lambda: False)

        class Broken(DrawnPoints):
            def add(self, *args, **kwargs):
                raise KeyError("drawing failed")

        with pytest.raises(KeyError):
            _sums(cfg, stage, Broken(10, stage.moments.labels, 10.0))
        pid = recorded[-1]
        assert pid is not None
        with pytest.raises(ChildProcessError):      # killed and reaped already
            os.waitpid(pid, os.WNOHANG)


class TestSmallSpillsStayInOneProcess:
    def test_below_the_threshold_nothing_is_forked(self, cfg, stage, monkeypatch, recorded):
        assert int(stage.moments.pooled.n[0]) < MIN_SPLIT_ROWS
        _sums(cfg, stage)
        assert recorded == []

    def test_a_whole_run_is_the_same_split_or_not(self, table, monkeypatch, recorded):
        cfg = {"data": {"file": str(table), "x": "mass", "y": "rate", "group": "clade",
                        "moments_above_mb": 1e-9, "chunk_size": CHUNK},
               "model": {"methods": METHODS}, "exponents": {"three_quarters": 0.75},
               "prediction": {"x": [1, 30]}, "figures": {"formats": []}}
        _split_small(monkeypatch, split=False)
        one = run_config(cfg, write=False, quiet=True)
        _split_small(monkeypatch)
        two = run_config(cfg, write=False, quiet=True)
        assert len(recorded) == 1
        assert one.messages == two.messages
        assert_frame_equal(one.fits, two.fits, check_exact=False, rtol=SUM_RTOL)
        for name in ("predictions", "diagnostics", "points_to_check"):
            assert_frame_equal(one.tables[name], two.tables[name], check_exact=False,
                               rtol=SUM_RTOL)
