"""workers.engine.modes: mode estimates from the samples alone.

Oracles: a closed-form rational (``tests.support.closed_forms``) with one growing pair — NDF turns
fastest clockwise at its frequency (argument of jω − z, common practice); Kurokawa points given
directly; |Z_kk| peaking at a known resonance.
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.support.closed_forms import rational
from workers.engine.modes import nearest_crossing, node_participation, phase_drop_frequencies
from workers.engine.nodes import KurokawaCrossing

TWO_PI = 2 * np.pi


def test_the_fastest_clockwise_turn_is_at_the_growing_pair():
    f = np.geomspace(1e8, 1e11, 2001)
    h = rational(TWO_PI * 1j * f, [TWO_PI * (+5e6 + 1.3e9j), TWO_PI * (-1e9 + 5e9j)],
                 [TWO_PI * (-0.4e9 + 1e9j), TWO_PI * (-2e9 + 4e9j)])
    (found,) = phase_drop_frequencies(f, h, 1)
    assert found == pytest.approx(1.3e9, rel=0.01)
    assert phase_drop_frequencies(f, h, 0) == []


def test_the_nearest_kurokawa_point_within_the_ratio_is_taken():
    points = [KurokawaCrossing(0, 1.0e9, -1e-3, 1e-12),
              KurokawaCrossing(1, 1.5e9, -2e-3, 1e-12)]
    assert nearest_crossing(1.1e9, points).frequency_hz == 1.0e9
    assert nearest_crossing(3e9, points) is None  # beyond 1.25x of both


def test_node_participation_peaks_where_the_impedance_peaks():
    f = np.geomspace(1e8, 1e10, 501)
    s = TWO_PI * 1j * f
    w0 = TWO_PI * 1e9
    peaked = 1 / (1 / 50 + s * 1e-12 + w0**2 * 1e-12 / s)  # parallel RLC at 1 GHz, 50 Ω
    flat = np.full(f.size, 10.0 + 0j)
    weights = node_participation(f, np.stack([flat, peaked], axis=1), 1e9)
    assert weights[1] == 1.0 and weights[0] < weights[1]
