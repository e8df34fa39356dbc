"""Orientation: knowledge first, then colliders, then Meek's rules to a fixed point.

An *unshielded triple* ``x — z — y`` has ``x`` and ``y`` non-adjacent. If ``z`` is not in the
set that separated ``x`` and ``y``, conditioning on ``z`` must have made them dependent, so
``z`` is a common effect: the triple is a *collider* ``x → z ← y`` (Spirtes, Glymour & Scheines
2000, *Causation, Prediction, and Search*). Three rules decide a triple:

- ``standard``: collider iff ``z`` is not in the recorded separating set;
- ``conservative``: look at every separating set of ``x`` and ``y`` among subsets of their
  neighbours; collider if ``z`` is in none, non-collider if in all, else *ambiguous*
  (Ramsey, Zhang & Spirtes 2006, "Adjacency-faithfulness and conservative causal inference",
  UAI);
- ``majority``: collider if ``z`` is in fewer than half of them, non-collider if in more than
  half, ambiguous at exactly half (Colombo & Maathuis 2014, JMLR 15).

When two colliders put arrowheads on both ends of one edge, the edge is marked **contested**
and left so; it is never resolved by visiting order. Orientation rules do not use contested
edges nor ambiguous triples.

Meek's rules (Meek 1995, "Causal inference and causal explanation with background knowledge",
UAI) then orient what must be oriented to avoid new colliders and cycles:

1. ``a → b — c``, ``a``, ``c`` non-adjacent ⇒ ``b → c``;
2. ``a → c → b`` and ``a — b`` ⇒ ``a → b``;
3. ``a — c → b``, ``a — d → b``, ``c``, ``d`` non-adjacent, ``a — b`` ⇒ ``a → b``;
4. ``a — b``, ``c → d → b``, ``a`` adjacent to ``c`` and ``d``, ``c``, ``b`` non-adjacent
   ⇒ ``a → b``.

Knowledge (locked and forbidden directions, stage order) is applied before colliders; a
collider that contradicts it is refused and reported.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from itertools import combinations
from typing import Callable, Sequence

import numpy as np
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import connected_components

__all__ = ["OrientationOutcome", "orient"]


@dataclass
class OrientationOutcome:
    """Arrowheads with their reasons, triple decisions and conflicts (internal, index space).

    A search on hundreds of variables decides thousands of triples and most reason texts are
    never read, so a reason may be kept as what its text needs (see :meth:`write`): read them
    with :meth:`reason` and :meth:`triple_records`.
    """

    names: Sequence[str] = ()
    key: Callable[[int], int] = int  # a variable's rank in name order
    heads: set[tuple[int, int]] = field(default_factory=set)        # (i, j): head at j
    reasons: dict[tuple[int, int], tuple[str, object]] = field(default_factory=dict)
    triples: list[tuple] = field(default_factory=list)  # (x, z, y, decision, reason)
    conflicts: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    def write(self, why) -> str:
        """A reason's text from what was kept: the text itself; ``(z, sep)``, z is (not) in
        the separating set; or ``(x, z, y, why)``, the collider x → z ← y and why."""
        if isinstance(why, str):
            return why
        names = self.names
        if len(why) == 2:
            z, sep = why
            members = ", ".join(names[v] for v in sorted(sep, key=self.key))
            return (f"{names[z]} is {'in' if z in sep else 'not in'} the separating set "
                    f"{{{members}}}")
        x, z, y, inner = why
        return f"collider {names[x]} → {names[z]} ← {names[y]}: {self.write(inner)}"

    def reason(self, edge: tuple[int, int]) -> tuple[str, str]:
        """``(kind, text)`` of the arrowhead ``edge`` (``(i, j)``: head at ``j``)."""
        kind, why = self.reasons[edge]
        return kind, self.write(why)

    def triple_records(self) -> list[dict]:
        """Every unshielded triple as ``{"x", "z", "y", "decision", "reason"}``, ordered by
        z, x, y in name order."""
        names, key = self.names, self.key
        return [{"x": names[x], "z": names[z], "y": names[y], "decision": decision,
                 "reason": self.write(why)}
                for x, z, y, decision, why in sorted(
                    self.triples, key=lambda t: (key(t[1]), key(t[0]), key(t[2])))]


def orient(adjacent: list[set[int]], sepsets: dict, *, names, rank, collider_rule="standard",
           locked_directions=(), why_forbidden: Callable[[int, int], str | None] = None,
           separating_sets_of: Callable | None = None,
           unseparated=()) -> OrientationOutcome:
    """Orient the skeleton ``adjacent`` (list of neighbour sets) into a PDAG.

    Parameters
    ----------
    sepsets : dict
        ``(x, y) -> (S, p)`` with ``x < y``, the recorded separating set of each separated pair.
    collider_rule : {"standard", "conservative", "majority"}
    locked_directions : iterable of (int, int)
        Required arrows.
    why_forbidden : callable
        ``why_forbidden(a, b)`` gives the reason a → b may not appear, or None.
    separating_sets_of : callable
        ``separating_sets_of(x, y) -> list of S`` every independent set among subsets of the
        neighbours of x and y; required for the conservative and majority rules.
    unseparated : iterable of (int, int)
        Forbidden pairs for which no separating set was found: their triples stay undecided.
    """
    check_knowledge = why_forbidden is not None or bool(locked_directions)
    why_forbidden = why_forbidden or (lambda a, b: None)
    out = OrientationOutcome(names=names, key=rank.__getitem__)
    locked = set(locked_directions)
    unseparated = {(min(a, b), max(a, b)) for a, b in unseparated}
    key = rank.__getitem__

    # 1. knowledge -------------------------------------------------------------------------
    for x in (sorted(range(len(adjacent)), key=key) if check_knowledge else ()):
        for y in sorted(adjacent[x], key=key):
            if key(y) < key(x):
                continue
            fxy, fyx = why_forbidden(x, y), why_forbidden(y, x)
            if (x, y) in locked:
                _set_arrow(out, x, y, ("knowledge", f"locked direction {names[x]} → {names[y]}"))
            elif (y, x) in locked:
                _set_arrow(out, y, x, ("knowledge", f"locked direction {names[y]} → {names[x]}"))
            elif fxy and fyx:
                out.conflicts.append(
                    f"{names[x]} — {names[y]}: both directions are excluded by the knowledge "
                    f"({fxy}; {fyx}) but the data keep the pair adjacent; left undirected")
            elif fxy:
                _set_arrow(out, y, x, _knowledge_reason(fxy, x, y, names))
            elif fyx:
                _set_arrow(out, x, y, _knowledge_reason(fyx, y, x, names))
    knowledge_heads = set(out.heads)

    # 2. unshielded triples and colliders --------------------------------------------------
    proposed: dict[tuple[int, int], tuple[str, str]] = {}
    ambiguous: set[tuple[int, int, int]] = set()
    unshielded = [(x, z, y) for z in sorted(range(len(adjacent)), key=key)
                  for x, y in combinations(sorted(adjacent[z], key=key), 2)
                  if y not in adjacent[x]]
    pairs = [(min(x, y), max(x, y)) for x, _, y in unshielded]
    wanted = [pair for pair in pairs if pair not in unseparated]
    prefetch = getattr(separating_sets_of, "prefetch", None)
    if collider_rule != "standard" and prefetch is not None:
        prefetch(wanted)  # every pair's candidate sets in one batch of tests
    many = getattr(sepsets, "many", None)  # a SeparatingSets looks them up together
    found = iter(many(wanted) if many is not None else [sepsets[p] for p in wanted])
    for (x, z, y), pair in zip(unshielded, pairs):
        if pair in unseparated:
            ambiguous.add((x, z, y))
            out.triples.append((x, z, y, "ambiguous", (
                f"{names[x]} and {names[y]} are forbidden to be adjacent but no separating "
                "set was found; left undecided")))
            continue
        sep, _ = next(found)
        decision, reason = _classify(x, z, y, sep, collider_rule, separating_sets_of, names)
        if decision == "collider":
            refusal = (_collider_refusal(x, z, y, locked, why_forbidden, names)
                       if check_knowledge else None)
            if refusal:
                decision = "refused"
                reason = f"{out.write(reason)}; refused: {refusal}"
                out.conflicts.append(
                    f"collider {names[x]} → {names[z]} ← {names[y]} refused: {refusal}")
            else:
                for u in (x, y):
                    if (u, z) not in proposed:
                        proposed[(u, z)] = ("collider", (x, z, y, reason))
        elif decision == "ambiguous":
            ambiguous.add((x, z, y))
        out.triples.append((x, z, y, decision, reason))
    added = []
    for (u, z), reason in proposed.items():
        if (u, z) not in knowledge_heads:
            out.heads.add((u, z))
            out.reasons[(u, z)] = reason
            added.append((u, z))
    for (u, z), cycle in _arrows_on_cycles(out.heads, added):
        out.heads.discard((u, z))
        out.reasons.pop((u, z), None)
        out.conflicts.append(
            f"collider arrowhead {names[u]} → {names[z]} withdrawn: with the other colliders "
            f"it closes a directed cycle through {_cycle_text(cycle, names, key)}; the data's "
            "orientations are inconsistent here")
    for u, v in sorted(out.heads, key=lambda e: (key(e[0]), key(e[1]))):
        if (v, u) in out.heads and key(u) < key(v):
            out.conflicts.append(f"{names[u]} — {names[v]}: colliders put arrowheads at both "
                                 "ends; marked contested")

    # 3. Meek's rules to a fixed point -----------------------------------------------------
    _apply_meek_rules(adjacent, out, ambiguous, names, key,
                      why_forbidden if check_knowledge else None)
    return out


def _arrows_on_cycles(heads, added) -> list[tuple[tuple[int, int], list[int]]]:
    """The arrows of ``added`` that lie on a directed cycle of ``heads`` (contested pairs, with
    heads at both ends, are not arrows), each with the variables of its cycle.

    Before the arrows of one step (the colliders, or one round of the rules) were added the
    arrows had no cycle, so withdrawing every added arrow that lies on one leaves none; all of
    them go, whatever order they were found in, so the answer does not depend on visiting
    order.
    """
    added = [(u, v) for u, v in added if (v, u) not in heads]
    if not added:
        return []
    arrows = np.array([(u, v) for u, v in heads if (v, u) not in heads], dtype=np.intp)
    size = int(arrows.max()) + 1
    graph = csr_matrix((np.ones(len(arrows), dtype=np.int8), (arrows[:, 0], arrows[:, 1])),
                       shape=(size, size))
    # strongly connected components (scipy's csgraph): an arrow lies on a directed cycle
    # exactly when both its ends are in one component of more than one variable
    _, label = connected_components(graph, directed=True, connection="strong")
    members = np.bincount(label)
    return [((u, v), np.flatnonzero(label == label[u]).tolist()) for u, v in added
            if label[u] == label[v] and members[label[u]] > 1]


def _cycle_text(members, names, key) -> str:
    return "{" + ", ".join(names[v] for v in sorted(members, key=key)) + "}"


def _knowledge_reason(why, a, b, names):
    kind = "stage order" if why == "stage order" else "knowledge"
    return (kind, f"{why}: {names[a]} → {names[b]} may not appear")


def _set_arrow(out, a, b, reason):
    out.heads.add((a, b))
    out.reasons[(a, b)] = reason


def _classify(x, z, y, sep, rule, separating_sets_of, names):
    """``(decision, reason)``; under the standard rule the reason is ``(z, sep)``, written
    when read (:meth:`OrientationOutcome.write`)."""
    if rule == "standard":
        return "non-collider" if z in sep else "collider", (z, sep)
    sets = separating_sets_of(x, y) or [sep]
    inside = sum(1 for s in sets if z in s)
    share = f"{names[z]} is in {inside} of {len(sets)} separating sets"
    if rule == "conservative":
        if inside == 0:
            return "collider", share
        if inside == len(sets):
            return "non-collider", share
        return "ambiguous", share + " (conservative rule: undecided)"
    if 2 * inside < len(sets):
        return "collider", share
    if 2 * inside > len(sets):
        return "non-collider", share
    return "ambiguous", share + " (majority rule: a tie)"


def _collider_refusal(x, z, y, locked, why_forbidden, names):
    for u in (x, y):
        if (z, u) in locked:
            return f"locked direction {names[z]} → {names[u]}"
        why = why_forbidden(u, z)
        if why:
            return f"{why} excludes {names[u]} → {names[z]}"
    return None


def _apply_meek_rules(adjacent, out, ambiguous, names, key, why_forbidden):
    heads = out.heads

    def directed(a, b):
        return (a, b) in heads and (b, a) not in heads

    def undirected(a, b):
        return b in adjacent[a] and (a, b) not in heads and (b, a) not in heads

    def not_ambiguous(a, m, c):
        return (a, m, c) not in ambiguous and (c, m, a) not in ambiguous

    def why_arrow(a, b):
        """Reason a → b is forced, or None (a — b undirected)."""
        if why_forbidden is not None and why_forbidden(a, b):
            return None  # the knowledge excludes a → b (only left undirected when it
            #              excludes both directions, which is reported as a conflict)
        for w in sorted(adjacent[a], key=key):
            if directed(w, a) and b not in adjacent[w] and not_ambiguous(w, a, b):
                return ("rule 1", f"rule 1: {names[w]} → {names[a]} — {names[b]}, "
                                  f"{names[w]} and {names[b]} not adjacent")
        for w in sorted(adjacent[a] & adjacent[b], key=key):
            if directed(a, w) and directed(w, b):
                return ("rule 2", f"rule 2: {names[a]} → {names[w]} → {names[b]}; "
                                  "the other way would close a cycle")
        parents_b = [w for w in sorted(adjacent[a] & adjacent[b], key=key)
                     if undirected(a, w) and directed(w, b)]
        for c, d in combinations(parents_b, 2):
            if d not in adjacent[c] and not_ambiguous(c, a, d):
                return ("rule 3", f"rule 3: {names[c]} → {names[b]} ← {names[d]} with "
                                  f"{names[a]} — {names[c]} and {names[a]} — {names[d]}")
        for d in sorted(adjacent[a] & adjacent[b], key=key):
            if not directed(d, b):
                continue
            for c in sorted(adjacent[a] & adjacent[d], key=key):
                if c != b and directed(c, d) and b not in adjacent[c]:
                    return ("rule 4", f"rule 4: {names[c]} → {names[d]} → {names[b]} with "
                                      f"{names[a]} adjacent to both, {names[c]} and "
                                      f"{names[b]} not adjacent")
        return None

    open_pairs = [(a, b) for a in range(len(adjacent)) for b in adjacent[a] if undirected(a, b)]
    refused: set[tuple[int, int]] = set()
    while True:
        open_pairs = [(a, b) for a, b in open_pairs if undirected(a, b)
                      and (a, b) not in refused]
        found = {}
        for a, b in open_pairs:
            reason = why_arrow(a, b)
            if reason:
                found[(a, b)] = reason
        if not found:
            return
        progressed = False
        added = []
        for (a, b), reason in sorted(found.items(), key=lambda kv: (key(kv[0][0]),
                                                                    key(kv[0][1]))):
            if (b, a) in found:
                if key(a) < key(b):
                    out.conflicts.append(f"{names[a]} — {names[b]}: the rules force both "
                                         "directions (inconsistent orientations); marked "
                                         "contested")
                heads.add((a, b))
                out.reasons[(a, b)] = ("contested", reason[1])
                progressed = True
                continue
            heads.add((a, b))
            out.reasons[(a, b)] = reason
            added.append((a, b))
            progressed = True
        # finite-sample errors can make the rules contradict acyclicity (a chordless cycle in
        # the skeleton, say): never draw a directed cycle; the round's arrows on one stay open
        for (a, b), cycle in _arrows_on_cycles(heads, added):
            heads.discard((a, b))
            out.reasons.pop((a, b), None)
            refused.add((a, b))
            out.conflicts.append(
                f"{names[a]} — {names[b]}: {found[(a, b)][0]} would orient it {names[a]} → "
                f"{names[b]}, closing a directed cycle through {_cycle_text(cycle, names, key)}"
                "; left undirected")
        if not progressed:
            return
