"""Schemas of the API's own documents (the check request itself is ``service.schemas.request``,
the batch bodies ``service.schemas.batch``).

Response schemas serialise what the API returns and document it in the OpenAPI file.
"""

from __future__ import annotations

from marshmallow import RAISE, Schema, fields, validate

from service.schemas.verdict import VERDICT_REF
from workers.store import CHECK_STATUSES, PRIORITIES, VERDICT_NAMES


class CheckAcceptedSchema(Schema):
    id = fields.String(required=True)
    status = fields.String(required=True, validate=validate.OneOf(CHECK_STATUSES))
    location = fields.String(required=True)
    extends = fields.String(metadata={
        "description": "with POST /v1/checks/{id}/samples: the check the new one extends"})


class CheckSchema(Schema):
    """A check's state; ``verdict`` is the engine's verdict JSON, unchanged, once done."""

    id = fields.String(required=True)
    status = fields.String(required=True, validate=validate.OneOf(CHECK_STATUSES))
    batch_id = fields.String(allow_none=True, required=True)
    label = fields.String(allow_none=True, required=True)
    attempts = fields.Integer(required=True)
    created_at = fields.String(required=True, metadata={"format": "date-time"})
    updated_at = fields.String(required=True, metadata={"format": "date-time"})
    started_at = fields.String(allow_none=True, required=True, metadata={"format": "date-time"})
    finished_at = fields.String(allow_none=True, required=True, metadata={"format": "date-time"})
    verdict = fields.Raw(allow_none=True, required=True, metadata={
        "allOf": [{"$ref": VERDICT_REF}],  # with allow_none: anyOf [Verdict, null]
        "description": "the engine's verdict document when status is done, else null"})
    reason = fields.String(allow_none=True, required=True, metadata={
        "description": "why the check failed, when status is failed, else null"})
    extends = fields.String(allow_none=True, required=True, metadata={
        "description": "the check whose samples this one merges with new ones "
                       "(POST /v1/checks/{id}/samples), else null"})
    priority = fields.String(required=True, validate=validate.OneOf(PRIORITIES))


class BatchAcceptedSchema(Schema):
    id = fields.String(required=True)
    location = fields.String(required=True)
    check_ids = fields.List(fields.String(), required=True)


def _count_fields(names: tuple[str, ...]) -> dict[str, fields.Field]:
    return {name: fields.Integer(required=True) for name in names}


StatusCountsSchema = Schema.from_dict(_count_fields(CHECK_STATUSES), name="StatusCountsSchema")
VerdictCountsSchema = Schema.from_dict(_count_fields(VERDICT_NAMES), name="VerdictCountsSchema")


class BatchSchema(Schema):
    id = fields.String(required=True)
    label = fields.String(allow_none=True, required=True)
    created_at = fields.String(required=True, metadata={"format": "date-time"})
    size = fields.Integer(required=True)
    finished = fields.Boolean(required=True, metadata={"description": "no check left to run"})
    counts_by_status = fields.Nested(StatusCountsSchema, required=True)
    counts_by_verdict = fields.Nested(VerdictCountsSchema, required=True)
    priority = fields.String(required=True, validate=validate.OneOf(PRIORITIES))
    callback_url = fields.String(allow_none=True, required=True)
    callback_status = fields.String(allow_none=True, required=True, metadata={
        "description": "waiting, delivered or failed (null without a callback_url)"})


class BatchListSchema(Schema):
    items = fields.List(fields.Nested(BatchSchema), required=True)


class BatchCheckItemSchema(Schema):
    id = fields.String(required=True)
    label = fields.String(allow_none=True, required=True)
    status = fields.String(required=True, validate=validate.OneOf(CHECK_STATUSES))
    verdict = fields.String(allow_none=True, required=True)
    unstable_count = fields.Integer(allow_none=True, required=True)
    first_unstable_frequency_hz = fields.Float(allow_none=True, required=True, metadata={
        "description": "frequency of the lowest unstable mode"})
    first_unstable_node = fields.String(allow_none=True, required=True, metadata={
        "description": "the node where that mode shows most strongly"})


class BatchChecksPageSchema(Schema):
    items = fields.List(fields.Nested(BatchCheckItemSchema), required=True)
    next_cursor = fields.String(allow_none=True, required=True)


class _Strict(Schema):
    class Meta:
        unknown = RAISE


class BatchChecksQuerySchema(_Strict):
    status = fields.String(validate=validate.OneOf(CHECK_STATUSES))
    verdict = fields.String(validate=validate.OneOf(VERDICT_NAMES))
    limit = fields.Integer(validate=validate.Range(min=1, max=1000))
    cursor = fields.String(validate=validate.Length(max=200))


class BatchListQuerySchema(_Strict):
    limit = fields.Integer(validate=validate.Range(min=1, max=200))


class HealthSchema(Schema):
    status = fields.String(required=True)


class ReadySchema(Schema):
    status = fields.String(required=True, validate=validate.OneOf(["ready", "unready"]))
    store = fields.Boolean(required=True)
    queue = fields.Boolean(required=True)
    workers = fields.Boolean(required=True)


class WebhookSecretSchema(Schema):
    secret = fields.String(required=True, metadata={
        "description": "whsec_ + base64 of the HMAC-SHA256 key (Standard Webhooks)"})
    previous = fields.String(allow_none=True, required=True, metadata={
        "description": "the secret before the last rotation, while it still signs"})
    scheme = fields.String(required=True)
