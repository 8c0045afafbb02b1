"""Counting clockwise encirclements of the origin by a sampled real-rational response.

For a response H(jω) of a real circuit, H(−jω) = conj H(jω), so the change of arg H over the whole
axis ω ∈ (−∞, ∞) is twice its change over [0, ∞). By the argument principle on the contour that
encloses the right half-plane clockwise, the number of clockwise encirclements is

    N = −Δarg H(jω)|_{−∞}^{+∞} / 2π = −Δarg H(jω)|_{0}^{∞} / π = Z − P

(Z, P: right-half-plane zeros and poles). H(0) and H(∞) are real, so the half-axis phase change is
a whole number of π once both ends are closed. A sampled band can only stand for [0, ∞) when it
starts where H has settled to its DC value and stops where H has settled to its limit: both are
measured here ("closure"), with the largest phase step between neighbouring samples.

Closure has two parts. ``distance``: the edge value lies near the real axis and H has stopped
moving (|d ln H / d ln f| small). ``trend``: the slope s = d ln|H − 1| / d ln f, i.e. how the part
of H that the devices add is going. At the top of a band it must be falling (s < 0: the band
has passed the devices' gain, e.g. s ≈ −1 as a transconductance meets its input capacitance;
every physical device's gain rolls off); at the bottom it must not grow towards DC (s ≥ 0). A
loop whose return ratio is still small but growing towards the edge — an oscillation just outside
the band — shows as s ≈ +1 at the top or s ≈ −1 at the bottom, even while the distance is small,
and a share that is still flat at the top means the devices are still at full gain there.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

NEGLIGIBLE_ADDED = 1e-8  # |H − 1| below this: the devices no longer change H at this edge


@dataclass(frozen=True)
class EdgeClosure:
    """How far a band edge is from the response's asymptote.

    ``off_axis``: |Im H| / |H| at the edge (0 on the real axis, where H(0) and H(∞) lie).
    ``drift``: |d ln H / d ln f| at the edge (0 once H has settled).
    ``trend``: d ln|H − 1| / d ln f at the edge (module docstring); None where |H − 1| is
    negligible (the devices no longer change H there) or the edge is 0 Hz.
    """

    frequency_hz: float
    value: complex
    off_axis: float
    drift: float
    trend: float | None = None

    @property
    def distance(self) -> float:
        return max(self.off_axis, self.drift)


@dataclass(frozen=True)
class Encirclements:
    """Winding of a sampled curve about the origin, and whether the count can be trusted."""

    clockwise: int
    residual: float  # |Δarg/π − N|: how far the closed count is from an integer before rounding
    low: EdgeClosure
    high: EdgeClosure
    max_phase_step_deg: float
    max_phase_step_at_hz: float
    min_abs: float
    min_abs_at_hz: float


def _edge(frequency_hz: np.ndarray, h: np.ndarray, phase: np.ndarray, at: int, towards: int
          ) -> EdgeClosure:
    value = complex(h[at])
    magnitude = abs(value)
    off_axis = abs(value.imag) / magnitude if magnitude > 0 else np.inf
    f_edge, f_next = frequency_hz[at], frequency_hz[towards]
    if f_edge <= 0.0:
        drift, trend = 0.0, None  # the DC sample itself is the low asymptote
    else:
        dlog_f = np.log(f_next / f_edge)
        dlog_h = np.log(abs(h[towards]) / magnitude) + 1j * (phase[towards] - phase[at])
        drift = float(abs(dlog_h) / abs(dlog_f))
        added_edge, added_next = abs(value - 1.0), abs(complex(h[towards]) - 1.0)
        negligible = max(added_edge, added_next) < NEGLIGIBLE_ADDED
        trend = None if negligible or min(added_edge, added_next) == 0.0 else \
            float(np.log(added_next / added_edge) / dlog_f)
    return EdgeClosure(float(f_edge), value, float(off_axis), drift, trend)


def count_encirclements(frequency_hz: np.ndarray, h: np.ndarray,
                        phase: np.ndarray | None = None,
                        low_closure_rad: float | None = None,
                        high_closure_rad: float | None = None) -> Encirclements:
    """Clockwise encirclements of the origin by h(jω) over the whole axis, from samples on f ≥ 0.

    ``h`` must be finite at every sample (drop singular points before calling). ``phase``: the
    caller's ``np.unwrap(np.angle(h))``, when it has it already. ``low_closure_rad``: the change
    of arg h from DC to the lowest sample along the path a settled DC edge assumes;
    ``high_closure_rad``: from the top sample to ∞ (``workers.engine.edges``). An edge without
    a closure is snapped to its nearest multiple of π (a count that cannot be trusted).
    """
    if phase is None:
        phase = np.unwrap(np.angle(h))
    steps = np.abs(np.diff(phase))
    i_step = int(np.argmax(steps)) if steps.size else 0
    start = phase[0] - low_closure_rad if low_closure_rad is not None else phase[0]
    end = phase[-1] + high_closure_rad if high_closure_rad is not None else phase[-1]
    half_turns = (end - start) / np.pi
    # closed ends lie on the real axis by construction; open ones are snapped to it
    closed = np.round(end / np.pi) - np.round(start / np.pi)
    magnitude = np.abs(h)
    i_min = int(np.argmin(magnitude))
    return Encirclements(
        clockwise=int(-closed),
        residual=float(abs(half_turns - closed)),
        low=_edge(frequency_hz, h, phase, 0, 1),
        high=_edge(frequency_hz, h, phase, -1, -2),
        max_phase_step_deg=float(np.degrees(steps[i_step])) if steps.size else 0.0,
        max_phase_step_at_hz=float(0.5 * (frequency_hz[i_step] + frequency_hz[i_step + 1]))
        if steps.size else float(frequency_hz[0]),
        min_abs=float(magnitude[i_min]),
        min_abs_at_hz=float(frequency_hz[i_min]),
    )
