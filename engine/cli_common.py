"""Helpers shared by the command-line commands: loading, JSON and CSV output."""
from __future__ import annotations

import csv
import json
import math
import sys
from collections.abc import Iterable, Sequence
from typing import Any

import numpy as np

from loopwright.engine.diagram import Diagram
from loopwright.engine.jsonable import to_jsonable
from loopwright.engine.project import load

__all__ = ["load_diagram", "to_jsonable", "print_json", "write_csv", "fmt_complex", "fmt_num"]


def load_diagram(path: str) -> Diagram:
    """Load the diagram named on the command line (errors are ``ProjectFileError``)."""
    return load(path)


def print_json(obj: Any, *, file=None) -> None:
    json.dump(to_jsonable(obj), file or sys.stdout, indent=2, allow_nan=False)
    (file or sys.stdout).write("\n")


def write_csv(rows: Iterable[Sequence[Any]], header: Sequence[str], *, file=None) -> None:
    w = csv.writer(file or sys.stdout, lineterminator="\n")
    w.writerow(header)
    for row in rows:
        w.writerow([fmt_num(v, digits=12) if isinstance(v, (float, np.floating)) else v for v in row])


def fmt_num(v: float, *, digits: int = 6) -> str:
    v = float(v)
    if math.isnan(v):
        return "-"
    if math.isinf(v):
        return "inf" if v > 0 else "-inf"
    return f"{v:.{digits}g}"


def fmt_complex(p: complex, *, digits: int = 6) -> str:
    if abs(p.imag) < 1e-12 * max(1.0, abs(p)):
        return fmt_num(p.real, digits=digits)
    return f"{fmt_num(p.real, digits=digits)} {'+' if p.imag >= 0 else '-'} {fmt_num(abs(p.imag), digits=digits)}j"
