"""How often the margins evaluate the loop: crossings refined only where they can count,
several points per refinement pass, both sensitivity peaks zoomed together, and no second
search of a peak that was refined before it was certified (tests of engine/margins.py
_refine_roots, _crossings, _refined_peaks and engine/norms.py certify_peak).

The cost of one evaluation of a loop evaluated part by part is mostly a fixed overhead, so
the number of calls is what these tests count; the answers are checked against closed forms.
"""
from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from loopwright.engine.loop_response import LoopResponse
from loopwright.engine.margins import _crossings, _refine_roots, loop_margins, scalar_margins, sensitivity_system
from loopwright.engine.norms import certify_peak


class Counted:
    """An evaluator that counts its calls and the points asked for."""

    def __init__(self, fn):
        self.fn, self.calls, self.points = fn, 0, 0

    def __call__(self, w):
        w = np.atleast_1d(np.asarray(w, dtype=float))
        self.calls += 1
        self.points += w.size
        return self.fn(w)


def _lag3(w):
    # L = 2 / (1 + s)^3, plus a part 1e-20 in size that turns with frequency: far above the
    # loop's bandwidth, where 2 / w^3 falls below it, the sign of Im L flips every 0.08 rad/s
    # as rounding would make it flip on a real model
    s = 1j * w
    return 2.0 / (1.0 + s) ** 3 + 1e-20 * np.exp(1j * 40.0 * w)


def test_sign_changes_below_the_rounding_floor_are_not_refined():
    # closed form for 2/(1+s)^3: L is real and negative at w = sqrt(3) (phase -180 deg,
    # |L| = 1/4: gain margin 4); |L| = 1 at w = sqrt(2^(2/3) - 1)
    grid = np.unique(np.concatenate([np.logspace(-2, 8, 2000), np.linspace(1e7, 1e7 + 40.0, 400)]))
    L = _lag3(grid)
    im = L.imag
    flips = int(np.sum(np.sign(im[:-1]) * np.sign(im[1:]) < 0))
    assert flips > 100  # the grid does see the flips
    Ljw = Counted(_lag3)
    wc, _pms, pm, _pm_w, _delays, _dm, crit = _crossings(Ljw, grid, L, 0.0, L[0])
    assert_allclose(wc, [np.sqrt(2 ** (2 / 3) - 1)], rtol=1e-13)
    assert [w for _g, w in crit] == pytest.approx([np.sqrt(3.0)], rel=1e-13)
    assert crit[0][0] == pytest.approx(4.0, rel=1e-12)
    # two brackets refined, a few passes of a few points each (every flip refined: > 100
    # brackets, thousands of points)
    assert Ljw.points < 200
    assert Ljw.calls <= 12


def test_a_root_is_found_in_a_few_wide_passes():
    # closed form: Im of 2/(1+jw)^3 vanishes where 3w - w^3 = 0, w = sqrt(3)
    grid = np.logspace(-1, 1, 40)  # a coarse grid: brackets 12 % wide
    Ljw = Counted(lambda w: 2.0 / (1.0 + 1j * w) ** 3)
    (roots,) = _refine_roots(Ljw, grid, Ljw.fn(grid), (lambda v: v.imag,))
    assert roots == pytest.approx([np.sqrt(3.0)], rel=1e-14)
    assert Ljw.calls <= 6  # one point per pass (Illinois regula falsi) took 9 passes here


def _resonant_loop():
    # demo data: a lightly damped axis (w0 = 3 rad/s, damping 0.1) behind a first-order lag,
    # under a proportional gain of 0.3: stable (slowest pole -0.106), with a sharp
    # sensitivity peak near the resonance
    w0, z = 3.0, 0.1
    A = np.array([[0.0, 1.0, 0.0], [-(w0**2), -2 * z * w0, 1.0], [0.0, 0.0, -5.0]])
    B = np.array([[0.0], [0.0], [5.0]])
    C = np.array([[0.3 * w0**2, 0.0, 0.0]])
    return A, B, C, np.zeros((1, 1))


def test_both_sensitivity_peaks_are_zoomed_together():
    A, B, C, D = _resonant_loop()
    resp = LoopResponse(A, B, C, D)
    calls = Counted(resp.__call__)
    resp_calls = LoopResponse(A, B, C, D)
    resp_calls.__class__ = type("CountedLoop", (LoopResponse,), {"__call__": lambda self, w: calls(w)})
    m, grid, _L = scalar_margins(resp_calls, certify=False)
    assert m.closed_loop_stable
    # the peak of |S| and of the disk's |S - 1/2| on one zoom: each round one call for both
    # (two searches took 2 x 13 calls); the roots take their own few passes
    assert calls.calls <= 20
    # the peaks equal the certified ones (the Hamiltonian test of norms.certify_peak)
    ref = loop_margins(A, B, C, D)
    assert m.peak_sensitivity == pytest.approx(ref.peak_sensitivity, rel=1e-10)
    assert m.disk.alpha == pytest.approx(ref.disk.alpha, rel=1e-10)


def test_a_refined_start_that_is_certified_is_not_searched_again():
    A, B, C, D = _resonant_loop()
    resp = LoopResponse(A, B, C, D)
    m, _grid, _L = scalar_margins(resp, certify=False)
    As, Bs, Cs, Ds = sensitivity_system(A, B, C, D)
    evaluate = Counted(lambda w: (1.0 / (1.0 + resp(w)))[:, None, None])
    got = certify_peak(As, Bs, Cs, Ds, m.peak_sensitivity, m.peak_sensitivity_w_rad_s, evaluate=evaluate,
                       refined_start=True)
    assert evaluate.calls == 0  # one Hamiltonian test, no local search after it
    assert (got.value, got.w_rad_s) == (m.peak_sensitivity, m.peak_sensitivity_w_rad_s)
    # without the flag the closing search runs (a bounded search point by point)
    again = certify_peak(As, Bs, Cs, Ds, m.peak_sensitivity, m.peak_sensitivity_w_rad_s, evaluate=evaluate)
    assert evaluate.calls > 5
    assert again.value == pytest.approx(got.value, rel=1e-12)
