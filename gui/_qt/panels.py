"""The left side: the **Variables** panel and the **stages** editor.

Both observe the session and act through it: ticking a variable calls
``session.set_included``; dropping a variable on a stage calls ``session.move_to_stage``.
Refreshes from the model block the widgets' own signals, so nothing echoes back.
"""

from __future__ import annotations

from PySide6.QtCore import QMimeData, Qt, Signal
from PySide6.QtGui import QBrush, QColor, QDrag
from PySide6.QtWidgets import (QAbstractItemView, QComboBox, QHBoxLayout, QHeaderView, QLabel,
                               QListWidget, QListWidgetItem, QScrollArea, QTableWidget,
                               QTableWidgetItem, QToolButton, QVBoxLayout, QWidget)

from discovery.settings import PARAMETERS

from . import style
from .style import signals_blocked

_MIME = "application/x-edgewise-variables"


class VariablesPanel(QWidget):
    """Name, kind glyph, missing share and an include toggle for every column read."""

    def __init__(self, session, parent=None):
        super().__init__(parent)
        self.session = session
        self.setObjectName("variablesPanel")
        layout = QVBoxLayout(self)
        layout.setContentsMargins(6, 6, 6, 6)
        row = QHBoxLayout()
        label = QLabel("Missing values:")
        self.missing = QComboBox()
        self.missing.setObjectName("missingPolicy")
        for option in PARAMETERS["missing"].options:
            self.missing.addItem({"drop": "drop incomplete rows",
                                  "test-wise": "test-wise deletion"}.get(option, option),
                                 option)
        self.missing.setToolTip(PARAMETERS["missing"].help)
        label.setBuddy(self.missing)
        row.addWidget(label)
        row.addWidget(self.missing, 1)
        layout.addLayout(row)
        self.table = QTableWidget(0, 4)
        self.table.setObjectName("variablesTable")
        self.table.setHorizontalHeaderLabels(["", "kind", "variable", "missing"])
        self.table.verticalHeader().hide()
        self.table.setSelectionBehavior(QAbstractItemView.SelectRows)
        self.table.setSelectionMode(QAbstractItemView.SingleSelection)
        self.table.setEditTriggers(QAbstractItemView.NoEditTriggers)
        self.table.setShowGrid(False)
        self.table.setAlternatingRowColors(False)
        header = self.table.horizontalHeader()
        header.setSectionResizeMode(0, QHeaderView.ResizeToContents)
        header.setSectionResizeMode(1, QHeaderView.ResizeToContents)
        header.setSectionResizeMode(2, QHeaderView.Stretch)
        header.setSectionResizeMode(3, QHeaderView.ResizeToContents)
        layout.addWidget(self.table, 1)
        self.summary = QLabel("")
        self.summary.setObjectName("variablesSummary")
        self.summary.setWordWrap(True)
        self.summary.setStyleSheet("color: #6B7178;")
        layout.addWidget(self.summary)
        self._rows: dict[str, int] = {}

        self.table.itemChanged.connect(self._on_item_changed)
        self.table.itemSelectionChanged.connect(self._on_row_selected)
        self.missing.currentIndexChanged.connect(self._on_missing)
        ev = session.events
        ev.dataset.connect(self._rebuild)
        ev.included.connect(self._on_included)
        ev.settings.connect(self._on_settings)
        ev.selection.connect(self._on_selection)
        self._rebuild()
        self._on_settings(session.settings)

    # -- model → widgets ---------------------------------------------------------------------
    def _rebuild(self, _=None):
        ds = self.session.dataset
        with signals_blocked(self.table):
            self.table.setRowCount(0)
            self._rows = {}
            if ds is None:
                self.summary.setText("No data open.")
                return
            names = list(ds.kinds)
            self.table.setRowCount(len(names))
            for r, name in enumerate(names):
                usable = name in ds.variables
                check = QTableWidgetItem()
                if usable:
                    check.setFlags(Qt.ItemIsUserCheckable | Qt.ItemIsEnabled
                                   | Qt.ItemIsSelectable)
                    check.setCheckState(Qt.Checked if name in self.session.included
                                        else Qt.Unchecked)
                    check.setToolTip("include in the search")
                else:
                    check.setFlags(Qt.ItemIsSelectable)
                    check.setToolTip(f"left out: {ds.excluded.get(name, '')}")
                kind = ds.kinds[name]
                glyph = QTableWidgetItem(style.kind_icon(kind), "")
                glyph.setToolTip(kind)
                glyph.setData(Qt.UserRole, kind)
                label = QTableWidgetItem(name)
                label.setData(Qt.UserRole, name)
                share = ds.missing_share[name]
                miss = QTableWidgetItem("—" if share == 0 else f"{100 * share:.1f}%")
                miss.setTextAlignment(Qt.AlignRight | Qt.AlignVCenter)
                if share >= 0.2:
                    miss.setForeground(QBrush(style.CONTESTED))
                if not usable:
                    for it in (glyph, label, miss):
                        it.setForeground(QBrush(style.MUTED))
                    label.setText(f"{name}  ({ds.excluded.get(name, 'left out')})")
                for c, it in enumerate((check, glyph, label, miss)):
                    self.table.setItem(r, c, it)
                self._rows[name] = r
            self._update_summary()

    def _update_summary(self):
        ds = self.session.dataset
        if ds is None:
            return
        self.summary.setText(
            f"{len(self.session.included)} of {len(ds.variables)} usable variables included; "
            f"{ds.rows_read} rows read.")

    def _on_included(self, included):
        chosen = set(included)
        with signals_blocked(self.table):
            for name, r in self._rows.items():
                item = self.table.item(r, 0)
                if item.flags() & Qt.ItemIsUserCheckable:
                    item.setCheckState(Qt.Checked if name in chosen else Qt.Unchecked)
        self._update_summary()

    def _on_settings(self, settings):
        with signals_blocked(self.missing):
            self.missing.setCurrentIndex(self.missing.findData(settings.missing))

    def _on_selection(self, selection):
        with signals_blocked(self.table):
            self.table.clearSelection()
            if len(selection) == 1 and selection[0] in self._rows:
                self.table.selectRow(self._rows[selection[0]])

    # -- widgets → model ---------------------------------------------------------------------
    def _on_item_changed(self, item):
        if item.column() != 0:
            return
        name = self.table.item(item.row(), 2).data(Qt.UserRole)
        self.session.set_included(name, item.checkState() == Qt.Checked)

    def _on_row_selected(self):
        rows = {i.row() for i in self.table.selectedItems()}
        if len(rows) == 1:
            name = self.table.item(rows.pop(), 2).data(Qt.UserRole)
            self.session.select_node(name)

    def _on_missing(self, index):
        self.session.set_setting("missing", self.missing.itemData(index))


class _StageList(QListWidget):
    """One group of the stages editor; accepts variables dragged from any other group."""

    dropped = Signal(list, object)  # names, stage index (None: the unstaged pool)

    def __init__(self, stage, parent=None):
        super().__init__(parent)
        self.stage = stage
        self.setDragEnabled(True)
        self.setAcceptDrops(True)
        self.setDropIndicatorShown(True)
        self.setDragDropMode(QAbstractItemView.DragDrop)
        self.setDefaultDropAction(Qt.MoveAction)
        self.setSelectionMode(QAbstractItemView.ExtendedSelection)
        self.setFlow(QListWidget.LeftToRight)
        self.setWrapping(True)
        self.setResizeMode(QListWidget.Adjust)
        self.setSpacing(2)
        self.setVerticalScrollBarPolicy(Qt.ScrollBarAlwaysOff)

    def fit_height(self):
        rows = 1
        if self.count():
            last = self.visualItemRect(self.item(self.count() - 1))
            rows_h = last.bottom() + 6 if last.isValid() else 28
            self.setFixedHeight(max(30, min(140, rows_h + 4)))
            return
        self.setFixedHeight(30 * rows)

    def resizeEvent(self, event):
        super().resizeEvent(event)
        self.fit_height()

    def mimeData(self, items):
        data = QMimeData()
        data.setData(_MIME, "\n".join(i.text() for i in items).encode("utf-8"))
        return data

    def mimeTypes(self):
        return [_MIME]

    def startDrag(self, actions):
        items = self.selectedItems()
        if not items:
            return
        drag = QDrag(self)
        drag.setMimeData(self.mimeData(items))
        drag.exec(Qt.MoveAction)

    def dragEnterEvent(self, event):
        if event.mimeData().hasFormat(_MIME):
            event.acceptProposedAction()
        else:
            event.ignore()

    def dragMoveEvent(self, event):
        if event.mimeData().hasFormat(_MIME):
            event.acceptProposedAction()
        else:
            event.ignore()

    def dropEvent(self, event):
        if not event.mimeData().hasFormat(_MIME):
            event.ignore()
            return
        names = bytes(event.mimeData().data(_MIME)).decode("utf-8").split("\n")
        # the model owns the stages; the lists are rebuilt from it, so Qt must not move items
        event.setDropAction(Qt.IgnoreAction)
        event.accept()
        self.dropped.emit([n for n in names if n], self.stage)


class StagesEditor(QWidget):
    """Ordered groups of variables; drag variables between groups to change the stages.

    The first list holds variables in no stage. The last, empty group ("drop here to add a
    stage") opens a new last stage.
    """

    def __init__(self, session, parent=None):
        super().__init__(parent)
        self.session = session
        self.setObjectName("stagesEditor")
        outer = QVBoxLayout(self)
        outer.setContentsMargins(6, 6, 6, 6)
        intro = QLabel("Earlier stages are never caused by later ones. Drag variables "
                       "between groups.")
        intro.setWordWrap(True)
        intro.setStyleSheet("color: #6B7178;")
        outer.addWidget(intro)
        self.scroll = QScrollArea()
        self.scroll.setWidgetResizable(True)
        self.scroll.setFrameShape(QScrollArea.NoFrame)
        outer.addWidget(self.scroll, 1)
        self.lists: list[_StageList] = []
        ev = session.events
        ev.knowledge.connect(self._rebuild)
        ev.dataset.connect(self._rebuild)
        ev.result.connect(self._rebuild)
        self._rebuild()

    def _rebuild(self, _=None):
        # a fresh body each time: the scroll area deletes the old one with all its children
        self.body = QWidget()
        self.body_layout = QVBoxLayout(self.body)
        self.body_layout.setContentsMargins(0, 0, 0, 0)
        self.body_layout.setSpacing(4)
        self.lists = []
        s = self.session
        stages = s.knowledge.stages
        staged = {v for g in stages for v in g}
        pool = [v for v in s.variables if v not in staged]
        self._add_group("Not in a stage", pool, None, "stagePool")
        for i, group in enumerate(stages):
            self._add_group(f"Stage {i + 1}", list(group), i, f"stage{i + 1}")
        self._add_group("Drop here to add a stage", [], len(stages), "stageNew")
        self.body_layout.addStretch(1)
        old = self.scroll.takeWidget()
        if old is not None:  # may be inside one of its own drop or click handlers: defer
            old.hide()
            old.deleteLater()
        self.scroll.setWidget(self.body)

    def _add_group(self, title, names, index, object_name):
        header = QHBoxLayout()
        label = QLabel(title)
        label.setProperty("class", "sectionTitle")
        label.setStyleSheet("color: #44505C; font-weight: 600;" if index is not None
                            and index < len(self.session.knowledge.stages)
                            else "color: #8A8F94;")
        header.addWidget(label, 1)
        n_stages = len(self.session.knowledge.stages)
        if index is not None and index < n_stages:
            for text, tip, enabled, slot, name in (
                    ("▲", "move this stage earlier", index > 0,
                     lambda _=False, i=index: self.session.move_stage(i, i - 1), "Up"),
                    ("▼", "move this stage later", index < n_stages - 1,
                     lambda _=False, i=index: self.session.move_stage(i, i + 1), "Down"),
                    ("✕", "remove this stage (its variables go back to no stage)", True,
                     lambda _=False, i=index: self.session.remove_stage(i), "Remove")):
                button = QToolButton()
                button.setText(text)
                button.setToolTip(tip)
                button.setEnabled(enabled)
                button.setAutoRaise(True)
                button.setObjectName(f"{object_name}{name}")
                button.clicked.connect(slot)
                header.addWidget(button)
        self.body_layout.addLayout(header)
        lst = _StageList(index)
        lst.setObjectName(object_name)
        kinds = self.session.dataset.kinds if self.session.dataset is not None else {}
        for name in names:
            item = QListWidgetItem(style.kind_icon(kinds.get(name, "continuous")), name)
            lst.addItem(item)
        lst.dropped.connect(self._on_dropped)
        if index is not None and index >= n_stages:
            lst.setStyleSheet("QListWidget { border: 1px dashed #C9CDD1; background: #FBFAF8; }")
        self.body_layout.addWidget(lst)
        self.lists.append(lst)
        lst.fit_height()

    def _on_dropped(self, names, stage):
        self.move_variables(names, stage)

    def move_variables(self, names, stage):
        """What a drop does: move ``names`` to stage ``stage`` (None: out of every stage)."""
        self.session.move_to_stage(names, stage)

    def group_names(self) -> list[list[str]]:
        """The names shown in each group, pool first (for tests)."""
        return [[lst.item(i).text() for i in range(lst.count())] for lst in self.lists]
