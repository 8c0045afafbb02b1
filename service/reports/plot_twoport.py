"""Pictures of the external two-port: K, μ, μ′ against frequency, and stability circles.

- K (Rollett) and μ, μ′ (Edwards–Sinsky) on a fixed scale around 1, bands with μ < 1 shaded.
  Values beyond the scale are marked at its edge with their extreme value, so K = −616 reads as
  such instead of vanishing off the plot.
- Load (Γ_L plane, |Γ_in| = 1) and source (Γ_S plane, |Γ_out| = 1) stability circles at a few
  telling frequencies, coloured by frequency. Short ticks on each circle point into its unstable
  side, decided by evaluating |Γ_in| (|Γ_out|) just off the circle (Γ_in = S11 + S12 S21 Γ_L /
  (1 − S22 Γ_L), Γ_out = S22 + S12 S21 Γ_S / (1 − S11 Γ_S); Pozar, *Microwave Engineering*, 4th
  ed., §12.1 — section from memory). The view holds every circle that is not far larger than the
  chart, so none is cut.
"""

from __future__ import annotations

import numpy as np
from matplotlib.axes import Axes
from matplotlib.colors import LinearSegmentedColormap
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Circle

from service.reports import style
from service.reports.data import TwoPortCurves
from service.reports.plot_base import (
    LabelSpec,
    dress,
    figure,
    freeze_layout,
    frequency_axis,
    place_axes_labels,
)
from service.reports.units import format_factor, format_hz, format_near_one

K_MU_AXIS = (-1.0, 4.0)
MAX_EDGE_MARKS = 3          # off-scale marks per curve and edge (the most extreme runs)
MAX_CIRCLE_FREQUENCIES = 5
WHOLE_CIRCLE_UP_TO = 2.5    # circles reaching no farther than this from 0 are shown whole
TICKS_PER_CIRCLE = 28       # ticks along the part of a circle in view
TINY_CIRCLE = 0.01          # circles smaller than this × the view get a ring marker
RAMP = LinearSegmentedColormap.from_list("ballast-frequency", style.FREQUENCY_RAMP)


# --- K and μ -----------------------------------------------------------------------------------

def off_scale_runs(values: np.ndarray, low: float, high: float
                   ) -> list[tuple[int, str]]:
    """(index of the extreme value, "low" | "high") of each run of samples beyond the scale,
    the MAX_EDGE_MARKS most extreme runs per edge."""
    found: list[tuple[float, int, str]] = []
    for edge, beyond in (("low", values < low), ("high", values > high)):
        beyond = beyond & np.isfinite(values)
        if not beyond.any():
            continue
        starts = np.flatnonzero(beyond & ~np.r_[False, beyond[:-1]])
        ends = np.flatnonzero(beyond & ~np.r_[beyond[1:], False])
        runs = []
        for a, b in zip(starts, ends, strict=True):
            segment = values[a:b + 1]
            i = int(a + (np.argmin(segment) if edge == "low" else np.argmax(segment)))
            runs.append((abs(float(values[i])), i, edge))
        found.extend(sorted(runs, reverse=True)[:MAX_EDGE_MARKS])
    return [(i, edge) for _, i, edge in sorted(found, key=lambda r: r[1])]


def factors_figure(curves: TwoPortCurves) -> Figure:
    """K, μ and μ′ against frequency (module docstring)."""
    fig = figure(10.0, 4.0)
    ax = fig.subplots()
    f = curves.frequency_hz
    positive = f > 0
    for i, (lo, hi) in enumerate(curves.bands_hz):
        ax.axvspan(max(lo, f[positive][0]), hi, color=style.BAND, alpha=0.35, linewidth=0,
                   label="potentially unstable (μ < 1)" if i == 0 else None,
                   gid=f"instability-band-{i}")
    fac = curves.factors
    series = (("k", "K", fac.k, {"color": style.INK, "linewidth": 1.4}),
              ("mu", "μ", fac.mu, {"color": style.CURVE, "linewidth": 1.6}),
              ("mu-prime", "μ′", fac.mu_prime, {"color": style.CURVE, "linewidth": 1.0,
                                                "linestyle": (0, (4, 2))}))
    low, high = K_MU_AXIS
    edge_marks = []
    for key, symbol, values, look in series:
        v = values[positive]
        ax.plot(f[positive], v, label=symbol + (" (load side)" if key == "mu" else
                                                " (source side)" if key == "mu-prime" else ""),
                gid=f"{key}-curve", **look)
        for j, (i, edge) in enumerate(off_scale_runs(v, low, high)):
            y = low if edge == "low" else high
            ax.plot([f[positive][i]], [y], marker="v" if edge == "low" else "^", markersize=8,
                    color=look["color"], linestyle="none", clip_on=False, zorder=6,
                    gid=f"off-scale-{key}-{j}")
            edge_marks.append(LabelSpec(
                float(f[positive][i]), y,
                f"{symbol} = {format_factor(float(v[i]))} at {format_hz(float(f[positive][i]))}",
                f"off-scale-{key}-{j}", look["color"], 7.5, marker_pt=5.0))
    ax.axhline(1.0, color=style.ALERT, linewidth=0.9, gid="unity-line")
    frequency_axis(ax)
    # the band, also when no factor is finite (S12 = 0: K and μ are infinite; the axis would
    # otherwise keep matplotlib's default 0..1, which a log axis cannot show)
    ax.set_xlim(f[positive][0], f[positive][-1])
    ax.set_ylim(low, high)
    ax.set_ylabel("K, μ, μ′ (dimensionless)")
    ax.set_title(f"two-port factors between {curves.ports[0]} and {curves.ports[1]} "
                 "(they speak for these ports only)")
    mu = fac.mu[positive]
    note = None
    if np.isfinite(mu).any() and np.nanmin(mu) >= 1.0:
        i = int(np.nanargmin(mu))
        lowest = f"{format_near_one(float(mu[i]), 'μ')} at {format_hz(float(f[positive][i]))}"
        note = ax.text(0.01, 0.03, f"μ ≥ 1 everywhere: lowest μ = {lowest}",
                       transform=ax.transAxes, va="bottom", fontsize=7.5, color=style.INK,
                       bbox={"boxstyle": "round,pad=0.3", "facecolor": style.PAPER,
                             "edgecolor": style.RULE}, gid="mu-note", zorder=6)
    fig.legend(loc="outside right upper", frameon=False)
    dress(ax)
    freeze_layout(fig)
    place_axes_labels(ax, edge_marks,
                      [f[positive] + 1j * np.clip(s[2][positive], low, high) for s in series],
                      keep_clear=[note] if note is not None else [])
    return fig


# --- stability circles -------------------------------------------------------------------------

def circle_frequencies(curves: TwoPortCurves, limit: int = MAX_CIRCLE_FREQUENCIES) -> np.ndarray:
    """Indices of up to ``limit`` frequencies to draw: spread (in log f) over those where a
    circle's unstable side reaches into the unit disk; over the whole band when none does."""
    fac = curves.factors
    reaches = (fac.load_circle.unstable_reaches_unit_disk
               | fac.source_circle.unstable_reaches_unit_disk)
    candidates = np.flatnonzero(reaches & (curves.frequency_hz > 0))
    if candidates.size == 0:
        candidates = np.flatnonzero(curves.frequency_hz > 0)
    if candidates.size <= limit:
        return candidates
    picks = np.linspace(0, candidates.size - 1, limit).round().astype(int)
    return candidates[np.unique(picks)]


def reflection_magnitude(s: np.ndarray, gamma: np.ndarray, side: str) -> np.ndarray:
    """|Γ_in| at load reflections ``gamma`` (side "load") or |Γ_out| at source reflections."""
    s11, s12, s21, s22 = s[0, 0], s[0, 1], s[1, 0], s[1, 1]
    near, far = (s22, s11) if side == "load" else (s11, s22)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.abs(far + s12 * s21 * gamma / (1 - near * gamma))


def _chart(ax: Axes, title: str, plane: str, reach: float) -> None:
    """A reflection-coefficient plane: unit circle, |Γ| rings, 30° spokes, Re/Im labels."""
    ax.set_facecolor(style.PAPER)
    ax.add_patch(Circle((0, 0), 1.0, facecolor=style.PANEL, edgecolor=style.INK, linewidth=1.2,
                        zorder=1, gid="unit-circle"))
    for r in (0.25, 0.5, 0.75):
        ax.add_patch(Circle((0, 0), r, fill=False, edgecolor=style.RULE, linewidth=0.6,
                            linestyle=(0, (1, 2)), zorder=1))
    for angle in np.deg2rad(np.arange(0, 180, 30)):
        ax.plot([-np.cos(angle), np.cos(angle)], [-np.sin(angle), np.sin(angle)],
                color=style.RULE, linewidth=0.6, linestyle=(0, (1, 2)), zorder=1)
    ax.set_xlim(-reach, reach)
    ax.set_ylim(-reach, reach)
    ax.set_aspect("equal")
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.set_xlabel(f"Re {plane}")
    ax.set_ylabel(f"Im {plane}")
    ax.set_title(title)


def _circle_points(circle, i: int, reach: float) -> np.ndarray:
    """Points along circle (or line) i, enough for a smooth edge inside the view."""
    if circle.is_line[i]:
        foot = complex(circle.line_foot[i])
        if not np.isfinite(foot) or foot == 0:
            return np.zeros(0, complex)
        along = 1j * foot / abs(foot)
        return foot + along * np.linspace(-3 * reach, 3 * reach, 600)
    centre, radius = complex(circle.centre[i]), float(circle.radius[i])
    if not (np.isfinite(centre) and np.isfinite(radius)):
        return np.zeros(0, complex)
    return centre + radius * np.exp(1j * np.linspace(0, 2 * np.pi, 721))


def _ticks(points: np.ndarray, s: np.ndarray, side: str, reach: float) -> list[np.ndarray]:
    """Short segments from the edge into its unstable side, spread along the part in view."""
    shown = np.flatnonzero((np.abs(points.real) <= reach) & (np.abs(points.imag) <= reach))
    if shown.size < 3:
        return []
    arc = np.concatenate([[0.0], np.cumsum(np.abs(np.diff(points)))])
    visible_length = float(arc[shown[-1]] - arc[shown[0]])
    spacing = max(visible_length / TICKS_PER_CIRCLE, 1e-12)
    length = min(0.05 * reach, 0.5 * spacing)
    segments, last = [], -np.inf
    for i in shown[1:-1]:
        if arc[i] - last < spacing:
            continue
        last = arc[i]
        tangent = points[i + 1] - points[i - 1]
        if tangent == 0:
            continue
        normal = 1j * tangent / abs(tangent)
        probe = points[i] + np.array([normal, -normal]) * length * 0.5
        unstable = reflection_magnitude(s, probe, side) > 1.0
        if unstable[0] == unstable[1]:
            continue
        direction = normal if unstable[0] else -normal
        segments.append(np.array([points[i], points[i] + direction * length]))
    return segments


def unstable_share(s: np.ndarray, side: str, rings: int = 24, spokes: int = 96) -> float:
    """Share of the unit disk (by area) whose terminations make |Γ_in| (|Γ_out|) exceed 1,
    on a polar grid of equal-area rings."""
    radius = np.sqrt((np.arange(rings) + 0.5) / rings)
    angle = 2 * np.pi * (np.arange(spokes) + 0.5) / spokes
    gamma = (radius[:, None] * np.exp(1j * angle[None, :])).ravel()
    return float(np.mean(reflection_magnitude(s, gamma, side) > 1.0))


def _view_reach(curves: TwoPortCurves, picks: np.ndarray) -> float:
    reach = 1.12
    for circle in (curves.factors.load_circle, curves.factors.source_circle):
        for i in picks:
            if circle.is_line[i] or not np.isfinite(circle.radius[i]):
                continue
            far = abs(complex(circle.centre[i])) + float(circle.radius[i])
            if far <= WHOLE_CIRCLE_UP_TO:
                reach = max(reach, 1.04 * far)
    return reach


def _share_words(share: float, reaches: bool) -> str:
    """The share in words; ``reaches``: the engine found the unstable side inside the disk
    (a sliver the grid misses is still said, as < 1 %)."""
    if share >= 0.995:
        return "all of the disk unstable"
    if share <= 0.0 and not reaches:
        return "none of the disk unstable"
    return f"{100 * share:.0f} % of the disk unstable" if share >= 0.01 else \
        "< 1 % of the disk unstable"


def _draw_plane(ax: Axes, curves: TwoPortCurves, circle, side: str, picks: np.ndarray,
                colours: list, reach: float) -> list[Line2D]:
    """Every picked frequency's circle in one plane with its ticks; returns its legend lines."""
    handles = []
    for j, i in enumerate(picks):
        colour = colours[j]
        points = _circle_points(circle, int(i), reach)
        label = format_hz(float(curves.frequency_hz[i]))
        if curves.s is not None:
            label += ": " + _share_words(unstable_share(curves.s[i], side),
                                         bool(circle.unstable_reaches_unit_disk[i]))
        handles.append(Line2D([], [], color=colour, linewidth=2.2, label=label))
        if points.size == 0:
            continue
        ax.plot(points.real, points.imag, color=colour, linewidth=1.0, zorder=3,
                gid=f"{side}-circle-{j}")
        within = np.where(np.abs(points) <= 1.0, points, np.nan)
        ax.plot(within.real, within.imag, color=colour, linewidth=2.2, zorder=3,
                gid=f"{side}-circle-{j}-in-disk")
        if not circle.is_line[i] and float(circle.radius[i]) < TINY_CIRCLE * reach:
            centre = complex(circle.centre[i])  # too small to see: a ring marks where it is
            ax.plot([centre.real], [centre.imag], marker="o", markersize=7,
                    markerfacecolor="none", markeredgecolor=colour, markeredgewidth=1.4,
                    linestyle="none", zorder=4, gid=f"{side}-circle-{j}-tiny")
        if curves.s is not None:
            for k, seg in enumerate(_ticks(points, curves.s[i], side, reach)):
                ax.plot(seg.real, seg.imag, color=colour, linewidth=1.2, zorder=3,
                        solid_capstyle="butt", gid=f"{side}-circle-{j}-tick-{k}")
    return handles


def circles_figure(curves: TwoPortCurves) -> Figure:
    """Load and source stability circles at a few telling frequencies (module docstring); the
    unstable-side ticks and shares need the S-parameters (``curves.s``)."""
    fig = figure(10.0, 6.4)
    load_ax, source_ax = fig.subplots(1, 2)
    picks = circle_frequencies(curves)
    reach = _view_reach(curves, picks)
    _chart(load_ax, f"load plane Γ_L ({curves.ports[1]}): |Γ_in| = 1", "Γ_L", reach)
    _chart(source_ax, f"source plane Γ_S ({curves.ports[0]}): |Γ_out| = 1", "Γ_S", reach)
    # colours in frequency order, spread over the whole ramp (the legend gives the frequency)
    colours = [RAMP(j / max(len(picks) - 1, 1)) for j in range(len(picks))]
    for ax, circle, side, where in ((load_ax, curves.factors.load_circle, "load", "left"),
                                    (source_ax, curves.factors.source_circle, "source", "right")):
        handles = _draw_plane(ax, curves, circle, side, picks, colours, reach)
        fig.legend(handles=handles, loc=f"outside lower {where}", frameon=False,
                   title=f"{side} plane", title_fontsize=7.5, alignment="left")
    for ax in (load_ax, source_ax):
        dress(ax)
        ax.grid(False)
    heading = ("Ticks on each circle point into the side whose terminations make the other "
               "port's reflection exceed 1.")
    if curves.unconditionally_stable:
        heading = (f"Unconditionally stable between {curves.ports[0]} and {curves.ports[1]}: "
                   "μ > 1 at every frequency, so no circle's unstable side reaches into the "
                   "unit disk.\n" + heading)
    fig.suptitle(heading, x=0.01, ha="left", fontsize=8.5, fontweight="normal",
                 color=style.INK, gid="circles-heading")
    freeze_layout(fig)
    return fig
