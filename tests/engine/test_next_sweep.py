"""workers.engine.next_sweep: what to sweep next, on closed-form NDFs and generated circuits.

Oracles: closed-form NDFs with known right-half-plane zeros (``tests.support.closed_forms``) and
the eig truth of generated circuits (``tests.support.sweeps``): the band asked for must cover the
natural frequency the band missed.
"""

from __future__ import annotations

import numpy as np

from tests.support.closed_forms import ndf_request, rational
from tests.support.sweeps import generated
from workers.engine import run_check
from workers.engine.next_sweep import MAX_POINTS

TWO_PI = 2 * np.pi
POLES = [TWO_PI * (-0.3e9 + 0.9e9j), TWO_PI * (-2e9 + 6e9j)]
DAMPED = [TWO_PI * (-0.2e9 + 3e9j), TWO_PI * (-1e9 + 8e9j)]  # as many zeros as poles: H → 1


def test_a_final_verdict_has_no_next_sweep():
    f = np.geomspace(1e6, 1e12, 1201)
    v = run_check(ndf_request(rational(TWO_PI * 1j * f, DAMPED, POLES), f))
    assert v.count_complete and v.next_sweep is None


def test_a_declared_fmax_above_the_band_is_where_the_band_should_stop():
    f = np.linspace(300e6, 8e9, 301)
    h = rational(TWO_PI * 1j * f, DAMPED, POLES)
    v = run_check(ndf_request(h, f, fmax_hz=20e9))
    assert v.next_sweep.band_hz[1] == 20e9


def test_a_low_band_start_is_taken_down_past_the_oscillation_it_misses():
    # a bias-feed oscillation near 145 MHz (eig) and a band starting 3-30x above it
    circuit = next(c for c in (generated("lna", s) for s in range(40)) if c.rhp_count)
    f_osc = abs(circuit.unstable[0]) / (2 * np.pi)
    from tests.support.sweeps import request_at

    for ratio in (3.0, 10.0, 30.0):
        f = np.geomspace(ratio * f_osc, 30e9, 301)
        v = run_check(request_at(circuit, f))
        assert v.verdict != "stable"
        assert v.next_sweep.band_hz[0] <= f_osc <= v.next_sweep.band_hz[1]
        assert len(v.next_sweep.frequencies_hz) <= MAX_POINTS
        assert set(v.next_sweep.frequencies_hz).isdisjoint(f.tolist())


def test_a_band_stopping_below_an_oscillation_is_taken_up_past_it():
    circuit = next(c for c in (generated("compact_pair", s) for s in range(20)) if c.rhp_count)
    f_osc = abs(circuit.unstable[0]) / (2 * np.pi)
    from tests.support.sweeps import request_at

    for ratio in (1.5, 3.0):
        f = np.geomspace(1e6, f_osc / ratio, 401)
        v = run_check(request_at(circuit, f))
        assert v.verdict != "stable"
        assert v.next_sweep.band_hz[1] >= f_osc
