"""Numbers and counts as the report pages write them, against values worked by hand.

Engineering notation with SI prefixes: BIPM, *The International System of Units* (9th edition,
2019), Table 7 (prefixes k, M, G, m, µ, n … as powers 10^±3n). Damping ratio and Q of a complex
pair s = σ ± jω: ζ = −σ/|s|, Q = 1/(2ζ) (second-order system convention, e.g. Ogata, *Modern
Control Engineering*; common practice). Doubling time of e^{σt}: ln 2/σ.
"""

from __future__ import annotations

import math

import pytest

from service.reports.units import (
    format_eng,
    format_factor,
    format_hz,
    format_near_one,
    format_ohm,
    format_power_of_ten,
    format_seconds,
    format_share,
    format_siemens,
)
from service.reports.wording import count_in_words, mode_timing, number_word

# (value, unit, digits, expected), each worked by hand: mantissa in [1, 1000), prefix by 10^3n
ENGINEERING = [
    (4445.579, "Ω", 3, "4.45 kΩ"),           # 4445.579 = 4.445579 × 10³ → 4.45 k
    (93.4, "Ω", 3, "93.4 Ω"),
    (145_448_399.5, "Hz", 4, "145.4 MHz"),   # 145.4484 × 10⁶
    (2.242e9, "Hz", 4, "2.242 GHz"),
    (1e12, "Hz", 4, "1 THz"),
    (-2.2983e-4, "S", 3, "−230 µS"),         # −229.83 × 10⁻⁶ rounds to −230
    (-0.0126624, "S", 3, "−12.7 mS"),
    (0.020000041, "S", 3, "20 mS"),
    (999.96e6, "Hz", 4, "1 GHz"),            # 999.96 rounds to 1000 → next prefix
    (999.4e6, "Hz", 4, "999.4 MHz"),
    (1.678e-8, "s", 3, "16.8 ns"),
    (0.0, "Ω", 3, "0 Ω"),
    (470e-9, "H", 3, "470 nH"),
    (12.0, "", 3, "12"),
]


@pytest.mark.parametrize(("value", "unit", "digits", "expected"), ENGINEERING)
def test_engineering_notation(value, unit, digits, expected):
    assert format_eng(value, unit, digits) == expected


def test_named_formats_use_the_same_notation():
    assert format_ohm(4445.579) == "4.45 kΩ"
    assert format_hz(146_140_679.4) == "146.1 MHz"
    assert format_siemens(-2.29e-4) == "−229 µS"
    assert format_seconds(16.78e-9) == "16.8 ns"
    for missing in (None, math.nan, math.inf):
        assert format_eng(missing, "Ω") == "–"


@pytest.mark.parametrize(("value", "expected"), [
    (4.1304e7, "41.3 × 10⁶ s⁻¹"),     # 41.304 × 10⁶
    (-3.2e5, "−320 × 10³ s⁻¹"),
    (7.5, "7.5 s⁻¹"),                 # exponent 0: no factor
    (1.26e-5, "12.6 × 10⁻⁶ s⁻¹"),
])
def test_power_of_ten_notation(value, expected):
    assert format_power_of_ten(value, "s⁻¹") == expected


@pytest.mark.parametrize(("value", "expected"), [
    (-615.98954, "−616"), (5.6612, "5.66"), (3.76e16, "37.6 × 10¹⁵"), (-1.2e4, "−12 × 10³"),
    (4372.0, "4.37 × 10³"),          # %.3g would give 4.37e+03
    (1.23e-5, "12.3 × 10⁻⁶"), (0.000123, "0.000123"),
])
def test_factors_never_take_si_prefixes(value, expected):
    assert format_factor(value) == expected


def test_mu_near_one_shows_its_distance_from_one():
    # μ = 1.0000126380: μ − 1 = 1.2638e-5 = 12.6 × 10⁻⁶; shown to 7 decimals (3 digits of it)
    assert format_near_one(1.0000126380, "μ") == "1.0000126 (μ − 1 = 12.6 × 10⁻⁶)"
    assert format_near_one(0.99995, "μ") == "0.9999500 (μ − 1 = −50 × 10⁻⁶)"
    # farther than 1e-3 from 1, or exactly 1: the plain number
    assert format_near_one(1.0021, "μ") == "1.002"
    assert format_near_one(-615.98954, "K") == "−616"
    assert format_near_one(1.0, "K") == "1"


@pytest.mark.parametrize(("count", "modes", "complete", "expected"), [
    (2, [{"frequency_hz": 145.4e6}], None, "one oscillating pair"),
    (1, [{"frequency_hz": 0.0}], None, "one growing real mode"),
    (3, [{"frequency_hz": 0.0}, {"frequency_hz": 2e9}], None,
     "one oscillating pair and one growing real mode"),
    (4, [{"frequency_hz": 1e9}, {"frequency_hz": 2e9}], None, "two oscillating pairs"),
    (4, [], None, "four right-half-plane natural frequencies"),     # modes unknown
    (1, [], None, "one right-half-plane natural frequency"),
    (2, [{"frequency_hz": 1e9}], False, "at least one oscillating pair"),
    (0, [], None, "none"),
    (0, [], False, "none found in the band"),
    (None, [], None, "not decided"),
])
def test_counts_in_words(count, modes, complete, expected):
    assert count_in_words(count, modes, complete) == expected


@pytest.mark.parametrize(("share", "expected"), [
    (1.0, "100 %"), (0.10636, "11 %"), (0.059492, "5.9 %"), (0.0020201, "0.2 %"),
    (0.00013937, "0.014 %"), (0.0, "0 %"), (None, "–"),
])
def test_shares_keep_small_values_visible(share, expected):
    assert format_share(share) == expected


def test_number_words():
    assert [number_word(n) for n in (0, 1, 2, 12, 13)] == ["no", "one", "two", "twelve", "13"]


def test_mode_timing_of_the_demo_pair():
    """σ = 4.1304e7 1/s at f = 145.448 MHz, by hand: ω = 2π·145.448e6 = 9.13874e8 rad/s,
    |s| = √(σ² + ω²) = 9.14807e8, ζ = −σ/|s| = −0.045151, Q = 1/(2ζ) = −11.074,
    doubling time ln 2/σ = 0.693147/4.1304e7 = 16.782 ns = 2.441 cycles at 145.448 MHz."""
    timing = mode_timing(145.448e6, 4.1304e7)
    assert timing is not None and timing.growing
    assert timing.damping_ratio == pytest.approx(-0.045151, rel=1e-4)
    assert timing.q == pytest.approx(-11.074, rel=1e-4)
    assert timing.doubling_time_s == pytest.approx(16.782e-9, rel=1e-4)
    assert timing.cycles == pytest.approx(2.441, rel=1e-3)


def test_mode_timing_of_a_real_root_and_a_decaying_pair():
    real = mode_timing(0.0, 1e6)           # s = +1e6: ζ = −1, Q = −0.5, ln 2/1e6 = 693 ns
    assert real is not None and real.damping_ratio == -1.0 and real.q == -0.5
    assert real.cycles is None and real.doubling_time_s == pytest.approx(693.147e-9, rel=1e-6)
    # f = 1 GHz, ω = 2π·1e9, σ = −0.1ω/√0.99: |s|² = ω²(1 + 0.01/0.99) = ω²/0.99, so
    # ζ = −σ/|s| = 0.1 exactly and Q = 1/(2ζ) = 5
    sigma = -2 * math.pi * 1e9 * 0.1 / math.sqrt(0.99)
    damped = mode_timing(1e9, sigma)
    assert damped is not None and not damped.growing
    assert damped.damping_ratio == pytest.approx(0.1, rel=1e-12)
    assert damped.q == pytest.approx(5.0, rel=1e-12)
    assert mode_timing(1e9, None) is None and mode_timing(1e9, 0.0) is None
