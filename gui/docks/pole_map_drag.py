"""Retune by dragging on the pole map: a designed controller or estimator pole (the target of a
pole-placement recipe) follows the mouse, the engine redesigns K or L on the worker, and every
open view follows while the mouse moves. A complex pair moves together (the conjugate mirrors
the dragged pole); a real pole stays on the real axis. One drag is one undo step.
"""
from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import QEvent, QObject, QPointF, Qt, QTimer, Signal

from loopwright.engine.design import poles_to_json
from loopwright.gui.design_commands import DesignBlocks, redesigned_params
from loopwright.gui.workers import Tasks

__all__ = ["recipe_handles", "moved_poles", "PoleDragger"]

_PICK_PX = 12.0  # how close (pixels) a press must be to a pole to grab it
_REFRESH_MS = 80  # views follow a drag at most this often


def recipe_handles(diagram) -> list[dict]:
    """The draggable poles: one entry per pole-placement recipe (gain or estimator block).

    A recipe with integral action lists the poles of the plant augmented with the integrators
    (``n + q``); all of them are handles, and a drag redesigns both gains (the state feedback
    and the integral gain the recipe names) in one step.

    Returns
    -------
    list of dict
        ``{"block": name, "kind": "gain" | "estimator", "poles": (n,) complex ndarray}``.
    """
    out = []
    for b in diagram.blocks.values():
        rec = b.params.get("recipe")
        if b.kind not in ("gain", "estimator") or not isinstance(rec, dict):
            continue
        if rec.get("method") not in ("place", "ackermann") or not isinstance(rec.get("poles"), list):
            continue
        try:
            poles = np.array([complex(p[0], p[1]) if isinstance(p, list) else complex(p) for p in rec["poles"]])
        except (TypeError, ValueError, IndexError):
            continue  # a recipe the engine will name as broken; nothing to drag
        out.append({"block": b.name, "kind": b.kind, "poles": poles})
    return out


def _partner(poles: np.ndarray, k: int) -> int | None:
    """Index of the conjugate of pole ``k`` (None for a real pole)."""
    p = poles[k]
    if p.imag == 0:
        return None
    d = np.abs(poles - np.conj(p))
    d[k] = np.inf
    j = int(np.argmin(d))
    return j if d[j] <= 1e-9 * max(1.0, abs(p)) else None


def moved_poles(poles: np.ndarray, k: int, target: complex) -> np.ndarray:
    """``poles`` with pole ``k`` moved to ``target``: its conjugate mirrors it; a real pole
    stays real (its imaginary part is dropped); a complex pole dragged onto the real axis keeps
    a small imaginary part so the pair stays a pair."""
    new = np.array(poles, dtype=complex)
    j = _partner(new, k)
    if j is None:
        new[k] = complex(target.real, 0.0)
        return new
    im = target.imag if poles[k].imag > 0 else -target.imag
    if abs(im) < 1e-6 * max(1.0, abs(target)):
        im = 1e-6 * max(1.0, abs(target))
    new[k] = complex(target.real, im if poles[k].imag > 0 else -im)
    new[j] = np.conj(new[k])
    return new


class PoleDragger(QObject):
    """Grabs a designed pole on ``panel`` (a :class:`PoleMapPanel`), redesigns while it moves.

    Parameters
    ----------
    panel : PoleMapPanel
    document : Document
    refresh : callable, optional
        Called (throttled) after each redesign lands, to bring the other open views along.

    Signals
    -------
    retuned(str)
        A redesign of the named block was applied.
    refused(str)
        The engine refused a position (the message names the block); the last good design stays.
    """

    retuned = Signal(str)
    refused = Signal(str)

    def __init__(self, panel, document, *, refresh=None, parent=None):
        super().__init__(parent or panel)
        self.panel = panel
        self._doc = document
        self._refresh = refresh
        self.tasks = Tasks(self)
        self.tasks.finished.connect(self._on_result)
        self._drag: dict | None = None
        self._gesture = 0
        self.handles: list[dict] = []
        self._timer = QTimer(self)
        self._timer.setSingleShot(True)
        self._timer.setInterval(_REFRESH_MS)
        self._timer.timeout.connect(self._call_refresh)
        self.marker = panel.plot.plot(pen=None, symbol="o", symbolSize=18, symbolBrush=(255, 190, 60, 110),
                                      symbolPen=pg.mkPen("#c9a21a", width=2))
        self.marker.setZValue(20)
        panel.canvas.viewport().installEventFilter(self)
        document.changed.connect(self._on_changed)
        self._on_changed()

    def _on_changed(self, *_a) -> None:
        self.handles = recipe_handles(self._doc.diagram)

    def is_dragging(self) -> bool:
        return self._drag is not None

    # ---- picking --------------------------------------------------------------------------------
    def _view_point(self, pos) -> complex:
        scene = self.panel.canvas.mapToScene(pos.toPoint() if isinstance(pos, QPointF) else pos)
        p = self.panel.plot.vb.mapSceneToView(scene)
        return complex(p.x(), p.y())

    def pixel_of(self, z: complex) -> QPointF:
        """Where pole ``z`` sits on the plot, in viewport pixels (tests drive the mouse with it)."""
        scene = self.panel.plot.vb.mapViewToScene(pg.Point(z.real, z.imag))
        return QPointF(self.panel.canvas.mapFromScene(scene))

    def _grab(self, pos) -> dict | None:
        best, best_d = None, _PICK_PX
        for h in self.handles:
            for k, z in enumerate(h["poles"]):
                px = self.pixel_of(z)
                d = float(np.hypot(px.x() - pos.x(), px.y() - pos.y()))
                if d < best_d:
                    best, best_d = {"block": h["block"], "kind": h["kind"], "index": k, "poles": h["poles"].copy()}, d
        return best

    def eventFilter(self, obj, event) -> bool:  # noqa: N802 - Qt's name
        t = event.type()
        if t == QEvent.Type.MouseButtonPress and event.button() == Qt.MouseButton.LeftButton:
            grabbed = self._grab(event.position())
            if grabbed is None:
                return False
            self._gesture += 1
            grabbed["gesture"] = self._gesture
            grabbed["recipe"] = dict(self._doc.diagram.block_by_name(grabbed["block"]).params["recipe"])
            self._drag = grabbed
            self._show_marker(grabbed["poles"])
            self.panel.hold_range = True  # the axes stay put under the mouse while it drags
            self.panel.readout.setText(f"dragging a pole of {grabbed['block']}: release to keep it (Undo goes back)")
            return True  # the plot must not pan while a pole is dragged
        if t == QEvent.Type.MouseMove and self._drag is not None:
            self.move_to(self._view_point(event.position()))
            return True
        if t == QEvent.Type.MouseButtonRelease and self._drag is not None and event.button() == Qt.MouseButton.LeftButton:
            self.move_to(self._view_point(event.position()))
            self.finish()
            return True
        return False

    # ---- the gesture ------------------------------------------------------------------------------
    def move_to(self, target: complex) -> None:
        """Move the grabbed pole to ``target`` and ask the engine for the new design."""
        d = self._drag
        if d is None:
            return
        poles = moved_poles(d["poles"], d["index"], target)
        self._show_marker(poles)
        recipe = dict(d["recipe"])
        recipe["poles"] = poles_to_json(poles)
        self.panel.readout.setText(f"{d['block']}: pole at {poles[d['index']].real:.4g} {poles[d['index']].imag:+.4g}j")
        self.tasks.submit("retune", redesigned_params, self._doc.snapshot(), d["block"], recipe)

    def finish(self) -> None:
        self._drag = None
        self.panel.hold_range = False
        self.marker.setData([], [])

    def _show_marker(self, poles) -> None:
        self.marker.setData(np.real(poles), np.imag(poles))

    def _on_result(self, result) -> None:
        gesture = self._drag["gesture"] if self._drag is not None else self._gesture
        if result.error is not None:
            self.panel.set_message(result.error, error=True)
            self.refused.emit(result.error)
            return
        changes, results = result.value
        if not changes:
            return
        name = results[0].block if results else "?"
        what = "K" if results and results[0].kind == "gain" else "L"
        if results and results[0].linked:  # integral action: the integral gain moved too
            what += " and " + ", ".join(results[0].linked)
        self._doc.push(DesignBlocks(self._doc, changes, text=f"Retune {name} ({what}) on the pole map", gesture=gesture))
        self.retuned.emit(name)
        if not self._timer.isActive():
            self._timer.start()

    def _call_refresh(self) -> None:
        if self._refresh is not None:
            self._refresh()

    def shutdown(self) -> None:
        self.tasks.shutdown(wait=False)
