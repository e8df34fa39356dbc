"""The window's corpus of bad files: each is opened through the window's own controls (File →
Open…, Open session…, Load knowledge…, with the file dialog answered by the test) and must
give one dialog with one clear line that names window controls, not command-line options;
no traceback on stderr; the workspace open before is kept and still runs; the input files
are unchanged (hash) and nothing is written beside them.

The data and knowledge cases are the command line's corpus (``tests/hostile/test_corpus.py``),
reused through its helpers; the session cases are the window's own file format, broken in
each way a file can be: not a regular file, too large, nested too deep, an over-long number,
a field of the wrong type, a damaged embedded result. The standard checked is the project's
own promise (README, "Bad input"; DEVELOPERS.md, "Errors are one line").
"""

from __future__ import annotations

import hashlib
import importlib.util
import json
import os
import re
from pathlib import Path

import pytest

pytest.importorskip("pytestqt")

import gui._qt  # noqa: E402,F401  (applies the binding guard before Qt work)
from PySide6.QtCore import QSettings  # noqa: E402
from PySide6.QtWidgets import QFileDialog, QMessageBox  # noqa: E402

from discovery.files import MAX_DOCUMENT_BYTES  # noqa: E402
from gui._qt.window import MainWindow  # noqa: E402
from gui._session import Session  # noqa: E402
from gui_data import collider_frame, run_and_wait  # noqa: E402

_spec = importlib.util.spec_from_file_location(
    "_hostile_corpus", Path(__file__).resolve().parents[1] / "hostile" / "test_corpus.py")
corpus = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(corpus)

_CORPUS = {c[0]: c for c in corpus.CASES}


# -- the cases --------------------------------------------------------------------------------

def from_corpus(name, how, target=None):
    """A case of the command line's corpus, opened in the window through ``how``."""
    _, setup, argv, pattern = _CORPUS[name]
    if target is None:  # the file the command line was given
        target = argv[argv.index("--knowledge") + 1] if "--knowledge" in argv else argv[1]
    return (name, setup, how, target, pattern)


def _good_session_doc() -> dict:
    """A valid session document (saved by a real session) to break field by field."""
    return _GOOD_DOC


def session_with(change, name="s.edgewise"):
    """A session file: the good document with ``change(doc)`` applied."""
    def make(tmp):
        doc = json.loads(json.dumps(_good_session_doc()))
        change(doc)
        (tmp / name).write_text(json.dumps(doc), encoding="utf-8")
    return make


def result_with(change, name="r.json"):
    """A result file: the good session's result with ``change(doc)`` applied."""
    def make(tmp):
        doc = json.loads(json.dumps(_good_session_doc()["result"]))
        change(doc)
        (tmp / name).write_text(json.dumps(doc), encoding="utf-8")
    return make


def setter(*path_and_value):
    *path, value = path_and_value

    def change(doc):
        node = doc
        for key in path[:-1]:
            node = node[key]
        node[path[-1]] = value
    return change


def text(content, name="s.edgewise"):
    return corpus.csv(content, name)


def sparse(size, name="s.edgewise"):
    def make(tmp):
        with open(tmp / name, "wb") as handle:
            handle.truncate(size)  # a sparse file: the size without the disk space
    return make


def link(to, name="s.edgewise"):
    def make(tmp):
        os.symlink(to, tmp / name)
    return make


def loop(tmp):
    os.symlink(tmp / "b.edgewise", tmp / "s.edgewise")
    os.symlink(tmp / "s.edgewise", tmp / "b.edgewise")


DATA, DATA_RUN, KNOWLEDGE, SESSION, RESULT = ("data", "data then run", "knowledge",
                                             "session", "result")
S, R = "s.edgewise", "r.json"

CASES = [
    # -- data files (File → Open…) ------------------------------------------------------------
    *(from_corpus(n, DATA) for n in (
        "empty-file", "header-only", "binary-garbage", "nul-bytes",
        "dev-zero", "folder-as-data", "symlink-loop", "missing-file", "unknown-extension",
        "duplicate-columns", "ragged-rows", "broken-quoting",
        "parquet-list-column", "parquet-dict-column", "parquet-garbage")),
    # tables that open (the Variables panel shows why each column is left out) but cannot
    # be searched: Run says so
    ("one-column", corpus.csv("a\n1\n2\n3\n"), DATA_RUN, "d.csv",
     r"d\.csv: 1 usable column.*at least 2 — open another table"),
    ("all-missing", corpus.csv("a,b,c\n,,\n,,\n,,\n"), DATA_RUN, "d.csv",
     r"d\.csv: 0 usable column.*at least 2"),
    # -- knowledge files (File → Load knowledge…) ---------------------------------------------
    *(from_corpus(n, KNOWLEDGE) for n in (
        "knowledge-invalid-toml", "knowledge-deep-json", "knowledge-deep-toml",
        "knowledge-huge-int-json", "knowledge-huge-int-toml", "knowledge-dotted-keys",
        "knowledge-stages-as-tables", "knowledge-unknown-variable", "knowledge-wrong-format",
        "knowledge-version-2", "knowledge-triple", "knowledge-self-pair",
        "knowledge-locked-and-forbidden", "knowledge-cycle", "knowledge-wrong-type",
        "knowledge-top-level-list", "knowledge-not-utf8", "knowledge-dev-zero",
        "knowledge-folder", "knowledge-unknown-field")),
    # -- session files (File → Open session…) -------------------------------------------------
    ("session-empty", text(""), SESSION, S, r"s\.edgewise: not valid JSON"),
    ("session-not-json", text("{not json"), SESSION, S, r"s\.edgewise: not valid JSON"),
    ("session-is-a-table", text(corpus.GOOD_CSV), SESSION, S, r"s\.edgewise: not valid JSON"),
    ("session-top-level-list", text("[1, 2]"), SESSION, S, r"not an Edgewise session"),
    ("session-result-file", text(json.dumps({"format": "edgewise-result", "version": 1})),
     SESSION, S, r"not an Edgewise session"),
    ("session-version-7", session_with(setter("version", 7)), SESSION, S,
     r"version 7 is not supported"),
    ("session-deep-nesting", text('{"format": "edgewise-session", "x": ' + "[" * 5000
                                  + "]" * 5000 + "}"), SESSION, S, r"s\.edgewise: nested"),
    ("session-long-number", text('{"format": "edgewise-session", "version": ' + "9" * 5000
                                 + "}"), SESSION, S,
     r"s\.edgewise: .*digits"),
    ("session-huge-file", sparse(MAX_DOCUMENT_BYTES + 1), SESSION, S,
     r"s\.edgewise: .*MiB is larger than a session file"),
    ("session-device", link("/dev/zero"), SESSION, S, r"s\.edgewise: is not a regular file"),
    ("session-link-loop", loop, SESSION, S, r"s\.edgewise: a loop of symbolic links"),
    ("session-folder", lambda t: (t / S).mkdir(), SESSION, S, r"s\.edgewise: is a folder"),
    ("session-missing", None, SESSION, S, r"s\.edgewise: session file not found"),
    ("session-not-utf8", corpus.raw(b'{"format": "\xff\xfe"}', S), SESSION, S,
     r"s\.edgewise: not UTF-8"),
    ("session-settings-list", session_with(setter("settings", [1, 2])), SESSION, S,
     r"'settings' is missing or not a table"),
    ("session-settings-alpha-text", session_with(setter("settings", "alpha", "high")),
     SESSION, S, r"alpha"),
    ("session-included-table", session_with(setter("included", {"a": 1})), SESSION, S,
     r"'included' is missing or not a list"),
    ("session-included-numbers", session_with(setter("included", [1, 2])), SESSION, S,
     r"'included' must be a list of variable names"),
    ("session-positions-list", session_with(setter("positions", [[0, 0]])), SESSION, S,
     r"'positions' is missing or not a table"),
    ("session-position-text", session_with(setter("positions", "a", ["x", 1])), SESSION, S,
     r"position of 'a'"),
    ("session-position-far", session_with(setter("positions", "a", [1e300, 0])), SESSION, S,
     r"position of 'a'"),
    ("session-overlay-text", session_with(setter("overlay", "yes")), SESSION, S,
     r"'overlay' must be true or false"),
    ("session-selection-number", session_with(setter("selection", 5)), SESSION, S,
     r"'selection' must be a list"),
    ("session-autosave-of-number", session_with(setter("autosave_of", 12)), SESSION, S,
     r"'autosave_of' must be a path"),
    ("session-data-list", session_with(setter("data", ["d.csv"])), SESSION, S,
     r"'data' must be a table"),
    ("session-data-path-nul", session_with(setter("data", "path", "d\0.csv")), SESSION, S,
     r"'data\.path' must be a path"),
    ("session-data-sha-number", session_with(setter("data", "sha256", 5)), SESSION, S,
     r"'data\.sha256' must be"),
    ("session-knowledge-triple", session_with(setter("knowledge", "locked", [["a", "b", "c"]])),
     SESSION, S, r"pairs"),
    ("session-knowledge-unknown-variable",
     session_with(lambda d: d.update(data=None, knowledge={"forbidden": [["a", "zzz"]]})),
     SESSION, S, r"zzz"),
    ("session-result-inputs-list", session_with(setter("result_inputs", [1])), SESSION, S,
     r"'result_inputs' must be a table"),
    ("session-result-inputs-damaged",
     session_with(setter("result_inputs", "included", "abc")), SESSION, S,
     r"'result_inputs' is damaged"),
    # -- an embedded result, damaged (the result file's own checks) ---------------------------
    ("result-wrong-format", session_with(setter("result", "format", "something")), SESSION, S,
     r"'format' is not 'edgewise-result'"),
    ("result-version-9", session_with(setter("result", "version", 9)), SESSION, S,
     r"version 9 is not supported"),
    ("result-edges-table", session_with(setter("result", "edges", {"a": "b"})), SESSION, S,
     r"s\.edgewise: malformed content"),
    ("result-edge-unknown-variable",
     session_with(setter("result", "edges", 0, "from", "zzz")), SESSION, S,
     r"s\.edgewise: .*zzz"),
    ("result-evidence-unknown-variable",
     session_with(setter("result", "evidence", "tests", 0, "x", "zzz")), SESSION, S,
     r"s\.edgewise: 'evidence\.tests' rows must name known variables"),
    ("result-variables-number", session_with(setter("result", "variables", 3)), SESSION, S,
     r"s\.edgewise: .*variables"),
    ("result-missing-edges", session_with(lambda d: d["result"].pop("edges")), SESSION, S,
     r"s\.edgewise: .*edges"),
    # -- result files (File → Open result…) ---------------------------------------------------
    ("result-file-empty", text("", R), RESULT, R, r"r\.json: not valid JSON"),
    ("result-file-is-a-table", text(corpus.GOOD_CSV, R), RESULT, R, r"r\.json: not valid JSON"),
    ("result-file-deep", text("[" * 5000 + "]" * 5000, R), RESULT, R, r"r\.json: nested"),
    ("result-file-long-number", result_with(setter("seed", 10 ** 100)), RESULT, R,
     r"r\.json: .*digits"),
    ("result-file-huge", sparse(MAX_DOCUMENT_BYTES + 1, R), RESULT, R,
     r"r\.json: .*MiB is larger than a result file"),
    ("result-file-device", link("/dev/zero", R), RESULT, R, r"r\.json: is not a regular file"),
    ("result-file-folder", lambda t: (t / R).mkdir(), RESULT, R, r"r\.json: is a folder"),
    ("result-file-missing", None, RESULT, R, r"r\.json: result file not found"),
    ("result-file-is-a-session", session_with(lambda d: None, R), RESULT, R,
     r"r\.json: 'format' is not 'edgewise-result'"),
    ("result-file-edge-unknown-variable", result_with(setter("edges", 0, "to", "zzz")),
     RESULT, R, r"r\.json: .*zzz"),
    ("result-file-evidence-as-text", result_with(setter("evidence", "tests", "many")),
     RESULT, R, r"r\.json: 'evidence\.tests' must be a list"),
    ("result-file-seed-text", result_with(setter("seed", "seven")), RESULT, R,
     r"r\.json: 'seed' must be a whole number"),
    ("result-file-knowledge-cycle",
     result_with(setter("knowledge", "locked_directions", [["a", "b"], ["b", "a"]])),
     RESULT, R, r"r\.json: .*(cycle|both)"),
]

_GOOD_DOC: dict = {}


@pytest.fixture(scope="module", autouse=True)
def good_session_doc(tmp_path_factory):
    """Save a real session once (data, knowledge, a result) as the document to break."""
    folder = tmp_path_factory.mktemp("good_session")
    collider_frame(300).rename(columns=str).to_csv(folder / "d.csv", index=False)
    s = Session()
    assert s.open_data(folder / "d.csv")
    s.forbid("a", "e")
    assert s.run_inline()
    assert s.save_session(folder / "good.edgewise")
    _GOOD_DOC.clear()
    _GOOD_DOC.update(json.loads((folder / "good.edgewise").read_text(encoding="utf-8")))
    assert _GOOD_DOC["result"]["evidence"]["tests"] and _GOOD_DOC["result"]["edges"]


def _snapshot(folder: Path) -> dict:
    """Every entry under ``folder`` with its content hash (size and times for the sparse
    giant, which is not read)."""
    out = {}
    for path in sorted(folder.rglob("*")):
        key = str(path.relative_to(folder))
        if path.is_symlink() or not path.is_file():
            out[key] = None
        elif path.stat().st_size > 2**24:
            info = path.stat()
            out[key] = (info.st_size, info.st_mtime_ns, info.st_ino)
        else:
            out[key] = hashlib.sha256(path.read_bytes()).hexdigest()
    return out


@pytest.fixture
def window(window):
    window.resize(1100, 750)  # a smaller window than the other files' (the default size)
    return window


def answer_file_dialog(monkeypatch, path):
    monkeypatch.setattr(QFileDialog, "getOpenFileName",
                        staticmethod(lambda *a, **k: (str(path), "")))


_ACTIONS = {DATA: ("act_open", "Open data"), SESSION: ("act_open_session", "Open session"),
            KNOWLEDGE: ("act_load_knowledge", "Load knowledge"), DATA_RUN: ("act_open", "Run"),
            RESULT: ("act_open_result", "Open result")}
# a command-line option left in a message (the window names its controls instead; an option
# the window has no control for is said to be the command line's)
_OPTION = re.compile(r"(?<!option )--[a-z]")


@pytest.mark.parametrize("name, setup, how, target, pattern", CASES,
                         ids=[c[0] for c in CASES])
def test_a_bad_file_gets_one_dialog_and_the_window_carries_on(
        name, setup, how, target, pattern, qtbot, window, dialogs, tmp_path, monkeypatch,
        capfd):
    good = tmp_path / "good" / "ok.csv"
    good.parent.mkdir()
    good.write_text(corpus.GOOD_CSV, encoding="utf-8")
    folder = tmp_path / "in"
    folder.mkdir()
    monkeypatch.chdir(folder)
    if setup is not None:
        setup(folder)
    before = _snapshot(folder)
    s = window.session
    assert window.open_path(good)  # the workspace open before the bad file
    run_and_wait(qtbot, window)
    kept = (s.data_path, s.result, s.knowledge, s.settings)
    capfd.readouterr()

    action, title = _ACTIONS[how]
    answer_file_dialog(monkeypatch, target if os.path.isabs(target) else folder / target)
    getattr(window, action).trigger()
    if how == DATA_RUN:  # the table opens; Run refuses it
        assert not dialogs and s.data_path != kept[0]
        window.act_run.trigger()
    qtbot.waitUntil(lambda: len(dialogs) > 0, timeout=5_000)
    qtbot.wait(50)  # a second dialog, if one were queued, would show now

    assert len(dialogs) == 1, dialogs
    shown_title, message = dialogs[0]
    assert shown_title == title
    assert "\n" not in message and message.strip() == message
    assert re.search(pattern, message), message
    assert not _OPTION.search(message), message
    assert "unexpected error" not in message and "Traceback" not in message
    assert "Traceback" not in capfd.readouterr().err
    # the workspace is kept as it was, and still works
    if how == DATA_RUN:
        assert s.result is None and s.status == "idle"
        assert window.open_path(good)
    else:
        assert (s.data_path, s.result, s.knowledge, s.settings) == kept
        assert s.status == "done"
    run_and_wait(qtbot, window)
    assert s.status == "done" and s.result is not None and s.result is not kept[1]
    assert len(dialogs) == 1
    # input files unchanged, nothing written beside them (not even a temporary file)
    assert _snapshot(folder) == before


def test_a_good_result_file_opens_and_shows_its_diagram(qtbot, window, dialogs, tmp_path,
                                                        monkeypatch):
    (tmp_path / "r.json").write_text(json.dumps(_good_session_doc()["result"]),
                                     encoding="utf-8")
    answer_file_dialog(monkeypatch, tmp_path / "r.json")
    window.act_open_result.trigger()
    s = window.session
    assert s.result is not None and s.dataset is None and not s.stale and not dialogs
    assert {e.pair for e in s.result.edges} == set(window.canvas.edges)
    assert s.knowledge.forbidden == (("a", "e"),)
    assert window.windowTitle().startswith("r.json (a result, no data)")
    window.act_run.trigger()  # no data: Run says what to open
    qtbot.waitUntil(lambda: len(dialogs) == 1, timeout=5_000)
    assert dialogs[0][0] == "Run" and "File → Open" in dialogs[0][1]


def test_the_window_corpus_has_at_least_thirty_kinds():
    # the hardening work asks for at least 30 kinds of bad file opened in the window
    assert len({c[0] for c in CASES}) >= 30
