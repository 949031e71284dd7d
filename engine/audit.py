"""Path audit: every (source, signal) path of the assembled model, ranked.

For each pair the audit reports peak gain and its frequency, H2 norm, DC gain and
stability, plus the blocks and wires between the two on the diagram so the canvas can
highlight them. A scalar path's DC gain keeps its sign (``r -> e`` of a loop with integral
action can be -2); a vector path's DC gain is the largest singular value of the DC gain
matrix (``dc_gain_kind`` says which), its peak gain the peak of the largest singular
value, and its H2 norm the Frobenius-type one.

**Ranking rule** (most troublesome first):

1. unstable paths: a mode with ``Re(p) >= 0`` that the source reaches *and* the signal
   sees (a bounded source drives the signal without bound);
2. then by peak gain, largest first: the worst-case amplification of a bounded-energy
   source at that signal, wherever it peaks in frequency;
3. ties by H2 norm (broadband amplification), then by source and signal name.

Peak gains of different signals carry different units; the ranking is a worklist, not a
verdict. ``peak_over_dc`` (resonance relative to the static gain) is reported alongside.

**Speed:** on a big loop made of blocks with few ports (a modal plant under an
observer-based controller) an operation count picks the coupling route
(:func:`_audit_block_by_block`: no factorisation of the closed loop at all; its docstring
states the method and its accuracy). Otherwise ``A`` is reduced once (complex Schur form); each input group is then
evaluated for all signals at once on one frequency grid, peaks are refined jointly by
grid densification (up to 8 passes of 5 points inside each signal's bracket around its
peak, each pass one batched solve shared by all signals; a peak at either end of the grid
extends the grid outward first; :mod:`loopwright.engine.audit_peaks` keeps the brackets of
all signals in arrays), and H2 norms reuse the same real Schur form for one Lyapunov solve per input
group. Where an operation count says it is cheaper (big blocks with few ports, such as a
plant in modal form), the grid and the refinement are evaluated block by block instead
(:mod:`loopwright.engine.blockwise_response`); the answers are the same. Stability per pair uses the left and right eigenvectors of each non-stable mode
taken from the triangular form. Peak gains are therefore grid-and-refine values (relative
error about 1e-8 or better around a smooth peak), not Hamiltonian certificates; use
:func:`norms.peak_gain` on a single path for a certified value.

**Paths:** the blocks on a path are those the source reaches that also reach the signal's
driving block. On a loop that is nearly every block for every signal, so the listing is
built once per (input group, strongly connected component of the driving block) and
shared by the rows it serves (:class:`_PathIndex`): linear in the number of blocks where
listing each row afresh was quadratic. Rows may therefore share list objects.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg as sla
import scipy.sparse as sp
from scipy.sparse.csgraph import breadth_first_order, connected_components, dijkstra

from loopwright.engine.audit_peaks import refine_peaks
from loopwright.engine.blockwise_response import BlockwiseModel, GroupResponder
from loopwright.engine.errors import EngineError
from loopwright.engine.coupled_poles import closed_loop_poles, h2_by_residues, residue_factors
from loopwright.engine.eigen import axis_tolerance, matrix_scale
from loopwright.engine.norms import dc_gain, h2_norm, refined_lyapunov
from loopwright.engine.responses import ReducedModel, auto_frequency_grid, reduce_model

__all__ = ["AuditRow", "AuditCancelled", "path_audit", "path_between", "RANKING_RULE"]

RANKING_RULE = "unstable paths first, then peak gain (largest first), then H2 norm, then names"

# Frequencies evaluated between two progress reports: about this many multiply-adds each,
# so a report comes every few tens of milliseconds even on a large loop.


class AuditCancelled(EngineError, RuntimeError):
    """Raised by a ``progress`` callable to stop an audit; :func:`path_audit` lets it through."""


# A mode counts as reached/seen when its normalised coupling exceeds this.
_COUPLING_TOL = 1e-8
# A DC gain this small relative to the path's peak gain is rounding of an exact zero.
_ROUNDING_ZERO = 1e-10


@dataclass
class AuditRow:
    """One ranked path. Frequencies in rad/s.

    ``blocks``/``wires`` are user-visible names (block names, signal names);
    ``block_ids``/``wire_ids`` the internal ids for highlighting.
    """

    source: str
    signal: str
    peak_gain: float
    peak_freq_rad_s: float
    h2: float
    dc_gain: float
    stable: bool
    blocks: list[str] = field(default_factory=list)
    wires: list[str] = field(default_factory=list)
    block_ids: list[str] = field(default_factory=list)
    wire_ids: list[str] = field(default_factory=list)
    rank: int = 0
    note: str = ""
    dc_gain_kind: str = "signed value"  # or "largest singular value" (vector paths)

    @property
    def peak_over_dc(self) -> float:
        if not np.isfinite(self.peak_gain) or self.dc_gain == 0 or not np.isfinite(self.dc_gain):
            return np.nan
        return self.peak_gain / abs(self.dc_gain)

    def as_dict(self) -> dict:
        return {
            "rank": self.rank,
            "source": self.source,
            "signal": self.signal,
            "peak_gain": self.peak_gain,
            "peak_freq": self.peak_freq_rad_s,
            "h2": self.h2,
            "dc_gain": self.dc_gain,
            "dc_gain_kind": self.dc_gain_kind,
            "peak_over_dc": self.peak_over_dc,
            "stable": self.stable,
            "path": {"blocks": self.blocks, "wires": self.wires, "block_ids": self.block_ids, "wire_ids": self.wire_ids},
            "note": self.note,
        }


def _eigvecs_of_mode(T: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
    """Right and left eigenvectors (as a column and a row) of the triangular ``T`` for
    ``T[k, k]``. Near-equal diagonal entries are nudged, as LAPACK's trevc does."""
    n = T.shape[0]
    lam = T[k, k]
    small = 1e-14 * max(1.0, np.abs(T).max())
    v = np.zeros(n, dtype=complex)
    v[k] = 1.0
    if k > 0:
        M = T[:k, :k] - lam * np.eye(k)
        d = np.diag(M).copy()
        d[np.abs(d) < small] = small
        M[np.diag_indices(k)] = d
        v[:k] = sla.solve_triangular(M, -T[:k, k])
    u = np.zeros(n, dtype=complex)
    u[k] = 1.0
    if k < n - 1:
        M = T[k + 1 :, k + 1 :] - lam * np.eye(n - k - 1)
        d = np.diag(M).copy()
        d[np.abs(d) < small] = small
        M[np.diag_indices(n - k - 1)] = d
        u[k + 1 :] = sla.solve_triangular(M, -T[k, k + 1 :], trans="T")
    return v, u


def path_between(model, group: str, signal: str, graph=None, *, cache: dict | None = None) -> tuple[list[str], list[str]]:
    """Block ids and wire ids on the paths from an input group to a signal.

    The blocks are those reachable from the source block (or from the consumers of an
    injected signal) that also reach the block driving ``signal``, listed by hops from the
    source (ties in diagram order); the wires are the diagram edges between them, plus
    the injected and the observed signal's own wires.

    ``cache`` (a dict, optional) keeps the reachability of the model between calls.

    Returns
    -------
    block_ids, wire_ids : list of str
        New lists, the caller's to keep.
    """
    cache = {} if cache is None else cache
    index = cache.get("paths")
    if index is None:
        index = cache["paths"] = _PathIndex(model, graph)
    bids, wids, _names_b, _names_w = index.path(group, signal)
    return list(bids), list(wids)


class _PathIndex:
    """Reachability of one model's diagram, for listing the path of every audit row.

    On a loop every block reaches every other, so each of the ~n rows of a source lists
    ~n blocks: computing each row's list afresh (a search towards the signal, a filter of
    every wire) costs O(n^2). The blocks that reach a signal are the ancestors of the
    strongly connected component of its driving block, the same set for every signal
    driven inside that component; so the search runs once per (source, component), the
    block and wire lists (and their names) are built once per (source, component) and
    shared by its rows. Only a row whose own signal's wire is not yet listed gets a list
    of its own (the shared one plus that wire). Rows therefore share list objects: read
    them, never change them.

    The diagram is held as arrays (one entry per wire target) and searched by
    :mod:`scipy.sparse.csgraph` (compiled breadth-first searches): a walk in Python over
    a chain of thousands of blocks cost more than the rest of the paths.
    """

    def __init__(self, model, graph=None):
        d = model.diagram
        self.model, self.diagram = model, d
        self.blocks = list(d.blocks)
        at = {b: i for i, b in enumerate(self.blocks)}
        self.wire_ids = list(d.wires)
        wire_at = {w: i for i, w in enumerate(self.wire_ids)}
        src: list[int] = []
        dst: list[int] = []
        key: list[int] = []
        if graph is None:
            for i, w in enumerate(d.wires.values()):
                u = at[w.source.block]
                for t in w.targets:
                    src.append(u)
                    dst.append(at[t.block])
                    key.append(i)
        else:  # (graph.edges lists the edges in the order a path lists them)
            for u, v, k in graph.edges(keys=True):
                src.append(at[u])
                dst.append(at[v])
                key.append(wire_at[k])
        n = len(self.blocks)
        self.src, self.dst, self.key = np.array(src, dtype=int), np.array(dst, dtype=int), np.array(key, dtype=int)
        ones = np.ones(self.src.size)
        self.succ = sp.csr_matrix((ones, (self.src, self.dst)), shape=(n, n))
        self.pred = sp.csr_matrix((ones, (self.dst, self.src)), shape=(n, n))
        _count, labels = connected_components(self.succ, directed=True, connection="strong")
        self.component = dict(zip(self.blocks, labels.tolist()))  # block -> the number of its component
        # the order in which a path lists its wires: that of Diagram.graph().edges() (by the
        # source block in diagram order, then each successor as first wired to, then wire)
        e = np.arange(self.src.size)
        if graph is None:
            _u, first_of, inverse = np.unique(self.src * max(n, 1) + self.dst, return_index=True, return_inverse=True)
            self.listing = np.lexsort((e, first_of[inverse.ravel()], self.src))
        else:
            self.listing = e
        self.searches = 0  # backward searches run (one per component of a driving block)
        self.wires_by_name = {w.name: w for w in d.wires.values()}
        self._hops: dict[str, tuple[np.ndarray, np.ndarray]] = {}
        self._own_wire: dict[str, list[str]] = {}
        self._back: dict[int, np.ndarray] = {}
        self._shared: dict[tuple[str, int], tuple] = {}
        self._reached: dict[tuple, bool] = {}
        self._ids_by_name: dict[str, str] | None = None
        self._at = at

    def _forward(self, group: str) -> tuple[tuple[np.ndarray, np.ndarray], list[str]]:
        """``(hops, reached)`` from the group's start blocks to every block (breadth first
        from all starts at once: the fewest hops from any of them); the group's own wire."""
        if group not in self._hops:
            extra: list[str] = []
            if group.startswith("inject:") or group.startswith("break:"):
                w = self.wires_by_name.get(group.split(":", 1)[1])
                starts = {t.block for t in w.targets} if w is not None else set()
                if w is not None:
                    extra.append(w.id)
            else:
                if self._ids_by_name is None:  # (the diagram's own lookup tables may not be built yet)
                    self._ids_by_name = {}
                    for b in self.diagram.blocks.values():
                        self._ids_by_name.setdefault(b.name, b.id)
                starts = {self._ids_by_name[group]} if group in self._ids_by_name else {self.diagram.block_by_name(group).id}
            n = len(self.blocks)
            if starts:
                hops = dijkstra(self.succ, directed=True, indices=sorted(self._at[b] for b in starts), unweighted=True, min_only=True)
            else:
                hops = np.full(n, np.inf)
            self._hops[group] = (hops, np.isfinite(hops))
            self._own_wire[group] = extra
        return self._hops[group], self._own_wire[group]

    def _backward(self, end: str) -> np.ndarray:
        """Whether each block reaches ``end`` (``end`` included): one search per component."""
        c = self.component[end]
        if c not in self._back:
            self.searches += 1
            mask = np.zeros(len(self.blocks), dtype=bool)
            mask[breadth_first_order(self.pred, self._at[end], directed=True, return_predecessors=False)] = True
            self._back[c] = mask
        return self._back[c]

    def path(self, group: str, signal: str) -> tuple[list[str], list[str], list[str], list[str]]:
        """``(block_ids, wire_ids, block names, wire names)`` of the path; shared lists."""
        return self.paths(group, [signal])[0]

    def reaches(self, group: str, signals: list[str]) -> list[bool]:
        """Whether the path of each of ``signals`` passes any block (:meth:`paths` lists
        them); the blocks themselves are not listed."""
        (_hops, ahead), _extra = self._forward(group)
        ports, component, found = self.model.signal_ports, self.component, self._reached
        out = []
        for signal in signals:
            end = ports[signal].block
            key = (group, component[end])
            hit = found.get(key)
            if hit is None:
                shared = self._shared.get(key)
                hit = found[key] = bool(shared[0]) if shared is not None else bool(np.any(self._backward(end) & ahead))
            out.append(hit)
        return out

    def paths(self, group: str, signals: list[str]) -> list[tuple[list[str], list[str], list[str], list[str]]]:
        """:meth:`path` of each of ``signals`` (one call per input group: a loop over the
        signals with the lookups bound once)."""
        hops, extra = self._forward(group)
        ports, component, shared_of, wires_by_name = self.model.signal_ports, self.component, self._shared, self.wires_by_name
        out = []
        for signal in signals:
            end = ports[signal].block
            shared = shared_of.get((group, component[end]))
            if shared is None:
                shared = self._share(group, end, hops, extra)
            order, base, seen, names_b, names_w, any_path = shared
            w = wires_by_name.get(signal)
            if w is None or not any_path or w.id in seen:
                out.append((order, base, names_b, names_w))
            else:
                out.append((order, base + [w.id], names_b, names_w + [w.name]))
        return out

    def _share(self, group: str, end: str, hops: tuple[np.ndarray, np.ndarray], extra: list[str]) -> tuple:
        """The lists shared by the rows of ``group`` whose signal is driven in the component of ``end``."""
        key = (group, self.component[end])
        shared = self._shared.get(key)
        if shared is None:
            distance, ahead = hops
            on_path = ahead & self._backward(end)
            idx = np.flatnonzero(on_path)
            # by hops from the start, ties in diagram order
            order = [self.blocks[i] for i in idx[np.lexsort((idx, distance[idx]))].tolist()]
            # the wires between them in the order of graph.edges(); a wire with several
            # targets on the path is one edge per target but is listed once
            listed = self.key[self.listing[on_path[self.src[self.listing]] & on_path[self.dst[self.listing]]]]
            _u, first = np.unique(listed, return_index=True)
            base = [self.wire_ids[i] for i in listed[np.sort(first)].tolist()]
            seen = set(base)
            for k in extra:
                if k not in seen:
                    seen.add(k)
                    base.append(k)
            blocks, wires = self.diagram.blocks, self.diagram.wires
            shared = (order, base, seen, [blocks[b].name for b in order], [wires[w].name for w in base], bool(order or extra))
            self._shared[key] = shared
        return shared


def _components(succ) -> dict:
    """Strongly connected component of every node, as a number (equal numbers: the same
    component), by :func:`scipy.sparse.csgraph.connected_components` (compiled code: a
    Python walk over a chain of thousands of blocks cost more than the rest of its paths)."""
    nodes = list(succ)
    at = {u: i for i, u in enumerate(nodes)}
    rows = [at[u] for u in nodes for _v in succ[u]]
    cols = [at[v] for u in nodes for v in succ[u]]
    graph = sp.csr_matrix((np.ones(len(rows)), (rows, cols)), shape=(len(nodes), len(nodes)))
    _count, labels = connected_components(graph, directed=True, connection="strong")
    return dict(zip(nodes, labels.tolist()))


def path_audit(
    model,
    *,
    injections: bool = False,
    reduced: ReducedModel | None = None,
    points_per_decade: int = 40,
    refine_passes: int = 8,
    progress=None,
    route: str = "auto",
    paths_for: int | None = None,
) -> list[AuditRow]:
    """Rank every (source, signal) path of the assembled model (see the module docstring
    for the rule).

    Parameters
    ----------
    model : AssembledModel
    injections : bool
        Also audit every injection (``inject:<signal>``) as an input.
    reduced : ReducedModel, optional
        A reduction of ``model.A`` to reuse.
    points_per_decade : int
        Density of the base frequency grid (resonances get extra points regardless).
    refine_passes : int
        Joint refinement passes around each pair's peak.
    progress : callable, optional
        ``progress(fraction)`` is called with the fraction done (0 to 1) every few tens of
        milliseconds. It may raise (e.g. :class:`AuditCancelled`) to stop the audit: the
        exception propagates and no rows are returned. This is how a window stops a long
        audit without waiting for it.
    route : {"auto", "whole model", "block by block"}
        ``"auto"`` picks by an operation count; ``"block by block"`` asks for the coupling
        route (:func:`_audit_block_by_block`) whatever its cost, still falling back to the
        whole-model route where that route cannot certify its answer.
    paths_for : int, optional
        List the blocks and wires of the first ``paths_for`` ranked rows only; the others
        get empty lists (shared, read only). For a caller that shows the top of the
        ranking: listing every row's path is most of an audit's work on a long chain.

    Returns
    -------
    list of AuditRow
        Sorted, ``rank`` 1 first. Pairs with no structural path and zero gain are left out.
    """
    if route not in ("auto", "whole model", "block by block"):
        raise ValueError(f"route must be 'auto', 'whole model' or 'block by block', not {route!r}")
    if reduced is None and route != "whole model":
        fast = _audit_block_by_block(
            model, injections=injections, points_per_decade=points_per_decade, refine_passes=refine_passes, force=route == "block by block",
            progress=progress, paths_for=paths_for,
        )
        if fast is not None:
            return fast
    A, B, C, D = model.A, model.B, model.C, model.D
    n = A.shape[0]
    red = reduce_model(A) if reduced is None else reduced
    T = red.T
    poles = red.poles
    # A pole counts as not stable when Re p >= -1e3 eps max(|p|, scale), scale the balanced
    # size of A: the check command's axis tolerance (engine/eigen.py), rounding relative to
    # the pole and to the matrix. A bound on max|T| alone flagged the lightly damped modes
    # of a stiff model (|T| ~ wn^2) as unstable. A rounding-split Jordan block of poles at
    # the origin always keeps a member with Re p >= 0, whose eigenvector (nearly parallel
    # to its partners') carries the reach of the whole block, so no cluster rule is needed.
    axis_tol = axis_tolerance(poles, matrix_scale(A)) if n else np.zeros(0)
    bad = [k for k in range(n) if poles[k].real >= -axis_tol[k]]
    model_stable = not bad
    Ct_all = red.output_matrix(C) if n else np.zeros((C.shape[0], 0), dtype=complex)
    grid = np.concatenate([[0.0], auto_frequency_grid(poles, points_per_decade=points_per_decade)]) if n else np.array([0.0])
    vecs = [_eigvecs_of_mode(T, k) for k in bad]
    groups = [g for g in model.inputs if g in model.sources]
    if injections:
        groups += [g for g in model.inputs if g.startswith("inject:")]
    blockwise = BlockwiseModel.from_model(model) if n else None
    graph = None  # the path index reads the diagram itself (networkx graphs are slow to build)
    reach_cache: dict = {}
    rows: list[AuditRow] = []
    sig_items = list(model.signals.items())
    report = progress if progress is not None else (lambda _fraction: None)
    for gi, grp in enumerate(groups):
        report(gi / max(1, len(groups)))
        cols = model.inputs[grp]
        Bg = B[:, cols]
        Dg = D[:, cols]
        responder = GroupResponder(model, red, cols, points=grid.size, blockwise=blockwise, Ct=Ct_all)
        Bt = responder.Bt
        part = 1.0 / max(1, len(groups))  # this group's share of the progress
        if n:
            Y = responder.outputs(responder.solve(grid, progress=_stage(progress, gi * part, (gi + 0.5) * part)), slice(None))
        else:
            Y = np.broadcast_to(Dg, (grid.size, *Dg.shape)).astype(complex)
        report((gi + 0.5) * part)
        # per-mode couplings
        reach = []
        for v, u in vecs:
            bn = np.linalg.norm(Bt)
            reach.append(bn > 0 and np.linalg.norm(u @ Bt) / (np.linalg.norm(u) * bn) > _COUPLING_TOL)
        X = None
        if model_stable and n:
            S = red.scale
            Bw = Bg / S[:, None]
            X = refined_lyapunov(red, Bw @ Bw.T)
        best = refine_peaks(responder, grid, Y, sig_items, refine_passes if n else 0, progress=_stage(progress, (gi + 0.5) * part, (gi + 0.8) * part))
        report((gi + 0.8) * part)
        scale_ref = _largest_finite_modulus(Y)
        unstable = [False] * len(sig_items)
        if any(reach):
            for si, (sig, sl) in enumerate(sig_items):
                Cz = Ct_all[sl]
                for (v, u), r in zip(vecs, reach):
                    if not r:
                        continue
                    cn = np.linalg.norm(Cz)
                    if cn > 0 and np.linalg.norm(Cz @ v) / (np.linalg.norm(v) * cn) > _COUPLING_TOL:
                        unstable[si] = True
                        break
        batch_h2 = _h2_from_gramian(C, red.scale, X, Dg, sig_items) if X is not None else {}

        def h2_of(sig, sl, Bg=Bg, Dg=Dg, X=X, batch_h2=batch_h2):
            if sig in batch_h2:
                return batch_h2[sig]
            if X is not None:
                Cs = C[sl] * red.scale[None, :]
                return float(np.sqrt(max(np.trace(Cs @ X @ Cs.T), 0.0)))
            if n == 0:
                return 0.0
            return h2_norm(A, Bg, C[sl], Dg[sl]).value

        def dc_of(sl, Bg=Bg, Dg=Dg):
            return dc_gain(A, Bg, C[sl], Dg[sl])

        rows += _group_rows(model, grp, sig_items, Dg, Y[0], best, unstable, h2_of, dc_of, scale_ref, reach_cache, graph,
                            progress=_stage(progress, (gi + 0.8) * part, (gi + 1.0) * part), paths=paths_for is None)
    report(1.0)
    return _ranked(rows, reach_cache, paths_for)


def _largest_finite_modulus(Y: np.ndarray) -> float:
    """The largest finite ``|Y|`` (at least 1e-300; 1.0 when none is finite): the scale
    below which a path's gain is rounding. Where every entry is finite (the usual case)
    no copy of the finite entries is gathered first."""
    mag = np.abs(Y)
    finite = np.isfinite(Y)
    if not finite.all():
        mag = mag[finite]
    return max(1e-300, float(mag.max()) if mag.size else 1.0)


def _h2_from_gramian(C, scale, X, Dg, sig_items) -> dict[str, float]:
    """H2 norms of the single-row signals without feedthrough, from the group's gramian
    ``X`` (of the balanced coordinates): ``sqrt(c X c^T)`` with ``c`` the signal's row of
    ``C`` scaled. One stacked product over the signals; each is the (1, n) by (n, n) and
    (1, n) by (n, 1) product that one signal alone would form."""
    rownz = np.any(Dg != 0, axis=1)
    want = [(sig, sl.start) for sig, sl in sig_items if sl.stop - sl.start == 1 and not rownz[sl.start]]
    if not want:
        return {}
    at = np.array([r for _sig, r in want], dtype=int)
    Cs = C[at] * scale[None, :]
    v = (Cs[:, None, :] @ X) @ Cs[:, :, None]
    # + 0.0: the trace of a 1 x 1 matrix is 0.0 + its entry (a -0.0 entry gives 0.0)
    return {sig: math.sqrt(max(float(x) + 0.0, 0.0)) for (sig, _r), x in zip(want, v[:, 0, 0])}


def _stacked_norm2(M: np.ndarray) -> np.ndarray:
    """``np.linalg.norm(M[k], 2)`` of each (1, m) matrix of the stack ``M`` (k, 1, m):
    the same singular value decomposition per matrix, in one call."""
    if M.shape[0] == 0:
        return np.zeros(0)
    return np.linalg.svd(M, compute_uv=False).max(axis=-1)


def _group_rows(model, grp, sig_items, Dg, Y0, best, unstable, h2_of, dc_of, scale_ref, reach_cache, graph,
                progress=None, paths: bool = True) -> list[AuditRow]:
    """The audit rows of one input group (either route), from its pieces.

    ``Dg`` (p, m) is the group's feedthrough, ``Y0`` (p, m) its response at w = 0,
    ``best`` signal -> (peak, w) from the refinement, ``unstable`` one flag per signal,
    ``h2_of(sig, rows)`` the H2 norm of a stable strictly proper path, ``dc_of(rows)`` the
    DC gain where ``Y0`` is not finite. A pair with no structural path and zero gain gets
    no row. Single-row signals (nearly all, on a big diagram) take their feedthrough and
    DC norms from one stacked call per group; the rest one at a time. ``paths=False``: the
    rows get shared empty path lists (:func:`_ranked` lists the paths of the rows kept).
    """
    index = reach_cache.get("paths")
    if index is None:
        index = reach_cache["paths"] = _PathIndex(model, graph)
    m = Dg.shape[1]
    single = np.array([sl.start for _sig, sl in sig_items if sl.stop - sl.start == 1], dtype=int)
    rownz = np.any(Dg != 0, axis=1)
    finite0 = np.all(np.isfinite(Y0), axis=1)
    # feedthrough norm of every single-row signal (0 where the row is zero)
    d_norm = np.zeros(Dg.shape[0])
    nz = single[rownz[single]]
    d_norm[nz] = _stacked_norm2(Dg[nz][:, None, :])
    # DC gain: the signed value of a scalar path, else the norm of a single row
    dc_single = np.zeros(Dg.shape[0])
    if m == 1:
        dc_single[single] = np.real(Y0[single, 0])
    else:
        fin = single[finite0[single]]
        dc_single[fin] = _stacked_norm2(Y0[fin][:, None, :])
    # the rows of single-row signals with a finite DC response and no unstable mode (nearly
    # all, on a big diagram): their numbers for every row at once, with the arithmetic of
    # the loop below (which takes them as they are)
    at = np.array([sl.start if sl.stop - sl.start == 1 else -1 for _sig, sl in sig_items], dtype=int)
    simple = (at >= 0) & finite0[np.maximum(at, 0)] & ~np.asarray(unstable, dtype=bool)
    at = np.maximum(at, 0)
    refined = np.array([best[sig] for sig, _sl in sig_items], dtype=float).reshape(len(sig_items), 2)
    peak_v, w_v, d_v, dc_v = refined[:, 0], refined[:, 1], d_norm[at], dc_single[at]
    with np.errstate(invalid="ignore", over="ignore"):
        to_inf = d_v >= peak_v * (1.0 - 1e-9)  # as in the loop below
        peak_v = np.where(to_inf, np.maximum(d_v, peak_v), peak_v)
        w_v = np.where(to_inf, np.inf, w_v)
        finite_dc = np.isfinite(dc_v)
        w_v = np.where((w_v == np.inf) & finite_dc & (np.abs(np.abs(dc_v) - peak_v) <= 1e-9 * peak_v), 0.0, w_v)
        dc_v = np.where(finite_dc & np.isfinite(peak_v) & (np.abs(dc_v) <= _ROUNDING_ZERO * peak_v), 0.0, dc_v)
    simple_l, peak_l, w_l, dc_l, with_d_l = simple.tolist(), peak_v.tolist(), w_v.tolist(), dc_v.tolist(), rownz[at].tolist()
    simple_kind = "signed value" if m == 1 else "largest singular value"
    feedthrough_note = "direct feedthrough: H2 is infinite"
    rows: list[AuditRow] = []
    d_norm_l, rownz_l, finite0_l, dc_single_l = d_norm.tolist(), rownz.tolist(), finite0.tolist(), dc_single.tolist()
    isfinite, inf = math.isfinite, math.inf
    if paths:
        listed = index.paths(grp, [sig for sig, _sl in sig_items])
    else:
        reached = index.reaches(grp, [sig for sig, _sl in sig_items])
        none: list[str] = []  # shared by every row of the group, never changed
    for si, (sig, sl) in enumerate(sig_items):
        if progress is not None and si % 256 == 0:
            progress(si / len(sig_items))
        if simple_l[si]:
            peak, wpk, dc = peak_l[si], w_l[si], dc_l[si]
            h2, note = (inf, feedthrough_note) if with_d_l[si] else (h2_of(sig, sl), "")
            if paths:
                bids, wids, names_b, names_w = listed[si]
                if not bids and peak <= 1e-13 * scale_ref:
                    continue
            else:
                if not reached[si] and peak <= 1e-13 * scale_ref:
                    continue
                bids = wids = names_b = names_w = none
            rows.append(AuditRow(grp, sig, peak, wpk, h2, dc, True, names_b, names_w, bids, wids, note=note, dc_gain_kind=simple_kind))
            continue
        one = sl.stop - sl.start == 1
        if one:
            r = sl.start
            d_peak, has_d, g_finite, g_size = d_norm_l[r], rownz_l[r], finite0_l[r], m
        else:
            Dgs = Dg[sl]
            d_peak = float(np.linalg.norm(Dgs, 2)) if Dgs.size else 0.0
            has_d, g_finite, g_size = bool(np.any(Dgs != 0)), bool(np.all(finite0[sl])), Dgs.size
        note = ""
        if unstable[si]:
            peak, wpk, h2 = inf, math.nan, inf
            note = "a mode with Re(p) >= 0 is reached by the source and seen at the signal"
        else:
            peak, wpk = best[sig]
            # a sup reached only as w -> inf equals |D|; the refined grid then stops just
            # short of it at some huge finite frequency, which would mislead
            if d_peak >= peak * (1.0 - 1e-9):
                peak, wpk = max(d_peak, peak), inf
            if has_d:
                h2 = inf
                note = feedthrough_note
            else:
                h2 = h2_of(sig, sl)
        scalar = g_size == 1
        if not g_finite:
            g0 = dc_of(sl)
            if not np.all(np.isfinite(g0)):
                # an integrator on the path: unbounded at DC; a scalar path keeps the sign it tends to
                dc = float(np.sign(np.nan_to_num(np.real(g0).ravel()[0]))) * inf if scalar else inf
                if scalar and dc == 0:
                    dc = inf
            elif scalar:
                dc = float(np.real(g0.ravel()[0]))  # a real system's DC gain is real
            else:
                dc = float(np.linalg.norm(g0, 2)) if g0.size else 0.0
        elif one:
            dc = dc_single_l[sl.start]
        else:
            g0 = Y0[sl]
            dc = float(np.linalg.norm(g0, 2)) if g0.size else 0.0
        if wpk == inf and isfinite(dc) and abs(abs(dc) - peak) <= 1e-9 * peak:
            wpk = 0.0  # as large at DC as at w -> inf (a static path): report the lowest frequency
        if isfinite(dc) and isfinite(peak) and abs(dc) <= _ROUNDING_ZERO * peak:
            dc = 0.0  # an exact zero (e.g. integral action, a zero at s = 0) seen through rounding
        if paths:
            bids, wids, names_b, names_w = listed[si]
            if not bids and not unstable[si] and peak <= 1e-13 * scale_ref:
                continue
        else:
            if not reached[si] and not unstable[si] and peak <= 1e-13 * scale_ref:
                continue
            bids = wids = names_b = names_w = none
        rows.append(AuditRow(
            grp, sig, peak, wpk, h2, dc, not unstable[si], names_b, names_w, bids, wids, note=note,
            dc_gain_kind="signed value" if scalar else "largest singular value",
        ))
    return rows


class _BlockResponder:
    """The responder interface of :func:`~loopwright.engine.audit_peaks.refine_peaks` on the block-by-block route."""

    def __init__(self, bw: BlockwiseModel, cols):
        self.bw, self.cols = bw, cols

    def solve(self, w_rad_s):
        return self.bw.response(self.cols, slice(None), 1j * np.atleast_1d(np.asarray(w_rad_s, dtype=float)))

    def outputs(self, solved, rows: slice, points: slice = slice(None)) -> np.ndarray:
        return solved[points, rows, :]


# Entries (frequencies x signals x inputs) of the grid response held at once.
_GRID_ENTRIES = 8_000_000
# Sweeps of the pole iteration counted by the operation count (typical: 10 to 40).
_SWEEPS = 30


def _stage(progress, lo: float, hi: float):
    """``progress`` for one stage of a computation: its fractions 0..1 reported as lo..hi."""
    if progress is None:
        return None
    return lambda fraction: progress(lo + (hi - lo) * min(max(float(fraction), 0.0), 1.0))


def _audit_block_by_block(model, *, injections: bool, points_per_decade: int, refine_passes: int, force: bool = False,
                          progress=None, paths_for: int | None = None) -> list[AuditRow] | None:
    """The audit without a dense factorisation of the closed loop, or None where this route
    does not apply or cannot certify its answer (the caller then takes the whole-model route).

    Method (exact; no reduced model):

    * closed-loop poles: all roots of ``det(s I - A)`` through the coupling form
      ``A = A0 + U V`` (:func:`loopwright.engine.coupled_poles.closed_loop_poles`: a few
      dozen O(n q^2 + n^2) sweeps instead of the O(n^3) Schur form). They lay the same
      frequency grid as the whole-model route and decide stability: this route handles
      clearly stable loops (every pole with ``Re(p) < -1e-9 max(1, |p|)``); a loop with a
      pole on or right of that line goes to the whole-model route, which tells which paths
      the mode reaches;
    * grid responses of every source at once, block by block (one evaluation of the
      blocks' own resolvents serves all sources), refined around each peak as on the other
      route;
    * H2 norms by the residue theorem (:func:`~loopwright.engine.coupled_poles.h2_by_residues`):
      ``||G||_2^2 = sum_k trace(G(-p_k)^T Res_k)`` over the closed-loop poles ``p_k``. Agreement
      with the Lyapunov solve of the whole-model route: about 1e-10 relative on well-damped
      loops; on the 3,008-state flexible loop (poles spread over six decades) 1e-8 to 1e-7,
      where the dense Lyapunov solve of the stiff matrix is itself the less accurate one
      (its error grows with ``||A||``, the residue sum's with the poles' own conditioning).
      A path whose sum cancels to fewer than about ten digits is refused (whole-model route).

    ``progress`` as in :func:`path_audit`: the poles report 0 to 0.35, the H2 norms 0.35
    to 0.55, the grid responses and peaks the rest; it may raise to stop the audit. When
    this route gives up, the whole-model route starts its reports from 0 again.
    """
    n = model.A.shape[0]
    if n == 0:
        return None
    if progress is not None:
        progress(0.0)
    bw = BlockwiseModel.from_model(model)
    if bw is None:
        return None
    if not force:
        q, p = bw.q, model.C.shape[0]
        structured = _SWEEPS * (bw.cost(q, q, n) + 8.0 * n * n)
        if structured >= 25.0 * float(n) ** 3:  # the dense real Schur form with vectors
            return None
    poles = closed_loop_poles(bw, progress=_stage(progress, 0.0, 0.35))
    if poles is None or np.any(poles.real >= -1e-9 * np.maximum(1.0, np.abs(poles))):
        return None
    factors = residue_factors(bw, poles)
    if factors is None:
        return None
    groups = [g for g in model.inputs if g in model.sources]
    if injections:
        groups += [g for g in model.inputs if g.startswith("inject:")]
    sig_items = list(model.signals.items())
    h2 = h2_by_residues(bw, poles, factors, {g: model.inputs[g] for g in groups}, dict(sig_items), progress=_stage(progress, 0.35, 0.55))
    D = model.D
    for (grp, sig), v in h2.items():
        if v is None and not np.any(D[model.signals[sig], model.inputs[grp]] != 0):
            return None
    grid = np.concatenate([[0.0], auto_frequency_grid(poles, points_per_decade=points_per_decade)])
    p = model.C.shape[0]
    graph = None  # the path index reads the diagram itself (networkx graphs are slow to build)
    reach_cache: dict = {}
    rows: list[AuditRow] = []
    # batches of input groups whose grid responses fit in memory together
    batches, cur, width = [], [], 0
    for grp in groups:
        w = model.inputs[grp].stop - model.inputs[grp].start
        if cur and grid.size * p * (width + w) > _GRID_ENTRIES:
            batches.append(cur)
            cur, width = [], 0
        cur.append(grp)
        width += w
    if cur:
        batches.append(cur)
    share = 0.45 / max(1, len(groups))  # of the progress, per input group
    done = 0
    for batch in batches:
        # the batch's share of the progress: half for its grid responses, half for its peaks
        base, span = 0.55 + share * done, share * len(batch)
        cols = np.concatenate([np.arange(model.inputs[g].start, model.inputs[g].stop) for g in batch])
        Y_all = bw.response(cols, slice(None), 1j * grid, progress=_stage(progress, base, base + 0.5 * span))
        if not np.all(np.isfinite(Y_all[0])):
            return None  # a block's own pole at s = 0: the whole-model route finds the DC gain
        at = 0
        for j, grp in enumerate(batch):
            gcols = model.inputs[grp]
            w = gcols.stop - gcols.start
            Y = Y_all[:, :, at : at + w]
            at += w
            lo = base + 0.5 * span * (1.0 + j / len(batch))
            best = refine_peaks(_BlockResponder(bw, gcols), grid, Y, sig_items, refine_passes,
                                 progress=_stage(progress, lo, lo + 0.5 * span / len(batch)))
            if progress is not None:
                progress(base + 0.5 * span * (1.0 + (j + 1) / len(batch)))
            scale_ref = _largest_finite_modulus(Y)
            Dg = D[:, gcols]
            rows += _group_rows(model, grp, sig_items, Dg, Y[0], best, [False] * len(sig_items),
                                lambda sig, _sl, grp=grp: h2[(grp, sig)], None, scale_ref, reach_cache, graph, paths=paths_for is None)
        done += len(batch)
    if progress is not None:
        progress(1.0)
    return _ranked(rows, reach_cache, paths_for)


def _ranked(rows: list[AuditRow], reach_cache: dict | None = None, paths_for: int | None = None) -> list[AuditRow]:
    """``rows`` sorted by the ranking rule and numbered; with ``paths_for``, the paths of the
    first ``paths_for`` rows listed (from the path index in ``reach_cache``)."""
    isfinite, inf = math.isfinite, math.inf
    rows.sort(key=lambda r: (r.stable, -r.peak_gain if isfinite(r.peak_gain) else -inf, -r.h2 if isfinite(r.h2) else -inf, r.source, r.signal))
    for i, r in enumerate(rows, 1):
        r.rank = i
    if paths_for is not None:
        for r in rows[:paths_for]:
            r.block_ids, r.wire_ids, r.blocks, r.wires = reach_cache["paths"].path(r.source, r.signal)
    return rows
