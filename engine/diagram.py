"""The document: blocks, wires and settings as plain data with stable ids.

Nothing here computes a model; :mod:`loopwright.engine.blocks` reads the parameters and
:mod:`loopwright.engine.interconnect` assembles. The mutating methods only keep the data
consistent (unique names, wires attached to existing ports); whether the drawing makes a
valid loop is decided by :func:`loopwright.engine.validation.problems`.
"""
from __future__ import annotations

import copy
import pickle
import re
from dataclasses import dataclass, field
from typing import Any, NamedTuple

import networkx as nx

from loopwright.engine.errors import ConnectionError_, DiagramError, ParameterError, UnknownNameError

__all__ = ["BLOCK_KINDS", "SOURCE_ROLES", "PortRef", "Block", "Wire", "Diagram", "default_params"]

BLOCK_KINDS = ("plant", "dynamic", "gain", "sum", "integrator", "estimator", "source")
SOURCE_ROLES = ("reference", "disturbance", "noise")

# matched with fullmatch: "$" would also let a name end in a newline
_NAME_RE = re.compile(r"[A-Za-z_][A-Za-z0-9_]*")
_SIGNAL_RE = re.compile(r"[A-Za-z_][A-Za-z0-9_.]*")

# Counts reassignments of a wire's source/targets/name or a block's name made after
# construction (anywhere): a diagram's lookup tables are rebuilt when it moves.
_EDITS = [0]


class _Tracked:
    """Dataclass mixin: reassigning one of the looked-up attributes bumps :data:`_EDITS`."""

    _TRACKED: frozenset = frozenset()

    def __setattr__(self, key: str, value: Any) -> None:
        if key in self._TRACKED and key in self.__dict__:
            _EDITS[0] += 1
        object.__setattr__(self, key, value)


class PortRef(NamedTuple):
    """One port of one block: ``PortRef("b3", "u")``.

    A named tuple (immutable, like a frozen dataclass): hashing and comparing it runs in
    compiled code, and the assembly looks ports up once per wire and per port.
    """

    block: str
    port: str


@dataclass
class Block(_Tracked):
    """A box on the canvas.

    Attributes
    ----------
    id : str
        Stable internal id (``b1``); never shown to the user.
    kind : str
        One of :data:`BLOCK_KINDS`.
    name : str
        Unique, user-visible; an identifier (letters, digits, underscore).
    params : dict
        Kind-specific, JSON-native values (see DEVELOPERS.md, "Diagram").
    layout : dict
        ``x``, ``y`` (scene units), ``rotation`` (degrees, multiple of 90), ``flip`` (bool).
    caption : str
        Optional text drawn under the block.
    """

    id: str
    kind: str
    name: str
    params: dict[str, Any] = field(default_factory=dict)
    layout: dict[str, Any] = field(default_factory=dict)
    caption: str = ""

    _TRACKED = frozenset({"name"})


@dataclass
class Wire(_Tracked):
    """A connection from one output port to one or more input ports, carrying one signal.

    ``layout`` may hold ``bends``: a dict target-index (as str) -> list of [x, y] points.
    """

    id: str
    name: str
    source: PortRef
    targets: list[PortRef] = field(default_factory=list)
    layout: dict[str, Any] = field(default_factory=dict)

    _TRACKED = frozenset({"name", "source", "targets"})


def default_params(kind: str) -> dict[str, Any]:
    """Parameters a freshly placed block of ``kind`` starts with (a valid SISO block).

    A dynamic block starts as a second-order low-pass filter with unit DC gain, natural
    frequency 10 rad/s and damping ratio 0.7, ``100 / (s^2 + 14 s + 100)``: a typical
    measurement filter, well damped (about 5 % overshoot), to be retuned to the loop.
    """
    if kind == "dynamic":
        return {"num": [100.0], "den": [1.0, 14.0, 100.0]}
    if kind == "plant":
        return {"num": [1.0], "den": [1.0, 1.0]}
    if kind == "gain":
        return {"K": [[1.0]]}
    if kind == "sum":
        return {"signs": ["+", "-"], "width": 1}
    if kind == "integrator":
        return {"width": 1}
    if kind == "estimator":
        return {"A": [[-1.0]], "B": [[1.0]], "C": [[1.0]], "D": [[0.0]], "L": [[1.0]]}
    if kind == "source":
        return {"role": "reference", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0, "start": 0.0}}
    raise ParameterError(f"unknown block kind {kind!r}; expected one of {', '.join(BLOCK_KINDS)}", field="kind")


class _Lookup:
    """Lookup tables of a diagram: which wire feeds / leaves a port, wire and block by name.

    Kept in step by every mutating :class:`Diagram` method, so building a diagram of ``n``
    blocks costs O(n) instead of a scan of every wire per connection. A change made around
    those methods (assigning into ``Diagram.wires``/``blocks``, reassigning a wire's
    source/targets/name or a block's name) changes :meth:`Diagram._stamp` and the tables are
    rebuilt on the next lookup; every hit is checked against the data before it is returned.
    """

    def __init__(self, d: "Diagram") -> None:
        self.into: dict[PortRef, str] = {}
        self.out: dict[PortRef, str] = {}
        self.wire_names: dict[str, str] = {}
        self.block_names: dict[str, str] = {}
        for b in d.blocks.values():
            self.block_names.setdefault(b.name, b.id)
        for w in d.wires.values():
            self.add_wire(w)
        self.stamp = d._stamp()

    def add_wire(self, w: "Wire") -> None:
        self.out.setdefault(w.source, w.id)
        self.wire_names.setdefault(w.name, w.id)
        for t in w.targets:
            self.into.setdefault(t, w.id)

    def drop_wire(self, w: "Wire") -> None:
        if self.out.get(w.source) == w.id:
            del self.out[w.source]
        if self.wire_names.get(w.name) == w.id:
            del self.wire_names[w.name]
        for t in w.targets:
            if self.into.get(t) == w.id:
                del self.into[t]


class Diagram:
    """Blocks, wires, analysis settings and free-form metadata.

    Examples
    --------
    >>> d = Diagram()
    >>> r = d.add_block("source", "r")
    >>> g = d.add_block("gain", "Kp", {"K": [[4.0]]})
    >>> w = d.connect("r.out", "Kp.in")
    >>> d.wires[w].name
    'r.out'
    """

    def __init__(self) -> None:
        self.blocks: dict[str, Block] = {}
        self.wires: dict[str, Wire] = {}
        self.settings: dict[str, Any] = {}
        self.meta: dict[str, Any] = {}
        self._next = {"b": 1, "w": 1}
        self._lookup_tables: _Lookup | None = None

    # ---- lookup tables (kept in step with every edit below) -------------------------
    def _stamp(self) -> tuple:
        return (id(self.blocks), len(self.blocks), id(self.wires), len(self.wires), _EDITS[0])

    def _tables(self, *, rebuild: bool = False) -> _Lookup:
        ix = getattr(self, "_lookup_tables", None)
        if rebuild or ix is None or ix.stamp != self._stamp():
            ix = self._lookup_tables = _Lookup(self)
        return ix

    def _tables_done(self, ix: _Lookup) -> None:
        ix.stamp = self._stamp()

    def _find(self, table: str, key, check):
        """The object a table names for ``key`` if ``check`` confirms it (rebuilding once
        when the entry is stale), else None."""
        for rebuild in (False, True):
            hit = getattr(self._tables(rebuild=rebuild), table).get(key)
            if hit is None:
                return None
            obj = check(hit)
            if obj is not None:
                return obj
        return None

    def __getstate__(self) -> dict:
        state = dict(self.__dict__)
        state.pop("_lookup_tables", None)  # rebuilt on demand; keeps copies and pickles lean
        return state

    def __setstate__(self, state: dict) -> None:
        self.__dict__.update(state)
        self._lookup_tables = None

    # ---- ids and lookup -------------------------------------------------------------
    def _new_id(self, prefix: str) -> str:
        taken = self.blocks if prefix == "b" else self.wires
        while f"{prefix}{self._next[prefix]}" in taken:
            self._next[prefix] += 1
        new = f"{prefix}{self._next[prefix]}"
        self._next[prefix] += 1
        return new

    def copy(self) -> "Diagram":
        """A deep, independent snapshot (what worker threads compute on)."""
        # pickle's C implementation copies nested parameter lists ~10x faster than deepcopy.
        # It copies the fields of every block and wire in one call; the objects are rebuilt
        # around them here, sharing the ports (immutable), which pickle would rebuild one
        # Python-level call each: most of the time of copying a long chain.
        blocks, wires = list(self.blocks.items()), list(self.wires.items())
        own = {k: v for k, v in vars(self).items() if k not in ("blocks", "wires", "_lookup_tables")}
        wire_fields = []
        for _, w in wires:
            fields = dict(vars(w))
            del fields["source"], fields["targets"]
            wire_fields.append(fields)
        own, block_fields, wire_fields = pickle.loads(
            pickle.dumps((own, [vars(b) for _, b in blocks], wire_fields), protocol=pickle.HIGHEST_PROTOCOL)
        )
        out = object.__new__(type(self))
        vars(out).update(own)
        new = object.__new__
        out.blocks = {}
        for (key, b), fields in zip(blocks, block_fields):
            blk = new(type(b))
            vars(blk).update(fields)
            out.blocks[key] = blk
        out.wires = {}
        for (key, w), fields in zip(wires, wire_fields):
            wire = new(type(w))
            vars(wire).update(fields, source=w.source, targets=list(w.targets))
            out.wires[key] = wire
        out._lookup_tables = None
        ix = getattr(self, "_lookup_tables", None)
        if ix is not None and ix.stamp == self._stamp():  # current: the copy's are the same tables
            tables = object.__new__(_Lookup)
            vars(tables).update({k: dict(v) if isinstance(v, dict) else v for k, v in vars(ix).items()})
            tables.stamp = out._stamp()
            out._lookup_tables = tables
        return out

    def block_by_name(self, name: str) -> Block:
        """The block called ``name``; :class:`UnknownNameError` with suggestions otherwise."""
        b = self._find("block_names", name, lambda bid: self.blocks[bid] if bid in self.blocks and self.blocks[bid].name == name else None)
        if b is not None:
            return b
        raise UnknownNameError(
            f"no block named {name!r}", suggestions=_close(name, [b.name for b in self.blocks.values()])
        )

    def wire_by_name(self, name: str) -> Wire:
        w = self._find("wire_names", name, lambda wid: self.wires[wid] if wid in self.wires and self.wires[wid].name == name else None)
        if w is not None:
            return w
        raise UnknownNameError(
            f"no wire carries a signal named {name!r}", suggestions=_close(name, [w.name for w in self.wires.values()])
        )

    def resolve_port(self, ref: str | PortRef) -> PortRef:
        """Turn ``"P.u"`` (block name, port) into a :class:`PortRef` by id."""
        if isinstance(ref, PortRef):
            if ref.block not in self.blocks:
                raise ConnectionError_(f"port {ref.block}.{ref.port}: no such block id")
            return ref
        if not isinstance(ref, str) or "." not in ref:
            raise ConnectionError_(f"port {ref!r}: expected 'block.port'")
        bname, port = ref.rsplit(".", 1)
        return PortRef(self.block_by_name(bname).id, port)

    def port_label(self, ref: PortRef) -> str:
        b = self.blocks.get(ref.block)
        return f"{b.name if b else ref.block}.{ref.port}"

    def wire_into(self, ref: PortRef) -> Wire | None:
        """The wire that feeds input port ``ref``, or None."""
        return self._find("into", ref, lambda wid: self.wires[wid] if wid in self.wires and ref in self.wires[wid].targets else None)

    def wire_from(self, ref: PortRef) -> Wire | None:
        """The wire leaving output port ``ref``, or None."""
        return self._find("out", ref, lambda wid: self.wires[wid] if wid in self.wires and self.wires[wid].source == ref else None)

    # ---- blocks ---------------------------------------------------------------------
    def add_block(
        self,
        kind: str,
        name: str,
        params: dict[str, Any] | None = None,
        *,
        layout: dict[str, Any] | None = None,
        caption: str = "",
        block_id: str | None = None,
        take_params: bool = False,
    ) -> str:
        """Add a block and return its id.

        ``params`` is copied, unless ``take_params``: then the block keeps that very dict
        (for a caller that made it and keeps no other reference, like the file loader).

        Raises
        ------
        ParameterError
            Unknown kind, or a name that is not an identifier.
        DiagramError
            The name is taken.
        """
        if kind not in BLOCK_KINDS:
            raise ParameterError(
                f"block {name!r}: unknown block kind {kind!r}; expected one of {', '.join(BLOCK_KINDS)}", field="kind"
            )
        self.check_block_name(name)
        bid = block_id if block_id is not None else self._new_id("b")
        if bid in self.blocks:
            raise DiagramError(f"block id {bid!r} is already used")
        lay = {"x": 0.0, "y": 0.0, "rotation": 0, "flip": False}
        lay.update(layout or {})
        ix = self._tables()
        if params is None:
            params = default_params(kind)
        elif not take_params:
            params = copy.deepcopy(params)
        self.blocks[bid] = Block(bid, kind, name, params, lay, caption)
        ix.block_names.setdefault(name, bid)
        self._tables_done(ix)
        return bid

    def add_blocks_at_once(self, entries: list[tuple[str, str, dict[str, Any], dict[str, Any], str]]) -> bool:
        """Fill an empty diagram with blocks ``(kind, name, params, layout, caption)`` in one pass.

        The blocks get the ids :meth:`add_block` would give them one by one, and keep the
        very ``params`` and ``layout`` dicts given (the file loader's own, fresh from the
        parser). Returns False, changing nothing, when the diagram is not empty or any
        entry would be refused: adding them one by one then raises the error for the first.
        Loading a file of thousands of blocks spends its time in the per-block checks and
        lookups of :meth:`add_block`; here they are one set of names and one loop.
        """
        if self.blocks or self.wires or self._next["b"] != 1:
            return False
        names: set[str] = set()
        for kind, name, _params, _layout, caption in entries:
            if kind not in BLOCK_KINDS or type(name) is not str or name in names or not _NAME_RE.fullmatch(name) or type(caption) is not str:
                return False
            names.add(name)
        blocks = self.blocks
        new = object.__new__
        for k, (kind, name, params, layout, caption) in enumerate(entries, start=1):
            blk = new(Block)  # the fields set directly: no per-field hook (nothing is tracked before it exists)
            vars(blk).update(id=f"b{k}", kind=kind, name=name, params=params, layout=layout, caption=caption)
            blocks[blk.id] = blk
        self._next["b"] = len(entries) + 1
        self._lookup_tables = None  # rebuilt on the next lookup, in one pass
        return True

    def connect_at_once(self, entries: list[tuple[str, list[str], dict[str, Any] | None]]) -> bool:
        """Add wires ``(signal, source "block.port", [target "block.port", ...], layout)`` to a
        diagram without wires, in one pass.

        Gives what :meth:`connect` of every target in turn with ``name=signal`` gives (the
        same ids and targets), with ``layout`` kept as given (None: none). Returns False,
        changing nothing, when any connection would be refused or would not carry its own
        name (a second wire from one output port): connecting one by one then raises the
        error or shows the clash.
        """
        if self.wires or self._next["w"] != 1:
            return False
        from loopwright.engine.ports import input_ports, output_ports

        by_name = {b.name: b for b in self.blocks.values()}
        if len(by_name) != len(self.blocks):
            return False
        as_ref = tuple.__new__  # PortRef(...) without the Python-level constructor
        made: list[Wire] = []
        fed: set[PortRef] = set()
        leaving: set[PortRef] = set()
        signals: set[str] = set()
        for k, (signal, source, targets, layout) in enumerate(entries, start=1):
            if type(signal) is not str or not signal or signal in signals or not _SIGNAL_RE.fullmatch(signal):
                return False
            blk, port = _split_port(by_name, source)
            if blk is None or port not in output_ports(blk):
                return False
            src = as_ref(PortRef, (blk.id, port))
            if src in leaving or not isinstance(targets, list) or not targets:
                return False
            refs = []
            for target in targets:
                dst_blk, dst_port = _split_port(by_name, target)
                if dst_blk is None or dst_blk.kind == "sum" and not isinstance(dst_blk.params.get("signs"), list):
                    return False
                dst = as_ref(PortRef, (dst_blk.id, dst_port))
                if dst in fed or dst_port not in input_ports(dst_blk):
                    return False
                fed.add(dst)
                refs.append(dst)
            leaving.add(src)
            signals.add(signal)
            wire = object.__new__(Wire)
            vars(wire).update(id=f"w{k}", name=signal, source=src, targets=refs, layout={} if layout is None else layout)
            made.append(wire)
        for wire in made:
            self.wires[wire.id] = wire
        self._next["w"] = len(made) + 1
        self._lookup_tables = None
        return True

    def check_block_name(self, name: str, *, ignore: str | None = None) -> None:
        """Raise unless ``name`` is a valid, free block name (``ignore``: the block being renamed)."""
        if not isinstance(name, str) or not _NAME_RE.fullmatch(name):
            raise ParameterError(
                f"block name {name!r} is not valid: use letters, digits and '_', starting with a letter", field="name"
            )
        b = self._find("block_names", name, lambda bid: self.blocks[bid] if bid in self.blocks and self.blocks[bid].name == name else None)
        if b is not None and b.id != ignore:
            raise DiagramError(f"block name {name!r} is already used by another block", block_ids=[b.id])

    def unique_name(self, stem: str) -> str:
        """``stem`` if free, else ``stem2``, ``stem3``, ... (for placing and pasting)."""
        taken = {b.name for b in self.blocks.values()}
        if stem not in taken:
            return stem
        base = stem.rstrip("0123456789") or stem
        k = 2
        while f"{base}{k}" in taken:
            k += 1
        return f"{base}{k}"

    def rename_block(self, block_id: str, new_name: str) -> None:
        """Rename a block; wires named after it (``old.port``) follow."""
        blk = self._block(block_id)
        if new_name == blk.name:
            return
        self.check_block_name(new_name, ignore=block_id)
        old = blk.name
        blk.name = new_name
        for w in self.wires.values():
            if w.source.block == block_id and w.name == f"{old}.{w.source.port}":
                w.name = f"{new_name}.{w.source.port}"
        for b in self.blocks.values():
            if b.kind == "estimator" and b.params.get("plant") == old:
                b.params["plant"] = new_name
            recipe = b.params.get("recipe")
            if isinstance(recipe, dict) and recipe.get("plant") == old:
                recipe["plant"] = new_name
        self._tables(rebuild=True)

    def remove_block(self, block_id: str) -> list[Wire]:
        """Remove a block and detach its wires; returns the wires removed entirely."""
        self._block(block_id)
        removed = []
        for wid in list(self.wires):
            w = self.wires[wid]
            if w.source.block == block_id:
                removed.append(self.wires.pop(wid))
                continue
            w.targets = [t for t in w.targets if t.block != block_id]
        del self.blocks[block_id]
        self._tables(rebuild=True)
        return removed

    def set_params(self, block_id: str, params: dict[str, Any]) -> None:
        """Replace a block's parameters (validated later, by assembly or validation)."""
        self._block(block_id).params = copy.deepcopy(params)

    def set_layout(self, block_id: str, **layout: Any) -> None:
        self._block(block_id).layout.update(layout)

    def _block(self, block_id: str) -> Block:
        try:
            return self.blocks[block_id]
        except KeyError:
            raise DiagramError(f"no block with id {block_id!r}") from None

    # ---- wires ----------------------------------------------------------------------
    def connect(self, source: str | PortRef, target: str | PortRef, *, name: str | None = None, wire_id: str | None = None) -> str:
        """Wire an output port to an input port; returns the wire id.

        A second target on an output that already has a wire fans that wire out.

        Raises
        ------
        ConnectionError_
            Missing ports, or the input is already fed.
        """
        src, dst = self.resolve_port(source), self.resolve_port(target)
        from loopwright.engine.ports import input_ports, output_ports

        s_blk, d_blk = self.blocks[src.block], self.blocks[dst.block]
        if src.port not in output_ports(s_blk):
            raise ConnectionError_(
                f"{s_blk.name}.{src.port} is not an output port of {s_blk.kind} {s_blk.name!r} "
                f"(outputs: {', '.join(output_ports(s_blk)) or 'none'})",
                block_ids=[s_blk.id],
            )
        if d_blk.kind == "sum" and not isinstance(d_blk.params.get("signs"), list):
            raise ConnectionError_(
                f"summing junction {d_blk.name!r}: signs must be a list with one '+' or '-' per input, "
                f"got {d_blk.params.get('signs')!r}",
                block_ids=[d_blk.id],
            )
        if dst.port not in input_ports(d_blk):
            raise ConnectionError_(
                f"{d_blk.name}.{dst.port} is not an input port of {d_blk.kind} {d_blk.name!r} "
                f"(inputs: {', '.join(input_ports(d_blk)) or 'none'})",
                block_ids=[d_blk.id],
            )
        fed = self.wire_into(dst)
        if fed is not None:
            raise ConnectionError_(
                f"{d_blk.name}.{dst.port} is already fed by wire {fed.name!r}", block_ids=[d_blk.id], wire_ids=[fed.id]
            )
        wire = self.wire_from(src)
        if wire is None:
            wname = name or self._default_signal_name(src)
            self.check_signal_name(wname)
            wid = wire_id if wire_id is not None else self._new_id("w")
            if wid in self.wires:
                raise DiagramError(f"wire id {wid!r} is already used")
            ix = self._tables()
            wire = Wire(wid, wname, src, [])
            self.wires[wid] = wire
            ix.add_wire(wire)
            self._tables_done(ix)
        elif name is not None and name != wire.name:
            self.rename_wire(wire.id, name)
        ix = self._tables()
        wire.targets.append(dst)
        ix.into.setdefault(dst, wire.id)
        self._tables_done(ix)
        return wire.id

    def _default_signal_name(self, src: PortRef) -> str:
        stem = f"{self.blocks[src.block].name}.{src.port}"
        taken = self._tables().wire_names
        out, k = stem, 2
        while out in taken and self._find("wire_names", out, lambda wid: self.wires[wid] if wid in self.wires and self.wires[wid].name == out else None):
            out = f"{stem}_{k}"
            k += 1
        return out

    def check_signal_name(self, name: str, *, ignore: str | None = None) -> None:
        """Raise unless ``name`` is a valid signal name not carried by another wire."""
        if not isinstance(name, str) or not _SIGNAL_RE.fullmatch(name):
            raise ParameterError(f"signal name {name!r} is not valid: use letters, digits, '_' and '.'", field="name")
        w = self._find("wire_names", name, lambda wid: self.wires[wid] if wid in self.wires and self.wires[wid].name == name else None)
        if w is not None and w.id != ignore:
            raise DiagramError(f"signal name {name!r} is already carried by another wire", wire_ids=[w.id])

    def rename_wire(self, wire_id: str, new_name: str) -> None:
        w = self._wire(wire_id)
        if w.name == new_name:
            return
        self.check_signal_name(new_name, ignore=wire_id)
        ix = self._tables()
        ix.drop_wire(w)
        w.name = new_name
        ix.add_wire(w)
        self._tables_done(ix)

    def disconnect(self, wire_id: str, target: PortRef) -> bool:
        """Detach one target; the wire goes when its last target goes. True if it went."""
        w = self._wire(wire_id)
        ix = self._tables()
        ix.drop_wire(w)
        w.targets = [t for t in w.targets if t != target]
        if not w.targets:
            del self.wires[wire_id]
            self._tables_done(ix)
            return True
        ix.add_wire(w)
        self._tables_done(ix)
        return False

    def remove_wire(self, wire_id: str) -> Wire:
        w = self._wire(wire_id)
        ix = self._tables()
        ix.drop_wire(w)
        del self.wires[wire_id]
        self._tables_done(ix)
        return w

    def restore_wire(self, wire: Wire) -> None:
        """Put back a wire removed earlier (undo)."""
        if wire.id in self.wires:
            raise DiagramError(f"wire id {wire.id!r} is already used")
        ix = self._tables()
        self.wires[wire.id] = copy.deepcopy(wire)
        ix.add_wire(self.wires[wire.id])
        self._tables_done(ix)

    def restore_block(self, block: Block) -> None:
        """Put back a block removed earlier (undo)."""
        if block.id in self.blocks:
            raise DiagramError(f"block id {block.id!r} is already used")
        self.check_block_name(block.name)
        ix = self._tables()
        self.blocks[block.id] = copy.deepcopy(block)
        ix.block_names.setdefault(block.name, block.id)
        self._tables_done(ix)

    def set_wire_layout(self, wire_id: str, layout: dict[str, Any]) -> None:
        self._wire(wire_id).layout = copy.deepcopy(layout)

    def _wire(self, wire_id: str) -> Wire:
        try:
            return self.wires[wire_id]
        except KeyError:
            raise DiagramError(f"no wire with id {wire_id!r}") from None

    # ---- views ----------------------------------------------------------------------
    def graph(self) -> nx.MultiDiGraph:
        """Blocks as nodes (by id), one edge per (wire, target) keyed by wire id.

        Edge data: ``src_port``, ``dst_port``, ``signal`` (the wire's name).
        """
        g = nx.MultiDiGraph()
        for b in self.blocks.values():
            g.add_node(b.id, name=b.name, kind=b.kind)
        for w in self.wires.values():
            for t in w.targets:
                g.add_edge(w.source.block, t.block, key=w.id, src_port=w.source.port, dst_port=t.port, signal=w.name)
        return g

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Diagram):
            return NotImplemented
        return (self.blocks, self.wires, self.settings, self.meta) == (other.blocks, other.wires, other.settings, other.meta)

    def __repr__(self) -> str:
        return f"Diagram({len(self.blocks)} blocks, {len(self.wires)} wires)"


def _close(name: str, candidates: list[str]) -> list[str]:
    import difflib

    return difflib.get_close_matches(name, candidates, n=3, cutoff=0.5)


def _split_port(by_name: dict[str, Block], label: Any) -> tuple[Block | None, str]:
    """``"P.u"`` -> ``(block P, "u")``; ``(None, "")`` when it names no block."""
    if type(label) is not str or "." not in label:
        return None, ""
    bname, port = label.rsplit(".", 1)
    return by_name.get(bname), port
