"""workers.engine.pinning: do the samples reject a right-half-plane zero's mirror image?

Oracles: the all-pass factor A(s) = (s + z̄)(s + z)/((s − z)(s − z̄)) has |A(jω)| = 1 on the whole
axis and moves the zero pair z, z̄ to −z̄, −z (common practice: Bode, Network Analysis and
Feedback Amplifier Design, 1945, ch. 14, for minimum-phase and all-pass factors); the data are
factored rationals (``tests.support.closed_forms``), so the size of the mirror's mismatch at each
sample is known in closed form: |H|·|A − 1|.
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.support.closed_forms import rational
from workers.engine.pinning import mirror_evidence, mirror_factor

TWO_PI = 2 * np.pi
ZERO = TWO_PI * (+20e6 + 2e9j)   # growing pair at 2 GHz, σ/ω = 1 %
POLES = [TWO_PI * (-0.3e9 + 1.5e9j)]


@pytest.mark.parametrize("zero", [ZERO, TWO_PI * 0.4e9 + 0j])
def test_the_mirror_factor_is_all_pass_and_moves_the_zero(zero):
    s = TWO_PI * 1j * np.geomspace(1e6, 1e12, 501)
    a = mirror_factor(s, zero)
    assert np.max(np.abs(np.abs(a) - 1.0)) < 1e-12
    mirrored = -np.conj(zero)
    with np.errstate(divide="ignore", invalid="ignore"):
        assert abs(mirror_factor(np.array([mirrored]), zero)[0]) < 1e-9   # a zero at −z̄
        assert not np.isfinite(mirror_factor(np.array([zero]), zero)[0])  # a pole at z


def test_well_sampled_zero_is_pinned_with_the_closed_form_margin():
    f = np.linspace(1.5e9, 2.5e9, 401)   # 2.5 MHz steps across a 20 MHz half-width
    h = rational(TWO_PI * 1j * f, [ZERO], POLES)
    level = 1e-10
    evidence = mirror_evidence(f, h, ZERO, level)
    expected = np.max(np.abs(h) * np.abs(mirror_factor(TWO_PI * 1j * f, ZERO) - 1)) \
        / np.max(np.abs(h)) / level
    assert evidence.margin == pytest.approx(expected, rel=1e-12)
    assert evidence.pinned and evidence.phase_deg > 90


def test_a_zero_the_samples_cannot_see_is_not_pinned():
    # σ/2π = 2 kHz against 100 MHz steps and data good to 1e-3 (measured data): the nearest
    # samples see its mirror move the phase by about 4σ/Δω ≈ 1e-4 rad, far below the noise
    zero = TWO_PI * (2e3 + 2.05e9j)
    f = np.linspace(1e9, 3e9, 21)
    h = rational(TWO_PI * 1j * f, [zero], POLES)
    evidence = mirror_evidence(f, h, zero, 1e-3)
    assert not evidence.pinned


def test_the_margin_falls_with_the_error_level():
    f = np.linspace(1.5e9, 2.5e9, 101)
    h = rational(TWO_PI * 1j * f, [ZERO], POLES)
    tight, loose = mirror_evidence(f, h, ZERO, 1e-9), mirror_evidence(f, h, ZERO, 1e-3)
    assert tight.margin == pytest.approx(1e6 * loose.margin, rel=1e-9)
