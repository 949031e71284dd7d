"""The main window: live status, files, autosave and recovery, clipboard between windows,
shortcuts, the about box; and a screenshot of every sample (tests of gui/main_window.py)."""
from __future__ import annotations

import json

import pytest
from PySide6.QtGui import QKeySequence

from loopwright.engine import CAUTION
from loopwright.engine.check import summarize
from loopwright.engine.diagram import Diagram, PortRef
from loopwright.engine.project import dumps, load
from loopwright.gui.app import render_screenshot
from loopwright.gui.commands import AddBlock, Connect, SetParams
from loopwright.gui.main_window import sample_paths, status_text

from gui_helpers import SAMPLES, assert_same_transfer
from pictures import assert_canvas_drawn, outline_sides, paints, rgb_array

pytestmark = pytest.mark.qt


@pytest.mark.parametrize("path", SAMPLES, ids=[p.stem for p in SAMPLES])
def test_each_sample_opens_checks_and_is_photographed(make_window, wait_live, screenshot_dir, path):
    win = make_window()
    assert win.open_sample(str(path))
    result = wait_live(win)
    report = summarize(load(path))  # the engine's own summary of the file is the reference
    assert result.report is not None and result.report.states == report.states
    text = win._model_label.text()
    assert f"{report.states} states" in text
    assert ("· stable (0 right-half-plane poles)" in text) == report.stable
    assert "separation: poles match" in text  # each sample is an observer-based loop that separates
    out = screenshot_dir / f"{path.stem}.png"
    assert render_screenshot(win, out)
    from PySide6.QtGui import QImage

    pixels = rgb_array(QImage(str(out)))
    assert pixels.shape[:2] == (win.height(), win.width())
    assert_canvas_drawn(win, pixels)  # every block and wire drawn where the scene has it


@pytest.mark.parametrize(
    "den, rhp, origin, text",
    [
        # an open-loop plant 1/((s - 1)(s - 2)) has two poles in the right half-plane (by hand)
        ([1.0, -3.0, 2.0], 2, 0, "UNSTABLE: 2 right-half-plane poles"),
        # 1/s^2: two poles at the origin, none in the right half-plane (closed form)
        ([1.0, 0.0, 0.0], 0, 2, "not stable: 2 at the origin, 0 in the right half-plane"),
    ],
)
def test_status_bar_counts_right_half_plane_poles(window, wait_live, den, rhp, origin, text):
    doc = window.document
    r = AddBlock(doc, "source", layout={"x": 0, "y": 0})
    p = AddBlock(doc, "plant", layout={"x": 150, "y": 0})
    doc.push(r)
    doc.push(p)
    doc.push(SetParams(doc, p.block_id, {"num": [1.0], "den": den}))
    doc.push(Connect(doc, PortRef(r.block_id, "out"), PortRef(p.block_id, "u")))
    result = wait_live(window)
    assert result.report.rhp_poles == rhp and result.report.pole_classes.origin == origin
    assert text in window._model_label.text()


def test_problems_are_marked_on_the_canvas_and_listed_and_a_click_selects_the_culprit(window, wait_live, qtbot):
    doc = window.document
    # a gain (a rectangle): its top and bottom sides carry no port, so the outline shows there
    s = AddBlock(doc, "gain", layout={"x": 0, "y": 0})
    doc.push(s)
    result = wait_live(window)
    assert result.report is None and result.problems
    item = window.scene.block_items[s.block_id]
    assert item.problems and any(m in item.toolTip() for m in item.problems)
    theme = window.scene.theme
    # outlined in the problem colour (the side ports may cover the left and right midpoints)
    assert outline_sides(item, theme.problem) >= 2 and outline_sides(item, theme.block_border) <= 1
    assert window.problems.count() == len(result.problems)
    window.problems.itemClicked.emit(window.problems.item(0))
    assert window.scene.selected_block_ids() == [s.block_id]
    # A check may still be running when a loaded machine gets here ("checking…" first).
    qtbot.waitUntil(lambda: window._model_label.text().startswith("not assembled"), timeout=10000)


def test_opening_a_damaged_file_shows_the_engine_message_and_changes_nothing(window, dialogs, tmp_path):
    window.open_sample(str(SAMPLES[0]))
    before = window.document.snapshot()
    bad = tmp_path / "damaged.lwd"
    bad.write_text(dumps(load(SAMPLES[0]))[:300], encoding="utf-8")
    assert not window.open_path(str(bad))
    assert window.document.diagram == before
    assert dialogs.errors and "not valid JSON" in dialogs.errors[-1][1]


def test_opening_a_file_from_a_newer_version_is_refused_with_the_reason(window, dialogs, tmp_path):
    data = json.loads(dumps(load(SAMPLES[0])))
    data["version"] = 99
    newer = tmp_path / "newer.lwd"
    newer.write_text(json.dumps(data), encoding="utf-8")
    assert not window.open_path(str(newer))
    assert window.document.diagram == Diagram()
    assert "newer Loopwright" in dialogs.errors[-1][1]


def test_save_then_open_round_trips_and_records_a_recent_file(window, make_window, dialogs, tmp_path):
    window.open_sample(str(SAMPLES[1]))
    dialogs.save_as_answer = str(tmp_path / "mine.lwd")
    assert window.save()
    assert not window.document.is_dirty and window.document.path.endswith("mine.lwd")
    other = make_window()
    assert other.open_path(str(tmp_path / "mine.lwd"))
    assert other.document.diagram == window.document.diagram
    assert window.recent.paths()[0].endswith("mine.lwd")


def test_closing_with_unsaved_changes_asks_and_cancel_keeps_the_window(window, dialogs, qtbot):
    window.show()
    window.document.push(AddBlock(window.document, "gain"))
    dialogs.save_answer = "cancel"
    assert not window.close()
    assert dialogs.asked_save == 1 and window.isVisible()
    dialogs.save_answer = "discard"
    assert window.close()


def test_autosave_writes_when_dirty_and_a_new_start_offers_recovery(make_window, dialogs, prefs):
    crashed = make_window()
    crashed.open_sample(str(SAMPLES[2]))
    assert crashed.autosave_now() is None  # nothing unsaved yet
    crashed.document.push(AddBlock(crashed.document, "gain", layout={"x": 900, "y": 0}))
    written = crashed.autosave_now()
    assert written is not None and written.parent == prefs.autosave_dir
    expected = crashed.document.snapshot()
    # A crash: the window never closes cleanly, its autosave stays behind.
    fresh = make_window()
    assert fresh.offer_recovery()
    assert dialogs.asked_recover and "untitled" in dialogs.asked_recover[0]
    assert fresh.document.diagram == expected
    assert fresh.document.is_dirty
    assert not written.exists()


def test_declining_recovery_discards_the_leftover(make_window, dialogs, prefs):
    crashed = make_window()
    crashed.document.push(AddBlock(crashed.document, "gain"))
    written = crashed.autosave_now()
    dialogs.recover_answer = False
    fresh = make_window()
    assert not fresh.offer_recovery()
    assert fresh.document.diagram == Diagram() and not written.exists()


def test_autosave_timer_runs_at_the_configured_interval(make_window, prefs, qtbot):
    from dataclasses import replace

    win = make_window(prefs=replace(prefs, autosave_interval_s=0.05))
    win.document.push(AddBlock(win.document, "gain"))
    qtbot.waitUntil(lambda: win.autosaver.path.exists(), timeout=5000)


def test_copy_in_one_window_and_paste_in_another_gives_the_same_model(make_window):
    a, b = make_window(), make_window()
    a.open_sample(str(SAMPLES[0]))
    a.select_all()
    assert a.copy()
    pasted = b.paste()
    assert len(pasted) == len(a.document.diagram.blocks)
    assert_same_transfer(b.document.diagram, a.document.diagram)


def test_cut_removes_and_paste_brings_back_the_same_model(window):
    window.open_sample(str(SAMPLES[1]))
    before = window.document.snapshot()
    window.select_all()
    window.cut()
    assert not window.document.diagram.blocks
    window.paste()
    assert_same_transfer(window.document.diagram, before)


def test_standard_shortcuts_are_the_platforms(window):
    from PySide6.QtGui import QKeySequence as K

    SK = K.StandardKey
    for name, key in (("new", SK.New), ("open", SK.Open), ("save", SK.Save), ("undo", SK.Undo), ("redo", SK.Redo),
                      ("copy", SK.Copy), ("cut", SK.Cut), ("paste", SK.Paste), ("delete", SK.Delete),
                      ("select_all", SK.SelectAll), ("zoom_in", SK.ZoomIn), ("zoom_out", SK.ZoomOut)):
        assert window.actions_[name].shortcuts() == QKeySequence.keyBindings(key), name


def test_samples_menu_lists_every_bundled_sample_and_the_empty_canvas_says_how_to_start(window):
    labels = [a.text() for a in window.samples_menu.actions()]
    assert len(labels) == len(sample_paths()) == len(SAMPLES) >= 3
    assert "Open sample" in window.view.hint_text


def test_about_box_carries_the_caution(window, dialogs):
    window.show_about()
    assert CAUTION in dialogs.infos[-1][1]


def test_align_and_space_evenly_are_single_undo_steps(window):
    doc = window.document
    ids = []
    for x, y in ((0, 0), (130, 40), (400, -30)):
        cmd = AddBlock(doc, "gain", layout={"x": x, "y": y})
        doc.push(cmd)
        ids.append(cmd.block_id)
    window.scene.select_ids(ids)
    steps = doc.undo_stack.count()
    window.align("vcenter")
    assert [doc.diagram.blocks[b].layout["y"] for b in ids] == pytest.approx([10 / 3] * 3)
    window.distribute("h")
    assert [doc.diagram.blocks[b].layout["x"] for b in ids] == [0, 200, 400]
    assert doc.undo_stack.count() == steps + 2
    window.align("left")
    rects = [window.scene.block_items[b].body_scene_rect().left() for b in ids]
    assert max(rects) - min(rects) < 1e-9


def test_status_text_without_a_report_gives_the_reason():
    from loopwright.gui.workers import LiveResult

    assert status_text(None) == "checking…"
    assert "not assembled — boom" == status_text(LiveResult(revision=1, error="boom"))


def test_dark_canvas_follows_the_choice(window):
    window.set_theme_choice(True)
    assert window.scene.backgroundBrush().color().lightness() < 80
    window.set_theme_choice(False)
    assert window.scene.backgroundBrush().color().lightness() > 200


def test_paste_key_in_an_inspector_table_pastes_into_the_table_not_the_canvas(window, qtbot):
    from PySide6.QtGui import QGuiApplication
    from PySide6.QtTest import QTest

    window.show()
    qtbot.waitExposed(window)
    window.open_sample(str(SAMPLES[0]))
    d = window.document.diagram
    k = d.block_by_name("K")
    window.scene.select_ids([k.id])
    table = window.inspector.fields["K"].table
    table.setFocus()
    QGuiApplication.clipboard().setText("1\t2\t3\t4")
    blocks = len(d.blocks)
    QTest.keySequence(table, QKeySequence.StandardKey.Paste)
    assert len(window.document.diagram.blocks) == blocks
    assert window.document.diagram.blocks[k.id].params["K"] == [[1.0, 2.0, 3.0, 4.0]]
    # With the canvas focused the same key pastes blocks.
    window.activateWindow()
    window.view.setFocus()
    qtbot.waitUntil(window.view.hasFocus)
    window.scene.select_ids([k.id])
    QTest.keySequence(window.view, QKeySequence.StandardKey.Copy)
    QTest.keySequence(window.view, QKeySequence.StandardKey.Paste)
    assert len(window.document.diagram.blocks) == blocks + 1


def test_a_width_mismatch_marks_the_wire_with_the_engine_message(window, wait_live):
    doc = window.document
    r = AddBlock(doc, "source", params={"role": "reference", "width": 2, "waveform": {"kind": "zero"}}, layout={"x": 0, "y": 0})
    k = AddBlock(doc, "gain", layout={"x": 150, "y": 0})
    doc.push(r)
    doc.push(k)
    c = Connect(doc, PortRef(r.block_id, "out"), PortRef(k.block_id, "in"))
    doc.push(c)
    wait_live(window)
    wire = window.scene.wire_items[c.wire_id]
    assert any("has 2 signals" in m and "expects 1" in m for m in wire.problems)
    assert "has 2 signals" in wire.toolTip()
    assert wire.signal_width == 2
    theme = window.scene.theme
    assert paints(wire, theme.problem) and not paints(wire, theme.wire)  # drawn in the problem colour
    # Fix it: the mark goes away with the next live result.
    doc.push(SetParams(doc, k.block_id, {"K": [[1.0, 1.0]]}))
    wait_live(window)
    assert wire.problems == []
    assert paints(wire, theme.wire) and not paints(wire, theme.problem)


def test_history_panel_lists_each_edit_and_zoom_is_shown(window):
    window.document.push(AddBlock(window.document, "gain"))
    window.document.push(AddBlock(window.document, "plant"))
    model = window.history.model()
    assert model.rowCount() == 3  # the opened state plus two edits
    window.view.zoom_reset()
    window.view.zoom_in()
    assert window._zoom_label.text() == "120 %"


def test_status_text_shows_a_small_loops_poles(window, wait_live):
    # tests/REFERENCES.md#stage-observer: the stage loop's closed-loop poles are -2 +- 2j, -5, -6
    # (separation principle: eig(A - B K) with K = [8, 4], eig(A - L C) with L = [11, 30]).
    from diagrams import stage_loop_ref03

    window.document.replace_diagram(stage_loop_ref03())
    wait_live(window)
    assert window._model_label.text().endswith("poles: -6, -5, -2 ± 2j")

