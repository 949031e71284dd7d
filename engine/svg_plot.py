"""Plots as SVG without Qt: what ``loopwright freq|time|margins --plot OUT.svg`` writes.

A figure is one or more stacked :class:`PlotArea` s sharing a width, each with axes (linear
or logarithmic), ticks, a grid, curves (:class:`Curve`) and point marks (:class:`Mark`),
and one legend beside the plots (never over the data). The figure carries a title, the
caution of every Loopwright output, and its own data mapping: each plot area's group
states its data ranges and pixel box (``data-x-range``, ``data-y-range``, ``data-box``,
``data-x-log``), and each curve its label (``data-label``), so a reader (or a test) can
take the numbers back from the picture.

Pure text output from the standard library: no network, no fonts fetched, no other
package. Non-finite samples break a curve instead of being drawn.
"""
from __future__ import annotations

import math
import os
from dataclasses import dataclass, field
from xml.sax.saxutils import escape, quoteattr

import numpy as np

from loopwright.engine import CAUTION

__all__ = [
    "PAIR_COLOURS",
    "Curve",
    "Mark",
    "PlotArea",
    "linear_ticks",
    "log_ticks",
    "figure_svg",
    "write_svg",
    "frequency_figure",
    "time_figure",
    "loop_break_figure",
]

#: One colour per pair or channel, in order; the app's views use the same set.
PAIR_COLOURS = ("#2f7fd0", "#e0662b", "#2aa05a", "#b0419e", "#c9a21a", "#17a3b8", "#7b5cd6", "#8a6d3b")

_DASHES = ("", "7 4", "2 3", "8 3 2 3")
_INK = "#1f2933"
_AXIS = "#5b6573"
_GRID = "#d9dee4"
_FONT = "font-family=\"DejaVu Sans, Verdana, sans-serif\""

# Figure geometry in px: plot areas stacked on the left, the legend in a column on the right.
_WIDTH = 900
_AREA_HEIGHT = 260
_MARGIN_LEFT = 72
_MARGIN_TOP = 44
_GAP = 46
_PLOT_WIDTH = 560
_LEGEND_X = _MARGIN_LEFT + _PLOT_WIDTH + 28
_FOOTER = 54


@dataclass
class Curve:
    """A line through ``(x, y)``; ``shade`` 0, 1, ... picks a dash pattern (vector elements)."""

    label: str
    x: np.ndarray
    y: np.ndarray
    colour: str = PAIR_COLOURS[0]
    shade: int = 0
    width: float = 1.8
    in_legend: bool = True


@dataclass
class Mark:
    """A point marked with a symbol: ``"triangle"``, ``"plus"`` or ``"circle"``."""

    label: str
    x: float
    y: float
    colour: str = _INK
    symbol: str = "triangle"
    in_legend: bool = True


@dataclass
class PlotArea:
    """One plot: axes labels, log or linear x, optional equal aspect, curves and marks."""

    x_label: str
    y_label: str
    curves: list[Curve] = field(default_factory=list)
    marks: list[Mark] = field(default_factory=list)
    log_x: bool = False
    equal_aspect: bool = False
    x_range: tuple[float, float] | None = None
    y_range: tuple[float, float] | None = None


def linear_ticks(lo: float, hi: float, count: int = 6) -> list[float]:
    """Round tick values (1, 2 or 5 times a power of ten apart) covering ``[lo, hi]``."""
    if not (math.isfinite(lo) and math.isfinite(hi)) or hi <= lo:
        return [lo] if math.isfinite(lo) else []
    raw = (hi - lo) / max(1, count)
    base = 10.0 ** math.floor(math.log10(raw))
    step = next(m * base for m in (1.0, 2.0, 5.0, 10.0) if m * base >= raw)
    first = math.ceil(lo / step - 1e-9) * step
    ticks = []
    k = 0
    while first + k * step <= hi + 1e-9 * step:
        v = first + k * step
        ticks.append(0.0 if abs(v) < 1e-12 * step else v)
        k += 1
    return ticks


def log_ticks(lo: float, hi: float) -> list[float]:
    """Powers of ten within ``[lo, hi]`` (both positive); every other decade past 8 of them."""
    if not (lo > 0 and hi > lo):
        return []
    a, b = math.ceil(math.log10(lo) - 1e-9), math.floor(math.log10(hi) + 1e-9)
    stride = 1 if b - a <= 8 else 2
    return [10.0**k for k in range(a, b + 1, stride)]


def _fmt_tick(v: float) -> str:
    if v == 0:
        return "0"
    if abs(v) >= 1e5 or abs(v) < 1e-3:
        return f"{v:.0e}".replace("e+0", "e").replace("e-0", "e-").replace("e+", "e")
    return f"{v:g}"


def _decade_label(x: float, y: float, v: float) -> str:
    """``10`` with the exponent raised, as two text elements (raised tspans render
    differently from viewer to viewer)."""
    k = int(round(math.log10(v)))
    return (f'<text x="{x - 3:.2f}" y="{y}" text-anchor="middle" font-size="11" fill="{_INK}">10</text>'
            f'<text x="{x + 4:.2f}" y="{y - 5}" text-anchor="start" font-size="8" fill="{_INK}">{k}</text>')


def _span(values: np.ndarray, *, log: bool) -> tuple[float, float]:
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    if log:
        v = v[v > 0]
    if v.size == 0:
        return (0.1, 10.0) if log else (-1.0, 1.0)
    lo, hi = float(v.min()), float(v.max())
    if log:
        if hi <= lo:
            return lo / 10.0, hi * 10.0
        return lo, hi
    if hi <= lo:
        pad = max(abs(lo), 1.0) * 0.1
        return lo - pad, hi + pad
    pad = 0.05 * (hi - lo)
    return lo - pad, hi + pad


class _Mapping:
    """Data to pixels for one plot area."""

    def __init__(self, area: PlotArea, box: tuple[float, float, float, float]):
        self.box = box
        self.log_x = area.log_x
        xs = np.concatenate([np.asarray(c.x, dtype=float).ravel() for c in area.curves] + [np.array([m.x for m in area.marks], dtype=float)])
        ys = np.concatenate([np.asarray(c.y, dtype=float).ravel() for c in area.curves] + [np.array([m.y for m in area.marks], dtype=float)])
        self.x0, self.x1 = area.x_range or _span(xs, log=area.log_x)
        self.y0, self.y1 = area.y_range or _span(ys, log=False)
        if area.equal_aspect and not area.log_x:
            left, top, w, h = box
            per_px = max((self.x1 - self.x0) / w, (self.y1 - self.y0) / h)
            cx, cy = (self.x0 + self.x1) / 2, (self.y0 + self.y1) / 2
            self.x0, self.x1 = cx - per_px * w / 2, cx + per_px * w / 2
            self.y0, self.y1 = cy - per_px * h / 2, cy + per_px * h / 2

    def _u(self, x):
        x = np.asarray(x, dtype=float)
        if self.log_x:
            with np.errstate(divide="ignore", invalid="ignore"):
                return (np.log10(x) - math.log10(self.x0)) / (math.log10(self.x1) - math.log10(self.x0))
        return (x - self.x0) / (self.x1 - self.x0)

    def px(self, x, y) -> tuple[np.ndarray, np.ndarray]:
        left, top, w, h = self.box
        u = self._u(x)
        v = (np.asarray(y, dtype=float) - self.y0) / (self.y1 - self.y0)
        return left + u * w, top + (1.0 - v) * h


def _path_data(px: np.ndarray, py: np.ndarray, box) -> str:
    """``M x y L ...`` of the polyline clipped to ``box`` (Liang-Barsky, per segment).

    Clipping here rather than with an SVG clip path keeps the picture the same in every
    viewer (some converters ignore clip paths); non-finite points break the line.
    """
    left, top, w, h = box
    x0, y0, x1, y1 = px[:-1], py[:-1], px[1:], py[1:]
    ok = np.isfinite(x0) & np.isfinite(y0) & np.isfinite(x1) & np.isfinite(y1)
    with np.errstate(invalid="ignore", divide="ignore"):
        dx, dy = x1 - x0, y1 - y0
        t0, t1 = np.zeros(x0.size), np.ones(x0.size)
        for p, q in ((-dx, x0 - left), (dx, left + w - x0), (-dy, y0 - top), (dy, top + h - y0)):
            ok &= ~((p == 0) & (q < 0))
            r = np.where(p != 0, q / np.where(p != 0, p, 1.0), 0.0)
            t0 = np.where(p < 0, np.maximum(t0, r), t0)
            t1 = np.where(p > 0, np.minimum(t1, r), t1)
    ok &= t0 <= t1
    ax, ay = x0 + t0 * dx, y0 + t0 * dy
    bx, by = x0 + t1 * dx, y0 + t1 * dy
    parts, prev_end = [], None
    for i in np.nonzero(ok)[0].tolist():
        start = (round(float(ax[i]), 3), round(float(ay[i]), 3))
        end = (round(float(bx[i]), 3), round(float(by[i]), 3))
        if prev_end != start or prev_end is None:
            parts.append(f"M{start[0]:.3f} {start[1]:.3f}")
        parts.append(f"L{end[0]:.3f} {end[1]:.3f}")
        prev_end = end
    if not parts and px.size == 1 and np.isfinite(px[0]) and np.isfinite(py[0]):
        parts.append(f"M{px[0]:.3f} {py[0]:.3f}")
    return " ".join(parts)


def _symbol(symbol: str, x: float, y: float, colour: str) -> str:
    if symbol == "plus":
        return (f'<path d="M{x - 7:.2f} {y:.2f} H{x + 7:.2f} M{x:.2f} {y - 7:.2f} V{y + 7:.2f}" '
                f'stroke="{colour}" stroke-width="2.4" fill="none"/>')
    if symbol == "circle":
        return f'<circle cx="{x:.2f}" cy="{y:.2f}" r="5" fill="none" stroke="{colour}" stroke-width="1.6"/>'
    return (f'<path d="M{x - 6:.2f} {y - 9:.2f} H{x + 6:.2f} L{x:.2f} {y:.2f} Z" fill="{colour}" '
            f'stroke="{_INK}" stroke-width="0.8"/>')


def _area_svg(area: PlotArea, index: int, box) -> tuple[str, _Mapping]:
    m = _Mapping(area, box)
    left, top, w, h = box
    out = [f'<g class="plot" id="plot{index}" data-x-range="{m.x0!r} {m.x1!r}" data-y-range="{m.y0!r} {m.y1!r}" '
           f'data-box="{left} {top} {w} {h}" data-x-log="{"1" if area.log_x else "0"}">']
    out.append(f'<rect x="{left}" y="{top}" width="{w}" height="{h}" fill="#ffffff" stroke="{_AXIS}" stroke-width="1"/>')
    # grid and ticks
    if area.log_x:
        xt = log_ticks(m.x0, m.x1)
        minor = [k * d for d in [10.0**e for e in range(math.floor(math.log10(m.x0)), math.ceil(math.log10(m.x1)) + 1)]
                 for k in range(2, 10) if m.x0 <= k * d <= m.x1]
        for v in minor:
            x, _ = m.px(v, m.y0)
            out.append(f'<line x1="{x:.2f}" y1="{top}" x2="{x:.2f}" y2="{top + h}" stroke="{_GRID}" stroke-width="0.5"/>')
    else:
        xt = linear_ticks(m.x0, m.x1)
    for v in xt:
        x, _ = m.px(v, m.y0)
        out.append(f'<line x1="{x:.2f}" y1="{top}" x2="{x:.2f}" y2="{top + h}" stroke="{_GRID}" stroke-width="1"/>')
        if area.log_x:
            out.append(_decade_label(float(x), top + h + 16, v))
        else:
            out.append(f'<text x="{x:.2f}" y="{top + h + 16}" text-anchor="middle" font-size="11" fill="{_INK}">{escape(_fmt_tick(v))}</text>')
    for v in linear_ticks(m.y0, m.y1, 5):
        _, y = m.px(m.x0 if not area.log_x else m.x0, v)
        out.append(f'<line x1="{left}" y1="{y:.2f}" x2="{left + w}" y2="{y:.2f}" stroke="{_GRID}" stroke-width="1"/>')
        out.append(f'<text x="{left - 6}" y="{y + 4:.2f}" text-anchor="end" font-size="11" fill="{_INK}">{escape(_fmt_tick(v))}</text>')
    out.append(f'<text x="{left + w / 2:.1f}" y="{top + h + 36}" text-anchor="middle" font-size="12" fill="{_INK}">{escape(area.x_label)}</text>')
    out.append(f'<text x="{left - 52}" y="{top + h / 2:.1f}" text-anchor="middle" font-size="12" fill="{_INK}" '
               f'transform="rotate(-90 {left - 52} {top + h / 2:.1f})">{escape(area.y_label)}</text>')
    out.append('<g class="data">')
    for c in area.curves:
        px, py = m.px(c.x, c.y)
        dash = _DASHES[c.shade % len(_DASHES)]
        dash_attr = f' stroke-dasharray="{dash}"' if dash else ""
        out.append(f'<path class="curve" data-label={quoteattr(c.label)} d="{_path_data(px, py, box)}" fill="none" '
                   f'stroke="{c.colour}" stroke-width="{c.width}"{dash_attr} stroke-linejoin="round"/>')
    for mk in area.marks:
        px, py = m.px([mk.x], [mk.y])
        inside = left - 1 <= px[0] <= left + w + 1 and top - 1 <= py[0] <= top + h + 1
        if np.isfinite(px[0]) and np.isfinite(py[0]) and inside:
            out.append(f'<g class="mark" data-label={quoteattr(mk.label)} data-x="{mk.x!r}" data-y="{mk.y!r}">'
                       + _symbol(mk.symbol, float(px[0]), float(py[0]), mk.colour) + "</g>")
    out.append("</g></g>")
    return "\n".join(out), m


def _legend_svg(areas: list[PlotArea], top: float) -> str:
    entries: list[tuple[str, str]] = []
    seen = set()
    for area in areas:
        for c in area.curves:
            if c.in_legend and c.label not in seen:
                seen.add(c.label)
                dash = _DASHES[c.shade % len(_DASHES)]
                dash_attr = f' stroke-dasharray="{dash}"' if dash else ""
                entries.append((c.label, f'<line x1="0" y1="0" x2="26" y2="0" stroke="{c.colour}" stroke-width="{c.width}"{dash_attr}/>'))
        for mk in area.marks:
            if mk.in_legend and mk.label not in seen:
                seen.add(mk.label)
                entries.append((mk.label, _symbol(mk.symbol, 13.0, 4.0 if mk.symbol == "triangle" else 0.0, mk.colour)))
    out = [f'<g class="legend" transform="translate({_LEGEND_X} {top})">']
    y = 0.0
    for label, sample in entries:
        lines = _wrap(label, 30)
        out.append(f'<g transform="translate(0 {y + 6:.1f})">{sample}</g>')
        for k, line in enumerate(lines):
            out.append(f'<text x="34" y="{y + 10 + 14 * k:.1f}" font-size="11.5" fill="{_INK}">{escape(line)}</text>')
        y += 14 * len(lines) + 8
    out.append("</g>")
    return "\n".join(out)


def _wrap(text: str, width: int) -> list[str]:
    words, lines, cur = text.split(), [], ""
    for wd in words:
        if cur and len(cur) + 1 + len(wd) > width:
            lines.append(cur)
            cur = wd
        else:
            cur = f"{cur} {wd}" if cur else wd
    return lines + [cur] if cur else lines or [""]


def figure_svg(areas: list[PlotArea], *, title: str, notes: list[str] | tuple[str, ...] = ()) -> str:
    """The SVG document of stacked plot areas with a legend beside them.

    Parameters
    ----------
    areas : list of PlotArea
        Drawn top to bottom, each 260 px high.
    title : str
        Shown above the plots and as the document's ``<title>``.
    notes : sequence of str
        Lines under the legend (e.g. the margins a Nyquist plot is read for).

    Returns
    -------
    str
        A standalone SVG 1.1 document; its last line of text is :data:`loopwright.engine.CAUTION`.
    """
    n = max(1, len(areas))
    height = _MARGIN_TOP + n * _AREA_HEIGHT + (n - 1) * _GAP + 40 + _FOOTER
    body = []
    for i, area in enumerate(areas):
        top = _MARGIN_TOP + i * (_AREA_HEIGHT + _GAP)
        svg, _m = _area_svg(area, i, (_MARGIN_LEFT, top, _PLOT_WIDTH, _AREA_HEIGHT))
        body.append(svg)
    body.append(_legend_svg(areas, _MARGIN_TOP))
    if notes:
        y0 = _MARGIN_TOP + (n * _AREA_HEIGHT) * 0.45
        note_lines = [ln for note in notes for ln in _wrap(note, 34)]
        body.append(f'<g class="notes" transform="translate({_LEGEND_X} {y0:.1f})">'
                    + "".join(f'<text x="0" y="{14 * k}" font-size="11" fill="{_INK}">{escape(ln)}</text>' for k, ln in enumerate(note_lines))
                    + "</g>")
    caution_lines = _wrap(CAUTION, 130)
    foot = height - _FOOTER + 14
    body.append('<g class="caution">' + "".join(
        f'<text x="{_MARGIN_LEFT - 50}" y="{foot + 13 * k}" font-size="10" fill="{_AXIS}">{escape(ln)}</text>' for k, ln in enumerate(caution_lines)) + "</g>")
    head = (f'<?xml version="1.0" encoding="UTF-8"?>\n'
            f'<svg xmlns="http://www.w3.org/2000/svg" version="1.1" width="{_WIDTH}" height="{height}" '
            f'viewBox="0 0 {_WIDTH} {height}" {_FONT}>\n'
            f"<title>{escape(title)}</title>\n<desc>{escape(CAUTION)}</desc>\n"
            f'<rect x="0" y="0" width="{_WIDTH}" height="{height}" fill="#fbfaf7"/>\n'
            f'<text x="{_MARGIN_LEFT}" y="26" font-size="14" font-weight="bold" fill="{_INK}">{escape(title)}</text>\n')
    return head + "\n".join(body) + "\n</svg>\n"


def write_svg(path: str | os.PathLike, text: str, *, reading=()) -> None:
    """Write an SVG document atomically, after the checks every output makes.

    Raises
    ------
    OutputRefusedError
        The path is a diagram (or the one being read), a folder, read-only, or not ``*.svg``.
    """
    from loopwright.engine.output_paths import OutputRefusedError, check_export_output, display_path
    from loopwright.engine.project import atomic_write

    check_export_output(path, reading=reading)
    if not os.fspath(path).lower().endswith(".svg"):
        raise OutputRefusedError(f"--plot {display_path(path)}: plots are written as SVG only; name the file *.svg")
    try:
        atomic_write(path, text)
    except OSError as err:
        raise OutputRefusedError(f"output {display_path(path)}: cannot be written ({err.strerror or err})") from err


# ---------------------------------------------------------------------------------------
# the command line's figures, from the data of engine/views_data.py


def _fmt(v: float) -> str:
    from loopwright.engine.cli_common import fmt_num

    return fmt_num(v, digits=4)


def frequency_figure(resp, *, title: str) -> str:
    """Magnitude (dB) and unwrapped phase of a :class:`views_data.PairResponse` against log
    frequency (rad/s); a vector path gets one colour, one dash per element, and the peak of
    its largest element marked."""
    mag, ph, w = resp.mag_db, resp.phase_deg, resp.w_rad_s
    p, m = resp.response.shape[1:]
    scalar = p * m == 1
    top, bottom = PlotArea("frequency (rad/s)", "magnitude (dB)", log_x=True), PlotArea("frequency (rad/s)", "phase (deg)", log_x=True)
    for i in range(p):
        for j in range(m):
            label = f"{resp.signal} <- {resp.input_group}" if scalar else f"{resp.output_names[i]} <- {resp.input_names[j]}"
            shade = i * m + j
            top.curves.append(Curve(label, w, mag[:, i, j], PAIR_COLOURS[0], shade))
            bottom.curves.append(Curve(label, w, ph[:, i, j], PAIR_COLOURS[0], shade, in_legend=False))
    w_pk, db_pk = max((resp.peak(i, j) for i in range(p) for j in range(m)), key=lambda t: t[1])
    top.marks.append(Mark(f"peak {_fmt(db_pk)} dB at {_fmt(w_pk)} rad/s", w_pk, db_pk, PAIR_COLOURS[0]))
    return figure_svg([top, bottom], title=title)


def time_figure(t, Y, names, *, title: str, y_label: str = "response") -> str:
    """One curve per column of ``Y`` (N, q) against time ``t`` (s), one colour per column."""
    area = PlotArea("time (s)", y_label)
    Y = np.asarray(Y, dtype=float).reshape(len(t), -1)
    for k, name in enumerate(names):
        area.curves.append(Curve(str(name), np.asarray(t, dtype=float), Y[:, k], PAIR_COLOURS[k % len(PAIR_COLOURS)], k // len(PAIR_COLOURS)))
    return figure_svg([area], title=title)


def loop_break_figure(view, *, title: str) -> str:
    """The Nyquist curve of each channel of a :class:`views_data.LoopBreakView` (positive
    frequencies solid, negative dashed), its disk-margin disk, the critical point -1 and
    the margins listed beside the plot."""
    from loopwright.engine.margins import LoopMargins

    area = PlotArea("real", "imaginary", equal_aspect=True)
    per = [view.margins] if isinstance(view.margins, LoopMargins) else list(view.margins.per_channel)
    pts = []
    notes = []
    for k, (name, L, (c, r), mg) in enumerate(zip(view.channel_names, view.curves, view.circles, per)):
        colour = PAIR_COLOURS[k % len(PAIR_COLOURS)]
        area.curves.append(Curve(f"L(jw) at {name}", L.real, L.imag, colour, 0))
        area.curves.append(Curve(f"{name}: negative w", L.real[::-1], -L.imag[::-1], colour, 1, width=1.0, in_legend=False))
        if np.isfinite(c) and np.isfinite(r):
            phi = np.linspace(0.0, 2.0 * np.pi, 181)
            area.curves.append(Curve(f"disk-margin disk ({name})", c + r * np.cos(phi), r * np.sin(phi), "#c0392b", 1, width=1.4))
            if r < 20:
                pts += [complex(c - r, 0), complex(c + r, 0), complex(c, r), complex(c, -r)]
        near = L[np.isfinite(L) & (np.abs(L) < 20.0)]
        pts += list(near) + list(np.conj(near))
        lo_db, hi_db = mg.gain_margin_db
        prefix = f"{name}: " if len(per) > 1 else ""
        notes += [f"{prefix}closed loop {'stable' if mg.closed_loop_stable else 'UNSTABLE'}",
                  f"{prefix}gain margin {_fmt(lo_db)} .. {_fmt(hi_db)} dB",
                  f"{prefix}phase margin {_fmt(mg.phase_margin_deg)} deg at {_fmt(mg.phase_margin_w_rad_s)} rad/s",
                  f"{prefix}delay margin {_fmt(mg.delay_margin_s)} s",
                  f"{prefix}disk margin alpha {_fmt(mg.disk.alpha)}, phase +-{_fmt(mg.disk.phase_deg)} deg", ""]
    area.marks.append(Mark("critical point -1", -1.0, 0.0, "#c0392b", "plus"))
    z = np.array(pts + [-1.0 + 0j, 0j], dtype=complex)
    pad = 0.1 * max(float(np.ptp(z.real)), float(np.ptp(z.imag)), 1.0)
    area.x_range = (float(z.real.min()) - pad, float(z.real.max()) + pad)
    area.y_range = (float(z.imag.min()) - pad, float(z.imag.max()) + pad)
    return figure_svg([area], title=title, notes=notes)
