"""workers.engine.models: rational models of sampled responses (AAA, leave-out validation).

Oracles: a real-rational function written from its factored form (AAA recovers a low-degree
rational function to rounding level: Y. Nakatsukasa, O. Sète, L. N. Trefethen, "The AAA
algorithm for rational approximation", SIAM J. Sci. Comput. 40(3), 2018, sec. 6), the level of
the seeded noise the test adds, and the size of a pole–zero pair's effect on the sampled axis,
(s − z)/(s − p) − 1 evaluated with numpy. Froissart doublets (op. cit., sec. 5) are the spurious
pairs a fit to noisy data makes; none may survive as a zero of the model.
"""

from __future__ import annotations

import numpy as np
import pytest

from workers.engine.models import (
    DOUBLET_FACTOR,
    _drop_doublets,
    evenly_spread,
    fit_response,
    fit_single,
)

W0 = 2 * np.pi * 1e9
ZEROS = np.array([0.004 + 1j, -0.1 + 2.3j]) * W0   # one right-half-plane pair
POLES = np.array([-0.05 + 1.6j, -0.2 + 0.7j]) * W0
F_HZ = np.linspace(1e7, 5e9, 201)


def rational(s: np.ndarray) -> np.ndarray:
    """Π (s − z)(s − z̄) / Π (s − p)(s − p̄) over ZEROS and POLES: real-rational, → 1 at ∞."""
    s = np.asarray(s, dtype=complex)
    num = np.prod([(s - z) * (s - np.conj(z)) for z in ZEROS], axis=0)
    den = np.prod([(s - p) * (s - np.conj(p)) for p in POLES], axis=0)
    return num / den


def noisy(level: float, seed: int) -> np.ndarray:
    """The samples with complex Gaussian noise of relative RMS ``level`` (seeded)."""
    rng = np.random.default_rng(seed)
    h = rational(2j * np.pi * F_HZ)
    return h * (1 + level * (rng.standard_normal(h.size) + 1j * rng.standard_normal(h.size))
                / np.sqrt(2))


def nearest_relative(found: np.ndarray, expected: np.ndarray) -> np.ndarray:
    return np.array([np.min(np.abs(found - e)) / abs(e) for e in expected])


def test_rational_data_is_recovered_exactly():
    h = rational(2j * np.pi * F_HZ)
    model = fit_response(F_HZ, h)
    # one half-model reproduces the unseen samples to rounding level: no second one is needed
    assert model.odd is None and model.validated
    assert model.leave_out_error <= 1e-12 and model.fit_error <= 1e-12
    assert model.noise_floor <= 1e-13 and model.doublets_removed == 0
    # the same function between the samples, off the axis, and on the scalar path
    between = np.linspace(1.3e7, 4.99e9, 333)
    np.testing.assert_allclose(model(between), rational(2j * np.pi * between), rtol=1e-11)
    off_axis = np.array([0.3 + 1.1j, -0.2 + 2j, 0.05 + 0.5j, 1.0 + 3.0j]) * W0
    np.testing.assert_allclose(model.at_s(off_axis), rational(off_axis), rtol=1e-11)
    assert model.im_on_axis(2.345e9) == pytest.approx(rational(2j * np.pi * 2.345e9).imag,
                                                      rel=1e-11)
    # its zeros and poles are the factored form's (both members of each pair)
    assert model.zeros_rad_s.size == 4 and model.poles_rad_s.size == 4
    assert nearest_relative(model.zeros_rad_s, np.concatenate([ZEROS, ZEROS.conj()])).max() < 1e-9
    assert nearest_relative(model.poles_rad_s, np.concatenate([POLES, POLES.conj()])).max() < 1e-9


@pytest.mark.parametrize("level", [1e-7, 1e-5, 1e-4])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_noise_floor_follows_the_added_noise(level, seed):
    # The fit's error history stalls at the noise: the floor read off it must be of the order
    # of the noise added (a factor 30 below to the level itself), and the model still validate.
    model = fit_response(F_HZ, noisy(level, seed))
    assert level / 30 <= model.noise_floor <= level
    assert model.odd is not None  # not rational to rounding level: both half-models are fitted
    assert model.validated


@pytest.mark.parametrize("seed", [0, 1])
def test_froissart_doublets_leave_no_phantom_zero(seed):
    model = fit_response(F_HZ, noisy(1e-5, seed))
    true_zeros = np.concatenate([ZEROS, ZEROS.conj()])
    # the raw half-fits do put zeros into the right half-plane away from the true pair ...
    for half in model.halves:
        raw = half.fit.roots() * model.scale_rad_s
        phantom = raw[(raw.real > 0) & (nearest_relative(true_zeros, raw) > 1e-2)]
        assert phantom.size >= 4
    # ... and the model keeps only the factored form's zeros
    assert model.doublets_removed > 0
    assert model.zeros_rad_s.size == 4
    assert nearest_relative(model.zeros_rad_s, true_zeros).max() < 1e-3


def test_a_pair_is_a_doublet_exactly_when_its_effect_is_below_the_noise():
    # (s − z)/(s − p) = 1 + (p − z)/(s − p): on the sampled axis the pair moves H by
    # max |(p − z)/(s − p)|, evaluated here on the samples themselves.
    s_axis = 1j * np.linspace(-1, 1, 401)
    noise = 1e-6
    poles = np.array([0.02 + 0.3j, -0.05 - 0.6j, 0.1 + 0.9j])
    gaps = np.array([1e-7, 1e-6, 2e-3]) * np.exp(1j * np.array([0.3, 2.0, -1.1]))
    zeros = poles + gaps
    effect = np.array([np.max(np.abs((s_axis - z) / (s_axis - p) - 1))
                       for z, p in zip(zeros, poles, strict=True)])
    visible = effect >= DOUBLET_FACTOR * noise
    assert visible.tolist() == [False, False, True]  # the cases straddle the threshold
    kept, dropped = _drop_doublets(zeros, poles, s_axis, noise)
    np.testing.assert_array_equal(kept, zeros[visible])
    assert dropped == int((~visible).sum())
    # a zero far from every pole is never a doublet
    lone = np.array([0.5 + 0.5j])
    kept, dropped = _drop_doublets(lone, poles, s_axis, noise)
    np.testing.assert_array_equal(kept, lone)
    assert dropped == 0


def test_single_fit_of_rational_data():
    h = rational(2j * np.pi * F_HZ)
    fit, error = fit_single(F_HZ, h)
    assert error <= 1e-12
    between = np.linspace(2e7, 4.9e9, 50)
    np.testing.assert_allclose(fit(1j * between / F_HZ[-1]), rational(2j * np.pi * between),
                               rtol=1e-11)


@pytest.mark.parametrize(("count", "limit"), [(10, 10), (9, 2001), (5000, 2001), (2002, 2001)])
def test_evenly_spread_indices(count, limit):
    # all samples when they fit; otherwise the rounded numpy.linspace(0, count − 1, limit):
    # sorted, unique, both ends kept, gaps within one of the mean step
    chosen = evenly_spread(count, limit)
    if count <= limit:
        np.testing.assert_array_equal(chosen, np.arange(count))
        return
    assert chosen[0] == 0 and chosen[-1] == count - 1
    assert np.all(np.diff(chosen) > 0) and chosen.size <= limit
    assert np.diff(chosen).max() <= np.ceil((count - 1) / (limit - 1))


def test_too_few_samples_are_refused():
    with pytest.raises(ValueError, match="8 samples"):
        fit_response(F_HZ[:7], rational(2j * np.pi * F_HZ[:7]))
