"""Sample data from the ALARM monitoring network's published tables.

ALARM (Beinlich, Suermondt, Chavez & Cooper 1989, "The ALARM monitoring system: a case study
with two probabilistic inference techniques for belief networks"): 37 discrete variables, 46
edges. ``tests/data/alarm_network.json`` holds its states, parents and conditional probability
tables (copied from the project's shared reference folder); sampling follows the tables in a
topological order (forward sampling), so the true structure of the data is known.
"""

from __future__ import annotations

import json
from pathlib import Path

import networkx as nx
import numpy as np
import pandas as pd

NETWORK = Path(__file__).parent / "data" / "alarm_network.json"


def alarm_network() -> tuple[nx.DiGraph, dict]:
    """The ALARM DAG and the parsed network document."""
    doc = json.loads(NETWORK.read_text())
    dag = nx.DiGraph()
    dag.add_nodes_from(doc["variables"])
    for child, parents in doc["parents"].items():
        dag.add_edges_from((p, child) for p in parents)
    return dag, doc


def sample_alarm(n: int, seed) -> pd.DataFrame:
    """``n`` rows sampled from the ALARM tables; states as the integers 0..k-1."""
    rng = np.random.default_rng(seed)
    dag, doc = alarm_network()
    out: dict[str, np.ndarray] = {}
    for var in nx.lexicographical_topological_sort(dag):
        parents = doc["parents"][var]
        k = len(doc["variables"][var])
        cpt = doc["cpts"][var]
        if parents:
            sizes = [len(doc["variables"][p]) for p in parents]
            table = np.zeros((int(np.prod(sizes)), k))
            for key, probs in cpt.items():
                states = [int(s) for s in key.split(",")]
                table[np.ravel_multi_index(states, sizes)] = probs
            row = np.ravel_multi_index([out[p] for p in parents], sizes)
        else:
            table = np.asarray([cpt[""]], dtype=float)
            row = np.zeros(n, dtype=np.intp)
        cum = np.cumsum(table, axis=1)
        cum[:, -1] = 1.0
        u = rng.random(n)
        out[var] = (u[:, None] > cum[row]).sum(axis=1).astype(np.int64)
    return pd.DataFrame({v: out[v] for v in sorted(out)})
