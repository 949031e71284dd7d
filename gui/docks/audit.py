"""The path audit: the engine's ranked table of every source-to-signal path. Selecting a
row lights that path's blocks and wires on the canvas and draws it in the frequency view;
the worst stable path and every unstable one are named in the status bar."""
from __future__ import annotations

import numpy as np
from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import QAbstractItemView, QCheckBox, QHBoxLayout, QTableWidget, QTableWidgetItem

from loopwright.engine.audit import RANKING_RULE, path_audit
from loopwright.engine.interconnect import assemble
from loopwright.engine.path_text import path_text
from loopwright.gui.docks.panel import PlotPanel

__all__ = ["AuditPanel", "audit_rows", "audit_summary"]

_HEADER = ["#", "source", "signal", "peak gain", "at (rad/s)", "H2", "DC gain", "stable", "blocks on the path"]


def audit_rows(diagram, *, injections: bool = False, progress=None, shared=None) -> list:
    """The ranked rows (worker thread); ``progress`` as in :func:`path_audit` (may stop it);
    ``shared``: the snapshot's :class:`~loopwright.engine.views_data.SharedModel`."""
    return path_audit(assemble(diagram) if shared is None else shared.model, injections=injections, progress=progress)


def _num(x: float) -> str:
    return "—" if not np.isfinite(x) else f"{x:.4g}"


def _peak_phrase(peak: float, w_rad_s: float) -> str:
    """Where a path's peak gain is, in words that are true in every case: a frequency only
    when there is one (the engine gives inf for a peak approached as the frequency grows,
    through a direct feedthrough, and nan where it has none)."""
    if not np.isfinite(peak):
        return "unbounded gain"
    if peak == 0:
        return "zero gain at every frequency"
    if w_rad_s == 0:
        return f"peak gain {_num(peak)} at DC (0 rad/s)"
    if np.isposinf(w_rad_s):
        return f"peak gain {_num(peak)}, approached as the frequency grows (direct feedthrough)"
    if not np.isfinite(w_rad_s):
        return f"peak gain {_num(peak)} (no single frequency)"
    return f"peak gain {_num(peak)} at {_num(w_rad_s)} rad/s"


def audit_summary(rows) -> str:
    """One status-bar line: the worst stable path and any unstable ones."""
    unstable = [r for r in rows if not r.stable]
    stable = [r for r in rows if r.stable]
    parts = []
    if stable:
        w = stable[0]
        parts.append(f"worst stable path: {w.source} → {w.signal}, {_peak_phrase(w.peak_gain, w.peak_freq_rad_s)}")
    if unstable:
        names = ", ".join(f"{r.source} → {r.signal}" for r in unstable[:4]) + (" …" if len(unstable) > 4 else "")
        parts.append(f"UNSTABLE: {len(unstable)} path{'s' if len(unstable) > 1 else ''} ({names})")
    return "Path audit — " + ("; ".join(parts) if parts else "no path from a source reaches a signal")


class AuditPanel(PlotPanel):
    """Signals: ``path_selected(AuditRow or None)``, ``summary_changed(str)``."""

    key = "audit"
    title = "path audit"
    reports_progress = True
    path_selected = Signal(object)
    summary_changed = Signal(str)

    def __init__(self, parent=None):
        super().__init__(parent)
        bar = QHBoxLayout()
        self.injections = QCheckBox("with injections")
        self.injections.setObjectName("audit_injections")
        self.injections.setToolTip("Also rank the paths from the injection on every signal")
        self.injections.toggled.connect(lambda _on: self.options_changed.emit())
        bar.addWidget(self.injections)
        bar.addStretch(1)
        self._layout.addLayout(bar)
        self.grid = QTableWidget(0, len(_HEADER))
        self.grid.setObjectName("audit_table")
        self.grid.setHorizontalHeaderLabels(_HEADER)
        self.grid.verticalHeader().setVisible(False)
        self.grid.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
        self.grid.setSelectionMode(QAbstractItemView.SelectionMode.SingleSelection)
        self.grid.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        self.grid.horizontalHeader().setStretchLastSection(True)
        self.grid.itemSelectionChanged.connect(self._on_selection)
        self._layout.addWidget(self.grid, 1)
        self.rows: list = []
        self.set_message(f"Ranking: {RANKING_RULE}.")

    def job(self, diagram, pairs, shared=None):
        return audit_rows, (diagram,), {"injections": self.injections.isChecked(), "shared": shared}

    def show_value(self, value) -> None:
        rows = list(value or [])
        selected = self.selected_row()
        key = (selected.source, selected.signal) if selected is not None else None
        self.rows = rows
        g = self.grid
        g.blockSignals(True)
        g.clearSelection()
        g.setRowCount(len(rows))
        for i, r in enumerate(rows):
            cells = [str(r.rank), r.source, r.signal, _num(r.peak_gain), _num(r.peak_freq_rad_s), _num(r.h2), _num(r.dc_gain),
                     "yes" if r.stable else "NO", path_text(r.blocks, sep=" → ")]
            for j, c in enumerate(cells):
                item = QTableWidgetItem(c)
                if j in (0, 3, 4, 5, 6):
                    item.setTextAlignment(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
                if not r.stable:
                    item.setForeground(Qt.GlobalColor.red)
                g.setItem(i, j, item)
        g.resizeColumnsToContents()
        g.blockSignals(False)
        self.set_message(f"{len(rows)} paths. Ranking: {RANKING_RULE}. Select a row to light it on the canvas.")
        self.summary_changed.emit(audit_summary(rows))
        if key is not None:
            for i, r in enumerate(rows):
                if (r.source, r.signal) == key:
                    self.select_row(i)
                    return
            self.path_selected.emit(None)

    def select_row(self, index: int) -> None:
        self.grid.selectRow(index)

    def selected_row(self):
        sel = self.grid.selectionModel().selectedRows() if self.grid.selectionModel() else []
        if not sel or sel[0].row() >= len(self.rows):
            return None
        return self.rows[sel[0].row()]

    def _on_selection(self) -> None:
        self.path_selected.emit(self.selected_row())

    def plot_scene_item(self):
        return None

    def picture_widget(self):
        return self.grid

    def table(self):
        return (["rank", "source", "signal", "peak_gain", "peak_freq_rad_s", "h2", "dc_gain", "stable", "blocks", "wires"],
                [[r.rank, r.source, r.signal, r.peak_gain, r.peak_freq_rad_s, r.h2, r.dc_gain, r.stable, " ".join(r.blocks), " ".join(r.wires)]
                 for r in self.rows])
