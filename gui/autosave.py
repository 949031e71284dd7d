"""Autosave copies of open diagrams and their recovery after a crash.

Each window writes its diagram (through the engine's atomic save) to
``<autosave_dir>/<token>.lwd`` when it has unsaved changes, with a small JSON note
beside it naming the file it belongs to. A clean close deletes both; whatever is left
in the folder when the app starts was left by a crash and is offered for recovery.
"""
from __future__ import annotations

import json
import os
import time
import uuid
from dataclasses import dataclass
from pathlib import Path

from loopwright.engine.diagram import Diagram
from loopwright.engine.project import FILE_SUFFIX, atomic_write, save

__all__ = ["Autosaver", "Leftover", "find_leftovers"]


@dataclass(frozen=True)
class Leftover:
    """An autosave left behind: the copy, the file it belonged to, when it was written."""

    path: Path
    original: str | None
    saved_at: float

    def describe(self) -> str:
        when = time.strftime("%Y-%m-%d %H:%M", time.localtime(self.saved_at))
        return f"{self.original or 'an untitled diagram'} (autosaved {when})"

    def discard(self) -> None:
        for p in (self.path, self.path.with_suffix(".json")):
            try:
                p.unlink()
            except FileNotFoundError:
                pass


def _owner_running(path: Path) -> bool:
    """True if the autosave belongs to another Loopwright process that is still running."""
    parts = path.stem.split("-")
    if len(parts) < 3 or not parts[1].isdigit() or os.name != "posix":
        # Elsewhere a signal-0 probe is not harmless (on Windows it ends the process).
        return False
    pid = int(parts[1])
    if pid == os.getpid():
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def find_leftovers(folder: Path) -> list[Leftover]:
    """Autosaves in ``folder`` left by processes that are gone, newest first.

    A copy whose owner is still running (a second Loopwright open at the same time) is
    not a leftover and is never offered or deleted.
    """
    folder = Path(folder)
    if not folder.is_dir():
        return []
    out = []
    for p in folder.glob(f"*{FILE_SUFFIX}"):
        if _owner_running(p):
            continue
        note = p.with_suffix(".json")
        original, saved_at = None, p.stat().st_mtime
        try:
            data = json.loads(note.read_text(encoding="utf-8"))
            original = data.get("original")
            saved_at = float(data.get("saved_at", saved_at))
        except (OSError, ValueError, AttributeError):
            pass
        out.append(Leftover(p, original, saved_at))
    return sorted(out, key=lambda lo: lo.saved_at, reverse=True)


class Autosaver:
    """Writes one window's autosave copy; ``clear()`` on a clean close."""

    def __init__(self, folder: Path):
        self.folder = Path(folder)
        self.token = f"autosave-{os.getpid()}-{uuid.uuid4().hex[:8]}"

    @property
    def path(self) -> Path:
        return self.folder / f"{self.token}{FILE_SUFFIX}"

    def write(self, diagram: Diagram, original: str | None) -> Path:
        self.folder.mkdir(parents=True, exist_ok=True)
        save(diagram, self.path)
        atomic_write(self.path.with_suffix(".json"), json.dumps({"original": original, "saved_at": time.time()}))
        return self.path

    def clear(self) -> None:
        Leftover(self.path, None, 0.0).discard()
