"""Normalized determinant function and successive return differences.

NDF(jω) = det Y(all devices on) / det Y(all off), computed from log-determinants so that large
admittance matrices cannot underflow. With the devices as rank-one terms gm_d·u_d·v_dᵀ and
M = Vᵀ Y_off⁻¹ U (D × D), the matrix determinant lemma gives

    det Y(devices 1..k on) / det Y_off = det(I_k + G_k M_k)   (leading k × k block),

so the successive return differences F_k = det Y(1..k on) / det Y(1..k−1 on) are the pivots of
an LU factorisation of I + G·M without pivoting, and T_k = F_k − 1 is Bode's return ratio.

When only the devices are given (no ``gain_off`` data), everything comes from the one inverse
Z_on = Y_on⁻¹ that the node analysis needs anyway: with P = Vᵀ Z_on U and A = I − G·P,

    det Y(devices in S switched off) / det Y_on = det A_SS,

so NDF = 1 / det A and F_k = det A_{k+1..D} / det A_{k..D} (trailing principal minors)
(H. W. Bode, *Network Analysis and Feedback Amplifier Design*, 1945, ch. IV; the NDF as the product
of return differences: A. Platzker, W. Struble, K. Hetzler, "Instabilities diagnosis and the role
of K in microwave circuits", IEEE MTT-S Int. Microwave Symp. Digest, 1993 — cited from memory).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from workers.engine.conversions import batched_solve


@dataclass(frozen=True)
class LoopResult:
    """Per-frequency NDF and per-device return differences (F,) and (F, D)."""

    ndf: np.ndarray
    return_difference: np.ndarray
    singular_on: np.ndarray
    singular_off: np.ndarray

    @property
    def return_ratio(self) -> np.ndarray:
        return self.return_difference - 1.0


def determinant_ratio(y_on: np.ndarray, y_off: np.ndarray
                      ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """det y_on / det y_off per frequency via slogdet; NaN where y_off is singular.

    Returns (ratio, singular_on, singular_off).
    """
    sign_on, log_on = np.linalg.slogdet(y_on)
    sign_off, log_off = np.linalg.slogdet(y_off)
    singular_on = ~np.isfinite(log_on)
    singular_off = ~np.isfinite(log_off)
    with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
        ratio = np.where(
            singular_off, np.nan + 0j,
            np.where(singular_on, 0j, (sign_on / np.where(singular_off, 1, sign_off))
                     * np.exp(np.where(singular_on | singular_off, 0.0, log_on - log_off))),
        )
    return ratio, singular_on, singular_off


def successive_return_differences(y_off: np.ndarray, gains: np.ndarray, u: np.ndarray,
                                  v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """F_k (F, D) for devices switched on one at a time, in order; and the singular mask of y_off.

    Pivots of LU(I + G·M) without pivoting, M = Vᵀ Y_off⁻¹ U (module docstring).
    """
    n_freq, n_dev = gains.shape
    if n_dev == 0:
        return np.ones((n_freq, 0), dtype=complex), np.zeros(n_freq, dtype=bool)
    solved = batched_solve(y_off, np.broadcast_to(u.astype(complex), (n_freq, *u.shape)))
    m = np.einsum("nd,fne->fde", v, solved.values)
    pivots = _leading_pivots(np.eye(n_dev) + gains[:, :, None] * m)
    return pivots, solved.singular


def _leading_pivots(a: np.ndarray) -> np.ndarray:
    """Pivots of LU without pivoting of every (D, D) matrix in a (F, D, D) stack (a is consumed).

    The k-th pivot is the ratio of the k-th to the (k−1)-th leading principal minor.
    """
    n_freq, n_dev = a.shape[:2]
    pivots = np.empty((n_freq, n_dev), dtype=complex)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        for k in range(n_dev):
            pivots[:, k] = a[:, k, k]
            if k + 1 < n_dev:
                factors = a[:, k + 1:, k] / a[:, k, k][:, None]
                a[:, k + 1:, k + 1:] -= factors[:, :, None] * a[:, k, k + 1:][:, None, :]
    return pivots


def loops_from_impedance(z_on: np.ndarray, singular_on: np.ndarray, gains: np.ndarray,
                         u: np.ndarray, v: np.ndarray) -> LoopResult:
    """NDF and F_k from Z_on = Y_on⁻¹ alone (module docstring: trailing minors of I − G·P)."""
    n_freq, n_dev = gains.shape
    p = v.T.astype(complex) @ (z_on @ u.astype(complex))
    a = np.eye(n_dev) - gains[:, :, None] * p
    # trailing minors of a = leading minors of a with the device order reversed
    pivots = _leading_pivots(a[:, ::-1, ::-1].copy())
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        f_k = 1.0 / pivots[:, ::-1]
        ndf = np.prod(f_k, axis=1) if n_dev else np.ones(n_freq, dtype=complex)
    ndf = np.where(singular_on, np.nan + 0j, ndf)
    return LoopResult(ndf=ndf, return_difference=f_k, singular_on=singular_on,
                      singular_off=~np.isfinite(ndf) & ~singular_on)


def loop_analysis(y_on: np.ndarray, y_off: np.ndarray, gains: np.ndarray, u: np.ndarray,
                  v: np.ndarray) -> LoopResult:
    """NDF from the two determinants and the return differences from the rank-one lemma."""
    ndf, singular_on, singular_off = determinant_ratio(y_on, y_off)
    f_k, singular_solve = successive_return_differences(y_off, gains, u, v)
    return LoopResult(ndf=ndf, return_difference=f_k, singular_on=singular_on,
                      singular_off=singular_off | singular_solve)
