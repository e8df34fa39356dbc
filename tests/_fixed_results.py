"""Two small results with every varying figure (timings, seconds, versions) fixed, for the
byte-for-byte check of the result JSON (tests/test_save_large.py). The file
tests/data/result_small_v1.json holds their JSON as the code before the evidence could be
left out wrote it; this module must keep building exactly the same results."""

import dataclasses
import math

import networkx as nx

from discovery import Knowledge, discover
from discovery.independence import DSeparationOracle
from discovery.result import SearchResult


def _fixed(result):
    counts = dict(result.counts)
    counts["levels"] = [dict(level, seconds=0.0) for level in counts.get("levels", [])]
    return dataclasses.replace(result, counts=counts,
                               timings={k: 0.0 for k in result.timings},
                               software={"edgewise": "fixed", "python": "fixed"})


def oracle_result():
    """rain → wet ← sprinkler, wet → slippery, wärme → rain (a non-ASCII name), with a
    forbidden direction; answered by d-separation."""
    dag = nx.DiGraph([("rain", "wet"), ("sprinkler", "wet"), ("wet", "slippery"),
                      ("wärme", "rain")])
    return _fixed(discover(None, test=DSeparationOracle(dag),
                           knowledge=Knowledge(forbidden_directions=[("slippery", "wet")])))


def hand_result():
    """A result built by hand whose evidence has a test without a p-value (written null)."""
    from discovery.result import Edge, Removal
    from discovery.settings import SearchSettings
    return SearchResult(
        variables=("x", "y", "z"), settings=SearchSettings(), knowledge=Knowledge(),
        edges=(Edge("x", "y", "undirected", max_pvalue=float("nan"), tests=2,
                    untestable="too few rows"),),
        removed=(Removal("x", "z", (), 0.5, "test"), Removal("y", "z", ("x",), 0.25, "test")),
        tests=[("x", "y", (), math.nan), ("x", "z", (), 0.5), ("y", "z", (), 0.01),
               ("x", "y", ("z",), 0.001), ("y", "z", ("x",), 0.25)],
        counts={"tests": 5}, notes=("a note",))
