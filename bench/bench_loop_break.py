"""Engine time of the loop-break view (``views_data.loop_break_view``) at 50 and 400 states,
part by part, beside the nearest python-control calls, with ratios.

The loops are ``loops.view_loop`` (chains of observer-based loops closed into a ring, demo
data) broken at ``P0.u``, as the views bench opens them. For each size:

* the whole view as the app asks for it (``limits=False``, with an interim view): wall and
  CPU time to the interim view (margins from the refined grid, not yet certified) and to
  the certified view;
* its parts: one assembly of the opened loop, the loop evaluator, the grid, the margins'
  first pass, the Hamiltonian certification of peak |S| and of the disk margin;
* python-control 0.10.2: ``stability_margins`` of the same loop (its polynomial route),
  ``disk_margins`` and the frequency response of ``L`` on our grid (``ss.__call__``).

The machine is shared: the load average is printed, and wall and CPU seconds.

Run:  OPENBLAS_NUM_THREADS=1 python bench/bench_loop_break.py [--states 50 400] [--repeat 5]
"""
from __future__ import annotations

import argparse
import os
import statistics
import sys
import time
import warnings

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

from loops import view_loop  # noqa: E402

from loopwright.engine.loop_response import LoopResponse  # noqa: E402
from loopwright.engine.margins import certify_sensitivity_peaks, opened_loop, scalar_margins  # noqa: E402
from loopwright.engine.views_data import loop_break_view  # noqa: E402


def timed(fn, repeat: int):
    """Median wall and CPU seconds of ``repeat`` runs, and the last result."""
    walls, cpus, out = [], [], None
    for _ in range(repeat):
        t, c = time.perf_counter(), time.process_time()
        out = fn()
        walls.append(time.perf_counter() - t)
        cpus.append(time.process_time() - c)
    return statistics.median(walls), statistics.median(cpus), out


def view_with_interim(d):
    marks = {}
    t, c = time.perf_counter(), time.process_time()
    v = loop_break_view(d, "P0.u", limits=False, interim=lambda _v: marks.setdefault("interim", (time.perf_counter() - t, time.process_time() - c)))
    marks["final"] = (time.perf_counter() - t, time.process_time() - c)
    return marks, v


def line(name: str, wall: float, cpu: float, extra: str = "") -> None:
    print(f"  {name:<44} wall {1e3 * wall:9.1f} ms  cpu {1e3 * cpu:9.1f} ms  {extra}")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--states", type=int, nargs="+", default=[50, 400])
    ap.add_argument("--repeat", type=int, default=5)
    args = ap.parse_args(argv)
    import control as ct

    print(f"python-control {ct.__version__}; load average {' '.join(f'{x:.2f}' for x in os.getloadavg())}; "
          f"OPENBLAS_NUM_THREADS={os.environ.get('OPENBLAS_NUM_THREADS', 'unset')}")
    loop_break_view(view_loop(10), "P0.u", limits=False)  # imports and first-call costs out of the way
    for n in args.states:
        d = view_loop(n)
        rep = args.repeat if n <= 100 else max(1, args.repeat // 2)
        print(f"\n{n} states (median of {rep})")
        runs = [view_with_interim(d) for _ in range(rep)]
        v = runs[-1][1]
        if "interim" in runs[0][0]:
            line("loop_break_view: interim (grid margins)", statistics.median(r[0]["interim"][0] for r in runs),
                 statistics.median(r[0]["interim"][1] for r in runs))
        w_all, c_all = statistics.median(r[0]["final"][0] for r in runs), statistics.median(r[0]["final"][1] for r in runs)
        line("loop_break_view: certified", w_all, c_all, f"({v.w_rad_s.size} frequencies)")
        tw, tc, (A, B, C, D) = timed(lambda: opened_loop(d, "P0.u"), rep)
        line("  opened loop (assembly, trim)", tw, tc, f"({A.shape[0]} states)")
        tw, tc, resp = timed(lambda: LoopResponse(A, B, C, D), rep)
        line("  loop evaluator", tw, tc, f"(route: {resp.route})")
        tw, tc, (w, L) = timed(lambda: resp.grid(), rep)
        line("  grid and L(jw) on it", tw, tc)
        tw, tc, (m, _w, _L) = timed(lambda: scalar_margins(resp, certify=False), rep)
        line("  margins, first pass (grid-refined peaks)", tw, tc)
        tw, tc, certified = timed(lambda: certify_sensitivity_peaks(
            resp, (m.peak_sensitivity, m.peak_sensitivity_w_rad_s), (1.0 / m.disk.alpha, m.disk.w_rad_s)), rep)
        line("  certification (two Hamiltonian checks)", tw, tc,
             f"peak |S| grid {m.peak_sensitivity:.12g} certified {certified[0][0]:.12g}")

        sys_ = ct.ss(A, B, C, D)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            tw, tc, Lc = timed(lambda: np.asarray(sys_(1j * w)).ravel(), rep)
            line("python-control ss(1j w) on our grid", tw, tc, f"ratio to our grid: cpu {tc / max(timed(lambda: resp(w), rep)[1], 1e-9):.1f}x;"
                 f" largest relative difference {np.max(np.abs(Lc - L) / np.abs(L)):.1e}")
            tw, tc, dm = timed(lambda: ct.disk_margins(sys_, w, skew=0.0), 1)
            line("python-control disk_margins on our grid", tw, tc, f"alpha {float(dm[0]):.10g} (ours {v.margins.disk.alpha:.10g})")
            try:
                tw, tc, sm = timed(lambda: ct.stability_margins(sys_), 1)
                line("python-control stability_margins", tw, tc,
                     f"ratio to our certified view: cpu {tc / c_all:.1f}x; PM {sm[1]:.6f} deg (ours {v.margins.phase_margin_deg:.6f})")
            except (np.linalg.LinAlgError, ValueError, OverflowError) as err:
                print(f"  python-control stability_margins fails: {type(err).__name__}: {err}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
