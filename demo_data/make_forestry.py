"""Generate the invented forestry example (fixed seed).

Writes ``forest_trees.csv`` (felled and weighed sample trees) and
``forest_plot.csv`` (standing trees of one inventory plot, measured but not
weighed, whose total biomass is wanted).

Scenario (invented): a destructive-sampling campaign in a mixed broadleaf
stand -- 120 trees felled across the diameter range, stem diameter at
breast height (cm), total height (m) and oven-dry above-ground biomass (kg);
then a 0.1 ha inventory plot of 28 standing trees with diameter and height.

The truth behind the numbers:

* biomass = 0.025 * diameter^2 * height * E, i.e. log10 biomass =
  log10(0.025) + 2 log10 D + 1 log10 H + log10 E -- the exponents of a
  cylinder, **2 for diameter and 1 for height**; log10 a = -1.60206.
* E is multiplicative log-normal error: log10 E ~ N(0, 0.09) (about 23%
  scatter), so the mean biomass at given D and H is the median times
  exp((0.09 ln 10)^2 / 2) = 1.0439.
* Height depends on diameter (an invented height-diameter curve):
  log10 H = 0.55 + 0.55 log10 D + N(0, 0.06), so D and H are correlated but
  not collinear.
* Sample trees: log10 D uniform on [log10 6, log10 70] cm.
* Plot trees: diameters 8-62 cm from the same curve, and one tree of 78 cm
  (outside the sampled range: its prediction is extrapolated and flagged).
  The true expected total above-ground biomass of the plot (the sum of the
  mean biomass of its 28 trees, with their recorded D and H) is printed by
  this script and written in the last line of this docstring.

Run ``python demo_data/make_forestry.py`` to rewrite both CSV files.

True expected plot total: 23,531 kg (from ``expected_plot_total()``).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd

SEED = 20261203
LOG_A = math.log10(0.025)
B_DIAMETER = 2.0
B_HEIGHT = 1.0
SCATTER = 0.09            # SD of log10 E
N_SAMPLE = 120
N_PLOT = 27               # plus the one large tree


def _height(rng, d):
    return np.round(10 ** (0.55 + 0.55 * np.log10(d) + rng.normal(0, 0.06, d.size)), 1)


def make(seed: int = SEED) -> tuple[pd.DataFrame, pd.DataFrame]:
    rng = np.random.default_rng(seed)
    d = np.round(10 ** rng.uniform(math.log10(6), math.log10(70), N_SAMPLE), 1)
    h = _height(rng, d)
    log_b = LOG_A + B_DIAMETER * np.log10(d) + B_HEIGHT * np.log10(h) \
        + rng.normal(0, SCATTER, N_SAMPLE)
    trees = pd.DataFrame({
        "tree_id": [f"S{i + 1:03d}" for i in range(N_SAMPLE)],
        "species_group": rng.choice(["oak", "beech", "maple", "ash"], N_SAMPLE),
        "diameter_cm": d, "height_m": h, "biomass_kg": np.round(10 ** log_b, 2),
    })
    pd_ = np.round(10 ** rng.uniform(math.log10(8), math.log10(62), N_PLOT), 1)
    pd_ = np.append(pd_, 78.0)
    ph = _height(rng, pd_)
    plot = pd.DataFrame({
        "tree_id": [f"P{i + 1:02d}" for i in range(N_PLOT + 1)],
        "diameter_cm": pd_, "height_m": ph,
    })
    return trees, plot


def expected_plot_total(plot: pd.DataFrame) -> float:
    """Sum of the true mean biomass (kg) of the plot trees."""
    median = 10 ** (LOG_A + B_DIAMETER * np.log10(plot.diameter_cm)
                    + B_HEIGHT * np.log10(plot.height_m))
    return float(median.sum() * math.exp((SCATTER * math.log(10)) ** 2 / 2))


if __name__ == "__main__":
    trees, plot = make()
    here = Path(__file__).parent
    trees.to_csv(here / "forest_trees.csv", index=False)
    plot.to_csv(here / "forest_plot.csv", index=False)
    print(f"wrote {here / 'forest_trees.csv'} and {here / 'forest_plot.csv'}")
    print(f"true expected plot total: {expected_plot_total(plot):,.0f} kg")
