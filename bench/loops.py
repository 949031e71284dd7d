"""Generated diagrams for the benchmarks: chains of coupled observer-based loops (demo data).

Each *cell* is one loop: a reference source, a junction, a plant of ``n`` states, a linked
estimator, a state-feedback gain on the estimate, and a sensor junction. Cell ``k``'s plant
output also drives cell ``k+1``'s load junction, so the loops are coupled in a chain.
Gains come from LQR and Kalman designs (scipy's Riccati solver), so every cell is stable on its own.
"""
from __future__ import annotations

import numpy as np
import scipy.linalg as sla

from loopwright.engine.diagram import Diagram

BLOCKS_PER_CELL = 6


def _cell_plant(n: int, rng: np.random.Generator):
    # a chain of lightly damped modes: a flexible structure with n/2 resonances
    A = np.zeros((n, n))
    for k in range(0, n - 1, 2):
        wn = 1.0 + 3.0 * rng.random()
        A[k, k + 1] = 1.0
        A[k + 1, k] = -wn**2
        A[k + 1, k + 1] = -0.1 * wn
        if k + 2 < n:
            A[k + 1, k + 2] = 0.5
    if n % 2:
        A[-1, -1] = -1.0
    B = np.zeros((n, 1))
    B[-1, 0] = 1.0
    C = np.zeros((1, n))
    C[0, 0] = 1.0
    return A, B, C


def chain_of_loops(blocks: int, *, plant_order: int = 12, seed: int = 1) -> Diagram:
    """About ``blocks`` blocks in ``blocks // 6`` coupled cells; states = 2 * plant_order per cell."""
    rng = np.random.default_rng(seed)
    cells = max(1, blocks // BLOCKS_PER_CELL)
    d = Diagram()
    for k in range(cells):
        A, B, C = _cell_plant(plant_order, rng)
        # LQR and Kalman gains keep every cell well conditioned, however many states it has
        P = sla.solve_continuous_are(A, B, np.eye(plant_order), np.eye(1))
        K = B.T @ P
        S = sla.solve_continuous_are(A.T, C.T, np.eye(plant_order), 0.01 * np.eye(1))
        L = S @ C.T / 0.01
        d.add_block("source", f"r{k}", {"role": "reference", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0}})
        d.add_block("sum", f"u{k}", {"signs": ["+", "+", "+"], "width": 1})
        d.add_block("plant", f"P{k}", {"A": A.tolist(), "B": B.tolist(), "C": C.tolist(), "D": [[0.0]]})
        d.add_block("estimator", f"E{k}", {"plant": f"P{k}", "L": L.tolist()})
        d.add_block("gain", f"K{k}", {"K": (-K).tolist()})
        d.add_block("sum", f"ym{k}", {"signs": ["+", "+"], "width": 1})
        d.connect(f"r{k}.out", f"u{k}.in1")
        d.connect(f"K{k}.out", f"u{k}.in2")
        d.connect(f"u{k}.out", f"P{k}.u")
        d.connect(f"u{k}.out", f"E{k}.u")
        d.connect(f"P{k}.y", f"ym{k}.in1")
        d.connect(f"ym{k}.out", f"E{k}.y")
        d.connect(f"E{k}.xhat", f"K{k}.in")
        if k:
            d.connect(f"P{k - 1}.y", f"u{k}.in3")
            d.connect(f"r{k}.out", f"ym{k}.in2")
    d.connect("r0.out", "ym0.in2")
    d.connect(f"P{cells - 1}.y", "u0.in3")  # close the chain into a ring: one big feedback loop
    return d


#: Where each block of a cell sits on the canvas, relative to the cell's corner (scene units).
_CELL_LAYOUT = {"r": (0, 0), "u": (140, 0), "P": (280, 0), "ym": (420, 0), "E": (280, 140), "K": (140, 140)}


def view_loop(states: int, *, plant_order: int = 5, seed: int = 1) -> Diagram:
    """A chain of observer-based loops with ``states`` states (a multiple of ``2 * plant_order``),
    laid out on the canvas, with two kept pairs and a loop break: what the views bench opens.

    Pairs: the reference of the first cell to its plant output, and the reference of the
    second cell (of the first when there is one cell) to the first plant output. Loop
    break: the first plant's input port ``P0.u``.
    """
    per_cell = 2 * plant_order
    if states % per_cell:
        raise ValueError(f"states must be a multiple of {per_cell}; got {states}")
    cells = states // per_cell
    d = chain_of_loops(cells * BLOCKS_PER_CELL, plant_order=plant_order, seed=seed)
    cols = max(1, int(round(cells**0.5)))
    for b in d.blocks.values():
        k = int("".join(ch for ch in b.name if ch.isdigit()))
        stem = b.name.rstrip("0123456789")
        dx, dy = _CELL_LAYOUT[stem]
        b.layout = dict(b.layout, x=float((k % cols) * 600 + dx), y=float((k // cols) * 300 + dy))
    other = "r1" if cells > 1 else "r0"
    d.settings["pairs"] = [{"input": "r0", "output": "P0.y"}, {"input": other, "output": "P0.y" if cells > 1 else "u0.out"}]
    d.settings["loop_break"] = "P0.u"
    return d
