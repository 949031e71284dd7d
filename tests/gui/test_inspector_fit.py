"""The inspector fits its dock: at the default window size and in an 800x600 window (its
panels shown again from the View menu) no field is wider than the panel, no matrix table is
squeezed under its rows, no wrapped note is cut, and a matrix keeps no empty band for a
scroll bar it does not need (such bands pushed the model's Apply button out of sight)."""
from __future__ import annotations

import pytest
from PySide6.QtWidgets import QLabel

from loopwright.engine.diagram import Diagram
from loopwright.gui.matrix_table import MatrixEditor

pytestmark = pytest.mark.qt

STAGE = {"A": [[0, 1], [0, 0]], "B": [[0], [1]], "C": [[1, 0]], "D": [[0]]}  # demo data: a positioning stage


def _diagram() -> Diagram:
    d = Diagram()
    d.add_block("plant", "P", dict(STAGE), layout={"x": 0, "y": 0})
    d.add_block("plant", "G", {"num": [1.0], "den": [1.0, 0.0, 0.0]}, layout={"x": 200, "y": 0})
    d.add_block("estimator", "est", {"plant": "P", "L": [[11], [30]]}, layout={"x": 0, "y": 150})
    d.add_block("estimator", "own", {**STAGE, "L": [[11], [30]]}, layout={"x": 200, "y": 150})
    d.add_block("gain", "K", {"K": [[-8, -4]]}, layout={"x": 0, "y": 300})
    d.add_block("dynamic", "F", {"num": [100.0], "den": [1.0, 14.0, 100.0]}, layout={"x": 200, "y": 300})
    return d


def _settle(qtbot, window) -> None:
    qtbot.waitUntil(window.live.is_current, timeout=10000)  # its result may redraw the inspector
    qtbot.wait(50)


def _nothing_squeezed(page) -> None:
    for m in [m for m in page.findChildren(MatrixEditor) if m.isVisible()]:
        assert m.height() >= m.minimumSizeHint().height(), m.objectName()
        t = m.table
        assert t.viewport().height() >= sum(t.rowHeight(i) for i in range(t.rowCount())), m.objectName()
    for label in page.findChildren(QLabel):
        if label.isVisible() and label.wordWrap() and label.text():
            assert label.height() >= label.heightForWidth(label.width()), label.text()


@pytest.mark.parametrize("size", [None, (800, 600)], ids=["default-size", "800x600"])
@pytest.mark.parametrize("name", ["P", "G", "est", "own", "K", "F"])
def test_the_inspector_fits_its_panel(window, qtbot, size, name):
    from test_dock_layout import show_at

    show_at(window, qtbot, size)
    window.document.replace_diagram(_diagram())
    window.inspector.show_block(window.document.diagram.block_by_name(name).id)
    _settle(qtbot, window)
    scroll = window.inspector._scroll
    page = scroll.widget()
    assert page.minimumSizeHint().width() <= scroll.viewport().width()
    assert [m for m in page.findChildren(MatrixEditor) if m.isVisible()]
    # the layout settles within a few passes of the event loop
    qtbot.waitUntil(lambda: _nothing_squeezed(page), timeout=2000)


def test_a_matrix_keeps_room_for_a_scroll_bar_only_when_its_columns_overflow(qtbot):
    narrow = MatrixEditor([[0.0, 1.0], [0.0, 0.0]], name="A")
    wide = MatrixEditor([[123456.789] * 12], name="K")
    for m in (narrow, wide):
        qtbot.addWidget(m)
        m.resize(300, 200)
        m.show()
    qtbot.waitExposed(wide)
    assert not narrow.needs_scroll_room() and wide.needs_scroll_room()
    t = narrow.table
    band = t.height() - t.horizontalHeader().height() - sum(t.rowHeight(i) for i in range(2)) - 2 * t.frameWidth()
    assert band < t.horizontalScrollBar().sizeHint().height()
    w = wide.table
    assert w.height() - w.horizontalHeader().height() - w.rowHeight(0) - 2 * w.frameWidth() >= w.horizontalScrollBar().sizeHint().height()


@pytest.mark.parametrize("size", [None, (800, 600)], ids=["default-size", "800x600"])
def test_linking_an_estimator_leaves_nothing_cut(window, qtbot, size):
    # own model -> plant P in the "model of" box: rows hide, notes are rewritten, L grows to 2x1
    from test_dock_layout import show_at

    show_at(window, qtbot, size)
    d = _diagram()
    d.blocks[d.block_by_name("est").id].params = {"A": [[-1.0]], "B": [[1.0]], "C": [[1.0]], "D": [[0.0]], "L": [[1.0]]}
    window.document.replace_diagram(d)
    window.inspector.show_block(window.document.diagram.block_by_name("est").id)
    _settle(qtbot, window)
    editor = window.inspector.model_editor
    editor.choice.setCurrentIndex(editor.choice.findData("P"))
    _settle(qtbot, window)
    page = window.inspector._scroll.widget()
    assert editor.matrices["L"].table.rowCount() == 2
    assert editor.linked_info.text() == "uses the model of P: 2 states, 1 input u, 1 output y"
    qtbot.waitUntil(lambda: _nothing_squeezed(page), timeout=2000)
