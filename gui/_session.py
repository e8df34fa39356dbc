"""The window's state as a pure model: no Qt here, so it can be tested and scripted headless.

A :class:`Session` holds everything the window shows — the data, the search settings, the
knowledge, the included variables, the last result, the run's status and progress, the
selection, the node positions, the overlay toggle — as *fields*. Each field has one emitter in
:attr:`Session.events`, which fires only when the value really changes; :meth:`Session.update`
sets several fields and then fires each changed field once. Views (``gui/_qt``) connect to the
emitters and send user actions back through the methods below; they never update each other.

Knowledge edits and layout moves go on one undo history (:meth:`Session.undo`,
:meth:`Session.redo`). A session is saved as one JSON file (``.edgewise``; see
:data:`FORMAT`), validated on open; an autosave copy lets the window offer recovery after a
crash. Errors meant for the user go to :attr:`Session.notifications` as one line, the same line
the command line prints.

A run is prepared here (:meth:`Session.start_run` returns a :class:`SearchJob`, a frozen
snapshot of the inputs) and executed wherever the caller likes — a worker thread in the
window, inline in tests. Every run reuses the session's one
:class:`~discovery.independence.PValueCache`, so a re-run after a knowledge or α edit answers
from the cache.

This module must not import Qt (checked by ``tests/gui/test_session.py``).
"""

from __future__ import annotations

import dataclasses
import json
import os
import threading
import time
import warnings
from pathlib import Path
from types import MappingProxyType
from typing import Callable, Iterable, Mapping

import numpy as np

from discovery import __version__ as ENGINE_VERSION
from discovery.exceptions import (DiscoveryError, KnowledgeError, ResultFormatError,
                                  SearchCancelled, SettingsError)
from discovery.files import parse_json_checked, read_text_checked, write_text_atomic
from discovery.independence import PValueCache
from discovery.knowledge import Knowledge
from discovery.result import SearchResult
from discovery.settings import SearchSettings, default_collider_rule

from . import _layout
from ._events import EventGroup
from ._words import window_words
from ._notifications import NotificationChannel

__all__ = ["Session", "SearchJob", "AnalysisJob", "ANALYSES", "ArrangePlan", "FORMAT",
           "VERSION", "STATUSES", "FIELDS",
           "restrict_knowledge"]

FORMAT = "edgewise-session"
VERSION = 1
SUFFIX = ".edgewise"

#: Run states: ``idle`` (nothing run yet), ``running``, ``stopping`` (stop asked, the worker
#: has not answered yet), ``done``, ``stopped`` (no result from that run), ``failed``.
STATUSES = ("idle", "running", "stopping", "done", "stopped", "failed")

#: Field names and their defaults.
FIELDS = {
    "data_path": None,          # str | None: the data file, absolute
    "dataset": None,            # discovery.data.Dataset | None: every column read
    "included": (),             # tuple of str: variables the search uses, in data order
    "settings": SearchSettings(),
    "knowledge": Knowledge(),
    "result": None,             # SearchResult | None: the last finished search
    "stale": False,             # the result was found with other inputs than the current ones
    "status": "idle",
    "progress": None,           # dict | None: phase, level, done, planned, elapsed
    "selection": (),            # () | (node,) | (a, b): a node, or a pair (edge or not)
    "positions": MappingProxyType({}),  # name -> (x, y), node centres in canvas units
    "layouts": 0,               # counts fresh layouts (the canvas fits the view to each)
    "overlay": True,            # show the knowledge overlay on the canvas
    "session_path": None,       # str | None: where the session was last saved or opened
    "dirty": False,             # changed since last save or open
    "history": (None, None),    # labels of the next undo and redo, or None
    "log": (),                  # run log lines
    "treatment": None,          # str | None: the Controls panel's treatment
    "outcome": None,            # str | None: the Controls panel's outcome
    "planned": (),              # tuple of str: the planned control set (outlined on the canvas)
    "controls": None,           # ControlSets | None: the answer for the result, kept current
    "effects": None,            # EffectRange | None: the effect range, when data are open
    "controls_note": "",        # why there is no answer or no effect range (one line), or ""
    "sweep": None,              # discovery.SweepResult | None: the last survival sweep
    "support": None,            # discovery.SupportResult | None: the last resampling run
}

_IDENTITY_FIELDS = {"dataset", "result", "controls", "effects", "sweep", "support"}
#: Fields whose change recomputes the control-set answer.
_CONTROL_INPUTS = {"result", "dataset", "treatment", "outcome", "planned"}
_INPUT_FIELDS = {"settings", "knowledge", "included"}
_SAVED_FIELDS = {"settings", "knowledge", "included", "result", "positions", "overlay",
                 "data_path", "treatment", "outcome", "planned", "sweep", "support"}
_LOG_LINES = 2000
#: Node positions in a session file beyond this (canvas units) are refused as damage.
_MAX_COORDINATE = 1e6
_STOP_CHUNK = 2048  # a batch is split so that a stop is seen within one chunk


def _same(name, a, b) -> bool:
    if a is b:
        return True
    if name in _IDENTITY_FIELDS:
        return False
    try:
        return bool(a == b)
    except Exception:  # e.g. numpy arrays in foreign values
        return False


def restrict_knowledge(knowledge: Knowledge, names: Iterable[str]) -> Knowledge:
    """The knowledge statements that name only variables in ``names`` (stages filtered)."""
    keep = set(names)
    pairs = {f: tuple(p for p in getattr(knowledge, f) if set(p) <= keep)
             for f in ("locked", "locked_directions", "forbidden", "forbidden_directions")}
    stages = tuple(tuple(v for v in g if v in keep) for g in knowledge.stages)
    return Knowledge(**pairs, stages=tuple(g for g in stages if g))


@dataclasses.dataclass
class _Command:
    label: str
    changes: dict  # field -> (before, after)


@dataclasses.dataclass(frozen=True)
class SearchJob:
    """A frozen snapshot of one run's inputs; :meth:`run` does the work (any thread).

    Attributes
    ----------
    run_id : int
        Matches :attr:`Session.run_id` while this run is the current one; a late answer from
        an older run is ignored.
    """

    run_id: int
    dataset: object
    included: tuple
    settings: SearchSettings
    knowledge: Knowledge
    cache: PValueCache
    cancel: threading.Event = dataclasses.field(default_factory=threading.Event)
    started: float = dataclasses.field(default_factory=time.perf_counter)
    #: filled by :meth:`run`: ``positions``, a layout of the result computed off the GUI
    #: thread (used when the canvas still shows a fresh table's grid)
    extras: dict = dataclasses.field(default_factory=dict)

    def run(self, progress: Callable | None = None) -> tuple[SearchResult, list[str]]:
        """Prepare the data and search; return the result and the warnings raised.

        Raises
        ------
        DiscoveryError
            Data, knowledge or settings that cannot be used (one-line message).
        SearchCancelled
            :attr:`cancel` was set.
        """
        from discovery import discover

        def report(info):
            if progress is not None:
                info = dict(info)
                info["elapsed"] = time.perf_counter() - self.started
                progress(info)

        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            prepared = _prepare_included(self.dataset, self.included, self.settings.missing)
            knowledge = restrict_knowledge(self.knowledge, prepared.variables)
            report({"phase": "prepare", "level": 0, "done": 0, "planned": 0})
            result = discover(
                prepared, test=self.settings.test, alpha=self.settings.alpha,
                max_depth=self.settings.max_depth, knowledge=knowledge,
                collider_rule=self.settings.collider_rule, missing=self.settings.missing,
                cache=_StoppableCache(self.cache, self.cancel), progress=report,
                cancel=self.cancel, hidden_causes=self.settings.hidden_causes,
                unrelated=self.settings.unrelated, margin=self.settings.margin)
        if not self.cancel.is_set():
            self.extras["positions"] = _layout.arrange(
                self.dataset.variables, [(e.source, e.target) for e in result.edges],
                self.knowledge.stages, style=self.extras.get("style", "auto"),
                directed=[(e.source, e.target) for e in result.edges
                          if e.kind == "directed"],
                sizes=self.extras.get("sizes"), aspect=self.extras.get("aspect"))
        return result, _messages(caught)


def _prepare_included(dataset, included, missing):
    """The open table cut to the included columns, as the search sees it; it keeps the
    fingerprint and row count of the file it was read from."""
    from discovery.data import prepare_frame
    prepared = prepare_frame(dataset.frame, columns=list(included), missing=missing,
                             source=dataset.source)
    return dataclasses.replace(prepared, sha256=dataset.sha256, rows_read=dataset.rows_read)


def _messages(caught) -> list[str]:
    """The texts of caught warnings, each once, in order."""
    return list(dict.fromkeys(str(w.message) for w in caught))


#: The analyses a session runs besides the search (see :class:`AnalysisJob`).
ANALYSES = ("sweep", "support")


@dataclasses.dataclass(frozen=True)
class AnalysisJob:
    """A frozen snapshot for a survival sweep or a resampling run; :meth:`run` does the
    work (any thread), like :class:`SearchJob`, and the session takes the record back.

    ``options`` are the analysis's own: ``alphas`` or ``margins`` for a sweep; ``resamples``,
    ``method``, ``seed`` and ``cutoff`` for support.
    """

    kind: str
    run_id: int
    dataset: object
    included: tuple
    settings: SearchSettings
    knowledge: Knowledge
    cache: PValueCache
    options: Mapping = dataclasses.field(default_factory=dict)
    cancel: threading.Event = dataclasses.field(default_factory=threading.Event)
    started: float = dataclasses.field(default_factory=time.perf_counter)
    extras: dict = dataclasses.field(default_factory=dict)

    def run(self, progress: Callable | None = None):
        """Run the analysis; return its record and the warnings raised.

        Raises
        ------
        DiscoveryError
            Data, settings or options that cannot be used (one-line message).
        SearchCancelled
            :attr:`cancel` was set.
        """
        from discovery.robustness import support, sweep

        def report(info):
            # only the analysis's own steps (rungs, resamples) drive the progress bar
            if progress is not None and info.get("phase") == self.kind:
                info = dict(info)
                info["elapsed"] = time.perf_counter() - self.started
                progress(info)

        s = self.settings
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            prepared = _prepare_included(self.dataset, self.included, s.missing)
            options = dict(test=s.test, max_depth=s.max_depth, collider_rule=s.collider_rule,
                           knowledge=restrict_knowledge(self.knowledge, prepared.variables),
                           hidden_causes=s.hidden_causes, progress=report, cancel=self.cancel)
            if s.unrelated != "significance":
                options.update(unrelated=s.unrelated, margin=s.margin)
            extra = dict(self.options)
            if self.kind == "sweep":
                if extra.get("margins") is not None:
                    options.pop("unrelated", None)
                    options.pop("margin", None)
                    options["alpha"] = s.alpha
                record = sweep(prepared, alphas=extra.get("alphas"),
                               margins=extra.get("margins"), cache=self.cache, **options)
            else:
                record = support(prepared, resamples=extra.get("resamples", 100),
                                 method=extra.get("method", "bootstrap"),
                                 seed=extra.get("seed"), cutoff=extra.get("cutoff", 0.5),
                                 alpha=s.alpha, **options)
        return record, _messages(caught)


@dataclasses.dataclass(frozen=True)
class ArrangePlan:
    """A snapshot of what one Arrange needs; :meth:`compute` runs on any thread.

    Attributes
    ----------
    token : int
        The request's number; :meth:`Session.apply_arrange` applies only the latest.
    """

    token: int
    label: str
    style: str
    variables: tuple
    edges: tuple
    directed: tuple
    stages: tuple
    sizes: Mapping = dataclasses.field(default_factory=dict)
    aspect: float | None = None

    def compute(self) -> dict:
        """The layout, ``{name: (x, y)}`` (no session state is touched)."""
        return _layout.arrange(self.variables, self.edges, self.stages, style=self.style,
                               directed=self.directed, sizes=self.sizes, aspect=self.aspect)


class _StoppableCache:
    """The session's cache, answering big batches in chunks and checking the stop flag
    between them, so that Stop is honoured within one chunk (well under a second). Every
    other attribute is the wrapped cache's."""

    def __init__(self, cache: PValueCache, cancel: threading.Event):
        self._cache = cache
        self._cancel = cancel

    def __getattr__(self, name):
        return getattr(self._cache, name)

    def _check(self):
        if self._cancel.is_set():
            raise SearchCancelled("the search was stopped before it finished")

    def pvalues(self, test, triples, **options):
        triples = list(triples)
        parts = []
        for start in range(0, len(triples), _STOP_CHUNK):
            self._check()
            parts.append(np.asarray(self._cache.pvalues(
                test, triples[start:start + _STOP_CHUNK], **options), dtype=float))
        return np.concatenate(parts) if parts else np.empty(0)

    def pvalues_array(self, test, idx, **options):
        idx = np.asarray(idx)
        parts = []
        for start in range(0, len(idx), _STOP_CHUNK):
            self._check()
            parts.append(np.asarray(self._cache.pvalues_array(
                test, idx[start:start + _STOP_CHUNK], **options), dtype=float))
        return np.concatenate(parts) if parts else np.empty(0)


class Session:
    """The evented model of one workspace.

    Parameters
    ----------
    notifications : NotificationChannel, optional
        Where user-facing messages go (a new channel by default).
    autosave_path : str or Path, optional
        Where :meth:`autosave` writes; None disables autosave.

    Attributes
    ----------
    events : EventGroup
        One emitter per field (``session.events.result.connect(callback)``); a callback
        receives the new value.
    notifications : NotificationChannel
    cache : PValueCache
        Shared by every run of this session's data.
    run_id : int
        Increases at every :meth:`start_run`.
    """

    def __init__(self, *, notifications: NotificationChannel | None = None,
                 autosave_path=None):
        object.__setattr__(self, "_values", dict(FIELDS))
        object.__setattr__(self, "events", EventGroup(FIELDS))
        object.__setattr__(self, "notifications", notifications or NotificationChannel())
        object.__setattr__(self, "autosave_path",
                           None if autosave_path is None else Path(autosave_path))
        object.__setattr__(self, "cache", PValueCache())
        object.__setattr__(self, "run_id", 0)
        object.__setattr__(self, "_job", None)
        object.__setattr__(self, "_undo", [])
        object.__setattr__(self, "_redo", [])
        object.__setattr__(self, "_result_key", None)
        object.__setattr__(self, "_generation", 0)
        object.__setattr__(self, "_autosaved_generation", 0)
        # True while the canvas shows the grid of a freshly opened table: the first result
        # then lays the canvas out around its edges (later results keep the layout)
        object.__setattr__(self, "_auto_layout", True)
        # the layout style Arrange last used ("auto", "layered" or "force")
        object.__setattr__(self, "layout_style", "auto")
        # counts Arrange requests: only the latest one's layout is applied
        object.__setattr__(self, "_arrange_token", 0)
        # True while the result shown was found on other data than the file now open (a
        # session whose data file changed): stale whatever the inputs, until a run
        object.__setattr__(self, "_data_changed", False)
        #: seconds the last run took, as its log line says (None before any run)
        object.__setattr__(self, "last_run_seconds", None)
        #: the drawn size (width, height) of each node, when a view has measured them;
        #: layouts use them instead of an estimate from the name
        object.__setattr__(self, "node_sizes", {})
        #: width over height of the view that shows the diagram (set by the canvas), so a
        #: force-directed layout fills it; None: the layout's default
        object.__setattr__(self, "view_aspect", None)
        #: the result file shown without its data (File → Open result…), else None
        object.__setattr__(self, "result_path", None)

    # -- fields -------------------------------------------------------------------------------
    def __getattr__(self, name):
        values = object.__getattribute__(self, "_values")
        if name in values:
            return values[name]
        raise AttributeError(f"Session has no field or attribute {name!r}")

    def __setattr__(self, name, value):
        if name in FIELDS:
            self.update({name: value})
        else:
            object.__setattr__(self, name, value)

    def update(self, values: Mapping) -> list[str]:
        """Set several fields, then emit each field that changed, once, in field order.

        Returns
        -------
        list of str
            The names of the fields that changed.
        """
        changed = []
        for name, value in values.items():
            if name not in FIELDS:
                raise AttributeError(f"Session has no field {name!r}; fields: {list(FIELDS)}")
            value = self._coerce(name, value)
            if not _same(name, self._values[name], value):
                self._values[name] = value
                changed.append(name)
        if not changed:
            return []
        touched = set(changed)
        if touched & _CONTROL_INPUTS and not {"controls", "effects"} & set(values):
            for name, value in self._controls_state().items():
                if not _same(name, self._values[name], value):
                    self._values[name] = value
                    changed.append(name)
        if touched & (_INPUT_FIELDS | {"result"}):
            stale = self._compute_stale()
            if stale != self._values["stale"]:
                self._values["stale"] = stale
                changed.append("stale")
        if touched & _SAVED_FIELDS and "dirty" not in values:
            object.__setattr__(self, "_generation", self._generation + 1)
            if not self._values["dirty"]:
                self._values["dirty"] = True
                changed.append("dirty")
        order = list(FIELDS)
        for name in sorted(set(changed), key=order.index):
            getattr(self.events, name).emit(self._values[name])
        return changed

    def _coerce(self, name, value):
        if name == "settings" and not isinstance(value, SearchSettings):
            raise TypeError("settings must be a discovery.SearchSettings")
        if name == "knowledge" and not isinstance(value, Knowledge):
            raise TypeError("knowledge must be a discovery.Knowledge")
        if name == "result" and value is not None and not isinstance(value, SearchResult):
            raise TypeError("result must be a discovery.SearchResult or None")
        if name in ("sweep", "support") and value is not None:
            from discovery.robustness import SupportResult, SweepResult
            if not isinstance(value, SweepResult if name == "sweep" else SupportResult):
                raise TypeError(f"{name} must be a discovery."
                                f"{'SweepResult' if name == 'sweep' else 'SupportResult'} "
                                "or None")
        if name in ("included", "selection", "log"):
            value = tuple(value)
        if name == "planned":
            value = tuple(sorted({str(v) for v in value}))
        if name in ("treatment", "outcome") and value is not None:
            value = str(value)
        if name == "selection" and len(value) > 2:
            raise ValueError("selection holds at most two variables")
        if name == "positions":
            value = MappingProxyType({str(k): (float(v[0]), float(v[1]))
                                      for k, v in dict(value).items()})
        if name == "status" and value not in STATUSES:
            raise ValueError(f"status must be one of {STATUSES}; got {value!r}")
        if name in ("overlay", "stale", "dirty"):
            value = bool(value)
        return value

    def _inputs_key(self):
        return (self.settings, restrict_knowledge(self.knowledge, self.included),
                tuple(self.included))

    def _compute_stale(self) -> bool:
        if self._values["result"] is None:
            return False
        if self._data_changed:
            return True
        if self._result_key is None:
            return False
        return self._result_key != self._inputs_key()

    @property
    def data_changed(self) -> bool:
        """Whether the result shown was found on other data than the file now open (its
        SHA-256 fingerprint differs); stays True until a run on the current data."""
        return self._data_changed and self.result is not None

    @property
    def variables(self) -> tuple[str, ...]:
        """Every variable the canvas can show: the data's usable columns, else the result's."""
        if self.dataset is not None:
            return tuple(self.dataset.variables)
        if self.result is not None:
            return tuple(self.result.variables)
        return ()

    # -- logging ------------------------------------------------------------------------------
    def append_log(self, line: str) -> None:
        """Add a line to the run log (command-line options told as window controls)."""
        line = window_words(line)
        stamp = time.strftime("%H:%M:%S")
        lines = (self.log + (f"{stamp}  {line}",))[-_LOG_LINES:]
        self.update({"log": lines})

    def _error(self, message, title):
        message = window_words(str(message))
        self.append_log(f"{title}: {message}")
        self.notifications.error(message, title=title)

    # -- data ---------------------------------------------------------------------------------
    def open_data(self, path) -> bool:
        """Read a table and start a fresh workspace on it.

        Knowledge is kept when every variable it names is in the new data (re-opening an
        updated export of the same study); everything else is reset. On a bad file the
        session is left as it was and the one-line message goes to the notifications.
        """
        from discovery.data import read_table
        label = str(path)
        try:
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                dataset = read_table(path, missing="test-wise")
        except DiscoveryError as err:
            self._error(err, "Open data")
            return False
        knowledge = self.knowledge
        if not knowledge.variables <= set(dataset.variables):
            knowledge = Knowledge()
        object.__setattr__(self, "result_path", None)
        self._reset_history()
        object.__setattr__(self, "cache", PValueCache())
        object.__setattr__(self, "_result_key", None)
        object.__setattr__(self, "_auto_layout", True)
        object.__setattr__(self, "_data_changed", False)
        self.update({
            "data_path": str(Path(path).resolve()), "dataset": dataset,
            "included": dataset.variables, "knowledge": knowledge, "result": None,
            "sweep": None, "support": None,
            "status": "idle", "progress": None, "selection": (),
            "positions": _layout.arrange(dataset.variables, (), knowledge.stages),
            "session_path": None, "layouts": self.layouts + 1,
            "treatment": self.treatment if self.treatment in dataset.variables else None,
            "outcome": self.outcome if self.outcome in dataset.variables else None,
            "planned": tuple(v for v in self.planned if v in dataset.variables),
        })
        self.update({"dirty": False})
        object.__setattr__(self, "_autosaved_generation", self._generation)
        self.append_log(f"opened {label}: {dataset.rows_read} rows, "
                        f"{len(dataset.variables)} usable columns of {len(dataset.kinds)}"
                        f" (SHA-256 {dataset.sha256[:12]})")
        for note in list(dataset.notes) + [str(w.message) for w in caught]:
            self.append_log(f"note: {note}")
        return True

    def load_knowledge(self, path) -> bool:
        """Replace the knowledge with a knowledge file's (undoable)."""
        from discovery.knowledge import read_knowledge
        try:
            knowledge = read_knowledge(path)
            knowledge.check_variables(self.variables, source=str(path))
        except DiscoveryError as err:
            self._error(err, "Load knowledge")
            return False
        self._edit({"knowledge": knowledge}, f"Load knowledge from {Path(path).name}",
                   rearrange=bool(knowledge.stages) != bool(self.knowledge.stages)
                   or knowledge.stages != self.knowledge.stages)
        self.append_log(f"knowledge loaded from {path}")
        return True

    @staticmethod
    def knowledge_beside(data_path) -> Path | None:
        """The knowledge file kept beside a data file (``knowledge.toml`` in its folder, or
        ``<stem>.knowledge.toml``), as the bundled examples have; None when there is none."""
        data_path = Path(data_path)
        for candidate in (data_path.with_name(f"{data_path.stem}.knowledge.toml"),
                          data_path.with_name("knowledge.toml")):
            if candidate.is_file():
                return candidate
        return None

    def save_knowledge(self, path) -> bool:
        from discovery.knowledge import write_knowledge
        try:
            write_knowledge(self.knowledge, path)
        except OSError as err:
            self._error(f"{path}: cannot write ({err.strerror or err}); choose another "
                        "folder", "Save knowledge")
            return False
        return True

    def set_included(self, name: str, included: bool) -> bool:
        """Include or leave out one variable of the data."""
        if self.dataset is None or name not in self.dataset.variables:
            self._error(f"{name!r} is not a usable column of the data", "Include variable")
            return False
        keep = set(self.included)
        keep.add(name) if included else keep.discard(name)
        self.update({"included": tuple(v for v in self.dataset.variables if v in keep)})
        return True

    # -- settings -----------------------------------------------------------------------------
    def set_setting(self, name: str, value) -> bool:
        """Change one search setting; a value outside :data:`discovery.PARAMETERS` is refused
        with the engine's message."""
        values = self.settings.to_dict()
        if name not in values:
            self._error(f"unknown setting {name!r}; choose one of {list(values)}", "Settings")
            return False
        if name == "hidden_causes" and values["collider_rule"] == default_collider_rule(
                bool(values["hidden_causes"])):
            # the collider rule follows the mode's default unless one was chosen: majority
            # with hidden causes, standard without (as discover(collider_rule=None))
            values["collider_rule"] = default_collider_rule(bool(value))
        values[name] = value
        try:
            settings = SearchSettings(**values)
        except SettingsError as err:
            self._error(err, "Settings")
            return False
        self.update({"settings": settings})
        return True

    # -- selection ----------------------------------------------------------------------------
    def select_node(self, name: str | None) -> None:
        self.update({"selection": () if name is None else (name,)})

    def select_pair(self, a: str, b: str) -> None:
        if a == b:
            self.select_node(a)
        else:
            self.update({"selection": (a, b)})

    def clear_selection(self) -> None:
        self.update({"selection": ()})

    # -- knowledge edits (undoable) -----------------------------------------------------------
    def lock(self, a: str, b: str) -> bool:
        """Lock the edge a — b (must be adjacent; direction left to the search)."""
        return self._pair_edit("locked", a, b, f"Lock {a} — {b}")

    def lock_direction(self, a: str, b: str) -> bool:
        """Lock the direction a → b."""
        return self._pair_edit("locked_directions", a, b, f"Lock {a} → {b}")

    def forbid(self, a: str, b: str) -> bool:
        """Forbid any edge between a and b."""
        return self._pair_edit("forbidden", a, b, f"Forbid {a} — {b}")

    def forbid_direction(self, a: str, b: str) -> bool:
        """Forbid a → b (b → a stays possible)."""
        return self._pair_edit("forbidden_directions", a, b, f"Forbid {a} → {b}")

    def clear_pair(self, a: str, b: str) -> bool:
        """Remove every statement about the pair {a, b}."""
        knowledge = self.knowledge.without_pair(a, b)
        if knowledge == self.knowledge:
            return False
        self._edit({"knowledge": knowledge}, f"Clear knowledge on {a} — {b}")
        return True

    def pair_statements(self, a: str, b: str) -> list[str]:
        """The knowledge about {a, b} in words (for the inspector)."""
        k = self.knowledge
        out = []
        for field_name, text in (("locked", "locked edge"), ("forbidden", "forbidden edge")):
            if any(set(p) == {a, b} for p in getattr(k, field_name)):
                out.append(text)
        for x, y in k.locked_directions:
            if {x, y} == {a, b}:
                out.append(f"locked direction {x} → {y}")
        for x, y in k.forbidden_directions:
            if {x, y} == {a, b}:
                out.append(f"forbidden direction {x} → {y}")
        for x, y in ((a, b), (b, a)):
            if k.is_direction_forbidden(x, y) == "stage order":
                out.append(f"stage order rules out {x} → {y}")
        return out

    def _pair_edit(self, field_name, a, b, label) -> bool:
        for v in (a, b):
            if v not in self.variables:
                self._error(f"{v!r} is not a variable of this session", "Knowledge")
                return False
        try:
            knowledge = self.knowledge.with_pair(field_name, a, b)
        except KnowledgeError as err:
            self._error(err, "Knowledge")
            return False
        if knowledge == self.knowledge:
            return False
        self._edit({"knowledge": knowledge}, label)
        return True

    def set_stages(self, stages, *, label: str = "Edit stages") -> bool:
        """Replace the stages (an ordered list of groups) and re-arrange the canvas, as one
        undoable step."""
        stages = tuple(tuple(g) for g in stages if len(tuple(g)))
        unknown = sorted({v for g in stages for v in g} - set(self.variables))
        if unknown:
            self._error(f"unknown variable(s) {unknown} in stages", "Stages")
            return False
        try:
            knowledge = self.knowledge.with_stages(stages)
        except KnowledgeError as err:
            self._error(err, "Stages")
            return False
        if knowledge == self.knowledge:
            return False
        self._edit({"knowledge": knowledge}, label, rearrange=True)
        return True

    def move_to_stage(self, names: Iterable[str], stage: int | None) -> bool:
        """Move variables into stage ``stage`` (0-based; ``len(stages)`` opens a new last
        stage; None takes them out of every stage)."""
        names = [n for n in names]
        groups = [[v for v in g if v not in names] for g in self.knowledge.stages]
        if stage is not None:
            while len(groups) <= stage:
                groups.append([])
            groups[stage].extend(n for n in names if n not in groups[stage])
        groups = [g for g in groups if g]
        what = ", ".join(names)
        label = (f"Move {what} out of the stages" if stage is None
                 else f"Move {what} to stage {stage + 1}")
        return self.set_stages(groups, label=label)

    def move_stage(self, index: int, to: int) -> bool:
        groups = list(self.knowledge.stages)
        if not (0 <= index < len(groups)) or not (0 <= to < len(groups)) or index == to:
            return False
        groups.insert(to, groups.pop(index))
        return self.set_stages(groups, label=f"Move stage {index + 1} to place {to + 1}")

    def remove_stage(self, index: int) -> bool:
        groups = list(self.knowledge.stages)
        if not 0 <= index < len(groups):
            return False
        groups.pop(index)
        return self.set_stages(groups, label=f"Remove stage {index + 1}")

    # -- layout (undoable) --------------------------------------------------------------------
    def move_nodes(self, moved: Mapping[str, tuple[float, float]], *,
                   label: str = "Move node") -> None:
        """Record dragged nodes' new centres (one undoable step)."""
        positions = dict(self.positions)
        positions.update({k: (float(x), float(y)) for k, (x, y) in moved.items()})
        object.__setattr__(self, "_auto_layout", False)
        self._edit({"positions": positions}, label)

    def arrange(self, style: str | None = None) -> None:
        """Lay the canvas out afresh.

        Parameters
        ----------
        style : {"auto", "layered", "force"}, optional
            ``auto``: layered by stage when stages exist, else force-directed; ``layered``:
            by stage, or by the direction of the arrows when there are no stages. The style
            is remembered for later layouts (the first diagram of a new run, stage edits).
            By default the last one used.
        """
        plan = self.plan_arrange(style)
        if plan is not None:
            self.apply_arrange(plan, plan.compute())

    def plan_arrange(self, style: str | None = None) -> "ArrangePlan | None":
        """Snapshot what a fresh layout needs (see :meth:`arrange`); the plan's
        :meth:`~ArrangePlan.compute` may run on any thread (a dense diagram's force-directed
        layout takes seconds), then :meth:`apply_arrange` puts it in place. None (with a
        message) for an unknown style."""
        if style is not None:
            if style not in _layout.STYLES:
                self._error(f"layout must be one of {_layout.STYLES}; got {style!r}",
                            "Arrange")
                return None
            object.__setattr__(self, "layout_style", style)
        object.__setattr__(self, "_arrange_token", self._arrange_token + 1)
        label = {"auto": "Arrange", "layered": "Arrange in layers",
                 "force": "Arrange force-directed"}[self.layout_style]
        return ArrangePlan(self._arrange_token, label, self.layout_style,
                           *self._layout_inputs(), sizes=dict(self.node_sizes),
                           aspect=self.view_aspect)

    def apply_arrange(self, plan: "ArrangePlan", positions: Mapping) -> bool:
        """Put a computed layout in place (one undoable step), unless a later Arrange was
        asked for or the diagram changed meanwhile; True when it was applied."""
        if (plan.token != self._arrange_token
                or (plan.variables, plan.edges, plan.directed, plan.stages)
                != self._layout_inputs()):
            return False
        self._edit({"positions": positions}, plan.label)
        self._laid_out()
        return True

    def _laid_out(self) -> None:
        """A fresh layout is in place: tell the views (the canvas fits the view to it)."""
        self.update({"layouts": self.layouts + 1})

    def _layout_inputs(self, knowledge: Knowledge | None = None) -> tuple:
        """(variables, edges, arrows, stages): what a layout of the diagram depends on."""
        knowledge = knowledge or self.knowledge
        edges = self.result.edges if self.result else ()
        return (tuple(self.variables), tuple((e.source, e.target) for e in edges),
                tuple((e.source, e.target) for e in edges if e.kind == "directed"),
                tuple(tuple(g) for g in knowledge.stages))

    def _arranged(self, knowledge: Knowledge | None = None) -> dict:
        variables, edges, directed, stages = self._layout_inputs(knowledge)
        return _layout.arrange(variables, edges, stages, style=self.layout_style,
                               directed=directed, sizes=self.node_sizes,
                               aspect=self.view_aspect)

    def _ensure_positions(self) -> None:
        missing = [v for v in self.variables if v not in self.positions]
        if not missing:
            return
        if len(missing) == len(self.variables) or not self.positions:
            self.update({"positions": self._arranged()})
            self._laid_out()
            return
        fresh = self._arranged()
        positions = dict(self.positions)
        left, top, right, bottom = _layout.bounds(positions)
        for i, v in enumerate(missing):
            positions[v] = fresh.get(v, (right + _layout.MIN_GAP_X, top + i * 60.0))
        self.update({"positions": positions})

    # -- undo / redo --------------------------------------------------------------------------
    def _edit(self, values: dict, label: str, *, rearrange: bool = False) -> None:
        if rearrange and "knowledge" in values:
            values = dict(values)
            values["positions"] = self._arranged(values["knowledge"])
        changes = {k: (self._values[k], v) for k, v in values.items()
                   if not _same(k, self._values[k], self._coerce(k, v))}
        if not changes:
            return
        self._undo.append(_Command(label, changes))
        del self._undo[:-200]
        self._redo.clear()
        self.update({k: after for k, (_, after) in changes.items()})
        self._sync_history()
        if rearrange and "positions" in changes:
            self._laid_out()

    def undo(self) -> bool:
        """Undo the last knowledge edit or layout move."""
        return self._step(self._undo, self._redo, 0, "undo")

    def redo(self) -> bool:
        """Redo the last undone edit."""
        return self._step(self._redo, self._undo, 1, "redo")

    def _step(self, source, target, side: int, word: str) -> bool:
        """Move one command from ``source`` to ``target`` and apply its before (0) or after
        (1) state."""
        if not source:
            return False
        command = source.pop()
        target.append(command)
        self.update({k: states[side] for k, states in command.changes.items()})
        self._sync_history()
        self.append_log(f"{word}: {command.label}")
        return True

    def _sync_history(self):
        self.update({"history": (self._undo[-1].label if self._undo else None,
                                 self._redo[-1].label if self._redo else None)})

    def _reset_history(self):
        self._undo.clear()
        self._redo.clear()
        self._sync_history()

    # -- runs ---------------------------------------------------------------------------------
    def start_run(self) -> SearchJob | None:
        """Snapshot the inputs and mark the session running; None (with a message) when
        there is nothing to search or a run is already going."""
        if self.status in ("running", "stopping"):
            self.notifications.info("a search is already running; stop it first",
                                    title="Run")
            return None
        if self.dataset is None:
            self._error("no data open; open a CSV, TSV or Parquet file first (File → Open "
                        "data)", "Run")
            return None
        if len(self.dataset.variables) < 2:
            self._error(f"{Path(self.data_path or self.dataset.source).name}: "
                        f"{len(self.dataset.variables)} usable column(s) (the Variables panel "
                        "says why the others are left out); a search needs at least 2 — "
                        "open another table (File → Open…)", "Run")
            return None
        if len(self.included) < 2:
            self._error("a search needs at least 2 included variables; tick more in the "
                        "Variables panel", "Run")
            return None
        object.__setattr__(self, "run_id", self.run_id + 1)
        job = SearchJob(self.run_id, self.dataset, tuple(self.included), self.settings,
                        self.knowledge, self.cache,
                        extras={"sizes": dict(self.node_sizes), "style": self.layout_style,
                                "aspect": self.view_aspect})
        object.__setattr__(self, "_job", job)
        self.update({"status": "running",
                     "progress": {"phase": "prepare", "level": 0, "done": 0, "planned": 0,
                                  "elapsed": 0.0}})
        s = self.settings
        self.append_log(f"run {job.run_id}: {len(job.included)} variables, test {s.test}, "
                        f"α = {s.alpha:g}, depth "
                        f"{'no limit' if s.max_depth is None else s.max_depth}, "
                        f"collider rule {s.collider_rule}, missing {s.missing}")
        return job

    def start_analysis(self, kind: str, **options) -> AnalysisJob | None:
        """Snapshot the inputs for a sweep (``kind="sweep"``, options ``alphas`` or
        ``margins``) or a resampling run (``kind="support"``, options ``resamples``,
        ``method``, ``seed``, ``cutoff``) and mark the session running; None (with a
        message) when it cannot start. The job goes through the same progress, Stop and
        finish path as a search."""
        if kind not in ANALYSES:
            raise ValueError(f"kind must be one of {ANALYSES}; got {kind!r}")
        title = "Sweep" if kind == "sweep" else "Resample"
        if self.status in ("running", "stopping"):
            self.notifications.info("a run is already going; stop it first", title=title)
            return None
        if self.dataset is None:
            self._error("no data open; open a CSV, TSV or Parquet file first (File → Open "
                        "data)", title)
            return None
        if len(self.included) < 2:
            self._error("at least 2 included variables are needed; tick more in the "
                        "Variables panel", title)
            return None
        object.__setattr__(self, "run_id", self.run_id + 1)
        job = AnalysisJob(kind, self.run_id, self.dataset, tuple(self.included),
                          self.settings, self.knowledge, self.cache, dict(options))
        object.__setattr__(self, "_job", job)
        self.update({"status": "running",
                     "progress": {"phase": kind, "level": 0, "done": 0, "planned": 0,
                                  "elapsed": 0.0}})
        what = ("survival sweep" if kind == "sweep"
                else f"{options.get('resamples', 100)} {options.get('method', 'bootstrap')} "
                     "resamples")
        self.append_log(f"run {job.run_id}: {what} over {len(job.included)} variables")
        return job

    def _finish_analysis(self, job: AnalysisJob, record, warnings_seen) -> bool:
        object.__setattr__(self, "_job", None)
        if job.cancel.is_set():
            self._stopped(job)
            return False
        self.update({job.kind: record, "status": "done", "progress": None})
        elapsed = time.perf_counter() - job.started
        if job.kind == "sweep":
            self.append_log(f"run {job.run_id} done in {elapsed:.2f} s: sweep of "
                            f"{len(record.ladder)} rungs, {len(record.edges)} pairs adjacent "
                            "at some rung")
        else:
            self.append_log(f"run {job.run_id} done in {elapsed:.2f} s: {record.resamples} "
                            f"resamples (seed {record.seed}), {len(record.consensus)} edges "
                            f"at support ≥ {record.cutoff:g}")
        for text in warnings_seen:
            self.append_log(f"note: {text}")
        return True

    def run_analysis_inline(self, kind: str, **options) -> bool:
        """Run a sweep or resampling in the calling thread (scripts and tests)."""
        job = self.start_analysis(kind, **options)
        if job is None:
            return False
        try:
            record, seen = job.run(lambda info: self.report_progress(job, info))
        except SearchCancelled:
            self.run_stopped(job)
            return False
        except DiscoveryError as err:
            self.fail_run(job, str(err))
            return False
        return self.finish_run(job, record, seen)

    def set_unrelated(self, rule: str, margin: float | None = None) -> bool:
        """Choose the unrelated rule (and the margin δ with ``"equivalence"``) together."""
        values = self.settings.to_dict()
        values.update(unrelated=rule, margin=margin if margin is not None
                      else values.get("margin"))
        try:
            settings = SearchSettings(**values)
        except SettingsError as err:
            self._error(err, "Settings")
            return False
        self.update({"settings": settings})
        return True

    @property
    def job(self) -> SearchJob | None:
        """The current run's job, or None."""
        return self._job

    def report_progress(self, job: SearchJob, info: Mapping) -> None:
        if job is self._job and self.status in ("running", "stopping"):
            self.update({"progress": dict(info)})

    def stop_run(self) -> bool:
        """Ask the current run to stop; its result, if it still arrives, is thrown away."""
        if self._job is None or self.status not in ("running", "stopping"):
            return False
        self._job.cancel.set()
        self.update({"status": "stopping"})
        return True

    def finish_run(self, job: SearchJob, result: SearchResult,
                   warnings_seen: Iterable[str] = ()) -> bool:
        """Show a finished run's result — only if it is the current run and was not
        stopped. Returns whether the result was taken."""
        if job is not self._job:
            return False
        if isinstance(job, AnalysisJob):
            return self._finish_analysis(job, result, warnings_seen)
        object.__setattr__(self, "_job", None)
        if job.cancel.is_set():
            self._stopped(job)
            return False
        object.__setattr__(self, "_result_key",
                           (job.settings, restrict_knowledge(job.knowledge, job.included),
                            tuple(job.included)))
        object.__setattr__(self, "_data_changed", False)
        # one measure of the run's time, for the log line and the status bar alike
        object.__setattr__(self, "last_run_seconds", time.perf_counter() - job.started)
        self.update({"result": result, "status": "done", "progress": None})
        keep = tuple(v for v in self.selection if v in result.variables)
        self.update({"selection": keep if len(keep) == len(self.selection) else ()})
        if self._auto_layout:  # the first diagram replaces the grid of a fresh table
            object.__setattr__(self, "_auto_layout", False)
            positions = job.extras.get("positions")
            if positions is None or set(positions) != set(self.variables):
                positions = self._arranged()
            self.update({"positions": positions})
            self._laid_out()
        else:
            self._ensure_positions()
        self.append_log(f"run {job.run_id} done in {self.last_run_seconds:.2f} s: "
                        + run_counts(result))
        for text in list(warnings_seen) + list(result.conflicts) + list(result.notes):
            self.append_log(f"note: {text}")
        return True

    def fail_run(self, job: SearchJob, message: str) -> None:
        """A run ended with an error: show the one-line message, keep the previous result."""
        if job is not self._job:
            return
        object.__setattr__(self, "_job", None)
        if job.cancel.is_set():
            self._stopped(job)
            return
        self.update({"status": "failed", "progress": None})
        self._error(message, "Run")

    def run_stopped(self, job: SearchJob) -> None:
        if job is self._job:
            object.__setattr__(self, "_job", None)
            self._stopped(job)

    def _stopped(self, job):
        self.update({"status": "stopped", "progress": None})
        self.append_log(f"run {job.run_id} stopped after "
                        f"{time.perf_counter() - job.started:.2f} s; no result from it "
                        + ("(the diagram shown is the previous run's)" if self.result
                           else ""))

    def run_inline(self) -> bool:
        """Run a search in the calling thread (scripts and tests); True when a result came."""
        job = self.start_run()
        if job is None:
            return False
        try:
            result, seen = job.run(lambda info: self.report_progress(job, info))
        except SearchCancelled:
            self.run_stopped(job)
            return False
        except DiscoveryError as err:
            self.fail_run(job, str(err))
            return False
        return self.finish_run(job, result, seen)

    # -- control sets -------------------------------------------------------------------------
    def set_treatment(self, name: str | None) -> None:
        """Make ``name`` the treatment (the outcome is cleared if it was the same variable)."""
        values = {"treatment": name, "planned": tuple(v for v in self.planned if v != name)}
        if name is not None and name == self.outcome:
            values["outcome"] = None
        self.update(values)

    def set_outcome(self, name: str | None) -> None:
        """Make ``name`` the outcome (the treatment is cleared if it was the same variable)."""
        values = {"outcome": name, "planned": tuple(v for v in self.planned if v != name)}
        if name is not None and name == self.treatment:
            values["treatment"] = None
        self.update(values)

    def set_planned(self, names) -> bool:
        """Set the planned control set; a name that is not a variable, the treatment or the
        outcome is refused with one line in the notifications."""
        if isinstance(names, str):
            names = [n.strip() for n in names.split(",") if n.strip()]
        names = {str(n) for n in names}
        known = set(self.result.variables) if self.result is not None else set(self.variables)
        bad = sorted(names - known)
        if bad:
            self._error(f"{', '.join(map(repr, bad))} is not a variable of the result; use "
                        "the names on the canvas", "Planned control set")
            return False
        for role in ("treatment", "outcome"):
            if getattr(self, role) in names:
                self._error(f"the planned set contains the {role} {getattr(self, role)!r}; "
                            "a control set holds other variables only", "Planned control set")
                return False
        self.update({"planned": tuple(names)})
        return True

    def toggle_planned(self, name: str) -> bool:
        """Add ``name`` to the planned set, or take it out."""
        names = set(self.planned)
        names.symmetric_difference_update({name})
        return self.set_planned(names)

    @property
    def planned_verdict(self):
        """The verdict on the planned set (``discovery.effects.Verdict``), or None."""
        if self.controls is None:
            return None
        try:
            return self.controls.check(self.planned)
        except DiscoveryError:
            return None

    def _controls_state(self) -> dict:
        from discovery.effects import control_sets, effect_range
        v = self._values
        x, y, result = v["treatment"], v["outcome"], v["result"]
        empty = {"controls": None, "effects": None}
        if result is None:
            return {**empty, "controls_note": "run a search to get control sets" if x or y
                    else ""}
        if x is None or y is None:
            return {**empty, "controls_note": "choose a treatment and an outcome"}
        try:
            answer = control_sets(result, x, y)
        except DiscoveryError as err:
            return {**empty, "controls_note": str(err)}
        note, effects = "", None
        if v["dataset"] is not None and answer.kind != "pag":
            planned = set(v["planned"])
            try:
                ok = answer.check(planned).valid
            except DiscoveryError:
                ok = False
            chosen = planned if ok else (answer.optimal if answer.optimal is not None
                                         else answer.canonical)
            try:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    effects = effect_range(result, v["dataset"], x, y, controls=chosen)
            except DiscoveryError as err:
                note = f"no effect range: {err}"
        elif v["dataset"] is None:
            note = "open the data to see the effect range"
        return {"controls": answer, "effects": effects, "controls_note": note}

    # -- session files ------------------------------------------------------------------------
    def to_dict(self, *, base: Path | None = None) -> dict:
        """The session document (see :data:`FORMAT`)."""
        data = None
        if self.data_path is not None:
            data = {"path": self.data_path, "relative": None,
                    "sha256": self.dataset.sha256 if self.dataset is not None
                    else (self.result.data.get("sha256") if self.result else None)}
            if base is not None:
                try:
                    data["relative"] = os.path.relpath(self.data_path, base)
                except ValueError:  # another drive on Windows
                    pass
        key = self._result_key
        return {
            "format": FORMAT,
            "version": VERSION,
            "software": {"edgewise": ENGINE_VERSION},
            "saved": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
            "data": data,
            "included": list(self.included),
            "settings": self.settings.to_dict(),
            "knowledge": self.knowledge.to_dict(),
            "result": self.result.to_dict() if self.result is not None else None,
            "result_inputs": None if key is None or self.result is None else {
                "settings": key[0].to_dict(), "knowledge": key[1].to_dict(),
                "included": list(key[2])},
            "positions": {k: [round(x, 2), round(y, 2)] for k, (x, y) in
                          self.positions.items()},
            "overlay": self.overlay,
            "selection": list(self.selection),
            "controls": {"treatment": self.treatment, "outcome": self.outcome,
                         "planned": list(self.planned)},
            "sweep": self.sweep.to_dict() if self.sweep is not None else None,
            "support": self.support.to_dict() if self.support is not None else None,
        }

    def save_session(self, path) -> bool:
        """Write the session to ``path`` (``.edgewise`` is added when missing)."""
        path = Path(path)
        if path.suffix != SUFFIX:
            path = path.with_name(path.name + SUFFIX)
        try:
            write_text_atomic(path, json.dumps(self.to_dict(base=path.resolve().parent),
                                           indent=1, ensure_ascii=False) + "\n")
        except OSError as err:
            self._error(f"{path}: cannot write the session ({err.strerror or err}); choose "
                        "another folder", "Save session")
            return False
        self.update({"session_path": str(path.resolve())})
        self.update({"dirty": False})
        self.append_log(f"session saved to {path}")
        return True

    def open_session(self, path, *, recovered: bool = False) -> bool:
        """Read and validate a ``.edgewise`` file and make it the current workspace.

        Nothing changes unless the whole file is valid. A data file that moved or changed
        is not an error: the saved result is shown, marked stale, with a warning.
        """
        try:
            state, warns = _read_session(Path(path))
        except DiscoveryError as err:
            self._error(err, "Open session")
            return False
        object.__setattr__(self, "result_path", None)
        self._reset_history()
        object.__setattr__(self, "cache", PValueCache())
        object.__setattr__(self, "_job", None)
        object.__setattr__(self, "_result_key", state.pop("result_key"))
        object.__setattr__(self, "_auto_layout", not state["positions"])
        object.__setattr__(self, "_data_changed", bool(state.pop("stale", False))
                           and state["result"] is not None)
        object.__setattr__(self, "last_run_seconds", None)
        session_path = state.pop("session_path")
        state.update({"status": "done" if state["result"] is not None else "idle",
                      "progress": None,
                      "session_path": None if recovered else str(Path(path).resolve())})
        if recovered:
            state["session_path"] = session_path
        state["layouts"] = self.layouts + 1
        self.update(state)
        self._ensure_positions()
        self.update({"stale": self._compute_stale()})
        self.update({"dirty": recovered})
        object.__setattr__(self, "_autosaved_generation", self._generation)
        self.append_log(("recovered the autosaved session" if recovered
                         else f"session opened from {path}"))
        for text in warns:
            self.append_log(f"warning: {text}")
            self.notifications.warning(window_words(text), title="Open session")
        return True

    def open_result(self, path) -> bool:
        """Show a saved result file (written by ``edgewise discover --out`` or Export →
        Result as JSON) as a new workspace without data: its diagram, evidence, settings and
        knowledge. To run again, open the data.

        Nothing changes unless the whole file is valid.
        """
        from discovery.result import load_result
        try:
            result = load_result(path)
        except DiscoveryError as err:
            self._error(err, "Open result")
            return False
        self._reset_history()
        object.__setattr__(self, "cache", PValueCache())
        object.__setattr__(self, "_job", None)
        object.__setattr__(self, "_result_key", (
            result.settings, restrict_knowledge(result.knowledge, result.variables),
            tuple(result.variables)))
        object.__setattr__(self, "_auto_layout", False)
        object.__setattr__(self, "_data_changed", False)
        object.__setattr__(self, "last_run_seconds", None)
        object.__setattr__(self, "result_path", str(Path(path).resolve()))
        self.update({"data_path": None, "dataset": None, "included": result.variables,
                     "settings": result.settings, "knowledge": result.knowledge,
                     "result": result, "status": "done", "progress": None, "selection": (),
                     "positions": {}, "session_path": None, "layouts": self.layouts + 1})
        self._ensure_positions()
        self.update({"stale": self._compute_stale()})
        self.update({"dirty": False})
        object.__setattr__(self, "_autosaved_generation", self._generation)
        self.append_log(f"result opened from {path}: {run_counts(result)}; to run again, "
                        "open its data (File → Open…)")
        return True

    # -- autosave and recovery ----------------------------------------------------------------
    def autosave(self) -> bool:
        """Write the autosave copy if anything changed since the last one."""
        if self.autosave_path is None or self._generation == self._autosaved_generation:
            return False
        if self.dataset is None and self.result is None:
            return False
        doc = self.to_dict(base=self.autosave_path.parent)
        doc["autosave_of"] = self.session_path
        try:
            self.autosave_path.parent.mkdir(parents=True, exist_ok=True)
            write_text_atomic(self.autosave_path, json.dumps(doc, ensure_ascii=False))
        except OSError:
            return False
        object.__setattr__(self, "_autosaved_generation", self._generation)
        return True

    def discard_autosave(self) -> None:
        """Delete the autosave copy (a clean close, or the user declined recovery)."""
        if self.autosave_path is not None:
            try:
                self.autosave_path.unlink()
            except FileNotFoundError:
                pass
            except OSError:
                pass

    @staticmethod
    def recovery_offer(autosave_path) -> dict | None:
        """What an autosave file left by a crash holds (``saved``, ``data``, ``session``),
        or None when there is none or it is unreadable."""
        path = Path(autosave_path)
        try:
            doc = parse_json_checked(
                read_text_checked(path, what="autosave file", error=ResultFormatError),
                source=str(path), error=ResultFormatError)
        except ResultFormatError:
            return None
        if not isinstance(doc, dict) or doc.get("format") != FORMAT:
            return None
        data = doc.get("data") if isinstance(doc.get("data"), dict) else {}

        def text(value):
            return value if isinstance(value, str) and "\0" not in value else None
        return {"saved": text(doc.get("saved")), "data": text(data.get("path")),
                "session": text(doc.get("autosave_of")), "path": str(path)}

    def recover(self) -> bool:
        """Open the autosave copy as the current (unsaved) workspace."""
        if self.autosave_path is None or not self.autosave_path.exists():
            return False
        return self.open_session(self.autosave_path, recovered=True)


def run_counts(result: SearchResult) -> str:
    """The counts of a result in words, as the run log and the status bar show them (the
    engine's own ``counts``, nothing recounted)."""
    c = result.counts
    if result.settings.hidden_causes:
        kinds = (f"{c.get('directed', 0)} directed, {c.get('bidirected', 0)} bidirected, "
                 f"{c.get('partially-directed', 0)} o→, {c.get('nondirected', 0)} o–o; "
                 "hidden causes allowed")
    else:
        kinds = (f"{c.get('directed', 0)} directed, {c.get('undirected', 0)} undirected, "
                 f"{c.get('contested', 0)} contested")
    return (f"{c.get('edges', 0)} edges ({kinds}); "
            f"{c.get('tests', 0)} tests, {c.get('tests_from_cache', 0)} from the cache")


def _read_session(path: Path) -> tuple[dict, list[str]]:
    """Parse and validate a session file; return field values and warnings.

    Every way a file can be wrong (not a regular file, too large, nested too deep, a field of
    the wrong type, a damaged embedded result) raises one :class:`ResultFormatError` line.
    """
    label = str(path)

    def fail(what):
        raise ResultFormatError(f"{label}: {what}")

    text = read_text_checked(path, what="session file", error=ResultFormatError)
    try:
        doc = parse_json_checked(text, source=label, error=ResultFormatError)
    except ResultFormatError as err:
        raise ResultFormatError(f"{err}; not a session file — choose a .edgewise file saved "
                                "by Edgewise") from None
    if not isinstance(doc, dict) or doc.get("format") != FORMAT:
        fail(f"not an Edgewise session ('format' is not {FORMAT!r}); choose a .edgewise "
             "file saved by Edgewise")
    if doc.get("version") != VERSION:
        fail(f"session version {doc.get('version')!r} is not supported (this Edgewise reads "
             f"version {VERSION}); open it with the Edgewise that saved it")
    try:
        return _session_fields(doc, path, fail)
    except DiscoveryError:
        raise
    except (TypeError, KeyError, ValueError, AttributeError, IndexError) as err:
        # a field nested where no check looked: still one line, never a traceback
        fail(f"the file is damaged ({type(err).__name__}: {str(err)[:120]}); open an older "
             "copy or start again from the data")


def _session_fields(doc: dict, path: Path, fail) -> tuple[dict, list[str]]:
    from discovery.data import read_table

    label = str(path)
    for name, kind in (("settings", dict), ("knowledge", dict), ("included", list),
                       ("positions", dict)):
        if not isinstance(doc.get(name), kind):
            fail(f"'{name}' is missing or not a {'table' if kind is dict else 'list'}; the "
                 "file is damaged — open an older copy or start again from the data")
    try:
        settings = SearchSettings.from_dict(doc["settings"])
    except (SettingsError, TypeError) as err:
        fail(f"settings: {err}")
    knowledge = Knowledge.from_dict(doc["knowledge"], source=label)
    result = None
    if doc.get("result") is not None:
        result = SearchResult.from_dict(doc["result"], source=label)
    positions = {}
    for name, xy in doc["positions"].items():
        if not (isinstance(xy, list) and len(xy) == 2
                and all(isinstance(c, (int, float)) and not isinstance(c, bool)
                        and np.isfinite(c) and abs(c) <= _MAX_COORDINATE for c in xy)):
            fail(f"position of {name!r} must be two numbers [x, y] within "
                 f"±{_MAX_COORDINATE:g}; got {str(xy)[:60]}")
        positions[name] = (float(xy[0]), float(xy[1]))
    included = doc["included"]
    if not all(isinstance(v, str) for v in included):
        fail("'included' must be a list of variable names")
    for name, kinds, what in (("overlay", (bool,), "true or false"),
                              ("selection", (list,), "a list of variable names"),
                              ("result_inputs", (dict,), "a table"),
                              ("autosave_of", (str,), "a path")):
        if doc.get(name) is not None and not isinstance(doc[name], kinds):
            fail(f"'{name}' must be {what}; got {type(doc[name]).__name__} — the file is "
                 "damaged, open an older copy or start again from the data")
    warns = []
    dataset = None
    data_path = None
    stale = False
    data = doc.get("data")
    if data is not None:
        if not isinstance(data, dict) or not isinstance(data.get("path"), str):
            fail("'data' must be a table with the data file's 'path'")
        for key in ("path", "relative", "sha256"):
            value = data.get(key)
            if value is not None and (not isinstance(value, str) or "\0" in value
                                      or len(value) > 4096):
                fail(f"'data.{key}' must be a path or fingerprint text; the file is damaged "
                     "— open an older copy, or open the data (File → Open data)")
        candidates = []
        if isinstance(data.get("relative"), str):
            candidates.append(path.resolve().parent / data["relative"])
        candidates.append(Path(data["path"]))
        found = next((c for c in candidates if c.is_file()), None)
        data_path = str((found or Path(data["path"])).resolve())
        if found is None:
            warns.append(f"data file {data['path']} not found; the saved result is shown, "
                         "but to run again open the data (File → Open data)")
        else:
            try:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    dataset = read_table(found, missing="test-wise")
            except DiscoveryError as err:
                warns.append(f"{err} — the saved result is shown without data")
            else:
                if data.get("sha256") and data["sha256"] != dataset.sha256:
                    stale = True
                    warns.append(f"{found} changed since the session was saved (its SHA-256 "
                                 "fingerprint differs); the saved result is marked stale — "
                                 "run again to use the current data")
    variables = (tuple(dataset.variables) if dataset is not None
                 else tuple(result.variables) if result is not None else ())
    unknown = sorted(set(included) - set(variables)) if variables else []
    if unknown and dataset is not None:
        warns.append(f"included variable(s) {unknown} are not in the data any more; left out")
    included = tuple(v for v in variables if v in set(included)) if variables else ()
    if variables:
        try:
            knowledge.check_variables(variables, source=f"{label}: knowledge")
        except KnowledgeError as err:
            if dataset is None:
                raise
            warns.append(f"{err} — those statements are dropped")
            knowledge = restrict_knowledge(knowledge, variables)
    result_key = None
    if result is not None:
        inputs = doc.get("result_inputs")
        if isinstance(inputs, dict):
            try:
                if not (isinstance(inputs.get("settings"), dict)
                        and isinstance(inputs.get("knowledge"), dict)
                        and isinstance(inputs.get("included"), list)
                        and all(isinstance(v, str) for v in inputs["included"])):
                    raise TypeError("'settings', 'knowledge' (tables) and 'included' (a list "
                                    "of names) are needed")
                result_key = (SearchSettings.from_dict(inputs["settings"]),
                              Knowledge.from_dict(inputs["knowledge"], source=label),
                              tuple(inputs["included"]))
            except (KeyError, TypeError, SettingsError, KnowledgeError) as err:
                fail(f"'result_inputs' is damaged ({err}); open an older copy or run again")
        else:
            result_key = (result.settings, result.knowledge, tuple(result.variables))
    selection = tuple(v for v in doc.get("selection") or () if isinstance(v, str)
                      and v in variables)[:2]
    roles = doc.get("controls") if isinstance(doc.get("controls"), dict) else {}
    treatment, outcome = (roles.get(k) if roles.get(k) in variables else None
                          for k in ("treatment", "outcome"))
    planned = tuple(v for v in roles.get("planned", ()) if isinstance(v, str)
                    and v in variables and v not in (treatment, outcome))
    from discovery.robustness import SupportResult, SweepResult
    sweep = SweepResult.from_dict(doc["sweep"], source=f"{label}: sweep") \
        if doc.get("sweep") is not None else None
    support = SupportResult.from_dict(doc["support"], source=f"{label}: support") \
        if doc.get("support") is not None else None
    return ({"data_path": data_path, "dataset": dataset, "included": included,
             "settings": settings, "knowledge": knowledge, "result": result,
             "positions": {k: v for k, v in positions.items() if k in variables},
             "overlay": bool(doc.get("overlay", True)), "selection": selection,
             "stale": stale, "result_key": result_key, "treatment": treatment,
             "outcome": outcome, "planned": planned, "sweep": sweep, "support": support,
             "session_path": doc.get("autosave_of")}, warns)
