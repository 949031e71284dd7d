"""Direct-feedthrough elimination in graph order, for chains of static blocks.

The assembly solves ``(I - D M) s = r`` for the signals ``s``. Without algebraic loops the
feedthrough graph (signal ``j`` feeds signal ``i`` when ``(D M)[i, j] != 0``) is acyclic,
so ordering the signals topologically makes ``I - D M`` unit lower triangular: each static
block (gain, junction) is then eliminated once, after everything that feeds it. The cost
is one pass over the wiring per right-hand side, linear in the number of blocks, where a
sum of powers of ``D M`` costs a matrix product per link of the longest chain.
"""
from __future__ import annotations

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

__all__ = ["feedthrough_order", "solve_acyclic_feedthrough"]


def feedthrough_order(DM: sp.spmatrix) -> np.ndarray:
    """Signals in topological order of the feedthrough graph (sources of a chain first).

    Parameters
    ----------
    DM : (ns, ns) sparse matrix
        ``D M``; must have no directed cycle (``I - D M`` is then triangular after the
        permutation returned here).

    Returns
    -------
    (ns,) ndarray of int

    Raises
    ------
    ValueError
        The graph has a cycle (an algebraic loop): use a sparse LU factorisation instead.
    """
    DM = sp.csr_matrix(DM)
    ns = DM.shape[0]
    # Kahn's algorithm on "j feeds i" edges, one frontier at a time (vectorised per level)
    pattern = sp.csr_matrix((np.ones(DM.nnz), DM.indices, DM.indptr), shape=DM.shape)
    pattern.setdiag(0)
    pattern.eliminate_zeros()
    if pattern.nnz != DM.nnz - np.count_nonzero(DM.diagonal()) or np.any(DM.diagonal() != 0):
        raise ValueError("the feedthrough graph has a self-loop")
    feeds = pattern.T.tocsr()  # row j lists the signals fed by j
    indegree = np.diff(pattern.indptr).astype(np.int64)
    order = np.empty(ns, dtype=np.int64)
    frontier = np.flatnonzero(indegree == 0)
    done = 0
    while frontier.size:
        order[done : done + frontier.size] = frontier
        done += frontier.size
        targets = feeds[frontier].indices
        if targets.size == 0:
            break
        np.subtract.at(indegree, targets, 1)
        cand = np.unique(targets)
        frontier = cand[indegree[cand] == 0]
    if done != ns:
        raise ValueError("the feedthrough graph has a cycle")
    return order


def solve_acyclic_feedthrough(DM: sp.spmatrix, rhs: np.ndarray | None = None) -> np.ndarray:
    """``(I - D M)^-1 rhs`` (the whole inverse when ``rhs`` is None) for an acyclic ``D M``.

    The permuted matrix is unit lower triangular, so a factorisation in that natural order
    has no fill-in and no pivoting: its solve is the elimination of every static block in
    graph order.

    Returns
    -------
    (ns, k) ndarray
    """
    ns = DM.shape[0]
    if rhs is None:
        rhs = np.eye(ns)
    if ns == 0:
        return np.zeros((0, rhs.shape[1]))
    order = feedthrough_order(DM)
    F = (sp.identity(ns, format="csr") - sp.csr_matrix(DM))[order][:, order].tocsc()
    lu = spla.splu(F, permc_spec="NATURAL", diag_pivot_thresh=0.0, options={"SymmetricMode": True})
    X = np.empty((ns, rhs.shape[1]))
    X[order] = lu.solve(np.ascontiguousarray(rhs[order], dtype=float))
    return X

