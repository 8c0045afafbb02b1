"""The engine on circuits whose NDF, natural frequencies and Kurokawa points have closed forms.

Port data comes from the lumped MNA simulator (workers.lumped); every expected value below is a
formula, not a number read off the engine.
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.support.circuits import (
    C_F,
    C_LADDER,
    EPS,
    L_H,
    R_LADDER,
    R_OHM,
    critical_gain,
    ladder_denominator,
    tank_natural_frequencies,
)
from tests.support.requests import phase_shift_request, tank_request
from workers.engine import analyse, run_check

# ------------------------------------------------------------------------------------------
# Parallel RLC with a negative conductance (a transconductance from the node to itself)
# ------------------------------------------------------------------------------------------

TANK_CASES = [  # (gm of the device, expected right-half-plane count)
    pytest.param(-0.012, 2, id="net -2 mS: growing pair"),
    pytest.param(-0.0105, 2, id="net -0.5 mS: slowly growing pair"),
    pytest.param(-0.008, 0, id="net +2 mS: damped pair"),
    pytest.param(-0.002, 0, id="net +8 mS: well damped"),
]


@pytest.mark.parametrize(("gm_s", "expected_count"), TANK_CASES)
def test_tank_ndf_equals_closed_form(gm_s, expected_count):
    # Closed form: with one node, NDF = Y_on/Y_off = (G + sC + 1/sL)/(1/R + sC + 1/sL),
    # G = 1/R + gm (parallel admittances add; common practice).
    request = tank_request(gm_s)
    s = 2j * np.pi * request.frequency_hz
    expected = (1 / R_OHM + gm_s + s * C_F + 1 / (s * L_H)) / (1 / R_OHM + s * C_F + 1 / (s * L_H))
    np.testing.assert_allclose(analyse(request).loops.ndf, expected, rtol=1e-9)


@pytest.mark.parametrize(("gm_s", "expected_count"), TANK_CASES)
def test_tank_count_is_right_half_plane_pair(gm_s, expected_count):
    # Closed form: the pair −G/2C ± jω_d lies in the right half-plane exactly when the net
    # conductance G = 1/R + gm is negative (tests.support.circuits.tank_natural_frequencies).
    assert int(np.sum(tank_natural_frequencies(1 / R_OHM + gm_s).real > 0)) == expected_count
    verdict = run_check(tank_request(gm_s))
    assert verdict.unstable_count == expected_count
    assert verdict.verdict == ("unstable" if expected_count else "stable")


@pytest.mark.parametrize(("gm_s", "expected_count"), TANK_CASES)
def test_tank_kurokawa_crossing(gm_s, expected_count):
    # Closed form: Y_a(ω) = G + j(ωC − 1/ωL): Im Y_a = 0 at ω0 = 1/√(LC) with dIm Y/dω = 2C > 0
    # and Re Y = G there (Kurokawa, Bell Syst. Tech. J. 48(6), 1969: a start point when G ≤ 0);
    # his first-order growth rate −Re Y/(dIm Y/dω) = −G/2C is the closed-form Re s.
    request = tank_request(gm_s)
    g_net = 1 / R_OHM + gm_s
    f0 = 1 / (2 * np.pi * np.sqrt(L_H * C_F))
    crossings = analyse(request).nodes.crossings
    if g_net > 0:
        assert crossings == ()
        return
    assert len(crossings) == 1
    c = crossings[0]
    # Im Y is interpolated linearly between the samples f1 < f0 < f2: the secant slope of
    # ωC − 1/ωL is C + 1/(ω1ω2L), within ln(f2/f1)/2 of the tangent 2C (relative); the
    # interpolated zero is within O(ln(f2/f1)²) of f0.
    f = request.frequency_hz
    i = int(np.searchsorted(f, f0))
    step = np.log(f[i] / f[i - 1])
    assert c.frequency_hz == pytest.approx(f0, rel=step**2)
    assert c.re_admittance_s == pytest.approx(g_net, rel=1e-9)
    assert c.im_slope_s_per_hz == pytest.approx(2 * C_F * 2 * np.pi, rel=step / 2)
    assert c.growth_estimate_per_s == pytest.approx(-g_net / (2 * C_F), rel=step / 2)


# ------------------------------------------------------------------------------------------
# Phase-shift oscillator: inverting gain −A driving three RC sections (series R, shunt C)
# ------------------------------------------------------------------------------------------


def test_critical_gain_is_textbook_value_at_zero_load():
    # Sedra & Smith (from memory): A = 29 for the unloaded ladder; the formula must reproduce it.
    assert critical_gain(0.0) == pytest.approx(29.0, abs=1e-12)
    assert critical_gain(EPS) - 29 == pytest.approx(9 * EPS, rel=1e-2)


@pytest.mark.parametrize("gain", [10.0, 28.0, 30.0, 60.0])
def test_phase_shift_ndf_equals_one_plus_loop_gain(gain):
    # Closed form: one device, so NDF = 1 + T with T = A / d(x) (matrix determinant lemma; the
    # return ratio of the gain stage is A times the ladder's transfer v_3/v_x,open).
    request = phase_shift_request(gain)
    x = 2j * np.pi * request.frequency_hz * R_LADDER * C_LADDER
    expected = 1 + gain / ladder_denominator(x, EPS)
    np.testing.assert_allclose(analyse(request).loops.ndf, expected, rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize(
    ("offset", "expected_count"),
    [(-19.0, 0), (-1.0, 0), (-0.2, 0), (0.2, 2), (1.0, 2), (31.0, 2)],
)
def test_phase_shift_encirclements_below_and_above_critical_gain(offset, expected_count):
    # 0 encirclements below the critical gain, 2 (one growing pair) above (Routh–Hurwitz on the
    # cubic above: two sign changes in the first column when A exceeds the critical gain).
    verdict = run_check(phase_shift_request(critical_gain(EPS) + offset))
    assert verdict.verdict == ("unstable" if expected_count else "stable")
    assert verdict.unstable_count == expected_count


def test_phase_shift_mode_frequency_near_sqrt6_over_rc():
    # Just above the critical gain the growing pair sits at ω ≈ √6/RC (Sedra & Smith, from
    # memory); the engine's sample estimate of the mode frequency must be within 5 %.
    verdict = run_check(phase_shift_request(critical_gain(EPS) + 0.5))
    assert len(verdict.modes) == 1
    f0 = np.sqrt(6) / (2 * np.pi * R_LADDER * C_LADDER)
    assert verdict.modes[0].frequency_hz == pytest.approx(f0, rel=0.05)
