"""Exception hierarchy of the engine.

Every error names the thing at fault (block, port, wire, field) and carries the ids the
canvas needs to highlight it. Each domain error also subclasses the matching builtin, so
callers that only know ``ValueError`` still catch it.
"""
from __future__ import annotations

from collections.abc import Iterable

__all__ = [
    "EngineError",
    "DiagramError",
    "ParameterError",
    "DimensionError",
    "ConnectionError_",
    "AlgebraicLoopError",
    "ProjectFileError",
    "FormatVersionError",
    "UnknownNameError",
    "DesignError",
    "AnalysisError",
]


class EngineError(Exception):
    """Base of every error the engine raises on purpose.

    Parameters
    ----------
    message : str
        One line that says what is wrong and where.
    block_ids, wire_ids : iterable of str, optional
        Internal ids of the blocks and wires at fault, for highlighting.
    """

    def __init__(self, message: str, *, block_ids: Iterable[str] = (), wire_ids: Iterable[str] = ()):
        super().__init__(message)
        self.message = message
        self.block_ids = tuple(block_ids)
        self.wire_ids = tuple(wire_ids)

    def __str__(self) -> str:
        return self.message


class DiagramError(EngineError, ValueError):
    """The diagram as drawn cannot be turned into a model."""


class ParameterError(DiagramError):
    """A block parameter is malformed: wrong shape, not finite, improper, unknown kind."""

    def __init__(self, message: str, *, field: str | None = None, **kw):
        super().__init__(message, **kw)
        self.field = field


class DimensionError(DiagramError):
    """Widths do not agree (a wire, a port, a matrix against its neighbours)."""


class ConnectionError_(DiagramError):
    """An input port is unconnected, or connected twice, or a wire names a missing port.

    (Trailing underscore: the builtin ``ConnectionError`` is about sockets.)
    """


class AlgebraicLoopError(DiagramError):
    """A loop of direct feedthrough has no unique solution ((I - M D) is singular)."""


class ProjectFileError(EngineError, ValueError):
    """A project file cannot be read: not JSON, not ours, or a field is malformed."""


class FormatVersionError(ProjectFileError):
    """The project file was written by a newer Loopwright."""


class UnknownNameError(EngineError, KeyError):
    """A name (signal, source, block) that does not exist; ``suggestions`` holds close ones."""

    def __init__(self, message: str, *, suggestions: Iterable[str] = (), **kw):
        super().__init__(message, **kw)
        self.suggestions = tuple(suggestions)

    def __str__(self) -> str:  # KeyError would quote the message otherwise
        return self.message


class DesignError(EngineError, ValueError):
    """A design request cannot be met (uncontrollable mode, bad weights, no solution)."""


class AnalysisError(EngineError, ValueError):
    """An analysis request does not make sense for this model (e.g. a loop break on a source)."""
