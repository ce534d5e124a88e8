"""Tables and numbers turned into text a column at a time give the text of one value at a time.

The column-wise writers (``write_csv``, the table entries of results.json, fits.tex,
``format_values``) must write exactly what the per-value reference writes: pandas'
``DataFrame.to_csv``, the JSON encoder on each row of ``records``, and
``format_value`` / ``_tex_num`` / ``_tex_interval`` on each value.  Every check here
is internal consistency (the fast writer against the reference it replaces).
"""

from __future__ import annotations

import json
import types

import numpy as np
import pandas as pd
import pytest

from scaling.io import output
from scaling.io.output import json_safe, records, write_csv
from scaling.render.report import (_tex_interval, _tex_num, format_value, format_values,
                                   render_fits_tex)
from scaling.stats.schema import method_label

#: Awkward floats: signed zero, subnormal, extremes, powers of ten and their neighbours,
#: whole numbers, values that round up to the next decade, long fractions.
EDGE_FLOATS = np.concatenate([
    [0.0, -0.0, np.nan, np.inf, -np.inf, 1e-300, -1e-300, 1e300, 5e-324,
     1.7976931348623157e308, 123456789012345678.0, 1e16, 9999999999999998.0, 1e15,
     999.95, 9.9995, 0.99995, 99999.5, 0.00099995, 3.0, 12.0, -7.0, 0.5, 1e9, 999999999.0,
     1e-4, 9.99999e-5, 1e-5, 1 / 3, 2 / 3, 0.1 + 0.2, 0.7507510124848206, -0.0001],
    10.0 ** np.arange(-12, 14), -(10.0 ** np.arange(-12, 14)),
    np.nextafter(10.0 ** np.arange(-12, 14), 0), np.nextafter(10.0 ** np.arange(-12, 14), 2e14),
])


def _random_floats(n: int = 4000) -> np.ndarray:
    rng = np.random.default_rng(20261205)
    return rng.normal(size=n) * 10.0 ** rng.integers(-14, 16, n)


def _edge_frame() -> pd.DataFrame:
    """Every column type the run writes, with missing values, text that needs quoting,
    long numbers and non-ASCII text."""
    floats = np.concatenate([EDGE_FLOATS, _random_floats(200)])
    k = floats.size
    words = np.array(["pooled", "", "a,b", 'say "x"', "two\nlines", "Ünïcode", "100%",
                      "{brace}", "tab\there"], dtype=object)
    text = words[np.arange(k) % words.size].copy()
    text[::11] = None
    return pd.DataFrame({
        "scope": pd.array(words[np.arange(k) % 2], dtype="str"),
        "group": pd.array(np.where(np.arange(k) % 5 == 0, None, text), dtype="str"),
        "value": floats,
        "n": np.arange(k, dtype=np.int64) * 10**12,
        "ok": np.arange(k) % 3 == 0,
        "row": pd.array(np.where(np.arange(k) % 4 == 0, None, np.arange(k)), dtype="Int64"),
        "note": text,
        "mixed": np.array([1, 2.5, np.float64(0.25), None, True, "t", np.nan, np.int64(7)]
                          * (k // 8) + [1] * (k % 8), dtype=object),
        "100%": floats[::-1].copy(),
    })


def _quoting_frame() -> pd.DataFrame:
    """Text the csv writer quotes (commas, double quotes, both, a lone quote) beside text
    it does not (spaces, tabs, semicolons, empty, missing), in text and object columns."""
    words = np.array(["plain", "a,b", 'say "x"', '"', '""', ',"', " lead", "trail ",
                      "tab\there", "semi;colon", "", "Ünï,code", None], dtype=object)
    k = 3 * words.size
    return pd.DataFrame({
        "scope": pd.array(words[np.arange(k) % words.size], dtype="str"),
        "value": np.linspace(0.0, 1.0, k),
        "note": words[(np.arange(k) * 5) % words.size],
        "n": np.arange(k, dtype=np.int64),
    })


def _repeated_integers() -> pd.DataFrame:
    """Whole numbers recurring down long columns (row numbers once per method), with the
    extremes of int64 and uint64, negatives and missing values."""
    rng = np.random.default_rng(3)
    pool = np.array([0, -1, 7, 2**31, -(2**63), 2**63 - 1, 123456789012], dtype=np.int64)
    k = 3000
    signed = pool[rng.integers(0, pool.size, k)]
    masked = pd.array(signed, dtype="Int64")
    masked[::7] = pd.NA
    return pd.DataFrame({"row": masked, "n": signed,
                         "u": np.array([2**64 - 1, 5, 2**63], dtype=np.uint64)[np.arange(k) % 3],
                         "small": np.arange(k, dtype=np.int16) % 5})


def _pandas_csv(frame: pd.DataFrame, path) -> bytes:
    frame.to_csv(path, index=False, lineterminator="\n")
    return path.read_bytes()


class TestWriteCsv:
    @pytest.mark.parametrize("make", [
        _edge_frame,
        lambda: _edge_frame()[["scope", "value", "n", "ok", "row"]],   # nothing to quote
        lambda: _edge_frame()[["note"]],                              # one column: "" quoted
        lambda: _edge_frame()[["value"]],
        lambda: _edge_frame().iloc[:0],                               # header only
        lambda: pd.DataFrame({"x": np.float32([0.1, np.nan, 3])}),    # left to pandas
        lambda: pd.DataFrame({"c": pd.Categorical(["u", None])}),     # left to pandas
        lambda: pd.DataFrame({"a": [1.5, 2.5], "b": [np.nan, np.nan]}),
        lambda: pd.DataFrame({1: [0.1, 0.2], "a,b": ["x", "y"]}),     # labels quoted
        _quoting_frame,                      # quoted cells written without the csv writer
        lambda: _repeated_integers(),                                 # each value once
        lambda: _quoting_frame().assign(note=["a\rb"] * len(_quoting_frame())),   # \r: writer
    ])
    def test_writes_the_bytes_pandas_writes(self, tmp_path, make):
        frame = make()
        write_csv(frame, tmp_path / "ours.csv")
        assert (tmp_path / "ours.csv").read_bytes() == _pandas_csv(frame, tmp_path / "p.csv")

    def test_floats_are_written_as_numpy_writes_them(self, tmp_path):
        # pandas writes a float64 column through numpy's astype(str); the writer uses
        # float.__repr__: both are the shortest text that reads back as the same float
        bits = np.random.default_rng(7).integers(0, 2**64, 20000, dtype=np.uint64)
        values = np.concatenate([bits.view(np.float64), EDGE_FLOATS, _random_floats()])
        frame = pd.DataFrame({"v": values, "w": values[::-1].copy()})
        write_csv(frame, tmp_path / "ours.csv")
        assert (tmp_path / "ours.csv").read_bytes() == _pandas_csv(frame, tmp_path / "p.csv")

    def test_repeated_floats_and_signed_zeros_are_written_as_pandas_writes_them(self, tmp_path):
        # each distinct value is written once and taken by its code: 0.0 and -0.0 (equal
        # as numbers, two texts), NaN and repeats among many rows keep pandas' bytes
        rng = np.random.default_rng(11)
        pool = np.array([0.0, -0.0, np.nan, 0.75, 1 / 3, -np.inf, 5e-324, 0.1 + 0.2])
        values = pool[rng.integers(0, pool.size, 5000)]
        frame = pd.DataFrame({"v": values, "w": np.concatenate([values[:4000],
                                                                _random_floats(1000)])})
        write_csv(frame, tmp_path / "ours.csv")
        assert (tmp_path / "ours.csv").read_bytes() == _pandas_csv(frame, tmp_path / "p.csv")
        reference = output._json_part("t", records(frame))
        assert output._json_part("t", frame, output._TableText(frame)) == reference

    def test_a_plant_in_the_float_text_is_caught(self, tmp_path, monkeypatch):
        # teeth: a writer that rounds floats to 15 digits differs from pandas
        frame = pd.DataFrame({"v": [0.1 + 0.2, 1 / 3], "w": [1.0, 2.0]})
        monkeypatch.setattr(output, "_TableText", _rounding_text(output._TableText))
        write_csv(frame, tmp_path / "ours.csv")
        assert (tmp_path / "ours.csv").read_bytes() != _pandas_csv(frame, tmp_path / "p.csv")


def _rounding_text(real):
    class Rounding(real):
        __slots__ = ()

        def __init__(self, frame):
            super().__init__(frame)
            self.csv = [[f"{float(t):.15g}" if t else t for t in col] if j in self._floats
                        else col for j, col in enumerate(self.csv)]
    return Rounding


class TestJsonTables:
    @pytest.mark.parametrize("make", [
        _edge_frame,
        lambda: _edge_frame().iloc[:0],
        lambda: pd.DataFrame(index=range(3)),                        # rows without columns
        lambda: pd.DataFrame({"x": np.float32([0.5, np.nan]), "c": pd.Categorical(["u", None])}),
        lambda: pd.DataFrame([[1.0, 2.0]], columns=["a", "a"]),      # repeated label
    ])
    def test_a_table_is_encoded_as_its_records(self, make):
        frame = make()
        reference = output._json_part("t", records(frame))
        assert output._json_part("t", frame) == reference
        # the text made for the CSV serves the JSON too
        assert output._json_part("t", frame, output._TableText(frame)) == reference

    def test_the_document_parses_to_the_records(self, tmp_path):
        frame = _edge_frame()
        output.write_json({"title": "t", "table": frame}, tmp_path / "r.json")
        doc = json.loads((tmp_path / "r.json").read_text(encoding="utf-8"))
        assert doc["table"] == json.loads(json.dumps(records(frame)))

    def test_saved_fit_dicts_are_encoded_as_json_safe_makes_them(self):
        items = [{"slope": 0.75, "ci": (0.7, 0.8), "n": np.int64(12), "ok": np.bool_(True),
                  "f64": np.float64(0.1), "moments": {"n": [3.0, np.nan]}},
                 {"slope": np.nan, "lam": np.float32(0.5), "x_range": np.array([1.0, np.inf])},
                 {"slope": 1e300, "text": "Ünïcode \"q\"", "none": None, "empty": []}]
        reference = output._json_part("saved_fits", json_safe(items))
        assert output._json_part("saved_fits", output._Plain(items)) == reference


def _saved_fit(i: int, value: float) -> dict:
    """A dict shaped as a saved fit, with ``value`` in its number fields."""
    return {"format": "scaling.linefit/1", "method": ["ols", "sma", "ma"][i % 3], "n": i,
            "slope": value, "slope_ci": (value, -value), "df": float(i),
            "moments": {"n": float(i), "sxx": value, "ends": [value, 1.0]},
            "x_range": [0.5, value], "note": "50% \"q\" Ünï" if i % 2 else "",
            "lam": None if i % 4 else value, "ok": bool(i % 2), "empty": [],
            "none": {}, "scope": "group", "group": f"g{i % 7}"}


class TestSavedFitsByKey:
    """Saved fits written a key at a time equal the encoder on each json_safe'd dict."""

    @staticmethod
    def _reference(items) -> str:
        return ",\n".join("    " + json.dumps(json_safe(item), ensure_ascii=False,
                                               allow_nan=False) for item in items)

    def test_edge_values_down_a_column(self):
        values = np.concatenate([EDGE_FLOATS, _random_floats()]).tolist()
        items = [_saved_fit(i, v) for i, v in enumerate(values)]
        assert output._plain_rows(items) == self._reference(items)
        # the same through the entry of results.json
        assert (output._json_part("saved_fits", output._Plain(items))
                == output._json_part("saved_fits", json_safe(items)))

    def test_numpy_floats_and_mixed_types(self):
        items = [_saved_fit(i, v) for i, v in enumerate([0.5, -0.0, np.nan, 1e-300, 1e300])]
        items[0]["slope"] = np.float64(0.1)          # mixed float and numpy float
        items[1]["n"] = np.int64(7)                  # a numpy integer among ints
        for item in items:
            item["df"] = np.float64(item["df"])      # a column of numpy floats
        items[2]["slope_ci"] = (1.0, 2.0, 3.0)       # lists of different lengths
        items[3]["moments"] = {"sxx": 1.0, "n": 2.0, "ends": []}   # keys in another order
        items[4]["x_range"] = np.array([1.0, np.inf])
        assert output._plain_rows(items) == self._reference(items)

    def test_texts_of_the_fits_table_are_reused_as_written(self):
        values = np.concatenate([EDGE_FLOATS, _random_floats(200)])
        items = [_saved_fit(i, v) for i, v in enumerate(values.tolist())]
        # fits.csv holds the same numbers, others, -0.0 where a fit has 0.0, and NaN
        other = values[::-1].copy()
        other[other == 0] = -0.0
        fits = pd.DataFrame({"slope": values, "slope_low": other, "slope_high": -values,
                             "x_min": np.full(len(values), np.nan), "r2": other,
                             "x_max": np.arange(len(values)).astype(str)})
        known = output._TableText(fits)
        assert output._plain_rows(items, known) == self._reference(items)
        # a table whose columns repeat a label is not read
        twice = output._TableText(pd.DataFrame([[1.0, 2.0]] * 70, columns=["slope", "slope"]))
        assert output._plain_rows(items, twice) == self._reference(items)

    def test_float_texts_from_known_texts(self):
        values = np.concatenate([EDGE_FLOATS, _random_floats(300)])
        known = dict(zip(values[::2].view(np.int64).tolist(),
                         map(float.__repr__, values[::2].tolist())))
        assert output._float_texts(values, known) == list(map(float.__repr__, values.tolist()))

    def test_items_with_other_keys_are_left_to_the_encoder(self):
        items = [_saved_fit(0, 1.0), {"slope": 1.0}]
        assert output._plain_rows(items) is None
        assert output._plain_rows([{1: 2.0}]) is None
        assert output._plain_rows([{}, {}]) == self._reference([{}, {}])
        assert (output._json_part("saved_fits", output._Plain(items))
                == output._json_part("saved_fits", json_safe(items)))


class TestTexCells:
    @pytest.mark.parametrize("column", ["slope", "n", "p_value", "x", "r2"])
    def test_a_column_of_cells_equals_tex_num_on_each_value(self, column):
        from scaling.render.report import _tex_nums
        values = np.concatenate([EDGE_FLOATS, -EDGE_FLOATS, _random_floats(2000)])
        assert _tex_nums(values, column) == [_tex_num(v, column) for v in values]
        plain = np.abs(values[np.isfinite(values)])   # no minus, no missing cell
        assert _tex_nums(plain, column) == [_tex_num(v, column) for v in plain]
        assert _tex_nums(np.array([]), column) == []


class TestFormatValues:
    @pytest.mark.parametrize("column", ["", "slope", "n", "df", "row", "p_value", "p_adjusted",
                                        "x"])
    def test_equals_format_value_on_each_value(self, column):
        values = np.concatenate([EDGE_FLOATS, _random_floats()])
        assert format_values(values, column) == [format_value(v, column) for v in values]

    def test_digits_follow_the_size_of_each_value(self):
        # 4 significant digits, trailing zeros dropped, e-notation outside 1e-4 .. 1e9
        # (the rule of format_value; common practice, no source)
        got = format_values(np.array([0.0001234567, 0.01234567, 1.234567, 123.4567,
                                      12345.67, 1.5, 2.0, 1e9, 1e-5, -0.0]), "slope")
        assert got == ["0.0001235", "0.01235", "1.235", "123.5", "12346", "1.5", "2",
                       "1.000e+09", "1.000e-05", "0"]

    def test_other_column_types(self):
        assert format_values(np.array([1, -2, 10**15]), "n") == ["1", "-2", "1000000000000000"]
        assert format_values(np.array([True, False]), "ok") == ["yes", "no"]
        mixed = np.array([None, pd.NA, "text", 3, 2.5, np.nan], dtype=object)
        assert format_values(mixed, "x") == [format_value(v, "x") for v in mixed]
        assert format_values(pd.Series([0.5, None], dtype="Float64"), "x") == ["0.5", "–"]

    def test_a_plant_in_the_digits_is_caught(self, monkeypatch):
        # teeth: one decimal fewer changes the text
        import scaling.render.report as report
        values = np.array([1.234567, 123.4567])
        monkeypatch.setattr(report.np, "maximum", lambda a, b: np.fmax(a - 1, b))
        assert report.format_values(values, "slope") != [format_value(v, "slope")
                                                         for v in values]


class TestFitsTex:
    def _result(self, fits: pd.DataFrame):
        cfg = types.SimpleNamespace(model=types.SimpleNamespace(confidence=0.95, log_base="10"),
                                    title="Edge & cases")
        return types.SimpleNamespace(config=cfg, manifest={"scaling_version": "1"}, fits=fits)

    def _reference(self, result) -> list:
        """The rows of fits.tex written one value at a time (the former writer)."""
        rows = []
        for r in result.fits.itertuples(index=False):
            ci_b = _tex_interval(r.slope_low, r.slope_high, "slope_low")
            gap = (getattr(r, "slope_gap_low", np.nan), getattr(r, "slope_gap_high", np.nan))
            if np.isfinite(gap[0]) and np.isfinite(gap[1]):
                ci_b = (f"{_tex_interval(r.slope_low, gap[0], 'slope_low')} or "
                        f"{_tex_interval(gap[1], r.slope_high, 'slope_low')}")
            from scaling.render.report import latex_escape
            cells = [latex_escape(r.scope), latex_escape(r.group),
                     latex_escape(method_label(r.method)), _tex_num(r.n, "n"),
                     _tex_num(r.slope, "slope"), ci_b, _tex_num(r.intercept, "intercept"),
                     _tex_interval(r.intercept_low, r.intercept_high, "x"),
                     _tex_num(r.r2, "r2")]
            rows.append(" & ".join(cells) + " \\\\")
        return rows

    def test_rows_equal_the_value_at_a_time_writer(self):
        rng = np.random.default_rng(3)
        k = EDGE_FLOATS.size
        slope = EDGE_FLOATS
        lo = slope - np.abs(rng.normal(size=k))
        hi = slope + np.abs(rng.normal(size=k))
        gap_lo = np.where(np.arange(k) % 7 == 0, lo + 0.1, np.nan)
        gap_hi = np.where(np.arange(k) % 7 == 0, hi - 0.1, np.nan)
        fits = pd.DataFrame({
            "scope": pd.array(np.where(np.arange(k) % 3 == 0, "pooled", "group"), dtype="str"),
            "group": pd.array([None if i % 5 == 0 else f"g_{i}&#" for i in range(k)],
                              dtype="str"),
            "method": np.array(["ols", "sma", "ma"] * (k // 3) + ["ols"] * (k % 3)),
            "n": np.arange(k, dtype=np.int64),
            "slope": slope, "slope_low": lo, "slope_high": hi, "intercept": -slope,
            "intercept_low": np.where(np.arange(k) % 4 == 0, -np.inf, -slope - 1),
            "intercept_high": -slope + 1, "r2": np.abs(np.tanh(slope)),
            "slope_gap_low": gap_lo, "slope_gap_high": gap_hi})
        result = self._result(fits)
        lines = render_fits_tex(result).splitlines()
        assert lines[5:-2] == self._reference(result)
        # a fits table without gap columns and with n as floats (NaN where not fitted)
        plain = fits.drop(columns=["slope_gap_low", "slope_gap_high"]).assign(
            n=np.where(np.arange(k) % 9 == 0, np.nan, np.arange(k, dtype=float)))
        result = self._result(plain)
        assert render_fits_tex(result).splitlines()[5:-2] == self._reference(result)

    def test_no_fits_gives_the_frame_of_the_table(self):
        text = render_fits_tex(self._result(pd.DataFrame(columns=["scope", "slope"])))
        assert text.splitlines()[-2:] == ["\\hline", "\\end{tabular}"]
