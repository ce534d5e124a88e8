"""Generate the invented demo data set ``resting_rate.csv`` (fixed seed).

Scenario (invented, not real animals): resting metabolic rate of individual
small mammals from 40 species in five invented clades -- Dunefoot,
Marshrunner, Ridgeback, Canopy and Burrower -- measured in a respirometry
lab over a few seasons.

The truth behind the numbers:

* Each species has a true mean log10 body mass drawn per clade (the clades
  cover different size ranges: Canopy are small, Ridgeback large).
* Within species and across species, log10 rate = intercept_clade
  + 0.72 * log10 mass + species effect + individual noise, so every clade
  shares the exponent **0.72**.
* Clade intercepts (log10 mW at 1 g): Dunefoot 0.75, Marshrunner 0.75,
  Ridgeback 0.75, Canopy 0.87, Burrower 0.63 -- Canopy sits higher and
  Burrower lower on the common slope; Ridgeback is shifted along the axis
  (heavier) but not in elevation.
* Species effects: N(0, 0.04) in log10 rate; individual noise N(0, 0.06)
  in log10 rate and N(0, 0.03) in log10 mass (weighing error).
* Bad rows, on purpose: a zero mass, a blank rate, a text note in the mass
  column, a censored rate ("<5"), a negative mass, a row with no clade, and
  an outgroup species (clade "outgroup") that the demo config excludes.

Run ``python demo_data/make_demo.py`` to rewrite the CSV.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

SEED = 20261201
EXPONENT = 0.72
CLADES = {
    # name: (intercept, mean log10 mass of species, sd of species log10 mass)
    "Dunefoot": (0.75, 1.6, 0.45),
    "Marshrunner": (0.75, 2.0, 0.45),
    "Ridgeback": (0.75, 2.9, 0.40),
    "Canopy": (0.87, 1.3, 0.35),
    "Burrower": (0.63, 2.2, 0.45),
}
SPECIES_PER_CLADE = 8


def make(seed: int = SEED) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    rows = []
    syllables = ["ka", "lo", "mi", "ru", "te", "sa", "vo", "ni", "pe", "zu"]
    for c, (clade, (icpt, mu, sd)) in enumerate(CLADES.items()):
        for s in range(SPECIES_PER_CLADE):
            name = (clade[:4].lower() + "_" + syllables[(3 * c + s) % 10]
                    + syllables[(c + 2 * s) % 10])
            true_mass = rng.normal(mu, sd)
            effect = rng.normal(0, 0.04)
            for _ in range(int(rng.integers(4, 11))):
                log_m = true_mass + rng.normal(0, 0.05)
                log_rate = icpt + EXPONENT * log_m + effect + rng.normal(0, 0.06)
                log_m_obs = log_m + rng.normal(0, 0.03)
                rows.append({
                    "clade": clade, "species": name,
                    "body_mass": round(10 ** log_m_obs, 2),
                    "resting_rate": round(10 ** log_rate, 2),
                    "season": int(rng.integers(2019, 2023)),
                })
    for _ in range(5):
        rows.append({"clade": "outgroup", "species": "outg_kaka",
                     "body_mass": round(10 ** rng.normal(3.5, 0.1), 1),
                     "resting_rate": round(10 ** rng.normal(2.0, 0.1), 1),
                     "season": 2021})
    table = pd.DataFrame(rows).sample(frac=1.0, random_state=seed % 2**32)
    table = table.reset_index(drop=True).astype({"body_mass": object, "resting_rate": object})
    table.loc[3, "body_mass"] = 0            # a zero mass
    table.loc[11, "resting_rate"] = ""       # a blank rate
    table.loc[19, "body_mass"] = "escaped"   # a note typed into a number column
    table.loc[27, "resting_rate"] = "<5"     # below the detection limit
    table.loc[35, "body_mass"] = -12.5       # a sign error
    table.loc[44, "clade"] = ""              # clade not recorded
    return table


if __name__ == "__main__":
    out = Path(__file__).with_name("resting_rate.csv")
    make().to_csv(out, index=False)
    print(f"wrote {out}")
