"""Path-audit speed: Loopwright vs python-control on large observer-based chains, same run.

The model is the conveyor chain of ``bench_freqresp.py`` (demo data). Loopwright's
``path_audit`` ranks every (source, signal) pair: peak gain and frequency, H2 norm, DC
gain, stability and the path on the diagram.

python-control is timed two ways on the same model and frequency grid:

* **batched** (the fairest use of its tools): per source one ``ct.frequency_response`` of
  the source-to-all-signals system on the audit's base grid, one ``ct.lyap`` for the H2
  norms and one ``ct.dcgain``;
* **per pair** (what a loop over pairs costs): ``ct.frequency_response`` +
  ``ct.norm(..., 2)`` + ``ct.dcgain`` of single pairs, timed on a few pairs and scaled to
  the number of pairs (printed as an estimate, marked as such).

Agreement: the audit's peak gains and H2 norms against the batched python-control values
(peak gains compared where python-control's grid peak is interior; ours is refined, so it
may only be higher).

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

        # python-control, batched per source on the same base grid
        poles = np.linalg.eigvals(model.A)
        grid = np.concatenate([[0.0], auto_frequency_grid(poles, points_per_decade=40)])[1:]
        t0 = time.perf_counter()
        ct_peak, ct_h2 = {}, {}
        for src in sources:
            cols = model.inputs[src]
            sys_s = ct.ss(model.A, model.B[:, cols], model.C, model.D[:, cols])
            resp = ct.frequency_response(sys_s, grid)
            mag = np.asarray(resp.magnitude).reshape(model.C.shape[0], -1, grid.size)
            X = ct.lyap(model.A, model.B[:, cols] @ model.B[:, cols].T)
            dc = ct.dcgain(sys_s)
            for sig, sl in model.signals.items():
                m = mag[sl, 0, :]
                ct_peak[(src, sig)] = (float(np.max(np.sqrt(np.sum(m**2, axis=0)))), int(np.argmax(np.sqrt(np.sum(m**2, axis=0)))))
                Cz = model.C[sl]
                ct_h2[(src, sig)] = np.inf if np.any(model.D[sl, cols] != 0) else float(np.sqrt(max(np.trace(Cz @ X @ Cz.T), 0.0)))
            _ = dc
        t_ct = time.perf_counter() - t0
        print(f"  python-control batched per source: {t_ct:.2f} s   ratio {t_ct / t_ours:.1f}x", flush=True)

        # python-control, one pair at a time (sampled, scaled)
        rng = np.random.default_rng(0)
        pairs = [(sources[rng.integers(len(sources))], list(model.signals)[rng.integers(len(model.signals))]) for _ in range(args.pair_samples)]
        t0 = time.perf_counter()
        for src, sig in pairs:
            A, B, C, D = model.pair(src, sig)
            s = ct.ss(A, B, C, D)
            ct.frequency_response(s, grid)
            if not np.any(D):
                ct.norm(s, 2)
            ct.dcgain(s)
        per_pair = (time.perf_counter() - t0) / len(pairs)
        est = per_pair * npairs
        print(f"  python-control per pair: {per_pair:.2f} s/pair x {npairs} pairs = {est:.0f} s (estimate from {len(pairs)} pairs)"
              f"   ratio {est / t_ours:.0f}x", flush=True)

        # agreement
        pk_rel, h2_rel = [], []
        for r in rows:
            if not r.stable:
                continue
            ref_pk, idx = ct_peak[(r.source, r.signal)]
            if 0 < idx < grid.size - 1 and ref_pk > 0:
                pk_rel.append((r.peak_gain - ref_pk) / ref_pk)
            h = ct_h2[(r.source, r.signal)]
            if np.isfinite(h) and h > 0:
                h2_rel.append(abs(r.h2 - h) / h)
        pk_rel = np.array(pk_rel)
        print(f"  agreement: H2 max rel diff {max(h2_rel) if h2_rel else float('nan'):.1e} over {len(h2_rel)} pairs; "
              f"peak gain ours - grid peak: min {pk_rel.min():+.1e}, max {pk_rel.max():+.1e} (relative; >= 0 expected, "
              f"ours is refined) over {pk_rel.size} pairs")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
