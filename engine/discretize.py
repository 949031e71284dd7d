"""Discretisation of a continuous state-space model, and simulation of the result.

Methods (the symbols are the model's matrices; ``T`` is the sample period in seconds):

* ``"zoh"`` (zero-order hold): ``Ad = e^{A T}``, ``Bd = int_0^T e^{A s} ds B``, computed
  together as one matrix exponential of ``[[A, B], [0, 0]] T``; ``Cd = C``, ``Dd = D``.
* ``"tustin"``: ``s = (2/T) (z - 1)/(z + 1)``. With ``M = I - A T'/2``:
  ``Ad = M^-1 (I + A T'/2)``, ``Bd = M^-1 B T'``, ``Cd = C M^-1``, ``Dd = D + C M^-1 B T'/2``
  (the balanced form; its transfer function is the Tustin map of the model's). Without
  pre-warping ``T' = T``; pre-warped at ``w0`` rad/s, ``T' = (2/w0) tan(w0 T/2)`` so the
  discrete frequency response equals the continuous one exactly at ``w0``.

No matrix is inverted explicitly: the solves use LU factorisations.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import scipy.linalg as sla

from loopwright.engine.errors import DesignError

__all__ = ["DiscreteModel", "discretize", "simulate_discrete", "discrete_frequency_response", "DISCRETIZE_METHODS"]

DISCRETIZE_METHODS = ("zoh", "tustin")


@dataclass(frozen=True)
class DiscreteModel:
    """``x[k+1] = A x[k] + B u[k]``, ``y[k] = C x[k] + D u[k]``, sample period ``ts`` seconds.

    Attributes
    ----------
    A : (n, n), B : (n, m), C : (p, n), D : (p, m) ndarray
    ts : float
        Sample period, s.
    method : str
        ``"zoh"`` or ``"tustin"``.
    prewarp_rad_s : float or None
        Pre-warping frequency of a Tustin model, rad/s.
    """

    A: np.ndarray
    B: np.ndarray
    C: np.ndarray
    D: np.ndarray
    ts: float
    method: str
    prewarp_rad_s: float | None = None


def _mats(A, B, C, D):
    A = np.atleast_2d(np.asarray(A, dtype=float)) if np.size(A) else np.zeros((0, 0))
    n = A.shape[0]
    B = np.asarray(B, dtype=float).reshape(n, -1) if n else np.zeros((0, np.atleast_2d(np.asarray(D)).shape[1]))
    C = np.asarray(C, dtype=float).reshape(-1, n) if n else np.zeros((np.atleast_2d(np.asarray(D)).shape[0], 0))
    D = np.atleast_2d(np.asarray(D, dtype=float))
    if A.shape != (n, n) or D.shape != (C.shape[0], B.shape[1]):
        raise DesignError(f"model matrices do not fit: A {A.shape}, B {B.shape}, C {C.shape}, D {D.shape}")
    return A, B, C, D


def discretize(A, B, C, D, ts: float, *, method: str = "zoh", prewarp_rad_s: float | None = None) -> DiscreteModel:
    """Discretise ``x' = A x + B u``, ``y = C x + D u`` at sample period ``ts``.

    Parameters
    ----------
    A : (n, n), B : (n, m), C : (p, n), D : (p, m) array_like
    ts : float
        Sample period, s (> 0).
    method : {"zoh", "tustin"}
    prewarp_rad_s : float, optional
        Tustin only: frequency (rad/s, below the Nyquist frequency ``pi/ts``) at which
        the discrete response matches the continuous one exactly.

    Returns
    -------
    DiscreteModel

    Raises
    ------
    DesignError
        Non-positive period, unknown method, pre-warping with ZOH or at/above Nyquist,
        Tustin on a model with a pole at ``s = 2/T'`` (``I - A T'/2`` singular).
    """
    A, B, C, D = _mats(A, B, C, D)
    try:
        ts = float(ts)
    except (TypeError, ValueError) as err:
        raise DesignError(f"sample period {ts!r} is not a number") from err
    if not np.isfinite(ts) or ts <= 0:
        raise DesignError(f"sample period {ts} s must be a positive number of seconds")
    if method not in DISCRETIZE_METHODS:
        raise DesignError(f"discretisation method {method!r} is not one of {', '.join(DISCRETIZE_METHODS)}")
    n, m = B.shape
    with np.errstate(over="ignore", invalid="ignore"):
        _require_finite(A, ts, A * ts)
    if method == "zoh":
        if prewarp_rad_s is not None:
            raise DesignError("pre-warping applies to the Tustin method only, not to zero-order hold")
        big = np.zeros((n + m, n + m))
        big[:n, :n] = A * ts
        big[:n, n:] = B * ts
        with np.errstate(all="ignore"):  # overflow is reported by _require_finite, with the period
            try:
                E = sla.expm(big)
            except (ValueError, np.linalg.LinAlgError):
                E = np.full_like(big, np.nan)
        _require_finite(A, ts, E)
        return DiscreteModel(E[:n, :n], E[:n, n:], C.copy(), D.copy(), ts, "zoh")
    t_eff = ts
    if prewarp_rad_s is not None:
        w0 = float(prewarp_rad_s)
        if not np.isfinite(w0) or w0 <= 0 or w0 * ts >= np.pi:
            raise DesignError(
                f"pre-warp frequency {w0} rad/s must be positive and below the Nyquist frequency {np.pi / ts:.6g} rad/s"
            )
        t_eff = 2.0 / w0 * np.tan(w0 * ts / 2.0)
    M = np.eye(n) - A * (t_eff / 2.0)
    with warnings.catch_warnings():
        # An exactly singular factor is detected from the pivots just below.
        warnings.simplefilter("ignore", sla.LinAlgWarning)
        lu = sla.lu_factor(M, check_finite=True)
    if n and np.min(np.abs(np.diag(lu[0]))) <= 1e-14 * max(1.0, np.abs(M).max()):
        raise DesignError(f"Tustin: I - A T/2 is singular (a pole at s = {2 / t_eff:.6g})")
    Ad = sla.lu_solve(lu, np.eye(n) + A * (t_eff / 2.0)) if n else np.zeros((0, 0))
    Bd = sla.lu_solve(lu, B * t_eff) if n else B.copy()
    Cd = sla.lu_solve(lu, C.T, trans=1).T if n else C.copy()
    Dd = D + C @ Bd / 2.0 if n else D.copy()
    _require_finite(A, ts, Ad, Bd, Cd, Dd)
    return DiscreteModel(Ad, Bd, Cd, Dd, ts, "tustin", None if prewarp_rad_s is None else float(prewarp_rad_s))


def _require_finite(A: np.ndarray, ts: float, *mats: np.ndarray) -> None:
    """Refuse a discretisation that overflowed: ``e^(A ts)`` of an unstable or very fast
    pole grows like ``e^(|p| ts)``, which passes the largest double once ``|p| ts > 709``."""
    if all(np.all(np.isfinite(M)) for M in mats):
        return
    with np.errstate(all="ignore"):
        fastest = float(np.max(np.abs(np.linalg.eigvals(A)))) if A.size and np.all(np.isfinite(A)) else float("nan")
    raise DesignError(
        f"sample period {ts:g} s is too long for this model: the discrete matrices overflow "
        f"(fastest pole {fastest:.3g} rad/s, |p| ts = {fastest * ts:.3g}); use a shorter period"
    )


def simulate_discrete(model: DiscreteModel, u, *, x0=None) -> np.ndarray:
    """Run the difference equations over an input sequence.

    Parameters
    ----------
    model : DiscreteModel
    u : (k, m) array_like
        Input at each sample (a 1-D array is taken as ``(k, 1)``).
    x0 : (n,) array_like, optional
        Initial state (default zero).

    Returns
    -------
    (k, p) ndarray
        Output at each sample.
    """
    u = np.asarray(u, dtype=float)
    if u.ndim == 1:
        u = u.reshape(-1, 1)
    A, B, C, D = model.A, model.B, model.C, model.D
    n, m = B.shape
    if u.shape[1] != m:
        raise DesignError(f"input sequence has {u.shape[1]} column(s), the model has {m} input(s)")
    x = np.zeros(n) if x0 is None else np.asarray(x0, dtype=float).reshape(n)
    # The state recursion is inherently sequential; outputs are formed in one product after.
    xs = np.empty((u.shape[0], n))
    Bu = u @ B.T
    for k in range(u.shape[0]):
        xs[k] = x
        x = A @ x + Bu[k]
    return xs @ C.T + u @ D.T


def discrete_frequency_response(model: DiscreteModel, w_rad_s) -> np.ndarray:
    """``G(e^{j w T})`` at frequencies ``w_rad_s``.

    Returns
    -------
    (len(w), p, m) complex ndarray
    """
    w = np.asarray(w_rad_s, dtype=float).ravel()
    z = np.exp(1j * w * model.ts)
    # at the Nyquist frequency z is -1 exactly (exp leaves a 1e-16 imaginary part), so the
    # response of a real model is real there, as it is at w = 0
    z[np.abs(w * model.ts - np.pi) <= 4 * np.finfo(float).eps * np.pi] = -1.0
    A, B, C, D = model.A, model.B, model.C, model.D
    n = A.shape[0]
    if n == 0:
        return np.broadcast_to(D.astype(complex), (w.size,) + D.shape).copy()
    # An orthogonal Hessenberg reduction first keeps the resolvent solves well conditioned;
    # the solves for all frequencies run as one stacked call.
    H, Q = sla.hessenberg(A, calc_q=True)
    Bh, Ch = Q.T @ B, C @ Q
    res = np.linalg.solve(z[:, None, None] * np.eye(n) - H, np.broadcast_to(Bh.astype(complex), (w.size,) + Bh.shape))
    return Ch @ res + D
