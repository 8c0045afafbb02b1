"""Vectorised reading of whitespace-separated Touchstone numbers (numpy over the raw bytes).

Grammar: ``[+-](digits[.digits] | .digits)[(e|E)[+-]digits]`` (integers and reals, with or
without an exponent). Values are correctly rounded, exactly what ``float(token)`` gives: the
digits and the exponent go to ``rounding``, and every token it cannot vouch for, or that the
vectorised pass does not recognise, is checked one by one with ``NUMBER`` and read by ``float``.
"""

from __future__ import annotations

import re

import numpy as np

from workers.engine.touchstone.rounding import decimal_values
from workers.engine.touchstone.scratch import scratch_array, scratch_buffer

NUMBER = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?")
_MAX_MANTISSA_DIGITS = 19  # below 10^19 < 2^64: exact in uint64
_MAX_TOKEN_WIDTH = 64


def scan_numbers(region: str, raw: np.ndarray) -> tuple[np.ndarray, np.ndarray, int]:
    """Read every whitespace-separated number of ``region`` at once.

    ``raw`` is ``region`` as ASCII bytes (one byte per character). Returns (values, byte offset
    of each token, index of the first token that is not a number or -1). Grammar:
    ``[+-](digits[.digits] | .digits)[(e|E)[+-]digits]``. The mantissa digits are accumulated
    column by column (uint64) over a (width, tokens) byte grid and rounded with the decimal
exponent by ``rounding.decimal_values``; the tokens it leaves uncertain go to ``float``. Positions
    and counts are kept in 8-bit integers (a token is at most 64 bytes here; longer ones take
    the slow path) and big temporaries live in reused scratch buffers.
    """
    is_token = scratch_buffer("edges", raw.size + 2).view(np.int8)
    is_token[0] = is_token[-1] = 0
    np.greater(raw, 32, out=is_token[1:-1].view(bool))
    changes = scratch_buffer("changes", raw.size + 1).view(bool)
    edges = np.flatnonzero(np.not_equal(is_token[1:], is_token[:-1], out=changes))
    starts, ends = edges[0::2], edges[1::2]
    count = starts.size
    if count == 0:
        return np.empty(0), starts, -1
    i8, u8 = np.int8, np.uint8
    long_token = scratch_buffer("long", count).view(bool)
    length = scratch_buffer("length", count).view(i8)
    index = scratch_buffer("index", 8 * count).view(np.int64)
    np.subtract(ends, starts, out=index)
    np.greater(index, _MAX_TOKEN_WIDTH, out=long_token)
    np.minimum(index, _MAX_TOKEN_WIDTH + 1, out=index)
    length[:] = index
    width = int(min(length.max(), _MAX_TOKEN_WIDTH))
    padded = scratch_buffer("padded", raw.size + width)
    padded[: raw.size] = raw
    padded[raw.size :] = 0
    work = scratch_buffer("grid", 8 * width * count).reshape(8, width, count)
    grid, digit_value, scratch, spare = work[0], work[1], work[2], work[3]
    is_digit, is_e, is_dot, is_sign = (work[i].view(bool) for i in range(4, 8))
    for j in range(width):  # byte j of every token, one row of the (width, tokens) grid
        np.take(padded[j:], starts, out=grid[j], mode="clip")  # in range: no buffering
    column = np.arange(1, width + 1, dtype=i8)[:, None]
    np.less_equal(column, length, out=is_e)
    grid *= is_e  # blank the bytes after each token
    np.subtract(grid, u8(48), out=digit_value)
    np.less(digit_value, u8(10), out=is_digit)
    np.bitwise_or(grid, u8(32), out=scratch)
    np.equal(scratch, u8(101), out=is_e)
    np.equal(grid, u8(46), out=is_dot)
    np.equal(grid, u8(43), out=is_sign)
    np.equal(grid, u8(45), out=spare.view(bool))
    is_sign |= spare.view(bool)
    known = spare.view(bool)
    np.logical_or(is_digit, is_e, out=known)
    known |= is_dot
    known |= is_sign
    np.not_equal(grid, u8(0), out=scratch.view(bool))
    bad = np.greater(scratch.view(bool), known, out=scratch.view(bool)).any(0)
    bad |= long_token
    n_e = is_e.view(i8).sum(0, dtype=i8)
    n_dot = is_dot.view(i8).sum(0, dtype=i8)
    n_sign = is_sign.view(i8).sum(0, dtype=i8)
    has_e = n_e > 0
    has_dot = n_dot > 0
    position = scratch.view(i8)
    np.multiply(is_e.view(i8), column, out=position)
    e_pos = np.where(has_e, position.max(0) - i8(1), length)  # index of 'e', else the length
    np.multiply(is_dot.view(i8), column, out=position)
    dot_pos = np.where(has_dot, position.max(0) - i8(1), e_pos)
    lead_sign = is_sign[0].copy()

    mantissa_end = min(int(e_pos.max()), width)
    in_mantissa = spare[:mantissa_end].view(bool)
    np.less_equal(column[:mantissa_end], e_pos, out=in_mantissa)
    in_mantissa &= is_digit[:mantissa_end]
    usable = in_mantissa.sum(0, dtype=np.int16) <= _MAX_MANTISSA_DIGITS
    multiplier = np.multiply(in_mantissa.view(u8), u8(9), out=scratch[:mantissa_end])
    multiplier += u8(1)
    addend = np.multiply(digit_value[:mantissa_end], in_mantissa.view(u8), out=spare[:mantissa_end])
    # two columns per step: m = (m*10^a + d1)*10^b + d2 = m*(10^a*10^b) + (d1*10^b + d2), both
    # factors below 256 (a, b are 0 or 1), so the uint8 grid holds them (in the rows of is_dot
    # and is_sign, no longer needed)
    half = mantissa_end // 2
    pair_multiplier = np.multiply(multiplier[0 : 2 * half : 2], multiplier[1 : 2 * half : 2],
                                  out=is_dot.view(u8)[:half])
    pair_addend = np.multiply(addend[0 : 2 * half : 2], multiplier[1 : 2 * half : 2],
                              out=is_sign.view(u8)[:half])
    pair_addend += addend[1 : 2 * half : 2]
    mantissa = scratch_array("mantissa", count, np.uint64)  # wraps past 19 digits: ``usable``
    mantissa[...] = 0
    for j in range(half):
        np.multiply(mantissa, pair_multiplier[j], out=mantissa)
        np.add(mantissa, pair_addend[j], out=mantissa)
    if mantissa_end % 2:
        np.multiply(mantissa, multiplier[mantissa_end - 1], out=mantissa)
        np.add(mantissa, addend[mantissa_end - 1], out=mantissa)

    bad |= n_e > 1
    bad |= n_dot > 1
    bad |= dot_pos > e_pos
    bad |= e_pos - lead_sign - has_dot < 1  # no mantissa digit
    exponent10 = np.where(has_dot, dot_pos + i8(1) - e_pos, i8(0)).astype(np.int16)
    exponent_sign = np.zeros(count, dtype=bool)
    with_e = np.flatnonzero(has_e)
    if with_e.size:
        exponent, signed, broken = _scan_exponents(grid, digit_value, is_digit, e_pos, with_e)
        exponent10[with_e] += exponent
        exponent_sign[with_e] = signed
        bad[with_e] |= broken
    bad |= n_sign != lead_sign.view(i8) + exponent_sign.view(i8)
    values, certain = decimal_values(mantissa, exponent10, usable)
    negative = np.equal(grid[0], u8(45), out=is_e[0])  # a leading '-': set the sign bit
    np.bitwise_or(values.view(np.uint64), negative.astype(np.uint64) << np.uint64(63),
                  out=values.view(np.uint64))

    for k in np.flatnonzero(bad):
        token = region[starts[k] : ends[k]]
        if not NUMBER.fullmatch(token):
            return values, starts, int(k)
        values[k] = float(token)
    rest = np.flatnonzero(~certain & ~bad)  # well-formed, not vouched for: float() reads them
    if rest.size:
        values[rest] = [float(region[a:b]) for a, b in zip(starts[rest].tolist(),
                                                            ends[rest].tolist(), strict=True)]
    return values, starts, -1


def _scan_exponents(
    grid: np.ndarray,
    digit_value: np.ndarray,
    is_digit: np.ndarray,
    e_pos: np.ndarray,
    with_e: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Signed exponent, 'has a sign after e' and 'malformed' for the tokens ``with_e``."""
    width, count = grid.shape
    if with_e.size == count:
        sub_grid, sub_value, sub_digit = grid, digit_value, is_digit
        after_e = e_pos.astype(np.int64) + 1
    else:
        sub_grid = grid[:, with_e]
        sub_value = digit_value[:, with_e]
        sub_digit = is_digit[:, with_e]
        after_e = e_pos[with_e].astype(np.int64) + 1
    columns = np.arange(with_e.size)
    char_after = sub_grid[np.minimum(after_e, width - 1), columns] * (after_e < width)
    signed = (char_after == 43) | (char_after == 45)
    first_digit = after_e + signed
    in_exponent = (np.arange(width)[:, None] >= first_digit) & (sub_grid != 0)
    n_digits = in_exponent.sum(0)
    broken = (n_digits < 1) | (n_digits > 4) | ~(sub_digit | ~in_exponent).all(0)
    exponent = np.zeros(with_e.size, dtype=np.int16)
    for j in range(int(first_digit.min()), width):
        exponent = np.where(in_exponent[j], exponent * 10 + sub_value[j], exponent)
    exponent = np.where(char_after == 45, -exponent, exponent)
    return exponent, signed, broken
