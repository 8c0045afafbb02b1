"""Roots of 1 + G·φ(s) for many conductances G at once, φ a real-rational partial fraction.

φ(s) = Σ r_p/(s − p) + c + d·s with the poles in conjugate pairs (a real circuit: φ(s̄) is the
conjugate of φ(s)). A pair's two terms are one real second-order block,

    r/(s − p) + r̄/(s − p̄) = C (sI − A)⁻¹ B,  A = [[a, b], [−b, a]], B = [1, 0]ᵀ,
    C = [2 Re r, 2 Im r],  p = a + jb,

and a real pole a 1 × 1 block (A = a, B = 1, C = r): φ = c + d·s + C (sI − A)⁻¹ B, a real
state-space realization (common practice; e.g. T. Kailath, *Linear Systems*, 1980, ch. 2 —
from memory). With x = (sI − A)⁻¹ B u, the equation (1 + G c + G d s) u + G C x = 0 makes the
roots the eigenvalues of

    [[A, B], [−C/d, −(1 + G c)/(G d)]]      (G·d ≠ 0), or
    A − G/(1 + G c) · B C                   (no slope term),

both real, so LAPACK's real solver does the work (about 2.5× faster than the complex one at
this size). The slope term is dropped where G·|d|·s_top stays below ``SLOPE_NEGLIGIBLE`` ×
|1 + G c| (it moves no root in the band by more than that share, and the first form would carry
the huge entry 1/(G d)). Poles that do not pair up fall back to the complex diagonal form.
"""

from __future__ import annotations

import numpy as np

SLOPE_NEGLIGIBLE = 1e-6
PAIR_TOLERANCE = 1e-9   # |p − conj(q)| below this × |p|: a conjugate pair
REAL_POLE = 1e-9        # |Im p| below this × |p|: a real pole


def _pairs(poles: np.ndarray) -> tuple[list[int], list[int], list[int]] | None:
    """Indices of the upper poles, their conjugate partners, and the real poles; None when
    the poles do not pair up."""
    size = np.abs(poles)
    real = [int(k) for k in np.flatnonzero(np.abs(poles.imag) <= REAL_POLE * size)]
    upper = [int(k) for k in np.flatnonzero(poles.imag > REAL_POLE * size)]
    lower = [int(k) for k in np.flatnonzero(poles.imag < -REAL_POLE * size)]
    if len(upper) != len(lower):
        return None
    partners = []
    for k in upper:
        j = min(lower, key=lambda i: abs(poles[i] - np.conj(poles[k])), default=None)
        if j is None or abs(poles[j] - np.conj(poles[k])) > PAIR_TOLERANCE * size[k] \
                or j in partners:
            return None
        partners.append(j)
    return upper, partners, real


class SecularRoots:
    """φ of several placements (columns) sharing one pole set, in units of ``scale_rad_s``."""

    def __init__(self, poles_rad_s: np.ndarray, residues: np.ndarray, constant: np.ndarray,
                 slope: np.ndarray, scale_rad_s: float) -> None:
        self.scale = float(scale_rad_s)
        p = np.asarray(poles_rad_s, dtype=complex) / self.scale
        r = np.asarray(residues, dtype=complex) / self.scale          # (P, M)
        self.constant = np.asarray(constant).real
        self.slope = np.asarray(slope).real                            # per scaled s
        pairs = _pairs(p) if p.size else ([], [], [])
        if pairs is None:
            self.a = np.diag(p)
            self.b = np.ones(p.size, dtype=complex)
            self.c = r.T                                               # (M, P)
            return
        upper, partners, real = pairs
        size = 2 * len(upper) + len(real)
        self.a = np.zeros((size, size))
        self.b = np.zeros(size)
        self.c = np.zeros((r.shape[1], size))
        for n, (k, j) in enumerate(zip(upper, partners, strict=True)):
            i = 2 * n
            self.a[i:i + 2, i:i + 2] = [[p[k].real, p[k].imag], [-p[k].imag, p[k].real]]
            self.b[i] = 1.0
            mean = 0.5 * (r[k] + np.conj(r[j]))
            self.c[:, i], self.c[:, i + 1] = 2 * mean.real, 2 * mean.imag
        for n, k in enumerate(real, start=2 * len(upper)):
            self.a[n, n] = p[k].real
            self.b[n] = 1.0
            self.c[:, n] = r[k].real

    def roots(self, columns: np.ndarray, conductances: np.ndarray, top_rad_s: float
              ) -> np.ndarray:
        """(K, P + 1) roots (rad/s) of 1 + G_k φ_(columns_k)(s), one row per pair, NaN-padded:
        every placement's trials in one stacked eigenvalue call."""
        g = np.asarray(conductances, dtype=float)
        columns = np.asarray(columns, dtype=int)
        c, d = self.constant[columns], self.slope[columns]
        rows = self.c[columns]                                         # (K, P)
        loop = 1.0 + g * c
        slope = np.abs(g * d) * (top_rad_s / self.scale) >= SLOPE_NEGLIGIBLE * np.abs(loop)
        size = self.a.shape[0]
        found = np.full((g.size, size + 1), np.nan + 0j)
        with np.errstate(all="ignore"):
            if size and (~slope).any():
                beta = (g / loop)[~slope]
                coupling = self.b[None, :, None] * rows[~slope][:, None, :]
                found[~slope, :size] = np.linalg.eigvals(
                    self.a[None] - beta[:, None, None] * coupling)
            if slope.any():
                gs = g[slope]
                stack = np.zeros((gs.size, size + 1, size + 1), dtype=self.a.dtype)
                stack[:, :size, :size] = self.a
                stack[:, :size, size] = self.b
                stack[:, size, :size] = -rows[slope] / d[slope][:, None]
                stack[:, size, size] = -(1.0 + gs * c[slope]) / (gs * d[slope])
                found[slope] = np.linalg.eigvals(stack)
        found[~np.isfinite(found)] = np.nan
        return found * self.scale
