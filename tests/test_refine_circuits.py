"""The refinement circuits' builders (tests/support/refine_cases.py) against closed forms.

Each circuit is built with workers.lumped; its natural frequencies come from scipy.linalg.eig on
the MNA pencil det(G + sC) = 0 — the independent oracle of every refinement test. Here the
builders are checked against the closed-form natural frequencies of a parallel RLC tank
(s² + (G/C)s + 1/(LC) = 0, common practice).
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.support.refine_cases import mode_shape, odd_mode_pair, tank


@pytest.mark.parametrize("ratio", [0.005, -0.005, 0.001])
def test_tank_builder_places_the_pair(ratio):
    # Closed form (parallel RLC, common practice): s = σ ± j√(ω₀² − σ²) with σ = ratio·ω₀.
    case = tank(1e9, ratio)
    w0 = 2 * np.pi * 1e9
    s = case.natural_frequencies()
    assert s.size == 2
    expected = ratio * w0 + 1j * np.sqrt(w0**2 - (ratio * w0) ** 2)
    top = s[np.argmax(s.imag)]
    assert abs(top - expected) <= 1e-9 * w0


def test_odd_mode_pair_has_one_unstable_odd_pair():
    # Symmetry (common practice): the odd mode leaves the combining node at virtual ground, so
    # its eigenvector has v_a = −v_b and v_m = 0; only it grows when g_net < 0.
    case = odd_mode_pair()
    unstable = case.unstable()
    assert unstable.size == 1
    shape = mode_shape(case, unstable[0])
    assert shape["a"] == pytest.approx(1.0, rel=1e-6)
    assert shape["b"] == pytest.approx(1.0, rel=1e-6)
    assert shape["m"] < 1e-6
