"""Tests of engine/discretize.py: ZOH and Tustin (with pre-warping), simulation, frequency response."""
from __future__ import annotations

import control as ct
import numpy as np
import pytest
import scipy.linalg as sla
import scipy.signal as ssig
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from loopwright.engine.discretize import DiscreteModel, discrete_frequency_response, discretize, simulate_discrete
from loopwright.engine.errors import DesignError

# Demo data: a gimbal axis with a flexible mount and a lead filter.
GIMBAL = (
    np.array([[0.0, 1.0, 0.0], [-25.0, -2.0, 5.0], [0.0, 0.0, -40.0]]),
    np.array([[0.0, 0.0], [0.0, 1.0], [40.0, 0.0]]),
    np.array([[1.0, 0.0, 0.0], [0.0, 1.0, 0.5]]),
    np.array([[0.0, 0.0], [0.0, 0.1]]),
)


@pytest.mark.parametrize("method, ct_method", [("zoh", "zoh"), ("tustin", "bilinear")])
@pytest.mark.parametrize("ts", [0.001, 0.02, 0.2])
def test_discretize_matches_scipy_cont2discrete(method, ct_method, ts):
    # Reference: scipy 1.17 signal.cont2discrete (zoh; bilinear = Tustin).
    A, B, C, D = GIMBAL
    ours = discretize(A, B, C, D, ts, method=method)
    ref = ssig.cont2discrete((A, B, C, D), ts, method=ct_method)
    for got, want in zip((ours.A, ours.B, ours.C, ours.D), ref[:4]):
        assert_allclose(got, want, rtol=1e-10, atol=1e-12)


@pytest.mark.parametrize("method, prewarp", [("zoh", None), ("tustin", None), ("tustin", 12.0)])
def test_discretize_transfer_function_matches_python_control_sample_system(method, prewarp):
    # Reference: python-control 0.10.2 sample_system (same methods, prewarp_frequency);
    # realisations may differ, so compare frequency responses on the unit circle.
    A, B, C, D = GIMBAL
    ts = 0.05
    ours = discretize(A, B, C, D, ts, method=method, prewarp_rad_s=prewarp)
    ref = ct.sample_system(ct.ss(A, B, C, D), ts, method=method, prewarp_frequency=prewarp)
    w = np.linspace(0.1, np.pi / ts * 0.99, 60)
    got = discrete_frequency_response(ours, w)
    want = np.moveaxis(ref(np.exp(1j * w * ts)), -1, 0)
    assert_allclose(got, want, rtol=1e-9, atol=1e-12)


def test_tustin_prewarp_matches_continuous_response_exactly_at_the_warp_frequency():
    # Defining property of pre-warping (common practice, no source).
    A, B, C, D = GIMBAL
    w0, ts = 20.0, 0.05
    dm = discretize(A, B, C, D, ts, method="tustin", prewarp_rad_s=w0)
    cont = C @ np.linalg.solve(1j * w0 * np.eye(3) - A, B) + D
    assert_allclose(discrete_frequency_response(dm, [w0])[0], cont, rtol=1e-10)


def test_zoh_samples_equal_continuous_step_response():
    # Invariant: ZOH reproduces the continuous step response at the samples (common
    # practice, no source); the continuous response by an exact matrix exponential.
    A, B, C, D = GIMBAL
    ts = 0.03
    dm = discretize(A, B, C, D, ts, method="zoh")
    k = 40
    y = simulate_discrete(dm, np.tile([1.0, 0.0], (k, 1)))
    for i in (1, 7, 39):
        t = i * ts
        big = sla.expm(np.block([[A, B], [np.zeros((2, 5))]]) * t)
        x = big[:3, 3:] @ np.array([1.0, 0.0])
        assert_allclose(y[i], C @ x + D @ [1.0, 0.0], rtol=1e-10, atol=1e-13)


def test_simulate_discrete_agrees_with_scipy_dlsim():
    A, B, C, D = GIMBAL
    dm = discretize(A, B, C, D, 0.01, method="tustin")
    rng = np.random.default_rng(3)
    u = rng.normal(size=(200, 2))
    _, y_ref, _ = ssig.dlsim((dm.A, dm.B, dm.C, dm.D, dm.ts), u)
    assert_allclose(simulate_discrete(dm, u), y_ref, rtol=1e-10, atol=1e-12)


def test_scalar_zoh_closed_form():
    # x' = -a x + b u: Ad = e^{-aT}, Bd = b (1 - e^{-aT})/a (common practice, no source).
    a, b, ts = 3.0, 2.0, 0.1
    dm = discretize([[-a]], [[b]], [[1.0]], [[0.0]], ts)
    assert_allclose(dm.A, [[np.exp(-a * ts)]], rtol=1e-14)
    assert_allclose(dm.B, [[b * (1 - np.exp(-a * ts)) / a]], rtol=1e-13)


@settings(max_examples=25, deadline=None)
@given(st.integers(0, 2**32 - 1), st.sampled_from(["zoh", "tustin"]))
def test_stable_models_stay_stable_after_discretisation(seed, method):
    # Property: both methods map the open left half-plane into the unit disc
    # (common practice, no source).
    rng = np.random.default_rng(seed)
    n = int(rng.integers(1, 5))
    M = rng.normal(size=(n, n))
    A = M - (np.max(np.linalg.eigvals(M).real) + 0.5) * np.eye(n)
    dm = discretize(A, rng.normal(size=(n, 1)), rng.normal(size=(1, n)), [[0.0]], float(rng.uniform(0.01, 1)), method=method)
    assert np.max(np.abs(np.linalg.eigvals(dm.A))) < 1.0


@pytest.mark.parametrize(
    "kwargs, message",
    [
        ({"ts": 0.0}, "must be a positive number"),
        ({"ts": 0.1, "method": "euler"}, "is not one of zoh, tustin"),
        ({"ts": 0.1, "method": "zoh", "prewarp_rad_s": 3.0}, "Tustin method only"),
        ({"ts": 0.1, "method": "tustin", "prewarp_rad_s": 40.0}, "below the Nyquist frequency"),
    ],
    ids=["zero-period", "unknown-method", "prewarp-with-zoh", "prewarp-above-nyquist"],
)
def test_bad_discretisation_requests_are_rejected(kwargs, message):
    A, B, C, D = GIMBAL
    with pytest.raises(DesignError, match=message):
        discretize(A, B, C, D, **kwargs)


def test_tustin_with_pole_at_two_over_t_is_rejected():
    with pytest.raises(DesignError, match="singular"):
        discretize([[20.0]], [[1.0]], [[1.0]], [[0.0]], 0.1, method="tustin")


def test_static_model_discretises_to_itself():
    dm = discretize(np.zeros((0, 0)), np.zeros((0, 1)), np.zeros((1, 0)), [[2.5]], 0.1, method="tustin")
    assert_allclose(dm.D, [[2.5]])
    assert_allclose(simulate_discrete(dm, [1.0, 2.0]), [[2.5], [5.0]])


def test_response_at_the_nyquist_frequency_is_real_and_matches_z_minus_one():
    # Closed form: at w = pi/T, z = e^{j pi} = -1, and a real model's G(-1) = C (-I - A)^-1 B + D
    # is real; the margin search reads a crossing of the negative real axis there.
    A = np.array([[0.9, 0.2], [-0.1, 0.7]])
    B, C, D = np.array([[1.0], [0.5]]), np.array([[1.0, -2.0]]), np.array([[0.1]])
    ts = 1e-3
    dm = DiscreteModel(A, B, C, D, ts, "zoh")
    got = discrete_frequency_response(dm, [np.pi / ts])[0]
    assert got.imag[0, 0] == 0.0
    assert_allclose(got.real, C @ np.linalg.solve(-np.eye(2) - A, B) + D, rtol=1e-13)
