"""The default dock layout: the inspector has the right side to itself (no Inspector/Pairs
tab bar), every tab bar shown belongs to one group of docks, at the default size and in an
800x600 window; a layout saved by an older version gives way to the default."""
from __future__ import annotations

import pytest
from PySide6.QtWidgets import QTabBar

pytestmark = pytest.mark.qt

GROUPS = [
    {"Problems", "History", "Path audit", "Pairs"},
    {"Frequency view", "Singular-value view", "Pole map"},
    {"Time view", "Loop-break view", "Noise budget"},
]


def _visible_tab_groups(window) -> list[set[str]]:
    bars = [tb for tb in window.findChildren(QTabBar) if tb.parentWidget() is window and tb.isVisible()]
    return [{tb.tabText(i) for i in range(tb.count())} for tb in bars]


def show_every_dock(window) -> None:
    """What a user does in a small window, where the panels give way: View ▸ each panel."""
    from PySide6.QtWidgets import QDockWidget

    for dock in window.findChildren(QDockWidget):
        if dock.isHidden():
            dock.toggleViewAction().trigger()


def show_at(window, qtbot, size) -> None:
    """Show ``window`` at ``size`` (None: the default), its panels shown again where a small
    window made them give way."""
    if size is not None:
        window.resize(*size)
    window.show()
    qtbot.waitExposed(window)
    if size is not None:
        show_every_dock(window)


@pytest.mark.parametrize("size", [None, (800, 600)], ids=["default-size", "800x600-panels-shown-again"])
def test_the_inspector_stands_alone_and_every_tab_bar_is_one_group(window, qtbot, size):
    show_at(window, qtbot, size)
    qtbot.waitUntil(lambda: window.inspector_dock.widget().height() > 150, timeout=3000)
    assert window.tabifiedDockWidgets(window.inspector_dock) == []
    groups = _visible_tab_groups(window)
    assert sorted(map(sorted, groups)) == sorted(map(sorted, GROUPS))
    dock = window.inspector_dock
    assert dock.isVisible() and dock.widget().width() > 100
    # the inspector's panel starts right under its title: no tab bar above or below it
    for tb in window.findChildren(QTabBar):
        if tb.isVisible() and tb.parentWidget() is window:
            assert not tb.geometry().intersects(dock.geometry())


def test_a_layout_saved_by_an_older_version_gives_way_to_the_default(make_window, qsettings, qtbot):
    old = make_window()
    old.tabifyDockWidget(old.inspector_dock, old.pairs_dock)
    qsettings.setValue("window/state", old.saveState())  # what the earlier layout saved (version 0)
    new = make_window()
    new.show()
    qtbot.waitExposed(new)
    assert new.tabifiedDockWidgets(new.inspector_dock) == []
    assert new.pairs_dock in new.tabifiedDockWidgets(new.problems_dock)
