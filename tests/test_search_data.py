"""The search on data: finite-sample recovery, column order, determinism, the result record."""

import json
import subprocess
import sys
from pathlib import Path

import networkx as nx
import numpy as np
import pandas as pd
import pytest

from discovery import (DataValidationError, DSeparationOracle, ResultFormatError,
                       SearchCancelled, SearchResult, SettingsError, discover, load_result)
from discovery.metrics import cpdag_of, skeleton_scores
from discovery.simulate import random_dag, sample_linear_gaussian

HERE = Path(__file__).parent


@pytest.fixture(scope="module")
def sim15():
    rng = np.random.default_rng(42)
    dag = random_dag(15, expected_degree=2, rng=rng)
    return dag, sample_linear_gaussian(dag, 2000, rng=rng)


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_finite_sample_skeleton_f1(seed):
    # Invented linear-Gaussian data, 15 variables, expected degree 2, n = 2,000 (the design of
    # Kalisch & Bühlmann 2007): the skeleton must be recovered with F1 ≥ 0.9.
    rng = np.random.default_rng(seed)
    dag = random_dag(15, expected_degree=2, rng=rng)
    frame = sample_linear_gaussian(dag, 2000, rng=rng)
    result = discover(frame, alpha=0.05)
    assert skeleton_scores(result.to_networkx(), dag).f1 >= 0.9


def test_alarm_network_with_the_oracle_returns_its_cpdag():
    # ALARM (Beinlich et al. 1989), 37 variables and 46 edges: with a d-separation oracle
    # (networkx) the search must return the CPDAG, here computed by Chickering's (1995)
    # labelling in discovery.metrics.cpdag_of, an algorithm independent of the search's rules.
    edges = pd.read_csv(HERE / "data" / "alarm_edges.csv")
    dag = nx.DiGraph(list(zip(edges["from"], edges["to"])))
    assert dag.number_of_nodes() == 37 and dag.number_of_edges() == 46
    result = discover(None, test=DSeparationOracle(dag))
    assert set(result.to_networkx().edges) == set(cpdag_of(dag).edges)


@pytest.mark.parametrize("rule", ["standard", "conservative", "majority"])
def test_column_order_does_not_change_the_result(sim15, rule):
    _, frame = sim15
    a = discover(frame, collider_rule=rule)
    shuffled = frame[list(np.random.default_rng(9).permutation(frame.columns))]
    b = discover(shuffled, collider_rule=rule)
    assert a.edges == b.edges
    assert a.removed == b.removed
    assert a.tests == b.tests
    assert a.triples == b.triples


def test_same_input_gives_identical_edges_and_evidence(sim15):
    _, frame = sim15
    a, b = discover(frame), discover(frame)
    assert a.edges == b.edges and a.tests == b.tests and a.removed == b.removed


def test_result_json_round_trip(tmp_path, sim15):
    _, frame = sim15
    result = discover(frame, max_depth=2)
    path = tmp_path / "r.json"
    result.to_json(path)
    doc = json.loads(path.read_text())
    assert doc["format"] == "edgewise-result" and doc["version"] == 1
    for key in ("variables", "settings", "knowledge", "edges", "removed", "counts", "timings",
                "data", "software", "assumptions"):
        assert key in doc
    assert len(doc["data"]["sha256"]) == 64
    loaded = load_result(path)
    assert loaded.edges == result.edges
    assert loaded.removed == result.removed
    assert loaded.tests == result.tests
    assert loaded.settings == result.settings


@pytest.mark.parametrize("mutate, message", [
    (lambda d: d.update(format="other"), "'format' is not 'edgewise-result'"),
    (lambda d: d.update(version=99), "version 99 is not supported"),
    (lambda d: d.pop("edges"), r"missing field\(s\) \['edges'\]"),
    (lambda d: d["edges"][0].update(kind="sideways"), "edge kind 'sideways'"),
    (lambda d: d["edges"][0].update({"from": "ghost"}), "unknown variable"),
    (lambda d: d["settings"].update(alpha=3), "'alpha' parameter"),
])
def test_result_validation_on_load(tmp_path, sim15, mutate, message):
    _, frame = sim15
    doc = discover(frame, max_depth=1).to_dict()
    mutate(doc)
    path = tmp_path / "bad.json"
    path.write_text(json.dumps(doc))
    with pytest.raises(ResultFormatError, match=message):
        load_result(path)


def test_result_is_immutable(sim15):
    _, frame = sim15
    result = discover(frame, max_depth=1)
    with pytest.raises(AttributeError):
        result.edges = ()
    with pytest.raises(TypeError):
        result.counts["edges"] = 0


def test_every_pair_has_evidence(sim15):
    dag, frame = sim15
    result = discover(frame)
    names = list(frame.columns)
    for i, a in enumerate(names):
        for b in names[i + 1:]:
            ev = result.evidence(a, b)
            assert ev.tests, f"no test recorded for {a}, {b}"
            assert (ev.edge is None) == (ev.removal is not None)
    for e in result.edges:
        if e.kind == "directed":
            assert e.reason and e.reason_kind
    assert "Assumptions" in result.summary().as_text()


@pytest.mark.parametrize("kwargs, message", [
    ({"alpha": 1.5}, r"The 'alpha' parameter of discover must be a float in \(0, 1\). Got 1.5"),
    ({"alpha": 0}, "'alpha' parameter"),
    ({"max_depth": -1}, "'max_depth' parameter"),
    ({"collider_rule": "loose"}, "'collider_rule' parameter"),
    ({"test": "psychic"}, "'test' parameter"),
    ({"missing": "ignore"}, "'missing' parameter"),
])
def test_settings_are_validated(sim15, kwargs, message):
    _, frame = sim15
    with pytest.raises(SettingsError, match=message):
        discover(frame, **kwargs)


def test_text_column_is_a_clear_error():
    frame = pd.DataFrame({"a": [1.0, 2, 3, 4, 5, 6], "b": list("xyzxyz"),
                          "c": [2.0, 1, 4, 3, 6, 5]})
    with pytest.raises(DataValidationError, match="column 'b' holds text"):
        discover(frame)


def test_collinear_columns_are_named():
    rng = np.random.default_rng(0)
    a, b = rng.normal(size=(2, 100))
    frame = pd.DataFrame({"a": a, "b": b, "c": a - b, "d": rng.normal(size=100)})
    with pytest.raises(DataValidationError, match="'a', 'b' and 'c' are perfectly collinear"):
        discover(frame)


def test_cancel_stops_the_search(sim15):
    _, frame = sim15
    with pytest.raises(SearchCancelled):
        discover(frame, cancel=lambda: True)


def test_progress_reports_levels(sim15):
    _, frame = sim15
    events = []
    discover(frame, progress=events.append)
    assert events and {e["phase"] for e in events} == {"skeleton"}
    assert all(0 < e["done"] <= e["planned"] for e in events)


def test_importing_the_engine_leaves_qt_out():
    # STYLE.md C.14: the engine never imports Qt.
    code = "import sys, discovery, discovery.cli; print(any('PySide6' in m for m in sys.modules))"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


def test_result_from_dict_accepts_its_own_output(sim15):
    _, frame = sim15
    result = discover(frame, max_depth=1)
    assert SearchResult.from_dict(result.to_dict()).edges == result.edges


def test_slow_tests_report_progress_and_stop_within_a_level():
    # A test that is not vectorised (like the kernel tests) is answered in pieces, so that a
    # long level shows progress and a stop request is honoured before the level ends.
    from discovery.independence import IndependenceTest

    class Slow(IndependenceTest):
        name = "slow"
        vectorised = False

        def __init__(self, n):
            self.variables = tuple(f"v{i:02d}" for i in range(n))
            self.calls = 0

        def settings_key(self):
            return ("slow", id(self))

        def _batch(self, triples):
            self.calls += 1
            p = np.ones(len(triples))
            return p, p

    events = []
    test = Slow(20)  # 190 pairs at level 0
    discover(None, test=test, progress=events.append)
    level0 = [e for e in events if e["level"] == 0]
    assert len(level0) >= 3 and level0[-1]["done"] == 190
    seen = []

    def stop_after_first_piece():
        seen.append(1)
        return len(seen) > 1

    with pytest.raises(SearchCancelled):
        discover(None, test=Slow(20), cancel=stop_after_first_piece)


def test_skipping_level_one_tests_that_cannot_separate_keeps_the_skeleton():
    # FisherZ.may_separate lets level 1 skip tests whose outcome is already certain; the
    # skeleton and every separating set must be those of the search that runs them all.
    from discovery import FisherZ
    from discovery.search._skeleton import adjacency_search
    rng = np.random.default_rng(7)
    frame = sample_linear_gaussian(random_dag(60, expected_degree=3, rng=rng), 1000, rng=rng)
    test = FisherZ(frame[sorted(frame.columns)])
    common = dict(alpha=0.05, association=test.association())
    full = adjacency_search(60, test.pvalues_array, **common)
    fast = adjacency_search(60, test.pvalues_array,
                            may_separate=lambda pairs: test.may_separate(pairs, 0.05), **common)
    assert fast.adjacent == full.adjacent
    assert dict(fast.sepsets.items()) == dict(full.sepsets.items())
    tests = [sum(len(block[0]) for block in outcome.log) for outcome in (fast, full)]
    assert tests[0] < tests[1]


def test_a_test_object_with_unsorted_columns_gives_the_same_result(sim15):
    # A FisherZ built on shuffled columns is wrapped to name order (its shortcut included):
    # the result must equal the one from the frame itself.
    from discovery import FisherZ
    _, frame = sim15
    shuffled = frame[list(np.random.default_rng(3).permutation(frame.columns))]
    a = discover(frame)
    b = discover(None, test=FisherZ(shuffled))
    # the correlations of shuffled columns differ in their last bits only
    assert [(e.source, e.target, e.kind, e.reason, e.tests) for e in a.edges] == \
        [(e.source, e.target, e.kind, e.reason, e.tests) for e in b.edges]
    assert [r[:3] for r in a.removed] == [r[:3] for r in b.removed]
    assert [r.pvalue for r in b.removed] == pytest.approx([r.pvalue for r in a.removed],
                                                          rel=1e-9)
    assert len(a.tests) == len(b.tests)


def test_batch_sizes_do_not_change_the_skeleton(monkeypatch):
    # Rounds are capped in size and the last few thousand rows go in one batch; neither may
    # change which pairs are removed nor the separating set kept (the first in order).
    from discovery import FisherZ
    from discovery.search import _skeleton
    rng = np.random.default_rng(11)
    frame = sample_linear_gaussian(random_dag(40, expected_degree=4, rng=rng), 800, rng=rng)
    test = FisherZ(frame[sorted(frame.columns)])

    def search():
        return _skeleton.adjacency_search(40, test.pvalues_array, alpha=0.05,
                                          association=test.association())
    usual = search()
    monkeypatch.setattr(_skeleton, "_MAX_BATCH", 7)
    monkeypatch.setattr(_skeleton, "_ONE_BATCH", 0)
    small = search()
    assert small.adjacent == usual.adjacent
    assert dict(small.sepsets.items()) == dict(usual.sepsets.items())
    assert len(small.log) > len(usual.log)  # many more, smaller batches


def test_a_level_that_could_outgrow_the_memory_is_not_started(monkeypatch):
    # the hardening issue: never fail half-way (or be killed) for want of memory; stop
    # deepening with a note instead. Here the machine is made to look nearly full: no memory
    # to keep the evidence in, and no disk space to spill it to.
    import warnings

    from discovery import SearchLimitWarning, discover
    from discovery.search import _skeleton
    from discovery.simulate import random_dag, sample_linear_gaussian
    rng = np.random.default_rng(4)
    frame = sample_linear_gaussian(random_dag(12, expected_degree=4, rng=rng), 3000, rng=rng)
    full = discover(frame)
    assert full.counts["depth_reached"] >= 2
    monkeypatch.setattr(_skeleton, "available_memory", lambda: 1)
    monkeypatch.setattr(_skeleton, "free_disk_space", lambda: 1)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        limited = discover(frame)
    assert limited.counts["depth_reached"] <= 1
    assert any("depth limited to 1 by memory" in n for n in limited.notes)
    assert any(issubclass(w.category, SearchLimitWarning) for w in caught)
