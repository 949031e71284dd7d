"""A discrete controller as small, dependency-free C99 source and header.

The generated code implements ``out[k] = C x[k] + D in[k]`` and ``x[k+1] = A x[k] + B in[k]``
with the matrices written out as ``static const`` arrays (no heap, no libm, no globals
that change). Per sample the caller runs ``<prefix>_output`` with the new measurement,
applies the result, then ``<prefix>_update`` with the same measurement; ``<prefix>_step``
does both. The scalar type is ``double`` or ``float``, chosen at export.

Values are printed with 17 significant digits for ``double`` (round-trips exactly) and 9
for ``float``.

No text from a diagram or the command line reaches the code as it is. Every such text
(title, file path, block and signal names) passes :func:`c_comment_text` and becomes one
line of a comment, made of printable ASCII without backslash, with no ``/*``, ``*/`` or
``??`` (a trigraph under ``-std=c99``): it can neither end the comment, nor splice the next
line into it, nor start a preprocessor line. Identifiers come only from the prefix, which
must be a C identifier; a header file name in ``#include`` must be plain (see
:func:`c_include_line`).
"""
from __future__ import annotations

import math
import re
import textwrap
import unicodedata
from dataclasses import dataclass

import numpy as np

from loopwright.engine import CAUTION
from loopwright.engine.discretize import DiscreteModel
from loopwright.engine.errors import DesignError

__all__ = [
    "CSource", "controller_to_c", "C_PRECISIONS", "c_comment_text", "c_include_line", "check_c_prefix",
    "is_c_identifier", "COMMENT_TEXT_LIMIT", "TRUNCATION_MARK",
]

C_PRECISIONS = ("double", "float")
_IDENT = re.compile(r"[A-Za-z_][A-Za-z0-9_]*")  # ASCII only; always used with fullmatch
# printable ASCII except backslash (a line splice, and half of every escape)
_COMMENT_SAFE = frozenset(chr(c) for c in range(0x20, 0x7F)) - {"\\"}
# letters, digits and a few marks that mean nothing to the preprocessor inside "..."
_INCLUDE_NAME = re.compile(r"[A-Za-z0-9_.+\- ]+")
COMMENT_TEXT_LIMIT = 200
TRUNCATION_MARK = " [...]"
_COMMENT_WIDTH = 88


@dataclass(frozen=True)
class CSource:
    """Header and source text; ``header_name`` is what the source ``#include``s."""

    header: str
    source: str
    header_name: str
    source_name: str


def _num(v: float, precision: str) -> str:
    if precision == "double":
        txt = repr(float(v))
        if "e" not in txt and "." not in txt and "inf" not in txt and "nan" not in txt:
            txt += ".0"
        return txt
    txt = f"{float(v):.9g}"
    if "e" not in txt and "." not in txt:
        txt += ".0"
    return txt + "f"


def _array(name: str, M: np.ndarray, precision: str, real: str) -> str:
    rows, cols = M.shape
    if rows == 0 or cols == 0:
        return f"/* {name} is empty ({rows}x{cols}) */\n"
    lines = [f"static const {real} {name}[{rows}][{cols}] = {{"]
    for r in range(rows):
        lines.append("    {" + ", ".join(_num(v, precision) for v in M[r]) + "},")
    lines.append("};")
    return "\n".join(lines) + "\n"


def c_comment_text(text: object, *, limit: int | None = COMMENT_TEXT_LIMIT) -> str:
    """Any text as one line that is safe inside a C block comment.

    Parameters
    ----------
    text : object
        Any text (``str()`` of it is taken).
    limit : int or None
        Longest result; a longer text is cut and ends in :data:`TRUNCATION_MARK`.

    Returns
    -------
    str
        One line of printable ASCII without backslash that holds no ``/*``, ``*/`` or
        ``??``. Line breaks, tabs and other control characters become spaces; a backslash
        becomes ``/`` (path separators stay readable); accented letters lose the accent;
        other characters become ``_``.
    """
    out = []
    for ch in unicodedata.normalize("NFKD", str(text)):
        if ch in _COMMENT_SAFE:
            out.append(ch)
        elif ch == "\\":
            out.append("/")
        elif unicodedata.combining(ch):
            continue
        elif ch.isspace() or unicodedata.category(ch)[0] in "CZ":
            out.append(" ")
        else:
            out.append("_")
    line = "".join(out)
    while True:
        # one pass may form a new pair ("/*/" -> "/ */"), so repeat until none is left;
        # each pass only inserts spaces, which end every such pair
        safe = line.replace("/*", "/ *").replace("*/", "* /").replace("??", "? ?")
        if safe == line:
            break
        line = safe
    if limit is not None and len(line) > limit:
        # a prefix of a safe line is safe, and the mark starts with a space
        line = line[: max(limit - len(TRUNCATION_MARK), 0)] + TRUNCATION_MARK
    return line


def is_c_identifier(text: object) -> bool:
    """True for ASCII letters, digits and ``_``, not starting with a digit."""
    return isinstance(text, str) and _IDENT.fullmatch(text) is not None


def check_c_prefix(prefix: object) -> str:
    """``prefix`` if it is a C identifier (ASCII letters, digits, ``_``, not a digit first).

    Raises
    ------
    DesignError
        Anything else, named in escaped form so the message stays one line.
    """
    if not is_c_identifier(prefix):
        raise DesignError(f"C prefix {prefix!r} is not a C identifier (ASCII letters, digits, '_', not starting with a digit)")
    return prefix


def c_include_line(header_name: str) -> str:
    """``#include "<header_name>"``, for a plain file name only.

    Raises
    ------
    DesignError
        The name holds a character other than ASCII letters, digits, space, ``_ . + -``
        (a quote, a backslash, ``/*`` or ``??`` would change what the line means).
    """
    if not _INCLUDE_NAME.fullmatch(header_name):
        raise DesignError(
            f"C header name {header_name!r}: use ASCII letters, digits, spaces and '_ . + -' only in the output file name"
        )
    return f'#include "{header_name}"'


def _comment_block(lines: list[str]) -> str:
    # every line passes the sanitiser again: a template joined to a text must not form a pair
    body = []
    for line in lines:
        safe = c_comment_text(line, limit=None)
        body.append(" * " + safe if safe else " *")
    return "/*\n" + "\n".join(body) + "\n */\n"


def controller_to_c(
    model: DiscreteModel,
    *,
    prefix: str = "lw_controller",
    precision: str = "double",
    origin: str = "",
    input_names: list[str] | None = None,
    output_names: list[str] | None = None,
) -> CSource:
    """Generate the C99 header and source of a discrete state-space controller.

    Parameters
    ----------
    model : DiscreteModel
        The controller (``u`` = its inputs, e.g. measured signals; ``y`` = its outputs,
        e.g. actuator commands).
    prefix : str
        C identifier prefix of the struct and functions (``<prefix>_state``,
        ``<prefix>_reset``, ``<prefix>_output``, ``<prefix>_update``, ``<prefix>_step``)
        and stem of the file names.
    precision : {"double", "float"}
    origin : str
        Where the model came from (diagram file, measured and actuator signals); written
        into the comments.
    input_names, output_names : list of str, optional
        Signal component names, listed in the header comment in index order.

    Returns
    -------
    CSource

    Raises
    ------
    DesignError
        Prefix not a C identifier, unknown precision, non-finite matrices.
    """
    check_c_prefix(prefix)
    if precision not in C_PRECISIONS:
        raise DesignError(f"precision {precision!r} is not one of {', '.join(C_PRECISIONS)}")
    A, B, C, D = (np.asarray(M, dtype=float) for M in (model.A, model.B, model.C, model.D))
    for nm, M in zip("ABCD", (A, B, C, D)):
        if not np.all(np.isfinite(M)):
            raise DesignError(f"controller matrix {nm} holds a value that is not finite; nothing to export")
    if not (isinstance(model.ts, (int, float, np.floating)) and math.isfinite(model.ts) and model.ts > 0):
        raise DesignError(f"sample period {model.ts!r} s must be a positive, finite number; nothing to export")
    n, m, p = A.shape[0], D.shape[1], D.shape[0]
    real = precision
    up = prefix.upper()
    method = c_comment_text(model.method) + (f", pre-warped at {float(model.prewarp_rad_s)!r} rad/s" if model.prewarp_rad_s else "")
    info = [
        f"{prefix}: discrete controller generated by Loopwright.",
        "",
        f"Sample period: {float(model.ts)!r} s; discretisation: {method}.",
        f"Model: {c_comment_text(origin)}" if origin else "Model: (not stated)",
        f"States: {n}; inputs: {m}; outputs: {p}; scalar type: {real}.",
        "",
        "Per sample: out = C x + D in (call _output), apply out, then x = A x + B in (call _update),",
        "or call _step for both. Call _reset before the first sample.",
    ]
    if input_names:
        info += ["", "Inputs in[i] (measured):"] + [f"  in[{i}] = {c_comment_text(nm)}" for i, nm in enumerate(input_names)]
    if output_names:
        info += ["", "Outputs out[i] (commands):"] + [f"  out[{i}] = {c_comment_text(nm)}" for i, nm in enumerate(output_names)]
    info += ["", *textwrap.wrap(CAUTION, _COMMENT_WIDTH)]
    head_comment = _comment_block(info)
    nstate = max(n, 1)  # C99 forbids zero-length arrays; a static controller keeps one unused slot
    header = (
        head_comment
        + f"#ifndef {up}_H\n#define {up}_H\n\n"
        + f"#define {up}_N_STATES {n}\n#define {up}_N_INPUTS {m}\n#define {up}_N_OUTPUTS {p}\n"
        + f"#define {up}_SAMPLE_PERIOD_S {float(model.ts)!r}\n\n"
        + f"typedef struct {{\n    {real} x[{nstate}];\n}} {prefix}_state;\n\n"
        + f"void {prefix}_reset({prefix}_state *s);\n"
        + f"void {prefix}_output(const {prefix}_state *s, const {real} in[{up}_N_INPUTS], {real} out[{up}_N_OUTPUTS]);\n"
        + f"void {prefix}_update({prefix}_state *s, const {real} in[{up}_N_INPUTS]);\n"
        + f"void {prefix}_step({prefix}_state *s, const {real} in[{up}_N_INPUTS], {real} out[{up}_N_OUTPUTS]);\n\n"
        + f"#endif /* {up}_H */\n"
    )
    use_c, use_d = n > 0 and p > 0, bool(np.any(D))
    use_a, use_b = n > 0, n > 0 and m > 0
    src = [head_comment, c_include_line(f"{prefix}.h") + "\n\n"]
    for used, nm, M in ((use_a, "A", A), (use_b, "B", B), (use_c, "C", C), (use_d, "D", D)):
        if used:
            src.append(_array(f"{prefix}_{nm}", M, precision, real))
    src.append(
        f"\nvoid {prefix}_reset({prefix}_state *s)\n{{\n"
        f"    int i;\n    for (i = 0; i < {nstate}; ++i) {{\n        s->x[i] = 0;\n    }}\n}}\n"
    )
    out_body = [f"\nvoid {prefix}_output(const {prefix}_state *s, const {real} in[{up}_N_INPUTS], {real} out[{up}_N_OUTPUTS])\n{{"]
    out_body.append("    int i;" if not (use_c or use_d) else "    int i, j;")
    out_body.append(f"    for (i = 0; i < {p}; ++i) {{")
    out_body.append(f"        {real} acc = 0;")
    if use_c:
        out_body.append(f"        for (j = 0; j < {n}; ++j) {{\n            acc += {prefix}_C[i][j] * s->x[j];\n        }}")
    if use_d:
        out_body.append(f"        for (j = 0; j < {m}; ++j) {{\n            acc += {prefix}_D[i][j] * in[j];\n        }}")
    out_body.append("        out[i] = acc;\n    }")
    if not use_c:
        out_body.append("    (void)s;")
    if not use_d:
        out_body.append("    (void)in;")
    out_body.append("}\n")
    src.append("\n".join(out_body))
    upd = [f"\nvoid {prefix}_update({prefix}_state *s, const {real} in[{up}_N_INPUTS])\n{{"]
    if use_a:
        upd.append(f"    {real} next[{n}];\n    int i, j;")
        upd.append(f"    for (i = 0; i < {n}; ++i) {{")
        upd.append(f"        {real} acc = 0;")
        upd.append(f"        for (j = 0; j < {n}; ++j) {{\n            acc += {prefix}_A[i][j] * s->x[j];\n        }}")
        if use_b:
            upd.append(f"        for (j = 0; j < {m}; ++j) {{\n            acc += {prefix}_B[i][j] * in[j];\n        }}")
        upd.append("        next[i] = acc;\n    }")
        upd.append(f"    for (i = 0; i < {n}; ++i) {{\n        s->x[i] = next[i];\n    }}")
    else:
        upd.append("    (void)s;")
    if not use_b:
        upd.append("    (void)in;")
    upd.append("}\n")
    src.append("\n".join(upd))
    src.append(
        f"\nvoid {prefix}_step({prefix}_state *s, const {real} in[{up}_N_INPUTS], {real} out[{up}_N_OUTPUTS])\n{{\n"
        f"    {prefix}_output(s, in, out);\n    {prefix}_update(s, in);\n}}\n"
    )
    return CSource(header, "".join(src), f"{prefix}.h", f"{prefix}.c")
