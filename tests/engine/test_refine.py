"""workers.engine.refine: suspect intervals and the contour refined with the model.

Oracles: closed-form rationals (``tests.support.closed_forms``): the argument principle gives the
count the refined contour must reach, and the real-axis crossings of H(jω) are the roots of
Im H(jω), found here with ``scipy.optimize.brentq`` on the closed form itself.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import brentq

from tests.support.closed_forms import rational
from workers.engine.edges import judge_high_edge, judge_low_edge
from workers.engine.models import fit_response
from workers.engine.refine import refine_contour, suspect_intervals

TWO_PI = 2 * np.pi
ZEROS = [TWO_PI * (+2e6 + 1.0e9j), TWO_PI * (-0.5e9 + 4e9j)]   # a sharp growing pair at 1 GHz
POLES = [TWO_PI * (-0.3e9 + 0.8e9j), TWO_PI * (-1e9 + 3e9j)]
COARSE = np.geomspace(1e6, 1e12, 241)


def h_of(f):
    return rational(TWO_PI * 1j * np.asarray(f, dtype=float), ZEROS, POLES)


def test_a_step_too_large_between_samples_is_suspect():
    h = h_of(COARSE)
    found = suspect_intervals(COARSE, h, 45.0)
    i = np.searchsorted(COARSE, 1e9)
    around = [s for s in found if s.low_hz <= COARSE[i - 1] and s.high_hz >= COARSE[i]]
    assert around and "phase_step" in around[0].reasons


def test_kurokawa_sign_changes_and_factor_crossings_are_suspect():
    f = np.linspace(1e9, 2e9, 11)
    admittance = (np.linspace(-1, 1, 11) * 1j - 0.01)[:, None]  # Im Y rises through 0, Re Y < 0
    k = np.linspace(0.5, 1.5, 11)
    found = suspect_intervals(f, np.ones(11, complex), 45.0, f, admittance, f, k, None)
    reasons = {r for s in found for r in s.reasons}
    assert {"kurokawa_sign_change", "k_crossing"} <= reasons
    # the crossings lie between samples 5 and 6 (Im Y = 0 at 1.5 GHz, K = 1 at 1.5 GHz)
    assert all(s.low_hz <= 1.5e9 <= s.high_hz for s in found)


def test_the_refined_count_is_the_argument_principle_count():
    h = h_of(COARSE)
    model = fit_response(COARSE, h)
    low, high = judge_low_edge(COARSE, h), judge_high_edge(COARSE, h)
    intervals = suspect_intervals(COARSE, h, 45.0)
    refined = refine_contour(COARSE, h, model, intervals, 45.0,
                             closures=(low.closure_rad, high.closure_rad))
    assert refined.count.clockwise == 2  # Z − P = 2 − 0
    assert refined.settled and refined.points_added > 0
    assert refined.count.max_phase_step_deg <= 22.5


def test_real_axis_crossings_are_the_roots_of_im_h():
    h = h_of(COARSE)
    model = fit_response(COARSE, h)
    refined = refine_contour(COARSE, h, model, suspect_intervals(COARSE, h, 45.0), 45.0)
    assert refined.crossings
    for crossing in refined.crossings:
        f0 = crossing.frequency_hz
        grid = refined.frequency_hz
        i = np.searchsorted(grid, f0)
        lo, hi = grid[max(i - 1, 0)], grid[min(i + 1, grid.size - 1)]
        root = brentq(lambda x: float(h_of(np.array([x]))[0].imag), lo, hi, xtol=1e-3)
        assert f0 == pytest.approx(root, rel=1e-9)
        assert crossing.ndf_re == pytest.approx(float(h_of(np.array([root]))[0].real), rel=1e-6)
