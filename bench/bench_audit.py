"""Path-audit speed: Loopwright vs python-control on large observer-based chains, same run.

The model is the conveyor chain of ``bench_freqresp.py`` (demo data). Loopwright's
``path_audit`` ranks every (source, signal) pair: peak gain and frequency, H2 norm, DC
gain, stability and the path on the diagram.

python-control is timed two ways on the same model and base frequency grid:

* **batched** (the fairest use of its tools): per source one ``ct.frequency_response`` of
  the source-to-all-signals system on the audit's base grid (no refinement), one
  ``ct.lyap`` for the H2 norms and one ``ct.dcgain``;
* **per pair** (what a loop over pairs costs): ``ct.frequency_response`` +
  ``ct.norm(..., 2)`` + ``ct.dcgain`` of single pairs, on a few sampled pairs, scaled to
  the number of pairs.

python-control's frequency responses cost the same per frequency, so they are timed on a
subset of the grid (``--ct-freqs``) and scaled to the full grid; the printout says so.

Agreement: H2 norms against ``ct.lyap``; peak gains against python-control evaluated at
the frequency the audit reports, and counted where python-control's sampled maximum
exceeds the audit's peak (should be none).

Run: ``python bench/bench_audit.py [--sizes 200 800] [--pair-samples 3]``
"""
from __future__ import annotations

import argparse
import os
import sys
import time

import control as ct
import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

from bench_freqresp import conveyor_chain  # noqa: E402

from loopwright.engine.audit import path_audit  # noqa: E402
from loopwright.engine.interconnect import assemble  # noqa: E402
from loopwright.engine.responses import auto_frequency_grid  # noqa: E402


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[200, 800])
    ap.add_argument("--pair-samples", type=int, default=3, help="pairs timed one by one with python-control")
    ap.add_argument("--ct-freqs", type=int, default=150, help="frequencies python-control is timed on (then scaled)")
    ap.add_argument("--peak-checks", type=int, default=40, help="audit rows whose peak is re-evaluated by python-control")
    args = ap.parse_args(argv)
    print(f"python-control {ct.__version__}")
    for n in args.sizes:
        sections = max(1, n // 8)
        model = assemble(conveyor_chain(sections))
        sources = list(model.sources)
        t0 = time.perf_counter()
        rows = path_audit(model)
        t_ours = time.perf_counter() - t0
        npairs = len(sources) * len(model.signals)
        print(f"\nn = {model.A.shape[0]} states, {len(sources)} sources, {len(model.signals)} signals, {npairs} pairs "
              f"({len(rows)} with a path)")
        print(f"  ours: path_audit {t_ours:.2f} s", flush=True)

        # python-control, batched per source: frequency responses on the audit's base grid
        # (timed on a subset of ct_freqs frequencies and scaled: its cost per frequency is
        # constant), one lyap and one dcgain per source
        poles = np.linalg.eigvals(model.A)
        grid = auto_frequency_grid(poles, points_per_decade=40)
        sub = grid[np.linspace(0, grid.size - 1, min(args.ct_freqs, grid.size)).astype(int)]
        t_fr, t_rest = 0.0, 0.0
        ct_h2, ct_sub_peak = {}, {}
        for src in sources:
            cols = model.inputs[src]
            sys_s = ct.ss(model.A, model.B[:, cols], model.C, model.D[:, cols])
            t0 = time.perf_counter()
            resp = ct.frequency_response(sys_s, sub)
            t_fr += time.perf_counter() - t0
            mag = np.asarray(resp.magnitude).reshape(model.C.shape[0], -1, sub.size)
            t0 = time.perf_counter()
            X = ct.lyap(model.A, model.B[:, cols] @ model.B[:, cols].T)
            ct.dcgain(sys_s)
            t_rest += time.perf_counter() - t0
            for sig, sl in model.signals.items():
                ct_sub_peak[(src, sig)] = float(np.max(np.sqrt(np.sum(mag[sl, 0, :] ** 2, axis=0))))
                Cz = model.C[sl]
                ct_h2[(src, sig)] = np.inf if np.any(model.D[sl, cols] != 0) else float(np.sqrt(max(np.trace(Cz @ X @ Cz.T), 0.0)))
        t_ct = t_fr * grid.size / sub.size + t_rest
        print(f"  python-control batched per source: {t_ct:.1f} s ({t_fr:.1f} s for {sub.size} of {grid.size} frequencies, "
              f"scaled; lyap + dcgain {t_rest:.1f} s)   ratio {t_ct / t_ours:.1f}x", flush=True)

        # python-control, one pair at a time (sampled pairs, frequency part scaled the same way)
        rng = np.random.default_rng(0)
        names = list(model.signals)
        pairs = [(sources[rng.integers(len(sources))], names[rng.integers(len(names))]) for _ in range(args.pair_samples)]
        t_pair = 0.0
        for src, sig in pairs:
            A, B, C, D = model.pair(src, sig)
            sys_p = ct.ss(A, B, C, D)
            t0 = time.perf_counter()
            ct.frequency_response(sys_p, sub)
            t_pair += (time.perf_counter() - t0) * grid.size / sub.size
            t0 = time.perf_counter()
            if not np.any(D):
                ct.norm(sys_p, 2)
            ct.dcgain(sys_p)
            t_pair += time.perf_counter() - t0
        per_pair = t_pair / len(pairs)
        est = per_pair * npairs
        print(f"  python-control per pair: {per_pair:.2f} s/pair x {npairs} pairs = {est:.0f} s "
              f"(estimate from {len(pairs)} pairs)   ratio {est / t_ours:.0f}x", flush=True)

        # agreement: H2 against lyap; peak gain against python-control evaluated at our
        # reported peak frequency, and never below python-control's sampled maximum
        h2_rel, at_peak_rel, below = [], [], 0
        for r in rows:
            if not r.stable:
                continue
            h = ct_h2[(r.source, r.signal)]
            if np.isfinite(h) and h > 0:
                h2_rel.append(abs(r.h2 - h) / h)
            if r.peak_gain < ct_sub_peak[(r.source, r.signal)] * (1 - 1e-9):
                below += 1
        for r in [r for r in rows if r.stable and np.isfinite(r.peak_freq_rad_s) and r.peak_gain > 0][: args.peak_checks]:
            A, B, C, D = model.pair(r.source, r.signal)
            g = np.asarray(ct.ss(A, B, C, D)(1j * r.peak_freq_rad_s, squeeze=False)).reshape(C.shape[0], B.shape[1])
            at_peak_rel.append(abs(np.linalg.norm(g, 2) - r.peak_gain) / r.peak_gain)
        print(f"  agreement: H2 max rel diff {max(h2_rel) if h2_rel else float('nan'):.1e} over {len(h2_rel)} pairs; "
              f"peak gain vs python-control at the reported frequency: max rel diff "
              f"{max(at_peak_rel) if at_peak_rel else float('nan'):.1e} over {len(at_peak_rel)} pairs; "
              f"pairs where python-control's sampled maximum exceeds ours: {below}", flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
