"""A root of a function of one variable in a bracket, by Brent's method.

Brent (1973), *Algorithms for Minimization without Derivatives*, ch. 4: keep a
bracket [b, c] with f(b) f(c) <= 0 and |f(b)| <= |f(c)|; try an interpolation
step (secant through the last two points, or inverse quadratic through
three) and accept it only when it falls well inside the bracket and shrinks
the step at least by half every other step; otherwise bisect.  The method
never needs more than about the square of the bisection count and usually
converges superlinearly.

The steps (the acceptance test 2|s| < min(|s_prev|, 3|m| - delta), with m
half the bracket and delta = (xtol + rtol |b|)/2, and the minimum step delta)
are those of ``scipy.optimize.brentq``, so :func:`brent_root` returns the
same point.
"""

from __future__ import annotations

import math
from collections.abc import Callable

__all__ = ["brent_root"]

_RTOL = 4 * 2.220446049250313e-16


def brent_root(f: Callable[[float], float], a: float, b: float, *, xtol: float = 2e-12,
               rtol: float = _RTOL, maxiter: int = 100) -> float:
    """A zero of ``f`` between ``a`` and ``b`` (Brent 1973, ch. 4).

    Parameters
    ----------
    f : callable
        f(x) -> float, continuous on [a, b], with f(a) and f(b) of opposite signs.
    a, b : float
        The bracket.
    xtol, rtol : float
        The root is found to within xtol + rtol |x| (xtol > 0, rtol >= 4 eps).
    maxiter : int
        Most interpolation or bisection steps.

    Returns
    -------
    float
        The root (a or b itself when f vanishes there).

    Raises
    ------
    ValueError
        When f(a) and f(b) have the same sign, f is NaN at a point tried, or a
        tolerance is out of range.
    RuntimeError
        When ``maxiter`` steps do not converge.
    """
    if not xtol > 0:
        raise ValueError(f"xtol must be positive, not {xtol}")
    if not rtol >= _RTOL:
        raise ValueError(f"rtol must be at least {_RTOL}, not {rtol}")
    x_pre, x_cur = float(a), float(b)
    f_pre, f_cur = _value(f, x_pre), _value(f, x_cur)
    if f_pre == 0:
        return x_pre
    if f_cur == 0:
        return x_cur
    if math.copysign(1.0, f_pre) == math.copysign(1.0, f_cur):
        raise ValueError("f(a) and f(b) must have different signs")
    x_blk = f_blk = s_pre = s_cur = 0.0
    for _ in range(maxiter):
        if f_pre != 0 and f_cur != 0 and (math.copysign(1.0, f_pre)
                                          != math.copysign(1.0, f_cur)):
            # the root lies between x_pre and x_cur: they become the bracket
            x_blk, f_blk = x_pre, f_pre
            s_pre = s_cur = x_cur - x_pre
        if abs(f_blk) < abs(f_cur):
            # keep the best point in x_cur
            x_pre, x_cur, x_blk = x_cur, x_blk, x_cur
            f_pre, f_cur, f_blk = f_cur, f_blk, f_cur
        delta = (xtol + rtol * abs(x_cur)) / 2
        s_bis = (x_blk - x_cur) / 2
        if f_cur == 0 or abs(s_bis) < delta:
            return x_cur
        if abs(s_pre) > delta and abs(f_cur) < abs(f_pre):
            if x_pre == x_blk:
                # secant through two points
                s_try = -f_cur * (x_cur - x_pre) / (f_cur - f_pre)
            else:
                # inverse quadratic through three points
                d_pre = (f_pre - f_cur) / (x_pre - x_cur)
                d_blk = (f_blk - f_cur) / (x_blk - x_cur)
                s_try = (-f_cur * (f_blk * d_blk - f_pre * d_pre)
                         / (d_blk * d_pre * (f_blk - f_pre)))
            if 2 * abs(s_try) < min(abs(s_pre), 3 * abs(s_bis) - delta):
                s_pre, s_cur = s_cur, s_try   # a good short step
            else:
                s_pre = s_cur = s_bis
        else:
            s_pre = s_cur = s_bis
        x_pre, f_pre = x_cur, f_cur
        if abs(s_cur) > delta:
            x_cur += s_cur
        else:
            x_cur += delta if s_bis > 0 else -delta
        f_cur = _value(f, x_cur)
    raise RuntimeError(f"no convergence in {maxiter} steps")


def _value(f, x: float) -> float:
    v = float(f(x))
    if math.isnan(v):
        raise ValueError(f"the function is NaN at x = {x}")
    return v
