"""Logarithm bases: how a base is read from a config, written in outputs and applied.

The small vocabulary every numeric module shares (:mod:`scaling.stats.lines`,
:mod:`scaling.stats.predictions`, ...); it imports nothing of the package but
:mod:`scaling.errors`.
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import ConfigError

__all__ = ["log_word", "parse_log_base", "base_label", "to_log"]


def log_word(base: float | None) -> str:
    """How a logarithm in ``base`` is written in labels: "log10", "ln", "log2" ("log" for None)."""
    if base is None:
        return "log"
    if math.isclose(base, math.e):
        return "ln"
    return f"log{int(base)}"


def parse_log_base(log_base) -> float | None:
    """Return the numeric base for ``10``, ``"e"``, ``2`` (or None for logs given).

    Raises
    ------
    ConfigError
        If the base is not one of 10, e, 2 or None.
    """
    if log_base is None:
        return None
    if isinstance(log_base, str):
        key = log_base.strip().lower()
        table = {"10": 10.0, "e": math.e, "2": 2.0, "none": None}
        if key in table:
            return table[key]
    elif isinstance(log_base, (int, float)) and not isinstance(log_base, bool):
        for value in (10.0, math.e, 2.0):
            if math.isclose(float(log_base), value):
                return value
    raise ConfigError(f"log_base must be 10, 'e', 2 or None, not {log_base!r}")


def base_label(base: float | None) -> str:
    """The way a base is written in outputs: "10", "e", "2" or "none"."""
    if base is None:
        return "none"
    if math.isclose(base, math.e):
        return "e"
    return str(int(base))


def to_log(values, base: float | None) -> np.ndarray:
    """Logarithm in ``base`` (identity when ``base`` is None)."""
    values = np.asarray(values, dtype=float)
    if base is None:
        return values
    return np.log(values) / math.log(base)
