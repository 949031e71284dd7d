"""A plant's performance output ``z = Cz x + Dz u + Fz d``: port, realisation, every analysis, design unchanged.

References: python-control 0.10.2 (``ss``, ``feedback``, ``step_response``, ``place``),
scipy's Lyapunov solver, and closed forms named beside each check.
"""
from __future__ import annotations

import contextlib
import copy
import io
import json

import control as ct
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy.linalg import solve_continuous_lyapunov

from diagrams import sample_path
from loopwright.engine import project
from loopwright.engine.blocks import PLANT_FIELDS, performance_matrices, plant_fingerprint, port_widths, realize
from loopwright.engine.check import summarize
from loopwright.engine.cli import main
from loopwright.engine.diagram import Diagram
from loopwright.engine.errors import ParameterError, ProjectFileError
from loopwright.engine.interconnect import assemble
from loopwright.engine.noise import noise_budget
from loopwright.engine.ports import input_ports, output_ports
from loopwright.engine.recipes import design_block, noise_defaults, stale_blocks
from loopwright.engine.report import loop_report
from loopwright.engine.responses import frequency_response
from strategies import matrices

CONVEYOR = "conveyor_flexible_drive.lwd"


def _cli(args: list[str]) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            status = main(args)
        except SystemExit as stop:
            status = stop.code
    return status, out.getvalue(), err.getvalue()


def _conveyor_data() -> dict:
    return json.loads(sample_path(CONVEYOR).read_text(encoding="utf-8"))


def _params(data: dict, name: str) -> dict:
    return next(b for b in data["blocks"] if b["name"] == name)["params"]


# ---- a three-state plant with two actuators, one load input and two performance outputs ----
A3 = [[-1.0, 2.0, 0.0], [-2.0, -1.0, 1.0], [0.0, 0.0, -3.0]]
B3 = [[1.0, 0.0], [0.0, 0.5], [1.0, 1.0]]
C3 = [[1.0, 0.0, 0.0]]
E3 = [[0.0], [1.0], [0.2]]
CZ3 = [[0.0, 1.0, -1.0], [2.0, 0.0, 1.0]]
DZ3 = [[0.1, 0.0], [0.0, -0.3]]
FZ3 = [[0.5], [0.0]]


def _open_loop(**perf) -> Diagram:
    d = Diagram()
    d.add_block("source", "u0", {"role": "reference", "width": 2})
    d.add_block("source", "d0", {"role": "disturbance", "width": 1})
    d.add_block("plant", "P", {"A": A3, "B": B3, "C": C3, "D": [[0.0, 0.0]], "E": E3, **perf})
    d.connect("u0.out", "P.u", name="u")
    d.connect("d0.out", "P.d", name="d")
    return d


def test_the_z_port_exists_only_when_cz_is_given_and_has_its_rows():
    plain = _open_loop()
    assert output_ports(plain.block_by_name("P")) == ["y"]
    d = _open_loop(Cz=CZ3)
    P = d.block_by_name("P")
    assert output_ports(P) == ["y", "z"] and input_ports(P) == ["u", "d"]
    assert port_widths(P, d) == ({"u": 2, "d": 1}, {"y": 1, "z": 2})
    Cz, Dz, Fz = performance_matrices(d, "P")
    assert_allclose(Cz, CZ3)
    assert_allclose(Dz, np.zeros((2, 2)))  # left out: zero, as D and F are
    assert_allclose(Fz, np.zeros((2, 1)))
    assert performance_matrices(plain, "P") is None


@pytest.mark.parametrize("group, B_of, D_of", [("u0", B3, DZ3), ("d0", E3, FZ3)], ids=["actuator u", "load d"])
def test_open_loop_z_path_matches_python_control(group, B_of, D_of):
    # python-control 0.10.2: ct.ss(A, B, Cz, Dz) (and ct.ss(A, E, Cz, Fz)) evaluated at the same frequencies;
    # the z path of the plant is Cz (sI - A)^-1 B + Dz.
    model = assemble(_open_loop(Cz=CZ3, Dz=DZ3, Fz=FZ3))
    w = np.array([0.0, 0.1, 1.0, 2.2, 10.0, 300.0])
    G = frequency_response(*model.pair(group, "P.z"), w)
    ref = ct.ss(A3, B_of, CZ3, D_of)
    expected = np.stack([np.reshape(ref(1j * wk), G.shape[1:]) for wk in w])
    assert_allclose(G, expected, rtol=1e-10, atol=1e-13)
    # y is untouched by the performance output
    y_ref = ct.ss(A3, B_of, C3, np.zeros((1, np.shape(B_of)[1])))
    Gy = frequency_response(*model.pair(group, "P.y"), w)
    assert_allclose(Gy, np.stack([np.reshape(y_ref(1j * wk), Gy.shape[1:]) for wk in w]), rtol=1e-10, atol=1e-13)


@settings(max_examples=25, deadline=None)
@given(
    n=st.integers(1, 3), m=st.integers(1, 2), pz=st.integers(1, 2), data=st.data(),
)
def test_any_z_path_is_the_closed_form_cz_si_minus_a_inverse_b_plus_dz(n, m, pz, data):
    # closed form: G_z(s) = Cz (sI - A)^-1 B + Dz, A made stable by a shift of its diagonal
    elems = st.floats(-3, 3, allow_nan=False)
    A = np.array(data.draw(matrices(n, n, elems)))
    A -= (np.abs(np.linalg.eigvals(A).real).max() + 1.0) * np.eye(n)
    B, Cz, Dz = (np.array(data.draw(matrices(r, c, elems))) for r, c in ((n, m), (pz, n), (pz, m)))
    d = Diagram()
    d.add_block("source", "u0", {"role": "reference", "width": m})
    d.add_block("plant", "P", {"A": A.tolist(), "B": B.tolist(), "C": [[1.0] + [0.0] * (n - 1)], "D": [[0.0] * m],
                               "Cz": Cz.tolist(), "Dz": Dz.tolist()})
    d.connect("u0.out", "P.u")
    model = assemble(d)
    s = 0.7j
    G = frequency_response(*model.pair("u0", "P.z"), np.array([0.7]))[0]
    assert_allclose(G, Cz @ np.linalg.solve(s * np.eye(n) - A, B) + Dz, rtol=1e-9, atol=1e-10)


# ---- a closed loop: state feedback from y, z = position error with feedthrough ----------------
MSD_A = [[0.0, 1.0], [-4.0, -0.8]]  # demo data: a carriage on a spring, position and speed
MSD_B = [[0.0], [2.0]]
MSD_K = [[3.0, 1.2]]
MSD_N = 5.0
MSD_CZ = [[1.0, 0.0]]
MSD_DZ = [[0.05]]


def _servo_file(tmp_path) -> str:
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0}})
    d.add_block("gain", "N", {"K": [[MSD_N]]})
    d.add_block("sum", "s", {"signs": ["+", "-"], "width": 1})
    d.add_block("plant", "P", {"A": MSD_A, "B": MSD_B, "C": [[1.0, 0.0], [0.0, 1.0]], "D": [[0.0], [0.0]],
                               "Cz": MSD_CZ, "Dz": MSD_DZ})
    d.add_block("gain", "K", {"K": MSD_K})
    d.connect("r.out", "N.in", name="ref")
    d.connect("N.out", "s.in1", name="uff")
    d.connect("s.out", "P.u", name="u")
    d.connect("P.y", "K.in", name="y")
    d.connect("K.out", "s.in2", name="ufb")
    path = tmp_path / "servo.lwd"
    project.save(d, str(path))
    return str(path)


def _servo_reference():
    # python-control 0.10.2: the plant with outputs [y; z], closed through K acting on y only
    # (zero columns on z), then the reference gain N in series; the z row of the result.
    plant = ct.ss(MSD_A, MSD_B, np.vstack([np.eye(2), MSD_CZ]), np.vstack([np.zeros((2, 1)), MSD_DZ]))
    loop = ct.feedback(plant, ct.ss([], [], [], np.hstack([MSD_K, [[0.0]]])), sign=-1) * MSD_N
    return loop[2, 0]


def test_closed_loop_z_from_the_cli_matches_python_control_feedback(tmp_path, capsys):
    path = _servo_file(tmp_path)
    w = [0.0, 0.5, 2.0, 3.7, 20.0]
    status, out, err = _cli(["freq", path, "--from", "r", "--to", "P.z", "--w", ",".join(map(str, w)), "--json"])
    assert status == 0, err
    got = json.loads(out)
    G = np.array(got["re"]) + 1j * np.array(got["im"])
    ref = _servo_reference()
    assert_allclose(G, [complex(ref(1j * wk)) for wk in w], rtol=1e-10, atol=1e-13)
    # closed form at DC: N (Dz + (Cz - Dz K)(B K - A)^-1 B) with the gain acting on the full state
    A, B, K = np.array(MSD_A), np.array(MSD_B), np.array(MSD_K)
    dc = MSD_N * (MSD_DZ[0][0] + ((np.array(MSD_CZ) - np.array(MSD_DZ) @ K) @ np.linalg.solve(B @ K - A, B))[0, 0])
    assert_allclose(G[0].real, dc, rtol=1e-12)


def test_closed_loop_z_step_from_the_cli_matches_python_control(tmp_path):
    # python-control 0.10.2 step_response of the same closed loop (exact for a step held between samples)
    path = _servo_file(tmp_path)
    status, out, err = _cli(["time", path, "--step", "r", "--to", "P.z", "--t-end", "3", "--dt", "0.01", "--json"])
    assert status == 0, err
    got = json.loads(out)
    t = np.array(got["t"])
    ref = ct.step_response(_servo_reference(), T=t)
    assert_allclose(got["y"]["P.z"], np.squeeze(ref.outputs), rtol=1e-8, atol=1e-10)


# ---- noise budget of z -------------------------------------------------------------------
@pytest.mark.parametrize("a, c, W", [(0.5, 2.0, 0.04), (3.0, -0.5, 1.0)])
def test_rms_of_z_is_the_first_order_closed_form(a, c, W):
    # closed form: x' = -a x + d with white d of intensity W, z = c x: var z = c^2 W / (2a)
    d = Diagram()
    d.add_block("source", "gust", {"role": "disturbance", "width": 1, "waveform": {"kind": "white", "intensity": W, "seed": 1}})
    d.add_block("source", "u0", {"role": "reference", "width": 1})
    d.add_block("plant", "P", {"A": [[-a]], "B": [[1.0]], "C": [[1.0]], "D": [[0.0]], "E": [[1.0]], "Cz": [[c]]})
    d.connect("gust.out", "P.d", name="d")
    d.connect("u0.out", "P.u", name="u")
    line = noise_budget(assemble(d)).line("P.z")
    assert_allclose(line.rms, abs(c) * np.sqrt(W / (2 * a)), rtol=1e-10)
    assert_allclose(line.share_by_source["gust"], 1.0, rtol=1e-12)


def test_white_noise_through_fz_makes_z_white_with_a_reason():
    # common practice, no source: a direct path from white noise has unbounded variance
    d = Diagram()
    d.add_block("source", "gust", {"role": "disturbance", "width": 1, "waveform": {"kind": "white", "intensity": 0.1}})
    d.add_block("source", "u0", {"role": "reference", "width": 1})
    d.add_block("plant", "P", {"A": [[-1.0]], "B": [[1.0]], "C": [[1.0]], "D": [[0.0]], "E": [[1.0]], "Cz": [[1.0]], "Fz": [[0.2]]})
    d.connect("gust.out", "P.d")
    d.connect("u0.out", "P.u")
    line = noise_budget(assemble(d)).line("P.z")
    assert line.rms == np.inf and "direct feedthrough" in line.reason and "'gust'" in line.reason


def _conveyor_closed_loop(data: dict):
    """The conveyor sample's closed loop built from its numbers with numpy: states [x; xhat].

    u = N r + K xhat (the file's K, summed with a plus sign), y_meas = C x + v,
    xhat' = A xhat + B u + L (y_meas - C xhat); load d enters through E.
    """
    P, est, K = _params(data, "P"), _params(data, "est"), _params(data, "K")
    A, B, C, E, Cz = (np.array(P[k], dtype=float) for k in ("A", "B", "C", "E", "Cz"))
    L, Kg = np.array(est["L"], dtype=float), np.array(K["K"], dtype=float)
    Acl = np.block([[A, B @ Kg], [L @ C, A + B @ Kg - L @ C]])
    Gd = np.vstack([E, np.zeros_like(E)])
    Gv = np.vstack([np.zeros_like(L), L])
    return Acl, Gd, Gv, np.hstack([Cz, np.zeros_like(Cz)])


def test_rms_of_the_conveyor_shaft_twist_matches_a_scipy_lyapunov_solve(capsys):
    # scipy.linalg.solve_continuous_lyapunov on the loop built by hand from the sample's numbers:
    # Acl X + X Acl^T + G W G^T = 0, var z = Cz X Cz^T, per source (sources are independent)
    data = _conveyor_data()
    Acl, Gd, Gv, Czc = _conveyor_closed_loop(data)
    Wd = _params(data, "dl")["intensity"]
    Wv = _params(data, "n")["waveform"]["intensity"]
    var = {name: (Czc @ solve_continuous_lyapunov(Acl, -W * G @ G.T) @ Czc.T)[0, 0] for name, G, W in (("dl", Gd, Wd), ("n", Gv, Wv))}
    assert main(["noise", str(sample_path(CONVEYOR)), "--json"]) == 0
    line = json.loads(capsys.readouterr().out)["signals"]["P.z"]
    assert_allclose(line["variance_by_source"]["dl"], var["dl"], rtol=1e-8)
    assert_allclose(line["variance_by_source"]["n"], var["n"], rtol=1e-8)
    assert_allclose(line["rms"], np.sqrt(var["dl"] + var["n"]), rtol=1e-8)


def test_conveyor_twist_under_a_constant_load_is_the_shaft_closed_form(capsys):
    # closed form: at rest the shaft carries the whole load torque, k (theta_m - theta_p) = -T_load,
    # so the twist per N m of load is -1/k = -1/40 rad (stiffness 40 N m/rad, the sample's demo data),
    # whatever the controller does
    assert main(["audit", str(sample_path(CONVEYOR)), "--json"]) == 0
    rows = json.loads(capsys.readouterr().out)["rows"]
    row = next(r for r in rows if r["source"] == "dl" and r["signal"] == "P.z")
    assert_allclose(row["dc_gain"], -1.0 / 40.0, rtol=1e-9)
    assert row["stable"] is True


def test_margins_at_z_say_no_loop_passes_through_it():
    # z is not measured: nothing feeds it back, so a break there has no loop to open
    status, _, err = _cli(["margins", str(sample_path(CONVEYOR)), "--at", "P.z"])
    assert status == 2 and len(err.strip().splitlines()) == 1
    assert "no feedback loop passes through 'P.z'" in err


def test_the_report_lists_the_performance_output_among_the_key_signals():
    report = loop_report(project.load(str(sample_path(CONVEYOR))))
    assert "P.z" in report.as_dict()["noise"]


# ---- estimator links and recipes keep reading y --------------------------------------------
def _conveyor_with_and_without_z():
    with_z = project.load(str(sample_path(CONVEYOR)))
    data = _conveyor_data()
    del _params(data, "P")["Cz"]
    return with_z, project.from_dict(data)


def test_estimator_realisation_and_recipe_ignore_z():
    with_z, without = _conveyor_with_and_without_z()
    a, b = realize(with_z.block_by_name("est"), with_z), realize(without.block_by_name("est"), without)
    for x, y in zip((a.A, a.B, a.C, a.D), (b.A, b.B, b.C, b.D)):
        assert_allclose(x, y, rtol=0, atol=0)
    assert dict(a.inputs)["y"] == 1  # the measured output only, not y and z
    assert plant_fingerprint(with_z, "P") == plant_fingerprint(without, "P")
    assert stale_blocks(with_z) == []
    a_noise, b_noise = noise_defaults(with_z, "est"), noise_defaults(without, "est")
    assert (a_noise.process_sources, a_noise.measurement_sources) == (("dl",), ("n",))
    assert (a_noise.process_sources, a_noise.measurement_sources) == (b_noise.process_sources, b_noise.measurement_sources)
    for field in ("G", "W", "V"):
        assert_allclose(getattr(a_noise, field), getattr(b_noise, field), rtol=0, atol=0)
    assert a_noise.V.shape == (1, 1)  # measured y only


def test_estimator_gain_designed_with_z_present_is_placed_from_y_alone():
    # python-control 0.10.2 place on the dual pair (A', C') with the recipe's poles: L uses C, never Cz
    with_z, _ = _conveyor_with_and_without_z()
    data = _conveyor_data()
    P = _params(data, "P")
    rec = _params(data, "est")["recipe"]
    poles = [complex(re, im) for re, im in rec["poles"]]
    L_ref = ct.place(np.array(P["A"]).T, np.array(P["C"]).T, poles).T
    L = design_block(with_z, "est").matrix
    assert_allclose(L, L_ref, rtol=1e-7, atol=1e-6)
    assert_allclose(np.array(_params(data, "est")["L"]), L_ref, rtol=1e-7, atol=1e-6)


def test_separation_holds_unchanged_with_z():
    # separation principle (common practice, no source): closed-loop poles = eig(A + B K) and eig(A - L C)
    with_z, without = _conveyor_with_and_without_z()
    a, b = summarize(with_z), summarize(without)
    assert a.separation is not None and a.separation.matches and a.separation.verdict == "holds"
    assert_allclose(np.sort_complex(a.poles), np.sort_complex(b.poles), rtol=1e-10)
    data = _conveyor_data()
    Acl, *_ = _conveyor_closed_loop(data)
    assert_allclose(np.sort_complex(a.poles), np.sort_complex(np.linalg.eigvals(Acl)), rtol=1e-8)


# ---- bad input: one line, block and field named ------------------------------------------
@pytest.mark.parametrize(
    "edit, message, field",
    [
        (lambda p: p.update(Dz=[[1.0]]), "block 'P': Dz (performance feedthrough) needs Cz", "Dz"),
        (lambda p: p.update(Cz=[[1.0, 0.0]]), "block 'P': Cz has 2 columns, expected 4 (the columns of A)", "Cz"),
        (lambda p: p.update(Cz=[[1, 0, -1, 0]], Dz=[[1.0], [2.0]]), "block 'P': Dz has 2 rows, expected 1 (the rows of Cz)", "Dz"),
        (lambda p: p.update(Cz=[[1, 0, -1, 0]], Dz=[[1.0, 2.0]]), "block 'P': Dz has 2 columns, expected 1 (the columns of B)", "Dz"),
        (lambda p: p.update(Cz=[[1, 0, -1, 0]], Fz=[[1.0, 2.0]]), "block 'P': Fz has 2 columns, expected 1 (the columns of E)", "Fz"),
        (lambda p: (p.update(Cz=[[1, 0, -1, 0]], Fz=[[1.0]]), p.pop("E")), "block 'P': Fz (load feedthrough to z) needs E", "Fz"),
        (lambda p: p.update(Cz=[[1, 0, "x", 0]]), "block 'P': Cz is not a numeric matrix", "Cz"),
    ],
    ids=["Dz-without-Cz", "Cz-columns", "Dz-rows", "Dz-columns", "Fz-columns", "Fz-without-E", "Cz-text"],
)
def test_malformed_performance_fields_are_named(edit, message, field):
    data = _conveyor_data()
    data["wires"] = [w for w in data["wires"] if w["from"] != "dl.out"]  # so E may go too
    d = project.from_dict(data)
    params = d.block_by_name("P").params  # edited as code would (the file's schema stops text earlier)
    params.pop("Cz")
    edit(params)
    with pytest.raises(ParameterError) as caught:
        assemble(d)
    assert message in str(caught.value) and caught.value.field == field
    assert list(caught.value.block_ids) == [d.block_by_name("P").id]


def test_performance_output_on_a_transfer_function_or_a_dynamic_block_is_refused():
    d = Diagram()
    d.add_block("plant", "G", {"num": [1.0], "den": [1.0, 1.0], "Cz": [[1.0]]})
    with pytest.raises(ParameterError, match="block 'G': a performance output \\(Cz\\) needs the state-space form"):
        port_widths(d.block_by_name("G"), d)
    d.add_block("dynamic", "C", {"A": [[-1.0]], "B": [[1.0]], "C": [[1.0]], "D": [[0.0]], "Cz": [[1.0]]})
    with pytest.raises(ParameterError, match="block 'C': Cz belongs to a plant's performance output; a dynamic block has none"):
        port_widths(d.block_by_name("C"), d)


def test_a_bad_dz_in_a_file_is_one_line_with_exit_status_2(tmp_path):
    data = _conveyor_data()
    _params(data, "P")["Dz"] = [[1.0, 2.0]]
    path = tmp_path / "bad.lwd"
    path.write_text(json.dumps(data), encoding="utf-8")
    status, _, err = _cli(["check", str(path)])
    assert status == 2 and len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert "block 'P': Dz has 2 columns, expected 1 (the columns of B)" in err


# ---- the file format -----------------------------------------------------------------------
def test_schema_plant_fields_are_the_engines():
    defs = project.schema()["$defs"]
    assert set(defs["plant_params"]["properties"]) == set(PLANT_FIELDS)
    assert defs["plant_params"]["additionalProperties"] is False
    assert set(defs["dynamic_params"]["properties"]) == set(PLANT_FIELDS) - {"E", "F", "Cz", "Dz", "Fz"}


def test_schema_and_loader_agree_on_performance_fields():
    jsonschema = pytest.importorskip("jsonschema")
    validator = jsonschema.Draft202012Validator(project.schema())
    data = _conveyor_data()
    _params(data, "P").update(Dz=[[0.0]], Fz=[[0.0]])
    assert validator.is_valid(data)
    assert project.from_dict(copy.deepcopy(data)).block_by_name("P").params["Fz"] == [[0.0]]
    for kind_edit in ("dynamic", "unknown-field"):
        bad = copy.deepcopy(data)
        if kind_edit == "dynamic":
            bad["blocks"].append({"name": "C2", "kind": "dynamic", "params": {"A": [[-1.0]], "B": [[1.0]], "C": [[1.0]], "D": [[0.0]], "Cz": [[1.0]]}})
        else:
            _params(bad, "P")["Gz"] = [[1.0]]
        assert not validator.is_valid(bad)
        with pytest.raises(ProjectFileError, match="unknown field '(Cz|Gz)'"):
            project.from_dict(bad)


def test_the_sample_round_trips_with_its_performance_output(tmp_path):
    d = project.load(str(sample_path(CONVEYOR)))
    assert d.block_by_name("P").params["Cz"] == [[1.0, 0.0, -1.0, 0.0]]
    path = tmp_path / "again.lwd"
    project.save(d, str(path))
    assert project.load(str(path)).block_by_name("P").params == d.block_by_name("P").params
