"""One QUndoCommand per kind of user edit.

Every command stores what it needs to go both ways (old and new values, or the removed
objects) and calls :class:`~loopwright.gui.document.Document` methods only. A user
gesture is one command: a drag of many blocks is one :class:`MoveBlocks`, a delete of a
selection is one :class:`DeleteItems`, a paste is one :class:`PasteFragment`.
"""
from __future__ import annotations

import copy
from typing import Any

from PySide6.QtGui import QUndoCommand

from loopwright.engine.diagram import Block, Diagram, PortRef, Wire
from loopwright.engine.errors import EngineError

__all__ = [
    "AddBlock",
    "DeleteItems",
    "Connect",
    "Disconnect",
    "MoveBlocks",
    "SetParams",
    "RenameBlock",
    "SetCaption",
    "RenameWire",
    "SetWireLayout",
    "PasteFragment",
]


class _Command(QUndoCommand):
    """Base of our commands: an edit the engine refuses when first done leaves no trace.

    ``QUndoStack.push`` runs ``redo`` and keeps the command even if ``redo`` raised; here
    a refusal marks the command obsolete, so the stack drops it at once, and keeps the
    error for :meth:`Document.push` to raise to the caller.
    """

    error: EngineError | None = None

    def redo(self) -> None:
        try:
            self._redo()
        except EngineError as err:
            self.error = err
            self.setObsolete(True)

    def _redo(self) -> None:
        raise NotImplementedError


class AddBlock(_Command):
    """Place a block of ``kind`` with a free name derived from ``stem``."""

    def __init__(self, doc, kind: str, *, name: str | None = None, params: dict | None = None, layout: dict | None = None, caption: str = ""):
        super().__init__(f"Place {kind}")
        self._doc = doc
        self._name = name
        self._kind, self._params, self._layout, self._caption = kind, params, layout or {}, caption
        self.block_id: str | None = None

    def _redo(self) -> None:
        if self._name is None:
            # Chosen when first done, so commands built ahead of time do not collide.
            self._name = self._doc.diagram.unique_name(stem_for(self._kind, self._params))
            self.setText(f"Place {self._kind} {self._name}")
        self.block_id = self._doc.add_block(
            self._kind, self._name, copy.deepcopy(self._params), layout=dict(self._layout), caption=self._caption, block_id=self.block_id
        )

    def undo(self) -> None:
        self._doc.remove_block(self.block_id)


_NAME_STEMS = {
    "plant": "P",
    "dynamic": "C",
    "gain": "K",
    "sum": "s",
    "integrator": "I",
    "estimator": "est",
    "source": "r",
}


def stem_for(kind: str, params: dict | None = None) -> str:
    """The name a freshly placed block starts from (sources by role: r, d, n)."""
    if kind == "source" and params:
        return {"reference": "r", "disturbance": "d", "noise": "n"}.get(params.get("role"), "r")
    return _NAME_STEMS.get(kind, kind)


class DeleteItems(_Command):
    """Delete blocks and wires; wires touching a deleted block lose those ends."""

    def __init__(self, doc, block_ids, wire_ids):
        super().__init__("Delete")
        self._doc = doc
        d = doc.diagram
        self._block_ids = [b for b in block_ids if b in d.blocks]
        gone_blocks = set(self._block_ids)
        explicit = {w for w in wire_ids if w in d.wires}
        touched = [
            w.id for w in d.wires.values()
            if w.id in explicit or w.source.block in gone_blocks or any(t.block in gone_blocks for t in w.targets)
        ]
        self._originals = [copy.deepcopy(d.wires[w]) for w in touched]
        self._blocks = [copy.deepcopy(d.blocks[b]) for b in self._block_ids]
        # Wires that keep living with fewer targets after the delete.
        self._survivors: list[Wire] = []
        for w in self._originals:
            if w.id in explicit or w.source.block in gone_blocks:
                continue
            keep = [t for t in w.targets if t.block not in gone_blocks]
            if keep:
                nw = copy.deepcopy(w)
                nw.targets = keep
                nw.layout = _bends_for_targets(w, keep)
                self._survivors.append(nw)
        self.setText(f"Delete {len(self._blocks)} block(s), {len(explicit)} wire(s)")

    def is_empty(self) -> bool:
        return not self._blocks and not self._originals

    def _redo(self) -> None:
        for w in self._originals:
            self._doc.remove_wire(w.id)
        for b in self._blocks:
            self._doc.remove_block(b.id)
        for w in self._survivors:
            self._doc.restore_wire(w)

    def undo(self) -> None:
        for w in self._survivors:
            self._doc.remove_wire(w.id)
        for b in self._blocks:
            self._doc.restore_block(b)
        for w in self._originals:
            self._doc.restore_wire(w)


def _bends_for_targets(wire: Wire, keep: list[PortRef]) -> dict:
    """Re-key a wire's per-target bends after some targets went."""
    bends = wire.layout.get("bends", {})
    lay = {k: v for k, v in wire.layout.items() if k != "bends"}
    new = {}
    for j, t in enumerate(keep):
        old_index = wire.targets.index(t)
        if str(old_index) in bends:
            new[str(j)] = copy.deepcopy(bends[str(old_index)])
    if new:
        lay["bends"] = new
    return lay


class Connect(_Command):
    """Wire an output port to an input port (a new wire, or a new branch of the existing one)."""

    def __init__(self, doc, source: PortRef, target: PortRef, *, name: str | None = None, bends: list | None = None):
        super().__init__("Connect")
        self._doc, self._src, self._dst, self._name = doc, source, target, name
        self._bends = bends
        self.wire_id: str | None = None
        existing = doc.diagram.wire_from(source)
        self._old_layout = copy.deepcopy(existing.layout) if existing else None
        self.setText(f"Connect {doc.diagram.port_label(source)} to {doc.diagram.port_label(target)}")

    def _redo(self) -> None:
        self.wire_id = self._doc.connect(self._src, self._dst, name=self._name, wire_id=self.wire_id)
        if self._bends:
            w = self._doc.diagram.wires[self.wire_id]
            lay = copy.deepcopy(w.layout)
            lay.setdefault("bends", {})[str(w.targets.index(self._dst))] = copy.deepcopy(self._bends)
            self._doc.set_wire_layout(self.wire_id, lay)

    def undo(self) -> None:
        gone = self._doc.disconnect(self.wire_id, self._dst)
        if not gone and self._old_layout is not None:
            self._doc.set_wire_layout(self.wire_id, copy.deepcopy(self._old_layout))


class Disconnect(_Command):
    """Detach one target of a wire (the wire goes with its last target)."""

    def __init__(self, doc, wire_id: str, target: PortRef):
        super().__init__("Disconnect")
        self._doc, self._wid, self._dst = doc, wire_id, target
        self._original = copy.deepcopy(doc.diagram.wires[wire_id])

    def _redo(self) -> None:
        w = self._doc.diagram.wires[self._wid]
        keep = [t for t in w.targets if t != self._dst]
        self._doc.remove_wire(self._wid)
        if keep:
            nw = copy.deepcopy(self._original)
            nw.targets, nw.layout = keep, _bends_for_targets(self._original, keep)
            self._doc.restore_wire(nw)

    def undo(self) -> None:
        if self._wid in self._doc.diagram.wires:
            self._doc.remove_wire(self._wid)
        self._doc.restore_wire(self._original)


class MoveBlocks(_Command):
    """Change the layout (position, rotation, flip) of several blocks at once.

    ``changes`` maps block id to the new layout keys. Bends of wires whose every end moves
    by the same offset move with them, so a dragged group keeps its shape.
    """

    def __init__(self, doc, changes: dict[str, dict[str, Any]], *, text: str = "Move"):
        super().__init__(text)
        self._doc = doc
        d = doc.diagram
        from loopwright.engine.errors import DiagramError

        for b, v in changes.items():
            rot = v.get("rotation", 0)
            if not isinstance(rot, (int, float)) or rot % 90:
                raise DiagramError(f"block {d.blocks[b].name!r}: rotation {rot!r} is not a multiple of 90 degrees", block_ids=[b])
        self._new = {b: dict(v) for b, v in changes.items()}
        self._old = {b: {k: d.blocks[b].layout.get(k) for k in v} for b, v in changes.items()}
        self._wire_old: dict[str, dict] = {}
        self._wire_new: dict[str, dict] = {}
        offsets = {}
        for b, v in changes.items():
            if "x" in v or "y" in v:
                ox = float(v.get("x", self._old[b].get("x", 0.0))) - float(self._old[b].get("x") or 0.0)
                oy = float(v.get("y", self._old[b].get("y", 0.0))) - float(self._old[b].get("y") or 0.0)
                offsets[b] = (ox, oy)
        for w in d.wires.values():
            ends = [w.source.block] + [t.block for t in w.targets]
            if not w.layout.get("bends") or not all(e in offsets for e in ends):
                continue
            shifts = {offsets[e] for e in ends}
            if len(shifts) != 1:
                continue
            dx, dy = shifts.pop()
            lay = copy.deepcopy(w.layout)
            lay["bends"] = {k: [[p[0] + dx, p[1] + dy] for p in pts] for k, pts in lay["bends"].items()}
            self._wire_old[w.id] = copy.deepcopy(w.layout)
            self._wire_new[w.id] = lay

    def _redo(self) -> None:
        for b, v in self._new.items():
            self._doc.set_layout(b, v)
        for w, lay in self._wire_new.items():
            self._doc.set_wire_layout(w, lay)

    def undo(self) -> None:
        for b, v in self._old.items():
            self._doc.set_layout(b, v)
        for w, lay in self._wire_old.items():
            self._doc.set_wire_layout(w, lay)


class SetParams(_Command):
    """Replace one block's parameters (checked by the document before anything changes)."""

    def __init__(self, doc, block_id: str, params: dict[str, Any], *, text: str | None = None):
        blk = doc.diagram.blocks[block_id]
        super().__init__(text or f"Edit {blk.name}")
        doc.check_params(block_id, params)
        self._doc, self._bid = doc, block_id
        self._old, self._new = copy.deepcopy(blk.params), copy.deepcopy(params)

    def _redo(self) -> None:
        self._doc.set_params(self._bid, copy.deepcopy(self._new))

    def undo(self) -> None:
        self._doc.set_params(self._bid, copy.deepcopy(self._old))


class RenameBlock(_Command):
    def __init__(self, doc, block_id: str, name: str):
        blk = doc.diagram.blocks[block_id]
        super().__init__(f"Rename {blk.name} to {name}")
        doc.diagram.check_block_name(name, ignore=block_id)
        self._doc, self._bid, self._old, self._new = doc, block_id, blk.name, name

    def _redo(self) -> None:
        self._doc.rename_block(self._bid, self._new)

    def undo(self) -> None:
        self._doc.rename_block(self._bid, self._old)


class SetCaption(_Command):
    def __init__(self, doc, block_id: str, caption: str):
        super().__init__("Edit caption")
        self._doc, self._bid = doc, block_id
        self._old, self._new = doc.diagram.blocks[block_id].caption, caption

    def _redo(self) -> None:
        self._doc.set_caption(self._bid, self._new)

    def undo(self) -> None:
        self._doc.set_caption(self._bid, self._old)


class RenameWire(_Command):
    def __init__(self, doc, wire_id: str, name: str):
        w = doc.diagram.wires[wire_id]
        super().__init__(f"Rename signal {w.name} to {name}")
        doc.diagram.check_signal_name(name, ignore=wire_id)
        self._doc, self._wid, self._old, self._new = doc, wire_id, w.name, name

    def _redo(self) -> None:
        self._doc.rename_wire(self._wid, self._new)

    def undo(self) -> None:
        self._doc.rename_wire(self._wid, self._old)


class SetWireLayout(_Command):
    """Move the bends of a wire (one drag of one segment is one command)."""

    def __init__(self, doc, wire_id: str, layout: dict):
        super().__init__("Move wire bend")
        self._doc, self._wid = doc, wire_id
        self._old, self._new = copy.deepcopy(doc.diagram.wires[wire_id].layout), copy.deepcopy(layout)

    def _redo(self) -> None:
        self._doc.set_wire_layout(self._wid, copy.deepcopy(self._new))

    def undo(self) -> None:
        self._doc.set_wire_layout(self._wid, copy.deepcopy(self._old))


class PasteFragment(_Command):
    """Add a copied fragment (blocks and the wires among them), shifted by ``offset``.

    Pasted blocks get free names (``P`` becomes ``P2`` if ``P`` is taken) and an estimator
    linked to a pasted plant follows that plant's new name.
    """

    def __init__(self, doc, fragment: Diagram, *, offset: tuple[float, float] = (20.0, 20.0)):
        super().__init__(f"Paste {len(fragment.blocks)} block(s)")
        self._doc = doc
        d = doc.diagram
        taken = {b.name for b in d.blocks.values()}
        renames: dict[str, str] = {}
        probe = Diagram()
        for b in d.blocks.values():
            probe.blocks[b.id] = b
        self._blocks: list[tuple[str, str, dict, dict, str]] = []
        for b in fragment.blocks.values():
            new = probe.unique_name(b.name) if b.name in taken else b.name
            probe.blocks[f"_paste_{b.id}"] = Block(f"_paste_{b.id}", b.kind, new)
            taken.add(new)
            renames[b.name] = new
        for b in fragment.blocks.values():
            params = copy.deepcopy(b.params)
            if isinstance(params.get("plant"), str) and params["plant"] in renames:
                params["plant"] = renames[params["plant"]]
            if isinstance(params.get("recipe"), dict) and params["recipe"].get("plant") in renames:
                params["recipe"]["plant"] = renames[params["recipe"]["plant"]]
            lay = dict(b.layout)
            lay["x"] = float(lay.get("x", 0.0)) + offset[0]
            lay["y"] = float(lay.get("y", 0.0)) + offset[1]
            self._blocks.append((b.id, b.kind, renames[b.name], params, lay, b.caption))
        self._wires = []
        for w in fragment.wires.values():
            targets = [t for t in w.targets if t.block in fragment.blocks]
            if w.source.block in fragment.blocks and targets:
                bends = {k: [[p[0] + offset[0], p[1] + offset[1]] for p in pts] for k, pts in w.layout.get("bends", {}).items()}
                self._wires.append((w, targets, bends))
        self._ids: dict[str, str] = {}
        self._wire_ids: list[str] = []
        self.block_ids: list[str] = []

    def _redo(self) -> None:
        self.block_ids = []
        for old_id, kind, name, params, lay, caption in self._blocks:
            bid = self._doc.add_block(kind, name, copy.deepcopy(params), layout=dict(lay), caption=caption, block_id=self._ids.get(old_id))
            self._ids[old_id] = bid
            self.block_ids.append(bid)
        first = not self._wire_ids
        if first:
            taken = {x.name for x in self._doc.diagram.wires.values()}
            self._names = [w.name if w.name not in taken and "." not in w.name else None for w, _, _ in self._wires]
        for k, (w, targets, bends) in enumerate(self._wires):
            src = PortRef(self._ids[w.source.block], w.source.port)
            wid = self._wire_ids[k] if not first else None
            for j, t in enumerate(targets):
                wid = self._doc.connect(src, PortRef(self._ids[t.block], t.port), wire_id=wid, name=self._names[k] if j == 0 else None)
            if first:
                self._wire_ids.append(wid)
            if bends:
                lay = dict(self._doc.diagram.wires[wid].layout)
                lay["bends"] = copy.deepcopy(bends)
                self._doc.set_wire_layout(wid, lay)

    def undo(self) -> None:
        for wid in reversed(self._wire_ids):
            if wid in self._doc.diagram.wires:
                self._doc.remove_wire(wid)
        for bid in reversed(self.block_ids):
            self._doc.remove_block(bid)
