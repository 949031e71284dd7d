"""Tests of engine/structure.py: minimal realisation, PBH tests, transmission zeros."""
from __future__ import annotations

import control as ct
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from loopwright.engine.responses import frequency_response
from loopwright.engine.structure import (
    controllable_part,
    hidden_unstable_modes,
    minimal_realization,
    mode_table,
    observable_part,
    pole_damping,
    structural_trim,
    transmission_zeros,
)


def test_pole_damping_of_a_known_pair():
    # -1 +- j sqrt(3): wn = 2, zeta = 0.5 (tests/REFERENCES.md#winder-step (second-order closed forms) closed-loop poles)
    zeta, wn = pole_damping([-1 + 1j * np.sqrt(3), -1 - 1j * np.sqrt(3), 0.0])
    assert_allclose(zeta, [0.5, 0.5, 1.0], rtol=1e-12)
    assert_allclose(wn, [2.0, 2.0, 0.0], atol=1e-12)


def test_minimal_realization_removes_hidden_modes_and_keeps_the_transfer():
    # diag(-1, -2, -3): mode -2 unreachable, mode -3 unobservable; the path is 1/(s+1)
    A = np.diag([-1.0, -2.0, -3.0])
    B = np.array([[1.0], [0.0], [1.0]])
    C = np.array([[1.0, 1.0, 0.0]])
    Am, Bm, Cm, Dm = minimal_realization(A, B, C, [[0.0]])
    assert Am.shape == (1, 1)
    assert_allclose(np.linalg.eigvals(Am), [-1.0], rtol=1e-10)
    w = np.logspace(-2, 2, 30)
    assert_allclose(frequency_response(Am, Bm, Cm, Dm, w), frequency_response(A, B, C, [[0.0]], w), rtol=1e-10)


@settings(max_examples=20, deadline=None)
@given(seed=st.integers(0, 10_000), n=st.integers(1, 5))
def test_minimal_realization_of_a_padded_system_has_the_original_order(seed, n):
    # append an uncontrollable and an unobservable block: the order must come back to n
    rng = np.random.default_rng(seed)
    A = rng.standard_normal((n, n)) - 2 * np.eye(n)
    B = rng.standard_normal((n, 1))
    C = rng.standard_normal((1, n))
    Ab = np.zeros((n + 2, n + 2))
    Ab[:n, :n] = A
    Ab[n, n] = -5.0
    Ab[n + 1, n + 1] = -7.0
    Bb = np.vstack([B, [[0.0]], [[1.0]]])
    Cb = np.hstack([C, [[1.0, 0.0]]])
    Am, *_ = minimal_realization(Ab, Bb, Cb)
    assert Am.shape[0] == n
    _, _, _, V = controllable_part(Ab, Bb, Cb)
    assert V.shape[1] == n + 1
    _, _, _, W = observable_part(Ab, Bb, Cb)
    assert W.shape[1] == n + 1


def test_pbh_finds_a_hidden_unstable_mode():
    # unstable mode +0.5 the input cannot reach: common practice, no source
    A = np.array([[-1.0, 0.0], [0.0, 0.5]])
    B = np.array([[1.0], [0.0]])
    C = np.array([[1.0, 1.0]])
    hidden = hidden_unstable_modes(A, B, C)
    assert len(hidden) == 1
    assert_allclose(hidden[0].pole, 0.5)
    assert hidden[0].controllable is False and hidden[0].observable is True
    table = mode_table(A, B, C)
    assert {m.pole.real for m in table} == {-1.0, 0.5}


@pytest.mark.parametrize(
    "num, den, expected, source",
    [
        ([1.0, 3.0], np.polymul([1, 1], [1, 2]), [-3.0], "(s+3)/((s+1)(s+2)), common practice, no source"),
        ([1.0, 0.0, 4.0], [1.0, 2.0, 3.0, 1.0], [-2j, 2j], "(s^2+4)/den: zeros +-2j, common practice, no source"),
        ([80.0, 80.0], [1, 10, -4, -40], [-1.0], "tests/REFERENCES.md#rotor-sensitivity-integral (Freudenberg and Looze 1985) loop zero at -1"),
    ],
)
def test_transmission_zeros_of_siso_paths(num, den, expected, source):
    s = ct.ss(ct.tf(num, den))
    z = transmission_zeros(s.A, s.B, s.C, s.D)
    assert_allclose(np.sort_complex(z), np.sort_complex(np.array(expected, dtype=complex)), atol=1e-8)


def test_transmission_zeros_of_a_square_mimo_system_match_python_control():
    # closed form: det [[sI - A, -B], [C, D]] = det(sI - A) det G(s) = 3 (s + 2), so the one
    # finite zero is -2 (a zero and a pole of G at the same place); python-control 0.10.2
    # StateSpace.zeros() agrees
    A = np.array([[-1.0, 0.0, 0.0], [0.0, -2.0, 0.0], [0.0, 0.0, -3.0]])
    B = np.array([[1.0, 0.0], [1.0, 1.0], [0.0, 1.0]])
    C = np.array([[1.0, 1.0, 0.0], [0.0, 1.0, 1.0]])
    D = np.zeros((2, 2))
    z = transmission_zeros(A, B, C, D)
    assert_allclose(z, [-2.0], atol=1e-9)
    assert_allclose(np.sort_complex(z), np.sort_complex(ct.ss(A, B, C, D).zeros()), atol=1e-9)


def test_transmission_zeros_of_a_tall_system_are_the_common_ones():
    # [ (s+3)/((s+1)(s+2)) ; (s+3)/(s+1) ] share the zero -3; common practice, no source
    s1 = ct.ss(ct.tf([1, 3], [1, 3, 2]))
    s2 = ct.ss(ct.tf([1, 3], [1, 1]))
    A = np.block([[s1.A, np.zeros((2, 1))], [np.zeros((1, 2)), s2.A]])
    B = np.vstack([s1.B, s2.B])
    C = np.block([[s1.C, np.zeros((1, 1))], [np.zeros((1, 2)), s2.C]])
    D = np.vstack([s1.D, s2.D])
    z = transmission_zeros(A, B, C, D)
    assert_allclose(z, [-3.0], atol=1e-7)


def test_structural_trim_keeps_only_states_on_a_path():
    # x1 -> x2 -> x3 chain; input on x2, output on x2: x1 cannot be reached, x3 cannot be seen
    A = np.array([[-1.0, 0.0, 0.0], [1.0, -2.0, 0.0], [0.0, 1.0, -3.0]])
    B = np.array([[0.0], [1.0], [0.0]])
    C = np.array([[0.0, 1.0, 0.0]])
    assert structural_trim(A, B, C).tolist() == [1]
    assert structural_trim(A, B, np.array([[0.0, 0.0, 1.0]])).tolist() == [1, 2]
    assert structural_trim(A, np.array([[1.0], [0.0], [0.0]]), C).tolist() == [0, 1]
