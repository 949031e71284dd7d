"""The inspector: parameter editing through commands, matrix tables that follow the
dimensions, paste of spreadsheet text and numpy literals, refusals with the reason
(tests of gui/inspector.py)."""
from __future__ import annotations

import control as ct
import numpy as np
import pytest
from numpy.testing import assert_allclose
from PySide6.QtGui import QGuiApplication
from PySide6.QtWidgets import QComboBox, QLineEdit

from loopwright.engine.project import load
from loopwright.gui.commands import AddBlock
from loopwright.gui.inspector import Inspector, MatrixEditor, format_complex_list

from gui_helpers import SAMPLES

pytestmark = pytest.mark.qt


@pytest.fixture
def doc_and_inspector(qtbot):
    from loopwright.gui.document import Document

    doc = Document(load(SAMPLES[0]))
    insp = Inspector(doc)
    qtbot.addWidget(insp)
    return doc, insp


def _inspect_new_block(qtbot, kind: str):
    """A fresh document with one new block of ``kind``, shown in an inspector."""
    from loopwright.gui.document import Document

    doc = Document()
    cmd = AddBlock(doc, kind)
    doc.push(cmd)
    insp = Inspector(doc)
    qtbot.addWidget(insp)
    insp.show_block(cmd.block_id)
    return doc, insp, cmd


def _commit(edit: QLineEdit, text: str) -> None:
    edit.setText(text)
    edit.editingFinished.emit()


def test_matrix_editor_grows_and_shrinks_with_the_dimensions(qtbot):
    ed = MatrixEditor([[1.0, 2.0], [3.0, 4.0]], name="A")
    qtbot.addWidget(ed)
    seen = []
    ed.edited.connect(seen.append)
    ed.rows.setValue(3)
    assert seen[-1] == [[1.0, 2.0], [3.0, 4.0], [0.0, 0.0]]
    ed.cols.setValue(1)
    assert seen[-1] == [[1.0], [3.0], [0.0]]


@pytest.mark.parametrize(
    "text, expected, source",
    [
        ("1\t2\n3\t4\n", [[1.0, 2.0], [3.0, 4.0]], "spreadsheet copy: tab-separated cells (common practice, no source)"),
        ("np.array([[0, 1], [-2, -3]])", [[0.0, 1.0], [-2.0, -3.0]], "numpy literal"),
        ("[[1.5, -2e-3]]", [[1.5, -0.002]], "Python literal"),
        ("1, 2; 3, 4", [[1.0, 2.0], [3.0, 4.0]], "semicolon rows"),
    ],
)
def test_matrix_editor_pastes_spreadsheet_text_and_literals(qtbot, text, expected, source):
    ed = MatrixEditor([[0.0]], name="K")
    qtbot.addWidget(ed)
    assert ed.paste_text(text), source
    assert ed.value() == expected
    assert (ed.rows.value(), ed.cols.value()) == (len(expected), len(expected[0]))


def test_matrix_editor_refuses_a_bad_cell_with_its_position(qtbot):
    ed = MatrixEditor([[1.0, 2.0]], name="K")
    qtbot.addWidget(ed)
    seen = []
    ed.edited.connect(seen.append)
    ed.table.item(0, 1).setText("two")
    assert not seen
    assert "row 1, column 2" in ed.error.text() and not ed.error.isHidden()
    assert not ed.paste_text("1\t2\n3")
    assert "different lengths" in ed.error.text()


def test_editing_a_gain_in_the_table_pushes_one_command_and_undo_restores(doc_and_inspector):
    doc, insp = doc_and_inspector
    k = doc.diagram.block_by_name("K")
    insp.show_block(k.id)
    ed = insp.fields["K"]
    old = [row[:] for row in k.params["K"]]
    steps = doc.undo_stack.count()
    ed.table.item(0, 0).setText("12.5")
    assert doc.diagram.blocks[k.id].params["K"][0][0] == 12.5
    assert doc.undo_stack.count() == steps + 1
    doc.undo_stack.undo()
    assert doc.diagram.blocks[k.id].params["K"] == old


def test_sizes_are_set_once_and_every_matrix_follows_then_one_apply_is_one_step(doc_and_inspector):
    # Before: each matrix was checked against the stored others, so a new state count was
    # refused matrix by matrix with contradicting messages and never reached the history.
    doc, insp = doc_and_inspector
    p = doc.diagram.block_by_name("P")
    insp.show_block(p.id)
    ed = insp.model_editor
    before, steps = doc.snapshot(), doc.undo_stack.count()
    ed.sizes["states"].setValue(5)
    shapes = {k: (m.table.rowCount(), m.table.columnCount()) for k, m in ed.matrices.items()}
    assert shapes == {"A": (5, 5), "B": (5, 1), "C": (1, 5), "D": (1, 1), "E": (5, 1), "F": (1, 1)}
    assert doc.diagram == before  # a draft until applied
    assert "not applied" in ed.status.text() and ed.apply_button.isEnabled()
    ed.apply_button.click()
    params = doc.diagram.blocks[p.id].params
    assert np.shape(params["A"]) == (5, 5) and np.shape(params["E"]) == (5, 1)
    assert doc.undo_stack.count() == steps + 1
    doc.undo_stack.undo()
    assert doc.diagram == before


def _type(edit: QLineEdit, text: str) -> None:
    """Replace a line edit's text by typing it, as a user does."""
    from PySide6.QtTest import QTest

    edit.selectAll()
    QTest.keyClicks(edit, text)


def _shown_roots(line: str) -> list[complex]:
    """Numbers of a "poles: a, b ± cj" line, conjugate pairs expanded."""
    out = []
    for part in line.split(":", 1)[1].split(","):
        part = part.strip()
        if part == "none":
            continue
        if "±" in part:
            re_, im = part.split("±")
            out += [complex(float(re_), float(im.strip().rstrip("j"))), complex(float(re_), -float(im.strip().rstrip("j")))]
        else:
            out.append(complex(part.replace(" ", "")))
    return out


@pytest.mark.parametrize(
    "num, den",
    [("1, 3", "1, 3, 2"), ("2, 1", "1, 2, 5"), ("1, 0, 4", "1, 6, 11, 6.5")],
    ids=["real-poles", "complex-pair", "zeros-on-the-axis"],
)
def test_transfer_function_fields_show_poles_and_zeros(qtbot, num, den):
    # Reference: python-control 0.10.2 poles() and zeros() of num/den, compared with the
    # numbers the inspector shows at their printed precision (4 significant digits).
    doc, insp, cmd = _inspect_new_block(qtbot, "dynamic")
    ed = insp.model_editor
    _type(insp.fields["num"], num)
    _type(insp.fields["den"], den)
    ed.apply_button.click()
    blk = doc.diagram.blocks[cmd.block_id]
    nums, dens = [float(v) for v in num.split(",")], [float(v) for v in den.split(",")]
    assert blk.params == {"num": nums, "den": dens}
    poles_line, zeros_line = insp.fields["poles_zeros"].text().splitlines()
    assert poles_line.startswith("poles: ") and zeros_line.startswith("zeros: ")
    sys = ct.tf(nums, dens)
    for shown, ref in ((_shown_roots(poles_line), sys.poles()), (_shown_roots(zeros_line), sys.zeros())):
        assert len(shown) == len(ref)
        assert_allclose(np.sort_complex(np.array(shown)), np.sort_complex(ref), rtol=6e-4, atol=1e-12)


def test_a_bad_coefficient_is_named_in_the_draft_and_nothing_changes(qtbot):
    doc, insp, cmd = _inspect_new_block(qtbot, "dynamic")
    stored = dict(doc.diagram.blocks[cmd.block_id].params)
    ed = insp.model_editor
    _type(insp.fields["den"], "1, x")
    assert "'x' is not a finite number" in ed.status.text()
    assert not ed.apply_button.isEnabled()
    _type(insp.fields["den"], "0, 0")
    assert "den" in ed.status.text() and not ed.apply_button.isEnabled()
    ed.apply()
    assert doc.diagram.blocks[cmd.block_id].params == stored


def test_complex_lists_are_written_as_conjugate_pairs():
    assert format_complex_list(np.array([-1 + 2j, -1 - 2j, -3])) == "-1 ± 2j, -3"
    assert format_complex_list(np.array([])) == "none"


def test_source_role_waveform_and_intensity_are_edited(doc_and_inspector):
    doc, insp = doc_and_inspector
    n = doc.diagram.block_by_name("n")
    insp.show_block(n.id)
    role: QComboBox = insp.fields["role"]
    role.setCurrentText("disturbance")
    assert doc.diagram.blocks[n.id].params["role"] == "disturbance"
    insp.fields["waveform"].setCurrentText("white")
    assert doc.diagram.blocks[n.id].params["waveform"]["kind"] == "white"
    _commit(insp.fields["intensity"], "2.5e-6")
    assert doc.diagram.blocks[n.id].params["waveform"]["intensity"] == 2.5e-6
    _commit(insp.fields["intensity"], "-1")
    assert doc.diagram.blocks[n.id].params["waveform"]["intensity"] == 2.5e-6
    assert not insp.errors["intensity"].isHidden()


def test_estimator_link_can_switch_to_an_own_model_and_back(doc_and_inspector):
    doc, insp = doc_and_inspector
    est = doc.diagram.block_by_name("est")
    insp.show_block(est.id)
    link: QComboBox = insp.fields["plant"]
    link.setCurrentIndex(0)  # own model: the plant's matrices are copied in
    insp.model_editor.apply_button.click()
    params = doc.diagram.blocks[est.id].params
    assert "plant" not in params
    assert_allclose(params["A"], doc.diagram.block_by_name("P").params["A"])
    insp.fields["plant"].setCurrentIndex(insp.fields["plant"].findData("P"))
    insp.model_editor.apply_button.click()
    assert doc.diagram.blocks[est.id].params.get("plant") == "P"


def test_sum_signs_flip_and_inputs_are_added(doc_and_inspector):
    doc, insp = doc_and_inspector
    s = doc.diagram.block_by_name("err")
    insp.show_block(s.id)
    before = list(s.params["signs"])
    from PySide6.QtWidgets import QPushButton

    insp.findChild(QPushButton, "sign_1").click()
    assert doc.diagram.blocks[s.id].params["signs"][0] != before[0]
    insp.findChild(QPushButton, "sign_add").click()
    assert len(doc.diagram.blocks[s.id].params["signs"]) == len(before) + 1


def test_wire_page_renames_the_signal_and_refuses_a_taken_name(doc_and_inspector):
    doc, insp = doc_and_inspector
    u = doc.diagram.wire_by_name("u")
    insp.show_wire(u.id)
    _commit(insp.fields["signal"], "u_cmd")
    assert doc.diagram.wires[u.id].name == "u_cmd"
    _commit(insp.fields["signal"], "y")
    assert doc.diagram.wires[u.id].name == "u_cmd"
    assert "already carried" in insp.errors["signal"].text()


def test_paste_button_reads_the_system_clipboard(qtbot):
    ed = MatrixEditor([[0.0]], name="L")
    qtbot.addWidget(ed)
    QGuiApplication.clipboard().setText("0.5\n1.5")
    ed.paste_button.click()
    assert ed.value() == [[0.5], [1.5]]


def test_wire_page_shows_the_width_once_the_live_model_has_it(doc_and_inspector):
    doc, insp = doc_and_inspector
    u = doc.diagram.wire_by_name("xhat")
    insp.show_wire(u.id)
    assert insp.fields["width_info"].text().startswith("unknown")
    insp.set_live_widths({u.id: 4})
    assert insp.fields["width_info"].text() == "4"


def test_a_step_load_can_carry_a_random_part_and_lose_it_again(doc_and_inspector):
    doc, insp = doc_and_inspector
    dl = doc.diagram.block_by_name("dl")
    insp.show_block(dl.id)
    assert dl.params["waveform"]["kind"] != "white"
    _commit(insp.fields["intensity"], "0.02")
    assert doc.diagram.blocks[dl.id].params["intensity"] == 0.02
    _commit(insp.fields["intensity"], "")
    assert "intensity" not in doc.diagram.blocks[dl.id].params
    _commit(insp.fields["intensity"], "lots")
    assert "intensity" not in doc.diagram.blocks[dl.id].params
    assert not insp.errors["intensity"].isHidden()


def test_a_pasted_matrix_larger_than_usual_keeps_its_size(qtbot):
    ed = MatrixEditor([[0.0]], name="A")
    qtbot.addWidget(ed)
    text = "\n".join("\t".join("1" for _ in range(3)) for _ in range(250))
    assert ed.paste_text(text)
    assert (ed.rows.value(), len(ed.value())) == (250, 250)


def test_the_block_page_states_the_size_the_engine_reads(doc_and_inspector):
    doc, insp = doc_and_inspector
    p = doc.diagram.block_by_name("P")
    insp.show_block(p.id)
    # The conveyor plant: 4 states, torque input u and load input d, one measured angle.
    assert insp.fields["block_size"].text() == "4 states; inputs u: 1, d: 1; outputs y: 1"
    est = doc.diagram.block_by_name("est")
    insp.show_block(est.id)
    assert insp.fields["block_size"].text().startswith("4 states; inputs u: 1, y: 1; outputs xhat: 4, yhat: 1")


def test_a_designed_matrix_reads_rounded_but_untouched_cells_keep_their_exact_values(qtbot):
    # A gain designed by a solver carries float round-off (1009.999999994998 for 1010);
    # the table shows 10 significant digits and an edit of one cell leaves the others exact.
    exact = [[1009.999999994998], [328599.9999972232], [0.1234567890123]]
    ed = MatrixEditor(exact, name="L")
    qtbot.addWidget(ed)
    shown = [ed.table.item(i, 0).text() for i in range(3)]
    assert shown == ["1010", "328600", "0.123456789"]
    assert ed.table.item(0, 0).toolTip() == "1009.999999994998"
    assert ed.value() == exact
    seen = []
    ed.edited.connect(seen.append)
    ed.table.item(2, 0).setText("0.5")
    assert seen[-1] == [[1009.999999994998], [328599.9999972232], [0.5]]
    ed.table.item(0, 0).setText("1011")
    assert seen[-1][0] == [1011.0]
