"""A small lumped-circuit simulator (MNA): an independent oracle for tests and the demo data."""

from workers.lumped.checkdata import check_request, s_from_y, to_touchstone
from workers.lumped.mna import assemble, natural_frequencies, port_admittance
from workers.lumped.netlist import (
    GROUND,
    VCCS,
    Capacitor,
    Circuit,
    Conductance,
    Inductor,
    Resistor,
)

__all__ = [
    "GROUND",
    "VCCS",
    "Capacitor",
    "Circuit",
    "Conductance",
    "Inductor",
    "Resistor",
    "assemble",
    "check_request",
    "natural_frequencies",
    "port_admittance",
    "s_from_y",
    "to_touchstone",
]
