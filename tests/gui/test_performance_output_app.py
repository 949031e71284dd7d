"""A plant's performance output in the app: the model editor's size and matrices (one
undoable Apply) and the canvas's second output port ``z``."""
from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from loopwright.engine.diagram import PortRef
from loopwright.engine.interconnect import assemble
from loopwright.engine.ports import output_ports
from loopwright.gui.commands import AddBlock, Connect
from loopwright.gui.document import Document
from loopwright.gui.inspector import Inspector

from gui_helpers import SAMPLES

pytestmark = pytest.mark.qt

CONVEYOR = next(p for p in SAMPLES if p.stem == "conveyor_flexible_drive")
# demo data: a carriage on a spring, position and speed; z is its position error
A = [[0.0, 1.0], [-4.0, -0.8]]
B = [[0.0], [2.0]]


def _fill(editor, rows) -> None:
    for i, row in enumerate(rows):
        for j, v in enumerate(row):
            editor.table.item(i, j).setText(str(v))


@pytest.fixture
def carriage(qtbot):
    """A document with a state-space plant fed by a reference, and the inspector on it."""
    doc = Document()
    insp = Inspector(doc)
    insp.resize(440, 1000)
    qtbot.addWidget(insp)
    src = AddBlock(doc, "source", name="r", params={"role": "reference", "width": 1})
    plant = AddBlock(doc, "plant", name="P", params={"A": A, "B": B, "C": [[1.0, 0.0]], "D": [[0.0]]})
    doc.push(src)
    doc.push(plant)
    doc.push(Connect(doc, PortRef(src.block_id, "out"), PortRef(plant.block_id, "u")))
    insp.show_block(plant.block_id)
    return doc, insp, plant.block_id


def test_a_performance_output_is_one_size_and_one_apply(carriage):
    doc, insp, bid = carriage
    ed = insp.model_editor
    assert ed.sizes["perf"].value() == 0
    assert not ed.matrices["Cz"].isVisibleTo(insp) and not ed.matrices["Dz"].isVisibleTo(insp)
    before, steps = doc.snapshot(), doc.undo_stack.count()
    ed.sizes["perf"].setValue(1)
    assert ed.matrices["Cz"].isVisibleTo(insp) and ed.matrices["Dz"].isVisibleTo(insp)
    assert not ed.matrices["Fz"].isVisibleTo(insp)  # no load input, so no load feedthrough
    shapes = {k: (ed.matrices[k].table.rowCount(), ed.matrices[k].table.columnCount()) for k in ("Cz", "Dz")}
    assert shapes == {"Cz": (1, 2), "Dz": (1, 1)}
    _fill(ed.matrices["Cz"], [[1.0, 0.0]])
    _fill(ed.matrices["Dz"], [[0.5]])
    assert doc.diagram == before  # a draft until applied
    assert ed.apply_button.isEnabled(), ed.status.text()
    ed.apply_button.click()
    assert doc.undo_stack.count() == steps + 1
    params = doc.diagram.blocks[bid].params
    assert params["Cz"] == [[1.0, 0.0]] and params["Dz"] == [[0.5]] and "Fz" not in params
    assert output_ports(doc.diagram.blocks[bid]) == ["y", "z"]
    # closed form: the DC gain of z = Cz (sI - A)^-1 B + Dz at s = 0 is Dz - Cz A^-1 B = 0.5 + 0.5
    model = assemble(doc.diagram)
    Am, Bm, Cm, Dm = model.pair("r", "P.z")
    assert_allclose(Dm - Cm @ np.linalg.solve(Am, Bm), [[0.5 - (np.array([[1.0, 0.0]]) @ np.linalg.solve(A, B))[0, 0]]], rtol=1e-12)
    doc.undo_stack.undo()
    assert doc.diagram == before


def test_growing_the_states_resizes_cz_and_load_inputs_bring_fz(carriage):
    doc, insp, bid = carriage
    ed = insp.model_editor
    ed.sizes["perf"].setValue(2)
    ed.sizes["states"].setValue(3)
    assert (ed.matrices["Cz"].table.rowCount(), ed.matrices["Cz"].table.columnCount()) == (2, 3)
    assert not ed.matrices["Fz"].isVisibleTo(insp)
    ed.sizes["loads"].setValue(1)
    assert ed.matrices["Fz"].isVisibleTo(insp)
    assert (ed.matrices["Fz"].table.rowCount(), ed.matrices["Fz"].table.columnCount()) == (2, 1)
    _fill(ed.matrices["A"], [[0, 1, 0], [-4, -0.8, 1], [0, 0, -5]])
    _fill(ed.matrices["B"], [[0], [2], [0]])
    _fill(ed.matrices["C"], [[1, 0, 0]])
    _fill(ed.matrices["E"], [[0], [0], [1]])
    _fill(ed.matrices["Cz"], [[1, 0, 0], [0, 0, 1]])
    _fill(ed.matrices["Fz"], [[0], [0.1]])
    steps = doc.undo_stack.count()
    ed.apply_button.click()
    assert doc.undo_stack.count() == steps + 1, ed.status.text()
    params = doc.diagram.blocks[bid].params
    assert params["Cz"] == [[1.0, 0.0, 0.0], [0.0, 0.0, 1.0]] and params["Fz"] == [[0.0], [0.1]]
    assert "Dz" not in params  # a zero Dz is left out, as the engine reads it


def test_the_sample_shows_its_shaft_twist_and_a_wired_z_is_not_dropped(qtbot):
    from loopwright.engine.project import load
    from loopwright.gui.commands import AddBlock as Add

    doc = Document(load(str(CONVEYOR)))
    insp = Inspector(doc)
    qtbot.addWidget(insp)
    P = doc.diagram.block_by_name("P")
    insp.show_block(P.id)
    ed = insp.model_editor
    assert ed.sizes["perf"].value() == 1
    assert ed.matrices["Cz"].value() == [[1.0, 0.0, -1.0, 0.0]]
    assert ed.performance_note.isVisibleTo(insp)
    watch = Add(doc, "gain", name="watch", params={"K": [[1.0]]})
    doc.push(watch)
    doc.push(Connect(doc, PortRef(P.id, "z"), PortRef(watch.block_id, "in")))
    insp.show_block(P.id)
    ed = insp.model_editor
    ed.sizes["perf"].setValue(0)
    assert not ed.apply_button.isEnabled()
    assert "port z carries wire" in ed.status.text()
    assert doc.diagram.blocks[P.id].params["Cz"] == [[1.0, 0.0, -1.0, 0.0]]


def test_the_canvas_draws_a_second_output_port_z_below_y(window):
    window.open_sample(str(CONVEYOR))
    d = window.document.diagram
    P = d.block_by_name("P")
    item = window.scene.block_items[P.id]
    y_port, z_port = item.port("y", is_input=False), item.port("z", is_input=False)
    assert y_port is not None and z_port is not None
    assert z_port.pos().y() > y_port.pos().y() and z_port.pos().x() == y_port.pos().x()
    assert "performance output" in z_port.toolTip() and "performance output" not in y_port.toolTip()
    params = dict(P.params)
    params.pop("Cz")
    from loopwright.gui.commands import SetParams

    window.document.push(SetParams(window.document, P.id, params))
    assert window.scene.block_items[P.id].port("z", is_input=False) is None
    window.document.undo_stack.undo()
    assert window.scene.block_items[P.id].port("z", is_input=False) is not None
