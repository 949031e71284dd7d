"""Run the installed ``loopwright`` console script with Qt made unimportable (tests only)."""
from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

__all__ = ["qt_blocked_env", "run_without_qt"]


def run_without_qt(args: list[str], tmp_path: Path) -> subprocess.CompletedProcess:
    """``loopwright *args`` in a subprocess where PySide6, shiboken6 and pyqtgraph fail on import.

    Skips the test when the console script is not installed next to this interpreter.
    """
    exe = Path(sys.executable).with_name("loopwright")
    if not exe.exists():
        pytest.skip("the loopwright console script is not installed next to this interpreter")
    return subprocess.run([str(exe), *args], capture_output=True, text=True, env=qt_blocked_env(tmp_path), timeout=300)


def qt_blocked_env(tmp_path: Path) -> dict[str, str]:
    """The environment with a PySide6, shiboken6 and pyqtgraph that fail on import first on the path."""
    blocker = tmp_path / "blocked"
    for name in ("PySide6", "shiboken6", "pyqtgraph"):
        (blocker / name).mkdir(parents=True, exist_ok=True)
        (blocker / name / "__init__.py").write_text(f"raise ImportError('{name} is blocked for this test')\n")
    return {**os.environ, "PYTHONPATH": str(blocker)}
