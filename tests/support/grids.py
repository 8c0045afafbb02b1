"""Frequency grids for the engine tests and benchmarks."""

from __future__ import annotations

import numpy as np

# the refinement tests' and benchmark's bands: 10 MHz to 40 GHz, coarse and ten times denser
COARSE_HZ = np.geomspace(10e6, 40e9, 201)
DENSE_HZ = np.geomspace(10e6, 40e9, 2001)


def log_grid(f_low_hz: float, f_high_hz: float, per_decade: int) -> np.ndarray:
    """Logarithmic frequency grid with ``per_decade`` points per decade (both ends included)."""
    decades = np.log10(f_high_hz / f_low_hz)
    return np.geomspace(f_low_hz, f_high_hz, int(np.ceil(decades * per_decade)) + 1)


def grid_for(poles: np.ndarray, margin_decades: float = 2.5, per_decade: int = 200,
             half_widths: float = 20.0, steps_per_width: float = 4.0) -> np.ndarray:
    """A log grid from ``margin_decades`` below the slowest to above the fastest root, refined
    linearly around every lightly damped root.

    Near a root p = σ + jω_d, arg(jω − p) turns by π over ω_d ± a few |σ| (argument of a
    first-order factor; common practice), so the band ω_d ± ``half_widths``·|σ| gets a step of
    |σ|/``steps_per_width`` (phase steps below 1/steps_per_width rad per root there).
    """
    magnitude = np.abs(poles) / (2 * np.pi)
    base = log_grid(magnitude[magnitude > 0].min() * 10**-margin_decades,
                    magnitude.max() * 10**margin_decades, per_decade)
    pieces = [base]
    for p in poles[poles.imag > 0]:
        sigma, f_d = abs(p.real) / (2 * np.pi), p.imag / (2 * np.pi)
        if sigma == 0 or sigma * half_widths > 0.5 * f_d:
            continue  # on the axis (no grid can resolve it) or broad (the log grid does)
        n = int(2 * half_widths * steps_per_width) + 1
        pieces.append(np.linspace(f_d - half_widths * sigma, f_d + half_widths * sigma, n))
    f = np.unique(np.concatenate(pieces))
    return f[f > 0]
