"""What a user reads: the printed summary, the contested mark in text, untestable pairs in
GraphML.

References: networkx d-separation (DSeparationOracle) gives the diagrams; networkx.read_graphml
reads the GraphML back (the GraphML schema's key/data elements); "↔" is the field's notation
for a bidirected edge (a hidden common cause; Richardson & Spirtes 2002, from memory), so the
contested mark must never use it.
"""

from __future__ import annotations

import dataclasses
import json

import networkx as nx
import numpy as np
import pandas as pd

from discovery import DSeparationOracle, Edge, discover
from discovery.io import write_dot, write_graphml


def oracle_result():
    dag = nx.DiGraph([("rain", "wet"), ("sprinkler", "wet"), ("wet", "slippery")])
    dag.add_node("moon")
    return discover(None, test=DSeparationOracle(dag))


def test_isolated_variables_and_one_line_per_word_under_the_table():
    result = oracle_result()
    text = result.summary().as_text(assumptions=False)
    assert "Isolated (no edge): moon" in text
    table_end = text.index("wet → slippery")
    after = text[table_end:]
    assert "max p: the largest p-value of the pair's tests" in after
    assert "collider: two non-adjacent causes both point into it" in after
    assert "rule 1-4: forced by Meek's rules" in after
    # words that do not appear in the table are not explained
    assert "stage order:" not in after and "contested (?–)" not in after
    assert result.summary().isolated() == ["moon"]


def test_contested_text_mark():
    e = Edge("a", "b", "contested", "colliders disagree", "contested")
    assert e.arrow() == "a ?– b (contested)"
    assert "↔" not in e.arrow()
    assert (e.from_mark, e.to_mark) == ("tail", "tail")
    result = oracle_result()
    edges = tuple(dataclasses.replace(x, kind="contested", reason="both ways",
                                      reason_kind="contested")
                  if x.target == "slippery" else x for x in result.edges)
    r = dataclasses.replace(result, edges=edges)
    text = r.summary().as_text()
    assert "slippery ?– wet (contested)" in text or "wet ?– slippery (contested)" in text
    assert "contested (?–): colliders tried to orient the pair both ways" in text
    assert "↔" not in text and "↔" not in write_dot(r)


def test_notes_are_deduplicated():
    result = oracle_result()
    r = dataclasses.replace(result, notes=("same note", "other", "same note"),
                            conflicts=("other",))
    assert r.summary().notes() == ["other", "same note"]


def test_auto_choices_are_summarised_and_the_json_keeps_every_pair():
    rng = np.random.default_rng(1)
    n = 300
    a = rng.normal(size=n)
    b = a + rng.normal(size=n)
    c = (b + rng.normal(size=n) > 0).astype(int)
    frame = pd.DataFrame({"a": a, "b": b, "c": c, "d": rng.exponential(size=n) + c})
    result = discover(frame, test="auto")
    per_pair = [n for n in result.notes if " tested by " in n]
    assert len(per_pair) >= 2  # the pair-by-pair list, one line per group
    shown = result.summary().notes()
    assert not any(" tested by " in n for n in shown)
    line = next(n for n in shown if n.startswith("auto: pairs tested"))
    # the counts add up to the number of pairs listed in the full notes
    listed = sum(n.split(" tested by ")[0].count(" — ") for n in per_pair)
    counted = sum(int(part.split(" by ")[0]) for part in
                  line[len("auto: pairs tested "):line.index(" (")].split(", "))
    assert counted == listed
    assert json.loads(result.to_json())["notes"] == list(result.notes)


def test_graphml_carries_marks_and_untestable():
    result = oracle_result()
    edges = tuple(dataclasses.replace(x, untestable="the test returned no p-value")
                  if x.target == "slippery" else x for x in result.edges)
    r = dataclasses.replace(result, edges=edges)
    g = nx.parse_graphml(write_graphml(r))
    data = g.edges["wet", "slippery"]
    assert data["untestable"] == "the test returned no p-value"
    assert (data["from_mark"], data["to_mark"]) == ("tail", "arrow")
    assert "untestable" not in g.edges["rain", "wet"]
