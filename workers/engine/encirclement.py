"""Counting clockwise encirclements of the origin by a sampled real-rational response.

For a response H(jω) of a real circuit, H(−jω) = conj H(jω), so the change of arg H over the whole
axis ω ∈ (−∞, ∞) is twice its change over [0, ∞). By the argument principle on the contour that
encloses the right half-plane clockwise, the number of clockwise encirclements is

    N = −Δarg H(jω)|_{−∞}^{+∞} / 2π = −Δarg H(jω)|_{0}^{∞} / π = Z − P

(Z, P: right-half-plane zeros and poles). H(0) and H(∞) are real, so the half-axis phase change is
a whole number of π once both ends are closed. A sampled band can only stand for [0, ∞) when it
starts where H has settled to its DC value and stops where H has settled to its limit: both are
measured here ("closure"), with the largest phase step between neighbouring samples.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class EdgeClosure:
    """How far a band edge is from the response's asymptote.

    ``off_axis``: |Im H| / |H| at the edge (0 on the real axis, where H(0) and H(∞) lie).
    ``drift``: |d ln H / d ln f| at the edge (0 once H has settled).
    """

    frequency_hz: float
    value: complex
    off_axis: float
    drift: float

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
        drift = 0.0  # the DC sample itself is the low asymptote
    else:
        dlog_h = np.log(abs(h[towards]) / magnitude) + 1j * (phase[towards] - phase[at])
        drift = float(abs(dlog_h) / abs(np.log(f_next / f_edge)))
    return EdgeClosure(float(f_edge), value, float(off_axis), drift)


def count_encirclements(frequency_hz: np.ndarray, h: np.ndarray) -> Encirclements:
    """Clockwise encirclements of the origin by h(jω) over the whole axis, from samples on f ≥ 0.

    ``h`` must be finite at every sample (drop singular points before calling).
    """
    phase = np.unwrap(np.angle(h))
    steps = np.abs(np.diff(phase))
    i_step = int(np.argmax(steps)) if steps.size else 0
    half_turns = (phase[-1] - phase[0]) / np.pi
    # both ends lie (nearly) on the real axis: snap each to its nearest multiple of π
    closed = np.round(phase[-1] / np.pi) - np.round(phase[0] / np.pi)
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
