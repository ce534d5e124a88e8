"""scaling: allometric power laws y = a x^b, fitted on log-log scales."""
from .errors import (ConfigError, DataError, DegenerateDataWarning,
                     ExtrapolationWarning, OutputError, ScalingError,
                     ScalingWarning)
from .lines import ConfidenceInterval, LineFit, SlopeTest, fit_line
from .moments import Moments

__version__ = "0.1.0"

__all__ = [
    "__version__",
    "fit_line", "LineFit", "SlopeTest", "ConfidenceInterval", "Moments",
    "ScalingError", "ConfigError", "DataError", "OutputError",
    "ScalingWarning", "DegenerateDataWarning", "ExtrapolationWarning",
]
