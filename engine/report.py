"""The loop report: everything an engineer reads first about a drawn loop, in one pass.

Sections: the assembled model (size, poles, stability, separation check), margins at the
diagram's loop break, the noise budget of the signals that matter most (plant inputs and
outputs, estimation errors), the most troublesome paths of the path audit, and designed
blocks that are stale. Every report ends with the caution.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from loopwright.engine import CAUTION
from loopwright.engine.audit import AuditRow, path_audit
from loopwright.engine.check import CheckReport, pole_table, summarize
from loopwright.engine.cli_common import fmt_num
from loopwright.engine.diagram import Diagram, PortRef
from loopwright.engine.eigen import format_pole, trustworthy_digits
from loopwright.engine.errors import EngineError
from loopwright.engine.interconnect import assemble
from loopwright.engine.margins import LoopMargins, VectorLoopMargins, margins_at
from loopwright.engine.noise import NoiseBudget, noise_budget, white_sources
from loopwright.engine.path_text import path_text
from loopwright.engine.responses import reduce_model

__all__ = ["LoopReport", "loop_report", "format_report"]


@dataclass
class LoopReport:
    """What :func:`loop_report` found; ``as_dict`` gives plain JSON values."""

    title: str
    description: str
    check: CheckReport
    loop_break: str | None
    margins: LoopMargins | VectorLoopMargins | None
    margins_error: str
    noise: NoiseBudget | None
    key_signals: list[str]
    audit: list[AuditRow]
    audit_total: int
    notes: list[str] = field(default_factory=list)

    def as_dict(self) -> dict[str, Any]:
        chk, sep = self.check, self.check.separation
        return {
            "title": self.title,
            "description": self.description,
            "states": chk.states,
            "stable": chk.stable,
            "rhp_poles": chk.rhp_poles,
            "pole_classes": None if chk.pole_classes is None else chk.pole_classes.as_dict(),
            "pole_bounds": list(chk.pole_bounds),
            "pole_source": chk.pole_source,
            "poles": [[p.real, p.imag] for p in chk.poles],
            "pole_table": pole_table(chk.poles),
            "separation": None
            if sep is None
            else {"matches": sep.matches, "verdict": sep.verdict, "decoupled": sep.decoupled, "expected": [[p.real, p.imag] for p in sep.expected]},
            "loop_break": self.loop_break,
            "margins": None if self.margins is None else self.margins.as_dict(),
            "margins_error": self.margins_error or None,
            "noise": None
            if self.noise is None
            else {name: _noise_entry(self.noise, name) for name in self.key_signals},
            "audit_top": [r.as_dict() for r in self.audit],
            "audit_total": self.audit_total,
            "warnings": list(chk.warnings),
            "notes": self.notes,
            "caution": CAUTION,
        }


def _noise_entry(budget: NoiseBudget, name: str) -> dict[str, Any]:
    ln = budget.line(name)
    return {"rms": ln.rms, "share_by_source": ln.share_by_source, "reason": ln.reason}


def _key_signal_lines(diagram: Diagram, budget: NoiseBudget) -> list[str]:
    """Budget lines for what feeds each plant and what each plant puts out, then estimation errors."""
    wanted: list[str] = []
    for b in diagram.blocks.values():
        if b.kind != "plant":
            continue
        for port, outgoing in (("u", False), ("y", True), ("z", True)):
            ref = PortRef(b.id, port)
            w = diagram.wire_from(ref) if outgoing else diagram.wire_into(ref)
            if w is not None:
                wanted.append(w.name)
            elif port == "z" and "Cz" in b.params:
                wanted.append(f"{b.name}.z")  # what must stay small is rarely wired on
    names = []
    for ln in budget.lines:
        if ln.signal in wanted or ln.signal.startswith("error:"):
            names.append(ln.name)
    return names


def loop_report(diagram: Diagram, *, top: int = 5, take: bool = False) -> LoopReport:
    """Assemble ``diagram`` and run the first analyses on it.

    Parameters
    ----------
    diagram : Diagram
    top : int
        How many audit rows to keep (the audit itself covers every source-signal pair).
    take : bool
        The caller hands ``diagram`` over and changes it no more (see
        :func:`~loopwright.engine.interconnect.assemble`).

    Raises
    ------
    EngineError
        The diagram does not assemble. Failures of single analyses (e.g. a loop break on a
        missing signal) are reported inside the report instead.
    """
    chk = summarize(diagram, model=assemble(diagram, take=take))
    model = chk.model
    notes: list[str] = []
    loop_break = diagram.settings.get("loop_break")
    margins, margins_error = None, ""
    if loop_break:
        try:
            margins = margins_at(diagram, loop_break)
        except EngineError as err:
            margins_error = str(err)
    else:
        notes.append("no loop break is set (settings.loop_break): margins skipped")
    reduced = reduce_model(model.A) if model.n_states else None
    budget, key = None, []
    if white_sources(model):
        budget = noise_budget(model, reduced=reduced)
        key = _key_signal_lines(diagram, budget)
    else:
        notes.append("no source states a white-noise intensity: noise budget skipped")
    rows = path_audit(model, reduced=reduced, paths_for=top)  # only the rows shown list their paths
    return LoopReport(
        title=str(diagram.meta.get("title", "")),
        description=str(diagram.meta.get("description", "")),
        check=chk,
        loop_break=loop_break,
        margins=margins,
        margins_error=margins_error,
        noise=budget,
        key_signals=key,
        audit=rows[:top],
        audit_total=len(rows),
        notes=notes,
    )


def _margin_lines(m: LoopMargins, indent: str) -> list[str]:
    lo, hi = m.gain_margin_db
    ol = m.open_loop_poles.phrase() if m.open_loop_poles is not None else f"{m.open_loop_unstable_poles} in the right half-plane"
    dm_at = f" (set by the crossover at {fmt_num(m.delay_margin_w_rad_s, digits=4)} rad/s)" if np.isfinite(m.delay_margin_w_rad_s) else ""
    lines = [
        f"{indent}open-loop poles  {ol}",
        f"{indent}gain margin      x{fmt_num(m.gain_lower, digits=4)} .. x{fmt_num(m.gain_upper, digits=4)} "
        f"({fmt_num(lo, digits=4)} dB .. {fmt_num(hi, digits=4)} dB)",
        f"{indent}phase margin     {fmt_num(m.phase_margin_deg, digits=4)} deg at {fmt_num(m.phase_margin_w_rad_s, digits=4)} rad/s"
        + (f" ({len(m.crossovers)} gain crossovers; 'loopwright margins' lists each)" if len(m.crossovers) > 1 else ""),
        f"{indent}delay margin     {fmt_num(m.delay_margin_s, digits=4)} s{dm_at}",
        f"{indent}peak |S|         {fmt_num(m.peak_sensitivity, digits=4)} at {fmt_num(m.peak_sensitivity_w_rad_s, digits=4)} rad/s",
        f"{indent}disk margin      alpha {fmt_num(m.disk.alpha, digits=4)}: gain x{fmt_num(m.disk.gain_lower, digits=4)} .. "
        f"x{fmt_num(m.disk.gain_upper, digits=4)}, phase +-{fmt_num(m.disk.phase_deg, digits=4)} deg",
    ]
    lines += [f"{indent}note: {n}" for n in m.notes]
    if m.limits is not None:
        lines += [f"{indent}{line}" for line in m.limits.lines()]
    return lines


def format_report(rep: LoopReport, *, origin: str = "") -> str:
    """Readable text of a :class:`LoopReport`."""
    chk = rep.check
    out: list[str] = []
    head = rep.title or origin
    out.append(f"Loop report: {head}" + (f"  ({origin})" if origin and rep.title else ""))
    if rep.description:
        out.append(f"  {rep.description}")
    out.append("")
    out.append(f"Assembled model: {chk.states} states, {len(chk.signals)} signals, {len(chk.sources)} sources")
    out.append(f"  closed-loop poles (damping, natural frequency rad/s; {chk.pole_source_text}):")
    for row, p, b in zip(pole_table(chk.poles), chk.poles, chk.pole_bounds):
        d = trustworthy_digits(p, b, max_digits=5)
        out.append(f"    {format_pole(p, b, max_digits=5):<24} {fmt_num(row['damping'], digits=max(1, min(d, 3))):>6}  {fmt_num(row['wn_rad_s'], digits=max(1, d))}")
    classes = chk.pole_classes
    verdict = "stable" if chk.stable else f"NOT stable ({classes.phrase() if classes is not None else chk.rhp_poles})"
    out.append(f"  verdict: {verdict}")
    sep = chk.separation
    if sep is not None:
        if sep.decoupled:
            out.append("  separation: closed-loop poles = eig(A - B K) together with eig(A - L C) (by structure: the estimation error is not driven by the loop)")
        else:
            out.append(
                "  separation: closed-loop poles "
                + {"holds": "=", "unconfirmed": "cannot be confirmed to equal (ill-conditioned)", "not_separated": "differ from"}[sep.verdict]
                + " eig(A - B K) together with eig(A - L C)"
                + (f" (gap {sep.max_mismatch:.1e})" if sep.matches else "")
            )
    out.append("")
    if rep.margins is not None:
        out.append(f"Margins with the loop broken at {rep.loop_break}:")
        if isinstance(rep.margins, VectorLoopMargins):
            for name, m in zip(rep.margins.channel_names, rep.margins.per_channel):
                out.append(f"  channel {name} (others closed):")
                out.extend(_margin_lines(m, "    "))
            d = rep.margins.all_at_once
            out.append(f"  all loops at once: disk margin alpha {fmt_num(d.alpha, digits=4)}, gain x{fmt_num(d.gain_lower, digits=4)} .. x{fmt_num(d.gain_upper, digits=4)}, phase +-{fmt_num(d.phase_deg, digits=4)} deg")
        else:
            out.extend(_margin_lines(rep.margins, "  "))
        out.append("")
    elif rep.margins_error:
        out.append(f"Margins: not computed ({rep.margins_error})")
        out.append("")
    if rep.noise is not None:
        srcs = ", ".join(rep.noise.sources)
        out.append(f"Noise budget (steady-state RMS; white sources: {srcs}):")
        for name in rep.key_signals:
            ln = rep.noise.line(name)
            shares = ", ".join(f"{k} {100 * v:.0f}%" for k, v in sorted(ln.share_by_source.items(), key=lambda kv: -np.nan_to_num(kv[1])) if np.isfinite(v))
            out.append(f"  {name:<14} {fmt_num(ln.rms, digits=4):>12}   {shares or ln.reason}")
        out.append("")
    out.append(f"Most troublesome paths (top {len(rep.audit)} of {rep.audit_total}; unstable first, then by peak gain):")
    out.append(f"  {'source':<8} {'signal':<12} {'peak gain':>11} {'at rad/s':>10} {'DC gain':>11}  path")
    for r in rep.audit:
        out.append(
            f"  {r.source:<8} {r.signal:<12} {fmt_num(r.peak_gain, digits=4):>11} {fmt_num(r.peak_freq_rad_s, digits=4):>10} "
            f"{fmt_num(r.dc_gain, digits=4) + ('*' if r.dc_gain_kind != 'signed value' else ''):>11}  {path_text(r.blocks)}"
        )
    if any(r.dc_gain_kind != "signed value" for r in rep.audit):
        out.append("  (DC gain: signed for a scalar path; * largest singular value of a vector path's DC gain matrix)")
    if chk.warnings or rep.notes:
        out.append("")
        out.extend(f"warning: {w}" for w in chk.warnings)
        out.extend(f"note: {n}" for n in rep.notes)
    out.append("")
    out.append(CAUTION)
    return "\n".join(out)
