"""From an analysis to the verdict, by consensus of the methods.

The count is the encirclement count on the refined contour when the rational model validated
(``refine``), else on the samples. ``unstable`` needs a trusted count above zero; ``stable`` needs
a trusted count of zero, no right-half-plane zero in the validated model, and no sharp Kurokawa
point that neither explains. When the model's right-half-plane zeros and the refined count
differ, the verdict is ``indeterminate`` with both numbers. Everything else that blocks makes it
``indeterminate`` too. A count that cannot be trusted never yields ``stable``.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from workers.engine import modes as mode_estimates
from workers.engine.check import Analysis, count_trusted
from workers.engine.encirclement import Encirclements
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
# a model zero within this fraction of the frequency (or 3 half-widths) explains a Kurokawa point
KUROKAWA_EXPLAIN_SPAN = 0.05
MARGINAL_ABS = 1e-3


def ndf_report(analysis: Analysis, trusted: bool) -> NdfReport | None:
    c = analysis.ndf_count
    if c is None:
        return None

    def edge(e: Any) -> EdgeReport:
        return EdgeReport(e.frequency_hz, e.value.real, e.value.imag, e.distance, e.off_axis,
                          e.drift, e.trend)

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


def _explaining_zero(frequency_hz: float, zeros_rad_s: np.ndarray | None) -> complex | None:
    """The model zero nearest the Kurokawa point, if it is in the left half-plane and close
    enough (KUROKAWA_EXPLAIN_SPAN of the frequency, or 3 half-widths) to account for it."""
    if zeros_rad_s is None or zeros_rad_s.size == 0:
        return None
    upper = zeros_rad_s[zeros_rad_s.imag >= 0]
    if upper.size == 0:
        return None
    nearest = complex(upper[np.argmin(np.abs(upper - 2j * np.pi * frequency_hz))])
    reach = max(KUROKAWA_EXPLAIN_SPAN * frequency_hz, 3 * abs(nearest.real) / (2 * np.pi))
    if nearest.real < 0 and abs(nearest.imag / (2 * np.pi) - frequency_hz) <= reach:
        return nearest
    return None


def unexplained_kurokawa(analysis: Analysis, count: int,
                         model_zeros_rad_s: np.ndarray | None = None) -> list[Diagnostic]:
    """Sharp Kurokawa points that a count of zero does not explain.

    With a validated model, a point next to a left-half-plane zero of NDF is explained: the
    model places that natural frequency exactly, where Kurokawa's estimate is first-order.
    """
    if count != 0:
        return []
    found = []
    for c in analysis.nodes.crossings:
        omega = 2 * np.pi * c.frequency_hz
        ratio = abs(c.growth_estimate_per_s) / omega if omega > 0 else np.inf
        node = analysis.request.ports[c.node].name
        sharp = ratio < KUROKAWA_SHARP_RATIO
        details = {"node": node, "frequency_hz": c.frequency_hz,
                   "re_admittance_s": c.re_admittance_s}
        zero = _explaining_zero(c.frequency_hz, model_zeros_rad_s)
        if zero is not None:
            found.append(Diagnostic(
                "kurokawa_unexplained", "info",
                f"node {node} meets Kurokawa's condition at {c.frequency_hz:.6g} Hz "
                f"(Re Y = {c.re_admittance_s:.3g} S); the validated model explains it: the "
                f"natural frequency there is σ = {zero.real:.4g} 1/s (left half-plane) at "
                f"{zero.imag / (2 * np.pi):.6g} Hz",
                {**details, "model_growth_rate_per_s": zero.real,
                 "model_frequency_hz": zero.imag / (2 * np.pi)},
            ))
            continue
        found.append(Diagnostic(
            "kurokawa_unexplained", "blocking" if sharp else "info",
            f"node {node} meets Kurokawa's condition at {c.frequency_hz:.6g} Hz "
            f"(Re Y = {c.re_admittance_s:.3g} S) although NDF does not encircle the origin"
            + ("" if sharp else "; the crossing is broad, so its first-order estimate is weak"),
            details,
        ))
    return found


def _method_reports(analysis: Analysis, count: int | None, model_method: MethodReport | None,
                    diagnostics: list[Diagnostic]) -> list[MethodReport]:
    """What each method says, and whether it agrees with the encirclement count."""
    model_count = model_method.unstable_count if model_method is not None else None
    both = count is not None and model_count is not None
    methods = [MethodReport("encirclement", count, None if count is None
                            else (model_count == count if both else True))]
    if model_method is not None:
        methods.append(MethodReport("rational_model", model_count,
                                    (model_count == count) if both else None, model_method.note))
    crossings = len(analysis.nodes.crossings)
    blocking_points = sum(1 for d in diagnostics
                          if d.code == "kurokawa_unexplained" and d.severity == "blocking")
    agrees = None
    if count is not None:
        agrees = crossings > 0 if count > 0 else blocking_points == 0
    methods.append(MethodReport(
        "kurokawa", None, agrees,
        f"{crossings} node crossing(s) meet Kurokawa's condition "
        "(a necessary start condition per node; it does not count natural frequencies)"))
    return methods


def decide(analysis: Analysis, two_port: dict[str, Any] | None,
           refinement: dict[str, Any] | None = None,
           model_modes: list[Mode] | None = None,
           extra: list[Diagnostic] | None = None,
           model_method: MethodReport | None = None,
           refined_count: Encirclements | None = None,
           model_zeros_rad_s: np.ndarray | None = None) -> CheckVerdict:
    """The verdict of one check by consensus (module docstring).

    ``refined_count``: the count on the contour refined with the validated model (replaces the
    samples' count); ``model_method``: what the model's right-half-plane zeros say;
    ``model_zeros_rad_s``: all the model's trusted zeros (to explain Kurokawa points).
    """
    request = analysis.request
    diagnostics = list(analysis.diagnostics) + list(extra or [])
    count = refined_count if refined_count is not None else analysis.ndf_count
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
        diagnostics += unexplained_kurokawa(analysis, unstable_count, model_zeros_rad_s)
    model_count = model_method.unstable_count if model_method is not None else None
    if unstable_count is not None and model_count is not None and model_count != unstable_count:
        diagnostics.append(Diagnostic(
            "model_count_disagrees", "blocking",
            f"the refined encirclement count is {unstable_count} but the validated model has "
            f"{model_count} right-half-plane zero(s) in the band",
            {"encirclement_count": unstable_count, "model_count": model_count},
        ))
    methods = _method_reports(analysis, unstable_count, model_method, diagnostics)
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
