"""scaling: allometric power laws y = a x^b, fitted on log-log scales.

The public names are imported lazily (PEP 562): ``import scaling`` loads only
this file and ``_version``, and ``scaling.fit_line`` imports ``scaling.api``
on first use.  ``scaling --version`` and the CLI's start-up therefore do not
pay for numpy, scipy, pandas, statsmodels or matplotlib.  To add a public
name, add one ``"name": "module"`` entry to :data:`_EXPORTS`.
"""
from __future__ import annotations

import importlib

from ._version import __version__

# public name -> submodule that defines it
_EXPORTS: dict[str, str] = {
    # errors and warnings
    "ScalingError": "errors", "ConfigError": "errors", "DataError": "errors",
    "OutputError": "errors", "ScalingWarning": "errors", "DegenerateDataWarning": "errors",
    "ExtrapolationWarning": "errors", "DataWarning": "errors", "FigureWarning": "errors",
    # lines
    "fit_line": "api", "fit_groups": "api", "LineFit": "stats.line_results",
    "SlopeTest": "stats.line_results", "ConfidenceInterval": "stats.line_results",
    # groups
    "compare_groups": "stats.group_comparisons", "group_means": "stats.group_means",
    "fit_group_means": "stats.group_means", "GroupComparison": "stats.group_comparisons",
    # moments, several predictors
    "Moments": "stats.moments",
    "fit_multi": "stats.several_predictors", "MultiFit": "stats.several_predictors",
    "compare_groups_multi": "stats.several_groups",
    "MultiGroupComparison": "stats.several_groups",
    "check_multi": "stats.several_checks", "MultiChecks": "stats.several_checks",
    # phylogeny, many groups
    "fit_phylo": "stats.phylogeny", "PhyloFit": "stats.phylogeny",
    "read_newick": "stats.newick",
    "exponent_spread": "stats.spread", "ExponentSpread": "stats.spread",
    # runs and saved results
    "run_config": "run.pipeline", "RunResult": "run.pipeline",
    "load_results": "run.saved_predictions",
    # prediction
    "predict": "stats.predictions", "inverse_predict": "stats.predictions",
    "accuracy": "stats.predictions",
    # figures
    "plot_groups": "render.plots",
}

__all__ = ["__version__", *_EXPORTS]


def __getattr__(name: str):
    module = _EXPORTS.get(name)
    if module is None:
        # The four floors stay reachable as attributes (scaling.stats), as when eager.
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
