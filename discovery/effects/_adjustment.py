"""Control sets: which variables to adjust for, judged over a whole equivalence class.

To estimate the total effect of a treatment ``x`` on an outcome ``y`` from observational data
one adjusts for (controls for) a set ``Z`` of other variables. ``Z`` is *valid* when the
adjusted association equals the causal effect in every model compatible with the diagram. A
search returns an equivalence class (a CPDAG; with knowledge a maximally oriented PDAG; with
hidden causes a PAG), so ``Z`` must be valid in every member.

The *generalised adjustment criterion* (Perković, Textor, Kalisch & Maathuis 2018) decides
this from the class itself. Call a path from ``x`` to ``y`` *possibly causal* when no edge on
it points back towards ``x``; *proper* when it meets ``x`` only at its start. Then:

0. **Amenability.** Every proper possibly causal path from ``x`` to ``y`` must start with an
   edge ``x → v`` that the class directs out of ``x`` (in a PAG: a *visible* edge, one no
   hidden cause can explain). Otherwise some members send the effect through a path that
   others read as confounding, and *no* set is valid: the effect is not identifiable by
   adjustment (the *breaking path* shows where).
1. ``Z`` holds no *forbidden* node: no possible descendant of a node (other than ``x``) on a
   proper possibly causal path. Adjusting for a mediator, or for something the treatment
   affects, blocks part of the effect or opens a collider.
2. ``Z`` blocks every proper non-causal path from ``x`` to ``y``.

The *canonical* set (possible ancestors of ``x`` or ``y`` that are not forbidden) is valid
whenever any set is; the *optimal* set of Henckel, Perković & Maathuis (2022) — the parents of
the causal nodes, minus the forbidden ones — has the smallest asymptotic variance among valid
sets in linear models; *minimal* sets are valid sets with no valid proper subset.

The answer is only as right as the diagram class: with hidden common causes of measured
variables a CPDAG's answer can be wrong (the hidden-causes search gives a PAG for that case).

References
----------
.. [1] Perković, E., Textor, J., Kalisch, M. & Maathuis, M. H. (2018). Complete graphical
   characterization and construction of adjustment sets in Markov equivalence classes of
   ancestral graphs. *Journal of Machine Learning Research* 18(220), 1–62 (conference version
   UAI 2015).
.. [2] Perković, E., Kalisch, M. & Maathuis, M. H. (2017). Interpreting and using CPDAGs with
   background knowledge. *Proceedings of UAI 2017*.
.. [3] Henckel, L., Perković, E. & Maathuis, M. H. (2022). Graphical criteria for efficient
   total effect estimation via adjustment in causal linear models. *JRSS B* 84(2), 579–599.
.. [4] Shpitser, I., VanderWeele, T. & Robins, J. M. (2010). On the validity of covariate
   adjustment for estimating causal effects. *Proceedings of UAI 2010*.
.. [5] Pearl, J. (1995). Causal diagrams for empirical research. *Biometrika* 82, 669–688.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import networkx as nx

from ..result import ASSUMPTIONS
from ._graph import ControlSetError, MarkedGraph, marked_graph

__all__ = ["control_sets", "ControlSets", "Verdict", "MINIMAL_BOUND", "CONTROL_CAUTIONS"]

#: networkx d-separation (``is_d_separator`` from networkx 3.3, ``d_separated`` before).
_d_separated = getattr(nx, "is_d_separator", None) or nx.d_separated

#: At most this many minimal sets are listed.
MINIMAL_BOUND = 20
#: At most this many minimal separators are generated while listing minimal sets.
_SUBSET_BUDGET = 2000
#: At most this many partial paths are expanded while looking for a breaking path.
_PATH_BUDGET = 200_000

CONTROL_CAUTIONS = (
    "A control set is valid only if the diagram class is right: a missing edge, a wrong "
    "orientation or an unmeasured common cause can make a 'valid' set biased.",
    "Validity is about bias, not about precision or measurement: a valid set measured with "
    "error, or a small sample, still gives a poor estimate.",
    "Effect ranges and estimates assume linear effects and a correctly specified regression.",
    "Choose controls with the study design and subject-matter judgement; this answer is a "
    "hypothesis to weigh, not a decision on its own.",
)


@dataclass(frozen=True)
class Verdict:
    """Whether a proposed control set is valid, and why.

    Attributes
    ----------
    set : frozenset of str
    valid : bool
    reason : str
        One sentence: why it is valid, the path it leaves open, or the forbidden variable it
        includes.
    path : tuple of str or None
        The open (or breaking) path, when that is the reason.
    forbidden : frozenset of str
        Members of the set that are forbidden (possible descendants of a causal node).
    """

    set: frozenset
    valid: bool
    reason: str
    path: tuple | None = None
    forbidden: frozenset = frozenset()

    def to_dict(self) -> dict:
        return {"set": sorted(self.set), "valid": self.valid, "reason": self.reason}

    def __str__(self) -> str:
        return ("valid: " if self.valid else "not valid: ") + self.reason


@dataclass(frozen=True)
class ControlSets:
    """The control-set answer for one treatment and outcome (see the module notes).

    Attributes
    ----------
    treatment, outcome : str
    kind : {"dag", "cpdag", "pdag", "pag"}
        The kind of diagram the answer was judged on.
    amenable : bool
        Whether the effect can be identified by adjustment in the whole class.
    breaking_path : tuple of str or None
        When not amenable: a proper possibly causal path from the treatment to the outcome
        that does not start with an edge directed (and, in a PAG, visible) out of the
        treatment.
    canonical : frozenset of str or None
        The canonical valid set, or None when no valid set exists.
    optimal : frozenset of str or None
        The valid set of smallest asymptotic variance (Henckel et al. 2022), or None when no
        valid set exists or it is not defined here (PAGs; no causal path).
    minimal : tuple of frozenset
        Minimal valid sets, smallest first, at most ``minimal_bound`` of them.
    minimal_bound : int
    minimal_complete : bool
        False when the enumeration stopped at its bound before trying every candidate.
    forbidden : frozenset of str
        Variables no valid set may contain.
    causal_nodes : frozenset of str
        Nodes other than the treatment on proper possibly causal paths to the outcome.
    notes : tuple of str
        Plain-language remarks (no causal path, why a set is missing, ...).
    cautions : tuple of str
    """

    treatment: str
    outcome: str
    kind: str
    amenable: bool
    breaking_path: tuple | None
    canonical: frozenset | None
    optimal: frozenset | None
    minimal: tuple
    minimal_bound: int
    minimal_complete: bool
    forbidden: frozenset
    causal_nodes: frozenset
    notes: tuple = ()
    cautions: tuple = CONTROL_CAUTIONS
    _criterion: object = field(default=None, repr=False, compare=False)

    @property
    def variables(self) -> tuple:
        return self._criterion.g.nodes

    @property
    def has_valid_set(self) -> bool:
        return self.canonical is not None

    def check(self, controls) -> Verdict:
        """Judge a proposed control set.

        Parameters
        ----------
        controls : iterable of str, or str
            Variable names; a string is read as comma-separated names.

        Returns
        -------
        Verdict

        Raises
        ------
        ControlSetError
            If the set names a variable not in the diagram, or contains the treatment or the
            outcome.
        """
        return self._criterion.check(_as_names(controls, self._criterion, "proposed set"))

    def path_text(self, path) -> str:
        """A path as text with the diagram's marks, e.g. ``x ← a → y``."""
        return self._criterion.g.path_text(path)

    def to_dict(self, *, check: Verdict | None = None, effects=None) -> dict:
        """The ``edgewise-controls`` JSON document (see docs/controls.md)."""
        return {
            "format": "edgewise-controls", "version": 1,
            "treatment": self.treatment, "outcome": self.outcome, "kind": self.kind,
            "amenable": self.amenable,
            "breaking_path": None if self.breaking_path is None else list(self.breaking_path),
            "canonical": None if self.canonical is None else sorted(self.canonical),
            "optimal": None if self.optimal is None else sorted(self.optimal),
            "minimal": [sorted(s) for s in self.minimal],
            "minimal_bound": self.minimal_bound,
            "minimal_complete": self.minimal_complete,
            "forbidden": sorted(self.forbidden),
            "check": None if check is None else check.to_dict(),
            "effects": None if effects is None else effects.to_dict(),
            "notes": list(self.notes),
            "cautions": list(self.cautions) + list(ASSUMPTIONS),
        }

    def as_text(self, *, check: Verdict | None = None) -> str:
        """The answer in plain words."""
        x, y = self.treatment, self.outcome
        lines = [f"Control sets for the effect of {x} on {y} ({_KIND_TEXT[self.kind]})"]
        if not self.amenable:
            lines.append(
                f"Not identifiable by adjustment: the path {self.path_text(self.breaking_path)} "
                f"may carry the effect in some diagrams of the class and confounding in "
                "others, because its first edge is not " +
                ("a visible edge out of " if self.kind == "pag" else "directed out of ")
                + f"{x}" + (" (a hidden common cause cannot be ruled out there)"
                            if self.kind == "pag" else "")
                + ". No control set is valid; knowledge that orients this edge (or an "
                "experiment) is needed.")
        elif self.canonical is None:
            lines.append(f"No valid control set: some non-causal path from {x} to {y} cannot "
                         "be blocked by measured variables that are not forbidden.")
        else:
            lines.append(f"Identifiable by adjustment in every diagram of the class.")
            lines.append(f"  canonical set: {_set(self.canonical)}")
            lines.append(f"  optimal set:   " + (_set(self.optimal) if self.optimal is not None
                                                 else "not available"))
            more = "" if self.minimal_complete else \
                f" (the smallest {len(self.minimal)}; more exist or the enumeration " \
                f"stopped at its bound)"
            lines.append(f"  minimal sets{more}: "
                         + "; ".join(_set(s) for s in self.minimal))
        if self.forbidden:
            lines.append(f"  never control for: {_set(self.forbidden)} (on or after a causal "
                         f"path from {x} to {y})")
        if check is not None:
            lines.append(f"Planned set {_set(check.set)}: {check}")
        for n in self.notes:
            lines.append(f"Note: {n}")
        lines.append("Cautions: " + " ".join(self.cautions))
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.as_text()


_KIND_TEXT = {"dag": "a known DAG", "cpdag": "judged over every DAG of the CPDAG",
              "pdag": "judged over every DAG the maximally oriented PDAG allows",
              "pag": "judged over every diagram of the PAG, hidden causes allowed"}


def _set(s) -> str:
    return "{" + ", ".join(sorted(s)) + "}"


def _as_names(controls, criterion, what) -> frozenset:
    if isinstance(controls, str):
        controls = [c.strip() for c in controls.split(",") if c.strip()]
    names = frozenset(str(c) for c in controls)
    unknown = sorted(names - set(criterion.g.nodes))
    if unknown:
        raise ControlSetError(f"the {what} names {', '.join(map(repr, unknown))}, not in the "
                              "diagram; use the diagram's variable names")
    if criterion.x in names:
        raise ControlSetError(f"the {what} contains the treatment {criterion.x!r}; a control "
                              "set holds other variables only")
    if criterion.y in names:
        raise ControlSetError(f"the {what} contains the outcome {criterion.y!r}; a control "
                              "set holds other variables only")
    return names


def control_sets(graph, treatment: str, outcome: str, *, kind: str | None = None) -> ControlSets:
    """Valid control (adjustment) sets for the effect of ``treatment`` on ``outcome``.

    Implements the generalised adjustment criterion (Perković, Textor, Kalisch & Maathuis
    2018; for maximally oriented PDAGs Perković, Kalisch & Maathuis 2017) with the optimal set
    of Henckel, Perković & Maathuis (2022).

    Parameters
    ----------
    graph : SearchResult or networkx.DiGraph
        A search result (a CPDAG; a maximally oriented PDAG when found with knowledge; a PAG
        when found with hidden causes), or a DAG.
    treatment, outcome : str
    kind : {"dag", "cpdag", "pdag", "pag"}, optional
        Override the kind read from ``graph``.

    Returns
    -------
    ControlSets

    Raises
    ------
    ControlSetError
        If the treatment or outcome is unknown or they are the same variable, the diagram has
        a cycle, or the result is not a valid equivalence class.

    Examples
    --------
    >>> import networkx as nx
    >>> dag = nx.DiGraph([("age", "dose"), ("age", "recovery"), ("dose", "recovery")])
    >>> answer = control_sets(dag, "dose", "recovery")
    >>> sorted(answer.canonical), answer.check([]).valid
    (['age'], False)
    """
    g = marked_graph(graph, kind=kind)
    for role, v in (("treatment", treatment), ("outcome", outcome)):
        if v not in g.mark:
            raise ControlSetError(f"the {role} {v!r} is not a variable of the diagram; choose "
                                  f"one of {', '.join(map(repr, g.nodes[:8]))}"
                                  + (", ..." if len(g.nodes) > 8 else ""))
    if treatment == outcome:
        raise ControlSetError(f"the treatment and the outcome are both {treatment!r}; choose "
                              "two different variables")
    crit = _Criterion(g, treatment, outcome)
    return crit.answer()


class _Criterion:
    """The criterion's pieces for one (x, y) pair, computed once."""

    def __init__(self, g: MarkedGraph, x: str, y: str):
        self.g, self.x, self.y = g, x, y
        self.notes: list[str] = []
        self.member = g.member()  # raises on an invalid class
        if g.contested:
            pairs = ", ".join(sorted(" — ".join(sorted(p)) for p in g.contested))
            self.notes.append(f"contested pair(s) {pairs} (colliders pointed both ways) are "
                              "read as undirected; the class is then not a proper equivalence "
                              "class and this answer may be wrong: look at their evidence, "
                              "the survival sweep, or add knowledge")
        # nodes on proper possibly causal paths, and what they make forbidden
        first = [v for v in g.neighbours(x) if g.step(x, v)]
        reach = g.possible_descendants(first, avoid=[x])
        to_y = g.possible_ancestors([y], avoid=[x])
        self.causal_nodes = self._causal_nodes(reach & to_y) if y in reach else frozenset()
        self.forbidden = frozenset(g.possible_descendants(self.causal_nodes) - {x, y}) \
            if self.causal_nodes else frozenset()
        self.breaking_path = self._breaking_path(to_y) if self.causal_nodes else None
        self.amenable = self.breaking_path is None
        self._prepare_blocking()

    def _causal_nodes(self, allowed) -> frozenset:
        """Nodes other than x on proper possibly causal paths from x to y: every such path
        is walked (in a (CP)DAG or PDAG no later node may point into an earlier one,
        Perković et al. 2017), within a bound; past it, reachability stands in."""
        g, x, y = self.g, self.x, self.y
        if g.kind == "dag":
            return frozenset(allowed)
        chords = g.kind != "pag"
        found: set = set()
        budget = [_PATH_BUDGET]
        path, on_path = [x], {x}

        def walk():
            u = path[-1]
            for w in g.neighbours(u):
                if budget[0] <= 0:
                    return
                budget[0] -= 1
                if w in on_path or w not in allowed or not g.step(u, w):
                    continue
                if chords and any(g.directed(w, p) for p in path[:-1] if g.adjacent(w, p)):
                    continue
                if w == y:
                    found.update(path[1:])
                    found.add(y)
                    continue
                path.append(w)
                on_path.add(w)
                walk()
                path.pop()
                on_path.discard(w)

        walk()
        if budget[0] <= 0:
            self.notes.append("the walk over possibly causal paths hit its bound; nodes "
                              "reachable on such paths are treated as on them (a cautious "
                              "answer: some valid sets may be missed)")
            return frozenset(allowed - set(g.parents(x)))
        return frozenset(found)

    # -- amenability ---------------------------------------------------------------------------
    def _breaking_path(self, to_y):
        g, x, y = self.g, self.x, self.y
        for v in sorted(g.neighbours(x), key=str):
            if not g.step(x, v) or v not in to_y:
                continue
            if g.directed(x, v) and (g.kind != "pag" or self._visible(x, v)):
                continue
            path = self._possibly_causal_path([x, v], to_y)
            if path:
                return tuple(path)
        return None

    def _possibly_causal_path(self, start, allowed):
        """A proper possibly causal path extending ``start`` to the outcome inside
        ``allowed``. In a (CP)DAG or PDAG no later node may point into an earlier one
        (Perković et al. 2017); in a PAG consecutive edges are what count (2018)."""
        g, y = self.g, self.y
        if start[-1] == y:
            return start
        if g.kind == "pag":
            prev = {start[-1]: None}
            queue = [start[-1]]
            banned = set(start[:-1])
            while queue:
                u = queue.pop(0)
                for w in sorted(g.neighbours(u), key=str):
                    if w in prev or w in banned or w not in allowed or not g.step(u, w):
                        continue
                    prev[w] = u
                    if w == y:
                        tail = [w]
                        while prev[tail[-1]] is not None:
                            tail.append(prev[tail[-1]])
                        return start[:-1] + tail[::-1]
                    queue.append(w)
            return None
        budget = [_PATH_BUDGET]
        path = list(start)
        on_path = set(path)

        def extend():
            u = path[-1]
            for w in sorted(g.neighbours(u), key=str):
                if budget[0] <= 0:
                    return False
                budget[0] -= 1
                if w in on_path or w not in allowed or not g.step(u, w):
                    continue
                if any(g.directed(w, p) for p in path[:-1] if g.adjacent(w, p)):
                    continue
                path.append(w)
                on_path.add(w)
                if w == y or extend():
                    return True
                path.pop()
                on_path.discard(w)
            return False

        if extend():
            return path
        if budget[0] <= 0:
            self.notes.append("the search for a path that breaks amenability hit its bound; "
                              "the answer treats a possibly causal walk as such a path")
            try:
                return start[:-1] + nx.shortest_path(
                    self._step_graph(allowed - set(start[:-1])), start[-1], y)
            except (nx.NetworkXNoPath, nx.NodeNotFound):
                return None
        return None

    def _step_graph(self, allowed):
        h = nx.DiGraph()
        for u in allowed:
            for w in self.g.neighbours(u):
                if w in allowed and self.g.step(u, w):
                    h.add_edge(u, w)
        return h

    def _visible(self, x, d) -> bool:
        """Is the edge ``x → d`` of a PAG visible (Zhang 2008)? It is when some ``v`` not
        adjacent to ``d`` has an edge into ``x``, or a collider path into ``x`` whose inner
        nodes are all parents of ``d``."""
        g = self.g
        ends, seen, queue = [x], {x}, [x]
        while queue:
            s = queue.pop()
            for u in g.neighbours(s):
                # u *-> s with an arrowhead at s, and u on a collider path: u <-> s
                if g.mark[u][s] != "arrow" or u in seen or u == d:
                    continue
                if not g.adjacent(u, d):
                    return True
                if g.mark[s][u] == "arrow" and g.directed(u, d):
                    seen.add(u)
                    queue.append(u)
        return False

    # -- blocking, read in one member of the class -----------------------------------------
    def _prepare_blocking(self):
        """The proper back-door graph of a member: the member with the first edge of every
        proper causal path from x to y removed (Perković et al. 2018, constructive form)."""
        d, x, y = self.member, self.x, self.y
        de_x = nx.descendants(d, x)
        an_y = nx.ancestors(d, y) | {y}
        self.member_causal = frozenset(de_x & an_y)
        pbd = d.copy()
        pbd.remove_edges_from([(x, v) for v in d.successors(x) if v in self.member_causal])
        self.pbd = pbd

    def blocks(self, z) -> bool:
        return _d_separated(self.pbd, {self.x}, {self.y}, set(z))

    def open_path(self, z):
        """A path of the member's back-door graph left open by ``z`` (observed nodes only), or
        None if none was found within the bound."""
        z = set(z)
        pbd = self.pbd
        und = pbd.to_undirected(as_view=True)
        an_z = set(z)
        for v in z:
            an_z |= nx.ancestors(pbd, v)
        try:
            paths = nx.shortest_simple_paths(und, self.x, self.y)
            for k, p in enumerate(paths):
                if k > 2000:
                    break
                if all(self._open_at(p[i - 1], p[i], p[i + 1], z, an_z)
                       for i in range(1, len(p) - 1)):
                    return tuple(v for v in p if not isinstance(v, tuple))
        except nx.NetworkXNoPath:
            return None
        return None

    def _open_at(self, a, w, b, z, an_z) -> bool:
        collider = self.pbd.has_edge(a, w) and self.pbd.has_edge(b, w)
        return (w in an_z) if collider else (w not in z)

    # -- verdicts -------------------------------------------------------------------------------
    def check(self, z: frozenset) -> Verdict:
        x, y, g = self.x, self.y, self.g
        if not self.amenable:
            return Verdict(z, False, f"the effect is not identifiable by adjustment, so no "
                                     f"set is valid (the path {g.path_text(self.breaking_path)} "
                                     f"does not start with an edge {'visible and ' if g.kind == 'pag' else ''}"
                                     f"directed out of {x})", self.breaking_path)
        bad = z & self.forbidden
        if bad:
            w = sorted(bad)[0]
            via = min((c for c in self.causal_nodes if w in g.possible_descendants([c])),
                      key=lambda c: (c != y, str(c)), default=None)
            what = ("on a causal path" if w in self.causal_nodes else
                    f"a possible descendant of {via}, which is on a causal path")
            return Verdict(z, False, f"it contains {w}, {what} from {x} to {y}: controlling "
                                     "for it removes part of the effect or opens a collider",
                           None, frozenset(bad))
        if not self.blocks(z):
            path = self.open_path(z)
            where = f"the non-causal path {g.path_text(path)}" if path else \
                f"a non-causal path from {x} to {y}"
            return Verdict(z, False, f"it leaves {where} open", path)
        return Verdict(z, True, f"it blocks every non-causal path from {x} to {y} and holds "
                                "nothing on or after a causal path")

    def answer(self) -> ControlSets:
        g, x, y = self.g, self.x, self.y
        canonical = optimal = None
        minimal, complete = (), True
        if not self.causal_nodes:
            self.notes.append(f"{y} is not a possible descendant of {x}: the effect of {x} "
                              f"on {y} is zero in every diagram of the class")
        if self.amenable:
            hidden = lambda v: isinstance(v, tuple)  # noqa: E731
            pool = g.possible_ancestors([x, y]) - {x, y} - self.forbidden
            candidate = frozenset(v for v in pool if not hidden(v))
            if self.blocks(candidate):
                canonical = candidate
                optimal = self._optimal()
                minimal, complete = self._minimal(canonical)
            else:
                if g.adjacent(x, y) and g.mark[y][x] == "arrow":
                    self.notes.append(f"the edge {g.edge_text(x, y)} points into {x}: it is a "
                                      "non-causal path (a hidden common cause, or the outcome "
                                      "acting on the treatment) that no set can block")
                else:
                    self.notes.append("no set of measured, not forbidden variables blocks every "
                                      f"non-causal path from {x} to {y}")
        return ControlSets(x, y, g.kind, self.amenable, self.breaking_path, canonical, optimal,
                           minimal, MINIMAL_BOUND, complete, self.forbidden, self.causal_nodes,
                           tuple(self.notes), CONTROL_CAUTIONS, self)

    def _optimal(self):
        """Henckel, Perković & Maathuis (2022): O = pa(cn) \\ forb, with cn the causal nodes
        and forb their descendants and the treatment, read in a member of the class (the set
        is the same in every member of an amenable CPDAG or PDAG)."""
        if self.g.kind == "pag":
            self.notes.append("the optimal set is defined here for diagrams without hidden "
                              "causes only; use the canonical or a minimal set")
            return None
        if not self.member_causal:
            self.notes.append("no causal path, so no optimal set: any valid set estimates "
                              "the zero effect")
            return None
        d = self.member
        forb = set(self.member_causal) | {self.x}
        for c in self.member_causal:
            forb |= nx.descendants(d, c)
        o = set()
        for c in self.member_causal:
            o |= set(d.predecessors(c))
        o = frozenset(o - forb)
        if not self.blocks(o) or o & self.forbidden:
            self.notes.append("the optimal set could not be confirmed valid; use the canonical "
                              "or a minimal set")
            return None
        return o

    def _minimal(self, canonical):
        """Minimal valid sets, smallest first (at most ``MINIMAL_BOUND``).

        Minimal sets lie among the treatment's and outcome's ancestors in the member's proper
        back-door graph, where d-separation is vertex separation in the moral graph (Tian,
        Paz & Pearl 1998; van der Zander, Liśkiewicz & Textor 2019). Minimal separators made
        of allowed (not forbidden, measured) nodes are generated from x's side outwards, each
        from the previous by moving one separator node to x's side and taking the separator
        closest to it (Berry, Bordat & Cogis 1999; Takata 2010).
        """
        x, y = self.x, self.y
        an = nx.ancestors(self.pbd, x) | nx.ancestors(self.pbd, y) | {x, y}
        moral = nx.moral_graph(self.pbd.subgraph(an))
        allowed = set(canonical) & an

        def component(start, removed):
            seen, stack = set(start), list(start)
            while stack:
                u = stack.pop()
                for w in moral[u]:
                    if w not in seen and w not in removed:
                        seen.add(w)
                        stack.append(w)
            return seen

        def border(part):
            return {w for u in part for w in moral[u]} - part

        def closest(part):
            """The minimal separator of allowed nodes closest to ``part`` (van der Zander,
            Liśkiewicz & Textor 2019, FindMinSep): the part grows through every node that may
            not be in a set (hidden, forbidden, not an ancestor), then the allowed nodes on
            its border are cut down to those that also border the outcome's side."""
            if y in part:
                return None
            side = component(part, allowed - part)
            if y in side:
                return None  # a path through nodes that may not be controlled for
            t = border(side)
            return frozenset(border(component({y}, t)) & t)

        found, queue = set(), []
        first = closest({x})
        if first is not None:
            found.add(first)
            queue.append(first)
        complete = True
        while queue:
            sep = queue.pop()
            side = component({x}, sep)
            for s in sorted(sep, key=str):
                nxt = closest(side | {s})
                if nxt is not None and nxt not in found:
                    found.add(nxt)
                    queue.append(nxt)
                    if len(found) >= _SUBSET_BUDGET:
                        complete, queue = False, []
                        break
        ordered = sorted(found, key=lambda z: (len(z), sorted(map(str, z))))
        ordered = [z for z in ordered if self.blocks(z)]
        if len(ordered) > MINIMAL_BOUND:
            complete = False
        return tuple(ordered[:MINIMAL_BOUND]), complete
