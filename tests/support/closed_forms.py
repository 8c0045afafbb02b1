"""Closed-form NDFs and the engine requests that carry them exactly.

``rational`` is Π (s − z)(s − z̄) / Π (s − p)(s − p̄) (times real factors), a real-rational
response whose right-half-plane zeros are known: by the argument principle (N = Z − P, common
practice) its clockwise encirclement count over the whole jω axis is known too.
``ndf_request`` wraps any H in a one-port request whose NDF is H exactly.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from workers.engine.request import CheckOptions, CheckRequest, Device, Network, Port


def rational(s: np.ndarray, zeros: Sequence[complex], poles: Sequence[complex],
             real_zeros: Sequence[float] = (), real_poles: Sequence[float] = ()) -> np.ndarray:
    """Π (s − z)(s − z̄) Π (s − r) / Π (s − p)(s − p̄) Π (s − q); → 1 as s → ∞ when the
    numerator and denominator have the same degree."""
    s = np.asarray(s, dtype=complex)
    num = np.ones_like(s)
    den = np.ones_like(s)
    for z in zeros:
        num = num * (s - z) * (s - np.conj(z))
    for r in real_zeros:
        num = num * (s - r)
    for p in poles:
        den = den * (s - p) * (s - np.conj(p))
    for q in real_poles:
        den = den * (s - q)
    return num / den


def ndf_request(h: np.ndarray, f: np.ndarray, fmax_hz: float | None = None,
                options: CheckOptions | None = None) -> CheckRequest:
    """One probe port with Y_off = 1 S and a device of per-frequency gm = H − 1 from the port to
    itself, so that NDF = det Y_on / det Y_off = 1 + gm = H exactly."""
    gm = np.asarray(h, dtype=complex) - 1.0
    y_on = (1.0 + gm)[:, None, None]
    device = Device("Q1", gm, (0, None), (0, None), fmax_hz=fmax_hz)
    return CheckRequest(np.asarray(f, dtype=float), Network("Y", y_on, np.array([50.0])),
                        (Port("p", "probe"),), (device,), options=options or CheckOptions())
