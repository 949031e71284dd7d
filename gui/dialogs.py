"""The questions the window asks the user, behind one small interface.

:class:`Dialogs` shows real message boxes and file pickers; tests hand the window a
scripted stand-in with the same methods, so no modal dialog ever blocks a test run.
"""
from __future__ import annotations

from PySide6.QtWidgets import QFileDialog, QMessageBox

from loopwright.engine.project import FILE_SUFFIX

__all__ = ["Dialogs", "FILE_FILTER"]

FILE_FILTER = f"Loopwright diagrams (*{FILE_SUFFIX});;All files (*)"


class Dialogs:
    """Modal questions, parented to ``window``."""

    def __init__(self, window):
        self._w = window

    def error(self, title: str, text: str) -> None:
        QMessageBox.warning(self._w, title, text)

    def info(self, title: str, text: str) -> None:
        QMessageBox.about(self._w, title, text)

    def ask_save_changes(self, name: str) -> str:
        """'save', 'discard' or 'cancel'."""
        box = QMessageBox(self._w)
        box.setIcon(QMessageBox.Icon.Question)
        box.setWindowTitle("Unsaved changes")
        box.setText(f"{name} has changes that are not saved.")
        box.setInformativeText("Save them before closing?")
        box.setStandardButtons(QMessageBox.StandardButton.Save | QMessageBox.StandardButton.Discard | QMessageBox.StandardButton.Cancel)
        box.setDefaultButton(QMessageBox.StandardButton.Save)
        answer = box.exec()
        return {QMessageBox.StandardButton.Save: "save", QMessageBox.StandardButton.Discard: "discard"}.get(
            QMessageBox.StandardButton(answer), "cancel"
        )

    def ask_recover(self, description: str) -> bool:
        answer = QMessageBox.question(
            self._w,
            "Recover unsaved work",
            f"Loopwright did not close properly last time. An autosaved diagram was found:\n\n{description}\n\nRecover it?",
            QMessageBox.StandardButton.Yes | QMessageBox.StandardButton.No,
            QMessageBox.StandardButton.Yes,
        )
        return answer == QMessageBox.StandardButton.Yes

    def open_path(self, folder: str = "") -> str | None:
        path, _ = QFileDialog.getOpenFileName(self._w, "Open diagram", folder, FILE_FILTER)
        return path or None

    def save_path(self, suggestion: str = "") -> str | None:
        path, _ = QFileDialog.getSaveFileName(self._w, "Save diagram as", suggestion, FILE_FILTER)
        if path and not path.endswith(FILE_SUFFIX) and "." not in path.rsplit("/", 1)[-1]:
            path += FILE_SUFFIX
        return path or None
