"""Does each estimator read the command its plant gets?

A full-order estimator ``xhat' = A xhat + B u_e + L (y - C xhat - D u_e)`` of a plant
``x' = A x + B u_p`` has the estimation error ``e = x - xhat`` obeying

    e' = (A - L C) e + B (u_p - u_e)            (closed form, from the two equations)

so whatever reaches the plant's input and not the estimator's command input drives the
error: the estimate is biased by design. Disturbance and noise sources are unknown by
definition (that is what the estimator gain is for) and are left out; every other signal
is known to the controller and should reach both.

The comparison is structural and exact for what it covers: each input signal is written
as a sum of *terms* by walking back through summing junctions (a junction's output is the
signed sum of its inputs) and static gains (a gain's output is ``K`` times its input), on
a graph of signals built with networkx. A term is a signal made neither by a junction nor
by a gain (a source, a plant's or estimator's output, a dynamic block's output...), so a
reference fed forward through a gain is named as the reference with the gains it passes
(``r.out via N``), and a disturbance scaled by a gain is still a disturbance. Each term
carries a coefficient: a sign, or the product of the signs and gain matrices along the
way. Two signals are the same command when every term has the same coefficient in both. A
term reached along two paths adds its coefficients. An algebraic loop made only of
junctions and gains cannot be expanded, nor can a gain whose matrix or size does not fit:
both are left to the assembly and the validation, which name them.
"""
from __future__ import annotations

from dataclasses import dataclass
from itertools import islice

import networkx as nx
import numpy as np

from loopwright.engine.diagram import Block, Diagram, PortRef
from loopwright.engine.errors import EngineError
from loopwright.engine.interconnect import Problem
from loopwright.engine.validation import as_matrix

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
        Known signals the plant gets and the estimator does not read, each with the gains
        it passes on its way to the plant (``"r.out via N"``, ``"r.out via N → G"``).
    extra : tuple of str
        Signals the estimator reads that never reach the plant (with the gains passed on
        the way to the estimator).
    differing : tuple of str
        Signals both read, with another sign or weight (with the gains passed on each side
        where there are any).
    block_ids, wire_ids : tuple of str
        The culprits: the estimator, the plant, the blocks making the signals named and the
        gains they pass, and those signals' wires and the gains' output wires (the
        estimator's input wire first).
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


class _Misfit(Exception):
    """Coefficients whose sizes do not chain: a sizing error the validation reports."""


def _scale(c: np.ndarray, w: np.ndarray) -> np.ndarray:
    """``c`` times ``w``; a 0-d array stands for that multiple of the identity."""
    if c.ndim == 0 or w.ndim == 0:
        return c * w
    if c.shape[1] != w.shape[0]:
        raise _Misfit
    return c @ w


def _aligned(a: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``a`` and ``b`` in one shape (a 0-d multiple of the identity meets a square matrix)."""
    if a.shape == b.shape:
        return a, b
    if a.ndim == 0 and b.ndim == 2 and b.shape[0] == b.shape[1]:
        return a * np.eye(b.shape[0]), b
    if b.ndim == 0 and a.ndim == 2 and a.shape[0] == a.shape[1]:
        return a, b * np.eye(a.shape[0])
    raise _Misfit


def _add(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    a, b = _aligned(a, b)
    return a + b


def _same(a: np.ndarray, b: np.ndarray) -> bool:
    """Equal coefficients; rounding apart (products of the same gains taken in another order)."""
    try:
        a, b = _aligned(a, b)
    except _Misfit:
        return False
    return bool(np.allclose(a, b, rtol=1e-9, atol=0.0))


def _gain_matrix(block: Block) -> np.ndarray | None:
    try:
        return as_matrix(block.params.get("K"), where=f"gain {block.name!r}", field="K", block_id=block.id)
    except (EngineError, TypeError, ValueError):
        return None  # the validation names a bad K; the signal stays a term here


def _signal_graph(diagram: Diagram) -> nx.DiGraph:
    """Signals (wire ids) as nodes; an edge a -> b when b is made from a by a junction or a gain.

    Each edge has ``weight`` (a 0-d sign for a junction, the gain's ``K`` for a gain) and
    ``gain`` (the gain's block id, or None for a junction).
    """
    g = nx.DiGraph()
    g.add_nodes_from(diagram.wires)
    into = {t: w for w in diagram.wires.values() for t in w.targets}
    out_of = {w.source: w for w in diagram.wires.values()}
    for b in diagram.blocks.values():
        if b.kind == "gain":
            out, w, K = out_of.get(PortRef(b.id, "out")), into.get(PortRef(b.id, "in")), _gain_matrix(b)
            if out is not None and w is not None and K is not None:
                g.add_edge(w.id, out.id, weight=K, gain=b.id)
            continue
        if b.kind != "sum":
            continue
        out = out_of.get(PortRef(b.id, "out"))
        signs = b.params.get("signs")
        if out is None or not isinstance(signs, list):
            continue
        for k, s in enumerate(signs, 1):
            w = into.get(PortRef(b.id, f"in{k}"))
            sign = {"+": 1.0, "-": -1.0}.get(s) if isinstance(s, str) else None
            if w is None or sign is None:
                continue  # an open input adds nothing; a bad sign is a validation error
            if g.has_edge(w.id, out.id):
                g[w.id][out.id]["weight"] = g[w.id][out.id]["weight"] + sign
            else:
                g.add_edge(w.id, out.id, weight=np.array(sign), gain=None)
    return g


def _terms(g: nx.DiGraph, wire_id: str) -> dict[str, np.ndarray] | None:
    """The signal ``wire_id`` as ``{term wire id: coefficient}``; None across a loop of junctions
    and gains, or where sizes do not chain."""
    up = nx.ancestors(g, wire_id) | {wire_id}
    sub = g.subgraph(up)
    if not nx.is_directed_acyclic_graph(sub):
        return None
    coef = {wire_id: np.array(1.0)}
    try:
        # From the signal back towards its terms: every successor is done before its predecessors.
        for node in reversed(list(nx.topological_sort(sub))):
            c = coef.get(node)
            if c is None:
                continue
            for pred in sub.predecessors(node):
                term = _scale(c, sub[pred][node]["weight"])
                coef[pred] = term if pred not in coef else _add(coef[pred], term)
    except _Misfit:
        return None
    return {n: c for n, c in coef.items() if sub.in_degree(n) == 0 and np.any(c != 0)}


def _gains_passed(diagram: Diagram, g: nx.DiGraph, term: str, target: str) -> tuple[tuple[str, ...], ...]:
    """The gains (block ids, in signal order) on each distinct path from ``term`` to ``target``."""
    sub = g.subgraph(nx.ancestors(g, target) | {target})
    found: dict[tuple[str, ...], None] = {}
    # A few paths name the route; a diagram with many parallel routes is named by its first ones.
    for path in islice(nx.all_simple_paths(sub, term, target), 8):
        found[tuple(sub[a][b]["gain"] for a, b in zip(path, path[1:]) if sub[a][b]["gain"] is not None)] = None
    return tuple(found)


def _route(diagram: Diagram, routes: tuple[tuple[str, ...], ...]) -> str:
    """``"via N"``, ``"via N → G"``, ``"directly and via N"``; empty when no gain is passed."""
    words = [("via " + " → ".join(diagram.blocks[b].name for b in r)) if r else "directly" for r in routes]
    return "" if words in ([], ["directly"]) else " and ".join(words)


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

    Fed forward through a gain, the reference is still named, with the gain it passes:

    >>> _ = d.add_block("gain", "N", {"K": [[3.0]]})
    >>> w = d.wire_into(d.resolve_port("s.in2"))
    >>> _ = d.disconnect(w.id, d.resolve_port("s.in2"))
    >>> _ = d.connect("r.out", "N.in")
    >>> _ = d.connect("N.out", "s.in2", name="u_ff")
    >>> [gap.missing for gap in estimator_input_gaps(d)]
    [('r.out via N',)]
    """
    g = _signal_graph(diagram)
    into = {t: w for w in diagram.wires.values() for t in w.targets}
    order = {w: k for k, w in enumerate(diagram.wires)}
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
        for wid in sorted(set(te) | set(tp), key=order.__getitem__):
            a, b = tp.get(wid), te.get(wid)
            if _is_unknown(diagram, wid) or (a is not None and b is not None and _same(a, b)):
                continue
            (missing if b is None else extra if a is None else differing).append(wid)
        named = missing + extra + differing
        if not named:
            continue
        to_plant = {w: _gains_passed(diagram, g, w, up.id) for w in missing + differing}
        to_est = {w: _gains_passed(diagram, g, w, ue.id) for w in extra + differing}
        gains = [b for routes in (*to_plant.values(), *to_est.values()) for r in routes for b in r]

        def called(wid: str, routes: tuple[tuple[str, ...], ...]) -> str:
            route = _route(diagram, routes)
            return f"{diagram.wires[wid].name} {route}" if route else diagram.wires[wid].name

        def called_both(wid: str) -> str:
            plant_route, est_route = _route(diagram, to_plant[wid]), _route(diagram, to_est[wid])
            if plant_route == est_route:
                return called(wid, to_plant[wid])
            return (f"{diagram.wires[wid].name} ({plant_route or 'directly'} to the plant, "
                    f"{est_route or 'directly'} to the estimator)")

        gaps.append(InputGap(
            estimator=est.name, plant=plant.name, estimator_signal=ue.name, plant_signal=up.name,
            missing=tuple(called(w, to_plant[w]) for w in missing),
            extra=tuple(called(w, to_est[w]) for w in extra),
            differing=tuple(called_both(w) for w in differing),
            block_ids=tuple(dict.fromkeys([est.id, plant.id, *(diagram.wires[w].source.block for w in named), *gains])),
            wire_ids=tuple(dict.fromkeys([ue.id, *named, *_gain_outputs(diagram, gains)])),
        ))
    return gaps


def _gain_outputs(diagram: Diagram, gain_ids: list[str]) -> list[str]:
    """The output wires of the gains passed, so the canvas marks the whole route."""
    out_of = {w.source: w.id for w in diagram.wires.values()}
    return [out_of[PortRef(b, "out")] for b in gain_ids if PortRef(b, "out") in out_of]


def gap_problems(gaps: list[InputGap]) -> list[Problem]:
    """The gaps as warnings for the problems list and the canvas (culprits attached)."""
    return [Problem(gap.message, gap.block_ids, gap.wire_ids, severity="warning") for gap in gaps]
