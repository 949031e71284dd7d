"""Tests of engine/cli_design.py: the ``design`` and ``export`` commands."""
from __future__ import annotations

import json
import shutil
import subprocess
from importlib import resources

import numpy as np
import pytest
from numpy.testing import assert_allclose

from loopwright.engine import CAUTION
from loopwright.engine.cli import main
from loopwright.engine.design import pole_mismatch
from loopwright.engine.discretize import DiscreteModel, simulate_discrete
from loopwright.engine.export import read_json
from loopwright.engine.project import load, save
from loopwright.engine.recipes import stale_blocks

SAMPLES = ["conveyor_flexible_drive.lwd", "levitated_rotor_axis.lwd", "two_zone_oven.lwd"]


@pytest.fixture
def sample_copy(tmp_path):
    def make(name="conveyor_flexible_drive.lwd"):
        dst = tmp_path / name
        dst.write_bytes((resources.files("loopwright.samples") / name).read_bytes())
        return dst

    return make


@pytest.mark.parametrize("sample", SAMPLES)
def test_design_prints_gains_poles_and_caution_without_touching_the_file(sample_copy, capsys, sample):
    path = sample_copy(sample)
    before = path.read_bytes()
    assert main(["design", str(path)]) == 0
    out = capsys.readouterr().out
    assert "3 block(s) designed" in out and "eig(A - L C)" in out and CAUTION in out
    assert path.read_bytes() == before


def test_design_json_reports_requested_poles_of_conveyor_sample(sample_copy, capsys):
    path = sample_copy()
    assert main(["design", str(path), "--block", "K", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    by = {b["block"]: b for b in data["blocks"]}
    assert set(by) == {"K", "N"}  # the feedforward follows its feedback gain
    poles = [complex(*p) if isinstance(p, list) else complex(p) for p in by["K"]["poles"]]
    assert pole_mismatch(poles, [-20 + 35j, -20 - 35j, -6 + 4j, -6 - 4j]) < 1e-8
    assert data["caution"] == CAUTION and data["written"] is False


def test_design_write_updates_stale_blocks_atomically(sample_copy, capsys):
    path = sample_copy()
    d = load(path)
    p = d.block_by_name("P")
    A = np.array(p.params["A"])
    A[1, 1] = -3.0  # more damping on the motor (demo data)
    d.set_params(p.id, {**p.params, "A": A.tolist()})
    save(d, path)
    assert stale_blocks(load(path)) == ["N", "est", "K"]
    assert main(["design", str(path), "--stale", "--write"]) == 0
    assert "and written" in capsys.readouterr().out
    d2 = load(path)
    assert stale_blocks(d2) == []
    Ad, Bd = A, np.array(p.params["B"])
    K = -np.array(d2.block_by_name("K").params["K"])
    assert pole_mismatch(np.linalg.eigvals(Ad - Bd @ K), [-20 + 35j, -20 - 35j, -6 + 4j, -6 - 4j]) < 1e-7


def test_design_error_is_one_line_exit_2_and_file_unchanged(sample_copy, capsys):
    path = sample_copy()
    d = load(path)
    k = d.block_by_name("K")
    d.set_params(k.id, {**k.params, "recipe": {"method": "place", "poles": [-1, -2, -3]}})
    save(d, path)
    before = path.read_bytes()
    assert main(["design", str(path), "--write"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "block 'K'" in err[0] and "3 poles requested" in err[0]
    assert path.read_bytes() == before


def test_design_without_recipes_exits_2(tmp_path, capsys):
    from loopwright.engine.diagram import Diagram

    d = Diagram()
    d.add_block("plant", "P")
    save(d, tmp_path / "bare.lwd")
    assert main(["design", str(tmp_path / "bare.lwd")]) == 2
    assert "no block carries a recipe" in capsys.readouterr().err


def test_export_closed_loop_and_path_files(sample_copy, tmp_path, capsys):
    path = sample_copy()
    assert main(["export", str(path), "--what", "closed-loop", "-o", str(tmp_path / "loop.json")]) == 0
    data = read_json(tmp_path / "loop.json")
    assert data["caution"] == CAUTION and len(data["state_names"]) == 8
    assert main(["export", str(path), "--what", "path", "--from", "dl", "--to", "y", "-o", str(tmp_path / "p.npz")]) == 0
    with np.load(tmp_path / "p.npz") as z:
        assert list(z["input_names"]) == ["dl"] and list(z["output_names"]) == ["y"]
    assert "wrote" in capsys.readouterr().out


_CC = shutil.which("cc") or shutil.which("gcc")


@pytest.mark.skipif(_CC is None, reason="no C compiler (cc/gcc) on this machine; C round trip not checked")
def test_export_controller_as_c_runs_like_the_engine(sample_copy, tmp_path, capsys):
    path = sample_copy("levitated_rotor_axis.lwd")
    assert main(["export", str(path), "--what", "controller", "--ts", "0.0002", "--method", "tustin",
                 "-o", str(tmp_path / "rotor_ctrl.c"), "--json"]) == 0
    summary = json.loads(capsys.readouterr().out)
    assert summary["measured"] == ["y_meas"] and summary["actuator"] == ["u"]
    assert summary["margins"]["sampled"]["closed_loop_stable"] is True
    assert main(["export", str(path), "--what", "controller", "--ts", "0.0002", "--method", "tustin",
                 "-o", str(tmp_path / "rotor_ctrl.json")]) == 0
    js = read_json(tmp_path / "rotor_ctrl.json")
    main_c = tmp_path / "main.c"
    main_c.write_text(
        '#include <stdio.h>\n#include "rotor_ctrl.h"\nint main(void){rotor_ctrl_state s; double u[1], y[1]; int k;\n'
        "rotor_ctrl_reset(&s);\nfor(k=0;k<400;++k){u[0]=1e-4*((k%37)-18); rotor_ctrl_step(&s,u,y); printf(\"%.17g\\n\", y[0]);}\nreturn 0;}\n"
    )
    exe = tmp_path / "rotor"
    res = subprocess.run([_CC, "-std=c99", "-Wall", "-Wextra", "-pedantic", "-Werror", "-o", str(exe), str(main_c),
                          str(tmp_path / "rotor_ctrl.c")], capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr
    got = np.array([float(v) for v in subprocess.run([str(exe)], capture_output=True, text=True, timeout=60).stdout.split()])
    u = 1e-4 * ((np.arange(400) % 37) - 18.0)
    want = simulate_discrete(DiscreteModel(js["A"], js["B"], js["C"], js["D"], 0.0002, "tustin"), u)[:, 0]
    assert_allclose(got, want, rtol=1e-9, atol=1e-9 * np.abs(want).max())


@pytest.mark.parametrize(
    "extra, message",
    [
        (["--what", "path", "--from", "dl"], "needs --from INPUT and --to SIGNAL"),
        (["--what", "controller", "--format", "c"], "C output is for a discretised controller"),
        (["--what", "controller", "--measured", "y_mes"], "no signal called 'y_mes'; did you mean y_meas"),
        (["--what", "controller", "--ts", "-1"], "argument --ts: must be a number from 1e-09 to 1e+06 s"),
        (["--what", "controller", "--ts", "0.01", "--prewarp", "5"], "--prewarp needs --method tustin"),
        (["--what", "closed-loop", "--ts", "0.01"], "belong to --what controller"),
        (["--what", "bogus"], "invalid choice"),
    ],
    ids=["path-without-to", "c-without-ts", "unknown-signal", "negative-period", "prewarp-zoh", "ts-on-closed-loop", "bad-what"],
)
def test_export_user_errors_exit_2_with_one_line(sample_copy, tmp_path, capsys, extra, message):
    path = sample_copy()
    try:
        code = main(["export", str(path), *extra, "-o", str(tmp_path / "x.json")])
    except SystemExit as stop:  # argparse rejects a bad choice before any handler runs
        code = stop.code
    assert code == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and message in err[0]
    assert not (tmp_path / "x.json").exists()


def test_export_help_documents_options(capsys):
    assert main(["export", "--help"]) == 0
    out = capsys.readouterr().out
    for opt in ("--what", "--measured", "--actuator", "--ts", "--method", "--prewarp", "--format", "--precision", "--prefix"):
        assert opt in out


def test_design_json_carries_the_riccati_solutions(tmp_path, capsys):
    # tests/REFERENCES.md#reactor-lqr (scalar LQR, closed form P = r (a + sqrt(a^2 + b^2 q / r)) / b^2 = 3) and
    # tests/REFERENCES.md#tank-kalman (scalar Kalman filter, closed form P = V (a + sqrt(a^2 + c^2 W / V)) / c^2 = 2, here with a = 1:
    # P = 1 + sqrt(1 + 8) = 4)
    from loopwright.engine.diagram import Diagram

    d = Diagram()
    d.add_block("source", "w", {"role": "disturbance", "width": 1})
    d.add_block("source", "v", {"role": "noise", "width": 1})
    d.add_block("plant", "P", {"A": [[1.0]], "B": [[1.0]], "C": [[1.0]], "D": [[0.0]]})
    d.add_block("estimator", "est", {"plant": "P", "L": [[0.0]], "recipe": {"method": "kalman", "plant": "P", "W": [[8.0]], "V": [[1.0]], "G": [[1.0]]}})
    d.add_block("gain", "Kx", {"K": [[0.0]], "recipe": {"method": "lqr", "plant": "P", "Q": [3.0], "R": 1.0, "sign": -1}})
    d.add_block("sum", "up", {"signs": ["+", "+"], "width": 1})
    d.add_block("sum", "ym", {"signs": ["+", "+"], "width": 1})
    d.connect("est.xhat", "Kx.in")
    d.connect("Kx.out", "up.in1")
    d.connect("w.out", "up.in2")
    d.connect("up.out", "P.u")
    d.connect("Kx.out", "est.u")
    d.connect("P.y", "ym.in1")
    d.connect("v.out", "ym.in2")
    d.connect("ym.out", "est.y")
    path = tmp_path / "reactor.lwd"
    save(d, str(path))
    assert main(["design", str(path)]) == 0
    text = capsys.readouterr().out
    assert "not designed yet: " in text and "Riccati solution P = [[3]]" in text and "error covariance P = [[4]]" in text
    assert main(["design", str(path), "--json"]) == 0
    blocks = {b["block"]: b for b in json.loads(capsys.readouterr().out)["blocks"]}
    assert_allclose(blocks["Kx"]["riccati_P"], [[3.0]], rtol=1e-9)
    assert_allclose(blocks["Kx"]["cost_trace"], 3.0, rtol=1e-9)
    assert_allclose(blocks["est"]["error_covariance_P"], [[4.0]], rtol=1e-9)
    assert_allclose(blocks["est"]["error_rms"], [2.0], rtol=1e-9)
