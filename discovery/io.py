"""Diagram files: a result out as DOT or GraphML, a known diagram in from GraphML or CSV.

Exports
-------
:func:`write_dot` writes Graphviz DOT, an open text format that Graphviz and many editors
draw. Every edge is written ``a -> b``: a directed edge plainly, an undirected edge with
``dir=none``, a contested edge with no heads, dashed and brick red with a "?" label in its
middle (never heads at both ends, which the field reads as a bidirected edge: a hidden common
cause). Every edge also says its end marks (``from_mark``, ``to_mark``: ``tail``, ``arrow`` or
``circle``). Edgewise's own attributes (``kind``, ``reason``, ``reason_kind``, ``max_pvalue``,
``tests``, ``locked``, ``untestable``) ride along; Graphviz ignores attributes it does not
know.

:func:`write_graphml` writes GraphML, the XML graph format of the GraphML working group. The
graph is directed and every adjacency is *one* edge: its ``kind`` attribute says whether it
is directed, undirected or contested, so the file reads back edge for edge (for instance with
``networkx.read_graphml``) instead of turning an undirected edge into two arcs.

Imports
-------
:func:`read_graphml_dag` and :func:`read_edge_list` read a *known* causal diagram, for example
to simulate data from it. Both check that it is a DAG: no self-loops, no duplicate edges, no
cycles, every edge directed. Each problem is reported in one line naming the file, the place
and what to do. Input files are only read, never written.

The formats are described in docs/result-format.md.
"""

from __future__ import annotations

import csv
import io
import json
import math
import xml.etree.ElementTree as ET
from pathlib import Path

import networkx as nx

from .data import read_input_bytes
from .exceptions import DataValidationError, DiscoveryError
from .result import SearchResult

__all__ = ["write_dot", "write_graphml", "read_graphml_dag", "read_edge_list", "caption"]

#: Colours of the visual language (DESIGN.md §6), shared with :mod:`discovery.drawing`.
CANVAS = "#F7F6F3"
SLATE = "#44505C"
BRICK = "#B5482F"
TEAL = "#1F6F78"
STAGE_FILL = "#ECE9E2"

CAUTION = ("Hypotheses from data, sound only under stated assumptions (no hidden common causes, "
           "no feedback, faithfulness) — see the result file and README")
#: The caution of a result of the hidden-causes mode.
CAUTION_HIDDEN = ("Hypotheses from data; hidden common causes allowed, but no feedback or "
                  "selection bias assumed; o = an end the data cannot decide — see README")


def caution_of(result: SearchResult) -> str:
    """The caution line for ``result``'s search mode."""
    return CAUTION_HIDDEN if result.settings.hidden_causes else CAUTION

_GRAPHML_NS = "http://graphml.graphdrawing.org/xmlns"


def caption(result: SearchResult) -> str:
    """The one-line caption of an export: ``Edgewise · test fisher-z · α 0.05 · 500 rows``."""
    parts = ["Edgewise", f"test {result.settings.test}", f"α {result.settings.alpha:g}"]
    if result.settings.hidden_causes:
        parts.insert(1, "hidden causes allowed (FCI)")
    rows = result.data.get("rows")
    if rows is not None:
        parts.append(f"{rows} rows")
    return " · ".join(parts)


def _write_text(text: str, path, what: str) -> None:
    try:
        Path(path).write_text(text, encoding="utf-8")
    except OSError as err:
        raise DiscoveryError(f"{path}: cannot write the {what} ({err.strerror or err}); "
                             "check that the folder exists and is writable") from None


# ------------------------------------------------------------------------------------- DOT

def _dot_id(text: str) -> str:
    """A DOT double-quoted string whose content reads back as ``text``.

    In DOT, ``\\"`` is the only escape inside quotes; backslashes are doubled here so a name
    ending in a backslash cannot swallow the closing quote, and newlines are written ``\\n``.
    """
    return '"' + (text.replace("\\", "\\\\").replace('"', '\\"')
                  .replace("\r", "\\r").replace("\n", "\\n")) + '"'


def _dot_attrs(attrs: dict) -> str:
    out = []
    for key, value in attrs.items():
        if isinstance(value, bool):
            value = "true" if value else "false"
        elif isinstance(value, float):  # quoted: DOT numerals have no exponent (9e-22)
            value = _dot_id(repr(value))
        elif isinstance(value, int):
            value = str(value)
        else:
            value = _dot_id(str(value))
        out.append(f"{key}={value}")
    return "[" + ", ".join(out) + "]"


_DOT_STYLE = {
    "directed": {"arrowhead": "normal"},
    "undirected": {"dir": "none"},
    "contested": {"dir": "none", "style": "dashed", "color": BRICK, "label": "?",
                  "fontcolor": BRICK, "fontname": "DejaVu Sans Bold"},
    # the hidden-causes mode: a circle end is an open ring ("odot"), a bidirected edge has
    # filled heads at both ends
    "bidirected": {"dir": "both", "arrowhead": "normal", "arrowtail": "normal"},
    "partially-directed": {"dir": "both", "arrowhead": "normal", "arrowtail": "odot"},
    "nondirected": {"dir": "both", "arrowhead": "odot", "arrowtail": "odot"},
    "partially-undirected": {"dir": "both", "arrowhead": "none", "arrowtail": "odot"},
}


def write_dot(result: SearchResult, path=None) -> str:
    """The result as Graphviz DOT text; also written to ``path`` (UTF-8) when given.

    Parameters
    ----------
    result : SearchResult
    path : str or os.PathLike, optional

    Returns
    -------
    str
        A ``digraph``: one node per variable (``label`` is the exact name), stages as
        ``cluster_stage_<k>`` subgraphs, one ``a -> b`` line per edge with ``kind``,
        ``reason``, ``reason_kind``, ``max_pvalue`` (left out when no test ran), ``tests``
        ``locked``, ``from_mark`` / ``to_mark`` and, for an untestable pair, ``untestable``
        (the reason). Undirected edges have ``dir=none``; contested edges ``dir=none,
        style=dashed, color="#B5482F", label="?"`` (no heads: see the module docstring).

    Raises
    ------
    DiscoveryError
        If ``path`` cannot be written.

    Examples
    --------
    >>> import networkx as nx
    >>> from discovery import discover, DSeparationOracle
    >>> r = discover(None, test=DSeparationOracle(nx.DiGraph([("a", "c"), ("b", "c")])))
    >>> [line.split(" [")[0].strip() for line in write_dot(r).splitlines() if "->" in line]
    ['"a" -> "c"', '"b" -> "c"']
    """
    lines = [f"// {caption(result)}",
             f"// {caution_of(result)}.",
             "digraph edgewise {",
             "  graph " + _dot_attrs({"bgcolor": CANVAS, "rankdir": "LR", "labelloc": "b",
                                      "fontname": "DejaVu Sans", "fontsize": 9,
                                      "fontcolor": SLATE, "label": caption(result)}) + ";",
             "  node [shape=box, style=\"rounded,filled\", fillcolor=\"#FFFFFF\", "
             f"color=\"{SLATE}\", fontcolor=\"{SLATE}\", fontname=\"DejaVu Sans\"];",
             f"  edge [color=\"{SLATE}\"];"]
    staged = set()
    for k, group in enumerate(result.knowledge.stages, 1):
        members = [v for v in group if v in result.variables]
        if not members:
            continue
        lines.append(f"  subgraph {_dot_id(f'cluster_stage_{k}')} {{")
        lines.append("    graph " + _dot_attrs({"label": f"stage {k}", "style": "rounded,filled",
                                                   "color": STAGE_FILL,
                                                   "fillcolor": STAGE_FILL}) + ";")
        for v in members:
            lines.append(f"    {_dot_id(v)} {_dot_attrs({'label': v})};")
            staged.add(v)
        lines.append("  }")
    for v in result.variables:
        if v not in staged:
            lines.append(f"  {_dot_id(v)} {_dot_attrs({'label': v})};")
    for e in result.edges:
        attrs = dict(_DOT_STYLE[e.kind])
        attrs.update(kind=e.kind, reason=e.reason, reason_kind=e.reason_kind)
        attrs.update(from_mark=e.from_mark, to_mark=e.to_mark)  # the ends, for any reader
        if not math.isnan(e.max_pvalue):
            attrs["max_pvalue"] = float(e.max_pvalue)
        attrs.update(tests=int(e.tests), locked=bool(e.locked), from_mark=e.from_mark,
                     to_mark=e.to_mark,
                     tooltip=e.arrow() + (f": {e.reason}" if e.reason else ""))
        if e.untestable:
            attrs["untestable"] = e.untestable
        lines.append(f"  {_dot_id(e.source)} -> {_dot_id(e.target)} {_dot_attrs(attrs)};")
    lines.append("}")
    text = "\n".join(lines) + "\n"
    if path is not None:
        _write_text(text, path, "DOT file")
    return text


# --------------------------------------------------------------------------------- GraphML

# (id, for, attr.name, attr.type)
_GRAPH_KEYS = [("g_format", "graph", "format", "string"),
               ("g_test", "graph", "test", "string"),
               ("g_alpha", "graph", "alpha", "double"),
               ("g_rows", "graph", "rows", "int"),
               ("g_knowledge", "graph", "knowledge", "string"),
               ("g_caution", "graph", "caution", "string"),
               ("n_label", "node", "label", "string"),
               ("n_stage", "node", "stage", "int"),
               ("e_kind", "edge", "kind", "string"),
               ("e_from_mark", "edge", "from_mark", "string"),
               ("e_to_mark", "edge", "to_mark", "string"),
               ("e_reason", "edge", "reason", "string"),
               ("e_reason_kind", "edge", "reason_kind", "string"),
               ("e_max_pvalue", "edge", "max_pvalue", "double"),
               ("e_tests", "edge", "tests", "int"),
               ("e_locked", "edge", "locked", "boolean"),
               ("e_from_mark", "edge", "from_mark", "string"),
               ("e_to_mark", "edge", "to_mark", "string"),
               ("e_untestable", "edge", "untestable", "string")]


def write_graphml(result: SearchResult, path=None) -> str:
    """The result as GraphML text; also written to ``path`` (UTF-8) when given.

    The graph is directed and holds one edge per adjacency, whatever its kind, so that the
    file reads back edge for edge. Edge data: ``kind`` (directed, undirected, contested),
    ``reason``, ``reason_kind``, ``max_pvalue`` (double; left out when no test ran, since
    GraphML has no portable NaN), ``tests`` (int), ``locked`` (boolean), ``from_mark`` and
    ``to_mark`` (``tail``, ``arrow`` or ``circle``) and ``untestable`` (the reason, only for
    a pair whose test returned no p-value). Node data:
    ``label`` (the name) and ``stage`` (1-based, only for variables in a stage). Graph data:
    ``format`` (``edgewise-graph``), ``test``, ``alpha``, ``rows`` (when known), ``knowledge``
    (the knowledge as JSON text) and ``caution``.

    Parameters
    ----------
    result : SearchResult
    path : str or os.PathLike, optional

    Returns
    -------
    str

    Raises
    ------
    DiscoveryError
        If ``path`` cannot be written.

    Notes
    -----
    The XML is built with the standard library rather than ``networkx.write_graphml`` so
    that booleans are written ``true``/``false`` as the GraphML schema's ``xs:boolean``
    requires; the file is checked against ``networkx.read_graphml`` in the tests.
    """
    ET.register_namespace("", _GRAPHML_NS)
    root = ET.Element(f"{{{_GRAPHML_NS}}}graphml")
    types = {}
    for key_id, scope, name, kind in _GRAPH_KEYS:
        ET.SubElement(root, f"{{{_GRAPHML_NS}}}key",
                      {"id": key_id, "for": scope, "attr.name": name, "attr.type": kind})
        types[key_id] = kind
    graph = ET.SubElement(root, f"{{{_GRAPHML_NS}}}graph",
                          {"id": "edgewise", "edgedefault": "directed"})

    def data(parent, key_id, value):
        if value is None or (isinstance(value, float) and math.isnan(value)):
            return
        kind = types[key_id]
        if kind == "boolean":
            text = "true" if value else "false"
        elif kind == "double":
            text = repr(float(value))
        else:
            text = str(value)
        ET.SubElement(parent, f"{{{_GRAPHML_NS}}}data", {"key": key_id}).text = text

    data(graph, "g_format", "edgewise-graph")
    data(graph, "g_test", result.settings.test)
    data(graph, "g_alpha", result.settings.alpha)
    data(graph, "g_rows", result.data.get("rows"))
    data(graph, "g_knowledge", json.dumps(result.knowledge.to_dict(), ensure_ascii=False))
    data(graph, "g_caution", caution_of(result) + ". " + " ".join(result.assumptions()))
    for v in result.variables:
        node = ET.SubElement(graph, f"{{{_GRAPHML_NS}}}node", {"id": v})
        data(node, "n_label", v)
        stage = result.knowledge.stage_of(v)
        data(node, "n_stage", None if stage is None else stage + 1)
    for i, e in enumerate(result.edges):
        edge = ET.SubElement(graph, f"{{{_GRAPHML_NS}}}edge",
                             {"id": f"e{i}", "source": e.source, "target": e.target})
        data(edge, "e_kind", e.kind)
        data(edge, "e_from_mark", e.from_mark)
        data(edge, "e_to_mark", e.to_mark)
        data(edge, "e_reason", e.reason)
        data(edge, "e_reason_kind", e.reason_kind)
        data(edge, "e_max_pvalue", float(e.max_pvalue))
        data(edge, "e_tests", int(e.tests))
        data(edge, "e_locked", bool(e.locked))
        data(edge, "e_from_mark", e.from_mark)
        data(edge, "e_to_mark", e.to_mark)
        data(edge, "e_untestable", e.untestable or None)
    ET.indent(root, space="  ")
    text = ("<?xml version='1.0' encoding='utf-8'?>\n"
            + ET.tostring(root, encoding="unicode") + "\n")
    if path is not None:
        _write_text(text, path, "GraphML file")
    return text


# ----------------------------------------------------------------------- known diagrams in

def _fail(label: str, message: str) -> DataValidationError:
    return DataValidationError(f"{label}: {message}")


def _read_text(path, label: str) -> str:
    raw = read_input_bytes(path, label, what="the diagram file", allow_empty=True)
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as err:
        raise _fail(label, f"is not UTF-8 text (byte {err.start}); save it as UTF-8 "
                           "and try again") from None


def _check_dag(g: nx.DiGraph, label: str, *, where=None) -> nx.DiGraph:
    """Raise DataValidationError on an empty graph or a cycle; ``where`` maps edges to
    a place in the file (``line 4``)."""
    if g.number_of_nodes() == 0:
        raise _fail(label, "the diagram has no variables; list at least one edge")
    try:
        cycle = nx.find_cycle(g)
    except nx.NetworkXNoCycle:
        return g
    path = " -> ".join([repr(cycle[0][0])] + [repr(v) for _, v in cycle])
    places = ""
    if where:
        places = " (" + ", ".join(where[(u, v)] for u, v in cycle) + ")"
    raise _fail(label, f"the diagram has a cycle {path}{places}; a causal diagram must be "
                       "acyclic, so remove or reverse one of these edges")


def read_edge_list(path) -> nx.DiGraph:
    """Read a known causal diagram from a CSV edge list with columns ``from`` and ``to``.

    Each row is one arrow ``from -> to``. A row with an empty ``to`` declares a variable with
    no edges. An optional ``weight`` column gives each arrow's coefficient for simulation
    (stored as the edge attribute ``weight``). Column names are matched ignoring case and
    surrounding spaces; other columns are ignored. The separator (comma, semicolon or tab) is
    taken from the header line.

    Parameters
    ----------
    path : str or os.PathLike

    Returns
    -------
    networkx.DiGraph
        Nodes in order of first appearance.

    Raises
    ------
    DataValidationError
        The file is missing, unreadable or not UTF-8; it has no ``from`` or ``to`` column;
        a row lacks a name; a row is a self-loop; an edge is listed twice; a weight is not a
        finite number; or the edges form a cycle. The message names the line.

    Examples
    --------
    A file holding::

        from,to
        smoking,tar
        tar,cancer

    reads as ``DiGraph([("smoking", "tar"), ("tar", "cancer")])``.
    """
    label = str(path)
    text = _read_text(path, label)
    if not text.strip():
        raise _fail(label, "the file is empty; write a header 'from,to' and one row per "
                           "arrow")
    header = text.splitlines()[0]
    delimiter = max([",", ";", "\t"], key=header.count)
    # strict: an unterminated quote is an error, not a name that swallows the following rows
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter, strict=True)
    try:
        columns = [c.strip().lower() for c in next(reader)]
    except csv.Error as err:
        raise _fail(label, f"line 1: not valid CSV ({err})") from None
    missing = [c for c in ("from", "to") if c not in columns]
    if missing:
        raise _fail(label, f"no {' or '.join(repr(c) for c in missing)} column (the header "
                           f"is {header.strip()!r}); the first line must name the columns "
                           "'from' and 'to', one row per arrow")
    if len({c for c in columns if c in ("from", "to", "weight")}) != \
            sum(c in ("from", "to", "weight") for c in columns):
        raise _fail(label, "line 1: a column 'from', 'to' or 'weight' appears twice; keep one")
    i_from, i_to = columns.index("from"), columns.index("to")
    i_weight = columns.index("weight") if "weight" in columns else None
    g = nx.DiGraph()
    where: dict[tuple[str, str], str] = {}
    try:
        for row in reader:
            line = f"line {reader.line_num}"
            if not row or all(not c.strip() for c in row):
                continue
            cells = row + [""] * (len(columns) - len(row))
            a, b = cells[i_from].strip(), cells[i_to].strip()
            if any(ch in a + b for ch in "\r\n"):
                raise _fail(label, f"{line}: a name runs over a line end (a quote is not "
                                   "closed); close the quote or remove it")
            if not a:
                raise _fail(label, f"{line}: the 'from' cell is empty; every row needs a "
                                   "'from' variable")
            g.add_node(a)
            if not b:
                continue
            if a == b:
                raise _fail(label, f"{line}: self-loop {a!r} -> {a!r}; a variable cannot "
                                   "cause itself, remove the row")
            if g.has_edge(a, b):
                raise _fail(label, f"{line}: the edge {a!r} -> {b!r} is listed twice (first "
                                   f"on {where[(a, b)]}); remove one row")
            attrs = {}
            if i_weight is not None and cells[i_weight].strip():
                raw = cells[i_weight].strip()
                try:
                    weight = float(raw)
                except ValueError:
                    weight = math.nan
                if not math.isfinite(weight):
                    raise _fail(label, f"{line}: the weight {raw!r} of {a!r} -> {b!r} is not a "
                                       "finite number; write a number such as 0.8")
                attrs["weight"] = weight
            g.add_edge(a, b, **attrs)
            where[(a, b)] = line
    except csv.Error as err:
        raise _fail(label, f"line {reader.line_num}: not valid CSV ({err}); check the "
                           "quotes") from None
    if i_weight is not None:
        unweighted = [(u, v) for u, v, w in g.edges(data="weight") if w is None]
        if unweighted and len(unweighted) < g.number_of_edges():
            u, v = unweighted[0]
            raise _fail(label, f"{where[(u, v)]}: the edge {u!r} -> {v!r} has no weight while "
                               "others do; give every edge a weight or none")
    return _check_dag(g, label, where=where)


def read_graphml_dag(path) -> nx.DiGraph:
    """Read a known causal diagram from a GraphML file.

    The graph must be directed and acyclic, with at most one edge per ordered pair and no
    self-loops. Node ids become variable names, unless every node carries a distinct
    non-empty ``label`` attribute (as written by Gephi-like editors), which is then used. A
    file written by :func:`write_graphml` reads back when every edge's ``kind`` is
    ``directed``; undirected or contested edges must first be given a direction. Edge
    attributes (such as ``weight``) are kept.

    Parameters
    ----------
    path : str or os.PathLike

    Returns
    -------
    networkx.DiGraph

    Raises
    ------
    DataValidationError
        The file is missing, unreadable, not GraphML, undirected, empty; an edge is a
        self-loop, listed twice, not directed (``kind`` other than ``directed``), or the
        edges form a cycle.
    """
    label = str(path)
    text = _read_text(path, label)
    try:
        g = nx.parse_graphml(text)
    except ET.ParseError as err:
        raise _fail(label, f"not valid XML ({err}); is this a GraphML file?") from None
    except (nx.NetworkXError, ValueError, KeyError, TypeError) as err:
        raise _fail(label, f"not a GraphML graph networkx can read ({err}); export the "
                           "diagram as plain GraphML or as a CSV edge list (from,to)") from None
    if not g.is_directed():
        raise _fail(label, "the graph is undirected (edgedefault=\"undirected\"); a causal "
                           "diagram needs arrows: export it as a directed graph")
    if g.is_multigraph():
        seen = set()
        for u, v in g.edges():
            if (u, v) in seen:
                raise _fail(label, f"the edge {u!r} -> {v!r} is listed twice; remove one")
            seen.add((u, v))
        g = nx.DiGraph(g)
    g.graph.clear()
    labels = {v: d.get("label") for v, d in g.nodes(data=True)}
    names = [str(x).strip() if x is not None else "" for x in labels.values()]
    if all(names) and len(set(names)) == len(names):
        g = nx.relabel_nodes(g, dict(zip(labels, names)), copy=True)
    else:
        g = nx.relabel_nodes(g, {v: str(v) for v in g.nodes}, copy=True)
    for u, v, d in g.edges(data=True):
        if u == v:
            raise _fail(label, f"self-loop {u!r} -> {u!r}; a variable cannot cause itself, "
                               "remove that edge")
        kind = d.get("kind", "directed")
        if kind != "directed":
            raise _fail(label, f"the edge {u!r} — {v!r} is {kind}; a known diagram must "
                               "have every edge directed, so choose its direction (set its "
                               "kind to 'directed')")
    return _check_dag(g, label)
