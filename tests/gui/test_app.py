"""``loopwright FILE --screenshot OUT.png`` end to end, in a fresh process (tests of gui/app.py)."""
from __future__ import annotations

import os
import struct
import subprocess
import sys

import pytest

from gui_helpers import SAMPLES
from pictures import mask_of, rgb_array

pytestmark = pytest.mark.qt


def _run(args, tmp_path):
    env = dict(os.environ, QT_QPA_PLATFORM="offscreen", HOME=str(tmp_path), XDG_CONFIG_HOME=str(tmp_path / "cfg"),
               XDG_DATA_HOME=str(tmp_path / "data"))
    return subprocess.run([sys.executable, "-m", "loopwright.gui.launcher", *args], env=env, capture_output=True, text=True, timeout=120)


def _png_size(path):
    with open(path, "rb") as fh:
        head = fh.read(24)
    assert head[:8] == b"\x89PNG\r\n\x1a\n"
    return struct.unpack(">II", head[16:24])


def _colour_counts(path, colours):
    """How many pixels of the picture at ``path`` carry each colour (see tests/pictures.py)."""
    from PySide6.QtGui import QImage

    pixels = rgb_array(QImage(str(path)))
    return {name: int(mask_of(pixels, colour).sum()) for name, colour in colours.items()}


def _canvas_colours(qapp):
    """The light canvas theme the offscreen window paints with (system palette, no setting)."""
    from loopwright.gui.theme import theme_from_palette

    t = theme_from_palette(qapp.palette())
    assert not t.dark
    return {"wire": t.wire, "reference": t.reference, "disturbance": t.disturbance, "noise": t.noise}


@pytest.fixture(scope="module")
def empty_shot(tmp_path_factory):
    """``loopwright --screenshot`` with no file: (process, picture path); taken once."""
    tmp = tmp_path_factory.mktemp("empty")
    out = tmp / "empty.png"
    return _run(["--screenshot", str(out)], tmp), out


def test_screenshot_of_a_sample_is_written_at_the_fixed_size_and_exits_zero(tmp_path, qapp, empty_shot):
    out, empty = tmp_path / "shot.png", empty_shot[1]
    proc = _run([str(SAMPLES[0]), "--screenshot", str(out)], tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert _png_size(out) == (1400, 900)
    assert not (tmp_path / "cfg").exists() or not any((tmp_path / "cfg").rglob("*.conf"))
    # The picture shows the diagram: its wires in the wire colour, and each source glyph in
    # its role colour (the shelf shows the three glyphs small, so compare with an empty
    # window's picture). Where each block and wire lands is checked in-process by
    # test_main_window.py::test_each_sample_opens_checks_and_is_photographed.
    assert empty_shot[0].returncode == 0, empty_shot[0].stderr
    colours = _canvas_colours(qapp)
    drawn, bare = _colour_counts(out, colours), _colour_counts(empty, colours)
    assert drawn["wire"] >= 1000 and bare["wire"] == 0, (drawn, bare)
    for role in ("reference", "disturbance", "noise"):
        assert drawn[role] >= bare[role] + 20, (role, drawn, bare)


def test_screenshot_of_an_empty_diagram_works_too(qapp, empty_shot):
    proc, out = empty_shot
    assert proc.returncode == 0, proc.stderr
    assert _png_size(out) == (1400, 900)
    assert _colour_counts(out, _canvas_colours(qapp))["wire"] == 0  # nothing on the canvas


def test_a_damaged_file_exits_two_with_one_line(tmp_path):
    bad = tmp_path / "bad.lwd"
    bad.write_text("{ not json", encoding="utf-8")
    proc = _run([str(bad), "--screenshot", str(tmp_path / "x.png")], tmp_path)
    assert proc.returncode == 2
    lines = [ln for ln in proc.stderr.splitlines() if ln.startswith("loopwright:")]
    assert len(lines) == 1 and "not valid JSON" in lines[0]
    assert "Traceback" not in proc.stderr
