"""The hand-over dialog: its sampled margins are the engine's, its C compiles and runs like the
controller discretised by python-control, and it never writes over a diagram."""
from __future__ import annotations

import json
import subprocess
import warnings

import control as ct
import numpy as np
import pytest
from numpy.testing import assert_allclose

from loopwright.engine.lumped import lumped_controller, sampled_loop_margins
from loopwright.engine.project import load
from loopwright.gui.handover_dialog import MARGIN_ROWS

from gui_helpers import SAMPLES
from tests.engine.test_ccode import _CC, _MAIN

pytestmark = pytest.mark.qt

ROTOR = next(p for p in SAMPLES if p.stem == "levitated_rotor_axis")
TS = 0.0002  # 5 kHz: a rate a drive controller of this rotor might run at (demo data)


@pytest.fixture
def dialog(window, qtbot):
    window.show()
    assert window.open_sample(str(ROTOR))
    dlg = window.open_handover()
    qtbot.addWidget(dlg)
    return dlg


def _settle(dlg, qtbot):
    qtbot.waitUntil(lambda: not dlg.tasks.is_busy("preview") and not dlg._timer.isActive(), timeout=30000)


def test_defaults_are_the_estimator_loop_and_margins_match_the_engine(dialog, qtbot):
    dialog.ts_edit.setText(repr(TS))
    _settle(dialog, qtbot)
    req = dialog.request()
    assert req.measured == ("y_meas",) and req.actuator == ("u",)
    ref = sampled_loop_margins(load(ROTOR), measured=["y_meas"], actuator="u", ts=TS, method="zoh")
    for r, (_label, key, idx) in enumerate(MARGIN_ROWS):
        for col, m in ((0, ref.continuous.as_dict()), (1, ref.sampled.as_dict())):
            want = m[key] if idx is None else m[key][idx]
            got = dialog.table.item(r, col).text()
            if isinstance(want, bool):
                assert got == ("yes" if want else "NO")
            else:
                assert_allclose(float(got), want, rtol=1e-4)  # five digits shown
    # sampling costs phase: a fact of the trade (common practice, no source)
    assert ref.sampled.phase_margin_deg < ref.continuous.phase_margin_deg
    assert "3 states" in dialog.summary.text()  # the estimator is the controller's only dynamics


def test_tustin_with_prewarp_is_what_the_engine_computes(dialog, qtbot):
    dialog.ts_edit.setText(repr(TS))
    dialog.method_box.setCurrentIndex(dialog.method_box.findData("tustin"))
    assert dialog.prewarp_edit.isEnabled()
    dialog.prewarp_edit.setText("120")
    _settle(dialog, qtbot)
    ref = sampled_loop_margins(load(ROTOR), measured=["y_meas"], actuator="u", ts=TS, method="tustin", prewarp_rad_s=120.0)
    assert_allclose(float(dialog.table.item(0, 1).text()), ref.sampled.phase_margin_deg, rtol=1e-4)


@pytest.mark.skipif(_CC is None, reason="no C compiler (cc/gcc) on this machine; C round trip not checked")
def test_written_c_compiles_and_runs_like_python_control_c2d(dialog, qtbot, tmp_path):
    dialog.ts_edit.setText(repr(TS))
    dialog.output_edit.setText(str(tmp_path / "rotor_ctrl.c"))
    _settle(dialog, qtbot)
    with qtbot.waitSignal(dialog.written, timeout=30000) as sig:
        dialog.write()
    assert sig.args[0] == [str(tmp_path / "rotor_ctrl.c"), str(tmp_path / "rotor_ctrl.h")]
    src = (tmp_path / "rotor_ctrl.c").read_text()
    assert "model-based" in src  # the caution travels with the code
    (tmp_path / "main.c").write_text(_MAIN.format(prefix="rotor_ctrl", up="ROTOR_CTRL", real="double"))
    exe = tmp_path / "run"
    res = subprocess.run([_CC, "-std=c99", "-Wall", "-Wextra", "-pedantic", "-Werror", "-O1", "-o", str(exe),
                          str(tmp_path / "main.c"), str(tmp_path / "rotor_ctrl.c")], capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr
    k = lumped_controller(load(ROTOR), measured=["y_meas"], actuator=["u"])
    u = 1e-5 * np.sin(np.arange(40) * 0.3)[:, None]  # a gap wobble of 10 um (demo data)
    stdin = f"{u.shape[0]}\n" + "\n".join(repr(float(v)) for v in u[:, 0]) + "\n"
    out = subprocess.run([str(exe)], input=stdin, capture_output=True, text=True, timeout=60)
    assert out.returncode == 0, out.stderr
    got = np.array([[float(v) for v in line.split()] for line in out.stdout.strip().splitlines()])
    # reference: python-control 0.10.2 c2d (zero-order hold) and forced_response
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        sysd = ct.c2d(ct.ss(k.A, k.B, k.C, k.D), TS, method="zoh")
        ref = ct.forced_response(sysd, T=np.arange(40) * TS, U=u[:, 0]).outputs
    assert_allclose(got[:, 0], np.ravel(ref), rtol=1e-7, atol=1e-9 * np.max(np.abs(ref)))


def test_json_hand_over_holds_the_sampled_controller(dialog, qtbot, tmp_path):
    dialog.ts_edit.setText("0.001")
    dialog.format_box.setCurrentIndex(dialog.format_box.findData("json"))
    dialog.output_edit.setText(str(tmp_path / "ctrl.json"))
    assert not dialog.precision_box.isEnabled()
    _settle(dialog, qtbot)
    with qtbot.waitSignal(dialog.written, timeout=30000):
        dialog.write()
    data = json.loads((tmp_path / "ctrl.json").read_text())
    k = lumped_controller(load(ROTOR), measured=["y_meas"], actuator=["u"])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        sysd = ct.c2d(ct.ss(k.A, k.B, k.C, k.D), 0.001, method="zoh")  # python-control 0.10.2 c2d
    assert data["sample_period_s"] == 0.001 and "model-based" in data["caution"]
    for name in ("A", "B", "C", "D"):
        assert_allclose(np.array(data[name]), getattr(sysd, name), rtol=1e-9, atol=1e-12)


def test_hand_over_never_replaces_the_diagram(dialog, qtbot, tmp_path):
    victim = tmp_path / "rotor.lwd"
    victim.write_bytes(ROTOR.read_bytes())
    before = victim.read_bytes()
    dialog.format_box.setCurrentIndex(dialog.format_box.findData("json"))
    for name in ("rotor.lwd", "rotor.LWD"):
        dialog.output_edit.setText(str(tmp_path / name))
        dialog.write()
        assert "never replaces a diagram" in dialog.status.text()
    # C writes stem.c and stem.h: a diagram saved as rotor.h is refused as well
    (tmp_path / "ctl.h").write_bytes(ROTOR.read_bytes())
    dialog.format_box.setCurrentIndex(dialog.format_box.findData("c"))
    dialog.output_edit.setText(str(tmp_path / "ctl.c"))
    dialog.write()
    assert "diagram" in dialog.status.text()
    assert not (tmp_path / "ctl.c").exists()
    assert victim.read_bytes() == before


def test_bad_sample_period_is_named_in_one_line(dialog, qtbot):
    for text in ("abc", "-1", "0"):
        dialog.ts_edit.setText(text)
        dialog.compute()
        assert dialog.status.text().startswith("sample period")
