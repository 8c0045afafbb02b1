"""Read stored JSON text with orjson, falling back to the standard library where orjson refuses.

orjson (RFC 8259) reads a ~450 KB stored check request two to three times as fast as
``json.loads`` and gives the same value, except that

- it refuses NaN/Infinity literals, numbers such as ``1e400`` (``json.loads``: infinity), lone
  surrogate escapes and a UTF-8 byte order mark: :func:`loads_json` then asks ``json.loads``;
- it reads an integer outside [-2**63, 2**64) as the nearest float, ``float(n)``. Every number of
  a check request is read as a float or a complex number by ``CheckRequestSchema``, so the
  request it validates is the same.

The cyclic garbage collector is paused while orjson builds the value: a request is some ten
thousand small lists of numbers, whose allocation would otherwise trigger collections that scan
every tracked object (measured: three quarters of the parse time of a 50-variant batch body).
Parsed JSON holds no reference cycles, so nothing is left for the collector to find. The API's
batch and check submissions and the worker's task pause it for their whole run (parse, validate,
store; load, run, complete), so that it never scans a request that is about to be freed.
"""

from __future__ import annotations

import gc
import json
import threading
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

import orjson

_pause_lock = threading.Lock()
_pause_depth = 0
_resume_gc = False


@contextmanager
def collector_paused() -> Iterator[None]:
    """Pause the cyclic garbage collector for the block (nestable, across threads: it resumes
    when the last paused block ends, and only if it was running when the first began).

    Objects freed by reference counting are freed as usual; only cycles wait for the resume.
    """
    global _pause_depth, _resume_gc
    with _pause_lock:
        if _pause_depth == 0:
            _resume_gc = gc.isenabled()
            gc.disable()
        _pause_depth += 1
    try:
        yield
    finally:
        with _pause_lock:
            _pause_depth -= 1
            if _pause_depth == 0 and _resume_gc:
                gc.enable()


def orjson_loads(data: bytes | str) -> Any:
    """``orjson.loads`` with the collector paused; raises ``orjson.JSONDecodeError``."""
    with collector_paused():
        return orjson.loads(data)


def loads_json(data: bytes | str) -> Any:
    """``data`` read by orjson, or by ``json.loads`` when orjson refuses it (see module doc)."""
    try:
        return orjson_loads(data)
    except orjson.JSONDecodeError:
        return json.loads(data)

