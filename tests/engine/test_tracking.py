"""Tests of engine/tracking.py: feedforward gain and integral action."""
from __future__ import annotations

import control as ct
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from loopwright.engine.design import normalize_poles, pole_mismatch
from loopwright.engine.errors import DesignError
from loopwright.engine.tracking import (
    add_integral_action,
    design_integral_action,
    feedforward_gain,
    integral_augmentation,
)

STAGE = ([[0.0, 1.0], [0.0, 0.0]], [[0.0], [1.0]], [[1.0, 0.0]], [[0.0]])
CONVEYOR = ([[0.0, 1.0, 0.0], [0.0, -2.0, 4.0], [0.0, -1.0, -10.0]], [[0.0], [0.0], [5.0]], [[1.0, 0.0, 0.0]], [[0.0]])


def _closed_loop_dc(A, B, C, D, K, N):
    A, B, C, D, K, N = (np.atleast_2d(np.asarray(M, dtype=float)) for M in (A, B, C, D, K, N))
    sys = ct.ss(A - B @ K, B @ N, C - D @ K, D @ N)
    return np.atleast_2d(ct.dcgain(sys))


# (plant, K, expected N, source)
FEEDFORWARD_CASES = [
    # Stage of tests/REFERENCES.md#stage-place with K = [8, 4]: y/r = N/(s^2 + 4 s + 8), so N = 8 (hand computation).
    (STAGE, [[8.0, 4.0]], [[8.0]], "tests/REFERENCES.md#stage-place (hand computation, common practice)"),
    # Conveyor of tests/REFERENCES.md#conveyor-ackermann, K = [6, 2.2, 0.6]: closed-loop DC gain 20 N/120 must be 1, N = 6.
    (CONVEYOR, [[6.0, 2.2, 0.6]], [[6.0]], "tests/REFERENCES.md#conveyor-ackermann (Ackermann 1972 formula), by hand"),
]


@pytest.mark.parametrize("plant, K, N_expected, source", FEEDFORWARD_CASES, ids=[c[-1] for c in FEEDFORWARD_CASES])
def test_feedforward_gain_matches_hand_value_and_gives_unit_dc_gain(plant, K, N_expected, source):
    N = feedforward_gain(*plant, K)
    assert_allclose(N, N_expected, rtol=1e-10)
    # python-control 0.10.2 dcgain of the closed loop as the outside check.
    assert_allclose(_closed_loop_dc(*plant, K, N), [[1.0]], rtol=1e-10)


def test_feedforward_gain_for_two_input_two_output_plant_gives_identity_dc_gain():
    rng = np.random.default_rng(7)
    A = rng.normal(size=(4, 4)) - 3 * np.eye(4)
    B = rng.normal(size=(4, 2))
    C = rng.normal(size=(2, 4))
    D = 0.1 * rng.normal(size=(2, 2))
    K = ct.place(A, B, [-1, -2, -3, -4])
    N = feedforward_gain(A, B, C, D, K)
    assert_allclose(_closed_loop_dc(A, B, C, D, K, N), np.eye(2), atol=1e-10)


def test_feedforward_gain_rejects_plant_with_zero_at_origin():
    # P(s) = s/(s + 1): a zero at s = 0, a constant output cannot be held (common practice, no source).
    with pytest.raises(DesignError, match="zero at s = 0"):
        feedforward_gain([[-1.0]], [[1.0]], [[-1.0]], [[1.0]], [[2.0]])


def test_feedforward_gain_rejects_more_outputs_than_inputs():
    with pytest.raises(DesignError, match="2 outputs to track but only 1 input"):
        feedforward_gain(*STAGE[:2], np.eye(2), np.zeros((2, 1)), [[8.0, 4.0]])


def test_integral_augmentation_structure():
    Aa, Ba = integral_augmentation(*STAGE)
    assert_allclose(Aa, [[0, 1, 0], [0, 0, 0], [-1, 0, 0]])
    assert_allclose(Ba, [[0], [1], [0]])


def test_integral_action_places_augmented_poles_and_rejects_constant_load():
    # Stage of tests/REFERENCES.md#stage-place with integral action: closed-loop poles as requested, and a constant
    # force disturbance gives zero steady-state position error (common practice, no source).
    A, B, C, D = (np.asarray(M, dtype=float) for M in STAGE)
    poles = [-2.0, [-2.0, 2.0], [-2.0, -2.0]]
    res = design_integral_action(A, B, C, D, method="place", poles=poles)
    Aa, Ba = integral_augmentation(A, B, C, D)
    Acl = Aa - Ba @ np.hstack([res.K_x, res.K_i])
    assert pole_mismatch(np.linalg.eigvals(Acl), normalize_poles(poles, 3)) < 1e-9
    # By hand: det(sI - Aa + Ba K) = s^3 + k2 s^2 + k1 s - ki, so (s+2)(s^2+4s+8) gives
    # k1 = 16, k2 = 6, ki = -16.
    assert_allclose(res.K_x, [[16.0, 6.0]], atol=1e-9)
    assert_allclose(res.K_i, [[-16.0]], atol=1e-9)
    # disturbance d at the plant input, r = 0: DC gain d -> y must vanish
    sys = ct.ss(Acl, np.vstack([B, [[0.0]]]), np.hstack([C, [[0.0]]]), [[0.0]])
    assert abs(ct.dcgain(sys)) < 1e-12
    assert len(res.pieces) == 5


def test_integral_action_lqr_matches_python_control_lqr_on_augmented_plant():
    A, B, C, D = (np.asarray(M, dtype=float) for M in CONVEYOR)
    Q = np.diag([1.0, 0.1, 0.1, 5.0])
    res = design_integral_action(A, B, C, D, method="lqr", Q=Q, R=[[0.2]])
    Aa, Ba = integral_augmentation(A, B, C, D)
    K_ct, _, _ = ct.lqr(Aa, Ba, Q, [[0.2]])
    assert_allclose(np.hstack([res.K_x, res.K_i]), K_ct, rtol=1e-8)


def test_integral_action_on_plant_with_zero_at_origin_names_the_mode():
    with pytest.raises(DesignError, match="uncontrollable mode"):
        design_integral_action([[-1.0]], [[1.0]], [[-1.0]], [[1.0]], method="place", poles=[-1, -2])


def test_add_integral_action_draws_the_pieces_and_the_loop_tracks_with_zero_error():
    from loopwright.engine.diagram import Diagram
    from loopwright.engine.interconnect import assemble

    # Stage of tests/REFERENCES.md#stage-place with both states measured (demo data), K_x = [16, 6], K_i = -16.
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0}})
    d.add_block("source", "load", {"role": "disturbance", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0}})
    d.add_block("plant", "P", {"A": STAGE[0], "B": STAGE[1], "C": [[1.0, 0.0], [0.0, 1.0]], "D": [[0.0], [0.0]]})
    d.add_block("gain", "Kx", {"K": [[-16.0, -6.0]]})
    d.add_block("gain", "pos", {"K": [[1.0, 0.0]]})
    d.add_block("sum", "up", {"signs": ["+", "+"], "width": 1})
    d.connect("Kx.out", "up.in1", name="u_cmd")
    d.connect("load.out", "up.in2", name="load_force")
    d.connect("up.out", "P.u", name="u")
    d.connect("P.y", "Kx.in", name="x_meas")
    d.connect("P.y", "pos.in")
    out = add_integral_action(d, [[-16.0]], reference="r.out", measured="pos.out", actuator_sum="up")
    assert {"integral_error", "integral_state", "integral_gain"} <= {b.name for b in out.blocks.values()}
    assert d.block_by_name("up").params["signs"] == ["+", "+"]  # the input diagram is untouched
    assert out.block_by_name("up").params["signs"] == ["+", "+", "+"]
    model = assemble(out)
    assert pole_mismatch(np.linalg.eigvals(model.A), normalize_poles([-2.0, [-2.0, 2.0], [-2.0, -2.0]], 3)) < 1e-9
    dc = lambda src: (lambda A, B, C, D: C @ np.linalg.solve(-A, B) + D)(*model.pair(src, "pos.out"))
    assert_allclose(dc("r"), [[1.0]], rtol=1e-10)  # y -> r for a step reference
    assert_allclose(dc("load"), [[0.0]], atol=1e-12)  # a constant load is rejected


def test_add_integral_action_rejects_unknown_signal_and_non_sum_block():
    from loopwright.engine.diagram import Diagram
    from loopwright.engine.errors import DiagramError, UnknownNameError

    d = Diagram()
    d.add_block("source", "r")
    d.add_block("gain", "g", {"K": [[1.0]]})
    with pytest.raises(UnknownNameError):
        add_integral_action(d, [[1.0]], reference="nope", measured="g.out", actuator_sum="g")
    with pytest.raises(DiagramError, match="not a summing junction"):
        add_integral_action(d, [[1.0]], reference="r.out", measured="g.out", actuator_sum="g")


@settings(max_examples=30, deadline=None)
@given(st.integers(0, 2**32 - 1), st.integers(1, 4), st.integers(1, 2))
def test_feedforward_gives_identity_dc_gain_on_random_square_plants(seed, n, m):
    # Property: with u = -K x + N r the closed-loop DC gain r -> y is I (definition of N);
    # python-control 0.10.2 dcgain as the outside evaluation.
    rng = np.random.default_rng(seed)
    A = rng.normal(size=(n, n))
    B = rng.normal(size=(n, m))
    C = rng.normal(size=(m, n))
    D = rng.normal(size=(m, m)) * 0.1
    if np.linalg.svd(ct.ctrb(A, B), compute_uv=False)[-1] < 1e-3:
        return
    K = ct.place(A, B, -np.arange(1, n + 1, dtype=float)) if m <= n else np.zeros((m, n))
    if np.linalg.svd(np.block([[A, B], [C, D]]), compute_uv=False)[-1] < 1e-6:
        return
    N = feedforward_gain(A, B, C, D, K)
    dc = _closed_loop_dc(A, B, C, D, K, N)
    assert_allclose(dc, np.eye(m), atol=1e-7 * max(1.0, np.abs(N).max()))
