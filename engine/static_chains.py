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

__all__ = ["AcyclicFeedthrough", "feedthrough_order", "solve_acyclic_feedthrough"]


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


class AcyclicFeedthrough:
    """``(I - D M)^-1`` of an acyclic feedthrough graph, applied on demand.

    The signals are put in graph order once (:func:`feedthrough_order`); in that order
    ``I - D M`` is unit lower triangular, so its sparse LU factorisation, taken without any
    reordering or pivoting, is the matrix itself: no fill, one nonzero per signal and per
    feedthrough link. :meth:`solve` then gives ``(I - D M)^-1 R`` by forward substitution
    (columns of the inverse) and :meth:`solve_left` gives ``L (I - D M)^-1`` by backward
    substitution (rows of it), in compiled code: each costs one operation per signal and
    per link, times the number of right-hand sides, linear in the number of blocks, without
    ever forming the dense ``ns x ns`` inverse.

    Parameters
    ----------
    DM : (ns, ns) sparse matrix
        ``D M``, acyclic (:class:`ValueError` otherwise, from :func:`feedthrough_order`).

    Attributes
    ----------
    factor_nnz : int
        Nonzeros of the triangular factor: ``ns + nnz(D M)`` (no fill), what a test checks
        instead of a time.
    """

    def __init__(self, DM: sp.spmatrix):
        self.DM = sp.csr_matrix(DM)
        self.ns = self.DM.shape[0]
        self.order = feedthrough_order(self.DM) if self.ns and self.DM.nnz else np.arange(self.ns)
        self._lu = self._factor(self.DM)
        self.factor_nnz = 0 if self._lu is None else int(self._lu.L.nnz + self._lu.U.nnz - self.ns)

    def __getstate__(self) -> dict:
        state = dict(self.__dict__)
        state.pop("_lu")  # a factorisation object does not pickle; it is cheap to make again
        return state

    def __setstate__(self, state: dict) -> None:
        self.__dict__.update(state)
        self._lu = self._factor(self.DM)

    def _factor(self, DM: sp.csr_matrix):
        """LU of ``I - DM`` in graph order (unit lower triangular: the factor is the matrix)."""
        if not self.ns:
            return None
        p = self.order
        T = (sp.identity(self.ns, format="csr") - DM)[p][:, p].tocsc()
        return spla.splu(T, permc_spec="NATURAL", diag_pivot_thresh=0.0, options={"SymmetricMode": True})

    def solve(self, rhs: np.ndarray) -> np.ndarray:
        """``(I - D M)^-1 rhs`` for an ``(ns, k)`` right-hand side (a new array)."""
        R = np.asarray(rhs, dtype=float)
        R = R.reshape(self.ns, -1 if self.ns else (R.shape[-1] if R.ndim == 2 else 0))
        X = np.empty_like(R)
        if self.ns and R.shape[1]:
            X[self.order] = self._lu.solve(np.ascontiguousarray(R[self.order]))
        return X

    def solve_left(self, lhs: np.ndarray) -> np.ndarray:
        """``lhs (I - D M)^-1`` for a ``(k, ns)`` left-hand side (a new array)."""
        L = np.asarray(lhs, dtype=float)
        L = L.reshape(-1 if self.ns else (L.shape[0] if L.ndim == 2 else 0), self.ns)
        Y = np.empty_like(L)
        if self.ns and L.shape[0]:
            Y[:, self.order] = self._lu.solve(np.ascontiguousarray(L[:, self.order].T), trans="T").T
        return Y

    def columns(self, cols: np.ndarray) -> np.ndarray:
        """Columns ``cols`` of ``(I - D M)^-1``: ``(ns, len(cols))``."""
        R = np.zeros((self.ns, len(cols)))
        R[np.asarray(cols, dtype=np.int64), np.arange(len(cols))] = 1.0
        return self.solve(R)

    def rows(self, rows: np.ndarray) -> np.ndarray:
        """Rows ``rows`` of ``(I - D M)^-1``: ``(len(rows), ns)``."""
        L = np.zeros((len(rows), self.ns))
        L[np.arange(len(rows)), np.asarray(rows, dtype=np.int64)] = 1.0
        return self.solve_left(L)

    def row_sum_bound(self) -> np.ndarray:
        """``(I - |D M|)^-1 1``: row ``i`` bounds every ``|(I - D M)^-1[i, j]|`` from above.

        Every entry of the inverse is a sum over the paths from ``j`` to ``i`` of the
        products of the feedthrough gains along them; the same sum of absolute values, summed
        over every ``j`` too, can only be larger. One forward substitution.
        """
        if not self.ns:
            return np.zeros(0)
        S = self.DM.copy()
        S.data = np.abs(S.data)
        with np.errstate(over="ignore", invalid="ignore"):
            x = np.empty(self.ns)
            x[self.order] = self._factor(S).solve(np.ones(self.ns))
        return x


class FeedthroughMatrix(np.lib.mixins.NDArrayOperatorsMixin):
    """The assembled model's ``D = [De, (I - D M)^-1, Db]`` (sources, injections, break),
    with the injection block read only where it is indexed.

    The injection block is ``ns x ns`` and, on a chain, dense (every signal reaches every
    later one): forming it would make every command quadratic in the number of blocks.
    Indexing (``D[rows, cols]``, ``D[:, cols]``, ``D[rows]``, ``np.ix_``) computes just
    the entries asked for, by columns or by rows of the inverse (whichever are fewer);
    anything else (``np.asarray(D)``, arithmetic, ``D.T``) forms the whole matrix once and
    keeps it. With algebraic loops the inverse is dense already and is simply held.

    Parameters
    ----------
    De : (ns, ne) ndarray
        Sources to signals.
    inverse : AcyclicFeedthrough or (ns, ns) ndarray
    Db : (ns, nb) ndarray
        Loop-break input to signals.
    """

    # A caller reading the injection block piece by piece (row by row in a loop) would
    # pay a substitution pass per piece; after this many reads the whole block is formed
    # once instead (a pass costs about as much as forming it on a few thousand signals).
    PASSES_BEFORE_FORMING = 8

    def __init__(self, De: np.ndarray, inverse, Db: np.ndarray):
        self._De, self._inverse, self._Db = De, inverse, Db
        ns, ne = De.shape
        self._ns, self._ne = ns, ne
        self.shape = (ns, ne + ns + Db.shape[1])
        self.ndim, self.size, self.dtype = 2, self.shape[0] * self.shape[1], np.dtype(float)
        self._full: np.ndarray | None = None if isinstance(inverse, AcyclicFeedthrough) else self._assemble_full(inverse)
        self._reads = 0

    @property
    def inverse(self):
        """How ``(I - D M)^-1`` is held: an :class:`AcyclicFeedthrough` (applied on demand) or,
        with algebraic loops, the dense array."""
        return self._inverse

    @property
    def is_formed(self) -> bool:
        """Whether the whole matrix exists in memory (it does not after an acyclic assembly)."""
        return self._full is not None

    def _assemble_full(self, Finv: np.ndarray) -> np.ndarray:
        return np.hstack([self._De, Finv, self._Db]) if self.size else np.zeros(self.shape)

    def dense(self) -> np.ndarray:
        """The whole matrix (formed on the first call and kept)."""
        if self._full is None:
            self._full = self._assemble_full(self._inverse.columns(np.arange(self._ns)))
        return self._full

    def __array__(self, dtype=None, copy=None):
        full = self.dense()
        return full if dtype is None else full.astype(dtype, copy=bool(copy))

    def __array_ufunc__(self, ufunc, method, *inputs, **kwargs):
        inputs = tuple(np.asarray(x) if isinstance(x, FeedthroughMatrix) else x for x in inputs)
        if "out" in kwargs:
            kwargs["out"] = tuple(np.asarray(x) if isinstance(x, FeedthroughMatrix) else x for x in kwargs["out"])
        return getattr(ufunc, method)(*inputs, **kwargs)

    def __len__(self) -> int:
        return self.shape[0]

    def __repr__(self) -> str:
        return f"FeedthroughMatrix(shape={self.shape}, formed={self.is_formed})"

    def __getattr__(self, name: str):
        if name.startswith("_"):  # (also keeps copy and pickle away from the dense form)
            raise AttributeError(name)
        return getattr(self.dense(), name)

    def block(self, rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
        """``D[np.ix_(rows, cols)]`` for index arrays in range, as a new array."""
        rows, cols = np.asarray(rows, dtype=np.int64), np.asarray(cols, dtype=np.int64)
        if self._full is not None:
            return self._full[np.ix_(rows, cols)]
        ns, ne = self._ns, self._ne
        out = np.empty((len(rows), len(cols)))
        src, brk = cols < ne, cols >= ne + ns
        inj = ~(src | brk)
        out[:, src] = self._De[np.ix_(rows, cols[src])]
        out[:, brk] = self._Db[np.ix_(rows, cols[brk] - ne - ns)]
        cj = cols[inj] - ne
        if cj.size and rows.size:
            self._reads += 1
            if (rows.size == ns and cj.size == ns) or self._reads > self.PASSES_BEFORE_FORMING:
                out[:, inj] = self.dense()[np.ix_(rows, cols[inj])]
            elif rows.size <= cj.size:
                out[:, inj] = self._inverse.rows(rows)[:, cj]
            else:
                out[:, inj] = self._inverse.columns(cj)[rows]
        return out

    def __getitem__(self, key):
        if self._full is not None:
            return self._full[key]
        key = key if isinstance(key, tuple) else (key,)
        if len(key) > 2 or any(k is None or k is Ellipsis for k in key):
            return self.dense()[key]
        key = key + (slice(None),) * (2 - len(key))
        picked, local = [], []
        for k, n in zip(key, self.shape):
            every = np.arange(n)
            if isinstance(k, slice):
                picked.append(every[k])
                local.append(slice(None))
            elif isinstance(k, (int, np.integer)):
                picked.append(every[[k]])  # IndexError as numpy words it
                local.append(0)
            else:
                a = np.asarray(k)
                if a.dtype == bool:
                    if a.ndim != 1 or a.shape[0] != n:
                        return self.dense()[key]  # numpy's own error
                    a = np.flatnonzero(a)
                elif a.size == 0:
                    a = a.astype(np.int64)
                elif not np.issubdtype(a.dtype, np.integer):
                    return self.dense()[key]
                a = every[a]  # negative indices counted from the end; IndexError out of range
                uniq, where = np.unique(a, return_inverse=True)
                picked.append(uniq)
                local.append(where.reshape(a.shape))
        return self.block(picked[0], picked[1])[tuple(local)]

    def first_out_of_range(self, limit: float) -> tuple[int, int, float] | None:
        """``(row, column, value)`` of the first entry (row by row) not finite or beyond ``limit``.

        Without forming the matrix when nothing is out of range: the sources' and break's
        columns are checked as they are, the injection block against its row-sum bound
        (:meth:`AcyclicFeedthrough.row_sum_bound`). Only when some entry may be out of range
        is the whole matrix formed, to name the first.
        """
        with np.errstate(invalid="ignore"):
            fine = all(np.all(np.abs(M) <= limit) for M in (self._De, self._Db) if M.size)
            if fine and self._full is None and self._ns:
                fine = bool(np.all(self._inverse.row_sum_bound() <= limit))
            if fine and self._full is None:
                return None
            full = self.dense()
            bad = ~(np.abs(full) <= limit)
        if not bad.any():
            return None
        i, j = (int(k) for k in np.argwhere(bad)[0])
        return i, j, float(full[i, j])
