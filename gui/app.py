"""Starting the desktop app: ``run_app(path, screenshot)`` is what ``loopwright [FILE]`` calls."""
from __future__ import annotations

import sys
import time
from pathlib import Path

from PySide6.QtCore import QSettings
from PySide6.QtWidgets import QApplication

from loopwright.gui.collector import install_collector

__all__ = ["run_app", "make_window", "render_screenshot", "SCREENSHOT_SIZE"]

SCREENSHOT_SIZE = (1400, 900)


def _application() -> QApplication:
    app = QApplication.instance()
    if app is None:
        app = QApplication(sys.argv[:1])
        app.aboutToQuit.connect(_release_clipboard)
    install_collector(app)
    app.setOrganizationName("Loopwright")
    app.setApplicationName("Loopwright")
    return app


def _release_clipboard() -> None:
    """Let go of a copied fragment before Qt shuts down.

    With PySide6 (6.11.3 and 6.12 alike) the process crashes at exit while the clipboard
    still holds a QMimeData made in Python; a fragment is only useful while Loopwright runs.
    """
    from loopwright.gui.canvas.clipboard import FRAGMENT_MIME

    app = QApplication.instance()
    if app is None:
        return
    md = app.clipboard().mimeData()
    if md is not None and md.hasFormat(FRAGMENT_MIME):
        app.clipboard().clear()


def make_window(path: str | None = None, *, settings: QSettings | None = None, prefs=None, dialogs=None):
    """A main window, with ``path`` opened (errors shown by the window's dialogs)."""
    from loopwright.gui.main_window import MainWindow
    from loopwright.gui.settings import load_preferences

    _application()
    settings = settings if settings is not None else QSettings()
    prefs = prefs if prefs is not None else load_preferences(settings)
    win = MainWindow(settings=settings, prefs=prefs, dialogs=dialogs)
    if path:
        win.open_path(path)
    return win


def render_screenshot(win, out: str | Path, *, size=SCREENSHOT_SIZE, timeout_s: float = 20.0) -> bool:
    """Show ``win`` at ``size``, wait for the live model, fit the view and save a PNG.

    Returns True when the live model was current when the picture was taken.
    """
    app = QApplication.instance()
    win.resize(*size)
    win.show()
    if not win.live.is_current():
        win.live.request_now()
    deadline = time.monotonic() + timeout_s
    while not win.live.is_current() and time.monotonic() < deadline:
        app.processEvents()
        time.sleep(0.01)
    app.processEvents()
    win.view.fit_to_view()
    app.processEvents()
    ok = win.live.is_current()
    Path(out).parent.mkdir(parents=True, exist_ok=True)
    win.grab().save(str(out))
    return ok


class _HeadlessDialogs:
    """Answers for a window nobody looks at (screenshot mode): errors go to stderr."""

    def error(self, title: str, text: str) -> None:
        print(f"loopwright: {text}", file=sys.stderr)

    def info(self, title: str, text: str) -> None:
        pass

    def ask_save_changes(self, name: str) -> str:
        return "discard"

    def ask_recover(self, description: str) -> bool:
        return False

    def open_path(self, folder: str = "") -> None:
        return None

    def save_path(self, suggestion: str = "") -> None:
        return None


def run_app(path: str | None, screenshot: str | None) -> int:
    """Open the app on ``path`` (or an empty diagram).

    With ``screenshot``, render the window offscreen at a fixed size once the live model
    is assembled, save the PNG there and return 0 without entering the event loop.
    """
    app = _application()
    if screenshot:
        import tempfile

        from PySide6.QtCore import qInstallMessageHandler

        def _quiet(mode, context, message):
            # The offscreen platform reports on every show that it ignores size hints.
            if "propagateSizeHints" not in message:
                print(message, file=sys.stderr)

        qInstallMessageHandler(_quiet)

        from loopwright.gui.settings import Preferences

        with tempfile.TemporaryDirectory(prefix="loopwright-shot-") as tmp:
            # A throwaway settings file and autosave folder: a screenshot run leaves no trace
            # in the user's preferences, recent files or autosaves.
            settings = QSettings(str(Path(tmp) / "settings.ini"), QSettings.Format.IniFormat)
            prefs = Preferences(autosave_dir=Path(tmp) / "autosave", autosave_interval_s=0)
            win = make_window(None, settings=settings, prefs=prefs, dialogs=_HeadlessDialogs())
            if path and not win.open_path(path):
                win._closing_ok = True
                win.close()
                return 2
            render_screenshot(win, screenshot)
            win._closing_ok = True
            win.close()
        return 0
    win = make_window(None)
    if path:
        win.open_path(path)
    else:
        win.offer_recovery()
    win.show()
    code = app.exec()
    win.live.shutdown()
    return code
