"""A d-separation oracle: independence answered from a known causal diagram.

In a DAG, ``x`` and ``y`` are *d-separated* by ``S`` when every path between them is blocked:
it passes through a non-collider in ``S``, or through a collider that is not in ``S`` and has no
descendant in ``S`` (Pearl 1988, *Probabilistic Reasoning in Intelligent Systems*). Under the
Markov and faithfulness assumptions, d-separation and conditional independence coincide, so a
search run on this oracle must return the diagram's equivalence class exactly. That makes the
oracle the reference for validating the search and a teaching aid.

The answers come from networkx's d-separation (``networkx.is_d_separator``): p-value 1 for
d-separated, 0 for d-connected.

Some variables of the diagram may be *hidden* (``latent=[...]``): the oracle then answers only
about the observed ones, as data would, which is what a search that allows hidden common
causes (FCI) must be checked against (Spirtes, Glymour & Scheines 2000, ch. 6).
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
    latent : iterable of node names, optional
        Hidden variables: they take part in d-separation but are not variables of the
        oracle (they cannot be tested or conditioned on).

    Raises
    ------
    DataValidationError
        ``dag`` is not an acyclic DiGraph, a latent name is not a node, or fewer than two
        variables would be observed.

    Examples
    --------
    >>> import networkx as nx
    >>> oracle = DSeparationOracle(nx.DiGraph([("a", "c"), ("b", "c")]))
    >>> oracle.test("a", "b").pvalue, oracle.test("a", "b", ["c"]).pvalue
    (1.0, 0.0)
    >>> hidden = DSeparationOracle(nx.DiGraph([("u", "a"), ("u", "b")]), latent=["u"])
    >>> hidden.variables, hidden.test("a", "b").pvalue
    (('a', 'b'), 0.0)
    """

    name = "d-separation"
    vectorised = True

    def __init__(self, dag: nx.DiGraph, latent=()):
        if not isinstance(dag, nx.DiGraph):
            raise DataValidationError("DSeparationOracle needs a networkx.DiGraph")
        if not nx.is_directed_acyclic_graph(dag):
            raise DataValidationError(
                f"the oracle's diagram has a cycle {nx.find_cycle(dag)}; give an acyclic graph")
        self.dag = nx.relabel_nodes(dag, {v: str(v) for v in dag.nodes}, copy=True)
        if isinstance(latent, (str, bytes)):
            latent = [latent]
        self.latent = tuple(sorted(str(v) for v in latent))
        unknown = [v for v in self.latent if v not in self.dag]
        if unknown:
            raise DataValidationError(f"latent variable(s) {unknown} are not nodes of the "
                                      "oracle's diagram; name nodes of the DAG")
        self.variables = tuple(sorted(str(v) for v in self.dag.nodes
                                      if str(v) not in self.latent))
        if len(self.variables) < 2:
            raise DataValidationError(f"the oracle observes {len(self.variables)} variable(s) "
                                      "after hiding the latent ones; at least two are needed")
        self.n = None
        edges = tuple(sorted(self.dag.edges))
        self._key = ("d-separation", tuple(sorted(self.variables)), edges, self.latent)

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
