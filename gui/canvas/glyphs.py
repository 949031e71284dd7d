"""Painting of block bodies and symbols, one function per kind (no state).

The body (box, circle, source glyph) follows the block's orientation; text is always
drawn upright so a mirrored feedback block stays readable.
"""
from __future__ import annotations

import functools
import json

import numpy as np
from PySide6.QtCore import QPointF, QRectF, Qt
from PySide6.QtGui import QBrush, QColor, QFont, QFontMetricsF, QPainterPath, QPen, QTransform

from loopwright.engine.diagram import Block
from loopwright.gui.canvas.geometry import SOURCE_RADIUS, SUM_RADIUS, block_size, port_spots

__all__ = ["symbol_text", "paint_block", "body_rect", "caption_rect", "paint_design_badge", "design_state_text",
           "is_performance_port"]


def symbol_text(block: Block) -> tuple[str, str | None]:
    """(main symbol, denominator or None) drawn inside the block."""
    p = block.params
    if block.kind == "integrator":
        return "1", "s"
    return block.name, None


def body_rect(block: Block) -> QRectF:
    """The oriented body's bounding rectangle around the centre."""
    w, h = block_size(block)
    if int(round(float(block.layout.get("rotation", 0) or 0) / 90.0)) % 2:
        w, h = h, w
    return QRectF(-w / 2, -h / 2, w, h)


def _orientation(block: Block) -> QTransform:
    t = QTransform()
    t.rotate(float(block.layout.get("rotation", 0) or 0))
    if block.layout.get("flip"):
        t.scale(-1, 1)
    return t


def paint_block(painter, block: Block, theme, *, selected: bool, problem: bool, highlighted: bool, font: QFont, widths: dict | None = None) -> None:
    """Paint ``block`` around (0, 0) in item coordinates."""
    border = theme.problem if problem else (theme.selection if selected else (theme.highlight if highlighted else theme.block_border))
    pen_w = 2.4 if (selected or problem or highlighted) else 1.4
    painter.setRenderHint(painter.RenderHint.Antialiasing, True)
    if block.kind == "sum":
        _paint_sum(painter, block, theme, border, pen_w, font)
    elif block.kind == "source":
        _paint_source(painter, block, theme, border if (selected or problem or highlighted) else None, pen_w, font)
    else:
        _paint_box(painter, block, theme, border, pen_w, font)
    painter.setPen(Qt.PenStyle.NoPen)
    painter.setBrush(QBrush(theme.port))
    for s in port_spots(block):
        if is_performance_port(block, s.name, is_input=s.is_input):
            _paint_performance_mark(painter, s, theme)
        elif not s.is_input:
            painter.drawEllipse(QPointF(s.x, s.y), 2.2, 2.2)


def is_performance_port(block: Block, port: str, *, is_input: bool) -> bool:
    """True for a plant's performance output ``z`` (what must stay small, not measured)."""
    return block.kind == "plant" and port == "z" and not is_input


def _paint_performance_mark(painter, spot, theme) -> None:
    # An open diamond instead of the filled dot: a signal one watches, not one a sensor gives.
    painter.save()
    painter.setPen(QPen(theme.port, 1.3))
    painter.setBrush(QBrush(theme.block_fill))
    r = 3.6
    path = QPainterPath()
    path.moveTo(spot.x, spot.y - r)
    path.lineTo(spot.x + r, spot.y)
    path.lineTo(spot.x, spot.y + r)
    path.lineTo(spot.x - r, spot.y)
    path.closeSubpath()
    painter.drawPath(path)
    painter.restore()


def _paint_box(painter, block, theme, border, pen_w, font) -> None:
    r = body_rect(block)
    painter.setPen(QPen(border, pen_w))
    painter.setBrush(QBrush(theme.block_fill))
    if block.kind == "estimator":
        painter.drawRoundedRect(r, 9, 9)
        # A second inner outline marks the estimator as a model running beside the plant.
        painter.setPen(QPen(border, 0.8, Qt.PenStyle.DashLine))
        painter.setBrush(Qt.BrushStyle.NoBrush)
        painter.drawRoundedRect(r.adjusted(4, 4, -4, -4), 6, 6)
    else:
        painter.drawRoundedRect(r, 3, 3)
    painter.setPen(QPen(theme.text))
    main, den = symbol_text(block)
    if block.kind == "estimator":
        f = QFont(font)
        f.setBold(True)
        painter.setFont(f)
        painter.drawText(r.adjusted(0, 4, 0, -r.height() / 2), Qt.AlignmentFlag.AlignCenter, block.name)
        f2 = QFont(font)
        f2.setPointSizeF(font.pointSizeF() * 0.8)
        painter.setFont(f2)
        painter.setPen(QPen(theme.caption))
        link = block.params.get("plant")
        painter.drawText(r.adjusted(0, r.height() / 2 - 6, 0, -4), Qt.AlignmentFlag.AlignCenter,
                         f"estimator of {link}" if link else "estimator")
        _paint_port_labels(painter, block, theme, f2)
        return
    if block.kind == "dynamic":
        _paint_dynamic(painter, block, theme, r, font)
        return
    if len(port_spots(block)) > 2:
        # More than one input or output (a plant with a load input): name the ports.
        small = QFont(font)
        small.setPointSizeF(font.pointSizeF() * 0.8)
        _paint_port_labels(painter, block, theme, small)
        painter.setPen(QPen(theme.text))
    if den is None:
        f = QFont(font)
        italic = block.kind in ("plant", "gain")
        f.setItalic(italic)
        if italic:
            f.setPointSizeF(font.pointSizeF() * 1.25)
        fm = QFontMetricsF(f)
        while fm.horizontalAdvance(main) > r.width() - 8 and f.pointSizeF() > 6:
            f.setPointSizeF(f.pointSizeF() - 0.5)
            fm = QFontMetricsF(f)
        painter.setFont(f)
        painter.drawText(r, Qt.AlignmentFlag.AlignCenter, main)
    else:
        f = QFont(font)
        fm = QFontMetricsF(f)
        while max(fm.horizontalAdvance(main), fm.horizontalAdvance(den)) > r.width() - 8 and f.pointSizeF() > 6:
            f.setPointSizeF(f.pointSizeF() - 0.5)
            fm = QFontMetricsF(f)
        painter.setFont(f)
        bar = max(fm.horizontalAdvance(main), fm.horizontalAdvance(den)) + 6
        cy = r.center().y()
        painter.drawText(QRectF(r.left(), cy - fm.height() - 1, r.width(), fm.height()), Qt.AlignmentFlag.AlignCenter, main)
        painter.drawText(QRectF(r.left(), cy + 2, r.width(), fm.height()), Qt.AlignmentFlag.AlignCenter, den)
        painter.drawLine(QPointF(-bar / 2, cy + 0.5), QPointF(bar / 2, cy + 0.5))
    if block.kind == "integrator":
        f = QFont(font)
        f.setPointSizeF(font.pointSizeF() * 0.85)
        painter.setFont(f)
        painter.setPen(QPen(theme.caption))
        painter.drawText(QRectF(r.left() - 40, r.top() - 18, r.width() + 80, 16), Qt.AlignmentFlag.AlignCenter, block.name)


def _ordinal(n: int) -> str:
    return f"{n}{'th' if 10 <= n % 100 <= 20 else {1: 'st', 2: 'nd', 3: 'rd'}.get(n % 10, 'th')}"


@functools.lru_cache(maxsize=256)
def _sketch_points(params_json: str) -> tuple[int, tuple[tuple[float, float], ...]] | None:
    """(order, curve points in a unit box: x = log frequency, y = 0 at the top) from the engine."""
    from loopwright.engine.block_sketch import block_sketch
    from loopwright.engine.errors import EngineError

    try:
        sk = block_sketch(Block("sketch", "dynamic", "sketch", json.loads(params_json)))
    except (EngineError, ValueError, TypeError):
        return None
    db = 20.0 * np.log10(np.clip(sk.magnitude, 1e-12, 1e12))
    top = float(np.max(db[np.isfinite(db)])) if np.isfinite(db).any() else 0.0
    # 60 dB below the peak fill the box; anything lower sits on its floor.
    y = np.clip((top - db) / 60.0, 0.0, 1.0)
    x = np.linspace(0.0, 1.0, y.size)
    return sk.order, tuple(zip(x.tolist(), y.tolist()))


def _paint_dynamic(painter, block, theme, r: QRectF, font: QFont) -> None:
    """Our face for a dynamic block: its name over a thumbnail of its gain curve, with its order."""
    try:
        sketch = _sketch_points(json.dumps(block.params, sort_keys=True))
    except (TypeError, ValueError):
        sketch = None
    f = QFont(font)
    f.setBold(True)
    fm = QFontMetricsF(f)
    while fm.horizontalAdvance(block.name) > r.width() - 8 and f.pointSizeF() > 6:
        f.setPointSizeF(f.pointSizeF() - 0.5)
        fm = QFontMetricsF(f)
    painter.setFont(f)
    painter.setPen(QPen(theme.text))
    painter.drawText(QRectF(r.left(), r.top() + 2, r.width(), fm.height() + 2), Qt.AlignmentFlag.AlignCenter, block.name)
    box = QRectF(r.left() + 10, r.top() + fm.height() + 6, r.width() - 38, r.height() - fm.height() - 12)
    small = QFont(font)
    small.setPointSizeF(font.pointSizeF() * 0.75)
    painter.setFont(small)
    painter.setPen(QPen(theme.caption))
    if sketch is None:
        painter.drawText(box, Qt.AlignmentFlag.AlignCenter, "model?")
        return
    order, pts = sketch
    painter.drawText(QRectF(box.right() + 2, box.top(), r.right() - box.right() - 4, box.height()),
                     Qt.AlignmentFlag.AlignCenter, _ordinal(order) if order else "static")
    # Axes: gain up, frequency along (log), the way a magnitude plot reads.
    painter.setPen(QPen(theme.grid.darker(115) if not theme.dark else theme.grid.lighter(160), 1.0))
    painter.drawLine(QPointF(box.left(), box.top()), QPointF(box.left(), box.bottom()))
    painter.drawLine(QPointF(box.left(), box.bottom()), QPointF(box.right(), box.bottom()))
    path = QPainterPath()
    for k, (x, y) in enumerate(pts):
        p = QPointF(box.left() + x * box.width(), box.top() + y * box.height())
        path.moveTo(p) if k == 0 else path.lineTo(p)
    painter.setPen(QPen(theme.wire, 1.6, Qt.PenStyle.SolidLine, Qt.PenCapStyle.RoundCap, Qt.PenJoinStyle.RoundJoin))
    painter.setBrush(Qt.BrushStyle.NoBrush)
    painter.drawPath(path)


def _paint_port_labels(painter, block, theme, font) -> None:
    painter.setFont(font)
    painter.setPen(QPen(theme.caption))
    labels = {"xhat": "x̂", "yhat": "ŷ", "u": "u", "y": "y"}
    for s in port_spots(block):
        text = labels.get(s.name, s.name)
        inward = (-s.normal[0] * 10, -s.normal[1] * 10)
        rect = QRectF(s.x + inward[0] - 10, s.y + inward[1] - 8, 20, 16)
        painter.drawText(rect, Qt.AlignmentFlag.AlignCenter, text)


def _paint_sum(painter, block, theme, border, pen_w, font) -> None:
    r = SUM_RADIUS
    painter.setPen(QPen(border, pen_w))
    painter.setBrush(QBrush(theme.block_fill))
    painter.drawEllipse(QPointF(0, 0), r, r)
    f = QFont(font)
    f.setBold(True)
    painter.setFont(f)
    signs = block.params.get("signs", [])
    for s in port_spots(block):
        if not s.is_input:
            continue
        idx = int(s.name[2:]) - 1 if s.name[2:].isdigit() else -1
        sign = signs[idx] if 0 <= idx < len(signs) else "?"
        glyph = "−" if sign == "-" else sign
        # Beside the input where a textbook writes it: above a wire coming from the side,
        # left of one coming from below, right of one coming from above (so the signs of
        # a left and a top input never collide).
        nx, ny = s.normal
        if abs(nx) > 0.5:
            tx, ty = 0.0, -1.0
        elif ny > 0:
            tx, ty = -1.0, 0.0
        else:
            tx, ty = 1.0, 0.0
        cx = s.x + nx * 3 + tx * 10
        cy = s.y + ny * 3 + ty * 10
        painter.setPen(QPen(theme.problem if sign not in ("+", "-") else theme.text))
        painter.drawText(QRectF(cx - 8, cy - 9, 16, 18), Qt.AlignmentFlag.AlignCenter, glyph)


def _paint_source(painter, block, theme, border, pen_w, font) -> None:
    role = block.params.get("role", "reference")
    colour = theme.role_colour(role)
    r = SOURCE_RADIUS
    painter.setPen(QPen(border if border is not None else colour, pen_w))
    painter.setBrush(QBrush(theme.block_fill))
    painter.drawEllipse(QPointF(0, 0), r, r)
    painter.save()
    painter.setTransform(_orientation(block), True)
    painter.setPen(QPen(colour, 1.8, Qt.PenStyle.SolidLine, Qt.PenCapStyle.RoundCap, Qt.PenJoinStyle.RoundJoin))
    painter.setBrush(Qt.BrushStyle.NoBrush)
    path = QPainterPath()
    if role == "reference":
        # A step: the set-point the loop should follow.
        path.moveTo(-8, 5)
        path.lineTo(-2, 5)
        path.lineTo(-2, -5)
        path.lineTo(8, -5)
    elif role == "disturbance":
        # A jolt: a bolt-like zig-zag that pushes on the plant.
        path.moveTo(-3, -9)
        path.lineTo(4, -2)
        path.lineTo(-2, 1)
        path.lineTo(5, 9)
        painter.setBrush(Qt.BrushStyle.NoBrush)
        painter.drawPath(path)
        head = QPainterPath()
        head.moveTo(5, 9)
        head.lineTo(0.5, 7.5)
        head.moveTo(5, 9)
        head.lineTo(4.5, 4.5)
        path = head
    else:
        # Hiss: a ragged trace, the sensor's noise.
        ys = [0, -5, 3, -2, 6, -6, 2, -3, 4, 0]
        path.moveTo(-9, ys[0])
        for k, y in enumerate(ys[1:], 1):
            path.lineTo(-9 + 2 * k, y * 0.9)
    painter.drawPath(path)
    painter.restore()
    f = QFont(font)
    f.setItalic(True)
    painter.setFont(f)
    painter.setPen(QPen(theme.text))
    # Name on the side away from the output.
    out = next(s for s in port_spots(block) if not s.is_input)
    nx, ny = -out.normal[0], -out.normal[1]
    cx, cy = nx * (r + 14), ny * (r + 12)
    if abs(ny) > 0.5:
        cx, cy = r + 12, 0
    painter.drawText(QRectF(cx - 30, cy - 10, 60, 20), Qt.AlignmentFlag.AlignCenter, block.name)


def caption_rect(block: Block, caption_height: float = 16.0) -> QRectF:
    r = body_rect(block)
    return QRectF(r.left() - 40, r.bottom() + 3, r.width() + 80, caption_height)



def design_state_text(name: str, state: str) -> str:
    """The tooltip line of a design mark."""
    if state == "stale":
        return f"stale: the plant or recipe of {name} changed since it was designed; its matrix no longer follows the recipe"
    if state == "not designed yet":
        return f"not designed yet: the recipe of {name} has never been run; its matrix is a placeholder"
    return f"design not vouched for: {state}"


def paint_design_badge(painter, rect: QRectF, state: str, theme, font: QFont) -> None:
    """A small tab on the block's corner saying its design cannot be vouched for."""
    colour = QColor("#e0a100") if theme.dark else QColor("#a86b00")
    painter.setPen(QPen(colour.darker(130), 1.0))
    painter.setBrush(QBrush(colour))
    painter.drawRoundedRect(rect, 4, 4)
    f = QFont(font)
    f.setPointSizeF(max(6.0, font.pointSizeF() * 0.75))
    f.setBold(True)
    painter.setFont(f)
    painter.setPen(QPen(QColor("#ffffff") if not theme.dark else QColor("#1d2126")))
    painter.drawText(rect, Qt.AlignmentFlag.AlignCenter, "stale" if state == "stale" else "not designed" if state == "not designed yet" else "check design")
