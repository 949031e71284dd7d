"""What keeps an edit quick in the window (tests of gui/workers.py, gui/docks/views.py and
the panels' ranging): the live check and the views share one check report per revision; an
edit made through an undoable command starts the views at once and the live check when
they are drawn, without the debounce; each
plot is ranged once per update and the range covers the data. Counted, never timed."""
from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import pyqtgraph as pg
from numpy.testing import assert_allclose

from loopwright.engine.check import summarize
from loopwright.engine.project import load
from loopwright.gui.commands import SetParams

from gui_helpers import SAMPLES

pytestmark = pytest.mark.qt

CONVEYOR = next(p for p in SAMPLES if p.stem == "conveyor_flexible_drive")


def _settled(win):
    return win.views.is_idle() and win.live.is_current()


def _open(win, pairs):
    win.show()
    assert win.open_sample(str(CONVEYOR))
    for src, sig in pairs:
        win.picker.pick_input(src)
        win.picker.pick_output(sig)
    for key in ("frequency", "time", "poles"):
        win.view_docks[key].show()


def _edit_gain(doc, factor):
    n = doc.diagram.block_by_name("N")
    doc.push(SetParams(doc, n.id, dict(n.params, K=[[factor * float(np.asarray(n.params["K"]).ravel()[0])]])))


def test_the_live_check_and_the_pole_map_share_one_check_report_per_revision(window, qtbot, monkeypatch):
    # the status bar and the pole map come from one summarize (one assembly, one
    # eigen-decomposition with condition numbers) per revision, not one each
    import loopwright.engine.check as check

    _open(window, [("r", "y")])
    qtbot.waitUntil(lambda: _settled(window), timeout=30000)
    import loopwright.engine.interconnect as interconnect

    calls, assembled = [], []
    real, real_assemble = check.summarize, interconnect.assemble
    monkeypatch.setattr(check, "summarize", lambda d, **kw: (calls.append(1), real(d, **kw))[1])

    def counting_assemble(d, *a, **kw):
        if kw.get("break_at") is None:  # an opened loop (the loop-break view) is a model of its own
            assembled.append(d)  # the snapshot itself: held, its id cannot be reused by the next one
        return real_assemble(d, *a, **kw)

    monkeypatch.setattr(interconnect, "assemble", counting_assemble)
    doc = window.document
    for k in range(3):
        _edit_gain(doc, 1.1 + 0.1 * k)
        qtbot.waitUntil(lambda: _settled(window) and window.panels["poles"].data is not None, timeout=30000)
    assert window.view_docks["poles"].isVisible()
    assert len(calls) == 3  # one per edit, for the live check and the pole map together
    # each revision's snapshot is assembled once, for the views, the check report and the
    # live check's problems together
    assert assembled and len(assembled) == len({id(d) for d in assembled})
    d = doc.snapshot()
    want = summarize(d)  # reference: the engine's own check of the same diagram
    rep = window.live.latest.report
    assert window.live.latest.revision == doc.revision
    assert_allclose(np.sort_complex(rep.poles), np.sort_complex(want.poles), rtol=1e-9, atol=1e-12)
    x, y = window.panels["poles"].closed.getData()
    assert_allclose(np.sort_complex(x + 1j * y), np.sort_complex(want.poles), rtol=1e-9, atol=1e-12)
    assert str(rep.states) in window._model_label.text()


def test_an_undoable_edit_is_checked_once_the_quick_views_are_drawn_not_after_the_debounce(make_window, prefs, qtbot):
    # a debounce preference of ten minutes: the check of an edit made while all is idle
    # starts as soon as the quick views have drawn it (they get the machine first)
    win = make_window(prefs=dataclasses.replace(prefs, debounce_ms=600_000))
    _open(win, [("r", "y")])
    qtbot.waitUntil(lambda: _settled(win), timeout=30000)
    sent = []
    request = win.live.request_now

    def recording():
        # what the quick views still had to draw when the check was sent
        sent.append((win.document.revision, [k for k in ("frequency", "time", "poles") if win.views.jobs.is_busy(k)]))
        request()

    win.live.request_now = recording
    doc = win.document
    _edit_gain(doc, 3.0)
    assert not win.live.is_current()
    qtbot.waitUntil(win.live.is_current, timeout=30000)  # far inside the ten minutes
    assert sent == [(doc.revision, [])]
    assert win.live.latest.revision == doc.revision
    assert_allclose(np.sort_complex(win.live.latest.report.poles), np.sort_complex(summarize(doc.snapshot()).poles), rtol=1e-9, atol=1e-12)


def test_each_plot_is_ranged_once_per_update_and_its_range_covers_the_data(window, qtbot, monkeypatch):
    _open(window, [("r", "y"), ("dl", "y")])
    qtbot.waitUntil(lambda: _settled(window), timeout=30000)
    ranged = []
    real = pg.ViewBox.setRange

    def counting(vb, *args, **kwargs):
        ranged.append(vb)
        return real(vb, *args, **kwargs)

    monkeypatch.setattr(pg.ViewBox, "setRange", counting)
    freq, time_, poles = (window.panels[k] for k in ("frequency", "time", "poles"))
    # calls of setRange per plot within one update of its panel (one show_value)
    most = {"magnitude": 1, "phase": 2, "time": 1, "poles": 1}  # phase: its own, and the frequencies it follows
    plots = {"magnitude": (freq, freq.mag), "phase": (freq, freq.phase), "time": (time_, time_.plot), "poles": (poles, poles.plot)}
    counts = {name: [] for name in plots}
    deferred = {name: [] for name in plots}
    for panel in (freq, time_, poles):
        real_show = panel.show_value

        def show(value, _real=real_show, _panel=panel):
            ranged.clear()
            _real(value)
            for name, (owner, plot) in plots.items():
                if owner is _panel:
                    counts[name].append(ranged.count(plot.getViewBox()))
                    # the curves already sit in the new range: a move left for the paint makes
                    # the moved items ask for a second paint of the panel
                    deferred[name].append(plot.getViewBox()._matrixNeedsUpdate)

        monkeypatch.setattr(panel, "show_value", show)
    for k in range(3):
        _edit_gain(window.document, 1.3 + 0.2 * k)
        qtbot.waitUntil(lambda: _settled(window), timeout=30000)
    for name, seen in counts.items():
        assert seen and max(seen) <= most[name], (name, seen)  # never once per curve
        assert not any(deferred[name]), name
    # the ranges cover every curve's data (view coordinates: log10 of the frequency)
    for (pair, i, j), (cm, cp) in freq.curves.items():
        x, ym = cm.getOriginalDataset()
        _x, yp = cp.getOriginalDataset()
        (x0, x1), (m0, m1) = freq.mag.getViewBox().viewRange()
        _xr, (p0, p1) = freq.phase.getViewBox().viewRange()
        lx = np.log10(x)
        assert x0 <= lx.min() and lx.max() <= x1
        assert m0 <= np.nanmin(ym) and np.nanmax(ym) <= m1
        assert p0 <= np.nanmin(yp) and np.nanmax(yp) <= p1
        assert (x1 - x0) < 1.2 * (lx.max() - lx.min()) + 1e-9  # and fits them, not some wider span
    for item in time_.curves.values():
        t, y = item.getOriginalDataset()
        (t0, t1), (y0, y1) = time_.plot.getViewBox().viewRange()
        assert t0 <= t.min() and t.max() <= t1 and y0 <= y.min() and y.max() <= y1
    x, y = poles.closed.getData()
    (a0, a1), (b0, b1) = poles.plot.getViewBox().viewRange()
    assert a0 < x.min() and x.max() < a1 and b0 < y.min() and y.max() < b1
    # the same data again moves no range (the axes keep their drawn ticks)
    ranged.clear()
    freq.show_value([freq.data[p] for p in freq.shown_pairs()])
    assert counts["magnitude"][-1] == 0 and counts["phase"][-1] == 0



def test_each_curve_processes_its_new_data_once_per_update(window, qtbot, monkeypatch):
    # a curve given a new pen processes its data again, even when the pen equals the old
    # one: the frequency and time views set a pen only when it changes, then the data once
    # (a time curve thins its data again when the plot's time span moves; any curve is
    # processed again when its plot is ranged anew, which a kept range avoids)
    _open(window, [("r", "y"), ("dl", "y")])
    qtbot.waitUntil(lambda: _settled(window), timeout=30000)
    freq, time_ = window.panels["frequency"], window.panels["time"]
    updated = []
    real = pg.PlotDataItem.updateItems
    monkeypatch.setattr(pg.PlotDataItem, "updateItems", lambda item, *a, **k: (updated.append(item), real(item, *a, **k))[1])
    per_update = {"frequency": [], "time": []}
    plots = {"frequency": (freq.mag, freq.phase), "time": (time_.plot,)}
    for panel in (freq, time_):
        real_show = panel.show_value

        def show(value, _real=real_show, _key=panel.key):
            updated.clear()
            before = [p.getViewBox().viewRange() for p in plots[_key]]
            _real(value)
            ranged = before != [p.getViewBox().viewRange() for p in plots[_key]]
            most = max(updated.count(item) for item in set(updated)) if updated else 0
            per_update[_key].append(most - int(ranged))  # the processing a new range asks for is not counted

        monkeypatch.setattr(panel, "show_value", show)
    for k in range(2):
        _edit_gain(window.document, 1.2 + 0.2 * k)
        qtbot.waitUntil(lambda: _settled(window), timeout=30000)
    assert per_update["frequency"] and per_update["time"]
    assert max(per_update["frequency"]) == 1 and max(per_update["time"]) <= 2, per_update
    # and the curves keep their pair's colour
    from loopwright.gui.docks.panel import pair_colour

    for (pair, _i, _j), (cm, cp) in freq.curves.items():
        assert cm.opts["pen"].color() == pair_colour(freq.pairs.index(pair)) == cp.opts["pen"].color()
    for (pair, _name), item in time_.curves.items():
        assert item.opts["pen"].color() == pair_colour(time_.pairs.index(pair))

def test_an_undoable_edit_and_its_undo_start_the_views_before_the_event_loop_turns(window, qtbot):
    # the command has made all its changes when push() returns: the work starts there and
    # then, not after the repaint the event loop does before a 0 ms timer
    _open(window, [("r", "y")])
    qtbot.waitUntil(lambda: _settled(window), timeout=30000)
    doc = window.document
    for step in ("edit", "undo", "redo"):
        if step == "edit":
            _edit_gain(doc, 2.0)
        else:
            getattr(doc.undo_stack, step)()
        assert not window.views._timer.isActive(), step
        assert all(window.views.jobs.is_busy(k) for k in ("frequency", "time", "poles")), step
        qtbot.waitUntil(lambda: _settled(window), timeout=30000)
        assert window.live.latest.revision == doc.revision


@pytest.mark.parametrize("sample", SAMPLES, ids=lambda p: p.stem)
def test_an_idle_window_with_every_panel_shown_does_no_work(window, qtbot, sample):
    # an idle window must leave the cores (and the interpreter lock the workers need) alone:
    # a panel that re-lays itself out on every turn of the event loop once kept a core busy
    # and slowed every edit's views. Counted over a third of a second, never timed.
    from PySide6.QtCore import QEvent, QObject
    from PySide6.QtWidgets import QApplication, QDockWidget

    window.show()
    assert window.open_sample(str(sample))
    for dock in window.findChildren(QDockWidget):
        if dock.isHidden():
            dock.toggleViewAction().trigger()
    for key in ("frequency", "time", "loop_break"):
        window.view_docks[key].raise_()
    qtbot.waitUntil(lambda: _settled(window), timeout=60000)
    qtbot.wait(300)  # the last answers drawn and laid out

    class Counter(QObject):
        def __init__(self):
            super().__init__()
            self.seen = []

        def eventFilter(self, obj, event):
            if event.type() in (QEvent.Type.Timer, QEvent.Type.Paint, QEvent.Type.UpdateRequest, QEvent.Type.LayoutRequest):
                self.seen.append((type(obj).__name__, obj.objectName(), event.type().name))
            return False

    counter = Counter()
    app = QApplication.instance()
    app.installEventFilter(counter)
    try:
        qtbot.wait(330)
    finally:
        app.removeEventFilter(counter)
    assert len(counter.seen) <= 6, counter.seen[:10]


def test_a_range_that_holds_the_new_data_is_kept_and_one_that_does_not_is_fitted(qtbot):
    # fit_range keeps an axis whose range holds the data with half the padding to spare
    # and is at most KEEP_WIDER times the fitted width (its axis keeps its drawn ticks);
    # data that leave it, or shrink a lot, are fitted again
    from loopwright.gui.docks.panel import KEEP_WIDER, fit_range, new_layout_widget, themed_plot

    w = new_layout_widget()
    qtbot.addWidget(w)
    plot = themed_plot(w, 0, left="y", bottom="x")
    vb = plot.getViewBox()
    assert fit_range(plot, x=(0.0, 10.0), y=(-1.0, 1.0), padding=0.1)
    assert_allclose(vb.viewRange(), [[-1.0, 11.0], [-1.2, 1.2]])
    # a little more or less, inside: kept
    assert not fit_range(plot, x=(0.3, 10.4), y=(-0.9, 1.05), padding=0.1)
    assert_allclose(vb.viewRange(), [[-1.0, 11.0], [-1.2, 1.2]])
    # past the edge less half the padding: fitted again
    assert fit_range(plot, x=(0.0, 10.6), y=(-0.9, 1.05), padding=0.1)
    assert_allclose(vb.viewRange()[0], [-1.06, 11.66])
    assert_allclose(vb.viewRange()[1], [-1.2, 1.2])  # that axis still holds its data
    # shrunk to less than 1 / KEEP_WIDER of the range: fitted again
    lo, hi = -1.2, 1.2
    small = 0.95 * (hi - lo) / KEEP_WIDER / 1.2 / 2  # half a span whose padded width is 95 % of the kept limit
    assert fit_range(plot, y=(-small, small), padding=0.1)
    assert_allclose(vb.viewRange()[1], [-1.2 * small, 1.2 * small])


def _wheel(widget, pos, steps):
    """A real mouse-wheel turn over ``widget`` at ``pos`` (what a user does to zoom)."""
    from PySide6.QtCore import QPoint, QPointF, Qt
    from PySide6.QtGui import QWheelEvent
    from PySide6.QtWidgets import QApplication

    ev = QWheelEvent(QPointF(pos), QPointF(widget.mapToGlobal(pos)), QPoint(0, 0), QPoint(0, 120 * steps),
                     Qt.MouseButton.NoButton, Qt.KeyboardModifier.NoModifier, Qt.ScrollPhase.NoScrollPhase, False)
    QApplication.sendEvent(widget, ev)


def test_a_users_zoom_is_kept_through_edits_until_they_fit_the_plot_again(window, qtbot):
    _open(window, [("r", "y")])
    qtbot.waitUntil(lambda: _settled(window), timeout=30000)
    time_ = window.panels["time"]
    vb = time_.plot.getViewBox()
    fitted = vb.viewRange()
    view = time_.canvas
    centre = view.mapFromScene(vb.mapViewToScene(pg.Point(np.mean(fitted[0]), np.mean(fitted[1]))))
    _wheel(view.viewport(), centre, 3)  # zoom in on the middle
    zoomed = vb.viewRange()
    assert zoomed[0][1] - zoomed[0][0] < 0.9 * (fitted[0][1] - fitted[0][0])
    curve = next(iter(time_.curves.values()))
    y_before = curve.getOriginalDataset()[1].copy()
    for k in range(2):
        _edit_gain(window.document, 1.6 + 0.4 * k)
        qtbot.waitUntil(lambda: _settled(window), timeout=30000)
    assert not np.allclose(curve.getOriginalDataset()[1], y_before)  # the answer is new ...
    assert_allclose(vb.viewRange(), zoomed)  # ... and shown where the user looks
    # the plot's auto-range button: fitted to the data, and fitted again after the next edit
    time_.plot.autoBtnClicked()
    _edit_gain(window.document, 0.8)
    qtbot.waitUntil(lambda: _settled(window), timeout=30000)
    (t0, t1), (y0, y1) = vb.viewRange()
    for item in time_.curves.values():
        t, y = item.getOriginalDataset()
        assert t0 <= t.min() and t.max() <= t1 and y0 <= y.min() and y.max() <= y1
    assert not any(vb.autoRangeEnabled())  # ranged once per update by the panel again
    assert (t1 - t0) < 1.2 * (t.max() - t.min())


def test_the_pole_maps_guides_are_one_item_redrawn_only_when_their_reach_changes(window, qtbot, monkeypatch):
    # rays of constant damping and circles of constant natural frequency (closed form in
    # engine/views_data.damping_guides) in one curve; an edit that moves the poles a little
    # keeps the guides' reach (a tenth of a decade), so they are not given new data
    from loopwright.engine.views_data import damping_guides
    from loopwright.gui.docks.poles import guide_radius

    assert guide_radius(1.0) == 1.0 and guide_radius(9.9) == 10.0
    assert_allclose(guide_radius(1.01), 10 ** 0.1)
    _open(window, [("r", "y")])
    qtbot.waitUntil(lambda: _settled(window), timeout=30000)
    poles = window.panels["poles"]
    guide_items = [it for it in poles.plot.items if isinstance(it, pg.PlotCurveItem)]
    assert guide_items == [poles.guides]
    radius = poles.data["guide_radius"]
    want = damping_guides(radius)
    x, y = poles.guide_lines()
    lines = [(a, b) for _z, a, b in want["rays"]] + [(a, b) for _w, a, b in want["circles"]]
    assert np.isnan(x).sum() == len(lines) - 1
    assert_allclose(x[np.isfinite(x)], np.concatenate([a for a, _b in lines]))
    assert_allclose(y[np.isfinite(y)], np.concatenate([b for _a, b in lines]))
    reach = 1.15 * max(np.abs(poles.data[k]).max() for k in ("poles", "feedback", "estimator") if poles.data[k].size)
    assert reach <= radius < 1.26 * reach
    given = []
    real = pg.PlotCurveItem.setData
    monkeypatch.setattr(pg.PlotCurveItem, "setData", lambda item, *a, **k: (given.append(item), real(item, *a, **k))[1])
    for k in range(3):
        _edit_gain(window.document, 1.0 + 0.01 * (k + 1))
        qtbot.waitUntil(lambda: _settled(window), timeout=30000)
        assert (poles.guides in given) == (poles.data["guide_radius"] != radius)
        radius = poles.data["guide_radius"]
        given.clear()


def test_the_status_line_says_checking_only_when_a_check_takes_half_a_second(window, qtbot, monkeypatch):
    # each change of the line lays the window out again: a check that answers within half a
    # second changes it once, to its answer; one that takes longer says "checking…" first
    import loopwright.gui.workers as workers

    _open(window, [("r", "y")])
    qtbot.waitUntil(lambda: _settled(window), timeout=30000)
    label = window._model_label
    texts = []
    real = label.setText
    monkeypatch.setattr(label, "setText", lambda text: (texts.append(text), real(text))[1])
    monkeypatch.setattr(workers, "PROGRESS_AFTER_S", 30.0)  # far longer than any check here
    for k in range(2):
        _edit_gain(window.document, 1.2 + 0.2 * k)
        qtbot.waitUntil(lambda: _settled(window), timeout=30000)
    assert len(texts) == 2 and not any(t.startswith("checking…") for t in texts)
    assert texts[-1] == label.text() and str(window.live.latest.report.states) in texts[-1]
    texts.clear()
    monkeypatch.setattr(workers, "PROGRESS_AFTER_S", 0.0)  # every check counts as slow
    _edit_gain(window.document, 0.9)
    qtbot.waitUntil(lambda: _settled(window), timeout=30000)
    assert texts[0].startswith("checking…") and not texts[-1].startswith("checking…")


def test_an_edit_that_changes_no_mark_visits_no_canvas_item_and_a_recreated_item_gets_its_marks(window, qtbot, monkeypatch):
    # the tags of the kept pairs, the problems, design states and signal widths are given
    # to every item only when they change; an item deleted and brought back by undo is new
    # and gets them again
    from loopwright.gui.canvas.marking import Markable
    from loopwright.gui.commands import DeleteItems

    _open(window, [("r", "y")])
    qtbot.waitUntil(lambda: _settled(window), timeout=30000)
    sc, doc = window.scene, window.document
    visits = []
    for name in ("set_tags", "set_problems"):
        real = getattr(Markable, name)
        monkeypatch.setattr(Markable, name, lambda item, *a, _real=real, **k: (visits.append(item), _real(item, *a, **k))[1])
    _edit_gain(doc, 1.4)
    qtbot.waitUntil(lambda: _settled(window), timeout=30000)
    qtbot.wait(20)  # the tags follow on the next turn of the event loop
    assert visits == []
    y = next(w for w in doc.diagram.wires.values() if w.name == "y")
    assert "out 1" in sc.wire_items[y.id].tags
    doc.push(DeleteItems(doc, [], [y.id]))
    qtbot.waitUntil(lambda: _settled(window), timeout=30000)
    doc.undo_stack.undo()
    qtbot.waitUntil(lambda: _settled(window) and "out 1" in sc.wire_items[y.id].tags, timeout=30000)
    assert sc.wire_items[y.id].signal_width == window.live.latest.widths.get(y.id)


def test_a_parameter_edit_leaves_the_pair_lists_alone(window, qtbot):
    # the lists of inputs, signals and break points are filled again only when they change
    # (refilling them on every edit also dropped a name being typed)
    _open(window, [("r", "y")])
    qtbot.waitUntil(lambda: _settled(window), timeout=30000)
    panel = window.findChild(type(window.pairs_dock.widget()), "pairs_panel") or window.pairs_dock.widget()
    filled = []
    real = panel.input_box.clear
    panel.input_box.clear = lambda: (filled.append(1), real())[1]
    panel.output_box.setEditText("y_typ")
    _edit_gain(window.document, 1.4)
    qtbot.waitUntil(lambda: _settled(window), timeout=30000)
    qtbot.wait(20)
    assert filled == [] and panel.output_box.currentText() == "y_typ"
    assert panel.list.count() == 1 and "y ←" in panel.list.item(0).text()
    window.picker.pick_input("dl")
    window.picker.pick_output("y")
    qtbot.waitUntil(lambda: panel.list.count() == 2, timeout=10000)
    assert filled == [1]


def _open_loop_break(window, qtbot):
    """The conveyor with one pair, its loop-break view in sight and drawn."""
    _open(window, [("r", "y")])
    window.view_docks["loop_break"].show()
    window.view_docks["loop_break"].raise_()
    qtbot.waitUntil(lambda: _settled(window) and window.panels["loop_break"].data is not None, timeout=30000)
    return window.panels["loop_break"]


def test_the_margins_list_keeps_its_rows_and_changes_only_their_texts(window, qtbot):
    panel = _open_loop_break(window, qtbot)
    table = panel.margins
    before = [table.item(i, 1) for i in range(table.rowCount())]
    old = panel.listed_margins()
    doc = window.document
    k = doc.diagram.block_by_name("K")  # the state feedback: the loop at the plant input changes
    doc.push(SetParams(doc, k.id, dict(k.params, K=(1.3 * np.asarray(k.params["K"], dtype=float)).tolist())))
    qtbot.waitUntil(lambda: _settled(window), timeout=30000)
    assert [table.item(i, 1) for i in range(table.rowCount())] == before  # the same items ...
    assert panel.listed_margins() != old  # ... with the new answer's texts
    from loopwright.gui.docks.loop_break import margin_rows

    assert panel.listed_margins() == dict(margin_rows(panel.data.margins))


def test_the_pole_maps_point_sets_carry_one_style_for_all_their_points(window, qtbot):
    # the closed-loop and designed poles are bare point sets: a new set of poles is new
    # positions only, no style per point to make again
    _open(window, [("r", "y")])
    qtbot.waitUntil(lambda: _settled(window), timeout=30000)
    poles = window.panels["poles"]
    for item in (poles.closed, poles.feedback, poles.estimator):
        assert isinstance(item, pg.ScatterPlotItem)
        assert all(p is None for p in item.data["pen"]) and all(b is None for b in item.data["brush"])
    assert len(poles.closed.data) == window.live.latest.report.poles.size


def test_the_frequency_views_answer_comes_with_its_db_and_phase_made_on_the_worker(window, qtbot, monkeypatch):
    # the dB and unwrapped phase of each response are computed where the response is, not
    # on the window's thread when the curves are drawn
    import threading

    from loopwright.engine.responses import magnitude_db, phase_deg
    from loopwright.engine.views_data import PairResponse

    made_on = []
    for name in ("mag_db", "phase_deg"):
        real = PairResponse.__dict__[name].func

        def recording(resp, _real=real):
            made_on.append(threading.current_thread() is threading.main_thread())
            return _real(resp)

        prop = PairResponse.__dict__[name]
        monkeypatch.setattr(prop, "func", recording)
    _open(window, [("r", "y"), ("dl", "y")])
    qtbot.waitUntil(lambda: _settled(window), timeout=30000)
    made_on.clear()
    _edit_gain(window.document, 1.3)
    qtbot.waitUntil(lambda: _settled(window), timeout=30000)
    assert made_on and not any(made_on)  # made, and never on the window's thread
    freq = window.panels["frequency"]
    for (pair, i, j), (cm, cp) in freq.curves.items():  # and what is drawn is the engine's dB and phase
        resp = freq.data[pair]
        assert_allclose(cm.getOriginalDataset()[1], magnitude_db(resp.response)[:, i, j])
        assert_allclose(cp.getOriginalDataset()[1], phase_deg(resp.response)[:, i, j])


def test_the_loop_break_view_keeps_a_users_zoom_until_its_auto_range_button(window, qtbot):
    panel = _open_loop_break(window, qtbot)
    vb = panel.plot.getViewBox()
    framed = vb.viewRange()
    view = panel.canvas
    centre = view.mapFromScene(vb.mapViewToScene(pg.Point(-1.0, 0.0)))
    _wheel(view.viewport(), centre, 3)  # zoom in on the critical point
    zoomed, target = vb.viewRange(), vb.targetRange()
    assert zoomed[0][1] - zoomed[0][0] < 0.9 * (framed[0][1] - framed[0][0])
    doc = window.document
    k = doc.diagram.block_by_name("K")
    doc.push(SetParams(doc, k.id, dict(k.params, K=(1.2 * np.asarray(k.params["K"], dtype=float)).tolist())))
    qtbot.waitUntil(lambda: _settled(window), timeout=30000)
    # the same part asked for (the aspect is locked: a panel laid out anew shows more or
    # less around it)
    assert_allclose(vb.targetRange(), target)
    panel.plot.autoBtnClicked()
    doc.push(SetParams(doc, k.id, dict(k.params, K=(1.3 * np.asarray(k.params["K"], dtype=float)).tolist())))
    qtbot.waitUntil(lambda: _settled(window), timeout=30000)
    (x0, x1), (y0, y1) = vb.viewRange()
    assert not any(vb.autoRangeEnabled())
    assert x0 < -1.0 < x1 and y0 < 0.0 < y1  # framed by the panel again: the critical point in sight
    L = panel.data.curves[0]
    near = L[np.abs(L) < 20.0]
    assert x0 <= near.real.min() and near.real.max() <= x1


@pytest.mark.parametrize("lane_max", [150, 0])
def test_a_small_loops_views_run_one_after_another_on_one_worker(window, qtbot, monkeypatch, lane_max):
    # on a small loop the views' work is mostly the interpreter's: four threads computing at
    # once only take its lock from one another, so after the first revision (whose size is
    # not known yet) they run in the order sent on the lane, the loop-break view among them;
    # above the limit the quick views use the two workers and the loop-break view its own
    import threading

    import loopwright.gui.docks.views as views
    import loopwright.gui.workers as workers

    monkeypatch.setattr(views, "LANE_MAX_STATES", lane_max)
    _open(window, [("r", "y")])
    window.view_docks["loop_break"].show()
    qtbot.waitUntil(lambda: _settled(window) and window.panels["loop_break"].data is not None, timeout=30000)
    ran = []
    real = workers._run_view_job
    monkeypatch.setattr(workers, "_run_view_job",
                        lambda fn, args, kwargs: (ran.append((fn.__name__, threading.current_thread().name)), real(fn, args, kwargs))[1])
    _edit_gain(window.document, 1.2)
    four = ("pole_map_data", "frequency_job", "time_views", "loop_break_job")
    qtbot.waitUntil(lambda: _settled(window) and sum(n in four for n, _ in ran) >= 4, timeout=30000)
    names = [n for n, _ in ran if n in four]  # (the audit and the noise budget, open too, stay on the slow worker)
    assert sorted(names) == sorted(four)
    threads = {n: t for n, t in ran}
    assert not threads.get("audit_rows", "slow").startswith("loopwright-views-lane")
    if lane_max:
        assert names == ["pole_map_data", "frequency_job", "time_views", "loop_break_job"]  # in the order sent
        assert all(threads[n].startswith("loopwright-views-lane") for n in four), threads
    else:
        assert threads["loop_break_job"].startswith("loopwright-views-slow"), threads
        assert not any(threads[n].startswith("loopwright-views-lane") for n in four), threads
    assert window.panels["loop_break"].data is not None and window.panels["loop_break"].data.margins.closed_loop_stable


def test_another_diagram_starts_on_the_workers_of_a_large_loop_until_its_size_is_known(window, qtbot, monkeypatch):
    # the lane is chosen from the size of the revision before; a diagram opened in its place
    # may be far larger (its loop-break view would lose its progress and Stop on the lane),
    # so its first revision runs on the ordinary workers, and its edits on the lane again
    import threading

    import loopwright.gui.workers as workers

    _open(window, [("r", "y")])
    window.view_docks["loop_break"].show()
    qtbot.waitUntil(lambda: _settled(window) and window.panels["loop_break"].data is not None, timeout=30000)
    _edit_gain(window.document, 1.2)
    qtbot.waitUntil(lambda: _settled(window), timeout=30000)
    ran = []
    real = workers._run_view_job
    monkeypatch.setattr(workers, "_run_view_job",
                        lambda fn, args, kwargs: (ran.append((fn.__name__, threading.current_thread().name)), real(fn, args, kwargs))[1])
    window.document.replace_diagram(load(str(CONVEYOR)), path=str(CONVEYOR))
    qtbot.waitUntil(lambda: _settled(window) and any(n == "loop_break_job" for n, _ in ran), timeout=30000)
    opened = dict(ran)
    assert opened["loop_break_job"].startswith("loopwright-views-slow"), opened
    assert not any(t.startswith("loopwright-views-lane") for t in opened.values()), opened
    ran.clear()
    _edit_gain(window.document, 1.3)
    qtbot.waitUntil(lambda: _settled(window) and any(n == "loop_break_job" for n, _ in ran), timeout=30000)
    assert dict(ran)["loop_break_job"].startswith("loopwright-views-lane"), ran
