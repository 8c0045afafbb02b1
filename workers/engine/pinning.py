"""Whether the samples themselves pin a right-half-plane zero of the NDF model down.

A zero z = σ + jω₀ of NDF and its mirror image −z̄ = −σ + jω₀ give the same |NDF(jω)| on the
whole axis: reflecting a zero across the axis multiplies NDF by the all-pass factor
A(s) = (s + z̄)/(s − z) (with its conjugate for a pair), |A(jω)| = 1. Magnitude data therefore
cannot tell an unstable natural frequency from its damped mirror; only the phase can (Bode's
gain–phase relation fixes the phase from the magnitude only for a minimum-phase function, up to
such all-pass factors; H. W. Bode, Network Analysis and Feedback Amplifier Design, 1945, ch. 14).

So a model zero in the right half-plane is *pinned down* by the data when the samples reject its
mirror: at some sample the mirrored NDF, NDF·A, would differ from the data by at least
``PIN_MARGIN`` times the model's own error level (its leave-out error or noise floor, relative to
max |NDF|), and by at least ``PIN_MIN_PHASE_DEG`` of phase. The model reproduces the samples to
that error level (it validated on samples it did not see), so any model that put the zero in the
left half-plane instead would miss the samples by far more than their noise: the data, not the
model's extrapolation, place the zero in the right half-plane. The error level is the largest
miss over all left-out samples, about 3–4 standard deviations of the data's noise for a few
hundred samples, so a mirror missing one sample by ``PIN_MARGIN`` times that level sits some 30
standard deviations out (common practice for Gaussian noise). A zero whose mirror the samples
cannot reject (too few samples near it for its sharpness against the data's noise) is reported
but not counted, and the next sweep asks for points around it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

PIN_MARGIN = 10.0        # the mirror must miss the data by this × the model's error level
PIN_MIN_PHASE_DEG = 2.0  # ... and move the phase at some sample by at least this
REAL_ZERO = 1e-9         # |Im z| below this × |z|: a real zero (no conjugate partner)


@dataclass(frozen=True)
class PinEvidence:
    """How strongly the samples reject a zero's mirror image (module docstring)."""

    margin: float          # max |NDF·(A − 1)| / max|NDF| over the samples, / the error level
    phase_deg: float       # largest |arg A| at a sample
    error_level: float     # the model's error level used (relative to max |NDF|)

    @property
    def pinned(self) -> bool:
        return self.margin >= PIN_MARGIN and self.phase_deg >= PIN_MIN_PHASE_DEG


def mirror_factor(s_rad_s: np.ndarray, zero_rad_s: complex) -> np.ndarray:
    """A(s) that moves ``zero_rad_s`` (and its conjugate, if complex) to its mirror image."""
    z = complex(zero_rad_s)
    if abs(z.imag) <= REAL_ZERO * abs(z):
        return (s_rad_s + z.real) / (s_rad_s - z.real)
    zc = z.conjugate()
    return (s_rad_s + zc) * (s_rad_s + z) / ((s_rad_s - z) * (s_rad_s - zc))


def mirror_evidence(frequency_hz: np.ndarray, ndf: np.ndarray, zero_rad_s: complex,
                    error_level: float) -> PinEvidence:
    """The samples' evidence against the mirror image of ``zero_rad_s`` (module docstring).

    ``ndf``: the sampled NDF (finite); ``error_level``: the model's leave-out error or noise
    floor relative to max |NDF| (floored at 1e-13, below which double precision cannot speak).
    """
    s = 2j * np.pi * np.asarray(frequency_hz, dtype=float)
    h = np.asarray(ndf, dtype=complex)
    with np.errstate(divide="ignore", invalid="ignore"):
        a = mirror_factor(s, zero_rad_s)
    finite = np.isfinite(a)
    level = max(float(error_level), 1e-13)
    if not finite.any():
        return PinEvidence(0.0, 0.0, level)
    moved = np.abs(h[finite]) * np.abs(a[finite] - 1.0) / float(np.max(np.abs(h)))
    phase = float(np.degrees(np.max(np.abs(np.angle(a[finite])))))
    return PinEvidence(float(np.max(moved)) / level, phase, level)
