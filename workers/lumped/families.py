"""Named, parametrised lumped circuits with a knob that moves them from stable to oscillating.

Each builder returns a :class:`CircuitCase`: the circuit, its ports (name, node, role) in data
order, the devices (name, VCCS) for the check request, and the external terminations (node → Ω).
Values are invented but RF-plausible (pF, nH, tens to hundreds of mS). Natural frequencies quoted
in the docstrings were computed with scipy.linalg.eig through :func:`natural_frequencies` (see the
module ``service.demo.generate`` and ``tests/test_lumped.py``, which recompute them).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from workers.lumped.checkdata import PortSpec, check_request
from workers.lumped.mna import natural_frequencies
from workers.lumped.netlist import VCCS, Capacitor, Circuit, Element, Inductor, Resistor


@dataclass(frozen=True)
class CircuitCase:
    """A circuit with its port map, devices and external terminations (node → Ω)."""

    name: str
    circuit: Circuit
    ports: tuple[PortSpec, ...]
    devices: tuple[tuple[str, VCCS], ...]
    terminations: dict[str, float]

    @property
    def port_nodes(self) -> list[str]:
        return [node for _, node, _ in self.ports]

    def natural_frequencies(self) -> np.ndarray:
        """Finite natural frequencies (rad/s) of the circuit with its external terminations."""
        return natural_frequencies(self.circuit, self.terminations)

    def check_request(self, frequency_hz: np.ndarray, parameter: str = "S", z0: float = 50.0):
        """The JSON check request (dict) of this case; see :func:`check_request`."""
        port_of_node = {node: name for name, node, _ in self.ports}
        terminations = {port_of_node[node]: ohms for node, ohms in self.terminations.items()}
        return check_request(
            self.circuit, self.ports, self.devices, frequency_hz, parameter, z0, terminations
        )


def fet_cell(
    tag: str,
    gate: str,
    drain: str,
    source: str,
    gm_s: float,
    cgs_f: float,
    cgd_f: float,
    rds_ohm: float,
    cds_f: float,
) -> list[Element]:
    """Intrinsic FET small-signal model: Cgs, Cgd, Rds ∥ Cds and gm·v_gs from drain to source
    (the usual unilateral-gm equivalent circuit; e.g. Pozar, Microwave Engineering, 4th ed.,
    sec. 11.4, without the parasitic series resistances)."""
    return [
        Capacitor(f"Cgs{tag}", gate, source, cgs_f),
        Capacitor(f"Cgd{tag}", gate, drain, cgd_f),
        Resistor(f"Rds{tag}", drain, source, rds_ohm),
        Capacitor(f"Cds{tag}", drain, source, cds_f),
        VCCS(f"Q{tag}", (gate, source), (drain, source), gm_s),
    ]


def _device_list(circuit: Circuit) -> tuple[tuple[str, VCCS], ...]:
    return tuple((device.name, device) for device in circuit.devices)


def parallel_rlc_negative_g(
    r_ohm: float = 200.0, l_h: float = 1e-9, c_f: float = 2e-12, g_neg_s: float = -3e-3
) -> CircuitCase:
    """A parallel R, L, C tank with a negative conductance realised as a VCCS whose control and
    output are both the tank node (gm = g_neg_s < 0).

    Closed form: s = −G/2C ± j√(1/LC − (G/2C)²) with G = 1/R + g_neg_s, so the knob g_neg_s
    crosses into the right half plane at g_neg_s = −1/R (−5 mS with the defaults, f0 ≈ 3.56 GHz).
    Computed with scipy.linalg.eig (s/2π): default −79.6 MHz ± j3558 MHz; g_neg_s = −6 mS:
    +39.8 MHz ± j3559 MHz. One probe port "tank".
    """
    circuit = Circuit(
        (
            Resistor("R", "tank", "0", r_ohm),
            Inductor("L", "tank", "0", l_h),
            Capacitor("C", "tank", "0", c_f),
            VCCS("Gneg", ("tank", "0"), ("tank", "0"), g_neg_s),
        )
    )
    return CircuitCase("rlc", circuit, (("tank", "tank", "probe"),), _device_list(circuit), {})


def phase_shift_oscillator(
    gain: float = 29.0, r_ohm: float = 100.0, c_f: float = 1e-12
) -> CircuitCase:
    """Inverting amplifier of gain −A driving three equal RC low-pass sections (series R, shunt C)
    whose last node controls the amplifier.

    The amplifier is a VCCS into R_out = 1e-6·R with gm = A/R_out, an almost ideal voltage
    source. Loop: −A/(x³ + 5x² + 6x + 1) = 1 with x = sRC, so the textbook critical gain is
    A = 29 at ω = √6/(RC) (e.g. Sedra & Smith, Microelectronic Circuits;
    from memory). Defaults: ω = √6/(100 Ω·1 pF) → 3.898 GHz. Computed with scipy.linalg.eig
    (s/2π): A = 28: −25.9 MHz ± j3845 MHz; A = 29: −231 Hz ± j3898 MHz; A = 30: +25.4 MHz ±
    j3950 MHz. Probe ports "amp_out" and "ladder_out".
    """
    r_out = 1e-6 * r_ohm
    circuit = Circuit(
        (
            Resistor("R1", "amp_out", "n1", r_ohm),
            Capacitor("C1", "n1", "0", c_f),
            Resistor("R2", "n1", "n2", r_ohm),
            Capacitor("C2", "n2", "0", c_f),
            Resistor("R3", "n2", "ladder_out", r_ohm),
            Capacitor("C3", "ladder_out", "0", c_f),
            Resistor("Rout", "amp_out", "0", r_out),
            VCCS("A", ("ladder_out", "0"), ("amp_out", "0"), gain / r_out),
        )
    )
    ports = (("amp_out", "amp_out", "probe"), ("ladder_out", "ladder_out", "probe"))
    return CircuitCase("phase_shift", circuit, ports, _device_list(circuit), {})


def _drain_feed(tag: str, drain: str, choke_h: float) -> list[Element]:
    """Drain bias feed: RF choke to a supply node decoupled by 100 pF, supply source 10 Ω."""
    supply = f"{tag}_sup"
    return [
        Inductor(f"L{tag}", drain, supply, choke_h),
        Capacitor(f"Cdec{tag}", supply, "0", 100e-12),
        Resistor(f"Rsup{tag}", supply, "0", 10.0),
    ]


def _gate_return(tag: str, node: str, choke_h: float, damping_ohm: float | None) -> list[Element]:
    """Gate DC return of a self-biased FET: RF choke to ground through ``damping_ohm`` (None:
    the choke goes straight to ground)."""
    if damping_ohm is None:
        return [Inductor(f"L{tag}", node, "0", choke_h)]
    return [
        Inductor(f"L{tag}", node, f"{tag}_ret", choke_h),
        Resistor(f"Rdamp{tag}", f"{tag}_ret", "0", damping_ohm),
    ]


def _self_bias(tag: str, source: str, via_h: float, ohms: float, bypass_f: float) -> list[Element]:
    """Source self-bias: via inductance to a resistor bypassed by a capacitor."""
    node = f"{tag}_sb"
    return [
        Inductor(f"Lvia{tag}", source, node, via_h),
        Resistor(f"Rsb{tag}", node, "0", ohms),
        Capacitor(f"Csb{tag}", node, "0", bypass_f),
    ]


LNA_FET = {"gm_s": 0.06, "cgs_f": 0.45e-12, "cgd_f": 0.04e-12, "rds_ohm": 300.0, "cds_f": 0.08e-12}


def two_stage_lna(
    gate_return_damping_ohm: float | None = 100.0,
    source_via_h: float = 0.25e-9,
    output_stabiliser: bool = True,
    gm_scale: float = 1.0,
) -> CircuitCase:
    """A two-stage self-biased FET low-noise amplifier for the 4–6 GHz band (invented values).

    Stage 1: 2 pF input DC block (0.5 Ω ESR), 1.5 nH series match, gate DC return = 470 nH choke
    to ground through ``gate_return_damping_ohm`` (None = missing), source via ``source_via_h``
    to a 20 Ω self-bias resistor bypassed by 100 pF, drain feed 330 nH choke to a supply node
    decoupled by 100 pF (10 Ω source). Interstage: 5 pF DC block, 1.2 nH; stage 2: gate return
    470 nH + 200 Ω, source via 0.15 nH to 20 Ω ∥ 100 pF, optional shunt 150 Ω + 2 pF RF
    stabiliser at the drain, 330 nH drain feed, 0.8 nH and a 10 pF DC block (0.5 Ω ESR) to the
    output. FET: gm 60 mS (× gm_scale), Cgs 0.45 pF, Cgd 40 fF, Rds 300 Ω, Cds 80 fF. Gain about
    19 dB at 5 GHz.

    Without the damping resistor the first FET sees a nearly lossless inductive gate return, an
    inductive drain feed and a capacitive source (the bypassed self-bias resistor) at low
    frequency: a tuned-gate/tuned-drain loop through Cgd plus the source-capacitance negative
    resistance oscillates near 145 MHz while the RF band stays stable.
    Natural frequency with the largest real part (50 Ω at in and out), computed with
    scipy.linalg.eig through :func:`natural_frequencies`, s/2π:
    default (100 Ω): −8.99 MHz ± j145.2 MHz; damping None: +6.57 MHz ± j145.4 MHz;
    10 Ω: +5.01 MHz ± j145.5 MHz; 220 Ω: −16.4 MHz ± j69.5 MHz; no output stabiliser:
    −8.88 MHz ± j145.0 MHz; 1 nH source via: −9.40 MHz ± j144.9 MHz.
    Ports: in, out (external, 50 Ω), g1, s1, d1, g2, s2, d2 (probes).
    """
    fet = {**LNA_FET, "gm_s": LNA_FET["gm_s"] * gm_scale}
    elements: list[Element] = [
        Resistor("Resr_in", "in", "in_c", 0.5),
        Capacitor("Cin", "in_c", "m1", 2e-12),
        Inductor("Lm1", "m1", "g1", 1.5e-9),
        *_gate_return("g1", "m1", 470e-9, gate_return_damping_ohm),
        *fet_cell("1", "g1", "d1", "s1", **fet),
        *_self_bias("s1", "s1", source_via_h, 20.0, 100e-12),
        *_drain_feed("d1", "d1", 330e-9),
        Capacitor("Cc12", "d1", "m2", 5e-12),
        Inductor("Lm2", "m2", "g2", 1.2e-9),
        *_gate_return("g2", "m2", 470e-9, 200.0),
        *fet_cell("2", "g2", "d2", "s2", **fet),
        *_self_bias("s2", "s2", 0.15e-9, 20.0, 100e-12),
        *_drain_feed("d2", "d2", 330e-9),
        Inductor("Lo", "d2", "mo", 0.8e-9),
        Capacitor("Cout", "mo", "out_c", 10e-12),
        Resistor("Resr_out", "out_c", "out", 0.5),
    ]
    if output_stabiliser:
        elements += [Resistor("Rst2", "d2", "st2", 150.0), Capacitor("Cst2", "st2", "0", 2e-12)]
    circuit = Circuit(tuple(elements))
    ports: tuple[PortSpec, ...] = (
        ("in", "in", "external"),
        ("out", "out", "external"),
        ("g1", "g1", "probe"),
        ("s1", "s1", "probe"),
        ("d1", "d1", "probe"),
        ("g2", "g2", "probe"),
        ("s2", "s2", "probe"),
        ("d2", "d2", "probe"),
    )
    return CircuitCase("lna", circuit, ports, _device_list(circuit), {"in": 50.0, "out": 50.0})


PA_FET = {"gm_s": 0.25, "cgs_f": 2.5e-12, "cgd_f": 0.25e-12, "rds_ohm": 60.0, "cds_f": 0.5e-12}


def combined_power_stage(
    odd_mode_ohm: float | None = 20.0,
    gate_return_damping_ohm: float | None = 50.0,
    gm_scale: float = 1.0,
    line_h: float = 1.5e-9,
    source_via_h: float = 0.08e-9,
    gate_ohm: float = 1.0,
) -> CircuitCase:
    """Two identical FET cells in parallel for a 2.5 GHz power stage (invented values).

    Input: 20 pF DC block (0.5 Ω ESR), 3 pF shunt, 1 nH, a common-path stabiliser (shunt
    50 Ω + 10 pF, then series 10 Ω ∥ 5 pF) to the split node, whose DC return is a 100 nH choke
    to ground through ``gate_return_damping_ohm`` (None = missing). Each cell: ``line_h`` gate
    line and ``gate_ohm`` gate resistance from the split node, FET (gm 250 mS × gm_scale,
    Cgs 2.5 pF, Cgd 0.25 pF, Rds 60 Ω, Cds 0.5 pF), source via ``source_via_h``, ``line_h``
    drain line to the combining node. ``odd_mode_ohm`` (None = missing) links the two drains.
    Output: drain feed 100 nH choke to a 100 pF-decoupled supply, 0.5 nH, 4 pF shunt, 20 pF DC
    block (0.5 Ω ESR). Gain about 9.2 dB at 2.5 GHz; the external two-port has mu ≥ 1 from
    1 MHz to 1 THz (mu → 1 at the ends, where the DC blocks and shunt capacitors make the
    ports nearly lossless).

    In the odd mode (cells in antiphase) the split and combining nodes are virtual grounds, so
    each cell sees a short at the far end of its gate and drain lines: a tuned-gate/tuned-drain
    loop through Cgd that the common-path stabiliser cannot reach. Only the drain-to-drain
    resistor (R/2 to the virtual ground per cell) damps it. The odd mode drives no current into
    the split or combining node, so the in/out two-port data are the same whatever that
    resistor is. Natural frequency with the largest real part (50 Ω at in and out), computed
    with scipy.linalg.eig through :func:`natural_frequencies`, s/2π:
    default (20 Ω): −49.2 MHz ± j55.0 MHz (odd mode at −263 MHz ± j2255 MHz);
    odd resistor None: +102 MHz ± j2242 MHz (odd mode); 1 kΩ: +86.7 MHz ± j2236 MHz (odd);
    50 Ω: −49.2 MHz ± j55.0 MHz (odd mode at −124 MHz ± j2207 MHz); line_h 2 nH:
    −49.2 MHz ± j55.0 MHz; line_h 2 nH and no odd resistor: +132 MHz ± j1892 MHz (odd);
    gate damping None: −13.2 MHz ± j77.8 MHz.
    Ports: in, out (external, 50 Ω), g_a, s_a, d_a, g_b, s_b, d_b (probes).
    """
    fet = {**PA_FET, "gm_s": PA_FET["gm_s"] * gm_scale}
    elements: list[Element] = [
        Resistor("Resr_in", "in", "in_c", 0.5),
        Capacitor("Cin", "in_c", "im", 20e-12),
        Capacitor("Cin_sh", "im", "0", 3e-12),
        Inductor("Lin", "im", "pre", 1e-9),
        Resistor("Rstab", "pre", "split", 10.0),
        Capacitor("Cstab", "pre", "split", 5e-12),
        Resistor("Rshunt", "pre", "shunt", 50.0),
        Capacitor("Cshunt", "shunt", "0", 10e-12),
        *_gate_return("gret", "split", 100e-9, gate_return_damping_ohm),
        *_drain_feed("dfeed", "comb", 100e-9),
        Inductor("Lout", "comb", "om", 0.5e-9),
        Capacitor("Cout_sh", "om", "0", 4e-12),
        Capacitor("Cout", "om", "out_c", 20e-12),
        Resistor("Resr_out", "out_c", "out", 0.5),
    ]
    for cell in ("a", "b"):
        elements += [
            Inductor(f"Lg_{cell}", "split", f"gl_{cell}", line_h),
            Resistor(f"Rg_{cell}", f"gl_{cell}", f"g_{cell}", gate_ohm),
            *fet_cell(f"_{cell}", f"g_{cell}", f"d_{cell}", f"s_{cell}", **fet),
            Inductor(f"Ls_{cell}", f"s_{cell}", "0", source_via_h),
            Inductor(f"Ld_{cell}", f"d_{cell}", "comb", line_h),
        ]
    if odd_mode_ohm is not None:
        elements.append(Resistor("Rodd", "d_a", "d_b", odd_mode_ohm))
    circuit = Circuit(tuple(elements))
    ports: tuple[PortSpec, ...] = (
        ("in", "in", "external"),
        ("out", "out", "external"),
        ("g_a", "g_a", "probe"),
        ("s_a", "s_a", "probe"),
        ("d_a", "d_a", "probe"),
        ("g_b", "g_b", "probe"),
        ("s_b", "s_b", "probe"),
        ("d_b", "d_b", "probe"),
    )
    return CircuitCase("pa", circuit, ports, _device_list(circuit), {"in": 50.0, "out": 50.0})
