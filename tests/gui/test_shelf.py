"""The shelf of block kinds (tests of gui/shelf.py)."""
from __future__ import annotations

import json

import pytest

from loopwright.engine.diagram import BLOCK_KINDS
from loopwright.gui.canvas.scene import BLOCK_MIME
from loopwright.gui.shelf import SHELF_ENTRIES, Shelf
from loopwright.gui.theme import theme_from_palette

pytestmark = pytest.mark.qt


def test_every_block_kind_is_on_the_shelf_and_sources_come_by_role(window):
    specs = [window.shelf.spec(k) for k in range(window.shelf.count())]
    assert {s["kind"] for s in specs} == set(BLOCK_KINDS)
    roles = [s["params"]["role"] for s in specs if s["kind"] == "source"]
    assert roles == ["reference", "disturbance", "noise"]


def test_double_click_places_the_kind_in_view_and_it_is_one_undo_step(window):
    item = window.shelf.item(5)  # estimator
    window.shelf.itemDoubleClicked.emit(item)
    (blk,) = window.document.diagram.blocks.values()
    assert blk.kind == "estimator" and blk.name == "est"
    window.document.undo_stack.undo()
    assert not window.document.diagram.blocks


def test_a_drag_carries_our_own_mime_type(window):
    md = window.shelf.mimeData([window.shelf.item(8)])
    spec = json.loads(bytes(md.data(BLOCK_MIME)).decode())
    assert spec["kind"] == "source" and spec["params"]["role"] == "noise"


@pytest.mark.parametrize("row", range(len(SHELF_ENTRIES)), ids=[e[0] for e in SHELF_ENTRIES])
def test_every_shelf_icon_fits_inside_its_square_with_nothing_cut_off(qtbot, row):
    # A glyph clipped by the icon's edge leaves painted pixels on the outermost frame.
    shelf = Shelf(theme_from_palette(dark=False))
    qtbot.addWidget(shelf)
    img = shelf.item(row).icon().pixmap(shelf.iconSize()).toImage()
    w, h = img.width(), img.height()
    frame = [(x, y) for x in range(w) for y in (0, h - 1)] + [(x, y) for y in range(h) for x in (0, w - 1)]
    touched = [(x, y) for x, y in frame if img.pixelColor(x, y).alpha() > 0]
    assert not touched, f"{SHELF_ENTRIES[row][0]}: painted up to the icon edge at {touched[:4]}"


def test_the_shelf_list_follows_the_canvas_colours_so_dark_icons_sit_on_a_dark_list(qtbot):
    from PySide6.QtGui import QPalette

    light, dark = theme_from_palette(dark=False), theme_from_palette(dark=True)
    shelf = Shelf(light)
    qtbot.addWidget(shelf)
    assert shelf.palette().color(QPalette.ColorRole.Base) == light.background
    shelf.set_theme(dark)
    assert shelf.palette().color(QPalette.ColorRole.Base) == dark.background
    assert shelf.palette().color(QPalette.ColorRole.Text) == dark.text
