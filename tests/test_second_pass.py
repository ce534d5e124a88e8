"""The moments path's second pass writes what the in-memory road writes from the rows.

On a table that fits in memory, a run with a tiny ``data.moments_above_mb``
(every file takes the moments path) and a small ``data.chunk_size`` (groups
split across chunks) is compared with the ordinary run of the same config:
the in-memory road is the reference (internal consistency), itself checked
against scipy and statsmodels in test_diagnostics.py and test_predict.py.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from scaling.run.pipeline import run_config
from scaling.stats.schema import FIT_ACCURACY_COLUMNS
from scaling.stats.streaming_residuals import TOP_K

SIZES = (3, 5, 40, 120, 6000)   # about 250 kB: several Dask partitions


@pytest.fixture(scope="module")
def table(tmp_path_factory):
    rng = np.random.default_rng(20)
    parts = []
    for g, n in enumerate(SIZES):
        lx = rng.uniform(0, 3, n)
        curve = 0.05 * lx * lx if g == 3 else 0.0      # one group bends
        ly = 0.4 + (0.7 + 0.03 * g) * lx + curve + rng.normal(0, 0.12 * (1 + 0.3 * lx), n)
        parts.append(pd.DataFrame({"mass": 10 ** lx, "rate": 10 ** ly, "clade": f"c{g}"}))
    # one far point off the line: strong in the pooled line (Cook's distance > 1)
    parts.append(pd.DataFrame({"mass": [1e8], "rate": [10 ** 2.0], "clade": ["c4"]}))
    df = pd.concat(parts).sample(frac=1, random_state=3).reset_index(drop=True)
    df.loc[7, "rate"] = -1.0                            # one dropped row, counted
    path = tmp_path_factory.mktemp("second") / "t.csv"
    df.to_csv(path, index=False)
    return path


def _run(path, *, large: bool, engine: str = "pandas", chunk_size: int = 61, **data):
    """The run of ``path`` in memory or (``large``) on the moments path; ``data``: more
    ``data`` keys."""
    cfg = {"data": {"file": str(path), "x": "mass", "y": "rate", "group": "clade", **data,
                    "moments_above_mb": 1e-9 if large else 1e6, "chunk_size": chunk_size},
           "engine": engine, "model": {"methods": ["ols", "sma", "ma"]},
           "exponents": {"three_quarters": 0.75},
           "prediction": {"x": [1, 30, 5000], "y": [10, 100]},
           "figures": {"formats": []}}
    return run_config(cfg, write=False, quiet=True)


@pytest.fixture(scope="module")
def runs(table):
    return {"memory": _run(table, large=False), "moments": _run(table, large=True)}


def _keyed(frame, keys, scopes=("pooled", "group")):
    part = frame[frame["scope"].isin(scopes)]
    return part.set_index(keys).sort_index()


def test_correction_columns_equal_the_in_memory_road(runs):
    mem = _keyed(runs["memory"].fits, ["scope", "group", "method"])
    mom = _keyed(runs["moments"].fits, ["scope", "group", "method"])
    assert list(runs["moments"].fits.columns) == list(runs["memory"].fits.columns)
    assert mem.index.equals(mom.index)
    for col in FIT_ACCURACY_COLUMNS + ["a", "a_low", "a_high"]:
        # internal consistency: the same factors from the rows held in memory
        assert_allclose(mom[col].to_numpy(float), mem[col].to_numpy(float), rtol=1e-9,
                        err_msg=col)


def test_predictions_equal_the_in_memory_road(runs):
    for name, keys in (("predictions", ["scope", "group", "method", "x"]),
                       ("inverse_predictions", ["scope", "group", "method", "y"])):
        mem = _keyed(runs["memory"].tables[name], keys)
        mom = _keyed(runs["moments"].tables[name], keys)
        assert mem.index.equals(mom.index) and list(mem.columns) == list(mom.columns)
        for col in mem.columns:
            if mem[col].dtype.kind == "f":
                # internal consistency: predictions from the same fits and factors
                assert_allclose(mom[col].to_numpy(), mem[col].to_numpy(), rtol=1e-9,
                                err_msg=f"{name}.{col}")
            else:
                assert (mom[col] == mem[col]).all(), f"{name}.{col}"


def test_curvature_equals_the_in_memory_road(runs):
    keys = ["scope", "group", "exponent"]
    mem = _keyed(runs["memory"].tables["curvature"], keys)
    mom = _keyed(runs["moments"].tables["curvature"], keys)
    assert mem.index.equals(mom.index)
    for col in ("n", "quadratic", "quadratic_se", "statistic", "df", "p_value",
                "exponent_at_x_min", "exponent_at_x_max", "x_at_exponent"):
        # internal consistency: the quadratic term fitted to the rows
        assert_allclose(mom[col].to_numpy(float), mem[col].to_numpy(float), rtol=1e-9,
                        err_msg=col)
    assert (mom["within_data"] == mem["within_data"]).all()


def test_diagnostic_rows_match_except_the_normality_test(runs):
    keys = ["scope", "group", "method", "check"]
    mem = _keyed(runs["memory"].tables["diagnostics"], keys)
    mom = _keyed(runs["moments"].tables["diagnostics"], keys)
    assert mem.index.equals(mom.index)
    same = mem.index.get_level_values("check") != "normality"
    for col in ("statistic", "df", "p_value", "estimate"):
        # internal consistency: Breusch-Pagan (statsmodels), quadratic t, Cook's max
        assert_allclose(mom.loc[same, col].to_numpy(float), mem.loc[same, col].to_numpy(float),
                        rtol=1e-9, err_msg=col)
    assert (mom.loc[same, "flagged"] == mem.loc[same, "flagged"]).all()
    normal = mom[~same]
    assert (normal["test"] == "D'Agostino-Pearson").all()
    assert (mem.loc[~same, "test"] == "Shapiro-Wilk").all()


def test_influential_rows_are_the_in_memory_top_k(runs):
    mem = runs["memory"].tables["influential_rows"]
    mom = runs["moments"].tables["influential_rows"]
    for (scope, group, method), part in mem[mem["scope"].isin(["pooled", "group"])].groupby(
            ["scope", "group", "method"]):
        top = part.sort_values("cooks_distance", ascending=False, kind="stable").head(TOP_K)
        mine = mom[(mom["scope"] == scope) & (mom["group"] == group) & (mom["method"] == method)]
        # internal consistency: statsmodels' Cook's distances of the rows in memory
        assert list(mine["row"].astype(int)) == list(top["row"].astype(int))
        assert_allclose(mine["cooks_distance"].to_numpy(float),
                        top["cooks_distance"].to_numpy(float), rtol=1e-9)


def test_dask_partitions_give_the_same_second_pass(table, runs):
    pytest.importorskip("dask.dataframe")
    from scaling.io.chunked import dask_partitions
    assert len(dask_partitions(table, "csv", ["mass", "rate", "clade"], 61, ",", ".")) >= 2
    dask_run = _run(table, large=True, engine="dask")
    mom = _keyed(runs["moments"].fits, ["scope", "group", "method"])
    dsk = _keyed(dask_run.fits, ["scope", "group", "method"])
    for col in FIT_ACCURACY_COLUMNS:
        # internal consistency: the chunked road above
        assert_allclose(dsk[col].to_numpy(float), mom[col].to_numpy(float), rtol=1e-9,
                        err_msg=col)
    a, b = dask_run.tables["influential_rows"], runs["moments"].tables["influential_rows"]
    assert a["row"].tolist() == b["row"].tolist()   # row numbers count across partitions
    assert_allclose(a["cooks_distance"].to_numpy(float), b["cooks_distance"].to_numpy(float),
                    rtol=1e-9)


def test_points_to_check_of_the_pooled_line_equal_the_in_memory_road(runs):
    cols = ["scope", "group", "method", "severity", "kind", "row", "value", "reason"]
    mem = runs["memory"].tables["points_to_check"]
    mom = runs["moments"].tables["points_to_check"]
    mem = mem[mem["scope"] == "pooled"][cols].reset_index(drop=True)
    mom = mom[mom["scope"] == "pooled"][cols].reset_index(drop=True)
    assert set(mem["kind"]) == {"influence", "group_residuals"}
    # internal consistency: leave-one-out refits and f_oneway on the rows in memory
    assert_allclose(mom["value"].to_numpy(float), mem["value"].to_numpy(float), rtol=1e-9)
    pd.testing.assert_frame_equal(mom.drop(columns="value"), mem.drop(columns="value"))


def test_influence_verdicts_count_every_row_above_four_over_n(runs):
    mem = runs["memory"].tables["diagnostics"]
    mom = runs["moments"].tables["diagnostics"]
    for frame in (mem, mom):
        assert frame.columns.tolist()[-1] == "verdict"
    pick = (mem["scope"] == "pooled") & (mem["check"] == "influence")
    mine = (mom["scope"] == "pooled") & (mom["check"] == "influence")
    # internal consistency: the in-memory verdict counts statsmodels' distances > 4/n
    count = [v.split(" row(s)")[0] for v in mem.loc[pick, "verdict"]]
    assert [v.split(" row(s)")[0] for v in mom.loc[mine, "verdict"]] == count
    assert int(count[0]) > TOP_K
    # the sentence speaks of the Answer's model (each clade's own line here: slopes differ)
    said = [[t.split(" pull ")[0] for t in runs[road].messages if t.startswith("Influence:")]
            for road in ("memory", "moments")]
    assert said[0] and said[1] == said[0]


# --------------------------------------------------------------------------
# data.average_within: the points are unit means, named by their unit


@pytest.fixture(scope="module")
def unit_table(tmp_path_factory):
    """Invented: 1 to 4 rows per species, species within clades, rows shuffled so a
    species' rows fall in several chunks; one far species (one row) pulls the line."""
    rng = np.random.default_rng(21)
    parts = []
    for g, n_species in enumerate((4, 9, 60, 1800)):   # about 240 kB: several partitions
        lx_sp = rng.uniform(0, 3, n_species)
        ly_sp = 0.3 + (0.72 + 0.02 * g) * lx_sp + rng.normal(0, 0.1 * (1 + 0.3 * lx_sp))
        reps = rng.integers(1, 5, n_species)
        k = np.repeat(np.arange(n_species), reps)
        parts.append(pd.DataFrame({
            "mass": 10 ** (lx_sp[k] + rng.normal(0, 0.05, k.size)),
            "rate": 10 ** (ly_sp[k] + rng.normal(0, 0.05, k.size)),
            "clade": f"c{g}", "species": [f"c{g}_sp{i}" for i in k]}))
    parts.append(pd.DataFrame({"mass": [1e8], "rate": [10 ** 2.0], "clade": ["c3"],
                               "species": ["c3_far"]}))
    df = pd.concat(parts).sample(frac=1, random_state=4).reset_index(drop=True)
    path = tmp_path_factory.mktemp("units") / "u.csv"
    df.to_csv(path, index=False)
    return path


def _unit_run(path, *, large: bool, engine: str = "pandas"):
    return _run(path, large=large, engine=engine, chunk_size=97, average_within="species")


@pytest.fixture(scope="module")
def unit_runs(unit_table):
    return {"memory": _unit_run(unit_table, large=False),
            "moments": _unit_run(unit_table, large=True)}


class TestSecondPassOnUnitMeans:
    def test_correction_columns_and_predictions_equal_the_in_memory_road(self, unit_runs):
        mem = _keyed(unit_runs["memory"].fits, ["scope", "group", "method"])
        mom = _keyed(unit_runs["moments"].fits, ["scope", "group", "method"])
        assert mem.index.equals(mom.index)
        # exact: one point per species, not one per row
        assert (mom["n"] == mem["n"]).all()
        assert mom.loc[("pooled", "", "ols"), "n"] == len(unit_runs["memory"].data.points)
        for col in FIT_ACCURACY_COLUMNS + ["a", "a_low", "a_high"]:
            # internal consistency: the same factors from the unit means held in memory
            assert_allclose(mom[col].to_numpy(float), mem[col].to_numpy(float), rtol=1e-9,
                            err_msg=col)
        keys = ["scope", "group", "method", "x"]
        a = _keyed(unit_runs["memory"].tables["predictions"], keys)
        b = _keyed(unit_runs["moments"].tables["predictions"], keys)
        assert a.index.equals(b.index)
        for col in ("y", "y_low", "y_high"):
            # internal consistency: predictions from the same fits and factors
            assert_allclose(b[col].to_numpy(float), a[col].to_numpy(float), rtol=1e-9)

    def test_checks_and_curvature_equal_the_in_memory_road(self, unit_runs):
        keys = ["scope", "group", "method", "check"]
        mem = _keyed(unit_runs["memory"].tables["diagnostics"], keys)
        mom = _keyed(unit_runs["moments"].tables["diagnostics"], keys)
        assert mem.index.equals(mom.index)
        same = mem.index.get_level_values("check") != "normality"
        for col in ("statistic", "p_value"):
            # internal consistency: Breusch-Pagan (statsmodels), quadratic t, Cook's max
            assert_allclose(mom.loc[same, col].to_numpy(float),
                            mem.loc[same, col].to_numpy(float), rtol=1e-9, err_msg=col)
        keys = ["scope", "group", "exponent"]
        a = _keyed(unit_runs["memory"].tables["curvature"], keys)
        b = _keyed(unit_runs["moments"].tables["curvature"], keys)
        # internal consistency: the quadratic term fitted to the unit means
        assert_allclose(b["quadratic"].to_numpy(float), a["quadratic"].to_numpy(float),
                        rtol=1e-9)

    def test_influential_points_name_the_unit_and_its_first_row(self, unit_runs, unit_table):
        mem = unit_runs["memory"].tables["influential_rows"]
        mom = unit_runs["moments"].tables["influential_rows"]
        pooled = mem[(mem["scope"] == "pooled") & (mem["method"] == "ols")]
        top = pooled.sort_values("cooks_distance", ascending=False, kind="stable").head(TOP_K)
        mine = mom[(mom["scope"] == "pooled") & (mom["method"] == "ols")]
        # internal consistency: statsmodels' Cook's distances of the unit means in memory
        assert list(mine["row"].astype(int)) == list(top["row"].astype(int))
        assert list(mine["label"]) == list(top["label"])
        assert_allclose(mine["cooks_distance"].to_numpy(float),
                        top["cooks_distance"].to_numpy(float), rtol=1e-9)
        # exact: the far species has one row, the first of its rows in the file
        far = mine[mine["label"] == "c3_far"]
        rows = pd.read_csv(unit_table)
        assert len(far) == 1
        assert int(far["row"].iloc[0]) == int(np.flatnonzero(rows["species"] == "c3_far")[0]) + 1
        # the influence sentence names each point's unit beside its row, as in memory
        said = [t for t in unit_runs["moments"].messages if t.startswith("Influence:")]
        assert said and re.search(r"row \d+ \(c\d_", said[0]), said

    def test_points_to_check_of_the_pooled_line_name_the_unit(self, unit_runs):
        cols = ["scope", "group", "method", "severity", "kind", "row", "label", "value"]
        mem = unit_runs["memory"].tables["points_to_check"]
        mom = unit_runs["moments"].tables["points_to_check"]
        mem = mem[(mem["scope"] == "pooled") & (mem["kind"] == "influence")][cols]
        mom = mom[(mom["scope"] == "pooled") & (mom["kind"] == "influence")][cols]
        assert "c3_far" in set(mom["label"])
        # internal consistency: leave-one-out refits on the unit means in memory
        assert_allclose(mom["value"].to_numpy(float), mem["value"].to_numpy(float), rtol=1e-9)
        pd.testing.assert_frame_equal(mom.drop(columns="value").reset_index(drop=True),
                                      mem.drop(columns="value").reset_index(drop=True))

    def test_dask_partitions_number_the_unit_by_its_first_row(self, unit_table, unit_runs):
        pytest.importorskip("dask.dataframe")
        from scaling.io.chunked import dask_partitions
        columns = ["mass", "rate", "clade"]
        assert len(dask_partitions(unit_table, "csv", columns, 97, ",", ".")) >= 2
        dask_run = _unit_run(unit_table, large=True, engine="dask")
        a = dask_run.tables["influential_rows"]
        b = unit_runs["moments"].tables["influential_rows"]
        # internal consistency: the chunked road above
        assert a[["row", "label"]].values.tolist() == b[["row", "label"]].values.tolist()
        assert_allclose(a["cooks_distance"].to_numpy(float),
                        b["cooks_distance"].to_numpy(float), rtol=1e-9)


def test_accuracy_columns_equal_the_fit_by_fit_loop():
    # internal consistency: the accuracy and factor dicts read column-wise equal the plain
    # loop over sets and methods (sets under 3 points and fits not made left out; NaN kept)
    from types import SimpleNamespace

    from scaling.run.second_pass import _ACCURACY, _accuracy
    rng = np.random.default_rng(3)
    keys = [("pooled", "")] + [("group", f"g{i}") for i in range(6)]
    methods = ["ols", "sma", "ma"]
    fields = {name: rng.normal(size=(7, 3)) for _, name in _ACCURACY}
    fields["ratio"][2, 1] = np.nan
    res = SimpleNamespace(n=np.array([40.0, 3, 2, 1, 0, 10, 5]), **fields)
    all_fits = {(s, g, m): None for s, g in keys for m in methods}
    del all_fits[("group", "g5", "sma")]
    want = {}
    for i, (scope, group) in enumerate(keys):
        if res.n[i] < 3:
            continue
        for j, method in enumerate(methods):
            if (scope, group, method) in all_fits:
                want[(scope, group, method)] = {c: float(getattr(res, name)[i][j])
                                                for c, name in _ACCURACY}
    got = _accuracy(res, keys, methods, all_fits)
    assert list(got) == list(want)
    assert repr(got) == repr(want)
    assert all(type(v) is float for d in got.values() for v in d.values())


def test_the_collector_is_paused_in_the_pass_and_restored_after():
    # internal consistency: the pass's pause leaves the collector as it found it, on
    # error too
    import gc

    from scaling.run.second_pass import _collector_paused
    assert gc.isenabled()
    with _collector_paused():
        assert not gc.isenabled()
    assert gc.isenabled()
    with pytest.raises(ZeroDivisionError):
        with _collector_paused():
            1 / 0
    assert gc.isenabled()
    gc.disable()
    try:
        with _collector_paused():
            pass
        assert not gc.isenabled()
    finally:
        gc.enable()
