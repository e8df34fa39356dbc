"""Scores that compare an estimated causal graph with the true one, and the true CPDAG.

Graphs are :class:`networkx.DiGraph` objects in Edgewise's convention:

* a *directed* edge ``a -> b`` is the arc ``(a, b)`` alone;
* an *undirected* edge ``a — b`` is the pair of arcs ``(a, b)`` and ``(b, a)``;
* a *contested* edge (colliders tried to orient it both ways) is a pair of arcs carrying the
  edge attribute ``kind="contested"``; it counts as an adjacency with no orientation.

Every pair of nodes therefore has one *edge mark*: absent, ``a -> b``, ``b -> a``, undirected or
contested. The scores are:

*skeleton* precision and recall
    over adjacencies, whatever their marks: did the search link the right pairs?
*arrowhead* precision and recall
    over arrowheads, where an arrowhead is a directed edge ``a -> b`` (arc ``(a, b)`` present,
    ``(b, a)`` absent): did it orient the right way? Undirected and contested edges carry none.
*structural Hamming distance* (SHD)
    the number of pairs whose edge marks differ (Tsamardinos, Brown & Aliferis 2006).

Data cannot tell apart the members of an equivalence class, so a search should be scored
against the class, not the DAG that generated the data: :func:`cpdag_of` gives the CPDAG (the
completed partially directed acyclic graph), in which the edges every member orients alike are
directed and the others undirected.

Conventions for empty sets (stated so that scores are never NaN): precision is 1.0 when nothing
was predicted (no false claims were made), recall is 1.0 when the truth has nothing to find, and
F1 is 0.0 when precision and recall are both 0.

References
----------
.. [1] Tsamardinos, I., Brown, L. E. & Aliferis, C. F. (2006). The max-min hill-climbing
   Bayesian network structure learning algorithm. *Machine Learning* 65, 31–78.
.. [2] Chickering, D. M. (1995). A transformational characterization of equivalent Bayesian
   network structures. *Proceedings of UAI 1995*, 87–98.
.. [3] Verma, T. & Pearl, J. (1990). Equivalence and synthesis of causal models.
   *Proceedings of UAI 1990*, 220–227.
.. [4] Andersson, S. A., Madigan, D. & Perlman, M. D. (1997). A characterization of Markov
   equivalence classes for acyclic digraphs. *Annals of Statistics* 25, 505–541.

Examples
--------
>>> import networkx as nx
>>> truth = cpdag_of(nx.DiGraph([("a", "c"), ("b", "c")]))      # a collider stays directed
>>> sorted(truth.edges)
[('a', 'c'), ('b', 'c')]
>>> found = nx.DiGraph([("a", "c"), ("c", "a"), ("b", "c")])    # a — c, b -> c
>>> structural_hamming_distance(found, truth)
1
"""

from __future__ import annotations

from collections.abc import Hashable
from dataclasses import dataclass

import networkx as nx

from .exceptions import DataValidationError

__all__ = [
    "SkeletonScores",
    "ArrowheadScores",
    "skeleton_scores",
    "arrowhead_scores",
    "structural_hamming_distance",
    "cpdag_of",
    "AncestralMarkScores",
    "ancestral_mark_scores",
]

_UNDIRECTED = ("undirected",)
_CONTESTED = ("contested",)


@dataclass(frozen=True)
class _Scores:
    precision: float
    recall: float
    f1: float
    true_positives: int
    false_positives: int
    false_negatives: int

    @classmethod
    def _from_sets(cls, estimated: set, truth: set):
        tp = len(estimated & truth)
        fp = len(estimated - truth)
        fn = len(truth - estimated)
        precision = tp / (tp + fp) if tp + fp else 1.0
        recall = tp / (tp + fn) if tp + fn else 1.0
        f1 = 2 * precision * recall / (precision + recall) if precision + recall else 0.0
        return cls(precision=precision, recall=recall, f1=f1, true_positives=tp,
                   false_positives=fp, false_negatives=fn)


@dataclass(frozen=True)
class SkeletonScores(_Scores):
    """Precision and recall of the adjacencies of an estimated graph.

    Attributes
    ----------
    precision : float
        ``true_positives / (true_positives + false_positives)``; 1.0 if no adjacency was found.
    recall : float
        ``true_positives / (true_positives + false_negatives)``; 1.0 if the truth has none.
    f1 : float
        Harmonic mean of precision and recall; 0.0 if both are 0.
    true_positives, false_positives, false_negatives : int
        Adjacent pairs found and true, found but absent from the truth, true but missed.
    """


@dataclass(frozen=True)
class ArrowheadScores(_Scores):
    """Precision and recall of the arrowheads (directed edges) of an estimated graph.

    Attributes
    ----------
    precision : float
        Share of estimated arrowheads ``a -> b`` that the truth also has; 1.0 if none estimated.
    recall : float
        Share of true arrowheads that the estimate has; 1.0 if the truth has none.
    f1 : float
        Harmonic mean of precision and recall; 0.0 if both are 0.
    true_positives, false_positives, false_negatives : int
        Arrowheads found and true, found but not in the truth, true but missed. A reversed edge
        is one false positive and one false negative.
    """


def _check_graph(graph, name: str) -> None:
    if isinstance(graph, nx.MultiGraph) or not isinstance(graph, nx.DiGraph):
        hint = (" (an undirected networkx.Graph converts with graph.to_directed(), "
                "which makes every edge undirected)" if isinstance(graph, nx.Graph) else "")
        raise DataValidationError(
            f"`{name}` must be a networkx.DiGraph; got {type(graph).__name__}{hint}")
    loops = list(nx.selfloop_edges(graph))
    if loops:
        raise DataValidationError(
            f"`{name}` has self-loop(s) {loops[:5]}; remove them before scoring")


def _edge_marks(graph: nx.DiGraph) -> dict[frozenset, tuple]:
    """The edge mark of every adjacent pair: ("directed", tail, head), undirected or contested."""
    marks = {}
    for u, v, data in graph.edges(data=True):
        pair = frozenset((u, v))
        if pair in marks:
            continue
        if graph.has_edge(v, u):
            contested = (data.get("kind") == "contested"
                         or graph.edges[v, u].get("kind") == "contested")
            marks[pair] = _CONTESTED if contested else _UNDIRECTED
        elif data.get("kind") == "contested":
            marks[pair] = _CONTESTED
        else:
            marks[pair] = ("directed", u, v)
    return marks


def _marks_of_both(estimated, truth) -> tuple[dict, dict]:
    _check_graph(estimated, "estimated")
    _check_graph(truth, "truth")
    unknown = [v for v in estimated.nodes if v not in truth]
    if unknown:
        raise DataValidationError(
            f"`estimated` has node(s) {sorted(map(str, unknown))[:5]} that are not in `truth`; "
            "score graphs over the same variable names")
    return _edge_marks(estimated), _edge_marks(truth)


def _arrowheads(marks: dict) -> set[tuple[Hashable, Hashable]]:
    return {(m[1], m[2]) for m in marks.values() if m[0] == "directed"}


def skeleton_scores(estimated: nx.DiGraph, truth: nx.DiGraph) -> SkeletonScores:
    """Score the adjacencies of `estimated` against `truth`, ignoring edge marks.

    Parameters
    ----------
    estimated : networkx.DiGraph
        The graph found by a search, in Edgewise's convention (module docstring). Its nodes must
        be nodes of `truth`; truth nodes missing from it count as having no edges.
    truth : networkx.DiGraph
        The true DAG or CPDAG, same convention.

    Returns
    -------
    SkeletonScores

    Raises
    ------
    DataValidationError
        If a graph is not a networkx.DiGraph, has a self-loop, or `estimated` names a node that
        `truth` lacks (which would make every score meaningless).

    Examples
    --------
    >>> import networkx as nx
    >>> s = skeleton_scores(nx.DiGraph([("a", "b"), ("b", "a")]), nx.DiGraph([("b", "a")]))
    >>> s.precision, s.recall, s.true_positives
    (1.0, 1.0, 1)
    """
    est, true = _marks_of_both(estimated, truth)
    return SkeletonScores._from_sets(set(est), set(true))


def arrowhead_scores(estimated: nx.DiGraph, truth: nx.DiGraph) -> ArrowheadScores:
    """Score the arrowheads (directed edges) of `estimated` against `truth`.

    An arrowhead ``a -> b`` is the arc ``(a, b)`` without ``(b, a)``. Undirected and contested
    edges carry no arrowheads, so when `truth` is a CPDAG, orienting one of its undirected edges
    is a false positive: the data could not have told which way it goes.

    Parameters
    ----------
    estimated, truth : networkx.DiGraph
        As in :func:`skeleton_scores`.

    Returns
    -------
    ArrowheadScores

    Raises
    ------
    DataValidationError
        As in :func:`skeleton_scores`.

    Examples
    --------
    >>> import networkx as nx
    >>> s = arrowhead_scores(nx.DiGraph([("a", "c"), ("c", "b")]),
    ...                      nx.DiGraph([("a", "c"), ("b", "c")]))
    >>> s.true_positives, s.false_positives, s.false_negatives
    (1, 1, 1)
    """
    est, true = _marks_of_both(estimated, truth)
    return ArrowheadScores._from_sets(_arrowheads(est), _arrowheads(true))


def structural_hamming_distance(estimated: nx.DiGraph, truth: nx.DiGraph) -> int:
    """Count the pairs whose edge marks differ (Tsamardinos, Brown & Aliferis 2006).

    A missing edge, an extra edge, a reversed edge, an edge directed in one graph and undirected
    in the other, or contested in one and not the other: each costs 1, once per pair.

    Parameters
    ----------
    estimated, truth : networkx.DiGraph
        As in :func:`skeleton_scores`.

    Returns
    -------
    int
        0 when the graphs agree on every pair.

    Raises
    ------
    DataValidationError
        As in :func:`skeleton_scores`.

    Examples
    --------
    >>> import networkx as nx
    >>> structural_hamming_distance(nx.DiGraph([("b", "a")]), nx.DiGraph([("a", "b")]))
    1
    """
    est, true = _marks_of_both(estimated, truth)
    return sum(1 for pair in set(est) | set(true) if est.get(pair) != true.get(pair))


def cpdag_of(dag: nx.DiGraph) -> nx.DiGraph:
    """The CPDAG (essential graph) of a DAG, by Chickering's edge labelling.

    An edge of a DAG is *compelled* when every Markov-equivalent DAG orients it the same way,
    and *reversible* otherwise. Chickering (1995) labels them in one pass:

    1. Order the edges: sort the nodes topologically; repeatedly take the lowest node ``y`` with
       an unordered edge into it and order its edge from the highest such ``x``.
    2. Go through the edges in that order. For ``x -> y`` still unlabelled: for every compelled
       ``w -> x``, if ``w`` is not a parent of ``y`` then ``x -> y`` and every edge into ``y``
       are compelled (done with this edge), else ``w -> y`` is compelled. Then, if ``y`` has a
       parent ``z != x`` that is not a parent of ``x``, ``x -> y`` and every unlabelled edge into
       ``y`` are compelled; otherwise they are reversible.

    This uses nothing from the search code, so it can check the search independently.

    Parameters
    ----------
    dag : networkx.DiGraph
        An acyclic graph.

    Returns
    -------
    networkx.DiGraph
        Same nodes (with their attributes) in the same order. A compelled edge is the one arc
        ``(x, y)``; a reversible edge is the pair ``(x, y)``, ``(y, x)``.

    Raises
    ------
    DataValidationError
        If `dag` is not a networkx.DiGraph or has a cycle (a pair of opposite arcs is a cycle:
        pass the DAG, not a CPDAG).

    References
    ----------
    Chickering, D. M. (1995). A transformational characterization of equivalent Bayesian network
    structures. *UAI 1995*, 87–98, Figures 2 and 3. Equivalently, the edges directed in every
    member of the class (Andersson, Madigan & Perlman 1997).

    Examples
    --------
    >>> import networkx as nx
    >>> cpdag = cpdag_of(nx.DiGraph([("a", "b"), ("b", "c")]))        # a chain: all reversible
    >>> sorted(cpdag.edges)
    [('a', 'b'), ('b', 'a'), ('b', 'c'), ('c', 'b')]
    """
    if isinstance(dag, nx.MultiGraph) or not isinstance(dag, nx.DiGraph):
        raise DataValidationError(f"`dag` must be a networkx.DiGraph; got {type(dag).__name__}")
    if not nx.is_directed_acyclic_graph(dag):
        raise DataValidationError(
            f"`dag` has a cycle {nx.find_cycle(dag)}; cpdag_of needs a DAG, not a CPDAG")

    position = {v: k for k, v in enumerate(nx.topological_sort(dag))}
    # Step 1 (Chickering's Order-Edges) in closed form: lowest head first, then highest tail.
    ordered = sorted(dag.edges, key=lambda e: (position[e[1]], -position[e[0]]))
    parents = {v: set(dag.predecessors(v)) for v in dag.nodes}
    label: dict[tuple, str] = {}

    def label_into(y, value, *, only_unlabelled):
        for z in parents[y]:
            if not only_unlabelled or (z, y) not in label:
                label[(z, y)] = value

    # Step 2 (Find-Compelled): every edge is taken once, as the lowest still unlabelled.
    for x, y in ordered:
        if (x, y) in label:
            continue
        done = False
        for w in parents[x]:
            if label.get((w, x)) != "compelled":
                continue
            if w not in parents[y]:
                label_into(y, "compelled", only_unlabelled=False)
                done = True
                break
            label[(w, y)] = "compelled"
        if done:
            continue
        if any(z != x and z not in parents[x] for z in parents[y]):
            label_into(y, "compelled", only_unlabelled=True)
        else:
            label_into(y, "reversible", only_unlabelled=True)

    cpdag = nx.DiGraph()
    cpdag.add_nodes_from(dag.nodes(data=True))
    for x, y in dag.edges:
        cpdag.add_edge(x, y)
        if label[(x, y)] == "reversible":
            cpdag.add_edge(y, x)
    return cpdag


@dataclass(frozen=True)
class AncestralMarkScores:
    """How often the arrowheads and tails of a PAG are right about the true DAG.

    An arrowhead at ``b`` on ``a *→ b`` says ``b`` is not a cause (ancestor) of ``a``; a tail
    at ``a`` on ``a –* b`` says ``a`` is a cause of ``b`` (Richardson & Spirtes 2002,
    ancestral graphs; Zhang 2008). Each mark is judged against the ancestors in the true DAG,
    hidden variables included, whether or not the edge itself is right.

    Attributes
    ----------
    arrowhead_precision, tail_precision : float
        Share of arrowheads (tails) that are right; 1.0 when there are none.
    arrowheads, tails : int
        How many were judged.
    """

    arrowhead_precision: float
    tail_precision: float
    arrowheads: int
    tails: int


def ancestral_mark_scores(result, dag: nx.DiGraph) -> AncestralMarkScores:
    """Score the marks of a search result (e.g. the hidden-causes mode) against a true DAG.

    Raises
    ------
    DataValidationError
        If ``dag`` is not an acyclic DiGraph or lacks a variable of the result.
    """
    _check_graph(dag, "dag")
    if not nx.is_directed_acyclic_graph(dag):
        raise DataValidationError("`dag` must be acyclic")
    missing = [v for v in result.variables if v not in dag]
    if missing:
        raise DataValidationError(f"the true DAG lacks the result's variable(s) {missing[:5]}")
    heads = [0, 0]
    tails = [0, 0]
    for e in result.edges:
        if e.kind == "contested":
            continue
        for near, far, mark in ((e.source, e.target, e.from_mark),
                                (e.target, e.source, e.to_mark)):
            ancestor = nx.has_path(dag, near, far)
            if mark == "arrow":
                heads[0] += not ancestor
                heads[1] += 1
            elif mark == "tail" and e.kind != "undirected":
                tails[0] += ancestor
                tails[1] += 1
    return AncestralMarkScores(heads[0] / heads[1] if heads[1] else 1.0,
                               tails[0] / tails[1] if tails[1] else 1.0, heads[1], tails[1])
