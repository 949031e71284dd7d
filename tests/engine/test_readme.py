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


# ---- every output block the README shows is regenerated and compared ---------------------
#
# Each block is produced by running the command the README shows (the report's command is
# the quick start's; the others are the block's own "$ loopwright ..." line) and compared
# token by token: words exactly, numbers to the precision the README prints them (half a
# unit in its last digit). A line "..." in the README skips output lines (an excerpt).
# Masked: the separation gap, a rounding-level number that depends on the BLAS kernels.
# The README's numbers are regression values (the program's own output, written down so
# the front page cannot drift), not references; the references are in tests/REFERENCES.md.
# When an output format changes on purpose, regenerate the README block from the command.

import shlex  # noqa: E402
import shutil  # noqa: E402

import pytest  # noqa: E402

from loopwright.engine.cli import main  # noqa: E402

ROOT = README.parent
_NUMBER = re.compile(r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?")
_MASKS = (re.compile(r"\(gap [^)]*\)"),)


def _readme_outputs() -> list[tuple[str, list[str], str]]:
    """(id, argv after 'loopwright', README text) of every output block."""
    text = README.read_text(encoding="utf-8")
    blocks = re.findall(r"```\n(.*?)```", text, flags=re.S)
    quick = next(b for b in blocks if "loopwright report" in b and b.startswith("python3 -m venv"))
    report_argv = shlex.split(quick.split(".venv/bin/loopwright", 1)[1])
    found = []
    for b in blocks:
        if b.startswith("Loop report:"):
            found.append(("report", report_argv, b))
        elif b.startswith("$ loopwright "):
            first, rest = b.split("\n", 1)
            argv = shlex.split(first[len("$ loopwright "):])
            found.append((argv[0], argv, rest))
    return found


def _tokens(line: str) -> list[str]:
    for mask in _MASKS:
        line = mask.sub("(masked)", line)
    return line.split()


def _token_matches(shown: str, got: str) -> bool:
    if _NUMBER.sub("#", shown) != _NUMBER.sub("#", got):
        return False
    for a, b in zip(_NUMBER.findall(shown), _NUMBER.findall(got)):
        mant = a.lstrip("+-").split("e")[0].split("E")[0]
        exp = int(re.split("[eE]", a)[1]) if re.search("[eE]", a) else 0
        decimals = len(mant.split(".")[1]) if "." in mant else 0
        if abs(float(a) - float(b)) > 0.5 * 10.0 ** (exp - decimals) * (1 + 1e-9) + 1e-12 * abs(float(a)):
            return False
    return True


def _line_matches(shown: str, got: str) -> bool:
    ts, tg = _tokens(shown), _tokens(got)
    return len(ts) == len(tg) and all(_token_matches(a, b) for a, b in zip(ts, tg))


def compare_with_readme(shown_text: str, output: str) -> list[str]:
    """Differences between a README block and the program's output ([] when they agree).

    A block without "..." must be the whole output, line for line. A block with "..." is an
    excerpt: its first line is the output's first line, and its other lines appear in the
    output in the same order (the output may have more lines between them).
    """
    shown = [ln for ln in shown_text.splitlines() if ln.strip()]
    got = [ln for ln in output.splitlines() if ln.strip()]
    if not any(ln.strip() == "..." for ln in shown):
        for j, ln in enumerate(shown):
            if j >= len(got):
                return [f"README line {ln!r}: the output has ended"]
            if not _line_matches(ln, got[j]):
                return [f"README line {ln!r}\n  output line {got[j]!r}"]
        if len(got) != len(shown):
            return [f"the output goes on after the README block ends: {got[len(shown)]!r}"]
        return []
    shown = [ln for ln in shown if ln.strip() != "..."]
    if not got or not _line_matches(shown[0], got[0]):
        return [f"README line {shown[0]!r}\n  output line {got[0] if got else ''!r}"]
    pos = 1
    for ln in shown[1:]:
        while pos < len(got) and not _line_matches(ln, got[pos]):
            pos += 1
        if pos == len(got):
            return [f"README line {ln!r} is not in the rest of the output"]
        pos += 1
    return []


@pytest.mark.parametrize("name, argv, shown", _readme_outputs(), ids=lambda v: v if isinstance(v, str) and len(v) < 20 else "")
def test_readme_output_block_is_what_the_command_prints(name, argv, shown, tmp_path, monkeypatch, capsys):
    if any(a == "rotor.lwd" for a in argv):
        # the README's design and export run on a copy of the levitated-rotor sample
        shutil.copy(ROOT / "samples" / "levitated_rotor_axis.lwd", tmp_path / "rotor.lwd")
        monkeypatch.chdir(tmp_path)
    else:
        monkeypatch.chdir(ROOT)
    try:
        code = main(argv)
    except SystemExit as stop:
        code = stop.code
    out = capsys.readouterr()
    text = out.out if code == 0 else out.err
    assert code in (0, 2)
    problems = compare_with_readme(shown, text)
    assert problems == [], f"README block of `loopwright {' '.join(argv)}` differs from its output:\n" + "\n".join(problems)


def test_readme_shows_every_output_block_this_test_checks():
    names = sorted(n for n, _, _ in _readme_outputs())
    assert names == ["design", "export", "freq", "margins", "report"]


@pytest.mark.parametrize(
    "shown, output, ok",
    [
        ("  phase margin     26.98 deg", "  phase margin     26.976 deg", True),
        ("  phase margin     26.98 deg", "  phase margin     26.99 deg", False),
        ("  gain x0.3025", "  gain x0.30249", True),
        ("  gain x0.3025", "  gain x0.3035", False),
        ("peak 6.191e+04", "peak 6.1914e+04", True),
        ("peak 6.191e+04", "peak 6.201e+04", False),
        ("separation (gap 1.1e-13)", "separation (gap 4.7e-14)", True),
        ("verdict: stable", "verdict: unstable", False),
        ("a\n...\nc", "a\nb\nb2\nc\nd", True),
        ("a\n...\nc", "b\na\nc", False),
        ("a\nc\n...", "a\nb\nd", False),
        ("a\nc", "a\nb\nc", False),
        ("a\nb", "a\nb\nc", False),
    ],
)
def test_the_readme_comparison_can_fail(shown, output, ok):
    assert (compare_with_readme(shown, output) == []) is ok
