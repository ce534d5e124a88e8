"""Every road of a run writes the same answer.

The roads: rows in memory (``engine: pandas``), chunks of a file above
``data.moments_above_mb`` (a tiny threshold and a small ``data.chunk_size``),
Dask partitions (``engine: dask``), and Dask on a real cluster
(``distributed.LocalCluster`` with two worker processes, its address as
``scheduler``).  Each must write the same Answer (the first section of
summary.md) and the same fits, slope tests, group tests, pairwise tests and
group means, to 1e-9.

Where expected values come from: the in-memory run on the same rows
(internal consistency: one group stage, fed per-group moments summed from
the rows, merged across chunks, or merged across Dask partitions; the same
seed draws the same bootstrap).  The tables are invented (simulations with a
known truth), rows shuffled so that every group is split across chunks and
partitions.

Every column is compared, the back-transformation and accuracy columns of
``fits.csv`` (``a``, ``smearing_factor``, ``see``, ...) included: the moments
path gets them from a second streaming pass over the rows.  The Answer of
the in-memory road may add a sentence about a row that moves it (from
``points_to_check``, where leave-one-out refits need the rows); the
comparison leaves that sentence out.
"""

from __future__ import annotations

import warnings
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from scaling.io.config import config_from_dict
from scaling.render.answer import headline_of
from scaling.run.pipeline import analyse, write_outputs

ROADS = {
    "chunks": {"data": {"moments_above_mb": 1e-6, "chunk_size": 700}},
    "dask": {"engine": "dask", "data": {"chunk_size": 300}},
}
KEYS = {
    "fits": ["scope", "group", "method"],
    "slope_tests": ["scope", "group", "method", "hypothesis"],
    "group_tests": ["method", "test"],
    "pairwise_tests": ["method", "test", "group_a", "group_b"],
    "group_means": ["group"],
}


def _table(sizes, slopes, seed):
    """Invented: group i has sizes[i] rows on log y = c_i + slopes[i] log x + noise."""
    rng = np.random.default_rng(seed)
    parts = []
    for i, (n, b) in enumerate(zip(sizes, slopes)):
        lx = 0.5 + 0.15 * i + rng.normal(0, 0.6, n)
        ly = 0.2 + 0.12 * i + b * lx + rng.normal(0, 0.12, n)
        parts.append(pd.DataFrame({"clade": f"c{i}", "mass": 10 ** lx, "rate": 10 ** ly}))
    df = pd.concat(parts, ignore_index=True)
    # two to three rows per species, each species within one clade
    df["species"] = [f"{g}_s{k // 3 if g != 'c0' else k}" for k, g in
                     enumerate(df["clade"])]
    return df.iloc[rng.permutation(len(df))].reset_index(drop=True)


SHAPES = {
    # groups of 3 to 5000 rows whose slopes differ
    "slopes_differ": dict(sizes=[3, 4, 7, 12, 30, 90, 400, 5000],
                          slopes=[0.6, 0.65, 0.7, 0.75, 0.8, 0.85, 0.9, 1.0], seed=11),
    # one slope, groups at different elevations
    "common_slope": dict(sizes=[3, 5, 8, 25, 150, 800], slopes=[0.75] * 6, seed=12),
}


def _cfg(path, tmp, road: str, **extra):
    data = {"file": str(path), "x": "mass", "y": "rate", "group": "clade",
            **extra.pop("data", {})}
    top = ROADS.get(road, {})
    data.update(top.get("data", {}))
    raw = {"data": data, "model": {"methods": ["ols", "sma", "ma"]},
           "exponents": {"three_quarters": 0.75, "isometry": 1},
           "figures": {"formats": [], "kinds": []}, "diagnostics": {"enabled": False},
           "output": {"dir": str(tmp / road)},
           **{k: v for k, v in top.items() if k != "data"}, **extra}
    return config_from_dict(raw, base_dir=tmp)


def _run(cfg, folder):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return write_outputs(analyse(cfg), folder, force=True)


def _answer(folder) -> str:
    text = (folder / "summary.md").read_text(encoding="utf-8")
    return text.split("## Answer", 1)[1].split("\n## ", 1)[0].strip()


def _without_moves(result) -> str:
    """The in-memory Answer's sentences without the one about a row that moves it."""
    tables = {k: v for k, v in result.tables.items() if k != "points_to_check"}
    return " ".join(headline_of(replace(result, tables=tables)).sentences)


def _same_table(a: pd.DataFrame, b: pd.DataFrame, keys: list, name: str) -> None:
    assert len(a) == len(b), name
    ka = [tuple(map(str, r)) for r in a[keys].itertuples(index=False)]
    kb = [tuple(map(str, r)) for r in b[keys].itertuples(index=False)]
    assert ka == kb, name   # same rows in the same order
    assert set(b.columns) <= set(a.columns), (name, set(b.columns) - set(a.columns))
    for col in b.columns:
        if col in keys:
            continue
        x, y = a[col], b[col]
        if pd.api.types.is_numeric_dtype(x) and pd.api.types.is_numeric_dtype(y):
            # internal consistency: the same numbers from rows and from merged moments
            assert_allclose(x.to_numpy(float), y.to_numpy(float), rtol=1e-9, atol=1e-12,
                            err_msg=f"{name}.{col}")
        else:
            assert (x.fillna("").astype(str).tolist()
                    == y.fillna("").astype(str).tolist()), f"{name}.{col}"


def _same_answer_and_tables(ref, ref_dir, res, res_dir) -> None:
    answer = _answer(ref_dir)
    said = _without_moves(ref)
    assert answer.startswith(said)
    assert _answer(res_dir).split("\n\n")[0] == said
    # the group exponent table under the Answer, when the groups differ
    assert _answer(res_dir).split("\n\n")[1:] == answer.split("\n\n")[1:]
    _same_table(ref.fits, res.fits, KEYS["fits"], "fits")
    _same_table(ref.slope_tests, res.slope_tests, KEYS["slope_tests"], "slope_tests")
    for name in ("group_tests", "pairwise_tests", "group_means"):
        _same_table(ref.tables[name], res.tables[name], KEYS[name], name)


_RUNS: dict = {}


def _runs_of(shape: str, averaged: bool, tmp_path_factory):
    """The three roads' runs of one table shape (built once per module)."""
    if (shape, averaged) in _RUNS:
        return _RUNS[(shape, averaged)]
    tmp = tmp_path_factory.mktemp(shape)
    path = tmp / "table.csv"
    _table(**SHAPES[shape]).to_csv(path, index=False)
    extra = {"data": {"average_within": "species"}} if averaged else {}
    if shape == "common_slope":
        extra["groups"] = {"pairwise_max": 4}     # six groups: pairwise tests skipped
    out = {}
    for road in ("pandas", *ROADS):
        cfg = _cfg(path, tmp, road, **{k: dict(v) for k, v in extra.items()})
        out[road] = (_run(cfg, tmp / road), tmp / road)
    _RUNS[(shape, averaged)] = (shape, averaged, path, tmp, extra, out)
    return _RUNS[(shape, averaged)]


@pytest.fixture(scope="module", params=[("slopes_differ", False), ("common_slope", False),
                                        ("slopes_differ", True)],
                ids=["slopes_differ", "common_slope", "average_within"])
def runs(request, tmp_path_factory):
    return _runs_of(*request.param, tmp_path_factory)


@pytest.fixture(scope="module")
def averaged_runs(tmp_path_factory):
    """The shape with units averaged within groups: it exercises the unit groupby."""
    return _runs_of("slopes_differ", True, tmp_path_factory)


class TestRoadsGiveOneAnswer:
    @pytest.mark.parametrize("road", list(ROADS))
    def test_answer_and_tables_equal_the_in_memory_run(self, runs, road):
        _, _, _, _, _, out = runs
        assert "large_data" in out[road][0].manifest and "large_data" not in \
            out["pandas"][0].manifest
        _same_answer_and_tables(*out["pandas"], *out[road])

    def test_every_scope_and_table_is_there(self, runs):
        shape, _, _, _, _, out = runs
        res = out["chunks"][0]
        assert set(res.fits["scope"]) == {"pooled", "group", "group_means", "common"}
        assert set(res.slope_tests["scope"]) == {"pooled", "group", "group_means", "common"}
        assert set(res.tables["group_tests"]["test"]) == {"slopes_equal", "intercepts_equal",
                                                          "shift_along_axis"}
        # groups of fewer than 100 points: SMA/MA p-values are bootstrap-calibrated
        sma = res.tables["group_tests"].query("method == 'sma'")
        assert sma["p_method"].str.startswith("parametric_bootstrap").all()
        if shape == "slopes_differ":
            assert len(res.tables["pairwise_tests"])       # 8 groups <= pairwise_max
            assert _answer(out["chunks"][1]).startswith("The clades do not share one exponent")
        else:
            assert _answer(out["chunks"][1]).startswith("Within clades, the common SMA")
            assert any("pairwise" in w for w in res.warnings)

    def test_counts_add_up_on_every_road(self, runs):
        _, averaged, path, _, _, out = runs
        n_rows = len(pd.read_csv(path))
        ref = out["pandas"][0]
        for road, (res, folder) in out.items():
            doc = pd.read_json(folder / "results.json", typ="series")
            summary = doc["data_summary"]
            # exact: rows written to the file, none of them bad
            assert summary["rows_read"] == n_rows and summary["rows_dropped"] == 0
            assert summary["points_fitted"] == len(ref.data.points), road
            text = (folder / "summary.md").read_text(encoding="utf-8")
            assert f"Points fitted: {len(ref.data.points)}" in text, road
            assert f"Rows read: {n_rows}" in text
            assert int(res.fits.query("scope == 'pooled'")["n"].iloc[0]) == len(ref.data.points)
            if averaged:
                assert len(ref.data.points) < n_rows
                means = res.tables["group_means"]
                assert int(means["n_rows"].sum()) == n_rows   # exact: every row in a unit


class TestCountsOfDroppedRows:
    def test_points_and_rows_dropped_per_reason_on_the_moments_road(self, tmp_path):
        df = _table([40, 50, 60], [0.7, 0.75, 0.8], seed=5)
        df["mass"] = df["mass"].astype(object)
        df.loc[0:2, "mass"] = np.nan        # 3 missing x
        df.loc[3:4, "rate"] = -2.0          # 2 negative y
        df.loc[5, "species"] = np.nan       # 1 missing unit
        path = tmp_path / "bad.csv"
        df.to_csv(path, index=False)
        extra = {"data": {"average_within": "species"}}
        ref = _run(_cfg(path, tmp_path, "pandas", **extra), tmp_path / "p")
        res = _run(_cfg(path, tmp_path, "chunks", data={"average_within": "species"}),
                   tmp_path / "c")
        # exact by construction: 6 rows dropped, 3 reasons
        counts = res.tables["dropped_counts"].set_index("reason")["rows"]
        assert counts.sum() == 6 and len(counts) == 3
        listed = ref.dropped["reason"].value_counts()
        # internal consistency: the in-memory road lists the same rows one by one
        assert sorted(listed.tolist()) == sorted(counts.tolist())
        assert set(listed.index) == set(counts.index)
        text = (tmp_path / "c" / "summary.md").read_text(encoding="utf-8")
        assert "Rows dropped: 6" in text and f"Points fitted: {len(ref.data.points)}" in text
        assert "| x (mass) is missing | 3 |" in text      # the table of drops by reason
        assert "| y (rate) is negative: no logarithm | 2 |" in text
        _same_table(ref.tables["group_means"], res.tables["group_means"], ["group"],
                    "group_means")

    def test_a_unit_in_two_groups_is_an_error_naming_it(self, tmp_path):
        from scaling.errors import DataError
        df = _table([20, 20], [0.7, 0.8], seed=6)
        df.loc[df["clade"] == "c1", "species"] = "c0_s0"
        path = tmp_path / "two.csv"
        df.to_csv(path, index=False)
        for road in ROADS:
            cfg = _cfg(path, tmp_path, road, data={"average_within": "species"})
            with pytest.raises(DataError, match="species 'c0_s0' appears in more than one"):
                analyse(cfg)


class TestRealCluster:
    def test_local_cluster_gives_the_answer_of_the_pandas_engine(self, averaged_runs):
        shape, averaged, path, tmp, extra, out = averaged_runs
        distributed = pytest.importorskip("distributed")
        with distributed.LocalCluster(n_workers=2, processes=True, threads_per_worker=1,
                                      dashboard_address=None) as cluster:
            cfg = _cfg(path, tmp, "dask", scheduler=cluster.scheduler_address,
                       **{k: dict(v) for k, v in extra.items()})
            res = _run(cfg, tmp / "cluster")
        assert res.manifest["large_data"]["scheduler"].startswith("tcp://")
        _same_answer_and_tables(*out["pandas"], res, tmp / "cluster")


def test_a_mistyped_column_gets_the_same_line_on_every_road(tmp_path):
    # common practice, no source: one error line whatever road the file takes
    import pandas as pd
    from scaling.errors import DataError
    from scaling.run.pipeline import run_config
    path = tmp_path / "t.csv"
    pd.DataFrame({"mass": [1.0, 2.0, 4.0, 8.0], "rate": [1.0, 1.7, 2.9, 4.8]}).to_csv(
        path, index=False)
    said = []
    for above in (1e6, 1e-9):   # in memory, then the moments path
        cfg = {"data": {"file": str(path), "x": "mas", "y": "rate",
                        "moments_above_mb": above}, "figures": {"formats": []}}
        with pytest.raises(DataError) as err:
            run_config(cfg, write=False, quiet=True)
        said.append(str(err.value))
    assert said[0] == said[1]
    assert "did you mean 'mass'?" in said[0]
