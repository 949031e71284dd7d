"""The noise budget: the steady-state RMS of each chosen signal (the outputs of the kept
pairs; every signal when none is kept), split by white-noise source, as stacked bars with
the table beside them."""
from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtGui import QColor, QFont, QFontMetrics
from PySide6.QtWidgets import QTableWidget, QTableWidgetItem

from loopwright.engine.interconnect import assemble
from loopwright.engine.noise import noise_budget
from loopwright.engine.views_data import noise_bars
from loopwright.gui.docks.panel import AdaptiveSplitter, PlotPanel, new_layout_widget, themed_plot

__all__ = ["NoisePanel", "noise_view_data", "SOURCE_COLOURS"]

# one colour per white source, apart from the pair colours (bars are split by source, not pair)
SOURCE_COLOURS = ("#4c6a92", "#d9822b", "#6aa84f", "#a64d79", "#45818e", "#b5a642", "#7f6084", "#9c5b3b")


def noise_view_data(diagram, signals, *, shared=None) -> tuple:
    """(budget, bars) for the chosen signals (all when ``signals`` is empty); worker thread
    (``shared``: the snapshot's :class:`~loopwright.engine.views_data.SharedModel`)."""
    budget = noise_budget(assemble(diagram) if shared is None else shared.model)
    return budget, noise_bars(budget, list(signals) or None)


class NoisePanel(PlotPanel):
    key = "noise"
    title = "noise budget"

    def __init__(self, parent=None):
        super().__init__(parent)
        split = AdaptiveSplitter()
        self.canvas = new_layout_widget()
        self.plot = themed_plot(self.canvas, 0, left="RMS", bottom=None)
        self.legend = self.plot.addLegend(offset=(-10, 10), labelTextColor="#1f2933", brush=(255, 255, 255, 210))
        split.addWidget(self.canvas)
        self.table_widget = QTableWidget(0, 0)
        self.table_widget.setObjectName("noise_table")
        self.table_widget.verticalHeader().setVisible(False)
        self.table_widget.setMinimumHeight(40)
        split.addWidget(self.table_widget)
        self._layout.addWidget(split, 1)
        self.bars: dict[str, pg.BarGraphItem] = {}
        self.shown: list = []
        self.budget = None
        self.tick_names: list[str] = []
        self.tick_order: list[int] = []  # bars by RMS, largest first: the first to be named
        self.plot.getViewBox().sigResized.connect(self._thin_ticks)
        self.plot.getViewBox().sigXRangeChanged.connect(self._thin_ticks)

    def job(self, diagram, pairs, shared=None):
        outputs = list(dict.fromkeys(sig for _src, sig in pairs))
        return noise_view_data, (diagram, outputs), {"shared": shared}

    def show_value(self, value) -> None:
        if value is None:
            return
        budget, bars = value
        self.budget, self.shown = budget, bars
        sources = list(budget.sources)
        x = np.arange(len(bars), dtype=float)
        bottom = np.zeros(len(bars))
        for k, src in enumerate(sources):
            heights = np.array([b.parts.get(src, 0.0) for b in bars], dtype=float)
            heights = np.where(np.isfinite(heights), heights, 0.0)
            if src not in self.bars:
                item = pg.BarGraphItem(x=x, height=heights, y0=bottom, width=0.6, brush=QColor(SOURCE_COLOURS[k % len(SOURCE_COLOURS)]), name=src)
                self.bars[src] = item
                self.plot.addItem(item)  # named: the legend picks it up
            self.bars[src].setOpts(x=x, height=heights, y0=bottom.copy(), width=0.6)
            bottom = bottom + heights
        for src in [s for s in self.bars if s not in sources]:
            item = self.bars.pop(src)
            self.plot.removeItem(item)
            self.legend.removeItem(item)
        self.tick_names = [b.name for b in bars]
        # an infinite RMS (white noise passed straight through) draws no bar: named last
        self.tick_order = sorted(range(len(bars)), key=lambda i: -bars[i].rms if np.isfinite(bars[i].rms) else np.inf)
        self._thin_ticks()
        self._fill_table(budget, bars, sources)
        note = budget.message
        note = (note + "; " if note else "") + "each bar is the RMS, split in proportion to each source's share of the variance"
        if self.pairs:
            note = (note + "; " if note else "") + "signals: the outputs of the kept pairs"
        else:
            note = (note + "; " if note else "") + "every signal (keep pairs to choose)"
        self.set_message(note)
        self.plot.enableAutoRange()

    def _thin_ticks(self, *_args) -> None:
        """Name the bars, the largest RMS first, keeping names apart by the widest name at
        the plot's width (with every signal shown, seventeen names ran into one another);
        the table names all."""
        names = self.tick_names
        axis = self.plot.getAxis("bottom")
        if not names:
            axis.setTicks([[]])
            return
        (x0, x1), width = self.plot.getViewBox().viewRange()[0], self.plot.getViewBox().width()
        per_bar = width / max(x1 - x0, 1e-9)  # pixels from one bar to the next
        metrics = QFontMetrics(axis.style.get("tickFont") or QFont())
        widest = max(metrics.horizontalAdvance(n) for n in names) + 8
        stride = max(1, int(np.ceil(widest / max(per_bar, 1e-9))))
        named: list[int] = []
        for i in self.tick_order:  # the tallest bars get their names first
            if all(abs(i - j) >= stride for j in named):
                named.append(i)
        axis.setTicks([[(float(i), names[i]) for i in sorted(named)],
                       [(float(i), "") for i in range(len(names)) if i not in named]])

    def _fill_table(self, budget, bars, sources) -> None:
        header = ["signal", "RMS"] + [f"share {s}" for s in sources] + [""]
        t = self.table_widget
        t.setColumnCount(len(header))
        t.setHorizontalHeaderLabels(header)
        t.setRowCount(len(bars))
        for i, b in enumerate(bars):
            cells = [b.name, f"{b.rms:.4g}"]
            tot = sum(v for v in b.variance_by_source.values() if np.isfinite(v))
            cells += [f"{100 * b.variance_by_source[s] / tot:.1f} %" if tot > 0 and np.isfinite(b.variance_by_source[s]) else "—" for s in sources]
            cells.append(b.reason)
            for j, c in enumerate(cells):
                t.setItem(i, j, QTableWidgetItem(c))
        t.resizeColumnsToContents()

    def bar_heights(self) -> dict[str, np.ndarray]:
        """Source -> the heights of its bar segments as drawn (in the order of ``shown``)."""
        return {s: np.asarray(item.opts["height"], dtype=float) for s, item in self.bars.items()}

    def plot_scene_item(self):
        return self.canvas.ci

    def table(self):
        if self.budget is None:
            return ["signal", "rms"], []
        sources = list(self.budget.sources)
        return (["signal", "rms"] + [f"variance[{s}]" for s in sources],
                [[b.name, b.rms] + [float(b.variance_by_source[s]) for s in sources] for b in self.shown])
