"""Knowledge: the record, the file format, and how the search honours and reports it."""

import json

import networkx as nx
import numpy as np
import pandas as pd
import pytest

from discovery import (DSeparationOracle, Knowledge, KnowledgeError, discover, read_knowledge,
                       write_knowledge)


def test_pair_both_locked_and_forbidden_is_rejected():
    with pytest.raises(KnowledgeError, match=r"\('a', 'b'\) is both locked and forbidden"):
        Knowledge(locked=[("a", "b")], forbidden=[("b", "a")])


def test_locked_directions_forming_a_cycle_are_rejected():
    with pytest.raises(KnowledgeError, match="form a cycle"):
        Knowledge(locked_directions=[("a", "b"), ("b", "c"), ("c", "a")])


def test_variable_in_two_stages_is_rejected():
    with pytest.raises(KnowledgeError, match="'x' is in two stages"):
        Knowledge(stages=[["x", "y"], ["z", "x"]])


def test_locked_direction_against_stage_order_is_rejected():
    with pytest.raises(KnowledgeError, match="against the stage order"):
        Knowledge(locked_directions=[("late", "early")], stages=[["early"], ["late"]])


def test_unknown_variable_is_rejected_by_the_search():
    dag = nx.DiGraph([("a", "b")])
    with pytest.raises(KnowledgeError, match=r"unknown variable\(s\) \['nope'\]"):
        discover(None, test=DSeparationOracle(dag), knowledge=Knowledge(forbidden=[("a", "nope")]))


def test_file_round_trip_and_json(tmp_path):
    k = Knowledge(locked=[("a", "b")], locked_directions=[("c", "d")], forbidden=[("e", "f")],
                  forbidden_directions=[("g", "h")], stages=[["a", "c"], ["d"]])
    path = tmp_path / "k.toml"
    write_knowledge(k, path)
    assert read_knowledge(path) == k
    js = tmp_path / "k.json"
    js.write_text(json.dumps(k.to_dict()))
    assert read_knowledge(js) == k


@pytest.mark.parametrize("text, message", [
    ('locked = [["a"]]', "pairs of variable names"),
    ('locked = ["a", "b"]', "must be pairs"),
    ('colour = 3', r"unknown field\(s\) \['colour'\]"),
    ('locked = [[', "not valid TOML"),
    ('format = "other"', "'format' must be 'edgewise-knowledge'"),
])
def test_bad_files_get_one_clear_line(tmp_path, text, message):
    path = tmp_path / "k.toml"
    path.write_text(text)
    before = path.read_bytes()
    with pytest.raises(KnowledgeError, match=message) as err:
        read_knowledge(path)
    assert "\n" not in str(err.value) and str(path) in str(err.value)
    assert path.read_bytes() == before


def test_missing_file(tmp_path):
    with pytest.raises(KnowledgeError, match="knowledge file not found"):
        read_knowledge(tmp_path / "absent.toml")


def test_edits_return_new_records():
    k = Knowledge()
    k2 = k.with_pair("forbidden", "a", "b")
    assert k.is_empty() and k2.forbidden == (("a", "b"),)
    k3 = k2.with_pair("locked", "b", "a")
    assert k3.forbidden == () and k3.locked == (("b", "a"),)
    assert k3.without_pair("a", "b").is_empty()


def test_forbidden_edge_is_absent_and_locked_edge_present():
    dag = nx.DiGraph([("a", "b"), ("b", "c"), ("c", "d")])
    result = discover(None, test=DSeparationOracle(dag),
                      knowledge=Knowledge(forbidden=[("b", "c")], locked=[("a", "d")]))
    assert result.edge("b", "c") is None
    assert result.edge("a", "d") is not None and result.edge("a", "d").locked
    # the data separate a and d (given c): the lock is kept and the conflict reported
    assert any("a — d is locked" in c for c in result.conflicts)


def test_forbidden_pair_without_separating_set_leaves_triples_undecided():
    # b → c is true but forbidden: no separating set exists for b, c. The common neighbour a of
    # a → b, a → c must not become a collider just because b, c are non-adjacent.
    dag = nx.DiGraph([("a", "b"), ("a", "c"), ("b", "c")])
    result = discover(None, test=DSeparationOracle(dag), knowledge=Knowledge(forbidden=[("b", "c")]))
    (triple,) = result.triples
    assert triple["decision"] == "ambiguous"
    assert {e.kind for e in result.edges} == {"undirected"}
    assert any("no separating set" in n for n in result.notes)
    removal = next(r for r in result.removed if {r.a, r.b} == {"b", "c"})
    assert removal.by == "knowledge" and removal.separating_set is None


def test_forbidden_pair_with_a_separating_set_still_orients_colliders():
    # a and c are truly non-adjacent and forbidden; their separating set ({}) is still found,
    # so the collider a → b ← c is oriented (DESIGN §4).
    dag = nx.DiGraph([("a", "b"), ("c", "b")])
    result = discover(None, test=DSeparationOracle(dag), knowledge=Knowledge(forbidden=[("a", "c")]))
    assert {(e.source, e.target) for e in result.edges} == {("a", "b"), ("c", "b")}


def test_stage_order_refuses_a_contradicting_collider():
    # The oracle implies a → b ← c; stages put b first, so the collider is refused and reported.
    dag = nx.DiGraph([("a", "b"), ("c", "b")])
    result = discover(None, test=DSeparationOracle(dag),
                      knowledge=Knowledge(stages=[["b"], ["a", "c"]]))
    assert {(e.source, e.target) for e in result.edges} == {("b", "a"), ("b", "c")}
    assert all(e.reason_kind == "stage order" for e in result.edges)
    assert any("refused" in c for c in result.conflicts)


def test_knowledge_edit_reuses_the_cache():
    from discovery import PValueCache
    rng = np.random.default_rng(0)
    x = rng.normal(size=(500, 6))
    x[:, 1] += x[:, 0]
    x[:, 2] += x[:, 1]
    frame = pd.DataFrame(x, columns=list("abcdef"))
    cache = PValueCache()
    first = discover(frame, cache=cache)
    second = discover(frame, cache=cache, knowledge=Knowledge(forbidden=[("d", "e")]))
    assert first.counts["tests_computed"] > 0
    assert second.counts["tests_computed"] == 0
    assert second.counts["tests_from_cache"] == second.counts["tests"]


def test_locked_chain_against_stage_order_is_rejected():
    # a (stage 2) -> m (no stage) -> b (stage 1): a later stage would cause an earlier one.
    with pytest.raises(KnowledgeError, match="against the stage order"):
        Knowledge(locked_directions=[("a", "m"), ("m", "b")], stages=[["b"], ["a"]])


def test_file_version_and_field_types_are_checked(tmp_path):
    path = tmp_path / "k.toml"
    path.write_text("version = 2\n")
    with pytest.raises(KnowledgeError, match="version 2 is not supported"):
        read_knowledge(path)
    path.write_text("locked = 5\n")
    with pytest.raises(KnowledgeError, match="must be a list of pairs"):
        read_knowledge(path)
    upper = tmp_path / "K.JSON"
    upper.write_text("{not json")
    with pytest.raises(KnowledgeError, match="not valid JSON"):
        read_knowledge(upper)


def test_rules_never_orient_an_edge_the_knowledge_excludes_both_ways():
    # c → a ← d is a collider; a — b would get a → b by rule 1, but knowledge excludes both
    # a → b and b → a: the edge stays undirected and the conflict is reported.
    dag = nx.DiGraph([("c", "a"), ("d", "a"), ("a", "b")])
    k = Knowledge(forbidden_directions=[("a", "b"), ("b", "a")])
    result = discover(None, test=DSeparationOracle(dag), knowledge=k)
    assert result.edge("a", "b").kind == "undirected"
    assert any("both directions" in c for c in result.conflicts)
