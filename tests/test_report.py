"""The report (HTML and PDF), notebook reprs, and the keyed evidence rows of the JSON.

Outside references: Python's html.parser reads the report (every tag closed in order, no
external ``src``/``href``); the data: URI scheme (RFC 2397) and base64 (RFC 4648) carry the
images, and each embedded SVG parses as XML (xml.etree); a PDF file starts with ``%PDF-``
(ISO 32000-1, 7.5.2). The sweep, support and controls files are built here by hand from
their documented shapes, with extra keys a reader must tolerate.
"""

import base64
import json
import shlex
import xml.etree.ElementTree as ET
from html.parser import HTMLParser
from pathlib import Path

import networkx as nx
import pytest

from discovery import ASSUMPTIONS, DSeparationOracle, discover, load_result, read_knowledge, \
    read_table
from discovery.cli import main
from discovery.report import ReportError, build_report, read_analysis, write_report

ROOT = Path(__file__).resolve().parent.parent
GREENHOUSE = ROOT / "example_sets" / "greenhouse"


class _Collect(HTMLParser):
    VOID = {"meta", "img", "br", "hr", "link", "input"}

    def __init__(self):
        super().__init__()
        self.stack, self.images, self.links, self.text, self.ids = [], [], [], [], {}
        self._id = None

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if tag == "img":
            self.images.append(attrs.get("src", ""))
        for key in ("src", "href"):
            if key in attrs and tag != "img":
                self.links.append(attrs[key])
        if tag not in self.VOID:
            self.stack.append(tag)
        self._id = attrs.get("id")

    def handle_endtag(self, tag):
        assert self.stack and self.stack[-1] == tag, f"</{tag}> closes <{self.stack[-1:]}>"
        self.stack.pop()

    def handle_data(self, data):
        self.text.append(data)
        if self._id:
            self.ids[self._id] = self.ids.get(self._id, "") + data


def parse(text):
    p = _Collect()
    p.feed(text)
    p.close()
    assert p.stack == []
    return p


SWEEP = {"format": "edgewise-sweep", "version": 1, "parameter": "alpha",
         "alphas": [0.001, 0.01, 0.05, 0.1], "margins": None,
         "edges": [{"a": "heating", "b": "outside_temp", "present": [True, True, True, True],
                    "marks": ["—", "—", "—", "—"], "survival": [[0.001, 0.1]]},
                   {"a": "co2", "b": "leaf_area", "present": [False, True, True, False],
                    "marks": [None, "?–", "→", None], "survival": [[0.01, 0.05]]}],
         "results": [], "cautions": ["A sweep runs many searches on the same data."],
         "a_key_from_a_newer_version": {"x": 1}}
SUPPORT = {"format": "edgewise-support", "version": 1, "method": "bootstrap", "resamples": 50,
           "seed": 3, "cutoff": 0.6,
           "pairs": [{"a": "heating", "b": "outside_temp", "adjacent": 1.0, "a_to_b": 0.1,
                      "b_to_a": 0.5, "undirected": 0.4, "contested": 0.0},
                     {"a": "co2", "b": "leaf_area", "adjacent": 0.7, "a_to_b": 0.5,
                      "b_to_a": 0.0, "undirected": 0.1, "contested": 0.1, "extra": "ok"}],
           "consensus": {"edges": [{"from": "outside_temp", "to": "heating",
                                    "kind": "directed"}]},
           "false_edges_bound": 1.5, "cautions": ["Support is not a probability of truth."]}
CONTROLS = {"format": "edgewise-controls", "version": 1, "treatment": "humidity",
            "outcome": "fruit_yield", "amenable": True, "breaking_path": None,
            "canonical": ["irrigation", "vent_opening"], "optimal": ["fungal_spots"],
            "minimal": [["irrigation", "vent_opening"]], "minimal_bound": 10,
            "check": {"set": ["co2"], "valid": False, "reason": "opens a path"},
            "effects": {"effects": [{"parents": ["irrigation"], "estimate": -0.2, "se": 0.02},
                                    {"parents": [], "estimate": -0.25, "se": 0.03}],
                        "min": -0.25, "max": -0.2, "share_zero": 0.0},
            "cautions": ["Effects assume a linear model."]}


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    folder = tmp_path_factory.mktemp("report")
    paths = {}
    for name, doc in (("sweep", SWEEP), ("support", SUPPORT), ("controls", CONTROLS)):
        paths[name] = folder / f"{name}.json"
        paths[name].write_text(json.dumps(doc), encoding="utf-8")
    return folder, paths


def test_report_command_writes_a_self_contained_html(files, tmp_path, monkeypatch):
    folder, paths = files
    monkeypatch.chdir(ROOT)  # the result records its data path relative to the run folder
    result = tmp_path / "r.json"
    assert main(["discover", "example_sets/greenhouse/data.csv", "--knowledge",
                 "example_sets/greenhouse/knowledge.toml", "--collider-rule", "conservative",
                 "--out", str(result), "--quiet"]) == 0
    out = tmp_path / "r.html"
    assert main(["report", str(result), "--sweep", str(paths["sweep"]), "--support",
                 str(paths["support"]), "--controls", str(paths["controls"]),
                 "--out", str(out)]) == 0
    page = parse(out.read_text(encoding="utf-8"))
    # diagram, survival, support and effect charts, each an embedded SVG
    assert len(page.images) == 4
    for src in page.images:
        assert src.startswith("data:image/svg+xml;base64,")
        ET.fromstring(base64.b64decode(src.split(",", 1)[1]))
    assert not [u for u in page.links if not u.startswith("#")]  # no external fetches
    text = " ".join(" ".join(page.text).split())
    for a in ASSUMPTIONS:
        assert " ".join(a.split()) in text
    for caution in ("Support is not a probability of truth.", "Effects assume a linear model.",
                    "A sweep runs many searches on the same data."):
        assert caution in text
    r = load_result(result)
    for removal in r.removed:  # every removed pair with its separating set
        assert f"{removal.a} — {removal.b}" in text
    assert r.data["sha256"] in text and "fungal_spots" in text
    assert "Unshielded triples" in text and "non-collider" in text

    # the reproduce command, run again, gives the same edges
    command = shlex.split(page.ids["reproduce"])
    assert command[:2] == ["edgewise", "discover"]
    again = tmp_path / "again.json"
    command[command.index("--out") + 1] = str(again)
    assert main(command[1:]) == 0
    first, second = load_result(result), load_result(again)
    assert [e.to_dict() for e in first.edges] == [e.to_dict() for e in second.edges]
    assert first.knowledge == second.knowledge


def test_report_pdf_and_a_diagram_drawn_elsewhere(tmp_path):
    (tmp_path / "d.dot").write_text("digraph { a -> b; c -> b; b -> d }", encoding="utf-8")
    assert main(["report", str(tmp_path / "d.dot"), "--out", str(tmp_path / "d.pdf")]) == 0
    assert (tmp_path / "d.pdf").read_bytes()[:5] == b"%PDF-"
    assert main(["report", str(tmp_path / "d.dot"), "--out", str(tmp_path / "d.html")]) == 0
    page = parse((tmp_path / "d.html").read_text(encoding="utf-8"))
    assert "no search produced it" in " ".join(page.text)


def test_report_of_a_result_without_knowledge_reproduces(tmp_path, monkeypatch):
    monkeypatch.chdir(ROOT)
    data = read_table("example_sets/greenhouse/data.csv", columns=["outside_temp", "heating",
                                                                    "air_temp", "sunlight"])
    r = discover(data, alpha=0.01)
    report = build_report(r)
    assert "--knowledge" not in report.command and "--columns" in report.command
    write_report(report, tmp_path / "r.pdf")
    args = shlex.split(report.command)[1:]
    args[args.index("--out") + 1] = str(tmp_path / "again.json")
    assert main(args) == 0
    assert [e.to_dict() for e in load_result(tmp_path / "again.json").edges] == \
        [e.to_dict() for e in r.edges]


def test_bad_report_inputs(files, tmp_path, capsys):
    folder, paths = files
    with pytest.raises(ReportError, match="'format' is 'edgewise-support', not 'edgewise-sweep'"):
        read_analysis(paths["support"], "sweep")
    (tmp_path / "half.json").write_text('{"format": "edgewise-controls"}', encoding="utf-8")
    with pytest.raises(ReportError, match=r"missing key\(s\) \['treatment', 'outcome'\]"):
        read_analysis(tmp_path / "half.json", "controls")
    with pytest.raises(ReportError, match="file not found"):
        read_analysis(tmp_path / "none.json", "support")
    (tmp_path / "bad.json").write_text("{", encoding="utf-8")
    with pytest.raises(ReportError, match="not a readable JSON file"):
        read_analysis(tmp_path / "bad.json", "sweep")
    r = discover(None, test=DSeparationOracle(nx.DiGraph([("a", "b")])))
    with pytest.raises(ReportError, match="written as .html or .pdf"):
        write_report(build_report(r), tmp_path / "r.docx")
    (tmp_path / "a file").write_text("", encoding="utf-8")
    with pytest.raises(ReportError, match="cannot write the report"):
        write_report(build_report(r), tmp_path / "a file" / "r.html")
    r.to_json(tmp_path / "r.json")
    assert main(["report", str(tmp_path / "r.json"), "--sweep", str(paths["support"]),
                 "--out", str(tmp_path / "x.html")]) == 2
    assert "edgewise report: error: --sweep" in capsys.readouterr().err
    assert not (tmp_path / "x.html").exists()  # no partial output
    assert main(["report", str(tmp_path / "r.json"), "--out", str(tmp_path / "r.json")]) == 2


def test_notebook_reprs_and_keyed_evidence_rows(tmp_path):
    dag = nx.DiGraph([("a", "c"), ("b", "c")])
    r = discover(None, test=DSeparationOracle(dag))
    svg = r._repr_svg_()
    assert ET.fromstring(svg).tag.endswith("svg")
    html = r._repr_html_()
    parse(html)
    assert "a → c" in html and ASSUMPTIONS[0][:40] in html
    ev = r.evidence("a", "b")
    page = parse(ev._repr_html_())
    assert "removed: independent given {}" in " ".join(page.text)
    assert str(ev) == repr(ev) == ev.as_text()  # readable in a console too
    assert repr(r.summary()) == r.summary().as_text()
    parse(r.summary()._repr_html_())
    doc = r.to_dict()
    rows = doc["evidence"]["tests"]
    assert rows and set(rows[0]) == {"x", "y", "given", "pvalue"}
    # files written before the rows had keys still read
    doc["evidence"]["tests"] = [[t["x"], t["y"], t["given"], t["pvalue"]] for t in rows]
    (tmp_path / "old.json").write_text(json.dumps(doc), encoding="utf-8")
    assert list(load_result(tmp_path / "old.json").tests) == list(r.tests)


def test_knowledge_reads_back_from_a_result_file(tmp_path):
    k = read_knowledge(GREENHOUSE / "knowledge.toml")
    r = discover(read_table(GREENHOUSE / "data.csv"), knowledge=k)
    r.to_json(tmp_path / "r.json")
    assert read_knowledge(tmp_path / "r.json") == k
