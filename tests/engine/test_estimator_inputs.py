"""The estimator reads what the plant gets (engine/estimator_inputs.py).

The stage loop of tests/REFERENCES.md#stage-observer with a reference fed forward
through N: when N r is added after the estimator's tap, the estimation error obeys
``e' = (A - L C) e + B N r`` (closed form, subtracting the estimator's equation from the
plant's), so a unit step r leaves the bias ``e_ss = -(A - L C)^-1 B N``; the check must name
the reference with the gain it passes ("ref via N"), and moving the tap after the junction
must clear both the warning and the bias.
"""
from __future__ import annotations

import json

import numpy as np
import pytest
from numpy.testing import assert_allclose

from loopwright.engine.check import summarize
from loopwright.engine.cli import main
from loopwright.engine.diagram import Diagram
from loopwright.engine.estimator_inputs import estimator_input_gaps
from loopwright.engine.interconnect import assemble
from loopwright.engine.project import save

from diagrams import stage_loop_named, stage_servo

A = np.array([[0.0, 1.0], [0.0, 0.0]])
B = np.array([[0.0], [1.0]])
C = np.array([[1.0, 0.0]])
L = np.array([[11.0], [30.0]])
N = 8.0  # unit DC gain from r to position with K = [8, 4]: N = k1 (closed form)


def _biased_stage() -> Diagram:
    """est.u reads ufb = -K xhat; the junction up adds ufb, the disturbance and N r into P.u."""
    d = stage_loop_named()
    d.add_block("source", "r", {"role": "reference", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0}})
    d.add_block("gain", "N", {"K": [[N]]})
    d.blocks[d.block_by_name("up").id].params["signs"] = ["+", "+", "+"]
    d.connect("r.out", "N.in", name="ref")
    d.connect("N.out", "up.in3", name="u_ff")
    return d


def _fixed_stage() -> Diagram:
    """The same loop with the tap after the feedforward: uc = ufb + u_ff feeds est.u and up."""
    d = Diagram()
    d.add_block("source", "d", {"role": "disturbance", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0}})
    d.add_block("source", "r", {"role": "reference", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0}})
    d.add_block("plant", "P", {"A": A.tolist(), "B": B.tolist(), "C": C.tolist(), "D": [[0.0]]})
    d.add_block("estimator", "est", {"plant": "P", "L": L.tolist()})
    d.add_block("gain", "Kx", {"K": [[-8.0, -4.0]]})
    d.add_block("gain", "N", {"K": [[N]]})
    d.add_block("sum", "uc", {"signs": ["+", "+"], "width": 1})
    d.add_block("sum", "up", {"signs": ["+", "+"], "width": 1})
    d.connect("est.xhat", "Kx.in", name="xhat")
    d.connect("Kx.out", "uc.in1", name="ufb")
    d.connect("r.out", "N.in", name="ref")
    d.connect("N.out", "uc.in2", name="u_ff")
    d.connect("uc.out", "up.in1", name="u_c")
    d.connect("uc.out", "est.u")
    d.connect("d.out", "up.in2", name="dist")
    d.connect("up.out", "P.u", name="plant_input")
    d.connect("P.y", "est.y", name="y")
    return d


def _error_dc_gain_from_r(d: Diagram) -> np.ndarray:
    """DC gain from r to the estimation error x - xhat, from the assembled model."""
    m = assemble(d)
    x, xh = m.states["P"], m.states["est"]
    T = np.zeros((2, m.n_states))
    T[:, x] = np.eye(2)
    T[:, xh] -= np.eye(2)
    b = m.B[:, m.inputs["r"]]
    return (-T @ np.linalg.solve(m.A, b)).ravel()


def test_feedforward_after_the_tap_is_named_and_biases_the_estimate():
    d = _biased_stage()
    gaps = estimator_input_gaps(d)
    assert len(gaps) == 1
    gap = gaps[0]
    assert (gap.estimator, gap.plant, gap.estimator_signal, gap.plant_signal) == ("est", "P", "ufb", "plant_input")
    # the disturbance reaches the plant too, but it is unknown by definition
    assert gap.missing == ("ref via N",) and gap.extra == () and gap.differing == ()
    assert {d.block_by_name(n).id for n in ("N", "r", "est", "P")} <= set(gap.block_ids)
    assert {d.wire_by_name(n).id for n in ("ref", "u_ff")} <= set(gap.wire_ids)
    assert "plant 'P' also gets ref via N, which 'est' never reads" in gap.message
    # closed form e_ss = -(A - L C)^-1 B N for a unit step r: the bias the warning is about
    assert_allclose(_error_dc_gain_from_r(d), (-np.linalg.solve(A - L @ C, B) * N).ravel(), rtol=1e-10)
    assert_allclose((-np.linalg.solve(A - L @ C, B) * N).ravel(), [8 / 30, 88 / 30], rtol=1e-12)


def test_the_tap_after_the_feedforward_clears_the_warning_and_the_bias():
    d = _fixed_stage()
    assert estimator_input_gaps(d) == []
    assert_allclose(_error_dc_gain_from_r(d), [0.0, 0.0], atol=1e-12)


def test_check_warns_while_separation_holds():
    # the poles are still the designed ones (tests/REFERENCES.md#stage-observer): only the new warning tells
    rep = summarize(_biased_stage())
    assert rep.separation.verdict == "holds"
    assert_allclose(np.sort_complex(rep.poles), np.sort_complex([-6, -5, -2 - 2j, -2 + 2j]), atol=1e-8)
    assert [g.missing for g in rep.input_gaps] == [("ref via N",)]
    assert any("ref via N" in w and "biased" in w for w in rep.warnings)
    assert summarize(_fixed_stage()).input_gaps == ()


def test_cli_check_names_the_missing_signal(tmp_path, capsys):
    f = tmp_path / "biased.lwd"
    save(_biased_stage(), str(f))
    assert main(["check", str(f), "--json"]) == 0
    warnings = json.loads(capsys.readouterr().out)["warnings"]
    assert sum("ref via N" in w for w in warnings) == 1
    assert main(["check", str(f)]) == 0
    assert "ref via N" in capsys.readouterr().out


@pytest.mark.parametrize("diagram", [stage_loop_named, stage_servo], ids=["disturbance-only", "servo-with-tap-after-feedforward"])
def test_loops_whose_estimator_reads_the_command_raise_nothing(diagram):
    assert estimator_input_gaps(diagram()) == []


def test_a_signal_only_the_estimator_reads_and_a_flipped_sign_are_named():
    d = _fixed_stage()
    # est.u now reads ufb - u_ff while the plant gets ufb + u_ff: u_ff differs in sign
    d.add_block("sum", "ue", {"signs": ["+", "-"], "width": 1})
    d.add_block("source", "v", {"role": "reference", "width": 1})
    w = next(w for w in d.wires.values() if any(d.port_label(t) == "est.u" for t in w.targets))
    d.disconnect(w.id, next(t for t in w.targets if d.port_label(t) == "est.u"))
    d.add_block("sum", "ue2", {"signs": ["+", "+"], "width": 1})
    d.connect("Kx.out", "ue.in1")
    d.connect("N.out", "ue.in2")
    d.connect("ue.out", "ue2.in1", name="ue_sig")
    d.connect("v.out", "ue2.in2", name="extra_ref")
    d.connect("ue2.out", "est.u", name="est_cmd")
    (gap,) = estimator_input_gaps(d)
    assert gap.missing == () and gap.extra == ("extra_ref",) and gap.differing == ("ref via N",)


def test_an_estimator_with_its_own_model_is_compared_with_the_plant_it_measures():
    d = _biased_stage()
    est = d.block_by_name("est")
    est.params = {"A": A.tolist(), "B": B.tolist(), "C": C.tolist(), "D": [[0.0]], "L": L.tolist()}
    assert [(g.plant, g.missing) for g in estimator_input_gaps(d)] == [("P", ("ref via N",))]


# ---- tracing through static gains and chains of gains and junctions ----------------------
def _stage_with_feedforward(route) -> Diagram:
    """The stage loop of stage_loop_named (tap before the junction ``up``) with the reference
    reaching ``up.in3`` along ``route(d)``, which wires r.out (signal ``ref``) onwards and
    returns the port that feeds up.in3."""
    d = stage_loop_named()
    d.add_block("source", "r", {"role": "reference", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0}})
    d.blocks[d.block_by_name("up").id].params["signs"] = ["+", "+", "+"]
    last = route(d)
    d.connect(last, "up.in3", name="u_ff")
    return d


def _chain(d: Diagram) -> str:
    """r -> N1 -> N2: N = N1 N2 = 2 * 4."""
    d.add_block("gain", "N1", {"K": [[2.0]]})
    d.add_block("gain", "N2", {"K": [[4.0]]})
    d.connect("r.out", "N1.in", name="ref")
    d.connect("N1.out", "N2.in", name="ref_scaled")
    return "N2.out"


def _gain_sum_gain(d: Diagram) -> str:
    """r -> N1 -> s (+ r directly, minus) -> N2: N = N2 (N1 - 1) = 2 * (5 - 1)."""
    d.add_block("gain", "N1", {"K": [[5.0]]})
    d.add_block("sum", "s", {"signs": ["+", "-"], "width": 1})
    d.add_block("gain", "N2", {"K": [[2.0]]})
    d.connect("r.out", "N1.in", name="ref")
    d.connect("r.out", "s.in2")
    d.connect("N1.out", "s.in1", name="ref5")
    d.connect("s.out", "N2.in", name="ref4")
    return "N2.out"


@pytest.mark.parametrize(
    "route, expected",
    [
        (_chain, "ref via N1 → N2"),
        (_gain_sum_gain, "ref via N1 → N2 and via N2"),
    ],
    ids=["gain-chain", "gain-sum-gain"],
)
def test_a_reference_through_a_chain_of_gains_is_named_with_its_route_and_biases_by_their_product(route, expected):
    d = _stage_with_feedforward(route)
    (gap,) = estimator_input_gaps(d)
    assert gap.missing == (expected,) and gap.extra == () and gap.differing == ()
    assert {d.block_by_name(n).id for n in ("r", "N1", "N2")} <= set(gap.block_ids)
    # both routes give N = 8 from r to the plant input: closed form e_ss = -(A - L C)^-1 B N
    assert_allclose(_error_dc_gain_from_r(d), (-np.linalg.solve(A - L @ C, B) * N).ravel(), rtol=1e-10)


def test_a_disturbance_through_a_gain_is_still_unknown():
    d = stage_loop_named()
    d.add_block("source", "load", {"role": "disturbance", "width": 1})
    d.add_block("source", "hum", {"role": "noise", "width": 1})
    d.add_block("gain", "Gl", {"K": [[3.0]]})
    d.add_block("gain", "Gh", {"K": [[0.5]]})
    d.add_block("sum", "s", {"signs": ["+", "-"], "width": 1})
    d.blocks[d.block_by_name("up").id].params["signs"] = ["+", "+", "+"]
    d.connect("load.out", "Gl.in", name="load_force")
    d.connect("hum.out", "Gh.in", name="hum_v")
    d.connect("Gl.out", "s.in1")
    d.connect("Gh.out", "s.in2")
    d.connect("s.out", "up.in3", name="unknown_sum")
    assert estimator_input_gaps(d) == []


def _estimator_reads_feedback_plus(d: Diagram, source: str, gain: str) -> None:
    """Rewire est.u to read Kx.out + gain(source) through a new junction ``ue``."""
    d.add_block("sum", "ue", {"signs": ["+", "+"], "width": 1})
    w = d.wire_into(d.resolve_port("est.u"))
    d.disconnect(w.id, d.resolve_port("est.u"))
    d.connect("Kx.out", "ue.in1")
    d.connect(source, f"{gain}.in")
    d.connect(f"{gain}.out", "ue.in2")
    d.connect("ue.out", "est.u", name="est_cmd")


def test_the_same_weight_through_other_gains_is_the_same_command():
    # the plant gets N r with N = 8 through N1 -> N2 (2 * 4); the estimator reads M r with M = 8
    d = _stage_with_feedforward(_chain)
    d.add_block("gain", "M", {"K": [[8.0]]})
    _estimator_reads_feedback_plus(d, "r.out", "M")
    assert estimator_input_gaps(d) == []
    # with M = 7 the weights differ, and both routes are named
    d.blocks[d.block_by_name("M").id].params["K"] = [[7.0]]
    (gap,) = estimator_input_gaps(d)
    assert gap.missing == () and gap.extra == ()
    assert gap.differing == ("ref (via N1 → N2 to the plant, via M to the estimator)",)
    # closed form e' = (A - L C) e + B (8 - 7) r: e_ss = -(A - L C)^-1 B * 1 for a unit step
    assert_allclose(_error_dc_gain_from_r(d), (-np.linalg.solve(A - L @ C, B)).ravel(), rtol=1e-10)


def test_matrix_gains_compare_by_their_product():
    # a two-wide reference: the plant gets G2 G1 r (1x2 times 2x2), the estimator reads G3 r
    d = stage_loop_named()
    d.add_block("source", "r2", {"role": "reference", "width": 2})
    d.add_block("gain", "G1", {"K": [[1.0, 2.0], [3.0, 4.0]]})
    d.add_block("gain", "G2", {"K": [[0.5, -1.0]]})
    d.add_block("gain", "G3", {"K": [[-2.5, -3.0]]})  # G2 G1 = [0.5 - 3, 1 - 4] (closed form)
    d.blocks[d.block_by_name("up").id].params["signs"] = ["+", "+", "+"]
    d.connect("r2.out", "G1.in", name="ref2")
    d.connect("G1.out", "G2.in")
    d.connect("G2.out", "up.in3")
    _estimator_reads_feedback_plus(d, "r2.out", "G3")
    assert estimator_input_gaps(d) == []
    d.blocks[d.block_by_name("G3").id].params["K"] = [[-2.5, 3.0]]
    (gap,) = estimator_input_gaps(d)
    assert gap.differing == ("ref2 (via G1 → G2 to the plant, via G3 to the estimator)",)


def test_a_gain_with_a_bad_matrix_stops_the_trace_there():
    # the validation names a bad K; the check names the gain's output, as it cannot see through it
    d = _biased_stage()
    d.blocks[d.block_by_name("N").id].params["K"] = [["eight"]]
    (gap,) = estimator_input_gaps(d)
    assert gap.missing == ("u_ff",)
