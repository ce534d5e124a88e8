"""One exception family and one warning family for everything a user can get wrong.

Library code raises these; only :func:`scaling.cli.main` prints them and picks
the exit code (2 for a :class:`ScalingError`).
"""

from __future__ import annotations

__all__ = [
    "ScalingError",
    "ConfigError",
    "DataError",
    "OutputError",
    "ScalingWarning",
    "DegenerateDataWarning",
    "ExtrapolationWarning",
    "DataWarning",
    "FigureWarning",
]


class ScalingError(Exception):
    """Base class of every error a user can cause (bad config, data or output)."""


class ConfigError(ScalingError):
    """The configuration is wrong; the message names the key path."""


class DataError(ScalingError):
    """The data are wrong or insufficient; the message names file, column or row."""


class OutputError(ScalingError):
    """An output location cannot be used (e.g. non-empty without ``--force``)."""


class ScalingWarning(UserWarning):
    """Base class of the warnings ``scaling`` emits."""


class DegenerateDataWarning(ScalingWarning):
    """Legal but degenerate data: zero variance, perfect correlation, tiny n."""


class ExtrapolationWarning(ScalingWarning):
    """A prediction was asked for outside the fitted range of x (or y)."""


class DataWarning(ScalingWarning):
    """The data were read, but something the config asks for looks unintended.

    For example an ``exclude`` value that matches no row (often a typo).
    """


class FigureWarning(ScalingWarning):
    """A figure could not be drawn and was skipped; the numeric results are unaffected."""
