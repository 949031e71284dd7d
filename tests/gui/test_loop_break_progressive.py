"""The loop-break dock's two-step answer: margins from the refined grid drawn first and
marked "(checking…)", the certified ones after; its job is stoppable (tests of
gui/docks/loop_break.py and the interim answers of gui/workers.py)."""
from __future__ import annotations

import threading

import numpy as np
import pytest

import loopwright.engine.views_data as views_data
from loopwright.engine.margins import LoopMargins
from loopwright.engine.project import load
from loopwright.engine.views_data import loop_break_view
from loopwright.gui.docks.loop_break import CHECKING, LoopBreakPanel, loop_break_job, margin_rows
from loopwright.gui.document import Document
from loopwright.gui.workers import ViewJobs

from gui_helpers import SAMPLES

pytestmark = pytest.mark.qt

CONVEYOR = next(p for p in SAMPLES if p.stem == "conveyor_flexible_drive")


def _views(monkeypatch):
    """The interim and the certified view of the conveyor sample (small: the interim step is
    forced)."""
    monkeypatch.setattr(views_data, "_PROGRESSIVE_MIN_STATES", 0)
    seen = []
    final = loop_break_view(load(CONVEYOR), "P.u", limits=False, interim=seen.append)
    return seen[0], final


def test_the_dock_marks_uncertified_margins_and_lists_the_certified_ones(qtbot, monkeypatch):
    first, final = _views(monkeypatch)
    panel = LoopBreakPanel()
    qtbot.addWidget(panel)
    panel.resize(900, 500)
    panel.show()
    panel.show_value(first)
    listed = panel.listed_margins()
    assert listed["peak sensitivity"].endswith(CHECKING)
    assert listed["disk margin α"].endswith(CHECKING)
    assert not listed["phase margin"].endswith(CHECKING)  # crossings are final in the first pass
    assert CHECKING.strip() in panel.summary.text()
    panel.show_value(final)
    listed = panel.listed_margins()
    assert all("checking" not in v for v in listed.values())
    # the rows are the engine's numbers, formatted once
    m = final.margins
    assert listed == dict(margin_rows(m))
    assert f"{m.peak_sensitivity:.4g}" in listed["peak sensitivity"]
    assert f"{m.disk.alpha:.4g}" in listed["disk margin α"]
    assert f"{m.phase_margin_deg:.4g}°" in listed["phase margin"]
    x, y = panel.curve.getOriginalDataset()
    np.testing.assert_allclose(x + 1j * y, final.curves[0], rtol=1e-12)


def test_an_interim_answer_is_shown_and_the_request_stays_busy_until_the_final_one(qtbot):
    doc = Document(load(SAMPLES[0]))
    jobs = ViewJobs(doc)
    got = []
    jobs.result_ready.connect(lambda r: got.append(r.value))
    release = threading.Event()

    def job(progress=None):
        progress(0.5, "first")
        release.wait(10.0)
        return "final"

    jobs.submit("loop_break", job, progress=True, slow=True)
    qtbot.waitUntil(lambda: got == ["first"], timeout=5000)
    assert jobs.is_busy("loop_break")
    release.set()
    qtbot.waitUntil(lambda: got == ["first", "final"], timeout=5000)
    assert not jobs.is_busy("loop_break")
    jobs.shutdown()


def test_a_replaced_loop_break_job_stops_and_its_interim_answer_is_dropped(qtbot):
    doc = Document(load(SAMPLES[0]))
    jobs = ViewJobs(doc)
    got = []
    jobs.result_ready.connect(lambda r: got.append(r.value))
    started, release = threading.Event(), threading.Event()
    outcome = []

    def slow(progress=None):
        started.set()
        release.wait(10.0)
        try:
            progress(0.5, "stale interim")  # the request was replaced meanwhile: this stops it
        except Exception as err:  # noqa: BLE001 - record what stopped it
            outcome.append(type(err).__name__)
            raise
        return "stale"

    jobs.submit("loop_break", slow, progress=True, slow=True)
    assert started.wait(5.0)
    jobs.submit("loop_break", lambda progress=None: "fresh", progress=True, slow=True)
    release.set()
    qtbot.waitUntil(lambda: got == ["fresh"], timeout=5000)
    assert outcome == ["JobStopped"]
    jobs.shutdown()


def test_a_loop_break_job_on_the_lane_hands_over_its_first_answer_and_still_stops(qtbot):
    # a small loop's views share one worker (the lane): a loop-break job there keeps its
    # progress (a first answer is drawn, and the rest follows at once, since no quick view
    # waits elsewhere) and its Stop; a newer request replaces it on the same worker
    doc = Document(load(SAMPLES[0]))
    jobs = ViewJobs(doc)
    got, threads, outcome = [], [], []
    jobs.result_ready.connect(lambda r: got.append(r.value))
    started, release = threading.Event(), threading.Event()

    def first(progress=None):
        threads.append(threading.current_thread().name)
        progress(0.5, "first")
        started.set()
        release.wait(10.0)
        try:
            progress(0.9)  # replaced meanwhile: this stops it
        except Exception as err:  # noqa: BLE001 - record what stopped it
            outcome.append(type(err).__name__)
            raise
        return "stale"

    def fresh(progress=None):
        threads.append(threading.current_thread().name)
        return "fresh"

    jobs.submit("loop_break", first, progress=True, slow=True, lane=True)
    assert started.wait(5.0)
    qtbot.waitUntil(lambda: got == ["first"], timeout=5000)
    jobs.submit("loop_break", fresh, progress=True, slow=True, lane=True)
    release.set()
    qtbot.waitUntil(lambda: got == ["first", "fresh"], timeout=5000)
    assert outcome == ["JobStopped"]
    assert len(threads) == 2 and all(t.startswith("loopwright-views-lane") for t in threads), threads
    jobs.shutdown()


def test_the_docks_job_is_the_engines_view(monkeypatch):
    monkeypatch.setattr(views_data, "_PROGRESSIVE_MIN_STATES", 0)
    reports, interims = [], []

    def progress(fraction, interim=None):
        reports.append(fraction)
        if interim is not None:
            interims.append(interim)

    view = loop_break_job(load(CONVEYOR), "P.u", progress=progress)
    ref = loop_break_view(load(CONVEYOR), "P.u", limits=False)
    assert isinstance(view.margins, LoopMargins) and view.margins.certified
    assert len(interims) == 1 and not interims[0].margins.certified
    assert view.margins.disk.alpha == ref.margins.disk.alpha
    assert view.margins.limits is None  # the view does not show the performance limits
    assert reports[-1] == 1.0
