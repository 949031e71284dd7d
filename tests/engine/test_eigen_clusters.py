"""Rounding bounds of defective and clustered eigenvalues (integrator chains, repeated poles).

The first-order bound ``kappa eps ||A||`` is infinite for a defective eigenvalue and can
fail for a perturbed one; the cluster bound (Henrici's theorem on the cluster's Schur
block, G. H. Golub and C. F. Van Loan, Matrix Computations, Theorem 7.2.3, from memory)
must be finite and must hold: each computed member lies within it of the exact eigenvalue (known in closed form
here, because the matrices are built from Jordan blocks by an orthogonal similarity).
"""
from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from loopwright.engine.eigen import eigen_sensitivity, format_pole


def _jordan_in_disguise(value: float, k: int, others, seed: int, coupling: float = 1.0) -> np.ndarray:
    """``Q diag(value I + coupling N_k, others) Q^T`` with ``Q`` a signed permutation of the
    8x8 Hadamard matrix over sqrt(8)... scaled to be orthogonal: ``H / 2^(3/2)`` is not
    exact in binary, so ``Q`` is applied as ``H M H^T / 8`` with ``H`` of +-1 entries:
    every product is exact for dyadic ``value``, ``coupling`` and ``others``, so the exact
    eigenvalues are ``value`` (k-fold, defective) and ``others`` (closed form) and nothing
    but the eigenvalue solver rounds."""
    m = 8
    assert k + len(others) == m
    M = np.zeros((m, m))
    M[:k, :k] = value * np.eye(k) + coupling * np.eye(k, k=1)
    M[k:, k:] = np.diag(others)
    H = np.array([[1.0]])
    for _ in range(3):
        H = np.block([[H, H], [H, -H]])
    rng = np.random.default_rng(seed)
    P = np.eye(m)[rng.permutation(m)] * rng.choice([-1.0, 1.0], size=m)
    S = P @ H  # +-1 entries; S S^T = 8 I
    return S @ M @ S.T / 8.0


def _nearest_exact(values, exact):
    return np.array([np.min(np.abs(np.asarray(exact) - v)) for v in values])


def test_an_exact_integrator_chain_gets_a_finite_bound_and_reads_as_zero():
    # closed form: the triple integrator x1' = x2, x2' = x3, x3' = u has three poles at 0
    A = np.diag([1.0, 1.0], k=1)
    s = eigen_sensitivity(A)
    assert np.all(np.isinf(s.condition))
    assert np.all(np.isfinite(s.error_bound)) and np.all(s.error_bound < 1e-4)
    assert [format_pole(v, b) for v, b in zip(s.values, s.error_bound)] == ["0 (+-1.6e-05)"] * 3


@pytest.mark.parametrize("value, k", [(-2.0, 3), (0.0, 3), (0.0, 4), (-0.5, 2), (3.0, 5)])
def test_every_computed_member_of_a_defective_cluster_lies_within_its_bound(value, k):
    others = [-5.0, -7.0, -9.0, -11.0, -13.0, -15.0][: 8 - k]
    A = _jordan_in_disguise(value, k, others, seed=k)
    s = eigen_sensitivity(A)
    err = _nearest_exact(s.values, [value, *others])
    members = np.abs(s.values - value) < 0.5
    assert np.all(np.isfinite(s.cluster_bound[members]))
    assert np.all(err[members] <= s.cluster_bound[members]), (err, s.cluster_bound)
    assert np.all(s.error_bound <= s.cluster_bound)
    # simple poles keep the first-order bound, which omits LAPACK's modest growth factor
    # p(n) of the backward error (LAPACK Users' Guide, section 4.8, from memory)
    assert np.all(err[~members] <= 10 * s.error_bound[~members])
    assert np.all(np.isinf(s.cluster_bound[~members]))
    # not grossly pessimistic: within 100x of what rounding did (k-th root law)
    assert np.all(s.cluster_bound[members] <= 100 * np.max(err[members]) + 1e-10)
    # the well-separated simple poles keep their first-order bounds (about eps ||A||)
    assert np.all(s.error_bound[~members] < 1e-12)


def test_bounds_of_well_conditioned_poles_are_unchanged():
    # common practice, no source: a normal matrix's eigenvalues move by at most eps ||A||
    A = np.diag([-1.0, -2.0, -3.0]) + 0.0
    s = eigen_sensitivity(A)
    assert np.allclose(s.condition, 1.0)
    assert np.all(s.error_bound < 1e-14)


@settings(max_examples=40, deadline=None)
@given(
    value=st.integers(-40, 40).map(lambda i: i / 4.0),
    k=st.integers(2, 6),
    coupling=st.integers(-4, 4).map(lambda e: 2.0**e),
    seed=st.integers(0, 10_000),
)
def test_cluster_bounds_hold_on_random_disguised_jordan_blocks(value, k, coupling, seed):
    others = [value - 30.0 - 2.0 * i for i in range(8 - k)]
    A = _jordan_in_disguise(value, k, others, seed=seed, coupling=coupling)
    s = eigen_sensitivity(A)
    err = _nearest_exact(s.values, [value, *others])
    members = np.abs(s.values - value) < 10.0
    assert np.all(np.isfinite(s.cluster_bound[members]))
    assert np.all(err[members] <= s.cluster_bound[members]), (err, s.cluster_bound)
    assert np.all(err[~members] <= 10 * s.error_bound[~members])


def _stiff_frame():
    # companion-form modes [[0, 1], [-wn^2, -2 zeta wn]] (closed form: poles -zeta wn +- j wn sqrt(1 - zeta^2)):
    # a fast actuator mode (1e6 rad/s, zeta 0.7) makes ||A|| ~ 1e6 beside structural modes with zeta = 1e-4
    from loopwright.engine.diagram import Diagram

    wn, zeta = [1e6, 1e3, 3e3, 1e4], [0.7, 1e-4, 1e-4, 1e-4]
    A = np.zeros((8, 8))
    for i, (w, z) in enumerate(zip(wn, zeta)):
        A[2 * i, 2 * i + 1], A[2 * i + 1, 2 * i], A[2 * i + 1, 2 * i + 1] = 1.0, -w * w, -2.0 * z * w
    B = np.zeros((8, 1))
    B[1::2] = 1.0
    C = np.zeros((1, 8))
    C[0, 0::2] = 1.0
    d = Diagram()
    d.add_block("source", "shaker", {"role": "disturbance", "width": 1, "waveform": {"kind": "zero"}})
    d.add_block("plant", "frame", {"A": A.tolist(), "B": B.tolist(), "C": C.tolist(), "D": [[0.0]]})
    d.connect("shaker.out", "frame.u")
    return d, A


def test_lightly_damped_modes_of_a_stiff_matrix_are_not_called_origin_poles():
    # closed form: every pole has Re p = -zeta wn < 0, so the frame is asymptotically stable; the
    # poles' rounding bounds (~1e-9) are far below their distance from zero (1e3 and more)
    from loopwright.engine.check import summarize
    from loopwright.engine.eigen import classify_poles, matrix_scale

    d, A = _stiff_frame()
    rep = summarize(d)
    assert (rep.pole_classes.origin, rep.pole_classes.open_lhp) == (0, 8)
    assert not any("imaginary axis" in w for w in rep.warnings), rep.warnings
    s = eigen_sensitivity(A)
    assert classify_poles(s.values, scale=matrix_scale(A), bounds=s.error_bound).open_lhp == 8


def test_a_split_multiple_zero_still_counts_at_the_origin_with_bounds():
    # a disguised 4-fold defective zero (exact eigenvalues 0, 0, 0, 0; closed form) computes as a
    # circle of radius ~1e-4: within the cluster bound, so four poles at the origin
    from loopwright.engine.eigen import classify_poles, matrix_scale

    A = _jordan_in_disguise(0.0, 4, [-5.0, -7.0, -9.0, -11.0], seed=3)
    s = eigen_sensitivity(A)
    assert np.min(np.abs(s.values[np.abs(s.values) < 1])) > 1e-6  # really split by rounding
    c = classify_poles(s.values, scale=matrix_scale(A), bounds=s.error_bound)
    assert (c.origin, c.open_rhp, c.open_lhp) == (4, 0, 4)


def test_an_ill_conditioned_cascade_away_from_zero_is_not_called_an_origin_cluster():
    # closed form: A = -I + 10 N (30 identical stages in a chain, N the shift) has one eigenvalue, -1,
    # 30-fold and defective: rounding scatters the computed ones widely (their bounds reach past 0),
    # yet they are centred on -1, not on 0, so none of them is an origin pole
    from loopwright.engine.eigen import classify_poles, matrix_scale

    A = -np.eye(30) + 10.0 * np.eye(30, k=1)
    s = eigen_sensitivity(A)
    assert np.any(np.abs(s.values) <= s.error_bound)  # rounding alone cannot rule zero out
    c = classify_poles(s.values, scale=matrix_scale(A), bounds=s.error_bound)
    assert c.origin == 0 and c.open_lhp + c.open_rhp + c.imaginary_axis == 30
