"""No text from a diagram or the command line reaches the generated C unescaped.

The payloads in data/c_payloads/ are diagrams whose title tries to leave the header
comment of the exported C (a backslash-newline splice that joins ``*`` and ``/``, the same
through the ``??/`` trigraph and through CR-LF, and a harmless ``/* ... */`` in a title);
one more test puts such text in the folder names of the diagram's path. Each must export
to C that compiles with ``-std=c99 -Wall -Wextra -pedantic -Werror``, defines no macro
``double``, and runs exactly like the engine's double-precision discrete simulation.
"""
from __future__ import annotations

import json
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from loopwright.engine.ccode import COMMENT_TEXT_LIMIT, TRUNCATION_MARK, c_comment_text, controller_to_c
from loopwright.engine.cli import main
from loopwright.engine.discretize import DiscreteModel, simulate_discrete
from loopwright.engine.export import controller_model
from loopwright.engine.project import load

PAYLOADS = Path(__file__).parent / "data" / "c_payloads"
PAYLOAD_FILES = sorted(p.name for p in PAYLOADS.glob("*.lwd"))
_CC = shutil.which("cc") or shutil.which("gcc")
_needs_cc = pytest.mark.skipif(_CC is None, reason="no C compiler (cc/gcc) on this machine; C payloads not compiled")
_CFLAGS = ["-std=c99", "-Wall", "-Wextra", "-pedantic", "-Werror"]
_TS = 0.001
_STEPS = 300

# A text that tries every way out of a C comment at once (common practice, no source:
# the C99 translation phases 1-3, trigraphs, line splices, then comments).
_BREAKOUTS = [
    "x*\\\n/\n#define double float\n/*",
    "x*??/\n/\n#define double float\n/*",
    "x*\\\r\n/\r\n#define double float\r\n/*",
    "Rotor axis /* test rig */ v2",
    "a/*/b*//c",
    "???/??=??(",
    "tab\there\x00nul\x7fdel\u2028sep\u202eoverride",
]


def _assert_comment_safe(line: str) -> None:
    assert "\n" not in line and "\r" not in line
    assert all(0x20 <= ord(ch) < 0x7F for ch in line), line
    for bad in ("\\", "/*", "*/", "??"):
        assert bad not in line, (bad, line)


@given(st.text())
def test_any_text_becomes_one_safe_comment_line(text):
    line = c_comment_text(text)
    _assert_comment_safe(line)
    assert len(line) <= COMMENT_TEXT_LIMIT


@given(st.text(alphabet=st.sampled_from("/*?\\\n\r ab"), max_size=60))
def test_texts_made_of_comment_and_trigraph_characters_stay_safe(text):
    _assert_comment_safe(c_comment_text(text, limit=None))


@pytest.mark.parametrize("text", _BREAKOUTS)
def test_breakout_texts_are_defused(text):
    _assert_comment_safe(c_comment_text(text))


def test_plain_text_is_kept_and_long_text_is_cut_with_a_mark():
    assert c_comment_text("conveyor drive, demo data (2 kg)") == "conveyor drive, demo data (2 kg)"
    assert c_comment_text("C:\\diagrams\\rotor.lwd") == "C:/diagrams/rotor.lwd"
    long = c_comment_text("x" * 500)
    assert len(long) == COMMENT_TEXT_LIMIT and long.endswith(TRUNCATION_MARK)


def test_breakout_names_in_signal_names_and_origin_stay_inside_the_comment():
    model = DiscreteModel(np.array([[0.5]]), np.array([[1.0]]), np.array([[2.0]]), np.array([[0.0]]), 0.01, "zoh")
    code = controller_to_c(model, origin=_BREAKOUTS[0], input_names=_BREAKOUTS[1:3], output_names=_BREAKOUTS[3:])
    for text in (code.header, code.source):
        comment = text[: text.index("*/") + 2].splitlines()
        assert comment[0] == "/*" and comment[-1] == " */"
        assert all(line.startswith(" *") for line in comment[1:])
        assert "/*" not in "".join(comment[1:]) and "\\" not in "".join(comment) and "??" not in "".join(comment)
        assert not any(line.lstrip().startswith("#define double") for line in text.splitlines())


def _rotor_controller(path: Path) -> DiscreteModel:
    return controller_model(load(path), measured=["y_meas"], actuator=["u"], ts=_TS).discrete()


def _export_compile_and_run(diagram: Path, out_dir: Path, prefix: str = "rotor_ctrl") -> np.ndarray:
    c_file = out_dir / f"{prefix}.c"
    assert main(["export", str(diagram), "--what", "controller", "--ts", str(_TS), "-o", str(c_file)]) == 0
    for name in (f"{prefix}.c", f"{prefix}.h"):
        macros = subprocess.run([_CC, "-std=c99", "-E", "-dM", str(out_dir / name)], capture_output=True, text=True, timeout=60)
        assert macros.returncode == 0, macros.stderr
        assert "define double" not in macros.stdout and "define float" not in macros.stdout
    main_c = out_dir / "main.c"
    main_c.write_text(
        f'#include <stdio.h>\n#include "{prefix}.h"\n'
        f"int main(void)\n{{\n    {prefix}_state s;\n    double u[1], y[1];\n    int k;\n"
        f"    {prefix}_reset(&s);\n    for (k = 0; k < {_STEPS}; ++k) {{\n"
        "        u[0] = 1e-4 * ((k % 37) - 18);\n"
        f'        {prefix}_step(&s, u, y);\n        printf("%.17g\\n", y[0]);\n    }}\n'
        f"    return (int)(sizeof(s.x[0]) != sizeof(double));\n}}\n"
    )
    exe = out_dir / "run_ctrl"
    res = subprocess.run([_CC, *_CFLAGS, "-o", str(exe), str(main_c), str(c_file)], capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr
    run = subprocess.run([str(exe)], capture_output=True, text=True, timeout=60)
    assert run.returncode == 0, "the state is not stored as double"
    return np.array([float(v) for v in run.stdout.split()])


def _engine_outputs(diagram: Path) -> np.ndarray:
    u = 1e-4 * ((np.arange(_STEPS) % 37) - 18.0)
    return simulate_discrete(_rotor_controller(diagram), u)[:, 0]


@_needs_cc
@pytest.mark.parametrize("payload", PAYLOAD_FILES)
def test_payload_title_cannot_change_the_compiled_controller(tmp_path, payload):
    diagram = tmp_path / payload
    shutil.copy(PAYLOADS / payload, diagram)
    got = _export_compile_and_run(diagram, tmp_path)
    want = _engine_outputs(diagram)
    # a controller turned into float would differ near 1e-7 relative
    assert_allclose(got, want, rtol=1e-9, atol=1e-12 * np.abs(want).max())


@_needs_cc
def test_payload_in_the_folder_names_of_the_diagram_path_cannot_change_the_controller(tmp_path):
    # The path itself supplies the "/" after each folder name: "<tmp>/x*\<LF>/<LF>#define double float<LF>/*/<file>"
    folder = tmp_path / "x*\\\n" / "\n#define double float\n" / "*"
    folder.mkdir(parents=True)
    diagram = folder / "rotor.lwd"
    data = json.loads((PAYLOADS / "c-title-comment-opener.lwd").read_text(encoding="utf-8"))
    data["meta"]["title"] = "plain title"
    diagram.write_text(json.dumps(data), encoding="utf-8")
    out = tmp_path / "out"
    out.mkdir()
    got = _export_compile_and_run(diagram, out)
    assert_allclose(got, _engine_outputs(diagram), rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize(
    "extra, message",
    [
        (["--prefix", "x\n"], "C prefix 'x\\n' is not a C identifier"),
        (["--prefix", "x;y"], "is not a C identifier"),
        (["-o", "OUT/x\n.c"], "line break or another control character"),
        (["-o", "OUT/my ctrl.c"], "give --prefix NAME"),
        (["-o", 'OUT/a"b.c', "--prefix", "ab"], "C header name"),
        (["-o", "OUT/a??=b.c", "--prefix", "ab"], "C header name"),
    ],
    ids=["prefix-newline", "prefix-semicolon", "output-newline", "output-not-identifier", "output-quote", "output-trigraph"],
)
def test_unsafe_prefix_or_output_name_is_refused_in_one_line_and_nothing_written(tmp_path, capsys, extra, message):
    diagram = tmp_path / "rotor.lwd"
    shutil.copy(PAYLOADS / "c-title-comment-opener.lwd", diagram)
    out = tmp_path / "OUT"
    out.mkdir()
    args = [a.replace("OUT", str(out)) for a in extra]
    if "-o" not in args:
        args += ["-o", str(out / "ctrl.c")]
    assert main(["export", str(diagram), "--what", "controller", "--ts", str(_TS), *args]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and message in err[0]
    assert list(out.iterdir()) == []
