"""Double-double arithmetic on numpy arrays: error-free products and sums, vectorised.

A double-double value is a pair (hi, lo) of float64 arrays with |lo| <= ulp(hi)/2, worth
hi + lo (about 106 significant bits). Sources: T. J. Dekker, "A floating-point technique for
extending the available precision", Numer. Math. 18 (1971) (TwoProduct by Veltkamp's split,
exact without a fused multiply-add); D. E. Knuth, TAOCP vol. 2, 3rd ed., sec. 4.2.2 (TwoSum);
the add/multiply of pairs follow Dekker's add2/mul2. Valid away from overflow (|x| < 2^996)
and underflow of the error terms.
"""

from __future__ import annotations

import numpy as np

Pair = tuple[np.ndarray, np.ndarray]

_SPLIT = 134217729.0  # 2^27 + 1


def split(a: np.ndarray) -> Pair:
    """a = high + low exactly, each with at most 26 significant bits (Veltkamp)."""
    c = a * _SPLIT
    high = c - (c - a)
    return high, a - high


def two_product(a: np.ndarray, b: np.ndarray) -> Pair:
    """a·b = p + e exactly (Dekker): p = fl(a·b)."""
    p = a * b
    a_hi, a_lo = split(a)
    b_hi, b_lo = split(b)
    e = ((a_hi * b_hi - p) + a_hi * b_lo + a_lo * b_hi) + a_lo * b_lo
    return p, e


def two_sum(a: np.ndarray, b: np.ndarray) -> Pair:
    """a + b = s + e exactly (Knuth): s = fl(a + b)."""
    s = a + b
    v = s - a
    return s, (a - (s - v)) + (b - v)


def _normalise(hi: np.ndarray, lo: np.ndarray) -> Pair:
    s = hi + lo
    return s, lo - (s - hi)


def add(x: Pair, y: Pair) -> Pair:
    """x + y for double-double pairs (relative error about 2^-104 of |x| + |y|)."""
    s, e = two_sum(x[0], y[0])
    t, f = two_sum(x[1], y[1])
    s, e = _normalise(s, e + t)
    return _normalise(s, e + f)


def negate(x: Pair) -> Pair:
    return -x[0], -x[1]


def multiply(x: Pair, y: Pair) -> Pair:
    """x · y for double-double pairs (relative error about 2^-103)."""
    p, e = two_product(x[0], y[0])
    return _normalise(p, e + (x[0] * y[1] + x[1] * y[0]))


def scale(x: Pair, factor: float) -> Pair:
    """x · factor for a power of two ``factor`` (exact)."""
    return x[0] * factor, x[1] * factor


def abs_squared(z: np.ndarray) -> Pair:
    """|z|² = re² + im² of a complex array as a pair (relative error about 2^-104)."""
    return add(two_product(z.real, z.real), two_product(z.imag, z.imag))


def complex_product(a: np.ndarray, b: np.ndarray) -> tuple[Pair, Pair]:
    """Real and imaginary parts of a·b for complex arrays, each as a pair."""
    real = add(two_product(a.real, b.real), negate(two_product(a.imag, b.imag)))
    imag = add(two_product(a.real, b.imag), two_product(a.imag, b.real))
    return real, imag


def value(x: Pair) -> np.ndarray:
    """The pair rounded to float64."""
    return x[0] + x[1]
