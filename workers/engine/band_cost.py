"""What a stabiliser costs in the operating band: the change of the external two-port's MSG/MAG
and |S21| when the part is added.

With the part G·e·eᵀ in the terminated port Y, Sherman–Morrison gives the new impedance
Z' = Z − G (Z e)(eᵀ Z) / (1 + G eᵀ Z e) (Golub & Van Loan, *Matrix Computations*, 4th ed.,
sec. 2.1.4); the external two-port follows from its external block Q' as in ``external``
(Z_ext = Q' (I − T Q')⁻¹, T the terminations), then S and MSG/MAG (``twoport``).
"""

from __future__ import annotations

import numpy as np

from workers.engine import twoport
from workers.engine.advice_report import InBandCost
from workers.engine.check import Analysis
from workers.engine.conversions import batched_solve, termination_admittances
from workers.engine.errors import InputError


class OperatingBandCost:
    """The two-port in the operating band, ready to price parts (None costs without exactly
    two external ports or without samples in the band)."""

    def __init__(self, analysis: Analysis, band_hz: tuple[float, float]) -> None:
        request = analysis.request
        self.band_hz = (float(band_hz[0]), float(band_hz[1]))
        self.ext = [k for k, p in enumerate(request.ports) if p.role == "external"]
        f = request.frequency_hz
        chosen = analysis.valid & (f >= self.band_hz[0]) & (f <= self.band_hz[1])
        chosen &= np.isfinite(analysis.z_on).all(axis=(1, 2))
        self.z = analysis.z_on[chosen]
        self.termination = termination_admittances(request)[self.ext]
        self.z0 = np.asarray(request.network.z0_ohm)[self.ext]
        self.base = self._gains(self.z[:, self.ext][:, :, self.ext]) if self.usable else None

    @property
    def usable(self) -> bool:
        return len(self.ext) == 2 and self.z.shape[0] > 0

    def _gains(self, q: np.ndarray) -> tuple[np.ndarray, np.ndarray] | None:
        """(MSG/MAG in dB, |S21| in dB) from the terminated external block ``q``."""
        solved = batched_solve(np.eye(2) - self.termination[None, :, None] * q,
                               np.eye(2, dtype=complex))
        s = twoport.z_to_s(q @ solved.values, self.z0)
        if solved.singular.any() or not np.isfinite(s).all():
            return None
        try:
            factors = twoport.two_port_factors(s)
        except InputError:
            return None
        with np.errstate(divide="ignore"):
            return factors.max_gain_db, 20 * np.log10(np.abs(s[:, 1, 0]))

    def cost(self, vector: np.ndarray, conductance_s: float) -> InBandCost | None:
        """The change with conductance ``conductance_s`` along ``vector`` (e) in the band."""
        if not self.usable or self.base is None:
            return None
        ze = self.z @ vector
        ez = vector @ self.z
        loop = 1.0 + conductance_s * (ez @ vector)
        ext = self.ext
        q = self.z[:, ext][:, :, ext] - conductance_s * (
            ze[:, ext, None] * ez[:, None, ext]) / loop[:, None, None]
        gains = self._gains(q)
        if gains is None:
            return None

        def largest(change: np.ndarray) -> float | None:
            finite = np.isfinite(change)
            if not finite.any():
                return None
            return float(change[finite][np.argmax(np.abs(change[finite]))])

        return InBandCost(self.band_hz, largest(gains[0] - self.base[0]),
                          largest(gains[1] - self.base[1]), int(self.z.shape[0]))
