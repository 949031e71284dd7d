"""The scene: block and wire items kept in step with a :class:`~loopwright.gui.document.Document`.

The scene listens to the document's signals and updates only the items concerned; it
turns mouse gestures into commands (a finished drag of blocks, a new connection, a moved
wire segment, a drop from the shelf) and never changes the diagram itself. It also
carries the markings from the live model: problems on blocks and wires, signal widths,
and an arbitrary highlighted set (for the analysis panels).
"""
from __future__ import annotations

import json
import math

from PySide6.QtCore import QLineF, QPointF, QRectF, Qt, QTimer, Signal
from PySide6.QtGui import QFont, QPainterPath, QPen
from PySide6.QtWidgets import QGraphicsPathItem, QGraphicsScene

from loopwright.engine.diagram import PortRef
from loopwright.engine.errors import EngineError
from loopwright.gui.canvas.block_item import BlockItem
from loopwright.gui.canvas.geometry import separate_segments
from loopwright.gui.canvas.port_item import PortItem
from loopwright.gui.canvas.spatial import RectIndex
from loopwright.gui.canvas.wire_item import WireItem
from loopwright.gui.commands import AddBlock, Connect, Disconnect, MoveBlocks, SetWireLayout

__all__ = ["DiagramScene", "BLOCK_MIME"]

BLOCK_MIME = "application/x-loopwright-block-kind"

_SNAP_RADIUS = 18.0
#: How far separate_segments may shift a segment (its steps times its tries), and a little more.
_LANE_REACH = 62.0
_DRAG_START = 6.0


class DiagramScene(QGraphicsScene):
    """Items for every block and wire of ``document``.

    Signals
    -------
    edit_refused(str)
        A gesture the engine refused (e.g. a connection to an input already fed); the
        window shows the message in the status bar.
    """

    edit_refused = Signal(str)

    def __init__(self, document, theme, *, grid_size: float = 10.0, font: QFont | None = None, parent=None):
        super().__init__(parent)
        self.document = document
        self.theme = theme
        self.grid_size = grid_size
        self.font_ = font or QFont("DejaVu Sans", 9)
        self.block_items: dict[str, BlockItem] = {}
        self.wire_items: dict[str, WireItem] = {}
        self._wires_of: dict[str, set[str]] = {}
        self._link: dict | None = None
        self._pending_branch: tuple[str, QPointF] | None = None
        self._widths: dict[str, int] = {}
        self._segments: dict[str, list] = {}  # wire id -> its drawn segments (lanes taken)
        self._label_rects: dict[str, QRectF] = {}  # wire id -> where its name is written
        # the same names, segments and block bodies by place, so placing one wire looks at
        # its neighbours only (opening a diagram was quadratic in its wires)
        self._label_index = RectIndex()
        self._segment_index = RectIndex()
        self._body_index = RectIndex()
        self._rect_pending = False
        # what the live model and the pairs last marked on the items (set_problems, set_tags,
        # ...): an edit that changes none of it (most parameter edits) visits no item
        self._marks: dict[str, object] = {}
        self.setItemIndexMethod(QGraphicsScene.ItemIndexMethod.BspTreeIndex)
        self.setBackgroundBrush(theme.background)
        d = document
        d.block_added.connect(self._on_block_added)
        d.block_removed.connect(self._on_block_removed)
        d.wire_added.connect(self._on_wire_added)
        d.wire_removed.connect(self._on_wire_removed)
        d.wire_changed.connect(self._on_wire_changed)
        d.params_changed.connect(self._on_block_changed)
        d.layout_changed.connect(self._on_block_changed)
        d.renamed.connect(self._on_block_changed)
        d.caption_changed.connect(self._on_block_changed)
        d.wire_layout_changed.connect(self._on_wire_changed)
        d.wire_renamed.connect(self._on_wire_changed)
        d.diagram_replaced.connect(self._on_diagram_replaced)
        self._on_diagram_replaced()

    # ---- document -> items ----------------------------------------------------------------
    def _on_diagram_replaced(self) -> None:
        self._link = None
        self._marks.clear()  # an item came or went: the next marks go to every item
        self._pending_branch = None
        self.clear()
        self._segments.clear()
        self._label_rects.clear()
        for index in (self._label_index, self._segment_index, self._body_index):
            index.clear()
        self.block_items.clear()
        self.wire_items.clear()
        self._wires_of.clear()
        self._widths.clear()
        for bid in self.document.diagram.blocks:
            self._add_block_item(bid)
        for wid in self.document.diagram.wires:
            self._add_wire_item(wid)
        self._mark_open_inputs()
        self._refit_scene_rect()

    def _add_block_item(self, bid: str) -> BlockItem:
        self._marks.clear()  # an item came or went: the next marks go to every item
        item = BlockItem(self.document.diagram.blocks[bid], self.theme, font=self.font_, grid=self.grid_size)
        self.block_items[bid] = item
        self._wires_of.setdefault(bid, set())
        self.addItem(item)
        self._index_body(bid)
        return item

    def _index_body(self, bid: str) -> None:
        """Record where block ``bid``'s body is now (for placing wire names around it)."""
        item = self.block_items.get(bid)
        if item is None:
            self._body_index.discard(bid)
            return
        r = item.body_scene_rect()
        self._body_index.set(bid, [(r.left(), r.top(), r.right(), r.bottom())], r)

    def _mark_open_inputs(self, block_ids=None) -> None:
        """Tell blocks which of their inputs no wire feeds (all blocks when None)."""
        d = self.document.diagram
        fed = {(t.block, t.port) for w in d.wires.values() for t in w.targets}
        for bid in (self.block_items if block_ids is None else block_ids):
            item = self.block_items.get(bid)
            if item is not None:
                item.set_open_inputs(p.ref.port for (name, is_in), p in item.ports.items() if is_in and (bid, name) not in fed)

    def _add_wire_item(self, wid: str) -> WireItem:
        self._marks.clear()  # an item came or went: the next marks go to every item
        item = WireItem(wid, self, self.theme, font=self.font_)
        self.wire_items[wid] = item
        self.addItem(item)
        self._index_wire(wid)
        item.set_signal_width(self._widths.get(wid))
        item.recompute()
        return item

    def _index_wire(self, wid: str) -> None:
        for s in self._wires_of.values():
            s.discard(wid)
        w = self.document.diagram.wires.get(wid)
        if w is None:
            return
        for bid in {w.source.block, *(t.block for t in w.targets)}:
            self._wires_of.setdefault(bid, set()).add(wid)

    def _unindex_wire(self, wid: str) -> None:
        w_blocks = [bid for bid, s in self._wires_of.items() if wid in s]
        for bid in w_blocks:
            self._wires_of[bid].discard(wid)

    def _on_block_added(self, bid: str) -> None:
        self._add_block_item(bid)
        self._mark_open_inputs([bid])
        self._fit_scene_rect()

    def _on_block_removed(self, bid: str) -> None:
        self._marks.clear()  # an item came or went: the next marks go to every item
        item = self.block_items.pop(bid, None)
        self._wires_of.pop(bid, None)
        self._body_index.discard(bid)
        if item is not None:
            item._drop_tags()
            self.removeItem(item)

    def _on_block_changed(self, bid: str) -> None:
        item = self.block_items.get(bid)
        if item is None:
            return
        before = self._block_geometry(item)
        item.sync(self.document.diagram.blocks[bid])
        self._mark_open_inputs([bid])
        if self._block_geometry(item) == before:
            # a parameter-only edit (a gain's matrix of the same shape): the body and the
            # ports stay where they were, so its wires, their lanes and their names too
            return
        self._index_body(bid)
        self._reroute_block(bid)
        self._fit_scene_rect()

    @staticmethod
    def _block_geometry(item: BlockItem) -> tuple:
        """What a block's wires are routed around: its body in the scene and its ports'
        places and directions."""
        r = item.body_scene_rect()
        ports = sorted((name, is_in, p.pos().x(), p.pos().y(), tuple(p.normal)) for (name, is_in), p in item.ports.items())
        return (r.x(), r.y(), r.width(), r.height(), tuple(ports))

    def _on_wire_added(self, wid: str) -> None:
        self._add_wire_item(wid)
        self._mark_open_inputs()

    def _on_wire_removed(self, wid: str) -> None:
        self._marks.clear()  # an item came or went: the next marks go to every item
        self._segments.pop(wid, None)
        self._label_rects.pop(wid, None)
        self._segment_index.discard(wid)
        self._label_index.discard(wid)
        item = self.wire_items.pop(wid, None)
        self._unindex_wire(wid)
        if item is not None:
            item._drop_tags()
            self.removeItem(item)
        self._mark_open_inputs()

    def _on_wire_changed(self, wid: str) -> None:
        item = self.wire_items.get(wid)
        if item is None:
            return
        self._index_wire(wid)
        item.recompute()
        self._mark_open_inputs()

    def _reroute_block(self, bid: str) -> None:
        for wid in self._wires_of.get(bid, ()):
            item = self.wire_items.get(wid)
            if item is not None:
                item.recompute()

    def claim_lanes(self, wire_id: str, routes: list) -> list:
        """``routes`` of ``wire_id`` with inner segments moved off other wires' segments;
        the result is recorded as that wire's lanes."""
        pts_all = [pt for pts in routes for pt in pts]
        taken = []
        if pts_all:
            # a segment can only be moved onto a segment within its reach (separate_segments'
            # steps): the others cannot change the answer
            xs, ys = [pt[0] for pt in pts_all], [pt[1] for pt in pts_all]
            box = (min(xs) - _LANE_REACH, min(ys) - _LANE_REACH, max(xs) + _LANE_REACH, max(ys) + _LANE_REACH)
            taken = [seg for _wid, segs in self._segment_index.near(box, skip=wire_id) for seg in segs]
        routes = separate_segments(routes, taken) if taken else routes
        segs = [(a, b) for pts in routes for a, b in zip(pts, pts[1:])]
        self._segments[wire_id] = segs
        self._segment_index.set(wire_id, [(a[0], a[1], b[0], b[1]) for a, b in segs], segs)
        return routes

    def claim_label(self, wire_id: str, candidates: list[QRectF]) -> QRectF:
        """The first of ``candidates`` that overlaps no other wire's name and no block,
        recorded as where ``wire_id``'s name goes (the first one if none is free)."""
        others, bodies = [], []
        if candidates:
            box = (min(r.left() for r in candidates) - 2, min(r.top() for r in candidates) - 2,
                   max(r.right() for r in candidates) + 2, max(r.bottom() for r in candidates) + 2)
            others = [r for _wid, r in self._label_index.near(box, skip=wire_id) if not r.isNull()]
            bodies = [r for _bid, r in self._body_index.near(box)]
            # Other wires' lines too: a name written across another wire reads as its label.
            bodies += [QRectF(QPointF(min(a[0], b[0]), min(a[1], b[1])), QPointF(max(a[0], b[0]), max(a[1], b[1]))).adjusted(-1, -1, 1, 1)
                       for _wid, segs in self._segment_index.near(box, skip=wire_id) for a, b in segs]
        chosen = candidates[0] if candidates else QRectF()
        for r in candidates:
            if not any(r.intersects(o) for o in others) and not any(r.intersects(b) for b in bodies):
                chosen = r
                break
        self._label_rects[wire_id] = chosen
        if chosen.isNull():
            self._label_index.discard(wire_id)
        else:
            self._label_index.set(wire_id, [(chosen.left(), chosen.top(), chosen.right(), chosen.bottom())], chosen)
        return chosen

    def block_item_moved(self, item: BlockItem) -> None:
        """Called by a block item while it is dragged: its wires follow at once."""
        self._index_body(item.block_id)
        self._reroute_block(item.block_id)

    def _fit_scene_rect(self) -> None:
        # Many blocks change in one command (a group move): recompute the rectangle once,
        # after the command, instead of once per block.
        if not self._rect_pending:
            self._rect_pending = True
            QTimer.singleShot(0, self, self._refit_scene_rect)

    def _refit_scene_rect(self) -> None:
        self._rect_pending = False
        rect = self.itemsBoundingRect().adjusted(-400, -300, 400, 300)
        rect = rect.united(QRectF(-600, -400, 1200, 800))
        self.setSceneRect(rect)

    # ---- markings from the live model --------------------------------------------------------
    def set_problems(self, problems) -> None:
        """Mark the culprits of ``problems`` (objects with message, block_ids, wire_ids)."""
        by_block: dict[str, list[str]] = {}
        by_wire: dict[str, list[str]] = {}
        errors: set[str] = set()
        for p in problems:
            is_error = getattr(p, "severity", "error") == "error"
            for b in getattr(p, "block_ids", ()) or ():
                by_block.setdefault(b, []).append(p.message)
                if is_error:
                    errors.add(b)
            for w in getattr(p, "wire_ids", ()) or ():
                by_wire.setdefault(w, []).append(p.message)
                if is_error:
                    errors.add(w)
        marks = (by_block, by_wire, errors)
        if marks == self._marks.get("problems"):
            return  # the same marks (most edits): no item to visit
        self._marks["problems"] = marks
        for bid, item in self.block_items.items():
            item.set_problems(by_block.get(bid, []), warnings_only=bid not in errors)
        for wid, item in self.wire_items.items():
            item.set_problems(by_wire.get(wid, []), warnings_only=wid not in errors)

    def set_design_states(self, states: dict[str, str]) -> None:
        """Mark designed blocks whose matrix cannot be vouched for, ``{block id: state}``
        (``"stale"``, ``"not designed yet"``, ...); other blocks lose their mark."""
        marks = dict(states)
        if marks == self._marks.get("design"):
            return
        self._marks["design"] = marks
        for bid, item in self.block_items.items():
            item.set_design_state(states.get(bid, ""))

    def set_widths(self, widths: dict[str, int]) -> None:
        """Signal widths by wire id (vectors are drawn heavier, with their width)."""
        if widths == self._widths and "widths" in self._marks:
            return
        self._widths = dict(widths)
        self._marks["widths"] = True
        for wid, item in self.wire_items.items():
            item.set_signal_width(self._widths.get(wid))

    def highlight(self, block_ids=(), wire_ids=()) -> None:
        """Highlight any set of blocks and wires (an empty call clears it)."""
        bs, ws = set(block_ids), set(wire_ids)
        for bid, item in self.block_items.items():
            item.set_highlighted(bid in bs)
        for wid, item in self.wire_items.items():
            item.set_highlighted(wid in ws)

    def set_tags(self, block_tags: dict, wire_tags: dict) -> None:
        """Pin tags, ``{id: [(text, QColor), ...]}`` for blocks and wires; others lose theirs."""
        marks = ({k: [(t, c.name()) for t, c in v] for k, v in block_tags.items()},
                 {k: [(t, c.name()) for t, c in v] for k, v in wire_tags.items()})
        if marks == self._marks.get("tags"):
            return
        self._marks["tags"] = marks
        for bid, item in self.block_items.items():
            item.set_tags(block_tags.get(bid, []), self.font_)
        for wid, item in self.wire_items.items():
            item.set_tags(wire_tags.get(wid, []), self.font_)

    def set_theme(self, theme) -> None:
        self.theme = theme
        self.setBackgroundBrush(theme.background)
        for item in list(self.block_items.values()) + list(self.wire_items.values()):
            item.set_theme(theme)
        self.update()

    # ---- selection ---------------------------------------------------------------------------
    def selected_block_ids(self) -> list[str]:
        return [i.block_id for i in self.selectedItems() if isinstance(i, BlockItem)]

    def selected_wire_ids(self) -> list[str]:
        return [i.wire_id for i in self.selectedItems() if isinstance(i, WireItem)]

    def select_ids(self, block_ids=(), wire_ids=()) -> None:
        self.clearSelection()
        for b in block_ids:
            if b in self.block_items:
                self.block_items[b].setSelected(True)
        for w in wire_ids:
            if w in self.wire_items:
                self.wire_items[w].setSelected(True)

    # ---- commands from gestures ------------------------------------------------------------------
    def _push(self, command) -> bool:
        try:
            self.document.push(command)
        except EngineError as err:
            self.edit_refused.emit(str(err))
            return False
        return True

    def free_offset(self, rects: list[QRectF], start: tuple[float, float] = (0.0, 0.0), *, margin: float = 16.0,
                    avoid_wires: bool = True) -> tuple[float, float]:
        """The first shift, from ``start`` rightwards then row by row, that puts ``rects``
        (scene rectangles of new blocks) clear of every block on the canvas, so nothing new
        lands on top of what is there."""
        bodies = [it.body_scene_rect().adjusted(-margin, -margin, margin, margin) for it in self.block_items.values()]
        if avoid_wires:
            # A block on a wire would hide it: the wires' segments count as taken too.
            bodies += [QRectF(QPointF(min(a[0], b[0]), min(a[1], b[1])), QPointF(max(a[0], b[0]), max(a[1], b[1]))).adjusted(-4, -4, 4, 4)
                       for segs in self._segments.values() for a, b in segs]
        step = max(self.grid_size, 1.0) * 4
        for row in range(40):
            for col in range(40):
                dx, dy = start[0] + col * step, start[1] + row * step
                moved = [r.translated(dx, dy) for r in rects]
                if not any(m.intersects(b) for m in moved for b in bodies):
                    return dx, dy
        return start

    def free_spot(self, kind: str, pos: QPointF, params: dict | None = None) -> QPointF:
        """Where a new ``kind`` block near ``pos`` sits clear of the others (beside them)."""
        from loopwright.engine.diagram import Block, default_params
        from loopwright.gui.canvas.glyphs import body_rect

        probe = Block("probe", kind, "probe", params or default_params(kind), {"x": 0, "y": 0, "rotation": 0, "flip": False})
        dx, dy = self.free_offset([body_rect(probe).translated(pos)])
        return QPointF(pos.x() + dx, pos.y() + dy)

    def place_block(self, kind: str, pos: QPointF, params: dict | None = None) -> str | None:
        g = self.grid_size or 1.0
        layout = {"x": round(pos.x() / g) * g, "y": round(pos.y() / g) * g, "rotation": 0, "flip": False}
        cmd = AddBlock(self.document, kind, params=params, layout=layout)
        if not self._push(cmd):
            return None
        self.select_ids([cmd.block_id])
        return cmd.block_id

    def commit_moves(self) -> bool:
        """Turn positions changed by a mouse drag into one undoable move."""
        changes = {}
        for bid, item in self.block_items.items():
            lay = self.document.diagram.blocks[bid].layout
            x, y = item.pos().x(), item.pos().y()
            if abs(x - float(lay.get("x", 0.0))) > 1e-9 or abs(y - float(lay.get("y", 0.0))) > 1e-9:
                changes[bid] = {"x": x, "y": y}
        if not changes:
            return False
        return self._push(MoveBlocks(self.document, changes))

    def remove_branch(self, wire_id: str, target: PortRef) -> bool:
        """Detach one target of a fan-out wire (the rest of the wire stays)."""
        return self._push(Disconnect(self.document, wire_id, target))

    def nudge_selection(self, dx: float, dy: float) -> bool:
        """Move the selected blocks by (dx, dy) as one command (arrow keys)."""
        d = self.document.diagram
        changes = {
            b: {"x": float(d.blocks[b].layout.get("x", 0.0)) + dx, "y": float(d.blocks[b].layout.get("y", 0.0)) + dy}
            for b in self.selected_block_ids()
        }
        return bool(changes) and self._push(MoveBlocks(self.document, changes, text="Nudge"))

    def commit_wire_bends(self, wid: str, target_index: int, points: list[list[float]]) -> None:
        w = self.document.diagram.wires.get(wid)
        if w is None:
            return
        lay = json.loads(json.dumps(w.layout))
        lay.setdefault("bends", {})[str(target_index)] = points
        if not self._push(SetWireLayout(self.document, wid, lay)):
            self.wire_items[wid].recompute()

    def connect_ports(self, source: PortRef, target: PortRef) -> str | None:
        cmd = Connect(self.document, source, target)
        return cmd.wire_id if self._push(cmd) else None

    # ---- mouse: connections, branches, moves ------------------------------------------------------
    def _valid_ends(self, from_input: bool) -> list[PortItem]:
        if from_input:
            return [p for it in self.block_items.values() for p in it.ports.values() if not p.is_input]
        fed = {t for w in self.document.diagram.wires.values() for t in w.targets}
        return [p for it in self.block_items.values() for p in it.ports.values() if p.is_input and p.ref not in fed]

    def _start_link(self, origin: QPointF, *, source: PortRef | None, target: PortRef | None) -> None:
        valid = self._valid_ends(from_input=target is not None)
        for it in self.block_items.values():
            for p in it.ports.values():
                if p._target_state == 3:
                    p.set_target_state(0)
        for p in valid:
            p.set_target_state(1)
        temp = QGraphicsPathItem()
        temp.setPen(QPen(self.theme.target_ok, 1.5, Qt.PenStyle.DashLine))
        temp.setZValue(5)
        self.addItem(temp)
        self._link = {"origin": origin, "source": source, "target": target, "valid": valid, "temp": temp, "hover": None}

    def _nearest_valid(self, pos: QPointF) -> PortItem | None:
        best, best_d = None, _SNAP_RADIUS
        for p in self._link["valid"]:
            d = QLineF(p.scenePos(), pos).length()
            if d < best_d:
                best, best_d = p, d
        return best

    def _end_link(self, pos: QPointF | None) -> None:
        link, self._link = self._link, None
        for p in link["valid"]:
            p.set_target_state(0)
        self.removeItem(link["temp"])
        if pos is None:
            return
        hit = None
        best_d = _SNAP_RADIUS
        for p in link["valid"]:
            d = QLineF(p.scenePos(), pos).length()
            if d < best_d:
                hit, best_d = p, d
        if hit is None:
            return
        if link["source"] is not None:
            self.connect_ports(link["source"], hit.ref)
        else:
            self.connect_ports(hit.ref, link["target"])

    def mousePressEvent(self, event) -> None:
        if event.button() == Qt.MouseButton.LeftButton:
            item = self.itemAt(event.scenePos(), self.views()[0].transform() if self.views() else self._identity())
            if isinstance(item, PortItem):
                fed = self.document.diagram.wire_into(item.ref) if item.is_input else None
                if item.is_input and fed is not None:
                    # Dragging from a fed input starts from the wire's source instead: a branch.
                    self._start_link(event.scenePos(), source=fed.source, target=None)
                elif item.is_input:
                    self._start_link(item.scenePos(), source=None, target=item.ref)
                else:
                    self._start_link(item.scenePos(), source=item.ref, target=None)
                event.accept()
                return
            if isinstance(item, WireItem) and item.handle_at(event.scenePos()) is None:
                self._pending_branch = (item.wire_id, event.scenePos())
        super().mousePressEvent(event)

    @staticmethod
    def _identity():
        from PySide6.QtGui import QTransform

        return QTransform()

    def mouseMoveEvent(self, event) -> None:
        if self._pending_branch is not None and self._link is None:
            wid, start = self._pending_branch
            if QLineF(start, event.scenePos()).length() >= _DRAG_START and wid in self.document.diagram.wires:
                self._pending_branch = None
                self._start_link(start, source=self.document.diagram.wires[wid].source, target=None)
        if self._link is not None:
            pos = event.scenePos()
            near = self._nearest_valid(pos)
            if self._link["hover"] is not near:
                if self._link["hover"] is not None:
                    self._link["hover"].set_target_state(1)
                if near is not None:
                    near.set_target_state(2)
                self._link["hover"] = near
            end = near.scenePos() if near is not None else pos
            o = self._link["origin"]
            path = QPainterPath(o)
            mx = (o.x() + end.x()) / 2
            path.lineTo(mx, o.y())
            path.lineTo(mx, end.y())
            path.lineTo(end)
            self._link["temp"].setPath(path)
            event.accept()
            return
        super().mouseMoveEvent(event)

    def mouseReleaseEvent(self, event) -> None:
        self._pending_branch = None
        if self._link is not None:
            self._end_link(event.scenePos())
            grabber = self.mouseGrabberItem()
            if grabber is not None:
                # A branch started on a wire item, which still holds the mouse.
                grabber.ungrabMouse()
            event.accept()
            return
        super().mouseReleaseEvent(event)
        if event.button() == Qt.MouseButton.LeftButton:
            self.commit_moves()

    def cancel_gesture(self) -> None:
        if self._link is not None:
            self._end_link(None)

    # ---- drops from the shelf --------------------------------------------------------------------
    def dragEnterEvent(self, event) -> None:
        if event.mimeData().hasFormat(BLOCK_MIME):
            event.acceptProposedAction()
        else:
            super().dragEnterEvent(event)

    def dragMoveEvent(self, event) -> None:
        if event.mimeData().hasFormat(BLOCK_MIME):
            event.acceptProposedAction()
        else:
            super().dragMoveEvent(event)

    def dropEvent(self, event) -> None:
        md = event.mimeData()
        if not md.hasFormat(BLOCK_MIME):
            super().dropEvent(event)
            return
        spec = json.loads(bytes(md.data(BLOCK_MIME)).decode("utf-8"))
        # Dropped onto a wire or another block: it lands beside, so nothing is hidden.
        self.place_block(spec["kind"], self.free_spot(spec["kind"], event.scenePos(), spec.get("params")), spec.get("params"))
        event.acceptProposedAction()

    # ---- grid ------------------------------------------------------------------------------------
    def drawBackground(self, painter, rect: QRectF) -> None:
        super().drawBackground(painter, rect)
        g = self.grid_size * 2
        if g <= 0:
            return
        scale = painter.worldTransform().m11()
        if scale * g < 8:  # too dense to help when zoomed far out
            return
        painter.setPen(QPen(self.theme.grid, 0))
        left = math.floor(rect.left() / g) * g
        top = math.floor(rect.top() / g) * g
        lines = []
        x = left
        while x < rect.right():
            lines.append(QLineF(x, rect.top(), x, rect.bottom()))
            x += g
        y = top
        while y < rect.bottom():
            lines.append(QLineF(rect.left(), y, rect.right(), y))
            y += g
        painter.drawLines(lines)
