"""Per-source variances of many signals from one Schur form shared by every source.

Method. ``A = Z T Z^T`` is reduced once (real Schur form; on a cascade of loops each
strongly connected part is reduced on its own, so ``Z`` is block diagonal up to a
permutation and ``T`` block upper triangular). For a source with input matrix ``B_s`` and
intensity ``W_s`` the stationary covariance in Schur coordinates solves

    T Y_s + Y_s T^T + (Z^T B_s) W_s (Z^T B_s)^T = 0,

and ``Y_s`` is zero outside the coordinates the source reaches: those coupled, through the
nonzero pattern of ``T``, to the rows where ``Z^T B_s`` is nonzero. The reached set keeps
whole diagonal blocks, so ``T`` restricted to it is again quasi-triangular, and the
Bartels-Stewart back substitution runs on that part only (exact: the other coordinates
of the solution are exactly zero). The variance of output row ``c_i`` is then
``(c_i Z) Y_s (c_i Z)^T``, with ``C Z`` formed once and kept sparse when it is (``Z`` is
block diagonal on a cascade), or ``c_i X_s c_i^T`` with ``X_s = Z Y_s Z^T`` when that is
cheaper. Each share is the exact variance of that source; nothing is sampled or reduced.
"""
from __future__ import annotations

import numpy as np
import scipy.linalg as sla
import scipy.sparse as sp
from scipy.sparse.csgraph import breadth_first_order, connected_components

__all__ = ["variances_by_source"]


# Leaves of the recursive solver (LAPACK's dtrsyl below this size).
_LEAF = 64
# Off-diagonal parts of T sparser than this are multiplied as sparse matrices, when they
# span more than _SPARSE_MIN rows (below that the sparse bookkeeping costs more).
_SPARSE_FILL = 0.2
_SPARSE_MIN = 200


def _lyapunov_in_schur_coordinates(T: np.ndarray, Q: np.ndarray) -> np.ndarray:
    """``T Y + Y T^T + Q = 0`` for an upper quasi-triangular ``T`` (Bartels-Stewart).

    The recursion is that of :func:`loopwright.engine.norms.lyapunov_from_schur` (halve the
    larger dimension, solve the trailing half, update, solve the leading half); the
    updates multiply by ``T``'s off-diagonal parts as sparse matrices when ``T`` is sparse
    (a cascade of loops: coupling only between neighbouring parts), so the work follows
    the coupling instead of the square of the size.
    """
    n = T.shape[0]
    Ts = sp.csr_matrix(T) if n and np.count_nonzero(T) <= _SPARSE_FILL * n * n else None
    try:
        Y = _sylvester(T, Ts, 0, n, 0, n, -Q)
    except _LeafRescaled:
        Y, scale, info = sla.lapack.dtrsyl(T, T, -Q, trana="N", tranb="T")
        if info < 0:
            raise ValueError(f"dtrsyl rejected argument {-info}") from None
        Y = Y / scale
    return 0.5 * (Y + Y.T)


class _LeafRescaled(Exception):
    pass


def _split_at(T: np.ndarray, a: int, b: int) -> int:
    """A split point near the middle of ``[a, b)`` that does not cut a 2x2 diagonal block."""
    k = a + (b - a) // 2
    if k > a and T[k, k - 1] != 0.0:
        k += 1
    if k >= b:
        k = a + max(1, (b - a) // 2 - 1)
    return k


def _sylvester(T, Ts, ra, rb, ca, cb, C):
    """``T[ra:rb, ra:rb] X + X T[ca:cb, ca:cb]^T = C`` by recursive splitting."""
    m, n = rb - ra, cb - ca
    if m <= _LEAF and n <= _LEAF:
        Y, scale, info = sla.lapack.dtrsyl(T[ra:rb, ra:rb], T[ca:cb, ca:cb], C, trana="N", tranb="T")
        if info < 0:
            raise ValueError(f"dtrsyl rejected argument {-info}")
        if scale != 1.0:
            raise _LeafRescaled
        return Y
    if m >= n:
        k = _split_at(T, ra, rb)
        X2 = _sylvester(T, Ts, k, rb, ca, cb, C[k - ra :])
        upd = (Ts[ra:k, k:rb] @ X2) if Ts is not None and m > _SPARSE_MIN else T[ra:k, k:rb] @ X2
        X1 = _sylvester(T, Ts, ra, k, ca, cb, C[: k - ra] - upd)
        return np.vstack([X1, X2])
    k = _split_at(T, ca, cb)
    X2 = _sylvester(T, Ts, ra, rb, k, cb, C[:, k - ca :])
    upd = (Ts[ca:k, k:cb] @ X2.T).T if Ts is not None and n > _SPARSE_MIN else X2 @ T[ca:k, k:cb].T
    X1 = _sylvester(T, Ts, ra, rb, ca, k, C[:, : k - ca] - upd)
    return np.hstack([X1, X2])


class _Reach:
    """Which Schur coordinates a set of driven coordinates reaches through ``T``."""

    def __init__(self, T: np.ndarray):
        n = T.shape[0]
        pattern = sp.csr_matrix(T != 0)
        # coordinate j drives i when T[i, j] != 0: edges j -> i
        ncomp, self.labels = connected_components(pattern, directed=True, connection="strong")
        rows, cols = pattern.nonzero()
        cross = self.labels[rows] != self.labels[cols]
        self.dag = sp.csr_matrix(
            (np.ones(int(cross.sum())), (self.labels[cols[cross]], self.labels[rows[cross]])), shape=(ncomp, ncomp)
        )
        self.members = [[] for _ in range(ncomp)]
        for i, c in enumerate(self.labels.tolist()):
            self.members[c].append(i)
        self._cache: dict[int, np.ndarray] = {}
        self.n = n

    def parts_from(self, part: int) -> np.ndarray:
        if part not in self._cache:
            self._cache[part] = breadth_first_order(self.dag, part, directed=True, return_predecessors=False)
        return self._cache[part]

    def coordinates(self, driven: np.ndarray) -> np.ndarray:
        parts = set()
        for part in np.unique(self.labels[driven]).tolist():
            parts.update(self.parts_from(part).tolist())
        return np.sort(np.concatenate([np.asarray(self.members[p], dtype=np.int64) for p in parts])) if parts else np.zeros(0, np.int64)


def variances_by_source(T_real: np.ndarray, Z_real: np.ndarray, C: np.ndarray, inputs: dict) -> dict[str, np.ndarray]:
    """Stationary variance of every row of ``C x`` due to each white source, separately.

    Parameters
    ----------
    T_real, Z_real : (n, n) ndarray
        Real Schur form of a stable ``A`` (``A = Z T Z^T``).
    C : (p, n) ndarray
        Output rows (in the same coordinates as ``A``).
    inputs : dict
        Source name -> ``(B_s, W_s)``: input matrix (n, w) and intensity (w, w).

    Returns
    -------
    dict
        Source name -> (p,) ndarray of variances (clipped at 0 against rounding).
    """
    n = T_real.shape[0]
    p = C.shape[0]
    reach = _Reach(T_real)
    Ct = C @ Z_real  # (p, n), once for all sources
    Ct_sparse = sp.csc_matrix(Ct)
    C_sparse = sp.csr_matrix(C)
    out: dict[str, np.ndarray] = {}
    for name, (Bs, Ws) in inputs.items():
        Bt = Z_real.T @ Bs  # (n, w)
        driven = np.flatnonzero(np.any(Bt != 0, axis=1))
        if driven.size == 0:
            out[name] = np.zeros(p)
            continue
        R = reach.coordinates(driven)
        Bt_R = Bt[R]
        Y = _lyapunov_in_schur_coordinates(T_real[np.ix_(R, R)], Bt_R @ Ws @ Bt_R.T)
        CR = Ct_sparse[:, R]
        r = R.size
        if CR.nnz * r <= n * r * r + 2 * C_sparse.nnz * r:
            # quadratic forms in Schur coordinates, with the rows of C Z that touch R
            prod = CR @ Y  # (p, r) dense
            v = np.asarray(CR.multiply(prod).sum(axis=1)).ravel()
        else:
            # more signal rows than states and C sparse (each signal reads a few states):
            # c X c^T = (c Z_R Y) . (c Z_R) with Z_R Y formed once, n r^2 instead of p r^2
            ZR = Z_real[:, R]
            W = ZR @ Y
            v = np.einsum("ij,ij->i", np.asarray(C_sparse @ W), np.asarray(C_sparse @ ZR))
        out[name] = np.maximum(v, 0.0)
    return out
