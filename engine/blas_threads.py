"""How many threads the loaded OpenBLAS libraries may use, set for the whole process or for
one stretch of work.

OpenBLAS starts a team of threads per call, one per core, that spin while they wait. On a
machine whose cores are busy with other work (a laptop compiling, a shared server, the
app's two workers), the teams wait for cores they cannot get: measured on a 2-core
machine at load 7, one eigendecomposition with left and right vectors of a 608-state loop
took 14-31 s of wall time with the default team and 0.6 s with one thread (0.18 s of CPU).
With the machine idle, the team gains at most the core count on the largest solves. The
command line and the app therefore run with one BLAS thread unless the user has chosen.

numpy and scipy each ship an OpenBLAS build; both are found among the libraries the process
has mapped and set through their own thread-count functions (plain ``ctypes``; nothing is
installed). A user who sets ``OPENBLAS_NUM_THREADS`` keeps their choice: nothing is
changed then. Where the libraries cannot be found (another BLAS, no ``/proc``), nothing
happens either: the limits only ever save time, results do not depend on them.
"""
from __future__ import annotations

import contextlib
import ctypes
import os

import numpy  # noqa: F401  (load both OpenBLAS builds before listing them)
import scipy.linalg  # noqa: F401

__all__ = ["limit_blas_threads", "one_blas_thread"]

#: The thread-count setters and getters of the OpenBLAS builds numpy and scipy ship
#: (64-bit and 32-bit integer ones).
_SETTERS = ("scipy_openblas_set_num_threads64_", "scipy_openblas_set_num_threads", "openblas_set_num_threads64_",
            "openblas_set_num_threads")
_GETTERS = ("scipy_openblas_get_num_threads64_", "scipy_openblas_get_num_threads", "openblas_get_num_threads64_",
            "openblas_get_num_threads")


def _libraries() -> list[tuple[object, object]]:
    """``(setter, getter)`` of every loaded OpenBLAS (getter ``None`` where it has none)."""
    if os.environ.get("OPENBLAS_NUM_THREADS") or not os.path.exists("/proc/self/maps"):
        return []
    with open("/proc/self/maps", encoding="utf-8", errors="replace") as fh:
        paths = sorted({ln.split()[-1] for ln in fh if "openblas" in ln.lower() and "/" in ln})
    found = []
    for path in paths:
        try:
            lib = ctypes.CDLL(path)
        except OSError:
            continue
        setter = next((getattr(lib, name) for name in _SETTERS if hasattr(lib, name)), None)
        getter = next((getattr(lib, name) for name in _GETTERS if hasattr(lib, name)), None)
        if setter is not None:
            found.append((setter, getter))
    return found


def limit_blas_threads(threads: int = 1) -> int:
    """Let each loaded OpenBLAS use at most ``threads`` threads; returns how many libraries were set.

    Nothing is changed when ``OPENBLAS_NUM_THREADS`` is set (the user's choice) or where
    the loaded libraries cannot be listed (no ``/proc/self/maps``).
    """
    libs = _libraries()
    for setter, _getter in libs:
        setter(int(threads))
    return len(libs)


@contextlib.contextmanager
def one_blas_thread():
    """One BLAS thread inside the block, the previous counts restored after it.

    For work made of many mid-sized products: on a two-core machine shared with other jobs,
    OpenBLAS's second thread mostly waits for a core and spins (measured on the noise
    budget of 572 states and 286 sources: three times the CPU time and four times the wall
    time of one thread, at load 6).
    """
    libs = [(s, g, int(g()) if g is not None else None) for s, g in _libraries()]
    for setter, _getter, _before in libs:
        setter(1)
    try:
        yield
    finally:
        for setter, _getter, before in libs:
            if before is not None:
                setter(before)
