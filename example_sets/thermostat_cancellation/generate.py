"""Regenerate the invented thermostat example: data.csv (1,000 days) and truth.csv (its edges).

The data are SIMULATED from the linear-Gaussian structural model below; nothing was measured.
It is built to FAIL faithfulness on purpose: the outside temperature reaches the room along two
paths whose effects cancel exactly, as a good thermostat intends,

    outdoor_temp -> heater_power -> room_temp     (-0.8) x (+0.6) = -0.48
    outdoor_temp -> heat_loss    -> room_temp     (-0.8) x (-0.6) = +0.48

so outdoor_temp and room_temp are uncorrelated although outdoor_temp causes room_temp. Each
variable has a latent value with variance 1 (the weights are standardised path coefficients),
shown in its own unit as ``mean + spread * latent``. The seed is fixed: running the script
again rewrites identical files.

Usage::

    python example_sets/thermostat_cancellation/generate.py              # beside this script
    python example_sets/thermostat_cancellation/generate.py --out DIR    # to DIR instead
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import pandas as pd

SEED = 7
N_ROWS = 1000

# name: (unit, mean, spread, decimals); the column order of data.csv, causes first.
VARIABLES = {
    "outdoor_temp": ("°C", 6.0, 5.0, 1),
    "heater_power": ("kW", 4.0, 1.2, 2),
    "heat_loss": ("kW", 3.5, 1.0, 2),
    "room_temp": ("°C", 20.5, 0.8, 2),
}

# (cause, effect): standardised weight.
WEIGHTS = {
    ("outdoor_temp", "heater_power"): -0.8,  # the thermostat heats more on cold days
    ("outdoor_temp", "heat_loss"): -0.8,  # the walls lose more heat on cold days
    ("heater_power", "room_temp"): 0.6,
    ("heat_loss", "room_temp"): -0.6,  # the two paths from outdoor_temp cancel exactly
}


def simulate(seed: int = SEED, n_rows: int = N_ROWS) -> pd.DataFrame:
    """Draw the data table from the structural model (deterministic for a seed)."""
    names = list(VARIABLES)
    index = {v: k for k, v in enumerate(names)}
    w = np.zeros((len(names), len(names)))
    for (u, v), weight in WEIGHTS.items():
        w[index[u], index[v]] = weight
    cov = np.zeros_like(w)
    noise_sd = np.zeros(len(names))
    for v in range(len(names)):  # unit latent variances, in causal order
        explained = w[:, v] @ cov @ w[:, v]
        noise_sd[v] = np.sqrt(1.0 - explained)
        cov[v, :v] = cov[:v, v] = w[:, v] @ cov[:, :v]
        cov[v, v] = 1.0
    rng = np.random.default_rng(seed)
    latent = rng.standard_normal((n_rows, len(names))) * noise_sd
    for v in range(len(names)):
        latent[:, v] += latent @ w[:, v]
    return pd.DataFrame({name: np.round(mean + spread * latent[:, index[name]], decimals)
                         for name, (_, mean, spread, decimals) in VARIABLES.items()})


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
