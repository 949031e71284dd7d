"""Guard against a reference-count leak on ``True`` in PySide6 6.12 under CPython 3.11.

Every ``SignalInstance.emit()`` called from Python returns ``True`` without taking a
reference to it, so each discarded return value drops one reference that was never
given. After a few hundred emits CPython aborts with "bool_dealloc: deallocating True or
False". CPython 3.12 and later make ``True`` immortal, which hides the bug; on 3.11 we
give ``True`` and ``False`` a very large reference count once, which does the same.
Harmless where the bug is absent (the objects are never freed anyway).
"""
from __future__ import annotations

import ctypes
import sys

__all__ = ["apply"]

_MARGIN = 1 << 40


def apply() -> None:
    """Raise the reference counts of True and False once per process (CPython < 3.12)."""
    if sys.implementation.name != "cpython" or sys.version_info >= (3, 12) or getattr(apply, "done", False):
        return
    for obj in (True, False):
        # ob_refcnt is the first field of every object header in CPython.
        ctypes.c_ssize_t.from_address(id(obj)).value += _MARGIN
    apply.done = True


apply()
