"""Diagrams in and out: DOT, GraphML, CSV edge lists and result JSON; compare; --truth;
a diagram as knowledge.

Outside references: pydot (a DOT parser from the package registry) and networkx's GraphML
and DOT readers/writers read the files Edgewise writes and write files Edgewise reads; the
structural Hamming distance is counted by hand from its definition (Tsamardinos, Brown &
Aliferis 2006, Machine Learning 65: one per pair whose edge marks differ); the CPDAG of a
chain a → b → c is all-undirected and of a collider a → c ← b all-directed (Verma & Pearl
1990); spreadsheet formula injection: a cell starting with =, +, -, @ (or tab/CR) is run as
a formula by common spreadsheet programs (OWASP "CSV Injection").
"""

import csv
import dataclasses
import json
import shutil
from pathlib import Path

import networkx as nx
import pandas as pd
import pydot
import pytest

from discovery import DataValidationError, DiscoveryError, DSeparationOracle, Knowledge, discover
from discovery.cli import main
from discovery.exchange import (compare, diagram_result, knowledge_from_diagram,
                                merge_knowledge, read_diagram, spreadsheet_safe, write_edge_csv)
from discovery.io import write_dot, write_graphml

pytestmark = pytest.mark.filterwarnings("ignore:.*deprecated")  # pydot's use of pyparsing

ROOT = Path(__file__).resolve().parent.parent
GREENHOUSE = ROOT / "example_sets" / "greenhouse"

# a → c ← b, c → d, and x — y (undirected in the CPDAG)
DAG = nx.DiGraph([("a", "c"), ("b", "c"), ("c", "d"), ("x", "y")])


@pytest.fixture(scope="module")
def result():
    r = discover(None, test=DSeparationOracle(DAG))
    edges = []
    for e in r.edges:  # one contested edge and a p-value with an exponent
        if (e.source, e.target) == ("c", "d"):
            e = dataclasses.replace(e, kind="contested", reason="both ways",
                                    reason_kind="contested", max_pvalue=9.1e-22)
        edges.append(e)
    return dataclasses.replace(r, edges=tuple(edges))


def _marks(result):
    return {(e.source, e.target): (e.kind, e.from_mark, e.to_mark) for e in result.edges}


def _unquote(v):
    return v.strip('"') if isinstance(v, str) else v


def test_dot_written_by_the_tool_reads_back_with_pydot_and_networkx(result, tmp_path):
    path = tmp_path / "g.dot"
    write_dot(result, path)
    (g,) = pydot.graph_from_dot_data(path.read_text(encoding="utf-8"))
    edges = g.get_edges() + [e for s in g.get_subgraphs() for e in s.get_edges()]
    got = {(_unquote(e.get_source()), _unquote(e.get_destination())):
           (_unquote(e.get("kind")), _unquote(e.get("from_mark")), _unquote(e.get("to_mark")))
           for e in edges}
    assert got == _marks(result)
    nxg = nx.nx_pydot.read_dot(path)
    got = {(u, v): (_unquote(d["kind"]), _unquote(d["from_mark"]), _unquote(d["to_mark"]))
           for u, v, d in nxg.edges(data=True)}
    assert got == _marks(result)
    assert float(_unquote(nxg.edges["c", "d", 0]["max_pvalue"])) == 9.1e-22
    assert _marks(read_diagram(path)) == _marks(result)


def test_graphml_written_by_the_tool_reads_back_with_networkx(result, tmp_path):
    path = tmp_path / "g.graphml"
    write_graphml(result, path)
    g = nx.read_graphml(path)
    got = {(u, v): (d["kind"], d["from_mark"], d["to_mark"]) for u, v, d in g.edges(data=True)}
    assert got == _marks(result)
    assert _marks(read_diagram(path)) == _marks(result)


def test_csv_and_json_round_trip(result, tmp_path):
    write_edge_csv(result, tmp_path / "g.csv")
    result.to_json(tmp_path / "g.json")
    for name in ("g.csv", "g.json"):
        back = read_diagram(tmp_path / name)
        assert _marks(back) == _marks(result)
        assert set(back.variables) == set(result.variables) - {"lonely"}


def test_diagrams_written_by_networkx_are_read(tmp_path):
    # networkx writes GraphML and (through pydot) DOT; two opposite arcs are one undirected edge
    g = nx.DiGraph([("smoke", "tar"), ("tar", "cough"), ("cough", "tar"), ("age", "tar")])
    nx.write_graphml(g, tmp_path / "n.graphml")
    nx.nx_pydot.write_dot(g, tmp_path / "n.dot")
    want = {("age", "tar"): ("directed", "tail", "arrow"),
            ("smoke", "tar"): ("directed", "tail", "arrow"),
            ("cough", "tar"): ("undirected", "tail", "tail")}
    assert _marks(read_diagram(tmp_path / "n.graphml")) == want
    assert _marks(read_diagram(tmp_path / "n.dot")) == want


def test_dot_drawing_attributes_give_marks(tmp_path):
    # Graphviz attributes (graphviz.org/doc/info/attrs.html): dir=none, dir=back, odot heads
    (tmp_path / "d.dot").write_text(
        'digraph { a -> b; c -> b [dir=back]; d -> e [dir=none]; f -> g; }', encoding="utf-8")
    got = _marks(read_diagram(tmp_path / "d.dot"))
    assert got == {("a", "b"): ("directed", "tail", "arrow"),
                   ("b", "c"): ("directed", "tail", "arrow"),
                   ("d", "e"): ("undirected", "tail", "tail"),
                   ("f", "g"): ("directed", "tail", "arrow")}
    (tmp_path / "u.dot").write_text("graph { a -- b; b -- c }", encoding="utf-8")
    assert {k for k, _, _ in _marks(read_diagram(tmp_path / "u.dot")).values()} == {"undirected"}


def test_csv_export_is_spreadsheet_safe(tmp_path):
    names = ["=SUM(A1)", "+plus", "-dose", "@home", "plain"]
    dag = nx.DiGraph([(names[0], names[4]), (names[1], names[4]), (names[4], names[2]),
                      (names[4], names[3])])
    r = discover(None, test=DSeparationOracle(dag))
    write_edge_csv(r, tmp_path / "e.csv")
    with open(tmp_path / "e.csv", encoding="utf-8-sig", newline="") as f:
        cells = [c for row in csv.reader(f) for c in row]
    assert cells and not [c for c in cells if c[:1] in ("=", "+", "-", "@")]
    assert _marks(read_diagram(tmp_path / "e.csv")) == _marks(r)
    assert spreadsheet_safe("-0.5") == "'-0.5" and spreadsheet_safe("a-b") == "a-b"


def test_compare_counts_the_structural_hamming_distance():
    # truth a → b → c; estimate a → b ← c plus a — c: b-c reversed, a-c extra: SHD 2 (by hand)
    truth = nx.DiGraph([("a", "b"), ("b", "c")])
    est = nx.DiGraph([("a", "b"), ("c", "b"), ("a", "c"), ("c", "a")])
    c = compare(est, truth)
    assert c.shd == 2 and c.same == 1
    assert {(d["a"], d["b"], d["change"]) for d in c.differences} == \
        {("b", "c", "reversed"), ("a", "c", "only in A")}
    assert c.skeleton["precision"] == pytest.approx(2 / 3) and c.skeleton["recall"] == 1.0
    assert c.arrowheads["true_positives"] == 1
    assert "SHD" in c.as_text() or "Structural Hamming distance: 2" in c.as_text()
    assert json.loads(json.dumps(c.to_dict()))["shd"] == 2


def test_compare_command_and_truth_option(tmp_path, capsys):
    out = tmp_path / "r.json"
    assert main(["discover", str(GREENHOUSE / "data.csv"), "--knowledge",
                 str(GREENHOUSE / "knowledge.toml"), "--collider-rule", "conservative",
                 "--out", str(out), "--quiet", "--truth", str(GREENHOUSE / "truth.csv")]) == 0
    text = capsys.readouterr().out
    # the example's README: every edge found and oriented as in truth.csv
    assert "against the diagram as given: SHD 0; skeleton precision 1.000 recall 1.000" in text
    assert main(["compare", str(out), str(GREENHOUSE / "truth.csv"),
                 "--json", str(tmp_path / "c.json")]) == 0
    assert "Structural Hamming distance: 0" in capsys.readouterr().out
    assert json.loads((tmp_path / "c.json").read_text())["shd"] == 0


def test_lock_diagram_locks_every_edge(tmp_path, capsys):
    out = tmp_path / "r.json"
    # without stages, sunlight — irrigation cannot be oriented by the data (README); locking
    # the true diagram's directions orients every edge as drawn
    assert main(["discover", str(GREENHOUSE / "data.csv"), "--lock-diagram",
                 str(GREENHOUSE / "truth.csv"), "--out", str(out), "--quiet"]) == 0
    r = read_diagram(out)
    truth = read_diagram(GREENHOUSE / "truth.csv")
    assert compare(r, truth).shd == 0
    k = Knowledge.from_diagram(GREENHOUSE / "truth.csv")
    true_edges = pd.read_csv(GREENHOUSE / "truth.csv")  # the invented ground truth
    assert set(k.locked_directions) == set(zip(true_edges["from"], true_edges["to"]))
    assert not k.locked
    k2 = knowledge_from_diagram(nx.DiGraph([("a", "b"), ("b", "a"), ("b", "c")]),
                                directions=False, forbid_absent=True)
    assert set(k2.locked) == {("a", "b"), ("b", "c")} and k2.forbidden == (("a", "c"),)


@pytest.mark.parametrize("name, text, match", [
    ("g.txt", "x", "cannot tell the diagram format"),
    ("g.dot", "digraph { a -> ", "not a DOT file pydot can read"),
    ("g.dot", 'digraph { a -> b [kind="sideways"] }', "has kind 'sideways'"),
    ("g.dot", "digraph { a -> b; b -> a [dir=back] }", "the pair 'a' — 'b' has two edges"),
    ("g.dot", "digraph { a -> a }", "self-loop"),
    ("g.csv", "source,target\na,b\n", "no 'from' or 'to' column"),
    ("g.csv", "from,to,from_mark,to_mark\na,b,tail,hook\n", "end mark 'hook'"),
    ("g.csv", "from,to\n,b\n", "the 'from' cell is empty"),
    ("g.csv", "", "the file is empty"),
    ("g.graphml", "<graphml", "not valid XML"),
])
def test_bad_diagrams_get_one_clear_line(tmp_path, name, text, match):
    (tmp_path / name).write_text(text, encoding="utf-8")
    with pytest.raises(DataValidationError, match=match):
        read_diagram(tmp_path / name)


def test_bad_inputs_to_compare_and_lock(tmp_path, capsys):
    with pytest.raises(DiscoveryError, match="expected a SearchResult"):
        compare(42, nx.DiGraph())
    with pytest.raises(DataValidationError, match="file not found"):
        read_diagram(tmp_path / "missing.csv")
    (tmp_path / "cyc.csv").write_text("from,to\na,b\nb,c\nc,a\n", encoding="utf-8")
    from discovery import KnowledgeError, ResultFormatError
    with pytest.raises(KnowledgeError, match="cycle"):
        knowledge_from_diagram(tmp_path / "cyc.csv")
    with pytest.raises(KnowledgeError, match="both locked and forbidden"):
        merge_knowledge(Knowledge(locked=[("a", "b")]), Knowledge(forbidden=[("a", "b")]))
    (tmp_path / "other.json").write_text('{"format": "something-else"}', encoding="utf-8")
    with pytest.raises(ResultFormatError, match="'format' is not 'edgewise-result'"):
        read_diagram(tmp_path / "other.json")
    with pytest.raises(DataValidationError, match="names a variable that is not in the diagram"):
        diagram_result(["a"], [("a", "b", "directed")])
    (tmp_path / "a file").write_text("", encoding="utf-8")
    r = discover(None, test=DSeparationOracle(nx.DiGraph([("a", "b")])))
    with pytest.raises(DiscoveryError, match="cannot write the edge list"):
        write_edge_csv(r, tmp_path / "a file" / "e.csv")
    shutil.copy(GREENHOUSE / "truth.csv", tmp_path / "t.csv")
    assert main(["compare", str(tmp_path / "t.csv"), str(tmp_path / "nope.dot")]) == 2
    assert "nope.dot: file not found" in capsys.readouterr().err
    (tmp_path / "other.csv").write_text("from,to\nfoo,bar\n", encoding="utf-8")
    assert main(["discover", str(GREENHOUSE / "data.csv"), "--lock-diagram",
                 str(tmp_path / "other.csv"), "--quiet"]) == 2
    assert "unknown variable(s) ['bar', 'foo']" in capsys.readouterr().err
    assert main(["discover", str(GREENHOUSE / "data.csv"), "--truth",
                 str(tmp_path / "other.csv"), "--quiet"]) == 2
    assert "the diagram lacks variable(s) ['air_temp'" in capsys.readouterr().err
