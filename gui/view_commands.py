"""Undoable edits of what the plot panels look at: the kept pairs and the loop break.

Both live in the diagram's settings (``settings.pairs``, ``settings.loop_break``) and are
saved with it: they describe which questions this loop is asked (the CLI's ``margins``
already reads the loop break from there), so they travel with the file and an edit of
them is undone like any other.

``settings.pairs`` is a list of ``{"input": ..., "output": ...}``: the input a source name
or ``inject:<signal>``, the output a signal name.
"""
from __future__ import annotations

import copy

from PySide6.QtGui import QUndoCommand

__all__ = ["SetAnalysisSetting", "pairs_of", "add_pair", "remove_pair", "set_loop_break", "input_label"]


def pairs_of(diagram) -> list[tuple[str, str]]:
    """The kept pairs of ``diagram`` as (input, output) tuples, in order, well-formed only."""
    out = []
    for p in diagram.settings.get("pairs") or []:
        if isinstance(p, dict) and isinstance(p.get("input"), str) and isinstance(p.get("output"), str):
            out.append((p["input"], p["output"]))
    return out


def input_label(name: str) -> str:
    """How an input is written in the panels: ``injection on u`` or ``source r``."""
    return f"injection on {name.split(':', 1)[1]}" if name.startswith("inject:") else f"source {name}"


class SetAnalysisSetting(QUndoCommand):
    """Set one entry of the diagram's analysis settings (``None`` removes it)."""

    def __init__(self, doc, key: str, value, text: str):
        super().__init__(text)
        self._doc, self._key = doc, key
        self._old = copy.deepcopy(doc.diagram.settings.get(key))
        self._new = copy.deepcopy(value)
        self.error = None

    def redo(self) -> None:
        self._doc.set_setting(self._key, self._new)

    def undo(self) -> None:
        self._doc.set_setting(self._key, self._old)


def add_pair(doc, source: str, signal: str) -> SetAnalysisSetting | None:
    """The command keeping one more pair (None when it is already kept)."""
    pairs = pairs_of(doc.diagram)
    if (source, signal) in pairs:
        return None
    value = [{"input": s, "output": o} for s, o in pairs + [(source, signal)]]
    return SetAnalysisSetting(doc, "pairs", value, f"Look at {signal} from the {input_label(source)}")


def remove_pair(doc, index: int) -> SetAnalysisSetting:
    pairs = pairs_of(doc.diagram)
    src, sig = pairs[index]
    value = [{"input": s, "output": o} for k, (s, o) in enumerate(pairs) if k != index] or None
    return SetAnalysisSetting(doc, "pairs", value, f"Stop looking at {sig} from the {input_label(src)}")


def set_loop_break(doc, where: str | None) -> SetAnalysisSetting:
    text = f"Break the loop at {where}" if where else "Close the loop break"
    return SetAnalysisSetting(doc, "loop_break", where or None, text)
