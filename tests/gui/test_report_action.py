"""File ▸ Write report from the app: the canvas as drawn, the views the user has open, the
engine's numbers, and never over a diagram; the headless launcher draws the same canvas."""
from __future__ import annotations

from html.parser import HTMLParser
from pathlib import Path

import pytest

from loopwright.engine.project import load
from loopwright.engine.report_html import SECTIONS

from gui_helpers import SAMPLES

pytestmark = pytest.mark.qt

ROTOR = next(p for p in SAMPLES if p.stem == "levitated_rotor_axis")


class _Sections(HTMLParser):
    def __init__(self):
        super().__init__()
        self.ids, self.captions, self._in_cap, self.svgs = [], [], False, 0

    def handle_starttag(self, tag, attrs):
        if tag == "section":
            self.ids.append(dict(attrs).get("id"))
        if tag == "svg":
            self.svgs += 1
        self._in_cap = tag == "figcaption"

    def handle_data(self, data):
        if self._in_cap:
            self.captions.append(data)
            self._in_cap = False


def _parse(path: Path) -> _Sections:
    p = _Sections()
    p.feed(path.read_text(encoding="utf-8"))
    return p


def test_report_from_the_app_holds_the_canvas_and_the_open_views(window, qtbot, tmp_path):
    window.show()
    assert window.open_sample(str(ROTOR))
    for key in ("poles", "noise"):
        window.view_docks[key].show()
        window.view_docks[key].raise_()
        window.views.refresh(key)
    qtbot.waitUntil(lambda: window.views.is_idle() and window.live.is_current(), timeout=30000)
    out = tmp_path / "rotor_report.html"
    with qtbot.waitSignal(window.report_writer.written, timeout=60000) as sig:
        assert window.report_writer.write_to(str(out))
    assert sig.args == [str(out)]
    parsed = _parse(out)
    assert parsed.ids == list(SECTIONS)
    assert "The diagram as drawn" in parsed.captions
    assert "Pole map (as open in the app)" in parsed.captions
    assert "Noise budget (as open in the app)" in parsed.captions
    assert not any(c.startswith("Frequency view") for c in parsed.captions)  # open, but no pair asked yet
    text = out.read_text(encoding="utf-8")
    shown = [c for c in parsed.captions if c.endswith("(as open in the app)")]
    assert text.count('src="data:image/png;base64,') == len(shown) >= 2  # each open, current view as on screen
    # the canvas's SVG (vectors and text, not pixmaps) names every block the canvas labels
    diagram_part = text[text.index('<section id="diagram">'):text.index('<section id="model">')]
    assert "<image" not in diagram_part
    for b in load(ROTOR).blocks.values():
        if b.kind != "sum":  # a summing junction shows its signs, not its name
            assert f">{b.name}<" in diagram_part


def test_report_from_the_app_is_refused_over_a_diagram(window, qtbot, tmp_path):
    window.show()
    assert window.open_sample(str(ROTOR))
    victim = tmp_path / "other.lwd"
    victim.write_bytes(ROTOR.read_bytes())
    with qtbot.waitSignal(window.report_writer.failed, timeout=5000) as sig:
        assert not window.report_writer.write_to(str(victim))
    assert "never replaces a diagram" in sig.args[0]
    assert victim.read_bytes() == ROTOR.read_bytes()


def test_headless_report_draws_the_canvas_offscreen(qapp, tmp_path, capsys):
    from loopwright.gui.launcher import main

    out = tmp_path / "rotor.html"
    assert main(["report", str(ROTOR), "--html", str(out)]) == 0
    assert "the canvas, rendered offscreen" in capsys.readouterr().out
    parsed = _parse(out)
    assert parsed.ids == list(SECTIONS)
    assert "The diagram as drawn on the canvas" in parsed.captions


def test_report_draws_views_behind_a_tab_readably_and_leaves_the_selection_out(window, qtbot, tmp_path):
    # The loop-break view sits behind the time view's tab (never laid out on screen): its picture
    # must still be drawn at a readable size. The selected block is drawn as any other block, and
    # stays selected in the app. Common practice, no source.
    from PySide6.QtGui import QImage

    from loopwright.gui.report_action import open_view_pictures, scene_svg

    window.resize(1400, 900)
    window.show()
    assert window.open_sample(str(ROTOR))
    window.views.refresh("loop_break")
    qtbot.waitUntil(lambda: window.views.is_idle() and window.live.is_current(), timeout=30000)
    assert window.view_docks["loop_break"].visibleRegion().isEmpty()  # behind a tab
    pictures, _skipped = open_view_pictures(window)
    loop = next(p for p in pictures if p.title.startswith("Loop-break view"))
    img = QImage.fromData(loop.png)
    # the plot sits beside the margins list at the picture size: an aspect-locked Nyquist
    # plot wants a square of at least 350 px (the dock behind the tab gave it 332 x 129)
    assert min(img.width(), img.height()) >= 350
    assert window.view_docks["loop_break"].widget() is window.panels["loop_break"]  # put back in its dock
    k = window.scene.block_items[window.document.diagram.block_by_name("K").id]
    plain = scene_svg(window.scene)
    with qtbot.waitSignal(window.scene.selectionChanged, timeout=5000):
        k.setSelected(True)
    shown = window.inspector.block_id
    assert scene_svg(window.scene) == plain
    assert k.isSelected() and window.inspector.block_id == shown
