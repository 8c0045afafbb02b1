"""Lumped circuits for the engine tests and benchmarks (built with workers.lumped).

The port data of each circuit comes from the lumped MNA simulator (Schur complement of G + jωC);
the independent oracle is the natural frequencies from scipy.linalg.eig on the MNA pencil
(det(G + sC) = 0), or the closed forms given beside the builders here.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from workers.lumped import (
    GROUND,
    VCCS,
    Capacitor,
    Circuit,
    Inductor,
    Resistor,
    natural_frequencies,
)


@dataclass(frozen=True)
class PortSpec:
    """A port of the generated data: its name, the circuit node it sits on, and its role."""

    name: str
    node: str
    role: str  # "external" | "probe"
    termination_ohm: float | None = None


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


# ------------------------------------------------------------------------------------------
# Parallel RLC with a negative conductance (a transconductance from the node to itself)
# ------------------------------------------------------------------------------------------

L_H, C_F, R_OHM = 1e-9, 1e-12, 100.0  # f0 = 1/(2π√(LC)) ≈ 5.03 GHz, √(L/C) ≈ 31.6 Ω


def negative_conductance_tank(gm_s: float) -> Circuit:
    """R, L, C from node a to ground and a VCCS controlled by v_a whose current leaves node a,
    i.e. a conductance gm_s (negative gm_s: a negative conductance)."""
    return Circuit((
        Resistor("R", "a", "0", R_OHM),
        Inductor("L", "a", "0", L_H),
        Capacitor("C", "a", "0", C_F),
        VCCS("Gneg", ("a", "0"), ("a", "0"), gm_s),
    ))


def tank_natural_frequencies(g_net: float) -> np.ndarray:
    # Closed form: s² + (G/C)s + 1/(LC) = 0 → s = −G/2C ± j√(1/LC − (G/2C)²) (second-order
    # characteristic equation of the parallel RLC; common practice).
    alpha = -g_net / (2 * C_F)
    wd = np.sqrt(1 / (L_H * C_F) - alpha**2)
    return np.array([alpha + 1j * wd, alpha - 1j * wd])


# ------------------------------------------------------------------------------------------
# Phase-shift oscillator: inverting gain −A driving three RC sections (series R, shunt C)
# ------------------------------------------------------------------------------------------

R_LADDER, C_LADDER = 1e3, 1e-9
EPS = 1e-3  # R_L / R: the gain stage is a VCCS gm into R_L = EPS·R, voltage gain A = gm·R_L


def phase_shift_oscillator(gain: float) -> Circuit:
    r_load = EPS * R_LADDER
    return Circuit((
        Resistor("RL", "x", "0", r_load),
        VCCS("A", ("n3", "0"), ("x", "0"), gain / r_load),
        Resistor("R1", "x", "n1", R_LADDER),
        Capacitor("C1", "n1", "0", C_LADDER),
        Resistor("R2", "n1", "n2", R_LADDER),
        Capacitor("C2", "n2", "0", C_LADDER),
        Resistor("R3", "n2", "n3", R_LADDER),
        Capacitor("C3", "n3", "0", C_LADDER),
    ))


def ladder_denominator(x: np.ndarray, eps: float) -> np.ndarray:
    """v_x,open / v_3 of the ladder driven through R_L = eps·R (Thevenin form of gm into R_L).

    ABCD cascade of [[1 + x·r_k, r_k], [x, 1]] sections, r = (1 + eps, 1, 1), x = sRC (Pozar,
    Microwave Engineering, 4th ed., sec. 4.4, multiplied out by hand):
    d(x) = 1 + (6 + 3ε)x + (5 + 4ε)x² + (1 + ε)x³; at ε = 0 the textbook 1 + 6x + 5x² + x³.
    """
    return 1 + (6 + 3 * eps) * x + (5 + 4 * eps) * x**2 + (1 + eps) * x**3


def critical_gain(eps: float) -> float:
    # Routh–Hurwitz on (1 + A) + (6 + 3ε)x + (5 + 4ε)x² + (1 + ε)x³: a₂a₁ = a₃a₀ at the boundary,
    # so A = (6 + 3ε)(5 + 4ε)/(1 + ε) − 1 = 29 + 9ε + O(ε²). At ε = 0: A = 29 at ω = √6/RC
    # (the classic phase-shift oscillator, e.g. Sedra & Smith, Microelectronic Circuits; quoted
    # from memory). With ε = 1e-3 the critical gain moves up by 0.009.
    return (6 + 3 * eps) * (5 + 4 * eps) / (1 + eps) - 1


def phase_shift_roots(gain: float) -> tuple[np.ndarray, np.ndarray]:
    """Natural frequencies (rad/s) with the gain on and off: roots of d(x) + A = 0 and of
    d(x) = 0, x = sRC (ladder_denominator)."""
    scale = 1 / (R_LADDER * C_LADDER)
    on = np.roots([1 + EPS, 5 + 4 * EPS, 6 + 3 * EPS, 1 + gain]) * scale
    off = np.roots([1 + EPS, 5 + 4 * EPS, 6 + 3 * EPS, 1]) * scale
    return on, off
