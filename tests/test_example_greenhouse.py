"""The invented greenhouse example: reproducible, structurally interesting, and honest knowledge.

References: networkx (acyclicity, v-structures, descendants), statsmodels OLS (the data agree
with the diagram), Python's tomllib (the knowledge file parses as TOML).
"""

from __future__ import annotations

import importlib.util
import tomllib
from pathlib import Path

import networkx as nx
import pandas as pd
import pytest
import statsmodels.api as sm

FOLDER = Path(__file__).resolve().parents[1] / "example_sets" / "greenhouse"


@pytest.fixture(scope="module")
def data():
    return pd.read_csv(FOLDER / "data.csv")


@pytest.fixture(scope="module")
def truth():
    edges = pd.read_csv(FOLDER / "truth.csv")
    assert list(edges.columns) == ["from", "to"]
    return nx.DiGraph(list(zip(edges["from"], edges["to"])))


@pytest.fixture(scope="module")
def knowledge():
    with open(FOLDER / "knowledge.toml", "rb") as handle:
        return tomllib.load(handle)


def test_generator_rewrites_the_committed_files_byte_for_byte(tmp_path):
    spec = importlib.util.spec_from_file_location("greenhouse_generate", FOLDER / "generate.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    module.main(["--out", str(tmp_path)])
    for name in ("data.csv", "truth.csv"):
        assert (tmp_path / name).read_bytes() == (FOLDER / name).read_bytes(), name


def test_table_shape(data, truth):
    assert 10 <= data.shape[1] <= 12
    assert len(data) == 2000
    assert not data.isna().any().any()
    assert all(dtype.kind == "f" for dtype in data.dtypes)
    assert set(truth.nodes) == set(data.columns)


def test_structure_is_interesting(truth):
    # networkx is the reference for acyclicity and for v-structures (unshielded colliders).
    assert nx.is_directed_acyclic_graph(truth)
    assert len(list(nx.dag.v_structures(truth))) >= 2
    assert max(d for _, d in truth.in_degree()) <= 4
    # A chain a -> b -> c with a and c non-adjacent.
    assert any(not truth.has_edge(a, c) and not truth.has_edge(c, a)
               for a, b in truth.edges for c in truth.successors(b))


def test_physical_ranges(data):
    # The README promises no impossible values (common practice, no source: shares and
    # physical magnitudes are non-negative; relative humidity is at most 100 %).
    for column in ("sunlight", "heating", "irrigation", "vent_opening", "co2", "soil_moisture",
                   "leaf_area", "fungal_spots", "fruit_yield"):
        assert data[column].min() >= 0, column
    assert data["humidity"].max() <= 100 and data["vent_opening"].max() <= 100


def test_data_agree_with_the_diagram(data, truth):
    # statsmodels OLS of each variable on its parents and its other non-descendants: every
    # parent must be clearly significant (|t| > 8, i.e. detectable by Fisher's z at n = 2000),
    # every other non-descendant not (local Markov property; Lauritzen 1996, Graphical Models,
    # sec. 3.2, from memory). |t| < 4 has probability > 0.9999 per test under the null.
    for v in truth.nodes:
        parents = sorted(truth.predecessors(v))
        others = sorted(set(truth.nodes) - nx.descendants(truth, v) - set(parents) - {v})
        if not parents and not others:
            continue
        fit = sm.OLS(data[v], sm.add_constant(data[parents + others])).fit()
        for u in parents:
            assert abs(fit.tvalues[u]) > 8, (u, v)
        for u in others:
            assert abs(fit.tvalues[u]) < 4, (u, v)


def test_knowledge_is_true_of_the_diagram(knowledge, truth, data):
    assert knowledge["format"] == "edgewise-knowledge" and knowledge["version"] == 1
    named = {v for group in knowledge["stages"] for v in group}
    for key in ("locked", "locked_directions", "forbidden", "forbidden_directions"):
        for pair in knowledge[key]:
            assert len(pair) == 2
            named.update(pair)
    assert named <= set(data.columns)

    stage = {v: k for k, group in enumerate(knowledge["stages"]) for v in group}
    assert len(stage) == sum(len(group) for group in knowledge["stages"])   # no repeats
    for a, b in truth.edges:
        # Nothing in a later stage causes anything in an earlier one.
        if a in stage and b in stage:
            assert stage[a] <= stage[b], (a, b)
    adjacent = lambda a, b: truth.has_edge(a, b) or truth.has_edge(b, a)  # noqa: E731
    assert all(adjacent(a, b) for a, b in knowledge["locked"])
    assert all(truth.has_edge(a, b) for a, b in knowledge["locked_directions"])
    assert not any(adjacent(a, b) for a, b in knowledge["forbidden"])
    assert not any(truth.has_edge(a, b) for a, b in knowledge["forbidden_directions"])
