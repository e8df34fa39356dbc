"""``edgewise explain RESULT A B``: one pair's evidence, as the window's Inspector shows it.

The pair's edge (or its absence), the reason for each arrowhead, the separating set that
removed it, the unshielded triples through it and every test run on it with its p-value.
``edgewise discover ... --explain A,B`` prints the same right after a search.
"""

from __future__ import annotations

import argparse
import difflib

__all__ = ["register", "explain_pair", "check_names", "parse_pair"]


def register(sub) -> None:
    """Add the ``explain`` command to the command line's subparsers."""
    e = sub.add_parser(
        "explain", help="print the evidence for one pair of a saved result",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        description="Print everything the search knows about the pair A, B of a result JSON "
                    "written by 'edgewise discover --out': the edge or its absence, why each "
                    "arrowhead is there, the separating set, the triples through it and "
                    "every test with its p-value.",
        epilog="example:\n  edgewise discover example_sets/greenhouse/data.csv --out "
               "out/greenhouse.json\n  edgewise explain out/greenhouse.json air_temp "
               "soil_moisture")
    e.add_argument("result", help="result JSON written by 'edgewise discover --out'")
    e.add_argument("a", help="first variable")
    e.add_argument("b", help="second variable")


def parse_pair(text: str, option: str = "--explain") -> tuple[str, str]:
    """``"a,b"`` -> ``("a", "b")``; one clear CommandError otherwise."""
    from .cli import CommandError
    parts = [p.strip() for p in text.split(",")]
    if len(parts) != 2 or not all(parts):
        raise CommandError(f"{option} {text!r}: give two variables separated by a comma, "
                           f"e.g. {option} air_temp,soil_moisture")
    return parts[0], parts[1]


def check_names(variables, a: str, b: str, *, where: str = "the result") -> None:
    """Raise one clear CommandError unless a and b are two of ``variables``."""
    from .cli import CommandError
    variables = list(variables)
    for name in (a, b):
        if name not in variables:
            close = difflib.get_close_matches(name, variables, n=1)
            hint = f"did you mean {close[0]!r}? " if close else ""
            shown = ", ".join(variables[:10]) + (", ..." if len(variables) > 10 else "")
            raise CommandError(f"variable {name!r} is not in {where}; {hint}its variables are "
                               f"{shown}")
    if a == b:
        raise CommandError(f"{a!r} twice: give two different variables")


def explain_pair(result, a: str, b: str, *, where: str = "the result") -> str:
    """The evidence text of the pair, or a CommandError naming the unknown variable."""
    check_names(result.variables, a, b, where=where)
    return result.evidence(a, b).as_text()


def run(args) -> int:
    """The ``explain`` command."""
    from .cli import CAUTION
    from .result import load_result
    result = load_result(args.result)
    print(explain_pair(result, args.a, args.b, where=args.result))
    print("\n" + CAUTION)
    return 0
