"""The time view, pole map, loop-break view, singular-value view, noise budget and path
audit on each sample (tests of gui/docks/): what the plot items hold equals the engine's
numbers; an audit row lights exactly its path; every view exports; 800x600 stays readable."""
from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from loopwright.engine.audit import path_audit
from loopwright.engine.check import summarize
from loopwright.engine.interconnect import assemble
from loopwright.engine.margins import LoopMargins
from loopwright.engine.noise import noise_budget
from loopwright.engine.project import load
from loopwright.engine.views_data import loop_break_view, noise_bars, singular_value_views, time_views

from gui_helpers import SAMPLES
from loopwright.gui.docks.panel import pair_colour
from pictures import mask_of, paints, rgb_array

pytestmark = pytest.mark.qt


@pytest.fixture
def wait_views(qtbot):
    def _wait(win, timeout=30000):
        qtbot.waitUntil(lambda: win.views.is_idle() and win.live.is_current(), timeout=timeout)

    return _wait


def _open_with_pairs(win, path, pairs):
    win.show()
    assert win.open_sample(str(path))
    for src, sig in pairs:
        win.picker.pick_input(src)
        win.picker.pick_output(sig)


def _show(win, key, wait_views):
    win.view_docks[key].show()
    win.view_docks[key].raise_()
    win.views.refresh(key)
    wait_views(win)
    return win.panels[key]


@pytest.mark.parametrize("path", SAMPLES, ids=[p.stem for p in SAMPLES])
def test_time_view_step_and_source_runs_equal_the_engine(window, wait_views, path):
    _open_with_pairs(window, path, [("r", "y"), ("dl", "y")])
    panel = _show(window, "time", wait_views)
    d = load(path)
    for kind in ("step", "sources"):
        panel.set_run_kind(kind)
        wait_views(window)
        ref = time_views(d, [("r", "y"), ("dl", "y")], kind)
        for pair, run in zip([("r", "y"), ("dl", "y")], ref):
            for c, name in enumerate(run.names):
                t, y = panel.curves[(pair, name)].getOriginalDataset()
                assert_allclose(t, run.t)
                assert_allclose(y, run.y[:, c], rtol=1e-9, atol=1e-15)
    assert "seed 7" in panel.note.text()  # the white source's seed is named under a source run



def test_time_view_draws_each_runs_envelope_with_about_a_sample_per_pixel(window, wait_views):
    # a run of 2001 samples in a plot a few hundred pixels wide: each curve draws the largest
    # and smallest sample of every stretch of a pixel or so (counted, not timed), its data
    # stays the run's own, and the drawn envelope is exact (the run's extremes are drawn)
    path = next(p for p in SAMPLES if p.stem == "conveyor_flexible_drive")
    _open_with_pairs(window, path, [("r", "y")])
    window.resize(1000, 700)
    panel = _show(window, "time", wait_views)
    run = time_views(load(path), [("r", "y")], "step")[0]
    curve = panel.curves[(("r", "y"), run.names[0])]
    t, y = curve.getOriginalDataset()
    assert_allclose(y, run.y[:, 0], rtol=1e-9, atol=1e-15)
    drawn_t, drawn_y = curve.curve.getData()
    width = panel.plot.getViewBox().width()
    assert run.t.size > 4 * width  # there is something to thin
    assert drawn_t.size <= 2 * 1.5 * width + 4  # two extremes for each of 1.5 stretches per pixel
    assert drawn_y.max() == pytest.approx(run.y[:, 0].max(), rel=1e-12)
    assert drawn_y.min() == pytest.approx(run.y[:, 0].min(), rel=1e-12, abs=1e-15)

def test_time_view_shows_the_estimation_error_from_an_initial_state(window, wait_views):
    path = next(p for p in SAMPLES if p.stem == "levitated_rotor_axis")
    _open_with_pairs(window, path, [("r", "y")])
    panel = _show(window, "time", wait_views)
    panel.set_run_kind("initial")
    panel.show_error_box.setChecked(True)
    wait_views(window)
    assert panel.initial.text() == "P=1"
    ref = time_views(load(path), [("r", "error:est")], "initial", initial={"P": [1.0]})[0]
    t, e1 = panel.curves[(("r", "error:est"), ref.names[0])].getOriginalDataset()
    assert_allclose(e1, ref.y[:, 0], rtol=1e-9, atol=1e-15)
    assert e1[0] == pytest.approx(1.0) and abs(e1[-1]) < 1e-3  # the estimator catches up


def test_the_initial_state_field_is_enabled_only_for_runs_that_read_it(window, wait_views):
    # a step or impulse run ignores the initial state: the field is greyed out then
    _open_with_pairs(window, next(p for p in SAMPLES if p.stem == "levitated_rotor_axis"), [("r", "y")])
    panel = _show(window, "time", wait_views)
    states = {}
    for kind, error in [("step", False), ("impulse", True), ("initial", False), ("sources", False), ("sources", True)]:
        panel.set_run_kind(kind)
        panel.show_error_box.setChecked(error)
        states[kind, error] = panel.initial.isEnabled()
    assert states == {("step", False): False, ("impulse", True): False, ("initial", False): True,
                      ("sources", False): False, ("sources", True): True}


@pytest.mark.parametrize("path", SAMPLES, ids=[p.stem for p in SAMPLES])
def test_pole_map_shows_the_closed_loop_and_the_designed_poles(window, wait_views, path):
    _open_with_pairs(window, path, [])
    panel = _show(window, "poles", wait_views)
    rep = summarize(load(path))
    x, y = panel.closed.getData()
    assert_allclose(np.sort_complex(x + 1j * y), np.sort_complex(rep.poles), rtol=1e-9, atol=1e-12)
    fx, fy = panel.feedback.getData()
    ex, ey = panel.estimator.getData()
    assert_allclose(np.sort_complex(fx + 1j * fy), np.sort_complex(rep.separation.state_feedback_poles))
    assert_allclose(np.sort_complex(ex + 1j * ey), np.sort_complex(rep.separation.estimator_poles))
    assert "separation holds" in panel.message.text()
    # the hover read-out: damping and natural frequency of a pole (closed form zeta = -Re/|p|)
    p = rep.poles[np.argmax(np.abs(rep.poles.imag))]
    row = {"re": p.real, "im": p.imag, "damping": -p.real / abs(p), "wn_rad_s": abs(p)}
    assert f"{abs(p):.4g} rad/s" in panel.describe(row)


@pytest.mark.parametrize("path", SAMPLES, ids=[p.stem for p in SAMPLES])
def test_loop_break_view_lists_the_engines_margins_and_draws_its_curve(window, wait_views, path):
    _open_with_pairs(window, path, [])
    panel = _show(window, "loop_break", wait_views)
    ref = loop_break_view(load(path), "P.u")
    x, y = panel.curve.getOriginalDataset()
    assert_allclose(x + 1j * y, ref.curves[0], rtol=1e-9)
    m = ref.margins if isinstance(ref.margins, LoopMargins) else ref.margins.per_channel[0]
    listed = panel.listed_margins()
    assert listed["closed loop"] == "stable"
    assert f"{m.phase_margin_deg:.4g}°" in listed["phase margin"]
    assert f"{m.disk.alpha:.4g}" in listed["disk margin α"]
    dx, dy = panel.disk.getOriginalDataset()
    c, r = ref.circles[0]
    assert_allclose(np.hypot(dx - c, dy), r)
    if len(ref.curves) > 1:  # a vector break: each channel, then all loops at once
        panel.channel.setCurrentIndex(len(ref.curves))
        assert "all loops at once" in " ".join(panel.listed_margins())
        assert f"{ref.margins.all_at_once.alpha:.4g}" in panel.listed_margins()["disk margin α (all loops at once)"]


def test_singular_value_view_equals_the_engine_for_a_vector_pair(window, wait_views):
    path = next(p for p in SAMPLES if p.stem == "two_zone_oven")
    _open_with_pairs(window, path, [("r", "y")])
    panel = _show(window, "singular_values", wait_views)
    w, sv = singular_value_views(load(path), [("r", "y")], drawing=True)[0]
    for i in range(2):
        x, y = panel.curves[(("r", "y"), i)].getOriginalDataset()
        assert_allclose(x, w)
        assert_allclose(y, sv[:, i], rtol=1e-9)


@pytest.mark.parametrize("path", SAMPLES, ids=[p.stem for p in SAMPLES])
def test_noise_budget_bars_and_table_equal_the_engine(window, wait_views, path):
    _open_with_pairs(window, path, [("r", "y")])
    panel = _show(window, "noise", wait_views)
    bars = noise_bars(noise_budget(assemble(load(path))), ["y"])
    heights = panel.bar_heights()
    for src in heights:
        assert_allclose(heights[src], [b.parts[src] for b in bars], rtol=1e-9)
    assert [panel.table_widget.item(i, 0).text() for i in range(panel.table_widget.rowCount())] == [b.name for b in bars]
    assert panel.table_widget.item(0, 1).text() == f"{bars[0].rms:.4g}"


@pytest.mark.parametrize("size", [(1400, 900), (900, 600)])
def test_noise_budget_names_never_overlap_and_the_largest_bar_is_named(window, wait_views, size):
    # every signal of the rotor (no pair kept): sixteen bars in a dock a third of the window
    # wide. Common practice, no source: axis labels must not run into one another.
    from PySide6.QtGui import QFont, QFontMetrics

    window.resize(*size)
    _open_with_pairs(window, [p for p in SAMPLES if "rotor" in p.stem][0], [])
    panel = _show(window, "noise", wait_views)
    axis = panel.plot.getAxis("bottom")
    named = axis._tickLevels[0]
    assert named and len(named) < len(panel.shown)
    finite = [b.rms if np.isfinite(b.rms) else -1.0 for b in panel.shown]
    assert panel.shown[int(np.argmax(finite))].name in {n for _x, n in named}
    (x0, x1), width = panel.plot.getViewBox().viewRange()[0], panel.plot.getViewBox().width()
    metrics = QFontMetrics(axis.style.get("tickFont") or QFont())
    xs = sorted(named)
    for (xa, na), (xb, nb) in zip(xs, xs[1:]):
        gap = (xb - xa) * width / (x1 - x0)
        assert gap >= (metrics.horizontalAdvance(na) + metrics.horizontalAdvance(nb)) / 2, (na, nb)


@pytest.mark.parametrize("path", SAMPLES, ids=[p.stem for p in SAMPLES])
def test_audit_row_lights_exactly_its_path_and_shows_it_in_the_frequency_view(window, wait_views, path):
    _open_with_pairs(window, path, [])
    panel = _show(window, "audit", wait_views)
    rows = path_audit(assemble(load(path)))
    assert [(r.source, r.signal, r.peak_gain) for r in panel.rows] == [(r.source, r.signal, r.peak_gain) for r in rows]
    assert "worst stable path" in window.audit_status.text()
    k = 2
    panel.select_row(k)
    lit = window.scene.theme.highlight  # read from what each item paints
    lit_b = {b for b, it in window.scene.block_items.items() if paints(it, lit)}
    lit_w = {w for w, it in window.scene.wire_items.items() if paints(it, lit)}
    assert lit_b == set(rows[k].block_ids) and lit_w == set(rows[k].wire_ids)
    wait_views(window)
    freq = window.panels["frequency"]
    assert freq.audit_pair == (rows[k].source, rows[k].signal)
    assert any(key[0] == freq.audit_pair for key in freq.curves)
    panel.grid.clearSelection()
    assert not any(paints(it, lit) for it in [*window.scene.block_items.values(), *window.scene.wire_items.values()])


def _first_ink(panel):
    """The colour the panel draws its first data item in, read from that item's pen or
    brush; for the path audit (a table) the text colour of its rows."""
    import pyqtgraph as pg

    if panel.key in ("frequency", "time", "singular_values"):
        curve = next(iter(panel.curves.values()))
        curve = curve[0] if isinstance(curve, tuple) else curve  # frequency: (magnitude, phase)
        return pg.mkPen(curve.opts["pen"]).color()
    if panel.key == "loop_break":
        return pg.mkPen(panel.curve.opts["pen"]).color()
    if panel.key == "poles":
        return pg.mkPen(panel.closed.opts["pen"]).color()
    if panel.key == "noise":
        return pg.mkBrush(next(iter(panel.bars.values())).opts["brush"]).color()
    return panel.grid.palette().text().color()


def _picture_pixels(path):
    from PySide6.QtGui import QImage

    image = QImage(str(path))
    assert not image.isNull(), path
    return rgb_array(image)


def test_every_view_exports_picture_and_data(window, wait_views, tmp_path):
    path = next(p for p in SAMPLES if p.stem == "conveyor_flexible_drive")
    _open_with_pairs(window, path, [("r", "y")])
    for key, panel in window.panels.items():
        _show(window, key, wait_views)
        panel.save_picture(tmp_path / f"{key}.svg")
        panel.save_picture(tmp_path / f"{key}.png")
        panel.save_data(tmp_path / f"{key}.csv")
        assert (tmp_path / f"{key}.svg").read_text(encoding="utf-8").lstrip().startswith("<?xml")
        # The PNG shows the data: its first curve, marker, bar or row in that item's colour.
        pixels = _picture_pixels(tmp_path / f"{key}.png")
        assert pixels.shape[1] >= (800 if key != "audit" else panel.grid.width()), key
        assert mask_of(pixels, _first_ink(panel)).sum() >= 50, key
        lines = (tmp_path / f"{key}.csv").read_text(encoding="utf-8").splitlines()
        assert len(lines) > 1, key
    # the CSV of the frequency view holds the engine's numbers
    import csv

    with open(tmp_path / "frequency.csv", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    ref = window.panels["frequency"].data[("r", "y")]
    assert float(rows[1][3]) == pytest.approx(float(ref.mag_db[0, 0, 0]))


def test_views_stay_readable_at_800_by_600(window, wait_views, screenshot_dir):
    path = next(p for p in SAMPLES if p.stem == "two_zone_oven")
    _open_with_pairs(window, path, [("r", "y"), ("dl", "y")])
    window.resize(800, 600)
    wait_views(window)
    assert window.width() <= 820 and window.height() <= 620  # no panel forces the window wider
    for key in ("frequency", "time", "poles", "loop_break", "noise"):
        panel = _show(window, key, wait_views)
        assert panel.width() >= 150 and panel.height() >= 120, key
        out = screenshot_dir / f"views_800x600_{key}.png"
        window.grab().save(str(out))
        # The data are visible in the panel's own part of the window picture.
        corner = panel.mapTo(window, panel.rect().topLeft())
        pixels = _picture_pixels(out)[corner.y():corner.y() + panel.height(), corner.x():corner.x() + panel.width()]
        assert mask_of(pixels, _first_ink(panel)).sum() >= 20, key


def test_a_pole_warning_in_the_problems_list_opens_the_pole_map(window, wait_views):
    from loopwright.gui.problems import view_for_warning

    assert view_for_warning("2 poles on the imaginary axis: the loop is at best marginally stable") == "poles"
    assert view_for_warning("block 'K' is stale") is None
    window.show()
    window.problems.set_problems([], warnings=("closed-loop poles differ from eig(A - B K) with eig(A - L C)",))
    window.view_docks["frequency"].raise_()
    item = window.problems.item(0)
    assert "pole map" in item.text()
    window.problems._on_clicked(item)
    assert not window.view_docks["poles"].visibleRegion().isEmpty()


def test_stop_ends_a_running_job_at_its_next_progress_report(qtbot):
    # a job that reports progress is ended by Stop (its report raises), not left running
    # with its answer dropped: the worker is free again without the job finishing
    import threading

    from loopwright.gui.document import Document
    from loopwright.gui.workers import JobStopped, ViewJobs

    jobs = ViewJobs(Document(load(SAMPLES[0])))
    ended, release = [], threading.Event()

    def endless(*, progress):
        try:
            k = 0
            while True:
                progress(min(k / 1000.0, 0.99))
                k += 1
                release.wait(0.001)  # the worker waits a little between reports, like real work
        except JobStopped:
            ended.append("stopped")
            raise

    fractions = []
    jobs.progress_changed.connect(lambda key, f: fractions.append((key, f)))
    jobs.submit("audit", endless, progress=True)
    qtbot.waitUntil(lambda: len(fractions) >= 2, timeout=10000)
    assert not jobs.worker_idle()
    jobs.cancel("audit")
    qtbot.waitUntil(jobs.worker_idle, timeout=10000)
    assert ended == ["stopped"] and not jobs.is_busy("audit")
    assert {k for k, _ in fractions} == {"audit"} and all(0.0 <= f < 1.0 for _, f in fractions)
    jobs.shutdown()


def test_the_audit_panel_reports_progress_to_the_end(window, wait_views, monkeypatch):
    import loopwright.gui.workers as workers

    monkeypatch.setattr(workers, "PROGRESS_AFTER_S", 0.0)  # every report counts, however quick the job
    path = next(p for p in SAMPLES if p.stem == "two_zone_oven")
    _open_with_pairs(window, path, [])
    seen = []
    window.views.jobs.progress_changed.connect(lambda key, f: seen.append((key, f)))
    panel = _show(window, "audit", wait_views)
    assert [f for k, f in seen if k == "audit"][-1] == 1.0
    assert len(panel.rows) == len(path_audit(assemble(load(path))))
    panel.set_waiting(True)
    panel.set_progress(0.4)
    assert panel.progress_text() == "computing… 40 %" and panel.progress.value() == 400
    panel.set_waiting(False)


def test_a_quick_job_sends_the_window_no_progress_and_a_long_one_does_past_the_threshold(qtbot, monkeypatch):
    # the busy line shows past half a second: before that, a job's reports stay on its
    # worker (a 50-state loop's whole job takes tens of milliseconds, and each report
    # would be a queued call on the window's thread)
    import threading

    import loopwright.gui.workers as workers
    from loopwright.gui.document import Document
    from loopwright.gui.workers import ViewJobs

    monkeypatch.setattr(workers, "PROGRESS_AFTER_S", 0.3)
    jobs = ViewJobs(Document(load(SAMPLES[0])))
    fractions, results = [], []
    jobs.progress_changed.connect(lambda key, f: fractions.append((key, f)))
    jobs.result_ready.connect(results.append)
    pause = threading.Event()

    def quick(*, progress):
        for k in range(1, 101):
            progress(k / 100)
        return "done"

    jobs.submit("loop_break", quick, progress=True)
    qtbot.waitUntil(lambda: len(results) == 1, timeout=10000)
    assert results[0].value == "done" and fractions == []

    def slow(*, progress):
        for k in range(1, 101):
            progress(k / 100)
            pause.wait(0.01)  # about a second in all, most of it past the threshold
        return "done"

    jobs.submit("loop_break", slow, progress=True)
    qtbot.waitUntil(lambda: len(results) == 2, timeout=20000)
    assert fractions and fractions[-1] == ("loop_break", 1.0)
    assert 0.1 < fractions[0][1] < 0.6  # the reports before the threshold never left the worker
    jobs.shutdown()


def test_progress_of_a_quick_answer_leaves_the_hidden_busy_line_alone(window, wait_views):
    # an answer within half a second reports its progress with the busy line hidden: the
    # panel only remembers it (a label's new text would lay the panel out again, for each
    # report), and shows the last fraction once the line does show
    path = next(p for p in SAMPLES if p.stem == "two_zone_oven")
    _open_with_pairs(window, path, [])
    panel = _show(window, "audit", wait_views)
    assert panel.waiting.isHidden()
    texts = []
    panel.waiting_label.setText = lambda text, _real=panel.waiting_label.setText: (texts.append(text), _real(text))[1]
    for k in range(1, 10):
        panel.set_progress(k / 10)
    assert texts == [] and panel.progress_text() == "computing…"
    panel.set_waiting(True)
    assert panel.progress_text() == "computing… 90 %" and panel.progress.value() == 900
    panel.set_waiting(False)
    assert panel.progress_text() == "computing…" and panel.waiting.isHidden()


def test_time_view_shows_the_step_metrics_of_each_pair_in_its_colour(window, wait_views):
    # the metrics beside the plot are the engine's (engine/step_metrics.py on the engine's
    # run); python-control 0.10 step_info on the same path agrees on the overshoot
    import control as ct

    from loopwright.engine.step_metrics import step_metrics

    path = next(p for p in SAMPLES if p.stem == "conveyor_flexible_drive")
    _open_with_pairs(window, path, [("r", "y"), ("dl", "y")])
    panel = _show(window, "time", wait_views)
    panel.set_run_kind("step")
    wait_views(window)
    shown = panel.step_metrics()
    assert set(shown) == {(("r", "y"), "y"), (("dl", "y"), "y")}
    model = assemble(load(path))
    for pair in (("r", "y"), ("dl", "y")):
        run = panel.runs[pair]
        A, B, C, D = model.pair(*pair)
        ref = step_metrics(run.t, run.y[:, 0], float((D - C @ np.linalg.solve(A, B))[0, 0]))
        got = shown[(pair, "y")]
        assert got.overshoot_pct == pytest.approx(ref.overshoot_pct, abs=1e-9)
        assert got.rise_time_s == pytest.approx(ref.rise_time_s, rel=1e-9)
        info = ct.step_info(ct.ss(A, B, C, D), T=run.t)
        assert got.overshoot_pct == pytest.approx(info["Overshoot"], abs=0.5)
    text = panel.metrics_label.text()
    for k in (0, 1):
        assert pair_colour(k).name() in text
    assert panel.metrics_area.isVisible()
    panel.set_run_kind("impulse")
    wait_views(window)
    assert not panel.metrics_area.isVisible() and panel.step_metrics() == {}


def test_a_view_picture_never_replaces_a_diagram_and_carries_the_caution(window, wait_views, tmp_path):
    from loopwright.engine import CAUTION
    from loopwright.engine.output_paths import OutputRefusedError

    path = next(p for p in SAMPLES if p.stem == "conveyor_flexible_drive")
    _open_with_pairs(window, path, [("r", "y")])
    panel = _show(window, "frequency", wait_views)
    diagram = tmp_path / "mine.lwd"
    diagram.write_bytes(path.read_bytes())
    for write in (panel.save_picture, panel.save_data):
        with pytest.raises(OutputRefusedError, match="never replaces a diagram"):
            write(diagram)
    assert diagram.read_bytes() == path.read_bytes()
    panel.save_picture(tmp_path / "f.svg")
    assert CAUTION in (tmp_path / "f.svg").read_text(encoding="utf-8")



def test_axes_keep_their_picture_through_an_edit_and_draw_it_again_when_moved(window, wait_views, tmp_path):
    # an axis (ticks, labels, grid lines) is a recorded picture, made again only when its
    # range changes or it moves against its plot, not each time a curve over it changes; on
    # screen a copy of the whole axis is drawn (a copy of only the part in sight showed
    # stale tick labels where a narrow panel cut the axis off); an SVG gets lines and text
    import pyqtgraph as pg
    from PySide6.QtWidgets import QGraphicsItem

    from loopwright.gui.commands import SetParams

    path = next(p for p in SAMPLES if p.stem == "conveyor_flexible_drive")
    _open_with_pairs(window, path, [("r", "y")])
    panels = [_show(window, key, wait_views) for key in ("frequency", "time")]
    axes = {p.key: [it for it in p.canvas.scene().items() if isinstance(it, pg.AxisItem) and it.isVisible()] for p in panels}
    for key, items in axes.items():
        assert items and all(ax.cacheMode() == QGraphicsItem.CacheMode.ItemCoordinateCache for ax in items), key
        for ax in items:
            ax.grab_picture = ax.picture
    doc = window.document
    n = doc.diagram.block_by_name("N")  # the prefilter: the responses change a little
    doc.push(SetParams(doc, n.id, dict(n.params, K=(1.01 * np.asarray(n.params["K"], dtype=float)).tolist())))
    wait_views(window)
    for key, items in axes.items():
        for ax in items:
            ax.update()
        window.panels[key].canvas.grab()  # paints every axis
        assert all(ax.picture is ax.grab_picture for ax in items), key  # the same ranges: the same pictures
    ax = axes["time"][0]
    ax.setPos(ax.pos().x(), ax.pos().y() + 3)  # moved against its plot
    assert ax.picture is None
    for panel in panels:
        panel.save_picture(tmp_path / f"{panel.key}.svg")
        svg = (tmp_path / f"{panel.key}.svg").read_text(encoding="utf-8")
        assert svg.count("<text") > 6, panel.key  # tick labels as text
        assert all(ax.cacheMode() == QGraphicsItem.CacheMode.ItemCoordinateCache for ax in axes[panel.key])  # and copied again


def test_no_leftover_tab_bar_shows_beside_the_dock_groups(window):
    # building the tab groups leaves the main window earlier tab bars of each group; none of
    # them may stay visible (one used to peek out at the left edge of the canvas)
    from PySide6.QtWidgets import QTabBar

    window.show()
    bars = [tb for tb in window.findChildren(QTabBar) if tb.parentWidget() is window and tb.isVisible()]
    names = [{tb.tabText(i) for i in range(tb.count())} for tb in bars]
    assert not any(a < b for a in names for b in names), names
    assert {"Frequency view", "Singular-value view", "Pole map"} in names


def test_an_edit_made_while_the_views_are_idle_is_computed_without_the_debounce(make_window, prefs, wait_views, qtbot):
    # a debounce preference of ten minutes: an edit made while the views are idle still
    # reaches them at once (the debounce only coalesces edits arriving while views compute)
    import dataclasses

    from loopwright.engine.views_data import pair_frequency_response
    from loopwright.gui.commands import SetParams

    win = make_window(prefs=dataclasses.replace(prefs, debounce_ms=600_000))
    path = next(p for p in SAMPLES if p.stem == "conveyor_flexible_drive")
    _open_with_pairs(win, path, [("r", "y")])
    win.views.refresh_visible()
    qtbot.waitUntil(lambda: not any(win.views.jobs.is_busy(k) for k in win.panels), timeout=30000)
    freq = win.panels["frequency"]
    n = win.document.diagram.block_by_name("N")
    win.document.push(SetParams(win.document, n.id, dict(n.params, K=[[2.0 * float(np.asarray(n.params["K"]).ravel()[0])]])))
    want = pair_frequency_response(assemble(win.document.snapshot()), "r", "y", drawing=True).mag_db[:, 0, 0]

    def shows_new():
        _x, mag = freq.curves[(("r", "y"), 0, 0)][0].getOriginalDataset()
        return mag is not None and mag.shape == want.shape and np.allclose(mag, want, rtol=1e-9)

    qtbot.waitUntil(shows_new, timeout=30000)


def test_after_an_edit_the_four_views_show_the_engines_numbers_from_one_shared_model(window, wait_views, qtbot):
    # frequency view, time view, pole map and loop-break view open; the gain K is edited
    # (an undoable command, as the inspector does); each view then holds what the engine
    # gives for the edited diagram, and the jobs of that revision shared one assembled model
    from loopwright.engine.views_data import SharedModel, frequency_views
    from loopwright.gui.commands import SetParams

    path = next(p for p in SAMPLES if p.stem == "conveyor_flexible_drive")
    _open_with_pairs(window, path, [("r", "y")])
    for key in ("frequency", "time", "poles", "loop_break"):
        window.view_docks[key].show()
    wait_views(window)
    shared_seen = []
    submit = window.views.jobs.submit

    def recording_submit(key, fn, *args, **kwargs):
        shared_seen.append((key, kwargs.get("shared")))
        return submit(key, fn, *args, **kwargs)

    window.views.jobs.submit = recording_submit
    doc = window.document
    n = doc.diagram.block_by_name("N")
    doc.push(SetParams(doc, n.id, dict(n.params, K=[[1.5 * float(np.asarray(n.params["K"]).ravel()[0])]])))
    qtbot.waitUntil(lambda: {k for k, _ in shared_seen} >= {"frequency", "time", "poles"}, timeout=30000)
    wait_views(window)
    d = doc.snapshot()
    # one SharedModel for the revision, handed to every view that uses the closed loop
    shared = {id(s) for k, s in shared_seen if k in ("frequency", "time", "poles")}
    assert len(shared) == 1 and isinstance(shared_seen[0][1], SharedModel)
    want = frequency_views(d, [("r", "y")], drawing=True)[0]
    _x, mag = window.panels["frequency"].curves[(("r", "y"), 0, 0)][0].getOriginalDataset()
    assert_allclose(mag, want.mag_db[:, 0, 0], rtol=1e-9)
    run = time_views(d, [("r", "y")], window.panels["time"].run_kind(), initial=None)[0]
    tx, ty = window.panels["time"].curves[next(iter(window.panels["time"].curves))].getOriginalDataset()
    if window.panels["time"].run_kind() == "step":
        assert_allclose(ty, run.y[:, 0], rtol=1e-9, atol=1e-12)
    x, y = window.panels["poles"].closed.getData()
    assert_allclose(np.sort_complex(x + 1j * y), np.sort_complex(summarize(d).poles), rtol=1e-9, atol=1e-12)
    at = d.settings.get("loop_break")
    if at:
        view = loop_break_view(d, at, limits=False)
        assert_allclose(window.panels["loop_break"].data.margins.disk.alpha, view.margins.disk.alpha, rtol=1e-9)


def test_an_answer_overtaken_by_an_edit_leaves_no_panel_busy(qtbot):
    # a hidden panel's job is not sent again after an edit; its overtaken answer must not
    # leave it counted as busy (the views would never be idle again, and every later edit
    # would wait for the debounce)
    import threading

    from loopwright.gui.commands import SetParams
    from loopwright.gui.document import Document
    from loopwright.gui.workers import ViewJobs

    doc = Document(load(SAMPLES[0]))
    jobs = ViewJobs(doc)
    release = threading.Event()
    jobs.submit("noise", lambda: release.wait(10.0) and "answer")
    assert jobs.is_busy("noise")
    b = next(b for b in doc.diagram.blocks.values() if b.kind == "gain")
    before = doc.revision
    doc.push(SetParams(doc, b.id, dict(b.params, K=(2.0 * np.asarray(b.params["K"], dtype=float)).tolist())))
    assert doc.revision != before  # a new revision while the job runs
    delivered = []
    jobs.result_ready.connect(delivered.append)
    release.set()
    qtbot.waitUntil(lambda: not jobs.is_busy("noise"), timeout=10000)
    assert delivered == [] and jobs.discarded == 1 and jobs.worker_idle()
    jobs.shutdown()


def test_slow_views_run_beside_the_quick_ones(qtbot):
    # a slow view's job (margins, noise budget, audit) on its own worker does not hold up
    # a quick view's job submitted after it
    import threading

    from loopwright.gui.document import Document
    from loopwright.gui.workers import ViewJobs

    jobs = ViewJobs(Document(load(SAMPLES[0])))
    release = threading.Event()
    results = []
    jobs.result_ready.connect(lambda r: results.append(r.key))
    jobs.submit("loop_break", lambda: release.wait(10.0) and "margins", slow=True)
    jobs.submit("frequency", lambda: "curves")
    qtbot.waitUntil(lambda: results == ["frequency"], timeout=10000)
    assert jobs.is_busy("loop_break") and jobs.worker_idle(quick_only=True) and not jobs.worker_idle()
    release.set()
    qtbot.waitUntil(lambda: results == ["frequency", "loop_break"], timeout=10000)
    jobs.shutdown()


@pytest.mark.parametrize("path", SAMPLES, ids=[p.stem for p in SAMPLES])
def test_axes_cut_off_by_narrow_panels_show_as_fresh_axes_would(window, wait_views, path):
    # four views side by side along the bottom make each one narrower than its legend, which
    # cuts the axes off at the panel's edge; what the window shows equals the same axes drawn
    # afresh (a copy of only the part in sight kept stale tick labels and grid lines there)
    import pyqtgraph as pg
    from PySide6.QtCore import Qt
    from PySide6.QtWidgets import QApplication

    window.resize(1600, 1000)
    window.show()
    for key in ("frequency", "time", "poles", "loop_break"):
        window.addDockWidget(Qt.DockWidgetArea.BottomDockWidgetArea, window.view_docks[key], Qt.Orientation.Horizontal)
        window.view_docks[key].show()
    _open_with_pairs(window, path, [("r", "y")])
    wait_views(window)
    for _ in range(10):
        QApplication.processEvents()
    for key in ("frequency", "time", "poles", "loop_break"):
        canvas = window.panels[key].canvas
        shown = canvas.grab().toImage()
        for ax in [it for it in canvas.scene().items() if isinstance(it, pg.AxisItem)]:
            ax.picture = None
            ax.update()
        assert canvas.grab().toImage() == shown, key
