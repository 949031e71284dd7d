"""Block shapes and orthogonal wire routes (tests of gui/canvas/geometry.py; no Qt needed)."""
from __future__ import annotations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from loopwright.engine.diagram import Block
from loopwright.gui.canvas.geometry import orient, orthogonalize, port_spots, route, simplify

DIRS = [(1.0, 0.0), (-1.0, 0.0), (0.0, 1.0), (0.0, -1.0)]
coord = st.floats(min_value=-500, max_value=500, allow_nan=False).map(lambda v: round(v / 10) * 10)


def _orthogonal(pts) -> bool:
    return all(abs(a[0] - b[0]) < 1e-9 or abs(a[1] - b[1]) < 1e-9 for a, b in zip(pts, pts[1:]))


@settings(max_examples=60, deadline=None)
@given(px=coord, py=coord, qx=coord, qy=coord, dp=st.sampled_from(DIRS), dq=st.sampled_from(DIRS),
       bends=st.lists(st.tuples(coord, coord), max_size=3))
def test_every_route_is_orthogonal_and_runs_from_port_to_port(px, py, qx, qy, dp, dq, bends):
    pts = route((px, py), dp, (qx, qy), dq, bends=[list(b) for b in bends] or None, detour_y=max(py, qy) + 50)
    assert pts[0] == (px, py) and pts[-1] == (qx, qy)
    assert _orthogonal(pts)


def test_a_forward_wire_leaves_and_enters_horizontally():
    pts = route((0, 0), (1, 0), (100, 30), (-1, 0))
    assert pts == [(0, 0), (50.0, 0.0), (50.0, 30.0), (100, 30)]


def test_a_feedback_wire_runs_back_in_a_lane_below():
    pts = route((100, 0), (1, 0), (0, 0), (-1, 0), detour_y=60)
    assert all(y <= 60 for _, y in pts) and any(y == 60 for _, y in pts)
    assert _orthogonal(pts)


def test_a_wire_into_the_bottom_of_a_summing_junction_comes_up_from_below():
    pts = route((100, 0), (1, 0), (0, 15), (0, 1))
    assert pts[-2][0] == 0 and pts[-2][1] > 15  # last leg rises into the port


def test_a_wire_from_a_lower_row_into_a_junction_from_below_crosses_in_the_lane_between_rows():
    # Gain K sits below the forward row, unmirrored; its output turns back up into the
    # junction's lower input. The leg level with the junction's stub (y = 29) would run
    # along the bottom of a plant in the forward row (y from -28 to 28); the lane between
    # the rows (y = 56.5) is free (common practice, no source).
    pts = route((290, 120), (1, 0), (0, 15), (0, 1), gap_y=56.5)
    assert pts == [(290, 120), (304.0, 120.0), (304.0, 56.5), (0.0, 56.5), (0, 15)]
    assert _orthogonal(pts)


@pytest.mark.parametrize(
    "rotation, flip, expected",
    [(0, False, (10, 2)), (90, False, (-2, 10)), (180, False, (-10, -2)), (0, True, (-10, 2)), (90, True, (-2, -10))],
)
def test_orient_mirrors_then_turns_clockwise_on_screen(rotation, flip, expected):
    assert orient(10, 2, rotation, flip) == pytest.approx(expected)


def test_summing_junction_inputs_sit_left_below_and_above():
    b = Block("b1", "sum", "s", {"signs": ["+", "-", "+"], "width": 1}, {"x": 0, "y": 0, "rotation": 0, "flip": False})
    spots = {s.name: s for s in port_spots(b)}
    assert spots["in1"].normal == (-1.0, 0.0)
    assert spots["in2"].normal == pytest.approx((0.0, 1.0))
    assert spots["in3"].normal == pytest.approx((0.0, -1.0))
    assert spots["out"].normal == (1.0, 0.0)


def test_orthogonalize_and_simplify_keep_a_staircase():
    pts = orthogonalize([(0, 0), (10, 10), (20, 0)])
    assert _orthogonal(pts)
    assert simplify([(0, 0), (5, 0), (10, 0), (10, 0), (10, 5)]) == [(0, 0), (10, 0), (10, 5)]
