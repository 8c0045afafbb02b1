"""Generated lumped circuits for the refinement tests and benchmark (built with workers.lumped).

Each circuit's port data comes from the MNA Schur complement and its natural frequencies from
scipy.linalg.eig on the MNA pencil det(G + sC) = 0 — the independent oracle of every refinement
test. ``tests/test_refine_circuits.py`` checks the builders against the closed-form natural
frequencies of a parallel RLC tank (s² + (G/C)s + 1/(LC) = 0, common practice).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
import scipy.linalg

from tests.support.circuits import PortSpec
from tests.support.requests import engine_request
from workers.engine.request import CheckOptions, CheckRequest
from workers.lumped import (
    VCCS,
    Capacitor,
    Circuit,
    Conductance,
    Inductor,
    Resistor,
    assemble,
    natural_frequencies,
)


@dataclass(frozen=True)
class Case:
    """A circuit, its probe ports (port name = node name) and its devices in switch-on order."""

    name: str
    circuit: Circuit
    nodes: tuple[str, ...]
    devices: tuple[str, ...]

    def natural_frequencies(self) -> np.ndarray:
        return natural_frequencies(self.circuit)

    def unstable(self) -> np.ndarray:
        """Right-half-plane natural frequencies with Im ≥ 0 (one per pair), by frequency."""
        s = self.natural_frequencies()
        s = s[(s.real > 0) & (s.imag >= 0)]
        return s[np.argsort(s.imag)]

    def request(self, frequency_hz: np.ndarray, refine: bool = True,
                noise: float = 0.0, seed: int = 0) -> CheckRequest:
        """Y data at the probe ports (devices on); optional complex Gaussian noise relative to
        each entry (seeded)."""
        ports = [PortSpec(node, node, "probe") for node in self.nodes]
        request = engine_request(self.circuit, ports, frequency_hz, self.devices,
                                 CheckOptions(refine=refine))
        if not noise:
            return request
        y = request.network.values
        rng = np.random.default_rng(seed)
        y = y * (1 + noise * (rng.standard_normal(y.shape)
                              + 1j * rng.standard_normal(y.shape)) / np.sqrt(2))
        return replace(request, network=replace(request.network, values=y))


def tank(f0_hz: float, growth_ratio: float, q_off: float = 20.0, l_h: float = 1e-9,
         delay_s: float = 0.0) -> Case:
    """Parallel L, C, R tank at node "tank" with a negative-conductance device (a VCCS whose
    control and output are the tank node, gm < 0) set so that the pair has σ/ω₀ = growth_ratio.

    Closed form: s² + (G/C)s + 1/(LC) = 0 with G = 1/R + gm, so σ = −G/2C; gm = −1/R − 2Cσ.
    """
    w0 = 2 * np.pi * f0_hz
    c_f = 1 / (w0**2 * l_h)
    r_ohm = q_off / (w0 * c_f)
    gm = -1 / r_ohm - 2 * c_f * growth_ratio * w0
    circuit = Circuit((
        Resistor("R", "tank", "0", r_ohm),
        Inductor("L", "tank", "0", l_h),
        Capacitor("C", "tank", "0", c_f),
        VCCS("Q1", ("tank", "0"), ("tank", "0"), gm, delay_s),
    ))
    return Case(f"tank_{f0_hz:.3g}_{growth_ratio:+.4f}", circuit, ("tank",), ("Q1",))


def odd_mode_pair(f0_hz: float = 2e9, g_net_s: float = -1e-3, coupling_f: float = 0.5e-12,
                  order: tuple[str, str] = ("Q1", "Q2")) -> Case:
    """Two identical tanks "a" and "b", each with a negative-conductance device (Q1 at a, Q2 at b),
    joined through capacitors Cc to a combining node "m" that has a resistor Re to ground.

    The even mode (v_a = v_b) drives current through Re and is damped; the odd mode
    (v_a = −v_b) leaves m at virtual ground, sees Cc as a lossless shunt and, with net
    conductance g_net_s < 0 per tank, grows. Re is set so that ωCc·2Re = 1 at f0 (largest
    even-mode loss, ωCc/2 per tank).
    """
    l_h = 1e-9
    w0 = 2 * np.pi * f0_hz
    c_f = 1 / (w0**2 * l_h)
    r_ohm = 20 / (w0 * c_f)
    gm = g_net_s - 1 / r_ohm
    re_ohm = 1 / (2 * w0 * coupling_f)
    elements = []
    for tag in ("a", "b"):
        device = "Q1" if tag == "a" else "Q2"
        elements += [
            Resistor(f"R{tag}", tag, "0", r_ohm),
            Inductor(f"L{tag}", tag, "0", l_h),
            Capacitor(f"C{tag}", tag, "0", c_f),
            Capacitor(f"Cc{tag}", tag, "m", coupling_f),
            VCCS(device, (tag, "0"), (tag, "0"), gm),
        ]
    elements.append(Resistor("Re", "m", "0", re_ohm))
    return Case("odd_mode_pair", Circuit(tuple(elements)), ("a", "b", "m"), order)


def mode_shape(case: Case, s: complex) -> dict[str, float]:
    """|node voltage| of the natural mode nearest s at the case's port nodes, largest = 1,
    from the eigenvector of the MNA pencil (scipy.linalg.eig(G, −C))."""
    system = assemble(case.circuit)
    values, vectors = scipy.linalg.eig(system.G, -system.C)
    finite = np.isfinite(values)
    k = int(np.argmin(np.where(finite, np.abs(values - s), np.inf)))
    x = np.abs(vectors[:, k])
    at = {node: float(x[system.labels.index(node)]) for node in case.nodes}
    top = max(at.values())
    return {node: value / top for node, value in at.items()}


def with_shunt(case: Case, node: str, siemens: float) -> Case:
    """The case with a shunt conductance added from ``node`` to ground."""
    return Case(case.name + "+shunt", case.circuit.with_elements(
        Conductance("Gshunt", node, "0", siemens)), case.nodes, case.devices)


def generated_set(seed: int = 7, size: int = 10) -> list[Case]:
    """Seeded random tanks (f0 0.5–5 GHz, |σ|/ω 0.1–2 %, either sign) and odd-mode pairs."""
    rng = np.random.default_rng(seed)
    cases = []
    for i in range(size):
        if i % 4 == 3:
            cases.append(odd_mode_pair(f0_hz=float(rng.uniform(1e9, 4e9)),
                                       g_net_s=float(rng.choice([-1, 1]) * rng.uniform(0.3e-3,
                                                                                        2e-3))))
        else:
            ratio = float(rng.choice([-1, 1]) * 10 ** rng.uniform(-3, np.log10(0.02)))
            cases.append(tank(float(rng.uniform(0.5e9, 5e9)), ratio,
                              q_off=float(rng.uniform(5, 40))))
    return cases


def embedded(case: Case, sections: int, seed: int = 0) -> Case:
    """``case`` with a lossy ladder hung on its first node: ``sections`` series R–L sections with
    a shunt C at each new node (each a probe port), ending in 50 Ω to ground (seeded values)."""
    rng = np.random.default_rng(seed)
    elements = []
    previous = case.nodes[0]
    nodes = list(case.nodes)
    for k in range(sections):
        node, mid = f"n{k + 1}", f"x{k + 1}"
        elements += [
            Resistor(f"Rs{k + 1}", previous, mid, float(rng.uniform(20, 200))),
            Inductor(f"Ls{k + 1}", mid, node, float(rng.uniform(0.2e-9, 2e-9))),
            Capacitor(f"Cp{k + 1}", node, "0", float(rng.uniform(0.05e-12, 0.5e-12))),
        ]
        nodes.append(node)
        previous = node
    elements.append(Resistor("Rend", previous, "0", 50.0))
    return Case(f"{case.name}+ladder{sections}", case.circuit.with_elements(*elements),
                tuple(nodes), case.devices)


def benchmark_set(seed: int = 11, size: int = 20) -> list[Case]:
    """The generated set with every other circuit embedded in a 3–7 section ladder (4–10 ports)."""
    rng = np.random.default_rng(seed + 1)
    return [embedded(case, int(rng.integers(3, 8)), seed=k) if k % 2 else case
            for k, case in enumerate(generated_set(seed, size))]
