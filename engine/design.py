"""Design of the state-feedback gain K and the estimator gain L from plant matrices.

Conventions (the symbols follow the equations below; they are the trade's):

* State feedback ``u = -K x`` on ``x' = A x + B u``: pole placement puts ``eig(A - B K)``
  at the requested poles; LQR minimises ``int (x'Qx + u'Ru + 2 x'N u) dt``.
* Estimator ``xhat' = A xhat + B u + L (y - C xhat - D u)``: pole placement puts
  ``eig(A - L C)`` at the requested poles (the dual problem); the steady-state Kalman
  filter for ``x' = A x + B u + G w``, ``y = C x + D u + v`` with white-noise intensities
  ``E[w w'] = W delta``, ``E[v v'] = V delta`` gives ``L = P C' V^-1`` where
  ``A P + P A' - P C' V^-1 C P + G W G' = 0``.

Every function is pure and checks its request first (PBH test naming the offending
mode, pole count, conjugate pairs, multiplicity against the number of inputs, weights
symmetric and (semi)definite); a request that cannot be met raises :class:`DesignError`.
Soft problems (estimator not much faster than the controller, a gain that lets sensor
noise dominate the control signal) are returned as strings in ``warnings`` -- never as
Python warnings, which the caller decides how to show.

Caveat: the PBH test and the Riccati solvers use a relative tolerance; a mode that is
*nearly* uncontrollable passes and then needs a large gain (watch ``gain_norm``).
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg as sla

from loopwright.engine.errors import DesignError

__all__ = [
    "GainDesign",
    "normalize_poles",
    "poles_to_json",
    "uncontrollable_modes",
    "unobservable_modes",
    "place_state_feedback",
    "ackermann_gain",
    "lqr_gain",
    "place_estimator",
    "kalman_gain",
    "estimator_speed_warning",
    "noise_dominance_warning",
    "check_weight",
    "pole_mismatch",
    "discrete_lqr_gain",
]

# Relative tolerance of the PBH rank test: a mode lam is hidden when
# sigma_min([A - lam I, B]) <= _PBH_RTOL * max(||[A, B]||, |lam|), the size of that matrix.
_PBH_RTOL = 1e-8
# Closeness below which two requested poles count as the same (repeated) pole.
_SAME_POLE_RTOL = 1e-9


@dataclass(frozen=True)
class GainDesign:
    """Result of one gain design.

    Attributes
    ----------
    gain : (m, n) ndarray for K, (n, p) ndarray for L
        The designed gain in the design convention (``u = -K x``; estimator ``+ L (y - yhat)``).
    poles : (n,) complex ndarray
        Achieved closed-loop poles: ``eig(A - B K)`` or ``eig(A - L C)``, sorted.
    gain_norm : float
        Largest singular value of ``gain`` (how hard the gain pushes).
    method : str
        ``"place"``, ``"ackermann"``, ``"lqr"`` or ``"kalman"``.
    riccati : ndarray or None
        The stabilising Riccati solution ``P`` for LQR / Kalman, else None.
    warnings : tuple of str
        Soft problems found while designing.
    """

    gain: np.ndarray
    poles: np.ndarray
    gain_norm: float
    method: str
    riccati: np.ndarray | None = None
    warnings: tuple[str, ...] = field(default_factory=tuple)


# ---------------------------------------------------------------------------------------
# normalisers and checks
# ---------------------------------------------------------------------------------------
def _as_matrix(value, name: str, *, shape: tuple[int | None, int | None] | None = None) -> np.ndarray:
    try:
        arr = np.array(value, dtype=float)
    except (TypeError, ValueError) as err:
        raise DesignError(f"{name}: expected a real matrix, got {value!r}") from err
    if arr.ndim == 0:
        arr = arr.reshape(1, 1)
    elif arr.ndim == 1:
        # A flat list for a square weight means its diagonal (common practice, no source).
        arr = np.diag(arr) if shape is not None and shape[0] == shape[1] and shape[0] == arr.size else arr.reshape(1, -1)
    if arr.ndim != 2:
        raise DesignError(f"{name}: expected a matrix, got an array with {arr.ndim} dimensions")
    if not np.all(np.isfinite(arr)):
        raise DesignError(f"{name}: contains a value that is not finite")
    if shape is not None:
        rows, cols = shape
        if (rows is not None and arr.shape[0] != rows) or (cols is not None and arr.shape[1] != cols):
            want = f"{rows if rows is not None else 'any'}x{cols if cols is not None else 'any'}"
            raise DesignError(f"{name}: is {arr.shape[0]}x{arr.shape[1]}, expected {want}")
    return arr


def _check_system(A, B, *, b_name: str = "B") -> tuple[np.ndarray, np.ndarray]:
    A = _as_matrix(A, "A")
    n = A.shape[0]
    if A.shape != (n, n):
        raise DesignError(f"A: is {A.shape[0]}x{A.shape[1]}, expected a square matrix")
    if n == 0:
        raise DesignError("A: the plant has no states, there is nothing to design")
    B = _as_matrix(B, b_name, shape=(n, None))
    return A, B


def normalize_poles(poles, n: int, *, what: str = "poles", max_multiplicity: int | None = None) -> np.ndarray:
    """Turn a pole request into a sorted complex array and check it.

    Parameters
    ----------
    poles : sequence
        Each entry a real number, a complex number, or a ``[re, im]`` pair (one pole
        ``re + j im``; its conjugate must be listed too, as ``[re, -im]``).
    n : int
        Number of poles expected (the state count).
    what : str
        Name used in messages ("controller poles", "estimator poles").
    max_multiplicity : int, optional
        How often one pole may repeat (the number of independent inputs for K, of
        outputs for L); ``None`` skips the check.

    Returns
    -------
    (n,) complex ndarray

    Raises
    ------
    DesignError
        Wrong count, malformed entry, a complex pole without its conjugate, a pole
        repeated more often than ``max_multiplicity``.
    """
    if isinstance(poles, (int, float, complex)):
        poles = [poles]
    if not isinstance(poles, (list, tuple, np.ndarray)):
        raise DesignError(f"{what}: expected a list of poles, got {poles!r}")
    out = []
    for k, p in enumerate(poles):
        if isinstance(p, (list, tuple, np.ndarray)) and len(p) == 2 and all(
            isinstance(v, (int, float, np.floating, np.integer)) and not isinstance(v, bool) for v in p
        ):
            out.append(complex(float(p[0]), float(p[1])))
        elif isinstance(p, (int, float, complex, np.number)) and not isinstance(p, bool):
            out.append(complex(p))
        else:
            raise DesignError(f"{what}: entry {k + 1} is {p!r}; expected a number or a [re, im] pair")
    arr = np.array(out, dtype=complex)
    if arr.size != n:
        raise DesignError(f"{what}: {arr.size} poles requested, the plant has {n} states so {n} are needed")
    if not np.all(np.isfinite(arr)):
        raise DesignError(f"{what}: contains a pole that is not finite")
    scale = max(1.0, float(np.max(np.abs(arr)))) if arr.size else 1.0
    tol = _SAME_POLE_RTOL * scale
    unmatched = list(arr[np.abs(arr.imag) > tol])
    while unmatched:
        p = unmatched.pop(0)
        dist = [abs(q - np.conj(p)) for q in unmatched]
        if not dist or min(dist) > tol:
            raise DesignError(
                f"{what}: the complex pole {_fmt(p)} is listed without its conjugate {_fmt(np.conj(p))}"
            )
        unmatched.pop(int(np.argmin(dist)))
    arr = np.where(np.abs(arr.imag) <= tol, arr.real + 0j, arr)
    if max_multiplicity is not None:
        for p in arr:
            count = int(np.sum(np.abs(arr - p) <= tol))
            if count > max_multiplicity:
                raise DesignError(
                    f"{what}: the pole {_fmt(p)} is requested {count} times, but with {max_multiplicity} "
                    f"independent {'input' if 'estimator' not in what else 'output'}(s) a pole can be placed at most "
                    f"{max_multiplicity} time(s)"
                )
    return _sort_poles(arr)


def poles_to_json(poles) -> list:
    """Poles as JSON-native values: real poles as numbers, complex ones as ``[re, im]``."""
    out = []
    for p in np.asarray(poles, dtype=complex):
        out.append(float(p.real) if p.imag == 0.0 else [float(p.real), float(p.imag)])
    return out


def _sort_poles(p) -> np.ndarray:
    p = np.asarray(p, dtype=complex)
    return p[np.lexsort((p.imag, p.real))]


def pole_mismatch(got, want) -> float:
    """Largest distance between two pole sets after pairing them up optimally."""
    from scipy.optimize import linear_sum_assignment

    a = np.asarray(got, dtype=complex).ravel()
    b = np.asarray(want, dtype=complex).ravel()
    if a.size != b.size:
        return float("inf")
    if a.size == 0:
        return 0.0
    cost = np.abs(a[:, None] - b[None, :])
    r, c = linear_sum_assignment(cost)
    return float(np.max(cost[r, c]))


def _fmt(p: complex) -> str:
    p = complex(p)
    if p.imag == 0:
        return f"{p.real:.6g}"
    return f"{p.real:.6g}{'+' if p.imag >= 0 else '-'}{abs(p.imag):.6g}j"


def _pbh_modes(A: np.ndarray, B: np.ndarray) -> list[complex]:
    """Eigenvalues ``lam`` of A for which ``[A - lam I, B]`` loses rank (PBH test)."""
    n = A.shape[0]
    lams = np.linalg.eigvals(A)
    scale = max(1.0, float(np.linalg.norm(np.hstack([A, B]), 2)))
    bad: list[complex] = []
    for lam in lams:
        M = np.hstack([A - lam * np.eye(n), B.astype(complex)])
        smin = np.linalg.svd(M, compute_uv=False)[-1] if M.shape[1] >= n else 0.0
        if smin <= _PBH_RTOL * max(scale, abs(lam)):
            if not any(abs(lam - q) <= 1e-7 * max(1.0, abs(lam)) for q in bad):
                bad.append(complex(lam))
    return [complex(v) for v in _sort_poles(bad)] if bad else []


def uncontrollable_modes(A, B) -> list[complex]:
    """Eigenvalues of A that the inputs B cannot move (PBH rank test).

    Parameters
    ----------
    A : (n, n) array_like
    B : (n, m) array_like

    Returns
    -------
    list of complex
        Empty when (A, B) is controllable.
    """
    A, B = _check_system(A, B)
    return _pbh_modes(A, B)


def unobservable_modes(A, C) -> list[complex]:
    """Eigenvalues of A that the outputs C cannot see (PBH test on the dual pair)."""
    A = _as_matrix(A, "A")
    C = _as_matrix(C, "C", shape=(None, A.shape[0]))
    return _pbh_modes(A.T, C.T)


def check_weight(M, name: str, size: int, *, definite: bool) -> np.ndarray:
    """Return ``M`` as a symmetric ``size x size`` matrix; DesignError if it is not
    symmetric positive definite (``definite=True``) or semidefinite.

    A scalar or a flat list of ``size`` numbers means a diagonal weight.
    """
    if np.ndim(M) == 0 and not isinstance(M, (str, bytes)):
        try:
            W = float(M) * np.eye(size)
        except (TypeError, ValueError) as err:
            raise DesignError(f"{name}: expected a number or a matrix, got {M!r}") from err
        W = _as_matrix(W, name, shape=(size, size))
    else:
        W = _as_matrix(M, name, shape=(size, size))
    scale = max(1.0, float(np.max(np.abs(W))))
    if not np.allclose(W, W.T, rtol=0.0, atol=1e-10 * scale):
        raise DesignError(f"{name}: must be symmetric, got {W.tolist()}")
    W = 0.5 * (W + W.T)
    ev = np.linalg.eigvalsh(W)
    tol = 1e-12 * scale * size
    if definite and ev.min() <= tol:
        raise DesignError(
            f"{name}: must be positive definite (smallest eigenvalue {ev.min():.3g}, expected > 0)"
        )
    if not definite and ev.min() < -tol:
        raise DesignError(
            f"{name}: must be positive semidefinite (smallest eigenvalue {ev.min():.3g}, expected >= 0)"
        )
    return W


def _select_inputs(B: np.ndarray, inputs) -> np.ndarray:
    m = B.shape[1]
    if inputs is None:
        return np.arange(m)
    idx = np.asarray(list(inputs), dtype=int)
    if idx.size == 0:
        raise DesignError("inputs: the selection is empty; name at least one plant input")
    if np.any(idx < 0) or np.any(idx >= m):
        raise DesignError(f"inputs: {[int(i) + 1 for i in idx]} names an input outside 1..{m}")
    if len(set(idx.tolist())) != idx.size:
        raise DesignError(f"inputs: {[int(i) + 1 for i in idx]} names an input twice")
    return idx


def _expand_rows(K_sel: np.ndarray, idx: np.ndarray, m: int) -> np.ndarray:
    K = np.zeros((m, K_sel.shape[1]))
    K[idx, :] = K_sel
    return K


def _require_controllable(A, B, *, what: str, only_unstable: bool = False) -> None:
    modes = _pbh_modes(A, B)
    if only_unstable:
        modes = [lam for lam in modes if lam.real >= -1e-12 * max(1.0, abs(lam))]
    if modes:
        txt = ", ".join(_fmt(m) for m in modes)
        kind = "uncontrollable" if what == "K" else "unobservable"
        need = "stabilisable" if only_unstable else ("controllable" if what == "K" else "observable")
        raise DesignError(
            f"the plant is not {need}: {kind} mode(s) at s = {txt}; "
            f"no {'state-feedback' if what == 'K' else 'estimator'} gain can move "
            f"{'it' if len(modes) == 1 else 'them'}"
        )


# ---------------------------------------------------------------------------------------
# state feedback
# ---------------------------------------------------------------------------------------
def place_state_feedback(A, B, poles, *, inputs=None, method: str = "place") -> GainDesign:
    """State-feedback gain K with ``eig(A - B K)`` at ``poles``.

    Parameters
    ----------
    A : (n, n) array_like
    B : (n, m) array_like
    poles : sequence of n poles (numbers or ``[re, im]`` pairs), rad/s
    inputs : sequence of int, optional
        0-based indices of the plant inputs the gain may use; the rows of K for the
        other inputs are zero. Default: all inputs.
    method : {"place", "ackermann"}
        ``"place"``: robust eigenstructure assignment (Kautsky, Nichols & Van Dooren
        1985, via :func:`scipy.signal.place_poles`). ``"ackermann"``: Ackermann's formula,
        single input only (a cross-check; ill-conditioned for large n).

    Returns
    -------
    GainDesign
        ``gain`` is K, ``(m, n)``.

    Raises
    ------
    DesignError
        Uncontrollable mode (named), bad pole request, more than one input for Ackermann.
    """
    A, B = _check_system(A, B)
    n, m = A.shape[0], B.shape[1]
    idx = _select_inputs(B, inputs)
    Bs = B[:, idx]
    _require_controllable(A, Bs, what="K")
    rank_b = int(np.linalg.matrix_rank(Bs))
    target = normalize_poles(poles, n, what="controller poles", max_multiplicity=rank_b)
    notes: list[str] = []
    if method == "ackermann":
        if Bs.shape[1] != 1:
            raise DesignError(f"method 'ackermann' needs a single input, {Bs.shape[1]} are selected; use 'place'")
        K_sel = ackermann_gain(A, Bs, target)
    elif method == "place":
        K_sel, notes = _place(A, Bs, target, what="controller poles")
    else:
        raise DesignError(f"method {method!r} is not a pole-placement method; expected 'place' or 'ackermann'")
    K = _expand_rows(K_sel, idx, m)
    achieved = _sort_poles(np.linalg.eigvals(A - B @ K))
    return GainDesign(K, achieved, float(np.linalg.norm(K, 2)), method, warnings=tuple(notes))


def _place(A: np.ndarray, B: np.ndarray, target: np.ndarray, *, what: str) -> tuple[np.ndarray, list[str]]:
    """Robust eigenstructure assignment; returns the gain and any warnings."""
    import scipy.signal as ssig  # here, not at the top: importing it is most of a command's start-up

    try:
        with warnings.catch_warnings():
            # scipy warns when its iteration stops early; the achieved poles are
            # compared with the request below and reported, so the warning adds nothing.
            warnings.simplefilter("ignore", UserWarning)
            res = ssig.place_poles(A, B, target, method="YT", maxiter=30)
    except ValueError as err:
        raise DesignError(f"{what}: pole placement failed: {err}") from err
    K = np.real(res.gain_matrix)
    got = _sort_poles(np.linalg.eigvals(A - B @ K))
    scale = max(1.0, float(np.max(np.abs(target))))
    gap = pole_mismatch(got, target)
    notes = []
    if gap > 1e-6 * scale:
        # The gain is right in exact arithmetic, but the closed loop is so non-normal that
        # its eigenvalues move by this much under rounding: the design is fragile.
        notes.append(
            f"{what}: the achieved poles differ from the request by up to {gap:.3g} (relative "
            f"{gap / scale:.1e}); the closed loop is very sensitive, consider fewer or slower poles"
        )
    return K, notes


def ackermann_gain(A, B, poles) -> np.ndarray:
    """Ackermann's formula ``K = [0 .. 0 1] Ctrb^-1 phi(A)`` for a single input.

    Parameters
    ----------
    A : (n, n) array_like
    B : (n, 1) array_like
    poles : (n,) sequence, already checked (see :func:`normalize_poles`)

    Returns
    -------
    (1, n) ndarray

    References
    ----------
    J. Ackermann, "Der Entwurf linearer Regelungssysteme im Zustandsraum",
    Regelungstechnik und Prozess-Datenverarbeitung 20 (1972), 297-300.
    """
    A = np.asarray(A, dtype=float)
    b = np.asarray(B, dtype=float).reshape(-1, 1)
    n = A.shape[0]
    coeffs = np.real(np.poly(np.asarray(poles, dtype=complex)))
    ctrb = np.empty((n, n))
    col = b[:, 0]
    for k in range(n):
        ctrb[:, k] = col
        col = A @ col
    phi = np.zeros((n, n))
    for c in coeffs:  # Horner: phi(A) = (((A + c1) A + c2) A ...)
        phi = phi @ A + c * np.eye(n)
    e_n = np.zeros(n)
    e_n[-1] = 1.0
    try:
        row = np.linalg.solve(ctrb.T, e_n)
    except np.linalg.LinAlgError as err:
        raise DesignError("Ackermann's formula: the controllability matrix is singular") from err
    return (row @ phi).reshape(1, n)


def lqr_gain(A, B, Q, R, *, N=None, inputs=None) -> GainDesign:
    """Linear-quadratic regulator ``u = -K x`` minimising ``int (x'Qx + u'Ru + 2x'Nu) dt``.

    Parameters
    ----------
    A : (n, n) array_like
    B : (n, m) array_like
    Q : (n, n) array_like, symmetric positive semidefinite (scalar or flat list = diagonal)
    R : (k, k) array_like, symmetric positive definite, k = number of selected inputs
    N : (n, k) array_like, optional cross weight; ``[[Q, N], [N', R]]`` must be PSD.
    inputs : sequence of int, optional
        0-based plant inputs the regulator may use (rows of K for the others are zero).

    Returns
    -------
    GainDesign
        ``gain`` = K ``(m, n)`` = ``R^-1 (B' P + N')`` (expanded), ``riccati`` = P.

    Raises
    ------
    DesignError
        Bad weights, an unstable uncontrollable mode, or no stabilising solution
        (e.g. an undamped mode that Q does not see).
    """
    A, B = _check_system(A, B)
    n, m = A.shape[0], B.shape[1]
    idx = _select_inputs(B, inputs)
    Bs = B[:, idx]
    k = Bs.shape[1]
    Qm = check_weight(Q, "Q", n, definite=False)
    Rm = check_weight(R, "R", k, definite=True)
    Nm = np.zeros((n, k)) if N is None else _as_matrix(N, "N", shape=(n, k))
    if N is not None:
        check_weight(np.block([[Qm, Nm], [Nm.T, Rm]]), "[[Q, N], [N', R]]", n + k, definite=False)
    _require_controllable(A, Bs, what="K", only_unstable=True)
    P = _solve_care(A, Bs, Qm, Rm, Nm, what="LQR")
    K_sel = np.linalg.solve(Rm, Bs.T @ P + Nm.T)
    K = _expand_rows(K_sel, idx, m)
    poles = _sort_poles(np.linalg.eigvals(A - B @ K))
    _require_stable(poles, "LQR")
    return GainDesign(K, poles, float(np.linalg.norm(K, 2)), "lqr", riccati=P)


def discrete_lqr_gain(Ad, Bd, Q, R, *, N=None) -> GainDesign:
    """Discrete-time LQR ``u[k] = -K x[k]`` minimising ``sum (x'Qx + u'Ru + 2x'Nu)``.

    For a plant already sampled (e.g. by :func:`loopwright.engine.discretize.discretize`
    with ZOH): ``K = (R + B'PB)^-1 (B'PA + N')`` where P solves the discrete Riccati
    equation. ``poles`` are the eigenvalues of ``Ad - Bd K`` (inside the unit circle).

    Raises
    ------
    DesignError
        Bad weights, an uncontrollable mode on or outside the unit circle, no
        stabilising solution.
    """
    A, B = _check_system(Ad, Bd)
    n, m = A.shape[0], B.shape[1]
    Qm = check_weight(Q, "Q", n, definite=False)
    Rm = check_weight(R, "R", m, definite=True)
    Nm = np.zeros((n, m)) if N is None else _as_matrix(N, "N", shape=(n, m))
    if N is not None:
        check_weight(np.block([[Qm, Nm], [Nm.T, Rm]]), "[[Q, N], [N', R]]", n + m, definite=False)
    bad = [lam for lam in _pbh_modes(A, B) if abs(lam) >= 1.0 - 1e-12]
    if bad:
        raise DesignError(
            f"discrete LQR: the sampled plant is not stabilisable: uncontrollable mode(s) at z = "
            f"{', '.join(_fmt(v) for v in bad)} (on or outside the unit circle)"
        )
    try:
        P = sla.solve_discrete_are(A, B, Qm, Rm, s=Nm, balanced=True)
    except (np.linalg.LinAlgError, ValueError) as err:
        raise DesignError(f"discrete LQR: the Riccati equation has no stabilising solution ({err})") from err
    P = 0.5 * (P + P.T)
    K = np.linalg.solve(Rm + B.T @ P @ B, B.T @ P @ A + Nm.T)
    poles = _sort_poles(np.linalg.eigvals(A - B @ K))
    if np.max(np.abs(poles)) >= 1.0 - 1e-12:
        raise DesignError(
            f"discrete LQR: no stabilising solution, a closed-loop pole stays at |z| = {np.max(np.abs(poles)):.6g}"
        )
    return GainDesign(K, poles, float(np.linalg.norm(K, 2)), "dlqr", riccati=P)


def _solve_care(A, B, Q, R, N, *, what: str) -> np.ndarray:
    try:
        P = sla.solve_continuous_are(A, B, Q, R, s=N, balanced=True)
    except (np.linalg.LinAlgError, ValueError) as err:
        raise DesignError(
            f"{what}: the Riccati equation has no stabilising solution ({err}); typically a mode on the "
            "imaginary axis that the weights do not see, or an unstable mode the inputs cannot reach"
        ) from err
    if not np.all(np.isfinite(P)):
        raise DesignError(f"{what}: the Riccati equation has no stabilising solution (solution not finite)")
    return 0.5 * (P + P.T)


def _require_stable(poles: np.ndarray, what: str) -> None:
    worst = float(np.max(poles.real))
    if worst >= -1e-10 * max(1.0, float(np.max(np.abs(poles)))):
        raise DesignError(
            f"{what}: the Riccati equation has no stabilising solution: a closed-loop pole stays at "
            f"s = {_fmt(poles[np.argmax(poles.real)])} (an undamped or unstable mode the weights do not see)"
        )


# ---------------------------------------------------------------------------------------
# estimator
# ---------------------------------------------------------------------------------------
def place_estimator(A, C, poles, *, method: str = "place") -> GainDesign:
    """Estimator gain L with ``eig(A - L C)`` at ``poles`` (placement on the dual pair).

    Parameters
    ----------
    A : (n, n) array_like
    C : (p, n) array_like
    poles : sequence of n poles, rad/s
    method : {"place", "ackermann"}
        Ackermann's formula on the dual pair needs a single measured output.

    Returns
    -------
    GainDesign
        ``gain`` = L, ``(n, p)``.

    Raises
    ------
    DesignError
        Unobservable mode (named) or a bad pole request.
    """
    A = _as_matrix(A, "A")
    n = A.shape[0]
    C = _as_matrix(C, "C", shape=(None, n))
    _require_controllable(A.T, C.T, what="L")
    rank_c = int(np.linalg.matrix_rank(C))
    target = normalize_poles(poles, n, what="estimator poles", max_multiplicity=rank_c)
    if method == "ackermann":
        if C.shape[0] != 1:
            raise DesignError(f"method 'ackermann' needs a single measured output, the plant has {C.shape[0]}; use 'place'")
        Lt, notes = ackermann_gain(A.T, C.T, target), []
    elif method == "place":
        Lt, notes = _place(A.T, C.T, target, what="estimator poles")
    else:
        raise DesignError(f"method {method!r} is not a pole-placement method; expected 'place' or 'ackermann'")
    L = Lt.T
    achieved = _sort_poles(np.linalg.eigvals(A - L @ C))
    return GainDesign(L, achieved, float(np.linalg.norm(L, 2)), method, warnings=tuple(notes))


def kalman_gain(A, C, W, V, *, G=None, B=None) -> GainDesign:
    """Steady-state Kalman filter gain ``L = P C' V^-1``.

    Parameters
    ----------
    A : (n, n) array_like
    C : (p, n) array_like
    W : (q, q) array_like
        Process-noise intensity (two-sided spectral density), symmetric PSD.
    V : (p, p) array_like
        Measurement-noise intensity, symmetric positive definite.
    G : (n, q) array_like, optional
        How the process noise enters the state; default ``B`` (noise at the plant input).
    B : (n, m) array_like, optional
        The plant's input matrix, used when ``G`` is not given.

    Returns
    -------
    GainDesign
        ``gain`` = L ``(n, p)``, ``riccati`` = the error covariance P.

    Raises
    ------
    DesignError
        Bad intensities, an unstable unobservable mode, or no stabilising solution.
    """
    A = _as_matrix(A, "A")
    n = A.shape[0]
    C = _as_matrix(C, "C", shape=(None, n))
    p = C.shape[0]
    if G is None:
        if B is None:
            raise DesignError("Kalman filter: give G (how the process noise enters) or the plant's B")
        G = B
    Gm = _as_matrix(G, "G", shape=(n, None))
    Wm = check_weight(W, "W", Gm.shape[1], definite=False)
    Vm = check_weight(V, "V", p, definite=True)
    _require_controllable(A.T, C.T, what="L", only_unstable=True)
    P = _solve_care(A.T, C.T, Gm @ Wm @ Gm.T, Vm, np.zeros((n, p)), what="Kalman filter")
    L = np.linalg.solve(Vm, C @ P).T
    poles = _sort_poles(np.linalg.eigvals(A - L @ C))
    _require_stable(poles, "Kalman filter")
    return GainDesign(L, poles, float(np.linalg.norm(L, 2)), "kalman", riccati=P)


# ---------------------------------------------------------------------------------------
# soft checks
# ---------------------------------------------------------------------------------------
def estimator_speed_warning(controller_poles, estimator_poles, *, factor: float = 2.0) -> str | None:
    """A warning when the estimator is not at least ``factor`` times faster than the
    controller (speed = |real part| of the slowest pole).

    The 2-6x rule is common practice, no source. Returns None when fast enough or when
    the controller has a pole on or right of the imaginary axis (no speed to compare).
    """
    kc = np.asarray(controller_poles, dtype=complex)
    ke = np.asarray(estimator_poles, dtype=complex)
    slow_c = float(np.min(-kc.real))
    slow_e = float(np.min(-ke.real))
    if slow_c <= 0:
        return None
    ratio = slow_e / slow_c
    if ratio < factor:
        return (
            f"estimator poles are only {ratio:.2g}x faster than the controller poles (slowest real parts "
            f"{-slow_e:.4g} vs {-slow_c:.4g} rad/s); 2-6x faster is the usual rule of thumb"
        )
    return None


def noise_dominance_warning(rms_from_noise: float, rms_from_other: float, *, signal: str, ratio: float = 1.0) -> str | None:
    """A warning when sensor noise makes more of the control signal's RMS than the
    other sources (disturbances) do.

    Parameters
    ----------
    rms_from_noise, rms_from_other : float
        Steady-state RMS of the control signal due to noise sources, resp. due to the
        other white sources.
    signal : str
        Name of the control signal, for the message.
    ratio : float
        Warn when ``rms_from_noise > ratio * rms_from_other``.
    """
    if rms_from_noise > ratio * rms_from_other and rms_from_noise > 0:
        return (
            f"sensor noise dominates the control signal {signal!r}: RMS {rms_from_noise:.4g} from noise sources "
            f"vs {rms_from_other:.4g} from the other sources; the gain may be too aggressive"
        )
    return None
