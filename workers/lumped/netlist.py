"""Lumped-circuit netlists: frozen element records and the circuit that holds them.

Node names are strings; ``"0"`` is ground. A :class:`VCCS` carries the current
``gm·e^(-jωτ)·(v[c+] − v[c−])`` from its output+ node through the source to its output− node
(it enters the element at output+), which gives the usual nodal stamp
Y[o+,c+] += gm, Y[o+,c−] −= gm, Y[o−,c+] −= gm, Y[o−,c−] += gm (common practice, e.g.
Ho, Ruehli & Brennan, "The modified nodal approach to network analysis", IEEE Trans. CAS, 1975).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

GROUND = "0"


@dataclass(frozen=True)
class Resistor:
    """A resistance ``ohms`` (non-zero) between ``node_a`` and ``node_b``."""

    name: str
    node_a: str
    node_b: str
    ohms: float


@dataclass(frozen=True)
class Conductance:
    """A conductance ``siemens`` between two nodes; negative values model a negative resistance."""

    name: str
    node_a: str
    node_b: str
    siemens: float


@dataclass(frozen=True)
class Capacitor:
    """A capacitance ``farads`` between two nodes."""

    name: str
    node_a: str
    node_b: str
    farads: float


@dataclass(frozen=True)
class Inductor:
    """An inductance ``henries`` (non-zero) between two nodes; its current is an MNA unknown."""

    name: str
    node_a: str
    node_b: str
    henries: float


@dataclass(frozen=True)
class VCCS:
    """A voltage-controlled current source ``gm_s·e^(-jω·delay_s)``.

    The current gm·(v[control[0]] − v[control[1]]) enters the element at ``output[0]`` and leaves
    it at ``output[1]``; a FET is control (gate, source), output (drain, source).
    """

    name: str
    control: tuple[str, str]
    output: tuple[str, str]
    gm_s: complex
    delay_s: float = 0.0


Element = Resistor | Conductance | Capacitor | Inductor | VCCS


def element_nodes(element: Element) -> tuple[str, ...]:
    """The nodes an element touches, in stamp order."""
    if isinstance(element, VCCS):
        return (*element.control, *element.output)
    return (element.node_a, element.node_b)


@dataclass(frozen=True)
class Circuit:
    """An ordered collection of uniquely named elements."""

    elements: tuple[Element, ...]

    def __post_init__(self) -> None:
        names = [element.name for element in self.elements]
        duplicates = sorted({name for name in names if names.count(name) > 1})
        if duplicates:
            raise ValueError(f"duplicate element names: {duplicates}")
        for element in self.elements:
            _check_value(element)

    @property
    def nodes(self) -> tuple[str, ...]:
        """Non-ground nodes in order of first appearance."""
        seen: dict[str, None] = {}
        for element in self.elements:
            for node in element_nodes(element):
                if node != GROUND:
                    seen.setdefault(node, None)
        return tuple(seen)

    @property
    def inductors(self) -> tuple[Inductor, ...]:
        return tuple(e for e in self.elements if isinstance(e, Inductor))

    @property
    def devices(self) -> tuple[VCCS, ...]:
        return tuple(e for e in self.elements if isinstance(e, VCCS))

    def element(self, name: str) -> Element:
        """The element called ``name`` (KeyError if absent)."""
        for element in self.elements:
            if element.name == name:
                return element
        raise KeyError(name)

    def with_elements(self, *extra: Element) -> Circuit:
        """A new circuit with ``extra`` elements appended."""
        return Circuit((*self.elements, *extra))

    def without(self, *names: str) -> Circuit:
        """A new circuit without the named elements."""
        return Circuit(tuple(e for e in self.elements if e.name not in names))

    def gain_off(self) -> Circuit:
        """The same circuit with every VCCS transconductance set to zero."""
        return Circuit(
            tuple(replace(e, gm_s=0.0) if isinstance(e, VCCS) else e for e in self.elements)
        )


def _check_value(element: Element) -> None:
    if isinstance(element, Resistor) and element.ohms == 0:
        raise ValueError(f"{element.name}: zero resistance (merge the nodes instead)")
    if isinstance(element, Inductor) and element.henries == 0:
        raise ValueError(f"{element.name}: zero inductance (merge the nodes instead)")
    if isinstance(element, VCCS) and element.delay_s < 0:
        raise ValueError(f"{element.name}: negative delay")
