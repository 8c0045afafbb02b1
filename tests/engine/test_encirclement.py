"""workers.engine.encirclement: clockwise encirclements with the band edges closed.

Oracle: the argument principle (N = Z − P, common practice) on factored rational functions whose
right-half-plane zeros are known (``tests.support.closed_forms``); their poles are all in the
left half-plane, so N = Z, a complex pair counting 2 and a real zero 1.
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.support.closed_forms import rational
from workers.engine.edges import judge_high_edge, judge_low_edge
from workers.engine.encirclement import count_encirclements

TWO_PI = 2 * np.pi
POLES = [TWO_PI * (-0.3e9 + 0.9e9j), TWO_PI * (-1e9 + 4e9j)]
CASES = {
    # name: (complex zeros, real zeros, real poles, right-half-plane zeros Z)
    "none": ([TWO_PI * (-0.1e9 + 1.2e9j), TWO_PI * (-0.4e9 + 3e9j)], [], [], 0),
    "one pair": ([TWO_PI * (+0.05e9 + 1.2e9j), TWO_PI * (-0.4e9 + 3e9j)], [], [], 2),
    "two pairs": ([TWO_PI * (+0.05e9 + 1.2e9j), TWO_PI * (+0.2e9 + 3e9j)], [], [], 4),
    "real zero": ([TWO_PI * (-0.1e9 + 1.2e9j), TWO_PI * (-0.4e9 + 3e9j)], [TWO_PI * 0.5e9],
                  [-TWO_PI * 0.7e9], 1),
    "pair and real": ([TWO_PI * (+0.05e9 + 1.2e9j), TWO_PI * (-0.4e9 + 3e9j)],
                      [TWO_PI * 0.5e9], [-TWO_PI * 0.7e9], 3),
}


def _h(f, case):
    zeros, real_zeros, real_poles, _ = CASES[case]
    return rational(TWO_PI * 1j * f, zeros, POLES, real_zeros, real_poles)


@pytest.mark.parametrize("case", list(CASES))
def test_closed_count_equals_the_right_half_plane_zeros(case):
    f = np.geomspace(1e6, 1e12, 1201)
    h = _h(f, case)
    low, high = judge_low_edge(f, h), judge_high_edge(f, h)
    assert low.settled and high.settled
    count = count_encirclements(f, h, None, low.closure_rad, high.closure_rad)
    assert count.clockwise == CASES[case][3]
    assert count.residual < 1e-9  # closed ends lie on the real axis by construction


@pytest.mark.parametrize("case", list(CASES))
def test_closures_carry_an_edge_that_is_off_the_real_axis(case):
    # start the band where arg H is well away from 0 and π, still on the DC asymptote: the
    # closure along the asymptote accounts for the stretch [0, f_low] that snapping cannot
    f = np.geomspace(2e7, 1e12, 1201)
    h = _h(f, case)
    low, high = judge_low_edge(f, h), judge_high_edge(f, h)
    assert low.settled and high.settled
    closed = count_encirclements(f, h, None, low.closure_rad, high.closure_rad)
    assert closed.clockwise == CASES[case][3]


def test_an_open_edge_is_snapped_and_its_residual_reported():
    f = np.geomspace(1e6, 1e12, 1201)
    h = _h(f, "one pair") * np.exp(1j * 0.3)  # both ends 0.3 rad off the real axis
    snapped = count_encirclements(f, h)
    assert snapped.clockwise == 2
    # both ends turned alike: the closed change is still 2 half-turns, off only by how far H
    # itself still is from the real axis at the band's ends (below 1e-3 half-turns here)
    assert snapped.residual < 1e-3
