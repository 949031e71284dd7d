"""The quick views of an edit get the machine before the live check (gui/workers.py).

On a large loop the quick views take longer than the debounce; the check of an edit must
still wait for them (it would take the interpreter from them), up to
``workers.VIEWS_FIRST_MS``. Ordered, never timed."""
from __future__ import annotations

import threading

import numpy as np
import pytest

from loopwright.gui.commands import SetParams
from loopwright.gui.docks.poles import pole_map_data

from gui_helpers import SAMPLES

pytestmark = pytest.mark.qt

CONVEYOR = next(p for p in SAMPLES if p.stem == "conveyor_flexible_drive")


def test_an_edit_is_checked_after_slow_quick_views_even_when_the_debounce_runs_out(window, qtbot):
    win = window
    win.show()
    assert win.open_sample(str(CONVEYOR))
    win.view_docks["poles"].show()
    qtbot.waitUntil(lambda: win.views.is_idle() and win.live.is_current(), timeout=30000)
    release = threading.Event()

    def slow_pole_map(diagram, *, shared=None):  # a pole map that takes as long as the test wants
        release.wait(30)
        return pole_map_data(diagram, shared=shared)

    win.panels["poles"].job = lambda diagram, pairs, shared=None: (slow_pole_map, (diagram,), {"shared": shared})
    sent = []
    request = win.live.request_now

    def recording():
        sent.append((win.document.revision, win.views.jobs.is_busy("poles")))
        request()

    win.live.request_now = recording
    doc = win.document
    n = doc.diagram.block_by_name("N")
    doc.push(SetParams(doc, n.id, dict(n.params, K=[[2.0 * float(np.asarray(n.params["K"]).ravel()[0])]])))
    qtbot.wait(15 * win.prefs.debounce_ms)  # the debounce (20 ms in the tests) has run out; the pole map still computes
    assert win.views.jobs.is_busy("poles")
    assert sent == []  # the check has not been sent: it waits for the quick views
    release.set()
    qtbot.waitUntil(win.live.is_current, timeout=30000)
    assert sent == [(doc.revision, False)]  # sent once, when the pole map was drawn
    assert win.live.latest.report is not None


def test_a_quick_view_starts_while_another_still_computes(qtbot):
    # the quick views of an edit no longer queue behind one another: the next starts on the
    # second quick worker (the slow views keep a worker of their own)
    from loopwright.engine.project import load
    from loopwright.gui.document import Document
    from loopwright.gui.workers import ViewJobs

    jobs = ViewJobs(Document(load(str(CONVEYOR))))
    release = threading.Event()
    delivered = []
    jobs.result_ready.connect(lambda r: delivered.append((r.key, r.value)))
    jobs.submit("poles", lambda: release.wait(30) and "poles drawn")
    jobs.submit("time", lambda: "time drawn")
    try:
        qtbot.waitUntil(lambda: ("time", "time drawn") in delivered, timeout=10000)
        assert jobs.is_busy("poles")  # still computing when the other view's answer arrived
    finally:
        release.set()
    qtbot.waitUntil(lambda: ("poles", "poles drawn") in delivered, timeout=10000)
    jobs.shutdown()
