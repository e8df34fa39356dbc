"""``edgewise report``: one self-contained HTML file (or a PDF) for a result."""

from __future__ import annotations

import argparse
import shlex
import sys
from pathlib import Path

__all__ = ["register"]


def register(sub) -> None:
    """Add ``report`` to the subparsers."""
    r = sub.add_parser(
        "report", help="write a self-contained HTML (or PDF) report of a result",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        description="Write one self-contained HTML file (no external links; figures "
                    "embedded) or a PDF: the diagram, settings, knowledge, edges with their "
                    "evidence, removed pairs with separating sets, the survival, support and "
                    "control-set analyses when given, the assumptions, and the command that "
                    "reproduces the search. RESULT is a result JSON, or a diagram drawn "
                    "elsewhere (.dot, .graphml, .csv).",
        epilog="example:\n  edgewise report out/greenhouse.json --out out/greenhouse.html\n"
               "  edgewise report out/greenhouse.json --out out/greenhouse.pdf")
    r.add_argument("result", metavar="RESULT", help="result JSON (or a .dot/.graphml/.csv "
                                                    "diagram)")
    r.add_argument("--sweep", metavar="FILE.json", help="survival sweep JSON to include")
    r.add_argument("--support", metavar="FILE.json", help="resampling support JSON to include")
    r.add_argument("--controls", metavar="FILE.json", help="control-sets JSON to include")
    r.add_argument("--out", required=True, metavar="FILE.html",
                   help="the report to write: .html, or .pdf for a PDF")
    r.set_defaults(handler=_cmd_report)


def _cmd_report(args) -> int:
    from ..cli import CommandError, _output_path
    from ..exchange import read_diagram
    from . import REPORT_FORMATS, build_report, write_report
    out = _output_path(args.out, "--out", list(REPORT_FORMATS))
    inputs = [p for p in (args.result, args.sweep, args.support, args.controls) if p]
    for given in inputs:
        if Path(given).resolve() == out.resolve():
            raise CommandError(f"--out {out}: would overwrite an input file; choose another "
                               "path")
    result = read_diagram(args.result)
    command = "edgewise " + " ".join(shlex.quote(a) for a in sys.argv[1:]) \
        if Path(sys.argv[0]).name in ("edgewise", "__main__.py") else None
    report = build_report(result, sweep=args.sweep, support=args.support,
                          controls=args.controls, result_path=args.result,
                          report_command=command)
    out.parent.mkdir(parents=True, exist_ok=True)
    write_report(report, out)
    print(f"Wrote {out}")
    return 0
