"""The frequency view: magnitude (dB) and unwrapped phase of every kept pair against log
frequency, in rad/s or Hz, with a cursor that reads the values and each pair's peak marked.

A path picked in the path audit is drawn as well, in the canvas highlight colour.
"""
from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt
from PySide6.QtGui import QColor
from PySide6.QtWidgets import QComboBox, QHBoxLayout, QLabel

from loopwright.engine.views_data import frequency_views
from loopwright.gui.docks.panel import (
    PlotPanel, data_span, elastic, fit_range, legend_row, new_layout_widget, pair_colour, pen_for, release_user_range, shade_of, themed_plot,
)
from loopwright.gui.view_commands import input_label

__all__ = ["FrequencyPanel", "AUDIT_COLOUR", "frequency_job"]

#: The colour of the path picked in the audit (the canvas highlight of the light theme).
AUDIT_COLOUR = QColor("#8e44ad")

_TWO_PI = 2.0 * np.pi


def frequency_job(diagram, pairs, **kwargs) -> list:
    """The view's engine call (worker thread): :func:`frequency_views`, with each answer's
    magnitude in dB and unwrapped phase made there too (computed when first read, they
    were made on the window's thread as it drew them)."""
    out = frequency_views(diagram, pairs, **kwargs)
    for resp in out:
        if not isinstance(resp, str):
            resp.mag_db, resp.phase_deg  # noqa: B018 - made now, kept by the answer
    return out


class FrequencyPanel(PlotPanel):
    """Magnitude and phase of the kept pairs (one curve per pair and vector element)."""

    key = "frequency"
    title = "frequency view"

    def __init__(self, parent=None):
        super().__init__(parent)
        bar = QHBoxLayout()
        bar.addWidget(QLabel("Frequency in"))
        self.unit = QComboBox()
        self.unit.setObjectName("frequency_unit")
        self.unit.addItems(["rad/s", "Hz"])
        self.unit.currentIndexChanged.connect(self._on_unit_changed)
        bar.addWidget(self.unit)
        bar.addStretch(1)
        self.readout = QLabel("")
        self.readout.setObjectName("frequency_readout")
        elastic(self.readout)
        self.readout.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        bar.addWidget(self.readout, 3)
        self._layout.addLayout(bar)
        self.canvas = new_layout_widget()
        # the legend has its own row above the plots: one entry per pair, never over a curve
        self.legend = legend_row(self.canvas, 0, columns=2)
        self.mag = themed_plot(self.canvas, 1, left="dB", bottom=None, log_x=True)
        self.phase = themed_plot(self.canvas, 2, left="phase (°)", bottom="frequency (rad/s)", log_x=True)
        self.phase.setXLink(self.mag)
        self._layout.addWidget(self.canvas, 1)
        self.cursor_mag = pg.InfiniteLine(angle=90, movable=True, pen=pg.mkPen("#5b6573", width=1, style=Qt.PenStyle.DashLine))
        self.cursor_phase = pg.InfiniteLine(angle=90, movable=True, pen=pg.mkPen("#5b6573", width=1, style=Qt.PenStyle.DashLine))
        for c in (self.cursor_mag, self.cursor_phase):
            c.setVisible(False)
            c.sigPositionChanged.connect(self._on_cursor_moved)
        self.mag.addItem(self.cursor_mag, ignoreBounds=True)
        self.phase.addItem(self.cursor_phase, ignoreBounds=True)
        self.curves: dict[tuple, tuple[pg.PlotDataItem, pg.PlotDataItem]] = {}
        self.peaks: dict[tuple, pg.ScatterPlotItem] = {}
        self.data: dict[tuple, object] = {}  # (pair, ) -> PairResponse
        self.audit_pair: tuple[str, str] | None = None
        self._moving = False
        self.set_message("Pick a pair: right-click a wire and choose “look here”, then a source (“drive from here”) or a wire (“inject here”).")

    # ---- job -------------------------------------------------------------------------------
    def shown_pairs(self) -> list[tuple[str, str]]:
        extra = [self.audit_pair] if self.audit_pair and self.audit_pair not in self.pairs else []
        return list(self.pairs) + extra

    def job(self, diagram, pairs, shared=None):
        shown = self.shown_pairs()
        if not shown:
            return None
        return frequency_job, (diagram, shown), {"drawing": True, "shared": shared}

    def set_audit_pair(self, pair: tuple[str, str] | None) -> None:
        if pair != self.audit_pair:
            self.audit_pair = pair
            self.options_changed.emit()

    # ---- drawing ---------------------------------------------------------------------------
    def _scale(self) -> float:
        return 1.0 / _TWO_PI if self.unit.currentIndex() == 1 else 1.0

    def _colour(self, pair) -> QColor:
        return pair_colour(self.pairs.index(pair)) if pair in self.pairs else AUDIT_COLOUR

    def _label(self, pair, resp) -> str:
        """The pair's one legend entry; a vector pair names its element count (its elements
        are drawn in shades of the pair's colour, the cursor read-out lists each)."""
        src, sig = pair
        base = f"{sig} ← {input_label(src)}" + ("" if pair in self.pairs else "  (audit path)")
        count = len(resp.output_names) * len(resp.input_names)
        if count > 1:
            base += f"  ({count} elements, in shades)"
        return base

    def show_value(self, value) -> None:
        value = value or []
        shown = self.shown_pairs()
        errors = []
        wanted = set()
        self.data = {}
        for pair, resp in zip(shown, value):
            if isinstance(resp, str):
                errors.append(f"{pair[1]} ← {input_label(pair[0])}: {resp}")
                continue
            self.data[pair] = resp
            colour = self._colour(pair)
            p, m = resp.response.shape[1:]
            best = (-np.inf, np.nan)
            for i in range(p):
                for j in range(m):
                    key = (pair, i, j)
                    wanted.add(key)
                    if key not in self.curves:
                        cm = self.mag.plot()
                        cp = self.phase.plot()
                        self.curves[key] = (cm, cp)
                        if i == 0 and j == 0:
                            self.legend.addItem(cm, self._label(pair, resp))
                    cm, cp = self.curves[key]
                    pen = pen_for(shade_of(colour, i * m + j, p * m), 0, width=2.4 if pair not in self.pairs else 2.0)
                    if cm.opts["pen"] != pen:  # a new pen, even an equal one, processes the curve's data again
                        cm.setPen(pen)
                        cp.setPen(pen)
                    w_pk, db_pk = resp.peak(i, j)
                    if db_pk > best[0]:
                        best = (db_pk, w_pk)
            if pair not in self.peaks:
                # a point with its symbol and outline set once (a new peak is a new position)
                self.peaks[pair] = pg.ScatterPlotItem(symbol="t", size=12, pen=pg.mkPen("#1f2933"), brush=pg.mkBrush(colour))
                self.mag.addItem(self.peaks[pair])
            if self.peaks[pair].opts["brush"].color() != colour:
                self.peaks[pair].setBrush(pg.mkBrush(colour))
            tip = f"peak {best[0]:.4g} dB at {best[1]:.4g} rad/s"
            if self.peaks[pair].toolTip() != tip:
                self.peaks[pair].setToolTip(tip)
        for key in [k for k in self.curves if k not in wanted]:
            cm, cp = self.curves.pop(key)
            self.mag.removeItem(cm)
            self.phase.removeItem(cp)
            self.legend.removeItem(cm)
        for pair in [p for p in self.peaks if p not in self.data]:
            self.mag.removeItem(self.peaks.pop(pair))
        self._redraw_units()
        if errors:
            self.show_error("\n".join(errors))
        else:
            self.set_message("" if shown else "No pair yet: right-click a wire and choose “look here”.")

    def _on_unit_changed(self, *_args) -> None:
        release_user_range(self.mag)  # a zoom in the other unit shows other frequencies
        self._redraw_units()

    def _redraw_units(self) -> None:
        s = self._scale()
        label = "frequency (Hz)" if s != 1.0 else "frequency (rad/s)"
        axis = self.phase.getAxis("bottom")
        if axis.labelText != label:  # setting it, even unchanged, makes the axis lay out its ticks again
            self.phase.setLabel("bottom", label)
        for (pair, i, j), (cm, cp) in self.curves.items():
            resp = self.data.get(pair)
            if resp is None:
                continue
            x = resp.w_rad_s * s
            cm.setData(x, resp.mag_db[:, i, j])
            cp.setData(x, resp.phase_deg[:, i, j])
        for pair, item in self.peaks.items():
            resp = self.data[pair]
            p, m = resp.response.shape[1:]
            w_pk, db_pk = max((resp.peak(i, j) for i in range(p) for j in range(m)), key=lambda t: t[1])
            item.setData(x=[np.log10(w_pk * s)], y=[db_pk])  # a bare point is not log-scaled by the plot
        self._fit()
        if self.data:
            ws = np.concatenate([r.w_rad_s for r in self.data.values()]) * s
            if not self.cursor_mag.isVisible():
                mid = float(np.sqrt(ws.min() * ws.max()))
                self._set_cursor(np.log10(mid))
            for c in (self.cursor_mag, self.cursor_phase):
                c.setVisible(True)
        self._on_cursor_moved()

    def _fit(self) -> None:
        """Range both plots once, after every curve has its data (the phase plot follows
        the magnitude plot's frequencies)."""
        if not self.data:
            return
        s = self._scale()
        fit_range(self.mag, x=data_span([r.w_rad_s * s for r in self.data.values()], log=True),
                  y=data_span([r.mag_db for r in self.data.values()]))
        fit_range(self.phase, y=data_span([r.phase_deg for r in self.data.values()]))

    def peak_markers(self) -> dict:
        """Pair -> (frequency in the shown unit, dB) of its marked peak."""
        out = {}
        for pair, item in self.peaks.items():
            x, y = item.getData()
            out[pair] = (float(10.0 ** x[0]), float(y[0]))
        return out

    # ---- cursor ----------------------------------------------------------------------------
    def _set_cursor(self, x_log: float) -> None:
        self._moving = True
        self.cursor_mag.setValue(x_log)
        self.cursor_phase.setValue(x_log)
        self._moving = False

    def set_cursor_frequency(self, w: float) -> None:
        """Put the cursor at ``w`` (in the shown unit)."""
        self._set_cursor(float(np.log10(w)))
        self._on_cursor_moved()

    def _on_cursor_moved(self, line=None) -> None:
        if line is not None and not self._moving:
            self._set_cursor(line.value())
        if not self.data:
            self.readout.setText("")
            return
        s = self._scale()
        x = 10.0 ** self.cursor_mag.value()
        unit = "Hz" if s != 1.0 else "rad/s"
        parts = [f"<b>{x:.4g} {unit}</b>"]
        for pair, resp in self.data.items():
            k = int(np.argmin(np.abs(np.log(resp.w_rad_s * s) - np.log(x))))
            colour = self._colour(pair).name()
            p, m = resp.response.shape[1:]
            vals = ", ".join(f"{resp.mag_db[k, i, j]:.3g} dB / {resp.phase_deg[k, i, j]:.4g}°" for i in range(p) for j in range(m))
            parts.append(f"<span style='color:{colour}'>■</span> {pair[1]}: {vals}")
        self.readout.setText("  ".join(parts))

    # ---- export ----------------------------------------------------------------------------
    def plot_scene_item(self):
        return self.canvas.ci

    def table(self):
        header = ["pair", "element", "w_rad_s", "mag_db", "phase_deg"]
        rows = []
        for pair, resp in self.data.items():
            p, m = resp.response.shape[1:]
            for i in range(p):
                for j in range(m):
                    el = f"{resp.output_names[i]} <- {resp.input_names[j]}"
                    for k in range(resp.w_rad_s.size):
                        rows.append([f"{pair[1]} <- {pair[0]}", el, float(resp.w_rad_s[k]), float(resp.mag_db[k, i, j]), float(resp.phase_deg[k, i, j])])
        return header, rows
