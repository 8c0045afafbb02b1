"""The stored form of a check request: JSON text, or MessagePack with packed arrays as bytes.

A batch variant whose arrays arrive packed (``{"dtype", "shape", "base64"}``) is stored as
MessagePack (msgspec; the format is https://msgpack.org) with each packed array's ``base64``
member replaced by the bytes it encodes: a quarter fewer bytes to write, keep and read back than
the base64 text, and no base64 to decode in the worker. ``CheckRequestSchema`` takes ``base64``
as bytes for this reason only: a JSON document cannot carry bytes, so what a client sends is
always text and is decoded (and checked) as such.

Reading tells the two forms apart by the first byte: a stored JSON request is an object and
starts with ``{`` (or white space), a MessagePack map starts with 0x80-0x8f, 0xde or 0xdf.
"""

from __future__ import annotations

from base64 import b64decode
from typing import Any

import msgspec

from service.schemas.request import is_packed
from service.store.jsontext import loads_json

_MSGPACK_MAP_FIRST = frozenset({*range(0x80, 0x90), 0xDE, 0xDF})
_encoder = msgspec.msgpack.Encoder()
_decoder = msgspec.msgpack.Decoder()


def with_packed_bytes(value: Any) -> tuple[Any, int]:
    """``value`` with every packed array's base64 text replaced by its bytes, and how many were
    replaced; raises ``ValueError`` (``binascii.Error`` among them) on text that is not base64
    (RFC 4648), decoded as ``CheckRequestSchema`` decodes it."""
    if isinstance(value, dict):
        if is_packed(value) and isinstance(value["base64"], str):
            return {**value, "base64": b64decode(value["base64"], validate=True)}, 1
        out, found = {}, 0
        for key, item in value.items():
            out[key], n = with_packed_bytes(item)
            found += n
        return out, found
    if isinstance(value, list) and value and isinstance(value[0], dict):  # ports, devices
        pairs = [with_packed_bytes(item) for item in value]
        return [item for item, _ in pairs], sum(n for _, n in pairs)
    return value, 0


def encode_binary(request: dict[str, Any]) -> bytes | None:
    """A validated request whose packed arrays already hold bytes (:func:`with_packed_bytes`)
    in the binary stored form, or None when it holds what MessagePack cannot (integers beyond
    64 bits)."""
    try:
        return _encoder.encode(request)
    except OverflowError:
        return None


def binary_request(request: dict[str, Any]) -> bytes | None:
    """``request`` (validated) in the binary stored form, or None when it holds no packed array
    (JSON text is then as compact) or holds what MessagePack cannot (integers beyond 64 bits)."""
    value, found = with_packed_bytes(request)
    return encode_binary(value) if found else None


def is_binary(data: bytes | str) -> bool:
    return isinstance(data, bytes | bytearray | memoryview) and len(data) > 0 \
        and data[0] in _MSGPACK_MAP_FIRST


def load_request(data: bytes | str) -> Any:
    """A stored request read back: MessagePack (binary form) or JSON text."""
    if is_binary(data):
        return _decoder.decode(data)
    return loads_json(data)
