"""The rational model (AAA) against closed-form rational functions.

Method: Y. Nakatsukasa, O. Sète, L. N. Trefethen, "The AAA algorithm for rational approximation",
SIAM J. Sci. Comput. 40(3), A1494–A1522, 2018 — on data sampled from a rational function of low
degree AAA recovers it to rounding level (op. cit., sec. 6), so its poles and zeros must equal the
analytic ones. The functions below are written from their factored form; nothing is fitted to
produce the expected values.
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.support.closed_forms import ndf_request, rational
from workers.engine import run_check
from workers.engine.identify import band_rhp_zeros, zero_count
from workers.engine.models import fit_response

W0 = 2 * np.pi * 1e9
# one unstable pole pair (0.05 ± 1.6j)·ω₀ and one unstable zero pair (0.004 ± 1j)·ω₀
ZEROS = np.array([0.004 + 1j, -0.1 + 2.3j, -0.5 + 0.2j]) * W0
POLES = np.array([0.05 + 1.6j, -0.2 + 0.7j, -0.3 + 3.1j]) * W0
STABLE_POLES = np.array([-0.05 + 1.6j, -0.2 + 0.7j, -0.3 + 3.1j]) * W0
F_HZ = np.linspace(1e7, 5e9, 201)
# the engine needs a band over which NDF settles at both ends (issue 2's closure check)
WIDE_HZ = np.geomspace(1e6, 2e11, 201)


def _paired(found: np.ndarray, expected: np.ndarray) -> np.ndarray:
    """Relative distance from each expected value to the nearest found one."""
    return np.array([np.min(np.abs(found - e)) / abs(e) for e in expected])


def test_poles_and_zeros_of_a_closed_form_rational_match():
    # Analytic values: the factored form above (both members of each conjugate pair).
    h = rational(2j * np.pi * F_HZ, ZEROS, POLES)
    model = fit_response(F_HZ, h)
    assert model.validated
    expected_zeros = np.concatenate([ZEROS, np.conj(ZEROS)])
    expected_poles = np.concatenate([POLES, np.conj(POLES)])
    assert model.zeros_rad_s.size == expected_zeros.size
    assert model.poles_rad_s.size == expected_poles.size
    assert np.max(_paired(model.zeros_rad_s, expected_zeros)) <= 1e-6
    assert np.max(_paired(model.poles_rad_s, expected_poles)) <= 1e-6


@pytest.mark.parametrize("seed", range(5))
def test_noise_gives_no_phantom_zeros_in_the_right_half_plane(seed):
    # The same data with 1e-4 relative complex Gaussian noise (seeded): the only right-half-plane
    # zero pair in the band is the analytic one.
    rng = np.random.default_rng(seed)
    h = rational(2j * np.pi * F_HZ, ZEROS, POLES)
    noisy = h * (1 + 1e-4 * (rng.standard_normal(h.size) + 1j * rng.standard_normal(h.size))
                 / np.sqrt(2))
    model = fit_response(F_HZ, noisy)
    assert model.validated
    assert model.noise_floor < 1e-3
    rhp = band_rhp_zeros(model, F_HZ[0], F_HZ[-1])
    assert zero_count(rhp) == 2
    assert abs(rhp[0] - ZEROS[0]) <= 1e-2 * abs(ZEROS[0])


def test_engine_identifies_the_unstable_zero_pair_of_a_closed_form_ndf():
    # NDF with stable poles and one right-half-plane zero pair: argument principle (N = Z − P,
    # common practice) gives 2 clockwise encirclements; the mode is the analytic zero.
    h = rational(2j * np.pi * WIDE_HZ, ZEROS, STABLE_POLES)
    verdict = run_check(ndf_request(h, WIDE_HZ))
    assert verdict.verdict == "unstable" and verdict.unstable_count == 2
    mode = verdict.modes[0]
    assert mode.growth_rate_per_s == pytest.approx(ZEROS[0].real, rel=1e-6)
    assert mode.frequency_hz == pytest.approx(ZEROS[0].imag / (2 * np.pi), rel=1e-6)
    methods = {m.method: m for m in verdict.methods}
    assert methods["rational_model"].unstable_count == 2
    assert methods["rational_model"].agrees is True
    assert methods["encirclement"].agrees is True
    assert verdict.refinement.model.validated is True


def test_zero_and_count_disagreement_is_unstable_but_incomplete_with_both_numbers():
    # Argument principle (common practice): with the unstable pole pair as well, NDF encircles
    # the origin Z − P = 2 − 2 = 0 times while the model still has 2 right-half-plane zeros.
    # (A passive all-off circuit cannot give NDF such poles; the engine must not call it stable.)
    # A right-half-plane zero of NDF = det Y_on / det Y_off is a zero of det Y_on, a natural
    # frequency of the circuit as it runs, whatever the off circuit does: the pinned in-band
    # pair makes it unstable, but the count is not complete.
    h = rational(2j * np.pi * WIDE_HZ, ZEROS, POLES)
    verdict = run_check(ndf_request(h, WIDE_HZ))
    assert verdict.verdict == "unstable" and verdict.unstable_count == 2
    assert verdict.count_complete is False and verdict.next_sweep is not None
    found = [d for d in verdict.diagnostics if d.code == "model_count_disagrees"]
    assert len(found) == 1
    assert found[0].details == {"encirclement_count": 0, "model_count": 2}


def test_data_that_is_not_rational_fails_validation_and_blocks():
    # e^(−sτ) is transcendental (common practice): over a band holding 200 of its turns no
    # rational function of order <= 50 follows it, so the model must fail its leave-out check,
    # say so, and the verdict must not rest on the sampled count alone (issue 3).
    f = np.linspace(1e6, 10e9, 401)
    h = 1 + 0.5 * np.exp(-2j * np.pi * f * 20e-9)
    verdict = run_check(ndf_request(h, f))
    assert verdict.verdict == "indeterminate"
    codes = {d.code: d for d in verdict.diagnostics}
    assert codes["model_not_validated"].severity == "blocking"
    assert "encirclement_count" in codes["model_not_validated"].details
    assert "not_rational" in codes
    assert verdict.refinement.model.validated is False
