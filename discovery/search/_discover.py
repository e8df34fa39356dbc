"""``discover``: the PC-style search from data (or an oracle) to an equivalence class.

The steps, each in its own module: the order-independent adjacency search
(:mod:`._skeleton`, Colombo & Maathuis 2014), then knowledge, colliders and Meek's rules
(:mod:`._orientation`; Spirtes, Glymour & Scheines 2000; Meek 1995). With
``hidden_causes=True`` the search is FCI: after the adjacency search comes the
possible-d-separating-set phase (:mod:`._fci`), then the marks of a partial ancestral graph
(:mod:`._pag_orientation`; Spirtes, Meek & Richardson 1999; Zhang 2008). Every p-value goes
through one :class:`~discovery.independence.PValueCache`, so a second search with another α,
depth, collider rule or knowledge reuses the tests already run.
"""

from __future__ import annotations

import dataclasses
import platform
import time
import warnings
from itertools import combinations
from typing import Callable

import numpy as np

from ..exceptions import DataValidationError, KnowledgeError, SettingsError
from ..executor import blas_threads
from ..independence import FisherZ, IndependenceTest, PValueCache, make_test
from ..independence._base import canonical_triple
from ..result import Edge, LazyRecords, Removal, SearchResult, TestLog
from ..settings import SearchSettings, check_parameter, default_collider_rule
from ..knowledge import Knowledge
from ._fci import PDS_AUTO_FACTOR, PDS_AUTO_MINIMUM, possible_d_sep_phase
from ._orientation import orient
from ._pag_orientation import MARK_NAMES, collider_marks, orient_pag
from ._skeleton import adjacency_search

__all__ = ["discover"]


def discover(data=None, *, test="fisher-z", alpha: float = 0.05, max_depth: int | None = None,
             knowledge: Knowledge | None = None, collider_rule: str | None = None,
             missing: str = "drop", columns=None, cache: PValueCache | None = None,
             executor=None, progress: Callable | None = None, cancel=None,
             test_options: dict | None = None, hidden_causes: bool = False,
             pds_budget="auto", jobs: int | None = None,
             cluster: str | None = None, unrelated: str = "significance",
             margin: float | None = None) -> SearchResult:
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
    collider_rule : {"standard", "conservative", "majority"} or None
        How an unshielded triple x – z – y is judged a collider from the separating sets of
        x and y (see :func:`discovery.search.orient`). None (the default) chooses by mode:
        ``"standard"``, and ``"majority"`` with ``hidden_causes=True`` — there the majority
        rule of Colombo & Maathuis (2014, JMLR 15) makes the possible-d-separating sets and
        so the skeleton independent of the order of the variables and gives fewer false
        arrowheads on finite samples (docs/hidden-causes.md). The rule used is recorded in
        ``result.settings.collider_rule``.
    missing : {"drop", "test-wise"}
        Missing-value policy when ``data`` is a DataFrame.
    columns : list of str, optional
        Variables to include (default: all usable columns).
    cache : PValueCache, optional
        Shared p-value cache; pass the same one to later searches to reuse their tests.
    executor : discovery.executor.Executor, optional
        Where tests that are not vectorised run (default: in-process, or as ``jobs`` and
        ``cluster`` say).
    progress : callable, optional
        Called with ``{"phase", "level", "done", "planned"}`` as the search advances.
    cancel : callable or threading.Event, optional
        When it returns True (or is set), the search stops with ``SearchCancelled``.
    test_options : dict, optional
        Extra keyword arguments for the test's constructor.
    hidden_causes : bool
        Allow unmeasured common causes of the measured variables: run FCI (the
        possible-d-separating-set phase, then Zhang's rules R1–R10) and return a partial
        ancestral graph whose edge ends are tails, arrowheads or circles (see
        docs/hidden-causes.md).
    pds_budget : "auto", int or None
        In the hidden-causes mode, the most tests the possible-d-separating-set phase may
        run: ``"auto"`` allows four times the tests of the adjacency search (at least
        5,000), None no limit. Pairs left unchecked are reported in the notes and with a
        :class:`SearchLimitWarning`.
    jobs : int, optional
        Without ``executor``: local worker processes for tests that are not vectorised
        (see :func:`discovery.executor.make_executor`); started and ended by this call.
    cluster : str, optional
        Without ``executor``: a Dask scheduler's address (``"tcp://host:port"``) to run
        those tests on instead.
    unrelated : {"significance", "equivalence"}
        What makes a pair unrelated (the **unrelated rule**): ``"significance"``, a p-value
        above ``alpha`` (the usual rule); ``"equivalence"``, two one-sided tests at level
        ``alpha`` show the effect lies within ``±margin`` (Schuirmann 1987; see
        :mod:`discovery.robustness`). Equivalence works with ``fisher-z`` and ``g-squared``.
    margin : float in (0, 1), optional
        The equivalence margin δ (a partial correlation; for G² the mutual information of a
        correlation of δ). Needed with ``unrelated="equivalence"``.

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
    ClusterError
        ``cluster`` cannot be reached or used.
    WorkerError
        A test failed in a worker process or on the cluster, or a worker was lost.

    Notes
    -----
    A NaN p-value (a test that could not be computed) never counts as evidence either way:
    it does not separate the pair, nor does it show a dependence. A pair with such a test is
    **untestable**: its edge stays and is marked (:attr:`Edge.untestable`, with the test's
    reason when it offers ``untestable_reason(x, y, given)``), and the summary lists it.

    Examples
    --------
    >>> import networkx as nx
    >>> from discovery.independence import DSeparationOracle
    >>> dag = nx.DiGraph([("rain", "wet"), ("sprinkler", "wet"), ("wet", "slippery")])
    >>> result = discover(None, test=DSeparationOracle(dag))
    >>> [e.arrow() for e in result.edges]
    ['rain → wet', 'sprinkler → wet', 'wet → slippery']
    """
    if executor is None and ((jobs is not None and jobs != 1) or cluster):
        from ..executor import make_executor
        with make_executor(jobs, cluster) as owned:
            return discover(data, test=test, alpha=alpha, max_depth=max_depth,
                            knowledge=knowledge, collider_rule=collider_rule, missing=missing,
                            columns=columns, cache=cache, executor=owned, progress=progress,
                            cancel=cancel, test_options=test_options,
                            hidden_causes=hidden_causes, pds_budget=pds_budget)
    started = t_data = time.perf_counter()
    knowledge = knowledge if knowledge is not None else Knowledge()
    if not isinstance(knowledge, Knowledge):
        raise KnowledgeError("knowledge must be a discovery.Knowledge (read files with "
                             "discovery.read_knowledge)")
    dataset = None
    if isinstance(test, IndependenceTest):
        test_obj = test
        test_name = test.name
        from ..data import Dataset
        if isinstance(data, Dataset) and sorted(data.variables) == sorted(test.variables):
            dataset = data  # the data the test was built from, for the record (a sweep)
    elif isinstance(test, str):
        check_parameter("test", test)
        test_name = test
        test_obj = None
    else:
        raise SettingsError(f"The 'test' parameter of discover must be a test name or an "
                            f"IndependenceTest. Got {type(test).__name__} instead.")
    rule_by_default = collider_rule is None
    if rule_by_default:
        collider_rule = default_collider_rule(hidden_causes)
    settings = SearchSettings(test=test_name, alpha=alpha, max_depth=max_depth,
                              collider_rule=collider_rule, missing=missing,
                              test_options=dict(test_options or {}),
                              hidden_causes=hidden_causes, unrelated=unrelated,
                              margin=margin)
    if not (pds_budget is None or pds_budget == "auto" or (
            isinstance(pds_budget, int) and not isinstance(pds_budget, bool)
            and pds_budget >= 0)):
        raise SettingsError(f"The 'pds_budget' parameter of discover must be 'auto', None or "
                            f"an int in [0, inf). Got {pds_budget!r} instead.")
    if settings.unrelated == "equivalence" and settings.hidden_causes:
        raise SettingsError("unrelated='equivalence' does not work with hidden_causes=True "
                            "yet; use the significance rule for the hidden-causes search")
    if settings.unrelated == "equivalence" and test_obj is None:
        from ..robustness._equivalence import EQUIVALENCE_TESTS
        if test_name not in EQUIVALENCE_TESTS:
            raise SettingsError(f"unrelated='equivalence' works with the tests "
                                f"{', '.join(EQUIVALENCE_TESTS)}; test {test_name!r} has no "
                                "effect size to bound: use unrelated='significance' or "
                                "another test")
    if test_obj is None:
        if data is None:
            raise DataValidationError("no data given; pass a DataFrame, a Dataset, or a test "
                                      "object such as DSeparationOracle")
        dataset = _as_dataset(data, columns=columns, missing=missing)
        if dataset.missing != settings.missing:  # a Dataset carries its own policy
            settings = dataclasses.replace(settings, missing=dataset.missing)
        test_obj, t_data = _test_for(dataset, test_name, max_depth, test_options)
    display = tuple(dataset.variables) if dataset is not None else tuple(test_obj.variables)
    equivalence = settings.unrelated == "equivalence"
    if equivalence:
        from ..robustness._equivalence import EquivalenceTest
        test_obj = EquivalenceTest(test_obj, settings.margin)
    if list(test_obj.variables) != sorted(test_obj.variables):
        test_obj = NameOrderedTest(test_obj)
    # From here on, variable indices follow the order of the names: enumeration and every
    # choice the search makes are then independent of the data's column order.
    names = tuple(test_obj.variables)
    notes: list[str] = []
    if rule_by_default and settings.hidden_causes:
        notes.append("collider rule: majority, the default of the hidden-causes mode (Colombo "
                     "& Maathuis 2014): a triple is a collider when its middle is in fewer "
                     "than half of the separating sets found; choose another with "
                     "collider_rule (--collider-rule)")
    if dataset is not None:
        knowledge = _knowledge_within(knowledge, dataset, notes)
    knowledge.check_variables(names)
    index = {v: i for i, v in enumerate(names)}
    depth = max_depth
    if test_obj.n is not None and test_name == "fisher-z":
        cap = test_obj.n - 4
        if depth is None or depth > cap:
            if depth is None and cap < len(names) - 2:
                notes.append(f"depth limited to {cap} by the number of rows ({test_obj.n})")
            depth = cap if depth is None else depth
    cancelled = _cancel_check(cancel)
    if executor is not None and cancelled is not None and hasattr(executor, "watching"):
        executor = executor.watching(cancelled)  # Stop reaches work running on workers
    owned_cache = cache is None
    if cache is None and settings.collider_rule == "standard":
        # Nothing could be reused: no earlier search, and the standard rule runs no test
        # twice. Skip the cache's bookkeeping.
        cache = _CountingPassThrough()
    elif cache is None:
        cache = PValueCache()

    # The adjacency search never asks for one test twice: what it computes is handed to the
    # cache when it ends (sorted once, when a later lookup needs it, not batch by batch);
    # later phases, which may repeat its tests, go to the cache itself.
    deferred = cache.deferred() if hasattr(cache, "deferred") else None

    def pvalues(idx):
        return (deferred or cache).pvalues_array(test_obj, idx, executor=executor)

    # The skeleton separates a pair when p > alpha. Equivalence p-values separate when
    # p <= alpha: the skeleton sees -p against -alpha (the same order, reversed, exactly),
    # and the signs are restored after the search.
    sign = -1.0 if equivalence else 1.0
    if equivalence:
        def pvalues(idx, plain=pvalues):
            return -plain(idx)

    locked = [(index[a], index[b]) for a, b in knowledge.locked + knowledge.locked_directions]
    forbidden = [(index[a], index[b]) for a, b in knowledge.forbidden]
    hits0, misses0 = cache.hits, cache.misses
    not_kept0 = getattr(cache, "not_kept", 0)
    rank = list(range(len(names)))  # indices follow name order (a list: fast lookups)

    def why_forbidden(a, b):
        return knowledge.is_direction_forbidden(names[a], names[b])

    if not (knowledge.forbidden_directions or knowledge.stages):
        why_forbidden = None  # nothing can forbid a direction: skip the checks
    t0 = time.perf_counter()
    # A vectorised test's batches are elementwise work on small arrays: BLAS threads gain
    # nothing there, and threads left spinning after the correlation matrix compete with it.
    with blas_threads(1 if test_obj.vectorised else None):
        try:
            skeleton = adjacency_search(len(names), pvalues, alpha=sign * settings.alpha,
                                        max_depth=depth,
                                        locked=locked, forbidden=forbidden,
                                        progress=progress, cancelled=cancelled,
                                        association=test_obj.association(),
                                        batch_limit=None if test_obj.vectorised
                                        else 64 * max(1, getattr(executor, "jobs", 1)),
                                        may_separate=None if equivalence
                                        else lambda pairs: test_obj.may_separate(
                                            pairs, settings.alpha))
        finally:
            if deferred is not None:
                deferred.close()  # a stopped search keeps what it computed, as before
                deferred = None
        if equivalence:
            _restore_signs(skeleton)
        t1 = t_pds = time.perf_counter()
        collider_tally = [0, 0]  # cache hits and misses of the collider rules' tests

        def collider_pvalues(batch):
            hits, misses = cache.hits, cache.misses
            out = sign * cache.pvalues(test_obj, batch, executor=executor, canonical=True)
            collider_tally[0] += cache.hits - hits
            collider_tally[1] += cache.misses - misses
            return out

        def finder(adjacent):
            return _separating_sets_finder(adjacent, collider_pvalues, sign * settings.alpha,
                                           depth, cancelled)

        if settings.hidden_causes:
            pds_pvalues = pvalues
            if owned_cache and isinstance(cache, PValueCache):
                # No later step reads these tests again (the collider rules ask only for
                # subsets of neighbours, which this phase skips): count them, skip storing.
                def pds_pvalues(idx):
                    cache.misses += len(idx)
                    return test_obj.pvalues_array(idx, executor=executor)
            _possible_d_sep_phase(skeleton, names, pds_pvalues, settings, depth, locked,
                                  progress, cancelled, test_obj, executor, pds_budget, notes,
                                  finder)
            t_pds = time.perf_counter()
        # the search's tests (those in the log); the collider rules' tests are counted apart
        hits1 = cache.hits - collider_tally[0]
        misses1 = cache.misses - collider_tally[1]
        if skeleton.memory_limit:
            from ..exceptions import SearchLimitWarning
            notes.append(skeleton.memory_limit)
            warnings.warn(skeleton.memory_limit, SearchLimitWarning, stacklevel=2)
        separating_sets_of = None
        if settings.collider_rule != "standard":
            separating_sets_of = finder(skeleton.adjacent)
        if settings.hidden_causes:
            orientation = orient_pag(
                skeleton.adjacent, skeleton.sepsets, names=names, rank=rank,
                collider_rule=settings.collider_rule, separating_sets_of=separating_sets_of,
                unseparated=skeleton.unseparated_forbidden,
                locked_directions=[(index[a], index[b]) for a, b in knowledge.locked_directions],
                why_forbidden=why_forbidden)
        else:
            orientation = orient(
                skeleton.adjacent, skeleton.sepsets, names=names, rank=rank,
                collider_rule=settings.collider_rule,
                locked_directions=[(index[a], index[b])
                                   for a, b in knowledge.locked_directions],
                why_forbidden=why_forbidden, separating_sets_of=separating_sets_of,
                unseparated=skeleton.unseparated_forbidden)
    t2 = time.perf_counter()
    not_kept = getattr(cache, "not_kept", 0) - not_kept0
    if not_kept:
        notes.append(f"the p-value store was full ({cache.nbytes / 2**30:,.2f} GiB): "
                     f"{not_kept:,} p-value(s) of this search were not kept, and a re-run "
                     "(another α, knowledge) computes them again")
    for x, y, s, p in skeleton.locked_conflicts:
        orientation.conflicts.insert(0, (
            f"{names[x]} — {names[y]} is locked, but the data find them independent given "
            f"{_names_text(s, names, rank)} (p = {p:.3g}); kept because it is locked"))
    if skeleton.unseparated_forbidden:
        notes.append(f"{len(skeleton.unseparated_forbidden)} forbidden pair(s) had no "
                     "separating set in the data; triples through them were left undecided")
    undecided = ()
    if equivalence:
        undecided = _undecided_pairs(skeleton, test_obj, settings.alpha, names)
        notes.append(f"unrelated rule: equivalence with margin {settings.margin:g}; a pair "
                     f"was removed only when two one-sided tests (alpha {settings.alpha:g}) "
                     f"showed its effect within ±{settings.margin:g}; the removed pairs' "
                     "p-values are equivalence p-values")
        if undecided:
            notes.append(f"{len(undecided)} pair(s) undecided (neither shown related nor "
                         "shown within the margin; kept adjacent): "
                         + ", ".join(f"{a} — {b}" for a, b in undecided))
    return _build_result(names, display, rank, settings, knowledge, skeleton, orientation, notes,
                         dataset, test_obj, cache, (hits0, misses0, hits1, misses1), undecided,
                         timings={"data_s": t_data - started,
                                  "test_setup_s": t0 - t_data,
                                  "skeleton_s": t1 - t0, "orientation_s": t2 - t_pds,
                                  **({"possible_d_sep_s": t_pds - t1}
                                     if settings.hidden_causes else {}),
                                  "total_s": time.perf_counter() - started})


def _possible_d_sep_phase(skeleton, names, pvalues, settings, depth, locked, progress,
                          cancelled, test_obj, executor, budget, notes, finder):
    """FCI's second adjacency phase (:mod:`._fci`): edges are removed from ``skeleton`` in
    place, their separating sets recorded and the tests added to its log."""
    if budget == "auto":
        budget = max(PDS_AUTO_MINIMUM, PDS_AUTO_FACTOR * skeleton.log.tests)
    # The colliders that shape the possible-d-separating sets follow the search's collider
    # rule: with the conservative or majority rule the sets, and so the final skeleton, do
    # not depend on which separating set the adjacency search happened to find first
    # (Colombo & Maathuis 2014, JMLR 15, section on FCI).
    rule = settings.collider_rule
    marks = collider_marks(len(names), skeleton.adjacent, skeleton.sepsets, names=names,
                           rank=list(range(len(names))), collider_rule=rule,
                           separating_sets_of=None if rule == "standard"
                           else finder(skeleton.adjacent),
                           unseparated=skeleton.unseparated_forbidden)[0]
    phase = possible_d_sep_phase(
        skeleton.adjacent, marks, pvalues, alpha=settings.alpha, max_depth=depth,
        locked=locked, budget=float("inf") if budget is None else budget, progress=progress,
        cancelled=cancelled,
        batch_limit=None if test_obj.vectorised else 64 * max(1, getattr(executor, "jobs", 1)))
    by_width = {}
    for x, y, s, p in phase["removed"]:
        skeleton.adjacent[x].discard(y)
        skeleton.adjacent[y].discard(x)
        by_width.setdefault(len(s), []).append(((x, y, *s), p))
    for width in sorted(by_width):
        rows, ps = zip(*by_width[width])
        skeleton.sepsets.record(np.asarray(rows, dtype=np.intp).reshape(len(rows), -1),
                                np.asarray(ps, dtype=float))
    skeleton.log.extend(phase["log"])
    skeleton.levels.extend(phase["levels"])
    skeleton.locked_conflicts.extend(phase["locked_conflicts"])
    skeleton.pds = {"tests": phase["tests"], "removed": len(phase["removed"]),
                    "largest_set": phase["largest"], "unfinished": len(phase["unfinished"])}
    if phase["unfinished"]:
        text = (f"the possible-d-separating-set phase stopped at its budget of {budget:,} "
                f"tests; {len(phase['unfinished'])} pair(s) were not fully checked and may "
                "keep edges that a hidden-cause-aware search would remove: "
                + ", ".join(f"{names[x]} — {names[y]}" for x, y in phase["unfinished"][:10])
                + (" …" if len(phase["unfinished"]) > 10 else ""))
        notes.append(text)
        from ..exceptions import SearchLimitWarning
        warnings.warn(text, SearchLimitWarning, stacklevel=3)
    if depth is not None and phase["largest"] > depth:
        notes.append(f"possible-d-separating sets have up to {phase['largest']} variables; "
                     f"subsets were tried up to the depth limit {depth}")


def _test_for(dataset, test_name, max_depth, test_options):
    """Check the data for the test and build it (variables in name order); returns the test
    and the time the checks ended. A sweep builds its test once through this."""
    from ..data import check_collinearity, check_for_search
    from ..resources import check_search_memory
    check_for_search(dataset, test=test_name, max_depth=max_depth, collinearity=False)
    check_search_memory(len(dataset.variables), len(dataset.frame))
    frame = dataset.frame
    in_name_order = sorted(dataset.variables)
    if list(dataset.variables) != in_name_order:
        frame = frame[in_name_order]
    t_data = time.perf_counter()
    if test_name == "fisher-z" and not test_options:
        # the dataset is already hashed: name the data by that hash and the column order
        test_obj = FisherZ(frame, missing=dataset.missing, fingerprint=dataset.sha256)
    else:
        test_obj = make_test(test_name, frame, missing=dataset.missing,
                             **(test_options or {}))
    if test_name == "fisher-z":
        # reuse the test's correlation matrix for the collinearity check (one matrix)
        corr = getattr(test_obj, "_corr", None)
        if corr is not None and list(dataset.variables) != in_name_order:
            at = {v: i for i, v in enumerate(in_name_order)}
            order = [at[v] for v in dataset.variables]
            corr = corr[np.ix_(order, order)]
        check_collinearity(dataset, correlation=corr)
    return test_obj, t_data


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


def _knowledge_within(knowledge: Knowledge, dataset, notes: list) -> Knowledge:
    """Drop (with a note) the knowledge about columns that are in the data but not searched
    (not selected, excluded, constant...); a name absent from the data stays an error."""
    outside = sorted((knowledge.variables & set(dataset.kinds)) - set(dataset.variables))
    if not outside:
        return knowledge
    keep = set(dataset.variables) | (knowledge.variables - set(dataset.kinds))
    fields = ("locked", "locked_directions", "forbidden", "forbidden_directions")
    pairs = {f: tuple(p for p in getattr(knowledge, f) if set(p) <= keep) for f in fields}
    dropped = sum(len(getattr(knowledge, f)) - len(pairs[f]) for f in fields)
    stages = tuple(tuple(v for v in g if v in keep) for g in knowledge.stages)
    why = "; ".join(f"{v!r} {dataset.excluded.get(v, 'not used')}" for v in outside[:6])
    notes.append(f"knowledge about {', '.join(repr(v) for v in outside)}, which "
                 f"{'is' if len(outside) == 1 else 'are'} in the data but not in the search "
                 f"({why}), was dropped: {dropped} pair statement(s) and "
                 f"{'its' if len(outside) == 1 else 'their'} place in the stages")
    return Knowledge(**pairs, stages=tuple(g for g in stages if g))


def _cancel_check(cancel):
    if cancel is None:
        return None
    if hasattr(cancel, "is_set"):
        return cancel.is_set
    return cancel


def _names_text(s, names, rank):
    return "{" + ", ".join(names[v] for v in sorted(s, key=rank.__getitem__)) + "}"


def _separating_sets_finder(adjacent, pvalues, alpha, depth, cancelled):
    """Every independent set among subsets of the neighbours of x and of y in ``adjacent``
    (the conservative and majority collider rules, Colombo & Maathuis 2014).

    ``find.prefetch(pairs)`` gathers the candidate sets of many pairs into one batch of
    tests (one call to the cache instead of one per pair); ``find(x, y)`` then reads them."""
    memo = {}
    adjacent = [set(a) for a in adjacent]  # a snapshot: the caller may change its skeleton

    def candidates_of(key):
        x, y = key
        out, seen = [], set()
        for base in (adjacent[x] - {y}, adjacent[y] - {x}):
            top = len(base) if depth is None else min(len(base), depth)
            for k in range(top + 1):
                for s in combinations(sorted(base), k):
                    if s not in seen:
                        seen.add(s)
                        out.append((x, y, s))
        return out

    def prefetch(pairs):
        keys = sorted({(min(x, y), max(x, y)) for x, y in pairs} - memo.keys())
        if not keys:
            return
        if cancelled is not None and cancelled():
            from ..exceptions import SearchCancelled
            raise SearchCancelled("the search was stopped before it finished")
        per_key = [candidates_of(key) for key in keys]
        batch = [c for cands in per_key for c in cands]
        p = pvalues(batch) if batch else np.empty(0)
        at = 0
        for key, cands in zip(keys, per_key):
            memo[key] = [set(c[2]) for c, pv in zip(cands, p[at:at + len(cands)])
                         if pv > alpha]
            at += len(cands)

    def find(x, y):
        key = (min(x, y), max(x, y))
        if key not in memo:
            prefetch([key])
        return memo[key]

    find.prefetch = prefetch
    return find


def _edge_tallies(log, pairs, n) -> tuple[np.ndarray, np.ndarray]:
    """For each pair ``(x, y)`` of ``pairs``: how many tests of the log it had and their
    largest p-value (-inf when none gave one), read block by block so that a log of hundreds
    of millions of tests needs no copy of itself."""
    flat = np.array([x * n + y for x, y in pairs], dtype=np.int64)
    order = np.argsort(flat)
    sorted_flat = flat[order]
    count = np.zeros(len(flat), dtype=np.int64)
    largest = np.full(len(flat), -np.inf)
    if not len(flat):
        return count, largest
    for idx, p in log:
        keys = idx[:, 0].astype(np.int64) * n + idx[:, 1]
        at = np.minimum(np.searchsorted(sorted_flat, keys), len(flat) - 1)
        hit = sorted_flat[at] == keys
        count += np.bincount(at[hit], minlength=len(flat))
        finite = hit & ~np.isnan(p)
        np.maximum.at(largest, at[finite], p[finite])
    out_count, out_largest = np.empty_like(count), np.empty_like(largest)
    out_count[order], out_largest[order] = count, largest
    return out_count, out_largest


def _untestable_pairs(names, log, test) -> dict:
    """``{(x, y): reason}`` for every pair with a test that returned no p-value (NaN).

    The reason is the test's own (``test.untestable_reason(x, y, given)`` with variable
    names, an optional hook that returns a short text or None), else
    :data:`~discovery.result.NO_PVALUE`. The first such test of the pair is described.
    """
    from ..result import NO_PVALUE
    if not any(np.isnan(p).any() for _, p in log):
        return {}
    hook = getattr(test, "untestable_reason", None)
    first = {}
    for idx, p in log:
        for r in np.flatnonzero(np.isnan(p)).tolist():
            row = idx[r].tolist()
            first.setdefault((row[0], row[1]), (row[0], row[1], tuple(row[2:])))
    out = {}
    for key, (x, y, given) in first.items():
        text = None
        if hook is not None:
            try:
                text = hook(names[x], names[y], tuple(names[s] for s in given))
            except Exception:  # a hook that fails must not lose the search's result
                text = None
        out[key] = str(text) if text else NO_PVALUE
    return out


def _software() -> dict:
    import networkx
    import pandas
    import scipy
    from .. import __version__
    return {"edgewise": __version__, "python": platform.python_version(),
            "numpy": np.__version__, "scipy": scipy.__version__,
            "pandas": pandas.__version__, "networkx": networkx.__version__}


def _restore_signs(skeleton) -> None:
    """Undo the sign flip of the equivalence rule in the skeleton's record (p-values back to
    the equivalence p-values)."""
    skeleton.log.transform_pvalues(np.negative)
    sepsets = skeleton.sepsets
    sepsets._blocks = [(rows, -p) for rows, p in sepsets._blocks]
    skeleton.locked_conflicts[:] = [(x, y, s, -p) for x, y, s, p in skeleton.locked_conflicts]


def _undecided_pairs(skeleton, test_obj, alpha, names) -> tuple:
    """Adjacent pairs that some test could not call related (significance p > alpha) and
    that no test showed unrelated (equivalence p > alpha): the data cannot tell."""
    n = len(names)
    adjacent = np.zeros((n, n), dtype=bool)
    for x, ys in enumerate(skeleton.adjacent):
        adjacent[x, list(ys)] = True
    found = set()
    for idx, _ in skeleton.log:
        rows = idx[adjacent[idx[:, 0], idx[:, 1]]]
        if not len(rows):
            continue
        plain = test_obj.significance_pvalues(rows) if hasattr(
            test_obj, "significance_pvalues") else _inner_significance(test_obj, rows)
        for x, y in rows[plain > alpha][:, :2].tolist():
            found.add((names[x], names[y]))
    return tuple(sorted(found))


def _inner_significance(test_obj, rows):
    """Significance p-values through a NameOrderedTest around an EquivalenceTest."""
    m = np.asarray(test_obj._to_inner, dtype=np.intp)
    mapped = np.sort(m[rows[:, :2]], axis=1)
    inner_rows = np.column_stack([mapped, np.sort(m[rows[:, 2:]], axis=1)]) \
        if rows.shape[1] > 2 else mapped
    return test_obj.inner.significance_pvalues(inner_rows)


def _build_result(names, display, rank, settings, knowledge, skeleton, orientation, notes, dataset,
                  test_obj, cache, tallies, undecided, timings) -> SearchResult:
    key = rank.__getitem__
    index = {v: i for i, v in enumerate(names)}
    hits0, misses0, hits1, misses1 = tallies

    # Indices follow name order, so the log's order (level by level, pair by pair) is already
    # independent of column order and needs no sorting.
    tests = TestLog.from_blocks(names, skeleton.log)
    n = len(names)
    untestable = _untestable_pairs(names, skeleton.log,
                                   test_obj.inner if isinstance(test_obj, NameOrderedTest)
                                   else test_obj)
    locked_pairs = knowledge.required_adjacent()
    heads = getattr(orientation, "heads", None)
    pairs = [(x, y) for x in range(n) for y in skeleton.adjacent[x] if key(x) < key(y)]
    n_tests, max_p = _edge_tallies(skeleton.log, pairs, n)
    tests_run = n_tests.tolist()
    largest = np.where(np.isfinite(max_p), max_p, np.nan).tolist()
    edges = []
    marks = getattr(orientation, "marks", None)  # a PAG (the hidden-causes mode)
    for (x, y), count, mp in zip(pairs, tests_run, largest):
        locked = bool(locked_pairs) and frozenset((names[x], names[y])) in locked_pairs
        why_not = untestable.get((x, y), "")
        if marks is not None:
            edges.append(_pag_edge(orientation, names, x, y, mp, count, locked, why_not))
            continue
        hx, hy = (y, x) in heads, (x, y) in heads
        if hx and hy:
            reason = "; ".join(orientation.reason(e)[1] for e in ((x, y), (y, x)))
            edges.append(Edge(names[x], names[y], "contested", reason, "contested", mp,
                              count, locked, why_not))
        elif hy or hx:
            s, t = (x, y) if hy else (y, x)
            kind, text = orientation.reason((s, t))
            edges.append(Edge(names[s], names[t], "directed", text, kind, mp, count, locked,
                              why_not))
        else:
            edges.append(Edge(names[x], names[y], "undirected", "", "", mp, count, locked,
                              why_not))
    edges.sort(key=lambda e: (e.source, e.target))
    forbidden_idx = {(min(index[a], index[b]), max(index[a], index[b]))
                     for a, b in knowledge.forbidden}
    sepsets = skeleton.sepsets
    unseparated = list(skeleton.unseparated_forbidden)

    def build_removed():
        get = names.__getitem__
        out = [Removal(names[x], names[y], tuple(map(get, s)), p, "test",
                       (x, y) in forbidden_idx)
               for (x, y), (s, p) in sorted(sepsets.items())]
        out += [Removal(names[x], names[y], None, float("nan"), "knowledge", True)
                for x, y in unseparated]
        if unseparated:  # otherwise already in name order (index order)
            out.sort(key=lambda r: (r.a, r.b))
        return out

    removed = LazyRecords(build_removed)
    kinds = [e.kind for e in edges]
    counts = {"edges": len(edges), "directed": kinds.count("directed"),
              "undirected": kinds.count("undirected"), "contested": kinds.count("contested"),
              "removed": len(sepsets) + len(unseparated), "tests": len(tests),
              # "tests" are the tests in the evidence (the adjacency search); computed + from
              # the cache count those same tests. The extra tests a conservative or majority
              # collider rule runs to gather every separating set are counted apart.
              "tests_computed": misses1 - misses0, "tests_from_cache": hits1 - hits0,
              "collider_tests_computed": cache.misses - misses1,
              "collider_tests_from_cache": cache.hits - hits1,
              "untestable": sum(1 for e in edges if e.untestable),
              "depth_reached": skeleton.depth_reached, "levels": list(skeleton.levels)}
    if marks is not None:
        for kind in ("bidirected", "partially-directed", "nondirected",
                     "partially-undirected"):
            counts[kind] = kinds.count(kind)
        pds = getattr(skeleton, "pds", {})
        counts.update({f"pds_{k}": v for k, v in pds.items()})
        counts["rules_fired"] = dict(sorted(orientation.fired.items()))
    data = {"rows": getattr(test_obj, "n", None), "columns": len(names)}
    if dataset is not None:
        data.update(rows=dataset.rows_used, rows_read=dataset.rows_read,
                    sha256=dataset.sha256, source=dataset.source, missing=dataset.missing,
                    excluded=dict(dataset.excluded))
        notes = list(dataset.notes) + notes
    inner = getattr(test_obj, "inner", test_obj)  # NameOrderedTest wraps a test
    describe = getattr(inner, "describe_tests", None)
    if describe is not None:  # e.g. which test decided each pair ('auto'), skipped tests (G²)
        notes = list(notes) + list(describe(tests))
    description = getattr(inner, "description", None)
    if description:
        notes = list(notes) + [str(description)]
    return SearchResult(
        variables=display, settings=settings, knowledge=knowledge, edges=tuple(edges),
        removed=removed, tests=tests,
        triples=LazyRecords(orientation.triple_records),
        conflicts=tuple(orientation.conflicts), notes=tuple(notes) + tuple(orientation.notes),
        counts=counts, timings={k: round(v, 6) for k, v in timings.items()}, data=data,
        software=_software(), seed=getattr(test_obj, "seed", None), undecided=undecided)


def _pag_edge(orientation, names, x, y, max_pvalue, tests, locked, untestable="") -> Edge:
    """The PAG edge x–y with its marks and a reason for each arrowhead and tail."""
    m = orientation.marks
    at_x, at_y = MARK_NAMES[int(m[y, x])], MARK_NAMES[int(m[x, y])]
    kind_x, why_x = orientation.end_reason(y, x)
    kind_y, why_y = orientation.end_reason(x, y)
    parts = [f"{'arrowhead' if mark == 'arrow' else 'tail'} at {names[v]}: {why}"
             for v, mark, why in ((y, at_y, why_y), (x, at_x, why_x))
             if mark != "circle" and why]
    if why_x and why_x == why_y:
        parts = [why_x]
    kind = kind_y if at_y != "circle" and kind_y else kind_x
    return Edge.from_marks(names[x], names[y], at_x, at_y, reason="; ".join(parts),
                           reason_kind=kind, max_pvalue=max_pvalue, tests=tests,
                           locked=locked, untestable=untestable, from_reason=why_x,
                           to_reason=why_y)


class NameOrderedTest(IndependenceTest):
    """A view of a test with its variables in the order of their names.

    The search addresses variables in name order; a test object built with another column
    order is wrapped so that its answers, and the cache, follow that order.
    """

    def __init__(self, inner: IndependenceTest):
        self.inner = inner
        self.name = inner.name
        self.n = inner.n
        self.vectorised = inner.vectorised
        order = sorted(range(len(inner.variables)), key=lambda i: inner.variables[i])
        self.variables = tuple(inner.variables[i] for i in order)
        self._to_inner = order
        self.seed = getattr(inner, "seed", None)

    def settings_key(self) -> tuple:
        return ("name-ordered",) + tuple(self.inner.settings_key())

    def association(self):
        inner = self.inner.association()
        return None if inner is None else inner[np.ix_(self._to_inner, self._to_inner)]

    def may_separate(self, pairs, alpha):
        m = np.asarray(self._to_inner, dtype=np.intp)
        inner = self.inner.may_separate(m[pairs], alpha)
        return None if inner is None else inner[:, m]

    def _batch(self, triples):
        m = self._to_inner
        return self.inner._batch([canonical_triple(m[x], m[y], [m[s] for s in S])
                                  for x, y, S in triples])


class _CountingPassThrough:
    """Stands in for a PValueCache when nothing can be reused: computes and counts."""

    def __init__(self):
        self.hits = 0
        self.misses = 0

    def pvalues_array(self, test, idx, *, executor=None):
        self.misses += len(idx)
        return test.pvalues_array(idx, executor=executor)
