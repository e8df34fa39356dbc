"""The ``edgewise`` command: discover, explain, simulate, bench, gui.

Every command has ``--help`` with an example. Errors are one line on stderr and a non-zero exit
(2 for bad input, 1 for anything unexpected), never a traceback; input files are never
modified. Long work shows progress on stderr.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
import warnings
from concurrent.futures import BrokenExecutor
from pathlib import Path

from .exceptions import DiscoveryError

__all__ = ["main"]

CAUTION = ("Caution: these are hypotheses, sound only without hidden common causes or feedback "
           "loops, under faithfulness, i.i.d. rows and a fitting test; weigh them with study "
           "design and expert judgement (see the README).")


CAUTION_HIDDEN = ("Caution: these are hypotheses; hidden common causes are allowed, but the "
                  "search assumes no feedback loops, no selection bias, faithfulness, i.i.d. "
                  "rows and a fitting test; a circle (o) marks an end the data could not "
                  "decide. Weigh them with study design and expert judgement.")


class CommandError(DiscoveryError):
    """A command-line problem (bad option value, unwritable output)."""


def _build_parser() -> argparse.ArgumentParser:
    from .independence import TEST_NAMES
    from .settings import COLLIDER_RULES, MISSING_POLICIES

    parser = argparse.ArgumentParser(
        prog="edgewise",
        description="Edgewise: search a table of measurements for the equivalence class of "
                    "causal diagrams that fits its independence pattern.",
        epilog="Run 'edgewise COMMAND --help' for each command's options and an example.")
    parser.add_argument("--version", action="version", version=f"edgewise {_version()}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    d = sub.add_parser(
        "discover", help="search a data file for its causal equivalence class",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        description="Search DATA (CSV, TSV or Parquet) for the equivalence class of causal "
                    "diagrams that fits its conditional independences.",
        epilog="example:\n  edgewise discover example_sets/greenhouse/data.csv \\\n"
               "      --knowledge example_sets/greenhouse/knowledge.toml \\\n"
               "      --alpha 0.01 --out out/greenhouse.json --figure out/greenhouse.png\n"
               "  edgewise discover example_sets/office_building/data.csv --hidden-causes \\\n"
               "      --out out/office-pag.json\n"
               "  edgewise discover example_sets/bakery_proofing/data.csv --test kci --jobs 2")
    d.add_argument("data", nargs="?", help="CSV, TSV or Parquet file, one column per variable")
    d.add_argument("--test", default="fisher-z", choices=sorted(TEST_NAMES),
                   help="independence test (default: fisher-z)")
    d.add_argument("--alpha", type=float, default=0.05,
                   help="significance level in (0, 1); a pair is independent when p > alpha "
                        "(default: 0.05)")
    d.add_argument("--max-depth", type=int, default=None, metavar="N",
                   help="largest conditioning-set size (default: no limit)")
    d.add_argument("--knowledge", metavar="FILE",
                   help="knowledge file (TOML or JSON): locked/forbidden edges and "
                        "directions, stages")
    d.add_argument("--collider-rule", default=None, choices=COLLIDER_RULES,
                   help="how unshielded triples are judged colliders (default: standard; "
                        "majority with --hidden-causes, Colombo & Maathuis 2014)")
    d.add_argument("--missing", default="drop", choices=MISSING_POLICIES,
                   help="drop rows with any missing value, or delete test-wise "
                        "(default: drop)")
    d.add_argument("--hidden-causes", action="store_true", dest="hidden_causes",
                   help="allow unmeasured common causes (FCI): the result is a partial "
                        "ancestral graph with o→, ↔ and o–o edges (docs/hidden-causes.md)")
    d.add_argument("--pds-budget", default="auto", metavar="N|none", dest="pds_budget",
                   help="with --hidden-causes: most tests of the possible-d-separating-set "
                        "phase ('none': no limit; default: four times the adjacency "
                        "search's tests, at least 5,000)")
    d.add_argument("--columns", metavar="A,B,...",
                   help="comma-separated columns to use (default: all usable; a column "
                        "named here is kept even if it looks like an identifier or a date)")
    d.add_argument("--exclude", metavar="A,B,...",
                   help="comma-separated columns to leave out")
    d.add_argument("--include", metavar="A,B,...",
                   help="keep these columns although they look like an identifier, a date "
                        "or free text (left out by default, with a note)")
    d.add_argument("--sep", metavar="CHAR",
                   help="column separator (default: detected from , ; tab |); write \\t "
                        "or tab for tab")
    d.add_argument("--decimal", metavar="CHAR", default=".",
                   help="decimal mark, . (default) or , as in 1,5")
    d.add_argument("--thousands", metavar="CHAR",
                   help="thousands separator, e.g. , as in 1,250 (default: none)")
    d.add_argument("--na-values", metavar="A,B,...", dest="na_values",
                   help="more cell contents that mean missing, comma-separated (besides "
                        "empty, NA, N/A, n/a, #N/A, NaN, null, ?, - and .)")
    d.add_argument("--explain", action="append", default=[], metavar="A,B",
                   help="after the search, print the evidence for the pair A,B "
                        "(repeatable)")
    from .settings import PARAMETERS, UNRELATED_RULES
    d.add_argument("--unrelated", default="significance", choices=UNRELATED_RULES,
                   help=PARAMETERS["unrelated"].help + " (default: significance)")
    d.add_argument("--margin", type=float, default=None, metavar="DELTA",
                   help=PARAMETERS["margin"].help)
    d.add_argument("--test-option", action="append", default=[], metavar="NAME=VALUE",
                   dest="test_option",
                   help="an option of the chosen test, repeatable (e.g. --test-option "
                        "seed=3); 'edgewise discover --list-test-options' lists them")
    d.add_argument("--list-test-options", action="store_true",
                   help="list every test's options and exit")
    d.add_argument("--jobs", type=int, default=1, metavar="N",
                   help="processes that compute tests which are not vectorised: this one and "
                        "N-1 local workers; -1: one per CPU core (default: 1)")
    d.add_argument("--cluster", metavar="ADDRESS",
                   help="run those tests on a Dask cluster, e.g. tcp://SCHEDULER-HOST:8786 "
                        "(needs edgewise[cluster]; see docs/parallel.md)")
    d.add_argument("--out", metavar="FILE.json", help="write the result JSON here")
    d.add_argument("--dot", metavar="FILE.dot", help="write the diagram as Graphviz DOT")
    d.add_argument("--graphml", metavar="FILE.graphml", help="write the diagram as GraphML")
    d.add_argument("--figure", metavar="FILE",
                   help="draw the diagram to a PNG, SVG or PDF file")
    d.add_argument("--quiet", action="store_true",
                   help="no progress on stderr and no summary on stdout")
    from . import cli_exchange
    cli_exchange.add_discover_options(d)

    s = sub.add_parser(
        "simulate", help="write linear-Gaussian data from a random or given diagram",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        description="Write linear-Gaussian data from a random DAG, or from a diagram given as "
                    "an edge list (CSV with columns from,to) or GraphML.",
        epilog="example:\n  edgewise simulate --nodes 15 --degree 2 --rows 2000 --seed 1 \\\n"
               "      --out out/sim.csv --truth out/sim-truth.csv")
    s.add_argument("--diagram", metavar="FILE",
                   help="edge list CSV (from,to) or GraphML of the true diagram")
    s.add_argument("--nodes", type=int, default=10, help="variables of a random DAG "
                                                          "(default: 10)")
    s.add_argument("--degree", type=float, default=2.0,
                   help="expected degree of a random DAG (default: 2)")
    s.add_argument("--rows", type=int, default=1000, help="rows to draw (default: 1000)")
    s.add_argument("--seed", type=int, default=None, help="random seed (default: fresh)")
    s.add_argument("--out", required=True, metavar="FILE.csv", help="data file to write")
    s.add_argument("--truth", metavar="FILE.csv", help="write the true edges (from,to) here")

    b = sub.add_parser(
        "bench", help="measure the search's speed and memory on simulated data",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        description="Benchmarks of the search (and, when present, of the other independence "
                    "tests and the window). Prints a Markdown table.",
        epilog="example:\n  edgewise bench --quick\n  edgewise bench --write docs/benchmarks.md")
    b.add_argument("--quick", action="store_true", help="small sizes, for a smoke run")
    b.add_argument("--write", metavar="FILE.md",
                   help="replace the search section of this Markdown file with the figures")

    from . import cli_explain
    cli_explain.register(sub)

    g = sub.add_parser(
        "gui", help="open the desktop window",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        description="Open the Edgewise window, optionally with a data file or a saved "
                    ".edgewise session.",
        epilog="example:\n  edgewise gui example_sets/greenhouse/data.csv")
    g.add_argument("path", nargs="?", help="data file or .edgewise session to open")
    from . import cli_exchange
    from .cli_controls import register as register_controls
    from .report import cli as report_cli
    cli_exchange.register(sub)
    report_cli.register(sub)
    register_controls(sub)
    from . import cli_robustness
    cli_robustness.register(sub)
    return parser


def _version() -> str:
    from . import __version__
    return __version__


def main(argv=None) -> int:
    """Run the command line; returns the exit status."""
    parser = _build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return 2
    from . import cli_explain
    from .cli_robustness import HANDLERS as robustness_handlers
    handler = getattr(args, "handler", None) or {
        "discover": _cmd_discover, "simulate": _cmd_simulate, "bench": _cmd_bench,
        "gui": _cmd_gui, "explain": cli_explain.run, "controls": _cmd_controls,
        **robustness_handlers}[args.command]
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # notes reach the user through the result
            return handler(args)
    except DiscoveryError as err:
        print(f"edgewise {args.command}: error: {err}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(f"edgewise {args.command}: stopped", file=sys.stderr)
        return 130
    except BrokenPipeError:  # the reader (e.g. `| head`) went away: not an error of ours
        try:
            sys.stdout = open(os.devnull, "w")
        except OSError:
            pass
        return 0
    except BrokenExecutor as err:  # a worker process died (killed, out of memory)
        print(f"edgewise {args.command}: error: a worker process stopped before it finished "
              f"({' '.join(str(err).split())[:160]}); nothing was written — run again with "
              "fewer --jobs", file=sys.stderr)
        return 1
    except Exception as err:  # the one place that turns a bug into one line, not a traceback
        print(f"edgewise {args.command}: unexpected error ({type(err).__name__}: {err}); "
              "please report it with the command you ran", file=sys.stderr)
        return 1


class _Progress:
    """Progress on stderr, shown only once a run has taken more than a moment, and only when
    stderr is a terminal (a log file gets no carriage returns) and not ``--quiet``."""

    def __init__(self, delay: float = 0.7, *, enabled: bool | None = None):
        self.started = time.perf_counter()
        self.delay = delay
        self.shown = False
        if enabled is None:
            enabled = _is_terminal(sys.stderr)
        self.enabled = enabled

    def __call__(self, event: dict):
        if not self.enabled:
            return
        elapsed = time.perf_counter() - self.started
        if elapsed < self.delay:
            return
        self.shown = True
        print(f"\r{event['phase']} level {event['level']}: {event['done']:,} of "
              f"{event['planned']:,} tests, {elapsed:.1f} s   ", end="", file=sys.stderr,
              flush=True)

    def close(self):
        if self.shown:
            print(file=sys.stderr)


def _is_terminal(stream) -> bool:
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):  # replaced or closed streams
        return False


def _names(value: str | None) -> list[str] | None:
    """``"a, b"`` -> ``["a", "b"]``; None stays None."""
    if value is None:
        return None
    return [c.strip() for c in value.split(",") if c.strip()]


def _output_path(value: str | None, option: str, suffixes=None) -> Path | None:
    if value is None:
        return None
    path = Path(value)
    if suffixes and path.suffix.lower() not in suffixes:
        raise CommandError(f"{option} {value}: the file name must end in "
                           f"{' or '.join(suffixes)}")
    if path.is_dir():
        raise CommandError(f"{option} {value}: is a folder; give a file name")
    return path


def _write(path: Path, option: str, writer) -> None:
    """Write one output atomically (see :func:`_write_outputs`)."""
    _write_outputs([(option, path, writer)])


def _write_outputs(outputs) -> None:
    """Write a command's ``(option, path, writer)`` outputs together or not at all: each is
    rendered to a temporary file beside its destination, and they are put in place only when
    every one was rendered, so a failure never leaves some outputs new and others old."""
    from .files import write_all_or_nothing

    def guarded(option, path, writer):
        def write(tmp):
            try:
                writer(tmp)
            except OSError as err:
                raise CommandError(f"{option} {path}: cannot write ({err.strerror or err}); "
                                   "choose another path") from None
        return write

    staged = [(path, guarded(option, path, writer)) for option, path, writer in outputs
              if path is not None]
    try:
        write_all_or_nothing(staged)
    except OSError as err:
        raise CommandError(f"{err.filename or 'output'}: cannot write "
                           f"({err.strerror or err}); choose another path") from None


def _guard_outputs(outputs: dict, inputs) -> None:
    """Refuse an output that is one of the inputs (same path or a hard link to it) or that
    another output also names."""
    from .files import same_file
    inputs = [Path(p) for p in inputs if p]
    named = [(option, path) for option, path in outputs.items() if path is not None]
    for i, (option, path) in enumerate(named):
        for source in inputs:
            if same_file(path, source):
                raise CommandError(f"{option} {path}: would overwrite an input file ({source}); "
                                   "choose another path")
        for other, other_path in named[:i]:
            if same_file(path, other_path):
                raise CommandError(f"{option} {path}: {other} names the same file; give each "
                                   "output its own path")


def _cmd_discover(args) -> int:
    from .data import read_table
    from .executor import make_executor
    from .knowledge import read_knowledge
    from .search import discover

    if args.list_test_options:
        from .independence import TEST_NAMES, TEST_OPTIONS
        for name, desc in TEST_NAMES.items():
            print(f"{name}: {desc}")
            for option, text in TEST_OPTIONS.get(name, {}).items():
                print(f"    {option}: {text}")
        return 0
    if args.data is None:
        raise CommandError("give a data file (CSV, TSV or Parquet); see 'edgewise discover "
                           "--help'")
    test_options = _parse_test_options(args.test_option, args.test)
    outputs = {
        "--out": _output_path(args.out, "--out", [".json"]),
        "--dot": _output_path(args.dot, "--dot", [".dot", ".gv"]),
        "--graphml": _output_path(args.graphml, "--graphml", [".graphml"]),
        "--figure": _output_path(args.figure, "--figure", [".png", ".svg", ".pdf"]),
        "--edges": _output_path(args.edges, "--edges", [".csv"]),
    }
    _guard_outputs(outputs, [args.data, args.knowledge, args.lock_diagram, args.truth])
    from .cli_explain import check_names, explain_pair, parse_pair
    pairs = [parse_pair(text) for text in args.explain]
    dataset = read_table(args.data, columns=_names(args.columns), exclude=_names(args.exclude),
                         include=_names(args.include), missing=args.missing, sep=args.sep,
                         decimal=args.decimal, thousands=args.thousands,
                         na_values=_names(args.na_values))
    knowledge = read_knowledge(args.knowledge) if args.knowledge else None
    if knowledge is not None:
        # a name absent from the file is an error; knowledge about a column that is in the
        # file but not searched is dropped with a note by the search
        knowledge.check_variables(dataset.kinds, source=args.knowledge)
    from .cli_exchange import discover_knowledge, print_truth_scores, read_truth
    knowledge = discover_knowledge(args, knowledge, dataset.variables)
    truth = read_truth(args, dataset.variables)
    for a, b in pairs:  # checked before a possibly long search
        check_names(dataset.variables, a, b, where="the search's variables")
    progress = _Progress(enabled=False if args.quiet else None)
    with make_executor(args.jobs, cluster=args.cluster) as executor:
        try:
            result = discover(dataset, test=args.test, alpha=args.alpha,
                              max_depth=args.max_depth, knowledge=knowledge,
                              collider_rule=args.collider_rule, executor=executor,
                              progress=progress, test_options=test_options or None,
                              hidden_causes=args.hidden_causes,
                              pds_budget=_pds_budget(args.pds_budget),
                              unrelated=args.unrelated, margin=args.margin)
        finally:
            progress.close()
    from .drawing import draw_result
    from .exchange import write_edge_csv
    from .io import write_dot, write_graphml
    saved = {}
    _write_outputs([
        ("--out", outputs["--out"], lambda p: saved.update(omitted=result.write_json(p))),
        ("--dot", outputs["--dot"], lambda p: write_dot(result, p)),
        ("--graphml", outputs["--graphml"], lambda p: write_graphml(result, p)),
        ("--figure", outputs["--figure"], lambda p: draw_result(result, p)),
        ("--edges", outputs["--edges"], lambda p: write_edge_csv(result, p)),
    ])
    if saved.get("omitted"):
        from .files import MAX_DOCUMENT_BYTES
        print(f"edgewise discover: note: {outputs['--out']} holds the result without the "
              f"evidence of its {saved['omitted']:,} tests, too large to store (a result file "
              f"is read back up to {MAX_DOCUMENT_BYTES / 2**20:,.0f} MiB); edges, removed pairs "
              f"and separating sets are all there; add --explain A,B to see a pair's tests",
              file=sys.stderr)
    if truth is not None:
        print_truth_scores(result, truth, args.truth)
    if not args.quiet:
        print(result.summary().as_text(assumptions=False))
        written = [f"{opt} {p}" for opt, p in outputs.items() if p is not None]
        if written:
            print("\nWrote: " + ", ".join(str(p) for p in outputs.values() if p is not None))
        print("\n" + (CAUTION_HIDDEN if args.hidden_causes else CAUTION))
    for a, b in pairs:  # asked for explicitly: printed even with --quiet
        print(("\n" if not args.quiet else "") + explain_pair(result, a, b))
    return 0


def _pds_budget(value: str):
    """``--pds-budget``: 'auto', 'none' or a count of tests."""
    if value in ("auto", "none"):
        return None if value == "none" else "auto"
    try:
        budget = int(value)
    except ValueError:
        budget = -1
    if budget < 0:
        raise CommandError(f"--pds-budget {value}: give a number of tests (0 or more), "
                           "'auto' or 'none'")
    return budget


def _parse_test_options(items, test) -> dict:
    """``["seed=3", "null=simulated"]`` -> ``{"seed": 3, "null": "simulated"}``."""
    from .independence import TEST_OPTIONS
    allowed = TEST_OPTIONS.get(test, {})
    out = {}
    for item in items:
        name, sep, raw = item.partition("=")
        name = name.strip()
        if not sep or not name:
            raise CommandError(f"--test-option {item!r}: write NAME=VALUE, e.g. seed=3")
        if name not in allowed:
            choices = ", ".join(allowed) or "none"
            raise CommandError(f"--test-option {name}: the {test} test has no such option "
                               f"(its options: {choices})")
        value: object = raw.strip()
        for convert in (int, float):
            try:
                value = convert(raw)
                break
            except ValueError:
                continue
        out[name] = value
    return out


def _cmd_simulate(args) -> int:
    import numpy as np

    from .simulate import random_dag, sample_linear_gaussian

    from .resources import check_simulation_memory

    out = _output_path(args.out, "--out", [".csv"])
    truth_path = _output_path(args.truth, "--truth", [".csv"])
    _guard_outputs({"--out": out, "--truth": truth_path}, [args.diagram])
    if args.rows < 1:
        raise CommandError(f"--rows {args.rows}: must be at least 1")
    rng = np.random.default_rng(args.seed)
    if args.diagram:
        from .io import read_edge_list, read_graphml_dag
        reader = read_graphml_dag if args.diagram.lower().endswith(".graphml") \
            else read_edge_list
        dag = reader(args.diagram)
    else:
        if args.nodes < 2:
            raise CommandError(f"--nodes {args.nodes}: must be at least 2")
        if not 0 <= args.degree <= args.nodes - 1:
            raise CommandError(f"--degree {args.degree}: must be between 0 and nodes - 1 "
                               f"({args.nodes - 1})")
        check_simulation_memory(args.rows, args.nodes)
        dag = random_dag(args.nodes, expected_degree=args.degree, rng=rng)
    check_simulation_memory(args.rows, dag.number_of_nodes())
    frame = sample_linear_gaussian(dag, args.rows, rng=rng)
    import pandas as pd
    edges = pd.DataFrame(sorted(dag.edges), columns=["from", "to"])
    _write_outputs([("--out", out, lambda p: frame.to_csv(p, index=False)),
                    ("--truth", truth_path, lambda p: edges.to_csv(p, index=False))])
    print(f"Wrote {args.rows} rows of {dag.number_of_nodes()} variables "
          f"({dag.number_of_edges()} true edges) to {out}"
          + (f"; true edges to {truth_path}" if truth_path else ""))
    return 0


def _cmd_bench(args) -> int:
    from .bench import run_benchmarks
    report = run_benchmarks(quick=args.quick, write=args.write)
    print(report)
    return 0


def _cmd_controls(args) -> int:
    from .cli_controls import run
    return run(args, error=CommandError, output_path=_output_path, caution=CAUTION)


def _cmd_gui(args) -> int:
    if args.path is not None and not Path(args.path).exists():
        raise CommandError(f"{args.path}: file not found; check the path")
    try:
        from gui.app import main as gui_main
    except ImportError as err:
        raise CommandError(f"the window cannot start: {err}; reinstall Edgewise with its "
                           "dependencies (pip install edgewise)") from None
    return gui_main(args.path)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
