"""Seeded random small tables through the whole run: user errors or results, never a crash.

No expected values here: the check is that every outcome is either a written
results folder or a ScalingError (exit 2 at the command line): a traceback
reaching a user is a bug, because a user cannot tell a crash in the tool from
a fault in the data.  A degenerate table on which no line at all can be fitted
(n < 3 after cleaning, x constant) ends in a one-line DataError saying why, not
in a folder of empty tables.  Random cases like these
found three real crashes (an empty table with groups, an empty boolean filter
in the bootstrap stage, and a float overflow for a curvature crossing far
outside the data); seed 1007 still exercises the first.
"""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

import scaling
from scaling.errors import ScalingError

METHODS = ["ols", "sma", "ma", "deming", "theil_sen", "siegel", "sma_robust", "ma_robust"]


def _case(rng, folder):
    n = int(rng.integers(0, 12))
    x = np.round(10 ** rng.uniform(-1, 3, n), 2)
    if rng.random() < 0.3 and n:
        x[:] = x[0]                                   # x does not vary
    y = np.round(x ** 0.7 * 10 ** rng.normal(0, rng.choice([0, 0.01, 0.3]), n), 3)
    if rng.random() < 0.2 and n:
        y[rng.integers(0, n)] = 0                     # a row to drop
    table = pd.DataFrame({"g": rng.choice(list("abc"), n), "sp": rng.choice(list("pqrstu"), n),
                          "x": x, "y": y})
    table.to_csv(folder / "d.csv", index=False)
    cfg = {"data": {"file": str(folder / "d.csv"), "x": "x", "y": "y"},
           "model": {"methods": [str(m) for m in rng.choice(METHODS, int(rng.integers(1, 4)),
                                                            replace=False)]},
           "exponents": {"k": 0.75}, "prediction": {"x": [1, 10], "y": [5]},
           "resampling": {"bootstrap": int(rng.choice([0, 199])),
                          "permutations": int(rng.choice([0, 99]))}}
    if rng.random() < 0.6:
        cfg["data"]["group"] = "g"
    if rng.random() < 0.3:
        cfg["data"]["average_within"] = "sp"
    return cfg


@pytest.mark.parametrize("seed", range(24))
def test_random_small_tables_never_crash(tmp_path, seed):
    rng = np.random.default_rng(1000 + seed)
    cfg = _case(rng, tmp_path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            result = scaling.run_config(cfg, out=tmp_path / "out")
        except ScalingError as exc:
            assert str(exc) and "\n" not in str(exc)   # one clean line
            return
    # a written folder always holds at least one estimable line
    assert result.line_fits
    assert (tmp_path / "out" / "results.json").is_file()
    assert len(result.fits) >= 1
