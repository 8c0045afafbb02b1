"""Validated check requests as the store keeps them (``workers.intake.codec``)."""

from workers.intake.codec import (
    REQUEST_ENCODING,
    SharedArrays,
    StoredRequestError,
    decode_request,
    decode_stored,
    encode_request,
)

__all__ = ["REQUEST_ENCODING", "SharedArrays", "StoredRequestError", "decode_request",
           "decode_stored", "encode_request"]
