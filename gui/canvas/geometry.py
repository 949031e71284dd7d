"""Shapes of blocks and orthogonal wire routes, as plain numbers (no Qt).

Every block is drawn around its centre ``(x, y)`` from the layout. Port positions are
given in the block's own frame (inputs on the left, outputs on the right, signal flowing
left to right) and turned by :func:`orient`: first the optional mirror (``flip``, so a
feedback path can run right to left), then the rotation (degrees, clockwise on screen,
multiple of 90).

Routes are lists of points; consecutive points differ in x or in y only.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from loopwright.engine.diagram import Block
from loopwright.engine.ports import input_ports, output_ports

__all__ = [
    "PortSpot",
    "block_size",
    "orient",
    "port_spots",
    "route",
    "orthogonalize",
    "simplify",
    "separate_segments",
    "segments_overlap",
    "STUB",
    "SUM_RADIUS",
    "SOURCE_RADIUS",
]

STUB = 14.0
SUM_RADIUS = 15.0
SOURCE_RADIUS = 14.0

_SIZES = {
    "plant": (96.0, 56.0),
    "dynamic": (96.0, 56.0),
    "gain": (60.0, 44.0),
    "integrator": (52.0, 44.0),
    "estimator": (116.0, 76.0),
    "sum": (2 * SUM_RADIUS, 2 * SUM_RADIUS),
    "source": (2 * SOURCE_RADIUS, 2 * SOURCE_RADIUS),
}


@dataclass(frozen=True)
class PortSpot:
    """Where a port sits relative to its block's centre, and which way it faces.

    ``normal`` points away from the block: the way a wire leaves an output, or the way
    a wire comes from when it enters an input.
    """

    name: str
    is_input: bool
    x: float
    y: float
    normal: tuple[float, float]


def block_size(block: Block) -> tuple[float, float]:
    """(width, height) of the unrotated body in scene units."""
    w, h = _SIZES.get(block.kind, (80.0, 50.0))
    if block.kind in ("plant", "dynamic", "gain"):
        n = max(len(input_ports(block)), len(output_ports(block)))
        h = max(h, 24.0 * n)
    return w, h


def orient(x: float, y: float, rotation: float, flip: bool) -> tuple[float, float]:
    """Map a point of the block's own frame to the drawn frame (mirror, then rotate)."""
    if flip:
        x = -x
    quarter = int(round(rotation / 90.0)) % 4
    c, s = ((1, 0), (0, 1), (-1, 0), (0, -1))[quarter]
    return (c * x - s * y, s * x + c * y)


def _sum_input_offsets(n: int) -> list[tuple[float, float]]:
    # Textbook habit: the first input from the left, the second (usually the feedback)
    # from below, a third from above, any further ones spread over the left arc.
    spots = [(-1.0, 0.0), (0.0, 1.0), (0.0, -1.0)]
    extra = n - 3
    for k in range(max(extra, 0)):
        ang = math.radians(180.0 + (k + 1) * 90.0 / (extra + 1) * (1 if k % 2 == 0 else -1) * 0.9)
        spots.append((math.cos(ang), math.sin(ang)))
    return spots[:n]


def port_spots(block: Block) -> list[PortSpot]:
    """Every port of ``block`` with its oriented position and outward normal."""
    rot = float(block.layout.get("rotation", 0) or 0)
    flip = bool(block.layout.get("flip", False))
    ins, outs = input_ports(block), output_ports(block)
    w, h = block_size(block)
    raw: list[tuple[str, bool, float, float, float, float]] = []
    if block.kind == "sum":
        r = SUM_RADIUS
        for name, (ux, uy) in zip(ins, _sum_input_offsets(len(ins))):
            raw.append((name, True, ux * r, uy * r, ux, uy))
        raw.append(("out", False, r, 0.0, 1.0, 0.0))
    else:
        for k, name in enumerate(ins):
            raw.append((name, True, -w / 2, -h / 2 + h * (k + 0.5) / len(ins), -1.0, 0.0))
        for k, name in enumerate(outs):
            raw.append((name, False, w / 2, -h / 2 + h * (k + 0.5) / len(outs), 1.0, 0.0))
    spots = []
    for name, is_in, x, y, nx, ny in raw:
        px, py = orient(x, y, rot, flip)
        qx, qy = orient(nx, ny, rot, flip)
        spots.append(PortSpot(name, is_in, px, py, (qx, qy)))
    return spots


def _sgn(v: float) -> int:
    return (v > 1e-9) - (v < -1e-9)


def orthogonalize(points: list[tuple[float, float]], *, first_horizontal: bool = True) -> list[tuple[float, float]]:
    """Insert elbows so that every segment is horizontal or vertical.

    Each elbow turns away from the direction of the previous segment, so a chain of
    user bends stays a staircase instead of doubling back.
    """
    if not points:
        return []
    out = [tuple(points[0])]
    last_horizontal = not first_horizontal
    for nxt in points[1:]:
        cur = out[-1]
        dx, dy = abs(cur[0] - nxt[0]) > 1e-9, abs(cur[1] - nxt[1]) > 1e-9
        if dx and dy:
            # The elbow's second leg runs the same way as the previous segment did.
            out.append((cur[0], nxt[1]) if last_horizontal else (nxt[0], cur[1]))
        elif dx or dy:
            last_horizontal = dx
        out.append(tuple(nxt))
    return out


def simplify(points: list[tuple[float, float]]) -> list[tuple[float, float]]:
    """Drop repeated points and the middle of three collinear ones (keeps the ends)."""
    pts: list[tuple[float, float]] = []
    for p in points:
        if pts and abs(pts[-1][0] - p[0]) < 1e-9 and abs(pts[-1][1] - p[1]) < 1e-9:
            continue
        pts.append(p)
    k = 1
    while k < len(pts) - 1:
        a, b, c = pts[k - 1], pts[k], pts[k + 1]
        if (abs(a[0] - b[0]) < 1e-9 and abs(b[0] - c[0]) < 1e-9) or (abs(a[1] - b[1]) < 1e-9 and abs(b[1] - c[1]) < 1e-9):
            # Keep a reversal (a spike) out of the route as well.
            del pts[k]
            k = max(k - 1, 1)
        else:
            k += 1
    return pts


def route(
    p: tuple[float, float],
    dp: tuple[float, float],
    q: tuple[float, float],
    dq: tuple[float, float],
    *,
    bends: list | None = None,
    detour_y: float | None = None,
    gap_y: float | None = None,
    early_turn: bool = False,
    stub: float = STUB,
) -> list[tuple[float, float]]:
    """Orthogonal route from an output at ``p`` (facing ``dp``) to an input at ``q`` (facing ``dq``).

    ``bends`` are the user's interior points (kept as given, elbows added between them);
    without them an automatic route is chosen. A wire that has to run backwards (a
    feedback path) takes the lane ``gap_y`` between the two blocks when they are stacked
    with room between them, else the lane ``detour_y`` below both. ``early_turn`` makes a
    forward wire turn right after leaving its source instead of half way (the branches of
    a fan-out then leave from one visible branch point, as drawn in textbooks).
    """
    a = (p[0] + dp[0] * stub, p[1] + dp[1] * stub)
    b = (q[0] + dq[0] * stub, q[1] + dq[1] * stub)
    if bends:
        mid = orthogonalize([a] + [tuple(map(float, pt)) for pt in bends] + [b], first_horizontal=abs(dp[0]) > 0.5)
        return simplify([p] + mid + [q])
    hp, hq = abs(dp[0]) > 0.5, abs(dq[0]) > 0.5
    if hp and hq:
        pts = _route_parallel(a, b, dp[0], dq[0], detour=detour_y, gap=gap_y, early=early_turn)
    elif not hp and not hq:
        swapped = _route_parallel((a[1], a[0]), (b[1], b[0]), dp[1], dq[1], detour=None, gap=None, early=early_turn)
        pts = [(y, x) for x, y in swapped]
    elif hp:
        corner = (b[0], a[1])
        if _sgn(b[1] - a[1]) == -_sgn(dq[1]) and _sgn(b[0] - a[0]) * dp[0] >= 0:
            pts = [a, corner, b]
        elif gap_y is not None and _sgn(b[1] - gap_y) == -_sgn(dq[1]) and _sgn(gap_y - a[1]) != 0:
            # Cross over in the free lane between the rows: a leg level with the port's
            # stub would run along (or through) the blocks beside the destination.
            pts = [a, (a[0], gap_y), (b[0], gap_y), b]
        else:
            pts = [a, (a[0], b[1]), b]
    else:
        corner = (a[0], b[1])
        if _sgn(b[0] - a[0]) == -_sgn(dq[0]) and _sgn(b[1] - a[1]) * dp[1] >= 0:
            pts = [a, corner, b]
        else:
            pts = [a, (b[0], a[1]), b]
    return simplify([p] + pts + [q])


def _route_parallel(a, b, da: float, db: float, *, detour: float | None, gap: float | None, early: bool):
    """Both ends face along x: forward (mid-x), same way (outer x), or backward (a lane).

    When the two blocks sit in different rows with room between them (``gap``), the
    wires that cannot go straight cross over in that gap rather than through a block.
    """
    ahead = (b[0] - a[0]) * da
    if db == -da and ahead >= 0:
        if abs(a[1] - b[1]) < 1e-9:
            return [a, b]
        m = a[0] if early else (a[0] + b[0]) / 2.0
        return [a, (m, a[1]), (m, b[1]), b]
    if db == da:
        xe = max(a[0], b[0]) if da > 0 else min(a[0], b[0])
        if gap is not None:
            return [a, (a[0], gap), (xe, gap), (xe, b[1]), b]
        return [a, (xe, a[1]), (xe, b[1]), b]
    lane = gap if gap is not None else (detour if detour is not None else max(a[1], b[1]) + 40.0)
    return [a, (a[0], lane), (b[0], lane), b]


Segment = tuple[tuple[float, float], tuple[float, float]]


def segments_overlap(a: Segment, b: Segment, *, tol: float = 1.0) -> bool:
    """Whether two axis-parallel segments lie on one line and share more than a point."""
    (ax0, ay0), (ax1, ay1) = a
    (bx0, by0), (bx1, by1) = b
    a_h, b_h = abs(ay0 - ay1) < 1e-9, abs(by0 - by1) < 1e-9
    a_v, b_v = abs(ax0 - ax1) < 1e-9, abs(bx0 - bx1) < 1e-9
    if a_h and b_h and abs(ay0 - by0) < tol:
        lo, hi = max(min(ax0, ax1), min(bx0, bx1)), min(max(ax0, ax1), max(bx0, bx1))
        return hi - lo > tol
    if a_v and b_v and abs(ax0 - bx0) < tol:
        lo, hi = max(min(ay0, ay1), min(by0, by1)), min(max(ay0, ay1), max(by0, by1))
        return hi - lo > tol
    return False


def _ends_keep_direction(old: list, new: list) -> bool:
    """The stubs at both ports still leave and enter the way they did (no spike at a port)."""
    for (p0, p1), (q0, q1) in (((old[0], old[1]), (new[0], new[1])), ((old[-2], old[-1]), (new[-2], new[-1]))):
        for i in (0, 1):
            d_old, d_new = p1[i] - p0[i], q1[i] - q0[i]
            if _sgn(d_old) != _sgn(d_new) or (abs(d_old) > 1e-9 and abs(d_new) < 4.0):
                return False
    return True


def separate_segments(routes: list[list[tuple[float, float]]], taken: list[Segment], *, step: float = 10.0, tries: int = 6):
    """Shift the inner segments of ``routes`` that would lie on a ``taken`` segment (another
    wire's) sideways, by ``step`` at a time, so no two wires are drawn on top of each other.

    The segments that end at a port stay put; a shifted segment drags the ends of its two
    neighbours along, so the route stays orthogonal. A segment with no free lane within
    ``tries`` steps either way is left where it was.
    """
    out = []
    for pts in routes:
        pts = [tuple(p) for p in pts]
        for k in range(1, len(pts) - 2):
            seg = (pts[k], pts[k + 1])
            if not any(segments_overlap(seg, t) for t in taken):
                continue
            horizontal = abs(seg[0][1] - seg[1][1]) < 1e-9
            for n in range(1, tries + 1):
                done = False
                for d in (n * step, -n * step):
                    moved = list(pts)
                    if horizontal:
                        moved[k] = (pts[k][0], pts[k][1] + d)
                        moved[k + 1] = (pts[k + 1][0], pts[k + 1][1] + d)
                    else:
                        moved[k] = (pts[k][0] + d, pts[k][1])
                        moved[k + 1] = (pts[k + 1][0] + d, pts[k + 1][1])
                    new_seg = (moved[k], moved[k + 1])
                    if _ends_keep_direction(pts, moved) and not any(segments_overlap(new_seg, t) for t in taken):
                        pts, done = moved, True
                        break
                if done:
                    break
        out.append(pts)
    return out
