"""A block's model edited as one thing (tests of gui/model_editor.py through the inspector):
sizes once, a draft until consistent, one undoable Apply, drafts kept, the realisation of a
transfer function shown, and the state order stated where K and L are edited."""
from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from PySide6.QtTest import QTest

from loopwright.engine.diagram import PortRef
from loopwright.engine.interconnect import assemble
from loopwright.gui.commands import AddBlock, Connect
from loopwright.gui.document import Document
from loopwright.gui.inspector import Inspector

from diagrams import stage_loop_ref03

pytestmark = pytest.mark.qt

# tests/REFERENCES.md#stage-observer (positioning stage, demo data): A = [[0, 1], [0, 0]], B = [0, 1]',
# C = [1, 0], K = [8, 4] (the gain block holds -K), L = [11, 30]; closed-loop poles by the
# separation principle: eig(A - B K) = -2 +- 2j, eig(A - L C) = -5, -6.
STAGE_POLES = [-6, -5, -2 - 2j, -2 + 2j]


@pytest.fixture
def stage(qtbot):
    """An empty document, the inspector, and the stage loop's blocks placed and wired
    with their default parameters (as the shelf and the canvas give them)."""
    doc = Document()
    insp = Inspector(doc)
    insp.resize(440, 900)
    qtbot.addWidget(insp)
    ids = {}
    for kind, name in (("source", "d"), ("plant", "P"), ("estimator", "est"), ("gain", "Kx"), ("sum", "up")):
        cmd = AddBlock(doc, kind, name=name, params={"role": "disturbance", "width": 1} if kind == "source" else None)
        doc.push(cmd)
        ids[name] = cmd.block_id
    for src, dst in (("est.xhat", "Kx.in"), ("Kx.out", "up.in1"), ("d.out", "up.in2"), ("up.out", "P.u"),
                     ("P.y", "est.y"), ("Kx.out", "est.u")):
        (a, pa), (b, pb) = src.split("."), dst.split(".")
        doc.push(Connect(doc, PortRef(ids[a], pa), PortRef(ids[b], pb)))
    return doc, insp, ids


def _fill(editor, rows) -> None:
    for i, row in enumerate(rows):
        for j, v in enumerate(row):
            editor.table.item(i, j).setText(str(v))


def _type(edit, text: str) -> None:
    edit.selectAll()
    QTest.keyClicks(edit, text)


def _enter_state_space_plant(insp, bid) -> None:
    insp.show_block(bid)
    ed = insp.model_editor
    ed.choice.setCurrentIndex(ed.choice.findData("ss"))
    ed.sizes["states"].setValue(2)
    _fill(ed.matrices["A"], [[0, 1], [0, 0]])
    _fill(ed.matrices["B"], [[0], [1]])
    _fill(ed.matrices["C"], [[1, 0]])
    _fill(ed.matrices["D"], [[0]])
    assert ed.apply_button.isEnabled(), ed.status.text()
    ed.apply_button.click()


def _link_estimator_and_set_gains(insp, ids) -> None:
    insp.show_block(ids["est"])
    ed = insp.model_editor
    ed.choice.setCurrentIndex(ed.choice.findData("P"))
    L = ed.matrices["L"]
    assert (L.table.rowCount(), L.table.columnCount()) == (2, 1)  # follows the linked plant
    _fill(L, [[11], [30]])
    ed.apply_button.click()
    insp.show_block(ids["Kx"])
    K = insp.fields["K"]
    K.cols.setValue(2)
    _fill(K, [[-8, -4]])


def _sorted_poles(diagram):
    return sorted(np.linalg.eigvals(assemble(diagram).A), key=lambda z: (round(z.real, 6), z.imag))


def test_the_stage_loop_entered_in_the_inspector_has_the_designed_poles(stage):
    doc, insp, ids = stage
    _enter_state_space_plant(insp, ids["P"])
    _link_estimator_and_set_gains(insp, ids)
    assert_allclose(_sorted_poles(doc.diagram), STAGE_POLES, atol=1e-8)
    # the same model as the one built with the Python API
    ref = assemble(stage_loop_ref03())
    model = assemble(doc.diagram)
    assert_allclose(np.sort_complex(np.linalg.eigvals(model.A)), np.sort_complex(np.linalg.eigvals(ref.A)), atol=1e-9)
    assert model.state_names == ref.state_names


def test_the_stage_plant_as_1_over_s2_keeps_the_designed_poles_and_states_its_order(stage):
    doc, insp, ids = stage
    insp.show_block(ids["P"])
    ed = insp.model_editor
    _type(ed.num, "1")
    _type(ed.den, "1, 0, 0")
    # the realisation, read-only beside the coefficients: position first (closed form:
    # y'' = u with x1 = y, x2 = dy/dt)
    assert ed.realization.isVisibleTo(insp)
    assert ed.realization_mats["A"].value() == [[0.0, 1.0], [0.0, 0.0]]
    assert ed.realization_mats["B"].value() == [[0.0], [1.0]]
    assert ed.realization_mats["C"].value() == [[1.0, 0.0]]
    assert "P.x1 = y, P.x2 = dy/dt" in ed.realization_states.text()
    ed.apply_button.click()
    _link_estimator_and_set_gains(insp, ids)
    assert "K multiplies the estimate of P's states: P.x1 = y, P.x2 = dy/dt" == insp.fields["k_order"].text()
    insp.show_block(ids["est"])
    assert "P.x1 = y, P.x2 = dy/dt" in insp.model_editor.l_order.text()
    assert_allclose(_sorted_poles(doc.diagram), STAGE_POLES, atol=1e-8)


def test_linking_an_estimator_to_a_larger_plant_is_one_step(stage):
    # Before: L was checked against the stored model, so linking a 1-state estimator to a
    # 2-state plant was refused until L had 2 rows, and L could not get 2 rows until linked.
    doc, insp, ids = stage
    _enter_state_space_plant(insp, ids["P"])
    insp.show_block(ids["est"])
    ed = insp.model_editor
    steps = doc.undo_stack.count()
    ed.choice.setCurrentIndex(ed.choice.findData("P"))
    assert ed.apply_button.isEnabled(), ed.status.text()
    ed.apply_button.click()
    params = doc.diagram.blocks[ids["est"]].params
    assert params["plant"] == "P" and np.shape(params["L"]) == (2, 1)
    assert doc.undo_stack.count() == steps + 1


def test_an_unapplied_draft_is_kept_when_another_block_is_selected(stage):
    doc, insp, ids = stage
    insp.show_block(ids["P"])
    ed = insp.model_editor
    ed.choice.setCurrentIndex(ed.choice.findData("ss"))
    ed.sizes["states"].setValue(3)
    stored = dict(doc.diagram.blocks[ids["P"]].params)
    insp.show_block(ids["Kx"])
    assert insp.pending_drafts() == ["P"]
    insp.show_block(ids["P"])
    ed = insp.model_editor
    assert ed.sizes["states"].value() == 3
    assert "Unapplied draft kept" in ed.status.text()
    assert doc.diagram.blocks[ids["P"]].params == stored
    ed.revert_button.click()
    assert insp.pending_drafts() == []
    assert insp.model_editor.choice.currentData() == "tf"


def test_a_draft_survives_an_undo_of_another_edit(stage):
    doc, insp, ids = stage
    insp.show_block(ids["P"])
    ed = insp.model_editor
    ed.choice.setCurrentIndex(ed.choice.findData("ss"))
    ed.sizes["states"].setValue(2)
    doc.undo_stack.undo()  # the last wire goes; the plant page redraws
    insp.show_block(ids["P"])
    assert insp.model_editor.sizes["states"].value() == 2


def test_load_inputs_follow_the_sizes(stage):
    doc, insp, ids = stage
    _enter_state_space_plant(insp, ids["P"])
    insp.show_block(ids["P"])
    ed = insp.model_editor
    assert not ed.matrices["E"].isVisibleTo(insp)
    ed.sizes["loads"].setValue(1)
    assert ed.matrices["E"].isVisibleTo(insp)
    assert (ed.matrices["E"].table.rowCount(), ed.matrices["F"].table.rowCount()) == (2, 1)
    _fill(ed.matrices["E"], [[0], [2]])
    ed.apply_button.click()
    params = doc.diagram.blocks[ids["P"]].params
    assert params["E"] == [[0.0], [2.0]] and "F" not in params  # a zero F is left out, as the engine reads it
    from loopwright.engine.ports import input_ports

    assert input_ports(doc.diagram.blocks[ids["P"]]) == ["u", "d"]


def test_pasting_a_larger_a_resizes_every_matrix(stage):
    doc, insp, ids = stage
    _enter_state_space_plant(insp, ids["P"])
    insp.show_block(ids["P"])
    ed = insp.model_editor
    assert ed.matrices["A"].paste_text("[[0, 1, 0], [0, 0, 1], [0, 0, 0]]")
    assert ed.sizes["states"].value() == 3
    assert (ed.matrices["B"].table.rowCount(), ed.matrices["C"].table.columnCount()) == (3, 3)


def test_a_hand_edit_of_a_designed_gain_drops_the_designed_note(stage):
    doc, insp, ids = stage
    from loopwright.gui.commands import SetParams

    doc.push(SetParams(doc, ids["Kx"], {"K": [[-8.0]], "recipe": {"method": "place", "plant": "P", "poles": [-2]}}))
    insp.show_block(ids["Kx"])
    assert insp.fields["designed_note"].isVisibleTo(insp)
    _fill(insp.fields["K"], [[-9]])
    assert "recipe" not in doc.diagram.blocks[ids["Kx"]].params
    assert not insp.fields["designed_note"].isVisibleTo(insp)
    doc.undo_stack.undo()
    assert "recipe" in doc.diagram.blocks[ids["Kx"]].params


def test_screenshots_of_a_three_state_plant_and_a_transfer_function(stage, screenshot_dir, qtbot):
    doc, insp, ids = stage
    insp.show_block(ids["P"])
    ed = insp.model_editor
    ed.choice.setCurrentIndex(ed.choice.findData("ss"))
    assert ed.matrices["A"].paste_text("[[0, 1, 0], [-4000, -2, 20], [0, -800, -40]]")
    _fill(ed.matrices["B"], [[0], [0], [20]])
    _fill(ed.matrices["C"], [[1, 0, 0]])
    ed.apply_button.click()
    insp.show()
    out = screenshot_dir / "inspector_three_state_plant.png"
    shown = insp.model_editor.matrices  # the editor as the inspector shows it after applying
    _assert_every_cell_drawn(qtbot, insp, out, shown, {"A": (3, 3), "B": (3, 1), "C": (1, 3), "D": (1, 1)})
    insp.show_block(ids["d"])
    cmd = AddBlock(doc, "dynamic", name="C1")
    doc.push(cmd)
    insp.show_block(cmd.block_id)
    _type(insp.model_editor.num, "1")
    _type(insp.model_editor.den, "1, 0, 0")
    insp.model_editor.apply_button.click()
    out = screenshot_dir / "inspector_transfer_function_realization.png"
    # 1/s^2 has two states (closed form: a double integrator), so A is 2x2 and B 2x1.
    _assert_every_cell_drawn(qtbot, insp, out, insp.model_editor.realization_mats, {"A": (2, 2), "B": (2, 1), "C": (1, 2), "D": (1, 1)})


def _assert_every_cell_drawn(qtbot, insp, out, editors, shapes) -> None:
    """Save a picture of the inspector and check that every cell of each matrix shows its
    number: the cell lies inside its table's visible area and holds dark text pixels."""
    from PySide6.QtGui import QImage

    from pictures import rgb_array

    # The nested layouts pass a table's new height up one level per event-loop turn; the
    # stand-alone inspector can take a few turns (in the main window's dock it is at once).
    qtbot.waitUntil(lambda: all(ed.height() >= ed.table.height() for ed in editors.values()), timeout=3000)
    insp.grab().save(str(out))
    pixels = rgb_array(QImage(str(out)))
    assert pixels.shape[:2] == (insp.height(), insp.width())
    dark = pixels[..., :3].max(axis=-1) < 110  # text ink on a light cell
    for key, (n, m) in shapes.items():
        table = editors[key].table
        assert (table.rowCount(), table.columnCount()) == (n, m), key
        view = table.viewport()
        for i in range(n):
            for j in range(m):
                cell = table.visualItemRect(table.item(i, j))
                assert table.isVisibleTo(insp) and view.rect().contains(cell), f"{key}[{i}, {j}] is cut off: {cell} outside {view.rect()}"
                top_left = view.mapTo(insp, cell.topLeft())
                x, y = top_left.x(), top_left.y()
                assert dark[y + 2:y + cell.height() - 2, x + 2:x + cell.width() - 2].sum() >= 3, f"{key}[{i}, {j}] shows no number"


def test_closing_with_an_unapplied_draft_asks_first(window, dialogs):
    doc = window.document
    cmd = AddBlock(doc, "plant", name="P")
    doc.push(cmd)
    doc.undo_stack.setClean()  # saved: only the draft is unsaved work
    window.inspector.show_block(cmd.block_id)
    ed = window.inspector.model_editor
    ed.choice.setCurrentIndex(ed.choice.findData("ss"))
    dialogs.save_answer = "cancel"
    assert not window._confirm_discard()
    assert dialogs.asked_save == 1


@pytest.mark.parametrize("path", __import__("gui_helpers").SAMPLES, ids=lambda p: p.stem)
def test_a_stored_model_opens_as_it_is_not_as_a_draft(qtbot, path):
    from loopwright.engine.project import load

    doc = Document(load(path))
    insp = Inspector(doc)
    qtbot.addWidget(insp)
    for blk in doc.diagram.blocks.values():
        if blk.kind in ("plant", "dynamic", "estimator"):
            insp.show_block(blk.id)
            assert not insp.model_editor.is_draft(), blk.name
            assert insp.model_editor.draft_params() == blk.params
    assert insp.pending_drafts() == []
