"""MAG and MSG near K = 1 against mpmath at 50 digits (issue 13 part 2).

Reference: mpmath (arbitrary precision) evaluating the textbook formulas from the very float64
S-parameters the engine gets (each float is exact in mpmath): K = (1 - |S11|² - |S22|² + |Δ|²) /
(2 |S12 S21|) (Rollett 1962), MAG = |S21/S12| (K - √(K² - 1)) for K >= 1 and B1 > 0, MSG =
|S21/S12| (Gonzalez, Microwave Transistor Amplifiers, 2nd ed., sec. 3.8). At 50 digits the
cancellation near K = 1 still leaves over 30 correct digits.

Circuits: nearly lossless two-ports, S = (1 - δ) U Uᵀ with U a seeded random unitary matrix
(U Uᵀ is symmetric and unitary: a lossless reciprocal two-port, common practice), so K - 1 is
of the order of δ; and "active" versions with S21·g and S12/g, which keep K (|S12 S21| and Δ are
unchanged) and multiply MAG by g².
"""

from __future__ import annotations

import mpmath
import numpy as np
import pytest

from workers.engine.twoport import two_port_factors

SEED = 20261203
LOSSES = [0.0, 1e-16, 1e-15, 1e-13, 1e-11, 1e-9, 1e-7, 1e-5, 1e-3, 1e-1]
GAINS = [1.0, 3.0, 40.0]
EPS = np.finfo(float).eps


def _near_lossless(loss: float, gain: float, count: int = 64) -> np.ndarray:
    rng = np.random.default_rng(SEED)
    a = rng.normal(size=(count, 2, 2)) + 1j * rng.normal(size=(count, 2, 2))
    u, _ = np.linalg.qr(a)
    s = (1.0 - loss) * (u @ u.transpose(0, 2, 1))
    s[:, 1, 0] *= gain
    s[:, 0, 1] /= gain
    return s


def _reference(s: np.ndarray) -> tuple[list, list, list]:
    """(K, MAG or None, MSG) at 50 digits from the float64 entries taken exactly."""
    ks, mags, msgs = [], [], []
    with mpmath.workdps(50):
        for matrix in s:
            s11, s12, s21, s22 = (mpmath.mpc(complex(matrix[i, j]).real, complex(matrix[i, j]).imag)
                                  for i, j in ((0, 0), (0, 1), (1, 0), (1, 1)))
            delta = s11 * s22 - s12 * s21
            k = (1 - abs(s11) ** 2 - abs(s22) ** 2 + abs(delta) ** 2) / (2 * abs(s12 * s21))
            b1 = 1 + abs(s11) ** 2 - abs(s22) ** 2 - abs(delta) ** 2
            msg = abs(s21) / abs(s12)
            mag = msg * (k - mpmath.sqrt(k * k - 1)) if k >= 1 and b1 > 0 else None
            ks.append(k)
            mags.append(mag)
            msgs.append(msg)
    return ks, mags, msgs


@pytest.mark.parametrize("gain", GAINS)
@pytest.mark.parametrize("loss", LOSSES)
def test_mag_and_msg_match_mpmath_near_k_equal_one(loss: float, gain: float) -> None:
    s = _near_lossless(loss, gain)
    factors = two_port_factors(s)
    ks, mags, msgs = _reference(s)
    for index, (k, mag, msg) in enumerate(zip(ks, mags, msgs, strict=True)):
        assert float(abs(factors.msg[index] - msg) / msg) <= 2 * EPS
        # K itself: relative error of a few ulp against the 50-digit value
        assert float(abs(factors.k[index] - k) / k) <= 8 * EPS
        if mag is None or not factors.mag_applies[index]:
            # only where K rounds across 1 may the two disagree on whether MAG applies
            assert abs(float(k) - 1.0) <= 8 * EPS
            continue
        assert float(abs(factors.mag[index] - mag) / mag) <= 8 * EPS, (loss, gain, float(k - 1))


def test_the_cases_reach_k_within_1e_15_of_one() -> None:
    # the test above is only worth something if it includes K - 1 at rounding level
    ks, _, _ = _reference(_near_lossless(1e-16, 1.0))
    assert min(abs(float(k) - 1.0) for k in ks) < 1e-15
