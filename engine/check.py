"""The first look at a diagram: size, closed-loop poles, stability and the separation check.

Separation check
----------------
For each estimator linked to a plant (``params["plant"]``) the estimation error
``e = x - xhat`` replaces ``xhat`` as a state coordinate (``T`` below is its own inverse).
When the estimator sees the same input and output as the plant and holds the plant's
model, the error obeys ``e' = (A - L C) e`` regardless of the rest of the loop, the
transformed matrix is block triangular and the closed-loop poles are

    eig(loop with the true state fed back)  together with  eig(A - L C).

For a static feedback ``u = -K xhat`` the first set is ``eig(A - B K)`` (plus the poles of
any other blocks in the loop). The check computes both sets independently of the
assembled poles and reports whether they match.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import networkx as nx
import numpy as np
from scipy.optimize import linear_sum_assignment

from loopwright.engine.blocks import plant_matrices, realize
from loopwright.engine.diagram import Diagram, PortRef
from loopwright.engine.interconnect import AssembledModel, assemble
from loopwright.engine.recipes import stale_blocks

__all__ = ["CheckReport", "Separation", "summarize", "pole_table", "poles_match"]


@dataclass(frozen=True)
class Separation:
    """Expected poles from the separation principle against the assembled ones."""

    expected: np.ndarray  # complex, sorted
    state_feedback_poles: np.ndarray
    estimator_poles: np.ndarray
    matches: bool
    max_mismatch: float
    pairs: tuple[tuple[str, str], ...]  # (plant, estimator)
    gains: dict[str, np.ndarray] = field(default_factory=dict)  # estimator -> static K (u = -K xhat), when static


@dataclass(frozen=True)
class CheckReport:
    states: int
    signals: tuple[str, ...]
    sources: dict[str, str]
    poles: np.ndarray  # complex, sorted by real part then imaginary
    stable: bool
    rhp_poles: int
    marginal_poles: int
    separation: Separation | None
    warnings: tuple[str, ...]
    model: AssembledModel = field(repr=False)


def _sorted(p: np.ndarray) -> np.ndarray:
    p = np.asarray(p, dtype=complex)
    return p[np.lexsort((p.imag, p.real))]


def _tolerance(p: np.ndarray) -> np.ndarray:
    return 1e-9 * np.maximum(1.0, np.abs(p))


def poles_match(a: np.ndarray, b: np.ndarray, *, rtol: float = 1e-5) -> tuple[bool, float]:
    """Whether two pole sets are equal as multisets (optimal pairing); and the worst relative gap.

    A pole repeated within the set moves by about the square root of the rounding error
    when the matrix is perturbed (a double pole splits like ``sqrt(eps)``), so such poles
    are allowed a gap of ``sqrt(rtol) / 10`` rather than ``rtol``.
    """
    a, b = np.asarray(a, complex), np.asarray(b, complex)
    if a.size != b.size:
        return False, float("inf")
    if a.size == 0:
        return True, 0.0
    scale = np.maximum(1.0, np.abs(a))
    cost = np.abs(a[:, None] - b[None, :]) / scale[:, None]
    r, c = linear_sum_assignment(cost)
    near = np.abs(a[:, None] - a[None, :]) / scale[:, None] < 1e-3
    allowed = np.where(near.sum(axis=1) > 1, max(rtol, np.sqrt(rtol) / 10), rtol)
    gaps = cost[r, c]
    return bool(np.all(gaps <= allowed[r])), float(gaps.max())


def pole_table(poles: np.ndarray) -> list[dict[str, float]]:
    """Each pole with its damping ratio and natural frequency (rad/s)."""
    rows = []
    for p in _sorted(poles):
        wn = abs(p)
        zeta = -p.real / wn if wn > 0 else (1.0 if p.real == 0 else float("nan"))
        rows.append({"re": float(p.real), "im": float(p.imag), "damping": float(zeta), "wn_rad_s": float(wn)})
    return rows


def _separation(model: AssembledModel, poles: np.ndarray) -> Separation | None:
    diagram = model.diagram
    pairs, err_rows, plant_rows, gains = [], [], [], {}
    graph = diagram.graph()
    est_poles = []
    for b in diagram.blocks.values():
        link = b.params.get("plant") if b.kind == "estimator" else None
        if not link or b.name not in model.states or link not in model.states:
            continue
        xs, es = model.states[link], model.states[b.name]
        if xs.stop - xs.start != es.stop - es.start:
            continue
        pairs.append((link, b.name))
        plant_rows.append(np.arange(xs.start, xs.stop))
        err_rows.append(np.arange(es.start, es.stop))
        A, _, C, _ = plant_matrices(diagram, link)
        L = realize(b, diagram).B[:, -C.shape[0]:]
        est_poles.append(np.linalg.eigvals(A - L @ C))
        k = _static_feedback(model, b.name, link, graph)
        if k is not None:
            gains[b.name] = k
    if not pairs:
        return None
    n = model.n_states
    T = np.eye(n)
    for xr, er in zip(plant_rows, err_rows):
        T[er, :] = 0.0
        T[er, xr] = 1.0
        T[er, er] = -1.0
    At = T @ model.A @ T  # T is its own inverse
    e_idx = np.concatenate(err_rows)
    keep = np.setdiff1d(np.arange(n), e_idx)
    sf = np.linalg.eigvals(At[np.ix_(keep, keep)]) if keep.size else np.zeros(0, complex)
    est = np.concatenate(est_poles)
    expected = _sorted(np.concatenate([sf, est]))
    ok, worst = poles_match(expected, poles)
    return Separation(expected, _sorted(sf), _sorted(est), ok, worst, tuple(pairs), gains)


_DYNAMIC_KINDS = ("plant", "dynamic", "integrator", "estimator")


def _static_feedback(model: AssembledModel, estimator: str, plant: str, g: nx.MultiDiGraph) -> np.ndarray | None:
    """``K`` with ``u = -K xhat`` when every path from the estimate to the plant input is static.

    The paths are found on the block graph (without the estimator and the plant as
    intermediate stops). When they hold only gains and junctions, the map is the
    feedthrough of the assembled model from the injection at ``xhat`` to the signal into
    ``P.u``: the estimate has no feedthrough itself, so nothing algebraic returns to it.
    """
    diagram = model.diagram
    est = diagram.block_by_name(estimator)
    pl = diagram.block_by_name(plant)
    xw = diagram.wire_from(PortRef(est.id, "xhat"))
    uw = diagram.wire_into(PortRef(pl.id, "u"))
    if xw is None or uw is None:
        return None
    starts = {t.block for t in xw.targets}
    ends = {uw.source.block}
    inner = g.subgraph(n for n in g.nodes if n not in (est.id, pl.id))
    down = set(starts).union(*(nx.descendants(inner, s) for s in starts if s in inner))
    up = set(ends).union(*(nx.ancestors(inner, e) for e in ends if e in inner))
    on_path = (down & up) | (starts & ends)
    if not on_path or any(diagram.blocks[b].kind in _DYNAMIC_KINDS for b in on_path):
        return None
    return -model.D[model.signals[uw.name], model.inputs[f"inject:{xw.name}"]]


def summarize(diagram: Diagram) -> CheckReport:
    """Assemble ``diagram`` and report what an engineer checks first.

    Raises
    ------
    EngineError
        Whatever keeps the diagram from assembling.
    """
    model = assemble(diagram)
    poles = _sorted(np.linalg.eigvals(model.A)) if model.n_states else np.zeros(0, complex)
    tol = _tolerance(poles)
    rhp = int(np.sum(poles.real > tol))
    marginal = int(np.sum(np.abs(poles.real) <= tol))
    warnings = []
    if marginal:
        warnings.append(f"{marginal} pole{'s' if marginal > 1 else ''} on the imaginary axis: the loop is at best marginally stable")
    sep = _separation(model, poles)
    if sep is not None and not sep.matches:
        warnings.append(
            "closed-loop poles differ from eig(A - B K) with eig(A - L C) "
            f"(worst relative gap {sep.max_mismatch:.2g}): the estimator does not see the plant's own input and output, "
            "or its model differs from the plant"
        )
    for name in stale_blocks(diagram):
        warnings.append(f"block {name!r} is stale: its plant or recipe changed since it was designed (run 'loopwright design --write')")
    return CheckReport(
        states=model.n_states,
        signals=tuple(model.signals),
        sources=dict(model.sources),
        poles=poles,
        stable=bool(model.n_states == 0 or np.all(poles.real < -tol)),
        rhp_poles=rhp,
        marginal_poles=marginal,
        separation=sep,
        warnings=tuple(warnings),
        model=model,
    )
