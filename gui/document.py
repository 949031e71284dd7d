"""The open diagram as seen by the GUI: the only code that changes a :class:`Diagram`.

:class:`Document` wraps one ``Diagram`` and its ``QUndoStack``. Commands from
:mod:`loopwright.gui.commands` call its methods; each method validates first (through the
engine), returns early when nothing would change, changes the data, bumps the revision
and emits one specific signal naming what changed. Views read the new state from the
document in their handlers and never touch the diagram themselves.
"""
from __future__ import annotations

import copy
from pathlib import Path
from typing import Any

from PySide6.QtCore import QObject, Signal
from PySide6.QtGui import QUndoStack

from loopwright.engine.diagram import Block, Diagram, PortRef, Wire
from loopwright.engine.errors import ConnectionError_, DiagramError
from loopwright.engine.ports import input_ports, output_ports

__all__ = ["Document"]


class Document(QObject):
    """One diagram, its undo history, its file path and its revision counter.

    Signals carry ids; handlers look the current values up in :attr:`diagram`.
    """

    block_added = Signal(str)
    block_removed = Signal(str)
    wire_added = Signal(str)
    wire_removed = Signal(str)
    wire_changed = Signal(str)  # targets changed (fan-out grew or shrank)
    params_changed = Signal(str)
    layout_changed = Signal(str)
    wire_layout_changed = Signal(str)
    renamed = Signal(str)
    wire_renamed = Signal(str)
    caption_changed = Signal(str)
    diagram_replaced = Signal()
    settings_changed = Signal(str)  # the key of diagram.settings that changed
    path_changed = Signal(str)
    changed = Signal(int)  # the new revision, after any edit

    def __init__(self, diagram: Diagram | None = None, *, path: str | None = None, parent: QObject | None = None):
        super().__init__(parent)
        self._diagram = diagram if diagram is not None else Diagram()
        self._path = path
        self.revision = 0
        self.undo_stack = QUndoStack(self)

    # ---- read access ---------------------------------------------------------------
    @property
    def diagram(self) -> Diagram:
        """The live diagram. Read it; never change it outside this class."""
        return self._diagram

    @property
    def path(self) -> str | None:
        return self._path

    def set_path(self, path: str | None) -> None:
        if path != self._path:
            self._path = path
            self.path_changed.emit(path or "")

    @property
    def is_dirty(self) -> bool:
        return not self.undo_stack.isClean()

    def mark_saved(self, path: str) -> None:
        self.set_path(path)
        self.undo_stack.setClean()

    def snapshot(self) -> Diagram:
        """An independent deep copy for worker threads."""
        return self._diagram.copy()

    def push(self, command) -> None:
        """Run a command and record it for undo.

        Raises
        ------
        EngineError
            The engine refused the edit; nothing changed and nothing was recorded.
        """
        self.undo_stack.push(command)
        err = getattr(command, "error", None)
        if err is not None:
            raise err

    def title(self) -> str:
        return Path(self._path).name if self._path else "untitled"

    # ---- whole-diagram -------------------------------------------------------------
    def replace_diagram(self, diagram: Diagram, *, path: str | None = None, dirty: bool = False) -> None:
        """Swap in another diagram (new, open, recover); the undo history starts afresh."""
        self._diagram = diagram
        self.undo_stack.clear()
        self.set_path(path)
        if dirty:
            # A recovered autosave has never been saved by the user: keep it dirty by
            # moving the clean index out of reach.
            self.undo_stack.resetClean()
        self._bump()
        self.diagram_replaced.emit()

    # ---- analysis settings ---------------------------------------------------------
    def set_setting(self, key: str, value: Any) -> None:
        """Set (or with ``None`` remove) one entry of ``diagram.settings``."""
        settings = self._diagram.settings
        if settings.get(key) == value:
            return
        if value is None:
            settings.pop(key, None)
        else:
            settings[key] = copy.deepcopy(value)
        self._bump()
        self.settings_changed.emit(key)

    # ---- blocks --------------------------------------------------------------------
    def add_block(
        self, kind: str, name: str, params: dict[str, Any] | None = None, *, layout: dict | None = None, caption: str = "", block_id: str | None = None
    ) -> str:
        bid = self._diagram.add_block(kind, name, params, layout=layout, caption=caption, block_id=block_id)
        self._bump()
        self.block_added.emit(bid)
        return bid

    def restore_block(self, block: Block) -> None:
        self._diagram.restore_block(block)
        self._bump()
        self.block_added.emit(block.id)

    def remove_block(self, block_id: str) -> Block:
        """Remove a block that no wire touches any more (commands detach wires first)."""
        blk = self._block(block_id)
        for w in self._diagram.wires.values():
            if w.source.block == block_id or any(t.block == block_id for t in w.targets):
                raise ConnectionError_(f"block {blk.name!r} still has wire {w.name!r} attached", block_ids=[block_id], wire_ids=[w.id])
        snapshot = copy.deepcopy(blk)
        self._diagram.remove_block(block_id)
        self._bump()
        self.block_removed.emit(block_id)
        return snapshot

    def check_params(self, block_id: str, params: dict[str, Any]) -> None:
        """Raise the engine's error if ``params`` cannot be given to the block.

        Refuses malformed parameters (through ``blocks.port_widths``) and changes that
        would remove a port a wire still uses (a summing junction losing an input).
        """
        blk = self._block(block_id)
        trial = Block(blk.id, blk.kind, blk.name, copy.deepcopy(params), dict(blk.layout), blk.caption)
        kept_in, kept_out = set(input_ports(trial)), set(output_ports(trial))
        for w in self._diagram.wires.values():
            if w.source.block == block_id and w.source.port not in kept_out:
                raise ConnectionError_(
                    f"block {blk.name!r}: port {w.source.port} carries wire {w.name!r}; delete the wire first",
                    block_ids=[block_id], wire_ids=[w.id],
                )
            for t in w.targets:
                if t.block == block_id and t.port not in kept_in:
                    raise ConnectionError_(
                        f"block {blk.name!r}: input {t.port} is fed by wire {w.name!r}; delete the wire first",
                        block_ids=[block_id], wire_ids=[w.id],
                    )
        _check_block_params(trial, self._diagram)

    def set_params(self, block_id: str, params: dict[str, Any]) -> None:
        blk = self._block(block_id)
        if blk.params == params:
            return
        self.check_params(block_id, params)
        self._diagram.set_params(block_id, params)
        self._bump()
        self.params_changed.emit(block_id)

    def set_layout(self, block_id: str, layout: dict[str, Any]) -> None:
        blk = self._block(block_id)
        merged = {**blk.layout, **layout}
        if merged == blk.layout:
            return
        rot = merged.get("rotation", 0)
        if not isinstance(rot, (int, float)) or rot % 90:
            raise DiagramError(f"block {blk.name!r}: rotation {rot!r} is not a multiple of 90 degrees", block_ids=[block_id])
        self._diagram.set_layout(block_id, **layout)
        self._bump()
        self.layout_changed.emit(block_id)

    def rename_block(self, block_id: str, name: str) -> None:
        blk = self._block(block_id)
        if blk.name == name:
            return
        old = blk.name
        before_wires = {w.id: w.name for w in self._diagram.wires.values()}
        linked = [b.id for b in self._diagram.blocks.values() if b.params.get("plant") == old
                  or (isinstance(b.params.get("recipe"), dict) and b.params["recipe"].get("plant") == old)]
        self._diagram.rename_block(block_id, name)
        self._bump()
        self.renamed.emit(block_id)
        for wid, wname in before_wires.items():
            if self._diagram.wires[wid].name != wname:
                self.wire_renamed.emit(wid)
        for bid in linked:
            self.params_changed.emit(bid)

    def set_caption(self, block_id: str, caption: str) -> None:
        blk = self._block(block_id)
        if blk.caption == caption:
            return
        if not isinstance(caption, str) or len(caption) > 200:
            raise DiagramError(f"block {blk.name!r}: caption is too long (at most 200 characters)", block_ids=[block_id])
        blk.caption = caption
        self._bump()
        self.caption_changed.emit(block_id)

    # ---- wires ---------------------------------------------------------------------
    def connect(self, source: PortRef, target: PortRef, *, name: str | None = None, wire_id: str | None = None) -> str:
        """Wire ``source`` to ``target`` (a fan-out if the source already has a wire)."""
        existing = self._diagram.wire_from(source)
        wid = self._diagram.connect(source, target, name=name, wire_id=wire_id)
        self._bump()
        if existing is None:
            self.wire_added.emit(wid)
        else:
            self.wire_changed.emit(wid)
        return wid

    def disconnect(self, wire_id: str, target: PortRef) -> bool:
        """Detach one target; True when that removed the wire."""
        w = self._wire(wire_id)
        if target not in w.targets:
            return False
        gone = self._diagram.disconnect(wire_id, target)
        self._bump()
        (self.wire_removed if gone else self.wire_changed).emit(wire_id)
        return gone

    def remove_wire(self, wire_id: str) -> Wire:
        wire = copy.deepcopy(self._diagram.remove_wire(wire_id))
        self._bump()
        self.wire_removed.emit(wire_id)
        return wire

    def restore_wire(self, wire: Wire) -> None:
        """Put back a wire exactly as it was (undo of a delete)."""
        d = self._diagram
        if wire.source.block not in d.blocks or wire.source.port not in output_ports(d.blocks[wire.source.block]):
            raise ConnectionError_(f"wire {wire.name!r}: its source {wire.source.block}.{wire.source.port} does not exist", wire_ids=[wire.id])
        if d.wire_from(wire.source) is not None:
            raise ConnectionError_(f"wire {wire.name!r}: output {d.port_label(wire.source)} already has a wire", wire_ids=[wire.id])
        for t in wire.targets:
            if t.block not in d.blocks or t.port not in input_ports(d.blocks[t.block]):
                raise ConnectionError_(f"wire {wire.name!r}: target {t.block}.{t.port} does not exist", wire_ids=[wire.id])
            fed = d.wire_into(t)
            if fed is not None:
                raise ConnectionError_(f"wire {wire.name!r}: {d.port_label(t)} is already fed by {fed.name!r}", wire_ids=[wire.id, fed.id])
        d.check_signal_name(wire.name, ignore=wire.id)
        d.restore_wire(wire)
        self._bump()
        self.wire_added.emit(wire.id)

    def rename_wire(self, wire_id: str, name: str) -> None:
        if self._wire(wire_id).name == name:
            return
        self._diagram.rename_wire(wire_id, name)
        self._bump()
        self.wire_renamed.emit(wire_id)

    def set_wire_layout(self, wire_id: str, layout: dict[str, Any]) -> None:
        if self._wire(wire_id).layout == layout:
            return
        self._diagram.set_wire_layout(wire_id, layout)
        self._bump()
        self.wire_layout_changed.emit(wire_id)

    # ---- internals -----------------------------------------------------------------
    def _block(self, block_id: str) -> Block:
        try:
            return self._diagram.blocks[block_id]
        except KeyError:
            raise DiagramError(f"no block with id {block_id!r}") from None

    def _wire(self, wire_id: str) -> Wire:
        try:
            return self._diagram.wires[wire_id]
        except KeyError:
            raise DiagramError(f"no wire with id {wire_id!r}") from None

    def _bump(self) -> None:
        self.revision += 1
        self.changed.emit(self.revision)


def _check_block_params(block: Block, diagram: Diagram) -> None:
    """Let the engine judge one block's parameters on their own (ParameterError if bad)."""
    from loopwright.engine.blocks import port_widths
    from loopwright.engine.errors import ParameterError

    try:
        port_widths(block, diagram)
    except ParameterError:
        raise
    except (ValueError, TypeError) as err:
        if isinstance(err, DiagramError):
            return
        # The engine did not recognise this malformation itself; refuse it all the same.
        raise ParameterError(
            f"block {block.name!r}: parameters cannot be read ({err})", field=None, block_ids=[block.id]
        ) from err
    except DiagramError:
        # Disagreements with neighbours (widths, links) are the problems list's job; only a
        # block that cannot be read at all is refused here.
        pass
