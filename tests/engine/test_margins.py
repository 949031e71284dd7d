"""Tests of engine/margins.py: gain-margin intervals, phase/delay/disk margins, vector loops."""
from __future__ import annotations

from pathlib import Path

import control as ct
import numpy as np
import pytest
import scipy.integrate as si
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from diagrams import stage_loop_named
from loopwright.engine.diagram import Diagram
from loopwright.engine.errors import AnalysisError, UnknownNameError
from loopwright.engine.margins import (
    closed_loop_matrix,
    disk_margin_from_alpha,
    loop_margins,
    loop_transfer,
    margins_at,
    margins_from_response,
    sensitivity_maps,
    vector_loop_margins,
)
from loopwright.engine.norms import peak_gain
from loopwright.engine.responses import frequency_response

DATA = Path(__file__).parent / "data"


def _ss(sys):
    s = ct.ss(sys)
    return np.asarray(s.A), np.asarray(s.B), np.asarray(s.C), np.asarray(s.D)


# ---- diagrams of the reference cases -------------------------------------------------


def _unity_loop(plant: dict, K: float, *, controller: dict | None = None) -> Diagram:
    """r -> e = r - y -> [gain K or controller] -> P -> y (tests/REFERENCES.md#oven-margins (closed forms by hand) layout)."""
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0, "start": 0.0}})
    d.add_block("sum", "e", {"signs": ["+", "-"], "width": 1})
    if controller is None:
        d.add_block("gain", "Kp", {"K": [[K]]})
        d.connect("e.out", "Kp.in", name="err")
    else:
        d.add_block("plant", "Kp", controller)
        d.connect("e.out", "Kp.u", name="err")
    d.add_block("plant", "P", plant)
    d.connect("r.out", "e.in1", name="ref")
    d.connect("Kp.out" if controller is None else "Kp.y", "P.u", name="u")
    d.connect("P.y", "e.in2", name="y")
    return d


def _stage_observer_loop() -> Diagram:
    # tests/REFERENCES.md#stage-observer (separation principle, derived by hand): air-bearing stage, K = [8, 4], L = [11, 30]
    return stage_loop_named(linked=False)


def _reactor_lqr_loop() -> Diagram:
    # tests/REFERENCES.md#reactor-lqr (scalar Riccati closed form; Safonov and Athans 1977)
    d = Diagram()
    d.add_block("source", "d", {"role": "disturbance", "width": 1, "waveform": {"kind": "zero"}})
    d.add_block("plant", "P", {"A": [[1.0]], "B": [[1.0]], "C": [[1.0]], "D": [[0.0]]})
    d.add_block("gain", "Kx", {"K": [[-3.0]]})
    d.add_block("sum", "up", {"signs": ["+", "+"], "width": 1})
    d.connect("P.y", "Kx.in", name="x")
    d.connect("Kx.out", "up.in1", name="ufb")
    d.connect("d.out", "up.in2", name="dist")
    d.connect("up.out", "P.u", name="plant_input")
    return d


OVEN = {"A": [[-1, 0, 0], [1, -1, 0], [0, 1, -1]], "B": [[1], [0], [0]], "C": [[0, 0, 1]], "D": [[0]]}
CAMERA = {"A": [[0, 1], [0, -1]], "B": [[0], [1]], "C": [[1, 0]], "D": [[0]]}
ROTOR = {"A": [[0, 1], [4, 0]], "B": [[0], [1]], "C": [[1, 0]], "D": [[0]]}
LEAD = {"A": [[-10.0]], "B": [[1.0]], "C": [[-720.0]], "D": [[80.0]]}

# (diagram builder, break signal, expected dict, source)
CASES = [
    (
        _stage_observer_loop,
        "plant_input",
        dict(lo=0.0, hi=4.665310651, hi_w=8.043152845, pm=38.48828081, pm_w=2.668875135, dm=0.2516967597),
        "tests/REFERENCES.md#stage-observer (separation principle, derived by hand)",
    ),
    (
        _reactor_lqr_loop,
        "plant_input",
        dict(lo=1 / 3, lo_w=0.0, hi=np.inf, pm=70.52877937, pm_w=2 * np.sqrt(2), dm=0.4352098757, s_peak=1.0),
        "tests/REFERENCES.md#reactor-lqr (scalar Riccati closed form; Safonov and Athans 1977)",
    ),
    (
        lambda: _unity_loop(OVEN, 4.0),
        "u",
        dict(lo=0.0, hi=2.0, hi_w=np.sqrt(3), pm=27.1416306, pm_w=1.232818762, dm=0.3842501695, s_peak=3.0, s_w=np.sqrt(2)),
        "tests/REFERENCES.md#oven-margins (closed forms by hand)",
    ),
    (
        lambda: _unity_loop(CAMERA, 2.0),
        "u",
        dict(lo=0.0, hi=np.inf, pm=38.66828249, pm_w=1.249621068, dm=0.5400747979),
        "tests/REFERENCES.md#camera-pan-delay (closed form PM/w_c)",
    ),
    (
        lambda: _unity_loop(ROTOR, 0.0, controller=LEAD),
        "u",
        dict(lo=0.5, lo_w=0.0, hi=np.inf, pm=48.94734683, pm_w=6.234008542, dm=0.1370374065, s_peak=1.489134766, s_w=9.581343554),
        "tests/REFERENCES.md#rotor-sensitivity-integral (Freudenberg and Looze 1985)",
    ),
]


@pytest.mark.parametrize("build, at, expected, source", CASES, ids=[c[3] for c in CASES])
def test_margins_of_reference_diagrams(build, at, expected, source):
    m = margins_at(build(), at)
    assert m.closed_loop_stable
    assert_allclose(m.gain_lower, expected["lo"], rtol=1e-7)
    assert_allclose(m.gain_upper, expected["hi"], rtol=1e-7)
    if "lo_w" in expected:
        assert_allclose(m.gain_lower_w_rad_s, expected["lo_w"], atol=1e-9)
    if "hi_w" in expected:
        assert_allclose(m.gain_upper_w_rad_s, expected["hi_w"], rtol=1e-7)
    assert_allclose(m.phase_margin_deg, expected["pm"], rtol=1e-7)
    assert_allclose(m.phase_margin_w_rad_s, expected["pm_w"], rtol=1e-7)
    assert_allclose(m.delay_margin_s, expected["dm"], rtol=1e-7)
    if "s_peak" in expected:
        assert_allclose(m.peak_sensitivity, expected["s_peak"], rtol=1e-7)
    if "s_w" in expected:
        assert_allclose(m.peak_sensitivity_w_rad_s, expected["s_w"], rtol=1e-5)


def test_disk_margins_of_the_triple_lag_oven():
    # tests/REFERENCES.md#oven-margins (closed forms by hand): alpha 0.3776579041, gain [0.6823278038, 1.465571232], phase 21.38638975 deg
    m = margins_at(_unity_loop(OVEN, 4.0), "u")
    assert_allclose(m.disk.alpha, 0.3776579041, rtol=1e-7)
    assert_allclose([m.disk.gain_lower, m.disk.gain_upper], [0.6823278038, 1.465571232], rtol=1e-7)
    assert_allclose(m.disk.phase_deg, 21.38638975, rtol=1e-7)
    assert_allclose(m.gain_margin_db[1], 6.020599913, rtol=1e-7)


@pytest.mark.parametrize(
    "skew, alpha, lo, hi, phase, source",
    [
        (0.0, 1.0, 1 / 3, 3.0, 53.13010235, "tests/REFERENCES.md#reactor-lqr (scalar Riccati closed form; Safonov and Athans 1977) skew 0"),
        (1.0, 1.0, 0.5, np.inf, 60.0, "tests/REFERENCES.md#reactor-lqr (scalar Riccati closed form; Safonov and Athans 1977) skew +1 (the LQR guarantee; arccos(g_lo) limit)"),
    ],
)
def test_disk_margins_of_the_lqr_reactor(skew, alpha, lo, hi, phase, source):
    m = margins_at(_reactor_lqr_loop(), "plant_input", skew=skew)
    assert_allclose(m.disk.alpha, alpha, rtol=1e-8)
    assert_allclose(m.disk.gain_lower, lo, rtol=1e-8)
    assert_allclose(m.disk.gain_upper, hi, rtol=1e-8)
    assert_allclose(m.disk.phase_deg, phase, rtol=1e-8)


def test_disk_margin_formula_uses_the_arccos_limit_when_the_upper_gain_is_unbounded():
    # tests/REFERENCES.md#reactor-lqr (scalar Riccati closed form; Safonov and Athans 1977) note: alpha = 1, skew 1 gives 60 deg, not 90
    d = disk_margin_from_alpha(1.0, skew=1.0)
    assert d.gain_upper == np.inf
    assert_allclose(d.phase_deg, 60.0, rtol=1e-12)


def test_bode_sensitivity_integral_with_an_unstable_plant():
    # tests/REFERENCES.md#rotor-sensitivity-integral (Freudenberg and Looze 1985): int_0^inf ln|S(jw)| dw = pi * sum Re(p_unstable) = 2 pi
    A, B, C, D = loop_transfer(_unity_loop(ROTOR, 0.0, controller=LEAD), "u")
    ol = np.linalg.eigvals(A)

    def ln_s(theta):
        w = np.tan(theta)
        L = frequency_response(A, B, C, D, [w])[0, 0, 0]
        return np.log(abs(1.0 / (1.0 + L))) / np.cos(theta) ** 2

    val, _ = si.quad(ln_s, 0.0, np.pi / 2, epsabs=1e-12, limit=400)
    assert_allclose(val, np.pi * np.sum(ol.real[ol.real > 0]), atol=1e-6)
    assert_allclose(val, 2 * np.pi, atol=1e-6)


def test_unstable_nominal_loop_is_reported_not_given_margins():
    # oven with gain 10 > 8 (upper margin 2 at gain 4): common practice, no source
    m = margins_at(_unity_loop(OVEN, 10.0), "u")
    assert not m.closed_loop_stable
    assert np.isnan(m.gain_lower) and np.isnan(m.gain_upper)
    assert m.peak_sensitivity == np.inf
    assert "stable for gains in (0, 0.8)" in m.message


@pytest.mark.parametrize(
    "num_gain, extra_pole, finite_upper",
    [(3.0, None, False), (8000.0, 20.0, True)],
    ids=["open-loop unstable, relative degree 2", "open-loop unstable, band of stable gains"],
)
def test_open_loop_unstable_loop_interval_agrees_with_the_closed_loop_pole_count(num_gain, extra_pole, finite_upper):
    # L = k (s+1)^2 / ((s-1)(s+5)^2(s+10)[(s+20)]): stable only above a lower gain (and, with
    # the extra lag, below an upper one). The interval is checked against closed-loop poles
    # from python-control 0.10.2 just inside and just outside each bound.
    den = np.polymul([1, -1], np.polymul(np.polymul([1, 5], [1, 5]), [1, 10]))
    if extra_pole is not None:
        den = np.polymul(den, [1, extra_pole])
    else:
        num_gain = 400.0
    L = ct.tf(np.polymul([1, 1], [1, 1]) * num_gain, den)
    m = loop_margins(*_ss(L))
    assert m.closed_loop_stable
    assert 0 < m.gain_lower < 1
    assert np.isfinite(m.gain_upper) == finite_upper
    for g, stable in [(m.gain_lower * 0.99, False), (m.gain_lower * 1.01, True), (m.gain_upper * 0.99, True), (m.gain_upper * 1.01, False)]:
        if not np.isfinite(g):
            continue
        poles = ct.poles(ct.feedback(g * L, 1))
        assert (np.max(poles.real) < 0) == stable


@settings(max_examples=20, deadline=None)
@given(k=st.floats(0.2, 7.5), p=st.floats(0.3, 3.0))
def test_margins_match_python_control_stability_margins(k, p):
    # k/(s+p)^3, closed forms (common practice, no source): phase crossover at p sqrt 3 where
    # |L| = k/(8 p^3), so the upper gain factor is 8 p^3/k and the closed loop is stable iff
    # k/p^3 < 8 (Routh); gain crossover w_c = sqrt(k^(2/3) - p^2) when k > p^3, phase margin
    # 180 - 3 atan(w_c/p) deg (negative when unstable). python-control 0.10.2
    # stability_margins agrees on the stable draws.
    assume(abs(k / p**3 - 8) > 0.05 and abs(k / p**3 - 1) > 1e-3)
    L = ct.tf([k], np.polymul([1, p], np.polymul([1, p], [1, p])))
    m = loop_margins(*_ss(L))
    stable = k / p**3 < 8
    assert m.closed_loop_stable is stable
    assert_allclose(m.phase_crossovers_w_rad_s, [p * np.sqrt(3)], rtol=1e-8)
    if k > p**3:
        wc = np.sqrt(k ** (2 / 3) - p**2)
        assert_allclose(m.gain_crossovers_w_rad_s, [wc], rtol=1e-8)
        assert_allclose(m.phase_margin_deg, 180 - 3 * np.degrees(np.arctan(wc / p)), rtol=1e-8, atol=1e-9)
    else:
        assert m.gain_crossovers_w_rad_s == []
    if stable:
        assert_allclose(m.gain_upper, 8 * p**3 / k, rtol=1e-8)
        assert_allclose(m.gain_upper_w_rad_s, p * np.sqrt(3), rtol=1e-8)
        assert m.gain_lower == 0.0
        gm, pm, _, wpc, wgc, _ = ct.stability_margins(L)
        assert_allclose(m.gain_upper, gm, rtol=1e-6)
        assert_allclose(m.gain_upper_w_rad_s, wpc, rtol=1e-6)
        if k > p**3:
            assert_allclose(m.phase_margin_deg, pm, rtol=1e-6)
            assert_allclose(m.phase_margin_w_rad_s, wgc, rtol=1e-6)
    else:
        assert m.peak_sensitivity == np.inf and m.disk.alpha == 0.0


@pytest.mark.parametrize(
    "tf, P, k, expected, source",
    [
        (ct.tf(4, [1, 3, 3, 1]), 0, 0, dict(hi=2.0, pm=27.1416306, dm=0.3842501695, s_peak=3.0, alpha=0.3776579041), "tests/REFERENCES.md#oven-margins (closed forms by hand)"),
        (ct.tf([80, 80], [1, 10, -4, -40]), 1, 0, dict(lo=0.5, hi=np.inf, pm=48.94734683, dm=0.1370374065, s_peak=1.489134766), "tests/REFERENCES.md#rotor-sensitivity-integral (Freudenberg and Looze 1985)"),
        (ct.tf(2, [1, 1, 0]), 0, 1, dict(hi=np.inf, pm=38.66828249, dm=0.5400747979), "tests/REFERENCES.md#camera-pan-delay (closed form PM/w_c)"),
        (ct.tf(3, [1, -1]), 1, 0, dict(lo=1 / 3, hi=np.inf, pm=70.52877937, dm=0.4352098757, s_peak=1.0, alpha=1.0), "tests/REFERENCES.md#reactor-lqr (scalar Riccati closed form; Safonov and Athans 1977)"),
    ],
)
def test_margins_from_sampled_response(tf, P, k, expected, source):
    w = np.logspace(-4, 4, 80001)
    m = margins_from_response(w, tf(1j * w), open_loop_unstable_poles=P, poles_at_origin=k)
    assert m.closed_loop_stable
    assert_allclose(m.gain_lower, expected.get("lo", 0.0), rtol=1e-4)
    assert_allclose(m.gain_upper, expected["hi"], rtol=1e-5)
    assert_allclose(m.phase_margin_deg, expected["pm"], rtol=1e-5)
    assert_allclose(m.delay_margin_s, expected["dm"], rtol=1e-5)
    if "s_peak" in expected:
        assert_allclose(m.peak_sensitivity, expected["s_peak"], rtol=1e-5)
    if "alpha" in expected:
        assert_allclose(m.disk.alpha, expected["alpha"], rtol=1e-5)


def test_sampled_response_of_an_unstable_closed_loop_is_flagged_by_the_nyquist_count():
    w = np.logspace(-3, 3, 20001)
    L = ct.tf(10, [1, 3, 3, 1])  # beyond the upper margin 8: common practice, no source
    m = margins_from_response(w, L(1j * w))
    assert not m.closed_loop_stable
    # an open-loop unstable loop whose Nyquist plot does not encircle -1 is unstable closed
    L2 = ct.tf(0.5, [1, -1])
    assert not margins_from_response(w, L2(1j * w), open_loop_unstable_poles=1).closed_loop_stable


# ---- vector loops: loop-at-a-time margins can mislead ------------------------------


def _spinning_drum(a: float = 6.0) -> Diagram:
    """Two-axis attitude loop of a spinning drum (demo data, our own numbers).

    Plant ``P(s) = 1/(s^2 + a^2) [[s - a^2, a (s + 1)], [-a (s + 1), s - a^2]]`` realised as
    ``x' = [[0, a], [-a, 0]] x + u``, ``y = [[1, a], [-a, 1]] x``; unit feedback ``u = -y``.
    """
    d = Diagram()
    d.add_block("plant", "drum", {"A": [[0.0, a], [-a, 0.0]], "B": [[1.0, 0.0], [0.0, 1.0]], "C": [[1.0, a], [-a, 1.0]], "D": [[0.0, 0.0], [0.0, 0.0]]})
    d.add_block("gain", "Kneg", {"K": [[-1.0, 0.0], [0.0, -1.0]]})
    d.connect("drum.y", "Kneg.in", name="rates")
    d.connect("Kneg.out", "drum.u", name="torques")
    return d


def test_loop_at_a_time_margins_mislead_for_a_spinning_drum():
    # Common practice (Doyle & Stein 1981; Skogestad & Postlethwaite, from memory): each loop
    # alone is 1/s (infinite gain margin, 90 deg), yet a small simultaneous gain change
    # destabilises. Expected values derived here by hand and with python-control 0.10.2.
    a = 6.0
    m = margins_at(_spinning_drum(a), "torques")
    assert m.closed_loop_stable
    for ch in m.per_channel:
        assert ch.closed_loop_stable
        assert ch.gain_lower == 0.0 and ch.gain_upper == np.inf
        assert_allclose(ch.phase_margin_deg, 90.0, rtol=1e-8)  # L_i = 1/s crosses at 1 rad/s with -90 deg
        assert_allclose(ch.phase_margin_w_rad_s, 1.0, rtol=1e-8)
    # all loops at once: alpha = 1/||S - I/2||_inf, with S from python-control
    P = ct.ss([[0, a], [-a, 0]], np.eye(2), [[1, a], [-a, 1]], np.zeros((2, 2)))
    S = ct.feedback(ct.ss([], [], [], np.eye(2)), P)
    ref = ct.norm(S - 0.5 * ct.ss([], [], [], np.eye(2)), "inf", method="scipy", tol=1e-12)
    assert_allclose(m.all_at_once.alpha, 1.0 / ref, rtol=1e-7)
    assert m.all_at_once.alpha < 0.2  # tiny, against alpha = 2 for each loop alone
    # a simultaneous perturbation diag(1 + delta, 1 - delta) destabilises for small delta
    A, B, C, D = loop_transfer(_spinning_drum(a), "torques")

    def max_re(delta):
        G = np.diag([1 + delta, 1 - delta])
        return np.max(np.linalg.eigvals(A - B @ G @ C).real)

    assert max_re(0.0) < 0
    assert max_re(0.2) > 0  # 20 % opposite gain changes are enough
    # and the all-loops disk margin is consistent with it: the guaranteed gain interval excludes 1.2 or 0.8
    d = m.all_at_once
    assert d.gain_upper < 1.2 or d.gain_lower > 0.8


def test_vector_loop_margins_reject_non_square_loops():
    with pytest.raises(AnalysisError):
        vector_loop_margins(np.zeros((1, 1)), np.zeros((1, 2)), np.zeros((1, 1)), np.zeros((1, 2)))


def test_unknown_break_signal_suggests_names():
    with pytest.raises(UnknownNameError) as err:
        margins_at(_unity_loop(OVEN, 4.0), "uu")
    assert "u" in err.value.suggestions


# ---- four closed-loop maps ---------------------------------------------------------


def test_sensitivity_maps_around_the_oven_plant():
    # S = 1/(1 + PC), T = PC/(1 + PC), PS = P/(1 + PC), CS = C/(1 + PC) with C = 4 (common practice, no source)
    maps = sensitivity_maps(_unity_loop(OVEN, 4.0), "P")
    w = np.array([0.0, 0.7, np.sqrt(2), 3.0])
    s = 1j * w
    P = 1 / (s + 1) ** 3
    Cc = 4.0
    expect = {"S": 1 / (1 + P * Cc), "T": P * Cc / (1 + P * Cc), "PS": P / (1 + P * Cc), "CS": Cc / (1 + P * Cc)}
    for key, val in expect.items():
        assert_allclose(frequency_response(*maps[key], w)[:, 0, 0], val, rtol=1e-10, err_msg=key)
    assert_allclose(peak_gain(*maps["S"]).value, 3.0, rtol=1e-8)  # tests/REFERENCES.md#oven-margins (closed forms by hand) ||S||_inf = 3
    assert (maps["u"], maps["y"]) == ("u", "y")


def test_closed_loop_matrix_gives_the_reference_poles():
    # tests/REFERENCES.md#oven-margins (closed forms by hand) closed-loop poles -2.587401052, -0.206299474 +- 1.374729637j
    A, B, C, D = loop_transfer(_unity_loop(OVEN, 4.0), "u")
    ev = np.sort_complex(np.linalg.eigvals(closed_loop_matrix(A, B, C, D)))
    assert_allclose(ev, np.sort_complex([-2.587401052, -0.206299474 - 1.374729637j, -0.206299474 + 1.374729637j]), atol=1e-8)


# ---- poles at the origin, unbounded disks, signed phase margins, crossover tables -------


def test_poles_at_the_origin_are_not_counted_in_the_right_half_plane():
    # tests/REFERENCES.md#stage-observer stage loop broken at the plant input: L = K (sI - A + B K + L C)^-1 L P(s) with
    # P = 1/s^2 (two poles at the origin, closed form) and the estimator block A - B K - L C =
    # [[-11, 1], [-38, -4]] (trace -15, determinant 82: both poles in the open left half-plane, closed form)
    from diagrams import stage_loop_ref03

    m = margins_at(stage_loop_ref03(), "P.u")
    assert m.open_loop_poles.origin == 2
    assert m.open_loop_poles.open_rhp == 0 and m.open_loop_unstable_poles == 0
    assert m.open_loop_poles.phrase() == "2 at the origin, 0 in the right half-plane"


@pytest.mark.parametrize(
    "tf, origin",
    [
        pytest.param(ct.tf(2, [1, 1, 0]), 1, id="tests/REFERENCES.md#camera-pan-delay camera pan 2/(s(s+1)): one integrator (closed form)"),
        pytest.param(ct.tf([10, 10], [1, 10, 0, 0]), 2, id="10(s+1)/(s^2(s+10)): double integrator with lead (closed form)"),
        pytest.param(ct.tf([1, 3, 3, 1], [1, 0, 0, 0, 0]), 4, id="(s+1)^3/s^4: a 4-fold pole at the origin (closed form)"),
    ],
)
def test_integrators_in_the_loop_are_counted_at_the_origin_and_the_margins_agree_with_python_control(tf, origin):
    A, B, C, D = _ss(tf)
    m = loop_margins(A, B, C, D)
    assert (m.open_loop_poles.origin, m.open_loop_poles.open_rhp) == (origin, 0)
    if origin < 4:  # python-control 0.10.2 stability_margins as the reference (well conditioned here)
        gm, pm, _, _, wgc, _ = ct.stability_margins(tf)
        assert_allclose(m.phase_margin_deg, pm, rtol=1e-7)
        assert_allclose(m.phase_margin_w_rad_s, wgc, rtol=1e-7)


def test_a_ten_fold_integrator_chain_is_ten_poles_at_the_origin():
    # the chain of 10 integrators (tests/engine/data) broken at the plant input: the plant is a 10x10 shift
    # matrix, 10 poles at s = 0 (closed form); the estimator block A - B K - L C is counted by its own eigenvalues
    from loopwright.engine.blocks import plant_matrices
    from loopwright.engine.project import load

    d = load(str(DATA / "integrator_chain_10_placed_gains.lwd"))
    m = margins_at(d, "P.u")
    A, B, C, _ = plant_matrices(d, "P")
    K = -np.asarray(d.block_by_name("K").params["K"], float)
    Lg = np.asarray(d.block_by_name("est").params["L"], float)
    rhp = int(np.sum(np.linalg.eigvals(A - B @ K - Lg @ C).real > 0))
    assert m.open_loop_poles.origin == 10
    assert m.open_loop_poles.open_rhp == rhp


def test_an_integrator_loop_has_an_unbounded_disk_gain_interval():
    # L = 1/s: S - 1/2 = (s - 1)/(2 (s + 1)) is all-pass with gain 1/2, so alpha = 2 and the balanced disk
    # gives the gain interval [0, inf) exactly (closed form; Seiler, Packard & Gahinet 2020, from memory)
    m = loop_margins([[0.0]], [[1.0]], [[1.0]], [[0.0]])
    assert_allclose(m.disk.alpha, 2.0, rtol=1e-9)
    assert m.disk.gain_lower == 0.0 and m.disk.gain_upper == np.inf
    assert m.disk.lower_unbounded and m.disk.upper_unbounded
    assert m.as_dict()["disk_margin"]["gain_unbounded"] == [True, True]


@pytest.mark.parametrize("alpha", [2.0, 2.0 - 4e-16, 2.0 * (1 - 1e-12)], ids=lambda a: f"alpha={a!r} (closed form: 1 - alpha/2 = 0)")
def test_disk_gains_unbounded_within_rounding_are_zero_and_infinity(alpha):
    d = disk_margin_from_alpha(alpha)
    assert d.gain_lower == 0.0 and d.gain_upper == np.inf
    # a clearly bounded disk keeps its finite interval: alpha = 1 gives [1/3, 3] (closed form (1 -+ a/2)/(1 +- a/2))
    d1 = disk_margin_from_alpha(1.0)
    assert_allclose([d1.gain_lower, d1.gain_upper], [1 / 3, 3.0], rtol=1e-12)


def test_a_stable_loop_with_a_negative_phase_margin_says_why():
    # L = 50 (s + 5)(s + 0.3) / ((s - 2)(s - 4)(s + 20)): two open-loop unstable poles; python-control 0.10.2
    # stability_margins gives PM -86.175 deg at 0.6004 rad/s and GM 0.4428, and the closed loop is stable
    L = ct.zpk([-5, -0.3], [2, 4, -20], 50)
    assert np.all(ct.poles(ct.feedback(L, 1)).real < 0)
    gm, pm, _, _, wgc, _ = ct.stability_margins(L)
    m = loop_margins(*_ss(L))
    assert m.closed_loop_stable and m.open_loop_unstable_poles == 2
    assert_allclose(m.phase_margin_deg, pm, rtol=1e-7)
    assert_allclose(m.phase_margin_w_rad_s, wgc, rtol=1e-7)
    assert_allclose(m.gain_lower, gm, rtol=1e-7)
    assert pm < 0
    (note,) = [n for n in m.notes if "negative" in n]
    assert "stable although the phase margin is negative" in note and "2 open-loop poles" in note
    assert "encircles -1 2 times counter-clockwise" in note


def test_crossover_tables_of_the_triple_lag_mark_the_margins_they_set():
    # tests/REFERENCES.md#oven-margins (closed forms): one gain crossover at sqrt(4^(2/3) - 1) with PM 27.1416306 deg and
    # delay margin 0.3842501695 s; one phase crossover at sqrt(3) where 1/|L| = 2
    m = loop_margins(*_ss(ct.tf(4, [1, 3, 3, 1])))
    (gc,) = m.crossovers
    assert_allclose([gc.w_rad_s, gc.phase_margin_deg, gc.delay_margin_s], [np.sqrt(4 ** (2 / 3) - 1), 27.1416306, 0.3842501695], rtol=1e-8)
    assert gc.sets_phase_margin and gc.sets_delay_margin
    assert_allclose(m.delay_margin_w_rad_s, gc.w_rad_s)
    (pc,) = m.phase_crossings
    assert_allclose([pc.w_rad_s, pc.gain_factor], [np.sqrt(3.0), 2.0], rtol=1e-9)
    assert pc.sets_upper and not pc.sets_lower


def test_every_crossover_of_the_conveyor_sample_matches_python_control():
    # python-control 0.10.2 stability_margins(returnall=True) on the same realisation of L at P.u
    from diagrams import sample_path
    from loopwright.engine.project import load

    d = load(str(sample_path("conveyor_flexible_drive.lwd")))
    A, B, C, D = loop_transfer(d, "P.u")
    m = margins_at(d, "P.u")
    gm, pm, _, wpc, wgc, _ = ct.stability_margins(ct.ss(A, B, C, D), returnall=True)
    assert_allclose([c.w_rad_s for c in m.crossovers], np.sort(wgc), rtol=1e-6)
    order = np.argsort(wgc)
    assert_allclose([c.phase_margin_deg for c in m.crossovers], np.asarray(pm)[order], rtol=1e-6)
    lag = np.mod(np.asarray(pm)[order], 360.0)
    assert_allclose([c.delay_margin_s for c in m.crossovers], np.radians(lag) / np.sort(wgc), rtol=1e-6)
    # python-control's phase crossovers far outside the loop's band (w -> 0 where the two integrators make |L|
    # huge, w beyond 1e4 rad/s where |L| is tiny) move with rounding (they differ between BLAS kernels):
    # compared only where its answer is well conditioned
    neg = [(w, g) for w, g in sorted(zip(wpc, gm)) if g > 0 and 1e-3 < w < 1e4]
    assert_allclose([c.w_rad_s for c in m.phase_crossings], [w for w, _ in neg], rtol=1e-6)
    assert_allclose([c.gain_factor for c in m.phase_crossings], [g for _, g in neg], rtol=1e-6)
    assert [c.sets_delay_margin for c in m.crossovers].count(True) == 1
    assert sum(c.sets_upper for c in m.phase_crossings) == 1


# ---- one component of a vector break; limits of performance -------------------------------


def test_breaking_one_component_closes_the_others():
    # closed form: with channel 2 closed, the loop seen at channel 1 is L11 - L12 (1 + L22)^-1 L21;
    # python-control 0.10.2 builds it (feedback, series) and stability_margins gives its margins
    from diagrams import sample_path
    from loopwright.engine.project import load

    d = load(str(sample_path("two_zone_oven.lwd")))
    A, B, C, D = loop_transfer(d, "P.u")
    Lss = ct.ss(A, B, C, D)
    L11, L12, L21, L22 = Lss[0, 0], Lss[0, 1], Lss[1, 0], Lss[1, 1]
    L1 = L11 - L12 * ct.feedback(ct.ss([], [], [], [[1.0]]), L22) * L21
    gm, pm, _, _, wgc, _ = ct.stability_margins(L1)
    m = margins_at(d, "P.u[1]")
    assert isinstance(m.phase_margin_deg, float) and m.closed_loop_stable
    assert_allclose(m.phase_margin_deg, pm, rtol=1e-6)
    assert_allclose(m.phase_margin_w_rad_s, wgc, rtol=1e-6)
    assert m.gain_upper == np.inf and gm > 1e12  # python-control reports a rounding-level phase crossover as 2.9e14
    with pytest.raises(AnalysisError, match=r"pick \[1\] to \[2\]"):
        margins_at(d, "P.u[3]")


def test_bode_sensitivity_integral_of_the_unstable_rotor():
    # tests/REFERENCES.md#rotor-sensitivity-integral: int_0^inf ln|S| dw = pi * sum Re p = 2 pi for L = 80 (s + 1)/(s^3 + 10 s^2 - 4 s - 40)
    # (Freudenberg & Looze, IEEE TAC AC-30(6), 1985, from memory)
    from loopwright.engine.limits import performance_limits

    lim = performance_limits(*_ss(ct.tf([80, 80], [1, 10, -4, -40])))
    assert lim.relative_degree == 2
    assert_allclose(lim.bode_integral, 2 * np.pi, rtol=1e-8)
    assert_allclose(lim.bode_integral_theory, 2 * np.pi, rtol=1e-12)
    assert_allclose(lim.rhp_poles, [2.0], rtol=1e-12) and lim.rhp_zeros.size == 0
    assert lim.crossover_above_rad_s == pytest.approx(4.0)


def test_a_right_half_plane_zero_and_pole_bound_the_peak_sensitivity():
    # L = (20 - 4 s)/((s - 1)(s + 10)): zero z = 5, pole p = 1 in the right half-plane; closed form
    # ||S||_inf >= |z + p| / |z - p| = 6/4 = 1.5 (maximum modulus principle: S(z) = 1, S(p) = 0;
    # Skogestad & Postlethwaite 2005, ch. 5, from memory); the peak on a python-control 0.10.2 frequency grid
    # must not be below it
    tf = ct.tf([-4, 20], [1, 9, -10])
    assert np.all(ct.poles(ct.feedback(tf, 1)).real < 0)
    m = loop_margins(*_ss(tf))
    from loopwright.engine.limits import performance_limits

    lim = performance_limits(*_ss(tf), closed_loop_stable=m.closed_loop_stable)
    assert_allclose(lim.rhp_zeros, [5.0], rtol=1e-9)
    assert_allclose(lim.peak_sensitivity_bound, 1.5, rtol=1e-9)
    w = np.logspace(-3, 3, 20001)
    grid_peak = np.max(np.abs(1.0 / (1.0 + tf(1j * w))))
    assert grid_peak >= 1.5 and m.peak_sensitivity >= 1.5
    assert lim.crossover_below_rad_s == pytest.approx(2.5) and lim.crossover_above_rad_s == pytest.approx(2.0)
    assert any("cannot be below 1.5" in ln for ln in lim.lines())


def test_margins_at_a_scalar_break_carry_the_limits():
    from diagrams import sample_path
    from loopwright.engine.project import load

    m = margins_at(load(str(sample_path("levitated_rotor_axis.lwd"))), "P.u")
    # Bode's integral with one unstable pole (Freudenberg & Looze 1985, from memory): the quadrature of
    # ln|S| must equal pi * Re p for the sample's open-loop unstable pole (+63 rad/s in its description)
    assert m.limits is not None and m.limits.rhp_poles.size == 1
    assert_allclose(m.limits.bode_integral, m.limits.bode_integral_theory, rtol=1e-6)
    assert m.as_dict()["limits"]["crossover_above_rad_s"] == pytest.approx(2 * m.limits.rhp_poles[0].real)


def _modal_servo(modes: int, zeta: float, *, gain: float = 1.0) -> Diagram:
    """A lightly damped modal plant (demo data: a gantry arm, ``modes`` bending modes, one
    actuator, one sensor) under a lead-lag compensator; loop broken at ``u`` or ``ym``."""
    k = np.arange(1, modes + 1)
    wn, phi = 2.0 * k**2, np.sin(0.37 * np.pi * k) * np.sqrt(2.0)
    A = np.zeros((2 * modes, 2 * modes))
    B = np.zeros((2 * modes, 1))
    C = np.zeros((1, 2 * modes))
    for i in range(modes):
        A[2 * i, 2 * i + 1] = 1.0
        A[2 * i + 1, 2 * i] = -wn[i] ** 2
        A[2 * i + 1, 2 * i + 1] = -2.0 * zeta * wn[i]
        B[2 * i + 1, 0] = phi[i]
        C[0, 2 * i] = np.sin(0.41 * np.pi * k[i]) * np.sqrt(2.0)
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0}})
    d.add_block("sum", "e", {"signs": ["+", "-"], "width": 1})
    d.add_block("dynamic", "lead", {"num": [gain * 2.0, gain * 4.0], "den": [1.0, 20.0]})
    d.add_block("plant", "arm", {"A": A.tolist(), "B": B.tolist(), "C": C.tolist(), "D": [[0.0]]})
    d.add_block("dynamic", "sensor", {"num": [50.0], "den": [1.0, 50.0]})
    d.connect("r.out", "e.in1")
    d.connect("e.out", "lead.u", name="err")
    d.connect("lead.y", "arm.u", name="u")
    d.connect("arm.y", "sensor.u", name="y")
    d.connect("sensor.y", "e.in2", name="ym")
    return d


@pytest.mark.parametrize("signal", ["u", "ym", "err"])
def test_block_by_block_margins_agree_with_the_whole_model_and_python_control(signal):
    # The block-by-block route (coupling-form poles, block-by-block L(jw)) against the
    # whole-model route (minimal realization, Schur form, Hamiltonian peaks) and against
    # python-control 0.10.2 stability_margins on the loop transfer (well conditioned here:
    # six modes with zeta = 0.05).
    d = _modal_servo(6, 0.05)
    fast = margins_at(d, signal, route="block by block", limits=False)
    dense = margins_at(d, signal, route="whole model", limits=False)
    assert fast.closed_loop_stable and dense.closed_loop_stable
    for key in ("phase_margin_deg", "phase_margin_w_rad_s", "delay_margin_s", "gain_upper", "gain_upper_w_rad_s",
                "peak_sensitivity", "peak_sensitivity_w_rad_s"):
        a, b = getattr(fast, key), getattr(dense, key)
        # where a smooth peak lies is fixed only to about the square root of the value's accuracy
        rtol = 1e-6 if key == "peak_sensitivity_w_rad_s" else 1e-8
        assert (a == b) if not np.isfinite(b) else np.isclose(a, b, rtol=rtol, atol=1e-12), (key, a, b)
    assert_allclose(fast.disk.alpha, dense.disk.alpha, rtol=1e-8)
    assert_allclose(fast.gain_crossovers_w_rad_s, dense.gain_crossovers_w_rad_s, rtol=1e-8)
    assert_allclose(fast.phase_crossovers_w_rad_s, dense.phase_crossovers_w_rad_s, rtol=1e-8)
    assert fast.open_loop_unstable_poles == dense.open_loop_unstable_poles
    # python-control evaluates the loop transfer's state space at the reported frequencies
    # (its stability_margins works on polynomials, which overflow on these modes)
    L = ct.ss(*loop_transfer(d, signal))
    at_wc = complex(L(1j * fast.phase_margin_w_rad_s))
    assert_allclose(abs(at_wc), 1.0, rtol=1e-9)
    assert_allclose(np.degrees(np.angle(at_wc)) + 180.0, fast.phase_margin_deg, rtol=1e-9)
    if np.isfinite(fast.gain_upper):
        at_pc = complex(L(1j * fast.gain_upper_w_rad_s))
        assert abs(at_pc.imag) <= 1e-9 * abs(at_pc) and at_pc.real < 0
        assert_allclose(-1.0 / at_pc.real, fast.gain_upper, rtol=1e-9)


def test_block_by_block_margins_leave_an_unstable_closed_loop_to_the_whole_model():
    # a gain high enough to destabilise the loop: the block-by-block route does not classify
    # gain intervals; it hands over and the answer is the whole-model one
    d = _modal_servo(6, 0.05, gain=400.0)
    fast = margins_at(d, "u", route="block by block", limits=False)
    dense = margins_at(d, "u", route="whole model", limits=False)
    assert not dense.closed_loop_stable and not fast.closed_loop_stable
    assert fast.message == dense.message
