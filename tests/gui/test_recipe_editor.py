"""Recipes in the inspector: designing there gives the gains `loopwright design` gives (and
python-control's place, lqr and lqe); the checks are shown in place; stale and not-designed
blocks are tagged on the canvas; a design is one undo step, a weight-slider drag too."""
from __future__ import annotations

import json
import warnings

import control as ct
import numpy as np
import pytest
from numpy.testing import assert_allclose

from loopwright.engine.cli import main as cli_main
from loopwright.engine.project import save
from loopwright.gui.commands import SetParams
from loopwright.gui.recipe_editor import format_poles, parse_poles

from gui_helpers import SAMPLES

pytestmark = pytest.mark.qt

ROTOR = next(p for p in SAMPLES if p.stem == "levitated_rotor_axis")
OVEN = next(p for p in SAMPLES if p.stem == "two_zone_oven")


def _select(win, qtbot, name):
    b = win.document.diagram.block_by_name(name)
    win.scene.clearSelection()
    win.scene.block_items[b.id].setSelected(True)
    qtbot.waitUntil(lambda: getattr(win.inspector, "recipe_editor", None) is not None
                    and win.inspector.recipe_editor.block_name == name, timeout=5000)
    ed = win.inspector.recipe_editor
    qtbot.waitUntil(lambda: ed.checks is not None, timeout=30000)
    return ed


def _idle(win):
    s = getattr(win.inspector, "recipe_session", None)  # made when a gain or estimator is first shown
    return (s is None or not s.tasks.is_busy("design")) and win.design_marks.is_idle() and win.live.is_current()


def _cli_design(tmp_path, diagram, capsys) -> dict:
    path = tmp_path / "probe.lwd"
    save(diagram, path)
    capsys.readouterr()
    assert cli_main(["design", str(path), "--json"]) == 0
    return {b["block"]: np.array(b["matrix"]) for b in json.loads(capsys.readouterr().out)["blocks"]}


def _plant(diagram):
    P = diagram.block_by_name("P").params
    return tuple(np.asarray(P[k], float) for k in ("A", "B", "C"))


def test_pole_text_round_trip():
    rec = parse_poles("-80 ± 60j, -150")
    assert rec == [[-80.0, 60.0], [-80.0, -60.0], -150.0]
    assert format_poles(rec) == "-80 ± 60j, -150"
    assert parse_poles("-2+3j, -2-3j") == [[-2.0, 3.0], [-2.0, -3.0]]
    with pytest.raises(ValueError, match="entry 2"):
        parse_poles("-1, abc")


def test_designing_poles_in_the_inspector_equals_loopwright_design(window, qtbot, tmp_path, capsys):
    window.show()
    assert window.open_sample(str(ROTOR))
    ed = _select(window, qtbot, "K")
    assert ed.method_box.currentData() == "ackermann"
    assert ed.poles_edit.text() == "-80 ± 60j, -150"
    assert "designed" in ed.state_label.text()
    count = window.document.undo_stack.count()
    ed.poles_edit.setText("-90 ± 50j, -160")
    assert ed.design()
    qtbot.waitUntil(lambda: _idle(window) and window.document.undo_stack.count() == count + 1, timeout=30000)
    d = window.document.diagram
    ref = _cli_design(tmp_path, d, capsys)
    assert_allclose(np.array(d.block_by_name("K").params["K"]), ref["K"], rtol=1e-10)
    assert_allclose(np.array(d.block_by_name("N").params["K"]), ref["N"], rtol=1e-10)  # feedforward followed
    A, B, _C = _plant(d)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        K_ref = ct.place(A, B, [-90 + 50j, -90 - 50j, -160])  # python-control 0.10.2 place
    assert_allclose(-np.array(d.block_by_name("K").params["K"]), K_ref, rtol=1e-8)
    # the checks in place: no uncontrollable mode, the poles asked for, the gain's size
    ed = _select(window, qtbot, "K")
    text = ed.result.text()
    assert "no uncontrollable modes" in text and "eig(A − B K): -160, -90 ± 50j" in text
    assert f"{np.linalg.norm(K_ref, 2):.5g}" in text
    # one undo step takes K and N back
    window.document.undo_stack.undo()
    assert window.document.diagram.block_by_name("K").params["K"] == [[-6850.0, -95.0, -13.5]]


def test_lqr_and_kalman_from_the_inspector_match_python_control(window, qtbot, tmp_path, capsys):
    window.show()
    assert window.open_sample(str(OVEN))
    ed = _select(window, qtbot, "K")
    assert ed.method_box.currentData() == "lqr"
    ed.weights["R"].setText("0.05")
    count = window.document.undo_stack.count()
    ed.design()
    qtbot.waitUntil(lambda: _idle(window) and window.document.undo_stack.count() == count + 1, timeout=30000)
    d = window.document.diagram
    A, B, C = _plant(d)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        K_ref, _S, _E = ct.lqr(A, B, np.diag([1.0, 1.0]), 0.05 * np.eye(B.shape[1]))  # python-control 0.10.2 lqr
    assert_allclose(-np.array(d.block_by_name("K").params["K"]), K_ref, rtol=1e-7)
    ref = _cli_design(tmp_path, d, capsys)
    for name in ("K", "N", "est"):
        got = np.array(d.block_by_name(name).params["K" if name != "est" else "L"])
        assert_allclose(got, ref[name], rtol=1e-9, atol=1e-12)
    # Kalman: V is left to the diagram's noise sources; the editor shows that default
    ed = _select(window, qtbot, "est")
    assert ed.method_box.currentData() == "kalman"
    V = np.array(ed.checks["defaults"]["V"])
    assert "from n" in ed.weights["V"].placeholderText()
    rec = d.block_by_name("est").params["recipe"]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        L_ref, _P, _E = ct.lqe(A, np.array(rec["G"]).reshape(A.shape[0], -1), C, np.array(rec["W"]), V)  # python-control 0.10.2 lqe
    assert_allclose(np.array(d.block_by_name("est").params["L"]), L_ref, rtol=1e-6)


def test_weight_slider_drag_is_one_undo_step_on_a_log_scale(window, qtbot):
    window.show()
    assert window.open_sample(str(OVEN))
    ed = _select(window, qtbot, "K")
    count = window.document.undo_stack.count()
    ed.slider.setSliderDown(True)  # as a mouse press on the handle does
    for v in (50, 120, 200):  # 10^0.5, 10^1.2, 10^2 times R
        ed.slider.setValue(v)
        qtbot.waitUntil(lambda: _idle(window), timeout=30000)
    assert window.inspector.recipe_editor is ed  # the page stayed while the slider was held
    ed.slider.setSliderDown(False)
    qtbot.waitUntil(lambda: _idle(window), timeout=30000)
    d = window.document.diagram
    assert window.document.undo_stack.count() == count + 1
    assert_allclose(d.block_by_name("K").params["recipe"]["R"], 0.01 * 100, rtol=1e-12)
    A, B, _C = _plant(d)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        K_ref, _S, _E = ct.lqr(A, B, np.eye(2), 1.0 * np.eye(B.shape[1]))  # python-control 0.10.2 lqr
    assert_allclose(-np.array(d.block_by_name("K").params["K"]), K_ref, rtol=1e-7)
    window.document.undo_stack.undo()
    assert window.document.diagram.block_by_name("K").params["recipe"]["R"] == 0.01


def test_stale_and_not_designed_blocks_are_tagged_on_the_canvas(window, qtbot):
    window.show()
    assert window.open_sample(str(ROTOR))
    qtbot.waitUntil(lambda: _idle(window), timeout=30000)
    assert window.design_marks.tag_texts() == {}
    doc = window.document
    P = doc.diagram.block_by_name("P")
    params = json.loads(json.dumps(P.params))
    params["A"][1][0] = 4500.0  # a stiffer magnet: every design of P is now stale
    doc.push(SetParams(doc, P.id, params))
    qtbot.waitUntil(lambda: _idle(window) and len(window.design_marks.tag_texts()) == 3, timeout=30000)
    names = {doc.diagram.blocks[b].name: t for b, t in window.design_marks.tag_texts().items()}
    assert names == {"K": "stale", "est": "stale", "N": "stale"}
    ed = _select(window, qtbot, "est")
    assert ed.state_label.text().startswith("STALE")
    K = doc.diagram.block_by_name("K")
    kp = json.loads(json.dumps(K.params))
    del kp["recipe"]["designed_for"]
    doc.push(SetParams(doc, K.id, kp))
    qtbot.waitUntil(lambda: _idle(window) and window.design_marks.tag_texts().get(K.id) == "not designed", timeout=30000)
    ed = _select(window, qtbot, "K")
    assert ed.state_label.text().startswith("not designed")
    ed.design()
    qtbot.waitUntil(lambda: _idle(window) and K.id not in window.design_marks.tag_texts(), timeout=30000)
    # N reads K: designing K redesigned it too; est still waits for its own design
    assert {doc.diagram.blocks[b].name for b in window.design_marks.tag_texts()} == {"est"}
