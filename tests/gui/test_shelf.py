"""The shelf of block kinds (tests of gui/shelf.py)."""
from __future__ import annotations

import json

import pytest

from loopwright.engine.diagram import BLOCK_KINDS
from loopwright.gui.canvas.scene import BLOCK_MIME

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
