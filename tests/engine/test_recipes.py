"""Tests of engine/recipes.py: designing blocks from stored recipes, staleness, Kalman defaults."""
from __future__ import annotations

from importlib import resources

import control as ct
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from diagrams import STAGE, stage_servo as stage_loop
from reference_norms import h2_by_parseval
from loopwright.engine.blocks import plant_matrices
from loopwright.engine.design import normalize_poles, pole_mismatch
from loopwright.engine.diagram import Diagram
from loopwright.engine.errors import DesignError
from loopwright.engine.interconnect import assemble
from loopwright.engine.project import load
from loopwright.engine.recipes import design_block, noise_defaults, redesign, stale_blocks



def test_designed_stage_loop_matches_hand_gains_and_separation_principle():
    # tests/REFERENCES.md#stage-place (hand computation, common practice) (K = [8, 4]) and tests/REFERENCES.md#stage-observer (L = [11, 30]', closed-loop poles).
    d = stage_loop({"method": "place", "poles": [[-2, 2], [-2, -2]]}, {"method": "place", "poles": [-5, -6]})
    out, res = redesign(d)
    assert_allclose(out.block_by_name("Kx").params["K"], [[-8.0, -4.0]], atol=1e-9)  # sign -1 default
    assert_allclose(out.block_by_name("est").params["L"], [[11.0], [30.0]], atol=1e-9)
    assert_allclose(out.block_by_name("Nr").params["K"], [[8.0]], atol=1e-9)  # y/r = 8/(s^2+4s+8)
    model = assemble(out)
    expected = normalize_poles([[-2, 2], [-2, -2], -5, -6], 4)
    assert pole_mismatch(np.linalg.eigvals(model.A), expected) < 1e-8
    # unit DC gain from the reference to the plant output (python-control 0.10.2 dcgain)
    A, B, C, D = model.pair("r", "y")
    assert_allclose(ct.dcgain(ct.ss(A, B, C, D)), 1.0, rtol=1e-10)
    by = {r.block: r for r in res}
    assert [r.block for r in res] == ["Kx", "est", "Nr"]  # feedback, estimator, then feedforward
    assert pole_mismatch(by["Kx"].poles, [-2 + 2j, -2 - 2j]) < 1e-9


@st.composite
def _plants_and_poles(draw):
    n = draw(st.integers(1, 3))
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    A = rng.normal(size=(n, n))
    B = rng.normal(size=(n, 1))
    C = rng.normal(size=(1, n))
    kp = [float(-v) for v in np.sort(rng.uniform(0.5, 3.0, n))]
    lp = [float(-v) for v in np.sort(rng.uniform(4.0, 9.0, n))]
    return A, B, C, kp, lp


@settings(max_examples=25, deadline=None)
@given(_plants_and_poles())
def test_separation_holds_in_assembled_loop_for_random_plants(case):
    # Separation principle (tests/REFERENCES.md#stage-observer, common practice): closed-loop poles of the
    # drawn loop = eig(A - B K) U eig(A - L C).
    A, B, C, kp, lp = case
    for M in (ct.ctrb(A, B), ct.obsv(A, C)):
        sv = np.linalg.svd(M, compute_uv=False)
        if sv[-1] < 1e-2 * sv[0]:
            return
    plant = {"A": A.tolist(), "B": B.tolist(), "C": C.tolist(), "D": [[0.0]]}
    d = stage_loop({"method": "place", "poles": kp}, {"method": "place", "poles": lp}, plant=plant)
    d.remove_block(d.block_by_name("Nr").id)  # a zero at s = 0 would be a legitimate feedforward error here
    d.add_block("source", "r2", {"role": "reference", "width": 1, "waveform": {"kind": "zero"}})
    d.connect("r2.out", "uc.in1")
    out, _ = redesign(d)
    poles = np.linalg.eigvals(assemble(out).A)
    want = np.concatenate([kp, lp])
    assert pole_mismatch(poles, want) < 1e-6 * max(1.0, np.abs(poles).max())


def test_kalman_recipe_takes_intensities_from_the_diagram():
    # tests/REFERENCES.md#tank-kalman (scalar filter Riccati closed form): x' = -x + w, y = x + v, W = 8, V = 1 -> L = 2.
    tank = {"A": [[-1.0]], "B": [[1.0]], "C": [[1.0]], "D": [[0.0]]}
    d = stage_loop({"method": "place", "poles": [-2.0]}, {"method": "kalman"}, plant=tank,
                   disturbance={"kind": "white", "intensity": 8.0, "seed": 1},
                   noise={"kind": "white", "intensity": 1.0, "seed": 2})
    out, results = redesign(d)  # K first (its 1-state shape), then the Kalman filter
    nd = noise_defaults(out, "est")
    assert nd.process_sources == ("dist",) and nd.measurement_sources == ("meas_noise",)
    assert_allclose(nd.G, [[1.0]])
    assert_allclose(nd.W, [[8.0]])
    assert_allclose(nd.V, [[1.0]])
    res = {r.block: r for r in results}["est"]
    assert_allclose(res.matrix, [[2.0]], rtol=1e-9)
    assert_allclose(res.design.riccati, [[2.0]], rtol=1e-9)
    assert any("taken from source(s) dist" in w for w in res.warnings)


def test_estimator_ackermann_recipe_equals_dual_hand_gain():
    # tests/REFERENCES.md#stage-observer (separation principle, derived by hand): (s + 5)(s + 6) on the stage gives L = [11, 30]'; Ackermann on the
    # dual pair (tests/REFERENCES.md#conveyor-ackermann (Ackermann 1972 formula) formula).
    d = stage_loop(None, {"method": "ackermann", "poles": [-5, -6]})
    assert_allclose(design_block(d, "est").matrix, [[11.0], [30.0]], atol=1e-9)


def test_kalman_recipe_with_stated_weights_matches_python_control_lqe():
    # python-control 0.10.2 lqe as reference; G defaults to the plant's B.
    d = stage_loop(None, {"method": "kalman", "W": 4.0, "V": 0.01})
    res = design_block(d, "est")
    L_ct, _, _ = ct.lqe(STAGE["A"], STAGE["B"], STAGE["C"], 4.0, 0.01)
    assert_allclose(res.matrix, L_ct, rtol=1e-8)


def test_lqr_recipe_matches_python_control_lqr_and_applies_sign():
    d = stage_loop({"method": "lqr", "Q": [10.0, 1.0], "R": 0.1, "sign": 1}, None)
    res = design_block(d, "Kx")
    K_ct, _, _ = ct.lqr(STAGE["A"], STAGE["B"], np.diag([10.0, 1.0]), 0.1)
    assert_allclose(res.matrix, K_ct, rtol=1e-9)  # sign +1: the minus sits in the junction


def test_recipe_inputs_are_one_based_and_leave_other_rows_zero():
    two_in = {"A": [[0.0, 1.0], [2.0, -1.0]], "B": [[0.0, 1.0], [1.0, 0.0]], "C": [[1.0, 0.0]], "D": [[0.0, 0.0]]}
    d = Diagram()
    d.add_block("plant", "P", two_in)
    d.add_block("gain", "Kx", {"K": [[0.0, 0.0], [0.0, 0.0]], "recipe": {"method": "place", "plant": "P", "poles": [-3, -4], "inputs": [2]}})
    res = design_block(d, "Kx")
    assert_allclose(res.matrix[0], [0.0, 0.0])
    A, B = np.array(two_in["A"]), np.array(two_in["B"])
    assert pole_mismatch(np.linalg.eigvals(A + B @ res.matrix), [-3, -4]) < 1e-9


def test_stale_blocks_follow_plant_and_recipe_changes():
    d = stage_loop({"method": "place", "poles": [[-2, 2], [-2, -2]]}, {"method": "place", "poles": [-5, -6]})
    assert stale_blocks(d) == ["est", "Kx", "Nr"]  # never designed
    out, _ = redesign(d)
    assert stale_blocks(out) == []
    changed = out.copy()
    p = changed.block_by_name("P")
    changed.set_params(p.id, {**p.params, "A": [[0.0, 1.0], [0.0, -0.5]]})
    assert stale_blocks(changed) == ["est", "Kx", "Nr"]
    retuned = out.copy()
    k = retuned.block_by_name("Kx")
    retuned.set_params(k.id, {**k.params, "recipe": {**k.params["recipe"], "poles": [-3, -4]}})
    assert stale_blocks(retuned) == ["Kx"]  # Nr follows Kx's matrix, which has not changed yet
    again, res = redesign(retuned, ["Kx"])
    assert [r.block for r in res] == ["Kx", "Nr"]  # the feedforward follows its feedback gain
    assert stale_blocks(again) == []


@pytest.mark.parametrize(
    "k_recipe, message",
    [
        ({"method": "place"}, "needs 'poles'"),
        ({"method": "guess", "poles": [-1, -2]}, "method 'guess' is not one of"),
        ({"method": "place", "poles": [-1, -2], "colour": 3}, "recipe key\\(s\\) colour unknown"),
        ({"method": "place", "poles": [-1, -2], "sign": 2}, "sign must be 1 or -1"),
        ({"method": "place", "poles": [-1, -2], "inputs": [0]}, "outside 1..1"),
        ({"method": "place", "poles": [-1, [-2, 1]]}, "without its conjugate"),
        ({"method": "lqr", "Q": [[1.0, 0.0], [0.0, -1.0]], "R": 1.0}, "Q: must be positive semidefinite"),
    ],
    ids=["missing-poles", "unknown-method", "unknown-key", "bad-sign", "input-out-of-range", "no-conjugate", "indefinite-Q"],
)
def test_bad_recipes_raise_design_error_naming_the_block(k_recipe, message):
    d = stage_loop(k_recipe, None)
    with pytest.raises(DesignError, match=message) as info:
        design_block(d, "Kx")
    assert str(info.value).startswith("block 'Kx'")
    assert d.block_by_name("Kx").id in info.value.block_ids


def test_gain_without_plant_or_estimator_feed_asks_for_plant():
    d = Diagram()
    d.add_block("gain", "Kx", {"K": [[1.0]], "recipe": {"method": "place", "poles": [-1]}})
    with pytest.raises(DesignError, match="does not say which plant"):
        design_block(d, "Kx")


def test_kalman_without_noise_sources_or_weights_is_explained():
    d = stage_loop(None, {"method": "kalman"})
    with pytest.raises(DesignError, match="no W and no white-noise source"):
        design_block(d, "est")


def test_slow_estimator_and_noisy_measurement_give_warnings():
    d = stage_loop({"method": "place", "poles": [-5, -6]}, {"method": "place", "poles": [-6, -7]},
                   disturbance={"kind": "white", "intensity": 1e-6, "seed": 1},
                   noise={"kind": "white", "intensity": 1.0, "seed": 2})
    _, res = redesign(d)
    by = {r.block: r for r in res}
    assert any("faster than the controller" in w for w in by["est"].warnings)
    assert any("sensor noise dominates" in w for w in by["Kx"].warnings)
    quiet = stage_loop({"method": "place", "poles": [-5, -6]}, {"method": "place", "poles": [-20, -30]},
                       disturbance={"kind": "white", "intensity": 1.0, "seed": 1},
                       noise={"kind": "white", "intensity": 1e-8, "seed": 2})
    _, res = redesign(quiet)
    assert all(not r.warnings for r in res)


def test_redesign_leaves_its_input_untouched():
    d = stage_loop({"method": "place", "poles": [[-2, 2], [-2, -2]]}, {"method": "place", "poles": [-5, -6]})
    before = d.copy()
    redesign(d)
    assert d == before


@pytest.mark.parametrize("sample", ["conveyor_flexible_drive.lwd", "levitated_rotor_axis.lwd", "two_zone_oven.lwd"])
def test_samples_are_designed_and_their_recipes_reproduce_their_gains(sample):
    path = resources.files("loopwright.samples") / sample
    d = load(str(path))
    assert stale_blocks(d) == []
    out, res = redesign(d)
    for r in res:
        key = "K" if r.kind == "gain" else "L"
        old = np.array(d.block_by_name(r.block).params[key])
        assert_allclose(r.matrix, old, rtol=1e-9, atol=1e-9 * np.abs(old).max())


def test_oven_sample_gains_agree_with_python_control():
    # python-control 0.10.2 lqr / lqe on the oven plant with the recipe's weights.
    d = load(str(resources.files("loopwright.samples") / "two_zone_oven.lwd"))
    A, B, C, D = plant_matrices(d, "P")
    rec_k = d.block_by_name("K").params["recipe"]
    K_ct, _, _ = ct.lqr(A, B, np.diag(rec_k["Q"]), rec_k["R"] * np.eye(2))
    assert_allclose(-np.array(d.block_by_name("K").params["K"]), K_ct, rtol=1e-8)
    rec_l = d.block_by_name("est").params["recipe"]
    V = np.diag([0.01, 0.01])  # the noise source's intensity, traced by noise_defaults
    L_ct, _, _ = ct.lqe(A, np.array(rec_l["G"]), C, np.array(rec_l["W"]), V)
    assert_allclose(np.array(d.block_by_name("est").params["L"]), L_ct, rtol=1e-8)


def test_noise_dominance_warning_reports_rms_equal_to_h2_norm_times_sqrt_intensity():
    # RMS of a white-noise-driven path = sqrt(W) * ||G||_2 (tests/REFERENCES.md#greenhouse-noise (closed form W/(2a))
    # conventions); ||G||_2 from Parseval's integral (closed form, tests/reference_norms.py).
    import re

    d = stage_loop({"method": "place", "poles": [-5, -6]}, {"method": "place", "poles": [-6, -7]},
                   disturbance={"kind": "white", "intensity": 0.04, "seed": 1},
                   noise={"kind": "white", "intensity": 0.25, "seed": 2})
    out, res = redesign(d)
    msg = next(w for w in {r.block: r for r in res}["Kx"].warnings if "dominates" in w)
    rms_noise, rms_other = (float(v) for v in re.findall(r"RMS ([0-9.eE+-]+) from noise sources vs ([0-9.eE+-]+)", msg)[0])
    model = assemble(out)
    h2 = {src: h2_by_parseval(*model.pair(src, "u_fb")[:3]) for src in ("meas_noise", "dist")}
    assert_allclose(rms_noise, 0.5 * h2["meas_noise"], rtol=1e-3)  # message rounds to 4 digits
    assert_allclose(rms_other, 0.2 * h2["dist"], rtol=1e-3)


def test_integral_recipe_designs_both_gains_and_the_loop_rejects_a_constant_load():
    # Stage of tests/REFERENCES.md#stage-place (hand computation, common practice) with integral action on the measured position; by hand
    # (see test_tracking): poles {-2, -2 +- 2j} give K_x = [16, 6], K_i = -16. With the
    # estimator at {-5, -6} the drawn loop has exactly those poles (separation principle).
    from loopwright.engine.tracking import add_integral_action

    d = stage_loop({"method": "place", "poles": [-2, [-2, 2], [-2, -2]],
                    "integral": {"block": "integral_gain", "outputs": [1]}},
                   {"method": "place", "poles": [-5, -6]})
    d.remove_block(d.block_by_name("Nr").id)
    # the reference now enters through the integrator only; uc.in1 gets a zero feedforward
    d.add_block("gain", "r_pass", {"K": [[0.0]]})
    d.connect("r_pass.out", "uc.in1")
    d.connect("r.out", "r_pass.in")
    d = add_integral_action(d, [[0.0]], reference="ref", measured="y", actuator_sum="uc")
    out, res = redesign(d)
    assert_allclose(out.block_by_name("Kx").params["K"], [[-16.0, -6.0]], atol=1e-9)
    assert_allclose(out.block_by_name("integral_gain").params["K"], [[16.0]], atol=1e-9)
    model = assemble(out)
    want = normalize_poles([-2, [-2, 2], [-2, -2], -5, -6], 5)
    assert pole_mismatch(np.linalg.eigvals(model.A), want) < 1e-8
    dc = lambda src: (lambda A, B, C, D: C @ np.linalg.solve(-A, B) + D)(*model.pair(src, "y"))
    assert_allclose(dc("r"), [[1.0]], rtol=1e-10)
    assert_allclose(dc("dist"), [[0.0]], atol=1e-12)
    assert stale_blocks(out) == []
