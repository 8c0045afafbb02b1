"""workers.engine.decide: the verdict from what the samples prove.

Oracle: closed-form NDFs (``tests.support.closed_forms``) whose right-half-plane zeros are known,
so the argument principle (N = Z − P, common practice) gives the whole-axis count; the band is
cut to leave edges open or closed as each case needs.
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.support.closed_forms import ndf_request, rational
from workers.engine import run_check

TWO_PI = 2 * np.pi
POLES = [TWO_PI * (-0.3e9 + 0.9e9j), TWO_PI * (-2e9 + 6e9j)]
GROWING = TWO_PI * (+0.05e9 + 2e9j)          # an oscillation at 2 GHz
DAMPED = TWO_PI * (-0.2e9 + 3e9j)
ABOVE = TWO_PI * (+0.5e9 + 40e9j)            # an oscillation at 40 GHz
WIDE = np.geomspace(1e6, 1e12, 1201)
FLOW = np.linspace(300e6, 15e9, 401)         # a flow's band: its DC end is open


def verdict(zeros, f, **kw):
    return run_check(ndf_request(rational(TWO_PI * 1j * f, zeros, POLES), f, **kw))


def test_stable_with_both_edges_settled_is_final():
    v = verdict([DAMPED, TWO_PI * (-1e9 + 8e9j)], WIDE)
    assert v.verdict == "stable" and v.unstable_count == 0 and v.count_complete
    assert v.next_sweep is None and v.modes == []
    assert {a.code for a in v.assumptions} == {"dc_asymptote", "top_share_decay"}
    assert "next_sweep" not in v.to_dict()


def test_unstable_with_both_edges_settled_is_complete():
    v = verdict([GROWING, DAMPED], WIDE)
    assert v.verdict == "unstable" and v.unstable_count == 2 and v.count_complete
    assert v.next_sweep is None
    (mode,) = v.modes
    assert mode.pinned and mode.frequency_hz == pytest.approx(2e9, rel=1e-6)
    assert mode.growth_rate_per_s == pytest.approx(GROWING.real, rel=1e-6)


def test_an_in_band_oscillation_is_unstable_whatever_the_edges():
    v = verdict([GROWING, DAMPED], FLOW)
    assert v.ndf.low_edge.settled is False  # 300 MHz is not on the DC asymptote
    assert v.verdict == "unstable" and v.unstable_count == 2
    assert v.count_complete is False and v.next_sweep is not None
    assert v.modes[0].pinned and v.modes[0].frequency_hz == pytest.approx(2e9, rel=1e-6)
    assert v.next_sweep.band_hz[0] < FLOW[0]


def test_open_edges_and_nothing_in_band_is_indeterminate_and_says_what_to_sweep():
    v = verdict([ABOVE, DAMPED], FLOW)
    assert v.verdict == "indeterminate" and v.unstable_count is None
    assert v.count_complete is False
    assert all(m.frequency_hz <= FLOW[-1] for m in v.modes)  # nothing claimed beyond the band
    assert v.next_sweep.band_hz[1] >= 40e9  # covers the oscillation the band misses
    assert "top end open" in v.next_sweep.reason


def test_a_stable_circuit_on_a_flows_band_is_never_called_stable():
    v = verdict([DAMPED, TWO_PI * (-1e9 + 8e9j)], FLOW)
    assert v.verdict == "indeterminate" and v.next_sweep is not None


def test_modes_are_listed_in_an_indeterminate_verdict_too():
    # an in-band growing pair only 2 kHz wide between 37 MHz steps: the exact data still give the
    # model its zero, but no sample sees its mirror move the phase by 2°: reported, not counted
    zero = TWO_PI * (+2e3 + 2.0e9j)
    v = verdict([zero, DAMPED], FLOW)
    assert v.verdict == "indeterminate" and v.unstable_count is None
    (mode,) = v.modes
    assert not mode.pinned and mode.frequency_hz == pytest.approx(2e9, rel=1e-6)
    assert "mode_not_pinned" in {d.code for d in v.diagnostics}
    asked = np.asarray(v.next_sweep.frequencies_hz)
    assert np.sum(np.abs(asked - 2e9) <= 6 * 2e3) >= 5  # points where its phase turns
