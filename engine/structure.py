"""Structure of a model or a path: poles, transmission zeros, hidden modes, minimal form.

* Poles come with damping ratio and natural frequency.
* Controllability and observability of each mode use the PBH rank test
  (``rank [A - lambda I, B] = n``), with a tolerance relative to the matrix norms; a mode
  that is unstable and hidden (uncontrollable or unobservable) is what this is for.
* The minimal realisation is an orthogonal staircase (Kalman) decomposition: an
  orthonormal basis of the controllable subspace grown by rank-revealing SVDs of Krylov
  blocks, then the same on the dual for observability. It is not a balanced truncation:
  it drops only modes that are exactly (to the tolerance) hidden.
* Transmission zeros are the finite generalised eigenvalues of the Rosenbrock system
  pencil of the minimal realisation (square paths), or the common ones of two random
  square compressions (non-square paths).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg as sla

from loopwright.engine.responses import _as_system

__all__ = [
    "ModeInfo",
    "pole_damping",
    "controllable_part",
    "observable_part",
    "minimal_realization",
    "structural_trim",
    "transmission_zeros",
    "mode_table",
    "hidden_unstable_modes",
    "DEFAULT_RANK_TOL",
]

#: Relative tolerance for numerical rank decisions (relative to the matrix norms).
DEFAULT_RANK_TOL = 1e-9

# Above this many states the PBH test (one SVD per mode) is done only for modes that are
# not clearly stable, to keep the cost bounded.
_PBH_ALL_MODES_MAX_N = 200


def pole_damping(poles) -> tuple[np.ndarray, np.ndarray]:
    """Damping ratio and natural frequency of each pole.

    Parameters
    ----------
    poles : (k,) array_like of complex

    Returns
    -------
    zeta : (k,) ndarray
        ``-Re(p)/|p|``; 1 for a pole at the origin by convention (common practice).
    wn_rad_s : (k,) ndarray
        ``|p|`` in rad/s.
    """
    p = np.atleast_1d(np.asarray(poles, dtype=complex))
    wn = np.abs(p)
    with np.errstate(invalid="ignore", divide="ignore"):
        zeta = np.where(wn > 0, -p.real / np.where(wn > 0, wn, 1.0), 1.0)
    return zeta, wn


def controllable_part(A, B, C, *, tol: float = DEFAULT_RANK_TOL):
    """Orthogonal projection of ``(A, B, C)`` onto its controllable subspace.

    Parameters
    ----------
    A, B, C : array_like
        Shapes (n, n), (n, m), (p, n).
    tol : float
        Relative rank tolerance: a new direction counts when its singular value exceeds
        ``tol * max(1, ||A||, ||B||)``.

    Returns
    -------
    Ac : (r, r) ndarray
    Bc : (r, m) ndarray
    Cc : (p, r) ndarray
    V : (n, r) ndarray
        Orthonormal basis of the controllable subspace (``Ac = V^T A V``).
    """
    A = np.atleast_2d(np.asarray(A, dtype=float))
    n = A.shape[0]
    B = np.asarray(B, dtype=float)
    C = np.asarray(C, dtype=float)
    B = B if B.ndim == 2 else B.reshape(n, -1)
    C = C if C.ndim == 2 else C.reshape(-1, n)
    scale = max(1.0, np.linalg.norm(A, 2) if n else 0.0, np.linalg.norm(B, 2) if B.size else 0.0)
    thresh = tol * scale
    basis = np.zeros((n, 0))
    new = B
    while basis.shape[1] < n and new.shape[1] > 0:
        # project out what is already spanned, twice for orthogonality
        for _ in range(2):
            new = new - basis @ (basis.T @ new)
        if new.size == 0:
            break
        if new.shape[1] == 1:
            # one direction (a single input, every step of a SISO staircase): its singular
            # value is its norm, no decomposition needed
            size = float(np.linalg.norm(new))
            if not size > thresh:
                break
            U = new / size
        else:
            U, s, _ = np.linalg.svd(new, full_matrices=False)
            r = int(np.sum(s > thresh))
            if r == 0:
                break
            U = U[:, :r]
        basis = np.hstack([basis, U])
        new = A @ U
    V = basis
    return V.T @ A @ V, V.T @ B, C @ V, V


def observable_part(A, B, C, *, tol: float = DEFAULT_RANK_TOL):
    """Orthogonal projection of ``(A, B, C)`` onto its observable subspace (dual of
    :func:`controllable_part`). Returns ``(Ao, Bo, Co, W)`` with ``Ao = W^T A W``."""
    At, Ct, Bt, W = controllable_part(np.asarray(A, dtype=float).T, np.asarray(C, dtype=float).T, np.asarray(B, dtype=float).T, tol=tol)
    return At.T, Bt.T, Ct.T, W


def structural_trim(A, B, C) -> np.ndarray:
    """States that the input can reach and that can reach the output through nonzero
    entries of ``A`` (exact: structurally zero couplings carry nothing).

    On an assembled model most states of a long diagram lie off any one path; dropping
    them first makes the numerical reductions cheap.

    Returns
    -------
    (r,) ndarray of int
        Indices of the states kept, in increasing order.
    """
    from scipy.sparse import csr_matrix
    from scipy.sparse.csgraph import breadth_first_order

    A = np.asarray(A)
    n = A.shape[0]
    if n == 0:
        return np.zeros(0, dtype=int)
    # edge c -> r when state r depends on state c (A[r, c] != 0)
    fwd = csr_matrix((A != 0).T)
    bwd = csr_matrix(A != 0)

    def closure(graph, seeds):
        seen = np.zeros(n, dtype=bool)
        for k in np.nonzero(seeds)[0]:
            if not seen[k]:
                seen[breadth_first_order(graph, k, directed=True, return_predecessors=False)] = True
        return seen

    reach = closure(fwd, np.any(np.asarray(B) != 0, axis=1))
    see = closure(bwd, np.any(np.asarray(C) != 0, axis=0))
    return np.nonzero(reach & see)[0]


def minimal_realization(A, B, C, D=None, *, tol: float = DEFAULT_RANK_TOL):
    """Controllable and observable part of ``(A, B, C, D)`` (staircase decomposition).

    States off every structural path are dropped first (exactly, see
    :func:`structural_trim`); the staircase then removes numerically hidden modes.

    Returns
    -------
    (Am, Bm, Cm, Dm) : ndarrays
        Same transfer function, no hidden modes (to ``tol``).

    Examples
    --------
    >>> A = np.diag([-1.0, -2.0]); B = np.array([[1.0], [0.0]]); C = np.array([[1.0, 1.0]])
    >>> minimal_realization(A, B, C)[0].shape
    (1, 1)
    """
    A, B, C, D = _as_system(A, B, C, D)
    keep = structural_trim(A, B, C)
    if keep.size < A.shape[0]:
        A, B, C = A[np.ix_(keep, keep)], B[keep], C[:, keep]
    Ac, Bc, Cc, _ = controllable_part(A, B, C, tol=tol)
    Am, Bm, Cm, _ = observable_part(Ac, Bc, Cc, tol=tol)
    return Am, Bm, Cm, D.copy()


def transmission_zeros(A, B, C, D=None, *, tol: float = DEFAULT_RANK_TOL, minimal: bool = True) -> np.ndarray:
    """Transmission zeros of a path: finite ``z`` where the Rosenbrock pencil
    ``[[A - z I, B], [C, D]]`` loses rank.

    Parameters
    ----------
    A, B, C, D : array_like
    tol : float
        Rank tolerance for the minimal realisation.
    minimal : bool
        Reduce to the minimal realisation first (default), so decoupling zeros of hidden
        modes are not reported as transmission zeros.

    Returns
    -------
    (k,) complex ndarray
        Sorted by real part, then imaginary part.
    """
    A, B, C, D = _as_system(A, B, C, D)
    if minimal:
        A, B, C, D = minimal_realization(A, B, C, D, tol=tol)
    n, m, p = A.shape[0], B.shape[1], C.shape[0]
    if p == m:
        z = _square_zeros(A, B, C, D)
    else:
        rng = np.random.default_rng(12345)
        q = min(p, m)

        def compress():
            L = rng.standard_normal((q, p)) if p > q else np.eye(p)
            R = rng.standard_normal((m, q)) if m > q else np.eye(m)
            return _square_zeros(A, B @ R, L @ C, L @ D @ R)

        z1, z2 = compress(), compress()
        scale = max(1.0, np.linalg.norm(A, 1) if n else 1.0)
        keep = [z for z in z1 if z2.size and np.min(np.abs(z2 - z)) <= 1e-6 * scale]
        z = np.array(keep, dtype=complex)
    return np.array(sorted(z, key=lambda c: (round(c.real, 12), c.imag)), dtype=complex)


def _square_zeros(A, B, C, D) -> np.ndarray:
    n, m = A.shape[0], B.shape[1]
    M = np.block([[A, B], [C, D]])
    N = np.zeros_like(M)
    N[:n, :n] = np.eye(n)
    if M.size == 0:
        return np.zeros(0, dtype=complex)
    ev = sla.eigvals(M, N)
    scale = max(1.0, np.linalg.norm(M, 1))
    ev = ev[np.isfinite(ev)]
    return ev[np.abs(ev) < 1e8 * scale].astype(complex)


@dataclass(frozen=True)
class ModeInfo:
    """One mode of ``A`` with its PBH verdicts.

    ``controllable``/``observable`` are None when the test was skipped (large model,
    clearly stable mode).
    """

    pole: complex
    damping: float
    wn_rad_s: float
    stable: bool
    controllable: bool | None
    observable: bool | None

    @property
    def hidden(self) -> bool:
        return self.controllable is False or self.observable is False


def _pbh_full_rank(M: np.ndarray, n: int, thresh: float) -> bool:
    if M.size == 0:
        return n == 0
    s = np.linalg.svd(M, compute_uv=False)
    return bool(s.size >= n and s[n - 1] > thresh)


def mode_table(A, B, C, *, tol: float = DEFAULT_RANK_TOL, stability_margin: float = 0.0) -> list[ModeInfo]:
    """Every eigenvalue of ``A`` with damping, natural frequency and the PBH rank tests.

    Parameters
    ----------
    A, B, C : array_like
    tol : float
        A PBH matrix is full rank when its n-th singular value exceeds
        ``tol * max(1, ||A||, ||B||)`` (resp. ``||C||``).
    stability_margin : float
        A mode counts as stable when ``Re(p) < -stability_margin``.

    Returns
    -------
    list of ModeInfo
        In the order of ``scipy.linalg.eigvals``; complex pairs are tested once.

    Notes
    -----
    For more than 200 states only modes that are not clearly stable
    (``Re(p) >= -1e-6 |p|``) are tested, so hidden unstable modes are still found.
    """
    A = np.atleast_2d(np.asarray(A, dtype=float))
    n = A.shape[0]
    B = np.asarray(B, dtype=float).reshape(n, -1)
    C = np.asarray(C, dtype=float).reshape(-1, n)
    poles = sla.eigvals(A) if n else np.zeros(0, dtype=complex)
    zeta, wn = pole_damping(poles)
    na = np.linalg.norm(A, 2) if n else 0.0
    tb = tol * max(1.0, na, np.linalg.norm(B, 2) if B.size else 0.0)
    tc = tol * max(1.0, na, np.linalg.norm(C, 2) if C.size else 0.0)
    # Repeated eigenvalues make the rank test sensitive; test distinct values once.
    cache: dict[tuple[float, float], tuple[bool, bool]] = {}
    rows = []
    for p, z, w in zip(poles, zeta, wn):
        stable = bool(p.real < -stability_margin)
        test = n <= _PBH_ALL_MODES_MAX_N or p.real >= -1e-6 * max(abs(p), 1e-300)
        ctrb = obsv = None
        if test:
            key = (round(p.real, 9), round(abs(p.imag), 9))
            if key not in cache:
                Ms = A - p * np.eye(n)
                cache[key] = (_pbh_full_rank(np.hstack([Ms, B.astype(complex)]), n, tb), _pbh_full_rank(np.vstack([Ms, C.astype(complex)]), n, tc))
            ctrb, obsv = cache[key]
        rows.append(ModeInfo(complex(p), float(z), float(w), stable, ctrb, obsv))
    return rows


def hidden_unstable_modes(A, B, C, *, tol: float = DEFAULT_RANK_TOL) -> list[ModeInfo]:
    """Modes with ``Re(p) >= 0`` that the input cannot reach or the output cannot see."""
    return [m for m in mode_table(A, B, C, tol=tol) if not m.stable and m.hidden]
