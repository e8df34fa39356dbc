"""Regenerate the invented river-catchment example: data.csv (3,000 days, 40 variables) and
truth.csv (its 58 edges).

The data are SIMULATED from the linear-Gaussian structural model written below; nothing here was
measured in any river. Each variable has a latent value on a standard scale,

    latent_v = sum over parents u of  weight[u, v] * latent_u  +  noise_v,

with Gaussian noise whose standard deviation makes every latent variance 1 (so the weights are
standardised path coefficients). Each column is that latent value in the variable's own unit,
``mean + spread * latent``, rounded. The seed is fixed: running the script again rewrites
identical files.

Usage::

    python example_sets/river_catchment/generate.py              # rewrite the files here
    python example_sets/river_catchment/generate.py --out DIR    # write them to DIR instead
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import pandas as pd

SEED = 20261202
N_ROWS = 3000
BASINS = ("north", "east", "south", "west")

# name: (mean, spread, decimals), in causal order (every cause before its effects).
VARIABLES = {"sunshine": (6.0, 2.0, 2), "air_temp": (12.0, 4.0, 2)}
for b in BASINS:
    VARIABLES.update({f"rain_{b}": (4.0, 1.5, 2), f"fertiliser_{b}": (30.0, 8.0, 1),
                      f"runoff_{b}": (2.0, 0.6, 3), f"nitrate_{b}": (5.0, 1.2, 3),
                      f"turbidity_{b}": (12.0, 4.0, 2), f"algae_{b}": (8.0, 2.5, 2),
                      f"oxygen_{b}": (9.0, 1.2, 3), f"fish_{b}": (40.0, 10.0, 1)})
VARIABLES.update({"reservoir_level": (70.0, 8.0, 2), "outlet_nitrate": (5.0, 1.0, 3),
                  "outlet_turbidity": (12.0, 3.0, 2), "town_abstraction": (20.0, 4.0, 2),
                  "treatment_dose": (3.0, 0.8, 3), "tap_quality": (90.0, 4.0, 2)})

# (cause, effect): standardised weight.
WEIGHTS = {("sunshine", "air_temp"): 0.6}
for b in BASINS:
    WEIGHTS.update({
        (f"rain_{b}", f"runoff_{b}"): 0.75,       # rain runs off the fields
        (f"runoff_{b}", f"turbidity_{b}"): 0.65,  # and carries silt
        (f"fertiliser_{b}", f"nitrate_{b}"): 0.6,
        (f"runoff_{b}", f"nitrate_{b}"): 0.5,     # and washes fertiliser into the stream
        (f"nitrate_{b}", f"algae_{b}"): 0.55,
        ("sunshine", f"algae_{b}"): 0.5,          # algae bloom on nutrients and light
        (f"algae_{b}", f"oxygen_{b}"): -0.55,     # decaying algae use up the oxygen
        ("air_temp", f"oxygen_{b}"): -0.5,        # warm water holds less oxygen
        (f"oxygen_{b}", f"fish_{b}"): 0.6,
        (f"turbidity_{b}", f"fish_{b}"): -0.5,    # silt smothers spawning beds
        (f"runoff_{b}", "reservoir_level"): 0.45,
        (f"nitrate_{b}", "outlet_nitrate"): 0.45,
        (f"turbidity_{b}", "outlet_turbidity"): 0.45,
    })
WEIGHTS.update({("reservoir_level", "town_abstraction"): 0.6,
                ("outlet_turbidity", "treatment_dose"): 0.6,
                ("outlet_nitrate", "treatment_dose"): 0.5,
                ("treatment_dose", "tap_quality"): 0.55,
                ("outlet_turbidity", "tap_quality"): -0.5})


def simulate(seed: int = SEED, n_rows: int = N_ROWS) -> pd.DataFrame:
    """Draw the data table from the structural model (deterministic for a seed)."""
    names = list(VARIABLES)
    index = {v: k for k, v in enumerate(names)}
    w = np.zeros((len(names), len(names)))
    for (u, v), weight in WEIGHTS.items():
        if index[u] >= index[v]:
            raise SystemExit(f"list {u} before {v} in VARIABLES: causes come first")
        w[index[u], index[v]] = weight
    cov = np.zeros_like(w)
    noise_sd = np.zeros(len(names))
    for v in range(len(names)):
        explained = w[:, v] @ cov @ w[:, v]
        if explained >= 0.9:
            raise SystemExit(f"{names[v]}: parents explain {explained:.2f} of its variance")
        noise_sd[v] = np.sqrt(1.0 - explained)
        cov[v, :v] = cov[:v, v] = w[:, v] @ cov[:, :v]
        cov[v, v] = 1.0
    rng = np.random.default_rng(seed)
    latent = rng.standard_normal((n_rows, len(names))) * noise_sd
    for v in range(len(names)):
        latent[:, v] += latent @ w[:, v]
    return pd.DataFrame({name: np.round(mean + spread * latent[:, index[name]], decimals)
                         for name, (mean, spread, decimals) in VARIABLES.items()})


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--out", type=Path, default=Path(__file__).resolve().parent,
                        help="folder for data.csv and truth.csv (default: beside this script)")
    args = parser.parse_args(argv)
    args.out.mkdir(parents=True, exist_ok=True)
    simulate().to_csv(args.out / "data.csv", index=False, lineterminator="\n")
    truth = pd.DataFrame(list(WEIGHTS), columns=["from", "to"])
    truth.to_csv(args.out / "truth.csv", index=False, lineterminator="\n")
    print(f"wrote {args.out / 'data.csv'} ({N_ROWS} rows, {len(VARIABLES)} variables) and "
          f"{args.out / 'truth.csv'} ({len(truth)} edges)")


if __name__ == "__main__":
    main()
