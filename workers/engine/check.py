"""One stability check: from a validated request to a typed verdict.

Order of work: port Y of the circuit as it runs (terminations added at the external ports, probe
ports open) → NDF and return differences → encirclement count and whether it can be trusted →
driving-point admittances and Kurokawa points → external two-port factors → rational-model
refinement and identification (``refine``) → verdict by consensus (``decide``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from workers.engine import conversions, loops, nodes
from workers.engine.edges import EdgeJudgement, judge_high_edge, judge_low_edge
from workers.engine.encirclement import Encirclements, count_encirclements
from workers.engine.request import CheckRequest
from workers.engine.verdict import Diagnostic


@dataclass(frozen=True)
class CircuitState:
    """The admittance stacks one check works on (all (F, N, N), siemens)."""

    frequency_hz: np.ndarray
    y_data: np.ndarray       # as given (devices on), no terminations
    y_on: np.ndarray         # terminated, devices on
    y_off: np.ndarray        # terminated, every device off
    gains: np.ndarray        # (F, D)
    u: np.ndarray            # (N, D)
    v: np.ndarray            # (N, D)
    singular_data: np.ndarray


@dataclass(frozen=True)
class BandEdges:
    """Both edges of one response's band, judged on its samples (``workers.engine.edges``)."""

    low: EdgeJudgement
    high: EdgeJudgement

    @property
    def settled(self) -> bool:
        return self.low.settled and self.high.settled

    @property
    def closures(self) -> tuple[float | None, float | None]:
        """(DC, top) closing phase changes for ``count_encirclements``; None where open."""
        return (self.low.closure_rad if self.low.settled else None,
                self.high.closure_rad if self.high.settled else None)


def judge_edges(frequency_hz: np.ndarray, h: np.ndarray, request: CheckRequest) -> BandEdges:
    """Both band edges of a sampled response (NDF or a return difference)."""
    fmax = tuple(d.fmax_hz for d in request.devices)
    return BandEdges(judge_low_edge(frequency_hz, h), judge_high_edge(frequency_hz, h, fmax))


def counted(frequency_hz: np.ndarray, h: np.ndarray, request: CheckRequest
            ) -> tuple[Encirclements, BandEdges]:
    """The encirclement count of a sampled response with its edges judged and closed."""
    edges = judge_edges(frequency_hz, h, request)
    low, high = edges.closures
    return count_encirclements(frequency_hz, h, None, low, high), edges


@dataclass(frozen=True)
class Analysis:
    """Everything computed on the samples; the verdict and the reports are drawn from it."""

    request: CheckRequest
    state: CircuitState
    loops: loops.LoopResult
    valid: np.ndarray                       # (F,) points where the NDF is defined
    ndf_count: Encirclements | None
    device_counts: list[Encirclements | None]
    nodes: nodes.NodeResult
    diagnostics: list[Diagnostic]
    z_on: np.ndarray                        # (F, N, N) inverse of the terminated Y_on
    ndf_edges: BandEdges | None = None
    device_edges: tuple[BandEdges | None, ...] = ()


def circuit_state(request: CheckRequest, diagnostics: list[Diagnostic]) -> CircuitState:
    """Build Y_on and Y_off of the terminated circuit (rank-one device changes or gain_off data)."""
    f = request.frequency_hz
    data = conversions.port_admittance(request.network)
    y_term = np.diag(conversions.termination_admittances(request))
    y_on = data.values + y_term
    u, v = conversions.device_vectors(request.devices, request.n_ports)
    gains = conversions.device_gains(request.devices, f)
    stamp = conversions.device_stamp(gains, u, v)
    singular = data.singular.copy()
    if request.gain_off is not None:
        off = conversions.port_admittance(request.gain_off)
        singular |= off.singular
        y_off = off.values + y_term
        if request.devices:
            _check_gain_off(request, data.values, off.values, stamp, diagnostics)
    else:
        y_off = y_on - stamp
    if singular.any():
        diagnostics.append(Diagnostic(
            "singular_points", "warning",
            f"the network data could not be converted to Y at {int(singular.sum())} frequencies "
            "(singular matrix); those points were left out",
            {"frequency_hz": f[singular][:20].tolist()},
        ))
    return CircuitState(f, data.values, y_on, y_off, gains, u, v, singular)


def _check_gain_off(request: CheckRequest, y_on: np.ndarray, y_off: np.ndarray,
                    stamp: np.ndarray, diagnostics: list[Diagnostic]) -> None:
    """Y_on − Y_off must equal the devices' stamps (relative to the size of Y_on)."""
    with np.errstate(invalid="ignore"):
        mismatch = np.linalg.norm(y_on - y_off - stamp, axis=(1, 2))
        scale = np.linalg.norm(y_on, axis=(1, 2))
        relative = np.nanmax(mismatch / np.where(scale > 0, scale, 1.0))
    if relative > request.options.consistency_tolerance:
        worst = int(np.nanargmax(mismatch / np.where(scale > 0, scale, 1.0)))
        diagnostics.append(Diagnostic(
            "gain_off_mismatch", "warning",
            "gain_off data minus the devices' transconductance stamps does not match the network "
            f"data (largest relative mismatch {relative:.3g} at "
            f"{request.frequency_hz[worst]:.6g} Hz);"
            " the NDF uses the two data sets, the per-device return differences the stamps",
            {"relative_mismatch": float(relative),
             "at_hz": float(request.frequency_hz[worst])},
        ))


def count_trusted(count: Encirclements, request: CheckRequest,
                  edges: BandEdges | None = None) -> list[Diagnostic]:
    """The reasons, if any, why an encirclement count cannot stand for the whole axis: an open
    band edge (``workers.engine.edges``), a phase step beyond the limit, or a closed phase change
    far from a whole number of half-turns. Without ``edges`` both edges count as open."""
    opts = request.options
    found: list[Diagnostic] = []
    for side, code, judgement in (("low", "band_low_open", edges.low if edges else None),
                                  ("high", "band_high_open", edges.high if edges else None)):
        if judgement is not None and judgement.settled:
            continue
        reason = judgement.reason if judgement is not None else "the edge was not judged"
        where = count.low if side == "low" else count.high
        found.append(Diagnostic(
            code, "blocking",  # type: ignore[arg-type]
            f"the {'DC' if side == 'low' else 'top'} end of the band is not settled: {reason}",
            {"frequency_hz": where.frequency_hz, "distance": where.distance,
             "trend": where.trend,
             "share": judgement.share if judgement is not None else None,
             "slope": judgement.slope if judgement is not None else None,
             "spread": judgement.spread if judgement is not None else None},
        ))
    if count.max_phase_step_deg > opts.phase_step_limit_deg:
        found.append(Diagnostic(
            "phase_step_too_large", "blocking",
            f"NDF turns {count.max_phase_step_deg:.1f}° between two samples near "
            f"{count.max_phase_step_at_hz:.6g} Hz (limit {opts.phase_step_limit_deg:g}°); sample "
            "more densely there",
            {"step_deg": count.max_phase_step_deg, "at_hz": count.max_phase_step_at_hz},
        ))
    if count.residual > 0.25:
        found.append(Diagnostic(
            "count_not_integer", "blocking",
            f"the phase change of NDF is {count.residual:.2f} half-turns away from a whole number",
            {"residual_half_turns": count.residual},
        ))
    return found


def analyse(request: CheckRequest) -> Analysis:
    """Compute every indicator on the given samples (no refinement, no verdict yet)."""
    diagnostics: list[Diagnostic] = list(request.input_diagnostics)
    state = circuit_state(request, diagnostics)
    z_on = conversions.batched_inv(state.y_on)
    if request.gain_off is None:
        # devices only: NDF and F_k follow from Z_on (the determinant lemma, ``loops``)
        loop = loops.loops_from_impedance(z_on.values, z_on.singular, state.gains, state.u,
                                          state.v)
    else:
        # two measured states: NDF from their log-determinants
        loop = loops.loop_analysis(state.y_on, state.y_off, state.gains, state.u, state.v)
    valid = (np.isfinite(loop.ndf) & ~loop.singular_off & ~state.singular_data
             & (np.abs(loop.ndf) > 0))
    f = request.frequency_hz
    dropped = int((~valid).sum() - state.singular_data.sum())
    if dropped > 0:
        diagnostics.append(Diagnostic(
            "singular_points", "warning",
            f"Y of the circuit is singular at {dropped} frequencies; NDF was left undefined there",
            {"frequency_hz": f[~valid & ~state.singular_data][:20].tolist()},
        ))
    ndf_count, ndf_edges = None, None
    device_counts: list[Encirclements | None] = []
    device_edges: list[BandEdges | None] = []
    if valid.sum() >= 3:
        ndf_count, ndf_edges = counted(f[valid], loop.ndf[valid], request)
        fk = loop.return_difference[valid]
        for k in range(fk.shape[1]):
            ok = np.isfinite(fk[:, k]) & (np.abs(fk[:, k]) > 0)
            if ok.sum() >= 3:
                count, edges = counted(f[valid][ok], fk[ok, k], request)
                device_counts.append(count)
                device_edges.append(edges)
            else:
                device_counts.append(None)
                device_edges.append(None)
    else:
        device_counts = [None] * len(request.devices)
        device_edges = [None] * len(request.devices)
    node_result = nodes.node_analysis(f, z_on)
    return Analysis(request, state, loop, valid, ndf_count, device_counts, node_result,
                    diagnostics, z_on.values, ndf_edges, tuple(device_edges))
