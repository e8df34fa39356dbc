"""Command-line parts for diagrams in and out: ``edgewise compare`` and the exchange options
of ``edgewise discover`` (``--edges``, ``--lock-diagram``, ``--truth``)."""

from __future__ import annotations

import argparse
from pathlib import Path

from .exceptions import DiscoveryError

__all__ = ["register", "add_discover_options", "discover_knowledge", "print_truth_scores"]


def register(sub) -> None:
    """Add ``compare`` to the subparsers."""
    c = sub.add_parser(
        "compare", help="list the edge-by-edge differences of two diagrams, with the SHD",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        description="Compare diagram A with diagram B edge by edge: which pairs are linked "
                    "in only one, reversed, or marked differently; the structural Hamming "
                    "distance; and A's adjacency and arrowhead precision and recall taking B "
                    "as the reference. Each diagram is a result JSON, DOT, GraphML or CSV "
                    "edge-list file.",
        epilog="example:\n  edgewise compare out/greenhouse.json "
               "example_sets/greenhouse/truth.csv")
    c.add_argument("a", metavar="A", help="first diagram (.json, .dot, .gv, .graphml, .csv)")
    c.add_argument("b", metavar="B", help="second diagram, the reference for the scores")
    c.add_argument("--json", metavar="FILE.json", dest="json_out",
                   help="also write the comparison as JSON")
    c.set_defaults(handler=_cmd_compare)


def _cmd_compare(args) -> int:
    from .cli import CommandError, _output_path, _write
    from .exchange import compare
    out = _output_path(args.json_out, "--json", [".json"])
    if out is not None and out.resolve() in {Path(args.a).resolve(), Path(args.b).resolve()}:
        raise CommandError(f"--json {out}: would overwrite an input file; choose another path")
    comparison = compare(args.a, args.b)
    if out is not None:
        import json

        from .files import write_text_atomic
        text = json.dumps(comparison.to_dict(), indent=1, ensure_ascii=False) + "\n"
        _write(out, "--json", lambda p: write_text_atomic(p, text))
    print(comparison.as_text())
    return 0


def add_discover_options(d) -> None:
    """The exchange options of ``discover``."""
    d.add_argument("--edges", metavar="FILE.csv",
                   help="write the edges as a CSV edge list (safe to open in a spreadsheet)")
    d.add_argument("--lock-diagram", metavar="FILE",
                   help="lock every edge of this diagram (.json, .dot, .graphml, .csv): its "
                        "directed edges as locked directions, the others as locked edges")
    d.add_argument("--truth", metavar="FILE",
                   help="a known diagram (.csv edge list, .graphml, .dot, .json) to score "
                        "the result against: skeleton and arrowhead precision/recall, SHD")


def discover_knowledge(args, knowledge, variables):
    """The knowledge of ``--knowledge`` with ``--lock-diagram``'s edges added."""
    if not getattr(args, "lock_diagram", None):
        return knowledge
    from .exchange import knowledge_from_diagram, merge_knowledge
    from .knowledge import Knowledge
    locked = knowledge_from_diagram(args.lock_diagram)
    locked.check_variables(variables, source=f"--lock-diagram {args.lock_diagram}")
    try:
        return merge_knowledge(knowledge or Knowledge(), locked)
    except DiscoveryError as err:
        raise DiscoveryError(f"--lock-diagram {args.lock_diagram}: {err}") from None


def read_truth(args, variables):
    """The ``--truth`` diagram, read and checked before the search so a bad file fails fast."""
    if not getattr(args, "truth", None):
        return None
    from .exchange import read_diagram
    truth = read_diagram(args.truth)
    unknown = sorted(set(variables) - set(truth.variables))
    if unknown:
        raise DiscoveryError(f"--truth {args.truth}: the diagram lacks variable(s) "
                             f"{unknown[:5]}; score against a diagram over the same variables")
    return truth


def print_truth_scores(result, truth, path) -> None:
    """Scores against the true diagram and against its equivalence class."""
    from .exchange import compare, diagram_result
    from .metrics import cpdag_of
    lines = [f"Scores against --truth {path}:"]
    targets = [("the diagram as given", truth)]
    if all(e.kind == "directed" for e in truth.edges):
        import networkx as nx
        dag = nx.DiGraph([(e.source, e.target) for e in truth.edges])
        dag.add_nodes_from(truth.variables)
        if nx.is_directed_acyclic_graph(dag):
            cpdag = cpdag_of(dag)
            edges = []
            for u, v in cpdag.edges:
                if cpdag.has_edge(v, u):
                    if u < v:
                        edges.append((u, v, "undirected"))
                else:
                    edges.append((u, v, "directed"))
            targets.append(("its equivalence class (CPDAG): the best the data alone can give",
                            diagram_result(truth.variables, edges, source=str(path))))
    for name, target in targets:
        c = compare(result, target)
        s, h = c.skeleton, c.arrowheads
        lines.append(f"  against {name}: SHD {c.shd}; skeleton precision {s['precision']:.3f}"
                     f" recall {s['recall']:.3f}; arrowhead precision {h['precision']:.3f} "
                     f"recall {h['recall']:.3f}")
    print("\n".join(lines))
