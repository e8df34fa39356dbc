"""A reproducible report of one search, as one self-contained HTML file or a PDF.

A diagram goes into a paper's supplement, a review or a colleague's inbox without the tool
that made it. The report carries everything a reader needs to weigh it: the diagram; the
settings and the knowledge; every edge with its reason and evidence (the tests run on the
pair and the largest p-value); every removed pair with its separating set and p-value; the
survival, resampling-support and control-set analyses when their JSON files are given; the
assumptions and cautions; and a reproducibility block (the data's SHA-256 fingerprint, the
software versions and the exact command that re-runs the search).

The HTML file has no external references: figures are embedded as ``data:`` URIs (SVG), the
style sheet is inline, and no script runs. The PDF is drawn with matplotlib: the diagram, the
charts, then the tables as text pages.

The analysis files are read per their documented shapes (docs/result-format.md): keys this
module does not know are ignored, so a newer analysis still reports.
"""

from __future__ import annotations

import base64
import html
import io
import json
import shlex
import textwrap
from dataclasses import dataclass
from pathlib import Path

from ..exceptions import DiscoveryError
from ..result import ASSUMPTIONS, OMITTED_REASON, SearchResult

__all__ = ["Report", "build_report", "write_report", "reproduce_command", "read_analysis",
           "ANALYSIS_FORMATS", "REPORT_FORMATS"]

#: ``kind -> (format value, required keys)`` of the analysis files a report can include.
ANALYSIS_FORMATS = {
    "sweep": ("edgewise-sweep", ("edges",)),
    "support": ("edgewise-support", ("pairs",)),
    "controls": ("edgewise-controls", ("treatment", "outcome")),
}

#: File endings :func:`write_report` writes.
REPORT_FORMATS = (".html", ".htm", ".pdf")

_SLATE, _BRICK, _TEAL, _CANVAS, _AMBER, _LAVENDER = \
    "#44505C", "#B5482F", "#1F6F78", "#F7F6F3", "#F2B134", "#B8A9D9"


class ReportError(DiscoveryError):
    """An analysis file cannot be read into a report, or the report cannot be written."""


def read_analysis(path, kind: str) -> dict:
    """Read a sweep, support or controls JSON file, checking its ``format`` and keys.

    Raises
    ------
    ReportError
        The file is missing, not JSON, of another format, or lacks a required key.
    """
    fmt, required = ANALYSIS_FORMATS[kind]
    path = Path(path)
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ReportError(f"--{kind} {path}: file not found; check the path") from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as err:
        raise ReportError(f"--{kind} {path}: not a readable JSON file ({err}); give the "
                          f"file 'edgewise {kind}' wrote") from None
    if not isinstance(doc, dict) or doc.get("format") != fmt:
        got = doc.get("format") if isinstance(doc, dict) else type(doc).__name__
        raise ReportError(f"--{kind} {path}: 'format' is {got!r}, not {fmt!r}; give the file "
                          f"'edgewise {kind}' wrote")
    missing = [k for k in required if k not in doc]
    if missing:
        raise ReportError(f"--{kind} {path}: missing key(s) {missing}; the file is "
                          "incomplete, write it again")
    return doc


# ---------------------------------------------------------------------- reproducibility

def reproduce_command(result: SearchResult, *, result_path=None,
                      out: str = "reproduced.json") -> str | None:
    """The ``edgewise discover`` command that re-runs the search, or None for a diagram
    that no search produced.

    The knowledge is read back from the result file itself (``--knowledge RESULT.json``)
    when the result has any, so the command needs only the data file and the result file.
    """
    if result.data.get("diagram"):
        return None
    s = result.settings
    source = result.data.get("source") or "DATA.csv"
    parts = ["edgewise", "discover", source, "--test", s.test, "--alpha", repr(s.alpha)]
    if s.max_depth is not None:
        parts += ["--max-depth", str(s.max_depth)]
    parts += ["--collider-rule", s.collider_rule, "--missing", s.missing,
              "--columns", ",".join(result.variables)]
    for name, value in s.test_options:
        parts += ["--test-option", f"{name}={value}"]
    if not result.knowledge.is_empty():
        parts += ["--knowledge", str(result_path) if result_path else "RESULT.json"]
    parts += ["--out", out]
    return " ".join(shlex.quote(str(p)) for p in parts)


def _knowledge_toml(result: SearchResult) -> str:
    import tempfile

    from ..knowledge import write_knowledge
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "knowledge.toml"
        write_knowledge(result.knowledge, path)
        return path.read_text(encoding="utf-8")


# --------------------------------------------------------------------------- figures

def _new_figure(width, height):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    fig = Figure(figsize=(width, height), facecolor="white")
    FigureCanvasAgg(fig)
    return fig


def _svg_uri(fig) -> str:
    import matplotlib
    buffer = io.BytesIO()
    with matplotlib.rc_context({"svg.fonttype": "path", "svg.hashsalt": "edgewise"}):
        fig.savefig(buffer, format="svg", facecolor=fig.get_facecolor(), bbox_inches="tight")
    return "data:image/svg+xml;base64," + base64.b64encode(buffer.getvalue()).decode("ascii")


def diagram_figure(result: SearchResult):
    from ..drawing import draw_result
    return draw_result(result)


def _pair_label(a, b, mark=None) -> str:
    return f"{a} {mark or '—'} {b}"


def survival_figure(sweep: dict):
    """Rows: edges; columns: rungs of the ladder; a filled cell where the edge is present
    (brick red where the mark at that rung is contested)."""
    parameter = sweep.get("parameter", "alpha")
    ladder = sweep.get("alphas") if parameter == "alpha" else sweep.get("margins")
    edges = [e for e in sweep["edges"] if any(e.get("present", []))]
    edges.sort(key=lambda e: (-sum(bool(p) for p in e.get("present", [])), e["a"], e["b"]))
    rungs = max([len(e.get("present", [])) for e in edges] + [len(ladder or [])] + [1])
    fig = _new_figure(min(4.5 + 0.45 * rungs, 11), 1.2 + 0.26 * max(len(edges), 1))
    ax = fig.add_axes((0.32, 1.0 / (1.2 + 0.26 * max(len(edges), 1)) * 0.85, 0.64,
                       0.26 * max(len(edges), 1) / (1.2 + 0.26 * max(len(edges), 1))))
    for row, e in enumerate(edges):
        marks = e.get("marks") or [None] * len(e["present"])
        for col, present in enumerate(e["present"]):
            if not present:
                continue
            mark = marks[col] if col < len(marks) else None
            colour = _BRICK if mark and "?" in str(mark) else _SLATE
            ax.add_patch(_rect(col, row, colour))
    ax.set_xlim(-0.5, rungs - 0.5)
    ax.set_ylim(len(edges) - 0.5, -0.5)
    ax.set_yticks(range(len(edges)))
    ax.set_yticklabels([_pair_label(e["a"], e["b"]) for e in edges], fontsize=8)
    ax.set_xticks(range(rungs))
    ax.set_xticklabels([f"{v:g}" for v in (ladder or range(1, rungs + 1))], fontsize=7,
                       rotation=45)
    ax.set_xlabel("significance level α" if parameter == "alpha" else "margin δ", fontsize=8)
    ax.set_title("Where each edge is present (red: contested)", fontsize=9, loc="left")
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    return fig


def _rect(col, row, colour):
    from matplotlib.patches import Rectangle
    return Rectangle((col - 0.42, row - 0.36), 0.84, 0.72, facecolor=colour, edgecolor="none")


def support_figure(support: dict, *, limit: int = 40):
    """Horizontal stacked bars: the share of resamples with a → b, b → a, undirected and
    contested; their total is the pair's adjacency support. The cutoff is a dashed line."""
    pairs = [p for p in support["pairs"] if float(p.get("adjacent", 0) or 0) > 0]
    pairs.sort(key=lambda p: (-float(p.get("adjacent", 0)), p["a"], p["b"]))
    pairs = pairs[:limit]
    n = max(len(pairs), 1)
    fig = _new_figure(8, 1.3 + 0.26 * n)
    ax = fig.add_axes((0.32, 0.9 / (1.3 + 0.26 * n), 0.62, 0.26 * n / (1.3 + 0.26 * n)))
    parts = [("a_to_b", "a → b", _SLATE), ("b_to_a", "b → a", "#8A96A3"),
             ("undirected", "undirected", "#C9CED4"), ("contested", "contested", _BRICK)]
    for row, p in enumerate(pairs):
        left = 0.0
        for key, _, colour in parts:
            width = float(p.get(key, 0) or 0)
            if width > 0:
                ax.barh(row, width, left=left, color=colour, height=0.7)
                left += width
    cutoff = support.get("cutoff")
    if cutoff is not None:
        ax.axvline(float(cutoff), color=_TEAL, linestyle="--", linewidth=1)
    ax.set_xlim(0, 1)
    ax.set_ylim(n - 0.5, -0.5)
    ax.set_yticks(range(len(pairs)))
    ax.set_yticklabels([_pair_label(p["a"], p["b"]) for p in pairs], fontsize=8)
    ax.set_xlabel("share of resamples", fontsize=8)
    from matplotlib.patches import Patch
    ax.legend(handles=[Patch(color=c, label=l) for _, l, c in parts], fontsize=7, ncol=4,
              loc="lower left", bbox_to_anchor=(0, 1.0), frameon=False)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    return fig


def effects_figure(controls: dict):
    """One point per possible effect (with ±1.96 standard errors) of the treatment."""
    effects = (controls.get("effects") or {}).get("effects") or []
    fig = _new_figure(7, 1.2 + 0.3 * max(len(effects), 1))
    ax = fig.add_axes((0.35, 0.25, 0.6, 0.6))
    for row, e in enumerate(effects):
        est, se = float(e["estimate"]), float(e.get("se") or 0)
        ax.errorbar(est, row, xerr=1.96 * se, fmt="o", color=_SLATE, capsize=3)
    ax.axvline(0, color="#999999", linewidth=0.8)
    ax.set_yticks(range(len(effects)))
    ax.set_yticklabels(["parents {" + ", ".join(e.get("parents", [])) + "}" for e in effects],
                       fontsize=8)
    ax.set_ylim(len(effects) - 0.5, -0.5)
    ax.set_xlabel(f"effect of {controls['treatment']} on {controls['outcome']}", fontsize=8)
    ax.set_title("Effect range: one estimate per possible parent set", fontsize=9, loc="left")
    return fig


# ------------------------------------------------------------------------------ record

@dataclass(frozen=True)
class Report:
    """The content of a report (immutable): the result, the analyses given, the command.

    Use :meth:`to_html` or :func:`write_report`.
    """

    result: SearchResult
    sweep: dict | None = None
    support: dict | None = None
    controls: dict | None = None
    command: str | None = None
    report_command: str | None = None

    def cautions(self) -> list[str]:
        out = list(ASSUMPTIONS)
        for doc in (self.sweep, self.support, self.controls):
            for c in (doc or {}).get("cautions", []) or []:
                if c not in out:
                    out.append(str(c))
        return out

    def to_dict(self) -> dict:
        return {"format": "edgewise-report", "version": 1,
                "result": self.result.to_dict(), "sweep": self.sweep, "support": self.support,
                "controls": self.controls, "command": self.command,
                "cautions": self.cautions()}

    def as_text(self) -> str:
        """The report's tables as plain text (the PDF's text pages)."""
        return "\n".join(_text_lines(self))

    def to_html(self) -> str:
        return _html(self)


def build_report(result: SearchResult, *, sweep=None, support=None, controls=None,
                 result_path=None, report_command: str | None = None) -> Report:
    """Gather a report. ``sweep``, ``support`` and ``controls`` are the analyses' JSON
    documents (dicts) or paths to them.

    Raises
    ------
    ReportError
        An analysis file cannot be read (see :func:`read_analysis`).
    """
    docs = {}
    for kind, value in (("sweep", sweep), ("support", support), ("controls", controls)):
        if value is not None and not isinstance(value, dict):
            value = read_analysis(value, kind)
        docs[kind] = value
    return Report(result, docs["sweep"], docs["support"], docs["controls"],
                  reproduce_command(result, result_path=result_path), report_command)


def write_report(report: Report, path) -> None:
    """Write the report as HTML (``.html``) or PDF (``.pdf``), all or nothing.

    Raises
    ------
    ReportError
        The extension is not .html or .pdf, or the file cannot be written.
    """
    from ..files import atomic_write, write_text_atomic
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix not in REPORT_FORMATS:
        raise ReportError(f"{path}: a report is written as .html or .pdf; got "
                          f"{suffix or 'no extension'!r}")
    try:
        if suffix == ".pdf":
            with atomic_write(path) as tmp:
                _write_pdf(report, tmp)
        else:
            write_text_atomic(path, report.to_html())
    except OSError as err:
        raise ReportError(f"{path}: cannot write the report ({err.strerror or err}); check "
                          "that the folder exists and is writable") from None


# -------------------------------------------------------------------------------- HTML

_CSS = """
body{font-family:"DejaVu Sans",Helvetica,Arial,sans-serif;color:#27303A;margin:2em auto;
max-width:70em;padding:0 1em;line-height:1.4}
h1{font-size:1.5em}h2{font-size:1.2em;border-bottom:1px solid #D5D1C8;margin-top:2em}
table{border-collapse:collapse;margin:.5em 0;font-size:.9em}
td,th{border:1px solid #D5D1C8;padding:.25em .5em;text-align:left;vertical-align:top}
th{background:#F7F6F3}.caution{background:#FBF1EE;border-left:4px solid #B5482F;padding:.5em 1em}
code,pre{background:#F7F6F3;padding:.1em .3em;font-size:.9em}pre{padding:.6em;overflow-x:auto}
img{max-width:100%;height:auto;border:1px solid #E4E1DA}.num{text-align:right}
"""


def _e(x) -> str:
    return html.escape("" if x is None else str(x))


def _p(x) -> str:
    if x is None:
        return "–"
    x = float(x)
    return "–" if x != x else f"{x:.3g}"


def _set(s) -> str:
    return "none" if s is None else "{" + ", ".join(s) + "}"


def _table(header, rows) -> str:
    head = "".join(f"<th>{_e(h)}</th>" for h in header)
    body = "".join("<tr>" + "".join(f"<td>{c}</td>" for c in row) + "</tr>" for row in rows)
    return f"<table><tr>{head}</tr>{body}</table>"


def _edge_text(e) -> str:
    if e.kind == "contested":
        return f"{e.source} ?– {e.target} (contested)"
    return e.arrow()


def _html(report: Report) -> str:
    r = report.result
    s = r.settings
    out = ["<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
           f"<title>Edgewise report: {len(r.variables)} variables</title>",
           f"<style>{_CSS}</style></head><body>",
           "<h1>Edgewise report</h1>",
           f"<p>{len(r.variables)} variables"
           + (f", {r.data.get('rows')} rows" if r.data.get("rows") else "")
           + f"; {len(r.edges)} edges, {len(r.removed)} removed pairs.</p>",
           '<div class="caution"><p><strong>Read with care.</strong> '
           + _e(ASSUMPTIONS[0]) + " " + _e(ASSUMPTIONS[3])
           + ' See <a href="#assumptions">Assumptions and cautions</a>.</p></div>',
           "<h2>Diagram</h2>",
           f'<img alt="the diagram" src="{_svg_uri(diagram_figure(r))}">']
    if r.data.get("diagram"):
        out.append(f"<p>This diagram was read from {_e(r.data.get('source'))}; no search "
                   "produced it, so it has no evidence.</p>")
    else:
        out += ["<h2>Settings</h2>", _table(["setting", "value"], [
            ["independence test", _e(s.test)], ["significance level α", _e(f"{s.alpha:g}")],
            ["depth (largest conditioning set)",
             "unlimited" if s.max_depth is None else _e(s.max_depth)],
            ["collider rule", _e(s.collider_rule)], ["missing values", _e(s.missing)],
            ["test options", _e(", ".join(f"{k}={v}" for k, v in s.test_options) or "none")],
            ["tests run", _e(r.counts.get("tests", len(r.tests)))
             + (f"; evidence omitted ({r.evidence_omitted:,} tests, {_e(OMITTED_REASON)}): "
                "each edge's largest p-value and number of tests are kept, not its tests"
                if r.evidence_omitted else "")]])]
    out += ["<h2>Knowledge</h2>", _knowledge_html(r)]
    out += ["<h2>Edges</h2>", _edges_html(r, report.support)]
    if not r.data.get("diagram"):
        out += ["<h2>Removed pairs</h2>",
                "<p>Each pair without an edge, the conditioning set that made it independent "
                "(its separating set) and the p-value of that test.</p>", _removed_html(r)]
    if len(r.triples):
        out += ["<h2>Unshielded triples</h2>",
                "<p>Each pair of non-adjacent variables with a common neighbour, and whether "
                "the search read the neighbour as a collider.</p>", _triples_html(r)]
    notes = list(r.conflicts) + list(r.notes)
    if notes:
        out += ["<h2>Notes and conflicts</h2>",
                "<ol>" + "".join(f"<li>{_e(n)}</li>" for n in notes) + "</ol>"]
    if report.sweep is not None:
        out += ["<h2>Survival across the ladder</h2>", _sweep_html(report.sweep)]
    if report.support is not None:
        out += ["<h2>Resampling support</h2>", _support_html(report.support)]
    if report.controls is not None:
        out += ["<h2>Control sets</h2>", _controls_html(report.controls)]
    out += ['<h2 id="assumptions">Assumptions and cautions</h2>',
            "<ul>" + "".join(f"<li>{_e(c)}</li>" for c in report.cautions()) + "</ul>",
            "<h2>Reproducibility</h2>", _repro_html(report), "</body></html>"]
    return "\n".join(out) + "\n"


def _knowledge_html(r) -> str:
    k = r.knowledge
    if k.is_empty():
        return "<p>None: the data alone decided every edge.</p>"
    rows = []
    for name, field, mark in (("locked edges", k.locked, "—"),
                              ("locked directions", k.locked_directions, "→"),
                              ("forbidden edges", k.forbidden, "—"),
                              ("forbidden directions", k.forbidden_directions, "→")):
        if field:
            rows.append([_e(name), _e("; ".join(f"{a} {mark} {b}" for a, b in field))])
    for i, g in enumerate(k.stages, 1):
        rows.append([_e(f"stage {i}"), _e(", ".join(g))])
    return _table(["knowledge", "pairs or variables"], rows)


def _support_of(support, a, b):
    for p in (support or {}).get("pairs", []):
        if {p.get("a"), p.get("b")} == {a, b}:
            return p
    return None


def _edges_html(r, support) -> str:
    header = ["edge", "kind", "why", "largest p", "tests", "locked"]
    if support is not None:
        header.append("support")
    rows = []
    for e in r.edges:
        tests = r.tests.of_pair(e.source, e.target)
        detail = ""
        if tests:
            items = "".join(f"<li>given {_e(_set(g))}: p = {_p(p)}</li>" for g, p in tests)
            detail = f"<details><summary>{len(tests)} test(s)</summary><ul>{items}</ul></details>"
        row = [_e(_edge_text(e)), _e(e.kind),
               _e(e.reason or "direction not determined by the data"),
               f'<span class="num">{_p(e.max_pvalue)}</span>', detail or _e(e.tests),
               "yes" if e.locked else ""]
        if support is not None:
            p = _support_of(support, e.source, e.target)
            row.append(_p(p.get("adjacent")) if p else "–")
        rows.append(row)
    if not rows:
        return "<p>No edges.</p>"
    return _table(header, rows)


def _removed_html(r) -> str:
    rows = []
    for x in r.removed:
        why = "test" if x.by == "test" else "forbidden by knowledge (no separating set found)"
        if x.by == "test" and x.forbidden:
            why = "test; also forbidden by knowledge"
        rows.append([_e(f"{x.a} — {x.b}"), _e(_set(x.separating_set)),
                     f'<span class="num">{_p(x.pvalue)}</span>', _e(why)])
    if not rows:
        return "<p>No pair was removed.</p>"
    return _table(["pair", "separating set", "p-value", "removed by"], rows)


def _triples_html(r) -> str:
    rows = [[_e(f"{t['x']} — {t['z']} — {t['y']}"), _e(t.get("decision", "")),
             _e(t.get("reason", ""))] for t in r.triples]
    return (f"<details><summary>{len(rows)} triple(s)</summary>"
            + _table(["triple", "decision", "why"], rows) + "</details>")


def _sweep_html(sweep) -> str:
    parameter = sweep.get("parameter", "alpha")
    ladder = sweep.get("alphas") if parameter == "alpha" else sweep.get("margins")
    rows = []
    for e in sweep["edges"]:
        ranges = "; ".join(f"{lo:g} – {hi:g}" for lo, hi in e.get("survival") or [])
        rows.append([_e(f"{e['a']} — {e['b']}"), _e(ranges or "never present")])
    return (f'<img alt="survival chart" src="{_svg_uri(survival_figure(sweep))}">'
            + f"<p>Ladder of {_e(parameter)}: {_e(', '.join(f'{v:g}' for v in ladder or []))}"
            "</p>" + _table(["pair", "survival range(s)"], rows))


def _support_html(support) -> str:
    bound = support.get("false_edges_bound")
    text = (f"<p>{_e(support.get('method', 'bootstrap'))}, {_e(support.get('resamples'))} "
            f"resamples, seed {_e(support.get('seed'))}, cutoff {_e(support.get('cutoff'))}"
            + (f"; expected false edges at most {_p(bound)}" if bound is not None else "")
            + ".</p>")
    consensus = (support.get("consensus") or {}).get("edges") or []
    rows = [[_e(f"{c.get('from')} → {c.get('to')}" if c.get("kind") == "directed"
               else f"{c.get('from')} — {c.get('to')}"), _e(c.get("kind"))] for c in consensus]
    return (f'<img alt="support chart" src="{_svg_uri(support_figure(support))}">' + text
            + ("<p>Consensus edges (support above the cutoff):</p>"
               + _table(["edge", "kind"], rows) if rows else ""))


def _names(x) -> str:
    return "none" if x is None else ("{" + ", ".join(x) + "}")


def _controls_html(c) -> str:
    rows = [["treatment", _e(c["treatment"])], ["outcome", _e(c["outcome"])],
            ["amenable (every member of the class allows adjustment)",
             "yes" if c.get("amenable") else "no"]]
    if c.get("breaking_path"):
        rows.append(["path that breaks amenability", _e(" — ".join(c["breaking_path"]))])
    for key, name in (("canonical", "canonical set"), ("optimal", "optimal set")):
        if key in c:
            rows.append([name, _e(_names(c.get(key)))])
    minimal = c.get("minimal") or []
    rows.append(["minimal sets", _e("; ".join(_names(m) for m in minimal) or "none")])
    check = c.get("check")
    if check:
        rows.append([_e(f"check of {_names(check.get('set'))}"),
                     _e(("valid" if check.get("valid") else "not valid") + ": "
                        + str(check.get("reason", "")))])
    out = _table(["", ""], rows)
    effects = c.get("effects")
    if effects and effects.get("effects"):
        out += (f'<img alt="effect range chart" src="{_svg_uri(effects_figure(c))}">'
                f"<p>Effects range from {_p(effects.get('min'))} to {_p(effects.get('max'))}"
                + (f"; share of zero effects {_p(effects.get('share_zero'))}"
                   if effects.get("share_zero") is not None else "") + ".</p>")
    return out


def _repro_html(report: Report) -> str:
    r = report.result
    sw = r.software
    rows = [["data file", _e(r.data.get("source") or "not a file")],
            ["data SHA-256", f"<code>{_e(r.data.get('sha256') or 'unknown')}</code>"],
            ["rows used / read", _e(f"{r.data.get('rows')} / {r.data.get('rows_read', '?')}")],
            ["software", _e(", ".join(f"{k} {v}" for k, v in sw.items()) or "unknown")],
            ["seed", _e(r.seed)]]
    out = _table(["", ""], rows)
    if report.command:
        out += ("<p>Run this from the folder the search ran in; it must read a data file "
                "with the same SHA-256 fingerprint:</p>"
                f'<pre id="reproduce">{_e(report.command)}</pre>')
        if not r.knowledge.is_empty():
            out += ("<p>The knowledge is read back from the result file; as a knowledge file "
                    f"of its own:</p><pre>{_e(_knowledge_toml(r))}</pre>")
    else:
        out += "<p>No search produced this diagram, so there is no command to re-run.</p>"
    if report.report_command:
        out += f"<p>This report was made with:</p><pre>{_e(report.report_command)}</pre>"
    return out


# --------------------------------------------------------------------------------- PDF

def _text_lines(report: Report) -> list[str]:
    r = report.result
    lines = ["Edgewise report", ""]
    lines += r.summary().as_text(assumptions=False).splitlines()
    lines += ["", "Knowledge:"]
    k = r.knowledge
    if k.is_empty():
        lines.append("  none")
    for name, field in (("locked", k.locked), ("locked directions", k.locked_directions),
                        ("forbidden", k.forbidden),
                        ("forbidden directions", k.forbidden_directions)):
        if field:
            lines.append(f"  {name}: " + "; ".join(f"{a}, {b}" for a, b in field))
    for i, g in enumerate(k.stages, 1):
        lines.append(f"  stage {i}: " + ", ".join(g))
    if len(r.removed):
        lines += ["", "Removed pairs (separating set, p-value):"]
        lines += [f"  {x.a} — {x.b}: {_set(x.separating_set)}, p = {_p(x.pvalue)}"
                  for x in r.removed]
    if report.sweep is not None:
        lines += ["", "Survival ranges:"]
        lines += [f"  {e['a']} — {e['b']}: "
                  + ("; ".join(f"{lo:g}–{hi:g}" for lo, hi in e.get("survival") or [])
                     or "never present") for e in report.sweep["edges"]]
    if report.controls is not None:
        c = report.controls
        lines += ["", f"Control sets for {c['treatment']} → {c['outcome']}: amenable "
                      f"{'yes' if c.get('amenable') else 'no'}; optimal {_names(c.get('optimal'))}; "
                      "minimal " + ("; ".join(_names(m) for m in c.get("minimal") or [])
                                    or "none")]
    lines += ["", "Assumptions and cautions:"] + [f"- {c}" for c in report.cautions()]
    lines += ["", "Reproducibility:", f"  data: {r.data.get('source')}",
              f"  SHA-256: {r.data.get('sha256')}",
              "  software: " + ", ".join(f"{k} {v}" for k, v in r.software.items())]
    if report.command:
        lines += ["  command:", "    " + report.command]
    return lines


def _write_pdf(report: Report, path) -> None:
    import matplotlib
    from matplotlib.backends.backend_pdf import PdfPages
    figures = [diagram_figure(report.result)]
    if report.sweep is not None:
        figures.append(survival_figure(report.sweep))
    if report.support is not None:
        figures.append(support_figure(report.support))
    if report.controls is not None and (report.controls.get("effects") or {}).get("effects"):
        figures.append(effects_figure(report.controls))
    charts = len(figures)
    wrapped = []
    for line in _text_lines(report):
        indent = len(line) - len(line.lstrip())
        wrapped += textwrap.wrap(line, 100, subsequent_indent=" " * (indent + 2)) or [""]
    per_page = 64
    for start in range(0, len(wrapped), per_page):
        fig = _new_figure(8.27, 11.69)
        fig.text(0.06, 0.96, "\n".join(wrapped[start:start + per_page]), va="top",
                 family="DejaVu Sans Mono", fontsize=7.2)
        figures.append(fig)
    with matplotlib.rc_context({"pdf.fonttype": 42}):
        with PdfPages(path, metadata={"Title": "Edgewise report",
                                      "Creator": "Edgewise"}) as pdf:
            for i, fig in enumerate(figures):
                pdf.savefig(fig, bbox_inches="tight" if i < charts else None)
