"""Tests of engine/lumped.py: lumped controller, plant path, sampled-loop margins."""
from __future__ import annotations

from importlib import resources

import control as ct
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from loopwright.engine.diagram import Diagram
from loopwright.engine.errors import AnalysisError, ConnectionError_, DesignError, UnknownNameError
from loopwright.engine.lumped import (
    controller_transfer_function,
    lumped_controller,
    plant_path,
    sampled_loop_margins,
)
from loopwright.engine.margins import loop_transfer, margins_at
from loopwright.engine.project import load
from loopwright.engine.recipes import redesign

from diagrams import sample_path, stage_servo as stage_loop


def _designed_stage():
    d = stage_loop({"method": "place", "poles": [[-2, 2], [-2, -2]]}, {"method": "place", "poles": [-5, -6]})
    return redesign(d)[0]


def _freq(A, B, C, D, s):
    A, B, C, D = (np.atleast_2d(np.asarray(M, dtype=float)) for M in (A, B, C, D))
    if A.shape[0] == 0:
        return D.astype(complex)
    return C @ np.linalg.solve(s * np.eye(A.shape[0]) - A, B) + D


def test_stage_controller_matches_hand_transfer_function():
    # tests/REFERENCES.md#stage-observer (separation principle, derived by hand): u = -(208 s + 240)/(s^2 + 15 s + 82) y.
    k = lumped_controller(_designed_stage(), measured=["y_meas"], actuator=["u"])
    assert k.state_names == ("est.xhat1", "est.xhat2")
    tf = controller_transfer_function(k)
    assert_allclose(tf["num"], [-208.0, -240.0], rtol=1e-10)
    assert_allclose(tf["den"], [1.0, 15.0, 82.0], rtol=1e-10)
    assert_allclose(tf["zeros"], [-240.0 / 208.0], rtol=1e-10)
    assert_allclose(np.sort_complex(tf["poles"]), np.sort_complex(np.roots([1, 15, 82])), rtol=1e-10)


@st.composite
def _observer_loops(draw):
    n = draw(st.integers(1, 3))
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    A = rng.normal(size=(n, n))
    B = rng.normal(size=(n, 1))
    C = rng.normal(size=(1, n))
    D = rng.normal(size=(1, 1)) * draw(st.sampled_from([0.0, 0.3]))
    K = rng.normal(size=(1, n))
    L = rng.normal(size=(n, 1))
    return A, B, C, D, K, L


@settings(max_examples=30, deadline=None)
@given(_observer_loops())
def test_lumped_observer_controller_equals_textbook_formula(case):
    # Identity: for u = -K xhat the drawn map y -> u is -K (sI - A + BK + LC - LDK)^-1 L
    # (common practice, no source; derived in the lumped module docstring).
    A, B, C, D, K, L = case
    plant = {"A": A.tolist(), "B": B.tolist(), "C": C.tolist(), "D": D.tolist()}
    d = stage_loop(None, None, plant=plant)
    d.set_params(d.block_by_name("est").id, {"plant": "P", "L": L.tolist()})
    d.set_params(d.block_by_name("Kx").id, {"K": (-K).tolist()})
    d.set_params(d.block_by_name("Nr").id, {"K": [[1.0]]})
    k = lumped_controller(d, measured=["y_meas"], actuator=["u"])
    Ac = A - B @ K - L @ C + L @ D @ K
    for s in (0.3j, 2.0 + 1.0j, 7.0j):
        want = -K @ np.linalg.solve(s * np.eye(A.shape[0]) - Ac, L)
        assert_allclose(_freq(k.A, k.B, k.C, k.D, s), want, rtol=1e-8, atol=1e-10)
    assert k.A.shape[0] == A.shape[0]  # the plant's states were pruned, the estimator's kept


def test_plant_path_of_stage_is_the_plant():
    p = plant_path(_designed_stage(), actuator=["u"], measured=["y_meas"])
    assert p.A.shape == (2, 2)
    assert_allclose(_freq(p.A, p.B, p.C, p.D, 1.5j), 1.0 / (1.5j) ** 2, rtol=1e-12)


def test_loop_from_lumped_parts_equals_loop_break_at_actuator():
    # L = -G_c P must equal the diagram's own loop break at u (margins.loop_transfer); as in
    # tests/REFERENCES.md#stage-observer (separation principle, derived by hand) the estimator reads the command u_c, so a break at u opens the
    # plant input only.
    d = _designed_stage()
    k = lumped_controller(d, measured=["y_meas"], actuator=["u"])
    p = plant_path(d, actuator=["u"], measured=["y_meas"])
    Lb = loop_transfer(d, "u")
    for s in (0.2j, 3.0j, 40.0j):
        assert_allclose(-_freq(k.A, k.B, k.C, k.D, s) @ _freq(p.A, p.B, p.C, p.D, s), _freq(*Lb, s), rtol=1e-9)


def test_sampled_margins_of_stage_match_python_control_and_converge_to_continuous():
    # Continuous margins: tests/REFERENCES.md#stage-observer (separation principle, derived by hand) (gm 4.665310651, pm 38.48828081 deg,
    # delay margin 0.2516967597 s). Sampled: python-control 0.10.2 sample_system +
    # stability_margins on the discrete loop as reference.
    d = _designed_stage()
    res = sampled_loop_margins(d, measured=["y_meas"], actuator="u", ts=0.02, method="zoh")
    assert_allclose(res.continuous.gain_upper, 4.665310651, rtol=1e-7)
    assert_allclose(res.continuous.phase_margin_deg, 38.48828081, rtol=1e-7)
    assert_allclose(res.continuous.delay_margin_s, 0.2516967597, rtol=1e-7)
    Kc = ct.ss(*[np.atleast_2d(M) for M in (res.controller.A, res.controller.B, res.controller.C, res.controller.D)], 0.02)
    Pd = ct.ss(res.plant.A, res.plant.B, res.plant.C, res.plant.D, 0.02)
    gm, pm, _, _, _, _ = ct.stability_margins(ct.ss2tf(-Kc * Pd), method="poly")
    assert_allclose(res.sampled.gain_upper, gm, rtol=1e-5)
    assert_allclose(res.sampled.phase_margin_deg, pm, rtol=1e-5)
    assert res.delta["phase_margin_deg"] < 0 and res.delta["gain_upper_db"] < 0
    fine = sampled_loop_margins(d, measured=["y_meas"], actuator="u", ts=1e-4, method="tustin")
    assert abs(fine.delta["phase_margin_deg"]) < 0.05
    assert abs(fine.delta["delay_margin_s"]) < 2e-4


def test_sampled_plant_is_zoh_of_plant_path():
    # tests/REFERENCES.md#stage-place (hand computation, common practice) stage, ZOH of 1/s^2: Ad = [[1, T], [0, 1]], Bd = [T^2/2, T]
    # (common practice, no source).
    res = sampled_loop_margins(_designed_stage(), measured=["y_meas"], actuator="u", ts=0.1)
    T = 0.1
    tf_d = ct.ss2tf(ct.ss(res.plant.A, res.plant.B, res.plant.C, res.plant.D, T))
    ref = ct.ss2tf(ct.ss([[1, T], [0, 1]], [[T * T / 2], [T]], [[1, 0]], [[0]], T))
    z = np.exp(0.7j)
    assert_allclose(tf_d(z), ref(z), rtol=1e-10)


def test_levitated_rotor_sample_controller_is_stable_loop_with_two_sided_gain_margin():
    # Open-loop unstable plant (pole at +63 rad/s, demo data): finite lower gain margin.
    # Independent values (tests/independent.py: eigenvalues of the loop scaled by g, scipy
    # 1.17.1 brentq): gain factors 0.30249489825 (at 0 rad/s) and 2.4829646189 (306.22 rad/s),
    # phase margin 26.97694618 deg at 124.2778107 rad/s.
    import json

    from independent import gain_margin_factor, phase_margin, rotor_sample_parts

    path = resources.files("loopwright.samples") / "levitated_rotor_axis.lwd"
    parts = rotor_sample_parts(json.loads(path.read_text(encoding="utf-8")))
    d = load(str(path))
    res = sampled_loop_margins(d, measured=["y_meas"], actuator="u", ts=1e-4)
    assert res.continuous.closed_loop_stable and res.sampled.closed_loop_stable
    g_lo, _ = gain_margin_factor(*parts, 0.05, 0.99)
    g_hi, w_hi = gain_margin_factor(*parts, 1.01, 20.0)
    pm, wc = phase_margin(*parts, 50.0, 200.0)
    assert_allclose(res.continuous.gain_lower, g_lo, rtol=1e-8)
    assert_allclose(res.continuous.gain_upper, g_hi, rtol=1e-8)
    assert_allclose(res.continuous.gain_upper_w_rad_s, w_hi, rtol=1e-7)
    assert_allclose(res.continuous.phase_margin_deg, pm, rtol=1e-8)
    assert_allclose(res.continuous.delay_margin_s, np.radians(pm) / wc, rtol=1e-8)
    assert abs(res.delta["phase_margin_deg"]) < 1.0


def test_vector_controller_of_oven_sample_has_two_inputs_two_outputs():
    d = load(str(resources.files("loopwright.samples") / "two_zone_oven.lwd"))
    k = lumped_controller(d, measured=["y_meas"], actuator=["u"])
    assert k.input_names == ("y_meas[1]", "y_meas[2]") and k.output_names == ("u[1]", "u[2]")
    with pytest.raises(DesignError, match="one input and one output"):
        controller_transfer_function(k)


@pytest.mark.parametrize(
    "measured, actuator, error, message",
    [
        (["nope"], ["u"], UnknownNameError, "no signal called 'nope'"),
        (["u"], ["u"], DesignError, "both an input and an output"),
        (["est.yhat"], ["u"], DesignError, "feeds no block"),
        (["y_meas[1]"], ["u"], DesignError, "'y_meas\\[1\\]' is one component of signal 'y_meas'; name whole signals"),
        (["y_meas"], ["u[1]"], DesignError, "'u\\[1\\]' is one component of signal 'u'"),
        ([], ["u"], DesignError, "name at least one input signal"),
    ],
    ids=["unknown-signal", "same-signal", "unused-signal", "measured-component", "actuator-component", "none-measured"],
)
def test_bad_controller_signals_are_rejected(measured, actuator, error, message):
    with pytest.raises(error, match=message):
        lumped_controller(_designed_stage(), measured=measured, actuator=actuator)


def test_sampled_margins_of_a_vector_actuator_are_loop_at_a_time():
    # the two-zone oven sample: channel i broken with the other closed, continuous part equal to
    # the loop-break analysis at P.u; a fast sampler barely moves it (common practice, no source)
    d = load(sample_path("two_zone_oven.lwd"))
    ref = margins_at(d, "P.u")
    for ch in (0, 1):
        cmp_ = sampled_loop_margins(d, measured=["y_meas"], actuator="u", ts=0.01, channel=ch)
        assert_allclose(cmp_.continuous.phase_margin_deg, ref.per_channel[ch].phase_margin_deg, rtol=1e-6)
        assert abs(cmp_.delta["phase_margin_deg"]) < 0.5
    with pytest.raises(AnalysisError, match="channel 3 does not exist"):
        sampled_loop_margins(d, measured=["y_meas"], actuator="u", ts=0.01, channel=2)


def test_controller_may_read_the_reference_for_its_feedforward():
    # levitated-rotor sample: u = N r - K xhat; the reference column's feedthrough is N = 3750
    # (the sample's feedforward gain), the measured column has none (common practice, no source)
    d = load(sample_path("levitated_rotor_axis.lwd"))
    k = lumped_controller(d, measured=["y_meas", "r"], actuator=["u"])
    assert k.input_names == ("y_meas", "r")
    assert_allclose(k.D, [[0.0, 3750.0]], atol=1e-9)
    assert k.A.shape == (3, 3)


def _rotor_redesigned():
    # levitated-rotor sample (demo data) with the estimator made slower at one pole and the
    # state feedback moved to -100 +- 50j, -150
    import copy

    d = load(sample_path("levitated_rotor_axis.lwd"))
    for name, poles in (("est", [-400, -350, -200.7]), ("K", [[-100, 50], [-100, -50], -150])):
        b = d.block_by_name(name)
        params = copy.deepcopy(b.params)
        params["recipe"]["poles"] = poles
        d.set_params(b.id, params)
    return redesign(d)[0]


def _sampled_loop_reference(k, p, ts):
    """python-control 0.10.2: ZOH of the lumped controller and of the plant path, L_d = -K_d P_d."""
    kd = ct.sample_system(ct.ss(k.A, k.B, k.C, k.D), ts, method="zoh")
    pd = ct.sample_system(ct.ss(p.A, p.B, p.C, p.D), ts, method="zoh")
    return -kd * pd


def _closed_loop_stable(loop, g) -> bool:
    return bool(np.max(np.abs(ct.feedback(g * loop, 1).poles())) < 1.0)


@pytest.mark.parametrize("ts", [2e-4, 1e-4, 5e-5], ids=["ts-2e-4", "ts-1e-4", "ts-5e-5"])
def test_sampled_lower_gain_of_loop_around_unstable_plant_is_set_at_dc(ts):
    # The plant is open-loop unstable, so the sampled loop cannot stay stable down to gain 0.
    # Closed form: ZOH keeps DC gains (L_d(z=1) = L(s=0)), so the lower gain factor of the
    # sampled loop is -1/L(0), the continuous one. Reference: python-control 0.10.2
    # sample_system + feedback, closed-loop poles of g L_d just below and above the factor.
    d = _rotor_redesigned()
    res = sampled_loop_margins(d, measured=["y_meas"], actuator="u", ts=ts)
    k = lumped_controller(d, measured=["y_meas"], actuator=["u"])
    p = plant_path(d, actuator=["u"], measured=["y_meas"])
    dc = -(_freq(k.A, k.B, k.C, k.D, 0.0) @ _freq(p.A, p.B, p.C, p.D, 0.0))[0, 0].real
    assert_allclose(res.continuous.gain_lower, -1.0 / dc, rtol=1e-9)
    assert_allclose(res.sampled.gain_lower, -1.0 / dc, rtol=1e-9)
    assert res.sampled.gain_lower_w_rad_s == 0.0
    loop = _sampled_loop_reference(k, p, ts)
    g_lo, g_hi = res.sampled.gain_lower, res.sampled.gain_upper
    assert not _closed_loop_stable(loop, 0.98 * g_lo) and _closed_loop_stable(loop, 1.02 * g_lo)
    assert _closed_loop_stable(loop, 0.98 * g_hi) and not _closed_loop_stable(loop, 1.02 * g_hi)


def test_sampled_gain_margin_at_the_nyquist_frequency_is_found():
    # Proportional control of an integrator plant 1/s with gain k, ZOH at period T: closed
    # form L_d(z) = k T / (z - 1); the closed-loop pole z = 1 - g k T leaves the unit circle
    # through z = -1 at g = 2 / (k T), i.e. at the Nyquist frequency pi / T.
    k, T = 50.0, 0.01
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1})
    d.add_block("sum", "err", {"signs": ["+", "-"], "width": 1})
    d.add_block("gain", "Kp", {"K": [[k]]})
    d.add_block("plant", "P", {"A": [[0.0]], "B": [[1.0]], "C": [[1.0]], "D": [[0.0]]})
    d.connect("r.out", "err.in1", name="r")
    d.connect("err.out", "Kp.in", name="e")
    d.connect("Kp.out", "P.u", name="u")
    d.connect("P.y", "err.in2", name="y")
    res = sampled_loop_margins(d, measured=["y"], actuator="u", ts=T)
    assert res.sampled.closed_loop_stable
    assert_allclose(res.sampled.gain_upper, 2.0 / (k * T), rtol=1e-9)
    assert_allclose(res.sampled.gain_upper_w_rad_s, np.pi / T, rtol=1e-12)
    assert res.continuous.gain_upper == np.inf
    # python-control 0.10.2: the closed-loop pole crosses the unit circle at that factor
    loop = _sampled_loop_reference(lumped_controller(d, measured=["y"], actuator=["u"]),
                                   plant_path(d, actuator=["u"], measured=["y"]), T)
    assert _closed_loop_stable(loop, 0.99 * res.sampled.gain_upper)
    assert not _closed_loop_stable(loop, 1.01 * res.sampled.gain_upper)


def test_default_loop_signals_are_read_off_the_estimator():
    # levitated-rotor sample (demo data): the estimator reads y_meas, its plant P is driven by u
    from loopwright.engine.lumped import default_loop_signals

    d = load(sample_path("levitated_rotor_axis.lwd"))
    assert default_loop_signals(d) == (["y_meas"], ["u"])
    d.add_block("estimator", "est2", {"plant": "P", "L": [[1.0], [1.0], [1.0]]})
    with pytest.raises(DesignError, match="has 2 estimators; name the controller's measured and actuator signals"):
        default_loop_signals(d)


def test_the_lumped_controller_assembles_only_the_cut_copy(monkeypatch):
    # the names are resolved on the diagram itself: one assembly (of the copy with the cut),
    # not a second one of the whole diagram first
    from loopwright.engine import interconnect
    from diagrams import gain_chain

    gains = [1.0, -0.5, 2.0] * 50
    d = gain_chain(gains)
    made = []
    real = interconnect._assemble
    monkeypatch.setattr(interconnect, "_assemble", lambda dd, **k: made.append(len(dd.blocks)) or real(dd, **k))
    k = lumped_controller(d, measured=["ym"], actuator=["u"])
    assert made == [len(d.blocks) + 1]  # the copy, with its one new source in place of ym's driver
    # closed form: the controller from ym to u is the static gain -g_0 ... g_{N-1} (e = r - ym)
    g = float(np.prod(gains))
    assert k.A.shape == (0, 0) and k.input_names == ("ym",) and k.output_names == ("u",)
    assert_allclose(k.D, [[-g]], rtol=1e-14)
    # a diagram that does not assemble is named as before, by the checked route
    d.remove_wire(d.wire_by_name("y").id)
    made.clear()
    with pytest.raises(ConnectionError_, match="input ym.in1 is not connected"):
        lumped_controller(d, measured=["ym"], actuator=["u"])
