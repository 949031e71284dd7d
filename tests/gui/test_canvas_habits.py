"""The canvas reads at a glance and behaves like a desktop program: open inputs drawn, wires
in separate lanes, names that do not collide, blocks placed beside the others, undo keys on
the canvas, stale designs and a biased estimate marked where they are (tests of
gui/canvas/*, gui/main_window.py, gui/problems.py, gui/settings.py)."""
from __future__ import annotations

import json

import pytest
from PySide6.QtCore import QEvent, QObject, QPointF, Qt
from PySide6.QtGui import QImage, QPainter
from PySide6.QtTest import QTest
from PySide6.QtWidgets import QStyle

from loopwright.engine.diagram import Diagram, PortRef
from loopwright.gui.canvas.block_item import BlockItem
from loopwright.gui.canvas.geometry import segments_overlap
from loopwright.gui.commands import AddBlock, Connect
from loopwright.gui.main_window import status_text
from loopwright.gui.settings import load_preferences

from diagrams import sample_path
from gui_helpers import SAMPLES

pytestmark = pytest.mark.qt


@pytest.fixture
def shown(window, qtbot):
    window.show()
    qtbot.waitExposed(window)
    return window


def _biased_stage() -> Diagram:
    """tests/REFERENCES.md#stage-observer with N r added after the estimator's tap (see
    tests/engine/test_estimator_inputs.py for the closed-form bias)."""
    from diagrams import stage_loop_named

    d = stage_loop_named()
    d.add_block("source", "r", {"role": "reference", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0}},
                layout={"x": -300, "y": 0})
    d.add_block("gain", "N", {"K": [[8.0]]}, layout={"x": -180, "y": 0})
    d.blocks[d.block_by_name("up").id].params["signs"] = ["+", "+", "+"]
    d.connect("r.out", "N.in", name="ref")
    d.connect("N.out", "up.in3", name="u_ff")
    return d


# ---- 3: the estimator reads what the plant gets ------------------------------------------
def test_a_feedforward_after_the_tap_is_listed_marked_and_selects_its_culprits(shown, wait_live, qtbot):
    window = shown
    window.document.replace_diagram(_biased_stage())
    result = wait_live(window)
    d = window.document.diagram
    assert "estimate biased: est.u misses ref via N ·" in status_text(result) + " ·"
    assert "estimate biased" in window._model_label.text()
    items = [window.problems.item(k) for k in range(window.problems.count())]
    (hit,) = [it for it in items if "ref via N" in it.text()]
    est, n = d.block_by_name("est").id, d.block_by_name("N").id
    assert window.scene.block_items[est].problems and not window.scene.block_items[est].has_error
    window.scene.clearSelection()
    window.problems_dock.raise_()
    qtbot.waitUntil(window.problems.isVisible, timeout=3000)
    # a double click on the problem selects its culprits on the canvas
    rect = window.problems.visualItemRect(hit)
    chosen = []
    window.problems.culprits_chosen.connect(lambda b, w: chosen.append(set(b)))
    # a desktop double click: a click, then the double-click event on the same item
    vp, left, none = window.problems.viewport(), Qt.MouseButton.LeftButton, Qt.KeyboardModifier.NoModifier
    QTest.mouseClick(vp, left, none, rect.center())
    QTest.mouseDClick(vp, left, none, rect.center())
    assert len(chosen) >= 2 and all({est, n} <= c for c in chosen)
    assert {est, n} <= set(window.scene.selected_block_ids())


def test_the_status_line_says_what_the_estimator_misses_reads_besides_and_weighs_otherwise():
    # the plant gets Kx xhat + N r (N = 8); est.u reads Kx xhat + M r + v: r's weight differs, v is extra
    from loopwright.engine.check import summarize
    from loopwright.gui.workers import LiveResult

    d = _biased_stage()
    for kind, name, params in (("gain", "M", {"K": [[7.0]]}), ("sum", "ue", {"signs": ["+", "+", "+"], "width": 1}),
                               ("source", "v", {"role": "reference", "width": 1})):
        d.add_block(kind, name, params)
    w = d.wire_into(d.resolve_port("est.u"))
    d.disconnect(w.id, d.resolve_port("est.u"))
    d.connect("Kx.out", "ue.in1")
    d.connect("r.out", "M.in")
    d.connect("M.out", "ue.in2")
    d.connect("v.out", "ue.in3", name="trim")
    d.connect("ue.out", "est.u", name="est_cmd")
    text = status_text(LiveResult(revision=1, report=summarize(d)))
    assert "estimate biased: est.u also reads trim; weighs ref (via N to the plant, via M to the estimator) differently" in text


def test_a_warning_without_culprits_keeps_the_selection(window):
    doc = window.document
    a = AddBlock(doc, "gain")
    doc.push(a)
    window.scene.select_ids([a.block_id])
    window.problems.culprits_chosen.emit([], [])
    assert window.scene.selected_block_ids() == [a.block_id]


# ---- 4: ports, lanes, names -------------------------------------------------------------
def test_unconnected_inputs_are_drawn_open_and_named_on_hover(window):
    doc = window.document
    s = AddBlock(doc, "sum", params={"signs": ["+", "-", "+"], "width": 1}, layout={"x": 200, "y": 0})
    g = AddBlock(doc, "gain", layout={"x": 0, "y": 0})
    doc.push(s)
    doc.push(g)
    item = window.scene.block_items[s.block_id]
    assert item.open_inputs == {"in1", "in2", "in3"}
    doc.push(Connect(doc, PortRef(g.block_id, "out"), PortRef(s.block_id, "in1")))
    assert item.open_inputs == {"in2", "in3"}
    assert "in2 (not connected)" in item.port("in2", is_input=True).toolTip()
    assert "not connected" not in item.port("in1", is_input=True).toolTip()
    doc.undo_stack.undo()
    assert item.open_inputs == {"in1", "in2", "in3"}


def _all_segments(window):
    return {wid: [(a, b) for pts in it.routes for a, b in zip(pts, pts[1:])] for wid, it in window.scene.wire_items.items()}


def _assert_no_shared_lanes(window):
    segs = _all_segments(window)
    ids = sorted(segs)
    for i, a in enumerate(ids):
        for b in ids[i + 1:]:
            shared = [(s, t) for s in segs[a] for t in segs[b] if segments_overlap(s, t)]
            assert not shared, (window.document.diagram.wires[a].name, window.document.diagram.wires[b].name, shared)


def _assert_names_apart(window):
    rects = [(it.label, it._label_rect) for it in window.scene.wire_items.values() if not it._label_rect.isNull()]
    for i, (na, ra) in enumerate(rects):
        for nb, rb in rects[i + 1:]:
            assert not ra.intersects(rb), (na, nb)


def _two_feedback_loops() -> Diagram:
    """Two wires running back under one row of gains (G4 to G1, G3 to G2): routed alone, both
    take the lane just below the row and their default names sit at the same spot."""
    d = Diagram()
    for k in range(4):
        d.add_block("gain", f"G{k + 1}", {"K": [[1.0]]}, layout={"x": 150 * k, "y": 0})
    d.connect("G4.out", "G1.in")
    d.connect("G3.out", "G2.in")
    return d


@pytest.mark.parametrize("which", ["two-feedback-loops", *(p.stem for p in SAMPLES)])
def test_wires_never_share_a_lane_and_names_never_collide(window, which):
    if which == "two-feedback-loops":
        window.document.replace_diagram(_two_feedback_loops())
    else:
        window.open_sample(str(next(p for p in SAMPLES if p.stem == which)))
    _assert_no_shared_lanes(window)
    _assert_names_apart(window)


def test_a_block_dropped_onto_a_wire_lands_beside_it(shown):
    from PySide6.QtGui import QDragEnterEvent, QDragMoveEvent, QDropEvent
    from PySide6.QtWidgets import QApplication

    from test_canvas import _drag_event

    doc = shown.document
    a = AddBlock(doc, "gain", layout={"x": 0, "y": 0})
    b = AddBlock(doc, "gain", layout={"x": 400, "y": 0})
    doc.push(a)
    doc.push(b)
    doc.push(Connect(doc, PortRef(a.block_id, "out"), PortRef(b.block_id, "in")))
    md = shown.shelf.mimeData([shown.shelf.item(2)])  # a gain
    shown.view.centerOn(200, 0)
    pos = QPointF(shown.view.mapFromScene(QPointF(200, 0)))
    for cls in (QDragEnterEvent, QDragMoveEvent, QDropEvent):
        QApplication.sendEvent(shown.view.viewport(), _drag_event(cls, pos, Qt.DropAction.CopyAction, md,
                                                                   Qt.MouseButton.LeftButton, Qt.KeyboardModifier.NoModifier))
    new = next(bid for bid in doc.diagram.blocks if bid not in (a.block_id, b.block_id))
    body = shown.scene.block_items[new].body_scene_rect()
    (wire,) = shown.scene.wire_items.values()
    for p, q in zip(wire.routes[0], wire.routes[0][1:]):
        seg = body.adjusted(-2, -2, 2, 2)
        assert not seg.intersects(_segment_rect(p, q))


def _segment_rect(p, q):
    from PySide6.QtCore import QRectF

    return QRectF(QPointF(min(p[0], q[0]), min(p[1], q[1])), QPointF(max(p[0], q[0]), max(p[1], q[1]))).adjusted(-0.5, -0.5, 0.5, 0.5)


# ---- 5: desktop habits -------------------------------------------------------------------
def test_ctrl_z_on_the_canvas_undoes_after_an_inspector_edit_and_ctrl_y_redoes(shown, qtbot):
    doc = shown.document
    g = AddBlock(doc, "gain", layout={"x": 0, "y": 0})
    doc.push(g)
    shown.scene.select_ids([g.block_id])
    field = shown.inspector.fields["name"] if "name" in shown.inspector.fields else None
    assert field is not None
    field.setFocus()
    field.selectAll()
    QTest.keyClicks(field, "Kfb")
    QTest.keyClick(field, Qt.Key.Key_Return)
    assert doc.diagram.blocks[g.block_id].name == "Kfb"
    # the text field still has the keyboard; a click on the empty canvas takes it back
    QTest.mouseClick(shown.view.viewport(), Qt.MouseButton.LeftButton, Qt.KeyboardModifier.NoModifier,
                     shown.view.mapFromScene(QPointF(300, 300)))
    assert shown.view.hasFocus()
    QTest.keyClick(shown.view, Qt.Key.Key_Z, Qt.KeyboardModifier.ControlModifier)
    assert doc.diagram.blocks[g.block_id].name == "K"
    QTest.keyClick(shown.view, Qt.Key.Key_Y, Qt.KeyboardModifier.ControlModifier)
    assert doc.diagram.blocks[g.block_id].name == "Kfb"


def test_undo_and_redo_icons_are_not_back_and_forward_arrows(window):
    style = window.style()
    for key, arrow in (("undo", QStyle.StandardPixmap.SP_ArrowBack), ("redo", QStyle.StandardPixmap.SP_ArrowForward)):
        ours = window.actions_[key].icon().pixmap(24, 24).toImage()
        theirs = style.standardIcon(arrow).pixmap(24, 24).toImage()
        assert not ours.isNull() and ours != theirs
    assert window.actions_["undo"].icon().pixmap(24, 24).toImage() != window.actions_["redo"].icon().pixmap(24, 24).toImage()


class _PaintSpy(QObject):
    def __init__(self):
        super().__init__()
        self.rects = []

    def eventFilter(self, obj, event):
        if event.type() == QEvent.Type.Paint:
            self.rects.append(event.rect())
        return False


def test_the_empty_hint_is_repainted_away_when_the_first_block_comes(shown, qtbot):
    vp = shown.view.viewport()
    spy = _PaintSpy()
    vp.installEventFilter(spy)
    try:
        qtbot.wait(50)
        spy.rects.clear()
        # far outside the visible area: only a full repaint clears the hint in the middle
        shown.document.push(AddBlock(shown.document, "gain", layout={"x": 20000, "y": 20000}))
        qtbot.waitUntil(lambda: any(r.contains(vp.rect().center()) for r in spy.rects), timeout=3000)
    finally:
        vp.removeEventFilter(spy)


def test_an_aborted_wire_leaves_no_target_rings(shown, qtbot):
    doc = shown.document
    a = AddBlock(doc, "gain", layout={"x": 0, "y": 0})
    b = AddBlock(doc, "sum", layout={"x": 200, "y": 0})
    doc.push(a)
    doc.push(b)
    shown.view.centerOn(100, 0)
    out = shown.scene.block_items[a.block_id].port_scene_pos("out", is_input=False)
    vp = shown.view.viewport()
    QTest.mousePress(vp, Qt.MouseButton.LeftButton, Qt.KeyboardModifier.NoModifier, shown.view.mapFromScene(out))
    QTest.mouseMove(vp, shown.view.mapFromScene(QPointF(150, 40)))
    ports = [p for it in shown.scene.block_items.values() for p in it.ports.values()]
    assert any(p._target_state for p in ports)
    QTest.keyClick(shown.view, Qt.Key.Key_Escape)
    QTest.mouseRelease(vp, Qt.MouseButton.LeftButton, Qt.KeyboardModifier.NoModifier, shown.view.mapFromScene(QPointF(150, 40)))
    assert all(p._target_state == 0 for p in ports)
    assert not doc.diagram.wires


def _bodies_overlap(window) -> list:
    items = list(window.scene.block_items.values())
    return [(a.block.name, b.block.name) for i, a in enumerate(items) for b in items[i + 1:]
            if a.body_scene_rect().intersects(b.body_scene_rect())]


def test_pasted_and_double_click_placed_blocks_land_beside_the_others(window):
    window.open_sample(str(sample_path("two_zone_oven.lwd")))
    window.select_all()
    assert window.copy()
    first = window.paste()
    second = window.paste()
    assert first and second
    assert _bodies_overlap(window) == []
    for _ in range(3):
        window.shelf.place_requested.emit("gain", None)
    assert _bodies_overlap(window) == []


@pytest.mark.parametrize("size", [(640, 420)])
def test_a_small_window_gives_the_room_to_the_canvas(shown, qtbot, size):
    shown.resize(*size)
    qtbot.waitUntil(lambda: not shown.inspector_dock.isVisible(), timeout=3000)
    assert not shown.shelf_dock.isVisible() and not shown.problems_dock.isVisible()
    qtbot.waitUntil(lambda: shown.view.width() > 0.9 * shown.width(), timeout=3000)
    shown.resize(1400, 900)
    qtbot.waitUntil(lambda: shown.inspector_dock.isVisible() and shown.shelf_dock.isVisible(), timeout=3000)


def test_the_canvas_colour_choice_is_remembered(make_window, qsettings):
    win = make_window()
    win.set_theme_choice(True)
    assert load_preferences(qsettings).dark is True
    win.set_theme_choice(None)
    assert load_preferences(qsettings).dark is None


def test_a_sample_opens_under_its_title_as_a_copy_and_save_asks_where(window, dialogs, tmp_path):
    path = sample_path("two_zone_oven.lwd")
    title = json.loads(path.read_text(encoding="utf-8"))["meta"]["title"]
    assert window.open_sample(str(path))
    assert window.windowTitle().startswith(f"{title} (copy)")
    asked = []
    dialogs.save_path = lambda suggestion="": asked.append(suggestion) or str(tmp_path / "mine.lwd")
    assert window.save()
    assert asked == ["two_zone_oven.lwd"]
    assert window.windowTitle().startswith("mine.lwd")


# ---- 6: stale designs on the canvas ------------------------------------------------------
def test_stale_designs_are_marked_on_the_blocks(window, wait_live, tmp_path):
    d = json.loads(sample_path("levitated_rotor_axis.lwd").read_text(encoding="utf-8"))
    f = tmp_path / "rotor.lwd"
    f.write_text(json.dumps(d), encoding="utf-8")
    window.open_path(str(f))
    wait_live(window)
    assert all(it.design_state == "" for it in window.scene.block_items.values())
    next(b for b in d["blocks"] if b["name"] == "P")["params"]["A"][1][0] = 4100.0  # a stiffer magnet
    f.write_text(json.dumps(d), encoding="utf-8")
    window.open_path(str(f))
    wait_live(window)
    marked = {it.block.name: it.design_state for it in window.scene.block_items.values() if it.design_state}
    assert marked == {"K": "stale", "N": "stale", "est": "stale"}  # the three designed blocks (engine/recipes.py)
    k = next(it for it in window.scene.block_items.values() if it.block.name == "K")
    assert "stale: the plant or recipe of K changed" in k.toolTip()
    assert k.boundingRect().contains(k.design_badge_rect())


def test_a_block_never_designed_is_marked_even_when_the_loop_does_not_assemble(window, wait_live):
    doc = window.document
    g = AddBlock(doc, "gain", params={"K": [[1.0]], "recipe": {"method": "place", "poles": [-1.0], "plant": "P"}})
    doc.push(g)
    doc.push(AddBlock(doc, "plant", name="P", layout={"x": 300, "y": 0}))
    wait_live(window)
    assert window.scene.block_items[g.block_id].design_state in ("not designed yet",) or \
        window.scene.block_items[g.block_id].design_state.startswith("recipe cannot be read")


# ---- 8: the dynamic block's own face -----------------------------------------------------
def test_the_dynamic_block_shows_its_name_and_gain_curve_not_a_fraction(window):
    from loopwright.gui.canvas.glyphs import _sketch_points, symbol_text

    doc = window.document
    c = AddBlock(doc, "dynamic", layout={"x": 0, "y": 0})
    doc.push(c)
    blk = doc.diagram.blocks[c.block_id]
    assert blk.params == {"num": [100.0], "den": [1.0, 14.0, 100.0]}  # engine/diagram.py default_params
    assert symbol_text(blk) == (blk.name, None)
    order, pts = _sketch_points(json.dumps(blk.params, sort_keys=True))
    assert order == 2
    # a low-pass: flat at the left of the thumbnail, down at the right
    assert pts[0][1] == pytest.approx(0.0, abs=0.01) and pts[-1][1] > 0.6
    item = window.scene.block_items[c.block_id]
    img = QImage(200, 120, QImage.Format.Format_ARGB32)
    img.fill(window.theme.block_fill)
    p = QPainter(img)
    p.translate(100, 60)
    item.paint(p, None)
    p.end()
    wire = window.theme.wire
    curve = sum(1 for x in range(200) for y in range(120)
                if abs(QImageColour(img, x, y).red() - wire.red()) < 30 and abs(QImageColour(img, x, y).green() - wire.green()) < 30
                and abs(QImageColour(img, x, y).blue() - wire.blue()) < 30)
    assert curve > 20  # the thumbnail's curve is drawn in the wire colour


def QImageColour(img, x, y):
    from PySide6.QtGui import QColor

    return QColor(img.pixel(x, y))


def test_the_shelf_icon_of_the_dynamic_block_is_its_new_face(window):
    from loopwright.gui.shelf import SHELF_ENTRIES

    row = [k for k, e in enumerate(SHELF_ENTRIES) if e[1] == "dynamic"][0]
    icon = window.shelf.item(row).icon().pixmap(64, 40).toImage()
    plant = window.shelf.item(0).icon().pixmap(64, 40).toImage()
    assert not icon.isNull() and icon != plant


def test_screens_of_the_new_marks(window, wait_live, screenshot_dir):
    window.document.replace_diagram(_biased_stage())
    c = AddBlock(window.document, "dynamic", name="F", layout={"x": 0, "y": -160})
    window.document.push(c)
    wait_live(window)
    window.resize(1400, 900)
    window.view.fit_to_view()
    out = screenshot_dir / "canvas_biased_estimate_and_filter.png"
    window.grab().save(str(out))
    assert out.stat().st_size > 0
    assert isinstance(window.scene.block_items[c.block_id], BlockItem)
