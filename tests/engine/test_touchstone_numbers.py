"""Touchstone number reading against Python's float(), bit for bit.

Reference: CPython's ``float(str)``, which is correctly rounded (IEEE 754 binary64, round to
nearest, ties to even; David Gay's algorithm). Every value the reader produces must have the same
bits as ``float(token)``, the sign of zero included. Hard cases (halfway points, the exact
midpoints between neighbouring doubles, 17 to 19 digits) are built here with Python's exact
``decimal`` and ``fractions`` arithmetic.
"""

from __future__ import annotations

import math
from decimal import ROUND_CEILING, ROUND_FLOOR, Context, Decimal
from fractions import Fraction

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from workers.engine.touchstone import parse_touchstone
from workers.engine.touchstone.numbers import scan_numbers
from workers.engine.touchstone.rounding import decimal_values


def _read(tokens: list[str]) -> np.ndarray:
    region = " \n".join(tokens) + "\n"
    values, _offsets, bad = scan_numbers(region, np.frombuffer(region.encode("ascii"), np.uint8))
    assert bad == -1
    return values


def _assert_bits_equal(tokens: list[str]) -> None:
    ours = _read(tokens).view(np.uint64)
    theirs = np.array([float(t) for t in tokens]).view(np.uint64)
    wrong = np.flatnonzero(ours != theirs)
    assert wrong.size == 0, [(tokens[k], _read([tokens[k]])[0], float(tokens[k])) for k in wrong]


HARD_CASES = [
    "-9.6944230214444698e-07",  # issue 11: read with a relative error of 4.4e-16 before
    "1e23",  # 10^23 is not a double; halfway-looking case (common practice in test suites)
    "9007199254740993",  # 2^53 + 1: exact midpoint, ties to even gives 2^53
    "9007199254740995",  # 2^53 + 3: exact midpoint, ties to even rounds up
    "9007199254740993.0000000000001",  # just above the midpoint (more than 19 digits)
    "123456789012345678e-30",
    "2.2250738585072011e-308",  # near the smallest normal (|e| > 45: float())
    "4.9406564584124654e-324",  # smallest subnormal
    "1.7976931348623157e308",
    "0.1", "0.2", "0.3", "-0", "-0.0", "+0e-99", "0e400",
    "4.35679845e-19",
    "1.00000000000000011102230246251565404236316680908203125",  # 1 + ulp/2: exact tie
    "1.00000000000000011102230246251565404236316680908203124",  # just below the tie
    "1.00000000000000011102230246251565404236316680908203126",  # just above the tie
    "3.0517578125e-05", "5e-324", "1e-320", "7e+0005", "1.e5", ".5", "-2.",
]


@pytest.mark.parametrize("token", HARD_CASES)
def test_hard_cases_read_exactly_as_float(token: str) -> None:
    _assert_bits_equal([token])


def test_issue_11_example_through_the_reader() -> None:
    # issue 11: "-9.6944230214444698e-07 reads with a relative error of 4.4e-16"
    parsed = parse_touchstone("# GHz S RI R 50\n1 -9.6944230214444698e-07 0\n")
    assert parsed.values[0, 0, 0].real == float("-9.6944230214444698e-07")


_finite = st.floats(allow_nan=False, allow_infinity=False)


@settings(derandomize=True, max_examples=400, deadline=None)
@given(values=st.lists(_finite, min_size=1, max_size=40),
       style=st.sampled_from(["repr", "e16", "e17", "e18", "f", "g12", "E9"]))
def test_formatted_doubles_read_exactly_as_float(values: list[float], style: str) -> None:
    # Property: the text a writer prints for a double (shortest round trip, %.16e, %.17e, ...)
    # reads back exactly as float() reads it.
    formats = {"repr": repr, "e16": "{:.16e}".format, "e17": "{:.17e}".format,
               "e18": "{:.18e}".format, "f": "{:.20f}".format, "g12": "{:.12g}".format,
               "E9": "{:.9E}".format}
    _assert_bits_equal([formats[style](v) for v in values])


@st.composite
def _decimal_tokens(draw: st.DrawFn) -> str:
    digits = draw(st.text(alphabet="0123456789", min_size=1, max_size=25))
    dot = draw(st.integers(min_value=-1, max_value=len(digits)))
    mantissa = digits if dot < 0 else digits[:dot] + "." + digits[dot:]
    sign = draw(st.sampled_from(["", "-", "+"]))
    exponent = draw(st.one_of(st.none(), st.integers(min_value=-60, max_value=60)))
    marker = draw(st.sampled_from(["e", "E"]))
    if exponent is None:
        return sign + mantissa
    exponent_sign = "+" if exponent >= 0 and draw(st.booleans()) else ""
    return f"{sign}{mantissa}{marker}{exponent_sign}{exponent}"


@settings(derandomize=True, max_examples=600, deadline=None)
@given(tokens=st.lists(_decimal_tokens(), min_size=1, max_size=30))
def test_any_decimal_token_reads_exactly_as_float(tokens: list[str]) -> None:
    # Property over the grammar [+-](digits[.digits] | .digits)[(e|E)[+-]digits]: up to 25
    # digits, any dot position, exponents -60..60 (both of the reader's paths and float()).
    _assert_bits_equal(tokens)


@settings(derandomize=True, max_examples=400, deadline=None)
@given(x=st.floats(min_value=1e-40, max_value=1e40), digits=st.integers(17, 19))
def test_near_midpoints_read_exactly_as_float(x: float, digits: int) -> None:
    # The hard case of correct rounding: decimals just below, at and just above the midpoint
    # between x and the next double (exact midpoint from Decimal arithmetic).
    exact = Context(prec=1000)  # enough digits for the exact sum and half of two doubles
    midpoint = exact.divide(exact.add(Decimal(x), Decimal(math.nextafter(x, math.inf))), 2)
    tokens = [str(midpoint)]
    for rounding in (ROUND_FLOOR, ROUND_CEILING):
        tokens.append(str(Context(prec=digits, rounding=rounding).plus(midpoint)))
    _assert_bits_equal(tokens)


@settings(derandomize=True, max_examples=300, deadline=None)
@given(bits=st.integers(min_value=53, max_value=57),
       odd=st.integers(min_value=2**52, max_value=2**53 - 1))
def test_exact_ties_written_with_a_decimal_exponent(bits: int, odd: int) -> None:
    # Exact midpoints between neighbouring doubles in [2^bits, 2^(bits+1)): odd multiples of
    # half an ulp, (2r + 1) * 2^(bits - 53). Written with trailing zeros and a negative exponent
    # ("...00e-2", the digits kept below 2^62) the reader must scale by an inexact power of
    # ten, so only an exact argument (or float()) can break the tie the IEEE way (to even).
    tie = (2 * odd + 1) * 2 ** (bits - 53)
    zeros = max(j for j in range(4) if tie * 10**j < 2**62)
    tokens = [str(tie), f"{tie}{'0' * zeros}e-{zeros}", f"{tie}e0", f"{tie}{'0' * zeros}E-{zeros}"]
    _assert_bits_equal(tokens)


@settings(derandomize=True, max_examples=300, deadline=None)
@given(pairs=st.lists(st.tuples(st.integers(0, 2**62 - 1), st.integers(-45, 45)), min_size=1,
                      max_size=50))
def test_rounding_vouches_only_for_correctly_rounded_values(pairs: list[tuple[int, int]]) -> None:
    # Reference: exact rational arithmetic; Fraction -> float is correctly rounded (CPython's
    # integer true division). Whatever the reader calls certain must equal it.
    mantissa = np.array([m for m, _ in pairs], dtype=np.uint64)
    exponent = np.array([e for _, e in pairs], dtype=np.int16)
    values, certain = decimal_values(mantissa, exponent, np.ones(len(pairs), dtype=bool))
    exact = np.array([float(Fraction(m) * Fraction(10) ** e) for m, e in pairs])
    np.testing.assert_array_equal(values[certain], exact[certain])


def test_rounding_never_vouches_for_an_exact_tie() -> None:
    # 2^53 + 1 (and odd multiples of half an ulp above 2^53) lie exactly between two doubles;
    # written as m * 10^-1 the product must go to float(), whose ties-to-even rule decides.
    ties = [(2 * odd + 1) * 2 ** (bits - 53) * 10
            for bits, odd in [(53, 2**52), (54, 2**52 + 7), (57, 2**53 - 1)]]
    _values, certain = decimal_values(np.array(ties, dtype=np.uint64),
                                      np.full(len(ties), -1, dtype=np.int16),
                                      np.ones(len(ties), dtype=bool))
    assert not certain.any()
