"""The loop-break view stays readable in a short dock (~250 px) and in an 800x600 window:
the Nyquist plot and the margins list both shown, with room, never on top of each other,
the legend inside the plot's width; and the list names a frequency only where a margin has
one (the conveyor sample's loop has no lower gain margin)."""
from __future__ import annotations

import numpy as np
import pytest
from PySide6.QtCore import QRect, Qt

from loopwright.engine.margins import LoopMargins
from loopwright.engine.project import load
from loopwright.engine.views_data import loop_break_view
from loopwright.gui.docks.loop_break import margin_rows

from gui_helpers import SAMPLES

pytestmark = pytest.mark.qt

CONVEYOR = next(p for p in SAMPLES if p.stem == "conveyor_flexible_drive")  # broken at P.u


@pytest.fixture
def wait_views(qtbot):
    def _wait(win, timeout=30000):
        qtbot.waitUntil(lambda: win.views.is_idle() and win.live.is_current(), timeout=timeout)

    return _wait


def _global_rect(widget) -> QRect:
    return QRect(widget.mapToGlobal(widget.rect().topLeft()), widget.size())


def _assert_readable(panel) -> None:
    plot, listed = panel.canvas, panel.margins
    for w in (plot, listed):
        assert w.isVisible() and w.width() > 100 and w.height() > 80, (w.objectName(), w.size())
    assert not _global_rect(plot).intersects(_global_rect(listed))
    if panel.legend.isVisible():
        assert panel.legend_width(panel.legend.columnCount) <= plot.width()
    else:
        assert "critical point" in plot.toolTip()  # the legend gave its lines to the plot
    # both columns of the list have room, and every row is as tall as its wrapped text
    assert listed.columnWidth(0) >= 60 and listed.viewport().width() - listed.columnWidth(0) >= 60
    for i in range(listed.rowCount()):
        assert listed.rowHeight(i) >= listed.sizeHintForRow(i) - 1


def _open_loop_break(window, wait_views):
    window.show()
    assert window.open_sample(str(CONVEYOR))
    dock = window.view_docks["loop_break"]
    dock.show()
    dock.raise_()
    window.views.refresh("loop_break")
    wait_views(window)
    panel = window.panels["loop_break"]
    assert panel.data is not None
    return dock, panel


def test_a_short_dock_shows_the_plot_beside_the_margins(window, wait_views, qtbot):
    dock, panel = _open_loop_break(window, wait_views)
    window.resizeDocks([dock], [250], Qt.Orientation.Vertical)
    qtbot.waitUntil(lambda: dock.height() <= 260, timeout=3000)
    qtbot.wait(50)
    assert panel.split.orientation() == Qt.Orientation.Horizontal
    assert not panel.summary.isVisible()  # the list beside the plot says the same
    _assert_readable(panel)


def test_in_an_800x600_window_plot_and_margins_are_both_readable(window, wait_views, qtbot):
    from test_dock_layout import show_every_dock

    window.resize(800, 600)
    dock, panel = _open_loop_break(window, wait_views)
    show_every_dock(window)
    dock.raise_()
    qtbot.waitUntil(panel.isVisible, timeout=3000)
    qtbot.wait(50)
    assert window.height() <= 620
    _assert_readable(panel)


def test_the_panel_alone_at_800x600_has_the_plot_beside_the_list(qtbot):
    from loopwright.gui.docks.loop_break import LoopBreakPanel

    panel = LoopBreakPanel()
    qtbot.addWidget(panel)
    panel.resize(800, 600)
    panel.show()
    qtbot.waitExposed(panel)
    panel.show_value(loop_break_view(load(CONVEYOR), "P.u"))
    qtbot.wait(50)
    assert panel.split.orientation() == Qt.Orientation.Horizontal
    assert panel.summary.isVisible()
    _assert_readable(panel)
    assert panel.legend.isVisible() and panel.legend.columnCount == 4


def test_the_margins_name_a_frequency_only_where_there_is_one():
    ref = loop_break_view(load(CONVEYOR), "P.u")
    m = ref.margins if isinstance(ref.margins, LoopMargins) else ref.margins.per_channel[0]
    # this loop has no lower gain margin: the engine gives 0 and no frequency
    assert m.gain_lower == 0 and np.isnan(m.gain_lower_w_rad_s)
    rows = dict(margin_rows(m))
    assert rows["gain margin, lower"] == "none: stable for any lower gain"
    assert rows["phase margin"] == f"{m.phase_margin_deg:.4g}° at {m.phase_margin_w_rad_s:.4g} rad/s"
    assert not any("—" in v for v in rows.values())


@pytest.mark.parametrize("width", [300, 420, 800])
def test_the_margins_list_settles_and_the_idle_panel_does_no_work(qtbot, width):
    # the list's first column is capped at half its width; fitting it must not change it
    # back and forth (each change refits again): a panel doing so repainted without end and
    # kept a core busy while the window sat idle
    from PySide6.QtCore import QEvent, QObject

    from loopwright.gui.docks.loop_break import LoopBreakPanel

    panel = LoopBreakPanel()
    qtbot.addWidget(panel)
    panel.resize(width, 360)
    panel.show()
    qtbot.waitExposed(panel)
    panel.show_value(loop_break_view(load(CONVEYOR), "P.u"))
    qtbot.wait(100)  # let the layout settle

    class Counter(QObject):
        def __init__(self):
            super().__init__()
            self.events = 0

        def eventFilter(self, obj, event):
            if event.type() in (QEvent.Type.Timer, QEvent.Type.Paint, QEvent.Type.LayoutRequest):
                self.events += 1
            return False

    counter = Counter()
    watched = [panel, panel.margins, panel.margins.viewport(), panel.margins.horizontalHeader()]
    for w in watched:
        w.installEventFilter(counter)
    fits = []
    panel.margins.horizontalHeader().sectionResized.connect(lambda *a: fits.append(a))
    qtbot.wait(300)
    for w in watched:
        w.removeEventFilter(counter)
    assert fits == [] and counter.events <= 3, (fits[:4], counter.events)
    assert panel.margins.columnWidth(0) <= max(panel.margins.viewport().width() // 2, 60)
