"""Generate the invented fisheries example ``fish_length_weight.csv`` (fixed seed).

Scenario (invented): total length (cm) and wet weight (g) of fish of one
species sampled at landing sites from four stocks -- North Bank, Fjord,
Shelf Edge and Estuary -- in the survey years 2023 and 2024.

The truth behind the numbers (weight = a * length^b, log10 scale):

=========== ======== ============ =================== ============
stock       true b   log10 a      length range (cm)   fish
=========== ======== ============ =================== ============
North Bank  3.00     -2.00        18 - 62             220
Fjord       3.00     -1.96        15 - 48             160
Shelf Edge  3.00     -2.03        22 - 70             240
Estuary     3.20     -2.30        12 - 40             140
=========== ======== ============ =================== ============

* Three stocks grow isometrically (b = 3, the cube law); they differ in
  condition (elevation): Fjord fish are about 10% heavier at a given length
  than North Bank fish, Shelf Edge about 7% lighter.
* The Estuary stock is positively allometric (b = 3.2): long fish are
  relatively heavy.
* Scatter: log10 weight = log10 a + b log10 length + N(0, 0.035) (about 8%),
  lengths measured to the nearest 0.1 cm, weights to the nearest gram
  (0.1 g below 100 g).
* Median weight at 40 cm (the truth, no scatter): North Bank 640 g, Fjord 702 g,
  Shelf Edge 597 g, Estuary 671 g (log10 W = log10 a + b log10 40).

Run ``python demo_data/make_fisheries.py`` to rewrite the CSV.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

SEED = 20261202
STOCKS = {
    # name: (b, log10 a, min length, max length, number of fish)
    "North Bank": (3.00, -2.00, 18.0, 62.0, 220),
    "Fjord": (3.00, -1.96, 15.0, 48.0, 160),
    "Shelf Edge": (3.00, -2.03, 22.0, 70.0, 240),
    "Estuary": (3.20, -2.30, 12.0, 40.0, 140),
}
SCATTER = 0.035


def true_weight(stock: str, length_cm):
    """Median weight (g) of the truth at ``length_cm``."""
    b, log_a, *_ = STOCKS[stock]
    return 10 ** (log_a + b * np.log10(length_cm))


def make(seed: int = SEED) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    parts = []
    for stock, (b, log_a, lo, hi, n) in STOCKS.items():
        # length-frequency: more small than large fish (log-uniform lengths)
        length = np.round(10 ** rng.uniform(np.log10(lo), np.log10(hi), n), 1)
        log_w = log_a + b * np.log10(length) + rng.normal(0, SCATTER, n)
        w = 10 ** log_w
        weight = np.where(w < 100, np.round(w, 1), np.round(w, 0))
        parts.append(pd.DataFrame({
            "stock": stock, "year": rng.choice([2023, 2024], n),
            "length_cm": length, "weight_g": weight,
        }))
    table = pd.concat(parts, ignore_index=True)
    table = table.sample(frac=1.0, random_state=seed % 2**32).reset_index(drop=True)
    table.insert(0, "fish_id", [f"F{i + 1:04d}" for i in range(len(table))])
    return table


if __name__ == "__main__":
    out = Path(__file__).with_name("fish_length_weight.csv")
    make().to_csv(out, index=False)
    print(f"wrote {out}")
