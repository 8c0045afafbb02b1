"""Helpers for the engine tests: lumped circuits (workers.lumped) turned into engine requests.

The port data comes from the lumped MNA simulator (Schur complement of G + jωC); the independent
oracle is the natural frequencies from scipy.linalg.eig on the MNA pencil (det(G + sC) = 0).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from workers.engine.request import CheckOptions, CheckRequest, Device, Network, Port
from workers.lumped import (
    GROUND,
    VCCS,
    Capacitor,
    Circuit,
    Inductor,
    Resistor,
    natural_frequencies,
    port_admittance,
)


@dataclass(frozen=True)
class PortSpec:
    """A port of the generated data: its name, the circuit node it sits on, and its role."""

    name: str
    node: str
    role: str  # "external" | "probe"
    termination_ohm: float | None = None


def log_grid(f_low_hz: float, f_high_hz: float, per_decade: int) -> np.ndarray:
    """Logarithmic frequency grid with ``per_decade`` points per decade (both ends included)."""
    decades = np.log10(f_high_hz / f_low_hz)
    return np.geomspace(f_low_hz, f_high_hz, int(np.ceil(decades * per_decade)) + 1)


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


def terminations(ports: Sequence[PortSpec], z0_ohm: float = 50.0) -> dict[str, float]:
    """Node → termination (Ω) at the external ports, as the engine terminates them."""
    return {p.node: (p.termination_ohm if p.termination_ohm is not None else z0_ohm)
            for p in ports if p.role == "external"}


def rhp_count(poles: np.ndarray) -> int:
    """Right-half-plane natural frequencies (a complex pair counts 2)."""
    return int(np.sum(poles.real > 0))


# ------------------------------------------------------------------------------------------
# Random lumped amplifiers: 2–4 transconductance devices, ports at every device terminal plus
# an input and an output port, all seeded.
# ------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class RandomCircuit:
    circuit: Circuit
    ports: tuple[PortSpec, ...]
    seed: int

    @property
    def node_terminations(self) -> dict[str, float]:
        return terminations(self.ports)

    def poles_on(self) -> np.ndarray:
        return natural_frequencies(self.circuit, self.node_terminations)

    def poles_off(self) -> np.ndarray:
        return natural_frequencies(self.circuit.gain_off(), self.node_terminations)


def _log_uniform(rng: np.random.Generator, low: float, high: float) -> float:
    return float(np.exp(rng.uniform(np.log(low), np.log(high))))


def random_amplifier(seed: int) -> RandomCircuit:
    """A cascade of 2–4 transconductance stages with random parasitics and feedback.

    Every node has a capacitor and a resistor to ground (so the gain-off circuit is passive with
    a regular conductance matrix, and Y → jωC at high frequency); stages couple through series
    R, L or C; a few random feedback elements and source inductances create loops.
    """
    rng = np.random.default_rng(seed)
    n_dev = int(rng.integers(2, 5))
    elements: list = []
    ports: list[PortSpec] = [PortSpec("in", "in", "external"), PortSpec("out", "out", "external")]
    nodes = ["in", "out"]
    count = 0

    def name(prefix: str) -> str:
        nonlocal count
        count += 1
        return f"{prefix}{count}"

    def lossy_inductor(a: str, b: str, henries: float) -> None:
        # series loss R = ωL/Q at 10 GHz with Q between 5 and 40 (lumped inductors; common practice)
        inner = name("x")
        quality = _log_uniform(rng, 5.0, 40.0)
        elements.append(Inductor(name("L"), a, inner, henries))
        elements.append(Resistor(name("RL"), inner, b, 2 * np.pi * 10e9 * henries / quality))

    def coupling(a: str, b: str) -> None:
        kind = rng.choice(["R", "L", "C"])
        if kind == "R":
            elements.append(Resistor(name("R"), a, b, _log_uniform(rng, 5.0, 500.0)))
        elif kind == "L":
            lossy_inductor(a, b, _log_uniform(rng, 0.2e-9, 5e-9))
        else:
            elements.append(Capacitor(name("C"), a, b, _log_uniform(rng, 0.1e-12, 5e-12)))

    previous = "in"
    for k in range(n_dev):
        gate, drain = f"g{k}", f"d{k}"
        source = f"s{k}" if rng.random() < 0.5 else GROUND
        stage_nodes = [gate, drain] + ([source] if source != GROUND else [])
        nodes += stage_nodes
        ports += [PortSpec(f"gate_{k}", gate, "probe"), PortSpec(f"drain_{k}", drain, "probe")]
        if source != GROUND:
            ports.append(PortSpec(f"source_{k}", source, "probe"))
            lossy_inductor(source, GROUND, _log_uniform(rng, 0.05e-9, 1e-9))
        coupling(previous, gate)
        elements.append(Capacitor(name("Cgd"), gate, drain, _log_uniform(rng, 0.02e-12, 0.3e-12)))
        elements.append(VCCS(f"Q{k}", (gate, source), (drain, source),
                             _log_uniform(rng, 0.02, 0.2)))
        previous = drain
    coupling(previous, "out")
    for node in nodes:
        elements.append(Capacitor(name("Cg"), node, GROUND, _log_uniform(rng, 0.1e-12, 2e-12)))
        elements.append(Resistor(name("Rg"), node, GROUND, _log_uniform(rng, 50.0, 5e3)))
    for _ in range(int(rng.integers(1, 4))):
        a, b = rng.choice(nodes, size=2, replace=False)
        coupling(str(a), str(b))
    return RandomCircuit(Circuit(tuple(elements)), tuple(ports), seed)


def damping(poles: np.ndarray) -> float:
    """Smallest damping ratio |Re p|/|p| over ``poles`` (0 for a pole at the origin)."""
    magnitude = np.abs(poles)
    tiny = magnitude < 1e-9 * magnitude.max()
    ratio = np.where(tiny, 0.0, np.abs(poles.real) / np.where(tiny, 1.0, magnitude))
    return float(ratio.min())


def grid_for(poles: np.ndarray, margin_decades: float = 2.5, per_decade: int = 200,
             half_widths: float = 20.0, steps_per_width: float = 4.0) -> np.ndarray:
    """A log grid from ``margin_decades`` below the slowest to above the fastest root, refined
    linearly around every lightly damped root.

    Near a root p = σ + jω_d, arg(jω − p) turns by π over ω_d ± a few |σ| (argument of a
    first-order factor; common practice), so the band ω_d ± ``half_widths``·|σ| gets a step of
    |σ|/``steps_per_width`` (phase steps below 1/steps_per_width rad per root there).
    """
    magnitude = np.abs(poles) / (2 * np.pi)
    base = log_grid(magnitude[magnitude > 0].min() * 10**-margin_decades,
                    magnitude.max() * 10**margin_decades, per_decade)
    pieces = [base]
    for p in poles[poles.imag > 0]:
        sigma, f_d = abs(p.real) / (2 * np.pi), p.imag / (2 * np.pi)
        if sigma == 0 or sigma * half_widths > 0.5 * f_d:
            continue  # on the axis (no grid can resolve it) or broad (the log grid does)
        n = int(2 * half_widths * steps_per_width) + 1
        pieces.append(np.linspace(f_d - half_widths * sigma, f_d + half_widths * sigma, n))
    f = np.unique(np.concatenate(pieces))
    return f[f > 0]
