"""Puts the analysis panels into a main window: the pairs panel, one dock per plot panel,
the canvas picks, the Views menu and File ▸ Export view.

Plot docks sit in the bottom area in two tab groups beside the problems list (whose group
also holds the history, the path audit and the pairs); the inspector has the right side
to itself. The layout is saved with the window state (``window/state``), never in the diagram.
"""
from __future__ import annotations

from PySide6.QtCore import QEvent, QObject, QSize, Qt
from PySide6.QtWidgets import QDockWidget, QLabel, QSizePolicy

from loopwright.gui.docks.audit import AuditPanel
from loopwright.gui.docks.frequency import FrequencyPanel
from loopwright.gui.docks.loop_break import LoopBreakPanel
from loopwright.gui.docks.noise import NoisePanel
from loopwright.gui.docks.pairs import PairPicker, PairsPanel
from loopwright.gui.docks.poles import PoleMapPanel
from loopwright.gui.docks.singular_values import SingularValuePanel
from loopwright.gui.docks.time import TimePanel
from loopwright.gui.docks.views import ViewsController

__all__ = ["install_views", "PANEL_TITLES"]

#: Dock titles (the names in the glossary).
PANEL_TITLES = {
    "frequency": "Frequency view",
    "time": "Time view",
    "poles": "Pole map",
    "loop_break": "Loop-break view",
    "singular_values": "Singular-value view",
    "noise": "Noise budget",
    "audit": "Path audit",
}


def _dock(window, title: str, name: str, widget) -> QDockWidget:
    dock = QDockWidget(title, window)
    dock.setObjectName(name)
    dock.setWidget(widget)
    return dock


def install_views(window) -> None:
    """Create the panels and docks of ``window`` and wire them to its document and canvas.

    Sets ``window.picker``, ``window.pairs_panel``, ``window.views`` (the controller),
    ``window.panels`` (key -> panel) and ``window.view_docks`` (key -> dock).
    """
    doc = window.document
    window.picker = PairPicker(doc, window.scene, window._push, parent=window)
    window.picker.message.connect(lambda text: window.statusBar().showMessage(text, 10000))
    window.view.pick_provider = window.picker.actions_for
    window.pairs_panel = PairsPanel(doc, window.picker, window._push)
    window.pairs_dock = QDockWidget("Pairs", window)
    window.pairs_dock.setObjectName("pairs_dock")
    window.pairs_dock.setWidget(window.pairs_panel)
    # The inspector has the right side to itself (a tab bar there hid one of the two and
    # squeezed the matrices); the pairs' keyboard lists join the bottom-left tab group.
    window.addDockWidget(Qt.DockWidgetArea.BottomDockWidgetArea, window.pairs_dock)
    window.views = ViewsController(doc, debounce_ms=window.prefs.debounce_ms, parent=window)
    panels = [FrequencyPanel(), TimePanel(), PoleMapPanel(), LoopBreakPanel(), SingularValuePanel(), NoisePanel(), AuditPanel()]
    window.panels = {p.key: p for p in panels}
    window.view_docks = {}
    for p in panels:
        dock = _dock(window, PANEL_TITLES[p.key], f"{p.key}_dock", p)
        window.view_docks[p.key] = dock
        window.views.add(p, dock)
    vd = window.view_docks
    # two tab groups beside the problems list: responses on the left, loop questions on the right
    bottom, across = Qt.DockWidgetArea.BottomDockWidgetArea, Qt.Orientation.Horizontal
    for dock in (vd["frequency"], vd["time"]):
        window.addDockWidget(bottom, dock, across)
    for k in ("singular_values", "poles"):
        window.tabifyDockWidget(vd["frequency"], vd[k])
    for k in ("loop_break", "noise"):
        window.tabifyDockWidget(vd["time"], vd[k])
    window.tabifyDockWidget(window.history_dock, vd["audit"])
    window.tabifyDockWidget(vd["audit"], window.pairs_dock)
    vd["frequency"].raise_()
    vd["time"].raise_()
    window.problems_dock.raise_()
    _drop_leftover_tab_bars(window)
    window._tab_bar_sweeper = _TabBarSweeper(window)
    audit = window.panels["audit"]
    audit.path_selected.connect(lambda row: _show_audit_path(window, row))
    # a label of its own: a passing status message would be squeezed out by the live model's line
    window.audit_status = ElidedStatus(window.statusBar())
    window.audit_status.setObjectName("audit_status")
    window.statusBar().addPermanentWidget(window.audit_status)
    audit.summary_changed.connect(window.audit_status.setText)
    window.problems.view_requested.connect(lambda key: (window.view_docks[key].show(), window.view_docks[key].raise_()))
    _build_menus(window)


class ElidedStatus(QLabel):
    """A status-bar line that takes at most about a third of the bar and elides the rest
    (the whole line is its tooltip): in a small window the path audit's line pushed the
    live model's poles out of sight."""

    def __init__(self, bar, share: float = 0.35):
        super().__init__("")
        self._bar, self._share, self._full = bar, share, ""
        self.setSizePolicy(QSizePolicy.Policy.Preferred, QSizePolicy.Policy.Preferred)
        bar.installEventFilter(self)  # the room follows the bar's width

    def eventFilter(self, obj, event) -> bool:
        if obj is self._bar and event.type() == QEvent.Type.Resize:
            self.updateGeometry()
        return super().eventFilter(obj, event)

    def setText(self, text: str) -> None:
        self._full = text
        self.setToolTip(text)
        self.updateGeometry()
        self._elide()

    def text(self) -> str:
        return self._full

    def _room(self) -> int:
        return max(120, int(self._share * self._bar.width()))

    def sizeHint(self) -> QSize:
        hint = super().sizeHint()
        return QSize(min(self.fontMetrics().horizontalAdvance(self._full) + 8, self._room()), hint.height())

    def minimumSizeHint(self) -> QSize:
        return QSize(0, super().minimumSizeHint().height())

    def resizeEvent(self, event) -> None:
        super().resizeEvent(event)
        self._elide()

    def _elide(self) -> None:
        shown = self.fontMetrics().elidedText(self._full, Qt.TextElideMode.ElideRight, max(self.width() - 4, 0))
        QLabel.setText(self, shown)


def _drop_leftover_tab_bars(window) -> None:
    """Hide the tab bars the tab groups went through while they were built.

    Each ``tabifyDockWidget`` gives its group a new tab bar; the main window keeps the
    previous one as a visible child with a stale tab list until its next full layout, and
    one of them peeks out at the edge of the canvas. A tab bar in use lists exactly the
    docks of one group; a leftover lists fewer than some other tab bar that holds them all.
    """
    from PySide6.QtWidgets import QTabBar

    # the window's own children only (a search of every widget below it took longer than
    # the rest of an edit's layout pass)
    bars = window.findChildren(QTabBar, options=Qt.FindChildOption.FindDirectChildrenOnly)
    if len(bars) < 2:
        return
    tabs = {tb: [tb.tabText(i) for i in range(tb.count())] for tb in bars}
    for tb, names in tabs.items():
        if any(other is not tb and len(other_names) > len(names) and set(names) <= set(other_names) for other, other_names in tabs.items()):
            tb.hide()


class _TabBarSweeper(QObject):
    """Hides leftover tab bars again whenever the main window is shown or lays itself out
    (the main window may show them again when it rebuilds its dock areas)."""

    def __init__(self, window):
        super().__init__(window)
        self._window = window
        window.installEventFilter(self)

    def eventFilter(self, obj, event) -> bool:
        if obj is self._window and event.type() in (QEvent.Type.Show, QEvent.Type.LayoutRequest):
            _drop_leftover_tab_bars(self._window)
        return False


def _show_audit_path(window, row) -> None:
    """Light the path on the canvas and draw it in the frequency view."""
    if row is None:
        window.scene.highlight()
        window.panels["frequency"].set_audit_pair(None)
        return
    window.scene.highlight(row.block_ids, row.wire_ids)
    window.panels["frequency"].set_audit_pair((row.source, row.signal))
    window.view_docks["frequency"].raise_()
    window.view_docks["frequency"].show()


def _build_menus(window) -> None:
    mb = window.menuBar()
    views_menu = None
    for act in mb.actions():
        if act.text().replace("&", "") == "Help":
            views_menu = mb.insertMenu(act, _new_menu(window, "Vie&ws")).menu()
            break
    if views_menu is None:
        views_menu = mb.addMenu("Vie&ws")
    views_menu.setObjectName("views_menu")
    views_menu.addAction(window.pairs_dock.toggleViewAction())
    views_menu.addSeparator()
    for key, dock in window.view_docks.items():
        views_menu.addAction(dock.toggleViewAction())
    views_menu.addSeparator()
    views_menu.addAction("Refresh every view", window.views.refresh_visible)
    file_menu = next(a.menu() for a in mb.actions() if a.text().replace("&", "") == "File")
    export = file_menu.addMenu("&Export view")
    export.setObjectName("export_view_menu")
    file_menu.insertMenu(file_menu.actions()[-3], export)  # above Close window / Quit
    for key, panel in window.panels.items():
        title = PANEL_TITLES[key]
        export.addAction(f"{title} as a picture (PNG or SVG)…", panel.save_picture_dialog)
        export.addAction(f"{title} data (CSV)…", panel.save_data_dialog)


def _new_menu(window, title: str):
    from PySide6.QtWidgets import QMenu

    return QMenu(title, window)
