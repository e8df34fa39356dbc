"""``discover``: the PC-style search from data (or an oracle) to an equivalence class.

The steps, each in its own module: the order-independent adjacency search
(:mod:`._skeleton`, Colombo & Maathuis 2014), then knowledge, colliders and Meek's rules
(:mod:`._orientation`; Spirtes, Glymour & Scheines 2000; Meek 1995). Every p-value goes through
one :class:`~discovery.independence.PValueCache`, so a second search with another α, depth,
collider rule or knowledge reuses the tests already run.
"""

from __future__ import annotations

import platform
import time
from itertools import combinations
from typing import Callable

import numpy as np

from ..exceptions import DataValidationError, KnowledgeError, SettingsError
from ..independence import IndependenceTest, PValueCache, make_test
from ..result import Edge, Removal, SearchResult
from ..settings import SearchSettings, check_parameter
from ..knowledge import Knowledge
from ._orientation import orient
from ._skeleton import adjacency_search

__all__ = ["discover"]


def discover(data=None, *, test="fisher-z", alpha: float = 0.05, max_depth: int | None = None,
             knowledge: Knowledge | None = None, collider_rule: str = "standard",
             missing: str = "drop", columns=None, cache: PValueCache | None = None,
             executor=None, progress: Callable | None = None, cancel=None,
             test_options: dict | None = None) -> SearchResult:
    """Search for the equivalence class of causal diagrams that fits the data.

    Parameters
    ----------
    data : pandas.DataFrame, discovery.data.Dataset, or None
        The measurements (one column per variable). None when ``test`` is an object that
        carries its own data, such as a :class:`~discovery.independence.DSeparationOracle`.
    test : str or IndependenceTest
        A test name (see ``discovery.independence.TEST_NAMES``) or a test object.
    alpha : float in (0, 1)
        Significance level: a pair is judged independent when its p-value is above alpha.
    max_depth : int or None
        Largest conditioning-set size (the **depth**); None for no limit.
    knowledge : Knowledge, optional
        Locked and forbidden edges and directions, and stages.
    collider_rule : {"standard", "conservative", "majority"}
    missing : {"drop", "test-wise"}
        Missing-value policy when ``data`` is a DataFrame.
    columns : list of str, optional
        Variables to include (default: all usable columns).
    cache : PValueCache, optional
        Shared p-value cache; pass the same one to later searches to reuse their tests.
    executor : discovery.executor.Executor, optional
        Where tests that are not vectorised run (default: in-process).
    progress : callable, optional
        Called with ``{"phase", "level", "done", "planned"}`` as the search advances.
    cancel : callable or threading.Event, optional
        When it returns True (or is set), the search stops with ``SearchCancelled``.
    test_options : dict, optional
        Extra keyword arguments for the test's constructor.

    Returns
    -------
    SearchResult

    Raises
    ------
    SettingsError
        A setting is outside its range.
    DataValidationError
        The data cannot be used with this test (see :mod:`discovery.data`).
    KnowledgeError
        The knowledge names unknown variables or contradicts itself.
    SearchCancelled
        ``cancel`` fired before the search finished.

    Notes
    -----
    A NaN p-value (a test that could not be computed) never separates a pair: the edge stays
    and the summary counts such tests.

    Examples
    --------
    >>> import networkx as nx
    >>> from discovery.independence import DSeparationOracle
    >>> dag = nx.DiGraph([("rain", "wet"), ("sprinkler", "wet"), ("wet", "slippery")])
    >>> result = discover(None, test=DSeparationOracle(dag))
    >>> [e.arrow() for e in result.edges]
    ['rain → wet', 'sprinkler → wet', 'wet → slippery']
    """
    started = time.perf_counter()
    knowledge = knowledge if knowledge is not None else Knowledge()
    if not isinstance(knowledge, Knowledge):
        raise KnowledgeError("knowledge must be a discovery.Knowledge (read files with "
                             "discovery.read_knowledge)")
    dataset = None
    if isinstance(test, IndependenceTest):
        test_obj = test
        test_name = test.name
    elif isinstance(test, str):
        check_parameter("test", test)
        test_name = test
        test_obj = None
    else:
        raise SettingsError(f"The 'test' parameter of discover must be a test name or an "
                            f"IndependenceTest. Got {type(test).__name__} instead.")
    settings = SearchSettings(test=test_name, alpha=alpha, max_depth=max_depth,
                              collider_rule=collider_rule, missing=missing)
    if test_obj is None:
        if data is None:
            raise DataValidationError("no data given; pass a DataFrame, a Dataset, or a test "
                                      "object such as DSeparationOracle")
        dataset = _as_dataset(data, columns=columns, missing=missing)
        from ..data import check_for_search
        check_for_search(dataset, test=test_name, max_depth=max_depth)
        test_obj = make_test(test_name, dataset.frame, missing=dataset.missing,
                             **(test_options or {}))
    names = tuple(test_obj.variables)
    knowledge.check_variables(names)
    index = {v: i for i, v in enumerate(names)}
    notes: list[str] = []
    depth = max_depth
    if test_obj.n is not None and test_name == "fisher-z":
        cap = test_obj.n - 4
        if depth is None or depth > cap:
            if depth is None and cap < len(names) - 2:
                notes.append(f"depth limited to {cap} by the number of rows ({test_obj.n})")
            depth = cap if depth is None else depth
    cache = cache if cache is not None else PValueCache()
    cancelled = _cancel_check(cancel)

    def pvalues(batch):
        return cache.pvalues(test_obj, batch, executor=executor)

    locked = [(index[a], index[b]) for a, b in knowledge.locked + knowledge.locked_directions]
    forbidden = [(index[a], index[b]) for a, b in knowledge.forbidden]
    hits0, misses0 = cache.hits, cache.misses
    t0 = time.perf_counter()
    skeleton = adjacency_search(len(names), pvalues, alpha=settings.alpha, names=names,
                                max_depth=depth, locked=locked, forbidden=forbidden,
                                progress=progress, cancelled=cancelled)
    t1 = time.perf_counter()
    rank = np.empty(len(names), dtype=np.intp)
    rank[np.argsort(np.asarray(names, dtype=object), kind="stable")] = np.arange(len(names))

    def why_forbidden(a, b):
        return knowledge.is_direction_forbidden(names[a], names[b])

    separating_sets_of = None
    if settings.collider_rule != "standard":
        separating_sets_of = _separating_sets_finder(skeleton.adjacent, pvalues,
                                                     settings.alpha, depth, cancelled)
    orientation = orient(
        skeleton.adjacent, skeleton.sepsets, names=names, rank=rank,
        collider_rule=settings.collider_rule,
        locked_directions=[(index[a], index[b]) for a, b in knowledge.locked_directions],
        why_forbidden=why_forbidden, separating_sets_of=separating_sets_of,
        unseparated=skeleton.unseparated_forbidden)
    t2 = time.perf_counter()
    for x, y, s, p in skeleton.locked_conflicts:
        orientation.conflicts.insert(0, (
            f"{names[x]} — {names[y]} is locked, but the data find them independent given "
            f"{_names_text(s, names, rank)} (p = {p:.3g}); kept because it is locked"))
    if skeleton.unseparated_forbidden:
        notes.append(f"{len(skeleton.unseparated_forbidden)} forbidden pair(s) had no "
                     "separating set in the data; triples through them were left undecided")
    return _build_result(names, rank, settings, knowledge, skeleton, orientation, notes,
                         dataset, test_obj, cache, hits0, misses0,
                         timings={"skeleton_s": t1 - t0, "orientation_s": t2 - t1,
                                  "total_s": time.perf_counter() - started})


def _as_dataset(data, *, columns, missing):
    from ..data import Dataset, prepare_frame
    if isinstance(data, Dataset):
        if columns is not None:
            return prepare_frame(data.frame, columns=columns, missing=data.missing,
                                 source=data.source)
        return data
    if hasattr(data, "columns"):
        return prepare_frame(data, columns=columns, missing=missing)
    raise DataValidationError(f"data must be a pandas DataFrame or a Dataset; got "
                              f"{type(data).__name__} (read files with discovery.read_table)")


def _cancel_check(cancel):
    if cancel is None:
        return None
    if hasattr(cancel, "is_set"):
        return cancel.is_set
    return cancel


def _names_text(s, names, rank):
    return "{" + ", ".join(names[v] for v in sorted(s, key=rank.__getitem__)) + "}"


def _separating_sets_finder(adjacent, pvalues, alpha, depth, cancelled):
    """Every independent set among subsets of the final neighbours of x and of y."""
    memo = {}

    def find(x, y):
        key = (min(x, y), max(x, y))
        if key not in memo:
            if cancelled is not None and cancelled():
                from ..exceptions import SearchCancelled
                raise SearchCancelled("the search was stopped before it finished")
            candidates = []
            seen = set()
            for base in (adjacent[x] - {y}, adjacent[y] - {x}):
                top = len(base) if depth is None else min(len(base), depth)
                for k in range(top + 1):
                    for s in combinations(sorted(base), k):
                        if s not in seen:
                            seen.add(s)
                            candidates.append((key[0], key[1], s))
            p = pvalues(candidates) if candidates else np.empty(0)
            memo[key] = [set(c[2]) for c, pv in zip(candidates, p) if pv > alpha]
        return memo[key]

    return find


def _software() -> dict:
    import networkx
    import pandas
    import scipy
    from .. import __version__
    return {"edgewise": __version__, "python": platform.python_version(),
            "numpy": np.__version__, "scipy": scipy.__version__,
            "pandas": pandas.__version__, "networkx": networkx.__version__}


def _build_result(names, rank, settings, knowledge, skeleton, orientation, notes, dataset,
                  test_obj, cache, hits0, misses0, timings) -> SearchResult:
    key = rank.__getitem__

    def ordered(a, b):
        return (a, b) if key(a) < key(b) else (b, a)

    def sorted_names(s):
        return tuple(names[v] for v in sorted(s, key=key))

    by_pair: dict[tuple[int, int], list[float]] = {}
    tests = []
    for x, y, s, p in skeleton.log:
        a, b = ordered(x, y)
        by_pair.setdefault((a, b), []).append(p)
        tests.append((names[a], names[b], sorted_names(s), p))
    tests.sort(key=lambda t: (t[0], t[1], len(t[2]), t[2]))
    locked_pairs = knowledge.required_adjacent()
    heads = orientation.heads
    edges = []
    for x in range(len(names)):
        for y in skeleton.adjacent[x]:
            if key(y) < key(x):
                continue
            ps = [p for p in by_pair.get((x, y), []) if p == p]
            stats = dict(max_pvalue=max(ps) if ps else float("nan"),
                         tests=len(by_pair.get((x, y), [])),
                         locked=frozenset((names[x], names[y])) in locked_pairs)
            hx, hy = (y, x) in heads, (x, y) in heads
            if hx and hy:
                reason = "; ".join(orientation.reasons[e][1] for e in ((x, y), (y, x)))
                edges.append(Edge(names[x], names[y], "contested", reason, "contested",
                                  **stats))
            elif hy or hx:
                s, t = (x, y) if hy else (y, x)
                kind, text = orientation.reasons[(s, t)]
                edges.append(Edge(names[s], names[t], "directed", text, kind, **stats))
            else:
                edges.append(Edge(names[x], names[y], "undirected", "", "", **stats))
    edges.sort(key=lambda e: (e.source, e.target))
    forbidden = knowledge.forbidden_adjacent()
    removed = []
    for (x, y), (s, p) in skeleton.sepsets.items():
        a, b = ordered(x, y)
        by = "knowledge" if frozenset((names[a], names[b])) in forbidden else "test"
        removed.append(Removal(names[a], names[b], sorted_names(s), p, by))
    for x, y in skeleton.unseparated_forbidden:
        a, b = ordered(x, y)
        removed.append(Removal(names[a], names[b], None, float("nan"), "knowledge"))
    removed.sort(key=lambda r: (r.a, r.b))
    kinds = [e.kind for e in edges]
    counts = {"edges": len(edges), "directed": kinds.count("directed"),
              "undirected": kinds.count("undirected"), "contested": kinds.count("contested"),
              "removed": len(removed), "tests": len(tests),
              "tests_computed": cache.misses - misses0, "tests_from_cache": cache.hits - hits0,
              "depth_reached": skeleton.depth_reached, "levels": list(skeleton.levels)}
    data = {"rows": getattr(test_obj, "n", None), "columns": len(names)}
    if dataset is not None:
        data.update(rows=dataset.rows_used, rows_read=dataset.rows_read,
                    sha256=dataset.sha256, source=dataset.source, missing=dataset.missing,
                    excluded=dict(dataset.excluded))
        notes = list(dataset.notes) + notes
    return SearchResult(
        variables=names, settings=settings, knowledge=knowledge, edges=tuple(edges),
        removed=tuple(removed), tests=tuple(tests),
        triples=tuple(sorted(orientation.triples, key=lambda t: (t["z"], t["x"], t["y"]))),
        conflicts=tuple(orientation.conflicts), notes=tuple(notes) + tuple(orientation.notes),
        counts=counts, timings={k: round(v, 6) for k, v in timings.items()}, data=data,
        software=_software(), seed=getattr(test_obj, "seed", None))
