"""The Support panel: how often each pair, and each orientation, appears in resamples.

One row per pair adjacent in some resample, highest support first: a stacked bar split into
left → right (slate), left ← right (lighter slate), undirected (pale) and contested (brick
red), with a teal line at the consensus cut-off. Controls choose the number of resamples, the
method (bootstrap or half-size subsamples), the seed and the cut-off; a click on a row selects
the pair in the session. With subsampling the panel shows Meinshausen & Bühlmann's bound on
the expected number of falsely selected pairs.
"""

from __future__ import annotations

from PySide6.QtCore import QRectF, Qt, Signal
from PySide6.QtGui import QColor, QPainter, QPen
from PySide6.QtWidgets import (QComboBox, QDoubleSpinBox, QHBoxLayout, QLabel, QPushButton,
                               QScrollArea, QSpinBox, QVBoxLayout, QWidget)

from . import style
from .pair_rows import PairRowsChart
from .style import signals_blocked

__all__ = ["SupportPanel", "SupportChart"]

_ROW = 20
_TOP = 24
_LEFT = 150
_RIGHT = 18
_COLOURS = (("a_to_b", style.SLATE), ("b_to_a", QColor("#7A8794")),
            ("undirected", QColor("#B9C0C7")), ("contested", style.CONTESTED))


class SupportChart(PairRowsChart):
    """Stacked support bars per pair; clicks select pairs."""

    TOP = _TOP

    def __init__(self, parent=None):
        super().__init__("supportChart", parent)

    def rows(self):
        return self.record.pairs if self.record is not None else ()

    def empty_text(self):
        return ("No resampling yet: Resample in the toolbar searches resampled copies of the "
                "data" if self.record is None else "No edge in any resample")

    def set_record(self, record, selected=None):
        self.record, self.selected = record, selected
        self.fit_rows()

    def _x(self, share: float) -> float:
        return _LEFT + share * max(1.0, self.width() - _LEFT - _RIGHT)

    def paintEvent(self, event):
        p = QPainter(self)
        if not self.begin_paint(p):
            return
        record = self.record
        p.setPen(style.SLATE)
        for share in (0.0, 0.25, 0.5, 0.75, 1.0):
            p.drawText(QRectF(self._x(share) - 20, 3, 40, 16), Qt.AlignCenter, f"{share:g}")
        for row, pair in enumerate(record.pairs):
            y = _TOP + row * _ROW
            if self.selected == frozenset((pair.a, pair.b)):
                p.fillRect(QRectF(0, y, self.width(), _ROW), style.SELECTED_HALO)
            p.setPen(style.SLATE)
            p.drawText(QRectF(6, y, _LEFT - 12, _ROW), Qt.AlignRight | Qt.AlignVCenter,
                       f"{pair.a} · {pair.b}")
            left = 0.0
            p.setPen(Qt.NoPen)
            for key, colour in _COLOURS:
                share = getattr(pair, key)
                if share > 0:
                    p.setBrush(colour)
                    p.drawRect(QRectF(self._x(left), y + 4, self._x(left + share) -
                                      self._x(left), _ROW - 8))
                    left += share
        x = self._x(record.cutoff)
        p.setPen(QPen(style.TEAL, 1.6))
        p.drawLine(x, _TOP - 4, x, _TOP + _ROW * len(record.pairs))


class SupportPanel(QWidget):
    """The Support panel over ``session.support``; its controls hold the run's options."""

    resample_requested = Signal()

    def __init__(self, session, parent=None):
        super().__init__(parent)
        self.session = session
        self.setObjectName("supportPanel")
        layout = QVBoxLayout(self)
        layout.setContentsMargins(4, 4, 4, 4)
        controls = QHBoxLayout()
        controls.addWidget(QLabel("Resamples"))
        self.resamples = QSpinBox()
        self.resamples.setObjectName("supportResamples")
        self.resamples.setRange(1, 10_000)
        self.resamples.setValue(100)
        controls.addWidget(self.resamples)
        self.method = QComboBox()
        self.method.setObjectName("supportMethod")
        self.method.addItem("bootstrap", "bootstrap")
        self.method.addItem("half subsamples", "subsample")
        self.method.setToolTip("bootstrap: n rows with replacement (Friedman, Goldszmidt & "
                               "Wyner 1999); half subsamples: n/2 rows without, with the "
                               "stability-selection bound (Meinshausen & Bühlmann 2010)")
        controls.addWidget(self.method)
        controls.addWidget(QLabel("Seed"))
        self.seed = QSpinBox()
        self.seed.setObjectName("supportSeed")
        self.seed.setRange(0, 2 ** 31 - 1)
        self.seed.setValue(1)
        controls.addWidget(self.seed)
        controls.addWidget(QLabel("Cut-off"))
        self.cutoff = QDoubleSpinBox()
        self.cutoff.setObjectName("supportCutoff")
        self.cutoff.setRange(0.01, 1.0)
        self.cutoff.setSingleStep(0.05)
        self.cutoff.setValue(0.5)
        self.cutoff.setToolTip("support a pair needs to enter the consensus diagram")
        self.cutoff.valueChanged.connect(self._on_cutoff)
        controls.addWidget(self.cutoff)
        self.resample_button = QPushButton("Resample")
        self.resample_button.setObjectName("supportResampleButton")
        self.resample_button.clicked.connect(self.resample_requested)
        controls.addWidget(self.resample_button)
        controls.addStretch(1)
        layout.addLayout(controls)
        self.summary = QLabel()
        self.summary.setObjectName("supportSummary")
        self.summary.setWordWrap(True)
        layout.addWidget(self.summary)
        self.chart = SupportChart()
        self.chart.pair_clicked.connect(self.session.select_pair)
        scroll = QScrollArea()
        scroll.setObjectName("supportScroll")
        scroll.setWidgetResizable(True)
        scroll.setWidget(self.chart)
        layout.addWidget(scroll, 1)
        caution = QLabel("Bars: dark = left → right, grey = left ← right, pale = undirected, "
                         "red = contested; the teal line is the cut-off. Support measures "
                         "stability under sampling noise, not causation: a hidden common "
                         "cause gives a stable wrong edge.")
        caution.setObjectName("supportCaution")
        caution.setWordWrap(True)
        caution.setStyleSheet("color: #8A8F94; font-size: 11px;")
        layout.addWidget(caution)
        ev = session.events
        ev.support.connect(self._refresh)
        ev.selection.connect(self._refresh)
        ev.status.connect(self._on_status)
        self._refresh()
        self._on_status(session.status)

    def options(self) -> dict:
        """The run's options, for ``Session.start_analysis("support", ...)``."""
        return {"resamples": self.resamples.value(), "method": self.method.currentData(),
                "seed": self.seed.value(), "cutoff": round(self.cutoff.value(), 4)}

    def _on_status(self, status):
        self.resample_button.setEnabled(status not in ("running", "stopping"))

    def _on_cutoff(self, value):
        record = self.session.support
        if record is not None and abs(record.cutoff - value) > 1e-9:
            self.session.support = record.at_cutoff(round(value, 4))

    def _refresh(self, _=None):
        s = self.session
        record = s.support
        selected = frozenset(s.selection) if len(s.selection) == 2 else None
        self.chart.set_record(record, selected)
        if record is None:
            self.summary.setText("How often does each edge reappear in resampled data?")
            return
        with signals_blocked(self.cutoff):
            self.cutoff.setValue(record.cutoff)
        text = (f"{record.resamples} {record.method} resamples (seed {record.seed}): "
                f"{len(record.consensus)} edges with support ≥ {record.cutoff:g}")
        if record.false_edges_bound is not None:
            text += (f"; expected falsely selected pairs ≤ {record.false_edges_bound:.2g} "
                     "(Meinshausen & Bühlmann 2010)")
        if record.failed:
            text += f"; {record.failed} resample(s) could not be searched"
        self.summary.setText(text)
