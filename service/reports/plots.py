"""The four pictures of a check, drawn with matplotlib's object API (no pyplot, no global backend).

- ``ndf``: NDF(jω) over the whole axis (positive frequencies solid, negative ones as the mirror
  image, NDF(−jω) = NDF(jω)*), radius compressed as log10(1 + |NDF|) — a monotone radial map, so
  the number of turns around the origin is unchanged — beside a linear zoom near the origin;
  decade frequency marks and the unstable modes marked.
- ``admittance``: Re and Im of the driving-point admittance Y_k = 1/(Y⁻¹)_kk of the nodes that
  matter, Kurokawa points (Im Y_k = 0 rising, Re Y_k ≤ 0) marked.
- ``factors``: Rollett's K and Edwards–Sinsky mu, mu' with the bands of potential instability
  (mu < 1) shaded.
- ``circles``: load and source stability circles (|Γ_in| = 1, |Γ_out| = 1) on reflection-coefficient
  planes, the part of the unit disk they make unstable shaded.

SVG elements carry ids (``Artist.set_gid``) such as ``ndf-curve``, ``mode-marker``,
``kurokawa-point``, ``instability-band-0``, ``load-circle-0``, so tests and pages can find them.
"""

from __future__ import annotations

import io
from collections.abc import Callable
from typing import Literal

import matplotlib
import numpy as np
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.backends.backend_svg import FigureCanvasSVG
from matplotlib.figure import Figure
from matplotlib.patches import Circle, PathPatch, Polygon
from matplotlib.path import Path

from service.reports import style
from service.reports.data import CheckFigureData, TwoPortCurves
from service.reports.units import format_hz

ImageFormat = Literal["svg", "png"]
PLOT_NAMES: tuple[str, ...] = ("ndf", "admittance", "factors", "circles")
MAX_CIRCLE_FREQUENCIES = 5
K_MU_AXIS = (-1.0, 4.0)

_RC = {
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
    "svg.fonttype": "none",
    "svg.hashsalt": "ballast",
}


def _figure(width_in: float, height_in: float) -> Figure:
    fig = Figure(figsize=(width_in, height_in), facecolor=style.PAPER, layout="constrained")
    return fig


def _dress(ax: Axes) -> None:
    ax.set_facecolor(style.PANEL)
    ax.grid(True, color=style.RULE, linewidth=0.6, linestyle=(0, (1, 2)))
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


# --- NDF ---------------------------------------------------------------------------------------

def compress(z: np.ndarray) -> np.ndarray:
    """z·log10(1 + |z|)/|z|: keeps the argument, squeezes the radius (0 stays 0)."""
    r = np.abs(z)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(r > 0, z / r * np.log10(1.0 + r), 0j)


def _at_frequency(f: np.ndarray, values: np.ndarray, f0: float) -> complex | None:
    """Linear interpolation of complex samples on a log-frequency axis (None outside the band)."""
    ok = np.isfinite(values) & (f > 0)
    if ok.sum() < 2 or not (f[ok][0] <= f0 <= f[ok][-1]) or f0 <= 0:
        return None
    x = np.log(f[ok])
    return complex(np.interp(np.log(f0), x, values[ok].real),
                   np.interp(np.log(f0), x, values[ok].imag))


def _decades(f: np.ndarray) -> list[float]:
    positive = f[f > 0]
    if positive.size == 0:
        return []
    lo, hi = np.ceil(np.log10(positive[0])), np.floor(np.log10(positive[-1]))
    return [10.0 ** k for k in np.arange(lo, hi + 1)]


def _ndf_panel(ax: Axes, data: CheckFigureData, transform: Callable[[np.ndarray], np.ndarray],
               zoom: bool) -> None:
    f, ndf = data.frequency_hz, data.ndf
    w = transform(ndf)
    suffix = "-zoom" if zoom else ""
    ax.plot(w.real, -w.imag, color=style.MIRROR, linewidth=1.0, linestyle=(0, (4, 2)),
            label="negative frequencies (mirror)", gid="ndf-mirror" + suffix)
    ax.plot(w.real, w.imag, color=style.CURVE, linewidth=1.6, label="NDF(jω), f > 0",
            gid="ndf-curve" + suffix)
    ok = np.flatnonzero(np.isfinite(w))
    if ok.size > 8:  # direction of travel with rising frequency
        for i in ok[[ok.size // 4, ok.size // 2, 3 * ok.size // 4]]:
            j = min(i + 1, ok[-1])
            ax.annotate("", xy=(w[j].real, w[j].imag), xytext=(w[i].real, w[i].imag),
                        arrowprops={"arrowstyle": "-|>", "color": style.CURVE, "lw": 1.2})
    ax.plot([0], [0], marker="+", markersize=14, markeredgewidth=2.0, color=style.ALERT,
            linestyle="none", gid="origin" + suffix)
    marks = [(f0, _at_frequency(f, ndf, f0)) for f0 in _decades(f)]
    marks = [(f0, z) for f0, z in marks if z is not None]
    if marks:
        pts = transform(np.array([z for _, z in marks]))
        ax.plot(pts.real, pts.imag, "o", markersize=3.5, color=style.INK, linestyle="none",
                gid="frequency-marks" + suffix)
        for (f0, _), p in zip(marks, pts, strict=True):
            ax.annotate(format_hz(f0, 3), (p.real, p.imag), xytext=(4, 3),
                        textcoords="offset points", fontsize=7, color=style.MUTED,
                        annotation_clip=True)
    for i, mode in enumerate(data.modes):
        z = _at_frequency(f, ndf, mode.frequency_hz)
        if z is None:
            continue
        p = transform(np.array([z]))[0]
        ax.plot([p.real], [p.imag], marker="o", markersize=11, markerfacecolor="none",
                markeredgewidth=2.2, color=style.ALERT, linestyle="none",
                gid=("mode-marker" if i == 0 else f"mode-marker-{i}") + suffix)
        ax.annotate(f"mode {format_hz(mode.frequency_hz)}", (p.real, p.imag), xytext=(8, -12),
                    textcoords="offset points", fontsize=8, color=style.ALERT,
                    fontweight="bold", annotation_clip=True)
    ax.set_aspect("equal", adjustable="datalim")
    _dress(ax)


def ndf_figure(data: CheckFigureData) -> Figure:
    """The NDF contour: compressed whole view and a linear zoom near the origin."""
    fig = _figure(10.0, 4.6)
    whole, near = fig.subplots(1, 2)
    _ndf_panel(whole, data, compress, zoom=False)
    whole.set_title("NDF, whole axis (radius log₁₀(1+|NDF|))")
    whole.set_xlabel("Re (compressed)")
    whole.set_ylabel("Im (compressed)")
    _ndf_panel(near, data, lambda z: z, zoom=True)
    finite = np.abs(data.ndf[np.isfinite(data.ndf)])
    closest = float(finite.min()) if finite.size else 1.0
    half = float(np.clip(2.5 * closest, 1.2, 1e6))
    near.set_xlim(-half, half)
    near.set_ylim(-half, half)
    near.set_aspect("equal", adjustable="box")
    near.set_title("near the origin (linear)")
    near.set_xlabel("Re NDF")
    near.set_ylabel("Im NDF")
    ndf = data.verdict.get("ndf") or {}
    turns = ndf.get("encirclements_clockwise")
    text = ("clockwise turns around 0: " + (str(turns) if turns is not None else "–")
            + ("" if ndf.get("trusted", True) else " (count not trusted)"))
    near.text(0.02, 0.02, text, transform=near.transAxes, fontsize=8, color=style.INK,
              bbox={"boxstyle": "round,pad=0.3", "facecolor": style.PAPER,
                    "edgecolor": style.RULE}, gid="encirclement-note")
    whole.legend(loc="upper left", fontsize=7, frameon=False)
    return fig


# --- driving-point admittance ------------------------------------------------------------------

def admittance_figure(data: CheckFigureData) -> Figure:
    """Re Y_k and Im Y_k (mS, symmetric-log axis) vs frequency for the nodes that matter."""
    fig = _figure(10.0, 5.6)
    re_ax, im_ax = fig.subplots(2, 1, sharex=True)
    f = data.frequency_hz
    positive = f > 0
    for i, k in enumerate(data.plotted_nodes):
        name = data.node_names[k]
        y = data.admittance[positive, k] * 1e3
        colour = style.SERIES[i % len(style.SERIES)]
        re_ax.plot(f[positive], y.real, color=colour, linewidth=1.4, label=name,
                   gid=f"admittance-re-{name}")
        im_ax.plot(f[positive], y.imag, color=colour, linewidth=1.4, label=name,
                   gid=f"admittance-im-{name}")
    shown = {data.node_names[k] for k in data.plotted_nodes}
    marks = [m for m in data.kurokawa if m.node in shown]
    if marks:
        fk = [m.frequency_hz for m in marks]
        re_ax.scatter(fk, [m.re_admittance_s * 1e3 for m in marks], marker="D", s=42,
                      color=style.KUROKAWA, edgecolor=style.PAPER, zorder=5,
                      label="Kurokawa point", gid="kurokawa-point")
        im_ax.scatter(fk, [0.0] * len(fk), marker="D", s=42, color=style.KUROKAWA,
                      edgecolor=style.PAPER, zorder=5, gid="kurokawa-point-im")
    for ax in (re_ax, im_ax):
        ax.set_xscale("log")
        ax.set_yscale("symlog", linthresh=1.0)
        ax.axhline(0.0, color=style.INK, linewidth=0.8)
        for j, mode in enumerate(data.modes):
            ax.axvline(mode.frequency_hz, color=style.ALERT, linewidth=1.0,
                       linestyle=(0, (3, 2)), gid=f"mode-line-{j}")
        _dress(ax)
    low = re_ax.get_ylim()[0]
    if low < 0:
        re_ax.axhspan(low, 0.0, color=style.ALERT, alpha=0.07, linewidth=0,
                      gid="negative-conductance")
        re_ax.set_ylim(bottom=low)
    re_ax.set_title("driving-point admittance of the nodes that matter")
    re_ax.set_ylabel("Re Y (mS)")
    im_ax.set_ylabel("Im Y (mS)")
    im_ax.set_xlabel("frequency (Hz)")
    re_ax.legend(loc="best", fontsize=7, frameon=False, ncols=2)
    return fig


# --- K and mu ----------------------------------------------------------------------------------

def factors_figure(curves: TwoPortCurves) -> Figure:
    """K, mu and mu' vs frequency, bands where mu < 1 shaded; the axis is clipped to K_MU_AXIS."""
    fig = _figure(10.0, 3.8)
    ax = fig.subplots()
    f = curves.frequency_hz
    positive = f > 0
    for i, (lo, hi) in enumerate(curves.bands_hz):
        ax.axvspan(max(lo, f[positive][0]), hi, color=style.BAND, alpha=0.35, linewidth=0,
                   label="potentially unstable (mu < 1)" if i == 0 else None,
                   gid=f"instability-band-{i}")
    fac = curves.factors
    ax.plot(f[positive], fac.k[positive], color=style.INK, linewidth=1.4, label="K",
            gid="k-curve")
    ax.plot(f[positive], fac.mu[positive], color=style.CURVE, linewidth=1.6, label="mu (load)",
            gid="mu-curve")
    ax.plot(f[positive], fac.mu_prime[positive], color=style.CURVE, linewidth=1.0,
            linestyle=(0, (4, 2)), label="mu' (source)", gid="mu-prime-curve")
    ax.axhline(1.0, color=style.ALERT, linewidth=0.9, gid="unity-line")
    ax.set_xscale("log")
    ax.set_ylim(*K_MU_AXIS)
    ax.set_xlabel("frequency (Hz)")
    ax.set_title(f"two-port factors between {curves.ports[0]} and {curves.ports[1]} "
                 "(they speak for these ports only)")
    ax.legend(loc="upper right", fontsize=7, frameon=False, ncols=4)
    _dress(ax)
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


def _ring(centre: complex, radius: float, n: int = 256, clockwise: bool = False) -> np.ndarray:
    t = np.linspace(0.0, 2 * np.pi, n)
    if clockwise:
        t = t[::-1]
    return np.column_stack([centre.real + radius * np.cos(t), centre.imag + radius * np.sin(t)])


def _chart(ax: Axes, title: str) -> Circle:
    """A plain reflection-coefficient plane: unit circle, |Γ| rings and 30° spokes."""
    ax.set_facecolor(style.PAPER)
    disk = Circle((0, 0), 1.0, facecolor=style.PANEL, edgecolor=style.INK, linewidth=1.2,
                  zorder=1, gid="unit-circle")
    ax.add_patch(disk)
    for r in (0.25, 0.5, 0.75):
        ax.add_patch(Circle((0, 0), r, fill=False, edgecolor=style.RULE, linewidth=0.6,
                            linestyle=(0, (1, 2)), zorder=1))
    for angle in np.deg2rad(np.arange(0, 180, 30)):
        ax.plot([-np.cos(angle), np.cos(angle)], [-np.sin(angle), np.sin(angle)],
                color=style.RULE, linewidth=0.6, linestyle=(0, (1, 2)), zorder=1)
    ax.set_xlim(-1.3, 1.3)
    ax.set_ylim(-1.3, 1.3)
    ax.set_aspect("equal")
    ax.set_xticks([-1, -0.5, 0, 0.5, 1])
    ax.set_yticks([-1, -0.5, 0, 0.5, 1])
    for side in ("top", "right", "left", "bottom"):
        ax.spines[side].set_visible(False)
    ax.set_title(title)
    return disk


def _draw_circle(ax: Axes, disk: Circle, circle, i: int, colour: str, label: str,
                 gid: str) -> None:
    """Edge of one stability circle (or line) and its unstable part of the unit disk, shaded."""
    if circle.is_line[i]:
        foot = complex(circle.line_foot[i])
        if not np.isfinite(foot) or foot == 0:
            return
        unit = foot / abs(foot)
        along = 1j * unit
        a, b = foot - 5 * along, foot + 5 * along
        ax.plot([a.real, b.real], [a.imag, b.imag], color=colour, linewidth=1.6, label=label,
                gid=gid, zorder=3)
        far = [a, b, b + 10 * unit, a + 10 * unit]
        region = Polygon([(z.real, z.imag) for z in far], closed=True)
    else:
        centre, radius = complex(circle.centre[i]), float(circle.radius[i])
        ax.add_patch(Circle((centre.real, centre.imag), radius, fill=False, edgecolor=colour,
                            linewidth=1.6, label=label, gid=gid, zorder=3))
        if circle.stable_inside[i]:  # unstable outside: the disk minus the circle
            path = Path.make_compound_path(Path(_ring(0j, 1.0)),
                                           Path(_ring(centre, radius, clockwise=True)))
            region = PathPatch(path)
        else:
            region = Polygon(_ring(centre, radius), closed=True)
    region.set(facecolor=colour, alpha=0.11, edgecolor="none", zorder=2, gid=gid + "-unstable")
    ax.add_patch(region)
    region.set_clip_path(disk)


def circles_figure(curves: TwoPortCurves) -> Figure:
    """Load (Γ_L plane) and source (Γ_S plane) stability circles at a few telling frequencies."""
    fig = _figure(10.0, 5.0)
    load_ax, source_ax = fig.subplots(1, 2)
    load_disk = _chart(load_ax, f"load plane Γ_L ({curves.ports[1]}): |Γ_in| = 1")
    source_disk = _chart(source_ax, f"source plane Γ_S ({curves.ports[0]}): |Γ_out| = 1")
    for j, i in enumerate(circle_frequencies(curves)):
        colour = style.SERIES[j % len(style.SERIES)]
        label = format_hz(float(curves.frequency_hz[i]))
        _draw_circle(load_ax, load_disk, curves.factors.load_circle, int(i), colour, label,
                     f"load-circle-{j}")
        _draw_circle(source_ax, source_disk, curves.factors.source_circle, int(i), colour, label,
                     f"source-circle-{j}")
    load_ax.legend(loc="lower left", fontsize=7, frameon=False, title="shaded: unstable side",
                   title_fontsize=7)
    return fig


# --- rendering ---------------------------------------------------------------------------------

def build_figure(name: str, data: CheckFigureData) -> Figure | None:
    """One named plot, or None when the check has nothing to draw for it (e.g. no two-port)."""
    with matplotlib.rc_context(_RC):
        if name == "ndf":
            return ndf_figure(data) if np.isfinite(data.ndf).sum() >= 2 else None
        if name == "admittance":
            return admittance_figure(data)
        if name in ("factors", "circles"):
            if data.two_port is None:
                return None
            return (factors_figure if name == "factors" else circles_figure)(data.two_port)
    raise ValueError(f"unknown plot {name!r}; choose from {', '.join(PLOT_NAMES)}")


def render(fig: Figure, fmt: ImageFormat) -> bytes:
    """SVG (text kept as text, fixed ids) or PNG bytes; no timestamp, so output is repeatable."""
    buffer = io.BytesIO()
    with matplotlib.rc_context(_RC):
        if fmt == "svg":
            FigureCanvasSVG(fig).print_svg(buffer, metadata={"Date": None})
        elif fmt == "png":
            FigureCanvasAgg(fig).print_figure(buffer, format="png", dpi=110,
                                              metadata={"Software": "ballast"})
        else:
            raise ValueError(f"unknown image format {fmt!r}")
    return buffer.getvalue()


def render_plot(name: str, data: CheckFigureData, fmt: ImageFormat = "svg") -> bytes | None:
    fig = build_figure(name, data)
    return None if fig is None else render(fig, fmt)
