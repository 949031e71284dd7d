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
of the solution are exactly zero).

Two routes, chosen by operation count:

* batched (dense parts: a ring of loops, where every source reaches every state): the
  sources reaching the same part, or nested parts of nearly the same size, are solved
  together by :func:`loopwright.engine.lyapunov_batch.solve_lyapunov_batch`, every update
  one product with all their right-hand sides side by side. The variances follow from the
  lower triangle ``L`` of each ``Y_s`` (half its diagonal), ``c Y c^T = 2 c L c^T``: with
  ``P = Z_J L`` for the states ``J`` that ``C`` reads, ``v_i = 2 sum_j C_ij P_j . (c_i Z)``
  over the nonzeros of ``C`` (or ``P = C Z L`` directly when ``C`` is dense).
* per source, with sparse updates (large sparse parts: a long cascade): the variance of
  row ``c_i`` is ``(c_i Z) Y_s (c_i Z)^T`` with ``C Z`` kept sparse when it is (``Z`` is
  block diagonal on a cascade), or ``c_i X_s c_i^T`` with ``X_s = Z Y_s Z^T``.

Each share is the exact variance of that source; nothing is sampled or reduced.
"""
from __future__ import annotations

import numpy as np
import scipy.linalg as sla
import scipy.sparse as sp
from scipy.sparse.csgraph import breadth_first_order, connected_components

from loopwright.engine.blas_threads import one_blas_thread
from loopwright.engine.lyapunov_batch import LeafSolvers, solve_lyapunov_batch

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
        dag = sp.coo_matrix(
            (np.ones(int(cross.sum())), (self.labels[cols[cross]], self.labels[rows[cross]])), shape=(ncomp, ncomp)
        ).tocsr()
        dag.sum_duplicates()
        self.dag = dag
        self.ncomp = ncomp
        self.n = n

    def coordinates(self, driven_parts: np.ndarray) -> np.ndarray:
        """Coordinates reached from the parts ``driven_parts``: one breadth-first search from
        an extra node joined to all of them."""
        k = driven_parts.size
        dag = self.dag
        root = self.ncomp
        g = sp.csr_matrix(
            (np.concatenate([dag.data, np.ones(k)]), np.concatenate([dag.indices, driven_parts]),
             np.concatenate([dag.indptr, [dag.indptr[-1] + k]])),
            shape=(root + 1, root + 1),
        )
        parts = breadth_first_order(g, root, directed=True, return_predecessors=False)[1:]
        keep = np.zeros(self.ncomp, dtype=bool)
        keep[parts] = True
        return np.flatnonzero(keep[self.labels])


# Memory for one batch of right-hand sides in the batched route (bytes).
_BATCH_BYTES = 192 * 2**20
# Column blocks of the batched quadratic forms.
_FORM_COLUMNS = 64


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

    Notes
    -----
    Sources reaching the same coordinates are solved together when ``T`` restricted to
    them is dense (:func:`loopwright.engine.lyapunov_batch.solve_lyapunov_batch`: one
    recursive sweep for all of them, every update one wide matrix product); where it is
    sparse (a cascade) each source is solved on its own with sparse updates, when that
    costs fewer operations. The work runs on one BLAS thread (:mod:`blas_threads`).
    """
    # thousands of mid-sized products: one BLAS thread (see blas_threads.one_blas_thread)
    with one_blas_thread():
        return _variances_by_source(T_real, Z_real, C, inputs)


def _variances_by_source(T_real, Z_real, C, inputs):
    n = T_real.shape[0]
    p = C.shape[0]
    reach = _Reach(T_real)
    Ct = C @ Z_real  # (p, n), once for all sources
    Ct_sparse = sp.csc_matrix(Ct)
    C_sparse = sp.csr_matrix(C)
    out: dict[str, np.ndarray] = {}
    groups: dict[bytes, tuple[np.ndarray, list]] = {}
    by_parts: dict[bytes, np.ndarray] = {}
    for name, (Bs, Ws) in inputs.items():
        Bt = Z_real.T @ Bs  # (n, w)
        driven = np.flatnonzero(np.any(Bt != 0, axis=1))
        if driven.size == 0:
            out[name] = np.zeros(p)
            continue
        parts = np.unique(reach.labels[driven])
        key = parts.tobytes()
        if key not in by_parts:
            by_parts[key] = reach.coordinates(parts)
        R = by_parts[key]
        groups.setdefault(R.tobytes(), (R, []))[1].append((name, Bt, Ws))
    dense = []
    for R, members in groups.values():
        r = R.size
        nnz = np.count_nonzero(T_real[np.ix_(R, R)]) if r > _SPARSE_MIN else r * r
        if nnz <= _SPARSE_FILL * r * r and _sparse_is_cheaper(r, nnz, C_sparse):
            TR = T_real[np.ix_(R, R)]
            for name, Bt, Ws in members:
                BtR = Bt[R]
                Y = _lyapunov_in_schur_coordinates(TR, BtR @ Ws @ BtR.T)
                out[name] = _forms_one(Y, R, Ct_sparse, C_sparse, Z_real)
        else:
            dense.append((R, members))
    for U, members in _merge_nested(dense, n):
        out.update(_batched(T_real, U, members, Ct, C_sparse, Z_real))
    return out


# Dense products run some ten times faster per operation than the sparse route's sparse
# products and small leaf solves (measured here); the routes are chosen with this weight.
_SPARSE_PENALTY = 10.0
# Sources whose reached parts nest are solved together on the largest part when it is at
# most this much larger (in coordinates) than their own: the extra coordinates cost up to
# 1.15^3 = 1.5 times the operations, against far fewer and wider products.
_NEST_GROWTH = 1.15


def _sparse_is_cheaper(r: int, nnz: int, C_sparse) -> bool:
    """Operation counts per source: the dense batch (solve ``r^3``, quadratic forms
    ``|J| r^2``) against the sparse route (sparse updates ``nnz r`` per level of the
    recursion, leaf solves ``64 r^2``), the latter weighted by ``_SPARSE_PENALTY``."""
    J = np.unique(C_sparse.indices).size
    dense = float(r) ** 3 + J * float(r) ** 2
    levels = max(1.0, np.log2(max(r, 2) / 64.0) + 1.0)
    sparse = nnz * float(r) * levels + 64.0 * float(r) ** 2
    return _SPARSE_PENALTY * sparse < dense


def _merge_nested(groups, n):
    """Join groups of sources whose reached coordinates nest (a cascade: each part reaches
    the parts downstream) into one batch on the largest set, largest first."""
    order = sorted(groups, key=lambda g: -g[0].size)
    merged = []
    used = [False] * len(order)
    for a, (U, members) in enumerate(order):
        if used[a]:
            continue
        used[a] = True
        inside = np.zeros(n, dtype=bool)
        inside[U] = True
        batch = list(members)
        for b in range(a + 1, len(order)):
            R, more = order[b]
            if R.size * _NEST_GROWTH < U.size:
                break  # sorted by size: the rest are smaller still
            if not used[b] and inside[R].all():
                used[b] = True
                batch.extend(more)
        merged.append((U, batch))
    return merged


def _forms_one(Y, R, Ct_sparse, C_sparse, Z_real):
    """Variances of every output row for one source's ``Y`` on the coordinates ``R``."""
    n = Z_real.shape[0]
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
    return np.maximum(v, 0.0)


def _batched(T_real, R, members, Ct, C_sparse, Z_real):
    """Variances for sources that reach only coordinates in ``R``, solved in batches
    (each source's solution is exactly zero outside the coordinates it reaches)."""
    r = R.size
    p, n = Ct.shape
    TR = T_real[np.ix_(R, R)]
    leaves = LeafSolvers(TR)
    U = np.ascontiguousarray(Ct[:, R])  # c_i Z_R, (p, r)
    # (c Z_R) Y (c Z_R)^T = 2 (c Z_R) L (c Z_R)^T with L the lower triangle of Y (half its
    # diagonal). Either P = U L (p rows) and the row-wise products with U, or, when C is
    # sparse, P = Z_J L for the states J that C reads and
    # v_i = 2 sum_j C_ij P_j . U_i over the nonzeros of C (p r^2 against |J| r^2 + nnz r).
    Ccsc = sp.csc_matrix(C_sparse)
    J = np.flatnonzero(np.diff(Ccsc.indptr))
    via_states = J.size * r + 4 * Ccsc.nnz < p * r
    F = np.ascontiguousarray(Z_real[np.ix_(J, R)]) if via_states else U
    per = max(1, _BATCH_BYTES // (8 * r * r))
    out = {}
    # work arrays reused by every batch (fresh large arrays would cost page faults)
    M_all = np.empty(r * r * min(per, len(members)))
    cols = min(_FORM_COLUMNS, r) * min(per, len(members))
    L_all = np.empty(r * cols)
    P_all = np.empty(F.shape[0] * cols)
    for s0 in range(0, len(members), per):
        batch = members[s0 : s0 + per]
        G = len(batch)
        wmax = max(Bt.shape[1] for _n, Bt, _W in batch)
        Bst = np.zeros((r, wmax, G))  # the sources' input columns side by side (zero-padded)
        Fst = np.zeros((r, wmax, G))  # the same times the intensities
        for g, (_name, Bt, Ws) in enumerate(batch):
            Bst[:, : Bt.shape[1], g] = Bt[R]
            Fst[:, : Bt.shape[1], g] = Bt[R] @ Ws
        M = M_all[: r * r * G].reshape(r, r, G)
        # -B W B^T, lower triangles only: the sweep reads nothing else
        for i in range(r):
            np.multiply(Fst[i, None, 0, :], Bst[: i + 1, 0, :], out=M[i, : i + 1])
            for a in range(1, wmax):
                M[i, : i + 1] += Fst[i, None, a, :] * Bst[: i + 1, a, :]
            np.negative(M[i, : i + 1], out=M[i, : i + 1])
        solve_lyapunov_batch(TR, M, leaves=leaves)
        v = np.zeros((p, G))
        for c0 in range(0, r, _FORM_COLUMNS):
            c1 = min(c0 + _FORM_COLUMNS, r)
            w = c1 - c0
            # L's columns c0:c1 (rows c0: on), diagonal block masked to its lower half
            Lb = L_all[: (r - c0) * w * G].reshape(r - c0, w, G)
            Lb[...] = M[c0:, c0:c1, :]
            Lb[:w] *= _half_lower(w)[:, :, None]
            P = np.matmul(F[:, c0:], Lb.reshape(r - c0, w * G), out=P_all[: F.shape[0] * w * G].reshape(F.shape[0], w * G))
            P = P.reshape(F.shape[0], w, G)
            if via_states:
                Ub = U[:, c0:c1]
                for q, j in enumerate(J.tolist()):
                    lo, hi = Ccsc.indptr[j], Ccsc.indptr[j + 1]
                    rows = Ccsc.indices[lo:hi]
                    v[rows] += Ccsc.data[lo:hi, None] * (Ub[rows] @ P[q])
            else:
                v += np.matmul(U[:, None, c0:c1], P)[:, 0, :]
        v *= 2.0
        for g, (name, _BtR, _Ws) in enumerate(batch):
            out[name] = np.maximum(v[:, g], 0.0)
    return out


def _half_lower(w: int) -> np.ndarray:
    """Lower-triangle mask with halves on the diagonal: ``Y`` symmetric has
    ``c Y c^T = 2 c L c^T`` for ``L = tril(Y) - diag(Y) / 2``."""
    return np.tril(np.ones((w, w))) - 0.5 * np.eye(w)
