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
import re
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Mapping, NamedTuple, Sequence

import networkx as nx
import numpy as np

from ._evidence import EvidenceLog
from .exceptions import ResultFormatError
from .files import MAX_DOCUMENT_BYTES, atomic_write, parse_json_checked, read_text_checked
from .knowledge import Knowledge
from .settings import SearchSettings

__all__ = ["HIDDEN_CAUSES_ASSUMPTIONS", "Edge", "EDGE_KINDS", "KIND_MARKS", "MARK_MEANINGS",
           "Removal", "TestLog",
           "TestRecord", "PairEvidence", "SearchResult", "Summary",
           "load_result", "ASSUMPTIONS", "MAX_SAVED_BYTES", "OMITTED_REASON"]

FORMAT = "edgewise-result"
VERSION = 1

#: A result is written without its evidence rows (``"evidence": {"tests": [], "omitted": N}``)
#: when, with them, the document would be larger than this many bytes: the reader's limit, so
#: that every file Edgewise writes reads back. Read when a document is built (tests lower it).
MAX_SAVED_BYTES = MAX_DOCUMENT_BYTES
#: ``evidence.omitted_reason`` of such a document.
OMITTED_REASON = "too large to store"

#: The reason given for an untestable pair when the test gives none of its own.
NO_PVALUE = "the test returned no p-value"

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

#: The assumptions of the hidden-causes mode (FCI): hidden common causes are allowed.
HIDDEN_CAUSES_ASSUMPTIONS = (
    "This search allows unmeasured common causes of the measured variables; it is sound only "
    "if: no feedback loops; no selection of rows that depends on the variables (selection "
    "bias); faithfulness (independences in the data come from the diagram's structure, not "
    "from cancelling effects); rows are independent and identically distributed; and the "
    "independence test fits the data.",
    "Finite samples make errors, and many tests are run: some edges and marks will be wrong.",
    "A circle mark (o) means the data cannot decide that end: o→ and o–o edges may hide a "
    "common cause, and an edge does not mean a direct effect when hidden causes act.",
    ASSUMPTIONS[-1],
)


def _index_block(i) -> np.ndarray:
    block = np.asarray(i)
    return block if block.dtype.kind in "iu" and block.size else block.astype(np.intp)


class TestLog(Sequence):
    """Every test run by a search, stored compactly; reads as ``(x, y, given, pvalue)`` tuples.

    The log is kept as blocks of index rows ``[x, y, s1..sk]`` with their p-values (a search's
    :class:`~discovery._evidence.EvidenceLog`, whose later blocks may live in a temporary
    file); tuples of names are produced on first access, so a search that runs hundreds of
    thousands of tests does not pay for tuples nobody reads.
    """

    __slots__ = ("_names", "_blocks", "_rows", "_count")

    def __init__(self, names, blocks):
        self._names = tuple(names)
        if not isinstance(blocks, EvidenceLog):
            # integer index blocks keep their width (the search stores 16-bit ones)
            blocks = EvidenceLog((_index_block(i), np.asarray(p, dtype=float))
                                 for i, p in blocks)
        blocks.freeze()
        self._blocks = blocks
        self._count = blocks.tests
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
        return self._count

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

    def json_bytes(self, indent: int | None = 1) -> int:
        """An upper bound of the bytes the rows take as ``evidence.tests`` in the result's
        JSON (UTF-8, at that indent), from each block's row count and width and the longest
        name, without reading the rows (spilled blocks stay on disk)."""
        if not self._count:
            return 0
        name = max(len(json.dumps(v, ensure_ascii=False).encode("utf-8")) for v in self._names)
        sizes: dict[int, int] = {}
        total = 0
        for shape in self._blocks.shapes():
            width = shape[1] if len(shape) > 1 else 2
            if width not in sizes:
                sizes[width] = _row_json_bytes(width - 2, name - 2, indent)
            total += shape[0] * sizes[width]
        return total

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


def _row_json_bytes(given: int, name: int, indent) -> int:
    """The bytes one evidence row takes in the document (at its depth, with its comma): a
    row of ``given`` conditioning variables, every name ``name`` bytes long and the longest
    float text (24 characters)."""
    n = "n" * name
    row = {"x": n, "y": n, "given": [n] * given, "pvalue": -1.2345678901234567e-300}
    one = json.dumps({"evidence": {"tests": [row]}}, indent=indent)
    return len(json.dumps({"evidence": {"tests": [row, row]}}, indent=indent)) - len(one)


def _json_bytes(doc, indent) -> int:
    """The UTF-8 bytes of ``json.dumps(doc, indent=indent, ensure_ascii=False)``, counted
    without building the text."""
    encoder = json.JSONEncoder(indent=indent, ensure_ascii=False)
    return sum(len(chunk.encode("utf-8")) for chunk in encoder.iterencode(doc))


def _dumps(doc, indent) -> str:
    """``json.dumps(doc, indent=indent, ensure_ascii=False)``, joined a batch of pieces at a
    time: ``json.dumps`` first lists every piece (millions of small strings for a large
    result, several times the text's own size)."""
    encoder = json.JSONEncoder(indent=indent, ensure_ascii=False)
    parts, batch = [], []
    for chunk in encoder.iterencode(doc):
        batch.append(chunk)
        if len(batch) == 1 << 16:
            parts.append("".join(batch))
            batch = []
    parts.append("".join(batch))
    return "".join(parts)


def omitted_note(tests: int) -> str:
    """The note a document carries when its evidence rows were left out."""
    return (f"The evidence of {tests:,} tests (each test's conditioning set and p-value) was "
            f"left out of this file: it is {OMITTED_REASON} (a result file is read back up to "
            f"{MAX_DOCUMENT_BYTES / 2**20:,.0f} MiB). Each edge's "
            "largest p-value and number of tests, and each removed pair's separating set "
            "and p-value, are kept. To see a pair's tests, re-run the search with the same "
            "data and settings with --explain A,B (the report gives the command), or call "
            "result.evidence(a, b) on the result in Python before saving it.")


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


#: The end marks of each edge kind, ``(from_mark, to_mark)``. The first three are the kinds of
#: the search without hidden causes; the last four appear only in a partial ancestral graph
#: (the hidden-causes mode). ``undirected`` (tail/tail) appears there only when the rules
#: find an edge that no arrowhead can reach (a sign of selection bias or of errors).
KIND_MARKS = {
    "directed": ("tail", "arrow"),
    "undirected": ("tail", "tail"),
    "contested": ("tail", "tail"),
    "bidirected": ("arrow", "arrow"),
    "partially-directed": ("circle", "arrow"),
    "nondirected": ("circle", "circle"),
    "partially-undirected": ("circle", "tail"),
}
EDGE_KINDS = tuple(KIND_MARKS)
MARKS = ("tail", "arrow", "circle")

#: Text of each kind (``a MARK b``).
_KIND_TEXT = {"directed": "→", "undirected": "—", "contested": "?–", "bidirected": "↔",
              "partially-directed": "o→", "nondirected": "o–o", "partially-undirected": "o–"}

#: What each kind of edge says, in plain words, with ``{a}`` and ``{b}`` for its ends.
_MEANING_TEMPLATES = {
    "directed": "{a} causes {b} (directly, or through steps not measured); {b} does not "
                "cause {a}.",
    "undirected": "{a} and {b} are adjacent; the data cannot tell the direction.",
    "contested": "the data tried to orient this pair both ways; read it as adjacent with the "
                 "direction unknown.",
    "bidirected": "neither causes the other: {a} and {b} share a hidden common cause.",
    "partially-directed": "{b} does not cause {a}; {a} may cause {b}, or a hidden common "
                          "cause may drive both (possibly both at once).",
    "nondirected": "{a} and {b} are adjacent and the data say nothing more: possibly either "
                   "way, and a hidden common cause is possible.",
    "partially-undirected": "{b} is a cause of {a} or of how the rows were selected; the "
                            "circle end at {a} is undetermined (this mark needs selection "
                            "bias or test errors).",
}
#: What each kind says, for generic ends ``a`` and ``b`` (summary, window, docs).
MARK_MEANINGS = {k: f"a {_KIND_TEXT[k]} b" + (" (contested)" if k == "contested" else "")
                 + ": " + t.format(a="a", b="b") for k, t in _MEANING_TEMPLATES.items()}

#: Marks by the kind when the edge is read from ``source``'s side (to flip edges given by
#: their marks into a kind).
_MARKS_KIND = {m: k for k, m in KIND_MARKS.items() if k not in ("contested",)}


@dataclass(frozen=True)
class Edge:
    """An edge of the result, with a mark at each end.

    ``kind="directed"`` reads ``source → target``. The marks (``from_mark`` at ``source``,
    ``to_mark`` at ``target``) are ``tail``, ``arrow`` or ``circle``; they follow from the
    kind (see :data:`KIND_MARKS`), so readers can draw and interpret every search mode from
    the marks alone. Build an edge from its marks with :meth:`from_marks`.

    Attributes
    ----------
    source, target : str
    kind : str
        One of :data:`EDGE_KINDS`: ``directed``, ``undirected``, ``contested``, and in the
        hidden-causes mode ``bidirected`` (↔), ``partially-directed`` (o→), ``nondirected``
        (o–o) and ``partially-undirected`` (o–).
    reason : str
        Why the arrowhead(s) and tail(s) are there ("" for an undirected edge).
    reason_kind : str
        ``collider``, ``rule 1`` … ``rule 10``, ``discriminating path``, ``knowledge``,
        ``stage order``, ``contested`` or ``""``.
    max_pvalue : float
        The largest p-value among the tests of this pair (NaN if none ran): the closest the
        data came to removing it.
    tests : int
        Number of tests run on this pair.
    locked : bool
        The pair is locked by knowledge (kept whatever the data say).
    untestable : str
        Why the data could not settle this pair ("" when they could): at least one of its
        tests returned no p-value (NaN). Such a test never counts as evidence either way,
        so the edge is kept because nothing removed it, not because the data showed a
        dependence. The text comes from the test (e.g. "too few rows to test given {z}"),
        or is "the test returned no p-value".
    from_reason, to_reason : str
        In the hidden-causes mode, why the mark at each end is an arrowhead or a tail ("" for
        a circle, which means "not determined").
    from_mark, to_mark : str
        The marks at ``source`` and ``target`` (derived from ``kind``).
    """

    source: str
    target: str
    kind: str
    reason: str = ""
    reason_kind: str = ""
    max_pvalue: float = float("nan")
    tests: int = 0
    locked: bool = False
    untestable: str = ""
    from_reason: str = ""
    to_reason: str = ""
    from_mark: str = field(init=False)
    to_mark: str = field(init=False)

    def __post_init__(self):
        if self.kind not in KIND_MARKS:
            raise ValueError(f"edge kind {self.kind!r} is not one of {EDGE_KINDS}")
        marks = KIND_MARKS[self.kind]
        object.__setattr__(self, "from_mark", marks[0])
        object.__setattr__(self, "to_mark", marks[1])

    @classmethod
    def from_marks(cls, source: str, target: str, from_mark: str, to_mark: str,
                   **fields) -> "Edge":
        """The edge ``source from_mark–to_mark target``, its ends swapped when needed so that
        it reads as one of :data:`EDGE_KINDS` (e.g. arrow/circle becomes ``target o→ source``).

        Raises
        ------
        ValueError
            If a mark is not one of ``tail``, ``arrow``, ``circle``.
        """
        for m in (from_mark, to_mark):
            if m not in MARKS:
                raise ValueError(f"edge mark {m!r} is not one of {MARKS}")
        kind = _MARKS_KIND.get((from_mark, to_mark))
        if kind is None:  # read from the other end
            source, target = target, source
            from_mark, to_mark = to_mark, from_mark
            fields["from_reason"], fields["to_reason"] = (fields.get("to_reason", ""),
                                                          fields.get("from_reason", ""))
            kind = _MARKS_KIND[(from_mark, to_mark)]
        return cls(source, target, kind, **fields)

    @property
    def pair(self) -> frozenset[str]:
        return frozenset((self.source, self.target))

    def mark_at(self, variable: str) -> str:
        """The mark at ``variable``'s end of the edge."""
        if variable == self.source:
            return self.from_mark
        if variable == self.target:
            return self.to_mark
        raise KeyError(f"{variable!r} is not an end of {self.arrow()}")

    def arrow(self) -> str:
        """The edge as text: ``a → b``, ``a — b``, ``a ?– b (contested)`` (a contested pair
        has no heads: "?" says the data tried to orient it both ways; never ``↔``, which
        reads as a hidden common cause), or a hidden-causes mark (``a ↔ b``, ``a o→ b``,
        ``a o–o b``, ``a o– b``)."""
        text = f"{self.source} {_KIND_TEXT[self.kind]} {self.target}"
        return text + " (contested)" if self.kind == "contested" else text

    def meaning(self) -> str:
        """What the marks of this edge say, in plain words, with its own variable names."""
        return f"{self.arrow()}: " + _MEANING_TEMPLATES[self.kind].format(a=self.source,
                                                                          b=self.target)

    def to_dict(self) -> dict:
        out = {"from": self.source, "to": self.target, "kind": self.kind,
               "from_mark": self.from_mark, "to_mark": self.to_mark,
               "reason": self.reason, "reason_kind": self.reason_kind,
               "max_pvalue": _num(self.max_pvalue), "tests": self.tests,
               "locked": self.locked, "untestable": bool(self.untestable),
               "untestable_reason": self.untestable}
        if self.from_reason or self.to_reason:
            out.update(from_reason=self.from_reason, to_reason=self.to_reason)
        return out


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


@dataclass(frozen=True, repr=False)
class PairEvidence:
    """Everything the search knows about one pair (prints as :meth:`as_text`; a notebook
    shows it as a table)."""

    a: str
    b: str
    adjacent: bool
    edge: Edge | None
    removal: Removal | None
    tests: tuple[TestRecord, ...]
    triples: tuple[Mapping, ...]
    #: The tests of the whole result whose rows were left out of its saved file (0 when the
    #: evidence is whole): ``tests`` is then empty whatever was run on the pair.
    omitted: int = 0

    @property
    def omitted_text(self) -> str:
        """"evidence omitted (N tests, too large to store)", or "" when the evidence is whole."""
        return (f"evidence omitted ({self.omitted:,} tests, {OMITTED_REASON})"
                if self.omitted else "")

    @property
    def untestable(self) -> str:
        """Why the data could not settle this pair ("" when they could)."""
        return self.edge.untestable if self.edge is not None else ""

    def as_text(self) -> str:
        """The pair's evidence as the window's Inspector shows it: the edge (or its absence),
        why each arrowhead is there, what removed it, the triples through it, every test."""
        lines = [f"Pair {self.a}, {self.b}: " + (f"edge {self.edge.arrow()}" if self.edge
                                                  else "not adjacent")]
        if self.edge and self.edge.locked:
            lines.append("  locked by knowledge: kept whatever the data say")
        if self.edge and self.edge.untestable:
            lines.append(f"  untestable: {self.edge.untestable}; a test without a p-value "
                         f"counts neither for nor against the edge, which is kept and marked")
        if self.edge and self.edge.reason:
            lines.append(f"  orientation: {self.edge.reason}")
        elif self.edge and self.edge.kind == "undirected":
            lines.append("  orientation: not determined by the data")
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
        for t in self.triples:
            reason = t.get("reason", "")
            lines.append(f"  triple {t.get('x')} — {t.get('z')} — {t.get('y')}: "
                         f"{t.get('decision', '')}" + (f" ({reason})" if reason else ""))
        if self.omitted:
            kept = (f"; kept: the largest p-value {_pvalue_text(self.edge.max_pvalue)} over "
                    f"the pair's {self.edge.tests} test(s)" if self.edge else
                    "; kept: the separating set and p-value above" if self.removal else "")
            lines.append(f"  tests: {self.omitted_text}{kept}; re-run the search to see them")
        elif not self.tests:
            lines.append("  no test was run on this pair")
        for t in self.tests:
            p = "no p-value (untestable)" if t.pvalue != t.pvalue else f"p = {t.pvalue:.4g}"
            lines.append(f"  test given {_set_text(t.given)}: {p}")
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        """The evidence as an HTML table, for notebooks."""
        from html import escape
        head = escape(f"{self.a} — {self.b}: "
                      + (self.edge.arrow() if self.edge else "not adjacent"))
        parts = [f"<p><strong>{head}</strong></p>"]
        if self.edge and self.edge.reason:
            parts.append(f"<p>orientation: {escape(self.edge.reason)}</p>")
        if self.removal:
            if self.removal.by == "test":
                parts.append(f"<p>removed: independent given "
                             f"{escape(_set_text(self.removal.separating_set))} "
                             f"(p = {self.removal.pvalue:.3g})</p>")
            else:
                parts.append("<p>removed: forbidden by knowledge (the data gave no "
                             "separating set)</p>")
        rows = "".join(f"<tr><td>{escape(_set_text(t.given))}</td><td>{t.pvalue:.4g}</td></tr>"
                       for t in self.tests)
        if rows:
            parts.append(f"<table><tr><th>given</th><th>p-value</th></tr>{rows}</table>")
        elif self.omitted:
            parts.append(f"<p>tests: {escape(self.omitted_text)}</p>")
        return "".join(parts)

    def __str__(self) -> str:
        return self.as_text()

    __repr__ = __str__


def _pvalue_text(p) -> str:
    return "none" if p != p else f"{p:.3g}"


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
    evidence_omitted : int
        For a result read from a file whose evidence rows were left out because of their size
        (see :meth:`to_dict`): how many tests they were; ``tests`` is then empty. 0 otherwise.
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
    evidence_omitted: int = 0

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
        return PairEvidence(a, b, edge is not None, edge, removal, tests, triples,
                            self.evidence_omitted)

    def to_networkx(self) -> nx.DiGraph:
        """A DiGraph: a directed edge is one arc; every other kind is two opposite arcs. Every
        arc carries ``kind``, ``reason``, ``max_pvalue`` and the marks at its own ends
        (``from_mark`` at the arc's tail, ``to_mark`` at its head)."""
        g = nx.DiGraph()
        g.add_nodes_from(self.variables)
        for e in self.edges:
            attrs = {"kind": e.kind, "reason": e.reason, "max_pvalue": e.max_pvalue}
            g.add_edge(e.source, e.target, from_mark=e.from_mark, to_mark=e.to_mark, **attrs)
            if e.kind != "directed":
                g.add_edge(e.target, e.source, from_mark=e.to_mark, to_mark=e.from_mark,
                           **attrs)
        return g

    def _repr_svg_(self) -> str:
        """The diagram as SVG text, for notebooks."""
        import io

        import matplotlib

        from .drawing import draw_result
        buffer = io.StringIO()
        with matplotlib.rc_context({"svg.fonttype": "none"}):
            draw_result(self).savefig(buffer, format="svg")
        text = buffer.getvalue()
        return text[text.find("<svg"):]

    def _repr_html_(self) -> str:
        """The diagram followed by the summary table and the cautions, for notebooks."""
        return f"<div>{self._repr_svg_()}</div>{self.summary().as_html()}"

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
    def to_dict(self, *, indent: int | None = 1) -> dict:
        """The JSON document (plain dicts and lists).

        When the evidence rows would make the document, written at ``indent``, larger than
        :data:`MAX_SAVED_BYTES` (the reader's limit), they are left out:
        ``"evidence": {"tests": [], "omitted": N, "omitted_reason": "too large to store"}``
        and a note says so; every other part (edges with their largest p-value and test count,
        removed pairs with their separating sets, triples, counts) is kept.
        """
        doc = {
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
            "evidence": {"tests": []},
            "counts": dict(self.counts),
            "timings": dict(self.timings),
            "data": dict(self.data),
            "software": dict(self.software),
            "seed": self.seed,
            "undecided": [list(p) for p in self.undecided],
            "assumptions": list(self.assumptions()),
        }
        omitted = self.evidence_omitted
        if len(self.tests) and not omitted:
            limit = MAX_SAVED_BYTES - 64  # 64: the list's brackets and the final newline
            size = self.tests.json_bytes(indent)
            if size > limit or size + _json_bytes(doc, indent) > limit:
                omitted = len(self.tests)
            else:
                doc["evidence"]["tests"] = [{"x": x, "y": y, "given": list(s), "pvalue": _num(p)}
                                            for x, y, s, p in self.tests]
        if omitted:
            doc["evidence"] = {"tests": [], "omitted": omitted, "omitted_reason": OMITTED_REASON}
            if omitted_note(omitted) not in doc["notes"]:
                doc["notes"].append(omitted_note(omitted))
        return doc

    def assumptions(self) -> tuple[str, ...]:
        """The assumptions and cautions of this result's search mode."""
        return HIDDEN_CAUSES_ASSUMPTIONS if self.settings.hidden_causes else ASSUMPTIONS

    def to_json(self, path=None, *, indent: int | None = 1) -> str:
        """The JSON text (:meth:`to_dict`); also written to ``path`` when given (atomically,
        without a second copy of the text). :meth:`write_json` writes a file without building
        the text at all."""
        text = _dumps(self.to_dict(indent=indent), indent)
        if path is not None:
            with atomic_write(path) as tmp, open(tmp, "w", encoding="utf-8") as handle:
                for start in range(0, len(text), 1 << 20):  # a piece at a time
                    handle.write(text[start:start + (1 << 20)])
                handle.write("\n")
        return text

    def write_json(self, path, *, indent: int | None = 1) -> int:
        """Write the JSON document to ``path`` atomically, streamed piece by piece (the text
        is never held whole); the file is the same as :meth:`to_json`'s.

        Returns
        -------
        int
            The number of tests whose rows were left out because of their size (see
            :meth:`to_dict`); 0 when the evidence was written whole.
        """
        doc = self.to_dict(indent=indent)
        with atomic_write(path) as tmp, open(tmp, "w", encoding="utf-8") as handle:
            json.dump(doc, handle, indent=indent, ensure_ascii=False)
            handle.write("\n")
        return doc["evidence"].get("omitted", 0)

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
    text = read_text_checked(path, what="result file", error=ResultFormatError)
    doc = parse_json_checked(text, source=str(path), error=ResultFormatError)
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
            if not all(isinstance(e.get(k, ""), str) for k in ("reason", "reason_kind")):
                fail(f"edge {e['from']!r} — {e['to']!r}: 'reason' must be text")
            untestable = str(e.get("untestable_reason") or "")
            if e.get("untestable") and not untestable:
                untestable = NO_PVALUE
            marks = KIND_MARKS[e["kind"]]
            given = (e.get("from_mark", marks[0]), e.get("to_mark", marks[1]))
            if given != marks:
                fail(f"edge {e['from']!r} — {e['to']!r} of kind {e['kind']!r} has marks "
                     f"{given[0]}/{given[1]}, but that kind has {marks[0]}/{marks[1]}")
            edges.append(Edge(e["from"], e["to"], e["kind"], e.get("reason", ""),
                              e.get("reason_kind", ""), _float(e.get("max_pvalue")),
                              int(e.get("tests", 0)), bool(e.get("locked", False)),
                              untestable, str(e.get("from_reason", "")),
                              str(e.get("to_reason", ""))))
        pairs = [frozenset((e.source, e.target)) for e in edges]
        if len(set(pairs)) != len(pairs):
            fail("two edges join the same pair")
        removed = []
        for r in doc["removed"]:
            if r["a"] not in known or r["b"] not in known:
                fail(f"removed pair {r['a']!r} — {r['b']!r} names an unknown variable")
            sep = r.get("separating_set")
            if sep is not None and not (isinstance(sep, list) and set(sep) <= known):
                fail(f"removed pair {r['a']!r} — {r['b']!r}: the separating set must be a "
                     "list of known variables or null")
            if r.get("by", "test") not in ("test", "knowledge"):
                fail(f"removal reason {r.get('by')!r} is not 'test' or 'knowledge'")
            removed.append(Removal(r["a"], r["b"], None if sep is None else tuple(sep),
                                   _float(r.get("pvalue")), r.get("by", "test"),
                                   bool(r.get("forbidden", False))))
        rows = doc["evidence"]["tests"]
        if not isinstance(rows, list):
            fail("'evidence.tests' must be a list of test rows")
        omitted = doc["evidence"].get("omitted", 0)
        if isinstance(omitted, bool) or not isinstance(omitted, int) or omitted < 0:
            fail("'evidence.omitted' must be a whole number of tests (0 or more)")
        if omitted and rows:
            fail("'evidence' has test rows and says they were omitted")
        tests = TestLog.from_rows(_test_row(t, known, fail) for t in rows)
        extras = _checked_extras(doc, known, fail)
        return SearchResult(
            variables=tuple(variables), settings=settings, knowledge=knowledge,
            edges=tuple(edges), removed=tuple(removed), tests=tests,
            evidence_omitted=omitted, **extras)
    except ResultFormatError:
        raise
    except (KeyError, TypeError, ValueError, AttributeError, IndexError) as err:
        fail(f"malformed content ({type(err).__name__}: {err})")


def _is_number(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _counts_ok(counts: dict) -> bool:
    """The values of ``counts``: numbers, except ``levels`` (a list of tables of numbers)
    and ``rules_fired`` (a table of numbers)."""
    def numbers(d):
        return isinstance(d, dict) and all(_is_number(x) for x in d.values())
    for key, value in counts.items():
        if key == "levels":
            ok = isinstance(value, list) and all(numbers(x) for x in value)
        elif key == "rules_fired":
            ok = numbers(value)
        else:
            ok = _is_number(value)
        if not ok:
            return False
    return True


def _checked_extras(doc: dict, known: set, fail) -> dict:
    """The optional fields of a result document, each checked for its shape."""
    def listed(key, check, what):
        value = doc.get(key, [])
        if not isinstance(value, list) or not all(check(v) for v in value):
            fail(f"'{key}' must be a list of {what}")
        return tuple(value)

    def table(key, check=lambda v: True):
        value = doc.get(key, {})
        if not isinstance(value, dict) or not all(check(v) for v in value.values()):
            fail(f"'{key}' must be a table of values")
        return value

    def is_triple(t):
        return (isinstance(t, dict) and all(isinstance(t.get(k), str) for k in
                                            ("x", "y", "z", "decision"))
                and {t["x"], t["y"], t["z"]} <= known
                and isinstance(t.get("reason", ""), str))

    if isinstance(doc.get("counts", {}), dict) and not _counts_ok(doc.get("counts", {})):
        fail("'counts' must hold numbers (and 'levels' a list of tables of numbers)")
    seed = doc.get("seed")
    if seed is not None and (isinstance(seed, bool) or not isinstance(seed, int)):
        fail("'seed' must be a whole number or null")
    return {"triples": listed("triples", is_triple, "triples {x, z, y, decision, reason} "
                                                    "of known variables"),
            "conflicts": listed("conflicts", lambda v: isinstance(v, str), "texts"),
            "notes": listed("notes", lambda v: isinstance(v, str), "texts"),
            "counts": table("counts"),
            "timings": table("timings", _is_number),
            "data": table("data"), "software": table("software", lambda v: isinstance(v, str)),
            "seed": seed,
            "undecided": tuple(tuple(p) for p in listed(
                "undecided", lambda p: isinstance(p, list) and len(p) == 2
                and set(p) <= known, "pairs of known variables"))}


def _test_row(t, known, fail) -> tuple:
    """One evidence row: ``{"x", "y", "given", "pvalue"}``, or the older bare list
    ``[x, y, given, pvalue]`` of files written before the rows carried keys; its variables
    must be known."""
    if isinstance(t, dict):
        x, y, given, p = t["x"], t["y"], t["given"], t["pvalue"]
    elif isinstance(t, list) and len(t) == 4:
        x, y, given, p = t
    else:
        fail("'evidence.tests' rows must be {x, y, given, pvalue}")
    if not (isinstance(given, list) and {x, y} <= known and set(given) <= known):
        fail("'evidence.tests' rows must name known variables, 'given' as a list")
    return x, y, tuple(given), _float(p)


def _float(x) -> float:
    return float("nan") if x is None else float(x)


_AUTO_GROUP = re.compile(r"^auto: (.*) tested by (.+?) \((.*)\)$")


def _summarise_auto(notes: list[str]) -> list[str]:
    """Fold ``auto``'s one-line-per-group notes (which pairs each test decided) into one line
    of counts per test and reason, placed where the first of them was; the result's JSON
    keeps the full list."""
    per_test: dict[str, int] = {}
    reasons: dict[str, str] = {}
    out, at = [], None
    for note in notes:
        found = _AUTO_GROUP.match(note)
        if not found:
            out.append(note)
            continue
        pairs = found.group(1).count(" — ")
        for part in found.group(3).split("; "):
            name, _, why = part.partition(": ")
            reasons.setdefault(name, why)
        key = found.group(2)
        per_test[key] = per_test.get(key, 0) + pairs
        if at is None:
            at = len(out)
            out.append("")
    if at is not None:
        parts = [f"{count} by {key}" for key, count in
                 sorted(per_test.items(), key=lambda kv: -kv[1])]
        why = "; ".join(f"{name}: {text}" for name, text in reasons.items())
        out[at] = (f"auto: pairs tested {', '.join(parts)} ({why}); the pair-by-pair list is in "
                   f"the result's JSON (notes)")
    return out


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
            "hidden_causes": r.settings.hidden_causes,
            "edges": [[e.source, e.target, e.kind, e.reason] for e in r.edges],
            "marks": self.mark_meanings(),
            "counts": dict(r.counts),
            "notes": self.notes(),
        }

    def mark_meanings(self) -> list[str]:
        """What each kind of mark in this result means, in plain words (the hidden-causes
        mode; empty for a result without circle or bidirected marks)."""
        kinds = {e.kind for e in self.result.edges}
        if not (kinds - {"directed", "undirected", "contested"}
                or self.result.settings.hidden_causes):
            return []
        order = ("directed", "bidirected", "partially-directed", "nondirected",
                 "partially-undirected", "undirected")
        return [MARK_MEANINGS[k] for k in order if k in kinds]

    def notes(self) -> list[str]:
        """Conflicts and notes, each once, in order; then a line on untestable pairs."""
        r = self.result
        notes = _summarise_auto(list(dict.fromkeys(list(r.conflicts) + list(r.notes))))
        nan_tests = r.tests.count_nan()
        if nan_tests:
            shown = [e for e in r.edges if e.untestable]
            pairs = ", ".join(f"{e.source} — {e.target}" for e in shown[:6]) + \
                (", ..." if len(shown) > 6 else "")
            notes.append(f"{nan_tests} test(s) returned no p-value; they count neither for nor "
                         f"against an edge" + (f"; {len(shown)} edge(s) kept untestable: {pairs}"
                                               if shown else ""))
        return notes

    def isolated(self) -> list[str]:
        """Variables with no edge, in the result's order."""
        touched = {v for e in self.result.edges for v in (e.source, e.target)}
        return [v for v in self.result.variables if v not in touched]

    def counts_line(self) -> str:
        """How many tests ran, and how many of those same tests came from the cache."""
        c = self.result.counts
        tests = c.get("tests", len(self.result.tests))
        line = f"{tests} tests"
        if "tests_from_cache" in c:
            line += (f" ({c.get('tests_computed', 0)} computed, {c.get('tests_from_cache', 0)} "
                     f"from the cache)")
        extra = c.get("collider_tests_computed", 0) + c.get("collider_tests_from_cache", 0)
        if extra:
            line += (f"; {extra} more to gather separating sets for the "
                     f"{self.result.settings.collider_rule} collider rule "
                     f"({c.get('collider_tests_from_cache', 0)} from the cache)")
        if self.result.evidence_omitted:
            line += (f"; evidence omitted ({self.result.evidence_omitted:,} tests, "
                     f"{OMITTED_REASON})")
        return line

    def as_text(self, *, assumptions: bool = True) -> str:
        """The summary as plain text; ``assumptions=False`` leaves out the closing paragraph
        of assumptions (the command line prints a short caution instead)."""
        r = self.result
        c = r.counts
        head = (f"Edgewise search: {len(r.variables)} variables"
                + (f", {r.data.get('rows')} rows" if r.data.get("rows") else "")
                + f"; test {r.settings.test}, alpha {r.settings.alpha:g}, depth "
                f"{'unlimited' if r.settings.max_depth is None else r.settings.max_depth}, "
                f"collider rule {r.settings.collider_rule}"
                + ("; hidden common causes allowed (FCI)" if r.settings.hidden_causes else ""))
        if r.settings.hidden_causes:
            shown = [(k, c.get(k, 0)) for k in ("directed", "bidirected", "partially-directed",
                                                 "nondirected", "partially-undirected",
                                                 "undirected")]
            tally = ", ".join(f"{n} {k}" for k, n in shown if n or k == "directed")
        else:
            tally = (f"{c.get('directed', 0)} directed, {c.get('undirected', 0)} undirected, "
                     f"{c.get('contested', 0)} contested")
        if c.get("untestable"):
            tally += f", {c.get('untestable', 0)} untestable"
        lines = [head, f"{len(r.edges)} edges: {tally}; {self.counts_line()}", ""]
        width = max([len(e.arrow()) for e in r.edges] + [4])
        lines.append(f"{'edge':<{width}}  {'max p':>9}  why")
        for e in r.edges:
            p = "-" if e.max_pvalue != e.max_pvalue else f"{e.max_pvalue:.3g}"
            why = e.reason or ("no mark determined by the data" if e.kind == "nondirected"
                               else "direction not determined by the data")
            if e.untestable:
                why = f"untestable ({e.untestable}); " + why
            if e.locked:
                why = "locked; " + why
            lines.append(f"{e.arrow():<{width}}  {p:>9}  {why}")
        if not r.edges:
            lines.append("(no edges)")
        lines += self.legend_lines()
        meanings = self.mark_meanings()
        if meanings:
            lines += ["", "What the marks mean (an end with a circle is one the data could not "
                          "decide):"] + [f"  {m}" for m in meanings]
        alone = self.isolated()
        if alone:
            lines += ["", f"Isolated (no edge): {', '.join(alone)}"]
        notes = self.notes()
        if notes:
            lines += ["", "Notes:"] + [f"[{i}] {n}" for i, n in enumerate(notes, 1)]
        if assumptions:
            lines += ["", "Assumptions: " + " ".join(r.assumptions())]
        return "\n".join(lines)

    def legend_lines(self) -> list[str]:
        """One line per term of the table: "max p", then each reason word that appears."""
        r = self.result
        lines = ["", "max p: the largest p-value of the pair's tests, the closest the data came "
                     "to removing the edge (kept while every test gives p <= alpha "
                     f"{r.settings.alpha:g})."]
        kinds = {e.reason_kind for e in r.edges}
        explain = [
            ("collider", "collider" in kinds,
             "collider: two non-adjacent causes both point into it (the middle variable is not "
             "in their separating set)."),
            ("rule", any(k.startswith("rule") for k in kinds),
             "rule 1-4: forced by Meek's rules so that no new collider or cycle appears."),
            ("knowledge", "knowledge" in kinds or any(e.locked for e in r.edges),
             "knowledge / locked: set by the knowledge file, not by the data."),
            ("stage order", "stage order" in kinds,
             "stage order: a later stage cannot cause an earlier one."),
            ("contested", "contested" in kinds,
             "contested (?–): colliders tried to orient the pair both ways; left open."),
            ("untestable", any(e.untestable for e in r.edges),
             "untestable: a test returned no p-value; the edge is kept, not confirmed."),
            ("not determined", any(not e.reason for e in r.edges),
             "direction not determined by the data: either way fits (same equivalence "
             "class)."),
        ]
        return lines + [text for _, shown, text in explain if shown]

    def as_html(self) -> str:
        from html import escape
        r = self.result
        rows = "".join(
            f"<tr><td>{escape(e.arrow())}</td><td>{'' if e.max_pvalue != e.max_pvalue else f'{e.max_pvalue:.3g}'}"
            f"</td><td>{escape(e.reason or 'direction not determined by the data')}</td></tr>"
            for e in r.edges)
        notes = "".join(f"<li>{escape(n)}</li>" for n in self.notes())
        assumptions = "".join(f"<li>{escape(a)}</li>" for a in r.assumptions())
        meanings = "".join(f"<li>{escape(m)}</li>" for m in self.mark_meanings())
        words = "".join(f"<br>{escape(w)}" for w in self.legend_lines() if w)
        alone = self.isolated()
        return (f"<p>{len(r.variables)} variables; test {escape(r.settings.test)}, "
                f"α = {r.settings.alpha:g}</p><table><tr><th>edge</th><th>max p</th>"
                f"<th>why</th></tr>{rows}</table>"
                + (f"<p><small>{words[4:]}</small></p>" if words else "")
                + (f"<p>What the marks mean:</p><ul>{meanings}</ul>" if meanings else "")
                + (f"<p>Isolated (no edge): {escape(', '.join(alone))}</p>" if alone else "")
                + (f"<ol>{notes}</ol>" if notes else "")
                + f"<p>Assumptions and cautions:</p><ul>{assumptions}</ul>")

    def __str__(self) -> str:
        return self.as_text()

    __repr__ = __str__

    _repr_html_ = as_html
