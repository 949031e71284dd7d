"""Colours, pens and fonts of the canvas, derived from the system palette.

One :class:`Theme` value is built from the application palette (light or dark) and passed
to the scene; nothing reads a global. The colours are our own: a slate ink for blocks, a
teal for signals, amber for selection, and a distinct hue per source role.
"""
from __future__ import annotations

from dataclasses import dataclass

from PySide6.QtGui import QColor, QGuiApplication, QPalette

__all__ = ["Theme", "theme_from_palette", "is_dark_palette"]


@dataclass(frozen=True)
class Theme:
    """Every colour the canvas paints with."""

    dark: bool
    background: QColor
    grid: QColor
    block_fill: QColor
    block_border: QColor
    text: QColor
    caption: QColor
    wire: QColor
    port: QColor
    target_ok: QColor
    selection: QColor
    problem: QColor
    highlight: QColor
    reference: QColor
    disturbance: QColor
    noise: QColor
    hint: QColor

    def role_colour(self, role: str) -> QColor:
        """Colour of a source glyph by role (reference, disturbance, noise)."""
        return {"reference": self.reference, "disturbance": self.disturbance, "noise": self.noise}.get(role, self.text)


def is_dark_palette(palette: QPalette) -> bool:
    """True when the window background is darker than its text (a dark system theme)."""
    return palette.color(QPalette.ColorRole.Window).lightness() < palette.color(QPalette.ColorRole.WindowText).lightness()


def theme_from_palette(palette: QPalette | None = None, *, dark: bool | None = None) -> Theme:
    """Build the canvas theme; ``dark`` overrides what the palette suggests."""
    if palette is None:
        palette = QGuiApplication.palette()
    if dark is None:
        dark = is_dark_palette(palette)
    if dark:
        return Theme(
            dark=True,
            background=QColor("#1d2126"),
            grid=QColor("#2a3038"),
            block_fill=QColor("#28303a"),
            block_border=QColor("#9fb3c8"),
            text=QColor("#e6edf3"),
            caption=QColor("#9aa7b4"),
            wire=QColor("#4fc1b0"),
            port=QColor("#9fb3c8"),
            target_ok=QColor("#7ee081"),
            selection=QColor("#f0b429"),
            problem=QColor("#ff6b6b"),
            highlight=QColor("#c792ea"),
            reference=QColor("#6cb6ff"),
            disturbance=QColor("#ff9e64"),
            noise=QColor("#d4a5ff"),
            hint=QColor("#6f7c89"),
        )
    return Theme(
        dark=False,
        background=QColor("#fbfaf7"),
        grid=QColor("#e9e6df"),
        block_fill=QColor("#ffffff"),
        block_border=QColor("#2f3e4e"),
        text=QColor("#1f2933"),
        caption=QColor("#5f6b7a"),
        wire=QColor("#127a6b"),
        port=QColor("#2f3e4e"),
        target_ok=QColor("#2e9d44"),
        selection=QColor("#d08a00"),
        problem=QColor("#d62839"),
        highlight=QColor("#8e44ad"),
        reference=QColor("#1f6fc5"),
        disturbance=QColor("#c75100"),
        noise=QColor("#7a3fb8"),
        hint=QColor("#8a94a0"),
    )
