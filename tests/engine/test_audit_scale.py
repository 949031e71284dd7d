"""Tests of the path audit on long chains: exact rows, path lists built once per source.

The path lists are checked against networkx (``ancestors``, ``single_source_shortest_path_length``
and ``strongly_connected_components`` on :meth:`Diagram.graph`), the reference library for
graph reachability; the peak refinement on arrays against the one-signal-at-a-time
refinement written out below (same points, same solves), bit for bit.
"""
from __future__ import annotations

import importlib.resources as ir

import networkx as nx
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from loopwright.engine import audit as audit_module
from loopwright.engine.audit import _components, path_audit, path_between
from loopwright.engine.audit_peaks import refine_peaks
from loopwright.engine.blockwise_response import BlockwiseModel, GroupResponder
from loopwright.engine.interconnect import assemble
from loopwright.engine.norms import sigma_max
from loopwright.engine.project import load
from loopwright.engine.responses import auto_frequency_grid, reduce_model
from diagrams import gain_chain as _gain_chain
from strategies import loop_diagrams

SAMPLES = ["conveyor_flexible_drive.lwd", "levitated_rotor_axis.lwd", "two_zone_oven.lwd"]


def _reference_path(model, group, signal):
    """The path by networkx: blocks the source reaches that reach the signal's driver,
    by hops then diagram order; the wires between them in edge order, then the injected
    and the observed signal's own wires."""
    d = model.diagram
    g = d.graph()
    by_name = {w.name: w for w in d.wires.values()}
    extra = []
    if group.startswith("inject:"):
        w = by_name.get(group.split(":", 1)[1])  # an unwired output (a plant's z) has no wire
        starts, extra = ({t.block for t in w.targets}, [w.id]) if w is not None else (set(), [])
    else:
        starts = {d.block_by_name(group).id}
    hops = {}
    for s in starts:
        for node, k in nx.single_source_shortest_path_length(g, s).items():
            hops[node] = min(k, hops.get(node, k))
    end = model.signal_ports[signal].block
    nodes = set(hops) & (nx.ancestors(g, end) | {end})
    wires = [k for u, v, k in g.edges(keys=True) if u in nodes and v in nodes]
    if signal in by_name and (nodes or extra):
        extra.append(by_name[signal].id)
    rank = {b: i for i, b in enumerate(d.blocks)}
    return sorted(nodes, key=lambda b: (hops[b], rank[b])), list(dict.fromkeys(wires + extra))


def test_a_chain_of_gains_gives_the_closed_form_rows_and_one_path_list_per_source():
    # closed form: with G = g_0 ... g_{N-1}, x' = -(1 + 2G) x + 2G (r - n), y = x, and
    # s_k = (g_0 ... g_k / g_k) e, e = r - y - n. So r -> y is 2G/(s + 1 + 2G): DC gain and peak
    # 2G/(1 + 2G) at w = 0, H2 = 2G/sqrt(2 (1 + 2G)); r -> s_k is P_k (s + 1)/(s + 1 + 2G) with
    # P_k the product of the gains before g_k: DC gain P_k/(1 + 2G), peak |P_k| as w -> inf
    # (feedthrough), H2 infinite
    rng = np.random.default_rng(7)
    gains = rng.uniform(0.97, 1.03, 300)
    d = _gain_chain(list(gains))
    model = assemble(d)
    rows = {(r.source, r.signal): r for r in path_audit(model)}
    G = float(np.prod(gains))
    y = rows[("r", "y")]
    assert_allclose([y.dc_gain, y.peak_gain, y.peak_freq_rad_s], [2 * G / (1 + 2 * G), 2 * G / (1 + 2 * G), 0.0], rtol=1e-9, atol=1e-12)
    assert_allclose(y.h2, 2 * G / np.sqrt(2 * (1 + 2 * G)), rtol=1e-9)
    before = np.concatenate([[1.0], np.cumprod(gains)])
    for k in (0, 1, 150, 299):
        r = rows[("r", f"s{k}")]
        assert_allclose([r.dc_gain, r.peak_gain], [before[k] / (1 + 2 * G), before[k]], rtol=1e-9)
        assert r.peak_freq_rad_s == np.inf and r.h2 == np.inf
    # r reaches every block of the loop and n does not; ordered by hops from r
    chain = ["r", "e"] + [f"g{k}" for k in range(300)] + ["P", "ym"]
    for k in (0, 299):
        assert rows[("r", f"s{k}")].blocks == chain
    assert rows[("n", "s5")].blocks == ["n", "ym", "e"] + [f"g{k}" for k in range(300)] + ["P"]
    # the linear route: one backward search per component of a driving block (r, n and the
    # loop), not one per signal, and the rows of a source on the loop share one list
    index = audit_module._PathIndex(model)
    for sig in model.signals:
        index.path("r", sig)
        index.path("n", sig)
    assert index.searches == 3
    loop_rows = [rows[("r", f"s{k}")] for k in range(300)] + [rows[("r", "u")], rows[("r", "y")]]
    assert all(r.blocks is loop_rows[0].blocks and r.block_ids is loop_rows[0].block_ids for r in loop_rows)


@pytest.mark.parametrize("name", SAMPLES)
def test_path_lists_agree_with_networkx_on_the_samples(name):
    model = assemble(load(str(ir.files("loopwright.samples") / name)))
    rows = path_audit(model, injections=True)
    graph = model.diagram.graph()
    assert rows
    for r in rows:
        bids, wids = _reference_path(model, r.source, r.signal)
        assert (r.block_ids, r.wire_ids) == (bids, wids)
        assert r.blocks == [model.diagram.blocks[b].name for b in bids]
        assert r.wires == [model.diagram.wires[w].name for w in wids]
        assert path_between(model, r.source, r.signal) == (bids, wids)
        assert path_between(model, r.source, r.signal, graph) == (bids, wids)  # the edges as networkx lists them


@settings(max_examples=25, deadline=None)
@given(loop_diagrams())
def test_path_lists_agree_with_networkx_on_random_loops(d):
    model = assemble(d)
    for grp in [g for g in model.inputs if g in model.sources or g.startswith("inject:")]:
        for sig in model.signals:
            assert path_between(model, grp, sig) == _reference_path(model, grp, sig)


@settings(max_examples=60, deadline=None)
@given(st.integers(1, 30).flatmap(lambda n: st.tuples(st.just(n), st.lists(st.tuples(st.integers(0, n - 1), st.integers(0, n - 1)), max_size=3 * n))))
def test_components_agree_with_networkx(case):
    n, edges = case
    succ = {i: {} for i in range(n)}
    for u, v in edges:
        succ[u][v] = None
    comp = _components(succ)
    g = nx.DiGraph()
    g.add_nodes_from(range(n))
    g.add_edges_from(edges)
    ours = {frozenset(u for u in range(n) if comp[u] == c) for c in set(comp.values())}
    assert ours == {frozenset(c) for c in nx.strongly_connected_components(g)}


def _refine_one_at_a_time(responder, grid, Y, sig_items, passes):
    """The refinement signal by signal, with Python lists of samples: the oracle for the
    array version (same new points, same batched solve per pass, same outputs per signal)."""
    local, best = {}, {}
    for sig, sl in sig_items:
        g = sigma_max(Y[:, sl, :])
        gv = np.where(np.isfinite(g), g, -np.inf)
        i = int(np.argmax(gv))
        if not np.isfinite(gv[i]):
            best[sig] = (0.0, 0.0)
            continue
        lo, hi = max(i - 1, 0), min(i + 2, grid.size)
        while lo > 0 and abs(grid[lo] - grid[i]) <= 1e-12 * grid[i]:
            lo -= 1
        while hi < grid.size and abs(grid[hi - 1] - grid[i]) <= 1e-12 * grid[i]:
            hi += 1
        w0, g0 = grid[lo:hi], g[lo:hi]
        keep = np.concatenate([[True], np.diff(w0) > 1e-12 * np.abs(w0[1:])])
        local[sig] = (w0[keep].copy(), g0[keep].copy())
    for _ in range(passes):
        plans = {}
        for sig, (w, g) in local.items():
            i = int(np.argmax(np.where(np.isfinite(g), g, -np.inf)))
            if i == w.size - 1 and w[i] >= grid[-1]:
                new = w[i] * np.logspace(0.1, 1.5, 5)
            elif i == 0 and w.size > 1 and w[0] > 0 and w[0] <= grid[1]:
                new = w[0] * np.logspace(-1.5, -0.1, 5)
            elif 0 < i < w.size - 1:
                new = np.linspace(w[i - 1], w[i + 1], 7)[1:-1]
            else:
                continue
            new = new[np.all(np.abs(new[:, None] - w[None, :]) > 1e-12 * np.abs(new)[:, None], axis=1)]
            if new.size:
                plans.setdefault(new.tobytes(), (new, []))[1].append(sig)
        if not plans:
            break
        solved = responder.solve(np.concatenate([pts for pts, _ in plans.values()]))
        col, rows = 0, dict(sig_items)
        for pts, sigs in plans.values():
            at = slice(col, col + pts.size)
            col += pts.size
            for sig in sigs:
                w, g = local[sig]
                w2 = np.concatenate([w, pts])
                g2 = np.concatenate([g, sigma_max(responder.outputs(solved, rows[sig], at))])
                order = np.argsort(w2)
                local[sig] = (w2[order], g2[order])
    for sig, (w, g) in local.items():
        i = int(np.argmax(np.where(np.isfinite(g), g, -np.inf)))
        best[sig] = (float(g[i]), float(w[i]))
    return best


@pytest.mark.parametrize("name", SAMPLES + ["chain", "unit chain"])
@pytest.mark.parametrize("blockwise", [False, True], ids=["whole model", "block by block"])
def test_refinement_on_arrays_matches_one_signal_at_a_time_bit_for_bit(name, blockwise):
    chains = {"chain": [1.01, 0.98, 1.0] * 10, "unit chain": [1.0] * 12 + [2.0] + [1.0] * 12}  # "unit chain": runs of equal rows
    d = _gain_chain(chains[name]) if name in chains else load(str(ir.files("loopwright.samples") / name))
    model = assemble(d)
    red = reduce_model(model.A)
    grid = np.concatenate([[0.0], auto_frequency_grid(red.poles, points_per_decade=40)])
    bw = BlockwiseModel.from_model(model) if blockwise else None
    if blockwise and bw is None:
        pytest.skip("no block-by-block form of this model")
    sig_items = list(model.signals.items())
    for grp in [g for g in model.inputs if g in model.sources or g.startswith("inject:")]:
        cols = model.inputs[grp]
        if blockwise:  # as the block-by-block audit evaluates, where it applies (finite at DC)
            responder = audit_module._BlockResponder(bw, cols)
            Y = bw.response(np.arange(cols.start, cols.stop), slice(None), 1j * grid)
            if not np.all(np.isfinite(Y[0])):
                continue
        else:
            responder = GroupResponder(model, red, cols, points=grid.size, Ct=red.output_matrix(model.C))
            Y = responder.outputs(responder.solve(grid), slice(None))
        ours = refine_peaks(responder, grid, Y, sig_items, 8)
        assert ours == _refine_one_at_a_time(responder, grid, Y, sig_items, 8)


def test_unit_gains_in_series_are_refined_once_per_run_of_equal_rows(monkeypatch):
    # closed form as above with every gain 1 except one 2: G = 2, r -> s_k has DC gain
    # P_k/(1 + 2G) = P_k/5 and its peak |P_k| as w -> inf, P_k = 1 before the 2 and 2 after
    gains = [1.0] * 40 + [2.0] + [1.0] * 40
    model = assemble(_gain_chain(gains))
    refined = []
    each = audit_module.refine_peaks.__globals__["_refine_each"]
    monkeypatch.setitem(audit_module.refine_peaks.__globals__, "_refine_each",
                        lambda responder, grid, Y, sig_items, *a: refined.append(len(sig_items)) or each(responder, grid, Y, sig_items, *a))
    rows = {(r.source, r.signal): r for r in path_audit(model)}
    # rows in block order: r.out, n.out, s0 (e), y (P), ym, then s1..s40 (g0..g39, equal rows),
    # s41..s80 and u (g40..g80, equal rows): 7 runs of the 86 signals; from r, y and ym
    # (= y + n) are equal rows too: 6 runs
    assert list(model.signals)[:6] == ["r.out", "n.out", "s0", "y", "ym", "s1"] and len(model.signals) == 86
    assert refined == [6, 7]
    for k, before in ((0, 1.0), (40, 1.0), (41, 2.0), (80, 2.0)):
        r = rows[("r", f"s{k}")]
        assert_allclose([r.dc_gain, r.peak_gain], [before / 5.0, before], rtol=1e-12)
        assert r.peak_freq_rad_s == np.inf


@pytest.mark.parametrize("name", SAMPLES + ["chain"])
def test_listing_the_paths_of_the_top_rows_only_keeps_the_ranking(name, monkeypatch):
    d = _gain_chain([1.0, -0.5, 2.0] * 40) if name == "chain" else load(str(ir.files("loopwright.samples") / name))
    model = assemble(d)
    full = path_audit(model, injections=True)
    listed = []
    paths = audit_module._PathIndex.paths
    monkeypatch.setattr(audit_module._PathIndex, "paths", lambda self, grp, sigs: listed.extend(sigs) or paths(self, grp, sigs))
    top = path_audit(model, injections=True, paths_for=5)
    assert len(listed) == 5  # one listing per row shown, none for the rest
    assert [(r.rank, r.source, r.signal, r.peak_gain, r.peak_freq_rad_s, r.h2, r.dc_gain, r.stable, r.note) for r in top] == \
        [(r.rank, r.source, r.signal, r.peak_gain, r.peak_freq_rad_s, r.h2, r.dc_gain, r.stable, r.note) for r in full]
    for a, b in zip(top[:5], full[:5]):
        assert (a.blocks, a.wires, a.block_ids, a.wire_ids) == (b.blocks, b.wires, b.block_ids, b.wire_ids)
    assert all(r.blocks == [] and r.block_ids == [] for r in top[5:])
