"""The survival sweep: the search repeated over a ladder of thresholds.

An edge found at α = 0.05 may vanish at 0.01 and another appear at 0.1. The sweep runs the
search at every rung of a ladder of α (or, with the equivalence rule, of the margin δ) and
records, for every pair that is adjacent at some rung, at which rungs it is present, its mark
at each rung (``a → b``, ``a — b``, ``a ?– b (contested)`` …) and its **survival range**: the
intervals of the ladder over which it stays present. An edge present over the whole ladder is
robust to the choice of threshold; one present at a single rung hangs on it.

All rungs share one p-value cache, so a test needed by several rungs is computed once; each
rung is still exactly the search a user would get from ``discover`` at that threshold.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from ..exceptions import SearchCancelled
from ..independence import PValueCache
from ..result import ASSUMPTIONS, SearchResult
from ._common import check_ladder, csv_text, mark_text

__all__ = ["sweep", "SweepResult", "EdgeSurvival", "DEFAULT_ALPHAS"]

_SETTINGS = ("alpha", "max_depth", "collider_rule", "missing", "unrelated", "margin")

#: The default ladder: 12 log-spaced rungs from 1e-4 to 0.2.
DEFAULT_ALPHAS = tuple(float(f"{v:.3g}") for v in np.geomspace(1e-4, 0.2, 12))

SWEEP_CAUTIONS = ASSUMPTIONS + (
    "Each rung is a separate search; an edge's survival range says how much it depends on "
    "the threshold, not how likely it is to be true.",
)


@dataclass(frozen=True)
class EdgeSurvival:
    """One pair adjacent at some rung of a sweep.

    Attributes
    ----------
    a, b : str
        The pair, ``a`` before ``b`` by name.
    present : tuple of bool
        Adjacent at each rung.
    marks : tuple of str or None
        The edge as text at each rung (``None`` where absent).
    survival : tuple of (float, float)
        The ladder intervals ``[low, high]`` (rung values) over which it is present.
    """

    a: str
    b: str
    present: tuple[bool, ...]
    marks: tuple[str | None, ...]
    survival: tuple[tuple[float, float], ...]

    @property
    def share(self) -> float:
        """Fraction of rungs at which the pair is adjacent."""
        return sum(self.present) / len(self.present)

    def to_dict(self) -> dict:
        return {"a": self.a, "b": self.b, "present": list(self.present),
                "marks": list(self.marks), "survival": [list(r) for r in self.survival]}


@dataclass(frozen=True)
class SweepResult:
    """The immutable record of a survival sweep (build it with :func:`sweep`).

    Attributes
    ----------
    parameter : {"alpha", "margin"}
        What the ladder varies.
    alphas : tuple of float
        α at each rung (constant in a margin sweep).
    margins : tuple of float or None
        δ at each rung in a margin sweep, None in an α sweep.
    results : tuple of SearchResult
        One search result per rung, in ladder order.
    edges : tuple of EdgeSurvival
        Every pair adjacent at some rung, most-present first, then by names.
    cautions : tuple of str
    """

    parameter: str
    alphas: tuple[float, ...]
    margins: tuple[float, ...] | None
    results: tuple[SearchResult, ...]
    edges: tuple[EdgeSurvival, ...]
    cautions: tuple[str, ...] = SWEEP_CAUTIONS
    timings: dict = field(default_factory=dict, compare=False)

    @property
    def ladder(self) -> tuple[float, ...]:
        """The values the ladder varies (α or δ per rung)."""
        return self.margins if self.parameter == "margin" else self.alphas

    def edge(self, a: str, b: str) -> EdgeSurvival | None:
        """The survival record of the pair {a, b}, or None if never adjacent."""
        pair = {a, b}
        return next((e for e in self.edges if {e.a, e.b} == pair), None)

    def to_dict(self) -> dict:
        """The JSON document (``"format": "edgewise-sweep"``)."""
        return {"format": "edgewise-sweep", "version": 1, "parameter": self.parameter,
                "alphas": list(self.alphas),
                "margins": None if self.margins is None else list(self.margins),
                "edges": [e.to_dict() for e in self.edges],
                "results": [r.to_dict() for r in self.results],
                "timings": dict(self.timings),
                "cautions": list(self.cautions)}

    @classmethod
    def from_dict(cls, doc: dict, *, source: str = "sweep") -> "SweepResult":
        """Rebuild a sweep from its JSON document.

        Raises
        ------
        ResultFormatError
            If the document is not an Edgewise sweep of a known version, or is damaged.
        """
        from ..exceptions import ResultFormatError
        if not isinstance(doc, dict) or doc.get("format") != "edgewise-sweep":
            raise ResultFormatError(f"{source}: 'format' is not 'edgewise-sweep'")
        if doc.get("version") != 1:
            raise ResultFormatError(f"{source}: sweep version {doc.get('version')!r} is not "
                                    "supported (this Edgewise reads 1)")
        try:
            results = tuple(SearchResult.from_dict(r, source=source) for r in doc["results"])
            margins = doc.get("margins")
            edges = tuple(EdgeSurvival(e["a"], e["b"], tuple(map(bool, e["present"])),
                                       tuple(e["marks"]),
                                       tuple((float(lo), float(hi)) for lo, hi in e["survival"]))
                          for e in doc["edges"])
            record = cls(str(doc["parameter"]), tuple(map(float, doc["alphas"])),
                         None if margins is None else tuple(map(float, margins)), results,
                         edges, tuple(doc.get("cautions", SWEEP_CAUTIONS)),
                         dict(doc.get("timings", {})))
        except (KeyError, TypeError, ValueError) as err:
            raise ResultFormatError(f"{source}: the sweep is damaged ({type(err).__name__}: "
                                    f"{err})") from None
        if len(record.results) != len(record.ladder) or any(
                len(e.present) != len(record.ladder) for e in record.edges):
            raise ResultFormatError(f"{source}: the sweep's rungs do not match its ladder")
        return record

    def to_json(self, *, indent: int | None = 1) -> str:
        import json
        return json.dumps(self.to_dict(), indent=indent, ensure_ascii=False)

    def to_csv(self) -> str:
        """One row per pair: its survival ranges and its mark at each rung."""
        symbol = "delta" if self.parameter == "margin" else "alpha"
        header = ["a", "b", "rungs_present", "survival"] + \
            [f"{symbol}={v:g}" for v in self.ladder]
        rows = [[e.a, e.b, sum(e.present),
                 "; ".join(f"[{lo:g}, {hi:g}]" for lo, hi in e.survival)]
                + [m or "" for m in e.marks] for e in self.edges]
        return csv_text(header, rows)

    def as_text(self) -> str:
        """A readable table: each pair with its survival ranges."""
        name = "δ" if self.parameter == "margin" else "α"
        lines = [f"Survival sweep over {len(self.ladder)} rungs of {name}: "
                 + ", ".join(f"{v:g}" for v in self.ladder)]
        if self.parameter == "margin":
            lines[0] += f" (equivalence rule, α {self.alphas[0]:g})"
        width = max([len(f"{e.a} — {e.b}") for e in self.edges] + [4])
        lines.append(f"{'pair':<{width}}  rungs  survival ({name})")
        for e in self.edges:
            ranges = ", ".join(f"{lo:g}–{hi:g}" if lo != hi else f"{lo:g}"
                               for lo, hi in e.survival)
            lines.append(f"{e.a + ' — ' + e.b:<{width}}  {sum(e.present):>2}/{len(e.present):<2}"
                         f"  {ranges}")
        lines += ["", "Cautions: " + " ".join(self.cautions)]
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.as_text()

    def figure(self, *, current: float | None = None):
        """A matplotlib Figure: pairs against the ladder, marks shown, ``current`` (e.g. the
        α in use) as a teal line."""
        from ._charts import sweep_figure
        return sweep_figure(self, current=current)


def _ladder_order(result_edges_per_rung, ladder):
    """Survival records of every pair adjacent at some rung."""
    pairs = {}
    for rung, edges in enumerate(result_edges_per_rung):
        for e in edges:
            a, b = sorted((e.source, e.target))
            pairs.setdefault((a, b), {})[rung] = mark_text(e, a, b)
    out = []
    for (a, b), marks_at in pairs.items():
        present = tuple(r in marks_at for r in range(len(ladder)))
        marks = tuple(marks_at.get(r) for r in range(len(ladder)))
        ranges, start = [], None
        for r, here in enumerate(present + (False,)):
            if here and start is None:
                start = r
            elif not here and start is not None:
                ranges.append((ladder[start], ladder[r - 1]))
                start = None
        out.append(EdgeSurvival(a, b, present, marks, tuple(ranges)))
    out.sort(key=lambda e: (-sum(e.present), e.a, e.b))
    return tuple(out)


def _densest_first(rungs: int, parameter: str) -> list[int]:
    """The order the rungs are run in: the rung that keeps the most edges (the largest α, or
    the smallest margin δ) first. It runs the most tests, usually the most of any rung, and
    finds the shared cache empty, so its tests are stored without being looked up; the
    sparser rungs after it then find most of their tests there already. The results are the
    same in any order: each rung is a complete search of its own."""
    order = list(range(rungs))
    return order[::-1] if parameter == "alpha" else order


def sweep(data, alphas=None, *, margins=None, progress: Callable | None = None,
          cancel=None, cache: PValueCache | None = None, **discover_options) -> SweepResult:
    """Run the search over a ladder of α (or of the equivalence margin δ).

    Parameters
    ----------
    data : pandas.DataFrame or discovery.Dataset
    alphas : sequence of float, optional
        Increasing values in (0, 1). Default :data:`DEFAULT_ALPHAS` (12 log-spaced rungs from
        1e-4 to 0.2). Ignored when ``margins`` is given.
    margins : sequence of float, optional
        Sweep the equivalence margin δ instead (increasing, in (0, 1)); the search then uses
        ``unrelated="equivalence"`` at the α of ``discover_options`` (default 0.05).
    progress : callable, optional
        Called with ``{"phase": "sweep", "level": rung, "done": rungs done, "planned": rungs}``
        after each rung (and with the search's own events during one). The rungs run from
        the densest (largest α, smallest δ) to the sparsest; ``level`` is the rung's place
        in the ladder.
    cancel : callable or threading.Event, optional
        Stops the sweep with ``SearchCancelled``.
    cache : PValueCache, optional
        The shared p-value cache (a fresh one by default).
    **discover_options
        Any option of :func:`discovery.discover` (test, max_depth, knowledge, …).

    Returns
    -------
    SweepResult

    Raises
    ------
    SettingsError
        An empty or unsorted ladder, a value outside (0, 1), or a bad search option.

    Examples
    --------
    >>> import networkx as nx
    >>> from discovery import sweep
    >>> from discovery.simulate import sample_linear_gaussian
    >>> frame = sample_linear_gaussian(nx.DiGraph([("rain", "wet"), ("sprinkler", "wet")]),
    ...                                500, rng=1)
    >>> s = sweep(frame, alphas=[0.001, 0.01, 0.1])
    >>> [(e.a, e.b, sum(e.present)) for e in s.edges]
    [('rain', 'wet', 3), ('sprinkler', 'wet', 3)]
    """
    from ..search import discover
    from ..search._discover import _as_dataset, _test_for
    from ..settings import SearchSettings, check_parameter, default_collider_rule

    if discover_options.get("collider_rule", "") is None:  # the mode's default, as discover
        discover_options["collider_rule"] = default_collider_rule(
            bool(discover_options.get("hidden_causes")))
    if margins is not None:
        ladder = check_ladder(margins, "margins")
        alpha = discover_options.pop("alpha", 0.05)
        discover_options.pop("margin", None)
        discover_options["unrelated"] = "equivalence"
        settings_per_rung = [{"alpha": alpha, "margin": m} for m in ladder]
        parameter = "margin"
    else:
        ladder = DEFAULT_ALPHAS if alphas is None else check_ladder(alphas, "alphas")
        discover_options.pop("alpha", None)
        settings_per_rung = [{"alpha": a} for a in ladder]
        parameter = "alpha"
    if data is not None:
        data = _as_dataset(data, columns=discover_options.pop("columns", None),
                           missing=discover_options.pop("missing", "drop"))
        discover_options["missing"] = data.missing
        test = discover_options.get("test", "fisher-z")
        if isinstance(test, str):
            # check every setting once, then build the test once: its set-up (e.g. the
            # correlation matrix and the collinearity check) is shared by all rungs
            check_parameter("test", test)
            SearchSettings(**{k: v for k, v in {**discover_options, **settings_per_rung[0]}
                              .items() if k in _SETTINGS})
            if discover_options.get("unrelated") == "equivalence":
                from ._equivalence import EQUIVALENCE_TESTS
                if test not in EQUIVALENCE_TESTS:
                    discover(data, **discover_options, **settings_per_rung[0])  # its refusal
            discover_options["test"], _ = _test_for(
                data, test, discover_options.get("max_depth"),
                discover_options.get("test_options"))
    cache = PValueCache() if cache is None else cache
    cancelled = None if cancel is None else (cancel.is_set if hasattr(cancel, "is_set")
                                            else cancel)
    results, seconds = [None] * len(ladder), [0.0] * len(ladder)
    for done, rung in enumerate(_densest_first(len(ladder), parameter)):
        if cancelled is not None and cancelled():
            raise SearchCancelled("the sweep was stopped before it finished")
        started = time.perf_counter()
        results[rung] = discover(data, cache=cache, progress=progress, cancel=cancel,
                                 **discover_options, **settings_per_rung[rung])
        seconds[rung] = time.perf_counter() - started
        if progress is not None:
            progress({"phase": "sweep", "level": rung, "done": done + 1,
                      "planned": len(ladder)})
    edges = _ladder_order([r.edges for r in results], ladder)
    alphas_out = tuple(float(s["alpha"]) for s in settings_per_rung)
    return SweepResult(parameter, alphas_out, ladder if parameter == "margin" else None,
                       tuple(results), edges,
                       timings={"rungs_s": [round(s, 6) for s in seconds],
                                "total_s": round(sum(seconds), 6)})
