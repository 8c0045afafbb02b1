"""Tests for workers.engine.twoport against references outside the project.

Sources used:
* scikit-rf 2.2 (reference library): Network.stability (K), Network.max_gain and
  Network.max_stable_gain (both linear power ratios, read in skrf/network.py), and
  skrf.network.z2s (power-wave definition by default; equal to pseudo-waves for real z0).
* Edwards & Sinsky, IEEE Trans. MTT 40(12), 1992: mu > 1 ⇔ (K > 1 and |Δ| < 1) ⇔ mu' > 1.
* Pozar, Microwave Engineering, 4th ed., chapter 12 worked examples (numbers FROM MEMORY).
* Closed-form cases derived in the comments (unilateral device, straight-line circle).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import skrf
from hypothesis import assume, event, given, settings
from hypothesis import strategies as st
from skrf.network import z2s

from workers.engine.errors import InputError
from workers.engine.twoport import (
    PROVISO,
    summarise_two_port,
    two_port_factors,
    z_to_s,
)

N_FREQ = 400


def polar(magnitude: float, degrees: float) -> complex:
    return magnitude * np.exp(1j * np.deg2rad(degrees))


def random_passive(rng: np.random.Generator, n_freq: int) -> np.ndarray:
    """Random passive 2-ports: largest singular value of S below 1 (I - SᴴS ≥ 0)."""
    a = rng.normal(size=(n_freq, 2, 2)) + 1j * rng.normal(size=(n_freq, 2, 2))
    sigma_max = np.linalg.norm(a, ord=2, axis=(1, 2))
    return a / (sigma_max * rng.uniform(1.01, 2.0, size=n_freq))[:, None, None]


def random_active(rng: np.random.Generator, n_freq: int) -> np.ndarray:
    """Transistor-like 2-ports: gain in S21, small S12, |S11|, |S22| sometimes above 1."""
    magnitudes = np.stack(
        [
            rng.uniform(0.05, 1.2, n_freq),  # S11
            rng.uniform(0.002, 0.4, n_freq),  # S12
            rng.uniform(0.3, 8.0, n_freq),  # S21
            rng.uniform(0.05, 1.2, n_freq),  # S22
        ],
        axis=1,
    )
    phases = rng.uniform(-np.pi, np.pi, size=(n_freq, 4))
    return (magnitudes * np.exp(1j * phases)).reshape(n_freq, 2, 2)


def skrf_network(s: np.ndarray) -> skrf.Network:
    frequency = skrf.Frequency.from_f(np.linspace(1e9, 2e9, s.shape[0]), unit="hz")
    return skrf.Network(frequency=frequency, s=s)


def gamma_in(s: np.ndarray, gamma_load: np.ndarray) -> np.ndarray:
    """Γ_in = S11 + S12 S21 Γ_L / (1 - S22 Γ_L) (Pozar 4th ed., eq. 12.3a); s is (F,2,2)."""
    s11, s12, s21, s22 = (s[:, i, j][:, None] for i, j in ((0, 0), (0, 1), (1, 0), (1, 1)))
    return s11 + s12 * s21 * gamma_load / (1.0 - s22 * gamma_load)


def gamma_out(s: np.ndarray, gamma_source: np.ndarray) -> np.ndarray:
    """Γ_out = S22 + S12 S21 Γ_S / (1 - S11 Γ_S) (Pozar 4th ed., eq. 12.3b)."""
    swapped = s[:, ::-1, ::-1]
    return gamma_in(swapped, gamma_source)


# ---------------------------------------------------------------- scikit-rf 2.2 comparisons


@pytest.fixture(
    params=[("passive", 11), ("active", 12), ("active", 13)], ids=lambda p: f"{p[0]}-{p[1]}"
)
def random_two_port(request: pytest.FixtureRequest) -> np.ndarray:
    kind, seed = request.param
    rng = np.random.default_rng(seed)
    return random_passive(rng, N_FREQ) if kind == "passive" else random_active(rng, N_FREQ)


def test_k_matches_scikit_rf(random_two_port: np.ndarray) -> None:
    # Reference: scikit-rf 2.2 Network.stability (Rollett K, same definition).
    ours = two_port_factors(random_two_port).k
    theirs = skrf_network(random_two_port).stability
    both = np.isfinite(ours) & np.isfinite(theirs)
    assert both.sum() == N_FREQ
    np.testing.assert_allclose(ours[both], theirs[both], rtol=1e-10, atol=1e-12)


def test_msg_matches_scikit_rf(random_two_port: np.ndarray) -> None:
    # Reference: scikit-rf 2.2 Network.max_stable_gain = |S21| / |S12|, a linear ratio.
    factors = two_port_factors(random_two_port)
    theirs = skrf_network(random_two_port).max_stable_gain
    np.testing.assert_allclose(factors.msg, theirs, rtol=1e-12)
    np.testing.assert_allclose(factors.msg_db, 10 * np.log10(theirs), rtol=1e-12, atol=1e-12)


def test_max_gain_matches_scikit_rf_where_both_defined(random_two_port: np.ndarray) -> None:
    # Reference: scikit-rf 2.2 Network.max_gain (linear): |S21/S12| / (K + sqrt(K^2 - 1)) for
    # K > 1 and |S21/S12| otherwise. It ignores the sign of B1, so it is compared only where
    # both definitions agree: unconditionally stable (K >= 1, B1 > 0) and K < 1.
    factors = two_port_factors(random_two_port)
    theirs = skrf_network(random_two_port).max_gain
    comparable = factors.mag_applies | (factors.k < 1.0)
    assert comparable.sum() > N_FREQ // 2
    np.testing.assert_allclose(factors.max_gain[comparable], theirs[comparable], rtol=1e-9)
    # Our MAG is evaluated in a different algebraic form; it must equal skrf's where it applies.
    mag = factors.mag_applies
    np.testing.assert_allclose(factors.mag[mag], theirs[mag], rtol=1e-9)
    np.testing.assert_allclose(factors.mag_db[mag], 10 * np.log10(theirs[mag]), atol=1e-9)


def test_both_gain_branches_are_exercised() -> None:
    # Guards the comparison above against data that only covers one branch.
    s = random_active(np.random.default_rng(12), N_FREQ)
    factors = two_port_factors(s)
    assert factors.mag_applies.sum() > 10
    assert (factors.k < 1).sum() > 10
    assert np.all(np.isnan(factors.mag[~factors.mag_applies]))


def test_passive_two_ports_are_unconditionally_stable() -> None:
    # Common practice: a passive two-port is unconditionally stable, so K >= 1, |Δ| <= 1 and
    # mu >= 1 (Edwards & Sinsky 1992) and MAG applies everywhere.
    factors = two_port_factors(random_passive(np.random.default_rng(21), N_FREQ))
    assert np.all(factors.k >= 1.0 - 1e-12)
    assert np.all(factors.delta_abs <= 1.0)
    assert np.all(factors.mu >= 1.0 - 1e-12)
    assert np.all(factors.mag_applies)


# ---------------------------------------------------------------- Edwards–Sinsky property

complex_entry = st.builds(
    polar,
    st.floats(min_value=0.0, max_value=1.6, allow_nan=False),
    st.floats(min_value=-180.0, max_value=180.0, allow_nan=False),
)
gain_entry = st.builds(
    polar,
    st.floats(min_value=0.0, max_value=6.0, allow_nan=False),
    st.floats(min_value=-180.0, max_value=180.0, allow_nan=False),
)
MARGIN = 1e-6


@settings(derandomize=True, database=None, max_examples=3000, deadline=None)
@given(s11=complex_entry, s12=complex_entry, s21=gain_entry, s22=complex_entry)
def test_edwards_sinsky_equivalence(s11: complex, s12: complex, s21: complex, s22: complex) -> None:
    # Edwards & Sinsky, IEEE Trans. MTT 40(12), 1992: the single test mu > 1 is necessary and
    # sufficient for unconditional stability, equivalent to Rollett's K > 1 with |Δ| < 1, and
    # mu' > 1 is an equivalent test. A thin margin around each boundary is excluded.
    factors = two_port_factors(np.array([[[s11, s12], [s21, s22]]]))
    k, delta_abs = factors.k[0], factors.delta_abs[0]
    mu, mu_prime = factors.mu[0], factors.mu_prime[0]
    assume(not (np.isnan(k) or np.isnan(mu) or np.isnan(mu_prime)))
    assume(abs(k - 1) > MARGIN and abs(delta_abs - 1) > MARGIN)
    assume(abs(mu - 1) > MARGIN and abs(mu_prime - 1) > MARGIN)
    rollett_stable = bool(k > 1 and delta_abs < 1)
    event("unconditionally stable" if rollett_stable else "potentially unstable")
    assert (mu > 1) == rollett_stable
    assert (mu_prime > 1) == rollett_stable


# ---------------------------------------------------------------- textbook worked examples

# Pozar, Microwave Engineering, 4th ed., Example 12.1 (GaAs HFET at 2 GHz, K–Δ and mu tests,
# stability circles). ALL NUMBERS FROM MEMORY, not from the book in hand; the printed values
# are rounded, hence the tolerances.
POZAR_12_1 = {
    "s": [[polar(0.894, -60.6), polar(0.020, 62.4)], [polar(3.122, 123.6), polar(0.781, -27.6)]],
    "k": (0.607, 0.001),
    "delta_abs": (0.696, 0.001),
    "mu": (0.86, 0.005),
    "load_centre": (1.361, 47.0, 0.002, 0.5),  # magnitude, degrees, tolerances
    "load_radius": (0.50, 0.005),
    "source_centre": (1.132, 68.0, 0.002, 0.5),
    "source_radius": (0.199, 0.001),
}


def test_pozar_example_12_1_stability_test_and_circles() -> None:
    example = POZAR_12_1
    factors = two_port_factors(np.array([example["s"]]))
    for name in ("k", "delta_abs", "mu"):
        expected, tolerance = example[name]
        assert getattr(factors, name)[0] == pytest.approx(expected, abs=tolerance), name
    for circle, prefix in ((factors.load_circle, "load"), (factors.source_circle, "source")):
        magnitude, degrees, tol_mag, tol_deg = example[f"{prefix}_centre"]
        assert abs(circle.centre[0]) == pytest.approx(magnitude, abs=tol_mag)
        assert np.angle(circle.centre[0], deg=True) == pytest.approx(degrees, abs=tol_deg)
        expected_radius, tol_radius = example[f"{prefix}_radius"]
        assert circle.radius[0] == pytest.approx(expected_radius, abs=tol_radius)
        # |S11|, |S22| < 1 and both circles lie outside the origin: stable outside (Pozar's
        # figure for this example shades the inside of each circle as unstable).
        assert not circle.stable_inside[0]
        assert circle.unstable_reaches_unit_disk[0]
    assert not factors.mag_applies[0]  # K < 1: MSG is the figure of merit.


def test_pozar_conjugate_match_example_gain() -> None:
    # Pozar, Microwave Engineering, 4th ed., Example 12.3 (maximum-gain amplifier at 4 GHz;
    # example number and values FROM MEMORY): K = 1.195, |Δ| = 0.488, unconditionally stable,
    # transducer gain with simultaneous conjugate match G_T,max = 16.7 dB.
    s = np.array([[[polar(0.72, -116), polar(0.03, 57)], [polar(2.60, 76), polar(0.73, -54)]]])
    factors = two_port_factors(s)
    assert factors.k[0] == pytest.approx(1.195, abs=0.001)
    assert factors.delta_abs[0] == pytest.approx(0.488, abs=0.001)
    assert factors.mag_applies[0]
    assert factors.max_gain_db[0] == pytest.approx(16.7, abs=0.05)
    assert factors.mu[0] > 1 and factors.mu_prime[0] > 1


# ---------------------------------------------------------------- closed-form unilateral case


@pytest.mark.parametrize(
    ("s11", "s21", "s22"),
    [(polar(0.6, -50), polar(3.0, 120), polar(0.4, 30)), (polar(0.9, 170), polar(8, -10), 0.2)],
    ids=["moderate", "high-gain"],
)
def test_unilateral_closed_form(s11: complex, s21: complex, s22: complex) -> None:
    # Derivation (S12 = 0): Δ = S11 S22, so K's numerator is (1 - |S11|²)(1 - |S22|²) > 0 over
    # a zero denominator: K = +inf. |S22 - Δ S11*| = |S22| (1 - |S11|²), so
    # mu = (1 - |S11|²) / (|S22| (1 - |S11|²)) = 1 / |S22| and likewise mu' = 1 / |S11|.
    # MAG → unilateral maximum |S21|² / ((1 - |S11|²)(1 - |S22|²)) (Pozar 4th ed., section
    # 12.2, G_TU,max); MSG = |S21| / 0 = inf. The load circle shrinks to the point 1/S22
    # (D_L = |S22|²(1 - |S11|²), C_L = S22 (1 - |S11|²), R_L = 0) with the stable side outside.
    s = np.array([[[s11, 0.0], [s21, s22]]], dtype=complex)
    factors = two_port_factors(s)
    assert factors.k[0] == np.inf
    assert factors.mu[0] == pytest.approx(1 / abs(s22), rel=1e-12)
    assert factors.mu_prime[0] == pytest.approx(1 / abs(s11), rel=1e-12)
    expected_mag = abs(s21) ** 2 / ((1 - abs(s11) ** 2) * (1 - abs(s22) ** 2))
    assert factors.mag_applies[0]
    assert factors.mag[0] == pytest.approx(expected_mag, rel=1e-12)
    assert factors.msg[0] == np.inf and factors.msg_db[0] == np.inf
    assert factors.load_circle.centre[0] == pytest.approx(1 / s22, rel=1e-12)
    assert factors.load_circle.radius[0] == 0.0
    assert not factors.load_circle.stable_inside[0]
    assert not factors.load_circle.unstable_reaches_unit_disk[0]


def test_unilateral_with_gain_at_input_is_unstable() -> None:
    # Derivation (S12 = 0, |S11| > 1 > |S22|): K's numerator (1 - |S11|²)(1 - |S22|²) < 0 over
    # zero, so K = -inf; mu = (1 - |S11|²) / (|S22| |1 - |S11|²|) = -1 / |S22|.
    s = np.array([[[1.5, 0.0], [2.0, 0.5]]], dtype=complex)
    factors = two_port_factors(s)
    assert factors.k[0] == -np.inf
    assert factors.mu[0] == pytest.approx(-2.0, rel=1e-12)
    assert not factors.mag_applies[0]


def test_k_above_one_with_delta_above_one_uses_msg() -> None:
    # Closed form: S11 = S22 = 0 and S12 S21 = 2 give Γ_in = 2 Γ_L, so any passive load with
    # |Γ_L| > 1/2 makes |Γ_in| > 1: potentially unstable although K = (1 + 4)/(2·2) = 1.25 > 1.
    # Here |Δ| = 2, B1 = 1 - 4 = -3 < 0 and mu = (1 - 0)/(|0| + 2) = 0.5. MAG (a simultaneous
    # conjugate match) does not apply; MSG = |S21/S12| = 4/0.5 = 8.
    s = np.array([[[0.0, 0.5], [4.0, 0.0]]], dtype=complex)
    factors = two_port_factors(s)
    assert factors.k[0] == pytest.approx(1.25, rel=1e-12)
    assert factors.delta_abs[0] == pytest.approx(2.0, rel=1e-12)
    assert factors.b1[0] == pytest.approx(-3.0, rel=1e-12)
    assert factors.mu[0] == pytest.approx(0.5, rel=1e-12)
    assert not factors.mag_applies[0] and np.isnan(factors.mag[0])
    assert factors.max_gain[0] == pytest.approx(8.0, rel=1e-12)
    assert factors.max_gain_db[0] == pytest.approx(10 * math.log10(8.0), rel=1e-12)


def test_no_transmission_at_all_gives_infinities_without_warnings() -> None:
    # S12 = S21 = S22 = 0: K = (1 - |S11|²)/0 = +inf, mu = (1 - |S11|²)/0 = +inf,
    # MSG = 0/0 = nan. The load circle degenerates (D_L = 0 and C_L = 0): |Γ_in| = |S11| < 1
    # for every Γ_L, so there is no locus, no line foot, and nothing unstable.
    s = np.array([[[0.5, 0.0], [0.0, 0.0]]], dtype=complex)
    factors = two_port_factors(s)  # pyproject turns any numpy warning into an error
    assert factors.k[0] == np.inf
    assert factors.mu[0] == np.inf
    assert np.isnan(factors.msg[0])
    assert factors.load_circle.is_line[0]
    assert np.isnan(factors.load_circle.line_foot[0])
    assert not factors.load_circle.unstable_reaches_unit_disk[0]  # everything is stable


# ---------------------------------------------------------------- circle geometry, by definition


def test_load_and_source_circles_are_the_unit_reflection_loci() -> None:
    # Definition (Pozar 4th ed., section 12.1): the load stability circle is the set of Γ_L with
    # |Γ_in| = 1 and the source circle the set of Γ_S with |Γ_out| = 1. Checked by sampling,
    # independent of the centre/radius formulas; the stable side must give |Γ| < 1 and the
    # unstable side |Γ| > 1.
    s = random_active(np.random.default_rng(31), 200)
    factors = two_port_factors(s)
    theta = np.linspace(0, 2 * np.pi, 37, endpoint=False)
    unit = np.exp(1j * theta)[None, :]
    for circle, reflection in ((factors.load_circle, gamma_in), (factors.source_circle, gamma_out)):
        ok = ~circle.is_line & (circle.radius > 0)
        assert ok.sum() == 200
        centre, radius = circle.centre[:, None], circle.radius[:, None]
        on_circle = reflection(s, centre + radius * unit)
        np.testing.assert_allclose(np.abs(on_circle), 1.0, rtol=1e-7)
        inner = np.abs(reflection(s, centre + 0.5 * radius * unit))
        outer = np.abs(reflection(s, centre + 1.5 * radius * unit))
        inside = circle.stable_inside[:, None]
        stable_side = np.where(inside, inner, outer)
        unstable_side = np.where(inside, outer, inner)
        assert np.all(stable_side < 1.0)
        assert np.all(unstable_side > 1.0)
        assert circle.stable_inside.any() and (~circle.stable_inside).any()


def test_stable_side_follows_the_origin_rule() -> None:
    # Common practice (Pozar 4th ed., section 12.1): with |S11| < 1, Γ_L = 0 gives |Γ_in| < 1,
    # so the stable region is the side of the load circle that contains the origin.
    s = random_active(np.random.default_rng(32), 400)
    factors = two_port_factors(s)
    circle = factors.load_circle
    input_passive = np.abs(s[:, 0, 0]) < 1
    origin_inside = np.abs(circle.centre) < circle.radius
    np.testing.assert_array_equal(
        circle.stable_inside[input_passive], origin_inside[input_passive]
    )


def test_unstable_region_reaching_unit_disk_by_sampling() -> None:
    # Definition: the flag says whether some |Γ_L| < 1 gives |Γ_in| > 1. Checked on a dense
    # polar grid of the unit disk; "True" is only asserted where the overlap is deep enough for
    # the grid to catch it.
    s = random_active(np.random.default_rng(33), 150)
    factors = two_port_factors(s)
    radii = np.sqrt(np.linspace(0, 0.999, 120))
    angles = np.linspace(0, 2 * np.pi, 240, endpoint=False)
    grid = (radii[:, None] * np.exp(1j * angles)[None, :]).ravel()[None, :]
    found_unstable = np.any(np.abs(gamma_in(s, grid)) > 1.0, axis=1)
    circle = factors.load_circle
    centre_abs = np.abs(circle.centre)
    depth = np.where(
        circle.stable_inside, centre_abs + 1 - circle.radius, 1 + circle.radius - centre_abs
    )
    flagged = circle.unstable_reaches_unit_disk
    assert not np.any(found_unstable & ~flagged)
    assert np.all(found_unstable[flagged & (depth > 0.05)])
    assert flagged.any() and (~flagged).any()


def test_straight_line_load_circle() -> None:
    # Closed form: with S11 = 0, Δ = -S12 S21 and D_L = |S22|² - |S12 S21|². Choosing
    # |S22| = |S12 S21| makes D_L = 0, and |Γ_in| = 1 becomes the line Re(S22 Γ) = 1/2
    # (expand |S12 S21 Γ| = |1 - S22 Γ|). Its foot is S22* / (2 |S22|²); the origin is stable.
    s12, s21 = polar(0.3, 40), polar(2.0, -70)
    s22 = polar(abs(s12 * s21), 25)
    s = np.array([[[0.0, s12], [s21, s22]]])
    circle = two_port_factors(s).load_circle
    assert circle.is_line[0] and circle.radius[0] == np.inf and np.isnan(circle.centre[0])
    foot = circle.line_foot[0]
    assert foot == pytest.approx(np.conj(s22) / (2 * abs(s22) ** 2), rel=1e-12)
    direction = 1j * np.conj(s22) / abs(s22)  # along the line
    along = foot + np.linspace(-3, 3, 13)[None, :] * direction
    np.testing.assert_allclose(np.abs(gamma_in(s, along)), 1.0, rtol=1e-9)
    assert abs(gamma_in(s, np.array([[0.5 * foot]]))[0, 0]) < 1  # origin side: stable
    assert abs(gamma_in(s, np.array([[1.5 * foot]]))[0, 0]) > 1  # far side: unstable
    assert not circle.stable_inside[0]  # "inside" = the far side, into which S22* points
    assert circle.unstable_reaches_unit_disk[0]  # |foot| = 1/(2·0.6) < 1


# ---------------------------------------------------------------- summary


def unilateral_with_mu(mu: np.ndarray) -> np.ndarray:
    # Closed form derived above: for S12 = 0 and |S11| < 1, mu = 1 / |S22|.
    s = np.zeros((mu.size, 2, 2), dtype=complex)
    s[:, 0, 0] = 0.3
    s[:, 1, 0] = 2.0
    s[:, 1, 1] = 1.0 / mu
    return s


@pytest.mark.parametrize(
    ("mu", "bands_ghz"),
    [
        # Linear interpolation of mu - 1: 1.5 → 0.5 crosses at 1 + 0.5/1.0 = 1.5; 0.8 → 1.2
        # crosses at 3 + 0.2/0.4 = 3.5.
        ([1.5, 0.5, 0.8, 1.2, 2.0], [(1.5, 3.5)]),
        # Runs touching the ends keep the end samples as edges; 0.9 → 1.1 crosses at 2.5,
        # 1.1 → 0.7 at 4 + 0.1/0.4 = 4.25.
        ([0.5, 0.9, 1.1, 1.1, 0.7], [(1.0, 2.5), (4.25, 5.0)]),
        ([1.2, 1.3, 1.4, 1.5, 2.0], []),
    ],
)
def test_summary_bands_by_linear_interpolation(mu: list[float], bands_ghz: list) -> None:
    frequency = np.array([1.0, 2.0, 3.0, 4.0, 5.0]) * 1e9
    factors = two_port_factors(unilateral_with_mu(np.array(mu)))
    summary = summarise_two_port(frequency, factors)
    assert len(summary.unstable_bands_hz) == len(bands_ghz)
    for (lo, hi), (lo_ghz, hi_ghz) in zip(summary.unstable_bands_hz, bands_ghz, strict=True):
        assert lo == pytest.approx(lo_ghz * 1e9, rel=1e-9)
        assert hi == pytest.approx(hi_ghz * 1e9, rel=1e-9)
    assert summary.mu_min == pytest.approx(min(mu), rel=1e-9)
    assert summary.mu_min_hz == frequency[int(np.argmin(mu))]
    assert summary.unconditionally_stable == (min(mu) > 1)


def test_summary_minimum_k_and_json() -> None:
    # Two frequencies: Pozar 4th ed. Example 12.3 (K = 1.195) and Example 12.1 (K = 0.607,
    # mu = 0.86), numbers from memory as above.
    s = np.array(
        [
            [[polar(0.72, -116), polar(0.03, 57)], [polar(2.60, 76), polar(0.73, -54)]],
            POZAR_12_1["s"],
        ]
    )
    frequency = np.array([4e9, 5e9])
    summary = summarise_two_port(frequency, two_port_factors(s))
    assert summary.k_min == pytest.approx(0.607, abs=0.001) and summary.k_min_hz == 5e9
    assert summary.mu_min == pytest.approx(0.86, abs=0.005) and summary.mu_min_hz == 5e9
    assert summary.mu_prime_min_hz == 5e9
    assert len(summary.unstable_bands_hz) == 1
    lo, hi = summary.unstable_bands_hz[0]
    assert 4e9 < lo < 5e9 and hi == 5e9
    assert summary.proviso == PROVISO
    payload = summary.to_dict()
    assert json.loads(json.dumps(payload, allow_nan=False)) == payload


def test_summary_to_dict_turns_infinities_into_none() -> None:
    # Unilateral data: K = +inf at every sample (derived above), so min K is not a number.
    s = unilateral_with_mu(np.array([2.0, 3.0]))
    summary = summarise_two_port(np.array([1e9, 2e9]), two_port_factors(s))
    payload = summary.to_dict()
    assert summary.k_min == np.inf and payload["k_min"] is None
    assert payload["mu_min"] == pytest.approx(2.0)
    assert json.dumps(payload, allow_nan=False)


def test_proviso_states_rollett_and_internal_loops() -> None:
    # Rollett's proviso (Rollett 1962; common practice): no RHP poles of the terminated
    # two-port, and internal loops are invisible to port factors.
    text = PROVISO.lower()
    for phrase in ("right half-plane", "rollett", "bias", "odd mode", "k > 1", "mu > 1"):
        assert phrase in text


def test_summary_rejects_bad_frequency() -> None:
    factors = two_port_factors(unilateral_with_mu(np.array([2.0, 3.0])))
    with pytest.raises(InputError):
        summarise_two_port(np.array([2e9, 1e9]), factors)
    with pytest.raises(InputError):
        summarise_two_port(np.array([1e9]), factors)


def test_rejects_non_two_port() -> None:
    with pytest.raises(InputError):
        two_port_factors(np.zeros((3, 3, 3), dtype=complex))
    with pytest.raises(ValueError):  # InputError is a ValueError
        two_port_factors(np.full((1, 2, 2), np.nan, dtype=complex))


# ---------------------------------------------------------------- z_to_s


@pytest.mark.parametrize(("n_ports", "seed"), [(1, 41), (2, 42), (3, 43), (4, 44)])
def test_z_to_s_matches_scikit_rf(n_ports: int, seed: int) -> None:
    # Reference: scikit-rf 2.2 skrf.network.z2s with per-port real z0 (power waves, Kurokawa
    # 1965 eq. 18), which for real z0 equals the normalised (z - I)(z + I)^-1.
    rng = np.random.default_rng(seed)
    z = rng.normal(0, 60, size=(50, n_ports, n_ports)) + 1j * rng.normal(
        0, 60, size=(50, n_ports, n_ports)
    )
    z0 = rng.uniform(10.0, 150.0, size=n_ports)
    np.testing.assert_allclose(z_to_s(z, z0), z2s(z, z0), rtol=1e-9, atol=1e-12)


def test_z_to_s_one_port_closed_form() -> None:
    # Common practice: a load Z on a real reference R0 reflects (Z - R0) / (Z + R0).
    z = np.array([25.0, 50.0, 100.0 + 30j])[:, None, None]
    s = z_to_s(z, np.array([50.0]))
    np.testing.assert_allclose(s[:, 0, 0], (z[:, 0, 0] - 50) / (z[:, 0, 0] + 50), rtol=1e-14)


def test_z_to_s_shunt_impedance_between_unequal_references() -> None:
    # Closed form (circuit analysis, common practice): a shunt impedance Z_sh joining port 1
    # (reference R1) and port 2 (reference R2) has Z = Z_sh [[1, 1], [1, 1]]. Port 1 sees
    # Z_p = Z_sh ∥ R2, so S11 = (Z_p - R1) / (Z_p + R1); driving port 1 from a source of
    # voltage 2 √R1 a1 behind R1 puts V = 2 √R1 a1 Z_p / (Z_p + R1) on the node and
    # b2 = V / √R2, so S21 = 2 √(R1/R2) Z_p / (Z_p + R1); S12 = S21 (reciprocal).
    # As Z_sh → ∞ this is the impedance step, S21 = 2 √(R1 R2) / (R1 + R2).
    r1, r2, z_sh = 50.0, 75.0, 100.0 + 20.0j
    z = np.full((1, 2, 2), z_sh, dtype=complex)
    s = z_to_s(z, np.array([r1, r2]))[0]
    z_p = z_sh * r2 / (z_sh + r2)
    assert s[0, 0] == pytest.approx((z_p - r1) / (z_p + r1), rel=1e-12)
    assert s[1, 0] == pytest.approx(2 * math.sqrt(r1 / r2) * z_p / (z_p + r1), rel=1e-12)
    assert s[0, 1] == pytest.approx(s[1, 0], rel=1e-12)
    z_p2 = z_sh * r1 / (z_sh + r1)  # port 2 sees Z_sh ∥ R1
    assert s[1, 1] == pytest.approx((z_p2 - r2) / (z_p2 + r2), rel=1e-12)


@pytest.mark.parametrize(
    "z0", [np.array([50.0, -50.0]), np.array([50.0, 0.0]), np.array([50.0]), np.array([50, 50j])]
)
def test_z_to_s_rejects_bad_references(z0: np.ndarray) -> None:
    with pytest.raises(InputError):
        z_to_s(np.ones((2, 2, 2), dtype=complex), z0)
