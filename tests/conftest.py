"""Shared fixtures. Qt runs offscreen; Qt is imported only inside the GUI fixtures so the
headless engine job (no Qt installed) can still collect tests/engine."""
from __future__ import annotations

import os

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

from pathlib import Path  # noqa: E402

import pytest  # noqa: E402
from hypothesis import HealthCheck, settings  # noqa: E402

# CI runs the property tests derandomized (the same examples on every run, so a red build
# is reproducible) with no deadline (a loaded shared runner must not fail a test for time).
# Tests that ask for their own max_examples keep it; the rest get 50. Locally the default
# profile draws fresh examples each run. Selected by LOOPWRIGHT_HYPOTHESIS_PROFILE=ci;
# registered here, before any test module applies its @settings.
settings.register_profile(
    "ci",
    derandomize=True,
    max_examples=50,
    deadline=None,
    database=None,
    print_blob=True,
    suppress_health_check=[HealthCheck.too_slow],
)
settings.load_profile(os.environ.get("LOOPWRIGHT_HYPOTHESIS_PROFILE", "default"))

SCREENSHOT_DIR = Path(__file__).parent / "_screenshots"


# The offscreen platform says it cannot pass size hints on every show; that is the
# platform, not us. Every other Qt warning still fails a test.
_QT_NOISE = ("propagateSizeHints",)


def pytest_collection_modifyitems(config, items):
    for item in items:
        if "tests/gui" in str(item.fspath).replace("\\", "/"):
            item.add_marker(pytest.mark.qt_log_ignore(*_QT_NOISE))


@pytest.fixture(scope="session", autouse=True)
def _release_clipboard_at_exit():
    """Empty the clipboard before the process ends.

    With PySide6 (6.11.3 and 6.12 alike), a QMimeData made in Python and handed to the
    clipboard makes the interpreter crash at exit unless the clipboard lets go of it first
    (the app does the same on quit, see gui/app.py); without this the GUI session
    segfaults at exit. Qt is looked up lazily: the headless job has none.
    """
    yield
    import sys

    widgets = sys.modules.get("PySide6.QtWidgets")
    app = widgets.QApplication.instance() if widgets is not None else None
    if app is not None:
        app.clipboard().clear()


@pytest.fixture(autouse=True)
def _collect_garbage_on_the_gui_thread(request):
    """GUI tests run the live model on a worker thread: keep Python's cyclic collector on
    the GUI thread (see gui/collector.py), and collect once after each test there.
    Still needed with PySide6 6.11.3: without it the GUI session segfaults at exit."""
    if "qapp" not in request.fixturenames and "qtbot" not in request.fixturenames:
        yield
        return
    from loopwright.gui.collector import install_collector

    install_collector(request.getfixturevalue("qapp"))
    yield
    import gc

    gc.collect()


class ScriptedDialogs:
    """Stands in for the window's dialogs: answers are set by the test, messages recorded."""

    def __init__(self):
        self.errors: list[tuple[str, str]] = []
        self.infos: list[tuple[str, str]] = []
        self.save_answer = "cancel"
        self.recover_answer = True
        self.open_answer: str | None = None
        self.save_as_answer: str | None = None
        self.asked_save = 0
        self.asked_recover: list[str] = []

    def error(self, title, text):
        self.errors.append((title, text))

    def info(self, title, text):
        self.infos.append((title, text))

    def ask_save_changes(self, name):
        self.asked_save += 1
        return self.save_answer

    def ask_recover(self, description):
        self.asked_recover.append(description)
        return self.recover_answer

    def open_path(self, folder=""):
        return self.open_answer

    def save_path(self, suggestion=""):
        return self.save_as_answer


@pytest.fixture
def dialogs():
    return ScriptedDialogs()


@pytest.fixture
def qsettings(tmp_path):
    from PySide6.QtCore import QSettings

    return QSettings(str(tmp_path / "settings.ini"), QSettings.Format.IniFormat)


@pytest.fixture
def prefs(tmp_path):
    from loopwright.gui.settings import Preferences

    return Preferences(autosave_dir=tmp_path / "autosave", autosave_interval_s=0, grid_size=10.0, debounce_ms=20, dark=False)


@pytest.fixture
def make_window(qtbot, qsettings, prefs, dialogs):
    """Build main windows that share this test's settings, preferences and dialogs."""
    from loopwright.gui.main_window import MainWindow

    made = []

    def _make(**overrides):
        win = MainWindow(settings=qsettings, prefs=overrides.pop("prefs", prefs), dialogs=overrides.pop("dialogs", dialogs))
        qtbot.addWidget(win)
        made.append(win)
        return win

    yield _make
    for win in made:
        win._closing_ok = True
        win.live.shutdown()
        win.views.shutdown()


@pytest.fixture
def window(make_window):
    return make_window()


@pytest.fixture
def wait_live(qtbot):
    """Wait until a window's live model describes its document's current revision."""

    def _wait(win, timeout=10000):
        qtbot.waitUntil(win.live.is_current, timeout=timeout)
        return win.live.latest

    return _wait


@pytest.fixture
def screenshot_dir():
    SCREENSHOT_DIR.mkdir(exist_ok=True)
    return SCREENSHOT_DIR
