"""How many threads the BLAS under numpy and scipy may use.

OpenBLAS starts a team of threads per call, one per core, that spin while they wait. On a
machine whose cores are busy with other work (a laptop compiling, a shared server, the
app's two workers), the teams wait for cores they cannot get: measured on a 2-core
machine at load 7, one eigendecomposition with left and right vectors of a 608-state loop
took 14-31 s of wall time with the default team and 0.6 s with one thread (0.18 s of CPU).
With the machine idle, the team gains at most the core count on the largest solves. The
command line and the app therefore run with one BLAS thread unless the user has chosen
(``OPENBLAS_NUM_THREADS`` set: their choice is kept).
"""
from __future__ import annotations

import ctypes
import os

import numpy  # noqa: F401  (load both OpenBLAS builds before listing them)
import scipy.linalg  # noqa: F401

__all__ = ["limit_blas_threads"]

#: The thread-count setters of the OpenBLAS builds numpy and scipy ship (64-bit and 32-bit integer ones).
_BLAS_SETTERS = ("scipy_openblas_set_num_threads64_", "scipy_openblas_set_num_threads", "openblas_set_num_threads64_",
                 "openblas_set_num_threads")


def limit_blas_threads(threads: int = 1) -> int:
    """Let each loaded OpenBLAS use at most ``threads`` threads; returns how many libraries were set.

    Nothing is changed when ``OPENBLAS_NUM_THREADS`` is set (the user's choice) or where
    the loaded libraries cannot be listed (no ``/proc/self/maps``). Call it after numpy and
    scipy are imported: only libraries already loaded are set.
    """
    if os.environ.get("OPENBLAS_NUM_THREADS") or not os.path.exists("/proc/self/maps"):
        return 0
    with open("/proc/self/maps", encoding="utf-8", errors="replace") as fh:
        paths = sorted({ln.split()[-1] for ln in fh if "openblas" in ln.lower() and "/" in ln})
    done = 0
    for path in paths:
        try:
            lib = ctypes.CDLL(path)
        except OSError:
            continue
        setter = next((getattr(lib, name) for name in _BLAS_SETTERS if hasattr(lib, name)), None)
        if setter is not None:
            setter(int(threads))
            done += 1
    return done
