"""Packed arrays in the check request: ``{"dtype", "shape", "base64"}``.

References: RFC 4648 section 4 (base64), IEEE 754 binary64 little-endian as written by numpy's
``ndarray.tobytes`` for the dtypes ``<f8`` and ``<c16`` (real, imaginary pairs), row-major
order. The packed bytes in these tests are made with the standard library's ``base64`` and
numpy's ``tobytes`` directly, not with the project's ``pack_array``; the request they make must
be the request that the same numbers give as JSON lists.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest
from marshmallow import ValidationError

from service.runner import load_request
from service.schemas.errors import flatten_errors
from service.schemas.request import pack_array
from tests.support.payloads import F, N, lists_payload, packed_array, packed_payload

RNG = np.random.default_rng(20261202)


def _errors(payload: dict[str, Any]) -> dict[str, str]:
    with pytest.raises(ValidationError) as caught:
        load_request(payload)
    return dict(flatten_errors(caught.value.messages))


def test_packed_arrays_give_the_request_the_lists_give() -> None:
    lists = lists_payload()
    a, b = load_request(lists), load_request(packed_payload(lists))
    assert np.array_equal(a.frequency_hz, b.frequency_hz)
    assert np.array_equal(a.network.values, b.network.values)
    assert np.array_equal(a.devices[0].gm_s, b.devices[0].gm_s)


def test_pack_array_writes_what_numpy_and_base64_write() -> None:
    """The project's encoder against numpy's bytes and the standard library's base64."""
    values = RNG.normal(size=(4, 2, 2)) + 1j * RNG.normal(size=(4, 2, 2))
    assert pack_array(values) == packed_array(values, "complex128")
    real = RNG.normal(size=5)
    assert pack_array(real) == packed_array(real, "float64")


def _with(path: str, member: str, value: Any) -> dict[str, Any]:
    payload = packed_payload()
    node = payload
    for key in path.split("."):
        node = node[int(key)] if isinstance(node, list) else node[key]
    node[member] = value
    return payload


_GOOD_DATA = packed_array(np.zeros((F, N, N), complex), "complex128")


@pytest.mark.parametrize(("path", "member", "value", "field", "words"), [
    ("data", "base64", "not base64!", "data.base64", "not base64"),
    ("data", "base64", _GOOD_DATA["base64"][:-8], "data.base64", "needs"),
    ("data", "shape", [F, N], "data.shape", "list of 3"),
    ("data", "shape", [F, N, True], "data.shape", "non-negative integers"),
    ("data", "dtype", "float64", "data.dtype", '"complex128"'),
    ("frequency_hz", "dtype", "complex128", "frequency_hz.dtype", '"float64"'),
    ("frequency_hz", "base64", 7, "frequency_hz.base64", "string"),
])
def test_bad_packed_array_names_its_member(path, member, value, field, words) -> None:
    errors = _errors(_with(path, member, value))
    assert field in errors and words in errors[field], errors


def test_packed_non_finite_value_is_refused_with_its_position() -> None:
    """NaN is a valid binary64 value but no valid number for a check (same rule as lists)."""
    data = np.ones((F, N, N), complex)
    data[2, 1, 0] = complex(np.nan, 0)
    payload = packed_payload()
    payload["data"] = packed_array(data, "complex128")
    errors = _errors(payload)
    assert "finite" in errors["data.base64"] and str(2 * N * N + N) in errors["data.base64"]


def test_packed_shape_still_checked_against_the_ports() -> None:
    payload = packed_payload()
    payload["data"] = packed_array(np.ones((F, 2, 2), complex), "complex128")
    assert "ports" in _errors(payload)["data"]


def test_packed_shape_whose_size_overflows_int64_is_refused_by_name() -> None:
    """2**120 elements: an int64 product wraps to 0 and would match an empty base64 text."""
    payload = packed_payload()
    payload["data"] = {"dtype": "complex128", "shape": [2**40] * 3, "base64": ""}
    assert "needs" in _errors(payload)["data.base64"]
