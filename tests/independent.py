"""Independent answers for observer-based loops, from plain numpy/scipy (no Loopwright code).

The tests hold the engine and the CLI to these. Methods, all common practice, no source:
the closed loop of a plant ``(A, B, C)`` with state feedback ``K`` on a full-order observer
with gain ``L`` (the observer reading the plant's input command) scaled by a loop gain ``g``
at the plant input is ``[[A, -g B K], [L C, A - B K - L C]]``; the gain margins are the
factors ``g`` where its rightmost eigenvalue crosses the imaginary axis (scipy ``brentq``
on the largest real part); the loop transfer at the plant input is
``L(s) = K (sI - A + B K + L C)^-1 L C (sI - A)^-1 B``; the phase margin is
``angle L(j w_c) + 180 deg`` at ``|L(j w_c)| = 1``.
"""
from __future__ import annotations

import numpy as np
from scipy.optimize import brentq


def observer_loop_matrix(A, B, C, K, L, g: float = 1.0) -> np.ndarray:
    """Closed-loop state matrix of state feedback on an observer, loop gain ``g`` at the plant input."""
    A, B, C, K, L = (np.atleast_2d(np.asarray(M, dtype=float)) for M in (A, B, C, K, L))
    return np.block([[A, -g * B @ K], [L @ C, A - B @ K - L @ C]])


def _rightmost(A, B, C, K, L, g):
    return np.linalg.eigvals(observer_loop_matrix(A, B, C, K, L, g)).real.max()


def gain_margin_factor(A, B, C, K, L, lo: float, hi: float) -> tuple[float, float]:
    """The loop-gain factor in ``(lo, hi)`` where stability changes, and the crossing frequency (rad/s)."""
    g = brentq(lambda g: _rightmost(A, B, C, K, L, g), lo, hi, xtol=1e-14, rtol=1e-13)
    ev = np.linalg.eigvals(observer_loop_matrix(A, B, C, K, L, g))
    return g, float(abs(ev[np.argmax(ev.real)].imag))


def loop_at_plant_input(A, B, C, K, L, w) -> np.ndarray:
    """``L(jw)`` of the observer-based loop broken at the plant input, shape (k,)."""
    A, B, C, K, L = (np.atleast_2d(np.asarray(M, dtype=float)) for M in (A, B, C, K, L))
    n = A.shape[0]
    I = np.eye(n)
    out = []
    for wk in np.atleast_1d(w):
        s = 1j * wk
        plant = C @ np.linalg.solve(s * I - A, B)
        ctrl = K @ np.linalg.solve(s * I - A + B @ K + L @ C, L)
        out.append((ctrl @ plant)[0, 0])
    return np.array(out)


def phase_margin(A, B, C, K, L, lo: float, hi: float) -> tuple[float, float]:
    """Phase margin (deg) and crossover (rad/s) of the one gain crossover in ``(lo, hi)`` rad/s."""
    wc = brentq(lambda w: np.log(abs(loop_at_plant_input(A, B, C, K, L, w)[0])), lo, hi, xtol=1e-14, rtol=1e-13)
    ph = np.degrees(np.angle(loop_at_plant_input(A, B, C, K, L, wc)[0]))
    return float((ph + 180.0 + 180.0) % 360.0 - 180.0), wc


def rotor_sample_parts(diagram_json: dict):
    """Plant ``A, B, C``, feedback gain ``K`` (``u = -K xhat``) and observer gain ``L`` read from
    the levitated-rotor sample's file (the file's data, not Loopwright's reading of it)."""
    by = {b["name"]: b["params"] for b in diagram_json["blocks"]}
    P = by["P"]
    return (np.array(P["A"], float), np.array(P["B"], float), np.array(P["C"], float),
            -np.array(by["K"]["K"], float), np.array(by["est"]["L"], float))


def observer_controller(A, B, C, K_block, L, s: complex) -> np.ndarray:
    """``G_c(s)`` of ``u = K_block xhat``, ``xhat' = A xhat + B u + L (y - C xhat)`` (y -> u)."""
    A, B, C, Kb, L = (np.atleast_2d(np.asarray(M, dtype=float)) for M in (A, B, C, K_block, L))
    return Kb @ np.linalg.solve(s * np.eye(A.shape[0]) - A - B @ Kb + L @ C, L)


def state_space_at(A, B, C, D, s: complex) -> np.ndarray:
    """``C (sI - A)^-1 B + D`` (``s`` may be a point ``z`` of a discrete model)."""
    A, B, C, D = (np.atleast_2d(np.asarray(M, dtype=float)) for M in (A, B, C, D))
    if A.size == 0:
        return D.astype(complex)
    return C @ np.linalg.solve(s * np.eye(A.shape[0]) - A, B) + D
