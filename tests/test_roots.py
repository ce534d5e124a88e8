"""Brent's root finder of stats.roots against scipy.optimize.brentq.

Reference library: scipy.optimize.brentq (Brent 1973, ch. 4, in the form whose
steps stats.roots follows): the same root, bit for bit, and the same count of
function calls, on smooth, flat, steep and kinked functions.
"""

import math

import numpy as np
import pytest
from scipy import optimize

from scaling.stats.roots import brent_root

FUNCTIONS = [
    (lambda x: x * x - 2, 0.0, 2.0),
    (lambda x: math.cos(x) - x, 0.0, 1.0),
    (lambda x: x ** 3 - 2 * x - 5, 2.0, 3.0),          # Wallis's cubic
    (lambda x: math.exp(x) - 1e6, 0.0, 50.0),
    (lambda x: math.atan(x - 0.3) * 1e-8, -10.0, 10.0),
    (lambda x: (x - 1.0) ** 9, 0.0, 3.0),               # very flat at the root
    (lambda x: math.copysign(1.0, x - 0.123456789), -1.0, 1.0),   # a jump
    (lambda x: math.log(x) + x, 1e-9, 1.0),
    (lambda x: 1 - x, 1.0, 2.0),                        # root at the end
    (lambda x: x * x - 2, 2.0, 0.0),                    # reversed bracket
]


@pytest.mark.parametrize("f, a, b", FUNCTIONS)
@pytest.mark.parametrize("xtol", [2e-12, 1e-13, 1e-6, 1e-300])
def test_same_root_and_calls_as_scipy_optimize(f, a, b, xtol):
    calls = {"ours": 0, "scipy": 0}

    def counted(key):
        def g(x):
            calls[key] += 1
            return f(x)
        return g

    try:
        want = optimize.brentq(counted("scipy"), a, b, xtol=xtol)
    except RuntimeError:   # no convergence in 100 steps: ours says so too
        with pytest.raises(RuntimeError):
            brent_root(counted("ours"), a, b, xtol=xtol)
        return
    got = brent_root(counted("ours"), a, b, xtol=xtol)
    assert got == want   # scipy.optimize.brentq as reference library: same bits
    assert calls["ours"] == calls["scipy"]


def test_random_cubics_same_bits_as_scipy_optimize():
    rng = np.random.default_rng(3)
    for _ in range(300):
        r, c1, c2 = rng.normal(size=3) * 10 ** rng.uniform(-3, 3, 3)

        def f(x):
            return (x - r) * (x * x + c1 * c1 + 1e-3) * (1 + 0.1 * math.sin(c2 * x))

        a, b = r - abs(c1) - 0.5, r + abs(c2) + 0.25
        # scipy.optimize.brentq as reference library: same bits
        assert brent_root(f, a, b, xtol=1e-13) == optimize.brentq(f, a, b, xtol=1e-13)


def test_errors_as_scipy_optimize():
    with pytest.raises(ValueError):
        brent_root(lambda x: x * x + 1, -1.0, 1.0)   # no sign change
    with pytest.raises(ValueError):
        brent_root(lambda x: math.nan if x > 0.5 else x - 0.7, 0.0, 1.0)
    with pytest.raises(ValueError):
        brent_root(lambda x: x, -1.0, 1.0, xtol=0.0)
    with pytest.raises(RuntimeError):
        brent_root(lambda x: (x - 1.0) ** 9, 0.0, 3.0, maxiter=5)
    # exact law: the positive root of x^2 - 2 is sqrt 2
    assert brent_root(lambda x: x * x - 2, 0.0, 2.0, xtol=1e-15) == pytest.approx(
        math.sqrt(2), rel=1e-15)
