"""Pairs picked on the canvas and the frequency view (tests of gui/docks/pairs.py,
gui/docks/frequency.py, gui/view_commands.py): the curves read back from the plot items
equal the engine's numbers, and python-control's."""
from __future__ import annotations

import control as ct
import numpy as np
import pytest
from numpy.testing import assert_allclose

from loopwright.engine.interconnect import assemble
from loopwright.engine.project import load
from loopwright.engine.views_data import pair_frequency_response
from loopwright.gui.commands import SetParams
from loopwright.gui.view_commands import pairs_of

from gui_helpers import SAMPLES

pytestmark = pytest.mark.qt

CONVEYOR = next(p for p in SAMPLES if p.stem == "conveyor_flexible_drive")


@pytest.fixture
def wait_views(qtbot):
    def _wait(win, timeout=20000):
        qtbot.waitUntil(lambda: win.views.is_idle() and win.live.is_current(), timeout=timeout)

    return _wait


def _wire(win, name):
    return next(w for w in win.document.diagram.wires.values() if w.name == name)


def _block(win, name):
    return next(b for b in win.document.diagram.blocks.values() if b.name == name)


def _menu_texts(win, kind, item_id, target=None):
    return [t for t, _slot in win.picker.actions_for(kind, item_id, target)]


def _pick(win, kind, item_id, starts_with, target=None):
    for text, slot in win.picker.actions_for(kind, item_id, target):
        if text.startswith(starts_with):
            slot()
            return
    raise AssertionError(f"no {starts_with!r} in {_menu_texts(win, kind, item_id, target)}")


def test_context_menu_picks_make_the_expected_pairs_and_tags(window, wait_views):
    win = window
    win.show()
    assert win.open_sample(str(CONVEYOR))
    y, u = _wire(win, "y"), _wire(win, "u")
    texts = _menu_texts(win, "wire", y.id)
    assert texts[:3] == ["Look here (y)", "Inject here (y)", "Break the loop here (y)"]
    assert _menu_texts(win, "block", _block(win, "r").id) == ["Drive from here"]
    assert _menu_texts(win, "block", _block(win, "P").id) == []
    _pick(win, "wire", y.id, "Look here")
    assert win.scene.wire_items[y.id].tags == ["out ?"]
    _pick(win, "block", _block(win, "r").id, "Drive from here")
    _pick(win, "wire", u.id, "Inject here")
    _pick(win, "wire", _wire(win, "ufb").id, "Look here")
    assert pairs_of(win.document.diagram) == [("r", "y"), ("inject:u", "ufb")]
    win.picker.refresh_tags()
    assert win.scene.block_items[_block(win, "r").id].tags == ["in 1"]
    assert "out 1" in win.scene.wire_items[y.id].tags
    assert "in 2" in win.scene.wire_items[u.id].tags
    # a branch of a fanned-out wire breaks only that consumer
    _pick(win, "wire", y.id, "Break the loop here")
    assert win.document.diagram.settings["loop_break"] == "y"
    p_u = next(t for t in u.targets if win.document.diagram.blocks[t.block].name == "P")
    _pick(win, "wire", u.id, "Break the loop here", target=p_u)
    assert win.document.diagram.settings["loop_break"] == "P.u"
    win.picker.refresh_tags()
    assert "break → P.u" in win.scene.wire_items[u.id].tags
    # every pick is one undoable step, saved in the diagram's settings
    win.document.undo_stack.undo()
    assert win.document.diagram.settings["loop_break"] == "y"
    win.document.undo_stack.undo()
    win.document.undo_stack.undo()
    assert pairs_of(win.document.diagram) == [("r", "y")]


def test_pairs_panel_keeps_a_typed_pair_and_removes_it(window):
    win = window
    win.show()
    assert win.open_sample(str(CONVEYOR))
    panel = win.pairs_panel
    panel.refresh()
    panel.input_box.setCurrentText("dl")
    panel.output_box.setCurrentText("y")
    panel.keep_button.click()
    assert pairs_of(win.document.diagram) == [("dl", "y")]
    panel.refresh()
    assert panel.list.count() == 1 and "y ← source dl" in panel.list.item(0).text()
    panel.input_box.setCurrentText("nosuch")
    panel.keep_button.click()
    assert pairs_of(win.document.diagram) == [("dl", "y")]
    panel.list.setCurrentRow(0)
    panel.remove_button.click()
    assert pairs_of(win.document.diagram) == []
    panel.break_box.setCurrentText("y")
    panel.break_button.click()
    assert win.document.diagram.settings["loop_break"] == "y"


def test_frequency_view_shows_the_engines_numbers_and_the_peak(window, wait_views):
    win = window
    win.show()
    assert win.open_sample(str(CONVEYOR))
    win.picker.pick_input("dl")
    win.picker.pick_output("y")
    win.picker.pick_input("r")
    win.picker.pick_output("y")
    wait_views(win)
    panel = win.panels["frequency"]
    model = assemble(load(CONVEYOR))
    for pair in (("dl", "y"), ("r", "y")):
        ref = pair_frequency_response(model, *pair, drawing=True)
        cm, cp = panel.curves[(pair, 0, 0)]
        x, mag = cm.getOriginalDataset()
        _, ph = cp.getOriginalDataset()
        assert_allclose(x, ref.w_rad_s)
        assert_allclose(mag, ref.mag_db[:, 0, 0], rtol=1e-9)
        assert_allclose(ph, ref.phase_deg[:, 0, 0], rtol=1e-9)
        # python-control's magnitude at the same frequencies (outside reference)
        sys = ct.ss(*model.pair(*pair))
        assert_allclose(mag, 20 * np.log10(np.abs(np.asarray(sys(1j * x, squeeze=False))[0, 0])), rtol=1e-6)
        w_pk, db_pk = panel.peak_markers()[pair]
        assert (w_pk, db_pk) == pytest.approx(ref.peak())
    # the disturbance path peaks near its lightly damped coupling; its marker is the largest point
    assert panel.peak_markers()[("dl", "y")][1] == pytest.approx(np.max(panel.curves[(("dl", "y"), 0, 0)][0].getOriginalDataset()[1]))
    # Hz shows the same curve at w / 2 pi; the cursor reads the values of every pair
    panel.unit.setCurrentIndex(1)
    x_hz, _ = panel.curves[(("r", "y"), 0, 0)][0].getOriginalDataset()
    assert_allclose(x_hz, pair_frequency_response(model, "r", "y", drawing=True).w_rad_s / (2 * np.pi))
    panel.set_cursor_frequency(1.0)
    text = panel.readout.text()
    assert "1 Hz" in text and text.count("dB") == 2


def test_frequency_view_follows_an_edit_and_pair_colours_match_across_views(window, wait_views):
    win = window
    win.show()
    assert win.open_sample(str(CONVEYOR))
    win.picker.pick_input("r")
    win.picker.pick_output("y")
    win.picker.pick_input("dl")
    win.picker.pick_output("y")
    wait_views(win)
    freq, time = win.panels["frequency"], win.panels["time"]
    colours = [freq.curves[(p, 0, 0)][0].opts["pen"].color().name() for p in (("r", "y"), ("dl", "y"))]
    assert colours[0] != colours[1]
    assert [time.curves[(p, "y")].opts["pen"].color().name() for p in (("r", "y"), ("dl", "y"))] == colours
    tags = {t.text: t.colour.name() for t in win.scene.block_items[_block(win, "r").id]._tags}
    assert tags["in 1"] == colours[0]
    assert win.pairs_panel.list.item(1).icon().pixmap(8, 8).toImage().pixelColor(4, 4).name() == colours[1]
    # an edit of the gain N changes r -> y: the view follows with the engine's new numbers
    n = _block(win, "N")
    before = freq.curves[(("r", "y"), 0, 0)][0].getOriginalDataset()[1].copy()
    params = dict(n.params)
    params["K"] = [[2.0 * float(np.asarray(n.params["K"]).ravel()[0])]]
    win.document.push(SetParams(win.document, n.id, params))
    wait_views(win)
    after = freq.curves[(("r", "y"), 0, 0)][0].getOriginalDataset()[1]
    ref = pair_frequency_response(assemble(win.document.snapshot()), "r", "y", drawing=True)
    assert_allclose(after, ref.mag_db[:, 0, 0], rtol=1e-9)
    assert after[0] == pytest.approx(before[0] + 20 * np.log10(2.0), abs=1e-6)
