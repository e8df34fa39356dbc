"""The search against d-separation (networkx) and a brute-force equivalence class.

With a perfect independence oracle the PC search must return exactly the CPDAG of the true DAG
(Spirtes, Glymour & Scheines 2000, Thm 5.1; Meek 1995). The reference CPDAG here is computed
independently of the engine, by enumerating every orientation of the skeleton and keeping the
acyclic ones with the same v-structures: same skeleton and same v-structures is Markov
equivalence (Verma & Pearl 1990), and an edge of the CPDAG is directed iff every member of the
class agrees on it (Andersson, Madigan & Perlman 1997). With true background knowledge the
search must return the maximally oriented PDAG: the same enumeration restricted to members
that satisfy the knowledge (Meek 1995).
"""

from itertools import combinations, product

import networkx as nx
import numpy as np
import pytest

from discovery import Knowledge, discover
from discovery.independence import DSeparationOracle


def random_dag(n, p, rng):
    order = rng.permutation(n)
    names = [f"v{i}" for i in range(n)]
    g = nx.DiGraph()
    g.add_nodes_from(names)
    for i, j in combinations(range(n), 2):
        if rng.random() < p:
            g.add_edge(names[order[i]], names[order[j]])
    return g


def v_structures(g):
    out = set()
    for z in g.nodes:
        for x, y in combinations(sorted(g.predecessors(z)), 2):
            if not g.has_edge(x, y) and not g.has_edge(y, x):
                out.add((x, z, y))
    return out


def brute_force_class(dag, allowed=lambda member: True):
    """Every DAG Markov-equivalent to ``dag`` (and satisfying ``allowed``), by enumeration."""
    edges = list(dag.edges)
    target = v_structures(dag)
    members = []
    for flips in product((False, True), repeat=len(edges)):
        g = nx.DiGraph()
        g.add_nodes_from(dag.nodes)
        g.add_edges_from((v, u) if f else (u, v) for (u, v), f in zip(edges, flips))
        if nx.is_directed_acyclic_graph(g) and v_structures(g) == target and allowed(g):
            members.append(g)
    return members


def pdag_of_members(dag, members):
    """{frozenset pair: (tail, head) or None for undirected} over the class members."""
    out = {}
    for u, v in dag.edges:
        directions = {(a, b) for m in members for a, b in ((u, v), (v, u)) if m.has_edge(a, b)}
        out[frozenset((u, v))] = next(iter(directions)) if len(directions) == 1 else None
    return out


def pdag_of_result(result):
    out = {}
    for e in result.edges:
        assert e.kind != "contested", f"contested edge {e.arrow()} under a perfect oracle"
        out[e.pair] = (e.source, e.target) if e.kind == "directed" else None
    return out


@pytest.mark.parametrize("seed", range(120))
def test_oracle_search_returns_cpdag_small(seed):
    # Brute-force equivalence class (Verma & Pearl 1990; Andersson, Madigan & Perlman 1997).
    rng = np.random.default_rng(seed)
    n = int(rng.integers(4, 8))
    dag = random_dag(n, float(rng.uniform(0.2, 0.6)), rng)
    if dag.number_of_edges() > 12:
        pytest.skip("enumeration too large")
    members = brute_force_class(dag)
    assert any(nx.utils.graphs_equal(m, dag) for m in members)
    result = discover(None, test=DSeparationOracle(dag))
    assert pdag_of_result(result) == pdag_of_members(dag, members)


@pytest.mark.parametrize("seed", range(100))
def test_oracle_search_returns_cpdag_larger(seed):
    # 8–12 nodes: the reference is Chickering's (1995) edge labelling, an algorithm independent
    # of the search's collider + Meek-rule orientation.
    metrics = pytest.importorskip("discovery.metrics")
    rng = np.random.default_rng(1000 + seed)
    n = int(rng.integers(8, 13))
    dag = random_dag(n, 2.5 / (n - 1), rng)
    ref = metrics.cpdag_of(dag)
    result = discover(None, test=DSeparationOracle(dag))
    got = result.to_networkx()
    assert set(got.edges) == set(ref.edges)


@pytest.mark.parametrize("seed", range(60))
def test_oracle_search_with_true_knowledge_returns_maximally_oriented_pdag(seed):
    # Meek (1995): with background knowledge the rules give the maximally oriented PDAG, i.e.
    # exactly the orientations shared by every class member that satisfies the knowledge.
    rng = np.random.default_rng(5000 + seed)
    n = int(rng.integers(4, 8))
    dag = random_dag(n, float(rng.uniform(0.3, 0.6)), rng)
    if not 2 <= dag.number_of_edges() <= 12:
        pytest.skip("too few or too many edges")
    edges = sorted(dag.edges)
    pick = rng.choice(len(edges), size=min(2, len(edges)), replace=False)
    locked_dirs = [edges[i] for i in pick[:1]]
    # a true forbidden direction: the reverse of a true edge
    forbidden_dirs = [(v, u) for u, v in (edges[i] for i in pick[1:])]
    knowledge = Knowledge(locked_directions=locked_dirs, forbidden_directions=forbidden_dirs)

    def allowed(g):
        return (all(g.has_edge(a, b) for a, b in locked_dirs)
                and not any(g.has_edge(a, b) for a, b in forbidden_dirs))

    members = brute_force_class(dag, allowed)
    result = discover(None, test=DSeparationOracle(dag), knowledge=knowledge)
    assert pdag_of_result(result) == pdag_of_members(dag, members)


def test_oracle_result_is_identical_when_columns_are_reordered():
    rng = np.random.default_rng(7)
    dag = random_dag(9, 0.35, rng)
    a = discover(None, test=DSeparationOracle(dag))
    shuffled = nx.DiGraph()
    shuffled.add_nodes_from(list(dag.nodes)[::-1])
    shuffled.add_edges_from(reversed(list(dag.edges)))
    b = discover(None, test=DSeparationOracle(shuffled))
    assert a.edges == b.edges and a.removed == b.removed and a.tests == b.tests
