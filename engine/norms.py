"""System norms of a path: peak gain (H-infinity), H2 norm and DC gain.

Every norm is taken over the minimal realisation of the path (hidden modes cannot reach
the signal), and a path with a pole on or right of the imaginary axis is reported as
unstable with an infinite norm, never as a number.

The peak gain uses the Hamiltonian level-set iteration (Boyd & Balakrishnan 1990;
Bruinsma & Steinbuch 1990, from memory): for a level ``gamma`` above ``sigma_max(D)``,
``gamma`` is a singular value of ``G(jw)`` exactly when ``jw`` is an eigenvalue of

    H(gamma) = [[A - B R^-1 D^T C,        -gamma B R^-1 B^T     ],
                [gamma C^T S^-1 C,   -(A - B R^-1 D^T C)^T      ]],
    R = D^T D - gamma^2 I,  S = D D^T - gamma^2 I,

so the bound is raised to the largest gain at the midpoints of the imaginary-axis
eigenvalues until none remain; the peak frequency is then polished by a bounded scalar
search.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg as sla
import scipy.optimize as sopt

from loopwright.engine.nogil import eigenvalues as _eigenvalues
from loopwright.engine.responses import _as_system, auto_frequency_grid
from loopwright.engine.structure import minimal_realization

__all__ = [
    "PeakGain",
    "H2Norm",
    "is_stable_matrix",
    "peak_gain",
    "certify_peak",
    "h2_norm",
    "dc_gain",
    "sigma_max",
    "lyapunov_from_schur",
    "refined_lyapunov",
]


@dataclass(frozen=True)
class PeakGain:
    """Peak gain (H-infinity norm) of a path.

    Attributes
    ----------
    value : float
        ``sup_w sigma_max(G(jw))``; ``inf`` when the path is not stable.
    w_rad_s : float
        Frequency of the peak in rad/s (``inf`` when it is approached as ``w -> inf``;
        ``nan`` when unstable).
    stable : bool
    """

    value: float
    w_rad_s: float
    stable: bool


@dataclass(frozen=True)
class H2Norm:
    """H2 norm of a path: ``value`` is ``inf`` with a ``reason`` when unbounded."""

    value: float
    stable: bool
    reason: str = ""


def is_stable_matrix(A, *, margin: float = 0.0, eigenvalues=None) -> bool:
    """True when every eigenvalue of ``A`` has real part below ``-margin`` (and a little
    slack for rounding: ``-1e-12 max(1, ||A||)``). ``eigenvalues`` may give ``A``'s
    eigenvalues when they are known already."""
    A = np.atleast_2d(np.asarray(A, dtype=float))
    if A.shape[0] == 0:
        return True
    ev = _eigenvalues(A) if eigenvalues is None else np.asarray(eigenvalues)
    slack = 1e-12 * max(1.0, np.linalg.norm(A, 1))
    return bool(np.max(ev.real) < -max(margin, slack))


def sigma_max(G: np.ndarray) -> np.ndarray:
    """Largest singular value of each ``G[k]``; ``G`` shape (k, p, m) -> (k,)."""
    G = np.asarray(G)
    if G.shape[1] == 1 or G.shape[2] == 1:
        return np.sqrt(np.sum(np.abs(G) ** 2, axis=(1, 2)))
    return np.linalg.svd(G, compute_uv=False)[:, 0]


def _freq_evaluator(A, B, C, D):
    """``w -> G(jw)`` (k, p, m): direct solves for small models, one shared Schur
    reduction for larger ones (a dense (k, n, n) stack would not fit in memory)."""
    n = A.shape[0]
    if n <= 24:
        def evaluate(w):
            s = 1j * np.atleast_1d(np.asarray(w, dtype=float))
            M = s[:, None, None] * np.eye(n)[None] - A[None]
            X = np.linalg.solve(M, np.broadcast_to(B.astype(complex), (s.size,) + B.shape))
            return C[None] @ X + D[None]

        return evaluate
    from loopwright.engine.responses import reduce_model, reduced_response

    red = reduce_model(A)
    Bt, Ct = red.input_matrix(B), red.output_matrix(C)

    def evaluate(w):
        with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
            return reduced_response(red, Bt, Ct, D, 1j * np.atleast_1d(np.asarray(w, dtype=float)), B=B, C=C)

    return evaluate


def peak_gain(A, B, C, D=None, *, tol: float = 1e-10, minimal: bool = True, max_iter: int = 60) -> PeakGain:
    """Peak gain ``||G||_inf = sup_w sigma_max(G(jw))`` and its frequency.

    Parameters
    ----------
    A, B, C, D : array_like
        Shapes (n, n), (n, m), (p, n), (p, m).
    tol : float
        Relative accuracy of the value.
    minimal : bool
        Reduce to the minimal realisation first (hidden modes do not count).

    Returns
    -------
    PeakGain

    Examples
    --------
    >>> r = peak_gain([[0.0, 1.0], [-25.0, -2.0]], [[0.0], [1.0]], [[25.0, 0.0]], [[0.0]])
    >>> round(r.value, 6), round(r.w_rad_s, 4)
    (2.551552, 4.7958)
    """
    A, B, C, D = _as_system(A, B, C, D)
    if minimal:
        A, B, C, D = minimal_realization(A, B, C, D)
    n, m, p = A.shape[0], B.shape[1], C.shape[0]
    d_norm = float(np.linalg.norm(D, 2)) if D.size else 0.0
    if n == 0 or m == 0 or p == 0:
        return PeakGain(d_norm, 0.0 if d_norm > 0 else 0.0, True)
    if not is_stable_matrix(A):
        return PeakGain(np.inf, np.nan, False)
    poles = _eigenvalues(A)
    grid = np.concatenate([[0.0], auto_frequency_grid(poles, points_per_decade=20)])
    evaluate = _freq_evaluator(A, B, C, D)
    gains = sigma_max(evaluate(grid))
    k = int(np.argmax(gains))
    lb, w_best = float(gains[k]), float(grid[k])
    if d_norm >= lb:
        lb, w_best = d_norm, np.inf
    if lb == 0.0:
        return PeakGain(0.0, 0.0, True)
    return certify_peak(A, B, C, D, lb, w_best, evaluate=evaluate, tol=tol, max_iter=max_iter)


def certify_peak(A, B, C, D, lower: float, w_lower: float, *, evaluate=None, tol: float = 1e-10, max_iter: int = 60,
                 check=None, refined_start: bool = False) -> PeakGain:
    """The peak gain of a stable system from a known lower bound: the Hamiltonian level-set
    iteration (see the module notes) started at ``lower``, reached at ``w_lower``.

    A good start (a grid maximum refined by a local search) usually leaves one Hamiltonian
    eigenvalue computation, which finds no crossing above ``(1 + 2 tol) lower``: that is
    the certificate. ``A`` must be stable (not checked here) and need not be minimal.

    Parameters
    ----------
    A, B, C, D : ndarray
        The system, ``A`` stable.
    lower, w_lower : float
        ``sigma_max(G(j w_lower)) = lower`` (``w_lower = inf`` for ``||D||``).
    evaluate : callable, optional
        ``w -> G(jw)`` as a (k, p, m) array; by default from one reduction of ``A``.
    check : callable, optional
        Called before each Hamiltonian eigenvalue computation (a progress report that may
        stop the work by raising).
    refined_start : bool
        ``(lower, w_lower)`` is already a local maximum refined by a search (and the value
        at ``w = 0`` was compared): when the first Hamiltonian test certifies it, it is
        returned as it is, without the closing local search of the frequency (which on a
        flat maximum moves ``w`` within its own uncertainty and the value by rounding).

    Returns
    -------
    PeakGain
    """
    A, B, C, D = _as_system(A, B, C, D)
    n, m, p = A.shape[0], B.shape[1], C.shape[0]
    if evaluate is None:
        evaluate = _freq_evaluator(A, B, C, D)
    lb, w_best = float(lower), float(w_lower)
    if n == 0 or lb == 0.0:
        return PeakGain(lb, w_best if lb > 0 else 0.0, True)
    Ip, Im = np.eye(p), np.eye(m)
    bracket = None
    moved = False
    for _ in range(max_iter):
        if check is not None:
            check()
        gamma = (1.0 + 2.0 * tol) * lb
        R = D.T @ D - gamma**2 * Im
        S = D @ D.T - gamma**2 * Ip
        Ri = np.linalg.inv(R)
        Ae = A - B @ Ri @ D.T @ C
        H = np.block([[Ae, -gamma * B @ Ri @ B.T], [gamma * C.T @ np.linalg.solve(S, C), -Ae.T]])
        hn = max(1.0, np.linalg.norm(H, 1))
        ev = _eigenvalues(H)  # lets the window draw meanwhile (engine/nogil.py)
        on_axis = ev[(np.abs(ev.real) <= 1e-7 * np.maximum(1.0, np.abs(ev)) + 1e-10 * hn) & (ev.imag >= 0)]
        if on_axis.size == 0:
            break
        ws = np.sort(on_axis.imag)
        if ws.size == 1:
            mids = ws
        else:
            mids = 0.5 * (ws[:-1] + ws[1:])
        g_mid = sigma_max(evaluate(mids))
        g_mid = np.where(np.isfinite(g_mid), g_mid, -np.inf)
        j = int(np.argmax(g_mid))
        if not g_mid[j] > lb * (1.0 + tol):
            break
        lb, w_best = float(g_mid[j]), float(mids[j])
        moved = True
        if ws.size > 1:
            bracket = (ws[j], ws[j + 1])
    if np.isfinite(w_best) and (moved or not refined_start):
        # polish the frequency: the value is already within tol, the argmax is flat
        lo, hi = bracket if bracket is not None else (w_best * 0.9, w_best * 1.1 + 1e-12)
        lo, hi = min(lo, w_best), max(hi, w_best)
        if hi > lo:
            res = sopt.minimize_scalar(
                lambda w: -sigma_max(evaluate(np.array([w])))[0],
                bounds=(max(lo, 0.0), hi),
                method="bounded",
                options={"xatol": 1e-12 * max(1.0, hi)},
            )
            if -res.fun > lb:
                lb, w_best = float(-res.fun), float(res.x)
        g0 = sigma_max(evaluate(np.array([0.0])))[0]
        if g0 >= lb:
            lb, w_best = float(g0), 0.0
    return PeakGain(lb, w_best, True)


def lyapunov_from_schur(T_real: np.ndarray, Z_real: np.ndarray, Q: np.ndarray) -> np.ndarray:
    """Solve ``A X + X A^T + Q = 0`` given the real Schur form ``A = Z T Z^T``.

    Reuses one Schur reduction for many right-hand sides (the noise budget and the path
    audit solve one per source).

    Parameters
    ----------
    T_real, Z_real : (n, n) ndarray
    Q : (n, n) ndarray, symmetric

    Returns
    -------
    (n, n) ndarray
    """
    F = Z_real.T @ Q @ Z_real
    try:
        Y = _sylvester_quasi_triangular(T_real, T_real, -F)
    except _Rescaled:
        # a leaf needed rescaling against overflow: solve in one piece, which reports
        # one consistent scale
        Y, scale, info = sla.lapack.dtrsyl(T_real, T_real, -F, trana="N", tranb="T")
        if info < 0:
            raise ValueError(f"dtrsyl rejected argument {-info}") from None
        Y = Y / scale
    X = Z_real @ Y @ Z_real.T
    return 0.5 * (X + X.T)


def refined_lyapunov(reduced, Q: np.ndarray) -> np.ndarray:
    """Solve ``A X + X A^T + Q = 0`` with the Schur form of a
    :class:`~loopwright.engine.responses.ReducedModel` (``A`` its balanced matrix
    ``A_bal``), then one step of iterative refinement with the residual taken with ``A``
    itself (common practice, no source: the correction solves the same equation for the
    residual). The Schur form's backward error, ``eps ||A||``, is magnified on a stiff,
    lightly damped matrix (a flexible structure: ``||A||`` the square of its highest mode):
    on a 608-state beam loop one step takes an H2 norm from 4e-8 to 3e-11 of a solution
    refined with extended-precision residuals.
    """
    X = lyapunov_from_schur(reduced.T_real, reduced.Z_real, Q)
    A = reduced.A_bal
    if A is None or not np.all(np.isfinite(X)):
        return X
    R = A @ X
    R = R + R.T + Q
    return X + lyapunov_from_schur(reduced.T_real, reduced.Z_real, 0.5 * (R + R.T))


class _Rescaled(Exception):
    pass


# Leaves of the recursive Sylvester solver: LAPACK's unblocked solver below this size,
# matrix products above it.
_SYLV_LEAF = 64


def _split(T: np.ndarray) -> int:
    """A split point near the middle that does not cut a 2x2 block of a real Schur form."""
    k = T.shape[0] // 2
    if k > 0 and T[k, k - 1] != 0.0:
        k += 1
    return k


def _sylvester_quasi_triangular(T1: np.ndarray, T2: np.ndarray, C: np.ndarray) -> np.ndarray:
    """Solve ``T1 X + X T2^T = C`` for upper quasi-triangular ``T1`` (m, m), ``T2`` (n, n).

    Recursive splitting (as in Jonsson & Kagstrom's recursive blocked algorithms, from
    memory): halve the larger dimension, solve the trailing half, update the leading
    right-hand side with one matrix product, solve the leading half. The arithmetic is
    that of Bartels-Stewart; the updates run as matrix products instead of LAPACK's
    level-2 loops.
    """
    m, n = C.shape
    if m <= _SYLV_LEAF and n <= _SYLV_LEAF:
        Y, scale, info = sla.lapack.dtrsyl(T1, T2, C, trana="N", tranb="T")
        if info < 0:
            raise ValueError(f"dtrsyl rejected argument {-info}")
        if scale != 1.0:
            raise _Rescaled
        return Y
    if m >= n:
        k = _split(T1)
        if k >= m:
            k = m // 2 - 1 if m // 2 - 1 > 0 else m // 2
        X2 = _sylvester_quasi_triangular(T1[k:, k:], T2, C[k:])
        X1 = _sylvester_quasi_triangular(T1[:k, :k], T2, C[:k] - T1[:k, k:] @ X2)
        return np.vstack([X1, X2])
    k = _split(T2)
    if k >= n:
        k = n // 2 - 1 if n // 2 - 1 > 0 else n // 2
    X2 = _sylvester_quasi_triangular(T1, T2[k:, k:], C[:, k:])
    X1 = _sylvester_quasi_triangular(T1, T2[:k, :k], C[:, :k] - X2 @ T2[:k, k:].T)
    return np.hstack([X1, X2])


def h2_norm(A, B, C, D=None, *, minimal: bool = True) -> H2Norm:
    """H2 norm ``sqrt(trace(C X C^T))`` with ``A X + X A^T + B B^T = 0``.

    Infinite (with a reason) when the path is not stable or has direct feedthrough.

    Examples
    --------
    >>> h2_norm([[-2.0]], [[1.0]], [[1.0]], [[0.0]]).value
    0.5
    """
    A, B, C, D = _as_system(A, B, C, D)
    if minimal:
        A, B, C, D = minimal_realization(A, B, C, D)
    if not is_stable_matrix(A):
        return H2Norm(np.inf, False, "the path is not stable")
    if np.any(D != 0):
        return H2Norm(np.inf, True, "direct feedthrough (D != 0): the gain does not roll off")
    if A.shape[0] == 0:
        return H2Norm(0.0, True)
    X = sla.solve_continuous_lyapunov(A, -B @ B.T)
    val = float(np.trace(C @ X @ C.T))
    return H2Norm(float(np.sqrt(max(val, 0.0))), True)


def dc_gain(A, B, C, D=None) -> np.ndarray:
    """Steady-state gain ``G(0) = D - C A^-1 B`` of the minimal realisation, shape (p, m).

    Entries whose path has a pole at the origin are ``inf`` (sign of the low-frequency
    asymptote is not kept).

    Examples
    --------
    >>> dc_gain([[-2.0]], [[1.0]], [[1.0]], [[0.0]])
    array([[0.5]])
    """
    A, B, C, D = _as_system(A, B, C, D)
    Am, Bm, Cm, Dm = minimal_realization(A, B, C, D)
    if _nonsingular(Am):
        return Dm - Cm @ np.linalg.solve(Am, Bm) if Am.size else Dm.copy()
    out = np.empty(D.shape)
    for i in range(D.shape[0]):
        for j in range(D.shape[1]):
            a, b, c, d = minimal_realization(A, B[:, [j]], C[[i], :], D[[i], [j]].reshape(1, 1))
            out[i, j] = (d - c @ np.linalg.solve(a, b))[0, 0] if _nonsingular(a) else (d[0, 0] if a.size == 0 else np.inf)
    return out


def _nonsingular(A: np.ndarray) -> bool:
    if A.size == 0:
        return True
    s = np.linalg.svd(A, compute_uv=False)
    return bool(s[-1] > 1e-12 * max(1.0, s[0]))



