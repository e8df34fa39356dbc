"""Regenerate the invented office-building example: data.csv (1,500 working days) and
truth.csv (its edges, including those of the unmeasured variable ``staff_present``).

The data are SIMULATED from the linear-Gaussian structural model written below; nothing here was
measured in any building. ``staff_present`` drives both coffee sales and printing, but it is
left OUT of data.csv on purpose: it is the hidden common cause of this example. Each variable
has a latent value on a standard scale (weighted sum of its parents plus Gaussian noise of
variance chosen to make the total variance 1), shown in its own unit as ``mean + spread *
latent``. The seed is fixed: running the script again rewrites identical files.

Usage::

    python example_sets/office_building/generate.py              # rewrite the files here
    python example_sets/office_building/generate.py --out DIR    # write them to DIR instead
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import pandas as pd

SEED = 7311
N_ROWS = 1500
HIDDEN = ("staff_present",)

# name: (mean, spread, decimals), causes before effects.
VARIABLES = {
    "rain_mm": (3.0, 1.5, 2),              # rain on the way to work
    "deadlines": (4.0, 1.5, 2),            # project deadlines due that week
    "staff_present": (300.0, 40.0, 0),     # people in the building: NOT MEASURED
    "coffee_sales": (420.0, 60.0, 0),      # cups sold in the ground-floor café
    "printer_pages": (5200.0, 900.0, 0),   # pages printed
    "cup_waste_kg": (9.0, 1.5, 2),         # paper-cup waste collected
    "toner_orders": (2.0, 0.5, 3),         # toner cartridges ordered (weekly rate)
}

WEIGHTS = {
    ("rain_mm", "coffee_sales"): 0.55,         # wet mornings send people to the café
    ("staff_present", "coffee_sales"): 0.6,
    ("staff_present", "printer_pages"): 0.6,
    ("deadlines", "printer_pages"): 0.55,      # deadline weeks print more drafts
    ("coffee_sales", "cup_waste_kg"): 0.7,
    ("printer_pages", "toner_orders"): 0.7,
}


def simulate(seed: int = SEED, n_rows: int = N_ROWS) -> pd.DataFrame:
    """Draw every variable (the hidden one too) from the model (deterministic for a seed)."""
    names = list(VARIABLES)
    index = {v: k for k, v in enumerate(names)}
    w = np.zeros((len(names), len(names)))
    for (u, v), weight in WEIGHTS.items():
        w[index[u], index[v]] = weight
    cov = np.zeros_like(w)
    noise_sd = np.zeros(len(names))
    for v in range(len(names)):
        explained = w[:, v] @ cov @ w[:, v]
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
    frame = simulate().drop(columns=list(HIDDEN))   # the hidden cause is not measured
    frame.to_csv(args.out / "data.csv", index=False, lineterminator="\n")
    truth = pd.DataFrame(list(WEIGHTS), columns=["from", "to"])
    truth.to_csv(args.out / "truth.csv", index=False, lineterminator="\n")
    print(f"wrote {args.out / 'data.csv'} ({N_ROWS} rows, without {', '.join(HIDDEN)}) and "
          f"{args.out / 'truth.csv'} ({len(truth)} edges)")


if __name__ == "__main__":
    main()
