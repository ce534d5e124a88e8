"""Tests of scaling.stats.newick and scaling.stats.phylogeny (phylogenetic OLS/SMA/MA, Pagel's lambda)."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from scaling.errors import ConfigError, DataError
from scaling.stats.line_results import fit_line
from scaling.stats.lines import fit_moments
from scaling.stats.moments import Moments, group_moments
from scaling.stats.newick import parse_newick, read_newick
from scaling.stats.phylogeny import (PhyloPlan, dense_phylo_moments, fit_phylo, match_species,
                           normalise_name, pagel_lambda, phylo_loglik, phylo_moments,
                           phylo_pass, prune_tree, tree_covariance)

dendropy = pytest.importorskip("dendropy")


# --------------------------------------------------------------------------
# random trees (test data with a known truth; written as Newick text)


def random_newick(n, rng, *, ultrametric=False, polytomy=0.0, prefix="t"):
    """Random topology by joining random lineages (three at once with prob. ``polytomy``).

    Ultrametric: joins happen at increasing times and tips are at time 0.
    Otherwise branch lengths are independent exponentials (tips at unequal
    heights, as with fossil tips).
    """
    items = [(f"{prefix}{i}", 0.0) for i in range(n)]   # (text, time of its top node)
    t = 0.0
    while len(items) > 1:
        k = 3 if (len(items) >= 3 and rng.random() < polytomy) else 2
        idx = sorted(rng.choice(len(items), k, replace=False).tolist(), reverse=True)
        picked = [items[i] for i in idx]
        t += rng.exponential(1.0 / len(items) if ultrametric else 1.0)
        for i in idx:
            items[i] = items[-1]
            items.pop()
        if ultrametric:
            kids = ",".join(f"{s}:{t - tt:.17g}" for s, tt in picked)
        else:
            kids = ",".join(f"{s}:{rng.exponential() + 0.01:.17g}" for s, _ in picked)
        items.append((f"({kids})", t))
    return items[0][0] + ";"


def dendropy_covariance(text, names):
    """V_ij = (d(root,i) + d(root,j) - d(i,j)) / 2 from dendropy's patristic distances."""
    tree = dendropy.Tree.get(data=text, schema="newick", preserve_underscores=True)
    pdm = tree.phylogenetic_distance_matrix()
    leaves = {leaf.taxon.label: leaf for leaf in tree.leaf_node_iter()}
    nodes = [leaves[s] for s in names]
    root = np.array([nd.distance_from_root() for nd in nodes])
    n = len(nodes)
    d = np.zeros((n, n))
    for i in range(n):
        for j in range(i + 1, n):
            d[i, j] = d[j, i] = pdm.patristic_distance(nodes[i].taxon, nodes[j].taxon)
    return (root[:, None] + root[None, :] - d) / 2


def simulate_bm(v, n_rep, rng, *, slope=0.75, sd_x=1.0, sd_e=0.5):
    """Bivariate Brownian (X, Y) with covariance v, Y = slope X + e: (n, n_rep) each."""
    chol = np.linalg.cholesky(v)
    X = sd_x * chol @ rng.standard_normal((v.shape[0], n_rep))
    E = sd_e * chol @ rng.standard_normal((v.shape[0], n_rep))
    return X, slope * X + E


def lambda_cov(v, lam):
    out = lam * v
    out[np.diag_indices_from(out)] = np.diag(v)
    return out


# --------------------------------------------------------------------------


class TestParseNewick:
    def test_tip_heights_match_dendropy(self):
        rng = np.random.default_rng(1)
        text = random_newick(40, rng, polytomy=0.3)
        tree = parse_newick(text)
        names = tree.tip_names
        # reference: dendropy's distances from the root (library, another parser)
        v = dendropy_covariance(text, names)
        assert_allclose(np.diag(tree_covariance(tree)), np.diag(v), rtol=1e-12)

    def test_quoted_labels_comments_and_polytomy(self):
        tree = parse_newick("[a comment]('Homo sapiens':1,(B_b:1,C:2,'it''s':3)x:0.5):0.7;")
        assert tree.tip_names == ("Homo sapiens", "B_b", "C", "it's")
        # exact law: lengths as written; the root's own branch is ignored
        assert_allclose(tree.length, [0, 1, 0.5, 1, 2, 3])

    def test_read_newick_file(self, tmp_path):
        path = tmp_path / "t.nwk"
        path.write_text("('A;a':1,B:2)[x;y];\n(C:1,D:1);\n")
        # the first tree only; ';' inside quotes and comments does not end it
        assert read_newick(path).tip_names == ("A;a", "B")

    @pytest.mark.parametrize("text, match", [
        ("((A:1,B:2):1,C);", r"no branch length for tip 'C' at character 13"),
        ("((A,B),C);", r"no branch length for a node at character 1 .*needs branch lengths"),
        ("((A:1,B:-2):1,C:1);", r"negative branch length -2 at character 8"),
        ("((A:1,B:2):1,C:x);", r"branch length 'x' is not a number at character 15"),
        ("((A:1,B:2):1,C:1", r"unclosed '\(' .* at character 16"),
        ("(A:1,B:1));", r"unbalanced '\)' at character 9"),
        ("(A:1,B:1);x", r"text after the closing ';' at character 10"),
        ("(A:1,B:1)(C:1);", r"'\(' where ',' or '\)' was expected at character 9"),
        ("(A:1,B:1:2);", r"a second branch length at character 8"),
        ("(A:1,B:);", r"a branch length is missing after ':' at character 7"),
        ("(A:1 B:1);", r"unexpected label 'B' at character 5"),
        ("(A:1,B:inf);", r"not finite at character 7"),
        ("", r"no tree found"),
        (";", r"empty tree at character 0"),
        ("A;", r"single node"),
        ("(A:1,B:1)", r"does not end with ';' at character 9"),
        ("(A:1,'B:1);", r"cannot read \"'B:1\);\" at character 5"),
    ])
    def test_bad_trees_name_the_position(self, text, match):
        with pytest.raises(DataError, match=match):
            parse_newick(text)

    def test_unreadable_file(self, tmp_path):
        with pytest.raises(DataError, match="cannot be read"):
            read_newick(tmp_path / "missing.nwk")


class TestMatchSpecies:
    def test_underscores_spaces_and_drops(self):
        tree = parse_newick("((Mus_musculus:1,'Rattus rattus':1):1,(Homo_sapiens:2,Pan:2):0.5);")
        m = match_species([" Mus musculus", "Rattus_rattus", "Canis lupus", "Mus_musculus"], tree)
        # exact law: 3 distinct species, one without a tip; two tips without data
        assert m.species == ("Mus musculus", "Rattus rattus", "Canis lupus")
        assert m.missing_species == ("Canis lupus",)
        assert m.pruned_tips == ("Homo_sapiens", "Pan")
        assert normalise_name("  a__b ") == "a b"

    def test_duplicate_tip_is_an_error(self):
        with pytest.raises(DataError, match="two tips are named 'A b'"):
            match_species(["A b"], parse_newick("(A_b:1,'A b':1);"))

    def test_unnamed_tip_is_an_error(self):
        with pytest.raises(DataError, match="a tip has no name"):
            match_species(["A"], parse_newick("(A:1,:1);"))

    def test_empty_species_is_an_error(self):
        with pytest.raises(DataError, match="an empty species name"):
            match_species(["A", " "], parse_newick("(A:1,B:1);"))


class TestPruneTree:
    def test_path_lengths_kept_after_pruning(self):
        rng = np.random.default_rng(2)
        text = random_newick(30, rng, polytomy=0.3)
        tree = parse_newick(text)
        keep = tree.tips[rng.permutation(30)[:12]]
        pruned = prune_tree(tree, keep)
        names = pruned.tip_names
        # reference: dendropy covariance of the full tree, restricted to the kept
        # tips (the new root is their common ancestor, so subtract its height)
        v_full = dendropy_covariance(text, names)
        v_pruned = tree_covariance(pruned)
        assert_allclose(v_pruned, v_full - v_full.min(), rtol=1e-12, atol=1e-12)
        # no unary nodes remain
        assert np.all(np.bincount(pruned.parent[1:], minlength=pruned.n_nodes)[~pruned.is_tip] >= 2)

    def test_too_few_tips(self):
        tree = parse_newick("(A:1,B:1,C:1);")
        with pytest.raises(DataError, match="fewer than 2 tips have data"):
            prune_tree(tree, tree.tips[:1])


class TestPagelLambda:
    def test_offdiagonal_scaled_diagonal_kept(self):
        rng = np.random.default_rng(3)
        text = random_newick(15, rng)
        tree = parse_newick(text)
        v = dendropy_covariance(text, tree.tip_names)
        # Pagel (1999): V_lambda = lambda V off the diagonal, diag(V) kept
        assert_allclose(tree_covariance(pagel_lambda(tree, 0.3)), lambda_cov(v, 0.3),
                        rtol=1e-12, atol=1e-12)


class TestPhyloPass:
    @pytest.mark.parametrize("n, polytomy, ultrametric", [
        (5, 0.0, False), (17, 0.5, False), (60, 0.3, True), (200, 0.2, False), (500, 0.1, False),
    ])
    def test_linear_time_equals_dense(self, n, polytomy, ultrametric):
        rng = np.random.default_rng(n)
        tree = parse_newick(random_newick(n, rng, polytomy=polytomy, ultrametric=ultrametric))
        X = rng.normal(size=n)
        Y = 0.7 * X + rng.normal(size=n)
        for lam in (0.0, 0.37, 1.0):
            # internal consistency: O(n) pass against the n x n Cholesky path
            a = phylo_moments(tree, X, Y, lam)
            b = dense_phylo_moments(tree, X, Y, lam)
            for name in ("mean_x", "mean_y", "sxx", "syy", "sxy"):
                assert_allclose(getattr(a, name), getattr(b, name), rtol=1e-8, atol=1e-10)

    @pytest.mark.parametrize("method, reml", [("ols", False), ("sma", True), ("ma", False)])
    def test_lambda_fit_linear_equals_dense(self, method, reml):
        rng = np.random.default_rng(7)
        n = 120
        text = random_newick(n, rng, polytomy=0.2)
        tree = parse_newick(text)
        v = tree_covariance(tree)
        X, Y = simulate_bm(lambda_cov(v, 0.6), 1, rng)
        x, y = 10 ** X[:, 0], 10 ** Y[:, 0]
        f = fit_phylo(x, y, tree, tree.tip_names, method=method, reml=reml)
        g = fit_phylo(x, y, tree, tree.tip_names, method=method, reml=reml, reference=True)
        # internal consistency: same optimiser on both likelihood paths
        assert 0 < f.lam < 1
        assert_allclose(f.lam, g.lam, atol=1e-8)
        assert_allclose([f.slope, f.intercept, f.loglik, f.slope_ci.low, f.lam_ci.low,
                         f.lam_ci.high],
                        [g.slope, g.intercept, g.loglik, g.slope_ci.low, g.lam_ci.low,
                         g.lam_ci.high], rtol=1e-8)

    def test_grid_of_lambdas_and_replicates_in_one_pass(self):
        rng = np.random.default_rng(8)
        tree = parse_newick(random_newick(25, rng))
        plan = PhyloPlan.from_tree(tree)
        vals = rng.normal(size=(25, 3, 2))
        res = phylo_pass(plan, vals, [0.2, 0.9])
        one = phylo_pass(plan, vals[:, 1, :], [0.9])
        # internal consistency: batched pass equals the single pass
        assert_allclose(res.css[1, 1], one.css[0], rtol=1e-12)
        assert_allclose(phylo_loglik(res, 25, model="bivariate")[1, 1],
                        phylo_loglik(one, 25, model="bivariate")[0], rtol=1e-12)

    def test_zero_length_tip_is_an_error(self):
        with pytest.raises(DataError, match="tip 'B' has a branch of length zero"):
            PhyloPlan.from_tree(parse_newick("((A:1,B:0):1,C:2);"))

    def test_tips_must_be_given_once(self):
        tree = parse_newick("((A:1,B:1):1,C:2);")
        with pytest.raises(DataError, match="every tip exactly once"):
            PhyloPlan.from_tree(tree, tree.tips[[0, 0, 1]])

    def test_unknown_model(self):
        tree = parse_newick("((A:1,B:1):1,C:2);")
        res = phylo_pass(PhyloPlan.from_tree(tree), np.eye(3)[:, :2], [1.0])
        with pytest.raises(ConfigError, match="model must be 'regression' or 'bivariate'"):
            phylo_loglik(res, 3, model="x")


class TestFitPhylo:
    def test_pgls_equals_statsmodels_gls(self):
        sm = pytest.importorskip("statsmodels.api")
        rng = np.random.default_rng(11)
        n = 50
        text = random_newick(n, rng, polytomy=0.3)
        tree = parse_newick(text)
        names = list(tree.tip_names)
        v = dendropy_covariance(text, names)      # from dendropy, not from our code
        X, Y = simulate_bm(v, 1, rng)
        X, Y = X[:, 0], Y[:, 0]
        for lam in (1.0, 0.4):
            f = fit_phylo(X, Y, tree, names, method="ols", lam=lam, log_base=None)
            ref = sm.GLS(Y, sm.add_constant(X), sigma=lambda_cov(v, lam)).fit()
            # reference: statsmodels GLS given the tree covariance
            assert_allclose([f.intercept, f.slope], ref.params, rtol=1e-9)
            assert_allclose([f.intercept_se, f.slope_se], ref.bse, rtol=1e-9)
            lo, hi = ref.conf_int(0.05)[1]
            assert_allclose([f.slope_ci.low, f.slope_ci.high], [lo, hi], rtol=1e-9)
            assert_allclose(f.loglik, ref.llf, rtol=1e-9)
            # reference: statsmodels' t test of slope = 0.75 on n - 2 df
            ref_p = float(ref.t_test((np.array([[0.0, 1.0]]), np.array([0.75]))).pvalue)
            assert_allclose(f.test_slope(0.75).p_value, ref_p, rtol=1e-8)

    @pytest.mark.parametrize("method", ["ols", "sma", "ma"])
    def test_star_tree_gives_ordinary_fit(self, method):
        rng = np.random.default_rng(12)
        n = 30
        X = rng.normal(size=n)
        Y = 0.8 * X + 0.3 * rng.normal(size=n)
        names = [f"s{i}" for i in range(n)]
        ultra = parse_newick(random_newick(n, rng, ultrametric=True, prefix="s"))
        star = parse_newick("(" + ",".join(f"{s}:2.5" for s in names) + ");")
        ref = fit_line(10 ** X, 10 ** Y, method=method)
        for tree, lam in ((ultra, 0.0), (star, "ml")):
            f = fit_phylo(10 ** X, 10 ** Y, tree, names, method=method, lam=lam)
            # reference: ordinary fit (lambda = 0 on an ultrametric tree is V = h I)
            assert_allclose([f.slope, f.slope_ci.low, f.slope_ci.high, f.intercept,
                             f.intercept_ci.low, f.r],
                            [ref.slope, ref.slope_ci.low, ref.slope_ci.high, ref.intercept,
                             ref.intercept_ci.low, ref.r], rtol=1e-10)
            assert_allclose(f.test_slope(0.75).p_value, ref.test_slope(0.75).p_value,
                            rtol=1e-9)

    def test_pgls_slope_is_contrast_regression(self):
        rng = np.random.default_rng(13)
        n = 40
        text = random_newick(n, rng)                 # bifurcating, not ultrametric
        tree = parse_newick(text)
        X = rng.normal(size=n)
        Y = 0.6 * X + rng.normal(size=n)
        values = dict(zip(tree.tip_names, zip(X, Y)))
        # Felsenstein (1985) standardised contrasts, computed on dendropy's tree
        dt = dendropy.Tree.get(data=text, schema="newick", preserve_underscores=True)
        state, extra, cx, cy = {}, {}, [], []
        for nd in dt.postorder_node_iter():
            if nd.is_leaf():
                state[nd] = np.array(values[nd.taxon.label])
                extra[nd] = 0.0
                continue
            a, b = nd.child_nodes()
            la, lb = a.edge_length + extra[a], b.edge_length + extra[b]
            c = (state[a] - state[b]) / np.sqrt(la + lb)
            cx.append(c[0])
            cy.append(c[1])
            state[nd] = (state[a] / la + state[b] / lb) / (1 / la + 1 / lb)
            extra[nd] = la * lb / (la + lb)
        cx, cy = np.array(cx), np.array(cy)
        f = fit_phylo(X, Y, tree, tree.tip_names, method="ols", lam=1.0, log_base=None)
        # Garland & Ives (2000): PGLS slope = regression through the origin of contrasts
        assert_allclose(f.slope, np.sum(cx * cy) / np.sum(cx * cx), rtol=1e-10)

    def test_drops_and_prunes_are_recorded(self):
        tree = parse_newick("(((A:1,B:1):1,(C:1,D:1):1):1,(E:2,(F:1,G:1):1):1);")
        sp = ["A", "A", "B", "C", "D", "E", "Zed"]
        x = [1.0, 3.0, 2, 5, 7, 11, 13]
        y = [2.0, 4.0, 3, 7, 9, 15, 17]
        f = fit_phylo(x, y, tree, sp, method="sma", lam=1.0)
        assert f.n == 5 and f.missing_species == ("Zed",) and f.pruned_tips == ("F", "G")
        assert f.to_record()["lambda"] == 1.0 and np.isnan(f.lam_ci.low)
        assert "phylogenetic SMA" in f.summary()
        assert f.line_fit().slope == f.slope

    @pytest.mark.parametrize("kwargs, error, match", [
        (dict(method="deming"), ConfigError, "method must be one of ols, sma, ma"),
        (dict(lam="reml"), ConfigError, "lam must be 'ml' or a number"),
        (dict(lam=1.5), ConfigError, "lam must be 'ml' or a number"),
        (dict(species=["A", "B", "X", "Y"]), DataError, "only 2 species match a tip .*X, Y"),
        (dict(species=["A", "B"]), DataError, "species has 2 entries but x and y have 4"),
        (dict(tree=42), ConfigError, "tree must be a Tree or Newick text"),
        (dict(x=[1, 2, -3, 4]), DataError, "must be positive"),
    ])
    def test_bad_input(self, kwargs, error, match):
        args = dict(x=[1.0, 2, 3, 4], y=[2.0, 3, 5, 4], tree="((A:1,B:1):1,(C:1,D:1):1);",
                    species=["A", "B", "C", "D"])
        args.update(kwargs)
        x, y, tree, sp = args.pop("x"), args.pop("y"), args.pop("tree"), args.pop("species")
        with pytest.raises(error, match=match):
            fit_phylo(x, y, tree, sp, **args)

    def test_bad_exponent(self):
        f = fit_phylo([1.0, 2, 3, 4], [2.0, 3, 5, 4], "((A:1,B:1):1,(C:1,D:1):1);", "ABCD",
                      lam=1.0)
        with pytest.raises(ConfigError, match="exponent must be a number"):
            f.test_slope("3/4")


def _moments_at(res, n, lam_index, reps):
    """Moments of replicate ``reps`` at grid index ``lam_index`` of a batched pass."""
    scale = n / res.sum_w[lam_index]
    return Moments(n=np.full(np.shape(reps), float(n)), mean_x=res.mean[lam_index, reps, 0],
                   mean_y=res.mean[lam_index, reps, 1],
                   **{k: res.css[lam_index, reps, i, j] * scale
                      for k, i, j in (("sxx", 0, 0), ("syy", 1, 1), ("sxy", 0, 1))})


@pytest.mark.slow
class TestSimulation:
    """Seeded Monte Carlo on one random ultrametric tree, replicates as one batch.

    Truth (invented, known): bivariate Brownian motion under Pagel's
    lambda = 0.5 on a 128-tip tree; X with rate 1, Y = 0.75 X + e, e
    Brownian with rate 0.25, so the rate matrix is R = [[1, 0.75],
    [0.75, 0.8125]]: OLS slope 0.75, SMA slope sqrt(0.8125), MA slope the
    major axis of R.  Intervals at the true lambda (2000 replicates, one
    pass); lambda estimated on a grid of step 0.02 (500 replicates x 51
    lambdas, one pass), the ML grid point of the PGLS residual likelihood.
    """

    N_TIPS, N_REP, N_LAM_REP, TRUE_LAM, SLOPE = 128, 2000, 500, 0.5, 0.75
    R = np.array([[1.0, 0.75], [0.75, 0.8125]])

    @pytest.fixture(scope="class")
    @classmethod
    def sim(cls):
        rng = np.random.default_rng(20261202)
        tree = parse_newick(random_newick(cls.N_TIPS, rng, ultrametric=True))
        v = tree_covariance(tree)
        X, Y = simulate_bm(lambda_cov(v, cls.TRUE_LAM), cls.N_REP, rng, slope=cls.SLOPE)
        plan = PhyloPlan.from_tree(tree)
        data = np.stack([X, Y], axis=-1)                               # (n, B, 2)
        reps = np.arange(cls.N_REP)
        at_truth = _moments_at(phylo_pass(plan, data, [cls.TRUE_LAM]), cls.N_TIPS, 0, reps)
        grid = np.linspace(0, 1, 51)
        sub = np.arange(cls.N_LAM_REP)
        res = phylo_pass(plan, data[:, sub], grid)
        best = np.argmax(phylo_loglik(res, cls.N_TIPS, model="regression"), axis=0)
        estimated = _moments_at(res, cls.N_TIPS, best, sub)
        ordinary = group_moments(X.T.ravel(), Y.T.ravel(), np.repeat(reps, cls.N_TIPS))
        return dict(lam=grid[best], truth=at_truth, estimated=estimated, ordinary=ordinary)

    def _true_slope(self, method):
        r = self.R
        if method == "ols":
            return r[0, 1] / r[0, 0]
        if method == "sma":
            return np.sqrt(r[1, 1] / r[0, 0])
        w, vec = np.linalg.eigh(r)
        return vec[1, 1] / vec[0, 1]

    @staticmethod
    def _coverage(fit, truth):
        return np.mean((fit["slope_low"] <= truth) & (truth <= fit["slope_high"]))

    def test_slope_unbiased(self, sim):
        b = fit_moments(sim["estimated"], "ols")["slope"]
        # known truth 0.75; tolerance 4 Monte Carlo standard errors
        assert abs(b.mean() - self.SLOPE) < 4 * b.std() / np.sqrt(b.size)

    def test_lambda_recovered(self, sim):
        lam = sim["lam"]
        # known truth 0.5; stated spread for 128 tips (measured: median 0.44,
        # 10-90% range 0.22-0.64, SD 0.17; ML lambda is biased low in small
        # trees, docs/phylogeny.md): median within 0.1 of the truth and the
        # central 80% of estimates inside [0.15, 0.85], containing the truth
        assert abs(np.median(lam) - self.TRUE_LAM) < 0.1
        lo, hi = np.quantile(lam, [0.1, 0.9])
        assert 0.15 <= lo < self.TRUE_LAM < hi <= 0.85

    @pytest.mark.parametrize("method", ["ols", "sma", "ma"])
    def test_intervals_cover_at_true_lambda(self, sim, method):
        cover = self._coverage(fit_moments(sim["truth"], method), self._true_slope(method))
        # nominal 0.95 (exact t / F tests under the model); tolerance 0.02, about 4
        # binomial SEs at 2000 replicates (sqrt(0.95 * 0.05 / 2000) = 0.0049)
        assert abs(cover - 0.95) <= 0.02

    def test_pgls_interval_with_estimated_lambda(self, sim):
        cover = self._coverage(fit_moments(sim["estimated"], "ols"), self.SLOPE)
        # nominal 0.95; lambda estimated (not accounted for in the t interval):
        # 500 replicates, tolerance 0.03 (about 3 Monte Carlo SE)
        assert abs(cover - 0.95) <= 0.03

    def test_ordinary_interval_undercovers(self, sim):
        cover = self._coverage(fit_moments(sim["ordinary"], "ols"), self.SLOPE)
        # measured (docs/phylogeny.md): ordinary OLS ignores the shared history
        # and its 95% interval covers clearly less often
        assert cover < 0.90


# --------------------------------------------------------------------------
# the O(n) likelihoods against dense multivariate-normal likelihoods


def _mvn_logpdf(z, mean, cov):
    from scipy.stats import multivariate_normal
    return float(multivariate_normal.logpdf(z, mean=mean, cov=cov))


def _restricted(z, design, cov):
    """Restricted (REML) log-likelihood of z ~ N(design beta, cov), written from its formula.

    Harville (1977, J. Am. Stat. Assoc. 72:320, the restricted likelihood of
    the error contrasts): l_R = -1/2 [(n - p) log 2pi + log|cov| + log|X'cov^-1 X|
    + (z - X beta_hat)' cov^-1 (z - X beta_hat)], beta_hat the GLS estimate;
    that is the full Gaussian log-density at beta_hat (scipy) plus
    p/2 log 2pi - 1/2 log|X'cov^-1 X|.  The constant +1/2 log|X'X| of the
    error-contrast form (Harville 1974, Biometrika 61:383) is left out, as
    the package's docstring says it does.
    """
    ci_x = np.linalg.solve(cov, design)
    xtcx = design.T @ ci_x
    beta = np.linalg.solve(xtcx, ci_x.T @ z)
    p = design.shape[1]
    return (_mvn_logpdf(z, design @ beta, cov) + 0.5 * p * np.log(2 * np.pi)
            - 0.5 * np.linalg.slogdet(xtcx)[1])


def _gls_profile(z, design, v, *, reml):
    """max over s^2 > 0 of the (restricted) log-likelihood of z ~ N(X beta, s^2 v),
    by a bounded numerical search on log s^2 (no closed form used)."""
    from scipy import optimize

    def neg(log_s2):
        cov = np.exp(log_s2) * v
        if reml:
            return -_restricted(z, design, cov)
        ci_x = np.linalg.solve(cov, design)
        beta = np.linalg.solve(design.T @ ci_x, ci_x.T @ z)
        return -_mvn_logpdf(z, design @ beta, cov)

    r = optimize.minimize_scalar(neg, bounds=(-15, 10), method="bounded",
                                 options={"xatol": 1e-10})
    return -float(r.fun)


def _bivariate_profile(X, Y, v, *, reml):
    """max over the 2x2 rate matrix R of the (restricted) log-likelihood of the
    bivariate Brownian model vec[X, Y] ~ N(vec(1 mu'), R kron v), free means.

    Dense 2n x 2n covariance, scipy's multivariate_normal; R is searched
    numerically through its Cholesky factor (Nelder-Mead, then BFGS), so no
    closed form of the profile enters.  Design of the means: I_2 kron 1.
    """
    from scipy import optimize
    n = X.size
    z = np.concatenate([X, Y])
    design = np.kron(np.eye(2), np.ones((n, 1)))

    def cov_of(par):
        c = np.array([[np.exp(par[0]), 0.0], [par[1], np.exp(par[2])]])
        return np.kron(c @ c.T, v)

    def neg(par):
        cov = cov_of(par)
        if reml:
            return -_restricted(z, design, cov)
        ci_x = np.linalg.solve(cov, design)
        beta = np.linalg.solve(design.T @ ci_x, ci_x.T @ z)
        return -_mvn_logpdf(z, design @ beta, cov)

    c0 = np.linalg.cholesky(np.cov(X, Y))
    start = np.array([np.log(c0[0, 0]), c0[1, 0], np.log(c0[1, 1])])
    r = optimize.minimize(neg, start, method="Nelder-Mead",
                          options={"xatol": 1e-10, "fatol": 1e-13, "maxiter": 4000})
    r = optimize.minimize(neg, r.x, method="BFGS", options={"gtol": 1e-9})
    return -float(r.fun)


class TestLikelihoodsAgainstDenseNormal:
    """fit_phylo's log-likelihoods (computed in O(n) from contrasts) against dense
    multivariate-normal likelihoods with V(lambda) built from the tree by dendropy.

    V comes from dendropy's patristic distances (another parser, another
    algorithm), V(lambda) = lambda V + (1 - lambda) diag(V) (Pagel 1999,
    Nature 401:877); every likelihood is scipy.stats.multivariate_normal.logpdf
    maximised numerically over its variance parameters (reference library;
    REML from Harville's 1977 formula, see ``_restricted``).
    """

    N = 14
    LAMS = (0.0, 0.35, 1.0)

    @pytest.fixture(scope="class")
    @classmethod
    def data(cls):
        rng = np.random.default_rng(31)
        text = random_newick(cls.N, rng, polytomy=0.3)       # unequal tip heights
        tree = parse_newick(text)
        names = list(tree.tip_names)
        v = dendropy_covariance(text, names)
        X, Y = simulate_bm(lambda_cov(v, 0.6), 1, rng)
        return tree, names, v, X[:, 0], Y[:, 0]

    @pytest.mark.parametrize("reml", [False, True])
    def test_pgls_loglik(self, data, reml):
        tree, names, v, X, Y = data
        design = np.column_stack([np.ones(self.N), X])
        for lam in self.LAMS:
            f = fit_phylo(X, Y, tree, names, method="ols", lam=lam, reml=reml, log_base=None)
            # reference library: scipy multivariate_normal, GLS profile over s^2
            # (ML), Harville (1977) restricted likelihood (REML), dense V(lambda)
            ref = _gls_profile(Y, design, lambda_cov(v, lam), reml=reml)
            assert_allclose(f.loglik, ref, rtol=1e-8)

    def test_pgls_ml_loglik_is_statsmodels_gls(self, data):
        sm = pytest.importorskip("statsmodels.api")
        tree, names, v, X, Y = data
        for lam in self.LAMS:
            f = fit_phylo(X, Y, tree, names, method="ols", lam=lam, log_base=None)
            ref = sm.GLS(Y, sm.add_constant(X), sigma=lambda_cov(v, lam)).fit()
            # reference library: statsmodels GLS log-likelihood with sigma = V(lambda)
            assert_allclose(f.loglik, ref.llf, rtol=1e-10)

    @pytest.mark.parametrize("reml", [False, True])
    def test_bivariate_loglik_of_sma_and_ma(self, data, reml):
        tree, names, v, X, Y = data
        for lam in self.LAMS:
            ref = _bivariate_profile(X, Y, lambda_cov(v, lam), reml=reml)
            for method in ("sma", "ma"):
                f = fit_phylo(X, Y, tree, names, method=method, lam=lam, reml=reml,
                              log_base=None)
                # reference library: scipy multivariate_normal of vec[X, Y] with
                # covariance R kron V(lambda), maximised over R numerically (ML), or
                # Harville's (1977) restricted likelihood maximised the same way (REML)
                assert_allclose(f.loglik, ref, rtol=1e-8)

    @pytest.mark.parametrize("method, reml", [("ols", True), ("sma", False), ("ma", True)])
    def test_estimated_lambda_maximises_the_dense_likelihood(self, data, method, reml):
        from scipy import optimize
        tree, names, v, X, Y = data
        design = np.column_stack([np.ones(self.N), X])

        def dense(lam):
            if method == "ols":
                return _gls_profile(Y, design, lambda_cov(v, lam), reml=reml)
            # closed-form R_hat inside (the numerical search above checks it at fixed
            # lambda): R_hat = S / n (ML) or S / (n - 1) (REML), S the GLS sums
            vl = lambda_cov(v, lam)
            z = np.column_stack([X, Y])
            vi1 = np.linalg.solve(vl, np.ones(self.N))
            mu = vi1 @ z / vi1.sum()
            s = (z - mu).T @ np.linalg.solve(vl, z - mu)
            r_hat = s / (self.N - 1 if reml else self.N)
            zz, cov = np.concatenate([X, Y]), np.kron(r_hat, vl)
            des = np.kron(np.eye(2), np.ones((self.N, 1)))
            if reml:
                return _restricted(zz, des, cov)
            return _mvn_logpdf(zz, np.repeat(mu, self.N), cov)

        f = fit_phylo(X, Y, tree, names, method=method, reml=reml, log_base=None)
        opt = optimize.minimize_scalar(lambda t: -dense(t), bounds=(0, 1), method="bounded",
                                       options={"xatol": 1e-9})
        best = max([(float(-opt.fun), float(opt.x)), (dense(0.0), 0.0), (dense(1.0), 1.0)])
        # reference library: scipy's bounded search on the dense likelihood of lambda
        assert_allclose(f.lam, best[1], atol=1e-5)
        assert_allclose(f.loglik, best[0], rtol=1e-8)


# --------------------------------------------------------------------------
# PGLS slope interval with lambda estimated: profile likelihood over lambda


def _dense_profile_deviance(v, X, Y, b0, l_max):
    """2 (l_max - max over lambda, a, s^2 of the normal log-likelihood of Y - b0 X),
    by scipy.stats.multivariate_normal and a bounded scalar search over lambda."""
    from scipy import optimize, stats as st
    r = Y - b0 * X
    n = r.size

    def neg(lam):
        c = lambda_cov(v, lam)
        ci = np.linalg.inv(c)
        one = np.ones(n)
        a = one @ ci @ r / (one @ ci @ one)
        s2 = (r - a) @ ci @ (r - a) / n
        return -st.multivariate_normal(np.full(n, a), s2 * c).logpdf(r)

    best = optimize.minimize_scalar(neg, bounds=(0.0, 1.0), method="bounded",
                                    options={"xatol": 1e-9})
    ends = min(neg(0.0), neg(1.0))
    return 2 * (l_max + min(best.fun, ends))


class TestSlopeProfileOverLambda:
    N = 30

    @pytest.fixture(scope="class")
    @classmethod
    def data(cls):
        rng = np.random.default_rng(404)
        text = random_newick(cls.N, rng, ultrametric=True)
        tree = parse_newick(text)
        v = tree_covariance(tree)
        X, Y = simulate_bm(lambda_cov(v, 0.6), 1, rng)
        names = [tree.names[t] for t in tree.tips]
        return dict(tree=tree, v=v, X=X[:, 0], Y=Y[:, 0], names=names)

    def test_bounds_equal_dense_profile_likelihood(self, data):
        # reference: the profile likelihood maximised over lambda by scipy's bounded search
        # on scipy.stats.multivariate_normal (Pawitan 2001, In All Likelihood, sec. 3.4),
        # with the cut n log(1 + t^2/(n - 2)) of the module docstring; at both bounds
        # the dense deviance equals the cut (2e-5 absolute, the grid refinement; measured 4e-6)
        from scipy import stats as st
        fit = fit_phylo(data["X"], data["Y"], data["tree"], data["names"], log_base=None)
        n = self.N
        cut = n * np.log1p(st.t.ppf(0.975, n - 2) ** 2 / (n - 2))
        l_max = fit.loglik
        for b in (fit.slope_ci.low, fit.slope_ci.high):
            assert_allclose(_dense_profile_deviance(data["v"], data["X"], data["Y"], b, l_max),
                            cut, atol=2e-5)

    def test_interval_contains_the_t_interval_at_lambda_hat(self, data):
        # internal consistency: maximising over lambda can only raise the profile, so the
        # ML profile interval contains the t interval at lambda-hat (lambda held fixed)
        fit = fit_phylo(data["X"], data["Y"], data["tree"], data["names"], log_base=None)
        fixed = fit_phylo(data["X"], data["Y"], data["tree"], data["names"], log_base=None,
                          lam=fit.lam)
        assert fit.slope_ci.low <= fixed.slope_ci.low + 1e-9
        assert fit.slope_ci.high >= fixed.slope_ci.high - 1e-9
        assert fixed.slope_profile is None
        assert_allclose(fixed.slope, fit.slope, rtol=1e-12)

    def test_slope_test_inverts_the_interval(self, data):
        # internal consistency: p = 1 - confidence at both bounds, p = 1 at the estimate
        fit = fit_phylo(data["X"], data["Y"], data["tree"], data["names"], log_base=None)
        for b in (fit.slope_ci.low, fit.slope_ci.high):
            assert_allclose(fit.test_slope(float(b)).p_value, 0.05, atol=1e-6)
        assert fit.test_slope(fit.slope).p_value > 0.999
        assert fit.test_slope(fit.slope_ci.high + 0.01).p_value < 0.05

    def test_fixed_lambda_profile_is_the_t_interval(self, data):
        # exact law: with lambda held at one value D = n log(1 + t^2/(n - 2)), so the
        # profile bounds on a one-value grid equal the PGLS t interval
        from scaling.stats.phylo_profile import profile_interval, slope_profile
        from scaling.stats.phylogeny import phylo_pass
        fixed = fit_phylo(data["X"], data["Y"], data["tree"], data["names"], log_base=None,
                          lam=0.4)
        plan = PhyloPlan.from_tree(data["tree"])
        res = phylo_pass(plan, np.column_stack([data["X"], data["Y"]]), [0.4, 0.4, 0.4])
        for reml in (False, True):
            prof = slope_profile(res.logdet, res.sum_w, res.css, self.N, reml=reml)
            lo, hi = profile_interval(prof, fixed.slope, fixed.slope_se, 0.95)
            assert_allclose([lo, hi], [fixed.slope_ci.low, fixed.slope_ci.high], rtol=1e-10)

    def test_coverage_with_lambda_estimated_at_64_tips(self):
        # simulation with a known truth (slope 0.75, lambda 0.5, 64-tip random ultrametric
        # tree), 6000 replicates in batched passes.  Measured: profile 0.951, t interval at
        # lambda-hat 0.938 (other trees: 0.942-0.950 against 0.934-0.938).  The binomial SE
        # of a 0.95 coverage at 6000 replicates is 0.0028: the profile must reach
        # 0.94 - 2 SE and beat the interval that treats lambda as known
        from scipy import stats as st
        from scaling.stats.phylo_profile import (PROFILE_GRID, profile_cut, profile_deviance,
                                                 slope_profile)
        from scaling.stats.phylogeny import phylo_pass
        n, reps = 64, 6000
        rng = np.random.default_rng(7)
        tree = parse_newick(random_newick(n, rng, ultrametric=True))
        X, Y = simulate_bm(lambda_cov(tree_covariance(tree), 0.5), reps, rng, slope=0.75)
        plan = PhyloPlan.from_tree(tree)
        data = np.stack([X, Y], axis=-1)
        prof_cov, t_cov = [], []
        for s in range(0, reps, 500):
            res = phylo_pass(plan, data[:, s:s + 500], PROFILE_GRID)
            prof = slope_profile(res.logdet, res.sum_w, res.css, n)
            prof_cov.append(profile_deviance(prof, 0.75) <= profile_cut(n, 0.95))
            ll = phylo_loglik(res, n, model="regression")
            c = res.css[np.argmax(ll, axis=0), np.arange(ll.shape[1])]
            b = c[:, 0, 1] / c[:, 0, 0]
            se = np.sqrt((c[:, 1, 1] - b * c[:, 0, 1]) / (n - 2) / c[:, 0, 0])
            t_cov.append(np.abs(b - 0.75) <= st.t.ppf(0.975, n - 2) * se)
        profile, known = np.mean(np.concatenate(prof_cov)), np.mean(np.concatenate(t_cov))
        assert profile >= 0.94 - 2 * 0.0028, profile
        assert profile > known, (profile, known)
