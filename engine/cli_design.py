"""Design and export commands of the headless CLI: ``design`` and ``export``.

``loopwright design FILE`` computes K, L and feedforward gains from the recipes stored in
the file and prints them with the achieved poles and any warnings; ``--write`` stores them
in the file (atomically: the old file stays whole until the new one is complete).

``loopwright export FILE --what closed-loop|path|controller -o OUT`` writes the closed-loop
model, one path, or the lumped controller (continuous, or discretised with ``--ts``) as
JSON, NPZ or -- for a discretised controller -- C99 source and header.
"""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

from loopwright.engine import CAUTION
from loopwright.engine.cli_common import fmt_complex, fmt_num, load_diagram, print_json
from loopwright.engine.cli_options import FREQUENCY_RANGE_RAD_S, SAMPLE_PERIOD_RANGE_S, bounded_float
from loopwright.engine.design import poles_to_json
from loopwright.engine.diagram import Diagram
from loopwright.engine.errors import DesignError, EngineError
from loopwright.engine.export import (
    c_output_paths,
    c_prefix_for,
    closed_loop_model,
    controller_model,
    path_model,
    write_c,
    write_json,
    write_npz,
)
from loopwright.engine.lumped import (
    controller_transfer_function,
    default_loop_signals,
    lumped_controller,
    sampled_loop_margins,
)
from loopwright.engine.output_paths import check_diagram_output, check_export_output
from loopwright.engine.project import save
from loopwright.engine.recipes import recipe_blocks, recipe_status, redesign, stale_blocks

__all__ = ["add_commands"]

_DESIGN_EPILOG = """\
Recipes live in a gain or estimator block's params under "recipe", e.g.
  {"method": "place", "plant": "P", "poles": [[-2, 2], [-2, -2]], "sign": -1}
  {"method": "lqr", "Q": [10, 1], "R": 0.1}
  {"method": "kalman"}            (intensities traced from the diagram's noise sources)
  {"method": "feedforward", "feedback": "K"}
  {"method": "place", "poles": [...n+1 poles...], "integral": {"block": "Ki", "outputs": [1]}}
Complex poles are [re, im] pairs, each conjugate listed. Without --write nothing is changed.
"""

_EXPORT_EPILOG = """\
examples:
  loopwright export drive.lwd --what closed-loop -o drive_loop.json
  loopwright export drive.lwd --what path --from dl --to y -o load_to_y.npz
  loopwright export drive.lwd --what controller --ts 0.001 --method tustin -o drive_ctrl.c
The controller runs from --measured to --actuator (defaults: the signal into the
estimator's y input and the signal into its plant's u input). C output needs --ts.
"""


def add_commands(subparsers) -> None:
    """Register ``design`` and ``export`` on the CLI's sub-command parser."""
    p = subparsers.add_parser(
        "design", help="compute K, L and feedforward gains from the recipes stored in a diagram",
        epilog=_DESIGN_EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("file", help="diagram file (.lwd)")
    which = p.add_mutually_exclusive_group()
    which.add_argument("--block", action="append", metavar="NAME", default=None,
                       help="design this block (repeat for several); feedforward blocks that read its gain follow")
    which.add_argument("--all", action="store_true", help="design every block that has a recipe (the default)")
    which.add_argument("--stale", action="store_true", help="design only the blocks whose plant or recipe changed")
    act = p.add_mutually_exclusive_group()
    act.add_argument("--write", action="store_true", help="store the new gains in FILE (atomic)")
    act.add_argument("--print", dest="print_only", action="store_true", help="only print the new gains (the default)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(run=_design)

    p = subparsers.add_parser(
        "export", help="write the closed-loop model, a path or the lumped controller as JSON, NPZ or C",
        epilog=_EXPORT_EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("file", help="diagram file (.lwd)")
    p.add_argument("--what", required=True, choices=["closed-loop", "path", "controller"], help="which model to export")
    p.add_argument("--from", dest="source", metavar="INPUT", default=None, help="path: a source, or a signal (its injection)")
    p.add_argument("--to", dest="signal", metavar="SIGNAL", default=None, help="path: the signal it reaches")
    p.add_argument("--measured", metavar="SIG[,SIG]", default=None, help="controller: signals it reads, comma-separated")
    p.add_argument("--actuator", metavar="SIG[,SIG]", default=None, help="controller: signals it drives, comma-separated")
    p.add_argument("--ts", type=bounded_float(*SAMPLE_PERIOD_RANGE_S, unit="s"), default=None, metavar="SECONDS",
                   help="controller: sample period; discretises it")
    p.add_argument("--method", choices=["zoh", "tustin"], default="zoh", help="discretisation (default zoh)")
    p.add_argument("--prewarp", type=bounded_float(*FREQUENCY_RANGE_RAD_S, unit="rad/s"), default=None, metavar="RAD_S", help="tustin: frequency matched exactly, rad/s")
    p.add_argument("--format", choices=["json", "npz", "c"], default=None,
                   help="output format (default: from the suffix of OUT, else json)")
    p.add_argument("--precision", choices=["double", "float"], default="double", help="C scalar type (default double)")
    p.add_argument("--prefix", default=None, metavar="NAME", help="C identifier prefix (default: the stem of OUT)")
    p.add_argument("-o", "--output", required=True, metavar="OUT", help="file to write (C: OUT.c and OUT.h)")
    p.add_argument("--json", action="store_true", help="print a JSON summary instead of text")
    p.set_defaults(run=_export)


# ---------------------------------------------------------------------------------------
# design
# ---------------------------------------------------------------------------------------
def _matrix_text(M: np.ndarray) -> str:
    rows = ["[" + ", ".join(fmt_num(v, digits=8) for v in row) + "]" for row in np.atleast_2d(M)]
    return "[" + ", ".join(rows) + "]"


def _design(args: argparse.Namespace) -> int:
    diagram = load_diagram(args.file)
    if args.write:
        check_diagram_output(args.file)  # a read-only diagram is refused before any work
    recipes = [b.name for b in recipe_blocks(diagram)]
    if not recipes:
        raise DesignError(f"{args.file}: no block carries a recipe; add \"recipe\" to a gain or estimator block's params")
    stale_before = stale_blocks(diagram)
    if args.block:
        names = args.block
    elif args.stale:
        names = stale_before
    else:
        names = recipes
    if not names:
        out, results = diagram, []
    else:
        out, results = redesign(diagram, names)
    if args.write and results:
        save(out, args.file)
    if args.json:
        print_json({
            "file": args.file,
            "written": bool(args.write and results),
            "stale_before": stale_before,
            "stale_after": stale_blocks(out),
            "blocks": [
                {
                    "block": r.block, "kind": r.kind, "method": r.method, "plant": r.plant,
                    "matrix_name": "K" if r.kind == "gain" else "L", "matrix": r.matrix,
                    "poles": poles_to_json(r.poles), "gain_norm": r.gain_norm,
                    "designed_for": r.fingerprint, "warnings": list(r.warnings),
                    "also_sets": {name: params.get("K") for name, params in r.linked.items()},
                    **_by_products(r),
                }
                for r in results
            ],
            "caution": CAUTION,
        })
        return 0
    print(f"{args.file}: {len(results)} block(s) designed" + (" and written" if args.write and results else ""))
    if stale_before:
        states = recipe_status(diagram)
        never = [n for n in stale_before if states.get(n) == "not designed yet"]
        changed = [n for n in stale_before if n not in never]
        if never:
            print(f"  not designed yet: {', '.join(never)}")
        if changed:
            print(f"  stale before (plant or recipe changed since designed): {', '.join(changed)}")
    for r in results:
        key = "K" if r.kind == "gain" else "L"
        label = "feedforward" if r.method == "feedforward" else r.method
        print(f"\n  {r.block} ({r.kind}, {label}, plant {r.plant!r})")
        if r.kind == "gain" and r.design is not None and not np.allclose(r.design.gain, r.matrix):
            print(f"    K = {_matrix_text(r.design.gain)}  (design gain, u = -K x)")
            print(f"    block matrix = {_matrix_text(r.matrix)}  (the sign of the feedback sits in the gain block)")
        else:
            print(f"    {key} = {_matrix_text(r.matrix)}")
        for other, params in r.linked.items():
            print(f"    also sets {other}: K = {_matrix_text(np.asarray(params['K']))} (integral action)")
        what = "closed-loop poles of its feedback" if r.method == "feedforward" else (
            "eig(A - B K)" if r.kind == "gain" else "eig(A - L C)")
        print(f"    {what}: {', '.join(fmt_complex(p, digits=6) for p in r.poles)}")
        print(f"    gain size (largest singular value): {fmt_num(r.gain_norm, digits=6)}")
        extra = _by_products(r)
        if "riccati_P" in extra:
            print(f"    Riccati solution P = {_matrix_text(extra['riccati_P'])}")
            print(f"      cost-to-go from x0: J = x0' P x0 = int (x' Q x + u' R u) dt; trace(P) = {fmt_num(extra['cost_trace'], digits=6)} "
                  "(the expected cost from a random x0 with unit covariance)")
        if "error_covariance_P" in extra:
            print(f"    error covariance P = {_matrix_text(extra['error_covariance_P'])}")
            print(f"      steady-state RMS estimation error per state: {', '.join(fmt_num(v, digits=5) for v in extra['error_rms'])}")
        for w in r.warnings:
            print(f"    warning: {w}")
    if not args.write and results:
        print("\n  (printed only; run with --write to store these gains in the file)")
    print(f"\n  {CAUTION}")
    return 0


def _by_products(r) -> dict:
    """What the Riccati equation behind an LQR or Kalman design also tells the engineer.

    LQR: ``P`` of ``A'P + PA - (PB + N) R^-1 (B'P + N') + Q = 0``; the optimal cost from
    ``x0`` is ``x0' P x0`` (Anderson & Moore, Optimal Control: Linear Quadratic Methods,
    1990, from memory). Kalman filter: ``P = E[e e']`` in steady state, ``e = x - xhat``.
    """
    d = getattr(r, "design", None)
    P = getattr(d, "riccati", None) if d is not None else None
    if P is None:
        return {}
    P = np.asarray(P, dtype=float)
    if d.method in ("lqr", "dlqr") or (r.kind == "gain" and r.method != "feedforward"):
        return {"riccati_P": P, "cost_trace": float(np.trace(P)), "cost_note": "J(x0) = x0' P x0"}
    return {"error_covariance_P": P, "error_rms": np.sqrt(np.maximum(np.diag(P), 0.0))}


# ---------------------------------------------------------------------------------------
# export
# ---------------------------------------------------------------------------------------
def _split(text: str | None) -> list[str] | None:
    if text is None:
        return None
    names = [s.strip() for s in text.split(",") if s.strip()]
    return names or None


def _default_loop_signals(diagram: Diagram) -> tuple[list[str], list[str]]:
    """:func:`default_loop_signals`, its message pointing at the options that name the signals."""
    try:
        return default_loop_signals(diagram)
    except DesignError as err:
        raise DesignError(f"{err.message}: give --measured and --actuator") from None


def _export(args: argparse.Namespace) -> int:
    diagram = load_diagram(args.file)
    out_path = Path(args.output)
    fmt = args.format or {".json": "json", ".npz": "npz", ".c": "c", ".h": "c"}.get(out_path.suffix.lower(), "json")
    if args.what != "path" and (args.source or args.signal):
        raise DesignError("--from and --to belong to --what path")
    if args.what != "controller" and (args.measured or args.actuator or args.ts is not None or args.prewarp is not None):
        raise DesignError("--measured, --actuator, --ts and --prewarp belong to --what controller")
    if fmt == "c" and (args.what != "controller" or args.ts is None):
        raise DesignError("C output is for a discretised controller: use --what controller with --ts SECONDS")
    if args.prewarp is not None and args.method != "tustin":
        raise DesignError("--prewarp needs --method tustin")
    targets = list(c_output_paths(args.output)) if fmt == "c" else [args.output]
    for target in targets:
        # every file is checked before any is computed or written, so a refusal leaves nothing behind
        check_export_output(target, reading=[args.file])
    if fmt == "c":
        c_prefix_for(args.output, args.prefix)
    summary: dict = {"file": args.file, "what": args.what, "format": fmt}
    if args.what == "closed-loop":
        model = closed_loop_model(diagram, source=args.file, take=True)  # the diagram is this command's own
    elif args.what == "path":
        if not args.source or not args.signal:
            raise DesignError("--what path needs --from INPUT and --to SIGNAL")
        model = path_model(diagram, args.source, args.signal, source=args.file, take=True)
    else:
        measured, actuator = _split(args.measured), _split(args.actuator)
        if measured is None or actuator is None:
            dm, da = _default_loop_signals(diagram)
            measured, actuator = measured or dm, actuator or da
        cont = lumped_controller(diagram, measured=measured, actuator=actuator)
        model = controller_model(diagram, measured=measured, actuator=actuator, ts=args.ts, method=args.method,
                                 prewarp_rad_s=args.prewarp, source=args.file, lumped=cont)
        summary.update(measured=measured, actuator=actuator)
        if cont.B.shape[1] == 1 and cont.C.shape[0] == 1:
            tf = controller_transfer_function(cont)
            summary["transfer_function"] = {"num": tf["num"], "den": tf["den"], "poles": poles_to_json(tf["poles"]),
                                            "zeros": poles_to_json(tf["zeros"])}
        if args.ts is not None and len(actuator) == 1:
            # a vector actuator is compared loop at a time: one component broken, the others closed
            q = cont.C.shape[0]
            names = [actuator[0]] if q == 1 else [f"{actuator[0]}[{k + 1}]" for k in range(q)]
            try:
                compared = {}
                for ch, name in enumerate(names):
                    cmp_ = sampled_loop_margins(diagram, measured=measured, actuator=actuator[0], ts=args.ts,
                                                method=args.method, prewarp_rad_s=args.prewarp, channel=ch)
                    compared[name] = {"continuous": cmp_.continuous.as_dict(), "sampled": cmp_.sampled.as_dict(),
                                      "sampled_minus_continuous": cmp_.delta}
                if q == 1:
                    summary["margins"] = compared[names[0]]
                else:
                    summary["margins_by_channel"] = compared
            except EngineError as err:
                summary["margins_note"] = f"margins not compared: {err}"
    if fmt == "json":
        write_json(model, out_path)
        written = [str(out_path)]
    elif fmt == "npz":
        write_npz(model, out_path)
        written = [str(out_path)]
    else:
        write_c(model, args.output, precision=args.precision, prefix=args.prefix)
        written = [str(t) for t in targets]
    summary.update(
        written=written, states=len(model.state_names), inputs=list(model.input_names), outputs=list(model.output_names),
        time="continuous" if model.sample_period_s is None else "discrete", sample_period_s=model.sample_period_s,
        method=model.method, caution=CAUTION,
    )
    if args.json:
        print_json(summary)
        return 0
    print(f"wrote {', '.join(written)}")
    print(f"  {args.what}: {len(model.state_names)} states, {len(model.input_names)} inputs, {len(model.output_names)} outputs"
          + ("" if model.sample_period_s is None else f", sampled every {model.sample_period_s:g} s ({model.method})"))
    if "transfer_function" in summary:
        tf = summary["transfer_function"]
        print(f"  controller (as drawn, u = G(s) y): num {_vec(tf['num'])} / den {_vec(tf['den'])}")
    tables = {"": summary["margins"]} if "margins" in summary else summary.get("margins_by_channel", {})
    for channel, table in tables.items():
        c, s = table["continuous"], table["sampled"]
        where = f"at {channel} (other components closed)" if channel else "at the actuator"
        print(f"  margins {where:<20}  continuous      sampled")
        print(f"    phase margin (deg)      {fmt_num(c['phase_margin_deg']):>12}  {fmt_num(s['phase_margin_deg']):>12}")
        print(f"    delay margin (s)        {fmt_num(c['delay_margin_s']):>12}  {fmt_num(s['delay_margin_s']):>12}")
        print(f"    gain margin upper (dB)  {fmt_num(c['gain_margin_db'][1]):>12}  {fmt_num(s['gain_margin_db'][1]):>12}")
        print(f"    gain margin lower (dB)  {fmt_num(c['gain_margin_db'][0]):>12}  {fmt_num(s['gain_margin_db'][0]):>12}")
        print(f"    closed loop stable      {str(c['closed_loop_stable']):>12}  {str(s['closed_loop_stable']):>12}")
    if "margins_note" in summary:
        print(f"  {summary['margins_note']}")
    print(f"\n  {CAUTION}")
    return 0


def _vec(v) -> str:
    return "[" + ", ".join(fmt_num(x, digits=8) for x in np.atleast_1d(v)) + "]"


if __name__ == "__main__":  # pragma: no cover - for running the module directly
    from loopwright.engine.cli import main

    sys.exit(main(["design", *sys.argv[1:]]))
