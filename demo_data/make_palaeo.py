"""Generate the invented palaeobiology example (fixed seed).

Writes ``bone_mass.csv`` (living species: species-mean femur circumference and
body mass) and ``fossils.csv`` (two fossil femora whose body mass is wanted).

Scenario (invented): museum skeletons of 50 living quadrupedal mammal
species with known mean body mass (kg); the least circumference of the
femur shaft (mm) is measured on each.  Two fossil femora are measured the
same way.

The truth behind the numbers (species means, log10 scale):

* log10 mass = -3.40 + 2.70 log10 circumference + u,  u ~ N(0, 0.10)
  (about 26% scatter of species about the line -- their build, not
  measurement error).  The same line solved for the bone:
  log10 circumference = (log10 mass + 3.40) / 2.70 (the target of an
  inverse prediction; the forward regression of mass on bone estimates
  the first form).
* Circumference of the living species: log10 C uniform on [log10 15, log10 320] mm
  (about 0.6 kg to 2.3 t).
* Measurement error of a species-mean circumference: N(0, 0.01) in log10.
* Fossils: ``F1`` circumference 118 mm (inside the living range; median mass
  on the true line 10^(-3.40 + 2.70 log10 118) = 156 kg) and ``F2`` 410 mm
  (outside the range: extrapolated; true-line median 4.51 t).

Run ``python demo_data/make_palaeo.py`` to rewrite both CSV files.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd

SEED = 20261204
LOG_A = -3.40
B = 2.70
SCATTER = 0.10
N_SPECIES = 50
FOSSILS = {"F1": 118.0, "F2": 410.0}


def true_mass(circumference_mm):
    """Median body mass (kg) on the true line."""
    return 10 ** (LOG_A + B * np.log10(circumference_mm))


def make(seed: int = SEED) -> tuple[pd.DataFrame, pd.DataFrame]:
    rng = np.random.default_rng(seed)
    log_c = rng.uniform(math.log10(15), math.log10(320), N_SPECIES)
    log_m = LOG_A + B * log_c + rng.normal(0, SCATTER, N_SPECIES)
    log_c_obs = log_c + rng.normal(0, 0.01, N_SPECIES)
    orders = rng.choice(["Carnivora", "Artiodactyla", "Rodentia", "Perissodactyla",
                         "Primates"], N_SPECIES)
    living = pd.DataFrame({
        "species": [f"sp_{i + 1:02d}" for i in range(N_SPECIES)],
        "order": orders,
        "femur_circumference_mm": np.round(10 ** log_c_obs, 1),
        "body_mass_kg": np.round(10 ** log_m, 2),
    })
    fossils = pd.DataFrame({"specimen": list(FOSSILS),
                            "femur_circumference_mm": list(FOSSILS.values())})
    return living, fossils


if __name__ == "__main__":
    living, fossils = make()
    here = Path(__file__).parent
    living.to_csv(here / "bone_mass.csv", index=False)
    fossils.to_csv(here / "fossils.csv", index=False)
    print(f"wrote {here / 'bone_mass.csv'} and {here / 'fossils.csv'}")
    for name, c in FOSSILS.items():
        print(f"{name}: circumference {c:g} mm, true-line median mass {true_mass(c):,.0f} kg")
