"""Recipes: the stored design inputs of a gain or estimator block, and re-design from them.

A recipe lives in the block's params under ``"recipe"`` (so it is saved with the project
file). Keys (all JSON-native):

``method``
    gain block: ``"place"``, ``"ackermann"``, ``"lqr"`` (state feedback, ``u = -K x``) or
    ``"feedforward"`` (static reference gain, see below); estimator block: ``"place"``,
    ``"ackermann"`` (pole placement on the dual pair) or ``"kalman"``.
``plant``
    Name of the plant (or dynamic) block designed for. Optional: a gain block fed by an
    estimator's ``xhat`` defaults to that estimator's plant, a linked estimator to its
    linked plant.
``poles``
    For placement: one entry per plant state, a number or ``[re, im]`` for one complex
    pole ``re + j im`` (list its conjugate ``[re, -im]`` too). rad/s.
``Q``, ``R``, ``N``
    LQR weights (``N`` the optional cross weight). A number means that multiple of the
    identity; a flat list the diagonal.
``W``, ``V``, ``G``
    Kalman: process-noise intensity, measurement-noise intensity, and how the process
    noise enters the state (default: see :func:`noise_defaults`).
``inputs``
    State feedback only: 1-based plant inputs the gain may use (others get zero rows).
``outputs``
    Feedforward only: 1-based plant outputs to track (default all).
``feedback``
    Feedforward only: name of the gain block holding the state feedback.
``integral``
    State feedback only: ``{"block": "<gain name>", "outputs": [1, ...]}`` adds integral
    action on the tracking error ``r - y`` of those plant outputs (default all). The
    design then runs on the augmented plant (see :mod:`.tracking`): ``poles`` lists
    ``n + q`` poles, ``Q`` is ``(n + q) x (n + q)``; this block gets ``sign * K_x`` and the
    named gain block (fed by the integrator of ``r - y``) gets ``sign * K_i``.
``sign``
    Maps the design to the block: block matrix = ``sign * K_design``. Default ``-1`` for
    state feedback (the gain block holds ``-K`` and feeds a ``'+'`` input; use ``+1``
    when the minus sits in the summing junction), ``+1`` for feedforward. Estimators
    have no sign: their block holds ``L`` as in ``xhat' = ... + L (y - yhat)``.
``designed_for``
    Written by the design: fingerprint of the plant's realised matrices together with
    the recipe itself (and, for feedforward, the feedback gain). A block whose stored
    fingerprint differs from the current one is *stale*.

Kalman defaults from the diagram (:func:`noise_defaults`): every source that states a
white-noise intensity (a ``white`` waveform, or an ``intensity`` parameter) is traced
through the assembled model's direct feedthrough ``D``. A source that reaches the plant's
``u`` or load input ``d`` algebraically (through summing junctions and static gains) is
process noise: ``G`` collects ``[B E] D_src`` and ``W`` its intensity. A source that
reaches the estimator's ``y`` input algebraically, and not the plant input, is
measurement noise: ``V`` collects ``D_src W_src D_src'``. Noise correlations between the
two are ignored.
"""
from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import scipy.linalg as sla

from loopwright.engine.blocks import plant_fingerprint, plant_matrices, realize, source_intensity
from loopwright.engine.design import (
    GainDesign,
    estimator_speed_warning,
    kalman_gain,
    lqr_gain,
    noise_dominance_warning,
    place_estimator,
    place_state_feedback,
)
from loopwright.engine.diagram import Block, Diagram, PortRef
from loopwright.engine.errors import DesignError, EngineError
from loopwright.engine.interconnect import AssembledModel, assemble
from loopwright.engine.tracking import design_integral_action, feedforward_gain

__all__ = [
    "RECIPE_KEYS",
    "GAIN_METHODS",
    "ESTIMATOR_METHODS",
    "BlockDesign",
    "NoiseDefaults",
    "recipe_blocks",
    "recipe_plant",
    "recipe_fingerprint",
    "stale_blocks",
    "recipe_status",
    "noise_defaults",
    "design_block",
    "redesign",
]

RECIPE_KEYS = (
    "method", "plant", "poles", "Q", "R", "N", "W", "V", "G", "inputs", "outputs", "feedback", "integral", "sign",
    "designed_for",
)
GAIN_METHODS = ("place", "ackermann", "lqr", "feedforward")
ESTIMATOR_METHODS = ("place", "ackermann", "kalman")


@dataclass(frozen=True)
class BlockDesign:
    """The outcome of designing one block from its recipe.

    Attributes
    ----------
    block : str
        Block name.
    kind : str
        ``"gain"`` or ``"estimator"``.
    method : str
    plant : str
    matrix : ndarray
        What goes into the block: ``K`` (gain, already multiplied by ``sign``) or ``L``.
    poles : ndarray
        Achieved poles (``eig(A - B K_design)`` or ``eig(A - L C)``); for feedforward the
        closed-loop poles of the feedback it was computed with.
    gain_norm : float
        Largest singular value of the design gain.
    fingerprint : str
        The new ``designed_for``.
    params : dict
        The block's parameters after the design (matrix and ``designed_for`` written).
    warnings : tuple of str
    design : GainDesign or None
        The underlying design (None for feedforward).
    linked : dict
        Other blocks the design sets too (block name -> new params): the integral gain.
    """

    block: str
    kind: str
    method: str
    plant: str
    matrix: np.ndarray
    poles: np.ndarray
    gain_norm: float
    fingerprint: str
    params: dict[str, Any]
    warnings: tuple[str, ...] = field(default_factory=tuple)
    design: GainDesign | None = None
    linked: dict[str, dict[str, Any]] = field(default_factory=dict)


@dataclass(frozen=True)
class NoiseDefaults:
    """Kalman inputs traced from the diagram (see the module docstring).

    ``G`` (n x q) and ``W`` (q x q) are None when no process-noise source acts on the
    plant; ``V`` (p x p) is None when no measurement-noise source reaches the estimator.
    """

    G: np.ndarray | None
    W: np.ndarray | None
    V: np.ndarray | None
    process_sources: tuple[str, ...]
    measurement_sources: tuple[str, ...]


# ---------------------------------------------------------------------------------------
# reading recipes
# ---------------------------------------------------------------------------------------
def recipe_blocks(diagram: Diagram) -> list[Block]:
    """Gain and estimator blocks that carry a recipe, in diagram order."""
    return [
        b for b in diagram.blocks.values() if b.kind in ("gain", "estimator") and isinstance(b.params.get("recipe"), dict)
    ]


def _recipe(block: Block) -> dict[str, Any]:
    rec = block.params.get("recipe")
    if not isinstance(rec, dict):
        raise DesignError(f"block {block.name!r} has no recipe to design from", block_ids=[block.id])
    unknown = sorted(set(rec) - set(RECIPE_KEYS))
    if unknown:
        raise DesignError(
            f"block {block.name!r}: recipe key(s) {', '.join(unknown)} unknown; expected some of {', '.join(RECIPE_KEYS)}",
            block_ids=[block.id],
        )
    method = rec.get("method")
    allowed = GAIN_METHODS if block.kind == "gain" else ESTIMATOR_METHODS
    if method not in allowed:
        raise DesignError(
            f"block {block.name!r}: recipe method {method!r} is not one of {', '.join(allowed)} for a {block.kind} block",
            block_ids=[block.id],
        )
    return rec


def recipe_plant(diagram: Diagram, block: Block) -> str:
    """The plant a recipe designs for: ``recipe["plant"]``, else inferred (see module doc)."""
    rec = block.params.get("recipe") or {}
    name = rec.get("plant")
    if name is None and block.kind == "estimator":
        name = block.params.get("plant")
    if name is None and block.kind == "gain":
        if rec.get("method") == "feedforward" and rec.get("feedback"):
            fb = diagram.block_by_name(rec["feedback"])
            if fb.id != block.id:
                return recipe_plant(diagram, fb)
        wire = diagram.wire_into(PortRef(block.id, "in"))
        if wire is not None:
            src = diagram.blocks[wire.source.block]
            if src.kind == "estimator" and wire.source.port == "xhat" and src.params.get("plant"):
                name = src.params["plant"]
    if not isinstance(name, str):
        raise DesignError(
            f"block {block.name!r}: the recipe does not say which plant to design for; add \"plant\": \"<name>\"",
            block_ids=[block.id],
        )
    blk = diagram.block_by_name(name)
    if blk.kind not in ("plant", "dynamic"):
        raise DesignError(f"block {block.name!r}: recipe plant {name!r} is a {blk.kind}, not a plant", block_ids=[block.id, blk.id])
    return name


def recipe_fingerprint(diagram: Diagram, block: Block) -> str:
    """Fingerprint of what the block's design depends on: plant matrices, recipe, feedback gain."""
    rec = {k: v for k, v in _recipe(block).items() if k != "designed_for"}
    plant = recipe_plant(diagram, block)
    h = hashlib.sha256()
    h.update(plant_fingerprint(diagram, plant).encode())
    h.update(json.dumps(rec, sort_keys=True).encode())
    if rec.get("method") == "feedforward" and rec.get("feedback"):
        fb = diagram.block_by_name(rec["feedback"])
        h.update(json.dumps(fb.params.get("K"), sort_keys=True).encode())
    return h.hexdigest()[:16]


def stale_blocks(diagram: Diagram) -> list[str]:
    """Names of blocks whose recipe no longer matches what they were designed for.

    A block is stale when its ``designed_for`` is missing (never designed) or differs
    from :func:`recipe_fingerprint` -- the plant's matrices, the recipe, or (feedforward)
    the feedback gain changed. A recipe that cannot even be read (missing plant, bad
    method) also counts as stale: the block's matrix cannot be vouched for.
    :func:`recipe_status` tells these cases apart.
    """
    return [name for name, state in recipe_status(diagram).items() if state]


def recipe_status(diagram: Diagram) -> dict[str, str]:
    """Each block with a recipe and why its matrix cannot be vouched for.

    Returns
    -------
    dict
        block name -> ``""`` (designed for the current plant and recipe),
        ``"not designed yet"`` (no ``designed_for``: the recipe was never run),
        ``"stale"`` (the plant, the recipe or the feedback gain changed since), or
        ``"recipe cannot be read: <reason>"``.
    """
    out: dict[str, str] = {}
    for b in recipe_blocks(diagram):
        try:
            current = recipe_fingerprint(diagram, b)
        except EngineError as err:
            out[b.name] = f"recipe cannot be read: {err}"
            continue
        stored = b.params["recipe"].get("designed_for")
        out[b.name] = "not designed yet" if not stored else ("stale" if stored != current else "")
    return out


# ---------------------------------------------------------------------------------------
# noise defaults for the Kalman filter
# ---------------------------------------------------------------------------------------
def _signal_into(diagram: Diagram, block: Block, port: str) -> str | None:
    w = diagram.wire_into(PortRef(block.id, port))
    return None if w is None else w.name


def noise_defaults(diagram: Diagram, estimator: str, *, model: AssembledModel | None = None) -> NoiseDefaults:
    """Trace the diagram's white-noise sources to the plant input and the estimator's y.

    Parameters
    ----------
    diagram : Diagram
    estimator : str
        Name of the estimator block.
    model : AssembledModel, optional
        ``assemble(diagram)``, if already at hand.

    Returns
    -------
    NoiseDefaults

    Raises
    ------
    DesignError
        The estimator has no plant; the diagram does not assemble (its own error).
    """
    est = diagram.block_by_name(estimator)
    plant_name = recipe_plant(diagram, est)
    plant = diagram.block_by_name(plant_name)
    real = realize(plant, diagram)
    if model is None:
        # The estimator's current L may not fit a plant that changed size (that is why it is
        # being re-designed); L only feeds the estimator's states, never the direct
        # feedthrough traced here, so a zero L of the right shape gives the same answer.
        probe = diagram.copy()
        pe = probe.block_by_name(estimator)
        if pe.params.get("plant") == plant_name:
            pe.params["L"] = np.zeros((real.A.shape[0], real.C.shape[0])).tolist()
        model = assemble(probe)
    widths = dict(real.inputs)
    m = widths["u"]
    B_all = real.B
    into = [("u", slice(0, m))]
    if "d" in widths:
        into.append(("d", slice(m, m + widths["d"])))
    y_sig = _signal_into(diagram, est, "y")
    G_parts, W_parts, V = [], [], None
    proc, meas = [], []
    for b in diagram.blocks.values():
        if b.kind != "source":
            continue
        Wsrc = source_intensity(b)
        if Wsrc is None or not np.any(Wsrc):
            continue
        cols = model.inputs[b.name]
        G_src = np.zeros((B_all.shape[0], cols.stop - cols.start))
        for port, sl in into:
            sig = _signal_into(diagram, plant, port)
            if sig is not None:
                G_src += B_all[:, sl] @ model.D[model.signals[sig], cols]
        if np.any(np.abs(G_src) > 0):
            G_parts.append(G_src)
            W_parts.append(Wsrc)
            proc.append(b.name)
            continue
        if y_sig is not None:
            Dy = model.D[model.signals[y_sig], cols]
            if np.any(np.abs(Dy) > 0):
                V = (0 if V is None else V) + Dy @ Wsrc @ Dy.T
                meas.append(b.name)
    G = np.hstack(G_parts) if G_parts else None
    W = sla.block_diag(*W_parts) if W_parts else None
    return NoiseDefaults(G, W, V, tuple(proc), tuple(meas))


# ---------------------------------------------------------------------------------------
# designing
# ---------------------------------------------------------------------------------------
def _indices(rec: dict, key: str, count: int, where: str, block: Block) -> list[int] | None:
    val = rec.get(key)
    if val is None:
        return None
    if not isinstance(val, list) or not all(isinstance(v, int) and not isinstance(v, bool) for v in val):
        raise DesignError(f"{where}: recipe {key} must be a list of 1-based whole numbers, got {val!r}", block_ids=[block.id])
    bad = [v for v in val if v < 1 or v > count]
    if bad:
        raise DesignError(f"{where}: recipe {key} {val} names {bad}, outside 1..{count}", block_ids=[block.id])
    return [v - 1 for v in val]


def _sign(rec: dict, default: float, where: str, block: Block) -> float:
    s = rec.get("sign", default)
    if s not in (1, -1, 1.0, -1.0) or isinstance(s, bool):
        raise DesignError(f"{where}: recipe sign must be 1 or -1, got {s!r}", block_ids=[block.id])
    return float(s)


def _need(rec: dict, key: str, where: str, block: Block, method: str):
    if key not in rec:
        raise DesignError(f"{where}: recipe method {method!r} needs {key!r}", block_ids=[block.id])
    return rec[key]


def design_block(diagram: Diagram, name: str) -> BlockDesign:
    """Design one block from its recipe (the diagram is not modified).

    Parameters
    ----------
    diagram : Diagram
    name : str
        A gain or estimator block with a ``recipe``.

    Returns
    -------
    BlockDesign

    Raises
    ------
    DesignError
        Bad recipe, or the design itself fails (uncontrollable mode, bad weights...);
        the message starts with the block name.
    """
    block = diagram.block_by_name(name)
    if block.kind not in ("gain", "estimator"):
        raise DesignError(f"block {name!r} is a {block.kind}; only gain and estimator blocks are designed", block_ids=[block.id])
    rec = _recipe(block)
    where = f"block {name!r}"
    plant = recipe_plant(diagram, block)
    A, B, C, D = plant_matrices(diagram, plant)
    method = rec["method"]
    warns: list[str] = []
    design: GainDesign | None = None
    linked: dict[str, dict[str, Any]] = {}
    try:
        if block.kind == "gain" and method == "feedforward":
            fb_name = _need(rec, "feedback", where, block, method)
            fb = diagram.block_by_name(fb_name)
            if fb.kind != "gain":
                raise DesignError(f"{where}: feedback block {fb_name!r} is a {fb.kind}, not a gain", block_ids=[block.id, fb.id])
            fb_rec = fb.params.get("recipe") or {}
            fb_sign = _sign(fb_rec, -1.0, f"block {fb_name!r}", fb)
            K_design = fb_sign * np.asarray(fb.params.get("K"), dtype=float)
            if K_design.ndim != 2 or K_design.shape != (B.shape[1], A.shape[0]):
                raise DesignError(
                    f"{where}: feedback gain {fb_name!r} is {K_design.shape}, expected {B.shape[1]}x{A.shape[0]} "
                    f"(inputs x states of plant {plant!r})",
                    block_ids=[block.id, fb.id],
                )
            outs = _indices(rec, "outputs", C.shape[0], where, block)
            N = feedforward_gain(A, B, C, D, K_design, outputs=outs)
            matrix = _sign(rec, 1.0, where, block) * N
            poles = np.linalg.eigvals(A - B @ K_design)
            gain_norm = float(np.linalg.norm(N, 2))
        elif block.kind == "gain" and rec.get("integral") is not None:
            integ = rec["integral"]
            if not isinstance(integ, dict) or not isinstance(integ.get("block"), str):
                raise DesignError(f"{where}: recipe integral must be {{\"block\": \"<gain name>\", \"outputs\": [...]}}, got {integ!r}",
                                  block_ids=[block.id])
            ki_blk = diagram.block_by_name(integ["block"])
            if ki_blk.kind != "gain" or ki_blk.id == block.id:
                raise DesignError(f"{where}: integral block {integ['block']!r} must be another gain block", block_ids=[block.id, ki_blk.id])
            unknown = sorted(set(integ) - {"block", "outputs"})
            if unknown:
                raise DesignError(f"{where}: recipe integral key(s) {', '.join(unknown)} unknown; expected block, outputs", block_ids=[block.id])
            outs = _indices(integ, "outputs", C.shape[0], where, block)
            inputs = _indices(rec, "inputs", B.shape[1], where, block)
            idesign = design_integral_action(
                A, B, C, D, method=method, poles=rec.get("poles"), Q=rec.get("Q"), R=rec.get("R"), N=rec.get("N"),
                outputs=outs, inputs=inputs,
            )
            design = idesign.design
            sign = _sign(rec, -1.0, where, block)
            matrix = sign * idesign.K_x
            ki_params = json.loads(json.dumps(ki_blk.params))
            ki_params["K"] = (sign * idesign.K_i).tolist()
            linked[ki_blk.name] = ki_params
            poles, gain_norm = design.poles, design.gain_norm
        elif block.kind == "gain":
            inputs = _indices(rec, "inputs", B.shape[1], where, block)
            if method in ("place", "ackermann"):
                design = place_state_feedback(A, B, _need(rec, "poles", where, block, method), inputs=inputs, method=method)
            else:
                design = lqr_gain(A, B, _need(rec, "Q", where, block, method), _need(rec, "R", where, block, method),
                                  N=rec.get("N"), inputs=inputs)
            matrix = _sign(rec, -1.0, where, block) * design.gain
            poles, gain_norm = design.poles, design.gain_norm
        else:
            if method in ("place", "ackermann"):
                design = place_estimator(A, C, _need(rec, "poles", where, block, method), method=method)
            else:
                W, V, G = rec.get("W"), rec.get("V"), rec.get("G")
                if W is None or V is None:
                    nd = noise_defaults(diagram, name)
                    if W is None:
                        if nd.W is None:
                            raise DesignError(
                                f"{where}: Kalman recipe has no W and no white-noise source acts on plant {plant!r}; "
                                "state W (and G) or give a disturbance source an intensity",
                                block_ids=[block.id],
                            )
                        W = nd.W
                        if G is None:
                            G = nd.G
                        warns.append(f"process noise W, G taken from source(s) {', '.join(nd.process_sources)}")
                    if V is None:
                        if nd.V is None:
                            raise DesignError(
                                f"{where}: Kalman recipe has no V and no noise source reaches the estimator's y input; "
                                "state V or add a noise source to the measured signal",
                                block_ids=[block.id],
                            )
                        V = nd.V
                        warns.append(f"measurement noise V taken from source(s) {', '.join(nd.measurement_sources)}")
                design = kalman_gain(A, C, W, V, G=G, B=B)
            matrix = design.gain
            poles, gain_norm = design.poles, design.gain_norm
    except DesignError as err:
        msg = err.message if err.message.startswith(where) else f"{where}: {err.message}"
        raise DesignError(msg, block_ids=err.block_ids or (block.id,)) from err
    if design is not None:
        warns.extend(design.warnings)
    old = block.params.get("K" if block.kind == "gain" else "L")
    if old is not None and np.shape(old) != matrix.shape:
        warns.append(f"the block's matrix changes shape from {np.shape(old)} to {matrix.shape}; check its wiring")
    params = json.loads(json.dumps(block.params))
    params["K" if block.kind == "gain" else "L"] = matrix.tolist()
    probe = Block(block.id, block.kind, block.name, params)
    fp = recipe_fingerprint(_with_block(diagram, probe), probe)
    params["recipe"]["designed_for"] = fp
    return BlockDesign(
        name, block.kind, method, plant, matrix, np.asarray(poles, dtype=complex), gain_norm, fp, params, tuple(warns), design,
        linked,
    )


def _with_block(diagram: Diagram, block: Block) -> Diagram:
    d = diagram.copy()
    d.blocks[block.id] = block
    return d


def _order(diagram: Diagram, names: list[str]) -> list[str]:
    """State feedback first, then estimators, then feedforward (it reads the new K)."""

    def rank(n: str) -> int:
        b = diagram.block_by_name(n)
        method = (b.params.get("recipe") or {}).get("method")
        return 2 if method == "feedforward" else (1 if b.kind == "estimator" else 0)

    return sorted(names, key=lambda n: (rank(n), names.index(n)))


def redesign(diagram: Diagram, names: list[str] | None = None) -> tuple[Diagram, list[BlockDesign]]:
    """Design the named blocks (default: every block with a recipe) and return a new diagram.

    Feedforward blocks whose feedback gain is re-designed are re-designed too. After the
    designs, cross checks add warnings: estimator speed against the controller on the
    same plant, and whether sensor noise dominates each state-feedback gain's output.

    Returns
    -------
    (Diagram, list of BlockDesign)
        The input diagram is not modified.
    """
    out = diagram.copy()
    if names is None:
        names = [b.name for b in recipe_blocks(diagram)]
    else:
        for n in names:
            b = diagram.block_by_name(n)
            if not isinstance(b.params.get("recipe"), dict):
                raise DesignError(f"block {n!r} has no recipe", block_ids=[b.id])
        names = list(dict.fromkeys(names))
        designed = set(names)
        for b in recipe_blocks(diagram):
            rec = b.params["recipe"]
            if rec.get("method") == "feedforward" and rec.get("feedback") in designed and b.name not in designed:
                names.append(b.name)
    results: list[BlockDesign] = []
    for n in _order(diagram, names):
        res = design_block(out, n)
        out.set_params(out.block_by_name(n).id, res.params)
        for other, params in res.linked.items():
            out.set_params(out.block_by_name(other).id, params)
        results.append(res)
    return out, _cross_checks(out, results)


def _cross_checks(diagram: Diagram, results: list[BlockDesign]) -> list[BlockDesign]:
    ctrl = {r.plant: r for r in results if r.kind == "gain" and r.method != "feedforward"}
    est = {r.plant: r for r in results if r.kind == "estimator"}
    extra: dict[str, list[str]] = {r.block: [] for r in results}
    for plant, e in est.items():
        c = ctrl.get(plant)
        if c is not None:
            msg = estimator_speed_warning(c.poles, e.poles)
            if msg:
                extra[e.block].append(msg)
    try:
        model = assemble(diagram)
    except EngineError:
        model = None
    if model is not None:
        for r in results:
            if r.kind == "gain" and r.method != "feedforward":
                msg = _noise_check(diagram, model, r)
                if msg:
                    extra[r.block].append(msg)
    out = []
    for r in results:
        if extra[r.block]:
            r = BlockDesign(**{**r.__dict__, "warnings": r.warnings + tuple(extra[r.block])})
        out.append(r)
    return out


def _rms_from(model: AssembledModel, cols: list[tuple[slice, np.ndarray]], rows: slice) -> float:
    """Steady-state RMS (largest component) of signal rows due to white inputs ``cols``."""
    A = model.A
    if not cols:
        return 0.0
    Bw = np.hstack([model.B[:, sl] for sl, _ in cols])
    Dw = np.hstack([model.D[rows, sl] for sl, _ in cols])
    W = sla.block_diag(*[w for _, w in cols])
    if np.any(np.abs(Dw) > 0):
        return float("inf")  # white noise straight through to the signal: unbounded RMS
    if A.shape[0] == 0:
        return 0.0
    X = sla.solve_continuous_lyapunov(A, -Bw @ W @ Bw.T)
    var = np.diag(model.C[rows] @ X @ model.C[rows].T)
    return float(np.sqrt(max(0.0, float(np.max(var)))))


def _noise_check(diagram: Diagram, model: AssembledModel, res: BlockDesign) -> str | None:
    """Does sensor noise dominate the control signal out of this gain block?

    With white sources of stated intensity in the diagram: RMS of the gain's output due to
    ``noise``-role sources against the RMS due to the others (the noise budget). Without
    any: a heuristic with unit intensity injected on the estimator's measured input
    against unit intensity injected on the plant input (scale-dependent; documented as a
    heuristic only). Skipped when the loop is not stable.
    """
    blk = diagram.block_by_name(res.block)
    out_w = diagram.wire_from(PortRef(blk.id, "out"))
    sig = out_w.name if out_w is not None else f"{blk.name}.out"
    if sig not in model.signals or model.A.shape[0] == 0:
        return None
    if np.max(np.linalg.eigvals(model.A).real) >= 0:
        return None
    rows = model.signals[sig]
    noise, other = [], []
    for b in diagram.blocks.values():
        if b.kind != "source":
            continue
        try:
            W = source_intensity(b)
        except EngineError:
            W = None
        if W is None or not np.any(W):
            continue
        (noise if b.params.get("role") == "noise" else other).append((model.inputs[b.name], W))
    if noise and other:
        return noise_dominance_warning(_rms_from(model, noise, rows), _rms_from(model, other, rows), signal=sig)
    plant = diagram.block_by_name(res.plant)
    u_sig = _signal_into(diagram, plant, "u")
    y_sig = None
    for b in diagram.blocks.values():
        if b.kind == "estimator" and b.params.get("plant") == res.plant:
            y_sig = _signal_into(diagram, b, "y")
            break
    if u_sig is None or y_sig is None:
        return None
    nu = model.inputs[f"inject:{u_sig}"]
    ny = model.inputs[f"inject:{y_sig}"]
    msg = noise_dominance_warning(
        _rms_from(model, [(ny, np.eye(ny.stop - ny.start))], rows),
        _rms_from(model, [(nu, np.eye(nu.stop - nu.start))], rows),
        signal=sig,
    )
    return None if msg is None else msg + " (heuristic: unit-intensity noise on the measurement vs on the plant input; no intensities stated in the diagram)"
