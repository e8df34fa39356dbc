"""The immutable search result, its evidence, its summary and its JSON document.

A :class:`SearchResult` holds everything needed to read, trust or reproduce a search: the
variables, settings and knowledge; the edges with a reason for every arrowhead; the removed
pairs with their separating sets; every test run (the evidence); unshielded-triple decisions;
conflicts between knowledge and data; counts, timings, software versions and the data
fingerprint.

The JSON document (``"format": "edgewise-result", "version": 1``) is described in
docs/result-format.md; :func:`SearchResult.from_dict` validates it on load.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Mapping, NamedTuple, Sequence

import networkx as nx
import numpy as np

from .exceptions import ResultFormatError
from .knowledge import Knowledge
from .settings import SearchSettings

__all__ = ["Edge", "Removal", "TestLog", "TestRecord", "PairEvidence", "SearchResult", "Summary",
           "load_result", "ASSUMPTIONS"]

FORMAT = "edgewise-result"
VERSION = 1
EDGE_KINDS = ("directed", "undirected", "contested")

#: The assumptions and cautions every output carries (DESIGN.md §2), in plain words.
ASSUMPTIONS = (
    "The search is sound only if: no unmeasured common causes of the measured variables "
    "(causal sufficiency); no feedback loops; faithfulness (independences in the data come "
    "from the diagram's structure, not from cancelling effects); rows are independent and "
    "identically distributed; and the independence test fits the data.",
    "Finite samples make errors, and many tests are run: some edges will be wrong.",
    "Data cannot tell apart the members of an equivalence class: undirected edges may point "
    "either way.",
    "The output is a set of hypotheses to weigh with study design and domain expertise; it is "
    "not on its own a basis for medical, safety, legal or policy decisions.",
)


class TestLog(Sequence):
    """Every test run by a search, stored compactly; reads as ``(x, y, given, pvalue)`` tuples.

    The log is kept as blocks of index rows ``[x, y, s1..sk]`` with their p-values; tuples of
    names are produced on first access, so a search that runs hundreds of thousands of tests
    does not pay for tuples nobody reads.
    """

    __slots__ = ("_names", "_blocks", "_rows")

    def __init__(self, names, blocks):
        self._names = tuple(names)
        self._blocks = tuple((np.asarray(i, dtype=np.intp), np.asarray(p, dtype=float))
                             for i, p in blocks)
        for i, p in self._blocks:
            i.setflags(write=False)
            p.setflags(write=False)
        self._rows = None

    @classmethod
    def from_blocks(cls, names, blocks) -> "TestLog":
        return cls(names, blocks)

    @classmethod
    def from_rows(cls, rows) -> "TestLog":
        """Build from ``(x, y, given, pvalue)`` tuples of names, keeping their order."""
        names: dict[str, int] = {}
        blocks, current, pvals, width = [], [], [], None
        for x, y, given, p in rows:
            ids = [names.setdefault(v, len(names)) for v in (x, y, *given)]
            if width is not None and len(ids) != width:
                blocks.append((np.array(current).reshape(-1, width), pvals))
                current, pvals = [], []
            width = len(ids)
            current.append(ids)
            pvals.append(p)
        if current:
            blocks.append((np.array(current).reshape(-1, width), pvals))
        return cls(names, blocks)

    def _materialise(self):
        if self._rows is None:
            n = self._names
            rows = []
            for idx, p in self._blocks:
                for r, pv in zip(idx.tolist(), p.tolist()):
                    rows.append((n[r[0]], n[r[1]], tuple(n[v] for v in r[2:]), pv))
            self._rows = tuple(rows)
        return self._rows

    def __len__(self):
        return sum(len(p) for _, p in self._blocks)

    def __getitem__(self, i):
        return self._materialise()[i]

    def __iter__(self):
        return iter(self._materialise())

    def __eq__(self, other):
        if isinstance(other, TestLog):
            return len(self) == len(other) and self._materialise() == other._materialise()
        return NotImplemented

    def __hash__(self):
        return hash(self._materialise())

    def __repr__(self):
        return f"TestLog({len(self)} tests)"

    def count_nan(self) -> int:
        return int(sum(np.isnan(p).sum() for _, p in self._blocks))

    def of_pair(self, a: str, b: str) -> list[tuple[tuple[str, ...], float]]:
        """The (conditioning set, p-value) of every test run on the pair {a, b}."""
        try:
            ia, ib = self._names.index(a), self._names.index(b)
        except ValueError:
            return []
        out = []
        for idx, p in self._blocks:
            mask = ((idx[:, 0] == ia) & (idx[:, 1] == ib)) | ((idx[:, 0] == ib) & (idx[:, 1] == ia))
            for r, pv in zip(idx[mask].tolist(), p[mask].tolist()):
                out.append((tuple(self._names[v] for v in r[2:]), pv))
        return out


class LazyRecords(Sequence):
    """An immutable sequence whose records are built on first access.

    A search on hundreds of variables removes tens of thousands of pairs; building a record
    for each is left until someone reads them (the window, the JSON writer), so the search
    itself does not pay for it.
    """

    __slots__ = ("_build", "_items")

    def __init__(self, build):
        self._build = build if callable(build) else (lambda items=tuple(build): items)
        self._items = None

    def _all(self) -> tuple:
        if self._items is None:
            self._items = tuple(self._build())
            self._build = None
        return self._items

    def __len__(self):
        return len(self._all())

    def __getitem__(self, i):
        return self._all()[i]

    def __iter__(self):
        return iter(self._all())

    def __eq__(self, other):
        if isinstance(other, (LazyRecords, tuple)):
            return self._all() == tuple(other)
        return NotImplemented

    def __hash__(self):
        return hash(self._all())

    def __repr__(self):
        return f"LazyRecords({len(self)} records)"


@dataclass(frozen=True)
class TestRecord:
    """One independence test run during the search."""

    given: tuple[str, ...]
    pvalue: float

    def to_list(self):
        return [list(self.given), _num(self.pvalue)]


@dataclass(frozen=True)
class Edge:
    """An edge of the result. For ``kind="directed"`` it reads ``source → target``.

    Attributes
    ----------
    source, target : str
    kind : {"directed", "undirected", "contested"}
    reason : str
        Why the arrowhead(s) are there ("" for an undirected edge).
    reason_kind : str
        ``collider``, ``rule 1`` … ``rule 4``, ``knowledge``, ``stage order``, ``contested``
        or ``""``.
    max_pvalue : float
        The largest p-value among the tests of this pair (NaN if none ran): the closest the
        data came to removing it.
    tests : int
        Number of tests run on this pair.
    locked : bool
        The pair is locked by knowledge (kept whatever the data say).
    """

    source: str
    target: str
    kind: str
    reason: str = ""
    reason_kind: str = ""
    max_pvalue: float = float("nan")
    tests: int = 0
    locked: bool = False

    @property
    def pair(self) -> frozenset[str]:
        return frozenset((self.source, self.target))

    @property
    def from_mark(self) -> str:
        """The mark at the ``source`` end: ``tail``, ``arrow`` or ``circle`` (one code path for
        every search mode; a contested edge has tails at both ends, its kind says why)."""
        return "tail"

    @property
    def to_mark(self) -> str:
        """The mark at the ``target`` end: ``tail``, ``arrow`` or ``circle``."""
        return "arrow" if self.kind == "directed" else "tail"

    def arrow(self) -> str:
        mark = {"directed": "→", "undirected": "—", "contested": "↔"}[self.kind]
        return f"{self.source} {mark} {self.target}"

    def to_dict(self) -> dict:
        return {"from": self.source, "to": self.target, "kind": self.kind,
                "from_mark": self.from_mark, "to_mark": self.to_mark,
                "reason": self.reason, "reason_kind": self.reason_kind,
                "max_pvalue": _num(self.max_pvalue), "tests": self.tests,
                "locked": self.locked}


class Removal(NamedTuple):
    """A non-adjacent pair and why it has no edge (a light immutable record: a search on
    hundreds of variables removes tens of thousands of pairs).

    ``by`` is ``"test"`` when the data gave a separating set, ``"knowledge"`` when the pair is
    forbidden and the data found no separating set; ``forbidden`` says whether the knowledge
    forbids the pair at all.
    """

    a: str
    b: str
    separating_set: tuple[str, ...] | None
    pvalue: float
    by: str
    forbidden: bool = False

    def to_dict(self) -> dict:
        return {"a": self.a, "b": self.b,
                "separating_set": None if self.separating_set is None
                else list(self.separating_set),
                "pvalue": _num(self.pvalue), "by": self.by, "forbidden": self.forbidden}


@dataclass(frozen=True)
class PairEvidence:
    """Everything the search knows about one pair."""

    a: str
    b: str
    adjacent: bool
    edge: Edge | None
    removal: Removal | None
    tests: tuple[TestRecord, ...]
    triples: tuple[Mapping, ...]

    def as_text(self) -> str:
        lines = [f"{self.a} — {self.b}: " + (self.edge.arrow() if self.edge else "not adjacent")]
        if self.edge and self.edge.reason:
            lines.append(f"  orientation: {self.edge.reason}")
        if self.removal:
            if self.removal.by == "test":
                lines.append(f"  removed: independent given "
                             f"{_set_text(self.removal.separating_set)} "
                             f"(p = {self.removal.pvalue:.3g})"
                             + ("; also forbidden by knowledge" if self.removal.forbidden
                                else ""))
            else:
                lines.append("  removed: forbidden by knowledge (the data gave no separating "
                             "set)")
        for t in self.tests:
            lines.append(f"  test given {_set_text(t.given)}: p = {t.pvalue:.4g}")
        return "\n".join(lines)


def _set_text(s) -> str:
    return "{" + ", ".join(s) + "}" if s is not None else "none"


def _num(x):
    x = float(x)
    return None if x != x else x


def _freeze(mapping) -> Mapping:
    return MappingProxyType(dict(mapping))


@dataclass(frozen=True)
class SearchResult:
    """The immutable record of one search. Build it with :func:`discovery.discover`.

    Attributes
    ----------
    variables : tuple of str
        In the data's column order.
    settings : SearchSettings
    knowledge : Knowledge
    edges : tuple of Edge
        Sorted by (source, target) names.
    removed : tuple of Removal
    tests : tuple of (str, str, tuple of str, float)
        Every test run: x, y, conditioning set, p-value.
    triples : sequence of mappings
        Unshielded triples ``x — z — y`` with their decision and reason (built when first
        read).
    conflicts : tuple of str
        Places where knowledge and data disagree, or colliders were refused or contested.
    notes : tuple of str
    counts, timings, data, software : mappings
    seed : int or None
    undecided : tuple of (str, str)
        With the equivalence rule: adjacent pairs the data could neither show related nor
        show within the margin.
    """

    variables: tuple[str, ...]
    settings: SearchSettings
    knowledge: Knowledge
    edges: tuple[Edge, ...]
    removed: Sequence[Removal]
    tests: TestLog
    triples: Sequence[Mapping] = ()
    conflicts: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()
    counts: Mapping = field(default_factory=dict)
    timings: Mapping = field(default_factory=dict)
    data: Mapping = field(default_factory=dict)
    software: Mapping = field(default_factory=dict)
    seed: int | None = None
    undecided: tuple[tuple[str, str], ...] = ()

    def __post_init__(self):
        object.__setattr__(self, "undecided", tuple(tuple(p) for p in self.undecided))
        for name in ("counts", "timings", "data", "software"):
            object.__setattr__(self, name, _freeze(getattr(self, name)))
        if isinstance(self.triples, LazyRecords):  # frozen when first read
            object.__setattr__(self, "triples",
                               LazyRecords(lambda t=self.triples: map(_freeze, t)))
        else:
            object.__setattr__(self, "triples", tuple(_freeze(t) for t in self.triples))
        if not isinstance(self.tests, TestLog):
            object.__setattr__(self, "tests", TestLog.from_rows(self.tests))
        if not isinstance(self.removed, LazyRecords):
            object.__setattr__(self, "removed", LazyRecords(tuple(self.removed)))

    # -- queries ------------------------------------------------------------------------------
    def edge(self, a: str, b: str) -> Edge | None:
        """The edge between a and b (either direction), or None when they are not adjacent."""
        return self._edge_index.get(frozenset((a, b)))

    @property
    def _edge_index(self) -> dict:
        cached = self.__dict__.get("_edge_index_cache")
        if cached is None:
            cached = {e.pair: e for e in self.edges}
            object.__setattr__(self, "_edge_index_cache", cached)
        return cached

    def evidence(self, a: str, b: str) -> PairEvidence:
        """Every test run on the pair, the set that removed it, and its arrowheads' reasons."""
        for v in (a, b):
            if v not in self.variables:
                raise KeyError(f"variable {v!r} is not in the result")
        pair = {a, b}
        tests = tuple(TestRecord(s, p) for s, p in self.tests.of_pair(a, b))
        removal = next((r for r in self.removed if {r.a, r.b} == pair), None)
        triples = tuple(t for t in self.triples if {t["x"], t["y"]} == pair
                        or (t["z"] in pair and (t["x"] in pair or t["y"] in pair)))
        edge = self.edge(a, b)
        return PairEvidence(a, b, edge is not None, edge, removal, tests, triples)

    def to_networkx(self) -> nx.DiGraph:
        """A DiGraph: a directed edge is one arc; undirected and contested edges are two
        opposite arcs. Every arc carries ``kind``, ``reason`` and ``max_pvalue``."""
        g = nx.DiGraph()
        g.add_nodes_from(self.variables)
        for e in self.edges:
            attrs = {"kind": e.kind, "reason": e.reason, "max_pvalue": e.max_pvalue}
            g.add_edge(e.source, e.target, **attrs)
            if e.kind != "directed":
                g.add_edge(e.target, e.source, **attrs)
        return g

    def summary(self) -> "Summary":
        """A readable summary (``as_text()``, ``as_html()``, ``to_dict()``)."""
        return Summary(self)

    def __repr__(self) -> str:
        c = self.counts
        return (f"SearchResult({len(self.variables)} variables, {len(self.edges)} edges "
                f"({c.get('directed', 0)} directed, {c.get('undirected', 0)} undirected, "
                f"{c.get('contested', 0)} contested), test={self.settings.test!r}, "
                f"alpha={self.settings.alpha})")

    # -- serialisation ------------------------------------------------------------------------
    def to_dict(self) -> dict:
        """The JSON document (plain dicts and lists)."""
        return {
            "format": FORMAT,
            "version": VERSION,
            "variables": list(self.variables),
            "settings": self.settings.to_dict(),
            "knowledge": self.knowledge.to_dict(),
            "edges": [e.to_dict() for e in self.edges],
            "removed": [r.to_dict() for r in self.removed],
            "triples": [dict(t) for t in self.triples],
            "conflicts": list(self.conflicts),
            "notes": list(self.notes),
            "evidence": {"tests": [[x, y, list(s), _num(p)] for x, y, s, p in self.tests]},
            "counts": dict(self.counts),
            "timings": dict(self.timings),
            "data": dict(self.data),
            "software": dict(self.software),
            "seed": self.seed,
            "undecided": [list(p) for p in self.undecided],
            "assumptions": list(ASSUMPTIONS),
        }

    def to_json(self, path=None, *, indent: int | None = 1) -> str:
        """The JSON text; also written to ``path`` when given."""
        text = json.dumps(self.to_dict(), indent=indent, ensure_ascii=False)
        if path is not None:
            Path(path).write_text(text + "\n", encoding="utf-8")
        return text

    @classmethod
    def from_dict(cls, doc: dict, *, source: str = "result") -> "SearchResult":
        """Rebuild a result from its JSON document, validating it.

        Raises
        ------
        ResultFormatError
            If the document is not an Edgewise result of a known version, or is inconsistent.
        """
        return _from_dict(doc, source)


def load_result(path) -> SearchResult:
    """Read a result JSON file written by :meth:`SearchResult.to_json`."""
    path = Path(path)
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ResultFormatError(f"{path}: file not found") from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as err:
        raise ResultFormatError(f"{path}: not a readable JSON file ({err})") from None
    return SearchResult.from_dict(doc, source=str(path))


def _from_dict(doc, source) -> SearchResult:
    def fail(what):
        raise ResultFormatError(f"{source}: {what}; is this a file written by Edgewise?")

    if not isinstance(doc, dict) or doc.get("format") != FORMAT:
        fail(f"'format' is not {FORMAT!r}")
    if doc.get("version") != VERSION:
        fail(f"version {doc.get('version')!r} is not supported (this Edgewise reads {VERSION})")
    required = ("variables", "settings", "knowledge", "edges", "removed", "evidence")
    missing = [k for k in required if k not in doc]
    if missing:
        fail(f"missing field(s) {missing}")
    variables = doc["variables"]
    if not (isinstance(variables, list) and all(isinstance(v, str) for v in variables)):
        fail("'variables' must be a list of names")
    if len(set(variables)) != len(variables):
        fail("'variables' has duplicate names")
    known = set(variables)
    try:
        settings = SearchSettings.from_dict(doc["settings"])
        knowledge = Knowledge.from_dict(doc["knowledge"], source=source)
        edges = []
        for e in doc["edges"]:
            if e["from"] not in known or e["to"] not in known:
                fail(f"edge {e['from']!r} — {e['to']!r} names an unknown variable")
            if e["kind"] not in EDGE_KINDS:
                fail(f"edge kind {e['kind']!r} is not one of {EDGE_KINDS}")
            edges.append(Edge(e["from"], e["to"], e["kind"], e.get("reason", ""),
                              e.get("reason_kind", ""), _float(e.get("max_pvalue")),
                              int(e.get("tests", 0)), bool(e.get("locked", False))))
        pairs = [frozenset((e.source, e.target)) for e in edges]
        if len(set(pairs)) != len(pairs):
            fail("two edges join the same pair")
        removed = []
        for r in doc["removed"]:
            if r["a"] not in known or r["b"] not in known:
                fail(f"removed pair {r['a']!r} — {r['b']!r} names an unknown variable")
            sep = r.get("separating_set")
            if r.get("by", "test") not in ("test", "knowledge"):
                fail(f"removal reason {r.get('by')!r} is not 'test' or 'knowledge'")
            removed.append(Removal(r["a"], r["b"], None if sep is None else tuple(sep),
                                   _float(r.get("pvalue")), r.get("by", "test"),
                                   bool(r.get("forbidden", False))))
        tests = TestLog.from_rows((x, y, tuple(s), _float(p))
                                  for x, y, s, p in doc["evidence"]["tests"])
    except ResultFormatError:
        raise
    except (KeyError, TypeError, ValueError) as err:
        fail(f"malformed content ({type(err).__name__}: {err})")
    return SearchResult(
        variables=tuple(variables), settings=settings, knowledge=knowledge,
        edges=tuple(edges), removed=tuple(removed), tests=tests,
        triples=tuple(doc.get("triples", ())), conflicts=tuple(doc.get("conflicts", ())),
        notes=tuple(doc.get("notes", ())), counts=doc.get("counts", {}),
        timings=doc.get("timings", {}), data=doc.get("data", {}),
        software=doc.get("software", {}), seed=doc.get("seed"),
        undecided=tuple(tuple(p) for p in doc.get("undecided", ())))


def _float(x) -> float:
    return float("nan") if x is None else float(x)


class Summary:
    """A readable summary of a result: ``as_text()``, ``as_html()``, ``to_dict()``."""

    def __init__(self, result: SearchResult):
        self.result = result

    def to_dict(self) -> dict:
        r = self.result
        return {
            "variables": len(r.variables),
            "rows": r.data.get("rows"),
            "test": r.settings.test,
            "alpha": r.settings.alpha,
            "max_depth": r.settings.max_depth,
            "collider_rule": r.settings.collider_rule,
            "edges": [[e.source, e.target, e.kind, e.reason] for e in r.edges],
            "counts": dict(r.counts),
            "notes": self.notes(),
        }

    def notes(self) -> list[str]:
        r = self.result
        notes = list(r.conflicts) + list(r.notes)
        nan_tests = r.tests.count_nan()
        if nan_tests:
            notes.append(f"{nan_tests} test(s) returned NaN and were read as 'not independent'")
        return notes

    def as_text(self, *, assumptions: bool = True) -> str:
        """The summary as plain text; ``assumptions=False`` leaves out the closing paragraph
        of assumptions (the command line prints a short caution instead)."""
        r = self.result
        c = r.counts
        head = (f"Edgewise search: {len(r.variables)} variables"
                + (f", {r.data.get('rows')} rows" if r.data.get("rows") else "")
                + f"; test {r.settings.test}, alpha {r.settings.alpha:g}, depth "
                f"{'unlimited' if r.settings.max_depth is None else r.settings.max_depth}, "
                f"collider rule {r.settings.collider_rule}")
        lines = [head,
                 f"{len(r.edges)} edges: {c.get('directed', 0)} directed, "
                 f"{c.get('undirected', 0)} undirected, {c.get('contested', 0)} contested; "
                 f"{c.get('tests', len(r.tests))} tests", ""]
        width = max([len(e.arrow()) for e in r.edges] + [4])
        lines.append(f"{'edge':<{width}}  {'max p':>9}  why")
        for e in r.edges:
            p = "-" if e.max_pvalue != e.max_pvalue else f"{e.max_pvalue:.3g}"
            why = e.reason or "direction not determined by the data"
            if e.locked:
                why = "locked; " + why
            lines.append(f"{e.arrow():<{width}}  {p:>9}  {why}")
        notes = self.notes()
        if notes:
            lines += ["", "Notes:"] + [f"[{i}] {n}" for i, n in enumerate(notes, 1)]
        if assumptions:
            lines += ["", "Assumptions: " + " ".join(ASSUMPTIONS)]
        return "\n".join(lines)

    def as_html(self) -> str:
        from html import escape
        r = self.result
        rows = "".join(
            f"<tr><td>{escape(e.arrow())}</td><td>{'' if e.max_pvalue != e.max_pvalue else f'{e.max_pvalue:.3g}'}"
            f"</td><td>{escape(e.reason or 'direction not determined by the data')}</td></tr>"
            for e in r.edges)
        notes = "".join(f"<li>{escape(n)}</li>" for n in self.notes())
        assumptions = "".join(f"<li>{escape(a)}</li>" for a in ASSUMPTIONS)
        return (f"<p>{len(r.variables)} variables; test {escape(r.settings.test)}, "
                f"α = {r.settings.alpha:g}</p><table><tr><th>edge</th><th>max p</th>"
                f"<th>why</th></tr>{rows}</table>"
                + (f"<ol>{notes}</ol>" if notes else "")
                + f"<p>Assumptions and cautions:</p><ul>{assumptions}</ul>")

    def __str__(self) -> str:
        return self.as_text()

    _repr_html_ = as_html
