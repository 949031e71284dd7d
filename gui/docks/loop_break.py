"""The loop-break view: the Nyquist curve of the loop transfer at the diagram's loop break,
the critical point −1, the disk the curve must stay out of (from the disk margin), and
the margins listed beside it; channel by channel (the others closed) and all loops at
once for a vector break."""
from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt
from PySide6.QtWidgets import QComboBox, QHBoxLayout, QLabel, QTableWidget, QTableWidgetItem

from loopwright.engine.margins import LoopMargins
from loopwright.engine.views_data import loop_break_view
from loopwright.gui.docks.panel import AdaptiveSplitter, PlotPanel, elastic, legend_row, new_layout_widget, themed_plot

__all__ = ["LoopBreakPanel", "margin_rows"]

_CURVE = "#2f7fd0"


def _num(x: float, digits: int = 4) -> str:
    if x is None or (isinstance(x, float) and np.isnan(x)):
        return "—"
    if np.isinf(x):
        return "∞" if x > 0 else "−∞"
    return f"{x:.{digits}g}"


def margin_rows(m: LoopMargins) -> list[tuple[str, str]]:
    """The margins of one scalar loop as (name, value) lines."""
    lo_db, hi_db = m.gain_margin_db
    return [
        ("closed loop", "stable" if m.closed_loop_stable else "UNSTABLE"),
        ("open-loop right-half-plane poles", str(m.open_loop_unstable_poles)),
        ("gain margin, lower", f"{_num(m.gain_lower)} ({_num(lo_db)} dB) at {_num(m.gain_lower_w_rad_s)} rad/s"),
        ("gain margin, upper", f"{_num(m.gain_upper)} ({_num(hi_db)} dB) at {_num(m.gain_upper_w_rad_s)} rad/s"),
        ("phase margin", f"{_num(m.phase_margin_deg)}° at {_num(m.phase_margin_w_rad_s)} rad/s"),
        ("delay margin", f"{_num(m.delay_margin_s)} s"),
        ("peak sensitivity", f"{_num(m.peak_sensitivity)} at {_num(m.peak_sensitivity_w_rad_s)} rad/s"),
        ("disk margin α", f"{_num(m.disk.alpha)}: gain [{_num(m.disk.gain_lower)}, {_num(m.disk.gain_upper)}], "
                          f"phase ±{_num(m.disk.phase_deg)}° at {_num(m.disk.w_rad_s)} rad/s"),
    ]


class LoopBreakPanel(PlotPanel):
    key = "loop_break"
    title = "loop-break view"

    def __init__(self, parent=None):
        super().__init__(parent)
        bar = QHBoxLayout()
        self.where = QLabel("")
        self.where.setObjectName("loop_break_where")
        elastic(self.where)
        self.where.setMinimumWidth(90)
        bar.addWidget(self.where, 1)
        self.show_label = QLabel("Show")
        bar.addWidget(self.show_label)
        self.channel = QComboBox()
        self.channel.setObjectName("loop_break_channel")
        self.channel.setSizeAdjustPolicy(QComboBox.SizeAdjustPolicy.AdjustToMinimumContentsLengthWithIcon)
        self.channel.setMinimumContentsLength(12)
        self.channel.currentIndexChanged.connect(self._draw)
        bar.addWidget(self.channel)
        self._layout.addLayout(bar)
        # the margins that matter, in one line above the plot (the full list is in the table)
        self.summary = QLabel("")
        self.summary.setObjectName("loop_break_summary")
        self.summary.setWordWrap(True)
        elastic(self.summary)
        self.summary.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self._layout.addWidget(self.summary)
        split = AdaptiveSplitter(first_share=0.72)  # the main margins are in the line above: the plot gets the room
        self.canvas = new_layout_widget()
        self.plot = themed_plot(self.canvas, 0, left="imaginary", bottom="real")
        self.plot.setAspectLocked(True)
        self.curve = self.plot.plot(pen=pg.mkPen(_CURVE, width=2))
        self.mirror = self.plot.plot(pen=pg.mkPen(_CURVE, width=1, style=Qt.PenStyle.DashLine))
        self.loci: list = []
        self.disk = self.plot.plot(pen=pg.mkPen("#c0392b", width=1.5, style=Qt.PenStyle.DashLine))
        self.critical = self.plot.plot([-1.0], [0.0], pen=None, symbol="+", symbolSize=16, symbolPen=pg.mkPen("#c0392b", width=2.5))
        # the legend has a row of its own above the plot: it never covers the curve
        self.canvas.ci.removeItem(self.plot)
        self.legend = legend_row(self.canvas, 0, columns=4)
        self.canvas.addItem(self.plot, row=1, col=0)
        for item, name in ((self.curve, "L(jω), ω positive"), (self.mirror, "ω negative"), (self.disk, "disk-margin disk"),
                           (self.critical, "critical point −1")):
            self.legend.addItem(item, name)
        split.addWidget(self.canvas)
        self.margins = QTableWidget(0, 2)
        self.margins.setObjectName("loop_break_margins")
        self.margins.setHorizontalHeaderLabels(["margin", "value"])
        self.margins.verticalHeader().setVisible(False)
        self.margins.setMinimumHeight(40)
        self.margins.horizontalHeader().setStretchLastSection(True)
        self.margins.setWordWrap(True)
        split.addWidget(self.margins)
        self._layout.addWidget(split, 1)
        self.data = None
        self.set_message("No loop break: right-click a wire and choose “break the loop here”.")

    def job(self, diagram, pairs, shared=None):
        at = diagram.settings.get("loop_break")
        if not isinstance(at, str) or not at:
            self.set_message("No loop break: right-click a wire and choose “break the loop here”.")
            return None
        return loop_break_view, (diagram, at), {"limits": False}  # only what this view shows

    def show_value(self, value) -> None:
        self.data = value
        if value is None:
            for c in (self.curve, self.mirror, self.disk):
                c.setData([], [])
            self.margins.setRowCount(0)
            self.where.setText("")
            self.summary.setText("")
            return
        names = list(value.channel_names)
        choices = [f"{n} (the others closed)" for n in names] + (["all loops at once"] if len(names) > 1 else [])
        if [self.channel.itemText(i) for i in range(self.channel.count())] != choices:
            self.channel.blockSignals(True)
            self.channel.clear()
            self.channel.addItems(choices)
            self.channel.blockSignals(False)
        self.channel.setVisible(len(choices) > 1)
        self.show_label.setVisible(len(choices) > 1)
        self.where.setText(f"loop broken at <b>{value.at}</b>")
        self.set_message("")
        self._draw()

    def channel_index(self) -> int:
        return max(self.channel.currentIndex(), 0)

    def _draw(self, *_args) -> None:
        v = self.data
        if v is None:
            return
        k = self.channel_index()
        together = k >= len(v.curves)
        for item in self.loci:
            item.setData([], [])
        if together:
            self.curve.setData([], [])
            self.mirror.setData([], [])
            self.disk.setData([], [])
            while len(self.loci) < v.loci.shape[1]:
                self.loci.append(self.plot.plot(pen=pg.mkPen(_CURVE, width=2)))
            for i in range(v.loci.shape[1]):
                self.loci[i].setData(v.loci[:, i].real, v.loci[:, i].imag)
            d = v.margins.all_at_once
            self.summary.setText(f"all loops at once: disk margin α {_num(d.alpha)}, gain [{_num(d.gain_lower)}, {_num(d.gain_upper)}], "
                                 f"phase ±{_num(d.phase_deg)}°")
            rows = [("closed loop", "stable" if v.margins.closed_loop_stable else "UNSTABLE"),
                    ("curves", "eigenvalues of L(jω) for positive ω"),
                    ("disk margin α (all loops at once)", f"{_num(d.alpha)}: gain [{_num(d.gain_lower)}, {_num(d.gain_upper)}], phase ±{_num(d.phase_deg)}°"),
                    ("at", f"{_num(d.w_rad_s)} rad/s"),
                    ("peak sensitivity", f"{_num(v.margins.peak_sensitivity)} at {_num(v.margins.peak_sensitivity_w_rad_s)} rad/s")]
        else:
            L = v.curves[k]
            self.curve.setData(L.real, L.imag)
            self.mirror.setData(L.real[::-1], -L.imag[::-1])
            c, r = v.circles[k]
            if np.isfinite(c) and np.isfinite(r):
                phi = np.linspace(0, 2 * np.pi, 181)
                self.disk.setData(c + r * np.cos(phi), r * np.sin(phi))
            else:
                self.disk.setData([], [])
            m = v.margins if isinstance(v.margins, LoopMargins) else v.margins.per_channel[k]
            rows = margin_rows(m)
            lo_db, hi_db = m.gain_margin_db
            self.summary.setText(f"phase margin {_num(m.phase_margin_deg)}° · gain margin {_num(lo_db)} / +{_num(hi_db)} dB · "
                                 f"disk margin α {_num(m.disk.alpha)} · delay margin {_num(m.delay_margin_s)} s"
                                 if m.closed_loop_stable else "the closed loop is UNSTABLE at this break")
        self.margins.setRowCount(len(rows))
        for i, (a, b) in enumerate(rows):
            self.margins.setItem(i, 0, QTableWidgetItem(a))
            self.margins.setItem(i, 1, QTableWidgetItem(b))
        self.margins.resizeRowsToContents()
        self.margins.resizeColumnToContents(0)
        self._frame(v, k, together)

    def _frame(self, v, k, together) -> None:
        """Frame the part that matters: the critical point, the disk and where the curve passes near."""
        if together:
            pts = v.loci.ravel()
        else:
            pts = v.curves[k]
        pts = pts[np.isfinite(pts) & (np.abs(pts) < 20.0)]
        xs = np.concatenate([[-1.0, 0.0], pts.real]) if pts.size else np.array([-2.0, 1.0])
        ys = np.concatenate([[0.0], pts.imag, -pts.imag]) if pts.size else np.array([-1.5, 1.5])
        if not together:
            c, r = v.circles[k]
            if np.isfinite(c) and np.isfinite(r) and r < 20:
                xs = np.concatenate([xs, [c - r, c + r]])
                ys = np.concatenate([ys, [-r, r]])
        pad = 0.1 * max(np.ptp(xs), np.ptp(ys), 1.0)
        self.plot.setXRange(xs.min() - pad, xs.max() + pad, padding=0)
        self.plot.setYRange(ys.min() - pad, ys.max() + pad, padding=0)

    def resizeEvent(self, event) -> None:
        # with the aspect locked, a frame set while the panel was still being laid out
        # (hidden tab, first show) is stretched along one axis: frame it again at its size
        super().resizeEvent(event)
        if self.data is not None:
            k = self.channel_index()
            self._frame(self.data, k, k >= len(self.data.curves))

    def showEvent(self, event) -> None:
        super().showEvent(event)
        if self.data is not None:
            k = self.channel_index()
            self._frame(self.data, k, k >= len(self.data.curves))

    def listed_margins(self) -> dict[str, str]:
        return {self.margins.item(i, 0).text(): self.margins.item(i, 1).text() for i in range(self.margins.rowCount())}

    def plot_scene_item(self):
        return self.canvas.ci

    def table(self):
        v = self.data
        if v is None:
            return ["channel", "w_rad_s", "re", "im"], []
        rows = []
        for name, L in zip(v.channel_names, v.curves):
            rows += [[name, float(w), float(z.real), float(z.imag)] for w, z in zip(v.w_rad_s, L)]
        return ["channel", "w_rad_s", "re", "im"], rows
