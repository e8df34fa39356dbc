"""Orientation: textbook configurations of colliders and of each of Meek's rules."""

import networkx as nx
import numpy as np
import pandas as pd
import pytest

from discovery import DSeparationOracle, Knowledge, discover
from discovery.independence import IndependenceTest


def arrows(result):
    return {(e.source, e.target): e for e in result.edges}


def frozen(edges):
    g = nx.DiGraph(edges)
    return nx.freeze(g)


def test_collider_oriented_into_common_effect():
    # Spirtes, Glymour & Scheines (2000): a → c ← b with a, b non-adjacent is a v-structure.
    result = discover(None, test=DSeparationOracle(frozen([("a", "c"), ("b", "c")])))
    got = arrows(result)
    assert set(got) == {("a", "c"), ("b", "c")}
    assert all(e.reason_kind == "collider" for e in got.values())


@pytest.mark.parametrize("edges", [[("a", "b"), ("b", "c")], [("b", "a"), ("b", "c")]])
def test_chain_and_fork_stay_undirected(edges):
    # A chain and a fork are Markov equivalent (Verma & Pearl 1990): no arrowhead is implied.
    result = discover(None, test=DSeparationOracle(frozen(edges)))
    assert {e.kind for e in result.edges} == {"undirected"}


def test_rule_1_orients_away_from_a_collider():
    # Meek (1995) rule 1: a → b — d, a and d non-adjacent ⇒ b → d.
    result = discover(None, test=DSeparationOracle(frozen([("a", "b"), ("c", "b"),
                                                           ("b", "d")])))
    assert arrows(result)[("b", "d")].reason_kind == "rule 1"


def test_rule_2_avoids_a_cycle():
    # Meek (1995) rule 2: a → c → b and a — b ⇒ a → b.
    dag = frozen([("a", "c"), ("d", "c"), ("c", "b"), ("a", "b")])
    got = arrows(discover(None, test=DSeparationOracle(dag)))
    assert got[("a", "b")].reason_kind == "rule 2"
    assert got[("c", "b")].reason_kind == "rule 1"


def test_rule_3():
    # Meek (1995) rule 3: a — c → b, a — d → b, c and d non-adjacent, a — b ⇒ a → b.
    dag = frozen([("c", "b"), ("d", "b"), ("a", "c"), ("a", "d"), ("a", "b")])
    got = arrows(discover(None, test=DSeparationOracle(dag)))
    assert got[("a", "b")].reason_kind == "rule 3"
    assert got[("a", "c")].kind == "undirected" and got[("a", "d")].kind == "undirected"


def test_rule_4_with_background_knowledge():
    # Meek (1995) rule 4 fires only with background knowledge: a — b, c → d → b, a adjacent to
    # c and d, c and b non-adjacent ⇒ a → b. The knowledge c → d is true of the DAG.
    dag = frozen([("a", "c"), ("a", "d"), ("a", "b"), ("c", "d"), ("d", "b")])
    result = discover(None, test=DSeparationOracle(dag),
                      knowledge=Knowledge(locked_directions=[("c", "d")]))
    got = arrows(result)
    assert got[("c", "d")].reason_kind == "knowledge"
    assert got[("d", "b")].reason_kind == "rule 1"
    assert got[("a", "b")].reason_kind == "rule 4"
    assert got[("a", "c")].kind == "undirected"


def test_conditioning_on_common_effect_creates_dependence_in_data():
    # Common practice, no source: two independent causes become dependent given their common
    # effect; conditioning on a mediator or a common cause removes dependence.
    rng = np.random.default_rng(2)
    n = 3000
    x, y = rng.normal(size=(2, n))
    collider = pd.DataFrame({"x": x, "y": y, "z": x + y + rng.normal(size=n)})
    result = discover(collider)
    assert set(arrows(result)) == {("x", "z"), ("y", "z")}
    m = x + rng.normal(size=n)
    chain = pd.DataFrame({"x": x, "m": m, "y": m + rng.normal(size=n)})
    result = discover(chain)
    assert {e.kind for e in result.edges} == {"undirected"} and len(result.edges) == 2
    assert result.edge("x", "y") is None
    removal = next(r for r in result.removed if {r.a, r.b} == {"x", "y"})
    assert removal.separating_set == ("m",)


class TableTest(IndependenceTest):
    """A test answering from a table: pairs listed as independent given the listed sets."""

    name = "table"

    def __init__(self, variables, independent):
        self.variables = tuple(variables)
        self.independent = {frozenset(k): v for k, v in independent.items()}

    def settings_key(self):
        return ("table", id(self))

    def _batch(self, triples):
        p = []
        for x, y, s in triples:
            sets = self.independent.get(frozenset((self.variables[x], self.variables[y])))
            given = {self.variables[v] for v in s}
            p.append(1.0 if sets is not None and (sets == "any" or given in sets) else 0.0)
        return np.array(p), np.array(p)


def test_colliders_pointing_both_ways_are_marked_contested():
    # Separating sets that imply a → b ← c and b → c ← d: the pair b — c gets arrowheads from
    # both sides and must be reported as contested, never resolved by visiting order.
    test = TableTest("abcd", {("a", "c"): "any", ("b", "d"): "any", ("a", "d"): "any"})
    result = discover(None, test=test)
    assert result.edge("b", "c").kind == "contested"
    assert any("contested" in c for c in result.conflicts)
    assert arrows(result)[("a", "b")].kind == "directed"
    assert arrows(result)[("d", "c")].kind == "directed"


@pytest.mark.parametrize("rule, decision", [("standard", "collider"),
                                            ("conservative", "ambiguous"),
                                            ("majority", "ambiguous")])
def test_collider_rules_on_split_separating_sets(rule, decision):
    # a ⟂ c given {} and given {b}: b is in 1 of 2 separating sets. The standard rule uses the
    # first set found ({}) → collider; the conservative rule (Ramsey, Zhang & Spirtes 2006)
    # calls it ambiguous, and so does the majority rule at a tie (Colombo & Maathuis 2014).
    test = TableTest("abc", {("a", "c"): [set(), {"b"}]})
    result = discover(None, test=test, collider_rule=rule)
    (triple,) = result.triples
    assert triple["decision"] == decision
    kinds = {e.kind for e in result.edges}
    assert kinds == ({"directed"} if decision == "collider" else {"undirected"})


def test_majority_rule_decides_by_most_sets():
    # b is in 2 of 3 separating sets of a and c → non-collider under the majority rule.
    test = TableTest("abcd", {("a", "c"): [{"b"}, {"b", "d"}, {"d"}],
                              ("b", "d"): "any"})
    result = discover(None, test=test, collider_rule="majority")
    decisions = {(t["x"], t["z"], t["y"]): t["decision"] for t in result.triples}
    assert decisions[("a", "b", "c")] == "non-collider"


def test_rules_never_close_a_directed_cycle_on_a_wrong_skeleton_issue14():
    # A finite-sample skeleton with a chordless five-cycle x0 - x4 - x2 - x5 - x3 - x0 and a
    # collider into x2: rule 1 propagates around the cycle and, applied blindly, closes it.
    # A PDAG has no directed cycle (Meek 1995; Andersson, Madigan & Perlman 1997), so one edge
    # of the cycle stays undirected and the conflict is reported.
    import networkx as nx
    import numpy as np

    from discovery import discover
    from discovery.simulate import random_dag, sample_linear_gaussian
    rng = np.random.default_rng(257)
    dag = random_dag(6, expected_degree=2.5, rng=rng)
    result = discover(sample_linear_gaussian(dag, 400, rng=rng))
    directed = nx.DiGraph([(e.source, e.target) for e in result.edges if e.kind == "directed"])
    assert nx.is_directed_acyclic_graph(directed)
    assert any("closing a directed cycle" in c for c in result.conflicts)
