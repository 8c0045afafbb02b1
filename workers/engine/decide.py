"""From an analysis to the verdict.

``unstable`` needs a trusted encirclement count above zero; ``stable`` needs a trusted count of zero
with nothing left unexplained; everything else is ``indeterminate`` with the blocking diagnostics
that made it so. A count that cannot be trusted never yields ``stable``.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from workers.engine import modes as mode_estimates
from workers.engine.check import Analysis, count_trusted
from workers.engine.verdict import (
    CheckVerdict,
    DeviceReport,
    Diagnostic,
    EdgeReport,
    KurokawaPoint,
    MethodReport,
    Mode,
    NdfReport,
    NodeReport,
    StabilisationHint,
)

# Kurokawa's first-order estimate is only sharp for a high-Q crossing (common practice): a point
# with |σ|/ω below this that the count does not explain blocks a ``stable`` verdict.
KUROKAWA_SHARP_RATIO = 0.1
MARGINAL_ABS = 1e-3


def ndf_report(analysis: Analysis, trusted: bool) -> NdfReport | None:
    c = analysis.ndf_count
    if c is None:
        return None

    def edge(e: Any) -> EdgeReport:
        return EdgeReport(e.frequency_hz, e.value.real, e.value.imag, e.distance, e.off_axis,
                          e.drift)

    return NdfReport(c.clockwise, c.residual, edge(c.low), edge(c.high), c.max_phase_step_deg,
                     c.max_phase_step_at_hz, c.min_abs, c.min_abs_at_hz, trusted)


def device_reports(analysis: Analysis) -> list[DeviceReport]:
    f = analysis.request.frequency_hz[analysis.valid]
    fk = analysis.loops.return_difference[analysis.valid]
    reports = []
    for k, device in enumerate(analysis.request.devices):
        magnitude = np.abs(fk[:, k])
        finite = np.isfinite(magnitude)
        i = int(np.nanargmin(np.where(finite, magnitude, np.nan))) if finite.any() else 0
        count = analysis.device_counts[k] if k < len(analysis.device_counts) else None
        closed = count is not None and not count_trusted(count, analysis.request)
        reports.append(DeviceReport(
            name=device.name, order=k + 1,
            encirclements_clockwise=count.clockwise if closed and count else None,
            min_abs_return_difference=float(magnitude[i]) if finite.any() else float("nan"),
            min_at_hz=float(f[i]) if f.size else float("nan"),
        ))
    return reports


def node_reports(analysis: Analysis) -> list[NodeReport]:
    f = analysis.request.frequency_hz
    y = analysis.nodes.admittance
    reports = []
    for k, port in enumerate(analysis.request.ports):
        re = np.where(np.isfinite(y[:, k]), y[:, k].real, np.nan)
        i = int(np.nanargmin(re)) if np.isfinite(re).any() else 0
        points = [KurokawaPoint(c.frequency_hz, c.re_admittance_s, c.im_slope_s_per_hz,
                                c.growth_estimate_per_s)
                  for c in analysis.nodes.crossings if c.node == k]
        reports.append(NodeReport(port.name, port.role, float(re[i]), float(f[i]), points))
    return reports


def hint_for(analysis: Analysis, node: int, at_hz: float) -> StabilisationHint | None:
    """Shunt conductance that lifts Re Y_node to zero at ``at_hz`` (nearest sample)."""
    f = analysis.request.frequency_hz
    i = int(np.argmin(np.abs(f - at_hz)))
    re = float(analysis.nodes.admittance[i, node].real)
    if not np.isfinite(re) or re >= 0:
        return None
    return StabilisationHint(analysis.request.ports[node].name, float(f[i]), -re, -1.0 / re)


def sample_modes(analysis: Analysis, count: int) -> list[Mode]:
    """Mode estimates from the samples: phase drops of NDF, sharpened by Kurokawa points."""
    request = analysis.request
    f = request.frequency_hz[analysis.valid]
    ndf = analysis.loops.ndf[analysis.valid]
    pairs = count // 2
    frequencies = mode_estimates.phase_drop_frequencies(f, ndf, pairs)
    if count % 2:
        frequencies.append(0.0)
    crossings = list(analysis.nodes.crossings)
    device_names = [d.name for d, c in zip(request.devices, analysis.device_counts, strict=False)
                    if c is not None and c.clockwise > 0]
    found = []
    for at_hz in frequencies:
        growth = None
        how = "ndf_phase_drop" if at_hz > 0 else "ndf_real_axis"
        near = mode_estimates.nearest_crossing(at_hz, crossings)
        if near is not None:
            at_hz, growth, how = near.frequency_hz, near.growth_estimate_per_s, "kurokawa_point"
        weights = mode_estimates.node_participation(request.frequency_hz,
                                                    analysis.nodes.impedance, at_hz)
        order = np.argsort(-weights)
        found.append(Mode(
            frequency_hz=float(at_hz), growth_rate_per_s=growth,
            nodes=[request.ports[i].name for i in order],
            devices=device_names or [d.name for d in request.devices],
            node_participation=[float(weights[i]) for i in order],
            estimated_by=how,
            hint=hint_for(analysis, int(order[0]), at_hz),
        ))
    return found


def unexplained_kurokawa(analysis: Analysis, count: int) -> list[Diagnostic]:
    """Sharp Kurokawa points that a count of zero does not explain."""
    if count != 0:
        return []
    found = []
    for c in analysis.nodes.crossings:
        omega = 2 * np.pi * c.frequency_hz
        ratio = abs(c.growth_estimate_per_s) / omega if omega > 0 else np.inf
        node = analysis.request.ports[c.node].name
        sharp = ratio < KUROKAWA_SHARP_RATIO
        found.append(Diagnostic(
            "kurokawa_unexplained", "blocking" if sharp else "info",
            f"node {node} meets Kurokawa's condition at {c.frequency_hz:.6g} Hz "
            f"(Re Y = {c.re_admittance_s:.3g} S) although NDF does not encircle the origin"
            + ("" if sharp else "; the crossing is broad, so its first-order estimate is weak"),
            {"node": node, "frequency_hz": c.frequency_hz, "re_admittance_s": c.re_admittance_s},
        ))
    return found


def decide(analysis: Analysis, two_port: dict[str, Any] | None,
           refinement: dict[str, Any] | None = None,
           model_modes: list[Mode] | None = None,
           extra: list[Diagnostic] | None = None,
           model_method: MethodReport | None = None) -> CheckVerdict:
    """The verdict of one check (see module docstring)."""
    request = analysis.request
    diagnostics = list(analysis.diagnostics) + list(extra or [])
    count = analysis.ndf_count
    blocking_count: list[Diagnostic] = []
    if count is None:
        blocking_count.append(Diagnostic(
            "singular_points", "blocking", "fewer than three frequencies have a defined NDF"))
    else:
        blocking_count = count_trusted(count, request)
        if count.min_abs < MARGINAL_ABS:
            diagnostics.append(Diagnostic(
                "marginal_response", "warning",
                f"|NDF| falls to {count.min_abs:.3g} at {count.min_abs_at_hz:.6g} Hz: a natural "
                "frequency lies very close to the jω axis",
                {"min_abs": count.min_abs, "at_hz": count.min_abs_at_hz},
            ))
        top = count.high.value
        if abs(top - 1) > request.options.closure_tolerance and not blocking_count:
            diagnostics.append(Diagnostic(
                "asymptote_not_unity", "info",
                f"NDF settles to {top.real:.4g}{top.imag:+.2g}j, not 1, at the top of the band",
            ))
    diagnostics += blocking_count
    trusted = not blocking_count
    unstable_count = count.clockwise if (trusted and count is not None) else None
    if unstable_count is not None:
        diagnostics += unexplained_kurokawa(analysis, unstable_count)
    methods = [MethodReport("encirclement", unstable_count, None if unstable_count is None
                            else True)]
    kurokawa_pairs = sum(1 for c in analysis.nodes.crossings)
    methods.append(MethodReport(
        "kurokawa", None, None,
        f"{kurokawa_pairs} node crossing(s) meet Kurokawa's condition "
        "(a necessary start condition per node; it does not count natural frequencies)"))
    if model_method is not None:
        methods.insert(1, model_method)
    blocked = any(d.severity == "blocking" for d in diagnostics)
    if blocked or unstable_count is None:
        name, unstable_count, found_modes = "indeterminate", None, []
    elif unstable_count > 0:
        name = "unstable"
        found_modes = model_modes if model_modes else sample_modes(analysis, unstable_count)
    else:
        name, found_modes = "stable", []
    f = request.frequency_hz
    return CheckVerdict(
        verdict=name,
        unstable_count=unstable_count,
        modes=found_modes,
        ndf=ndf_report(analysis, trusted),
        devices=device_reports(analysis),
        nodes=node_reports(analysis),
        two_port=two_port,
        methods=methods,
        diagnostics=diagnostics,
        band_hz=(float(f[0]), float(f[-1])),
        n_points=int(f.size),
        n_ports=request.n_ports,
        refinement=refinement,
    )
