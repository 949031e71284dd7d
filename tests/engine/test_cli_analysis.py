"""``loopwright freq|time|margins|audit|noise``: output formats, caution, user mistakes."""
from __future__ import annotations

import csv
import importlib.resources as ir
import io
import json

import numpy as np
import pytest
from numpy.testing import assert_allclose

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
    # REFERENCES.md REF-09 diagram
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
    # REFERENCES.md REF-09: GM 2 (6.0206 dB) at sqrt(3), PM 27.1416306 deg, DM 0.3842501695 s, ||S|| 3
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
    # REF-09 closed loop r -> y settles at 4/(1+4) = 0.8 (common practice, no source)
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
