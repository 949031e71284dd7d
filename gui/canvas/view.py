"""The view on the diagram scene: zoom, pan, fit, rubber-band selection, rename in place,
and a hint on an empty canvas saying how to start."""
from __future__ import annotations

from PySide6.QtCore import QPointF, QRectF, Qt, Signal
from PySide6.QtGui import QFont, QPainter, QPen
from PySide6.QtWidgets import QGraphicsView, QLineEdit, QMenu

from loopwright.engine.errors import EngineError
from loopwright.gui.canvas.block_item import BlockItem
from loopwright.gui.canvas.wire_item import WireItem
from loopwright.gui.commands import RenameBlock, RenameWire

__all__ = ["DiagramView"]

_ZOOM_STEP = 1.2
_MIN_SCALE, _MAX_SCALE = 0.05, 8.0

EMPTY_HINT = (
    "This diagram is empty.\n"
    "Drag a block from the shelf, or double-click one there.\n"
    "To start from a worked loop: File ▸ Open sample."
)


class DiagramView(QGraphicsView):
    """Shows a :class:`~loopwright.gui.canvas.scene.DiagramScene`.

    Wheel zooms about the cursor, the middle button (or Space held down) pans, a drag on
    the background selects with a rubber band, and a double-click on a block or a wire
    renames it in place.
    """

    zoom_changed = Signal(float)

    def __init__(self, scene, parent=None):
        super().__init__(scene, parent)
        self.setRenderHints(QPainter.RenderHint.Antialiasing | QPainter.RenderHint.TextAntialiasing)
        self.setDragMode(QGraphicsView.DragMode.RubberBandDrag)
        self.setRubberBandSelectionMode(Qt.ItemSelectionMode.IntersectsItemShape)
        self.setTransformationAnchor(QGraphicsView.ViewportAnchor.AnchorUnderMouse)
        self.setViewportUpdateMode(QGraphicsView.ViewportUpdateMode.SmartViewportUpdate)
        self.setOptimizationFlags(QGraphicsView.OptimizationFlag.DontSavePainterState)
        self.setCacheMode(QGraphicsView.CacheModeFlag.CacheBackground)
        self.setAcceptDrops(True)
        self._pan_from: QPointF | None = None
        self._space = False
        self._editor: QLineEdit | None = None
        self.hint_text = EMPTY_HINT
        # Set by the window: ``provider(kind, id, branch_target) -> [(text, slot), ...]``, the
        # analysis picks ("look here", ...) offered in a block's or wire's menu.
        self.pick_provider = None
        # The empty-canvas hint is drawn in the foreground, which item updates do not
        # repaint: the whole viewport is redrawn when the first block comes or the last goes.
        doc = scene.document
        doc.block_added.connect(self._on_block_count_changed)
        doc.block_removed.connect(self._on_block_count_changed)
        doc.diagram_replaced.connect(self._on_block_count_changed)
        self.setFocusPolicy(Qt.FocusPolicy.StrongFocus)

    def _on_block_count_changed(self, *_args) -> None:
        self.viewport().update()

    # ---- zoom and pan ----------------------------------------------------------------------
    def scale_factor(self) -> float:
        return self.transform().m11()

    def zoom_by(self, factor: float) -> None:
        s = self.scale_factor()
        factor = max(_MIN_SCALE / s, min(_MAX_SCALE / s, factor))
        self.scale(factor, factor)
        self.resetCachedContent()
        self.zoom_changed.emit(self.scale_factor())

    def zoom_in(self) -> None:
        self.zoom_by(_ZOOM_STEP)

    def zoom_out(self) -> None:
        self.zoom_by(1 / _ZOOM_STEP)

    def zoom_reset(self) -> None:
        self.resetTransform()
        self.resetCachedContent()
        self.zoom_changed.emit(1.0)

    def fit_to_view(self) -> None:
        sc = self.scene()
        rect = sc.itemsBoundingRect() if sc.items() else QRectF(-300, -200, 600, 400)
        rect = rect.adjusted(-30, -30, 30, 30)
        self.fitInView(rect, Qt.AspectRatioMode.KeepAspectRatio)
        if self.scale_factor() > 1.6:
            f = 1.6 / self.scale_factor()
            self.scale(f, f)
        self.centerOn(rect.center())
        self.resetCachedContent()
        self.zoom_changed.emit(self.scale_factor())

    def wheelEvent(self, event) -> None:
        if event.modifiers() & Qt.KeyboardModifier.ShiftModifier:
            super().wheelEvent(event)
            return
        delta = event.angleDelta().y()
        if delta:
            self.zoom_by(_ZOOM_STEP ** (delta / 120.0))
        event.accept()

    def pan_by(self, dx: float, dy: float) -> None:
        """Scroll the view by (dx, dy) pixels (also used by the benchmark)."""
        h, v = self.horizontalScrollBar(), self.verticalScrollBar()
        h.setValue(h.value() + int(dx))
        v.setValue(v.value() + int(dy))

    def keyPressEvent(self, event) -> None:
        if event.key() == Qt.Key.Key_Space and not event.isAutoRepeat() and self._editor is None:
            self._space = True
            self.setDragMode(QGraphicsView.DragMode.ScrollHandDrag)
            event.accept()
            return
        if event.key() == Qt.Key.Key_Escape:
            self.scene().cancel_gesture()
        steps = {Qt.Key.Key_Left: (-1, 0), Qt.Key.Key_Right: (1, 0), Qt.Key.Key_Up: (0, -1), Qt.Key.Key_Down: (0, 1)}
        if event.key() in steps and self.scene().selected_block_ids():
            dx, dy = steps[event.key()]
            grid = self.scene().grid_size or 1.0
            factor = 5 if event.modifiers() & Qt.KeyboardModifier.ShiftModifier else 1
            self.scene().nudge_selection(dx * grid * factor, dy * grid * factor)
            event.accept()
            return
        super().keyPressEvent(event)

    def keyReleaseEvent(self, event) -> None:
        if event.key() == Qt.Key.Key_Space and not event.isAutoRepeat() and self._space:
            self._space = False
            self.setDragMode(QGraphicsView.DragMode.RubberBandDrag)
            event.accept()
            return
        super().keyReleaseEvent(event)

    def mousePressEvent(self, event) -> None:
        # A click on the canvas takes the keyboard from the inspector: Ctrl+Z then undoes
        # the last diagram change instead of the text in the field edited last.
        if not self.hasFocus() and self._editor is None:
            self.setFocus(Qt.FocusReason.MouseFocusReason)
        if event.button() == Qt.MouseButton.MiddleButton:
            self._pan_from = event.position()
            self.viewport().setCursor(Qt.CursorShape.ClosedHandCursor)
            event.accept()
            return
        super().mousePressEvent(event)

    def mouseMoveEvent(self, event) -> None:
        if self._pan_from is not None:
            d = event.position() - self._pan_from
            self._pan_from = event.position()
            self.pan_by(-d.x(), -d.y())
            event.accept()
            return
        super().mouseMoveEvent(event)

    def mouseReleaseEvent(self, event) -> None:
        if self._pan_from is not None and event.button() == Qt.MouseButton.MiddleButton:
            self._pan_from = None
            self.viewport().unsetCursor()
            event.accept()
            return
        super().mouseReleaseEvent(event)

    # ---- rename in place ----------------------------------------------------------------------
    def mouseDoubleClickEvent(self, event) -> None:
        item = self.itemAt(event.position().toPoint())
        if isinstance(item, BlockItem):
            self.begin_rename(item)
            event.accept()
            return
        if isinstance(item, WireItem):
            self.begin_rename(item)
            event.accept()
            return
        super().mouseDoubleClickEvent(event)

    def begin_rename(self, item) -> QLineEdit:
        """Open a line editor over ``item``'s name; Enter commits, Escape cancels."""
        self.end_rename(commit=False)
        doc = self.scene().document
        if isinstance(item, BlockItem):
            current = doc.diagram.blocks[item.block_id].name
            anchor = item.mapToScene(QPointF(0, 0))
        else:
            current = doc.diagram.wires[item.wire_id].name
            r = item.routes[0] if item.routes else [(0.0, 0.0), (0.0, 0.0)]
            anchor = QPointF((r[0][0] + r[1][0]) / 2, (r[0][1] + r[1][1]) / 2)
        editor = QLineEdit(current, self.viewport())
        editor.setObjectName("rename_editor")
        editor.selectAll()
        p = self.mapFromScene(anchor)
        editor.resize(max(90, editor.fontMetrics().horizontalAdvance(current) + 30), editor.sizeHint().height())
        editor.move(int(p.x() - editor.width() / 2), int(p.y() - editor.height() / 2))
        editor.show()
        editor.setFocus()
        editor.returnPressed.connect(lambda: self.end_rename(commit=True))
        editor._target = item  # noqa: SLF001 - the editor remembers what it renames
        editor.installEventFilter(self)
        self._editor = editor
        return editor

    def eventFilter(self, obj, event) -> bool:
        if obj is self._editor and event.type() == event.Type.KeyPress and event.key() == Qt.Key.Key_Escape:
            self.end_rename(commit=False)
            return True
        if obj is self._editor and event.type() == event.Type.FocusOut:
            self.end_rename(commit=True)
            return False
        return super().eventFilter(obj, event)

    def end_rename(self, *, commit: bool) -> None:
        editor, self._editor = self._editor, None
        if editor is None:
            return
        editor.removeEventFilter(self)
        text = editor.text().strip()
        item = editor._target
        editor.hide()
        editor.deleteLater()
        if not commit:
            return
        sc = self.scene()
        doc = sc.document
        try:
            if isinstance(item, BlockItem) and item.block_id in doc.diagram.blocks:
                if text != doc.diagram.blocks[item.block_id].name:
                    doc.push(RenameBlock(doc, item.block_id, text))
            elif isinstance(item, WireItem) and item.wire_id in doc.diagram.wires:
                if text != doc.diagram.wires[item.wire_id].name:
                    doc.push(RenameWire(doc, item.wire_id, text))
        except EngineError as err:
            sc.edit_refused.emit(str(err))

    def contextMenuEvent(self, event) -> None:
        menu = self.build_context_menu(event.pos())
        if menu is not None:
            menu.popup(event.globalPos())
            self._context_menu = menu
        event.accept()

    def build_context_menu(self, pos) -> QMenu | None:
        """The canvas's own commands for the point ``pos`` (viewport pixels).

        The item under the cursor is selected first; on a fan-out wire the branch under
        the cursor can be removed on its own.
        """
        hits = [i for i in self.items(pos) if isinstance(i, (BlockItem, WireItem))]
        item = hits[0] if hits else None
        if item is not None and not item.isSelected():
            self.scene().clearSelection()
            item.setSelected(True)
        menu = QMenu(self)
        j = item.branch_at(self.mapToScene(pos)) if isinstance(item, WireItem) else None
        if isinstance(item, WireItem):
            wire = self.scene().document.diagram.wires.get(item.wire_id)
            if j is not None and wire is not None:
                target = wire.targets[j]
                label = self.scene().document.diagram.port_label(target)
                menu.addAction(f"Remove the branch to {label}", lambda: self.scene().remove_branch(item.wire_id, target))
                menu.addSeparator()
        if item is not None and self.pick_provider is not None:
            wire = self.scene().document.diagram.wires.get(item.wire_id) if isinstance(item, WireItem) else None
            target = wire.targets[j] if wire is not None and j is not None else None
            picks = self.pick_provider("wire" if isinstance(item, WireItem) else "block",
                                       item.wire_id if isinstance(item, WireItem) else item.block_id, target)
            for text, slot in picks:
                menu.addAction(text, slot)
            if picks:
                menu.addSeparator()
        for a in self.actions():
            if a.isEnabled():
                menu.addAction(a)
        return None if menu.isEmpty() else menu

    # ---- empty-canvas hint -------------------------------------------------------------------------
    def drawForeground(self, painter, rect: QRectF) -> None:
        super().drawForeground(painter, rect)
        sc = self.scene()
        if sc is None or sc.block_items:
            return
        painter.save()
        painter.resetTransform()
        f = QFont(sc.font_)
        f.setPointSizeF(f.pointSizeF() * 1.3)
        painter.setFont(f)
        painter.setPen(QPen(sc.theme.hint))
        painter.drawText(self.viewport().rect(), Qt.AlignmentFlag.AlignCenter, self.hint_text)
        painter.restore()
