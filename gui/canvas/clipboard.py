"""Copy and paste of diagram fragments through the system clipboard.

A fragment is a small diagram (the chosen blocks and the wires among them) written in
the project-file format by :func:`loopwright.engine.project.dumps`, under a MIME type of
our own, so it travels between two windows or two running copies of the app.
"""
from __future__ import annotations

from PySide6.QtCore import QByteArray, QMimeData

from loopwright.engine.diagram import Diagram
from loopwright.engine.project import dumps, loads

__all__ = ["FRAGMENT_MIME", "make_fragment", "fragment_to_mime", "fragment_from_mime"]

FRAGMENT_MIME = "application/x-loopwright-fragment+json"


def make_fragment(diagram: Diagram, block_ids) -> Diagram:
    """The blocks ``block_ids`` and every wire branch that runs between two of them."""
    # Diagram order, not selection order: the pasted model then lists its states and
    # signals in the same order as the original.
    wanted = set(block_ids)
    keep = [b for b in diagram.blocks if b in wanted]
    frag = Diagram()
    for bid in keep:
        b = diagram.blocks[bid]
        frag.add_block(b.kind, b.name, b.params, layout=dict(b.layout), caption=b.caption, block_id=bid)
    chosen = set(keep)
    for w in diagram.wires.values():
        if w.source.block not in chosen:
            continue
        wid = None
        for j, t in enumerate(w.targets):
            if t.block in chosen:
                wid = frag.connect(w.source, t, name=w.name, wire_id=w.id if wid is None else wid)
        if wid is not None:
            bends = w.layout.get("bends", {})
            kept = {}
            for new_j, t in enumerate(frag.wires[wid].targets):
                old_j = w.targets.index(t)
                if str(old_j) in bends:
                    kept[str(new_j)] = bends[str(old_j)]
            if kept:
                frag.wires[wid].layout = {"bends": kept}
    return frag


def fragment_to_mime(fragment: Diagram) -> QMimeData:
    md = QMimeData()
    md.setData(FRAGMENT_MIME, QByteArray(dumps(fragment).encode("utf-8")))
    md.setText(", ".join(b.name for b in fragment.blocks.values()))
    return md


def fragment_from_mime(md: QMimeData) -> Diagram | None:
    """The fragment carried by ``md``, or None if it carries none (ProjectFileError if damaged)."""
    if md is None or not md.hasFormat(FRAGMENT_MIME):
        return None
    return loads(bytes(md.data(FRAGMENT_MIME)).decode("utf-8"), origin="clipboard")
