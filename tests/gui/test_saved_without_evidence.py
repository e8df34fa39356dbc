"""A result file saved without its evidence rows (too large to store) opens in the window,
and the Inspector says the evidence was omitted instead of showing 0 tests."""

import networkx as nx

import discovery.result as result_module
from discovery import discover
from discovery.independence import DSeparationOracle


def test_inspector_says_the_evidence_was_omitted(window, tmp_path, monkeypatch):
    # the collider a → c ← b answered by d-separation
    live = discover(None, test=DSeparationOracle(nx.DiGraph([("a", "c"), ("b", "c")])))
    whole = len(live.to_json().encode("utf-8")) + 1
    monkeypatch.setattr(result_module, "MAX_SAVED_BYTES", whole - 1)
    assert live.write_json(tmp_path / "r.json") == len(live.tests) > 0
    assert window.open_path(tmp_path / "r.json")
    said = f"evidence omitted ({len(live.tests)} tests, too large to store)"
    for a, b in (("a", "c"), ("a", "b")):  # an edge and a removed pair
        window.session.select_pair(a, b)
        assert said in window.inspector.tests_label.text()
        assert window.inspector.tests.rowCount() == 0
    edge = live.edge("a", "c")
    window.session.select_pair("a", "c")  # the kept figures are still shown
    assert f"of {edge.tests} tests" in window.inspector.body.text()
    # the live result shows its tests
    monkeypatch.setattr(result_module, "MAX_SAVED_BYTES", 512 * 2**20)
    live.write_json(tmp_path / "s.json")
    assert window.open_path(tmp_path / "s.json")
    window.session.select_pair("a", "c")
    assert window.inspector.tests_label.text() == f"Tests on this pair ({edge.tests})"
    assert window.inspector.tests.rowCount() == edge.tests
