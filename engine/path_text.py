"""A path of the path audit as one short line of text (light: the command line's help reads it)."""
from __future__ import annotations

__all__ = ["PATH_TEXT_MAX", "path_text"]

# A path of more blocks than this is shown in text by its ends (:func:`path_text`).
PATH_TEXT_MAX = 12
_PATH_TEXT_ENDS = 3


def path_text(names: list[str], *, sep: str = " ") -> str:
    """The blocks of a path as one short line: every name when there are at most
    :data:`PATH_TEXT_MAX`, else the first and last three with the number left out between.

    On a loop every path passes nearly every block, so a table listing each path in full
    grows with the square of the diagram (4,000 rows of 2,000 names for a chain of 2,000
    gains); this keeps each line short (and in ASCII, like every line the command line
    prints). The full lists stay in the audit's rows
    (:attr:`loopwright.engine.audit.AuditRow.blocks`).

    Examples
    --------
    >>> path_text(["r", "e", "K", "P"])
    'r e K P'
    >>> path_text([f"g{k}" for k in range(2000)])
    'g0 g1 g2 ... 1,994 more ... g1997 g1998 g1999'
    """
    if len(names) <= PATH_TEXT_MAX:
        return sep.join(names)
    k = _PATH_TEXT_ENDS
    return sep.join([*names[:k], f"... {len(names) - 2 * k:,} more ...", *names[-k:]])
