"""Phylogenetic group comparisons (scaling.stats.phylo_groups).

References: statsmodels GLS with the Pagel-lambda covariance built from
dendropy's patristic distances (V_ij = (h_i + h_j - d_ij)/2, h the root-to-tip
distances); the ordinary tests of scaling.stats.group_comparisons, which V = I
must reproduce exactly; Monte Carlo size with a known truth.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from scaling.errors import DataError
from scaling.stats.common_slope import _fit_common
from scaling.stats.group_comparisons import compare_groups
from scaling.stats.newick import parse_newick
from scipy import stats

from scaling.stats.phylo_groups import (_axis_stats, _bootstrap, _ols_columns, _ols_stats,
                                        _prepare, gram_matrices, phylo_group_tests)
from scaling.stats.phylogeny import tree_covariance

dendropy = pytest.importorskip("dendropy")
sm = pytest.importorskip("statsmodels.api")

from helpers_trees import dendropy_cov as _dendropy_cov, random_newick as _random_newick  # noqa: E402

TESTS = ["slopes_equal", "intercepts_equal", "shift_along_axis"]


# --------------------------------------------------------------------------
# trees


def _ultrametric_clades(sizes, rng, *, stem=0.5, shared=0.2):
    """Clades of the given sizes, each a random ultrametric subtree of depth 1 - stem
    below a stem of length ``stem``; the first two clades are sisters (their stems
    share a branch of length ``shared`` from the root), so clades covary.  Tips all
    at height 1."""
    names, clades, labels = [], [], []

    def build(part, height, h=None):
        """Subtree whose branch above it and everything below span ``height``;
        its own node sits ``h`` above the tips (random when None)."""
        if len(part) == 1:
            return f"{part[0]}:{height!r}"
        cut = int(rng.integers(1, len(part)))
        h = height * rng.uniform(0.2, 0.9) if h is None else h
        kids = [build(part[:cut], h), build(part[cut:], h)]
        return "(" + ",".join(kids) + f"):{height - h!r}"
    for c, size in enumerate(sizes):
        part = [f"c{c}s{i}" for i in range(size)]
        names += part
        labels += [f"clade{c}"] * size
        clades.append(build(part, 1.0 - (shared if c < 2 else 0.0), h=1 - stem))
    clades = [f"({clades[0]},{clades[1]}):{shared!r}"] + clades[2:]
    return "(" + ",".join(clades) + ");", names, np.asarray(labels)


def _data(n, rng, *, slope=0.75):
    X = rng.normal(0, 1, n)
    return X, slope * X + rng.normal(0, 0.3, n)


def _sm_tests(X, Y, labels, V):
    """The three ANCOVA F tests and the common slope by statsmodels GLS."""
    groups = np.unique(labels)
    D = (labels[:, None] == groups[None, :]).astype(float)
    one = np.ones((X.size, 1))
    fit = lambda y, design: sm.GLS(y, design, sigma=V).fit()   # noqa: E731
    full = fit(Y, np.column_stack([D, D * X[:, None]]))
    par = fit(Y, np.column_stack([D, X]))
    pooled = fit(Y, np.column_stack([one, X]))
    xd, x1 = fit(X, D), fit(X, one)
    f = [full.compare_f_test(par)[0], par.compare_f_test(pooled)[0], xd.compare_f_test(x1)[0]]
    return np.array(f), float(par.params[-1]), float(par.bse[-1]), full


# --------------------------------------------------------------------------


class TestAgainstGLS:
    @pytest.mark.parametrize("seed", [1, 2, 3])
    def test_ancova_statistics_and_common_slope_equal_statsmodels_gls(self, seed):
        rng = np.random.default_rng(seed)
        names = [f"sp{i}" for i in range(40)]
        newick = _random_newick(names, rng)
        X, Y = _data(40, rng)
        labels = rng.choice(["a", "b", "c"], size=40)          # not monophyletic
        res = phylo_group_tests(X, Y, names, labels, parse_newick(newick), method="ols",
                                lam=0.6)
        f, b, se, _ = _sm_tests(X, Y, labels, _dendropy_cov(newick, names, 0.6))
        # statsmodels GLS with the lambda covariance from dendropy patristic distances
        assert_allclose(res.statistic, f, rtol=1e-8)
        assert_allclose([res.common.slope, res.common.slope_se], [b, se], rtol=1e-8)

    def test_lambda_maximises_the_full_model_gls_likelihood(self):
        rng = np.random.default_rng(7)
        names = [f"sp{i}" for i in range(50)]
        newick = _random_newick(names, rng)
        tree = parse_newick(newick)
        v1 = _dendropy_cov(newick, names, 1.0)
        L = np.linalg.cholesky(0.7 * v1 + 0.3 * np.diag(np.diag(v1)))
        X = L @ rng.normal(size=50)
        Y = 0.75 * X + 0.3 * (L @ rng.normal(size=50))
        labels = rng.choice(["a", "b"], size=50)
        res = phylo_group_tests(X, Y, names, labels, tree, method="ols")
        assert 0 < res.lam < 1

        def ll(lam):   # statsmodels' profile log-likelihood of the full interaction model
            return _sm_tests(X, Y, labels, _dendropy_cov(newick, names, lam))[3].llf
        # reference: statsmodels GLS llf; the estimate is its maximum over lambda
        assert ll(res.lam) >= max(ll(res.lam - 1e-3), ll(res.lam + 1e-3))
        f, _, _, _ = _sm_tests(X, Y, labels, _dendropy_cov(newick, names, res.lam))
        assert_allclose(res.statistic, f, rtol=1e-8)   # statsmodels GLS at the same lambda

    @pytest.mark.parametrize("method", ["sma", "ma"])
    def test_whitened_within_group_sums_split_into_clade_subtrees(self, method):
        # The SMA/MA tests read per-clade sums from each clade's subtree; on clades
        # this equals the dense whitened residual cross-products after projecting out
        # the whitened group indicators (exact law: invariance of GLS residuals to
        # adding D A D' to V), computed here from dendropy's covariance.
        rng = np.random.default_rng(11)
        newick, names, labels = _ultrametric_clades([8, 10, 7], rng)
        # make it non-ultrametric: lengthen a few tips
        X, Y = _data(len(names), rng)
        lam = 0.7
        p = _prepare(parse_newick(newick), X, Y, names, labels)
        G = 3
        gram, _, sum_w = gram_matrices(p.plan, np.column_stack(
            [(p.codes[:, None] == np.arange(G)).astype(float), X, Y]), [lam])
        scale = len(names) / float(sum_w[0])
        sums = _axis_stats(p, method, lam, X, Y)["sums"]
        V = _dendropy_cov(newick, names, lam) / scale
        D = (labels[:, None] == np.unique(labels)[None, :]).astype(float)
        Vi = np.linalg.inv(V)
        Z = np.column_stack([X, Y])
        W = Z.T @ Vi @ Z - Z.T @ Vi @ D @ np.linalg.solve(D.T @ Vi @ D, D.T @ Vi @ Z)
        assert_allclose([sums[0].sum(), sums[1].sum(), sums[2].sum()],
                        [W[0, 0], W[1, 1], W[0, 1]], rtol=1e-8)
        # group means: GLS coefficients of whitened X, Y on whitened D
        r = _axis_stats(p, method, lam, X, Y)
        means = np.linalg.solve(D.T @ Vi @ D, D.T @ Vi @ Z)
        assert_allclose(np.column_stack([r["mx"], r["my"]]), means, rtol=1e-8)
        # elevation Wald with the dense covariance of the GLS group means,
        # Sigma = diag(s) (D'V^-1 D)^-1 diag(s) + var(b) c c' (Warton et al. 2006 form)
        n_g = np.bincount(p.codes).astype(float)
        fit = _fit_common(method, n_g[None], *(a[None] for a in sums), exact=True)
        b, vb = fit["b"][0], fit["var_b"][0]
        srr = sums[1] - 2 * b * sums[2] + b * b * sums[0]
        t = means[:, 1] - b * means[:, 0]
        sd = np.sqrt(srr / (n_g - 1))
        sigma = (sd[:, None] * np.linalg.inv(D.T @ Vi @ D) * sd[None, :]
                 + vb * np.outer(means[:, 0], means[:, 0]))
        si = np.linalg.inv(sigma)
        one = np.ones(3)
        wald = t @ si @ t - (one @ si @ t) ** 2 / (one @ si @ one)
        assert_allclose(r["statistic"][1], wald, rtol=1e-8)


class TestReducesToOrdinary:
    @pytest.mark.parametrize("method", ["ols", "sma", "ma"])
    def test_lambda_zero_on_ultrametric_tree_is_the_ordinary_comparison(self, method):
        rng = np.random.default_rng(3)
        newick, names, labels = _ultrametric_clades([9, 12, 10, 8], rng)
        X, Y = _data(len(names), rng)
        Y = Y + (labels == "clade1") * 0.4          # one clade shifted: pairwise tests run
        res = phylo_group_tests(X, Y, names, labels, parse_newick(newick), method=method,
                                lam=0.0, n_boot=0)
        ordinary = compare_groups(pd.DataFrame({"x": X, "y": Y, "g": labels}), "x", "y", "g",
                                  method=method, log_base=None, calibration="chi2")
        # internal consistency with the ordinary tests (V = I exactly at lambda = 0)
        assert_allclose(res.statistic, [ordinary.test(t).statistic for t in TESTS],
                        rtol=1e-10)
        assert_allclose(res.p_value, [ordinary.test(t).p_value for t in TESTS], rtol=1e-9)
        ci, oci = res.common.slope_ci, ordinary.common.slope_ci
        assert_allclose([res.common.slope, ci.low, ci.high],
                        [ordinary.common.slope, oci.low, oci.high], rtol=1e-10)
        ours = res.pairwise_frame().set_index(["test", "group_a", "group_b"])
        theirs = ordinary.pairwise_frame().set_index(["test", "group_a", "group_b"])
        common = ours.index.intersection(theirs.index)
        assert len(common) >= 6
        assert_allclose(ours.loc[common, "statistic"], theirs.loc[common, "statistic"],
                        rtol=1e-9)

    @pytest.mark.parametrize("method", ["ols", "sma"])
    @pytest.mark.parametrize("lam", [0.3, 1.0])
    def test_star_tree_gives_the_ordinary_comparison_whatever_lambda(self, method, lam):
        rng = np.random.default_rng(5)
        names = [f"sp{i}" for i in range(30)]
        newick = "(" + ",".join(f"{s}:2.5" for s in names) + ");"
        X, Y = _data(30, rng)
        labels = np.repeat(["a", "b", "c"], 10)
        res = phylo_group_tests(X, Y, names, labels, parse_newick(newick), method=method,
                                lam=lam, n_boot=0)
        ordinary = compare_groups(pd.DataFrame({"x": X, "y": Y, "g": labels}), "x", "y", "g",
                                  method=method, log_base=None, calibration="chi2")
        # internal consistency: a star tree is V proportional to I for every lambda
        assert_allclose(res.statistic, [ordinary.test(t).statistic for t in TESTS],
                        rtol=1e-10)
        assert_allclose(res.common.slope, ordinary.common.slope, rtol=1e-10)


class TestErrors:
    def test_species_without_a_tip(self):
        tree = parse_newick("((a:1,b:1):1,(c:1,d:1):1);")
        with pytest.raises(DataError, match="has no tip"):
            phylo_group_tests([1, 2, 3, 4], [1, 2, 3, 4], ["a", "b", "c", "zz"],
                              ["g", "g", "h", "h"], tree)

    def test_too_few_species_per_group(self):
        tree = parse_newick("((a:1,b:1):1,(c:1,d:1):1);")
        with pytest.raises(DataError, match="at least 3 species"):
            phylo_group_tests([1, 2, 3, 4.5], [1, 2, 3, 4], ["a", "b", "c", "d"],
                              ["g", "g", "h", "h"], tree, lam=0.5)


# --------------------------------------------------------------------------
# size by simulation


def simulate_sizes(lam_true: float, *, reps: int = 2000, n_boot: int = 19, seed: int = 20,
                   boot_ordinary: bool = False):
    """Rejection rates at 0.05 of the phylogenetic tests (at the true lambda) and of the
    ordinary ones (lambda = 0 on the same ultrametric tree, i.e. species independent),
    for data with no group difference, all replicates in array passes.

    Tree: 4 clades of 12 species, stems of half the depth.  X and the residuals
    of Y = 0.75 X + e are Brownian (lambda_true = 1) or Pagel-lambda processes on
    the tree.  OLS: F tests.  SMA: the parametric bootstrap of each replicate
    (``n_boot`` draws, all replicates at once; with 19 draws, p <= 0.05 means
    the observed statistic exceeds every draw, a Monte Carlo test of exact
    level 0.05) and, for comparison, chi^2.  The ordinary SMA tests are
    bootstrapped only with ``boot_ordinary`` (as the run does; slower).
    """
    rng = np.random.default_rng(seed)
    newick, names, labels = _ultrametric_clades([12, 12, 12, 12], rng)
    tree = parse_newick(newick)
    n = len(names)
    p = _prepare(tree, np.zeros(n), np.zeros(n), names, labels)
    pre = [tree.names[t] for t in tree.tips]      # tree_covariance rows: tips in pre-order
    pos = np.array([pre.index(s) for s in names])
    L = np.linalg.cholesky(tree_covariance(tree, lam_true)[np.ix_(pos, pos)])
    X = L @ rng.normal(size=(n, reps))
    Y = 0.75 * X + 0.5 * (L @ rng.normal(size=(n, reps)))
    out = {}
    for name, lam in (("phylo", lam_true), ("ordinary", 0.0)):
        gram, _, _ = gram_matrices(p.plan, _ols_columns(X, Y, p.codes, 4), [lam])
        r = _ols_stats(gram[0], float(n), 4)
        p_ols = stats.f.sf(r["f"], 3, r["df_resid"][None, :])
        a = _axis_stats(p, "sma", lam, X, Y)
        w = a["statistic"]
        out[name] = {"ols": np.mean(p_ols < 0.05, axis=0),
                     "sma_chi2": np.mean(stats.chi2.sf(w, 3) < 0.05, axis=0)}
        if name == "phylo" or boot_ordinary:
            boot = _bootstrap(p, "sma", lam, a, n_boot, rng)
            p_boot = (1 + np.sum(boot >= w[:, None, :], axis=1)) / (n_boot + 1)
            out[name]["sma"] = np.mean(p_boot <= 0.05 + 1e-12, axis=0)
    return out


class TestSize:
    @pytest.mark.parametrize("lam_true", [1.0, 0.5])
    def test_phylogenetic_tests_hold_their_size_and_ordinary_ones_do_not(self, lam_true):
        sizes = simulate_sizes(lam_true)
        # Monte Carlo: 2000 replicates, binomial SE sqrt(.05 .95/2000) = 0.0049; the
        # tolerance 0.015 is 3 SE.  OLS: exact GLS F tests at the true lambda.  SMA:
        # Monte Carlo tests (19 bootstrap draws per replicate) of level 0.05.
        assert_allclose(sizes["phylo"]["ols"], 0.05, atol=0.015)
        assert_allclose(sizes["phylo"]["sma"], 0.05, atol=0.015)
        # chi^2 would be liberal with 12 species per clade (measured in docs/phylogeny.md)
        assert np.all(sizes["phylo"]["sma_chi2"] > 0.06)
        # the ordinary tests of elevation and of the shift along the axis are inflated
        # by the clade structure (no true difference): rates stated in docs/phylogeny.md
        assert np.all(sizes["ordinary"]["ols"][1:] > 0.5)
        assert np.all(sizes["ordinary"]["sma_chi2"][1:] > 0.5)
