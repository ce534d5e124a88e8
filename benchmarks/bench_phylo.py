"""Speed and memory of the phylogenetic lambda fit (scaling.stats.phylogeny).

Random trees (random joins of lineages, exponential branch lengths, so
not ultrametric) of 1 000, 10 000 and 100 000 tips with traits simulated
by Brownian motion under lambda = 0.5.  For each size it times, in the same
run: parsing the Newick text, the whole ML lambda fit by the O(n) pass
(``fit_phylo``, PGLS and SMA), and, up to 2 000 tips, the dense n x n
Cholesky reference (``reference=True``), printing the ratio.  It also times
the registry Newick readers on the largest tree as the baseline for our own
reader (``--readers``).  Peak memory is the process's peak resident set
(``ru_maxrss``, which only grows), printed after each fit.

Targets (2 cores): 10 000 tips < 2 s, 100 000 tips < 20 s, growth close to
linear, peak memory < 1 GB at 100 000 tips.

Then, on the same sizes, the evolutionary models of
:mod:`scaling.stats.phylo_models` (lambda, Brownian, independent, OU, kappa,
delta: one grid pass and a bounded search each, by the O(n) pass on
transformed branch lengths; OU is refused on these non-ultrametric trees, so
it costs only the check), the LR tests of lambda, PGLS with within-species
sampling error (a 2-D grid in one pass, then a quasi-Newton search) and the
new-species line, with time ratios between sizes (linear growth: ratio close
to the size ratio).  Skip with ``--no-models``.  Then the phylogenetic group
comparisons (four groups; OLS and SMA) with their time ratios; skip with
``--no-groups``.

Run:  .venv/bin/python benchmarks/bench_phylo.py [--sizes 1000 10000 100000]
"""

from __future__ import annotations

import argparse
import os
import resource
import time

# One BLAS thread: on a shared 2-core machine threaded BLAS oversubscribes and
# makes the dense reference several times slower than it is.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402

from scaling.stats.newick import parse_newick  # noqa: E402
from scaling.stats.phylogeny import fit_phylo  # noqa: E402


def random_tree_newick(n: int, rng) -> str:
    """Random topology by joining random pairs; exponential branch lengths."""
    items = [f"sp{i}:{rng.exponential():.6g}" for i in range(n)]
    while len(items) > 1:
        i, j = rng.choice(len(items), 2, replace=False)
        a, b = items[i], items[j]
        for k in sorted((i, j), reverse=True):
            items[k] = items[-1]
            items.pop()
        items.append(f"({a},{b}):{rng.exponential():.6g}")
    return items[0] + ";"


def simulate(tree, lam: float, rng):
    """Brownian X and Y (correlation 0.6, slope 0.75) under Pagel's lambda, one pass."""
    from scaling.stats.phylogeny import pagel_lambda
    t = pagel_lambda(tree, lam)
    n = t.n_nodes
    sd = np.sqrt(t.length)
    dx = rng.normal(size=n) * sd
    de = rng.normal(size=n) * sd
    gx, ge = dx.copy(), de.copy()
    par = t.parent.tolist()
    for i in range(1, n):               # pre-order: parents first
        gx[i] += gx[par[i]]
        ge[i] += ge[par[i]]
    tips = t.tips
    return 10 ** gx[tips], 10 ** (0.75 * gx[tips] + 0.5 * ge[tips]), [t.names[i] for i in tips]


def timed(fn):
    """Result, wall time, and the process's peak resident memory so far (bytes)."""
    t0 = time.perf_counter()
    out = fn()
    dt = time.perf_counter() - t0
    return out, dt, resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024


def main(argv=None):
    ap = argparse.ArgumentParser()
    ap.add_argument("--sizes", type=int, nargs="+", default=[1000, 10000, 100000])
    ap.add_argument("--dense-max", type=int, default=2000)
    ap.add_argument("--readers", action="store_true", help="also time registry Newick readers")
    ap.add_argument("--no-models", action="store_true",
                    help="skip the evolutionary models and sampling error")
    ap.add_argument("--no-groups", action="store_true",
                    help="skip the phylogenetic group comparisons")
    args = ap.parse_args(argv)
    rng = np.random.default_rng(2026)
    rows = []
    for n in args.sizes:
        text = random_tree_newick(n, rng)
        tree, t_parse, _ = timed(lambda: parse_newick(text))
        x, y, sp = simulate(tree, 0.5, rng)
        for method in ("ols", "sma"):
            fit, t_fit, peak = timed(lambda: fit_phylo(x, y, text, sp, method=method))
            line = (f"n={n:>7} {method:>3}: parse {t_parse:6.2f} s, whole fit (parse+match+lambda ML"
                    f"+profile CI) {t_fit:6.2f} s, peak RSS {peak / 2**20:7.1f} MiB, "
                    f"lambda={fit.lam:.3f} [{fit.lam_ci.low:.3f}, {fit.lam_ci.high:.3f}], "
                    f"slope={fit.slope:.4f}")
            if n <= args.dense_max:
                ref, t_ref, peak_ref = timed(
                    lambda: fit_phylo(x, y, text, sp, method=method, reference=True))
                line += (f"\n             dense reference {t_ref:6.2f} s (x{t_ref / t_fit:.1f} slower),"
                         f" peak RSS {peak_ref / 2**20:7.1f} MiB, |d lambda|={abs(ref.lam - fit.lam):.1e},"
                         f" |d slope|={abs(ref.slope - fit.slope):.1e}")
            print(line, flush=True)
            rows.append((n, method, t_fit))
    for method in ("ols", "sma"):
        ts = [(n, t) for n, m, t in rows if m == method]
        for (n0, t0), (n1, t1) in zip(ts, ts[1:]):
            print(f"{method}: time ratio {n1}/{n0} tips = {t1 / t0:.1f} "
                  f"(linear would be {n1 / n0:.0f})")
    if not args.no_models:
        bench_models(args.sizes, np.random.default_rng(7))
    if not args.no_groups:
        bench_groups(args.sizes, np.random.default_rng(11))
    if args.readers:
        big = max(args.sizes)
        text = random_tree_newick(big, np.random.default_rng(1))
        _, t_own, _ = timed(lambda: parse_newick(text))
        print(f"readers on {big} tips: scaling.stats.newick {t_own:.2f} s")
        for name, load in (("treeswift", lambda: __import__("treeswift").read_tree_newick(text)),
                           ("dendropy", lambda: __import__("dendropy").Tree.get(
                               data=text, schema="newick")),
                           ("newick", lambda: __import__("newick").loads(text))):
            try:
                _, t, _ = timed(load)
            except ImportError:
                print(f"  {name}: not installed")
                continue
            print(f"  {name}: {t:.2f} s (x{t / t_own:.1f}; object tree only, no arrays)")


def bench_groups(sizes, rng) -> None:
    """Phylogenetic group comparisons (four groups, lambda by ML under the full model):
    OLS by the whitened ANCOVA, SMA by the whitened moment tests (bootstrap-calibrated
    up to 3 000 species, chi-squared above), with time ratios between sizes."""
    from scaling.stats.phylo_groups import phylo_group_tests
    times: dict = {}
    for n in sizes:
        tree = parse_newick(random_tree_newick(n, rng))
        x, y, sp = simulate(tree, 0.5, rng)
        groups = np.array([f"g{i % 4}" for i in range(n)])
        for method in ("ols", "sma"):
            res, t, peak = timed(lambda: phylo_group_tests(np.log10(x), np.log10(y), sp, groups,
                                                           tree, method=method))
            times[(method, n)] = t
            print(f"groups n={n:>7} {method:>3}: {t:6.2f} s ({res.p_method}), "
                  f"peak RSS {peak / 2**20:7.1f} MiB", flush=True)
    for method in ("ols", "sma"):
        for n0, n1 in zip(sizes, sizes[1:]):
            print(f"groups {method}: time ratio {n1}/{n0} tips = "
                  f"{times[(method, n1)] / times[(method, n0)]:.1f} (linear would be {n1 / n0:.0f})")


def bench_models(sizes, rng) -> None:
    """Time the model comparison, the lambda tests, sampling error and the new-species line."""
    from scaling.stats.phylogeny import PhyloPlan, phylo_pass
    from scaling.stats.phylo_models import compare_models, fit_sampling_error, lambda_tests
    from scaling.stats.phylo_predict import new_species_line
    times = {}
    for n in sizes:
        tree = parse_newick(random_tree_newick(n, rng))
        x, y, _ = simulate(tree, 0.5, rng)
        X, Y = np.log10(x), np.log10(y)
        plan, t_plan, _ = timed(lambda: PhyloPlan.from_tree(tree))
        fits, t_models, peak = timed(lambda: compare_models(plan, X, Y))
        lam = next(f for f in fits if f.model == "lambda")
        _, t_lr, _ = timed(lambda: lambda_tests(plan, X, Y, lam.estimate, lam.loglik))
        extra = 0.05 / rng.integers(1, 6, n)
        se, t_se, peak2 = timed(lambda: fit_sampling_error(plan, X, Y, extra, s2=0.05))
        _, t_new, _ = timed(lambda: new_species_line(
            phylo_pass(plan, np.column_stack([X, Y]), [lam.estimate]), n, 1.0))
        times[n] = (t_models, t_se)
        print(f"n={n:>7} models: plan {t_plan:5.2f} s, six models {t_models:6.2f} s "
              f"(lambda {lam.estimate:.3f}), LR tests {t_lr:5.2f} s, sampling error "
              f"{t_se:6.2f} s (lambda {se.lam:.3f}), new-species line {t_new:5.3f} s, "
              f"peak RSS {max(peak, peak2) / 2**20:7.1f} MiB", flush=True)
    ns = sorted(times)
    for n0, n1 in zip(ns, ns[1:]):
        print(f"models: time ratio {n1}/{n0} tips = {times[n1][0] / times[n0][0]:.1f}, "
              f"sampling error {times[n1][1] / times[n0][1]:.1f} "
              f"(linear would be {n1 / n0:.0f})")


if __name__ == "__main__":
    main()
