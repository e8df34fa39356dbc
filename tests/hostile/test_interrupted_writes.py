"""Writers killed mid-write: the previous file survives whole, at every point of the write.

A child process writes through :func:`discovery.files.atomic_write` in chunks and reports each
chunk; the test kills it (SIGKILL, which no handler can soften) after a chosen number of chunks.
Then the command line itself is killed at several moments of a run that rewrites its result.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
ENV = {**os.environ, "PYTHONPATH": str(ROOT)}

CHILD = r"""
import sys
from discovery.files import atomic_write
path = sys.argv[1]
with atomic_write(path) as tmp:
    with open(tmp, "w") as handle:
        for k in range(50):
            handle.write(("new line %d\n" % k) * 300)
            handle.flush()
            print("chunk", k, flush=True)
            sys.stdin.readline()          # wait for the test to let it go on
print("done", flush=True)
"""

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="SIGKILL is POSIX")


@pytest.mark.parametrize("kill_after", [0, 1, 7, 23, 49])
def test_a_writer_killed_after_any_chunk_leaves_the_old_file(tmp_path, kill_after):
    target = tmp_path / "result.json"
    target.write_text("the previous good result\n")
    child = subprocess.Popen([sys.executable, "-c", CHILD, str(target)], env=ENV,
                             stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    for k in range(kill_after + 1):
        assert child.stdout.readline().startswith(f"chunk {k}")
        if k < kill_after:
            child.stdin.write("\n")
            child.stdin.flush()
    child.send_signal(signal.SIGKILL)
    child.wait(timeout=30)
    assert target.read_text() == "the previous good result\n"
    leftovers = [p.name for p in tmp_path.iterdir() if p != target]
    assert all(name.startswith(".result.json.") for name in leftovers)


def test_a_writer_that_finishes_replaces_the_file(tmp_path):
    target = tmp_path / "result.json"
    target.write_text("old\n")
    child = subprocess.run([sys.executable, "-c", CHILD, str(target)], env=ENV,
                           input="\n" * 60, capture_output=True, text=True, timeout=60)
    assert child.returncode == 0, child.stderr
    assert target.read_text().count("new line 49") == 300
    assert [p.name for p in tmp_path.iterdir()] == ["result.json"]


def test_the_command_killed_at_any_moment_leaves_the_old_or_the_whole_new_result(tmp_path):
    example = ROOT / "example_sets" / "greenhouse" / "data.csv"
    out, figure = tmp_path / "r.json", tmp_path / "g.png"
    seen = set()
    for delay in (0.3, 0.9, 1.6, 2.6):
        out.write_text('{"old": true}\n')
        proc = subprocess.Popen([sys.executable, "-m", "discovery", "discover", str(example),
                                 "--out", str(out), "--figure", str(figure)],
                                env=ENV, cwd=tmp_path, stdout=subprocess.DEVNULL,
                                stderr=subprocess.DEVNULL)
        time.sleep(delay)
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=60)
        doc = json.loads(out.read_text())       # never truncated: always whole JSON
        if doc == {"old": True}:
            seen.add("old")
        else:
            assert doc["format"] == "edgewise-result"
            seen.add("new")
        if figure.exists():
            assert figure.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
            figure.unlink()
    assert "old" in seen  # at least one kill landed before the write
