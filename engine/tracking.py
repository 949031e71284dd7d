"""Reference tracking for state feedback: a static feedforward gain and integral action.

Conventions (symbols as in the equations):

* Feedforward: ``u = -K x + N r`` on ``x' = A x + B u``, ``y = C x + D u``. N is chosen so
  that a constant reference gives ``y = r`` in steady state. From the DC equations
  ``[[A, B], [C, D]] [x_ss; u_ss] = [0; r]`` write ``x_ss = Nx r``, ``u_ss = Nu r``; then
  ``N = Nu + K Nx``. The system has a (unique) solution only when the plant has no
  transmission zero at ``s = 0`` and as many inputs as tracked outputs (with more inputs
  than outputs the least-norm ``Nx, Nu`` is used).
* Integral action: the integrator state ``xi`` integrates the tracking error,
  ``xi' = r - y = r - C x - D u``; the augmented plant is
  ``[x; xi]' = [[A, 0], [-C, 0]] [x; xi] + [[B], [-D]] u``, and the gain designed on it
  splits into ``K_aug = [K_x, K_i]`` with ``u = -K_x x - K_i xi``.

:func:`add_integral_action` draws those pieces into a :class:`Diagram` (error sum,
integrator, gain, one more input on the actuator's summing junction).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from loopwright.engine.design import GainDesign, lqr_gain, place_state_feedback
from loopwright.engine.diagram import Diagram
from loopwright.engine.errors import DesignError, DiagramError

__all__ = [
    "feedforward_gain",
    "integral_augmentation",
    "IntegralDesign",
    "design_integral_action",
    "add_integral_action",
]


def _mats(A, B, C, D):
    A = np.atleast_2d(np.asarray(A, dtype=float))
    B = np.atleast_2d(np.asarray(B, dtype=float))
    C = np.atleast_2d(np.asarray(C, dtype=float))
    n, m, p = A.shape[0], B.shape[1], C.shape[0]
    D = np.zeros((p, m)) if D is None else np.atleast_2d(np.asarray(D, dtype=float))
    if A.shape != (n, n) or B.shape[0] != n or C.shape[1] != n or D.shape != (p, m):
        raise DesignError(
            f"plant matrices do not fit: A {A.shape}, B {B.shape}, C {C.shape}, D {D.shape}; "
            "expected A n x n, B n x m, C p x n, D p x m"
        )
    return A, B, C, D


def _select_outputs(C, D, outputs):
    if outputs is None:
        return C, D
    idx = np.asarray(list(outputs), dtype=int)
    if idx.size == 0 or np.any(idx < 0) or np.any(idx >= C.shape[0]):
        raise DesignError(f"outputs: {[int(i) + 1 for i in idx]} must name outputs within 1..{C.shape[0]}")
    return C[idx], D[idx]


def feedforward_gain(A, B, C, D, K, *, outputs=None) -> np.ndarray:
    """Feedforward gain N for zero steady-state error to a step reference.

    Parameters
    ----------
    A : (n, n), B : (n, m), C : (p, n), D : (p, m) array_like
        The plant. ``D`` may be None (zero).
    K : (m, n) array_like
        The state-feedback gain (``u = -K x``).
    outputs : sequence of int, optional
        0-based rows of C to track (default: all outputs).

    Returns
    -------
    (m, q) ndarray
        N, with q the number of tracked outputs; ``u = -K x + N r``.

    Raises
    ------
    DesignError
        More tracked outputs than inputs, or a plant zero at ``s = 0`` (the DC equations are
        singular), named in the message.
    """
    A, B, C, D = _mats(A, B, C, D)
    C, D = _select_outputs(C, D, outputs)
    n, m, q = A.shape[0], B.shape[1], C.shape[0]
    K = np.atleast_2d(np.asarray(K, dtype=float))
    if K.shape != (m, n):
        raise DesignError(f"K: is {K.shape[0]}x{K.shape[1]}, expected {m}x{n} (inputs x states)")
    if q > m:
        raise DesignError(
            f"feedforward: {q} outputs to track but only {m} input(s); zero steady-state error "
            "to every reference cannot be reached"
        )
    M = np.block([[A, B], [C, D]])
    rhs = np.vstack([np.zeros((n, q)), np.eye(q)])
    sv = np.linalg.svd(M, compute_uv=False)
    # full row rank is what a solution needs (n + q rows)
    if sv.size < n + q or sv[n + q - 1] <= 1e-10 * max(1.0, sv[0]):
        raise DesignError(
            "feedforward: the DC equations [[A, B], [C, D]] are singular: the plant has a zero at s = 0 "
            "(it differentiates, so a constant output cannot be held) or a tracked output is not "
            "independent of the others; use integral action on another output, or drop that output"
        )
    if q == m:
        sol = np.linalg.solve(M, rhs)
    else:
        sol = np.linalg.lstsq(M, rhs, rcond=None)[0]
    Nx, Nu = sol[:n], sol[n:]
    return Nu + K @ Nx


def integral_augmentation(A, B, C, D, *, outputs=None) -> tuple[np.ndarray, np.ndarray]:
    """The plant augmented with integrators of the tracking error ``r - y``.

    Returns
    -------
    Aa : (n + q, n + q) ndarray
        ``[[A, 0], [-C, 0]]``
    Ba : (n + q, m) ndarray
        ``[[B], [-D]]``
    """
    A, B, C, D = _mats(A, B, C, D)
    C, D = _select_outputs(C, D, outputs)
    n, q = A.shape[0], C.shape[0]
    Aa = np.block([[A, np.zeros((n, q))], [-C, np.zeros((q, q))]])
    Ba = np.vstack([B, -D])
    return Aa, Ba


@dataclass(frozen=True)
class IntegralDesign:
    """State feedback with integral action: ``u = -K_x x - K_i xi``, ``xi' = r - y``.

    Attributes
    ----------
    K_x : (m, n) ndarray
    K_i : (m, q) ndarray
    design : GainDesign
        The design on the augmented plant (its ``poles`` are the closed-loop poles).
    pieces : tuple of str
        What to draw in the diagram, one line each.
    """

    K_x: np.ndarray
    K_i: np.ndarray
    design: GainDesign
    pieces: tuple[str, ...]


def design_integral_action(
    A, B, C, D, *, method: str = "place", poles=None, Q=None, R=None, N=None, outputs=None, inputs=None
) -> IntegralDesign:
    """Design ``[K_x, K_i]`` on the plant augmented with error integrators.

    Parameters
    ----------
    A, B, C, D : plant matrices
    method : {"place", "ackermann", "lqr"}
    poles : n + q poles, for placement
    Q : (n + q, n + q), R : (m, m), N : (n + q, m), for LQR (Q weighs the integrator
        states in its last q rows/columns)
    outputs : 0-based outputs to integrate (default: all)
    inputs : 0-based inputs the gain may use (default: all)

    Raises
    ------
    DesignError
        The augmented plant is not controllable -- in particular when the plant has a
        zero at ``s = 0`` (the integrator mode is then uncontrollable), named by the PBH test.
    """
    Aa, Ba = integral_augmentation(A, B, C, D, outputs=outputs)
    n = np.atleast_2d(np.asarray(A, dtype=float)).shape[0]
    if method in ("place", "ackermann"):
        if poles is None:
            raise DesignError(f"integral action by {method}: give {Aa.shape[0]} poles (plant states + integrators)")
        design = place_state_feedback(Aa, Ba, poles, inputs=inputs, method=method)
    elif method == "lqr":
        if Q is None or R is None:
            raise DesignError("integral action by lqr: give Q and R")
        design = lqr_gain(Aa, Ba, Q, R, N=N, inputs=inputs)
    else:
        raise DesignError(f"integral action: method {method!r} is not one of place, ackermann, lqr")
    K_x, K_i = design.gain[:, :n], design.gain[:, n:]
    q = K_i.shape[1]
    pieces = (
        f"a summing junction forming the tracking error r - y (signs ['+', '-'], width {q})",
        f"an integrator of width {q} on that error (its output is xi)",
        f"a gain block with K = -K_i ({K_i.shape[0]}x{q}) on xi",
        "one more '+' input on the actuator's summing junction, fed by that gain",
        "the state-feedback gain block keeps -K_x on the state estimate",
    )
    return IntegralDesign(K_x, K_i, design, pieces)


def _signal_port(diagram: Diagram, name: str):
    """The output port that drives signal ``name`` (a wire's name, or ``block.port``)."""
    from loopwright.engine.errors import UnknownNameError
    from loopwright.engine.ports import output_ports

    for w in diagram.wires.values():
        if w.name == name:
            return w.source
    if "." in name:
        bname, port = name.rsplit(".", 1)
        try:
            blk = diagram.block_by_name(bname)
        except UnknownNameError:
            blk = None
        if blk is not None and port in output_ports(blk):
            from loopwright.engine.diagram import PortRef

            return PortRef(blk.id, port)
    raise UnknownNameError(
        f"no signal called {name!r}: expected a wire's name or block.port",
        suggestions=[w.name for w in diagram.wires.values() if name.lower() in w.name.lower()][:3],
    )


def add_integral_action(
    diagram: Diagram,
    K_i,
    *,
    reference: str,
    measured: str,
    actuator_sum: str,
    prefix: str = "integral",
) -> Diagram:
    """A copy of ``diagram`` with the integral-action pieces drawn in.

    Adds ``<prefix>_error`` (sum, signs ``['+', '-']``: reference minus measured),
    ``<prefix>_state`` (integrator) and ``<prefix>_gain`` (gain ``-K_i``), and appends a
    ``'+'`` input to the summing junction ``actuator_sum`` fed by the gain.

    Parameters
    ----------
    diagram : Diagram
        Not modified.
    K_i : (m, q) array_like
        From :func:`design_integral_action` (``u = ... - K_i xi``).
    reference, measured : str
        Signals (a wire's name, or ``block.port`` of an unwired output) of the reference
        ``r`` and the measured output ``y`` (width q).
    actuator_sum : str
        Name of the summing junction whose output drives the plant input.
    prefix : str
        Stem of the new block names (made unique).

    Raises
    ------
    DiagramError
        ``actuator_sum`` is not a summing junction; unknown signal names (UnknownNameError).
    """
    out = diagram.copy()
    K_i = np.atleast_2d(np.asarray(K_i, dtype=float))
    q = K_i.shape[1]
    ref_port = _signal_port(out, reference)
    meas_port = _signal_port(out, measured)
    sum_blk = out.block_by_name(actuator_sum)
    if sum_blk.kind != "sum":
        raise DiagramError(f"block {actuator_sum!r} is a {sum_blk.kind}, not a summing junction", block_ids=[sum_blk.id])
    err = out.add_block("sum", out.unique_name(f"{prefix}_error"), {"signs": ["+", "-"], "width": q})
    integ = out.add_block("integrator", out.unique_name(f"{prefix}_state"), {"width": q})
    gain = out.add_block("gain", out.unique_name(f"{prefix}_gain"), {"K": (-K_i).tolist()})
    from loopwright.engine.diagram import PortRef

    out.connect(ref_port, PortRef(err, "in1"))
    out.connect(meas_port, PortRef(err, "in2"))
    out.connect(PortRef(err, "out"), PortRef(integ, "in"))
    out.connect(PortRef(integ, "out"), PortRef(gain, "in"))
    params = dict(sum_blk.params)
    signs = list(params.get("signs", [])) + ["+"]
    params["signs"] = signs
    out.set_params(sum_blk.id, params)
    out.connect(PortRef(gain, "out"), PortRef(sum_blk.id, f"in{len(signs)}"))
    return out
