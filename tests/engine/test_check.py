"""The check report: poles, stability verdict and the separation check."""
from __future__ import annotations

import numpy as np
import pytest
import scipy.signal as sig
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from loopwright.engine.check import poles_match, summarize
from loopwright.engine.diagram import Diagram
from loopwright.engine.project import load
from diagrams import stage_loop_ref03 as stage_loop
from diagrams import SAMPLES, sample_path


def observer_loop(A, B, C, K, L) -> Diagram:
    """Plant, linked estimator, gain -K on the estimate, load disturbance and sensor noise sums."""
    A, B, C = (np.asarray(x, float) for x in (A, B, C))
    d = Diagram()
    d.add_block("source", "r", {"role": "disturbance", "width": B.shape[1]})
    d.add_block("source", "n", {"role": "noise", "width": C.shape[0]})
    d.add_block("plant", "P", {"A": A.tolist(), "B": B.tolist(), "C": C.tolist(), "D": np.zeros((C.shape[0], B.shape[1])).tolist()})
    d.add_block("estimator", "E", {"plant": "P", "L": np.asarray(L).tolist()})
    d.add_block("gain", "K", {"K": (-np.asarray(K)).tolist()})
    d.add_block("sum", "u", {"signs": ["+", "+"], "width": B.shape[1]})
    d.add_block("sum", "ym", {"signs": ["+", "+"], "width": C.shape[0]})
    d.connect("E.xhat", "K.in"); d.connect("K.out", "u.in1"); d.connect("r.out", "u.in2")
    d.connect("u.out", "P.u"); d.connect("u.out", "E.u")
    d.connect("P.y", "ym.in1"); d.connect("n.out", "ym.in2"); d.connect("ym.out", "E.y")
    return d


def test_stage_separation_matches_reference():
    # tests/REFERENCES.md#stage-observer (separation principle, derived by hand): eig(A - B K) = -2 +- 2j, eig(A - L C) = -5, -6
    rep = summarize(stage_loop())
    assert rep.stable and rep.rhp_poles == 0 and rep.states == 4
    sep = rep.separation
    assert sep is not None and sep.matches
    assert_allclose(np.sort_complex(sep.state_feedback_poles), np.sort_complex([-2 - 2j, -2 + 2j]), atol=1e-9)
    assert_allclose(np.sort(sep.estimator_poles.real), [-6, -5], atol=1e-9)
    assert_allclose(sep.gains["est"], [[8, 4]], atol=1e-12)


@pytest.mark.parametrize("name", SAMPLES)
def test_every_sample_is_stable_and_separates(name):
    rep = summarize(load(sample_path(name)))
    assert rep.stable
    assert rep.separation is not None and rep.separation.matches


@st.composite
def plants(draw):
    n = draw(st.integers(1, 4))
    m = draw(st.integers(1, 2))
    p = draw(st.integers(1, 2))
    el = st.floats(-2, 2, allow_nan=False)
    A = np.array([[draw(el) for _ in range(n)] for _ in range(n)])
    B = np.array([[draw(el) for _ in range(m)] for _ in range(n)])
    C = np.array([[draw(el) for _ in range(n)] for _ in range(p)])
    return A, B, C


def _well_conditioned(M, N):
    ctrb = np.hstack([np.linalg.matrix_power(M, k) @ N for k in range(M.shape[0])])
    sv = np.linalg.svd(ctrb, compute_uv=False)
    return sv[-1] > 1e-2 * sv[0]


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.filter_too_much, HealthCheck.too_slow])
@given(plants(), st.data())
def test_separation_principle_on_random_plants(plant, data):
    # separation principle, common practice (any state-space textbook); K and L by scipy.signal.place_poles
    A, B, C = plant
    n = A.shape[0]
    assume(_well_conditioned(A, B) and _well_conditioned(A.T, C.T))
    kp = -np.arange(1, n + 1) * data.draw(st.floats(0.5, 2.0))
    lp = -np.arange(1, n + 1) * data.draw(st.floats(3.0, 6.0)) - 0.5
    # coincident controller and estimator poles are allowed; poles_match loosens for repeats
    try:
        K = sig.place_poles(A, B, kp).gain_matrix
        L = sig.place_poles(A.T, C.T, lp).gain_matrix.T
    except Exception:
        assume(False)
    assume(np.abs(K).max() < 1e4 and np.abs(L).max() < 1e4)
    # pole placement on a nearly uncontrollable plant gives eigenvalues too sensitive to compare
    assume(np.linalg.cond(np.linalg.eig(A - B @ K)[1]) < 1e3 and np.linalg.cond(np.linalg.eig(A - L @ C)[1]) < 1e3)
    rep = summarize(observer_loop(A, B, C, K, L))
    expected = np.concatenate([np.linalg.eigvals(A - B @ K), np.linalg.eigvals(A - L @ C)])
    ok, worst = poles_match(expected, rep.poles)
    assert ok, worst
    assert rep.separation.matches


def test_an_estimator_with_its_own_model_makes_no_separation_claim():
    # only a linked estimator shares the plant's model; with its own model the poles need not split
    d = stage_loop()
    est = d.block_by_name("est")
    d.set_params(est.id, {"A": [[0, 1], [0, -0.5]], "B": [[0], [1]], "C": [[1, 0]], "D": [[0]], "L": [[11], [30]]})
    rep = summarize(d)
    assert rep.separation is None
    assert rep.states == 4


def test_estimator_fed_a_different_input_breaks_separation():
    d = stage_loop()
    # feed the estimator the disturbance-free command through an extra gain of 2: wrong input
    d.add_block("gain", "wrong", {"K": [[2.0]]})
    wire = d.wire_into(d.resolve_port("est.u"))
    d.disconnect(wire.id, d.resolve_port("est.u"))
    d.connect("Kx.out", "wrong.in")
    d.connect("wrong.out", "est.u")
    rep = summarize(d)
    assert rep.separation is not None and not rep.separation.matches
    assert any("does not see the plant's own input" in w for w in rep.warnings)


def test_unstable_loop_counts_right_half_plane_poles():
    d = stage_loop()
    d.set_params(d.block_by_name("Kx").id, {"K": [[8, 4]]})  # positive feedback
    rep = summarize(d)
    # closed form: eig(A + B [8, 4]) solves s^2 - 4 s - 8 = 0, s = 2 +- 2 sqrt 3 (one in the
    # right half-plane); the observer keeps -5, -6 (tests/REFERENCES.md#stage-observer)
    assert not rep.stable and rep.rhp_poles == 1
    expected = [2 - 2 * np.sqrt(3), 2 + 2 * np.sqrt(3), -5.0, -6.0]
    assert_allclose(np.sort(np.asarray(rep.poles).real), np.sort(expected), atol=1e-9)