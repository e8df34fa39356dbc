"""Orienting a skeleton into a partial ancestral graph (PAG): colliders and rules R1–R10.

When some common causes were not measured, the search's output is a PAG (Richardson & Spirtes
2002, "Ancestral graph Markov models", Ann. Statist. 30; Zhang 2008, "On the completeness of
orientation rules for causal discovery in the presence of latent confounders and selection
bias", Artif. Intell. 172). Each edge end carries one of three marks:

- **arrowhead** at ``b`` on ``a *→ b``: ``b`` is not a cause (ancestor) of ``a``;
- **tail** at ``a`` on ``a –* b``: ``a`` is a cause of ``b`` (or of the selection of rows);
- **circle** ``o``: the data do not decide; some diagrams of the class have an arrowhead there,
  others a tail.

Every end starts as a circle. Unshielded triples ``x *–* z *–* y`` (``x``, ``y`` not adjacent)
whose middle is not in the separating set of ``x`` and ``y`` become colliders
``x *→ z ←* y`` (rule R0). Then Zhang's rules run to a fixed point:

- R1 ``a *→ b o–* c``, ``a``, ``c`` not adjacent ⇒ ``b → c``;
- R2 ``a → b *→ c`` or ``a *→ b → c``, with ``a *–o c`` ⇒ ``a *→ c``;
- R3 ``a *→ b ←* c``, ``a *–o d o–* c``, ``a``, ``c`` not adjacent, ``d *–o b`` ⇒ ``d *→ b``;
- R4 a discriminating path ``<θ, …, a, b, c>`` for ``b`` with ``b o–* c``: ``b → c`` if ``b``
  is in the separating set of ``θ`` and ``c``, else ``a ↔ b ↔ c``;
- R5–R7 (tails from selection bias; they cannot fire when the rows were not selected on the
  variables, Zhang 2008 §4): R5 an uncovered circle path closing ``a o–o b`` makes the cycle
  undirected; R6 ``a — b o–* c`` ⇒ ``b –* c``; R7 ``a –o b o–* c``, ``a``, ``c`` not adjacent ⇒
  ``b –* c``;
- R8 ``a → b → c`` or ``a –o b → c``, with ``a o→ c`` ⇒ ``a → c``;
- R9 ``a o→ c`` and an uncovered potentially directed path ``<a, b, …, c>``, ``b``, ``c`` not
  adjacent ⇒ ``a → c``;
- R10 ``a o→ c``, ``b → c ← d``, uncovered potentially directed paths from ``a`` to ``b`` and
  to ``d`` whose second vertices differ and are not adjacent ⇒ ``a → c``.

Zhang proved R0–R10 sound and complete: every mark not fixed by them differs between members
of the equivalence class. A rule only ever turns a circle into an arrowhead or a tail, so the
order of application changes only which reason is recorded first.

Knowledge (applied before the colliders, as tiered knowledge in Andrews, Spirtes & Cooper
2020, "On the completeness of causal discovery in the presence of latent confounding with
tiered background knowledge", AISTATS): a forbidden direction ``a → b`` or a later stage for
``a`` says ``a`` is not a cause of ``b``, an arrowhead at ``a``; a locked direction ``a → b``
says ``a`` causes ``b``: a tail at ``a`` and an arrowhead at ``b``. A collider or rule that
would overwrite a mark set by knowledge is refused and reported.
"""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass, field
from itertools import combinations
from typing import Callable, Sequence

import numpy as np

from ._orientation import _classify

__all__ = ["CIRCLE", "ARROW", "TAIL", "PagOutcome", "orient_pag", "collider_marks"]

CIRCLE, ARROW, TAIL = 1, 2, 3
MARK_NAMES = {CIRCLE: "circle", ARROW: "arrow", TAIL: "tail"}
_SYMBOL = {CIRCLE: "o", ARROW: ">", TAIL: "-"}


@dataclass
class PagOutcome:
    """Marks with their reasons, triple decisions and conflicts (internal, index space).

    ``marks[i, j]`` is the mark at ``j`` on the edge ``i *–* j`` (0 where not adjacent);
    ``reasons[(i, j)]`` is ``(kind, text)`` for that mark when it is an arrowhead or a tail.
    """

    names: Sequence[str] = ()
    key: Callable[[int], int] = int
    marks: np.ndarray = None
    reasons: dict = field(default_factory=dict)
    triples: list = field(default_factory=list)  # (x, z, y, decision, reason text)
    conflicts: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    fired: dict = field(default_factory=dict)  # rule -> marks it set

    def end_reason(self, i: int, j: int) -> tuple[str, str]:
        """``(kind, text)`` of the mark at ``j`` on ``i *–* j`` ("" for a circle)."""
        return self.reasons.get((i, j), ("", ""))

    def triple_records(self) -> list[dict]:
        names, key = self.names, self.key
        return [{"x": names[x], "z": names[z], "y": names[y], "decision": decision,
                 "reason": why}
                for x, z, y, decision, why in sorted(
                    self.triples, key=lambda t: (key(t[1]), key(t[0]), key(t[2])))]


def _edge_text(names, marks, a, b):
    """``a o→ b`` style text of the edge a–b as it stands."""
    left = {CIRCLE: "o", ARROW: "←", TAIL: ""}[int(marks[b, a])]
    right = {CIRCLE: "o", ARROW: "→", TAIL: ""}[int(marks[a, b])]
    return f"{names[a]} {left}–{right} {names[b]}".replace("←–→", "↔").replace(
        "–→", "→").replace("←–", "←")


def collider_marks(n: int, adjacent, sepsets, *, names, rank, collider_rule="standard",
                   separating_sets_of=None, unseparated=()) -> tuple[np.ndarray, dict, list,
                                                                      set]:
    """Rule R0 on the skeleton: every end a circle, then arrowheads at colliders.

    Returns ``(marks, reasons, triples, ambiguous)``."""
    key = rank.__getitem__
    marks = np.zeros((n, n), dtype=np.int8)
    for a in range(n):
        for b in adjacent[a]:
            marks[a, b] = CIRCLE
    reasons, triples, ambiguous = {}, [], set()
    unseparated = {(min(a, b), max(a, b)) for a, b in unseparated}
    unshielded = [(x, z, y) for z in sorted(range(n), key=key)
                  for x, y in combinations(sorted(adjacent[z], key=key), 2)
                  if y not in adjacent[x]]
    pairs = [(min(x, y), max(x, y)) for x, _, y in unshielded]
    wanted = [p for p in pairs if p not in unseparated]
    prefetch = getattr(separating_sets_of, "prefetch", None)
    if collider_rule != "standard" and prefetch is not None:
        prefetch(wanted)  # every pair's candidate sets in one batch of tests
    many = getattr(sepsets, "many", None)
    found = iter(many(wanted) if many is not None else [sepsets[p] for p in wanted])
    for (x, z, y), pair in zip(unshielded, pairs):
        if pair in unseparated:
            ambiguous.add((x, z, y))
            triples.append((x, z, y, "ambiguous",
                            f"{names[x]} and {names[y]} are forbidden to be adjacent but no "
                            "separating set was found; left undecided"))
            continue
        sep, _ = next(found)
        decision, why = _classify(x, z, y, sep, collider_rule, separating_sets_of, names)
        if not isinstance(why, str):
            zz, s = why
            members = ", ".join(names[v] for v in sorted(s, key=key))
            why = (f"{names[zz]} is {'in' if zz in s else 'not in'} the separating set "
                   f"{{{members}}}")
        if decision == "collider":
            for u in (x, y):
                marks[u, z] = ARROW
                reasons.setdefault((u, z), ("collider", f"collider {names[x]} *→ {names[z]} "
                                                        f"←* {names[y]}: {why}"))
        elif decision == "ambiguous":
            ambiguous.add((x, z, y))
        triples.append((x, z, y, decision, why))
    return marks, reasons, triples, ambiguous


def orient_pag(adjacent: list[set[int]], sepsets, *, names, rank, collider_rule="standard",
               separating_sets_of=None, unseparated=(), locked_directions=(),
               why_forbidden=None) -> PagOutcome:
    """Orient the final skeleton into a PAG: knowledge, colliders (R0), then R1–R10.

    Parameters
    ----------
    adjacent : list of set of int
        The skeleton after the possible-d-separating-set phase.
    sepsets : mapping
        ``(x, y) -> (S, p)`` (``x < y``) for every separated pair.
    collider_rule : {"standard", "conservative", "majority"}
        How R0 and R4 read the separating sets (see :func:`._orientation.orient`).
    separating_sets_of : callable, optional
        Needed for the conservative and majority rules.
    unseparated : iterable of (int, int)
        Forbidden pairs without a separating set: their triples stay undecided.
    locked_directions : iterable of (int, int)
        ``(a, b)``: a causes b (tail at a, arrowhead at b).
    why_forbidden : callable, optional
        ``why_forbidden(a, b)`` is the reason a may not cause b, or None: an arrowhead at a.
    """
    n = len(adjacent)
    key = rank.__getitem__
    out = PagOutcome(names=names, key=key)
    marks, reasons, triples, ambiguous = collider_marks(
        n, adjacent, sepsets, names=names, rank=rank, collider_rule=collider_rule,
        separating_sets_of=separating_sets_of, unseparated=unseparated)
    out.triples = triples
    # knowledge first: it overrides circles and colliders that contradict it are refused
    fixed = {}
    for a, b in locked_directions:
        if b in adjacent[a]:
            fixed[(b, a)] = (TAIL, ("knowledge", f"locked direction {names[a]} → {names[b]}: "
                                                 f"{names[a]} causes {names[b]}"))
            fixed[(a, b)] = (ARROW, ("knowledge", f"locked direction {names[a]} → {names[b]}"))
    if why_forbidden is not None:
        for a in range(n):
            for b in adjacent[a]:
                why = why_forbidden(a, b)
                if why and (b, a) not in fixed:
                    kind = "stage order" if why == "stage order" else "knowledge"
                    fixed[(b, a)] = (ARROW, (kind, f"{why}: {names[a]} does not cause "
                                                   f"{names[b]}"))
    for (i, j), (mark, reason) in sorted(fixed.items(), key=lambda kv: (key(kv[0][0]),
                                                                          key(kv[0][1]))):
        if marks[i, j] == ARROW and mark == TAIL:
            why = reasons.pop((i, j))[1]
            out.conflicts.append(f"{why}; refused: {reason[1]}")
        marks[i, j] = mark
        if mark != ARROW or (i, j) not in reasons:
            reasons[(i, j)] = reason
    out.marks, out.reasons = marks, reasons
    _Rules(adjacent, out, ambiguous, sepsets, collider_rule, separating_sets_of,
           {(min(a, b), max(a, b)) for a, b in unseparated}).run()
    return out


class _Rules:
    """Zhang's rules R1–R10 applied to a fixed point (see the module docstring)."""

    def __init__(self, adjacent, out, ambiguous, sepsets, collider_rule, separating_sets_of,
                 unseparated):
        self.adj = adjacent
        self.out = out
        self.m = out.marks
        self.names = out.names
        self.key = out.key
        self.ambiguous = ambiguous
        self.sepsets = sepsets
        self.collider_rule = collider_rule
        self.separating_sets_of = separating_sets_of
        self.unseparated = unseparated
        self.order = sorted(range(len(adjacent)), key=self.key)
        self.nbrs = [sorted(a, key=self.key) for a in adjacent]

    # -- helpers ------------------------------------------------------------------------------
    def set(self, i, j, mark, kind, text) -> bool:
        """Set the mark at j on i–j from a circle; a clash with a decided mark is reported."""
        current = self.m[i, j]
        if current == mark:
            return False
        if current != CIRCLE:
            n = self.names
            self.out.conflicts.append(
                f"{kind} would put a{'n arrowhead' if mark == ARROW else ' tail'} at "
                f"{n[j]} on {n[i]} – {n[j]}, which already has a"
                f"{'n arrowhead' if current == ARROW else ' tail'} "
                f"({self.out.end_reason(i, j)[1] or 'decided earlier'}); kept the earlier mark")
            return False
        self.m[i, j] = mark
        self.out.reasons[(i, j)] = (kind, text)
        self.out.fired[kind] = self.out.fired.get(kind, 0) + 1
        return True

    def decided(self, a, m, c) -> bool:
        return (a, m, c) not in self.ambiguous and (c, m, a) not in self.ambiguous

    def edge(self, a, b) -> str:
        return _edge_text(self.names, self.m, a, b)

    def directed(self, a, b) -> bool:
        """a → b."""
        return self.m[a, b] == ARROW and self.m[b, a] == TAIL

    def pd_step(self, u, v) -> bool:
        """The edge u–v may be read from u to v on a potentially directed path: no arrowhead
        at u, no tail at v."""
        return self.m[v, u] != ARROW and self.m[u, v] != TAIL

    def uncovered_pd_firsts(self, a, target, avoid) -> set[int]:
        """Second vertices of every uncovered potentially directed path from a to target
        (not through ``avoid``)."""
        firsts = set()
        for mu in self.nbrs[a]:
            if mu in avoid or not self.pd_step(a, mu):
                continue
            if mu == target or self._pd_reach(a, mu, target, {a, mu} | set(avoid)):
                firsts.add(mu)
        return firsts

    def _pd_reach(self, prev, cur, target, seen) -> bool:
        """An uncovered potentially directed path continues from prev→cur to target."""
        stack = [(prev, cur, frozenset(seen))]
        while stack:
            p, c, path = stack.pop()
            for w in self.nbrs[c]:
                if w in path or w in self.adj[p] or not self.pd_step(c, w):
                    continue  # (w adjacent to p would cover the triple p, c, w)
                if w == target:
                    return True
                stack.append((c, w, path | {w}))
        return False

    # -- the rules ----------------------------------------------------------------------------
    def run(self):
        rules = (self.r1, self.r2, self.r3, self.r4, self.r5, self.r6, self.r7, self.r8,
                 self.r9, self.r10)
        while any(rule() for rule in rules):
            pass

    def r1(self) -> bool:
        n, m, changed = self.names, self.m, False
        for b in self.order:
            for a in self.nbrs[b]:
                if m[a, b] != ARROW:
                    continue
                for c in self.nbrs[b]:
                    if c == a or c in self.adj[a] or m[c, b] != CIRCLE \
                            or not self.decided(a, b, c):
                        continue
                    text = (f"rule 1: {self.edge(a, b)} and {n[b]} o–* {n[c]} with {n[a]}, "
                            f"{n[c]} not adjacent")
                    changed |= self.set(c, b, TAIL, "rule 1", text)
                    changed |= self.set(b, c, ARROW, "rule 1", text)
        return changed

    def r2(self) -> bool:
        n, m, changed = self.names, self.m, False
        for a in self.order:
            for c in self.nbrs[a]:
                if m[a, c] != CIRCLE:
                    continue
                for b in self.nbrs[a]:
                    if b == c or b not in self.adj[c]:
                        continue
                    if (self.directed(a, b) and m[b, c] == ARROW) or \
                            (m[a, b] == ARROW and self.directed(b, c)):
                        changed |= self.set(a, c, ARROW, "rule 2", (
                            f"rule 2: {self.edge(a, b)} and {self.edge(b, c)}; a tail at "
                            f"{n[c]} would make {n[c]} cause itself"))
                        break
        return changed

    def r3(self) -> bool:
        n, m, changed = self.names, self.m, False
        for d in self.order:
            for b in self.nbrs[d]:
                if m[d, b] != CIRCLE:
                    continue
                around = [v for v in self.nbrs[d] if v != b and v in self.adj[b]
                          and m[v, b] == ARROW and m[v, d] == CIRCLE]
                for a, c in combinations(around, 2):
                    if c not in self.adj[a] and self.decided(a, d, c):
                        changed |= self.set(d, b, ARROW, "rule 3", (
                            f"rule 3: {n[a]} *→ {n[b]} ←* {n[c]} with {n[a]} *–o {n[d]} o–* "
                            f"{n[c]}, {n[a]} and {n[c]} not adjacent"))
                        break
        return changed

    def r4(self) -> bool:
        n, m, changed = self.names, self.m, False
        for b in self.order:
            for c in self.nbrs[b]:
                if m[c, b] != CIRCLE:
                    continue
                for a in self.nbrs[b]:
                    if a == c or a not in self.adj[c] or not self.directed(a, c) \
                            or m[b, a] != ARROW:
                        continue
                    path = self._discriminating(a, b, c)
                    if path is None:
                        continue
                    theta = path[0]
                    pair = (min(theta, c), max(theta, c))
                    if pair in self.unseparated:
                        continue
                    sep, _ = self.sepsets[pair]
                    decision, why = _classify(theta, b, c, sep, self.collider_rule,
                                              self.separating_sets_of, n)
                    if not isinstance(why, str):
                        members = ", ".join(n[v] for v in sorted(sep, key=self.key))
                        why = (f"{n[b]} is {'in' if b in sep else 'not in'} the separating "
                               f"set {{{members}}} of {n[theta]} and {n[c]}")
                    route = ", ".join(n[v] for v in path + [b, c])
                    text = f"rule 4, discriminating path <{route}> for {n[b]}: {why}"
                    if decision == "non-collider":
                        changed |= self.set(c, b, TAIL, "discriminating path", text)
                        changed |= self.set(b, c, ARROW, "discriminating path", text)
                    elif decision == "collider":
                        changed |= self.set(a, b, ARROW, "discriminating path", text)
                        changed |= self.set(c, b, ARROW, "discriminating path", text)
                        changed |= self.set(b, c, ARROW, "discriminating path", text)
                    if m[c, b] != CIRCLE:
                        break
        return changed

    def _discriminating(self, a, b, c) -> list[int] | None:
        """The shortest discriminating path ``<θ, …, a>`` (then b, c) for b, or None.

        Every vertex between θ and b is a collider on the path and a parent of c; θ is not
        adjacent to c. The search runs over (previous, vertex) states: a walk that meets a
        vertex twice can be cut at it, since every inner vertex has arrowheads from both
        sides."""
        m, adj = self.m, self.adj
        start = (b, a)
        parent = {start: None}
        queue = deque([start])
        while queue:
            prev, v = queue.popleft()
            for w in self.nbrs[v]:
                if w in (b, c) or w == prev or m[w, v] != ARROW:
                    continue  # v must be a collider: an arrowhead at v from w's side too
                state = (v, w)
                if state in parent:
                    continue
                parent[state] = (prev, v)
                if w not in adj[c]:
                    route, s = [], state
                    while s is not None:
                        route.append(s[1])
                        s = parent[s]
                    return route  # θ … a
                if m[v, w] == ARROW and self.directed(w, c):
                    queue.append(state)
        return None

    def r5(self) -> bool:
        n, m, changed = self.names, self.m, False
        for a in self.order:
            for b in self.nbrs[a]:
                if self.key(b) < self.key(a) or m[a, b] != CIRCLE or m[b, a] != CIRCLE:
                    continue
                path = self._uncovered_circle_path(a, b)
                if path is None:
                    continue
                text = ("rule 5: an uncovered circle path " + ", ".join(n[v] for v in path)
                        + f" closes {n[a]} o–o {n[b]}")
                cycle = path + [a]
                for u, v in zip(cycle, cycle[1:]):
                    changed |= self.set(u, v, TAIL, "rule 5", text)
                    changed |= self.set(v, u, TAIL, "rule 5", text)
        return changed

    def _uncovered_circle_path(self, a, b) -> list[int] | None:
        m, adj = self.m, self.adj
        circle = [[w for w in self.nbrs[v] if m[v, w] == CIRCLE and m[w, v] == CIRCLE]
                  for v in range(len(adj))]
        for c in circle[a]:
            if c == b or c in adj[b]:
                continue
            stack = [(a, c, (a, c))]
            while stack:
                p, v, path = stack.pop()
                for w in circle[v]:
                    if w in path or w in adj[p]:
                        continue
                    if w == b:
                        if v not in adj[a]:
                            return list(path) + [b]
                        continue
                    stack.append((v, w, path + (w,)))
        return None

    def r6(self) -> bool:
        n, m, changed = self.names, self.m, False
        for b in self.order:
            for a in self.nbrs[b]:
                if m[a, b] != TAIL or m[b, a] != TAIL:
                    continue
                for c in self.nbrs[b]:
                    if c != a and m[c, b] == CIRCLE:
                        changed |= self.set(c, b, TAIL, "rule 6", (
                            f"rule 6: {n[a]} — {n[b]} is undirected"))
        return changed

    def r7(self) -> bool:
        n, m, changed = self.names, self.m, False
        for b in self.order:
            for a in self.nbrs[b]:
                if m[b, a] != TAIL or m[a, b] != CIRCLE:
                    continue
                for c in self.nbrs[b]:
                    if c != a and c not in self.adj[a] and m[c, b] == CIRCLE \
                            and self.decided(a, b, c):
                        changed |= self.set(c, b, TAIL, "rule 7", (
                            f"rule 7: {n[a]} –o {n[b]} with {n[a]}, {n[c]} not adjacent"))
        return changed

    def r8(self) -> bool:
        n, m, changed = self.names, self.m, False
        for a in self.order:
            for c in self.nbrs[a]:
                if m[a, c] != ARROW or m[c, a] != CIRCLE:
                    continue
                for b in self.nbrs[a]:
                    if b != c and b in self.adj[c] and self.directed(b, c) \
                            and m[b, a] == TAIL and m[a, b] in (ARROW, CIRCLE):
                        changed |= self.set(c, a, TAIL, "rule 8", (
                            f"rule 8: {self.edge(a, b)} → {n[c]}, so {n[a]} causes {n[c]}"))
                        break
        return changed

    def r9(self) -> bool:
        n, m, changed = self.names, self.m, False
        for a in self.order:
            for c in self.nbrs[a]:
                if m[a, c] != ARROW or m[c, a] != CIRCLE:
                    continue
                for b in self.nbrs[a]:
                    if b == c or b in self.adj[c] or not self.pd_step(a, b):
                        continue
                    if self._pd_reach(a, b, c, {a, b}):
                        changed |= self.set(c, a, TAIL, "rule 9", (
                            f"rule 9: an uncovered potentially directed path from {n[a]} "
                            f"through {n[b]} to {n[c]}"))
                        break
        return changed

    def r10(self) -> bool:
        n, m, changed = self.names, self.m, False
        for a in self.order:
            for c in self.nbrs[a]:
                if m[a, c] != ARROW or m[c, a] != CIRCLE:
                    continue
                parents = [v for v in self.nbrs[c] if v != a and self.directed(v, c)]
                if len(parents) < 2:
                    continue
                firsts = {v: self.uncovered_pd_firsts(a, v, {c}) for v in parents}
                done = False
                for b, d in combinations(parents, 2):
                    for mu in firsts[b]:
                        for omega in firsts[d]:
                            if mu != omega and omega not in self.adj[mu]:
                                changed |= self.set(c, a, TAIL, "rule 10", (
                                    f"rule 10: {n[b]} → {n[c]} ← {n[d]} with uncovered "
                                    f"potentially directed paths from {n[a]} through "
                                    f"{n[mu]} and {n[omega]}"))
                                done = True
                                break
                        if done:
                            break
                    if done:
                        break
        return changed
