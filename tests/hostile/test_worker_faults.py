"""Faults in the worker processes of a ``--jobs`` run: an exception raised in a worker, or a
worker that dies, reaches the user as one line and a non-zero exit; no traceback, no output
left behind. The standard is the project's own promise (DEVELOPERS.md, "Errors are one line").
"""

from __future__ import annotations

import multiprocessing
import os

import pytest

from discovery.cli import main
from discovery.independence._mixed import MixedLR

GOOD_CSV = "a,b,c\n" + "\n".join(f"{i % 7},{(i * 3) % 5 + 0.5 * (i % 7)},{(i * 11) % 13}"
                                 for i in range(80)) + "\n"

pytestmark = pytest.mark.skipif(multiprocessing.get_start_method() != "fork",
                                reason="the fault is planted in the parent and inherited by "
                                       "forked workers")


def _raise_in_a_worker(parent):
    def batch(self, triples):
        if os.getpid() != parent:
            raise RuntimeError("planted fault in a worker")
        return original(self, triples)
    original = MixedLR._batch
    return batch


def _die_in_a_worker(parent):
    def batch(self, triples):
        if os.getpid() != parent:
            os._exit(3)  # as if the system killed it (out of memory)
        return original(self, triples)
    original = MixedLR._batch
    return batch


@pytest.mark.parametrize("plant, status, pattern", [
    (_raise_in_a_worker, 2, r"error: work in a worker process failed: RuntimeError: planted "
                            r"fault in a worker; nothing was kept"),
    (_die_in_a_worker, 2, r"error: a worker process was lost .* exited with status 3; "
                          r"nothing was kept"),
], ids=["exception", "worker-dies"])
def test_a_fault_in_a_worker_process_is_one_line(plant, status, pattern, tmp_path, capfd,
                                                 monkeypatch):
    import re
    monkeypatch.chdir(tmp_path)
    (tmp_path / "d.csv").write_text(GOOD_CSV, encoding="utf-8")
    monkeypatch.setattr(MixedLR, "_batch", plant(os.getpid()))
    # the mixed test is fast now: make the executor spread even small batches on a busy
    # machine, so that the planted fault runs in a worker
    import discovery.executor as executor
    monkeypatch.setattr(executor, "MIN_SECONDS", 0.0)
    monkeypatch.setattr(executor, "SPREAD_CORES", 0.0)
    code = main(["discover", "d.csv", "--test", "mixed", "--jobs", "2", "--quiet",
                 "--out", "r.json"])
    err = capfd.readouterr().err
    lines = [line for line in err.splitlines() if line.strip()]
    assert code == status, err
    assert len(lines) == 1 and "Traceback" not in err, err
    assert re.search(pattern, lines[0]), lines[0]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["d.csv"]  # no output, no temp file
