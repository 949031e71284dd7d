"""Tests of engine/noise.py: the noise budget."""
from __future__ import annotations

import numpy as np
import scipy.linalg as sla
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from loopwright.engine.diagram import Diagram
from loopwright.engine.interconnect import assemble
from loopwright.engine.noise import noise_budget, white_sources


def _white(W, seed=1, role="noise"):
    return {"role": role, "width": 1, "waveform": {"kind": "white", "intensity": W, "seed": seed}}


def _tank_diagram(*, linked: bool) -> Diagram:
    # tests/REFERENCES.md#tank-kalman (scalar filter Riccati closed form): x' = -x + w, y = x + v, W = 8, V = 1, Kalman L = 2
    d = Diagram()
    d.add_block("source", "w", _white([[8.0]], 1, "disturbance"))
    d.add_block("source", "v", _white([[1.0]], 2))
    d.add_block("source", "r0", {"role": "reference", "width": 1, "waveform": {"kind": "zero"}})
    d.add_block("plant", "P", {"A": [[-1.0]], "B": [[1.0]], "C": [[1.0]], "D": [[0.0]]})
    d.add_block("sum", "ym", {"signs": ["+", "+"], "width": 1})
    if linked:
        d.add_block("estimator", "est", {"plant": "P", "L": [[2.0]]})
    else:
        d.add_block("estimator", "est", {"A": [[-1.0]], "B": [[0.0]], "C": [[1.0]], "D": [[0.0]], "L": [[2.0]]})
    d.add_block("sum", "err", {"signs": ["+", "-"], "width": 1})
    d.connect("w.out", "P.u", name="wind")
    d.connect("P.y", "ym.in1", name="level")
    d.connect("v.out", "ym.in2", name="v_out")
    d.connect("ym.out", "est.y", name="y_meas")
    d.connect("r0.out", "est.u", name="r0_out")
    d.connect("P.y", "err.in1")
    d.connect("est.xhat", "err.in2", name="xhat")
    return d


def test_estimation_error_rms_of_the_scalar_kalman_tank():
    # tests/REFERENCES.md#tank-kalman (scalar filter Riccati closed form): steady-state RMS of x - xhat is sqrt(2)
    b = noise_budget(assemble(_tank_diagram(linked=False)))
    assert_allclose(b.line("err.out").rms, np.sqrt(2.0), rtol=1e-8)
    # the error e' = -3 e + w - 2 v: w contributes 8/6, v contributes 4/6 (by hand)
    assert_allclose(b.line("err.out").variance_by_source["w"], 8 / 6, rtol=1e-9)
    assert_allclose(b.line("err.out").share_by_source["v"], 1 / 3, rtol=1e-9)


def test_linked_estimator_error_is_budgeted_by_state():
    # same tank with the estimator linked to the plant: error:est is x_P - xhat (tests/REFERENCES.md#tank-kalman)
    b = noise_budget(assemble(_tank_diagram(linked=True)))
    assert_allclose(b.line("error:est").rms, np.sqrt(2.0), rtol=1e-8)
    assert_allclose(b.line("error:est").rms, b.line("err.out").rms, rtol=1e-12)


def test_greenhouse_variance():
    # tests/REFERENCES.md#greenhouse-noise (closed form W/(2a)): x' = -0.5 x + w, W = 0.04: variance 0.04, RMS 0.2
    d = Diagram()
    d.add_block("source", "gust", _white([[0.04]], 3, "disturbance"))
    d.add_block("plant", "air", {"A": [[-0.5]], "B": [[1.0]], "C": [[1.0]], "D": [[0.0]]})
    d.connect("gust.out", "air.u", name="q")
    b = noise_budget(assemble(d))
    assert_allclose(b.line("air.y").rms, 0.2, rtol=1e-9)
    assert_allclose(b.line("air.y").share_by_source["gust"], 1.0, rtol=1e-12)


def test_white_signal_itself_has_infinite_rms_with_a_reason():
    d = _tank_diagram(linked=False)
    b = noise_budget(assemble(d))
    ln = b.line("y_meas")
    assert ln.rms == np.inf
    assert "direct feedthrough" in ln.reason and "'v'" in ln.reason
    assert ln.share_by_source["v"] == 1.0


@settings(max_examples=15, deadline=None)
@given(a=st.floats(0.1, 10.0), W1=st.floats(0.01, 5.0), W2=st.floats(0.01, 5.0), c=st.floats(-3.0, 3.0))
def test_variances_of_independent_sources_add(a, W1, W2, c):
    # x' = -a x + w1 + c w2: variance (W1 + c^2 W2)/(2a) (common practice, no source)
    d = Diagram()
    d.add_block("source", "n1", _white(W1, 1))
    d.add_block("source", "n2", _white(W2, 2))
    d.add_block("gain", "g", {"K": [[c]]})
    d.add_block("sum", "s", {"signs": ["+", "+"], "width": 1})
    d.add_block("plant", "P", {"A": [[-a]], "B": [[1.0]], "C": [[1.0]], "D": [[0.0]]})
    d.connect("n1.out", "s.in1")
    d.connect("n2.out", "g.in")
    d.connect("g.out", "s.in2")
    d.connect("s.out", "P.u", name="f")
    b = noise_budget(assemble(d))
    ln = b.line("P.y")
    total = (W1 + c * c * W2) / (2 * a)
    assert_allclose(ln.rms**2, total, rtol=1e-9)
    assert_allclose(ln.share_by_source["n1"] + ln.share_by_source["n2"], 1.0, rtol=1e-12)
    assert_allclose(ln.share_by_source["n1"], W1 / (W1 + c * c * W2), rtol=1e-9)


def test_budget_matches_a_direct_lyapunov_solve_on_a_sample():
    from loopwright.engine.project import load
    import importlib.resources as ir

    path = ir.files("loopwright.samples") / "conveyor_flexible_drive.lwd"
    model = assemble(load(str(path)))
    b = noise_budget(model)
    srcs = white_sources(model)
    assert srcs  # the sample states noise intensities
    X = np.zeros_like(model.A)
    for name, W in srcs.items():
        Bw = model.B[:, model.inputs[name]]
        X += sla.solve_continuous_lyapunov(model.A, -Bw @ W @ Bw.T)
    row = model.signals["y"].start
    assert_allclose(b.line("y").rms, np.sqrt(model.C[row] @ X @ model.C[row]), rtol=1e-8)


def test_unstable_loop_has_no_stationary_variance():
    d = Diagram()
    d.add_block("source", "n", _white(1.0))
    d.add_block("plant", "P", {"A": [[0.5]], "B": [[1.0]], "C": [[1.0]], "D": [[0.0]]})
    d.connect("n.out", "P.u")
    b = noise_budget(assemble(d))
    assert not b.stable
    assert b.line("P.y").rms == np.inf
    assert "not stable" in b.message


def test_no_white_sources_gives_an_empty_split():
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0}})
    d.add_block("plant", "P", {"A": [[-1.0]], "B": [[1.0]], "C": [[1.0]], "D": [[0.0]]})
    d.connect("r.out", "P.u")
    b = noise_budget(assemble(d))
    assert b.sources == {}
    assert "no source" in b.message
    assert b.line("P.y").rms == 0.0


def test_vector_source_with_a_full_intensity_matrix():
    # x' = -x + w1 + w2 with E[w w^T] = W delta: variance (W11 + 2 W12 + W22)/2 (common practice, no source)
    W = [[2.0, 0.5], [0.5, 1.0]]
    d = Diagram()
    d.add_block("source", "w", {"role": "disturbance", "width": 2, "waveform": {"kind": "white", "intensity": W, "seed": 4}})
    d.add_block("gain", "sumw", {"K": [[1.0, 1.0]]})
    d.add_block("plant", "P", {"A": [[-1.0]], "B": [[1.0]], "C": [[1.0]], "D": [[0.0]]})
    d.connect("w.out", "sumw.in")
    d.connect("sumw.out", "P.u")
    b = noise_budget(assemble(d))
    assert_allclose(b.line("P.y").rms ** 2, (2.0 + 1.0 + 1.0) / 2, rtol=1e-10)
    assert b.line("w.out[1]").rms == np.inf
