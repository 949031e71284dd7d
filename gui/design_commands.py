"""Undoable design edits: a redesign from a recipe, and a retune gesture (a pole dragged on the
pole map, a weight slider moved) that stays one undo step however many redesigns it made.

The new parameters always come from the engine (:func:`loopwright.engine.recipes.redesign`),
computed on the worker by :func:`redesigned_params`; the commands only swap parameters.
"""
from __future__ import annotations

import copy
from typing import Any

from loopwright.engine.recipes import redesign
from loopwright.gui.commands import _Command

__all__ = ["DesignBlocks", "RETUNE_ID", "redesigned_params", "with_recipe"]

#: ``QUndoCommand.id`` of a retune gesture; two commands of one gesture merge.
RETUNE_ID = 0x4C57


def with_recipe(diagram, block: str, recipe: dict) -> Any:
    """A copy of ``diagram`` whose block ``block`` carries ``recipe`` (matrices untouched)."""
    d = diagram.copy()
    b = d.block_by_name(block)
    params = copy.deepcopy(b.params)
    params["recipe"] = copy.deepcopy(recipe)
    d.set_params(b.id, params)
    return d


def redesigned_params(diagram, block: str, recipe: dict | None = None):
    """Worker side: design ``block`` (with ``recipe`` if given) and what follows from it.

    Returns
    -------
    (changes, results)
        ``changes`` maps block id -> new params for every block the design changed (the block,
        an integral gain it sets, feedforward gains that read it); ``results`` the engine's
        :class:`~loopwright.engine.recipes.BlockDesign` list.
    """
    start = with_recipe(diagram, block, recipe) if recipe is not None else diagram
    out, results = redesign(start, [block])
    changes = {bid: copy.deepcopy(b.params) for bid, b in out.blocks.items() if b.params != diagram.blocks[bid].params}
    return changes, results


class DesignBlocks(_Command):
    """Replace the parameters of the blocks a design changed, as one undo step.

    With ``gesture`` (a number that is the same for every step of one drag), consecutive
    commands of that gesture merge: undo returns to before the drag started.
    """

    def __init__(self, doc, changes: dict[str, dict], *, text: str, gesture: int | None = None):
        super().__init__(text)
        self._doc = doc
        self._gesture = gesture
        self._new = {bid: copy.deepcopy(p) for bid, p in changes.items()}
        self._old = {bid: copy.deepcopy(doc.diagram.blocks[bid].params) for bid in changes}
        for bid, p in self._new.items():
            doc.check_params(bid, p)

    def id(self) -> int:  # noqa: A003 - QUndoCommand's name
        return RETUNE_ID if self._gesture is not None else -1

    def mergeWith(self, other) -> bool:  # noqa: N802 - Qt's name
        if not isinstance(other, DesignBlocks) or other._gesture is None or other._gesture != self._gesture:
            return False
        for bid, p in other._new.items():
            self._old.setdefault(bid, other._old[bid])
            self._new[bid] = copy.deepcopy(p)
        return True

    def _redo(self) -> None:
        for bid, p in self._new.items():
            self._doc.set_params(bid, copy.deepcopy(p))

    def undo(self) -> None:
        for bid, p in self._old.items():
            self._doc.set_params(bid, copy.deepcopy(p))
