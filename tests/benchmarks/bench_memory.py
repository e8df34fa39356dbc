"""Peak memory of a search on a large table, as a user runs it (not run by ``edgewise bench``:
the 1,000 x 50,000 search takes about half an hour on 2 cores).

What is measured: ``discover(frame)`` on an in-memory DataFrame (intake included), Fisher's z,
α = 0.05, no depth limit, on ``random_dag(variables, expected_degree=2)`` with
``sample_linear_gaussian(dag, rows)``; the figure is the peak resident memory of the process
(``resource.getrusage(RUSAGE_SELF).ru_maxrss``), which includes the table itself. Progress
lines give the resident memory as each level starts.

Run it so that it can never take the machine's memory from other work::

    ulimit -v 12000000; nice -n 19 python tests/benchmarks/bench_memory.py [--variables 1000]
        [--rows 50000] [--seed 0]

Results go into docs/benchmarks.md ("Memory on large tables") by hand, with the machine.
"""

from __future__ import annotations

import argparse
import resource
import sys
import time
import warnings
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

import networkx as nx  # noqa: E402

from discovery import discover  # noqa: E402
from discovery.bench import machine_description  # noqa: E402
from discovery.simulate import random_dag, sample_linear_gaussian  # noqa: E402

GIB = 2 ** 30


def resident() -> float:
    """Resident memory now, GiB."""
    with open("/proc/self/status", encoding="ascii") as handle:
        for line in handle:
            if line.startswith("VmRSS:"):
                return int(line.split()[1]) * 1024 / GIB
    return float("nan")


def peak() -> float:
    """Peak resident memory so far, GiB (Linux reports kilobytes)."""
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024 / GIB


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--variables", type=int, default=1000)
    parser.add_argument("--rows", type=int, default=50_000)
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args(argv)
    started = time.perf_counter()
    dag = random_dag(args.variables, expected_degree=2, rng=args.seed)
    degrees = sorted(d for _, d in nx.Graph(dag.to_undirected()).degree())
    print(f"true diagram: {dag.number_of_edges():,} edges, largest degree {degrees[-1]}",
          flush=True)
    frame = sample_linear_gaussian(dag, args.rows, rng=args.seed + 1)
    print(f"table {frame.shape[1]:,} x {frame.shape[0]:,}: resident {resident():.2f} GiB "
          f"(peak so far {peak():.2f}, simulation included)", flush=True)
    last = [None]

    def progress(info):
        key = (info.get("phase"), info.get("level"))
        if key != last[0]:
            last[0] = key
            print(f"{time.perf_counter() - started:8.0f} s  {key[0]} level {key[1]}: up to "
                  f"{info.get('planned', 0):,} tests; resident {resident():.2f} GiB, peak "
                  f"{peak():.2f} GiB", flush=True)

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = discover(frame, test="fisher-z", alpha=0.05, progress=progress)
    seconds = time.perf_counter() - started
    counts = result.counts
    log = result.tests._blocks
    degree: dict[str, int] = {}
    for e in result.edges:
        degree[e.source] = degree.get(e.source, 0) + 1
        degree[e.target] = degree.get(e.target, 0) + 1
    print(f"done in {seconds:,.0f} s: {counts['tests']:,} tests, depth {counts['depth_reached']}, "
          f"{counts['edges']:,} edges (largest degree found {max(degree.values(), default=0)})")
    print(f"evidence: {log.nbytes_in_memory / GIB:.2f} GiB in memory, "
          f"{log.nbytes_on_disk / GIB:.2f} GiB in the temporary file")
    for level in counts["levels"]:
        print(f"  level {level['level']}: {level['pairs']:,} pairs, {level['tests']:,} tests, "
              f"{level['removed']:,} removed, {level['seconds']:.0f} s")
    for w in caught:
        print(f"warning: {str(w.message)[:300]}")
    print(f"PEAK RESIDENT MEMORY {peak():.2f} GiB")
    print(machine_description())
    return 0


if __name__ == "__main__":
    sys.exit(main())
