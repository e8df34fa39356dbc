"""The documentation cannot drift: docs/cli.md is the parsers' own help, and every
``edgewise`` command written in docs/ and in each example's README runs as written.

Outside reference: argparse's own help output (the standard library formats it); the commands
are run exactly as a reader would copy them, split with shlex (POSIX shell quoting).
"""

import re
import shlex
from pathlib import Path

import pytest

from discovery.cli import _build_parser, main
from discovery.clidoc import cli_reference

ROOT = Path(__file__).resolve().parent.parent
#: Commands not run: the window needs a display; benchmarks take minutes.
SKIPPED = ("gui", "bench")
#: Commands that use the kernel tests take seconds each: their documents run in the slow suite.
COMMANDS = set(next(a for a in _build_parser()._actions if a.dest == "command").choices)
SLOW = re.compile(r"--test (kci|auto)\b")


def test_cli_reference_matches_the_parsers():
    text = (ROOT / "docs" / "cli.md").read_text(encoding="utf-8")
    assert text == cli_reference(), ("docs/cli.md is out of date; regenerate it with "
                                     "'python -m discovery.clidoc > docs/cli.md'")


def commands(path: Path) -> list[str]:
    """The ``edgewise ...`` lines of the fenced blocks (not ```text blocks), with ``\\``
    continuations joined. A trailing ``# refused: ...`` comment marks a command that must
    fail with one clear line (exit status 2)."""
    out, fence, pending = [], None, ""
    for line in path.read_text(encoding="utf-8").splitlines():
        stripped = line.strip()
        if stripped.startswith("```"):
            fence = None if fence is not None else stripped[3:].strip()
            continue
        if fence is None or fence == "text":
            continue
        if pending:
            stripped = pending + " " + stripped
            pending = ""
        if stripped.endswith("\\"):
            pending = stripped[:-1].strip()
            continue
        m = re.match(r"edgewise ([a-z-]+)(\s|$)", stripped)  # not "edgewise gui: error..."
        if m and m.group(1) in COMMANDS and m.group(1) not in SKIPPED:
            out.append(stripped)
    return out


DOCUMENTS = sorted((ROOT / "docs").glob("*.md")) + \
    sorted((ROOT / "example_sets").glob("*/README.md"))
PARAMS = [pytest.param(d, id=str(d.relative_to(ROOT)),
                       marks=[pytest.mark.slow] if any(SLOW.search(c) for c in commands(d))
                       else [])
          for d in DOCUMENTS if commands(d)]


def test_some_documents_have_commands():
    assert len(PARAMS) >= 5


@pytest.mark.parametrize("document", PARAMS)
def test_every_documented_command_runs(document, tmp_path, monkeypatch, capsys):
    (tmp_path / "example_sets").symlink_to(ROOT / "example_sets")
    monkeypatch.chdir(tmp_path)  # outputs (out/...) land in a temporary folder
    for command in commands(document):
        words = shlex.split(command, comments=True)
        status = main(words[1:])
        err = capsys.readouterr().err
        # a command documented as refused ("# refused: ...") must fail with one clear line
        want = 2 if re.search(r"#.*\brefused\b", command) else 0
        assert status == want, f"{document.name}: '{command}' exited {status}: {err}"
        if want:
            assert err.count("\n") == 1 and "error:" in err
