"""Modified nodal analysis (MNA) of a :class:`Circuit`: port admittance and natural frequencies.

Unknowns are the non-ground node voltages followed by one current per inductor. With the
nodal rows read as "sum of currents leaving the node through the elements = injected current"
and the inductor rows as ``v_a − v_b − s·L·i_L = 0`` the system is ``(G + s·C + D(s))·x = b``
where D(s) collects delayed transconductances gm·e^(−sτ) (Ho, Ruehli & Brennan, IEEE Trans.
CAS 22(6), 1975; common practice). Inductor currents are scaled by ``CURRENT_SCALE`` so the
pencil is balanced (a numerical choice only: port results and eigenvalues do not depend on it).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
import scipy.linalg

from workers.lumped.netlist import (
    GROUND,
    VCCS,
    Capacitor,
    Circuit,
    Conductance,
    Inductor,
    Resistor,
)

CURRENT_SCALE = 0.02  # S: inductor current unknowns are i_L / CURRENT_SCALE (volts)
INFINITE_EIGENVALUE_TOLERANCE = 1e-7


@dataclass(frozen=True)
class MnaSystem:
    """``M(s) = G + s·C + Σ_k gm_k·e^(−sτ_k)·B_k`` over the unknowns ``labels``."""

    labels: tuple[str, ...]
    G: np.ndarray
    C: np.ndarray
    delayed: tuple[tuple[complex, float, np.ndarray], ...]

    def matrix(self, s: np.ndarray) -> np.ndarray:
        """M(s) for a vector of complex frequencies s, shape (F, n, n)."""
        s = np.asarray(s, dtype=complex).reshape(-1)
        m = self.G[None, :, :] + s[:, None, None] * self.C[None, :, :]
        for gm, tau, stamp in self.delayed:
            m = m + (gm * np.exp(-s * tau))[:, None, None] * stamp[None, :, :]
        return m


def assemble(circuit: Circuit, terminations: Mapping[str, complex] | None = None) -> MnaSystem:
    """Stamp the circuit into MNA matrices; ``terminations`` adds node-to-ground impedances (Ω)."""
    nodes = circuit.nodes
    index = {node: k for k, node in enumerate(nodes)}
    inductors = circuit.inductors
    n = len(nodes) + len(inductors)
    G = np.zeros((n, n), dtype=complex)
    C = np.zeros((n, n), dtype=complex)
    delayed: list[tuple[complex, float, np.ndarray]] = []

    def at(node: str) -> int | None:
        return None if node == GROUND else index[node]

    def stamp_two_terminal(target: np.ndarray, a: str, b: str, value: complex) -> None:
        ia, ib = at(a), at(b)
        for i, sign_i in ((ia, 1.0), (ib, -1.0)):
            for j, sign_j in ((ia, 1.0), (ib, -1.0)):
                if i is not None and j is not None:
                    target[i, j] += sign_i * sign_j * value

    branch = len(nodes)
    for element in circuit.elements:
        if isinstance(element, Resistor):
            stamp_two_terminal(G, element.node_a, element.node_b, 1.0 / element.ohms)
        elif isinstance(element, Conductance):
            stamp_two_terminal(G, element.node_a, element.node_b, element.siemens)
        elif isinstance(element, Capacitor):
            stamp_two_terminal(C, element.node_a, element.node_b, element.farads)
        elif isinstance(element, Inductor):
            # column: i_L = CURRENT_SCALE·x leaves node_a, enters node_b; row scaled likewise
            for node, sign in ((element.node_a, 1.0), (element.node_b, -1.0)):
                k = at(node)
                if k is not None:
                    G[k, branch] += sign * CURRENT_SCALE
                    G[branch, k] += sign * CURRENT_SCALE
            C[branch, branch] = -element.henries * CURRENT_SCALE**2
            branch += 1
        elif isinstance(element, VCCS):
            stamp = np.zeros((n, n), dtype=complex)
            for out_node, sign_o in ((element.output[0], 1.0), (element.output[1], -1.0)):
                for ctl_node, sign_c in ((element.control[0], 1.0), (element.control[1], -1.0)):
                    i, j = at(out_node), at(ctl_node)
                    if i is not None and j is not None:
                        stamp[i, j] += sign_o * sign_c
            if element.delay_s > 0:
                delayed.append((complex(element.gm_s), element.delay_s, stamp))
            else:
                G += element.gm_s * stamp
        else:  # pragma: no cover - the Element union is closed
            raise TypeError(f"unknown element {element!r}")

    for node, ohms in (terminations or {}).items():
        if node not in index:
            raise ValueError(f"termination at unknown node {node!r}")
        if ohms == 0:
            raise ValueError(f"termination at {node!r}: 0 Ω is a short, merge the node instead")
        if np.isinf(abs(ohms)):
            continue
        G[index[node], index[node]] += 1.0 / ohms

    labels = (*nodes, *(f"i({ind.name})" for ind in inductors))
    return MnaSystem(labels, G, C, tuple(delayed))


def port_admittance(
    circuit: Circuit, port_nodes: list[str], frequency_hz: np.ndarray
) -> np.ndarray:
    """Y (F, P, P) seen at ``port_nodes`` (each port from its node to ground).

    All other node voltages and inductor currents are eliminated by the Schur complement
    Y = M_pp − M_pr·M_rr⁻¹·M_rp of the MNA matrix at s = j2πf (block Gaussian elimination;
    Golub & Van Loan, Matrix Computations, 4th ed., sec. 3.2). Raises ValueError where M_rr is
    singular (e.g. a capacitively isolated node at 0 Hz).
    """
    if len(set(port_nodes)) != len(port_nodes):
        raise ValueError("port nodes must be distinct")
    system = assemble(circuit)
    index = {label: k for k, label in enumerate(system.labels)}
    missing = [node for node in port_nodes if node not in index or node == GROUND]
    if missing:
        raise ValueError(f"port nodes not in the circuit (or ground): {missing}")
    f = np.asarray(frequency_hz, dtype=float).reshape(-1)
    m = system.matrix(2j * np.pi * f)
    p = np.array([index[node] for node in port_nodes], dtype=int)
    r = np.setdiff1d(np.arange(len(system.labels)), p)
    m_pp = m[:, p[:, None], p[None, :]]
    if r.size == 0:
        return m_pp
    m_pr = m[:, p[:, None], r[None, :]]
    m_rp = m[:, r[:, None], p[None, :]]
    m_rr = m[:, r[:, None], r[None, :]]
    try:
        reduced = np.linalg.solve(m_rr, m_rp)
    except np.linalg.LinAlgError as exc:
        raise ValueError("internal MNA block is singular at some frequency") from exc
    return m_pp - m_pr @ reduced


def natural_frequencies(
    circuit: Circuit, terminations: Mapping[str, complex | float] | None = None
) -> np.ndarray:
    """Finite natural frequencies s (rad/s, complex) with ``terminations`` (Ω, node → ground).

    They are the finite generalized eigenvalues of the pencil det(G + s·C) = 0, computed as
    scipy.linalg.eig(G, −C) in homogeneous form (α, β); eigenvalues with |β| below
    INFINITE_EIGENVALUE_TOLERANCE·|α| (after scaling both matrices to unit norm) are infinite
    and dropped. Sorted by decreasing real part. A delayed VCCS makes det(M(s)) transcendental:
    ValueError.
    """
    system = assemble(circuit, terminations)
    if system.delayed:
        raise ValueError("a delayed VCCS (τ > 0) has no finite set of natural frequencies")
    norm_g = np.linalg.norm(system.G)
    norm_c = np.linalg.norm(system.C)
    if norm_c == 0:
        return np.zeros(0, dtype=complex)
    if norm_g == 0:
        return np.zeros(np.linalg.matrix_rank(system.C), dtype=complex)
    s_scale = norm_g / norm_c
    alpha_beta = scipy.linalg.eig(
        system.G / norm_g, -system.C / norm_c, right=False, homogeneous_eigvals=True
    )
    alpha, beta = alpha_beta[0], alpha_beta[1]
    if np.any((np.abs(alpha) < 1e-12) & (np.abs(beta) < 1e-12)):
        raise ValueError("singular pencil: det(G + sC) vanishes for every s (floating part?)")
    finite = np.abs(beta) > INFINITE_EIGENVALUE_TOLERANCE * np.abs(alpha)
    s = s_scale * alpha[finite] / beta[finite]
    return s[np.lexsort((s.imag, -s.real))]


def normalized_determinant(
    circuit: Circuit,
    frequency_hz: np.ndarray,
    terminations: Mapping[str, complex | float] | None = None,
) -> np.ndarray:
    """NDF(f) = det M(j2πf) / det M₀(j2πf), M₀ with every transconductance set to zero.

    The normalized determinant function of Platzker, Struble & Hetzler (IEEE MTT-S Digest
    1985) evaluated directly on the terminated circuit; computed from log-determinants so that
    large circuits do not overflow. Raises ValueError where M₀ is singular.
    """
    f = np.asarray(frequency_hz, dtype=float).reshape(-1)
    s = 2j * np.pi * f
    sign_on, log_on = np.linalg.slogdet(assemble(circuit, terminations).matrix(s))
    sign_off, log_off = np.linalg.slogdet(assemble(circuit.gain_off(), terminations).matrix(s))
    if np.any(sign_off == 0):
        raise ValueError("the gain-off circuit is singular at some frequency")
    return sign_on / sign_off * np.exp(log_on - log_off)


def natural_mode(
    circuit: Circuit, s: complex, terminations: Mapping[str, complex | float] | None = None
) -> tuple[dict[str, complex], dict[str, complex]]:
    """Right and left null vectors of M(s) at a natural frequency s, as node → weight.

    M(s)·v = 0 gives the mode shape (node voltages); wᴴ·M(s) = 0 tells where a current injection
    excites the mode. Both come from the singular vectors of the smallest singular value and
    are scaled to a largest node entry of 1. A mode is seen from a port only if both weights at
    the port node are non-zero (the residue of M⁻¹ there is ∝ v·wᴴ).
    """
    system = assemble(circuit, terminations)
    u, _, vh = np.linalg.svd(system.matrix(np.array([s]))[0])
    right, left = vh[-1].conj(), u[:, -1]
    nodes = circuit.nodes
    scaled = []
    for vector in (right, left):
        node_part = vector[: len(nodes)]
        scaled.append(
            dict(zip(nodes, node_part / node_part[np.argmax(np.abs(node_part))], strict=True))
        )
    return scaled[0], scaled[1]
