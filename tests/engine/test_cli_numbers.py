"""The CLI's numbers, not just its shapes: every command's JSON (and the exported files)
compared with values found without Loopwright (closed forms, the shared cases of
tests/REFERENCES.md, scipy 1.17.1, python-control 0.10.2), and the options of ``export``,
``margins`` and ``check`` that no other test runs."""
from __future__ import annotations

import json
import shutil
import subprocess
import sys

import numpy as np
import pytest
import scipy.linalg as sla
from numpy.testing import assert_allclose
from scipy.optimize import minimize_scalar

from console import qt_blocked_env, run_without_qt
from diagrams import sample_path, stage_loop_ref03, stage_servo
from independent import gain_margin_factor, observer_controller, phase_margin, rotor_sample_parts, state_space_at
from loopwright.engine.cli import main
from loopwright.engine.diagram import Diagram
from loopwright.engine.export import read_json
from loopwright.engine.project import save


def _run(capsys, *argv) -> dict:
    assert main([str(a) for a in argv]) == 0
    return json.loads(capsys.readouterr().out)


def _unity_loop(tmp_path, name, plant, k, *, loop_break=True) -> str:
    """r -> e = r - y -> gain k -> plant -> y (the diagram of tests/REFERENCES.md#oven-margins)."""
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0, "start": 0.0}})
    d.add_block("sum", "e", {"signs": ["+", "-"], "width": 1})
    d.add_block("gain", "Kp", {"K": [[k]]})
    d.add_block("plant", "P", plant)
    d.connect("r.out", "e.in1", name="ref")
    d.connect("e.out", "Kp.in", name="err")
    d.connect("Kp.out", "P.u", name="u")
    d.connect("P.y", "e.in2", name="y")
    if loop_break:
        d.settings["loop_break"] = "u"
    path = tmp_path / f"{name}.lwd"
    save(d, str(path))
    return str(path)


OVEN = {"A": [[-1, 0, 0], [1, -1, 0], [0, 1, -1]], "B": [[1], [0], [0]], "C": [[0, 0, 1]], "D": [[0]]}
WINDER = {"A": [[0, 1], [0, -2]], "B": [[0], [1]], "C": [[1, 0]], "D": [[0]]}


def _oven_T(s):
    return 4.0 / ((s + 1) ** 3 + 4.0)  # closed form, tests/REFERENCES.md#oven-margins


def _rotor():
    return rotor_sample_parts(json.loads(sample_path("levitated_rotor_axis.lwd").read_text(encoding="utf-8")))


# ---- check and report --------------------------------------------------------------------


def test_check_json_of_the_stage_loop_has_the_separation_poles(tmp_path, capsys):
    # tests/REFERENCES.md#stage-observer (separation principle): -2 +- 2j, -5, -6
    f = tmp_path / "stage.lwd"
    save(stage_loop_ref03(), str(f))
    out = _run(capsys, "check", f, "--json")
    poles = np.array([complex(re, im) for re, im in out["poles"]])
    assert_allclose(np.sort_complex(poles), np.sort_complex([-6, -5, -2 - 2j, -2 + 2j]), atol=1e-8)
    assert out["states"] == 4 and out["stable"] is True and out["rhp_poles"] == 0
    assert out["separation"]["matches"] is True and out["warnings"] == []


def test_check_warns_of_each_stale_block(tmp_path, capsys):
    # the rotor sample with a stiffer magnet: the three designed blocks no longer fit their plant
    d = json.loads(sample_path("levitated_rotor_axis.lwd").read_text(encoding="utf-8"))
    next(b for b in d["blocks"] if b["name"] == "P")["params"]["A"][1][0] = 4100.0
    f = tmp_path / "stale.lwd"
    f.write_text(json.dumps(d), encoding="utf-8")
    out = _run(capsys, "check", f, "--json")
    stale = sorted(w.split("'")[1] for w in out["warnings"] if "stale" in w)
    assert stale == ["K", "N", "est"]
    assert main(["check", str(f)]) == 0
    assert capsys.readouterr().out.count("is stale") == 3
    out = _run(capsys, "check", sample_path("levitated_rotor_axis.lwd"), "--json")
    assert out["warnings"] == []


def test_report_json_of_the_oven_has_the_reference_margins_and_poles(tmp_path, capsys):
    # tests/REFERENCES.md#oven-margins (closed forms by hand)
    out = _run(capsys, "report", _unity_loop(tmp_path, "oven", OVEN, 4.0), "--json")
    m = out["margins"]
    assert_allclose(m["gain_margin"][1], 2.0, rtol=1e-9)
    assert_allclose(m["phase_margin_deg"], 27.1416306, rtol=1e-8)
    assert_allclose(m["delay_margin_s"], 0.3842501695, rtol=1e-8)
    assert_allclose(m["peak_sensitivity"], 3.0, rtol=1e-8)
    poles = np.array([complex(re, im) for re, im in out["poles"]])
    c = 4 ** (1 / 3)
    assert_allclose(np.sort_complex(poles), np.sort_complex([-1 - c, -1 + c * np.exp(1j * np.pi / 3), -1 + c * np.exp(-1j * np.pi / 3)]), atol=1e-8)


# ---- margins -----------------------------------------------------------------------------


def test_margins_json_of_the_rotor_sample_matches_independent_values(capsys):
    # tests/independent.py (eigenvalues of the loop scaled by g; scipy brentq)
    parts = _rotor()
    out = _run(capsys, "margins", sample_path("levitated_rotor_axis.lwd"), "--json")
    assert_allclose(out["gain_margin"][0], gain_margin_factor(*parts, 0.05, 0.99)[0], rtol=1e-8)
    assert_allclose(out["gain_margin"][1], gain_margin_factor(*parts, 1.01, 20.0)[0], rtol=1e-8)
    pm, wc = phase_margin(*parts, 50.0, 200.0)
    assert_allclose(out["phase_margin_deg"], pm, rtol=1e-8)
    assert_allclose(out["delay_margin_s"], np.radians(pm) / wc, rtol=1e-8)


@pytest.mark.parametrize(
    "skew, alpha, lo, hi, phase",
    [
        ("0", 1.0, 1 / 3, 3.0, 53.13010235),
        ("1", 1.0, 0.5, np.inf, 60.0),
        ("-1", 2 / 3, 1 / 3, 5 / 3, np.degrees(np.arccos((1 + 5 / 9) / 2))),
    ],
    ids=["balanced", "lqr-guarantee", "skew-minus-one"],
)
def test_margins_skew_moves_the_disk_of_the_lqr_loop(tmp_path, capsys, skew, alpha, lo, hi, phase):
    # tests/REFERENCES.md#reactor-lqr: L = 3/(s - 1), S = (s - 1)/(s + 2); skews 0 and +1 from
    # the catalogue (Seiler, Packard and Gahinet 2020, from memory). Skew -1, closed form with
    # the catalogue's formulas: alpha = 1/sup|S - 1| = 1/sup|3/(jw + 2)| = 2/3, gain
    # [1 - alpha, 1 + alpha] = [1/3, 5/3], phase arccos((1 + g_lo g_hi)/(g_lo + g_hi)).
    d = Diagram()
    d.add_block("source", "d", {"role": "disturbance", "width": 1})
    d.add_block("plant", "P", {"A": [[1.0]], "B": [[1.0]], "C": [[1.0]], "D": [[0.0]]})
    d.add_block("gain", "Kx", {"K": [[-3.0]]})
    d.add_block("sum", "up", {"signs": ["+", "+"], "width": 1})
    d.connect("P.y", "Kx.in", name="x")
    d.connect("Kx.out", "up.in1", name="ufb")
    d.connect("d.out", "up.in2", name="dist")
    d.connect("up.out", "P.u", name="u")
    f = tmp_path / "reactor.lwd"
    save(d, str(f))
    out = _run(capsys, "margins", f, "--at", "u", "--skew", skew, "--json")
    disk = out["disk_margin"]
    assert_allclose(disk["alpha"], alpha, rtol=1e-7)
    assert_allclose(disk["gain"][0], lo, rtol=1e-7)
    if np.isinf(hi):
        assert disk["gain"][1] == "inf"
    else:
        assert_allclose(disk["gain"][1], hi, rtol=1e-7)
    assert_allclose(disk["phase_deg"], phase, rtol=1e-7)


# ---- audit, time, freq, noise ------------------------------------------------------------


def test_audit_json_row_of_the_oven_reference_path(tmp_path, capsys):
    # r -> y is T = 4/((s + 1)^3 + 4) (tests/REFERENCES.md#oven-margins): DC gain 0.8; peak gain
    # by scipy 1.17.1 minimize_scalar on |T(jw)|; H2 by scipy solve_continuous_lyapunov
    out = _run(capsys, "audit", _unity_loop(tmp_path, "oven", OVEN, 4.0), "--json")
    row = next(r for r in out["rows"] if r["source"] == "r" and r["signal"] == "y")
    best = minimize_scalar(lambda w: -abs(_oven_T(1j * w)), bounds=(0.5, 2.0), method="bounded", options={"xatol": 1e-10})
    Acl = np.array(OVEN["A"], float) - 4.0 * np.array(OVEN["B"], float) @ np.array(OVEN["C"], float)
    X = sla.solve_continuous_lyapunov(Acl, -4.0 * np.array(OVEN["B"], float) @ (4.0 * np.array(OVEN["B"], float)).T)
    h2 = np.sqrt((np.array(OVEN["C"], float) @ X @ np.array(OVEN["C"], float).T)[0, 0])
    assert_allclose(row["dc_gain"], 0.8, rtol=1e-10)
    assert_allclose(row["peak_gain"], -best.fun, rtol=1e-8)
    assert_allclose(row["peak_freq"], best.x, rtol=1e-4)
    assert_allclose(row["h2"], h2, rtol=1e-9)
    assert row["stable"] is True and row["path"]["blocks"] == ["r", "e", "Kp", "P"]


def test_time_step_json_of_the_winder_servo(tmp_path, capsys):
    # tests/REFERENCES.md#winder-step (second-order closed forms): T = 4/(s^2 + 2 s + 4)
    f = _unity_loop(tmp_path, "winder", WINDER, 4.0)
    out = _run(capsys, "time", f, "--step", "r", "--to", "y", "--t-end", "3", "--dt", "0.001", "--json")
    t, y = np.array(out["t"]), np.array(out["y"]["y"])
    for tk, yk in ((0.5, 0.3402998466), (1.0, 0.8494256349), (2.0, 1.153122768), (3.0, 1.002289494)):
        assert_allclose(y[int(round(tk / 0.001))], yk, atol=1e-8)
    wd, zeta = np.sqrt(3.0), 0.5
    closed = 1 - np.exp(-t) * np.sin(wd * t + np.arccos(zeta)) / np.sqrt(1 - zeta**2)
    assert_allclose(y, closed, atol=1e-9)


def test_freq_json_of_the_oven_is_the_closed_form(tmp_path, capsys):
    out = _run(capsys, "freq", _unity_loop(tmp_path, "oven", OVEN, 4.0), "--from", "r", "--to", "y",
               "--w-min", "0.01", "--w-max", "100", "--points", "41", "--json")
    w = np.logspace(-2, 2, 41)
    T = _oven_T(1j * w)
    assert_allclose(out["w"], w, rtol=1e-12)
    assert_allclose(out["mag_db"], 20 * np.log10(np.abs(T)), rtol=1e-10, atol=1e-10)
    assert_allclose(out["phase_deg"], np.degrees(np.unwrap(np.angle(T))), atol=1e-8)


def test_noise_json_of_the_rotor_sample_matches_a_lyapunov_solve(capsys):
    # closed loop [x; xhat] with A_cl = [[A, -B K], [L C, A - B K - L C]], load force dl
    # (intensity 0.5) through E and probe noise n (intensity 1e-14) through L:
    # A_cl X + X A_cl^T + B_w W B_w^T = 0 (scipy 1.17.1), RMS of y = C x and of u = -K xhat
    A, B, C, K, L = _rotor()
    d = json.loads(sample_path("levitated_rotor_axis.lwd").read_text(encoding="utf-8"))
    E = np.array(next(b for b in d["blocks"] if b["name"] == "P")["params"]["E"], float)
    Acl = np.block([[A, -B @ K], [L @ C, A - B @ K - L @ C]])
    Bw = np.block([[E, np.zeros((3, 1))], [np.zeros((3, 1)), L]])
    X = sla.solve_continuous_lyapunov(Acl, -Bw @ np.diag([0.5, 1e-14]) @ Bw.T)
    Cy = np.hstack([C, np.zeros((1, 3))])
    Cu = np.hstack([np.zeros((1, 3)), -K])
    out = _run(capsys, "noise", sample_path("levitated_rotor_axis.lwd"), "--json")
    assert_allclose(out["signals"]["y"]["rms"], np.sqrt((Cy @ X @ Cy.T)[0, 0]), rtol=1e-7)
    assert_allclose(out["signals"]["u"]["rms"], np.sqrt((Cu @ X @ Cu.T)[0, 0]), rtol=1e-7)
    Xd = sla.solve_continuous_lyapunov(Acl, -0.5 * Bw[:, :1] @ Bw[:, :1].T)
    assert_allclose(out["signals"]["y"]["share_by_source"]["dl"], (Cy @ Xd @ Cy.T)[0, 0] / (Cy @ X @ Cy.T)[0, 0], rtol=1e-7)


# ---- design ------------------------------------------------------------------------------


def test_design_json_of_the_stage_servo_gives_the_hand_gains(tmp_path, capsys):
    # tests/REFERENCES.md#stage-place (K = [8, 4]) and #stage-observer (L = [11, 30]'); the
    # reference prefilter makes y/r = N/(s^2 + 4 s + 8) unity at DC: N = 8 (by hand)
    f = tmp_path / "servo.lwd"
    save(stage_servo({"method": "place", "poles": [[-2, 2], [-2, -2]], "sign": -1}, {"method": "place", "poles": [-5, -6]}), str(f))
    out = _run(capsys, "design", f, "--json")
    by = {b["block"]: b for b in out["blocks"]}
    assert_allclose(by["Kx"]["matrix"], [[-8.0, -4.0]], atol=1e-9)
    assert_allclose(by["est"]["matrix"], [[11.0], [30.0]], atol=1e-9)
    assert_allclose(by["Nr"]["matrix"], [[8.0]], atol=1e-9)


# ---- export ------------------------------------------------------------------------------


def _stage_file(tmp_path) -> str:
    f = tmp_path / "stage.lwd"
    save(stage_servo({"method": "place", "poles": [[-2, 2], [-2, -2]], "sign": -1}, {"method": "place", "poles": [-5, -6]}), str(f))
    assert main(["design", str(f), "--write"]) == 0
    return str(f)


def _stage_controller(s):
    return -(208 * s + 240) / (s**2 + 15 * s + 82)  # tests/REFERENCES.md#stage-observer, by hand


def test_export_closed_loop_json_and_path_npz_hold_the_oven_transfer(tmp_path, capsys):
    f = _unity_loop(tmp_path, "oven", OVEN, 4.0)
    assert main(["export", f, "--what", "closed-loop", "-o", str(tmp_path / "loop.json")]) == 0
    js = read_json(tmp_path / "loop.json")
    col = js["input_names"].index("r")
    row = js["output_names"].index("y")
    for s in (0.0, 0.5j, 1.7j, 9.0j):
        G = state_space_at(js["A"], js["B"], js["C"], js["D"], s)
        assert_allclose(G[row, col], _oven_T(s), rtol=1e-10)
    # --format npz although the name says otherwise
    assert main(["export", f, "--what", "path", "--from", "r", "--to", "y", "--format", "npz", "-o", str(tmp_path / "ry.bin")]) == 0
    with np.load(tmp_path / "ry.bin") as z:
        for s in (0.0, 0.5j, 1.7j, 9.0j):
            assert_allclose(state_space_at(z["A"], z["B"], z["C"], z["D"], s)[0, 0], _oven_T(s), rtol=1e-10)
    capsys.readouterr()


def test_export_controller_json_continuous_and_prewarped(tmp_path, capsys):
    f = _stage_file(tmp_path)
    assert main(["export", f, "--what", "controller", "--measured", "y_meas", "--actuator", "u", "-o", str(tmp_path / "c.json")]) == 0
    js = read_json(tmp_path / "c.json")
    for s in (0.0, 1.0j, 10.0j):
        assert_allclose(state_space_at(js["A"], js["B"], js["C"], js["D"], s)[0, 0], _stage_controller(s), rtol=1e-10)
    # Tustin with prewarping at w0 matches the continuous response exactly at w0 (closed
    # form: s = w0/tan(w0 T/2) (z - 1)/(z + 1) maps z = exp(j w0 T) to s = j w0)
    T, w0 = 0.05, 6.0
    assert main(["export", f, "--what", "controller", "--ts", str(T), "--method", "tustin", "--prewarp", str(w0),
                 "-o", str(tmp_path / "d.json")]) == 0
    dj = read_json(tmp_path / "d.json")
    assert_allclose(state_space_at(dj["A"], dj["B"], dj["C"], dj["D"], np.exp(1j * w0 * T))[0, 0], _stage_controller(1j * w0), rtol=1e-10)
    capsys.readouterr()


def test_export_controller_reading_the_reference_and_a_vector_actuator(tmp_path, capsys):
    # rotor sample: u = G_c(s) y_meas + G_r(s) r, N = 3750 from the file; both by hand from the
    # file's K and L (tests/independent.py, observer reading the command)
    A, B, C, K, L = _rotor()
    rot = sample_path("levitated_rotor_axis.lwd")
    assert main(["export", str(rot), "--what", "controller", "--measured", "y_meas,r", "-o", str(tmp_path / "r.json")]) == 0
    js = read_json(tmp_path / "r.json")
    assert js["input_names"] == ["y_meas", "r"]
    for s in (0.0, 50.0j, 400.0j):
        G = state_space_at(js["A"], js["B"], js["C"], js["D"], s)
        assert_allclose(G[0, 0], observer_controller(A, B, C, -K, L, s)[0, 0], rtol=1e-9)
        # the estimator reads the whole command u = N r + K_block xhat, so r reaches u also
        # through it: G_r = N (1 + K_block (sI - A - B K_block + L C)^-1 B)
        Kb = -K
        via = Kb @ np.linalg.solve(s * np.eye(3) - A - B @ Kb + L @ C, B)
        assert_allclose(G[0, 1], 3750.0 * (1 + via[0, 0]), rtol=1e-9)
    # the two-zone oven sample: a 2 x 2 controller, checked the same way
    oven = json.loads(sample_path("two_zone_oven.lwd").read_text(encoding="utf-8"))
    by = {b["name"]: b["params"] for b in oven["blocks"]}
    P = by["P"]
    assert main(["export", str(sample_path("two_zone_oven.lwd")), "--what", "controller", "--actuator", "u",
                 "-o", str(tmp_path / "o.json")]) == 0
    oj = read_json(tmp_path / "o.json")
    assert oj["output_names"] == ["u[1]", "u[2]"]
    for s in (0.0, 0.1j, 2.0j):
        assert_allclose(state_space_at(oj["A"], oj["B"], oj["C"], oj["D"], s),
                        observer_controller(P["A"], P["B"], P["C"], by["K"]["K"], by["est"]["L"], s), rtol=1e-9, atol=1e-12)
    capsys.readouterr()


def test_export_c_in_float_with_a_prefix(tmp_path, capsys):
    f = _stage_file(tmp_path)
    assert main(["export", f, "--what", "controller", "--ts", "0.01", "--precision", "float", "--prefix", "stagec",
                 "-o", str(tmp_path / "out.c")]) == 0
    capsys.readouterr()
    src, hdr = (tmp_path / "out.c").read_text(), (tmp_path / "out.h").read_text()
    assert "double" not in src + hdr
    assert "stagec_state" in hdr and "void stagec_step(" in hdr and "void stagec_reset(" in hdr
    cc = shutil.which("cc") or shutil.which("gcc")
    if cc is None:
        pytest.skip("no C compiler: the float build is not run")
    main_c = tmp_path / "main.c"
    main_c.write_text('#include <stdio.h>\n#include "out.h"\nint main(void){stagec_state s; float y[1], u[1]; int k;\n'
                      'stagec_reset(&s);\nfor(k=0;k<200;++k){y[0]=(k<100)?1.0f:0.0f; stagec_step(&s,y,u); printf("%.9g\\n", u[0]);}\nreturn 0;}\n')
    exe = tmp_path / "run"
    res = subprocess.run([cc, "-std=c99", "-Wall", "-Werror", "-o", str(exe), str(main_c), str(tmp_path / "out.c")], capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr
    got = np.array([float(v) for v in subprocess.run([str(exe)], capture_output=True, text=True, timeout=60).stdout.split()])
    # reference: scipy 1.17.1 cont2discrete (zoh) of the hand controller, run by lfilter
    from scipy.signal import cont2discrete, lfilter

    num, den, _ = cont2discrete(([-208.0, -240.0], [1.0, 15.0, 82.0]), 0.01, method="zoh")
    y = np.where(np.arange(200) < 100, 1.0, 0.0)
    want = lfilter(np.ravel(num), den, y)
    assert_allclose(got, want, rtol=1e-5, atol=1e-5 * np.abs(want).max())  # float precision


# ---- the console script, with Qt made unimportable ---------------------------------------


@pytest.mark.parametrize(
    "argv",
    [
        ["check", "{rotor}"],
        ["report", "{rotor}"],
        ["freq", "{rotor}", "--from", "dl", "--to", "y", "--points", "20"],
        ["time", "{rotor}", "--to", "y", "--t-end", "0.01"],
        ["margins", "{rotor}"],
        ["audit", "{rotor}", "--top", "3"],
        ["noise", "{rotor}"],
        ["design", "{rotor}"],
        ["export", "{rotor}", "--what", "controller", "--ts", "0.0002", "-o", "{tmp}/c.c"],
    ],
    ids=lambda a: a[0],
)
def test_console_script_runs_every_command_without_qt(argv, tmp_path):
    # a PySide6 / shiboken6 / pyqtgraph that fails on import, first on the path: any Qt import
    # by the command would end it with a traceback
    args = [a.format(rotor=sample_path("levitated_rotor_axis.lwd"), tmp=tmp_path) for a in argv]
    proc = run_without_qt(args, tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert "Traceback" not in proc.stderr and "model-based" in proc.stdout
    probe = subprocess.run([sys.executable, "-c", "import PySide6"], capture_output=True, text=True, env=qt_blocked_env(tmp_path))
    assert probe.returncode != 0 and "blocked for this test" in probe.stderr  # the blocker works
