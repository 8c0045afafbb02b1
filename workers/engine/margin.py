"""The stability margin of a check: how lightly damped its least-damped natural frequencies are,
and how close NDF and the return differences come to the origin.

* Least damped: the validated NDF model's confirmed zeros are the circuit's natural frequencies
  in both half-planes (``identify``; NDF = det Y_on / det Y_off, the all-off circuit passive).
  Those with |s| inside the band are ranked by the damping ratio ζ = −σ/|s| (negative when the
  pair grows), Q = 1/(2ζ) (the second-order convention s = ω₀(−ζ ± j√(1 − ζ²)); e.g. Ogata,
  *Modern Control Engineering*, 5th ed., §5-3, section from memory). Each is placed like an
  unstable mode: a partial-fraction fit of Z with the model zeros as poles gives its voltage
  shape, leverage and device participation (``identify.mode_shape``), and its phases the
  symmetry (``symmetry``).
* Closest approaches: min |NDF| on the refined contour (samples and validated-model points) and
  min |F_k| over the samples; NDF's is credited to the device whose F_k is smallest there
  (NDF = Π F_k, so that factor brings NDF nearest 0).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from workers.engine.advice_report import ClosestApproach, Margin, NaturalFrequency
from workers.engine.check import Analysis
from workers.engine.identify import (
    REAL_ZERO,
    ModeShape,
    NodeFit,
    fit_nodes,
    identify_mode,
    mode_shapes,
)
from workers.engine.refined_check import RefinedCheck
from workers.engine.symmetry import mode_symmetry

LEAST_DAMPED = 3      # natural frequencies reported
POLE_REACH = 4.0      # model zeros up to this × the band top are poles of the node fits
NEARLY_REAL = 1e-3    # |Im z| below this × |z|: a real zero (as a pole of the node fits)


@dataclass(frozen=True)
class PlacedFrequency:
    """A natural frequency (rad/s) with its shape, for the margin and the stabiliser search."""

    zero: complex
    shape: ModeShape
    record: NaturalFrequency

    @property
    def damping_ratio(self) -> float:
        return self.record.damping_ratio


def conjugate_poles(zeros: np.ndarray) -> np.ndarray:
    """The model's zeros as the poles of a real circuit's Z: each zero of the upper half-plane
    with its exact conjugate, nearly real ones (|Im| ≤ ``NEARLY_REAL`` |z|) on the real axis.
    The two half-models place a pair's members independently, so the zeros of the lower
    half-plane only repeat the upper ones (to within the model's error) and are left out."""
    size = np.abs(zeros)
    real = np.abs(zeros.imag) <= NEARLY_REAL * size
    upper = zeros[~real & (zeros.imag > 0)]
    return np.concatenate([upper, np.conj(upper), zeros[real].real.astype(complex)])


def node_model(analysis: Analysis, refined: RefinedCheck | None) -> NodeFit | None:
    """Partial-fraction fits of every Z_kk with the trusted model zeros as poles
    (``conjugate_poles``; None when the model's zeros are not trusted)."""
    zeros = None if refined is None else refined.zeros_rad_s
    if zeros is None or refined is None or refined.model is None:
        return None
    scale = refined.model.scale_rad_s
    poles = conjugate_poles(zeros[np.abs(zeros) <= POLE_REACH * scale])
    return fit_nodes(analysis.request.frequency_hz, analysis.nodes.impedance, poles, scale)


def damping_ratio(zero: complex) -> float:
    """ζ = −σ/|s| (module docstring)."""
    return float(-zero.real / abs(zero)) if zero != 0 else 0.0


def band_limits_rad_s(analysis: Analysis) -> tuple[float, float]:
    f = analysis.request.frequency_hz[analysis.valid]
    return 2 * np.pi * float(f[0]), 2 * np.pi * float(f[-1])


def in_band(zeros: np.ndarray, limits: tuple[float, float]) -> np.ndarray:
    """The zeros with Im ≥ 0 (a pair once) and |s| inside ``limits`` (rad/s)."""
    size = np.abs(zeros)
    upper = zeros.imag >= -REAL_ZERO * size
    return zeros[upper & (size >= limits[0]) & (size <= limits[1])]


def place(analysis: Analysis, node_fit: NodeFit, zeros: list[complex]
          ) -> list[PlacedFrequency]:
    """Natural frequencies with their shapes, nodes, devices and symmetry."""
    request = analysis.request
    state = analysis.state
    shapes = mode_shapes(request.frequency_hz, analysis.z_on, node_fit, zeros, state.u,
                         state.v, state.gains) if zeros else []
    placed = []
    for zero, shape in zip(zeros, shapes, strict=True):
        mode = identify_mode(zero, shape, node_fit, [p.name for p in request.ports],
                             [d.name for d in request.devices], True)
        zeta = damping_ratio(zero)
        symmetry = mode_symmetry(shape.phasor, shape.participation, request.devices) \
            if shape.phasor is not None else None
        record = NaturalFrequency(mode.frequency_hz, float(zero.real), zeta,
                                  1 / (2 * zeta) if zeta != 0 else None, mode.nodes,
                                  mode.devices, mode.node_participation, symmetry)
        placed.append(PlacedFrequency(zero, shape, record))
    return placed


def least_damped(analysis: Analysis, refined: RefinedCheck | None, node_fit: NodeFit | None,
                 how_many: int = LEAST_DAMPED) -> list[PlacedFrequency]:
    """The ``how_many`` least-damped model zeros in the band, most lightly damped first."""
    zeros = None if refined is None else refined.zeros_rad_s
    if zeros is None or node_fit is None or analysis.valid.sum() < 2:
        return []
    chosen = in_band(conjugate_poles(zeros), band_limits_rad_s(analysis))
    ratios = np.array([damping_ratio(complex(z)) for z in chosen])
    order = np.argsort(ratios, kind="stable")[:how_many]
    return place(analysis, node_fit, [complex(chosen[i]) for i in order])


def closest_approaches(analysis: Analysis, refined: RefinedCheck | None
                       ) -> tuple[ClosestApproach | None, ClosestApproach | None]:
    """min |NDF| (refined contour when there is one) and min |F_k| (module docstring)."""
    names = [d.name for d in analysis.request.devices]
    f = analysis.request.frequency_hz[analysis.valid]
    fk = np.abs(analysis.loops.return_difference[analysis.valid])
    count = refined.refinement.count if refined is not None and \
        refined.refinement is not None else analysis.ndf_count
    ndf = None
    finite = np.isfinite(fk)
    if count is not None:
        device = None
        if names and f.size:
            at = int(np.argmin(np.abs(f - count.min_abs_at_hz)))
            row = np.where(finite[at], fk[at], np.inf)
            device = names[int(np.argmin(row))] if np.isfinite(row).any() else None
        ndf = ClosestApproach(count.min_abs, count.min_abs_at_hz, device)
    factor = None
    if names and finite.any():
        flat = int(np.argmin(np.where(finite, fk, np.inf)))
        i, k = np.unravel_index(flat, fk.shape)
        factor = ClosestApproach(float(fk[i, k]), float(f[i]), names[int(k)])
    return ndf, factor


def _note(refined: RefinedCheck | None) -> str | None:
    if refined is None:
        return "no rational model (options.refine is false): natural frequencies not located"
    if refined.model is None:
        return "no rational model of NDF could be fitted: natural frequencies not located"
    if not refined.model.validated:
        return "the rational model of NDF did not validate: natural frequencies not located"
    if refined.zeros_rad_s is None:
        return "NDF is not rational (a delay in gm): the model's zeros are not natural frequencies"
    return None


def stability_margin(analysis: Analysis, refined: RefinedCheck | None,
                     placed: list[PlacedFrequency]) -> Margin:
    """The verdict's ``margin`` from the placed least-damped frequencies (``least_damped``)."""
    ndf, factor = closest_approaches(analysis, refined)
    return Margin([p.record for p in placed], ndf, factor, _note(refined),
                  analysis.request.options.target_damping_ratio)
