"""Does each estimator read the command its plant gets?

A full-order estimator ``xhat' = A xhat + B u_e + L (y - C xhat - D u_e)`` of a plant
``x' = A x + B u_p`` has the estimation error ``e = x - xhat`` obeying

    e' = (A - L C) e + B (u_p - u_e)            (closed form, from the two equations)

so whatever reaches the plant's input and not the estimator's command input drives the
error: the estimate is biased by design. Disturbance and noise sources are unknown by
definition (that is what the estimator gain is for) and are left out; every other signal
is known to the controller and should reach both.

The comparison is structural and exact for what it covers: each input signal is written
as a signed sum of *terms* by walking back through summing junctions (a junction's output
is the signed sum of its inputs), on a graph of signals built with networkx. A term is a
signal not made by a junction (a gain's output, a source, a dynamic block's output...).
Two signals are the same command when every term has the same coefficient in both. A
term reached along two junction paths adds its coefficients; an algebraic loop made only
of junctions cannot be expanded and is left to the assembly, which reports it.
"""
from __future__ import annotations

from dataclasses import dataclass

import networkx as nx

from loopwright.engine.diagram import Block, Diagram, PortRef
from loopwright.engine.interconnect import Problem

__all__ = ["InputGap", "estimator_input_gaps", "gap_problems", "UNKNOWN_ROLES"]

UNKNOWN_ROLES = ("disturbance", "noise")


@dataclass(frozen=True)
class InputGap:
    """An estimator whose command input differs from its plant's input by known signals.

    Attributes
    ----------
    estimator, plant : str
        Block names.
    estimator_signal, plant_signal : str
        The signals into ``estimator.u`` and ``plant.u``.
    missing : tuple of str
        Known signals the plant gets and the estimator does not read.
    extra : tuple of str
        Signals the estimator reads that never reach the plant.
    differing : tuple of str
        Signals both read, with another sign or weight.
    block_ids, wire_ids : tuple of str
        The culprits: the estimator, the plant, the blocks making the signals named, and
        those signals' wires (the estimator's input wire first).
    """

    estimator: str
    plant: str
    estimator_signal: str
    plant_signal: str
    missing: tuple[str, ...]
    extra: tuple[str, ...]
    differing: tuple[str, ...]
    block_ids: tuple[str, ...]
    wire_ids: tuple[str, ...]

    @property
    def message(self) -> str:
        """One line naming the estimator, the plant and the signals that differ."""
        parts = []
        if self.missing:
            parts.append(f"plant {self.plant!r} also gets {_names(self.missing)}, which {self.estimator!r} never reads")
        if self.extra:
            parts.append(f"{self.estimator!r} also reads {_names(self.extra)}, which never reaches {self.plant!r}")
        if self.differing:
            parts.append(f"{_names(self.differing)} reach{'es' if len(self.differing) == 1 else ''} the two with another sign or weight")
        return (
            f"estimator {self.estimator!r} reads {self.estimator_signal} at its input u but plant {self.plant!r} gets "
            f"{self.plant_signal}: {'; '.join(parts)}; the estimate is biased whenever "
            f"{'it is' if len(self.missing + self.extra + self.differing) == 1 else 'they are'} not zero "
            f"(feed {self.estimator}.u from the signal the plant gets, before any disturbance is added)"
        )


def _names(names: tuple[str, ...]) -> str:
    return ", ".join(names)


def _sum_graph(diagram: Diagram) -> nx.DiGraph:
    """Signals (wire ids) as nodes; an edge a -> b with ``weight`` +-1 when a enters the junction making b."""
    g = nx.DiGraph()
    g.add_nodes_from(diagram.wires)
    into = {t: w for w in diagram.wires.values() for t in w.targets}
    out_of = {w.source: w for w in diagram.wires.values()}
    for b in diagram.blocks.values():
        if b.kind != "sum":
            continue
        out = out_of.get(PortRef(b.id, "out"))
        signs = b.params.get("signs")
        if out is None or not isinstance(signs, list):
            continue
        for k, s in enumerate(signs, 1):
            w = into.get(PortRef(b.id, f"in{k}"))
            sign = {"+": 1, "-": -1}.get(s) if isinstance(s, str) else None
            if w is None or sign is None:
                continue  # an open input adds nothing; a bad sign is a validation error
            if g.has_edge(w.id, out.id):
                g[w.id][out.id]["weight"] += sign
            else:
                g.add_edge(w.id, out.id, weight=sign)
    return g


def _terms(g: nx.DiGraph, wire_id: str) -> dict[str, int] | None:
    """The signal ``wire_id`` as ``{term wire id: coefficient}``; None across a junction-only loop."""
    up = nx.ancestors(g, wire_id) | {wire_id}
    sub = g.subgraph(up)
    if not nx.is_directed_acyclic_graph(sub):
        return None
    coef = {wire_id: 1}
    # From the signal back towards its terms: every successor is done before its predecessors.
    for node in reversed(list(nx.topological_sort(sub))):
        c = coef.get(node, 0)
        if c:
            for pred in sub.predecessors(node):
                coef[pred] = coef.get(pred, 0) + c * sub[pred][node]["weight"]
    return {n: c for n, c in coef.items() if sub.in_degree(n) == 0 and c != 0}


def _is_unknown(diagram: Diagram, wire_id: str) -> bool:
    src = diagram.blocks.get(diagram.wires[wire_id].source.block)
    return src is not None and src.kind == "source" and src.params.get("role") in UNKNOWN_ROLES


def _plant_of(diagram: Diagram, est: Block, g: nx.DiGraph, into: dict) -> Block | None:
    """The linked plant; for an estimator with its own model, the one plant whose output it measures."""
    link = est.params.get("plant")
    if isinstance(link, str):
        found = [b for b in diagram.blocks.values() if b.name == link and b.kind in ("plant", "dynamic")]
        return found[0] if found else None
    y = into.get(PortRef(est.id, "y"))
    terms = _terms(g, y.id) if y is not None else None
    if not terms:
        return None
    plants = {diagram.wires[w].source.block for w in terms}
    plants = [diagram.blocks[b] for b in plants if diagram.blocks[b].kind == "plant"]
    return plants[0] if len(plants) == 1 else None


def estimator_input_gaps(diagram: Diagram) -> list[InputGap]:
    """Every estimator whose command input ``u`` differs from its plant's input by known signals.

    Parameters
    ----------
    diagram : Diagram
        Read only.

    Returns
    -------
    list of InputGap
        In diagram order; empty when every estimator reads what its plant gets (or has
        nothing to compare: an open input, no plant found).

    Examples
    --------
    >>> d = Diagram()
    >>> _ = d.add_block("plant", "P", {"A": [[0.0]], "B": [[1.0]], "C": [[1.0]], "D": [[0.0]]})
    >>> _ = d.add_block("estimator", "est", {"plant": "P", "L": [[2.0]]})
    >>> _ = d.add_block("gain", "K", {"K": [[-1.0]]})
    >>> _ = d.add_block("source", "r", {"role": "reference", "width": 1})
    >>> _ = d.add_block("sum", "s", {"signs": ["+", "+"], "width": 1})
    >>> _ = d.connect("est.xhat", "K.in", name="xhat")
    >>> _ = d.connect("K.out", "s.in1", name="u_fb")
    >>> _ = d.connect("K.out", "est.u")
    >>> _ = d.connect("r.out", "s.in2", name="ref")
    >>> _ = d.connect("s.out", "P.u", name="u")
    >>> _ = d.connect("P.y", "est.y", name="y")
    >>> [gap.missing for gap in estimator_input_gaps(d)]
    [('ref',)]
    """
    g = _sum_graph(diagram)
    into = {t: w for w in diagram.wires.values() for t in w.targets}
    gaps = []
    for est in diagram.blocks.values():
        if est.kind != "estimator":
            continue
        plant = _plant_of(diagram, est, g, into)
        ue = into.get(PortRef(est.id, "u"))
        up = into.get(PortRef(plant.id, "u")) if plant is not None else None
        if ue is None or up is None or ue.id == up.id:
            continue
        te, tp = _terms(g, ue.id), _terms(g, up.id)
        if te is None or tp is None:
            continue
        missing, extra, differing = [], [], []
        for wid in sorted(set(te) | set(tp), key=list(diagram.wires).index):
            a, b = tp.get(wid, 0), te.get(wid, 0)
            if a == b or _is_unknown(diagram, wid):
                continue
            (missing if b == 0 else extra if a == 0 else differing).append(wid)
        named = missing + extra + differing
        if not named:
            continue
        wire_name = {w: diagram.wires[w].name for w in named}
        gaps.append(InputGap(
            estimator=est.name, plant=plant.name, estimator_signal=ue.name, plant_signal=up.name,
            missing=tuple(wire_name[w] for w in missing), extra=tuple(wire_name[w] for w in extra),
            differing=tuple(wire_name[w] for w in differing),
            block_ids=tuple(dict.fromkeys([est.id, plant.id, *(diagram.wires[w].source.block for w in named)])),
            wire_ids=tuple(dict.fromkeys([ue.id, *named])),
        ))
    return gaps


def gap_problems(gaps: list[InputGap]) -> list[Problem]:
    """The gaps as warnings for the problems list and the canvas (culprits attached)."""
    return [Problem(gap.message, gap.block_ids, gap.wire_ids, severity="warning") for gap in gaps]
