"""The Qt-free SVG plots (tests of engine/svg_plot.py) and ``freq|time|margins --plot``: the
file parses as XML, every curve point maps back to the engine's numbers, ticks are where a
closed form puts them, the output name is checked like every other output, and no Qt is
imported on the way."""
from __future__ import annotations

import os

import importlib.resources as ir
import subprocess
import sys
import xml.etree.ElementTree as ET
from pathlib import Path

import control as ct
import numpy as np
import pytest
from numpy.testing import assert_allclose

from console import run_without_qt
from loopwright.engine import CAUTION
from loopwright.engine.cli import main
from loopwright.engine.interconnect import assemble
from loopwright.engine.project import load
from loopwright.engine.responses import step_response
from loopwright.engine.svg_plot import Curve, PlotArea, figure_svg, linear_ticks, log_ticks
from loopwright.engine.views_data import loop_break_view, pair_frequency_response, time_grid

SVG = "{http://www.w3.org/2000/svg}"


def _sample(name: str) -> str:
    return str(ir.files("loopwright.samples") / name)


def _plots(path) -> list[dict]:
    """Each plot area of an SVG file: its mapping and its curves as data (inverted pixels)."""
    root = ET.parse(path).getroot()
    out = []
    for g in root.iter(f"{SVG}g"):
        if g.get("class") != "plot":
            continue
        x0, x1 = map(float, g.get("data-x-range").split())
        y0, y1 = map(float, g.get("data-y-range").split())
        left, top, w, h = map(float, g.get("data-box").split())
        log_x = g.get("data-x-log") == "1"
        curves = {}
        for p in g.iter(f"{SVG}path"):
            if p.get("class") != "curve":
                continue
            pts = [tuple(map(float, tok[1:].split())) for tok in _tokens(p.get("d"))]
            px = np.array([a for a, _ in pts])
            py = np.array([b for _, b in pts])
            u = (px - left) / w
            if log_x:
                x = 10 ** (np.log10(x0) + u * (np.log10(x1) - np.log10(x0)))
            else:
                x = x0 + u * (x1 - x0)
            y = y0 + (1 - (py - top) / h) * (y1 - y0)
            curves[p.get("data-label")] = (x, y, (px, py))
        marks = {m.get("data-label"): (float(m.get("data-x")), float(m.get("data-y"))) for m in g.iter(f"{SVG}g") if m.get("class") == "mark"}
        out.append({"x": (x0, x1), "y": (y0, y1), "box": (left, top, w, h), "log_x": log_x, "curves": curves, "marks": marks})
    return out


def _tokens(d: str) -> list[str]:
    toks, cur = [], ""
    for part in d.split():
        if part[0] in "ML":
            if cur:
                toks.append(cur)
            cur = part
        else:
            cur += " " + part
    return toks + [cur] if cur else toks


def _pixel_tolerance(plot, axis: str) -> float:
    """Data units per 0.002 px (coordinates are written with 3 decimals)."""
    lo, hi = plot[axis]
    size = plot["box"][2] if axis == "x" else plot["box"][3]
    return 0.002 * (hi - lo) / size


# ---- ticks -------------------------------------------------------------------------------

@pytest.mark.parametrize("lo,hi,expected", [
    (-1.2, 3.7, [-1.0, 0.0, 1.0, 2.0, 3.0]),      # step 1 (closed form: raw step 4.9/6 -> 1)
    (0.0, 100.0, [0.0, 20.0, 40.0, 60.0, 80.0, 100.0]),  # raw 16.7 -> 20
    (-0.013, 0.011, [-0.01, -0.005, 0.0, 0.005, 0.01]),  # raw 0.004 -> 0.005
], ids=["unit steps", "steps of 20", "steps of 0.005"])
def test_linear_ticks_are_round_and_cover_the_range(lo, hi, expected):
    assert_allclose(linear_ticks(lo, hi), expected, atol=1e-12)


def test_log_ticks_are_the_decades_inside_the_range():
    # closed form: 10^k for ceil(log10 lo) <= k <= floor(log10 hi); every other one past 8
    assert_allclose(log_ticks(0.05, 2000.0), [0.1, 1.0, 10.0, 100.0, 1000.0])
    assert_allclose(log_ticks(1e-6, 1e6), [10.0**k for k in range(-6, 7, 2)])
    assert log_ticks(-1.0, 10.0) == []


def test_a_curve_is_clipped_to_its_plot_and_breaks_at_non_finite_points(tmp_path):
    x = np.linspace(0.0, 10.0, 11)
    y = x.copy()
    y[5] = np.nan
    area = PlotArea("x", "y", curves=[Curve("line", x, y)], x_range=(0.0, 10.0), y_range=(0.0, 4.0))
    path = tmp_path / "clip.svg"
    path.write_text(figure_svg([area], title="clip <test> & more"), encoding="utf-8")
    (plot,) = _plots(path)
    cx, cy, (px, py) = plot["curves"]["line"]
    left, top, w, h = plot["box"]
    assert np.all((px >= left - 1e-6) & (px <= left + w + 1e-6) & (py >= top - 1e-6) & (py <= top + h + 1e-6))
    # y = x leaves the plot at (4, 4): the last point drawn is there (closed form)
    assert cx.max() == pytest.approx(4.0, abs=_pixel_tolerance(plot, "x"))
    d = next(p.get("d") for p in ET.parse(path).getroot().iter(f"{SVG}path") if p.get("class") == "curve")
    assert d.count("M") == 1  # the break at x = 5 lies outside the plot; inside it is one line
    root = ET.parse(path).getroot()
    assert root.find(f"{SVG}title").text == "clip <test> & more"
    assert CAUTION in root.find(f"{SVG}desc").text


# ---- the command line's plots --------------------------------------------------------------

def test_freq_plot_holds_the_engines_magnitude_and_phase(tmp_path, capsys):
    rotor = _sample("levitated_rotor_axis.lwd")
    out = tmp_path / "rotor_freq.svg"
    assert main(["freq", rotor, "--from", "dl", "--to", "y", "--plot", str(out)]) == 0
    assert f"wrote {out}" in capsys.readouterr().err
    mag_plot, phase_plot = _plots(out)
    model = assemble(load(rotor))
    ref = pair_frequency_response(model, "dl", "y")
    x, y, _ = mag_plot["curves"]["y <- dl"]
    # every drawn point is a point of the engine's curve (the plot spans the whole curve)
    assert x.size == ref.w_rad_s.size
    assert_allclose(np.log10(x), np.log10(ref.w_rad_s), atol=1e-5)
    assert_allclose(y, ref.mag_db[:, 0, 0], atol=_pixel_tolerance(mag_plot, "y"))
    _, ph, _ = phase_plot["curves"]["y <- dl"]
    assert_allclose(ph, ref.phase_deg[:, 0, 0], atol=_pixel_tolerance(phase_plot, "y"))
    # and python-control 0.10 agrees with the drawn magnitude at the drawn frequencies
    g = np.asarray(ct.ss(*model.pair("dl", "y"))(1j * ref.w_rad_s, squeeze=False))[0, 0]
    assert_allclose(y, 20 * np.log10(np.abs(g)), atol=2 * _pixel_tolerance(mag_plot, "y"))
    (label, (w_pk, db_pk)), = mag_plot["marks"].items()
    assert (w_pk, db_pk) == pytest.approx(ref.peak())
    assert label.startswith("peak ")


def test_time_plot_holds_the_engines_step_response(tmp_path):
    oven = _sample("two_zone_oven.lwd")
    out = tmp_path / "oven_step.svg"
    assert main(["time", oven, "--step", "r", "--to", "y", "--plot", str(out)]) == 0
    (plot,) = _plots(out)
    d = load(oven)
    model = assemble(d)
    t = time_grid(d, model)
    cols, rows = model.input_slice("r"), model.signal_slice("y")
    res = step_response(model.A, model.B[:, cols], model.C[rows], model.D[rows, cols], t)
    names = [f"{o} <- {i}" for o in model.output_names[rows] for i in model.input_names[cols]]
    Y = res.y.reshape(res.y.shape[0], -1)
    assert set(plot["curves"]) == set(names)
    for k, name in enumerate(names):
        x, y, _ = plot["curves"][name]
        assert_allclose(x, res.t, atol=_pixel_tolerance(plot, "x"))
        assert_allclose(y, Y[:, k], atol=_pixel_tolerance(plot, "y"))


def test_margins_plot_holds_the_loop_transfer_and_the_critical_point(tmp_path, capsys):
    rotor = _sample("levitated_rotor_axis.lwd")
    out = tmp_path / "rotor_margins.svg"
    assert main(["margins", rotor, "--plot", str(out)]) == 0
    text = capsys.readouterr().out
    (plot,) = _plots(out)
    view = loop_break_view(load(rotor), "P.u")
    assert plot["marks"]["critical point -1"] == (-1.0, 0.0)
    x, y, _ = plot["curves"]["L(jw) at P.u"]
    L = view.curves[0]
    # the drawn points are points of L(jw) (clipped to the frame: compare each drawn point
    # with the nearest point of the engine's curve)
    tol = max(_pixel_tolerance(plot, "x"), _pixel_tolerance(plot, "y")) * 2
    Lf = L[np.isfinite(L)]
    for xi, yi in zip(x[::25], y[::25]):
        assert np.min(np.abs(Lf - complex(xi, yi))) < tol + 1e-9
    notes = "".join(t.text or "" for t in ET.parse(out).getroot().iter(f"{SVG}text"))
    assert f"phase margin {view.margins.phase_margin_deg:.4g} deg" in notes
    assert "phase margin" in text  # the usual printout still comes


@pytest.mark.parametrize("name,why", [
    ("copy.lwd", "is a diagram file"),
    ("plot.png", "SVG only"),
    ("folder/", "names a folder"),
], ids=["a diagram", "a PNG", "a folder"])
def test_plot_output_is_refused_in_one_line_before_anything_is_written(tmp_path, capsys, name, why):
    rotor = tmp_path / "rotor.lwd"
    rotor.write_bytes(Path(_sample("levitated_rotor_axis.lwd")).read_bytes())
    (tmp_path / "folder").mkdir()
    target = str(tmp_path / name) if name != "folder/" else str(tmp_path / "folder") + "/"
    for argv in (["freq", str(rotor), "--from", "dl", "--to", "y"], ["time", str(rotor), "--to", "y"], ["margins", str(rotor)]):
        assert main([*argv, "--plot", target]) == 2
        captured = capsys.readouterr()
        assert why in captured.err and captured.err.count("\n") == 1 and "Traceback" not in captured.err
        assert captured.out == ""  # refused before any computing or printing
    assert not (tmp_path / "copy.lwd").exists() and not (tmp_path / "plot.png").exists()


def test_plot_never_replaces_the_diagram_being_read(tmp_path, capsys):
    # a diagram saved under an .svg name is still a diagram: the plot does not replace it
    rotor = tmp_path / "rotor.svg"
    original = Path(_sample("levitated_rotor_axis.lwd")).read_bytes()
    rotor.write_bytes(original)
    assert main(["margins", str(rotor), "--plot", str(rotor)]) == 2
    assert "never replaces a diagram" in capsys.readouterr().err
    assert rotor.read_bytes() == original


@pytest.mark.parametrize("argv", [
    ["freq", "{rotor}", "--from", "dl", "--to", "y", "--plot", "{tmp}/f.svg"],
    ["time", "{rotor}", "--to", "y", "--t-end", "0.01", "--plot", "{tmp}/t.svg"],
    ["margins", "{rotor}", "--plot", "{tmp}/m.svg"],
], ids=lambda a: a[0])
def test_plots_are_drawn_with_qt_unimportable(argv, tmp_path):
    args = [a.format(rotor=_sample("levitated_rotor_axis.lwd"), tmp=tmp_path) for a in argv]
    proc = run_without_qt(args, tmp_path)
    assert proc.returncode == 0, proc.stderr
    svg = Path(args[-1])
    assert ET.parse(svg).getroot().tag == f"{SVG}svg"
    env = {**os.environ, "PYTHONPATH": str(tmp_path / "blocked")}  # the blocker run_without_qt made
    probe = subprocess.run([sys.executable, "-c", "import PySide6"], capture_output=True, text=True, env=env)
    assert probe.returncode != 0 and "blocked for this test" in probe.stderr
