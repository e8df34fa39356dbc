"""The ``edgewise sweep`` and ``edgewise support`` commands (registered by :mod:`.cli`)."""

from __future__ import annotations

import argparse
from pathlib import Path

__all__ = ["register", "HANDLERS"]

_SEARCH_HELP = "search options as for 'edgewise discover'"


def _search_options(p, *, alpha: bool = True) -> None:
    from .independence import TEST_NAMES
    from .settings import COLLIDER_RULES, MISSING_POLICIES, UNRELATED_RULES
    p.add_argument("data", help="CSV, TSV or Parquet file, one column per variable")
    p.add_argument("--test", default="fisher-z", choices=sorted(TEST_NAMES),
                   help="independence test (default: fisher-z)")
    if alpha:
        p.add_argument("--alpha", type=float, default=0.05,
                       help="significance level in (0, 1) (default: 0.05)")
    p.add_argument("--max-depth", type=int, default=None, metavar="N",
                   help="largest conditioning-set size (default: no limit)")
    p.add_argument("--knowledge", metavar="FILE", help="knowledge file (TOML or JSON)")
    p.add_argument("--collider-rule", default=None, choices=COLLIDER_RULES,
                   help="how unshielded triples are judged colliders (default: standard; "
                        "majority with --hidden-causes, Colombo & Maathuis 2014)")
    p.add_argument("--hidden-causes", action="store_true", dest="hidden_causes",
                   help="allow unmeasured common causes (FCI) in every search: partial "
                        "ancestral graphs (docs/hidden-causes.md)")
    p.add_argument("--missing", default="drop", choices=MISSING_POLICIES,
                   help="drop incomplete rows, or delete test-wise (default: drop)")
    p.add_argument("--columns", metavar="A,B,...", help="comma-separated columns to include")
    p.add_argument("--unrelated", default="significance", choices=UNRELATED_RULES,
                   help="what makes a pair unrelated: p > alpha ('significance', the "
                        "default) or two one-sided tests within --margin ('equivalence')")
    p.add_argument("--margin", type=float, default=None, metavar="DELTA",
                   help="equivalence margin in (0, 1), a partial correlation (with "
                        "--unrelated equivalence)")
    p.add_argument("--quiet", action="store_true", help="no table on stdout")


def register(sub) -> None:
    """Add the ``sweep`` and ``support`` sub-commands to the parser's subparsers."""
    s = sub.add_parser(
        "sweep", help="repeat the search over a ladder of alpha (or margin) values",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        description="Run the search at every rung of a ladder of significance levels (or of "
                    "equivalence margins) and report each edge's survival range: the rungs "
                    "at which it is present, with its mark at each.",
        epilog="examples:\n  edgewise sweep example_sets/greenhouse/data.csv --out out/s.json "
               "\\\n      --csv out/s.csv --figure out/s.png\n"
               "  edgewise sweep example_sets/greenhouse/data.csv --alphas 0.001,0.01,0.05,0.1 \\\n"
               "      --out out/s.json\n"
               "  edgewise sweep example_sets/greenhouse/data.csv --margins 0.02,0.05,0.1 \\\n"
               "      --alpha 0.05 --out out/s.json")
    _search_options(s)
    s.add_argument("--alphas", metavar="A1,A2,...",
                   help="increasing alpha values in (0, 1) (default: 12 log-spaced rungs "
                        "from 1e-4 to 0.2)")
    s.add_argument("--margins", metavar="D1,D2,...",
                   help="sweep the equivalence margin instead (increasing, in (0, 1)); uses "
                        "--unrelated equivalence at --alpha")
    s.add_argument("--out", metavar="FILE.json", help="write the sweep JSON here")
    s.add_argument("--csv", metavar="FILE.csv", help="write one row per pair here")
    s.add_argument("--figure", metavar="FILE", help="chart of the sweep (PNG, SVG or PDF)")

    r = sub.add_parser(
        "support", help="resampling support of every edge and orientation",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        description="Search resampled copies of the data (bootstrap or half-size "
                    "subsamples) and report, for every pair, the share of resamples in which "
                    "it is adjacent and in each orientation, with a consensus diagram.",
        epilog="examples:\n  edgewise support example_sets/greenhouse/data.csv --resamples 100 "
               "\\\n      --seed 1 --jobs 2 --out out/support.json --csv out/support.csv\n"
               "  edgewise support example_sets/greenhouse/data.csv --method subsample \\\n"
               "      --cutoff 0.8 --figure out/s.png")
    _search_options(r)
    r.add_argument("--resamples", type=int, default=100, metavar="B",
                   help="number of resamples (default: 100)")
    r.add_argument("--method", default="bootstrap", choices=("bootstrap", "subsample"),
                   help="rows with replacement, or half the rows without (default: "
                        "bootstrap)")
    r.add_argument("--seed", type=int, default=None, help="random seed (default: fresh, "
                                                         "recorded in the output)")
    r.add_argument("--cutoff", type=float, default=0.5,
                   help="support needed to enter the consensus diagram, in (0, 1] "
                        "(default: 0.5)")
    r.add_argument("--jobs", type=int, default=1, metavar="N",
                   help="processes that compute: this one and N-1 local workers "
                        "(default: 1, in-process)")
    r.add_argument("--cluster", metavar="tcp://HOST:PORT",
                   help="address of a Dask scheduler to run the resamples on")
    r.add_argument("--out", metavar="FILE.json", help="write the support JSON here")
    r.add_argument("--csv", metavar="FILE.csv", help="write one row per pair here")
    r.add_argument("--figure", metavar="FILE", help="chart of the support (PNG, SVG or PDF)")
    r.add_argument("--consensus", metavar="FILE.json",
                   help="write the consensus diagram as a result-like JSON of edges")


def _floats(text: str, option: str) -> list[float]:
    from .cli import CommandError
    try:
        return [float(v) for v in text.split(",") if v.strip()]
    except ValueError:
        raise CommandError(f"{option} {text}: give numbers separated by commas, e.g. "
                           "0.01,0.05,0.1") from None


def _outputs(args, inputs) -> dict:
    """The requested output paths, checked before any work (suffix, folder, not an input)."""
    from .cli import CommandError, _output_path
    from .files import same_file
    outputs = {
        "--out": _output_path(args.out, "--out", [".json"]),
        "--csv": _output_path(args.csv, "--csv", [".csv"]),
        "--figure": _output_path(args.figure, "--figure", [".png", ".svg", ".pdf"]),
    }
    if getattr(args, "consensus", None):
        outputs["--consensus"] = _output_path(args.consensus, "--consensus", [".json"])
    for option, path in outputs.items():
        if path is not None and any(same_file(path, i) for i in inputs):
            raise CommandError(f"{option} {path}: would overwrite an input file; choose "
                               "another path")
    seen = {}
    for option, path in outputs.items():
        if path is not None:
            key = str(path.resolve())
            if key in seen:
                raise CommandError(f"{option} {path}: the same file as {seen[key]}; give "
                                   "each output its own path")
            seen[key] = option
    return outputs


def _common(args):
    from .data import read_table
    from .knowledge import read_knowledge
    inputs = [Path(args.data)] + ([Path(args.knowledge)] if args.knowledge else [])
    outputs = _outputs(args, inputs)
    columns = [c.strip() for c in args.columns.split(",") if c.strip()] if args.columns \
        else None
    dataset = read_table(args.data, columns=columns, missing=args.missing)
    knowledge = read_knowledge(args.knowledge) if args.knowledge else None
    if knowledge is not None:
        knowledge.check_variables(dataset.variables, source=args.knowledge)
    options = {"test": args.test, "max_depth": args.max_depth, "knowledge": knowledge,
               "collider_rule": args.collider_rule}
    if args.hidden_causes:
        options["hidden_causes"] = True
    if args.unrelated != "significance" or args.margin is not None:
        options.update(unrelated=args.unrelated, margin=args.margin)
    return dataset, options, outputs


def _write_outputs(record, outputs, *, figure) -> None:
    from .cli import CommandError
    from .files import write_all_or_nothing
    staged = []
    if outputs.get("--out"):
        staged.append((outputs["--out"],
                       lambda p: p.write_text(record.to_json() + "\n", encoding="utf-8")))
    if outputs.get("--csv"):
        staged.append((outputs["--csv"],
                       lambda p: p.write_text(record.to_csv(), encoding="utf-8")))
    if outputs.get("--figure"):
        fmt = outputs["--figure"].suffix.lower()[1:]
        staged.append((outputs["--figure"],
                       lambda p: figure().savefig(p, format=fmt, dpi=150,
                                                  facecolor="#F7F6F3")))
    if outputs.get("--consensus"):
        import json
        doc = {"format": "edgewise-consensus", "version": 1, "method": record.method,
               "cutoff": record.cutoff, "variables": list(record.variables),
               "edges": [e.to_dict() for e in record.consensus],
               "cautions": list(record.cautions)}
        staged.append((outputs["--consensus"], lambda p: p.write_text(
            json.dumps(doc, indent=1, ensure_ascii=False) + "\n", encoding="utf-8")))
    if not staged:
        return
    try:
        write_all_or_nothing(staged)
    except OSError as err:
        raise CommandError(f"cannot write the outputs ({err.strerror or err}); choose "
                           "another path; nothing was written") from None


class _Progress:
    """``sweep: 4 of 12 rungs, 3.1 s`` on stderr, once a run takes more than a moment."""

    def __init__(self, unit: str, delay: float = 0.7):
        import time
        self.clock = time.perf_counter
        self.started = self.clock()
        self.unit, self.delay, self.shown = unit, delay, False

    def __call__(self, event: dict):
        import sys
        elapsed = self.clock() - self.started
        if elapsed >= self.delay and event.get("phase") in ("sweep", "support"):
            self.shown = True
            print(f"\r{event['phase']}: {event['done']} of {event['planned']} {self.unit}, "
                  f"{elapsed:.1f} s   ", end="", file=sys.stderr, flush=True)

    def close(self):
        import sys
        if self.shown:
            print(file=sys.stderr)


def _cmd_sweep(args) -> int:
    from .cli import CAUTION, CAUTION_HIDDEN
    from .robustness import sweep
    dataset, options, outputs = _common(args)
    ladder = {}
    if args.margins is not None:
        ladder["margins"] = _floats(args.margins, "--margins")
        options.update(alpha=args.alpha)
        options.pop("unrelated", None)
        options.pop("margin", None)
    elif args.alphas is not None:
        ladder["alphas"] = _floats(args.alphas, "--alphas")
    progress = _Progress("rungs")
    try:
        result = sweep(dataset, progress=progress, **ladder, **options)
    finally:
        progress.close()
    _write_outputs(result, outputs, figure=lambda: result.figure(
        current=args.alpha if result.parameter == "alpha" else None))
    if not args.quiet:
        print(result.as_text().split("\n\nCautions:")[0])
        written = [str(p) for p in outputs.values() if p is not None]
        if written:
            print("\nWrote: " + ", ".join(written))
        print("\n" + (CAUTION_HIDDEN if args.hidden_causes else CAUTION))
    return 0


def _cmd_support(args) -> int:
    from .cli import CAUTION, CAUTION_HIDDEN
    from .robustness import support
    dataset, options, outputs = _common(args)
    options.update(alpha=args.alpha)
    progress = _Progress("resamples")
    try:
        result = support(dataset, resamples=args.resamples, method=args.method,
                         seed=args.seed, jobs=args.jobs, cluster=args.cluster,
                         cutoff=args.cutoff, progress=progress, **options)
    finally:
        progress.close()
    _write_outputs(result, outputs, figure=result.figure)
    if not args.quiet:
        print(result.as_text().split("\n\nCautions:")[0])
        written = [str(p) for p in outputs.values() if p is not None]
        if written:
            print("\nWrote: " + ", ".join(written))
        print("\n" + (CAUTION_HIDDEN if args.hidden_causes else CAUTION))
    return 0


HANDLERS = {"sweep": _cmd_sweep, "support": _cmd_support}
