"""Assembly of a diagram into one model, checked against hand results, the cases of tests/REFERENCES.md and python-control 0.10.2."""
from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from loopwright.engine.diagram import Diagram
from loopwright.engine.errors import AlgebraicLoopError, ConnectionError_, DimensionError, ParameterError, UnknownNameError
from loopwright.engine.interconnect import assemble, collect_problems
from reference_models import to_python_control
from diagrams import stage_loop_ref03 as stage_loop
from strategies import loop_diagrams


def tf_eval(model, src: str, sig: str, s: complex) -> np.ndarray:
    A, B, C, D = model.pair(src, sig)
    return C @ np.linalg.solve(s * np.eye(A.shape[0]) - A, B) + D


def test_separation_stage_poles_and_dc_gain():
    # tests/REFERENCES.md#stage-observer (separation principle; DC gain 82/240 derived by hand)
    m = assemble(stage_loop())
    poles = np.sort_complex(np.linalg.eigvals(m.A))
    assert_allclose(poles, np.sort_complex([-6, -5, -2 - 2j, -2 + 2j]), atol=1e-8)
    assert_allclose(np.poly(m.A), [1, 15, 82, 208, 240], atol=1e-8)
    assert_allclose(tf_eval(m, "d", "P.y", 0.0).real, [[82 / 240]], rtol=1e-9)
    assert m.state_names == ("P.x1", "P.x2", "est.xhat1", "est.xhat2")
    assert m.output_names[m.signals["est.xhat"].start + 1] == "est.xhat[2]"


def test_loop_break_gives_the_loop_transfer():
    # tests/REFERENCES.md#stage-observer (separation principle, derived by hand): L(s) = (208 s + 240)/(s^2 (s^2 + 15 s + 82)) at the plant input
    m = assemble(stage_loop(), break_at="up.out")
    for s in (0.5j, 2.0j, 1 + 3j):
        Ls = -tf_eval(m, "break:up.out", "up.out", s)[0, 0]
        assert_allclose(Ls, (208 * s + 240) / (s**2 * (s**2 + 15 * s + 82)), rtol=1e-10)
    assert "break:up.out" in m.input_names


def test_triple_lag_oven_poles():
    # tests/REFERENCES.md#oven-margins (closed forms by hand): L = 4/(s+1)^3 in unity feedback
    d = Diagram()
    d.add_block("source", "r")
    d.add_block("sum", "e", {"signs": ["+", "-"], "width": 1})
    d.add_block("gain", "Kp", {"K": [[4]]})
    d.add_block("plant", "P", {"A": [[-1, 0, 0], [1, -1, 0], [0, 1, -1]], "B": [[1], [0], [0]], "C": [[0, 0, 1]], "D": [[0]]})
    d.connect("r.out", "e.in1"); d.connect("P.y", "e.in2"); d.connect("e.out", "Kp.in"); d.connect("Kp.out", "P.u")
    poles = np.sort_complex(np.linalg.eigvals(assemble(d).A))
    assert_allclose(poles, np.sort_complex([-2.587401052, -0.206299474 + 1.374729637j, -0.206299474 - 1.374729637j]), atol=1e-8)


def test_levitated_rotor_sensitivity_dc_values():
    # tests/REFERENCES.md#rotor-sensitivity-integral (Freudenberg and Looze 1985): T(0) = r -> y = 2 and S(0) = r -> e = -1
    d = Diagram()
    d.add_block("source", "r")
    d.add_block("sum", "e", {"signs": ["+", "-"], "width": 1})
    d.add_block("dynamic", "Cl", {"A": [[-10]], "B": [[1]], "C": [[-720]], "D": [[80]]})
    d.add_block("plant", "P", {"A": [[0, 1], [4, 0]], "B": [[0], [1]], "C": [[1, 0]], "D": [[0]]})
    d.connect("r.out", "e.in1", name="r"); d.connect("P.y", "e.in2", name="y"); d.connect("e.out", "Cl.u", name="e"); d.connect("Cl.y", "P.u", name="u")
    m = assemble(d)
    assert_allclose(tf_eval(m, "r", "y", 0.0).real, [[2.0]], atol=1e-9)
    assert_allclose(tf_eval(m, "r", "e", 0.0).real, [[-1.0]], atol=1e-9)
    assert_allclose(np.poly(m.A), [1, 10, 76, 40], atol=1e-8)


def test_well_posed_algebraic_loop_is_solved_exactly():
    # y = r - 0.5 y  =>  y = r / 1.5 (closed form, common practice, no source)
    d = Diagram()
    d.add_block("source", "r")
    d.add_block("sum", "e", {"signs": ["+", "-"], "width": 1})
    d.add_block("gain", "G", {"K": [[0.5]]})
    d.connect("r.out", "e.in1"); d.connect("e.out", "G.in"); d.connect("G.out", "e.in2")
    m = assemble(d)
    assert m.n_states == 0
    assert_allclose(m.D[m.signals["e.out"], m.inputs["r"]], [[1 / 1.5]], rtol=1e-14)


def test_ill_posed_algebraic_loop_names_the_blocks():
    d = Diagram()
    d.add_block("source", "r")
    d.add_block("sum", "e", {"signs": ["+", "+"], "width": 1})
    d.add_block("gain", "G", {"K": [[1.0]]})
    d.add_block("plant", "P", {"num": [1], "den": [1, 1]})
    d.connect("r.out", "e.in1"); d.connect("e.out", "G.in"); d.connect("G.out", "e.in2"); d.connect("G.out", "P.u")
    with pytest.raises(AlgebraicLoopError) as info:
        assemble(d)
    names = {d.blocks[b].name for b in info.value.block_ids}
    assert names == {"e", "G"}
    assert "algebraic loop" in str(info.value) and "e" in str(info.value)


def test_unconnected_input_is_named():
    d = stage_loop()
    d.disconnect(d.wire_into(d.resolve_port("up.in2")).id, d.resolve_port("up.in2"))
    with pytest.raises(ConnectionError_, match=r"input up\.in2 is not connected"):
        assemble(d)


def test_width_mismatch_names_both_widths():
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 2})
    d.add_block("gain", "G", {"K": [[1.0]]})
    d.connect("r.out", "G.in")
    with pytest.raises(DimensionError, match=r"r\.out has 2 signals, G\.in expects 1"):
        assemble(d)
    assert len(collect_problems(d)) == 1


def test_bad_matrix_is_named_by_block_and_field():
    d = stage_loop()
    d.set_params(d.block_by_name("P").id, {"A": [[0, 1], [0, 0]], "B": [[0], [1], [2]], "C": [[1, 0]], "D": [[0]]})
    with pytest.raises(ParameterError, match=r"block 'P': B has 3 rows, expected 2"):
        assemble(d)


def test_estimator_linked_to_missing_plant():
    d = stage_loop()
    d.blocks[d.block_by_name("est").id].params["plant"] = "Q"
    with pytest.raises(ParameterError, match=r"block 'est': linked plant 'Q' does not exist"):
        assemble(d)


def test_unknown_break_signal_suggests_names():
    with pytest.raises(UnknownNameError) as info:
        assemble(stage_loop(), break_at="up.ou")
    assert "up.out" in info.value.suggestions


def test_collect_problems_lists_every_problem_with_ids():
    d = stage_loop()
    d.set_params(d.block_by_name("Kx").id, {"K": [[1, 2, 3]]})
    d.disconnect(d.wire_into(d.resolve_port("up.in2")).id, d.resolve_port("up.in2"))
    probs = collect_problems(d)
    msgs = " | ".join(p.message for p in probs)
    assert "not connected" in msgs and "expects 3" in msgs
    assert all(p.block_ids or p.wire_ids for p in probs)


def _src_matrix(m, s):
    cols = np.concatenate([np.arange(m.inputs[k].start, m.inputs[k].stop) for k in m.sources])
    return m.C @ np.linalg.solve(s * np.eye(m.n_states) - m.A, m.B[:, cols]) + m.D[:, cols]


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(loop_diagrams(), st.floats(0.05, 30.0))
def test_random_loops_match_python_control_interconnect(d, w):
    # reference: python-control 0.10 ct.interconnect on the same blocks and wires
    try:
        m = assemble(d)
    except AlgebraicLoopError:
        assume(False)
    ref, _, _ = to_python_control(d)
    s = 1j * w
    assume(np.min(np.abs(np.linalg.eigvals(m.A) - s)) > 1e-3 if m.n_states else True)
    ours = _src_matrix(m, s) if m.n_states else m.D[:, : len(m.sources)]
    theirs = ref(s)
    scale = max(1.0, np.abs(theirs).max())
    assert_allclose(ours, theirs, atol=1e-8 * scale, rtol=1e-7)
    # the state count is the sum of the blocks' state counts
    assert m.n_states == ref.nstates


@settings(max_examples=25, deadline=None)
@given(loop_diagrams(), st.randoms(use_true_random=False))
def test_model_does_not_depend_on_block_insertion_order(d, rnd):
    try:
        m1 = assemble(d)
    except AlgebraicLoopError:
        assume(False)
    shuffled = Diagram()
    order = list(d.blocks.values())
    rnd.shuffle(order)
    for b in order:
        shuffled.add_block(b.kind, b.name, b.params)
    for wire in d.wires.values():
        for t in wire.targets:
            shuffled.connect(d.port_label(wire.source), d.port_label(t), name=wire.name)
    m2 = assemble(shuffled)
    s = 0.7j
    for sig in m1.signals:
        for src in m1.sources:
            if m1.n_states:
                assert_allclose(tf_eval(m1, src, sig, s), tf_eval(m2, src, sig, s), rtol=1e-8, atol=1e-10)
    assert_allclose(np.sort_complex(np.linalg.eigvals(m1.A)), np.sort_complex(np.linalg.eigvals(m2.A)), atol=1e-6)


@settings(max_examples=25, deadline=None)
@given(st.lists(st.floats(-5, 5), min_size=1, max_size=4))
def test_unit_gain_is_the_identity(values):
    d = Diagram()
    w = len(values)
    d.add_block("source", "r", {"role": "reference", "width": w})
    d.add_block("gain", "G", {"K": np.eye(w).tolist()})
    d.connect("r.out", "G.in")
    m = assemble(d)
    assert_allclose(m.D[m.signals["G.out"], m.inputs["r"]] @ np.array(values), values, rtol=0, atol=0)


def test_injection_adds_at_the_signal():
    m = assemble(stage_loop())
    # An injection n at P.y is sensor noise: P.y = n + P(s) u, u = -C(s) P.y, so the map
    # n -> P.y is S = 1/(1 + L) with L of tests/REFERENCES.md#stage-observer (derived by hand):
    # S(s) = s^2 (s^2 + 15 s + 82)/(s^4 + 15 s^3 + 82 s^2 + 208 s + 240); S(0) = 0.
    assert m.resolve_input("P.y") == "inject:P.y"
    for s in (0.0, 0.7j, 3.0j, 20.0j):
        S = s**2 * (s**2 + 15 * s + 82) / (s**4 + 15 * s**3 + 82 * s**2 + 208 * s + 240)
        assert_allclose(tf_eval(m, "P.y", "P.y", s), [[S]], rtol=1e-10, atol=1e-14)


def test_break_at_one_input_port_cuts_only_that_consumer():
    # tests/REFERENCES.md#stage-observer (separation principle, derived by hand) with the estimator reading the plant's own input wire: breaking the
    # whole signal also cuts the estimator's input, breaking the port P.u cuts the plant only.
    d = stage_loop()
    up = d.resolve_port("est.u")
    d.disconnect(d.wire_into(up).id, up)
    d.connect("up.out", "est.u")
    m = assemble(d, break_at="P.u")
    assert m.break_return == "up.out" and "break:P.u" in m.inputs
    s = 1.3j
    A, B, C, D = m.pair("break:P.u", m.break_return)
    Ls = -(C @ np.linalg.solve(s * np.eye(A.shape[0]) - A, B) + D)[0, 0]
    # plant-input loop of an observer-based controller fed the true command (tests/REFERENCES.md#stage-observer closed form)
    assert_allclose(Ls, (208 * s + 240) / (s**2 * (s**2 + 15 * s + 82)), rtol=1e-10)
    # cutting every consumer gives the state-feedback loop K (sI - A)^-1 B instead
    m_all = assemble(d, break_at="up.out")
    A, B, C, D = m_all.pair("break:up.out", "up.out")
    L_all = -(C @ np.linalg.solve(s * np.eye(A.shape[0]) - A, B) + D)[0, 0]
    assert_allclose(L_all, (4 * s + 8) / s**2, rtol=1e-10)


def test_break_at_an_unknown_place_suggests_ports_and_signals():
    with pytest.raises(UnknownNameError) as info:
        assemble(stage_loop(), break_at="P.v")
    assert "P.u" in info.value.suggestions


def test_one_component_of_a_vector_signal_can_be_picked():
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 2})
    d.add_block("gain", "G", {"K": [[1.0, 2.0], [3.0, 4.0]]})
    d.connect("r.out", "G.in", name="r")
    m = assemble(d)
    A, B, C, D = m.pair("r[2]", "G.out[1]")
    assert_allclose(D, [[2.0]])
    assert m.signal_slice("G.out[2]") == slice(m.signals["G.out"].start + 1, m.signals["G.out"].start + 2)
    assert m.resolve_input("r[1]") == "r[1]"  # the source's own component, not the injection
    with pytest.raises(UnknownNameError, match="has 2 component"):
        m.pair("r[3]", "G.out")


def test_a_diagram_without_blocks_assembles_to_no_states():
    # an empty diagram is what a new window holds: nothing to assemble, and no error either
    m = assemble(Diagram())
    assert m.A.shape == (0, 0) and m.B.shape[0] == 0 and m.C.shape[1] == 0 and m.n_states == 0
