"""Property-based checks (hypothesis) of every reader and of the search's invariants.

Readers: whatever bytes or JSON a file holds, a reader returns its record or raises its own
one-line error (never TypeError, KeyError, RecursionError ...). Searches: the output is a
valid PDAG (no pair joined twice, no directed cycle: Meek 1995; Andersson, Madigan & Perlman
1997), respects the knowledge given, and does not depend on the order of the columns.
"""

from __future__ import annotations

import json
import string

import networkx as nx
import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from discovery import (DataValidationError, DSeparationOracle, Knowledge, KnowledgeError,
                       ResultFormatError, SearchResult, discover, load_result, read_knowledge,
                       read_table)
from discovery.io import read_edge_list
from discovery.simulate import random_dag, sample_linear_gaussian

FAST = settings(max_examples=80, deadline=None,
                suppress_health_check=[HealthCheck.function_scoped_fixture,
                                       HealthCheck.too_slow])

json_values = st.recursive(
    st.none() | st.booleans() | st.integers(-10**6, 10**6) | st.floats(allow_nan=False)
    | st.text(max_size=8),
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=8), inner,
                                                                 max_size=4),
    max_leaves=20)


# -- readers ----------------------------------------------------------------------------------
@FAST
@given(st.binary(max_size=400))
def test_read_table_returns_a_dataset_or_one_data_error(tmp_path_factory, data):
    path = tmp_path_factory.mktemp("t") / "d.csv"
    path.write_bytes(data)
    try:
        read_table(path)
    except DataValidationError as err:
        assert "\n" not in str(err) and str(path) in str(err)


@FAST
@given(st.text(alphabet=string.printable, max_size=300))
def test_read_knowledge_returns_knowledge_or_one_knowledge_error(tmp_path_factory, text):
    path = tmp_path_factory.mktemp("k") / "k.toml"
    path.write_text(text, encoding="utf-8")
    try:
        assert isinstance(read_knowledge(path), Knowledge)
    except KnowledgeError as err:
        assert str(path) in str(err)


@FAST
@given(json_values)
def test_read_knowledge_json_of_any_shape(tmp_path_factory, value):
    path = tmp_path_factory.mktemp("k") / "k.json"
    path.write_text(json.dumps(value), encoding="utf-8")
    try:
        read_knowledge(path)
    except KnowledgeError:
        pass


@FAST
@given(st.text(alphabet=string.printable, max_size=300))
def test_read_edge_list_returns_a_dag_or_one_data_error(tmp_path_factory, text):
    path = tmp_path_factory.mktemp("g") / "g.csv"
    path.write_text("from,to\n" + text, encoding="utf-8")
    try:
        g = read_edge_list(path)
        assert nx.is_directed_acyclic_graph(g)
    except DataValidationError as err:
        assert "\n" not in str(err)


def _valid_result_doc() -> dict:
    dag = nx.DiGraph([("a", "c"), ("b", "c"), ("c", "d")])
    return json.loads(discover(None, test=DSeparationOracle(dag)).to_json())


@FAST
@given(st.data())
def test_a_result_file_with_any_field_replaced_loads_or_gets_one_format_error(tmp_path_factory,
                                                                              data):
    doc = _valid_result_doc()
    # replace one field anywhere in the document by a value of another shape
    target = doc
    path_keys = []
    while isinstance(target, (dict, list)) and target:
        keys = list(target.keys()) if isinstance(target, dict) else list(range(len(target)))
        key = data.draw(st.sampled_from(keys))
        path_keys.append(key)
        if data.draw(st.booleans()) or not isinstance(target[key], (dict, list)) \
                or not target[key]:
            target[key] = data.draw(json_values)
            break
        target = target[key]
    path = tmp_path_factory.mktemp("r") / "r.json"
    path.write_text(json.dumps(doc), encoding="utf-8")
    try:
        result = load_result(path)
    except ResultFormatError as err:
        assert str(path) in str(err) and "\n" not in str(err)
        return
    # what loads is usable: it reads back, summarises and explains every pair
    assert isinstance(result, SearchResult)
    result.summary().as_text()
    json.loads(result.to_json())
    for a in result.variables:
        for b in result.variables:
            if a < b:
                result.evidence(a, b).as_text()


# -- search invariants -------------------------------------------------------------------------
dags = st.builds(lambda n, d, seed: random_dag(n, expected_degree=min(d, n - 1),
                                               rng=np.random.default_rng(seed)),
                 st.integers(3, 8), st.floats(0.5, 3.0), st.integers(0, 10**6))


def _is_valid_pdag(result) -> bool:
    g = nx.DiGraph()
    g.add_nodes_from(result.variables)
    pairs = set()
    for e in result.edges:
        assert e.pair not in pairs, f"{e.pair} joined twice"
        pairs.add(e.pair)
        if e.kind == "directed":
            g.add_edge(e.source, e.target)
    return nx.is_directed_acyclic_graph(g)


@FAST
@given(dags, st.data())
def test_oracle_search_gives_a_valid_pdag_that_respects_the_knowledge(dag, data):
    nodes = sorted(dag.nodes)
    edges = sorted(dag.edges)
    non_edges = [(a, b) for i, a in enumerate(nodes) for b in nodes[i + 1:]
                 if not dag.has_edge(a, b) and not dag.has_edge(b, a)]
    # knowledge that is true of the diagram: it may only add orientation
    locked = data.draw(st.lists(st.sampled_from(edges), unique=True, max_size=2)) \
        if edges else []
    directions = data.draw(st.lists(st.sampled_from(edges), unique=True, max_size=2)) \
        if edges else []
    forbidden = data.draw(st.lists(st.sampled_from(non_edges), unique=True, max_size=2)) \
        if non_edges else []
    forbidden_dirs = [(b, a) for a, b in directions]
    k = Knowledge(locked=locked, locked_directions=directions, forbidden=forbidden,
                  forbidden_directions=forbidden_dirs)
    result = discover(None, test=DSeparationOracle(dag), knowledge=k)
    assert _is_valid_pdag(result)
    adjacent = {e.pair for e in result.edges}
    assert all(frozenset(p) in adjacent for p in locked)
    assert not any(frozenset(p) in adjacent for p in forbidden)
    for a, b in directions:
        e = result.edge(a, b)
        assert e is not None and e.kind == "directed" and (e.source, e.target) == (a, b)
    # the true skeleton is recovered whatever true knowledge is added (Spirtes et al. 2000)
    assert adjacent == {frozenset(p) for p in edges}


@settings(max_examples=15, deadline=None)
@given(st.integers(0, 10**6), st.permutations(list(range(6))))
def test_the_search_does_not_depend_on_the_order_of_the_columns(seed, order):
    rng = np.random.default_rng(seed)
    dag = random_dag(6, expected_degree=2.5, rng=rng)
    frame = sample_linear_gaussian(dag, 400, rng=rng)
    shuffled = frame[[frame.columns[i] for i in order]]
    a, b = discover(frame), discover(shuffled)
    assert sorted((e.source, e.target, e.kind) for e in a.edges) == \
        sorted((e.source, e.target, e.kind) for e in b.edges)
    assert _is_valid_pdag(a)
