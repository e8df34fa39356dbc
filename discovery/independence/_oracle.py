"""A d-separation oracle: independence answered from a known causal diagram.

In a DAG, ``x`` and ``y`` are *d-separated* by ``S`` when every path between them is blocked:
it passes through a non-collider in ``S``, or through a collider that is not in ``S`` and has no
descendant in ``S`` (Pearl 1988, *Probabilistic Reasoning in Intelligent Systems*). Under the
Markov and faithfulness assumptions, d-separation and conditional independence coincide, so a
search run on this oracle must return the diagram's equivalence class exactly. That makes the
oracle the reference for validating the search and a teaching aid.

The answers come from networkx's d-separation (``networkx.is_d_separator``): p-value 1 for
d-separated, 0 for d-connected.
"""

from __future__ import annotations

import networkx as nx
import numpy as np

from ..exceptions import DataValidationError
from ._base import IndependenceTest

__all__ = ["DSeparationOracle"]


class DSeparationOracle(IndependenceTest):
    """Independence test that reads d-separation off a known DAG.

    Parameters
    ----------
    dag : networkx.DiGraph
        The true diagram; must be acyclic. Node names become variable names (as strings).

    Examples
    --------
    >>> import networkx as nx
    >>> oracle = DSeparationOracle(nx.DiGraph([("a", "c"), ("b", "c")]))
    >>> oracle.test("a", "b").pvalue, oracle.test("a", "b", ["c"]).pvalue
    (1.0, 0.0)
    """

    name = "d-separation"
    vectorised = True

    def __init__(self, dag: nx.DiGraph):
        if not isinstance(dag, nx.DiGraph):
            raise DataValidationError("DSeparationOracle needs a networkx.DiGraph")
        if not nx.is_directed_acyclic_graph(dag):
            raise DataValidationError(
                f"the oracle's diagram has a cycle {nx.find_cycle(dag)}; give an acyclic graph")
        self.dag = nx.relabel_nodes(dag, {v: str(v) for v in dag.nodes}, copy=True)
        self.variables = tuple(sorted(str(v) for v in dag.nodes))
        self.n = None
        edges = tuple(sorted(self.dag.edges))
        self._key = ("d-separation", tuple(sorted(self.variables)), edges)

    def settings_key(self) -> tuple:
        return self._key

    def _batch(self, triples):
        names = self.variables
        p = np.array([
            1.0 if nx.is_d_separator(self.dag, {names[x]}, {names[y]}, {names[s] for s in S})
            else 0.0
            for x, y, S in triples
        ])
        return p.copy(), p
