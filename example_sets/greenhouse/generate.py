"""Regenerate the invented greenhouse example: data.csv (2,000 days) and truth.csv (its edges).

The data are SIMULATED from the linear-Gaussian structural model written below; nothing here was
measured. Each variable has a latent value on a standard scale,

    latent_v = sum over parents u of  weight[u, v] * latent_u  +  noise_v,

where the noise is Gaussian and its standard deviation is set so that every latent variable has
variance 1 (so each weight is a standardised path coefficient). The latent value is then shown in
the variable's own unit as ``mean + spread * latent``, an affine change that keeps the model
linear-Gaussian. The seed is fixed: running the script again rewrites identical files.

Usage::

    python example_sets/greenhouse/generate.py              # rewrite the files beside this script
    python example_sets/greenhouse/generate.py --out DIR    # write them to DIR instead
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import pandas as pd

SEED = 20240611
N_ROWS = 2000

# name: (unit, mean, spread, decimals); the column order of data.csv.
VARIABLES = {
    "outside_temp": ("°C", 14.0, 6.0, 1),
    "sunlight": ("W/m²", 450.0, 110.0, 0),
    "heating": ("kW", 45.0, 12.0, 1),
    "irrigation": ("L/m² per day", 4.0, 1.0, 2),
    "air_temp": ("°C", 22.0, 2.5, 2),
    "vent_opening": ("%", 45.0, 10.0, 1),
    "humidity": ("% RH", 72.0, 7.0, 1),
    "co2": ("ppm", 650.0, 90.0, 0),
    "soil_moisture": ("% vol", 30.0, 4.0, 2),
    "leaf_area": ("m²/m²", 3.2, 0.5, 3),
    "fungal_spots": ("% of leaves", 15.0, 3.5, 2),
    "fruit_yield": ("kg/m² per week", 1.8, 0.3, 3),
}

# (cause, effect): standardised weight. Listed so that every cause precedes its effects.
# The diagram has a single loop in its skeleton (irrigation reaches the harvest through the
# leaves and, the other way, through damp air and fungi); the weights keep one of those two
# routes clearly stronger, so that no two paths nearly cancel (the model is faithful with a
# margin: see the README and tests/test_example_greenhouse.py).
WEIGHTS = {
    ("outside_temp", "heating"): -0.52,  # the heating controller works harder on cold days
    ("heating", "air_temp"): 0.58,
    ("sunlight", "air_temp"): 0.64,
    ("air_temp", "vent_opening"): 0.76,  # vents open when the air gets warm
    ("vent_opening", "co2"): -0.71,  # open vents dilute the enriched CO2
    ("vent_opening", "humidity"): -0.51,  # open vents let moist air out ...
    ("irrigation", "humidity"): 0.52,  # ... wet beds add moisture
    ("irrigation", "soil_moisture"): 0.66,
    ("soil_moisture", "leaf_area"): 0.81,
    ("humidity", "fungal_spots"): 0.82,  # fungi spread on damp leaves
    ("leaf_area", "fruit_yield"): 0.63,
    ("fungal_spots", "fruit_yield"): -0.81,
}


def simulate(seed: int = SEED, n_rows: int = N_ROWS) -> pd.DataFrame:
    """Draw the data table from the structural model (deterministic for a seed)."""
    names = list(VARIABLES)
    index = {v: k for k, v in enumerate(names)}
    w = np.zeros((len(names), len(names)))
    for (u, v), weight in WEIGHTS.items():
        if index[u] >= index[v]:
            raise SystemExit(f"list {u} before {v} in VARIABLES: causes come first")
        w[index[u], index[v]] = weight
    # Noise variances giving unit latent variances, solved in causal (column) order:
    # var(latent_v) = w_v' cov(parents) w_v + noise_v = 1.
    cov = np.zeros_like(w)
    noise_sd = np.zeros(len(names))
    for v in range(len(names)):
        explained = w[:, v] @ cov @ w[:, v]
        if explained >= 0.9:
            raise SystemExit(f"{names[v]}: parents explain {explained:.2f} of its variance; "
                             "lower the weights so that the noise keeps at least 10%")
        noise_sd[v] = np.sqrt(1.0 - explained)
        cov[v, :v] = cov[:v, v] = w[:, v] @ cov[:, :v]
        cov[v, v] = 1.0
    rng = np.random.default_rng(seed)
    latent = rng.standard_normal((n_rows, len(names))) * noise_sd
    for v in range(len(names)):            # names are in causal order
        latent[:, v] += latent @ w[:, v]
    columns = {}
    for name, (_, mean, spread, decimals) in VARIABLES.items():
        columns[name] = np.round(mean + spread * latent[:, index[name]], decimals)
    return pd.DataFrame(columns)


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--out", type=Path, default=Path(__file__).resolve().parent,
                        help="folder for data.csv and truth.csv (default: beside this script)")
    args = parser.parse_args(argv)
    args.out.mkdir(parents=True, exist_ok=True)
    simulate().to_csv(args.out / "data.csv", index=False, lineterminator="\n")
    truth = pd.DataFrame(list(WEIGHTS), columns=["from", "to"])
    truth.to_csv(args.out / "truth.csv", index=False, lineterminator="\n")
    print(f"wrote {args.out / 'data.csv'} ({N_ROWS} rows) and {args.out / 'truth.csv'} "
          f"({len(truth)} edges)")


if __name__ == "__main__":
    main()
