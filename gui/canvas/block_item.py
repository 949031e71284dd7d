"""The canvas view of one :class:`loopwright.engine.diagram.Block`.

The item shows the block as the document has it; moving it with the mouse changes only
the item until the drag ends, when the scene turns the whole drag into one command.
Painting is cached per device (the body only changes when the block, the selection or
the problem marking changes), which keeps panning a large diagram smooth.
"""
from __future__ import annotations

from PySide6.QtCore import QPointF, QRectF, Qt
from PySide6.QtGui import QBrush, QFont, QPainterPath, QPen
from PySide6.QtWidgets import QGraphicsItem

from loopwright.engine.diagram import Block, PortRef
from loopwright.gui.canvas.geometry import SOURCE_RADIUS, SUM_RADIUS, port_spots
from loopwright.gui.canvas.glyphs import (
    body_rect, caption_rect, design_state_text, is_performance_port, paint_block, paint_design_badge,
)
from loopwright.gui.canvas.port_item import PortItem
from loopwright.gui.canvas.marking import Markable

__all__ = ["BlockItem"]


class BlockItem(Markable, QGraphicsItem):
    """One block; ``block_id`` ties it to the document."""

    Type = QGraphicsItem.UserType + 1

    def __init__(self, block: Block, theme, *, font: QFont, grid: float = 10.0):
        super().__init__()
        self.block_id = block.id
        self._block = block
        self._theme = theme
        self._font = font
        self._grid = grid
        self._init_marks()
        self._design_state = ""
        self._open_inputs: frozenset[str] = frozenset()
        self._syncing = False
        self.ports: dict[tuple[str, bool], PortItem] = {}
        self.setFlags(
            QGraphicsItem.GraphicsItemFlag.ItemIsMovable
            | QGraphicsItem.GraphicsItemFlag.ItemIsSelectable
            | QGraphicsItem.GraphicsItemFlag.ItemSendsGeometryChanges
        )
        self.setCacheMode(QGraphicsItem.CacheMode.DeviceCoordinateCache)
        self.setZValue(1)
        self.sync(block)

    def type(self) -> int:
        return self.Type

    @property
    def block(self) -> Block:
        return self._block

    # ---- from the document -----------------------------------------------------------
    def sync(self, block: Block) -> None:
        """Show ``block`` as it is now (position, ports, symbol)."""
        self.prepareGeometryChange()
        self._block = block
        self._syncing = True
        self.setPos(float(block.layout.get("x", 0.0)), float(block.layout.get("y", 0.0)))
        self._syncing = False
        spots = port_spots(block)
        wanted = {(s.name, s.is_input) for s in spots}
        for key in list(self.ports):
            if key not in wanted:
                item = self.ports.pop(key)
                item.setParentItem(None)
                if item.scene() is not None:
                    item.scene().removeItem(item)
        for s in spots:
            key = (s.name, s.is_input)
            if key not in self.ports:
                self.ports[key] = PortItem(self, PortRef(block.id, s.name), is_input=s.is_input, normal=s.normal, theme=self._theme)
            port = self.ports[key]
            port.normal = s.normal
            port.setPos(s.x, s.y)
            if is_performance_port(block, s.name, is_input=s.is_input):
                port.setToolTip("output z: performance output (z = Cz x + Dz u + Fz d, not measured): drag to connect")
        self._refresh_tooltip()
        self.update()

    def set_theme(self, theme) -> None:
        self._theme = theme
        for p in self.ports.values():
            p.set_theme(theme)
        self.update()

    def _refresh_tooltip(self) -> None:
        b = self._block
        tip = f"{b.kind} {b.name}" + (f" — {b.caption}" if b.caption else "")
        if self._design_state:
            tip += "\n" + design_state_text(b.name, self._design_state)
        tip += self._problem_lines()
        self.setToolTip(tip)

    # ---- marks from the live model -------------------------------------------------------
    @property
    def design_state(self) -> str:
        return self._design_state

    def set_design_state(self, state: str) -> None:
        """``"stale"``, ``"not designed yet"``, another reason the design cannot be vouched for, or ``""``."""
        if state != self._design_state:
            self._design_state = state
            self._refresh_tooltip()
            self.update()

    @property
    def open_inputs(self) -> frozenset[str]:
        return self._open_inputs

    def set_open_inputs(self, names) -> None:
        """The input ports no wire feeds: drawn as small open rings, named on hover."""
        names = frozenset(names)
        if names != self._open_inputs:
            self._open_inputs = names
            for (name, is_input), port in self.ports.items():
                if is_input:
                    port.set_open(name in names)
            self.update()

    def design_badge_rect(self) -> QRectF:
        """Where the design mark sits: on the body's top-right corner (item coordinates)."""
        r = body_rect(self._block)
        w = 44.0 if self._design_state == "stale" else 72.0
        return QRectF(r.right() - w + 6, r.top() - 8, w, 14)

    # ---- geometry ----------------------------------------------------------------------
    def port(self, name: str, *, is_input: bool) -> PortItem | None:
        return self.ports.get((name, is_input))

    def port_scene_pos(self, name: str, *, is_input: bool) -> QPointF:
        p = self.ports.get((name, is_input))
        return self.mapToScene(p.pos()) if p is not None else self.scenePos()

    def tag_anchor(self) -> tuple[float, float]:
        """Where tags go: above the body's top-left corner (item coordinates)."""
        r = body_rect(self._block)
        return r.left(), r.top() - 20.0

    def body_scene_rect(self) -> QRectF:
        return self.mapRectToScene(body_rect(self._block))

    def boundingRect(self) -> QRectF:
        r = body_rect(self._block).adjusted(-46, -24, 46, 24)
        if self._block.caption:
            r = r.united(caption_rect(self._block))
        return r

    def shape(self) -> QPainterPath:
        path = QPainterPath()
        if self._block.kind == "sum":
            path.addEllipse(QPointF(0, 0), SUM_RADIUS + 2, SUM_RADIUS + 2)
        elif self._block.kind == "source":
            path.addEllipse(QPointF(0, 0), SOURCE_RADIUS + 2, SOURCE_RADIUS + 2)
        else:
            path.addRect(body_rect(self._block))
        return path

    def paint(self, painter, option, widget=None) -> None:
        paint_block(
            painter, self._block, self._theme,
            selected=self.isSelected(), problem=self.has_error, highlighted=self._highlighted, font=self._font,
        )
        if self._problems and not self.has_error:
            # A warning (the loop assembles): a dashed outline in the problem colour.
            painter.setPen(QPen(self._theme.problem, 1.2, Qt.PenStyle.DashLine))
            painter.setBrush(Qt.BrushStyle.NoBrush)
            painter.drawRoundedRect(self.shape().boundingRect().adjusted(-3, -3, 3, 3), 5, 5)
        if self._open_inputs:
            painter.setPen(QPen(self._theme.port, 1.2))
            painter.setBrush(QBrush(self._theme.background))
            for spot in port_spots(self._block):
                if spot.is_input and spot.name in self._open_inputs:
                    painter.drawEllipse(QPointF(spot.x, spot.y), 3.2, 3.2)
        if self._design_state:
            paint_design_badge(painter, self.design_badge_rect(), self._design_state, self._theme, self._font)
        if self._block.caption:
            f = QFont(self._font)
            f.setPointSizeF(self._font.pointSizeF() * 0.85)
            painter.setFont(f)
            painter.setPen(QPen(self._theme.caption))
            painter.drawText(caption_rect(self._block), Qt.AlignmentFlag.AlignHCenter | Qt.AlignmentFlag.AlignTop, self._block.caption)

    # ---- dragging ------------------------------------------------------------------------
    def itemChange(self, change, value):
        if change == QGraphicsItem.GraphicsItemChange.ItemPositionChange and not self._syncing and self._grid > 0:
            g = self._grid
            return QPointF(round(value.x() / g) * g, round(value.y() / g) * g)
        if change == QGraphicsItem.GraphicsItemChange.ItemPositionHasChanged:
            self._place_tags()
            scene = self.scene()
            if scene is not None and hasattr(scene, "block_item_moved"):
                scene.block_item_moved(self)
        if change == QGraphicsItem.GraphicsItemChange.ItemSelectedHasChanged:
            self.update()
        return super().itemChange(change, value)
