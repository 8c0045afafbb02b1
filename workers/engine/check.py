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


# How fast the devices' share of NDF, |NDF − 1|, may still grow towards a band edge (per e-fold of
# frequency) for that edge to count as settled; see ``encirclement`` for the reasoning.
TREND_TOLERANCE = 0.25


def count_trusted(count: Encirclements, request: CheckRequest) -> list[Diagnostic]:
    """The reasons, if any, why an NDF encirclement count cannot stand for the whole axis."""
    opts = request.options
    found: list[Diagnostic] = []
    low, high, tol = count.low, count.high, opts.closure_tolerance
    low_growing = low.trend is not None and low.trend < -TREND_TOLERANCE
    high_flat = high.trend is not None and high.trend > -TREND_TOLERANCE
    if low.distance > tol or low_growing:
        found.append(Diagnostic(
            "band_low_open", "blocking",
            f"NDF has not settled at the lowest frequency ({low.frequency_hz:.6g} Hz): distance "
            f"{low.distance:.3g} (tolerance {tol:g}); the devices' share of NDF "
            + (f"grows towards DC with slope {-low.trend:.2f} per e-fold (limit "
               f"{TREND_TOLERANCE:g})" if low_growing else "is not growing towards DC")
            + "; extend the band towards 0 Hz",
            {"distance": low.distance, "trend": low.trend, "frequency_hz": low.frequency_hz},
        ))
    if high.distance > tol or high_flat:
        found.append(Diagnostic(
            "band_high_open", "blocking",
            f"NDF has not settled at the highest frequency ({high.frequency_hz:.6g} Hz): distance "
            f"{high.distance:.3g} (tolerance {tol:g}); the devices' share of NDF "
            + (f"changes with slope {high.trend:.2f} per e-fold where it must be falling (below "
               f"{-TREND_TOLERANCE:g})" if high_flat else "is falling")
            + "; extend the band upwards",
            {"distance": high.distance, "trend": high.trend, "frequency_hz": high.frequency_hz},
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
    ndf_count = None
    device_counts: list[Encirclements | None] = []
    if valid.sum() >= 3:
        ndf_count = count_encirclements(f[valid], loop.ndf[valid])
        fk = loop.return_difference[valid]
        for k in range(fk.shape[1]):
            ok = np.isfinite(fk[:, k]) & (np.abs(fk[:, k]) > 0)
            device_counts.append(count_encirclements(f[valid][ok], fk[ok, k])
                                 if ok.sum() >= 3 else None)
    else:
        device_counts = [None] * len(request.devices)
    node_result = nodes.node_analysis(f, z_on)
    return Analysis(request, state, loop, valid, ndf_count, device_counts, node_result,
                    diagnostics, z_on.values)
