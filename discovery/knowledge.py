"""Background knowledge: what the expert knows before the data speak.

- **locked edge** ``(a, b)``: a and b must be adjacent; the direction is left to the search.
- **locked direction** ``(a, b)``: the edge a → b must be present.
- **forbidden edge** ``(a, b)``: a and b must not be adjacent.
- **forbidden direction** ``(a, b)``: a → b may not appear (b → a may).
- **stages**: an ordered list of groups of variables; nothing in a later stage causes anything
  in an earlier one.

Knowledge enters the search as in Meek (1995), "Causal inference and causal explanation with
background knowledge", UAI: forbidden pairs are never adjacent, locked pairs never removed, and
required orientations are applied before colliders, then the orientation rules run to a fixed
point.

The knowledge file is TOML (or JSON with the same keys), written by hand::

    format = "edgewise-knowledge"
    version = 1
    stages = [["age", "sex"], ["exposure"], ["outcome"]]
    locked = [["a", "b"]]
    locked_directions = [["c", "d"]]
    forbidden = [["e", "f"]]
    forbidden_directions = [["g", "h"]]
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterable

import networkx as nx

from .exceptions import KnowledgeError
from .files import parse_json_checked, parse_toml_checked, read_text_checked, write_text_atomic

__all__ = ["Knowledge", "read_knowledge", "write_knowledge"]

_PAIR_FIELDS = ("locked", "locked_directions", "forbidden", "forbidden_directions")
_FORMAT = "edgewise-knowledge"


def _pairs(values, field_name) -> tuple[tuple[str, str], ...]:
    if values is not None and not isinstance(values, (list, tuple, set, frozenset)):
        raise KnowledgeError(f"'{field_name}' must be a list of pairs like [[\"a\", \"b\"]]; "
                             f"got {values!r}")
    out = []
    for item in values or ():
        if isinstance(item, str):
            raise KnowledgeError(f"'{field_name}' entries must be pairs like [\"a\", \"b\"]; "
                                 f"got the string {item!r}")
        if not isinstance(item, (list, tuple)):
            raise KnowledgeError(f"'{field_name}' entries must be pairs like [\"a\", \"b\"]; "
                                 f"got {item!r}")
        item = tuple(item)
        if len(item) != 2 or not all(isinstance(v, str) for v in item):
            raise KnowledgeError(f"'{field_name}' entries must be pairs of variable names; "
                                 f"got {list(item)!r}")
        if item[0] == item[1]:
            raise KnowledgeError(f"'{field_name}' pairs two different variables; "
                                 f"got {list(item)!r}")
        out.append(item)
    return tuple(sorted(set(out)))


@dataclass(frozen=True)
class Knowledge:
    """What the expert knows, as immutable sets of pairs and an ordered list of stages.

    Parameters
    ----------
    locked, locked_directions, forbidden, forbidden_directions : iterable of (str, str)
        Pairs of variable names (see the module docstring).
    stages : iterable of iterable of str
        Ordered groups; a later stage never causes an earlier one.

    Raises
    ------
    KnowledgeError
        If the knowledge contradicts itself: a pair both locked and forbidden, locked
        directions (with stage order) forming a cycle, a variable in two stages, a locked
        direction against the stage order or against a forbidden direction.
    """

    locked: tuple[tuple[str, str], ...] = ()
    locked_directions: tuple[tuple[str, str], ...] = ()
    forbidden: tuple[tuple[str, str], ...] = ()
    forbidden_directions: tuple[tuple[str, str], ...] = ()
    stages: tuple[tuple[str, ...], ...] = field(default=())

    def __post_init__(self):
        for name in _PAIR_FIELDS:
            object.__setattr__(self, name, _pairs(getattr(self, name), name))
        stages = []
        if self.stages is not None and not isinstance(self.stages, (list, tuple)):
            raise KnowledgeError("'stages' must be a list of groups, each a list of names; "
                                 f"got {self.stages!r}")
        for group in self.stages or ():
            if isinstance(group, str):
                raise KnowledgeError("'stages' is a list of groups, each a list of names; "
                                     f"got the string {group!r} as a group")
            if not isinstance(group, (list, tuple)) or not all(isinstance(v, str)
                                                                for v in group):
                raise KnowledgeError("'stages' is a list of groups, each a list of names like "
                                     f"[\"age\", \"sex\"]; got {group!r} as a group")
            stages.append(tuple(group))
        object.__setattr__(self, "stages", tuple(g for g in stages if g))
        self._check_consistent()

    # -- derived views ------------------------------------------------------------------------
    @property
    def variables(self) -> frozenset[str]:
        """Every variable the knowledge names."""
        names = {v for f in _PAIR_FIELDS for pair in getattr(self, f) for v in pair}
        return frozenset(names | {v for g in self.stages for v in g})

    def stage_of(self, variable: str) -> int | None:
        """Index of the variable's stage, or None when it is in no stage."""
        for i, group in enumerate(self.stages):
            if variable in group:
                return i
        return None

    def required_adjacent(self) -> frozenset[frozenset[str]]:
        """Pairs that must be adjacent (locked edges and locked directions)."""
        return frozenset(frozenset(p) for p in self.locked + self.locked_directions)

    def forbidden_adjacent(self) -> frozenset[frozenset[str]]:
        """Pairs that must not be adjacent."""
        return frozenset(frozenset(p) for p in self.forbidden)

    def is_direction_forbidden(self, a: str, b: str) -> str | None:
        """Why a → b may not appear ('forbidden direction', 'stage order'), or None."""
        if (a, b) in self.forbidden_directions:
            return "forbidden direction"
        sa, sb = self.stage_of(a), self.stage_of(b)
        if sa is not None and sb is not None and sa > sb:
            return "stage order"
        return None

    def is_empty(self) -> bool:
        return not (any(getattr(self, f) for f in _PAIR_FIELDS) or self.stages)

    # -- edits return new records -------------------------------------------------------------
    def with_pair(self, field_name: str, a: str, b: str) -> "Knowledge":
        """A copy with (a, b) added to ``field_name`` and removed from the other pair fields."""
        if field_name not in _PAIR_FIELDS:
            raise KnowledgeError(f"unknown knowledge field {field_name!r}; "
                                 f"choose one of {list(_PAIR_FIELDS)}")
        cleared = self.without_pair(a, b)
        values = {f: getattr(cleared, f) for f in _PAIR_FIELDS}
        values[field_name] = values[field_name] + ((a, b),)
        return Knowledge(**values, stages=self.stages)

    def without_pair(self, a: str, b: str) -> "Knowledge":
        """A copy with every statement about the pair {a, b} removed (stages kept)."""
        pair = {a, b}
        values = {f: tuple(p for p in getattr(self, f) if set(p) != pair) for f in _PAIR_FIELDS}
        return Knowledge(**values, stages=self.stages)

    def with_stages(self, stages: Iterable[Iterable[str]]) -> "Knowledge":
        values = {f: getattr(self, f) for f in _PAIR_FIELDS}
        return Knowledge(**values, stages=tuple(tuple(g) for g in stages))

    # -- checks -------------------------------------------------------------------------------
    def _check_consistent(self):
        seen: dict[str, int] = {}
        for i, group in enumerate(self.stages):
            for v in group:
                if v in seen:
                    raise KnowledgeError(f"variable {v!r} is in two stages ({seen[v] + 1} and "
                                         f"{i + 1}); put it in one")
                seen[v] = i
        both = self.required_adjacent() & self.forbidden_adjacent()
        if both:
            a, b = sorted(next(iter(sorted(both, key=sorted))))
            raise KnowledgeError(f"the pair ({a!r}, {b!r}) is both locked and forbidden; "
                                 "keep one statement")
        for a, b in self.locked_directions:
            why = self.is_direction_forbidden(a, b)
            if why:
                raise KnowledgeError(f"the locked direction {a!r} -> {b!r} goes against the "
                                     f"{why}; remove one of the two statements")
        arrows = nx.DiGraph(self.locked_directions)
        try:
            cycle = nx.find_cycle(arrows)
        except nx.NetworkXNoCycle:
            cycle = None
        if cycle:
            path = " -> ".join([cycle[0][0]] + [v for _, v in cycle])
            raise KnowledgeError(f"locked directions form a cycle ({path}); remove one of them")
        # a chain of locked directions may not lead from a later stage back to an earlier one
        for start in arrows.nodes:
            s_start = self.stage_of(start)
            if s_start is None:
                continue
            for end in nx.descendants(arrows, start):
                s_end = self.stage_of(end)
                if s_end is not None and s_end < s_start:
                    path = " -> ".join(nx.shortest_path(arrows, start, end))
                    raise KnowledgeError(
                        f"locked directions {path} lead from stage {s_start + 1} back to "
                        f"stage {s_end + 1}, against the stage order; remove one statement")

    def check_variables(self, variables: Iterable[str], *, source: str = "knowledge") -> None:
        """Raise KnowledgeError naming any variable the data do not have."""
        known = set(variables)
        unknown = sorted(self.variables - known)
        if unknown:
            raise KnowledgeError(f"{source}: unknown variable(s) {unknown}; the data have "
                                 f"{sorted(known)[:12]}{' ...' if len(known) > 12 else ''}; "
                                 "fix the names or drop those entries")

    @classmethod
    def from_diagram(cls, diagram, *, directions: bool = True,
                     forbid_absent: bool = False) -> "Knowledge":
        """Knowledge that locks the edges of a diagram (a result, a networkx DiGraph or a
        .json/.dot/.graphml/.csv file); see :func:`discovery.exchange.knowledge_from_diagram`."""
        from .exchange import knowledge_from_diagram
        return knowledge_from_diagram(diagram, directions=directions,
                                      forbid_absent=forbid_absent)

    # -- serialisation ------------------------------------------------------------------------
    def to_dict(self) -> dict:
        out = {f: [list(p) for p in getattr(self, f)] for f in _PAIR_FIELDS}
        out["stages"] = [list(g) for g in self.stages]
        return out

    @classmethod
    def from_dict(cls, values: dict, *, source: str = "knowledge") -> "Knowledge":
        if not isinstance(values, dict):
            raise KnowledgeError(f"{source}: expected a table of knowledge fields")
        values = dict(values)
        fmt = values.pop("format", _FORMAT)
        version = values.pop("version", 1)
        if fmt != _FORMAT:
            raise KnowledgeError(f"{source}: 'format' must be {_FORMAT!r}; got {fmt!r}")
        if version != 1:
            raise KnowledgeError(f"{source}: knowledge file version {version!r} is not "
                                 "supported (this Edgewise reads version 1)")
        unknown = sorted(set(values) - set(_PAIR_FIELDS) - {"stages"})
        if unknown:
            raise KnowledgeError(f"{source}: unknown field(s) {unknown}; allowed: "
                                 f"{list(_PAIR_FIELDS) + ['stages']}")
        try:
            return cls(**values)
        except KnowledgeError as err:
            raise KnowledgeError(f"{source}: {err}") from None
        except TypeError as err:
            raise KnowledgeError(f"{source}: {err}") from None


def read_knowledge(path) -> Knowledge:
    """Read a knowledge file (TOML, or JSON when the name ends in .json).

    Raises
    ------
    KnowledgeError
        If the file is missing, not valid TOML/JSON, or its content is inconsistent.
    """
    path = Path(path)
    text = read_text_checked(path, what="knowledge file", error=KnowledgeError,
                             max_bytes=16 * 2**20)
    note = "; see docs/knowledge.md for the format"
    try:
        if path.suffix.lower() == ".json":
            values = parse_json_checked(text, source=str(path), error=KnowledgeError)
        else:
            values = parse_toml_checked(text, source=str(path), error=KnowledgeError)
    except KnowledgeError as err:
        raise KnowledgeError(f"{err}{note}") from None
    if not isinstance(values, dict):
        raise KnowledgeError(f"{path}: the file must hold a table of keys{note}")
    if values.get("format") == "edgewise-result":
        values = values.get("knowledge", {})  # a result file: reuse the knowledge it ran with
    return Knowledge.from_dict(values, source=str(path))


def write_knowledge(knowledge: Knowledge, path) -> None:
    """Write knowledge as a commented TOML file that :func:`read_knowledge` reads back."""
    def pairs(ps):
        return "[" + ", ".join(f"[{json.dumps(a)}, {json.dumps(b)}]" for a, b in ps) + "]"
    stages = "[" + ", ".join("[" + ", ".join(json.dumps(v) for v in g) + "]"
                             for g in knowledge.stages) + "]"
    text = "\n".join([
        "# Edgewise knowledge file (hand-editable). Each pair is [\"a\", \"b\"].",
        f'format = "{_FORMAT}"',
        "version = 1",
        f"stages = {stages}  # earlier stages are never caused by later ones",
        f"locked = {pairs(knowledge.locked)}  # must be adjacent",
        f"locked_directions = {pairs(knowledge.locked_directions)}  # must be a -> b",
        f"forbidden = {pairs(knowledge.forbidden)}  # must not be adjacent",
        f"forbidden_directions = {pairs(knowledge.forbidden_directions)}  # a -> b may not appear",
        "",
    ])
    write_text_atomic(path, text)
