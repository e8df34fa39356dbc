"""The command-line reference, generated from the parsers: ``python -m discovery.clidoc``.

docs/cli.md is this module's output; a test fails when the two differ, so the reference
cannot drift from the options the command really has. After adding or changing a command,
regenerate it with::

    python -m discovery.clidoc > docs/cli.md
"""

from __future__ import annotations

import argparse
import sys

__all__ = ["cli_reference"]

_WIDTH = 92


def _help_text(parser: argparse.ArgumentParser) -> str:
    """The parser's help at a fixed width (whatever the terminal's)."""
    old = parser.formatter_class
    try:
        parser.formatter_class = lambda prog: old(prog=prog, width=_WIDTH)
        return parser.format_help()
    finally:
        parser.formatter_class = old


def cli_reference() -> str:
    """The Markdown reference of every ``edgewise`` command, from the argparse parsers."""
    from .cli import _build_parser
    parser = _build_parser()
    parser.prog = "edgewise"
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    lines = ["# Command-line reference", "",
             "Generated from the command's parsers by `python -m discovery.clidoc > docs/cli.md`;",
             "do not edit by hand (a test fails when this file and the parsers differ).", "",
             "Every command prints one clear line and exits with status 2 on bad input, and "
             "never",
             "changes its input files. Causal conclusions from these commands rest on "
             "assumptions:",
             "see [assumptions.md](assumptions.md).", "",
             "| command | what it does |", "| --- | --- |"]
    helps = {a.dest: a.help for a in sub._choices_actions}
    for name in sub.choices:
        lines.append(f"| [`{name}`](#edgewise-{name}) | {helps.get(name, '')} |")
    lines += ["", "## edgewise", "", "```", _help_text(parser).rstrip(), "```"]
    for name, p in sub.choices.items():
        p.prog = f"edgewise {name}"
        lines += ["", f"## edgewise {name}", "", "```", _help_text(p).rstrip(), "```"]
    return "\n".join(lines) + "\n"


if __name__ == "__main__":
    sys.stdout.write(cli_reference())
