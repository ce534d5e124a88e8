"""The profile objective F of a common SMA/MA slope on a grid of candidate values.

F and its notation are those of :mod:`scaling.stats.common_slope`:
SMA F(u) = sum_i nu_i log(q_i + sinh^2(u - m_i)), MA F(w) = sum_i nu_i log(q_i +
(1 - q_i) sin^2(w - phi_i)).  :func:`grid_values` evaluates F at every point of a
grid for many rows (datasets) at once; :func:`grid_values_pruned` evaluates each row's
grid only where its smallest value can lie.  The common-slope search
(``common_slope._grid_minimum``) takes the argmin of either.
"""

from __future__ import annotations

import numpy as np

__all__ = ["grid_values", "grid_values_pruned"]


def _log_terms(method, work, sq, q, rest) -> None:
    """``sq`` <- log(q + sinh(clip(u))^2) (SMA) or log(q + (1 - q) sin(u) sin(u)) (MA) for
    ``u`` in ``work`` (overwritten), in place, by the plain expressions' operations in
    their order (``rest`` = 1 - q for MA), so every term has the plain value's bits."""
    if method == "sma":
        np.clip(work, -100.0, 100.0, out=work)
        np.sinh(work, out=work)
        np.multiply(work, work, out=sq)
    else:
        np.sin(work, out=work)
        np.multiply(rest, work, out=sq)
        np.multiply(sq, work, out=sq)
    np.add(q, sq, out=sq)
    np.log(sq, out=sq)


def grid_values(method, grid, loc, q, nu, *, block: int = 1 << 19):
    """F at every point of ``grid`` (M, P): blocks of rows and grid points, each in
    one array pass.

    Blocks of at most about ``block`` (row, point, group) terms (or one row and
    point, if its groups are more) bound memory for any number of rows and groups,
    and work arrays of 4 MB run faster than larger ones, being nearer the cache.
    Each block is computed in place, by the plain expressions' operations in their
    order (same bits; tests/test_group_bootstrap_paths.py).
    """
    M, P = grid.shape
    rows = max(1, block // max(loc.shape[-1], 1))
    out = np.empty((M, P))
    for i0 in range(0, M, rows):
        part = slice(i0, i0 + rows)
        _grid_block(method, grid[part], loc[part], q[part], nu[part], block, out[part])
    return out


def _grid_block(method, grid, loc, q, nu, block, out):
    """:func:`grid_values` for a block of rows, written into ``out``."""
    M, P = grid.shape
    per = max(1, block // max(M * loc.shape[-1], 1))
    loc3, q3, nu3 = loc[:, None, :], q[:, None, :], nu[:, None, :]
    rest, work, sq = (None if method == "sma" else 1.0 - q3), None, None
    for j0 in range(0, P, per):
        g = grid[:, j0:j0 + per, None]
        if work is None or work.shape[1] != g.shape[1]:
            work = np.empty((M, g.shape[1], loc.shape[-1]))
            sq = np.empty_like(work)
        np.subtract(g, loc3, out=work)
        _log_terms(method, work, sq, q3, rest)
        np.multiply(nu3, sq, out=sq)
        out[:, j0:j0 + per] = np.sum(sq, axis=-1)


def grid_values_pruned(method, grid, loc, q, nu, *, stride: int = 16,
                       block: int = 1 << 19):
    """F at the points of ``grid`` (M rows, P points) that can hold a row's smallest
    value, +inf at the others: the argmin of :func:`grid_values` row by row, for less work.

    F is evaluated at every ``stride``-th point of every row first (one pass of
    :func:`grid_values`).  Between two of them F cannot fall faster than its row's
    Lipschitz bound L = sum nu_i max|f_i'| (SMA: |f_i'| <= 2 + 1/sqrt(q_i), as
    q + sinh^2 u >= 2 sqrt(q) |sinh u|; MA: sqrt((1 - q_i)/q_i)), so a point whose
    bound stays above its row's smallest value seen by more than rounding is not
    evaluated.  The (row, point) pairs left are evaluated in blocks of at most about
    ``block`` terms, each pair's groups gathered into one contiguous row of a work
    array and reduced over that last axis, by the operations of :func:`grid_values`
    in their order: each value is the same to the last bit (a point's sum is its
    own), so ``np.argmin`` picks the same point.  A row whose coarse values or bound
    are not finite (NaN, inf), or where most points are left, has its whole grid
    evaluated by :func:`grid_values`.
    """
    M, P = grid.shape
    coarse = np.arange(0, P, stride)
    if coarse[-1] != P - 1:
        coarse = np.append(coarse, P - 1)
    fc = grid_values(method, grid[:, coarse], loc, q, nu, block=block)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        lip = 2.0 + 1.0 / np.sqrt(q) if method == "sma" else np.sqrt((1.0 - q) / q)
        L = np.sum(nu * lip, axis=-1)
        # rounding of each computed F: far below 1e-10 of the sum of its terms' sizes
        # (|nu log d| <= nu max(|log q|, 200), d = q + sinh^2 with |u| <= 100), and
        # of the bound's own arithmetic on the grid points
        size = np.sum(nu * np.maximum(np.abs(np.log(q)), 200.0), axis=-1)
        slack = 1e-10 * size + 1e-12 * L * (1.0 + np.max(np.abs(grid), axis=-1))
    whole = ~(np.all(np.isfinite(fc), axis=-1) & np.isfinite(L) & np.isfinite(slack))
    points = np.arange(P)
    right = np.searchsorted(coarse, points)          # first coarse point at or after
    left = np.where(coarse[right] == points, right, right - 1)
    with np.errstate(invalid="ignore", over="ignore"):
        Lc = L[:, None]
        bound = np.maximum(fc[:, left] - Lc * (grid - grid[:, coarse[left]]),
                           fc[:, right] - Lc * (grid[:, coarse[right]] - grid))
        todo = bound <= (np.min(fc, axis=-1) + slack)[:, None]
    todo[:, coarse] = False
    out = np.full((M, P), np.inf)
    out[:, coarse] = fc
    # rows where little can be left out: the whole grid, without gathering groups
    # (a gathered point costs about 1.5 plain ones)
    dense = np.flatnonzero(whole | (3 * np.sum(todo, axis=-1) > 2 * P))
    per = max(1, block // max(loc.shape[-1], 1))
    for i0 in range(0, dense.size, per):
        r = dense[i0:i0 + per]
        out[r] = grid_values(method, grid[r], loc[r], q[r], nu[r], block=block)
    todo[dense] = False
    rows, cols = np.nonzero(todo)
    if rows.size:
        # smaller blocks here: the gathered work arrays then stay in cache
        out[rows, cols] = _pair_values(method, grid[rows, cols], rows, loc, q, nu,
                                       min(block, 1 << 17))
    return out


def _pair_values(method, x, rows, loc, q, nu, block):
    """F at x[k] for row rows[k] of (loc, q, nu): each pair's groups in one
    contiguous row of a work array, by the operations of :func:`grid_values`.
    """
    G = loc.shape[-1]
    per = max(1, block // max(G, 1))
    out = np.empty(x.size)
    work = sq = qk = rest = None
    for k0 in range(0, x.size, per):
        r = rows[k0:k0 + per]
        if work is None or work.shape[0] != r.size:
            work, sq, qk = (np.empty((r.size, G)) for _ in range(3))
            rest = None if method == "sma" else np.empty((r.size, G))
        g = x[k0:k0 + per, None]
        np.take(loc, r, axis=0, out=sq)
        np.subtract(g, sq, out=work)
        np.take(q, r, axis=0, out=qk)
        if rest is not None:
            np.subtract(1.0, qk, out=rest)
        _log_terms(method, work, sq, qk, rest)
        np.take(nu, r, axis=0, out=qk)
        np.multiply(qk, sq, out=sq)
        out[k0:k0 + per] = np.sum(sq, axis=-1)
    return out
