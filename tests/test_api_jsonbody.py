"""The request body parser (orjson, with ``json.loads`` as fallback) against the standard library.

Reference: Python's ``json.loads`` (RFC 8259). For any JSON document, with any legal whitespace,
the parser must give ``json.loads``'s value, refuse exactly what it refuses with ``json.loads``'s
message, and each variant text must read back (``json.loads``) to that variant. The one documented
difference: an integer outside [-2**63, 2**64) reads as ``float(n)``, Python's correctly rounded
conversion (the check request schema reads every number as a float anyway).
"""

from __future__ import annotations

import json

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from service.api.jsonbody import outline_batch, parse_with_variant_texts, reject_constant
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
    if type(a) is not type(b):
        return False
    if isinstance(a, dict):
        return a.keys() == b.keys() and all(_same(a[k], b[k]) for k in a)
    if isinstance(a, list):
        return len(a) == len(b) and all(_same(x, y) for x, y in zip(a, b, strict=True))
    return a == b


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
    assert _same(parsed.value, _reference(raw))
    assert parsed.variant_texts is not None
    assert _same([json.loads(t) for t in parsed.variant_texts], _reference(json.dumps(variants)))
    assert _same(_reference(parsed.text), parsed.value)


@settings(max_examples=200, deadline=None, derandomize=True)
@given(value=values)
def test_any_document_parses_like_json_loads(value):
    raw = json.dumps(value).encode()
    parsed = parse_with_variant_texts(raw)
    assert _same(parsed.value, _reference(raw))
    assert _same(loads_json(raw), _reference(raw))
    assert _same(loads_json(raw.decode()), _reference(raw))
    if not (isinstance(value, dict) and isinstance(value.get("variants"), list)):
        assert parsed.variant_texts is None


@pytest.mark.parametrize("raw", [
    b"", b"{", b'{"variants": [1, 2,]}', b'{"variants": [1] ', b'{"a": 1} x', b"{'a': 1}",
    b'{"variants": [NaN]}', b'{"a": Infinity}', b'{"a": -Infinity}', b'{"a": 1,}', b"\xff\xfe",
])
def test_refuses_what_json_loads_refuses_with_its_message(raw):
    with pytest.raises(ValueError) as expected:
        json.loads(raw, parse_constant=reject_constant)
    with pytest.raises(ValueError) as got:
        parse_with_variant_texts(raw)
    assert str(got.value) == str(expected.value)


def test_nan_is_named_in_the_error():
    # RFC 8259 §6: NaN and Infinity are not permitted as numeric values.
    with pytest.raises(ValueError, match="NaN is not a JSON number"):
        parse_with_variant_texts(b'{"frequency_hz": [1.0, NaN]}')


def test_duplicate_members_keep_the_last_like_json_loads():
    raw = b'{"variants": [1], "variants": [2, 3]}'
    parsed = parse_with_variant_texts(raw)
    assert parsed.value == json.loads(raw) == {"variants": [2, 3]}
    assert parsed.variant_texts == [b"2", b"3"]
    raw = b'{"variants": [1], "variants": 4}'
    parsed = parse_with_variant_texts(raw)
    assert parsed.value == {"variants": 4} and parsed.variant_texts is None


@pytest.mark.parametrize("raw", [
    "\ufeff".encode() + b'{"variants": [1]}',  # byte order mark: json.loads accepts bytes with it
    b'{"variants": [{"x": "\\ud800"}]}',  # lone surrogate escape: json.loads keeps it
    b'{"variants": [{"frequency_hz": [1e400]}]}',  # json.loads reads infinity (schema refuses)
])
def test_what_orjson_refuses_falls_back_to_json_loads(raw):
    parsed = parse_with_variant_texts(raw)
    assert parsed.value == json.loads(raw) and parsed.text is None
    assert parsed.variant_texts is not None
    assert [json.loads(t) for t in parsed.variant_texts] == json.loads(raw)["variants"]
    assert loads_json(raw) == json.loads(raw)


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


@settings(max_examples=300, deadline=None, derandomize=True)
@given(
    members=st.fixed_dictionaries({}, optional={"label": values, "map": values}),
    variants=st.lists(values, max_size=5),
    indent=st.sampled_from([None, 0, 2]),
    ascii_only=st.booleans(),
    pad=whitespace,
)
def test_batch_outline_texts_read_back_like_json_loads(members, variants, indent, ascii_only,
                                                       pad):
    """Each text of the outline reads back (``json.loads``) to what ``json.loads`` makes of that
    member or variant of the whole body."""
    raw = (pad + _dump({**members, "variants": variants}, indent, ascii_only) + pad).encode()
    outline = outline_batch(raw)
    whole = _reference(raw)
    assert outline is not None
    assert len(outline.variants) == len(whole["variants"])
    assert _same([_reference(t) for t in outline.variants], whole["variants"])
    for name in ("label", "map"):
        text = getattr(outline, name)
        assert (text is None) == (name not in whole)
        if text is not None:
            assert _same(_reference(text), whole[name])


@pytest.mark.parametrize("raw", [
    b'{"variants": [1], "wobble": 2}',      # a member a batch does not have
    b'{"variants": {"a": 1}}',              # variants not an array
    b'{"label": "x"}',                      # no variants
    b'[{"variants": []}]',                  # not an object
    b'{"variants": [NaN]}',                 # not JSON (RFC 8259 has no NaN)
    b'{"variants": [1,]}',                  # malformed
    b'\xef\xbb\xbf{"variants": []}',         # UTF-8 byte order mark
])
def test_batch_outline_leaves_other_shapes_to_the_whole_body_parser(raw):
    """Anything but an object of label/map/variants goes to the parser that names problems."""
    assert outline_batch(raw) is None


def test_batch_outline_keeps_the_last_of_duplicate_members_like_json_loads():
    raw = b'{"variants": [1], "variants": [2, 3]}'
    outline = outline_batch(raw)
    assert outline is not None
    assert [json.loads(t) for t in outline.variants] == json.loads(raw)["variants"]
