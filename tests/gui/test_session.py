"""The window's session model, headless: events, runs, knowledge, undo, files, recovery.

These tests import no Qt: the model must work (and be scripted) without it.
"""

import json
import subprocess
import sys
import threading

import networkx as nx
import pytest

from discovery import discover
from discovery.data import read_table
from discovery.exceptions import DataValidationError, SettingsError
from discovery.settings import SearchSettings
from gui import Session
from gui._layout import arrange, force_layout, layered_layout
from gui._session import FORMAT, restrict_knowledge

from gui_data import ROOT, collider_frame


def _opened(path, **kw) -> Session:
    s = Session(**kw)
    assert s.open_data(path)
    return s


def _marks(result):
    return {(e.source, e.target, e.kind) for e in result.edges}


def test_session_model_imports_no_qt():
    code = ("import sys, gui, gui._session, gui._layout, gui._events, gui._notifications; "
            "print(any(m.startswith(('PySide6', 'shiboken6')) for m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         cwd=ROOT, check=True)
    assert out.stdout.strip() == "False"


# -- events -----------------------------------------------------------------------------------

def test_emitter_fires_only_on_real_change():
    s = Session()
    seen = []
    s.events.settings.connect(seen.append)
    s.settings = SearchSettings()  # equal to the default
    assert seen == []
    assert s.set_setting("alpha", 0.01)
    assert [x.alpha for x in seen] == [0.01]
    assert s.set_setting("alpha", 0.01)  # same value again
    assert len(seen) == 1


def test_update_batches_and_callbacks_see_the_whole_new_state():
    s = Session()
    observed = []
    s.events.settings.connect(lambda v: observed.append(("settings", s.overlay)))
    s.events.overlay.connect(lambda v: observed.append(("overlay", s.settings.alpha)))
    changed = s.update({"settings": SearchSettings(alpha=0.2), "overlay": False})
    assert set(changed) >= {"settings", "overlay"}
    # each field emitted once, and each callback already sees the other new value
    assert observed == [("settings", False), ("overlay", 0.2)]


def test_unknown_field_is_refused():
    with pytest.raises(AttributeError, match="no field 'colour'"):
        Session().update({"colour": "red"})


def test_dead_bound_method_listeners_are_dropped():
    s = Session()

    class View:
        def __init__(self):
            self.calls = 0

        def on(self, _):
            self.calls += 1

    v = View()
    s.events.overlay.connect(v.on)
    s.overlay = False
    assert v.calls == 1
    del v
    s.overlay = True  # no error, no call into a deleted view
    assert s.events.overlay.callbacks == []


# -- data and runs ----------------------------------------------------------------------------

def test_run_shows_exactly_what_the_engine_finds(collider_csv):
    s = _opened(collider_csv)
    assert s.included == ("a", "b", "c", "d", "e")
    assert s.run_inline()
    direct = discover(read_table(collider_csv), test="fisher-z", alpha=0.05)
    assert _marks(s.result) == _marks(direct)
    # the textbook collider a → c ← b, with c → d following (Spirtes, Glymour & Scheines
    # 2000, ch. 5; Meek 1995 rule 1)
    assert {("a", "c", "directed"), ("b", "c", "directed"), ("c", "d", "directed")} \
        <= _marks(s.result)
    assert s.status == "done" and not s.stale
    assert set(s.positions) == set(s.variables)


def test_bad_data_file_gives_the_engine_message_and_changes_nothing(tmp_path, collider_csv):
    s = _opened(collider_csv)
    before = (s.dataset, s.data_path)
    bad = tmp_path / "ragged.csv"
    bad.write_text("x,y,z\n1,2,3\n4,5\n", encoding="utf-8")
    errors = []
    s.notifications.posted.connect(errors.append)
    assert not s.open_data(bad)
    with pytest.raises(DataValidationError) as raised:
        read_table(bad)
    assert [n.message for n in errors] == [str(raised.value)]
    assert errors[0].level == "error" and "\n" not in errors[0].message
    assert (s.dataset, s.data_path) == before


def test_settings_out_of_range_are_refused_with_the_engine_message():
    s = Session()
    errors = []
    s.notifications.posted.connect(errors.append)
    assert not s.set_setting("alpha", 1.5)
    with pytest.raises(SettingsError) as raised:
        SearchSettings(alpha=1.5)
    assert errors[-1].message == str(raised.value)
    assert s.settings.alpha == 0.05


def test_forbid_then_rerun_removes_the_pair_and_reuses_the_cache(collider_csv):
    s = _opened(collider_csv)
    s.run_inline()
    first_tests = s.result.counts["tests"]
    assert s.result.edge("c", "d") is not None
    assert s.forbid("c", "d")
    assert s.stale
    s.run_inline()
    assert s.result.edge("c", "d") is None
    assert not s.stale
    # every test the second search needed was already known (the shared cache)
    assert s.result.counts["tests_computed"] == 0
    assert s.result.counts["tests_from_cache"] == s.result.counts["tests"] > 0
    assert first_tests > 0


def test_alpha_change_reruns_from_the_cache(collider_csv):
    s = _opened(collider_csv)
    s.run_inline()
    s.set_setting("alpha", 0.01)
    assert s.stale
    s.run_inline()
    assert s.result.settings.alpha == 0.01
    assert s.result.counts["tests_from_cache"] > 0


def test_lock_then_rerun_keeps_the_pair(collider_csv):
    s = _opened(collider_csv)
    s.run_inline()
    assert s.result.edge("a", "b") is None  # independent causes
    assert s.lock("a", "b")
    s.run_inline()
    edge = s.result.edge("a", "b")
    assert edge is not None and edge.locked


def test_contradictory_knowledge_is_refused_with_one_line(collider_csv):
    s = _opened(collider_csv)
    s.set_stages([["c"], ["a"]])
    errors = []
    s.notifications.posted.connect(errors.append)
    assert not s.lock_direction("a", "c")  # against the stage order
    assert errors and "stage order" in errors[0].message
    assert ("a", "c") not in s.knowledge.locked_directions


def test_left_out_variable_drops_its_knowledge_for_the_run(collider_csv):
    s = _opened(collider_csv)
    s.forbid("d", "e")
    s.set_included("e", False)
    assert s.run_inline()
    assert "e" not in s.result.variables
    assert s.result.knowledge.forbidden == ()
    assert restrict_knowledge(s.knowledge, ["a", "b"]).is_empty()


def test_stopped_run_leaves_no_result(latent_csv):
    s = _opened(latent_csv)
    job = s.start_run()
    progress = threading.Event()
    outcome = {}

    def work():
        try:
            outcome["result"] = job.run(lambda info: progress.set())
        except Exception as err:  # SearchCancelled expected
            outcome["error"] = err

    thread = threading.Thread(target=work)
    thread.start()
    assert progress.wait(60)
    assert s.stop_run()
    thread.join(60)
    assert not thread.is_alive()
    assert type(outcome.get("error")).__name__ == "SearchCancelled"
    s.run_stopped(job)
    assert s.status == "stopped" and s.result is None


def test_a_late_answer_from_an_older_run_is_ignored(collider_csv):
    s = _opened(collider_csv)
    old = s.start_run()
    result, seen = old.run()
    s.stop_run()
    s.run_stopped(old)
    new = s.start_run()
    assert not s.finish_run(old, result, seen)
    assert s.result is None and s.job is new


# -- knowledge, stages, undo ------------------------------------------------------------------

def test_undo_redo_knowledge_and_moves(collider_csv):
    s = _opened(collider_csv)
    s.forbid("a", "d")
    s.lock_direction("c", "d")
    s.move_nodes({"a": (500.0, 7.0)})
    assert s.history == ("Move node", None)
    assert s.undo() and s.positions["a"] != (500.0, 7.0)
    assert s.undo() and s.knowledge.locked_directions == ()
    assert s.knowledge.forbidden == (("a", "d"),)
    assert s.redo() and s.knowledge.locked_directions == (("c", "d"),)
    assert s.history[1] == "Move node"
    s.clear_pair("a", "d")  # a new edit clears the redo stack
    assert s.history == ("Clear knowledge on a — d", None)


def test_stages_lay_out_in_columns_by_stage(collider_csv):
    s = _opened(collider_csv)
    assert s.move_to_stage(["a", "b"], 0)
    assert s.move_to_stage(["c"], 1)
    assert s.move_to_stage(["d"], 2)
    assert s.knowledge.stages == (("a", "b"), ("c",), ("d",))
    x = {v: p[0] for v, p in s.positions.items()}
    assert max(x["a"], x["b"]) < x["c"] < x["d"]
    assert s.move_stage(2, 0)
    assert s.knowledge.stages[0] == ("d",)
    assert s.remove_stage(0)
    assert s.knowledge.stage_of("d") is None
    assert s.move_to_stage(["a"], None) and s.knowledge.stage_of("a") is None


def test_layouts_keep_nodes_apart_and_are_repeatable():
    g = nx.gnm_random_graph(100, 300, seed=1)
    names = [f"n{i}" for i in g]
    edges = [(f"n{a}", f"n{b}") for a, b in g.edges]
    pos = force_layout(names, edges)
    assert pos == force_layout(names, edges)
    from gui._layout import node_size
    close = [(a, b) for i, a in enumerate(names) for b in names[i + 1:]
             if abs(pos[a][0] - pos[b][0]) < node_size(a)[0] / 2 + node_size(b)[0] / 2 + 30
             and abs(pos[a][1] - pos[b][1]) < 34 + 20]
    assert close == []  # boxes do not overlap, with room between them
    staged = layered_layout(names[:10], edges, [names[:3], names[3:6]])
    assert max(staged[v][0] for v in names[:3]) < min(staged[v][0] for v in names[3:6])
    assert set(arrange(names[:5])) == set(names[:5])


# -- files ------------------------------------------------------------------------------------

def test_save_and_open_give_the_same_session(tmp_path, collider_csv):
    s = _opened(collider_csv)
    s.forbid("a", "e")
    s.set_setting("alpha", 0.02)
    s.set_setting("max_depth", 2)
    s.set_included("e", False)
    s.run_inline()
    s.move_nodes({"a": (12.5, -40.0)})
    s.select_pair("c", "d")
    s.overlay = False
    assert s.save_session(tmp_path / "work")
    path = tmp_path / "work.edgewise"
    doc = json.loads(path.read_text(encoding="utf-8"))
    assert doc["format"] == FORMAT and doc["version"] == 1
    assert doc["data"]["sha256"] == s.dataset.sha256
    assert not s.dirty

    t = Session()
    assert t.open_session(path)
    assert t.settings == s.settings and t.knowledge == s.knowledge
    assert t.included == s.included and t.overlay is False
    assert t.result.to_dict()["edges"] == s.result.to_dict()["edges"]
    assert t.positions.keys() == s.positions.keys()
    for name, xy in s.positions.items():
        assert t.positions[name] == pytest.approx(xy, abs=0.01)
    assert t.selection == ("c", "d") and not t.stale and not t.dirty


def test_session_finds_data_moved_with_it(tmp_path):
    folder = tmp_path / "study"
    folder.mkdir()
    collider_frame().to_csv(folder / "data.csv", index=False)
    s = _opened(folder / "data.csv")
    s.save_session(folder / "s.edgewise")
    moved = tmp_path / "moved"
    (folder).rename(moved)
    t = Session()
    assert t.open_session(moved / "s.edgewise")
    assert t.dataset is not None and t.data_path == str((moved / "data.csv").resolve())


def test_changed_data_is_a_warning_and_marks_the_result_stale(tmp_path):
    data = tmp_path / "d.csv"
    collider_frame().to_csv(data, index=False)
    s = _opened(data)
    s.run_inline()
    s.save_session(tmp_path / "s.edgewise")
    collider_frame(seed=9).to_csv(data, index=False)
    t = Session()
    notes = []
    t.notifications.posted.connect(notes.append)
    assert t.open_session(tmp_path / "s.edgewise")
    assert t.stale and t.result is not None
    assert [n.level for n in notes] == ["warning"] and "SHA-256" in notes[0].message


@pytest.mark.parametrize("content, expected", [
    ("{not json", "not valid JSON"),
    (json.dumps({"format": "edgewise-result", "version": 1}), "not an Edgewise session"),
    (json.dumps({"format": "edgewise-session", "version": 7}), "version 7 is not supported"),
    (json.dumps({"format": "edgewise-session", "version": 1, "settings": {}, "knowledge": {},
                 "included": [], "positions": {"a": ["x", 1]}}), "position of 'a'"),
    (json.dumps({"format": "edgewise-session", "version": 1, "settings": {"alpha": 3},
                 "knowledge": {}, "included": [], "positions": {}}), "'alpha' parameter"),
    (json.dumps({"format": "edgewise-session", "version": 1, "settings": {},
                 "knowledge": {"locked": [["a", "a"]]}, "included": [], "positions": {}}),
     "pairs two different variables"),
])
def test_bad_session_files_give_one_clear_line(tmp_path, collider_csv, content, expected):
    s = _opened(collider_csv)
    before = s.dataset
    path = tmp_path / "bad.edgewise"
    path.write_text(content, encoding="utf-8")
    errors = []
    s.notifications.posted.connect(errors.append)
    assert not s.open_session(path)
    assert len(errors) == 1 and expected in errors[0].message
    assert str(path) in errors[0].message and "\n" not in errors[0].message
    assert s.dataset is before  # nothing changed


def test_autosave_and_recovery(tmp_path, collider_csv):
    auto = tmp_path / "state" / "autosave.edgewise"
    s = _opened(collider_csv, autosave_path=auto)
    assert not s.autosave()  # nothing changed since opening
    s.forbid("a", "b")
    assert s.autosave() and auto.exists()
    assert not s.autosave()  # nothing new
    offer = Session.recovery_offer(auto)
    assert offer["data"] == str(collider_csv.resolve())
    t = Session(autosave_path=auto)
    assert t.recover()
    assert t.knowledge.forbidden == (("a", "b"),) and t.dirty
    t.discard_autosave()
    assert not auto.exists() and Session.recovery_offer(auto) is None


def test_a_failed_save_keeps_the_previous_session_file(tmp_path, collider_csv, monkeypatch):
    # saving goes through discovery.files.write_text_atomic: a write that fails half-way (a
    # full disk) leaves the previous file whole and no temporary file behind
    import errno
    from pathlib import Path
    s = _opened(collider_csv)
    assert s.save_session(tmp_path / "s.edgewise")
    before = (tmp_path / "s.edgewise").read_bytes()
    s.forbid("a", "b")
    real = Path.write_text

    def full_disk(self, text, *a, **k):
        real(self, text[:10], *a, **k)  # part of the text reached the disk, then no room
        raise OSError(errno.ENOSPC, "No space left on device")
    monkeypatch.setattr(Path, "write_text", full_disk)
    errors = []
    s.notifications.posted.connect(errors.append)
    assert not s.save_session(tmp_path / "s.edgewise")
    monkeypatch.undo()
    assert (tmp_path / "s.edgewise").read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["collider.csv", "s.edgewise"]
    assert len(errors) == 1 and "No space left on device" in errors[0].message
    assert s.dirty  # the edit is still unsaved


@pytest.mark.parametrize("content", ["[" * 5000 + "]" * 5000, '{"format": 1e999999}',
                                     '{"format": "edgewise-session", "data": [1]}',
                                     '{"format": "edgewise-session", "autosave_of": 5}'])
def test_a_damaged_autosave_is_offered_safely_or_not_at_all(tmp_path, content):
    path = tmp_path / "autosave.edgewise"
    path.write_text(content, encoding="utf-8")
    offer = Session.recovery_offer(path)
    assert offer is None or (offer["data"] is None and offer["session"] is None)
    assert Session.recovery_offer("/dev/zero") is None
