"""State-space realisation of each block kind.

``realize(block, diagram)`` turns a block's JSON-native parameters into matrices
``x' = A x + B u``, ``y = C x + D u`` over its stacked input and output ports. Sources have
no realisation: the assembly treats their outputs as the model's exogenous inputs.

Transfer functions are realised element by element in phase-variable form and stacked
(a matrix of transfer functions therefore gets the sum of its elements' orders, not a
minimal order; the realisation is exact, and ``structure.minimal`` trims it). The state
order is physical and documented (see :func:`tf_state_descriptions`): for a numerator
without zeros the states are y, dy/dt, d²y/dt², ... (for 1/s² position first, then
velocity); otherwise they are z, dz/dt, ... with den(s) z = u and y = num(s) z + D u.
"""
from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from typing import Any

import numpy as np

from loopwright.engine.diagram import SOURCE_ROLES, Block, Diagram
from loopwright.engine.errors import DiagramError, ParameterError
from loopwright.engine.ports import input_ports, output_ports
from loopwright.engine.validation import MAX_TOTAL_WIDTH, as_matrix, as_vector, as_width

__all__ = [
    "Realization",
    "realize",
    "port_widths",
    "plant_matrices",
    "plant_fingerprint",
    "source_intensity",
    "source_width",
    "tf_to_ss",
    "tf_poles_zeros",
    "tf_state_descriptions",
    "WAVEFORM_KINDS",
]

WAVEFORM_KINDS = ("zero", "step", "ramp", "sine", "white")


@dataclass(frozen=True)
class Realization:
    """Matrices of one block over its stacked ports.

    ``inputs`` and ``outputs`` are ``(port, width)`` pairs in stacking order.
    """

    A: np.ndarray
    B: np.ndarray
    C: np.ndarray
    D: np.ndarray
    inputs: tuple[tuple[str, int], ...]
    outputs: tuple[tuple[str, int], ...]
    state_names: tuple[str, ...]


def _where(block: Block) -> str:
    return f"block {block.name!r}"


# ---- transfer functions -------------------------------------------------------------
def _coeffs(value: Any, *, where: str, field: str, block_id: str | None) -> np.ndarray:
    c = as_vector(value, where=where, field=field, block_id=block_id)
    if not c.size:
        raise ParameterError(f"{where}: {field} is empty; give at least one coefficient", field=field,
                             block_ids=[block_id] if block_id else [])
    nz = np.flatnonzero(c)
    return c[nz[0]:] if nz.size else np.zeros(1)


def _siso_tf_to_ss(num: np.ndarray, den: np.ndarray, *, where: str, field: str, block_id: str | None):
    A, B, C, D, _ = _siso_phase_variable(num, den, where=where, field=field, block_id=block_id)
    return A, B, C, D


def _siso_phase_variable(num: np.ndarray, den: np.ndarray, *, where: str, field: str, block_id: str | None):
    """Phase-variable realisation of one SISO element and whether its states are y, y', ...

    With den(s) z = u the states are z, dz/dt, ..., (the companion matrix with ones above
    the diagonal) and y = num(s) z + D u. When the strictly proper part has a constant
    numerator b and D = 0, z is scaled by b so the states are y, dy/dt, ...: the order a
    mechanical or thermal model is usually written in (position before velocity).
    """
    if not np.any(den):
        raise ParameterError(f"{where}: denominator {field} is all zeros", field="den", block_ids=[block_id] if block_id else [])
    n = den.size - 1
    if num.size - 1 > n and np.any(num):
        raise ParameterError(
            f"{where}: transfer function {field} is improper (numerator degree {num.size - 1} > denominator degree {n}); "
            "a physical block needs at least as many poles as zeros",
            field="num",
            block_ids=[block_id] if block_id else [],
        )
    lead = den[0]
    den = den / lead
    num = np.concatenate([np.zeros(n + 1 - num.size), num]) / lead if num.size <= n + 1 else num[-(n + 1):] / lead
    d = num[0]
    # (num - d*den)/den, coefficients of s^(n-1) .. s^0
    rem = num[1:] - d * den[1:]
    A = np.zeros((n, n))
    B = np.zeros((n, 1))
    C = rem[::-1].reshape(1, n).copy()
    if n:
        A[:-1, 1:] = np.eye(n - 1)
        A[-1, :] = 0.0 - den[1:][::-1]  # no negative zeros on display
        B[-1, 0] = 1.0
    output_states = bool(n) and d == 0.0 and rem[-1] != 0.0 and not np.any(rem[:-1])
    if output_states:
        # x = rem[-1] * (z, z', ...) = (y, y', ...)
        B[-1, 0] = rem[-1]
        C = np.zeros((1, n))
        C[0, 0] = 1.0
    return A, B, C, np.array([[d]]), output_states


def _derivative_names(base: str, n: int) -> list[str]:
    names = []
    for k in range(n):
        if k == 0:
            names.append(base)
        elif k == 1:
            names.append(f"d{base}/dt")
        else:
            names.append(f"d{_superscript(k)}{base}/dt{_superscript(k)}")
    return names


def _superscript(k: int) -> str:
    return str(k).translate(str.maketrans("0123456789", "⁰¹²³⁴⁵⁶⁷⁸⁹"))


def tf_state_descriptions(num: Any, den: Any) -> tuple[str, ...]:
    """What each state of :func:`tf_to_ss`'s realisation is, in order.

    For a SISO element without zeros and without feedthrough: ``y, dy/dt, d²y/dt², ...``;
    otherwise ``z, dz/dt, ...`` where den(s) z = u and y = num(s) z + D u. Elements of a
    transfer-function matrix are prefixed with their place, ``(i,j) y``, for output i and
    input j.

    Raises
    ------
    ParameterError
        As :func:`tf_to_ss`.
    """
    def describe(nm, dn, field, prefix=""):
        ne = _coeffs(nm, where="transfer function", field=field, block_id=None)
        de = _coeffs(dn, where="transfer function", field=field, block_id=None)
        A, _, _, _, output_states = _siso_phase_variable(ne, de, where="transfer function", field=field, block_id=None)
        return [prefix + s for s in _derivative_names("y" if output_states else "z", A.shape[0])]

    if not (isinstance(num, list) and num and isinstance(num[0], list) and num[0] and isinstance(num[0][0], list)):
        return tuple(describe(num, den, "num/den"))
    tf_to_ss(num, den)  # the shapes are checked there
    common = not (isinstance(den, list) and den and isinstance(den[0], list) and den[0] and isinstance(den[0][0], list))
    out: list[str] = []
    for i, row in enumerate(num):
        for j, nij in enumerate(row):
            out += describe(nij, den if common else den[i][j], f"element ({i + 1}, {j + 1})", f"({i + 1},{j + 1}) ")
    return tuple(out)


def tf_to_ss(num: Any, den: Any, *, where: str = "transfer function", block_id: str | None = None):
    """Realise a SISO transfer function or a p x m matrix of them.

    Parameters
    ----------
    num : list of float, or p x m nested lists of coefficient lists
        Numerator coefficients, highest power first.
    den : list of float, or nested like ``num``
        Denominators; a single list is a common denominator for every element.

    Returns
    -------
    A, B, C, D : ndarray
        A realisation with ``sum of element orders`` states.

    Raises
    ------
    ParameterError
        Improper element, zero denominator, shapes that do not match.
    """
    def is_matrix(v: Any) -> bool:
        return isinstance(v, list) and bool(v) and isinstance(v[0], list) and bool(v[0]) and isinstance(v[0][0], list)

    if not is_matrix(num):
        n_ = _coeffs(num, where=where, field="num", block_id=block_id)
        d_ = _coeffs(den, where=where, field="den", block_id=block_id)
        return _siso_tf_to_ss(n_, d_, where=where, field="num/den", block_id=block_id)
    p = len(num)
    m = len(num[0])
    if any(not isinstance(row, list) or len(row) != m for row in num):
        raise ParameterError(f"{where}: num rows must all have {m} elements", field="num", block_ids=[block_id] if block_id else [])
    common = not is_matrix(den)
    if not common and (len(den) != p or any(len(r) != m for r in den)):
        raise ParameterError(f"{where}: den must be one list or a {p}x{m} nested list like num", field="den", block_ids=[block_id] if block_id else [])
    parts = []
    for i in range(p):
        for j in range(m):
            dij = den if common else den[i][j]
            ne = _coeffs(num[i][j], where=where, field=f"num[{i + 1}][{j + 1}]", block_id=block_id)
            de = _coeffs(dij, where=where, field=f"den[{i + 1}][{j + 1}]", block_id=block_id)
            parts.append((i, j, _siso_tf_to_ss(ne, de, where=where, field=f"element ({i + 1}, {j + 1})", block_id=block_id)))
    n = sum(part[2][0].shape[0] for part in parts)
    A, B, C, D = np.zeros((n, n)), np.zeros((n, m)), np.zeros((p, n)), np.zeros((p, m))
    k = 0
    for i, j, (a, b, c, d) in parts:
        r = a.shape[0]
        A[k:k + r, k:k + r] = a
        B[k:k + r, j:j + 1] = b
        C[i:i + 1, k:k + r] = c
        D[i, j] = d[0, 0]
        k += r
    return A, B, C, D


def tf_poles_zeros(num: Any, den: Any) -> tuple[np.ndarray, np.ndarray]:
    """Poles and zeros of a SISO transfer function given by coefficient lists.

    Raises
    ------
    ParameterError
        Coefficients that are not finite numbers or an all-zero denominator.
    """
    n_ = _coeffs(num, where="transfer function", field="num", block_id=None)
    d_ = _coeffs(den, where="transfer function", field="den", block_id=None)
    if not np.any(d_):
        raise ParameterError("transfer function: denominator is all zeros", field="den")
    zeros = np.roots(n_) if n_.size > 1 and np.any(n_) else np.array([], dtype=complex)
    return np.roots(d_).astype(complex), zeros.astype(complex)


# ---- per kind -----------------------------------------------------------------------
def _lti_matrices(block: Block) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """A, B, C, D of a plant or dynamic block, from state-space or transfer-function params."""
    p, where = block.params, _where(block)
    has_ss = any(k in p for k in ("A", "B", "C", "D"))
    has_tf = "num" in p or "den" in p
    if has_ss and has_tf:
        raise ParameterError(f"{where}: give either A, B, C, D or num, den, not both", field="A", block_ids=[block.id])
    if has_tf:
        if "num" not in p or "den" not in p:
            raise ParameterError(f"{where}: a transfer function needs both num and den", field="num", block_ids=[block.id])
        return tf_to_ss(p["num"], p["den"], where=where, block_id=block.id)
    if not has_ss:
        raise ParameterError(f"{where}: needs A, B, C, D or num, den", field="A", block_ids=[block.id])
    for k in ("B", "C"):
        if k not in p:
            raise ParameterError(f"{where}: state-space form needs {k}", field=k, block_ids=[block.id])
    if "A" in p and not (isinstance(p["A"], list) and (not p["A"] or p["A"] == [[]])):
        A = as_matrix(p["A"], where=where, field="A", block_id=block.id, square=True)
    else:
        A = np.zeros((0, 0))
    n = A.shape[0]
    B = as_matrix(p["B"], where=where, field="B", block_id=block.id, rows=n, why_rows="the rows of A") if n else _empty_or(p["B"], 0, where, "B", block.id, axis=0)
    C = as_matrix(p["C"], where=where, field="C", block_id=block.id, cols=n, why_cols="the columns of A") if n else _empty_or(p["C"], 0, where, "C", block.id, axis=1)
    m = B.shape[1] if n else None
    pp = C.shape[0] if n else None
    if "D" in p:
        D = as_matrix(p["D"], where=where, field="D", block_id=block.id, rows=pp, cols=m, why_rows="the rows of C", why_cols="the columns of B")
    elif n:
        D = np.zeros((pp, m))
    else:
        raise ParameterError(f"{where}: a block without states needs D", field="D", block_ids=[block.id])
    if not n:
        B, C = np.zeros((0, D.shape[1])), np.zeros((D.shape[0], 0))
    return A, B, C, D


def _empty_or(value: Any, size: int, where: str, field: str, bid: str, *, axis: int) -> np.ndarray:
    if value in ([], [[]]):
        return np.zeros((0, 0))
    arr = as_matrix(value, where=where, field=field, block_id=bid)
    if arr.size:
        raise ParameterError(f"{where}: {field} must be empty when A is empty", field=field, block_ids=[bid])
    return np.zeros((0, 0))


def plant_matrices(diagram: Diagram, name: str) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The realised ``(A, B, C, D)`` of the plant or dynamic block called ``name`` (actuator input only)."""
    blk = diagram.block_by_name(name)
    if blk.kind not in ("plant", "dynamic"):
        raise DiagramError(f"block {name!r} is a {blk.kind}, not a plant", block_ids=[blk.id])
    return _lti_matrices(blk)


def plant_fingerprint(diagram: Diagram, name: str) -> str:
    """A short hash of a plant's realised matrices; a designed block stores it to spot staleness."""
    mats = plant_matrices(diagram, name)
    h = hashlib.sha256()
    for m in mats:
        h.update(np.ascontiguousarray(np.round(m, 12), dtype=float).tobytes())
        h.update(str(m.shape).encode())
    return h.hexdigest()[:16]


def _disturbance_matrices(block: Block, n: int, p: int) -> tuple[np.ndarray, np.ndarray] | None:
    """Optional load-input matrices ``E`` (n x q) and ``F`` (p x q) of a state-space plant."""
    if "E" not in block.params:
        if "F" in block.params:
            raise ParameterError(f"{_where(block)}: F (load feedthrough) needs E", field="F", block_ids=[block.id])
        return None
    if "num" in block.params:
        raise ParameterError(f"{_where(block)}: a load input (E) needs the state-space form", field="E", block_ids=[block.id])
    E = as_matrix(block.params["E"], where=_where(block), field="E", block_id=block.id, rows=n, why_rows="the rows of A")
    F = (
        as_matrix(block.params["F"], where=_where(block), field="F", block_id=block.id, rows=p, cols=E.shape[1],
                  why_rows="the rows of C", why_cols="the columns of E")
        if "F" in block.params
        else np.zeros((p, E.shape[1]))
    )
    return E, F


def source_width(block: Block) -> int:
    return as_width(block.params.get("width", 1), where=_where(block), block_id=block.id)


def _check_source(block: Block) -> int:
    where, p = _where(block), block.params
    w = source_width(block)
    role = p.get("role", "reference")
    if role not in SOURCE_ROLES:
        raise ParameterError(f"{where}: role {role!r} is not one of {', '.join(SOURCE_ROLES)}", field="role", block_ids=[block.id])
    wf = p.get("waveform", {"kind": "zero"})
    if not isinstance(wf, dict) or wf.get("kind", "zero") not in WAVEFORM_KINDS:
        kind = wf.get("kind") if isinstance(wf, dict) else wf
        raise ParameterError(f"{where}: waveform kind {kind!r} is not one of {', '.join(WAVEFORM_KINDS)}", field="waveform", block_ids=[block.id])
    for key in ("amplitude", "slope"):
        if key in wf:
            as_vector(wf[key], where=where, field=f"waveform {key}", length=w, block_id=block.id)
    for key in ("start", "frequency_rad_s", "phase_deg"):
        if key in wf:
            as_vector(wf[key], where=where, field=f"waveform {key}", length=1, block_id=block.id)
    if wf.get("kind") == "white" and "intensity" not in wf:
        raise ParameterError(f"{where}: white-noise waveform needs an intensity", field="waveform", block_ids=[block.id])
    if "seed" in wf and (isinstance(wf["seed"], bool) or not isinstance(wf["seed"], int) or wf["seed"] < 0):
        raise ParameterError(f"{where}: seed {wf['seed']!r} must be a non-negative whole number", field="waveform", block_ids=[block.id])
    source_intensity(block)
    return w


def source_intensity(block: Block) -> np.ndarray | None:
    """White-noise intensity W (width x width) of a source, or None.

    Taken from a ``white`` waveform, else from an optional ``intensity`` parameter that
    lets a step disturbance also state a random part for the noise budget. A number means
    ``W I``, a list the diagonal. ``E[w(t) w(s)^T] = W delta(t - s)``.

    Raises
    ------
    ParameterError
        Wrong shape, not symmetric, or not positive semidefinite.
    """
    wf = block.params.get("waveform") or {}
    holder = wf if isinstance(wf, dict) and wf.get("kind") == "white" else block.params
    if "intensity" not in holder:
        return None
    raw = holder["intensity"]
    w, where = source_width(block), _where(block)
    try:  # null, text or a dict is a mistake, not "no intensity"
        arr = np.array(raw, dtype=float) if raw is not None and not isinstance(raw, (dict, str)) else None
    except (TypeError, ValueError):
        arr = None
    if arr is None or arr.ndim > 2:
        raise ParameterError(f"{where}: intensity must be a number, a list or a matrix", field="intensity", block_ids=[block.id])
    if arr.ndim == 0:
        W = float(arr) * np.eye(w)
    elif arr.ndim == 1:
        W = np.diag(as_vector(arr, where=where, field="intensity", length=w, block_id=block.id))
    else:
        W = as_matrix(arr, where=where, field="intensity", block_id=block.id, rows=w, cols=w, why_rows="the source width", why_cols="the source width")
    if not np.all(np.isfinite(W)) or not np.allclose(W, W.T, atol=1e-12 * max(1.0, np.abs(W).max())):
        raise ParameterError(f"{where}: intensity must be finite and symmetric", field="intensity", block_ids=[block.id])
    # a number or a list gives a diagonal W: its eigenvalues are its diagonal, no solver needed
    lowest = np.linalg.eigvalsh(W).min() if arr.ndim == 2 else np.diag(W).min()
    if lowest < -1e-12 * max(1.0, np.abs(W).max()):
        raise ParameterError(f"{where}: intensity must be positive semidefinite (it is a covariance density)", field="intensity", block_ids=[block.id])
    return W


def _estimator_model(block: Block, diagram: Diagram):
    where, p = _where(block), block.params
    link = p.get("plant")
    if link is not None:
        try:
            plant = diagram.block_by_name(link)
        except Exception as err:
            raise ParameterError(f"{where}: linked plant {link!r} does not exist", field="plant", block_ids=[block.id]) from err
        if plant.kind not in ("plant", "dynamic"):
            raise ParameterError(f"{where}: linked block {link!r} is a {plant.kind}, not a plant", field="plant", block_ids=[block.id])
        try:
            return _lti_matrices(plant)
        except ParameterError as err:
            raise ParameterError(f"{where}: linked plant {link!r} is invalid ({err.message})", field="plant", block_ids=[block.id, plant.id]) from err
    return _lti_matrices(block)


def realize(block: Block, diagram: Diagram) -> Realization:
    """Realise one block (not a source).

    Raises
    ------
    ParameterError
        Any malformed parameter, named by block and field.
    """
    where, kind, p = _where(block), block.kind, block.params
    name = block.name
    if kind in ("plant", "dynamic"):
        A, B, C, D = _lti_matrices(block)
        n, m, q = A.shape[0], D.shape[1], D.shape[0]
        ins: tuple[tuple[str, int], ...] = (("u", m),)
        dist = _disturbance_matrices(block, n, q) if kind == "plant" else None
        if dist is not None:
            E, F = dist
            B, D = np.hstack([B, E]), np.hstack([D, F])
            ins = (("u", m), ("d", E.shape[1]))
        return Realization(A, B, C, D, ins, (("y", q),), tuple(f"{name}.x{k + 1}" for k in range(n)))
    if kind == "gain":
        if "K" not in p:
            raise ParameterError(f"{where}: gain needs K", field="K", block_ids=[block.id])
        K = as_matrix(p["K"], where=where, field="K", block_id=block.id)
        m, q = K.shape[1], K.shape[0]
        return Realization(np.zeros((0, 0)), np.zeros((0, m)), np.zeros((q, 0)), K, (("in", m),), (("out", q),), ())
    if kind == "sum":
        signs = p.get("signs")
        if not isinstance(signs, list) or not signs or any(s not in ("+", "-") for s in signs):
            raise ParameterError(f"{where}: signs must be a list of '+' or '-', one per input, got {signs!r}", field="signs", block_ids=[block.id])
        w = as_width(p.get("width", 1), where=where, block_id=block.id)
        if w * (len(signs) + 1) > MAX_TOTAL_WIDTH:  # its matrix grows with width x width x inputs
            raise ParameterError(
                f"{where}: width {w} with {len(signs)} inputs makes {w * (len(signs) + 1)} signal components, at most {MAX_TOTAL_WIDTH}",
                field="width", block_ids=[block.id],
            )
        D = np.hstack([(1.0 if s == "+" else -1.0) * np.eye(w) for s in signs])
        return Realization(np.zeros((0, 0)), np.zeros((0, w * len(signs))), np.zeros((w, 0)), D,
                           tuple((f"in{k + 1}", w) for k in range(len(signs))), (("out", w),), ())
    if kind == "integrator":
        w = as_width(p.get("width", 1), where=where, block_id=block.id)
        return Realization(np.zeros((w, w)), np.eye(w), np.eye(w), np.zeros((w, w)), (("in", w),), (("out", w),),
                           tuple(f"{name}.x{k + 1}" for k in range(w)))
    if kind == "estimator":
        A, B, C, D = _estimator_model(block, diagram)
        n = A.shape[0]
        if n == 0:
            raise ParameterError(f"{where}: the estimator's model has no states", field="A", block_ids=[block.id])
        m, q = B.shape[1], C.shape[0]
        if "L" not in p:
            raise ParameterError(f"{where}: estimator needs its gain L ({n}x{q})", field="L", block_ids=[block.id])
        L = as_matrix(p["L"], where=where, field="L", block_id=block.id, rows=n, cols=q, why_rows="the model's states", why_cols="the measured outputs")
        Ae = A - L @ C
        Be = np.hstack([B - L @ D, L])
        Ce = np.vstack([np.eye(n), C])
        De = np.vstack([np.zeros((n, m + q)), np.hstack([D, np.zeros((q, q))])])
        return Realization(Ae, Be, Ce, De, (("u", m), ("y", q)), (("xhat", n), ("yhat", q)),
                           tuple(f"{name}.xhat{k + 1}" for k in range(n)))
    if kind == "source":
        raise DiagramError(f"{where}: a source has no realisation; it is an input of the assembled model", block_ids=[block.id])
    raise ParameterError(f"{where}: unknown block kind {kind!r}", field="kind", block_ids=[block.id])


def port_widths(block: Block, diagram: Diagram) -> tuple[dict[str, int], dict[str, int]]:
    """``(inputs, outputs)``: port name -> width, for drawing and checking wires.

    Raises
    ------
    ParameterError
        When the parameters are malformed (widths then are unknown).
    """
    if block.kind == "source":
        return {}, {"out": _check_source(block)}
    r = realize(block, diagram)
    ins, outs = dict(r.inputs), dict(r.outputs)
    assert list(ins) == input_ports(block) and list(outs) == output_ports(block)
    return ins, outs


def params_digest(params: dict[str, Any]) -> str:
    """Stable hash of JSON-native parameters (for caches keyed on a block's content)."""
    return hashlib.sha256(json.dumps(params, sort_keys=True).encode()).hexdigest()[:16]
