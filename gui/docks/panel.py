"""What every plot panel shares: a message line, a plot area, the pair colours, and the
export of its picture (PNG, SVG) and its data (CSV).

A panel says what to compute (:meth:`PlotPanel.job`: an engine function and its
arguments, built from a snapshot on the GUI thread) and draws what comes back
(:meth:`PlotPanel.show_value`); :class:`~loopwright.gui.docks.views.ViewsController`
runs the job on the worker. Curves are created once per pair and then only get
``setData`` (see STYLE.md, plot docks).
"""
from __future__ import annotations

import csv
from pathlib import Path

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QAction, QColor
from PySide6.QtWidgets import QSplitter, QFileDialog, QGraphicsItem, QGraphicsView, QHBoxLayout, QLabel, QMenu, QProgressBar, QPushButton, QSizePolicy, QVBoxLayout, QWidget

from loopwright.engine.svg_plot import PAIR_COLOURS

__all__ = ["PlotPanel", "PAIR_COLOURS", "pair_colour", "shade_of", "write_table_csv", "pen_for", "themed_plot", "new_layout_widget",
           "legend_row", "elastic", "AdaptiveSplitter", "fit_range", "data_span",
           "hold_user_range", "release_user_range", "is_user_range", "KEEP_WIDER"]

# PAIR_COLOURS: one colour per kept pair, the same in every panel, on the canvas and in the
# command line's SVG plots; our own set, chosen to stay apart on light and dark backgrounds.

_DASHES = (Qt.PenStyle.SolidLine, Qt.PenStyle.DashLine, Qt.PenStyle.DotLine, Qt.PenStyle.DashDotLine)


def pair_colour(index: int) -> QColor:
    """Colour of the pair at ``index`` in the diagram's kept pairs."""
    return QColor(PAIR_COLOURS[index % len(PAIR_COLOURS)])


def shade_of(colour: QColor, element: int, elements: int) -> QColor:
    """The colour of element ``element`` of a vector pair with ``elements`` elements: the
    pair's colour itself for the first, then lighter shades of it (one pair, one hue)."""
    if elements <= 1 or element == 0:
        return QColor(colour)
    k = element / max(1, elements - 1)  # 0 .. 1
    c = QColor(colour)
    white = 0.62 * k  # mixed with white, never so far that it fades into the background
    return QColor(int(c.red() + (255 - c.red()) * white), int(c.green() + (255 - c.green()) * white), int(c.blue() + (255 - c.blue()) * white))


def legend_row(layout_widget: pg.GraphicsLayoutWidget, row: int = 0, *, columns: int = 3) -> pg.LegendItem:
    """A legend in its own row above the plots, never over the data; entries are added
    with ``legend.addItem(item, name)``, several to a line."""
    legend = pg.LegendItem(labelTextColor="#1f2933", brush=(255, 255, 255, 0), pen=None, colCount=columns, horSpacing=14)
    layout_widget.addItem(legend, row=row, col=0)
    layout_widget.ci.layout.setRowStretchFactor(row, 0)
    return legend


def pen_for(colour: QColor, element: int = 0, *, width: float = 2.0):
    """The pen of one curve: the pair's colour, one dash style per vector element."""
    return pg.mkPen(colour, width=width, style=_DASHES[element % len(_DASHES)])


def write_table_csv(path: str | Path, header: list[str], rows) -> None:
    """Write a header and rows of numbers or text to a CSV file (no Qt involved)."""
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(header)
        for r in rows:
            w.writerow([repr(float(v)) if isinstance(v, float) else v for v in r])


class PlotPanel(QWidget):
    """Base of the plot panels.

    Subclasses set :attr:`key` and :attr:`title`, build their plots in ``__init__`` and
    implement :meth:`job`, :meth:`show_value` and :meth:`table`.

    Signals
    -------
    options_changed()
        The panel's own options changed: its job must run again.
    """

    key = "panel"
    title = "panel"
    options_changed = Signal()
    stop_requested = Signal()

    def __init__(self, parent=None):
        super().__init__(parent)
        self.setObjectName(f"{self.key}_panel")
        self.pairs: list[tuple[str, str]] = []
        self._layout = QVBoxLayout(self)
        self._layout.setContentsMargins(4, 2, 4, 2)
        self._layout.setSpacing(2)
        self.message = QLabel("")
        self.message.setObjectName(f"{self.key}_message")
        self.message.setWordWrap(True)
        self.message.setSizePolicy(QSizePolicy.Policy.Ignored, QSizePolicy.Policy.Preferred)
        self.message.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self._layout.addWidget(self.message)
        self.waiting = QWidget()
        row = QHBoxLayout(self.waiting)
        row.setContentsMargins(0, 0, 0, 0)
        self.progress = QProgressBar()
        self.progress.setObjectName(f"{self.key}_progress")
        self.progress.setRange(0, 0)  # busy, until the engine reports a fraction done
        self.progress.setMaximumHeight(12)
        self.progress.setMinimumWidth(30)
        self.progress.setTextVisible(False)
        self.waiting_label = QLabel("computing…")
        row.addWidget(self.waiting_label)
        row.addWidget(self.progress, 1)
        self.stop_button = QPushButton("Stop")
        self.stop_button.setObjectName(f"{self.key}_stop")
        self.stop_button.clicked.connect(self.stop_requested.emit)
        row.addWidget(self.stop_button)
        self.waiting.setVisible(False)
        self._fraction: float | None = None  # the running job's last reported fraction done
        self._layout.addWidget(self.waiting)
        self.setContextMenuPolicy(Qt.ContextMenuPolicy.DefaultContextMenu)
        self.save_picture_action = QAction("Save picture (PNG or SVG)…", self)
        self.save_picture_action.triggered.connect(lambda _c=False: self.save_picture_dialog())
        self.save_data_action = QAction("Save data (CSV)…", self)
        self.save_data_action.triggered.connect(lambda _c=False: self.save_data_dialog())

    # ---- what subclasses provide ----------------------------------------------------------
    def job(self, diagram, pairs, shared=None):
        """``(fn, args, kwargs)`` to run on the worker for this diagram snapshot, or None.

        ``shared`` is the snapshot's :class:`~loopwright.engine.views_data.SharedModel`
        (the assembled model and what the views of one revision share); a panel passes
        it on to its engine function."""
        return None

    def show_value(self, value) -> None:
        raise NotImplementedError

    def table(self) -> tuple[list[str], list[list]]:
        """The data on show as a header and rows (what CSV export writes)."""
        return [], []

    def plot_scene_item(self):
        """The graphics item exported as the picture."""
        raise NotImplementedError

    # ---- shared ---------------------------------------------------------------------------
    def set_pairs(self, pairs: list[tuple[str, str]]) -> None:
        self.pairs = list(pairs)

    def set_waiting(self, on: bool) -> None:
        """Show (after half a second of waiting) or hide the busy line with its Stop button."""
        if on and self._fraction is not None:
            self._show_fraction()
        if not on:
            self._fraction = None
            if self.progress.maximum() != 0:
                self.progress.setRange(0, 0)
            if self.waiting_label.text() != "computing…":
                self.waiting_label.setText("computing…")
        if self.waiting.isHidden() == on:
            self.waiting.setVisible(on)

    def set_progress(self, fraction: float) -> None:
        """Show the fraction done of the running computation (0 to 1)."""
        self._fraction = fraction
        # while the busy line is hidden (a quick answer) only remember it: a label's new text
        # lays the panel out again, several times per answer
        if not self.waiting.isHidden():
            self._show_fraction()

    def _show_fraction(self) -> None:
        fraction = self._fraction
        self.progress.setRange(0, 1000)
        self.progress.setValue(int(round(1000 * min(max(fraction, 0.0), 1.0))))
        self.waiting_label.setText(f"computing… {100 * fraction:.0f} %")

    def progress_text(self) -> str:
        """What the busy line says (``computing… 40 %``)."""
        return self.waiting_label.text()

    def show_error(self, text: str) -> None:
        self.set_message(text, error=True)

    def set_message(self, text: str, *, error: bool = False) -> None:
        self.message.setText(text)
        style = "color: #c0392b;" if error else ""
        if self.message.styleSheet() != style:  # setting one polishes the label again, even the same one
            self.message.setStyleSheet(style)
        self.message.setVisible(bool(text))

    def contextMenuEvent(self, event) -> None:
        menu = QMenu(self)
        menu.addAction(self.save_picture_action)
        menu.addAction(self.save_data_action)
        menu.exec(event.globalPos())

    def save_picture(self, path: str | Path) -> None:
        """Write the plot as PNG or SVG (by the file's suffix).

        SVG goes through Qt's own SVG painter (vector output); pyqtgraph's SVG exporter
        fails on the closed paths of a filled legend box.
        """
        from loopwright.engine import CAUTION
        from loopwright.engine.output_paths import check_export_output

        path = str(path)
        check_export_output(path)  # never over a diagram, a folder or a read-only file
        widget = self.picture_widget()
        if path.lower().endswith(".svg"):
            from PySide6.QtCore import QPoint, QRect
            from PySide6.QtGui import QPainter
            from PySide6.QtSvg import QSvgGenerator

            gen = QSvgGenerator()
            gen.setFileName(path)
            gen.setSize(widget.size())
            gen.setViewBox(QRect(0, 0, widget.width(), widget.height()))
            gen.setTitle(f"Loopwright {self.title}")
            gen.setDescription(CAUTION)
            # cached items would paint their pixmaps; uncached they paint vectors and real text
            cached = [(it, it.cacheMode()) for view in [widget, *widget.findChildren(QGraphicsView)] if isinstance(view, QGraphicsView)
                      for it in view.scene().items() if it.cacheMode() != QGraphicsItem.CacheMode.NoCache]
            for it, _mode in cached:
                it.setCacheMode(QGraphicsItem.CacheMode.NoCache)
            try:
                painter = QPainter(gen)
                QWidget.render(widget, painter, QPoint(0, 0))  # the widget overload, also for a QGraphicsView
                painter.end()
            finally:
                for it, mode in cached:
                    it.setCacheMode(mode)
        else:
            from pyqtgraph.exporters import ImageExporter

            item = self.plot_scene_item()
            if item is None:
                widget.grab().save(path)
                return
            exporter = ImageExporter(item)
            exporter.parameters()["width"] = max(800, int(item.boundingRect().width()))
            exporter.export(path)

    def picture_widget(self) -> QWidget:
        """The widget drawn into a picture (the plot area)."""
        return self.canvas

    def save_data(self, path: str | Path) -> None:
        from loopwright.engine.output_paths import check_export_output

        check_export_output(path)
        header, rows = self.table()
        write_table_csv(path, header, rows)

    def save_picture_dialog(self) -> None:
        path, _ = QFileDialog.getSaveFileName(self, f"Save the {self.title} as a picture", f"{self.key}.svg",
                                              "SVG picture (*.svg);;PNG picture (*.png)")
        if path:
            self._refusable(self.save_picture, path)

    def save_data_dialog(self) -> None:
        path, _ = QFileDialog.getSaveFileName(self, f"Save the {self.title} data", f"{self.key}.csv", "CSV (*.csv)")
        if path:
            self._refusable(self.save_data, path)

    def _refusable(self, write, path) -> None:
        """Write, or say in one line why not (a diagram is never replaced by a picture)."""
        from loopwright.engine.errors import EngineError

        try:
            write(path)
        except (EngineError, OSError) as err:
            from PySide6.QtWidgets import QMessageBox

            QMessageBox.warning(self, f"Cannot save the {self.title}", str(err))


def themed_plot(layout_widget: pg.GraphicsLayoutWidget, row: int, *, left: str, bottom: str | None, log_x: bool = False) -> pg.PlotItem:
    """One plot cell with labelled axes, a grid and no pyqtgraph menu (the panel has its own)."""
    p = layout_widget.addPlot(row=row, col=0)
    p.setLabel("left", left)
    if bottom:
        p.setLabel("bottom", bottom)
    p.showGrid(x=True, y=True, alpha=0.25)
    p.setMenuEnabled(False)
    p.setLogMode(x=log_x, y=False)
    # the panel ranges the plot once per update (fit_range); pyqtgraph's own autorange
    # would re-range it for every curve given data
    p.disableAutoRange()
    for side in ("left", "bottom"):
        ax = p.getAxis(side)
        ax.enableAutoSIPrefix(False)  # a "(x0.001)" beside a unit is easy to miss
        ax.setPen(pg.mkPen("#5b6573"))
        ax.setTextPen(pg.mkPen("#1f2933"))
        # the axis keeps its ticks, labels and grid as a recorded picture, made again when
        # its range changes (rarely: fit_range keeps a range that holds the data) and when
        # it moves against its plot (a label above it wrapped onto another line); on screen
        # a copy of it is drawn when a curve over it changes (half the painting of an edit).
        # The copy is of the whole axis: one of only the part in sight (a device copy)
        # showed stale tick labels where a narrow panel cut the axis off.
        # (save_picture draws it as vectors and text again for SVG)
        ax.setCacheMode(QGraphicsItem.CacheMode.ItemCoordinateCache)
        ax.geometryChanged.connect(lambda _ax=ax: _redraw_axis(_ax))
    hold_user_range(p)
    return p


def _redraw_axis(axis: pg.AxisItem) -> None:
    axis.picture = None
    axis.update()


def data_span(arrays, *, log: bool = False) -> tuple[float, float] | None:
    """``(low, high)`` of the finite values of every array in ``arrays`` (of their log10,
    positive values only, when ``log``), or None when there is none."""
    lows, highs = [], []
    for a in arrays:
        a = np.asarray(a, dtype=float).ravel()
        if log:
            a = np.log10(a[a > 0])
        a = a[np.isfinite(a)]
        if a.size:
            lows.append(a.min())
            highs.append(a.max())
    if not lows:
        return None
    return float(min(lows)), float(max(highs))


#: A range that covers the data is kept until it is this many times as wide as a fitted
#: one (the data shrank a lot); so is one the user zoomed or panned, until they fit again.
KEEP_WIDER = 1.3


def hold_user_range(plot: pg.PlotItem) -> None:
    """Keep the range the user sets with the mouse (wheel zoom, drag) through later updates:
    :func:`fit_range` leaves it alone until :func:`release_user_range`, or until the user
    asks the plot to fit its data again (the plot's auto-range button)."""
    vb = plot.getViewBox()
    vb.user_range = False
    vb.sigRangeChangedManually.connect(lambda *_a, _vb=vb: setattr(_vb, "user_range", True))


def release_user_range(plot: pg.PlotItem) -> None:
    """Let :func:`fit_range` fit ``plot`` again (its data changed meaning: another unit, another run)."""
    plot.getViewBox().user_range = False


def is_user_range(vb: pg.ViewBox) -> bool:
    """True when ``vb`` (or a plot it follows along x) shows a range the user set; a press
    of the plot's auto-range button hands the range back to the panel."""
    if any(vb.autoRangeEnabled()):
        vb.user_range = False
        vb.disableAutoRange()  # the panel ranges it once per update from now on
    linked = vb.linkedView(0)
    return bool(getattr(vb, "user_range", False) or (linked is not None and getattr(linked, "user_range", False)))


def fit_range(plot: pg.PlotItem, *, x=None, y=None, padding: float | None = None) -> bool:
    """Range the plot once so it covers ``x`` and ``y`` (``(low, high)`` in view
    coordinates, e.g. from :func:`data_span`; None leaves that axis alone); True when it moved.

    The panels set every curve's data first and then range once, instead of letting each
    ``setData`` re-range the plot. An axis whose range already holds the data with half the
    padding to spare at both ends, and is at most :data:`KEEP_WIDER` times as wide as the
    fitted range, is kept: its axis keeps its drawn ticks (a new range lays out and draws
    the axis and its grid again), and an edit does not make the plot jitter. A range the
    user set (:func:`hold_user_range`) is kept as it is.
    """
    vb = plot.getViewBox()
    if is_user_range(vb):
        return False
    current = vb.viewRange()
    want: dict[str, tuple[float, float]] = {}
    for axis, span in ((0, x), (1, y)):
        if span is None:
            continue
        lo, hi = span
        width = hi - lo
        if not (np.isfinite(lo) and np.isfinite(hi)):
            continue
        if width <= 0:  # one value: a span around it (the scale of the value, or 1)
            half = 0.5 * (abs(lo) if lo else 1.0)
            lo, hi, width = lo - half, hi + half, 2.0 * half
        pad = vb.suggestPadding(axis) if padding is None else padding
        spare = 0.5 * pad * width
        lo, hi = lo - pad * width, hi + pad * width
        c_lo, c_hi = current[axis]
        holds = c_lo <= span[0] - spare and c_hi >= span[1] + spare
        if holds and (c_hi - c_lo) <= KEEP_WIDER * (hi - lo):
            continue
        want["xRange" if axis == 0 else "yRange"] = (lo, hi)
    if want:
        vb.setRange(padding=0, disableAutoRange=True, **want)
    # pyqtgraph moves the curves to a new range only when it paints, which makes the items it
    # moves ask for a second paint; moved now (this or a linked plot's range), one paint draws all
    vb.updateMatrix()
    return bool(want)


def new_layout_widget() -> pg.GraphicsLayoutWidget:
    w = pg.GraphicsLayoutWidget()
    w.setBackground("w")
    w.setMinimumSize(160, 90)
    return w


def elastic(label):
    """Let a label of any length shrink with its panel (it elides instead of widening the window)."""
    label.setSizePolicy(QSizePolicy.Policy.Ignored, QSizePolicy.Policy.Preferred)
    label.setMinimumWidth(10)
    return label


class AdaptiveSplitter(QSplitter):
    """Plot and table side by side when there is room, one above the other when narrow."""

    def __init__(self, *, across_from: int = 720, first_share: float = 0.6, parent=None):
        super().__init__(Qt.Orientation.Horizontal, parent)
        self._across_from = across_from
        self._first_share = first_share
        self.setChildrenCollapsible(False)

    def resizeEvent(self, event) -> None:
        want = Qt.Orientation.Horizontal if event.size().width() >= self._across_from else Qt.Orientation.Vertical
        if want != self.orientation():
            self.setOrientation(want)
            total = event.size().width() if want == Qt.Orientation.Horizontal else event.size().height()
            self.setSizes([int(total * self._first_share), int(total * (1.0 - self._first_share))])
        super().resizeEvent(event)

