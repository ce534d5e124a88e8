"""Levenberg-Marquardt of stats.nonlinear against scipy.optimize.curve_fit.

Reference library: scipy.optimize.curve_fit (MINPACK lmdif, whose steps
stats.nonlinear follows), on y = a x^b as stats.error_structure fits it: the
same parameters to 1e-12 relative (in practice the same bits), the same
failures, and on the shipped demo data the same numbers.
"""

import math
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import optimize

from scaling.stats.nonlinear import fit_nonlinear

DEMO = Path(__file__).resolve().parents[1] / "demo_data"


def _power(xv, a, b):
    out = np.power(xv, b)
    out *= a
    return out


def _scaled(x, y):
    """The additive-error problem as stats.error_structure poses it: x and y over
    their geometric means, started from the log-scale OLS line."""
    lx, ly = np.log(x), np.log(y)
    b, ln_a = np.polyfit(lx, ly, 1)
    cx, cy = float(np.mean(lx)), float(np.mean(ly))
    return np.exp(lx - cx), np.exp(ly - cy), (math.exp(ln_a + b * cx - cy), b)


def _both(xs, ys, p0, maxfev=5000):
    with warnings.catch_warnings(), np.errstate(over="ignore", invalid="ignore"):
        warnings.simplefilter("ignore")
        try:
            want = tuple(optimize.curve_fit(_power, xs, ys, p0=p0, maxfev=maxfev)[0])
        except RuntimeError:
            want = None
        try:
            got = fit_nonlinear(_power, xs, ys, p0, max_evaluations=maxfev).params
        except RuntimeError:
            got = None
    return got, want


def test_seeded_power_laws_match_curve_fit():
    rng = np.random.default_rng(11)
    for _ in range(60):
        n = int(rng.integers(5, 2000))
        x = np.exp(rng.uniform(0, rng.uniform(0.5, 10), n))
        y = 2 * x ** rng.uniform(0.3, 1.2) * np.exp(rng.normal(0, rng.uniform(0.01, 1.5), n))
        got, want = _both(*_scaled(x, y))
        assert (got is None) == (want is None)
        if want is not None:
            # scipy.optimize.curve_fit as reference library
            np.testing.assert_allclose(got, want, rtol=1e-12, atol=0)


@pytest.mark.parametrize("name, xcol, ycol", [
    ("resting_rate.csv", "body_mass", "resting_rate"),
    ("metabolic_rate.csv", "body_mass_g", "bmr_mW"),
    ("fish_length_weight.csv", "length_cm", "weight_g"),
    ("forest_trees.csv", "diameter_cm", "biomass_kg"),
    ("bone_mass.csv", "femur_circumference_mm", "body_mass_kg")])
def test_shipped_demo_data_match_curve_fit(name, xcol, ycol):
    table = pd.read_csv(DEMO / name)
    sel = table[[xcol, ycol]].apply(pd.to_numeric, errors="coerce").dropna()
    sel = sel[(sel[xcol] > 0) & (sel[ycol] > 0)]
    got, want = _both(*_scaled(sel[xcol].to_numpy(float), sel[ycol].to_numpy(float)))
    assert want is not None
    # scipy.optimize.curve_fit as reference library
    np.testing.assert_allclose(got, want, rtol=1e-12, atol=0)


def test_failures_as_curve_fit():
    # too few evaluations allowed: both give up (RuntimeError)
    rng = np.random.default_rng(2)
    x = np.exp(rng.uniform(0, 6, 300))
    y = 3 * x ** 0.7 * np.exp(rng.normal(0, 0.8, 300))
    got, want = _both(*_scaled(x, y), maxfev=4)
    assert got is None and want is None   # scipy.optimize.curve_fit as reference
    # a start where the model overflows: both fail or both agree
    xs = np.array([1e-3, 1.0, 2.0, 1e3, 1e6])
    ys = np.array([1.0, 2.0, 0.5, 3.0, 1e-3])
    got, want = _both(xs, ys, (1.0, 60.0))
    assert (got is None) == (want is None)
    if want is not None:
        np.testing.assert_allclose(got, want, rtol=1e-12, atol=0)


def test_exact_power_law_recovered():
    # exact law: points on y = 2.5 x^0.75 are fitted with zero residual
    x = np.linspace(0.5, 20, 40)
    fit = fit_nonlinear(_power, x, 2.5 * x ** 0.75, (1.0, 1.0))
    assert fit.params == pytest.approx((2.5, 0.75), rel=1e-9)


def test_pivoted_columns_match_curve_fit_bits():
    # scipy.optimize.curve_fit as reference library, bit for bit: a model whose second
    # parameter's Jacobian column is the larger one, so the QR swaps the columns
    def line(xv, a, b):
        return a + b * 1e3 * xv

    rng = np.random.default_rng(3)
    for n in (3, 5, 400):
        x = rng.uniform(1, 2, n)
        y = 0.5 + 2e3 * x + rng.normal(0, 0.1, n)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            want = tuple(optimize.curve_fit(line, x, y, p0=(1.0, 1.0))[0])
        got = fit_nonlinear(line, x, y, (1.0, 1.0)).params
        assert got == want, (n, got, want)
