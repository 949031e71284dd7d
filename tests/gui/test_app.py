"""``loopwright FILE --screenshot OUT.png`` end to end, in a fresh process (tests of gui/app.py)."""
from __future__ import annotations

import os
import struct
import subprocess
import sys

import pytest

from gui_helpers import SAMPLES

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


def test_screenshot_of_a_sample_is_written_at_the_fixed_size_and_exits_zero(tmp_path):
    out = tmp_path / "shot.png"
    proc = _run([str(SAMPLES[0]), "--screenshot", str(out)], tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert _png_size(out) == (1400, 900)
    assert not (tmp_path / "cfg").exists() or not any((tmp_path / "cfg").rglob("*.conf"))


def test_screenshot_of_an_empty_diagram_works_too(tmp_path):
    out = tmp_path / "empty.png"
    proc = _run(["--screenshot", str(out)], tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert _png_size(out) == (1400, 900)


def test_a_damaged_file_exits_two_with_one_line(tmp_path):
    bad = tmp_path / "bad.lwd"
    bad.write_text("{ not json", encoding="utf-8")
    proc = _run([str(bad), "--screenshot", str(tmp_path / "x.png")], tmp_path)
    assert proc.returncode == 2
    lines = [ln for ln in proc.stderr.splitlines() if ln.startswith("loopwright:")]
    assert len(lines) == 1 and "not valid JSON" in lines[0]
    assert "Traceback" not in proc.stderr
