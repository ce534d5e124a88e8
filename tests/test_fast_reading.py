"""The column-typed reading of plain delimited files gives the text reading's result.

``load_data`` reads a plain csv/tsv (UTF-8, ``\\n`` line ends, no quotes, every
number finite and positive, ...) with :func:`scaling.io.fast_csv.read_plain_columns`
and any other file as text (``read_table`` + ``clean_table``).  The text reading
is the reference: every check here that compares the two is internal
consistency.  Where a check is about the value of a number, the reference is
Python's ``float()``, which rounds a decimal text correctly (IEEE 754
round-to-nearest-even), an exact law of the format.
"""
from __future__ import annotations

import sys
import warnings
from unittest import mock

import numpy as np
import pandas as pd
import pytest

from scaling.errors import ScalingError
from scaling.io import tables
from scaling.io.config import config_from_dict
from scaling.io.fast_csv import read_plain_columns, read_plain_text
from scaling.io.tables import clean_table, load_data, read_table

pytest.importorskip("pyarrow")


def _cfg(tmp_path, name="t.csv", **data):
    base = {"file": name, "x": "mass", "y": "rate"}
    base.update(data)
    return config_from_dict({"data": base}, base_dir=tmp_path).data


def _write(tmp_path, content, name="t.csv"):
    path = tmp_path / name
    if isinstance(content, bytes):
        path.write_bytes(content)
    else:
        path.write_bytes(content.encode("utf-8"))
    return path


def _outcome(read):
    """(CleanData or None, error message or None, warning messages) of ``read()``."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            data, error = read(), None
        except ScalingError as exc:
            data, error = None, str(exc)
    return data, error, [str(w.message) for w in caught]


def _assert_same(fast, ref):
    """Two CleanData are the same: every column bit for bit, its dtype, and the counts."""
    pd.testing.assert_frame_equal(fast.points, ref.points, check_exact=True)
    for column in fast.points.columns:
        a, b = fast.points[column].to_numpy(), ref.points[column].to_numpy()
        if a.dtype.kind == "f":   # bit for bit, so -0.0 and 0.0 or two NaNs differ
            assert (a.view(np.int64) == b.view(np.int64)).all(), column
    pd.testing.assert_frame_equal(fast.dropped, ref.dropped, check_exact=True)
    assert (fast.n_read, fast.units, fast.averaged_within, fast.n_rows_used) == (
        ref.n_read, ref.units, ref.averaged_within, ref.n_rows_used)


def _pandas_read(cfg):
    """The text reading with every csv cell read by pandas (the reference)."""
    with mock.patch.object(tables, "read_plain_text", lambda *a, **k: None):
        return clean_table(read_table(cfg), cfg)


def _check_against_text(cfg, *, plain: bool):
    """load_data equals the text reading (data, error message and warnings alike);
    ``plain``: whether the column-typed reading takes the file (else it declines)."""
    taken = tables._clean_plain(cfg)
    assert (taken is not None) == plain
    ref, ref_error, ref_warnings = _outcome(lambda: _pandas_read(cfg))
    got, error, got_warnings = _outcome(lambda: load_data(cfg))
    assert error == ref_error
    assert got_warnings == ref_warnings
    if ref is not None:
        _assert_same(got, ref)
        if taken is not None:
            _assert_same(taken, ref)
    return got


# Files the column-typed reading takes; each gives the text reading's result
# (internal consistency: the text reading is the reference).
PLAIN = {
    "groups": ("mass,rate,species\n1.5,2.25,sp1\n3,4e1,sp2\n10,0.5,sp1\n", {"group": "species"}),
    "tab": ("mass\trate\tsp\n1.5\t2\ta\n3\t4\tb\n", {"group": "sp"}),
    "semicolon": ("mass;rate;sp\n1.5;2;a\n3;4;b\n", {"group": "sp"}),
    "pipe": ("mass|rate|sp\n1.5|2|a\n3|4|b\n", {"group": "sp", "delimiter": "|"}),
    "no final newline": ("mass,rate\n1,2\n3,4", {}),
    "title lines": ("Survey 2024\n\nmass,rate\n1,2\n3,4\n", {"skip_rows": 2}),
    "padded header": (" mass ,rate\t,sp\n1,2,a\n3,4,b\n", {"group": "sp"}),
    "spaces around numbers": ("mass,rate\n 1.5,2 \n\t3 , 4e+1\n", {}),
    "trailing spaces on lines": ("mass,rate,sp\n1,2,a   \n3,4,b \n", {"group": "sp"}),
    "labels trimmed": ("mass,rate,sp\n1,2, a b \n3,4,\u00e9t\u00e9\u00a0\n5,6,\u7a2e\n",
                       {"group": "sp"}),
    "columns not read": ("id,mass,note,rate\n1,1,<0.5,2\n2,3,NA,4\n3,5,,6\n", {}),
    "averaged": ("mass,rate,sp,cl\n1,2,a,x\n3,4,a,x\n5,6,b,y\n7,9,c,y\n",
                 {"group": "cl", "average_within": "sp"}),
    "labels that look like numbers or missing": ("mass,rate,sp\n1,2,NA\n3,4,0\n5,6,-\n",
                                                 {"group": "sp"}),
}


@pytest.mark.parametrize("name", list(PLAIN))
def test_plain_files_give_the_text_result(tmp_path, name):
    content, data = PLAIN[name]
    _write(tmp_path, content)
    _check_against_text(_cfg(tmp_path, **data), plain=True)


# Files the column-typed reading declines: each would give a drop reason, a
# warning, an error, or needs the text reading's rules.  The result is the text
# reading's, message for message (internal consistency).
DECLINED = {
    "blank cell": ("mass,rate\n1,2\n,4\n5,6\n", {}),
    "NA": ("mass,rate\n1,2\nNA,4\n5,6\n", {}),
    "nan": ("mass,rate\n1,2\nnan,4\n5,6\n", {}),
    "None": ("mass,rate\n1,2\n3,None\n5,6\n", {}),
    "censored": ("mass,rate\n1,2\n<0.5,4\n5,6\n", {}),
    "zero": ("mass,rate\n1,2\n0,4\n5,6\n", {}),
    "minus zero": ("mass,rate\n1,2\n-0,4\n5,6\n", {}),
    "underflow to zero": ("mass,rate\n1,2\n1e-400,4\n5,6\n", {}),
    "negative": ("mass,rate\n1,2\n3,-4\n5,6\n", {}),
    "inf": ("mass,rate\n1,2\ninf,4\n5,6\n", {}),
    "overflow": ("mass,rate\n1,2\n1e400,4\n5,6\n", {}),
    "decimal comma in a cell": ("mass;rate\n1;2\n1,5;4\n5;6\n", {}),
    "decimal commas throughout": ("mass;rate\n1,5;2,5\n3,5;4,5\n", {}),
    "TRUE": ("mass,rate\n1,2\nTRUE,4\n5,6\n", {}),
    "plus sign": ("mass,rate\n1,2\n+3,4\n5,6\n", {}),
    "plus sign in a label": ("mass,rate,sp\n1,2,a+b\n5,6,c\n", {"group": "sp"}),
    "digit separator": ("mass,rate\n1,2\n1_000,4\n5,6\n", {}),
    "no-break space around a number": ("mass,rate\n1,2\n\u00a03\u00a0,4\n5,6\n", {}),
    "blank cell of spaces": ("mass,rate\n1,2\n  ,4\n5,6\n", {}),
    "quoted fields": ('mass,rate,sp\n"1.5",2,a\n3,4,"b, c"\n', {"group": "sp"}),
    "quoted label": ('mass,rate,sp\n1,2,"a"\n3,4,b\n', {"group": "sp"}),
    "BOM": ("\ufeffmass,rate\n1,2\n3,4\n", {}),
    "BOM before a column not read": ("\ufeffid,mass,rate\nq,1,2\nr,3,4\n", {}),
    "CRLF": ("mass,rate\r\n1,2\r\n3,4\r\n", {}),
    "empty trailing line": ("mass,rate\n1,2\n3,4\n\n", {}),
    "blank line": ("mass,rate\n1,2\n\n3,4\n", {}),
    "line of spaces": ("mass,rate\n1,2\n   \n3,4\n", {}),
    "missing group": ("mass,rate,sp\n1,2,a\n3,4, \n5,6,b\n", {"group": "sp"}),
    "missing unit": ("mass,rate,sp\n1,2,a\n3,4,\n5,6,b\n", {"average_within": "sp"}),
    "short line": ("mass,rate,sp\n1,2,a\n3,4\n5,6,b\n", {"group": "sp"}),
    "long line": ("mass,rate,sp\n1,2,a\n3,4,b,c\n5,6,b\n", {"group": "sp"}),
    "duplicated column read": ("mass,rate,mass\n1,2,3\n4,5,6\n", {}),
    "duplicated column not read": ("mass,rate,id,id\n1,2,3,4\n4,5,6,7\n", {}),
    "blank header cell": ("mass,rate,\n1,2,3\n4,5,6\n", {}),
    "column not found": ("mas,rate\n1,2\n3,4\n", {}),
    "header only": ("mass,rate\n", {}),
    "exclude": ("mass,rate,sp\n1,2,a\n3,4,b\n5,6,c\n", {"group": "sp", "exclude": {"sp": ["b"]}}),
    "units row": ("mass,rate\ng,W\n1,2\n3,4\n", {"units_row": True}),
    "units row of numbers": ("mass,rate\n1,2\n3,4\n", {"units_row": True}),
    "decimal comma config": ("mass;rate\n1,5;2\n3;4\n", {"decimal": ","}),
    "another encoding": ("mass,rate,sp\n1,2,a\n3,4,b\n", {"encoding": "latin-1"}),
    "colon delimiter": ("mass:rate\n1:2\n3:4\n", {"delimiter": ":"}),
    "title lines not skipped": ("Survey 2024\nmass,rate\n1,2\n3,4\n", {}),
}


@pytest.mark.parametrize("name", list(DECLINED))
def test_other_files_are_read_as_text(tmp_path, name):
    content, data = DECLINED[name]
    _write(tmp_path, content)
    _check_against_text(_cfg(tmp_path, **data), plain=False)


def _table_outcome(read):
    """(table, attrs) of ``read()``, or the error message."""
    try:
        table = read()
    except ScalingError as exc:
        return str(exc)
    return table, dict(table.attrs)


ALL_FILES = {**{f"plain {k}": v for k, v in PLAIN.items()},
             **{f"declined {k}": v for k, v in DECLINED.items()},
             "one column": ("mass\n1\n\n3\n", {}),
             "blank lines only": ("mass,rate\n\n\n", {}),
             "empty file": ("", {}),
             "header of blanks": (",,\n1,2,3\n", {}),
             "duplicated and blank names": ("a,a,,a, a\n1,2,3,4,5\n", {})}


@pytest.mark.parametrize("name", list(ALL_FILES))
def test_text_table_is_pandas_table(tmp_path, name):
    # read_table reads a plain file's cells with pyarrow as text; the table (values,
    # dtypes, names, index, attrs) or the error is the one pandas' read_csv gives.
    content, data = ALL_FILES[name]
    _write(tmp_path, content)
    cfg = _cfg(tmp_path, **data)
    with mock.patch.object(tables, "read_plain_text", lambda *a, **k: None):
        expected = _table_outcome(lambda: read_table(cfg))
    got = _table_outcome(lambda: read_table(cfg))
    if isinstance(expected, str):
        assert got == expected
    else:
        pd.testing.assert_frame_equal(got[0], expected[0], check_exact=True)
        assert got[1] == expected[1]


def test_text_table_of_a_plain_file_is_read_by_arrow(tmp_path):
    # A blank line and words among numbers: no column-typed answer, but the cells of
    # the plain file are read by pyarrow (the comparison above then has teeth).
    path = _write(tmp_path, "mass,rate,sp\n1,2,a\n\nNA,<1,b\n")
    arrays = read_plain_text(path, sep=",", skip_rows=0, n_columns=3)
    assert [a.to_pylist() for a in arrays] == [["1", "", "NA"], ["2", "", "<1"], ["a", "", "b"]]
    assert read_plain_text(path, sep=",", skip_rows=0, n_columns=2) is None


class TestBytes:
    def test_bad_utf8_in_a_column_not_read_is_still_an_error(self, tmp_path):
        # The text reading decodes the whole file; so must the answer.
        _write(tmp_path, b"mass,rate,note\n1,2,caf\xe9\n3,4,ok\n")
        _check_against_text(_cfg(tmp_path), plain=False)

    def test_nul_byte(self, tmp_path):
        _write(tmp_path, b"mass,rate,sp\n1,2,a\x00b\n3,4,c\n")
        _check_against_text(_cfg(tmp_path, group="sp"), plain=False)

    def test_utf8_split_across_scan_blocks(self, tmp_path, monkeypatch):
        # A two-byte character across the boundary of the 1 MB scan blocks.
        from scaling.io import fast_csv
        monkeypatch.setattr(fast_csv, "_SCAN_BYTES", 16)
        _write(tmp_path, "mass,rate,sp\n1,2,\u00e9a\n3,4,b\u00e9\u00e9\n")
        _check_against_text(_cfg(tmp_path, group="sp"), plain=True)


class TestReadPlainColumns:
    def test_a_column_asked_for_twice_is_declined(self, tmp_path):
        path = _write(tmp_path, "mass,rate,sp\n1,2,a\n3,4,b\n")
        assert read_plain_columns(path, sep=",", skip_rows=0, numbers=("mass", "mass"),
                                  labels=()) is None
        assert read_plain_columns(path, sep=",", skip_rows=0, numbers=("mass", "rate"),
                                  labels=("sp", "sp")) is None
        assert read_plain_columns(path, sep=",", skip_rows=0, numbers=("mass", "rate"),
                                  labels=("sp",)) is not None

    def test_columns(self, tmp_path):
        # Values from the file's text, read by eye.
        path = _write(tmp_path, "a,mass,sp,rate\nz,1.5, x ,2\nz,3,y,4e1\n")
        out = read_plain_columns(path, sep=",", skip_rows=0, numbers=("mass", "rate"),
                                 labels=("sp",))
        assert out["mass"].tolist() == [1.5, 3.0] and out["rate"].tolist() == [2.0, 40.0]
        assert out["sp"].to_pylist() == ["x", "y"]


class TestNumberValues:
    """The value of each number text.  Reference: Python's float() (correctly rounded,
    IEEE 754 binary64, round to nearest even), an exact law of the format."""

    HARD = ["2.2250738585072011e-308", "2.2250738585072014e-308", "4.9406564584124654e-324",
            "2.4703282292062328e-324", "1e-310", "1.7976931348623157e308", "1e300", "1e-300",
            "1.", ".5", "1E5", "1e+05", "0.1", "9007199254740993", "000012.5", "1e-0005",
            "1.00000000000000011102230246251565404236316680908203125",
            "1.000000000000000111022302462515654042363166809082031250000001",
            "8.98846567431158e307", "123456789012345678901234567890",
            "0.000000000000000000000000000001234567890123456789",
            "7" * 300, "0." + "0" * 300 + "1" * 50]

    @staticmethod
    def _texts(sign=""):
        rng = np.random.default_rng(20261205)
        values = np.exp(rng.uniform(-700.0, 700.0, 3000))
        digits = rng.integers(1, 40, values.size)
        texts = [f"{v:.{int(k)}g}" for v, k in zip(values, digits)]
        texts += [repr(float(v)) for v in values[:1000]]
        texts += [f"{v:.{int(k)}e}".upper() for v, k in zip(values[:1000], digits[:1000])]
        texts += TestNumberValues.HARD
        pads = [" ", "\t", "  ", "", " \t"]
        return ([pads[i % len(pads)] + sign + t for i, t in enumerate(texts[:2500])]
                + [sign + t + " " for t in texts[2500:3000]] + [sign + t for t in texts[3000:]])

    def test_values_are_pythons_float_bit_for_bit(self, tmp_path):
        texts = self._texts()
        _write(tmp_path, "mass,rate\n" + "".join(f"{t},{t}\n" for t in texts))
        data = _check_against_text(_cfg(tmp_path), plain=True)
        expected = np.array([float(t) for t in texts])   # Python's float(): correctly rounded
        got = data.points["x"].to_numpy()
        assert (got.view(np.int64) == expected.view(np.int64)).all()

    def test_a_leading_plus_keeps_the_text_readings_values(self, tmp_path):
        # pandas' to_numeric (the text reading) puts some "+"-signed texts one unit in
        # the last place off Python's float(); pyarrow would not.  Such files keep the
        # text reading, so a value does not depend on which reading a file takes.
        texts = self._texts(sign="+")
        _write(tmp_path, "mass,rate\n" + "".join(f"{t},{t}\n" for t in texts))
        _check_against_text(_cfg(tmp_path), plain=False)


class TestWithoutPyarrow:
    def test_every_file_is_read_as_text(self, tmp_path, monkeypatch):
        # pyarrow is an optional extra: without it the text reading serves alone.
        content, data = PLAIN["groups"]
        _write(tmp_path, content)
        cfg = _cfg(tmp_path, **data)
        with_pyarrow = load_data(cfg)
        monkeypatch.setitem(sys.modules, "pyarrow.csv", None)   # import fails
        assert tables._clean_plain(cfg) is None
        _assert_same(load_data(cfg), with_pyarrow)


class TestLean:
    def test_a_plain_file_makes_no_text_table(self, tmp_path, monkeypatch):
        # The point of the shortcut: a plain file never becomes a table of text.
        rows = "".join(f"{i + 1}.5,{2 * i + 1}e-3,sp{i % 7}\n" for i in range(500))
        _write(tmp_path, "mass,rate,species\n" + rows)
        cfg = _cfg(tmp_path, group="species")
        reference = clean_table(read_table(cfg), cfg)

        def refuse(*args, **kwargs):
            raise AssertionError("read the file as text")

        monkeypatch.setattr(tables, "read_table", refuse)
        _assert_same(load_data(cfg), reference)
        assert reference.points["group"].dtype == pd.StringDtype("pyarrow", na_value=np.nan)


    @pytest.mark.parametrize("rows_text", ["", "2.5,n/a,sp1\n"])
    def test_the_count_column_is_ones_held_once(self, tmp_path, rows_text):
        # exact law: without averaging each point is one input row; the column holds the
        # single number 1 (stride 0, read-only) and behaves as a column of ones; a write
        # to a copy leaves the points as they are (both roads: plain and text reading)
        rows = "".join(f"{i + 1}.5,{2 * i + 1}e-3,sp{i % 7}\n" for i in range(50))
        _write(tmp_path, "mass,rate,species\n" + rows + rows_text)
        cfg = _cfg(tmp_path, group="species")
        pts = load_data(cfg).points
        assert len(pts) == 50
        pd.testing.assert_series_equal(pts["n_rows"], pd.Series(np.ones(50, dtype=np.int64),
                                                                name="n_rows"))
        assert pts["n_rows"].to_numpy().strides == (0,)
        changed = pts.copy()
        changed.loc[3, "n_rows"] = 5
        assert pts["n_rows"].tolist() == [1] * 50 and changed["n_rows"].sum() == 54


    @pytest.mark.parametrize("block", [4096, 1 << 24])
    def test_values_do_not_depend_on_the_parsed_block(self, tmp_path, monkeypatch, block):
        # internal consistency: a file parsed in many small blocks or in one gives the
        # text reading's points bit for bit (labels, numbers, logs and counts)
        from scaling.io import fast_csv
        rng = np.random.default_rng(11)
        x, y = rng.lognormal(0, 3, 3000), rng.lognormal(0, 3, 3000)
        rows = "".join(f"{float(a)!r},{b:.6e},sp{i % 13}\n"
                       for i, (a, b) in enumerate(zip(x, y)))
        _write(tmp_path, "mass,rate,species\n" + rows)
        cfg = _cfg(tmp_path, group="species")
        reference = clean_table(read_table(cfg), cfg)
        monkeypatch.setattr(fast_csv, "BLOCK_BYTES", block)
        calls = []
        real = fast_csv._arrow_read
        monkeypatch.setattr(fast_csv, "_arrow_read",
                            lambda *a, **k: calls.append(1) or real(*a, **k))
        _assert_same(load_data(cfg), reference)
        assert calls   # the plain reading answered


class TestToNumbers:
    """``_to_numbers`` gives ``pd.to_numeric(text, errors="coerce")``'s bits (the text
    reading's own rule: internal consistency), column by column."""

    WORDS = ["", "NA", "n/a", "nan", "None", "-", "?", "<0.5", "> 2", "abc", "1,5", "1.5.2",
             "0x10", "1_000", "\u0661\u0662", "\uff11\uff12", "1e", "e5", ".", "TRUE", "1d5"]
    NUMBERS = ["0", "-0", "0.0", "+0", "-1.5", "+1.5", "+.5", "inf", "-inf", "Infinity",
               "1e400", "1e-400", "-1e-400", "+1e5", " 1.5", "1.5 ", "+9007199254740993",
               "9007199254740993", "18446744073709551616", "-9223372036854775809",
               "123456789012345678901234567890", "1e0005", "000012.5"]

    @staticmethod
    def _bits(values):
        return np.asarray(values, dtype=float).view(np.int64)

    def _check(self, cells):
        text = pd.Series(cells, dtype="str")
        expected = pd.to_numeric(text, errors="coerce").to_numpy(dtype=float)
        assert (self._bits(tables._to_numbers(text)) == self._bits(expected)).all(), cells

    def test_plain_numbers_with_words(self):
        rng = np.random.default_rng(7)
        numbers = [f"{v:.{int(k)}g}" for v, k in zip(np.exp(rng.uniform(-700, 700, 2000)),
                                                      rng.integers(1, 30, 2000))]
        self._check(numbers)
        self._check(numbers + self.WORDS)
        self._check(self.WORDS)

    @pytest.mark.parametrize("number", NUMBERS)
    def test_other_numbers_alone_among_plain_ones_or_words(self, number):
        # With a signed or spelled number in the column, to_numeric reads the whole
        # column as before (its integer reading depends on the other cells).
        self._check([number])
        self._check(["1", "2", number])
        self._check(["1.5", "2", number])
        self._check(["1", "NA", number])
        self._check(["9007199254740993", number])

    def test_integers(self):
        self._check(["1", "2", "9007199254740993", "18446744073709551616"])
        self._check(["1", "2", "123456789012345678901234567890", ""])
        self._check(["+1", "2", "9007199254740993"])

    def test_object_and_empty_columns(self):
        self._check([])
        cells = pd.Series(["1.5", "NA", "+2"], dtype=object)
        expected = pd.to_numeric(cells, errors="coerce").to_numpy(dtype=float)
        assert (self._bits(tables._to_numbers(cells)) == self._bits(expected)).all()

    def test_the_text_table_is_let_go_before_the_points_are_built(self, tmp_path, monkeypatch):
        # A file with a row to drop is cleaned from a table of text; that table is
        # not kept alive while the points (the run's data) are made.
        import weakref
        _write(tmp_path, "mass,rate,sp\n1,2,a\n,3,b\n4,5,c\n")
        cfg = _cfg(tmp_path, group="sp")
        made, alive = [], []
        read, points = tables.read_table, tables._points

        def reading(c):
            table = read(c)
            made.append(weakref.ref(table))
            return table

        def building(*args, **kwargs):
            alive.append(made[0]() is not None)
            return points(*args, **kwargs)

        monkeypatch.setattr(tables, "read_table", reading)
        monkeypatch.setattr(tables, "_points", building)
        data = load_data(cfg)
        assert alive == [False] and len(data.points) == 2 and data.dropped["row"].tolist() == [2]


class TestReadAhead:
    """A read started ahead (``scaling run`` starts one while it imports the modules the
    run needs) stands for the next read of the same unchanged file with the same
    arguments, and for nothing else (internal consistency: the answer is the plain
    read's own)."""

    def _table(self, tmp_path, rows=500):
        rng = np.random.default_rng(3)
        frame = pd.DataFrame({"mass": 10 ** rng.uniform(0, 3, rows),
                              "rate": 10 ** rng.uniform(0, 2, rows),
                              "grp": rng.choice(["a", "b", "c"], rows)})
        path = tmp_path / "t.csv"
        frame.to_csv(path, index=False)
        return path

    @pytest.fixture
    def reads(self, monkeypatch):
        from scaling.io import fast_csv
        calls = []
        plain = fast_csv._read_plain_columns

        def counted(*args, **kwargs):
            calls.append(1)
            return plain(*args, **kwargs)
        monkeypatch.setattr(fast_csv, "_read_plain_columns", counted)
        monkeypatch.setattr(fast_csv, "_AHEAD", {})
        return calls

    ARGS = dict(sep=",", skip_rows=0, numbers=("mass", "rate"), labels=("grp",))

    def test_the_read_ahead_is_the_read(self, tmp_path, reads):
        from scaling.io import fast_csv
        path = self._table(tmp_path)
        want = fast_csv._read_plain_columns(path, **self.ARGS)
        reads.clear()
        fast_csv.read_ahead(path, **self.ARGS)
        fast_csv.settle_reads()
        got = read_plain_columns(path, **self.ARGS)
        assert len(reads) == 1 and fast_csv._AHEAD == {}   # read once, taken once
        for name in ("mass", "rate"):
            assert np.array_equal(got[name], want[name])
        assert got["grp"].equals(want["grp"])
        read_plain_columns(path, **self.ARGS)   # the next read reads again
        assert len(reads) == 2

    def test_a_file_changed_since_is_read_again(self, tmp_path, reads):
        from scaling.io import fast_csv
        path = self._table(tmp_path)
        fast_csv.read_ahead(path, **self.ARGS)
        fast_csv.settle_reads()
        path.write_text("mass,rate,grp\n1,2,a\n3,4,b\n5,6,a\n")
        got = read_plain_columns(path, **self.ARGS)
        assert got["mass"].tolist() == [1.0, 3.0, 5.0]
        assert len(reads) == 2

    def test_other_arguments_read_again(self, tmp_path, reads):
        from scaling.io import fast_csv
        path = self._table(tmp_path)
        fast_csv.read_ahead(path, **self.ARGS)
        got = read_plain_columns(path, **{**self.ARGS, "labels": ()})
        fast_csv.settle_reads()
        assert "grp" not in got and len(reads) == 2

    def test_a_failed_read_ahead_is_read_again_where_it_raises(self, tmp_path, reads,
                                                              monkeypatch):
        from scaling.io import fast_csv
        path = self._table(tmp_path)
        plain = fast_csv._read_plain_columns

        def once_broken(*args, **kwargs):
            if len(reads) == 0:
                reads.append(1)
                raise MemoryError("read ahead")
            return plain(*args, **kwargs)
        monkeypatch.setattr(fast_csv, "_read_plain_columns", once_broken)
        fast_csv.read_ahead(path, **self.ARGS)
        fast_csv.settle_reads()
        got = read_plain_columns(path, **self.ARGS)
        assert len(got["mass"]) == 500

    def test_the_run_command_reads_ahead_only_what_it_reads_whole(self, tmp_path, reads):
        from scaling import cli
        from scaling.io import fast_csv
        self._table(tmp_path)
        body = "data:\n  file: t.csv\n  x: mass\n  y: rate\n  group: grp\n"
        for extra, ahead in (("", 1), ("  moments_above_mb: 0.000001\n", 0),
                             ("engine: dask\n", 0), ("  exclude: {grp: [a]}\n", 0)):
            cfg = tmp_path / "run.yaml"
            cfg.write_text(body + extra if not extra.startswith("engine") else extra + body)
            fast_csv._AHEAD.clear()
            cli._read_ahead(cfg)
            fast_csv.settle_reads()
            assert len(fast_csv._AHEAD) == ahead, extra
        (tmp_path / "bad.yaml").write_text("data: [\n")
        cli._read_ahead(tmp_path / "bad.yaml")   # the run reports it, not the read ahead
        cli._read_ahead(tmp_path / "missing.yaml")
