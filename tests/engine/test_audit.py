"""Tests of engine/audit.py: the ranked path audit."""
from __future__ import annotations

import importlib.resources as ir
import control as ct

import numpy as np
import pytest
from numpy.testing import assert_allclose

from diagrams import rotor_lead_loop
from loopwright.engine.audit import RANKING_RULE, path_audit, path_between
from loopwright.engine.diagram import Diagram
from loopwright.engine.interconnect import assemble
from loopwright.engine.norms import dc_gain, h2_norm, peak_gain
from loopwright.engine.project import load
from reference_norms import h2_by_parseval

SAMPLES = ["conveyor_flexible_drive.lwd", "levitated_rotor_axis.lwd", "two_zone_oven.lwd"]


def _sample(name):
    return assemble(load(str(ir.files("loopwright.samples") / name)))


@pytest.mark.parametrize("name", SAMPLES)
def test_audit_rows_agree_with_single_path_norms(name):
    # each row against the certified single-path routines (Hamiltonian peak gain, Lyapunov H2)
    model = _sample(name)
    rows = path_audit(model, injections=True)
    assert rows
    for r in rows:
        A, B, C, D = model.pair(r.source, r.signal)
        pk = peak_gain(A, B, C, D)
        assert r.stable == pk.stable
        if not r.stable:
            continue
        assert_allclose(r.peak_gain, pk.value, rtol=1e-7, atol=1e-12, err_msg=f"{r.source}->{r.signal}")
        h2 = h2_norm(A, B, C, D).value
        if np.isfinite(h2):
            assert_allclose(r.h2, h2, rtol=1e-7, atol=1e-12)
        else:
            assert r.h2 == np.inf
        dc = dc_gain(A, B, C, D)
        expected = dc[0, 0] if dc.size == 1 else np.linalg.norm(dc, 2)  # scalar paths keep their sign
        assert_allclose(r.dc_gain, expected, rtol=1e-7, atol=1e-9 * max(1.0, r.peak_gain))


def test_audit_h2_matches_the_frequency_domain_definition_on_a_sample():
    # closed form: Parseval's integral (tests/reference_norms.py). python-control's norm(sys, 2)
    # was fragile here: on OpenBLAS's Haswell kernels it returns inf with a warning.
    model = _sample("two_zone_oven.lwd")
    checked = 0
    for r in path_audit(model)[:8]:
        if not np.isfinite(r.h2):
            continue
        A, B, C, D = model.pair(r.source, r.signal)
        assert not np.any(D)
        assert_allclose(r.h2, h2_by_parseval(A, B, C), rtol=1e-8, err_msg=f"{r.source}->{r.signal}")
        checked += 1
    assert checked >= 4


def test_ranking_puts_unstable_paths_first_then_peak_gain_descending():
    model = _sample("conveyor_flexible_drive.lwd")
    rows = path_audit(model, injections=True)
    assert [r.rank for r in rows] == list(range(1, len(rows) + 1))
    stable_flags = [r.stable for r in rows]
    assert stable_flags == sorted(stable_flags)  # False before True
    peaks = [r.peak_gain for r in rows if r.stable]
    assert all(a >= b for a, b in zip(peaks, peaks[1:]))
    assert "unstable" in RANKING_RULE


def _two_loops() -> Diagram:
    """A stable loop (r -> e -> K -> P) and, beside it, an unstable lag driven by its own source."""
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0}})
    d.add_block("sum", "e", {"signs": ["+", "-"], "width": 1})
    d.add_block("gain", "K", {"K": [[4.0]]})
    d.add_block("plant", "P", {"A": [[-1, 0, 0], [1, -1, 0], [0, 1, -1]], "B": [[1], [0], [0]], "C": [[0, 0, 1]], "D": [[0]]})
    d.connect("r.out", "e.in1", name="ref")
    d.connect("e.out", "K.in", name="err")
    d.connect("K.out", "P.u", name="u")
    d.connect("P.y", "e.in2", name="y")
    d.add_block("source", "gust", {"role": "disturbance", "width": 1, "waveform": {"kind": "zero"}})
    d.add_block("plant", "drift", {"A": [[0.3]], "B": [[1.0]], "C": [[1.0]], "D": [[0.0]]})
    d.connect("gust.out", "drift.u", name="g")
    return d


def test_unstable_paths_are_flagged_only_where_the_mode_reaches_and_shows():
    model = assemble(_two_loops())
    rows = {(r.source, r.signal): r for r in path_audit(model)}
    assert not rows[("gust", "drift.y")].stable
    assert rows[("gust", "drift.y")].peak_gain == np.inf
    assert rows[("r", "y")].stable  # the unstable drift is elsewhere
    assert_allclose(rows[("r", "y")].dc_gain, 0.8, rtol=1e-9)  # 4/(1+4), common practice, no source
    assert ("r", "drift.y") not in rows  # no path and zero gain: left out
    first = path_audit(model)[0]
    assert (first.source, first.signal) == ("gust", "drift.y")


def _modes(wn, zeta):
    """Companion-form 2x2 blocks ``[[0, 1], [-wn^2, -2 zeta wn]]``, force in, position out."""
    k = len(wn)
    A = np.zeros((2 * k, 2 * k))
    for i, (w, z) in enumerate(zip(wn, zeta)):
        A[2 * i, 2 * i + 1] = 1.0
        A[2 * i + 1, 2 * i] = -w * w
        A[2 * i + 1, 2 * i + 1] = -2.0 * z * w
    B = np.zeros((2 * k, 1))
    B[1::2, 0] = 1.0
    C = np.zeros((1, 2 * k))
    C[0, 0::2] = 1.0
    return A, B, C


def test_lightly_damped_stiff_modes_are_stable_and_a_truly_unstable_one_is_not():
    # A stiff structure: a fast well-damped actuator mode (wn = 1e6 rad/s, so |A| ~ 1e12)
    # beside structural modes with zeta = 1e-4 at 1e3..1e4 rad/s, whose poles
    # -zeta wn +- j wn sqrt(1 - zeta^2) (closed form) lie 0.1..1 left of the axis: far
    # beyond rounding relative to |p|, though within 1e-12 |A|. Beside it, an unstable
    # mode (zeta = -1e-4 at 2e3 rad/s: Re p = +0.2, closed form).
    d = Diagram()
    A, B, C = _modes([1e6, 1e3, 3e3, 1e4], [0.7, 1e-4, 1e-4, 1e-4])
    d.add_block("source", "shaker", {"role": "disturbance", "width": 1, "waveform": {"kind": "zero"}})
    d.add_block("plant", "frame", {"A": A.tolist(), "B": B.tolist(), "C": C.tolist(), "D": [[0.0]]})
    d.connect("shaker.out", "frame.u")
    Au, Bu, Cu = _modes([2e3], [-1e-4])
    d.add_block("source", "gust", {"role": "disturbance", "width": 1, "waveform": {"kind": "zero"}})
    d.add_block("plant", "flutter", {"A": Au.tolist(), "B": Bu.tolist(), "C": Cu.tolist(), "D": [[0.0]]})
    d.connect("gust.out", "flutter.u")
    model = assemble(d)
    poles = np.linalg.eigvals(model.A)
    assert np.sum(poles.real > 0) == 2 and np.sum(np.abs(poles.real + 0.1) < 1e-6) == 2  # the model is as described
    rows = {(r.source, r.signal): r for r in path_audit(model, route="whole model")}
    assert rows[("shaker", "frame.y")].stable
    assert np.isfinite(rows[("shaker", "frame.y")].peak_gain)
    # peak near the 1e3 rad/s mode: 1/(2 zeta wn^2) = 5e-3 (closed form, resonance of a lightly damped mode)
    assert_allclose(rows[("shaker", "frame.y")].peak_gain, 5e-3, rtol=2e-3)
    assert not rows[("gust", "flutter.y")].stable
    assert rows[("gust", "flutter.y")].peak_gain == np.inf


def test_path_lists_blocks_and_wires_between_source_and_signal():
    model = assemble(_two_loops())
    rows = {(r.source, r.signal): r for r in path_audit(model)}
    r = rows[("r", "u")]
    assert set(r.blocks) == {"r", "e", "K", "P"}  # P sits on the feedback path back to u
    assert set(r.wires) == {"ref", "err", "u", "y"}
    r2 = rows[("r", "err")]
    assert "drift" not in r2.blocks and "g" not in r2.wires
    d = model.diagram
    assert all(b in d.blocks for b in r.block_ids) and all(w in d.wires for w in r.wire_ids)


def test_injection_paths_start_at_the_consumers_of_the_signal():
    model = assemble(_two_loops())
    bids, wids = path_between(model, "inject:u", "y")
    names = {model.diagram.blocks[b].name for b in bids}
    assert "P" in names and "r" not in names
    assert "u" in {model.diagram.wires[w].name for w in wids}


def test_audit_of_a_large_chain_agrees_with_a_direct_evaluation():
    # 12 observer-style sections in series (demo data); checks the shared reduction on more states
    rng = np.random.default_rng(2)
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0}})
    prev = "r.out"
    for k in range(12):
        wn, z = rng.uniform(1, 50), rng.uniform(0.05, 0.7)
        d.add_block("plant", f"S{k}", {"num": [wn * wn], "den": [1.0, 2 * z * wn, wn * wn]})
        d.connect(prev, f"S{k}.u")
        prev = f"S{k}.y"
    model = assemble(d)
    rows = {(r.source, r.signal): r for r in path_audit(model)}
    A, B, C, D = model.pair("r", "S11.y")
    assert_allclose(rows[("r", "S11.y")].peak_gain, peak_gain(A, B, C, D).value, rtol=1e-7)


def test_feedthrough_peaks_are_at_infinity_and_rounding_zeros_are_zero():
    # common practice, no source: a path whose sup is its feedthrough |D| peaks as w -> inf;
    # a static path is flat (reported at w = 0); a zero at s = 0 gives an exact DC gain of 0
    d = Diagram()
    d.add_block("source", "r")
    d.add_block("gain", "N", {"K": [[5.0]]})
    d.add_block("dynamic", "F", {"num": [2.0, 0.0], "den": [1.0, 1.0]})  # 2 s/(s + 1): zero at 0, |D| = 2
    d.add_block("dynamic", "H", {"num": [3.0, 1.0], "den": [1.0, 1.0]})  # (3 s + 1)/(s + 1): peak 3 as w -> inf
    d.connect("r.out", "N.in")
    d.connect("r.out", "F.u")
    d.connect("r.out", "H.u")
    rows = {r.signal: r for r in path_audit(assemble(d))}
    assert rows["N.out"].peak_freq_rad_s == 0.0 and rows["N.out"].peak_gain == pytest.approx(5.0)
    assert rows["F.y"].dc_gain == 0.0 and rows["F.y"].peak_freq_rad_s == np.inf
    assert rows["H.y"].peak_gain == pytest.approx(3.0, rel=1e-9) and rows["H.y"].peak_freq_rad_s == np.inf


def test_scalar_dc_gains_keep_their_sign():
    # closed form: L(0) = C(0) P(0) = 8 * (-1/4) = -2, so S(0) = 1/(1 + L(0)) = -1 (r -> err) and
    # T(0) = L(0)/(1 + L(0)) = 2 (r -> y); the case of tests/REFERENCES.md#rotor-sensitivity-integral
    rows = {(r.source, r.signal): r for r in path_audit(assemble(rotor_lead_loop()))}
    assert_allclose(rows["r", "err"].dc_gain, -1.0, rtol=1e-9)
    assert_allclose(rows["r", "y"].dc_gain, 2.0, rtol=1e-9)
    assert rows["r", "err"].dc_gain_kind == "signed value"
    assert rows["r", "err"].as_dict()["dc_gain"] < 0


def test_vector_dc_gains_are_the_largest_singular_value_and_say_so():
    # python-control 0.10.2 dcgain of the same path, then its largest singular value
    model = _sample("two_zone_oven.lwd")
    rows = {(r.source, r.signal): r for r in path_audit(model)}
    r = rows["r", "y"]
    A, B, C, D = model.pair("r", "y")
    ref = np.linalg.norm(ct.ss(A, B, C, D).dcgain(), 2)
    assert r.dc_gain_kind == "largest singular value"
    assert_allclose(r.dc_gain, ref, rtol=1e-9)


def test_audit_reports_its_progress_and_stops_when_the_report_raises():
    # the progress callable sees 0 first and 1 last, never going back; the rows do not
    # depend on it; raising from it ends the audit with that exception
    from loopwright.engine.audit import AuditCancelled

    model = _sample("two_zone_oven.lwd")
    seen = []
    rows = path_audit(model, progress=seen.append)
    assert seen[0] == 0.0 and seen[-1] == 1.0
    assert all(b >= a for a, b in zip(seen, seen[1:]))
    assert [(r.source, r.signal, r.peak_gain) for r in rows] == [(r.source, r.signal, r.peak_gain) for r in path_audit(model)]
    calls = []

    def stop_at_third(fraction):
        calls.append(fraction)
        if len(calls) == 3:
            raise AuditCancelled("stopped by the caller")

    with pytest.raises(AuditCancelled, match="stopped by the caller"):
        path_audit(model, progress=stop_at_third)
    assert len(calls) == 3  # nothing ran on after the report that raised


def test_the_block_by_block_route_reports_its_progress_and_stops_when_the_report_raises():
    # the coupling route (poles by iteration, H2 by residues) reports as the whole-model
    # route does: 0 first, 1 last, never going back, the same rows as without reports;
    # raising from a report ends it there. The levitated rotor is a loop this route certifies.
    from loopwright.engine.audit import AuditCancelled, _audit_block_by_block

    model = _sample("levitated_rotor_axis.lwd")
    seen = []
    rows = path_audit(model, progress=seen.append, route="block by block")
    assert _audit_block_by_block(model, injections=False, points_per_decade=40, refine_passes=8, force=True) is not None
    assert seen[0] == 0.0 and seen[-1] == 1.0
    assert all(b >= a for a, b in zip(seen, seen[1:]))
    assert len(seen) > 10  # the poles, the H2 norms and the grid each report on the way
    plain = path_audit(model, route="block by block")
    assert [(r.source, r.signal) for r in rows] == [(r.source, r.signal) for r in plain]
    # evaluated in pieces between reports: the same numbers up to rounding (the residue sum
    # of the H2 norms carries about ten digits, see engine/audit.py)
    assert_allclose([(r.peak_gain, r.h2) for r in rows], [(r.peak_gain, r.h2) for r in plain], rtol=1e-9)
    for stop_after in (2, len(seen) // 2, len(seen) - 3):  # in the poles, the H2 norms, the peaks
        calls = []

        def stop(fraction, stop_after=stop_after):
            calls.append(fraction)
            if len(calls) == stop_after:
                raise AuditCancelled("stopped by the caller")

        with pytest.raises(AuditCancelled, match="stopped by the caller"):
            path_audit(model, progress=stop, route="block by block")
        assert len(calls) == stop_after  # nothing ran on after the report that raised
