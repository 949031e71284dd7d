"""Scale row 3: 2,000 unit gains in series inside a loop: every command's engine work.

The diagram is ``scale_diagrams.gain_chain_loop`` (demo data). Timed from the in-memory
diagram: assembly, and each command's analysis (check summary, frequency response of one
path, noise budget, margins at the command signal, path audit of the sources);
and reading the diagram back from its project text (``project.loads``: parsing, schema
check and rebuilding the diagram wire by wire). python-
control 0.10.2 assembles the same loop with ``interconnect`` (timed at ``--ct-gains``
gains, where it finishes). Cost should grow linearly: the script runs ``--sizes``.

``--cli`` also runs each command as the user does, in this process (``cli.main`` on a
saved project file, printing to a discarded buffer): loading the file, assembly, the
analysis and the printed output, without the interpreter's start and the imports (timed
apart, once, in a fresh interpreter: ``python -c "import loopwright.engine.cli"``).

Agreement: the closed loop is ``x' = -(1 + 2 g) x``, ``u = g (r - y)`` with ``g`` the
product of the gains (closed form), checked on the assembled model. The model's injection
block (``ns x ns``, dense on a chain) is not formed by any step timed here: that is checked
too (``model.D.is_formed``).

Run: ``python bench/bench_scale_chain.py [--sizes 500 1000 2000 4000] [--ct-gains 200] [--cli]``
"""
from __future__ import annotations

import argparse
import contextlib
import gc
import io
import os
import subprocess
import sys
import tempfile
import time

import control as ct
import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

from scale_diagrams import gain_chain_loop, timed  # noqa: E402

from loopwright.engine.audit import path_audit  # noqa: E402
from loopwright.engine.check import summarize  # noqa: E402
from loopwright.engine.blockwise_response import path_evaluator  # noqa: E402
from loopwright.engine.interconnect import assemble  # noqa: E402
from loopwright.engine.margins import margins_at  # noqa: E402
from loopwright.engine.noise import noise_budget  # noqa: E402
from loopwright.engine import project  # noqa: E402


def _ct_chain(gains: int):
    blocks = [ct.summing_junction(inputs=["r", "-ym"], output="e", name="e")]
    prev = "e"
    for k in range(gains):
        blocks.append(ct.ss([], [], [], [[1.0]], inputs=prev, outputs=f"s{k}", name=f"g{k}"))
        prev = f"s{k}"
    blocks.append(ct.ss(ct.tf([2.0], [1.0, 1.0]), inputs=prev, outputs="y", name="P"))
    blocks.append(ct.summing_junction(inputs=["y", "n"], output="ym", name="ym"))
    return ct.interconnect(blocks, inputs=["r", "n"], outputs=["y"])


def _time_commands(d, gains: int, audit_max: int) -> None:
    """Each command as typed, in this process: file in, text out (imports excluded)."""
    from loopwright.engine import cli

    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "chain.lwd")
        project.save(d, path)
        commands = {
            "check": ["check", path],
            "freq r -> y": ["freq", path, "--from", "r", "--to", "y"],
            "margins at u": ["margins", path, "--at", "u"],
            "noise": ["noise", path],
            "time, step r -> y": ["time", path, "--step", "r", "--to", "y"],
            "export path r -> y": ["export", path, "--what", "path", "--from", "r", "--to", "y", "-o", os.path.join(tmp, "path.json")],
            "export controller ym -> u": ["export", path, "--what", "controller", "--measured", "ym", "--actuator", "u",
                                          "-o", os.path.join(tmp, "controller.json")],
        }
        if gains <= audit_max:
            # the audit prints every row (2 sources x ~n signals), each path by its ends when
            # it is long (the full lists are in --json): its text grows linearly with the chain
            commands["audit"] = ["audit", path]
            commands["report"] = ["report", path]
        for label, argv in commands.items():
            best, best_cpu = np.inf, np.inf
            for _ in range(3):
                gc.collect()  # every run starts without the garbage of the runs before
                out = io.StringIO()
                t0, c0 = time.perf_counter(), time.process_time()
                with contextlib.redirect_stdout(out), contextlib.redirect_stderr(io.StringIO()):
                    status = cli.main(argv)
                best, best_cpu = min(best, time.perf_counter() - t0), min(best_cpu, time.process_time() - c0)
            size = len(out.getvalue())
            print(f"  command {label:<26} wall {best:7.3f} s  cpu {best_cpu:7.3f} s  (file in, text out: {size / 1e6:.2f} MB; exit {status})")
    t0 = time.perf_counter()
    run = subprocess.run([sys.executable, "-c", "import time; import loopwright.engine.cli; print(time.process_time())"],
                         check=True, capture_output=True, text=True)
    print(f"  (imports, once per command, in a fresh interpreter: wall {time.perf_counter() - t0:.2f} s, "
          f"cpu {float(run.stdout.split()[-1]):.2f} s with the interpreter's start)")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[500, 1000, 2000, 4000])
    ap.add_argument("--ct-gains", type=int, default=200)
    ap.add_argument("--audit-max", type=int, default=None, help="largest chain to audit (default: every size)")
    ap.add_argument("--cli", action="store_true", help="also time each command end to end in this process (file in, text out)")
    args = ap.parse_args(argv)
    print(f"python-control {ct.__version__}")
    w = np.logspace(-2, 2, 1000)
    audit_max = max(args.sizes) if args.audit_max is None else args.audit_max
    for gains in args.sizes:
        d = gain_chain_loop(gains)
        t_a, c_a, model = timed(lambda: assemble(d), repeat=3)
        assert np.allclose(model.A, [[-3.0]]) and np.allclose(model.pair("r", "u")[3], [[1.0]])
        assert not model.D.is_formed
        text = project.dumps(d)
        steps = {
            "load project text": lambda: project.loads(text),
            "check": lambda: summarize(d),
            "freq (1000 points)": lambda: path_evaluator(assemble(d), "r", "y")(w),
            "noise": lambda: noise_budget(assemble(d)),
            "margins at u": lambda: margins_at(d, "u"),
        }
        if gains <= audit_max:
            steps["audit"] = lambda: path_audit(assemble(d))
        print(f"\n{len(d.blocks)} blocks, {gains} gains in series: assemble wall {t_a:.3f} s, cpu {c_a:.3f} s")
        for label, fn in steps.items():
            t, c, _ = timed(fn, repeat=2)
            print(f"  {label:<20} wall {t:7.3f} s  cpu {c:7.3f} s  (assembly included)")
        if args.cli:
            _time_commands(d, gains, audit_max)
        if gains == args.sizes[-1] and args.ct_gains:
            t_ct, c_ct, _ = timed(lambda: _ct_chain(args.ct_gains))
            dd = gain_chain_loop(args.ct_gains)
            t_small, c_small, _ = timed(lambda: assemble(dd), repeat=3)
            print(f"  python-control interconnect at {args.ct_gains} gains: wall {t_ct:.2f} s, cpu {c_ct:.2f} s; ours at "
                  f"{args.ct_gains} gains wall {t_small:.3f} s: ratio wall {t_ct / t_small:.0f}x, cpu {c_ct / c_small:.0f}x")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
