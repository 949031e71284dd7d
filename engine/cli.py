"""``loopwright`` on the command line, headless: check, analyse, design and export a diagram.

Every command reads a project file and prints readable text, or JSON with ``--json``.
A user's mistake (bad file, wrong name) prints one line on stderr and exits with 2;
only a bug in Loopwright itself shows a traceback.
"""
from __future__ import annotations

import argparse
import importlib
import sys
import warnings

import numpy as np

from loopwright.engine import CAUTION, __version__
from loopwright.engine.check import pole_table, summarize
from loopwright.engine.cli_common import fmt_complex, fmt_num, load_diagram, print_json
from loopwright.engine.blas_threads import limit_blas_threads
from loopwright.engine.eigen import format_pole, trustworthy_digits
from loopwright.engine.cli_options import bounded_int
from loopwright.engine.errors import EngineError
from loopwright.engine.interconnect import assemble, collector_paused
from loopwright.engine.output_paths import check_export_output

__all__ = ["main", "build_parser", "COMMANDS", "one_line"]

# --top beyond this is a slip of the keyboard (no diagram has a million paths worth listing).
_MAX_ROWS = 1_000_000

# Command modules that add their own sub-commands (``add_commands(subparsers)``).
_COMMAND_MODULES = ("loopwright.engine.cli_analysis", "loopwright.engine.cli_design")


def one_line(text: str) -> str:
    """``text`` with every control character escaped (``\\n``, ``\\x1b``), so a block name or a
    path with a newline cannot split a message over several lines."""
    return "".join(ch if ch.isprintable() else repr(ch)[1:-1] for ch in str(text))


class _Parser(argparse.ArgumentParser):
    def error(self, message: str):  # one line and exit 2, like every other user error
        self.exit(2, one_line(f"{self.prog}: {message} (see '{self.prog} --help')") + "\n")


def _check(args: argparse.Namespace) -> int:
    diagram = load_diagram(args.file)
    rep = summarize(diagram, model=assemble(diagram, take=True))  # the diagram is this command's own
    sep = rep.separation
    if args.json:
        print_json(
            {
                "file": args.file,
                "states": rep.states,
                "state_names": list(rep.model.state_names),
                "poles": [[p.real, p.imag] for p in rep.poles],
                "pole_table": pole_table(rep.poles),
                "pole_bounds": list(rep.pole_bounds),
                "pole_source": rep.pole_source,
                "pole_source_text": rep.pole_source_text,
                "poles_trusted": rep.poles_trusted,
                "worst_condition": rep.worst_condition,
                "stable": rep.stable,
                "rhp_poles": rep.rhp_poles,
                "pole_classes": rep.pole_classes.as_dict(),
                "recipe_states": rep.recipe_states,
                "signals": list(rep.signals),
                "sources": list(rep.sources),
                "source_roles": rep.sources,
                "inputs": len(rep.model.input_names),
                "warnings": list(rep.warnings),
                "separation": None
                if sep is None
                else {
                    "expected": [[p.real, p.imag] for p in sep.expected],
                    "state_feedback_poles": [[p.real, p.imag] for p in sep.state_feedback_poles],
                    "estimator_poles": [[p.real, p.imag] for p in sep.estimator_poles],
                    "matches": sep.matches,
                    "max_relative_gap": sep.max_mismatch,
                    "verdict": sep.verdict,
                    "coupling": sep.coupling,
                    "decoupled": sep.decoupled,
                    "message": sep.message,
                    "pairs": [list(p) for p in sep.pairs],
                    "static_gains": {k: v for k, v in sep.gains.items()},
                },
                "caution": CAUTION,
            }
        )
        return 0
    title = diagram.meta.get("title")
    print(f"{args.file}" + (f"  ({title})" if title else ""))
    print(f"  states   {rep.states}")
    print(f"  signals  {len(rep.signals)}: {', '.join(rep.signals)}")
    print(f"  sources  {len(rep.sources)}: {', '.join(f'{k} ({v})' for k, v in rep.sources.items()) or 'none'}")
    print(f"  inputs   {len(rep.model.input_names)} (sources and an injection on every signal component)")
    print()
    print(f"  closed-loop poles ({rep.pole_source_text})")
    print("    pole                         damping   natural freq (rad/s)")
    for row, p, b in zip(pole_table(rep.poles), rep.poles, rep.pole_bounds):
        d = min(trustworthy_digits(p, b), 6)
        txt = format_pole(p, b)
        print(f"    {txt:<28} {fmt_num(row['damping'], digits=max(d, 1) if d < 4 else 4):>8}   {fmt_num(row['wn_rad_s'], digits=max(d, 1))}")
    print(f"\n  verdict  {check_verdict(rep)}")
    if sep is not None:
        print()
        for plant, est in sep.pairs:
            k = sep.gains.get(est)
            ktxt = f", static gain K = {fmt_matrix(k)}" if k is not None else ""
            print(f"  separation check: estimator {est!r} on plant {plant!r}{ktxt}")
        print(f"    state feedback  eig(A - B K): {', '.join(fmt_complex(p, digits=5) for p in sep.state_feedback_poles)}")
        print(f"    estimator       eig(A - L C): {', '.join(fmt_complex(p, digits=5) for p in sep.estimator_poles)}")
        if sep.decoupled:
            print(f"    closed loop = union of both: yes, by structure (the estimation error is not driven by the rest of the loop; "
                  f"poles of the assembled matrix differ by {sep.max_mismatch:.1e} relative)")
        else:
            answer = {"holds": "yes", "unconfirmed": "cannot be confirmed (ill-conditioned)", "not_separated": "NO"}[sep.verdict]
            print(f"    closed loop = union of both: {answer} (worst relative gap {sep.max_mismatch:.1e})")
    for w in rep.warnings:
        print(f"  warning: {w}")
    print(f"\n  {CAUTION}")
    return 0


def check_verdict(rep) -> str:
    """The stability verdict of a :class:`CheckReport`, naming where the offending poles lie."""
    classes = rep.pole_classes
    if rep.stable:
        return "stable (0 in the right half-plane, 0 on the imaginary axis)"
    if rep.rhp_poles:
        return f"UNSTABLE: {classes.phrase()}"
    return f"NOT asymptotically stable: {classes.phrase()}"


def _report(args: argparse.Namespace) -> int:
    from loopwright.engine.report import format_report, loop_report

    diagram = load_diagram(args.file)
    if args.html:
        from loopwright.engine.report_html import Picture, report_html, write_report_html

        check_export_output(args.html, reading=[args.file])  # refused before any work
        rep = loop_report(diagram, top=args.top, take=True)
        picture, how = None, "a block sketch drawn by the engine (the canvas renderer needs PySide6)"
        render = getattr(args, "diagram_renderer", None)
        if render is not None:
            svg = render(diagram)
            if svg:
                picture, how = Picture("The diagram as drawn on the canvas", svg=svg), "the canvas, rendered offscreen"
        write_report_html(args.html, report_html(diagram, origin=args.file, top=args.top, rep=rep, diagram_picture=picture),
                          reading=[args.file])
        print(f"wrote {args.html}  (diagram picture: {how})")
        print(f"\n{CAUTION}")
        return 0
    rep = loop_report(diagram, top=args.top, take=True)  # the diagram is this command's own
    if args.json:
        print_json({"file": args.file, **rep.as_dict()})
    else:
        print(format_report(rep, origin=args.file))
    return 0


def fmt_matrix(k) -> str:
    rows = ["[" + ", ".join(fmt_num(v, digits=5) for v in row) + "]" for row in k]
    return "[" + ", ".join(rows) + "]" if len(rows) > 1 else rows[0]


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="loopwright", description="Assemble, analyse and design observer-based control loops drawn as block diagrams.")
    parser.add_argument("--version", action="version", version=f"loopwright {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    p = sub.add_parser("check", help="assemble a diagram; print its states, poles, stability and the separation check")
    p.add_argument("file", help="diagram file (.lwd)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(run=_check)
    p = sub.add_parser("report", help="the first look at a loop: poles, separation, margins, noise budget, worst paths")
    p.add_argument("file", help="diagram file (.lwd)")
    p.add_argument("--top", type=bounded_int(1, _MAX_ROWS), default=5, help="how many paths of the audit to show (default 5)")
    out = p.add_mutually_exclusive_group()
    out.add_argument("--json", action="store_true", help="print one JSON object")
    out.add_argument("--html", metavar="OUT.html", default=None,
                     help="write the self-contained HTML report (pictures inline, no network) instead of printing")
    p.set_defaults(run=_report)
    for mod in _COMMAND_MODULES:
        try:
            module = importlib.import_module(mod)
        except ModuleNotFoundError as err:
            if err.name != mod:
                raise
            continue
        module.add_commands(sub)
    return parser


COMMANDS = ("check", "report", "freq", "tf", "time", "margins", "audit", "noise", "design", "export")


def main(argv: list[str] | None = None, *, diagram_renderer=None) -> int:
    """Run one command; returns the exit status (0 ok, 2 user error).

    ``diagram_renderer(diagram) -> str | None`` draws the diagram as SVG for
    ``report --html``; the launcher passes the canvas's renderer when Qt is installed.
    """
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as stop:  # a bad option (one line already printed), --help or --version
        return stop.code if isinstance(stop.code, int) else 2
    args.diagram_renderer = diagram_renderer
    if not getattr(args, "run", None):
        parser.print_help()
        return 2
    limit_blas_threads(1)  # see engine/blas_threads.py: busy cores make OpenBLAS's teams wait
    # Overflow inside numpy is not news for the user: the engine's guards name the bad
    # number, and a result that is not finite is reported as such; a warning printed in
    # the middle of the output would only add lines.
    with np.errstate(all="ignore"), warnings.catch_warnings(), collector_paused():
        warnings.simplefilter("ignore", RuntimeWarning)
        try:
            return int(args.run(args) or 0)
        except EngineError as err:
            print(one_line(f"loopwright {args.command}: {err}"), file=sys.stderr)
            return 2
        except (np.linalg.LinAlgError, ValueError, OverflowError, FloatingPointError) as err:
            # the safety net behind the scaling guard (engine/scaling.py): a numerical
            # breakdown that slipped past it is one line, not a traceback
            if not _numerical_breakdown(err):
                raise
            print(one_line(f"loopwright {args.command}: the computation broke down numerically "
                           f"({type(err).__name__}: {err}); the model is probably badly scaled or nearly singular: "
                           "check the magnitudes of its numbers"), file=sys.stderr)
            return 2
        except BrokenPipeError:
            return 0


def _numerical_breakdown(err: Exception) -> bool:
    """True for LAPACK failures and for errors about infinities or NaN met in the numerics."""
    if isinstance(err, (np.linalg.LinAlgError, FloatingPointError)):
        return True
    text = str(err).lower()
    return any(word in text for word in ("inf", "nan", "overflow", "did not converge"))


if __name__ == "__main__":
    sys.exit(main())
