"""Export of models out of a diagram: the closed loop, one path, the lumped controller
(continuous or discretised), as JSON, NPZ or C99 source.

Every export carries names for its states, inputs and outputs, where it came from, and
:data:`loopwright.engine.CAUTION`. Files are written atomically (a temporary file in the
same folder, then ``os.replace``), so an interrupted export never leaves half a file.

JSON layout (``"format": "loopwright-model"``, ``"version": 1``)::

    {"format", "version", "what", "time": "continuous" | "discrete",
     "sample_period_s": null | T, "method": null | "zoh" | "tustin", "prewarp_rad_s",
     "origin", "state_names", "input_names", "output_names",
     "A", "B", "C", "D", "caution", ...extra}

The NPZ file holds the same fields: matrices as float arrays, names as string arrays,
the rest as 0-d arrays (``json`` holds the non-matrix fields as one JSON text as well).
"""
from __future__ import annotations

import io
import json
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from loopwright.engine import CAUTION
from loopwright.engine.ccode import CSource, c_include_line, check_c_prefix, controller_to_c, is_c_identifier
from loopwright.engine.diagram import Diagram
from loopwright.engine.discretize import DiscreteModel, discretize
from loopwright.engine.errors import DesignError, EngineError
from loopwright.engine.interconnect import assemble
from loopwright.engine.jsonable import to_jsonable
from loopwright.engine.lumped import LumpedModel, lumped_controller
from loopwright.engine.output_paths import OutputRefusedError, check_export_output, display_path
from loopwright.engine.project import atomic_write

__all__ = [
    "EXPORT_FORMAT",
    "ExportError",
    "ExportModel",
    "closed_loop_model",
    "path_model",
    "controller_model",
    "model_to_dict",
    "write_json",
    "write_npz",
    "write_c",
    "c_output_paths",
    "c_prefix_for",
    "read_json",
]

EXPORT_FORMAT = "loopwright-model"


class ExportError(EngineError, OSError):
    """The export file cannot be written."""


@dataclass(frozen=True)
class ExportModel:
    """A model ready to export; matrices as in ``x' = A x + B u`` (or ``x[k+1] = ...``)."""

    what: str
    A: np.ndarray
    B: np.ndarray
    C: np.ndarray
    D: np.ndarray
    state_names: tuple[str, ...]
    input_names: tuple[str, ...]
    output_names: tuple[str, ...]
    origin: str
    sample_period_s: float | None = None
    method: str | None = None
    prewarp_rad_s: float | None = None
    extra: dict[str, Any] = field(default_factory=dict)

    def discrete(self) -> DiscreteModel:
        if self.sample_period_s is None:
            raise EngineError(f"the {self.what} export is continuous-time; give a sample period to discretise it")
        return DiscreteModel(self.A, self.B, self.C, self.D, self.sample_period_s, self.method or "zoh", self.prewarp_rad_s)


def _origin(diagram: Diagram, source: str | None) -> str:
    title = diagram.meta.get("title") if isinstance(diagram.meta, dict) else None
    parts = [p for p in (source, f"'{title}'" if title else None) if p]
    return " ".join(parts) if parts else "diagram"


def closed_loop_model(diagram: Diagram, *, source: str | None = None, take: bool = False) -> ExportModel:
    """The whole assembled model: every source and injection in, every signal out.

    ``take``: the caller hands ``diagram`` over (see :func:`~loopwright.engine.interconnect.assemble`).
    """
    m = assemble(diagram, take=take)
    return ExportModel(
        "closed-loop", m.A, m.B, m.C, m.D, m.state_names, m.input_names, m.output_names, _origin(diagram, source),
        extra={"sources": dict(m.sources)},
    )


def path_model(diagram: Diagram, input_name: str, signal: str, *, source: str | None = None, take: bool = False) -> ExportModel:
    """One path of the assembled model: from a source (or a signal's injection) to a signal.

    ``take``: the caller hands ``diagram`` over (see :func:`~loopwright.engine.interconnect.assemble`).
    """
    m = assemble(diagram, take=take)
    group = m.resolve_input(input_name)
    sig = m.resolve_signal(signal)
    A, B, C, D = m.pair(group, sig)
    cols, rows = m.input_slice(group), m.signal_slice(sig)
    return ExportModel(
        "path", A, B, C, D, m.state_names, m.input_names[cols], m.output_names[rows],
        _origin(diagram, source) + f", path {group} -> {sig}",
    )


def controller_model(
    diagram: Diagram,
    *,
    measured: list[str],
    actuator: list[str],
    ts: float | None = None,
    method: str = "zoh",
    prewarp_rad_s: float | None = None,
    source: str | None = None,
    lumped: LumpedModel | None = None,
) -> ExportModel:
    """The lumped controller (measured -> actuator), continuous, or discretised when ``ts`` is given.

    ``lumped``: that controller, when the caller has it already (from :func:`lumped_controller`
    with the same signals).
    """
    k = lumped_controller(diagram, measured=measured, actuator=actuator) if lumped is None else lumped
    origin = _origin(diagram, source) + f", controller from {', '.join(k.inputs)} to {', '.join(k.outputs)}"
    if ts is None:
        if prewarp_rad_s is not None:
            raise EngineError("a pre-warp frequency needs a sample period (--ts) and the Tustin method")
        return ExportModel("controller", k.A, k.B, k.C, k.D, k.state_names, k.input_names, k.output_names, origin)
    d = discretize(k.A, k.B, k.C, k.D, ts, method=method, prewarp_rad_s=prewarp_rad_s)
    return ExportModel(
        "controller", d.A, d.B, d.C, d.D, k.state_names, k.input_names, k.output_names, origin,
        sample_period_s=d.ts, method=d.method, prewarp_rad_s=d.prewarp_rad_s,
    )


def model_to_dict(model: ExportModel) -> dict[str, Any]:
    """The JSON-native form of an export (see the module docstring)."""
    out = {
        "format": EXPORT_FORMAT,
        "version": 1,
        "what": model.what,
        "time": "continuous" if model.sample_period_s is None else "discrete",
        "sample_period_s": model.sample_period_s,
        "method": model.method,
        "prewarp_rad_s": model.prewarp_rad_s,
        "origin": model.origin,
        "state_names": list(model.state_names),
        "input_names": list(model.input_names),
        "output_names": list(model.output_names),
        "A": np.asarray(model.A, dtype=float).reshape(len(model.state_names), len(model.state_names)),
        "B": np.asarray(model.B, dtype=float).reshape(len(model.state_names), len(model.input_names)),
        "C": np.asarray(model.C, dtype=float).reshape(len(model.output_names), len(model.state_names)),
        "D": np.asarray(model.D, dtype=float).reshape(len(model.output_names), len(model.input_names)),
        "caution": CAUTION,
    }
    out.update(model.extra)
    return to_jsonable(out)


def _write(path: str | os.PathLike, data: str | bytes) -> None:
    try:
        atomic_write(path, data)
    except OSError as err:
        raise ExportError(f"{display_path(path)}: cannot be written ({err.strerror or err})") from err


def write_json(model: ExportModel, path: str | os.PathLike) -> None:
    """Write the model as JSON (atomically); never over a diagram (see :func:`check_export_output`)."""
    check_export_output(path)
    _write(path, json.dumps(model_to_dict(model), indent=2, allow_nan=False) + "\n")


def write_npz(model: ExportModel, path: str | os.PathLike) -> None:
    """Write the model as a NumPy ``.npz`` archive (atomically); never over a diagram."""
    check_export_output(path)
    data = model_to_dict(model)
    meta = {k: v for k, v in data.items() if k not in ("A", "B", "C", "D")}
    arrays: dict[str, np.ndarray] = {}
    for k in ("A", "B", "C", "D"):
        arrays[k] = np.asarray(getattr(model, k), dtype=float)
    for k in ("state_names", "input_names", "output_names"):
        arrays[k] = np.array(data[k], dtype=str)
    for k in ("format", "what", "time", "origin", "caution"):
        arrays[k] = np.array(data[k])
    arrays["sample_period_s"] = np.array(np.nan if model.sample_period_s is None else model.sample_period_s)
    arrays["json"] = np.array(json.dumps(meta, allow_nan=False))
    buf = io.BytesIO()
    np.savez(buf, **arrays)
    _write(path, buf.getvalue())


def c_output_paths(path: str | os.PathLike) -> tuple[Path, Path]:
    """The source and header a C export to ``path`` writes: ``<stem>.c`` and ``<stem>.h``.

    ``path`` may end in ``.c`` or ``.h`` or be a bare stem.

    Raises
    ------
    OutputRefusedError
        ``path`` names a folder (``/``, ``.``, ``..``, or a name ending in a separator).
    """
    text = os.fspath(path)
    p = Path(path)
    if p.name in ("", ".", "..") or text.endswith(("/", os.sep)):
        raise OutputRefusedError(f"output {display_path(path)} names a folder; give a file name such as ctrl.c")
    if p.suffix in (".c", ".h"):
        p = p.with_suffix("")
    return p.with_name(f"{p.name}.c"), p.with_name(f"{p.name}.h")


def c_prefix_for(path: str | os.PathLike, prefix: str | None = None) -> str:
    """The C prefix of a C export to ``path``: ``prefix``, else the file stem.

    Raises
    ------
    DesignError
        The prefix is not a C identifier, or (with a prefix of its own) the header's file
        name cannot be written in ``#include "..."``.
    """
    c_path, h_path = c_output_paths(path)
    if prefix is None:
        if not is_c_identifier(c_path.stem):
            raise DesignError(f"the output name {c_path.stem!r} is not a C identifier, so it cannot be the C prefix; give --prefix NAME")
        return c_path.stem
    check_c_prefix(prefix)
    c_include_line(h_path.name)
    return prefix


def write_c(model: ExportModel, path: str | os.PathLike, *, precision: str = "double", prefix: str | None = None) -> CSource:
    """Write a discrete controller as ``<stem>.c`` and ``<stem>.h`` beside ``path``.

    ``path`` may end in ``.c`` or be a bare stem; the C prefix defaults to the stem. Both
    files are checked before either is written (see :func:`check_export_output`), then
    written atomically, the header first; if the source then fails, a header this call
    created is removed again.
    """
    c_path, h_path = c_output_paths(path)
    for target in (c_path, h_path):
        check_export_output(target)
    prefix = c_prefix_for(path, prefix)
    code = controller_to_c(
        model.discrete(), prefix=prefix, precision=precision, origin=model.origin,
        input_names=list(model.input_names), output_names=list(model.output_names),
    )
    if code.header_name != h_path.name:
        # the source includes "<prefix>.h"; keep the files named after the path the user gave
        include = c_include_line(h_path.name)
        code = CSource(code.header, code.source.replace(f'#include "{code.header_name}"', include), h_path.name, c_path.name)
    header_existed = os.path.lexists(h_path)
    _write(h_path, code.header)
    try:
        _write(c_path, code.source)
    except BaseException:
        if not header_existed:
            try:
                os.unlink(h_path)
            except OSError:
                pass
        raise
    return code


def read_json(path: str | os.PathLike) -> dict[str, Any]:
    """Read an export back (matrices as float arrays); for tests and round trips."""
    data = json.loads(Path(path).read_text(encoding="utf-8"))
    for k in ("A", "B", "C", "D"):
        rows = len(data["state_names"] if k in ("A", "B") else data["output_names"])
        cols = len(data["state_names"] if k in ("A", "C") else data["input_names"])
        data[k] = np.array(data[k], dtype=float).reshape(rows, cols)
    return data
