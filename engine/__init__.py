"""Loopwright's engine: the diagram model, its assembly into one closed-loop model, and the
analysis, design and export built on that model. Imports numpy, scipy and networkx only."""
from __future__ import annotations

__all__ = ["CAUTION", "__version__"]

__version__ = "0.1.0"

CAUTION = (
    "Caution: these results are model-based. Verify them on the real system with protective "
    "limits in place before relying on them; local codes and licensed engineering practice prevail."
)
