"""Preferences and recent files (tests of gui/settings.py)."""
from __future__ import annotations

from pathlib import Path

import pytest

from loopwright.gui.settings import MAX_RECENT, RecentFiles, load_preferences

pytestmark = pytest.mark.qt


def test_recent_files_are_newest_first_without_duplicates_and_capped(qsettings, tmp_path):
    rf = RecentFiles(qsettings)
    for k in range(MAX_RECENT + 3):
        rf.add(tmp_path / f"f{k}.lwd")
    rf.add(tmp_path / "f5.lwd")
    paths = rf.paths()
    assert len(paths) == MAX_RECENT
    assert Path(paths[0]).name == "f5.lwd"
    assert len(set(paths)) == len(paths)
    rf.clear()
    assert rf.paths() == []


def test_preferences_read_from_settings_and_overrides_win(qsettings, tmp_path):
    qsettings.setValue("autosave/interval_s", 12)
    qsettings.setValue("canvas/dark", "true")
    p = load_preferences(qsettings, autosave_dir=tmp_path)
    assert p.autosave_interval_s == 12.0 and p.dark is True and p.autosave_dir == tmp_path
