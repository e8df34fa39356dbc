"""Faults in the worker processes of a ``--jobs`` run: an exception raised in a worker, or a
worker that dies, reaches the user as one line and a non-zero exit; no traceback, no output
left behind. The standard is the project's own promise (DEVELOPERS.md, "Errors are one line").

Each case runs the command in a fresh process (as a user does), with the fault planted in the
mixed test before the command starts; the process has no other threads, so its workers are
forked from it and carry the fault with them.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]

GOOD_CSV = "a,b,c\n" + "\n".join(f"{i % 7},{(i * 3) % 5 + 0.5 * (i % 7)},{(i * 11) % 13}"
                                 for i in range(80)) + "\n"

PLANT = r"""
import os, sys
import discovery.executor as executor
from discovery.cli import main
from discovery.independence._mixed import MixedLR

parent, original = os.getpid(), MixedLR._batch

def batch(self, triples):
    if os.getpid() != parent:
        {fault}
    return original(self, triples)

MixedLR._batch = batch
# the mixed test is fast: spread even small batches, also on a busy machine
executor.MIN_SECONDS, executor.SPREAD_CORES = 0.0, 0.0
sys.exit(main(["discover", "d.csv", "--test", "mixed", "--jobs", "2", "--quiet",
               "--out", "r.json"]))
"""

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="workers are forked (POSIX)")


@pytest.mark.parametrize("fault, status, pattern", [
    ('raise RuntimeError("planted fault in a worker")', 2,
     r"error: work in a worker process failed: RuntimeError: planted fault in a worker; "
     r"nothing was kept"),
    ("os._exit(3)  # as if the system killed it (out of memory)", 2,
     r"error: a worker process was lost .* exited with status 3; nothing was kept"),
], ids=["exception", "worker-dies"])
def test_a_fault_in_a_worker_process_is_one_line(fault, status, pattern, tmp_path):
    import re
    (tmp_path / "d.csv").write_text(GOOD_CSV, encoding="utf-8")
    proc = subprocess.run([sys.executable, "-c", PLANT.replace("{fault}", fault)],
                          cwd=tmp_path, capture_output=True, text=True, timeout=300,
                          env={**os.environ, "PYTHONPATH": str(ROOT)})
    lines = [line for line in proc.stderr.splitlines() if line.strip()]
    assert proc.returncode == status, proc.stderr
    assert len(lines) == 1 and "Traceback" not in proc.stderr, proc.stderr
    assert re.search(pattern, lines[0]), lines[0]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["d.csv"]  # no output, no temp file
