"""Wiring graph -> one closed-loop state-space model.

Every block (sources aside) is realised and stacked block-diagonally::

    x' = Ab x + Bb u        (u: all block input ports, stacked)
    y  = Cb x + Db u + E e  (y: all output ports; E picks the sources' exogenous inputs e)

Each output port is a *signal*; every signal offers an additive injection ``v``, so
``s = y + v``. Wires select which signal feeds each input: ``u = M s`` (M is a 0/1
selection). Eliminating ``u`` gives ``(I - Db M) s = Cb x + E e + v``. That system is
solved with a sparse LU factorisation; when it is singular (an ill-posed loop of direct
feedthrough) the strongly connected part of the feedthrough graph names the blocks.

The result has inputs ``[e, v]`` (sources, then an injection on every signal component)
and outputs ``s`` (every signal component). A *loop break* at a signal re-routes that
signal's consumers to a new input group ``break:<signal>``; the signal still reports the
upstream value, so the loop transfer there is ``L = -G(break:<signal> -> <signal>)``.
A break may also name one input port (``"P.u"``): then only that consumer is cut, the
input group is ``break:P.u`` and the value returns on the signal feeding it
(``model.break_return``). That is the break "where the controller meets the plant" when
the estimator reads the same command wire as the plant.
"""
from __future__ import annotations

import contextlib
import copy
import difflib
import gc
from dataclasses import dataclass, field

import networkx as nx
import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from scipy.sparse.csgraph import connected_components

from loopwright.engine.blocks import Realization, port_widths, realize
from loopwright.engine.diagram import Diagram, PortRef
from loopwright.engine.errors import (
    AlgebraicLoopError,
    ConnectionError_,
    DiagramError,
    DimensionError,
    EngineError,
    UnknownNameError,
)
from loopwright.engine.ports import input_ports, output_ports
from loopwright.engine.scaling import SCALE_LIMIT, check_block_params, check_model, check_realization
from loopwright.engine.static_chains import AcyclicFeedthrough, FeedthroughMatrix

__all__ = ["AssembledModel", "assemble", "signal_names", "Problem", "collect_problems"]

# An algebraic loop whose solve is this badly conditioned is treated as ill-posed: the
# "model" would amplify rounding noise by more than 1e12.
_ILL_POSED_COND = 1e12


@dataclass(frozen=True)
class Problem:
    """One thing wrong with a diagram, for the problems list and the canvas markings."""

    message: str
    block_ids: tuple[str, ...] = ()
    wire_ids: tuple[str, ...] = ()
    severity: str = "error"
    error: EngineError | None = field(default=None, compare=False, repr=False)


@dataclass(frozen=True, eq=False)
class AssembledModel:
    """The one closed-loop model of a diagram: ``x' = A x + B w``, ``z = C x + D w``.

    Attributes
    ----------
    A : (n, n) ndarray
    B : (n, m) ndarray
        Columns: sources, then ``inject:<signal>`` for every signal (and ``break:<signal>``).
    C : (p, n) ndarray
        Rows: every signal component.
    D : (p, m) FeedthroughMatrix
        Array-like (indexing, ``np.asarray``, arithmetic); its injection block is computed
        only where it is read (see :class:`loopwright.engine.static_chains.FeedthroughMatrix`).
    state_names, input_names, output_names : tuple of str
        Component names (``P.x1``, ``d``, ``inject:xhat[2]``, ``y``).
    inputs : dict
        Input group -> column slice.
    signals : dict
        Signal name -> row slice.
    states : dict
        Block name -> state slice (blocks with states only).
    sources : dict
        Source name -> role.
    signal_ports : dict
        Signal name -> the output ``PortRef`` that drives it.
    diagram : Diagram
        The snapshot the model was built from.
    """

    A: np.ndarray
    B: np.ndarray
    C: np.ndarray
    D: np.ndarray
    state_names: tuple[str, ...]
    input_names: tuple[str, ...]
    output_names: tuple[str, ...]
    inputs: dict[str, slice]
    signals: dict[str, slice]
    states: dict[str, slice]
    sources: dict[str, str]
    signal_ports: dict[str, PortRef]
    diagram: Diagram = field(repr=False)
    break_at: str | None = None
    break_return: str | None = None
    # block id -> its realisation, kept so that block-by-block evaluations need not
    # realise the blocks again
    realizations: dict[str, Realization] = field(default_factory=dict, repr=False, compare=False)

    @property
    def n_states(self) -> int:
        return self.A.shape[0]

    def input_slice(self, name: str) -> slice:
        """Columns of an input group, or of one component of it (``"r[2]"``)."""
        return _component(name, self.inputs, self.resolve_input, "input")

    def signal_slice(self, name: str) -> slice:
        """Rows of a signal, or of one component of it (``"u[1]"``)."""
        return _component(name, self.signals, self.resolve_signal, "signal")

    def resolve_input(self, name: str) -> str:
        """Input group for ``name``: a source, ``inject:<signal>``, ``break:<signal>``, or a bare
        signal name (meaning the injection on that signal).

        Raises
        ------
        UnknownNameError
            With the closest valid names as ``suggestions``.
        """
        if name in self.inputs:
            return name
        if f"inject:{name}" in self.inputs:
            return f"inject:{name}"
        base, k = _split_component(name)
        if k is not None and (base in self.inputs or f"inject:{base}" in self.inputs):
            return name if base in self.inputs else f"inject:{name}"
        cands = list(dict.fromkeys(list(self.sources) + list(self.signals)))
        sugg = difflib.get_close_matches(name, cands, n=3, cutoff=0.4)
        raise UnknownNameError(
            f"no input called {name!r}; inputs are the sources ({', '.join(self.sources) or 'none'}) "
            f"or any signal (its injection)" + (f"; did you mean {', '.join(sugg)}?" if sugg else ""),
            suggestions=sugg,
        )

    def resolve_signal(self, name: str) -> str:
        """``name`` if it is a signal; :class:`UnknownNameError` with suggestions otherwise."""
        if name in self.signals:
            return name
        base, k = _split_component(name)
        if k is not None and base in self.signals:
            return name
        sugg = difflib.get_close_matches(name, list(self.signals), n=3, cutoff=0.4)
        raise UnknownNameError(
            f"no signal called {name!r}" + (f"; did you mean {', '.join(sugg)}?" if sugg else f"; signals: {', '.join(self.signals)}"),
            suggestions=sugg,
        )

    def pair(self, input_group: str, signal: str) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """``(A, B, C, D)`` of the path from one input group to one signal (all components)."""
        cols = self.input_slice(input_group)
        rows = self.signal_slice(signal)
        return self.A, self.B[:, cols], self.C[rows, :], self.D[rows, cols]


def _split_component(name: str) -> tuple[str, int | None]:
    """``"u[2]"`` -> ``("u", 2)``; a name without an index -> ``(name, None)``."""
    if name.endswith("]") and "[" in name:
        base, _, idx = name[:-1].rpartition("[")
        if idx.isdigit():
            return base, int(idx)
    return name, None


def _component(name: str, groups: dict[str, slice], resolve, what: str) -> slice:
    key = resolve(name)
    if key in groups:
        return groups[key]
    base, k = _split_component(key)
    sl = groups[base]
    width = sl.stop - sl.start
    if not 1 <= k <= width:
        raise UnknownNameError(f"{what} {base!r} has {width} component(s); {name!r} does not exist", suggestions=[f"{base}[1]"])
    return slice(sl.start + k - 1, sl.start + k)


def signal_names(diagram: Diagram) -> dict[PortRef, str]:
    """Signal name of every output port: the wire's name, or ``block.port`` when unwired."""
    out: dict[PortRef, str] = {}
    wired = {w.source: w.name for w in diagram.wires.values()}
    as_ref = tuple.__new__  # PortRef(...) without its Python-level constructor (one per port)
    for b in diagram.blocks.values():
        for port in output_ports(b):
            ref = as_ref(PortRef, (b.id, port))
            name = wired.get(ref)
            out[ref] = f"{b.name}.{port}" if name is None else name
    return out


def _comp_names(name: str, width: int) -> list[str]:
    return [name] if width == 1 else [f"{name}[{k + 1}]" for k in range(width)]


def collect_problems(diagram: Diagram, *, assembled=None) -> list[Problem]:
    """Every problem that keeps ``diagram`` from assembling (empty list: it assembles).

    Parameter errors, unconnected inputs, width mismatches and name clashes are gathered
    in one pass; an ill-posed algebraic loop is found only when the rest is clean.
    ``assembled``, when given, is called instead of :func:`assemble` for that last step
    (the window passes the assembly its views share, so an edit is assembled once).
    """
    found: list[Problem] = []
    widths: dict[str, tuple[dict[str, int], dict[str, int]]] = {}
    for b in diagram.blocks.values():
        try:
            check_block_params(b)
            with np.errstate(all="ignore"):  # a bad number is named by the guard below, not by a warning
                widths[b.id] = port_widths(b, diagram)
        except EngineError as err:
            found.append(Problem(err.message, tuple(err.block_ids) or (b.id,), tuple(err.wire_ids)))
    found += _wiring_problems(diagram, widths)
    if not found:
        try:
            assemble(diagram) if assembled is None else assembled()
        except EngineError as err:
            found.append(Problem(err.message, tuple(err.block_ids), tuple(err.wire_ids)))
    return found


def _wiring_problems(diagram: Diagram, widths: dict[str, tuple[dict[str, int], dict[str, int]]],
                     sig_of_port: dict[PortRef, str] | None = None) -> list[Problem]:
    """Wires to missing ports, width mismatches, unconnected or doubly fed inputs, name clashes."""
    found: list[Problem] = []
    blocks = diagram.blocks
    in_ports = {b.id: input_ports(b) for b in blocks.values()}
    no_widths: tuple[dict, dict] = ({}, {})
    fed: dict[PortRef, str] = {}  # the first wire into each input port
    twice: dict[PortRef, list[str]] = {}  # every wire into a port fed more than once, in order
    for w in diagram.wires.values():
        for t in w.targets:
            if t in fed:
                twice.setdefault(t, [fed[t]]).append(w.id)
            else:
                fed[t] = w.id
        src_blk = blocks.get(w.source.block)
        if src_blk is None:
            found.append(Problem(f"wire {w.name!r} starts at a block that no longer exists", (), (w.id,)))
            continue
        sw = widths.get(src_blk.id, no_widths)[1].get(w.source.port)
        for t in w.targets:
            dst = blocks.get(t.block)
            if dst is None:
                found.append(Problem(f"wire {w.name!r} ends at a block that no longer exists", (), (w.id,)))
                continue
            if t.port not in in_ports[dst.id]:
                found.append(Problem(f"wire {w.name!r} ends at {dst.name}.{t.port}, which is not an input port", (dst.id,), (w.id,)))
                continue
            dw = widths.get(dst.id, no_widths)[0].get(t.port)
            if sw is not None and dw is not None and sw != dw:
                found.append(
                    Problem(
                        f"wire {w.name!r}: {src_blk.name}.{w.source.port} has {sw} signal{'s' if sw != 1 else ''}, "
                        f"{dst.name}.{t.port} expects {dw}",
                        (src_blk.id, dst.id),
                        (w.id,),
                    )
                )
    for b in blocks.values():
        for port in in_ports[b.id]:
            ref = (b.id, port)  # equal to the PortRef, and hashed alike
            if ref not in fed:
                found.append(Problem(f"input {b.name}.{port} is not connected", (b.id,)))
            elif ref in twice:
                found.append(Problem(f"input {b.name}.{port} is fed by {len(twice[ref])} wires", (b.id,), tuple(twice[ref])))
    seen: dict[str, PortRef] = {}
    for ref, name in (signal_names(diagram) if sig_of_port is None else sig_of_port).items():
        if name in seen:
            found.append(Problem(f"signal name {name!r} is used twice", (ref.block, seen[name].block)))
        seen[name] = ref
    return found


def _raise_first(problems: list[Problem]) -> None:
    if not problems:
        return
    p = problems[0]
    more = f" (and {len(problems) - 1} more problem{'s' if len(problems) > 2 else ''})" if len(problems) > 1 else ""
    text = p.message + more
    if p.error is not None:
        err = copy.copy(p.error)
        err.message, err.args = text, (text,)
        raise err from p.error
    if "not connected" in p.message or "fed by" in p.message:
        raise ConnectionError_(text, block_ids=p.block_ids, wire_ids=p.wire_ids)
    if "expects" in p.message:
        raise DimensionError(text, block_ids=p.block_ids, wire_ids=p.wire_ids)
    raise DiagramError(text, block_ids=p.block_ids, wire_ids=p.wire_ids)


@contextlib.contextmanager
def collector_paused():
    """Python's cycle collector paused inside the block (restored after; nests).

    Assembly and the commands build a few objects per block and free them by reference
    counting; the collector's full passes over everything alive come more often as the
    diagram grows, and made assembling 4,000 gains in series take 1.7 times as long.
    Whatever cycles are left are collected once it runs again.
    """
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_enabled:
            gc.enable()


def assemble(diagram: Diagram, *, break_at: str | None = None, take: bool = False, like: AssembledModel | None = None) -> AssembledModel:
    """Reduce ``diagram`` to one continuous-time state-space model.

    Parameters
    ----------
    diagram : Diagram
        Not modified; the model keeps a snapshot.
    break_at : str, optional
        Signal, or input port ``"block.port"``, at which to open the loop (see the module docstring).
    take : bool
        The model keeps ``diagram`` itself rather than a snapshot: for a caller that hands
        the diagram over and changes it no more (a command that has just read it from a
        file). Copying is a fifth of the assembly of a long chain of gains.
    like : AssembledModel, optional
        A model assembled from this very ``diagram`` object (the closed loop, when the loop
        is now to be broken): its block realisations, made and checked then, are used
        again instead of being made a second time. Implies ``take`` (the diagram is shared
        with that model, which keeps it already).

    Returns
    -------
    AssembledModel

    Raises
    ------
    ParameterError, ConnectionError_, DimensionError
        The first problem found (``collect_problems`` lists them all).
    AlgebraicLoopError
        A loop of direct feedthrough without a unique solution; ``block_ids`` holds the loop.
    UnknownNameError
        ``break_at`` is not a signal.

    Examples
    --------
    >>> d = Diagram()
    >>> _ = d.add_block("source", "r")
    >>> _ = d.add_block("sum", "e", {"signs": ["+", "-"], "width": 1})
    >>> _ = d.add_block("plant", "P", {"num": [1.0], "den": [1.0, 1.0]})
    >>> _ = d.connect("r.out", "e.in1"); _ = d.connect("e.out", "P.u"); _ = d.connect("P.y", "e.in2")
    >>> m = assemble(d)
    >>> m.A
    array([[-2.]])
    """
    if like is not None and like.diagram is not diagram:
        raise ValueError("assemble(like=...): that model was assembled from another diagram")
    with collector_paused():
        return _assemble(diagram, break_at=break_at, take=take or like is not None, like=like)


def _assemble(diagram: Diagram, *, break_at: str | None = None, take: bool = False, like: AssembledModel | None = None) -> AssembledModel:
    """The work of :func:`assemble` (which pauses the collector around it)."""
    snap = diagram if take else diagram.copy()
    blocks = list(snap.blocks.values())
    if like is not None:
        reals = like.realizations
    else:
        reals, problems = _realize_all(blocks, snap, check_each=False)
        if problems or not _all_in_range(reals.values()):
            # something is wrong: block by block again, so the problems come in diagram order
            reals, problems = _realize_all(blocks, snap, check_each=True)
        _raise_first(problems)
    widths: dict[str, tuple[dict[str, int], dict[str, int]]] = {}
    by_realization: dict[int, tuple[dict[str, int], dict[str, int]]] = {}  # blocks sharing one share these (read only)
    for bid, r in reals.items():
        w = by_realization.get(id(r))
        if w is None:
            w = by_realization[id(r)] = (dict(r.inputs), dict(r.outputs))
        widths[bid] = w
    for b in blocks:
        if b.kind == "source":
            with np.errstate(all="ignore"):
                widths[b.id] = port_widths(b, snap)
    sig_of_port = signal_names(snap)
    _raise_first(_wiring_problems(snap, widths, sig_of_port))

    # ---- signals: every output port; sources contribute exogenous inputs ------------
    sig_names: list[str] = []
    sig_slices: dict[str, slice] = {}
    sig_ports: dict[str, PortRef] = {}
    port_rows: dict[PortRef, slice] = {}
    src_cols: dict[str, slice] = {}
    sources: dict[str, str] = {}
    state_slices: dict[str, slice] = {}
    state_names: list[str] = []
    ns = ne = nx_ = 0
    A_parts, B_parts, C_parts, D_parts = [], [], [], []
    in_offsets: dict[PortRef, slice] = {}
    nu = 0
    y_rows_of_block: list[tuple[int, int]] = []  # (row offset, rows) per realised block, in stacking order
    src_rows, src_cols_list = [], []
    as_ref = tuple.__new__  # PortRef(...) without its Python-level constructor (one per port)
    for b in blocks:
        if b.kind == "source":
            w = widths[b.id][1]["out"]
            ref = as_ref(PortRef, (b.id, "out"))
            name = sig_of_port[ref]
            port_rows[ref] = slice(ns, ns + w)
            sig_slices[name], sig_ports[name] = slice(ns, ns + w), ref
            sig_names.extend(_comp_names(name, w))
            src_cols[b.name] = slice(ne, ne + w)
            sources[b.name] = b.params.get("role", "reference")
            src_rows.extend(range(ns, ns + w))
            src_cols_list.extend(range(ne, ne + w))
            ns += w
            ne += w
            continue
        r = reals[b.id]
        n = r.A.shape[0]
        if n:
            state_slices[b.name] = slice(nx_, nx_ + n)
            state_names.extend(r.state_names)
        A_parts.append(r.A)
        B_parts.append(r.B)
        C_parts.append(r.C)
        D_parts.append(r.D)
        for port, w in r.inputs:
            in_offsets[as_ref(PortRef, (b.id, port))] = slice(nu, nu + w)
            nu += w
        row0 = ns
        for port, w in r.outputs:
            ref = as_ref(PortRef, (b.id, port))
            name = sig_of_port[ref]
            port_rows[ref] = rows = slice(ns, ns + w)
            sig_slices[name], sig_ports[name] = rows, ref
            if w == 1:
                sig_names.append(name)
            else:
                sig_names.extend(_comp_names(name, w))
            ns += w
        y_rows_of_block.append((row0, ns - row0))
        nx_ += n
    if len(sig_slices) != len(sig_ports) or len(sig_names) != ns:
        raise DiagramError("two signals share a name; rename one of the wires")

    # ---- stacked block matrices, with output rows placed among the source rows -------
    Ab = _block_diag(A_parts).tocsr()
    Bb = _block_diag(B_parts).tocsr()
    Cb_blk = _block_diag(C_parts)
    Db_blk = _block_diag(D_parts)
    Ab = sp.csr_matrix(Ab, shape=(nx_, nx_))
    Bb = sp.csr_matrix(Bb, shape=(nx_, nu))
    # map stacked block-output rows to signal rows (sources interleave in diagram order)
    row_map = _concatenated_ranges(y_rows_of_block)
    Cb = sp.csr_matrix((Cb_blk.data, (row_map[Cb_blk.row], Cb_blk.col)), shape=(ns, nx_))
    Db = sp.csr_matrix((Db_blk.data, (row_map[Db_blk.row], Db_blk.col)), shape=(ns, nu))
    E = sp.csr_matrix((np.ones(len(src_rows)), (src_rows, src_cols_list)), shape=(ns, ne))

    # ---- selection u = M s (+ Mb b for a broken signal) ------------------------------
    broken: str | None = None  # the signal whose value returns at the break
    broken_port: PortRef | None = None  # set when only one consumer of that signal is cut
    if break_at is not None:
        broken, broken_port = _resolve_break(snap, break_at, sig_slices, sig_of_port)
    m_rows, m_cols, b_rows, b_cols = [], [], [], []
    nb = sig_slices[broken].stop - sig_slices[broken].start if broken is not None else 0
    for w in snap.wires.values():
        srows = port_rows[w.source]
        on_broken_signal = broken is not None and sig_of_port[w.source] == broken
        for t in w.targets:
            urows = in_offsets[t]
            if urows.stop - urows.start != srows.stop - srows.start:
                raise DimensionError(f"wire {w.name!r}: widths differ at {snap.port_label(t)}", wire_ids=[w.id])
            if on_broken_signal and (broken_port is None or t == broken_port):
                b_rows.extend(range(urows.start, urows.stop))
                b_cols.extend(range(nb))
            else:
                m_rows.extend(range(urows.start, urows.stop))
                m_cols.extend(range(srows.start, srows.stop))
    M = sp.csr_matrix((np.ones(len(m_rows)), (m_rows, m_cols)), shape=(nu, ns))
    Mb = sp.csr_matrix((np.ones(len(b_rows)), (b_rows, b_cols)), shape=(nu, nb))

    # ---- eliminate u: (I - Db M) s = Cb x + E e + v + Db Mb b -------------------------
    DM = (Db @ M).tocsr()
    F = (sp.identity(ns, format="csr") - DM).tocsc()
    acyclic = _check_well_posed(DM, F, sig_names, sig_ports, snap, port_rows)
    # gains in series may overflow; check_model below names where, so no warning here
    with np.errstate(all="ignore"):
        DbMb = (Db @ Mb).tocsr()
        BM = (Bb @ M).tocsr()
        Ed, DbMbd = _dense(E), _dense(DbMb)
        if acyclic:
            # every product with (I - D M)^-1 is a substitution in graph order on its own
            # (few) columns or rows, linear in the number of blocks; the injection block of
            # D itself, dense ns x ns on a chain, is only read where a command asks
            inverse = AcyclicFeedthrough(DM)
            Cbd = _dense(Cb)
            X = inverse.solve(np.hstack([Cbd, Ed, DbMbd]))  # one substitution for every right-hand side
            Gx, De, Dbrk = X[:, : nx_], X[:, nx_ : nx_ + ne], X[:, nx_ + ne :]
            B_inj = inverse.solve_left(_dense(BM))
        else:
            inverse = _inverse_of_feedthrough(DM, F)
            Gx, De, Dbrk = inverse @ _dense(Cb), inverse @ Ed, inverse @ DbMbd
            B_inj = BM @ inverse
        D = FeedthroughMatrix(De, inverse, Dbrk)
        A = _dense(Ab) + BM @ Gx
        B = np.hstack([BM @ De, B_inj, BM @ Dbrk + _dense(Bb @ Mb)])
        C = Gx

    inputs: dict[str, slice] = dict(src_cols)
    input_names: list[str] = []
    for name, sl in src_cols.items():
        input_names.extend(_comp_names(name, sl.stop - sl.start))
    for name, sl in sig_slices.items():
        inputs[f"inject:{name}"] = slice(ne + sl.start, ne + sl.stop)
        input_names.extend(_comp_names(f"inject:{name}", sl.stop - sl.start))
    if broken is not None:
        inputs[f"break:{break_at}"] = slice(ne + ns, ne + ns + nb)
        input_names.extend(_comp_names(f"break:{break_at}", nb))
    model = AssembledModel(
        A=np.ascontiguousarray(A),
        B=np.ascontiguousarray(B),
        C=np.ascontiguousarray(C),
        D=D,
        state_names=tuple(state_names),
        input_names=tuple(input_names),
        output_names=tuple(sig_names),
        inputs=inputs,
        signals=sig_slices,
        states=state_slices,
        sources=sources,
        signal_ports=sig_ports,
        diagram=snap,
        break_at=break_at,
        break_return=broken,
        realizations=reals,
    )
    check_model(model)
    return model


def _realize_all(blocks, snap: Diagram, *, check_each: bool) -> tuple[dict[str, Realization], list[Problem]]:
    """Every block's realisation, and the problems found making them.

    ``check_each=False`` leaves the range check of the realisations to the caller (one
    vectorised pass, :func:`_all_in_range`); a parameter out of range is still refused here.
    """
    with np.errstate(all="ignore"):  # overflow is caught by the scaling checks, with the field named
        return _realize_each(blocks, snap, check_each)


def _realize_each(blocks, snap, check_each):
    reals: dict[str, Realization] = {}
    problems: list[Problem] = []
    # Gains and junctions are functions of their numbers alone: blocks with equal numbers
    # share one realisation (a chain of thousands of unit gains is realised once). Only
    # when every block is checked on its own (to name the first problem) is nothing shared.
    shared: dict[tuple, Realization] = {}
    for b in blocks:
        key = None if check_each else _parameter_key(b)
        if key is not None:
            hit = shared.get(key)
            if hit is not None:
                reals[b.id] = hit
                continue
        try:
            check_block_params(b)
            if b.kind == "source":
                continue
            r = realize(b, snap)
            if check_each:
                check_realization(b, {"A": r.A, "B": r.B, "C": r.C, "D": r.D})
            reals[b.id] = r
            if key is not None:
                for M in (r.A, r.B, r.C, r.D):
                    M.flags.writeable = False  # shared by several blocks: nobody may change it in place
                shared[key] = r
        except EngineError as err:
            problems.append(Problem(err.message, tuple(err.block_ids) or (b.id,), error=err))
    return reals, problems


# A gain of at most this many entries is keyed by its numbers (a bigger one is realised on its own).
_SHARED_GAIN_ENTRIES = 16


def _parameter_key(b) -> tuple | None:
    """A key equal for two gains (or two summing junctions) exactly when their parameters
    are, typed numbers included (``1``, ``1.0`` and ``True`` differ); None for any other block,
    or parameters not in the plain form (their realisation is made and checked on its own)."""
    p = b.params
    if type(p) is not dict:
        return None
    if b.kind == "gain":
        if len(p) != 1:
            return None
        K = p.get("K")
        if type(K) is list and len(K) == 1:  # a scalar gain written [[k]]: the usual one
            row = K[0]
            if type(row) is list and len(row) == 1 and type(row[0]) is float:
                return ("gain", ((row[0],),))
        if type(K) is float or type(K) is int:
            return ("gain", type(K), K)
        if type(K) is not list or not K or len(K) > _SHARED_GAIN_ENTRIES:
            return None
        rows = []
        for row in K:
            if type(row) is not list or len(row) > _SHARED_GAIN_ENTRIES:
                return None
            for x in row:
                if type(x) is not float:
                    return None
            rows.append(tuple(row))
        return ("gain", tuple(rows))
    if b.kind == "sum":
        signs, width = p.get("signs"), p.get("width", 1)
        if len(p) > 2 or type(signs) is not list or type(width) is not int or not all(type(x) is str for x in signs):
            return None
        return ("sum", tuple(signs), width)
    return None


def _all_in_range(reals) -> bool:
    """Whether every entry of every realisation is finite and within :data:`SCALE_LIMIT` (one pass)."""
    unique = {id(r): r for r in reals}.values()  # a shared realisation is checked once
    parts = [M.ravel() for r in unique for M in (r.A, r.B, r.C, r.D) if M.size]
    if not parts:
        return True
    values = np.concatenate(parts)
    return bool(np.all(np.abs(values) <= SCALE_LIMIT))


def _resolve_break(diagram: Diagram, where: str, sig_slices, sig_of_port) -> tuple[str, PortRef | None]:
    """``(signal, port)`` for a loop break named by a signal (all its consumers) or by one input port."""
    if where in sig_slices:
        return where, None
    if "." in where:
        try:
            ref = diagram.resolve_port(where)
        except EngineError:
            ref = None
        if ref is not None and ref.port in input_ports(diagram.blocks[ref.block]):
            wire = diagram.wire_into(ref)
            if wire is None:
                raise ConnectionError_(f"cannot break the loop at {where}: that input is not connected", block_ids=[ref.block])
            return sig_of_port[wire.source], ref
    ports = [f"{b.name}.{p}" for b in diagram.blocks.values() for p in input_ports(b)]
    sugg = difflib.get_close_matches(where, list(sig_slices) + ports, n=3, cutoff=0.4)
    raise UnknownNameError(
        f"cannot break the loop at {where!r}: no signal or input port of that name"
        + (f"; did you mean {', '.join(sugg)}?" if sugg else ""),
        suggestions=sugg,
    )


def _block_diag(parts: list[np.ndarray]) -> sp.coo_matrix:
    """Sparse block-diagonal stack of dense blocks (empty blocks keep their shape), in one
    vectorised pass over all their entries: cheaper than ``scipy.sparse.block_diag`` (or a
    pass per block) on thousands of tiny blocks."""
    shapes = np.array([part.shape for part in parts], dtype=np.int64).reshape(-1, 2)
    r0 = np.concatenate([[0], np.cumsum(shapes[:, 0])])
    c0 = np.concatenate([[0], np.cumsum(shapes[:, 1])])
    sizes = shapes[:, 0] * shapes[:, 1]
    values = np.concatenate([part.ravel() for part in parts if part.size] or [np.zeros(0)]).astype(float, copy=False)
    # entry k of part p (row-major): row r0[p] + k // cols[p], column c0[p] + k % cols[p]
    owner = np.repeat(np.arange(len(parts)), sizes)
    local = np.arange(values.size) - np.repeat(np.cumsum(sizes) - sizes, sizes)
    cols = shapes[owner, 1]
    keep = values != 0
    rows = (r0[:-1][owner] + local // np.maximum(cols, 1))[keep]
    columns = (c0[:-1][owner] + local % np.maximum(cols, 1))[keep]
    return sp.coo_matrix((values[keep], (rows, columns)), shape=(int(r0[-1]), int(c0[-1])))


def _concatenated_ranges(runs: list[tuple[int, int]]) -> np.ndarray:
    """``concatenate([arange(start, start + k) for start, k in runs])``, in one vectorised step."""
    if not runs:
        return np.zeros(0, dtype=np.int64)
    starts, counts = np.array(runs, dtype=np.int64).T
    before = np.cumsum(counts) - counts
    return np.repeat(starts - before, counts) + np.arange(int(counts.sum()), dtype=np.int64)


def _dense(m) -> np.ndarray:
    return m.toarray() if sp.issparse(m) else np.asarray(m)


def _inverse_of_feedthrough(DM, F) -> np.ndarray:
    """``(I - D M)^-1`` as a dense array, by a sparse LU factorisation (algebraic loops:
    without them :class:`AcyclicFeedthrough` applies it without forming it)."""
    ns = DM.shape[0]
    try:
        return spla.splu(F.tocsc()).solve(np.eye(ns))
    except RuntimeError as err:  # exactly singular: the structural check missed a cancellation
        raise AlgebraicLoopError("the direct-feedthrough loops have no unique solution (I - M D is singular)") from err


def _check_well_posed(DM, F, sig_names, sig_ports, diagram: Diagram, port_rows) -> bool:
    """Raise :class:`AlgebraicLoopError` naming the blocks of an ill-posed feedthrough loop.

    Only strongly connected parts of the feedthrough graph can make ``I - D M`` singular
    (an acyclic part is unit-triangular after reordering), so each of those small dense
    blocks is checked by its condition number. Returns True when there is no loop at all.
    """
    ns = DM.shape[0]
    if ns == 0 or DM.nnz == 0:
        return True
    ncomp, labels = connected_components(DM, directed=True, connection="strong")
    sizes = np.bincount(labels, minlength=ncomp)
    diag_nz = DM.diagonal() != 0
    if ncomp == ns and not diag_nz.any():
        return True
    row_block = np.empty(ns, dtype=object)
    for ref, rows in port_rows.items():
        row_block[rows] = ref.block
    for comp in np.flatnonzero((sizes > 1) | np.bincount(labels, weights=diag_nz, minlength=ncomp).astype(bool)):
        idx = np.flatnonzero(labels == comp)
        sub = F[idx][:, idx].toarray()
        cond = np.linalg.cond(sub)
        if not np.isfinite(cond) or cond > _ILL_POSED_COND:
            g = nx.DiGraph()
            sub_dm = DM[idx][:, idx].tocoo()
            for i, j in zip(sub_dm.row, sub_dm.col):
                g.add_edge(row_block[idx[j]], row_block[idx[i]])
            try:
                cyc = [u for u, _ in nx.find_cycle(g)]
            except nx.NetworkXNoCycle:
                cyc = sorted(set(row_block[idx]))
            names = [diagram.blocks[b].name for b in cyc]
            raise AlgebraicLoopError(
                f"algebraic loop through {' -> '.join(names + names[:1])} has no unique solution "
                f"(direct feedthrough around the loop makes I - M D singular, condition {cond:.3g}); "
                "add dynamics or change a gain or sign on the loop",
                block_ids=cyc,
            )
    return False
