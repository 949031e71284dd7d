"""Loopwright's engine: the diagram model, its assembly into one closed-loop model, and the
analysis, design and export built on that model. Imports numpy, scipy and networkx only.

The scripting API in one place::

    from loopwright.engine import Diagram, assemble, summarize, load, save
"""
from __future__ import annotations

__all__ = ["CAUTION", "__version__", "Diagram", "assemble", "summarize", "load", "save"]

__version__ = "0.1.0"

CAUTION = (
    "Caution: these results are model-based. Verify them on the real system with protective "
    "limits in place before relying on them; local codes and licensed engineering practice prevail."
)


def __getattr__(name: str):
    # imported on first use, so `loopwright.engine.CAUTION` stays cheap for the GUI's about box
    if name == "Diagram":
        from loopwright.engine.diagram import Diagram

        return Diagram
    if name == "assemble":
        from loopwright.engine.interconnect import assemble

        return assemble
    if name == "summarize":
        from loopwright.engine.check import summarize

        return summarize
    if name in ("load", "save"):
        from loopwright.engine import project

        return getattr(project, name)
    raise AttributeError(f"module 'loopwright.engine' has no attribute {name!r}")
