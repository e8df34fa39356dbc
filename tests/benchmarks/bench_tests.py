"""Benchmarks of the kernel and G² independence tests (figures for docs/benchmarks.md).

Measured, each as the best of a few runs on fresh test objects (no cached kernels):

- exact KCI, one conditional test (one conditioning variable), n = 1,000;
- low-rank KCI at n = 10,000: one test from cold (features computed), and the mean cost per
  test over a batch of 60 tests on 8 variables (features shared, as in a search);
- the speed-up of low-rank over exact at n = 2,000 (one test from cold, both);
- a kernel search on the invented 10-variable nonlinear model (tests/nonlinear_model.py),
  n = 2,000, on 2 local processes, with its skeleton F1;
- a G² search on 20 discrete variables (2–4 levels, random DAG), n = 20,000;
- a G² search on the ALARM network sampled from its tables (tests/alarm_model.py), n = 100,000,
  α = 0.01, in-process, with its skeleton F1, and the same search with the former per-test
  counting for the ratio (``--skip-former`` leaves that out: it takes half a minute or more);
- the mixed test's tests per second on an invented 10-variable table of mixed kinds, n = 5,000:
  a batch of 150 random tests (sets of 0–3 variables) on a fresh test object, and a search.

Run ``python tests/benchmarks/bench_tests.py [--quick] [--write docs/benchmarks.md]``;
``edgewise bench`` calls :func:`main` too. Speed is never asserted in the unit tests.
"""

from __future__ import annotations

import argparse
import re
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE.parent.parent))

SECTION = "## Independence tests"
DISCRETE_SECTION = "## Discrete and mixed tests"


def _best(fn, repeat=3):
    best, out = float("inf"), None
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t)
    return best, out


def _chain(n, seed):
    rng = np.random.default_rng(seed)
    x = rng.uniform(-2, 2, n)
    z = np.sin(1.5 * x) + 0.4 * rng.normal(size=n)
    y = z ** 2 + 0.4 * rng.normal(size=n)
    return pd.DataFrame({"x": x, "y": y, "z": z})


def _wide(n, columns, seed):
    rng = np.random.default_rng(seed)
    base = rng.uniform(-2, 2, (n, columns))
    for j in range(1, columns):
        base[:, j] += np.sin(1.5 * base[:, j - 1])
    return pd.DataFrame(base, columns=[f"c{j}" for j in range(columns)])


def _discrete(n, n_vars, seed):
    """A random DAG over discrete variables (2–4 levels), logistic-style conditional tables."""
    rng = np.random.default_rng(seed)
    levels = rng.integers(2, 5, n_vars)
    data = np.zeros((n, n_vars), dtype=int)
    for j in range(n_vars):
        parents = [i for i in range(max(0, j - 4), j) if rng.random() < 0.35]
        score = np.zeros((n, levels[j]))
        for i in parents:
            weights = rng.normal(0, 1.2, (levels[i], levels[j]))
            score += weights[data[:, i]]
        prob = np.exp(score)
        prob /= prob.sum(axis=1, keepdims=True)
        cum = prob.cumsum(axis=1)
        data[:, j] = (rng.random((n, 1)) > cum).sum(axis=1).clip(0, levels[j] - 1)
    return pd.DataFrame(data, columns=[f"d{j:02d}" for j in range(n_vars)])


def kernel_figures(quick: bool = False) -> dict:
    from discovery.independence import KernelCI
    n_exact, n_low, n_speed = (300, 2000, 600) if quick else (1000, 10000, 2000)
    out = {}
    frame = _chain(n_exact, 1)
    t, _ = _best(lambda: KernelCI(frame, lowrank_above=10 ** 9).pvalues([(0, 1, (2,))]))
    out[f"kci_exact_one_test_n{n_exact}_s"] = t
    frame = _chain(n_low, 2)
    t, _ = _best(lambda: KernelCI(frame, lowrank_above=0).pvalues([(0, 1, (2,))]))
    out[f"kci_lowrank_one_test_cold_n{n_low}_ms"] = 1e3 * t
    wide = _wide(n_low, 8, 3)
    rng = np.random.default_rng(4)
    batch = []
    while len(batch) < 60:
        cols = rng.choice(8, size=2 + int(rng.integers(1, 3)), replace=False)
        batch.append((int(min(cols[:2])), int(max(cols[:2])), tuple(sorted(int(c) for c in
                                                                          cols[2:]))))
    t, _ = _best(lambda: KernelCI(wide, lowrank_above=0).pvalues(batch), repeat=2)
    out[f"kci_lowrank_per_test_in_batch_n{n_low}_ms"] = 1e3 * t / len(batch)
    frame = _chain(n_speed, 5)
    exact, _ = _best(lambda: KernelCI(frame, lowrank_above=10 ** 9).pvalues([(0, 1, (2,))]),
                     repeat=2)
    low, _ = _best(lambda: KernelCI(frame, lowrank_above=0).pvalues([(0, 1, (2,))]), repeat=5)
    out[f"kci_speedup_lowrank_vs_exact_n{n_speed}"] = exact / low
    return out


def search_figures(quick: bool = False, jobs: int = 2) -> dict:
    import networkx as nx
    from discovery import discover
    from discovery.executor import make_executor
    from discovery.metrics import skeleton_scores
    from nonlinear_model import dag, sample
    n_kernel, n_g2 = (600, 3000) if quick else (2000, 20000)
    out = {}
    frame = sample(n_kernel, seed=1)
    with make_executor(jobs) as executor:
        t = time.perf_counter()
        result = discover(frame, test="kci", executor=executor)
        out[f"kci_search_10_vars_n{n_kernel}_jobs{jobs}_s"] = time.perf_counter() - t
    out["kci_search_tests"] = int(result.counts["tests"])
    out["kci_search_skeleton_f1"] = skeleton_scores(result.to_networkx(), dag()).f1
    data = _discrete(n_g2, 20, 6)
    t = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = discover(data, test="g-squared")
    out[f"g2_search_20_vars_n{n_g2}_s"] = time.perf_counter() - t
    out["g2_search_tests"] = int(result.counts["tests"])
    _ = nx
    return out


def _mixed_table(n, seed):
    """Invented 10-variable table: 5 continuous, 3 binary, 2 categorical columns."""
    rng = np.random.default_rng(seed)
    c0 = rng.normal(size=n)
    b0 = (rng.random(n) < 1 / (1 + np.exp(-c0))).astype(int)
    k0 = np.where(rng.random(n) < 0.5,
                  np.where(c0 > 0.3, "hi", np.where(c0 < -0.3, "lo", "mid")),
                  rng.choice(["hi", "lo", "mid"], n))
    c1 = 0.6 * b0 + rng.normal(size=n)
    c2 = 0.5 * c1 + 0.4 * (k0 == "hi") + rng.normal(size=n)
    b1 = (rng.random(n) < 1 / (1 + np.exp(-(c2 - 0.5)))).astype(int)
    k1 = np.where(rng.random(n) < 0.4, np.where(b1 == 1, "a", "b"),
                  rng.choice(["a", "b", "c"], n))
    c3 = rng.normal(size=n) + 0.5 * (k1 == "c")
    b2 = (rng.random(n) < 0.3 + 0.4 * (c3 > 0)).astype(int)
    c4 = 0.7 * c3 - 0.5 * b2 + rng.normal(size=n)
    return pd.DataFrame(dict(c0=c0, b0=b0, k0=k0, c1=c1, c2=c2, b1=b1, k1=k1, c3=c3, b2=b2,
                             c4=c4))


def _marks(result):
    return sorted((e.source, e.target, e.kind) for e in result.edges)


def discrete_figures(quick: bool = False, former: bool = True) -> dict:
    """G² on ALARM (n = 100,000) and the mixed test's tests per second."""
    from discovery import discover
    from discovery.executor import blas_threads
    from discovery.independence import GSquared, MixedLR
    from discovery.metrics import skeleton_scores
    from scipy.stats import chi2
    from alarm_model import alarm_network, sample_alarm
    chi2_sf = chi2.sf
    n_alarm, n_mixed = (10_000, 1000) if quick else (100_000, 5000)
    out = {}
    dag, _ = alarm_network()
    frame = sample_alarm(n_alarm, 1)
    with blas_threads(1):
        t = time.perf_counter()
        result = discover(frame, test="g-squared", alpha=0.01)
        new = time.perf_counter() - t
    out[f"g2_alarm_search_n{n_alarm}_s"] = new
    out["g2_alarm_tests"] = int(result.counts["tests"])
    out["g2_alarm_skeleton_f1"] = skeleton_scores(result.to_networkx(), dag).f1
    if former:
        class PerTest(GSquared):
            """The former counting: one table per test, strata numbered by np.unique."""
            vectorised = True

            def _batch_array(self, idx):
                stat, p = np.empty(len(idx)), np.empty(len(idx))
                for i, row in enumerate(idx):
                    g2, dof, rows = self._sparse(row)
                    thin = self._thin([rows], [dof], [self._full_dof(row[0], row[1], row[2:])])
                    stat[i] = np.nan if thin[0] else g2
                    p[i] = np.nan if thin[0] else (chi2_sf(g2, dof) if dof else 1.0)
                return stat, p

        with blas_threads(1):
            t = time.perf_counter()
            former_result = discover(frame, test=PerTest(frame), alpha=0.01)
            old = time.perf_counter() - t
        out["g2_alarm_former_same_edges"] = "yes" if _marks(former_result) == _marks(
            result) else "no"
        out[f"g2_alarm_former_per_test_n{n_alarm}_s"] = old
        out["g2_alarm_speedup_batch_vs_per_test"] = old / new
    table = _mixed_table(n_mixed, 0)
    rng = np.random.default_rng(1)
    batch = []
    while len(batch) < 150:
        cols = rng.choice(10, size=2 + int(rng.integers(0, 4)), replace=False)
        batch.append((int(min(cols[:2])), int(max(cols[:2])),
                      tuple(sorted(int(c) for c in cols[2:]))))
    t, _ = _best(lambda: MixedLR(table).pvalues(batch), repeat=2)
    out[f"mixed_tests_per_s_batch_n{n_mixed}"] = len(batch) / t
    t = time.perf_counter()
    result = discover(table, test="mixed")
    out[f"mixed_tests_per_s_search_n{n_mixed}"] = result.counts["tests"] / (
        time.perf_counter() - t)
    return out


#: What each figure means, and the goal of issue 3 where there is one (by key prefix).
MEANING = {
    "kci_exact_one_test": ("exact KCI, one test with one conditioning variable", ""),
    "kci_lowrank_one_test_cold": ("low-rank KCI, one test from cold (features computed)",
                                  "≤ 50 ms"),
    "kci_lowrank_per_test_in_batch": ("low-rank KCI, mean per test over a batch of 60 on 8 "
                                      "variables (features shared, as in a search)", "≤ 50 ms"),
    "kci_speedup_lowrank_vs_exact": ("speed-up of low-rank over exact, one test each", "≥ 20×"),
    "kci_search_10_vars": ("kernel search, invented 10-variable nonlinear model, 2 processes",
                           "< 60 s"),
    "kci_search_tests": ("tests run by that search", ""),
    "kci_search_skeleton_f1": ("its skeleton F1 against the true skeleton", ""),
    "g2_search_20_vars": ("G² search, 20 discrete variables (2–4 levels, random DAG)", ""),
    "g2_search_tests": ("tests run by that search", ""),
    "blas_threads_limited": ("BLAS threads limited per batch (threadpoolctl)", ""),
    "g2_alarm_search": ("G² search, ALARM sampled from its tables, α = 0.01, one core",
                        "≤ 10 s at n = 100,000"),
    "g2_alarm_tests": ("tests run by that search", ""),
    "g2_alarm_skeleton_f1": ("its skeleton F1 against the 46 ALARM edges", "≥ 0.97"),
    "g2_alarm_former_per_test": ("the same search counting one table per test (former way)",
                                 ""),
    "g2_alarm_former_same_edges": ("the two searches give the same edges", ""),
    "g2_alarm_speedup": ("batch counting ÷ per-test counting, same run", ""),
    "mixed_tests_per_s_batch": ("mixed test, tests a second, 150 random tests, 10 variables "
                                "of mixed kinds", "≥ 100"),
    "mixed_tests_per_s_search": ("mixed test, tests a second inside a search on that table",
                                 "≥ 100"),
}


def format_section(figures: dict, machine: str, quick: bool) -> str:
    lines = [SECTION, "",
             "Kernel (HSIC / KCI) and G² tests, measured by `python "
             "tests/benchmarks/bench_tests.py --write docs/benchmarks.md` (also run by "
             "`edgewise bench`). One-test figures are the best of a few runs on fresh test "
             "objects (no cached kernels); searches run once.", "",
             "| figure | what | measured | goal |", "|---|---|---|---|"]
    for key, value in figures.items():
        shown = f"{value:.4g}" if isinstance(value, float) else str(value)
        what, goal = next((v for k, v in MEANING.items() if key.startswith(k)), ("", ""))
        lines.append(f"| `{key}` | {what} | {shown} | {goal} |")
    lines += ["", f"Machine: {machine}. Measured {time.strftime('%Y-%m-%d')}"
              + (" (quick sizes)" if quick else "") + ", on a machine shared with other work "
              "(load average 2–4 on 2 cores): figures vary between runs, the speed-up most "
              "(the exact test's matrix products depend on free cores).", ""]
    return "\n".join(lines)


def format_discrete_section(figures: dict, machine: str, quick: bool) -> str:
    lines = [DISCRETE_SECTION, "",
             "G² on the ALARM network and the mixed test, measured by `python "
             "tests/benchmarks/bench_tests.py --only-discrete --write docs/benchmarks.md` "
             "(searches run once; the mixed batch is the best of two runs). BLAS limited to one "
             "thread for the G² searches.", "",
             "| figure | what | measured | goal |", "|---|---|---|---|"]
    for key, value in figures.items():
        shown = f"{value:.4g}" if isinstance(value, float) else str(value)
        what, goal = next((v for k, v in MEANING.items() if key.startswith(k)), ("", ""))
        lines.append(f"| `{key}` | {what} | {shown} | {goal} |")
    lines += ["", f"Machine: {machine}. Measured {time.strftime('%Y-%m-%d')}"
              + (" (quick sizes)" if quick else "") + ", on a machine shared with other work "
              "(2 cores, several other jobs running): absolute times vary between runs; the "
              "ratio of the two G² searches is measured within one run.", ""]
    return "\n".join(lines)


def write_section(path: Path, section: str) -> None:
    """Replace the section of ``path`` headed by ``section``'s first line (or append it)."""
    from discovery.bench import replace_section
    replace_section(path, section)


def main(argv=None) -> dict:
    """Run the benchmarks, print the figures, return them as a dict."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small sizes, for a smoke run")
    parser.add_argument("--jobs", type=int, default=2, help="processes for the search")
    parser.add_argument("--write", metavar="FILE.md", help="update this file's section")
    parser.add_argument("--skip-former", action="store_true",
                        help="leave out the former per-test G² counting (slow)")
    parser.add_argument("--only-discrete", action="store_true",
                        help="only the G² ALARM and mixed-test figures")
    args = parser.parse_args(argv)
    figures = {}
    if not args.only_discrete:
        figures.update(kernel_figures(args.quick))
        figures.update(search_figures(args.quick, args.jobs))
    discrete = discrete_figures(args.quick, not args.skip_former)
    if not args.only_discrete:
        try:
            import threadpoolctl  # noqa: F401
            figures["blas_threads_limited_by_threadpoolctl"] = "yes"
        except ImportError:
            figures["blas_threads_limited_by_threadpoolctl"] = "no (not installed)"
    for key, value in {**figures, **discrete}.items():
        print(f"{key}: {value:.4g}" if isinstance(value, float) else f"{key}: {value}")
    if args.write:
        from discovery.bench import machine_description
        machine = machine_description()
        if figures:
            write_section(Path(args.write), format_section(figures, machine, args.quick))
        write_section(Path(args.write), format_discrete_section(discrete, machine, args.quick))
    return {**figures, **discrete}

if __name__ == "__main__":
    main()
