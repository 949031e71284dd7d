"""Many sources solved together: the batched Lyapunov sweep and the per-source variances.

References: scipy 1.17.1 ``solve_continuous_lyapunov`` (Bartels-Stewart) per source on the
same matrices; python-control 0.10.2 ``lyap`` (its scipy method) per source; the closed
form of a resonator's H2 norm (tests/REFERENCES.md#lag-and-resonator-h2).
"""
from __future__ import annotations

import control as ct
import numpy as np
import pytest
import scipy.linalg as sla
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import loopwright.engine.noise_shares as noise_shares
from loopwright.engine.lyapunov_batch import LeafSolvers, solve_lyapunov_batch
from loopwright.engine.noise_shares import variances_by_source
from loopwright.engine.responses import reduce_model

SETTINGS = settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def _stable(rng, n, *, oscillatory):
    """A random stable matrix; ``oscillatory`` gives it complex pairs (2x2 Schur blocks)."""
    A = rng.standard_normal((n, n))
    if oscillatory:
        A = A - A.T  # skew part: eigenvalues on the imaginary axis, then shifted left
    A -= (np.abs(np.linalg.eigvals(A).real).max() + rng.uniform(0.2, 2.0)) * np.eye(n)
    return A


def _per_source_reference(A, C, inputs):
    out = {}
    for name, (Bs, W) in inputs.items():
        X = sla.solve_continuous_lyapunov(A, -Bs @ W @ Bs.T)
        out[name] = np.einsum("ij,jk,ik->i", C, X, C)
    return out


@SETTINGS
@given(st.integers(1, 40), st.integers(1, 5), st.booleans(), st.integers(0, 2**31 - 1))
def test_the_batched_sweep_equals_one_scipy_solve_per_right_hand_side(n, G, oscillatory, seed):
    # scipy 1.17.1 solve_continuous_lyapunov on each right-hand side separately
    rng = np.random.default_rng(seed)
    T, _ = sla.schur(_stable(rng, n, oscillatory=oscillatory), output="real")
    B = rng.standard_normal((n, 2, G))
    M = np.ascontiguousarray(-np.einsum("iag,jag->ijg", B, B))
    Q = M.copy()
    Y = solve_lyapunov_batch(T, M)
    assert Y is M
    for g in range(G):
        ref = sla.solve_continuous_lyapunov(T, Q[:, :, g])
        np.testing.assert_allclose(Y[:, :, g], ref, rtol=0, atol=1e-10 * np.abs(ref).max())
        np.testing.assert_array_equal(Y[:, :, g], Y[:, :, g].T)


def test_the_leaf_partition_keeps_every_two_by_two_block_whole():
    # common practice, no source: a real Schur form's complex pairs sit in 2x2 diagonal blocks
    rng = np.random.default_rng(3)
    T, _ = sla.schur(_stable(rng, 57, oscillatory=True), output="real")
    edges = LeafSolvers(T).edges
    assert edges[0] == 0 and edges[-1] == 57
    for e in edges[1:-1]:
        assert T[e, e - 1] == 0.0


def _model(rng, parts, sizes, *, cascade, oscillatory):
    """Parts coupled in a line (cascade) or closed into a ring; complex pairs optional."""
    n = int(sum(sizes))
    starts = np.concatenate([[0], np.cumsum(sizes)])
    A = np.zeros((n, n))
    for a, b in zip(starts[:-1], starts[1:]):
        A[a:b, a:b] = _stable(rng, b - a, oscillatory=oscillatory)
    for a, b, c in zip(starts[:-2], starts[1:-1], starts[2:]):
        A[b:c, a:b] = 0.5 * rng.standard_normal((c - b, b - a))  # part k drives part k+1
    if not cascade:
        A[: starts[1], starts[-2] :] = 0.3 * rng.standard_normal((starts[1], n - starts[-2]))
    return A, starts


@SETTINGS
@given(
    st.integers(1, 7),
    st.integers(0, 2**31 - 1),
    st.booleans(),
    st.booleans(),
    st.sampled_from(["dense", "sparse"]),
)
def test_per_source_variances_equal_scipy_on_rings_and_cascades(parts, seed, cascade, oscillatory, route):
    # scipy 1.17.1 solve_continuous_lyapunov per source; sources drive one part (cascade:
    # they reach the parts downstream only) or, with width two and a full intensity, several
    rng = np.random.default_rng(seed)
    sizes = rng.integers(1, 9, parts)
    A, starts = _model(rng, parts, sizes, cascade=cascade, oscillatory=oscillatory)
    if np.linalg.eigvals(A).real.max() >= -1e-3:
        return
    n = A.shape[0]
    sparse_C = rng.random() < 0.5
    C = rng.standard_normal((9, n)) * (rng.random((9, n)) < (0.15 if sparse_C else 1.0))
    inputs = {}
    for k in range(4):
        w = 1 + k % 2
        Bs = np.zeros((n, w))
        part = rng.integers(parts)
        Bs[starts[part] : starts[part + 1]] = rng.standard_normal((starts[part + 1] - starts[part], w))
        R = rng.standard_normal((w, w))
        inputs[f"s{k}"] = (Bs, R @ R.T + 0.1 * np.eye(w))
    red = reduce_model(A)
    with pytest.MonkeyPatch.context() as mp:
        # both routes on the same cases: the sparse one normally only for large sparse parts
        mp.setattr(noise_shares, "_SPARSE_MIN", 0 if route == "sparse" else 10**9)
        mp.setattr(noise_shares, "_SPARSE_FILL", 1.0)
        mp.setattr(noise_shares, "_SPARSE_PENALTY", 0.0 if route == "sparse" else 1e30)
        got = variances_by_source(red.T_real, red.Z_real, C, inputs)
    ref = _per_source_reference(A, C, inputs)
    for name in inputs:
        np.testing.assert_allclose(got[name], ref[name], rtol=1e-8, atol=1e-12 * max(1.0, np.abs(ref[name]).max()))


def test_sources_in_several_batches_and_nested_parts_match_python_control():
    # python-control 0.10.2 lyap (method="scipy") per source: A X + X A^T + B W B^T = 0.
    # A cascade of 12 parts with three sources per part (36 sources, nested reached sets),
    # the batch memory shrunk so that the sources are split over several batches.
    rng = np.random.default_rng(11)
    sizes = rng.integers(3, 7, 12)
    A, starts = _model(rng, 12, sizes, cascade=True, oscillatory=True)
    n = A.shape[0]
    C = np.vstack([np.eye(n), rng.standard_normal((4, n))])
    inputs = {}
    for part in range(12):
        for k in range(3):
            Bs = np.zeros((n, 1))
            Bs[rng.integers(starts[part], starts[part + 1]), 0] = rng.uniform(0.5, 2.0)
            inputs[f"p{part}s{k}"] = (Bs, np.array([[rng.uniform(0.1, 2.0)]]))
    red = reduce_model(A)
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(noise_shares, "_BATCH_BYTES", 8 * n * n * 5)
        mp.setattr(noise_shares, "_NEST_GROWTH", 10.0)
        got = variances_by_source(red.T_real, red.Z_real, C, inputs)
    for name, (Bs, W) in inputs.items():
        X = ct.lyap(A, Bs @ W @ Bs.T, method="scipy")
        ref = np.einsum("ij,jk,ik->i", C, X, C)
        np.testing.assert_allclose(got[name], ref, rtol=1e-8, atol=1e-13 * np.abs(ref).max())


def test_clustered_lightly_damped_modes_keep_every_variance_to_relative_accuracy():
    # closed form (tests/REFERENCES.md#lag-and-resonator-h2): x'' + 2 zeta wn x' + wn^2 x = w
    # with white w of intensity W has var(x) = W/(4 zeta wn^3) and var(x') = W/(4 zeta wn).
    # Twenty decoupled modes with frequencies equal to 1e-6 and damping 0.002-0.01: the
    # Schur vectors mix them, the variances span many decades and must all stay exact.
    rng = np.random.default_rng(5)
    modes = 20
    wn = 10.0 * (1.0 + 1e-6 * np.arange(modes)) * np.repeat([1.0, 30.0], modes // 2)
    zeta = rng.uniform(0.002, 0.01, modes)
    A = np.zeros((2 * modes, 2 * modes))
    for i in range(modes):
        A[2 * i, 2 * i + 1] = 1.0
        A[2 * i + 1, 2 * i] = -wn[i] ** 2
        A[2 * i + 1, 2 * i + 1] = -2.0 * zeta[i] * wn[i]
    C = np.eye(2 * modes)
    inputs = {}
    for i in range(modes):
        Bs = np.zeros((2 * modes, 1))
        Bs[2 * i + 1, 0] = 1.0
        inputs[f"f{i}"] = (Bs, np.array([[0.3]]))
    red = reduce_model(A)
    got = variances_by_source(red.T_real, red.Z_real, C, inputs)
    for i in range(modes):
        v = got[f"f{i}"]
        expected = np.zeros(2 * modes)
        expected[2 * i] = 0.3 / (4 * zeta[i] * wn[i] ** 3)
        expected[2 * i + 1] = 0.3 / (4 * zeta[i] * wn[i])
        np.testing.assert_allclose(v[2 * i : 2 * i + 2], expected[2 * i : 2 * i + 2], rtol=1e-8)
        # the other modes are not driven: zero up to rounding relative to this source's largest
        others = np.delete(v, [2 * i, 2 * i + 1])
        assert np.abs(others).max() <= 1e-12 * expected.max()
