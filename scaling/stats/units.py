"""Units of measurement: parsing, conversion, and the units of the constant a.

Unit strings are read by ``pint`` (any unit it understands: ``g``, ``kg``,
``mW``, ``W``, ``cm``, ``mL/h``, ...).  A model may be fitted in other units
than the data's: each value is multiplied by the conversion factor
c = (1 data unit) expressed in the model unit.

Effect of a change of units on y = a x^b (an exact law)
    With x' = c_x x and y' = c_y y, y' = c_y a (x'/c_x)^b, so
        log a' = log a + log c_y - b log c_x,    b' = b.
    With several predictors, log a' = log a + log c_y - sum_j b_j log c_xj.
    The exponents never change; only the constant does.

Units of a
    a = y / prod x_j^{b_j}, so its unit is [y]·[x1]^-b1·[x2]^-b2..., e.g.
    ``W·kg^-0.75`` for a metabolic rate in W against mass in kg with b = 0.75.
    Its interval in natural units is base^(intercept bounds): the interval of
    the median of y at x = 1 unit (no bias correction applied).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache
from typing import Sequence

import numpy as np

from ..errors import ConfigError
from .lines import base_label, parse_log_base

__all__ = [
    "NormalisationConstant",
    "parse_unit",
    "check_unit",
    "unit_symbol",
    "conversion_factor",
    "convert_intercept",
    "normalisation_constant",
]


#: SI-prefixed symbols of common units that pint always reads, each with the
#: short symbol pint writes for it ("uL" -> "µl"; the tests check every pair
#: against pint).  Configs naming only these never load pint, whose registry
#: costs about 0.3 s of start-up.
PLAIN_SYMBOLS = {
    prefix + symbol: ("µ" if prefix == "u" else prefix) + ("l" if symbol == "L" else symbol)
    for prefix in ("", "n", "u", "m", "c", "d", "k", "M", "G")
    for symbol in ("g", "m", "L", "s", "W", "J", "mol", "Pa")}
PLAIN_UNITS = frozenset(PLAIN_SYMBOLS)


@lru_cache(maxsize=1)
def _registry():
    import pint
    return pint.UnitRegistry()


def parse_unit(text, *, key: str = "data.units"):
    """Read a unit string with pint.

    Parameters
    ----------
    text : str
        E.g. ``"g"``, ``"mW"``, ``"mL/h"``.
    key : str
        Key path named in the error message (e.g. ``"model.units.x"``).

    Returns
    -------
    pint.Unit

    Raises
    ------
    ConfigError
        If pint does not know the unit, or the text is not a string.

    Examples
    --------
    >>> str(parse_unit("mW"))
    'milliwatt'
    >>> parse_unit("furlongs per fortnite", key="data.units.x")
    Traceback (most recent call last):
    ...
    scaling.errors.ConfigError: data.units.x: unknown unit 'furlongs per fortnite' (pint cannot read it)
    """
    if not isinstance(text, str) or not text.strip():
        raise ConfigError(f"{key}: a unit must be a non-empty string, not {text!r}")
    ureg = _registry()
    try:
        unit = ureg.Unit(text.strip())
    except Exception:
        raise ConfigError(f"{key}: unknown unit {text!r} (pint cannot read it)") from None
    return unit


def check_unit(text, *, key: str = "data.units") -> str:
    """Check that ``text`` names a unit; return it stripped.

    Common SI symbols (:data:`PLAIN_UNITS`) are accepted at once; anything
    else is read by pint, as in :func:`parse_unit`.

    Raises
    ------
    ConfigError
        Not a string, or a unit pint cannot read.

    Examples
    --------
    >>> check_unit("mW"), check_unit("mL/h")
    ('mW', 'mL/h')
    """
    if isinstance(text, str) and text.strip() in PLAIN_UNITS:
        return text.strip()
    parse_unit(text, key=key)
    return text.strip()


def unit_symbol(text, *, key: str = "data.units") -> str:
    """Short symbol of a unit as pint writes it (``"milligram"`` -> ``"mg"``).

    Examples
    --------
    >>> unit_symbol("kilogram"), unit_symbol("mW")
    ('kg', 'mW')
    """
    if isinstance(text, str) and text.strip() in PLAIN_SYMBOLS:
        return PLAIN_SYMBOLS[text.strip()]
    unit = parse_unit(text, key=key)
    sym = f"{unit:~}"
    if any(ch in sym for ch in " /*"):
        sym = "(" + sym.replace(" ", "") + ")"
    return sym


def conversion_factor(from_unit, to_unit, *, key: str = "model.units") -> float:
    """Factor c such that a value v in ``from_unit`` is c·v in ``to_unit``.

    Parameters
    ----------
    from_unit, to_unit : str
        Pint unit strings, e.g. the data's ``"g"`` and the model's ``"kg"``.
    key : str
        Key path named in error messages.

    Returns
    -------
    float

    Raises
    ------
    ConfigError
        Unknown units, units of different dimensions, or offset units
        (``degC``: a power law needs a scale through zero).

    Examples
    --------
    >>> conversion_factor("g", "kg")
    0.001
    >>> conversion_factor("mW", "W")
    0.001
    """
    src = parse_unit(from_unit, key=key)
    dst = parse_unit(to_unit, key=key)
    ureg = _registry()
    try:
        one = ureg.Quantity(1.0, src).to(dst).magnitude
        zero = ureg.Quantity(0.0, src).to(dst).magnitude
    except Exception as exc:
        if src.dimensionality != dst.dimensionality:
            raise ConfigError(f"{key}: cannot convert {from_unit!r} to {to_unit!r} "
                              f"({src.dimensionality} is not {dst.dimensionality})") from None
        raise ConfigError(f"{key}: cannot convert {from_unit!r} to {to_unit!r} "
                          f"({type(exc).__name__})") from None
    if zero != 0:
        raise ConfigError(f"{key}: {from_unit!r} to {to_unit!r} has an offset (like degC to "
                          "K); a power law needs units that scale through zero, e.g. K")
    return float(one)


def convert_intercept(intercept: float, slopes, *, x_factors, y_factor: float,
                      log_base=10) -> float:
    """Log intercept after converting x (and y) by the given factors.

    Parameters
    ----------
    intercept : float
        log a in ``log_base`` for the original units.
    slopes : float or sequence of float
        The exponents b (one per predictor).
    x_factors : float or sequence of float
        Conversion factor of each predictor (see :func:`conversion_factor`).
    y_factor : float
        Conversion factor of y.
    log_base : {10, "e", 2}

    Returns
    -------
    float
        log a' = log a + log c_y - sum_j b_j log c_xj (exponents unchanged).

    Examples
    --------
    >>> round(convert_intercept(0.5, 0.75, x_factors=0.001, y_factor=0.001), 12)
    -0.25
    """
    base = parse_log_base(log_base)
    if base is None:
        raise ConfigError("log_base must be 10, 'e' or 2 to convert units")
    b = np.atleast_1d(np.asarray(slopes, dtype=float))
    cx = np.atleast_1d(np.asarray(x_factors, dtype=float))
    if b.shape != cx.shape:
        raise ConfigError(f"x_factors must give one factor per exponent ({b.size}), "
                          f"got {cx.size}")
    if np.any(cx <= 0) or not y_factor > 0:
        raise ConfigError("conversion factors must be positive")
    ln_b = math.log(base)
    return float(intercept + math.log(y_factor) / ln_b - np.sum(b * np.log(cx)) / ln_b)


@dataclass(frozen=True, slots=True, kw_only=True)
class NormalisationConstant:
    """The constant a of y = a x^b with its units and interval.

    Attributes
    ----------
    value : float
        a = base^intercept (median of y where every x is 1 unit).
    low, high : float
        base^(intercept bounds).
    unit : str
        E.g. ``"W·kg^-0.75"``.
    intercept : float
        log a.
    log_base : float
    confidence : float or None
    """

    value: float
    low: float
    high: float
    unit: str
    intercept: float
    log_base: float
    confidence: float | None = None

    def to_frame(self):
        import pandas as pd
        return pd.DataFrame([{
            "a": self.value, "a_low": self.low, "a_high": self.high, "a_unit": self.unit,
            "intercept": self.intercept, "log_base": base_label(self.log_base),
            "confidence": self.confidence,
        }])

    def summary(self) -> str:
        """One line: a with its unit and interval."""
        from ..render.summaries import normalisation_constant_summary
        return normalisation_constant_summary(self)


def _format_power(symbol: str, power: float, digits: int) -> str:
    if power == 0:
        return ""
    p = float(f"{power:.{digits}g}")
    if p == 1:
        return symbol
    return f"{symbol}^{p:g}"


def normalisation_constant(intercept: float, intercept_ci, slopes, *, x_units, y_unit: str,
                           log_base=10, confidence: float | None = None,
                           digits: int = 3) -> NormalisationConstant:
    """The constant a in natural units, with its unit string and interval.

    Parameters
    ----------
    intercept : float
        log a.
    intercept_ci : (low, high)
        Bounds of log a (e.g. ``fit.intercept_ci``).
    slopes : float or sequence of float
        Exponents b_j.
    x_units : str or sequence of str
        Unit of each predictor.
    y_unit : str
    log_base : {10, "e", 2}
    confidence : float, optional
        Level of ``intercept_ci`` (echoed).
    digits : int
        Significant digits of the exponents in the unit string.

    Returns
    -------
    NormalisationConstant

    Examples
    --------
    >>> c = normalisation_constant(-1.5, (-1.6, -1.4), 0.75, x_units="kg", y_unit="W")
    >>> c.unit, round(c.value, 5)
    ('W·kg^-0.75', 0.03162)
    """
    base = parse_log_base(log_base)
    if base is None:
        raise ConfigError("log_base must be 10, 'e' or 2 to report a in natural units")
    b = np.atleast_1d(np.asarray(slopes, dtype=float))
    xs = [x_units] if isinstance(x_units, str) else list(x_units)
    if len(xs) != b.size:
        raise ConfigError(f"x_units must give one unit per exponent ({b.size}), got {len(xs)}")
    parts = [unit_symbol(y_unit, key="units.y")]
    for j, (u, bj) in enumerate(zip(xs, b)):
        key = "units.x" if b.size == 1 else f"units.x[{j}]"
        part = _format_power(unit_symbol(u, key=key), -bj, digits)
        if part:
            parts.append(part)
    lo, hi = intercept_ci
    return NormalisationConstant(value=float(base ** intercept), low=float(base ** lo),
                                 high=float(base ** hi), unit="·".join(parts),
                                 intercept=float(intercept), log_base=base,
                                 confidence=confidence)
