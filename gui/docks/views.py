"""Keeps every open plot panel up to date with the document.

After an edit each visible panel builds its job from a fresh snapshot and the kept pairs;
:class:`~loopwright.gui.workers.ViewJobs` runs it off the GUI thread and drops answers an
edit has overtaken. An edit made while the worker is idle is computed at once (on the
next turn of the event loop, so the steps of one command count once); edits that arrive
while it still computes are coalesced and computed once after a quiet spell (the
debounce), so dragging a value never queues a backlog. A hidden panel is marked stale and
catches up when it is shown. A panel whose answer takes longer than half a second says
so, with its progress where the engine reports it and a Stop that ends the computation.
"""
from __future__ import annotations

from PySide6.QtCore import QObject, QTimer

from loopwright.gui.view_commands import pairs_of
from loopwright.gui.workers import ViewJobs, ViewResult

__all__ = ["ViewsController"]

_BUSY_AFTER_MS = 500


class ViewsController(QObject):
    """Runs the panels' jobs; ``panels`` maps a key to ``(panel, dock)``."""

    def __init__(self, document, *, debounce_ms: int = 150, parent=None):
        super().__init__(parent)
        self._doc = document
        self.jobs = ViewJobs(document, self)
        self.panels: dict[str, tuple] = {}
        self._fresh: dict[str, int] = {}
        self._busy_timers: dict[str, QTimer] = {}
        self._debounce_ms = debounce_ms
        self._timer = QTimer(self)
        self._timer.setSingleShot(True)
        self._timer.timeout.connect(self.refresh_visible)
        document.changed.connect(self._on_changed)
        self.jobs.result_ready.connect(self._on_result)
        self.jobs.busy_changed.connect(self._on_busy)
        self.jobs.progress_changed.connect(self._on_progress)

    def add(self, panel, dock) -> None:
        key = panel.key
        self.panels[key] = (panel, dock)
        panel.options_changed.connect(lambda k=key: self.refresh(k))
        dock.visibilityChanged.connect(lambda visible, k=key: self._on_visibility(k, visible))
        t = QTimer(self)
        t.setSingleShot(True)
        t.setInterval(_BUSY_AFTER_MS)
        t.timeout.connect(lambda k=key: self._show_waiting(k))
        self._busy_timers[key] = t
        if hasattr(panel, "stop_requested"):
            panel.stop_requested.connect(lambda k=key: self.stop(k))

    def _on_changed(self, _revision: int) -> None:
        # idle worker: compute now (with any edit still waiting for its debounce); busy
        # worker: wait for a quiet spell, so a burst of edits is computed once
        busy = any(self.jobs.is_busy(k) for k in self.panels)
        self._timer.start(self._debounce_ms if busy else 0)

    def _on_visibility(self, key: str, visible: bool) -> None:
        if visible and self._fresh.get(key) != self._doc.revision:
            self.refresh(key)

    def refresh_visible(self) -> None:
        for key, (_panel, dock) in self.panels.items():
            if dock.isVisible():
                self.refresh(key)

    def refresh(self, key: str) -> None:
        """Send panel ``key``'s job for the document as it is now."""
        panel, _dock = self.panels[key]
        snapshot = self._doc.snapshot()
        pairs = pairs_of(snapshot)
        panel.set_pairs(pairs)
        try:
            job = panel.job(snapshot, pairs)
        except Exception as err:  # noqa: BLE001 - a panel that cannot build its request says why
            panel.show_error(str(err))
            return
        if job is None:
            self.jobs.cancel(key)
            panel.show_value(None)
            self._fresh[key] = self._doc.revision
            return
        fn, args, kwargs = job
        self.jobs.submit(key, fn, *args, progress=getattr(panel, "reports_progress", False), **kwargs)

    def stop(self, key: str) -> None:
        """Stop panel ``key``'s computation (a job that reports progress ends at its next
        report; any other's answer is dropped when it comes)."""
        self.jobs.cancel(key)
        panel, _dock = self.panels[key]
        panel.set_message("Stopped. Edit the diagram or choose Views ▸ Refresh every view to compute again.")

    def _on_progress(self, key: str, fraction: float) -> None:
        panel, _dock = self.panels[key]
        if hasattr(panel, "set_progress"):
            panel.set_progress(fraction)

    def _on_result(self, result: ViewResult) -> None:
        panel, _dock = self.panels[result.key]
        self._fresh[result.key] = result.revision
        if result.error is not None:
            panel.show_error(result.error)
            if hasattr(panel, "clear_value"):
                panel.clear_value()
            return
        panel.show_value(result.value)

    def _on_busy(self, key: str, busy: bool) -> None:
        t = self._busy_timers.get(key)
        if t is None:
            return
        if busy:
            t.start()
        else:
            t.stop()
            panel, _dock = self.panels[key]
            if hasattr(panel, "set_waiting"):
                panel.set_waiting(False)

    def _show_waiting(self, key: str) -> None:
        if self.jobs.is_busy(key):
            panel, _dock = self.panels[key]
            if hasattr(panel, "set_waiting"):
                panel.set_waiting(True)

    def is_idle(self) -> bool:
        """True when no request waits or runs and no edit waits for its debounce."""
        return not self._timer.isActive() and not any(self.jobs.is_busy(k) for k in self.panels)

    def shutdown(self) -> None:
        self._timer.stop()
        self.jobs.shutdown(wait=False)
