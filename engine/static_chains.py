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
    if np.any(DM.diagonal() != 0):
        raise ValueError("the feedthrough graph has a self-loop")
    # Kahn's algorithm on "j feeds i" edges: row j of the transpose lists what j feeds
    feeds = DM.T.tocsr()
    indptr, indices = feeds.indptr.tolist(), feeds.indices.tolist()
    indegree = np.diff(DM.indptr).tolist()
    order = [i for i in range(ns) if indegree[i] == 0]
    head = 0
    while head < len(order):
        j = order[head]
        head += 1
        for i in indices[indptr[j] : indptr[j + 1]]:
            indegree[i] -= 1
            if indegree[i] == 0:
                order.append(i)
    if len(order) != ns:
        raise ValueError("the feedthrough graph has a cycle")
    return np.asarray(order, dtype=np.int64)


def solve_acyclic_feedthrough(DM: sp.spmatrix, rhs: np.ndarray | None = None, *, out: np.ndarray | None = None) -> np.ndarray:
    """``(I - D M)^-1 rhs`` (the whole inverse when ``rhs`` is None) for an acyclic ``D M``.

    Forward substitution in graph order: each signal is its own right-hand side plus the
    already known signals that feed it, ``s_i = r_i + sum_j (D M)[i, j] s_j``; one row
    operation per signal and per wire, so the cost is linear in the number of blocks (times
    the number of right-hand sides).

    ``out`` (an (ns, k) float array, possibly a view into a bigger one) holds the
    right-hand side and is overwritten with the solution instead (``rhs`` is then ignored).

    Returns
    -------
    (ns, k) ndarray
    """
    DM = sp.csr_matrix(DM)
    ns = DM.shape[0]
    if out is not None:
        X = out
    else:
        X = np.eye(ns) if rhs is None else np.array(rhs, dtype=float, copy=True)
        # reshape(0, -1) cannot infer the columns of an empty diagram's (0, k) right-hand side
        X = X.reshape(ns, -1) if ns else X.reshape(0, X.shape[-1] if X.ndim == 2 else 0)
    if ns == 0 or DM.nnz == 0:
        return X
    order = feedthrough_order(DM)
    indptr, indices, data = DM.indptr, DM.indices, DM.data
    for i in order[np.diff(indptr)[order] > 0].tolist():
        a, b = indptr[i], indptr[i + 1]
        if b - a == 1:
            X[i] += data[a] * X[indices[a]]
        else:
            X[i] += data[a:b] @ X[indices[a:b]]
    return X
