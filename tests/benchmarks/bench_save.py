"""Peak memory and time of saving a large result as JSON (not run by ``edgewise bench``).

What is measured: ``discover(frame)`` (Fisher's z, α = 0.05, no depth limit) on
``random_dag(variables, expected_degree=2, rng=0)`` and ``sample_linear_gaussian(dag, rows,
rng=1)``, then one way of saving it: ``to_json`` (``result.to_json(path)``), ``write_json``
(``result.write_json(path)``, what the command line and the window use) or ``estimate`` (only
the size estimate of the evidence rows). Printed: the peak resident memory of the process
(``ru_maxrss``) before and after saving, the seconds spent saving, the file's size and how
many tests were left out. Run one mode per process, so that each peak is its own::

    ulimit -v 12000000; nice -n 19 python tests/benchmarks/bench_save.py write_json out.json
        [--variables 1000] [--rows 2000]

Results go into docs/benchmarks.md ("Memory on large tables") by hand, with the machine.
"""

from __future__ import annotations

import argparse
import resource
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from discovery import discover  # noqa: E402
from discovery.simulate import random_dag, sample_linear_gaussian  # noqa: E402


def peak() -> float:
    """Peak resident memory so far, GiB (Linux reports kilobytes)."""
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("mode", choices=("to_json", "write_json", "estimate"))
    parser.add_argument("out", type=Path)
    parser.add_argument("--variables", type=int, default=1000)
    parser.add_argument("--rows", type=int, default=2000)
    args = parser.parse_args(argv)
    dag = random_dag(args.variables, expected_degree=2, rng=0)
    frame = sample_linear_gaussian(dag, args.rows, rng=1)
    result = discover(frame, test="fisher-z", alpha=0.05)
    before = peak()
    if args.mode == "estimate":
        print(f"{len(result.tests):,} tests; evidence rows estimated at "
              f"{result.tests.json_bytes(1) / 2**20:,.0f} MiB (indent 1)")
        return 0
    started = time.perf_counter()
    returned = getattr(result, args.mode)(args.out)
    took = time.perf_counter() - started
    after = peak()
    size = args.out.stat().st_size
    print(f"{args.mode}: {len(result.tests):,} tests; peak {before:.2f} GiB before saving, "
          f"{after:.2f} GiB after; saving {took:.1f} s; file {size / 2**20:,.0f} MiB"
          + (f"; rows left out: {returned:,}" if args.mode == "write_json" else ""))
    return 0


if __name__ == "__main__":
    sys.exit(main())
