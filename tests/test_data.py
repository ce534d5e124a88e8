"""Reading and cleaning tables: row numbers, reasons, formats, averaging."""
from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from scaling.io.config import config_from_dict
from scaling.io.tables import load_data
from scaling.errors import DataError


def _cfg(tmp_path, **data):
    base = {"file": "t.csv", "x": "mass", "y": "rate"}
    base.update(data)
    return config_from_dict({"data": base}, base_dir=tmp_path).data


def _write(tmp_path, text, name="t.csv", encoding="utf-8"):
    (tmp_path / name).write_text(text, encoding=encoding)


class TestLoadData:
    def test_reasons_and_row_numbers(self, tmp_path):
        # Each bad row and its expected reason; row = file line - header line.
        _write(tmp_path, "mass,rate,clade\n"
               "1,2,a\n"          # row 1 ok
               "0,2,a\n"          # row 2 zero
               "\n"               # row 3 blank line
               "abc,2,a\n"        # row 4 non-numeric
               "2,,a\n"           # row 5 missing
               "3,<0.1,a\n"       # row 6 censored
               "-4,2,a\n"         # row 7 negative
               "inf,2,a\n"        # row 8 infinite
               "5,6,\n"           # row 9 missing group
               "7,8,out\n"        # row 10 excluded
               "9,10,b\n")        # row 11 ok
        data = load_data(_cfg(tmp_path, group="clade", exclude={"clade": ["out"]}))
        d = dict(zip(data.dropped["row"], data.dropped["reason"]))
        assert sorted(d) == [2, 3, 4, 5, 6, 7, 8, 9, 10]
        assert d[2] == "x (mass) is zero: no logarithm"
        assert d[3] == "blank line"
        assert d[4] == "x (mass) is not a number: 'abc'"
        assert d[5] == "y (rate) is missing"
        assert d[6] == "y (rate) is censored: '<0.1'"
        assert d[7] == "x (mass) is negative: no logarithm"
        assert d[8] == "x (mass) is infinite"
        assert d[9] == "group (clade) is missing"
        assert d[10] == "excluded: clade is 'out'"
        assert list(data.points["row"]) == [1, 11]
        assert data.n_read == 11

    def test_logs(self, tmp_path):
        _write(tmp_path, "mass,rate\n10,100\n1000,10\n")
        data = load_data(_cfg(tmp_path))
        # exact law: log10(10) = 1, log10(100) = 2
        np.testing.assert_allclose(data.points["log_x"], [1, 3], rtol=1e-12)
        np.testing.assert_allclose(data.points["log_y"], [2, 1], rtol=1e-12)

    def test_skip_rows_units_row_semicolon_decimal_comma(self, tmp_path):
        _write(tmp_path, "# exported from the lab sheet\n"
               "mass;rate\n"
               "g;mW\n"
               "1,5;2,5\n"
               "10;20\n")
        cfg = _cfg(tmp_path, skip_rows=1, units_row=True, decimal=",")
        data = load_data(cfg)
        assert data.units == {"x": "g", "y": "mW"}
        np.testing.assert_allclose(data.points["x"], [1.5, 10.0], rtol=0)
        assert list(data.points["row"]) == [2, 3]   # the units row is row 1

    def test_bom_and_tab(self, tmp_path):
        _write(tmp_path, "\ufeffmass\trate\n1\t2\n3\t4\n", encoding="utf-8")
        data = load_data(_cfg(tmp_path))
        assert len(data.points) == 2

    def test_latin1_needs_encoding(self, tmp_path):
        (tmp_path / "t.csv").write_bytes("mass,rate,note\n1,2,caf\xe9\n".encode("latin-1"))
        with pytest.raises(DataError, match=r"cannot decode as utf-8.*data.encoding"):
            load_data(_cfg(tmp_path))
        assert len(load_data(_cfg(tmp_path, encoding="latin-1")).points) == 1

    def test_excel_and_parquet(self, tmp_path):
        table = pd.DataFrame({"mass": [1.0, 2.0, 0.0], "rate": [2.0, 3.0, 4.0]})
        table.to_excel(tmp_path / "t.xlsx", index=False)
        table.to_parquet(tmp_path / "t.parquet")
        for name in ("t.xlsx", "t.parquet"):
            data = load_data(_cfg(tmp_path, file=name))
            assert list(data.points["row"]) == [1, 2]
            assert list(data.dropped["row"]) == [3]

    def test_average_within(self, tmp_path):
        _write(tmp_path, "sp,clade,mass,rate\n"
               "a,X,10,100\n" "a,X,1000,1\n" "b,X,5,5\n" "c,Y,2,4\n")
        data = load_data(_cfg(tmp_path, average_within="sp", group="clade"))
        pts = data.points.set_index("unit")
        # exact law: geometric mean of 10 and 1000 is 100; of 100 and 1 is 10
        assert math.isclose(pts.loc["a", "x"], 100.0, rel_tol=1e-12)
        assert math.isclose(pts.loc["a", "y"], 10.0, rel_tol=1e-12)
        assert pts.loc["a", "n_rows"] == 2 and pts.loc["a", "group"] == "X"
        assert data.n_rows_used == 4

    def test_unit_in_two_groups(self, tmp_path):
        _write(tmp_path, "sp,clade,mass,rate\na,X,1,2\na,Y,3,4\nb,Y,5,6\n")
        with pytest.raises(DataError, match=r"sp 'a' appears in more than one group \(clade: X, Y\)"):
            load_data(_cfg(tmp_path, average_within="sp", group="clade"))

    def test_missing_column_suggests(self, tmp_path):
        _write(tmp_path, "body_mass,rate\n1,2\n")
        with pytest.raises(DataError, match=r"column 'mass' \(data.x\) not found; did you mean 'body_mass'\?"):
            load_data(_cfg(tmp_path))

    def test_missing_exclude_column(self, tmp_path):
        _write(tmp_path, "mass,rate\n1,2\n")
        with pytest.raises(DataError, match=r"column 'site' \(data.exclude.site\) not found"):
            load_data(_cfg(tmp_path, exclude={"site": ["a"]}))

    def test_file_not_found(self, tmp_path):
        with pytest.raises(DataError, match=r"t.csv: data file not found \(data.file\)"):
            load_data(_cfg(tmp_path))

    def test_all_rows_dropped(self, tmp_path):
        _write(tmp_path, "mass,rate\n0,1\n-1,2\n")
        with pytest.raises(DataError, match=r"no usable rows: all 2 data rows were dropped"):
            load_data(_cfg(tmp_path))

    def test_header_only(self, tmp_path):
        _write(tmp_path, "mass,rate,clade\n")
        with pytest.raises(DataError, match=r"has no data rows under the header line"):
            load_data(_cfg(tmp_path, group="clade"))

    def test_delimiter_equals_decimal(self, tmp_path):
        _write(tmp_path, "mass,rate\n1,2\n")
        with pytest.raises(DataError, match=r"data.delimiter and data.decimal are both ','"):
            load_data(_cfg(tmp_path, delimiter=",", decimal=","))

    def test_input_not_modified(self, tmp_path):
        text = "mass,rate\n1,2\n0,3\n4,5\n"
        _write(tmp_path, text)
        load_data(_cfg(tmp_path))
        assert (tmp_path / "t.csv").read_text() == text


class TestNothingSilent:
    """Input that would otherwise be misread without a word is refused or warned."""

    def test_units_row_that_holds_numbers_is_refused(self, tmp_path):
        # Row 1 is numeric in x and y: treating it as units would silently lose a data row.
        _write(tmp_path, "mass,rate\n1,2\n2,3\n4,5\n")
        with pytest.raises(DataError, match=r"data.units_row is true, but row 1 .* holds "
                                             r"numbers \(mass = 1, rate = 2\).*units_row: false"):
            load_data(_cfg(tmp_path, units_row=True))

    def test_units_row_with_text_is_still_read(self, tmp_path):
        _write(tmp_path, "mass,rate\ng,mW\n1,2\n2,3\n")
        data = load_data(_cfg(tmp_path, units_row=True))
        assert data.units == {"x": "g", "y": "mW"} and data.n_read == 2

    def test_exclude_value_matching_nothing_warns_with_closest(self, tmp_path):
        from scaling.errors import DataWarning, ScalingWarning
        _write(tmp_path, "mass,rate,clade\n1,2,Saltoria\n2,3,Saltoria\n4,5,Ensifera\n")
        with pytest.warns(DataWarning, match=r"data.exclude.clade: 'Saltoriaa' matches no row "
                                             r"of column 'clade'.*closest values: 'Saltoria'"):
            data = load_data(_cfg(tmp_path, group="clade",
                                  exclude={"clade": ["Saltoriaa", "Ensifera"]}))
        assert issubclass(DataWarning, ScalingWarning)
        assert len(data.points) == 2          # only the matching value excluded a row

    def test_exclude_value_matching_a_row_is_silent(self, tmp_path):
        import warnings
        _write(tmp_path, "mass,rate,clade\n1,2,a\n2,3,a\n4,5,b\n")
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            load_data(_cfg(tmp_path, exclude={"clade": ["b"]}))

    def test_decimal_comma_reason_gives_the_setting(self, tmp_path):
        _write(tmp_path, "mass;rate\n1.5;2\n2,5;3\n4;5\n")
        data = load_data(_cfg(tmp_path))
        assert list(data.dropped["reason"]) == [
            "x (mass) is not a number: '2,5' (if \",\" is the decimal mark, set "
            "data.decimal: \",\")"]

    def test_column_of_decimal_commas_is_an_error(self, tmp_path):
        _write(tmp_path, "mass;rate\n1,5;2\n2,5;3\n4,25;5\n")
        with pytest.raises(DataError, match=r"column 'mass' \(data.x\) holds no number read "
                                            r"with data.decimal \".\" \(values like '1,5'.*"
                                            r"set data.decimal: \",\""):
            load_data(_cfg(tmp_path))

    def test_decimal_comma_setting_reads_the_same_file(self, tmp_path):
        _write(tmp_path, "mass;rate\n1,5;2\n2,5;3\n4,25;5\n")
        data = load_data(_cfg(tmp_path, decimal=","))
        # exact: 1,5 with a decimal comma is 1.5
        np.testing.assert_allclose(data.points["x"], [1.5, 2.5, 4.25], rtol=0)


class TestHeaderLine:
    """A header that repeats a name, or that sits below title lines, gets one clear line."""

    def test_duplicated_x_column_is_refused_naming_both_places(self, tmp_path):
        _write(tmp_path, "mass,rate,mass\n1,2,10\n2,3,20\n4,5,40\n")
        with pytest.raises(DataError, match=r"t\.csv: the header line names the same column "
                                            r"more than once: 'mass' \(data\.x\) in columns "
                                            r"1 and 3; .*rename or remove the extra copies"):
            load_data(_cfg(tmp_path))

    @pytest.mark.parametrize("key, column", [("group", "clade"), ("average_within", "sp")])
    def test_duplicated_group_or_unit_column_is_refused(self, tmp_path, key, column):
        _write(tmp_path, f"mass,rate,{column},{column}\n1,2,a,b\n2,3,a,b\n4,5,a,b\n")
        with pytest.raises(DataError, match=rf"'{column}' \(data\.{key}\) in columns 3 and 4"):
            load_data(_cfg(tmp_path, **{key: column}))

    def test_duplicated_x_column_in_excel_is_refused(self, tmp_path):
        openpyxl = pytest.importorskip("openpyxl")
        book = openpyxl.Workbook()
        for row in (["rate", "mass", "mass"], [2, 1, 10], [3, 2, 20], [5, 4, 40]):
            book.active.append(row)
        book.save(tmp_path / "t.xlsx")
        with pytest.raises(DataError, match=r"'mass' \(data\.x\) in columns 2 and 3"):
            load_data(_cfg(tmp_path, file="t.xlsx"))

    def test_duplicated_unused_column_only_warns(self, tmp_path):
        from scaling.errors import DataWarning
        _write(tmp_path, "mass,note,rate,note\n1,a,2,b\n2,a,3,b\n4,a,5,b\n")
        with pytest.warns(DataWarning, match=r"t\.csv: the header line names the same column "
                                             r"more than once \('note' in columns 2 and 4\); "
                                             r"the config reads no copy of it"):
            data = load_data(_cfg(tmp_path))
        assert len(data.points) == 3

    def test_columns_that_differ_only_by_spaces_count_as_one_name(self, tmp_path):
        _write(tmp_path, "mass,rate, mass \n1,2,10\n2,3,20\n4,5,40\n")
        with pytest.raises(DataError, match=r"'mass' \(data\.x\) in columns 1 and 3"):
            load_data(_cfg(tmp_path))

    def test_a_unique_header_is_silent(self, tmp_path):
        import warnings
        _write(tmp_path, "mass,rate,mass.1\n1,2,10\n2,3,20\n4,5,40\n")
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            assert list(load_data(_cfg(tmp_path)).points["x"]) == [1, 2, 4]

    @staticmethod
    def _titled_book(path, sheet="Data"):
        openpyxl = pytest.importorskip("openpyxl")
        book = openpyxl.Workbook()
        book.active.title = sheet
        for row in (["Body mass and resting rate, 2026"], [], ["mass", "rate"],
                    [1, 2], [2, 3], [4, 5]):
            book.active.append(row)
        book.create_sheet("Notes")
        book.save(path)

    def test_title_rows_in_excel_give_the_skip_rows_setting(self, tmp_path):
        self._titled_book(tmp_path / "t.xlsx")
        with pytest.raises(DataError, match=r"t\.xlsx: column 'mass' \(data\.x\) not found; "
                                            r"row 3 holds the columns mass, rate: "
                                            r"set data\.skip_rows: 2\. Columns are"):
            load_data(_cfg(tmp_path, file="t.xlsx"))
        # the setting the message gives reads the sheet
        data = load_data(_cfg(tmp_path, file="t.xlsx", skip_rows=2))
        assert list(data.points["x"]) == [1, 2, 4]

    def test_title_lines_in_csv_give_the_skip_rows_setting(self, tmp_path):
        # one field on the title line: the csv parser fails on the first data line
        _write(tmp_path, "Body mass and resting rate\n\nmass,rate\n1,2\n2,3\n4,5\n")
        with pytest.raises(DataError, match=r"t\.csv: cannot read table: .*; line 3 holds "
                                            r"the columns mass, rate: set data\.skip_rows: 2$"):
            load_data(_cfg(tmp_path))
        # a comma in the title: the title is read as the header line
        _write(tmp_path, "Body mass, resting rate\nmass;rate\n1;2\n2;3\n4;5\n")
        with pytest.raises(DataError, match=r"column 'mass' \(data\.x\) not found; line 2 "
                                            r"holds the columns mass, rate: set "
                                            r"data\.skip_rows: 1\."):
            load_data(_cfg(tmp_path))
        assert list(load_data(_cfg(tmp_path, skip_rows=1)).points["x"]) == [1, 2, 4]

    def test_skip_rows_past_the_header_gives_the_right_setting(self, tmp_path):
        _write(tmp_path, "Title\nmass,rate\n1,2\n2,3\n4,5\n6,7\n")
        with pytest.raises(DataError, match=r"line 2 holds the columns mass, rate: set "
                                            r"data\.skip_rows: 1\."):
            load_data(_cfg(tmp_path, skip_rows=2))

    def test_missing_sheet_lists_the_sheets(self, tmp_path):
        self._titled_book(tmp_path / "t.xlsx")
        with pytest.raises(DataError, match=r"t\.xlsx: no sheet named 'Notse' \(data\.sheet\); "
                                            r"the workbook's sheets are: 'Data', 'Notes'; "
                                            r"did you mean 'Notes'\?"):
            load_data(_cfg(tmp_path, file="t.xlsx", sheet="Notse"))
        with pytest.raises(DataError, match=r"no sheet number 2 \(data\.sheet counts from 0\); "
                                            r"the workbook's sheets are: 'Data', 'Notes'$"):
            load_data(_cfg(tmp_path, file="t.xlsx", sheet=2))


class TestCleanTableSeveral:
    def test_each_predictor_column_gets_the_single_column_drop_reasons(self, tmp_path):
        from scaling.io.config import config_from_dict
        from scaling.io.tables import load_data
        path = tmp_path / "trees.csv"
        path.write_text("d,h,m\n10,8,4\n20,,9\n0,5,3\n30,12,<1\n15,9,6\n25,11,8\n")
        cfg = config_from_dict({"data": {"file": str(path), "x": ["d", "h"], "y": "m"},
                                "model": {"methods": ["ols"]}})
        data = load_data(cfg.data)
        # common practice, no source: row numbers count lines under the header
        assert data.dropped["row"].tolist() == [2, 3, 4]
        assert data.dropped["reason"].tolist() == [
            "x (h) is missing", "x (d) is zero: no logarithm", "y (m) is censored: '<1'"]
        assert data.points[["x0", "x1", "y"]].to_numpy().tolist() == [
            [10, 8, 4], [15, 9, 6], [25, 11, 8]]
        np.testing.assert_allclose(data.points["log_x1"], np.log10([8, 9, 11]), rtol=1e-12)


class TestColumnParsing:
    """Whole-column parsing gives what the cell-by-cell text rules give."""

    CELLS = ["1.5", " 2 ", "", "NA", "n/a", "<0.1", "> = 3", "abc", "0", "-1", "inf", "1,5",
             " ", "nan", "?", "3e2", "\t4\t", "1e400", "#N/A", "<x", "\u00a05\u00a0"]

    @staticmethod
    def _one_by_one(cells, decimal="."):
        from scaling.io.tables import _parse_numbers
        out = [_parse_numbers(pd.Series([c], dtype=object), decimal) for c in cells]
        return (np.array([o[0][0] for o in out]), [o[1][0] for o in out],
                [o[2][0] for o in out])

    @pytest.mark.parametrize("decimal", [".", ","])
    @pytest.mark.parametrize("dtype", ["str", object])
    def test_column_equals_cell_by_cell(self, decimal, dtype):
        from scaling.io.tables import _parse_numbers
        cells = self.CELLS * 3
        series = pd.Series(cells, dtype=dtype)
        if dtype is object:
            series.iloc[[1, 2, 3]] = [2.5, None, np.nan]
        values, problem, raw = _parse_numbers(series, decimal)
        v1, p1, r1 = self._one_by_one(list(series), decimal)
        # internal consistency: one column at once against one cell at a time
        np.testing.assert_array_equal(values, v1)
        assert list(problem) == p1 and list(raw) == r1
        assert problem[cells.index("<0.1")] == "censored"       # common practice, no source
        assert problem[cells.index("NA")] == "missing"

    def test_blank_and_whitespace_cells_are_text_free(self):
        from scaling.io.tables import _as_text
        series = pd.Series([" a ", np.nan, "\t", 3, None, 2.5], dtype=object)
        # the text rule: missing -> "", anything else str() and stripped
        assert list(_as_text(series)) == ["a", "", "", "3", "", "2.5"]
