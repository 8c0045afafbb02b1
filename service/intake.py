"""The API's side of intake: a JSON check request validated once, and stored in the form that a
worker only decodes (``workers.intake``: MessagePack of the engine's typed request, Touchstone
already parsed).

:func:`load_request` is the one way to a ``CheckRequest`` from either side of the store: a JSON
request goes through ``CheckRequestSchema`` (errors name the field), a stored one (validated when
it was accepted) is decoded. A new optional request member is added to the schema (and the
engine's dataclass); the stored form carries it with no change (see ``workers.intake.codec``).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from service.schemas.request import CheckRequestSchema
from workers.engine.request import CheckRequest
from workers.intake import REQUEST_ENCODING, SharedArrays, decode_stored, encode_request
from workers.store import NewCheck, StoredRequest


def load_request(payload: Mapping[str, Any] | StoredRequest) -> CheckRequest:
    """A JSON check request, validated (raises ``marshmallow.ValidationError`` naming the field),
    or a stored request read back (raises ``workers.intake.StoredRequestError``)."""
    if isinstance(payload, StoredRequest):
        return decode_stored(payload)
    return CheckRequestSchema().load(payload)


def new_check(request: CheckRequest, label: str | None = None,
              shared: SharedArrays | None = None, extends: str | None = None) -> NewCheck:
    """A validated request as a check to store (``shared``: the arrays of its batch kept once;
    ``extends``: the check whose samples it merges with new ones)."""
    return NewCheck(encode_request(request, shared), REQUEST_ENCODING, label, extends)
