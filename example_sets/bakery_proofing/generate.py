"""Simulate the invented bakery proofing trial (fixed seed); writes data.csv and truth.csv.

Everything here is invented: no bakery was measured. Two links are non-monotone on purpose:
the dough rises most at a middle proofing temperature (yeast slows when too cold and suffers
when too warm), and crumb defects appear both when the dough is too dry and when it is too
wet. Correlation is near zero for both, so a linear test misses them.

Run from anywhere: ``python generate.py`` writes next to this file.
"""

from pathlib import Path

import numpy as np
import pandas as pd

SEED = 20240611
ROWS = 800
HERE = Path(__file__).resolve().parent

TRUTH = [("proof_temp", "rise_cm"), ("hydration", "crumb_defects"), ("hydration", "stickiness"),
         ("rise_cm", "loaf_volume"), ("crumb_defects", "loaf_volume"),
         ("loaf_volume", "taste_score")]


def simulate(rows: int = ROWS, seed: int = SEED) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    proof_temp = rng.uniform(20.0, 44.0, rows)                  # °C in the proofing cabinet
    hydration = rng.uniform(55.0, 85.0, rows)                   # water, % of flour weight
    rise_cm = 6.0 - 0.02 * (proof_temp - 32.0) ** 2 + rng.normal(0, 0.35, rows)
    crumb_defects = 0.012 * (hydration - 70.0) ** 2 + rng.normal(0, 0.5, rows)  # per slice
    stickiness = np.exp((hydration - 55.0) / 12.0) + rng.normal(0, 0.6, rows)    # score
    loaf_volume = 1.2 + 0.25 * rise_cm - 0.12 * crumb_defects + rng.normal(0, 0.1, rows)
    taste_score = 2.0 + 1.5 * loaf_volume + rng.normal(0, 0.25, rows)           # panel, 1–10
    frame = pd.DataFrame({
        "proof_temp": proof_temp, "hydration": hydration, "rise_cm": rise_cm,
        "crumb_defects": crumb_defects, "stickiness": stickiness, "loaf_volume": loaf_volume,
        "taste_score": taste_score,
    })
    return frame.round(3)


def main() -> None:
    simulate().to_csv(HERE / "data.csv", index=False)
    pd.DataFrame(TRUTH, columns=["from", "to"]).to_csv(HERE / "truth.csv", index=False)


if __name__ == "__main__":
    main()
