"""What the plot panels show (tests of engine/views_data.py), checked against python-control
and closed forms."""
from __future__ import annotations

from pathlib import Path

import control as ct
import numpy as np
import pytest
import scipy.linalg as sla
from numpy.testing import assert_allclose

from loopwright.engine.errors import AnalysisError, ParameterError, UnknownNameError
from loopwright.engine.interconnect import assemble
from loopwright.engine.noise import noise_budget
from loopwright.engine.project import load
from loopwright.engine.views_data import (
    damping_guides,
    disk_exclusion_circle,
    estimation_error_names,
    frequency_views,
    loop_break_view,
    noise_bars,
    pair_frequency_response,
    pair_time_response,
    singular_values,
    time_grid,
    time_views,
)

SAMPLES = Path(__file__).resolve().parents[2] / "samples"
CONVEYOR = SAMPLES / "conveyor_flexible_drive.lwd"
OVEN = SAMPLES / "two_zone_oven.lwd"
ROTOR = SAMPLES / "levitated_rotor_axis.lwd"


def _ct_pair(model, src, sig):
    return ct.ss(*model.pair(model.resolve_input(src), model.resolve_signal(sig)))


@pytest.mark.parametrize("path,src,sig", [(CONVEYOR, "r", "y"), (CONVEYOR, "inject:u", "y"), (ROTOR, "dl", "y"), (OVEN, "dl", "y")],
                         ids=["conveyor r->y", "conveyor inject u->y", "rotor dl->y", "oven dl->y (vector)"])
def test_pair_frequency_response_matches_python_control(path, src, sig):
    model = assemble(load(path))
    resp = pair_frequency_response(model, src, sig)
    ref = np.asarray(_ct_pair(model, src, sig)(1j * resp.w_rad_s, squeeze=False))  # python-control: (p, m, k)
    assert_allclose(resp.response, np.moveaxis(ref, -1, 0), rtol=1e-8, atol=1e-12)
    assert resp.mag_db.shape == resp.response.shape
    # the marked peak is the largest magnitude on a dense python-control sweep (within 0.05 dB)
    w_pk, db_pk = resp.peak()
    dense = np.logspace(np.log10(resp.w_rad_s[0]), np.log10(resp.w_rad_s[-1]), 20000)
    ref_db = 20 * np.log10(np.abs(np.asarray(_ct_pair(model, src, sig)(1j * dense, squeeze=False)))[0, 0])
    assert db_pk >= ref_db.max() - 0.05
    assert w_pk == pytest.approx(dense[np.argmax(ref_db)], rel=0.02)


def test_frequency_views_reports_a_bad_pair_by_message_and_keeps_the_others():
    out = frequency_views(load(CONVEYOR), [("r", "y"), ("r", "nosuch")])
    assert out[0].signal == "y"
    assert isinstance(out[1], str) and "nosuch" in out[1]


def test_frequency_grid_options_are_checked():
    model = assemble(load(CONVEYOR))
    with pytest.raises(ParameterError):
        pair_frequency_response(model, "r", "y", w_min=10.0, w_max=1.0)
    with pytest.raises(UnknownNameError):
        pair_frequency_response(model, "nosuch", "y")
    resp = pair_frequency_response(model, "r", "y", w_min=0.1, w_max=100.0, points=50)
    assert resp.w_rad_s.size == 50 and resp.w_rad_s[0] == pytest.approx(0.1)


def test_singular_values_match_python_control():
    model = assemble(load(OVEN))
    resp = pair_frequency_response(model, "r", "y")
    sv = singular_values(resp.response)
    ref = ct.singular_values_response(_ct_pair(model, "r", "y"), resp.w_rad_s)  # python-control
    assert_allclose(sv, np.asarray(ref.magnitude)[:, 0, :].T, rtol=1e-8)


def test_step_run_matches_python_control_step_response():
    d = load(CONVEYOR)
    model = assemble(d)
    t = time_grid(d, model)
    run = pair_time_response(model, "step", "r", "y", t)
    ref = ct.step_response(_ct_pair(model, "r", "y"), T=t)  # python-control
    assert_allclose(run.y[:, 0], np.asarray(ref.outputs).ravel(), rtol=1e-6, atol=1e-9)
    assert run.names == ["y"]


@pytest.mark.parametrize("kind", ["step", "impulse"])
def test_the_runs_of_several_pairs_come_from_one_discretisation_and_match_python_control(kind, monkeypatch):
    # the time view's pairs share one simulation (one matrix exponential, one pass over the
    # grid); each pair's run is still python-control's (0.10.2 step_response /
    # impulse_response) for that pair alone
    import loopwright.engine.responses as responses

    d = load(CONVEYOR)
    # r -> u passes straight through (D != 0): its impulse has a Dirac part no grid shows
    pairs = [("r", "y"), ("dl", "y"), ("r", "u")] if kind == "step" else [("r", "y"), ("dl", "y")]
    calls = []
    real = responses.discretise
    monkeypatch.setattr(responses, "discretise", lambda *a, **k: (calls.append(1), real(*a, **k))[1])
    runs = time_views(d, pairs, kind)
    assert len(calls) == 1
    model = assemble(d)
    t = time_grid(d, model)
    for (src, sig), run in zip(pairs, runs):
        sys_p = _ct_pair(model, src, sig)
        ref = ct.step_response(sys_p, T=t) if kind == "step" else ct.impulse_response(sys_p, T=t)
        assert_allclose(run.t, t)
        assert_allclose(run.y[:, 0], np.asarray(ref.outputs).ravel(), rtol=1e-6, atol=1e-9 * max(1.0, np.abs(run.y).max()))
        assert run.names == [sig]
        alone = pair_time_response(model, kind, src, sig, t)  # the same pair run on its own
        assert set(run.metrics) == set(alone.metrics)
        for name, m in run.metrics.items():
            assert m.rise_time_s == pytest.approx(alone.metrics[name].rise_time_s, rel=1e-9)
            assert m.overshoot_pct == pytest.approx(alone.metrics[name].overshoot_pct, rel=1e-9, abs=1e-9)
    if kind == "step":
        assert any(run.metrics for run in runs)


def test_estimation_error_decays_with_the_estimator_dynamics_alone():
    # Closed form (separation principle): e = x - xhat obeys e' = (A - L C) e whatever K is,
    # so from x(0) = e0, xhat(0) = 0 the error is expm((A - L C) t) e0.
    d = load(CONVEYOR)
    model = assemble(d)
    plant, est = d.block_by_name("P"), d.block_by_name("est")
    A = np.asarray(plant.params["A"], float)
    C = np.asarray(plant.params["C"], float)
    L = np.asarray(est.params["L"], float)
    n = A.shape[0]
    e0 = np.linspace(1.0, 0.2, n)
    runs = time_views(d, [("r", "error:est")], "initial", initial={"P": list(e0)}, t_end=0.5, dt=0.01)
    run = runs[0]
    assert run.names == [f"error:est[{i + 1}]" for i in range(n)] == list(estimation_error_names(model))
    for k in (0, 10, 50):
        assert_allclose(run.y[k], sla.expm((A - L @ C) * run.t[k]) @ e0, rtol=1e-6, atol=1e-9)


def test_time_views_say_why_a_run_is_refused():
    d = load(CONVEYOR)
    with pytest.raises(ParameterError):
        pair_time_response(assemble(d), "sideways", "r", "y", np.linspace(0, 1, 11))
    assert "no estimator" in time_views(d, [("r", "error:nosuch")], "sources")[0]


def test_damping_guides_lie_on_their_damping_ratio_and_natural_frequency():
    g = damping_guides(10.0)
    for zeta, x, y in g["rays"]:
        s = complex(x[1], y[1])  # closed form: -Re(s)/|s| = zeta on the ray
        assert -s.real / abs(s) == pytest.approx(zeta)
        assert abs(s) == pytest.approx(10.0)
    for wn, x, y in g["circles"]:
        assert_allclose(np.hypot(x, y), wn)
        assert np.all(x <= 1e-12)
    assert [wn for wn, _, _ in g["circles"]] == [5.0, 10.0]  # round steps of 1, 2 or 5 times a power of ten, at most four


def test_disk_exclusion_circle_closed_form():
    # balanced disk of size alpha: gains (1 -+ a/2)/(1 +- a/2) map to -1/g on the real axis
    c, r = disk_exclusion_circle(0.5, 2.0)
    assert (c, r) == pytest.approx((-1.25, 0.75))
    c, r = disk_exclusion_circle(0.5, np.inf)  # skew 1, alpha 1: the disk from -2 to 0
    assert (c, r) == pytest.approx((-1.0, 1.0))


@pytest.mark.parametrize("path", [CONVEYOR, ROTOR], ids=["conveyor", "rotor"])
def test_loop_break_curve_touches_the_disk_margin_circle_and_agrees_with_python_control(path):
    d = load(path)
    view = loop_break_view(d, "P.u")
    m = view.margins
    L = view.curves[0]
    c, r = view.circles[0]
    dist = np.abs(L - c) - r
    # L(jw) never enters the disk and touches it at the disk margin's critical frequency
    assert dist.min() > -1e-6 * max(1.0, r)
    k = int(np.argmin(np.abs(view.w_rad_s - m.disk.w_rad_s)))
    assert abs(dist[k]) < 2e-3 * max(1.0, r)
    # python-control's disk margin on a dense grid agrees with the margin drawn
    from loopwright.engine.margins import loop_transfer

    sys = ct.ss(*loop_transfer(d, "P.u"))
    ref_L = np.asarray(sys(1j * view.w_rad_s)).ravel()
    near = np.abs(ref_L) < 1e4  # where the loop has a pole at 0 both evaluations are ill conditioned
    assert near.sum() > 100
    assert_allclose(L[near], ref_L[near], rtol=1e-6, atol=1e-10)
    dm, _, _ = ct.disk_margins(sys, view.w_rad_s, skew=0.0)
    assert m.disk.alpha == pytest.approx(float(dm), rel=1e-3)


def test_vector_break_gives_one_curve_per_channel_and_the_loci():
    view = loop_break_view(load(OVEN), "P.u")
    assert view.channel_names == ["P.u[1]", "P.u[2]"]
    assert len(view.curves) == 2 and view.loci.shape == (view.w_rad_s.size, 2)
    with pytest.raises(AnalysisError):
        loop_break_view(load(OVEN), "r")


def test_noise_bars_add_up_to_the_rms_in_proportion_to_the_variance():
    model = assemble(load(CONVEYOR))
    b = noise_budget(model)
    bars = noise_bars(b, ["y", "u"])
    assert [x.name for x in bars] == ["u", "y"] or [x.name for x in bars] == ["y", "u"]
    for bar in bars:
        assert sum(bar.parts.values()) == pytest.approx(bar.rms)
        tot = sum(bar.variance_by_source.values())
        for s, v in bar.variance_by_source.items():
            assert bar.parts[s] / bar.rms == pytest.approx(v / tot)
    assert len(noise_bars(b)) == len(b.lines)


@pytest.mark.parametrize("path,src,sig", [(CONVEYOR, "dl", "y"), (ROTOR, "n", "u")], ids=["conveyor dl->y", "rotor n->u"])
def test_drawing_grid_is_exact_at_its_points_and_finds_the_same_peak(path, src, sig):
    # the app's drawing grid: every point is the response python-control gives there
    # (python-control 0.10 state-space evaluation), and its refined peak equals the
    # command line's (denser grid) to plotting accuracy
    model = assemble(load(path))
    draw = pair_frequency_response(model, src, sig, drawing=True)
    dense = pair_frequency_response(model, src, sig)
    assert np.all(np.diff(draw.w_rad_s) > 0)
    g = np.asarray(_ct_pair(model, src, sig)(1j * draw.w_rad_s, squeeze=False))[0, 0]
    assert_allclose(draw.response[:, 0, 0], g, rtol=1e-8)
    (w_d, db_d), (w_c, db_c) = draw.peak(), dense.peak()
    assert db_d == pytest.approx(db_c, abs=1e-3)
    assert w_d == pytest.approx(w_c, rel=1e-3)



@pytest.mark.parametrize("path,src,sig,evaluations", [(CONVEYOR, "dl", "y", 2), (ROTOR, "n", "u", 2), (OVEN, "dl", "y", 1)],
                         ids=["conveyor dl->y", "rotor n->u", "oven dl->y (vector, no peak inside the span)"])
def test_a_drawn_response_is_two_evaluations_and_its_peak_is_the_printed_one(path, src, sig, evaluations, monkeypatch):
    # the app's frequency view: one evaluation on the drawing grid, one for every highest
    # peak's refinement together (each evaluation's overhead, not its points, is the cost);
    # the marked peak stays within 1e-4 dB of the command line's four passes, and python-
    # control 0.10.2 gives the same value at the marked frequency (its state-space evaluation)
    import loopwright.engine.responses as responses
    from loopwright.engine.responses import reduce_model

    model = assemble(load(path))
    printed = pair_frequency_response(model, src, sig)
    calls = []
    real = responses.reduced_response
    monkeypatch.setattr(responses, "reduced_response", lambda *a, **k: calls.append(np.size(a[4])) or real(*a, **k))
    drawn = pair_frequency_response(model, src, sig, drawing=True, reduced=reduce_model(model.A))
    assert len(calls) == evaluations
    (w_d, db_d), (w_c, db_c) = drawn.peak(), printed.peak()
    assert db_d == pytest.approx(db_c, abs=1e-4)
    assert w_d == pytest.approx(w_c, rel=1e-3)
    k = int(np.argmax(np.where(np.isfinite(drawn.mag_db[:, 0, 0]), drawn.mag_db[:, 0, 0], -np.inf)))
    g = np.asarray(_ct_pair(model, src, sig)(1j * drawn.w_rad_s[k : k + 1], squeeze=False))[0, 0, 0]
    assert drawn.mag_db[k, 0, 0] == pytest.approx(20 * np.log10(abs(g)), abs=1e-5)  # a drawn curve is asked for 1e-6 relative

def test_drawing_grid_of_a_repeated_loop_grows_with_the_distinct_resonances_not_the_states():
    # forty nearly equal copies of two lightly damped pole pairs (a loop repeated along a
    # chain): their resonance points coincide to far below a pixel, and the grid keeps one
    # point per thousandth of a decade. Closed form: a pole pair -zeta wn +- j wn sqrt(1 - zeta^2)
    from loopwright.engine.views_data import drawing_frequency_grid

    def pair(wn, zeta):
        return [complex(-zeta * wn, s * wn * np.sqrt(1 - zeta**2)) for s in (1, -1)]

    base = pair(3.0, 0.05) + pair(40.0, 0.1)
    one = drawing_frequency_grid(np.array(base))
    many = drawing_frequency_grid(np.array([z * (1 + 1e-7 * k) for k in range(40) for z in base]))
    lw = np.log10(many)
    assert np.all(np.diff(lw) > 0)
    inner = lw[1:-1]
    assert np.all(inner[2:] - inner[:-2] >= 1e-3 * (1 - 1e-9))  # at most one point per 1/1000 decade, the ends aside
    assert many.size <= one.size + 2
    assert many[0] == pytest.approx(one[0], rel=1e-5) and many[-1] == pytest.approx(one[-1], rel=1e-5)  # the poles differ by 4e-6 at most
    for z in base[::2]:
        # the resonance keeps its points: one within a thousandth of a decade of the damped frequency
        assert np.min(np.abs(lw - np.log10(z.imag))) < 1e-3


def test_a_shared_model_assembles_once_and_gives_the_same_answers(monkeypatch):
    # the views of one revision share one SharedModel: one assembly for all of them, the
    # frequency view's responses reused by the singular-value view, and every answer the
    # same as each view computing on its own. Reference for the poles: numpy's eigvals
    # (LAPACK geev); for the step's DC gain: python-control's dcgain.
    import loopwright.engine.interconnect as interconnect
    from loopwright.engine.views_data import SharedModel, singular_value_views

    d = load(str(SAMPLES / "conveyor_flexible_drive.lwd"))
    pairs = [("r", "y")]
    alone_f = frequency_views(d, pairs, drawing=True)
    alone_t = time_views(d, pairs, "step")
    calls = []
    real = interconnect.assemble
    monkeypatch.setattr(interconnect, "assemble", lambda *a, **k: calls.append(1) or real(*a, **k))
    shared = SharedModel(d)
    f = frequency_views(d, pairs, drawing=True, shared=shared)
    sv = singular_value_views(d, pairs, drawing=True, shared=shared)
    t = time_views(d, pairs, "step", shared=shared)
    assert len(calls) == 1
    assert frequency_views(d, pairs, drawing=True, shared=shared)[0] is f[0]  # computed once
    assert_allclose(f[0].response, alone_f[0].response, rtol=1e-12)
    assert_allclose(sv[0][0], f[0].w_rad_s)
    assert_allclose(sv[0][1][:, 0], f[0].mag_db[:, 0, 0], rtol=1e-12)
    assert_allclose(t[0].y, alone_t[0].y, rtol=1e-9, atol=1e-14)
    model = real(d)
    ev = np.linalg.eigvals(model.A)
    gap = np.abs(shared.poles[:, None] - ev[None, :]).min(axis=1)  # each pole next to one of numpy's
    assert shared.poles.size == ev.size and np.all(gap <= 1e-9 * np.abs(ev).max())
    assert shared.stable == bool(ev.real.max() < 0)
    A, B, C, D = model.pair(model.resolve_input("r"), model.resolve_signal("y"))
    ref_dc = float(np.real(ct.dcgain(ct.ss(A, B, C, D))))
    for metric in t[0].metrics.values():
        assert_allclose(metric.steady_state, ref_dc, rtol=1e-9)
