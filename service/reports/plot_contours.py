"""Contours in the complex plane: NDF(jω) and each device's return difference F_k(jω).

Each picture has two panels. The whole axis: positive frequencies solid, negative ones as the
mirror image (H(−jω) = H(jω)*), radius compressed as log10(1 + |H|), a monotone radial map that
keeps the number of turns around the origin. Near the origin: linear, zoomed so the closest
approach fills the panel. The contour is drawn from the samples and the validated model between
them (``contours``); stretches the model fills in lie on a pale underlay. Marked: the origin,
H = 1 (where the devices no longer act), decades of frequency, the unstable modes and the
closest approach; labels are placed so that none overlaps another (``plot_base``).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

import numpy as np
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.lines import Line2D

from service.reports import style
from service.reports.contours import Contour, compress
from service.reports.data import CheckFigureData, DeviceCurves, ModeMark
from service.reports.plot_base import (
    LabelSpec,
    dress,
    figure,
    freeze_layout,
    place_axes_labels,
)
from service.reports.units import format_hz, format_number

ZOOM_MARGIN = 1.6   # the near-origin panel spans ± this × the closest approach
Transform = Callable[[np.ndarray], np.ndarray]


def at_frequency(contour: Contour, f0: float) -> complex | None:
    """The contour at ``f0``, interpolated linearly in log frequency (None outside it)."""
    f, h = contour.frequency_hz, contour.values
    ok = np.isfinite(h) & (f > 0)
    if ok.sum() < 2 or f0 <= 0 or not (f[ok][0] <= f0 <= f[ok][-1]):
        return None
    x = np.log(f[ok])
    return complex(np.interp(np.log(f0), x, h[ok].real), np.interp(np.log(f0), x, h[ok].imag))


def decades(f: np.ndarray) -> list[float]:
    positive = f[f > 0]
    if positive.size == 0:
        return []
    lo, hi = np.ceil(np.log10(positive[0])), np.floor(np.log10(positive[-1]))
    return [10.0 ** k for k in np.arange(lo, hi + 1)]


Marker = tuple[float, float, float]


def _panel(ax: Axes, contour: Contour, transform: Transform, zoom: bool, prefix: str,
           symbol: str, modes: Sequence[ModeMark], scale: float
           ) -> tuple[list[LabelSpec], list[np.ndarray], list[Marker]]:
    """Curves and markers of one panel (``scale``: its half-width, for telling which model
    stretches show); returns the labels to place, the drawn curves and the symbols (x, y,
    half-size in points) that no label may cover."""
    suffix = "-zoom" if zoom else ""
    w = transform(contour.values)
    mirror = np.conj(w)
    ax.plot(mirror.real, mirror.imag, color=style.MIRROR, linewidth=1.0,
            linestyle=(0, (4, 2)), gid=f"{prefix}-mirror{suffix}")
    for j, (a, b) in enumerate(contour.visible_bridges(w, scale)):
        ax.plot(w[a:b + 1].real, w[a:b + 1].imag, color=style.MODEL, linewidth=5.0,
                solid_capstyle="round", zorder=1.5, gid=f"model-stretch-{j}{suffix}")
    ax.plot(w.real, w.imag, color=style.CURVE, linewidth=1.5, zorder=2,
            gid=f"{prefix}-curve{suffix}")
    samples = contour.samples
    if samples.size > 8:  # direction of travel with rising frequency
        for i in samples[[samples.size // 4, samples.size // 2, 3 * samples.size // 4]]:
            j = min(i + 1, w.size - 1)
            ax.annotate("", xy=(w[j].real, w[j].imag), xytext=(w[i].real, w[i].imag),
                        arrowprops={"arrowstyle": "-|>", "color": style.CURVE, "lw": 1.2})
    ax.plot([0], [0], marker="+", markersize=14, markeredgewidth=2.0, color=style.ALERT,
            linestyle="none", gid="origin" + suffix)
    symbols: list[Marker] = [(0.0, 0.0, 7.5)]
    one = transform(np.array([1.0 + 0j]))[0]
    ax.plot([one.real], [one.imag], marker="s", markersize=6, markerfacecolor=style.PANEL,
            markeredgecolor=style.INK, markeredgewidth=1.3, linestyle="none", zorder=4,
            gid="unity-marker" + suffix)
    labels: list[LabelSpec] = []
    for i, mode in enumerate(modes):
        z = at_frequency(contour, mode.frequency_hz)
        if z is None:
            continue
        p = transform(np.array([z]))[0]
        ax.plot([p.real], [p.imag], marker="o", markersize=11, markerfacecolor="none",
                markeredgewidth=2.2, color=style.ALERT, linestyle="none", zorder=5,
                gid=("mode-marker" if i == 0 else f"mode-marker-{i}") + suffix)
        labels.append(LabelSpec(p.real, p.imag, f"mode {format_hz(mode.frequency_hz)}",
                                f"mode-{i}{suffix}", style.ALERT, 8.0, True, 7.0))
    labels.append(LabelSpec(one.real, one.imag, f"{symbol} = 1", "unity" + suffix, style.INK,
                            marker_pt=4.5))
    if zoom:
        closest = contour.closest_to_origin()
        if closest is not None:
            value, at_hz, modelled = closest
            ax.plot([value.real], [value.imag], marker="D", markersize=5, color=style.INK,
                    linestyle="none", zorder=4, gid="closest-marker")
            labels.append(LabelSpec(
                value.real, value.imag,
                f"closest: |{symbol}| = {format_number(abs(value), 3)} at {format_hz(at_hz)}"
                + (" (model)" if modelled else ""), "closest", style.INK, 7.5, marker_pt=4.0))
    marks = [(f0, at_frequency(contour, f0)) for f0 in decades(contour.frequency_hz)]
    marks = [(f0, z) for f0, z in marks if z is not None]
    if marks:
        pts = transform(np.array([z for _, z in marks]))
        ax.plot(pts.real, pts.imag, "o", markersize=3.5, color=style.INK, linestyle="none",
                zorder=4, gid="frequency-marks" + suffix)
        labels.extend(LabelSpec(p.real, p.imag, format_hz(f0, 3), f"decade-{k}{suffix}")
                      for k, ((f0, _), p) in enumerate(zip(marks, pts, strict=True)))
    dress(ax)
    return labels, [w, mirror], symbols


def _legend_handles(bridged: bool, has_modes: bool) -> list[Line2D]:
    handles = [Line2D([], [], color=style.CURVE, linewidth=1.5, label="f > 0"),
               Line2D([], [], color=style.MIRROR, linewidth=1.0, linestyle=(0, (4, 2)),
                      label="f < 0 (mirror image)")]
    if bridged:
        handles.append(Line2D([], [], color=style.MODEL, linewidth=5.0,
                              label="between samples: the validated model"))
    handles.append(Line2D([], [], marker="s", markerfacecolor=style.PANEL, linestyle="none",
                          markeredgecolor=style.INK, label="1: devices no longer act"))
    handles.append(Line2D([], [], marker="+", markersize=10, markeredgewidth=2.0,
                          color=style.ALERT, linestyle="none", label="origin"))
    if has_modes:
        handles.append(Line2D([], [], marker="o", markerfacecolor="none", markersize=9,
                              markeredgewidth=2.0, color=style.ALERT, linestyle="none",
                              label="unstable mode"))
    return handles


def contour_figure(contour: Contour, symbol: str, title: str, note: str,
                   modes: Sequence[ModeMark], prefix: str) -> Figure:
    """The two panels of one contour (module docstring); ``note`` goes in the zoomed panel."""
    fig = figure(10.0, 5.0)
    whole, near = fig.subplots(1, 2)
    squeezed = compress(contour.values)
    radius = float(np.nanmax(np.abs(squeezed))) if squeezed.size else 1.0
    whole_labels, whole_curves, whole_symbols = _panel(
        whole, contour, compress, False, prefix, symbol, modes, radius)
    whole.set_aspect("equal", adjustable="datalim")
    whole.set_title(f"{symbol}, whole axis (radius log₁₀(1 + |{symbol}|))")
    if title != symbol:
        fig.suptitle(title, x=0.01, ha="left", fontsize=10, fontweight="bold", color=style.INK)
    whole.set_xlabel("Re (compressed radius)")
    whole.set_ylabel("Im (compressed radius)")
    closest = contour.closest_to_origin()
    reach = abs(closest[0]) if closest is not None else 0.0
    half = ZOOM_MARGIN * reach if np.isfinite(reach) and reach > 0 else 1.0
    near_labels, near_curves, near_symbols = _panel(
        near, contour, lambda z: z, True, prefix, symbol, modes, half)
    near.set_xlim(-half, half)
    near.set_ylim(-half, half)
    near.set_aspect("equal", adjustable="box")
    near.set_title("closest approach to the origin (linear)")
    near.set_xlabel(f"Re {symbol}")
    near.set_ylabel(f"Im {symbol}")
    if contour.model != "validated":
        note += "\nstraight lines between samples (no validated model)"
    box = near.text(0.02, 0.02, note, transform=near.transAxes, fontsize=8, color=style.INK,
                    bbox={"boxstyle": "round,pad=0.3", "facecolor": style.PAPER,
                          "edgecolor": style.RULE}, gid="encirclement-note", zorder=6)
    bridged = any(a.get_gid().startswith("model-stretch") for a in whole.lines + near.lines)
    fig.legend(handles=_legend_handles(bridged, bool(modes)), loc="outside lower center",
               ncols=6, frameon=False)
    freeze_layout(fig)
    place_axes_labels(whole, whole_labels, whole_curves, markers=whole_symbols)
    place_axes_labels(near, near_labels, near_curves, keep_clear=[box], markers=near_symbols)
    return fig


def _turns_note(count: int | None, trusted: bool, drawn: int | None) -> str:
    text = "clockwise turns around 0: " + (str(count) if count is not None else "–")
    if not trusted:
        text += " (count not trusted)"
    if count is None and drawn is not None:
        text += f"\non the drawn contour: {drawn}"
    return text


def ndf_figure(data: CheckFigureData) -> Figure:
    """NDF: compressed whole view and a linear zoom near the origin."""
    ndf = data.verdict.get("ndf") or {}
    note = _turns_note(ndf.get("encirclements_clockwise"), bool(ndf.get("trusted", True)), None)
    return contour_figure(data.ndf_contour, "NDF", "NDF", note, data.modes, "ndf")


def device_figure(data: CheckFigureData, device: DeviceCurves) -> Figure:
    """Return difference F_k of one device, as the NDF picture; its own modes marked."""
    contour = device.contour
    drawn = contour.count.clockwise if contour.count is not None else None
    note = _turns_note(device.count, device.count is not None, drawn)
    modes = [m for m in data.modes if device.name in m.devices]
    return contour_figure(contour, f"F_{device.name}",
                          f"return difference of {device.name} (device {device.order} switched on)",
                          note, modes, "device")
