"""The command line on ordinary messy tables: number formats, exclusions, knowledge about
unselected columns, progress only on a terminal, and one pair's evidence (`explain`).

References: pandas.read_csv (with the true separator / decimal mark) reads the same bytes as
the reference for what the command must see; the d-separation facts of the chain used are
common practice, no source (a -> b -> c: a and c independent given b).
"""

from __future__ import annotations

import io
import json

import numpy as np
import pandas as pd
import pytest

from discovery.cli import _Progress, main


def chain(n=400, seed=5):
    rng = np.random.default_rng(seed)
    a = rng.normal(size=n)
    b = a + rng.normal(size=n)
    c = b + rng.normal(size=n)
    return pd.DataFrame({"a": a, "b": b, "c": c, "d": rng.normal(size=n)})


def run(capsys, *args):
    code = main([str(a) for a in args])
    out, err = capsys.readouterr()
    return code, out, err


def test_european_csv_with_options(tmp_path, capsys):
    frame = chain()
    path = tmp_path / "europe.csv"
    frame.to_csv(path, sep=";", decimal=",", index=False)
    code, _, err = run(capsys, "discover", path)
    assert code == 2 and "--decimal ," in err and len(err.strip().splitlines()) == 1
    out_json = tmp_path / "r.json"
    code, out, err = run(capsys, "discover", path, "--decimal", ",", "--out", out_json)
    assert code == 0, err
    doc = json.loads(out_json.read_text())
    assert doc["variables"] == ["a", "b", "c", "d"]
    # the chain's structure: a - b - c, d alone (pandas reads the same bytes as the reference)
    reference = pd.read_csv(path, sep=";", decimal=",")
    assert np.allclose(reference["a"], frame["a"])
    pairs = {frozenset((e["from"], e["to"])) for e in doc["edges"]}
    assert pairs == {frozenset("ab"), frozenset("bc")}
    assert "Isolated (no edge): d" in out


def test_sep_thousands_and_na_values(tmp_path, capsys):
    frame = chain(n=300)
    frame["a"] = (frame["a"] * 1000).round()
    text = frame.to_csv(sep="|", index=False)
    text = text.replace("\n", "\n", 1)
    lines = text.splitlines()
    lines[5] = "-999|" + lines[5].split("|", 1)[1]
    path = tmp_path / "t.txt"
    path.write_text("\n".join(lines) + "\n")
    code, out, err = run(capsys, "discover", path, "--sep", "|", "--na-values", "-999",
                         "--missing", "test-wise", "--out", tmp_path / "r.json")
    assert code == 0, err
    doc = json.loads((tmp_path / "r.json").read_text())
    assert doc["data"]["rows"] == 300


def test_exclude_and_include(tmp_path, capsys):
    frame = chain(n=200)
    frame.insert(0, "visit", pd.date_range("2024-01-01", periods=200).strftime("%Y-%m-%d"))
    path = tmp_path / "t.csv"
    frame.to_csv(path, index=False)
    code, out, err = run(capsys, "discover", path, "--exclude", "d", "--out", tmp_path / "r.json")
    assert code == 0, err
    doc = json.loads((tmp_path / "r.json").read_text())
    assert doc["variables"] == ["a", "b", "c"]
    assert doc["data"]["excluded"] == {"visit": "date/time", "d": "excluded on request"}
    assert "--include visit" in out
    code, _, err = run(capsys, "discover", path, "--include", "visit")
    assert code == 2 and "column 'visit' holds text" in err  # kept, and Fisher's z says why
    # kept on request under 'auto': its tests return no p-value, so its pairs are untestable
    # (kept and marked), never read as dependent evidence
    code, out, err = run(capsys, "discover", path, "--include", "visit", "--test", "auto",
                         "--max-depth", "0", "--out", tmp_path / "g.json")
    assert code == 0, err
    doc = json.loads((tmp_path / "g.json").read_text())
    visit = [e for e in doc["edges"] if "visit" in (e["from"], e["to"])]
    assert visit and all(e["untestable"] for e in visit)
    assert "untestable" in out
    code, _, err = run(capsys, "discover", path, "--exclude", "nope")
    assert code == 2 and "unknown column 'nope' in 'exclude'" in err


def test_knowledge_about_an_unselected_column_is_dropped_with_a_note(tmp_path, capsys):
    path = tmp_path / "t.csv"
    chain().to_csv(path, index=False)
    knowledge = tmp_path / "k.toml"
    knowledge.write_text('format = "edgewise-knowledge"\nversion = 1\n'
                         'locked = [["c", "d"]]\nforbidden = [["a", "c"]]\n'
                         'stages = [["a"], ["b", "d"], ["c"]]\n')
    code, out, err = run(capsys, "discover", path, "--exclude", "d", "--knowledge", knowledge,
                         "--out", tmp_path / "r.json")
    assert code == 0, err
    assert "knowledge about 'd'" in out and "dropped" in out
    doc = json.loads((tmp_path / "r.json").read_text())
    assert doc["knowledge"]["locked"] == [] and doc["knowledge"]["forbidden"] == [["a", "c"]]
    # a name that is not in the data at all stays an error
    knowledge.write_text('format = "edgewise-knowledge"\nversion = 1\nlocked = [["c", "zz"]]\n')
    code, _, err = run(capsys, "discover", path, "--knowledge", knowledge)
    assert code == 2 and "unknown variable(s) ['zz']" in err


def test_progress_only_on_a_terminal(monkeypatch):
    event = {"phase": "skeleton", "level": 1, "done": 5, "planned": 10}
    for tty, expected in ((False, ""), (True, "skeleton level 1: 5 of 10 tests")):
        stream = io.StringIO()
        stream.isatty = lambda tty=tty: tty
        monkeypatch.setattr("sys.stderr", stream)
        progress = _Progress(delay=0)
        progress(event)
        progress.close()
        assert expected in stream.getvalue()
        assert ("\r" in stream.getvalue()) == tty
    stream = io.StringIO()
    stream.isatty = lambda: True
    monkeypatch.setattr("sys.stderr", stream)
    quiet = _Progress(delay=0, enabled=False)  # --quiet
    quiet(event)
    assert stream.getvalue() == ""


def test_quiet_prints_nothing_and_log_gets_no_carriage_return(tmp_path, capsys):
    path = tmp_path / "t.csv"
    chain().to_csv(path, index=False)
    code, out, err = run(capsys, "discover", path, "--quiet")
    assert code == 0 and out == "" and err == ""
    code, out, err = run(capsys, "discover", path)
    assert "\r" not in err and "\r" not in out


def test_explain_command_and_option(tmp_path, capsys):
    path = tmp_path / "t.csv"
    chain().to_csv(path, index=False)
    result = tmp_path / "r.json"
    code, out, err = run(capsys, "discover", path, "--out", result, "--explain", "a,c")
    assert code == 0, err
    assert "Pair a, c: not adjacent" in out and "removed: independent given {b}" in out
    code, out, err = run(capsys, "explain", result, "a", "b")
    assert code == 0, err
    assert out.startswith("Pair a, b: edge a — b") and "test given {}: p = " in out
    assert "Caution" in out
    code, _, err = run(capsys, "explain", result, "a", "bb")
    assert code == 2 and "did you mean 'b'" in err and len(err.strip().splitlines()) == 1
    code, _, err = run(capsys, "discover", path, "--explain", "a")
    assert code == 2 and "two variables separated by a comma" in err
    code, _, err = run(capsys, "explain", tmp_path / "none.json", "a", "b")
    assert code == 2 and "file not found" in err


def test_every_command_has_help_with_an_example(capsys):
    with pytest.raises(SystemExit):
        main(["explain", "--help"])
    assert "example:" in capsys.readouterr().out
