"""JSON request bodies: parsed with orjson, and a batch body cut into its variants first.

orjson reads a body (RFC 8259). A body orjson refuses goes to ``json.loads``, which either refuses
it too (NaN and Infinity included), with its message naming the line, column and what is wrong,
or reads what orjson does not (a UTF-8 byte order mark, lone surrogate escapes, ``1e400`` and
integers beyond the largest float read as infinity for the schema to refuse:
``service.api.jsontext.stdlib_loads``). The garbage collector is paused while orjson builds the
value (``service.api.jsontext``). One difference remains: an integer outside [-2**63, 2**64) is
read as the nearest float, as the check request schema reads every number anyway.
"""

from __future__ import annotations

import json
from typing import Any

import msgspec
import orjson

from service.api.jsontext import loads_json, orjson_loads, stdlib_loads
from service.api.request_reader import read_request


def reject_constant(name: str) -> Any:
    """``parse_constant`` hook: NaN and Infinity are not JSON (RFC 8259 §6)."""
    raise ValueError(f"{name} is not a JSON number")


def parse_body(raw: bytes | str) -> Any:
    """The body's value; raises ValueError (``json.loads``'s message) when it is not JSON."""
    try:
        return orjson_loads(raw)
    except orjson.JSONDecodeError:
        return stdlib_loads(raw, parse_constant=reject_constant)


class _BatchOutline(msgspec.Struct, forbid_unknown_fields=True):
    variants: list[msgspec.Raw]
    label: msgspec.Raw | msgspec.UnsetType = msgspec.UNSET
    map: msgspec.Raw | msgspec.UnsetType = msgspec.UNSET


def _text(raw: msgspec.Raw) -> memoryview:
    return memoryview(raw)  # a view of the body: no copy


def cut_batch(raw: bytes) -> Any:
    """A batch body as ``service.schemas.batch.BatchRequestSchema`` loads it: each element of
    its ``variants`` array left as its JSON text (a memoryview of the body, to be parsed when its
    turn comes), the map read by ``service.api.request_reader`` (its data as arrays), every
    other member parsed. Raises ValueError (``json.loads``'s message) when the body is not JSON.

    msgspec checks the whole body's syntax and skips over each variant without building it
    (``msgspec.Raw``): parsing a 227 MB body of 500 variants in one piece took 3.0 s (the
    interpreter touching fresh memory for ten million floats), one variant after the other
    0.4 s. A body of another shape is cut member by member; one that msgspec refuses (NaN, a
    byte order mark …) is parsed whole by :func:`parse_body`, which names the problem or reads
    what orjson and msgspec do not.
    """
    try:
        outline = msgspec.json.decode(raw, type=_BatchOutline)
    except msgspec.ValidationError:  # JSON, but not an object of label, map and variants
        return _cut_loosely(raw)
    except msgspec.DecodeError:
        return _parsed_whole(raw)
    body: dict[str, Any] = {"variants": [_text(v) for v in outline.variants]}
    if not isinstance(outline.label, msgspec.UnsetType):
        body["label"] = loads_json(_text(outline.label))
    if not isinstance(outline.map, msgspec.UnsetType):
        body["map"] = read_request(_text(outline.map))
    return body


def _cut_loosely(raw: bytes) -> Any:
    try:
        members = msgspec.json.decode(raw, type=dict[str, msgspec.Raw])
    except msgspec.ValidationError:  # not an object: the caller refuses it by its type
        return parse_body(raw)
    except msgspec.DecodeError:  # a member of another shape ended the first pass early
        return _parsed_whole(raw)
    body: dict[str, Any] = {}
    for name, member in members.items():
        if name == "variants":
            try:
                body[name] = [_text(v) for v in msgspec.json.decode(member, type=list[msgspec.Raw])]
                continue
            except msgspec.ValidationError:  # not an array: the schema names it
                pass
        body[name] = read_request(_text(member)) if name == "map" else loads_json(_text(member))
    return body


def _parsed_whole(raw: bytes) -> Any:
    value = parse_body(raw)
    if isinstance(value, dict) and isinstance(value.get("variants"), list):
        # json.dumps writes back what json.loads read (an infinity too, for the schema to refuse)
        value = {**value, "variants": [json.dumps(v).encode() for v in value["variants"]]}
    return value
