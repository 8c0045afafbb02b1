"""The request body parsers (orjson, with ``json.loads`` as fallback; a batch cut by msgspec)
against the standard library.

Reference: Python's ``json.loads`` (RFC 8259). For any JSON document, with any legal whitespace,
the parsers must give ``json.loads``'s value, refuse exactly what it refuses with ``json.loads``'s
message, and each variant text of a cut batch must read back (``json.loads``) to that variant.
The documented differences: an integer outside [-2**63, 2**64) reads as ``float(n)``,
Python's correctly rounded conversion (the check request schema reads every number as a float
anyway), and a batch map's ``data.re``/``data.im`` of three-dimensional number lists come as the
float arrays ``numpy.asarray(.., float)`` makes of them (``service.api.request_reader``).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from service.api.jsonbody import cut_batch, parse_body, reject_constant
from service.api.jsontext import loads_json

scalars = (st.none() | st.booleans() | st.integers(-10**20, 10**20)
           | st.sampled_from([2**63 - 1, -(2**63), 2**64 - 1, 2**64 + 1, -(2**63) - 1,
                              10**20 + 1, 3**40])
           | st.floats(allow_nan=False, allow_infinity=False) | st.text(max_size=8))
values = st.recursive(
    scalars,
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=6), inner,
                                                                max_size=4),
    max_leaves=20,
)
whitespace = st.sampled_from(["", " ", "\n", "\t", "\r\n  "])


def _int_as_parsed(digits: str) -> int | float:
    """The documented rule: 64-bit integers stay exact, wider ones become ``float(n)``."""
    n = int(digits)
    return n if -(2**63) <= n < 2**64 else float(n)


def _reference(raw: bytes | str):
    return json.loads(raw, parse_int=_int_as_parsed)


def _same(a, b) -> bool:
    """Equal values of equal JSON types (``1 == 1.0`` in Python, so compare types too)."""
    if isinstance(a, np.ndarray):  # read as the schema reads it
        return np.array_equal(a, np.asarray(b, dtype=float))
    if type(a) is not type(b):
        return False
    if isinstance(a, dict):
        return a.keys() == b.keys() and all(_same(a[k], b[k]) for k in a)
    if isinstance(a, list):
        return len(a) == len(b) and all(_same(x, y) for x, y in zip(a, b, strict=True))
    return a == b


def _dump(value, indent: int | None, ascii_only: bool) -> str:
    return json.dumps(value, indent=indent, ensure_ascii=ascii_only)


def _cut_reads_back(raw: bytes) -> None:
    """``cut_batch`` gives ``json.loads``'s value, each variant of a ``variants`` array as a
    text reading back (``json.loads``) to that variant."""
    whole, cut = _reference(raw), cut_batch(raw)
    if isinstance(whole, dict) and isinstance(whole.get("variants"), list):
        texts = cut["variants"]
        assert all(isinstance(t, bytes | memoryview) for t in texts)
        cut = {**cut, "variants": [_reference(bytes(t)) for t in texts]}
    assert _same(cut, whole)


@settings(max_examples=300, deadline=None, derandomize=True)
@given(
    top=st.dictionaries(st.text(max_size=6).filter(lambda k: k != "variants"), values,
                        max_size=3),
    variants=st.lists(values, max_size=5),
    indent=st.sampled_from([None, 0, 2]),
    ascii_only=st.booleans(),
    pad=whitespace,
)
def test_same_value_as_json_loads_and_variant_texts_read_back(top, variants, indent, ascii_only,
                                                              pad):
    document = {**top, "variants": variants}
    raw = (pad + _dump(document, indent, ascii_only) + pad).encode()
    assert _same(parse_body(raw), _reference(raw))
    _cut_reads_back(raw)


@settings(max_examples=200, deadline=None, derandomize=True)
@given(value=values)
def test_any_document_parses_like_json_loads(value):
    raw = json.dumps(value).encode()
    assert _same(parse_body(raw), _reference(raw))
    assert _same(loads_json(raw), _reference(raw))
    assert _same(loads_json(raw.decode()), _reference(raw))
    _cut_reads_back(raw)


@pytest.mark.parametrize("raw", [
    b"", b"{", b'{"variants": [1, 2,]}', b'{"variants": [1] ', b'{"a": 1} x', b"{'a': 1}",
    b'{"variants": [NaN]}', b'{"a": Infinity}', b'{"a": -Infinity}', b'{"a": 1,}', b"\xff\xfe",
])
def test_refuses_what_json_loads_refuses_with_its_message(raw):
    with pytest.raises(ValueError) as expected:
        json.loads(raw, parse_constant=reject_constant)
    for parse in (parse_body, cut_batch):
        with pytest.raises(ValueError) as got:
            parse(raw)
        assert str(got.value) == str(expected.value)


def test_nan_is_named_in_the_error():
    # RFC 8259 §6: NaN and Infinity are not permitted as numeric values.
    with pytest.raises(ValueError, match="NaN is not a JSON number"):
        parse_body(b'{"frequency_hz": [1.0, NaN]}')


def test_duplicate_members_keep_the_last_like_json_loads():
    for raw in (b'{"variants": [1], "variants": [2, 3]}', b'{"variants": [1], "variants": 4}',
                b'{"variants": [1], "x": 0, "variants": [5]}'):
        assert parse_body(raw) == json.loads(raw)
        _cut_reads_back(raw)


@pytest.mark.parametrize("raw", [
    "\ufeff".encode() + b'{"variants": [1]}',  # byte order mark: json.loads accepts bytes with it
    b'{"variants": [{"x": "\\ud800"}]}',  # lone surrogate escape: json.loads keeps it
    b'{"variants": [{"frequency_hz": [1e400]}]}',  # json.loads reads infinity (schema refuses)
])
def test_what_orjson_refuses_falls_back_to_json_loads(raw):
    assert parse_body(raw) == json.loads(raw)
    assert loads_json(raw) == json.loads(raw)
    cut = cut_batch(raw)
    assert [loads_json(t) for t in cut["variants"]] == json.loads(raw)["variants"]


def test_stored_text_with_infinity_reads_like_json_loads():
    # json.dumps writes a non-finite float as Infinity, which json.loads reads back; orjson
    # refuses the literal, so loads_json must fall back.
    text = json.dumps({"a": [float("inf"), 1.5]})
    assert loads_json(text) == json.loads(text) == {"a": [float("inf"), 1.5]}


def test_collector_pause_nests_and_restores_the_previous_state():
    # Reference: the standard library's gc.isenabled/gc.disable (Python 3.11 documentation).
    import gc

    from workers.collector import collector_paused

    assert gc.isenabled()
    with collector_paused():
        assert not gc.isenabled()
        with collector_paused():
            assert not gc.isenabled()
        assert not gc.isenabled()  # the outer block still holds the pause
    assert gc.isenabled()
    with pytest.raises(RuntimeError), collector_paused():
        raise RuntimeError("boom")
    assert gc.isenabled()
    gc.disable()
    try:
        with collector_paused():
            pass
        assert not gc.isenabled()  # it was not running before: it is not started
    finally:
        gc.enable()


@pytest.mark.parametrize("raw", [
    b'{"variants": [1], "wobble": 2}',      # a member a batch does not have
    b'{"variants": {"a": 1}}',              # variants not an array
    b'{"label": "x"}',                      # no variants
    b'[{"variants": []}]',                  # not an object
    b'"variants"',                          # not an object either
])
def test_batch_bodies_of_other_shapes_are_cut_for_the_schema_to_name_their_problems(raw):
    _cut_reads_back(raw)
