"""From an analysis to the verdict, by consensus of the methods and by what the samples prove.

The count is the encirclement count on the refined contour when the rational model validated
(``refined_check``), else on the samples, closed at the band edges by their physics (``edges``).
It is *complete* when both edges are settled, no phase step is too large, the validated model's
right-half-plane zeros in the band agree with it, and nothing else blocks; a complete count is
the verdict: ``stable`` at 0 (with no sharp Kurokawa point left unexplained), ``unstable``
above. An incomplete count never yields ``stable``. But an oscillation found inside the band is
real whatever lies outside it: a right-half-plane zero of the validated model inside the band
that the samples pin down (``pinning``) makes the verdict ``unstable`` even when an edge is open,
with ``unstable_count`` the number so found and ``count_complete`` false. Otherwise the verdict
is ``indeterminate``. Every verdict lists the modes found; one that is not final says what to
sweep next (``next_sweep``).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from workers.engine import modes as mode_estimates
from workers.engine.check import Analysis, BandEdges, count_trusted
from workers.engine.edges import EdgeJudgement
from workers.engine.identify import zero_count
from workers.engine.next_sweep import next_sweep
from workers.engine.refined_check import RefinedCheck
from workers.engine.verdict import (
    Assumption,
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
    TwoPortReport,
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
    edges = analysis.ndf_edges

    def edge(e: Any, judged: EdgeJudgement | None) -> EdgeReport:
        if judged is None:
            return EdgeReport(e.frequency_hz, e.value.real, e.value.imag, e.distance, e.off_axis,
                              e.drift, e.trend)
        return EdgeReport(e.frequency_hz, e.value.real, e.value.imag, e.distance, e.off_axis,
                          e.drift, e.trend, judged.settled, judged.basis, judged.share,
                          judged.slope, judged.spread, judged.reason)

    return NdfReport(c.clockwise, c.residual, edge(c.low, edges.low if edges else None),
                     edge(c.high, edges.high if edges else None), c.max_phase_step_deg,
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
        edges = analysis.device_edges[k] if k < len(analysis.device_edges) else None
        blockers = count_trusted(count, analysis.request, edges) if count is not None else None
        if count is None:
            note = "fewer than three frequencies have a defined return difference"
        elif blockers:
            note = "its count cannot stand for the whole axis: " + "; ".join(
                _device_blocker(d) for d in blockers)
        else:
            note = None
        reports.append(DeviceReport(
            name=device.name, order=k + 1,
            encirclements_clockwise=count.clockwise if count is not None and not blockers
            else None,
            min_abs_return_difference=float(magnitude[i]) if finite.any() else float("nan"),
            min_at_hz=float(f[i]) if f.size else float("nan"),
            fmax_hz=device.fmax_hz, count_note=note,
        ))
    return reports


def _device_blocker(d: Diagnostic) -> str:
    """A count diagnostic said of a return difference instead of NDF."""
    return d.message.replace("NDF", "F_k")


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


def _assumptions(edges: BandEdges | None) -> list[Assumption]:
    """What a complete count rests on beyond the samples: the edge rules used."""
    if edges is None:
        return []
    found = []
    if edges.low.basis == "dc_asymptote":
        found.append(Assumption(
            "dc_asymptote", f"{edges.low.reason}; assumes no natural frequency below the band "
            "shows in the lowest octave by less than the asymptote test's tolerance"))
    if edges.high.basis == "share_decay":
        found.append(Assumption(
            "top_share_decay", f"{edges.high.reason}; assumes nothing above the band lifts the "
            "devices' share back to 1"))
    if edges.high.basis == "fmax_statement":
        found.append(Assumption(
            "no_gain_above_fmax", f"{edges.high.reason}; as stated by the flow, a device without "
            "power gain cannot sustain an oscillation (common practice)"))
    return found


def _count_diagnostics(analysis: Analysis, count: Any) -> list[Diagnostic]:
    """Why the count cannot stand (blocking), and what it says about the edges (info)."""
    request = analysis.request
    if count is None:
        return [Diagnostic("singular_points", "blocking",
                           "fewer than three frequencies have a defined NDF")]
    found = count_trusted(count, request, analysis.ndf_edges)
    if count.min_abs < MARGINAL_ABS:
        found.append(Diagnostic(
            "marginal_response", "warning",
            f"|NDF| falls to {count.min_abs:.3g} at {count.min_abs_at_hz:.6g} Hz: a natural "
            "frequency lies very close to the jω axis",
            {"min_abs": count.min_abs, "at_hz": count.min_abs_at_hz},
        ))
    top = count.high.value
    if abs(top - 1) > request.options.closure_tolerance and not found:
        found.append(Diagnostic(
            "asymptote_not_unity", "info",
            f"NDF is {top.real:.4g}{top.imag:+.2g}j, not yet 1, at the top of the band",
        ))
    return found


def decide(analysis: Analysis, two_port: TwoPortReport | None,
           refined: RefinedCheck | None = None,
           extra: list[Diagnostic] | None = None) -> CheckVerdict:
    """The verdict of one check (module docstring). ``refined``: what the rational model adds
    (None when ``options.refine`` is false)."""
    request = analysis.request
    diagnostics = list(analysis.diagnostics) + list(extra or [])
    if refined is not None:
        diagnostics += refined.diagnostics
    count = refined.refinement.count if refined is not None and refined.refinement is not None \
        else analysis.ndf_count
    count_blocks = _count_diagnostics(analysis, count)
    diagnostics += count_blocks
    trusted = not any(d.severity == "blocking" for d in count_blocks)
    full_count = count.clockwise if (trusted and count is not None) else None
    if full_count is not None:
        diagnostics += unexplained_kurokawa(analysis, full_count,
                                            None if refined is None else refined.zeros_rad_s)
    model_method = None if refined is None else refined.method
    model_count = None if model_method is None else model_method.unstable_count
    if full_count is not None and model_count is not None and model_count != full_count:
        diagnostics.append(Diagnostic(
            "model_count_disagrees", "blocking",
            f"the refined encirclement count is {full_count} but the validated model has "
            f"{model_count} right-half-plane zero(s) in the band",
            {"encirclement_count": full_count, "model_count": model_count},
        ))
    methods = _method_reports(analysis, full_count, model_method, diagnostics)
    complete = full_count is not None and not any(d.severity == "blocking" for d in diagnostics)
    pinned = np.zeros(0, dtype=complex) if refined is None else refined.pinned_zeros_rad_s
    found_modes = list(refined.modes) if refined is not None else []
    if complete and full_count:
        name, unstable_count = "unstable", full_count
        if not found_modes:
            found_modes = sample_modes(analysis, full_count)
    elif complete:
        name, unstable_count = "stable", 0
    elif pinned.size:
        name, unstable_count = "unstable", zero_count(pinned)
    else:
        name, unstable_count = "indeterminate", None
    f = request.frequency_hz
    return CheckVerdict(
        verdict=name,  # type: ignore[arg-type]
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
        refinement=None if refined is None else refined.report,
        count_complete=complete,
        assumptions=_assumptions(analysis.ndf_edges) if complete else [],
        next_sweep=None if complete or analysis.ndf_count is None
        else next_sweep(analysis, refined, diagnostics),
    )
