"""``edgewise controls``: which control sets are valid for a treatment and an outcome.

Reads a search result (JSON) or a known diagram (GraphML or a CSV edge list), answers with
the control sets of :func:`discovery.effects.control_sets`, checks a planned set, and with
``--data`` lists the effect range and the estimate for a valid set.
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path

__all__ = ["register", "run"]

_DIAGRAM_SUFFIXES = {".graphml": "graphml", ".csv": "edges", ".tsv": "edges", ".txt": "edges"}


def register(sub) -> None:
    """Add the ``controls`` command to the ``edgewise`` subparsers."""
    c = sub.add_parser(
        "controls", help="valid control sets for a treatment and an outcome",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        description="Say which control (adjustment) sets are valid for the effect of a "
                    "treatment on an outcome in every diagram of a search result's class "
                    "(or in a known diagram), check a planned set, and with --data list the "
                    "range of effects the data allow.",
        epilog="examples:\n  edgewise controls out/greenhouse.json --treatment humidity "
               "--outcome fruit_yield \\\n      --check \"air_temp\" --data "
               "example_sets/greenhouse/data.csv --out out/controls.json\n"
               "  edgewise controls example_sets/greenhouse/truth.csv --treatment humidity "
               "--outcome fruit_yield")
    c.add_argument("diagram", metavar="RESULT|DIAGRAM",
                   help="a search result (.json) or a known DAG (.graphml, or a CSV edge "
                        "list with columns from,to)")
    c.add_argument("--treatment", required=True, metavar="X", help="the treatment variable")
    c.add_argument("--outcome", required=True, metavar="Y", help="the outcome variable")
    c.add_argument("--check", metavar="A,B,...",
                   help="a planned control set to check (comma-separated; \"\" for none)")
    c.add_argument("--data", metavar="DATA",
                   help="data file (CSV, TSV or Parquet): adds the effect range and the "
                        "estimate with a 95%% confidence interval for a valid set")
    c.add_argument("--out", metavar="FILE.json", help="write the answer as JSON here")
    c.add_argument("--chart", metavar="FILE",
                   help="draw the effect range to a PNG, SVG or PDF file (needs --data)")
    c.add_argument("--quiet", action="store_true", help="no answer on stdout")


def _read_diagram(path: str):
    from .io import read_edge_list, read_graphml_dag
    from .result import load_result
    from .exceptions import DataValidationError
    suffix = Path(path).suffix.lower()
    if suffix == ".json":
        return load_result(path)
    kind = _DIAGRAM_SUFFIXES.get(suffix)
    if kind == "graphml":
        return read_graphml_dag(path)
    if kind == "edges":
        return read_edge_list(path)
    if suffix in (".dot", ".gv"):
        from . import io
        reader = getattr(io, "read_dot_dag", None)
        if reader is not None:
            return reader(path)
    raise DataValidationError(f"{path}: cannot read a diagram from a '{suffix or 'no'}' "
                              "file; give a result .json, a .graphml or a CSV edge list "
                              "(from,to)")


def run(args, *, error, output_path, caution) -> int:
    """Run the command; ``error`` builds the command's one-line error."""
    from .data import read_table
    from .effects import control_sets, draw_effect_range, effect_range, estimate_effect
    from .files import same_file, write_all_or_nothing

    out = output_path(args.out, "--out", [".json"])
    chart = output_path(args.chart, "--chart", [".png", ".svg", ".pdf"])
    if chart is not None and not args.data:
        raise error("--chart needs --data (the chart shows effects estimated from data)")
    inputs = [args.diagram] + ([args.data] if args.data else [])
    for option, path in (("--out", out), ("--chart", chart)):
        if path is not None and any(Path(i).exists() and same_file(path, i) for i in inputs):
            raise error(f"{option} {path}: would overwrite an input file; choose another path")
    graph = _read_diagram(args.diagram)
    answer = control_sets(graph, args.treatment, args.outcome)
    verdict = answer.check(args.check) if args.check is not None else None
    effects = chosen = None
    notes = []
    if args.data:
        dataset = read_table(args.data)
        planned = verdict.set if verdict is not None and verdict.valid else None
        use = planned if planned is not None else answer.optimal if answer.optimal is not None \
            else answer.canonical
        if answer.kind != "pag":
            effects = effect_range(graph, dataset, args.treatment, args.outcome,
                                   controls=use)
            chosen = effects.chosen
        elif use is not None:
            chosen = estimate_effect(dataset, args.treatment, args.outcome, use, graph=graph)
            notes.append("no effect range for a PAG (hidden causes allowed); the estimate "
                         "uses a valid set")
        if use is None:
            notes.append("no valid set, so no estimate of the effect is given")
    doc = answer.to_dict(check=verdict, effects=effects)
    if chosen is not None and effects is None:
        doc["estimate"] = chosen.to_dict()
    doc["notes"] = doc["notes"] + notes
    outputs = []
    if out is not None:
        text = json.dumps(doc, indent=1, ensure_ascii=False) + "\n"
        outputs.append((out, lambda p: Path(p).write_text(text, encoding="utf-8")))
    if chart is not None and effects is not None:
        outputs.append((chart, lambda p: draw_effect_range(effects).savefig(
            p, format=chart.suffix.lstrip(".").lower(), dpi=150, facecolor="#F7F6F3")))
    if outputs:
        try:
            for path, _ in outputs:
                path.parent.mkdir(parents=True, exist_ok=True)
            write_all_or_nothing(outputs)
        except OSError as err:
            raise error(f"cannot write {err.filename or 'an output'} "
                        f"({err.strerror or err}); choose another path") from None
    if not args.quiet:
        print(answer.as_text(check=verdict).rsplit("\nCautions: ", 1)[0])
        if effects is not None:
            print(effects.as_text())
        elif chosen is not None:
            print(chosen.as_text())
        for n in notes:
            print(f"Note: {n}")
        if outputs:
            print("Wrote: " + ", ".join(str(p) for p, _ in outputs))
        print("\nCautions: " + " ".join(answer.cautions))
        print(caution)
    return 0
