"""scaling: allometric power laws y = a x^b, fitted on log-log scales.

The public names are imported lazily (PEP 562): ``import scaling`` loads only
this file and ``_version``, and ``scaling.fit_line`` imports ``scaling.lines``
on first use.  ``scaling --version`` and the CLI's start-up therefore do not
pay for numpy, scipy, pandas, statsmodels or matplotlib.  To add a public
name, add one ``"name": "module"`` entry to :data:`_EXPORTS`.
"""
from __future__ import annotations

import importlib
import sys
import types

from ._version import __version__

# public name -> submodule that defines it
_EXPORTS: dict[str, str] = {
    # errors and warnings
    "ScalingError": "errors", "ConfigError": "errors", "DataError": "errors",
    "OutputError": "errors", "ScalingWarning": "errors", "DegenerateDataWarning": "errors",
    "ExtrapolationWarning": "errors", "DataWarning": "errors", "FigureWarning": "errors",
    # lines
    "fit_line": "api", "fit_groups": "api", "LineFit": "lines", "SlopeTest": "lines",
    "ConfidenceInterval": "lines",
    # groups
    "compare_groups": "groups", "group_means": "groups", "fit_group_means": "groups",
    "GroupComparison": "groups",
    # moments, several predictors
    "Moments": "moments",
    "fit_multi": "multi", "MultiFit": "multi",
    # phylogeny, many groups
    "fit_phylo": "phylo", "PhyloFit": "phylo", "read_newick": "newick",
    "exponent_spread": "spread", "ExponentSpread": "spread",
    # runs and saved results
    "run_config": "pipeline", "RunResult": "pipeline",
    "load_results": "saved",
    # prediction
    "predict": "predict", "inverse_predict": "predict", "accuracy": "predict",
}

__all__ = ["__version__", *_EXPORTS]


def __getattr__(name: str):
    module = _EXPORTS.get(name)
    if module is None:
        # Submodules stay reachable as attributes (scaling.lines), as when eager.
        try:
            return importlib.import_module(f".{name}", __name__)
        except ModuleNotFoundError as exc:
            if exc.name != f"{__name__}.{name}":
                raise
            raise AttributeError(f"module 'scaling' has no attribute {name!r}") from None
    value = getattr(importlib.import_module(f".{module}", __name__), name)
    globals()[name] = value      # later look-ups skip this function
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))


class _Package(types.ModuleType):
    """Keeps a public function whose name is also a submodule's (``predict``)
    bound to the function: importing the submodule (as ``pipeline`` does)
    would otherwise rebind ``scaling.predict`` to the module."""

    def __setattr__(self, name, value):
        if (isinstance(value, types.ModuleType) and _EXPORTS.get(name) == name
                and value.__name__ == f"{__name__}.{name}"):
            value = getattr(value, name)
        super().__setattr__(name, value)


sys.modules[__name__].__class__ = _Package
