"""Hypothesis strategies shared by the engine tests: random plants and random loop diagrams."""
from __future__ import annotations

import numpy as np
from hypothesis import strategies as st

from loopwright.engine.diagram import Diagram

# tiny magnitudes only test floating-point underflow, not the engine: round them to zero
finite = st.floats(min_value=-3.0, max_value=3.0, allow_nan=False, allow_infinity=False).map(lambda v: 0.0 if abs(v) < 1e-6 else v)


@st.composite
def matrices(draw, rows: int, cols: int, elements=finite) -> list[list[float]]:
    return [[draw(elements) for _ in range(cols)] for _ in range(rows)]


@st.composite
def stable_tf(draw, max_order: int = 2) -> dict:
    """A proper transfer function with poles in -0.2 .. -5 (real) as coefficient lists."""
    order = draw(st.integers(0, max_order))
    poles = [draw(st.floats(0.2, 5.0)) for _ in range(order)]
    den = np.poly([-p for p in poles]).tolist() if order else [1.0]
    num = [draw(finite) for _ in range(draw(st.integers(1, order + 1)))]
    if not any(num):
        num = [1.0]
    return {"num": num, "den": den}


@st.composite
def ss_plant(draw, n: int | None = None, m: int = 1, p: int = 1) -> dict:
    n = draw(st.integers(1, 3)) if n is None else n
    return {"A": draw(matrices(n, n)), "B": draw(matrices(n, m)), "C": draw(matrices(p, n)), "D": [[0.0] * m for _ in range(p)]}


@st.composite
def loop_diagrams(draw) -> Diagram:
    """A feedback loop: reference, error junction, controller, load junction, plant, optional sensor filter.

    Controller and plant are random (the loop may be unstable); shapes are SISO.
    """
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0}})
    d.add_block("source", "dist", {"role": "disturbance", "width": 1, "waveform": {"kind": "zero"}})
    d.add_block("sum", "e", {"signs": ["+", draw(st.sampled_from(["+", "-"]))], "width": 1})
    ctrl_is_gain = draw(st.booleans())
    if ctrl_is_gain:
        d.add_block("gain", "Ctl", {"K": [[draw(st.floats(0.1, 5.0))]]})
        c_in, c_out = "Ctl.in", "Ctl.out"
    else:
        d.add_block("dynamic", "Ctl", draw(stable_tf()))
        c_in, c_out = "Ctl.u", "Ctl.y"
    d.add_block("sum", "up", {"signs": ["+", "+"], "width": 1})
    d.add_block("plant", "P", draw(ss_plant()))
    sensor = draw(st.booleans())
    d.connect("r.out", "e.in1")
    d.connect("e.out", c_in)
    d.connect(c_out, "up.in1")
    d.connect("dist.out", "up.in2")
    d.connect("up.out", "P.u")
    if sensor:
        d.add_block("dynamic", "S", {"num": [1.0], "den": [1.0 / draw(st.floats(1.0, 20.0)), 1.0]})
        d.connect("P.y", "S.u")
        d.connect("S.y", "e.in2")
    else:
        d.connect("P.y", "e.in2")
    return d
