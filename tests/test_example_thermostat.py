"""The invented thermostat example: a faithfulness failure by exact cancellation, and the
tools that reveal it.

References: the population covariance of the linear model (path tracing, Wright 1921, from
memory) for the exact cancellation; networkx d-separation for "the pair is d-connected" and
for the true separating set; the project's metrics.cpdag_of (checked by brute-force
enumeration in tests/test_enumeration.py) for the true equivalence class.
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import networkx as nx
import numpy as np
import pandas as pd
import pytest

from discovery import discover, read_knowledge, read_table
from discovery.metrics import cpdag_of

FOLDER = Path(__file__).resolve().parents[1] / "example_sets" / "thermostat_cancellation"


def load_generator():
    spec = importlib.util.spec_from_file_location("thermostat_generate", FOLDER / "generate.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


@pytest.fixture(scope="module")
def data():
    return read_table(FOLDER / "data.csv")


@pytest.fixture(scope="module")
def truth():
    edges = pd.read_csv(FOLDER / "truth.csv")
    return nx.DiGraph(list(zip(edges["from"], edges["to"])))


def arcs(result):
    return set(result.to_networkx().edges)


def test_generator_rewrites_the_committed_files_byte_for_byte(tmp_path):
    load_generator().main(["--out", str(tmp_path)])
    for name in ("data.csv", "truth.csv"):
        assert (tmp_path / name).read_bytes() == (FOLDER / name).read_bytes(), name


def test_the_two_paths_cancel_exactly_although_the_pair_is_d_connected(truth):
    weights = load_generator().WEIGHTS
    # path tracing in a standardised model: heater path + heat-loss path
    total = (weights[("outdoor_temp", "heater_power")] * weights[("heater_power", "room_temp")]
             + weights[("outdoor_temp", "heat_loss")] * weights[("heat_loss", "room_temp")])
    assert total == pytest.approx(0.0, abs=1e-12)
    assert not nx.is_d_separator(truth, {"outdoor_temp"}, {"room_temp"}, set())
    assert nx.is_d_separator(truth, {"outdoor_temp"}, {"room_temp"},
                             {"heater_power", "heat_loss"})


def test_standard_rule_is_misled_and_shows_contested_edges(data, truth):
    result = discover(data)
    assert arcs(result) != set(cpdag_of(truth).edges)
    removal = next(r for r in result.removed if {r.a, r.b} == {"outdoor_temp", "room_temp"})
    assert removal.separating_set == () and removal.pvalue > 0.5
    assert result.counts["contested"] == 2
    assert {e.pair for e in result.edges if e.kind == "contested"} == {
        frozenset(("heater_power", "room_temp")), frozenset(("heat_loss", "room_temp"))}


@pytest.mark.parametrize("rule", ["conservative", "majority"])
def test_conservative_and_majority_rules_recover_the_equivalence_class(data, truth, rule):
    result = discover(data, collider_rule=rule)
    assert arcs(result) == set(cpdag_of(truth).edges)
    decisions = {(t["x"], t["z"], t["y"]): t["decision"] for t in result.triples}
    assert {d for (x, z, y), d in decisions.items()
            if {x, y} == {"outdoor_temp", "room_temp"}} == {"ambiguous"}


def test_stages_refuse_the_wrong_colliders(data, truth):
    result = discover(data, knowledge=read_knowledge(FOLDER / "knowledge.toml"))
    assert arcs(result) == set(truth.edges)
    assert sum("refused" in c for c in result.conflicts) == 2


def test_readme_numbers(data):
    frame = data.frame
    assert abs(np.corrcoef(frame["outdoor_temp"], frame["room_temp"])[0, 1]) < 0.05
    assert np.corrcoef(frame["outdoor_temp"], frame["heater_power"])[0, 1] < -0.75
