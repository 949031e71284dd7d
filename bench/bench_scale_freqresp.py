"""Scale row 1: 1000-point frequency response of one pair of a big modal plant in a loop.

The plant is the flexible beam of ``scale_diagrams.flexible_beam_loop`` (demo data):
``--modes`` lightly damped modes (2 states each), one actuator, one sensor, under an
observer-based controller designed on its first modes. Timed from the assembled model:

* ours: ``path_evaluator`` (the route the operation count picks; block by block here),
  one-off setup included;
* the whole-model route (one Schur form of the closed loop, as before): run at
  ``--whole-modes`` (smaller), where it finishes in reasonable time, and at full size only
  with ``--whole``;
* python-control 0.10.2 ``frequency_response`` of the same path: timed on ``--ct-points``
  frequencies and scaled to 1000 (its cost per frequency is constant).

Agreement is checked against a direct LU solve ``C (jw I - A)^-1 B`` per frequency (refined
in extended precision) on a subset of points, and against the whole-model route where that ran.

Run: ``python bench/bench_scale_freqresp.py [--modes 1500] [--whole-modes 500] [--whole]``
"""
from __future__ import annotations

import argparse
import os
import sys

import control as ct
import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

from scale_diagrams import flexible_beam_loop, refined_direct_response, timed  # noqa: E402

from loopwright.engine.blockwise_response import path_evaluator  # noqa: E402
from loopwright.engine.interconnect import assemble  # noqa: E402
from loopwright.engine.responses import frequency_response  # noqa: E402


def _rel(x, ref):
    peak = np.abs(ref).max()
    keep = np.abs(ref) >= 1e-8 * peak
    return float(np.max(np.abs(x - ref)[keep] / np.abs(ref)[keep])), float(np.abs(x - ref).max() / peak)


def run(modes: int, points: int, *, whole: bool, ct_points: int, check_points: int) -> None:
    model = assemble(flexible_beam_loop(modes))
    n = model.A.shape[0]
    w = np.logspace(-1, np.log10(3.0 * modes**2) + 1, points)
    t_ours, c_ours, ev = timed(lambda: path_evaluator(model, "r", "y", points=points), repeat=1)
    t_eval, c_eval, G = timed(lambda: ev(w), repeat=3)
    t_ours, c_ours = t_ours + t_eval, c_ours + c_eval
    A, B, C, D = model.pair("r", "y")
    sub = np.linspace(0, points - 1, check_points).astype(int)
    ref = refined_direct_response(A, B, C, D, w[sub])
    rel, nw = _rel(G[sub], ref)
    print(f"\nbeam loop: {modes} modes, n = {n} states, {points} frequencies, route: {ev.route}")
    print(f"  ours             wall {t_ours:8.3f} s  cpu {c_ours:8.3f} s   vs direct LU ({check_points} pts): rel {rel:.1e}, diff/peak {nw:.1e}")
    csub = w[np.linspace(0, points - 1, ct_points).astype(int)]
    sys_ = ct.ss(A, B, C, D)
    t_ct, c_ct, _ = timed(lambda: ct.frequency_response(sys_, csub))
    scale = points / ct_points
    print(f"  python-control   wall {t_ct * scale:8.2f} s  cpu {c_ct * scale:8.2f} s   (timed on {ct_points} points, scaled)  "
          f"ratio wall {t_ct * scale / t_ours:7.1f}x, cpu {c_ct * scale / c_ours:7.1f}x")
    if whole:
        t_w, c_w, Gw = timed(lambda: frequency_response(A, B, C, D, w))
        relw, nww = _rel(G, Gw)
        relwd, _ = _rel(Gw[sub], ref)
        print(f"  whole-model      wall {t_w:8.2f} s  cpu {c_w:8.2f} s   ratio wall {t_w / t_ours:7.1f}x, cpu {c_w / c_ours:7.1f}x | "
              f"ours vs whole: rel {relw:.1e}, diff/peak {nww:.1e}; whole vs direct LU: rel {relwd:.1e}")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--modes", type=int, default=1500)
    ap.add_argument("--whole-modes", type=int, default=500, help="size at which the whole-model route is also run")
    ap.add_argument("--whole", action="store_true", help="also run the whole-model route at full size (minutes)")
    ap.add_argument("--points", type=int, default=1000)
    ap.add_argument("--ct-points", type=int, default=10)
    ap.add_argument("--check-points", type=int, default=25)
    args = ap.parse_args(argv)
    print(f"python-control {ct.__version__}")
    if args.whole_modes:
        run(args.whole_modes, args.points, whole=True, ct_points=args.ct_points, check_points=args.check_points)
    run(args.modes, args.points, whole=args.whole, ct_points=args.ct_points, check_points=args.check_points)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
