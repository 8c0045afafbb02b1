"""Engine requests (``CheckRequest``) from the lumped circuits of ``tests.support.circuits``.

The network data is Y at the port nodes from the lumped MNA simulator (workers.lumped), devices
on; the devices are the circuit's VCCS, whose terminals sit on port nodes or ground.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from tests.support.circuits import (
    R_OHM,
    PortSpec,
    negative_conductance_tank,
    phase_shift_oscillator,
    phase_shift_roots,
    tank_natural_frequencies,
)
from tests.support.grids import grid_for
from workers.engine.request import CheckOptions, CheckRequest, Device, Network, Port
from workers.lumped import GROUND, Circuit, port_admittance


def engine_request(circuit: Circuit, ports: Sequence[PortSpec], frequency_hz: np.ndarray,
                   device_names: Sequence[str] | None = None,
                   options: CheckOptions | None = None, z0_ohm: float = 50.0) -> CheckRequest:
    """A CheckRequest with Y data of ``circuit`` (devices on) at the ports, devices in the
    given order (default: circuit order). Every device terminal must be a port node or ground."""
    nodes = [p.node for p in ports]
    index = {node: k for k, node in enumerate(nodes)}
    vccs = circuit.devices if device_names is None else tuple(
        circuit.element(name) for name in device_names)
    f = np.asarray(frequency_hz, dtype=float)

    def at(node: str) -> int | None:
        return None if node == GROUND else index[node]

    devices = tuple(
        Device(name=d.name, gm_s=np.full(f.size, complex(d.gm_s)),
               control=(at(d.control[0]), at(d.control[1])),
               output=(at(d.output[0]), at(d.output[1])), delay_s=d.delay_s)
        for d in vccs)
    y = port_admittance(circuit, nodes, f)
    return CheckRequest(
        frequency_hz=f,
        network=Network("Y", y, np.full(len(nodes), z0_ohm)),
        ports=tuple(Port(p.name, p.role, p.termination_ohm) for p in ports),  # type: ignore[arg-type]
        devices=devices,
        options=options or CheckOptions(),
    )


TANK_PORTS = (PortSpec("a", "a", "probe"),)
PHASE_SHIFT_PORTS = (PortSpec("amp_out", "x", "probe"), PortSpec("amp_in", "n3", "probe"))


def tank_request(gm_s: float) -> CheckRequest:
    """The negative-conductance tank on a grid refined around its natural frequencies (devices
    on and off, closed form)."""
    g_net = 1 / R_OHM + gm_s
    poles = np.concatenate([tank_natural_frequencies(g_net), tank_natural_frequencies(1 / R_OHM)])
    f = grid_for(poles)
    return engine_request(negative_conductance_tank(gm_s), TANK_PORTS, f)


def phase_shift_request(gain: float) -> CheckRequest:
    """The phase-shift oscillator on a grid refined around its natural frequencies (gain on and
    off, closed form)."""
    on, off = phase_shift_roots(gain)
    f = grid_for(np.concatenate([on, off]))
    return engine_request(phase_shift_oscillator(gain), PHASE_SHIFT_PORTS, f)
