"""Tests of engine/design.py: K and L by pole placement, Ackermann, LQR and Kalman."""
from __future__ import annotations

import control as ct
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from loopwright.engine.design import (
    ackermann_gain,
    check_weight,
    estimator_speed_warning,
    kalman_gain,
    lqr_gain,
    noise_dominance_warning,
    normalize_poles,
    place_estimator,
    place_state_feedback,
    pole_mismatch,
    poles_to_json,
    uncontrollable_modes,
    unobservable_modes,
)
from loopwright.engine.errors import DesignError

STAGE_A = [[0.0, 1.0], [0.0, 0.0]]
STAGE_B = [[0.0], [1.0]]
CONVEYOR_A = [[0.0, 1.0, 0.0], [0.0, -2.0, 4.0], [0.0, -1.0, -10.0]]
CONVEYOR_B = [[0.0], [0.0], [5.0]]

# (A, B, poles, method, expected K, tolerance, source)
PLACEMENT_CASES = [
    (STAGE_A, STAGE_B, [[-2, 2], [-2, -2]], "place", [[8.0, 4.0]], 1e-9, "tests/REFERENCES.md#stage-place (hand computation, common practice)"),
    (STAGE_A, STAGE_B, [[-2, 2], [-2, -2]], "ackermann", [[8.0, 4.0]], 1e-9, "tests/REFERENCES.md#stage-place (hand computation, common practice)"),
    (CONVEYOR_A, CONVEYOR_B, [-4, -5, -6], "place", [[6.0, 2.2, 0.6]], 1e-9, "tests/REFERENCES.md#conveyor-ackermann (Ackermann 1972 formula)"),
    (CONVEYOR_A, CONVEYOR_B, [-4, -5, -6], "ackermann", [[6.0, 2.2, 0.6]], 1e-9, "tests/REFERENCES.md#conveyor-ackermann (Ackermann 1972 formula)"),
]


@pytest.mark.parametrize(
    "A, B, poles, method, K_expected, tol, source", PLACEMENT_CASES, ids=[f"{c[6]}-{c[3]}" for c in PLACEMENT_CASES]
)
def test_place_state_feedback_matches_reference_gain(A, B, poles, method, K_expected, tol, source):
    res = place_state_feedback(A, B, poles, method=method)
    assert_allclose(res.gain, K_expected, atol=tol)
    want = normalize_poles(poles, len(A))
    assert pole_mismatch(res.poles, want) < 1e-9
    assert_allclose(res.gain_norm, np.linalg.norm(K_expected, 2), rtol=1e-9)


def test_place_state_feedback_agrees_with_python_control_place_on_two_input_plant():
    # python-control 0.10.2 `place` (same KNV / Tits-Yang algorithm, via scipy) as reference.
    A = np.array([[0.0, 1.0, 0.0, 0.0], [-3.0, -0.2, 1.0, 0.0], [0.0, 0.0, 0.0, 1.0], [1.0, 0.0, -2.0, -0.1]])
    B = np.array([[0.0, 0.0], [1.0, 0.0], [0.0, 0.0], [0.0, 1.0]])
    poles = [-1.0, -2.0, [-1.5, 1.0], [-1.5, -1.0]]
    res = place_state_feedback(A, B, poles)
    K_ct = ct.place(A, B, normalize_poles(poles, 4))
    assert_allclose(res.gain, K_ct, rtol=1e-6, atol=1e-8)
    assert pole_mismatch(np.linalg.eigvals(A - B @ res.gain), normalize_poles(poles, 4)) < 1e-9


def test_ackermann_gain_agrees_with_python_control_acker():
    # python-control 0.10.2 `acker` as reference, tests/REFERENCES.md#conveyor-ackermann (Ackermann 1972 formula) system.
    K = ackermann_gain(np.array(CONVEYOR_A), np.array(CONVEYOR_B), np.array([-4.0, -5.0, -6.0]))
    assert_allclose(K, np.atleast_2d(ct.acker(CONVEYOR_A, CONVEYOR_B, [-4, -5, -6])), atol=1e-9)


def test_place_on_subset_of_inputs_leaves_other_rows_zero():
    A = np.array([[0.0, 1.0], [2.0, -1.0]])
    B = np.array([[0.0, 1.0], [1.0, 0.0]])
    res = place_state_feedback(A, B, [-3, -4], inputs=[0])
    assert_allclose(res.gain[1], [0.0, 0.0], atol=0)
    assert pole_mismatch(np.linalg.eigvals(A - B @ res.gain), [-3, -4]) < 1e-9


@st.composite
def _controllable_plants(draw):
    n = draw(st.integers(1, 4))
    m = draw(st.integers(1, 2))
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    A = rng.normal(size=(n, n))
    B = rng.normal(size=(n, m))
    re = -np.sort(rng.uniform(0.5, 5.0, size=n))
    poles = list(re)
    if n >= 2 and draw(st.booleans()):
        im = float(rng.uniform(0.2, 3.0))
        poles[0], poles[1] = [float(re[0]), im], [float(re[0]), -im]
    return A, B, poles


@settings(max_examples=40, deadline=None)
@given(_controllable_plants())
def test_placed_poles_equal_the_request_on_random_controllable_plants(case):
    # Property: eig(A - B K) equals the request (definition of pole placement).
    A, B, poles = case
    sv = np.linalg.svd(ct.ctrb(A, B), compute_uv=False)
    if sv[-1] < 1e-3 * sv[0]:
        return  # nearly uncontrollable draws: placement is ill-posed, not what is tested here
    res = place_state_feedback(A, B, poles)
    want = normalize_poles(poles, A.shape[0])
    assert pole_mismatch(np.linalg.eigvals(A - B @ res.gain), want) < 1e-6 * max(1, res.gain_norm)


@settings(max_examples=30, deadline=None)
@given(_controllable_plants())
def test_placed_estimator_poles_equal_the_request_on_random_observable_plants(case):
    # Property on the dual pair: eig(A - L C) equals the request.
    A, Bt, poles = case
    C = Bt.T
    sv = np.linalg.svd(ct.obsv(A, C), compute_uv=False)
    if sv[-1] < 1e-3 * sv[0]:
        return
    res = place_estimator(A, C, poles)
    want = normalize_poles(poles, A.shape[0])
    assert pole_mismatch(np.linalg.eigvals(A - res.gain @ C), want) < 1e-6 * max(1, res.gain_norm)


# (A, B, Q, R, expected K, expected P, closed-loop pole, source)
LQR_CASES = [
    ([[1.0]], [[1.0]], [[3.0]], [[1.0]], [[3.0]], [[3.0]], [-2.0], "tests/REFERENCES.md#reactor-lqr (scalar Riccati closed form; Safonov and Athans 1977)"),
]


@pytest.mark.parametrize("A, B, Q, R, K_expected, P_expected, pole, source", LQR_CASES, ids=[c[-1] for c in LQR_CASES])
def test_lqr_gain_matches_scalar_closed_form(A, B, Q, R, K_expected, P_expected, pole, source):
    res = lqr_gain(A, B, Q, R)
    assert_allclose(res.gain, K_expected, rtol=1e-9)
    assert_allclose(res.riccati, P_expected, rtol=1e-9)
    assert_allclose(res.poles.real, pole, atol=1e-9)


def test_lqr_gain_agrees_with_python_control_lqr_including_cross_term():
    # python-control 0.10.2 `lqr(A, B, Q, R, N)` as reference.
    A = np.array(CONVEYOR_A)
    B = np.array(CONVEYOR_B)
    Q = np.diag([10.0, 1.0, 0.1])
    R = np.array([[0.5]])
    N = np.array([[0.1], [0.0], [0.05]])
    res = lqr_gain(A, B, Q, R, N=N)
    K_ct, P_ct, E_ct = ct.lqr(A, B, Q, R, N)
    assert_allclose(res.gain, K_ct, rtol=1e-8)
    assert_allclose(res.riccati, P_ct, rtol=1e-8)
    assert pole_mismatch(res.poles, E_ct) < 1e-8


def test_lqr_with_diagonal_given_as_flat_list_equals_full_matrix():
    a = lqr_gain(CONVEYOR_A, CONVEYOR_B, [10.0, 1.0, 0.1], 0.5)
    b = lqr_gain(CONVEYOR_A, CONVEYOR_B, np.diag([10.0, 1.0, 0.1]), [[0.5]])
    assert_allclose(a.gain, b.gain, rtol=1e-12)


def test_kalman_gain_matches_scalar_closed_form():
    # tests/REFERENCES.md#tank-kalman (scalar filter Riccati closed form): a = -1, c = 1, W = 8, V = 1 -> L = 2, P = 2, pole -3.
    res = kalman_gain([[-1.0]], [[1.0]], [[8.0]], [[1.0]], G=[[1.0]])
    assert_allclose(res.gain, [[2.0]], rtol=1e-9)
    assert_allclose(res.riccati, [[2.0]], rtol=1e-9)
    assert_allclose(res.poles.real, [-3.0], atol=1e-9)


def test_kalman_gain_agrees_with_python_control_lqe():
    # python-control 0.10.2 `lqe(A, G, C, QN, RN)` as reference.
    A = np.array(CONVEYOR_A)
    G = np.array([[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]])
    C = np.array([[1.0, 0.0, 0.0], [0.0, 0.0, 1.0]])
    W = np.array([[2.0, 0.3], [0.3, 1.0]])
    V = np.diag([0.01, 0.05])
    res = kalman_gain(A, C, W, V, G=G)
    L_ct, P_ct, E_ct = ct.lqe(A, G, C, W, V)
    assert_allclose(res.gain, L_ct, rtol=1e-8)
    assert_allclose(res.riccati, P_ct, rtol=1e-8)
    assert pole_mismatch(res.poles, E_ct) < 1e-8


def test_kalman_gain_defaults_noise_input_to_plant_b():
    a = kalman_gain(CONVEYOR_A, [[1.0, 0.0, 0.0]], [[4.0]], [[0.1]], B=CONVEYOR_B)
    b = kalman_gain(CONVEYOR_A, [[1.0, 0.0, 0.0]], [[4.0]], [[0.1]], G=CONVEYOR_B)
    assert_allclose(a.gain, b.gain)


def test_place_estimator_on_stage_matches_hand_computation():
    # tests/REFERENCES.md#stage-observer (separation principle, derived by hand): det(sI - A + L C) = (s + 5)(s + 6) gives L = [11, 30]'.
    res = place_estimator(STAGE_A, [[1.0, 0.0]], [-5, -6])
    assert_allclose(res.gain, [[11.0], [30.0]], atol=1e-9)


# ---- checks: each a DesignError naming the cause ---------------------------------------
def test_uncontrollable_mode_is_named_by_its_eigenvalue():
    # Second state is decoupled from the input: mode at s = -3 cannot be moved (PBH test,
    # common practice, no source).
    A = [[-1.0, 0.0], [0.0, -3.0]]
    B = [[1.0], [0.0]]
    assert uncontrollable_modes(A, B) == [complex(-3.0)]
    with pytest.raises(DesignError, match=r"uncontrollable mode\(s\) at s = -3"):
        place_state_feedback(A, B, [-4, -5])


def test_unobservable_mode_is_named_by_its_eigenvalue():
    A = [[-1.0, 0.0], [0.0, 2.0]]
    C = [[1.0, 0.0]]
    assert unobservable_modes(A, C) == [complex(2.0)]
    with pytest.raises(DesignError, match=r"unobservable mode\(s\) at s = 2"):
        place_estimator(A, C, [-4, -5])
    with pytest.raises(DesignError, match="not stabilisable"):
        kalman_gain(A, C, 1.0, 1.0, G=[[1.0], [1.0]])


def test_lqr_accepts_stable_uncontrollable_mode_and_rejects_unstable_one():
    stable = lqr_gain([[1.0, 0.0], [0.0, -3.0]], [[1.0], [0.0]], np.eye(2), 1.0)
    assert np.max(stable.poles.real) < 0
    with pytest.raises(DesignError, match="not stabilisable.*s = 3"):
        lqr_gain([[1.0, 0.0], [0.0, 3.0]], [[1.0], [0.0]], np.eye(2), 1.0)


@pytest.mark.parametrize(
    "poles, n, m, message",
    [
        ([-1, -2], 3, 1, "2 poles requested, the plant has 3 states"),
        ([[-1, 2], -3], 2, 1, r"complex pole -1\+2j is listed without its conjugate"),
        ([-2, -2, -3], 3, 1, "requested 2 times"),
        (["a", -1], 2, 1, "entry 1"),
    ],
    ids=["wrong-count", "missing-conjugate", "repeated-beyond-inputs", "malformed-entry"],
)
def test_bad_pole_requests_are_rejected_with_the_cause(poles, n, m, message):
    with pytest.raises(DesignError, match=message):
        normalize_poles(poles, n, what="controller poles", max_multiplicity=m)


def test_repeated_pole_allowed_when_enough_inputs():
    A = np.array([[0.0, 1.0], [0.0, 0.0]])
    res = place_state_feedback(A, np.eye(2), [-2, -2])
    assert_allclose(np.linalg.eigvals(A - res.gain), [-2, -2], atol=1e-8)


@pytest.mark.parametrize(
    "Q, R, message",
    [
        ([[1.0, 2.0], [0.0, 1.0]], 1.0, "Q: must be symmetric"),
        ([[1.0, 0.0], [0.0, -1.0]], 1.0, "Q: must be positive semidefinite"),
        (np.eye(2), 0.0, "R: must be positive definite"),
        (np.eye(3), 1.0, "Q: is 3x3, expected 2x2"),
    ],
    ids=["asymmetric-Q", "indefinite-Q", "singular-R", "wrong-size-Q"],
)
def test_bad_lqr_weights_are_rejected_by_name(Q, R, message):
    with pytest.raises(DesignError, match=message):
        lqr_gain(STAGE_A, STAGE_B, Q, R)


def test_lqr_without_stabilising_solution_is_reported():
    # An undamped oscillator the weight Q does not see: no stabilising Riccati solution
    # (detectability of (Q, A) fails; common practice, no source).
    A = [[0.0, 1.0, 0.0], [-1.0, 0.0, 0.0], [0.0, 0.0, -1.0]]
    B = [[0.0], [1.0], [1.0]]
    with pytest.raises(DesignError, match="no stabilising solution"):
        lqr_gain(A, B, np.diag([0.0, 0.0, 1.0]), 1.0)


def test_estimator_speed_warning_follows_rule_of_thumb():
    # 2-6x faster estimator: common practice, no source.
    assert estimator_speed_warning([-2, -3], [-10, -12]) is None
    msg = estimator_speed_warning([-2, -3], [-3, -4])
    assert msg is not None and "1.5x faster" in msg


def test_noise_dominance_warning_only_when_noise_part_is_larger():
    assert noise_dominance_warning(0.1, 1.0, signal="u") is None
    assert "dominates the control signal 'u'" in noise_dominance_warning(2.0, 1.0, signal="u")


def test_check_weight_scalar_means_scaled_identity():
    assert_allclose(check_weight(2.0, "Q", 3, definite=True), 2.0 * np.eye(3))


def test_poles_to_json_writes_complex_as_pairs():
    assert poles_to_json([-1.0, -2 + 3j, -2 - 3j]) == [-1.0, [-2.0, 3.0], [-2.0, -3.0]]


def test_discrete_lqr_agrees_with_python_control_dlqr_on_sampled_conveyor():
    # python-control 0.10.2 dlqr as reference, on the tests/REFERENCES.md#conveyor-ackermann conveyor sampled by ZOH at 10 ms.
    from loopwright.engine.design import discrete_lqr_gain
    from loopwright.engine.discretize import discretize

    dm = discretize(CONVEYOR_A, CONVEYOR_B, np.eye(3), np.zeros((3, 1)), 0.01)
    Q, R, N = np.diag([10.0, 1.0, 0.1]), np.array([[0.5]]), np.array([[0.05], [0.0], [0.01]])
    res = discrete_lqr_gain(dm.A, dm.B, Q, R, N=N)
    K_ct, P_ct, E_ct = ct.dlqr(dm.A, dm.B, Q, R, N)
    assert_allclose(res.gain, K_ct, rtol=1e-8)
    assert_allclose(res.riccati, P_ct, rtol=1e-8)
    assert pole_mismatch(res.poles, E_ct) < 1e-10
    assert np.max(np.abs(res.poles)) < 1.0


def test_discrete_lqr_scalar_closed_form():
    # x[k+1] = a x + b u, q, r: P = q + a^2 P - a^2 b^2 P^2/(r + b^2 P); with a = 2, b = 1,
    # q = r = 1: P^2 - 4P - 1 = 0, P = 2 + sqrt(5), K = 2P/(1 + P) (common practice, no source).
    from loopwright.engine.design import discrete_lqr_gain

    res = discrete_lqr_gain([[2.0]], [[1.0]], 1.0, 1.0)
    P = 2 + np.sqrt(5)
    assert_allclose(res.riccati, [[P]], rtol=1e-12)
    assert_allclose(res.gain, [[2 * P / (1 + P)]], rtol=1e-12)


def test_fragile_placement_is_reported_as_a_warning_with_the_gap():
    # Twenty real poles with two inputs: the closed loop is so non-normal that rounding
    # moves its eigenvalues visibly; the design reports the gap instead of hiding it.
    rng = np.random.default_rng(0)
    A = rng.normal(size=(20, 20))
    B = rng.normal(size=(20, 2))
    res = place_state_feedback(A, B, -np.arange(1.0, 21.0))
    assert any("differ from the request" in w for w in res.warnings)
    assert pole_mismatch(res.poles, -np.arange(1.0, 21.0)) > 1e-6 * 20


@pytest.mark.parametrize("scale", [1e-3, 1.0, 1e4])
def test_pbh_test_is_invariant_to_time_scaling(scale):
    # Scaling time by a factor scales A, B and every mode alike; controllability does not
    # change (common practice, no source). The decoupled mode sits at -3 * scale.
    A = scale * np.array([[-1.0, 2.0, 0.0], [0.0, -2.0, 0.0], [0.0, 0.0, -3.0]])
    B = scale * np.array([[0.0], [1.0], [0.0]])
    modes = uncontrollable_modes(A, B)
    assert len(modes) == 1
    assert_allclose(modes[0], -3.0 * scale, rtol=1e-12)
    assert uncontrollable_modes(A[:2, :2], B[:2]) == []


def test_estimator_ackermann_agrees_with_python_control_acker_on_dual():
    # python-control 0.10.2 acker on the dual pair (A', C') as reference; conveyor of
    # tests/REFERENCES.md#conveyor-ackermann (Ackermann 1972 formula) measuring belt position.
    C = np.array([[1.0, 0.0, 0.0]])
    res = place_estimator(CONVEYOR_A, C, [-10, -11, -12], method="ackermann")
    L_ct = np.atleast_2d(ct.acker(np.array(CONVEYOR_A).T, C.T, [-10, -11, -12])).T
    assert_allclose(res.gain, L_ct, rtol=1e-9)
    with pytest.raises(DesignError, match="single measured output"):
        place_estimator(CONVEYOR_A, np.eye(3)[:2], [-10, -11, -12], method="ackermann")
