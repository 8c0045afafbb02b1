"""The body parser that keeps each batch variant's source text, against the standard library.

Reference: Python's ``json.loads`` (RFC 8259). For any JSON document, with any legal whitespace,
the parser must give exactly ``json.loads``'s value, refuse exactly what it refuses, and each kept
variant text must read back (``json.loads``) to that variant.
"""

from __future__ import annotations

import json

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from service.api.jsonbody import parse_with_variant_texts

scalars = (st.none() | st.booleans() | st.integers(-10**20, 10**20)
           | st.floats(allow_nan=False, allow_infinity=False) | st.text(max_size=8))
values = st.recursive(
    scalars,
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=6), inner,
                                                                max_size=4),
    max_leaves=20,
)
whitespace = st.sampled_from(["", " ", "\n", "\t", "\r\n  "])


def _dump(value, indent: int | None, ascii_only: bool) -> str:
    return json.dumps(value, indent=indent, ensure_ascii=ascii_only)


@settings(max_examples=300, deadline=None, derandomize=True)
@given(
    top=st.dictionaries(st.text(max_size=6).filter(lambda k: k != "variants"), values,
                        max_size=3),
    variants=st.lists(values, max_size=5),
    indent=st.sampled_from([None, 0, 2]),
    ascii_only=st.booleans(),
    pad=whitespace,
)
def test_same_value_as_json_loads_and_texts_read_back(top, variants, indent, ascii_only, pad):
    document = {**top, "variants": variants}
    raw = (pad + _dump(document, indent, ascii_only) + pad).encode()
    parsed = parse_with_variant_texts(raw)
    assert parsed.value == json.loads(raw)
    assert parsed.variant_texts is not None
    assert [json.loads(t) for t in parsed.variant_texts] == variants
    assert json.loads(parsed.text) == parsed.value


@settings(max_examples=200, deadline=None, derandomize=True)
@given(value=values)
def test_any_document_parses_like_json_loads(value):
    raw = json.dumps(value).encode()
    parsed = parse_with_variant_texts(raw)
    assert parsed.value == json.loads(raw)
    if not (isinstance(value, dict) and isinstance(value.get("variants"), list)):
        assert parsed.variant_texts is None


@pytest.mark.parametrize("raw", [
    b"", b"{", b'{"variants": [1, 2,]}', b'{"variants": [1] ', b'{"a": 1} x', b"{'a': 1}",
    b'{"variants": [NaN]}', b'{"a": Infinity}', b'{"a": 1,}', b"\xff\xfe",
])
def test_refuses_what_json_loads_refuses(raw):
    with pytest.raises(ValueError):
        parse_with_variant_texts(raw)


def test_duplicate_members_keep_the_last_like_json_loads():
    raw = b'{"variants": [1], "variants": [2, 3]}'
    parsed = parse_with_variant_texts(raw)
    assert parsed.value == json.loads(raw) == {"variants": [2, 3]}
    assert parsed.variant_texts == ["2", "3"]
    raw = b'{"variants": [1], "variants": 4}'
    parsed = parse_with_variant_texts(raw)
    assert parsed.value == {"variants": 4} and parsed.variant_texts is None


def test_byte_order_mark_falls_back_to_json_loads():
    raw = "\ufeff".encode() + b'{"variants": [1]}'
    parsed = parse_with_variant_texts(raw)
    assert parsed.value == json.loads(raw) and parsed.text is None
