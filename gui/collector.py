"""Python's cyclic garbage collector, run on the GUI thread only.

The live model computes on a worker thread. Python's collector runs in whichever thread
happens to allocate when a threshold is crossed, so without this a collection could start
on the worker and finalise wrappers of Qt objects (closed windows, removed canvas items)
there, destroying them off the GUI thread: an intermittent crash. Automatic collection is
switched off and a timer on the GUI thread collects instead, generation by generation as
the thresholds would have, so memory behaves as before.
"""
from __future__ import annotations

import gc

from PySide6.QtCore import QObject, QTimer

__all__ = ["MainThreadCollector", "install_collector"]


class MainThreadCollector(QObject):
    """Collects on the GUI thread every ``interval_ms`` when the allocation counts ask for it."""

    def __init__(self, parent: QObject | None = None, *, interval_ms: int = 500):
        super().__init__(parent)
        self._thresholds = gc.get_threshold()
        gc.disable()
        self._timer = QTimer(self)
        self._timer.setInterval(interval_ms)
        self._timer.timeout.connect(self.check)
        self._timer.start()

    def check(self) -> None:
        """Collect the oldest generation whose count passed its threshold (as gc would)."""
        counts = gc.get_count()
        for gen in (2, 1, 0):
            if counts[gen] > self._thresholds[gen]:
                gc.collect(gen)
                return

    def stop(self) -> None:
        self._timer.stop()
        gc.enable()


def install_collector(app: QObject) -> MainThreadCollector:
    """Install one collector on ``app`` (idempotent)."""
    existing = app.findChild(MainThreadCollector)
    if existing is not None:
        return existing
    return MainThreadCollector(app)
