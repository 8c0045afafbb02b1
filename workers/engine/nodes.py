"""Driving-point admittance of every port node and Kurokawa's oscillation-start condition.

Y_k = det Y / det Y(row k, column k removed) = 1 / (Y⁻¹)_kk, all nodes from one batched solve.
Kurokawa's condition (K. Kurokawa, "Some basic characteristics of broadband negative resistance
oscillator circuits", Bell Syst. Tech. J. 48(6), 1969): a node can start to oscillate at ω where
Im Y_k(ω) = 0 with dIm Y_k/dω > 0 and Re Y_k(ω) ≤ 0. Crossings are located between samples by
linear interpolation of Im Y_k; a sign change of Im Y_k that is really Y_k passing through a pole
(Z_kk passing through the origin) is rejected.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from workers.engine.conversions import Solved


@dataclass(frozen=True)
class KurokawaCrossing:
    """One point meeting Kurokawa's condition at a node."""

    node: int
    frequency_hz: float
    re_admittance_s: float
    im_slope_s_per_hz: float

    @property
    def growth_estimate_per_s(self) -> float:
        """σ ≈ −Re Y / (dIm Y/dω), the first-order real part of the node's admittance zero."""
        return -self.re_admittance_s / (self.im_slope_s_per_hz / (2 * np.pi))


@dataclass(frozen=True)
class NodeResult:
    """Driving-point impedances Z_kk (F, N), admittances 1/Z_kk, and the crossings found."""

    impedance: np.ndarray
    admittance: np.ndarray
    singular: np.ndarray
    crossings: tuple[KurokawaCrossing, ...]


def kurokawa_crossings(frequency_hz: np.ndarray, admittance: np.ndarray,
                       impedance: np.ndarray) -> list[KurokawaCrossing]:
    """Every Im Y_k upward zero crossing with Re Y_k ≤ 0, for all nodes at once."""
    im = admittance.imag
    finite = np.isfinite(admittance[:-1]) & np.isfinite(admittance[1:])
    upward = (im[:-1] < 0) & (im[1:] >= 0) & finite
    found: list[KurokawaCrossing] = []
    for i, k in zip(*np.nonzero(upward), strict=True):
        t = -im[i, k] / (im[i + 1, k] - im[i, k])
        z_mid = impedance[i, k] + t * (impedance[i + 1, k] - impedance[i, k])
        smallest = min(abs(impedance[i, k]), abs(impedance[i + 1, k]))
        if abs(z_mid) < 1e-2 * smallest:
            continue  # Z_kk passes the origin: a pole of Y_k, not a zero of Im Y_k
        re = admittance[i, k].real + t * (admittance[i + 1, k].real - admittance[i, k].real)
        if re > 0:
            continue
        df = frequency_hz[i + 1] - frequency_hz[i]
        found.append(KurokawaCrossing(
            node=int(k),
            frequency_hz=float(frequency_hz[i] + t * df),
            re_admittance_s=float(re),
            im_slope_s_per_hz=float((im[i + 1, k] - im[i, k]) / df),
        ))
    return found


def node_analysis(frequency_hz: np.ndarray, z: Solved) -> NodeResult:
    """Driving-point admittances of all nodes from Z = Y⁻¹ of the terminated circuit, and
    Kurokawa points."""
    impedance = np.diagonal(z.values, axis1=-2, axis2=-1).copy()
    singular = z.singular
    with np.errstate(divide="ignore", invalid="ignore"):
        admittance = 1.0 / impedance
    crossings = kurokawa_crossings(frequency_hz, admittance, impedance)
    return NodeResult(impedance, admittance, singular, tuple(crossings))
