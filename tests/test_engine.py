"""Chunked per-group moments, exact merging, and every group fitted at once."""

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings, strategies as st
from numpy.testing import assert_allclose

import scaling
from scaling.run.table_moments import fit_frame, frame_moments, read_moments
from scaling.stats.grouped_fits import (FIT_TABLE_COLUMNS, SLOPE_TEST_TABLE_COLUMNS,
                                        fit_groups_from_moments)
from scaling.errors import ConfigError, DataError
from scaling.stats.moments import combine_moments, group_moments, merge_moments, moments

KEYS = ("n", "mean_x", "mean_y", "sxx", "syy", "sxy")


def _table(seed=3, n=6000, groups=37):
    """Invented data (simulation only): groups of unequal size, rows shuffled so that
    every group is split across chunks and partitions, with a large log offset."""
    rng = np.random.default_rng(seed)
    g = rng.integers(0, groups, n)
    slope = 0.6 + 0.01 * g
    lx = 4 + rng.normal(0, 0.8, n)
    ly = 2 + slope * lx + rng.normal(0, 0.2, n)
    return pd.DataFrame({"mass": 10 ** lx, "rate": 10 ** ly,
                         "clade": np.array([f"g{i:03d}" for i in range(groups)])[g]})


def _assert_same(a, b, rtol=1e-12):
    assert list(a.labels) == list(b.labels)
    for k in KEYS:
        # internal consistency: two summation orders of the same sums
        assert_allclose(getattr(a.moments, k), getattr(b.moments, k), rtol=rtol)


class TestMergeMoments:
    @settings(max_examples=60, deadline=None)
    @given(st.integers(1, 40), st.integers(0, 2**32 - 1), st.floats(-1e3, 1e3))
    def test_any_split_gives_the_moments_of_the_whole(self, n, seed, offset):
        rng = np.random.default_rng(seed)
        x = offset + rng.normal(size=n)
        y = 0.5 * x + rng.normal(size=n)
        cut = rng.integers(0, n + 1)
        perm = rng.permutation(n)
        a = moments(x[perm[:cut]], y[perm[:cut]])
        b = moments(x[perm[cut:]], y[perm[cut:]])
        whole = moments(x, y)
        merged = merge_moments(a, b)
        for k in KEYS:
            # exact law: the Chan, Golub & LeVeque (1983) update equals the two-pass sums
            assert_allclose(getattr(merged, k), getattr(whole, k), rtol=1e-9, atol=1e-9)

    def test_an_empty_part_leaves_the_other_unchanged(self):
        a = moments([1.0, 2.0, 4.0], [2.0, 1.0, 5.0])
        empty = group_moments(np.zeros(0), np.zeros(0), np.zeros(0, int), n_groups=1)[0]
        for k in KEYS:
            # exact law: merging with nothing is the identity
            assert getattr(merge_moments(a, empty), k) == getattr(a, k)
            assert getattr(merge_moments(empty, a), k) == getattr(a, k)


class TestCombineMoments:
    def test_parts_by_code_equal_the_groups_computed_at_once(self):
        rng = np.random.default_rng(5)
        x, y = rng.normal(size=500), rng.normal(size=500)
        g = rng.integers(0, 6, 500)
        part = rng.integers(0, 4, 500)            # each group split four ways
        parts = group_moments(x, y, g * 4 + part, n_groups=24)
        merged = combine_moments(parts, np.repeat(np.arange(6), 4), n_groups=6)
        direct = group_moments(x, y, g, n_groups=6)
        for k in KEYS:
            # exact law: the k-part decomposition of centred sums
            assert_allclose(getattr(merged, k), getattr(direct, k), rtol=1e-12)


class TestFrameMoments:
    def test_chunked_equals_unchunked(self):
        df = _table()
        whole = frame_moments(df, x="mass", y="rate", group="clade")
        for size in (13, 999):
            _assert_same(frame_moments(df, x="mass", y="rate", group="clade",
                                       chunk_size=size), whole)

    def test_drops_are_counted_by_reason(self):
        df = _table(n=50).astype({"mass": object})
        df.loc[0, "mass"] = 0.0
        df.loc[1, "mass"] = "abc"
        df.loc[2, "rate"] = -1.0
        df.loc[3, "clade"] = None
        df.loc[4, "rate"] = np.inf
        gm = frame_moments(df, x="mass", y="rate", group="clade", chunk_size=20)
        # exact law: the rows we spoiled, one reason each, as scaling.io.tables words them
        assert gm.dropped == {"x (mass) is zero: no logarithm": 1,
                              "x (mass) is not a number": 1,
                              "y (rate) is negative: no logarithm": 1,
                              "group (clade) is missing": 1, "y (rate) is infinite": 1}
        assert gm.n_dropped == 5 and gm.n_read == 50
        assert gm.pooled.n[0] == 45

    def test_matches_the_cleaning_of_a_run(self, tmp_path):
        df = _table(n=300, groups=5)
        df.loc[3, "mass"] = -2.0
        df.loc[4, "clade"] = ""
        path = tmp_path / "t.csv"
        df.to_csv(path, index=False)
        from scaling.io.config import config_from_dict
        from scaling.io.tables import load_data
        cfg = config_from_dict({"data": {"file": str(path), "x": "mass", "y": "rate",
                                         "group": "clade"}}, base_dir=tmp_path)
        pts = load_data(cfg.data, log_base=10).points
        gm = read_moments(path, x="mass", y="rate", group="clade", chunk_size=64)
        codes, names = pd.factorize(pts["group"], sort=True)
        ref = group_moments(pts["log_x"], pts["log_y"], codes)
        assert list(gm.labels) == list(names)
        for k in KEYS:
            # internal consistency: the chunked reader against scaling.io.tables + group_moments
            assert_allclose(getattr(gm.moments, k), getattr(ref, k), rtol=1e-12)

    def test_missing_column_is_named(self):
        with pytest.raises(DataError, match="column 'massx' \\(x\\) not found"):
            frame_moments(_table(n=10), x="massx", y="rate")

    def test_all_rows_dropped_is_an_error(self):
        df = pd.DataFrame({"x": [0.0, -1.0], "y": [1.0, 2.0]})
        with pytest.raises(DataError, match="no usable rows: all 2 data rows were dropped"):
            frame_moments(df, x="x", y="y")

    def test_bad_chunk_size(self):
        with pytest.raises(ConfigError, match="chunk_size must be a positive whole number"):
            frame_moments(_table(n=10), x="mass", y="rate", chunk_size=0)


class TestReadMoments:
    @pytest.fixture
    def files(self, tmp_path):
        df = _table()
        csv = tmp_path / "t.csv"
        pq = tmp_path / "t.parquet"
        df.to_csv(csv, index=False)
        df.to_parquet(pq, row_group_size=500)
        return df, csv, pq

    def test_readers_and_engines_agree_with_the_in_memory_table(self, files):
        df, csv, pq = files
        whole = frame_moments(df, x="mass", y="rate", group="clade")
        kw = dict(x="mass", y="rate", group="clade")
        _assert_same(read_moments(csv, chunk_size=333, **kw), whole)
        _assert_same(read_moments(csv, chunk_size=2000, reader="pyarrow", **kw), whole)
        _assert_same(read_moments(pq, chunk_size=250, **kw), whole)

    def test_dask_partitions_agree_with_pandas(self, files):
        pytest.importorskip("dask.dataframe")
        df, csv, pq = files
        whole = frame_moments(df, x="mass", y="rate", group="clade")
        kw = dict(x="mass", y="rate", group="clade", engine="dask")
        _assert_same(read_moments(pq, scheduler="synchronous", **kw), whole)
        # small blocks: many csv partitions, each group split across them
        _assert_same(read_moments(csv, chunk_size=2000, **kw), whole)

    def test_unknown_engine(self, files):
        with pytest.raises(ConfigError, match="engine must be one of pandas, dask"):
            read_moments(files[1], x="mass", y="rate", engine="spark")

    def test_unknown_reader(self, files):
        with pytest.raises(ConfigError, match="reader must be one of pandas, pyarrow"):
            read_moments(files[1], x="mass", y="rate", reader="polars")

    def test_scheduler_without_dask(self, files):
        with pytest.raises(ConfigError, match="scheduler is only used with engine 'dask'"):
            read_moments(files[1], x="mass", y="rate", scheduler="threads")

    def test_bad_scheduler_name(self, files):
        pytest.importorskip("dask.dataframe")
        with pytest.raises(ConfigError, match="scheduler must be 'threads'"):
            read_moments(files[2], x="mass", y="rate", engine="dask", scheduler="fast")

    def test_missing_file(self, tmp_path):
        with pytest.raises(DataError, match="data file not found"):
            read_moments(tmp_path / "no.csv", x="a", y="b")

    def test_unsupported_suffix(self, tmp_path):
        p = tmp_path / "t.xlsx"
        p.write_bytes(b"")
        with pytest.raises(DataError, match="chunked reading handles csv/tsv and parquet"):
            read_moments(p, x="a", y="b")

    def test_pyarrow_reader_refuses_text_in_numbers(self, tmp_path):
        p = tmp_path / "t.csv"
        # the type is inferred from the first 64 kB block; text after it cannot be parsed
        p.write_text("x,y\n" + "1,2\n" * 40000 + "abc,3\n")
        with pytest.raises(DataError, match="the pyarrow csv reader failed"):
            read_moments(p, x="x", y="y", reader="pyarrow", chunk_size=100)


class TestFitGroupsFromMoments:
    def test_equals_fit_line_group_by_group(self):
        df = _table(n=2000, groups=9)
        res = fit_frame(df, x="mass", y="rate", group="clade", exponents={"q": 0.75})
        assert list(res.fits.columns) == FIT_TABLE_COLUMNS
        for (method, g), row in res.fits.set_index(["method", "group"]).iterrows():
            sub = df[df["clade"] == g]
            fit = scaling.fit_line(sub["mass"], sub["rate"], method=method)
            test = fit.test_slope(0.75)
            # internal consistency: vectorised over groups vs one group at a time
            assert_allclose([row.slope, row.slope_low, row.slope_high, row.intercept,
                             row.intercept_low, row.intercept_high, row.r],
                            [fit.slope, fit.slope_ci.low, fit.slope_ci.high, fit.intercept,
                             fit.intercept_ci.low, fit.intercept_ci.high, fit.r], rtol=1e-12)
            t = res.slope_tests.query("method == @method and group == @g").iloc[0]
            assert_allclose([t.statistic, t.p_value], [test.statistic, test.p_value],
                            rtol=1e-12)

    def test_ols_slope_matches_statsmodels(self):
        import statsmodels.api as sm
        df = _table(n=400, groups=3)
        res = fit_frame(df, x="mass", y="rate", group="clade", methods=["ols"])
        for _, row in res.fits.iterrows():
            sub = df[df["clade"] == row.group]
            ols = sm.OLS(np.log10(sub["rate"]), sm.add_constant(np.log10(sub["mass"]))).fit()
            # reference library: statsmodels OLS on the logs
            assert_allclose([row.slope, row.slope_low, row.slope_high],
                            [ols.params.iloc[1], *ols.conf_int().iloc[1]], rtol=1e-9)

    def test_columns_are_those_of_a_run(self):
        from scaling.run.pipeline import FIT_COLUMNS, SLOPE_TEST_COLUMNS
        # internal consistency: one schema for run and engine
        assert FIT_TABLE_COLUMNS == FIT_COLUMNS
        assert SLOPE_TEST_TABLE_COLUMNS == SLOPE_TEST_COLUMNS

    def test_small_group_gets_a_note_and_no_test(self):
        df = pd.concat([_table(n=100, groups=1), pd.DataFrame(
            {"mass": [1.0, 2.0], "rate": [1.0, 3.0], "clade": ["tiny", "tiny"]})])
        res = fit_frame(df, x="mass", y="rate", group="clade", methods=["sma"],
                        exponents=[1.0])
        tiny = res.fits.set_index("group").loc["tiny"]
        assert "too few points" in tiny.note and np.isnan(tiny.slope)
        assert "tiny" not in set(res.slope_tests["group"])

    def test_unknown_method(self):
        gm = frame_moments(_table(n=50), x="mass", y="rate", group="clade")
        with pytest.raises(ConfigError, match="method must be one of"):
            fit_groups_from_moments(gm, methods=["lasso"])

    def test_no_methods(self):
        gm = frame_moments(_table(n=50), x="mass", y="rate", group="clade")
        with pytest.raises(ConfigError, match="methods must name at least one"):
            fit_groups_from_moments(gm, methods=[])

    def test_bad_exponent(self):
        gm = frame_moments(_table(n=50), x="mass", y="rate", group="clade")
        with pytest.raises(ConfigError, match=r"exponents\['q'\] must be a finite number"):
            fit_groups_from_moments(gm, exponents={"q": "3/4"})


class TestFilesAndPooled:
    def test_a_folder_of_parquet_files_equals_the_table(self, tmp_path):
        df = _table(n=3000, groups=11)
        folder = tmp_path / "parts"
        folder.mkdir()
        for i in range(3):
            df.iloc[i * 1000:(i + 1) * 1000].to_parquet(folder / f"part{i}.parquet")
        whole = frame_moments(df, x="mass", y="rate", group="clade")
        kw = dict(x="mass", y="rate", group="clade")
        _assert_same(read_moments(folder, chunk_size=400, **kw), whole)
        _assert_same(read_moments(tmp_path / "parts" / "*.parquet", chunk_size=400, **kw),
                     whole)
        pytest.importorskip("dask.dataframe")
        _assert_same(read_moments(folder, engine="dask", **kw), whole)

    def test_empty_folder(self, tmp_path):
        (tmp_path / "none.parquet").mkdir()
        with pytest.raises(DataError, match="no parquet files found"):
            read_moments(tmp_path / "none.parquet", x="a", y="b")

    def test_pooled_rows_equal_fit_line_on_all_rows(self):
        df = _table(n=500, groups=4)
        res = fit_frame(df, x="mass", y="rate", group="clade", methods=["ma"], pooled=True,
                        exponents={"q": 0.75})
        row = res.fits.iloc[0]
        assert row.scope == "pooled" and row.group == ""
        fit = scaling.fit_line(df["mass"], df["rate"], method="ma")
        # internal consistency: pooled from merged group moments vs all rows at once
        assert_allclose([row.slope, row.intercept, row.x_min, row.y_max],
                        [fit.slope, fit.intercept, df["mass"].min(), df["rate"].max()],
                        rtol=1e-12)
        assert res.slope_tests.iloc[0].scope == "pooled"


class TestGroupFunctionsFromMoments:
    """The group functions of every road, fed per-group moments merged from chunks."""

    @staticmethod
    def _inputs(chunk_size=None):
        df = _table(seed=4, n=700, groups=6)
        gm = frame_moments(df, x="mass", y="rate", group="clade", chunk_size=chunk_size)
        return df, np.log10(df["mass"].to_numpy()), np.log10(df["rate"].to_numpy()), gm

    @pytest.mark.parametrize("method", ["ols", "sma", "ma"])
    def test_comparison_from_chunk_moments_equals_the_rows(self, method):
        from scaling.stats.group_comparisons import compare_group_moments
        df, _, _, gm = self._inputs(chunk_size=53)
        rows = scaling.compare_groups(df, "mass", "rate", "clade", method=method,
                                      pairwise_max=6)
        merged = compare_group_moments(gm.moments, gm.labels, method=method,
                                       pairwise_max=6, group_column="clade")
        assert merged.groups == rows.groups and merged.group_n == rows.group_n
        for a, b in ((rows.to_frame(), merged.to_frame()),
                     (rows.pairwise_frame(), merged.pairwise_frame())):
            assert len(a) == len(b) and list(a.columns) == list(b.columns)
            for col in a.columns:
                if pd.api.types.is_numeric_dtype(a[col]):
                    # internal consistency: the same statistics from rows and from merged
                    # chunk moments, the same seed for the bootstrap
                    assert_allclose(b[col].to_numpy(float), a[col].to_numpy(float),
                                    rtol=1e-9, atol=1e-12, err_msg=col)
                else:
                    assert b[col].tolist() == a[col].tolist()

    @pytest.mark.parametrize("method", ["ols", "sma", "ma"])
    def test_common_slope_and_means_from_moments_equal_the_rows(self, method):
        from scaling.stats.common_slope import common_slope, common_slope_from_moments
        from scaling.stats.group_means import (fit_group_means, fit_group_means_from_moments,
                                               group_means, group_means_from_moments)
        df, X, Y, gm = self._inputs(chunk_size=71)
        g = df["clade"].to_numpy()
        a = common_slope(X, Y, g, method=method)
        b = common_slope_from_moments(gm.moments, gm.labels, method=method)
        # internal consistency: rows vs merged chunk moments
        assert_allclose([b.slope, b.slope_ci.low, b.slope_ci.high, b.slope_se],
                        [a.slope, a.slope_ci.low, a.slope_ci.high, a.slope_se], rtol=1e-9)
        assert_allclose(b.test_slope(0.75).p_value, a.test_slope(0.75).p_value, rtol=1e-9)
        fa = fit_group_means(X, Y, g, method=method)
        fb = fit_group_means_from_moments(gm.moments, gm.labels, method=method)
        assert_allclose([fb.slope, fb.intercept, fb.slope_ci.low, fb.slope_ci.high],
                        [fa.slope, fa.intercept, fa.slope_ci.low, fa.slope_ci.high], rtol=1e-9)
        ma, mb = group_means(X, Y, g).to_frame(), group_means_from_moments(
            gm.moments, gm.labels).to_frame()
        assert ma["group"].tolist() == mb["group"].tolist()
        assert_allclose(mb[["n", "mean_log_x", "mean_log_y", "se_log_x", "se_log_y"]],
                        ma[["n", "mean_log_x", "mean_log_y", "se_log_x", "se_log_y"]],
                        rtol=1e-9)

    def test_labels_must_name_every_group(self):
        from scaling.stats.group_comparisons import compare_group_moments
        _, _, _, gm = self._inputs()
        with pytest.raises(DataError, match="labels must name each of the 6 groups, not 5"):
            compare_group_moments(gm.moments, gm.labels[:5])


class TestUnitMeansFromChunks:
    def test_two_level_reduction_equals_averaging_the_rows_first(self, tmp_path):
        df = _table(seed=8, n=900, groups=5)
        df["unit"] = [f"{g}-{k % 40}" for k, g in enumerate(df["clade"])]
        path = tmp_path / "u.csv"
        df.to_csv(path, index=False)
        lx, ly = np.log10(df["mass"]), np.log10(df["rate"])
        units = (pd.DataFrame({"unit": df["unit"], "clade": df["clade"], "lx": lx, "ly": ly})
                 .groupby("unit").agg(clade=("clade", "first"), lx=("lx", "mean"),
                                      ly=("ly", "mean")))
        direct = frame_moments(units.assign(x=10 ** units["lx"], y=10 ** units["ly"]),
                               x="x", y="y", group="clade")
        for engine in ("pandas", "dask"):
            gm = read_moments(path, x="mass", y="rate", group="clade", unit="unit",
                              chunk_size=61, engine=engine)
            assert list(gm.labels) == list(direct.labels)
            # exact: one point per unit, every one of the 900 rows behind a unit
            assert gm.moments.n.tolist() == direct.moments.n.tolist()
            assert gm.n_rows.sum() == 900 and gm.moments.n.sum() == units.shape[0]
            for k in KEYS[1:]:
                # internal consistency: unit sums merged across chunks vs pandas groupby means
                assert_allclose(getattr(gm.moments, k), getattr(direct.moments, k),
                                rtol=1e-9, atol=1e-12)
