"""JSON-ready records of the run's tables (results.json)."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd

from scaling.io.output import CSV_ONLY, json_safe, records, write_json


def _mixed_frame() -> pd.DataFrame:
    return pd.DataFrame({
        "x": [1.5, np.nan, np.inf, -np.inf], "n": np.arange(4), "ok": [True, False, True, False],
        "k": pd.array([1, None, 3, 4], dtype="Int64"), "label": ["a", None, np.nan, "b"],
        "cat": pd.Categorical(["u", "v", None, "u"]), 7: np.float32([0.5, 1, 2, 3])})


class TestRecords:
    def test_missing_and_infinite_numbers_become_null(self):
        rows = records(_mixed_frame())
        # common practice, no source: JSON has no NaN/inf, null stands for them
        assert [r["x"] for r in rows] == [1.5, None, None, None]
        assert [r["k"] for r in rows] == [1, None, 3, 4]
        assert [r["label"] for r in rows] == ["a", None, None, "b"]
        assert type(rows[0]["n"]) is int and type(rows[0]["ok"]) is bool
        json.dumps(rows, allow_nan=False)   # raises if anything is not JSON-ready

    def test_equals_cleaning_the_row_dicts_one_value_at_a_time(self):
        frame = _mixed_frame()
        slow = json_safe(frame.astype(object).where(frame.notna(), None)
                         .to_dict(orient="records"))
        # internal consistency: the column-wise cleaner against json_safe on each value
        assert json.dumps(records(frame)) == json.dumps(slow)

    def test_frame_without_columns_gives_empty_rows(self):
        assert records(pd.DataFrame(index=range(2))) == [{}, {}]
        assert records(pd.DataFrame({"a": []})) == []


class TestWriteJson:
    def test_parses_to_the_document_written(self, tmp_path):
        doc = {"title": "Ünïcode", "fits": records(_mixed_frame()), "empty": [], "none": None,
               "nested": {"a": [1, 2.5, {"b": "c"}]}, "n": 3}
        write_json(doc, tmp_path / "r.json")
        text = (tmp_path / "r.json").read_text(encoding="utf-8")
        # internal consistency: the fast writer against the standard parser
        assert json.loads(text) == doc
        assert "Ünïcode" in text            # written as UTF-8, not escaped
        lines = text.splitlines()
        # readable line by line: one line per top-level key, one per item of a list
        assert sum(line.startswith("    {") for line in lines) == len(doc["fits"])
        assert len(lines) == 2 + len(doc) + len(doc["fits"]) + 1   # braces, keys, items, "]"

    def test_refuses_a_number_json_cannot_hold(self, tmp_path):
        import pytest
        with pytest.raises(ValueError):
            write_json({"x": [float("nan")]}, tmp_path / "r.json")

    def test_empty_document(self, tmp_path):
        write_json({}, tmp_path / "r.json")
        assert json.loads((tmp_path / "r.json").read_text()) == {}

    def test_entries_written_in_turn_are_the_bytes_of_the_whole_joined(self, tmp_path):
        # internal consistency: entries written one after another against the document
        # joined into one string and encoded as UTF-8 (ASCII tables beside a dash)
        from scaling.io import output
        for doc in ({"warnings": ["STRONG — one"], "fits": records(_mixed_frame())},
                    {"n": 3}, {"title": "Ünïcode", "empty": [], "none": None}):
            parts = output._json_parts(doc)
            output._write_json_parts(parts, tmp_path / "r.json")
            whole = "{\n" + ",\n".join(parts.values()) + "\n}\n"
            assert (tmp_path / "r.json").read_bytes() == whole.encode("utf-8")


class TestResultsDocument:
    def test_per_row_tables_are_named_not_copied(self, tmp_path):
        from scaling.run.pipeline import run_config
        data = tmp_path / "d.csv"
        rng = np.random.default_rng(3)
        x = rng.lognormal(1, 0.6, 60)
        pd.DataFrame({"x": x, "y": 2 * x ** 0.75 * rng.lognormal(0, 0.1, 60)}).to_csv(
            data, index=False)
        cfg = {"data": {"file": str(data), "x": "x", "y": "y"}, "figures": {"formats": []}}
        run_config(cfg, out=tmp_path / "out")
        doc = json.loads((tmp_path / "out" / "results.json").read_text())
        # internal consistency: each per-row table is in its CSV and only named in the JSON
        for name in CSV_ONLY:
            assert name not in doc
            assert doc["csv_only"][name] == f"{name}.csv"
            assert (tmp_path / "out" / f"{name}.csv").is_file()
        assert doc["saved_fits"] and doc["fits"]


class TestFiguresDrawnWhileTablesAreWritten:
    """write_outputs with a drawing handle: tables first, the report after the figures
    (internal consistency: the order of the files on disk)."""

    @staticmethod
    def _handle(folder, seen, paths=(), notes=()):
        class Drawing:
            def wait(self):
                seen["tables before waiting"] = (folder / "fits.csv").is_file()
                seen["report before waiting"] = (folder / "report.html").exists()
                return list(paths), list(notes)

            def cancel(self):
                seen["cancelled"] = True
        return Drawing()

    def test_tables_first_then_figures_then_report(self, tmp_path):
        from helpers_figures import demo
        from scaling.io.output import write_outputs
        from scaling.render.report import write_report
        seen = {}

        def draw(result, folder):
            return self._handle(folder, seen, notes=["Figure 'x' was not drawn (test)."])

        out = write_outputs(demo(), tmp_path / "out", draw_figures=draw,
                            write_report=write_report, caution="c")
        assert seen == {"tables before waiting": True, "report before waiting": False}
        doc = json.loads((tmp_path / "out" / "results.json").read_text(encoding="utf-8"))
        assert doc["warnings"][-1] == "Figure 'x' was not drawn (test)."   # the figure note
        assert "Figure 'x' was not drawn" in (tmp_path / "out" / "summary.md").read_text(
            encoding="utf-8")
        assert doc["files"] == sorted(str(p.relative_to(tmp_path / "out"))
                                      for p in out.files if p.name != "results.json") + [
            "results.json"]

    def test_a_failure_while_drawing_stops_the_drawing_and_leaves_the_folder(self, tmp_path,
                                                                             monkeypatch):
        import pytest
        from helpers_figures import demo
        import scaling.io.output as output
        seen = {}
        (tmp_path / "out").mkdir()
        (tmp_path / "out" / "keep.txt").write_text("mine", encoding="utf-8")

        def broken(frame, path):
            raise OSError("disk full")
        monkeypatch.setattr(output, "write_csv", broken)
        with pytest.raises(OSError, match="disk full"):
            output.write_outputs(demo(), tmp_path / "out", force=True,
                                 draw_figures=lambda r, f: self._handle(f, seen),
                                 write_report=lambda r, f, w: [], caution="c")
        assert seen == {"cancelled": True}
        assert [p.name for p in (tmp_path / "out").iterdir()] == ["keep.txt"]
        assert not list(tmp_path.glob(".scaling-tmp-*"))


class TestReportPreparedWhileFiguresAreDrawn:
    """prepare_report makes the Answer and fits.tex early; the files equal write_report's
    (internal consistency: write_report is the reference)."""

    @staticmethod
    def _files(folder):
        return {name: (folder / name).read_bytes()
                for name in ("report.html", "summary.md", "fits.tex")}

    def test_same_files_as_write_report(self, tmp_path):
        from dataclasses import replace
        from helpers_figures import demo
        from scaling.render.report import prepare_report, write_report
        result = demo()
        # no figure kinds: the report would draw each figure again for its page (no PNG
        # is written here), which costs seconds and is not what this test is about
        result = replace(result, config=replace(
            result.config, figures=replace(result.config.figures, kinds=())))
        early = prepare_report(result)
        for name, res in (("same", result),   # the parts made early are used
                          ("noted", replace(result, warnings=result.warnings + ("a note",)))):
            a, b = tmp_path / f"{name}_a", tmp_path / f"{name}_b"
            a.mkdir()
            b.mkdir()
            assert early(res, a, []) == write_report(res, b, [])
            assert self._files(a) == self._files(b)
        assert "a note" in (tmp_path / "noted_a" / "summary.md").read_text(encoding="utf-8")

    def test_prepared_before_the_figures_are_awaited(self, tmp_path):
        from helpers_figures import demo
        from scaling.io.output import write_outputs
        from scaling.render.report import write_report
        order = []

        class Drawing:
            def wait(self):
                order.append("wait")
                return [], []

        def prepare(result):
            order.append("prepare")
            return write_report
        write_outputs(demo(), tmp_path / "out", draw_figures=lambda r, f: Drawing(),
                      write_report=write_report, caution="c", prepare_report=prepare)
        assert order == ["prepare", "wait"]
        assert (tmp_path / "out" / "fits.tex").is_file()
