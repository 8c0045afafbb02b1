"""Label placement without overlaps: plain geometry in display units (no plotting imports).

Each label has an anchor (the point it names) and a size. Candidate boxes sit around the anchor
in eight directions at a few distances; the first label (highest priority) chooses first. A box
is allowed only inside the bounds and clear of every box already placed and of every anchor's
marker; among the allowed ones the box covering the fewest curve points wins, then the nearest.
A label with no allowed box is left out (the caller says so), so two labels never overlap.
A label set farther than ``leader_from`` beyond its anchor's marker gets a leader line (drawn by
the caller, from the marker's edge: ``leader``);
such a line may cross no other label (markers it may), and no later label may cover it.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

#: candidate directions, in order of preference: above right first (reading order)
DIRECTIONS = ((1, 1), (1, -1), (-1, 1), (-1, -1), (1, 0), (-1, 0), (0, 1), (0, -1))
#: distances from the anchor, in multiples of the gap
RINGS = (1.0, 2.5, 4.5, 7.0, 10.0, 14.0)
CURVE_WEIGHT = 50.0   # cost of one covered curve point, against one gap of distance


@dataclass(frozen=True)
class Box:
    """An axis-aligned box (x0 ≤ x1, y0 ≤ y1)."""

    x0: float
    y0: float
    x1: float
    y1: float

    def overlaps(self, other: Box) -> bool:
        """True when the interiors intersect (touching edges do not overlap)."""
        return (self.x0 < other.x1 and other.x0 < self.x1
                and self.y0 < other.y1 and other.y0 < self.y1)

    def within(self, outer: Box) -> bool:
        return (self.x0 >= outer.x0 and self.x1 <= outer.x1
                and self.y0 >= outer.y0 and self.y1 <= outer.y1)

    def covered(self, points: np.ndarray) -> int:
        """How many of the (M, 2) points lie inside."""
        if points.size == 0:
            return 0
        x, y = points[:, 0], points[:, 1]
        return int(np.count_nonzero((x > self.x0) & (x < self.x1)
                                    & (y > self.y0) & (y < self.y1)))


def nearest_point(box: Box, x: float, y: float) -> tuple[float, float]:
    return min(max(x, box.x0), box.x1), min(max(y, box.y0), box.y1)


def distance(box: Box, x: float, y: float) -> float:
    """Distance from (x, y) to the box (0 inside)."""
    nx, ny = nearest_point(box, x, y)
    return float(np.hypot(nx - x, ny - y))


def segment_hits(box: Box, start: tuple[float, float], end: tuple[float, float]) -> bool:
    """True when the segment start–end passes through the box's interior (Liang–Barsky
    clipping: Liang & Barsky, ACM Transactions on Graphics 3(1), 1984)."""
    (x0, y0), (x1, y1) = start, end
    dx, dy = x1 - x0, y1 - y0
    low, high = 0.0, 1.0
    for p, q in ((-dx, x0 - box.x0), (dx, box.x1 - x0), (-dy, y0 - box.y0), (dy, box.y1 - y0)):
        if p == 0:
            if q <= 0:
                return False
            continue
        t = q / p
        if p < 0:
            low = max(low, t)
        else:
            high = min(high, t)
        if low >= high:
            return False
    return True


def leader(box: Box, anchor: tuple[float, float], marker: float, leader_from: float
           ) -> tuple[tuple[float, float], tuple[float, float]] | None:
    """The leader line from the edge of the anchor's marker (a square of half-size ``marker``) to
    the nearest point of the box; None when the box is within ``leader_from`` of the marker."""
    x, y = anchor
    gap = distance(box, x, y)
    if gap <= marker + leader_from:
        return None
    nx, ny = nearest_point(box, x, y)
    shrink = min(marker / gap, 1.0)  # leave the marker's own area to the marker
    return (x + (nx - x) * shrink, y + (ny - y) * shrink), (nx, ny)


def around(x: float, y: float, radius: float) -> Box:
    return Box(x - radius, y - radius, x + radius, y + radius)


def candidate(anchor: tuple[float, float], size: tuple[float, float],
              direction: tuple[int, int], distance: float) -> Box:
    """The box of ``size`` whose nearest side is ``distance`` from ``anchor`` in ``direction``
    (centred on the anchor along an axis whose direction component is 0)."""
    (x, y), (w, h), (dx, dy) = anchor, size, direction
    x0 = x + distance if dx > 0 else x - distance - w if dx < 0 else x - w / 2
    y0 = y + distance if dy > 0 else y - distance - h if dy < 0 else y - h / 2
    return Box(x0, y0, x0 + w, y0 + h)


def place_labels(anchors: Sequence[tuple[float, float]], sizes: Sequence[tuple[float, float]],
                 bounds: Box, curve_points: np.ndarray | None = None,
                 keep_clear: Sequence[Box] = (), gap: float = 4.0,
                 marker_radius: float | Sequence[float] = 3.0, leader_from: float = np.inf
                 ) -> list[Box | None]:
    """A box per label (None: no room), in the order given (earlier labels choose first).

    ``curve_points`` (M, 2) are avoided where possible; ``keep_clear`` boxes (legends, notes),
    every anchor's marker (a square of half-size ``marker_radius``, one for all or one per
    anchor), the labels placed and their leader lines are never covered.
    """
    points = np.zeros((0, 2)) if curve_points is None else np.asarray(curve_points, float)
    radii = ([float(marker_radius)] * len(anchors) if isinstance(marker_radius, int | float)
             else [float(r) for r in marker_radius])
    markers = [around(x, y, r) for (x, y), r in zip(anchors, radii, strict=True)]
    taken = list(keep_clear)
    leaders: list[tuple[tuple[float, float], tuple[float, float]]] = []
    placed: list[Box | None] = []
    for n, (anchor, size) in enumerate(zip(anchors, sizes, strict=True)):
        others = taken + markers[:n] + markers[n + 1:]
        best, best_cost = None, np.inf
        for ring in RINGS:
            for rank, direction in enumerate(DIRECTIONS):
                box = candidate(anchor, size, direction, ring * gap)
                if (not box.within(bounds) or box.overlaps(markers[n])
                        or any(box.overlaps(t) for t in others)
                        or any(segment_hits(box, a, b) for a, b in leaders)):
                    continue
                line = leader(box, anchor, radii[n], leader_from)
                if line is not None and any(segment_hits(t, *line) for t in taken):
                    continue  # a leader may pass markers, never a label
                cost = CURVE_WEIGHT * box.covered(points) + ring + 0.01 * rank
                if cost < best_cost:
                    best, best_cost = box, cost
        if best is not None:
            taken.append(best)
            line = leader(best, anchor, radii[n], leader_from)
            if line is not None:
                leaders.append(line)
        placed.append(best)
    return placed
