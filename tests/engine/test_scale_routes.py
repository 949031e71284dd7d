"""The fast routes agree with the whole-model routes: static-chain elimination, block-by-block
frequency responses, per-source noise shares from one Schur form.

References: closed forms (stated beside each check) and scipy's dense solvers
(``numpy.linalg.solve`` per frequency, ``scipy.linalg.solve_continuous_lyapunov`` per
source) on the same matrices.
"""
from __future__ import annotations

import warnings

import numpy as np
import pytest
import scipy.linalg as sla
import scipy.sparse as sp
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from loopwright.engine.audit import _audit_block_by_block, path_audit
from loopwright.engine.blockwise_response import BlockwiseModel, path_evaluator
from loopwright.engine.coupled_poles import closed_loop_poles, h2_by_residues, residue_factors
from loopwright.engine.diagram import Diagram, PortRef
from loopwright.engine.interconnect import assemble
from loopwright.engine.noise import noise_budget
from loopwright.engine.noise_shares import variances_by_source
from loopwright.engine.responses import frequency_response, reduce_model
from loopwright.engine.static_chains import feedthrough_order, solve_acyclic_feedthrough
from tests.strategies import loop_diagrams

SETTINGS = settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def _direct_response(A, B, C, D, w):
    """``C (jw I - A)^-1 B + D`` by one LU solve per frequency (the reference)."""
    n = A.shape[0]
    return np.array([C @ np.linalg.solve(1j * wk * np.eye(n) - A, B) + D for wk in w])


# ---------------------------------------------------------------------------------------
# static chains


@SETTINGS
@given(st.integers(1, 30), st.integers(0, 2**31 - 1), st.floats(0.05, 0.6))
def test_acyclic_feedthrough_solve_equals_the_dense_inverse(ns, seed, density):
    # closed form: (I - DM)^-1 for a random acyclic DM (strictly lower triangular in a
    # random order of the signals)
    rng = np.random.default_rng(seed)
    L = np.tril(rng.uniform(-2, 2, (ns, ns)) * (rng.random((ns, ns)) < density), -1)
    perm = rng.permutation(ns)
    DM = np.zeros((ns, ns))
    DM[np.ix_(perm, perm)] = L
    order = feedthrough_order(sp.csr_matrix(DM))
    pos = np.empty(ns, int)
    pos[order] = np.arange(ns)
    i, j = np.nonzero(DM)
    assert np.all(pos[j] < pos[i])  # every signal comes after the signals feeding it
    X = solve_acyclic_feedthrough(sp.csr_matrix(DM))
    np.testing.assert_allclose(X, np.linalg.inv(np.eye(ns) - DM), rtol=1e-12, atol=1e-12)


def test_a_feedthrough_cycle_is_refused():
    DM = sp.csr_matrix(np.array([[0.0, 1.0], [1.0, 0.0]]))
    with pytest.raises(ValueError, match="cycle"):
        feedthrough_order(DM)


@SETTINGS
@given(st.lists(st.floats(0.5, 2.0), min_size=1, max_size=60))
def test_a_chain_of_gains_inside_a_loop_assembles_to_its_product(gains):
    # closed form: P = 2/(s+1) under u = g (r - y), g = prod(gains): A = -1 - 2 g, and
    # u/r = g (s + 1)/(s + 1 + 2 g) (its feedthrough g); compared as transfer values, which do
    # not depend on how the plant's one state is scaled (B = 1, C = 2 or B = 2, C = 1)
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1, "waveform": {"kind": "step"}})
    d.add_block("sum", "e", {"signs": ["+", "-"], "width": 1})
    d.add_block("plant", "P", {"num": [2.0], "den": [1.0, 1.0]})
    d.connect("r.out", "e.in1")
    prev = "e.out"
    for k, g in enumerate(gains):
        d.add_block("gain", f"g{k}", {"K": [[g]]})
        d.connect(prev, f"g{k}.in")
        prev = f"g{k}.out"
    d.connect(prev, "P.u", name="u")
    d.connect("P.y", "e.in2", name="y")
    m = assemble(d)
    g = float(np.prod(gains))
    np.testing.assert_allclose(m.A, [[-1.0 - 2.0 * g]], rtol=1e-12)
    A, B, C, D = m.pair("r", "u")
    for s in (0.0, 1j, 3.0 + 2j):
        got = (C @ np.linalg.solve(s * np.eye(A.shape[0]) - A, B) + D)[0, 0]
        np.testing.assert_allclose(got, g * (s + 1) / (s + 1 + 2 * g), rtol=1e-12)
    np.testing.assert_allclose(D, [[g]], rtol=1e-12)


# ---------------------------------------------------------------------------------------
# block-by-block frequency responses


def _modal_loop(modes: int, design: int, seed: int, *, linked: bool = False, bending: bool = False) -> Diagram:
    """A flexible plant in modal form under an observer-based loop (demo data). ``bending``:
    mode frequencies ``3 k^2`` rad/s and 0.2-1 % damping, so that ``||A||`` is the square of
    the highest mode (4.5e9 at 150 modes)."""
    rng = np.random.default_rng(seed)
    n = 2 * modes
    A = np.zeros((n, n))
    B = np.zeros((n, 1))
    C = np.zeros((1, n))
    for i in range(modes):
        wn, z = (i + 1) * rng.uniform(0.8, 1.2), rng.uniform(0.01, 0.1)
        if bending:
            wn, z = 3.0 * (i + 1) ** 2, 0.002 + 0.008 * z / 0.1
        A[2 * i, 2 * i + 1] = 1.0
        A[2 * i + 1, 2 * i] = -wn * wn
        A[2 * i + 1, 2 * i + 1] = -2 * z * wn
        B[2 * i + 1, 0] = rng.uniform(0.5, 1.0)
        C[0, 2 * i] = rng.uniform(0.5, 1.0)
    nd = n if linked else 2 * design
    Ad, Bd, Cd = A[:nd, :nd], B[:nd], C[:, :nd]
    P = sla.solve_continuous_are(Ad, Bd, np.eye(nd), np.eye(1))
    K = Bd.T @ P
    S = sla.solve_continuous_are(Ad.T, Cd.T, np.eye(nd), 0.1 * np.eye(1))
    L = S @ Cd.T / 0.1
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1, "waveform": {"kind": "step"}})
    d.add_block("source", "dist", {"role": "disturbance", "width": 1, "waveform": {"kind": "white", "intensity": 0.1}})
    d.add_block("sum", "us", {"signs": ["+", "+", "+"], "width": 1})
    d.add_block("plant", "P", {"A": A.tolist(), "B": B.tolist(), "C": C.tolist(), "D": [[0.0]]})
    est = {"plant": "P"} if linked else {"A": Ad.tolist(), "B": Bd.tolist(), "C": Cd.tolist(), "D": [[0.0]]}
    d.add_block("estimator", "E", {**est, "L": L.tolist()})
    d.add_block("gain", "K", {"K": (-K).tolist()})
    d.connect("r.out", "us.in1")
    d.connect("K.out", "us.in2", name="ufb")
    d.connect("dist.out", "us.in3")
    d.connect("us.out", "P.u", name="u")
    d.connect("us.out", "E.u")
    d.connect("P.y", "E.y", name="y")
    d.connect("E.xhat", "K.in", name="xhat")
    return d


def _check_all_paths(model, w):
    bw = BlockwiseModel.from_model(model)
    assert bw is not None
    for grp in list(model.sources) + [f"inject:{s}" for s in list(model.signals)[:3]]:
        for sig in model.signals:
            A, B, C, D = model.pair(grp, sig)
            ref = _direct_response(A, B, C, D, w)
            got = bw.response(model.input_slice(grp), model.signal_slice(sig), 1j * w)
            scale = max(1.0, float(np.abs(ref).max()))
            np.testing.assert_allclose(got, ref, rtol=1e-8, atol=1e-10 * scale, err_msg=f"{grp} -> {sig}")


@SETTINGS
@given(loop_diagrams(), st.lists(st.floats(0.05, 30.0), min_size=1, max_size=5, unique=True))
def test_block_by_block_equals_the_direct_solve_on_random_loops(diagram, w):
    model = assemble(diagram)
    w = np.array(w)
    poles = np.linalg.eigvals(model.A) if model.A.size else np.zeros(0)
    # stay clear of poles on or next to the imaginary axis (the response itself is then
    # ill-conditioned, whatever the route)
    if poles.size and np.min(np.abs(1j * w[:, None] - poles[None, :])) < 1e-2:
        return
    _check_all_paths(model, w)


@pytest.mark.parametrize("linked", [False, True], ids=["reduced-order estimator", "estimator linked to the plant"])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_block_by_block_equals_the_direct_solve_on_modal_loops(seed, linked):
    model = assemble(_modal_loop(12, 2, seed, linked=linked))
    _check_all_paths(model, np.array([0.3, 1.0, 2.05, 5.5, 11.9, 40.0]))


def _bench_reference():
    """The scale benches' reference: a direct solve refined in extended precision."""
    import sys
    from pathlib import Path

    sys.path.insert(0, str(Path(__file__).resolve().parents[2] / "bench"))
    from scale_diagrams import refined_direct_response

    return refined_direct_response


def test_the_whole_model_route_keeps_its_digits_on_a_stiff_modal_loop():
    # A flexible structure's modes span decades, so ||A|| is huge and the Schur form's backward
    # error (eps ||A||) is magnified near every lightly damped mode; the whole-model route
    # refines by its error estimate and agrees with the block-by-block route and with an
    # extended-precision reference to far better than 1e-8 (one refinement step at most, as
    # before, left errors of 8e-9 here, 4e-5 at 500 modes).
    model = assemble(_modal_loop(150, 2, 0, bending=True))
    A, B, C, D = model.pair("r", "y")
    w = np.concatenate([np.logspace(-1, 5, 40), 3.0 * np.arange(1, 151, 3) ** 2 * 1.003])
    ref = _bench_reference()(A, B, C, D, w)
    whole = frequency_response(A, B, C, D, w)
    blockwise = path_evaluator(model, "r", "y", points=w.size)
    assert blockwise.route == "block by block"
    np.testing.assert_allclose(whole, ref, rtol=1e-9)
    np.testing.assert_allclose(blockwise(w), whole, rtol=1e-8)


def test_the_operation_count_picks_the_route():
    big = assemble(_modal_loop(150, 2, 0))
    small = assemble(_modal_loop(2, 2, 0, linked=True))
    assert path_evaluator(big, "r", "y").route == "block by block"
    assert path_evaluator(small, "r", "y").route == "whole model"
    w = np.logspace(-1, 2.5, 200)
    A, B, C, D = big.pair("r", "y")
    ref = _direct_response(A, B, C, D, w)
    got = path_evaluator(big, "r", "y")(w)
    np.testing.assert_allclose(got, ref, rtol=1e-9, atol=1e-12 * np.abs(ref).max())
    # the whole-model route (one Schur form of the closed loop, refined by its error estimate)
    np.testing.assert_allclose(frequency_response(A, B, C, D, w), ref, rtol=1e-9, atol=1e-12 * np.abs(ref).max())


def test_audit_on_the_block_route_finds_the_same_peaks():
    model = assemble(_modal_loop(60, 2, 3))
    rows = path_audit(model, refine_passes=3)
    assert rows
    for row in rows[:6]:
        if not np.isfinite(row.peak_freq_rad_s) or row.peak_freq_rad_s <= 0:
            continue
        A, B, C, D = model.pair(row.source, row.signal)
        ref = _direct_response(A, B, C, D, np.array([row.peak_freq_rad_s]))
        assert row.peak_gain == pytest.approx(np.linalg.norm(ref[0], 2), rel=1e-8)


def _compare_audits(fast, ref, *, h2_rtol, model):
    # the same pairs; the order may differ only between pairs whose peak gains tie to rounding
    by_pair = {(r.source, r.signal): r for r in ref}
    assert sorted(by_pair) == sorted((r.source, r.signal) for r in fast)
    gramian_size = {}
    for a in fast:
        b = by_pair[a.source, a.signal]
        key = f"{a.source} -> {a.signal}"
        assert a.stable == b.stable, key
        assert a.peak_gain == pytest.approx(b.peak_gain, rel=1e-8), key
        if np.isfinite(b.h2) and np.isfinite(a.h2):
            # the whole-model route reads every signal of a source from one Gramian X, accurate
            # relative to ||X|| (common practice, no source: a backward-stable Lyapunov solve):
            # a signal reading a small corner of X gets an absolute error ~ eps ||c||^2 ||X||
            # (where the whole model is unstable, its Gramian does not exist: then relative to
            # the largest H2 from that source)
            if a.source not in gramian_size:
                Bs = model.B[:, model.inputs[a.source]]
                X = None
                if model.A.size and np.all(np.linalg.eigvals(model.A).real < 0):
                    with warnings.catch_warnings():
                        # scipy warns (and perturbs) when two poles nearly cancel in the sum
                        # (a pole close to the origin): no scale to trust, take the other one
                        warnings.simplefilter("error", RuntimeWarning)
                        try:
                            X = sla.solve_continuous_lyapunov(model.A, -Bs @ Bs.T)
                        except RuntimeWarning:
                            X = None
                if X is not None:
                    gramian_size[a.source] = ("X", float(np.linalg.norm(X, 2)))
                else:
                    big = max((r.h2 for r in ref if r.source == a.source and np.isfinite(r.h2)), default=0.0)
                    gramian_size[a.source] = ("h2", big**2)
            kind, size = gramian_size[a.source]
            c = model.C[model.signals[a.signal]]
            floor = 1e-12 * (float(np.linalg.norm(c, 2)) ** 2 if kind == "X" else 1.0) * size
            assert a.h2**2 == pytest.approx(b.h2**2, rel=2 * h2_rtol, abs=floor + 1e-24), key
        else:
            assert a.h2 == b.h2, key
        assert a.dc_gain == pytest.approx(b.dc_gain, rel=1e-8, abs=1e-12 * max(1.0, b.peak_gain)), key
        assert (a.blocks, a.wires) == (b.blocks, b.wires), key


@SETTINGS
@given(loop_diagrams())
def test_closed_loop_poles_from_the_coupling_form_equal_the_dense_eigenvalues(diagram):
    # reference: LAPACK's dense eigenvalues (numpy.linalg.eigvals) of the assembled A
    model = assemble(diagram)
    bw = BlockwiseModel.from_model(model)
    if bw is None:
        return
    poles = closed_loop_poles(bw)
    if poles is None:
        return  # not certified (e.g. a multiple pole): the callers fall back to the dense route
    ref = np.linalg.eigvals(model.A)
    # match each pole to its nearest dense eigenvalue, both ways (multiset agreement for
    # simple poles); the tolerance is that of the dense solver on these small matrices
    scale = max(1.0, float(np.abs(ref).max()))
    d1 = np.abs(poles[:, None] - ref[None, :]).min(axis=1)
    d2 = np.abs(ref[:, None] - poles[None, :]).min(axis=1)
    assert max(d1.max(), d2.max()) <= 1e-7 * scale


@pytest.mark.parametrize("linked", [False, True], ids=["reduced-order estimator", "estimator linked to the plant"])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_closed_loop_poles_of_modal_loops_are_certified_and_exact(seed, linked):
    model = assemble(_modal_loop(25, 2, seed, linked=linked))
    poles = closed_loop_poles(BlockwiseModel.from_model(model))
    assert poles is not None
    ref = np.linalg.eigvals(model.A)
    assert np.abs(poles[:, None] - ref[None, :]).min(axis=1).max() <= 1e-10 * np.abs(ref).max()
    assert np.abs(ref[:, None] - poles[None, :]).min(axis=1).max() <= 1e-10 * np.abs(ref).max()


@SETTINGS
@given(loop_diagrams())
def test_the_audit_routes_agree_on_random_loops(diagram):
    """The coupling route (poles by Aberth iteration, H2 by residues) against the Schur
    route (H2 by a Lyapunov solve): the same rows, peaks, DC gains and paths."""
    model = assemble(diagram)
    ref = path_audit(model, route="whole model", refine_passes=3)
    fast = path_audit(model, route="block by block", refine_passes=3)
    _compare_audits(fast, ref, h2_rtol=1e-8, model=model)


def test_the_audit_routes_agree_on_a_stiff_modal_loop():
    # the whole-model route's Gramian is refined once with the residual taken with A itself;
    # without that step the Schur form's backward error (eps ||A||, ||A|| about 4.5e9 here)
    # left the H2 norms 2e-9 apart from the block route's residues (4e-8 at 300 modes)
    model = assemble(_modal_loop(150, 2, 0, bending=True))
    ref = path_audit(model, route="whole model", refine_passes=2)
    fast = path_audit(model, route="block by block", refine_passes=2)
    by_pair = {(r.source, r.signal): r for r in ref}
    worst = max(abs(a.h2 - by_pair[a.source, a.signal].h2) / a.h2 for a in fast if np.isfinite(a.h2) and a.h2 > 0)
    assert worst < 1e-9
    _compare_audits(fast, ref, h2_rtol=1e-9, model=model)


def test_a_small_h2_beside_a_large_one_matches_the_closed_form_on_both_routes():
    # found by hypothesis: positive feedback of k1/(s + 1/2) and k2/(s + 1) with k = k1 k2 = 2^-17.
    # closed form: G = k / (s^2 + a1 s + a0) with a1 = 3/2, a0 = 1/2 - k has H2^2 = k^2 / (2 a1 a0)
    from loopwright.engine.diagram import Diagram

    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0}})
    d.add_block("source", "dist", {"role": "disturbance", "width": 1, "waveform": {"kind": "zero"}})
    d.add_block("sum", "e", {"signs": ["+", "+"], "width": 1})
    d.add_block("dynamic", "Ctl", {"num": [2.0**-9], "den": [1.0, 0.5]})
    d.add_block("sum", "up", {"signs": ["+", "+"], "width": 1})
    d.add_block("plant", "P", {"A": [[-1.0]], "B": [[1.0]], "C": [[2.0**-8]], "D": [[0.0]]})
    for a, b in (("r.out", "e.in1"), ("e.out", "Ctl.u"), ("Ctl.y", "up.in1"), ("dist.out", "up.in2"), ("up.out", "P.u"), ("P.y", "e.in2")):
        d.connect(a, b)
    model = assemble(d)
    k = 2.0**-17
    expected = k / np.sqrt(2 * 1.5 * (0.5 - k))
    fast = {(r.source, r.signal): r.h2 for r in path_audit(model, route="block by block", refine_passes=3)}
    whole = {(r.source, r.signal): r.h2 for r in path_audit(model, route="whole model", refine_passes=3)}
    for pair in (("dist", "Ctl.y"), ("r", "P.y")):
        assert fast[pair] == pytest.approx(expected, rel=1e-11)
        # the whole-model route: accurate relative to the Gramian (||X|| about 1/2: P's state)
        assert whole[pair] ** 2 == pytest.approx(expected**2, abs=1e-15)


@pytest.mark.parametrize("linked", [False, True], ids=["reduced-order estimator", "estimator linked to the plant"])
def test_the_audit_routes_agree_on_modal_loops(linked):
    model = assemble(_modal_loop(30, 2, 4, linked=linked))
    assert _audit_block_by_block(model, injections=True, points_per_decade=40, refine_passes=3, force=True) is not None
    ref = path_audit(model, route="whole model", refine_passes=3, injections=True)
    fast = path_audit(model, route="block by block", refine_passes=3, injections=True)
    _compare_audits(fast, ref, h2_rtol=1e-8, model=model)


def test_h2_by_residues_equals_the_lyapunov_solve():
    # reference: scipy.linalg.solve_continuous_lyapunov, ||G||_2^2 = trace(C X C^T) with
    # A X + X A^T + B B^T = 0 (closed form of the H2 norm through the controllability Gramian)
    model = assemble(_modal_loop(20, 2, 5))
    bw = BlockwiseModel.from_model(model)
    poles = closed_loop_poles(bw)
    h2 = h2_by_residues(bw, poles, residue_factors(bw, poles), {g: model.inputs[g] for g in model.sources}, dict(model.signals))
    for (grp, sig), value in h2.items():
        A, B, C, D = model.pair(grp, sig)
        if np.any(D):
            continue
        X = sla.solve_continuous_lyapunov(A, -B @ B.T)
        assert value == pytest.approx(np.sqrt(np.trace(C @ X @ C.T)), rel=1e-9, abs=1e-13), (grp, sig)


# ---------------------------------------------------------------------------------------
# noise shares


@SETTINGS
@given(st.integers(2, 9), st.integers(0, 2**31 - 1), st.booleans())
def test_per_source_variances_equal_one_lyapunov_solve_per_source(parts, seed, cascade):
    # reference: scipy's Bartels-Stewart solve of A X + X A^T + B W B^T = 0 per source
    rng = np.random.default_rng(seed)
    sizes = rng.integers(1, 4, parts)
    n = int(sizes.sum())
    A = np.zeros((n, n))
    starts = np.concatenate([[0], np.cumsum(sizes)])
    for a, b in zip(starts[:-1], starts[1:]):
        A[a:b, a:b] = rng.standard_normal((b - a, b - a)) - 3.0 * np.eye(b - a)
    for a, b, c in zip(starts[:-2], starts[1:-1], starts[2:]):
        if cascade or rng.random() < 0.5:
            A[b:c, a:b] = rng.standard_normal((c - b, b - a))  # part k drives part k+1
    if not cascade:
        A[: starts[1], starts[-2] :] = 0.3 * rng.standard_normal((starts[1], n - starts[-2]))  # close a ring
    if np.linalg.eigvals(A).real.max() >= -1e-3:
        return
    C = rng.standard_normal((5, n)) * (rng.random((5, n)) < 0.5)
    inputs = {}
    for k in range(3):
        Bs = np.zeros((n, 1))
        Bs[rng.integers(n), 0] = rng.uniform(0.5, 2.0)
        inputs[f"s{k}"] = (Bs, np.array([[rng.uniform(0.1, 2.0)]]))
    red = reduce_model(A)
    got = variances_by_source(red.T_real, red.Z_real, C, inputs)
    for name, (Bs, W) in inputs.items():
        X = sla.solve_continuous_lyapunov(A, -Bs @ W @ Bs.T)
        ref = np.einsum("ij,jk,ik->i", C, X, C)
        np.testing.assert_allclose(got[name], ref, rtol=1e-8, atol=1e-12 * max(1.0, np.abs(ref).max()))


def _zones(count: int, *, ring: bool) -> Diagram:
    """Observer-based loops in a line (or a ring), each with white load and sensor noise (demo data)."""
    rng = np.random.default_rng(7)
    d = Diagram()
    for k in range(count):
        A = np.array([[-rng.uniform(0.5, 2.0), 0.4], [rng.uniform(0.2, 1.0), -0.8]])
        B, C = np.array([[1.0], [0.0]]), np.array([[0.0, 1.0]])
        K = B.T @ sla.solve_continuous_are(A, B, np.eye(2), np.eye(1))
        L = sla.solve_continuous_are(A.T, C.T, np.eye(2), 0.1 * np.eye(1)) @ C.T / 0.1
        d.add_block("source", f"d{k}", {"role": "disturbance", "width": 1, "waveform": {"kind": "white", "intensity": 0.05}})
        d.add_block("source", f"n{k}", {"role": "noise", "width": 1, "waveform": {"kind": "white", "intensity": 1e-3}})
        d.add_block("sum", f"u{k}", {"signs": ["+", "+", "+"], "width": 1})
        d.add_block("plant", f"Z{k}", {"A": A.tolist(), "B": B.tolist(), "C": C.tolist(), "D": [[0.0]]})
        d.add_block("estimator", f"E{k}", {"plant": f"Z{k}", "L": L.tolist()})
        d.add_block("gain", f"K{k}", {"K": (-K).tolist()})
        d.add_block("sum", f"m{k}", {"signs": ["+", "+"], "width": 1})
        d.connect(f"K{k}.out", f"u{k}.in1")
        d.connect(f"d{k}.out", f"u{k}.in2")
        d.connect(f"u{k}.out", f"Z{k}.u", name=f"u{k}_cmd")
        d.connect(f"u{k}.out", f"E{k}.u")
        d.connect(f"Z{k}.y", f"m{k}.in1", name=f"T{k}")
        d.connect(f"n{k}.out", f"m{k}.in2")
        d.connect(f"m{k}.out", f"E{k}.y")
        d.connect(f"E{k}.xhat", f"K{k}.in")
    for k in range(1, count):
        d.connect(f"Z{k - 1}.y", f"u{k}.in3")
    d.add_block("source", "still", {"role": "disturbance", "width": 1, "waveform": {"kind": "zero"}})
    d.connect(f"Z{count - 1}.y" if ring else "still.out", "u0.in3")
    return d


@pytest.mark.parametrize("ring", [False, True], ids=["cascade", "ring"])
def test_noise_budget_of_a_line_of_loops_matches_per_source_solves(ring):
    model = assemble(_zones(6, ring=ring))
    budget = noise_budget(model)
    assert len(budget.sources) == 12
    for name, W in budget.sources.items():
        Bs = model.B[:, model.inputs[name]]
        X = sla.solve_continuous_lyapunov(model.A, -Bs @ W @ Bs.T)
        ref = np.einsum("ij,jk,ik->i", model.C, X, model.C)
        got = np.array([budget.lines[i].variance_by_source[name] for i in range(model.C.shape[0])])
        finite = np.isfinite(got)
        assert finite.sum() > model.C.shape[0] // 2
        np.testing.assert_allclose(got[finite], ref[finite], rtol=1e-8, atol=1e-12 * np.abs(ref[finite]).max())


# ---------------------------------------------------------------------------------------
# the diagram's lookup tables


def _scan_into(d, ref):
    return next((w for w in d.wires.values() if ref in w.targets), None)


def _scan_from(d, ref):
    return next((w for w in d.wires.values() if w.source == ref), None)


def _lookups_agree_with_scans(d):
    for b in d.blocks.values():
        assert d.block_by_name(b.name) is b
        for port in ("in", "in1", "in2", "out", "u", "y"):
            ref = PortRef(b.id, port)
            assert d.wire_into(ref) is _scan_into(d, ref)
            assert d.wire_from(ref) is _scan_from(d, ref)
    for w in d.wires.values():
        assert d.wire_by_name(w.name) is w


@SETTINGS
@given(st.lists(st.tuples(st.sampled_from(["connect", "disconnect", "remove_block", "restore", "rename", "reassign", "rename_wire"]), st.integers(0, 50)), max_size=40))
# found by a random seed: a name given before a block was removed and put back is taken
@example(edits=[("remove_block", 0), ("rename", 0), ("restore", 0), ("remove_block", 2), ("rename", 0)])
def test_the_port_and_name_lookups_follow_every_edit(edits):
    """The lookup tables answer as a scan of every wire would (common practice, no source:
    an index must agree with the data it indexes), after any sequence of edits, including
    a wire's source reassigned directly and blocks removed and put back."""
    d = Diagram()
    for k in range(6):
        d.add_block("gain", f"g{k}", {"K": [[1.0]]})
    ids = list(d.blocks)
    removed: list = []
    for op, k in edits:
        live = [b for b in ids if b in d.blocks]
        if op == "connect" and len(live) >= 2:
            a, b = live[k % len(live)], live[(k // len(live) + 1 + k) % len(live)]
            if a != b and d.wire_into(PortRef(b, "in")) is None:
                d.connect(PortRef(a, "out"), PortRef(b, "in"))
        elif op == "disconnect" and any(w.targets for w in d.wires.values()):
            fed = [w for w in d.wires.values() if w.targets]
            w = fed[k % len(fed)]
            d.disconnect(w.id, w.targets[0])
        elif op == "remove_block" and live:
            bid = live[k % len(live)]
            removed.append((d.blocks[bid], d.remove_block(bid)))
        elif op == "restore" and removed:
            blk, wires = removed.pop()
            d.restore_block(blk)
            for w in wires:
                if w.id not in d.wires and all(t.block in d.blocks and d.wire_into(t) is None for t in w.targets):
                    d.restore_wire(w)
        elif op == "rename" and live:
            name = f"h{k}_{len(d.blocks)}"  # may be taken after blocks were removed and put back
            if name not in {b.name for b in d.blocks.values()}:
                d.rename_block(live[k % len(live)], name)
        elif op == "rename_wire" and d.wires:
            w = list(d.wires.values())[k % len(d.wires)]
            if f"sig{k}" not in {x.name for x in d.wires.values()}:
                d.rename_wire(w.id, f"sig{k}")
        elif op == "reassign" and d.wires and live:
            # a wire moved to another output directly, as the lumped-controller cut does
            w = list(d.wires.values())[k % len(d.wires)]
            new = PortRef(live[k % len(live)], "out")
            if _scan_from(d, new) is None:
                w.source = new
        _lookups_agree_with_scans(d)


# A controller pole equal to a plant mode the wiring leaves alone (the plant has B = 0 and
# C = 0): two block modes share the eigenvalue -1. Found by hypothesis under Haswell kernels:
# the residue sum took the controller's residue twice (H2 1.0 instead of 1/sqrt(2)).
_SHARED_MODE = """{"format": "loopwright-diagram", "version": 1, "meta": {}, "settings": {}, "blocks": [
 {"name": "r", "kind": "source", "params": {"role": "reference", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0}}},
 {"name": "dist", "kind": "source", "params": {"role": "disturbance", "width": 1, "waveform": {"kind": "zero"}}},
 {"name": "e", "kind": "sum", "params": {"signs": ["+", "+"], "width": 1}},
 {"name": "Ctl", "kind": "dynamic", "params": {"num": [1.0], "den": [1.0, 1.0]}},
 {"name": "up", "kind": "sum", "params": {"signs": ["+", "+"], "width": 1}},
 {"name": "P", "kind": "plant", "params": {"A": [[-1.0]], "B": [[0.0]], "C": [[0.0]], "D": [[0.0]]}}],
 "wires": [{"signal": "r.out", "from": "r.out", "to": ["e.in1"]}, {"signal": "e.out", "from": "e.out", "to": ["Ctl.u"]},
 {"signal": "Ctl.y", "from": "Ctl.y", "to": ["up.in1"]}, {"signal": "dist.out", "from": "dist.out", "to": ["up.in2"]},
 {"signal": "up.out", "from": "up.out", "to": ["P.u"]}, {"signal": "P.y", "from": "P.y", "to": ["e.in2"]}]}"""


def test_two_blocks_sharing_an_unmoved_mode_each_keep_their_residue():
    from loopwright.engine.project import loads

    model = assemble(loads(_SHARED_MODE))
    rows = {route: {(r.source, r.signal): r for r in path_audit(model, route=route, refine_passes=3)}
            for route in ("whole model", "block by block")}
    for route, by_pair in rows.items():
        # closed form: ||1/(s + a)||_2 = 1/sqrt(2 a), a = 1 (r -> Ctl.y is the controller alone)
        assert by_pair["r", "Ctl.y"].h2 == pytest.approx(1 / np.sqrt(2), rel=1e-10), route
        assert by_pair["r", "P.y"].h2 == 0.0, route
