"""Resampling support: how often each edge, and each orientation, reappears.

The search is run on many resampled copies of the data; for every pair of variables, the share
of resamples in which it is adjacent, and in which it reads ``a → b``, ``b → a``, undirected or
contested, is its **resampling support**. An edge found in 95 of 100 resamples rests on more
than the luck of one sample; one found in 30 does not.

Two ways to resample:

``bootstrap``
    ``n`` rows drawn with replacement (Friedman, Goldszmidt & Wyner 1999, "Data analysis with
    Bayesian networks: a bootstrap approach", UAI).
``subsample``
    ``⌊n / 2⌋`` rows drawn without replacement: *stability selection* (Meinshausen & Bühlmann
    2010, "Stability selection", JRSS B 72(4)). For a cut-off ``π`` in (½, 1], the expected
    number of pairs falsely kept in the consensus is at most ``q² / ((2π − 1) p)``, with ``q``
    the average number of edges per subsample and ``p`` the number of pairs (their Theorem 1;
    it assumes the falsely selected pairs are exchangeable and the search no worse than random
    guessing). The bound is reported with the result.

The **consensus** diagram keeps the pairs adjacent in at least a share ``cutoff`` of the
resamples; each kept pair is drawn with the orientation found in more than half of the
resamples in which it is adjacent (``a → b``, ``b → a`` or contested), else undirected.

Every resample gets its own random stream spawned from one seed (``numpy.random.SeedSequence``),
so the same seed gives the same tables whether the resamples run in-process, in local
processes or on a cluster.
"""

from __future__ import annotations

import inspect
import math
from dataclasses import dataclass, field, replace
from numbers import Integral, Real
from typing import Callable

import numpy as np

from ..exceptions import DataValidationError, SearchCancelled, SettingsError
from ..executor import blas_threads
from ..result import ASSUMPTIONS, Edge
from ._common import csv_text, orientation_of

__all__ = ["support", "SupportResult", "PairSupport", "SUPPORT_METHODS"]

SUPPORT_METHODS = ("bootstrap", "subsample")

SUPPORT_CAUTIONS = ASSUMPTIONS + (
    "Resampling support measures how stable an edge is under sampling noise, not whether it "
    "is causal: a hidden common cause or a wrong test gives stable wrong edges.",
)

_ORIENTATIONS = ("a_to_b", "b_to_a", "undirected", "contested")


@dataclass(frozen=True)
class PairSupport:
    """Support of one pair (shares of the resamples, each in [0, 1]).

    ``a_to_b + b_to_a + undirected + contested == adjacent``.

    ``marks_at_a`` and ``marks_at_b`` count the mark at each end of the edge, ``{"tail",
    "arrow", "circle"}`` → share of the resamples (contested edges, which have no marks, are
    left out, so each sums to ``adjacent - contested``). They matter for the hidden-causes
    search, whose ``a o→ b``, ``a ↔ b`` and ``a o–o b`` all count as ``undirected`` above;
    empty in documents written before they were added.
    """

    a: str
    b: str
    adjacent: float
    a_to_b: float
    b_to_a: float
    undirected: float
    contested: float
    marks_at_a: dict = field(default_factory=dict, compare=False)
    marks_at_b: dict = field(default_factory=dict, compare=False)

    def to_dict(self) -> dict:
        return {"a": self.a, "b": self.b, "adjacent": self.adjacent, "a_to_b": self.a_to_b,
                "b_to_a": self.b_to_a, "undirected": self.undirected,
                "contested": self.contested, "marks_at_a": dict(self.marks_at_a),
                "marks_at_b": dict(self.marks_at_b)}

    def consensus_marks(self) -> tuple[str, str] | None:
        """``(mark at a, mark at b)``: at each end the mark found in more than half of the
        resamples where the pair is adjacent, else ``"circle"`` (undecided); None when no
        mark was counted."""
        if not (self.marks_at_a and self.marks_at_b):
            return None
        return tuple(next((m for m, share in sorted(ends.items())
                           if share > 0.5 * self.adjacent), "circle")
                     for ends in (self.marks_at_a, self.marks_at_b))

    def consensus_kind(self) -> str:
        """The orientation found in more than half of the resamples where the pair is
        adjacent: ``a_to_b``, ``b_to_a``, ``contested``, else ``undirected``."""
        for name in ("a_to_b", "b_to_a", "contested"):
            if getattr(self, name) > 0.5 * self.adjacent:
                return name
        return "undirected"


@dataclass(frozen=True)
class SupportResult:
    """The immutable record of a resampling run (build it with :func:`support`).

    Attributes
    ----------
    method : {"bootstrap", "subsample"}
    resamples : int
        Resamples whose search finished (shares are out of these).
    seed : int or None
    cutoff : float
        The support a pair needs to enter the consensus.
    pairs : tuple of PairSupport
        Every pair adjacent in at least one resample, highest support first.
    consensus : tuple of Edge
    false_edges_bound : float or None
        Subsampling with ``cutoff > 0.5``: Meinshausen & Bühlmann's bound on the expected
        number of falsely selected pairs; None otherwise.
    mean_edges : float
        Average number of edges per resample (``q`` of the bound).
    variables : tuple of str
    rows : int
        Rows of the data; each resample has ``rows`` (bootstrap) or ``rows // 2``.
    failed : int
        Resamples on which the search could not run (e.g. a column constant in the resample).
    settings : dict
        The search options used.
    cautions : tuple of str
    """

    method: str
    resamples: int
    seed: int | None
    cutoff: float
    pairs: tuple[PairSupport, ...]
    consensus: tuple[Edge, ...]
    false_edges_bound: float | None
    mean_edges: float
    variables: tuple[str, ...]
    rows: int
    failed: int = 0
    settings: dict = field(default_factory=dict, compare=False)
    cautions: tuple[str, ...] = SUPPORT_CAUTIONS

    def pair(self, a: str, b: str) -> PairSupport | None:
        """The support of {a, b} (None: never adjacent), read with ``a`` first if possible."""
        for p in self.pairs:
            if (p.a, p.b) == (a, b):
                return p
            if (p.a, p.b) == (b, a):
                return PairSupport(a, b, p.adjacent, p.b_to_a, p.a_to_b, p.undirected,
                                   p.contested, p.marks_at_b, p.marks_at_a)
        return None

    def at_cutoff(self, cutoff: float) -> "SupportResult":
        """The same tables with another consensus cut-off (and bound)."""
        cutoff = _check_cutoff(cutoff)
        return replace(self, cutoff=cutoff,
                       consensus=_consensus(self.pairs, cutoff, _is_pag(self.settings)),
                       false_edges_bound=_bound(self.method, cutoff, self.mean_edges,
                                                len(self.variables)))

    def to_dict(self) -> dict:
        """The JSON document (``"format": "edgewise-support"``)."""
        return {"format": "edgewise-support", "version": 1, "method": self.method,
                "resamples": self.resamples, "seed": self.seed, "cutoff": self.cutoff,
                "variables": list(self.variables), "rows": self.rows,
                "failed": self.failed, "settings": dict(self.settings),
                "pairs": [p.to_dict() for p in self.pairs],
                "consensus": {"edges": [e.to_dict() for e in self.consensus]},
                "mean_edges": self.mean_edges,
                "false_edges_bound": self.false_edges_bound,
                "cautions": list(self.cautions)}

    @classmethod
    def from_dict(cls, doc: dict, *, source: str = "support") -> "SupportResult":
        """Rebuild a support record from its JSON document.

        Raises
        ------
        ResultFormatError
            If the document is not an Edgewise support document of a known version.
        """
        from ..exceptions import ResultFormatError
        if not isinstance(doc, dict) or doc.get("format") != "edgewise-support":
            raise ResultFormatError(f"{source}: 'format' is not 'edgewise-support'")
        if doc.get("version") != 1:
            raise ResultFormatError(f"{source}: support version {doc.get('version')!r} is "
                                    "not supported (this Edgewise reads 1)")
        try:
            pairs = tuple(PairSupport(p["a"], p["b"], *(float(p[k]) for k in
                                                        ("adjacent",) + _ORIENTATIONS),
                                      *({str(m): float(v) for m, v in p.get(k, {}).items()}
                                        for k in ("marks_at_a", "marks_at_b")))
                          for p in doc["pairs"])
            method, cutoff = doc["method"], float(doc["cutoff"])
            variables = tuple(doc["variables"])
            mean_edges = float(doc["mean_edges"])
            return cls(method=method, resamples=int(doc["resamples"]), seed=doc.get("seed"),
                       cutoff=cutoff, pairs=pairs,
                       consensus=_consensus(pairs, cutoff, _is_pag(doc.get("settings", {}))),
                       false_edges_bound=_bound(method, cutoff, mean_edges, len(variables)),
                       mean_edges=mean_edges, variables=variables, rows=int(doc["rows"]),
                       failed=int(doc.get("failed", 0)), settings=dict(doc.get("settings", {})),
                       cautions=tuple(doc.get("cautions", SUPPORT_CAUTIONS)))
        except (KeyError, TypeError, ValueError) as err:
            raise ResultFormatError(f"{source}: the support document is damaged "
                                    f"({type(err).__name__}: {err})") from None

    def to_json(self, *, indent: int | None = 1) -> str:
        import json
        return json.dumps(self.to_dict(), indent=indent, ensure_ascii=False)

    def to_csv(self) -> str:
        """One row per pair: its shares and whether it is in the consensus."""
        kept = {frozenset((e.source, e.target)) for e in self.consensus}
        marks = ("tail", "arrow", "circle")
        rows = [[p.a, p.b, p.adjacent, p.a_to_b, p.b_to_a, p.undirected, p.contested,
                 "yes" if frozenset((p.a, p.b)) in kept else "no",
                 *(ends.get(m, 0.0) for ends in (p.marks_at_a, p.marks_at_b) for m in marks)]
                for p in self.pairs]
        return csv_text(["a", "b", "adjacent", "a_to_b", "b_to_a", "undirected", "contested",
                         "in_consensus", *(f"{m}_at_{end}" for end in ("a", "b")
                                           for m in marks)], rows)

    def as_text(self) -> str:
        size = self.rows if self.method == "bootstrap" else self.rows // 2
        lines = [f"Resampling support: {self.resamples} {self.method} resamples of {size} rows"
                 f" (seed {self.seed}); consensus at support ≥ {self.cutoff:g}: "
                 f"{len(self.consensus)} edges"]
        if self.failed:
            lines.append(f"{self.failed} resample(s) could not be searched and are left out")
        if self.false_edges_bound is not None:
            lines.append(f"Expected falsely selected pairs at this cut-off ≤ "
                         f"{self.false_edges_bound:.3g} (Meinshausen & Bühlmann 2010)")
        width = max([len(f"{p.a} — {p.b}") for p in self.pairs] + [4])
        pag = _is_pag(self.settings)
        lines.append(f"{'pair':<{width}}  adjacent   a→b   b→a  undir.  contested"
                     + ("  majority marks" if pag else ""))
        for p in self.pairs:
            row = (f"{p.a + ' — ' + p.b:<{width}}  {p.adjacent:8.2f}  {p.a_to_b:4.2f}"
                   f"  {p.b_to_a:4.2f}  {p.undirected:6.2f}  {p.contested:9.2f}")
            marks = p.consensus_marks() if pag else None
            if marks is not None:  # the mark found at each end in most resamples
                row += "  " + Edge.from_marks(p.a, p.b, *marks).arrow()
            lines.append(row)
        lines += ["", "Cautions: " + " ".join(self.cautions)]
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.as_text()

    def figure(self):
        """A matplotlib Figure of the support of each pair, split by orientation."""
        from ._charts import support_figure
        return support_figure(self)


def _check_cutoff(cutoff) -> float:
    if isinstance(cutoff, bool) or not isinstance(cutoff, Real) or not 0.0 < cutoff <= 1.0:
        raise SettingsError(f"The 'cutoff' parameter of support must be a float in (0, 1]. "
                            f"Got {cutoff!r} instead.")
    return float(cutoff)


def _bound(method, cutoff, mean_edges, n_vars) -> float | None:
    """Meinshausen & Bühlmann (2010), Theorem 1: E[V] ≤ q² / ((2π − 1) p)."""
    pairs = n_vars * (n_vars - 1) // 2
    if method != "subsample" or cutoff <= 0.5 or pairs == 0:
        return None
    return float(mean_edges ** 2 / ((2.0 * cutoff - 1.0) * pairs))


def _is_pag(settings) -> bool:
    return bool(isinstance(settings, dict) and settings.get("hidden_causes"))


def _consensus(pairs, cutoff, pag=False) -> tuple[Edge, ...]:
    """Edges with support ≥ cutoff; from searches with hidden causes (PAGs) each end takes
    its majority mark (a circle where no mark has a majority)."""
    edges = []
    for p in pairs:
        if p.adjacent + 1e-12 < cutoff:
            continue
        kind = p.consensus_kind()
        why = (f"support {p.adjacent:.2f}: {p.a}→{p.b} {p.a_to_b:.2f}, {p.b}→{p.a} "
               f"{p.b_to_a:.2f}, undirected {p.undirected:.2f}, contested {p.contested:.2f}")
        marks = p.consensus_marks() if pag else None
        if marks is not None and kind != "contested":
            why += "; marks " + ", ".join(
                f"at {v}: " + " ".join(f"{m} {share:.2f}" for m, share in sorted(ends.items()))
                for v, ends in ((p.a, p.marks_at_a), (p.b, p.marks_at_b)))
            edges.append(Edge.from_marks(p.a, p.b, marks[0], marks[1], reason=why,
                                         reason_kind="support"))
        elif kind == "a_to_b":
            edges.append(Edge(p.a, p.b, "directed", why, "support"))
        elif kind == "b_to_a":
            edges.append(Edge(p.b, p.a, "directed", why, "support"))
        else:
            edges.append(Edge(p.a, p.b, kind, why, "support"))
    edges.sort(key=lambda e: (e.source, e.target))
    return tuple(edges)


def _run_resamples(frame, task):
    """Search each resample of a chunk; return ``(index, [(a, b, orientation)] or None)``.
    Module-level so that worker processes can run it; ``frame`` is sent to each worker once."""
    from ..search import discover
    method, options, streams = task
    # One BLAS thread (see support(): already so in the caller and in local workers, where
    # this sets nothing; a cluster's worker is set once a chunk, not once a search).
    with blas_threads(1):
        return _search_each(frame, method, options, streams, discover)


def _search_each(frame, method, options, streams, discover):
    n = len(frame)
    out = []
    for index, stream in streams:
        rng = np.random.default_rng(stream)
        if method == "bootstrap":
            rows = rng.integers(0, n, size=n)
        else:
            rows = np.sort(rng.choice(n, size=n // 2, replace=False))
        sample = frame.iloc[rows].reset_index(drop=True)
        try:
            result = discover(sample, **options)
        except DataValidationError:
            out.append((index, None))
            continue
        found = []
        for e in result.edges:
            a, b = sorted((e.source, e.target))
            found.append((a, b, orientation_of(e, a, b), e.mark_at(a), e.mark_at(b)))
        out.append((index, found))
    return out


def _executor(jobs, cluster):
    from .. import executor as executors
    if cluster is None:
        return executors.make_executor(jobs)
    if "cluster" not in inspect.signature(executors.make_executor).parameters:
        raise SettingsError(f"cluster={cluster!r}: this installation's executor has no "
                            "cluster back-end yet; run without a cluster (use jobs= for "
                            "local processes)")
    try:
        return executors.make_executor(jobs, cluster=cluster)
    except (OSError, TimeoutError) as err:  # the back-end's own errors pass unchanged
        raise SettingsError(f"cluster={cluster!r}: cannot reach the scheduler ({err}); check "
                            "the address and that the scheduler is running") from None


def support(data, resamples: int = 100, method: str = "bootstrap", *, seed=None,
            jobs: int | None = None, cluster=None, cutoff: float = 0.5,
            progress: Callable | None = None, cancel=None,
            **discover_options) -> SupportResult:
    """Resampling support of every edge and orientation.

    Parameters
    ----------
    data : pandas.DataFrame or discovery.Dataset
    resamples : int ≥ 1
        How many resampled copies to search (B).
    method : {"bootstrap", "subsample"}
        Rows with replacement (n of them) or without (n // 2); see the module docstring.
    seed : int, numpy Generator or None
        Seeds every resample's stream; None draws a fresh seed (recorded in the result).
    jobs : int, optional
        Local worker processes (None or 1: in-process).
    cluster : str, optional
        Address of a Dask scheduler (``"tcp://host:port"``), passed to
        :func:`discovery.executor.make_executor`.
    cutoff : float in (0, 1]
        Support needed to enter the consensus diagram.
    progress : callable, optional
        Called with ``{"phase": "support", "level": 0, "done", "planned"}``.
    cancel : callable or threading.Event, optional
        Stops the run (between chunks of resamples) with ``SearchCancelled``.
    **discover_options
        Options of :func:`discovery.discover` (test, alpha, max_depth, knowledge, …).

    Returns
    -------
    SupportResult

    Raises
    ------
    SettingsError
        ``resamples`` below 1, an unknown method, a cut-off outside (0, 1], or a cluster the
        executor cannot reach.
    DataValidationError
        The data cannot be searched at all.
    """
    from ..search._discover import _as_dataset
    from ..settings import SearchSettings, default_collider_rule

    if isinstance(resamples, bool) or not isinstance(resamples, Integral) or resamples < 1:
        raise SettingsError(f"The 'resamples' parameter of support must be an int of at "
                            f"least 1. Got {resamples!r} instead.")
    if method not in SUPPORT_METHODS:
        raise SettingsError(f"The 'method' parameter of support must be one of "
                            f"{', '.join(map(repr, SUPPORT_METHODS))}. Got {method!r} instead.")
    cutoff = _check_cutoff(cutoff)
    for name in ("executor", "cache", "progress", "cancel"):
        discover_options.pop(name, None)
    if not isinstance(discover_options.get("test", "fisher-z"), str):
        raise SettingsError("The 'test' parameter of support must be a test name (a test "
                            "object carries its own data and cannot be resampled)")
    if discover_options.get("collider_rule", "") is None:  # the mode's default, as discover
        discover_options["collider_rule"] = default_collider_rule(
            bool(discover_options.get("hidden_causes")))
    # validate the search options once, before any work is sent out
    check = {k: discover_options[k] for k in ("alpha", "max_depth", "collider_rule",
                                               "unrelated", "margin", "hidden_causes")
             if k in discover_options}
    effective = SearchSettings(test=discover_options.get("test", "fisher-z"),
                               test_options=dict(discover_options.get("test_options") or {}),
                               **check)
    dataset = _as_dataset(data, columns=discover_options.pop("columns", None),
                          missing=discover_options.pop("missing", "drop"))
    frame = dataset.frame
    if method == "subsample" and len(frame) < 4:
        raise DataValidationError(f"subsampling needs at least 4 rows; the data has "
                                  f"{len(frame)}")
    if seed is None:
        seed = int(np.random.default_rng().integers(2 ** 31))
    rng = np.random.default_rng(seed)
    streams = list(enumerate(rng.bit_generator.seed_seq.spawn(int(resamples))))
    recorded_seed = int(seed) if isinstance(seed, Integral) else None
    cancelled = None if cancel is None else (cancel.is_set if hasattr(cancel, "is_set")
                                            else cancel)
    options = dict(discover_options)
    found: list = [None] * len(streams)
    # One BLAS thread for the whole run: a resample's search on a table of this kind gains
    # nothing from BLAS threads, and setting them for each search (as discover does) restarts
    # OpenBLAS's thread pool, whose new threads spin: 100 resamples in-process took 4.8 s
    # and 9 s of CPU so, 4.3 s and 4.3 s of CPU with one thread held (docs/benchmarks.md).
    with blas_threads(1), _executor(jobs, cluster) as executor:
        # small chunks (about 3 resamples on 2 processes): frequent progress, a quick Stop,
        # and processes kept evenly busy to the end (the caller and the workers take chunks
        # as they free up)
        chunks = executor.chunks(streams, per_job=16 if executor.jobs > 1 else 25)
        per_chunk = len(streams) / len(chunks)

        def tick(done_chunks, total):
            if progress is not None:
                done = len(streams) if done_chunks == total else int(done_chunks * per_chunk)
                progress({"phase": "support", "level": 0, "done": done,
                          "planned": len(streams)})

        if cancelled is not None and cancelled():
            raise SearchCancelled("the resampling was stopped before it finished")
        try:
            parts = executor.map(_run_resamples, [(method, options, c) for c in chunks],
                                 shared=frame, cancel=cancelled, progress=tick)
        except SearchCancelled:
            raise SearchCancelled("the resampling was stopped before it finished") from None
        for part in parts:
            for index, edges in part:
                found[index] = edges
    finished = [f for f in found if f is not None]
    if not finished:
        raise DataValidationError("the search failed on every resample (e.g. a column is "
                                  "constant in the resamples); use more rows or method "
                                  "'bootstrap'")
    counts: dict = {}
    ends: dict = {}
    for edges in finished:
        for a, b, orientation, at_a, at_b in edges:
            row = counts.setdefault((a, b), dict.fromkeys(("adjacent",) + _ORIENTATIONS, 0))
            row["adjacent"] += 1
            row[orientation] += 1
            if orientation != "contested":
                marks = ends.setdefault((a, b), ({}, {}))
                for tally, mark in zip(marks, (at_a, at_b)):
                    tally[mark] = tally.get(mark, 0) + 1
    total = len(finished)
    def shares(tally):
        return {m: c / total for m, c in sorted(tally.items())}

    pairs = tuple(sorted(
        (PairSupport(a, b, **{k: v / total for k, v in row.items()},
                     marks_at_a=shares(ends.get((a, b), ({}, {}))[0]),
                     marks_at_b=shares(ends.get((a, b), ({}, {}))[1]))
         for (a, b), row in counts.items()),
        key=lambda p: (-p.adjacent, p.a, p.b)))
    mean_edges = float(np.mean([len(e) for e in finished]))
    variables = tuple(dataset.variables)
    settings = effective.to_dict()
    settings["missing"] = dataset.missing
    if options.get("knowledge") is not None:
        settings["knowledge"] = options["knowledge"].to_dict()
    return SupportResult(method=method, resamples=total, seed=recorded_seed, cutoff=cutoff,
                         pairs=pairs,
                         consensus=_consensus(pairs, cutoff, _is_pag(settings)),
                         false_edges_bound=_bound(method, cutoff, mean_edges, len(variables)),
                         mean_edges=mean_edges, variables=variables, rows=len(frame),
                         failed=len(streams) - total, settings=settings)
