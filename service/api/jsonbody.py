"""Parse a JSON request body and keep the exact source text of each batch variant.

Storing a variant re-serialised with ``json.dumps`` costs about as much as parsing it (float
formatting dominates); keeping the text the client sent costs a slice. ``parse_with_variant_texts``
walks the top-level object itself and decodes every member with the standard library's decoder
(``JSONDecoder.raw_decode``), so each value is exactly what ``json.loads`` gives; for a
``"variants"`` array it also returns each element's source text. Anything unusual (not an object,
a syntax error, NaN) falls back to ``json.loads`` for the result or the error message.
"""

from __future__ import annotations

import json
import re
from dataclasses import dataclass
from json.decoder import scanstring
from typing import Any

_WS = re.compile(r"[ \t\n\r]*")  # JSON whitespace (RFC 8259 §2)


class _UnusualError(Exception):
    """The fast walk gives up; ``json.loads`` decides."""


def reject_constant(name: str) -> Any:
    """``parse_constant`` hook: NaN and Infinity are not JSON (RFC 8259 §6)."""
    raise ValueError(f"{name} is not a JSON number")


_DECODER = json.JSONDecoder(parse_constant=reject_constant)


def _skip(text: str, i: int) -> int:
    return _WS.match(text, i).end()  # type: ignore[union-attr]


def _expect(text: str, i: int, chars: str) -> str:
    if i >= len(text) or text[i] not in chars:
        raise _UnusualError
    return text[i]


def _array_with_texts(text: str, i: int) -> tuple[list[Any], list[str], int]:
    items: list[Any] = []
    texts: list[str] = []
    i = _skip(text, i + 1)
    if text.startswith("]", i):
        return items, texts, i + 1
    while True:
        start = i
        value, i = _DECODER.raw_decode(text, i)
        items.append(value)
        texts.append(text[start:i])
        i = _skip(text, i)
        if _expect(text, i, ",]") == "]":
            return items, texts, i + 1
        i = _skip(text, i + 1)


def _walk(text: str) -> tuple[Any, list[str] | None]:
    i = _skip(text, 0)
    _expect(text, i, "{")
    body: dict[str, Any] = {}
    texts: list[str] | None = None
    i = _skip(text, i + 1)
    if text.startswith("}", i):
        i += 1
    else:
        while True:
            _expect(text, i, '"')
            key, i = scanstring(text, i + 1)
            i = _skip(text, i)
            _expect(text, i, ":")
            i = _skip(text, i + 1)
            if key == "variants" and text.startswith("[", i):
                body[key], texts, i = _array_with_texts(text, i)
            else:
                body[key], i = _DECODER.raw_decode(text, i)
                if key == "variants":
                    texts = None
            i = _skip(text, i)
            if _expect(text, i, ",}") == "}":
                i += 1
                break
            i = _skip(text, i + 1)
    if _skip(text, i) != len(text):
        raise _UnusualError
    return body, texts


@dataclass(frozen=True)
class ParsedBody:
    """``value`` as ``json.loads`` gives it; ``text``: the body as a str that ``json.loads``
    reads back to ``value`` (None after a fallback); ``variant_texts``: the source text of each
    element of a top-level ``"variants"`` array (None when there is none or after a fallback)."""

    value: Any
    text: str | None
    variant_texts: list[str] | None


def parse_with_variant_texts(raw: bytes) -> ParsedBody:
    """Parse a request body; raises ValueError (as ``json.loads`` does) when it is not JSON."""
    try:
        text = raw.decode("utf-8")
        value, variant_texts = _walk(text)
        return ParsedBody(value, text, variant_texts)
    except (_UnusualError, ValueError, IndexError, RecursionError):
        pass
    return ParsedBody(json.loads(raw, parse_constant=reject_constant), None, None)
