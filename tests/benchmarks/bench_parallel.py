"""Benchmark of parallel work: the speed-up of searches on 2 local processes over in-process.

For the kernel (``kci``), mixed-data (``mixed``) and G² (``g-squared``) tests, the same search
runs in-process and with ``jobs=2`` (worker start-up and shutdown included, as a user of
``--jobs 2`` pays them), alternately, ``repeat`` times; the figure is the ratio of the best
in-process time to the best 2-process time (above 1: faster on 2 processes). Each pair of runs
must give the same edges, which is checked and reported.

Data (all invented here, or sampled from a published network's tables):

- kci: the invented 10-variable nonlinear model of ``tests/nonlinear_model.py``, n = 10,000;
- mixed: an invented 10-variable table (4 continuous, 3 binary, 3 categorical with 3 levels,
  linear and logistic links along a fixed DAG), n = 2,000, 5,000, 20,000 and 50,000;
- G²: the ALARM network (Beinlich, Suermondt, Chavez & Cooper 1989; tables in
  ``../shared/data/alarm``), sampled forward from its tables, n = 20,000 (or a random
  20-variable discrete DAG when the tables are not found).

Run ``python tests/benchmarks/bench_parallel.py [--quick] [--write docs/benchmarks.md]``;
``edgewise bench`` runs it too. Speed is never asserted in unit tests.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE.parent.parent))

SECTION = "## Parallel work"
DEFAULT_REPEAT = 4
# the shared data sit beside the repository (or beside the folder of work trees)
ALARM = next((base / "shared" / "data" / "alarm" / "network.json"
              for base in (HERE.parents[2], HERE.parents[3])
              if (base / "shared" / "data" / "alarm" / "network.json").exists()),
             HERE.parents[2] / "shared" / "data" / "alarm" / "network.json")


def mixed_table(n: int, seed: int = 0) -> pd.DataFrame:
    """Ten invented columns of three kinds along a fixed DAG (it models nothing real)."""
    rng = np.random.default_rng(seed)
    c0 = rng.normal(size=n)
    b0 = (rng.random(n) < 1 / (1 + np.exp(-1.2 * c0))).astype(int)
    k0 = np.array([rng.choice(3, p=p) for p in _softmax(np.outer(c0, [0, 1.0, -1.0]))])
    c1 = 0.8 * c0 + 0.6 * b0 + rng.normal(size=n)
    c2 = 0.7 * (k0 == 1) - 0.7 * (k0 == 2) + 0.5 * c1 + rng.normal(size=n)
    b1 = (rng.random(n) < 1 / (1 + np.exp(-(0.9 * c2 - 0.3)))).astype(int)
    k1 = np.array([rng.choice(3, p=p) for p in _softmax(np.outer(c1, [0, 0.8, -0.8])
                                                        + np.outer(b1, [0, 0.7, 0]))])
    c3 = 0.6 * c2 + 0.5 * (k1 == 2) + rng.normal(size=n)
    b2 = (rng.random(n) < 1 / (1 + np.exp(-0.8 * c3))).astype(int)
    k2 = np.array([rng.choice(3, p=p) for p in _softmax(np.outer(c3, [0, 0.9, 0.2])
                                                        + np.outer(b2, [0, -0.6, 0.6]))])
    names = "abcdefghij"
    frame = pd.DataFrame({
        "c0": c0, "c1": c1, "c2": c2, "c3": c3,
        "b0": np.where(b0, "yes", "no"), "b1": np.where(b1, "yes", "no"),
        "b2": np.where(b2, "yes", "no"),
        "k0": [names[v] for v in k0], "k1": [names[v] for v in k1], "k2": [names[v] for v in k2]})
    for col in ("b0", "b1", "b2", "k0", "k1", "k2"):
        frame[col] = frame[col].astype("category")
    return frame


def _softmax(score):
    e = np.exp(score - score.max(axis=1, keepdims=True))
    return e / e.sum(axis=1, keepdims=True)


def alarm_sample(n: int, seed: int = 0) -> pd.DataFrame | None:
    """Forward sampling from the ALARM tables (None when the tables are not here)."""
    if not ALARM.exists():
        return None
    net = json.loads(ALARM.read_text())
    parents = net["parents"]
    rng = np.random.default_rng(seed)
    order, placed = [], set()
    while len(order) < len(parents):
        for v, ps in parents.items():
            if v not in placed and all(p in placed for p in ps):
                order.append(v)
                placed.add(v)
    data = {}
    for v in order:
        table = net["cpts"][v]
        ps = parents[v]
        keys = [",".join(str(int(data[p][i])) for p in ps) for i in range(n)] if ps \
            else [""] * n
        out = np.empty(n, dtype=int)
        codes = pd.Series(keys)
        for key, rows in codes.groupby(codes).groups.items():
            probs = np.asarray(table[key], dtype=float)
            out[np.asarray(rows)] = rng.choice(len(probs), size=len(rows), p=probs / probs.sum())
        data[v] = out
    return pd.DataFrame({v: data[v] for v in sorted(data)})


def _random_discrete(n: int, n_vars: int = 20, seed: int = 6) -> pd.DataFrame:
    from bench_tests import _discrete
    return _discrete(n, n_vars, seed)


def _cpu() -> float:
    """CPU seconds of this process and of its reaped children (the workers)."""
    own = resource.getrusage(resource.RUSAGE_SELF)
    kids = resource.getrusage(resource.RUSAGE_CHILDREN)
    return own.ru_utime + own.ru_stime + kids.ru_utime + kids.ru_stime


def _search_seconds(frame, test, jobs):
    """Wall seconds, CPU seconds, host steal seconds and the result of one search."""
    from discovery import discover
    from discovery.bench import steal_seconds
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        cpu, steal = _cpu(), steal_seconds()
        started = time.perf_counter()
        result = discover(frame, test=test, jobs=jobs)  # the workers end with the call
        return (time.perf_counter() - started, _cpu() - cpu, steal_seconds() - steal,
                result)


def _forced_spreading(frame, test) -> dict:
    """One search with every batch spread (no in-process fallback): what spreading costs in
    CPU, and how many cores the caller and its worker got together while they computed."""
    import discovery.executor as ex
    from discovery import discover
    keep = ex.SPREAD_CORES
    ex.SPREAD_CORES = 0.0
    try:
        with warnings.catch_warnings(), ex.ProcessExecutor(2, min_seconds=0) as executor:
            warnings.simplefilter("ignore")
            cpu = _cpu()
            started = time.perf_counter()
            discover(frame, test=test, executor=executor)
            wall = time.perf_counter() - started
            cores = executor._cores
        return {"forced_s": wall, "forced_cpu_s": _cpu() - cpu, "forced_cores": cores}
    finally:
        ex.SPREAD_CORES = keep


def speedup(frame, test: str, repeat: int) -> dict:
    """Best in-process and best 2-process time, their ratio, and whether edges agree."""
    best = {1: float("inf"), 2: float("inf")}
    cpu = {1: float("inf"), 2: float("inf")}
    steal = {1: 0.0, 2: 0.0}
    times = {1: [], 2: []}
    same = True
    for _ in range(repeat):
        edges = {}
        for jobs in (1, 2):
            seconds, spent, stolen, result = _search_seconds(frame, test, jobs)
            best[jobs] = min(best[jobs], seconds)
            cpu[jobs] = min(cpu[jobs], spent)
            steal[jobs] += stolen
            times[jobs].append(seconds)
            edges[jobs] = [e.to_dict() for e in result.edges]
        same &= edges[1] == edges[2]
    forced = _forced_spreading(frame, test)
    pairs = [a / b for a, b in zip(times[1], times[2])]
    return {**forced, "in_process_s": best[1], "two_processes_s": best[2],
            "speedup": best[1] / best[2], "median_pair_ratio": float(np.median(pairs)),
            "cpu_in_process_s": cpu[1],
            "cpu_two_processes_s": cpu[2], "cpu_ratio": cpu[2] / cpu[1],
            "steal_in_process_s": steal[1], "steal_two_processes_s": steal[2],
            "same_edges": same, "tests": result.counts["tests"]}


def parallel_figures(quick: bool = False, repeat: int | None = None, only=None) -> dict:
    from nonlinear_model import sample
    repeat = repeat or (1 if quick else DEFAULT_REPEAT)
    n_kernel, n_g2 = (2000, 5000) if quick else (10000, 10000)
    out = {}
    # the mixed test at the sizes of its speed table (2,000 and 5,000 rows: searches of about
    # a second) and at sizes where a user reaches for --jobs (searches of several seconds)
    mixed_sizes = (1000, 5000) if quick else (2000, 5000, 20000, 50000)
    cases = [("kci", "kci", f"kci, nonlinear model, 10 variables, n = {n_kernel:,}",
              lambda: sample(n_kernel, seed=1))]
    for n_mixed in mixed_sizes:
        cases.append((f"mixed-{n_mixed}", "mixed",
                      f"mixed, invented 10 columns of 3 kinds, n = {n_mixed:,}",
                      lambda n_mixed=n_mixed: mixed_table(n_mixed, seed=2)))
    alarm = alarm_sample(n_g2, seed=3) if not only or "g-squared" in only else None
    if alarm is not None:
        cases.append(("g-squared", "g-squared", f"G², ALARM sampled from its tables, "
                      f"n = {n_g2:,}", lambda: alarm))
    else:
        cases.append(("g-squared", "g-squared", f"G², random 20-variable discrete DAG, "
                      f"n = {n_g2:,}", lambda: _random_discrete(n_g2)))
    for key, test, label, make in cases:
        if only and test not in only:
            continue
        frame = make()
        fig = speedup(frame, test, repeat)
        fig["label"] = label
        fig["test"] = test
        out[key] = fig
        print(f"{key}: in-process {fig['in_process_s']:.2f} s, 2 processes "
              f"{fig['two_processes_s']:.2f} s, ratio {fig['speedup']:.2f} (median of pairs "
              f"{fig['median_pair_ratio']:.2f}), CPU "
              f"{fig['cpu_in_process_s']:.2f} s vs {fig['cpu_two_processes_s']:.2f} s, "
              f"steal {fig['steal_in_process_s']:.2f} / {fig['steal_two_processes_s']:.2f} s, "
              f"same edges {fig['same_edges']}, load {os.getloadavg()[0]:.1f}",
              file=sys.stderr)
    return out


def _vectorised_note(figures) -> str:
    from discovery.independence import make_test
    small = pd.DataFrame({"a": [0, 1, 0, 1] * 5, "b": [1, 0, 0, 1] * 5, "c": [0, 0, 1, 1] * 5})
    names = [t for t in figures if t == "g-squared"
             and getattr(make_test(t, small), "vectorised", False)]
    if not names:
        return ""
    return (f" The {', '.join(names)} test is vectorised in this version: its batches never "
            "go to workers, so its ratio shows only the noise between runs.")


def _autogroup() -> str:
    try:
        return Path("/proc/sys/kernel/sched_autogroup_enabled").read_text().strip()
    except OSError:
        return "unknown"


def format_section(figures: dict, machine: str, quick: bool, repeat: int,
                   load: float = float("nan"), context: str = "") -> str:
    lines = [SECTION, "",
             "Speed-up of a whole search on 2 processes (`--jobs 2`: this process and one "
             "local worker) over the "
             "same search in-process: best in-process time / best 2-process time, the two "
             f"run alternately {repeat} time(s) in one run (worker start-up included). "
             "Measured by `python tests/benchmarks/bench_parallel.py --write "
             "docs/benchmarks.md` (also run by `edgewise bench`).", "",
             "| search | tests | in-process s | 2 processes s | ratio | median of the "
             "pairs' ratios | CPU s in-process / 2 processes | host steal s in-process / "
             "2 processes | every batch spread: s, CPU s, cores got | same edges | goal |",
             "|---|---|---|---|---|---|---|---|---|---|---|"]
    goals = {"kci": "≥ 1.6", "mixed": "≥ 1.6", "g-squared": "≥ 0.9 (never > 10 % slower)"}
    for key, fig in figures.items():
        test = fig.get("test", key)
        goal = goals.get(test, "")
        if test == "mixed" and fig["in_process_s"] < 2:
            goal = "≥ 1.6 on searches of seconds; this one is about 1 s: never > 10 % slower"
        lines.append(f"| {fig['label']} | {fig['tests']} | {fig['in_process_s']:.2f} | "
                     f"{fig['two_processes_s']:.2f} | {fig['speedup']:.2f} | "
                     f"{fig['median_pair_ratio']:.2f} | "
                     f"{fig['cpu_in_process_s']:.2f} / {fig['cpu_two_processes_s']:.2f} | "
                     f"{fig['steal_in_process_s']:.2f} / {fig['steal_two_processes_s']:.2f} | "
                     f"{fig['forced_s']:.2f}, {fig['forced_cpu_s']:.2f}, "
                     f"{fig['forced_cores'] or float('nan'):.2f} | "
                     f"{'yes' if fig['same_edges'] else 'NO'} | {goal} |")
    lines += ["", "The ratio is best in-process time over best 2-process time; the median "
              "of the pairs' ratios (each in-process run over the 2-process run after it) is "
              "less sensitive to one lucky run. Host steal is the CPU time the virtual "
              "machine's host took from its cores during all runs of each kind (/proc/stat): "
              "while it is large, wall times say more about the host than about Edgewise. "
              "CPU seconds count this process and its worker processes (their sum, "
              "best of the runs); the 2-process search may keep batches in-process when the "
              "processes get too little CPU for spreading to pay (docs/parallel.md). The "
              "'every batch spread' run (once) turns that rule off: its CPU against the "
              "in-process CPU is the extra work spreading costs, and 'cores got' is each "
              "piece's CPU over its own wall time, times the two processes (2 on free "
              "cores). On free cores the 2-process time would be about the in-process time × "
              "(spread CPU / in-process CPU) / 2, when the chunks balance."
              + _vectorised_note(figures), "",
              f"Machine: {machine}. Measured {time.strftime('%Y-%m-%d %H:%M')}"
              + (" (quick sizes)" if quick else "") + f"; load average {load:.1f} before and "
              f"{os.getloadavg()[0]:.1f} after the run; Linux shares the CPU between "
              f"sessions (sched_autogroup_enabled = {_autogroup()}), so work of other sessions "
              "takes CPU from both sides alike. " + (context + " " if context else "")
              + "Absolute times vary between runs; the ratios compare runs made alternately "
              "within one run.", ""]
    return "\n".join(lines)


def main(argv=None) -> dict:
    """Run the benchmark, print the figures, return them as a dict."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small sizes, for a smoke run")
    parser.add_argument("--repeat", type=int, default=None,
                        help=f"runs of each (default {DEFAULT_REPEAT})")
    parser.add_argument("--only", choices=["kci", "mixed", "g-squared"], action="append",
                        help="run only these searches")
    parser.add_argument("--write", metavar="FILE.md", help="update this file's section")
    parser.add_argument("--context", default="",
                        help="one sentence on what else ran on the machine, for the record")
    args = parser.parse_args(argv)
    load = os.getloadavg()[0]
    figures = parallel_figures(args.quick, args.repeat, args.only)
    if args.write:
        from discovery.bench import machine_description, replace_section
        replace_section(Path(args.write), format_section(
            figures, machine_description(), args.quick,
            args.repeat or (1 if args.quick else DEFAULT_REPEAT), load, args.context))
    return {f"{k}_speedup_2_processes": v["speedup"] for k, v in figures.items()}


if __name__ == "__main__":
    main()
