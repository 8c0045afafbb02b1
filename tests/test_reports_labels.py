"""Label placement as plain geometry: no two boxes overlap, none leaves the bounds or covers a
marker, and no leader line crosses a label.

Segment–box intersection is checked against Liang & Barsky's clipping (ACM Transactions on
Graphics 3(1), 1984) on hand-worked cases; the placements against seeded random clusters.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from service.reports.labels import (
    Box,
    around,
    distance,
    leader,
    nearest_point,
    place_labels,
    segment_hits,
)

BOUNDS = Box(0.0, 0.0, 400.0, 300.0)


@pytest.mark.parametrize(("start", "end", "hits"), [
    ((-1, 5), (20, 5), True),      # straight through the middle of Box(0, 0, 10, 10)
    ((-5, -5), (15, 15), True),    # the diagonal
    ((-1, 12), (20, 12), False),   # passes above
    ((10, -5), (10, 15), False),   # along the right edge: touches, does not enter
    ((5, 5), (6, 6), True),        # wholly inside
    ((11, 0), (20, 10), False),
    ((-4, 4), (4, -4), False),     # x + y = 0 meets the box only at its corner (0, 0)
    ((-2, 6), (6, -2), True),      # x + y = 4 crosses the interior, e.g. at (2, 2)
])
def test_segment_box_intersection(start, end, hits):
    assert segment_hits(Box(0, 0, 10, 10), start, end) is hits


def test_touching_boxes_do_not_overlap():
    a = Box(0, 0, 10, 10)
    assert not a.overlaps(Box(10, 0, 20, 10)) and a.overlaps(Box(9.9, 9.9, 20, 20))
    assert nearest_point(a, 15, 5) == (10, 5) and distance(a, 13, 14) == pytest.approx(5.0)
    # a leader runs from the marker's edge (half-size 2) to the box: (20, 5) → (12, 5)
    assert leader(a, (20.0, 5.0), 2.0, 3.0) == ((18.0, 5.0), (10, 5))
    assert leader(a, (14.0, 5.0), 2.0, 3.0) is None  # within 2 + 3 of the box


def _placements(seed: int, n: int, spread: float):
    rng = np.random.default_rng(seed)
    centre = rng.uniform([80, 60], [320, 240])
    anchors = [tuple(map(float, centre + rng.normal(0, spread, 2))) for _ in range(n)]
    sizes = [(float(rng.uniform(20, 70)), 11.0) for _ in range(n)]
    curve = np.column_stack([np.linspace(0, 400, 500), 150 + 80 * np.sin(np.linspace(0, 9, 500))])
    keep = [Box(300, 250, 400, 300)]  # a legend in the corner
    boxes = place_labels(anchors, sizes, BOUNDS, curve, keep, gap=4.0, marker_radius=3.0,
                         leader_from=9.0)
    return anchors, sizes, keep, boxes


@pytest.mark.parametrize(("seed", "n", "spread"), [(1, 8, 5.0), (2, 15, 12.0), (3, 30, 25.0),
                                                   (4, 12, 2.0), (5, 40, 60.0)])
def test_placed_boxes_never_overlap(seed, n, spread):
    anchors, sizes, keep, boxes = _placements(seed, n, spread)
    placed = [(i, b) for i, b in enumerate(boxes) if b is not None]
    assert len(placed) >= min(n, 8)  # a crowd still gets most of its labels
    for (i, a), (j, b) in itertools.combinations(placed, 2):
        assert not a.overlaps(b), (i, j)
    markers = [around(x, y, 3.0) for x, y in anchors]
    leaders = {i: leader(b, anchors[i], 3.0, 9.0) for i, b in placed}
    for i, box in placed:
        assert box.within(BOUNDS) and not any(box.overlaps(k) for k in keep)
        assert box.x1 - box.x0 == pytest.approx(sizes[i][0])
        assert not any(box.overlaps(m) for m in markers)
        for j, line in leaders.items():
            if line is not None and j != i:
                assert not segment_hits(box, *line), (i, j)


def test_a_lone_label_sits_next_to_its_anchor():
    boxes = place_labels([(100.0, 100.0)], [(30.0, 10.0)], BOUNDS, gap=4.0)
    assert boxes[0] == Box(104.0, 104.0, 134.0, 114.0)  # above right, one gap away


def test_no_room_leaves_the_label_out():
    tight = Box(0, 0, 20, 20)
    assert place_labels([(10.0, 10.0)], [(50.0, 10.0)], tight) == [None]
