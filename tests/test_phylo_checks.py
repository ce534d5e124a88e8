"""Checks of the phylogenetic model the Answer reports (scaling.stats.phylo_checks, and
scaling.run.phylo_checks through a run).

References: scipy.stats (shapiro), statsmodels (het_breuschpagan; GLS with the
Pagel-lambda covariance built from dendropy's patristic distances,
V_ij = (h_i + h_j - d_ij)/2, h the root-to-tip distances), the whitening root
taken by scipy.linalg.sqrtm (another algorithm than ours), the ordinary checks of
scaling.stats.residual_checks (which V = I must reproduce), and Monte Carlo size
with a known truth.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import linalg, stats

from scaling.stats.line_results import fit_line
from scaling.stats.newick import parse_newick
from scaling.stats.phylo_checks import (curvature_lambda, gls_quadratic_t, phylo_model_checks,
                                        whitening_root)
from scaling.stats.phylogeny import PhyloPlan
from scaling.stats.phylogeny import tree_covariance
from scaling.stats.residual_checks import diagnose, diagnose_parallel, quadratic_t

dendropy = pytest.importorskip("dendropy")
sm = pytest.importorskip("statsmodels.api")

from helpers_trees import (clade_tree as _clade_tree, dendropy_cov as _dendropy_cov,  # noqa: E402
                           random_newick as _random_newick)
from statsmodels.stats.diagnostic import het_breuschpagan  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
PHYSIOLOGY = ROOT / "configs" / "physiology.yaml"


# --------------------------------------------------------------------------
# trees and data (simulations with a known truth)


def _our_cov(newick, names, lam=1.0):
    t = parse_newick(newick)
    index = {t.names[k]: i for i, k in enumerate(t.tips)}
    order = [index[s] for s in names]
    return tree_covariance(t, lam)[np.ix_(order, order)]


def _design(X, labels=None):
    if labels is None:
        return np.column_stack([np.ones(X.size), X])
    groups = np.unique(labels)
    return np.column_stack([(labels[:, None] == groups[None, :]).astype(float), X])


def _root(V):
    """V^-1/2 by scipy's matrix square root (Schur method), not our eigen-decomposition."""
    return np.real(linalg.sqrtm(np.linalg.inv(V)))


# --------------------------------------------------------------------------


class TestAgainstReferences:
    @pytest.mark.parametrize("grouped", [False, True])
    @pytest.mark.parametrize("seed", [1, 2])
    def test_gls_checks_equal_scipy_and_statsmodels(self, seed, grouped):
        rng = np.random.default_rng(seed)
        n = 36
        names = [f"sp{i}" for i in range(n)]
        newick = _random_newick(names, rng)
        X = rng.normal(1, 0.7, n)
        labels = rng.choice(["a", "b", "c"], size=n) if grouped else None
        Y = 0.75 * X + 0.3 * rng.normal(size=n)
        V = _dendropy_cov(newick, names, 0.7)
        # ours: the covariance from our tree reader; the reference: dendropy's
        got = phylo_model_checks(_our_cov(newick, names, 0.7), X, Y, groups=labels)
        Z = _design(X, labels)
        gls = sm.GLS(Y, Z, sigma=V).fit()            # statsmodels GLS, dendropy covariance
        S = _root(V)
        we = S @ (Y - Z @ gls.params)
        assert_allclose(got.whitened_residuals, we, rtol=1e-8, atol=1e-10)
        d = got.diagnostics
        sw = stats.shapiro(we)                        # scipy.stats.shapiro on the same data
        assert_allclose([d.check("normality").statistic, d.check("normality").p_value],
                        [sw.statistic, sw.pvalue], rtol=1e-8)
        lm, p_lm, _, _ = het_breuschpagan(we, np.column_stack([np.ones(n), S @ X]))
        assert_allclose([d.check("constant_variance").statistic,
                         d.check("constant_variance").p_value], [lm, p_lm], rtol=1e-8)
        quad = sm.GLS(Y, np.column_stack([Z, (X - X.mean()) ** 2]), sigma=V).fit()
        assert_allclose([d.check("curvature").statistic, d.check("curvature").p_value],
                        [quad.tvalues[-1], quad.pvalues[-1]], rtol=1e-8)
        assert d.check("curvature").df == quad.df_resid

    def test_deletion_diagnostics_equal_statsmodels_refits(self):
        rng = np.random.default_rng(7)
        newick, names, labels = _clade_tree([8, 9, 10], rng)
        n = len(names)
        X = rng.normal(1, 0.7, n)
        Y = 0.75 * X + 0.2 * rng.normal(size=n) + (labels == "clade1") * 0.4
        V = _dendropy_cov(newick, names, 0.8)
        got = phylo_model_checks(_our_cov(newick, names, 0.8), X, Y, groups=labels)
        Z = _design(X, labels)
        p = Z.shape[1]
        full = sm.GLS(Y, Z, sigma=V).fit()
        A = Z.T @ np.linalg.inv(V) @ Z
        for i in (0, 5, n - 1):
            keep = np.arange(n) != i
            # statsmodels GLS without species i: Cook's distance by its definition
            # (Cook 1977), the change of beta in the metric Z'V^-1 Z over p s^2
            less = sm.GLS(Y[keep], Z[keep], sigma=V[np.ix_(keep, keep)]).fit()
            dif = full.params - less.params
            assert_allclose(got.cooks[i], dif @ A @ dif / (p * full.scale), rtol=1e-8)
            # statsmodels GLS with species i's indicator: its t is the externally
            # studentised residual, t = r sqrt((n-p-1)/(n-p-r^2)) of the internal one r
            # (Belsley, Kuh & Welsch 1980, eq. 2.10)
            u = np.zeros(n)
            u[i] = 1
            t = sm.GLS(Y, np.column_stack([Z, u]), sigma=V).fit().tvalues[-1]
            r = got.standardised[i]
            assert_allclose(r * np.sqrt((n - p - 1) / (n - p - r * r)), t, rtol=1e-8)

    def test_sma_residuals_are_the_stated_lines_whitened(self):
        rng = np.random.default_rng(11)
        newick, names, labels = _clade_tree([10, 10, 10], rng)
        n = len(names)
        X = rng.normal(1, 0.7, n)
        Y = 0.75 * X + 0.2 * rng.normal(size=n)
        V = _dendropy_cov(newick, names, 1.0)
        b = 0.74
        got = phylo_model_checks(V, X, Y, groups=labels, method="sma", slope=b)
        D = _design(X, labels)[:, :-1]
        # elevations: statsmodels GLS of Y - bX on the group indicators (the GLS group means)
        a = sm.GLS(Y - b * X, D, sigma=V).fit().params
        we = _root(V) @ (Y - b * X - D @ a)
        assert_allclose(got.whitened_residuals, we, rtol=1e-8, atol=1e-10)
        assert_allclose(got.diagnostics.check("normality").statistic,
                        stats.shapiro(we).statistic, rtol=1e-8)   # scipy.stats.shapiro
        ma = phylo_model_checks(V, X, Y, groups=labels, method="ma", slope=b)
        # MA: the perpendicular residual, (vertical)/sqrt(1 + b^2) (exact law)
        assert_allclose(ma.whitened_residuals, we / np.sqrt(1 + b * b), rtol=1e-8)

    def test_star_tree_gives_the_ordinary_checks(self):
        # internal consistency: with V = I the whitening is the identity
        rng = np.random.default_rng(3)
        n = 30
        X = rng.normal(1, 0.7, n)
        Y = 0.75 * X + 0.2 * rng.normal(size=n)
        labels = np.repeat(["a", "b", "c"], 10)
        one = phylo_model_checks(np.eye(n), X, Y)
        ordinary = diagnose(fit_line(X, Y, method="ols", log_base=None), X, Y)
        for name in ("normality", "constant_variance", "curvature"):
            assert_allclose(one.diagnostics.check(name).statistic,
                            ordinary.check(name).statistic, rtol=1e-8)
        assert_allclose(one.cooks, ordinary.cooks_distance, rtol=1e-8)
        par = phylo_model_checks(np.eye(n) * 2.5, X, Y, groups=labels, method="sma",
                                 slope=0.7)
        ordinary = diagnose_parallel(0.7, X, Y, labels, method="sma")
        for name in ("normality", "constant_variance", "curvature"):
            assert_allclose(par.diagnostics.check(name).statistic,
                            ordinary.check(name).statistic, rtol=1e-8)

    def test_whitening_root_is_a_square_root_of_the_inverse(self):
        rng = np.random.default_rng(4)
        names = [f"sp{i}" for i in range(20)]
        V = _dendropy_cov(_random_newick(names, rng), names, 0.5)
        S = whitening_root(V)
        assert_allclose(S @ V @ S, np.eye(20), atol=1e-9)   # exact law: S V S = I
        assert_allclose(S, S.T, atol=1e-12)


class TestCurvatureSize:
    def test_false_alarm_rate_on_clade_structured_brownian_data(self):
        """Monte Carlo, 4000 replicates in one array pass, seed 20: X and the residuals
        Brownian on a tree of four clades of 12 (lambda = 1), clade elevations shifted,
        no curvature.  The phylogenetic curvature test (lambda at its true value) holds
        its size: 0.05 +- 0.015 (4.3 binomial SEs, SE = 0.0034).  Observed with this seed:
        phylogenetic 0.0495; the ordinary pooled quadratic test on the same data 0.350 and
        the ordinary within-clade test 0.274 (docs/phylogeny.md)."""
        rng = np.random.default_rng(20)
        newick, names, labels = _clade_tree([12, 12, 12, 12], rng)
        V = _our_cov(newick, names)
        L = np.linalg.cholesky(V)
        R = 4000
        shift = np.array([0.0, 0.4, -0.3, 0.6])[np.unique(labels, return_inverse=True)[1]]
        X = 1.0 + rng.normal(size=(R, V.shape[0])) @ L.T
        Y = 0.75 * X + shift + 0.3 * rng.normal(size=(R, V.shape[0])) @ L.T
        codes = np.unique(labels, return_inverse=True)[1]
        phylo = gls_quadratic_t(whitening_root(V), X, Y, codes)["p_value"]
        rate = float(np.mean(phylo < 0.05))
        assert abs(rate - 0.05) <= 0.015
        pooled = float(np.mean(quadratic_t(X, Y)["p_value"] < 0.05))
        assert pooled > 0.05 + 0.015          # the ordinary pooled test is inflated here

    @pytest.mark.parametrize("lam_true, observed", [(1.0, 0.0523), (0.5, 0.0500)])
    def test_false_alarm_rate_with_lambda_estimated_by_reml(self, lam_true, observed):
        """Monte Carlo, 3000 replicates in one array pass per lambda value, seed 21: as
        above with the residuals at Pagel's lambda ``lam_true``; lambda estimated per
        replicate by REML under the straight-line (parallel-lines) design on the grid
        0, 0.1, ..., 1 (the run refines it, :func:`curvature_lambda`), the curvature test
        at that lambda: 0.05 +- 0.015 (3.8 binomial SEs, SE = 0.004).  Observed with this
        seed: ``observed``.  With the ML lambda of the full group model instead (the
        lambda of the answer's group tests) this design gave 0.081 and 0.090 (4000
        replicates, observed once): liberal, which is why the curvature test
        re-estimates lambda (docs/phylogeny.md)."""
        rng = np.random.default_rng(21)
        newick, names, labels = _clade_tree([12, 12, 12, 12], rng)
        codes = np.unique(labels, return_inverse=True)[1]
        V1 = _our_cov(newick, names)
        n, R = V1.shape[0], 3000
        Vt = lam_true * V1 + (1 - lam_true) * np.diag(np.diag(V1))
        X = 1.0 + rng.normal(size=(R, n)) @ np.linalg.cholesky(V1).T
        Y = (0.75 * X + np.array([0.0, 0.4, -0.3, 0.6])[codes]
             + 0.3 * rng.normal(size=(R, n)) @ np.linalg.cholesky(Vt).T)
        D = (codes[:, None] == np.arange(4)).astype(float)
        Z = np.concatenate([np.broadcast_to(D, (R, n, 4)), X[..., None]], axis=-1)
        m = n - Z.shape[-1]
        ll, p = [], []
        for lam in np.linspace(0, 1, 11):
            V = lam * V1 + (1 - lam) * np.diag(np.diag(V1))
            S = whitening_root(V)
            W = np.einsum("ij,rjk->rik", S, Z)
            y = np.einsum("ij,rj->ri", S, Y)
            A = np.swapaxes(W, 1, 2) @ W
            coef = np.linalg.solve(A, np.einsum("rji,rj->ri", W, y)[..., None])[..., 0]
            rss = np.sum((y - np.einsum("rij,rj->ri", W, coef)) ** 2, axis=-1)
            # restricted likelihood (Patterson & Thompson 1971), constants dropped
            ll.append(-0.5 * (np.linalg.slogdet(V)[1] + np.linalg.slogdet(A)[1]
                              + m * np.log(rss / m)))
            p.append(gls_quadratic_t(S, X, Y, codes)["p_value"])
        best = np.argmax(np.array(ll), axis=0)
        rate = float(np.mean(np.array(p)[best, np.arange(R)] < 0.05))
        assert abs(rate - 0.05) <= 0.015
        assert abs(rate - observed) < 0.0002   # the recorded value of this seed

    def test_curvature_lambda_maximises_the_dense_restricted_likelihood(self):
        rng = np.random.default_rng(8)
        newick, names, labels = _clade_tree([9, 9, 10], rng)
        n = len(names)
        V1 = _dendropy_cov(newick, names, 1.0)
        X = 1 + np.linalg.cholesky(V1) @ rng.normal(size=n)
        Y = 0.75 * X + 0.3 * np.linalg.cholesky(0.6 * V1 + 0.4 * np.eye(n)) @ rng.normal(size=n)
        t = parse_newick(newick)
        index = {t.names[k]: k for k in t.tips}
        got = curvature_lambda(PhyloPlan.from_tree(t, np.array([index[s] for s in names])),
                               X, Y, labels)
        Z = _design(X, labels)
        m = n - Z.shape[1]

        def reml(lam):
            # dense restricted log-likelihood with dendropy's covariance (Patterson &
            # Thompson 1971), statsmodels GLS for the residual sum of squares
            V = _dendropy_cov(newick, names, lam)
            fit = sm.GLS(Y, Z, sigma=V).fit()
            A = Z.T @ np.linalg.solve(V, Z)
            return -0.5 * (np.linalg.slogdet(V)[1] + np.linalg.slogdet(A)[1]
                           + m * np.log(fit.ssr / m))
        grid = np.linspace(0, 1, 201)
        values = np.array([reml(v) for v in grid])
        assert reml(got) >= values.max() - 1e-9
        assert abs(got - grid[np.argmax(values)]) <= 0.005
