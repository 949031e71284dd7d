"""Scale row 4: path audit of the big modal loop, every source to every signal.

The model is the flexible beam loop of ``bench_scale_freqresp.py`` (demo data). Ours:
``path_audit`` as the commands call it: on this loop the operation count picks the
coupling route (closed-loop poles by Aberth iteration on the coupling form, grid responses
block by block for all sources at once, H2 norms by residues; no Schur form of the
3,008-state closed loop). ``--compare-modes`` also audits a smaller beam on both routes
(``route="whole model"``: one Schur form, H2 by Lyapunov solves) and prints how far they
differ.

python-control is not run at full size: one ``frequency_response`` of one pair on the
audit's grid (one point per frequency around each of the lightly damped modes) would take
hours (see ``bench_scale_freqresp.py`` for its cost per frequency); its cost for the same
audit is estimated from ``--ct-points`` timed frequencies.

Agreement: the audit's peak gains re-evaluated by a direct LU solve at the reported
frequencies.

Run: ``python bench/bench_scale_audit.py [--modes 1500] [--compare-modes 300]``
"""
from __future__ import annotations

import argparse
import os
import sys

import control as ct
import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

from scale_diagrams import flexible_beam_loop, timed  # noqa: E402

from loopwright.engine.audit import path_audit  # noqa: E402
from loopwright.engine.interconnect import assemble  # noqa: E402
from loopwright.engine.blockwise_response import BlockwiseModel  # noqa: E402
from loopwright.engine.coupled_poles import closed_loop_poles  # noqa: E402
from loopwright.engine.responses import auto_frequency_grid  # noqa: E402


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--modes", type=int, default=1500)
    ap.add_argument("--ct-points", type=int, default=5)
    ap.add_argument("--peak-checks", type=int, default=6)
    ap.add_argument("--compare-modes", type=int, default=300, help="also audit a beam of this many modes on both routes (0: skip)")
    args = ap.parse_args(argv)
    print(f"python-control {ct.__version__}")
    if args.compare_modes:
        small = assemble(flexible_beam_loop(args.compare_modes))
        t_w, c_w, ref = timed(lambda: path_audit(small, route="whole model"))
        t_b, c_b, got = timed(lambda: path_audit(small, route="block by block"))
        by = {(r.source, r.signal): r for r in ref}
        dpk = max(abs(r.peak_gain - by[r.source, r.signal].peak_gain) / by[r.source, r.signal].peak_gain for r in got)
        dh2 = max((abs(r.h2 - by[r.source, r.signal].h2) / by[r.source, r.signal].h2 for r in got if np.isfinite(r.h2) and by[r.source, r.signal].h2 > 0), default=0.0)
        print(f"\nbeam loop, {args.compare_modes} modes ({small.A.shape[0]} states): whole-model route wall {t_w:.2f} s (cpu {c_w:.2f} s), "
              f"coupling route wall {t_b:.2f} s (cpu {c_b:.2f} s): ratio cpu {c_w / c_b:.1f}x; "
              f"peak gains differ by {dpk:.1e}, H2 by {dh2:.1e} relative; stable flags equal: "
              f"{all(r.stable == by[r.source, r.signal].stable for r in got)}")
    model = assemble(flexible_beam_loop(args.modes))
    n = model.A.shape[0]
    npairs = len(model.sources) * len(model.signals)
    t_aud, c_aud, rows = timed(lambda: path_audit(model))
    poles = closed_loop_poles(BlockwiseModel.from_model(model))
    grid = auto_frequency_grid(poles, points_per_decade=40)
    total, ctotal = t_aud, c_aud
    print(f"\nbeam loop: {args.modes} modes, n = {n} states, {npairs} source-signal pairs, audit grid {grid.size} frequencies")
    print(f"  ours: audit wall {t_aud:.2f} s, cpu {c_aud:.2f} s ({sum(not r.stable for r in rows)} rows flagged unstable)")
    sys_ = ct.ss(*model.pair("r", "y"))
    sub = grid[np.linspace(0, grid.size - 1, args.ct_points).astype(int)]
    t_ct, c_ct, _ = timed(lambda: ct.frequency_response(sys_, sub))
    est = t_ct / args.ct_points * grid.size * len(model.sources)
    print(f"  python-control: one frequency response per source on the audit grid, estimated from {args.ct_points} points: "
          f"wall {est:.0f} s (~{est / 3600:.1f} h); ratio {est / total:.0f}x wall against wall (without its H2 norms and peak refinement)")
    worst, checked = 0.0, 0
    for row in [r for r in rows if np.isfinite(r.peak_freq_rad_s) and r.peak_freq_rad_s > 0][: args.peak_checks]:
        checked += 1
        A, B, C, D = model.pair(row.source, row.signal)
        G = C @ np.linalg.solve(1j * row.peak_freq_rad_s * np.eye(n) - A, B) + D
        worst = max(worst, abs(np.linalg.norm(G, 2) - row.peak_gain) / row.peak_gain)
    print(f"  peak gains vs direct LU at the reported frequencies ({checked} rows with a finite nonzero peak frequency): rel {worst:.1e}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
