"""Frequency and time responses of a path ``(A, B, C, D)`` of the assembled model.

Frequency responses reduce ``A`` once to a unitary triangular (complex Schur) form, per
strongly connected part when the model is a cascade, and solve the shifted triangular
systems ``(s I - T) X = Z^H B`` for all frequencies together: a blocked back substitution
whose off-diagonal work is matrix products across every frequency at once. The reduction
is unitary, so each solve is backward stable; where the change of coordinates cancels
(entries far below the response's peak, as on long chains) one step of iterative
refinement in the original coordinates restores entry-wise relative accuracy. Reusing one
:class:`ReducedModel` across many input/output pairs is what makes the path audit cheap
on large models.

Time responses use exact discretisation on a uniform grid: zero-order hold for
piecewise-constant inputs, first-order hold for ramps and sines, both from one augmented
matrix exponential. A run whose input is held at one value throughout (a step, an impulse,
a free response) is a power sequence of the step's matrix: on small models its states come
from ``log2 N`` squarings and products instead of ``N`` single steps, whose interpreter
overhead is the cost there. Runs that diverge stop early and say so (``diverged``/``message``).

Caveat: the time grid must be uniform; the impulse response omits the ``D delta(t)`` term.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property
from typing import Any

import numpy as np
import scipy.linalg as sla

from loopwright.engine.errors import DimensionError, ParameterError, UnknownNameError

__all__ = [
    "ReducedModel",
    "reduce_model",
    "frequency_response",
    "reduced_response",
    "magnitude",
    "magnitude_db",
    "phase_deg",
    "real_imag",
    "auto_frequency_grid",
    "refine_grid_at_peaks",
    "TimeResult",
    "discretise",
    "simulate",
    "step_response",
    "impulse_response",
    "initial_response",
    "initial_state",
    "source_inputs",
    "source_run",
    "DIVERGENCE_LIMIT",
]

#: A state magnitude above this ends a time run as diverged (long before float overflow).
DIVERGENCE_LIMIT = 1e100

# Rows per block in the blocked back substitution: large enough that the off-block
# update is a real matrix product, small enough that the in-block loop stays short.
_BLOCK = 48
# Bound on the complex entries (n x columns) held at once while solving.
_MAX_ENTRIES = 4_000_000
#: Relative accuracy asked of each response entry, and the most refinement steps spent on it.
_REFINE_RTOL = 1e-12
_REFINE_STEPS = 8
_EPS = np.finfo(float).eps
# An automatic frequency grid ends within 1e-30 .. 1e30 rad/s (decade exponents) and has at
# most this many log-spaced points (60 per decade over 40 decades is 2400; the cap only
# thins a grid stretched by a badly scaled model).
_AUTO_EXPONENTS = (-30.0, 30.0)
_AUTO_MAX_POINTS = 20_000
# Peaks polished per pass of refine_grid_at_peaks (each adds a few points).
_MAX_REFINED_PEAKS = 64


def _as_system(A, B, C, D) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Normalise ``(A, B, C, D)`` to 2-D float arrays with consistent shapes.

    ``B`` may be given as a flat vector for a single input and ``C`` as a flat vector for
    a single output; ``D=None`` means zeros.
    """
    A = np.asarray(A, dtype=float)
    A = A.reshape(0, 0) if A.size == 0 else np.atleast_2d(A)
    if A.ndim != 2 or A.shape[0] != A.shape[1]:
        raise DimensionError(f"A must be square (n, n); got shape {A.shape}")
    n = A.shape[0]
    B = np.asarray(B, dtype=float)
    C = np.asarray(C, dtype=float)
    if B.ndim != 2:
        B = B.reshape(n, -1)
    if C.ndim != 2:
        C = C.reshape(-1, n)
    if B.shape[0] != n:
        raise DimensionError(f"B must have n = {n} rows to match A; got shape {B.shape}")
    if C.shape[1] != n:
        raise DimensionError(f"C must have n = {n} columns to match A; got shape {C.shape}")
    m, p = B.shape[1], C.shape[0]
    D = np.zeros((p, m)) if D is None else np.asarray(D, dtype=float)
    if D.size == 0 and p * m == 0:
        D = np.zeros((p, m))
    D = np.atleast_2d(D)
    if D.shape != (p, m):
        raise DimensionError(f"D must have shape (p, m) = ({p}, {m}) to match C and B; got {D.shape}")
    for name, arr in (("A", A), ("B", B), ("C", C), ("D", D)):
        if not np.all(np.isfinite(arr)):
            raise ParameterError(f"{name} has entries that are not finite numbers", field=name)
    return A, B, C, D


#: From this many states on, products with the Schur vectors go through their real form
#: (:meth:`ReducedModel.to_original`); below, one complex product costs less than the steps.
_ROTATIONS_MIN_STATES = 48


@dataclass(frozen=True)
class ReducedModel:
    """``A`` reduced once for fast evaluation: ``A = S Z T Z^H S^-1``.

    Attributes
    ----------
    T : (n, n) complex ndarray
        Upper triangular (complex Schur form of ``S^-1 A S``).
    Z : (n, n) complex ndarray
        Unitary Schur vectors.
    scale : (n,) ndarray
        Diagonal balancing similarity ``S`` (powers of two, exact; ones unless balancing
        was asked for).
    T_real, Z_real : (n, n) ndarray
        The real Schur form and its orthogonal vectors (for Lyapunov solves).
    A_bal : (n, n) ndarray
        ``S^-1 A S`` (for residuals in the original sparsity pattern).
    """

    T: np.ndarray
    Z: np.ndarray
    scale: np.ndarray
    T_real: np.ndarray
    Z_real: np.ndarray
    A_bal: np.ndarray | None = None

    @property
    def n(self) -> int:
        return self.T.shape[0]

    @property
    def poles(self) -> np.ndarray:
        """Eigenvalues of ``A``, shape (n,)."""
        return np.diag(self.T).copy()

    def times_a(self, X: np.ndarray) -> np.ndarray:
        """``A_bal @ X`` for a complex (n, r) ``X`` (the residuals of the refinement), the
        cheap way: by its nonzeros when ``A_bal`` is sparse (an assembled loop: a 400-state
        chain of loops has 1,480 nonzeros of 160,000; 6 ms instead of 84 ms for 1,000
        columns), else as two real products (numpy would make ``A_bal`` complex: twice the
        operations)."""
        op = self._a_operator
        if op is not None:
            return op @ X
        return self.A_bal @ X.real + 1j * (self.A_bal @ X.imag)

    @cached_property
    def _a_operator(self):
        """``A_bal`` in compressed rows when at most a tenth of it is nonzero, else None."""
        A = self.A_bal
        if A is None or A.size == 0 or np.count_nonzero(A) > 0.1 * A.size:
            return None
        from scipy.sparse import csr_array

        return csr_array(A)

    def to_original(self, X: np.ndarray) -> np.ndarray:
        """``Z @ X`` for a complex (n, r) ``X``, the cheap way: ``Z = Z_real G`` with ``G``
        the real-to-complex step of the Schur form (LAPACK's rotations of each 2 x 2 block:
        two nonzeros per column), so the dense product is real times complex, two real
        products instead of one complex one (half the operations)."""
        G = self._rotations
        if G is None:
            return self.Z @ X
        Y = G @ X
        return self.Z_real @ Y.real + 1j * (self.Z_real @ Y.imag)

    def to_reduced(self, R: np.ndarray) -> np.ndarray:
        """``Z^H @ R`` for a complex (n, r) ``R``, the cheap way (see :meth:`to_original`)."""
        G = self._rotations
        if G is None:
            return self.Z.conj().T @ R
        Zt = self.Z_real.T
        return G.conj().T @ (Zt @ R.real + 1j * (Zt @ R.imag))

    @cached_property
    def _rotations(self):
        """``G = Z_real^T Z`` in compressed rows: the diagonal and, for each 2 x 2 block of
        ``T_real`` (a nonzero below its diagonal), the block's other two entries; None for a
        small model (where the dense product is cheap) or without the real form. Only those
        entries are formed (a column of ``Z_real`` against a column of ``Z``): the others are
        zero but for rounding (the rotations act on disjoint pairs of columns)."""
        if self.Z_real is None or self.T_real is None or self.n < _ROTATIONS_MIN_STATES:
            return None
        from scipy.sparse import csr_array

        n = self.n
        pairs = np.nonzero(np.diag(self.T_real, -1))[0]
        rows = np.concatenate([np.arange(n), pairs, pairs + 1])
        cols = np.concatenate([np.arange(n), pairs + 1, pairs])
        vals = np.einsum("ki,ki->i", self.Z_real[:, rows], self.Z[:, cols])
        return csr_array((vals, (rows, cols)), shape=(n, n))

    def input_matrix(self, B: np.ndarray) -> np.ndarray:
        """``Z^H S^-1 B``: an input matrix in the reduced coordinates, shape (n, m)."""
        return self.Z.conj().T @ (np.asarray(B, dtype=float) / self.scale[:, None])

    def output_matrix(self, C: np.ndarray) -> np.ndarray:
        """``C S Z``: an output matrix in the reduced coordinates, shape (p, n)."""
        return (np.asarray(C, dtype=float) * self.scale[None, :]) @ self.Z


def reduce_model(A, *, balance: bool = False) -> ReducedModel:
    """Reduce ``A`` to complex Schur form, once (optionally balanced first).

    Parameters
    ----------
    A : (n, n) array_like
        State matrix.
    balance : bool
        Apply a diagonal balancing similarity first. Off by default: on assembled loops
        it did not improve the frequency responses (the refinement step takes care of
        entry-wise accuracy) and it cost Lyapunov solves two digits on a long cascade.

    Returns
    -------
    ReducedModel

    References
    ----------
    A. J. Laub, "Efficient multivariable frequency response computations", IEEE Trans.
    Automatic Control 26(2), 1981 (from memory): reduce once, then solve cheap shifted
    systems per frequency. We use the Schur form rather than the Hessenberg form so that
    the shifted systems are triangular and can be solved for all frequencies together.
    """
    A = np.atleast_2d(np.asarray(A, dtype=float))
    n = A.shape[0]
    if n == 0:
        e = np.zeros((0, 0))
        return ReducedModel(e.astype(complex), e.astype(complex), np.ones(0), e, e, e)
    if balance:
        # Balancing without permutation keeps the similarity diagonal (exact powers of 2).
        _, (scale, _perm) = sla.matrix_balance(A, permute=False, separate=True)
    else:
        scale = np.ones(n)
    Ab = A / scale[:, None] * scale[None, :]
    blocks = _triangular_blocks(Ab)
    if len(blocks) == 1:
        T_real, Z_real = sla.schur(Ab, output="real")
        T, Z = sla.rsf2csf(T_real, Z_real)
        return ReducedModel(np.triu(T), Z, scale, T_real, Z_real, Ab)
    # A cascade (chains of loops, prefilters, sources' shaping filters) is block triangular
    # up to a permutation: a Schur form of each diagonal block, placed at the permuted
    # positions, is a Schur form of the whole matrix, at a fraction of the cost. All the
    # products below are block by block (O(n^2 b) for blocks of size b).
    perm = np.concatenate(blocks)
    Ap = Ab[np.ix_(perm, perm)]
    starts = np.cumsum([0] + [idx.size for idx in blocks])
    zr_list, u_list, tr_list, tc_list = [], [], [], []
    for a, b in zip(starts[:-1], starts[1:]):
        tr, zr = sla.schur(Ap[a:b, a:b], output="real")
        tc, zc = sla.rsf2csf(tr, zr)
        zr_list.append(zr)
        u_list.append(zr.T @ zc)  # unitary: the real-to-complex Schur step of this block
        tr_list.append(tr)
        tc_list.append(np.triu(tc))
    T_real = Ap.copy()
    for (a, b), zr in zip(zip(starts[:-1], starts[1:]), zr_list):
        T_real[a:b, :] = zr.T @ T_real[a:b, :]
    for (a, b), zr in zip(zip(starts[:-1], starts[1:]), zr_list):
        T_real[:, a:b] = T_real[:, a:b] @ zr
    T = T_real.astype(complex)
    for (a, b), u in zip(zip(starts[:-1], starts[1:]), u_list):
        T[a:b, :] = u.conj().T @ T[a:b, :]
    for (a, b), u in zip(zip(starts[:-1], starts[1:]), u_list):
        T[:, a:b] = T[:, a:b] @ u
    Z_real = np.zeros((n, n))
    Z = np.zeros((n, n), dtype=complex)
    for (a, b), zr, u, tr, tc in zip(zip(starts[:-1], starts[1:]), zr_list, u_list, tr_list, tc_list):
        idx = perm[a:b]
        Z_real[idx, a:b] = zr
        Z[idx, a:b] = zr @ u
        T_real[a:b, a:b] = tr
        T[a:b, a:b] = tc
        T_real[b:, a:b] = 0.0  # exactly zero: no coupling back up the cascade
    return ReducedModel(np.triu(T), Z, scale, T_real, Z_real, Ab)


def _triangular_blocks(A: np.ndarray) -> list[np.ndarray]:
    """State index sets of the strongly connected parts of ``A``'s coupling graph, ordered
    so that ``A`` permuted accordingly is block upper triangular."""
    from scipy.sparse import csr_matrix
    from scipy.sparse.csgraph import connected_components

    n = A.shape[0]
    nz = A != 0
    ncomp, labels = connected_components(csr_matrix(nz), directed=True, connection="strong")
    if ncomp == 1:
        return [np.arange(n)]
    rows, cols = np.nonzero(nz)
    # state r depends on state c: its part must come no later than c's part
    edges = {(a, b) for a, b in zip(labels[rows].tolist(), labels[cols].tolist()) if a != b}
    import networkx as nx

    g = nx.DiGraph()
    g.add_nodes_from(range(ncomp))
    g.add_edges_from(edges)
    order = list(nx.lexicographical_topological_sort(g))
    members = [np.nonzero(labels == c)[0] for c in range(ncomp)]
    return [members[c] for c in order]


def _shifted_solve(T: np.ndarray, s: np.ndarray, R: np.ndarray) -> np.ndarray:
    """Solve ``(s_l I - T) X_l = R`` for every shift ``s_l``.

    Parameters
    ----------
    T : (n, n) complex ndarray, upper triangular
    s : (k,) complex ndarray
    R : (n, m) or (n, k, m) complex ndarray
        One right-hand side for all shifts, or one per shift.

    Returns
    -------
    (n, k, m) complex ndarray
    """
    n, m = R.shape[0], R.shape[-1]
    k = s.size
    X = np.empty((n, k, m), dtype=complex)
    X[:] = R[:, None, :] if R.ndim == 2 else R
    Xf = X.reshape(n, k * m)
    denom = s[None, :] - np.diag(T)[:, None]  # (n, k)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        inv = 1.0 / denom
        inv = np.repeat(inv, m, axis=1) if m > 1 else inv  # column layout is (k, m) row-major
        stop = n
        while stop > 0:
            start = max(0, stop - _BLOCK)
            if stop < n:
                Xf[start:stop] += T[start:stop, stop:] @ Xf[stop:]
            for i in range(stop - 1, start - 1, -1):
                if i + 1 < stop:
                    Xf[i] += T[i, i + 1 : stop] @ Xf[i + 1 : stop]
                Xf[i] *= inv[i]
            stop = start
    return X


def reduced_response(
    reduced: ReducedModel, Bt: np.ndarray, Ct: np.ndarray, D: np.ndarray, s, *, B=None, C=None,
    rtol: float = _REFINE_RTOL, max_steps: int = _REFINE_STEPS,
) -> np.ndarray:
    """Evaluate ``G(s) = Ct (s I - T)^-1 Bt + D`` at complex points ``s``.

    Parameters
    ----------
    reduced : ReducedModel
    Bt : (n, m) complex ndarray
        Input matrix already in reduced coordinates (:meth:`ReducedModel.input_matrix`).
    Ct : (p, n) complex ndarray
        Output matrix in reduced coordinates (:meth:`ReducedModel.output_matrix`).
    D : (p, m) ndarray
    s : (k,) array_like of complex
        Points of the complex plane, usually ``1j * w_rad_s``.
    B, C : ndarray, optional
        The original ``B`` (n, m) and ``C`` (p, n). When given, frequencies whose
        estimated relative error exceeds ``rtol`` get steps of iterative refinement with
        the residual taken in the original coordinates (up to eight, while they still
        change the result by more than ``rtol``), which restores the relative accuracy
        of each entry there. Two causes are estimated: cancellation in ``C x`` after the
        unitary change of coordinates (long chains far from their peak: the result much
        smaller than ``||C|| ||x||``), and the Schur form's own backward error, about
        ``eps ||A||``, magnified by ``||(sI - A)^-1||`` (at least ``||x|| / ||b||``) near
        lightly damped poles of a stiff model (a flexible structure with modes over many
        decades: ``||A||`` is the square of its highest mode's frequency).
    rtol : float
        Relative accuracy asked of each entry (default ``1e-12``); a plot needs far less.
    max_steps : int
        At most this many refinement steps (default 8; a plot takes one, each step costing
        about what the solve did).

    Returns
    -------
    (k, p, m) complex ndarray
    """
    s = np.atleast_1d(np.asarray(s, dtype=complex))
    Bt = np.asarray(Bt, dtype=complex)
    Ct = np.asarray(Ct, dtype=complex)
    p, m = Ct.shape[0], Bt.shape[1]
    out = np.empty((s.size, p, m), dtype=complex)
    out[:] = np.asarray(D, dtype=float)[None, :, :]
    n = reduced.n
    if n == 0 or p == 0 or m == 0 or s.size == 0:
        return out
    refine = B is not None and C is not None and reduced.A_bal is not None
    if refine:
        Bb = np.asarray(B, dtype=float).reshape(n, m) / reduced.scale[:, None]
        Cb = np.asarray(C, dtype=float).reshape(p, n) * reduced.scale[None, :]
        c_norm = np.linalg.norm(Cb, 2)
        b_norm = np.linalg.norm(Bb, 2)
        a_norm = np.linalg.norm(reduced.A_bal, 1)
    chunk = max(1, _MAX_ENTRIES // max(1, n * m))
    for a in range(0, s.size, chunk):
        sc = s[a : a + chunk]
        X = _shifted_solve(reduced.T, sc, Bt)  # (n, kc, m)
        with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
            Y = np.einsum("pn,nkm->kpm", Ct, X, optimize=True)
            if refine and b_norm > 0:
                x_norm = np.sqrt(np.sum(np.abs(X) ** 2, axis=(0, 2)))  # (kc,)
                y_abs = np.min(np.abs(Y).reshape(Y.shape[0], -1), axis=1)
                # first-order error estimate (common practice, no source: backward error
                # times condition): eps ||C|| ||x|| (1 + ||A|| ||x|| / ||b||) against |y|
                estimate = _EPS * c_norm * x_norm * (1.0 + a_norm * x_norm / b_norm)
                need = np.nonzero(np.isfinite(x_norm) & (estimate > rtol * y_abs))[0]
                if need.size:
                    Y[need] = _refined_outputs(reduced, X[:, need, :], sc[need], Bb, Cb, rtol, max_steps)
            out[a : a + chunk] += Y
    return out


def _refined_outputs(reduced: ReducedModel, X: np.ndarray, s: np.ndarray, Bb: np.ndarray, Cb: np.ndarray,
                     rtol: float, max_steps: int) -> np.ndarray:
    """``Cb x`` after iterative refinement of ``x = (sI - A)^-1 Bb`` from the reduced-coordinate
    solution ``X`` (n, k, m), the residual taken with the original ``A`` (balanced); shape (k, p, m).

    Each step solves for the correction with the Schur form again; a frequency leaves the loop
    once a step changes its outputs by no more than ``rtol`` of their size, or when a step
    does not at least halve the previous correction: then the residual itself is rounding
    (``s x`` and ``A x`` cancel, e.g. just beside a pole at the origin) and that step is
    undone, as further steps would only wander (common practice, no source)."""
    n, k, m = X.shape
    p = Cb.shape[0]
    xb = reduced.to_original(X.reshape(n, k * m)).reshape(n, k, m)
    Y = np.moveaxis((Cb @ xb.reshape(n, k * m)).reshape(p, k, m), 1, 0)
    live = np.arange(k)
    last = np.full(k, np.inf)  # the size of each frequency's previous correction
    for _ in range(max_steps):
        xs, ss = xb[:, live, :], s[live]
        kl = live.size
        ax = reduced.times_a(xs.reshape(n, kl * m)).reshape(n, kl, m)
        resid = Bb[:, None, :] - (xs * ss[None, :, None] - ax)
        rt = reduced.to_reduced(resid.reshape(n, kl * m)).reshape(n, kl, m)
        corr = reduced.to_original(_shifted_solve(reduced.T, ss, rt).reshape(n, kl * m)).reshape(n, kl, m)
        dy = np.moveaxis((Cb @ corr.reshape(n, kl * m)).reshape(p, kl, m), 1, 0)
        step = np.sqrt(np.sum(np.abs(corr) ** 2, axis=(0, 2)))
        take = np.isfinite(step) & (step <= 0.5 * last[live])
        xb[:, live[take], :] += corr[:, take, :]
        Y[live[take]] += dy[take]
        last[live] = step
        size = np.abs(Y[live]).reshape(kl, -1)
        change = np.abs(dy).reshape(kl, -1)
        live = live[take & np.any(change > rtol * size, axis=1)]
        if live.size == 0:
            break
    return Y


def frequency_response(A, B, C, D, w_rad_s, *, reduced: ReducedModel | None = None) -> np.ndarray:
    """Frequency response ``G(jw) = C (jw I - A)^-1 B + D`` of one path.

    Parameters
    ----------
    A, B, C, D : array_like
        State-space matrices, shapes (n, n), (n, m), (p, n), (p, m).
    w_rad_s : (k,) array_like
        Frequencies in rad/s (any sign; 0 allowed).
    reduced : ReducedModel, optional
        A reduction of this ``A`` from :func:`reduce_model`, to reuse across paths.

    Returns
    -------
    (k, p, m) complex ndarray
        Entries are ``inf``/``nan`` where ``jw`` hits an eigenvalue of ``A`` exactly.

    Examples
    --------
    >>> G = frequency_response([[-2.0]], [[1.0]], [[1.0]], [[0.0]], [0.0, 2.0])
    >>> np.round(G[:, 0, 0], 6)
    array([0.5 +0.j  , 0.25-0.25j])
    """
    A, B, C, D = _as_system(A, B, C, D)
    w = np.atleast_1d(np.asarray(w_rad_s, dtype=float))
    red = reduce_model(A) if reduced is None else reduced
    if red.n != A.shape[0]:
        raise DimensionError(f"reduced model has {red.n} states but A has {A.shape[0]}")
    return reduced_response(red, red.input_matrix(B), red.output_matrix(C), D, 1j * w, B=B, C=C)


def magnitude(G: np.ndarray) -> np.ndarray:
    """Absolute value of a response, same shape."""
    return np.abs(G)


def magnitude_db(G: np.ndarray) -> np.ndarray:
    """Magnitude in dB, ``20 log10 |G|`` (``-inf`` where ``G = 0``)."""
    with np.errstate(divide="ignore"):
        return 20.0 * np.log10(np.abs(G))


def phase_deg(G: np.ndarray, *, unwrap: bool = True) -> np.ndarray:
    """Phase in degrees, unwrapped along the frequency axis (axis 0) by default.

    The unwrapped curve is shifted by a multiple of 360 deg so that its first point lies
    in (-180, 180].
    """
    ph = np.angle(G)
    if unwrap and ph.shape[0] > 1:
        finite = np.isfinite(ph)
        if finite.all():
            ph = np.unwrap(ph, axis=0)
    return np.degrees(ph)


def real_imag(G: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Real and imaginary parts of a response."""
    return G.real.copy(), G.imag.copy()


def auto_frequency_grid(
    poles,
    zeros=(),
    *,
    w_min: float | None = None,
    w_max: float | None = None,
    points_per_decade: int = 60,
    decades_beyond: float = 2.0,
) -> np.ndarray:
    """A frequency grid in rad/s that spans the dynamics and cannot miss a resonance.

    The grid runs from ``decades_beyond`` decades below the slowest nonzero pole or zero to
    ``decades_beyond`` decades above the fastest, log-spaced. Around every lightly damped
    pole or zero (damping ratio below 0.5) it adds points spaced a fraction of the
    resonance half-width ``zeta * w_n`` apart, so a peak with ``zeta = 0.001`` is sampled
    within 0.5 % of its height; :func:`refine_grid_at_peaks` then polishes actual peaks.

    Parameters
    ----------
    poles, zeros : array_like of complex
    w_min, w_max : float, optional
        Override the span (rad/s).
    points_per_decade : int
    decades_beyond : float

    Returns
    -------
    (k,) ndarray
        Sorted, unique, positive frequencies in rad/s.
    """
    for name, v in (("w_min", w_min), ("w_max", w_max)):
        if v is not None and not (np.isfinite(v) and v > 0):
            raise ParameterError(f"{name} must be a positive, finite frequency in rad/s; got {v}", field=name)
    roots = np.concatenate([np.atleast_1d(np.asarray(poles, dtype=complex)), np.atleast_1d(np.asarray(zeros, dtype=complex))])
    roots = roots[np.isfinite(roots)]
    mags = np.abs(roots)
    nz = mags[mags > 1e-12 * max(1.0, mags.max() if mags.size else 1.0)]
    lo = nz.min() if nz.size else 1.0
    hi = nz.max() if nz.size else 1.0
    lo_e = np.log10(lo) - decades_beyond if w_min is None else np.log10(w_min)
    hi_e = np.log10(hi) + decades_beyond if w_max is None else np.log10(w_max)
    # extreme poles (a badly scaled model that is still finite) must not stretch the grid
    # over hundreds of decades: the span an automatic end may reach is bounded, and so is
    # the number of log-spaced points
    lo_e = float(np.clip(lo_e, _AUTO_EXPONENTS[0], _AUTO_EXPONENTS[1] - 1.0)) if w_min is None else lo_e
    hi_e = float(np.clip(hi_e, _AUTO_EXPONENTS[0] + 1.0, _AUTO_EXPONENTS[1])) if w_max is None else hi_e
    if not hi_e > lo_e:
        hi_e = lo_e + 1.0
    npts = min(_AUTO_MAX_POINTS, max(10, int(np.ceil((hi_e - lo_e) * points_per_decade)) + 1))
    parts = [np.logspace(lo_e, hi_e, npts)]
    w_lo, w_hi = 10.0**lo_e, 10.0**hi_e
    for r in roots:
        wn = abs(r)
        if wn <= 0 or not (w_lo <= wn <= w_hi):
            continue
        zeta = -r.real / wn
        if abs(zeta) >= 0.5:
            continue
        half = max(abs(zeta), 1e-9) * wn
        wd = abs(r.imag)
        # linear points across +-8 half-widths around the damped frequency, 1/4 apart
        parts.append(wd + half * np.linspace(-8.0, 8.0, 65))
        parts.append(np.array([wn, wn * np.sqrt(max(1.0 - 2.0 * zeta * zeta, 0.0))]))
    w = np.concatenate(parts)
    w = np.unique(w[(w >= w_lo) & (w <= w_hi) & (w > 0)])
    # points equal up to rounding (w_n of one root, w_d of another) would be neighbours of
    # themselves for the peak refinement
    return w[np.concatenate([[True], np.diff(w) > 1e-12 * w[1:]])] if w.size else w


def refine_grid_at_peaks(evaluate, w_rad_s: np.ndarray, gain: np.ndarray, *, passes: int = 4, points: int = 9):
    """Add points around local maxima of ``gain`` until the peaks are resolved.

    Parameters
    ----------
    evaluate : callable
        ``evaluate(w) -> gains`` for a (j,) array of rad/s, returning shape (j,).
    w_rad_s : (k,) ndarray
        Sorted grid (rad/s).
    gain : (k,) ndarray
        Gain on that grid.
    passes, points : int
        Each pass puts ``points`` new frequencies between the neighbours of every local
        maximum, shrinking the bracket by about ``points + 1`` per pass.

    Returns
    -------
    w_rad_s, gain : ndarray
        The merged, sorted grid and gains.
    """
    w = np.asarray(w_rad_s, dtype=float)
    g = np.asarray(gain, dtype=float)
    for _ in range(passes):
        if w.size < 3:
            break
        gi = np.where(np.isfinite(g), g, -np.inf)
        mid, left, right = gi[1:-1], gi[:-2], gi[2:]
        # a peak rises strictly on at least one side: on a flat stretch (a constant gain, an
        # exactly zero path, or values lost to underflow) every point would otherwise be a
        # "peak", and the grid would grow tenfold per pass
        is_peak = (mid >= left) & (mid >= right) & ((mid > left) | (mid > right)) & np.isfinite(g[1:-1])
        peaks = np.nonzero(is_peak)[0] + 1
        if peaks.size == 0:
            break
        if peaks.size > _MAX_REFINED_PEAKS:  # a ripple of rounding noise: polish the highest only
            peaks = np.sort(peaks[np.argsort(gi[peaks])[-_MAX_REFINED_PEAKS:]])
        new = np.concatenate([np.linspace(w[i - 1], w[i + 1], points + 2)[1:-1] for i in peaks])
        new = np.setdiff1d(new, w)
        if new.size == 0:
            break
        gn = np.asarray(evaluate(new), dtype=float)
        w = np.concatenate([w, new])
        g = np.concatenate([g, gn])
        order = np.argsort(w)
        w, g = w[order], g[order]
    return w, g


# ---------------------------------------------------------------------------------------
# time responses


@dataclass
class TimeResult:
    """Outcome of a time run.

    Attributes
    ----------
    t : (N,) ndarray
        Times in s (truncated at the last finite step if the run diverged).
    y : (N, p, ...) ndarray
        Outputs; for step/impulse responses shape (N, p, m) (one column per input).
    x : (N, n, ...) ndarray or None
        States, when requested.
    diverged : bool
        True when the state grew past :data:`DIVERGENCE_LIMIT` and the run stopped.
    message : str
        Empty, or why the run stopped early.
    """

    t: np.ndarray
    y: np.ndarray
    x: np.ndarray | None = None
    diverged: bool = False
    message: str = ""
    output_names: list[str] = field(default_factory=list)


def _uniform_step(t) -> tuple[np.ndarray, float]:
    t = np.asarray(t, dtype=float)
    if t.ndim != 1 or t.size < 2:
        raise ParameterError(f"time grid must be 1-D with at least 2 points; got shape {t.shape}", field="t")
    d = np.diff(t)
    dt = float(d.mean())
    if not dt > 0 or np.max(np.abs(d - dt)) > 1e-9 * max(abs(t[-1]), dt) + 1e-12 * dt:
        raise ParameterError("time grid must be increasing and uniformly spaced", field="t")
    return t, dt


def discretise(A, B, dt: float, *, foh_columns=None):
    """Exact discretisation over one step ``dt`` from one augmented matrix exponential.

    Columns in ``foh_columns`` are held first-order (linear between samples); the others
    are held constant (zero-order hold). With ``u_k`` the input at ``t_k``:
    ``x[k+1] = Phi x[k] + Gamma0 u[k] + Gamma1 (u[k+1] - u[k])``, where ``Gamma1`` is zero
    for zero-order-hold columns.

    Parameters
    ----------
    A : (n, n) array_like
    B : (n, m) array_like
    dt : float
        Step in s.
    foh_columns : sequence of int, optional

    Returns
    -------
    Phi : (n, n) ndarray
    Gamma0, Gamma1 : (n, m) ndarray
    """
    A = np.atleast_2d(np.asarray(A, dtype=float))
    n = A.shape[0]
    B = np.asarray(B, dtype=float).reshape(n, -1)
    m = B.shape[1]
    foh = sorted(set(int(c) for c in (foh_columns or ())))
    q = len(foh)
    M = np.zeros((n + m + q, n + m + q))
    M[:n, :n] = A * dt
    M[:n, n : n + m] = B * dt
    for j, c in enumerate(foh):
        M[n + c, n + m + j] = 1.0  # u_c ramps by (u_c[k+1] - u_c[k]) over the step
    E = sla.expm(M)
    Phi = E[:n, :n]
    Gamma0 = E[:n, n : n + m]
    Gamma1 = np.zeros((n, m))
    for j, c in enumerate(foh):
        Gamma1[:, c] = E[:n, n + m + j]
    return Phi, Gamma0, Gamma1


def simulate(A, B, C, D, t, u=None, *, x0=None, foh_columns=None, keep_states: bool = False) -> TimeResult:
    """Response of ``x' = A x + B u``, ``y = C x + D u`` on a uniform time grid.

    Parameters
    ----------
    A, B, C, D : array_like
        Shapes (n, n), (n, m), (p, n), (p, m).
    t : (N,) array_like
        Uniform times in s, starting where ``x0`` holds.
    u : (N, m) or (N, m, r) array_like, optional
        Input samples ``u(t_k)``; a trailing axis runs ``r`` experiments at once. Zero if
        omitted.
    x0 : (n,) or (n, r) array_like, optional
        Initial state.
    foh_columns : sequence of int, optional
        Input columns to hold first-order (ramps, sines); others are zero-order held.
    keep_states : bool

    Returns
    -------
    TimeResult
        ``y`` has shape (N, p) or (N, p, r).
    """
    A, B, C, D = _as_system(A, B, C, D)
    t, dt = _uniform_step(t)
    n, m, p, N = A.shape[0], B.shape[1], C.shape[0], t.size
    batched = (u is not None and np.ndim(u) == 3) or (x0 is not None and np.ndim(x0) == 2)
    r = 1
    if u is not None and np.ndim(u) == 3:
        r = np.shape(u)[2]
    elif x0 is not None and np.ndim(x0) == 2:
        r = np.shape(x0)[1]
    if u is None:
        U = np.zeros((N, m, r))
    else:
        U = np.asarray(u, dtype=float)
        if U.ndim == 1 and m == 1:
            U = U[:, None]
        if U.ndim == 2:
            U = U[:, :, None]
        if U.shape[:2] != (N, m):
            raise DimensionError(f"input samples must have shape (N, m) = ({N}, {m}); got {U.shape[:2]}")
        U = np.broadcast_to(U, (N, m, r))
    X0 = np.zeros((n, r)) if x0 is None else np.asarray(x0, dtype=float).reshape(n, -1)
    if X0.shape != (n, r):
        X0 = np.broadcast_to(X0, (n, r))
    Phi, G0, G1 = discretise(A, B, dt, foh_columns=foh_columns)
    # Three ways, the cheapest by an operation count: an input held at one value for the
    # whole run (a step, an impulse's zero, a free response) makes the run a power sequence,
    # every state a doubling at a time (see _states_by_doubling); when only the outputs are
    # asked for, the states at every b-th step and the outputs between them from the powers
    # of Phi (see _outputs_in_blocks); else a step at a time.
    Xs = None
    b, lifted = _cheapest_block(n, m, p, r, N) if not keep_states and n * r else (0, np.inf)
    held = _is_constant_in_time(U)
    if held and _doubling_pays(n, m, r, N) and _doubling_cost(n, m, r, N) <= lifted:
        Xs = _states_by_doubling(Phi, G0, U[0], X0, N)
    if Xs is None and b:
        Y = _outputs_in_blocks(Phi, G0, G1, U, X0, C, N, bool(foh_columns), b)
        if Y is not None:  # else the run grows past the limit: step by step finds where
            if np.any(D):
                Y = Y + (D @ U[0] if held else D @ U)
            if not batched:
                Y = Y[:, :, 0]
            return TimeResult(t.copy(), Y, None, False, "")
    if Xs is None:
        Xs = _states_step_by_step(Phi, G0, G1, U, X0, N, bool(foh_columns))
    diverged, message, last = False, "", N
    bad = np.zeros(0, dtype=int)
    if n * r and not np.max(np.abs(Xs[:, 1:])) <= DIVERGENCE_LIMIT:  # one reduction when all is well
        bad = np.nonzero(~(np.abs(Xs[:, 1:]).max(axis=0).max(axis=1) <= DIVERGENCE_LIMIT))[0]
    if bad.size:
        diverged = True
        last = int(bad[0]) + 1  # the first state past the limit is not kept
        message = (
            f"the response grows without bound: the state exceeded {DIVERGENCE_LIMIT:.0e} at t = "
            f"{t[min(last, N - 1)]:.6g} s; the run stopped there (is the loop unstable?)"
        )
    Xs = Xs[:, :last]
    # outputs as one matrix product over every sample (states are stored time-major per state)
    Y = np.moveaxis((C @ Xs.reshape(n, last * r)).reshape(p, last, r), 0, 1)
    if np.any(D):
        Y = Y + (D @ U[0] if held else D @ U[:last])
    Xs = np.moveaxis(Xs, 1, 0)
    if not batched:
        Y = Y[:, :, 0]
        Xs = Xs[:, :, 0]
    return TimeResult(t[:last].copy(), Y, Xs if keep_states else None, diverged, message)


#: Runs of a constant input are propagated by doubling when its operation count, with this
#: many operations charged for each step of a step-at-a-time run (the interpreter's own
#: work per step, measured as about 3 us on a laptop core), is the smaller.
_STEP_OVERHEAD_FLOPS = 30_000.0


def _is_constant_in_time(U: np.ndarray) -> bool:
    """True when every sample of the (N, m, r) inputs equals the first."""
    return bool(U.shape[0] < 2 or np.array_equal(U[1:], np.broadcast_to(U[:1], (U.shape[0] - 1,) + U.shape[1:])))


def _doubling_cost(n: int, m: int, r: int, N: int) -> float:
    """Operations of doubling: about log2 N products of (n + m)-square matrices, and every
    state from one product per doubling."""
    q = n + m
    return 2.0 * q**3 * np.ceil(np.log2(max(N, 2))) + 2.0 * q * q * N * r


def _doubling_pays(n: int, m: int, r: int, N: int) -> bool:
    """Whether doubling costs fewer operations than N single steps."""
    return _doubling_cost(n, m, r, N) < N * (2.0 * n * (n + m) * r + _STEP_OVERHEAD_FLOPS)


def _states_by_doubling(Phi: np.ndarray, G0: np.ndarray, u: np.ndarray, X0: np.ndarray, N: int) -> np.ndarray | None:
    """States (n, N, r) of ``x[k+1] = Phi x[k] + G0 u`` (``u`` (m, r) held for the whole run).

    With ``z = [x; u]`` and ``M = [[Phi, G0], [0, I]]``, ``z[k] = M^k z[0]``. The states
    ``z[0 .. 2T-1]`` are ``[z[0 .. T-1], M^T z[0 .. T-1]]``, so ``log2 N`` squarings of ``M``
    and as many products give every state: a few matrix products in place of N small
    ones (the loop of a step-at-a-time run is the cost on small models). Rounding is that
    of N steps: each state is a product of at most ``log2 N`` powers, each power's error
    that of as many steps. Returns None (run step by step instead) when a power passes
    :data:`DIVERGENCE_LIMIT` or is not finite: a growing loop, where a state the input
    never excites could still be read as an overflow of its power.
    """
    if not np.any(u):  # a free response: the powers of Phi alone
        G0, u = G0[:, :0], u[:0]
    n, m = G0.shape
    r = X0.shape[1]
    q = n + m
    M = np.zeros((q, q))
    M[:n, :n] = Phi
    M[:n, n:] = G0
    M[n:, n:] = np.eye(m)
    Z = np.empty((q, N, r))
    Z[:n, 0] = X0
    Z[n:, 0] = u
    power, T = M, 1
    while T < N:
        if not (np.max(np.abs(power)) <= DIVERGENCE_LIMIT):
            return None
        k = min(T, N - T)
        Z[:, T : T + k] = (power @ Z[:, :k].reshape(q, k * r)).reshape(q, k, r)
        T += k
        if T < N:
            power = power @ power
    return Z[:n]


#: Block lengths tried by :func:`_cheapest_block` (powers of two: ``Phi^b`` by squaring).
_BLOCKS = (4, 8, 16, 32, 64)


def _cheapest_block(n: int, m: int, p: int, r: int, N: int) -> tuple[int, float]:
    """The block length ``b`` for :func:`_outputs_in_blocks` with the smallest operation
    count and that count, or ``(0, inf)`` when single steps cost less (each Python-level
    step charged :data:`_STEP_OVERHEAD_FLOPS`, as in :func:`_doubling_pays`)."""
    stepping = N * (2.0 * n * (n + m) * r + _STEP_OVERHEAD_FLOPS)
    best, best_b = stepping, 0
    for b in _BLOCKS:
        if 2 * b > N:
            break
        blocks = -(-N // b)
        cost = (2.0 * n**3 * np.log2(b)  # Phi^b
                + 2.0 * b * n * n * (p + 2 * m)  # C Phi^j and Phi^j G for j < b
                + blocks * (2.0 * n * n * r + _STEP_OVERHEAD_FLOPS)  # the states at block starts
                + 2.0 * N * r * (p * n + b * p * m + n * m))  # outputs and input terms, all blocks at once
        if cost < best:
            best, best_b = cost, b
    return (best_b, best) if best_b else (0, np.inf)


def _outputs_in_blocks(Phi, G0, G1, U, X0, C, N: int, has_foh: bool, b: int) -> np.ndarray | None:
    """Outputs (N, p, r) of ``x[k+1] = Phi x[k] + (G0 - G1) u[k] + G1 u[k+1]``, ``y = C x``,
    from the states at every ``b``-th step only.

    With ``x0`` a block's first state, ``x[k0 + j] = Phi^j x0 + sum_{i<j} Phi^(j-1-i) v[k0+i]``
    (``v`` the input terms), so a block's outputs are ``[C; C Phi; ...; C Phi^(b-1)] x0`` plus a
    block Toeplitz matrix of the Markov parameters ``C Phi^l G`` times the block's inputs,
    and the next block starts at ``Phi^b x0 + [Phi^(b-1) G ... G] u``. The outputs of all
    blocks are two matrix products; only the N / b block starts are a loop. This is the
    step-by-step recursion regrouped (each output is at most b - 1 steps from a state of the
    recursion, as rounding goes), in N / b interpreter-level steps instead of N: a run of
    2,000 steps of a 400-state loop is 250 products instead of 4,000 (common practice, no
    source: lifting a discrete system over b steps).

    Returns None when a block's start state or ``Phi^b`` passes :data:`DIVERGENCE_LIMIT`
    (or is not finite): the caller then runs step by step, which stops at the sample
    where the run diverges.
    """
    n, r = X0.shape
    m, p = G0.shape[1], C.shape[0]
    with np.errstate(all="ignore"):
        Pb = np.linalg.matrix_power(Phi, b)
        if not np.max(np.abs(Pb)) <= DIVERGENCE_LIMIT:
            return None
        CP = np.empty((b, p, n))  # C Phi^j
        CP[0] = C
        for j in range(1, b):
            CP[j] = CP[j - 1] @ Phi
        Gd = G0 - G1
        terms = [(Gd, 0)] + ([(G1, 1)] if has_foh else [])  # (G, shift): G u[k + shift] enters x[k+1]
        blocks = -(-N // b)
        # inputs per block, (b m, blocks r); a block past the run's end repeats the last input
        # (the states it would drive are never read)
        pad = blocks * b + 1 - N
        Up = np.concatenate([U, np.broadcast_to(U[-1:], (pad,) + U.shape[1:])]) if pad > 0 else U

        def block_inputs(shift):
            W_ = Up[shift : shift + blocks * b].reshape(blocks, b, m, r)
            return np.moveaxis(W_, 0, 2).reshape(b * m, blocks * r)

        starts = np.empty((n, blocks, r))  # the state at each block's first step
        drive = np.zeros((n, blocks * r))  # sum over the block of Phi^(b-1-i) G u[k0+i+shift]
        Yf = np.zeros((b * p, blocks * r))  # the inputs' part of every output
        for G, shift in terms:
            PG = np.empty((b, n, m))  # Phi^l G
            PG[0] = G
            for l in range(1, b):
                PG[l] = Phi @ PG[l - 1]
            Ublk = block_inputs(shift)
            drive += np.concatenate(list(PG[::-1]), axis=1) @ Ublk
            H = np.einsum("lpn,nm->lpm", CP[: b - 1], G)  # C Phi^l G, l < b - 1
            T = np.zeros((b, p, b, m))  # block Toeplitz: block (j, i) is C Phi^(j-1-i) G below the diagonal
            jj, ii = np.tril_indices(b, -1)
            T[jj, :, ii, :] = H[jj - 1 - ii]
            Yf += T.reshape(b * p, b * m) @ Ublk
        drive = drive.reshape(n, blocks, r)
        x = np.array(X0, dtype=float)
        for q in range(blocks):
            starts[:, q] = x
            x = Pb @ x + drive[:, q]
            if not np.max(np.abs(x)) <= DIVERGENCE_LIMIT and q + 1 < blocks:
                return None
        Y = CP.reshape(b * p, n) @ starts.reshape(n, blocks * r) + Yf  # (b p, blocks r)
    Y = Y.reshape(b, p, blocks, r)
    Y = np.moveaxis(Y, 2, 0).reshape(blocks * b, p, r)[:N]  # (N, p, r)
    if not np.all(np.isfinite(Y)):
        return None
    return Y


def _states_step_by_step(Phi, G0, G1, U, X0, N: int, has_foh: bool) -> np.ndarray:
    """States (n, N, r) of ``x[k+1] = Phi x[k] + (G0 - G1) u[k] + G1 u[k+1]``, a step at a time;
    a run that passes :data:`DIVERGENCE_LIMIT` stops at the next check (every 16 steps) and
    the states after it are left infinite."""
    n, r = X0.shape
    Gd = G0 - G1
    Xs = np.empty((n, N, r))
    Xs[:, 0] = X0
    x = X0.copy()
    for k in range(N - 1):
        xn = Phi @ x + Gd @ U[k]
        if has_foh:
            xn += G1 @ U[k + 1]
        x = xn
        Xs[:, k + 1] = x
        if k % 16 == 15:
            big = np.max(np.abs(x)) if x.size else 0.0
            if not (big <= DIVERGENCE_LIMIT):
                Xs[:, k + 2 :] = np.inf
                break
    return Xs

def step_response(A, B, C, D, t) -> TimeResult:
    """Unit-step response from every input, ``y`` shape (N, p, m); zero initial state.

    The step is exact (zero-order hold reproduces a constant input exactly).
    """
    A, B, C, D = _as_system(A, B, C, D)
    m = B.shape[1]
    N = np.size(t)
    U = np.broadcast_to(np.eye(m)[None, :, :], (N, m, m))
    return simulate(A, B, C, D, t, U)


def impulse_response(A, B, C, D, t) -> TimeResult:
    """Unit-impulse response from every input, ``y`` shape (N, p, m).

    The impulse moves the state to ``B`` at ``t = 0+``; the ``D delta(t)`` part of the
    output is not representable on a grid and is left out.
    """
    A, B, C, D = _as_system(A, B, C, D)
    m = B.shape[1]
    N = np.size(t)
    res = simulate(A, B, C, np.zeros_like(D), t, np.zeros((N, m, m)), x0=B)
    return res


def initial_response(A, C, x0, t) -> TimeResult:
    """Free response ``y = C e^{A t} x0``, ``y`` shape (N, p)."""
    A = np.atleast_2d(np.asarray(A, dtype=float))
    n = A.shape[0]
    C = np.asarray(C, dtype=float).reshape(-1, n)
    x0 = np.asarray(x0, dtype=float).reshape(n)
    return simulate(A, np.zeros((n, 1)), C, np.zeros((C.shape[0], 1)), t, None, x0=x0)


def initial_state(model, values: dict[str, Any]) -> np.ndarray:
    """An initial state of the assembled model, set block by block.

    Parameters
    ----------
    model : AssembledModel
    values : dict
        Block name -> a number (all that block's states) or a list of its state values.
        Setting the plant and leaving its estimator at zero starts an estimation error, so
        the error transient shows.

    Returns
    -------
    (n,) ndarray
    """
    x0 = np.zeros(model.A.shape[0])
    for name, val in values.items():
        if name not in model.states:
            import difflib

            raise UnknownNameError(
                f"no block named {name!r} with states; blocks with states: {', '.join(model.states) or 'none'}",
                suggestions=difflib.get_close_matches(name, list(model.states), n=3, cutoff=0.5),
            )
        sl = model.states[name]
        width = sl.stop - sl.start
        arr = np.asarray(val, dtype=float).ravel()
        if arr.size == 1:
            arr = np.full(width, arr[0])
        if arr.size != width:
            raise DimensionError(f"initial state of block {name!r}: {arr.size} values given, the block has {width} states")
        x0[sl] = arr
    return x0


def _waveform_samples(waveform: dict, width: int, t: np.ndarray, dt: float, source_name: str, rng_seed_default: int):
    """Samples (N, width) of one source waveform, and whether it wants first-order hold."""
    kind = (waveform or {}).get("kind", "zero")
    N = t.size

    def vec(key, default):
        a = np.asarray(waveform.get(key, default), dtype=float).ravel()
        if a.size == 1:
            a = np.full(width, a[0])
        if a.size != width:
            raise DimensionError(f"source {source_name!r}: waveform {key!r} has {a.size} values, width is {width}")
        return a

    if kind == "zero":
        return np.zeros((N, width)), False
    if kind == "step":
        amp, t0 = vec("amplitude", 1.0), float(waveform.get("start", 0.0))
        return (t[:, None] >= t0 - 1e-12 * max(1.0, abs(t0))) * amp[None, :], False
    if kind == "ramp":
        slope, t0 = vec("slope", 1.0), float(waveform.get("start", 0.0))
        return np.maximum(t[:, None] - t0, 0.0) * slope[None, :], True
    if kind == "sine":
        amp = vec("amplitude", 1.0)
        w = float(waveform.get("frequency_rad_s", 1.0))
        ph = np.radians(float(waveform.get("phase_deg", 0.0)))
        return np.sin(w * t[:, None] + ph) * amp[None, :], True
    if kind == "white":
        Wm = np.asarray(waveform.get("intensity", 1.0), dtype=float)
        if Wm.ndim == 0:
            Wm = np.eye(width) * float(Wm)
        elif Wm.ndim == 1:
            Wm = np.diag(np.broadcast_to(Wm, (width,)))
        if Wm.shape != (width, width):
            raise DimensionError(f"source {source_name!r}: intensity has shape {Wm.shape}, expected ({width}, {width})")
        seed = waveform.get("seed", rng_seed_default)
        rng = np.random.default_rng(seed)
        # piecewise-constant samples of variance W/dt carry the same low-frequency power
        # as white noise of intensity W
        evals, evecs = np.linalg.eigh((Wm + Wm.T) / 2)
        root = evecs * np.sqrt(np.clip(evals, 0.0, None))[None, :]
        return rng.standard_normal((N, width)) @ root.T / np.sqrt(dt), False
    raise ParameterError(f"source {source_name!r}: unknown waveform kind {kind!r}", field="waveform")


def source_inputs(model, t) -> tuple[np.ndarray, list[int]]:
    """Input samples (N, m) of the assembled model driven by the sources' own waveforms.

    Injections stay zero. White-noise sources without a ``seed`` use their position among
    the sources as seed, so runs are reproducible.

    Returns
    -------
    U : (N, m) ndarray
    foh_columns : list of int
        Columns of ramp and sine sources (first-order hold).
    """
    t, dt = _uniform_step(t)
    m = model.B.shape[1]
    U = np.zeros((t.size, m))
    foh: list[int] = []
    blocks = {b.name: b for b in model.diagram.blocks.values()}
    for idx, name in enumerate(model.sources):
        sl = model.inputs[name]
        width = sl.stop - sl.start
        blk = blocks.get(name)
        waveform = (blk.params.get("waveform") if blk is not None else None) or {"kind": "zero"}
        samples, wants_foh = _waveform_samples(waveform, width, t, dt, name, idx)
        U[:, sl] = samples
        if wants_foh:
            foh.extend(range(sl.start, sl.stop))
    return U, foh


def source_run(model, t, *, outputs=None, x0=None) -> TimeResult:
    """Run the assembled model driven by every source's waveform.

    Parameters
    ----------
    model : AssembledModel
    t : (N,) array_like
        Uniform times in s.
    outputs : list of str, optional
        Signal names to report (all signals if omitted).
    x0 : (n,) array_like, optional

    Returns
    -------
    TimeResult
        ``y`` shape (N, p) over the chosen signals' components; ``output_names`` says
        which.
    """
    U, foh = source_inputs(model, t)
    if outputs is None:
        rows = list(range(model.C.shape[0]))
    else:
        rows = []
        for name in outputs:
            sl = model.signal_slice(name)
            rows.extend(range(sl.start, sl.stop))
    res = simulate(model.A, model.B, model.C[rows], model.D[rows], t, U, x0=x0, foh_columns=foh)
    res.output_names = [model.output_names[i] for i in rows]
    return res

