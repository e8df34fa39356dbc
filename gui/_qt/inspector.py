"""The right side: the **Inspector** — why an edge is there, absent, or oriented.

For a selected pair it shows the pair's status in the last result, the reason for each
arrowhead (collider with its separating set, rule 1–4, knowledge, stage order), the set that
removed the pair, every test run on it (conditioning set, p-value, verdict against α) and the
knowledge about it, with buttons for the knowledge actions. For a selected node: kind, missing
share, stage and neighbours. With nothing selected: the result's summary and notes.
"""

from __future__ import annotations

from html import escape

from PySide6.QtCore import Qt
from PySide6.QtGui import QBrush
from PySide6.QtWidgets import (QAbstractItemView, QGridLayout, QHeaderView, QLabel,
                               QPushButton, QTableWidget, QTableWidgetItem, QVBoxLayout,
                               QWidget)

from .._words import test_label
from . import style
from .canvas import edge_text


def _p(p) -> str:
    return "—" if p is None or p != p else (f"{p:.3g}" if p >= 1e-4 else f"{p:.1e}")


def _set(s) -> str:
    return "{" + ", ".join(s) + "}" if s else "∅ (no conditioning)"


class Inspector(QWidget):
    """Evidence and knowledge actions for the session's selection."""

    def __init__(self, session, parent=None):
        super().__init__(parent)
        self.session = session
        self.setObjectName("inspector")
        layout = QVBoxLayout(self)
        layout.setContentsMargins(8, 8, 8, 8)
        self.title = QLabel()
        self.title.setObjectName("inspectorTitle")
        self.title.setWordWrap(True)
        self.title.setStyleSheet("font-size: 14px; font-weight: 600; color: #1B232B;")
        layout.addWidget(self.title)
        self.body = QLabel()
        self.body.setObjectName("inspectorBody")
        self.body.setWordWrap(True)
        self.body.setTextFormat(Qt.RichText)
        self.body.setTextInteractionFlags(Qt.TextSelectableByMouse)
        self.body.setAlignment(Qt.AlignTop | Qt.AlignLeft)
        layout.addWidget(self.body)

        # knowledge about the pair as a small grid of toggles: what (lock / forbid) by
        # which way (a → b, b → a, either); a checked toggle is a statement in force
        self.actions_box = QWidget()
        self.actions_box.setObjectName("knowledgeGrid")
        grid = QGridLayout(self.actions_box)
        grid.setContentsMargins(0, 6, 0, 4)
        grid.setHorizontalSpacing(4)
        grid.setVerticalSpacing(4)
        self.pair_key = QLabel()
        self.pair_key.setObjectName("pairKey")
        self.pair_key.setStyleSheet("color: #6B7178;")
        grid.addWidget(self.pair_key, 0, 0, 1, 4)
        self.direction_labels = []
        for c in range(3):
            label = QLabel()
            label.setAlignment(Qt.AlignCenter)
            label.setStyleSheet("color: #44505C; font-size: 11px;")
            grid.addWidget(label, 1, c + 1)
            self.direction_labels.append(label)
        self.buttons: dict[str, QPushButton] = {}
        for r, (what, names) in enumerate((
                ("Lock", ("lockForward", "lockBackward", "lockEdge")),
                ("Forbid", ("forbidForward", "forbidBackward", "forbidEdge")))):
            head = QLabel(what)
            head.setStyleSheet("color: #44505C; font-weight: 600;")
            grid.addWidget(head, r + 2, 0)
            for c, name in enumerate(names):
                button = QPushButton("lock" if what == "Lock" else "forbid")
                button.setObjectName(name)
                button.setCheckable(True)
                button.setStyleSheet(
                    "QPushButton:checked { background: %s; color: white; border-color: %s; }"
                    % (("#1F6F78", "#1F6F78") if what == "Lock" else ("#6B7178", "#6B7178")))
                button.clicked.connect(lambda _=False, n=name: self._act(n))
                grid.addWidget(button, r + 2, c + 1)
                self.buttons[name] = button
        clear = QPushButton("Clear knowledge on this pair")
        clear.setObjectName("clearPair")
        clear.clicked.connect(lambda _=False: self._act("clearPair"))
        grid.addWidget(clear, 4, 0, 1, 4)
        self.buttons["clearPair"] = clear
        grid.setColumnStretch(1, 1)
        grid.setColumnStretch(2, 1)
        grid.setColumnStretch(3, 1)
        layout.addWidget(self.actions_box)

        self.tests_label = QLabel("Tests on this pair")
        self.tests_label.setStyleSheet("color: #44505C; font-weight: 600; margin-top: 6px;")
        layout.addWidget(self.tests_label)
        self.tests = QTableWidget(0, 3)
        self.tests.setObjectName("evidenceTable")
        self.tests.setHorizontalHeaderLabels(["given", "p-value", "verdict at α"])
        self.tests.verticalHeader().hide()
        self.tests.setEditTriggers(QAbstractItemView.NoEditTriggers)
        self.tests.setSelectionMode(QAbstractItemView.NoSelection)
        self.tests.setShowGrid(False)
        header = self.tests.horizontalHeader()
        header.setSectionResizeMode(0, QHeaderView.Stretch)
        header.setSectionResizeMode(1, QHeaderView.ResizeToContents)
        header.setSectionResizeMode(2, QHeaderView.ResizeToContents)
        layout.addWidget(self.tests, 1)
        self.filler = QWidget()
        layout.addWidget(self.filler, 1)

        for name in ("selection", "result", "knowledge", "settings", "stale", "included"):
            getattr(session.events, name).connect(self.refresh)
        self.refresh()

    # -- actions -----------------------------------------------------------------------------
    def _act(self, name):
        sel = self.session.selection
        if len(sel) != 2:
            return
        a, b = sel
        s = self.session
        if name != "clearPair" and name in self._in_force(a, b):
            s.clear_pair(a, b)  # un-toggling a statement removes it
            return
        {"lockEdge": lambda: s.lock(a, b), "lockForward": lambda: s.lock_direction(a, b),
         "lockBackward": lambda: s.lock_direction(b, a), "forbidEdge": lambda: s.forbid(a, b),
         "forbidForward": lambda: s.forbid_direction(a, b),
         "forbidBackward": lambda: s.forbid_direction(b, a),
         "clearPair": lambda: s.clear_pair(a, b)}[name]()

    def _in_force(self, a, b) -> set:
        k = self.session.knowledge
        out = set()
        if any(set(p) == {a, b} for p in k.locked):
            out.add("lockEdge")
        if any(set(p) == {a, b} for p in k.forbidden):
            out.add("forbidEdge")
        if (a, b) in k.locked_directions:
            out.add("lockForward")
        if (b, a) in k.locked_directions:
            out.add("lockBackward")
        if (a, b) in k.forbidden_directions:
            out.add("forbidForward")
        if (b, a) in k.forbidden_directions:
            out.add("forbidBackward")
        return out

    # -- model → widgets ---------------------------------------------------------------------
    def refresh(self, _=None):
        sel = self.session.selection
        if len(sel) == 2:
            self._show_pair(*sel)
        elif len(sel) == 1:
            self._show_node(sel[0])
        else:
            self._show_overview()

    def _show_tests(self, visible: bool):
        self.tests_label.setVisible(visible)
        self.tests.setVisible(visible)
        self.filler.setVisible(not visible)

    def _show_overview(self):
        s = self.session
        self.actions_box.hide()
        self._show_tests(False)
        r = s.result
        if r is None:
            self.title.setText("Inspector")
            self.body.setText("<p style='color:#6B7178'>Click an edge to see why it is there "
                              "and how it was oriented; click a node for its details; "
                              "Ctrl+click two nodes to add knowledge about the pair.</p>")
            return
        c = r.counts
        self.title.setText("Result")
        notes = r.summary().notes()
        st = r.settings
        html = [f"<p>{len(r.variables)} variables, {r.data.get('rows', '?')} rows<br>"
                f"test <b>{escape(test_label(st.test))}</b> "
                f"(<span style='color:#6B7178'>{escape(st.test)}</span>), "
                f"α = {st.alpha:g}, depth "
                f"{'no limit' if st.max_depth is None else st.max_depth}, "
                f"collider rule {escape(st.collider_rule)}</p>",
                f"<p><b>{c.get('edges', 0)}</b> edges: {c.get('directed', 0)} directed, "
                f"{c.get('undirected', 0)} undirected, {c.get('contested', 0)} contested<br>"
                f"{c.get('removed', 0)} pairs removed; {c.get('tests', 0)} tests "
                f"({c.get('tests_from_cache', 0)} from the cache)</p>"]
        if s.data_changed:
            html.append("<p style='color:#8A6D3B'>The data file changed since this result "
                        "was found: run again to search the current data.</p>")
        elif s.stale:
            html.append("<p style='color:#8A6D3B'>Inputs changed since this result: run "
                        "again to update it.</p>")
        if notes:
            html.append("<p><b>Notes</b></p><ol>" + "".join(f"<li>{escape(n)}</li>"
                                                         for n in notes) + "</ol>")
        self.body.setText("".join(html))

    def _show_node(self, name):
        s = self.session
        self.actions_box.hide()
        self._show_tests(False)
        self.title.setText(name)
        ds = s.dataset
        html = []
        if ds is not None and name in ds.kinds:
            html.append(f"<p>kind: <b>{ds.kinds[name]}</b><br>missing: "
                        f"{100 * ds.missing_share[name]:.1f}% of {ds.rows_read} rows<br>"
                        + ("included in the search" if name in s.included
                           else "<span style='color:#B5482F'>left out of the search</span>")
                        + "</p>")
        stage = s.knowledge.stage_of(name)
        html.append(f"<p>stage: {'none' if stage is None else stage + 1}</p>")
        r = s.result
        if r is not None and name in r.variables:
            parents = [e.source for e in r.edges if e.kind == "directed" and e.target == name]
            children = [e.target for e in r.edges if e.kind == "directed" and e.source == name]
            und = [e.target if e.source == name else e.source for e in r.edges
                   if e.kind == "undirected" and name in (e.source, e.target)]
            con = [e.target if e.source == name else e.source for e in r.edges
                   if e.kind == "contested" and name in (e.source, e.target)]
            rows = [("causes (parents)", parents), ("effects (children)", children),
                    ("undirected neighbours", und), ("contested neighbours", con)]
            marked = [e.arrow() for e in r.edges
                      if e.kind in _PAG_KINDS and name in (e.source, e.target)]
            if marked or r.settings.hidden_causes:
                rows.append(("edges with hidden-cause marks (↔, o→, o–o)", marked))
            html.append("<p>" + "<br>".join(
                f"{label}: {escape(', '.join(v)) if v else '—'}" for label, v in rows) + "</p>")
        html.append("<p style='color:#6B7178'>Ctrl+click another node to act on the pair.</p>")
        self.body.setText("".join(html))

    def _show_pair(self, a, b):
        s = self.session
        self.actions_box.show()
        self.title.setText(f"{a} — {b}")
        tips = {"lockEdge": f"lock the edge {a} — {b} (direction left to the search)",
                "lockForward": f"lock the direction {a} → {b}",
                "lockBackward": f"lock the direction {b} → {a}",
                "forbidEdge": f"forbid any edge between {a} and {b}",
                "forbidForward": f"forbid {a} → {b} ({b} → {a} stays possible)",
                "forbidBackward": f"forbid {b} → {a} ({a} → {b} stays possible)",
                "clearPair": "remove every statement about this pair"}
        self.pair_key.setText(f"Knowledge — A = {a}, B = {b}")
        for label, text, full in zip(self.direction_labels, ("A → B", "B → A", "either way"),
                                     (f"{a} → {b}", f"{b} → {a}", f"{a} — {b}")):
            label.setText(text)
            label.setToolTip(full)
        in_force = self._in_force(a, b)
        statements = s.pair_statements(a, b)
        for name, button in self.buttons.items():
            button.setToolTip(tips[name])
            if button.isCheckable():
                button.setChecked(name in in_force)
        self.buttons["clearPair"].setEnabled(
            any(not t.startswith("stage order") for t in statements))
        html = []
        r = s.result
        alpha = s.settings.alpha
        evidence = None
        margin = None  # the equivalence margin when the result used the equivalence rule
        if r is not None and a in r.variables and b in r.variables:
            evidence = r.evidence(a, b)
            alpha = r.settings.alpha
            if getattr(r.settings, "unrelated", "significance") == "equivalence":
                margin = r.settings.margin
            e = evidence.edge
            if e is not None:
                colour = "#B5482F" if e.kind == "contested" else "#1B232B"
                words = edge_text(e)  # from the marks; contested reads "a ?– b (contested)"
                if not words.endswith(")"):
                    words += f" ({e.kind})"
                html.append(f"<p style='font-size:13px; color:{colour}'><b>"
                            f"{escape(words)}</b></p>")
                if e.kind in _PAG_KINDS or r.settings.hidden_causes:
                    html.append(_marks_html(e))
                elif e.kind == "undirected":
                    html.append("<p>Direction: not determined by the data — both directions "
                                "fit the independence pattern equally well.</p>")
                else:
                    html.append(f"<p>Why: {escape(e.reason)}</p>")
                if margin is None:
                    html.append(f"<p>Decisive p-value: <b>{_p(e.max_pvalue)}</b> (the largest "
                                f"of {e.tests} tests; the edge stays because every p-value is "
                                f"at or below α = {alpha:g})</p>")
                else:
                    undecided = {a, b} in [set(p) for p in getattr(r, "undecided", ())]
                    html.append(f"<p>Equivalence rule, margin δ = {margin:g}: no test showed "
                                f"the effect within ±{margin:g} (every equivalence p-value is "
                                f"above α = {alpha:g})"
                                + ("; <b>undecided</b>: some test could not show a relation "
                                   "either" if undecided else "") + ".</p>")
            else:
                rem = evidence.removal
                html.append("<p style='font-size:13px'><b>not adjacent</b></p>")
                if rem is not None and rem.by == "test" and margin is not None:
                    html.append(f"<p>Removed: shown unrelated given <b>"
                                f"{escape(_set(rem.separating_set))}</b> (equivalence p = "
                                f"{_p(rem.pvalue)} ≤ α = {alpha:g}: effect within "
                                f"±{margin:g}).</p>")
                elif rem is not None and rem.by == "test":
                    html.append(f"<p>Removed: independent given <b>{escape(_set(rem.separating_set))}"
                                f"</b> (p = {_p(rem.pvalue)} &gt; α = {alpha:g}).</p>")
                elif rem is not None:
                    extra = ("" if rem.separating_set is None else
                             f"; the data also separate them given "
                             f"{escape(_set(rem.separating_set))} (p = {_p(rem.pvalue)})")
                    html.append(f"<p>Removed: forbidden by knowledge{extra}.</p>")
            triples = list(evidence.triples)
            if triples:
                html.append("<p><b>Unshielded triples involving this pair</b><br>" + "<br>".join(
                    f"{escape(str(t.get('x')))} — {escape(str(t.get('z')))} — "
                    f"{escape(str(t.get('y')))}: {escape(str(t.get('decision', '')))}"
                    + (f" ({escape(str(t.get('reason')))})" if t.get("reason") else "")
                    for t in triples[:8]) + "</p>")
        elif r is None:
            html.append("<p style='color:#6B7178'>No result yet: run a search to see the "
                        "evidence.</p>")
        else:
            html.append("<p style='color:#6B7178'>One of these variables was not in the last "
                        "search.</p>")
        if s.stale and r is not None:
            html.append("<p style='color:#8A6D3B'>"
                        + ("The data file changed since this result" if s.data_changed
                           else "Inputs changed since this result")
                        + "; run again to update the evidence.</p>")
        html.append("<p><b>Knowledge</b>: " + (escape("; ".join(statements)) if statements
                                               else "none about this pair") + "</p>")
        self.body.setText("".join(html))
        self._fill_tests(evidence, alpha, equivalence=margin is not None)

    def _fill_tests(self, evidence, alpha, *, equivalence=False):
        tests = list(evidence.tests) if evidence is not None else []
        self._show_tests(True)
        omitted = getattr(evidence, "omitted_text", "") if evidence is not None else ""
        self.tests_label.setText(f"Tests on this pair: {omitted}; re-run the search to see "
                                 "them" if omitted else f"Tests on this pair ({len(tests)})")
        self.tests_label.setWordWrap(bool(omitted))
        self.tests.setRowCount(len(tests))
        for row, t in enumerate(tests):
            if equivalence:  # equivalence p-values: small means shown unrelated
                independent = t.pvalue == t.pvalue and t.pvalue <= alpha
                verdict = ("within margin" if independent else "no result (NaN)"
                           if t.pvalue != t.pvalue else "not shown within margin")
            else:
                independent = t.pvalue == t.pvalue and t.pvalue > alpha
                verdict = ("independent" if independent else
                           "no result (NaN)" if t.pvalue != t.pvalue else "dependent")
            items = (QTableWidgetItem(_set(t.given)), QTableWidgetItem(_p(t.pvalue)),
                     QTableWidgetItem(verdict))
            items[1].setTextAlignment(Qt.AlignRight | Qt.AlignVCenter)
            if independent:
                for it in items:
                    it.setForeground(QBrush(style.TEAL))
            for c, it in enumerate(items):
                self.tests.setItem(row, c, it)


_PAG_KINDS = ("bidirected", "partially-directed", "nondirected", "partially-undirected")
_END_WORDS = {"arrow": "arrowhead: {v} is not a cause of {w}",
              "tail": "tail: {v} is a cause of {w}",
              "circle": "circle: the data cannot decide whether {v} is a cause of {w}"}


def _marks_html(e) -> str:
    """The meaning of a hidden-causes edge and of each of its ends, with the reasons."""
    rows = [f"<p>Meaning: {escape(e.meaning().split(': ', 1)[1])}</p><p>"]
    for v, w, mark, why in ((e.target, e.source, e.to_mark, e.to_reason),
                            (e.source, e.target, e.from_mark, e.from_reason)):
        text = _END_WORDS[mark].format(v=v, w=w)
        rows.append(f"At <b>{escape(v)}</b>: {escape(text)}"
                    + (f" — {escape(why)}" if why and mark != "circle" else "") + "<br>")
    rows.append("</p><p style='color:#6B7178'>Hidden-causes mode: an edge need not be a "
                "direct effect; o→ and o–o may hide a common cause.</p>")
    return "".join(rows)
