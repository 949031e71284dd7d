"""The ``margins`` command end to end at 50 and 400 states, and its parts, beside python-control.

The loops are ``loops.view_loop`` (chains of observer-based loops closed into a ring, demo
data) written to project files and broken at ``P0.u``, the loop break the views bench opens.
For each size:

* ``loopwright margins FILE`` as a user runs it: a new process (imports, reading the file,
  assembly, margins, limits, printing), median wall time and its CPU time (children's
  rusage), the machine's load average beside them;
* in process: ``margins_at`` with the performance limits on the loop-evaluator route (the
  default) and on the whole-model route (minimal realization, one Schur form: the route the
  command took before), and the limits' Bode integral alone on each route's evaluator;
* the Bode integral as the engine computed it before (scipy ``quad``, one frequency per
  call): run on the cheap evaluator to count its calls, and estimated as it ran (on the
  minimal realization's Schur-form evaluator) from 200 calls timed there;
* python-control 0.10.2: ``stability_margins`` and ``disk_margins`` (on our grid) of the same
  loop: the nearest calls it has (no certified peak, no Bode integral, no limits).

Run:  python bench/bench_margins_cli.py [--states 50 400] [--repeat 3]
"""
from __future__ import annotations

import argparse
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
import warnings

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

from loops import view_loop  # noqa: E402
from scale_diagrams import timed  # noqa: E402

from loopwright.engine.blas_threads import limit_blas_threads  # noqa: E402
from loopwright.engine.limits import bode_sensitivity_integral  # noqa: E402
from loopwright.engine.loop_response import LoopResponse  # noqa: E402
from loopwright.engine.margins import margins_at, opened_loop  # noqa: E402
from loopwright.engine.project import save  # noqa: E402
from loopwright.engine.structure import minimal_realization  # noqa: E402


def command_line(path: str, repeat: int) -> tuple[float, float, str]:
    """Median wall and CPU seconds of ``loopwright margins path`` in a new process, and its output."""
    walls, cpus, out = [], [], ""
    exe = [sys.executable, "-m", "loopwright.engine.cli", "margins", path]
    for _ in range(repeat):
        before = resource.getrusage(resource.RUSAGE_CHILDREN)
        t = time.perf_counter()
        out = subprocess.run(exe, check=True, capture_output=True, text=True).stdout
        walls.append(time.perf_counter() - t)
        after = resource.getrusage(resource.RUSAGE_CHILDREN)
        cpus.append((after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime))
    return statistics.median(walls), statistics.median(cpus), out


def previous_route(evaluate, poles) -> tuple[float, int]:
    """Bode's integral as the engine computed it before: scipy ``quad`` (QAGP) on
    ``w = tan(theta)`` with a panel end at ``arctan |p|``, one frequency per call; the value and
    the number of calls."""
    import scipy.integrate as si

    calls = [0]

    def f(theta):
        calls[0] += 1
        w = np.tan(theta)
        with np.errstate(all="ignore"):
            L = evaluate(np.array([w]))[0]
            val = -np.log(abs(1.0 + L)) / np.cos(theta) ** 2
        return float(val) if np.isfinite(val) else 0.0

    pts = sorted({float(np.arctan(abs(p))) for p in poles if 0 < np.arctan(abs(p)) < np.pi / 2})
    value = si.quad(f, 0.0, np.pi / 2, points=pts or None, limit=2000, epsabs=1e-11, epsrel=1e-10, full_output=1)[0]
    return value, calls[0]


def line(name: str, wall: float, cpu: float, extra: str = "") -> None:
    print(f"  {name:<52} wall {wall:7.3f} s  cpu {cpu:7.3f} s  {extra}")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--states", type=int, nargs="+", default=[50, 400])
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args(argv)
    import control as ct

    limit_blas_threads(1)  # as the command line runs
    print(f"python-control {ct.__version__}; load average {' '.join(f'{x:.2f}' for x in os.getloadavg())}")
    with tempfile.TemporaryDirectory() as tmp:
        for n in args.states:
            d = view_loop(n)
            path = os.path.join(tmp, f"ring_{n}.lwd")
            save(d, path)
            print(f"\n{n} states, loop broken at P0.u")
            w_cli, c_cli, text = command_line(path, args.repeat)
            line("loopwright margins FILE (new process, end to end)", w_cli, c_cli,
                 f"median of {args.repeat}; load {os.getloadavg()[0]:.2f}")

            tw, tc, m = timed(lambda: margins_at(d, "P0.u"), args.repeat)
            line("margins_at, loop-evaluator route (with limits)", tw, tc)
            tw2, tc2, m2 = timed(lambda: margins_at(d, "P0.u", route="whole model"), 1)
            worst = max(abs(getattr(m, k) - getattr(m2, k)) / max(abs(getattr(m2, k)), 1e-300)
                        for k in ("gain_upper", "peak_sensitivity") if np.isfinite(getattr(m2, k)))
            line("margins_at, whole-model route (with limits)", tw2, tc2,
                 f"ratio cpu {tc2 / tc:5.1f}x; gain margin, peak |S|, disk alpha agree to "
                 f"{max(worst, abs(m.disk.alpha - m2.disk.alpha) / m2.disk.alpha):.1e}")

            A, B, C, D = opened_loop(d, "P0.u")
            resp = LoopResponse(A, B, C, D)
            tw, tc_bi, bi = timed(lambda: bode_sensitivity_integral(A, B, C, D, response=resp, poles=resp.poles), args.repeat)
            line(f"  Bode integral, {resp.route} evaluator", tw, tc_bi,
                 f"{bi.value:+.3e} (error estimate {bi.error:.1e}, {bi.evaluations} points in {bi.rounds} calls)")
            Am, Bm, Cm, Dm = minimal_realization(A, B, C, D)
            whole = LoopResponse(Am, Bm, Cm, Dm)
            tw, tc, bw = timed(lambda: bode_sensitivity_integral(Am, Bm, Cm, Dm, response=whole, poles=whole.poles), 1)
            line(f"  Bode integral, {whole.route} evaluator (minimal)", tw, tc, f"{bw.value:+.3e}, {bw.evaluations} points")
            # the previous route: quad calling the evaluator one frequency at a time; its calls
            # are counted on the cheap evaluator, each call timed on the Schur-form one
            tw, tc_q, (q_value, q_calls) = timed(lambda: previous_route(resp, whole.poles), 1)
            line(f"  previous route (quad, one point per call), {resp.route}", tw, tc_q,
                 f"{q_value:+.3e}, {q_calls} calls")
            probe = np.tan(np.linspace(0.01, 1.55, 200))
            c0 = time.process_time()
            for w in probe:
                whole(np.array([w]))
            per_call = (time.process_time() - c0) / probe.size
            line("  previous route as it ran (Schur-form evaluator, est.)", np.nan, per_call * q_calls,
                 f"{per_call * 1e3:.2f} ms per call x {q_calls} calls; ratio {per_call * q_calls / tc_bi:6.0f}x to ours")

            sys_ = ct.ss(A, B, C, D)
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                try:
                    tw, tc_sm, sm = timed(lambda: ct.stability_margins(sys_), 1)
                    line("python-control stability_margins", tw, tc_sm, f"upper gain {sm[0]:.6g} (ours {m.gain_upper:.6g})")
                except (np.linalg.LinAlgError, ValueError, OverflowError) as err:
                    print(f"  python-control stability_margins fails: {type(err).__name__}: {err}")
                wgrid, _ = resp.grid()
                tw, tc_dm, dm = timed(lambda: ct.disk_margins(sys_, wgrid, skew=0.0), 1)
                line("python-control disk_margins on our grid", tw, tc_dm, f"alpha {float(dm[0]):.10g} (ours {m.disk.alpha:.10g})")
            print("  the command's Bode line: " + " | ".join(ln.strip()[:110] for ln in text.splitlines() if "int_0^inf" in ln))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
