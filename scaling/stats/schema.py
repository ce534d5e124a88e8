"""The vocabulary of scaling, stated once: table columns, line methods, option values.

Every output table's columns, the catalogue of line methods (with their
display label, symmetry, how they are fitted, which tests and group
comparisons apply and how figures draw them) and the allowed values of every
enumerated option live here.  The other modules read these names; nothing
here computes.  This module imports only :mod:`scaling.errors`, so any layer
(config, numeric core, figures, report) may import it.

Adding a line method is one :class:`MethodInfo` entry in :data:`CATALOGUE`
plus its functions (see DEVELOPERS.md, "How to add a line method").
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass

from ..errors import ConfigError

__all__ = [
    "MethodInfo", "CATALOGUE", "METHOD_NAMES", "MOMENT_METHODS", "CLASSIC_METHODS",
    "ROW_METHOD_NAMES", "GROUP_COMPARISON_METHODS", "method_info", "method_label",
    "is_symmetric", "is_moment_method", "check_confidence", "check_lam", "check_exponents",
    "FIT_COLUMNS", "FIT_ACCURACY_COLUMNS", "FIT_CONSTANT_COLUMNS", "FIT_ALL_COLUMNS", "SLOPE_TEST_COLUMNS",
    "SLOPE_P_METHODS",
    "PERMUTATION_COLUMNS", "SLOPE_TEST_ALL_COLUMNS", "DROPPED_COLUMNS",
    "GROUP_MEANS_COLUMNS", "GROUP_TEST_COLUMNS", "PAIRWISE_COLUMNS", "PHYLO_FIT_COLUMNS",
    "PREDICTION_COLUMNS", "INVERSE_COLUMNS", "DIAGNOSTIC_COLUMNS", "INFLUENCE_COLUMNS",
    "ERROR_STRUCTURE_COLUMNS", "CURVATURE_COLUMNS", "BOOTSTRAP_COLUMNS", "POINTS_TO_CHECK_COLUMNS", "TABLE_COLUMNS",
    "CORRECTIONS", "INTERVALS", "BOOT_INTERVALS", "LOG_BASES", "FIGURE_KINDS",
    "FIGURE_FORMATS", "FIGURE_SIZES", "check_choice", "check_method", "check_methods",
    "check_count", "EXACT_NOTE", "EXACT_LINE_NOTE", "fraction_value",
    "check_predictor_methods", "BOTH_SIGNS_NOTE", "DEFAULT_SEED", "SCATTER_SHOWN",
]


# --------------------------------------------------------------------------
# the method catalogue


@dataclass(frozen=True, slots=True, kw_only=True)
class MethodInfo:
    """Everything the house (config, tables, words, figures) knows of a line method.

    Attributes
    ----------
    name : str
        The config / column value ("ols", "theil_sen", ...).
    label : str
        How sentences, legends and tables write it ("OLS", "Theil-Sen").
    symmetric : bool
        Swapping x and y gives the same line (slope 1/b).
    fitted_from : {"moments", "rows"}
        "moments": the line is a function of the centred sums (vectorised
        over groups, bootstrapped through weighted moments); "rows": it needs
        the points themselves (robust lines, intervals by bootstrap).
    compares_groups : bool
        The published common-slope / shift tests of :mod:`scaling.stats.group_comparisons` apply.
    permutation_pair : str or None
        For a row-based line, the moment line whose permutation test (on
        ranks) is its own (``resample.RANK_PAIRS``); it is also the classical
        line a robust check compares with.
    dash, shade, marker : matplotlib style
        How figures tell the method apart (dash pattern, grey shade, marker).
    """

    name: str
    label: str
    symmetric: bool
    fitted_from: str
    compares_groups: bool
    permutation_pair: str | None
    dash: object
    shade: str
    marker: str


_ENTRIES = (
    MethodInfo(name="ols", label="OLS", symmetric=False, fitted_from="moments",
               compares_groups=True, permutation_pair=None, dash="-", shade="#1a1a1a",
               marker="o"),
    MethodInfo(name="sma", label="SMA", symmetric=True, fitted_from="moments",
               compares_groups=True, permutation_pair=None, dash=(0, (5, 2)),
               shade="#4d4d4d", marker="s"),
    MethodInfo(name="ma", label="MA", symmetric=True, fitted_from="moments",
               compares_groups=True, permutation_pair=None, dash=(0, (1.2, 1.6)),
               shade="#7a7a7a", marker="D"),
    MethodInfo(name="deming", label="Deming", symmetric=True, fitted_from="moments",
               compares_groups=False, permutation_pair=None, dash=(0, (6, 1.5, 1.2, 1.5)),
               shade="#333333", marker="^"),
    MethodInfo(name="theil_sen", label="Theil-Sen", symmetric=False, fitted_from="rows",
               compares_groups=False, permutation_pair="ols", dash=(0, (3, 1.2)),
               shade="#5e5e5e", marker="v"),
    MethodInfo(name="siegel", label="Siegel", symmetric=False, fitted_from="rows",
               compares_groups=False, permutation_pair="ols",
               dash=(0, (3, 1.2, 1, 1.2, 1, 1.2)), shade="#6b6b6b", marker="<"),
    MethodInfo(name="sma_robust", label="robust SMA", symmetric=True, fitted_from="rows",
               compares_groups=False, permutation_pair="sma", dash=(0, (8, 2.5)),
               shade="#404040", marker="P"),
    MethodInfo(name="ma_robust", label="robust MA", symmetric=True, fitted_from="rows",
               compares_groups=False, permutation_pair="ma", dash=(0, (2, 2.5)),
               shade="#8a8a8a", marker="X"),
)

#: name -> :class:`MethodInfo`, in the order methods are listed everywhere.
CATALOGUE: dict[str, MethodInfo] = {m.name: m for m in _ENTRIES}
#: Every method a config may name.
METHOD_NAMES: tuple = tuple(CATALOGUE)
#: Lines computed from moments alone (vectorised over groups, bootstrapped).
MOMENT_METHODS: tuple = tuple(m.name for m in _ENTRIES if m.fitted_from == "moments")
#: Lines that need the rows (robust lines; intervals by bootstrap).
ROW_METHOD_NAMES: tuple = tuple(m.name for m in _ENTRIES if m.fitted_from == "rows")
#: Methods the published group comparisons cover.
GROUP_COMPARISON_METHODS: tuple = tuple(m.name for m in _ENTRIES if m.compares_groups)
#: The classical lines (OLS, SMA, MA) whose choice the run summary discusses.
CLASSIC_METHODS: tuple = GROUP_COMPARISON_METHODS


def method_info(method: str) -> MethodInfo:
    """The catalogue entry of ``method``; ConfigError naming the choices otherwise."""
    try:
        return CATALOGUE[method]
    except (KeyError, TypeError):
        raise ConfigError(f"method must be one of {', '.join(CATALOGUE)}, "
                          f"not {method!r}") from None


def method_label(method: str) -> str:
    """How a method is written in sentences ("OLS", "Deming", "robust SMA", ...)."""
    info = CATALOGUE.get(method)
    return info.label if info is not None else str(method).upper()


def is_symmetric(method: str) -> bool:
    """True if swapping x and y gives the same line (SMA, MA, Deming, robust SMA/MA)."""
    return method_info(method).symmetric


def is_moment_method(method: str) -> bool:
    """True if the line is a function of the moments alone (OLS, SMA, MA, Deming)."""
    info = CATALOGUE.get(method)
    return info is not None and info.fitted_from == "moments"


# --------------------------------------------------------------------------
# table columns (file stem -> columns, in the order they are written)

#: fits.csv: the columns every fit has ...
FIT_COLUMNS = ["scope", "group", "method", "n", "slope", "slope_low", "slope_high",
               "intercept", "intercept_low", "intercept_high", "r", "r2", "log_base",
               "confidence", "note", "slope_se", "intercept_se", "resid_sd",
               "x_min", "x_max", "y_min", "y_max", "interval_method", "deming_lambda",
               "slope_gap_low", "slope_gap_high"]
#: ``slope_gap_low`` .. ``slope_gap_high`` is blank unless the slopes the test
#: accepts are two ranges (an SMA fit whose correlation is not significant):
#: then they are ``slope_low`` .. ``slope_gap_low`` and ``slope_gap_high`` ..
#: ``slope_high``, and the gap between them is rejected.
#: ... and the accuracy and back-transformation columns of the prediction stage.
FIT_ACCURACY_COLUMNS = ["see", "percent_see", "percent_pe", "smearing_factor",
                        "parametric_factor", "ratio_factor"]
#: The normalisation constant a of y = a x^b in natural units (and its units), and
#: the predictor a row belongs to (blank with one predictor).
FIT_CONSTANT_COLUMNS = ["term", "a", "a_low", "a_high", "a_unit"]
#: All 37 columns of fits.csv (a run with data.tree adds PHYLO columns).
FIT_ALL_COLUMNS = FIT_COLUMNS + FIT_ACCURACY_COLUMNS + FIT_CONSTANT_COLUMNS
SLOPE_TEST_COLUMNS = ["scope", "group", "method", "hypothesis", "exponent", "estimate",
                      "statistic", "statistic_type", "df", "p_value", "p_method"]
#: How a slope test's ``p_value`` was got (slope_tests.csv ``p_method``): the
#: statistic named by ``statistic_type`` referred to ...
SLOPE_P_METHODS = {
    "t": "the t distribution on df degrees of freedom",
    "normal": "the standard normal distribution (Kendall's S over its SD)",
    "lr_t": ("the profile likelihood-ratio statistic D of a common slope, as "
             "t^2 = (nu - 1)(exp(D/nu) - 1) on df = nu - 1 (nu = N - groups)"),
    "lr_parametric_bootstrap(B)": ("the profile likelihood-ratio statistic D against B "
                                   "parametric-bootstrap draws of it: (1 + #{D* >= D})/(B + 1)"),
    "bootstrap_percentile(B)": "the percentile bootstrap of B slope replicates",
}
#: Added to slope_tests.csv when resampling.permutations is set.
PERMUTATION_COLUMNS = ["p_permutation", "n_perm"]
SLOPE_TEST_ALL_COLUMNS = SLOPE_TEST_COLUMNS + PERMUTATION_COLUMNS
DROPPED_COLUMNS = ["row", "reason"]
#: Added to fits.csv with a tree (blank except on the phylogenetic rows).
PHYLO_FIT_COLUMNS = ["lambda", "lambda_low", "lambda_high", "lambda_estimate", "loglik", "aic"]
#: group_means.csv; ``n_rows`` is added when rows were averaged within units.
GROUP_MEANS_COLUMNS = ["group", "n", "mean_log_x", "mean_log_y", "se_log_x", "se_log_y"]
GROUP_TEST_COLUMNS = ["method", "test", "statistic", "df", "df_resid", "p_value",
                      "p_method", "common_slope", "common_slope_low", "common_slope_high"]
PAIRWISE_COLUMNS = ["method", "test", "group_a", "group_b", "statistic", "df",
                    "p_value", "p_adjusted", "p_method"]
PREDICTION_COLUMNS = ["scope", "group", "method", "x", "y", "y_low", "y_high", "interval",
                      "correction", "extrapolated", "confidence", "range_ratio"]
INVERSE_COLUMNS = ["scope", "group", "method", "y", "x", "x_low", "x_high", "interval",
                   "extrapolated", "confidence", "range_ratio"]
DIAGNOSTIC_COLUMNS = ["scope", "group", "method", "check", "test", "statistic", "df",
                      "p_value", "estimate", "flagged", "verdict"]
INFLUENCE_COLUMNS = ["scope", "group", "method", "row", "label", "cooks_distance"]
ERROR_STRUCTURE_COLUMNS = ["scope", "group", "model", "a", "b", "sigma", "loglik", "aicc",
                           "delta_aicc", "preferred"]
CURVATURE_COLUMNS = ["scope", "group", "n", "quadratic", "quadratic_se", "statistic", "df",
                     "p_value", "exponent_at_x_min", "exponent_at_x_max", "exponent",
                     "x_at_exponent", "within_data"]
BOOTSTRAP_COLUMNS = ["scope", "group", "method", "parameter", "estimate", "low", "high",
                     "interval", "n_boot", "seed", "boot_se", "n_valid", "confidence"]

#: Every CSV a run writes (file stem -> columns).  ``slope_tests`` gains
#: :data:`PERMUTATION_COLUMNS` and ``group_means`` gains ``n_rows`` when those
#: stages apply; tables added by later stages are listed as they come.
# points_to_check.csv: graded warnings about single points and whole fits
POINTS_TO_CHECK_COLUMNS = ["scope", "group", "method", "severity", "kind", "row", "label",
                           "value", "reason"]

TABLE_COLUMNS: dict[str, list] = {
    "points_to_check": POINTS_TO_CHECK_COLUMNS,
    "fits": FIT_ALL_COLUMNS,
    "slope_tests": SLOPE_TEST_COLUMNS,
    "dropped_rows": DROPPED_COLUMNS,
    "group_means": GROUP_MEANS_COLUMNS,
    "group_tests": GROUP_TEST_COLUMNS,
    "pairwise_tests": PAIRWISE_COLUMNS,
    "predictions": PREDICTION_COLUMNS,
    "inverse_predictions": INVERSE_COLUMNS,
    "diagnostics": DIAGNOSTIC_COLUMNS,
    "influential_rows": INFLUENCE_COLUMNS,
    "error_structure": ERROR_STRUCTURE_COLUMNS,
    "curvature": CURVATURE_COLUMNS,
    "bootstrap": BOOTSTRAP_COLUMNS,
}
#: Columns a table may gain when an option is set (file stem -> extra columns).
OPTIONAL_COLUMNS: dict[str, list] = {
    "slope_tests": PERMUTATION_COLUMNS,
    "group_means": ["n_rows"],
}


# --------------------------------------------------------------------------
# allowed values of the enumerated options

#: fits.csv ``note`` of a fit whose points lie on the line up to rounding.
EXACT_NOTE = "no residual scatter: an exact power law"
#: fits.csv ``note`` of an SMA fit whose correlation is not significant (the
#: sentence naming the two accepted ranges is made in render).
BOTH_SIGNS_NOTE = "correlation not significant: slopes of either sign are accepted"

#: Back-transformation corrections (prediction.correction).
CORRECTIONS = ("smearing", "parametric", "ratio", "none")
#: Kinds of prediction interval (prediction.interval).
INTERVALS = ("prediction", "confidence")
#: Bootstrap interval kinds (resampling.interval).
BOOT_INTERVALS = ("percentile", "bca")
#: How the SMA/MA group tests are calibrated (groups.calibration): the parametric
#: bootstrap when a compared group is small ("auto"), always, or the chi-square never.
GROUP_CALIBRATIONS = ("auto", "chi2", "bootstrap")
#: Log bases a config may name (model.log_base).
LOG_BASES = ("10", "e", "2")
#: The one default seed of every seeded computation: a run's ``resampling.seed``,
#: the group-comparison bootstrap of ``compare_groups`` and the robust lines of
#: ``fit_line`` and ``fit_groups``, so a call with defaults repeats a run with defaults.
DEFAULT_SEED = 1

#: Log10 scatter (residual SD of log10 y) up to which the interval of a total over
#: new individuals was shown by simulation to cover 0.95 +- 0.015
#: (tests/test_multi.py); beyond it the result and its words carry a note.
SCATTER_SHOWN = 0.5
FIGURE_KINDS = ("scaling", "natural", "exponents", "residuals")
FIGURE_FORMATS = ("png", "pdf", "svg")
FIGURE_SIZES = ("single", "double")


def check_confidence(confidence) -> float:
    """``confidence`` as a float if it is a number strictly between 0 and 1.

    The one check of a confidence level (config, fits, tests, predictions).

    Raises
    ------
    ConfigError
        Otherwise, naming the value.
    """
    if (isinstance(confidence, bool) or not isinstance(confidence, numbers.Real)
            or not 0 < confidence < 1):
        raise ConfigError(f"confidence must be a number between 0 and 1, not {confidence!r}")
    return float(confidence)


def check_lam(lam) -> float:
    """Deming's error-variance ratio as a float if it is positive and finite.

    Raises
    ------
    ConfigError
        Otherwise, naming the value.
    """
    if (isinstance(lam, bool) or not isinstance(lam, numbers.Real)
            or not (math.isfinite(lam) and lam > 0)):
        raise ConfigError("lam (error-variance ratio) must be a positive finite number, "
                          f"not {lam!r}")
    return float(lam)


def check_exponents(exponents) -> dict:
    """Hypothesised exponents as ``{name: float}``.

    A mapping is kept with its names; a plain sequence is named by the
    values (``[0.75]`` -> ``{"0.75": 0.75}``); None is no exponents.

    Raises
    ------
    ConfigError
        An exponent that is not a finite number, naming it.
    """
    if exponents is None:
        return {}
    if not isinstance(exponents, dict):
        exponents = {f"{float(v):g}": v for v in exponents}
    out = {}
    for name, value in exponents.items():
        if (isinstance(value, bool) or not isinstance(value, numbers.Real)
                or not math.isfinite(value)):
            raise ConfigError(f"exponents[{name!r}] must be a finite number, not {value!r}")
        out[str(name)] = float(value)
    return out


def check_choice(value, options, name: str) -> str:
    """``value`` if it is one of ``options``; ConfigError naming them otherwise."""
    if not isinstance(value, str) or value not in options:
        raise ConfigError(f"{name} must be one of {', '.join(options)}, not {value!r}")
    return value


def check_method(method, options=METHOD_NAMES, *, name: str = "method",
                 lower: bool = False) -> str:
    """``method`` if it is one of ``options``: the one check of a method argument.

    Parameters
    ----------
    method : str
        The value given.
    options : sequence of str
        The methods the caller accepts (default every method of
        :data:`CATALOGUE`).
    name : str
        The argument's name, used in the message.
    lower : bool
        Accept any letter case (``"SMA"`` is ``"sma"``).

    Returns
    -------
    str
        The method (lower-cased when ``lower``).

    Raises
    ------
    ConfigError
        "method must be one of ols, sma, ma, not 'wls'".
    """
    value = method.lower() if lower and isinstance(method, str) else method
    if not isinstance(value, str) or value not in options:
        raise ConfigError(f"{name} must be one of {', '.join(options)}, not {method!r}")
    return value


def check_methods(methods, options, *, name: str = "methods") -> tuple:
    """Several methods (one name or a sequence) as a tuple, each one of ``options``.

    Parameters
    ----------
    methods : str or sequence of str
    options : sequence of str
        The methods the caller accepts.
    name : str
        The argument's name, used in the messages.

    Returns
    -------
    tuple of str

    Raises
    ------
    ConfigError
        When no method is named ("methods must name at least one of ...") or
        one is not among ``options`` ("methods must be among ols, sma, ma
        (each method must be one of these), not ['wls']").
    """
    if isinstance(methods, str):
        methods = (methods,)
    methods = tuple(methods)
    if not methods:
        raise ConfigError(f"{name} must name at least one of {', '.join(options)}")
    bad = [m for m in methods if not isinstance(m, str) or m not in options]
    if bad:
        raise ConfigError(f"{name} must be among {', '.join(options)} (each method must be "
                          f"one of these), not {bad!r}")
    return methods


def check_count(value, name: str, minimum: int = 1) -> int:
    """``value`` as an int if it is a whole number (not a bool) at least ``minimum``.

    Parameters
    ----------
    value : int
    name : str
        The argument's name, used in the message.
    minimum : int

    Returns
    -------
    int

    Raises
    ------
    ConfigError
        "n_boot must be an integer >= 2, not 1".
    """
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < minimum:
        raise ConfigError(f"{name} must be an integer >= {minimum}, not {value!r}")
    return int(value)


# --------------------------------------------------------------------------
# notes: fixed short labels written in a table's note or reason cell

#: Why a group lying exactly on a line is left out of SMA/MA comparisons.
EXACT_LINE_NOTE = "points lie exactly on a line: no scatter to compare"


# --------------------------------------------------------------------------
# reading values the way people write them, and what several predictors allow


def fraction_value(value):
    """A fraction written as text ("3/4") as its float; any other value unchanged.

    How people write exponents; the config and :func:`~scaling.stats.lines.exponent_value`
    both read them here.

    Raises
    ------
    ValueError
        If ``value`` is text with a "/" that is not a number over a non-zero number.

    Examples
    --------
    >>> fraction_value("3/4"), fraction_value(0.75), fraction_value("1")
    (0.75, 0.75, '1')
    """
    if not (isinstance(value, str) and "/" in value):
        return value
    num, _, den = value.partition("/")
    try:
        return float(num) / float(den)
    except (ValueError, ZeroDivisionError):
        raise ValueError(f"cannot read {value!r} as a fraction") from None


def check_predictor_methods(methods, n_predictors: int, *, key: str = "model.methods") -> tuple:
    """Refuse line methods that cannot take several predictors.

    Only OLS fits several predictors; SMA, MA and the other lines are bivariate.

    Parameters
    ----------
    methods : sequence of str
        The methods asked for (e.g. ``config.model.methods``).
    n_predictors : int
        Number of predictors (columns in ``data.x``).
    key : str
        Key path named in the message.

    Returns
    -------
    tuple of str
        ``methods`` unchanged when allowed.

    Raises
    ------
    ConfigError
        When ``n_predictors > 1`` and any method other than ``ols`` is asked for.

    Examples
    --------
    >>> check_predictor_methods(["ols"], 2)
    ('ols',)
    >>> check_predictor_methods(["ols", "sma"], 2)
    Traceback (most recent call last):
    ...
    scaling.errors.ConfigError: model.methods: sma is a single-predictor method; with 2 predictors only ols can be fitted (set model.methods: [ols])
    """
    methods = tuple(methods)
    if n_predictors > 1:
        bad = [m for m in methods if m != "ols"]
        if bad:
            verb = ("is a single-predictor method" if len(bad) == 1
                    else "are single-predictor methods")
            raise ConfigError(f"{key}: {', '.join(bad)} {verb}; with {n_predictors} "
                              "predictors only ols can be fitted (set model.methods: [ols])")
    return methods
