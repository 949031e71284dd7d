"""Plain JSON values from numpy results (shared by the CLI and the exporters)."""
from __future__ import annotations

import math
from typing import Any

import numpy as np

__all__ = ["to_jsonable"]


def to_jsonable(obj: Any) -> Any:
    """numpy values to plain JSON; infinities become the strings ``"inf"``/``"-inf"``, NaN becomes null.

    Strings rather than JSON's missing infinity keep "unbounded" distinct from "not defined".
    """
    if isinstance(obj, dict):
        return {str(k): to_jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [to_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return to_jsonable(obj.tolist())
    if isinstance(obj, (np.bool_, bool)):
        return bool(obj)
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, (complex, np.complexfloating)):
        return [to_jsonable(float(obj.real)), to_jsonable(float(obj.imag))]
    if isinstance(obj, (float, np.floating)):
        v = float(obj)
        if math.isnan(v):
            return None
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return v
    return obj
