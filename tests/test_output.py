"""JSON-ready records of the run's tables (results.json)."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd

from scaling.io.output import json_safe, records


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
