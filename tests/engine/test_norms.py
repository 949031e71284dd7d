"""Tests of engine/norms.py: peak gain, H2 norm, DC gain."""
from __future__ import annotations

import control as ct
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from loopwright.engine.norms import dc_gain, h2_norm, is_stable_matrix, lyapunov_from_schur, peak_gain, sigma_max
from loopwright.engine.responses import frequency_response, reduce_model
from reference_norms import h2_by_parseval

G1 = ([[-2.0]], [[1.0]], [[1.0]], [[0.0]])
G2 = ([[0.0, 1.0], [-25.0, -2.0]], [[0.0], [1.0]], [[25.0, 0.0]], [[0.0]])


@pytest.mark.parametrize(
    "system, expected, tol, source",
    [
        (G1, 0.5, 1e-9, "tests/REFERENCES.md#lag-and-resonator-h2 (closed form) ||1/(s+2)||_2 = 1/sqrt(4)"),
        (G2, 2.5, 1e-9, "tests/REFERENCES.md#lag-and-resonator-h2 (closed form) ||25/(s^2+2s+25)||_2 = sqrt(wn/(4 zeta))"),
        (([[-0.5]], [[1.0]], [[1.0]], [[0.0]]), 1.0, 1e-9, "tests/REFERENCES.md#greenhouse-noise (closed form W/(2a)) ||1/(s+0.5)||_2 = 1"),
    ],
)
def test_h2_norm_reference_values(system, expected, tol, source):
    res = h2_norm(*system)
    assert res.stable
    assert_allclose(res.value, expected, rtol=tol)


@pytest.mark.parametrize(
    "system, expected, w_expected, source",
    [
        (G2, 1 / (0.4 * np.sqrt(0.96)), 5 * np.sqrt(0.92), "tests/REFERENCES.md#resonator-peak (closed form) resonant peak 2.551551815 at 4.795831523 rad/s"),
        (G1, 0.5, 0.0, "1/(s+2) peaks at DC, common practice, no source"),
        (([[-1.0]], [[1.0]], [[-1.0]], [[1.0]]), 1.0, np.inf, "s/(s+1) approaches 1 as w -> inf, common practice, no source"),
    ],
)
def test_peak_gain_reference_values(system, expected, w_expected, source):
    res = peak_gain(*system)
    assert res.stable
    assert_allclose(res.value, expected, rtol=1e-7)
    if np.isfinite(w_expected):
        assert_allclose(res.w_rad_s, w_expected, rtol=1e-5, atol=1e-9)
    else:
        assert res.w_rad_s == np.inf


def _stable(seed, n, m, p, d_scale):
    rng = np.random.default_rng(seed)
    A = rng.standard_normal((n, n))
    A -= (np.max(np.linalg.eigvals(A).real) + rng.uniform(0.05, 1.0)) * np.eye(n)
    return A, rng.standard_normal((n, m)), rng.standard_normal((p, n)), d_scale * rng.standard_normal((p, m))


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 10_000), n=st.integers(1, 6), d_scale=st.sampled_from([0.0, 0.3, 2.0]))
def test_peak_gain_matches_python_control_on_random_siso_systems(seed, n, d_scale):
    # python-control 0.10.2 norm(..., 'inf', method='scipy') (its own Hamiltonian bisection)
    A, B, C, D = _stable(seed, n, 1, 1, d_scale)
    ref = ct.norm(ct.ss(A, B, C, D), "inf", method="scipy", tol=1e-12)
    assert_allclose(peak_gain(A, B, C, D).value, ref, rtol=1e-7)


@settings(max_examples=20, deadline=None)
@given(seed=st.integers(0, 10_000), n=st.integers(1, 6), m=st.integers(1, 3), p=st.integers(1, 3))
def test_peak_gain_of_mimo_systems_bounds_and_touches_a_dense_sweep(seed, n, m, p):
    A, B, C, D = _stable(seed, n, m, p, 0.5)
    res = peak_gain(A, B, C, D)
    w = np.concatenate([[0.0], np.logspace(-3, 3, 4000)])
    sweep = sigma_max(frequency_response(A, B, C, D, w))
    assert res.value >= sweep.max() * (1 - 1e-9)  # never below any sampled gain
    at_peak = sigma_max(frequency_response(A, B, C, D, [res.w_rad_s if np.isfinite(res.w_rad_s) else 1e9]))[0]
    assert_allclose(at_peak, res.value, rtol=1e-6)  # the reported frequency really carries the peak


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 10_000), n=st.integers(1, 6), m=st.integers(1, 3), p=st.integers(1, 3))
def test_h2_norm_matches_its_frequency_domain_definition(seed, n, m, p):
    # closed form: Parseval's integral (tests/reference_norms.py), no Lyapunov solve; it
    # replaces python-control's norm(sys, 2), whose answer depends on a warning-prone check
    A, B, C, _ = _stable(seed, n, m, p, 0.0)
    assert_allclose(h2_norm(A, B, C).value, h2_by_parseval(A, B, C), rtol=1e-8)


def test_unstable_path_is_reported_unstable_with_infinite_norms():
    sys = ([[1.0]], [[1.0]], [[1.0]], [[0.0]])
    pk, h2 = peak_gain(*sys), h2_norm(*sys)
    assert (pk.stable, pk.value) == (False, np.inf)
    assert (h2.stable, h2.value) == (False, np.inf)
    assert "not stable" in h2.reason


def test_marginally_stable_path_is_not_given_a_number():
    # an undamped oscillator (poles +-3j): common practice, no source
    pk = peak_gain([[0.0, 1.0], [-9.0, 0.0]], [[0.0], [1.0]], [[1.0, 0.0]], [[0.0]])
    assert not pk.stable and pk.value == np.inf


def test_hidden_unstable_mode_does_not_count_for_the_path():
    # the mode at +1 is not reachable from the input: the transfer is 1/(s+2)
    A = np.diag([-2.0, 1.0])
    B = np.array([[1.0], [0.0]])
    C = np.array([[1.0, 1.0]])
    assert_allclose(peak_gain(A, B, C, [[0.0]]).value, 0.5, rtol=1e-9)
    assert not is_stable_matrix(A)


def test_h2_is_infinite_with_direct_feedthrough():
    res = h2_norm([[-1.0]], [[1.0]], [[1.0]], [[0.1]])
    assert res.stable and res.value == np.inf and "feedthrough" in res.reason


@pytest.mark.parametrize(
    "system, expected, source",
    [
        (
            # d -> y of tests/REFERENCES.md#stage-observer: (s^2 + 15 s + 82)/((s^2 + 4 s + 8)(s^2 + 11 s + 30))
            ct.tf([1, 15, 82], np.polymul([1, 4, 8], [1, 11, 30])),
            82 / 240,
            "tests/REFERENCES.md#stage-observer (separation principle, derived by hand) DC gain d -> y = 82/240",
        ),
        (ct.tf([80, 80], [1, 10, 76, 40]), 2.0, "tests/REFERENCES.md#rotor-sensitivity-integral (Freudenberg and Looze 1985) T(0) = 2"),
    ],
)
def test_dc_gain_reference_values(system, expected, source):
    s = ct.ss(system)
    assert_allclose(dc_gain(s.A, s.B, s.C, s.D)[0, 0], expected, rtol=1e-9)


def test_dc_gain_with_an_integrator_is_infinite_and_others_finite():
    # [1/s ; 1/(s+1)] from one input: common practice, no source
    A = np.diag([0.0, -1.0])
    B = np.array([[1.0], [1.0]])
    C = np.eye(2)
    g = dc_gain(A, B, C, np.zeros((2, 1)))
    assert g[0, 0] == np.inf
    assert_allclose(g[1, 0], 1.0, rtol=1e-12)


def test_lyapunov_from_schur_agrees_with_scipy():
    import scipy.linalg as sla

    rng = np.random.default_rng(4)
    A = rng.standard_normal((9, 9)) - 4 * np.eye(9)
    Q = rng.standard_normal((9, 2))
    red = reduce_model(A)
    S = red.scale
    # the reduction is of the balanced A: map back with the diagonal similarity
    Xb = lyapunov_from_schur(red.T_real, red.Z_real, (Q / S[:, None]) @ (Q / S[:, None]).T)
    X = S[:, None] * Xb * S[None, :]
    assert_allclose(X, sla.solve_continuous_lyapunov(A, -Q @ Q.T), rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize("n", [5, 70, 150])
def test_recursive_lyapunov_solver_matches_scipy_across_the_leaf_size(n):
    # sizes below, near and above the 64-state leaf of the recursive solver; scipy 1.17
    # solve_continuous_lyapunov is the reference
    import scipy.linalg as sla

    rng = np.random.default_rng(n)
    A = rng.standard_normal((n, n)) / np.sqrt(n) - 1.5 * np.eye(n)
    Q = rng.standard_normal((n, 3))
    T, Z = sla.schur(A, output="real")
    X = lyapunov_from_schur(T, Z, Q @ Q.T)
    assert_allclose(X, sla.solve_continuous_lyapunov(A, -Q @ Q.T), rtol=1e-9, atol=1e-12 * np.abs(X).max())
