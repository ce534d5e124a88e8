"""scaling: allometric power laws y = a x^b, fitted on log-log scales."""
from .errors import (ConfigError, DataError, DataWarning, DegenerateDataWarning,
                     ExtrapolationWarning, FigureWarning, OutputError, ScalingError,
                     ScalingWarning)
from .lines import ConfidenceInterval, LineFit, SlopeTest
from .api import fit_groups, fit_line
from .groups import GroupComparison, compare_groups, fit_group_means, group_means
from .moments import Moments
from .multi import MultiFit, fit_multi
from .newick import read_newick
from .phylo import PhyloFit, fit_phylo
from .spread import ExponentSpread, exponent_spread
from .pipeline import RunResult, run_config
from .predict import accuracy, inverse_predict, predict
from .saved import load_results

from ._version import __version__  # noqa: E402

__all__ = [
    "__version__",
    "fit_line", "fit_groups", "fit_multi", "fit_phylo", "PhyloFit", "read_newick",
    "exponent_spread", "ExponentSpread", "MultiFit", "compare_groups", "group_means", "fit_group_means", "GroupComparison",
    "run_config", "RunResult", "load_results", "predict",
    "inverse_predict", "accuracy", "LineFit", "SlopeTest", "ConfidenceInterval", "Moments",
    "ScalingError", "ConfigError", "DataError", "OutputError",
    "ScalingWarning", "DegenerateDataWarning", "ExtrapolationWarning",
    "DataWarning", "FigureWarning",
]
