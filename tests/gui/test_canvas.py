"""The canvas: items mirror the document, gestures become commands, markings show the
live model (tests of gui/canvas/scene.py, view.py, block_item.py, wire_item.py)."""
from __future__ import annotations

import pytest
from PySide6.QtCore import QPoint, QPointF, Qt
from PySide6.QtTest import QTest

from loopwright.engine.diagram import PortRef
from loopwright.gui.canvas.block_item import BlockItem
from loopwright.gui.canvas.wire_item import WireItem
from loopwright.gui.commands import AddBlock

from gui_helpers import SAMPLES, apply_random_edit
from pictures import outline_sides, paints

pytestmark = pytest.mark.qt

OVEN = next(p for p in SAMPLES if p.stem == "two_zone_oven")


def _vp(view, scene_pt: QPointF) -> QPoint:
    return view.mapFromScene(scene_pt)


def _drag(qtbot, view, a: QPointF, b: QPointF, steps: int = 6) -> None:
    vp = view.viewport()
    pa, pb = _vp(view, a), _vp(view, b)
    QTest.mousePress(vp, Qt.MouseButton.LeftButton, Qt.KeyboardModifier.NoModifier, pa)
    for k in range(1, steps + 1):
        p = pa + (pb - pa) * k / steps
        QTest.mouseMove(vp, p)
    QTest.mouseRelease(vp, Qt.MouseButton.LeftButton, Qt.KeyboardModifier.NoModifier, pb)


@pytest.fixture
def shown(window, qtbot):
    window.show()
    qtbot.waitExposed(window)
    return window


def test_items_mirror_the_document_for_every_sample(window):
    for path in SAMPLES:
        window.open_sample(str(path))
        d = window.document.diagram
        assert set(window.scene.block_items) == set(d.blocks)
        assert set(window.scene.wire_items) == set(d.wires)
        for wid, item in window.scene.wire_items.items():
            assert len(item.routes) == len(d.wires[wid].targets)


def test_every_wire_route_is_orthogonal_and_ends_on_its_ports(window):
    window.open_sample(str(SAMPLES[0]))
    sc = window.scene
    for wid, item in sc.wire_items.items():
        w = window.document.diagram.wires[wid]
        for route, t in zip(item.routes, w.targets):
            for (x0, y0), (x1, y1) in zip(route, route[1:]):
                assert abs(x0 - x1) < 1e-9 or abs(y0 - y1) < 1e-9
            src = sc.block_items[w.source.block].port_scene_pos(w.source.port, is_input=False)
            dst = sc.block_items[t.block].port_scene_pos(t.port, is_input=True)
            assert route[0] == pytest.approx((src.x(), src.y()))
            assert route[-1] == pytest.approx((dst.x(), dst.y()))


def test_vector_signals_get_their_width_from_the_live_model(window, wait_live):
    window.open_sample(str(OVEN))
    wait_live(window)
    d = window.document.diagram
    xhat = window.scene.wire_items[d.wire_by_name("xhat").id]
    assert xhat.signal_width == 2  # two oven zones: two estimated states
    r = window.scene.wire_items[d.wire_by_name("d").id]
    assert r.signal_width == 1


def test_connecting_by_dragging_from_an_output_to_an_input(shown, qtbot):
    doc = shown.document
    a = AddBlock(doc, "gain", layout={"x": 0, "y": 0})
    b = AddBlock(doc, "integrator", layout={"x": 200, "y": 40})
    doc.push(a)
    doc.push(b)
    shown.view.centerOn(100, 20)
    sc = shown.scene
    out = sc.block_items[a.block_id].port_scene_pos("out", is_input=False)
    inp = sc.block_items[b.block_id].port_scene_pos("in", is_input=True)
    steps = doc.undo_stack.count()
    _drag(qtbot, shown.view, out, inp + QPointF(5, 4))  # released near the port: snaps to it
    w = doc.diagram.wire_from(PortRef(a.block_id, "out"))
    assert w is not None and w.targets == [PortRef(b.block_id, "in")]
    assert doc.undo_stack.count() == steps + 1


def test_dragging_from_a_wire_branches_off_its_source(shown, qtbot):
    doc = shown.document
    a = AddBlock(doc, "gain", layout={"x": 0, "y": 0})
    b = AddBlock(doc, "integrator", layout={"x": 200, "y": 0})
    c = AddBlock(doc, "integrator", layout={"x": 200, "y": 120})
    for cmd in (a, b, c):
        doc.push(cmd)
    shown.scene.connect_ports(PortRef(a.block_id, "out"), PortRef(b.block_id, "in"))
    shown.view.centerOn(100, 60)
    item = next(iter(shown.scene.wire_items.values()))
    (x0, y0), (x1, y1) = item.routes[0][0], item.routes[0][1]
    on_wire = QPointF((x0 + x1) / 2 + 30, y0)
    target = shown.scene.block_items[c.block_id].port_scene_pos("in", is_input=True)
    _drag(qtbot, shown.view, on_wire, target)
    w = doc.diagram.wire_from(PortRef(a.block_id, "out"))
    assert w.targets == [PortRef(b.block_id, "in"), PortRef(c.block_id, "in")]


def test_valid_targets_are_highlighted_while_connecting(shown, qtbot):
    doc = shown.document
    a = AddBlock(doc, "gain", layout={"x": 0, "y": 0})
    b = AddBlock(doc, "sum", layout={"x": 200, "y": 0})
    doc.push(a)
    doc.push(b)
    sc = shown.scene
    out = sc.block_items[a.block_id].port(("out"), is_input=False)
    ok = sc.theme.target_ok
    assert not any(paints(p, ok) for it in sc.block_items.values() for p in it.ports.values())  # idle ports draw nothing
    sc._start_link(out.scenePos(), source=out.ref, target=None)
    # A valid end draws a ring in the "valid target" colour; an output cannot end a wire.
    rings = {(it.block_id, p.ref.port, p.is_input) for it in sc.block_items.values() for p in it.ports.values() if paints(p, ok)}
    assert rings == {(b.block_id, "in1", True), (b.block_id, "in2", True), (a.block_id, "in", True)}
    sc.cancel_gesture()
    assert not any(paints(p, ok) for it in sc.block_items.values() for p in it.ports.values())


def test_moving_blocks_by_mouse_snaps_to_the_grid_and_is_one_undo_step(shown, qtbot):
    doc = shown.document
    a = AddBlock(doc, "plant", layout={"x": 0, "y": 0})
    doc.push(a)
    shown.view.centerOn(0, 0)
    steps = doc.undo_stack.count()
    _drag(qtbot, shown.view, QPointF(0, 0), QPointF(63, 27), steps=10)
    lay = doc.diagram.blocks[a.block_id].layout
    assert (lay["x"] % 10, lay["y"] % 10) == (0, 0)
    assert (lay["x"], lay["y"]) != (0, 0)
    assert doc.undo_stack.count() == steps + 1
    doc.undo_stack.undo()
    assert shown.scene.block_items[a.block_id].pos() == QPointF(0, 0)


def test_rubber_band_selects_the_blocks_it_touches(shown, qtbot):
    doc = shown.document
    for x in (0, 150, 600):
        doc.push(AddBlock(doc, "gain", layout={"x": x, "y": 0}))
    shown.view.zoom_reset()
    shown.view.centerOn(250, 0)
    _drag(qtbot, shown.view, QPointF(-60, -60), QPointF(200, 60))
    names = sorted(doc.diagram.blocks[b].name for b in shown.scene.selected_block_ids())
    assert names == ["K", "K2"]


def test_rename_in_place_commits_on_enter_and_reports_a_refusal(shown, qtbot):
    doc = shown.document
    a = AddBlock(doc, "gain", layout={"x": 0, "y": 0})
    b = AddBlock(doc, "gain", layout={"x": 200, "y": 0})
    doc.push(a)
    doc.push(b)
    editor = shown.view.begin_rename(shown.scene.block_items[a.block_id])
    editor.setText("Kfb")
    QTest.keyClick(editor, Qt.Key.Key_Return)
    assert doc.diagram.blocks[a.block_id].name == "Kfb"
    refused = []
    shown.scene.edit_refused.connect(refused.append)
    editor = shown.view.begin_rename(shown.scene.block_items[b.block_id])
    editor.setText("Kfb")
    QTest.keyClick(editor, Qt.Key.Key_Return)
    assert doc.diagram.blocks[b.block_id].name == "K2"
    assert refused and "already used" in refused[0]


def test_mirroring_puts_the_input_on_the_right_for_a_feedback_path(window):
    doc = window.document
    a = AddBlock(doc, "gain", layout={"x": 0, "y": 0})
    doc.push(a)
    window.scene.select_ids([a.block_id])
    item = window.scene.block_items[a.block_id]
    assert item.port_scene_pos("in", is_input=True).x() < 0
    window.actions_["flip"].trigger()
    assert item.port_scene_pos("in", is_input=True).x() > 0
    window.actions_["rotate"].trigger()
    assert doc.diagram.blocks[a.block_id].layout["rotation"] == 90
    # Mirrored, then turned a quarter clockwise: the input now faces down.
    assert item.port_scene_pos("in", is_input=True).y() > 0
    doc.undo_stack.undo()
    doc.undo_stack.undo()
    assert item.port_scene_pos("in", is_input=True).x() < 0


def test_a_moved_wire_segment_is_kept_as_bends_and_undoable(window):
    window.open_sample(str(SAMPLES[0]))
    d = window.document.diagram
    w = d.wire_by_name("ufb")
    item = window.scene.wire_items[w.id]
    route = item.routes[0]
    assert len(route) >= 4
    interior = [list(p) for p in route[1:-1]]
    k = 1
    horizontal = abs(route[k][1] - route[k + 1][1]) < 1e-9
    for idx in (k - 1, k):
        if horizontal:
            interior[idx][1] += 30.0
        else:
            interior[idx][0] -= 30.0
    window.scene.commit_wire_bends(w.id, 0, interior)
    assert d.wires[w.id].layout["bends"]["0"] == interior
    moved = item.routes[0]
    assert [list(p) for p in moved[1:-1]] == interior
    window.document.undo_stack.undo()
    assert item.routes[0] == route


def test_highlight_marks_any_set_of_blocks_and_wires(window):
    window.open_sample(str(SAMPLES[0]))
    d = window.document.diagram
    p, u = d.block_by_name("P").id, d.wire_by_name("u").id
    sc, lit = window.scene, window.scene.theme.highlight
    assert not any(paints(it, lit) for it in [*sc.block_items.values(), *sc.wire_items.values()])
    sc.highlight([p], [u])
    # Only the named items are drawn in the highlight colour: P's outline, the whole of u.
    assert {b for b, it in sc.block_items.items() if paints(it, lit)} == {p}
    assert {w for w, it in sc.wire_items.items() if paints(it, lit)} == {u}
    assert outline_sides(sc.block_items[p], lit) >= 3
    assert not paints(sc.wire_items[u], sc.theme.wire)
    sc.highlight()
    assert not any(paints(it, lit) for it in [*sc.block_items.values(), *sc.wire_items.values()])
    assert outline_sides(sc.block_items[p], sc.theme.block_border) >= 3


def test_blocks_and_wires_use_device_cache_and_selection_is_by_id(window):
    window.open_sample(str(SAMPLES[0]))
    for item in window.scene.block_items.values():
        assert item.cacheMode() == BlockItem.CacheMode.DeviceCoordinateCache
    window.scene.select_ids([], [next(iter(window.scene.wire_items))])
    assert all(isinstance(i, WireItem) for i in window.scene.selectedItems())


def test_drop_from_the_shelf_places_that_kind_at_the_drop_point(window):
    spec = window.shelf.spec(7)  # disturbance
    bid = window.scene.place_block(spec["kind"], QPointF(123, 47), spec["params"])
    blk = window.document.diagram.blocks[bid]
    assert (blk.kind, blk.params["role"], blk.name) == ("source", "disturbance", "d")
    assert (blk.layout["x"], blk.layout["y"]) == (120, 50)


def test_arrow_keys_nudge_the_selection_by_one_grid_step(shown, qtbot):
    doc = shown.document
    a = AddBlock(doc, "gain", layout={"x": 0, "y": 0})
    doc.push(a)
    shown.scene.select_ids([a.block_id])
    shown.view.setFocus()
    QTest.keyClick(shown.view, Qt.Key.Key_Right)
    QTest.keyClick(shown.view, Qt.Key.Key_Down, Qt.KeyboardModifier.ShiftModifier)
    lay = doc.diagram.blocks[a.block_id].layout
    assert (lay["x"], lay["y"]) == (10.0, 50.0)
    doc.undo_stack.undo()
    assert doc.diagram.blocks[a.block_id].layout["y"] == 0.0


def _drag_event(event_class, pos, *args):
    """A drag event at ``pos`` (QPointF): PySide6 6.12 takes a QPointF (its QPoint form is
    deprecated); 6.11 takes only a QPoint for the enter and move events."""
    try:
        return event_class(pos, *args)
    except TypeError:
        return event_class(pos.toPoint(), *args)


def test_dropping_a_shelf_entry_on_the_canvas_places_it_there(shown, qtbot):
    from PySide6.QtCore import QPointF as P
    from PySide6.QtGui import QDragEnterEvent, QDragMoveEvent, QDropEvent
    from PySide6.QtWidgets import QApplication

    md = shown.shelf.mimeData([shown.shelf.item(0)])  # plant
    vp = shown.view.viewport()
    shown.view.centerOn(0, 0)
    at = shown.view.mapFromScene(P(200, 100))
    pos = P(at)
    action = Qt.DropAction.CopyAction
    btn, mod = Qt.MouseButton.LeftButton, Qt.KeyboardModifier.NoModifier
    for event_class in (QDragEnterEvent, QDragMoveEvent, QDropEvent):
        QApplication.sendEvent(vp, _drag_event(event_class, pos, action, md, btn, mod))
    (blk,) = shown.document.diagram.blocks.values()
    assert blk.kind == "plant"
    assert (blk.layout["x"], blk.layout["y"]) == (200, 100)


def test_mirror_top_to_bottom_moves_a_junctions_second_input_to_the_top(window):
    doc = window.document
    s = AddBlock(doc, "sum", layout={"x": 0, "y": 0})
    doc.push(s)
    window.scene.select_ids([s.block_id])
    item = window.scene.block_items[s.block_id]
    assert item.port_scene_pos("in2", is_input=True).y() > 0
    window.actions_["flip_v"].trigger()
    assert item.port_scene_pos("in2", is_input=True).y() < 0
    assert item.port_scene_pos("out", is_input=False).x() > 0  # still flows left to right


def test_dragging_a_handle_of_a_selected_wire_moves_that_segment(shown, qtbot):
    shown.open_sample(str(SAMPLES[0]))
    shown.view.zoom_reset()
    d = shown.document.diagram
    w = d.wire_by_name("ufb")
    item = shown.scene.wire_items[w.id]
    shown.scene.select_ids([], [w.id])
    (j, k, mid), *_ = item._handles()
    shown.view.centerOn(mid)
    route = list(item.routes[j])
    horizontal = abs(route[k][1] - route[k + 1][1]) < 1e-9
    delta = QPointF(0, 40) if horizontal else QPointF(-40, 0)
    steps = shown.document.undo_stack.count()
    _drag(qtbot, shown.view, mid, mid + delta)
    assert shown.document.undo_stack.count() == steps + 1
    bends = d.wires[w.id].layout["bends"][str(j)]
    moved = item.routes[j]
    # The moved segment lands on the snap grid.
    if horizontal:
        assert moved[k][1] == pytest.approx(round((route[k][1] + 40) / 10) * 10)
    else:
        assert moved[k][0] == pytest.approx(round((route[k][0] - 40) / 10) * 10)
    assert [list(p) for p in moved[1:-1]] == bends
    shown.document.undo_stack.undo()
    assert item.routes[j] == route


def test_one_branch_of_a_fan_out_can_be_found_and_removed(window):
    window.open_sample(str(SAMPLES[0]))
    d = window.document.diagram
    w = d.wire_by_name("y")
    item = window.scene.wire_items[w.id]
    assert len(w.targets) >= 2
    last = item.routes[-1]
    (x0, y0), (x1, y1) = last[-2], last[-1]
    near_end = QPointF((x0 + x1) / 2, (y0 + y1) / 2)  # the last leg belongs to one branch only
    j = item.branch_at(near_end)
    assert j == len(w.targets) - 1
    target = w.targets[j]
    assert item.branch_at(QPointF(*item.routes[0][0])) is None  # the source end is shared
    assert window.scene.remove_branch(w.id, target)
    redrawn = window.scene.wire_items[w.id]
    assert target not in d.wires[w.id].targets and len(d.wires[w.id].targets) == len(redrawn.routes)
    window.document.undo_stack.undo()
    assert d.wires[w.id].targets[j] == target


def test_the_context_menu_offers_the_canvas_commands_and_the_branch_under_the_cursor(shown, qtbot):
    shown.open_sample(str(SAMPLES[0]))
    shown.view.zoom_reset()
    d = shown.document.diagram
    item = shown.scene.wire_items[d.wire_by_name("y").id]
    (x0, y0), (x1, y1) = item.routes[-1][-3], item.routes[-1][-2]
    at = QPointF((x0 + x1) / 2, (y0 + y1) / 2)
    shown.view.centerOn(at)
    menu = shown.view.build_context_menu(shown.view.mapFromScene(at))
    texts = [a.text() for a in menu.actions() if a.text()]
    assert texts[0].startswith("Remove the branch to ")
    assert any("Turn" in t for t in texts) and any("Delete" in t for t in texts)
    assert shown.scene.selected_wire_ids() == [item.wire_id]
    menu.actions()[0].trigger()
    assert len(d.wire_by_name("y").targets) == len(item.routes) - 1


from hypothesis import given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402


def _scene_matches_document(scene) -> None:
    d = scene.document.diagram
    assert set(scene.block_items) == set(d.blocks)
    assert set(scene.wire_items) == set(d.wires)
    for bid, item in scene.block_items.items():
        lay = d.blocks[bid].layout
        assert (item.pos().x(), item.pos().y()) == (float(lay["x"]), float(lay["y"]))
        assert item.block is d.blocks[bid]
    for wid, item in scene.wire_items.items():
        assert len(item.routes) == len(d.wires[wid].targets)
        assert item.label == d.wires[wid].name


@settings(max_examples=15, deadline=None)
@given(ops=st.lists(st.tuples(st.sampled_from(["add", "connect", "move", "turn", "delete", "paste", "undo", "redo"]),
                              st.integers(0, 40)), min_size=1, max_size=16))
def test_the_scene_mirrors_the_document_through_any_edits_undos_and_redos(qapp, ops):
    # Property (common practice, no source): views follow the model exactly.
    from loopwright.gui.canvas.scene import DiagramScene
    from loopwright.gui.document import Document
    from loopwright.gui.theme import theme_from_palette

    doc = Document()
    scene = DiagramScene(doc, theme_from_palette(dark=False))
    kinds = ["plant", "gain", "sum", "source", "integrator", "estimator"]
    for name, n in ops:
        if name == "undo":
            doc.undo_stack.undo()
        elif name == "redo":
            doc.undo_stack.redo()
        elif name == "add":
            apply_random_edit(doc, ("add", kinds[n % len(kinds)], 10 * n, -5 * n))
        elif name == "connect":
            apply_random_edit(doc, ("connect", n, n // 3))
        elif name in ("move", "turn", "delete", "paste"):
            apply_random_edit(doc, (name, n, n) if name == "move" else (name, n))
        _scene_matches_document(scene)


def test_a_loop_drawn_with_the_mouse_has_the_textbook_closed_loop_pole(shown, qtbot):
    """Place from the shelf, connect by dragging, set K in the inspector; then check the model.

    Reference: unity feedback of K / (s + 1) has its closed-loop pole at s = -(1 + K)
    (closed form, derived by hand); python-control computes the poles of the assembled model.
    """
    import control as ct

    from loopwright.engine.interconnect import assemble

    sc, view, doc = shown.scene, shown.view, shown.document
    view.zoom_reset()
    view.centerOn(200, 60)
    ids = {}
    for name, kind, x, y, params in (
        ("r", "source", 0, 0, None), ("e", "sum", 100, 0, None), ("K", "gain", 200, 0, None),
        ("P", "plant", 330, 0, None),
    ):
        ids[name] = sc.place_block(kind, QPointF(x, y), params)
    port = lambda b, p, inp: sc.block_items[ids[b]].port_scene_pos(p, is_input=inp)  # noqa: E731
    _drag(qtbot, view, port("r", "out", False), port("e", "in1", True))
    _drag(qtbot, view, port("e", "out", False), port("K", "in", True))
    _drag(qtbot, view, port("K", "out", False), port("P", "u", True))
    _drag(qtbot, view, port("P", "y", False), port("e", "in2", True))  # feedback into the bottom input
    assert len(doc.diagram.wires) == 4
    sc.select_ids([ids["K"]])
    shown.inspector.fields["K"].table.item(0, 0).setText("4")
    model = assemble(doc.diagram)
    poles = ct.ss(model.A, model.B, model.C, model.D).poles()
    assert sorted(poles.real) == pytest.approx([-5.0])
    assert abs(poles.imag).max() == pytest.approx(0.0)
    # The default junction signs are (+, -): negative feedback, as drawn.
    assert doc.diagram.blocks[ids["e"]].params["signs"] == ["+", "-"]


def test_hovering_a_port_rings_it(shown, qtbot):
    doc = shown.document
    a = AddBlock(doc, "gain", layout={"x": 0, "y": 0})
    doc.push(a)
    shown.view.zoom_reset()
    shown.view.centerOn(0, 0)
    from PySide6.QtCore import QEvent
    from PySide6.QtGui import QMouseEvent
    from PySide6.QtWidgets import QApplication

    port = shown.scene.block_items[a.block_id].port("out", is_input=False)
    vp = shown.view.viewport()

    def move_to(scene_pt):
        local = QPointF(shown.view.mapFromScene(scene_pt))
        ev = QMouseEvent(QEvent.Type.MouseMove, local, QPointF(vp.mapToGlobal(local.toPoint())),
                         Qt.MouseButton.NoButton, Qt.MouseButton.NoButton, Qt.KeyboardModifier.NoModifier)
        QApplication.sendEvent(vp, ev)

    move_to(port.scenePos())
    qtbot.waitUntil(lambda: port._target_state == 3, timeout=2000)
    move_to(QPointF(300, 300))
    qtbot.waitUntil(lambda: port._target_state == 0, timeout=2000)


def test_the_width_of_a_vector_wire_from_a_captioned_source_is_written_above_the_caption_line(window, wait_live):
    # The oven's set-point and its sensor-noise source have captions right below their
    # output port: the component count goes above the slash there, below it elsewhere.
    from loopwright.gui.canvas.glyphs import caption_rect
    from loopwright.gui.canvas.wire_item import width_label_rect

    window.open_sample(str(OVEN))
    wait_live(window)
    d = window.document.diagram
    sc = window.scene
    for signal in ("r", "v"):
        w = d.wire_by_name(signal)
        item = sc.wire_items[w.id]
        assert item._caption_below
        (x0, y0), (x1, y1) = item.routes[0][0], item.routes[0][1]
        n = max(abs(x1 - x0), abs(y1 - y0))
        ux, uy = (x1 - x0) / n, (y1 - y0) / n
        d0 = min(9.0, n / 2)
        rect = width_label_rect(x0 + ux * d0, y0 + uy * d0, ux, uy, caption_below=item._caption_below)
        src = sc.block_items[w.source.block]
        cap = src.mapRectToScene(caption_rect(d.blocks[w.source.block]))
        assert not rect.intersects(cap), signal
    assert not sc.wire_items[d.wire_by_name("uff").id]._caption_below  # a gain has no caption below its port


def test_a_parameter_only_edit_reroutes_no_wire_and_a_new_port_reroutes_the_blocks_wires(window, monkeypatch):
    # a gain's new matrix of the same shape leaves its body and ports where they were: its
    # wires keep their routes, lanes and names (rerouting them cost the window's thread
    # more than drawing the edit's answers); a junction given a third input grows a port,
    # and its wires are routed again
    import numpy as np

    from loopwright.gui.commands import SetParams

    window.open_sample(str(OVEN))
    doc, sc = window.document, window.scene
    routed = []
    real = WireItem.recompute
    monkeypatch.setattr(WireItem, "recompute", lambda item: (routed.append(item.wire_id), real(item))[1])
    k = doc.diagram.block_by_name("K")
    before = {wid: [list(r) for r in item.routes] for wid, item in sc.wire_items.items()}
    doc.push(SetParams(doc, k.id, dict(k.params, K=(1.5 * np.asarray(k.params["K"])).tolist())))
    assert routed == []
    assert {wid: [list(r) for r in item.routes] for wid, item in sc.wire_items.items()} == before
    doc.undo_stack.undo()
    assert routed == []
    err = doc.diagram.block_by_name("err")
    doc.push(SetParams(doc, err.id, dict(err.params, signs=["+", "-", "+"])))
    wires_of_err = {wid for wid, w in doc.diagram.wires.items()
                    if w.source.block == err.id or any(t.block == err.id for t in w.targets)}
    assert wires_of_err and set(routed) == wires_of_err
