"""Frequency-response speed: Loopwright vs python-control on large loops, same run.

Builds chains of observer-based loops (demo data: a line of flexible conveyor sections,
each a 4-state two-mass drive with its own estimator and state feedback, coupled to the
previous section's output) with 200 to 800 states, plus a dense random 800-state model,
and times one path's response at 1000 frequencies with both tools. Prints the ratio and
the agreement (largest relative difference).

Run: ``python bench/bench_freqresp.py [--sizes 200 400 800] [--points 1000]``
"""
from __future__ import annotations

import argparse
import os
import sys

import control as ct
import numpy as np
import scipy.signal as ss

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

from scale_diagrams import timed as _time  # noqa: E402

from loopwright.engine.diagram import Diagram  # noqa: E402
from loopwright.engine.interconnect import assemble  # noqa: E402
from loopwright.engine.responses import frequency_response  # noqa: E402


def conveyor_chain(sections: int, *, seed: int = 0) -> Diagram:
    """``sections`` observer-based two-mass drive loops in a line (8 states each).

    Sources: reference ``r`` into the first section, load disturbances ``d1``, ``d2`` at
    a third and two thirds of the line, sensor noise ``n`` on the last measurement.
    """
    rng = np.random.default_rng(seed)
    d = Diagram()
    d.add_block("source", "r", {"role": "reference", "width": 1, "waveform": {"kind": "step", "amplitude": 1.0}})
    d.add_block("source", "d1", {"role": "disturbance", "width": 1, "waveform": {"kind": "white", "intensity": 0.01, "seed": 1}})
    d.add_block("source", "d2", {"role": "disturbance", "width": 1, "waveform": {"kind": "white", "intensity": 0.01, "seed": 2}})
    d.add_block("source", "n", {"role": "noise", "width": 1, "waveform": {"kind": "white", "intensity": 1e-6, "seed": 3}})
    dist_at = {max(1, sections // 3): "d1", max(1, 2 * sections // 3): "d2"}
    prev = "r.out"
    for i in range(sections):
        k, j1, j2, c = rng.uniform(20, 80), rng.uniform(0.5, 1.5), rng.uniform(1.0, 3.0), rng.uniform(0.05, 0.3)
        A = np.array([[0, 1, 0, 0], [-k / j1, -c / j1, k / j1, c / j1], [0, 0, 0, 1], [k / j2, c / j2, -k / j2, -c / j2]])
        B = np.array([[0.0], [1 / j1], [0.0], [0.0]])
        C = np.array([[0.0, 0.0, 1.0, 0.0]])
        K = ss.place_poles(A, B, -rng.uniform(2, 6) * np.array([1.0, 1.3, 1.7, 2.1])).gain_matrix
        L = ss.place_poles(A.T, C.T, -rng.uniform(8, 20) * np.array([1.0, 1.2, 1.5, 1.9])).gain_matrix.T
        # prefilter so that each section passes its input at unit DC gain
        Acl = A - B @ K
        dc = float(-(C @ np.linalg.solve(Acl, B))[0, 0])
        d.add_block("plant", f"P{i}", {"A": A.tolist(), "B": B.tolist(), "C": C.tolist(), "D": [[0.0]]})
        d.add_block("estimator", f"est{i}", {"plant": f"P{i}", "L": L.tolist()})
        d.add_block("gain", f"K{i}", {"K": (-K).tolist()})
        d.add_block("gain", f"N{i}", {"K": [[1.0 / dc]]})
        signs = ["+", "+", "+"] if i in dist_at else ["+", "+"]
        d.add_block("sum", f"u{i}", {"signs": signs, "width": 1})
        d.connect(prev, f"N{i}.in")
        d.connect(f"N{i}.out", f"u{i}.in1", name=f"uff{i}")
        d.connect(f"est{i}.xhat", f"K{i}.in", name=f"xhat{i}")
        d.connect(f"K{i}.out", f"u{i}.in2", name=f"ufb{i}")
        if i in dist_at:
            d.connect(f"{dist_at[i]}.out", f"u{i}.in3", name=f"load{i}")
        d.connect(f"u{i}.out", f"P{i}.u", name=f"u{i}")
        d.connect(f"u{i}.out", f"est{i}.u")
        if i == sections - 1:
            d.add_block("sum", "ym", {"signs": ["+", "+"], "width": 1})
            d.connect(f"P{i}.y", "ym.in1", name=f"y{i}")
            d.connect("n.out", "ym.in2", name="noise")
            d.connect("ym.out", f"est{i}.y", name="y_meas")
        else:
            d.connect(f"P{i}.y", f"est{i}.y", name=f"y{i}")
        prev = f"P{i}.y"
    return d


def _compare(label: str, A, B, C, D, w, *, ct_repeat: int = 1) -> dict:
    t_ours, c_ours, ours = _time(lambda: frequency_response(A, B, C, D, w), repeat=5)
    sys = ct.ss(A, B, C, D)
    t_ct, c_ct, resp = _time(lambda: ct.frequency_response(sys, w), repeat=ct_repeat)
    ref = np.asarray(resp.magnitude) * np.exp(1j * np.asarray(resp.phase))
    ref = ref.reshape(C.shape[0], B.shape[1], -1)
    ref = np.moveaxis(ref, 2, 0)
    # pointwise relative difference where the response is within 1e8 of its peak (a chain
    # of 100 sections rolls off to 1e-300 and below, where both tools return rounding
    # noise), and the difference relative to the peak everywhere
    peak = np.abs(ref).max()
    keep = np.abs(ref) >= 1e-8 * peak
    rel = float(np.max(np.abs(ours - ref)[keep] / np.abs(ref)[keep]))
    normwise = float(np.max(np.abs(ours - ref)) / peak)
    print(f"{label:<34} n={A.shape[0]:4d}  k={w.size}  wall: ours {t_ours:6.3f} s, python-control {t_ct:7.2f} s, "
          f"ratio {t_ct / t_ours:6.1f}x | cpu: ours {c_ours:6.3f} s, python-control {c_ct:7.2f} s, ratio {c_ct / c_ours:6.1f}x "
          f"| rel diff {rel:.1e} ({keep.sum()} pts), diff/peak {normwise:.1e}", flush=True)
    return {"label": label, "n": A.shape[0], "ours_s": t_ours, "ct_s": t_ct, "ratio": t_ct / t_ours, "rel": rel}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[200, 400, 800], help="state counts of the chains")
    ap.add_argument("--points", type=int, default=1000)
    ap.add_argument("--no-dense", action="store_true", help="skip the dense random 800-state model")
    ap.add_argument("--ct-repeat", type=int, default=1, help="python-control runs per model (best is kept)")
    args = ap.parse_args(argv)
    print(f"python-control {ct.__version__}; one path, {args.points} log-spaced frequencies; "
          f"best of 5 runs for ours, of {args.ct_repeat} for python-control")
    for n in args.sizes:
        sections = max(1, n // 8)
        model = assemble(conveyor_chain(sections))
        A, B, C, D = model.pair("r", f"y{sections - 1}")
        poles = np.linalg.eigvals(A)
        w = np.logspace(np.log10(np.abs(poles).min()) - 2, np.log10(np.abs(poles).max()) + 2, args.points)
        _compare(f"conveyor chain ({sections} sections)", A, B, C, D, w, ct_repeat=args.ct_repeat)
    if not args.no_dense:
        rng = np.random.default_rng(0)
        n = 800
        A = rng.standard_normal((n, n)) / np.sqrt(n) - 1.5 * np.eye(n)
        _compare("dense random model", A, rng.standard_normal((n, 1)), rng.standard_normal((1, n)), np.zeros((1, 1)), np.logspace(-2, 2, args.points), ct_repeat=args.ct_repeat)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
