"""Driving-point admittances Y_k = 1/(Y⁻¹)_kk of the nodes, Kurokawa points marked.

Kurokawa (1969): a node can start to oscillate where Im Y_k rises through zero while Re Y_k ≤ 0.
Every node has its own colour, dash pattern and markers (offset along the curve per node), so
nodes with equal admittances (the two halves of a symmetric pair) are both visible; a node equal
to an earlier one says so in the legend. The legend, beside the plot, gives each node's share
in the leading mode (``node_participation`` of the fastest-growing mode).
"""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.ticker import EngFormatter

from service.reports import style
from service.reports.data import CheckFigureData, ModeMark
from service.reports.plot_base import dress, figure, freeze_layout, frequency_axis
from service.reports.units import format_hz, format_share

SAME_CURVE_RTOL = 1e-6
MARKERS_PER_CURVE = 14
LINEAR_BELOW_S = 1e-3   # the symmetric-log axis is linear within ± 1 mS


def node_style(i: int) -> dict:
    """Colour, dashes and markers of the i-th plotted node (all distinct up to 32 nodes)."""
    colours, dashes = style.SERIES, style.DASHES
    return {"color": colours[i % len(colours)],
            "linestyle": dashes[(i // len(colours) + i) % len(dashes)],
            "marker": style.MARKERS[i % len(style.MARKERS)]}


def leading_mode(modes: tuple[ModeMark, ...]) -> ModeMark | None:
    """The fastest-growing mode (the first when σ is unknown)."""
    if not modes:
        return None
    return max(modes, key=lambda m: m.growth_rate_per_s if m.growth_rate_per_s is not None
               else -np.inf)


def _share(mode: ModeMark | None, name: str) -> str:
    if mode is None or name not in mode.nodes or len(mode.participation) != len(mode.nodes):
        return ""
    return "  " + format_share(mode.participation[mode.nodes.index(name)])


def _same_as(curves: list[tuple[str, np.ndarray]], y: np.ndarray) -> str | None:
    for name, earlier in curves:
        ok = np.isfinite(earlier) & np.isfinite(y)
        scale = float(np.max(np.abs(y[ok]))) if ok.any() else 0.0
        if ok.any() and np.all(np.abs(earlier[ok] - y[ok]) <= SAME_CURVE_RTOL * scale):
            return name
    return None


def admittance_figure(data: CheckFigureData) -> Figure:
    """Re Y_k and Im Y_k (symmetric-log axes in siemens) against frequency."""
    rows = len(data.plotted_nodes)
    fig = figure(10.0, 5.6 + 0.12 * max(rows - 8, 0))
    re_ax, im_ax = fig.subplots(2, 1, sharex=True)
    f = data.frequency_hz
    positive = f > 0
    mode = leading_mode(data.modes)
    drawn: list[tuple[str, np.ndarray]] = []
    handles = []
    count = int(positive.sum())
    for i, k in enumerate(data.plotted_nodes):
        name = data.node_names[k]
        y = data.admittance[positive, k]
        look = node_style(i)
        step = max(count // MARKERS_PER_CURVE, 1)
        every = (int(i * step / max(rows, 1)) % step, step)
        same = _same_as(drawn, y)
        label = name + (f" (= {same})" if same else "") + _share(mode, name)
        width = 1.5 if same is None else 1.2
        for ax, part, tag in ((re_ax, y.real, "re"), (im_ax, y.imag, "im")):
            ax.plot(f[positive], part, linewidth=width, markevery=every, markersize=4.0,
                    markerfacecolor=style.PANEL, markeredgewidth=1.0,
                    gid=f"admittance-{tag}-{name}", **look)
        handles.append(Line2D([], [], linewidth=width, markersize=4.0,
                              markerfacecolor=style.PANEL, label=label, **look))
        drawn.append((name, y))
        marks = [m for m in data.kurokawa if m.node == name]
        if marks:
            fk = [m.frequency_hz for m in marks]
            re_ax.scatter(fk, [m.re_admittance_s for m in marks], marker="D", s=46, zorder=5,
                          color=look["color"], edgecolor=style.INK, linewidth=0.8,
                          gid=f"kurokawa-point-{name}")
            im_ax.scatter(fk, [0.0] * len(fk), marker="D", s=46, zorder=5, color=look["color"],
                          edgecolor=style.INK, linewidth=0.8, gid=f"kurokawa-point-im-{name}")
    if any(m.node in {n for n, _ in drawn} for m in data.kurokawa):
        handles.append(Line2D([], [], marker="D", linestyle="none", color=style.MUTED,
                              markeredgecolor=style.INK, label="Kurokawa point (node colour)"))
    for ax in (re_ax, im_ax):
        frequency_axis(ax, label=ax is im_ax)
        ax.set_yscale("symlog", linthresh=LINEAR_BELOW_S)
        ax.yaxis.set_major_formatter(EngFormatter(unit="S", places=0))
        ax.axhline(0.0, color=style.INK, linewidth=0.8)
        for j, m in enumerate(data.modes):
            ax.axvline(m.frequency_hz, color=style.ALERT, linewidth=1.0,
                       linestyle=(0, (3, 2)), gid=f"mode-line-{j}")
        dress(ax)
    for m in data.modes:
        handles.append(Line2D([], [], color=style.ALERT, linewidth=1.0, linestyle=(0, (3, 2)),
                              label=f"unstable mode {format_hz(m.frequency_hz)}"))
    low = re_ax.get_ylim()[0]
    if low < 0:
        re_ax.axhspan(low, 0.0, color=style.ALERT, alpha=0.07, linewidth=0,
                      gid="negative-conductance")
        re_ax.set_ylim(bottom=low)
    which = "every node" if data.all_nodes else "the nodes that matter"
    re_ax.set_title(f"driving-point admittance of {which}")
    re_ax.set_ylabel("Re Y")
    im_ax.set_ylabel("Im Y")
    title = ("node · share in the " + format_hz(mode.frequency_hz) + " mode"
             if mode is not None and mode.participation else "node")
    fig.legend(handles=handles, loc="outside right upper", frameon=False, title=title,
               title_fontsize=7.5, alignment="left")
    freeze_layout(fig)
    return fig
