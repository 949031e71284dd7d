"""Autosave copies and leftovers (tests of gui/autosave.py)."""
from __future__ import annotations

import pytest

from loopwright.engine.project import load
from loopwright.gui.autosave import Autosaver, find_leftovers

from gui_helpers import SAMPLES


def test_write_then_find_then_discard(tmp_path):
    d = load(SAMPLES[0])
    saver = Autosaver(tmp_path / "auto")
    path = saver.write(d, "/projects/belt.lwd")
    found = find_leftovers(tmp_path / "auto")
    assert [lo.path for lo in found] == [path]
    assert found[0].original == "/projects/belt.lwd"
    assert "belt.lwd" in found[0].describe()
    assert load(found[0].path) == d
    found[0].discard()
    assert find_leftovers(tmp_path / "auto") == []


def test_clear_removes_only_this_windows_copy(tmp_path):
    d = load(SAMPLES[0])
    a, b = Autosaver(tmp_path), Autosaver(tmp_path)
    a.write(d, None)
    b.write(d, None)
    a.clear()
    assert [lo.path for lo in find_leftovers(tmp_path)] == [b.path]


def test_a_missing_folder_has_no_leftovers(tmp_path):
    assert find_leftovers(tmp_path / "nope") == []


@pytest.mark.parametrize("note", ["not json", '{"original": 3'])
def test_a_damaged_note_still_offers_the_copy(tmp_path, note):
    saver = Autosaver(tmp_path)
    saver.write(load(SAMPLES[0]), "x.lwd")
    saver.path.with_suffix(".json").write_text(note, encoding="utf-8")
    (found,) = find_leftovers(tmp_path)
    assert found.original is None and found.path == saver.path


def test_a_copy_owned_by_another_running_process_is_not_a_leftover(tmp_path):
    import subprocess
    import sys

    proc = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(30)"])
    try:
        saver = Autosaver(tmp_path)
        saver.token = f"autosave-{proc.pid}-feedbeef"
        saver.write(load(SAMPLES[0]), None)
        assert find_leftovers(tmp_path) == []
    finally:
        proc.kill()
        proc.wait()
    assert [lo.path for lo in find_leftovers(tmp_path)] == [saver.path]
