"""Many Lyapunov equations with one quasi-triangular matrix, solved together.

Solves ``T Y_g + Y_g T^T = M_g`` for ``g = 1..G`` at once, ``T`` upper quasi-triangular
(a real Schur form), each ``M_g`` symmetric. The right-hand sides sit side by side in one
``(n, n, G)`` array (source index last), and the recursive Bartels-Stewart scheme (halve the
larger dimension, solve the trailing part, update, solve the leading part) is run once for
all of them, so every update is one matrix product with ``G`` times more columns than a
single solve would have.

Two habits keep every update a product with a block of ``T`` on the LEFT, which in this
layout is one BLAS-3 call on a strided view, without copies:

* symmetry: only the diagonal and lower blocks of ``Y`` are solved for; each solved block
  is mirrored into the upper part at once;
* an update ``X T_cc^T`` that a column split of a lower block needs is done transposed,
  ``T_cc X^T``, on the mirrored solution, into the mirrored position; a block's right-hand
  side is then the sum of its own position and the transpose of its mirror.

The leaves (blocks of at most about ``_LEAF`` rows and columns, never cutting a 2x2
diagonal block of ``T``) solve the Kronecker form ``(T_a (x) I + I (x) T_b) vec X = vec M``
with the inverse of that small matrix, formed once per pair of diagonal blocks (all pairs
at once, by LU with partial pivoting) and applied to all ``G`` right-hand sides in one
product.

This is Bartels-Stewart reorganised, not an approximation: R. H. Bartels and G. W. Stewart,
"Solution of the matrix equation AX + XB = C", Comm. ACM 15(9), 1972; the recursive blocking
follows I. Jonsson and B. Kagstrom, "Recursive blocked algorithms for solving triangular
systems - Part I", ACM TOMS 28(4), 2002 (from memory).
"""
from __future__ import annotations

import numpy as np

__all__ = ["LeafSolvers", "solve_lyapunov_batch"]

# Largest leaf (rows and columns); a leaf may grow by one to keep a 2x2 block whole.
_LEAF = 6


def solve_lyapunov_batch(T: np.ndarray, M: np.ndarray, *, leaves: "LeafSolvers | None" = None) -> np.ndarray:
    """Solve ``T Y_g + Y_g T^T = M_g`` for every ``g``, in place.

    Parameters
    ----------
    T : (n, n) ndarray
        Upper quasi-triangular (real Schur form) with no two eigenvalues summing to zero
        (true when ``T`` is stable).
    M : (n, n, G) ndarray, C-contiguous, float64
        Symmetric right-hand sides, one per last index, of which only the lower triangles
        are read; overwritten by the solutions.
    leaves : LeafSolvers, optional
        The leaf solvers of ``T`` (:class:`LeafSolvers`), to reuse over several batches.

    Returns
    -------
    ndarray
        ``M`` itself, holding the symmetric solutions ``Y_g``.
    """
    n = T.shape[0]
    if M.shape[:2] != (n, n) or M.ndim != 3 or not M.flags.c_contiguous:
        raise ValueError("M must be a C-contiguous (n, n, G) array")
    if n == 0 or M.shape[2] == 0:
        return M
    leaves = LeafSolvers(T) if leaves is None else leaves
    # Convention during the sweep: the right-hand side of entry (i, j) is M[i, j] + M[j, i]
    # (a symmetric right-hand side therefore starts as its strict lower triangle plus half
    # its diagonal). Updates that are naturally right products then go, transposed, into
    # the upper part, and a symmetric update of a diagonal block is one plain subtraction.
    for i in range(n - 1):
        M[i, i + 1 :, :] = 0.0
    M.reshape(n * n, -1)[:: n + 1, :] *= 0.5
    _lyap(leaves, M, 0, len(leaves.edges) - 1)
    return M


class LeafSolvers:
    """The diagonal blocks of ``T`` (about ``_LEAF`` wide, 2x2 blocks kept whole) and, for
    every pair of them, the inverse of the leaf's Kronecker operator.

    The inverses are formed once per ``T`` (batched by shape) and reused for every batch
    of right-hand sides: a leaf solve is then one product with ``G`` columns.
    """

    def __init__(self, T: np.ndarray):
        self.T = T = np.ascontiguousarray(T, dtype=float)
        self.work = np.empty(0)
        n = T.shape[0]
        edges = [0]
        while edges[-1] < n:
            e = min(edges[-1] + _LEAF, n)
            if e < n and T[e, e - 1] != 0.0:
                e += 1
            edges.append(e)
        self.edges = edges
        nb = len(edges) - 1
        pairs = [(i, j) for i in range(nb) for j in range(i + 1)]
        by_shape: dict[tuple[int, int], list[tuple[int, int]]] = {}
        for i, j in pairs:
            by_shape.setdefault((edges[i + 1] - edges[i], edges[j + 1] - edges[j]), []).append((i, j))
        self.inv: dict[tuple[int, int], np.ndarray] = {}
        for (m, k), group in by_shape.items():
            Ta = np.stack([T[edges[i] : edges[i + 1], edges[i] : edges[i + 1]] for i, _ in group])
            Tb = np.stack([T[edges[j] : edges[j + 1], edges[j] : edges[j + 1]] for _, j in group])
            # row-major vec: X[i, j] -> i * k + j; (Ta X)[i, j] = sum_l Ta[i, l] X[l, j]
            # K[p, i, j, l, q] = Ta[p, i, l] delta_jq + delta_il Tb[p, j, q]
            K = np.zeros((len(group), m, k, m, k))
            K[:, :, np.arange(k), :, np.arange(k)] = Ta
            K[:, np.arange(m), :, np.arange(m), :] += Tb
            K = K.reshape(len(group), m * k, m * k)
            try:
                Kinv = np.linalg.inv(K)
            except np.linalg.LinAlgError:
                raise ValueError("the Lyapunov operator is singular: the matrix has eigenvalues summing to zero") from None
            for p, ij in enumerate(group):
                self.inv[ij] = Kinv[p]


def _mid(leaves, ia, ib):
    """The block index splitting blocks ``[ia, ib)`` nearest the middle position."""
    e = leaves.edges
    target = 0.5 * (e[ia] + e[ib])
    k = min(range(ia + 1, ib), key=lambda q: abs(e[q] - target))
    return k


# Columns per product in an update: wide enough for full BLAS speed, small enough that the
# reused workspace stays a few megabytes.
_CHUNK = 4096


def _left_update(leaves, M, rows, cols, inner):
    """``M[rows, cols] -= T[rows, inner] @ M[inner, cols]`` for every right-hand side at once."""
    (r0, r1), (c0, c1), (k0, k1) = rows, cols, inner
    G = M.shape[2]
    src = M[k0:k1, c0:c1, :].reshape(k1 - k0, (c1 - c0) * G)
    dst = M[r0:r1, c0:c1, :].view()
    dst.shape = (r1 - r0, (c1 - c0) * G)  # a view, never a copy (raises otherwise)
    Tb = leaves.T[r0:r1, k0:k1]
    width = src.shape[1]
    step = max(G, _CHUNK // G * G)
    if leaves.work.size < (r1 - r0) * min(step, width):
        leaves.work = np.empty((r1 - r0) * min(step, width) + 1024)
    for j0 in range(0, width, step):
        j1 = min(j0 + step, width)
        # into the reused workspace: fresh large arrays would cost page faults every time
        prod = np.matmul(Tb, src[:, j0:j1], out=leaves.work[: (r1 - r0) * (j1 - j0)].reshape(r1 - r0, j1 - j0))
        dst[:, j0:j1] -= prod


def _lyap(leaves, M, ia, ib):
    """Diagonal blocks ``[ia, ib)``: ``T_aa Y + Y T_aa^T = M_aa`` (the block is symmetric)."""
    if ib - ia == 1:
        _leaf(leaves, M, ia, ia)
        return
    T, e = leaves.T, leaves.edges
    kb = _mid(leaves, ia, ib)
    a, k, b = e[ia], e[kb], e[ib]
    _lyap(leaves, M, kb, ib)
    # block (2,1): T22 Y21 + Y21 T11^T = M21 - Y22 T12^T; the last term transposed (Y22 is
    # symmetric) goes into the mirror position (1,2)
    _left_update(leaves, M, (a, k), (k, b), (k, b))
    _sylv(leaves, M, kb, ib, ia, kb)
    # block (1,1): right-hand side minus T12 Y21 + (T12 Y21)^T, which under the sweep's
    # convention (entry (i, j) stands for M[i, j] + M[j, i]) is M11 -= T12 Y21
    _left_update(leaves, M, (a, k), (a, k), (k, b))
    _lyap(leaves, M, ia, kb)


def _sylv(leaves, M, ia, ib, ja, jb):
    """Lower blocks ``T_rr X + X T_cc^T = M_rc`` (rows: blocks ``[ia, ib)``, columns:
    blocks ``[ja, jb)``, ``jb <= ia``); each solved leaf is mirrored at once."""
    if ib - ia == 1 and jb - ja == 1:
        _leaf(leaves, M, ia, ja)
        return
    T, e = leaves.T, leaves.edges
    if jb - ja == 1 or (ib - ia > 1 and e[ib] - e[ia] >= e[jb] - e[ja]):
        kb = _mid(leaves, ia, ib)
        _sylv(leaves, M, kb, ib, ja, jb)
        _left_update(leaves, M, (e[ia], e[kb]), (e[ja], e[jb]), (e[kb], e[ib]))
        _sylv(leaves, M, ia, kb, ja, jb)
        return
    kb = _mid(leaves, ja, jb)
    _sylv(leaves, M, ia, ib, kb, jb)
    # M[rows, ca:k] -= X2 T[ca:k, k:cb]^T, done transposed into the mirror (rows ca:k)
    _left_update(leaves, M, (e[ja], e[kb]), (e[ia], e[ib]), (e[kb], e[jb]))
    _sylv(leaves, M, ia, ib, ja, kb)


def _leaf(leaves, M, i, j):
    e = leaves.edges
    ra, rb, ca, cb = e[i], e[i + 1], e[j], e[j + 1]
    m, n = rb - ra, cb - ca
    G = M.shape[2]
    rhs = M[ra:rb, ca:cb, :] + M[ca:cb, ra:rb, :].transpose(1, 0, 2)
    X = (leaves.inv[i, j] @ rhs.reshape(m * n, G)).reshape(m, n, G)
    if i == j:
        M[ra:rb, ca:cb, :] = 0.5 * (X + X.transpose(1, 0, 2))
    else:
        M[ra:rb, ca:cb, :] = X
        M[ca:cb, ra:rb, :] = X.transpose(1, 0, 2)
