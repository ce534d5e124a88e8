"""The one registry of a run's figures: kind -> maker, caption, drawing cost.

Everything that asks about a figure kind reads :data:`FIGURES`: the figure
writer (:mod:`scaling.render.figures`) for the maker, the report
(:mod:`scaling.render.report`) for the caption, the figure worker
(:mod:`scaling.render.figure_worker`) for the cost.  Makers are named by
``"module:function"`` and imported only when a figure is drawn, so reading a
caption or a cost never loads matplotlib.

The kinds a config may ask for (``figures.kinds``) are the vocabulary
:data:`scaling.stats.schema.FIGURE_KINDS` (the config reads it without
importing render); the registry holds exactly those, in that order, plus the
figures a run draws beyond them (``configurable=False``).
"""

from __future__ import annotations

import importlib
from dataclasses import dataclass
from typing import Callable

from ..errors import ConfigError
from ..stats.schema import FIGURE_KINDS

__all__ = ["FigureKind", "FIGURES", "KINDS", "figure_kind", "partial_figure_name"]


@dataclass(frozen=True, slots=True, kw_only=True)
class FigureKind:
    """One kind of figure.

    Attributes
    ----------
    name : str
        The kind (``figures/<name>.<format>``).
    maker : str or callable
        ``"module:function"`` (a module of :mod:`scaling.render`), or the
        function itself; called as ``maker(result, size=...)`` and returns a
        :class:`matplotlib.figure.Figure`.
    caption : str
        The report's caption under the figure.
    cost : int
        Rough relative cost of drawing and saving it (measured on the demo):
        how the figure worker splits a run's figures between two processes.
    configurable : bool
        True for the kinds ``figures.kinds`` may name; False for figures a
        run draws beyond them (many groups, several predictors).
    """

    name: str
    maker: str | Callable
    caption: str
    cost: int
    configurable: bool = True

    def make(self) -> Callable:
        """The maker function (its module is imported on first use)."""
        if callable(self.maker):
            return self.maker
        module, _, func = self.maker.partition(":")
        return getattr(importlib.import_module(f".{module}", __package__), func)


FIGURES: dict[str, FigureKind] = {kind.name: kind for kind in (
    FigureKind(
        name="scaling", maker="figure_scaling:make_scaling", cost=3,
        caption="Data on log–log axes in natural units; fitted lines over the fitted range "
                "with their confidence bands; group means ± 1 SE (back-transformed)."),
    FigureKind(
        name="natural", maker="figure_natural:make_natural", cost=2,
        caption="Back-transformed fitted curves on arithmetic axes with prediction bands."),
    FigureKind(
        name="exponents", maker="figure_exponents:make_exponents", cost=1,
        caption="Fitted exponents with confidence intervals for every fit; dashed lines "
                "mark the hypothesised exponents."),
    FigureKind(
        name="residuals", maker="figure_residuals:make_residuals", cost=4,
        caption="Residuals on the log scale against position along each line, and against "
                "normal quantiles."),
    FigureKind(
        name="group_exponents", maker="figure_exponents:make_group_exponents", cost=2,
        configurable=False,
        caption="Per-group exponents ordered by size with their confidence intervals; the "
                "random-effects mean and its interval (line and band); dotted lines mark "
                "the hypothesised exponents; only flagged groups are named."),
    FigureKind(
        name="partial", maker="figure_partial:make_partial", cost=2, configurable=False,
        caption="Partial relationship of y with one predictor, the others held at their "
                "geometric means."),
)}

#: The kinds a config may name, in the config's order.
KINDS: tuple = tuple(name for name, kind in FIGURES.items() if kind.configurable)
if KINDS != tuple(FIGURE_KINDS):   # the config's vocabulary and the registry must agree
    raise ImportError(f"figure registry {KINDS} differs from stats.schema.FIGURE_KINDS "
                      f"{tuple(FIGURE_KINDS)}")


def figure_kind(name: str) -> FigureKind:
    """The registry entry of ``name``.

    Raises
    ------
    ConfigError
        If ``name`` is not a kind a config may ask for or a run draws.
    """
    try:
        return FIGURES[name]
    except KeyError:
        raise ConfigError(f"figure kind must be one of {', '.join(KINDS)}, not {name!r}") from None


def partial_figure_name(term: str) -> str:
    """The file stem of the partial figure of ``term`` (several predictors): the figure
    writer names its files so, and the report finds them by it."""
    return "partial_" + "".join(ch if ch.isalnum() or ch in "-_" else "_" for ch in term)
