"""Parse a JSON request body with orjson and give each batch variant as JSON text for the store.

orjson reads the body (RFC 8259) and writes each element of a top-level ``"variants"`` array back
as compact JSON text (shortest round-trip floats), so that neither the parse nor the store runs the
standard library's decoder or encoder over large numeric arrays.

A body orjson refuses goes to ``json.loads``, which either refuses it too (NaN and Infinity
included), with its message naming the line, column and what is wrong, or reads what orjson does
not (a UTF-8 byte order mark, lone surrogate escapes, ``1e400`` read as infinity for the schema
to refuse). The garbage collector is paused while orjson builds the value (see
``service.api.jsontext``). One difference remains: an integer outside [-2**63, 2**64) is read
as the nearest float, as the check request schema reads every number anyway.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import msgspec
import orjson

from service.api.jsontext import orjson_loads


def reject_constant(name: str) -> Any:
    """``parse_constant`` hook: NaN and Infinity are not JSON (RFC 8259 §6)."""
    raise ValueError(f"{name} is not a JSON number")


@dataclass(frozen=True)
class ParsedBody:
    """``value``: the parsed body; ``raw``: the body's bytes when orjson read them (None after a
    fallback to ``json.loads``); ``variant_texts``: one UTF-8 JSON text per element of a
    top-level ``"variants"`` array, reading back to that element (None when there is none)."""

    value: Any
    raw: bytes | None
    variant_texts: list[bytes] | None

    @property
    def text(self) -> str | None:
        """The body as a str that reads back to ``value`` (None after a fallback)."""
        return self.raw.decode("utf-8") if self.raw is not None else None


def _stdlib_text(value: Any) -> bytes:
    return json.dumps(value, separators=(",", ":")).encode()


def _variant_texts(value: Any, dump: Callable[[Any], bytes]) -> list[bytes] | None:
    if not isinstance(value, dict) or not isinstance(value.get("variants"), list):
        return None
    return [dump(v) for v in value["variants"]]


def parse_with_variant_texts(raw: bytes) -> ParsedBody:
    """Parse a request body; raises ValueError (``json.loads``'s message) when it is not JSON."""
    try:
        value = orjson_loads(raw)
    except orjson.JSONDecodeError:
        value = json.loads(raw, parse_constant=reject_constant)
        # What orjson refuses may read as infinity here (``1e400``): only json.dumps writes it back.
        return ParsedBody(value, None, _variant_texts(value, _stdlib_text))
    # orjson gives finite floats and 64-bit integers only, all of which it writes back as read.
    return ParsedBody(value, raw, _variant_texts(value, orjson.dumps))


class _BatchOutline(msgspec.Struct, forbid_unknown_fields=True):
    variants: list[msgspec.Raw]
    label: msgspec.Raw | msgspec.UnsetType = msgspec.UNSET
    map: msgspec.Raw | msgspec.UnsetType = msgspec.UNSET


@dataclass(frozen=True)
class BatchOutline:
    """A JSON batch body cut into its members' JSON texts (None: member absent), one text per
    element of ``variants``; none of them parsed yet."""

    label: bytes | None
    map: bytes | None
    variants: list[bytes]


def _text(raw: msgspec.Raw | msgspec.UnsetType) -> bytes | None:
    return None if isinstance(raw, msgspec.UnsetType) else bytes(memoryview(raw))


def outline_batch(raw: bytes) -> BatchOutline | None:
    """Cut a batch body into the JSON texts of its members and of each variant, or None.

    msgspec checks the whole body's syntax and skips over each member's value without building
    it (``msgspec.Raw``), so that the variants can then be parsed and validated one at a time:
    parsing a 227 MB body of 500 variants in one piece took 3.0 s (the interpreter touching
    fresh memory for ten million floats), one variant after the other 0.4 s. None when the body
    is not an object with only ``label``, ``map`` and a ``variants`` array (or not JSON, or
    holds what msgspec refuses, such as NaN): the caller then parses it whole, which names
    every problem.
    """
    try:
        outline = msgspec.json.decode(raw, type=_BatchOutline)
    except msgspec.DecodeError:  # malformed JSON, or not of this shape (ValidationError)
        return None
    return BatchOutline(_text(outline.label), _text(outline.map),
                        [bytes(memoryview(v)) for v in outline.variants])
