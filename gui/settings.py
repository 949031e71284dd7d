"""User preferences of the desktop app: where autosaves go, how often, the grid, recent files.

Preferences are read once into a :class:`Preferences` value and passed to the parts that
need them; no module reads QSettings behind the caller's back. Tests pass their own
``QSettings`` (an ini file in a temporary folder) and their own autosave folder.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from PySide6.QtCore import QSettings, QStandardPaths

__all__ = ["Preferences", "load_preferences", "save_canvas_colours", "RecentFiles", "default_autosave_dir", "MAX_RECENT"]

MAX_RECENT = 8


def default_autosave_dir() -> Path:
    """The user's data folder for Loopwright (QStandardPaths.AppDataLocation)/autosave."""
    base = QStandardPaths.writableLocation(QStandardPaths.StandardLocation.AppDataLocation)
    if not base:
        base = str(Path.home() / ".loopwright")
    return Path(base) / "autosave"


@dataclass(frozen=True)
class Preferences:
    """Preferences of one window.

    Attributes
    ----------
    autosave_dir : Path
        Folder for autosave copies; one file per window, removed on a clean close.
    autosave_interval_s : float
        Seconds between autosaves while the diagram has unsaved changes; 0 disables.
    grid_size : float
        Snap grid in scene units.
    debounce_ms : int
        Quiet time after an edit before the live model is re-assembled.
    dark : bool or None
        Force the dark or light canvas; None follows the system palette.
    """

    autosave_dir: Path = field(default_factory=default_autosave_dir)
    autosave_interval_s: float = 60.0
    grid_size: float = 10.0
    debounce_ms: int = 150
    dark: bool | None = None


def load_preferences(settings: QSettings, **overrides) -> Preferences:
    """Read preferences from ``settings``; keyword ``overrides`` win (used by tests)."""
    values = {
        "autosave_dir": Path(str(settings.value("autosave/dir", str(default_autosave_dir())))),
        "autosave_interval_s": float(settings.value("autosave/interval_s", 60.0)),
        "grid_size": float(settings.value("canvas/grid", 10.0)),
        "debounce_ms": int(settings.value("live/debounce_ms", 150)),
    }
    dark = settings.value("canvas/dark", "")
    values["dark"] = None if dark in ("", None) else str(dark).lower() in ("1", "true", "yes")
    values.update(overrides)
    return Preferences(**values)


def save_canvas_colours(settings: QSettings, dark: bool | None) -> None:
    """Remember the canvas colour choice (None: follow the system) for the next start."""
    settings.setValue("canvas/dark", "" if dark is None else ("true" if dark else "false"))
    settings.sync()


class RecentFiles:
    """Most-recently-used project paths, newest first, kept in ``settings``."""

    KEY = "files/recent"

    def __init__(self, settings: QSettings):
        self._settings = settings

    def paths(self) -> list[str]:
        raw = self._settings.value(self.KEY, [])
        if isinstance(raw, str):
            raw = [raw] if raw else []
        return [str(p) for p in (raw or [])]

    def add(self, path: str | Path) -> list[str]:
        path = str(Path(path).resolve())
        items = [path] + [p for p in self.paths() if p != path]
        items = items[:MAX_RECENT]
        self._settings.setValue(self.KEY, items)
        self._settings.sync()
        return items

    def remove(self, path: str) -> None:
        self._settings.setValue(self.KEY, [p for p in self.paths() if p != path])

    def clear(self) -> None:
        self._settings.setValue(self.KEY, [])
