"""Human-readable numbers for reports, tables and CI messages (no plotting imports).

Engineering notation: the exponent is a multiple of three and is written as an SI prefix
(BIPM, *The International System of Units*, 9th edition, 2019, Table 7), so the mantissa lies in
[1, 1000): 4445.6 Ω → "4.45 kΩ", 1.4545e8 Hz → "145.4 MHz", −2.29e-4 S → "−229 µS".
"""

from __future__ import annotations

import math

MINUS = "\u2212"
#: SI prefixes by power of ten (micro as U+00B5, as most fonts carry it)
SI_PREFIXES = {-15: "f", -12: "p", -9: "n", -6: "µ", -3: "m", 0: "", 3: "k", 6: "M", 9: "G",
               12: "T", 15: "P"}
_SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")


def _finite(value: float | None) -> bool:
    return value is not None and isinstance(value, int | float) and math.isfinite(value)


def _mantissa(value: float, digits: int, lowest: int, highest: int) -> tuple[str, int]:
    """(mantissa text with ``digits`` significant digits, exponent, a multiple of 3)."""
    exponent = 3 * math.floor(math.log10(abs(value)) / 3)
    exponent = min(max(exponent, lowest), highest)
    rounded = float(f"{value / 10.0 ** exponent:.{digits}g}")
    if abs(rounded) >= 1000 and exponent < highest:  # 999.96 rounds up into the next prefix
        exponent += 3
        rounded = float(f"{value / 10.0 ** exponent:.{digits}g}")
    text = f"{rounded:.{digits}g}"
    if "e" in text:  # a mantissa at the end of the prefix range: write it out
        text = f"{rounded:.{max(digits - 1, 0)}f}".rstrip("0").rstrip(".")
    return text.replace("-", MINUS), exponent


def format_eng(value: float | None, unit: str = "", digits: int = 3) -> str:
    """A value in engineering notation with an SI prefix: (4445.6, "Ω") → "4.45 kΩ".

    ``digits`` significant digits (trailing zeros dropped, as ``%g`` does); 0 → "0 Ω";
    None or non-finite → "–".
    """
    if not _finite(value):
        return "–"
    assert value is not None
    if value == 0:
        return f"0 {unit}".rstrip()
    text, exponent = _mantissa(float(value), digits, min(SI_PREFIXES), max(SI_PREFIXES))
    return f"{text} {SI_PREFIXES[exponent]}{unit}".rstrip()


def format_power_of_ten(value: float | None, unit: str = "", digits: int = 3) -> str:
    """Engineering notation with the power of ten written out, for units that take no prefix
    well (1/s): 4.13e7 → "41.3 × 10⁶ s⁻¹" with unit "s⁻¹"; exponent 0 leaves the factor out."""
    if not _finite(value):
        return "–"
    assert value is not None
    if value == 0:
        return f"0 {unit}".rstrip()
    text, exponent = _mantissa(float(value), digits, -300, 300)
    factor = "" if exponent == 0 else f" × 10{str(exponent).translate(_SUPERSCRIPT)}"
    return f"{text}{factor} {unit}".rstrip()


def format_hz(value: float | None, digits: int = 4) -> str:
    """146140679.4 → '146.1 MHz'; None or non-finite → '–'."""
    return format_eng(value, "Hz", digits)


def format_siemens(value: float | None, digits: int = 3) -> str:
    """-2.29e-4 → '−229 µS'."""
    return format_eng(value, "S", digits)


def format_ohm(value: float | None, digits: int = 3) -> str:
    """4445.6 → '4.45 kΩ'."""
    return format_eng(value, "Ω", digits)


def format_seconds(value: float | None, digits: int = 3) -> str:
    """1.678e-8 → '16.8 ns'."""
    return format_eng(value, "s", digits)


def format_number(value: float | None, digits: int = 4) -> str:
    """A number with ``digits`` significant digits (minus as U+2212); where ``%g`` would switch
    to e-notation, the power of ten is written out instead (4370 → "4.37 × 10³" with 3 digits);
    '–' when missing."""
    if not _finite(value):
        return "–"
    text = f"{value:.{digits}g}"
    if "e" in text:
        return format_power_of_ten(value, "", digits)
    return text.replace("-", MINUS)


def format_factor(value: float | None, digits: int = 3) -> str:
    """A dimensionless factor (K, μ): never an SI prefix, so "−616", "4.37 × 10³",
    3.76e16 → "37.6 × 10¹⁵"."""
    return format_number(value, digits)


def format_share(share: float | None) -> str:
    """A share of 1 as a percentage, with more digits when small: 1.0 → "100 %", 0.106 →
    "11 %", 0.0594 → "5.9 %", 0.00202 → "0.2 %", 0.000139 → "0.014 %"."""
    if not _finite(share):
        return "–"
    percent = 100.0 * float(share)  # type: ignore[arg-type]
    if abs(percent) >= 10 or percent == 0:
        return f"{percent:.0f} %"
    if abs(percent) >= 1:
        return f"{percent:.1f} %"
    return f"{percent:.2g} %" if abs(percent) >= 0.01 else f"{percent:.1g} %"


NEAR_ONE = 1e-3


def format_near_one(value: float | None, symbol: str, digits: int = 4) -> str:
    """A factor that is compared with 1 (K, μ): within NEAR_ONE of 1 the distance from 1 is shown
    too, since "1" alone hides the side: 1.0000126 → "1.00001 (μ − 1 = 12.6 × 10⁻⁶)"."""
    if not _finite(value):
        return "–"
    assert value is not None
    distance = value - 1.0
    if distance == 0 or abs(distance) >= NEAR_ONE:
        return format_number(value, digits)
    shown = f"{value:.{2 - math.floor(math.log10(abs(distance)))}f}"
    return (f"{shown.replace('-', MINUS)} ({symbol} {MINUS} 1 = "
            f"{format_power_of_ten(distance, '', 3)})")
