"""How a mode drives a balanced pair of devices (odd, even or single), and which node pairs it
drives in opposite phase.

A mode's voltage shape v (a column of the rank-one residue of Z at its natural frequency,
``identify.mode_shape``) is complex, and its phases say how the nodes swing against each other.
Two devices that carry a mode about equally (participation |gm ∂s/∂gm| each at least
``BALANCE`` of the largest) form a balanced pair. In a circuit with a mirror symmetry every
natural frequency is either even (like nodes of the two halves swing together, v_a = v_b) or odd
(they swing against each other, v_a = −v_b, and the plane of symmetry is a virtual ground): the
even/odd-mode decomposition of a symmetric network (common practice; e.g. Pozar, *Microwave
Engineering*, 4th ed., sec. 7.3, the Wilkinson divider; section from memory). So the like
pair (control with control, output with output) tell the two apart by the cosine of their phase
difference, weighted by their swing. A mode that no pair carries equally is ``single``.
"""

from __future__ import annotations

import itertools

import numpy as np

from workers.engine.request import Device
from workers.engine.verdict import Symmetry

BALANCE = 0.8        # both devices of a balanced pair carry at least this share of the mode
VISIBLE = 0.05       # like terminals that swing less than this (largest node 1) do not vote
PHASE_COSINE = 0.5   # weighted cos(Δφ) at most −this: odd; at least this: even
OPPOSED_SHARE = 0.2  # a node pair the mode drives in opposite phase: both swing this much ...
OPPOSED_COSINE = -0.5  # ... and cos(Δφ) is at most this (more than 120° apart)


def _cosine(a: complex, b: complex) -> float:
    return float((a * np.conj(b)).real / (abs(a) * abs(b)))


def mode_symmetry(phasor: np.ndarray, participation: np.ndarray,
                  devices: tuple[Device, ...]) -> Symmetry:
    """``odd``, ``even`` or ``single`` for the voltage shape ``phasor`` (N,) of a mode whose
    device participation (D,, largest 1) is ``participation`` (module docstring)."""
    share = np.where(np.isfinite(participation), participation, 0.0)
    pairs = sorted(itertools.combinations(range(len(devices)), 2),
                   key=lambda ab: -min(share[ab[0]], share[ab[1]]))
    for a, b in pairs:
        if min(share[a], share[b]) < BALANCE:
            break
        terminals = zip((*devices[a].control, *devices[a].output),
                        (*devices[b].control, *devices[b].output), strict=True)
        votes, weights = [], []
        for i, j in terminals:
            if i is None or j is None or i == j:
                continue
            vi, vj = complex(phasor[i]), complex(phasor[j])
            if min(abs(vi), abs(vj)) < VISIBLE:
                continue
            votes.append(_cosine(vi, vj))
            weights.append(abs(vi) * abs(vj))
        if not votes:
            continue
        cosine = float(np.average(votes, weights=weights))
        if cosine <= -PHASE_COSINE:
            return "odd"
        if cosine >= PHASE_COSINE:
            return "even"
    return "single"


def opposed_pairs(phasor: np.ndarray, nodes: list[int], limit: int) -> list[tuple[int, int]]:
    """Pairs of ``nodes`` the mode drives in opposite phase (both swinging at least
    ``OPPOSED_SHARE``, more than 120° apart), largest differential swing |v_i − v_j| first; at
    most ``limit``. A resistor between such a pair carries the mode's current and damps it."""
    found = []
    for i, j in itertools.combinations(nodes, 2):
        vi, vj = complex(phasor[i]), complex(phasor[j])
        if min(abs(vi), abs(vj)) >= OPPOSED_SHARE and _cosine(vi, vj) <= OPPOSED_COSINE:
            found.append((abs(vi - vj), i, j))
    found.sort(key=lambda t: -t[0])
    return [(i, j) for _, i, j in found[:limit]]
