"""Scale row 1b: margins of the big modal loop (3,008 states), broken at the actuator and at
the measurement.

The diagram is ``scale_diagrams.flexible_beam_loop`` (demo data). Ours: ``margins_at`` as
the ``margins`` command calls it; on this loop the operation count picks the block-by-block
route (one assembly of the opened loop, the closed loop's coupling form derived from it;
the opened loop's poles block by block, the closed loop's from the coupling form;
``L(jw)`` block by block; no minimal realization, Schur form or Hamiltonian of the
3,008-state model). The whole-model
route (minimal realization, Schur form, Hamiltonian peak searches: O(n^3) several times
over) is run at ``--whole-modes`` (smaller), where it finishes, and the two are compared
there (the block-by-block route asked for by name: at that size the operation count
keeps the whole-model route). python-control 0.10.2 ``stability_margins`` is tried at that
size too (it works on the loop transfer's polynomials, which overflow on these modes; at
full size the polynomial has degree 3,000, so it is not run there).

Run: ``python bench/bench_scale_margins.py [--modes 1500] [--whole-modes 20]``
"""
from __future__ import annotations

import argparse
import os
import sys
import warnings

import control as ct
import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

from scale_diagrams import flexible_beam_loop, timed  # noqa: E402

from loopwright.engine.margins import loop_transfer, margins_at  # noqa: E402

_KEYS = ("phase_margin_deg", "phase_margin_w_rad_s", "delay_margin_s", "gain_upper", "peak_sensitivity")


def _rel(a: float, b: float) -> float:
    if not np.isfinite(b):
        return 0.0 if a == b else np.inf
    return abs(a - b) / max(abs(b), 1e-300)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--modes", type=int, default=1500)
    ap.add_argument("--whole-modes", type=int, default=20)
    ap.add_argument("--signals", nargs="+", default=["u", "ym"])
    args = ap.parse_args(argv)
    print(f"python-control {ct.__version__}")
    for modes in (args.whole_modes, args.modes):
        d = flexible_beam_loop(modes)
        print(f"\nbeam loop, {modes} modes ({2 * modes + 8} states)")
        for sig in args.signals:
            # at the small size the operation count keeps the whole-model route; the block-by-block
            # route is asked for there so that the two can be compared
            route = "block by block" if modes == args.whole_modes else "auto"
            t, c, m = timed(lambda: margins_at(d, sig, route=route))
            print(f"  at {sig:<3} ours        wall {t:7.2f} s  cpu {c:7.2f} s   PM {m.phase_margin_deg:.6f} deg at {m.phase_margin_w_rad_s:.6g} rad/s,"
                  f" upper gain x{m.gain_upper:.6g}, peak |S| {m.peak_sensitivity:.6f}")
            if modes != args.whole_modes:
                continue
            tw, cw, mw = timed(lambda: margins_at(d, sig, route="whole model"))
            worst = max(_rel(getattr(m, k), getattr(mw, k)) for k in _KEYS)
            print(f"         whole model wall {tw:7.2f} s  cpu {cw:7.2f} s   ratio cpu {cw / c:6.1f}x;"
                  f" largest relative difference ({', '.join(_KEYS)}): {worst:.1e}")
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                sys_ = ct.ss(*loop_transfer(d, sig))
                try:
                    tc, cc, (gm, pm, _, _, wgc, _) = timed(lambda: ct.stability_margins(sys_))
                except (np.linalg.LinAlgError, ValueError) as err:
                    print(f"         python-control stability_margins fails: {type(err).__name__}: {err}")
                    continue
            print(f"         python-control stability_margins wall {tc:7.2f} s  cpu {cc:7.2f} s   ratio cpu {cc / c:6.1f}x;"
                  f" PM {pm:.6f} deg at {wgc:.6g} rad/s (ours differs by {_rel(m.phase_margin_deg, pm):.1e})")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
