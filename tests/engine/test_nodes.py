"""workers.engine.nodes: driving-point admittances Y_k = 1/(Y⁻¹)_kk and Kurokawa points.

Oracles: the series/parallel closed forms of small lumped circuits (port data from the MNA
simulator, workers.lumped), Kurokawa's start condition on a parallel tank whose negative
conductance is known (K. Kurokawa, "Some basic characteristics of broadband negative resistance
oscillator circuits", Bell Syst. Tech. J. 48(6), 1969: Im Y = 0 with dIm Y/dω > 0 and Re Y ≤ 0),
and admittances written directly from a closed form, where the crossing is known exactly.
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.support.circuits import C_F, L_H, R_OHM, negative_conductance_tank
from workers.engine.conversions import Solved, batched_inv
from workers.engine.nodes import kurokawa_crossings, node_analysis
from workers.lumped import Capacitor, Circuit, Inductor, Resistor
from workers.lumped import port_admittance as lumped_port_admittance


def rc_rl_divider() -> Circuit:
    """Node a: C_a to ground; a —R— b; node b: L to ground (invented values)."""
    return Circuit((
        Capacitor("Ca", "a", "0", 1.5e-12),
        Resistor("R", "a", "b", 40.0),
        Inductor("L", "b", "0", 3e-9),
    ))


def test_driving_point_admittance_of_each_node_is_the_closed_form():
    # Each node driven with the other open (no current injected there): series and parallel
    # combination of the elements (common practice).
    #   Y_a = jωC_a + 1/(R + jωL),   Y_b = 1/(jωL) + 1/(R + 1/(jωC_a)).
    f = np.geomspace(1e7, 1e11, 200)
    w = 2 * np.pi * f
    y = lumped_port_admittance(rc_rl_divider(), ["a", "b"], f)
    result = node_analysis(f, batched_inv(y))
    expected_a = 1j * w * 1.5e-12 + 1 / (40.0 + 1j * w * 3e-9)
    expected_b = 1 / (1j * w * 3e-9) + 1 / (40.0 + 1 / (1j * w * 1.5e-12))
    np.testing.assert_allclose(result.admittance[:, 0], expected_a, rtol=1e-10)
    np.testing.assert_allclose(result.admittance[:, 1], expected_b, rtol=1e-10)
    np.testing.assert_allclose(result.impedance, 1 / result.admittance, rtol=1e-12)
    assert not result.singular.any()


# ---------------------------------------------------------------- Kurokawa on the tank

F0_HZ = 1 / (2 * np.pi * np.sqrt(L_H * C_F))  # Im Y = ωC − 1/ωL = 0 there (closed form)


def tank_nodes(gm_s: float, f: np.ndarray):
    y = lumped_port_admittance(negative_conductance_tank(gm_s), ["a"], f)
    return node_analysis(f, batched_inv(y))


@pytest.mark.parametrize("gm_s", [-0.012, -0.0105, -0.03])
def test_tank_with_negative_net_conductance_has_one_kurokawa_point(gm_s):
    # Y_a = G + j(ωC − 1/ωL), G = 1/R + gm < 0: one upward zero of Im Y at ω₀ = 1/√(LC) with
    # Re Y = G, dIm Y/dω = 2C at ω₀, and Kurokawa's first-order growth −G/2C, which is the closed
    # form Re s of the tank's natural frequencies. The engine interpolates Im Y linearly between
    # samples f1 < f0 < f2: the secant slope is within ln(f2/f1)/2 of the tangent (relative) and
    # the zero within ln(f2/f1)² of f0.
    f = np.geomspace(1e9, 2e10, 301)
    result = tank_nodes(gm_s, f)
    g_net = 1 / R_OHM + gm_s
    assert len(result.crossings) == 1
    c = result.crossings[0]
    step = np.log(f[1] / f[0])
    assert c.node == 0
    assert c.frequency_hz == pytest.approx(F0_HZ, rel=step**2)
    assert c.re_admittance_s == pytest.approx(g_net, rel=1e-9)
    assert c.im_slope_s_per_hz == pytest.approx(2 * C_F * 2 * np.pi, rel=step / 2)
    assert c.growth_estimate_per_s == pytest.approx(-g_net / (2 * C_F), rel=step / 2)


@pytest.mark.parametrize("gm_s", [-0.008, 0.0, 0.01])
def test_tank_with_positive_net_conductance_has_none(gm_s):
    # Re Y = G > 0 at the zero of Im Y: Kurokawa's condition fails (a damped tank).
    result = tank_nodes(gm_s, np.geomspace(1e9, 2e10, 301))
    assert result.crossings == ()
    assert np.all(result.admittance.real > 0)


# ---------------------------------------------------------------- crossings written in closed form


def crossings_of(frequency_hz: np.ndarray, admittance: np.ndarray):
    admittance = np.asarray(admittance, dtype=complex).reshape(frequency_hz.size, -1)
    return kurokawa_crossings(frequency_hz, admittance, 1 / admittance)


def test_linear_im_y_gives_the_exact_crossing():
    # Y = G + j·a·(f − f0) is linear in f, so linear interpolation is exact: the crossing is f0,
    # Re Y = G, slope a per Hz, and σ = −G/(a/2π) (Kurokawa's first order, closed form).
    f = np.linspace(1e9, 2e9, 11)
    g, a, f0 = -2e-3, 3e-11, 1.234e9
    (c,) = crossings_of(f, g + 1j * a * (f - f0))
    assert c.frequency_hz == pytest.approx(f0, rel=1e-14)
    assert c.re_admittance_s == pytest.approx(g, rel=1e-12)
    assert c.im_slope_s_per_hz == pytest.approx(a, rel=1e-12)
    assert c.growth_estimate_per_s == pytest.approx(-g * 2 * np.pi / a, rel=1e-12)


def test_downward_zero_of_im_y_is_no_start_point():
    # A series R, L, C with R < 0: Y = 1/(R + j(ωL − 1/ωC)) has Im Y falling through 0 at
    # resonance (dIm Y/dω < 0), so Kurokawa's admittance condition does not hold there (common
    # practice: a series circuit is judged on Z instead).
    f = np.geomspace(1e9, 1e10, 400)
    w = 2 * np.pi * f
    y = 1 / (-5.0 + 1j * (w * 2e-9 - 1 / (w * 1e-12)))
    assert np.any(np.diff(np.sign(y.imag)) < 0)  # the zero is there, falling
    assert crossings_of(f, y) == []


def test_pole_of_y_is_no_zero_of_im_y():
    # Z = r + jX with r < 0 and X falling through 0: Y = 1/Z jumps from −j∞ to +j∞ with
    # Re Y < 0 — an upward sign change of Im Y at a pole of Y (Z passes near the origin), not a
    # zero of Im Y.
    f = np.linspace(1e9, 2e9, 101)
    x = -500.0 * (f - 1.505e9) / 1e9
    z = -1e-3 + 1j * x
    y = 1 / z
    assert np.all(y.real < 0)
    assert np.any((y.imag[:-1] < 0) & (y.imag[1:] >= 0))  # the upward sign change is there
    assert kurokawa_crossings(f, y[:, None], z[:, None]) == []


def test_every_node_is_searched_at_once():
    # Two nodes with linear Im Y crossing at different frequencies; the second has Re Y > 0.
    f = np.linspace(1e9, 2e9, 21)
    y = np.stack([-1e-3 + 1j * 1e-11 * (f - 1.3e9), 1e-3 + 1j * 1e-11 * (f - 1.6e9),
                  -1e-3 + 1j * 2e-11 * (f - 1.8e9)], axis=1)
    found = crossings_of(f, y)
    assert [(c.node, round(c.frequency_hz / 1e6, 6)) for c in found] == [(0, 1300.0), (2, 1800.0)]


def test_singular_points_pass_through():
    # A frequency where Y_on had no inverse stays flagged, and its NaN admittance finds nothing.
    f = np.array([1e9, 2e9, 3e9, 4e9])
    values = np.full((4, 1, 1), 50.0 + 0j)
    values[2] = np.nan
    result = node_analysis(f, Solved(values, np.array([False, False, True, False])))
    assert result.singular.tolist() == [False, False, True, False]
    assert np.isnan(result.admittance[2, 0])
    np.testing.assert_allclose(result.admittance[[0, 1, 3], 0], 1 / 50.0)
    assert result.crossings == ()
