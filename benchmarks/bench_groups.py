"""Benchmark: a whole default-config run on 100 000 rows in 1 000 groups.

Builds an invented table (seeded; 1 000 groups of 100 rows, y = a_g x^0.75
with lognormal scatter, every group at its own elevation and position along
x), writes it to a temporary CSV and runs the default configuration on it
(only data.file, data.x, data.y and data.group set): ``pipeline.analyse``
and ``pipeline.write_outputs``, i.e. what ``scaling run`` does.

Printed, against a baseline measured in the same run on the same table (one
pandas ``groupby(...).sum()`` of the five moment columns x, y, x^2, y^2, xy,
which is the least any grouped analysis must do):

* wall time of the run and its ratio to the baseline;
* peak traced memory of the run (tracemalloc sees numpy's and pandas'
  allocations) and the peak resident set size of the process
  (``resource.getrusage``, includes the interpreter and libraries).

Targets (issue: "no cost quadratic in the number of groups"): the run under
60 s and 2 GB.  The script prints whether each is met.

Run:  python benchmarks/bench_groups.py [GROUPS] [ROWS_PER_GROUP]
"""

from __future__ import annotations

import resource
import sys
import tempfile
import time
import tracemalloc
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

from scaling.io.config import config_from_dict
from scaling.run.pipeline import analyse, write_outputs

SEED = 20240917


def make_table(groups: int, per_group: int) -> pd.DataFrame:
    rng = np.random.default_rng(SEED)
    g = np.repeat(np.arange(groups), per_group)
    centre = rng.uniform(0.5, 4.0, groups)[g]             # position along log10 x
    elevation = rng.normal(0.5, 0.2, groups)[g]           # log10 a_g
    spread = rng.uniform(0.2, 0.8, groups)[g]
    log_x = centre + spread * rng.standard_normal(g.size)
    log_y = elevation + 0.75 * log_x + rng.normal(0, 0.08, g.size)
    return pd.DataFrame({"taxon": [f"g{k:04d}" for k in g], "mass": 10 ** log_x,
                         "rate": 10 ** log_y})


def baseline(table: pd.DataFrame) -> float:
    t0 = time.perf_counter()
    x, y = np.log10(table["mass"]), np.log10(table["rate"])
    pd.DataFrame({"g": table["taxon"], "x": x, "y": y, "xx": x * x, "yy": y * y,
                  "xy": x * y}).groupby("g").sum()
    return time.perf_counter() - t0


def run(path: Path, out: Path):
    cfg = config_from_dict({"data": {"file": str(path), "x": "mass", "y": "rate",
                                     "group": "taxon"},
                            "output": {"dir": str(out)}}, base_dir=path.parent)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = analyse(cfg, quiet=True)
        return write_outputs(result, out)


def main(argv: list[str]) -> int:
    groups = int(argv[0]) if argv else 1_000
    per_group = int(argv[1]) if len(argv) > 1 else 100
    table = make_table(groups, per_group)
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "groups.csv"
        table.to_csv(path, index=False)
        base = min(baseline(table) for _ in range(3))
        tracemalloc.start()
        t0 = time.perf_counter()
        result = run(path, Path(tmp) / "out")
        elapsed = time.perf_counter() - t0
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # kB -> MB (Linux)
        n_files = len(result.files) if result.files else 0
    skipped = [m for m in result.messages if "pairwise comparisons skipped" in m.lower()]
    print(f"table: {len(table):,} rows, {groups:,} groups of {per_group}")
    print(f"baseline (pandas groupby-sum of 5 moment columns): {base:.4f} s")
    print(f"scaling run (analyse + write_outputs): {elapsed:.1f} s "
          f"= {elapsed / base:,.0f} x baseline; {n_files} files written")
    print(f"peak traced memory: {peak / 2**20:,.0f} MB; peak RSS of the process: "
          f"{rss:,.0f} MB")
    print(f"pairwise skipped in summary: {'yes' if skipped else 'no'}")
    print(f"target < 60 s: {'met' if elapsed < 60 else 'NOT met'}; "
          f"target < 2 GB: {'met' if max(peak / 2**20, rss) < 2048 else 'NOT met'}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
