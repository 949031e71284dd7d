"""Loopwright desktop app (PySide6). See loopwright.gui.app.run_app."""
from loopwright.gui import _refcount_guard  # noqa: F401  (must run before any Qt signal is emitted)
