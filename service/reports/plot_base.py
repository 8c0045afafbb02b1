"""What every picture shares: matplotlib settings in ballast's look, axes dressing, frequency
axes in engineering notation, and labels placed without overlaps (``labels``) once the layout is
fixed.

Labels are placed in display units after the figure's constrained layout has run and been frozen
(``freeze_layout``), and are written as offsets in points from their anchors, so the geometry is
the same at every resolution (SVG at 72 dpi, PNG at 110 dpi).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from matplotlib.artist import Artist
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.font_manager import FontProperties
from matplotlib.text import Text
from matplotlib.ticker import EngFormatter

from service.reports import style
from service.reports.labels import Box, around, leader, place_labels

RC = {
    "font.family": style.FONT_FAMILY,
    "font.size": 9.0,
    "axes.edgecolor": style.RULE,
    "axes.labelcolor": style.INK,
    "axes.titlesize": 10.0,
    "axes.titleweight": "bold",
    "axes.titlelocation": "left",
    "xtick.color": style.MUTED,
    "ytick.color": style.MUTED,
    "text.color": style.INK,
    "legend.fontsize": 7.5,
    "svg.fonttype": "none",
    "svg.hashsalt": "ballast",
}
LABEL_PAD_PX = 1.5
MAX_OBSTACLE_POINTS = 4000
LEADER_FROM_PT = 6.0   # a label farther than this beyond its symbol gets a thin leader line


def figure(width_in: float, height_in: float) -> Figure:
    """A figure with an Agg canvas (text is measured on it) and constrained layout."""
    fig = Figure(figsize=(width_in, height_in), facecolor=style.PAPER, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def dress(ax: Axes) -> None:
    ax.set_facecolor(style.PANEL)
    ax.grid(True, color=style.RULE, linewidth=0.6, linestyle=(0, (1, 2)))
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


def frequency_axis(ax: Axes, label: bool = True) -> None:
    """Log frequency axis with ticks in engineering notation (1 MHz … 1 THz)."""
    ax.set_xscale("log")
    ax.xaxis.set_major_formatter(EngFormatter(unit="Hz", places=0))
    if label:
        ax.set_xlabel("frequency")


def freeze_layout(fig: Figure) -> None:
    """Run the constrained layout once and keep its positions (labels are placed after it)."""
    fig.draw_without_rendering()
    fig.set_layout_engine("none")


@dataclass(frozen=True)
class LabelSpec:
    """A label to place near (x, y) in the axes' data coordinates."""

    x: float
    y: float
    text: str
    gid: str
    colour: str = style.MUTED
    size: float = 7.0
    bold: bool = False
    marker_pt: float = 3.0          # half-size of the anchor's symbol, kept clear of labels


def _extent(artist: Artist, renderer) -> Box:
    """The box an artist covers; a text's frame counts when it has one (notes)."""
    if isinstance(artist, Text):
        frame = artist.get_bbox_patch()
        bbox = (frame.get_window_extent(renderer) if frame is not None
                else Text.get_window_extent(artist, renderer))
    else:
        bbox = artist.get_window_extent(renderer)
    return Box(bbox.x0, bbox.y0, bbox.x1, bbox.y1)


def place_axes_labels(ax: Axes, specs: Sequence[LabelSpec],
                      curves: Sequence[np.ndarray] = (),
                      keep_clear: Sequence[Artist] = (),
                      markers: Sequence[tuple[float, float, float]] = ()) -> list[Text]:
    """Add the labels to ``ax`` where they overlap no other label, marker or ``keep_clear``
    artist and cover as little of the ``curves`` (complex arrays, x + jy in data coordinates)
    as possible; labels without room, or whose anchor is outside the axes, are left out.
    ``markers`` (x, y, half-size in points) are symbols without a label that stay uncovered.
    Call after :func:`freeze_layout`. Returns the texts added (gids "label-…")."""
    fig = ax.get_figure()
    renderer = fig.canvas.get_renderer()
    frame = ax.get_window_extent(renderer)
    bounds = Box(frame.x0 + 2, frame.y0 + 2, frame.x1 - 2, frame.y1 - 2)
    to_display = ax.transData.transform
    inside = []
    for spec in specs:  # anchors on the frame (marks at a scale's edge) count as inside
        x, y = to_display((spec.x, spec.y))
        if np.isfinite(x) and np.isfinite(y) and frame.x0 - 1 <= x <= frame.x1 + 1 \
                and frame.y0 - 1 <= y <= frame.y1 + 1:
            inside.append((spec, (float(x), float(y))))
    points = [np.column_stack([c.real, c.imag]) for c in curves if np.size(c)]
    obstacles = np.zeros((0, 2))
    if points:
        joined = np.concatenate(points)
        joined = joined[np.isfinite(joined).all(axis=1)]
        step = max(1, joined.shape[0] // MAX_OBSTACLE_POINTS)
        obstacles = to_display(joined[::step]) if joined.size else obstacles
    sizes = []
    for spec, _ in inside:
        prop = FontProperties(family=style.FONT_FAMILY, size=spec.size,
                              weight="bold" if spec.bold else "normal")
        w, h, _ = renderer.get_text_width_height_descent(spec.text, prop, ismath=False)
        sizes.append((w + 2 * LABEL_PAD_PX, h + 2 * LABEL_PAD_PX))
    scale = fig.dpi / 72.0
    clear = [_extent(a, renderer) for a in keep_clear]
    for x, y, half in markers:
        px, py = to_display((x, y))
        if np.isfinite(px) and np.isfinite(py):
            clear.append(around(float(px), float(py), half * scale))
    boxes = place_labels([a for _, a in inside], sizes, bounds, obstacles, clear,
                         gap=4.0 * scale,
                         marker_radius=[spec.marker_pt * scale for spec, _ in inside],
                         leader_from=LEADER_FROM_PT * scale)
    added = []
    for (spec, (x, y)), box in zip(inside, boxes, strict=True):
        if box is None:
            continue
        dx = (box.x0 + LABEL_PAD_PX - x) / scale
        dy = (box.y0 + LABEL_PAD_PX - y) / scale
        arrow = None
        line = leader(box, (x, y), spec.marker_pt * scale, LEADER_FROM_PT * scale)
        if line is not None:  # from the box's nearest point to the symbol's edge
            (_, _), (nx, ny) = line
            arrow = {"arrowstyle": "-", "color": spec.colour, "linewidth": 0.6, "shrinkA": 0,
                     "shrinkB": spec.marker_pt,
                     "relpos": ((nx - box.x0) / (box.x1 - box.x0),
                                (ny - box.y0) / (box.y1 - box.y0))}
        added.append(ax.annotate(
            spec.text, (spec.x, spec.y), xytext=(dx, dy), textcoords="offset points",
            ha="left", va="bottom", fontsize=spec.size, color=spec.colour,
            fontweight="bold" if spec.bold else "normal", gid="label-" + spec.gid,
            arrowprops=arrow, annotation_clip=False))
    return added


def label_boxes(fig: Figure) -> list[tuple[str, Box]]:
    """(gid, box in display units) of every placed label ("label-…") and note ("…-note", with
    its frame) of ``fig``, after a draw."""
    renderer = fig.canvas.get_renderer()
    found = []
    for text in fig.findobj(Text):
        gid = str(text.get_gid() or "")
        if gid.startswith("label-") or gid.endswith("-note"):
            found.append((gid, _extent(text, renderer)))
    return found


def overlapping_labels(fig: Figure) -> list[tuple[str, str]]:
    """Pairs of labels or notes of ``fig`` whose boxes overlap (none, if placement worked)."""
    boxes = label_boxes(fig)
    return [(a, b) for i, (a, box_a) in enumerate(boxes) for b, box_b in boxes[i + 1:]
            if box_a.overlaps(box_b)]
