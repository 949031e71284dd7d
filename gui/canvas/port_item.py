"""A port drawn on a block: a small chevron for inputs, a dot for outputs.

Ports are children of their :class:`~loopwright.gui.canvas.block_item.BlockItem`; the scene
starts a connection drag when one is pressed and highlights the valid ends meanwhile.
"""
from __future__ import annotations

from PySide6.QtCore import QPointF, QRectF, Qt
from PySide6.QtGui import QBrush, QPainterPath, QPen
from PySide6.QtWidgets import QGraphicsItem

from loopwright.engine.diagram import PortRef

__all__ = ["PortItem"]

_R = 4.5


class PortItem(QGraphicsItem):
    """One port; ``ref`` names it, ``is_input`` says which end of a wire it can be."""

    Type = QGraphicsItem.UserType + 3

    def __init__(self, parent, ref: PortRef, *, is_input: bool, normal: tuple[float, float], theme):
        super().__init__(parent)
        self.ref = ref
        self.is_input = is_input
        self.normal = normal
        self._theme = theme
        self._target_state = 0  # 0 plain, 1 valid target, 2 target under the cursor, 3 hovered
        self.setAcceptHoverEvents(True)
        self.setCursor(Qt.CursorShape.CrossCursor)
        self.setZValue(2)
        # Idle ports draw nothing (the block paints its output dots in its cached pixmap),
        # so a large diagram does not pay one paint call per port on every frame.
        self.setFlag(QGraphicsItem.GraphicsItemFlag.ItemHasNoContents, True)
        self._open = False
        self._refresh_tip()

    def _refresh_tip(self) -> None:
        kind = "input" if self.is_input else "output"
        state = " (not connected)" if self._open else ""
        self.setToolTip(f"{kind} {self.ref.port}{state}: drag to connect")

    @property
    def is_open(self) -> bool:
        """An input no wire feeds."""
        return self._open

    def set_open(self, is_open: bool) -> None:
        if is_open != self._open:
            self._open = is_open
            self._refresh_tip()

    def type(self) -> int:
        return self.Type

    def set_theme(self, theme) -> None:
        self._theme = theme
        self.update()

    def set_target_state(self, state: int) -> None:
        if state != self._target_state:
            # Invalidate the ring's area before the item stops drawing: with no contents
            # Qt no longer repaints it, and the ring of an aborted wire would stay behind.
            self.update()
            if self.scene() is not None:
                self.scene().update(self.sceneBoundingRect())
            self._target_state = state
            self.setFlag(QGraphicsItem.GraphicsItemFlag.ItemHasNoContents, state == 0)
            self.update()

    def hoverEnterEvent(self, event) -> None:
        # A ring under the cursor says "a wire can start here"; a drag in progress owns
        # the ring states, so hovering then changes nothing.
        if self._target_state == 0:
            self.set_target_state(3)
        super().hoverEnterEvent(event)

    def hoverLeaveEvent(self, event) -> None:
        if self._target_state == 3:
            self.set_target_state(0)
        super().hoverLeaveEvent(event)

    def boundingRect(self) -> QRectF:
        return QRectF(-_R * 2, -_R * 2, _R * 4, _R * 4)

    def shape(self) -> QPainterPath:
        path = QPainterPath()
        path.addEllipse(QPointF(0, 0), _R * 1.8, _R * 1.8)
        return path

    def paint(self, painter, option, widget=None) -> None:
        t = self._theme
        if self._target_state == 3:
            painter.setPen(QPen(t.port, 1.2))
            painter.setBrush(Qt.BrushStyle.NoBrush)
            painter.drawEllipse(QPointF(0, 0), _R * 1.4, _R * 1.4)
        elif self._target_state:
            colour = t.target_ok
            painter.setPen(QPen(colour, 2.0))
            painter.setBrush(QBrush(colour.lighter(150) if self._target_state == 2 else Qt.BrushStyle.NoBrush))
            painter.drawEllipse(QPointF(0, 0), _R * 1.6, _R * 1.6)
