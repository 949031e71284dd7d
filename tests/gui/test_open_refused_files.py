"""A damaged or hostile project file opened in the app: the same one line as on the command line, nothing changed."""
from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from loopwright.engine.cli import main

pytestmark = pytest.mark.qt

FUZZ = Path(__file__).parents[1] / "engine" / "data" / "fuzz"
FILES = sorted(FUZZ.glob("*.lwd"))


@pytest.mark.parametrize("path", FILES, ids=[p.stem for p in FILES])
def test_a_refused_file_shows_the_loaders_one_line_and_keeps_the_diagram(window, dialogs, tmp_path, capsys, path):
    copy = tmp_path / path.name
    shutil.copyfile(path, copy)
    before = window.document.snapshot()
    assert not window.open_path(str(copy))
    assert window.document.snapshot() == before
    shown = dialogs.errors[-1][1]
    assert main(["check", str(copy)]) == 2
    assert capsys.readouterr().err == f"loopwright check: {shown}\n"
    assert "\n" not in shown
