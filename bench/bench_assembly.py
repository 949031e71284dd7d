"""Assembly speed: Loopwright's sparse one-model assembly against python-control's
``interconnect`` on the same generated diagrams, in the same run.

Run: ``python bench/bench_assembly.py [--sizes 50 200 500] [--repeat 5] [--reference-max 250]``.
Prints blocks, states, both times, the ratio, and the largest difference between the two
models' frequency responses (sources -> every signal) at a few frequencies.
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

from loops import chain_of_loops  # noqa: E402

from loopwright.engine.interconnect import assemble  # noqa: E402


def best_of(fn, repeat: int) -> tuple[float, object]:
    best, out = float("inf"), None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def agreement(model, ref, omegas=(0.3, 1.7, 6.0)) -> float:
    cols = np.concatenate([np.arange(model.inputs[s].start, model.inputs[s].stop) for s in model.sources])
    worst = 0.0
    for w in omegas:
        s = 1j * w
        ours = model.C @ np.linalg.solve(s * np.eye(model.n_states) - model.A, model.B[:, cols]) + model.D[:, cols]
        theirs = ref(s)
        worst = max(worst, float(np.abs(ours - theirs).max() / max(1.0, np.abs(theirs).max())))
    return worst


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--sizes", type=int, nargs="+", default=[50, 200, 500])
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--reference-max", type=int, default=250, help="skip python-control above this many blocks (it takes minutes)")
    args = ap.parse_args()
    import control as ct
    from reference_models import to_python_control

    print(f"python-control {ct.__version__}, numpy {np.__version__}")
    print(f"{'blocks':>7} {'states':>7} {'loopwright':>12} {'python-control':>15} {'ratio':>8} {'max rel diff':>13}")
    for size in args.sizes:
        d = chain_of_loops(size)
        t_ours, model = best_of(lambda: assemble(d), args.repeat)
        if len(d.blocks) <= args.reference_max:
            t_ref, (ref, _, _) = best_of(lambda: to_python_control(d), 1)
            diff = agreement(model, ref)
            print(f"{len(d.blocks):>7} {model.n_states:>7} {t_ours * 1e3:>10.1f}ms {t_ref:>13.2f} s {t_ref / t_ours:>7.0f}x {diff:>13.1e}")
        else:
            print(f"{len(d.blocks):>7} {model.n_states:>7} {t_ours * 1e3:>10.1f}ms {'(skipped)':>15} {'-':>8} {'-':>13}")


if __name__ == "__main__":
    main()
