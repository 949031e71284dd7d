"""The problems list: every error the engine finds in the diagram; clicking one selects
its culprits on the canvas."""
from __future__ import annotations

from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import QListWidget, QListWidgetItem, QStyle

__all__ = ["ProblemsList", "view_for_warning"]


def view_for_warning(text: str) -> str | None:
    """The panel that shows what a check warning is about (None when no panel does)."""
    t = text.lower()
    if "pole" in t or "imaginary axis" in t:
        return "poles"
    return None


class ProblemsList(QListWidget):
    """Shows ``Problem`` objects; emits ``culprits_chosen(block_ids, wire_ids)`` on a click,
    and ``view_requested(key)`` for a warning a plot panel shows (the pole map)."""

    culprits_chosen = Signal(list, list)
    view_requested = Signal(str)

    def __init__(self, parent=None):
        super().__init__(parent)
        self.setObjectName("problems_list")
        self.setWordWrap(True)
        self.itemClicked.connect(self._on_clicked)
        self.itemActivated.connect(self._on_clicked)
        # Activation is a single or a double click depending on the platform's style: a
        # double click always selects the culprit.
        self.itemDoubleClicked.connect(self._on_clicked)

    def set_problems(self, problems, *, warnings=()) -> None:
        """Errors first (each selects its culprits), then the check report's warnings."""
        self.clear()
        err_icon = self.style().standardIcon(QStyle.StandardPixmap.SP_MessageBoxCritical)
        warn_icon = self.style().standardIcon(QStyle.StandardPixmap.SP_MessageBoxWarning)
        for p in problems:
            item = QListWidgetItem(err_icon if getattr(p, "severity", "error") == "error" else warn_icon, p.message)
            item.setData(Qt.ItemDataRole.UserRole, (list(p.block_ids), list(p.wire_ids)))
            item.setToolTip(p.message)
            self.addItem(item)
        for text in warnings:
            view = view_for_warning(text)
            shown = text + ("  (click: pole map)" if view == "poles" else "")
            item = QListWidgetItem(warn_icon, shown)
            item.setData(Qt.ItemDataRole.UserRole, ([], []))
            item.setData(Qt.ItemDataRole.UserRole + 1, view)
            item.setToolTip(text)
            self.addItem(item)

    def _on_clicked(self, item: QListWidgetItem) -> None:
        blocks, wires = item.data(Qt.ItemDataRole.UserRole)
        view = item.data(Qt.ItemDataRole.UserRole + 1)
        if view:
            self.view_requested.emit(view)
        self.culprits_chosen.emit(list(blocks), list(wires))
