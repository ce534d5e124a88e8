"""Benchmark: one line per group for many groups and many rows.

In one run, on the same synthetic table (rows in natural units, a string
group column, groups of equal size, rows in random order), it measures

(a) floor  -- one pandas ``groupby(group).sum()`` of the five moment columns
              X, Y, X^2, Y^2, XY (precomputed outside the timing);
(b) ours   -- ``scaling.run.table_moments.fit_frame``: cleaning, logs, per-group
              moments, OLS, SMA and MA with slope and intercept intervals,
              and the tests of every fit against two exponents;
(c) loop   -- a straightforward per-group loop: statsmodels OLS (estimate and
              interval) and scipy.odr (orthogonal regression, the MA line)
              for each group, timed on a subset of groups and scaled to all;
(b') run    -- with ``--run``: ``scaling run`` (the command, in a child process)
              on the same table written as a file (parquet, or csv with
              ``--run-format csv``), default config with figures on, so
              reading, cleaning, fitting, the summary across groups, tables,
              figures and the report are all timed; the file is above
              ``data.moments_above_mb`` so the run takes the moments path.
              Target: under 30 s at 1e7 rows and 1e4 groups.
(d) chunked -- ``scaling.run.table_moments.read_moments`` on a parquet file of the same
              table (chunks of ``--chunk`` rows), in a child process whose
              peak resident memory is reported against a child that only
              imports the same modules.

(e) run vs loop -- with ``--versus-loop`` (alone): ``scaling run`` (the command,
              in a child process, in memory: the file is under
              ``data.moments_above_mb``) on the table written as a CSV file, groups
              compared, PNG figures, against a plain loop in this process over
              the same file: ``pandas.read_csv``, then for each group
              statsmodels OLS (estimate, interval, t tests of two exponents),
              scipy.odr (the MA line) and numpy SMA (slope and interval).  Every
              group is fitted (no scaling up).  Printed: the ratio run / loop
              (target <= 1.5) and the run's peak RSS against the bytes of the
              three input columns (target <= 10), also above a child that only
              imports the package.  The peak is the run process's own VmHWM,
              which it reports at exit: ``ru_maxrss`` seen by the parent would
              include the parent's own peak, carried across fork/exec by Linux.

Ratios printed: (b)/(a), (c)/(b); peak memory of (b) under tracemalloc
(numpy reports its allocations) against the in-memory size of the three
input columns (``memory_usage(deep=True)``); rows per second.  (a) and (b)
take turns ``--repeats`` times and the best time counts.

Targets: (b) within 2.5x of (a); (c)/(b) >= 10 at 1e4 groups of
1e3 rows; peak memory of (b) < 3x the three input columns.

(f) moments -- with ``--moments`` (only): the moments path's whole answer
              (``run_config`` on the table as a file, above
              ``data.moments_above_mb``: groups compared, second pass,
              predictions, tables, report, PNG figures) against its fits alone
              (``read_moments`` + ``fit_groups_from_moments``).  Target < 2x.

Run:   python benchmarks/bench_scale.py                      # 1e6 rows, 1e3 groups
       python benchmarks/bench_scale.py --versus-loop        # (e) only
       python benchmarks/bench_scale.py --moments --run-format csv   # (f) only
       python benchmarks/bench_scale.py --rows 1e7 --groups 1e4
       python benchmarks/bench_scale.py --rows 1e7 --groups 1e4 --run --no-parquet
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np
import pandas as pd
import statsmodels.api as sm
from scipy import odr, stats

from scaling.run.table_moments import fit_frame

SEED = 20261202
EXPONENTS = {"three_quarters": 0.75, "two_thirds": 2 / 3}


def make_table(rows: int, groups: int) -> pd.DataFrame:
    """Synthetic data with a known truth: slopes around 0.75 (SD 0.05) per group."""
    rng = np.random.default_rng(SEED)
    g = rng.integers(0, groups, rows)
    slope = 0.75 + rng.normal(0, 0.05, groups)
    lx = rng.normal(1.5, 0.6, rows)
    ly = 0.3 + slope[g] * lx + rng.normal(0, 0.1, rows)
    names = np.array([f"sp{i:05d}" for i in range(groups)], dtype=object)
    return pd.DataFrame({"mass": 10 ** lx, "rate": 10 ** ly, "species": names[g]})


def floor_frame(df: pd.DataFrame) -> pd.DataFrame:
    lx = np.log10(df["mass"].to_numpy())
    ly = np.log10(df["rate"].to_numpy())
    return pd.DataFrame({"species": df["species"], "X": lx, "Y": ly, "XX": lx * lx,
                         "YY": ly * ly, "XY": lx * ly})


def run_floor(ff: pd.DataFrame):
    return ff.groupby("species", sort=False).sum()


def run_ours(df: pd.DataFrame):
    return fit_frame(df, x="mass", y="rate", group="species", methods=("ols", "sma", "ma"),
                     exponents=EXPONENTS)


def group_index(df: pd.DataFrame) -> dict:
    """Row positions of every group (one groupby; the loop's set-up, timed apart)."""
    return df.groupby("species", sort=False).indices


def run_loop(df: pd.DataFrame, index: dict, names) -> None:
    mass, rate = df["mass"].to_numpy(), df["rate"].to_numpy()
    for name in names:
        rows = index[name]
        X = np.log10(mass[rows])
        Y = np.log10(rate[rows])
        fit = sm.OLS(Y, sm.add_constant(X)).fit()
        fit.conf_int()
        for b0 in EXPONENTS.values():           # t test of the slope against b0
            t = (fit.params[1] - b0) / fit.bse[1]
            2 * stats.t.sf(abs(t), fit.df_resid)
        out = odr.ODR(odr.RealData(X, Y), odr.unilinear, beta0=fit.params[::-1]).run()
        out.sd_beta


def sma_interval(X: np.ndarray, Y: np.ndarray, alpha: float = 0.05) -> tuple:
    """SMA slope and its interval, b (sqrt(B + 1) -+ sqrt(B)) with
    B = (1 - r^2) F(1, n - 2) / (n - 2) (Warton et al. 2006, Biol. Rev. 81:259)."""
    n = X.size
    xc, yc = X - X.mean(), Y - Y.mean()
    sxx, syy, sxy = xc @ xc, yc @ yc, xc @ yc
    r2 = sxy * sxy / (sxx * syy)
    b = np.sign(sxy) * np.sqrt(syy / sxx)
    B = (1 - r2) * stats.f.ppf(1 - alpha, 1, n - 2) / (n - 2)
    return b, b * (np.sqrt(B + 1) - np.sqrt(B)), b * (np.sqrt(B + 1) + np.sqrt(B))


def plain_loop(path: Path) -> int:
    """(e)'s loop: read the file, then OLS, MA (scipy.odr) and SMA for every group."""
    df = pd.read_csv(path)
    index = df.groupby("species", sort=False).indices
    mass, rate = df["mass"].to_numpy(), df["rate"].to_numpy()
    for rows in index.values():
        X, Y = np.log10(mass[rows]), np.log10(rate[rows])
        fit = sm.OLS(Y, sm.add_constant(X)).fit()
        fit.conf_int()
        for b0 in EXPONENTS.values():
            t = (fit.params[1] - b0) / fit.bse[1]
            2 * stats.t.sf(abs(t), fit.df_resid)
        out = odr.ODR(odr.RealData(X, Y), odr.unilinear, beta0=fit.params[::-1]).run()
        out.sd_beta
        sma_interval(X, Y)
    return len(index)


#: Prefix of the line a measured child writes on stderr at exit: its own peak resident
#: memory (VmHWM) and the largest peak of the processes it forked and waited for.
_PEAK_TAG = "SCALING-BENCH-PEAK"

#: Run a Python statement, then report this process's peak memory.  ``ru_maxrss`` of a
#: child seen from the parent (``wait4``) is not used: Linux carries the parent's peak
#: across fork/exec into it, so a parent holding the benchmark table inflates it.
_MEASURED = (
    "import atexit, resource, sys\n"
    "def _peak():\n"
    "    own = [l.split()[1] for l in open('/proc/self/status') if l.startswith('VmHWM')][0]\n"
    "    kids = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss\n"
    f"    print('{_PEAK_TAG}', own, kids, file=sys.stderr)\n"
    "atexit.register(_peak)\n"
)


def _child_rss(args: list, cwd=None) -> tuple:
    """Run ``args`` (``[python, "-c", statement, ...]``) in a child; return (seconds, peak
    RSS in bytes of the child process itself, (exit code, stderr, CPU seconds, peak RSS in
    bytes of the processes it forked: its figure processes)).

    The child reports its own VmHWM at exit (see ``_MEASURED``)."""
    args = list(args)
    args[2] = _MEASURED + args[2]
    t0 = time.perf_counter()
    proc = subprocess.Popen(args, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            cwd=cwd)
    err = proc.stderr.read()   # before waiting: a full pipe would block the child
    _, status, usage = os.wait4(proc.pid, 0)
    secs = time.perf_counter() - t0
    proc.returncode = os.waitstatus_to_exitcode(status)
    proc.stdout.close()
    proc.stderr.close()
    cpu = usage.ru_utime + usage.ru_stime   # with the figure process it waited for
    own, kids = 0, 0
    for line in err.splitlines():
        if line.startswith(_PEAK_TAG):
            own, kids = (int(v) * 1024 for v in line.split()[1:3])
    return secs, own, (proc.returncode, err, cpu, kids)


def versus_loop(df: pd.DataFrame, repeats: int) -> None:
    """(e): ``scaling run`` in memory against the plain per-group loop, same file, same run."""
    rows, groups = len(df), df["species"].nunique()
    input_bytes = int(df.memory_usage(deep=True, index=False).sum())
    cmd = [sys.executable, "-c", "import sys; from scaling.cli import main; sys.exit(main())"]
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "table.csv"
        df.to_csv(path, index=False)
        cfg = Path(tmp) / "run.yaml"
        cfg.write_text("data:\n  file: table.csv\n  x: mass\n  y: rate\n  group: species\n"
                       "  moments_above_mb: 100000\nexponents:\n  three_quarters: 0.75\n"
                       "  two_thirds: 0.6667\ngroups:\n  compare: true\n"
                       "figures:\n  formats: [png]\noutput:\n  dir: out\n", encoding="utf-8")
        # cwd: the temporary folder, so the child imports the installed package (or
        # PYTHONPATH's), not a checkout in the current folder
        _, base_rss, _ = _child_rss([sys.executable, "-c", "import scaling.run.pipeline, "
                                     "scaling.render.figures"], cwd=tmp)
        best_run, best_loop, peak, peak_kids = np.inf, np.inf, 0, 0
        cpu_run, cpu_loop = np.inf, np.inf
        for _ in range(repeats):   # round-robin; the best time of each counts
            secs, rss, (code, err, cpu, kids) = _child_rss(cmd + ["run", str(cfg), "--quiet",
                                                            "--force"], cwd=tmp)
            if code:
                print(f"(e) scaling run FAILED: {err.strip()[-400:]}")
                return
            best_run, peak, cpu_run = min(best_run, secs), max(peak, rss), min(cpu_run, cpu)
            peak_kids = max(peak_kids, kids)
            t0, c0 = time.perf_counter(), time.process_time()
            fitted = plain_loop(path)
            best_loop = min(best_loop, time.perf_counter() - t0)
            cpu_loop = min(cpu_loop, time.process_time() - c0)
        size = path.stat().st_size
        figures = sorted(p.name for p in (Path(tmp) / "out" / "figures").iterdir())
    ratio = best_run / best_loop
    print(f"(e) {rows:,} rows in {groups:,} groups, csv file of {size / 1e6:.0f} MB; best of "
          f"{repeats}")
    print(f"    scaling run (in memory, groups compared, png: {', '.join(figures)}): "
          f"{best_run:7.2f} s")
    print(f"    plain loop (read_csv + statsmodels OLS + scipy.odr + numpy SMA, "
          f"{fitted:,} groups): {best_loop:7.2f} s")
    print(f"    ratio run / loop = {ratio:5.2f}   target <= 1.5 : "
          f"{'met' if ratio <= 1.5 else 'NOT met'}")
    print(f"    CPU seconds (what a busy machine distorts least): run {cpu_run:.2f} s "
          f"(its figure process included), loop {cpu_loop:.2f} s, ratio "
          f"{cpu_run / cpu_loop:5.2f}")
    print(f"    peak RSS of the run {peak / 1e6:.0f} MB = {peak / input_bytes:.1f}x the three "
          f"input columns ({input_bytes / 1e6:.0f} MB)   target <= 10x : "
          f"{'met' if peak <= 10 * input_bytes else 'NOT met'}; above a child that only "
          f"imports the package ({base_rss / 1e6:.0f} MB): {(peak - base_rss) / 1e6:.0f} MB = "
          f"{(peak - base_rss) / input_bytes:.1f}x")
    print(f"    (the run's own process; its forked figure processes peaked at "
          f"{peak_kids / 1e6:.0f} MB, pages shared with the run counted again there)")


def best_of(fns: dict, repeats: int) -> dict:
    best = {k: np.inf for k in fns}
    for _ in range(repeats):
        for k, fn in fns.items():          # round-robin
            t = time.perf_counter()
            fn()
            best[k] = min(best[k], time.perf_counter() - t)
    return best


def peak_of(fn) -> int:
    tracemalloc.start()
    tracemalloc.reset_peak()
    fn()
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return peak


_CHILD = """
import sys, time
from scaling.run.table_moments import read_moments
import pyarrow.parquet
if sys.argv[1] == "read":
    t = time.perf_counter()
    gm = read_moments(sys.argv[2], x="mass", y="rate", group="species",
                      chunk_size=int(sys.argv[3]))
    print(time.perf_counter() - t, gm.n_groups, int(gm.pooled.n[0]))
else:
    print(0, 0, 0)
# VmHWM: this process's peak resident memory (ru_maxrss would carry the parent's
# peak across fork/exec)
print([l.split()[1] for l in open("/proc/self/status") if l.startswith("VmHWM")][0])
"""


def child(*args) -> tuple:
    out = subprocess.run([sys.executable, "-c", _CHILD, *map(str, args)], check=True,
                         capture_output=True, text=True).stdout.split()
    return float(out[0]), int(out[1]), int(out[2]), int(out[3]) * 1024   # ru_maxrss: kB


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=float, default=1e6)
    ap.add_argument("--groups", type=float, default=1e3)
    ap.add_argument("--loop-groups", type=int, default=40,
                    help="groups timed in the per-group loop (scaled to all)")
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--chunk", type=float, default=1e6, help="rows per chunk for (d)")
    ap.add_argument("--no-parquet", action="store_true")
    ap.add_argument("--run", action="store_true", help="also time (b') `scaling run`")
    ap.add_argument("--run-format", choices=("parquet", "csv"), default="parquet")
    ap.add_argument("--run-only", action="store_true",
                    help="time only (a) and (b'), skipping (b), (c) and (d)")
    ap.add_argument("--versus-loop", action="store_true",
                    help="time only (e): `scaling run` against a plain per-group loop")
    ap.add_argument("--moments", action="store_true",
                    help="time only (f): the moments path's whole answer vs its fits")
    ap.add_argument("--profile", help="with --moments: write cProfile stats of (f3) here")
    ap.add_argument("--moments-dir", default="/tmp/moments_bench",
                    help="with --moments: folder that keeps the table file between runs "
                         "(written once per size and format, then reused)")
    a = ap.parse_args(argv)
    rows, groups = int(a.rows), int(a.groups)
    if a.versus_loop:
        print(f"{os.cpu_count()} CPUs; numpy {np.__version__}, pandas {pd.__version__}")
        versus_loop(make_table(rows, groups), a.repeats)
        return 0

    print(f"{rows:,} rows in {groups:,} groups ({rows // groups:,} rows each); "
          f"{os.cpu_count()} CPUs; numpy {np.__version__}, pandas {pd.__version__}")
    if a.moments:
        moments_answer(rows, groups, a.run_format, a.repeats, a.profile,
                       folder=a.moments_dir)
        return 0
    df = make_table(rows, groups)
    ff = floor_frame(df)
    input_bytes = int(df.memory_usage(deep=True, index=False).sum())

    if a.run_only:
        t = best_of({"floor": lambda: run_floor(ff)}, a.repeats)
        print(f"(a) floor, groupby-sum of 5 columns : {t['floor']:8.3f} s")
        del ff
        run_command(df, a.run_format, t["floor"])
        return 0
    res = run_ours(df)
    # sanity: the fitted exponents centre on the truth (mean slope about 0.75)
    ols = res.fits[res.fits["method"] == "ols"]
    print(f"check: {len(res.fits):,} fit rows, {len(res.slope_tests):,} test rows; "
          f"mean OLS exponent {ols['slope'].mean():.4f} (truth about 0.75)")

    t = best_of({"floor": lambda: run_floor(ff), "ours": lambda: run_ours(df)}, a.repeats)
    names = df["species"].drop_duplicates().to_numpy()[:a.loop_groups]
    run_loop(df, group_index(df), names[:2])     # warm-up (first-call overheads)
    t0 = time.perf_counter()
    index = group_index(df)
    t_setup = time.perf_counter() - t0
    t0 = time.perf_counter()
    run_loop(df, index, names)
    t_loop_sub = time.perf_counter() - t0
    # per-group work scaled to all groups, plus the one-off grouping
    t_loop = t_loop_sub / len(names) * groups + t_setup
    peak = peak_of(lambda: run_ours(df))

    print(f"(a) floor, groupby-sum of 5 columns : {t['floor']:8.3f} s  "
          f"({rows / t['floor'] / 1e6:6.1f} M rows/s)")
    print(f"(b) ours, OLS+SMA+MA, CIs, tests    : {t['ours']:8.3f} s  "
          f"({rows / t['ours'] / 1e6:6.1f} M rows/s)")
    print(f"(c) loop statsmodels OLS + scipy.odr: {t_loop:8.3f} s  "
          f"(measured {t_loop_sub:.2f} s on {len(names)} groups, scaled to "
          f"{groups}, + {t_setup:.2f} s grouping)")
    r_ba = t["ours"] / t["floor"]
    r_cb = t_loop / t["ours"]
    print(f"ratio (b)/(a) = {r_ba:6.2f}   target <= 2.5 : {'met' if r_ba <= 2.5 else 'NOT met'}")
    tgt = "met" if r_cb >= 10 else "NOT met"
    print(f"ratio (c)/(b) = {r_cb:6.1f}   target >= 10 (at 1e4 groups of 1e3 rows): {tgt}")
    print(f"peak memory of (b): {peak / 1e6:.0f} MB = {peak / input_bytes:.2f}x the three "
          f"input columns ({input_bytes / 1e6:.0f} MB)   target < 3x : "
          f"{'met' if peak < 3 * input_bytes else 'NOT met'}")

    if not a.no_parquet:
        with tempfile.TemporaryDirectory() as tmp:
            path = Path(tmp) / "table.parquet"
            df.to_parquet(path, row_group_size=min(rows, 1_000_000))
            size = path.stat().st_size
            del ff
            _, _, _, base_rss = child("baseline")
            secs, g, n, rss = child("read", path, int(a.chunk))
        print(f"(d) chunked parquet read ({size / 1e6:.0f} MB file, chunks of "
              f"{int(a.chunk):,} rows): {secs:.2f} s ({n / secs / 1e6:.1f} M rows/s), "
              f"{g:,} groups; peak RSS {rss / 1e6:.0f} MB, {(rss - base_rss) / 1e6:.0f} MB "
              f"above a process that only imports ({base_rss / 1e6:.0f} MB)")
    if a.run:
        run_command(df, a.run_format, t["floor"])
    return 0


def run_command(df: pd.DataFrame, fmt: str, floor: float) -> None:
    """(b'): ``scaling run`` on the table written as a file, in a child process."""
    import resource
    rows = len(df)
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / f"table.{fmt}"
        if fmt == "parquet":
            df.to_parquet(path, row_group_size=min(rows, 1_000_000))
        else:
            df.to_csv(path, index=False)
        cfg = Path(tmp) / "run.yaml"
        cfg.write_text(f"data:\n  file: {path.name}\n  x: mass\n  y: rate\n"
                       f"  group: species\nexponents:\n  three_quarters: 0.75\n"
                       f"output:\n  dir: out\n", encoding="utf-8")
        t0 = time.perf_counter()
        done = subprocess.run([sys.executable, "-c", "import sys; from scaling.cli import main; "
                               "sys.exit(main())", "run", str(cfg), "--quiet"],
                              capture_output=True, text=True)
        secs = time.perf_counter() - t0
        rss = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss * 1024
        if done.returncode:
            print(f"(b') scaling run FAILED: {done.stderr.strip()[-400:]}")
            return
        out = Path(tmp) / "out"
        report = (out / "report.html").stat().st_size
        figures = sorted(p.name for p in (out / "figures").iterdir())
        size = path.stat().st_size
    print(f"(b') scaling run, {fmt} file of {size / 1e6:.0f} MB, figures on: {secs:8.2f} s "
          f"({rows / secs / 1e6:.2f} M rows/s); (b')/(a) = {secs / floor:.1f}; "
          f"target < 30 s: {'met' if secs < 30 else 'NOT met'}")
    print(f"     peak RSS of the largest child so far {rss / 1e6:.0f} MB; report.html "
          f"{report / 1e6:.2f} MB; figures: {', '.join(figures)}")


def _cpu() -> float:
    """CPU seconds of this process and of its children waited for (the figure processes)."""
    import resource
    me = resource.getrusage(resource.RUSAGE_SELF)
    kids = resource.getrusage(resource.RUSAGE_CHILDREN)
    return me.ru_utime + me.ru_stime + kids.ru_utime + kids.ru_stime


def _table_file(rows: int, groups: int, fmt: str, folder: str) -> Path:
    """The synthetic table as a file in ``folder``, written once and then reused."""
    path = Path(folder) / f"table_{rows}x{groups}.{fmt}"
    if not path.exists():
        path.parent.mkdir(parents=True, exist_ok=True)
        df = make_table(rows, groups)
        part = path.with_suffix(".part")
        if fmt == "parquet":
            df.to_parquet(part, row_group_size=min(rows, 1_000_000))
        else:
            df.to_csv(part, index=False)
        part.rename(path)
    return path


def moments_answer(rows: int, groups: int, fmt: str = "csv", repeats: int = 1,
                   profile: str | None = None, folder: str = "/tmp/moments_bench") -> float:
    """(f): the moments path's whole answer against its fits alone, in this process.

    On the table written as a file (kept in ``folder`` and reused): (f1) its
    fits alone -- ``read_moments`` (chunks of 1e6 rows) and
    ``fit_groups_from_moments`` (OLS, SMA, MA, intervals, slope tests); (f2)
    the answer computed -- ``run_config`` with ``data.moments_above_mb`` tiny
    (the moments path), groups compared, corrections, residual checks and
    curvature (the second pass), predictions, nothing written; (f3) the same
    with the tables, results.json, the report and the PNG figures written.
    Target (f3)/(f1) < 2.  Wall seconds (best of ``repeats``) and CPU seconds
    (this process and the figure processes it waited for; least of
    ``repeats``) are printed, and the part of the whole that is writing,
    (f3) - (f2).  ``profile``: a path to write cProfile
    statistics of (f3) to.  Returns the wall ratio.
    """
    from scaling.run.pipeline import run_config
    from scaling.run.table_moments import read_moments
    from scaling.stats.grouped_fits import fit_groups_from_moments
    path = _table_file(rows, groups, fmt, folder)
    with tempfile.TemporaryDirectory() as tmp:

        def fits_alone():
            gm = read_moments(path, x="mass", y="rate", group="species", chunk_size=1_000_000)
            fit_groups_from_moments(gm, methods=("ols", "sma", "ma"), exponents=EXPONENTS,
                                    pooled=True)

        cfg = {"data": {"file": str(path), "x": "mass", "y": "rate", "group": "species",
                        "moments_above_mb": 1e-6, "chunk_size": 1_000_000},
               "exponents": {"three_quarters": 0.75}, "prediction": {"x": [10, 100]},
               "figures": {"formats": ["png"]}, "output": {"dir": str(Path(tmp) / "out")}}

        def answer():
            run_config(cfg, write=False, quiet=True)

        def whole():
            run_config(cfg, force=True, quiet=True)

        fns = {"fits": fits_alone, "answer": answer, "whole": whole}
        t = {k: np.inf for k in fns}
        cpu = {k: np.inf for k in fns}
        for _ in range(repeats):
            for k, fn in fns.items():          # round-robin
                t0, c0 = time.perf_counter(), _cpu()
                fn()
                t[k] = min(t[k], time.perf_counter() - t0)
                cpu[k] = min(cpu[k], _cpu() - c0)
        if profile:
            import cProfile
            cProfile.runctx("whole()", globals(), {"whole": whole}, profile)
    ratio = t["whole"] / t["fits"]
    size = path.stat().st_size / 1e6
    print(f"(f) {fmt} file of {size:.0f} MB; wall s best of {repeats}, CPU s (with the "
          "figure processes)")
    print(f"(f1) moments path, fits alone        : {t['fits']:8.3f} s  CPU {cpu['fits']:7.3f} s")
    print(f"(f2) the answer computed, not written: {t['answer']:8.3f} s  CPU "
          f"{cpu['answer']:7.3f} s  (f2)/(f1) = {t['answer'] / t['fits']:.2f} "
          f"(CPU {cpu['answer'] / cpu['fits']:.2f})")
    print(f"(f3) the whole answer written        : {t['whole']:8.3f} s  CPU "
          f"{cpu['whole']:7.3f} s  (f3)/(f1) = {ratio:.2f} (CPU "
          f"{cpu['whole'] / cpu['fits']:.2f})   target < 2 : "
          f"{'met' if ratio < 2 else 'NOT met'}; under 30 s: "
          f"{'met' if t['whole'] < 30 else 'NOT met'}")
    write_wall, write_cpu = t["whole"] - t["answer"], cpu["whole"] - cpu["answer"]
    print(f"     of which writing (f3)-(f2)      : {write_wall:8.3f} s  CPU {write_cpu:7.3f} s  "
          f"({100 * write_wall / t['whole']:.0f}% of the whole wall, "
          f"{100 * write_cpu / cpu['whole']:.0f}% of its CPU)")
    return ratio


if __name__ == "__main__":
    raise SystemExit(main())
