"""Realistic sweeps of generated amplifiers, with the truth from eig on the MNA pencil.

Design flows sweep S-parameters over the band their device models allow: from 10–500 MHz up to
about the devices' f_T, 201–801 points, linear or logarithmic. This module builds seeded,
invented amplifiers from the lumped simulator (``workers.lumped``) — single FET stages with
their bias feeds, the two-stage LNA and the two-way combined stage of ``workers.lumped.families``
with random knob settings — and gives each two sweeps: the band such a flow would use and
1 MHz–1 THz. The independent truth is the circuit's natural frequencies from
``scipy.linalg.eig`` on the MNA pencil det(G + sC) = 0 (``workers.lumped.natural_frequencies``),
never the engine.

f_T of a FET cell is gm / (2π(Cgs + Cgd)) (the usual short-circuit current-gain cutoff of the
hybrid-pi model; e.g. Pozar, Microwave Engineering, 4th ed., sec. 11.4, from memory).
"""

from __future__ import annotations

import functools
from collections.abc import Iterator
from dataclasses import dataclass, replace
from typing import Literal

import numpy as np

from workers.engine.request import CheckOptions, CheckRequest, Device, Network, Port
from workers.engine.samples import AddedSamples, merge_samples
from workers.lumped.checkdata import s_from_y
from workers.lumped.families import (
    LNA_FET,
    PA_FET,
    CircuitCase,
    combined_power_stage,
    fet_cell,
    two_stage_lna,
)
from workers.lumped.mna import natural_frequencies, port_admittance
from workers.lumped.netlist import GROUND, Capacitor, Circuit, Element, Inductor, Resistor

Z0_OHM = 50.0
WIDE_BAND_HZ = (1e6, 1e12)
WIDE_POINTS = 1001
Placement = Literal["in_band", "below_band", "above_band"]


def _log_uniform(rng: np.random.Generator, low: float, high: float) -> float:
    return float(np.exp(rng.uniform(np.log(low), np.log(high))))


def single_stage(gate_line_h: float, source_c_f: float | None, source_via_h: float,
                 gate_ohm: float, gate_damping_ohm: float | None, stabiliser: bool,
                 fet: dict[str, float]) -> CircuitCase:
    """One common-source FET stage with its bias feeds (invented values).

    Input: 0.5 Ω ESR, 3 pF DC block, ``gate_line_h`` to the gate resistance ``gate_ohm`` and the
    intrinsic gate; gate DC return 470 nH through ``gate_damping_ohm`` (None: straight to
    ground). Source: via ``source_via_h`` to ground, or, with ``source_c_f``, to a 300 Ω
    self-bias resistor bypassed by only ``source_c_f`` (a capacitive source: negative input
    resistance, common practice). Drain: 330 nH feed to a supply decoupled by 100 pF (10 Ω),
    0.8 nH and a 5 pF DC block to the output; optional 200 Ω + 1 pF shunt stabiliser.
    Ports: in, out (external, 50 Ω), g, s, d (probes at the intrinsic FET).
    """
    elements: list[Element] = [
        Resistor("Resr_in", "in", "in_c", 0.5),
        Capacitor("Cin", "in_c", "m1", 3e-12),
        Inductor("Lg", "m1", "gx", gate_line_h),
        Resistor("Rg", "gx", "g", gate_ohm),
        *fet_cell("1", "g", "d", "s", **fet),
        Inductor("Lret", "m1", "ret" if gate_damping_ohm is not None else GROUND, 470e-9),
        Inductor("Ldf", "d", "sup", 330e-9),
        Capacitor("Cdec", "sup", GROUND, 100e-12),
        Resistor("Rsup", "sup", GROUND, 10.0),
        Inductor("Ld", "d", "mo", 0.8e-9),
        Capacitor("Cout", "mo", "out_c", 5e-12),
        Resistor("Resr_out", "out_c", "out", 0.5),
    ]
    if gate_damping_ohm is not None:
        elements.append(Resistor("Rdamp", "ret", GROUND, gate_damping_ohm))
    if source_c_f is None:
        elements.append(Inductor("Ls", "s", GROUND, source_via_h))
    else:
        elements += [Inductor("Ls", "s", "sb", source_via_h), Capacitor("Csb", "sb", GROUND,
                                                                        source_c_f),
                     Resistor("Rsb", "sb", GROUND, 300.0)]
    if stabiliser:
        elements += [Resistor("Rst", "d", "st", 200.0), Capacitor("Cst", "st", GROUND, 1e-12)]
    circuit = Circuit(tuple(elements))
    ports = (("in", "in", "external"), ("out", "out", "external"), ("g", "g", "probe"),
             ("s", "s", "probe"), ("d", "d", "probe"))
    devices = tuple((d.name, d) for d in circuit.devices)
    return CircuitCase("single", circuit, ports, devices, {"in": Z0_OHM, "out": Z0_OHM})


def transit_frequency_hz(fet: dict[str, float]) -> float:
    """f_T = gm / (2π(Cgs + Cgd)) (module docstring)."""
    return fet["gm_s"] / (2 * np.pi * (fet["cgs_f"] + fet["cgd_f"]))


@dataclass(frozen=True)
class SweepCircuit:
    """A generated amplifier, its f_T and its two sweeps."""

    name: str
    family: str
    case: CircuitCase
    f_t_hz: float
    realistic_hz: np.ndarray
    wide_hz: np.ndarray

    @functools.cached_property
    def poles(self) -> np.ndarray:
        """Natural frequencies (rad/s) of the terminated circuit: scipy.linalg.eig (the truth)."""
        return natural_frequencies(self.case.circuit, self.case.terminations)

    @property
    def unstable(self) -> np.ndarray:
        """Right-half-plane natural frequencies with Im ≥ 0 (a pair once), by frequency."""
        p = self.poles
        found = p[(p.real > 0) & (p.imag >= 0)]
        return found[np.argsort(np.abs(found))]

    @property
    def rhp_count(self) -> int:
        """Right-half-plane natural frequencies, a complex pair counting 2."""
        return int(np.sum(self.poles.real > 0))

    def placement(self, band_hz: tuple[float, float]) -> list[Placement]:
        """Where each unstable natural frequency lies (|s|/2π) against ``band_hz``."""
        found: list[Placement] = []
        for z in self.unstable:
            f = abs(z) / (2 * np.pi)
            found.append("below_band" if f < band_hz[0] else "above_band" if f > band_hz[1]
                         else "in_band")
        return found

    def least_damping(self) -> float:
        """Smallest |Re s| / |s| over the complex natural frequencies (how marginal it is)."""
        p = self.poles[self.poles.imag > 0]
        return float(np.min(np.abs(p.real) / np.abs(p))) if p.size else 1.0


def request_at(circuit: SweepCircuit, frequency_hz: np.ndarray,
               fmax_hz: float | None = None, options: CheckOptions | None = None
               ) -> CheckRequest:
    """The engine's check request of ``circuit`` sampled at ``frequency_hz``: S data (50 Ω) at
    every port, devices on, external ports terminated in 50 Ω by the engine."""
    case = circuit.case
    f = np.asarray(frequency_hz, dtype=float)
    nodes = case.port_nodes
    index = {node: k for k, node in enumerate(nodes)}

    def at(node: str) -> int | None:
        return None if node == GROUND else index[node]

    devices = tuple(
        Device(name=name, gm_s=np.full(f.size, complex(v.gm_s)),
               control=(at(v.control[0]), at(v.control[1])),
               output=(at(v.output[0]), at(v.output[1])), fmax_hz=fmax_hz)
        for name, v in case.devices)
    s = s_from_y(port_admittance(case.circuit, nodes, f), Z0_OHM)
    return CheckRequest(
        frequency_hz=f, network=Network("S", s, np.full(len(nodes), Z0_OHM)),
        ports=tuple(Port(name, role) for name, _, role in case.ports),  # type: ignore[arg-type]
        devices=devices, options=options or CheckOptions())


def realistic_band(rng: np.random.Generator, f_t_hz: float) -> np.ndarray:
    """A flow's sweep: start 10–500 MHz, stop 0.7–1.5 f_T, 201–801 points, linear or log."""
    start = _log_uniform(rng, 10e6, 500e6)
    stop = float(rng.uniform(0.7, 1.5)) * f_t_hz
    points = int(rng.integers(201, 802))
    if rng.random() < 0.5:
        return np.linspace(start, stop, points)
    return np.geomspace(start, stop, points)


def _single(rng: np.random.Generator) -> tuple[CircuitCase, float]:
    scale = _log_uniform(rng, 0.6, 2.5)  # device periphery
    fet = {"gm_s": LNA_FET["gm_s"] * scale * _log_uniform(rng, 0.8, 1.8),
           "cgs_f": LNA_FET["cgs_f"] * scale, "cgd_f": LNA_FET["cgd_f"] * scale,
           "rds_ohm": LNA_FET["rds_ohm"] / scale, "cds_f": LNA_FET["cds_f"] * scale}
    capacitive = rng.random() < 0.6
    case = single_stage(
        gate_line_h=_log_uniform(rng, 0.3e-9, 3e-9),
        source_c_f=_log_uniform(rng, 0.1e-12, 0.6e-12) * scale if capacitive else None,
        source_via_h=_log_uniform(rng, 0.05e-9, 0.4e-9),
        gate_ohm=_log_uniform(rng, 0.5, 4.0),
        gate_damping_ohm=None if rng.random() < 0.25 else _log_uniform(rng, 5.0, 300.0),
        stabiliser=bool(rng.random() < 0.5), fet=fet)
    return case, transit_frequency_hz(fet)


def _lna(rng: np.random.Generator) -> tuple[CircuitCase, float]:
    knobs = {"gate_return_damping_ohm": None if rng.random() < 0.3 else
             _log_uniform(rng, 5.0, 300.0),
             "source_via_h": _log_uniform(rng, 0.1e-9, 1.2e-9),
             "output_stabiliser": bool(rng.random() < 0.6),
             "gm_scale": _log_uniform(rng, 0.8, 1.6)}
    fet = {**LNA_FET, "gm_s": LNA_FET["gm_s"] * knobs["gm_scale"]}
    return two_stage_lna(**knobs), transit_frequency_hz(fet)  # type: ignore[arg-type]


def _pair(rng: np.random.Generator) -> tuple[CircuitCase, float]:
    knobs = {"odd_mode_ohm": None if rng.random() < 0.35 else _log_uniform(rng, 10.0, 2000.0),
             "gate_return_damping_ohm": None if rng.random() < 0.2 else
             _log_uniform(rng, 10.0, 200.0),
             "gm_scale": _log_uniform(rng, 0.8, 1.4),
             "line_h": _log_uniform(rng, 0.8e-9, 2.5e-9)}
    fet = {**PA_FET, "gm_s": PA_FET["gm_s"] * knobs["gm_scale"]}
    return combined_power_stage(**knobs), transit_frequency_hz(fet)  # type: ignore[arg-type]


def _compact_pair(rng: np.random.Generator) -> tuple[CircuitCase, float]:
    """The combined stage laid out tightly (tens of pH of line, a longer source via): its odd
    mode moves up to about 1.3–1.9 f_T, above the band a flow would sweep."""
    knobs = {"odd_mode_ohm": None if rng.random() < 0.6 else _log_uniform(rng, 200.0, 2000.0),
             "gm_scale": _log_uniform(rng, 0.9, 1.4),
             "line_h": _log_uniform(rng, 0.02e-9, 0.07e-9),
             "source_via_h": _log_uniform(rng, 0.05e-9, 0.1e-9),
             "gate_ohm": _log_uniform(rng, 0.3, 1.5)}
    fet = {**PA_FET, "gm_s": PA_FET["gm_s"] * knobs["gm_scale"]}
    return combined_power_stage(**knobs), transit_frequency_hz(fet)  # type: ignore[arg-type]


BUILDERS = {"single": _single, "lna": _lna, "pair": _pair, "compact_pair": _compact_pair}


def generated(family: str, seed: int) -> SweepCircuit:
    """One seeded circuit of ``family`` (single | lna | pair | compact_pair), two sweeps."""
    rng = np.random.default_rng([seed, list(BUILDERS).index(family)])
    case, f_t = BUILDERS[family](rng)
    return SweepCircuit(f"{family}-{seed}", family, case, f_t, realistic_band(rng, f_t),
                        np.geomspace(*WIDE_BAND_HZ, WIDE_POINTS))


def suite(per_family: int = 16, first_seed: int = 0) -> Iterator[SweepCircuit]:
    """``per_family`` seeded circuits of every family (deterministic)."""
    for family in BUILDERS:
        for seed in range(first_seed, first_seed + per_family):
            yield generated(family, seed)


def with_band(circuit: SweepCircuit, frequency_hz: np.ndarray, tag: str) -> SweepCircuit:
    """The same circuit with another realistic sweep (for hand-placed band cuts)."""
    return replace(circuit, name=f"{circuit.name}-{tag}",
                   realistic_hz=np.asarray(frequency_hz, dtype=float))


def resample(frequency_hz: np.ndarray, band_hz: tuple[float, float],
             extra_hz: list[float] | tuple[float, ...] = (), per_decade: int = 60,
             at_least: int = 40) -> np.ndarray:
    """What a flow sweeps next: its old points, a log sweep of each stretch of ``band_hz``
    beyond them (``per_decade`` points, ``at_least`` each) and ``extra_hz``; sorted, unique."""
    f = np.asarray(frequency_hz, dtype=float)
    pieces = [f, np.asarray(list(extra_hz), dtype=float)]
    low, high = float(band_hz[0]), float(band_hz[1])
    if low < f[0]:
        start = low if low > 0 else f[0] * 1e-3
        n = max(at_least, int(np.ceil(np.log10(f[0] / start) * per_decade)))
        pieces.append(np.geomspace(start, f[0], n + 1)[:-1])
    if high > f[-1]:
        n = max(at_least, int(np.ceil(np.log10(high / f[-1]) * per_decade)))
        pieces.append(np.geomspace(f[-1], high, n + 1)[1:])
    merged = np.unique(np.concatenate(pieces))
    return merged[merged > 0]


@dataclass(frozen=True)
class SweepRun:
    """The verdicts of one circuit: the first pass, then one per ``next_sweep`` followed."""

    circuit: SweepCircuit
    verdicts: tuple  # CheckVerdict, first pass first
    frequencies: tuple[np.ndarray, ...]

    @property
    def final(self):
        return self.verdicts[-1]

    @property
    def sweeps_needed(self) -> int:
        """Further sweeps after the first pass (0: the first pass was final)."""
        return len(self.verdicts) - 1


def is_final(verdict) -> bool:
    """A verdict a flow can act on without sweeping again."""
    return verdict.next_sweep is None


def samples_at(circuit: SweepCircuit, frequency_hz: np.ndarray) -> AddedSamples:
    """The circuit's S data at ``frequency_hz`` as new samples (what a flow sends to
    ``POST /v1/checks/{id}/samples``)."""
    request = request_at(circuit, frequency_hz)
    return AddedSamples(request.frequency_hz, request.network)


def follow(circuit: SweepCircuit, frequency_hz: np.ndarray, more_sweeps: int = 2,
           fmax_hz: float | None = None) -> SweepRun:
    """Check ``circuit`` at ``frequency_hz``, then follow each ``next_sweep``: simulate the
    points it asks for (``resample``: a log sweep of the new band's stretches and the extra
    points), merge them into the request (``workers.engine.samples.merge_samples``, as the
    service does) and check again, up to ``more_sweeps`` times or until the verdict is final."""
    from workers.engine import run_check

    request = request_at(circuit, np.asarray(frequency_hz, dtype=float), fmax_hz)
    verdicts, grids = [], []
    for _ in range(more_sweeps + 1):
        verdict = run_check(request)
        verdicts.append(verdict)
        grids.append(request.frequency_hz)
        if is_final(verdict):
            break
        wanted = resample(request.frequency_hz, verdict.next_sweep.band_hz,
                          verdict.next_sweep.frequencies_hz)
        new = np.setdiff1d(wanted, request.frequency_hz)
        request = merge_samples(request, samples_at(circuit, new))
    return SweepRun(circuit, tuple(verdicts), tuple(grids))
