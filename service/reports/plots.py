"""The pictures of a check, drawn with matplotlib's object API (no pyplot, no global backend).

- ``ndf``: NDF(jω) over the whole axis and near the origin (``plot_contours``).
- ``device-<k>``: the return difference F_k of the k-th device in switch-on order, drawn the
  same way (``plot_contours``).
- ``admittance``: driving-point admittances of the nodes, Kurokawa points (``plot_nodes``).
- ``factors``: K, μ and μ′ of the external two-port; ``circles``: its stability circles
  (``plot_twoport``).

SVG elements carry ids (``Artist.set_gid``) such as ``ndf-curve``, ``mode-marker``,
``kurokawa-point-g1``, ``instability-band-0``, ``load-circle-0``, ``label-…``, so tests and
pages can find them.
"""

from __future__ import annotations

import io
import re
from typing import Literal

import matplotlib
import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.backends.backend_svg import FigureCanvasSVG
from matplotlib.figure import Figure

from service.reports.contours import compress
from service.reports.data import CheckFigureData
from service.reports.plot_base import RC as _RC
from service.reports.plot_contours import device_figure, ndf_figure
from service.reports.plot_nodes import admittance_figure
from service.reports.plot_twoport import circle_frequencies, circles_figure, factors_figure

ImageFormat = Literal["svg", "png"]
PLOT_NAMES: tuple[str, ...] = ("ndf", "admittance", "factors", "circles")
DEVICE_PLOT = re.compile(r"device-([1-9][0-9]*)")

__all__ = ["PLOT_NAMES", "build_figure", "circle_frequencies", "circles_figure", "compress",
           "device_figure", "factors_figure", "matplotlib", "ndf_figure", "plot_names",
           "render", "render_plot"]


def device_plot_name(order: int) -> str:
    return f"device-{order}"


def plot_names(data: CheckFigureData) -> tuple[str, ...]:
    """Every plot this check has: the four named ones and one per device."""
    return PLOT_NAMES + tuple(device_plot_name(d.order) for d in data.devices)


def _build(name: str, data: CheckFigureData) -> Figure | None:
    if name == "ndf":
        return ndf_figure(data) if np.isfinite(data.ndf).sum() >= 2 else None
    if name == "admittance":
        return admittance_figure(data)
    if name in ("factors", "circles"):
        if data.two_port is None:
            return None
        return (factors_figure if name == "factors" else circles_figure)(data.two_port)
    match = DEVICE_PLOT.fullmatch(name)
    if match:
        found = [d for d in data.devices if d.order == int(match.group(1))]
        if not found or found[0].contour.values.size < 2:
            return None
        return device_figure(data, found[0])
    raise ValueError(f"unknown plot {name!r}; choose from {', '.join(PLOT_NAMES)} or device-<k>")


def build_figure(name: str, data: CheckFigureData) -> Figure | None:
    """One named plot, or None when the check has nothing to draw for it (e.g. no two-port)."""
    with matplotlib.rc_context(_RC):
        return _build(name, data)


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
