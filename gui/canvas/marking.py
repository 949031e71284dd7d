"""What blocks and wires share on the canvas: the engine's problems marked on them, and a
highlight (a path of the audit, a search hit) that other panels can switch on."""
from __future__ import annotations

__all__ = ["Markable"]


class Markable:
    """Mixin for canvas items. The item calls ``_init_marks()`` in its constructor and
    provides ``_refresh_tooltip()``; ``update()`` comes from QGraphicsItem."""

    def _init_marks(self) -> None:
        self._problems: list[str] = []
        self._highlighted = False

    def set_problems(self, messages: list[str]) -> None:
        if messages != self._problems:
            self._problems = list(messages)
            self._refresh_tooltip()
            self.update()

    @property
    def problems(self) -> list[str]:
        return list(self._problems)

    def set_highlighted(self, on: bool) -> None:
        if on != self._highlighted:
            self._highlighted = on
            self.update()

    def _problem_lines(self) -> str:
        return "".join(f"\n⚠ {m}" for m in self._problems)
