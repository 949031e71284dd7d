"""A grid of square cells over the scene that finds the stored rectangles near a given one.

Placing one wire's name or lanes asks which other names, block bodies and wire segments
lie where it would go. Asking every one of them made opening a diagram quadratic in its
wires (seconds for a few hundred) and an edit of one block linear in the whole diagram;
the grid answers from the few cells the question covers.
"""
from __future__ import annotations

import math
from collections.abc import Hashable, Iterable, Iterator

__all__ = ["RectIndex"]

Box = tuple[float, float, float, float]  # x0, y0, x1, y1 with x0 <= x1 and y0 <= y1


class RectIndex:
    """Items, each with one or more boxes, kept by the grid cells their boxes cover.

    Parameters
    ----------
    cell : float
        Side of a grid cell in scene units (a little more than a block is about right).
    """

    def __init__(self, cell: float = 160.0):
        self._cell = float(cell)
        self._cells: dict[tuple[int, int], set] = {}
        self._items: dict[Hashable, tuple[list[Box], object]] = {}

    def __len__(self) -> int:
        return len(self._items)

    def __contains__(self, key) -> bool:
        return key in self._items

    def clear(self) -> None:
        self._cells.clear()
        self._items.clear()

    def _span(self, box: Box) -> Iterator[tuple[int, int]]:
        c = self._cell
        i0, i1 = math.floor(box[0] / c), math.floor(box[2] / c)
        j0, j1 = math.floor(box[1] / c), math.floor(box[3] / c)
        for i in range(i0, i1 + 1):
            for j in range(j0, j1 + 1):
                yield i, j

    def set(self, key: Hashable, boxes: Iterable[Box], payload: object = None) -> None:
        """Store (or replace) ``key`` with its ``boxes``; ``payload`` is handed back by :meth:`near`."""
        self.discard(key)
        boxes = [(min(b[0], b[2]), min(b[1], b[3]), max(b[0], b[2]), max(b[1], b[3])) for b in boxes]
        if not boxes:
            return
        self._items[key] = (boxes, payload)
        for box in boxes:
            for cell in self._span(box):
                self._cells.setdefault(cell, set()).add(key)

    def discard(self, key: Hashable) -> None:
        old = self._items.pop(key, None)
        if old is None:
            return
        for box in old[0]:
            for cell in self._span(box):
                keys = self._cells.get(cell)
                if keys is not None:
                    keys.discard(key)
                    if not keys:
                        del self._cells[cell]

    def near(self, box: Box, *, skip: Hashable | None = None) -> list[tuple[Hashable, object]]:
        """``(key, payload)`` of every item with a cell in common with ``box`` (a superset
        of the items whose boxes meet it: the caller tests the exact overlap), ``skip`` left out."""
        box = (min(box[0], box[2]), min(box[1], box[3]), max(box[0], box[2]), max(box[1], box[3]))
        keys: set = set()
        for cell in self._span(box):
            found = self._cells.get(cell)
            if found:
                keys |= found
        keys.discard(skip)
        return [(k, self._items[k][1]) for k in keys]
