"""Human-readable numbers for reports, tables and CI messages (no plotting imports)."""

from __future__ import annotations

import math

_PREFIXES = ((1e12, "THz"), (1e9, "GHz"), (1e6, "MHz"), (1e3, "kHz"))


def format_hz(value: float | None, digits: int = 4) -> str:
    """146140679.4 → '146.1 MHz'; None or non-finite → '–'."""
    if value is None or not math.isfinite(value):
        return "–"
    for scale, unit in _PREFIXES:
        if abs(value) >= scale:
            return f"{value / scale:.{digits}g} {unit}"
    return f"{value:.{digits}g} Hz"


def format_siemens(value: float | None) -> str:
    """-2.29e-4 → '-0.229 mS'."""
    if value is None or not math.isfinite(value):
        return "–"
    return f"{value * 1e3:.3g} mS"


def format_number(value: float | None, digits: int = 4) -> str:
    if value is None or not math.isfinite(value):
        return "–"
    return f"{value:.{digits}g}"
