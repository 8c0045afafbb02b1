"""Seeded batches of invented amplifier variants for the queue tests and the service benchmark.

Each variant is a one-stage self-biased FET amplifier simulated by ``workers.lumped`` (the
project's MNA simulator) at ``points`` frequencies, with five ports: ``in`` and ``out``
(external, 50 Ω) and probes ``g``, ``s``, ``d`` at the device terminals. The values are invented
(RF-plausible); the seed fixes them. Some variants lack the gate-return damping resistor or the
drain stabiliser, so a batch holds several kinds of verdict.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from workers.lumped.checkdata import check_request
from workers.lumped.families import fet_cell
from workers.lumped.netlist import Capacitor, Circuit, Element, Inductor, Resistor

PORTS = (
    ("in", "in", "external"),
    ("out", "out", "external"),
    ("g", "g", "probe"),
    ("s", "s", "probe"),
    ("d", "d", "probe"),
)


@dataclass(frozen=True)
class Variant:
    label: str
    request: dict[str, Any]


def amplifier(rng: np.random.Generator) -> Circuit:
    """One invented single-stage FET amplifier; ``rng`` draws the component spread.

    Large gm with a large Cgd and no gate-return damping or drain stabiliser gives right-half-
    plane natural frequencies (checked with ``workers.lumped.mna.natural_frequencies``).
    """
    damped = rng.random() > 0.4
    stabilised = rng.random() > 0.4
    elements: list[Element] = [
        Capacitor("Cin", "in", "m", rng.uniform(1.5e-12, 3e-12)),
        Inductor("Lg", "m", "g", rng.uniform(1.0e-9, 2.0e-9)),
        Inductor("Lret", "m", "ret" if damped else "0", rng.uniform(200e-9, 600e-9)),
        *fet_cell("1", "g", "d", "s", gm_s=rng.uniform(0.03, 0.35),
                  cgs_f=rng.uniform(0.3e-12, 0.6e-12), cgd_f=rng.uniform(0.02e-12, 0.16e-12),
                  rds_ohm=rng.uniform(200.0, 400.0), cds_f=rng.uniform(0.05e-12, 0.12e-12)),
        Inductor("Lvia", "s", "sb", rng.uniform(0.1e-9, 1.0e-9)),
        Resistor("Rsb", "sb", "0", 20.0),
        Capacitor("Csb", "sb", "0", 100e-12),
        Inductor("Lfeed", "d", "sup", 330e-9),
        Capacitor("Cdec", "sup", "0", 100e-12),
        Resistor("Rsup", "sup", "0", 10.0),
        Inductor("Lo", "d", "o", rng.uniform(0.5e-9, 1.2e-9)),
        Capacitor("Cout", "o", "out", 10e-12),
    ]
    if damped:
        elements.append(Resistor("Rdamp", "ret", "0", rng.uniform(50.0, 200.0)))
    if stabilised:
        elements += [Resistor("Rst", "d", "st", rng.uniform(100.0, 300.0)),
                     Capacitor("Cst", "st", "0", 2e-12)]
    return Circuit(tuple(elements))


def variants(count: int, *, points: int = 401, seed: int = 20261202) -> list[Variant]:
    """``count`` labelled check requests (S data, 50 Ω), ``points`` log-spaced over 1 MHz–1 THz
    (wide enough for the NDF to settle at both band edges)."""
    rng = np.random.default_rng(seed)
    frequency = np.geomspace(1e6, 1e12, points)
    out = []
    for k in range(count):
        circuit = amplifier(rng)
        devices = tuple((d.name, d) for d in circuit.devices)
        request = check_request(circuit, PORTS, devices, frequency, "S", 50.0)
        out.append(Variant(label=f"v{k:04d}", request=request))
    return out
