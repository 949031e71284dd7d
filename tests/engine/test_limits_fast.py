"""The performance limits and margins at interactive speed: the Gauss-Kronrod panels of
engine/quadrature.py, Bode's sensitivity integral on a vectorised integrand
(engine/limits.py), the loop-evaluator route of ``margins_at`` against the whole-model
route, and the block-by-block route's closed loop and opened-loop poles from one assembly
(engine/margins.py)."""
from __future__ import annotations

import warnings

import control as ct
import numpy as np
import pytest
import scipy.integrate as si
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from strategies import loop_diagrams

from loopwright.engine.blockwise_response import BlockwiseModel
from loopwright.engine.errors import AnalysisError
from loopwright.engine.interconnect import assemble
from loopwright.engine.limits import bode_sensitivity_integral, performance_limits
from loopwright.engine.margins import _closed_coupling_form, _open_loop_poles, loop_margins, margins_at
from loopwright.engine.quadrature import adaptive_gauss_kronrod


def _ss(num, den):
    sys_ = ct.ss(ct.tf(num, den))
    return sys_.A, sys_.B, sys_.C, sys_.D


# ---------------------------------------------------------------------------------------
# the quadrature


@pytest.mark.parametrize(
    "f, ends, exact",
    [
        (np.exp, [0.0, 1.0], np.e - 1.0),  # closed form: int_0^1 e^x dx = e - 1
        (lambda x: 1.0 / (1e-6 + x * x), [-1.0, 1.0], 2e3 * np.arctan(1e3)),  # closed form: (2/a) atan(1/a), a = 1e-3
        (np.sqrt, [0.0, 1.0], 2.0 / 3.0),  # closed form: 2/3 (unbounded derivative at 0)
        (lambda x: np.cos(40.0 * x), [0.0, np.pi / 2], np.sin(20.0 * np.pi) / 40.0),  # closed form: sin(40 x)/40
    ],
    ids=["exp", "narrow peak", "sqrt", "oscillation"],
)
def test_gauss_kronrod_panels_meet_closed_forms_within_their_error_estimate(f, ends, exact):
    calls = []

    def counted(x):
        calls.append(x.size)
        return f(x)

    r = adaptive_gauss_kronrod(counted, ends, epsabs=1e-11, epsrel=1e-10)
    assert r.converged and r.error <= max(1e-11, 1e-10 * abs(r.value))
    assert abs(r.value - exact) <= max(r.error, 1e-14 * max(1.0, abs(exact)))
    # vectorised: one call per round, at the nodes of every panel being refined
    assert len(calls) == r.rounds and sum(calls) == r.evaluations


def test_gauss_kronrod_panels_report_when_they_run_out():
    # a jump at an irrational point is never resolved to 1e-15 by halving: the panels run out
    r = adaptive_gauss_kronrod(lambda x: (x > 1 / np.sqrt(2)).astype(float), [0.0, 1.0], epsabs=1e-15, epsrel=0.0, max_panels=50)
    assert not r.converged and r.panels <= 50
    assert abs(r.value - (1.0 - 1.0 / np.sqrt(2.0))) < 1e-2


# ---------------------------------------------------------------------------------------
# Bode's sensitivity integral


@pytest.mark.parametrize(
    "num, den, theory",
    [
        # Freudenberg & Looze, IEEE TAC AC-30(6), 1985 (from memory): pi * sum of the open-loop
        # right-half-plane poles; closed loop s^2 + (b - p) s + (k - p b) stable
        ([6.0], np.poly([1.0, -3.0]), np.pi * 1.0),
        ([200.0, 200.0], np.poly([2.0, -5.0, -8.0]), np.pi * 2.0),
        (3000.0 * np.poly([-0.5, -3.0]), np.poly([1.0, 2.0, -20.0, -30.0]), np.pi * 3.0),
        # Bode 1945 (from memory): a stable open loop of relative degree >= 2 gives zero
        ([0.5], np.poly([-1.0, -1.0, -1.0]), 0.0),
        ([2.0], [1.0, 0.5, 0.0], 0.0),  # an integrator: the origin is not in the right half-plane
    ],
    ids=["one unstable pole", "unstable with a zero", "two unstable poles", "stable", "integrator"],
)
def test_bode_integral_equals_the_theorem(num, den, theory):
    A, B, C, D = _ss(num, den)
    assert np.all(np.linalg.eigvals(A - B @ C).real < 0)  # the theorem needs a stable closed loop
    r = bode_sensitivity_integral(A, B, C, D)
    assert r.converged
    assert_allclose(r.value, theory, atol=1e-8 * max(1.0, abs(theory)))
    lim = performance_limits(A, B, C, D)
    assert_allclose(lim.bode_integral, lim.bode_integral_theory, atol=1e-8 * max(1.0, abs(theory)))


@settings(max_examples=30, deadline=None)
@given(p=st.floats(0.1, 3.0), extra=st.floats(1.0, 10.0), margin=st.floats(1.5, 20.0), b2=st.floats(0.5, 30.0))
def test_bode_integral_equals_pi_times_the_unstable_pole(p, extra, margin, b2):
    # closed form (Freudenberg & Looze 1985, from memory): L = k / ((s - p)(s + b)(s + b2)) with
    # a stabilising k: the integral is pi * p whatever the other numbers
    b = p + extra
    den = np.poly([p, -b, -b2])
    # Routh for s^3 + a2 s^2 + a1 s + (a0 + k): stable iff a0 + k > 0 and a2 a1 > a0 + k
    a2, a1, a0 = den[1], den[2], den[3]
    lo, hi = -a0, a2 * a1 - a0
    assume(a2 > 0 and a1 > 0 and hi > lo * 1.01 and lo > 0)
    k = lo + (hi - lo) / margin
    A, B, C, D = _ss([k], den)
    r = bode_sensitivity_integral(A, B, C, D)
    assert r.converged
    assert_allclose(r.value, np.pi * p, rtol=1e-8)


def _previous_route(A, B, C, D) -> float:
    """The integral as the engine computed it before: scipy ``quad`` (QAGP) on
    ``w = tan(theta)``, one frequency at a time, here through python-control 0.10.2's
    evaluation of the state space (reference library)."""
    sys_ = ct.ss(A, B, C, D)

    def f(theta):
        w = np.tan(theta)
        L = complex(np.asarray(sys_(1j * w)).ravel()[0])
        return -np.log(abs(1.0 + L)) / np.cos(theta) ** 2

    pts = sorted({float(np.arctan(abs(p))) for p in np.linalg.eigvals(A) if 0 < np.arctan(abs(p)) < np.pi / 2})
    return si.quad(f, 0.0, np.pi / 2, points=pts or None, limit=2000, epsabs=1e-11, epsrel=1e-10, full_output=1)[0]


@settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 2**31 - 1), n=st.integers(2, 5))
def test_bode_integral_agrees_with_the_previous_route_on_random_loops(seed, n):
    rng = np.random.default_rng(seed)
    # a random stable closed loop of relative degree >= 2: poles and zeros drawn, gain small
    poles = -rng.uniform(0.2, 5.0, n) + (rng.random(n) < 0.3) * rng.uniform(0.3, 2.0, n)  # a few unstable ones
    zeros = -rng.uniform(0.5, 8.0, n - 2)
    num, den = np.poly(zeros) * rng.uniform(0.5, 2.0), np.poly(poles)
    A, B, C, D = _ss(num, den)
    assume(np.all(np.linalg.eigvals(A - B @ C).real < -1e-3))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the old route's integration warnings are not under test
        ref = _previous_route(A, B, C, D)
    ours = bode_sensitivity_integral(A, B, C, D)
    assert ours.converged
    assert_allclose(ours.value, ref, atol=1e-7 * max(1.0, abs(ref)))
    assert_allclose(ours.value, np.pi * np.sum(poles[poles > 0]), atol=1e-7 * max(1.0, abs(ref)))


# ---------------------------------------------------------------------------------------
# the limits of a clearly stable loop need no minimal realization


def test_a_hidden_stable_mode_changes_no_limit():
    # L = 10 (2 - s) / ((s + 1)(s + 3)(s + 4)): right-half-plane zero 2 (closed form), relative
    # degree 2, stable open loop (Bode's integral 0); a hidden mode at -7 appended
    A, B, C, D = _ss([-10.0, 20.0], np.poly([-1.0, -3.0, -4.0]))
    n = A.shape[0]
    Ah = np.block([[A, np.zeros((n, 1))], [np.ones((1, n)), -7.0 * np.ones((1, 1))]])  # driven, never seen
    Bh, Ch = np.vstack([B, [[0.0]]]), np.hstack([C, [[0.0]]])
    plain, hidden = performance_limits(A, B, C, D), performance_limits(Ah, Bh, Ch, D)
    assert hidden.relative_degree == plain.relative_degree == 2
    assert_allclose(hidden.rhp_zeros, [2.0], rtol=1e-9)
    assert_allclose(plain.rhp_zeros, [2.0], rtol=1e-9)
    assert_allclose(hidden.bode_integral, 0.0, atol=1e-9)
    assert hidden.rhp_poles.size == 0 and hidden.peak_sensitivity_bound == 1.0


def test_a_hidden_unstable_mode_is_no_right_half_plane_pole_of_the_loop():
    # the same loop with a hidden mode at +3 (uncontrollable): not clearly stable, so the
    # minimal realization removes it (common practice, no source: hidden modes are no poles
    # of the transfer function)
    A, B, C, D = _ss([-10.0, 20.0], np.poly([-1.0, -3.0, -4.0]))
    n = A.shape[0]
    Ah = np.block([[A, np.zeros((n, 1))], [np.ones((1, n)), 3.0 * np.ones((1, 1))]])
    lim = performance_limits(Ah, np.vstack([B, [[0.0]]]), np.hstack([C, [[0.0]]]), D)
    assert lim.rhp_poles.size == 0
    assert_allclose(lim.rhp_zeros, [2.0], rtol=1e-9)


# ---------------------------------------------------------------------------------------
# margins_at: the loop-evaluator route against the whole-model route


def _same_margins(fast, dense):
    assert fast.closed_loop_stable == dense.closed_loop_stable
    assert fast.message == dense.message
    if not dense.closed_loop_stable:
        return
    for key in ("gain_lower", "gain_upper", "phase_margin_deg", "delay_margin_s", "peak_sensitivity"):
        a, b = getattr(fast, key), getattr(dense, key)
        assert (a == b) if not np.isfinite(b) else np.isclose(a, b, rtol=1e-7, atol=1e-10), (key, a, b)
    assert_allclose(fast.disk.alpha, dense.disk.alpha, rtol=1e-7)
    assert_allclose(fast.gain_crossovers_w_rad_s, dense.gain_crossovers_w_rad_s, rtol=1e-7)
    assert_allclose(fast.phase_crossovers_w_rad_s, dense.phase_crossovers_w_rad_s, rtol=1e-7)
    assert fast.open_loop_unstable_poles == dense.open_loop_unstable_poles
    if dense.limits is None:
        return
    fl, dl = fast.limits, dense.limits
    assert fl.relative_degree == dl.relative_degree
    assert_allclose(fl.rhp_poles, dl.rhp_poles, rtol=1e-7, atol=1e-9)
    assert_allclose(fl.rhp_zeros, dl.rhp_zeros, rtol=1e-6, atol=1e-8)  # in the same order: conjugate pairs negative part first
    assert_allclose(fl.bode_integral_theory, dl.bode_integral_theory, rtol=1e-9, atol=1e-12)
    if np.isfinite(dl.bode_integral):
        assert_allclose(fl.bode_integral, dl.bode_integral, atol=1e-7 * max(1.0, abs(dl.bode_integral_theory)))


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much])
@given(loop_diagrams())
def test_the_loop_evaluator_route_agrees_with_the_whole_model_on_random_loops(diagram):
    # previous route: minimal realization, one Schur form, the limits on their own evaluator
    try:
        dense = margins_at(diagram, "P.u", route="whole model")
    except AnalysisError as err:
        with pytest.raises(AnalysisError, match=str(err)[:20]):
            margins_at(diagram, "P.u")
        return
    _same_margins(margins_at(diagram, "P.u"), dense)


@pytest.mark.parametrize("at", ["P0.u", "u0.out", "ym1.out"])
def test_the_loop_evaluator_route_agrees_with_the_whole_model_on_a_ring_of_loops(at):
    # a loop opened in a ring of observer-based loops: block triangular, evaluated part by part
    import sys
    from pathlib import Path

    sys.path.insert(0, str(Path(__file__).resolve().parents[2] / "bench"))
    from loops import view_loop

    d = view_loop(60)
    _same_margins(margins_at(d, at), margins_at(d, at, route="whole model"))


def test_loop_margins_and_limits_of_the_unstable_rotor_loop_agree_across_routes():
    # L = 80 (s + 1)/(s^3 + 10 s^2 - 4 s - 40): unstable pole +2, Bode integral 2 pi
    # (Freudenberg & Looze 1985, from memory; tests/REFERENCES.md#rotor-sensitivity-integral)
    A, B, C, D = _ss([80.0, 80.0], [1.0, 10.0, -4.0, -40.0])
    m = loop_margins(A, B, C, D)
    lim = performance_limits(A, B, C, D, closed_loop_stable=m.closed_loop_stable)
    assert_allclose(lim.bode_integral, 2.0 * np.pi, rtol=1e-9)
    assert_allclose(lim.rhp_poles, [2.0], rtol=1e-12)


# ---------------------------------------------------------------------------------------
# the block-by-block route from one assembly


def _opened_at_the_plant_input(diagram):
    """The loop opened at ``P.u`` and its coupling form (the example is skipped without one)."""
    opened = assemble(diagram, break_at="P.u")
    bw = BlockwiseModel.from_model(opened)
    assume(bw is not None)
    return opened, bw


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(loop_diagrams())
def test_the_closed_loop_from_the_opened_one_equals_its_own_assembly(diagram):
    # reference: the closed diagram assembled on its own
    opened, bw = _opened_at_the_plant_input(diagram)
    cols, rows = opened.input_slice("break:P.u"), opened.signal_slice(opened.break_return)
    d = -float(opened.D[rows, cols][0, 0])
    assume(abs(1.0 + d) > 1e-6)
    A_closed, bw_closed = _closed_coupling_form(opened, bw, cols, rows, d)
    ref = assemble(diagram).A
    scale = max(1.0, float(np.abs(ref).max()))
    assert_allclose(A_closed, ref, atol=1e-12 * scale)
    # the coupling form reproduces it: A0 + U V
    U_V = np.zeros_like(ref)
    for b in bw_closed.blocks:
        U_V[b.states, :] = b.U @ bw_closed.V[b.channels]
    own = A_closed - U_V
    for b in bw_closed.blocks:
        own[b.states, b.states] = 0.0
    assert np.abs(own).max(initial=0.0) <= 1e-10 * scale


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(loop_diagrams())
def test_opened_loop_poles_group_by_group_equal_the_dense_eigenvalues(diagram):
    # reference: LAPACK's eigenvalues (numpy.linalg.eigvals) of the opened loop's state matrix
    opened, bw = _opened_at_the_plant_input(diagram)
    poles = _open_loop_poles(bw)
    assume(poles is not None)
    ref = np.linalg.eigvals(opened.A)
    assert poles.size == ref.size
    scale = max(1.0, float(np.abs(ref).max()))
    d1 = np.abs(poles[:, None] - ref[None, :]).min(axis=1)
    d2 = np.abs(ref[:, None] - poles[None, :]).min(axis=1)
    assert max(d1.max(), d2.max()) <= 1e-7 * scale


# ---------------------------------------------------------------------------------------
# the loop evaluator at low frequency, behind integrators


def _exact_response(A, B, C, D, w: float) -> complex:
    """``C (jw I - A)^-1 B + D`` in exact rational arithmetic (the float entries are exact
    binary fractions): Gauss-Jordan elimination of the real form ``[[-A, -w I], [w I, -A]]``."""
    from fractions import Fraction

    n = A.shape[0]
    W = Fraction(w)
    M = [[Fraction(0)] * (2 * n + 1) for _ in range(2 * n)]
    for i in range(n):
        for j in range(n):
            M[i][j] = M[n + i][n + j] = -Fraction(float(A[i, j]))
        M[i][n + i], M[n + i][i] = -W, W
        M[i][2 * n] = Fraction(float(B[i, 0]))
    for c in range(2 * n):
        p = next(k for k in range(c, 2 * n) if M[k][c] != 0)
        M[c], M[p] = M[p], M[c]
        for k in range(2 * n):
            if k != c and M[k][c] != 0:
                f = M[k][c] / M[c][c]
                M[k] = [x - f * y for x, y in zip(M[k], M[c])]
    x = [M[i][2 * n] / M[i][i] for i in range(2 * n)]
    re = sum(Fraction(float(C[0, i])) * x[i] for i in range(n)) + Fraction(float(D[0, 0]))
    im = sum(Fraction(float(C[0, i])) * x[n + i] for i in range(n))
    return complex(float(re), float(im))


def test_the_cascade_keeps_its_digits_at_low_frequency_behind_a_double_integrator():
    # the conveyor sample (demo data): a two-mass drive, a double pole at the origin; the
    # reference is exact rational arithmetic on the same matrices
    from diagrams import sample_path

    from loopwright.engine.loop_response import LoopResponse
    from loopwright.engine.margins import opened_loop
    from loopwright.engine.project import load

    A, B, C, D = opened_loop(load(str(sample_path("conveyor_flexible_drive.lwd"))), "P.u")
    resp = LoopResponse(A, B, C, D)
    assert resp.route == "cascade"
    for w, rtol in ((1e-5, 1e-7), (1e-4, 1e-10), (1e-2, 1e-11), (10.0, 1e-11)):
        assert_allclose(resp(np.array([w]))[0], _exact_response(A, B, C, D, w), rtol=rtol)
    # Bode 1945 (from memory): a stable open loop of relative degree >= 2 integrates to 0,
    # to the 1e-7 the printed value is rounded to
    lim = performance_limits(A, B, C, D)
    assert lim.relative_degree >= 2 and abs(lim.bode_integral) < 1e-7


def test_a_loop_value_at_rounding_level_is_no_phase_crossing():
    # L(s) = 3 s / (s + 1)^4: L(0) = 0 exactly, so no critical gain at DC. Its phase
    # 90 - 4 atan(w) reaches -180 degrees at w = tan(67.5 deg) = 1 + sqrt(2), where
    # L = -3 w / (1 + w^2)^2 (closed form). Handed the DC value as the tiny negative number
    # one route's rounding gave (-7.5e-18), that is no crossing with a gain factor of 1e17,
    # while the real crossing stays.
    from loopwright.engine.margins import _crossings

    def Ljw(w):
        s = 1j * np.asarray(w, dtype=float)
        return 3.0 * s / (s + 1.0) ** 4

    grid = np.logspace(-3, 3, 400)
    *_, crit = _crossings(Ljw, grid, Ljw(grid), 0.0, -7.5e-18 + 0j)
    w180 = 1.0 + np.sqrt(2.0)
    assert [w for _g, w in crit] == pytest.approx([w180], rel=1e-9)
    assert crit[0][0] == pytest.approx((1.0 + w180**2) ** 2 / (3.0 * w180), rel=1e-9)


def test_a_zero_at_dc_behind_a_slow_plant_pole_is_no_crossing_on_either_route():
    # found by hypothesis: a washout s/(s + 0.8125) ahead of a plant with a pole at -1e-5
    # (demo numbers): L(0) = 0 exactly, but the whole-model route computes it as C x with x of
    # size 2e5 and got -4e-12 (|L| reaches 2.5): a "gain margin" of 2.4e11 at DC there, none
    # on the part-by-part route. Closed form: L(s) = 2 s (s + 1) / ((s + 0.8125)(s^2 + s + 1e-5))
    # is real and negative nowhere on the axis, so both routes report no gain margin.
    from loopwright.engine.diagram import Diagram

    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0}})
    d.add_block("sum", "e", {"signs": ["+", "-"], "width": 1})
    d.add_block("dynamic", "Ctl", {"num": [1.0, 0.0], "den": [1.0, 0.8125]})
    d.add_block("plant", "P", {"A": [[-1.0, 0.0, -1e-05], [0.0, -1.0, 0.0], [1.0, 0.0, 0.0]], "B": [[0.0], [0.0], [1.0]],
                               "C": [[0.0, 0.0, 2.0]], "D": [[0.0]]})
    d.connect("r.out", "e.in1")
    d.connect("e.out", "Ctl.u")
    d.connect("Ctl.y", "P.u")
    d.connect("P.y", "e.in2")
    for route in ("whole model", "loop evaluator"):
        m = margins_at(d, "P.u", **({"route": route} if route == "whole model" else {}))
        assert m.closed_loop_stable, route
        assert m.gain_upper == np.inf and m.phase_crossovers_w_rad_s == [], route


def test_a_conditionally_stable_loop_with_integrators_keeps_its_lower_gain_margin():
    # L(s) = 4.5 (s + 1)^3 / s^4: closed loop s^4 + K s^3 + 3K s^2 + 3K s + K with K = 4.5 g.
    # Routh (closed form): stable for K > 9/8, losing stability at w^2 = 3K/K = 3 where
    # L(j sqrt 3) = K (1 + j sqrt 3)^3 / 9 = -8K/9: lower gain factor 0.25 at sqrt(3) rad/s.
    # The floor for crossings at rounding level was 1e-10 of the largest |L| on the grid;
    # four integrators make that 4.5e12 three decades below the zeros, a floor of 450 above
    # |L| = 4 there: the margin was reported as "none: stable for any lower gain".
    import scipy.signal as ss

    from loopwright.engine.margins import loop_margins

    A, B, C, D = ss.tf2ss(4.5 * np.poly([-1.0, -1.0, -1.0]), [1.0, 0.0, 0.0, 0.0, 0.0])
    m = loop_margins(A, B, C, D)
    assert m.closed_loop_stable
    assert m.gain_lower == pytest.approx(0.25, rel=1e-9)
    assert m.gain_lower_w_rad_s == pytest.approx(np.sqrt(3.0), rel=1e-9)
    assert m.gain_upper == np.inf
