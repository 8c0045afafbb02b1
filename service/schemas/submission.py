"""How checks are to be queued, given beside the check request or in a batch's envelope:
``priority`` (``normal`` | ``urgent``) and a batch's ``callback_url``.

Urgent checks go before normal ones in their tenant's queue and before other tenants' normal
checks; they are bounded per tenant (``BALLAST_MAX_URGENT`` unfinished urgent checks, 20 by
default): above the bound the API answers 429 (422 for a batch larger than the bound), it never
downgrades silently.
"""

from __future__ import annotations

from typing import Any

from marshmallow import ValidationError, fields, validate

from service.schemas.request import CheckRequestSchema
from workers.callbacks.targets import MAX_URL_LENGTH
from workers.store import PRIORITIES, Priority

PRIORITY_DESCRIPTION = (
    "normal (default) or urgent: urgent checks are taken before normal ones, and each tenant may "
    "have a bounded number of unfinished urgent checks (429 above the bound)")


def priority_field() -> fields.Field:
    return fields.String(validate=validate.OneOf(PRIORITIES), load_default="normal",
                         metadata={"description": PRIORITY_DESCRIPTION})


def callback_url_field() -> fields.Field:
    return fields.String(
        validate=validate.URL(schemes={"http", "https"}, require_tld=False),
        metadata={"description": "called (POST, signed by the Standard Webhooks scheme with the "
                                 "tenant's secret) once every check of the batch has finished; "
                                 "loopback, link-local and private targets are refused",
                  "maxLength": MAX_URL_LENGTH})


class CheckSubmissionSchema(CheckRequestSchema):
    """A check request, with how it is to be queued."""

    priority = priority_field()


_PRIORITY = priority_field()


def load_priority(value: Any) -> Priority:
    """``value`` as a priority; raises ``ValidationError`` naming ``priority``."""
    try:
        return _PRIORITY.deserialize(value)
    except ValidationError as exc:
        raise ValidationError({"priority": exc.messages}) from exc
