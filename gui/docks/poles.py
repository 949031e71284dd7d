"""The pole map: the closed-loop poles, with the designed state-feedback poles eig(A − BK)
and estimator poles eig(A − LC) overlaid so the separation shows, lines of constant damping
and circles of constant natural frequency, and a read-out of the pole under the mouse."""
from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt
from PySide6.QtWidgets import QLabel

from loopwright.engine.check import pole_table, summarize
from loopwright.engine.views_data import damping_guides
from loopwright.gui.docks.panel import PlotPanel, data_span, elastic, fit_range, legend_row, new_layout_widget, themed_plot

__all__ = ["PoleMapPanel", "pole_map_data"]

_GUIDE = pg.mkPen("#b8c0ca", width=1, style=Qt.PenStyle.DotLine)


def pole_map_data(diagram, *, shared=None) -> dict:
    """What the pole map shows (worker thread): poles, the designed sets, guides, the table
    (``shared``: the snapshot's :class:`~loopwright.engine.views_data.SharedModel`)."""
    rep = summarize(diagram) if shared is None else shared.report
    poles = rep.poles
    sep = rep.separation
    fb = sep.state_feedback_poles if sep is not None else np.zeros(0, complex)
    est = sep.estimator_poles if sep is not None else np.zeros(0, complex)
    every = np.concatenate([poles, fb, est])
    radius = guide_radius(1.15 * float(np.abs(every).max())) if every.size else 1.0
    return {"poles": poles, "feedback": fb, "estimator": est, "matches": None if sep is None else sep.matches,
            "guides": damping_guides(radius), "guide_radius": radius, "table": pole_table(poles)}


def guide_radius(reach: float) -> float:
    """How far the guides reach for poles within ``reach`` (rad/s): ``reach`` rounded up
    to a tenth of a decade (at most 26 % further), so an edit that moves the poles a
    little leaves the guides as they are drawn."""
    if not np.isfinite(reach) or reach <= 0:
        return 1.0
    return float(10.0 ** (np.ceil(10.0 * np.log10(reach) - 1e-9) / 10.0))


def _point_set(symbol: str, size: float, pen, brush=None) -> pg.ScatterPlotItem:
    """Points drawn with one symbol, outline and fill (none by default)."""
    return pg.ScatterPlotItem(symbol=symbol, size=size, pen=pen, brush=brush)


def _joined(lines) -> tuple[np.ndarray, np.ndarray]:
    """Several polylines ``[(x, y), ...]`` as one, broken by NaN between them (one item to
    draw instead of one per line)."""
    xs, ys = [], []
    for x, y in lines:
        xs += [np.asarray(x, dtype=float), [np.nan]]
        ys += [np.asarray(y, dtype=float), [np.nan]]
    if not xs:
        return np.zeros(0), np.zeros(0)
    return np.concatenate(xs[:-1]), np.concatenate(ys[:-1])


class PoleMapPanel(PlotPanel):
    """Closed-loop poles (crosses), designed feedback poles (circles), estimator poles (squares)."""

    key = "poles"
    title = "pole map"

    def __init__(self, parent=None):
        super().__init__(parent)
        self.canvas = new_layout_widget()
        # the legend sits in a row of its own above the plot: it never hides a pole
        self.legend = legend_row(self.canvas, 0, columns=3)
        self.plot = themed_plot(self.canvas, 1, left="imaginary (rad/s)", bottom="real (1/s)")
        self.plot.setAspectLocked(False)
        self._layout.addWidget(self.canvas, 1)
        self.readout = QLabel("Hover over a pole to read it.")
        self.readout.setObjectName("poles_readout")
        elastic(self.readout)
        self._layout.addWidget(self.readout)
        # point sets with one symbol, pen and brush each, set once: new poles are only new
        # positions (a plot item with symbols made each spot's style again on every edit)
        self.closed = _point_set("x", 12, pg.mkPen("#c0392b", width=2), brush=(50, 50, 150))  # the cross filled dark, as ever
        self.feedback = _point_set("o", 15, pg.mkPen("#2f7fd0", width=1.6))
        self.estimator = _point_set("s", 15, pg.mkPen("#2aa05a", width=1.6))
        for item in (self.closed, self.feedback, self.estimator):
            self.plot.addItem(item)
        for item, name in ((self.closed, "closed loop"), (self.feedback, "designed eig(A − BK)"), (self.estimator, "designed eig(A − LC)")):
            self.legend.addItem(item, name)
        # every damping ray and natural-frequency circle in one curve, drawn behind the poles
        self.guides = pg.PlotCurveItem(pen=_GUIDE, connect="finite")
        self.guides.setZValue(-1)
        self.plot.addItem(self.guides, ignoreBounds=True)
        self._guide_radius: float | None = None  # the radius the drawn guides were made for
        self.guide_labels: list = []
        self.data: dict | None = None
        self.hold_range = False  # set while a pole is dragged (gui/docks/pole_map_drag.py)
        self.plot.scene().sigMouseMoved.connect(self._on_mouse)
        self.plot.addItem(pg.InfiniteLine(pos=0, angle=90, pen=pg.mkPen("#5b6573", width=1)), ignoreBounds=True)

    def job(self, diagram, pairs, shared=None):
        return pole_map_data, (diagram,), {"shared": shared}

    def show_value(self, value) -> None:
        if value is None:
            return
        self.data = value
        p = value["poles"]
        self.closed.setData(x=p.real, y=p.imag)
        self.feedback.setData(x=value["feedback"].real, y=value["feedback"].imag)
        self.estimator.setData(x=value["estimator"].real, y=value["estimator"].imag)
        radius = value.get("guide_radius")
        if radius is None or radius != self._guide_radius:  # the same radius: the same guides
            self._guide_radius = radius
            self._draw_guides(value["guides"])
        msg = f"{p.size} closed-loop poles"
        if value["matches"] is True:
            msg += "; they match eig(A − BK) ∪ eig(A − LC): the separation holds"
        elif value["matches"] is False:
            msg += "; they DIFFER from eig(A − BK) ∪ eig(A − LC)"
        self.set_message(msg)
        if not self.hold_range:
            # the poles and designed sets, with room for their symbols (the guides reach
            # a little past them and are not fitted)
            pts = [p, value["feedback"], value["estimator"]]
            fit_range(self.plot, x=data_span([z.real for z in pts]), y=data_span([z.imag for z in pts]), padding=0.08)

    def _draw_guides(self, g: dict) -> None:
        self.guides.setData(*_joined([(x, y) for _z, x, y in g["rays"]] + [(x, y) for _w, x, y in g["circles"]]))
        # the labels are made once and then only moved or retitled (making text items anew
        # cost more than the poles)
        labels = [(f"ζ {z:g}", (0.5, 1.0), (x[1], y[1])) for z, x, y in g["rays"][::2]]
        labels += [(f"ωn {wn:g}", (1.0, 0.0), (-wn, 0.0)) for wn, _x, _y in g["circles"]]
        while len(self.guide_labels) < len(labels):
            lab = pg.TextItem("", color="#8a94a0")
            self.plot.addItem(lab, ignoreBounds=True)
            self.guide_labels.append(lab)
        for lab, (text, anchor, pos) in zip(self.guide_labels, labels):
            if lab.toPlainText() != text:
                lab.setText(text)
            lab.setAnchor(anchor)
            lab.setPos(*pos)
            lab.setVisible(True)
        for lab in self.guide_labels[len(labels):]:
            lab.setVisible(False)

    def guide_lines(self) -> tuple[np.ndarray, np.ndarray]:
        """The drawn guides' points (NaN between the lines)."""
        x, y = self.guides.getData()
        return (np.zeros(0), np.zeros(0)) if x is None else (np.asarray(x), np.asarray(y))

    def _on_mouse(self, pos) -> None:
        if not self.data or not self.data["table"]:
            return
        vb = self.plot.vb
        best, best_d = None, 14.0
        for row in self.data["table"]:
            sp = vb.mapViewToScene(pg.Point(row["re"], row["im"]))
            d = float(np.hypot(sp.x() - pos.x(), sp.y() - pos.y()))
            if d < best_d:
                best, best_d = row, d
        if best is not None:
            self.readout.setText(self.describe(best))

    @staticmethod
    def describe(row: dict) -> str:
        im = f" ± {abs(row['im']):.4g}j" if row["im"] else ""
        return f"pole {row['re']:.4g}{im}   damping ζ {row['damping']:.3g}   natural frequency ωn {row['wn_rad_s']:.4g} rad/s"

    def plot_scene_item(self):
        return self.canvas.ci

    def table(self):
        if not self.data:
            return ["re", "im", "damping", "wn_rad_s"], []
        rows = [[r["re"], r["im"], r["damping"], r["wn_rad_s"]] for r in self.data["table"]]
        return ["re", "im", "damping", "wn_rad_s"], rows
