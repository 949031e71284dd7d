"""The ``loopwright`` entry point: a mistyped command is one line and exit 2, and never opens
the app (tests of gui/launcher.py; no Qt needed, each case runs in a fresh process)."""
from __future__ import annotations

import os
import subprocess
import sys

import pytest

from gui_helpers import SAMPLES

# Runs the launcher and reports whether any Qt module got imported on the way.
_PROBE = """
import sys
from loopwright.gui.launcher import main
try:
    code = main(sys.argv[1:])
finally:
    print("QT" if any(m.startswith("PySide6") for m in sys.modules) else "NOQT")
sys.exit(code)
"""


def _launch(*args, cwd=None):
    env = dict(os.environ, QT_QPA_PLATFORM="offscreen")
    return subprocess.run([sys.executable, "-c", _PROBE, *args], capture_output=True, text=True, timeout=120, env=env, cwd=cwd)


@pytest.mark.parametrize(
    "args, message",
    [
        (["chek"], "loopwright: unknown command 'chek'; did you mean check?"),
        (["chek", "{sample}"], "loopwright: unknown command 'chek'; did you mean check?"),
        (["marigns", "{sample}", "--json"], "loopwright: unknown command 'marigns'; did you mean margins?"),
        (["frobnicate", "{sample}"], "loopwright: unknown command 'frobnicate'; commands are check, report, freq"),
    ],
    ids=["chek", "chek-file", "marigns-file", "frobnicate-file"],
)
def test_a_mistyped_command_is_one_line_and_never_opens_the_app(args, message, tmp_path):
    proc = _launch(*(a.replace("{sample}", str(SAMPLES[0])) for a in args), cwd=tmp_path)
    assert proc.returncode == 2
    lines = proc.stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith(message)
    assert proc.stdout.strip() == "NOQT"


def test_a_bare_word_that_is_an_existing_file_is_still_opened(tmp_path):
    # "check" the file, not the command, when a file of that name is where the user is:
    # only the app parser sees it (here with a bad option, so that no window opens)
    (tmp_path / "drive").write_text("{}", encoding="utf-8")
    proc = _launch("drive", "--bogus", cwd=tmp_path)
    assert proc.returncode == 2
    assert proc.stderr.splitlines() == ["loopwright: unrecognized arguments: --bogus (see 'loopwright --help')"]
    assert proc.stdout.strip() == "NOQT"


def test_two_files_for_the_app_is_one_line(tmp_path):
    proc = _launch("a.lwd", str(SAMPLES[0]), cwd=tmp_path)
    assert proc.returncode == 2 and len(proc.stderr.splitlines()) == 1
    assert "unrecognized arguments" in proc.stderr


def test_a_real_command_still_runs_headless():
    proc = _launch("check", str(SAMPLES[0]), "--json")
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.strip().endswith("NOQT")
