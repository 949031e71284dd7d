"""The loop-break view's fast route: the loop evaluator part by part, margins from one grid,
grid-refined peaks certified by one Hamiltonian check, the interim view of a large loop and
its progress hook (tests of engine/loop_response.py, engine/margins.py scalar_margins and
engine/views_data.py loop_break_view)."""
from __future__ import annotations

from pathlib import Path

import control as ct
import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

import loopwright.engine.views_data as views_data
from loopwright.engine.loop_response import LoopResponse
from loopwright.engine.margins import loop_transfer, margins_at, scalar_margins, sensitivity_system
from loopwright.engine.norms import peak_gain
from loopwright.engine.project import load
from loopwright.engine.views_data import loop_break_view

SAMPLES = Path(__file__).resolve().parents[2] / "samples"
CONVEYOR = SAMPLES / "conveyor_flexible_drive.lwd"
ROTOR = SAMPLES / "levitated_rotor_axis.lwd"


def _cascade(rng: np.random.Generator, parts: int, size: int):
    """A SISO loop whose state matrix is block triangular: ``parts`` stable parts of
    ``size`` states, each driving the next through one entry (a chain of stages)."""
    n = parts * size
    A = np.zeros((n, n))
    for k in range(parts):
        s = slice(k * size, (k + 1) * size)
        M = rng.normal(size=(size, size))
        A[s, s] = M - (np.max(np.linalg.eigvals(M).real) + 0.2 + rng.random()) * np.eye(size)
        if k:
            A[k * size, k * size - 1] = rng.normal()
    B = np.zeros((n, 1))
    B[:size, 0] = rng.normal(size=size)
    C = np.zeros((1, n))
    C[0, -size:] = rng.normal(size=size)
    return A, B, C, np.zeros((1, 1))


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 2**31 - 1), parts=st.integers(2, 6), size=st.integers(1, 4))
def test_the_cascade_evaluator_equals_python_control(seed, parts, size):
    # reference library: python-control 0.10.2 evaluates C (sI - A)^-1 B + D directly
    A, B, C, D = _cascade(np.random.default_rng(seed), parts, size)
    resp = LoopResponse(A, B, C, D)
    assert resp.route == "cascade"
    w = np.logspace(-2, 2, 200)
    ref = np.asarray(ct.ss(A, B, C, D)(1j * w)).ravel()
    ok = np.abs(ref) > 1e-8 * np.max(np.abs(ref))  # far down a roll-off both lose relative digits
    assert_allclose(resp(w)[ok], ref[ok], rtol=1e-9)
    # the whole-model route (one Schur form) agrees too
    assert_allclose(resp(w), resp._whole(w), rtol=1e-9, atol=1e-13 * np.max(np.abs(ref)))


def _random_loop(seed: int, n: int, gain: float):
    """A random stable SISO loop of ``n`` states scaled to ``gain`` (demo data)."""
    rng = np.random.default_rng(seed)
    M = rng.normal(size=(n, n))
    A = M - (np.max(np.linalg.eigvals(M).real) + 0.1 + rng.random()) * np.eye(n)
    B = rng.normal(size=(n, 1))
    C = rng.normal(size=(1, n))
    return A, gain * B, C, np.zeros((1, 1))


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.filter_too_much])
@given(seed=st.integers(0, 2**31 - 1), n=st.integers(1, 12), gain=st.floats(0.05, 20.0))
def test_grid_refined_peaks_agree_with_the_certified_ones(seed, n, gain):
    # the first pass's peak |S| and disk margin are grid maxima refined to about 1e-10: a
    # lower bound of the certified value (closed form: a sampled maximum cannot exceed the
    # supremum) and equal to it; the certificate is checked against peak_gain, which finds
    # the H-infinity norm of S on its own (minimal realisation, its own grid, Hamiltonian
    # bisection; Boyd & Balakrishnan 1990, from memory)
    A, B, C, D = _random_loop(seed, n, gain)
    resp = LoopResponse(A, B, C, D)
    first, _w, _L = scalar_margins(resp, certify=False)
    assume(first.closed_loop_stable)
    final, _w2, _L2 = scalar_margins(resp, certify=True)
    assert not first.certified and final.certified
    for a, b in ((first.peak_sensitivity, final.peak_sensitivity), (1 / first.disk.alpha, 1 / final.disk.alpha)):
        assert a <= b * (1 + 1e-12)
        assert a == pytest.approx(b, rel=1e-8)
    ref = peak_gain(*sensitivity_system(A, B, C, D))
    assert final.peak_sensitivity == pytest.approx(ref.value, rel=1e-8)
    ref_disk = peak_gain(*sensitivity_system(A, B, C, D, offset=-0.5))
    assert 1 / final.disk.alpha == pytest.approx(ref_disk.value, rel=1e-8)
    # everything else is the same in both passes
    assert first.gain_crossovers_w_rad_s == final.gain_crossovers_w_rad_s
    assert first.phase_margin_deg == final.phase_margin_deg and first.gain_upper == final.gain_upper


@settings(max_examples=20, deadline=None)
@given(k=st.floats(0.3, 6.0), p=st.floats(0.4, 2.5))
def test_first_pass_margins_match_python_control_stability_margins(k, p):
    # k/(s+p)^3 with k/p^3 < 8 (Routh): stable and well conditioned for python-control
    # 0.10.2 stability_margins (reference library) and closed forms (common practice, no
    # source): upper gain factor 8 p^3/k at w = p sqrt 3
    assume(k / p**3 < 7.9 and abs(k / p**3 - 1) > 1e-3)
    L = ct.tf([k], np.polymul([1, p], np.polymul([1, p], [1, p])))
    s = ct.ss(L)
    m, _w, _L = scalar_margins(LoopResponse(s.A, s.B, s.C, s.D), certify=False)
    gm, pm, _, wpc, wgc, _ = ct.stability_margins(L)
    assert_allclose(m.gain_upper, gm, rtol=1e-6)
    assert_allclose(m.gain_upper, 8 * p**3 / k, rtol=1e-8)
    assert_allclose(m.gain_upper_w_rad_s, wpc, rtol=1e-6)
    if k > p**3:
        assert_allclose(m.phase_margin_deg, pm, rtol=1e-6)
        assert_allclose(m.phase_margin_w_rad_s, wgc, rtol=1e-6)


@pytest.mark.parametrize("path", [CONVEYOR, ROTOR], ids=["conveyor", "rotor"])
def test_the_interim_view_is_the_final_one_before_its_certificate(path, monkeypatch):
    monkeypatch.setattr(views_data, "_PROGRESSIVE_MIN_STATES", 0)  # these samples are small
    d = load(path)
    seen, fractions = [], []
    final = loop_break_view(d, "P.u", limits=False, interim=seen.append, progress=fractions.append)
    assert len(seen) == 1
    first = seen[0]
    assert not first.margins.certified and final.margins.certified
    assert fractions == sorted(fractions) and fractions[-1] == 1.0
    assert_allclose(first.curves[0][: first.w_rad_s.size], np.interp(first.w_rad_s, final.w_rad_s, final.curves[0].real)
                    + 1j * np.interp(first.w_rad_s, final.w_rad_s, final.curves[0].imag), rtol=1e-6, atol=1e-9)
    assert first.margins.peak_sensitivity == pytest.approx(final.margins.peak_sensitivity, rel=1e-9)
    assert first.margins.disk.alpha == pytest.approx(final.margins.disk.alpha, rel=1e-9)
    # the view's certified margins are the command line's (the whole-model route)
    ref = margins_at(d, "P.u", limits=False)
    for key in ("phase_margin_deg", "gain_upper", "delay_margin_s", "peak_sensitivity"):
        assert getattr(final.margins, key) == pytest.approx(getattr(ref, key), rel=1e-8), key
    assert final.margins.disk.alpha == pytest.approx(ref.disk.alpha, rel=1e-8)
    # and python-control's grid disk margin (a sampled value, so a little above ours)
    sys = ct.ss(*loop_transfer(d, "P.u"))
    dm, _, _ = ct.disk_margins(sys, final.w_rad_s, skew=0.0)
    assert float(dm) == pytest.approx(final.margins.disk.alpha, rel=1e-4)
    assert float(dm) >= final.margins.disk.alpha * (1 - 1e-9)


def test_a_stopped_loop_break_view_ends_at_its_next_report():
    class Stopped(Exception):
        pass

    calls = []

    def stop_at_third(fraction):
        calls.append(fraction)
        if len(calls) == 3:
            raise Stopped

    with pytest.raises(Stopped):
        loop_break_view(load(CONVEYOR), "P.u", limits=False, progress=stop_at_third)
    assert len(calls) == 3
