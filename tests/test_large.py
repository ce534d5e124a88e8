"""The large-data path of a run and the summary across many groups (scaling.run.moments_path).

Where expected values come from: the ordinary run on the same rows (internal
consistency: the same estimators from merged moments vs from the rows); counts
exact by construction of the planted bad rows; a seeded simulation with a known
truth (exponent 0.75 in every group) for the summary across groups.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from scaling.io.config import config_from_dict
from scaling.errors import ConfigError, DataError
from scaling.run.moments_path import bounded_diagnostics, spread_stage, use_moments_path
from scaling.run.pipeline import analyse, write_outputs
from scaling.run.state import RunState
from scaling.stats.spread import spread_from_fits

NUMERIC = ["n", "slope", "slope_low", "slope_high", "intercept", "intercept_low",
           "intercept_high", "r", "r2", "slope_se", "intercept_se", "resid_sd",
           "x_min", "x_max", "y_min", "y_max"]


def _table(groups: int, per_group: int, seed: int = 3) -> pd.DataFrame:
    """Invented: y = a_g x^0.75 with lognormal scatter; rows shuffled so every
    group is split across chunks and partitions."""
    rng = np.random.default_rng(seed)
    g = np.repeat(np.arange(groups), per_group)
    log_x = rng.uniform(0.5, 3.0, groups)[g] + 0.4 * rng.standard_normal(g.size)
    log_y = rng.normal(0.3, 0.2, groups)[g] + 0.75 * log_x + rng.normal(0, 0.1, g.size)
    df = pd.DataFrame({"taxon": [f"g{k:04d}" for k in g], "mass": 10 ** log_x,
                       "rate": 10 ** log_y})
    return df.iloc[rng.permutation(len(df))].reset_index(drop=True)


def _cfg(path, tmp_path, **top):
    raw = {"data": {"file": str(path), "x": "mass", "y": "rate", "group": "taxon",
                    **top.pop("data", {})},
           "exponents": {"three_quarters": 0.75}, "output": {"dir": str(tmp_path / "out")},
           "figures": {"kinds": ["scaling"], "dpi": 60}, **top}
    return config_from_dict(raw, base_dir=tmp_path)


def _run(cfg):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return analyse(cfg)


@pytest.fixture(scope="module")
def data_files(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("large")
    df = _table(25, 40)
    csv = tmp / "t.csv"
    df.to_csv(csv, index=False)
    pq = tmp / "t.parquet"
    df.to_parquet(pq, row_group_size=150)   # groups split across row groups / partitions
    ordinary = _run(_cfg(csv, tmp))
    return tmp, csv, pq, ordinary


def _same_fits(a: pd.DataFrame, b: pd.DataFrame) -> None:
    # internal consistency: the same fits, in the same order, on both paths
    assert list(a[["scope", "group", "method"]].itertuples(index=False)) == \
        list(b[["scope", "group", "method"]].itertuples(index=False))
    for col in NUMERIC:
        x, y = a[col].to_numpy(float), b[col].to_numpy(float)
        # internal consistency: the same estimators from merged moments vs from the rows
        np.testing.assert_allclose(x, y, rtol=1e-12, atol=1e-12, err_msg=col)


class TestAnalyseMoments:
    @pytest.mark.parametrize("kind,extra", [
        ("csv", {"data": {"moments_above_mb": 1e-6, "chunk_size": 97}}),
        ("parquet", {"data": {"moments_above_mb": 1e-6, "chunk_size": 97}}),
        ("csv", {"engine": "dask", "data": {"chunk_size": 300}}),
        ("parquet", {"engine": "dask"}),
    ])
    def test_fits_and_tests_equal_the_ordinary_run(self, data_files, kind, extra):
        tmp, csv, pq, ordinary = data_files
        res = _run(_cfg(csv if kind == "csv" else pq, tmp, **extra))
        assert res.manifest["large_data"]["rows_read"] == 1000   # exact: rows written
        # every scope: pooled, group, group_means and common
        assert set(ordinary.fits["scope"]) == {"pooled", "group", "group_means", "common"}
        _same_fits(res.fits, ordinary.fits[res.fits.columns])
        keys = ["scope", "group", "method", "hypothesis"]
        a = res.slope_tests
        b = ordinary.slope_tests
        both = a.merge(b[a.columns], on=keys, how="outer", indicator=True)
        assert (both["_merge"] == "both").all() and len(both) == len(a) == len(b)
        # internal consistency: slope tests from merged moments vs from the rows
        for col in ("statistic", "p_value"):
            np.testing.assert_allclose(both[f"{col}_x"].to_numpy(float),
                                       both[f"{col}_y"].to_numpy(float), rtol=1e-10, atol=1e-14)

    def test_dropped_rows_are_counted_per_reason(self, tmp_path):
        df = _table(3, 30)
        df["mass"] = df["mass"].astype(object)
        df.loc[0:3, "mass"] = np.nan           # 4 missing x
        df.loc[4:5, "rate"] = -1.0              # 2 negative y
        df.loc[6, "mass"] = "heavy"             # 1 non-numeric x
        df.loc[7:9, "rate"] = 0.0               # 3 zero y
        path = tmp_path / "d.csv"
        df.to_csv(path, index=False)
        res = _run(_cfg(path, tmp_path, data={"moments_above_mb": 1e-6, "chunk_size": 7}))
        counts = res.tables["dropped_counts"].set_index("reason")["rows"].to_dict()
        # exact by construction of the table above
        assert sum(counts.values()) == 10
        assert res.manifest["large_data"]["rows_dropped"] == 10
        assert len(counts) == 4 and sorted(counts.values()) == [1, 2, 3, 4]
        assert int(res.fits.loc[res.fits["scope"] == "pooled", "n"].iloc[0]) == 80
        listed = _run(_cfg(path, tmp_path)).dropped["reason"].value_counts()
        # internal consistency: the ordinary run lists the same rows one by one
        assert sorted(listed.to_numpy().tolist()) == [1, 2, 3, 4]
        written = write_outputs(res, tmp_path / "out")
        on_disk = pd.read_csv(written.out_dir / "dropped_counts.csv")
        assert list(on_disk.columns) == ["reason", "rows"] and on_disk["rows"].sum() == 10

    def test_what_needs_every_row_at_once_is_skipped_with_a_note(self, data_files):
        tmp, csv, _, _ = data_files
        res = _run(_cfg(csv, tmp, data={"moments_above_mb": 1e-6}))
        # the second pass gives the residual checks; the bootstrap needs every row
        assert "diagnostics" in res.tables and "bootstrap" not in res.tables
        assert any("row bootstrap, permutation tests, row-based robust lines" in w
                   for w in res.warnings)

    def test_only_row_methods_is_an_error(self, data_files):
        tmp, csv, _, _ = data_files
        cfg = _cfg(csv, tmp, model={"methods": ["theil_sen"]}, data={"moments_above_mb": 1e-6})
        with pytest.raises(DataError, match="fits OLS, SMA and MA from moments"):
            _run(cfg)

    def test_no_pooled_line_is_an_error(self, tmp_path):
        path = tmp_path / "c.csv"
        pd.DataFrame({"taxon": ["a"] * 4 + ["b"] * 4, "mass": [2.0] * 8,
                      "rate": [1.0, 2, 3, 4, 5, 6, 7, 8]}).to_csv(path, index=False)
        with pytest.raises(DataError, match="no line could be fitted to the pooled rows"):
            _run(_cfg(path, tmp_path, data={"moments_above_mb": 1e-6}))


class TestUseMomentsPath:
    def test_small_file_takes_the_ordinary_path(self, data_files):
        tmp, csv, _, _ = data_files
        assert use_moments_path(_cfg(csv, tmp)) is None

    def test_large_file_or_dask_takes_the_moments_path(self, data_files):
        tmp, csv, _, _ = data_files
        assert "moments_above_mb" in use_moments_path(
            _cfg(csv, tmp, data={"moments_above_mb": 1e-6}))
        assert use_moments_path(_cfg(csv, tmp, engine="dask")) == "engine: dask"

    def test_dask_with_a_row_key_is_an_error(self, data_files):
        tmp, csv, _, _ = data_files
        with pytest.raises(ConfigError, match="engine: dask reads x, y, group and "
                                              "average_within only; remove data.exclude"):
            use_moments_path(_cfg(csv, tmp, engine="dask",
                                  data={"exclude": {"taxon": ["g0001"]}}))

    def test_scheduler_without_dask_is_an_error(self, data_files):
        tmp, csv, _, _ = data_files
        with pytest.raises(ConfigError, match="scheduler: is used only with engine: dask"):
            _cfg(csv, tmp, scheduler="tcp://localhost:8786")


class TestSpreadStage:
    def test_appears_above_spread_min_and_matches_spread_from_fits(self, data_files):
        tmp, csv, _, ordinary = data_files
        # exact by construction: the table has 25 groups, above the default spread_min 20
        assert "exponent_spread" in ordinary.tables
        s = ordinary.tables["exponent_spread"].set_index("method")
        ref = spread_from_fits(ordinary.fits, "sma", exponents={"three_quarters": 0.75})
        # internal consistency: the stage is spread_from_fits on the run's fits
        assert s.loc["sma", "mean"] == pytest.approx(ref.mean, rel=1e-12)
        assert s.loc["sma", "tau"] == pytest.approx(ref.tau, rel=1e-12, abs=1e-15)
        tests = ordinary.tables["exponent_spread_tests"]
        # exact: one row set per method of the config (ols, sma, ma); 25 groups as built
        assert set(tests["method"]) == {"ols", "sma", "ma"}
        assert any(m.startswith("Across 25 groups (taxon) the mean SMA exponent")
                   for m in ordinary.messages)

    def test_recovers_the_seeded_mean_exponent(self, data_files):
        _, _, _, ordinary = data_files
        s = ordinary.tables["exponent_spread"].set_index("method")
        # simulation truth: exponent 0.75 in every group (OLS is unbiased for it)
        assert s.loc["ols", "mean_low"] < 0.75 < s.loc["ols", "mean_high"]

    def test_absent_at_or_below_spread_min(self, data_files):
        tmp, csv, _, ordinary = data_files
        cfg = _cfg(csv, tmp, groups={"spread_min": 25})
        stage = spread_stage(cfg, RunState(data=ordinary.data, base=10.0, fits=ordinary.fits))
        assert stage.tables == {} and stage.messages == () and stage.notes == ()


class TestBoundedDiagnostics:
    def test_group_checks_dropped_above_the_limit(self, data_files):
        tmp, csv, _, _ = data_files
        cfg = _cfg(csv, tmp, groups={"diagnostics_max": 3})
        fits = {("pooled", "", "ols"): 1, ("group", "a", "ols"): 2}
        sets = {("pooled", ""): 1, ("group", "a"): 2, ("group", "b"): 3, ("group", "c"): 4,
                ("group", "d"): 5}
        f, s, note = bounded_diagnostics(fits, sets, cfg)
        # exact by construction: 4 groups > diagnostics_max 3 keep only the pooled entries;
        # 2 groups (the first three sets) are within the limit and keep everything
        assert list(f) == [("pooled", "", "ols")] and list(s) == [("pooled", "")]
        assert "Per-group diagnostics skipped" in note[0]
        assert bounded_diagnostics(fits, dict(list(sets.items())[:3]), cfg)[2] == []


class TestManyGroupsRun:
    """A run with more groups than every report cap writes bounded outputs.

    The caps are module constants (report_parts.TABLE_MAX_ROWS = 60,
    figure_exponents.SPREAD_BARS_MAX = 150; summary.md folds tables over
    report.MD_MAX_ROWS = 12) and the config key groups.diagnostics_max (200);
    they are lowered here (monkeypatch, config) so that 40 groups exceed each
    of them, instead of running thousands of groups through the same code
    paths.
    """

    GROUPS = 40

    def test_more_groups_than_the_caps_write_a_bounded_report(self, tmp_path, monkeypatch):
        import scaling.render.figure_exponents as figure_exponents
        import scaling.render.report_parts as report_parts
        monkeypatch.setattr(report_parts, "TABLE_MAX_ROWS", 20)   # > MD_MAX_ROWS (12)
        monkeypatch.setattr(figure_exponents, "SPREAD_BARS_MAX", 15)
        G = self.GROUPS
        df = _table(G, 4, seed=11)
        path = tmp_path / "many.csv"
        df.to_csv(path, index=False)
        cfg = _cfg(path, tmp_path, groups={"compare": False, "diagnostics_max": 10},
                   figures={"kinds": ["scaling"], "dpi": 50})
        res = write_outputs(_run(cfg), tmp_path / "out")
        html = (tmp_path / "out" / "report.html").read_text(encoding="utf-8")
        md = (tmp_path / "out" / "summary.md").read_text(encoding="utf-8")
        # exact by construction: 3 methods x (pooled + G groups + line through the means)
        n_fits = 3 * (1 + G + 1)
        assert len(pd.read_csv(tmp_path / "out" / "fits.csv")) == n_fits
        # bounded: the fits table shows the first TABLE_MAX_ROWS rows and says where the rest are
        assert "every fit is in fits.csv" in md
        assert f"First 20 of {n_fits:,} fits shown" in html
        # bounded: every long table (slope_tests too) shows TABLE_MAX_ROWS rows and a note
        assert html.count("First 20 of ") >= 2
        assert "rows shown; every row is in slope_tests.csv." in html
        # summary.md links the long tables to their CSV instead of writing them out
        assert "rows, in [slope_tests.csv](slope_tests.csv)" in md
        assert (tmp_path / "out" / "figures" / "group_exponents.png").exists()
        assert (tmp_path / "out" / "exponent_spread.csv").exists()
        assert any("Per-group diagnostics skipped" in w for w in res.warnings)


class TestScalingFigureOfTheMomentsPath:
    """The moments path holds no points: its scaling figure draws the points its second
    pass picked, the lines and the means, as the in-memory figure does."""

    @staticmethod
    def _figure(result):
        from matplotlib.collections import LineCollection
        from scaling.render.figure_scaling import make_scaling
        fig = make_scaling(result)
        ax = fig.axes[0]
        texts = [t.get_text() for leg in fig.legends for t in leg.get_texts()]
        segments = sum(len(c.get_segments()) for c in ax.collections
                       if isinstance(c, LineCollection))
        return ax, texts, segments

    def test_group_lines_means_and_counts_as_in_memory(self, tmp_path):
        path = tmp_path / "few.csv"
        _table(5, 30).to_csv(path, index=False)
        mem = _run(_cfg(path, tmp_path))
        big = _run(_cfg(path, tmp_path, data={"moments_above_mb": 1e-6, "chunk_size": 40}))
        ax_m, texts_m, _ = self._figure(mem)
        ax_b, texts_b, _ = self._figure(big)
        # exact: 30 rows in each of five groups; the legend is the in-memory figure's
        assert "g0000 (n = 30)" in texts_b
        assert texts_b == texts_m
        # the same 150 points (internal consistency: the rows of the file)
        drawn = [np.vstack([c.get_offsets() for c in ax.collections
                            if len(c.get_offsets()) and c.get_zorder() == 2])
                 for ax in (ax_m, ax_b)]
        assert drawn[0].shape == (150, 2)
        np.testing.assert_allclose(drawn[1], drawn[0], rtol=1e-14)
        # the same lines (pooled line and one per group; internal consistency)
        lines_m = sorted((round(float(ln.get_ydata()[0]), 9), len(ln.get_xdata()))
                         for ln in ax_m.lines)
        lines_b = sorted((round(float(ln.get_ydata()[0]), 9), len(ln.get_xdata()))
                         for ln in ax_b.lines)
        assert lines_b == lines_m and len(lines_b) >= 6

    def test_many_groups_draw_each_line_and_the_pooled_count(self, data_files):
        tmp, csv, _, ordinary = data_files
        big = _run(_cfg(csv, tmp, data={"moments_above_mb": 1e-6}))
        _, _, segments_m = self._figure(ordinary)
        _, texts, segments = self._figure(big)
        # exact: 25 groups, one line segment each and two SE bars on each mean, as the
        # in-memory figure draws them
        assert segments == segments_m == 25 * 3
        assert "points not drawn: large-data run" not in texts

    def test_without_groups_the_legend_gives_the_points_fitted(self, data_files):
        tmp, csv, _, _ = data_files
        cfg = _cfg(csv, tmp, data={"moments_above_mb": 1e-6, "group": None})
        _, texts, _ = self._figure(_run(cfg))
        # exact: the 1000 rows written, drawn as in memory
        assert "data (n = 1000)" in texts
