"""Eigenvalue condition numbers from the balanced Schur form (engine/eigen.py).

The pole map and the frequency view share one complex Schur form of the closed loop; the
condition numbers ``kappa_i = 1/|y_i^H x_i|`` come from the left and right eigenvectors of
its triangular factor. Reference: scipy's ``eig`` with left and right eigenvectors (LAPACK
``geev``) on the same balanced matrix (``gebal``, as scipy's ``matrix_balance`` does it).
"""
from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg as sla
from numpy.testing import assert_allclose
from scipy.optimize import linear_sum_assignment

from loopwright.engine.eigen import _substitution_condition_numbers, balanced_reduction, eigen_sensitivity, triangular_condition_numbers

#: Both routes to the condition numbers of a triangular factor: numpy's eig (LAPACK trevc),
#: and our own back substitution (taken when geev reorders the eigenvalues)
ROUTES = [pytest.param(triangular_condition_numbers, id="lapack"), pytest.param(_substitution_condition_numbers, id="substitution")]


def _geev_condition(A):
    """Eigenvalues and condition numbers of the balanced ``A`` from scipy's eig (LAPACK geev)."""
    Ab, _ = sla.matrix_balance(A, permute=True, separate=False)
    w, vl, vr = sla.eig(Ab, left=True, right=True)
    vl = vl / np.linalg.norm(vl, axis=0)
    vr = vr / np.linalg.norm(vr, axis=0)
    return w, 1.0 / np.abs(np.sum(vl.conj() * vr, axis=0))


def _paired(a, b):
    """Indices pairing the eigenvalues ``a`` with ``b`` (least total distance)."""
    return linear_sum_assignment(np.abs(a[:, None] - b[None, :]))


def _matrix(kind: str, n: int, rng):
    A = rng.standard_normal((n, n))
    if kind == "badly scaled":  # rows from 1e-4 to 1e4: balancing matters
        return A * np.logspace(-4, 4, n)[:, None]
    if kind == "nearly triangular":  # non-normal, eigenvalues near the diagonal
        return np.triu(A) + 1e-6 * rng.standard_normal((n, n))
    if kind == "defective-ish":  # a Jordan block of -1 in disguise, perturbed by 1e-10
        Q, _ = np.linalg.qr(A)
        J = -np.eye(n) + np.eye(n, k=1)
        return Q @ J @ Q.T + 1e-10 * rng.standard_normal((n, n))
    return A


@pytest.mark.parametrize("kind", ["random", "badly scaled", "nearly triangular", "defective-ish"])
@pytest.mark.parametrize("seed", range(6))
def test_condition_numbers_match_scipy_eig_with_left_vectors(kind, seed):
    # reference: scipy.linalg.eig(left=True, right=True) (LAPACK geev) on the same balanced matrix
    rng = np.random.default_rng(100 * seed + len(kind))
    n = int(rng.integers(2, 40))
    A = _matrix(kind, n, rng)
    w_ref, k_ref = _geev_condition(A)
    s = eigen_sensitivity(A)
    r, c = _paired(w_ref, s.values)
    well = k_ref[r] < 1e6
    # where the reference's own condition number leaves digits to compare (its vectors are
    # accurate to about kappa eps), the two agree to eight digits
    assert_allclose(s.condition[c][well], k_ref[r][well], rtol=1e-8)
    assert np.all(s.condition[c][~well] > 1e5)  # an ill-conditioned eigenvalue stays so
    # the eigenvalues themselves agree within the first-order bounds
    assert np.all(np.abs(s.values[c] - w_ref[r])[well] <= 10 * (s.error_bound[c][well] + 1e-15 * np.abs(w_ref[r][well])))
    assert kind != "defective-ish" or np.all(s.condition > 1e3)


def test_the_shared_reduction_gives_the_same_answers_as_the_matrix_alone():
    # the app passes the views' shared Schur form; the command line computes its own: same numbers
    rng = np.random.default_rng(7)
    A = rng.standard_normal((30, 30)) * np.logspace(-3, 3, 30)[None, :]
    alone, shared = eigen_sensitivity(A), eigen_sensitivity(A, reduced=balanced_reduction(A))
    r, c = _paired(alone.values, shared.values)
    assert_allclose(shared.values[c], alone.values[r], rtol=1e-10)
    assert_allclose(shared.condition[c], alone.condition[r], rtol=1e-8)
    assert_allclose(shared.error_bound[c], alone.error_bound[r], rtol=1e-8)


def test_the_balanced_reduction_is_a_similarity_of_the_matrix():
    # closed form: A = S Z T Z^H S^-1 with T upper triangular, Z unitary, S diagonal (powers of 2)
    rng = np.random.default_rng(3)
    A = rng.standard_normal((12, 12)) * np.logspace(-5, 5, 12)[:, None]
    A[4, :4] = A[4, 5:] = 0.0  # a row gebal isolates by permutation
    red = balanced_reduction(A)
    assert_allclose(np.tril(red.T, -1), 0.0)
    assert_allclose(red.Z.conj().T @ red.Z, np.eye(12), atol=1e-13)
    assert_allclose(np.log2(red.scale), np.round(np.log2(red.scale)))
    back = (red.scale[:, None] * (red.Z @ red.T @ red.Z.conj().T)) / red.scale[None, :]
    assert_allclose(back, A, atol=1e-12 * np.abs(A).max())
    # the balancing is LAPACK's: the same balanced matrix as scipy's matrix_balance, up to its permutation
    Ab, (scale, perm) = sla.matrix_balance(A, permute=True, separate=True)
    assert_allclose(red.A_bal[np.ix_(perm, perm)], Ab)


@pytest.mark.parametrize("route", ROUTES)
def test_a_long_defective_chain_neither_overflows_nor_reads_as_well_conditioned(route):
    # closed form: A = -I + 10 N (60 stages, N the shift) has the single eigenvalue -1, 60-fold and
    # defective; its eigenvectors' growth (10^59) must not overflow (pytest turns warnings into errors)
    A = -np.eye(60) + 10.0 * np.eye(60, k=1)
    kappa = route(A.astype(complex))
    assert np.all(kappa > 1e15)  # inf where the arithmetic sees an exactly defective eigenvalue
    assert np.all(np.isinf(route(np.diag([1.0, 1.0], k=1).astype(complex))))  # an exact triple zero (closed form)


@pytest.mark.parametrize("route", ROUTES)
@pytest.mark.parametrize("seed", range(4))
def test_both_routes_match_scipy_eig_on_triangular_factors(route, seed):
    # reference: scipy.linalg.eig(left=True, right=True) (LAPACK geev) of the triangular factor itself
    rng = np.random.default_rng(seed)
    n = 25
    T = np.triu(rng.standard_normal((n, n)) + 1j * rng.standard_normal((n, n)))
    T[np.diag_indices(n)] *= np.logspace(-2, 2, n)  # spread the eigenvalues over four decades
    w, vl, vr = sla.eig(T, left=True, right=True)
    ref = 1.0 / np.abs(np.sum((vl / np.linalg.norm(vl, axis=0)).conj() * (vr / np.linalg.norm(vr, axis=0)), axis=0))
    r, c = _paired(w, np.diag(T))
    assert_allclose(route(T)[c], ref[r], rtol=1e-8)


@pytest.mark.parametrize("route", ROUTES)
@pytest.mark.parametrize("t", [0.0, 1e-3, 1.0, 1e6])
def test_condition_numbers_of_a_triangular_matrix_in_closed_form(t, route):
    # closed form (Wilkinson 1965): T = [[1, t, 0], [0, 2, 0], [0, 0, 3]]: for lambda = 1 and 2 the
    # left/right eigenvectors give kappa = sqrt(1 + t^2); lambda = 3 is decoupled, kappa = 1
    T = np.array([[1.0, t, 0.0], [0.0, 2.0, 0.0], [0.0, 0.0, 3.0]], dtype=complex)
    assert_allclose(route(T), [np.sqrt(1 + t * t)] * 2 + [1.0], rtol=1e-12)


def test_complex_poles_of_a_real_matrix_come_in_exact_conjugate_pairs():
    # common practice, no source: a real matrix's complex eigenvalues are conjugate pairs, and
    # LAPACK's geev returns them exactly conjugate; so do the Schur route's (a pole list sorts and
    # prints the two members of a pair alike)
    rng = np.random.default_rng(11)
    A = rng.standard_normal((40, 40)) * np.logspace(-2, 2, 40)[:, None]
    for s in (eigen_sensitivity(A), eigen_sensitivity(A, reduced=balanced_reduction(A))):
        cplx = s.values[s.values.imag != 0]
        assert cplx.size >= 2
        assert np.array_equal(np.sort_complex(cplx), np.sort_complex(np.conj(cplx)))
