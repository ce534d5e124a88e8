"""Nonlinear least squares for a model with two parameters, by Levenberg-Marquardt.

:func:`fit_nonlinear` minimises sum (model(x, p1, p2) - y)^2 from a start
point by the Levenberg-Marquardt method in the trust-region form of Moré
(1978), "The Levenberg-Marquardt algorithm: implementation and theory", in
G. A. Watson (ed.), *Numerical Analysis*, Springer LNM 630:105-116:

- the Jacobian by forward differences with step sqrt(eps) |p_j| (sqrt(eps)
  for p_j = 0);
- its QR factorisation with column pivoting by Householder reflections;
  parameters scaled by the largest column norms seen (Moré 1978, eq. 6.3);
- each step solves min ||J s + f||^2 + lambda ||D s||^2 with the
  Levenberg-Marquardt parameter lambda found by Moré's safeguarded Newton
  iteration on ||D s|| = delta (Moré 1978, section 5; Givens rotations for
  the damped system), and the trust radius delta grows or shrinks by the
  ratio of actual to predicted reduction (section 4);
- it stops when the relative reduction of the sum of squares, actual and
  predicted, is at most ``ftol``, or the trust radius is at most ``xtol``
  times the scaled parameter norm.

The steps, constants (0.1, 0.25, 0.5, 0.75, 1e-4, factor 100) and tests are
those of the MINPACK routine ``lmdif`` (Moré, Garbow & Hillstrom 1980,
Argonne National Laboratory report ANL-80-74), which
``scipy.optimize.curve_fit`` runs by default, so the two stop at the same
point.  Sums over the points are running sums, in MINPACK's order.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

__all__ = ["NonlinearFit", "fit_nonlinear"]

_EPS = 2.220446049250313e-16
_DWARF = 2.2250738585072014e-308
_RDWARF, _RGIANT = 3.834e-20, 1.304e19


@dataclass(frozen=True, slots=True)
class NonlinearFit:
    """The result of :func:`fit_nonlinear`.

    Attributes
    ----------
    params : tuple of float
        The two fitted parameters.
    evaluations : int
        Model evaluations used.
    reason : int
        Why it stopped: 1 the sum of squares no longer falls by more than
        ``ftol`` (relative), 2 the step bound is below ``xtol`` (relative),
        3 both, 4 the gradient is orthogonal to the residuals.
    """

    params: tuple
    evaluations: int
    reason: int


def _norm(v) -> float:
    """Euclidean norm without destructive overflow or underflow (MINPACK ``enorm``):
    running sum of squares of the moderate components; scaled sums of the
    very large and very small ones."""
    v = np.abs(np.asarray(v, dtype=float))
    giant = _RGIANT / v.size
    if v.size > 2 and v.min() > _RDWARF and v.max() < giant:
        np.multiply(v, v, out=v)   # v is our own copy: square and sum in place
        return np.sqrt(np.cumsum(v, out=v)[-1])
    s1 = s2 = s3 = x1max = x3max = 0.0
    for xabs in v:   # numpy scalars: IEEE arithmetic on NaN and infinities, as in C
        if _RDWARF < xabs < giant:
            s2 = s2 + xabs * xabs
        elif xabs > _RDWARF:
            if xabs > x1max:
                s1 = 1.0 + s1 * ((x1max / xabs) * (x1max / xabs))
                x1max = xabs
            else:
                s1 = s1 + (xabs / x1max) * (xabs / x1max)
        elif xabs > x3max:
            s3 = 1.0 + s3 * ((x3max / xabs) * (x3max / xabs))
            x3max = xabs
        elif xabs != 0:
            s3 = s3 + (xabs / x3max) * (xabs / x3max)
    if s1 != 0:
        return x1max * np.sqrt(s1 + (s2 / x1max) / x1max)
    if s2 != 0:
        if s2 >= x3max:
            return np.sqrt(s2 * (1.0 + (x3max / s2) * x3max))
        return np.sqrt(x3max * ((s2 / x3max) + (x3max * s2)))
    return x3max * np.sqrt(s3)


def _dot(u: np.ndarray, v: np.ndarray) -> float:
    """Running sum of u_i v_i, first to last."""
    if not u.size:
        return np.float64(0.0)
    w = u * v
    return np.cumsum(w, out=w)[-1]


def _qr_pivoted(a: np.ndarray):
    """Householder QR of the m x 2 matrix ``a`` (in place) with column pivoting.

    Returns (order, rdiag, col_norms): the column order, R's diagonal and the
    norms of the original columns.  R's upper triangle is left in ``a``'s top
    rows, the reflection vectors below and on the diagonal.
    """
    m, n = a.shape
    acnorm = [_norm(a[:, j]) for j in range(n)]
    rdiag = list(acnorm)
    wa = list(acnorm)
    order = list(range(n))
    for j in range(min(m, n)):
        kmax = j
        for k in range(j, n):
            if rdiag[k] > rdiag[kmax]:
                kmax = k
        if kmax != j:
            column = a[:, j].copy()
            a[:, j] = a[:, kmax]
            a[:, kmax] = column
            rdiag[kmax], wa[kmax] = rdiag[j], wa[j]
            order[j], order[kmax] = order[kmax], order[j]
        # the first column is whole: its norm is already known
        ajnorm = acnorm[order[0]] if j == 0 else _norm(a[j:, j])
        if ajnorm != 0:
            if a[j, j] < 0:
                ajnorm = -ajnorm
            a[j:, j] /= ajnorm
            a[j, j] += 1.0
            for k in range(j + 1, n):
                temp = _dot(a[j:, j], a[j:, k]) / a[j, j]
                a[j:, k] -= temp * a[j:, j]
                if rdiag[k] != 0:
                    t = a[j, k] / rdiag[k]
                    rdiag[k] = rdiag[k] * np.sqrt(max(0.0, 1.0 - t * t))
                    if not 0.05 * ((rdiag[k] / wa[k]) * (rdiag[k] / wa[k])) > _EPS:
                        rdiag[k] = _norm(a[j + 1:, k])
                        wa[k] = rdiag[k]
        rdiag[j] = -ajnorm
    return order, rdiag, acnorm


def _solve_damped(r, order, diag, qtb, n):
    """Least squares solution of [R; D P] z = [Q'f; 0] by Givens rotations (MINPACK
    ``qrsolv``).  Writes S's strict upper triangle (transposed) into r's strict
    lower one; returns (x, sdiag)."""
    x = [0.0] * n
    wa = [0.0] * n
    sdiag = [0.0] * n
    for j in range(n):
        for i in range(j, n):
            r[i][j] = r[j][i]
        x[j] = r[j][j]
        wa[j] = qtb[j]
    for j in range(n):
        lj = order[j]
        if diag[lj] != 0:
            for k in range(j, n):
                sdiag[k] = 0.0
            sdiag[j] = diag[lj]
            qtbpj = 0.0
            for k in range(j, n):
                if sdiag[k] == 0:
                    continue
                if abs(r[k][k]) < abs(sdiag[k]):
                    cotan = r[k][k] / sdiag[k]
                    sin = 0.5 / np.sqrt(0.25 + 0.25 * (cotan * cotan))
                    cos = sin * cotan
                else:
                    tan = sdiag[k] / r[k][k]
                    cos = 0.5 / np.sqrt(0.25 + 0.25 * (tan * tan))
                    sin = cos * tan
                r[k][k] = cos * r[k][k] + sin * sdiag[k]
                temp = cos * wa[k] + sin * qtbpj
                qtbpj = -sin * wa[k] + cos * qtbpj
                wa[k] = temp
                for i in range(k + 1, n):
                    temp = cos * r[i][k] + sin * sdiag[i]
                    sdiag[i] = -sin * r[i][k] + cos * sdiag[i]
                    r[i][k] = temp
        sdiag[j] = r[j][j]
        r[j][j] = x[j]
    nsing = n
    for j in range(n):
        if sdiag[j] == 0 and nsing == n:
            nsing = j
        if nsing < n:
            wa[j] = 0.0
    for j in range(nsing - 1, -1, -1):
        s = 0.0
        for i in range(j + 1, nsing):
            s = s + r[i][j] * wa[i]
        wa[j] = (wa[j] - s) / sdiag[j]
    for j in range(n):
        x[order[j]] = wa[j]
    return x, sdiag


def _step(r, order, diag, qtb, delta, par, n):
    """The Levenberg-Marquardt parameter and step for trust radius ``delta``
    (MINPACK ``lmpar``; Moré 1978, section 5).  Returns (par, step)."""
    wa1 = [0.0] * n
    nsing = n
    for j in range(n):
        wa1[j] = qtb[j]
        if r[j][j] == 0 and nsing == n:
            nsing = j
        if nsing < n:
            wa1[j] = 0.0
    for j in range(nsing - 1, -1, -1):
        wa1[j] = wa1[j] / r[j][j]
        temp = wa1[j]
        for i in range(j):
            wa1[i] = wa1[i] - r[i][j] * temp
    x = [0.0] * n
    for j in range(n):
        x[order[j]] = wa1[j]
    it = 0
    wa2 = [diag[j] * x[j] for j in range(n)]
    dxnorm = _norm(wa2)
    fp = dxnorm - delta
    if fp <= 0.1 * delta:
        return 0.0, x
    parl = 0.0
    if nsing >= n:
        for j in range(n):
            lj = order[j]
            wa1[j] = diag[lj] * (wa2[lj] / dxnorm)
        for j in range(n):
            s = 0.0
            for i in range(j):
                s = s + r[i][j] * wa1[i]
            wa1[j] = (wa1[j] - s) / r[j][j]
        temp = _norm(wa1)
        parl = ((fp / delta) / temp) / temp
    for j in range(n):
        s = 0.0
        for i in range(j + 1):
            s = s + r[i][j] * qtb[i]
        wa1[j] = s / diag[order[j]]
    gnorm = _norm(wa1)
    paru = gnorm / delta
    if paru == 0:
        paru = _DWARF / min(delta, 0.1)
    par = max(par, parl)
    par = min(par, paru)
    if par == 0:
        par = gnorm / dxnorm
    while True:
        it += 1
        if par == 0:
            par = max(_DWARF, 0.001 * paru)
        temp = np.sqrt(par)
        wa1 = [temp * diag[j] for j in range(n)]
        x, sdiag = _solve_damped(r, order, wa1, qtb, n)
        wa2 = [diag[j] * x[j] for j in range(n)]
        dxnorm = _norm(wa2)
        temp = fp
        fp = dxnorm - delta
        if (abs(fp) <= 0.1 * delta or (parl == 0 and fp <= temp and temp < 0)
                or it == 10):
            return par, x
        for j in range(n):
            lj = order[j]
            wa1[j] = diag[lj] * (wa2[lj] / dxnorm)
        for j in range(n):
            wa1[j] = wa1[j] / sdiag[j]
            temp = wa1[j]
            for i in range(j + 1, n):
                wa1[i] = wa1[i] - r[i][j] * temp
        temp = _norm(wa1)
        parc = ((fp / delta) / temp) / temp
        if fp > 0:
            parl = max(parl, par)
        if fp < 0:
            paru = min(paru, par)
        par = max(parl, par + parc)


def fit_nonlinear(model: Callable, x, y, start, *, max_evaluations: int = 5000,
                  ftol: float = 1.49012e-08, xtol: float = 1.49012e-08,
                  factor: float = 100.0) -> NonlinearFit:
    """Least-squares fit of y = model(x, p1, p2) by Levenberg-Marquardt.

    Parameters
    ----------
    model : callable
        model(x, p1, p2) -> array of the shape of ``y``.
    x, y : array_like
        The points (finite).
    start : sequence of two floats
        The starting parameters.
    max_evaluations : int
        Most model evaluations (counting the two per Jacobian).
    ftol, xtol : float
        Relative tolerances on the sum of squares and on the parameters.
    factor : float
        The first step bound, times the scaled norm of ``start``.

    Returns
    -------
    NonlinearFit

    Raises
    ------
    RuntimeError
        When the fit stops without converging: ``max_evaluations`` reached, or
        the tolerances cannot be met in floating point.

    Notes
    -----
    Moré (1978); the steps of MINPACK ``lmdif`` (module docstring).
    """
    with np.errstate(all="ignore"):   # NaN and infinities propagate as in MINPACK
        return _fit(model, np.asarray(x, dtype=float), np.asarray(y, dtype=float),
                    [np.float64(v) for v in start], max_evaluations, ftol, xtol, factor)


def _fit(model, xdata, ydata, p, max_evaluations, ftol, xtol, factor) -> NonlinearFit:
    n = len(p)
    if n != 2:
        raise ValueError(f"fit_nonlinear fits two parameters, not {n}")

    def residuals(params):
        return np.asarray(model(xdata, *params), dtype=float) - ydata

    fvec = residuals(p)
    m = fvec.size
    if m < n:
        raise ValueError(f"fit_nonlinear needs at least {n} points, not {m}")
    nfev = 1
    fnorm = _norm(fvec)
    par = 0.0
    iteration = 1
    eps = np.sqrt(max(_EPS, _EPS))
    diag = [0.0] * n
    delta = xnorm = 0.0
    while True:
        # forward-difference Jacobian
        fjac = np.empty((m, n), order="F")   # columns contiguous
        for j in range(n):
            temp = p[j]
            h = eps * abs(temp)
            if h == 0:
                h = eps
            p[j] = temp + h
            wa = residuals(p)
            p[j] = temp
            np.subtract(wa, fvec, out=wa)   # wa is a fresh array: difference in place
            np.divide(wa, h, out=fjac[:, j])
        nfev += n
        order, rdiag, acnorm = _qr_pivoted(fjac)
        if iteration == 1:
            diag = [v if v != 0 else 1.0 for v in acnorm]
            xnorm = _norm([diag[j] * p[j] for j in range(n)])
            delta = factor * xnorm
            if delta == 0:
                delta = factor
        # Q' f, first n components
        wa4 = fvec.copy()
        qtf = [0.0] * n
        for j in range(n):
            if fjac[j, j] != 0:
                temp = -_dot(fjac[j:, j], wa4[j:]) / fjac[j, j]
                wa4[j:] += fjac[j:, j] * temp
            fjac[j, j] = rdiag[j]
            qtf[j] = wa4[j]
        r = [[fjac[i, j] for j in range(n)] for i in range(n)]
        # scaled gradient
        gnorm = 0.0
        if fnorm != 0:
            for j in range(n):
                lj = order[j]
                if acnorm[lj] != 0:
                    s = 0.0
                    for i in range(j + 1):
                        s = s + r[i][j] * (qtf[i] / fnorm)
                    gnorm = max(gnorm, abs(s / acnorm[lj]))
        if gnorm <= 0.0:
            return NonlinearFit(params=tuple(float(v) for v in p), evaluations=nfev, reason=4)
        diag = [max(diag[j], acnorm[j]) for j in range(n)]
        while True:
            par, step = _step(r, order, diag, qtf, delta, par, n)
            step = [-v for v in step]
            trial = [p[j] + step[j] for j in range(n)]
            pnorm = _norm([diag[j] * step[j] for j in range(n)])
            if iteration == 1:
                delta = min(delta, pnorm)
            wa4 = residuals(trial)
            nfev += 1
            fnorm1 = _norm(wa4)
            actred = -1.0
            if 0.1 * fnorm1 < fnorm:
                actred = 1.0 - (fnorm1 / fnorm) * (fnorm1 / fnorm)
            wa3 = [0.0] * n
            for j in range(n):
                temp = step[order[j]]
                for i in range(j + 1):
                    wa3[i] = wa3[i] + r[i][j] * temp
            temp1 = _norm(wa3) / fnorm
            temp2 = (np.sqrt(par) * pnorm) / fnorm
            prered = temp1 * temp1 + temp2 * temp2 / 0.5
            dirder = -(temp1 * temp1 + temp2 * temp2)
            ratio = 0.0
            if prered != 0:
                ratio = actred / prered
            if ratio <= 0.25:
                if actred >= 0:
                    temp = 0.5
                if actred < 0:
                    temp = 0.5 * dirder / (dirder + 0.5 * actred)
                if 0.1 * fnorm1 >= fnorm or temp < 0.1:
                    temp = 0.1
                delta = temp * min(delta, pnorm / 0.1)
                par = par / temp
            elif par == 0 or ratio >= 0.75:
                delta = pnorm / 0.5
                par = 0.5 * par
            if ratio >= 0.0001:
                p = trial
                fvec = wa4
                xnorm = _norm([diag[j] * p[j] for j in range(n)])
                fnorm = fnorm1
                iteration += 1
            reason = 0
            small_change = abs(actred) <= ftol and prered <= ftol and 0.5 * ratio <= 1
            if small_change:
                reason = 1
            if delta <= xtol * xnorm:
                reason = 3 if small_change else 2
            if reason:
                return NonlinearFit(params=tuple(float(v) for v in p), evaluations=nfev,
                                    reason=reason)
            if nfev >= max_evaluations:
                raise RuntimeError(f"no convergence in {max_evaluations} evaluations")
            if ((abs(actred) <= _EPS and prered <= _EPS and 0.5 * ratio <= 1)
                    or delta <= _EPS * xnorm or gnorm <= _EPS):
                raise RuntimeError("the tolerances are too small to be met")
            if ratio >= 0.0001:
                break
