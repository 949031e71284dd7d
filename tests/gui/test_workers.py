"""The live model: debounced, off the GUI thread, tagged by revision, stale results
dropped (tests of gui/workers.py)."""
from __future__ import annotations

import threading

import pytest
from PySide6.QtCore import QCoreApplication, QThread

from loopwright.engine.check import summarize
from loopwright.engine.project import load
from loopwright.gui.commands import AddBlock, SetParams
from loopwright.gui.document import Document
from loopwright.gui.workers import LiveModel, LiveResult, compute_live_result

from gui_helpers import SAMPLES

pytestmark = pytest.mark.qt


@pytest.fixture
def live(qtbot):
    doc = Document(load(SAMPLES[0]))
    model = LiveModel(doc, debounce_ms=30)
    yield doc, model
    model.shutdown()


def test_results_arrive_on_the_gui_thread_for_the_current_revision(live, qtbot):
    doc, model = live
    threads = []
    model.result_ready.connect(lambda r: threads.append(QThread.currentThread()))

    model.request_now()
    qtbot.waitUntil(model.is_current, timeout=10000)
    assert threads and threads[-1] is QCoreApplication.instance().thread()
    assert model.latest.revision == doc.revision
    assert model.latest.report.states == summarize(doc.diagram).states


def test_the_computation_runs_off_the_gui_thread(live, qtbot, monkeypatch):
    doc, model = live
    seen = []
    import loopwright.gui.workers as workers

    real = workers.compute_live_result

    def spy(diagram, revision):
        seen.append(threading.current_thread() is threading.main_thread())
        return real(diagram, revision)

    monkeypatch.setattr(workers, "compute_live_result", spy)
    model.request_now()
    qtbot.waitUntil(model.is_current, timeout=10000)
    assert seen == [False]


def test_a_burst_of_edits_is_debounced_into_few_requests(live, qtbot, monkeypatch):
    doc, model = live
    import loopwright.gui.workers as workers

    calls = []
    real = workers.compute_live_result
    monkeypatch.setattr(workers, "compute_live_result", lambda d, r: (calls.append(r), real(d, r))[1])
    k = doc.diagram.block_by_name("K")
    first = doc.revision + 1
    for j in range(10):
        doc.push(SetParams(doc, k.id, {**k.params, "K": [[float(j), 1.0, 1.0, 1.0]]}))
    qtbot.waitUntil(model.is_current, timeout=10000)
    # the first command is checked at once (the check was idle); the nine that arrive while
    # it runs are gathered by the debounce into one check of the last revision
    assert calls in ([first, doc.revision], [doc.revision])


def test_a_stale_result_is_discarded(live, qtbot):
    doc, model = live
    model.request_now()
    qtbot.waitUntil(model.is_current, timeout=10000)
    current = model.latest
    got = []
    model.result_ready.connect(got.append)
    model._on_finished(LiveResult(revision=doc.revision - 1, error="old"))
    assert model.latest is current and not got and model.discarded >= 1


def test_editing_while_the_worker_runs_ends_with_the_newest_revision(live, qtbot):
    doc, model = live
    for j in range(5):
        doc.push(AddBlock(doc, "gain", layout={"x": 1000 + 100 * j, "y": 0}))
        model.request_now()  # no debounce: requests overtake each other
    qtbot.waitUntil(model.is_current, timeout=10000)
    assert model.latest.revision == doc.revision
    # five new gain blocks with nothing wired: each is one problem naming its unwired input
    # (the sample itself has none), and the live result equals the engine's own check
    from loopwright.engine.interconnect import collect_problems

    new_names = sorted(b.name for b in doc.diagram.blocks.values() if b.layout.get("x", 0) >= 1000)
    assert len(new_names) == 5
    messages = [p.message for p in model.latest.problems]
    assert messages == [p.message for p in collect_problems(doc.diagram)]
    for name in new_names:
        assert any(f"{name}.in" in m for m in messages), (name, messages)


def test_compute_live_result_reports_widths_by_wire():
    d = load(next(p for p in SAMPLES if p.stem == "two_zone_oven"))
    res = compute_live_result(d, 7)
    assert res.revision == 7 and res.error is None
    assert res.widths[d.wire_by_name("u").id] == 2
    assert res.widths[d.wire_by_name("d").id] == 1
