"""Port names of each block kind (names only; widths come from :mod:`.blocks`)."""
from __future__ import annotations

from loopwright.engine.diagram import Block

__all__ = ["input_ports", "output_ports"]


def input_ports(block: Block) -> list[str]:
    """Input port names of ``block``, in stacking order."""
    kind = block.kind
    if kind == "plant":
        # a state-space plant may state where its load acts: x' = A x + B u + E d
        return ["u", "d"] if "E" in block.params else ["u"]
    if kind == "dynamic":
        return ["u"]
    if kind in ("gain", "integrator"):
        return ["in"]
    if kind == "sum":
        signs = block.params.get("signs", [])
        n = len(signs) if isinstance(signs, list) else 0
        return [f"in{k}" for k in range(1, n + 1)]
    if kind == "estimator":
        return ["u", "y"]
    return []


def output_ports(block: Block) -> list[str]:
    """Output port names of ``block``, in stacking order."""
    kind = block.kind
    if kind == "plant":
        # a performance output z = Cz x + Dz u + Fz d is there only when Cz is given
        return ["y", "z"] if "Cz" in block.params else ["y"]
    if kind == "dynamic":
        return ["y"]
    if kind == "estimator":
        return ["xhat", "yhat"]
    if kind in ("gain", "sum", "integrator", "source"):
        return ["out"]
    return []
