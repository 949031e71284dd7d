"""Guard against reference-count leaks on singletons in PySide6 6.12 under CPython 3.11.

Two places drop a reference they never took: ``SignalInstance.emit()`` called from
Python returns ``True`` without a new reference, and a Python override of a C++ virtual
method that returns ``None`` (``paint``, ``mousePressEvent``, ...) loses one reference to
``None`` per call. After a few hundred emits or repaints CPython aborts with
"bool_dealloc" or "none_dealloc". CPython 3.12 and later make these objects immortal,
which hides the bug; on 3.11 we give ``None``, ``True`` and ``False`` a very large
reference count once, which does the same. Harmless where the bug is absent (these
objects are never freed anyway).
"""
from __future__ import annotations

import ctypes
import sys

__all__ = ["apply"]

_MARGIN = 1 << 40


def apply() -> None:
    """Raise the reference counts of None, True and False once per process (CPython < 3.12)."""
    if sys.implementation.name != "cpython" or sys.version_info >= (3, 12) or getattr(apply, "done", False):
        return
    for obj in (None, True, False):
        # ob_refcnt is the first field of every object header in CPython.
        ctypes.c_ssize_t.from_address(id(obj)).value += _MARGIN
    apply.done = True


apply()
