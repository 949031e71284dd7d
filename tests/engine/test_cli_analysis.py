"""``loopwright freq|time|margins|audit|noise``: output formats, caution, user mistakes."""
from __future__ import annotations

import csv
import importlib.resources as ir
import io
import json

import numpy as np
import pytest
from numpy.testing import assert_allclose

from diagrams import nonminimum_phase_lag, rotor_lead_loop, winder_servo
from loopwright.engine import CAUTION
from loopwright.engine.cli import main
from loopwright.engine.diagram import Diagram
from loopwright.engine.interconnect import assemble
from loopwright.engine.margins import margins_at
from loopwright.engine.project import load, save
from loopwright.engine.responses import frequency_response

SAMPLES = ["conveyor_flexible_drive.lwd", "levitated_rotor_axis.lwd", "two_zone_oven.lwd"]


def _path(name: str) -> str:
    return str(ir.files("loopwright.samples") / name)


def _oven_file(tmp_path, K: float = 4.0) -> str:
    # tests/REFERENCES.md#oven-margins (closed forms by hand) diagram
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0, "start": 0.0}})
    d.add_block("sum", "e", {"signs": ["+", "-"], "width": 1})
    d.add_block("gain", "Kp", {"K": [[K]]})
    d.add_block("plant", "P", {"A": [[-1, 0, 0], [1, -1, 0], [0, 1, -1]], "B": [[1], [0], [0]], "C": [[0, 0, 1]], "D": [[0]]})
    d.connect("r.out", "e.in1", name="ref")
    d.connect("e.out", "Kp.in", name="err")
    d.connect("Kp.out", "P.u", name="u")
    d.connect("P.y", "e.in2", name="y")
    d.settings["loop_break"] = "u"
    path = tmp_path / "oven.lwd"
    save(d, str(path))
    return str(path)


def _json(capsys):
    return json.loads(capsys.readouterr().out)


def test_margins_json_of_the_oven_has_the_reference_values(tmp_path, capsys):
    # tests/REFERENCES.md#oven-margins (closed forms by hand): GM 2 (6.0206 dB) at sqrt(3), PM 27.1416306 deg, DM 0.3842501695 s, ||S|| 3
    assert main(["margins", _oven_file(tmp_path), "--json"]) == 0
    out = _json(capsys)
    assert out["gain_margin_db"][0] == "-inf"
    assert_allclose(out["gain_margin_db"][1], 6.020599913, rtol=1e-7)
    assert_allclose(out["phase_margin_deg"], 27.1416306, rtol=1e-7)
    assert_allclose(out["delay_margin_s"], 0.3842501695, rtol=1e-7)
    assert_allclose(out["peak_sensitivity"], 3.0, rtol=1e-7)
    assert_allclose(out["disk_margin"]["alpha"], 0.3776579041, rtol=1e-7)
    assert_allclose(out["gain_crossovers_w_rad_s"], [1.232818762], rtol=1e-7)
    assert out["caution"] == CAUTION
    assert out["at"] == "u"  # taken from settings.loop_break


@pytest.mark.parametrize("name", SAMPLES)
def test_margins_text_on_every_sample(name, capsys):
    assert main(["margins", _path(name)]) == 0
    text = capsys.readouterr().out
    for piece in ("gain margin, upper", "phase margin", "delay margin", "peak sensitivity", "disk margin", "Caution"):
        assert piece in text


def test_freq_json_matches_the_engine_response(tmp_path, capsys):
    f = _oven_file(tmp_path)
    assert main(["freq", f, "--from", "r", "--to", "y", "--w-min", "0.1", "--w-max", "10", "--points", "50", "--json"]) == 0
    out = _json(capsys)
    w = np.array(out["w"])
    assert_allclose(w, np.logspace(-1, 1, 50))
    model = assemble(load(f))
    G = frequency_response(*model.pair("r", "y"), w)[:, 0, 0]
    assert_allclose(out["mag_db"], 20 * np.log10(np.abs(G)), rtol=1e-10)
    assert_allclose(np.array(out["phase_deg"]), np.degrees(np.unwrap(np.angle(G))), atol=1e-8)
    assert out["caution"] == CAUTION


def test_freq_csv_and_vector_pairs(capsys):
    assert main(["freq", _path(SAMPLES[0]), "--from", "dl", "--to", "xhat", "--csv"]) == 0
    rows = list(csv.reader(io.StringIO(capsys.readouterr().out)))
    assert rows[0][0] == "w_rad_s"
    assert len(rows[0]) == 1 + 2 * 4  # xhat has 4 components: mag and phase per element
    assert main(["freq", _path(SAMPLES[0]), "--from", "dl", "--to", "xhat", "--json"]) == 0
    out = _json(capsys)
    assert len(out["elements"]) == 4 and "sigma_max_db" in out
    assert np.array(out["mag_db"]).shape == (len(out["w"]), 4, 1)


def test_time_step_json_reaches_the_reference_dc_gain(tmp_path, capsys):
    # tests/REFERENCES.md#oven-margins closed loop r -> y settles at 4/(1+4) = 0.8 (common practice, no source)
    assert main(["time", _oven_file(tmp_path), "--step", "r", "--to", "y,u", "--t-end", "100", "--dt", "0.01", "--json"]) == 0
    out = _json(capsys)
    assert_allclose(out["t"][-1], 100.0)
    assert_allclose(out["y"]["y"][-1], 0.8, rtol=1e-6)
    assert_allclose(out["y"]["u"][0], 4.0, rtol=1e-12)  # direct path r -> e -> Kp at t = 0
    assert out["diverged"] is False and out["caution"] == CAUTION


def test_time_run_of_an_unstable_loop_reports_divergence(tmp_path, capsys):
    assert main(["time", _oven_file(tmp_path, K=12.0), "--run", "--to", "y", "--t-end", "2000", "--dt", "0.01", "--json"]) == 0
    out = _json(capsys)
    assert out["diverged"] is True and "grows without bound" in out["message"]
    assert out["t"][-1] < 2000


def test_time_csv_default_run_on_a_sample(capsys):
    assert main(["time", _path(SAMPLES[2]), "--to", "y", "--csv"]) == 0
    rows = list(csv.reader(io.StringIO(capsys.readouterr().out)))
    assert rows[0][0] == "t_s" and rows[0][1].startswith("y")
    assert len(rows) > 100


@pytest.mark.parametrize("name", SAMPLES)
def test_audit_json_rows_have_the_contract_keys(name, capsys):
    assert main(["audit", _path(name), "--json"]) == 0
    out = _json(capsys)
    assert out["caution"] == CAUTION
    for row in out["rows"]:
        assert set(row) >= {"source", "signal", "peak_gain", "peak_freq", "h2", "dc_gain", "stable", "path"}
        assert set(row["path"]) >= {"blocks", "wires"}
    assert [r["rank"] for r in out["rows"]] == list(range(1, len(out["rows"]) + 1))


def test_audit_with_injections_lists_more_paths(capsys):
    main(["audit", _path(SAMPLES[0]), "--csv"])
    n_plain = len(capsys.readouterr().out.splitlines())
    main(["audit", _path(SAMPLES[0]), "--injections", "--csv"])
    n_inj = len(capsys.readouterr().out.splitlines())
    assert n_inj > n_plain
    assert main(["audit", _path(SAMPLES[0]), "--top", "3"]) == 0
    assert "Caution" in capsys.readouterr().out


def test_noise_json_and_text(capsys):
    assert main(["noise", _path(SAMPLES[0]), "--json"]) == 0
    out = _json(capsys)
    assert out["caution"] == CAUTION
    y = out["signals"]["y"]
    assert y["rms"] > 0 and abs(sum(y["share_by_source"].values()) - 1.0) < 1e-9
    assert out["signals"]["v"]["rms"] == "inf"  # white noise itself
    assert main(["noise", _path(SAMPLES[0])]) == 0
    assert "RMS" in capsys.readouterr().out


@pytest.mark.parametrize(
    "argv, fragment",
    [
        (["freq", "{f}", "--from", "rr", "--to", "y"], "did you mean"),
        (["freq", "{f}", "--from", "r", "--to", "yy"], "no signal called 'yy'"),
        (["margins", "{f}", "--at", "uu"], "cannot break the loop at 'uu'"),
        (["time", "{f}", "--step", "r", "--to", "y", "--dt", "-1"], "dt"),
        (["freq", "{f}", "--from", "r", "--to", "y", "--points", "20", "--w-min", "10", "--w-max", "1"], "--w-max"),
    ],
)
def test_user_mistakes_print_one_line_and_exit_2(argv, fragment, tmp_path, capsys):
    f = _oven_file(tmp_path)
    assert main([a.format(f=f) for a in argv]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and fragment in err[0]


def test_margins_without_a_break_and_without_a_setting_is_a_user_error(tmp_path, capsys):
    f = _oven_file(tmp_path)
    d = load(f)
    d.settings.pop("loop_break")
    save(d, f)
    assert main(["margins", f]) == 2
    assert "--at" in capsys.readouterr().err


def test_margins_cli_agrees_with_the_engine_on_a_sample(capsys):
    d = load(_path(SAMPLES[1]))
    m = margins_at(d, d.settings["loop_break"])
    assert main(["margins", _path(SAMPLES[1]), "--json"]) == 0
    out = _json(capsys)
    assert_allclose(out["phase_margin_deg"], m.phase_margin_deg, rtol=1e-12)


def test_time_impulse_of_the_oven_matches_the_engine(tmp_path, capsys):
    from loopwright.engine.responses import impulse_response

    f = _oven_file(tmp_path)
    assert main(["time", f, "--impulse", "r", "--to", "y", "--t-end", "5", "--dt", "0.01", "--json"]) == 0
    out = _json(capsys)
    model = assemble(load(f))
    A, B, C, D = model.pair("r", "y")
    ref = impulse_response(A, B, C, D, np.array(out["t"])).y[:, 0, 0]
    assert_allclose(out["y"]["y"], ref, rtol=1e-12, atol=1e-15)
    assert "impulse on r" in out["kind"]


def test_margins_on_a_vector_break_reports_each_loop_and_all_at_once(tmp_path, capsys):
    # the spinning-drum loop of test_margins (demo data): each loop alone 1/s, together fragile
    a = 6.0
    d = Diagram()
    d.add_block("plant", "drum", {"A": [[0.0, a], [-a, 0.0]], "B": [[1.0, 0.0], [0.0, 1.0]], "C": [[1.0, a], [-a, 1.0]], "D": [[0.0, 0.0], [0.0, 0.0]]})
    d.add_block("gain", "Kneg", {"K": [[-1.0, 0.0], [0.0, -1.0]]})
    d.connect("drum.y", "Kneg.in", name="rates")
    d.connect("Kneg.out", "drum.u", name="torques")
    f = tmp_path / "drum.lwd"
    save(d, str(f))
    assert main(["margins", str(f), "--at", "torques", "--json"]) == 0
    out = _json(capsys)
    assert out["kind"] == "vector"
    assert set(out["channels"]) == {"torques[1]", "torques[2]"}
    assert out["channels"]["torques[1]"]["gain_margin"] == [0.0, "inf"]
    assert out["disk_margin_all_loops"]["alpha"] < 0.2
    assert main(["margins", str(f), "--at", "torques"]) == 0
    assert "all loops at once" in capsys.readouterr().out


@pytest.mark.parametrize(
    "args, message",
    [
        (["freq", "--from", "dl", "--to", "y", "--w-min", "10", "--w-max", "1"], "--w-max (1.0) must exceed --w-min (10.0)"),
        (["freq", "--from", "dl", "--to", "y", "--points", "100000000"], "argument --points: must be a whole number from 2 to 200000"),
        (["audit", "--top", "0"], "argument --top: must be a whole number from 1 to"),
        (["margins", "--at", "r"], "no feedback loop passes through 'r'"),
        (["margins", "--skew", "nan"], "argument --skew: must be a number from -1e+06 to 1e+06"),
    ],
)
def test_nonsense_options_get_one_line_and_exit_2(args, message, capsys):
    from diagrams import sample_path
    from loopwright.engine.cli import main

    path = str(sample_path("levitated_rotor_axis.lwd"))
    assert main([args[0], path, *args[1:]]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and message in err[0]


def test_free_response_from_a_plant_initial_state_shows_the_estimation_error(capsys):
    # y(t) = C e^{A t} x0 with x0 = (P.x = [1e-4, 0, 0], est.xhat = 0), checked against scipy's expm
    # (closed form, common practice, no source); the estimate starts at zero and catches up
    import json

    import scipy.linalg as sla

    from diagrams import sample_path
    from loopwright.engine.cli import main
    from loopwright.engine.interconnect import assemble
    from loopwright.engine.project import load

    path = str(sample_path("levitated_rotor_axis.lwd"))
    assert main(["time", path, "--free", "--initial", "P=1e-4,0,0", "--to", "y,xhat", "--t-end", "0.05", "--dt", "0.001", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    m = assemble(load(path))
    x0 = np.zeros(m.n_states)
    x0[m.states["P"].start] = 1e-4
    for k in (0, 10, 50):
        t = out["t"][k]
        z = m.C @ sla.expm(m.A * t) @ x0
        assert_allclose(out["y"]["y"][k], z[m.signals["y"]][0], rtol=1e-9, atol=1e-15)
        assert_allclose(out["y"]["xhat[1]"][k], z[m.signals["xhat"]][0], rtol=1e-9, atol=1e-15)
    assert out["y"]["xhat[1]"][0] == 0.0 and abs(out["y"]["y"][-1] - out["y"]["xhat[1]"][-1]) < 1e-7


# ---- answers read right: origin poles, crossover tables, unbounded disks, DC points -----------


def _rotor_lead_file(tmp_path) -> str:
    # tests/REFERENCES.md#rotor-sensitivity-integral diagram, loop break at the plant input
    path = tmp_path / "rotor.lwd"
    save(rotor_lead_loop(), str(path))
    return str(path)


def _nmp_file(tmp_path) -> str:
    path = tmp_path / "nmp.lwd"
    save(nonminimum_phase_lag(), str(path))
    return str(path)


def test_freq_accepts_the_dc_point(tmp_path, capsys):
    # closed form (tests/REFERENCES.md#rotor-sensitivity-integral case): S(0) = 1/(1 + L(0)) = 1/(1 - 2) = -1: 0 dB and a phase of +-180 deg
    assert main(["freq", _rotor_lead_file(tmp_path), "--from", "r", "--to", "err", "--w", "0,1e6", "--json"]) == 0
    out = _json(capsys)
    assert out["w"] == [0.0, 1e6]
    assert_allclose(out["re"][0], -1.0, rtol=1e-12)
    assert_allclose(out["mag_db"][0], 0.0, atol=1e-9)
    assert_allclose(abs(out["phase_deg"][0]), 180.0, rtol=1e-12)
    assert main(["freq", _rotor_lead_file(tmp_path), "--from", "r", "--to", "err", "--w-min", "0", "--csv"]) == 0
    rows = list(csv.reader(io.StringIO(capsys.readouterr().out)))
    assert float(rows[1][0]) == 0.0 and abs(float(rows[1][2])) == pytest.approx(180.0)


@pytest.mark.parametrize("bad", ["-1", "abc", "nan", ""])
def test_freq_rejects_a_bad_frequency_list_in_one_line(bad, tmp_path, capsys):
    assert main(["freq", _rotor_lead_file(tmp_path), "--from", "r", "--to", "err", "--w", bad]) == 2
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and "--w" in err


def test_margins_text_lists_each_crossover_and_marks_what_sets_the_margins(tmp_path, capsys):
    # tests/REFERENCES.md#rotor-sensitivity-integral (python-control 0.10.2 stability_margins): PM 48.94734683 deg at 6.234008542 rad/s,
    # DM 0.1370374065 s, lower gain margin 0.5 at w = 0, one open-loop pole in the right half-plane (+2)
    assert main(["margins", _rotor_lead_file(tmp_path)]) == 0
    text = capsys.readouterr().out
    assert "open-loop poles       1 in the right half-plane" in text
    assert "gain crossovers (|L| = 1):" in text and "phase crossovers (L real and negative" in text
    (gc_line,) = [ln for ln in text.splitlines() if "sets the phase margin" in ln]
    w, pm, dm = (float(x) for x in gc_line.split()[:3])
    assert_allclose([w, pm, dm], [6.234008542, 48.94734683, 0.1370374065], rtol=1e-5)
    (pc_line,) = [ln for ln in text.splitlines() if "sets the lower gain margin" in ln]
    assert_allclose([float(x) for x in pc_line.split()[:2]], [0.0, 0.5], atol=1e-9)
    assert main(["margins", _rotor_lead_file(tmp_path), "--json"]) == 0
    out = _json(capsys)
    (gc,) = out["gain_crossovers"]
    assert gc["sets_phase_margin"] and gc["sets_delay_margin"]
    assert out["open_loop_poles"] == {"open_rhp": 1, "origin": 0, "imaginary_axis": 0, "open_lhp": 2}


def test_an_unbounded_disk_prints_zero_and_inf(tmp_path, capsys):
    # L = 1/s (an integrating plant under unity feedback): S - 1/2 is all-pass of gain 1/2, alpha = 2, the balanced
    # disk gives gains [0, inf) (closed form; Seiler, Packard & Gahinet 2020, from memory)
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1})
    d.add_block("sum", "e", {"signs": ["+", "-"], "width": 1})
    d.add_block("integrator", "I", {"width": 1})
    d.connect("r.out", "e.in1", name="ref")
    d.connect("e.out", "I.in", name="u")
    d.connect("I.out", "e.in2", name="y")
    path = tmp_path / "int.lwd"
    save(d, str(path))
    assert main(["margins", str(path), "--at", "u"]) == 0
    text = capsys.readouterr().out
    assert "gain [0, inf]" in text and "open-loop poles       1 at the origin, 0 in the right half-plane" in text
    assert main(["margins", str(path), "--at", "u", "--json"]) == 0
    disk = _json(capsys)["disk_margin"]
    assert disk["gain"] == [0.0, "inf"] and disk["gain_unbounded"] == [True, True]


def test_check_on_the_ill_conditioned_chain_separates_and_flags(capsys):
    # tests/engine/data: 10 integrators with placed K, L (poles -1 .. -3.25 and about -3 .. -7.5, all real)
    import pathlib

    path = pathlib.Path(__file__).parent / "data" / "integrator_chain_10_placed_gains.lwd"
    assert main(["check", str(path)]) == 0
    text = capsys.readouterr().out
    assert "from the separation coordinates" in text
    assert "j " not in text.split("verdict")[0]  # no complex pairs among the poles
    assert "yes, by structure" in text
    assert main(["check", str(path), "--json"]) == 0
    out = _json(capsys)
    assert out["pole_source"] == "separation" and out["separation"]["verdict"] == "holds" and out["poles_trusted"]
    assert out["worst_condition"] > 1e10


def _servo_file(tmp_path) -> str:
    path = tmp_path / "servo.lwd"
    save(winder_servo(), str(path))
    return str(path)


def test_step_metrics_of_the_second_order_servo(tmp_path, capsys):
    # closed forms (common practice): overshoot exp(-zeta pi / sqrt(1 - zeta^2)) = 16.30335348 %,
    # peak time pi / (wn sqrt(1 - zeta^2)) = 1.813799364 s, peak 1.163033535, final value 1;
    # rise and settling times against python-control 0.10.2 step_info on a fine grid
    import control as ct

    path = _servo_file(tmp_path)
    assert main(["time", path, "--step", "r", "--to", "y", "--metrics", "--t-end", "10", "--dt", "0.0005", "--json"]) == 0
    out = _json(capsys)
    m = out["metrics"]["y"]
    assert_allclose(m["steady_state"], 1.0, rtol=1e-12)
    assert_allclose(m["overshoot_pct"], 16.30335348, atol=1e-4)
    assert_allclose(m["peak"], 1.163033535, atol=1e-7)
    assert_allclose(m["peak_time_s"], np.pi / np.sqrt(3.0), rtol=1e-4)
    assert m["undershoot_pct"] == 0.0 and m["settled"]
    info = ct.step_info(ct.tf(4, [1, 2, 4]), T=np.linspace(0, 10, 200001))
    assert_allclose(m["rise_time_s"], info["RiseTime"], atol=1e-3)
    assert_allclose(m["settling_time_s"], info["SettlingTime"], atol=1e-3)
    assert "rise_time" in out["metric_definitions"]
    assert main(["time", path, "--step", "r", "--to", "y", "--metrics"]) == 0
    assert "step metrics" in capsys.readouterr().out


def test_step_metrics_see_the_dip_of_a_right_half_plane_zero(tmp_path, capsys):
    # closed form: G = (1 - s)/(s + 1)^2 has y(t) = 1 - e^-t - 2 t e^-t, whose minimum is at t = 0.5 (dy/dt = 0):
    # y(0.5) = 1 - 2 e^-0.5 = -0.2130613, an undershoot of 21.30613 % of the final value 1
    path = _nmp_file(tmp_path)
    assert main(["time", path, "--step", "r", "--to", "G.y", "--metrics", "--t-end", "20", "--dt", "0.0005", "--json"]) == 0
    m = _json(capsys)["metrics"]["G.y"]
    assert_allclose(m["undershoot_pct"], 100 * (2 * np.exp(-0.5) - 1), atol=1e-5)
    assert_allclose(m["steady_state"], 1.0, rtol=1e-12)


def test_metrics_need_a_step(tmp_path, capsys):
    assert main(["time", _servo_file(tmp_path), "--to", "y", "--metrics"]) == 2
    assert "--metrics goes with --step" in capsys.readouterr().err


def test_tf_of_the_rotor_loop_matches_the_closed_form(tmp_path, capsys):
    # tests/REFERENCES.md#rotor-sensitivity-integral: T = r -> y = (80 s + 80)/(s^3 + 10 s^2 + 76 s + 40) (closed form), DC gain 2,
    # poles -0.5660950408 and -4.71695248 +- 6.957720352j; python-control 0.10.2 ss2tf agrees
    import control as ct

    assert main(["tf", _rotor_lead_file(tmp_path), "--from", "r", "--to", "y", "--json"]) == 0
    out = _json(capsys)
    assert out["order"] == 3
    assert_allclose(out["den"], [1, 10, 76, 40], rtol=1e-10)
    assert_allclose(out["num"], [80, 80], rtol=1e-10)
    assert_allclose(out["dc_gain"], [[2.0]], rtol=1e-10)
    assert_allclose(out["hf_gain"], [[0.0]], atol=0)
    poles = np.array([complex(*p) for p in out["poles"]])
    assert_allclose(np.sort_complex(poles), np.sort_complex(np.array([-0.5660950408, -4.71695248 - 6.957720352j, -4.71695248 + 6.957720352j])), atol=1e-8)
    assert_allclose([complex(*z) for z in out["zeros"]], [-1.0], rtol=1e-9) and out["rhp_zeros"] == []
    model = assemble(load(_rotor_lead_file(tmp_path)))
    ref = ct.tf(ct.ss(*model.pair("r", "y")))  # non-minimal: compare values, not coefficients
    s_pts = np.array([0.5j, 3j, 10j, 1 + 2j])
    assert_allclose(np.polyval(out["num"], s_pts) / np.polyval(out["den"], s_pts), ref(s_pts), rtol=1e-9)


def test_tf_flags_a_right_half_plane_zero(tmp_path, capsys):
    # closed form: G = (1 - s)/(s + 1)^2 has its zero at s = +1
    path = _nmp_file(tmp_path)
    assert main(["tf", path, "--from", "r", "--to", "G.y"]) == 0
    text = capsys.readouterr().out
    assert "1  (RIGHT HALF-PLANE)" in text and "num                 [-1, 1]" in text


def test_noise_covariance_of_a_vector_signal_matches_python_control(capsys):
    # python-control 0.10.2 lyap (scipy method) on the same realisation: X = lyap(A, sum B W B^T), cov = C X C^T;
    # the diagonal must be the squares of the budget's RMS values (closed form: variance = RMS^2)
    import control as ct

    from loopwright.engine.noise import white_sources

    assert main(["noise", _path("two_zone_oven.lwd"), "--covariance", "y", "--json"]) == 0
    out = _json(capsys)
    cov = np.array(out["covariance"]["y"]["matrix"], dtype=float)
    model = assemble(load(_path("two_zone_oven.lwd")))
    Q = sum(model.B[:, model.inputs[s]] @ W @ model.B[:, model.inputs[s]].T for s, W in white_sources(model).items())
    X = ct.lyap(model.A, Q, method="scipy")
    Cy = model.C[model.signals["y"]]
    assert_allclose(cov, Cy @ X @ Cy.T, rtol=1e-9)
    assert_allclose(np.sqrt(np.diag(cov)), [out["signals"]["y[1]"]["rms"], out["signals"]["y[2]"]["rms"]], rtol=1e-9)
    assert out["covariance"]["y"]["components"] == ["y[1]", "y[2]"]
    assert main(["noise", _path("two_zone_oven.lwd"), "--covariance", "y"]) == 0
    assert "steady-state covariance of y" in capsys.readouterr().out
