"""Light and dark canvas colours from the system palette (tests of gui/theme.py)."""
from __future__ import annotations

import pytest
from PySide6.QtGui import QColor, QPalette

from loopwright.gui.theme import is_dark_palette, theme_from_palette

pytestmark = pytest.mark.qt


def _palette(window: str, text: str) -> QPalette:
    pal = QPalette()
    pal.setColor(QPalette.ColorRole.Window, QColor(window))
    pal.setColor(QPalette.ColorRole.WindowText, QColor(text))
    return pal


def test_a_dark_system_palette_gives_the_dark_canvas(qapp):
    dark = _palette("#202020", "#f0f0f0")
    assert is_dark_palette(dark)
    assert theme_from_palette(dark).dark
    assert theme_from_palette(dark).background.lightness() < 80


def test_a_light_system_palette_gives_the_light_canvas(qapp):
    light = _palette("#f0f0f0", "#101010")
    assert not is_dark_palette(light)
    assert theme_from_palette(light).background.lightness() > 200


def test_the_three_source_roles_have_distinct_colours(qapp):
    for dark in (False, True):
        t = theme_from_palette(dark=dark)
        names = {t.role_colour(r).name() for r in ("reference", "disturbance", "noise")}
        assert len(names) == 3
