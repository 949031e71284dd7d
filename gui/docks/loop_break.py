"""The loop-break view: the Nyquist curve of the loop transfer at the diagram's loop break,
the critical point −1, the disk the curve must stay out of (from the disk margin), and
the margins listed beside it; channel by channel (the others closed) and all loops at
once for a vector break."""
from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import QEvent, Qt, QTimer
from PySide6.QtWidgets import QSplitter
from PySide6.QtWidgets import QComboBox, QHBoxLayout, QHeaderView, QLabel, QTableWidget, QTableWidgetItem

from loopwright.engine.margins import LoopMargins
from loopwright.engine.views_data import loop_break_view
from loopwright.gui.docks.panel import KEEP_WIDER, AdaptiveSplitter, PlotPanel, elastic, is_user_range, legend_row, new_layout_widget, themed_plot

__all__ = ["LoopBreakPanel", "margin_rows"]

_CURVE = "#2f7fd0"
#: Below this panel height the one-line summary gives its room to the plot (the margins
#: list beside the plot says the same).
_SHORT_PANEL = 330
_LEGEND_SPACING = 14  # legend_row's horizontal spacing
_LEGEND_LINE = 22  # height of one line of the legend (px)
_LEGEND_TIP = "solid: L(jω) for ω > 0 · dashed: ω < 0 · red dashes: the disk-margin disk · red cross: the critical point −1"


class _PlotBesideList(AdaptiveSplitter):
    """The Nyquist plot and the margins list: side by side when the panel is wide (an
    aspect-locked plot wants a squarish place, and a short dock has no height to share),
    the plot taking about a square of the height (at least 45 % of the width, and leaving
    the list 260 px or half); one above the other when the panel is narrow and tall enough
    to share its height (a list squeezed beside the plot wraps every name)."""

    def resizeEvent(self, event) -> None:
        w, h = event.size().width(), event.size().height()
        across = w >= 720 or (w >= 1.2 * h and w >= 480)
        want = Qt.Orientation.Horizontal if across else Qt.Orientation.Vertical
        if want != self.orientation():
            self.setOrientation(want)
        if across:
            plot = int(min(max(1.1 * h, 0.45 * w), w - min(260.0, 0.5 * w)))  # the list keeps room for its two columns
            self.setSizes([plot, w - plot])
        else:
            self.setSizes([int(0.62 * h), h - int(0.62 * h)])
        QSplitter.resizeEvent(self, event)


def _num(x: float, digits: int = 4) -> str:
    if x is None or (isinstance(x, float) and np.isnan(x)):
        return "—"
    if np.isinf(x):
        return "∞" if x > 0 else "−∞"
    return f"{x:.{digits}g}"


def _at(w: float) -> str:
    """Where a margin is reached, only when there is a frequency to name."""
    if w is None or np.isnan(w):
        return ""
    return " as ω → ∞" if np.isposinf(w) else f" at {_num(w)} rad/s"


def _gain_text(g: float, db: float, w: float, *, lower: bool, stable: bool) -> str:
    if g is None or np.isnan(g):
        return "none: the closed loop is unstable" if not stable else "none"
    if (lower and g == 0) or (not lower and np.isposinf(g)):
        return "none: stable for any lower gain" if lower else "none: stable for any higher gain"
    return f"{_num(g)} ({_num(db)} dB){_at(w)}"


def _phase_text(m: LoopMargins, *, where: bool = True) -> str:
    if m.phase_margin_deg is None or np.isnan(m.phase_margin_deg):
        return "none: |L| never crosses 1" if m.closed_loop_stable else "none: the closed loop is unstable"
    return f"{_num(m.phase_margin_deg)}°" + (_at(m.phase_margin_w_rad_s) if where else "")


#: Beside a value computed on a refined grid whose certificate is still being computed.
CHECKING = " (checking…)"


def _checking(m: LoopMargins) -> str:
    return "" if getattr(m, "certified", True) else CHECKING


def loop_break_job(diagram, at: str, *, progress=None, shared=None):
    """The view's engine call (worker thread): :func:`loop_break_view` without the
    performance limits (the view does not show them), stoppable through ``progress``; a
    large loop's first answer (margins from the refined grid) is handed to ``progress`` as
    an interim answer and drawn while the certification runs. ``shared``: the snapshot's
    :class:`~loopwright.engine.views_data.SharedModel` (its poles decide the closed loop's
    stability)."""
    interim = None if progress is None else (lambda view: progress(0.5, view))
    return loop_break_view(diagram, at, limits=False, progress=progress, interim=interim, shared=shared)


def margin_rows(m: LoopMargins) -> list[tuple[str, str]]:
    """The margins of one scalar loop as (name, value) lines; a frequency is named only
    where the margin has one (never "at — rad/s"), an unbounded margin says so. Peak
    sensitivity and the disk margin say "(checking…)" until they are certified."""
    lo_db, hi_db = m.gain_margin_db
    stable = m.closed_loop_stable
    checking = _checking(m)
    return [
        ("closed loop", "stable" if stable else "UNSTABLE"),
        ("open-loop right-half-plane poles", str(m.open_loop_unstable_poles)),
        ("gain margin, lower", _gain_text(m.gain_lower, lo_db, m.gain_lower_w_rad_s, lower=True, stable=stable)),
        ("gain margin, upper", _gain_text(m.gain_upper, hi_db, m.gain_upper_w_rad_s, lower=False, stable=stable)),
        ("phase margin", _phase_text(m)),
        ("delay margin", f"{_num(m.delay_margin_s)} s"),
        ("peak sensitivity", f"{_num(m.peak_sensitivity)}{_at(m.peak_sensitivity_w_rad_s)}{checking}"),
        ("disk margin α", f"{_num(m.disk.alpha)}: gain [{_num(m.disk.gain_lower)}, {_num(m.disk.gain_upper)}], "
                          f"phase ±{_num(m.disk.phase_deg)}°{_at(m.disk.w_rad_s)}{checking}"),
    ]


class LoopBreakPanel(PlotPanel):
    key = "loop_break"
    title = "loop-break view"
    reports_progress = True  # stoppable; a large loop's first answer comes before its certificate

    def __init__(self, parent=None):
        super().__init__(parent)
        self._legend_fitted: tuple | None = None  # (width, height, entries) the legend was arranged for
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
        split = _PlotBesideList()
        self.split = split
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
        for item, name in ((self.curve, "L(jω), ω > 0"), (self.mirror, "ω &lt; 0"), (self.disk, "disk margin"),
                           (self.critical, "−1 (critical)")):
            self.legend.addItem(item, name)
        split.addWidget(self.canvas)
        self.margins = QTableWidget(0, 2)
        self.margins.setObjectName("loop_break_margins")
        self.margins.setHorizontalHeaderLabels(["margin", "value"])
        self.margins.verticalHeader().setVisible(False)
        self.margins.setMinimumHeight(60)
        self.margins.setMinimumWidth(120)
        self.margins.horizontalHeader().setStretchLastSection(True)
        self.margins.horizontalHeader().setSectionResizeMode(0, QHeaderView.ResizeMode.Interactive)
        self.margins.setWordWrap(True)
        self.margins.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)  # the values wrap instead
        # rows rewrap whenever the list's width changes, once the header has stretched its
        # last column (after the viewport's resize): coalesced in the event loop
        self._refit = QTimer(self)
        self._refit.setSingleShot(True)
        self._refit.setInterval(0)
        self._refit.timeout.connect(self._fit_margins)
        self.margins.viewport().installEventFilter(self)
        # with the aspect locked, a frame set for the plot's old shape shows the wrong part
        # once the splitter reshapes it: frame again after each reshaping
        self._reframe = QTimer(self)
        self._reframe.setSingleShot(True)
        self._reframe.setInterval(0)
        self._reframe.timeout.connect(self._frame_current)
        # the plot area's own size, which its layout settles after the widget's
        self.plot.getViewBox().sigResized.connect(lambda *_a: (self._frame_current(), self._reframe.start()))
        self.margins.horizontalHeader().sectionResized.connect(lambda *_a: self._refit.start())
        self.canvas.setMinimumSize(140, 110)
        split.addWidget(self.margins)
        self._layout.addWidget(split, 1)
        self.data = None
        self.set_message("No loop break: right-click a wire and choose “break the loop here”.")

    def job(self, diagram, pairs, shared=None):
        at = diagram.settings.get("loop_break")
        if not isinstance(at, str) or not at:
            self.set_message("No loop break: right-click a wire and choose “break the loop here”.")
            return None
        return loop_break_job, (diagram, at), {"shared": shared}

    def show_value(self, value) -> None:
        self.data = value
        if value is None:
            for c in (self.curve, self.mirror, self.disk):
                c.setData([], [])
            self.margins.setRowCount(0)
            self.where.setText("")
            self.summary.setText("")
            self._arrange()
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
                    ("at", f"{_num(d.w_rad_s)} rad/s" if np.isfinite(d.w_rad_s) else "no single frequency"),
                    ("peak sensitivity", f"{_num(v.margins.peak_sensitivity)}{_at(v.margins.peak_sensitivity_w_rad_s)}")]
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
            self.summary.setText(f"phase margin {_phase_text(m, where=False)} · gain margin {_num(lo_db)} / +{_num(hi_db)} dB · "
                                 f"disk margin α {_num(m.disk.alpha)}{_checking(m)} · delay margin {_num(m.delay_margin_s)} s"
                                 if m.closed_loop_stable else "the closed loop is UNSTABLE at this break")
        if self._set_rows(rows):
            self._fit_margins()
        self._arrange()
        self._frame(v, k, together, again=False)

    def _frame(self, v, k, together, *, again: bool = True) -> None:
        """Frame the part that matters: the critical point, the disk and where the curve passes near.

        With ``again`` False (a new answer) a frame that still holds all of it with half the
        padding to spare, and that it fills to at least 1 / KEEP_WIDER along one side, is
        kept (its axes keep their drawn ticks); a range the user zoomed or panned to is
        always kept."""
        vb = self.plot.getViewBox()
        if is_user_range(vb):
            return
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
        x0, x1, y0, y1 = xs.min() - pad, xs.max() + pad, ys.min() - pad, ys.max() + pad
        if not again:
            (c_x0, c_x1), (c_y0, c_y1) = vb.viewRange()
            spare = 0.5 * pad
            holds = c_x0 <= x0 + spare and c_x1 >= x1 - spare and c_y0 <= y0 + spare and c_y1 >= y1 - spare
            # the aspect is locked: the frame is wider than wanted along one side only
            fills = max((x1 - x0) / max(c_x1 - c_x0, 1e-300), (y1 - y0) / max(c_y1 - c_y0, 1e-300))
            if holds and fills * KEEP_WIDER >= 1.0:
                return
        # both ranges in one call: with the aspect locked, a second call kept its own range and
        # recentred the first, and a tall plot showed only a strip beside the curve
        self.plot.setRange(xRange=(x0, x1), yRange=(y0, y1), padding=0)

    def _set_rows(self, rows) -> bool:
        """Show ``rows`` in the margins list, changing only the texts that differ; True when
        any did (the rows are then fitted to their texts again)."""
        t = self.margins
        changed = t.rowCount() != len(rows)
        if changed:
            t.setRowCount(len(rows))
        for i, pair in enumerate(rows):
            for j, text in enumerate(pair):
                item = t.item(i, j)
                if item is None:
                    t.setItem(i, j, QTableWidgetItem(text))
                    changed = True
                elif item.text() != text:
                    item.setText(text)
                    changed = True
        return changed

    def _fit_margins(self) -> None:
        """Names no wider than half the list (they wrap), values in the rest, rows as tall as their text."""
        t = self.margins
        header = t.horizontalHeader()
        content = max(t.sizeHintForColumn(0), header.sectionSizeHint(0) if header.isVisible() else 0)
        want = min(content, max(t.viewport().width() // 2, 60))
        # set only a different width: every change is a sectionResized, which refits again
        # (resizing to the contents first and then capping it changed it twice per fit, and
        # the window refitted the list without end, a core kept busy while idle)
        if t.columnWidth(0) != want:
            t.setColumnWidth(0, want)
        t.resizeRowsToContents()

    def eventFilter(self, obj, event) -> bool:
        if obj is self.margins.viewport() and event.type() == QEvent.Type.Resize and event.size().width() != event.oldSize().width():
            self._refit.start()
        return super().eventFilter(obj, event)

    def _arrange(self) -> None:
        """Give a short or narrow panel's room to the plot and the list."""
        self.summary.setVisible(self.height() >= _SHORT_PANEL and bool(self.summary.text()))
        self._fit_legend()

    def _fit_legend(self) -> None:
        """As many legend entries to a line as the plot's width holds (4, 2 or 1): a legend
        wider than the plot was cut at its edge."""
        fitted = (self.canvas.width(), self.canvas.height(), len(self.legend.items))
        if fitted == self._legend_fitted:
            return  # the same room and entries: the same arrangement
        self._legend_fitted = fitted
        room = self.canvas.width() - 8
        columns = next((c for c in (4, 2) if self.legend_width(c) <= room), 1)
        if self.legend.columnCount != columns:
            self.legend.setColumnCount(columns)
        # a legend taller than a third of a short plot leaves no plot: it goes to the tooltip
        lines = -(-len(self.legend.items) // columns)
        shown = lines * _LEGEND_LINE <= self.canvas.height() / 3
        self.legend.setVisible(shown)
        # a hidden item keeps its row in the plot's layout: the row goes too
        self.legend.setMaximumHeight(16777215 if shown else 0)
        self.canvas.setToolTip("" if shown else _LEGEND_TIP)

    def legend_width(self, columns: int) -> float:
        """The width (px) the legend's entries need at ``columns`` to a line: the widest
        sample and text of each column (entries fill the lines in order), and the spacing."""
        entries = [smp.boundingRect().width() + lab.item.boundingRect().width() for smp, lab in self.legend.items]
        widths = [max(entries[j::columns], default=0.0) for j in range(columns)]
        return sum(widths) + _LEGEND_SPACING * (columns - 1) + 2 * _LEGEND_SPACING

    def resizeEvent(self, event) -> None:
        # with the aspect locked, a frame set while the panel was still being laid out
        # (hidden tab, first show) is stretched along one axis: frame it again at its size
        super().resizeEvent(event)
        self._arrange()
        self._fit_margins()
        if self.data is not None:
            k = self.channel_index()
            self._frame(self.data, k, k >= len(self.data.curves))

    def showEvent(self, event) -> None:
        super().showEvent(event)
        if self.data is not None:
            k = self.channel_index()
            self._frame(self.data, k, k >= len(self.data.curves))

    def _frame_current(self) -> None:
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
