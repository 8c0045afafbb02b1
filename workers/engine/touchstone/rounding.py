"""Correctly rounded binary64 values of decimal numbers m · 10^e, vectorised over tokens.

``m`` is the token's digit string read as an integer (at most 19 digits, so it is exact in
uint64) and ``e`` its decimal exponent. The result must be what ``float(token)`` gives: the
IEEE 754 double nearest to m · 10^e, ties to even. Two paths give it; every token they cannot
vouch for is marked uncertain and left to ``float()`` by the caller.

* Exact fast path (W. D. Clinger, "How to read floating point numbers accurately", PLDI 1990):
  when m < 2^53 and |e| <= 22, m and 10^|e| are both exact doubles, so the one IEEE
  multiplication or division m · 10^e or m / 10^-e is correctly rounded.
* Checked path, for m < 2^62 and |e| <= 45 (16 to 19 digits, or exponents beyond 22, as
  shortest round-trip writers print them): the product v = m · 10^e is formed in double-double
  arithmetic (T. J. Dekker, "A floating-point technique for extending the available precision",
  Numer. Math. 18, 1971: exact TwoProduct by Veltkamp splitting), with 10^e = P_hi + P_lo from
  exact rational arithmetic, and rounded once: x = RN(p + lo). The remainder t = (p - x) + lo is
  v - x up to |δ| < 2^-49 ulp(x) (error terms: 10^e's tail below 2^-106 · 10^e, the rounded
  partial products below 2^-104 · v, v < 2^53 ulp(x), and t's own rounding, 2^-53 ulp(x)).
  x is then RN(v) for sure when |t| + 2^-40 ulp(x) < (x - pred(x)) / 2, the smaller half-gap
  (ulp(x) = spacing(x), the gap above; the gap below is half of it when x is a power of two);
  anything closer to a midpoint than that (ties included) is uncertain.
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np

from workers.engine.exact import split
from workers.engine.touchstone.scratch import scratch_array

_EXACT_MANTISSA = np.uint64(2**53)
_CHECKED_MANTISSA = np.uint64(2**62)
_EXACT_EXPONENT = 22
_CHECKED_EXPONENT = 45
_SPLIT = 134217729.0  # 2^27 + 1, Veltkamp's splitting constant (as exact.split, inlined)


def _powers_of_ten() -> tuple[np.ndarray, ...]:
    """10^e ≈ P_hi + P_lo for e in [-45, 45] (index e + 45), each part correctly rounded, and
    P_hi split for TwoProduct. For e >= 0 the pair is exact (5^45 < 2^106)."""
    exact = [Fraction(10) ** e for e in range(-_CHECKED_EXPONENT, _CHECKED_EXPONENT + 1)]
    high = np.array([float(p) for p in exact])  # Fraction -> float is correctly rounded
    low = np.array([float(p - Fraction(h)) for p, h in zip(exact, high.tolist(), strict=True)])
    high_hi, high_lo = split(high)
    return high, low, high_hi, high_lo


_P_HI, _P_LO, _P_HI_HI, _P_HI_LO = _powers_of_ten()
# m · 10^e = m · _MULTIPLY[e + 22] / _DIVIDE[e + 22] for |e| <= 22: one factor is 1 (exact doubles)
_MULTIPLY = np.array([1.0] * _EXACT_EXPONENT + [10.0**k for k in range(_EXACT_EXPONENT + 1)])
_DIVIDE = np.array([10.0**k for k in range(_EXACT_EXPONENT, 0, -1)] + [1.0] * (_EXACT_EXPONENT + 1))
_FRACTION_BITS = np.uint64(2**52 - 1)


def decimal_values(
    mantissa: np.ndarray, exponent: np.ndarray, usable: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """(values, certain): |m| · 10^e correctly rounded where ``certain``; elsewhere unusable.

    ``mantissa`` is uint64, ``exponent`` an integer array, ``usable`` marks tokens whose
    mantissa has at most 19 digits (so ``mantissa`` did not wrap). Temporaries live in scratch
    buffers: fresh arrays of this size cost more in page faults than the arithmetic.
    """
    count = mantissa.size
    values = np.empty(count)
    values[...] = mantissa
    index = scratch_array("rounding_index", count, np.intp)
    np.clip(exponent, -_EXACT_EXPONENT, _EXACT_EXPONENT, out=index, casting="unsafe")
    index += _EXACT_EXPONENT
    factor = scratch_array("rounding_factor", count, np.float64)
    values *= np.take(_MULTIPLY, index, out=factor, mode="clip")
    values /= np.take(_DIVIDE, index, out=factor, mode="clip")
    small_exponent = (exponent >= -_EXACT_EXPONENT) & (exponent <= _EXACT_EXPONENT)
    certain = usable & small_exponent & (mantissa < _EXACT_MANTISSA)
    checked = np.flatnonzero(
        usable & ~certain & (mantissa < _CHECKED_MANTISSA)
        & (exponent >= -_CHECKED_EXPONENT) & (exponent <= _CHECKED_EXPONENT)
    )
    if checked.size:
        x, sure = _checked_product(mantissa[checked], exponent[checked])
        values[checked] = x
        certain[checked] = sure
    return values, certain


def _checked_product(mantissa: np.ndarray, exponent: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """RN(m · 10^e) in double-double arithmetic and whether it is certain (module docstring)."""
    count = mantissa.size
    a, b, p, h_hi, h_lo, low, a_hi, a_lo, t = scratch_array("rounding_work", (9, count), np.float64)
    index = scratch_array("rounding_checked", count, np.intp)
    np.add(exponent, _CHECKED_EXPONENT, out=index, casting="unsafe")
    a[...] = mantissa  # RN(m); m = a + b exactly, |b| <= 2^9
    whole = scratch_array("rounding_whole", count, np.int64)
    np.subtract(mantissa.view(np.int64), a.astype(np.int64), out=whole)
    b[...] = whole
    np.take(_P_HI, index, out=h_hi, mode="clip")
    np.multiply(a, h_hi, out=p)
    np.multiply(b, h_hi, out=low)  # b · P_hi; then + a · P_lo and + (a · P_hi - p)
    np.take(_P_LO, index, out=t, mode="clip")
    t *= a
    low += t
    np.multiply(a, _SPLIT, out=t)  # Veltkamp split of a
    np.subtract(t, a, out=a_hi)
    np.subtract(t, a_hi, out=a_hi)
    np.subtract(a, a_hi, out=a_lo)
    np.take(_P_HI_HI, index, out=h_hi, mode="clip")
    np.take(_P_HI_LO, index, out=h_lo, mode="clip")
    # Dekker's exact error of a · P_hi: ((a_hi h_hi - p) + a_hi h_lo + a_lo h_hi) + a_lo h_lo
    np.multiply(a_hi, h_hi, out=t)
    t -= p
    np.multiply(a_hi, h_lo, out=b)
    t += b
    np.multiply(a_lo, h_hi, out=b)
    t += b
    np.multiply(a_lo, h_lo, out=b)
    t += b
    low += t
    x = p + low
    p -= x
    p += low  # the remainder (p - x) + low
    np.abs(p, out=p)
    # x > 0; the gap below x is spacing(x), or half of it when x is a power of two
    power_of_two = (x.view(np.uint64) & _FRACTION_BITS) == 0
    np.spacing(x, out=t)
    t *= np.where(power_of_two, 0.25, 0.5) - 2.0**-40
    sure = p < t
    sure |= mantissa == 0
    return x, sure
