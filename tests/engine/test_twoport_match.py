"""workers.engine.twoport against the definitions behind MAG, B1/B2 and μ/μ′.

Oracles (formulas written out here from the books, not taken from the module):
* Simultaneous conjugate match: B1 = 1 + |S11|² − |S22|² − |Δ|², C1 = S11 − Δ S22*,
  Γ_MS = (B1 − √(B1² − 4|C1|²))/(2 C1), and likewise Γ_ML with 1 ↔ 2; then Γ_in(Γ_ML) = Γ_MS*
  and the transducer gain there is MAG (G. Gonzalez, Microwave Transistor Amplifiers, 2nd ed.,
  sec. 3.6; Pozar, Microwave Engineering, 4th ed., sec. 12.3 — section numbers from memory).
  Transducer gain G_T = |S21|² (1 − |Γ_S|²)(1 − |Γ_L|²) / |(1 − S11 Γ_S)(1 − S22 Γ_L)
  − S12 S21 Γ_S Γ_L|² (Pozar 4th ed., sec. 12.1), Γ_in = S11 + S12 S21 Γ_L/(1 − S22 Γ_L).
* MAG as the largest operating power gain G_P = |S21|² (1 − |Γ_L|²) / ((1 − |Γ_in|²)
  |1 − S22 Γ_L|²) over passive loads (Pozar 4th ed., sec. 12.1), searched on a grid.
* μ as the distance from the origin of the load plane to the nearest load with |Γ_in| ≥ 1, μ′
  the same in the source plane (M. L. Edwards and J. H. Sinsky, IEEE Trans. MTT 40(12), 1992;
  the geometric reading is from memory), found along rays from the origin.
* For K > 1, B1 > 0 exactly when |Δ| < 1 (Gonzalez 2nd ed., sec. 3.6, from memory).
"""

from __future__ import annotations

import numpy as np
import pytest

from workers.engine.twoport import two_port_factors


def random_active(seed: int, n_freq: int) -> np.ndarray:
    """Transistor-like two-ports: |S11|, |S22| < 1, gain in S21, small S12 (seeded)."""
    rng = np.random.default_rng(seed)
    magnitude = np.stack([rng.uniform(0.05, 0.95, n_freq), rng.uniform(0.002, 0.3, n_freq),
                          rng.uniform(0.3, 6.0, n_freq), rng.uniform(0.05, 0.95, n_freq)], axis=1)
    phase = rng.uniform(-np.pi, np.pi, (n_freq, 4))
    return (magnitude * np.exp(1j * phase)).reshape(n_freq, 2, 2)


def entries(s: np.ndarray):
    return s[:, 0, 0], s[:, 0, 1], s[:, 1, 0], s[:, 1, 1]


def gamma_in(s: np.ndarray, gamma_load: np.ndarray) -> np.ndarray:
    s11, s12, s21, s22 = (e[:, None] for e in entries(s))
    return s11 + s12 * s21 * gamma_load / (1 - s22 * gamma_load)


def transducer_gain(s: np.ndarray, gamma_s: np.ndarray, gamma_l: np.ndarray) -> np.ndarray:
    s11, s12, s21, s22 = entries(s)
    loop = (1 - s11 * gamma_s) * (1 - s22 * gamma_l) - s12 * s21 * gamma_s * gamma_l
    return np.abs(s21) ** 2 * (1 - np.abs(gamma_s) ** 2) * (1 - np.abs(gamma_l) ** 2) \
        / np.abs(loop) ** 2


def matched_reflection(b: np.ndarray, c: np.ndarray) -> np.ndarray:
    """(B − √(B² − 4|C|²))/(2C): the root inside the unit circle when B > 0."""
    return (b - np.sqrt(b**2 - 4 * np.abs(c) ** 2)) / (2 * c)


def test_b1_b2_and_mag_at_the_simultaneous_conjugate_match():
    s = random_active(3, 2000)
    s11, s12, s21, s22 = entries(s)
    delta = s11 * s22 - s12 * s21
    b1 = 1 + np.abs(s11) ** 2 - np.abs(s22) ** 2 - np.abs(delta) ** 2
    b2 = 1 + np.abs(s22) ** 2 - np.abs(s11) ** 2 - np.abs(delta) ** 2
    factors = two_port_factors(s)
    np.testing.assert_allclose(factors.b1, b1, rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(factors.b2, b2, rtol=1e-12, atol=1e-14)
    ok = factors.mag_applies
    assert 100 < ok.sum() < ok.size  # both branches present
    gamma_ms = matched_reflection(b1[ok], (s11 - delta * np.conj(s22))[ok])
    gamma_ml = matched_reflection(b2[ok], (s22 - delta * np.conj(s11))[ok])
    assert np.all(np.abs(gamma_ms) < 1) and np.all(np.abs(gamma_ml) < 1)
    # it is the simultaneous conjugate match: Γ_in(Γ_ML) = Γ_MS*
    np.testing.assert_allclose(gamma_in(s[ok], gamma_ml[:, None])[:, 0], np.conj(gamma_ms),
                               rtol=1e-8, atol=1e-10)
    np.testing.assert_allclose(factors.mag[ok], transducer_gain(s[ok], gamma_ms, gamma_ml),
                               rtol=1e-8)


def test_mag_is_the_largest_operating_power_gain_over_passive_loads():
    s = random_active(4, 400)
    factors = two_port_factors(s)
    pick = np.flatnonzero(factors.mag_applies)[:6]
    assert pick.size == 6
    radii = np.sqrt(np.linspace(0.0, 0.9999, 500))
    grid = (radii[:, None] * np.exp(1j * np.linspace(0, 2 * np.pi, 720, endpoint=False))).ravel()
    for k in pick:
        one = s[k:k + 1]
        s21, s22 = one[0, 1, 0], one[0, 1, 1]
        g_in = gamma_in(one, grid[None, :])[0]
        g_p = np.abs(s21) ** 2 * (1 - np.abs(grid) ** 2) \
            / ((1 - np.abs(g_in) ** 2) * np.abs(1 - s22 * grid) ** 2)
        assert np.all(np.abs(g_in) < 1)  # unconditionally stable: every passive load is safe
        best = g_p.max()
        assert factors.mag[k] >= best * (1 - 1e-12)
        assert factors.mag[k] == pytest.approx(best, rel=2e-3)


def ray_distances(s: np.ndarray, angles: np.ndarray) -> np.ndarray:
    """(F, A): the smallest r > 0 with |Γ_in(r·e^(jθ))| = 1 on each ray θ of ``angles`` (F, A).

    On a ray, |Γ_in| = |S11 − ΔΓ_L| / |1 − S22 Γ_L| ≥ 1 ⇔ q(r) ≥ 0 with
    q(r) = (|Δ|² − |S22|²) r² − 2 Re((S11* Δ − S22) e^(jθ)) r + |S11|² − 1, and q(0) < 0 for
    |S11| < 1: the first crossing is q's smallest positive real root (inf when there is none).
    Roots in the cancellation-free form q = −(b + sign(b)√(b² − 4ac))/2, r = q/a and c/q
    (common practice).
    """
    s11, s12, s21, s22 = (e[:, None] for e in entries(s))
    delta = s11 * s22 - s12 * s21
    a = np.abs(delta) ** 2 - np.abs(s22) ** 2
    b = -2 * np.real((np.conj(s11) * delta - s22) * np.exp(1j * angles))
    c = np.abs(s11) ** 2 - 1
    half = -0.5 * (b + np.where(b >= 0, 1, -1) * np.sqrt((b**2 - 4 * a * c).astype(complex)))
    with np.errstate(divide="ignore", invalid="ignore"):
        roots = np.stack([half / a, c / half])
    usable = (np.abs(roots.imag) <= 1e-12 * np.abs(roots)) & (roots.real > 0)
    return np.where(usable, roots.real, np.inf).min(axis=0)


def nearest_unstable_distance(s: np.ndarray) -> np.ndarray:
    """Smallest |Γ_L| with |Γ_in| ≥ 1, per frequency: the best of 4096 rays, then 2001 rays
    within one step of it."""
    coarse = np.linspace(0, 2 * np.pi, 4096, endpoint=False)
    best = coarse[np.argmin(ray_distances(s, np.broadcast_to(coarse, (s.shape[0], 4096))),
                            axis=1)]
    fine = best[:, None] + np.linspace(-1, 1, 2001)[None, :] * (coarse[1] - coarse[0])
    return ray_distances(s, fine).min(axis=1)


def test_mu_and_mu_prime_are_distances_to_the_nearest_unstable_termination():
    s = random_active(5, 300)
    factors = two_port_factors(s)
    # μ′ is μ with ports 1 and 2 exchanged (Γ_out as a function of Γ_S)
    for mu, plane in ((factors.mu, s), (factors.mu_prime, s[:, ::-1, ::-1])):
        assert (mu < 1).sum() > 20 and (mu > 1).sum() > 20
        distance = nearest_unstable_distance(plane)
        np.testing.assert_allclose(distance, mu, rtol=1e-9)
        assert np.all(distance >= mu * (1 - 1e-12))


def test_b1_sign_follows_delta_when_k_exceeds_one():
    rng = np.random.default_rng(6)
    magnitude = rng.uniform(0.0, 1.5, (5000, 4)) * np.array([1, 1, 4, 1])
    s = (magnitude * np.exp(1j * rng.uniform(-np.pi, np.pi, (5000, 4)))).reshape(-1, 2, 2)
    factors = two_port_factors(s)
    k_above = factors.k > 1 + 1e-9
    clear = k_above & (np.abs(factors.delta_abs - 1) > 1e-9)
    assert (clear & (factors.delta_abs < 1)).sum() > 50
    assert (clear & (factors.delta_abs > 1)).sum() > 50
    np.testing.assert_array_equal(factors.b1[clear] > 0, factors.delta_abs[clear] < 1)
    np.testing.assert_array_equal(factors.b2[clear] > 0, factors.delta_abs[clear] < 1)
