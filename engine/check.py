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

Honest poles
------------
Eigenvalues of a closed loop with large gains can be ill-conditioned: rounding moves them
by ``kappa * eps * ||A||`` (:mod:`loopwright.engine.eigen`), which on a chain of ten
integrators turns real poles into complex pairs 20 % off. The check therefore

* tests separation *structurally* first: in the error coordinates the block that drives
  the estimation error from the rest of the loop must vanish (relative size within a few
  units of rounding, ``8 eps``); when it does, separation holds exactly and the poles are taken from the two
  diagonal blocks (well conditioned: each is much smaller and better scaled than the
  whole), and the report says so;
* otherwise compares the assembled poles with the expected ones, and tells apart "the
  estimator does not see the plant's input and output" (a gap beyond what rounding can
  explain) from "too ill-conditioned to confirm separation" (a gap within the rounding
  bounds);
* keeps each pole's rounding bound so that only trustworthy digits are printed.
"""
from __future__ import annotations

import functools
import threading
from dataclasses import dataclass, field

import networkx as nx
import numpy as np

from loopwright.engine.blocks import plant_matrices, realize
from loopwright.engine.diagram import Diagram, PortRef
from loopwright.engine.eigen import EigenSensitivity, PoleClasses, classify_poles, eigen_sensitivity, matrix_scale
from loopwright.engine.estimator_inputs import InputGap, estimator_input_gaps
from loopwright.engine.interconnect import AssembledModel, assemble
from loopwright.engine.recipes import recipe_status

__all__ = ["CheckReport", "Separation", "summarize", "pole_table", "poles_match", "pole_digits"]


# Relative size of the error-coordinate coupling block below which it is rounding of zero: a few
# units of rounding, since a coupling any larger can move ill-conditioned poles far.
_DECOUPLED = 8 * np.finfo(float).eps
# Rounding bounds are first order: allow this factor before calling a gap real.
_BOUND_FACTOR = 10.0
#: Estimator error dynamics ``A - L C`` seen lately, by their exact numbers, with their poles:
#: an edit elsewhere (the feedback gain, dragged in the app) leaves every estimator as it
#: was, and the app checks the diagram after each edit.
_ESTIMATOR_POLES: dict[tuple, EigenSensitivity] = {}
_ESTIMATOR_POLES_KEPT = 64
_ESTIMATOR_POLES_LOCK = threading.Lock()


def _estimator_poles(error_dynamics: np.ndarray) -> EigenSensitivity:
    """:func:`eigen_sensitivity` of ``A - L C``, computed once for the same numbers (read-only arrays)."""
    M = np.ascontiguousarray(error_dynamics, dtype=float)
    key = (M.shape, M.tobytes())
    with _ESTIMATOR_POLES_LOCK:
        hit = _ESTIMATOR_POLES.get(key)
    if hit is not None:
        return hit
    found = eigen_sensitivity(M)
    for value in vars(found).values():
        if isinstance(value, np.ndarray):
            value.flags.writeable = False  # shared by every later check of the same estimator
    with _ESTIMATOR_POLES_LOCK:
        if len(_ESTIMATOR_POLES) >= _ESTIMATOR_POLES_KEPT:
            del _ESTIMATOR_POLES[next(iter(_ESTIMATOR_POLES))]  # the oldest
        _ESTIMATOR_POLES[key] = found
    return found


@dataclass(frozen=True)
class Separation:
    """Expected poles from the separation principle against the assembled ones.

    Attributes
    ----------
    expected : complex ndarray, sorted
        ``state_feedback_poles`` together with ``estimator_poles``.
    matches : bool
        Separation holds: the error dynamics decouple exactly (``decoupled``) or the
        assembled poles equal ``expected``.
    max_mismatch : float
        Worst relative gap between the assembled poles and ``expected``.
    coupling : float
        Relative size of the block that drives the estimation error from the rest of the
        loop, in error coordinates (0 when the estimator sees the plant's input and
        output and holds its model).
    decoupled : bool
        ``coupling`` is rounding of zero: separation holds by structure.
    verdict : str
        ``"holds"``; ``"unconfirmed"`` (the gap is within what rounding can move the
        ill-conditioned poles); ``"not_separated"`` (a real gap: the estimator does not
        see the plant's input and output, or its model differs).
    message : str
        One sentence for the engineer ("" when separation holds and the poles agree).
    """

    expected: np.ndarray  # complex, sorted
    state_feedback_poles: np.ndarray
    estimator_poles: np.ndarray
    matches: bool
    max_mismatch: float
    pairs: tuple[tuple[str, str], ...]  # (plant, estimator)
    gains: dict[str, np.ndarray] = field(default_factory=dict)  # estimator -> static K (u = -K xhat), when static
    coupling: float = 0.0
    decoupled: bool = False
    verdict: str = "holds"
    message: str = ""
    expected_bounds: np.ndarray = field(default_factory=lambda: np.zeros(0))  # rounding bound of each expected pole


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
    pole_classes: PoleClasses | None = None
    pole_bounds: np.ndarray = field(default_factory=lambda: np.zeros(0))  # rounding bound of each pole (same order)
    pole_source: str = "full"  # "full": eig of the assembled A; "separation": eig of the two diagonal blocks
    worst_condition: float = 1.0  # largest eigenvalue condition number of the assembled A
    recipe_states: dict[str, str] = field(default_factory=dict)  # block -> "not designed yet" / "stale" / ...
    input_gaps: tuple[InputGap, ...] = ()  # estimators whose command input misses known signals the plant gets

    pole_scale: float = 0.0  # matrix_scale of the assembled A: what a pole at the origin is measured against

    @functools.cached_property
    def poles_trusted(self) -> bool:
        """Every pole is right to at least 3 significant digits (a pole at the origin: to 3
        digits of the matrix's scale)."""
        return all(d >= 3 for d in pole_digits(self.poles, self.pole_bounds, scale=self.pole_scale))

    @property
    def pole_source_text(self) -> str:
        return (
            "from the separation coordinates: eig of the loop with the true state fed back, and eig(A - L C)"
            if self.pole_source == "separation"
            else "eig of the assembled closed-loop matrix"
        )


def _sorted(p: np.ndarray) -> np.ndarray:
    p = np.asarray(p, dtype=complex)
    return p[np.lexsort((p.imag, p.real))]


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
    from scipy.optimize import linear_sum_assignment  # (a slow import, only needed here)
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


def _separation(model: AssembledModel, poles: np.ndarray, bounds: np.ndarray) -> tuple[Separation, np.ndarray, np.ndarray] | None:
    """The separation check; also the poles and bounds of the two diagonal blocks when the
    error dynamics decouple (else ``None`` in their place)."""
    diagram = model.diagram
    pairs, err_rows, plant_rows, gains = [], [], [], {}
    graph = None  # the block graph, drawn only for a diagram with a linked estimator
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
        L = (model.realizations.get(b.id) or realize(b, diagram)).B[:, -C.shape[0]:]
        est_poles.append(_estimator_poles(A - L @ C))
        graph = diagram.graph() if graph is None else graph
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
    sf = eigen_sensitivity(At[np.ix_(keep, keep)]) if keep.size else eigen_sensitivity(np.zeros((0, 0)))
    est_vals = np.concatenate([e.values for e in est_poles])
    est_bounds = np.concatenate([e.error_bound for e in est_poles])
    exp_vals = np.concatenate([sf.values, est_vals])
    exp_bounds = np.concatenate([sf.error_bound, est_bounds])
    order = np.lexsort((exp_vals.imag, exp_vals.real))
    expected, expected_bounds = exp_vals[order], exp_bounds[order]
    size = max(float(np.linalg.norm(model.A)), 1e-300)
    coupling = float(np.linalg.norm(At[np.ix_(e_idx, keep)])) / size if keep.size else 0.0
    decoupled = coupling <= _DECOUPLED
    agree, worst = poles_match(expected, poles)
    within = agree or _within_bounds(expected, expected_bounds, poles, bounds)
    if decoupled:
        verdict = "holds"
        message = (
            ""
            if agree
            else "the estimation error decouples exactly from the rest of the loop, so separation holds; the assembled closed-loop "
            f"matrix is too ill-conditioned to confirm it from its own poles (worst relative gap {worst:.2g}), "
            "so the poles are taken from the separation coordinates"
        )
    elif agree:
        verdict, message = "holds", ""
    elif within:
        verdict = "unconfirmed"
        message = (
            f"the closed loop is too ill-conditioned to confirm separation: its poles differ from eig(A - B K) with eig(A - L C) "
            f"by up to {worst:.2g} (relative), within what rounding can move them"
        )
    else:
        verdict = "not_separated"
        message = (
            "closed-loop poles differ from eig(A - B K) with eig(A - L C) "
            f"(worst relative gap {worst:.2g}, beyond rounding): the estimator does not see the plant's own input and output, "
            "or its model differs from the plant"
        )
    sep = Separation(
        expected, _sorted(sf.values), _sorted(est_vals), verdict == "holds", worst, tuple(pairs), gains,
        coupling=coupling, decoupled=decoupled, verdict=verdict, message=message, expected_bounds=expected_bounds,
    )
    if decoupled:
        return sep, expected, expected_bounds
    return sep, None, None


def _within_bounds(a: np.ndarray, a_bounds: np.ndarray, b: np.ndarray, b_bounds: np.ndarray) -> bool:
    """Whether two pole sets can be paired so that each gap is within their rounding bounds
    (an assignment that minimises the total excess over the allowed gaps; feasible when it is 0)."""
    if a.size != b.size:
        return False
    allowed = _BOUND_FACTOR * (a_bounds[:, None] + b_bounds[None, :]) + 1e-9 * np.maximum(1.0, np.abs(a))[:, None]
    excess = np.maximum(np.abs(a[:, None] - b[None, :]) - allowed, 0.0)
    from scipy.optimize import linear_sum_assignment  # (a slow import, only needed here)
    r, c = linear_sum_assignment(excess)
    return bool(np.all(excess[r, c] == 0.0))


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
    avoid = {est.id, pl.id}

    def static(b) -> bool:
        return diagram.blocks[b].kind not in _DYNAMIC_KINDS

    # Searches through static blocks only, from the estimate forwards and from the plant
    # input backwards, each stopping at the dynamic blocks it meets (its frontier). When
    # either frontier is empty, every block on a path between them is static and the
    # searches already hold the answer; they stay local to the loop, where a search of
    # the whole graph per estimator made a long chain of loops quadratic.
    down, down_frontier = _static_reach(g.successors, starts, avoid, static)
    up, up_frontier = _static_reach(g.predecessors, ends, avoid, static)
    if down_frontier and up_frontier:  # a dynamic branch may join the two: search it all
        inner = g.subgraph(n for n in g.nodes if n not in avoid)
        down = set(starts).union(*(nx.descendants(inner, s) for s in starts if s in inner))
        up = set(ends).union(*(nx.ancestors(inner, e) for e in ends if e in inner))
    on_path = (down & up) | (starts & ends)
    if not on_path or any(not static(b) for b in on_path):
        return None
    return -model.D[model.signals[uw.name], model.inputs[f"inject:{xw.name}"]]


def _static_reach(neighbours, seeds: set, avoid: set, static) -> tuple[set, set]:
    """Blocks reached from ``seeds`` through ``neighbours`` (successors or predecessors)
    without passing a dynamic block or one in ``avoid``: ``(reached, frontier)``, the
    frontier being the dynamic blocks met (a dynamic seed is in both)."""
    reached, frontier = set(), set()
    todo = [b for b in seeds if b not in avoid]
    while todo:
        b = todo.pop()
        if b in reached or b in frontier:
            continue
        if not static(b):
            frontier.add(b)
            if b in seeds:  # on a path itself, but the search stops there
                reached.add(b)
            continue
        reached.add(b)
        todo.extend(n for n in neighbours(b) if n not in avoid and n not in reached)
    return reached, frontier


def pole_digits(poles, bounds, *, scale: float) -> list[int]:
    """Trustworthy significant digits of each pole (:func:`eigen.trustworthy_digits`).

    A pole at the origin (within rounding, by :func:`eigen.pole_regions`) has no digits of
    its own to keep, so its rounding bound is measured against the matrix's scale instead:
    an integrator's pole computed as 0 with a bound of a few ulps is as exact as the
    arithmetic allows, not ill-conditioned (the on-axis warning already names it).
    """
    from loopwright.engine.eigen import pole_regions

    p = np.asarray(poles, dtype=complex).ravel()
    if not p.size:
        return []
    b = np.asarray(bounds, dtype=float).ravel()
    regions = pole_regions(p, scale=scale, bounds=b)
    mag = np.where((regions == "origin") & (scale > 0), float(scale), np.abs(p))
    # eigen.trustworthy_digits for all poles at once: 0 for an unbounded error or a zero
    # value, every digit for an exact one, else floor(log10(|value| / bound)) in 0..6
    with np.errstate(divide="ignore", invalid="ignore"):
        digits = np.clip(np.floor(np.log10(mag / b)), 0, _MAX_POLE_DIGITS)
    digits = np.where(b <= 0, _MAX_POLE_DIGITS, np.where(mag == 0, 0, digits))
    return [int(d) for d in np.where(np.isfinite(b), digits, 0)]


#: The most digits a pole is given (eigen.trustworthy_digits's default).
_MAX_POLE_DIGITS = 6


def summarize(diagram: Diagram, *, model=None, reduced=None) -> CheckReport:
    """Assemble ``diagram`` (unless its assembled ``model`` is given) and report what an
    engineer checks first (``reduced``: :func:`eigen.balanced_reduction` of ``model.A``,
    when it is at hand, for the poles and their condition numbers).

    Raises
    ------
    EngineError
        Whatever keeps the diagram from assembling.
    """
    model = assemble(diagram) if model is None else model
    sens = eigen_sensitivity(model.A, reduced=reduced)
    order = np.lexsort((sens.values.imag, sens.values.real))
    poles, bounds = sens.values[order], sens.error_bound[order]
    warnings = []
    found = _separation(model, poles, bounds)
    sep, source = None, "full"
    if found is not None:
        sep, sep_poles, sep_bounds = found
        if sep_poles is not None:
            poles, bounds, source = sep_poles, sep_bounds, "separation"
    scale = matrix_scale(model.A)
    classes = classify_poles(poles, scale=scale, bounds=bounds)
    if classes.on_axis:
        m = classes.on_axis
        warnings.append(f"{m} pole{'s' if m > 1 else ''} on the imaginary axis ({classes.phrase()}): the loop is at best marginally stable")
    if sep is not None and sep.message:
        warnings.append(sep.message)
    # Separation can hold while the estimate is biased: a known signal added after the
    # estimator's tap drives the error without moving any pole.
    # (the signal graph it needs is drawn only when there is an estimator to look at)
    gaps = tuple(estimator_input_gaps(diagram)) if any(b.kind == "estimator" for b in diagram.blocks.values()) else ()
    warnings.extend(gap.message for gap in gaps)
    digits = pole_digits(poles, bounds, scale=scale)
    if digits and min(digits) < 3:
        k = int(np.argmin(digits))
        warnings.append(
            f"closed-loop poles are ill-conditioned (eigenvalue condition numbers up to {sens.worst_condition:.1e}): rounding may move "
            f"them by up to {float(np.max(bounds)):.2g} (pole {complex(poles[k]):.4g}); only the digits rounding cannot change are printed"
        )
    states = recipe_status(diagram)
    for name, state in states.items():
        if state == "not designed yet":
            warnings.append(f"block {name!r} is not designed yet: its recipe has never been run (run 'loopwright design --write')")
        elif state == "stale":
            warnings.append(f"block {name!r} is stale: its plant or recipe changed since it was designed (run 'loopwright design --write')")
        elif state:
            warnings.append(f"block {name!r}: {state} (run 'loopwright design' to see why)")
    return CheckReport(
        states=model.n_states,
        signals=tuple(model.signals),
        sources=dict(model.sources),
        poles=poles,
        stable=bool(model.n_states == 0 or (classes.open_rhp == 0 and classes.on_axis == 0)),
        rhp_poles=classes.open_rhp,
        marginal_poles=classes.on_axis,
        separation=sep,
        warnings=tuple(warnings),
        model=model,
        pole_classes=classes,
        pole_bounds=bounds,
        pole_source=source,
        worst_condition=sens.worst_condition,
        pole_scale=scale,
        recipe_states=states,
        input_gaps=gaps,
    )
