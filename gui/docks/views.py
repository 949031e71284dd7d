"""Keeps every open plot panel up to date with the document.

After an edit the visible panels build their jobs from one snapshot of the revision and
the kept pairs, and share one :class:`~loopwright.engine.views_data.SharedModel` (the
model is assembled once, its Schur reduction and poles computed once, a response two
views show computed once). :class:`~loopwright.gui.workers.ViewJobs` runs the jobs off
the GUI thread, cheapest view first, and the expensive ones (loop-break margins, noise
budget, path audit) on a worker of their own, so the quick answers are drawn while those
still compute and a later edit's quick views never wait for them; it drops answers an
edit has overtaken.

An edit made while the worker is idle is computed at once: as soon as its undoable command
has made all its changes, or else on the next turn of the event loop (so the steps of one
edit count once). Every edit at once cancels or stops the
work of older revisions (nothing stale stays queued); edits that arrive while the worker
is still busy are coalesced and computed once after a quiet spell (the debounce), so
dragging a value never queues a backlog. A hidden panel is marked stale and catches up
when it is shown. A panel whose answer takes longer than half a second says so, with its
progress where the engine reports it and a Stop that ends the computation.
"""
from __future__ import annotations

import sys

from PySide6.QtCore import QObject, QTimer, Signal

from loopwright.engine.views_data import SharedModel
from loopwright.gui.view_commands import pairs_of
from loopwright.gui.workers import PROGRESS_AFTER_S, ViewJobs, ViewResult

__all__ = ["ViewsController", "VIEW_ORDER"]

_BUSY_AFTER_MS = int(1000 * PROGRESS_AFTER_S)  # the busy line, and the progress in it
#: The interpreter's thread switch interval while the views compute (see ViewsController).
_SWITCH_INTERVAL_S = 0.0005

#: The order the panels' jobs run in after an edit: cheap first, so they are drawn first.
VIEW_ORDER = ("poles", "frequency", "time", "singular_values", "loop_break", "noise", "audit")
#: Views whose answers can take seconds on a large loop: they run on a worker of their own.
SLOW_VIEWS = frozenset({"loop_break", "noise", "audit"})
#: A loop of at most this many states has its views computed one after the other on one
#: worker (the lane), the loop-break view among them. Their work is then mostly the
#: interpreter's own (many small array operations), and threads computing at once only
#: take its lock from one another: a worker's CPU time for the same job grew by about
#: half with one other Python thread busy beside it (the four views of a 50-state loop:
#: about 75 ms of CPU on two workers and the window, 47 ms alone). Measured edit -> all
#: four views drawn (bench/bench_views.py loops), lane against workers: 100 states 148
#: against 179 ms; 150 and 200 states the same within noise, with less CPU and the quick
#: views drawn sooner on the lane. On a larger loop the decompositions, which release the
#: lock, dominate, and two workers use both cores.
LANE_MAX_STATES = 200
#: Slow views that are quick on a small loop, and go to its lane.
LANE_VIEWS = frozenset({"loop_break"})


class ViewsController(QObject):
    """Runs the panels' jobs; ``panels`` maps a key to ``(panel, dock)``.

    Signals
    -------
    quick_views_done()
        Every quick view sent for the document's current revision has drawn its answer (or
        none was sent): the live check starts then, so it does not compete with them.
    """

    quick_views_done = Signal()

    def __init__(self, document, *, debounce_ms: int = 150, parent=None):
        super().__init__(parent)
        from loopwright.engine.blas_threads import limit_blas_threads

        limit_blas_threads(1)  # the live check and the views compute at once on two cores
        # The window's drawing calls back into Python for every plot item it paints, and
        # each callback must take the interpreter lock from a worker that is computing; with
        # the default switch interval (5 ms) a plot of a few dozen items waited a quarter
        # of a second for it while its own work took ten milliseconds. A shorter interval
        # hands the lock over sooner, at the cost of more switches on the workers.
        sys.setswitchinterval(min(sys.getswitchinterval(), _SWITCH_INTERVAL_S))
        self._doc = document
        self.jobs = ViewJobs(document, self)
        self.panels: dict[str, tuple] = {}
        self._fresh: dict[str, int] = {}
        self._busy_timers: dict[str, QTimer] = {}
        self._debounce_ms = debounce_ms
        self._shared: tuple | None = None  # (revision, snapshot, pairs, SharedModel)
        self._loop_states: int | None = None  # of the last assembled revision (None: not known yet)
        self._lane_keys: set[str] = set()  # views whose current job runs in the lane
        self._timer = QTimer(self)
        self._timer.setSingleShot(True)
        self._timer.timeout.connect(self.refresh_visible)
        document.changed.connect(self._on_changed)
        document.diagram_replaced.connect(self._on_diagram_replaced)
        document.undo_stack.indexChanged.connect(self._on_command_done)
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
        # nothing of an older revision is shown: free the worker for the new one now
        self.jobs.drop_stale()
        self._note_loop_size()
        self._shared = None
        # idle worker of the quick views: compute now (with any edit still waiting for its
        # debounce); busy (a stopped job still finishing): wait for a quiet spell, so a
        # burst of edits is computed once. A slow view still computing does not count: its
        # new job waits behind it on its own worker.
        self._timer.start(0 if self.jobs.worker_idle(quick_only=True) else self._debounce_ms)

    def _on_diagram_replaced(self) -> None:
        # another diagram (opened, new, recovered): its size is not known until it is
        # assembled, and a large loop sent to the lane would lose its progress and Stop
        self._loop_states = None

    def _on_command_done(self, _index: int) -> None:
        # an undoable command (or its undo, or a whole macro) has made all its changes: the
        # work it started need not wait for the 0 ms timer, which fires only after the
        # event loop has repainted what the edit touched
        if self._timer.isActive() and self._timer.interval() == 0:
            self._timer.stop()
            self.refresh_visible()

    def _on_visibility(self, key: str, visible: bool) -> None:
        if visible and self._fresh.get(key) != self._doc.revision:
            self.refresh(key)

    def refresh_visible(self) -> None:
        """Send the job of every visible panel, cheapest first."""
        rank = {k: i for i, k in enumerate(VIEW_ORDER)}
        for key in sorted(self.panels, key=lambda k: rank.get(k, len(rank))):
            if self.panels[key][1].isVisible():
                self.refresh(key)
        self._report_quick_done()

    def _report_quick_done(self) -> None:
        if not any(self.jobs.is_busy(k) for k in self.panels if self._is_quick(k)):
            self.quick_views_done.emit()

    def _is_quick(self, key: str) -> bool:
        return key not in SLOW_VIEWS or key in self._lane_keys

    def _note_loop_size(self) -> None:
        # the outgoing revision's size decides the next one's workers: an edit rarely changes
        # it much, and a diagram never assembled yet runs on the workers of a large loop
        model = self._shared[3].assembled() if self._shared is not None else None
        if model is not None:
            self._loop_states = model.n_states

    def _in_lane(self, key: str) -> bool:
        small = self._loop_states is not None and self._loop_states <= LANE_MAX_STATES
        return small and (key not in SLOW_VIEWS or key in LANE_VIEWS)

    def revision_inputs(self) -> tuple:
        """``(snapshot, pairs, shared)`` of the document's current revision, made once per revision."""
        rev = self._doc.revision
        if self._shared is None or self._shared[0] != rev:
            snapshot = self._doc.snapshot()
            self._shared = (rev, snapshot, pairs_of(snapshot), SharedModel(snapshot))
        return self._shared[1:]

    def refresh(self, key: str) -> None:
        """Send panel ``key``'s job for the document as it is now."""
        panel, _dock = self.panels[key]
        snapshot, pairs, shared = self.revision_inputs()
        panel.set_pairs(pairs)
        try:
            job = panel.job(snapshot, pairs, shared)
        except Exception as err:  # noqa: BLE001 - a panel that cannot build its request says why
            panel.show_error(str(err))
            return
        if job is None:
            self.jobs.cancel(key)
            panel.show_value(None)
            self._fresh[key] = self._doc.revision
            return
        fn, args, kwargs = job
        lane = self._in_lane(key)
        if lane:
            self._lane_keys.add(key)
        else:
            self._lane_keys.discard(key)
        self.jobs.submit(key, fn, *args, progress=getattr(panel, "reports_progress", False), slow=key in SLOW_VIEWS, lane=lane,
                         **kwargs)

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
        else:
            panel.show_value(result.value)
        if self._is_quick(result.key):
            self._report_quick_done()

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
