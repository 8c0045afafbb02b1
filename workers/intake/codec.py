"""The stored form of a validated check request, and the request read back from it.

The API validates a check request once (``service.schemas.request.CheckRequestSchema``, which
also parses Touchstone text) and stores :func:`encode_request` of the engine's typed request;
a worker, or the API when it reads a stored check back, rebuilds the same
``workers.engine.request.CheckRequest`` with :func:`decode_request`, without validating or
parsing again (and without marshmallow).

The form is MessagePack (https://msgpack.org) written by msgspec, which encodes the request's
frozen dataclasses field by field as maps: a field added to one of them with a default (a new
optional request member) is stored and read back with no change here, and a request stored
before the field existed reads back with the default. Beyond msgspec's own types:

- an ndarray is a map ``{"dtype": "<f8" | "<c16", "shape": [...], "bytes": bin}``: IEEE 754
  binary64 little-endian, row-major, complex as (re, im) pairs, so every value reads back bit for
  bit; or ``{"dtype", "shape", "ref": "<sha256 hex>"}`` for an array that the checks of a batch
  share, whose bytes are kept once beside them (:class:`SharedArrays`);
- a complex number is ``[re, im]``.
"""

from __future__ import annotations

import hashlib
import math
from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

import msgspec
import numpy as np

from workers.engine.request import CheckRequest

if TYPE_CHECKING:
    from workers.store.records import StoredRequest

REQUEST_ENCODING = "ballast.check-request/msgpack-1"
ARRAY_DTYPES = {"<f8": np.dtype("<f8"), "<c16": np.dtype("<c16")}
SHARED_MIN_BYTES = 4096  # smaller arrays are kept inline: a reference costs about 80 bytes


class StoredRequestError(ValueError):
    """A stored request that cannot be read back (unknown form, damaged, shared bytes gone)."""


class SharedArrays:
    """Large arrays that the checks of one batch have in common, kept once by SHA-256.

    The first request encoded with it hands over every array of at least ``min_bytes``; each
    later one refers to such an array when its own has the same bytes (a byte comparison, which
    stops at the first difference, so an array of its own costs next to nothing). A batch whose
    map holds the data (variants that change only devices or options) so stores its data once.
    ``blobs`` maps each hash to its bytes; a store keeps them beside the batch's checks.
    """

    def __init__(self, min_bytes: int = SHARED_MIN_BYTES) -> None:
        self.min_bytes = min_bytes
        self.blobs: dict[str, bytes | memoryview] = {}
        self._by_size: dict[int, list[tuple[bytes | memoryview, str]]] = {}
        self._collecting = True

    def refer(self, raw: bytes | memoryview) -> str | None:
        """The hash under which ``raw`` is kept, or None when it is kept inline."""
        if len(raw) < self.min_bytes:
            return None
        for kept, digest in self._by_size.get(len(raw), ()):
            if kept == raw:
                return digest
        if not self._collecting:
            return None
        digest = hashlib.sha256(raw).hexdigest()
        self.blobs[digest] = raw
        self._by_size.setdefault(len(raw), []).append((raw, digest))
        return digest

    def close(self) -> None:
        """Take no new arrays (called once the first request is encoded)."""
        self._collecting = False


def encode_request(request: CheckRequest, shared: SharedArrays | None = None) -> bytes:
    """``request`` (validated) in the stored form; with ``shared``, its large arrays that other
    checks of the batch share are referred to instead of copied."""

    def encode_value(value: Any) -> Any:
        if isinstance(value, np.ndarray):
            data = np.ascontiguousarray(value)
            name = data.dtype.newbyteorder("<").str
            if name not in ARRAY_DTYPES:
                raise TypeError(f"an array of {data.dtype} has no stored form")
            # the array's own bytes, not a copy (msgpack writes a buffer as bin)
            raw = memoryview(data.astype(ARRAY_DTYPES[name], copy=False)).cast("B")
            digest = shared.refer(raw) if shared is not None else None
            body = {"ref": digest} if digest is not None else {"bytes": raw}
            return {"dtype": name, "shape": list(data.shape), **body}
        if isinstance(value, complex):
            return [value.real, value.imag]
        raise TypeError(f"{type(value).__name__} has no stored form")

    payload = msgspec.msgpack.encode(request, enc_hook=encode_value)
    if shared is not None:
        shared.close()
    return payload


def _array(value: Any, shared: Mapping[str, bytes]) -> np.ndarray:
    if not isinstance(value, dict) or value.get("dtype") not in ARRAY_DTYPES:
        raise StoredRequestError("a stored array has no known dtype")
    dtype, shape = ARRAY_DTYPES[value["dtype"]], value.get("shape")
    raw = value.get("bytes")
    if raw is None:
        raw = shared.get(value.get("ref", ""))
        if raw is None:
            raise StoredRequestError("the arrays this check shares with its batch are missing "
                                     "from the store")
    if not (isinstance(shape, list) and all(isinstance(n, int) and n >= 0 for n in shape)) \
            or len(raw) != math.prod(shape) * dtype.itemsize:
        raise StoredRequestError("a stored array's bytes do not match its shape")
    # a copy: writable and native, as the schema makes its arrays
    return np.frombuffer(raw, dtype=dtype).reshape(shape).astype(dtype.newbyteorder("="))


def decode_request(payload: bytes, encoding: str = REQUEST_ENCODING,
                   shared: Mapping[str, bytes] | None = None) -> CheckRequest:
    """The request that :func:`encode_request` stored; ``shared``: the batch's shared arrays by
    hash. Raises :class:`StoredRequestError`."""
    if encoding != REQUEST_ENCODING:
        raise StoredRequestError(f"the request is stored as {encoding!r}, a form this version "
                                 f"does not read (expected {REQUEST_ENCODING!r})")
    blobs = shared or {}

    def decode_value(kind: type, value: Any) -> Any:
        if kind is np.ndarray:
            return _array(value, blobs)
        if kind is complex and isinstance(value, list) and len(value) == 2:
            return complex(value[0], value[1])
        raise StoredRequestError(f"a stored {kind.__name__} cannot be read")

    try:
        return msgspec.msgpack.decode(payload, type=CheckRequest, dec_hook=decode_value)
    except (msgspec.DecodeError, msgspec.ValidationError) as exc:
        raise StoredRequestError(f"the stored request cannot be read: {exc}") from exc


def decode_stored(stored: StoredRequest) -> CheckRequest:
    """The request of a check as ``CheckStore.get_request`` gives it back."""
    return decode_request(stored.payload, stored.encoding, stored.shared)
