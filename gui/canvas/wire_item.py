"""The canvas view of one :class:`loopwright.engine.diagram.Wire`.

Draws the orthogonal route from the source port to every target (fan-out branches meet in
a dot), an arrowhead into each input, the signal name, and for a vector signal a heavier
stroke with a slash and its width. A selected wire shows handles on its inner segments;
dragging one moves that segment and ends as one :class:`~loopwright.gui.commands.SetWireLayout`.
"""
from __future__ import annotations

import copy

from PySide6.QtCore import QPointF, QRectF, Qt
from PySide6.QtGui import QBrush, QFont, QFontMetricsF, QPainterPath, QPainterPathStroker, QPen, QPolygonF
from PySide6.QtWidgets import QGraphicsItem

from loopwright.gui.canvas.geometry import route
from loopwright.gui.canvas.marking import Markable

__all__ = ["WireItem", "width_label_rect"]

_HANDLE = 4.0


class WireItem(Markable, QGraphicsItem):
    """One wire; ``wire_id`` ties it to the document. Coordinates are scene coordinates."""

    Type = QGraphicsItem.UserType + 2

    def __init__(self, wire_id: str, scene_ref, theme, *, font: QFont):
        super().__init__()
        self.wire_id = wire_id
        self._scene_ref = scene_ref
        self._theme = theme
        self._font = font
        self.routes: list[list[tuple[float, float]]] = []
        self._path = QPainterPath()
        self._shape = QPainterPath()
        self._bounds = QRectF()
        self._label_rect = QRectF()
        self._label = ""
        self._width: int | None = None
        self._caption_below = False
        self._init_marks()
        self._drag: tuple[int, int, list, QPointF] | None = None
        self.setFlags(QGraphicsItem.GraphicsItemFlag.ItemIsSelectable)
        self.setCacheMode(QGraphicsItem.CacheMode.DeviceCoordinateCache)
        self.setAcceptHoverEvents(True)
        self.setZValue(0)

    def type(self) -> int:
        return self.Type

    # ---- state ---------------------------------------------------------------------------
    @property
    def signal_width(self) -> int | None:
        return self._width

    @property
    def label(self) -> str:
        return self._label

    def set_theme(self, theme) -> None:
        self._theme = theme
        self.update()

    def set_signal_width(self, width: int | None) -> None:
        if width != self._width:
            self.prepareGeometryChange()
            self._width = width
            self._rebuild_shape()
            self.update()

    def _refresh_tooltip(self) -> None:
        tip = f"signal {self._label}" + (f" ({self._width} components)" if self._width and self._width > 1 else "")
        tip += "\ndrag to branch off; double-click to rename"
        tip += self._problem_lines()
        self.setToolTip(tip)

    # ---- routing -------------------------------------------------------------------------
    def recompute(self) -> None:
        """Re-route from the current positions of the block items (also during a drag)."""
        sc = self._scene_ref
        wire = sc.document.diagram.wires.get(self.wire_id)
        if wire is None:
            return
        self._label = wire.name
        src_item = sc.block_items.get(wire.source.block)
        if src_item is None:
            return
        src_port = src_item.port(wire.source.port, is_input=False)
        src_block = sc.document.diagram.blocks.get(wire.source.block)
        # Round glyphs (sources, junctions) carry their caption just below the output.
        self._caption_below = bool(src_block is not None and src_block.kind in ("source", "sum") and src_block.caption)
        p = src_item.port_scene_pos(wire.source.port, is_input=False)
        dp = src_port.normal if src_port is not None else (1.0, 0.0)
        bends = wire.layout.get("bends", {}) or {}
        routes = []
        for j, t in enumerate(wire.targets):
            dst_item = sc.block_items.get(t.block)
            if dst_item is None:
                continue
            dst_port = dst_item.port(t.port, is_input=True)
            q = dst_item.port_scene_pos(t.port, is_input=True)
            dq = dst_port.normal if dst_port is not None else (-1.0, 0.0)
            rs, rd = src_item.body_scene_rect(), dst_item.body_scene_rect()
            lane = max(rs.bottom(), rd.bottom()) + 36.0
            gap = None
            if rs.bottom() + 24.0 < rd.top():
                gap = (rs.bottom() + rd.top()) / 2.0
            elif rd.bottom() + 24.0 < rs.top():
                gap = (rd.bottom() + rs.top()) / 2.0
            routes.append(route((p.x(), p.y()), dp, (q.x(), q.y()), dq, bends=bends.get(str(j)), detour_y=lane, gap_y=gap,
                                early_turn=len(wire.targets) > 1))
        if hasattr(sc, "claim_lanes"):
            routes = sc.claim_lanes(self.wire_id, routes)
        self.prepareGeometryChange()
        self.routes = routes
        self._rebuild_shape()
        self._refresh_tooltip()
        self._place_tags()
        self.update()

    def tag_anchor(self) -> tuple[float, float]:
        """Where tags go: just after the signal name, on its line (the item's coordinates are the scene's)."""
        r = self._label_rect
        if r.isNull():
            pts = self.routes[0] if self.routes else [(0.0, 0.0)]
            return pts[0][0] + 12.0, pts[0][1] - 22.0
        return r.right() + 2.0, r.top() - 1.0

    def _rebuild_shape(self) -> None:
        path = QPainterPath()
        for pts in self.routes:
            path.moveTo(*pts[0])
            for pt in pts[1:]:
                path.lineTo(*pt)
        self._path = path
        stroker = QPainterPathStroker()
        stroker.setWidth(9.0)
        shape = stroker.createStroke(path)
        fm = QFontMetricsF(self._font)
        self._label_rect = QRectF()
        if self.routes:
            candidates = _label_candidates(self.routes[0], fm.horizontalAdvance(self._label) + 6, fm.height())
            claim = getattr(self._scene_ref, "claim_label", None)
            self._label_rect = claim(self.wire_id, candidates) if claim is not None else candidates[0]
            shape.addRect(self._label_rect)
        self._shape = shape
        # Room for arrowheads, branch dots and the width number beside a vector's slash.
        self._bounds = path.boundingRect().adjusted(-26, -26, 26, 26).united(self._label_rect.adjusted(-4, -4, 4, 4))

    def boundingRect(self) -> QRectF:
        return self._bounds

    def shape(self) -> QPainterPath:
        return self._shape

    # ---- painting ------------------------------------------------------------------------
    def paint(self, painter, option, widget=None) -> None:
        t = self._theme
        colour = t.problem if self._problems else (t.selection if self.isSelected() else (t.highlight if self._highlighted else t.wire))
        vector = bool(self._width and self._width > 1)
        painter.setRenderHint(painter.RenderHint.Antialiasing, True)
        # A warning (the loop still assembles) is dashed; an error solid.
        style = Qt.PenStyle.DashLine if self._problems and not self.has_error else Qt.PenStyle.SolidLine
        painter.setPen(QPen(colour, 3.2 if vector else 1.5, style, Qt.PenCapStyle.FlatCap, Qt.PenJoinStyle.MiterJoin))
        painter.setBrush(Qt.BrushStyle.NoBrush)
        painter.drawPath(self._path)
        painter.setPen(Qt.PenStyle.NoPen)
        painter.setBrush(QBrush(colour))
        for pts in self.routes:
            painter.drawPolygon(_arrowhead(pts[-2], pts[-1], 10.0 if vector else 8.0))
        if len(self.routes) > 1:
            # Where branches part: the first point at which the routes differ.
            for pt in _branch_points(self.routes):
                painter.drawEllipse(QPointF(*pt), 3.4 if vector else 2.8, 3.4 if vector else 2.8)
        painter.setFont(self._font)
        painter.setPen(QPen(t.text))
        if self._label and not self._label_rect.isNull():
            painter.drawText(self._label_rect, Qt.AlignmentFlag.AlignCenter, self._label)
        if vector and self.routes:
            (x0, y0), (x1, y1) = self.routes[0][0], self.routes[0][1]
            length = max(abs(x1 - x0), abs(y1 - y0))
            d = min(9.0, length / 2)
            ux, uy = ((x1 - x0) / length, (y1 - y0) / length) if length > 0 else (1.0, 0.0)
            cx, cy = x0 + ux * d, y0 + uy * d
            painter.setPen(QPen(colour, 1.4))
            painter.drawLine(QPointF(cx - 4 * ux + 5 * uy, cy - 4 * uy - 5 * ux), QPointF(cx + 4 * ux - 5 * uy, cy + 4 * uy + 5 * ux))
            painter.setPen(QPen(t.text))
            f = QFont(self._font)
            f.setPointSizeF(self._font.pointSizeF() * 0.8)
            painter.setFont(f)
            painter.drawText(width_label_rect(cx, cy, ux, uy, caption_below=self._caption_below), Qt.AlignmentFlag.AlignCenter,
                             str(self._width))
        if self.isSelected():
            painter.setPen(QPen(t.selection, 1.0))
            painter.setBrush(QBrush(t.background))
            for _, _, mid in self._handles():
                painter.drawRect(QRectF(mid.x() - _HANDLE, mid.y() - _HANDLE, 2 * _HANDLE, 2 * _HANDLE))

    # ---- bend handles ----------------------------------------------------------------------
    def branch_at(self, pos: QPointF) -> int | None:
        """Index of the fan-out branch drawn nearest ``pos``; None on the shared trunk."""
        if len(self.routes) < 2:
            return None
        dists = sorted((_distance_to_route(pos.x(), pos.y(), pts), j) for j, pts in enumerate(self.routes))
        (d0, j0), (d1, _j1) = dists[0], dists[1]
        if d0 > 8.0 or d1 - d0 < 1.0:
            return None
        return j0

    def _handles(self):
        """(target index, segment index, midpoint) of every movable segment."""
        out = []
        for j, pts in enumerate(self.routes):
            for k in range(1, len(pts) - 2):
                (x0, y0), (x1, y1) = pts[k], pts[k + 1]
                out.append((j, k, QPointF((x0 + x1) / 2, (y0 + y1) / 2)))
        return out

    def handle_at(self, pos: QPointF):
        if not self.isSelected():
            return None
        for j, k, mid in self._handles():
            if abs(mid.x() - pos.x()) <= _HANDLE + 2 and abs(mid.y() - pos.y()) <= _HANDLE + 2:
                return j, k
        return None

    def mousePressEvent(self, event) -> None:
        hit = self.handle_at(event.scenePos()) if event.button() == Qt.MouseButton.LeftButton else None
        if hit is not None:
            j, k = hit
            self._drag = (j, k, copy.deepcopy(self.routes[j]), event.scenePos())
            event.accept()
            return
        super().mousePressEvent(event)

    def mouseMoveEvent(self, event) -> None:
        if self._drag is None:
            super().mouseMoveEvent(event)
            return
        j, k, pts, start = self._drag
        grid = getattr(self._scene_ref, "grid_size", 10.0) or 1.0
        moved = [list(p) for p in pts]
        horizontal = abs(pts[k][1] - pts[k + 1][1]) < 1e-9
        if horizontal:
            y = round((pts[k][1] + event.scenePos().y() - start.y()) / grid) * grid
            moved[k][1] = moved[k + 1][1] = y
        else:
            x = round((pts[k][0] + event.scenePos().x() - start.x()) / grid) * grid
            moved[k][0] = moved[k + 1][0] = x
        self.prepareGeometryChange()
        self.routes[j] = [tuple(p) for p in moved]
        self._rebuild_shape()
        self.update()
        event.accept()

    def mouseReleaseEvent(self, event) -> None:
        if self._drag is None:
            super().mouseReleaseEvent(event)
            return
        j = self._drag[0]
        self._drag = None
        interior = [[float(x), float(y)] for x, y in self.routes[j][1:-1]]
        self._scene_ref.commit_wire_bends(self.wire_id, j, interior)
        event.accept()


def width_label_rect(cx: float, cy: float, ux: float, uy: float, *, caption_below: bool = False) -> QRectF:
    """Where the component count of a vector wire is written, beside its slash at (cx, cy).

    ``(ux, uy)`` is the unit direction of the wire's first leg. On a horizontal leg the
    number goes below the slash, or above it when the source block has its caption just
    below the port (a source or a junction), so the two do not overprint.
    """
    if abs(uy) > 0.5:
        off = (-uy * 12 + 6 * ux, ux * 12)
    else:
        off = (2.0, -16.0) if caption_below else (2.0, 10.0)
    return QRectF(cx + off[0] - 10, cy + off[1] - 2, 20, 14)


def _distance_to_route(x: float, y: float, pts) -> float:
    best = float("inf")
    for (x0, y0), (x1, y1) in zip(pts, pts[1:]):
        cx = min(max(x, min(x0, x1)), max(x0, x1))
        cy = min(max(y, min(y0, y1)), max(y0, y1))
        best = min(best, ((x - cx) ** 2 + (y - cy) ** 2) ** 0.5)
    return best


def _label_segment(pts) -> int:
    """Index of the segment that carries the signal name: the first long horizontal one."""
    best, best_len = 0, -1.0
    for k in range(len(pts) - 1):
        (x0, y0), (x1, y1) = pts[k], pts[k + 1]
        length = abs(x1 - x0) + abs(y1 - y0)
        horizontal = abs(y0 - y1) < 1e-9
        if horizontal and length >= 60:
            return k
        if length > best_len:
            best, best_len = k, length
    return best


def _label_candidates(pts, w: float, h: float) -> list[QRectF]:
    """Places for the signal name along a route, best first: above the middle of the
    segment :func:`_label_segment` picks, then along it, below it, then on the other segments."""
    first = _label_segment(pts)
    order = [first] + sorted((k for k in range(len(pts) - 1) if k != first),
                             key=lambda k: -(abs(pts[k + 1][0] - pts[k][0]) + abs(pts[k + 1][1] - pts[k][1])))
    out = []
    for k in order:
        (x0, y0), (x1, y1) = pts[k], pts[k + 1]
        if abs(y0 - y1) < 1e-9:
            left, right = min(x0, x1), max(x0, x1)
            for f in (0.5, 0.25, 0.75):
                mx = left + (right - left) * f
                out.append(QRectF(mx - w / 2, y0 - h - 3, w, h))
            out.append(QRectF((left + right) / 2 - w / 2, y0 + 3, w, h))
        else:
            top, bottom = min(y0, y1), max(y0, y1)
            for f in (0.5, 0.25, 0.75):
                my = top + (bottom - top) * f
                out.append(QRectF(x0 + 5, my - h / 2, w, h))
                out.append(QRectF(x0 - 5 - w, my - h / 2, w, h))
    return out


def _branch_points(routes) -> list[tuple[float, float]]:
    """The points where fan-out branches leave the shared trunk."""
    out = set()
    first = routes[0]
    for other in routes[1:]:
        k = 0
        while k + 1 < min(len(first), len(other)) and first[k + 1] == other[k + 1]:
            k += 1
        # The branch leaves somewhere on segment k; the dot goes where the two routes' next
        # points stop sharing a line.
        a, b1, b2 = first[k], first[k + 1], other[k + 1]
        if abs(a[1] - b1[1]) < 1e-9 and abs(a[1] - b2[1]) < 1e-9:
            x = min(b1[0], b2[0], key=lambda v: abs(v - a[0]))
            out.add((x, a[1]))
        elif abs(a[0] - b1[0]) < 1e-9 and abs(a[0] - b2[0]) < 1e-9:
            y = min(b1[1], b2[1], key=lambda v: abs(v - a[1]))
            out.add((a[0], y))
        else:
            out.add(a)
    return sorted(out)


def _arrowhead(prev, tip, size: float) -> QPolygonF:
    dx, dy = tip[0] - prev[0], tip[1] - prev[1]
    n = max((dx * dx + dy * dy) ** 0.5, 1e-9)
    ux, uy = dx / n, dy / n
    bx, by = tip[0] - ux * size, tip[1] - uy * size
    w = size * 0.45
    return QPolygonF([QPointF(*tip), QPointF(bx - uy * w, by + ux * w), QPointF(bx + uy * w, by - ux * w)])
