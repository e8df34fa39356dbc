"""Diagrams in and out of Edgewise: read any diagram, compare two, lock one as knowledge.

A diagram is a set of *edges*, and each edge has a *mark* at each end: ``tail``, ``arrow``
or ``circle``. A directed edge ``a → b`` is tail/arrow, an undirected edge ``a — b``
tail/tail; the hidden-causes search adds circle ends and arrow/arrow. Edgewise's own kind
``contested`` (colliders tried to orient the pair both ways) has no marks of its own and
travels as an explicit ``kind`` attribute.

Formats
-------
``.json``
    The result JSON (:func:`discovery.load_result`).
``.dot`` / ``.gv``
    Graphviz DOT, parsed with pydot. An edge's ``kind`` (or ``from_mark`` / ``to_mark``)
    attribute wins when present, as in files Edgewise writes; otherwise the marks come from
    the drawing attributes: ``dir=none`` or an undirected ``graph`` gives tails, ``dir=both``
    arrows at both ends, ``dir=back`` a reversed arrow, and an ``odot``/``dot``-style head a
    circle.
``.graphml``
    GraphML, parsed with networkx. ``kind`` or ``from_mark`` / ``to_mark`` edge data win; an
    undirected graph gives undirected edges; in a directed graph two opposite arcs without
    attributes are one undirected edge (networkx's and Edgewise's convention).
``.csv``
    An edge list with columns ``from`` and ``to`` and, optionally, ``kind`` or
    ``from_mark`` / ``to_mark`` (as written by :func:`write_edge_csv`). Without them every row
    is an arrow ``from → to``.

:func:`read_diagram` returns a :class:`~discovery.SearchResult` with no evidence, so
everything that takes a result (drawing, comparison, reports, control sets) takes a diagram
drawn elsewhere. :func:`compare` lists edge-by-edge differences and the structural Hamming
distance (Tsamardinos, Brown & Aliferis 2006), :func:`knowledge_from_diagram` turns a diagram
into knowledge that locks its edges, and :func:`write_edge_csv` writes an edge list that is
safe to open in a spreadsheet (no cell starts with ``=``, ``+``, ``-`` or ``@``, which
spreadsheet programs would run as a formula).

References
----------
.. [1] Tsamardinos, I., Brown, L. E. & Aliferis, C. F. (2006). The max-min hill-climbing
   Bayesian network structure learning algorithm. *Machine Learning* 65, 31–78.
"""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass
from pathlib import Path

import networkx as nx

from .exceptions import DataValidationError, DiscoveryError
from .knowledge import Knowledge
from .result import ASSUMPTIONS, EDGE_KINDS, Edge, SearchResult, TestLog, load_result
from .settings import SearchSettings

__all__ = ["read_diagram", "read_dot", "read_graphml", "read_edge_csv", "write_edge_csv",
           "edge_csv_text", "diagram_result", "compare", "Comparison", "knowledge_from_diagram",
           "spreadsheet_safe", "merge_knowledge", "DIAGRAM_SUFFIXES"]

#: The file endings :func:`read_diagram` understands.
DIAGRAM_SUFFIXES = (".json", ".dot", ".gv", ".graphml", ".csv")

MARKS = ("tail", "arrow", "circle")

#: Marks (at the first, at the second end) -> edge kind. Ends the other way round are turned.
_KIND_OF_MARKS = {("tail", "arrow"): "directed", ("tail", "tail"): "undirected",
                  ("arrow", "arrow"): "bidirected", ("circle", "arrow"): "partially-directed",
                  ("circle", "circle"): "nondirected", ("circle", "tail"): "partially-undirected"}

#: The marks of each kind, for kinds whose marks are fixed.
MARKS_OF_KIND = {kind: marks for marks, kind in _KIND_OF_MARKS.items()}
MARKS_OF_KIND["contested"] = ("tail", "tail")

_CSV_COLUMNS = ("from", "to", "kind", "from_mark", "to_mark", "reason", "reason_kind",
                "max_pvalue", "tests", "locked")


def _fail(label, message) -> DataValidationError:
    return DataValidationError(f"{label}: {message}")


# --------------------------------------------------------------------------------- edges

def _edge(a: str, b: str, marks, kind, label, where="") -> tuple[str, str, str]:
    """``(source, target, kind)`` in Edgewise's orientation, from marks or an explicit kind."""
    if kind:
        kind = str(kind).strip().lower()
        if kind not in EDGE_KINDS:
            raise _fail(label, f"{where}the edge {a!r} — {b!r} has kind {kind!r}; this Edgewise "
                               f"reads {', '.join(EDGE_KINDS)}")
        if kind in ("undirected", "contested", "nondirected", "bidirected"):
            a, b = sorted((a, b))
        return a, b, kind
    first, second = marks
    for m in (first, second):
        if m not in MARKS:
            raise _fail(label, f"{where}the edge {a!r} — {b!r} has the end mark {m!r}; use "
                               "tail, arrow or circle")
    if (first, second) not in _KIND_OF_MARKS:
        a, b, first, second = b, a, second, first
    kind = _KIND_OF_MARKS[(first, second)]
    if kind not in EDGE_KINDS:
        raise _fail(label, f"{where}the edge {a!r} — {b!r} has ends {first}/{second} ({kind}), "
                           "which only a hidden-causes result holds; this Edgewise reads "
                           f"{', '.join(EDGE_KINDS)}")
    if first == second:
        a, b = sorted((a, b))
    return a, b, kind


def diagram_result(variables, edges, *, source: str = "diagram") -> SearchResult:
    """A result holding a diagram that no search produced (no tests, no separating sets).

    Parameters
    ----------
    variables : iterable of str
    edges : iterable of (source, target, kind)
    source : str
        Where the diagram came from, kept in ``result.data["source"]`` and in a note.

    Raises
    ------
    DataValidationError
        An edge names an unknown variable, is a self-loop, or two edges join one pair.
    """
    names = list(dict.fromkeys(str(v) for v in variables))
    known = set(names)
    seen, out = set(), []
    for a, b, kind in edges:
        if a not in known or b not in known:
            raise _fail(source, f"the edge {a!r} — {b!r} names a variable that is not in the "
                                "diagram")
        if a == b:
            raise _fail(source, f"self-loop {a!r} — {a!r}; a variable cannot cause itself, "
                                "remove that edge")
        pair = frozenset((a, b))
        if pair in seen:
            x, y = sorted((a, b))
            raise _fail(source, f"the pair {x!r} — {y!r} has two edges; keep one")
        seen.add(pair)
        out.append(Edge(a, b, kind, reason="drawn in the diagram" if kind != "undirected"
                        else "", reason_kind="diagram" if kind != "undirected" else ""))
    out.sort(key=lambda e: (e.source, e.target))
    kinds = [e.kind for e in out]
    counts = {"edges": len(out), "removed": len(names) * (len(names) - 1) // 2 - len(out),
              "tests": 0}
    counts.update({k: kinds.count(k) for k in EDGE_KINDS})
    return SearchResult(
        variables=tuple(names), settings=SearchSettings(test="diagram"), knowledge=Knowledge(),
        edges=tuple(out), removed=(), tests=TestLog.from_rows(()),
        notes=(f"This diagram was read from {source}; no search produced it, so it carries no "
               "evidence (no tests, p-values or separating sets).",),
        counts=counts, data={"source": source, "diagram": True})


# ------------------------------------------------------------------------------------ DOT

def _dot_value(value):
    if value is None:
        return None
    text = str(value)
    if len(text) >= 2 and text[0] == text[-1] == '"':
        text = text[1:-1].replace('\\"', '"').replace("\\\\", "\\")
    return text


def _dot_mark(arrow_name: str | None, default: str) -> str:
    if arrow_name is None:
        return default
    name = arrow_name.strip().lower()
    if name in ("none", ""):
        return "tail"
    if name.endswith("dot"):  # dot, odot, ldot...
        return "circle"
    return "arrow"


def _dot_edge_marks(attrs: dict, directed: bool) -> tuple[str, str]:
    direction = (attrs.get("dir") or ("forward" if directed else "none")).lower()
    head = attrs.get("arrowhead")
    tail = attrs.get("arrowtail")
    if direction == "forward":
        return "tail", _dot_mark(head, "arrow")
    if direction == "back":
        return _dot_mark(tail, "arrow"), "tail"
    if direction == "both":
        return _dot_mark(tail, "arrow"), _dot_mark(head, "arrow")
    return "tail", "tail"


def _pydot_graphs(text: str, label: str):
    import pydot
    try:
        graphs = pydot.graph_from_dot_data(text)
    except Exception as err:  # pydot raises its parser's own exceptions
        raise _fail(label, f"not a DOT file pydot can read ({type(err).__name__}); check "
                           "the braces and quotes") from None
    if not graphs:
        raise _fail(label, "not a DOT file pydot can read; it must hold one 'digraph { ... }' "
                           "or 'graph { ... }'")
    return graphs


def read_dot(path) -> SearchResult:
    """Read a diagram from a Graphviz DOT file (parsed with pydot).

    Raises
    ------
    DataValidationError
        The file is missing, unreadable or not DOT; an edge has an unknown kind or end mark;
        a pair has two edges; an edge is a self-loop.
    """
    label = str(path)
    text = _read(path, label)
    graph = _pydot_graphs(text, label)[0]
    directed = graph.get_type() == "digraph"
    names: list[str] = []
    edges = []

    def name_of(node_name):
        return _dot_value(node_name)

    def walk(g):
        for node in g.get_nodes():
            n = name_of(node.get_name())
            if n in ("node", "edge", "graph", ""):
                continue
            attrs = {k: _dot_value(v) for k, v in node.get_attributes().items()}
            names.append(attrs.get("label") if _plain_label(attrs.get("label"), n) else n)
            node_labels[n] = names[-1]
        for e in g.get_edges():
            attrs = {k: _dot_value(v) for k, v in e.get_attributes().items()}
            edges.append((name_of(e.get_source()), name_of(e.get_destination()), attrs))
        for s in g.get_subgraphs():
            walk(s)

    node_labels: dict[str, str] = {}
    walk(graph)
    out = []
    plain = {}  # two opposite plain arcs are one undirected edge (networkx's convention)
    for a, b, attrs in edges:
        a, b = node_labels.get(a, a), node_labels.get(b, b)
        for v in (a, b):
            if v not in names:
                names.append(v)
        if directed and not set(attrs) & {"kind", "from_mark", "to_mark", "dir", "arrowhead",
                                          "arrowtail"}:
            if (b, a) in plain:
                out[plain.pop((b, a))] = _edge(a, b, ("tail", "tail"), None, label)
                continue
            plain[(a, b)] = len(out)
        marks = (attrs.get("from_mark"), attrs.get("to_mark"))
        if None in marks:
            marks = _dot_edge_marks(attrs, directed)
        out.append(_edge(a, b, marks, attrs.get("kind"), label, "DOT: "))
    return diagram_result(names, out, source=label)


def _plain_label(value, name) -> bool:
    """Use a node's ``label`` as its name only when it is a plain name (not an HTML or
    escString label such as ``\\N``)."""
    return bool(value) and value != name and not value.startswith("<") and "\\" not in value


# -------------------------------------------------------------------------------- GraphML

def read_graphml(path) -> SearchResult:
    """Read a diagram from a GraphML file (parsed with networkx).

    Raises
    ------
    DataValidationError
        The file is missing, unreadable or not GraphML; an edge has an unknown kind or end
        mark; a pair has two different edges; an edge is a self-loop.
    """
    import xml.etree.ElementTree as ET
    label = str(path)
    text = _read(path, label)
    try:
        g = nx.parse_graphml(text)
    except ET.ParseError as err:
        raise _fail(label, f"not valid XML ({err}); is this a GraphML file?") from None
    except (nx.NetworkXError, ValueError, KeyError, TypeError) as err:
        raise _fail(label, f"not a GraphML graph networkx can read ({err})") from None
    labels = {v: d.get("label") for v, d in g.nodes(data=True)}
    plain = [str(x).strip() if x is not None else "" for x in labels.values()]
    rename = dict(zip(labels, plain)) if all(plain) and len(set(plain)) == len(plain) \
        else {v: str(v) for v in g.nodes}
    names = [rename[v] for v in g.nodes]
    edges, done = [], set()
    for u, v, d in g.edges(data=True):
        a, b = rename[u], rename[v]
        pair = frozenset((a, b))
        if pair in done:
            continue
        done.add(pair)
        marks = (d.get("from_mark"), d.get("to_mark"))
        kind = d.get("kind")
        if None in marks and not kind:
            if not g.is_directed() or g.has_edge(v, u):
                marks = ("tail", "tail")
            else:
                marks = ("tail", "arrow")
        elif None not in marks:
            kind = kind if kind == "contested" else None
        edges.append(_edge(a, b, marks, kind, label, "GraphML: "))
    return diagram_result(names, edges, source=label)


# ------------------------------------------------------------------------------------ CSV

def spreadsheet_safe(cell) -> str:
    """The cell as text that a spreadsheet shows as text: a leading ``=``, ``+``, ``-``,
    ``@``, tab or carriage return (which would start a formula) gets a ``'`` in front."""
    text = "" if cell is None else str(cell)
    if text and text[0] in "=+-@\t\r":
        return "'" + text
    return text


def _unsafe_back(text: str) -> str:
    if len(text) >= 2 and text[0] == "'" and text[1] in "=+-@\t\r":
        return text[1:]
    return text


def edge_csv_text(result: SearchResult) -> str:
    """The result's edges as CSV text (see :func:`write_edge_csv`)."""
    buffer = io.StringIO(newline="")
    writer = csv.writer(buffer, lineterminator="\r\n")
    writer.writerow(_CSV_COLUMNS)
    for e in result.edges:
        p = e.max_pvalue
        writer.writerow([spreadsheet_safe(x) for x in (
            e.source, e.target, e.kind, e.from_mark, e.to_mark, e.reason, e.reason_kind,
            "" if p != p else f"{p:.6g}", e.tests, "true" if e.locked else "false")])
    return buffer.getvalue()


def write_edge_csv(result: SearchResult, path) -> None:
    """Write the result's edges as a CSV edge list, one row per edge.

    Columns: ``from, to, kind, from_mark, to_mark, reason, reason_kind, max_pvalue, tests,
    locked``. The file is UTF-8 with a byte-order mark (so spreadsheet programs detect the
    encoding) and every cell that a spreadsheet would read as a formula is prefixed with
    ``'`` (:func:`spreadsheet_safe`); :func:`read_edge_csv` removes that prefix again.

    Raises
    ------
    DiscoveryError
        If the file cannot be written.
    """
    from .files import write_bytes_atomic
    try:
        write_bytes_atomic(path, ("\ufeff" + edge_csv_text(result)).encode("utf-8"))
    except OSError as err:
        raise DiscoveryError(f"{path}: cannot write the edge list ({err.strerror or err}); "
                             "check that the folder exists and is writable") from None


def read_edge_csv(path) -> SearchResult:
    """Read a diagram from a CSV edge list (columns ``from``, ``to``; optional ``kind`` or
    ``from_mark`` and ``to_mark``). A row with an empty ``to`` declares a lone variable.

    Raises
    ------
    DataValidationError
        The file is missing, unreadable or empty; it has no ``from`` or ``to`` column; a row
        lacks a name; an edge has an unknown kind or end mark; a pair has two edges.
    """
    label = str(path)
    text = _read(path, label)
    if not text.strip():
        raise _fail(label, "the file is empty; write a header 'from,to' and one row per edge")
    delimiter = max([",", ";", "\t"], key=text.splitlines()[0].count)
    rows = list(csv.reader(io.StringIO(text, newline=""), delimiter=delimiter))
    header = [c.strip().lower() for c in rows[0]]
    missing = [c for c in ("from", "to") if c not in header]
    if missing:
        raise _fail(label, f"no {' or '.join(repr(c) for c in missing)} column; the first "
                           "line must name the columns 'from' and 'to'")
    col = {c: i for i, c in enumerate(header)}
    names, edges = [], []
    for line, cells in enumerate(rows[1:], 2):
        if not any(c.strip() for c in cells):
            continue

        def cell(name):
            i = col.get(name)
            return _unsafe_back(cells[i].strip()) if i is not None and i < len(cells) else ""
        a, b = cell("from"), cell("to")
        if not a:
            raise _fail(label, f"line {line}: the 'from' cell is empty; name a variable")
        names.append(a)
        if not b:
            continue
        names.append(b)
        marks = (cell("from_mark") or None, cell("to_mark") or None)
        kind = cell("kind") or None
        if None in marks:
            marks = ("tail", "arrow")
        elif kind != "contested":
            kind = None
        edges.append(_edge(a, b, marks, kind, label, f"line {line}: "))
    return diagram_result(names, edges, source=label)


# ---------------------------------------------------------------------------------- any

def _read(path, label) -> str:
    from .data import read_input_bytes
    raw = read_input_bytes(Path(path), label, what="the diagram file", allow_empty=True)
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as err:
        raise _fail(label, f"is not UTF-8 text (byte {err.start}); save it as UTF-8") from None


def read_diagram(path) -> SearchResult:
    """Read a diagram from a result JSON, DOT, GraphML or CSV edge-list file (by extension).

    Raises
    ------
    DataValidationError
        The extension is not one of :data:`DIAGRAM_SUFFIXES`, or the file is not a diagram
        (see the format's reader).
    ResultFormatError
        A ``.json`` file is not an Edgewise result.
    """
    suffix = Path(path).suffix.lower()
    if suffix == ".json":
        return load_result(path)
    readers = {".dot": read_dot, ".gv": read_dot, ".graphml": read_graphml,
               ".csv": read_edge_csv}
    if suffix not in readers:
        raise _fail(path, f"cannot tell the diagram format from {suffix or 'no extension'!r}; "
                          f"use one of {', '.join(DIAGRAM_SUFFIXES)}")
    return readers[suffix](path)


def _as_result(diagram, name) -> SearchResult:
    if isinstance(diagram, SearchResult):
        return diagram
    if isinstance(diagram, (str, Path)):
        return read_diagram(diagram)
    if isinstance(diagram, nx.DiGraph):
        edges, done = [], set()
        for u, v, d in diagram.edges(data=True):
            pair = frozenset((u, v))
            if pair in done:
                continue
            done.add(pair)
            marks = ("tail", "tail") if diagram.has_edge(v, u) else ("tail", "arrow")
            edges.append(_edge(str(u), str(v), marks, d.get("kind") if d.get("kind") ==
                               "contested" else None, name))
        return diagram_result([str(v) for v in diagram.nodes], edges, source=name)
    raise DiscoveryError(f"{name}: expected a SearchResult, a networkx.DiGraph or a file "
                         f"path; got {type(diagram).__name__}")


# -------------------------------------------------------------------------------- compare

_MARK_TEXT = {("tail", "arrow"): "→", ("arrow", "tail"): "←", ("tail", "tail"): "—",
              ("arrow", "arrow"): "↔", ("circle", "arrow"): "o→", ("arrow", "circle"): "←o",
              ("circle", "circle"): "o–o", ("circle", "tail"): "o–", ("tail", "circle"): "–o"}


def _mark_text(e: Edge | None, a: str, b: str) -> str:
    """The edge between a and b written from a's side: ``a → b``, ``a ← b``, ``a — b``,
    ``a ?– b (contested)``, ``a o→ b``..."""
    if e is None:
        return "no edge"
    if e.kind == "contested":
        return f"{a} ?– {b} (contested)"
    marks = (e.from_mark, e.to_mark) if e.source == a else (e.to_mark, e.from_mark)
    return f"{a} {_MARK_TEXT.get(marks, '—')} {b}"


def _marks_between(e: Edge | None, a: str, b: str):
    if e is None:
        return None
    if e.kind == "contested":
        return ("contested",)
    return (e.from_mark, e.to_mark) if e.source == a else (e.to_mark, e.from_mark)


@dataclass(frozen=True)
class Comparison:
    """Edge-by-edge differences between diagram A and diagram B (an immutable record).

    Attributes
    ----------
    a_label, b_label : str
    differences : tuple of dict
        One per pair whose edges differ: ``a``, ``b`` (the pair, in name order),
        ``in_a``, ``in_b`` (the edge as text, or "no edge"), ``change`` (``only in A``,
        ``only in B``, ``reversed``, ``marks differ``).
    shd : int
        Structural Hamming distance: the number of differing pairs (Tsamardinos, Brown &
        Aliferis 2006).
    same : int
        Pairs joined by the same edge in both.
    skeleton, arrowheads : dict
        Precision, recall and F1 of A's adjacencies and arrowheads, taking B as the reference
        (``discovery.metrics``).
    """

    a_label: str
    b_label: str
    differences: tuple
    shd: int
    same: int
    skeleton: dict
    arrowheads: dict

    def to_dict(self) -> dict:
        return {"format": "edgewise-comparison", "version": 1, "a": self.a_label,
                "b": self.b_label, "shd": self.shd, "same": self.same,
                "differences": [dict(d) for d in self.differences],
                "skeleton": dict(self.skeleton), "arrowheads": dict(self.arrowheads),
                "cautions": list(ASSUMPTIONS[1:3])}

    def as_text(self) -> str:
        s, h = self.skeleton, self.arrowheads
        lines = [f"A: {self.a_label}", f"B: {self.b_label}",
                 f"Structural Hamming distance: {self.shd} pair(s) differ; {self.same} "
                 "edge(s) agree.",
                 f"Adjacencies of A against B: precision {s['precision']:.3f}, recall "
                 f"{s['recall']:.3f}, F1 {s['f1']:.3f}",
                 f"Arrowheads of A against B: precision {h['precision']:.3f}, recall "
                 f"{h['recall']:.3f}, F1 {h['f1']:.3f}"]
        if self.differences:
            w1 = max(len(d["in_a"]) for d in self.differences)
            w2 = max(len(d["in_b"]) for d in self.differences)
            lines += ["", f"{'in A':<{w1}}  {'in B':<{w2}}  change"]
            for d in self.differences:
                lines.append(f"{d['in_a']:<{w1}}  {d['in_b']:<{w2}}  {d['change']}")
        else:
            lines += ["", "The diagrams agree on every pair."]
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.as_text()


def _graph_over(result: SearchResult, variables) -> nx.DiGraph:
    g = result.to_networkx()
    g.add_nodes_from(variables)
    return g


def compare(a, b, *, a_label: str | None = None, b_label: str | None = None) -> Comparison:
    """Compare two diagrams edge by edge (results, networkx DiGraphs or file paths).

    Raises
    ------
    DataValidationError
        A file is not a diagram (see :func:`read_diagram`).
    """
    from .metrics import arrowhead_scores, skeleton_scores, structural_hamming_distance
    ra, rb = _as_result(a, "A"), _as_result(b, "B")
    a_label = a_label or (str(a) if isinstance(a, (str, Path)) else "A")
    b_label = b_label or (str(b) if isinstance(b, (str, Path)) else "B")
    variables = list(dict.fromkeys(list(ra.variables) + list(rb.variables)))
    pairs = sorted({tuple(sorted(e.pair)) for e in ra.edges}
                   | {tuple(sorted(e.pair)) for e in rb.edges})
    diffs, same = [], 0
    for x, y in pairs:
        ea, eb = ra.edge(x, y), rb.edge(x, y)
        ma, mb = _marks_between(ea, x, y), _marks_between(eb, x, y)
        if ma == mb:
            same += 1
            continue
        if ea is None:
            change = "only in B"
        elif eb is None:
            change = "only in A"
        elif ma == tuple(reversed(mb)) and len(ma) == 2:
            change = "reversed"
        else:
            change = "marks differ"
        diffs.append({"a": x, "b": y, "in_a": _mark_text(ea, x, y), "in_b": _mark_text(eb, x, y),
                      "change": change})
    ga, gb = _graph_over(ra, variables), _graph_over(rb, variables)
    shd = structural_hamming_distance(ga, gb)
    sk, ah = skeleton_scores(ga, gb), arrowhead_scores(ga, gb)

    def scores(s):
        return {"precision": s.precision, "recall": s.recall, "f1": s.f1,
                "true_positives": s.true_positives, "false_positives": s.false_positives,
                "false_negatives": s.false_negatives}
    return Comparison(a_label, b_label, tuple(diffs), int(shd), same, scores(sk), scores(ah))


# ------------------------------------------------------------------------------ knowledge

def knowledge_from_diagram(diagram, *, directions: bool = True,
                           forbid_absent: bool = False) -> Knowledge:
    """Knowledge that locks a diagram's edges.

    Parameters
    ----------
    diagram : SearchResult, networkx.DiGraph or path
    directions : bool
        Lock a directed edge's direction (``locked_directions``); when False, only the
        adjacency is locked (``locked``) and the search chooses the direction.
    forbid_absent : bool
        Also forbid every pair the diagram leaves unlinked (the diagram is complete).

    Raises
    ------
    KnowledgeError
        The locked directions form a cycle.
    """
    r = _as_result(diagram, "diagram")
    locked, locked_dirs = [], []
    for e in r.edges:
        if e.kind == "directed" and directions:
            locked_dirs.append((e.source, e.target))
        else:
            locked.append((e.source, e.target))
    forbidden = []
    if forbid_absent:
        names = sorted(r.variables)
        forbidden = [(x, y) for i, x in enumerate(names) for y in names[i + 1:]
                     if r.edge(x, y) is None]
    return Knowledge(locked=locked, locked_directions=locked_dirs, forbidden=forbidden)


def merge_knowledge(first: Knowledge, second: Knowledge) -> Knowledge:
    """Both pieces of knowledge together (stages from the first, unless it has none).

    Raises
    ------
    KnowledgeError
        The two contradict each other.
    """
    return Knowledge(locked=first.locked + second.locked,
                     locked_directions=first.locked_directions + second.locked_directions,
                     forbidden=first.forbidden + second.forbidden,
                     forbidden_directions=first.forbidden_directions
                     + second.forbidden_directions,
                     stages=first.stages or second.stages)
