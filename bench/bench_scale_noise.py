"""Scale row 2: noise budget of a 1,001-block diagram (572 states, 286 white sources).

The diagram is ``scale_diagrams.oven_zones(143)`` (demo data): 143 observer-based
heating-zone loops in a line, each with a white load disturbance and white sensor noise.
Timed from the assembled model:

* ours: ``noise_budget`` (one Schur form; the sources that reach the same dense part of it
  solved together in one recursive sweep of wide products, the sources of a cascade on
  the parts they reach);
* the previous route: one full Lyapunov solve per source on the shared Schur form
  (``norms.lyapunov_from_schur``) and the quadratic forms for every signal, timed on
  ``--old-sources`` sources and scaled;
* python-control 0.10.2: ``lyap`` per source plus the same quadratic forms, timed on
  ``--ct-sources`` sources and scaled (it has no noise budget of its own).

Agreement: every signal's variance from each sampled source against ``scipy``'s
``solve_continuous_lyapunov`` on the whole model. ``--ring`` closes the line of zones into a
ring (one strongly coupled model: no part of the state is left unreached).

``--one-blas-thread`` runs with ``OPENBLAS_NUM_THREADS=1`` (set before numpy loads): on a
shared 2-core machine OpenBLAS's worker threads wait for cores the other jobs hold. Our
route runs its sweep on one BLAS thread either way (``blas_threads.one_blas_thread``); the
flag matters for the reference routes. The machine's load (``/proc/loadavg``) is printed
beside the times: on a shared machine the CPU times grow with it.

Run: ``python bench/bench_scale_noise.py [--zones 143] [--ring] [--one-blas-thread]``
"""
from __future__ import annotations

import argparse
import os
import sys

if "--one-blas-thread" in sys.argv[1:] and os.environ.get("OPENBLAS_NUM_THREADS") != "1":
    os.environ["OPENBLAS_NUM_THREADS"] = "1"  # read by OpenBLAS when numpy first loads it

import control as ct  # noqa: E402
import numpy as np  # noqa: E402
import scipy.linalg as sla  # noqa: E402

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

from scale_diagrams import oven_zones, timed  # noqa: E402

from loopwright.engine.interconnect import assemble  # noqa: E402
from loopwright.engine.noise import noise_budget  # noqa: E402
from loopwright.engine.norms import lyapunov_from_schur  # noqa: E402
from loopwright.engine.responses import reduce_model  # noqa: E402


def _load() -> str:
    """The 1-minute load average (or '?' where the system does not say)."""
    try:
        with open("/proc/loadavg", encoding="ascii") as fh:
            return fh.read().split()[0]
    except OSError:
        return "?"


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--zones", type=int, default=143)
    ap.add_argument("--ring", action="store_true")
    ap.add_argument("--old-sources", type=int, default=6)
    ap.add_argument("--ct-sources", type=int, default=4)
    ap.add_argument("--repeat", type=int, default=1, help="time our route this many times, keep the best")
    ap.add_argument("--one-blas-thread", action="store_true", help="OPENBLAS_NUM_THREADS=1 (see the module notes)")
    args = ap.parse_args(argv)
    print(f"python-control {ct.__version__}; OPENBLAS_NUM_THREADS={os.environ.get('OPENBLAS_NUM_THREADS', 'unset')};"
          f" load {_load()}")
    d = oven_zones(args.zones, ring=args.ring)
    model = assemble(d)
    n = model.A.shape[0]
    t_ours, c_ours, budget = timed(lambda: noise_budget(model), repeat=args.repeat)
    srcs = budget.sources
    print(f"\n{len(d.blocks)} blocks, n = {n} states, {len(srcs)} white sources, {len(budget.lines)} budget lines"
          f" ({'ring' if args.ring else 'line'} of zones)")
    print(f"  ours                     wall {t_ours:8.2f} s  cpu {c_ours:8.2f} s  (load {_load()})")
    names = list(srcs)
    C = model.C

    def old_route(sample):
        red = reduce_model(model.A)
        for name in sample:
            Bw = model.B[:, model.inputs[name]]
            X = lyapunov_from_schur(red.T_real, red.Z_real, Bw @ srcs[name] @ Bw.T)
            np.einsum("ij,jk,ik->i", C, X, C)

    sample = names[:: max(1, len(names) // args.old_sources)][: args.old_sources]
    t_old, c_old, _ = timed(lambda: old_route(sample))
    scale = len(names) / len(sample)
    print(f"  previous route           wall {t_old * scale:8.2f} s  cpu {c_old * scale:8.2f} s  (timed on {len(sample)} sources, scaled)"
          f"  ratio wall {t_old * scale / t_ours:6.1f}x, cpu {c_old * scale / c_ours:6.1f}x")

    def ct_route(sample):
        out = {}
        for name in sample:
            Bw = model.B[:, model.inputs[name]]
            X = ct.lyap(model.A, Bw @ srcs[name] @ Bw.T)
            out[name] = np.einsum("ij,jk,ik->i", C, X, C)
        return out

    csample = names[:: max(1, len(names) // args.ct_sources)][: args.ct_sources]
    t_ct, c_ct, ct_var = timed(lambda: ct_route(csample))
    scale = len(names) / len(csample)
    print(f"  python-control lyap      wall {t_ct * scale:8.2f} s  cpu {c_ct * scale:8.2f} s  (timed on {len(csample)} sources, scaled)"
          f"  ratio wall {t_ct * scale / t_ours:6.1f}x, cpu {c_ct * scale / c_ours:6.1f}x")
    worst_rel, worst_nw = 0.0, 0.0
    for name in csample:
        Bw = model.B[:, model.inputs[name]]
        X = sla.solve_continuous_lyapunov(model.A, -Bw @ srcs[name] @ Bw.T)
        ref = np.einsum("ij,jk,ik->i", C, X, C)
        got = np.array([ln.variance_by_source[name] for ln in budget.lines[: C.shape[0]]])
        fin = np.isfinite(got)
        big = fin & (np.abs(ref) > 1e-8 * np.abs(ref[fin]).max())
        worst_rel = max(worst_rel, float(np.max(np.abs(got[big] - ref[big]) / np.abs(ref[big]))))
        worst_nw = max(worst_nw, float(np.max(np.abs(got[fin] - ref[fin])) / np.abs(ref[fin]).max()))
        worst_nw = max(worst_nw, float(np.max(np.abs(ct_var[name][fin] - ref[fin])) / np.abs(ref[fin]).max()))
    print(f"  agreement with scipy per-source solves: rel {worst_rel:.1e} (variances within 1e8 of the largest), diff/largest {worst_nw:.1e}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
