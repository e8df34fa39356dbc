"""The edgewise command: the main job end to end, and one clear line for every bad input."""

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from discovery.cli import main

ROOT = Path(__file__).resolve().parent.parent
EXAMPLE = ROOT / "example_sets" / "greenhouse"


def run(*args):
    """Run the command in a subprocess, as a user would."""
    return subprocess.run([sys.executable, "-m", "discovery", *map(str, args)],
                          capture_output=True, text=True, cwd=ROOT)


def test_discover_on_the_bundled_example_writes_every_output(tmp_path):
    out = tmp_path / "out"
    proc = run("discover", EXAMPLE / "data.csv", "--knowledge", EXAMPLE / "knowledge.toml",
               "--out", out / "r.json",
               "--dot", out / "g.dot", "--graphml", out / "g.graphml",
               "--figure", out / "g.png")
    assert proc.returncode == 0, proc.stderr
    assert "12 edges: 12 directed, 0 undirected, 0 contested" in proc.stdout
    assert "Caution" in proc.stdout
    doc = json.loads((out / "r.json").read_text())
    truth = pd.read_csv(EXAMPLE / "truth.csv")
    found = {(e["from"], e["to"]) for e in doc["edges"] if e["kind"] == "directed"}
    # the invented ground truth is recovered exactly (see example_sets/greenhouse/README.md)
    assert found == set(zip(truth["from"], truth["to"]))
    assert (out / "g.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert "digraph" in (out / "g.dot").read_text()
    assert "<graphml" in (out / "g.graphml").read_text()


def test_simulate_then_discover(tmp_path):
    proc = run("simulate", "--nodes", 8, "--degree", 2, "--rows", 500, "--seed", 3,
               "--out", tmp_path / "sim.csv", "--truth", tmp_path / "truth.csv")
    assert proc.returncode == 0, proc.stderr
    frame = pd.read_csv(tmp_path / "sim.csv")
    assert frame.shape == (500, 8)
    assert list(pd.read_csv(tmp_path / "truth.csv").columns) == ["from", "to"]
    assert main(["discover", str(tmp_path / "sim.csv"), "--quiet"]) == 0


def _bad_inputs(tmp_path):
    empty = tmp_path / "empty.csv"
    empty.write_bytes(b"")
    header = tmp_path / "header.csv"
    header.write_text("a,b,c\n")
    dup = tmp_path / "dup.csv"
    dup.write_text("a,b,a\n1,2,3\n4,5,6\n")
    text = tmp_path / "text.csv"
    text.write_text("a,b,c\n" + "".join(f"{i * i % 17},{i % 3},x{i % 4}\n" for i in range(20)))
    inf = tmp_path / "inf.csv"
    rows = "".join(f"{i},{(i * 7) % 5},{'inf' if i == 3 else i * 0.5}\n" for i in range(20))
    inf.write_text("a,b,c\n" + rows)
    rng = np.random.default_rng(0)
    a, b = rng.normal(size=(2, 50))
    collinear = tmp_path / "collinear.csv"
    pd.DataFrame({"a": a, "b": b, "c": a + 2 * b}).to_csv(collinear, index=False)
    few = tmp_path / "few.csv"
    pd.DataFrame(rng.normal(size=(6, 4)), columns=list("abcd")).to_csv(few, index=False)
    good = tmp_path / "good.csv"
    pd.DataFrame(rng.normal(size=(50, 3)), columns=list("abc")).to_csv(good, index=False)
    bad_k = tmp_path / "k.toml"
    bad_k.write_text('forbidden = [["a", "zz"]]\n')
    return [
        ([empty], "empty"),
        ([header], "no data rows"),
        ([dup], "'a'"),
        ([text], "column 'c' holds text"),
        ([inf], "infinite"),
        ([collinear], "perfectly collinear"),
        ([few, "--max-depth", "3"], "max-depth"),
        ([tmp_path / "absent.csv"], "not found"),
        ([good, "--alpha", "2"], "'alpha' parameter"),
        ([good, "--knowledge", bad_k], "unknown variable"),
        ([good, "--columns", "a,nope"], "nope"),
        ([good, "--figure", tmp_path / "g.gif"], "must end in"),
        ([good, "--out", good.with_suffix(".json"), "--knowledge", good], "knowledge"),
    ]


def test_bad_input_gets_one_clear_line_and_leaves_files_alone(tmp_path, capsys):
    for args, expected in _bad_inputs(tmp_path):
        files = {p: p.read_bytes() for p in tmp_path.iterdir() if p.is_file()}
        code = main(["discover", *map(str, args)])
        err = capsys.readouterr().err
        assert code == 2, (args, err)
        lines = err.strip().splitlines()
        assert len(lines) == 1 and "Traceback" not in err, (args, err)
        assert expected in lines[0], (args, lines[0])
        assert lines[0].startswith("edgewise discover: error:")
        for p, content in files.items():
            assert p.read_bytes() == content, f"{p} changed"


def test_output_may_not_overwrite_the_input(tmp_path, capsys):
    data = tmp_path / "d.csv"
    pd.DataFrame(np.random.default_rng(1).normal(size=(40, 3)), columns=list("abc")).to_csv(
        data, index=False)
    knowledge = tmp_path / "k.json"
    knowledge.write_text('{"forbidden": [["a", "b"]]}')
    before = knowledge.read_bytes()
    assert main(["discover", str(data), "--knowledge", str(knowledge),
                 "--out", str(knowledge)]) == 2
    assert "would overwrite an input file" in capsys.readouterr().err
    assert knowledge.read_bytes() == before


def test_every_command_has_help_with_an_example(capsys):
    for command in ("discover", "simulate", "bench", "gui"):
        with pytest.raises(SystemExit) as done:
            main([command, "--help"])
        assert done.value.code == 0 and "example:" in capsys.readouterr().out, command


def test_simulate_rejects_a_cyclic_diagram(tmp_path):
    edges = tmp_path / "cycle.csv"
    edges.write_text("from,to\na,b\nb,c\nc,a\n")
    proc = run("simulate", "--diagram", edges, "--out", tmp_path / "x.csv")
    assert proc.returncode == 2 and "cycle" in proc.stderr.lower()
    assert len(proc.stderr.strip().splitlines()) == 1
