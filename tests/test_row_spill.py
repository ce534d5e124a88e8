"""The moments path keeps its cleaned rows on disk so the second pass does not parse the file again.

Every check here is internal consistency: the spill must give, to the last
bit, what a second read and clean of the file gives (that road is itself
compared with the in-memory road in test_second_pass.py and test_road_parity.py).
"""

from __future__ import annotations

import dataclasses
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_array_equal

from scaling.io.chunked import clean_chunk, read_chunks
from scaling.io.config import config_from_dict
from scaling.run import table_moments
from scaling.run.moments_path import moments_stage
from scaling.run.pipeline import run_config
from scaling.run.second_pass import residual_sums
from scaling.run.table_moments import RowSpill, read_moments
from scaling.stats.logscale import to_log

CHUNK = 97


@pytest.fixture(scope="module")
def table(tmp_path_factory):
    """Groups split across chunks, with rows dropped for every reason the reader counts."""
    rng = np.random.default_rng(41)
    n = 1500
    g = rng.integers(0, 7, n)
    lx = rng.uniform(-1, 3, n)
    ly = 0.3 + (0.6 + 0.04 * g) * lx + rng.normal(0, 0.15, n)
    df = pd.DataFrame({"mass": (10 ** lx).astype(object), "rate": (10 ** ly).astype(object),
                       "clade": [f"g{k}" for k in g]})
    df.loc[[3, 400, 401], "mass"] = -2.0          # no logarithm
    df.loc[[10, 97, 950], "rate"] = "n/a"         # not a number
    df.loc[[5, 96, 1499], "clade"] = ""           # missing group
    df.loc[[200], "mass"] = 0.0                   # zero
    path = tmp_path_factory.mktemp("spill") / "t.csv"
    df.to_csv(path, index=False)
    return path


def _cfg(path, **data):
    return {"data": {"file": str(path), "x": "mass", "y": "rate", "group": "clade",
                     "moments_above_mb": 1e-9, "chunk_size": CHUNK, **data},
            "model": {"methods": ["ols", "sma", "ma"]}, "exponents": {"three_quarters": 0.75},
            "prediction": {"x": [1, 30]}, "figures": {"formats": []}}


class TestRowSpill:
    def test_chunks_come_back_as_written(self, tmp_path, monkeypatch):
        monkeypatch.setattr(tempfile, "tempdir", str(tmp_path))
        spill = RowSpill()
        rng = np.random.default_rng(1)
        X, Y = rng.normal(size=6), rng.normal(size=6)
        codes = np.array([0, 1, 1, 0, 2, 1])
        keep = np.array([True, False, True, True, False, True])
        labels = pd.Index(["a", "b", "c"], dtype=object)
        spill.write(labels, codes, X, Y, None, 0, 6)
        spill.write(labels, codes, X, Y, keep, 6, 6)
        spill.write(labels, None, X[:0], Y[:0], None, 12, 0)
        first, second, empty = list(spill.chunks())
        assert_array_equal(first.X, X)
        assert_array_equal(first.codes, codes)
        assert_array_equal(first.rows, np.arange(1, 7))
        assert_array_equal(second.Y, Y[keep])
        assert_array_equal(second.codes, codes[keep])
        assert_array_equal(second.rows, 7 + np.flatnonzero(keep))
        assert second.labels.equals(labels)
        assert empty.codes is None and empty.X.size == 0
        spill.close()
        spill.close()   # idempotent
        assert not spill.usable and not any(tmp_path.iterdir())

    def test_spilled_rows_are_the_cleaned_logs_of_each_chunk(self, table):
        spill = RowSpill()
        read_moments(table, x="mass", y="rate", group="clade", chunk_size=CHUNK, spill=spill)
        first = 0
        parts = read_chunks(Path(table), "csv", ["mass", "rate", "clade"], CHUNK, "pandas",
                            ",", ".")
        for part, got in zip(parts, spill.chunks(), strict=True):
            c = clean_chunk(part, "mass", "rate", "clade", ".")
            keep = ~c.bad if c.bad is not None else np.ones(c.n_rows, bool)
            assert_array_equal(got.X, to_log(c.x[keep], 10.0))
            assert_array_equal(got.Y, to_log(c.y[keep], 10.0))
            assert_array_equal(got.codes, c.codes[keep])
            assert_array_equal(got.rows, first + 1 + np.flatnonzero(keep))
            first += c.n_rows
        spill.close()

    @pytest.mark.parametrize("group", ["clade", None])
    def test_moments_with_a_spill_equal_those_without(self, table, group):
        kw = dict(x="mass", y="rate", group=group, chunk_size=CHUNK)
        spill = RowSpill()
        a = read_moments(table, spill=spill, **kw)
        spill.close()
        b = read_moments(table, **kw)
        for f in dataclasses.fields(a.moments):
            assert_array_equal(getattr(a.moments, f.name), getattr(b.moments, f.name))
        for name in ("x_min", "x_max", "y_min", "y_max", "labels"):
            assert_array_equal(getattr(a, name), getattr(b, name))
        assert a.dropped == b.dropped and a.n_read == b.n_read


class TestSecondPassFromTheSpill:
    @pytest.mark.parametrize("group", ["clade", None])
    def test_residual_sums_equal_a_second_read_of_the_file(self, table, group):
        cfg = config_from_dict(_cfg(table, group=group))
        path = moments_stage(cfg, "test")
        assert path.spill is not None and path.spill.usable
        methods = ["ols", "sma", "ma"]
        spilled = residual_sums(cfg, path.moments, path.fits, methods, 10.0, "sma",
                                path.spill)
        path.spill.close()
        again = residual_sums(cfg, path.moments, path.fits, methods, 10.0, "sma")
        a, b = spilled[0].result(), again[0].result()
        for f in dataclasses.fields(a):
            assert_array_equal(getattr(a, f.name), getattr(b, f.name), err_msg=f.name)
        if group:
            assert spilled[1].anova() == again[1].anova()

    def test_a_run_leaves_no_spill_behind(self, table, tmp_path, monkeypatch):
        monkeypatch.setattr(tempfile, "tempdir", str(tmp_path))
        run_config(_cfg(table), write=False, quiet=True)
        assert not any(tmp_path.iterdir())

    def test_no_spill_with_dask(self, table):
        pytest.importorskip("dask")
        cfg = config_from_dict({**_cfg(table), "engine": "dask"})
        assert moments_stage(cfg, "test").spill is None

    def test_a_failed_write_reads_the_file_again(self, table, monkeypatch):
        whole = run_config(_cfg(table), write=False, quiet=True)

        class Full:
            def write(self, data):
                raise OSError(28, "No space left on device")

            def close(self):
                pass

        made = []
        init = RowSpill.__init__

        def failing(self):
            init(self)
            self._fh.close()
            self._fh = Full()
            made.append(self)

        monkeypatch.setattr(table_moments.RowSpill, "__init__", failing)
        broken = run_config(_cfg(table), write=False, quiet=True)
        assert made and not made[0].usable
        pd.testing.assert_frame_equal(broken.fits, whole.fits)
        for name in ("diagnostics", "influential_rows", "predictions", "points_to_check"):
            pd.testing.assert_frame_equal(broken.tables[name], whole.tables[name])


def test_a_folder_of_parquet_files_takes_the_moments_path(table, tmp_path):
    pytest.importorskip("pyarrow")
    df = pd.read_csv(table, dtype=str)
    folder = tmp_path / "parts"
    folder.mkdir()
    for i, part in enumerate((df.iloc[:700], df.iloc[700:])):
        part = part.copy()
        for c in ("mass", "rate"):
            part[c] = pd.to_numeric(part[c], errors="coerce")
        part.to_parquet(folder / f"p{i}.parquet")
    one = run_config(_cfg(table), write=False, quiet=True)
    parts = run_config(_cfg(folder), write=False, quiet=True)
    # internal consistency: the same rows, summed in other chunks (last digits only)
    cols = ["slope", "intercept", "smearing_factor", "see"]
    np.testing.assert_allclose(parts.fits[cols].to_numpy(float), one.fits[cols].to_numpy(float),
                               rtol=1e-9)
    assert parts.tables["influential_rows"]["row"].tolist() == (
        one.tables["influential_rows"]["row"].tolist())
