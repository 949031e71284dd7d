"""The README's Python example runs as written and prints what the README says."""
from __future__ import annotations

import contextlib
import io
import re
from pathlib import Path

README = Path(__file__).resolve().parents[2] / "README.md"


def test_python_example_runs_and_prints_what_it_claims():
    text = README.read_text(encoding="utf-8")
    blocks = re.findall(r"```python\n(.*?)```", text, flags=re.S)
    assert blocks, "README has no Python example"
    for code in blocks:
        out = io.StringIO()
        with contextlib.redirect_stdout(out):
            exec(compile(code, "README.md", "exec"), {})
        claimed = [c.strip() for c in re.findall(r"print\(.*?\)\s*#\s*(.*)", code)]
        printed = [line.strip() for line in out.getvalue().splitlines()]
        assert printed == claimed


def test_quick_start_has_exactly_two_commands_and_the_caution():
    text = README.read_text(encoding="utf-8")
    quick = text.split("## Quick start", 1)[1].split("\n## ", 1)[0]
    commands = [c for c in re.findall(r"```\n(.*?)```", quick, flags=re.S) if c.startswith("python3 -m venv")]
    assert len(commands) == 2
    assert "loopwright report samples/" in commands[0] and "pytest" in commands[1]
    assert "model-based" in text and "protective limits" in text and "licensed engineering practice" in text
