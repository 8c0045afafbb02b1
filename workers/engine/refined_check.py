"""What the rational model adds to one check: the refined count, the model's right-half-plane
zeros, whether the samples pin each down, and the modes they make.

Order: fit and validate the NDF model (``models``); refine the contour between the samples where
the count is at risk (``refine``), closing it at the samples' settled edges; take the model's
right-half-plane zeros inside the band (``identify``) and test each against its mirror image on
the samples (``pinning``); fit the residues of Z at those natural frequencies to rank nodes and
devices (``identify``); locate the sampled Kurokawa points again on the node models. A model
zero just outside the band is never counted (the model is not trusted there), but it denies
that edge's closure.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field, replace
from typing import Any

import numpy as np
from scipy.optimize import brentq

from workers.engine.check import Analysis
from workers.engine.identify import (
    NODE_FIT_LIMIT,
    NodeFit,
    band_rhp_zeros,
    fit_nodes,
    identify_mode,
    mode_shape,
    near_band_rhp_zeros,
    zero_count,
)
from workers.engine.models import (
    LOCAL_LIMIT,
    MAX_TERMS,
    VALIDATION_LIMIT,
    RationalModel,
    fit_response,
)
from workers.engine.pinning import PinEvidence, mirror_evidence
from workers.engine.refine import Refinement, refine_contour, suspect_intervals
from workers.engine.refine_report import KurokawaRefinedPoint, RefinementReport, ZeroReport
from workers.engine.verdict import Diagnostic, MethodReport, Mode


@dataclass(frozen=True)
class RefinedCheck:
    """What the model adds to one check (module docstring).

    ``rhp_zeros_rad_s``: in-band right-half-plane zeros (Im ≥ 0), None when the model's zeros are
    not used (no validated model, or a delay makes NDF irrational); ``pinned`` says, per zero,
    whether the samples pin it down; ``modes`` has one entry per zero; ``below``/``above``:
    right-half-plane zeros just outside the band.
    """

    model: RationalModel | None
    refinement: Refinement | None
    rhp_zeros_rad_s: np.ndarray | None
    pinned: tuple[bool, ...]
    model_count: int | None
    modes: list[Mode]
    diagnostics: list[Diagnostic]
    method: MethodReport
    report: RefinementReport | None
    below: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=complex))
    above: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=complex))

    @property
    def zeros_rad_s(self) -> np.ndarray | None:
        """Every confirmed model zero (both half-planes) when the zeros are trusted."""
        return None if self.rhp_zeros_rad_s is None or self.model is None \
            else self.model.zeros_rad_s

    @property
    def pinned_zeros_rad_s(self) -> np.ndarray:
        if self.rhp_zeros_rad_s is None:
            return np.zeros(0, dtype=complex)
        return self.rhp_zeros_rad_s[np.asarray(self.pinned, dtype=bool)]


def _not_used(diagnostics: list[Diagnostic], note: str, model: RationalModel | None = None
              ) -> RefinedCheck:
    report = RefinementReport(model=model.summary()) if model is not None else None
    return RefinedCheck(model, None, None, (), None, [], diagnostics,
                        MethodReport("rational_model", None, None, note), report)


def _fitted(analysis: Analysis, diagnostics: list[Diagnostic]) -> RationalModel | None:
    """The NDF model, or None (with the reason in ``diagnostics``)."""
    f = analysis.request.frequency_hz[analysis.valid]
    if f.size < 8 or f[-1] <= 0:
        diagnostics.append(Diagnostic(
            "model_not_validated", "warning",
            f"only {f.size} frequencies have a defined NDF; no rational model was fitted"))
        return None
    try:
        return fit_response(f, analysis.loops.ndf[analysis.valid])
    except (ValueError, np.linalg.LinAlgError) as exc:
        diagnostics.append(Diagnostic(
            "model_not_validated", "warning",
            f"no rational model of NDF could be fitted ({exc}); the count rests on the samples"))
        return None


def _rejected(analysis: Analysis, model: RationalModel, diagnostics: list[Diagnostic]
              ) -> RefinedCheck:
    delayed = [d.name for d in analysis.request.devices if d.delay_s > 0]
    sampled = None if analysis.ndf_count is None else analysis.ndf_count.clockwise
    diagnostics.append(Diagnostic(
        "model_not_validated", "blocking",
        "the rational model of NDF failed its leave-out check (error "
        f"{model.leave_out_error:.3g} of max|NDF|, {model.local_error:.3g} of |NDF| at worst; "
        f"limits {VALIDATION_LIMIT:g} and {LOCAL_LIMIT:g}), so the sampled count "
        f"({sampled}) has no second method to agree with it",
        {**asdict(model.summary()), "encirclement_count": sampled, "model_count": None}))
    diagnostics.append(Diagnostic(
        "not_rational", "warning",
        f"NDF does not follow a rational function of order <= {MAX_TERMS} over the band "
        "(a delay in gm, noise or too few samples per feature)"
        + (f"; devices with delay: {', '.join(delayed)}" if delayed else "")
        + "; the model is not trusted", {"terms": model.terms, "delayed_devices": delayed}))
    return _not_used(diagnostics, "model did not validate", model)


def refine_analysis(analysis: Analysis, factors: tuple[np.ndarray, Any] | None = None
                    ) -> RefinedCheck:
    """Fit the NDF model, refine the contour, identify and pin the unstable natural frequencies.

    ``factors``: (frequencies, TwoPortFactors) of the external two-port, for K and mu crossings.
    """
    request = analysis.request
    f = request.frequency_hz[analysis.valid]
    h = analysis.loops.ndf[analysis.valid]
    diagnostics: list[Diagnostic] = []
    model = _fitted(analysis, diagnostics)
    if model is None:
        return _not_used(diagnostics, "no rational model")
    if not model.validated:
        return _rejected(analysis, model, diagnostics)
    two_port_f, k, mu = None, None, None
    if factors is not None:
        two_port_f, table = factors
        k, mu = table.k, table.mu
    intervals = suspect_intervals(
        f, h, request.options.phase_step_limit_deg, request.frequency_hz,
        analysis.nodes.admittance, two_port_f, k, mu)
    closures = analysis.ndf_edges.closures if analysis.ndf_edges is not None else (None, None)
    refinement = refine_contour(
        f, h, model, intervals, request.options.phase_step_limit_deg,
        None if analysis.ndf_count is None else analysis.ndf_count.clockwise, closures)
    report = refinement.report(model)
    if refinement.points_added:
        diagnostics.append(Diagnostic(
            "refinement_added_points", "info",
            f"the validated NDF model added {refinement.points_added} points in "
            f"{len(intervals)} suspect intervals (leave-out error {model.leave_out_error:.2g}); "
            f"count {refinement.count_before} on the samples, {refinement.count.clockwise} "
            "refined", {"points_added": refinement.points_added,
                        "intervals": len(intervals)}))
    delayed = [d.name for d in request.devices if d.delay_s > 0]
    if delayed:
        diagnostics.append(Diagnostic(
            "not_rational", "warning",
            f"devices {', '.join(delayed)} carry a delay, so NDF is not rational: the model "
            "interpolates between samples (leave-out checked) but its zeros are not taken as "
            "natural frequencies", {"delayed_devices": delayed}))
        return RefinedCheck(model, refinement, None, (), None, [], diagnostics,
                            MethodReport("rational_model", None, None,
                                         "delay in gm: model used between samples only"), report)
    return _identified(analysis, model, refinement, report, diagnostics)


def _identified(analysis: Analysis, model: RationalModel, refinement: Refinement,
                report: RefinementReport, diagnostics: list[Diagnostic]) -> RefinedCheck:
    """The model's zeros as natural frequencies: counted, pinned, ranked (module docstring)."""
    request = analysis.request
    f = request.frequency_hz[analysis.valid]
    h = analysis.loops.ndf[analysis.valid]
    zeros = band_rhp_zeros(model, float(f[0]), float(f[-1]))
    count = zero_count(zeros)
    below, above = near_band_rhp_zeros(model, float(f[0]), float(f[-1]))
    for code, where, outside in (("band_low_open", "below", below),
                                 ("band_high_open", "above", above)):
        if outside.size:
            z = outside[0]
            diagnostics.append(Diagnostic(
                code, "blocking",  # type: ignore[arg-type]
                f"the validated NDF model has a right-half-plane zero {where} the band "
                f"(σ = {z.real:.4g} 1/s at {abs(z.imag) / (2 * np.pi):.6g} Hz); the model is not "
                f"trusted outside the band, so extend the band {where} to settle it",
                {"growth_rate_per_s": float(z.real),
                 "frequency_hz": float(abs(z.imag) / (2 * np.pi)), "from_model": True}))
    level = max(model.leave_out_error, model.noise_floor)
    evidence = [mirror_evidence(f, h, z, level) for z in zeros]
    pinned = tuple(e.pinned for e in evidence)
    for z, e in zip(zeros, evidence, strict=True):
        if not e.pinned:
            diagnostics.append(_unpinned(z, e))
    zero_reports = [ZeroReport(float(z.real), float(abs(z.imag) / (2 * np.pi)), e.pinned,
                               e.margin) for z, e in zip(zeros, evidence, strict=True)]
    modes: list[Mode] = []
    kurokawa: list[KurokawaRefinedPoint] | None = None
    node_error: dict[str, float] | None = None
    if zeros.size or analysis.nodes.crossings:
        poles = model.zeros_rad_s[np.abs(model.zeros_rad_s) <= 4 * model.scale_rad_s]
        node_fit = fit_nodes(request.frequency_hz, analysis.nodes.impedance, poles,
                             model.scale_rad_s)
        kurokawa = refined_kurokawa(analysis, node_fit)
        if zeros.size:
            modes, node_error = _modes(analysis, zeros, pinned, node_fit)
            weak = {name: e for name, e in node_error.items() if not e <= NODE_FIT_LIMIT}
            if weak:
                diagnostics.append(Diagnostic(
                    "model_not_validated", "info",
                    "the partial-fraction fit of Z at some nodes is loose, so their "
                    "participation is approximate", {"node_fit_error": weak}))
    report = replace(report, model_unstable_count=count, rhp_zeros=zero_reports,
                     kurokawa_refined=kurokawa, node_fit_error=node_error)
    note = (f"{count} right-half-plane zero(s) of the validated NDF model inside the band, "
            f"{zero_count(zeros[np.asarray(pinned, dtype=bool)])} pinned down by the samples")
    return RefinedCheck(model, refinement, zeros, pinned, count, modes, diagnostics,
                        MethodReport("rational_model", count, None, note), report, below, above)


def _unpinned(zero: complex, evidence: PinEvidence) -> Diagnostic:
    f_mode = abs(zero.imag) / (2 * np.pi)
    return Diagnostic(
        "mode_not_pinned", "warning",
        f"the validated NDF model has a right-half-plane zero at {f_mode:.6g} Hz (σ = "
        f"{zero.real:.4g} 1/s), but the samples cannot tell it from its mirror image in the "
        f"left half-plane (they would differ by {evidence.margin:.3g}× the model's error "
        f"level, {evidence.phase_deg:.2g}° at most); it is not counted: sample more densely "
        "around it",
        {"frequency_hz": float(f_mode), "growth_rate_per_s": float(zero.real),
         "pin_margin": evidence.margin, "phase_deg": evidence.phase_deg})


def _modes(analysis: Analysis, zeros: np.ndarray, pinned: tuple[bool, ...], node_fit: NodeFit
           ) -> tuple[list[Mode], dict[str, float]]:
    request = analysis.request
    names = [p.name for p in request.ports]
    device_names = [d.name for d in request.devices]
    state = analysis.state
    modes = []
    for z, is_pinned in zip(zeros, pinned, strict=True):
        shape = mode_shape(request.frequency_hz, analysis.z_on, node_fit, complex(z), state.u,
                           state.v, state.gains)
        modes.append(identify_mode(complex(z), shape, node_fit, names, device_names,
                                   is_pinned))
    return modes, {n: float(e) for n, e in zip(names, node_fit.error, strict=True)}


def refined_kurokawa(analysis: Analysis, node_fit: NodeFit) -> list[KurokawaRefinedPoint]:
    """Each sampled Kurokawa point located again by Brent's method on Im Y_k = Im 1/Z_kk of the
    node's partial-fraction model, between the two samples that bracket it (nodes whose model
    fits within NODE_FIT_LIMIT only)."""
    f = analysis.request.frequency_hz
    found = []
    for c in analysis.nodes.crossings:
        if not node_fit.error[c.node] <= NODE_FIT_LIMIT:
            continue
        i = min(max(int(np.searchsorted(f, c.frequency_hz)) - 1, 0), f.size - 2)

        def im_admittance(x: float, node: int = c.node) -> float:
            z = node_fit.impedance_at(x, node)
            return float((1.0 / z).imag) if z != 0 else float("nan")

        low, high = float(f[i]), float(f[i + 1])
        with np.errstate(all="ignore"):  # impedance_at leaves overflow to its caller
            ends = im_admittance(low), im_admittance(high)
            if not (math.isfinite(ends[0]) and math.isfinite(ends[1]) and ends[0] < 0 <= ends[1]):
                continue
            root = brentq(im_admittance, low, high, xtol=1e-12 * high, rtol=1e-12)
        with np.errstate(divide="ignore", invalid="ignore"):
            y = 1.0 / node_fit.impedance(np.array([2j * np.pi * root]))[0, c.node]
        found.append(KurokawaRefinedPoint(analysis.request.ports[c.node].name, float(root),
                                          float(y.real), c.frequency_hz, c.re_admittance_s))
    return found
