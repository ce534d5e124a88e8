"""The moments path draws the figures of the in-memory run.

A run with a tiny ``data.moments_above_mb`` (every file takes the moments path) and a
small ``data.chunk_size`` (groups split across chunks) never holds its points: its
second pass picks the points the figures draw while the rows stream past.  On tables
that fit in memory it is compared with the ordinary run of the same config, which is
the reference (internal consistency): the points picked, the SVG text of each figure,
and the counts written.
"""

from __future__ import annotations

import io
import json
import re

import numpy as np
import pandas as pd
import pytest

from scaling.render.figure_style import MAX_DRAWN_POINTS, save_figure, thinned_index
from scaling.render.figures import make_figure
from scaling.render.thinning import DRAWN_TABLE, subset_index
from scaling.run.pipeline import run_config
from scaling.run.second_pass import DrawnPoints

KINDS = ("scaling", "natural", "exponents", "residuals")


def _table(path, n: int, *, seed: int = 7):
    """``n`` rows in three clades (slopes differ a little), shuffled so that every
    clade is split across chunks; one row dropped (negative rate), one unit column of
    three rows each within a clade."""
    rng = np.random.default_rng(seed)
    clade = rng.choice(["a", "b", "c"], n)
    lx = rng.uniform(0, 3, n)
    slope = np.where(clade == "a", 0.72, np.where(clade == "b", 0.75, 0.78))
    ly = 0.2 + slope * lx + rng.normal(0, 0.15, n)
    df = pd.DataFrame({"mass": 10 ** lx, "rate": 10 ** ly, "clade": clade})
    # three rows per animal, in its clade, the animal's rows spread over the file
    df["animal"] = df["clade"] + "-" + (df.groupby("clade").cumcount() // 3).astype(str)
    df.loc[5, "rate"] = -1.0
    df.to_csv(path, index=False)
    return path


def _run(path, *, large: bool, group: bool = True, engine: str = "pandas", out=None,
         kinds=KINDS, **data):
    d = {"file": str(path), "x": "mass", "y": "rate", "chunk_size": 97,
         "moments_above_mb": 1e-9 if large else 1e6, **data}
    if group:
        d["group"] = "clade"
    cfg = {"data": d, "engine": engine, "model": {"methods": ["ols", "sma"]},
           "exponents": {"three_quarters": 0.75}, "prediction": {"x": [10, 300]},
           "figures": {"formats": ["svg"] if out else [], "kinds": list(kinds)}}
    if out is None:
        return run_config(cfg, write=False, quiet=True)
    return run_config(cfg, out=out, quiet=True)


def _svg(result, kind: str) -> str:
    """The figure's SVG text; clip-path ids (a hash of each clip box to the last bit,
    which 1e-15 differences in the fitted numbers change) made neutral."""
    buf = io.BytesIO()
    save_figure(make_figure(result, kind), buf, "svg", 150)
    text = buf.getvalue().decode()
    return re.sub(r"\bp[0-9a-f]{10}\b", "clip", text)


def _expected_points(memory) -> pd.DataFrame:
    pts = memory.data.points
    keep = thinned_index(len(pts))
    return pts if keep is None else pts.iloc[keep]


def _assert_same_points(picked: pd.DataFrame, expected: pd.DataFrame) -> None:
    # exact: the same rows of the file, in the same order, with the same logs
    assert len(picked) == len(expected) == min(len(expected), MAX_DRAWN_POINTS)
    np.testing.assert_array_equal(picked["row"].to_numpy(), expected["row"].to_numpy())
    np.testing.assert_array_equal(picked["log_x"].to_numpy(), expected["log_x"].to_numpy())
    np.testing.assert_array_equal(picked["log_y"].to_numpy(), expected["log_y"].to_numpy())
    if "group" in expected:
        np.testing.assert_array_equal(picked["group"].to_numpy(dtype=str),
                                      expected["group"].to_numpy(dtype=str))
    # natural units: the value read, or base ** log where only the log was kept (the
    # first pass's spill), within a few units in the last place
    for c in ("x", "y"):
        np.testing.assert_allclose(picked[c].to_numpy(), expected[c].to_numpy(),
                                   rtol=4e-15)


@pytest.fixture(scope="module")
def small(tmp_path_factory):
    return _table(tmp_path_factory.mktemp("few") / "few.csv", 600)


@pytest.fixture(scope="module")
def large(tmp_path_factory):
    return _table(tmp_path_factory.mktemp("many") / "many.csv", 6500, seed=8)


@pytest.fixture(scope="module")
def large_runs(large):
    """The grouped table above the limit on both roads."""
    return {"memory": _run(large, large=False), "moments": _run(large, large=True)}


class TestPointsPicked:
    def test_positions_picked_chunk_by_chunk_are_the_subset(self):
        # internal consistency: the positions subset_index picks among all n, found
        # chunk by chunk with one searchsorted each
        n = 12_345
        drawn = DrawnPoints(n)
        X = np.arange(n, dtype=float)
        for lo in range(0, n, 1000):
            part = X[lo:lo + 1000]
            drawn.add(part, part, part.astype(np.int64))
        np.testing.assert_array_equal(drawn.table()["row"].to_numpy(), subset_index(n))
        assert subset_index(MAX_DRAWN_POINTS) is None
        np.testing.assert_array_equal(thinned_index(n), subset_index(n))

    @pytest.mark.parametrize("group", [True, False])
    def test_above_the_limit_the_seeded_subset_of_the_points(self, large, large_runs, group):
        if group:
            memory, moments = large_runs["memory"], large_runs["moments"]
        else:
            memory = _run(large, large=False, group=group)
            moments = _run(large, large=True, group=group)
        assert len(memory.data.points) == 6499 > MAX_DRAWN_POINTS   # one row dropped
        assert len(moments.data.points) == 0       # no stage thinks it holds the points
        _assert_same_points(moments.tables[DRAWN_TABLE], _expected_points(memory))

    def test_unit_means_in_row_order(self, small):
        memory = _run(small, large=False, average_within="animal")
        moments = _run(small, large=True, average_within="animal")
        # exact count: one point per animal with a usable row (of the file's column)
        table = pd.read_csv(small)
        assert len(memory.data.points) == table.loc[table["rate"] > 0, "animal"].nunique()
        assert len(memory.data.points) < len(table) / 2
        picked = moments.tables[DRAWN_TABLE]
        expected = _expected_points(memory)
        np.testing.assert_array_equal(picked["unit"].to_numpy(dtype=str),
                                      expected["unit"].to_numpy(dtype=str))
        # the unit means' logs: the moments path sums the rows chunk by chunk, the
        # in-memory road averages them with pandas (equal to rounding)
        np.testing.assert_array_equal(picked["row"].to_numpy(), expected["row"].to_numpy())
        for c in ("log_x", "log_y", "x", "y"):
            np.testing.assert_allclose(picked[c].to_numpy(), expected[c].to_numpy(),
                                       rtol=1e-13)

    def test_no_point_figure_no_points_kept(self, small):
        cfg = {"data": {"file": str(small), "x": "mass", "y": "rate", "group": "clade",
                        "moments_above_mb": 1e-9, "chunk_size": 97},
               "figures": {"formats": [], "kinds": ["exponents"]}}
        assert DRAWN_TABLE not in run_config(cfg, write=False, quiet=True).tables


class TestFiguresOfBothRoads:
    @pytest.mark.parametrize("group", [True, False])
    def test_every_figure_is_the_in_memory_one(self, small, group):
        memory = _run(small, large=False, group=group)
        moments = _run(small, large=True, group=group)
        assert moments.config.figures.kinds == memory.config.figures.kinds == KINDS
        for kind in KINDS:
            assert _svg(moments, kind) == _svg(memory, kind), kind

    def test_written_files_are_the_in_memory_ones(self, small, tmp_path):
        # the files a run writes come from the figure processes, which are sent a cut
        # of the run (figure_worker.figure_view): the moments path's picked points
        # must reach them too (internal consistency: the in-memory run's files)
        texts = {}
        for large in (False, True):
            out = tmp_path / f"large_{large}"
            _run(small, large=large, out=out)
            texts[large] = {kind: re.sub(r"\bp[0-9a-f]{10}\b", "clip", (
                out / "figures" / f"{kind}.svg").read_text(encoding="utf-8"))
                for kind in KINDS}
        for kind in KINDS:
            assert texts[True][kind] == texts[False][kind], kind

    def test_with_unit_means(self, small):
        memory = _run(small, large=False, average_within="animal")
        moments = _run(small, large=True, average_within="animal")
        for kind in KINDS:
            assert _svg(moments, kind) == _svg(memory, kind), kind

    def test_above_the_limit_only_the_normal_quantiles_differ(self, large_runs):
        memory, moments = large_runs["memory"], large_runs["moments"]
        for kind in ("scaling", "natural"):
            assert _svg(moments, kind) == _svg(memory, kind), kind
        # the normal-quantile panels rank the drawn points among themselves: said once
        said = [w for w in moments.warnings if "normal-quantile" in w]
        assert len(said) == 1 and "6\u2009499 residuals" in said[0]
        assert not [w for w in memory.warnings if "normal-quantile" in w]

    def test_no_note_of_figures_left_out(self, small):
        moments = _run(small, large=True)
        assert not [w for w in moments.warnings if "not drawn" in w or "Figures" in w]

    def test_picked_points_stay_out_of_the_runs_repr(self, small):
        moments = _run(small, large=True)
        assert DRAWN_TABLE in moments.tables and DRAWN_TABLE not in repr(moments)
        assert "group_means" in repr(moments)


class TestCountsUnchanged:
    def test_results_summary_and_files_count_every_point(self, large, tmp_path):
        moments = _run(large, large=True, out=tmp_path / "big", kinds=["scaling"])
        doc = json.loads((tmp_path / "big" / "results.json").read_text(encoding="utf-8"))
        # exact: 6500 rows read, one dropped; the points picked (5000) are not counted
        assert doc["data_summary"]["points_fitted"] == 6499
        assert doc["data_summary"]["rows_read"] == 6500
        assert not [k for k in doc if "drawn" in k]
        assert not list((tmp_path / "big").glob("*drawn*"))
        pooled = moments.fits[moments.fits["scope"] == "pooled"]["n"]
        assert (pooled == 6499).all()
        assert [p.name for p in (tmp_path / "big" / "figures").glob("*.svg")] == [
            "scaling.svg"]
        # the report's data section counts every point, not the ones drawn
        html = (tmp_path / "big" / "report.html").read_text(encoding="utf-8")
        assert "Points fitted: 6499" in html


class TestDask:
    def test_partitions_pick_the_same_points_in_one_read(self, small, large, large_runs,
                                                          monkeypatch):
        pytest.importorskip("dask.dataframe")
        from scaling.run import second_pass
        further = []   # partitions read once more to pick points
        plain = second_pass._partition_drawn
        monkeypatch.setattr(second_pass, "_partition_drawn",
                            lambda *a: further.append(1) or plain(*a))
        # chunk_size 97: Dask blocks of 64 kB, several partitions over each file; all
        # points (600), or a subset (of 6499) placed by the first pass's count of each
        # partition, picked in the second pass's one read of the partitions
        few = _run(small, large=True, engine="dask")
        _assert_same_points(few.tables[DRAWN_TABLE],
                            _expected_points(_run(small, large=False)))
        many = _run(large, large=True, engine="dask")
        _assert_same_points(many.tables[DRAWN_TABLE],
                            _expected_points(large_runs["memory"]))
        assert not further
        assert _svg(few, "scaling") == _svg(_run(small, large=False), "scaling")

    def test_partitions_without_counts_are_read_again_for_their_points(
            self, large, large_runs, monkeypatch):
        pytest.importorskip("dask.dataframe")
        from scaling.run import moments_path, second_pass
        plain_read = moments_path.read_moments
        monkeypatch.setattr(moments_path, "read_moments",   # a first pass that counts none
                            lambda *a, **k: plain_read(*a, **{**k, "partition_points": None}))
        further = []
        plain = second_pass._partition_drawn
        monkeypatch.setattr(second_pass, "_partition_drawn",
                            lambda *a: further.append(1) or plain(*a))
        many = _run(large, large=True, engine="dask")
        _assert_same_points(many.tables[DRAWN_TABLE],
                            _expected_points(large_runs["memory"]))
        assert further
