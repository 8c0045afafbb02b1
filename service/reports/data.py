"""What the plots of one check draw: the engine's per-frequency arrays beside its verdict JSON.

The verdict JSON holds summaries only (minima, crossings, modes); the curves come from running the
engine's analysis again on the stored request (``workers.engine.analyse``), and the contours from
its model refinement (``workers.engine.refine_analysis``, the validated model of NDF between the
samples; ``contours`` for the return differences). For one check this costs a fraction of a
second, less than drawing the plots. No matplotlib here.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Literal

import numpy as np

from service.reports.contours import Contour, drawn_contour, refined_response
from service.reports.devices import device_notes
from service.runner import load_request
from workers.engine import Analysis, analyse, refine_analysis
from workers.engine.external import two_port_report
from workers.engine.twoport import TwoPortFactors

MAX_PLOTTED_NODES = 4
NodeChoice = Literal["relevant", "all"]
NODE_CHOICES: tuple[str, ...] = ("relevant", "all")


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
    participation: tuple[float, ...] = ()


@dataclass(frozen=True)
class TwoPortCurves:
    """Two-port factors on the frequencies where the external Z is defined."""

    frequency_hz: np.ndarray
    factors: TwoPortFactors
    ports: tuple[str, str]
    bands_hz: tuple[tuple[float, float], ...]
    unconditionally_stable: bool = False
    s: np.ndarray | None = None       # (F, 2, 2) S-parameters of the two-port, same frequencies


@dataclass(frozen=True)
class DeviceCurves:
    """One device's return difference F_k as drawn, and what the verdict says of it."""

    name: str
    order: int                        # switch-on order, from 1
    contour: Contour
    count: int | None                 # the verdict's count (None: not trusted)
    note: str | None                  # why the count is None


@dataclass(frozen=True)
class CheckFigureData:
    """Per-frequency arrays (frequency first) and the marks the verdict names."""

    verdict: dict[str, Any]
    frequency_hz: np.ndarray
    ndf: np.ndarray                    # (F,), NaN where undefined
    ndf_contour: Contour               # samples and validated-model points, as drawn
    node_names: tuple[str, ...]
    admittance: np.ndarray             # (F, N) driving-point admittances, siemens
    plotted_nodes: tuple[int, ...]     # indices into node_names, most relevant first
    kurokawa: tuple[KurokawaMark, ...]
    modes: tuple[ModeMark, ...]
    two_port: TwoPortCurves | None
    devices: tuple[DeviceCurves, ...] = ()
    all_nodes: bool = False

    @property
    def verdict_name(self) -> str:
        return str(self.verdict.get("verdict", "unknown"))

    def device_notes(self) -> dict[str, str]:
        return {d.name: d.note for d in self.devices if d.note}


def _modes(verdict: dict[str, Any]) -> tuple[ModeMark, ...]:
    marks = []
    for mode in verdict.get("modes") or []:
        if isinstance(mode.get("frequency_hz"), int | float):
            marks.append(ModeMark(float(mode["frequency_hz"]), mode.get("growth_rate_per_s"),
                                  tuple(mode.get("nodes") or ()), tuple(mode.get("devices") or ()),
                                  tuple(float(p) for p in mode.get("node_participation") or ())))
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


def _device_curves(analysis: Analysis, verdict: dict[str, Any]) -> tuple[DeviceCurves, ...]:
    request = analysis.request
    valid = analysis.valid
    f = request.frequency_hz[valid]
    fk = analysis.loops.return_difference[valid]
    notes = device_notes(analysis, verdict)
    counts = {d.get("name"): d.get("encirclements_clockwise")
              for d in verdict.get("devices") or []}
    curves = []
    for k, device in enumerate(request.devices):
        ok = np.isfinite(fk[:, k]) & (np.abs(fk[:, k]) > 0)
        model, refinement = refined_response(f[ok], fk[ok, k],
                                             request.options.phase_step_limit_deg)
        curves.append(DeviceCurves(device.name, k + 1,
                                   drawn_contour(f[ok], fk[ok, k], model, refinement),
                                   counts.get(device.name), notes.get(device.name)))
    return tuple(curves)


def figure_data(payload: dict[str, Any], verdict: dict[str, Any],
                nodes: NodeChoice = "relevant") -> CheckFigureData:
    """Run the engine's analysis on ``payload`` (a JSON check request) for the plots of ``verdict``;
    ``nodes`` "all" plots every node's admittance, "relevant" the few that matter.

    Raises marshmallow.ValidationError or ValueError as :func:`service.runner.load_request` does.
    """
    request = load_request(payload)
    analysis = analyse(request)
    f = request.frequency_hz
    ndf = np.where(analysis.valid, analysis.loops.ndf, np.nan + 0j)
    names = tuple(p.name for p in request.ports)
    kurokawa = tuple(KurokawaMark(names[c.node], c.frequency_hz, c.re_admittance_s)
                     for c in analysis.nodes.crossings)
    summary, factors = two_port_report(request, analysis.state.y_data, [], analysis.z_on)
    two_port = None
    if summary is not None and factors is not None:
        bands = tuple((float(lo), float(hi)) for lo, hi in summary.get("unstable_bands_hz") or []
                      if lo is not None and hi is not None)
        ports = tuple(summary["ports"])
        two_port = TwoPortCurves(factors[0], factors[2], (ports[0], ports[1]), bands,
                                 bool(summary.get("unconditionally_stable")), factors[1])
    refined = refine_analysis(analysis, None if factors is None else (factors[0], factors[2]))
    ndf_contour = drawn_contour(f[analysis.valid], analysis.loops.ndf[analysis.valid],
                                refined.model, refined.refinement)
    plotted = (tuple(range(len(names))) if nodes == "all"
               else nodes_that_matter(names, verdict, kurokawa))
    return CheckFigureData(
        verdict=verdict,
        frequency_hz=f,
        ndf=ndf,
        ndf_contour=ndf_contour,
        node_names=names,
        admittance=analysis.nodes.admittance,
        plotted_nodes=plotted,
        kurokawa=kurokawa,
        modes=_modes(verdict),
        two_port=two_port,
        devices=_device_curves(analysis, verdict),
        all_nodes=nodes == "all",
    )


def request_device_notes(payload: dict[str, Any], verdict: dict[str, Any]) -> dict[str, str]:
    """Why each null device count is null, from the engine's analysis of ``payload`` alone (no
    refinement, no plots: tens of milliseconds)."""
    return device_notes(analyse(load_request(payload)), verdict)
