"""Tests of engine/responses.py: frequency responses, grids and time runs."""
from __future__ import annotations

import control as ct
import numpy as np
import pytest
import scipy.linalg as sla
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from diagrams import stage_loop_named
from loopwright.engine.diagram import Diagram
from loopwright.engine.errors import ParameterError, UnknownNameError
from loopwright.engine.interconnect import assemble
from loopwright.engine.responses import (
    auto_frequency_grid,
    discretise,
    frequency_response,
    impulse_response,
    initial_response,
    initial_state,
    magnitude_db,
    phase_deg,
    reduce_model,
    reduced_response,
    refine_grid_at_peaks,
    simulate,
    source_inputs,
    source_run,
    step_response,
)


def _stable_system(seed: int, n: int, m: int, p: int, *, with_d: bool = True):
    rng = np.random.default_rng(seed)
    A = rng.standard_normal((n, n))
    A -= (np.max(np.linalg.eigvals(A).real) + rng.uniform(0.1, 1.0)) * np.eye(n)
    B = rng.standard_normal((n, m))
    C = rng.standard_normal((p, n))
    D = rng.standard_normal((p, m)) if with_d else np.zeros((p, m))
    return A, B, C, D


# ---- frequency response -------------------------------------------------------------


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 10_000), n=st.integers(1, 7), m=st.integers(1, 3), p=st.integers(1, 3))
def test_frequency_response_matches_python_control_on_random_stable_systems(seed, n, m, p):
    # python-control 0.10.2 evaluates (jw I - A)^-1 B per frequency: an outside reference
    A, B, C, D = _stable_system(seed, n, m, p)
    w = np.logspace(-2, 3, 40)
    ours = frequency_response(A, B, C, D, w)
    ref = np.moveaxis(ct.ss(A, B, C, D)(1j * w, squeeze=False), 2, 0)
    assert ours.shape == (w.size, p, m)
    assert_allclose(ours, ref, rtol=1e-8, atol=1e-12 * np.abs(ref).max())


@pytest.mark.parametrize(
    "A, B, C, D, w, expected, source",
    [
        ([[-2.0]], [[1.0]], [[1.0]], [[0.0]], 2.0, 0.25 - 0.25j, "1/(s+2) at w=2 by hand, common practice, no source"),
        ([[0.0, 1.0], [-25.0, -2.0]], [[0.0], [1.0]], [[25.0, 0.0]], [[0.0]], 5.0, -2.5j, "25/(s^2+2s+25) at w=wn is 1/(2 zeta j); tests/REFERENCES.md#lag-and-resonator-h2 (closed form) system"),
        ([[-1.0]], [[1.0]], [[-1.0]], [[1.0]], 1.0, 0.5 + 0.5j, "s/(s+1) at w=1 by hand, common practice, no source"),
    ],
)
def test_frequency_response_hand_values(A, B, C, D, w, expected, source):
    assert_allclose(frequency_response(A, B, C, D, [w])[0, 0, 0], expected, rtol=1e-12)


def test_frequency_response_reuses_one_reduction_across_paths():
    A, B, C, D = _stable_system(3, 12, 3, 2)
    red = reduce_model(A)
    w = np.logspace(-1, 2, 25)
    full = frequency_response(A, B, C, D, w, reduced=red)
    for j in range(3):
        one = frequency_response(A, B[:, [j]], C, D[:, [j]], w, reduced=red)
        assert_allclose(one[:, :, 0], full[:, :, j], rtol=1e-12)


def test_frequency_response_agrees_with_python_control_on_a_large_loop():
    # 300 states, chained lightly damped sections: stresses balancing and the blocked solve
    rng = np.random.default_rng(5)
    n = 300
    A = rng.standard_normal((n, n)) / np.sqrt(n) - 1.2 * np.eye(n)
    B = rng.standard_normal((n, 2))
    C = rng.standard_normal((1, n))
    w = np.logspace(-2, 2, 15)
    ours = frequency_response(A, B, C, np.zeros((1, 2)), w)
    ref = np.moveaxis(ct.ss(A, B, C, np.zeros((1, 2)))(1j * w, squeeze=False), 2, 0)
    assert_allclose(ours, ref, rtol=1e-8)


def test_frequency_response_at_a_pole_on_the_axis_is_infinite_not_an_error():
    G = frequency_response([[0.0]], [[1.0]], [[1.0]], [[0.0]], [0.0, 1.0])
    assert not np.isfinite(G[0, 0, 0])
    assert_allclose(G[1, 0, 0], -1j, rtol=1e-14)


def test_magnitude_db_and_unwrapped_phase_of_a_triple_lag():
    # 1/(s+1)^3: phase passes -180 deg at sqrt(3) rad/s and tends to -270 deg (common practice, no source)
    A = [[-1, 0, 0], [1, -1, 0], [0, 1, -1]]
    w = np.logspace(-2, 3, 400)
    G = frequency_response(A, [[1], [0], [0]], [[0, 0, 1]], [[0]], w)
    ph = phase_deg(G)[:, 0, 0]
    assert_allclose(ph, -3 * np.degrees(np.arctan(w)), atol=1e-9)
    assert_allclose(magnitude_db(G)[:, 0, 0], -30 * np.log10(1 + w**2), atol=1e-9)


# ---- automatic grid -----------------------------------------------------------------


@pytest.mark.parametrize("zeta", [0.2, 0.01, 0.001, 1e-4])
def test_auto_grid_never_misses_a_lightly_damped_peak(zeta):
    # peak of wn^2/(s^2 + 2 zeta wn s + wn^2) is 1/(2 zeta sqrt(1 - zeta^2)) (tests/REFERENCES.md#resonator-peak (closed form) formula)
    wn = 37.0
    A = np.array([[0.0, 1.0], [-wn * wn, -2 * zeta * wn]])
    B, C, D = np.array([[0.0], [1.0]]), np.array([[wn * wn, 0.0]]), np.zeros((1, 1))
    w = auto_frequency_grid(np.linalg.eigvals(A))
    mag = np.abs(frequency_response(A, B, C, D, w)[:, 0, 0])
    true_peak = 1 / (2 * zeta * np.sqrt(1 - zeta * zeta))
    assert mag.max() >= 0.995 * true_peak
    w2, g2 = refine_grid_at_peaks(lambda x: np.abs(frequency_response(A, B, C, D, x)[:, 0, 0]), w, mag)
    assert_allclose(g2.max(), true_peak, rtol=1e-8)
    assert np.all(np.diff(w2) > 0)


def test_auto_grid_spans_two_decades_beyond_the_dynamics():
    w = auto_frequency_grid([-0.5, -200.0])
    # closed form of the grid's documented rule (our convention, not an outside value):
    # 0.5 / 100 and 200 * 100 rad/s
    assert_allclose([w[0], w[-1]], [0.5 / 100, 200.0 * 100], rtol=1e-9)


# ---- time responses -----------------------------------------------------------------


def test_step_response_of_second_order_servo_matches_closed_form():
    # tests/REFERENCES.md#winder-step (second-order closed forms): T(s) = 4/(s^2 + 2 s + 4)
    A = [[0.0, 1.0], [-4.0, -2.0]]
    B, C, D = [[0.0], [4.0]], [[1.0, 0.0]], [[0.0]]
    t = np.linspace(0.0, 3.0, 3001)
    y = step_response(A, B, C, D, t).y[:, 0, 0]
    for tk, yk in [(0.5, 0.3402998466), (1.0, 0.8494256349), (2.0, 1.153122768), (3.0, 1.002289494)]:
        assert_allclose(y[int(round(tk * 1000))], yk, atol=1e-8)  # tests/REFERENCES.md#winder-step (second-order closed forms)
    t_long = np.linspace(0.0, 10.0, 200001)
    y_long = step_response(A, B, C, D, t_long).y[:, 0, 0]
    assert_allclose(y_long.max(), 1.163033535, atol=1e-9)  # tests/REFERENCES.md#winder-step peak value
    assert_allclose(t_long[np.argmax(y_long)], 1.813799364, atol=1e-4)  # tests/REFERENCES.md#winder-step peak time (grid 5e-5 s)


@settings(max_examples=15, deadline=None)
@given(seed=st.integers(0, 10_000), n=st.integers(1, 5), m=st.integers(1, 2), p=st.integers(1, 2))
def test_step_and_impulse_match_python_control(seed, n, m, p):
    A, B, C, D = _stable_system(seed, n, m, p)
    t = np.linspace(0.0, 5.0, 501)
    ours = step_response(A, B, C, D, t).y
    ref = ct.step_response(ct.ss(A, B, C, D), t).outputs  # (p, m, N)
    ref = np.asarray(ref).reshape(p, m, -1)
    assert_allclose(ours, np.moveaxis(ref, 2, 0), atol=1e-9 * max(1.0, np.abs(ref).max()))
    ours_i = impulse_response(A, B, C, np.zeros_like(D), t).y
    ref_i = np.asarray(ct.impulse_response(ct.ss(A, B, C, 0 * D), t).outputs).reshape(p, m, -1)
    assert_allclose(ours_i, np.moveaxis(ref_i, 2, 0), atol=1e-9 * max(1.0, np.abs(ref_i).max()))


def test_first_order_hold_matches_python_control_forced_response():
    # python-control 0.10.2 forced_response holds inputs linearly between samples
    A, B, C, D = _stable_system(11, 4, 2, 1)
    t = np.linspace(0.0, 4.0, 401)
    U = np.column_stack([np.sin(3 * t), np.maximum(t - 1, 0.0)])
    ours = simulate(A, B, C, D, t, U, foh_columns=[0, 1]).y[:, 0]
    ref = np.ravel(ct.forced_response(ct.ss(A, B, C, D), t, U.T).outputs)
    assert_allclose(ours, ref, atol=1e-9)


def test_ramp_through_an_integrator_is_exact_with_first_order_hold():
    # y = t^2/2 for a unit ramp into 1/s, common practice, no source
    t = np.linspace(0.0, 2.0, 11)
    y = simulate([[0.0]], [[1.0]], [[1.0]], [[0.0]], t, t[:, None], foh_columns=[0]).y[:, 0]
    assert_allclose(y, t**2 / 2, atol=1e-13)
    y_zoh = simulate([[0.0]], [[1.0]], [[1.0]], [[0.0]], t, t[:, None]).y[:, 0]
    assert abs(y_zoh[-1] - 2.0) > 0.1  # zero-order hold of a ramp lags by half a step


def test_discretise_zero_order_hold_matches_block_exponential():
    A = np.array([[0.0, 1.0], [-3.0, -0.5]])
    B = np.array([[0.0], [2.0]])
    Phi, G0, G1 = discretise(A, B, 0.1)
    assert_allclose(Phi, sla.expm(A * 0.1), rtol=1e-13)
    assert_allclose(G0, np.linalg.solve(A, (Phi - np.eye(2)) @ B), rtol=1e-11)
    assert_allclose(G1, 0.0)


def test_unstable_run_stops_with_a_warning_flag_not_overflow():
    t = np.linspace(0.0, 1000.0, 10001)
    res = initial_response([[1.0]], [[1.0]], [1.0], t)
    assert res.diverged
    assert "grows without bound" in res.message
    assert res.t[-1] < 300.0  # e^t passes 1e100 near t = 230 s
    assert np.all(np.isfinite(res.y))


def test_time_grid_must_be_uniform():
    with pytest.raises(ParameterError):
        simulate([[-1.0]], [[1.0]], [[1.0]], [[0.0]], [0.0, 0.1, 0.3])



def _held_run_step_by_step(monkeypatch, fn, *args):
    """The run as it was computed before held inputs were doubled: one step at a time."""
    import loopwright.engine.responses as responses

    with monkeypatch.context() as mp:
        mp.setattr(responses, "_doubling_pays", lambda *a: False)
        mp.setattr(responses, "_cheapest_block", lambda *a: (0, np.inf))
        return fn(*args)


def _count_calls(monkeypatch, name):
    import loopwright.engine.responses as responses

    calls = []
    real = getattr(responses, name)
    monkeypatch.setattr(responses, name, lambda *a, **k: calls.append(1) or real(*a, **k))
    return calls


@pytest.mark.parametrize("sample", ["conveyor_flexible_drive", "levitated_rotor_axis", "two_zone_oven"])
def test_a_held_input_is_run_by_doubling_with_the_answers_of_single_steps(sample, monkeypatch):
    # a step, an impulse and a free response hold their input for the whole run: the states
    # come from log2 N products of powers of the step's matrix instead of N single steps.
    # Oracles: the step-by-step run (the previous method) and python-control 0.10.2
    # step_response / impulse_response (its own exact discretisation)
    from loopwright.engine.project import load
    from loopwright.engine.views_data import time_grid
    from pathlib import Path

    model = assemble(load(Path(__file__).resolve().parents[2] / "samples" / f"{sample}.lwd"))
    t = time_grid(model.diagram, model)
    cols = slice(0, min(2, model.B.shape[1]))
    A, B, C, D = model.A, model.B[:, cols], model.C[:4], np.asarray(model.D[:4])[:, cols]
    step_calls = _count_calls(monkeypatch, "_states_step_by_step")
    doubled = _count_calls(monkeypatch, "_states_by_doubling")
    lifted = _count_calls(monkeypatch, "_outputs_in_blocks")
    runs = [step_response(A, B, C, D, t), impulse_response(A, B, C, D, t), initial_response(A, C, B[:, 0], t)]
    # outputs only: doubling or the lifted run, whichever an operation count says costs less
    assert len(doubled) + len(lifted) == 3 and step_calls == []
    singles = [_held_run_step_by_step(monkeypatch, step_response, A, B, C, D, t),
               _held_run_step_by_step(monkeypatch, impulse_response, A, B, C, D, t),
               _held_run_step_by_step(monkeypatch, initial_response, A, C, B[:, 0], t)]
    assert len(step_calls) == 3
    for ours, single in zip(runs, singles):
        assert not ours.diverged and ours.y.shape == single.y.shape
        assert_allclose(ours.y, single.y, rtol=0, atol=1e-11 * np.abs(single.y).max())
    sys_ = ct.ss(A, B, C, D)
    ref = np.moveaxis(np.asarray(ct.step_response(sys_, t).outputs).reshape(C.shape[0], B.shape[1], -1), 2, 0)
    assert_allclose(runs[0].y, ref, rtol=0, atol=1e-9 * np.abs(ref).max())  # python-control 0.10.2 step_response
    ref_i = np.moveaxis(np.asarray(ct.impulse_response(ct.ss(A, B, C, 0 * D), t).outputs).reshape(C.shape[0], B.shape[1], -1), 2, 0)
    assert_allclose(runs[1].y, ref_i, rtol=0, atol=1e-9 * np.abs(ref_i).max())  # python-control 0.10.2 impulse_response


def test_a_growing_mode_the_input_never_reaches_leaves_the_held_run_finite(monkeypatch):
    # diag(-1, +5) with the input and output on the first state only: the unstable mode is
    # never excited, so the step response is 1 - e^{-t} (closed form) to the end, although
    # the powers of the step's matrix overflow long before (e^{5 t} at t = 200 s): doubling
    # gives way to single steps there instead of reading 0 * inf as a diverged run
    A, B, C, D = np.diag([-1.0, 5.0]), [[1.0], [0.0]], [[1.0, 0.0]], [[0.0]]
    t = np.linspace(0.0, 200.0, 4001)
    step_calls = _count_calls(monkeypatch, "_states_step_by_step")
    block_calls = _count_calls(monkeypatch, "_outputs_in_blocks")
    res = step_response(A, B, C, D, t)
    assert len(step_calls) + len(block_calls) == 1  # doubling gave way
    assert not res.diverged
    assert_allclose(res.y[:, 0, 0], 1.0 - np.exp(-t), atol=1e-13)  # closed form 1 - e^{-t}


def test_a_diverging_held_run_stops_where_single_steps_stop(monkeypatch):
    # an unstable loop driven by a step: the run stops at the first sample past the limit,
    # the same sample whichever way the states were computed (x' = x + u: x = e^t - 1,
    # closed form, passes 1e100 near t = 230 s)
    t = np.linspace(0.0, 1000.0, 10001)
    ours = step_response([[1.0]], [[1.0]], [[1.0]], [[0.0]], t)
    single = _held_run_step_by_step(monkeypatch, step_response, [[1.0]], [[1.0]], [[1.0]], [[0.0]], t)
    assert ours.diverged and single.diverged
    assert ours.t.size == single.t.size and 225.0 < ours.t[-1] < 235.0
    assert_allclose(ours.y[:, 0, 0], np.expm1(ours.t), rtol=1e-9)  # closed form e^t - 1

# ---- diagram-driven runs ------------------------------------------------------------


def _white_lag_diagram(W: float, seed: int, a: float = 0.5) -> Diagram:
    d = Diagram()
    d.add_block("source", "w", {"role": "disturbance", "width": 1, "waveform": {"kind": "white", "intensity": W, "seed": seed}})
    d.add_block("plant", "P", {"A": [[-a]], "B": [[1.0]], "C": [[1.0]], "D": [[0.0]]})
    d.connect("w.out", "P.u", name="gust")
    return d


def test_white_noise_samples_have_variance_w_over_dt_and_are_reproducible():
    d = _white_lag_diagram(0.04, seed=3)
    model = assemble(d)
    t = np.arange(200_001) * 0.01
    U1, foh = source_inputs(model, t)
    U2, _ = source_inputs(model, t)
    col = model.inputs["w"].start
    assert foh == []
    assert_allclose(U1, U2)  # same seed, same samples
    assert_allclose(U1[:, col].var(), 0.04 / 0.01, rtol=0.02)  # W/dt (sampling error ~0.3 %)


def test_white_noise_run_reaches_the_discrete_stationary_variance():
    # tests/REFERENCES.md#greenhouse-noise (closed form W/(2a)): x' = -0.5 x + w, W = 0.04.
    # The run holds each noise sample over its step, so with the same samples the exact
    # recursion x[k+1] = phi x[k] + gamma u[k], phi = exp(-a dt), gamma = (1 - phi)/a, gives
    # the run sample by sample (closed form, scipy 1.17.1 lfilter); its stationary variance
    # gamma^2 (W/dt)/(1 - phi^2) tends to W/(2a) = 0.04 as dt -> 0.
    from scipy.signal import lfilter

    d = _white_lag_diagram(0.04, seed=11)
    model = assemble(d)
    dt = 0.05
    t = np.arange(400_001) * dt
    res = source_run(model, t, outputs=["P.y"])
    u = source_inputs(model, t)[0][:, model.inputs["w"].start]
    phi = np.exp(-0.5 * dt)
    gamma = (1 - phi) / 0.5
    x = np.concatenate([[0.0], lfilter([gamma], [1.0, -phi], u)[:-1]])
    assert_allclose(res.y[:, 0], x, rtol=1e-9, atol=1e-12)
    expected = gamma**2 * (0.04 / dt) / (1 - phi**2)
    assert_allclose(res.y[2000:, 0].var(), expected, rtol=0.05)  # sampling error about 1 %
    assert_allclose(expected, 0.04, rtol=1e-3)


def _observer_stage_diagram() -> Diagram:
    # tests/REFERENCES.md#stage-observer (separation principle, derived by hand): air-bearing stage, K = [8, 4], L = [11, 30]
    return stage_loop_named(linked=True)


def test_initial_state_by_block_shows_the_estimation_error_transient():
    # separation principle (tests/REFERENCES.md#stage-observer ): e = x - xhat obeys e' = (A - L C) e
    model = assemble(_observer_stage_diagram())
    x0 = initial_state(model, {"P": [1.0, -0.5]})
    t = np.linspace(0.0, 2.0, 201)
    ps, es = model.states["P"], model.states["est"]
    E = np.zeros((2, model.A.shape[0]))
    E[:, ps] = np.eye(2)
    E[:, es] -= np.eye(2)
    res = initial_response(model.A, E, x0, t)
    ALC = np.array([[-11.0, 1.0], [-30.0, 0.0]])
    for k in (0, 50, 200):
        assert_allclose(res.y[k], sla.expm(ALC * t[k]) @ [1.0, -0.5], atol=1e-10)


def test_initial_state_rejects_unknown_blocks_with_suggestions():
    model = assemble(_observer_stage_diagram())
    with pytest.raises(UnknownNameError) as err:
        initial_state(model, {"Pp": 1.0})
    assert "P" in err.value.suggestions


def test_source_run_matches_python_control_for_a_step_disturbance():
    # d -> y of the stage loop has DC gain 82/240 (tests/REFERENCES.md#stage-observer, derived by hand)
    model = assemble(_observer_stage_diagram())
    t = np.linspace(0.0, 12.0, 1201)
    res = source_run(model, t, outputs=["y"])
    A, B, C, D = model.pair("d", "y")
    ref = ct.step_response(ct.ss(A, B, C, D), t).outputs
    assert_allclose(res.y[:, 0], np.ravel(ref), atol=1e-9)
    assert_allclose(res.y[-1, 0], 82 / 240, rtol=1e-5)
    assert res.output_names == ["y"]


def test_reduced_response_is_d_when_there_are_no_states():
    red = reduce_model(np.zeros((0, 0)))
    out = reduced_response(red, np.zeros((0, 1)), np.zeros((1, 0)), np.array([[2.5]]), 1j * np.array([1.0, 2.0]))
    assert_allclose(out[:, 0, 0], 2.5)


@pytest.mark.parametrize("cascade", [False, True], ids=["one strongly coupled loop", "cascade of loops"])
def test_reduction_is_a_unitary_triangular_form_of_the_balanced_matrix(cascade):
    # A = S Z T Z^H S^-1 with Z unitary and T upper triangular, whether or not the cascade
    # shortcut (one Schur form per strongly connected part) is taken
    rng = np.random.default_rng(8)
    if cascade:
        blocks = [rng.standard_normal((k, k)) - 3 * np.eye(k) for k in (3, 1, 4, 2)]
        A = sla.block_diag(*blocks)
        A[3:, :3] = rng.standard_normal((7, 3)) * (rng.random((7, 3)) < 0.5)  # later parts driven by earlier ones
    else:
        A = rng.standard_normal((10, 10))
    red = reduce_model(A)
    assert_allclose(np.tril(red.T, -1), 0.0, atol=0)
    assert_allclose(red.Z.conj().T @ red.Z, np.eye(10), atol=1e-13)
    Ab = red.Z @ red.T @ red.Z.conj().T
    assert_allclose(red.scale[:, None] * Ab / red.scale[None, :], A, atol=1e-12 * np.abs(A).max())
    assert_allclose(red.Z_real @ red.T_real @ red.Z_real.T, A / red.scale[:, None] * red.scale[None, :], atol=1e-12 * np.abs(A).max())
    ev = np.linalg.eigvals(A)
    assert_allclose([np.min(np.abs(ev - p)) for p in red.poles], 0.0, atol=1e-10)
    assert_allclose([np.min(np.abs(red.poles - e)) for e in ev], 0.0, atol=1e-10)


def test_refinement_restores_relative_accuracy_far_below_the_peak():
    # a chain of 30 lags: the response at high frequency is ~1e-40 of its DC value, yet each
    # entry must keep its relative accuracy (python-control 0.10.2 solves per frequency in
    # the original coordinates and serves as the reference)
    n = 30
    A = -np.eye(n) * np.linspace(1.0, 3.0, n) + np.diag(np.ones(n - 1), -1)
    B = np.zeros((n, 1))
    B[0, 0] = 1.0
    C = np.zeros((1, n))
    C[0, -1] = 1.0
    w = np.logspace(-1, 2, 60)
    ours = frequency_response(A, B, C, [[0.0]], w)[:, 0, 0]
    ref = np.ravel(ct.ss(A, B, C, 0)(1j * w))
    assert np.abs(ref).min() < 1e-30 * np.abs(ref).max()
    assert_allclose(ours, ref, rtol=1e-9)


@settings(max_examples=20, deadline=None)
@given(seed=st.integers(0, 10_000), sizes=st.lists(st.integers(1, 3), min_size=2, max_size=5))
def test_frequency_response_of_random_cascades_matches_python_control(seed, sizes):
    # block-triangular models (after a random permutation) take the per-part reduction
    rng = np.random.default_rng(seed)
    n = sum(sizes)
    A = np.zeros((n, n))
    pos = 0
    for k in sizes:
        blk = rng.standard_normal((k, k))
        A[pos : pos + k, pos : pos + k] = blk - (np.max(np.linalg.eigvals(blk).real) + 0.5) * np.eye(k)
        A[pos : pos + k, :pos] = rng.standard_normal((k, pos)) * (rng.random((k, pos)) < 0.6)
        pos += k
    perm = rng.permutation(n)
    A = A[np.ix_(perm, perm)]
    B = rng.standard_normal((n, 2))
    C = rng.standard_normal((2, n))
    D = rng.standard_normal((2, 2))
    w = np.logspace(-2, 2, 30)
    ref = np.moveaxis(ct.ss(A, B, C, D)(1j * w, squeeze=False), 2, 0)
    assert_allclose(frequency_response(A, B, C, D, w), ref, rtol=1e-8, atol=1e-13 * np.abs(ref).max())
    red = reduce_model(A)
    assert_allclose(np.tril(red.T, -1), 0.0, atol=0)
    assert_allclose(red.Z @ red.T @ red.Z.conj().T, A, atol=1e-12 * max(1.0, np.abs(A).max()))


def test_the_refinement_residual_uses_the_nonzeros_of_a_sparse_model():
    # A_bal @ X by compressed rows when A is sparse (an assembled loop), as two real products
    # when it is dense; both equal numpy's complex product to rounding (common practice, no
    # source: the same sums in another order)
    from loopwright.engine.responses import reduce_model

    rng = np.random.default_rng(3)
    n = 60
    sparse_A = np.diag(-rng.random(n) - 0.1) + np.diag(rng.normal(size=n - 1), 1)
    dense_A = rng.normal(size=(n, n)) - 8.0 * np.eye(n)
    X = rng.normal(size=(n, 7)) + 1j * rng.normal(size=(n, 7))
    for A, sparse in ((sparse_A, True), (dense_A, False)):
        red = reduce_model(A)
        assert (red._a_operator is not None) is sparse
        np.testing.assert_allclose(red.times_a(X), A.astype(complex) @ X, rtol=1e-13, atol=1e-13 * np.abs(A).max())


@settings(max_examples=20, deadline=None)
@given(seed=st.integers(0, 10_000), n=st.integers(1, 40), m=st.integers(1, 3), p=st.integers(1, 3), foh=st.booleans(),
       N=st.integers(9, 700))
def test_a_run_in_blocks_has_the_outputs_of_single_steps(seed, n, m, p, foh, N):
    # outputs only: the states at every b-th step and the outputs between them from powers
    # of the step's matrix (the same recursion regrouped); oracle: the step-by-step run
    import loopwright.engine.responses as responses

    A, B, C, D = _stable_system(seed, n, m, p)
    rng = np.random.default_rng(seed)
    t = np.linspace(0.0, 6.0, N)
    U = rng.normal(size=(N, m))
    b = responses._cheapest_block(n, m, p, 1, N)[0] or 4  # the block the cost picks, else the shortest
    Phi, G0, G1 = discretise(A, B, t[1] - t[0], foh_columns=[0] if foh else None)
    X0 = rng.normal(size=(n, 1))
    got = responses._outputs_in_blocks(Phi, G0, G1, U[:, :, None], X0, C, N, foh, b)
    Xs = responses._states_step_by_step(Phi, G0, G1, U[:, :, None], X0, N, foh)
    ref = np.moveaxis((C @ Xs.reshape(n, N)).reshape(p, N, 1), 0, 1)
    assert got.shape == ref.shape
    assert_allclose(got, ref, rtol=0, atol=1e-11 * max(1.0, np.abs(ref).max()))


def test_a_long_run_of_a_large_model_is_lifted_and_matches_python_control(monkeypatch):
    # 120 states, a sine and a ramp held first-order over 1,500 steps: the outputs come from
    # 1,500 / b block starts, not 1,500 single steps; python-control 0.10.2 forced_response
    # holds its inputs linearly between samples (reference library)
    A, B, C, D = _stable_system(5, 120, 2, 2)
    t = np.linspace(0.0, 15.0, 1500)
    U = np.column_stack([np.sin(2 * t), np.maximum(t - 3.0, 0.0)])
    step_calls = _count_calls(monkeypatch, "_states_step_by_step")
    block_calls = _count_calls(monkeypatch, "_outputs_in_blocks")
    ours = simulate(A, B, C, D, t, U, foh_columns=[0, 1])
    assert block_calls == [1] and step_calls == []
    ref = np.asarray(ct.forced_response(ct.ss(A, B, C, D), t, U.T).outputs)  # (p, N)
    assert_allclose(ours.y, ref.T, rtol=0, atol=1e-9 * np.abs(ref).max())


def test_a_diverging_run_in_blocks_stops_where_single_steps_stop(monkeypatch):
    # x' = x + u driven by a ramp (not a held input: no doubling): e^t passes 1e100 near
    # t = 230 s (closed form); the lifted run gives way to single steps, which stop there
    t = np.linspace(0.0, 1000.0, 10001)
    u = (t / 1000.0)[:, None]
    ours = simulate([[1.0]], [[1.0]], [[1.0]], [[0.0]], t, u)
    single = _held_run_step_by_step(monkeypatch, simulate, [[1.0]], [[1.0]], [[1.0]], [[0.0]], t, u)
    assert ours.diverged and single.diverged
    assert ours.t.size == single.t.size and 225.0 < ours.t[-1] < 240.0
    assert_allclose(ours.y, single.y, rtol=1e-12)


@pytest.mark.parametrize("cascade", [False, True])
def test_products_with_the_schur_vectors_through_their_real_form_equal_the_complex_ones(cascade):
    # Z = Z_real G, G the real-to-complex rotations of the 2 x 2 blocks (two nonzeros per
    # column): Z X and Z^H R as real-times-complex products equal numpy's complex products
    # to rounding (common practice, no source: the same sums regrouped)
    from loopwright.engine.responses import reduce_model

    rng = np.random.default_rng(8)
    n = 120
    A = rng.normal(size=(n, n)) / np.sqrt(n) - 0.5 * np.eye(n)
    if cascade:  # block triangular: the cascade's Schur form, block by block
        A = np.triu(A, -3) * (np.add.outer(np.arange(n) // 30, -(np.arange(n) // 30)) <= 0)
    red = reduce_model(A)
    assert red._rotations is not None
    assert red._rotations.nnz <= 2 * n  # the diagonal and two entries per complex pair
    assert np.count_nonzero(np.diag(red.T_real, -1)) > 10  # complex pairs are there
    X = rng.normal(size=(n, 9)) + 1j * rng.normal(size=(n, 9))
    scale = np.abs(X).max()
    assert_allclose(red.to_original(X), red.Z @ X, rtol=0, atol=1e-13 * scale)
    assert_allclose(red.to_reduced(X), red.Z.conj().T @ X, rtol=0, atol=1e-13 * scale)


def test_a_held_run_of_outputs_only_is_lifted_when_that_costs_less_than_doubling(monkeypatch):
    # 60 states, 2,001 steps: doubling makes every state (2 q^2 N r operations), the lifted
    # run only the outputs (far fewer); asked for the states, doubling runs as before. The two
    # give the same step response (the same recursion regrouped; common practice, no source)
    A, B, C, D = _stable_system(21, 60, 2, 3)
    t = np.linspace(0.0, 20.0, 2001)
    doubled = _count_calls(monkeypatch, "_states_by_doubling")
    lifted = _count_calls(monkeypatch, "_outputs_in_blocks")
    U = np.broadcast_to(np.eye(2)[None], (t.size, 2, 2))
    outputs_only = simulate(A, B, C, D, t, U)
    assert len(lifted) == 1 and doubled == []
    with_states = simulate(A, B, C, D, t, U, keep_states=True)
    assert len(doubled) == 1 and len(lifted) == 1
    assert_allclose(outputs_only.y, with_states.y, rtol=0, atol=1e-11 * np.abs(with_states.y).max())
