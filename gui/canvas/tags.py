"""Small coloured tags the analysis panels pin on blocks and wires: the input and output of
each kept pair (in the pair's colour), the loop break, a pick waiting for its other half."""
from __future__ import annotations

from PySide6.QtCore import QRectF, Qt
from PySide6.QtGui import QBrush, QColor, QFont, QFontMetricsF, QPen
from PySide6.QtWidgets import QGraphicsItem

__all__ = ["TagItem"]


class TagItem(QGraphicsItem):
    """A rounded label with white text on the tag's colour; a child of the item it marks."""

    def __init__(self, text: str, colour: QColor, font: QFont, parent=None):
        super().__init__(parent)
        self.text = text
        self.colour = QColor(colour)
        self._font = QFont(font)
        self._font.setPointSizeF(font.pointSizeF() * 0.85)
        self._font.setBold(True)
        fm = QFontMetricsF(self._font)
        self._rect = QRectF(0, 0, fm.horizontalAdvance(text) + 10, fm.height() + 2)
        self.setZValue(5)
        self.setToolTip(text)
        self.setAcceptedMouseButtons(Qt.MouseButton.NoButton)

    @property
    def width(self) -> float:
        return self._rect.width()

    def boundingRect(self) -> QRectF:
        return self._rect.adjusted(-1, -1, 1, 1)

    def paint(self, painter, option, widget=None) -> None:
        painter.setRenderHint(painter.RenderHint.Antialiasing, True)
        painter.setPen(QPen(self.colour.darker(130), 1.0))
        painter.setBrush(QBrush(self.colour))
        painter.drawRoundedRect(self._rect, 4, 4)
        painter.setPen(QPen(QColor("#ffffff")))
        painter.setFont(self._font)
        painter.drawText(self._rect, Qt.AlignmentFlag.AlignCenter, self.text)
