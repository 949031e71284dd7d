"""The shelf: the block kinds one can place, each with a small painted icon.

Drag an entry onto the canvas to place it there, or double-click it to place it in the
middle of the visible canvas. Sources come three ways (reference, disturbance, noise)
so the role is chosen by what one picks.
"""
from __future__ import annotations

import json

from PySide6.QtCore import QByteArray, QMimeData, QSize, Qt, Signal
from PySide6.QtGui import QFont, QIcon, QPainter, QPalette, QPixmap
from PySide6.QtWidgets import QListWidget, QListWidgetItem, QAbstractItemView

from loopwright.engine.diagram import Block, default_params
from loopwright.gui.canvas.geometry import block_size
from loopwright.gui.canvas.glyphs import paint_block
from loopwright.gui.canvas.scene import BLOCK_MIME

__all__ = ["Shelf", "SHELF_ENTRIES"]

# (label, kind, params override or None, one-line help)
SHELF_ENTRIES = [
    ("Plant", "plant", None, "the machine or process, as state space or transfer function"),
    ("Dynamic block", "dynamic", None, "a compensator or filter (state space or transfer function)"),
    ("Gain", "gain", None, "a static matrix gain: out = K in (e.g. state feedback K)"),
    ("Summing junction", "sum", None, "adds or subtracts its inputs, one sign per input"),
    ("Integrator", "integrator", None, "1/s on each component"),
    ("Estimator", "estimator", None, "full-order state observer with gain L"),
    ("Reference", "source", {"role": "reference", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0, "start": 0.0}},
     "a set-point the loop follows"),
    ("Disturbance", "source", {"role": "disturbance", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0, "start": 0.0}},
     "a load or upset entering the plant"),
    ("Sensor noise", "source", {"role": "noise", "width": 1, "waveform": {"kind": "white", "intensity": 1e-4, "seed": 1}},
     "white noise added to a measurement"),
]


_PORT_ROOM = 6.0


def _icon(kind: str, params: dict | None, theme, font: QFont) -> QIcon:
    pm = QPixmap(QSize(64, 40))
    pm.fill(Qt.GlobalColor.transparent)
    p = QPainter(pm)
    p.translate(32, 20)
    name = {"plant": "P", "gain": "K", "estimator": "est", "dynamic": "C", "integrator": "I", "sum": "s"}.get(kind, "")
    blk = Block("icon", kind, name, params or default_params(kind), {"x": 0, "y": 0, "rotation": 0, "flip": False})
    # Shrink each body to fit the icon with room for its port dots (the estimator is
    # the widest block and was cut off at a common scale).
    w, h = block_size(blk)
    scale = min(0.6, (64.0 - 8.0) / (w + 2 * _PORT_ROOM), (40.0 - 4.0) / (h + 2 * _PORT_ROOM))
    p.scale(scale, scale)
    if kind in ("source", "integrator"):
        # These draw their name outside the body, where the icon would cut it off.
        blk.name = ""
    paint_block(p, blk, theme, selected=False, problem=False, highlighted=False, font=font)
    p.end()
    return QIcon(pm)


class Shelf(QListWidget):
    """The list of block kinds; emits ``place_requested(kind, params)`` on double-click."""

    place_requested = Signal(str, object)

    def __init__(self, theme, *, font: QFont | None = None, parent=None):
        super().__init__(parent)
        self.setObjectName("shelf")
        self.setDragEnabled(True)
        self.setDragDropMode(QAbstractItemView.DragDropMode.DragOnly)
        self.setIconSize(QSize(64, 40))
        self.setSpacing(2)
        # Long names wrap instead of hiding behind a sideways scroll bar in a narrow dock.
        self.setWordWrap(True)
        self.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        self._font = font or QFont("DejaVu Sans", 9)
        for label, kind, params, help_text in SHELF_ENTRIES:
            item = QListWidgetItem(_icon(kind, params, theme, self._font), label)
            item.setData(Qt.ItemDataRole.UserRole, {"kind": kind, "params": params})
            item.setToolTip(f"{label}: {help_text}.\nDrag onto the canvas, or double-click to place.")
            self.addItem(item)
        self._paint_background(theme)
        self.itemDoubleClicked.connect(self._on_double_clicked)

    def set_theme(self, theme) -> None:
        """Repaint the icons, and the list behind them, in the canvas colours."""
        for row, (_label, kind, params, _help) in enumerate(SHELF_ENTRIES):
            self.item(row).setIcon(_icon(kind, params, theme, self._font))
        self._paint_background(theme)

    def _paint_background(self, theme) -> None:
        # The icons are drawn in the canvas colours: on a list of the other brightness a
        # dark-theme block would be a dark slab on white (or a light one on black).
        pal = self.palette()
        pal.setColor(QPalette.ColorRole.Base, theme.background)
        pal.setColor(QPalette.ColorRole.Text, theme.text)
        self.setPalette(pal)

    def spec(self, row: int) -> dict:
        return self.item(row).data(Qt.ItemDataRole.UserRole)

    def _on_double_clicked(self, item: QListWidgetItem) -> None:
        spec = item.data(Qt.ItemDataRole.UserRole)
        self.place_requested.emit(spec["kind"], spec["params"])

    def mimeData(self, items):
        md = QMimeData()
        if items:
            md.setData(BLOCK_MIME, QByteArray(json.dumps(items[0].data(Qt.ItemDataRole.UserRole)).encode("utf-8")))
        return md

    def mimeTypes(self):
        return [BLOCK_MIME]
