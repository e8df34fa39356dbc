"""One marked graph for every diagram the control-set analysis reads.

Each edge carries a *mark* at each end: ``tail``, ``arrow`` or ``circle``. A DAG has only
tail/arrow edges; a CPDAG or a maximally oriented PDAG adds tail/tail (undirected) edges; a PAG
adds circles and arrow/arrow (bidirected) edges. Reading every kind through its marks lets one
code path serve all of them (Perković, Textor, Kalisch & Maathuis 2018 state the generalised
adjustment criterion the same way for DAGs, CPDAGs, MAGs and PAGs).

``mark[u][v]`` is the mark at ``v``'s end of the edge ``u *-* v``: ``u → v`` is
``mark[u][v] == "arrow"`` and ``mark[v][u] == "tail"``.

This module also finds a member of the class (a DAG in a CPDAG or PDAG, Dor & Tarsi 1992; a
DAG with one hidden node per bidirected edge for a maximal ancestral graph of a PAG, Zhang
2008), which the criterion's blocking condition is read in.

References
----------
.. [1] Dor, D. & Tarsi, M. (1992). A simple algorithm to construct a consistent extension of a
   partially oriented graph. Technical Report R-185, UCLA Cognitive Systems Laboratory.
.. [2] Zhang, J. (2008). On the completeness of orientation rules for causal discovery in the
   presence of latent confounders and selection bias. *Artificial Intelligence* 172, 1873–1896.
"""

from __future__ import annotations

from collections import deque

import networkx as nx

from ..exceptions import DiscoveryError

__all__ = ["ControlSetError", "MarkedGraph", "marked_graph"]

TAIL, ARROW, CIRCLE = "tail", "arrow", "circle"
KINDS = ("dag", "cpdag", "pdag", "pag")
#: How an edge reads from its first node: (mark at the first node, mark at the second).
_SYMBOL = {(TAIL, ARROW): "→", (ARROW, TAIL): "←", (TAIL, TAIL): "—", (ARROW, ARROW): "↔",
           (CIRCLE, ARROW): "o→", (ARROW, CIRCLE): "←o", (CIRCLE, CIRCLE): "o–o",
           (CIRCLE, TAIL): "o—", (TAIL, CIRCLE): "—o"}


class ControlSetError(DiscoveryError, ValueError):
    """The diagram, the treatment, the outcome or a proposed control set cannot be used."""


class MarkedGraph:
    """An immutable-by-convention graph whose edges have a mark at each end.

    Parameters
    ----------
    nodes : sequence of str
    marks : dict
        ``marks[u][v]`` is the mark at ``v``'s end of the edge between ``u`` and ``v``.
    kind : {"dag", "cpdag", "pdag", "pag"}
    """

    def __init__(self, nodes, marks, kind, contested=()):
        self.nodes = tuple(nodes)
        self.mark = {v: dict(marks.get(v, {})) for v in self.nodes}
        self.kind = kind
        #: Pairs colliders tried to orient both ways; read as undirected (tail/tail).
        self.contested = frozenset(frozenset(p) for p in contested)

    # -- local structure ---------------------------------------------------------------------
    def adjacent(self, u, v) -> bool:
        return v in self.mark[u]

    def neighbours(self, u):
        return self.mark[u].keys()

    def directed(self, u, v) -> bool:
        """``u → v``."""
        m = self.mark[u].get(v)
        return m == ARROW and self.mark[v][u] == TAIL

    def undirected(self, u, v) -> bool:
        m = self.mark[u].get(v)
        return m == TAIL and self.mark[v][u] == TAIL

    def parents(self, v):
        return [u for u in self.mark[v] if self.directed(u, v)]

    def children(self, v):
        return [w for w in self.mark[v] if self.directed(v, w)]

    def siblings(self, v):
        """Undirected neighbours (tail/tail)."""
        return [u for u in self.mark[v] if self.undirected(u, v)]

    def step(self, u, v) -> bool:
        """May a possibly causal path go from ``u`` to ``v``? No arrowhead at ``u``."""
        return self.mark[v][u] != ARROW

    def edge_text(self, u, v) -> str:
        """``u → v``, ``u — v``, ``u ↔ v``, ``u o→ v``, ``u o–o v`` ... as drawn from u."""
        return f"{u} {_SYMBOL[self.mark[v][u], self.mark[u][v]]} {v}"

    def path_text(self, path) -> str:
        if not path:
            return ""
        parts = [str(path[0])]
        for u, v in zip(path, path[1:]):
            parts.append(_SYMBOL[self.mark[v][u], self.mark[u][v]] if self.adjacent(u, v)
                         else "…")
            parts.append(str(v))
        return " ".join(parts)

    # -- reachability ------------------------------------------------------------------------
    def possible_descendants(self, starts, *, avoid=()):
        """Nodes reachable from ``starts`` by possibly causal paths (starts included), never
        passing through ``avoid``."""
        avoid = set(avoid)
        seen = {s for s in starts if s not in avoid}
        queue = deque(seen)
        while queue:
            u = queue.popleft()
            for v in self.mark[u]:
                if v not in seen and v not in avoid and self.step(u, v):
                    seen.add(v)
                    queue.append(v)
        return seen

    def possible_ancestors(self, targets, *, avoid=()):
        """Nodes with a possibly causal path into ``targets`` (targets included)."""
        avoid = set(avoid)
        seen = {t for t in targets if t not in avoid}
        queue = deque(seen)
        while queue:
            v = queue.popleft()
            for u in self.mark[v]:
                if u not in seen and u not in avoid and self.step(u, v):
                    seen.add(u)
                    queue.append(u)
        return seen

    # -- a member of the class -----------------------------------------------------------------
    def member(self) -> nx.DiGraph:
        """A DAG of the class (for a PAG: a DAG over the observed nodes plus one hidden node
        ``("hidden", a, b)`` per bidirected edge of a maximal ancestral graph of the class).

        Raises
        ------
        ControlSetError
            If no member exists (the directed edges form a cycle, or the undirected part
            cannot be oriented without a new collider).
        """
        if self.kind == "pag":
            return self._mag_member()
        directed = [(u, v) for u in self.nodes for v in self.mark[u] if self.directed(u, v)]
        undirected = {frozenset((u, v)) for u in self.nodes for v in self.mark[u]
                      if self.undirected(u, v)}
        dag = extend_to_dag(self.nodes, directed, undirected)
        if dag is None and self.contested and nx.is_directed_acyclic_graph(
                nx.DiGraph(directed)):
            # Contested pairs are not a proper class: orient them along the directed edges'
            # order, then extend the rest; as a last resort orient everything by that order.
            base = nx.DiGraph(directed)
            base.add_nodes_from(self.nodes)
            pos = {v: i for i, v in enumerate(nx.lexicographical_topological_sort(base, key=str))}

            def along(e):
                u, v = sorted(e, key=pos.__getitem__)
                return (u, v)

            dag = extend_to_dag(self.nodes, directed + [along(e) for e in self.contested],
                                undirected - self.contested)
            if dag is None:
                dag = nx.DiGraph(directed + [along(e) for e in undirected])
                dag.add_nodes_from(self.nodes)
        if dag is None:
            g = nx.DiGraph(directed)
            try:
                cycle = nx.find_cycle(g)
                where = " → ".join([str(cycle[0][0])] + [str(v) for _, v in cycle])
                why = f"its directed edges form a cycle {where}"
            except nx.NetworkXNoCycle:
                why = ("its undirected edges cannot be directed without a new collider or a "
                       "cycle")
            raise ControlSetError(f"the diagram is not a valid equivalence class: {why}; "
                                  "re-run the search or fix the diagram")
        return dag

    def _mag_member(self) -> nx.DiGraph:
        # Zhang (2008), Theorem 2: turn o→ into →, then orient the circle component (o–o
        # edges) as a DAG without unshielded colliders; bidirected edges get a hidden parent.
        directed, circle, bidirected = [], set(), []
        for u in self.nodes:
            for v, m_at_v in self.mark[u].items():
                m_at_u = self.mark[v][u]
                if m_at_v == ARROW and m_at_u in (TAIL, CIRCLE):
                    directed.append((u, v))
                elif m_at_v == ARROW and m_at_u == ARROW and str(u) < str(v):
                    bidirected.append((u, v))
                elif m_at_v == CIRCLE and m_at_u == CIRCLE:
                    circle.add(frozenset((u, v)))
        dag = extend_to_dag(self.nodes, directed, circle)
        if dag is None:
            raise ControlSetError("the PAG has no maximal ancestral graph in its class "
                                  "(its directed edges form a cycle); re-run the search")
        for u, v in bidirected:
            h = ("hidden", u, v)
            dag.add_edge(h, u)
            dag.add_edge(h, v)
        return dag


def extend_to_dag(nodes, directed, undirected) -> nx.DiGraph | None:
    """A DAG with the given directed edges that orients ``undirected`` without creating a new
    unshielded collider; ``None`` if none exists (Dor & Tarsi 1992)."""
    dag = nx.DiGraph()
    dag.add_nodes_from(nodes)
    dag.add_edges_from(directed)
    if not nx.is_directed_acyclic_graph(dag):
        return None
    out = {v: set() for v in nodes}
    into = {v: set() for v in nodes}
    und = {v: set() for v in nodes}
    for u, v in directed:
        out[u].add(v)
        into[v].add(u)
    for e in undirected:
        u, v = tuple(e)
        und[u].add(v)
        und[v].add(u)
    left = set(nodes)

    def adj(v):
        return (out[v] | into[v] | und[v]) & left

    while left:
        found = None
        for x in sorted(left, key=str):
            if out[x] & left:
                continue
            nbrs = adj(x)
            if all((adj(y) | {y}) >= nbrs for y in und[x] & left):
                found = x
                break
        if found is None:
            return None
        for y in und[found] & left:
            dag.add_edge(y, found)
        left.discard(found)
    return dag if nx.is_directed_acyclic_graph(dag) else None


def marked_graph(graph, *, kind: str | None = None) -> MarkedGraph:
    """Read a SearchResult (CPDAG, PDAG with knowledge, PAG) or a networkx DAG.

    Raises
    ------
    ControlSetError
        If ``graph`` is of another type, a DiGraph is not acyclic, or a PAG has marks that
        mean selection bias.
    """
    from ..result import SearchResult
    if kind is not None and kind not in KINDS:
        raise ControlSetError(f"kind {kind!r} is not one of {KINDS}")
    if isinstance(graph, nx.DiGraph) and not isinstance(graph, nx.MultiDiGraph):
        loops = list(nx.selfloop_edges(graph))
        if loops:
            raise ControlSetError(f"the diagram has a self-loop {loops[0][0]!r} → "
                                  f"{loops[0][0]!r}; a variable cannot cause itself")
        try:
            cycle = nx.find_cycle(graph)
        except nx.NetworkXNoCycle:
            cycle = None
        if cycle:
            where = " → ".join([repr(cycle[0][0])] + [repr(v) for _, v in cycle])
            raise ControlSetError(f"the diagram has a cycle {where}; a causal diagram must be "
                                  "acyclic (for a search result with undirected edges pass "
                                  "the result itself, not its networkx form)")
        marks = {str(v): {} for v in graph.nodes}
        for u, v in graph.edges:
            marks[str(u)][str(v)] = ARROW
            marks[str(v)][str(u)] = TAIL
        return MarkedGraph([str(v) for v in graph.nodes], marks, kind or "dag")
    if not isinstance(graph, SearchResult) and not (hasattr(graph, "variables")
                                                    and hasattr(graph, "edges")):
        raise ControlSetError(f"the diagram must be a search result or a networkx.DiGraph "
                              f"that is a DAG; got {type(graph).__name__}")
    marks = {v: {} for v in graph.variables}
    pag = bool(getattr(getattr(graph, "settings", None), "hidden_causes", False))
    for e in graph.edges:
        fm, tm = e.from_mark, e.to_mark
        for m in (fm, tm):
            if m not in (TAIL, ARROW, CIRCLE):
                raise ControlSetError(f"edge {e.source!r} — {e.target!r} has an unknown end "
                                      f"mark {m!r}; expected tail, arrow or circle")
        for v in (e.source, e.target):
            if v not in marks:
                raise ControlSetError(f"the result is not valid: edge {e.source!r} — "
                                      f"{e.target!r} names {v!r}, which is not one of its "
                                      "variables; re-run the search or reload the file")
        if e.target in marks[e.source] or e.source == e.target:
            raise ControlSetError(f"the result is not valid: the pair {e.source!r} — "
                                  f"{e.target!r} has more than one edge or is a self-loop; "
                                  "re-run the search or reload the file")
        marks[e.source][e.target] = tm
        marks[e.target][e.source] = fm
        if CIRCLE in (fm, tm) or (fm == ARROW and tm == ARROW):
            pag = True
    if kind is None:
        knowledge = getattr(graph, "knowledge", None)
        kind = "pag" if pag else ("cpdag" if knowledge is None or knowledge.is_empty()
                                  else "pdag")
    contested = [(e.source, e.target) for e in graph.edges
                 if getattr(e, "kind", "") == "contested"]
    g = MarkedGraph(graph.variables, marks, kind, contested)
    if kind == "pag":
        for u in g.nodes:
            for v in g.mark[u]:
                if g.mark[u][v] == TAIL and g.mark[v][u] in (TAIL, CIRCLE):
                    raise ControlSetError(
                        f"the PAG has the edge {g.edge_text(v, u)}, whose tail means selection "
                        "bias; control sets here assume no selection bias")
    return g
