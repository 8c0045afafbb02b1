"""What a verdict's numbers mean, in words and in the figures a designer reads off a mode.

- counts: a complex pair of right-half-plane natural frequencies is one oscillation (it counts 2
  in ``unstable_count``), a real one is one mode that grows without ringing;
- a natural frequency s = σ + jω as damping ratio, Q and doubling time (no plotting imports).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from typing import Any

_WORDS = ("no", "one", "two", "three", "four", "five", "six", "seven", "eight", "nine", "ten",
          "eleven", "twelve")


def number_word(n: int) -> str:
    """0 → 'no', 1 → 'one', … 12 → 'twelve', larger numbers as digits."""
    return _WORDS[n] if 0 <= n < len(_WORDS) else str(n)


def _plural(n: int, singular: str, plural: str) -> str:
    return f"{number_word(n)} {singular if n == 1 else plural}"


def count_in_words(count: int | None, modes: Iterable[Mapping[str, Any]] = (),
                   complete: bool | None = None) -> str:
    """``unstable_count`` said in words, split into pairs and real roots by the modes listed.

    2 with one mode at 145 MHz → "one oscillating pair"; 1 with a mode at 0 Hz → "one growing real
    mode"; 3 → "one oscillating pair and one growing real mode"; 0 → "none"; None → "not decided".
    When the modes do not add up to the count, the count is said as it is ("four right-half-plane
    natural frequencies"). ``complete`` False (more may lie outside the band) adds "at least".
    """
    if count is None:
        return "not decided"
    if count == 0:
        return "none" if complete is not False else "none found in the band"
    frequencies = [m.get("frequency_hz") for m in modes]
    pairs = sum(1 for f in frequencies if isinstance(f, int | float) and f > 0)
    reals = sum(1 for f in frequencies if isinstance(f, int | float) and f == 0)
    if 2 * pairs + reals == count:
        parts = []
        if pairs:
            parts.append(_plural(pairs, "oscillating pair", "oscillating pairs"))
        if reals:
            parts.append(_plural(reals, "growing real mode", "growing real modes"))
        text = " and ".join(parts)
    else:
        text = _plural(count, "right-half-plane natural frequency",
                       "right-half-plane natural frequencies")
    return ("at least " + text) if complete is False else text


@dataclass(frozen=True)
class ModeTiming:
    """How fast a natural frequency s = σ + jω grows or decays.

    ζ = −σ/|s| (negative when growing), Q = 1/(2ζ) = −|s|/(2σ) (the second-order convention
    s = ω₀(−ζ ± j√(1 − ζ²)), e.g. Ogata, *Modern Control Engineering*, 5th ed., §5-3 — section from
    memory), envelope e^{σt}: it doubles (σ > 0) or halves (σ < 0) every ln 2/|σ|, which is
    f·ln 2/|σ| cycles of the oscillation.
    """

    damping_ratio: float
    q: float
    doubling_time_s: float      # ln 2 / |σ|: doubling when growing, halving when decaying
    cycles: float | None        # oscillation cycles in that time (None for a real root)
    growing: bool


def mode_timing(frequency_hz: float | None, growth_rate_per_s: float | None) -> ModeTiming | None:
    """ζ, Q and doubling time of s = σ + j2πf; None when σ or f is unknown, or σ = 0."""
    if not isinstance(frequency_hz, int | float) or not isinstance(growth_rate_per_s, int | float):
        return None
    sigma, omega = float(growth_rate_per_s), 2 * math.pi * float(frequency_hz)
    if sigma == 0 or not (math.isfinite(sigma) and math.isfinite(omega)):
        return None
    magnitude = math.hypot(sigma, omega)
    zeta = -sigma / magnitude
    time_s = math.log(2) / abs(sigma)
    return ModeTiming(zeta, 1 / (2 * zeta), time_s,
                      float(frequency_hz) * time_s if frequency_hz > 0 else None, sigma > 0)
