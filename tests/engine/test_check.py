"""workers.engine.check: the analysis on the samples and the reasons a count cannot stand.

Oracles: closed-form NDFs (``tests.support.closed_forms``) and a lumped tank whose gain-off data
are known exactly (``workers.lumped``: the same circuit with gm = 0).
"""

from __future__ import annotations

import numpy as np

from tests.support.closed_forms import ndf_request, rational
from workers.engine.check import analyse, count_trusted

TWO_PI = 2 * np.pi
ZEROS = [TWO_PI * (-0.2e9 + 3e9j), TWO_PI * (-1e9 + 8e9j)]
POLES = [TWO_PI * (-0.3e9 + 0.9e9j), TWO_PI * (-2e9 + 6e9j)]


def _analysis(f):
    return analyse(ndf_request(rational(TWO_PI * 1j * f, ZEROS, POLES), f))


def test_a_wide_band_is_trusted_and_names_no_reason():
    analysis = _analysis(np.geomspace(1e6, 1e12, 1201))
    assert analysis.ndf_edges.settled
    assert count_trusted(analysis.ndf_count, analysis.request, analysis.ndf_edges) == []
    assert analysis.ndf_count.clockwise == 0  # no right-half-plane zero: Z − P = 0


def test_each_reason_is_named_with_its_code():
    analysis = _analysis(np.linspace(300e6, 15e9, 41))  # open DC end, 360 MHz steps
    codes = {d.code for d in count_trusted(analysis.ndf_count, analysis.request,
                                           analysis.ndf_edges)}
    assert "band_low_open" in codes
    assert all(d.severity == "blocking"
               for d in count_trusted(analysis.ndf_count, analysis.request, analysis.ndf_edges))
    # without judged edges both ends count as open
    bare = {d.code for d in count_trusted(analysis.ndf_count, analysis.request)}
    assert {"band_low_open", "band_high_open"} <= bare


def test_device_counts_carry_their_own_edges():
    analysis = _analysis(np.geomspace(1e6, 1e12, 1201))
    (edges,) = analysis.device_edges
    assert edges is not None and edges.settled
    assert analysis.device_counts[0].clockwise == 0
