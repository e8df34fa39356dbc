"""Simulate the invented bicycle-courier survey (fixed seed); writes data.csv and truth.csv.

Everything here is invented: no courier was surveyed. Weather and route are categories whose
effects do not follow any order of their labels (the hills are slow, city and river path
alike; customers tip more in the rain and less on snow days), lateness is yes/no, the customer's rating is 1–5 stars, and the
tip is in euros. ``data_codes.csv`` holds the same rows with the categories replaced by the
numbers 0, 1, 2 — the common shortcut that lets a correlation-based test run at all.

Run from anywhere: ``python generate.py`` writes next to this file.
"""

from pathlib import Path

import numpy as np
import pandas as pd

SEED = 7311
ROWS = 1200
HERE = Path(__file__).resolve().parent

TRUTH = [("weather", "speed_kmh"), ("route", "speed_kmh"), ("speed_kmh", "late"),
         ("late", "rating"), ("late", "tip_eur"), ("weather", "tip_eur")]

WEATHER = np.array(["dry", "rain", "snow"])
ROUTE = np.array(["city", "hills", "river"])


def simulate(rows: int = ROWS, seed: int = SEED) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    weather = rng.choice(3, rows, p=[0.5, 0.3, 0.2])
    route = rng.choice(3, rows, p=[0.4, 0.3, 0.3])
    # Route effects chosen so that the codes 0, 1, 2 are uncorrelated with speed: the hills
    # are slow, the city and the river path about equal.
    speed = (22.0 + np.array([0.0, -5.0, -1.0])[weather] + np.array([0.0, -4.0, 0.4])[route]
             + rng.normal(0, 2.0, rows))
    late = rng.random(rows) < 1.0 / (1.0 + np.exp(0.45 * (speed - 19.0)))
    stars = np.clip(np.round(4.3 - 1.6 * late + rng.normal(0, 0.7, rows)), 1, 5).astype(int)
    # Customers tip more in the rain, a little less on snow days (again uncorrelated with codes).
    tip = np.clip(2.5 - 1.2 * late + np.array([0.0, 1.5, -0.55])[weather]
                  + rng.normal(0, 0.6, rows), 0, None)
    return pd.DataFrame({
        "weather": WEATHER[weather], "route": ROUTE[route], "speed_kmh": speed.round(1),
        "late": np.where(late, "yes", "no"), "rating": stars, "tip_eur": tip.round(2),
    })


def main() -> None:
    frame = simulate()
    frame.to_csv(HERE / "data.csv", index=False)
    codes = frame.copy()
    for column, labels in (("weather", WEATHER), ("route", ROUTE)):
        codes[column] = codes[column].map({v: i for i, v in enumerate(labels)})
    codes["late"] = (codes["late"] == "yes").astype(int)
    codes.to_csv(HERE / "data_codes.csv", index=False)
    pd.DataFrame(TRUTH, columns=["from", "to"]).to_csv(HERE / "truth.csv", index=False)


if __name__ == "__main__":
    main()
