"""The report: one self-contained HTML document of a diagram's analysis and design.

Built from the same engine calls as the text report (:func:`loopwright.engine.report.loop_report`)
plus the design state (recipes, gains, stale list) and pictures. Everything is inline:
pictures are SVG markup or PNG data URIs, the style sheet sits in the head, there are no
scripts and no links out, so the file opens on a machine without network.

Every number the report shows sits in an element with ``class="num"`` and a ``data-key``
naming the engine quantity it came from (e.g. ``pole.3.re``, ``margin.phase_margin_deg``),
so a reader (or a test) can parse them back and compare.

Pictures: the diagram as drawn needs the canvas (Qt), which the engine never imports. A
caller with Qt passes the canvas's SVG as ``diagram_picture``; without one the report
draws a plain block sketch from the blocks' saved positions and says so. The plots (the
views) are drawn by the small SVG writer of this module unless the caller passes the
pictures of the views open in the app.
"""
from __future__ import annotations

import base64
import html
import math
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from loopwright.engine import CAUTION, __version__
from loopwright.engine.check import pole_table
from loopwright.engine.cli_common import fmt_num
from loopwright.engine.diagram import Diagram
from loopwright.engine.errors import EngineError
from loopwright.engine.margins import LoopMargins, VectorLoopMargins
from loopwright.engine.output_paths import check_export_output, display_path
from loopwright.engine.recipes import recipe_blocks, recipe_plant, stale_blocks
from loopwright.engine.report import LoopReport, loop_report

__all__ = [
    "SECTIONS",
    "Picture",
    "standard_views",
    "block_sketch_svg",
    "report_html",
    "write_report_html",
    "svg_line_plot",
]

#: Section ids in the order they appear (``<section id="...">``).
SECTIONS = ("diagram", "model", "margins", "audit", "noise", "views", "design", "stale", "caution")

_DIGITS = 5  # significant digits of every number shown


@dataclass(frozen=True)
class Picture:
    """One inline picture: SVG markup or PNG bytes, with a title and an optional note."""

    title: str
    svg: str | None = None
    png: bytes | None = None
    note: str = ""


# ---------------------------------------------------------------------------------------
# a minimal SVG plot writer (lines and markers on linear or log axes)
# ---------------------------------------------------------------------------------------
def _ticks(lo: float, hi: float, *, log: bool) -> list[float]:
    if log:
        return [10.0**k for k in range(math.floor(lo), math.ceil(hi) + 1) if lo - 1e-9 <= k <= hi + 1e-9]
    span = hi - lo
    step = 10 ** math.floor(math.log10(span / 5)) if span > 0 else 1.0
    for m in (1, 2, 5, 10):
        if span / (step * m) <= 7:
            step *= m
            break
    first = math.ceil(lo / step) * step
    return [first + k * step for k in range(int((hi - first) / step + 1e-9) + 1)]


def _marker(kind: str, x: float, y: float, colour: str) -> str:
    r = 4.5
    if kind == "x":
        return (f'<path d="M{x - r:.1f},{y - r:.1f}L{x + r:.1f},{y + r:.1f}M{x - r:.1f},{y + r:.1f}L{x + r:.1f},{y - r:.1f}" '
                f'stroke="{colour}" stroke-width="2" fill="none"/>')
    if kind == "s":
        return f'<rect x="{x - r:.1f}" y="{y - r:.1f}" width="{2 * r:.1f}" height="{2 * r:.1f}" stroke="{colour}" fill="none" stroke-width="1.5"/>'
    return f'<circle cx="{x:.1f}" cy="{y:.1f}" r="{r:.1f}" stroke="{colour}" fill="none" stroke-width="1.5"/>'


def svg_line_plot(series, *, x_label: str, y_label: str, title: str = "", log_x: bool = False,
                  width: int = 560, height: int = 300, marks=()) -> str:
    """An SVG plot of curves and marker sets.

    Parameters
    ----------
    series : list of dict
        Each ``{"x": (k,), "y": (k,), "colour": "#rrggbb", "label": str}`` and optionally
        ``"marker": "x" | "o" | "s"`` (markers instead of a line) or ``"dash": True``.
        Non-finite points break a line.
    x_label, y_label, title : str
    log_x : bool
        Logarithmic x axis (x must be positive).
    marks : list of (x, y, text)
        Labelled points (e.g. the critical point -1).

    Returns
    -------
    str
        ``<svg ...>...</svg>`` markup.
    """
    left, right, top, bottom = 64, 14, 26 if title else 12, 44
    pw, ph = width - left - right, height - top - bottom
    xs, ys = [], []
    for s in series:
        x, y = np.asarray(s["x"], float), np.asarray(s["y"], float)
        ok = np.isfinite(x) & np.isfinite(y) & ((x > 0) if log_x else True)
        xs.append(np.log10(x[ok]) if log_x else x[ok])
        ys.append(y[ok])
    for mx, my, _t in marks:
        xs.append(np.array([math.log10(mx) if log_x else mx]))
        ys.append(np.array([my]))
    allx = np.concatenate(xs) if xs else np.zeros(0)
    ally = np.concatenate(ys) if ys else np.zeros(0)
    if allx.size == 0:
        allx, ally = np.array([0.0, 1.0]), np.array([0.0, 1.0])
    x0, x1 = float(allx.min()), float(allx.max())
    y0, y1 = float(ally.min()), float(ally.max())
    if x1 - x0 <= 0:
        x0, x1 = x0 - 1, x1 + 1
    if y1 - y0 <= 0:
        y0, y1 = y0 - 1, y1 + 1
    # markers need room at the edges, and the legend sits in the top right corner
    pad = (0.18 if any(s.get("marker") for s in series) else 0.05) * (y1 - y0)
    y0, y1 = y0 - pad, y1 + pad
    if not log_x:
        padx = (0.08 if any(s.get("marker") for s in series) else 0.05) * (x1 - x0)
        x0, x1 = x0 - padx, x1 + padx

    def px(v):
        return left + (v - x0) / (x1 - x0) * pw

    def py(v):
        return top + (y1 - v) / (y1 - y0) * ph

    out = [f'<svg xmlns="http://www.w3.org/2000/svg" width="{width}" height="{height}" viewBox="0 0 {width} {height}" '
           'font-family="sans-serif" font-size="11">', f'<rect width="{width}" height="{height}" fill="#ffffff"/>']
    if title:
        out.append(f'<text x="{left}" y="16" font-size="12" font-weight="bold">{html.escape(title)}</text>')
    out.append(f'<rect x="{left}" y="{top}" width="{pw}" height="{ph}" fill="none" stroke="#5b6573"/>')
    for t in _ticks(x0, x1, log=log_x):
        v = math.log10(t) if log_x else t
        if not x0 <= v <= x1:
            continue
        X = px(v)
        out.append(f'<line x1="{X:.1f}" y1="{top}" x2="{X:.1f}" y2="{top + ph}" stroke="#dde2e8"/>')
        out.append(f'<text x="{X:.1f}" y="{top + ph + 14}" text-anchor="middle">{t:g}</text>')
    for t in _ticks(y0, y1, log=False):
        Y = py(t)
        out.append(f'<line x1="{left}" y1="{Y:.1f}" x2="{left + pw}" y2="{Y:.1f}" stroke="#dde2e8"/>')
        out.append(f'<text x="{left - 4}" y="{Y + 4:.1f}" text-anchor="end">{t:.4g}</text>')
    out.append(f'<text x="{left + pw / 2:.1f}" y="{height - 6}" text-anchor="middle">{html.escape(x_label)}</text>')
    out.append(f'<text transform="translate(14,{top + ph / 2:.1f}) rotate(-90)" text-anchor="middle">{html.escape(y_label)}</text>')
    legend_y = top + 14
    for s, x, y in zip(series, xs, ys):
        colour = s.get("colour", "#2f7fd0")
        if s.get("marker"):
            out.extend(_marker(s["marker"], px(a), py(b), colour) for a, b in zip(x, y))
        elif x.size:
            d = "M" + "L".join(f"{px(a):.1f},{py(b):.1f}" for a, b in zip(x, y))
            dash = ' stroke-dasharray="5,3"' if s.get("dash") else ""
            out.append(f'<path d="{d}" stroke="{colour}" stroke-width="1.6" fill="none"{dash}/>')
        if s.get("label"):
            out.append(f'<text x="{left + pw - 6}" y="{legend_y}" text-anchor="end" fill="{colour}">{html.escape(s["label"])}</text>')
            legend_y += 14
    for (mx, my, text), x, y in zip(marks, xs[len(series):], ys[len(series):]):
        X, Y = px(float(x[0])), py(float(y[0]))
        out.append(f'<path d="M{X - 5:.1f},{Y:.1f}L{X + 5:.1f},{Y:.1f}M{X:.1f},{Y - 5:.1f}L{X:.1f},{Y + 5:.1f}" stroke="#c0392b" stroke-width="2"/>')
        out.append(f'<text x="{X + 6:.1f}" y="{Y - 6:.1f}" fill="#c0392b">{html.escape(text)}</text>')
    out.append("</svg>")
    return "".join(out)


# ---------------------------------------------------------------------------------------
# pictures the engine can draw
# ---------------------------------------------------------------------------------------
def block_sketch_svg(diagram: Diagram) -> str:
    """A plain sketch of the diagram: one box per block at its saved position, straight
    lines for the wires. Used when the canvas (Qt) is not available to draw it as drawn."""
    pos = {}
    for b in diagram.blocks.values():
        lay = b.layout or {}
        pos[b.id] = (float(lay.get("x", 0.0)), float(lay.get("y", 0.0)))
    if not pos:
        return '<svg xmlns="http://www.w3.org/2000/svg" width="200" height="40"><text x="8" y="24">(no blocks)</text></svg>'
    bw, bh, margin = 84.0, 40.0, 30.0
    xs = [p[0] for p in pos.values()]
    ys = [p[1] for p in pos.values()]
    ox, oy = min(xs) - bw / 2 - margin, min(ys) - bh / 2 - margin
    width = max(xs) - min(xs) + bw + 2 * margin
    height = max(ys) - min(ys) + bh + 2 * margin
    out = [f'<svg xmlns="http://www.w3.org/2000/svg" width="{width:.0f}" height="{height:.0f}" viewBox="0 0 {width:.0f} {height:.0f}" '
           'font-family="sans-serif" font-size="11">', f'<rect width="{width:.0f}" height="{height:.0f}" fill="#ffffff"/>']
    for w in diagram.wires.values():
        if w.source.block not in pos:
            continue
        sx, sy = pos[w.source.block]
        for t in w.targets:
            if t.block not in pos:
                continue
            tx, ty = pos[t.block]
            out.append(f'<line x1="{sx - ox:.1f}" y1="{sy - oy:.1f}" x2="{tx - ox:.1f}" y2="{ty - oy:.1f}" stroke="#5b6573" stroke-width="1.2"/>')
        mx, my = pos[w.source.block]
        out.append(f'<text x="{mx - ox + bw / 2 + 2:.1f}" y="{my - oy - 4:.1f}" fill="#5b6573">{html.escape(w.name)}</text>')
    for b in diagram.blocks.values():
        x, y = pos[b.id]
        out.append(f'<rect x="{x - ox - bw / 2:.1f}" y="{y - oy - bh / 2:.1f}" width="{bw:.0f}" height="{bh:.0f}" rx="4" '
                   'fill="#f4f6f8" stroke="#1f2933"/>')
        out.append(f'<text x="{x - ox:.1f}" y="{y - oy - 2:.1f}" text-anchor="middle" font-weight="bold">{html.escape(b.name)}</text>')
        out.append(f'<text x="{x - ox:.1f}" y="{y - oy + 12:.1f}" text-anchor="middle" fill="#5b6573">{html.escape(b.kind)}</text>')
    out.append("</svg>")
    return "".join(out)


def _worst_pair(rep: LoopReport) -> tuple[str, str] | None:
    for r in rep.audit:
        if r.stable and np.isfinite(r.peak_gain):
            return r.source, r.signal
    return (rep.audit[0].source, rep.audit[0].signal) if rep.audit else None


def standard_views(diagram: Diagram, rep: LoopReport | None = None) -> list[Picture]:
    """The views a headless report shows: the frequency view of the worst path, the pole
    map and the loop-break view (each replaced by a note when it cannot be drawn)."""
    from loopwright.engine.views_data import loop_break_view, pair_frequency_response

    rep = rep if rep is not None else loop_report(diagram)
    out: list[Picture] = []
    pair = _worst_pair(rep)
    if pair is not None:
        try:
            resp = pair_frequency_response(rep.check.model, *pair)
            mag = resp.mag_db[:, 0, 0]
            out.append(Picture(f"Frequency view: {pair[0]} → {pair[1]} (worst path of the audit)", svg=svg_line_plot(
                [{"x": resp.w_rad_s, "y": mag, "colour": "#2f7fd0", "label": f"|{resp.output_names[0]} / {resp.input_names[0]}|"}],
                x_label="frequency (rad/s)", y_label="magnitude (dB)", log_x=True)))
        except EngineError as err:
            out.append(Picture("Frequency view", note=str(err)))
    chk = rep.check
    series = [{"x": chk.poles.real, "y": chk.poles.imag, "colour": "#c0392b", "marker": "x", "label": "closed loop"}]
    if chk.separation is not None:
        fb, est = chk.separation.state_feedback_poles, chk.separation.estimator_poles
        series.append({"x": fb.real, "y": fb.imag, "colour": "#2f7fd0", "marker": "o", "label": "designed eig(A − BK)"})
        series.append({"x": est.real, "y": est.imag, "colour": "#2aa05a", "marker": "s", "label": "designed eig(A − LC)"})
    out.append(Picture("Pole map", svg=svg_line_plot(series, x_label="real (1/s)", y_label="imaginary (rad/s)")))
    if rep.loop_break:
        try:
            lb = loop_break_view(diagram, rep.loop_break)
            curves = [{"x": c.real, "y": c.imag, "colour": "#2f7fd0", "label": f"L(jω) at {name}"} for name, c in zip(lb.channel_names, lb.curves)]
            curves += [{"x": c.real, "y": -c.imag, "colour": "#2f7fd0", "dash": True} for c in lb.curves]
            for centre, radius in lb.circles:
                if np.isfinite(centre) and np.isfinite(radius):
                    th = np.linspace(0, 2 * np.pi, 121)
                    curves.append({"x": centre + radius * np.cos(th), "y": radius * np.sin(th), "colour": "#e0662b",
                                   "label": "disk-margin exclusion"})
            # the loop gain can reach far; keep the part near -1 readable
            clipped = [{**c, "x": np.where(np.abs(c["x"] + 1j * c["y"]) < 6, c["x"], np.nan)} for c in curves]
            out.append(Picture(f"Loop-break view at {rep.loop_break} (Nyquist, |L| < 6 shown)", svg=svg_line_plot(
                clipped, x_label="real", y_label="imaginary", marks=[(-1.0, 0.0, "−1")])))
        except EngineError as err:
            out.append(Picture("Loop-break view", note=str(err)))
    else:
        out.append(Picture("Loop-break view", note="no loop break is set"))
    return out


# ---------------------------------------------------------------------------------------
# the document
# ---------------------------------------------------------------------------------------
_STYLE = """
body{font-family:sans-serif;color:#1f2933;max-width:1100px;margin:1.5em auto;padding:0 1em;line-height:1.4}
h1{font-size:1.5em;margin-bottom:.2em} h2{font-size:1.2em;border-bottom:1px solid #cbd2d9;margin-top:1.6em}
table{border-collapse:collapse;margin:.5em 0} td,th{border:1px solid #cbd2d9;padding:2px 8px;text-align:left}
td.num{text-align:right;font-family:monospace} .caution{border:2px solid #c0392b;padding:.6em;background:#fff4f2}
.note{color:#5b6573} figure{display:inline-block;margin:.5em 1em .5em 0;vertical-align:top} figcaption{font-size:.9em;color:#5b6573}
.warn{color:#a04000} .stale{color:#c0392b;font-weight:bold}
"""


class _Html:
    def __init__(self):
        self.parts: list[str] = []

    def add(self, text: str) -> None:
        self.parts.append(text)

    def text(self, tag: str, text: str, cls: str = "") -> None:
        c = f' class="{cls}"' if cls else ""
        self.parts.append(f"<{tag}{c}>{html.escape(text)}</{tag}>")

    def table(self, header: list[str], rows: list[list]) -> None:
        self.add("<table><tr>" + "".join(f"<th>{html.escape(h)}</th>" for h in header) + "</tr>")
        for row in rows:
            self.add("<tr>" + "".join(_cell(c) for c in row) + "</tr>")
        self.add("</table>")


def _num(value, key: str) -> tuple:
    """A numeric cell: ``(value, key)``; the key names the engine quantity it shows."""
    return ("num", float(value), key)


def _cell(c) -> str:
    if isinstance(c, tuple) and c and c[0] == "num":
        _, v, key = c
        return f'<td class="num" data-key="{html.escape(key)}">{html.escape(fmt_num(v, digits=_DIGITS))}</td>'
    return f"<td>{html.escape(str(c))}</td>"


def _picture_html(p: Picture) -> str:
    title = html.escape(p.title)
    if p.svg:
        body = p.svg
        if body.lstrip().startswith("<?xml"):
            body = body[body.index("?>") + 2:]
    elif p.png:
        body = f'<img alt="{title}" src="data:image/png;base64,{base64.b64encode(p.png).decode("ascii")}"/>'
    else:
        body = ""
    note = f'<p class="note">{html.escape(p.note)}</p>' if p.note else ""
    return f"<figure>{body}<figcaption>{title}</figcaption>{note}</figure>"


def _margin_rows(m: LoopMargins, prefix: str) -> list[list]:
    lo_db, hi_db = m.gain_margin_db
    return [
        ["closed loop stable", "yes" if m.closed_loop_stable else "NO"],
        ["gain margin, lower factor", _num(m.gain_lower, f"{prefix}gain_lower")],
        ["gain margin, upper factor", _num(m.gain_upper, f"{prefix}gain_upper")],
        ["gain margin, lower (dB)", _num(lo_db, f"{prefix}gain_lower_db")],
        ["gain margin, upper (dB)", _num(hi_db, f"{prefix}gain_upper_db")],
        ["phase margin (deg)", _num(m.phase_margin_deg, f"{prefix}phase_margin_deg")],
        ["phase margin at (rad/s)", _num(m.phase_margin_w_rad_s, f"{prefix}phase_margin_w_rad_s")],
        ["delay margin (s)", _num(m.delay_margin_s, f"{prefix}delay_margin_s")],
        ["peak |S|", _num(m.peak_sensitivity, f"{prefix}peak_sensitivity")],
        ["peak |S| at (rad/s)", _num(m.peak_sensitivity_w_rad_s, f"{prefix}peak_sensitivity_w_rad_s")],
        ["disk margin alpha", _num(m.disk.alpha, f"{prefix}disk_alpha")],
        ["disk margin phase (± deg)", _num(m.disk.phase_deg, f"{prefix}disk_phase_deg")],
    ]


def _matrix_table(h: _Html, M, key: str) -> None:
    M = np.atleast_2d(np.asarray(M, dtype=float))
    h.add("<table>")
    for i, row in enumerate(M):
        h.add("<tr>" + "".join(_cell(_num(v, f"{key}.{i}.{j}")) for j, v in enumerate(row)) + "</tr>")
    h.add("</table>")


def _recipe_inputs(rec: dict) -> str:
    shown = {k: v for k, v in rec.items() if k not in ("method", "plant", "designed_for")}
    if not shown:
        return "(defaults)"
    import json

    return "; ".join(f"{k} = {json.dumps(v)}" for k, v in shown.items())


def report_html(diagram: Diagram, *, origin: str = "", top: int = 5, rep: LoopReport | None = None,
                diagram_picture: Picture | None = None, views: list[Picture] | None = None) -> str:
    """The report as one HTML string.

    Parameters
    ----------
    diagram : Diagram
    origin : str
        Where the diagram came from (shown under the title).
    top : int
        Audit rows shown.
    rep : LoopReport, optional
        ``loop_report(diagram, top=top)`` if already at hand.
    diagram_picture : Picture, optional
        The diagram as drawn on the canvas; without it a block sketch is drawn.
    views : list of Picture, optional
        Pictures of the views open in the app; without them :func:`standard_views`.

    Raises
    ------
    EngineError
        The diagram does not assemble.
    """
    rep = rep if rep is not None else loop_report(diagram, top=top)
    chk = rep.check
    h = _Html()
    title = rep.title or origin or "untitled diagram"
    h.add(f'<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8"><title>Loopwright report: {html.escape(title)}</title>'
          f"<style>{_STYLE}</style></head><body>")
    h.text("h1", f"Loopwright report: {title}")
    sub = " · ".join(x for x in (origin, f"Loopwright {__version__}") if x)
    h.text("p", sub, "note")
    if rep.description:
        h.text("p", rep.description)
    h.add(f'<p class="caution">{html.escape(CAUTION)}</p>')

    h.add('<section id="diagram">')
    h.text("h2", "Diagram")
    if diagram_picture is None:
        diagram_picture = Picture("Block sketch from the saved positions (the canvas renderer was not available)",
                                  svg=block_sketch_svg(diagram), note="Drawn by the engine without Qt: boxes and straight wires only.")
    h.add(_picture_html(diagram_picture))
    h.add("</section>")

    h.add('<section id="model">')
    h.text("h2", "Assembled model")
    h.table(["states", "signals", "sources", "inputs (sources and injections)"],
            [[_num(chk.states, "model.states"), _num(len(chk.signals), "model.signals"), _num(len(chk.sources), "model.sources"),
              _num(len(chk.model.input_names), "model.inputs")]])
    verdict = "stable" if chk.stable else f"NOT stable ({chk.rhp_poles} right-half-plane poles)"
    h.text("p", f"Verdict: {verdict}.", "" if chk.stable else "stale")
    h.text("h3", "Closed-loop poles")
    rows = []
    for k, (p, row) in enumerate(zip(chk.poles, pole_table(chk.poles))):
        rows.append([_num(p.real, f"pole.{k}.re"), _num(p.imag, f"pole.{k}.im"), _num(row["damping"], f"pole.{k}.damping"),
                     _num(row["wn_rad_s"], f"pole.{k}.wn_rad_s")])
    h.table(["real (1/s)", "imaginary (rad/s)", "damping", "natural frequency (rad/s)"], rows)
    sep = chk.separation
    h.text("h3", "Separation check")
    if sep is None:
        h.text("p", "No estimator with a linked plant: no separation check.", "note")
    else:
        h.text("p", "The closed-loop poles " + ("equal" if sep.matches else "DIFFER from")
               + " eig(A − B K) together with eig(A − L C) for " + ", ".join(f"estimator {e} on plant {p}" for p, e in sep.pairs) + ".")
        h.table(["", "worst relative gap"], [["closed loop vs. union", _num(sep.max_mismatch, "separation.max_mismatch")]])
        rows = [["eig(A − B K)", _num(p.real, f"separation.feedback.{k}.re"), _num(p.imag, f"separation.feedback.{k}.im")]
                for k, p in enumerate(sep.state_feedback_poles)]
        rows += [["eig(A − L C)", _num(p.real, f"separation.estimator.{k}.re"), _num(p.imag, f"separation.estimator.{k}.im")]
                 for k, p in enumerate(sep.estimator_poles)]
        h.table(["designed set", "real (1/s)", "imaginary (rad/s)"], rows)
    for w in chk.warnings:
        h.text("p", f"warning: {w}", "warn")
    h.add("</section>")

    h.add('<section id="margins">')
    h.text("h2", f"Margins at the loop break {rep.loop_break}" if rep.loop_break else "Margins")
    if isinstance(rep.margins, VectorLoopMargins):
        for name, m in zip(rep.margins.channel_names, rep.margins.per_channel):
            h.text("h3", f"channel {name} (other channels closed)")
            h.table(["quantity", "value"], _margin_rows(m, f"margin.{name}."))
        d = rep.margins.all_at_once
        h.text("h3", "all loops at once")
        h.table(["quantity", "value"], [["disk margin alpha", _num(d.alpha, "margin.all.disk_alpha")],
                                        ["disk margin phase (± deg)", _num(d.phase_deg, "margin.all.disk_phase_deg")]])
    elif isinstance(rep.margins, LoopMargins):
        h.table(["quantity", "value"], _margin_rows(rep.margins, "margin."))
        if rep.margins.message:
            h.text("p", rep.margins.message, "note")
    else:
        h.text("p", f"Not computed: {rep.margins_error}" if rep.margins_error else "No loop break is set (settings.loop_break).", "note")
    h.add("</section>")

    h.add('<section id="audit">')
    h.text("h2", f"Path audit: top {len(rep.audit)} of {rep.audit_total} paths (unstable first, then by peak gain)")
    rows = []
    for k, r in enumerate(rep.audit):
        rows.append([r.source, r.signal, _num(r.peak_gain, f"audit.{k}.peak_gain"), _num(r.peak_freq_rad_s, f"audit.{k}.peak_freq_rad_s"),
                     _num(r.h2, f"audit.{k}.h2"), _num(r.dc_gain, f"audit.{k}.dc_gain"), "yes" if r.stable else "NO", " → ".join(r.blocks)])
    h.table(["source", "signal", "peak gain", "at (rad/s)", "H2 norm", "DC gain", "stable", "blocks passed"], rows)
    h.add("</section>")

    h.add('<section id="noise">')
    h.text("h2", "Noise budget (steady-state RMS)")
    if rep.noise is None:
        h.text("p", "No source states a white-noise intensity: no noise budget.", "note")
    else:
        h.text("p", "White sources: " + ", ".join(rep.noise.sources) + ". Share of the variance by source.", "note")
        srcs = list(rep.noise.sources)
        rows = []
        for name in rep.key_signals:
            ln = rep.noise.line(name)
            rows.append([name, _num(ln.rms, f"noise.{name}.rms")]
                        + [_num(100 * ln.share_by_source.get(s, np.nan), f"noise.{name}.share.{s}") for s in srcs] + [ln.reason])
        h.table(["signal", "RMS"] + [f"% from {s}" for s in srcs] + ["note"], rows)
    h.add("</section>")

    h.add('<section id="views">')
    h.text("h2", "Views")
    if views is None:
        h.text("p", "The standard set: the frequency view of the worst path, the pole map and the loop-break view.", "note")
        views = standard_views(diagram, rep)
    for p in views:
        h.add(_picture_html(p))
    h.add("</section>")

    stale = stale_blocks(diagram)
    h.add('<section id="design">')
    h.text("h2", "Design recipes and gains")
    blocks = recipe_blocks(diagram)
    if not blocks:
        h.text("p", "No block carries a recipe.", "note")
    for b in blocks:
        rec = b.params["recipe"]
        try:
            plant = recipe_plant(diagram, b)
        except EngineError as err:
            plant = f"(unknown: {err})"
        key = "K" if b.kind == "gain" else "L"
        state = "stale" if b.name in stale else "designed"
        h.add(f'<h3>{html.escape(b.name)} ({html.escape(b.kind)}, {html.escape(str(rec.get("method")))}, plant '
              f'{html.escape(plant)}) <span class="{"stale" if state == "stale" else "note"}">{state}</span></h3>')
        h.text("p", f"Recipe inputs: {_recipe_inputs(rec)}")
        if b.params.get(key) is not None:
            h.text("p", f"{key} =")
            _matrix_table(h, b.params[key], f"gain.{b.name}")
    h.add("</section>")

    h.add('<section id="stale">')
    h.text("h2", "Stale designs")
    if stale:
        h.text("p", "Designed blocks whose plant or recipe changed since their gains were computed (or never designed): "
               + ", ".join(stale) + ". Redesign before relying on these gains.", "stale")
    else:
        h.text("p", "None: every designed block matches its plant and recipe.")
    for n in rep.notes:
        h.text("p", f"note: {n}", "note")
    h.add("</section>")

    h.add('<section id="caution">')
    h.text("h2", "Caution")
    h.add(f'<p class="caution">{html.escape(CAUTION)}</p>')
    h.add("</section></body></html>\n")
    return "".join(h.parts)


def write_report_html(path: str | os.PathLike, text: str, *, reading=()) -> Path:
    """Write the report atomically; refused (one line, nothing written) over a diagram.

    Raises
    ------
    OutputRefusedError
        ``path`` is a diagram (or the one being read), a folder or read-only.
    ExportError
        The file cannot be written.
    """
    from loopwright.engine.export import ExportError
    from loopwright.engine.project import atomic_write

    check_export_output(path, reading=reading)
    try:
        atomic_write(path, text)
    except OSError as err:
        raise ExportError(f"{display_path(path)}: cannot be written ({err.strerror or err})") from err
    return Path(path)
