"""Generated diagrams for the scale benchmarks (demo data, invented numbers).

* :func:`flexible_beam_loop`: a lightly damped flexible structure in modal form (a long
  gantry beam: ``modes`` bending modes, one actuator, one sensor) under an observer-based
  controller designed, as usual for such structures, on its first few modes.
* :func:`oven_zones`: a continuous oven of ``zones`` heating zones in a line, each under its
  own observer-based loop with a white load disturbance and white sensor noise; the
  product carries heat from each zone into the next (a cascade). 7 blocks, 4 states and 2
  white sources per zone: 143 zones give 1,001 blocks, 572 states and 286 sources.
* :func:`gain_chain_loop`: a loop whose controller passes through ``gains`` unit gains in
  series (a long chain of static blocks: scalings, unit conversions).

Also the reference the scale checks compare with, :func:`refined_direct_response`.
"""
from __future__ import annotations

import numpy as np
import scipy.linalg as sla

from loopwright.engine.diagram import Diagram


def _lqr(A, B, q=1.0, r=1.0):
    P = sla.solve_continuous_are(A, B, q * np.eye(A.shape[0]), r * np.eye(B.shape[1]))
    return np.linalg.solve(r * np.eye(B.shape[1]), B.T @ P)


def beam_modes(modes: int, *, seed: int = 0):
    """``(A, B, C)`` of ``modes`` bending modes in modal form: one 2x2 block per mode."""
    rng = np.random.default_rng(seed)
    k = np.arange(1, modes + 1)
    wn = 3.0 * k**2 * (1.0 + 0.01 * rng.standard_normal(modes))  # bending: w_k ~ k^2
    zeta = 0.002 + 0.008 * rng.random(modes)
    A = np.zeros((2 * modes, 2 * modes))
    B = np.zeros((2 * modes, 1))
    C = np.zeros((1, 2 * modes))
    phi_a = np.sin(0.37 * np.pi * k) * np.sqrt(2.0)  # mode shapes at actuator and sensor
    phi_s = np.sin(0.41 * np.pi * k) * np.sqrt(2.0)
    for i in range(modes):
        j = 2 * i
        A[j, j + 1] = 1.0
        A[j + 1, j] = -wn[i] ** 2
        A[j + 1, j + 1] = -2.0 * zeta[i] * wn[i]
        B[j + 1, 0] = phi_a[i]
        C[0, j] = phi_s[i]
    return A, B, C


def flexible_beam_loop(modes: int = 1500, *, design_modes: int = 4, seed: int = 0) -> Diagram:
    """Modal plant of ``2 * modes`` states in an observer-based loop (about 2 * modes + 8 states).

    Sources: reference ``r`` (step), actuator disturbance ``d`` and sensor noise ``n``
    (white). Signals include ``u`` (actuator), ``y`` (sensor), ``ym`` (measurement),
    ``xhat`` (estimate) and ``ufb`` (feedback command).
    """
    A, B, C = beam_modes(modes, seed=seed)
    nd = 2 * design_modes
    Ad, Bd, Cd = A[:nd, :nd], B[:nd], C[:, :nd]
    K = _lqr(Ad, Bd, q=1.0, r=10.0)
    L = _lqr(Ad.T, Cd.T, q=1.0, r=1e-2).T
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0}})
    d.add_block("source", "d", {"role": "disturbance", "width": 1, "waveform": {"kind": "white", "intensity": 0.01, "seed": 1}})
    d.add_block("source", "n", {"role": "noise", "width": 1, "waveform": {"kind": "white", "intensity": 1e-6, "seed": 2}})
    d.add_block("sum", "usum", {"signs": ["+", "+", "+"], "width": 1})
    d.add_block("plant", "beam", {"A": A.tolist(), "B": B.tolist(), "C": C.tolist(), "D": [[0.0]]})
    d.add_block("sum", "meas", {"signs": ["+", "+"], "width": 1})
    d.add_block("estimator", "est", {"A": Ad.tolist(), "B": Bd.tolist(), "C": Cd.tolist(), "D": [[0.0]], "L": L.tolist()})
    d.add_block("gain", "K", {"K": (-K).tolist()})
    d.connect("r.out", "usum.in1")
    d.connect("K.out", "usum.in2", name="ufb")
    d.connect("d.out", "usum.in3")
    d.connect("usum.out", "beam.u", name="u")
    d.connect("usum.out", "est.u")
    d.connect("beam.y", "meas.in1", name="y")
    d.connect("n.out", "meas.in2")
    d.connect("meas.out", "est.y", name="ym")
    d.connect("est.xhat", "K.in", name="xhat")
    return d


def oven_zones(zones: int = 143, *, seed: int = 0, ring: bool = False) -> Diagram:
    """``zones`` observer-based heating-zone loops in a line (7 blocks, 4 states each).

    Each zone: a two-state thermal plant (heater and product temperature), a linked
    estimator, a state-feedback gain, a junction adding the feedback, the zone's white load
    disturbance ``d<k>`` and the previous zone's product temperature, and a measurement
    junction adding white sensor noise ``n<k>``. ``ring=True`` also feeds the last zone into
    the first (one strongly coupled loop instead of a cascade).
    """
    rng = np.random.default_rng(seed)
    d = Diagram()
    for k in range(zones):
        a1, a2, b = rng.uniform(0.5, 2.0), rng.uniform(0.2, 1.0), rng.uniform(0.5, 1.5)
        A = np.array([[-a1, 0.3 * a1], [a2, -a2 - 0.1]])
        B = np.array([[b], [0.0]])
        C = np.array([[0.0, 1.0]])
        K = _lqr(A, B, q=1.0, r=0.1)
        L = _lqr(A.T, C.T, q=1.0, r=0.01).T
        d.add_block("source", f"d{k}", {"role": "disturbance", "width": 1, "waveform": {"kind": "white", "intensity": 0.05, "seed": 2 * k}})
        d.add_block("source", f"n{k}", {"role": "noise", "width": 1, "waveform": {"kind": "white", "intensity": 1e-4, "seed": 2 * k + 1}})
        couple = k > 0 or ring
        d.add_block("sum", f"u{k}", {"signs": ["+", "+", "+"] if couple else ["+", "+"], "width": 1})
        d.add_block("plant", f"Z{k}", {"A": A.tolist(), "B": B.tolist(), "C": C.tolist(), "D": [[0.0]]})
        d.add_block("estimator", f"E{k}", {"plant": f"Z{k}", "L": L.tolist()})
        d.add_block("gain", f"K{k}", {"K": (-K).tolist()})
        d.add_block("sum", f"m{k}", {"signs": ["+", "+"], "width": 1})
        d.connect(f"K{k}.out", f"u{k}.in1", name=f"ufb{k}")
        d.connect(f"d{k}.out", f"u{k}.in2")
        d.connect(f"u{k}.out", f"Z{k}.u", name=f"u{k}_cmd")
        d.connect(f"u{k}.out", f"E{k}.u")
        d.connect(f"Z{k}.y", f"m{k}.in1", name=f"T{k}")
        d.connect(f"n{k}.out", f"m{k}.in2")
        d.connect(f"m{k}.out", f"E{k}.y", name=f"Tm{k}")
        d.connect(f"E{k}.xhat", f"K{k}.in", name=f"xhat{k}")
    for k in range(1, zones):
        d.connect(f"Z{k - 1}.y", f"u{k}.in3")
    if ring and zones > 1:
        d.connect(f"Z{zones - 1}.y", "u0.in3")
    elif ring:
        d.connect("Z0.y", "u0.in3")
    return d


def gain_chain_loop(gains: int = 2000) -> Diagram:
    """A first-order plant under proportional control through ``gains`` unit gains in series."""
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0}})
    d.add_block("source", "n", {"role": "noise", "width": 1, "waveform": {"kind": "white", "intensity": 1e-4, "seed": 1}})
    d.add_block("sum", "e", {"signs": ["+", "-"], "width": 1})
    d.add_block("plant", "P", {"num": [2.0], "den": [1.0, 1.0]})
    d.add_block("sum", "ym", {"signs": ["+", "+"], "width": 1})
    d.connect("r.out", "e.in1")
    prev = "e.out"
    for k in range(gains):
        d.add_block("gain", f"g{k}", {"K": [[1.0]]})
        d.connect(prev, f"g{k}.in", name=f"s{k}")
        prev = f"g{k}.out"
    d.connect(prev, "P.u", name="u")
    d.connect("P.y", "ym.in1", name="y")
    d.connect("n.out", "ym.in2")
    d.connect("ym.out", "e.in2", name="ym")
    return d


def timed(fn, repeat: int = 1):
    """``(best wall s, best process-CPU s, last result)`` over ``repeat`` runs.

    CPU time is printed beside wall time: on a shared machine other jobs inflate wall
    time unevenly between the runs being compared.
    """
    import gc
    import time

    best, best_cpu, out = np.inf, np.inf, None
    for _ in range(repeat):
        gc.collect()  # every run starts without the garbage of the runs before
        t0, c0 = time.perf_counter(), time.process_time()
        out = fn()
        best = min(best, time.perf_counter() - t0)
        best_cpu = min(best_cpu, time.process_time() - c0)
    return best, best_cpu, out


def refined_direct_response(A, B, C, D, w):
    """``C (jw I - A)^-1 B + D`` by one LU solve per frequency, with two steps of iterative
    refinement whose residuals are summed in extended precision (``numpy.longdouble``):
    accurate where rounding in ``A x`` cancels (a plain LU solve is itself 2e-7 off where the
    response is 1e-15 of its peak at 1,008 states; common practice, no source:
    mixed-precision iterative refinement). Shape (k, p, m)."""
    n = A.shape[0]
    out = []
    for wk in w:
        M = 1j * wk * np.eye(n) - A
        lu = sla.lu_factor(M)
        x = sla.lu_solve(lu, B.astype(complex))
        for _ in range(2):
            r = B.astype(np.clongdouble) - M.astype(np.clongdouble) @ x.astype(np.clongdouble)
            x = x + sla.lu_solve(lu, r.astype(complex))
        out.append((C.astype(np.clongdouble) @ x.astype(np.clongdouble)).astype(complex) + D)
    return np.array(out)
