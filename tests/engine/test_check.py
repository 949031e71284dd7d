"""The check report: poles, stability verdict and the separation check."""
from __future__ import annotations

from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest
import scipy.signal as sig
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from loopwright.engine.check import poles_match, summarize
from loopwright.engine.diagram import Diagram
from loopwright.engine.eigen import classify_poles, eigen_sensitivity, format_pole, matrix_scale
from loopwright.engine.project import load
from diagrams import stage_loop_ref03 as stage_loop
from diagrams import SAMPLES, sample_path

DATA = Path(__file__).parent / "data"


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



# ---- honest poles: origin poles, ill-conditioned loops, recipes never designed -----------


def _poly_at(coeffs, x) -> Fraction:
    """Exact value of the monic polynomial s^n + c1 s^(n-1) + ... + cn at a float x (Horner in rationals)."""
    v, X = Fraction(1), Fraction(x)
    for c in coeffs:
        v = v * X + Fraction(c)
    return v


def test_ill_conditioned_integrator_chain_reports_its_poles_from_the_separation_coordinates():
    # Closed form: for the chain of 10 integrators (shift matrix A, B = e10, C = e1^T),
    # det(sI - A + B K) = s^10 + k10 s^9 + ... + k1 (controllable companion form) and
    # det(sI - A + L C) = s^10 + l1 s^9 + ... + l10 (observer companion form). Evaluated exactly in rationals,
    # each polynomial changes sign across every reported pole +- its rounding bound, so a real root lies there.
    d = load(str(DATA / "integrator_chain_10_placed_gains.lwd"))
    rep = summarize(d)
    K = -np.asarray(d.block_by_name("K").params["K"], float).ravel()
    L = np.asarray(d.block_by_name("est").params["L"], float).ravel()
    char_k, char_l = list(K[::-1]), list(L)
    assert rep.pole_source == "separation" and rep.separation.decoupled and rep.separation.matches
    assert rep.stable and rep.poles_trusted
    assert np.all(rep.poles.imag == 0)  # real poles, not complex pairs
    bracketed = 0
    for p, b in zip(rep.poles.real, rep.pole_bounds):
        lo, hi = p - 10 * b - 1e-12 * abs(p), p + 10 * b + 1e-12 * abs(p)
        for c in (char_k, char_l):
            if _poly_at(c, lo) * _poly_at(c, hi) <= 0:
                bracketed += 1
                break
    assert bracketed == 20
    # the full closed-loop matrix is too ill-conditioned to confirm this from its own poles, and says so;
    # this is a different message from a wiring fault
    assert rep.worst_condition > 1e10
    assert any("too ill-conditioned to confirm it from its own poles" in w for w in rep.warnings)
    assert not any("does not see the plant's own input" in w for w in rep.warnings)


def test_condition_numbers_match_the_closed_form_of_a_triangular_matrix():
    # closed form (Wilkinson 1965): A = [[1, t], [0, 2]] has left/right eigenvectors (1, -t)/sqrt(1 + t^2)
    # and (1, 0) for lambda = 1, so kappa = sqrt(1 + t^2); the same for lambda = 2
    t = 1e4
    s = eigen_sensitivity([[1.0, t], [0.0, 2.0]])
    assert_allclose(s.condition, [np.sqrt(1 + t * t)] * 2, rtol=1e-8)


def test_untrustworthy_digits_are_not_printed():
    # common practice, no source: print only the digits an error bound leaves intact
    assert format_pole(-4.355710 + 0.20986j, 8.2) == "-4 (+-8.2, not trustworthy)"
    assert format_pole(-5.99310770 + 0j, 8.6e-6).startswith("-5.9931 ")
    assert format_pole(-80 + 60j, 1e-13) == "-80 + 60j"


@pytest.mark.parametrize(
    "poles, scale, expected",
    [
        pytest.param([0.0, -1.8e-17], 1.0, (0, 2, 0, 0), id="double integrator as eig returns it (closed form: 0, 0)"),
        pytest.param([1e-8, -1e-8, -3.0], 3.0, (0, 2, 0, 1), id="a split double pole at 0: radius ~ sqrt(eps) (closed form)"),
        pytest.param([1e-6, -2.0], 2.0, (1, 0, 0, 1), id="a slow unstable pole stays in the right half-plane"),
        pytest.param([-1e-15 + 5j, -1e-15 - 5j, 0.5], 5.0, (1, 0, 2, 0), id="undamped pair on the axis (closed form +-5j)"),
    ],
)
def test_poles_are_classified_with_a_scaled_tolerance(poles, scale, expected):
    c = classify_poles(np.asarray(poles, complex), scale=scale)
    assert (c.open_rhp, c.origin, c.imaginary_axis, c.open_lhp) == expected


def test_check_counts_a_double_integrator_at_the_origin_not_in_the_right_half_plane():
    # an open plant 1/s^2 driven by a source: both poles at s = 0 (closed form)
    d = Diagram()
    d.add_block("source", "f", {"role": "disturbance", "width": 1})
    d.add_block("plant", "P", {"A": [[0, 1], [0, 0]], "B": [[0], [1]], "C": [[1, 0]], "D": [[0]]})
    d.connect("f.out", "P.u")
    rep = summarize(d)
    assert rep.rhp_poles == 0 and rep.pole_classes.origin == 2 and not rep.stable
    assert any("2 at the origin, 0 in the right half-plane" in w for w in rep.warnings)
    assert matrix_scale([[0, 1], [0, 0]]) > 0


def test_a_recipe_never_designed_is_not_called_stale():
    from diagrams import stage_servo

    d = stage_servo(k_recipe={"method": "place", "poles": [-2, -3]})
    rep = summarize(d)
    assert rep.recipe_states["Kx"] == "not designed yet"
    assert any("'Kx' is not designed yet" in w for w in rep.warnings)
    assert not any("'Kx' is stale" in w for w in rep.warnings)


def test_a_real_coupling_is_blamed_on_the_wiring_even_in_an_ill_conditioned_loop():
    # the chain of 10 integrators with the estimator's input scaled by 1 + 1e-11 (and 1.0001): the error
    # coordinates are no longer block triangular, and the assembled poles move from eig(A - B K), eig(A - L C)
    # by more than the first-order rounding bound kappa eps ||A|| allows (Wilkinson 1965): the estimator
    # really does not see the plant's input, and the check says so rather than "too ill-conditioned"
    from loopwright.engine.diagram import PortRef

    d = load(str(DATA / "integrator_chain_10_placed_gains.lwd"))
    est = d.block_by_name("est")
    w = d.wire_into(PortRef(est.id, "u"))
    d.disconnect(w.id, PortRef(est.id, "u"))
    d.add_block("gain", "Ke", {"K": [[1.0 + 1e-11]]})
    d.connect(f"{d.blocks[w.source.block].name}.{w.source.port}", "Ke.in")
    d.connect("Ke.out", "est.u")
    for k in (1.0 + 1e-11, 1.0001):
        d.set_params(d.block_by_name("Ke").id, {"K": [[k]]})
        rep = summarize(d)
        assert not rep.separation.decoupled and rep.separation.verdict == "not_separated"
        assert any("does not see the plant's own input" in x for x in rep.warnings)
        assert not any("too ill-conditioned to confirm" in x for x in rep.warnings)


def test_pole_sets_within_rounding_are_told_apart_from_real_gaps():
    # closed form: {-1, -2} against {-1.3, -1.7} with rounding bounds 0.05 each (allowed gap 10 x 0.1 = 1) can
    # be paired within rounding; with bounds 1e-3 they cannot (gap 0.3 > 0.02)
    from loopwright.engine.check import _within_bounds

    a, b = np.array([-1.0, -2.0], complex), np.array([-1.3, -1.7], complex)
    assert _within_bounds(a, np.full(2, 0.05), b, np.full(2, 0.05))
    assert not _within_bounds(a, np.full(2, 1e-3), b, np.full(2, 1e-3))


def test_a_pole_at_the_origin_is_not_called_ill_conditioned():
    # What a user's loop holds half-built: plant 1/(s+1), an estimator with its own copy of
    # that model and L = 1, K = 1. Closed form: A = [[-1, 1], [1, -1]] (trace -2, det 0), poles
    # 0 and -2, both with eigenvalue condition number 1 (A is symmetric): the pole at the
    # origin is named as such, never as ill-conditioned.
    d = Diagram()
    d.add_block("plant", "P", {"num": [1.0], "den": [1.0, 1.0]})
    d.add_block("estimator", "est", {"A": [[-1.0]], "B": [[1.0]], "C": [[1.0]], "D": [[0.0]], "L": [[1.0]]})
    d.add_block("gain", "K", {"K": [[1.0]]})
    d.connect("K.out", "P.u")
    d.connect("K.out", "est.u")
    d.connect("P.y", "est.y")
    d.connect("est.xhat", "K.in")
    rep = summarize(d)
    assert_allclose(np.sort(rep.poles.real), [-2.0, 0.0], atol=1e-12)
    assert rep.worst_condition == pytest.approx(1.0)
    assert rep.poles_trusted
    assert not any("ill-conditioned" in w for w in rep.warnings)
    assert any("1 at the origin" in w for w in rep.warnings)


def test_the_state_feedback_gain_is_named_only_when_every_path_to_the_plant_input_is_static():
    # common practice, no source: u = -K xhat is a static feedback only when nothing dynamic
    # lies between the estimate and the plant input; a filter beside K (from the estimate, or
    # from the plant input's own sum) makes the map dynamic, and no K is named then
    A, B, C = [[0.0, 1.0], [0.0, 0.0]], [[0.0], [1.0]], [[1.0, 0.0]]
    K, L = [[8.0, 4.0]], [[11.0], [30.0]]
    plain = summarize(observer_loop(A, B, C, K, L)).separation
    assert_allclose(plain.gains["E"], K, atol=1e-12)
    for wiring in (("xhat0", "F.u"), ("u.out", "F.u")):
        d = observer_loop(A, B, C, K, L)
        d.add_block("dynamic", "F", {"A": [[-3.0]], "B": [[1.0]], "C": [[0.01]], "D": [[0.0]]})
        d.block_by_name("u").params["signs"] = ["+", "+", "+"]
        if wiring[0] == "xhat0":
            d.add_block("gain", "S", {"K": [[1.0, 0.0]]})  # picks the first estimate
            d.connect("E.xhat", "S.in")
            d.connect("S.out", "F.u")
        else:
            d.connect("u.out", "F.u")
        d.connect("F.y", "u.in3")
        sep = summarize(d).separation
        assert sep is not None and "E" not in sep.gains, wiring


def test_the_estimator_poles_follow_the_estimator_gain_and_are_reused_for_the_same_numbers():
    # the check keeps the poles of the error dynamics A - L C it has seen (an edit of the
    # feedback gain leaves them as they were); a changed L must give the new ones.
    # eig(A - L C) is the estimator's pole set by definition (common practice, no source)
    import loopwright.engine.check as check

    A = np.array([[0.0, 1.0], [-3.0, -0.4]])
    B = np.array([[0.0], [1.0]])
    C = np.array([[1.0, 0.0]])
    K = np.array([[2.0, 1.5]])
    poles = {}
    for L in ([[9.0], [17.0]], [[12.0], [30.0]], [[9.0], [17.0]]):
        sep = summarize(observer_loop(A, B, C, K, L)).separation
        expected = np.linalg.eigvals(A - np.asarray(L) @ C)
        assert_allclose(np.sort_complex(sep.estimator_poles), np.sort_complex(expected), rtol=1e-12)
        poles.setdefault(str(L), []).append(sep.estimator_poles)
    first, again = poles[str([[9.0], [17.0]])]
    assert np.array_equal(first, again)
    key = ((2, 2), np.ascontiguousarray(A - np.array([[9.0], [17.0]]) @ C).tobytes())
    assert key in check._ESTIMATOR_POLES  # kept, and read-only for whoever shares it
    assert not check._ESTIMATOR_POLES[key].values.flags.writeable


def test_pole_digits_for_all_poles_at_once_agree_with_the_rule_for_one_pole():
    # check.pole_digits is eigen.trustworthy_digits applied to every pole in one pass (a pole
    # at the origin measured against the matrix's scale): the same digits, edge cases included
    from loopwright.engine.check import pole_digits
    from loopwright.engine.eigen import pole_regions, trustworthy_digits

    rng = np.random.default_rng(7)
    for _ in range(400):
        n = int(rng.integers(1, 10))
        p = (rng.normal(size=n) + 1j * rng.normal(size=n) * rng.integers(0, 2, n)) * 10.0 ** rng.integers(-18, 4, n)
        p[rng.random(n) < 0.15] = 0.0
        b = np.abs(rng.normal(size=n)) * 10.0 ** rng.integers(-17, 2, n)
        b[rng.random(n) < 0.1] = np.inf
        b[rng.random(n) < 0.1] = 0.0
        b[rng.random(n) < 0.05] = np.nan
        scale = float(rng.choice([0.0, 1.0, 1e3, 1e-6]))
        regions = pole_regions(p, scale=scale, bounds=b)
        one_by_one = [trustworthy_digits(scale if r == "origin" and scale > 0 else q, bb) for q, bb, r in zip(p, b, regions)]
        assert pole_digits(p, b, scale=scale) == one_by_one
