"""workers.engine.edges: band edges judged by their physics, on closed-form NDFs.

Oracles: the factored rational H(s) of ``tests.support.closed_forms`` — its DC value
H(0) = Π z z̄ / Π p p̄, its value and phase at every sample, and its asymptotes (H → H(0) with
Im H ∝ ω near DC; H − 1 ∝ 1/s at the top when one more pole than zero sits in H − 1; common
practice for rational functions).
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.support.closed_forms import rational
from workers.engine.edges import (
    DC_SHAPE_TOLERANCE,
    TOP_SHARE_LIMIT,
    judge_high_edge,
    judge_low_edge,
)

TWO_PI = 2 * np.pi
# a stable response with its features near 1 GHz: zeros and poles in the left half-plane
ZEROS = [TWO_PI * (-0.2e9 + 1.1e9j)]
POLES = [TWO_PI * (-0.3e9 + 0.9e9j)]


def h_at(f: np.ndarray, zeros=ZEROS, poles=POLES, **kw) -> np.ndarray:
    return rational(TWO_PI * 1j * np.asarray(f, dtype=float), zeros, poles, **kw)


def test_dc_end_far_below_every_feature_is_on_its_asymptote():
    f = np.geomspace(1e6, 1e11, 501)
    h = h_at(f)
    judged = judge_low_edge(f, h)
    dc = float((h_at(np.array([0.0]))[0]).real)  # closed form H(0)
    assert judged.settled and judged.basis == "dc_asymptote"
    assert judged.dc_value == pytest.approx(dc, rel=1e-4)  # Re H − H(0) ∝ f² at 1 MHz
    # the closing phase is the angle of H(f_low) seen from the real H(0): arg(H(f0) / H(0))
    assert judged.closure_rad == pytest.approx(np.angle(h[0] / dc), abs=1e-9)
    assert judged.spread < DC_SHAPE_TOLERANCE


def test_dc_end_that_is_not_real_one_is_still_settled():
    # bias loops act at DC: H(0) far from 1 (here 0.12), yet the asymptote is there
    zeros = [TWO_PI * (-0.05e9 + 0.3e9j)]
    f = np.geomspace(1e6, 1e11, 501)
    h = h_at(f, zeros=zeros)
    assert abs(h[0] - 1) > 0.5
    assert judge_low_edge(f, h).settled


@pytest.mark.parametrize("start_hz", [0.5e9, 2e9, 5e9])
def test_a_band_that_starts_near_or_above_a_resonance_is_open(start_hz):
    f = np.geomspace(start_hz, 1e11, 401)
    judged = judge_low_edge(f, h_at(f))
    assert not judged.settled and judged.basis == "open" and judged.closure_rad == 0.0


def test_a_small_share_falling_towards_dc_is_not_enough():
    # the false stable of the issue: a growing pair at 115 MHz (zeros in the right half-plane),
    # the band starting 17x above it, where |H − 1| is small and falls towards DC
    zeros = [TWO_PI * (+5e6 + 115e6j)]
    poles = [TWO_PI * (-12e6 + 118e6j)]
    f = np.geomspace(17 * 115e6, 1e11, 401)
    h = h_at(f, zeros=zeros, poles=poles)
    share = np.abs(h - 1)
    assert share[0] < 0.1 and share[1] < share[0] * 1.01  # small and not growing to DC
    assert not judge_low_edge(f, h).settled


def test_a_band_that_includes_dc_is_settled():
    f = np.concatenate([[0.0], np.geomspace(1e8, 1e11, 300)])
    judged = judge_low_edge(f, h_at(f))
    assert judged.settled and judged.basis == "includes_dc"


def test_a_response_heading_for_the_origin_at_dc_asks_for_dc_itself():
    # H(s) = s/(s + a): a zero at s = 0, so H(0) = 0 and no asymptote can close the contour
    f = np.geomspace(1e6, 1e11, 501)
    s = TWO_PI * 1j * f
    a = TWO_PI * 1e9
    judged = judge_low_edge(f, s / (s + a))
    assert not judged.settled and judged.needs_dc


def test_less_than_an_octave_of_low_samples_is_open():
    f = np.concatenate([np.linspace(1e6, 1.5e6, 4), np.geomspace(1e8, 1e11, 200)])
    f = np.unique(f)
    # the lowest four samples span 1.5x only: widened to the first sample past 2 MHz (100 MHz)
    # the window is an octave, but there the response is no longer on its asymptote
    h = h_at(f, zeros=[TWO_PI * (-0.5e6 + 20e6j)], poles=[TWO_PI * (-1e6 + 25e6j)])
    assert not judge_low_edge(f, h).settled


def test_top_end_with_a_share_falling_as_one_over_f_is_settled():
    # H = (s + z)/(s + p): H − 1 = (z − p)/(s + p) ∝ 1/f above |p|
    f = np.geomspace(1e8, 1e11, 301)
    h = h_at(f, real_zeros=[-TWO_PI * 3e9], real_poles=[-TWO_PI * 1e9])
    judged = judge_high_edge(f, h)
    assert judged.settled and judged.basis == "share_decay"
    assert judged.slope == pytest.approx(-1.0, abs=0.01)
    assert judged.share == pytest.approx(abs(h[-1] - 1))
    assert judged.closure_rad == pytest.approx(-np.angle(h[-1]))  # back to arg 0


def test_top_end_with_a_share_still_above_the_limit_is_open():
    f = np.geomspace(1e8, 1e10, 301)
    h = h_at(f, real_zeros=[-TWO_PI * 30e9], real_poles=[-TWO_PI * 1e9])
    assert abs(h[-1] - 1) > TOP_SHARE_LIMIT
    assert not judge_high_edge(f, h).settled


@pytest.mark.parametrize("form", ["flat", "rising"])
def test_top_end_with_a_flat_or_rising_share_is_open(form):
    f = np.geomspace(1e8, 1e11, 301)
    s = TWO_PI * 1j * f
    h = 1.3 + 0 * s if form == "flat" else 1 + s / (TWO_PI * 1e12)
    judged = judge_high_edge(f, h)
    assert not judged.settled and judged.basis == "open"


def _flat_top(f: np.ndarray) -> np.ndarray:
    return 1.2 + 0.3j + 0 * f  # a share that does not fall: open without a statement


def test_declared_fmax_settles_the_top_only_when_every_device_declares_it_and_it_is_reached():
    f = np.geomspace(1e8, 2e10, 301)
    h = _flat_top(f)
    reached = judge_high_edge(f, h, (1.5e10, 2e10))
    assert reached.settled and reached.basis == "fmax_statement"
    assert reached.closure_rad == pytest.approx(-np.angle(h[-1]))
    assert not judge_high_edge(f, h, (1.5e10, 3e10)).settled     # the largest is not reached
    assert not judge_high_edge(f, h, (1.5e10, None)).settled     # one device states nothing
    assert not judge_high_edge(f, h).settled


def test_declared_fmax_with_ndf_near_the_negative_real_axis_stays_open():
    f = np.geomspace(1e8, 2e10, 301)
    h = -1.0 + 0.05j + 0 * f
    judged = judge_high_edge(f, h, (1e10,))
    assert not judged.settled and "ambiguous" in judged.reason
