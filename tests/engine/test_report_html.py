"""The HTML report: every section is there, every number in it is the engine's, it stands
alone (no network, no scripts), and the command line writes it without Qt."""
from __future__ import annotations

import re
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from console import run_without_qt
from loopwright.engine import CAUTION
from loopwright.engine.audit import path_audit
from loopwright.engine.cli import main as cli_main
from loopwright.engine.interconnect import assemble
from loopwright.engine.margins import LoopMargins, margins_at
from loopwright.engine.noise import noise_budget
from loopwright.engine.project import load
from tests.diagrams import sample_path
from loopwright.engine.recipes import recipe_blocks, stale_blocks
from loopwright.engine.report import loop_report
from loopwright.engine.report_html import SECTIONS, report_html

SAMPLES = ("levitated_rotor_axis.lwd", "conveyor_flexible_drive.lwd", "two_zone_oven.lwd")


class _Reader(HTMLParser):
    """Sections, numeric cells (data-key -> shown text), pictures and anything that reaches out."""

    def __init__(self):
        super().__init__()
        self.sections: list[str] = []
        self.numbers: dict[str, str] = {}
        self.svgs = 0
        self.outside: list[str] = []
        self._key: str | None = None
        self._text: list[str] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "section":
            self.sections.append(a.get("id", ""))
        if tag == "svg":
            self.svgs += 1
        if tag in ("script", "link", "iframe", "object", "embed"):
            self.outside.append(tag)
        for name in ("src", "href", "xlink:href"):
            v = a.get(name)
            if v is not None and not v.startswith(("data:", "#")):
                self.outside.append(f"{tag} {name}={v}")
        if tag == "td" and "num" in (a.get("class") or "").split():
            assert "data-key" in a, "a number without its key"
            self._key, self._text = a["data-key"], []

    def handle_data(self, data):
        self.text.append(data)
        if self._key is not None:
            self._text.append(data)

    def handle_endtag(self, tag):
        if tag == "td" and self._key is not None:
            assert self._key not in self.numbers, f"key {self._key} shown twice"
            self.numbers[self._key] = "".join(self._text).strip()
            self._key = None


def _read(text: str) -> _Reader:
    r = _Reader()
    r.feed(text)
    r.close()
    return r


def _shown(text: str) -> float:
    return {"-": np.nan, "inf": np.inf, "-inf": -np.inf}.get(text, None) if text in ("-", "inf", "-inf") else float(text)


def _margins(m: LoopMargins, prefix: str) -> dict[str, float]:
    lo_db, hi_db = m.gain_margin_db
    values = {"gain_lower": m.gain_lower, "gain_upper": m.gain_upper, "gain_lower_db": lo_db, "gain_upper_db": hi_db,
              "phase_margin_deg": m.phase_margin_deg, "phase_margin_w_rad_s": m.phase_margin_w_rad_s,
              "delay_margin_s": m.delay_margin_s, "peak_sensitivity": m.peak_sensitivity,
              "peak_sensitivity_w_rad_s": m.peak_sensitivity_w_rad_s, "disk_alpha": m.disk.alpha, "disk_phase_deg": m.disk.phase_deg}
    return {f"{prefix}{k}": v for k, v in values.items()}


def _expected(diagram) -> dict[str, float]:
    """Every number the report may show, computed here from the engine's own functions and
    numpy (closed form: the closed-loop poles are eig(A) of the assembled model)."""
    model = assemble(diagram)
    exp: dict[str, float] = {
        "model.states": model.A.shape[0], "model.signals": len(model.signals), "model.sources": len(model.sources),
        "model.inputs": model.B.shape[1],
    }
    poles = np.linalg.eigvals(model.A)
    order = np.lexsort((poles.imag, poles.real))
    for k, p in enumerate(poles[order]):
        wn = abs(p)
        exp[f"pole.{k}.re"], exp[f"pole.{k}.im"] = p.real, p.imag
        exp[f"pole.{k}.wn_rad_s"] = wn
        exp[f"pole.{k}.damping"] = -p.real / wn if wn > 0 else 1.0  # closed form: zeta = -Re(p) / |p|
    at = diagram.settings.get("loop_break")
    m = margins_at(diagram, at)
    if isinstance(m, LoopMargins):
        exp.update(_margins(m, "margin."))
    else:  # a vector break: each channel with the others closed, then all loops at once
        for name, mc in zip(m.channel_names, m.per_channel):
            exp.update(_margins(mc, f"margin.{name}."))
        exp["margin.all.disk_alpha"], exp["margin.all.disk_phase_deg"] = m.all_at_once.alpha, m.all_at_once.phase_deg
    for k, r in enumerate(path_audit(model)[:5]):
        exp[f"audit.{k}.peak_gain"], exp[f"audit.{k}.peak_freq_rad_s"] = r.peak_gain, r.peak_freq_rad_s
        exp[f"audit.{k}.h2"], exp[f"audit.{k}.dc_gain"] = r.h2, r.dc_gain
    budget = noise_budget(model)
    for ln in budget.lines:
        exp[f"noise.{ln.name}.rms"] = ln.rms
        for s, share in ln.share_by_source.items():
            exp[f"noise.{ln.name}.share.{s}"] = 100 * share
    for b in recipe_blocks(diagram):
        M = np.atleast_2d(b.params["K" if b.kind == "gain" else "L"])
        for (i, j), v in np.ndenumerate(M):
            exp[f"gain.{b.name}.{i}.{j}"] = v
    return exp


def _separation_expected(diagram) -> dict[str, float]:
    """eig(A - B K) and eig(A - L C) from the plant and the gains in the file (closed form)."""
    d = {b.name: b for b in diagram.blocks.values()}
    P = d["P"].params
    A, B, C = (np.asarray(P[k], float) for k in ("A", "B", "C"))
    K = -np.asarray(d["K"].params["K"], float)  # the gain block holds -K (recipe sign -1)
    L = np.asarray(d["est"].params["L"], float)
    out = {}
    for name, M in (("feedback", A - B @ K), ("estimator", A - L @ C)):
        p = np.linalg.eigvals(M)
        p = p[np.lexsort((p.imag, p.real))]
        for k, v in enumerate(p):
            out[f"separation.{name}.{k}.re"], out[f"separation.{name}.{k}.im"] = v.real, v.imag
    return out


@pytest.fixture(scope="module", params=SAMPLES)
def sample_report(request):
    diagram = load(sample_path(request.param))
    return request.param, diagram, report_html(diagram, origin=request.param)


def test_every_section_is_there_in_order(sample_report):
    _name, _d, text = sample_report
    r = _read(text)
    assert r.sections == list(SECTIONS)
    assert CAUTION in "".join(r.text)
    assert r.svgs == 4  # the diagram (engine sketch here) and the standard three views


def test_every_number_matches_the_engine(sample_report):
    name, diagram, text = sample_report
    shown = _read(text).numbers
    exp = _expected(diagram)
    exp.update(_separation_expected(diagram))
    unknown = sorted(k for k in shown if k not in exp and k != "separation.max_mismatch")
    assert not unknown, f"numbers the test cannot account for: {unknown[:5]}"
    assert len(shown) > 30
    for key, txt in shown.items():
        if key == "separation.max_mismatch":
            assert float(txt) < 1e-6  # the separation holds on every sample
            continue
        want = float(exp[key])
        got = _shown(txt)
        if not np.isfinite(want):
            assert got == want or (np.isnan(got) and np.isnan(want)), key
            continue
        # five significant digits are shown
        assert_allclose(got, want, rtol=1e-4, atol=1e-9 + 1e-4 * _scale(key, exp), err_msg=f"{name} {key}")


def _scale(key: str, exp: dict) -> float:
    """Imaginary parts near zero are compared at the scale of their pole."""
    m = re.match(r"(pole|separation\.\w+)\.(\d+)\.im$", key)
    if m:
        return abs(exp[key.replace(".im", ".re")])
    return 0.0


def test_key_noise_lines_and_audit_rows_are_shown(sample_report):
    _name, diagram, text = sample_report
    shown = _read(text).numbers
    rep = loop_report(diagram)
    for n in rep.key_signals:
        assert f"noise.{n}.rms" in shown
    assert sum(k.endswith(".peak_gain") for k in shown) == min(5, rep.audit_total)


def test_the_report_stands_alone(sample_report):
    _name, _d, text = sample_report
    r = _read(text)
    assert r.outside == []
    # the only URLs are the SVG namespace names, which are never fetched
    urls = set(re.findall(r"https?://[^\s\"'<>]+", text))
    assert urls <= {"http://www.w3.org/2000/svg", "http://www.w3.org/1999/xlink"}


def test_stale_blocks_are_listed():
    diagram = load(sample_path("levitated_rotor_axis.lwd"))
    est = diagram.block_by_name("est")
    est.params["recipe"]["poles"] = [-500, -450, -400]  # the recipe changed, L not redesigned
    assert stale_blocks(diagram) == ["est"]
    text = report_html(diagram)
    stale = text[text.index('<section id="stale">'):text.index('<section id="caution">')]
    assert "est" in stale and "Redesign" in stale
    design = text[text.index('<section id="design">'):text.index('<section id="stale">')]
    assert re.search(r"est \(estimator, place, plant P\) <span class=\"stale\">stale</span>", design)


def test_cli_writes_the_report_and_never_over_a_diagram(tmp_path, capsys):
    src = sample_path("two_zone_oven.lwd")
    out = tmp_path / "oven.html"
    assert cli_main(["report", str(src), "--html", str(out)]) == 0
    text = out.read_text(encoding="utf-8")
    assert _read(text).sections == list(SECTIONS)
    assert "block sketch" in text.lower()  # no renderer passed: the engine's sketch, and it says so
    assert "model-based" in capsys.readouterr().out
    victim = tmp_path / "copy.lwd"
    victim.write_bytes(Path(src).read_bytes())
    before = victim.read_bytes()
    assert cli_main(["report", str(src), "--html", str(victim)]) == 2
    assert victim.read_bytes() == before
    assert "never replaces a diagram" in capsys.readouterr().err
    assert cli_main(["report", str(victim), "--html", str(victim)]) == 2


def test_console_script_writes_the_report_where_qt_cannot_be_imported(tmp_path):
    out = tmp_path / "rotor.html"
    proc = run_without_qt(["report", str(sample_path("levitated_rotor_axis.lwd")), "--html", str(out)], tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert "Traceback" not in proc.stderr and "block sketch" in proc.stdout
    assert _read(out.read_text(encoding="utf-8")).sections == list(SECTIONS)
