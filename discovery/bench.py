"""Benchmarks of the search, reported as ratios measured in one run.

Shared machines are noisy, so speed is never asserted in unit tests. ``edgewise bench``
measures, on a linear-Gaussian random DAG (Kalisch & Bühlmann 2007 design): the whole search's
time divided by the time numpy takes for the correlation matrix of the same data (both best of
several runs, interleaved), tests per second, peak memory (tracemalloc, in a separate run), and
that a 1,000-variable search finishes. Benchmarks of the other independence tests and of the
window live beside the tests (``tests/benchmarks``) and are run too when found.
"""

from __future__ import annotations

import importlib.util
import os
import platform
import re
import time
import tracemalloc
from pathlib import Path

import numpy as np

__all__ = ["run_benchmarks", "search_benchmarks", "hidden_causes_benchmarks",
           "robustness_benchmarks",
           "machine_description", "replace_section", "steal_seconds"]

SECTION = "## Search"
HIDDEN_SECTION = "## Hidden causes (FCI)"


def machine_description() -> str:
    """One paragraph naming the CPU, cores, memory, Python and numpy's BLAS."""
    cpu = platform.processor() or platform.machine()
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    mem = ""
    try:
        kb = int(re.search(r"MemTotal:\s+(\d+)", Path("/proc/meminfo").read_text()).group(1))
        mem = f", {kb / 2**20:.0f} GiB memory"
    except (OSError, AttributeError):
        pass
    blas = ""
    try:
        cfg = np.show_config(mode="dicts")
        blas = ", BLAS " + cfg["Build Dependencies"]["blas"]["name"]
    except Exception:  # older numpy has no dict mode
        pass
    return (f"{cpu}, {os.cpu_count()} cores{mem}; Python {platform.python_version()}, "
            f"numpy {np.__version__}{blas}; {platform.system()} {platform.release()}")


def steal_seconds() -> float:
    """CPU seconds the host has taken from this virtual machine since it started, summed over
    its cores ("steal" in /proc/stat; NaN where not reported). Measured before and after a
    run, it says how much of the run's wall time the machine's host kept for other work."""
    try:
        fields = Path("/proc/stat").read_text().split("\n", 1)[0].split()
        return int(fields[8]) / os.sysconf("SC_CLK_TCK")
    except (OSError, IndexError, ValueError):
        return float("nan")


def _best(fn, repeat):
    best = float("inf")
    out = None
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t)
    return best, out


def _ratio_run(values, dataset, discover, repeat=7):
    """Best-of-``repeat`` times of numpy's correlation matrix and of the search, interleaved
    so that both see the same machine load."""
    corr_times, search_times, result = [], [], None
    for _ in range(repeat):
        corr_times.append(_best(lambda: np.corrcoef(values, rowvar=False), 3)[0])
        t, result = _best(lambda: discover(dataset, test="fisher-z", alpha=0.05), 1)
        search_times.append(t)
    return min(corr_times), min(search_times), result


def search_benchmarks(*, quick: bool = False, progress=print) -> dict:
    """Run the search benchmarks; returns the figures as a dict."""
    from .data import prepare_frame
    from .metrics import skeleton_scores
    from .search import discover
    from .simulate import random_dag, sample_linear_gaussian

    p, deg, n = (60, 3, 1000) if quick else (300, 3, 5000)
    big_p, big_deg = (200, 2) if quick else (1000, 2)
    rng = np.random.default_rng(20261202)
    dag = random_dag(p, expected_degree=deg, rng=rng)
    frame = sample_linear_gaussian(dag, n, rng=rng)
    values = frame.to_numpy()
    dataset = prepare_frame(frame)  # the search on loaded data: file parsing is not timed
    progress(f"search benchmark: {p} variables, expected degree {deg}, {n} rows")
    discover(dataset)  # warm-up (imports, BLAS threads)
    t_corr, t_search, result = _ratio_run(values, dataset, discover)
    single = None
    try:
        from threadpoolctl import threadpool_limits
        with threadpool_limits(limits=1):
            single = _ratio_run(values, dataset, discover)[:2]
    except ImportError:
        pass
    t_frame, _ = _best(lambda: discover(frame, test="fisher-z", alpha=0.05), 1)
    tests = result.counts["tests"]
    tracemalloc.start()
    discover(dataset, test="fisher-z", alpha=0.05)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    f1 = skeleton_scores(result.to_networkx(), dag).f1

    progress(f"scale check: {big_p} variables, expected degree {big_deg}, {n} rows")
    big_dag = random_dag(big_p, expected_degree=big_deg, rng=rng)
    big = prepare_frame(sample_linear_gaussian(big_dag, n, rng=rng))
    t_big, big_result = _best(lambda: discover(big, test="fisher-z", alpha=0.05), 1)
    return {
        "variables": p, "degree": deg, "rows": n,
        "corr_s": t_corr, "search_s": t_search, "ratio": t_search / t_corr,
        "corr_1thread_s": single[0] if single else float("nan"),
        "search_1thread_s": single[1] if single else float("nan"),
        "ratio_1thread": single[1] / single[0] if single else float("nan"),
        "search_from_frame_s": t_frame,
        "tests": tests, "tests_per_s": tests / t_search, "peak_mib": peak / 2**20,
        "skeleton_f1": f1, "edges": result.counts["edges"],
        "true_edges": dag.number_of_edges(),
        "levels": [(lv["level"], lv["tests"], lv["seconds"]) for lv in result.counts["levels"]],
        "big_variables": big_p, "big_degree": big_deg, "big_s": t_big,
        "big_tests": big_result.counts["tests"],
        "big_f1": skeleton_scores(big_result.to_networkx(), big_dag).f1,
    }


def format_search(fig: dict) -> str:
    levels = ", ".join(f"{lv}: {t:,} tests in {sec * 1e3:.0f} ms" for lv, t, sec in fig["levels"])
    return "\n".join([
        SECTION, "",
        f"Linear-Gaussian random DAG (`discovery.simulate`), {fig['variables']} variables, "
        f"expected degree {fig['degree']}, {fig['rows']:,} rows; Fisher's z, α = 0.05, no "
        "depth limit. The search is timed on loaded data (`discover(dataset)`, after "
        "`prepare_frame`); reading a file is not timed. Times are wall-clock, the best of "
        "seven runs, the search and numpy's correlation matrix interleaved so both see the "
        "same load.", "",
        "| figure | value |", "| --- | --- |",
        f"| numpy correlation matrix (`np.corrcoef`), default BLAS threads | "
        f"{fig['corr_s'] * 1e3:.1f} ms |",
        f"| whole search (`discover`), default BLAS threads | {fig['search_s'] * 1e3:.0f} ms |",
        f"| **search ÷ correlation matrix** | **{fig['ratio']:.1f}** (issue target ≤ 10, "
        "goal ≤ 5) |",
        f"| the same with BLAS limited to one thread (threadpoolctl): correlation "
        f"{fig['corr_1thread_s'] * 1e3:.1f} ms, search {fig['search_1thread_s'] * 1e3:.0f} ms"
        f" | ratio {fig['ratio_1thread']:.1f} |",
        f"| search from an in-memory DataFrame (`discover(frame)`, intake checks included) | "
        f"{fig['search_from_frame_s'] * 1e3:.0f} ms |",
        f"| tests run | {fig['tests']:,} |",
        f"| tests per second | {fig['tests_per_s']:,.0f} |",
        f"| peak traced memory (tracemalloc) | {fig['peak_mib']:.0f} MiB |",
        f"| skeleton F1 against the true DAG | {fig['skeleton_f1']:.3f} "
        f"({fig['edges']} edges found, {fig['true_edges']} true) |",
        f"| {fig['big_variables']:,} variables, expected degree {fig['big_degree']}: time | "
        f"{fig['big_s']:.1f} s ({fig['big_tests']:,} tests, skeleton F1 "
        f"{fig['big_f1']:.3f}) |",
        "", f"Per level: {levels}.", "",
    ])


def _class_result(dag):
    """The CPDAG of ``dag`` as a search result (Chickering's labelling, no tests run)."""
    from .knowledge import Knowledge
    from .metrics import cpdag_of
    from .result import Edge, SearchResult
    from .settings import SearchSettings
    c = cpdag_of(dag)
    edges = [Edge(u, v, "undirected" if c.has_edge(v, u) else "directed")
             for u, v in c.edges if not (c.has_edge(v, u) and str(v) < str(u))]
    return SearchResult(variables=tuple(str(v) for v in dag.nodes), settings=SearchSettings(),
                        knowledge=Knowledge(), edges=tuple(edges), removed=(), tests=())


def controls_benchmarks(*, quick: bool = False, progress=print) -> dict:
    """Control sets on a 50-variable CPDAG (every treatment with a possibly causal path to
    a later outcome, up to 40 pairs) and the effect range on a 200-variable CPDAG with
    5,000 rows (treatments with the most undirected neighbours)."""
    import networkx as nx
    from .effects import control_sets, effect_range
    from .simulate import random_dag, sample_linear_gaussian

    rng = np.random.default_rng(20261203)
    p, n_big = (20, 60) if quick else (50, 200)
    rows = 1000 if quick else 5000
    progress(f"control-set benchmark: {p} variables, expected degree 3")
    dag = random_dag(p, expected_degree=3, rng=rng)
    result = _class_result(dag)
    pairs = [(str(x), str(y)) for x in dag for y in nx.descendants(dag, x)]
    pairs = [pairs[i] for i in rng.permutation(len(pairs))[:40]]
    times = []
    for x, y in pairs:
        times.append(_best(lambda: control_sets(result, x, y), 3)[0])
    progress(f"effect-range benchmark: {n_big} variables, {rows} rows")
    big = random_dag(n_big, expected_degree=3, rng=rng)
    frame = sample_linear_gaussian(big, rows, rng=rng)
    big_result = _class_result(big)
    degree = {v: sum(1 for e in big_result.edges if e.kind == "undirected" and v in e.pair)
              for v in big_result.variables}
    treatments = sorted(degree, key=lambda v: -degree[v])[:5]
    outcome = {x: next(iter(sorted(nx.descendants(big, x), key=str)), None) or
               next(v for v in big_result.variables if v != x) for x in treatments}
    effect_range(big_result, frame, treatments[0], outcome[treatments[0]])  # warm-up
    ranges = [_best(lambda x=x: effect_range(big_result, frame, x, outcome[x]), 3)
              for x in treatments]
    return {"variables": p, "pairs": len(pairs), "median_s": float(np.median(times)),
            "max_s": float(max(times)), "big_variables": n_big, "rows": rows,
            "range_max_s": max(t for t, _ in ranges),
            "range_sets_max": max(len(r.effects) for _, r in ranges),
            "range_neighbours_max": degree[treatments[0]]}


def format_controls(fig: dict) -> str:
    return "\n".join([
        "## Control sets and effect ranges", "",
        "| what | measured | target |", "|---|---|---|",
        f"| `control_sets` on a {fig['variables']}-variable CPDAG, {fig['pairs']} treatment–"
        f"outcome pairs (canonical, optimal, minimal sets) | median {fig['median_s']:.4f} s, "
        f"slowest {fig['max_s']:.4f} s | < 1 s |",
        f"| `effect_range` on a {fig['big_variables']}-variable CPDAG, {fig['rows']:,} rows, "
        f"5 treatments with the most undirected neighbours (up to "
        f"{fig['range_neighbours_max']}; up to {fig['range_sets_max']} parent sets) | slowest "
        f"{fig['range_max_s']:.3f} s | < 5 s |", ""])
def _hidden_data(n_observed, degree, n_hidden, rows, seed):
    from .simulate import add_hidden_causes, random_dag, sample_linear_gaussian
    rng = np.random.default_rng(seed)
    dag = random_dag(n_observed, expected_degree=degree, rng=rng)
    dag, hidden = add_hidden_causes(dag, n_hidden, rng=rng)
    return dag, sample_linear_gaussian(dag, rows, rng=rng).drop(columns=hidden)


def hidden_causes_benchmarks(*, quick: bool = False, progress=print) -> dict:
    """The hidden-causes mode: its time against the search without it on the same data
    (interleaved, best of several), and the precision of its arrowheads and tails against
    the true DAG on invented linear data with hidden common causes (fixed seeds)."""
    import warnings

    from .data import prepare_frame
    from .metrics import ancestral_mark_scores
    from .search import discover

    p, rows, n_hidden = (30, 2000, 3) if quick else (50, 5000, 5)
    progress(f"hidden-causes benchmark: {p} observed variables, degree 2, {n_hidden} hidden "
             f"common causes, {rows} rows")
    _, frame = _hidden_data(p, 2, n_hidden, rows, 20261202)
    dataset = prepare_frame(frame)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        discover(dataset), discover(dataset, hidden_causes=True)  # warm-up
        plain, hidden = [], []
        for _ in range(3 if quick else 7):
            plain.append(_best(lambda: discover(dataset), 1)[0])
            t, result = _best(lambda: discover(dataset, hidden_causes=True), 1)
            hidden.append(t)
        t_unlimited, unlimited = _best(
            lambda: discover(dataset, hidden_causes=True, pds_budget=None), 1)
        scores = {}
        seeds = range(3) if quick else range(20)
        # first the defaults a user gets (collider_rule=None: majority in this mode), then
        # other rules and a smaller α for comparison
        for rule, alpha in ((None, 0.05), ("standard", 0.05), ("conservative", 0.05),
                            ("majority", 0.001)):
            good_h = all_h = good_t = all_t = 0
            for seed in seeds:
                dag, data = _hidden_data(15, 2, 3, 5000, seed)
                s = ancestral_mark_scores(discover(data, hidden_causes=True, alpha=alpha,
                                                   collider_rule=rule), dag)
                good_h += round(s.arrowhead_precision * s.arrowheads)
                all_h += s.arrowheads
                good_t += round(s.tail_precision * s.tails)
                all_t += s.tails
            scores[(rule, alpha)] = (good_h / max(all_h, 1), all_h, good_t / max(all_t, 1), all_t)
    c = result.counts
    return {"variables": p, "rows": rows, "hidden": n_hidden,
            "plain_s": min(plain), "fci_s": min(hidden), "ratio": min(hidden) / min(plain),
            "tests_plain": discover(dataset).counts["tests"], "tests_fci": c["tests"],
            "pds_tests": c.get("pds_tests", 0), "pds_unfinished": c.get("pds_unfinished", 0),
            "pds_largest": c.get("pds_largest_set", 0),
            "unlimited_s": t_unlimited, "unlimited_ratio": t_unlimited / min(plain),
            "unlimited_tests": unlimited.counts["pds_tests"],
            "same_edges_unlimited": [e.arrow() for e in unlimited.edges]
            == [e.arrow() for e in result.edges],
            "scores": scores, "seeds": len(seeds)}


def format_hidden(fig: dict) -> str:
    rows = [f"| {'defaults: majority' if rule is None else rule}, α = {alpha:g} | "
            f"{h:.3f} ({nh} arrowheads) | {t:.3f} ({nt} tails) |"
            for (rule, alpha), (h, nh, t, nt) in fig["scores"].items()]
    default = fig["scores"][(None, 0.05)][0]
    return "\n".join([
        HIDDEN_SECTION, "",
        f"Speed: linear-Gaussian random DAG, {fig['variables']} observed variables, expected "
        f"degree 2, plus {fig['hidden']} hidden common causes (each of two random variables, "
        f"columns dropped), {fig['rows']:,} rows; Fisher's z, α = 0.05, other settings at "
        "their defaults (the hidden-causes search uses the majority collider rule). The search "
        "with and without `hidden_causes=True` on the same loaded data, interleaved, best of "
        "seven.", "",
        "| figure | value |", "| --- | --- |",
        f"| search without hidden causes | {fig['plain_s'] * 1e3:.0f} ms "
        f"({fig['tests_plain']:,} tests) |",
        f"| hidden-causes search (FCI), automatic budget of the possible-d-sep phase | "
        f"{fig['fci_s'] * 1e3:.0f} ms ({fig['tests_fci']:,} tests, {fig['pds_tests']:,} in "
        f"the possible-d-sep phase; {fig['pds_unfinished']} pair(s) left unfinished) |",
        f"| **FCI ÷ search without hidden causes** | **{fig['ratio']:.1f}** (target ≤ 5) |",
        f"| FCI with no budget (`pds_budget=None`) | {fig['unlimited_s'] * 1e3:.0f} ms, "
        f"ratio {fig['unlimited_ratio']:.1f} ({fig['unlimited_tests']:,} possible-d-sep "
        f"tests; same PAG as with the budget: {'yes' if fig['same_edges_unlimited'] else 'no'}"
        f") |",
        f"| largest possible-d-separating set (within the edge's biconnected component) | "
        f"{fig['pds_largest']} |",
        "",
        f"Precision of the marks, judged against the true DAG (an arrowhead at b on a *→ b is "
        f"right when b is not an ancestor of a; a tail at a is right when a is an ancestor of "
        f"b): 15 observed variables, degree 2, 3 hidden common causes, 5,000 rows, seeds "
        f"0–{fig['seeds'] - 1}, pooled (`discovery.metrics.ancestral_mark_scores`). Target: "
        f"arrowhead precision ≥ 0.9 — with the defaults ({default:.3f}): "
        f"{'**met**' if default >= 0.9 else '**not met**'}.", "",
        "| collider rule, α | arrowhead precision | tail precision |", "| --- | --- | --- |",
        *rows, "",
    ])


ROBUSTNESS_SECTION = "## Sweep and resampling"


def robustness_benchmarks(*, quick: bool = False, progress=print, repeat: int = 3) -> dict:
    """The survival sweep against its costliest rung, and resampling in-process against two
    local processes; peak traced memory of both (the calling process only)."""
    from .data import prepare_frame
    from .robustness import DEFAULT_ALPHAS, support, sweep
    from .search import discover
    from .simulate import random_dag, sample_linear_gaussian

    p, deg, n = (60, 3, 1000) if quick else (300, 3, 5000)
    rng = np.random.default_rng(20261202)
    dag = random_dag(p, expected_degree=deg, rng=rng)
    dataset = prepare_frame(sample_linear_gaussian(dag, n, rng=rng))
    progress(f"sweep benchmark: {p} variables, {n} rows, {len(DEFAULT_ALPHAS)} rungs")
    discover(dataset)  # warm-up
    rungs, sweeps = [[] for _ in DEFAULT_ALPHAS], []
    for _ in range(repeat):  # interleaved, so that both see the same machine load
        for k, alpha in enumerate(DEFAULT_ALPHAS):
            rungs[k].append(_best(lambda: discover(dataset, alpha=alpha), 1)[0])
        sweeps.append(_best(lambda: sweep(dataset), 1)[0])
    rung_best = [min(t) for t in rungs]
    costliest = max(rung_best)
    tracemalloc.start()
    sweep(dataset)
    sweep_peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()

    sp, sdeg, sn, b = (10, 2, 500, 20) if quick else (40, 2, 5000, 100)
    small = prepare_frame(sample_linear_gaussian(random_dag(sp, expected_degree=sdeg, rng=rng),
                                                 sn, rng=rng))
    progress(f"support benchmark: {b} bootstrap resamples of {sp} variables, {sn} rows")
    t_in, t_two, steal = [], [], [0.0, 0.0]
    for _ in range(repeat):  # interleaved; the host's steal time recorded for each kind
        for times, k, jobs in ((t_in, 0, None), (t_two, 1, 2)):
            before = steal_seconds()
            times.append(_best(lambda: support(small, resamples=b, seed=1, jobs=jobs), 1)[0])
            steal[k] += steal_seconds() - before
    tracemalloc.start()
    support(small, resamples=b, seed=1)
    support_peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return {"variables": p, "degree": deg, "rows": n, "rungs": len(DEFAULT_ALPHAS),
            "rung_s": rung_best, "costliest_s": costliest, "sum_rungs_s": sum(rung_best),
            "sweep_s": min(sweeps), "sweep_ratio": min(sweeps) / costliest,
            "sweep_peak_mib": sweep_peak / 2**20,
            "support_variables": sp, "support_rows": sn, "resamples": b,
            "support_in_process_s": min(t_in), "support_two_processes_s": min(t_two),
            "support_speedup": min(t_in) / min(t_two), "support_peak_mib": support_peak / 2**20,
            "support_pair_ratio": float(np.median([a / c for a, c in zip(t_in, t_two)])),
            "support_steal_s": steal, "support_runs": repeat,
            "load": os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")}


def format_robustness(fig: dict, machine: str, quick: bool) -> str:
    return "\n".join([
        ROBUSTNESS_SECTION, "",
        f"`discovery.sweep` over the default ladder ({fig['rungs']} log-spaced α from 1e-4 to "
        f"0.2) on the search benchmark's data ({fig['variables']} variables, expected degree "
        f"{fig['degree']}, {fig['rows']:,} rows, Fisher's z), against a fresh `discover` at "
        f"each rung; `discovery.support` with {fig['resamples']} bootstrap resamples of a "
        f"{fig['support_variables']}-variable, {fig['support_rows']:,}-row table, in-process "
        "against two local processes. Best of a few interleaved runs; peak memory by "
        "tracemalloc in the calling process (worker processes not included).", "",
        "| figure | value | target |", "| --- | --- | --- |",
        f"| costliest rung (fresh search) | {fig['costliest_s'] * 1e3:.0f} ms | |",
        f"| sum of the 12 fresh rungs | {fig['sum_rungs_s'] * 1e3:.0f} ms | |",
        f"| whole sweep (one shared cache and test) | {fig['sweep_s'] * 1e3:.0f} ms | |",
        f"| **sweep ÷ costliest rung** | **{fig['sweep_ratio']:.2f}** | ≤ 2 (goal 1.5) |",
        f"| sweep peak traced memory | {fig['sweep_peak_mib']:.0f} MiB | bounded |",
        f"| {fig['resamples']} resamples in-process | {fig['support_in_process_s']:.2f} s | |",
        f"| {fig['resamples']} resamples on 2 processes | "
        f"{fig['support_two_processes_s']:.2f} s | |",
        f"| **speed-up of 2 processes** (best over best) | **{fig['support_speedup']:.2f}×** "
        "| ≥ 1.6× |",
        f"| median of the {fig.get('support_runs', 1)} paired runs' ratios | "
        f"{fig.get('support_pair_ratio', float('nan')):.2f}× | |",
        f"| host steal during the resampling runs, in-process / 2 processes | "
        f"{fig.get('support_steal_s', [float('nan')] * 2)[0]:.2f} s / "
        f"{fig.get('support_steal_s', [float('nan')] * 2)[1]:.2f} s | |",
        f"| resampling peak traced memory (in-process) | {fig['support_peak_mib']:.0f} MiB | "
        "bounded |",
        "",
        f"Machine: {machine}; shared with other work (load average {fig['load']:.1f} when the "
        f"run ended). Measured {time.strftime('%Y-%m-%d')}" + (" (quick sizes)" if quick
                                                              else "") + ".",
        "",
    ])


def _extra_benchmarks(quick: bool) -> list[str]:
    """Run tests/benchmarks/bench_*.py of a source checkout, when present."""
    root = Path(__file__).resolve().parent.parent / "tests" / "benchmarks"
    sections = []
    for name, func in (("bench_tests.py", "main"), ("bench_parallel.py", "main"),
                       ("bench_gui.py", "gui_benchmarks")):
        path = root / name
        if not path.exists():
            continue
        spec = importlib.util.spec_from_file_location(f"_edgewise_{path.stem}", path)
        module = importlib.util.module_from_spec(spec)
        spec.loader.exec_module(module)
        fn = getattr(module, func, None)
        if fn is None:
            continue
        try:
            figures = fn(["--quick"] if quick and func == "main" else []) if func == "main" \
                else fn()
        except Exception as err:  # a broken extra benchmark must not hide the search figures
            sections.append(f"<!-- {name} failed: {type(err).__name__}: {err} -->")
            continue
        sections.append(f"{name}: " + ", ".join(f"{k} = {v:.4g}" if isinstance(v, float)
                                               else f"{k} = {v}" for k, v in figures.items()))
    return sections


def run_benchmarks(*, quick: bool = False, write: str | None = None) -> str:
    """Run every benchmark; return a Markdown report (and update ``write`` when given)."""
    import sys
    fig = search_benchmarks(quick=quick, progress=lambda m: print(m, file=sys.stderr))
    machine = machine_description()
    section = format_search(fig) + f"\nMachine: {machine}. Measured {time.strftime('%Y-%m-%d')}" \
        + (" (quick sizes)" if quick else "") + ".\n"
    controls = format_controls(controls_benchmarks(
        quick=quick, progress=lambda m: print(m, file=sys.stderr))) \
        + f"\nMachine: {machine}, shared with other work. Measured " \
        + f"{time.strftime('%Y-%m-%d')}" + (" (quick sizes)" if quick else "") + ".\n"
    hidden = hidden_causes_benchmarks(quick=quick, progress=lambda m: print(m, file=sys.stderr))
    hidden_section = format_hidden(hidden) + f"\nMachine: {machine}. Measured " \
        f"{time.strftime('%Y-%m-%d')}" + (" (quick sizes)" if quick else "") + \
        ", on a machine shared with other work (ratios are measured within one run).\n"
    robustness = format_robustness(robustness_benchmarks(
        quick=quick, progress=lambda m: print(m, file=sys.stderr)), machine, quick)
    if write:
        replace_section(Path(write), section)
        replace_section(Path(write), controls)
        replace_section(Path(write), hidden_section)
        replace_section(Path(write), robustness)
    section += "\n" + controls + "\n" + hidden_section + "\n" + robustness
    extras = _extra_benchmarks(quick)
    return section + ("\n" + "\n".join(extras) if extras else "")


def replace_section(path: Path, section: str) -> None:
    """Replace the Markdown section whose heading is ``section``'s first line (or append it);
    each benchmark owns one section of docs/benchmarks.md."""
    heading = section.splitlines()[0]
    text = path.read_text(encoding="utf-8") if path.exists() else "# Benchmarks\n\n"
    pattern = re.compile(rf"^{re.escape(heading)}\n.*?(?=^## |\Z)", re.S | re.M)
    if pattern.search(text):
        text = pattern.sub(lambda m: section + "\n", text, count=1)
    else:
        text = text.rstrip("\n") + "\n\n" + section
    path.write_text(text, encoding="utf-8")
