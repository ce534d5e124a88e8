"""The parametric bootstrap of the SMA/MA group tests gives the same draws and numbers as
its plain form: every replicate's three statistics recomputed from scratch, and Newton
steps on every row until all rows converge.

Internal consistency: the fast paths of ``scaling.stats.group_comparisons`` and
``scaling.stats.common_slope`` (each Wald statistic computed once per replicate, rows that
reached a fixed point set aside) must give bit-for-bit the numbers of the plain form
written out here, so a seed keeps its p-values and intervals.
"""

from __future__ import annotations

import numpy as np
import pytest

from scaling.stats import _profile_grid as pg
from scaling.stats import common_slope as cs
from scaling.stats import group_comparisons as gc
from scaling.stats.moments import group_moments


def _plain_newton(method, loc, q, nu, lo, hi, x0, *, iters: int = 80):
    x = x0.copy()
    lo, hi = lo.copy(), hi.copy()
    for _ in range(iters):
        _, g1, g2 = cs._profile_terms(method, x, loc, q, nu)
        neg = g1 < 0
        lo = np.where(neg, x, lo)
        hi = np.where(neg, hi, x)
        with np.errstate(divide="ignore", invalid="ignore"):
            xn = x - g1 / g2
        bad = ~(g2 > 0) | ~(xn >= lo) | ~(xn <= hi) | ~np.isfinite(xn)
        xn = np.where(bad, 0.5 * (lo + hi), xn)
        done = np.all(np.abs(xn - x) <= 1e-12 * (1.0 + np.abs(x)))
        x = xn
        if done:
            break
    return x


def _plain_counts(method, n, fit, scores, observed, n_boot, rng, *, chunk=200_000):
    """The bootstrap loop in its plain form (both nulls' statistics from _wald_tests)."""
    M, G = n.shape
    nu = n - 1.0
    counts = np.zeros((M, 3))
    profile = []
    per = max(1, chunk // max(M * G, 1))
    done = 0
    sr, sf = np.sqrt(scores["sr2"]), np.sqrt(scores["sf2"])
    wr, wf = n / scores["sr2"], n / scores["sf2"]
    r_pool = np.sum(wr * scores["rbar"], -1, keepdims=True) / np.sum(wr, -1, keepdims=True)
    f_pool = np.sum(wf * scores["fbar"], -1, keepdims=True) / np.sum(wf, -1, keepdims=True)
    b = fit["b"][:, None]
    while done < n_boot:
        B = min(per, n_boot - done)
        size = (B, M, G)
        a11 = rng.chisquare(nu, size=size)
        a22 = rng.chisquare(nu - 1, size=size)
        a21 = rng.standard_normal(size)
        z_r = rng.standard_normal(size) / np.sqrt(n)
        z_f = rng.standard_normal(size) / np.sqrt(n)
        srr = scores["sr2"] * a11
        srf = sr * sf * np.sqrt(a11) * a21
        sff = scores["sf2"] * (a21 * a21 + a22)
        r_a, f_a = r_pool + sr * z_r, scores["fbar"] + sf * z_f
        r_b, f_b = scores["rbar"] + sr * z_r, f_pool + sf * z_f
        sxx, syy, sxy, mx_a, my_a = gc._from_axis_coords(method, b, srr, srf, sff, r_a, f_a)
        _, _, _, mx_b, my_b = gc._from_axis_coords(method, b, srr, srf, sff, r_b, f_b)

        def flat(a):
            return np.broadcast_to(a, size).reshape(B * M, G)

        nn = flat(n)
        fit_b = cs._fit_common(method, nn, flat(sxx), flat(syy), flat(sxy))
        w_int, _, _ = gc._wald_tests(method, fit_b, nn, flat(mx_a), flat(my_a),
                                     flat(sxx), flat(syy), flat(sxy))
        _, w_axis, _ = gc._wald_tests(method, fit_b, nn, flat(mx_b), flat(my_b),
                                      flat(sxx), flat(syy), flat(sxy))
        boot = np.stack([fit_b["lr"], w_int, w_axis], axis=-1).reshape(B, M, 3)
        counts += np.sum(boot >= observed - 1e-9 * (1 + np.abs(observed)), axis=0)
        x_true = np.broadcast_to(fit["x"], (B, M)).reshape(B * M)
        if method == "sma":
            x_true = np.log(np.abs(np.broadcast_to(fit["b"], (B, M)).reshape(B * M)))
        f_true = cs._profile_terms(method, x_true, fit_b["loc"], fit_b["q"], fit_b["nu"],
                                   order=0)[0]
        profile.append((f_true - fit_b["fval"]).reshape(B, M))
        done += B
    return counts, np.concatenate(profile, axis=0)


def _moments(groups: int, per: int, seed: int, spread: float, noise: float, slope: float):
    rng = np.random.default_rng(seed)
    g = np.repeat(np.arange(groups), per)
    b = slope + rng.normal(0, spread, groups)
    lx = rng.normal(1.5, 0.6, g.size)
    ly = 0.3 + b[g] * lx + rng.normal(0, noise, g.size)
    return group_moments(lx, ly, g, n_groups=groups)


SHAPES = {
    "many small groups": (400, 6, 1, 0.05, 0.1, 0.75),
    "common slope, noisy": (40, 8, 2, 0.0, 1.0, 0.2),
    "negative slope": (12, 15, 3, 0.0, 0.8, -1.2),
    "steep, slopes differ": (9, 10, 4, 0.5, 2.0, 3.0),
}


@pytest.mark.parametrize("method", ["sma", "ma"])
@pytest.mark.parametrize("shape", list(SHAPES))
class TestBootstrapCounts:
    def test_equals_the_plain_loop_bit_for_bit(self, method, shape):
        m = _moments(*SHAPES[shape])
        arrays = [np.asarray(getattr(m, k))[None] for k in
                  ("n", "mean_x", "mean_y", "sxx", "syy", "sxy")]
        n = arrays[0]
        fit = cs._fit_common(method, n, *arrays[3:], exact=True)
        w_int, w_axis, scores = gc._wald_tests(method, fit, *arrays)
        observed = np.stack([fit["lr"], w_int, w_axis], axis=-1)
        # small chunks: several replicates per chunk and several chunks
        got = gc._bootstrap_counts(method, n, fit, scores, observed, 199,
                                   np.random.default_rng(5), chunk=4000)
        want = _plain_counts(method, n, fit, scores, observed, 199,
                             np.random.default_rng(5), chunk=4000)
        assert np.array_equal(got[0], want[0])
        assert np.array_equal(got[1], want[1])

    def test_pairs_in_parallel_equal_the_plain_loop(self, method, shape):
        m = _moments(*SHAPES[shape])
        idx = np.array([(0, 1), (0, 2), (1, 2), (2, 3)])
        arrays = [np.asarray(getattr(m, k))[idx] for k in
                  ("n", "mean_x", "mean_y", "sxx", "syy", "sxy")]
        fit = cs._fit_common(method, arrays[0], *arrays[3:], exact=True)
        w_int, w_axis, scores = gc._wald_tests(method, fit, *arrays)
        observed = np.stack([fit["lr"], w_int, w_axis], axis=-1)
        got = gc._bootstrap_counts(method, arrays[0], fit, scores, observed, 99,
                                   np.random.default_rng(6))
        want = _plain_counts(method, arrays[0], fit, scores, observed, 99,
                             np.random.default_rng(6))
        assert np.array_equal(got[0], want[0])
        assert np.array_equal(got[1], want[1])


class TestNewtonSetAside:
    @pytest.mark.parametrize("method", ["sma", "ma"])
    def test_equals_stepping_every_row(self, method):
        # rows of very different difficulty, so some reach their root long before others
        rng = np.random.default_rng(11)
        R, G = 300, 25
        n = rng.integers(3, 40, (R, G)).astype(float)
        sxx = rng.uniform(0.1, 5, (R, G))
        syy = rng.uniform(0.1, 5, (R, G))
        r = rng.uniform(-0.99, 0.99, (R, G)) * rng.uniform(0, 1, (R, 1))
        sxy = r * np.sqrt(sxx * syy)
        loc, q, _, _ = cs._axis_params(method, sxx, syy, sxy)
        nu = n - 1.0
        lo, hi = loc.min(axis=-1), loc.max(axis=-1)
        x0 = np.clip(np.sum(nu * loc, axis=-1) / np.sum(nu, axis=-1), lo, hi)
        got = cs._newton_bracketed(method, loc, q, nu, lo, hi, x0)
        want = _plain_newton(method, loc, q, nu, lo, hi, x0)
        assert np.array_equal(got, want, equal_nan=True)

    def test_terms_without_the_first_derivative_are_the_same(self):
        rng = np.random.default_rng(12)
        loc, q = rng.normal(0, 1, (5, 7)), rng.uniform(0.01, 1, (5, 7))
        nu, x = np.full((5, 7), 9.0), rng.normal(0, 1, 5)
        for method in ("sma", "ma"):
            full = cs._profile_terms(method, x, loc, q, nu)
            short = cs._profile_terms(method, x, loc, q, nu, first=False)
            slopes = cs._profile_slopes(method, x, loc, q, nu)
            assert short[1] is None
            assert np.array_equal(full[0], short[0]) and np.array_equal(full[2], short[2])
            assert np.array_equal(full[1], slopes[0]) and np.array_equal(full[2], slopes[1])


class TestGridPruned:
    """The pruned grid (values only where the minimum can be) picks the point of the full one."""

    @pytest.mark.parametrize("method", ["sma", "ma"])
    @pytest.mark.parametrize("case", ["tight groups far apart", "loose groups",
                                      "one exact group", "two clusters"])
    def test_same_argmin_and_value(self, method, case):
        rng = np.random.default_rng(21)
        G = 300
        n = rng.integers(5, 200, G).astype(float)
        sxx = rng.uniform(0.5, 3, G)
        if case == "tight groups far apart":      # deep narrow wells: many local minima
            slopes, r = rng.choice([0.3, 0.9, 2.5], G), np.full(G, 0.9999)
        elif case == "loose groups":
            slopes, r = rng.normal(0.75, 0.3, G), rng.uniform(0.1, 0.6, G)
        elif case == "one exact group":
            slopes, r = rng.normal(0.75, 0.05, G), rng.uniform(0.8, 0.99, G)
            r[0] = 1.0
        else:                                       # two equally deep clusters
            slopes, r = np.where(np.arange(G) % 2 == 0, 0.5, 1.5), np.full(G, 0.99)
        syy = sxx * slopes ** 2 / r ** 2
        sxy = r * np.sqrt(sxx * syy) * np.sign(slopes)
        loc, q, _, phi0 = cs._axis_params(method, sxx[None], syy[None], sxy[None])
        nu = n[None] - 1.0
        if method == "sma":
            lo, hi = loc.min(-1), loc.max(-1)
        else:
            lo, hi = phi0 - np.pi / 2, phi0 + np.pi / 2
        grid = lo[:, None] + (hi - lo)[:, None] * np.linspace(0.0, 1.0, 2001)
        full = pg.grid_values(method, grid, loc, q, nu)
        pruned = pg.grid_values_pruned(method, grid, loc, q, nu)
        j = int(np.argmin(full))
        assert int(np.argmin(pruned)) == j
        assert pruned[0, j] == full[0, j]
        seen = np.isfinite(pruned)
        assert np.array_equal(pruned[seen], full[seen])   # every value it computes is exact


class TestExclusionReasons:
    def test_equals_the_group_by_group_rule(self):
        from scaling.stats.group_means import _exclusion_reasons, _no_variation
        from scaling.stats.lines import fit_notes
        from scaling.stats.moments import Moments
        from scaling.stats._group_common import EXACT_FIT_TOL

        # too few, constant x, constant y, uncorrelated, exact line, usable, NaN sums
        m = Moments(n=np.array([2.0, 5, 5, 5, 5, 5, 5]),
                    mean_x=np.array([1.0, 2, 1, 1, 1, 1, 1]),
                    mean_y=np.array([1.0, 1, 3, 1, 1, 1, 1]),
                    sxx=np.array([1.0, 0, 1, 1, 1, 1, np.nan]),
                    syy=np.array([1.0, 1, 0, 1, 4, 1, 1]),
                    sxy=np.array([0.5, 0, 0, 0, 2, 0.5, 0.5]))
        labels = list("abcdefg")
        for method in ("ols", "sma", "ma"):
            notes = fit_notes(m, method)
            flat_x = _no_variation(m.n, m.mean_x, m.sxx)
            flat_y = _no_variation(m.n, m.mean_y, m.syy)
            want = []
            for i in range(len(labels)):
                if m.n[i] < 3:
                    want.append(("too_few", ""))
                elif flat_x[i]:
                    want.append(("x_constant", ""))
                elif flat_y[i]:
                    want.append(("y_constant", ""))
                elif notes[i]:
                    want.append(("not_estimable", str(notes[i])))
                elif method != "ols" and 1.0 - float(m.r[i]) ** 2 <= EXACT_FIT_TOL:
                    want.append(("exact_line", ""))
                else:
                    want.append(("", ""))
            assert _exclusion_reasons(m, labels, method, 3) == want
            assert [w for w, _ in want][3:6] == (["not_estimable", "exact_line", ""]
                                                 if method != "ols" else ["", "", ""])


def _plain_terms(method, x, loc, q, nu, order=2):
    """The profile objective's terms written as plain expressions."""
    if method == "sma":
        t = np.clip(x[:, None] - loc, -100.0, 100.0)
        sh = np.sinh(t)
        d = q + sh * sh
        terms = [np.log(d)]
        if order >= 1:
            terms.append(np.sinh(2 * t) / d)
        if order >= 2:
            terms.append((1.0 + np.cosh(2 * t) * (2 * q - 1)) / (d * d))
    else:
        psi = x[:, None] - loc
        s = np.sin(psi)
        k = 1.0 - q
        d = q + k * s * s
        terms = [np.log(d)]
        if order >= 1:
            terms.append(k * np.sin(2 * psi) / d)
        if order >= 2:
            terms.append((2 * k * np.cos(2 * psi) * d - (k * np.sin(2 * psi)) ** 2) / (d * d))
    return [np.sum(nu * term, axis=-1) for term in terms]


class TestProfileTermsInPlace:
    @pytest.mark.parametrize("method", ["sma", "ma"])
    @pytest.mark.parametrize("order", [0, 1, 2])
    def test_equal_the_plain_expressions(self, method, order):
        rng = np.random.default_rng(13)
        M, G = 40, 33
        loc = rng.normal(0, 2, (M, G))
        q = np.exp(rng.uniform(-700, 0, (M, G)))          # down to ~1e-300, as clipped
        q[0, :3] = [1.0, 1e-300, 0.5]
        nu = rng.integers(1, 500, (M, G)).astype(float)
        x = rng.normal(0, 3, M)
        x[1] = 250.0                                        # beyond the SMA clip
        x[2] = np.nan
        got = cs._profile_terms(method, x, loc, q, nu, order=order)
        want = _plain_terms(method, x, loc, q, nu, order=order)
        assert len(got) == len(want)
        for g, w in zip(got, want):
            assert np.array_equal(g, w, equal_nan=True)

    @pytest.mark.parametrize("method", ["sma", "ma"])
    def test_broadcast_inputs_are_not_written(self, method):
        # one dataset's groups broadcast against many x (the profile interval's grid)
        rng = np.random.default_rng(14)
        loc, q = rng.normal(0, 1, (1, 9)), rng.uniform(0.01, 1, (1, 9))
        nu = np.full((1, 9), 7.0)
        x = np.linspace(-1, 1, 25)
        big = [np.broadcast_to(a, (25, 9)) for a in (loc, q, nu)]
        keep = [a.copy() for a in (loc, q, nu)]
        got = cs._profile_terms(method, x, *big, order=2)
        want = _plain_terms(method, x, *big, order=2)
        for g, w in zip(got, want):
            assert np.array_equal(g, w)
        for a, b in zip((loc, q, nu), keep):
            assert np.array_equal(a, b)


def _plain_grid(method, grid, loc, q, nu):
    """F on a grid by the plain expressions, one grid point at a time."""
    out = np.empty(grid.shape)
    for j in range(grid.shape[1]):
        g = grid[:, j:j + 1]
        if method == "sma":
            sh = np.sinh(np.clip(g - loc, -100.0, 100.0))
            d = q + sh * sh
        else:
            s = np.sin(g - loc)
            d = q + (1.0 - q) * s * s
        out[:, j] = np.sum(nu * np.log(d), axis=-1)
    return out


class TestGridValuesInPlace:
    @pytest.mark.parametrize("method", ["sma", "ma"])
    def test_equal_the_plain_expressions_bit_for_bit(self, method):
        # internal consistency: the in-place work array against the plain formula
        rng = np.random.default_rng(7)
        M, G, P = 3, 257, 41
        loc = rng.uniform(-2, 2, (M, G))
        loc[0, :5] = [150.0, -150.0, 0.0, 1e-12, -1e-12]   # beyond the clip, and at g
        q = rng.uniform(0.0, 1.0, (M, G))
        q[1, :4] = [1e-300, 1e-12, 1.0, 0.5]
        nu = rng.integers(1, 40, (M, G)).astype(float)
        grid = np.linspace(-3, 3, P)[None, :] + rng.uniform(-0.1, 0.1, (M, 1))
        want = _plain_grid(method, grid, loc, q, nu)
        # blocks of several points, the last one shorter; of rows 2 + 1 (a block under
        # three rows' groups); of one row and point (a block under one row's groups)
        for block in (7 * M * G, 2 * G + 5, 1):
            got = pg.grid_values(method, grid, loc, q, nu, block=block)
            assert np.array_equal(got, want)


def _grid_rows(method, M, G, seed, *, points=361, spread=0.3, r_low=0.2, r_high=0.95):
    """Rows of groups as a bootstrap chunk draws them, with each row's search grid."""
    rng = np.random.default_rng(seed)
    n = rng.integers(3, 20, (M, G)).astype(float)
    sxx = rng.uniform(0.2, 3, (M, G))
    slopes = rng.normal(0.75, spread, (M, G)) * rng.uniform(0.5, 2.0, (M, 1))
    r = rng.uniform(r_low, r_high, (M, G))
    syy = sxx * slopes ** 2 / r ** 2
    sxy = r * np.sqrt(sxx * syy) * np.sign(slopes)
    loc, q, _, phi0 = cs._axis_params(method, sxx, syy, sxy)
    if method == "sma":
        lo, hi = loc.min(-1), loc.max(-1)
    else:
        lo, hi = phi0 - np.pi / 2, phi0 + np.pi / 2
    grid = lo[:, None] + (hi - lo)[:, None] * np.linspace(0.0, 1.0, points)
    return grid, loc, q, n - 1.0


def _assert_same_minimum(method, grid, loc, q, nu, **kw):
    """The pruned grid's argmin and computed values are those of the whole grid."""
    full = pg.grid_values(method, grid, loc, q, nu)
    pruned = pg.grid_values_pruned(method, grid, loc, q, nu, **kw)
    assert pruned.shape == full.shape
    assert np.array_equal(np.argmin(pruned, axis=1), np.argmin(full, axis=1))
    seen = ~np.isposinf(pruned)
    assert np.array_equal(pruned[seen], full[seen], equal_nan=True)
    return full, pruned


class TestGridPrunedRows:
    """Internal consistency: many rows pruned at once give, row by row, the argmin of the
    whole grid and its values at every point they evaluate, to the last bit."""

    @pytest.mark.parametrize("method", ["sma", "ma"])
    @pytest.mark.parametrize("points", [361, 2001])
    def test_many_rows_same_argmin_and_values(self, method, points):
        grid, loc, q, nu = _grid_rows(method, 60, 90, 31, points=points)
        # a small block: the coarse pass and the gathered pairs both run in several
        # blocks, the last one shorter
        _, pruned = _assert_same_minimum(method, grid, loc, q, nu, block=7 * 90 + 13)
        assert np.mean(np.isposinf(pruned)) > 0.5     # it did leave most points out

    @pytest.mark.parametrize("method", ["sma", "ma"])
    def test_rows_where_nothing_can_be_pruned(self, method):
        # near-exact groups (q ~ 1e-10) with slopes far apart: the Lipschitz bound is
        # far too loose to exclude any point, so every point is evaluated
        loose = _grid_rows(method, 4, 70, 32, spread=1.0, r_low=1 - 1e-10, r_high=1.0)
        tight = _grid_rows(method, 4, 70, 33)
        grid, loc, q, nu = (np.concatenate(pair) for pair in zip(loose, tight))
        _, pruned = _assert_same_minimum(method, grid, loc, q, nu)
        assert np.all(np.isfinite(pruned[:4]))
        assert np.any(np.isposinf(pruned[4:]))

    @pytest.mark.parametrize("method", ["sma", "ma"])
    def test_rows_with_nan_or_inf_are_evaluated_whole(self, method):
        grid, loc, q, nu = _grid_rows(method, 6, 80, 34)
        loc[0, 5] = np.nan            # NaN values at every point
        loc[1, 7] = np.inf            # MA: NaN values (sin(inf)); SMA: clipped, finite
        q[2, 3] = 0.0                 # infinite Lipschitz bound
        nu[3, 1] = np.inf             # infinite values
        with np.errstate(invalid="ignore"):
            full, pruned = _assert_same_minimum(method, grid, loc, q, nu)
        whole = [0, 2, 3] if method == "sma" else [0, 1, 2, 3]
        assert np.array_equal(pruned[whole], full[whole], equal_nan=True)
        assert np.any(np.isposinf(pruned[4:]))        # the finite rows are still pruned

    @pytest.mark.parametrize("method", ["sma", "ma"])
    def test_one_group(self, method):
        for M in (1, 5):
            grid, loc, q, nu = _grid_rows(method, M, 1, 35, points=2001)
            if method == "sma":       # a zero-width window: every point the same
                grid = grid + np.linspace(-0.5, 0.5, 2001)
            _assert_same_minimum(method, grid, loc, q, nu)

    @pytest.mark.parametrize("method", ["sma", "ma"])
    def test_gathered_pairs_equal_the_grid_bit_for_bit(self, method):
        # a point's value is a sum over the groups axis only, so it is the same whichever
        # other (row, point) pairs share its block, in whatever order
        grid, loc, q, nu = _grid_rows(method, 9, 301, 36, points=50)
        full = pg.grid_values(method, grid, loc, q, nu)
        rng = np.random.default_rng(37)
        rows = rng.integers(0, 9, 500)
        cols = rng.integers(0, 50, 500)
        for block in (1, 301, 5 * 301 + 7, 10 ** 7):
            got = pg._pair_values(method, grid[rows, cols], rows, loc, q, nu, block)
            assert np.array_equal(got, full[rows, cols])

    @pytest.mark.parametrize("method", ["sma", "ma"])
    @pytest.mark.parametrize("points", [361, 2001])
    @pytest.mark.parametrize("groups", [3, 100])
    def test_grid_minimum_equals_the_whole_grid(self, method, points, groups, monkeypatch):
        grid, loc, q, nu = _grid_rows(method, 30, groups, 38, points=2)
        lo, hi = grid[:, 0], grid[:, -1]
        got = cs._grid_minimum(method, loc, q, nu, lo, hi, points=points)
        monkeypatch.setattr(cs, "grid_values_pruned", pg.grid_values)
        want = cs._grid_minimum(method, loc, q, nu, lo, hi, points=points)
        assert np.array_equal(got, want)


class TestIntervalGridSearch:
    """The MA interval's bracket: the first of 720 grid points past the threshold,
    searched in growing blocks, is the point the whole grid evaluated at once gives."""

    @staticmethod
    def _whole_grid(grid, loc, q, nu, f_hat, crit):
        shape = (grid.size, loc.shape[1])
        vals = cs._profile_terms("ma", grid, np.broadcast_to(loc, shape),
                                 np.broadcast_to(q, shape), np.broadcast_to(nu, shape),
                                 order=0)[0]
        over = np.flatnonzero(vals - f_hat - crit > 0)
        return float(grid[over[0]]) if over.size else None

    @pytest.mark.parametrize("groups", [1, 2, 7, 1000])
    def test_first_point_over_equals_the_whole_grid(self, groups):
        rng = np.random.default_rng(40 + groups)
        found = set()
        for _ in range(40):
            loc = rng.normal(0, 0.3, (1, groups))
            q = rng.random((1, groups)) * rng.choice([0.01, 0.5, 1.0])
            nu = rng.integers(1, 500, (1, groups)).astype(float)
            x_hat = float(rng.normal(0, 0.5))
            grid = x_hat + rng.choice([-1.0, 1.0]) * np.linspace(0, np.pi / 2, 721)[1:]
            f_hat = float(cs._profile_terms("ma", np.array([x_hat]), loc, q, nu,
                                            order=0)[0][0])
            # thresholds from "crossed at once" to "never crossed"
            crit = float(rng.choice([1e-6, 0.01, 1.0, 10.0, 1e6]) * nu.sum() / 100)
            want = self._whole_grid(grid, loc, q, nu, f_hat, crit)
            got = cs._first_over("ma", grid, loc, q, nu, f_hat, crit)
            assert got == want          # bit for bit, or both None
            found.add(None if want is None else int(np.flatnonzero(grid == want)[0]) > 0)
        assert found >= {False, True} or groups == 1   # crossings at the first point and later

    def test_no_crossing_gives_none(self):
        loc, q, nu = np.zeros((1, 3)), np.full((1, 3), 0.5), np.full((1, 3), 10.0)
        grid = np.linspace(0, np.pi / 2, 721)[1:]
        assert cs._first_over("ma", grid, loc, q, nu, 0.0, 1e300) is None
