"""The dynamic block's face (engine/block_sketch.py): order, frequency range and magnitude.

Every magnitude is checked twice, against the closed form |G(jw)| of the transfer
function and against python-control's ``frequency_response`` on the same transfer
function (or state-space model); the frequency range against the rule the module states
(one decade either side of the moduli of the non-zero poles and zeros, else 0.1 to 10
rad/s), worked out by hand for each case.
"""
from __future__ import annotations

import control
import numpy as np
import pytest
from numpy.testing import assert_allclose

from loopwright.engine.block_sketch import block_sketch
from loopwright.engine.diagram import Block
from loopwright.engine.errors import ParameterError

WN, ZETA = 3.0, 0.02  # a lightly damped resonance (demo data: a gimbal's bending mode)


def _dynamic(params: dict) -> Block:
    return Block("b1", "dynamic", "F", params)


def _python_control_magnitude(sys, w: np.ndarray) -> np.ndarray:
    """python-control's |G(jw)| (largest singular value for several inputs or outputs)."""
    g = control.frequency_response(sys, w).complex
    if g.ndim == 1:
        return np.abs(g)
    return np.linalg.svd(np.moveaxis(g.reshape(sys.noutputs, sys.ninputs, -1), -1, 0), compute_uv=False)[:, 0]


CASES = [
    pytest.param(
        {"num": [100.0], "den": [1.0, 14.0, 100.0]},
        control.tf([100.0], [1.0, 14.0, 100.0]),
        2, (1.0, 100.0),  # poles of modulus wn = 10: 10^0 to 10^2
        lambda w: 100.0 / np.sqrt((100.0 - w**2) ** 2 + (14.0 * w) ** 2),
        id="default-100/(s2+14s+100)-closed-form-and-python-control",
    ),
    pytest.param(
        {"num": [WN**2], "den": [1.0, 2 * ZETA * WN, WN**2]},
        control.tf([WN**2], [1.0, 2 * ZETA * WN, WN**2]),
        2, (0.1, 100.0),  # |poles| = 3: floor(log10 3) - 1 = -1, ceil(log10 3) + 1 = 2
        lambda w: WN**2 / np.sqrt((WN**2 - w**2) ** 2 + (2 * ZETA * WN * w) ** 2),
        id="lightly-damped-resonance-closed-form-and-python-control",
    ),
    pytest.param(
        {"num": [1.0], "den": [1.0, 0.0]},
        control.tf([1.0], [1.0, 0.0]),
        1, (0.1, 10.0),  # the only pole is at 0: no corner, the default range
        lambda w: 1.0 / w,
        id="integrator-1/s-closed-form-and-python-control",
    ),
    pytest.param(
        {"A": [[0.0, 1.0], [0.0, 0.0]], "B": [[0.0], [1.0]], "C": [[1.0, 0.0]], "D": [[0.0]]},
        control.ss([[0.0, 1.0], [0.0, 0.0]], [[0.0], [1.0]], [[1.0, 0.0]], [[0.0]]),
        2, (0.1, 10.0),
        lambda w: 1.0 / w**2,
        id="double-integrator-state-space-closed-form-and-python-control",
    ),
    pytest.param(
        {"num": [1.0, 10.0], "den": [1.0, 1.0]},
        control.tf([1.0, 10.0], [1.0, 1.0]),
        1, (0.1, 100.0),  # biproper (feedthrough D = 1): pole 1, zero 10
        lambda w: np.sqrt(w**2 + 100.0) / np.sqrt(w**2 + 1.0),
        id="biproper-lead-(s+10)/(s+1)-closed-form-and-python-control",
    ),
    pytest.param(
        {"num": [5.0], "den": [2.0]},
        control.tf([5.0], [2.0]),
        0, (0.1, 10.0),  # a static gain: no state, no corner
        lambda w: np.full_like(w, 2.5),
        id="static-gain-5/2-closed-form-and-python-control",
    ),
]


@pytest.mark.parametrize("params, reference, order, span, closed_form", CASES)
def test_the_sketch_is_the_magnitude_curve(params, reference, order, span, closed_form):
    s = block_sketch(_dynamic(params))
    assert s.order == order
    assert_allclose([s.w_rad_s[0], s.w_rad_s[-1]], span, rtol=1e-12)
    assert_allclose(np.diff(np.log10(s.w_rad_s)), np.log10(span[1] / span[0]) / 39, rtol=1e-9)  # 40 log-spaced points
    assert_allclose(s.magnitude, closed_form(s.w_rad_s), rtol=1e-9)
    assert_allclose(s.magnitude, _python_control_magnitude(reference, s.w_rad_s), rtol=1e-9)


def test_a_lightly_damped_peak_is_as_high_as_the_closed_form_on_a_fine_grid():
    # closed form: peak |G| = 1 / (2 zeta sqrt(1 - zeta^2)) at w = wn sqrt(1 - 2 zeta^2); no grid point can exceed it
    peak = 1.0 / (2 * ZETA * np.sqrt(1 - ZETA**2))
    s = block_sketch(_dynamic({"num": [WN**2], "den": [1.0, 2 * ZETA * WN, WN**2]}), points=4001)
    assert s.magnitude.max() <= peak * (1 + 1e-9)
    assert s.magnitude.max() >= 0.99 * peak
    assert_allclose(s.w_rad_s[np.argmax(s.magnitude)], WN * np.sqrt(1 - 2 * ZETA**2), rtol=2e-3)


def test_a_pole_on_the_grid_is_infinite_there_and_finite_elsewhere():
    # 1/(s^2 + 1): poles at +-j, the range 0.1..10 with 41 points puts w = 1 on the grid (closed form 1/|1 - w^2|)
    s = block_sketch(_dynamic({"num": [1.0], "den": [1.0, 0.0, 1.0]}), points=41)
    assert s.w_rad_s[20] == 1.0 and np.isposinf(s.magnitude[20])
    rest = np.delete(np.arange(41), 20)
    assert_allclose(s.magnitude[rest], 1.0 / np.abs(1.0 - s.w_rad_s[rest] ** 2), rtol=1e-9)


def test_an_improper_transfer_function_is_refused_by_name():
    with pytest.raises(ParameterError, match=r"block 'F'.*improper"):
        block_sketch(_dynamic({"num": [1.0, 0.0, 1.0], "den": [1.0, 1.0]}))


def test_several_inputs_and_outputs_draw_the_largest_singular_value():
    A = np.array([[-1.0, 0.5], [0.0, -4.0]])
    B = np.eye(2)
    C = np.array([[1.0, 1.0], [0.0, 2.0]])
    D = np.array([[0.0, 0.1], [0.0, 0.0]])
    block = Block("b1", "plant", "P", {"A": A.tolist(), "B": B.tolist(), "C": C.tolist(), "D": D.tolist()})
    s = block_sketch(block)
    assert s.order == 2
    # eigenvalues 1 and 4, no finite transmission zero is counted for a 2x2 block: 10^-1 to 10^2
    assert_allclose([s.w_rad_s[0], s.w_rad_s[-1]], [0.1, 100.0], rtol=1e-12)
    assert_allclose(s.magnitude, _python_control_magnitude(control.ss(A, B, C, D), s.w_rad_s), rtol=1e-9)

