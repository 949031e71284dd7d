"""The canvas's grid of rectangles (tests of gui/canvas/spatial.py), checked against
looking at every rectangle (closed form: two boxes meet when they overlap on both axes)."""
from __future__ import annotations

import random

import pytest

from loopwright.gui.canvas.spatial import RectIndex


def _meets(a, b) -> bool:
    return a[0] <= b[2] and b[0] <= a[2] and a[1] <= b[3] and b[1] <= a[3]


def _box(rng):
    x, y = rng.uniform(-2000, 2000), rng.uniform(-2000, 2000)
    return (x, y, x + rng.choice([0.0, rng.uniform(0, 900)]), y + rng.choice([0.0, rng.uniform(0, 300)]))


@pytest.mark.parametrize("seed", range(5))
def test_near_finds_every_stored_box_that_meets_the_question(seed):
    rng = random.Random(seed)
    index, stored = RectIndex(cell=160.0), {}
    for k in range(300):
        boxes = [_box(rng) for _ in range(rng.randint(1, 4))]
        index.set(k, boxes, payload=k)
        stored[k] = boxes
    for k in rng.sample(sorted(stored), 60):  # replaced and removed items leave no trace
        if rng.random() < 0.5:
            index.discard(k)
            del stored[k]
        else:
            stored[k] = [_box(rng)]
            index.set(k, stored[k], payload=k)
    assert len(index) == len(stored)
    for _ in range(200):
        q = _box(rng)
        skip = rng.choice(sorted(stored))
        found = {k for k, payload in index.near(q, skip=skip)}
        want = {k for k, boxes in stored.items() if k != skip and any(_meets(q, b) for b in boxes)}
        assert want <= found and skip not in found
        assert all(k in stored for k in found)


def test_a_box_given_corner_first_either_way_is_the_same_box():
    index = RectIndex(cell=10.0)
    index.set("a", [(50.0, 50.0, 5.0, 5.0)], payload="A")
    assert index.near((20.0, 20.0, 21.0, 21.0)) == [("a", "A")]
    assert index.near((60.0, 60.0, 70.0, 70.0)) == []
