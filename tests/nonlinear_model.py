"""An invented nonlinear structural model shared by the kernel-test checks and benchmarks.

Ten variables, twelve edges, non-monotone links (squares, sines, absolute values), uniform
roots and Gaussian noise. Invented for the tests; it models nothing real.
"""

import networkx as nx
import numpy as np
import pandas as pd

EDGES = [("v0", "v2"), ("v1", "v2"), ("v0", "v3"), ("v2", "v4"), ("v3", "v4"),
         ("v4", "v5"), ("v1", "v6"), ("v6", "v7"), ("v5", "v8"), ("v7", "v8"),
         ("v3", "v9"), ("v6", "v9")]

_LINKS = [np.square, np.sin, np.abs, lambda u: np.cos(1.5 * u), lambda u: u * np.exp(-u ** 2)]


def dag() -> nx.DiGraph:
    g = nx.DiGraph(EDGES)
    g.add_nodes_from(f"v{i}" for i in range(10))
    return g


def sample(n: int, seed: int = 0) -> pd.DataFrame:
    """``n`` rows; each variable is a sum of non-monotone links of its standardised parents."""
    rng = np.random.default_rng(seed)
    g = dag()
    values = {}
    for k, v in enumerate(nx.topological_sort(g)):
        parents = sorted(g.predecessors(v))
        if not parents:
            values[v] = rng.uniform(-2, 2, n)
            continue
        total = np.zeros(n)
        for j, u in enumerate(parents):
            p = values[u]
            p = (p - p.mean()) / p.std()
            link = _LINKS[(int(u[1:]) + 2 * int(v[1:])) % len(_LINKS)]
            out = link(1.5 * p if link is np.sin else p)
            total += (out - out.mean()) / out.std()
        values[v] = total + 0.5 * rng.normal(size=n)
    return pd.DataFrame({v: values[v] for v in sorted(values, key=lambda s: int(s[1:]))})
