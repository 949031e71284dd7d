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
from loopwright.engine.ccode import CSource, controller_to_c
from loopwright.engine.diagram import Diagram
from loopwright.engine.discretize import DiscreteModel, discretize
from loopwright.engine.errors import EngineError
from loopwright.engine.interconnect import assemble
from loopwright.engine.jsonable import to_jsonable
from loopwright.engine.lumped import lumped_controller
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


def closed_loop_model(diagram: Diagram, *, source: str | None = None) -> ExportModel:
    """The whole assembled model: every source and injection in, every signal out."""
    m = assemble(diagram)
    return ExportModel(
        "closed-loop", m.A, m.B, m.C, m.D, m.state_names, m.input_names, m.output_names, _origin(diagram, source),
        extra={"sources": dict(m.sources)},
    )


def path_model(diagram: Diagram, input_name: str, signal: str, *, source: str | None = None) -> ExportModel:
    """One path of the assembled model: from a source (or a signal's injection) to a signal."""
    m = assemble(diagram)
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
) -> ExportModel:
    """The lumped controller (measured -> actuator), continuous, or discretised when ``ts`` is given."""
    k = lumped_controller(diagram, measured=measured, actuator=actuator)
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
        raise ExportError(f"{path}: cannot be written ({err.__class__.__name__}: {err})") from err


def write_json(model: ExportModel, path: str | os.PathLike) -> None:
    """Write the model as JSON (atomically)."""
    _write(path, json.dumps(model_to_dict(model), indent=2, allow_nan=False) + "\n")


def write_npz(model: ExportModel, path: str | os.PathLike) -> None:
    """Write the model as a NumPy ``.npz`` archive (atomically)."""
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


def write_c(model: ExportModel, path: str | os.PathLike, *, precision: str = "double", prefix: str | None = None) -> CSource:
    """Write a discrete controller as ``<stem>.c`` and ``<stem>.h`` beside ``path``.

    ``path`` may end in ``.c`` or be a bare stem; the C prefix defaults to the stem.
    Both files are written atomically (the header first).
    """
    p = Path(path)
    if p.suffix in (".c", ".h"):
        p = p.with_suffix("")
    stem = p.name
    code = controller_to_c(
        model.discrete(), prefix=prefix or stem, precision=precision, origin=model.origin,
        input_names=list(model.input_names), output_names=list(model.output_names),
    )
    header = code.header
    if (prefix or stem) != stem:
        # the source includes "<prefix>.h"; keep the files named after the path the user gave
        code = CSource(header, code.source.replace(f'#include "{code.header_name}"', f'#include "{stem}.h"'), f"{stem}.h", f"{stem}.c")
    _write(p.with_name(f"{stem}.h"), header)
    _write(p.with_name(f"{stem}.c"), code.source)
    return CSource(header, code.source, f"{stem}.h", f"{stem}.c")


def read_json(path: str | os.PathLike) -> dict[str, Any]:
    """Read an export back (matrices as float arrays); for tests and round trips."""
    data = json.loads(Path(path).read_text(encoding="utf-8"))
    for k in ("A", "B", "C", "D"):
        rows = len(data["state_names"] if k in ("A", "B") else data["output_names"])
        cols = len(data["state_names"] if k in ("A", "C") else data["input_names"])
        data[k] = np.array(data[k], dtype=float).reshape(rows, cols)
    return data
