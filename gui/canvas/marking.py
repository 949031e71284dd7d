"""What blocks and wires share on the canvas: the engine's problems marked on them, a
highlight (a path of the audit, a search hit) that other panels can switch on, and tags
(the input and output of each kept pair, the loop break)."""
from __future__ import annotations

__all__ = ["Markable"]


class Markable:
    """Mixin for canvas items. The item calls ``_init_marks()`` in its constructor and
    provides ``_refresh_tooltip()``; ``update()`` comes from QGraphicsItem."""

    def _init_marks(self) -> None:
        self._problems: list[str] = []
        self._warnings_only = False
        self._highlighted = False
        self._tags: list = []

    def set_tags(self, tags: list[tuple[str, object]], font) -> None:
        """Pin ``(text, QColor)`` tags on the item (an empty list removes them)."""
        from loopwright.gui.canvas.tags import TagItem

        if [(t.text, t.colour.name()) for t in self._tags] == [(text, c.name()) for text, c in tags]:
            return
        for t in self._tags:
            if t.scene() is not None:
                t.scene().removeItem(t)
        # Tags are top-level items (not children) so they draw above every block.
        self._tags = [TagItem(text, colour, font) for text, colour in tags]
        if self.scene() is not None:
            for t in self._tags:
                self.scene().addItem(t)
        self._place_tags()

    def _drop_tags(self) -> None:
        """Take the tags off the scene (the item itself is leaving it)."""
        for t in self._tags:
            if t.scene() is not None:
                t.scene().removeItem(t)
        self._tags = []

    @property
    def tags(self) -> list[str]:
        return [t.text for t in self._tags]

    def _place_tags(self) -> None:
        """Line the tags up to the right of the item's tag anchor (``tag_anchor``, item coordinates)."""
        if not self._tags:
            return
        anchor = self.mapToScene(*self.tag_anchor())
        x, y = anchor.x(), anchor.y()
        for t in self._tags:
            t.setPos(x, y)
            x += t.width + 3

    def set_problems(self, messages: list[str], *, warnings_only: bool = False) -> None:
        """Mark the item with ``messages``; ``warnings_only``: none of them keeps the loop
        from assembling (drawn dashed instead of in the error colour)."""
        if messages != self._problems or warnings_only != self._warnings_only:
            self._problems = list(messages)
            self._warnings_only = warnings_only
            self._refresh_tooltip()
            self.update()

    @property
    def has_error(self) -> bool:
        return bool(self._problems) and not self._warnings_only

    @property
    def problems(self) -> list[str]:
        return list(self._problems)

    def set_highlighted(self, on: bool) -> None:
        if on != self._highlighted:
            self._highlighted = on
            self.update()

    def _problem_lines(self) -> str:
        return "".join(f"\n⚠ {m}" for m in self._problems)
