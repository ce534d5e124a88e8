"""Commented starter configs written by ``scaling init``."""

from __future__ import annotations

import re

__all__ = ["EXAMPLES", "EXAMPLE_FOLDERS", "example_files"]

_BASIC = """\
# scaling config: fit y = a * x^b on log-log scales.
# Run:   scaling check THIS.yaml   (validate, fit nothing)
#        scaling run THIS.yaml     (fit and write the output folder)
title: My allometry                 # free text, shown in the report

data:
  file: measurements.csv            # csv, tsv, xlsx or parquet; relative to this file
  x: body_mass                      # predictor column (natural units, > 0)
  y: metabolic_rate                 # response column (natural units, > 0)
  # group: clade                    # fit and compare groups
  # average_within: species         # average log values within each species first
  # exclude: {clade: [outgroup]}    # drop rows whose column has one of these values
  units: {x: g, y: mW}              # labels for axes and tables
  # skip_rows: 0                    # lines above the header line to skip
  # units_row: false                # true: the line under the header holds units
  # delimiter: auto                 # auto, or the character (e.g. ";")
  # decimal: "."                    # "," for decimal commas

model:
  log_base: 10                      # 10, e or 2
  methods: [ols, sma, ma]           # OLS predicts y from x; SMA/MA describe the line;
                                    # also deming, theil_sen, siegel, sma_robust, ma_robust
  confidence: 0.95
  # deming_lambda: 1.0              # Deming: var(error in log y) / var(error in log x)
  # error_variances: {x: 0.0004, y: 0.0025}   # ...or the two variances (lambda = y/x)

exponents:                          # each fit is tested against each of these
  three_quarters: 0.75
  two_thirds: 2/3

diagnostics:
  enabled: true                     # curvature, residuals, influence, error structure
  # alpha: 0.05                     # level at which a check is flagged
  # exponent_at: [0.75]             # where the local exponent reaches these (default: exponents)

resampling:
  bootstrap: 0                      # bootstrap resamples for every interval (0 = off; >= 99)
  # interval: bca                   # bca | percentile
  permutations: 0                   # permutation p-value for every slope test (0 = off)
  # seed: 1

prediction:
  x: [10, 100, 1000]                # natural units of x
  correction: smearing              # smearing | parametric | ratio | none
  interval: prediction              # prediction | confidence

figures:
  formats: [png, pdf]               # png, pdf, svg
  size: single                      # single (85 mm) or double (180 mm) column
  labels: {x: Body mass, y: Metabolic rate}   # axis labels in words; units are added

output:
  dir: results                      # relative to this file; --out overrides
"""

_GROUPS = """\
# scaling config: species means compared across orders (a comparative design).
title: Metabolic scaling across orders

data:
  file: measurements.csv
  x: body_mass
  y: metabolic_rate
  group: order                      # compare these groups
  average_within: species           # one point per species: mean of log values
  units: {x: g, y: mW}

model:
  log_base: 10
  methods: [sma, ols]
  confidence: 0.95

exponents:
  three_quarters: 3/4
  two_thirds: 2/3

groups:
  compare: true                     # common slope? shift in elevation? shift along the axis?
  fit_group_means: true             # also fit one line through the order means
  # pairwise_max: 20                # pairwise order tests only up to this many orders

figures:
  labels: {x: Body mass, y: Metabolic rate}   # axis labels in words; units are added

output:
  dir: results
"""

_LENGTH_WEIGHT = """\
# scaling config: fish length-weight, isometry test per stock (b = 3).
title: Length-weight by stock

data:
  file: catch.csv
  x: total_length
  y: weight
  group: stock
  units: {x: mm, y: g}

model:
  log_base: 10
  methods: [ols, sma]

exponents:
  isometric: 3

prediction:
  x: [200, 300, 400]
  correction: smearing

figures:
  labels: {x: Total length, y: Weight}        # axis labels in words; units are added

output:
  dir: results
"""

EXAMPLES = {"basic": _BASIC, "groups": _GROUPS, "length_weight": _LENGTH_WEIGHT}


# --------------------------------------------------------------------------
# worked examples: a config and its data, written into a folder


#: Worked examples written by ``scaling init --example NAME FOLDER``: the
#: config files of each (in scaling/examples/, copies of configs/*.yaml; the
#: data files they name are copied from scaling/examples/ too).
EXAMPLE_FOLDERS = {
    "fisheries": ("fisheries.yaml",),
    "forestry": ("forestry.yaml",),
    "palaeo": ("palaeo.yaml", "palaeo_forward.yaml"),
    "physiology": ("physiology.yaml",),
}

_DATA_REF = re.compile(r"\.\./demo_data/([A-Za-z0-9_.-]+)")


def example_files(name: str) -> dict:
    """The files of a worked example as ``{file name: bytes}``, ready to write.

    The configs' ``../demo_data/`` paths become paths beside the config and
    ``../results/`` becomes ``results/``, so ``scaling run FOLDER/NAME.yaml``
    works from anywhere.  The files are read from the installed package
    (``scaling/examples``).

    Examples
    --------
    >>> sorted(example_files("fisheries"))
    ['fish_length_weight.csv', 'fisheries.yaml']
    """
    from importlib import resources
    root = resources.files("scaling") / "examples"
    out: dict = {}
    for config in EXAMPLE_FOLDERS[name]:
        text = (root / config).read_text(encoding="utf-8")
        for ref in _DATA_REF.findall(text):
            if (root / ref).is_file() and ref not in out:
                out[ref] = (root / ref).read_bytes()
        text = text.replace("../demo_data/", "").replace("../results/", "results/")
        out[config] = text.encode("utf-8")
    return out
