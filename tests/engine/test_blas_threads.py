"""The command line runs OpenBLAS with one thread unless the user chose otherwise.

Why (engine/blas_threads.py): on busy cores OpenBLAS's thread teams wait for each other
(measured: 14-31 s against 0.6 s for one eigendecomposition at load 7). Checked in a
fresh interpreter, reading the thread count back from each loaded OpenBLAS.
"""
from __future__ import annotations

import os
import subprocess
import sys

import pytest

_PROBE = r"""
import ctypes, sys
from loopwright.engine import cli
status = cli.main(sys.argv[1:])
counts = []
with open("/proc/self/maps") as fh:
    paths = sorted({ln.split()[-1] for ln in fh if "openblas" in ln.lower() and "/" in ln})
for path in paths:
    lib = ctypes.CDLL(path)
    for name in ("scipy_openblas_get_num_threads64_", "scipy_openblas_get_num_threads", "openblas_get_num_threads64_",
                 "openblas_get_num_threads"):
        if hasattr(lib, name):
            counts.append(getattr(lib, name)())
            break
print("THREADS", status, counts)
"""


def _threads_after_check(env_threads):
    env = {k: v for k, v in os.environ.items() if k != "OPENBLAS_NUM_THREADS"}
    if env_threads is not None:
        env["OPENBLAS_NUM_THREADS"] = env_threads
    sample = os.path.join(os.path.dirname(__file__), "..", "..", "samples", "levitated_rotor_axis.lwd")
    out = subprocess.run([sys.executable, "-c", _PROBE, "check", sample], env=env, capture_output=True, text=True, timeout=120)
    line = next(ln for ln in out.stdout.splitlines() if ln.startswith("THREADS"))
    status, counts = line.split(" ", 2)[1:]
    return int(status), eval(counts)  # a list of ints printed by the probe


@pytest.mark.skipif(not os.path.exists("/proc/self/maps"), reason="needs /proc to list the loaded libraries")
def test_a_command_runs_with_one_blas_thread():
    status, counts = _threads_after_check(None)
    assert status == 0
    assert counts and all(c == 1 for c in counts)


@pytest.mark.skipif(not os.path.exists("/proc/self/maps") or (os.cpu_count() or 1) < 2, reason="needs /proc and two cores")
def test_the_users_choice_of_threads_is_kept():
    status, counts = _threads_after_check("2")
    assert status == 0
    assert counts and all(c == 2 for c in counts)
