"""Read JSON text (bodies, batch variants) with orjson, falling back to the standard library.

orjson (RFC 8259) reads a ~450 KB check request two to three times as fast as
``json.loads`` and gives the same value, except that

- it refuses NaN/Infinity literals, numbers such as ``1e400`` (``json.loads``: infinity), lone
  surrogate escapes and a UTF-8 byte order mark: :func:`loads_json` then asks ``json.loads``
  (:func:`stdlib_loads`);
- it reads an integer outside [-2**63, 2**64) as the nearest float, ``float(n)``. Every number of
  a check request is read as a float or a complex number by ``CheckRequestSchema``, so the
  request it validates is the same.

:func:`stdlib_loads` reads an integer literal beyond the largest float (about 1.8e308, e.g. 400
digits) as the infinity of its sign, as ``json.loads`` reads ``1e400``: the schema then refuses it
as not finite, naming the field (``float(10**400)`` would raise OverflowError, and ``int()`` of
more than 4,300 digits ValueError). Nesting too deep for the interpreter's stack is a ValueError
("nested too deeply"), never a RecursionError, however deep the caller's own stack is.

The cyclic garbage collector is paused while orjson builds the value
(``workers.collector.collector_paused``): parsed JSON holds no reference cycles.
"""

from __future__ import annotations

import json
import sys
from collections.abc import Callable
from typing import Any

import orjson

from workers.collector import collector_paused

# A decimal integer of more digits than this is beyond the largest float whatever its digits;
# one of fewer is compared with it exactly (Python compares int and float exactly).
_FLOAT_MAX_DIGITS = len(str(int(sys.float_info.max)))


def int_or_infinity(text: str) -> int | float:
    """``parse_int`` hook: the integer, or ±inf when it is beyond the largest float."""
    digits = len(text) - text.startswith("-")
    if digits <= _FLOAT_MAX_DIGITS:
        value = int(text)
        if abs(value) <= sys.float_info.max:
            return value
    return float("-inf") if text.startswith("-") else float("inf")


def stdlib_loads(data: bytes | bytearray | memoryview | str,
                 parse_constant: Callable[[str], Any] | None = None) -> Any:
    """``json.loads`` with huge integers read as infinities; raises ValueError (its message),
    also for nesting deeper than the stack allows."""
    if isinstance(data, memoryview):  # a slice of a body (json.loads takes no buffers)
        data = data.tobytes()
    try:
        return json.loads(data, parse_int=int_or_infinity, parse_constant=parse_constant)
    except RecursionError as exc:
        raise ValueError(f"nested too deeply ({exc})") from None


def orjson_loads(data: bytes | bytearray | memoryview | str) -> Any:
    """``orjson.loads`` with the collector paused; raises ``orjson.JSONDecodeError``."""
    with collector_paused():
        return orjson.loads(data)


def loads_json(data: bytes | bytearray | memoryview | str) -> Any:
    """``data`` read by orjson, or by :func:`stdlib_loads` when orjson refuses it (see module
    doc); raises ValueError when it is not JSON."""
    try:
        return orjson_loads(data)
    except orjson.JSONDecodeError:
        return stdlib_loads(data)
