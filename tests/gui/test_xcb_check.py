"""The app starts, or says in one line why not: Qt's X11 (xcb) libraries are checked by
gui/launcher.py before any Qt import (absence simulated by refusing to load them)."""
from __future__ import annotations

import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

from loopwright.gui.launcher import XCB_LIBRARIES, missing_xcb_packages, xcb_message

# Runs the launcher with the dynamic loader refusing some libraries, and reports whether any
# Qt module got imported on the way.
_PROBE = """
import ctypes, sys
refused = set(sys.argv[1].split(","))
real = ctypes.CDLL
class _Refusing(real):
    def __init__(self, name, *a, **k):
        if name in refused:
            raise OSError(name + ": cannot open shared object file: No such file or directory")
        super().__init__(name, *a, **k)
ctypes.CDLL = _Refusing
from loopwright.gui.launcher import main
try:
    code = main(sys.argv[2:])
finally:
    print("QT" if any(m.startswith("PySide6") for m in sys.modules) else "NOQT")
sys.exit(code)
"""


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="the xcb platform is Linux only")
def test_missing_xcb_helpers_give_one_line_naming_the_packages(tmp_path):
    env = dict(os.environ, QT_QPA_PLATFORM="xcb", DISPLAY=":97")
    proc = subprocess.run(
        [sys.executable, "-c", _PROBE, "libxcb-cursor.so.0,libxcb-keysyms.so.1"],
        capture_output=True, text=True, timeout=120, env=env, cwd=tmp_path,
    )
    assert proc.returncode == 1
    assert proc.stderr.splitlines() == [xcb_message(["libxcb-cursor0", "libxcb-keysyms1"])]
    assert proc.stdout.strip() == "NOQT"


@pytest.mark.parametrize(
    "env, is_xcb",
    [
        ({"QT_QPA_PLATFORM": "xcb"}, True),
        ({"QT_QPA_PLATFORM": "xcb:nomitshm"}, True),
        ({"QT_QPA_PLATFORM": "offscreen"}, False),
        ({"QT_QPA_PLATFORM": "wayland;xcb"}, False),
        ({"DISPLAY": ":0"}, True),
        ({"WAYLAND_DISPLAY": "wayland-0", "XDG_SESSION_TYPE": "wayland"}, False),
    ],
    ids=["asked", "asked-with-option", "offscreen", "wayland-first", "x11-default", "wayland-session"],
)
def test_only_the_x11_platform_is_checked(env, is_xcb):
    refused = []
    missing = missing_xcb_packages(env, loads=lambda so: refused.append(so) or False)
    if sys.platform.startswith("linux") and is_xcb:
        assert missing == list(XCB_LIBRARIES.values()) and refused == list(XCB_LIBRARIES)
    else:
        assert missing == [] and refused == []


def test_the_readme_lists_the_packages_under_the_desktop_app():
    text = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")
    section = re.search(r"^## .*[Dd]esktop app.*?(?=^## )", text, flags=re.S | re.M)
    assert section is not None
    for pkg in ("libxcb-cursor0", "libxcb-icccm4", "libxcb-keysyms1"):
        assert pkg in section.group(0)
