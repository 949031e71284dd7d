"""Block realisations: transfer functions, estimator, sources; errors named by block and field."""
from __future__ import annotations

import control as ct
import numpy as np
import pytest
from hypothesis import given, settings
from numpy.testing import assert_allclose

from loopwright.engine.blocks import port_widths, realize, source_intensity, tf_poles_zeros, tf_to_ss
from loopwright.engine.diagram import Diagram
from loopwright.engine.errors import ParameterError
from strategies import stable_tf


def _eval(A, B, C, D, s):
    return C @ np.linalg.solve(s * np.eye(A.shape[0]) - A, B) + D if A.size else D


@settings(max_examples=40, deadline=None)
@given(stable_tf(max_order=3))
def test_siso_transfer_function_realisation_matches_python_control(tf):
    # reference: python-control ct.tf evaluated at the same points
    A, B, C, D = tf_to_ss(tf["num"], tf["den"])
    ref = ct.tf(tf["num"], tf["den"])
    for s in (0.3j, 2j, 1 + 1j):
        assert_allclose(_eval(A, B, C, D, s)[0, 0], ref(s), rtol=1e-9, atol=1e-12)


def test_mimo_transfer_function_matrix():
    num = [[[1.0], [2.0, 0.0]], [[0.0], [1.0, 3.0]]]
    den = [[[1.0, 1.0], [1.0, 2.0]], [[1.0], [1.0, 4.0, 3.0]]]
    A, B, C, D = tf_to_ss(num, den)
    s = 0.5 + 1j
    expected = np.array([[1 / (s + 1), 2 * s / (s + 2)], [0.0, (s + 3) / (s**2 + 4 * s + 3)]])
    assert_allclose(_eval(A, B, C, D, s), expected, rtol=1e-12)
    assert A.shape == (4, 4) and B.shape == (4, 2) and C.shape == (2, 4)  # orders 1 + 1 + 0 + 2


def test_improper_transfer_function_is_refused():
    with pytest.raises(ParameterError, match="improper"):
        tf_to_ss([1.0, 0.0, 0.0], [1.0, 1.0], where="block 'C'")


def test_poles_and_zeros_of_coefficients():
    poles, zeros = tf_poles_zeros([1.0, 3.0], [1.0, 3.0, 2.0])
    assert_allclose(np.sort(poles.real), [-2, -1])
    assert_allclose(zeros.real, [-3])


def test_estimator_realisation_is_the_full_order_observer():
    d = Diagram()
    d.add_block("plant", "P", {"A": [[0, 1], [-2, -3]], "B": [[0], [1]], "C": [[1, 0]], "D": [[0.5]]})
    e = d.add_block("estimator", "E", {"plant": "P", "L": [[4], [5]]})
    r = realize(d.blocks[e], d)
    A, B, C, D = np.array([[0, 1], [-2, -3]]), np.array([[0], [1]]), np.array([[1, 0]]), np.array([[0.5]])
    L = np.array([[4], [5]])
    assert_allclose(r.A, A - L @ C)
    assert_allclose(r.B, np.hstack([B - L @ D, L]))
    assert_allclose(r.C, np.vstack([np.eye(2), C]))
    assert_allclose(r.D, [[0, 0], [0, 0], [0.5, 0]])
    assert r.state_names == ("E.xhat1", "E.xhat2")
    assert port_widths(d.blocks[e], d) == ({"u": 1, "y": 1}, {"xhat": 2, "yhat": 1})


def test_plant_load_input_adds_a_port():
    d = Diagram()
    p = d.add_block("plant", "P", {"A": [[-1]], "B": [[2]], "C": [[1]], "D": [[0]], "E": [[3]]})
    assert port_widths(d.blocks[p], d) == ({"u": 1, "d": 1}, {"y": 1})
    assert_allclose(realize(d.blocks[p], d).B, [[2, 3]])


@pytest.mark.parametrize(
    "kind, params, message",
    [
        ("plant", {"A": [[1, 2]], "B": [[1]], "C": [[1]], "D": [[0]]}, "A is 1x2, expected a square matrix"),
        ("plant", {"A": [[1]], "B": [[1]], "C": [[1, 2]], "D": [[0]]}, "C has 2 columns, expected 1"),
        ("plant", {"A": [[float("nan")]], "B": [[1]], "C": [[1]], "D": [[0]]}, "non-finite entry at row 1, column 1"),
        ("plant", {"A": [["x"]], "B": [[1]], "C": [[1]], "D": [[0]]}, "A is not a numeric matrix"),
        ("plant", {"num": [1, 2, 3], "den": [1, 1]}, "improper"),
        ("plant", {"num": [1], "den": [0, 0]}, "all zeros"),
        ("gain", {}, "gain needs K"),
        ("sum", {"signs": "+-", "width": 1}, "signs must be a list"),
        ("sum", {"signs": ["+", "-"], "width": 0}, "width is 0"),
        ("estimator", {"A": [[1]], "B": [[1]], "C": [[1]], "D": [[0]], "L": [[1, 2]]}, "L has 2 columns, expected 1"),
        ("source", {"role": "noise", "width": 2, "waveform": {"kind": "white", "intensity": [[1, 2], [0, 1]]}}, "symmetric"),
        ("source", {"role": "noise", "width": 1, "waveform": {"kind": "white", "intensity": -1}}, "positive semidefinite"),
        ("source", {"role": "loud", "width": 1}, "role 'loud'"),
        ("source", {"role": "reference", "width": 1, "waveform": {"kind": "square"}}, "waveform kind 'square'"),
    ],
)
def test_bad_parameters_name_block_and_field(kind, params, message):
    d = Diagram()
    b = d.add_block(kind, "X", params)
    with pytest.raises(ParameterError, match=message) as info:
        port_widths(d.blocks[b], d)
    assert "block 'X'" in str(info.value)
    assert b in info.value.block_ids


def test_source_intensity_forms():
    d = Diagram()
    a = d.add_block("source", "a", {"role": "noise", "width": 2, "waveform": {"kind": "white", "intensity": 0.5}})
    b = d.add_block("source", "b", {"role": "noise", "width": 2, "waveform": {"kind": "white", "intensity": [1, 2]}})
    c = d.add_block("source", "c", {"role": "disturbance", "width": 1, "waveform": {"kind": "step"}, "intensity": 3})
    e = d.add_block("source", "e", {"role": "reference", "width": 1})
    assert_allclose(source_intensity(d.blocks[a]), 0.5 * np.eye(2))
    assert_allclose(source_intensity(d.blocks[b]), np.diag([1, 2]))
    assert_allclose(source_intensity(d.blocks[c]), [[3]])
    assert source_intensity(d.blocks[e]) is None


@pytest.mark.parametrize("field", ["A", "B", "C", "D"])
def test_ragged_matrices_are_parameter_errors(field):
    params = {"A": [[0, 1], [-2, -3]], "B": [[0], [1]], "C": [[1, 0]], "D": [[0]]}
    params[field] = [[1, 2], [3]]
    d = Diagram()
    b = d.add_block("plant", "P", params)
    with pytest.raises(ParameterError, match=f"block 'P': {field} is not a numeric matrix"):
        port_widths(d.blocks[b], d)


def test_static_plant_without_states():
    d = Diagram()
    b = d.add_block("plant", "P", {"A": [], "B": [], "C": [], "D": [[2.0]]})
    r = realize(d.blocks[b], d)
    assert r.A.shape == (0, 0) and r.D.tolist() == [[2.0]]
