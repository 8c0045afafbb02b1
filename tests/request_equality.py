"""``assert_same_request``: two engine check requests hold the same values, bit for bit.

Used where a request read back from the store is compared with the one the schema validated
(the API stores the validated request: it must be the very request the engine then runs).
"""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np


def assert_same_request(got: Any, expected: Any, where: str = "request") -> None:
    """Same types all the way down; arrays of the same dtype, shape and bytes (so NaN payloads
    and signed zeros count too); other values equal."""
    assert type(got) is type(expected), f"{where}: {type(got)} is not {type(expected)}"
    if isinstance(expected, np.ndarray):
        assert (got.dtype, got.shape) == (expected.dtype, expected.shape), where
        assert got.tobytes() == expected.tobytes(), f"{where}: values differ"
    elif dataclasses.is_dataclass(expected):
        for item in dataclasses.fields(expected):
            assert_same_request(getattr(got, item.name), getattr(expected, item.name),
                                f"{where}.{item.name}")
    elif isinstance(expected, tuple | list):
        assert len(got) == len(expected), f"{where}: {len(got)} items, not {len(expected)}"
        for k, (a, b) in enumerate(zip(got, expected, strict=True)):
            assert_same_request(a, b, f"{where}.{k}")
    else:
        assert got == expected, f"{where}: {got!r} != {expected!r}"
