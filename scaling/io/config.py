"""YAML configuration -> validated, frozen config objects.

Every problem raises :class:`~scaling.errors.ConfigError` with one line that
names the config file and the key path, e.g.
``run.yaml: model.methods[1]: 'smaa' is not a method; did you mean 'sma'?``.
Paths in the config are resolved against the folder of the config file.
"""

from __future__ import annotations

import copy
import difflib
import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

import yaml

from ..stats.schema import (BOOT_INTERVALS, CATALOGUE, CORRECTIONS, FIGURE_FORMATS, FIGURE_KINDS,
                            FIGURE_SIZES, GROUP_CALIBRATIONS, INTERVALS, LOG_BASES, METHOD_NAMES,
                            MOMENT_METHODS, DEFAULT_SEED, check_predictor_methods, fraction_value)
from ..errors import ConfigError

__all__ = [
    "Config", "DataConfig", "ModelConfig", "GroupsConfig", "PredictionConfig",
    "FiguresConfig", "OutputConfig", "DiagnosticsConfig", "ResamplingConfig",
    "load_config", "config_from_dict", "MOMENT_METHOD_NAMES", "BOOT_INTERVALS",
    "METHOD_NAMES", "CORRECTIONS", "FIGURE_KINDS",
]

# The allowed values of every enumerated key come from scaling.stats.schema (the one
# home of the vocabulary; it imports nothing of the numeric core).
MOMENT_METHOD_NAMES = MOMENT_METHODS
# Symmetric lines, in the order model.primary prefers (from the catalogue).
SYMMETRIC_METHOD_NAMES = tuple(m.name for m in CATALOGUE.values() if m.symmetric)

# --------------------------------------------------------------------------
# small typed readers; each takes (value, path) and raises _Bad on failure


class _Bad(Exception):
    def __init__(self, path: str, message: str):
        super().__init__(f"{path}: {message}")


def _describe(value) -> str:
    if value is None:
        return "nothing (null)"
    return f"{value!r} ({type(value).__name__})"


def _suggest(word, options) -> str:
    close = difflib.get_close_matches(str(word), [str(o) for o in options], n=1, cutoff=0.5)
    return (f"; did you mean '{close[0]}'?" if close
            else f"; choose from {', '.join(map(str, options))}")


def _string(value, path, *, allow_empty=False) -> str:
    if isinstance(value, bool) or not isinstance(value, (str, int, float)):
        raise _Bad(path, f"expected text, got {_describe(value)}")
    text = str(value)
    if not allow_empty and not text.strip():
        raise _Bad(path, "must not be empty")
    return text


def _optional_string(value, path):
    return None if value is None else _string(value, path)


def _boolean(value, path) -> bool:
    if not isinstance(value, bool):
        raise _Bad(path, f"expected true or false, got {_describe(value)}")
    return value


def _int(value, path, *, minimum=None) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise _Bad(path, f"expected a whole number, got {_describe(value)}")
    if minimum is not None and value < minimum:
        raise _Bad(path, f"must be at least {minimum}, got {value}")
    return value


def _number(value, path) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise _Bad(path, f"expected a number, got {_describe(value)}")
    if not math.isfinite(value):
        raise _Bad(path, f"must be finite, got {value}")
    return float(value)


def _choice(options):
    def read(value, path):
        text = _string(value, path).strip().lower()
        if text not in options:
            raise _Bad(path, f"{value!r} is not one of {', '.join(options)}{_suggest(text, options)}")
        return text
    return read


def _list_of(reader, *, unique=True, non_empty=False, noun="value"):
    def read(value, path):
        if not isinstance(value, (list, tuple)):
            value = [value]
        if non_empty and not value:
            raise _Bad(path, f"needs at least one {noun}")
        out = []
        for i, item in enumerate(value):
            item = reader(item, f"{path}[{i}]")
            if unique and item in out:
                raise _Bad(f"{path}[{i}]", f"{item!r} is listed twice")
            out.append(item)
        return tuple(out)
    return read


def _method(value, path):
    text = _string(value, path).strip().lower()
    if text not in METHOD_NAMES:
        raise _Bad(path, f"'{value}' is not a method{_suggest(text, METHOD_NAMES)}")
    return text


def _log_base(value, path):
    if isinstance(value, bool):
        raise _Bad(path, f"expected 10, e or 2, got {_describe(value)}")
    if isinstance(value, (int, float)):
        for label, number in (("10", 10.0), ("2", 2.0), ("e", math.e)):
            if math.isclose(value, number):
                return label
        raise _Bad(path, f"expected 10, e or 2, got {value!r}")
    return _choice(LOG_BASES)(value, path)


def _confidence(value, path):
    v = _number(value, path)
    if not 0 < v < 1:
        raise _Bad(path, f"must lie between 0 and 1 (e.g. 0.95), got {value!r}")
    return v


def _positive_numbers(value, path):
    numbers = _list_of(_number, unique=False)(value, path)
    for i, v in enumerate(numbers):
        if v <= 0:
            raise _Bad(f"{path}[{i}]", f"must be positive (natural units), got {v:g}")
    return numbers


def _single_char(value, path, *, options=None):
    text = _string(value, path, allow_empty=False)
    if text.lower() == "auto" and options is None:
        return "auto"
    if text in ("\\t", "tab"):
        return "\t"
    if len(text) != 1:
        raise _Bad(path, f"expected 'auto' or one character, got {value!r}")
    if options and text not in options:
        raise _Bad(path, f"expected one of {' '.join(repr(o) for o in options)}, got {value!r}")
    return text


def _sheet(value, path):
    if isinstance(value, bool):
        raise _Bad(path, f"expected a sheet index or name, got {_describe(value)}")
    if isinstance(value, int):
        return _int(value, path, minimum=0)
    return _string(value, path)


def _exclude(value, path):
    if value is None:
        return {}
    if not isinstance(value, dict):
        raise _Bad(path, "expected a mapping of column: [values to drop], "
                         "e.g. {clade: [outgroup]}")
    out = {}
    for column, values in value.items():
        key = f"{path}.{column}"
        _string(column, key)
        if not isinstance(values, (list, tuple)):
            values = [values]
        for i, v in enumerate(values):
            if isinstance(v, (dict, list)) or v is None:
                raise _Bad(f"{key}[{i}]", f"expected a value to drop, got {_describe(v)}")
        out[str(column)] = tuple(values)
    return out


def _xy_labels(value, path):
    if value is None:
        return {}
    if not isinstance(value, dict):
        raise _Bad(path, "expected a mapping like {x: g, y: mW}")
    out = {}
    for key, text in value.items():
        if key not in ("x", "y"):
            raise _Bad(f"{path}.{key}", f"unknown key{_suggest(key, ('x', 'y'))}")
        out[key] = _string(text, f"{path}.{key}", allow_empty=True)
    return out


def _exponents(value, path):
    if value is None:
        return {}
    if not isinstance(value, dict):
        raise _Bad(path, "expected a mapping of name: exponent, e.g. {three_quarters: 0.75}")
    out = {}
    for name, exponent in value.items():
        _string(name, f"{path}.{name}")
        # "3/4" reads as a fraction, which is how people write exponents.
        where = f"{path}.{name}"
        if isinstance(exponent, (list, tuple)):     # one per predictor (data.x a list)
            out[str(name)] = tuple(_exponent_value(e, f"{where}[{i}]")
                                   for i, e in enumerate(exponent))
        elif isinstance(exponent, dict):            # column: exponent (data.x a list)
            out[str(name)] = {str(c): _exponent_value(e, f"{where}.{c}")
                              for c, e in exponent.items()}
        else:
            out[str(name)] = _exponent_value(exponent, where)
    return out


def _exponent_value(value, path) -> float:
    try:
        value = fraction_value(value)
    except ValueError as exc:
        raise _Bad(path, str(exc)) from None
    return _number(value, path)


def _positive(value, path) -> float:
    v = _number(value, path)
    if v <= 0:
        raise _Bad(path, f"must be a positive number, got {value!r}")
    return v


def _error_variances(value, path):
    if value is None:
        return {}
    if not isinstance(value, dict):
        raise _Bad(path, "expected a mapping like {x: 0.0004, y: 0.0025} (error variances "
                         "of log x and log y)")
    for key in value:
        if key not in ("x", "y"):
            raise _Bad(f"{path}.{key}", f"unknown key{_suggest(key, ('x', 'y'))}")
    out = {}
    for key in ("x", "y"):
        if key not in value:
            raise _Bad(f"{path}.{key}", "is required (give both x and y)")
        out[key] = _positive(value[key], f"{path}.{key}")
    return out


PHYLO_MODELS = ("lambda", "brownian", "ou", "kappa", "delta")


def _phylogeny(value, path):
    """model.phylogeny: {lambda: ml | reml | a number in [0, 1], model: lambda | brownian |
    ou | kappa | delta, sampling_error: true | false}."""
    if value is None:
        return dict(_PHYLOGENY)
    if not isinstance(value, dict):
        raise _Bad(path, "expected a mapping like {lambda: ml}")
    for key in value:
        if key not in _PHYLOGENY:
            raise _Bad(f"{path}.{key}", f"unknown key{_suggest(key, tuple(_PHYLOGENY))}")
    model = value.get("model", _PHYLOGENY["model"])
    if not isinstance(model, str) or model.strip().lower() not in PHYLO_MODELS:
        text = model.strip().lower() if isinstance(model, str) else ""
        raise _Bad(f"{path}.model", f"{model!r} is not one of {', '.join(PHYLO_MODELS)}"
                   f"{_suggest(text, PHYLO_MODELS)}")
    extra = {"model": model.strip().lower(),
             "sampling_error": _boolean(value.get("sampling_error", False),
                                        f"{path}.sampling_error")}
    lam = value.get("lambda", _PHYLOGENY["lambda"])
    where = f"{path}.lambda"
    if isinstance(lam, str):
        text = lam.strip().lower()
        if text in ("ml", "reml"):
            return {"lambda": text, **extra}
        raise _Bad(where, f"{lam!r} is not ml, reml or a number between 0 and 1"
                   f"{_suggest(text, ('ml', 'reml'))}")
    v = _number(lam, where)
    if not 0 <= v <= 1:
        raise _Bad(where, f"Pagel's lambda must lie between 0 and 1, got {lam!r}")
    return {"lambda": v, **extra}


def _alpha(value, path):
    v = _number(value, path)
    if not 0 < v < 0.5:
        raise _Bad(path, f"must lie between 0 and 0.5 (e.g. 0.05), got {value!r}")
    return v


def _n_boot(value, path):
    v = _int(value, path, minimum=0)
    if 0 < v < 99:
        raise _Bad(path, f"must be 0 (off) or at least 99 resamples (999 or more for "
                         f"reported intervals), got {v}")
    return v


def _seed(value, path):
    return _int(value, path, minimum=0)



# ---- several predictors and units

def _x_columns(value, path):
    """One column name, or a list of distinct names (several predictors)."""
    if isinstance(value, (list, tuple)):
        names = _list_of(_string, non_empty=True, noun="column")(value, path)
        return names[0] if len(names) == 1 else names
    return _string(value, path)


def _unit(value, path) -> str:
    from ..stats.units import check_unit   # pint, loaded only for units beyond the common SI ones
    text = _string(value, path)
    try:
        check_unit(text, key=path)
    except ConfigError as exc:
        raise _Bad(path, str(exc).split(": ", 1)[1]) from None
    return text


def _unit_mapping(value, path, example):
    if value is None:
        return {}
    if not isinstance(value, dict):
        raise _Bad(path, f"expected a mapping like {example}")
    out = {}
    for key, text in value.items():
        if key not in ("x", "y"):
            raise _Bad(f"{path}.{key}", f"unknown key{_suggest(key, ('x', 'y'))}")
        if key == "x" and isinstance(text, (list, tuple)):
            out[key] = tuple(_unit(t, f"{path}.x[{i}]") for i, t in enumerate(text))
        else:
            out[key] = _unit(text, f"{path}.{key}")
    return out


def _data_units(value, path):
    return _unit_mapping(value, path, "{x: g, y: mW} (units pint understands)")


def _model_units(value, path):
    return _unit_mapping(value, path, "{x: kg, y: W} (the units to fit in)")


def _combined(value, path):
    if value is None:
        return None
    if not isinstance(value, dict):
        raise _Bad(path, "expected a mapping like {weights: {diameter: 2, height: 1}, exponent: 1}")
    for key in value:
        if key not in ("weights", "exponent", "label"):
            raise _Bad(f"{path}.{key}", f"unknown key{_suggest(key, ('weights', 'exponent', 'label'))}")
    weights = value.get("weights")
    if not isinstance(weights, dict) or not weights:
        raise _Bad(f"{path}.weights", "is required: a mapping of predictor column: weight, "
                   "e.g. {diameter: 2, height: 1} for D^2 H")
    out = {"weights": {str(k): _exponent_value(w, f"{path}.weights.{k}")
                       for k, w in weights.items()},
           "exponent": _exponent_value(value.get("exponent", 1), f"{path}.exponent")}
    if "label" in value:
        out["label"] = _string(value["label"], f"{path}.label")
    return out


def _prediction_x(value, path):
    """A list of values (one predictor) or a mapping column -> list (several)."""
    if isinstance(value, dict):
        out = {}
        for key, values in value.items():
            out[str(key)] = _positive_numbers(values, f"{path}.{key}")
        lengths = {len(v) for v in out.values()}
        if len(lengths) > 1:
            raise _Bad(path, "every column must list the same number of values "
                       f"(got {', '.join(f'{k}: {len(v)}' for k, v in out.items())})")
        return out
    return _positive_numbers(value, path)


def _check_several_x(sections, exponents) -> None:
    """Cross-checks when data.x lists several predictor columns."""
    data, model, pred = sections["data"], sections["model"], sections["prediction"]
    xs = data["x"]
    k = len(xs)
    try:
        check_predictor_methods(model["methods"], k, key="model.methods")
    except ConfigError as exc:
        raise _Bad("model.methods", str(exc).split(": ", 1)[1]) from None
    for key in ("average_within",):
        if data[key] is not None:
            raise _Bad(f"data.{key}", "is not available with several predictors (data.x is a "
                       "list): fit the rows themselves, or average them before the run")
    for section, units in (("data.units", data["units"]), ("model.units", model["units"])):
        ux = units.get("x")
        if ux is not None and (not isinstance(ux, tuple) or len(ux) != k):
            raise _Bad(f"{section}.x", f"needs a list of {k} units, one per column of data.x "
                       f"({', '.join(xs)})")
    if model["units"].get("x") is not None and data["units"].get("x") is None:
        raise _Bad("model.units.x", "needs data.units.x (the units of the data) to convert from")
    if model["units"].get("y") is not None and data["units"].get("y") is None:
        raise _Bad("model.units.y", "needs data.units.y (the units of the data) to convert from")
    for name, value in exponents.items():
        where = f"exponents.{name}"
        if isinstance(value, tuple):
            if len(value) != k:
                raise _Bad(where, f"needs {k} exponents, one per column of data.x "
                           f"({', '.join(xs)}), got {len(value)}")
        elif isinstance(value, dict):
            for col in value:
                if col not in xs:
                    raise _Bad(f"{where}.{col}", f"is not a column of data.x{_suggest(col, xs)}")
        else:
            raise _Bad(where, f"with several predictors give a list of {k} exponents "
                       f"(e.g. [2, 1]) or a mapping of column: exponent")
    comb = model["combined"]
    if comb is not None:
        for col in comb["weights"]:
            if col not in xs:
                raise _Bad(f"model.combined.weights.{col}",
                           f"is not a column of data.x{_suggest(col, xs)}")
        missing = [c for c in xs if c not in comb["weights"]]
        if missing:
            raise _Bad("model.combined.weights", f"must give a weight for every column of "
                       f"data.x (missing {', '.join(missing)}; weight 0 leaves one out)")
    px = pred["x"]
    if px and not isinstance(px, dict):
        raise _Bad("prediction.x", "with several predictors give a mapping of column: values, "
                   f"e.g. {{{xs[0]}: [10, 20], {xs[1]}: [5, 8]}}, or prediction.from: a CSV")
    if isinstance(px, dict):
        for col in px:
            if col not in xs:
                raise _Bad(f"prediction.x.{col}", f"is not a column of data.x{_suggest(col, xs)}")
        missing = [c for c in xs if c not in px]
        if missing:
            raise _Bad("prediction.x", f"needs values for every column of data.x "
                       f"(missing {', '.join(missing)})")
    if pred["y"]:
        raise _Bad("prediction.y", "inverse prediction needs a single predictor")
    if pred["total"] and not (px or pred["from"]):
        raise _Bad("prediction.total", "needs new rows: prediction.x or prediction.from")
    if pred["total"] and pred["correction"] == "none":
        raise _Bad("prediction.total", "a total needs means: set prediction.correction to "
                   "smearing, parametric or ratio")


def _check_single_x(sections, exponents) -> None:
    data, model, pred = sections["data"], sections["model"], sections["prediction"]
    for section, units in (("data.units", data["units"]), ("model.units", model["units"])):
        if isinstance(units.get("x"), tuple):
            raise _Bad(f"{section}.x", "is a list, but data.x names one column")
    for key in ("x", "y"):
        if model["units"].get(key) is not None and data["units"].get(key) is None:
            raise _Bad(f"model.units.{key}", f"needs data.units.{key} (the units of the data) "
                       "to convert from")
    for name, value in exponents.items():
        if not isinstance(value, float):
            raise _Bad(f"exponents.{name}", "must be one number with a single predictor")
    if model["combined"] is not None:
        raise _Bad("model.combined", "needs several predictors (data.x as a list)")
    if isinstance(pred["x"], dict):
        raise _Bad("prediction.x", "a mapping of columns needs several predictors; give a "
                   "list of values of data.x")
    for key in ("from", "total"):
        if pred[key]:
            raise _Bad(f"prediction.{key}", "is available with several predictors (data.x as "
                       "a list); with one, use 'scaling predict RESULTS --from FILE.csv'")


# --------------------------------------------------------------------------
# the schema: section -> key -> (reader, default).  Each default is written here
# once; the config dataclasses below take their field defaults from this table.

_REQUIRED = object()


@dataclass(frozen=True, slots=True)
class _Rule:
    """A default worked out from the other keys of its section when the config is read."""

    text: str                        # the rule in words (as the README states it)
    resolve: Callable[[dict], Any]   # the section as read -> the value


def _first_symmetric(model: dict) -> str:
    return next((m for m in model["methods"] if m in SYMMETRIC_METHOD_NAMES),
                "ols" if "ols" in model["methods"] else model["methods"][0])


def _lambda_from_variances(model: dict) -> float:
    ev = model["error_variances"]
    return ev["y"] / ev["x"] if ev else 1.0


_PRIMARY = _Rule("the first symmetric method of model.methods, else ols (else the first "
                 "method)", _first_symmetric)
_DEMING_LAMBDA = _Rule("1.0, or error_variances y / x when those are given",
                       _lambda_from_variances)
_PHYLOGENY = {"lambda": "ml", "model": "lambda", "sampling_error": False}

_SCHEMA: dict[str, dict[str, tuple[Callable, Any]]] = {
    "data": {
        "file": (_string, _REQUIRED),
        "x": (_x_columns, _REQUIRED),
        "y": (_string, _REQUIRED),
        "sheet": (_sheet, 0),
        "skip_rows": (lambda v, p: _int(v, p, minimum=0), 0),
        "units_row": (_boolean, False),
        "delimiter": (_single_char, "auto"),
        "decimal": (lambda v, p: _single_char(v, p, options=(".", ",")), "."),
        "encoding": (_string, "utf-8"),
        "group": (_optional_string, None),
        "average_within": (_optional_string, None),
        "exclude": (_exclude, {}),
        "units": (_data_units, {}),
        "tree": (_optional_string, None),
        "species": (_optional_string, None),
        "chunk_size": (lambda v, p: _int(v, p, minimum=1), 1_000_000),
        "moments_above_mb": (_positive, 100.0),
    },
    "model": {
        "log_base": (_log_base, "10"),
        "methods": (_list_of(_method, non_empty=True, noun="method"), ("ols", "sma", "ma")),
        "confidence": (_confidence, 0.95),
        "deming_lambda": (_positive, _DEMING_LAMBDA),
        "error_variances": (_error_variances, {}),
        "primary": (lambda v, p: None if v is None else _method(v, p), _PRIMARY),
        "phylogeny": (_phylogeny, _PHYLOGENY),
        "units": (_model_units, {}),
        "combined": (_combined, None),
    },
    "diagnostics": {
        "enabled": (_boolean, True),
        "alpha": (_alpha, 0.05),
        "error_structure": (_boolean, True),
        "exponent_at": (_list_of(_exponent_value), ()),
    },
    "resampling": {
        "bootstrap": (_n_boot, 0),
        "interval": (_choice(BOOT_INTERVALS), "bca"),
        "permutations": (lambda v, p: _int(v, p, minimum=0), 0),
        "seed": (_seed, DEFAULT_SEED),
    },
    "groups": {
        "compare": (_boolean, True),
        "fit_group_means": (_boolean, True),
        "weight_means": (_boolean, False),
        "pairwise_max": (lambda v, p: _int(v, p, minimum=2), 20),
        "calibration": (_choice(GROUP_CALIBRATIONS), "auto"),
        "spread_min": (lambda v, p: _int(v, p, minimum=2), 20),
        "spread_tau2": (_choice(("reml", "dl")), "reml"),
        "spread_interval": (_choice(("knapp_hartung", "z", "knapp_hartung_plain")),
                            "knapp_hartung"),
        "diagnostics_max": (lambda v, p: _int(v, p, minimum=0), 200),
    },
    "prediction": {
        "x": (_prediction_x, ()),
        "y": (_positive_numbers, ()),
        "from": (_string, None),
        "total": (_boolean, False),
        "correction": (_choice(CORRECTIONS), "smearing"),
        "interval": (_choice(INTERVALS), "prediction"),
        "methods": (_list_of(_method, noun="method"), ()),
    },
    "figures": {
        "formats": (_list_of(_choice(FIGURE_FORMATS)), ("png",)),
        "kinds": (_list_of(_choice(FIGURE_KINDS)), FIGURE_KINDS),
        "size": (_choice(FIGURE_SIZES), "single"),
        "dpi": (lambda v, p: _int(v, p, minimum=50), 300),
        "labels": (_xy_labels, {}),
    },
    "output": {
        "dir": (_string, None),          # None: results/<config file stem> beside the config
    },
}
#: The top-level keys that are not sections (title: null also means the default).
_TOP_SCHEMA: dict[str, tuple[Callable, Any]] = {
    "title": (_optional_string, "Allometric scaling"),
    "engine": (_choice(("pandas", "dask")), "pandas"),
    "scheduler": (_optional_string, None),
}
_TOP_LEVEL = ("title", "data", "model", "exponents", "groups", "prediction",
              "figures", "output", "diagnostics", "resampling", "engine", "scheduler")


def _default(section: str, key: str):
    """A dataclass field with the schema's default for ``section.key``."""
    default = (_TOP_SCHEMA if section == "" else _SCHEMA[section])[key][1]
    if isinstance(default, dict):      # a fresh mapping per config
        return field(default_factory=lambda: copy.deepcopy(default))
    return field(default=default)


@dataclass(frozen=True, slots=True, kw_only=True)
class DataConfig:
    file: Path
    x: str | tuple       # one column, or a tuple of columns (several predictors, OLS)
    y: str
    sheet: int | str = _default("data", "sheet")
    skip_rows: int = _default("data", "skip_rows")
    units_row: bool = _default("data", "units_row")
    delimiter: str = _default("data", "delimiter")
    decimal: str = _default("data", "decimal")
    encoding: str = _default("data", "encoding")
    group: str | None = _default("data", "group")
    average_within: str | None = _default("data", "average_within")
    exclude: dict = _default("data", "exclude")   # column -> tuple of values
    units: dict = _default("data", "units")       # {"x": "g", "y": "mW"}; x a tuple with several x
    tree: Path | None = _default("data", "tree")   # Newick file: phylogenetic fits
    species: str | None = _default("data", "species")   # column naming the tips of the tree
    chunk_size: int = _default("data", "chunk_size")    # rows per chunk on the moments path
    moments_above_mb: float = _default("data", "moments_above_mb")   # larger files: moments path

    @property
    def x_columns(self) -> tuple:
        """The predictor column(s) as a tuple (one name for a single predictor)."""
        return self.x if isinstance(self.x, tuple) else (self.x,)


@dataclass(frozen=True, slots=True, kw_only=True)
class ModelConfig:
    log_base: str = _default("model", "log_base")
    methods: tuple = _default("model", "methods")
    confidence: float = _default("model", "confidence")
    # deming_lambda and primary default by rules on the other keys (_DEMING_LAMBDA,
    # _PRIMARY), so they are always given
    deming_lambda: float      # var(error in log y) / var(error in log x)
    error_variances: dict = _default("model", "error_variances")   # {"x": .., "y": ..} as given
    primary: str              # the method whose line leads the headline
    phylogeny: dict = _default("model", "phylogeny")   # used with data.tree
    units: dict = _default("model", "units")     # fit in these units: {"x": "kg", "y": "W"}
    combined: dict | None = _default("model", "combined")   # {"weights": {col: w}, "exponent": 1.0}


@dataclass(frozen=True, slots=True, kw_only=True)
class GroupsConfig:
    compare: bool = _default("groups", "compare")
    fit_group_means: bool = _default("groups", "fit_group_means")
    weight_means: bool = _default("groups", "weight_means")
    pairwise_max: int = _default("groups", "pairwise_max")
    calibration: str = _default("groups", "calibration")   # auto | chi2 | bootstrap (SMA/MA tests)
    spread_min: int = _default("groups", "spread_min")   # more groups: summary across groups
    spread_tau2: str = _default("groups", "spread_tau2")             # reml | dl
    spread_interval: str = _default("groups", "spread_interval")     # knapp_hartung | z | ...
    diagnostics_max: int = _default("groups", "diagnostics_max")   # more: no per-group checks


@dataclass(frozen=True, slots=True, kw_only=True)
class PredictionConfig:
    x: tuple = _default("prediction", "x")
    y: tuple = _default("prediction", "y")      # inverse prediction: x from these y values
    correction: str = _default("prediction", "correction")
    interval: str = _default("prediction", "interval")
    methods: tuple = _default("prediction", "methods")   # () = OLS (else the first fitted)
    # several x: column -> tuple of values (prediction.x given as a mapping; not a key)
    x_table: dict = field(default_factory=dict)
    from_file: Path | None = _default("prediction", "from")   # a CSV of new rows (several x)
    total: bool = _default("prediction", "total")   # several x: also the total over the rows


@dataclass(frozen=True, slots=True, kw_only=True)
class FiguresConfig:
    formats: tuple = _default("figures", "formats")
    kinds: tuple = _default("figures", "kinds")
    size: str = _default("figures", "size")
    dpi: int = _default("figures", "dpi")
    labels: dict = _default("figures", "labels")    # {"x": "Body mass", "y": "..."}


@dataclass(frozen=True, slots=True, kw_only=True)
class OutputConfig:
    dir: Path


@dataclass(frozen=True, slots=True, kw_only=True)
class DiagnosticsConfig:
    enabled: bool = _default("diagnostics", "enabled")
    alpha: float = _default("diagnostics", "alpha")
    error_structure: bool = _default("diagnostics", "error_structure")
    exponent_at: tuple = _default("diagnostics", "exponent_at")   # () = the exponents' values


@dataclass(frozen=True, slots=True, kw_only=True)
class ResamplingConfig:
    bootstrap: int = _default("resampling", "bootstrap")     # resamples; 0 = off
    interval: str = _default("resampling", "interval")       # percentile | bca
    permutations: int = _default("resampling", "permutations")   # per slope test; 0 = off
    seed: int = _default("resampling", "seed")


@dataclass(frozen=True, slots=True, kw_only=True)
class Config:
    """A whole validated configuration (every key is listed in the README)."""

    title: str
    data: DataConfig
    model: ModelConfig
    exponents: dict            # name -> float, in the order given
    groups: GroupsConfig
    prediction: PredictionConfig
    figures: FiguresConfig
    output: OutputConfig
    diagnostics: DiagnosticsConfig = field(default_factory=DiagnosticsConfig)
    resampling: ResamplingConfig = field(default_factory=ResamplingConfig)
    engine: str = _default("", "engine")              # pandas | dask (dask: the moments path)
    scheduler: str | None = _default("", "scheduler")   # dask only: None (local) or an address
    source: Path | None = None     # the config file, if read from one
    raw: dict = field(default_factory=dict)   # the mapping as read, for the manifest


def _read_section(raw, name) -> dict:
    spec = _SCHEMA[name]
    if raw is None:
        raw = {}
    if not isinstance(raw, dict):
        raise _Bad(name, f"expected a mapping of keys, got {_describe(raw)}")
    for key in raw:
        if key not in spec:
            raise _Bad(f"{name}.{key}", f"unknown key{_suggest(key, spec)}")
    out = {}
    for key, (reader, default) in spec.items():
        path = f"{name}.{key}"
        if key in raw:
            out[key] = reader(raw[key], path)
        elif default is _REQUIRED:
            raise _Bad(path, "is required")
        else:
            out[key] = None if isinstance(default, _Rule) else copy.deepcopy(default)
    for key, (_, default) in spec.items():   # rules read the section's other keys
        if isinstance(default, _Rule) and out[key] is None:
            out[key] = default.resolve(out)
    return out


def _phylo_keys(data: dict, base_dir: Path) -> None:
    """data.tree and data.species go together; with a tree, rows are averaged
    within species (data.average_within defaults to data.species)."""
    if data["tree"] is None:
        if data["species"] is not None:
            raise _Bad("data.species", "is used only with data.tree (a Newick file); "
                       "add data.tree or remove data.species")
        return
    if data["species"] is None:
        raise _Bad("data.species", "is required with data.tree: name the column whose "
                   "values are the tip names of the tree")
    if data["species"] in (data["x"], data["y"]):
        raise _Bad("data.species", f"{data['species']!r} is also the x or y column")
    if data["average_within"] is None:
        data["average_within"] = data["species"]
    elif data["average_within"] != data["species"]:
        raise _Bad("data.average_within", f"must be the species column "
                   f"({data['species']!r}) when data.tree is given (the phylogenetic fits "
                   "use one point per species), not " + repr(data["average_within"]))
    tree = Path(data["tree"]).expanduser()
    data["tree"] = tree if tree.is_absolute() else (base_dir / tree).resolve()


def config_from_dict(raw: dict, *, base_dir: Path | str = ".",
                     source: Path | None = None) -> Config:
    """Validate a configuration mapping (as loaded from YAML).

    Parameters
    ----------
    raw : dict
        The mapping.
    base_dir : path
        Folder against which ``data.file`` and ``output.dir`` are resolved.
    source : path, optional
        The config file, for messages and the manifest.
    """
    label = source.name if source is not None else "config"
    try:
        return _build(raw, Path(base_dir), source)
    except _Bad as exc:
        raise ConfigError(f"{label}: {exc}") from None


def _build(raw, base_dir: Path, source) -> Config:
    if not isinstance(raw, dict):
        raise _Bad("(top level)", f"expected a mapping of sections, got {_describe(raw)}")
    for key in raw:
        if key not in _TOP_LEVEL:
            raise _Bad(str(key), f"unknown key{_suggest(key, _TOP_LEVEL)}")
    if "data" not in raw:
        raise _Bad("data", "is required (data.file, data.x and data.y at least)")
    sections = {name: _read_section(raw.get(name), name) for name in _SCHEMA}
    data = sections["data"]
    data["file"] = (Path(data["file"]) if Path(data["file"]).is_absolute()
                    else (base_dir / Path(data["file"]).expanduser()).resolve())
    xs = data["x"] if isinstance(data["x"], tuple) else (data["x"],)
    if data["y"] in xs:
        raise _Bad("data.y", f"is the same column as data.x ({data['y']!r})")
    for key in ("group", "average_within"):
        if data[key] is not None and data[key] in (*xs, data["y"]):
            raise _Bad(f"data.{key}", f"{data[key]!r} is also the x or y column")
    _phylo_keys(data, base_dir)
    exponents = _exponents(raw.get("exponents"), "exponents")
    if isinstance(data["x"], tuple):
        _check_several_x(sections, exponents)
    else:
        _check_single_x(sections, exponents)
    pred = sections["prediction"]
    if isinstance(pred["x"], dict):
        pred["x_table"], pred["x"] = pred["x"], ()
    src = pred.pop("from")
    pred["from_file"] = None if src is None else (
        Path(src) if Path(src).expanduser().is_absolute()
        else (base_dir / Path(src).expanduser()).resolve())
    if sections["groups"]["weight_means"]:
        unweightable = [m for m in sections["model"]["methods"] if m != "ols"]
        if unweightable:
            raise _Bad("groups.weight_means", "weighting group means is available for OLS only "
                       "(weighted least squares); no weighted "
                       f"{'/'.join(m.upper() for m in unweightable)} estimator with valid "
                       "intervals is implemented. Set model.methods: [ols] or "
                       "weight_means: false")
    model = sections["model"]
    if model["primary"] not in model["methods"]:   # a rule's primary always is
        raise _Bad("model.primary", f"'{model['primary']}' is not one of model.methods "
                   f"({', '.join(model['methods'])})")
    if model["error_variances"] and "deming_lambda" in (raw.get("model") or {}):
        raise _Bad("model.error_variances", "give either model.deming_lambda or "
                   "model.error_variances (which sets lambda = y / x), not both")
    out_dir = sections["output"]["dir"]
    if out_dir is None:
        stem = source.stem if source is not None else "scaling"
        out_dir = f"results/{stem}"
    out_path = Path(out_dir).expanduser()
    if not out_path.is_absolute():
        out_path = (base_dir / out_path).resolve()
    top = {key: reader(raw[key], key) if key in raw else default
           for key, (reader, default) in _TOP_SCHEMA.items()}
    title = top["title"] if top["title"] is not None else _TOP_SCHEMA["title"][1]
    engine, scheduler = top["engine"], top["scheduler"]
    if scheduler is not None and engine != "dask":
        raise _Bad("scheduler", "is used only with engine: dask")
    return Config(
        title=title,
        data=DataConfig(**data),
        model=ModelConfig(**sections["model"]),
        exponents=exponents,
        groups=GroupsConfig(**sections["groups"]),
        prediction=PredictionConfig(**sections["prediction"]),
        figures=FiguresConfig(**sections["figures"]),
        output=OutputConfig(dir=out_path),
        diagnostics=DiagnosticsConfig(**sections["diagnostics"]),
        resampling=ResamplingConfig(**sections["resampling"]),
        engine=engine,
        scheduler=scheduler,
        source=source,
        raw=raw,
    )


# the safe loader, reading 1e-9 as a number (as YAML 1.2 does; PyYAML wants a dot: 1.0e-9)
_ConfigLoader = type("_ConfigLoader", (yaml.SafeLoader,), {})
_ConfigLoader.add_implicit_resolver("tag:yaml.org,2002:float", re.compile(
    r"^[-+]?(?:[0-9][0-9_]*(?:\.[0-9_]*)?|\.[0-9_]+)[eE][-+]?[0-9]+$"), list("-+0123456789."))


def load_config(path: str | Path) -> Config:
    """Read and validate a YAML config file.

    Raises
    ------
    ConfigError
        If the file is missing, is not valid YAML, or any key is wrong; the
        message names the file and the key path.
    """
    path = Path(path)
    if not path.exists():
        raise ConfigError(f"{path}: config file not found")
    if path.is_dir():
        raise ConfigError(f"{path}: is a folder, not a config file")
    try:
        text = path.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError as exc:
        raise ConfigError(f"{path}: config file is not UTF-8 text ({exc.reason})") from None
    try:
        raw = yaml.load(text, Loader=_ConfigLoader)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f"line {mark.line + 1}, column {mark.column + 1}: " if mark else ""
        problem = getattr(exc, "problem", None) or str(exc).splitlines()[0]
        raise ConfigError(f"{path}: YAML syntax error at {where}{problem}") from None
    if raw is None:
        raise ConfigError(f"{path}: config file is empty; 'scaling init' writes a starter")
    return config_from_dict(raw, base_dir=path.resolve().parent, source=path)
