"""Scaling guard: numbers a model can carry through double-precision linear algebra.

A typo such as ``1e300`` in a gain, or a transfer function whose leading coefficient is
``1e-320``, gives matrices that are finite when typed but overflow inside LAPACK (an SVD
that "did not converge", a Schur form full of NaN) or make an automatic frequency grid
span hundreds of decades. The guard refuses such a block once, where it is realised and
the model is assembled, with one line naming the block and the field, so that no analysis
downstream meets the numbers at all.

The limit :data:`SCALE_LIMIT` is ``1e100``: the analyses multiply up to three entries of
the model before any normalisation (a Gramian ``X ~ B B^T / |a|`` followed by
``C X C^T``, ``L C`` inside an estimator, gains in series along the wiring), and
``(1e100)^3 = 1e300`` still fits below the largest double (about ``1.8e308``). Real
models in any consistent units stay many decades inside it.
"""
from __future__ import annotations

from typing import Any

import numpy as np

from loopwright.engine.blocks import plant_matrices
from loopwright.engine.diagram import Block, Diagram
from loopwright.engine.errors import DiagramError, ParameterError
from loopwright.engine.static_chains import FeedthroughMatrix

__all__ = ["SCALE_LIMIT", "check_block_params", "check_realization", "check_model", "checked_plant_matrices"]

#: Largest magnitude accepted in a parameter, a block's realisation or the assembled model.
SCALE_LIMIT = 1e100

# Parameters that are not model numbers: widths are counted by ``validation.as_width``,
# seeds only seed a random generator.
_NOT_MODEL_NUMBERS = frozenset({"width", "seed"})


def _fmt(v: float) -> str:
    return f"{v:.3g}"


def _too_big(value: Any, path: str) -> tuple[str, float] | None:
    """``(path, value)`` of the first number in ``value`` beyond the limit, or None.

    Walks nested dicts and lists without recursion (the file loader bounds the nesting,
    but this guard must not be the thing that overflows the stack).
    """
    stack: list[tuple[str, Any]] = [(path, value)]
    while stack:
        where, v = stack.pop()
        if isinstance(v, bool) or v is None or isinstance(v, str):
            continue
        if isinstance(v, (int, float, np.integer, np.floating)):
            x = float(v)
            if np.isfinite(x) and abs(x) > SCALE_LIMIT:
                return where, x
            continue
        if isinstance(v, dict):
            items = [(f"{where}.{k}" if where else str(k), sub) for k, sub in v.items() if k not in _NOT_MODEL_NUMBERS]
            stack.extend(reversed(items))
            continue
        if isinstance(v, np.ndarray):
            v = v.tolist()
        if type(v) is list and _plain_numbers_in_range(v):
            continue  # the usual case, without building an array for a few numbers
        if isinstance(v, (list, tuple)):
            try:
                arr = np.array(v, dtype=float)
            except (TypeError, ValueError, OverflowError):
                arr = None
            if arr is not None:
                with np.errstate(invalid="ignore"):
                    big = np.isfinite(arr) & (np.abs(arr) > SCALE_LIMIT)
                if big.any():
                    idx = np.argwhere(big)[0] if arr.ndim else ()
                    return where + "".join(f"[{int(i)}]" for i in idx), float(arr[tuple(idx)])
                continue
            stack.extend(reversed([(f"{where}[{i}]", sub) for i, sub in enumerate(v)]))
    return None


def _plain_numbers_in_range(v: list) -> bool:
    """True for a list of numbers, or of lists of numbers, all within the limit (a small
    matrix or coefficient list); False means "look closer", not "out of range"."""
    lo, hi = -SCALE_LIMIT, SCALE_LIMIT
    for x in v:
        t = type(x)
        if t is float or t is int:
            if not lo <= x <= hi:
                return False
        elif t is list:
            for y in x:
                ty = type(y)
                if (ty is not float and ty is not int) or not lo <= y <= hi:
                    return False
        else:
            return False
    return True


def check_block_params(block: Block, *, only: tuple[str, ...] | None = None) -> None:
    """Refuse a block whose parameters hold a number beyond :data:`SCALE_LIMIT`.

    Parameters
    ----------
    block : Block
    only : tuple of str, optional
        Check only these parameters (a design checks its recipe, not the gain it replaces).

    Raises
    ------
    ParameterError
        ``badly scaled: block 'K' field K[1][0] = 1e+300 ...`` (indices 0-based, as in
        the file).
    """
    params = block.params if isinstance(block.params, dict) else {}
    for key, value in params.items():
        if key in _NOT_MODEL_NUMBERS or (only is not None and key not in only):
            continue
        hit = _too_big(value, str(key))
        if hit is not None:
            path, x = hit
            raise ParameterError(
                f"badly scaled: block {block.name!r} field {path} = {_fmt(x)} is beyond +-{_fmt(SCALE_LIMIT)}, "
                "more than double precision can carry through the analyses; check the units or the number",
                field=str(key),
                block_ids=[block.id],
            )


def _coefficient_lists(value: Any, path: str):
    """Every flat list of numbers inside ``value`` (a transfer function's num or den)."""
    if isinstance(value, (list, tuple)) and value and not any(isinstance(v, (list, tuple)) for v in value):
        yield path, value
    elif isinstance(value, (list, tuple)):
        for i, sub in enumerate(value):
            yield from _coefficient_lists(sub, f"{path}[{i}]")


def _negligible_leading_coefficient(block: Block) -> str | None:
    """For a transfer function: the den whose leading coefficient is negligible, as a message."""
    params = block.params if isinstance(block.params, dict) else {}
    if "den" not in params:
        return None
    worst = None
    for path, coeffs in _coefficient_lists(params["den"], "den"):
        try:
            c = np.array(coeffs, dtype=float)
        except (TypeError, ValueError):
            continue
        nz = np.flatnonzero(c)
        if nz.size < 2:
            continue
        lead, rest = abs(c[nz[0]]), np.abs(c[nz[0] + 1:]).max()
        with np.errstate(over="ignore", divide="ignore"):
            ratio = rest / lead
        if not ratio <= SCALE_LIMIT and (worst is None or ratio > worst[2]):
            worst = (f"{path}[{int(nz[0])}]", float(c[nz[0]]), ratio, float(rest))
    if worst is None:
        return None
    path, lead, _, largest = worst
    return (
        f"badly scaled: block {block.name!r} field {path} = {_fmt(lead)}: the leading coefficient is negligible next to "
        f"the others (largest {_fmt(largest)}, more than {_fmt(SCALE_LIMIT)} times larger), which puts a pole near "
        "infinity; drop it to lower the order, or check the number"
    )


def check_realization(block: Block, mats: dict[str, np.ndarray]) -> None:
    """Refuse a block whose realised matrices are not finite or beyond :data:`SCALE_LIMIT`.

    Called after :func:`check_block_params`, so the parameters themselves are in range;
    what remains are products made by the realisation (a transfer function divided by a
    tiny leading coefficient, an estimator's ``L C``).

    Raises
    ------
    ParameterError
    """
    hit = _first_out_of_range(mats)
    if hit is None:
        return
    msg = _negligible_leading_coefficient(block)
    if msg is not None:
        raise ParameterError(msg, field="den", block_ids=[block.id])
    name, i, j, value = hit
    fields = [k for k in ("A", "B", "C", "D", "E", "F", "Cz", "Dz", "Fz", "num", "den", "K", "L") if k in (block.params or {})]
    raise ParameterError(
        f"badly scaled: block {block.name!r}: its realisation has {name}[{i}][{j}] = {_fmt(value)}, beyond "
        f"+-{_fmt(SCALE_LIMIT)} (products of its fields {', '.join(fields) or 'parameters'}); check the units or the numbers",
        field=fields[0] if fields else None,
        block_ids=[block.id],
    )


def _first_out_of_range(mats: dict[str, np.ndarray]) -> tuple[str, int, int, float] | None:
    """``(matrix name, row, column, value)`` of the first entry not finite or beyond the limit."""
    for name, M in mats.items():
        M = np.asarray(M, dtype=float)
        if not M.size:
            continue
        with np.errstate(invalid="ignore"):
            bad = ~(np.abs(M) <= SCALE_LIMIT)
        if bad.any():
            i, j = (int(k) for k in np.argwhere(bad)[0])
            return name, i, j, float(M[i, j])
    return None


def check_model(model) -> None:
    """Refuse an assembled model with an entry that is not finite or beyond :data:`SCALE_LIMIT`.

    Every block passed :func:`check_realization`; an entry out of range here comes from
    gains multiplied along the wiring, so the message names the state, input or signal
    (and through them the blocks) where it sits.

    Raises
    ------
    DiagramError
    """
    hit = _first_out_of_range({"A": model.A, "B": model.B, "C": model.C})
    if hit is None and isinstance(model.D, FeedthroughMatrix):
        in_d = model.D.first_out_of_range(SCALE_LIMIT)
        hit = None if in_d is None else ("D", *in_d)
    elif hit is None:
        hit = _first_out_of_range({"D": model.D})
    if hit is None:
        return
    name, i, j, value = hit
    state_block = [""] * model.A.shape[0]
    for block_name, sl in model.states.items():
        state_block[sl] = [block_name] * (sl.stop - sl.start)
    rows = {"A": model.state_names, "B": model.state_names, "C": model.output_names, "D": model.output_names}
    cols = {"A": model.state_names, "B": model.input_names, "C": model.state_names, "D": model.input_names}
    states = {"A": (i, j), "B": (i,), "C": (j,), "D": ()}[name]
    blocks = sorted({state_block[k] for k in states} - {""})
    by_name = {b.name: b.id for b in model.diagram.blocks.values()}
    raise DiagramError(
        f"badly scaled: the assembled model has {_fmt(value)} from {cols[name][j]!r} to {rows[name][i]!r} "
        f"({name} entry), beyond +-{_fmt(SCALE_LIMIT)}: gains multiply along the wiring"
        + (f" into block {', '.join(repr(b) for b in blocks)}" if blocks else "")
        + "; check the units or the numbers",
        block_ids=[by_name[b] for b in blocks if b in by_name],
    )


def checked_plant_matrices(diagram: Diagram, name: str) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """:func:`loopwright.engine.blocks.plant_matrices` behind the scaling guard (for designs).

    Raises
    ------
    ParameterError
        A parameter or the realisation of plant ``name`` is out of range.
    """
    block = diagram.block_by_name(name)
    check_block_params(block)
    with np.errstate(all="ignore"):  # overflow is reported below, with the field named
        A, B, C, D = plant_matrices(diagram, name)
    check_realization(block, {"A": A, "B": B, "C": C, "D": D})
    return A, B, C, D
