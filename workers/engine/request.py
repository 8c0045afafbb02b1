"""The typed check request the engine runs on.

The HTTP API and the command line build a :class:`CheckRequest` from the JSON check request
(``service.schemas``); the engine never sees JSON. Arrays follow the engine convention: frequency
first, ``(F, N, N)`` for network data.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal

import numpy as np

from workers.engine.verdict import Diagnostic, PortRole

Parameter = Literal["S", "Y", "Z"]

MAX_PORTS = 64
MAX_POINTS = 100_000


@dataclass(frozen=True)
class Port:
    """One port of the multi-port data, in data order.

    ``external`` ports are terminated in the real circuit by ``termination_ohm`` (default: the
    port's reference impedance); ``probe`` ports sit at device terminals and stay open.
    """

    name: str
    role: PortRole
    termination_ohm: complex | None = None


@dataclass(frozen=True)
class Device:
    """A transconductance ``gm·e^(-jωτ)`` from a control port pair to an output port pair.

    Indices are port indices, ``None`` is ground. The current gm·(v[c+] − v[c−]) enters the
    output+ terminal and leaves by output−, so the port-Y stamp is
    Y[o+,c+] += gm, Y[o+,c−] −= gm, Y[o−,c+] −= gm, Y[o−,c−] += gm (a rank-one term u·vᵀ·gm).
    ``gm_s`` has shape (F,) complex (a scalar is broadcast by the request builder).
    ``fmax_hz``: the flow's statement that above this frequency the device has no power gain
    (Mason's unilateral gain U < 1); None when not stated (``workers.engine.edges``).
    """

    name: str
    gm_s: np.ndarray
    control: tuple[int | None, int | None]
    output: tuple[int | None, int | None]
    delay_s: float = 0.0
    fmax_hz: float | None = None


@dataclass(frozen=True)
class Network:
    """Sampled multi-port data: ``values`` (F, N, N) of ``parameter``, reference ``z0_ohm`` (N,)."""

    parameter: Parameter
    values: np.ndarray
    z0_ohm: np.ndarray


@dataclass(frozen=True)
class CheckOptions:
    """Numerical tolerances of a check (all have defaults that suit sampled RF data).

    closure_tolerance: how far NDF may be from 1 at the top of a trusted band before the verdict
        notes it (``asymptote_not_unity``); the band edges are judged by ``workers.engine.edges``.
    phase_step_limit_deg: largest NDF phase change allowed between neighbouring samples.
    consistency_tolerance: relative mismatch allowed between ``gain_off`` data and the devices.
    refine: run the rational-model refinement and natural-frequency identification.
    reference_from_comments: take per-port references that only Touchstone comments name (read
    at the boundary, ``workers.engine.touchstone.comments``).
    target_damping_ratio: the damping ratio ζ = −σ/|s| a stabiliser suggestion must give the
    least-damped natural frequency in the band; a stable check whose least-damped pair is below
    it gets suggestions too (``workers.engine.stabilisers``).
    operating_band_hz: (low, high) where the amplifier is used; suggestions then carry their
    cost there (change of MSG/MAG and |S21| of the external two-port) and are ranked by it.
    """

    closure_tolerance: float = 0.2
    phase_step_limit_deg: float = 45.0
    consistency_tolerance: float = 1e-6
    refine: bool = True
    reference_from_comments: bool = False
    target_damping_ratio: float = 0.05
    operating_band_hz: tuple[float, float] | None = None


@dataclass(frozen=True)
class CheckRequest:
    """Everything one check needs; built and validated once at the boundary."""

    frequency_hz: np.ndarray
    network: Network
    ports: tuple[Port, ...]
    devices: tuple[Device, ...] = ()
    gain_off: Network | None = None
    options: CheckOptions = field(default_factory=CheckOptions)
    input_diagnostics: tuple[Diagnostic, ...] = ()  # what reading the input noticed

    @property
    def n_ports(self) -> int:
        return len(self.ports)

    @property
    def n_points(self) -> int:
        return int(self.frequency_hz.shape[0])
