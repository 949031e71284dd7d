"""The documented state order of a transfer function's realisation (engine/blocks.py):
y, dy/dt, ... when the numerator has no zeros, so a gain designed for (position, velocity)
multiplies (position, velocity)."""
from __future__ import annotations

import control as ct
import numpy as np
import pytest
from numpy.testing import assert_allclose

from loopwright.engine.blocks import realize, tf_state_descriptions, tf_to_ss
from loopwright.engine.interconnect import assemble

from diagrams import stage_loop_ref03


def test_double_integrator_is_position_then_velocity():
    # closed form: y'' = u, x1 = y, x2 = dy/dt  ->  A = [[0, 1], [0, 0]], B = [0, 1]', C = [1, 0]
    A, B, C, D = tf_to_ss([1.0], [1.0, 0.0, 0.0])
    assert_allclose(A, [[0, 1], [0, 0]])
    assert_allclose(B, [[0], [1]])
    assert_allclose(C, [[1, 0]])
    assert_allclose(D, [[0]])
    assert tf_state_descriptions([1.0], [1.0, 0.0, 0.0]) == ("y", "dy/dt")


@pytest.mark.parametrize(
    "num, den",
    [([2.0], [1.0, 3.0, 2.0]), ([5.0], [2.0, 1.0]), ([0.5], [1.0, 6.0, 11.0, 6.0])],
    ids=["second order, gain 2", "first order, lead 2", "third order"],
)
def test_without_zeros_the_states_are_the_output_and_its_derivatives(num, den):
    # closed form: x1 = y and x_{k+1} = dx_k/dt, i.e. C = e1 and A has ones above the diagonal
    A, B, C, D = tf_to_ss(num, den)
    n = len(den) - 1
    assert_allclose(C, np.eye(1, n))
    assert_allclose(A[:-1], np.eye(n)[1:] if n > 1 else np.zeros((0, n)))
    assert len(tf_state_descriptions(num, den)) == n
    # the same transfer function as python-control's (reference)
    ref = ct.tf(num, den)
    for s in (0.4j, 3j, 1 + 2j):
        val = (C @ np.linalg.solve(s * np.eye(n) - A, B) + D)[0, 0]
        assert_allclose(val, ref(s), rtol=1e-10)


def test_with_zeros_the_states_are_the_phase_variables():
    assert tf_state_descriptions([1.0, 3.0], [1.0, 3.0, 2.0]) == ("z", "dz/dt")
    assert tf_state_descriptions([[[1.0], [1.0, 2.0]]], [1.0, 1.0]) == ("(1,1) y", "(1,2) z")


def test_stage_loop_with_the_plant_as_1_over_s2_keeps_the_designed_poles():
    # tests/REFERENCES.md#stage-observer: K = [8, 4] designed for (position, velocity), L = [11, 30]:
    # closed-loop poles -2 +- 2j, -5, -6. The plant given as 1/s^2 must give the same.
    d = stage_loop_ref03()
    p = d.block_by_name("P")
    d.set_params(p.id, {"num": [1.0], "den": [1.0, 0.0, 0.0]})
    assert realize(d.blocks[p.id], d).state_names == ("P.x1", "P.x2")
    poles = np.linalg.eigvals(assemble(d).A)
    assert_allclose(sorted(poles, key=lambda z: (z.real, z.imag)), [-6, -5, -2 - 2j, -2 + 2j], atol=1e-8)
