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


# ---- every field of every method is editable ------------------------------------------------------
def _design_and_wait(win, qtbot, ed, step):
    """Design from the form; wait for the one undo step it makes (``step``: the stack's index before)."""
    assert ed.design()
    qtbot.waitUntil(lambda: _idle(win) and win.document.undo_stack.index() == step + 1, timeout=30000)


def test_sign_inputs_and_feedforward_outputs_are_edited_in_the_form(window, qtbot, tmp_path, capsys):
    window.show()
    assert window.open_sample(str(ROTOR))
    doc = window.document
    ed = _select(window, qtbot, "K")
    assert ed.sign_box.currentData() == -1 and ed.inputs_edit.text() == ""
    for w in (ed.sign_box, ed.inputs_edit, ed.integral_box):
        assert ed._form.isRowVisible(w)
    assert not ed._form.isRowVisible(ed.outputs_edit)  # feedforward only
    step = doc.undo_stack.index()
    ed.sign_box.setCurrentIndex(ed.sign_box.findData(1))
    ed.sign_box.activated.emit(ed.sign_box.currentIndex())  # as a pick with the mouse does
    ed.inputs_edit.setText("1")
    _design_and_wait(window, qtbot, ed, step)
    rec = doc.diagram.block_by_name("K").params["recipe"]
    assert rec["sign"] == 1 and rec["inputs"] == [1]
    A, B, _C = _plant(doc.diagram)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        K_ref = ct.place(A, B, [-80 + 60j, -80 - 60j, -150])  # python-control 0.10.2 place
    assert_allclose(np.array(doc.diagram.block_by_name("K").params["K"]), K_ref, rtol=1e-8)  # sign +1: the block holds K
    ref = _cli_design(tmp_path, doc.diagram, capsys)
    assert_allclose(np.array(doc.diagram.block_by_name("K").params["K"]), ref["K"], rtol=1e-10)
    # the feedforward block: its tracked outputs and sign
    ed = _select(window, qtbot, "N")
    assert ed._form.isRowVisible(ed.outputs_edit) and not ed._form.isRowVisible(ed.inputs_edit)
    assert ed.sign_box.currentData() == 1  # the feedforward default
    ed.outputs_edit.setText("1")
    ed.sign_box.setCurrentIndex(ed.sign_box.findData(-1))
    ed.sign_box.activated.emit(ed.sign_box.currentIndex())
    step = doc.undo_stack.index()
    _design_and_wait(window, qtbot, ed, step)
    rec = doc.diagram.block_by_name("N").params["recipe"]
    assert rec["outputs"] == [1] and rec["sign"] == -1
    ref = _cli_design(tmp_path, doc.diagram, capsys)
    assert_allclose(np.array(doc.diagram.block_by_name("N").params["K"]), ref["N"], rtol=1e-10)
    # closed form: N = -1 / (C (A - B K_design)^-1 B) with K_design = -K_block, times sign -1
    K_design = np.array(doc.diagram.block_by_name("K").params["K"])  # sign +1 above: the block holds K_design
    Cn = np.array([[1.0, 0.0, 0.0]])
    n_ref = -1.0 / (Cn @ np.linalg.solve(A - B @ K_design, B))
    assert_allclose(np.array(doc.diagram.block_by_name("N").params["K"]), -n_ref, rtol=1e-9)


@pytest.mark.parametrize(
    "block, field, text, message",
    [
        ("K", "inputs_edit", "1, x", "inputs used: 'x' is not a whole number"),
        ("K", "inputs_edit", "0", "inputs used: 0 is not a 1-based number"),
        ("K", "inputs_edit", "2", "recipe inputs [2] names [2], outside 1..1"),
        ("N", "outputs_edit", "one", "outputs tracked: 'one' is not a whole number"),
        ("K", "poles_edit", "-1, -2, zz", "poles: entry 3 'zz'"),
    ],
    ids=["inputs-not-a-number", "inputs-zero", "inputs-out-of-range", "outputs-not-a-number", "poles-entry"],
)
def test_a_bad_field_is_named_in_one_line_and_changes_nothing(window, qtbot, block, field, text, message):
    window.show()
    assert window.open_sample(str(ROTOR))
    doc = window.document
    before = json.loads(json.dumps(doc.diagram.block_by_name(block).params))
    count = doc.undo_stack.count()
    ed = _select(window, qtbot, block)
    getattr(ed, field).setText(text)
    ed.design()
    qtbot.waitUntil(lambda: _idle(window) and message in ed.message.text(), timeout=30000)
    assert "\n" not in ed.message.text()
    assert doc.undo_stack.count() == count
    assert doc.diagram.block_by_name(block).params == before


def test_lqr_cross_weight_and_kalman_g_are_edited_in_the_form(window, qtbot):
    window.show()
    assert window.open_sample(str(OVEN))
    doc = window.document
    ed = _select(window, qtbot, "K")
    assert ed._form.isRowVisible(ed.weights["N"]) and not ed._form.isRowVisible(ed.weights["G"])
    N = [[0.01, 0.0], [0.0, 0.02]]
    ed.weights["N"].setText(json.dumps(N))
    step = doc.undo_stack.index()
    _design_and_wait(window, qtbot, ed, step)
    assert doc.diagram.block_by_name("K").params["recipe"]["N"] == N
    A, B, C = _plant(doc.diagram)
    rec = doc.diagram.block_by_name("K").params["recipe"]
    Q = np.diag(rec["Q"]) if isinstance(rec["Q"], list) else rec["Q"] * np.eye(A.shape[0])
    R = rec["R"] * np.eye(B.shape[1]) if not isinstance(rec["R"], list) else np.diag(rec["R"])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        K_ref, _S, _E = ct.lqr(A, B, Q, R, np.array(N))  # python-control 0.10.2 lqr with cross weight
    assert_allclose(-np.array(doc.diagram.block_by_name("K").params["K"]), K_ref, rtol=1e-7)
    # Kalman: G and W given in the form (V left to the noise sources)
    ed = _select(window, qtbot, "est")
    assert ed._form.isRowVisible(ed.weights["G"]) and not ed._form.isRowVisible(ed.weights["N"])
    G = np.eye(A.shape[0]).tolist()
    W = [[0.5, 0.0], [0.0, 2.0]]
    ed.weights["G"].setText(json.dumps(G))
    ed.weights["W"].setText(json.dumps(W))
    step = doc.undo_stack.index()
    _design_and_wait(window, qtbot, ed, step)
    rec = doc.diagram.block_by_name("est").params["recipe"]
    assert rec["G"] == G and rec["W"] == W
    V = np.array(ed.checks["defaults"]["V"])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        L_ref, _P, _E = ct.lqe(A, np.array(G), C, np.array(W), V)  # python-control 0.10.2 lqe
    assert_allclose(np.array(doc.diagram.block_by_name("est").params["L"]), L_ref, rtol=1e-6)
    # G without W cannot be read: named, nothing changes
    ed = _select(window, qtbot, "est")
    ed.weights["W"].setText("")
    count = doc.undo_stack.count()
    ed.design()
    assert ed.message.text().startswith("G: state W too")
    assert doc.undo_stack.count() == count


def test_integral_action_is_edited_in_the_form(window, qtbot, tmp_path, capsys):
    from integral_diagrams import rotor_with_integral_action

    path = tmp_path / "rotor_integral.lwd"
    save(rotor_with_integral_action(), path)
    window.show()
    assert window.open_path(str(path))
    doc = window.document
    ed = _select(window, qtbot, "K")
    assert ed.integral_box.currentData() == "integral_gain" and ed.integral_outputs_edit.text() == "1"
    assert ed._form.isRowVisible(ed.integral_outputs_edit)
    assert "eig(A − B K) with the integrators: -150, -80 ± 60j, -60" in ed.result.text()
    ed.poles_edit.setText("-90 ± 40j, -160, -50")
    step = doc.undo_stack.index()
    _design_and_wait(window, qtbot, ed, step)
    # python-control 0.10.2 place on the plant augmented with the integral of r - y
    A, B, C = _plant(doc.diagram)
    Aa = np.block([[A, np.zeros((3, 1))], [-C, np.zeros((1, 1))]])
    Ba = np.vstack([B, [[0.0]]])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        Ka = ct.place(Aa, Ba, [-90 + 40j, -90 - 40j, -160, -50])
    assert_allclose(-np.array(doc.diagram.block_by_name("K").params["K"]), Ka[:, :3], rtol=1e-8)
    assert_allclose(-np.array(doc.diagram.block_by_name("integral_gain").params["K"]), Ka[:, 3:], rtol=1e-8)
    ref = _cli_design(tmp_path, doc.diagram, capsys)
    assert_allclose(np.array(doc.diagram.block_by_name("K").params["K"]), ref["K"], rtol=1e-10)
    # one step: undo brings both gains and the old poles back
    doc.undo_stack.undo()
    assert doc.diagram.block_by_name("K").params["recipe"]["poles"] == [[-80, 60], [-80, -60], -150, -60]
    # integral action off: the recipe is plain pole placement on the three plant states
    ed = _select(window, qtbot, "K")
    ed.integral_box.setCurrentIndex(ed.integral_box.findData(None))
    assert not ed._form.isRowVisible(ed.integral_outputs_edit)
    ed.poles_edit.setText("-80 ± 60j, -150")
    step = doc.undo_stack.index()
    _design_and_wait(window, qtbot, ed, step)
    assert "integral" not in doc.diagram.block_by_name("K").params["recipe"]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        K_ref = ct.place(A, B, [-80 + 60j, -80 - 60j, -150])  # python-control 0.10.2 place
    assert_allclose(-np.array(doc.diagram.block_by_name("K").params["K"]), K_ref, rtol=1e-8)


def test_the_recipe_form_fits_the_inspector_without_clipping(window, qtbot):
    # a field wider than the inspector pushes the page past its right edge (the scroll area has
    # no horizontal bar) and clips every line of the page. The inspector of a 1600-pixel-wide
    # window is about 310 pixels wide; the form must fit in 300 (common practice, no source).
    window.show()
    assert window.open_sample(str(ROTOR))
    for name in ("K", "N", "est"):
        ed = _select(window, qtbot, name)
        assert ed.minimumSizeHint().width() <= 300, name
