"""Keeps the live model of the open diagram up to date without freezing the window.

An edit made while the live check is idle is checked at once (when its undoable command
has made all its changes, or else on the next turn of the event loop, so the steps of one
edit count once); edits arriving while a check still runs restart a short single-shot
timer (the debounce), so a burst is checked once. A deep snapshot of the diagram is sent,
tagged with the document's revision, to a one-worker executor. The worker validates,
computes signal widths and the check report (all through the engine). In the window the
check shares the views' snapshot and :class:`~loopwright.engine.views_data.SharedModel`
(:meth:`LiveModel.share_with`): the pole map and the status bar come from one assembly
and one check report, and an edit's check starts when the quick views are drawn (or after
:data:`VIEWS_FIRST_MS` at the latest), so it never slows them down. Its result comes back
through a Qt signal emitted from the worker thread to an object living on the GUI thread,
so Qt queues the delivery; a result whose revision is no longer the document's is dropped.
"""
from __future__ import annotations

import threading
import time
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass, field

from PySide6.QtCore import QObject, QTimer, Signal

from loopwright.engine.diagram import Diagram
from loopwright.engine.errors import EngineError

__all__ = ["LiveResult", "LiveModel", "compute_live_result", "ViewResult", "ViewJobs", "JobStopped", "TaskResult", "Tasks"]


@dataclass(frozen=True)
class LiveResult:
    """What the window shows about one revision of the diagram.

    Attributes
    ----------
    revision : int
        The document revision the snapshot was taken at.
    problems : list
        ``Problem`` objects from the engine (message, block_ids, wire_ids, severity).
    widths : dict
        Signal width by wire id, for every wire whose source block can be read.
    report : CheckReport or None
        The engine's summary when the diagram assembles.
    error : str or None
        Why there is no report (the engine's message), if there is none.
    """

    revision: int
    problems: list = field(default_factory=list)
    widths: dict = field(default_factory=dict)
    report: object | None = None
    error: str | None = None


def compute_live_result(diagram: Diagram, revision: int, shared=None) -> LiveResult:
    """Validate and summarise a diagram snapshot (runs on the worker thread).

    ``shared`` is the snapshot's :class:`~loopwright.engine.views_data.SharedModel`, when
    the views have one: its check report is used (computed once for the revision, by
    whichever of the views and this check asks first) instead of a report of its own.
    """
    from loopwright.engine.blocks import port_widths
    from loopwright.engine.check import summarize
    from loopwright.engine.validation import problems as find_problems

    widths: dict[str, int] = {}
    cache: dict[str, dict] = {}
    for w in diagram.wires.values():
        bid = w.source.block
        if bid not in cache:
            try:
                cache[bid] = port_widths(diagram.blocks[bid], diagram)[1]
            except (EngineError, KeyError):
                cache[bid] = {}
        if w.source.port in cache[bid]:
            widths[w.id] = int(cache[bid][w.source.port])
    try:
        found = list(find_problems(diagram, assembled=None if shared is None else (lambda: shared.model)))
    except EngineError as err:
        found = []
        error = str(err)
    else:
        error = None
    report = None
    if not diagram.blocks:
        error = "empty diagram"
    elif not any(getattr(p, "severity", "error") == "error" for p in found) and error is None:
        try:
            report = summarize(diagram) if shared is None else shared.report
            report.poles_trusted  # computed here, once, and kept: the status line reads it in the window
        except EngineError as err:
            error = str(err)
    else:
        errs = [p for p in found if getattr(p, "severity", "error") == "error"]
        if errs and error is None:
            error = f"{len(errs)} problem{'s' if len(errs) > 1 else ''}: {errs[0].message}"
    return LiveResult(revision=revision, problems=found, widths=widths, report=report, error=error)


#: In the window, an edit's check waits at most this long (ms) for the quick views to be drawn.
VIEWS_FIRST_MS = 2000


class LiveModel(QObject):
    """Re-assembles the document's diagram off the GUI thread after each quiet spell.

    Signals
    -------
    result_ready(LiveResult)
        A fresh result for the document's current revision (GUI thread).
    busy_changed(bool)
        True while a request is queued or running.
    """

    result_ready = Signal(object)
    busy_changed = Signal(bool)
    _finished = Signal(object)  # emitted on the worker thread; queued to the GUI thread

    def __init__(self, document, *, debounce_ms: int = 150, parent: QObject | None = None):
        super().__init__(parent)
        self._doc = document
        self._executor = ThreadPoolExecutor(max_workers=1, thread_name_prefix="loopwright-live")
        self._timer = QTimer(self)
        self._timer.setSingleShot(True)
        self._debounce_ms = debounce_ms
        self._timer.timeout.connect(self.request_now)
        self._shared_inputs = None
        self._after_views = False
        self._pending: Future | None = None
        self._delivered: Future | None = None
        self._closed = False
        self.latest: LiveResult | None = None
        self.discarded = 0
        self._finished.connect(self._on_finished)
        document.changed.connect(self._on_changed)
        document.undo_stack.indexChanged.connect(self._on_command_done)

    def share_with(self, inputs, views_done=None) -> None:
        """Take each revision's snapshot and shared model from ``inputs()``, which returns
        ``(snapshot, pairs, shared)`` for the document's current revision (the views
        controller's :meth:`~loopwright.gui.docks.views.ViewsController.revision_inputs`).

        ``views_done`` (a signal: the quick views of the current revision are drawn) makes
        an edit's check wait for them, or for :data:`VIEWS_FIRST_MS` (or the debounce, if
        longer), whichever comes first: the views, which the user watches, get the machine
        first, and the check then finds the check report the pole map computed.
        """
        self._shared_inputs = inputs
        if views_done is not None:
            self._after_views = True
            views_done.connect(self._on_views_done)

    def _on_views_done(self) -> None:
        if self._timer.isActive():
            self.request_now()

    def _on_changed(self, revision: int) -> None:
        # idle: check now (a 0 ms timer still gathers the steps of one command), or in the
        # window once the quick views are drawn (the timer is then only the latest start: on
        # a large loop the debounce ran out while the views still computed, and the check
        # took the interpreter from them); a check still running: wait for a quiet spell,
        # so a burst is checked once
        idle = self._pending is None or self._pending.done()
        if idle and self._after_views:
            self._timer.start(max(self._debounce_ms, VIEWS_FIRST_MS))
        else:
            self._timer.start(0 if idle else self._debounce_ms)
        self.busy_changed.emit(True)

    def _on_command_done(self, _index: int) -> None:
        # an undoable command has made all its changes: check now, not after the repaint
        # that comes before the 0 ms timer
        if self._timer.isActive() and self._timer.interval() == 0:
            self.request_now()

    def request_now(self) -> None:
        """Send the current diagram to the worker at once (skipping the debounce)."""
        if self._closed:
            return
        self._timer.stop()
        if self._pending is not None:
            self._pending.cancel()  # only succeeds while it waits; a running one is dropped later
        revision = self._doc.revision
        if self._shared_inputs is not None:
            snapshot, _pairs, shared = self._shared_inputs()
            fut = self._executor.submit(compute_live_result, snapshot, revision, shared)
        else:
            fut = self._executor.submit(compute_live_result, self._doc.snapshot(), revision)
        fut.add_done_callback(lambda f, rev=revision: self._deliver(f, rev))
        self._pending = fut
        self.busy_changed.emit(True)

    def _deliver(self, fut: Future, revision: int) -> None:
        if fut.cancelled() or self._closed:
            return
        try:
            result = fut.result()
        except Exception as err:  # an engine bug must not kill the window: show it as a problem
            result = LiveResult(revision=revision, error=f"internal error while checking the diagram: {err!r}")
        try:
            self._finished.emit((fut, result))
        except RuntimeError:
            pass  # the window was closed while the worker ran

    def _on_finished(self, delivery) -> None:
        fut, result = delivery if isinstance(delivery, tuple) else (None, delivery)
        if fut is not None:
            self._delivered = fut
        if result.revision != self._doc.revision:
            self.discarded += 1
            return
        self.latest = result
        self.busy_changed.emit(self._timer.isActive())
        self.result_ready.emit(result)

    def is_current(self) -> bool:
        """True when the latest result belongs to the document's current revision."""
        idle = self._pending is None or (self._pending.done() and self._delivered is self._pending)
        return idle and self.latest is not None and self.latest.revision == self._doc.revision and not self._timer.isActive()

    def shutdown(self, *, wait: bool = True) -> None:
        """Stop taking requests; ``wait`` blocks until a running check has finished."""
        self._closed = True
        self._timer.stop()
        self._executor.shutdown(wait=wait, cancel_futures=True)


@dataclass(frozen=True)
class ViewResult:
    """The outcome of one panel request: ``value`` from the engine, or ``error`` (its message)."""

    key: str
    revision: int
    value: object = None
    error: str | None = None


class JobStopped(EngineError, RuntimeError):
    """Raised inside a job's progress report once the job has been stopped or replaced."""


class _JobControl:
    """A running job's link back to the window: its progress, and whether to stop.

    ``report(fraction)`` is handed to the engine as its ``progress`` callable; it raises
    :class:`JobStopped` once :meth:`stop` was called, which ends the engine's work at its
    next report instead of letting it run to the end for nothing.
    """

    def __init__(self, key: str, emit, emit_interim=None, after_interim=None):
        self.key = key
        self._emit = emit
        self._emit_interim = emit_interim
        self._after_interim = after_interim
        self._stopped = threading.Event()
        self._last = -1.0
        self._quiet_until = time.monotonic() + PROGRESS_AFTER_S

    def stop(self) -> None:
        self._stopped.set()

    def report(self, fraction: float, interim=None) -> None:
        """Report the fraction done; ``interim`` (optional) is a first answer to show while
        the job goes on (a view drawn before its values are certified)."""
        if self._stopped.is_set():
            raise JobStopped(f"{self.key}: stopped")
        if interim is not None and self._emit_interim is not None:
            try:
                self._emit_interim(self, interim)
            except RuntimeError:
                pass  # the window was closed while the worker ran
            if self._after_interim is not None:
                self._after_interim(self._stopped)
            if self._stopped.is_set():
                raise JobStopped(f"{self.key}: stopped")
        if time.monotonic() < self._quiet_until:
            return  # nobody sees it yet: a quick job's reports cost the window nothing
        if fraction - self._last >= 0.01 or fraction >= 1.0:
            self._last = fraction
            try:
                self._emit(self.key, float(fraction))
            except RuntimeError:
                pass  # the window was closed while the worker ran


#: Seconds a job runs before its progress reports reach the window: the busy line shows
#: only after half a second (gui/docks/views.py), and on a 50-state loop a whole job takes
#: tens of milliseconds, whose reports would each be a queued call on the window's thread.
PROGRESS_AFTER_S = 0.5


#: Workers of the quick views. Two: on a large loop the slow worker's first answer (the
#: loop-break view's) comes long before the quick views are done, and the second core then
#: idled while they ran one after the other; now the next quick view starts as soon as a
#: worker is free (the views of one revision share their decompositions, so the second
#: waits for what the first is computing rather than computing it again).
_QUICK_WORKERS = 2


class ViewJobs(QObject):
    """Runs the plot panels' engine calls off the GUI thread: quick ones in the order sent on
    :data:`_QUICK_WORKERS` workers, slow ones (``slow=True``: margins, the noise budget, the
    audit) one at a time on another, so a slow answer never holds up the quick views of a
    later edit. Jobs sent with ``lane=True`` (a small loop's views) run one after the other
    on a worker of their own, in the order sent, and count as quick ones.

    Each request carries a key (the panel) and the document revision it was built at. A
    newer request for the same key cancels the older one while it waits, and stops it
    (through its progress report, when the job takes one) or drops its result if it was
    already running; a result for an older revision is dropped too.

    Signals
    -------
    result_ready(ViewResult)
        A current result (GUI thread).
    busy_changed(str, bool)
        A panel's request started waiting or running (True), or ended (False).
    progress_changed(str, float)
        A running job's fraction done (only jobs submitted with ``progress=True``, and
        only once they have run :data:`PROGRESS_AFTER_S`).

    A job submitted with ``progress=True`` may also hand a first answer to its progress
    report (``progress(fraction, interim)``): it reaches :attr:`result_ready` at once if it
    is still current, and the request stays busy until the final answer.
    """

    result_ready = Signal(object)
    busy_changed = Signal(str, bool)
    progress_changed = Signal(str, float)
    _finished = Signal(object)  # emitted on the worker thread; queued to the GUI thread
    _progress = Signal(str, float)  # likewise
    _interim = Signal(object)  # likewise

    def __init__(self, document, parent: QObject | None = None):
        super().__init__(parent)
        self._doc = document
        self._executor = ThreadPoolExecutor(max_workers=_QUICK_WORKERS, thread_name_prefix="loopwright-views")
        self._slow_executor = ThreadPoolExecutor(max_workers=1, thread_name_prefix="loopwright-views-slow", initializer=_yield_to_quick_views)
        self._lane_executor = ThreadPoolExecutor(max_workers=1, thread_name_prefix="loopwright-views-lane")
        self._latest: dict[str, tuple[int, Future, _JobControl, int]] = {}
        self._submitted: list[Future] = []
        self._quick: set[Future] = set()
        # quick jobs waiting or running, seen from the workers: a slow job that has handed
        # over its first answer waits for them before it refines it (see _wait_for_quick)
        self._quick_lock = threading.Lock()
        self._quick_pending = 0
        self._quick_idle = threading.Event()
        self._quick_idle.set()
        self._token = 0
        self._closed = False
        self.discarded = 0
        self._finished.connect(self._on_finished)
        self._progress.connect(self._on_progress)
        self._interim.connect(self._on_interim)

    def submit(self, key: str, fn, *args, progress: bool = False, slow: bool = False, lane: bool = False, **kwargs) -> None:
        """Run ``fn(*args, **kwargs)`` on a worker for panel ``key`` (args must be snapshots);
        ``slow`` picks the worker of the slow views, ``lane`` the one-at-a-time worker of a
        small loop's views (a lane job is a quick one: ``slow`` is ignored with it, and a
        first answer it hands over is followed at once by the rest of its work).

        With ``progress=True`` the job also gets ``progress=<callable>`` (see
        :class:`_JobControl`): its reports reach :attr:`progress_changed`, and
        :meth:`cancel` stops it at its next report.
        """
        if self._closed:
            return
        slow = slow and not lane
        old = self._latest.get(key)
        if old is not None:
            old[1].cancel()
            old[2].stop()
        self._token += 1
        token, revision = self._token, self._doc.revision
        control = _JobControl(key, self._progress.emit, lambda c, value, rev=revision: self._interim.emit((c, ViewResult(key, rev, value))),
                              after_interim=self._wait_for_quick if slow else None)
        if progress:
            kwargs = dict(kwargs, progress=control.report)
        executor = self._lane_executor if lane else self._slow_executor if slow else self._executor
        fut = executor.submit(_run_view_job, fn, args, kwargs)
        self._latest[key] = (token, fut, control, revision)
        self._submitted = [f for f in self._submitted if not f.done()] + [fut]
        if not slow:
            self._quick = {f for f in self._quick if not f.done()} | {fut}
            with self._quick_lock:
                self._quick_pending += 1
                self._quick_idle.clear()
            fut.add_done_callback(self._quick_job_done)
        fut.add_done_callback(lambda f, k=key, tk=token, rev=revision: self._deliver(f, k, tk, rev))
        self.busy_changed.emit(key, True)

    def cancel(self, key: str) -> None:
        """Forget the panel's request: a waiting one is cancelled, a running one stopped at
        its next progress report (or, without reports, its result dropped)."""
        old = self._latest.pop(key, None)
        if old is not None:
            old[1].cancel()
            old[2].stop()
            self.busy_changed.emit(key, False)

    def drop_stale(self) -> None:
        """Cancel or stop every request built at an older revision than the document's:
        its answer would be dropped anyway, and the worker is needed for the new one."""
        for key in [k for k, v in self._latest.items() if v[3] != self._doc.revision]:
            self.cancel(key)

    def is_busy(self, key: str) -> bool:
        return key in self._latest

    def _quick_job_done(self, _fut) -> None:
        # runs on the worker that finished the job (or the thread that cancelled it)
        with self._quick_lock:
            self._quick_pending -= 1
            if self._quick_pending <= 0:
                self._quick_pending = 0
                self._quick_idle.set()

    def _wait_for_quick(self, stopped: threading.Event, limit_s: float = 10.0) -> None:
        """On a slow job's worker, after its first answer is drawn: wait until no quick job
        waits or runs (or the job is stopped, or ``limit_s`` passed). What follows a first
        answer only refines it (the certificate of a large loop's margins), and on two cores
        it would take half the machine from the views an edit is waiting for."""
        end = time.monotonic() + limit_s
        while not stopped.is_set() and not self._quick_idle.wait(0.02):
            if time.monotonic() > end:
                return

    def worker_idle(self, *, quick_only: bool = False) -> bool:
        """True when nothing runs or waits on the workers (stopped jobs included); with
        ``quick_only``, on the worker of the quick views."""
        self._submitted = [f for f in self._submitted if not f.done()]
        if quick_only:
            return not any(f in self._quick for f in self._submitted)
        return not self._submitted

    def _on_progress(self, key: str, fraction: float) -> None:
        if key in self._latest:
            self.progress_changed.emit(key, fraction)

    def _on_interim(self, delivery) -> None:
        control, result = delivery
        latest = self._latest.get(result.key)
        if latest is None or latest[2] is not control or result.revision != self._doc.revision:
            return  # overtaken: the final answer of a newer request is on its way
        self.result_ready.emit(result)

    def _deliver(self, fut: Future, key: str, token: int, revision: int) -> None:
        if fut.cancelled() or self._closed:
            return
        value, error = fut.result()
        try:
            self._finished.emit((key, token, ViewResult(key, revision, value, error)))
        except RuntimeError:
            pass  # the window was closed while the worker ran

    def _on_finished(self, delivery) -> None:
        key, token, result = delivery
        latest = self._latest.get(key)
        if latest is None or latest[0] != token or result.revision != self._doc.revision:
            self.discarded += 1
            if latest is not None and latest[0] == token:
                # the panel's newest request, overtaken by an edit: it no longer waits on
                # anything (a visible panel has a newer request already; a hidden one
                # catches up when it is shown)
                del self._latest[key]
                self.busy_changed.emit(key, False)
            return
        del self._latest[key]
        self.busy_changed.emit(key, False)
        self.result_ready.emit(result)

    def wait_idle(self) -> None:
        """Block until every submitted job has run (tests and benches only)."""
        for _token, fut, _control, _rev in list(self._latest.values()):
            try:
                fut.result()
            except Exception:  # noqa: BLE001 - cancelled or failed: nothing to wait for
                pass

    def shutdown(self, *, wait: bool = True) -> None:
        self._closed = True
        for _token, fut, control, _rev in self._latest.values():
            control.stop()
        self._executor.shutdown(wait=wait, cancel_futures=True)
        self._slow_executor.shutdown(wait=wait, cancel_futures=True)
        self._lane_executor.shutdown(wait=wait, cancel_futures=True)


@dataclass(frozen=True)
class TaskResult:
    """The outcome of one user-started task (a report, a hand-over): ``value`` or ``error``."""

    key: str
    token: int
    value: object = None
    error: str | None = None


class Tasks(QObject):
    """Runs user-started engine work (write the report, compute or write a hand-over) off the
    GUI thread, one at a time. Unlike the views, a task's answer does not depend on later
    edits (it works on the snapshot it was given), so it is delivered whatever the revision;
    only a newer task of the same key replaces an older one.

    Signals
    -------
    finished(TaskResult)
        GUI thread.
    """

    finished = Signal(object)
    _done = Signal(object)  # emitted on the worker thread; queued to the GUI thread

    def __init__(self, parent: QObject | None = None):
        super().__init__(parent)
        self._executor = ThreadPoolExecutor(max_workers=1, thread_name_prefix="loopwright-tasks")
        self._latest: dict[str, int] = {}
        self._futures: dict[str, Future] = {}
        self._token = 0
        self._closed = False
        self._done.connect(self._on_done)

    def submit(self, key: str, fn, *args, **kwargs) -> int:
        """Run ``fn(*args, **kwargs)`` (arguments must be snapshots); returns the task's token."""
        if self._closed:
            return 0
        old = self._futures.get(key)
        if old is not None:
            old.cancel()
        self._token += 1
        token = self._token
        self._latest[key] = token
        fut = self._executor.submit(_run_view_job, fn, args, kwargs)
        self._futures[key] = fut
        fut.add_done_callback(lambda f, k=key, tk=token: self._deliver(f, k, tk))
        return token

    def is_busy(self, key: str) -> bool:
        return key in self._futures

    def _deliver(self, fut: Future, key: str, token: int) -> None:
        if fut.cancelled() or self._closed:
            return
        value, error = fut.result()
        try:
            self._done.emit(TaskResult(key, token, value, error))
        except RuntimeError:
            pass  # the window was closed while the worker ran

    def _on_done(self, result: TaskResult) -> None:
        if self._latest.get(result.key) != result.token:
            return
        self._futures.pop(result.key, None)
        self.finished.emit(result)

    def shutdown(self, *, wait: bool = True) -> None:
        self._closed = True
        self._executor.shutdown(wait=wait, cancel_futures=True)


#: How much the slow views' worker yields (its nice value; 0 to 19). A little: the quick
#: views of an edit then come first, but on a machine busy with other work a strong yield
#: (10) starved the loop-break view (views bench at a load of 7, 50 states: an edit took
#: a median of about 1 s with 10, about 0.45 s with 3, about 0.6 s with 0).
_SLOW_NICENESS = 3


def _yield_to_quick_views() -> None:
    """Lower the calling worker thread's scheduling priority (Linux, where a thread has its
    own): on a two-core machine the slow views then take what the quick views leave."""
    import os
    import sys
    import threading

    if sys.platform.startswith("linux") and hasattr(os, "setpriority"):
        try:
            os.setpriority(os.PRIO_PROCESS, threading.get_native_id(), _SLOW_NICENESS)  # this thread only, on Linux
        except OSError:
            pass  # not allowed here: the slow views simply compete as equals


def _run_view_job(fn, args, kwargs):
    """(value, None) or (None, message); never raises, so the worker never loses a reply."""
    try:
        return fn(*args, **kwargs), None
    except JobStopped:
        return None, "stopped"
    except EngineError as err:
        return None, str(err)
    except Exception as err:  # noqa: BLE001 - an engine bug is shown in the panel, not a crash
        return None, f"internal error: {err!r}"
