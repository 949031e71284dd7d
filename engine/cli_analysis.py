"""Analysis commands of the headless CLI: ``freq``, ``time``, ``margins``, ``audit``, ``noise``.

Each handler loads the diagram, assembles it, computes, and prints an aligned table by
default, one JSON object with ``--json`` (always carrying ``"caution"``), or CSV with
``--csv``. Wrong names raise :class:`UnknownNameError` (with the nearest valid names),
which :func:`loopwright.engine.cli.main` turns into one line and exit status 2.
"""
from __future__ import annotations

import argparse
import math

import numpy as np

from loopwright.engine import CAUTION
from loopwright.engine.cli_common import fmt_num, load_diagram, print_json, write_csv
from loopwright.engine.cli_options import FREQUENCY_RANGE_RAD_S, SKEW_RANGE, TIME_RANGE_S, bounded_float, bounded_int
from loopwright.engine.errors import ParameterError
from loopwright.engine.interconnect import assemble
from loopwright.engine.path_text import PATH_TEXT_MAX, path_text
from loopwright.engine.views_data import MAX_POINTS

__all__ = ["add_commands"]

# --top beyond this is a slip of the keyboard.
_MAX_ROWS = 1_000_000
# An initial state stays far below the level at which a time run reports divergence
# (responses.DIVERGENCE_LIMIT, 1e100), leaving 50 decades for the transient itself.
_MAX_INITIAL = 1e50
_FREQ = bounded_float(*FREQUENCY_RANGE_RAD_S, unit="rad/s")
_FREQ_OR_DC = bounded_float(0.0, FREQUENCY_RANGE_RAD_S[1], unit="rad/s (0: a grid from DC)")
# a settling band is a fraction of the final value: 1e-6 is already beyond any sensor
_SETTLE = bounded_float(1e-6, 0.5)
_TIME = bounded_float(*TIME_RANGE_S, unit="s")


def add_commands(subparsers) -> None:
    """Add the analysis sub-commands to the ``loopwright`` parser."""
    p = subparsers.add_parser("freq", help="frequency response of one path (input -> signal)")
    p.add_argument("file", help="diagram file (.lwd)")
    p.add_argument("--from", dest="source", required=True, metavar="INPUT", help="a source name, or a signal name (its injection)")
    p.add_argument("--to", dest="signal", required=True, metavar="SIGNAL", help="signal name")
    p.add_argument("--w-min", type=_FREQ_OR_DC, default=None, help="lowest frequency, rad/s (0: the DC point, then a log grid)")
    p.add_argument("--w-max", type=_FREQ, default=None, help="highest frequency, rad/s")
    p.add_argument("--points", type=bounded_int(2, MAX_POINTS), default=None,
                   help="number of log-spaced frequencies (default: automatic grid)")
    p.add_argument("--w", dest="w_list", default=None, metavar="W[,W...]",
                   help="evaluate at exactly these frequencies, rad/s (0 is the DC point); overrides the grid options")
    _format_flags(p)
    _plot_flag(p)
    p.set_defaults(run=_freq)

    p = subparsers.add_parser("tf", help="transfer function of one path: order, poles, zeros, DC and high-frequency gain")
    p.add_argument("file", help="diagram file (.lwd)")
    p.add_argument("--from", dest="source", required=True, metavar="INPUT", help="a source name, or a signal name (its injection)")
    p.add_argument("--to", dest="signal", required=True, metavar="SIGNAL", help="signal name")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(run=_tf)

    p = subparsers.add_parser("time", help="step, impulse or source-driven time response")
    p.add_argument("file", help="diagram file (.lwd)")
    mode = p.add_mutually_exclusive_group()
    mode.add_argument("--step", metavar="INPUT", default=None, help="unit step on this input")
    mode.add_argument("--impulse", metavar="INPUT", default=None, help="unit impulse on this input")
    mode.add_argument("--run", dest="run_sources", action="store_true", help="drive the diagram with its sources' own waveforms (default)")
    mode.add_argument("--free", action="store_true", help="sources held at zero: the response to --initial alone")
    p.add_argument("--initial", action="append", default=[], metavar="BLOCK=V[,V...]",
                   help="initial state of one block's states (repeat per block); e.g. --initial P=0.001,0,0 "
                        "with the estimator left at zero shows the estimation-error transient")
    p.add_argument("--to", dest="signals", required=True, metavar="SIGNAL[,SIGNAL]", help="signals to report, comma-separated")
    p.add_argument("--metrics", action="store_true",
                   help="with --step: rise time (10-90 %%), settling time, overshoot, undershoot, peak, steady-state value")
    p.add_argument("--settle", type=_SETTLE, default=0.02, metavar="FRACTION", help="settling band for --metrics (default 0.02 = 2 %%)")
    p.add_argument("--t-end", type=_TIME, default=None, help="end time, s")
    p.add_argument("--dt", type=_TIME, default=None, help="time step, s")
    _format_flags(p)
    _plot_flag(p)
    p.set_defaults(run=_time)

    p = subparsers.add_parser("margins", help="gain, phase, delay and disk margins at a loop break")
    p.add_argument("file", help="diagram file (.lwd)")
    p.add_argument("--at", dest="signal", default=None, metavar="SIGNAL", help="signal where the loop is broken (default: the diagram's loop break)")
    p.add_argument("--skew", type=bounded_float(*SKEW_RANGE), default=0.0, help="disk-margin skew (0 balanced, 1 for [1/2, inf)-type guarantees)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    _plot_flag(p)
    p.set_defaults(run=_margins)

    p = subparsers.add_parser(
        "audit", help="rank every source-to-signal path (peak gain, H2, DC gain, stability)",
        epilog=f"The table shows a path of more than {PATH_TEXT_MAX} blocks by its first and last three blocks and the number "
               "left out between them ('... 1,994 more ...'); --json and --csv list every block and wire of every path.",
    )
    p.add_argument("file", help="diagram file (.lwd)")
    p.add_argument("--injections", action="store_true", help="also audit the injection on every signal")
    p.add_argument("--top", type=bounded_int(1, _MAX_ROWS), default=None, help="show only the first N rows")
    _format_flags(p)
    p.set_defaults(run=_audit)

    p = subparsers.add_parser("noise", help="noise budget: steady-state RMS of every signal, split by source")
    p.add_argument("file", help="diagram file (.lwd)")
    p.add_argument("--covariance", metavar="SIGNAL[,SIGNAL]", default=None,
                   help="also print the full steady-state covariance of these signals (JSON carries every vector signal's)")
    _format_flags(p)
    p.set_defaults(run=_noise)


def _format_flags(p) -> None:
    fmt = p.add_mutually_exclusive_group()
    fmt.add_argument("--json", action="store_true", help="print one JSON object")
    fmt.add_argument("--csv", action="store_true", help="print CSV")


def _plot_flag(p) -> None:
    p.add_argument("--plot", metavar="OUT.svg", default=None,
                   help="also draw the result to an SVG file (SVG only: no PNG without a window system); never replaces a diagram")


def _write_plot(args: argparse.Namespace, make_svg) -> None:
    """Check ``--plot`` first (nothing is computed for a refused name), then write it."""
    import sys

    from loopwright.engine.svg_plot import write_svg

    write_svg(args.plot, make_svg(), reading=[args.file])
    print(f"wrote {args.plot}", file=sys.stderr)


def _check_plot(args: argparse.Namespace) -> None:
    if getattr(args, "plot", None):
        from loopwright.engine.output_paths import OutputRefusedError, check_export_output, display_path

        check_export_output(args.plot, reading=[args.file])
        if not str(args.plot).lower().endswith(".svg"):
            raise OutputRefusedError(f"--plot {display_path(args.plot)}: plots are written as SVG only; name the file *.svg")


def _table(header: list[str], rows: list[list[str]], *, indent: str = "  ") -> None:
    """The header and rows, the first column left-aligned and the others right-aligned,
    printed at once (thousands of rows on a long chain)."""
    columns = list(zip(*rows)) if rows else [()] * len(header)
    widths = [max(len(h), max(map(len, col), default=0)) for h, col in zip(header, columns)]
    # one format per table, applied to each row in C (padding as ljust / rjust would)
    line = indent.replace("%", "%%") + "  ".join([f"%-{widths[0]}s"] + [f"%{w}s" for w in widths[1:]])
    n = len(header)
    every = [header, *rows] if all(len(r) == n for r in rows) else [header, *(r[:n] for r in rows)]
    print("\n".join([(line % tuple(r)).rstrip() for r in every]))


# ---------------------------------------------------------------------------------------
# freq


def _freq(args: argparse.Namespace) -> int:
    from loopwright.engine.norms import sigma_max
    from loopwright.engine.views_data import pair_frequency_response

    _check_plot(args)
    diagram = load_diagram(args.file)
    model = assemble(diagram, take=True)  # the diagram is this command's own
    w_list = _frequency_list(args.w_list) if args.w_list is not None else None
    resp = pair_frequency_response(model, args.source, args.signal, w_min=args.w_min, w_max=args.w_max,
                                   points=args.points, w=w_list)
    if args.plot:
        from loopwright.engine.svg_plot import frequency_figure

        _write_plot(args, lambda: frequency_figure(resp, title=f"{args.file}: frequency response {resp.input_group} -> {resp.signal}"))
    grp, sig, w, G = resp.input_group, resp.signal, resp.w_rad_s, resp.response
    mag = resp.mag_db
    ph = resp.phase_deg
    in_names, out_names = resp.input_names, resp.output_names
    elements = [(i, j, f"{out_names[i]} <- {in_names[j]}") for i in range(len(out_names)) for j in range(len(in_names))]
    scalar = len(elements) == 1
    if args.json:
        out = {
            "file": args.file,
            "from": grp,
            "to": sig,
            "w": w,
            "units": {"w": "rad/s", "mag_db": "dB", "phase_deg": "deg"},
            "mag_db": mag[:, 0, 0] if scalar else mag,
            "phase_deg": ph[:, 0, 0] if scalar else ph,
            "re": G.real[:, 0, 0] if scalar else G.real,
            "im": G.imag[:, 0, 0] if scalar else G.imag,
            "shape": "per frequency" if scalar else "per frequency [output][input]",
            "elements": [
                {"output": out_names[i], "input": in_names[j], "mag_db": mag[:, i, j], "phase_deg": ph[:, i, j]} for i, j, _ in elements
            ],
            "caution": CAUTION,
        }
        if not scalar:
            out["sigma_max_db"] = 20 * np.log10(np.maximum(sigma_max(G), 1e-300))
        print_json(out)
        return 0
    if args.csv:
        header = ["w_rad_s"]
        for _, _, label in elements:
            header += [f"mag_db[{label}]", f"phase_deg[{label}]"]
        rows = []
        for k in range(w.size):
            row = [float(w[k])]
            for i, j, _ in elements:
                row += [float(mag[k, i, j]), float(ph[k, i, j])]
            rows.append(row)
        write_csv(rows, header)
        return 0
    print(f"{args.file}: frequency response {grp} -> {sig} ({w.size} frequencies)")
    header = ["w (rad/s)"]
    for _, _, label in elements:
        header += [f"|G| dB {label}" if not scalar else "|G| (dB)", "phase (deg)"]
    step = max(1, w.size // 60)
    idx = sorted(set(range(0, w.size, step)) | {int(np.nanargmax(np.where(np.isfinite(mag[:, 0, 0]), mag[:, 0, 0], -np.inf)))})
    rows = []
    for k in idx:
        row = [fmt_num(w[k], digits=5)]
        for i, j, _ in elements:
            row += [fmt_num(mag[k, i, j], digits=5), fmt_num(ph[k, i, j], digits=5)]
        rows.append(row)
    _table(header, rows)
    if step > 1:
        print(f"  (every {step}th point shown, plus the peak; --csv or --json gives all)")
    print(f"\n  {CAUTION}")
    return 0


def _frequency_list(text: str) -> np.ndarray:
    """``--w 0,1,10`` -> the frequencies in rad/s (finite, >= 0, at most ``MAX_POINTS``)."""
    try:
        w = np.array([float(v) for v in text.split(",") if v.strip()], dtype=float)
    except ValueError as err:
        raise ParameterError(f"--w {text!r}: give frequencies in rad/s separated by commas, e.g. --w 0,1,10", field="--w") from err
    if w.size == 0 or w.size > MAX_POINTS or not np.all(np.isfinite(w)) or np.any(w < 0):
        raise ParameterError(f"--w {text!r}: give 1 to {MAX_POINTS} finite frequencies >= 0 rad/s", field="--w")
    return w


# ---------------------------------------------------------------------------------------
# tf


def _tf(args: argparse.Namespace) -> int:
    from loopwright.engine.cli_common import fmt_complex
    from loopwright.engine.path_tf import path_transfer

    diagram = load_diagram(args.file)
    model = assemble(diagram, take=True)  # the diagram is this command's own
    tf = path_transfer(model, args.source, args.signal)
    if args.json:
        print_json({"file": args.file, **tf.as_dict(), "caution": CAUTION})
        return 0
    print(f"{args.file}: transfer function {tf.source} -> {tf.signal}")
    print(f"  minimal order       {tf.order}")
    print(f"  poles               {', '.join(fmt_complex(p) for p in tf.poles) or 'none'}")
    zs = [fmt_complex(z) + ("  (RIGHT HALF-PLANE)" if np.any(tf.rhp_zeros == z) else "") for z in tf.zeros]
    print(f"  zeros               {', '.join(zs) or 'none'}")
    scalar = tf.num is not None
    print(f"  DC gain             {fmt_num(tf.dc_gain[0, 0]) if scalar else _matrix_line(tf.dc_gain)}")
    print(f"  high-frequency gain {fmt_num(tf.hf_gain[0, 0]) if scalar else _matrix_line(tf.hf_gain)}")
    if scalar:
        print(f"  num                 [{', '.join(fmt_num(v, digits=10) for v in tf.num)}]")
        print(f"  den                 [{', '.join(fmt_num(v, digits=10) for v in tf.den)}]  (descending powers of s)")
    if tf.rhp_zeros.size:
        print("  note: a right-half-plane zero makes the response start the wrong way and limits how fast the loop can act on this path")
    print(f"\n  {CAUTION}")
    return 0


def _matrix_line(M) -> str:
    return "[" + ", ".join("[" + ", ".join(fmt_num(v) for v in row) + "]" for row in np.atleast_2d(M)) + "]"


# ---------------------------------------------------------------------------------------
# time


def _initial_state(model, specs: list[str]):
    """``--initial BLOCK=V[,V...]`` options -> the model's initial state (None when none given)."""
    from loopwright.engine.responses import initial_state

    if not specs:
        return None
    values = {}
    for spec in specs:
        name, sep, text = spec.partition("=")
        if not sep or not name.strip():
            raise ParameterError(f"--initial {spec!r}: expected BLOCK=V[,V...]", field="--initial")
        try:
            values[name.strip()] = [float(v) for v in text.split(",") if v.strip()]
        except ValueError as err:
            raise ParameterError(f"--initial {spec!r}: the values must be numbers separated by commas", field="--initial") from err
        v = np.asarray(values[name.strip()])
        if not v.size or not np.all(np.isfinite(v)) or np.abs(v).max() > _MAX_INITIAL:
            raise ParameterError(f"--initial {spec!r}: give finite numbers from {-_MAX_INITIAL:g} to {_MAX_INITIAL:g}", field="--initial")
    return initial_state(model, values)


def _time(args: argparse.Namespace) -> int:
    from loopwright.engine.responses import impulse_response, source_run, step_response
    from loopwright.engine.views_data import time_grid

    _check_plot(args)
    diagram = load_diagram(args.file)
    model = assemble(diagram, take=True)  # the diagram is this command's own
    sigs = [model.resolve_signal(s.strip()) for s in args.signals.split(",") if s.strip()]
    if not sigs:
        raise ParameterError("--to needs at least one signal name", field="--to")
    t = time_grid(diagram, model, args.t_end, args.dt)
    rows = [i for s in sigs for i in range(model.signal_slice(s).start, model.signal_slice(s).stop)]
    out_names = [model.output_names[i] for i in rows]
    x0 = _initial_state(model, args.initial)
    metrics = None
    if x0 is not None and (args.step or args.impulse):
        raise ParameterError("--initial goes with --run or --free, not with --step or --impulse", field="--initial")
    if args.metrics and not args.step:
        raise ParameterError("--metrics goes with --step INPUT (the metrics are those of a unit step)", field="--metrics")
    if not (0.0 < args.settle < 1.0):
        raise ParameterError(f"--settle must be a fraction between 0 and 1 (0.02 is 2 %); got {args.settle}", field="--settle")
    if args.free:
        from loopwright.engine.responses import initial_response

        if x0 is None:
            raise ParameterError("--free needs at least one --initial BLOCK=V[,V...]", field="--free")
        res = initial_response(model.A, model.C[rows], x0, t)
        names, Y = out_names, res.y
        kind = "free response from the initial state"
    elif args.step or args.impulse:
        grp = model.resolve_input(args.step or args.impulse)
        cols = model.input_slice(grp)
        fn = step_response if args.step else impulse_response
        res = fn(model.A, model.B[:, cols], model.C[rows], model.D[np.ix_(rows, range(cols.start, cols.stop))], t)
        in_names = list(model.input_names[cols])
        if len(in_names) == 1:
            names = out_names
            Y = res.y[:, :, 0]
        else:
            names = [f"{o} <- {i}" for o in out_names for i in in_names]
            Y = res.y.reshape(res.y.shape[0], -1)
        kind = ("step" if args.step else "impulse") + f" on {grp}"
        if args.metrics:
            metrics = _step_metrics_for(model, cols, rows, names, Y, res.t, args.settle)
    else:
        res = source_run(model, t, outputs=sigs, x0=x0)
        names, Y = res.output_names, res.y
        kind = "run driven by the sources' waveforms" + (" from the initial state" if x0 is not None else "")
    if args.plot:
        from loopwright.engine.svg_plot import time_figure

        _write_plot(args, lambda: time_figure(res.t, Y, names, title=f"{args.file}: {kind}"))
    if args.json:
        extra = {} if metrics is None else {"metrics": {nm: m.as_dict() for nm, m in metrics.items()}, "metric_definitions": _metric_definitions()}
        print_json(
            {
                **extra,
                "file": args.file,
                "kind": kind,
                "t": res.t,
                "y": {nm: Y[:, k] for k, nm in enumerate(names)},
                "units": {"t": "s"},
                "diverged": res.diverged,
                "message": res.message,
                "caution": CAUTION,
            }
        )
        return 0
    if args.csv:
        write_csv(([float(res.t[k])] + [float(v) for v in Y[k]] for k in range(res.t.size)), ["t_s"] + names)
        return 0
    print(f"{args.file}: {kind}, t = 0 .. {fmt_num(res.t[-1])} s, dt = {fmt_num(t[1] - t[0])} s")
    step = max(1, res.t.size // 40)
    idx = list(range(0, res.t.size, step))
    if idx[-1] != res.t.size - 1:
        idx.append(res.t.size - 1)
    _table(["t (s)"] + names, [[fmt_num(res.t[k], digits=5)] + [fmt_num(v, digits=6) for v in Y[k]] for k in idx])
    if res.diverged:
        print(f"\n  WARNING: {res.message}")
    if metrics is not None:
        print(f"\n  step metrics (rise 10-90 %, settling band {100 * args.settle:g} %; definitions: 'time --json' or the README):")
        _table(
            ["signal", "steady state", "rise (s)", "settling (s)", "overshoot %", "undershoot %", "peak", "at (s)"],
            [
                [nm, fmt_num(m.steady_state), fmt_num(m.rise_time_s, digits=5),
                 fmt_num(m.settling_time_s, digits=5) if (m.settled or not m.steady_state or not np.isfinite(m.steady_state)) else "not settled", fmt_num(m.overshoot_pct, digits=5),
                 fmt_num(m.undershoot_pct, digits=5), fmt_num(m.peak, digits=6), fmt_num(m.peak_time_s, digits=5)]
                for nm, m in metrics.items()
            ],
            indent="    ",
        )
    print(f"\n  {CAUTION}")
    return 0


def _metric_definitions() -> dict:
    from loopwright.engine.step_metrics import DEFINITIONS

    return DEFINITIONS


def _step_metrics_for(model, cols, rows, names, Y, t, settle) -> dict:
    """Step metrics of every (output, input) column of a step run; the steady state is the
    path's exact DC gain (``nan`` for an unstable or integrating path)."""
    from loopwright.engine.norms import dc_gain, is_stable_matrix
    from loopwright.engine.step_metrics import step_metrics

    B = model.B[:, cols]
    D = model.D[np.ix_(rows, range(cols.start, cols.stop))]
    with np.errstate(all="ignore"):
        G0 = dc_gain(model.A, B, model.C[rows], D) if is_stable_matrix(model.A) else np.full(D.shape, np.nan)
    flat = G0.reshape(-1).astype(float)  # same order as the columns of Y: output-major, then input
    scale = max(float(np.nanmax(np.abs(Y))) if Y.size else 0.0, float(np.nanmax(np.abs(flat[np.isfinite(flat)]), initial=0.0)))
    flat = np.where(np.abs(flat) <= 1e-12 * scale, 0.0, flat)  # rounding of an exact zero: no metrics to give
    return {nm: step_metrics(t, Y[:, k], float(flat[k]) if np.isfinite(flat[k]) else np.nan, settle=settle) for k, nm in enumerate(names)}


# ---------------------------------------------------------------------------------------
# margins


def _margins(args: argparse.Namespace) -> int:
    from loopwright.engine.errors import AnalysisError
    from loopwright.engine.margins import LoopMargins, margins_at

    _check_plot(args)
    diagram = load_diagram(args.file)
    at = args.signal or diagram.settings.get("loop_break")
    if not at:
        raise AnalysisError("no loop break given: use --at SIGNAL (the diagram has no settings.loop_break)")
    if args.plot:
        from loopwright.engine.svg_plot import loop_break_figure
        from loopwright.engine.views_data import loop_break_view

        view = loop_break_view(diagram, at, skew=args.skew)
        res = view.margins
        _write_plot(args, lambda: loop_break_figure(view, title=f"{args.file}: loop broken at {at}"))
    else:
        res = margins_at(diagram, at, skew=args.skew)
    if args.json:
        body = res.as_dict()
        body.update({"file": args.file, "at": at, "caution": CAUTION})
        if not isinstance(res, LoopMargins):
            body["kind"] = "vector"
        print_json(body)
        return 0
    print(f"{args.file}: loop broken at {at!r}")
    if isinstance(res, LoopMargins):
        _print_scalar_margins(res, indent="  ")
    else:
        print(f"  closed loop      {'stable' if res.closed_loop_stable else 'UNSTABLE'}")
        for name, m in zip(res.channel_names, res.per_channel):
            print(f"\n  channel {name} (the other components closed):")
            _print_scalar_margins(m, indent="    ")
        d = res.all_at_once
        print("\n  all loops at once (unstructured disk, 1/||S + (skew-1)/2 I||inf):")
        print(f"    alpha {fmt_num(d.alpha)}, gain [{fmt_num(d.gain_lower)}, {fmt_num(d.gain_upper)}] "
              f"({fmt_num(d.gain_db[0], digits=4)} .. {fmt_num(d.gain_db[1], digits=4)} dB), phase +-{fmt_num(d.phase_deg, digits=5)} deg")
        print(f"    peak sensitivity {fmt_num(res.peak_sensitivity)} at {fmt_num(res.peak_sensitivity_w_rad_s)} rad/s")
    print(f"\n  {CAUTION}")
    return 0


def _print_scalar_margins(m, *, indent: str) -> None:
    lo_db, hi_db = m.gain_margin_db
    ol = m.open_loop_poles.phrase() if m.open_loop_poles is not None else f"{m.open_loop_unstable_poles} in the right half-plane"
    dm_at = f"at {fmt_num(m.delay_margin_w_rad_s)} rad/s" if np.isfinite(m.delay_margin_w_rad_s) else ""
    rows = [
        ["closed loop", "stable" if m.closed_loop_stable else "UNSTABLE", ""],
        ["open-loop poles", ol, ""],
        ["gain margin, lower", f"{fmt_num(m.gain_lower)} ({fmt_num(lo_db, digits=5)} dB)", f"at {fmt_num(m.gain_lower_w_rad_s)} rad/s"],
        ["gain margin, upper", f"{fmt_num(m.gain_upper)} ({fmt_num(hi_db, digits=5)} dB)", f"at {fmt_num(m.gain_upper_w_rad_s)} rad/s"],
        ["phase margin", f"{fmt_num(m.phase_margin_deg, digits=6)} deg", f"at {fmt_num(m.phase_margin_w_rad_s)} rad/s"],
        ["delay margin", f"{fmt_num(m.delay_margin_s)} s", dm_at],
        ["peak sensitivity", f"{fmt_num(m.peak_sensitivity)} (modulus margin {fmt_num(m.modulus_margin, digits=4)})", f"at {fmt_num(m.peak_sensitivity_w_rad_s)} rad/s"],
        [
            f"disk margin (skew {fmt_num(m.disk.skew, digits=3)})",
            f"alpha {fmt_num(m.disk.alpha)}: gain [{fmt_num(m.disk.gain_lower, digits=5)}, {fmt_num(m.disk.gain_upper, digits=5)}], phase +-{fmt_num(m.disk.phase_deg, digits=5)} deg",
            f"at {fmt_num(m.disk.w_rad_s)} rad/s",
        ],
    ]
    width = max(len(r[0]) for r in rows)
    for a, b, c in rows:
        print(f"{indent}{a.ljust(width)}  {b}  {c}".rstrip())
    _listing(
        f"{indent}gain crossovers (|L| = 1)",
        ["w (rad/s)", "phase margin (deg)", "delay margin (s)", ""],
        [
            [fmt_num(c.w_rad_s), fmt_num(c.phase_margin_deg, digits=6), fmt_num(c.delay_margin_s),
             _sets(c.sets_phase_margin and "phase margin", c.sets_delay_margin and "delay margin")]
            for c in m.crossovers
        ],
    )
    _listing(
        f"{indent}phase crossovers (L real and negative" + ("; the gain factor 1/|L| puts g L on -1)" if m.phase_crossings else ")"),
        ["w (rad/s)", "gain factor", "(dB)", ""],
        [
            [fmt_num(c.w_rad_s), fmt_num(c.gain_factor), fmt_num(c.gain_factor_db, digits=5),
             _sets(c.sets_lower and "lower gain margin", c.sets_upper and "upper gain margin")]
            for c in m.phase_crossings
        ],
    )
    if m.message:
        print(f"{indent}note: {m.message}")
    for note in m.notes:
        print(f"{indent}note: {note}")
    if m.limits is not None:
        for line in m.limits.lines():
            print(f"{indent}{line}")


def _listing(title: str, header: list[str], rows: list[list[str]]) -> None:
    """A titled table indented under its title, or ``title: none``."""
    if not rows:
        print(f"{title}: none")
        return
    print(f"{title}:")
    _table(header, rows, indent=" " * (len(title) - len(title.lstrip())) + "  ")


def _sets(*what) -> str:
    named = [w for w in what if w]
    return ("<- sets the " + " and the ".join(named)) if named else ""


# ---------------------------------------------------------------------------------------
# audit


class _Joined:
    """``join(names)`` (default ``" ".join``), once per list: rows of the path audit share
    their path lists (on a loop every row of a source lists the same ~n blocks), so the
    text is shared too."""

    def __init__(self, join=" ".join):
        self._join = join
        self._done: dict[int, tuple[list, str]] = {}

    def __call__(self, names: list[str]) -> str:
        hit = self._done.get(id(names))
        if hit is None or hit[0] is not names:
            hit = self._done[id(names)] = (names, self._join(names))  # the list is kept, so its id stays its own
        return hit[1]


def _memo_fmt():
    """:func:`fmt_num` remembering its answers by value; a zero is formatted each time, so
    -0.0 keeps its "-0" (it equals 0.0 as a key)."""
    done: dict[float, str] = {}

    def number(v) -> str:
        text = done.get(v)
        if text is None:
            v = float(v)
            if v == 0.0:
                return fmt_num(v)
            text = done[v] = fmt_num(v)
        return text

    return number


def _audit(args: argparse.Namespace) -> int:
    from loopwright.engine.audit import RANKING_RULE, path_audit

    diagram = load_diagram(args.file)
    model = assemble(diagram, take=True)  # the diagram is this command's own
    rows = path_audit(model, injections=args.injections)
    total = len(rows)
    if args.top is not None:
        rows = rows[: args.top]
    if args.json:
        print_json({"file": args.file, "ranking": RANKING_RULE, "units": {"peak_freq": "rad/s"}, "rows": [r.as_dict() for r in rows], "caution": CAUTION})
        return 0
    joined = _Joined()
    if args.csv:
        write_csv(
            (
                [r.rank, r.source, r.signal, r.peak_gain, r.peak_freq_rad_s, r.h2, r.dc_gain, r.dc_gain_kind, r.stable, joined(r.blocks), joined(r.wires)]
                for r in rows
            ),
            ["rank", "source", "signal", "peak_gain", "peak_freq_rad_s", "h2", "dc_gain", "dc_gain_kind", "stable", "blocks", "wires"],
        )
        return 0
    shown = f"top {len(rows)} of {total} paths" if len(rows) < total else f"{total} paths"
    print(f"{args.file}: path audit ({shown}; {RANKING_RULE})")
    number = _memo_fmt()  # a long chain repeats a few values thousands of times
    joined = _Joined(path_text)  # a long path by its ends: the table grows linearly with the diagram
    _table(
        ["#", "source", "signal", "peak gain", "at (rad/s)", "H2", "DC gain", "stable", "blocks on the path"],
        [
            [
                str(r.rank), r.source, r.signal, number(r.peak_gain), number(r.peak_freq_rad_s), number(r.h2),
                number(r.dc_gain) + ("*" if r.dc_gain_kind != "signed value" else ""),
                "yes" if r.stable else "NO", joined(r.blocks),
            ]
            for r in rows
        ],
    )
    print("\n  DC gain: signed value of a scalar path" + (
        "; * a vector path: the largest singular value of its DC gain matrix (its peak gain is the peak of the largest singular value)"
        if any(r.dc_gain_kind != "signed value" for r in rows) else ""))
    print(f"\n  {CAUTION}")
    return 0


# ---------------------------------------------------------------------------------------
# noise


def _noise(args: argparse.Namespace) -> int:
    from loopwright.engine.noise import noise_budget

    diagram = load_diagram(args.file)
    model = assemble(diagram, take=True)  # the diagram is this command's own
    b = noise_budget(model)
    srcs = list(b.sources)
    covs = _covariances(model, b, args.covariance)
    if args.json:
        body = b.as_dict()
        body.update({"file": args.file, "caution": CAUTION})
        if covs is not None:
            body["covariance"] = {k: v.as_dict() for k, v in covs.items()}
            body["covariance_note"] = "steady state E[z z^T] from A X + X A^T + sum B W B^T = 0; inf rows/columns: white components"
        print_json(body)
        return 0
    if args.csv:
        write_csv(
            ([ln.name, ln.signal, ln.rms] + [ln.share_by_source[s] for s in srcs] + [ln.reason] for ln in b.lines),
            ["component", "signal", "rms"] + [f"share[{s}]" for s in srcs] + ["reason"],
        )
        return 0
    print(f"{args.file}: noise budget (steady-state RMS; white sources: "
          + (", ".join(f"{s} (W = {fmt_num(float(np.trace(W)), digits=4)}{' trace' if W.shape[0] > 1 else ''})" for s, W in b.sources.items()) or "none")
          + ")")
    if b.message:
        print(f"  note: {b.message}")
    number = _memo_fmt()  # a long chain repeats a few values thousands of times
    _table(
        ["component", "RMS"] + [f"share {s}" for s in srcs] + [""],
        [
            [ln.name, number(ln.rms)] + [("-" if not math.isfinite(ln.share_by_source[s]) else f"{100 * ln.share_by_source[s]:.1f} %") for s in srcs]
            + [ln.reason]
            for ln in b.lines
        ],
    )
    if args.covariance and covs:
        for sig, cv in covs.items():
            print(f"\n  steady-state covariance of {sig} (E[z z^T]):")
            _table(["", *cv.components], [[c, *(fmt_num(v, digits=5) for v in row)] for c, row in zip(cv.components, cv.matrix)], indent="    ")
    print(f"\n  {CAUTION}")
    return 0


def _covariances(model, budget, wanted: str | None):
    """Covariances for ``--covariance`` (the named signals) or, by default, every vector signal;
    ``None`` when the budget has none to give (unstable loop or no white source)."""
    from loopwright.engine.noise_covariance import signal_covariances

    names = [x.strip() for x in wanted.split(",") if x.strip()] if wanted else None
    if not budget.sources or not budget.stable:
        if names:
            from loopwright.engine.errors import AnalysisError

            raise AnalysisError(f"no covariance: {budget.message or 'no white-noise source'}")
        return None
    return signal_covariances(model, names)
