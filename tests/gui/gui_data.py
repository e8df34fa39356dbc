"""Invented tables for the window's tests."""

from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[2]
EXAMPLE = ROOT / "example_sets" / "greenhouse"


def collider_frame(n=800, seed=3) -> pd.DataFrame:
    """a → c ← b, c → d: a collider and a chain, linear-Gaussian (invented test data)."""
    rng = np.random.default_rng(seed)
    a = rng.normal(size=n)
    b = rng.normal(size=n)
    c = 0.9 * a + 0.9 * b + rng.normal(size=n)
    d = 0.9 * c + rng.normal(size=n)
    e = rng.normal(size=n)
    return pd.DataFrame({"a": a, "b": b, "c": c, "d": d, "e": e})


def latent_frame(p=40, n=300, seed=5) -> pd.DataFrame:
    """Every column driven by one unmeasured factor: no pair separates, so the search grows
    level after level (a long run for stop tests; invented data)."""
    rng = np.random.default_rng(seed)
    factor = rng.normal(size=n)
    cols = {f"v{i:02d}": 0.8 * factor + rng.normal(scale=0.6, size=n) for i in range(p)}
    return pd.DataFrame(cols)


#: Name parts of the 60-variable table (an invented water-network scenario).
_WORDS = ("inflow", "pressure", "valve_open", "turbidity", "chlorine", "pump_speed",
          "tank_level", "night_use", "leak_alarm", "temperature", "main_flow", "ph")


def sixty_frame(n=600, seed=8) -> pd.DataFrame:
    """60 variables from a random linear-Gaussian diagram (about two neighbours each), named
    like the readings of an invented water network; for the readability check."""
    import networkx as nx
    from discovery.simulate import random_dag, sample_linear_gaussian
    dag = random_dag(60, expected_degree=2.0, rng=seed)
    names = {v: f"{_WORDS[i % len(_WORDS)]}_{i // len(_WORDS) + 1}"
             for i, v in enumerate(sorted(dag.nodes))}
    dag = nx.relabel_nodes(dag, names)
    return sample_linear_gaussian(dag, n, rng=seed)


RUN_TIMEOUT = 120_000  # ms; generous, the machine is shared (not a speed check)


def run_and_wait(qtbot, w):
    """Start a run in the window and wait until it has ended (done, stopped or failed)."""
    assert w.run()
    qtbot.waitUntil(lambda: w.session.status not in ("running", "stopping"),
                    timeout=RUN_TIMEOUT)
