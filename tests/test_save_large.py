"""Saving a result whose evidence is too large to read back: the rows are left out, said so,
and everything else is kept; small results are written exactly as before.

The threshold (``discovery.result.MAX_SAVED_BYTES``, the reader's 512 MiB limit) is lowered
here so that small searches stand in for the 279-million-test one."""

import json
import sys
from pathlib import Path

import networkx as nx
import numpy as np
import pandas as pd
import pytest

import discovery.result as result_module
from discovery import discover, load_result
from discovery.cli import main
from discovery.exceptions import ResultFormatError
from discovery.independence import DSeparationOracle
from discovery.report import build_report, write_report
from discovery.result import OMITTED_REASON, SearchResult

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _fixed_results import hand_result, oracle_result  # noqa: E402

EXPECTED = Path(__file__).resolve().parent / "data" / "result_small_v1.json"

# A DAG with chains, a collider and a hub, so the search runs tests at several depths.
DAG = nx.DiGraph([("a", "c"), ("b", "c"), ("c", "d"), ("d", "e"), ("c", "f"), ("f", "g"),
                  ("h", "f"), ("h", "i"), ("i", "g"), ("e", "j")])


def _size(result, indent=1) -> int:
    return len(result.to_json(indent=indent).encode("utf-8")) + 1  # with the final newline


def _skeleton(edges) -> set:
    return {frozenset(e) for e in edges}


# -- small results: byte for byte as before ------------------------------------------------

def test_small_results_are_written_byte_for_byte_as_before(tmp_path):
    # tests/data/result_small_v1.json was written by the code before the evidence could be
    # left out (commit cec66e0), from the same builders (tests/_fixed_results.py)
    expected = json.loads(EXPECTED.read_text(encoding="utf-8"))
    oracle, hand = oracle_result(), hand_result()
    assert oracle.to_json() == expected["oracle"]
    assert hand.to_json() == expected["hand"]
    assert oracle.to_json(indent=None) == expected["oracle_compact"]
    assert json.loads(expected["hand"])["evidence"]["tests"][0]["pvalue"] is None  # NaN
    oracle.to_json(tmp_path / "a.json")
    assert oracle.write_json(tmp_path / "b.json") == 0
    for name in ("a.json", "b.json"):
        assert (tmp_path / name).read_bytes() == (expected["oracle"] + "\n").encode("utf-8")


def test_the_size_estimate_is_an_upper_bound_and_the_threshold_is_exact(monkeypatch):
    # the estimate of the rows never falls short of the rows' real bytes (else a written
    # file could pass the reader's limit); measured by json itself
    for result in (oracle_result(), hand_result()):
        for indent in (None, 0, 1, 4):
            full = json.loads(result.to_json(indent=indent))
            without = dict(full, evidence={"tests": []})
            real = (len(json.dumps(full, indent=indent, ensure_ascii=False).encode())
                    - len(json.dumps(without, indent=indent, ensure_ascii=False).encode()))
            assert real <= result.tests.json_bytes(indent) <= 2 * real + 200
    # any limit below the whole document's size leaves the rows out; a limit well above
    # keeps them
    r = oracle_result()
    whole = _size(r)
    monkeypatch.setattr(result_module, "MAX_SAVED_BYTES", whole - 1)
    assert r.to_dict()["evidence"]["omitted"] == len(r.tests)
    monkeypatch.setattr(result_module, "MAX_SAVED_BYTES", 2 * whole + 1000)
    assert r.to_dict()["evidence"] == json.loads(oracle_result().to_json())["evidence"]
    # whatever the limit (down to the size without rows), the written file fits it
    without = whole - (len(r.to_json().encode()) - len(json.dumps(
        dict(json.loads(r.to_json()), evidence={"tests": []}), indent=1,
        ensure_ascii=False).encode()))
    for limit in range(without + 1200, 2 * whole, max(1, whole // 40)):
        monkeypatch.setattr(result_module, "MAX_SAVED_BYTES", limit)
        assert _size(r) <= limit


# -- large evidence: left out, said so, everything else kept -------------------------------

@pytest.fixture
def small_limit(monkeypatch):
    """A threshold that the oracle search's evidence does not fit."""
    live = discover(None, test=DSeparationOracle(DAG))
    monkeypatch.setattr(result_module, "MAX_SAVED_BYTES", _size(live) - 1)
    return live


def test_a_result_too_large_is_saved_without_its_rows_and_reads_back(small_limit, tmp_path):
    live = small_limit
    assert live.tests.json_bytes() > 0 and len(live.tests) == live.counts["tests"]
    assert live.write_json(tmp_path / "r.json") == len(live.tests)
    doc = json.loads((tmp_path / "r.json").read_text(encoding="utf-8"))
    assert doc["evidence"] == {"tests": [], "omitted": len(live.tests),
                               "omitted_reason": OMITTED_REASON}
    assert doc["notes"][-1] == result_module.omitted_note(len(live.tests))
    assert (tmp_path / "r.json").read_text(encoding="utf-8") == live.to_json() + "\n"
    loaded = load_result(tmp_path / "r.json")
    assert len(loaded.tests) == 0 and loaded.evidence_omitted == len(live.tests)
    # everything but the rows is kept as the live result has it
    assert loaded.edges == live.edges  # with each edge's max p-value and test count
    assert tuple(loaded.removed) == tuple(live.removed)  # with the separating sets
    assert tuple(loaded.triples) == tuple(live.triples)
    assert dict(loaded.counts) == dict(live.counts)
    assert loaded.settings == live.settings and loaded.knowledge == live.knowledge
    # the search itself, against networkx d-separation: a perfect oracle gives the DAG's
    # skeleton (Spirtes, Glymour & Scheines 2000, PC's correctness), and each stored
    # separating set d-separates its pair in the DAG
    assert _skeleton((e.source, e.target) for e in loaded.edges) == _skeleton(DAG.edges)
    for r in loaded.removed:
        assert nx.is_d_separator(DAG, {r.a}, {r.b}, set(r.separating_set))
    # saved again, the document is the same (the note is not repeated)
    assert json.dumps(loaded.to_dict()) == json.dumps(doc)


def test_queries_on_such_a_result_say_the_evidence_was_omitted(small_limit, tmp_path, capsys):
    live = small_limit
    live.write_json(tmp_path / "r.json")
    loaded = load_result(tmp_path / "r.json")
    said = f"evidence omitted ({len(live.tests):,} tests, too large to store)"
    e = live.edges[0]
    removed = live.removed[0]
    for a, b in ((e.source, e.target), (removed.a, removed.b)):
        text = loaded.evidence(a, b).as_text()
        assert said in text and "no test was run" not in text
        assert said not in live.evidence(a, b).as_text()
        assert said in loaded.evidence(a, b)._repr_html_()
    # the edge's figures are shown from what was kept
    assert f"the pair's {e.tests} test(s)" in loaded.evidence(e.source, e.target).as_text()
    assert said in loaded.summary().as_text()
    assert said not in live.summary().as_text()
    assert main(["explain", str(tmp_path / "r.json"), e.source, e.target]) == 0
    assert said in capsys.readouterr().out
    report = build_report(loaded)
    write_report(report, tmp_path / "r.html")
    page = (tmp_path / "r.html").read_text(encoding="utf-8")
    assert said in page and "left out of this file" in page


def test_the_reader_refuses_inconsistent_omission(small_limit):
    doc = json.loads(small_limit.to_json())
    bad = json.loads(json.dumps(doc))
    bad["evidence"]["omitted"] = -3
    with pytest.raises(ResultFormatError, match="'evidence.omitted' must be a whole number"):
        SearchResult.from_dict(bad)
    bad["evidence"]["omitted"] = True
    with pytest.raises(ResultFormatError, match="'evidence.omitted' must be a whole number"):
        SearchResult.from_dict(bad)
    bad["evidence"] = {"tests": [{"x": "a", "y": "b", "given": [], "pvalue": 0.5}],
                       "omitted": 4}
    with pytest.raises(ResultFormatError, match="says they were omitted"):
        SearchResult.from_dict(bad)


def _linear_table(rows=400, seed=1) -> pd.DataFrame:
    """Linear-Gaussian data from DAG (each variable: its parents' sum plus unit noise)."""
    rng = np.random.default_rng(seed)
    values = {}
    for v in nx.topological_sort(DAG):
        values[v] = rng.normal(size=rows) + sum(values[p] for p in DAG.predecessors(v))
    return pd.DataFrame(values)[sorted(DAG)]


def test_the_command_line_writes_the_file_and_says_so_in_one_line(tmp_path, monkeypatch,
                                                                 capsys):
    data = tmp_path / "d.csv"
    _linear_table().to_csv(data, index=False)
    live = discover(_linear_table())
    monkeypatch.setattr(result_module, "MAX_SAVED_BYTES", _size(live) // 2)
    assert main(["discover", str(data), "--out", str(tmp_path / "r.json"), "--quiet"]) == 0
    out = capsys.readouterr()
    lines = out.err.strip().splitlines()
    assert len(lines) == 1 and "without the evidence" in lines[0]
    assert "too large to store" in lines[0] and "Traceback" not in out.err
    loaded = load_result(tmp_path / "r.json")
    assert loaded.evidence_omitted == live.counts["tests"] > 0
    assert {(e.source, e.target, e.kind) for e in loaded.edges} == \
        {(e.source, e.target, e.kind) for e in live.edges}
    # a small result says nothing of the kind
    monkeypatch.setattr(result_module, "MAX_SAVED_BYTES", 512 * 2**20)
    assert main(["discover", str(data), "--out", str(tmp_path / "s.json"), "--quiet"]) == 0
    assert capsys.readouterr().err == ""
    assert load_result(tmp_path / "s.json").evidence_omitted == 0

