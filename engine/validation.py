"""Shared input normalisers: matrices, coefficient lists, numeric text pasted by a user.

Every function here names what it checks (``where`` and ``field``) in its errors, so a bad
matrix in block ``P`` reads ``block 'P': B has 2 rows, expected 3 (the rows of A)``.
"""
from __future__ import annotations

import ast
import re
from collections.abc import Iterable
from typing import Any

import numpy as np

from loopwright.engine.errors import ParameterError

__all__ = [
    "MAX_WIDTH", "MAX_TOTAL_WIDTH", "as_matrix", "as_vector", "as_width", "declared_width", "parse_matrix_text", "problems",
]

# Widths are typed by hand, so a typo (10000 for 100) must be refused before anything of
# that size is allocated: a summing junction's matrix grows with width x width x inputs.
# The schema (resources/diagram.schema.json, $defs/width) states the same maximum.
MAX_WIDTH = 1000
# The sum of declared widths over every port they size (a summing junction's inputs and
# output, an integrator's input and output, a source's output): bounds the assembled model.
MAX_TOTAL_WIDTH = 5000


def as_matrix(
    value: Any,
    *,
    where: str,
    field: str,
    block_id: str | None = None,
    rows: int | None = None,
    cols: int | None = None,
    square: bool = False,
    why_rows: str = "",
    why_cols: str = "",
) -> np.ndarray:
    """Return ``value`` as a finite 2-D float array, checking its shape.

    Parameters
    ----------
    value : scalar, nested list or ndarray
        A scalar becomes ``[[value]]``; a flat list becomes one row.
    where : str
        Who owns the value, for messages (``"block 'P'"``).
    field : str
        The parameter name (``"A"``).
    rows, cols : int, optional
        Required shape; ``why_rows`` / ``why_cols`` explain where the requirement comes from.

    Raises
    ------
    ParameterError
        Not numeric, ragged, not finite, or of the wrong shape.
    """
    ids = [block_id] if block_id else []
    try:
        arr = np.array(value, dtype=float)
    except (TypeError, ValueError) as err:
        raise ParameterError(
            f"{where}: {field} is not a numeric matrix (rows of numbers of equal length)", field=field, block_ids=ids
        ) from err
    if arr.ndim == 0:
        arr = arr.reshape(1, 1)
    elif arr.ndim == 1:
        arr = arr.reshape(1, -1)
    elif arr.ndim > 2:
        raise ParameterError(f"{where}: {field} has {arr.ndim} dimensions, expected a matrix", field=field, block_ids=ids)
    if not np.isfinite(arr).all():
        bad = tuple(int(k) + 1 for k in np.argwhere(~np.isfinite(arr))[0])
        raise ParameterError(
            f"{where}: {field} has a non-finite entry at row {bad[0]}, column {bad[1]}", field=field, block_ids=ids
        )
    if square and arr.shape[0] != arr.shape[1]:
        raise ParameterError(f"{where}: {field} is {arr.shape[0]}x{arr.shape[1]}, expected a square matrix", field=field, block_ids=ids)
    if rows is not None and arr.shape[0] != rows:
        raise ParameterError(
            f"{where}: {field} has {_count(arr.shape[0], 'row')}, expected {rows}{' (' + why_rows + ')' if why_rows else ''}",
            field=field,
            block_ids=ids,
        )
    if cols is not None and arr.shape[1] != cols:
        raise ParameterError(
            f"{where}: {field} has {_count(arr.shape[1], 'column')}, expected {cols}{' (' + why_cols + ')' if why_cols else ''}",
            field=field,
            block_ids=ids,
        )
    return arr


def as_vector(value: Any, *, where: str, field: str, length: int | None = None, block_id: str | None = None) -> np.ndarray:
    """A finite 1-D float array; a scalar is repeated to ``length`` when given."""
    ids = [block_id] if block_id else []
    try:
        arr = np.array(value, dtype=float)
    except (TypeError, ValueError) as err:
        raise ParameterError(f"{where}: {field} is not a number or a list of numbers", field=field, block_ids=ids) from err
    if arr.ndim == 0:
        arr = np.full(length if length is not None else 1, float(arr))
    if arr.ndim != 1:
        raise ParameterError(f"{where}: {field} must be a number or a flat list", field=field, block_ids=ids)
    if not np.isfinite(arr).all():
        raise ParameterError(f"{where}: {field} has a non-finite entry", field=field, block_ids=ids)
    if length is not None and arr.size != length:
        raise ParameterError(f"{where}: {field} has {arr.size} entries, expected {length}", field=field, block_ids=ids)
    return arr


def as_width(value: Any, *, where: str, field: str = "width", block_id: str | None = None) -> int:
    """A signal width: a whole number from 1 to :data:`MAX_WIDTH`."""
    ids = [block_id] if block_id else []
    # the range test comes first: int() of NaN or infinity raises
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not 1 <= value <= MAX_WIDTH or value != int(value):
        shown = repr(value) if len(repr(value)) <= 40 else f"{repr(value)[:36]}..."
        raise ParameterError(
            f"{where}: {field} is {shown}, expected a whole number from 1 to {MAX_WIDTH}", field=field, block_ids=ids
        )
    return int(value)


def declared_width(blocks: Iterable[Any]) -> tuple[int, Any]:
    """``(total, largest)``: the signal components the blocks' ``width`` parameters size, and the block sizing most.

    A summing junction sizes its inputs and its output, an integrator its input and
    output, a source its output; other blocks take their widths from their matrices,
    which the file spells out. Compare the total with :data:`MAX_TOTAL_WIDTH` before
    building anything. Malformed widths count as 1 (their own error is reported elsewhere).
    """
    total, largest, most = 0, None, -1
    for block in blocks:
        ports = {"sum": None, "integrator": 2, "source": 1}.get(block.kind, 0)
        if ports is None:
            signs = block.params.get("signs")
            ports = len(signs) + 1 if isinstance(signs, list) else 1
        width = block.params.get("width", 1)
        if type(width) is not int or not 1 <= width <= MAX_WIDTH:  # (the usual whole number passes as it is)
            try:
                width = as_width(width, where="")
            except ParameterError:
                width = 1
        size = ports * width
        total += size
        if ports and size > most:
            largest, most = block, size
    return total, largest


def _count(k: int, noun: str) -> str:
    return f"{k} {noun}{'' if k == 1 else 's'}"


_NP_CALL = re.compile(r"^\s*(?:np|numpy)\.(?:array|asarray|matrix)\s*\((.*)\)\s*$", re.S)


def parse_matrix_text(text: str) -> list[list[float]]:
    """Parse a matrix typed or pasted by a user.

    Accepts spreadsheet text (cells split by tabs, commas, semicolons or spaces; rows by
    newlines), a Python or numpy literal (``[[1, 2], [3, 4]]``, ``np.array([[1, 2]])``),
    and a single number. Returns a nested list of floats.

    Raises
    ------
    ParameterError
        Empty text, ragged rows, or a cell that is not a number (named by row and column).

    Examples
    --------
    >>> parse_matrix_text("1\\t2\\n3\\t4")
    [[1.0, 2.0], [3.0, 4.0]]
    >>> parse_matrix_text("np.array([[0, 1], [-2, -3]])")
    [[0.0, 1.0], [-2.0, -3.0]]
    """
    src = text.strip()
    if not src:
        raise ParameterError("the matrix is empty", field="matrix")
    m = _NP_CALL.match(src)
    if m:
        src = m.group(1).split(", dtype")[0].strip()
    if src.startswith("["):
        try:
            val = ast.literal_eval(src)
        except (ValueError, SyntaxError) as err:
            raise ParameterError(f"cannot read {text.strip()[:40]!r} as a list of numbers", field="matrix") from err
        rows = val if isinstance(val, (list, tuple)) and val and isinstance(val[0], (list, tuple)) else [val]
        rows = [list(r) if isinstance(r, (list, tuple)) else [r] for r in rows]
    else:
        rows = []
        for line in src.replace(";", "\n").splitlines():
            if not line.strip():
                continue
            cells = [c for c in re.split(r"[\t,]+|\s+", line.strip()) if c]
            rows.append(cells)
    out: list[list[float]] = []
    for i, row in enumerate(rows, 1):
        vals = []
        for j, cell in enumerate(row, 1):
            try:
                v = float(cell) if not isinstance(cell, complex) else None
            except (TypeError, ValueError):
                v = None
            if v is None or not np.isfinite(v):
                raise ParameterError(f"row {i}, column {j}: {str(cell)!r} is not a finite number", field="matrix")
            vals.append(v)
        out.append(vals)
    widths = {len(r) for r in out}
    if len(widths) != 1:
        raise ParameterError(f"rows have different lengths ({', '.join(str(len(r)) for r in out)})", field="matrix")
    return out


def problems(diagram, *, assembled=None):
    """Every problem that keeps ``diagram`` from assembling (see ``interconnect.collect_problems``;
    ``assembled`` is passed on)."""
    from loopwright.engine.interconnect import collect_problems  # the assembly imports this module

    return collect_problems(diagram, assembled=assembled)
