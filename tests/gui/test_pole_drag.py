"""Retune by dragging on the pole map: a scripted mouse drag moves a designed pole, the engine
redesigns K or L so the closed loop has the pole where the mouse let go (to plotting
resolution), every open view follows, and the whole drag is one undo step."""
from __future__ import annotations

import warnings

import control as ct
import numpy as np
import pytest
from numpy.testing import assert_allclose
from PySide6.QtCore import QPoint, Qt

from loopwright.engine.noise import noise_budget
from loopwright.engine.interconnect import assemble
from loopwright.engine.recipes import stale_blocks
from loopwright.gui.docks.pole_map_drag import moved_poles

from gui_helpers import SAMPLES

pytestmark = pytest.mark.qt

ROTOR = next(p for p in SAMPLES if p.stem == "levitated_rotor_axis")


def _plant(diagram):
    P = diagram.block_by_name("P").params
    return (np.asarray(P[k], float) for k in ("A", "B", "C"))


@pytest.fixture
def rotor_map(window, qtbot):
    window.show()
    assert window.open_sample(str(ROTOR))
    for key in ("poles", "noise"):
        window.view_docks[key].show()
    window.view_docks["poles"].raise_()
    window.views.refresh_visible()
    qtbot.waitUntil(lambda: window.views.is_idle() and window.live.is_current() and window.panels["poles"].data is not None,
                    timeout=30000)
    return window


def _settled(win):
    d = win.pole_dragger
    return not d.tasks.is_busy("retune") and win.views.is_idle() and not d._timer.isActive()


def _drag(qtbot, win, start: complex, path: list[complex]) -> complex:
    """Press on ``start``, move through ``path`` and release on its last point; returns where the
    mouse was let go, in plot coordinates (what the pole map reads at that pixel)."""
    d = win.pole_dragger
    vp = win.panels["poles"].canvas.viewport()
    px = d.pixel_of(start)
    qtbot.mousePress(vp, Qt.MouseButton.LeftButton, pos=QPoint(round(px.x()), round(px.y())))
    assert d.is_dragging()
    for z in path:
        p = d.pixel_of(z)
        qtbot.mouseMove(vp, QPoint(round(p.x()), round(p.y())))
        qtbot.wait(30)
    end = d.pixel_of(path[-1])
    end_px = QPoint(round(end.x()), round(end.y()))
    released_at = d._view_point(end_px)
    qtbot.mouseRelease(vp, Qt.MouseButton.LeftButton, pos=end_px)
    assert not d.is_dragging()
    qtbot.waitUntil(lambda: _settled(win), timeout=30000)
    return released_at


def _pixel_size(win) -> float:
    """Data units per pixel on the pole map (the resolution of a mouse position)."""
    vb = win.panels["poles"].plot.vb
    (x0, x1), (y0, y1) = vb.viewRange()
    r = vb.sceneBoundingRect()
    return max((x1 - x0) / r.width(), (y1 - y0) / r.height())


def test_dragging_a_controller_pair_moves_k_and_the_closed_loop(rotor_map, qtbot):
    win = rotor_map
    doc = win.document
    before_k = np.array(doc.diagram.block_by_name("K").params["K"])
    count = doc.undo_stack.count()
    released = _drag(qtbot, win, complex(-80, 60), [complex(-85, 65), complex(-95, 72), complex(-105, 80)])
    tol = 2 * _pixel_size(win)
    want = np.array([released, released.conjugate(), -150])
    A, B, C = _plant(doc.diagram)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        K_ref = ct.place(A, B, want)  # python-control 0.10.2 place
    K_block = np.array(doc.diagram.block_by_name("K").params["K"])
    assert not np.allclose(K_block, before_k)
    assert_allclose(-K_block, K_ref, rtol=1e-6)  # the gain block holds -K (recipe sign -1)
    # the closed loop (numpy eig of the assembled model) has the pair where the mouse let go
    cl = np.linalg.eigvals(assemble(doc.diagram).A)
    for p in (released, released.conjugate()):
        assert np.min(np.abs(cl - p)) < tol
    assert abs(released - complex(-105, 80)) < tol
    # one drag, one undo step, back to the sample's gains
    assert doc.undo_stack.count() == count + 1
    doc.undo_stack.undo()
    assert_allclose(np.array(doc.diagram.block_by_name("K").params["K"]), before_k)
    # the feedforward gain that reads K followed the drag and came back with it
    assert doc.diagram.block_by_name("N").params["K"] == [[3750.0]]


def test_dragging_an_estimator_pole_moves_l_and_the_noise_budget_follows(rotor_map, qtbot):
    win = rotor_map
    doc = win.document
    noise = win.panels["noise"]
    rms_before = noise_budget(assemble(doc.diagram)).line("error:est[3]").rms
    released = _drag(qtbot, win, complex(-400, 0), [complex(-450, 5), complex(-520, -3), complex(-600, 0)])
    tol = 2 * _pixel_size(win)
    A, _B, C = _plant(doc.diagram)
    L = np.array(doc.diagram.block_by_name("est").params["L"])
    est = np.sort(np.linalg.eigvals(A - L @ C).real)
    assert_allclose(est, np.sort([released.real, -350, -300]), atol=1e-6 * 600)
    assert abs(released.real + 600) < tol
    assert stale_blocks(doc.diagram) == []  # the drag designed L (and nothing is left stale)
    # the open noise budget shows the engine's budget of the retuned loop
    qtbot.waitUntil(lambda: _settled(win), timeout=30000)
    ref = noise_budget(assemble(doc.diagram))
    rms_after = ref.line("error:est[3]").rms
    assert not np.isclose(rms_after, rms_before, rtol=1e-3)
    assert_allclose(noise.budget.line("error:est[3]").rms, rms_after, rtol=1e-9)


def test_moved_poles_keep_pairs_and_real_poles():
    poles = np.array([-80 + 60j, -80 - 60j, -150])
    new = moved_poles(poles, 1, complex(-90, -70))
    assert_allclose(new, [-90 + 70j, -90 - 70j, -150])
    new = moved_poles(poles, 2, complex(-200, 33))
    assert_allclose(new, [-80 + 60j, -80 - 60j, -200])
    new = moved_poles(poles, 0, complex(-70, 0))  # onto the axis: still a pair
    assert new[0].imag > 0 and new[1] == np.conj(new[0])


@pytest.fixture
def rotor_integral_map(window, qtbot, tmp_path):
    """The rotor sample with integral action drawn in (tests/integral_diagrams.py)."""
    from loopwright.engine.project import save

    from integral_diagrams import rotor_with_integral_action

    path = tmp_path / "rotor_integral.lwd"
    save(rotor_with_integral_action(), path)
    window.show()
    assert window.open_path(str(path))
    window.view_docks["poles"].show()
    window.view_docks["poles"].raise_()
    window.views.refresh_visible()
    qtbot.waitUntil(lambda: window.views.is_idle() and window.live.is_current() and window.panels["poles"].data is not None,
                    timeout=30000)
    return window


def test_dragging_an_integral_action_pole_redesigns_both_gains(rotor_integral_map, qtbot):
    win = rotor_integral_map
    doc = win.document
    before = {n: np.array(doc.diagram.block_by_name(n).params["K"]) for n in ("K", "integral_gain")}
    count = doc.undo_stack.count()
    released = _drag(qtbot, win, complex(-60, 0), [complex(-55, 3), complex(-45, -2), complex(-40, 0)])
    tol = 2 * _pixel_size(win)
    assert abs(released.real + 40) < tol
    # Reference: python-control 0.10.2 place on the plant augmented with the integral of
    # r - y (x_i' = -C x), u = -[K_x, K_i] [x; x_i]; the block holds -K_x, the integral gain
    # block (fed by the integral of r - y) holds -K_i of that augmented design.
    A, B, C = _plant(doc.diagram)
    Aa = np.block([[A, np.zeros((3, 1))], [-C, np.zeros((1, 1))]])
    Ba = np.vstack([B, [[0.0]]])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        Ka = ct.place(Aa, Ba, [-80 + 60j, -80 - 60j, -150, released.real])
    K_x = np.array(doc.diagram.block_by_name("K").params["K"])
    K_i = np.array(doc.diagram.block_by_name("integral_gain").params["K"])
    assert_allclose(-K_x, Ka[:, :3], rtol=1e-6)
    assert_allclose(-K_i, Ka[:, 3:], rtol=1e-6)
    assert not np.allclose(K_i, before["integral_gain"])
    # the closed loop (numpy eig of the assembled model) has the pole where the mouse let go
    cl = np.linalg.eigvals(assemble(doc.diagram).A)
    assert np.min(np.abs(cl - released.real)) < tol
    assert stale_blocks(doc.diagram) == []
    # the open pole map followed: its table lists the dragged pole
    qtbot.waitUntil(lambda: _settled(win), timeout=30000)
    shown = np.array([complex(r["re"], r["im"]) for r in win.panels["poles"].data["table"]])
    assert np.min(np.abs(shown - released.real)) < tol
    # one drag, one undo step, both gains back
    assert doc.undo_stack.count() == count + 1
    doc.undo_stack.undo()
    for n, k in before.items():
        assert_allclose(np.array(doc.diagram.block_by_name(n).params["K"]), k)
