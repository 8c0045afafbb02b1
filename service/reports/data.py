"""What the plots of one check draw: the engine's per-frequency arrays beside its verdict JSON.

The verdict JSON holds summaries only (minima, crossings, modes); the curves come from running the
engine's analysis again on the stored request (``workers.engine.analyse``): for one check this
costs tens of milliseconds, far less than drawing the plots. No matplotlib here.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from service.runner import load_request
from workers.engine import analyse
from workers.engine.external import external_s
from workers.engine.twoport import TwoPortFactors, two_port_factors

MAX_PLOTTED_NODES = 4


@dataclass(frozen=True)
class KurokawaMark:
    node: str
    frequency_hz: float
    re_admittance_s: float


@dataclass(frozen=True)
class ModeMark:
    frequency_hz: float
    growth_rate_per_s: float | None
    nodes: tuple[str, ...]
    devices: tuple[str, ...]


@dataclass(frozen=True)
class TwoPortCurves:
    """Two-port factors on the frequencies where the external Z is defined."""

    frequency_hz: np.ndarray
    factors: TwoPortFactors
    ports: tuple[str, str]
    bands_hz: tuple[tuple[float, float], ...]


@dataclass(frozen=True)
class CheckFigureData:
    """Per-frequency arrays (frequency first) and the marks the verdict names."""

    verdict: dict[str, Any]
    frequency_hz: np.ndarray
    ndf: np.ndarray                    # (F,), NaN where undefined
    node_names: tuple[str, ...]
    admittance: np.ndarray             # (F, N) driving-point admittances, siemens
    plotted_nodes: tuple[int, ...]     # indices into node_names, most relevant first
    kurokawa: tuple[KurokawaMark, ...]
    modes: tuple[ModeMark, ...]
    two_port: TwoPortCurves | None

    @property
    def verdict_name(self) -> str:
        return str(self.verdict.get("verdict", "unknown"))


def _modes(verdict: dict[str, Any]) -> tuple[ModeMark, ...]:
    marks = []
    for mode in verdict.get("modes") or []:
        if isinstance(mode.get("frequency_hz"), int | float):
            marks.append(ModeMark(float(mode["frequency_hz"]), mode.get("growth_rate_per_s"),
                                  tuple(mode.get("nodes") or ()), tuple(mode.get("devices") or ())))
    return tuple(sorted(marks, key=lambda m: m.frequency_hz))


def nodes_that_matter(names: tuple[str, ...], verdict: dict[str, Any],
                      kurokawa: tuple[KurokawaMark, ...],
                      limit: int = MAX_PLOTTED_NODES) -> tuple[int, ...]:
    """Node indices to plot: for each mode the node where a part moves it most (largest
    ``node_leverage``) and the node where it shows most, nodes with Kurokawa points, nodes whose
    Re Y goes negative (most negative first); the external ports when none of these exist."""
    chosen: list[str] = []

    def add(name: str) -> None:
        if name in names and name not in chosen:
            chosen.append(name)

    for mode in verdict.get("modes") or []:
        nodes, leverage = mode.get("nodes") or [], mode.get("node_leverage") or []
        ranked = [n for _, n in sorted(zip(leverage, nodes, strict=False), key=lambda p: -p[0])]
        for name in [*ranked[:1], *nodes[:2]]:
            add(name)
    for mark in sorted(kurokawa, key=lambda m: m.re_admittance_s):
        add(mark.node)
    reports = [n for n in verdict.get("nodes") or [] if isinstance(n, dict)]
    negative = sorted((n for n in reports if (n.get("min_re_admittance_s") or 0.0) < 0),
                      key=lambda n: n["min_re_admittance_s"])
    for node in negative:
        add(node["name"])
    if not chosen:
        for node in reports:
            if node.get("role") == "external":
                add(node["name"])
    if not chosen and names:
        chosen.append(names[0])
    return tuple(names.index(n) for n in chosen[:limit])


def figure_data(payload: dict[str, Any], verdict: dict[str, Any]) -> CheckFigureData:
    """Run the engine's analysis on ``payload`` (a JSON check request) for the plots of ``verdict``.

    Raises marshmallow.ValidationError or ValueError as :func:`service.runner.load_request` does.
    """
    request = load_request(payload)
    analysis = analyse(request)
    f = request.frequency_hz
    ndf = np.where(analysis.valid, analysis.loops.ndf, np.nan + 0j)
    names = tuple(p.name for p in request.ports)
    kurokawa = tuple(KurokawaMark(names[c.node], c.frequency_hz, c.re_admittance_s)
                     for c in analysis.nodes.crossings)
    two_port = None
    external = [p.name for p in request.ports if p.role == "external"]
    if len(external) == 2:
        s, singular, _ = external_s(request, analysis.state.y_data, analysis.z_on)
        keep = ~singular
        if keep.sum() >= 2:
            with np.errstate(all="ignore"):
                factors = two_port_factors(s[keep])
            summary = verdict.get("two_port") or {}
            raw_bands = summary.get("unstable_bands_hz") or []
            bands = tuple((float(lo), float(hi)) for lo, hi in raw_bands
                          if lo is not None and hi is not None)
            two_port = TwoPortCurves(f[keep], factors, (external[0], external[1]), bands)
    return CheckFigureData(
        verdict=verdict,
        frequency_hz=f,
        ndf=ndf,
        node_names=names,
        admittance=analysis.nodes.admittance,
        plotted_nodes=nodes_that_matter(names, verdict, kurokawa),
        kurokawa=kurokawa,
        modes=_modes(verdict),
        two_port=two_port,
    )
