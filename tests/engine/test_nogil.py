"""engine/nogil.py: numpy's LAPACK driver in place of scipy's, with scipy's refusals."""
from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg as sla

from loopwright.engine.nogil import eigenvalues


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_eigenvalues_equal_scipys_of_the_same_driver(seed):
    # reference: scipy.linalg.eigvals (LAPACK geev, the same driver) on random matrices
    A = np.random.default_rng(seed).standard_normal((40, 40))
    ours, ref = np.sort_complex(eigenvalues(A)), np.sort_complex(sla.eigvals(A))
    assert np.max(np.abs(ours - ref)) <= 1e-10 * np.max(np.abs(ref))


def test_a_companion_matrix_gives_its_polynomials_roots():
    # closed form: the companion matrix of (s + 1)(s + 2)(s + 3) has eigenvalues -1, -2, -3
    C = np.array([[-6.0, -11.0, -6.0], [1.0, 0.0, 0.0], [0.0, 1.0, 0.0]])
    assert np.sort(eigenvalues(C).real) == pytest.approx([-3.0, -2.0, -1.0], rel=1e-12)


def test_non_finite_entries_and_empty_matrices():
    with pytest.raises(ValueError, match="infs or NaNs"):
        eigenvalues(np.array([[1.0, np.nan], [0.0, 1.0]]))
    assert eigenvalues(np.zeros((0, 0))).shape == (0,)
