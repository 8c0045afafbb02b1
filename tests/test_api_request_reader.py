"""The member-by-member reader of check requests (``service.api.request_reader``) gives what
the whole-text readers give, its network data as the arrays the schema makes of them.

References: Python's ``json.loads`` (RFC 8259) for every value (with the readers' documented
rule: integers outside [-2**63, 2**64) read as ``float(n)``, ``service.api.jsontext``),
``numpy.asarray(.., float)`` for the arrays (the schema's own conversion),
``base64.b64decode(validate=True)`` (RFC 4648 §4) for packed bytes. Seeded hypothesis examples.
"""

from __future__ import annotations

import base64
import json

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from service.api import request_reader
from service.api.jsonbody import parse_body
from service.api.request_reader import read_request


def _reference(text: bytes):
    def integer(digits: str) -> int | float:
        n = int(digits)
        return n if -(2**63) <= n < 2**64 else float(n)

    return json.loads(text, parse_int=integer)


def _same(got, want) -> bool:
    """``got`` equals ``json.loads``'s ``want``, an array where it equals asarray(want)."""
    if isinstance(got, np.ndarray):
        return np.array_equal(got, np.asarray(want, dtype=float))
    if isinstance(got, dict):
        return isinstance(want, dict) and got.keys() == want.keys() and all(
            _same(got[k], want[k]) for k in got)
    if isinstance(got, list):
        return isinstance(want, list) and len(got) == len(want) and all(
            _same(a, b) for a, b in zip(got, want, strict=True))
    return type(got) is type(want) and got == want


def _cube(points: int, ports: int, seed: int) -> list:
    """Seeded [points][ports][ports] numbers: doubles of every magnitude and some integers."""
    rng = np.random.default_rng(seed)
    values = rng.normal(size=(points, ports, ports)) * 10.0 ** rng.integers(-300, 300,
                                                                         (points, ports, ports))
    cube = values.tolist()
    cube[0][0][0] = int(rng.integers(-10**6, 10**6))  # an integer literal among the floats
    return cube


@settings(max_examples=30, deadline=None, derandomize=True)
@given(points=st.integers(1, 2 * request_reader.BLOCK + 3), ports=st.integers(1, 3),
       seed=st.integers(0, 2**32 - 1),
       extra=st.dictionaries(st.sampled_from(["ports", "label", "x"]),
                             st.integers() | st.text(max_size=4), max_size=2))
def test_lists_become_the_schema_s_arrays_across_blocks(points, ports, seed, extra):
    re = _cube(points, ports, seed)
    request = {"data": {"re": re, "im": re}, "gain_off": {"data": {"re": re, "im": re}},
               **extra}
    text = json.dumps(request).encode()
    got = read_request(text)
    assert isinstance(got["data"]["re"], np.ndarray)
    assert isinstance(got["gain_off"]["data"]["im"], np.ndarray)
    assert _same(got, _reference(text))


@pytest.mark.parametrize("re", [
    [[[1, 2], [3, 4]], [[5, 6]]],                      # ragged inside the first block
    [[[1.0]]] * request_reader.BLOCK + [[[1.0, 2.0]]],  # ragged in a later block
    [[1, 2], [3, 4]],                                  # 2-D
    [[["a"]]], [[[True]]], [], "text", {"re": 1},
])
def test_what_the_schema_must_refuse_is_left_as_json_gives_it(re):
    text = json.dumps({"data": {"re": re, "im": re}}).encode()
    got, want = read_request(text), json.loads(text)
    if isinstance(got["data"]["re"], np.ndarray):  # [[[True]]] is an array to numpy, too
        assert np.array_equal(got["data"]["re"], np.asarray(want["data"]["re"], dtype=float))
    else:
        assert got == want


@pytest.mark.parametrize("text", ["AAAA", "AA==", "AB==", "", "AAA", "A===", "AA=A", "A-_A",
                                  " AAAA", "AAAA\n", "====", "AAA=AAAA"])
def test_packed_bytes_are_decoded_as_strictly_as_b64decode(text):
    packed = {"dtype": "complex128", "shape": [0, 1, 1], "base64": text}
    got = read_request(json.dumps({"data": packed}).encode())["data"]["base64"]
    try:
        expected = base64.b64decode(text, validate=True)
    except ValueError:
        assert got == text  # left as the string, for the schema to name the problem
    else:
        assert got == expected


def test_text_msgspec_refuses_is_read_whole_by_the_given_reader():
    # NaN is not JSON (RFC 8259 §6): msgspec refuses it, the body reader names it
    with pytest.raises(ValueError, match="NaN is not a JSON number"):
        read_request(b'{"data": {"re": [[[NaN]]], "im": [[[0]]]}}', parse_body)
    bom = "\ufeff" + json.dumps({"data": {"re": [[[1]]], "im": [[[2]]]}})
    assert read_request(bom.encode("utf-8"), parse_body) == {"data": {"re": [[[1]]],
                                                                       "im": [[[2]]]}}
