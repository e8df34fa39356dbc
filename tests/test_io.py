"""DOT and GraphML exports, and reading known diagrams (GraphML, CSV edge lists).

Outside references: the DOT language grammar and attribute catalogue of Graphviz
(https://graphviz.org/doc/info/lang.html, https://graphviz.org/doc/info/attrs.html: ``dir``
∈ forward|back|both|none, arrow shapes ``normal``/``empty``, ``style=dashed``), read here by a
small parser written from that grammar and, when installed, by pydot; GraphML as read by
``networkx.read_graphml`` and the GraphML schema's ``xs:boolean`` (true/false,
http://graphml.graphdrawing.org/specification.html).
"""

import dataclasses
import math
import re
import xml.etree.ElementTree as ET

import networkx as nx
import pytest

from discovery import DataValidationError, DiscoveryError, DSeparationOracle, Knowledge, discover
from discovery.io import read_edge_list, read_graphml_dag, write_dot, write_graphml

# A collider (a → c ← b) followed by a chain (c → d → e), and a lone pair (x — y) whose
# direction no data can tell: the CPDAG has four directed edges and one undirected edge
# (Verma & Pearl 1990: only v-structures and what Meek's rule 1 forces are oriented).
DAG = nx.DiGraph([("a", "c"), ("b", "c"), ("c", "d"), ("d", "e"), ("x", "y")])


@pytest.fixture(scope="module")
def result():
    return discover(None, test=DSeparationOracle(nx.freeze(DAG.copy())),
                    knowledge=Knowledge(locked=[("x", "y")], stages=[["a", "b"], ["c"]]))


@pytest.fixture(scope="module")
def contested(result):
    """The result with d — e marked contested and one edge without any test (NaN p)."""
    edges = []
    for e in result.edges:
        if (e.source, e.target) == ("d", "e"):
            e = dataclasses.replace(e, kind="contested", reason="two colliders disagree",
                                    reason_kind="contested")
        if (e.source, e.target) == ("a", "c"):
            e = dataclasses.replace(e, max_pvalue=float("nan"), tests=0)
        edges.append(e)
    return dataclasses.replace(result, edges=tuple(edges))


# ------------------------------------------------------------------ a DOT reader for tests
_TOKEN = re.compile(r'\s*(?://[^\n]*|#[^\n]*|/\*.*?\*/|"((?:\\.|[^"\\])*)"|(->|--|[{}\[\];=,])'
                    r'|([A-Za-z_\200-\U0010ffff][\w\200-\U0010ffff]*|-?(?:\.\d+|\d+(?:\.\d*)?)))',
                    re.S)


def _tokens(text):
    pos, out = 0, []
    while pos < len(text):
        m = _TOKEN.match(text, pos)
        if not m:
            if text[pos:].strip() == "":
                break
            raise AssertionError(f"DOT lexing failed at {text[pos:pos + 30]!r}")
        pos = m.end()
        if m.group(1) is not None:
            # DOT: inside quotes \" is the only escape; Graphviz keeps \\ as a pair.
            out.append(("id", m.group(1).replace('\\"', '"')))
        elif m.group(2):
            out.append(("op", m.group(2)))
        elif m.group(3):
            out.append(("id", m.group(3)))
    return out


def esc_string(text):
    """Graphviz escString for labels: \\\\ is a backslash, \\n a newline."""
    return re.sub(r"\\(.)", lambda m: {"n": "\n", "r": "\r", "\\": "\\"}.get(m.group(1),
                                                                          m.group(0)), text)


def parse_dot(text):
    """Parse the DOT subset the grammar allows here: a digraph of node, edge, attribute and
    subgraph statements. Returns nodes {id: attrs}, edges [(u, v, attrs)], clusters
    {name: [ids]}, graph attrs."""
    toks = _tokens(text)
    i = 0

    def take(kind=None, value=None):
        nonlocal i
        k, v = toks[i]
        assert kind is None or k == kind, (toks[i], kind)
        assert value is None or v == value, (toks[i], value)
        i += 1
        return v

    def attrs():
        out = {}
        take("op", "[")
        while toks[i] != ("op", "]"):
            key = take("id")
            take("op", "=")
            out[key] = take("id")
            if toks[i] in (("op", ","), ("op", ";")):
                take()
        take("op", "]")
        return out

    nodes, edges, clusters, graph = {}, [], {}, {}

    def body(cluster):
        while toks[i] != ("op", "}"):
            if toks[i] == ("id", "subgraph"):
                take()
                name = take("id")
                clusters[name] = []
                take("op", "{")
                body(name)
                take("op", "}")
            elif toks[i][1] in ("graph", "node", "edge") and toks[i + 1] == ("op", "["):
                which = take()
                a = attrs()
                if which == "graph" and cluster is None:
                    graph.update(a)
            else:
                u = take("id")
                if toks[i] == ("op", "->"):
                    take()
                    v = take("id")
                    edges.append((u, v, attrs() if toks[i] == ("op", "[") else {}))
                else:
                    nodes[u] = attrs() if toks[i] == ("op", "[") else {}
                    if cluster is not None:
                        clusters[cluster].append(u)
            if toks[i] == ("op", ";"):
                take()

    take("id", "digraph")
    if toks[i][0] == "id":
        take()
    take("op", "{")
    body(None)
    take("op", "}")
    assert i == len(toks), "text after the closing brace"
    return nodes, edges, clusters, graph


# --------------------------------------------------------------------------------- DOT
def test_dot_structure_matches_the_result(contested):
    nodes, edges, clusters, graph = parse_dot(write_dot(contested))
    assert {esc_string(a["label"]) for a in nodes.values()} == set(contested.variables)
    assert len(edges) == len(contested.edges)
    by_pair = {(u, v): a for u, v, a in edges}
    for e in contested.edges:
        a = by_pair[(e.source, e.target)]
        assert a["kind"] == e.kind and a["reason"] == e.reason
        assert a["tests"] == str(e.tests) and a["locked"] == str(e.locked).lower()
        if math.isnan(e.max_pvalue):
            assert "max_pvalue" not in a
        else:
            assert float(a["max_pvalue"]) == e.max_pvalue
    # Graphviz attributes (graphviz.org/doc/info/attrs.html): dir, arrowhead, arrowtail.
    assert by_pair[("a", "c")].get("dir") is None and by_pair[("a", "c")]["arrowhead"] == "normal"
    assert by_pair[("x", "y")]["dir"] == "none"
    # The contested mark is our own: no heads (heads at both ends read as bidirected, a
    # hidden common cause, in the field's notation), dashed brick red, a "?" in the middle.
    c = by_pair[("d", "e")]
    assert (c["dir"], c["style"], c["color"], esc_string(c["label"])) == \
        ("none", "dashed", "#B5482F", "?")
    assert "arrowhead" not in c and "arrowtail" not in c
    assert (c["from_mark"], c["to_mark"]) == ("tail", "tail")
    assert (by_pair[("a", "c")]["from_mark"], by_pair[("a", "c")]["to_mark"]) == ("tail", "arrow")
    assert "dir" not in by_pair[("c", "d")]
    assert clusters == {"cluster_stage_1": ["a", "b"], "cluster_stage_2": ["c"]}
    assert "α 0.05" in graph["label"]


def test_dot_writes_the_same_text_to_a_file(result, tmp_path):
    text = write_dot(result, tmp_path / "g.dot")
    assert (tmp_path / "g.dot").read_text(encoding="utf-8") == text


def test_dot_unwritable_path_is_one_clear_error(result, tmp_path):
    with pytest.raises(DiscoveryError, match="cannot write the DOT file"):
        write_dot(result, tmp_path / "no such folder" / "g.dot")


AWKWARD = ["blood pressure", 'say "hi"', "größe", "日本", "back\\slash", "two\nlines",
           "a->b", "{x}", "semi;colon", "ends\\"]


@pytest.fixture(scope="module")
def awkward():
    dag = nx.DiGraph([(AWKWARD[0], AWKWARD[2]), (AWKWARD[1], AWKWARD[2]),
                      (AWKWARD[2], AWKWARD[3])] + [(AWKWARD[3], v) for v in AWKWARD[4:]])
    return discover(None, test=DSeparationOracle(dag))


def test_dot_quotes_awkward_names(awkward):
    nodes, edges, _, _ = parse_dot(write_dot(awkward))
    label = {n: esc_string(a["label"]) for n, a in nodes.items()}
    assert sorted(label.values()) == sorted(AWKWARD)
    got = {(label[u], label[v]) for u, v, _ in edges}
    assert got == {(e.source, e.target) for e in awkward.edges}


@pytest.mark.filterwarnings("ignore:.*deprecated")
def test_dot_reads_with_pydot(contested, awkward):
    pydot = pytest.importorskip("pydot")
    for res in (contested, awkward):
        (g,) = pydot.graph_from_dot_data(write_dot(res))
        edges = g.get_edges() + [e for s in g.get_subgraphs() for e in s.get_edges()]
        assert len(edges) == len(res.edges)
        nodes = [n for n in g.get_nodes() if n.get_name() not in ("node", "edge", "graph")]
        nodes += [n for s in g.get_subgraphs() for n in s.get_nodes()
                  if n.get_name() not in ("node", "edge", "graph")]
        assert len(nodes) == len(res.variables)
    kinds = {e.get("kind").strip('"') for e in
             pydot.graph_from_dot_data(write_dot(contested))[0].get_edges()}
    assert kinds == {"directed", "undirected", "contested"}


# ------------------------------------------------------------------------------ GraphML
def test_graphml_round_trips_through_networkx(contested, tmp_path):
    text = write_graphml(contested, tmp_path / "g.graphml")
    g = nx.read_graphml(tmp_path / "g.graphml")
    assert g.is_directed() and not g.is_multigraph()
    assert list(g.nodes) == list(contested.variables)
    assert g.number_of_edges() == len(contested.edges)  # one edge per adjacency
    for e in contested.edges:
        d = g.edges[e.source, e.target]
        assert (d["kind"], d["reason"], d["reason_kind"], d["tests"], d["locked"]) == \
            (e.kind, e.reason, e.reason_kind, e.tests, e.locked)
        if math.isnan(e.max_pvalue):
            assert "max_pvalue" not in d
        else:
            assert d["max_pvalue"] == e.max_pvalue
    assert g.graph["test"] == "d-separation" and g.graph["alpha"] == 0.05
    assert g.nodes["a"]["stage"] == 1 and "stage" not in g.nodes["x"]
    # xs:boolean lexical space is {true, false, 1, 0} (XML Schema Part 2, §3.2.2).
    root = ET.fromstring(text)
    ns = {"g": "http://graphml.graphdrawing.org/xmlns"}
    values = {d.text for d in root.iterfind(".//g:data[@key='e_locked']", ns)}
    assert values == {"true", "false"}


def test_graphml_keeps_awkward_names(awkward, tmp_path):
    write_graphml(awkward, tmp_path / "g.graphml")
    g = nx.read_graphml(tmp_path / "g.graphml")
    assert sorted(g.nodes) == sorted(AWKWARD)
    assert set(g.edges) == {(e.source, e.target) for e in awkward.edges}


def test_graphml_export_of_a_fully_directed_result_reads_back_as_a_dag(tmp_path):
    dag = nx.DiGraph([("a", "c"), ("b", "c"), ("c", "d")])
    res = discover(None, test=DSeparationOracle(dag))
    write_graphml(res, tmp_path / "g.graphml")
    assert set(read_graphml_dag(tmp_path / "g.graphml").edges) == set(dag.edges)


# --------------------------------------------------------------------- known diagrams in
def write(tmp_path, name, text):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def test_edge_list_reads_arrows_isolated_variables_and_weights(tmp_path):
    path = write(tmp_path, "d.csv", "From , TO,weight,note\nsmoking,tar,0.8,x\ntar,cancer,-1.5,\n"
                                    "age,,,\n")
    before = path.read_bytes()
    g = read_edge_list(path)
    assert list(g.nodes) == ["smoking", "tar", "cancer", "age"]
    assert dict(g.edges) == {("smoking", "tar"): {"weight": 0.8},
                             ("tar", "cancer"): {"weight": -1.5}}
    assert path.read_bytes() == before


def test_edge_list_semicolon_and_bom(tmp_path):
    path = tmp_path / "d.csv"
    path.write_bytes("\ufefffrom;to\nä b;c\n".encode("utf-8"))
    assert list(read_edge_list(path).edges) == [("ä b", "c")]


@pytest.mark.parametrize("text, message", [
    ("source,target\na,b\n", r"no 'from' or 'to' column"),
    ("from,dest\na,b\n", r"no 'to' column"),
    ("from,to\na,b\nc,c\n", r"line 3: self-loop 'c' -> 'c'"),
    ("from,to\na,b\nb,c\na,b\n", r"line 4: the edge 'a' -> 'b' is listed twice \(first on "
                                 r"line 2\)"),
    ("from,to\na,b\nb,c\nc,a\n", r"cycle 'a' -> 'b' -> 'c' -> 'a' \(line 2, line 3, line 4\)"),
    ("from,to\na,b\nb,a\n", r"cycle"),
    ("from,to\n,b\n", r"line 2: the 'from' cell is empty"),
    ("from,to,weight\na,b,heavy\n", r"line 2: the weight 'heavy'"),
    ("from,to,weight\na,b,nan\n", r"not a finite number"),
    ("from,to,weight\na,b,1\nb,c,\n", r"line 3: .*has no weight while others do"),
    ("", r"the file is empty"),
    ("from,to\n", r"no variables"),
])
def test_edge_list_errors_are_one_clear_line(tmp_path, text, message):
    path = write(tmp_path, "d.csv", text)
    with pytest.raises(DataValidationError, match=message) as info:
        read_edge_list(path)
    assert "\n" not in str(info.value) and str(path) in str(info.value)


def test_edge_list_missing_file(tmp_path):
    with pytest.raises(DataValidationError, match="file not found"):
        read_edge_list(tmp_path / "none.csv")


def test_graphml_dag_written_by_networkx(tmp_path):
    dag = nx.DiGraph([("u", "v"), ("v", "w")])
    dag.add_node("lonely")
    dag.edges["u", "v"]["weight"] = 0.5
    nx.write_graphml(dag, tmp_path / "d.graphml")
    g = read_graphml_dag(tmp_path / "d.graphml")
    assert set(g.nodes) == {"u", "v", "w", "lonely"} and set(g.edges) == set(dag.edges)
    assert g.edges["u", "v"]["weight"] == 0.5


def test_graphml_dag_uses_distinct_labels(tmp_path):
    g = nx.DiGraph([("n0", "n1")])
    g.nodes["n0"]["label"] = "smoking"
    g.nodes["n1"]["label"] = "cancer"
    nx.write_graphml(g, tmp_path / "d.graphml")
    assert list(read_graphml_dag(tmp_path / "d.graphml").edges) == [("smoking", "cancer")]


def _graphml(body, edgedefault="directed"):
    return ('<?xml version="1.0"?><graphml xmlns="http://graphml.graphdrawing.org/xmlns">'
            f'<graph edgedefault="{edgedefault}">{body}</graph></graphml>')


@pytest.mark.parametrize("text, message", [
    ("<graphml><graph", r"not valid XML"),
    (_graphml('<node id="a"/><node id="b"/><edge source="a" target="b"/>', "undirected"),
     r"undirected"),
    (_graphml('<node id="a"/><edge source="a" target="a"/>'), r"self-loop 'a' -> 'a'"),
    (_graphml('<node id="a"/><node id="b"/><edge source="a" target="b"/>'
              '<edge source="a" target="b"/>'), r"'a' -> 'b' is listed twice"),
    (_graphml('<node id="a"/><node id="b"/><edge source="a" target="b"/>'
              '<edge source="b" target="a"/>'), r"cycle"),
    (_graphml(""), r"no variables"),
])
def test_graphml_dag_errors(tmp_path, text, message):
    path = write(tmp_path, "d.graphml", text)
    with pytest.raises(DataValidationError, match=message) as info:
        read_graphml_dag(path)
    assert "\n" not in str(info.value)


def test_graphml_dag_refuses_undirected_edges_of_an_export(result, tmp_path):
    write_graphml(result, tmp_path / "r.graphml")
    with pytest.raises(DataValidationError, match=r"'x' — 'y' is undirected.*choose its direction"):
        read_graphml_dag(tmp_path / "r.graphml")
