"""Maximum available gain (MAG) and maximum stable gain (MSG) of a two-port, accurate at K = 1.

MAG = |S21/S12| (K - √(K² - 1)) for K >= 1 and B1 > 0; MSG = |S21/S12| (Gonzalez, Microwave
Transistor Amplifiers, 2nd ed., section 3.8). With N = 1 - |S11|² - |S22|² + |Δ|² (the numerator
of Rollett's K) and D = 2 |S12 S21|, K - √(K² - 1) = 1/(K + √(K² - 1)) gives

    MAG = 2 |S21|² / (N + √(N² - D²)),

which has no cancelling difference outside the root and stays finite for a unilateral device
(S12 = 0: MAG = |S21|² / ((1 - |S11|²)(1 - |S22|²))). Under the root, N² - D² = (N - D)(N + D)
vanishes at K = 1: formed in float64 it keeps only an absolute error of about eps N², and its
square root then carries about √eps of N into MAG (1e-8 relative for nearly lossless data). Here
N and N² - D² are formed from the S-parameters' own real and imaginary parts in double-double
arithmetic (``workers.engine.exact``: error-free products and sums), so the root is right to a
few ulp of its own size wherever N² - D² is above about 2^-100 N².
"""

from __future__ import annotations

import numpy as np

from workers.engine import exact


def root_terms(s11: np.ndarray, s12: np.ndarray, s21: np.ndarray, s22: np.ndarray
               ) -> tuple[np.ndarray, np.ndarray]:
    """N = 1 - |S11|² - |S22|² + |Δ|² and N² - (2 |S12 S21|)², each rounded once from
    double-double values (Δ = S11 S22 - S12 S21)."""
    one = (np.ones(s11.shape), np.zeros(s11.shape))
    s11_s22 = exact.complex_product(s11, s22)
    loop = exact.complex_product(s12, s21)
    delta_re = exact.add(s11_s22[0], exact.negate(loop[0]))
    delta_im = exact.add(s11_s22[1], exact.negate(loop[1]))
    delta_sq = exact.add(exact.multiply(delta_re, delta_re), exact.multiply(delta_im, delta_im))
    margins = exact.add(exact.abs_squared(s11), exact.abs_squared(s22))
    n = exact.add(exact.add(one, exact.negate(margins)), delta_sq)
    loop_sq = exact.multiply(exact.abs_squared(s12), exact.abs_squared(s21))  # |S12 S21|²
    difference = exact.add(exact.multiply(n, n), exact.negate(exact.scale(loop_sq, 4.0)))
    return exact.value(n), exact.value(difference)


def maximum_available_gain(s21: np.ndarray, n: np.ndarray, difference: np.ndarray,
                           applies: np.ndarray) -> np.ndarray:
    """MAG = 2 |S21|² / (N + √(N² - D²)) where ``applies`` (K >= 1, B1 > 0), else nan."""
    root = np.sqrt(np.clip(difference, 0.0, None))
    denominator = np.where(applies, n + root, 1.0)
    return np.where(applies, 2.0 * np.abs(s21) ** 2 / denominator, np.nan)
