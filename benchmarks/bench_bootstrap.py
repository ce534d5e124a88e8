"""Benchmark: 10 000 bootstrap resamples of an SMA slope, n = 1 000.

Compares, in one run and on the same data:

* ours     -- scaling.stats.resampling.bootstrap_lines(..., draws="fast"): 16-bit
              index draws in blocks alternating between two random streams,
              worked on by two threads when the machine has two CPUs ->
              count matrix -> weighted moments -> SMA slope; it also
              computes the intercept and the BCa interval, which "scipy pct"
              does not.  (The default draws="scipy" reproduces scipy's index
              matrix exactly and runs on one thread; it is timed as
              "ours, scipy draws".)
* ours 1T  -- draws="fast" forced onto one thread (for reference: the
              competitors below use one core);
* loop     -- a straightforward per-resample numpy loop (draw indices, index
              the data, compute the SMA slope);
* scipy    -- scipy.stats.bootstrap(..., paired=True, vectorized=True) on the
              same SMA statistic, percentile and BCa.

Each contender is timed ``REPEATS`` times, the contenders taking turns
(round-robin, so a slow spell of the machine hits all of them alike), and
the best time is used (the minimum is the least noisy estimate).  Peak memory
of ours is measured in a separate run under tracemalloc (numpy reports its
array allocations to tracemalloc).  Targets: ours >= 5x faster than both
the loop and scipy, peak memory < 200 MB.  The script prints whether each
target is met.

Run:  python benchmarks/bench_bootstrap.py
"""

from __future__ import annotations

import time
import tracemalloc

import numpy as np
from scipy import stats

import scaling.stats.resampling as resample
from scaling.stats.resampling import bootstrap_lines

N = 1_000
B = 10_000
REPEATS = 5
SEED = 20240601


def sma_slope(x, y, axis=-1):
    """SMA slope sign(r) sqrt(Syy/Sxx) along ``axis`` (vectorised statistic)."""
    xc = x - x.mean(axis=axis, keepdims=True)
    yc = y - y.mean(axis=axis, keepdims=True)
    sxy = np.sum(xc * yc, axis=axis)
    return np.sign(sxy) * np.sqrt(np.sum(yc * yc, axis=axis) / np.sum(xc * xc, axis=axis))


def run_ours(X, Y):
    res = bootstrap_lines(X, Y, methods=("sma",), n_boot=B, seed=SEED, draws="fast")
    return res.get("sma").percentile


def run_ours_scipy_draws(X, Y):
    res = bootstrap_lines(X, Y, methods=("sma",), n_boot=B, seed=SEED, draws="scipy")
    return res.get("sma").percentile


def run_ours_one_thread(X, Y):
    saved = resample._THREAD_CELLS
    resample._THREAD_CELLS = float("inf")   # never start the helper thread
    try:
        return run_ours(X, Y)
    finally:
        resample._THREAD_CELLS = saved


def run_loop(X, Y):
    rng = np.random.default_rng(SEED)
    n = X.size
    out = np.empty(B)
    for k in range(B):
        i = rng.integers(0, n, n)
        out[k] = sma_slope(X[i], Y[i])
    return tuple(np.quantile(out, [0.025, 0.975]))


def run_scipy(X, Y, method):
    res = stats.bootstrap((X, Y), sma_slope, paired=True, vectorized=True,
                          n_resamples=B, method=method, rng=np.random.default_rng(SEED))
    return res.confidence_interval


def best_times(contenders, *args):
    """Time every contender REPEATS times, taking turns; best and median seconds."""
    times = {name: [] for name in contenders}
    results = {}
    for _ in range(REPEATS):
        for name, fn in contenders.items():
            t0 = time.perf_counter()
            results[name] = fn(*args)
            times[name].append(time.perf_counter() - t0)
    return {name: (min(t), float(np.median(t)), results[name]) for name, t in times.items()}


def main() -> None:
    rng = np.random.default_rng(1)
    X = rng.normal(2.0, 0.6, N)
    Y = 0.75 * X + rng.normal(0, 0.25, N)

    timed = best_times({
        "ours": run_ours,
        "ours1": run_ours_one_thread,
        "oursS": run_ours_scipy_draws,
        "loop": run_loop,
        "pct": lambda X, Y: run_scipy(X, Y, "percentile"),
        "bca": lambda X, Y: run_scipy(X, Y, "BCa"),
    }, X, Y)
    t_ours, m_ours, ci_ours = timed["ours"]
    t_one, m_one, _ = timed["ours1"]
    t_sd, m_sd, ci_sd = timed["oursS"]
    t_loop, m_loop, ci_loop = timed["loop"]
    t_sp, m_sp, ci_sp = timed["pct"]
    t_bca, m_bca, _ = timed["bca"]

    tracemalloc.start()
    run_ours(X, Y)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    peak_mb = peak / 2 ** 20

    print(f"SMA slope bootstrap, n = {N}, B = {B}; best (median) of {REPEATS} runs")
    print(f"  ours (bootstrap_lines)         {t_ours:8.3f} s ({m_ours:.3f} s)")
    print(f"  ours, one thread               {t_one:8.3f} s ({m_one:.3f} s)")
    print(f"  ours, scipy draws (default)    {t_sd:8.3f} s ({m_sd:.3f} s)")
    print(f"  per-resample numpy loop        {t_loop:8.3f} s ({m_loop:.3f} s)")
    print(f"  scipy.stats.bootstrap pct      {t_sp:8.3f} s ({m_sp:.3f} s)")
    print(f"  scipy.stats.bootstrap BCa      {t_bca:8.3f} s ({m_bca:.3f} s)")
    print(f"  95% percentile interval: ours ({ci_ours.low:.4f}, {ci_ours.high:.4f}), "
          f"loop ({ci_loop[0]:.4f}, {ci_loop[1]:.4f}), "
          f"scipy ({ci_sp.low:.4f}, {ci_sp.high:.4f})")
    r_loop, r_sp, r_bca = t_loop / t_ours, t_sp / t_ours, t_bca / t_ours
    print(f"  speed-up vs loop: {r_loop:.1f}x; vs scipy percentile: {r_sp:.1f}x; "
          f"vs scipy BCa: {r_bca:.1f}x")
    print(f"  one thread: vs loop {t_loop / t_one:.1f}x; vs scipy percentile "
          f"{t_sp / t_one:.1f}x; vs scipy BCa {t_bca / t_one:.1f}x")
    print(f"  scipy draws: vs loop {t_loop / t_sd:.1f}x; vs scipy percentile "
          f"{t_sp / t_sd:.1f}x; vs scipy BCa {t_bca / t_sd:.1f}x; same interval as scipy: "
          f"{np.allclose([ci_sd.low, ci_sd.high], [ci_sp.low, ci_sp.high], rtol=1e-9)}")
    print(f"  peak memory of ours (tracemalloc): {peak_mb:.1f} MB")
    speed_ok = r_loop >= 5 and r_sp >= 5
    mem_ok = peak_mb < 200
    print(f"  target >= 5x faster than loop and scipy: {'MET' if speed_ok else 'NOT MET'}")
    print(f"  target peak memory < 200 MB: {'MET' if mem_ok else 'NOT MET'}")


if __name__ == "__main__":
    main()
