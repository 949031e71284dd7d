"""``loopwright check`` and the CLI's handling of user mistakes (one line, exit 2)."""
from __future__ import annotations

import json
import subprocess
import sys

import pytest

from loopwright.engine.cli import main
from diagrams import SAMPLES, sample_path


@pytest.mark.parametrize("name", SAMPLES)
def test_check_json_on_every_sample(name, capsys):
    assert main(["check", str(sample_path(name)), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert isinstance(out["states"], int) and out["states"] > 0
    assert out["stable"] is True
    assert all(len(p) == 2 for p in out["poles"]) and len(out["poles"]) == out["states"]
    assert set(out) >= {"states", "poles", "stable", "signals", "sources", "warnings", "separation"}
    assert out["separation"]["matches"] is True
    assert len(out["separation"]["expected"]) == out["states"]
    assert "model-based" in out["caution"]


def test_check_text_shows_poles_verdict_and_separation(capsys):
    assert main(["check", str(sample_path(SAMPLES[0]))]) == 0
    text = capsys.readouterr().out
    for piece in ("closed-loop poles", "damping", "verdict  stable", "eig(A - B K)", "eig(A - L C)", "Caution"):
        assert piece in text


def test_invalid_diagram_exits_2_with_one_line(tmp_path, capsys):
    bad = tmp_path / "bad.lwd"
    text = sample_path(SAMPLES[0]).read_text(encoding="utf-8").replace('"signs": [\n          "+",\n          "+"\n        ]', '"signs": ["+", "+", "+"]', 1)
    assert text != sample_path(SAMPLES[0]).read_text(encoding="utf-8")
    bad.write_text(text, encoding="utf-8")
    assert main(["check", str(bad)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "is not connected" in err[0] and "in3" in err[0]


@pytest.mark.parametrize(
    "content, message",
    [("{", "not valid JSON"), ('{"format": "loopwright-diagram", "version": 7, "blocks": [], "wires": []}', "newer Loopwright")],
)
def test_damaged_file_exits_2(tmp_path, capsys, content, message):
    f = tmp_path / "x.lwd"
    f.write_text(content, encoding="utf-8")
    assert main(["check", str(f)]) == 2
    err = capsys.readouterr().err
    assert message in err and "Traceback" not in err and len(err.strip().splitlines()) == 1


def test_unknown_command_and_missing_file_do_not_trace(tmp_path):
    for args in (["nonsense"], ["check", str(tmp_path / "none.lwd")], ["check"]):
        proc = subprocess.run([sys.executable, "-m", "loopwright.engine.cli", *args], capture_output=True, text=True)
        assert proc.returncode == 2, args
        assert "Traceback" not in proc.stderr


def test_engine_imports_without_qt():
    # the dependency rule: the engine and its CLI work where Qt cannot be imported at all
    code = (
        "import sys\n"
        "class Block:\n"
        "    def find_spec(self, name, path=None, target=None):\n"
        "        if name.split('.')[0] in ('PySide6', 'pyqtgraph', 'shiboken6', 'control'):\n"
        "            raise ImportError('blocked: ' + name)\n"
        "sys.meta_path.insert(0, Block())\n"
        "import loopwright.engine.cli as cli, pkgutil, importlib, loopwright.engine as e\n"
        "for m in pkgutil.iter_modules(e.__path__):\n"
        "    importlib.import_module('loopwright.engine.' + m.name)\n"
        f"sys.exit(cli.main(['check', {str(sample_path(SAMPLES[0]))!r}, '--json']))\n"
    )
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
