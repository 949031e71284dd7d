"""Reading pictures in the GUI tests: what one canvas item paints, and which colours a
picture (a grabbed widget, a saved PNG) holds where.

A test of a picture asserts something drawn: an ink colour at a block, a wire's colour on
its route, the highlight colour on a highlighted item; never only a file's size.
"""
from __future__ import annotations

import numpy as np
from PySide6.QtCore import QPointF, QRectF, Qt
from PySide6.QtGui import QColor, QImage, QPainter
from PySide6.QtWidgets import QGraphicsItem, QStyleOptionGraphicsItem

__all__ = ["rgb_array", "item_picture", "item_to_picture", "mask_of", "carries", "paints", "outline_sides", "near_pixels", "window_point", "assert_canvas_drawn"]

#: How far (largest channel difference, 0-255) a pixel may be from a colour and still
#: count as that colour. Pictures of single items are painted at twice the scale, so
#: every stroke has fully covered pixels of its exact colour; the smallest gap between
#: two theme colours the tests tell apart is 20 (the light theme's noise glyph #7a3fb8
#: against the highlight #8e44ad).
TOLERANCE = 10


def rgb_array(image: QImage) -> np.ndarray:
    """The picture as an (height, width, 4) uint8 array of R, G, B, A."""
    img = image.convertToFormat(QImage.Format.Format_RGBA8888)
    h, w, stride = img.height(), img.width(), img.bytesPerLine()
    buf = np.frombuffer(img.constBits(), dtype=np.uint8, count=h * stride).reshape(h, stride)
    return buf[:, : 4 * w].reshape(h, w, 4).copy()


def mask_of(pixels: np.ndarray, colour, tol: int = TOLERANCE) -> np.ndarray:
    """Boolean (height, width): opaque pixels within ``tol`` of ``colour`` in every channel."""
    c = QColor(colour)
    ref = np.array([c.red(), c.green(), c.blue()], dtype=int)
    diff = np.abs(pixels[..., :3].astype(int) - ref).max(axis=-1)
    return (diff <= tol) & (pixels[..., 3] >= 200)


def item_picture(item: QGraphicsItem, *, scale: float = 2.0) -> tuple[np.ndarray, QRectF, float]:
    """Paint ``item`` alone (not its children) on a transparent picture, ``scale`` pixels
    per item unit, the way the scene would (an item flagged as having no contents paints
    nothing). Returns (pixels, the item rectangle pictured, scale)."""
    rect = item.boundingRect()
    w, h = max(1, int(np.ceil(rect.width() * scale))), max(1, int(np.ceil(rect.height() * scale)))
    image = QImage(w, h, QImage.Format.Format_ARGB32_Premultiplied)
    image.fill(Qt.GlobalColor.transparent)
    if not item.flags() & QGraphicsItem.GraphicsItemFlag.ItemHasNoContents:
        painter = QPainter(image)
        painter.scale(scale, scale)
        painter.translate(-rect.left(), -rect.top())
        option = QStyleOptionGraphicsItem()
        option.rect = rect.toRect()
        item.paint(painter, option, None)
        painter.end()
    return rgb_array(image), rect, scale


def paints(item: QGraphicsItem, colour, *, min_pixels: int = 4, tol: int = TOLERANCE) -> bool:
    """True when ``item`` paints at least ``min_pixels`` pixels of ``colour``."""
    pixels, _, _ = item_picture(item)
    return int(mask_of(pixels, colour, tol).sum()) >= min_pixels


def carries(pixels: np.ndarray, colour, background, *, share: float = 0.4, off: float = 40.0) -> np.ndarray:
    """Boolean (height, width): pixels that are ``colour`` laid over ``background`` with at
    least ``share`` coverage (an antialiased thin line is a blend of the two), and not some
    third colour (at most ``off`` away from the blend line, in RGB units)."""
    c, b = QColor(colour), QColor(background)
    cv = np.array([c.red(), c.green(), c.blue()], dtype=float)
    bv = np.array([b.red(), b.green(), b.blue()], dtype=float)
    d = cv - bv
    v = pixels[..., :3].astype(float) - bv
    t = (v @ d) / float(d @ d)
    e = np.linalg.norm(v - t[..., None] * d, axis=-1)
    return (t >= share) & (e <= off) & (pixels[..., 3] >= 200)


def outline_sides(block_item, colour, tol: int = TOLERANCE) -> int:
    """On how many of the four sides of its body the block item paints its outline in
    ``colour`` (the pixel at the middle of the side, on the outline's centre line). An
    output dot may sit on one side, so an outline in one colour shows on at least three."""
    from loopwright.gui.canvas.glyphs import body_rect

    pixels, rect, scale = item_picture(block_item)
    mask = mask_of(pixels, colour, tol)
    r = body_rect(block_item.block)
    c = r.center()
    sides = [QPointF(r.left(), c.y()), QPointF(r.right(), c.y()), QPointF(c.x(), r.top()), QPointF(c.x(), r.bottom())]
    return sum(near_pixels(mask, *item_to_picture(rect, scale, p), radius=1) for p in sides)


def near_pixels(mask: np.ndarray, x: float, y: float, radius: int = 2) -> bool:
    """True when ``mask`` is set somewhere within ``radius`` pixels of (x, y)."""
    h, w = mask.shape
    cx, cy = int(round(x)), int(round(y))
    x0, x1, y0, y1 = max(0, cx - radius), min(w, cx + radius + 1), max(0, cy - radius), min(h, cy + radius + 1)
    return bool(x0 < x1 and y0 < y1 and mask[y0:y1, x0:x1].any())


def item_to_picture(rect: QRectF, scale: float, point: QPointF) -> tuple[float, float]:
    """Where an item-coordinate ``point`` lies in the picture made by :func:`item_picture`."""
    return (point.x() - rect.left()) * scale, (point.y() - rect.top()) * scale


def window_point(win, scene_point: QPointF) -> tuple[int, int]:
    """Where a canvas scene point lies in a grab of the main window ``win``."""
    view = win.view
    p = view.viewport().mapTo(win, view.mapFromScene(scene_point))
    return p.x(), p.y()


def distance_to_routes(xy: np.ndarray, segments: np.ndarray) -> np.ndarray:
    """Distance of each point of ``xy`` (n, 2) to the nearest of ``segments`` (m, 2, 2)."""
    a, b = segments[:, 0, :][None], segments[:, 1, :][None]
    p = xy[:, None, :]
    ab = b - a
    den = np.maximum((ab * ab).sum(-1), 1e-12)
    t = np.clip(((p - a) * ab).sum(-1) / den, 0.0, 1.0)
    return np.linalg.norm(p - (a + t[..., None] * ab), axis=-1).min(axis=1)


def assert_canvas_drawn(win, pixels: np.ndarray) -> None:
    """The grab ``pixels`` of main window ``win`` shows its diagram where the scene has it.

    Every block's outline (its border colour, a source's role colour) crosses the middle
    of each side of its body; at least 90 % of the points along every wire's route carry
    the wire colour (a tag or a label may cover the rest); and every pixel painted fully
    in the wire colour on the canvas lies within 12 px of some route (an arrowhead, a
    branch dot or a vector's slash), so no wire is drawn where the model has none.
    """
    sc = win.scene
    t = sc.theme
    for item in sc.block_items.values():
        b = item.block
        outline = t.role_colour(b.params.get("role", "reference")) if b.kind == "source" else t.block_border
        mask = carries(pixels, outline, t.background)
        r = item.body_scene_rect()
        c = r.center()
        sides = [QPointF(r.left(), c.y()), QPointF(r.right(), c.y()), QPointF(c.x(), r.top()), QPointF(c.x(), r.bottom())]
        drawn = [near_pixels(mask, *window_point(win, p), radius=2) for p in sides]
        assert all(drawn), f"{b.kind} {b.name}: outline missing at sides {drawn} (left, right, top, bottom)"
    wire_mask = carries(pixels, t.wire, t.background)
    segments = []
    for item in sc.wire_items.values():
        points = []
        for route in item.routes:
            for (x0, y0), (x1, y1) in zip(route, route[1:]):
                a, b = window_point(win, QPointF(x0, y0)), window_point(win, QPointF(x1, y1))
                segments.append((a, b))
                points += [(x0 + (x1 - x0) * f, y0 + (y1 - y0) * f) for f in np.linspace(0.1, 0.9, 9)]
        on = [near_pixels(wire_mask, *window_point(win, QPointF(x, y)), radius=1) for x, y in points]
        assert sum(on) >= 0.9 * len(on), f"wire {item.label}: {sum(on)} of {len(on)} route points drawn"
    vp = win.view.viewport()
    top_left = vp.mapTo(win, vp.rect().topLeft())
    x0, y0, w, h = top_left.x(), top_left.y(), vp.width(), vp.height()
    full = mask_of(pixels[y0:y0 + h, x0:x0 + w], t.wire)
    ys, xs = np.nonzero(full)
    assert len(xs) > 0, "no wire colour on the canvas"
    far = distance_to_routes(np.column_stack([xs + x0, ys + y0]).astype(float), np.array(segments, dtype=float)) > 12.0
    assert not far.any(), f"{int(far.sum())} wire-coloured pixels off every route, e.g. at {(xs[far][0] + x0, ys[far][0] + y0)}"
