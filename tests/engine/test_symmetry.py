"""workers.engine.symmetry: odd, even or single modes, and the node pairs a mode drives apart.

Oracles: the mode vectors of the lumped circuit (``workers.lumped.mna.natural_mode``: the null
vector of the MNA matrix at the natural frequency from scipy.linalg.eig), whose like nodes of a
paralleled pair swing against each other in an odd mode (v_a = −v_b, the plane of symmetry a
virtual ground) and together in an even one (v_a = v_b) — the even/odd-mode decomposition of a
symmetric network (common practice); and small hand-made voltage shapes whose phase relations
are known by construction.
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.support.sweeps import SweepCircuit, request_at
from workers.engine import run_check
from workers.engine.request import Device
from workers.engine.symmetry import mode_symmetry, opposed_pairs
from workers.lumped.families import combined_power_stage, two_stage_lna
from workers.lumped.mna import natural_mode

WIDE_HZ = np.geomspace(1e6, 1e11, 801)


def _verdict(case):
    return run_check(request_at(SweepCircuit(case.name, case.name, case, 1e10, WIDE_HZ, WIDE_HZ),
                                WIDE_HZ))


@pytest.mark.parametrize("odd_mode_ohm", [None, 20.0, 1000.0])
def test_pair_modes_are_labelled_as_their_eig_mode_vectors_swing(odd_mode_ohm):
    case = combined_power_stage(odd_mode_ohm=odd_mode_ohm)
    verdict = _verdict(case)
    poles = case.natural_frequencies()
    labels = []
    for entry in verdict.margin.least_damped:
        s = complex(entry.growth_rate_per_s, 2 * np.pi * entry.frequency_hz)
        right, _ = natural_mode(case.circuit, poles[np.argmin(np.abs(poles - s))],
                                case.terminations)
        ratio = right["d_a"] / right["d_b"]
        expected = "odd" if ratio == pytest.approx(-1, abs=1e-3) else \
            "even" if ratio == pytest.approx(1, abs=1e-3) else "single"
        assert entry.symmetry == expected
        labels.append(entry.symmetry)
    assert "odd" in labels and "even" in labels
    for mode in verdict.modes:  # an unstable mode of the pair is its odd mode
        assert mode.symmetry == "odd"


def test_a_mode_of_one_device_is_single():
    verdict = _verdict(two_stage_lna(gate_return_damping_ohm=None))
    assert verdict.modes and all(m.symmetry == "single" for m in verdict.modes)


def _device(name: str, gate: int, drain: int) -> Device:
    return Device(name, np.ones(3, dtype=complex), (gate, None), (drain, None))


@pytest.mark.parametrize(("phasor", "participation", "expected"), [
    # gates 0, 2 and drains 1, 3 of two devices
    ([0.2, 1.0, -0.2, -1.0], [1.0, 1.0], "odd"),
    ([0.2j, 1.0, 0.2j, 1.0], [1.0, 0.95], "even"),
    ([0.2, 1.0, -0.2, -1.0], [1.0, 0.3], "single"),     # one device carries it
    ([0.2, 1.0, 0.2j, 1.0j], [1.0, 1.0], "single"),     # quadrature: neither
])
def test_labels_follow_the_phases_of_like_terminals(phasor, participation, expected):
    devices = (_device("A", 0, 1), _device("B", 2, 3))
    assert mode_symmetry(np.array(phasor, dtype=complex), np.array(participation),
                         devices) == expected


def test_opposed_pairs_are_the_nodes_driven_against_each_other_largest_swing_first():
    # opposed (cos Δφ <= −0.5, both >= 0.2): (0,1) |Δv| = 1.9, (1,4) 1.7, (0,3) 1.455,
    # (1,2) 1.4, (3,4) 1.258, (2,3) 0.966 (|0.5 − 0.5∠150°| = sin 75°); node 5 swings too little
    phasor = np.array([1.0, -0.9, 0.5, 0.5 * np.exp(1j * np.radians(150)), 0.8, -0.1])
    assert opposed_pairs(phasor, list(range(6)), limit=3) == [(0, 1), (1, 4), (0, 3)]
    assert opposed_pairs(phasor, [0, 2, 3, 5], limit=3) == [(0, 3), (2, 3)]
