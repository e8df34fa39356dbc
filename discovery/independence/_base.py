"""The one protocol every independence test follows, and the shared p-value cache.

A conditional-independence test asks whether ``x`` and ``y`` are independent given a
conditioning set ``S``; its p-value is small when the data speak against independence. The
search never calls a test one triple at a time: it hands over a *batch* of triples (every test
of one level of the adjacency search, with adjacencies frozen), so that a test can vectorise
the batch in numpy or spread it over an executor.

Variables are addressed by their position in ``test.variables``. A triple is
``(x, y, S)`` with ``x != y`` two ints and ``S`` a tuple of ints containing neither.
"""

from __future__ import annotations

import threading
from dataclasses import dataclass
from typing import Iterable, Sequence

import numpy as np

__all__ = [
    "Triple",
    "IndependenceResult",
    "IndependenceTest",
    "PValueCache",
    "canonical_triple",
]

Triple = tuple  # (x: int, y: int, given: tuple[int, ...])


def canonical_triple(x: int, y: int, given: Iterable[int]) -> tuple[int, int, tuple[int, ...]]:
    """Return the triple with ``x < y`` and a sorted conditioning set (tests are symmetric)."""
    if x > y:
        x, y = y, x
    return (int(x), int(y), tuple(sorted(int(s) for s in given)))


@dataclass(frozen=True, slots=True)
class IndependenceResult:
    """One test of ``x ⟂ y | given``: its statistic and p-value, with the context to read them.

    Attributes
    ----------
    statistic : float
        The test's statistic (Fisher's z, G², HSIC, ...); NaN when the test could not be run.
    pvalue : float
        Probability under independence of a statistic at least as extreme; NaN when not run.
    x, y : str
        The two variables tested.
    given : tuple of str
        The conditioning set.
    n : int or None
        Rows used (None for an oracle).
    method : str
        The test's name, e.g. ``"fisher-z"``.
    """

    statistic: float
    pvalue: float
    x: str
    y: str
    given: tuple[str, ...]
    n: int | None
    method: str

    def __repr__(self) -> str:
        given = ", ".join(self.given)
        cond = f" | {given}" if given else ""
        return (f"IndependenceResult({self.method}: {self.x} ⟂ {self.y}{cond}; "
                f"statistic={self.statistic:.4g}, pvalue={self.pvalue:.4g}, n={self.n})")


class IndependenceTest:
    """Base class of the batch protocol.

    Subclasses set ``name`` and ``variables`` and implement :meth:`_batch`, returning the
    statistics and p-values of a batch of canonical triples. They also implement
    :meth:`settings_key`, a hashable description of everything that changes a p-value
    (data fingerprint, kernel widths, seeds, ...), which keys the shared cache.

    Attributes
    ----------
    name : str
        Short name of the test family (``"fisher-z"``, ``"d-separation"``, ...).
    variables : tuple of str
        The variables, in the order the triples address them.
    n : int or None
        Number of rows (None when the test is not computed from data).
    """

    name: str = "abstract"
    variables: tuple[str, ...] = ()
    n: int | None = None
    #: True when the test is a cheap vectorised computation that should stay in-process.
    vectorised: bool = True

    # -- to implement -------------------------------------------------------------------------
    def settings_key(self) -> tuple:
        """Hashable identity of the test and everything that changes its p-values."""
        raise NotImplementedError

    def _batch(self, triples: Sequence[Triple]) -> tuple[np.ndarray, np.ndarray]:
        """Statistics and p-values (two float arrays) for canonical triples."""
        raise NotImplementedError

    # -- provided -----------------------------------------------------------------------------
    def pvalues(self, triples: Sequence[Triple], *, executor=None) -> np.ndarray:
        """Return the p-values of a batch of triples, as a float array in the batch's order.

        Parameters
        ----------
        triples : sequence of (int, int, tuple of int)
            The tests to run.
        executor : discovery.executor.Executor, optional
            Where to spread the work. Vectorised tests ignore it and compute in-process.
        """
        canon = [canonical_triple(*t) for t in triples]
        if not canon:
            return np.empty(0)
        if executor is None or self.vectorised or len(canon) < 2:
            return np.asarray(self._batch(canon)[1], dtype=float)
        parts = executor.chunks(canon)
        results = executor.map(_pvalues_of_chunk, [(self, part) for part in parts])
        return np.concatenate([np.asarray(r, dtype=float) for r in results])

    def test(self, x: str, y: str, given: Iterable[str] = ()) -> IndependenceResult:
        """Run one test by variable names and return an :class:`IndependenceResult`."""
        index = {v: i for i, v in enumerate(self.variables)}
        given = tuple(given)
        missing = [v for v in (x, y, *given) if v not in index]
        if missing:
            raise KeyError(f"variables {missing} are not among {list(self.variables)}")
        if x == y or x in given or y in given:
            raise ValueError("`x`, `y` and `given` must name different variables")
        triple = canonical_triple(index[x], index[y], [index[g] for g in given])
        stat, p = self._batch([triple])
        return IndependenceResult(float(stat[0]), float(p[0]), x, y, given, self.n, self.name)

    def __repr__(self) -> str:
        return f"{type(self).__name__}({len(self.variables)} variables, n={self.n})"


def _pvalues_of_chunk(args):
    test, part = args
    return test._batch(part)[1]


class PValueCache:
    """Thread-safe store of p-values keyed by test settings and the canonical triple.

    One cache can serve many searches: a knowledge edit, a new α or a re-run reuses every
    p-value already known for the same test settings.
    """

    def __init__(self):
        self._store: dict[tuple, dict[tuple, float]] = {}
        self._lock = threading.Lock()
        self.hits = 0
        self.misses = 0

    def pvalues(self, test: IndependenceTest, triples: Sequence[Triple], *,
                executor=None) -> np.ndarray:
        """Return p-values for the triples, computing only those not yet in the cache."""
        key = test.settings_key()
        canon = [canonical_triple(*t) for t in triples]
        with self._lock:
            table = self._store.setdefault(key, {})
            known = [table.get(t) for t in canon]
        todo = sorted({t for t, p in zip(canon, known) if p is None})
        if todo:
            fresh = test.pvalues(todo, executor=executor)
            with self._lock:
                table.update(zip(todo, (float(p) for p in fresh)))
                self.misses += len(todo)
                self.hits += len(canon) - len(todo)
                known = [table[t] for t in canon]
        else:
            with self._lock:
                self.hits += len(canon)
        return np.asarray(known, dtype=float)

    def __len__(self) -> int:
        with self._lock:
            return sum(len(t) for t in self._store.values())

    def clear(self) -> None:
        """Forget every stored p-value."""
        with self._lock:
            self._store.clear()
            self.hits = self.misses = 0
