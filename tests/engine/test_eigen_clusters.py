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
