"""/v1/batches: many variants of one circuit sharing a port/device map.

A JSON batch is ``{"label"?, "map"?, "variants": [...]}``; each variant's members are merged over
the map and the result must be a valid check request. A multipart batch carries the map as a JSON
part named ``map`` and one Touchstone file per variant in parts named ``files`` (the file name is
the variant's label). Both are validated by the schemas the OpenAPI document shows
(``service.api.batch_intake``): the envelope first, then each variant while the first ones are
already being stored and queued; an invalid variant answers 422 naming every problem, and nothing
of the batch stays stored. What the variants have in common is stored once.
"""

from __future__ import annotations

import base64
import binascii
import json
from typing import Any

from flask import current_app, request, url_for
from flask_smorest import Blueprint
from marshmallow import RAISE

from service.api.admission import submission, withdraw_cancelled
from service.api.batch_intake import json_batch, multipart_batch
from service.api.checks import IDEMPOTENCY_PARAMETER
from service.api.common import (
    accept_once,
    document_errors,
    idempotency_key,
    iso,
    store_checks,
)
from service.api.path_ids import require_path_ids
from service.api.tenancy import authenticate, check_store, tenant
from service.problems import abort_problem, field_errors
from service.schemas.api import (
    BatchAcceptedSchema,
    BatchChecksPageSchema,
    BatchChecksQuerySchema,
    BatchListQuerySchema,
    BatchListSchema,
    BatchSchema,
)
from service.schemas.batch import BatchRequestSchema, BatchUploadSchema
from workers.collector import collector_paused
from workers.store import (
    CHECK_STATUSES,
    UNFINISHED_STATUSES,
    VERDICT_NAMES,
    BatchRecord,
    CheckRecord,
)

blp = Blueprint("batches", __name__, url_prefix="/v1/batches",
                description="Batches of variants sharing one port/device map")
blp.before_request(authenticate)
blp.before_request(require_path_ids)  # after the token: 401 first

def _accepted(batch_id: str) -> tuple[dict[str, Any], int, dict[str, str]]:
    record = check_store().get_batch(tenant(), batch_id)
    if record is None:  # retention ran out between the two requests of an idempotent retry
        abort_problem(404, f"no batch {batch_id!r}", kind="not-found")
    location = url_for("batches.get_batch", batch_id=batch_id)
    return (
        {"id": batch_id, "location": location, "check_ids": list(record.check_ids)},
        202,
        {"Location": location, "Retry-After": str(current_app.config["BALLAST_RETRY_AFTER_S"])},
    )


@blp.route("", methods=["POST"])
@blp.doc(
    operationId="submitBatch",
    parameters=[IDEMPOTENCY_PARAMETER],
    requestBody={"required": True, "content": {
        "application/json": {"schema": BatchRequestSchema},
        "multipart/form-data": {"schema": BatchUploadSchema},
    }},
)
@blp.response(202, BatchAcceptedSchema, description="Accepted: every variant is queued",
              headers={"Location": {"schema": {"type": "string"}},
                       "Retry-After": {"schema": {"type": "integer"}}})
@document_errors(blp, 400, 401, 409, 413, 415, 422, 429)
def submit_batch():
    """Queue many variants sharing one port/device map (JSON, or multipart Touchstone files)."""
    # The parsed batch (millions of small lists) is freed by reference counting when
    # _submit_batch returns; the paused collector never scans it.
    with collector_paused():
        return _submit_batch()


def _submit_batch() -> tuple[dict[str, Any], int, dict[str, str]]:
    intake = multipart_batch() if request.mimetype == "multipart/form-data" else json_batch()
    hook = intake.callback_url

    def create() -> str:
        batch_id, _ = store_checks(intake.checks, submission(intake.priority, hook),
                                   as_batch=True, batch_label=intake.label,
                                   shared=intake.checks.arrays.blobs)
        assert batch_id is not None
        return batch_id

    batch_id = accept_once(idempotency_key(), intake.fingerprint, create, replay=lambda b: b)
    return _accepted(batch_id)


def batch_view(record: BatchRecord, size: int | None = None) -> dict[str, Any]:
    by_status = {s: int(record.counts_by_status.get(s, 0)) for s in CHECK_STATUSES}
    by_verdict = {v: int(record.counts_by_verdict.get(v, 0)) for v in VERDICT_NAMES}
    return {
        "id": record.id,
        "label": record.label,
        "created_at": iso(record.created_at),
        "size": size if size is not None else sum(by_status.values()),
        "finished": not any(by_status[s] for s in UNFINISHED_STATUSES),
        "counts_by_status": by_status,
        "counts_by_verdict": by_verdict,
        "priority": record.priority,
        "callback_url": record.callback_url,
        "callback_status": record.callback_status,
    }


@blp.route("", methods=["GET"])
@blp.doc(operationId="listBatches")
@blp.arguments(BatchListQuerySchema, location="query", as_kwargs=True, unknown=RAISE)
@blp.response(200, BatchListSchema)
@document_errors(blp, 401, 422, 429)
def list_batches(limit: int = 50):
    """The tenant's most recent batches, newest first."""
    return {"items": [batch_view(b) for b in check_store().list_batches(tenant(), limit=limit)]}


def _found(batch_id: str) -> BatchRecord:
    record = check_store().get_batch(tenant(), batch_id)
    if record is None:
        abort_problem(404, f"no batch {batch_id!r}", kind="not-found")
    return record


@blp.route("/<batch_id:batch_id>", methods=["GET"])
@blp.doc(operationId="getBatch")
@blp.response(200, BatchSchema)
@document_errors(blp, 401, 404, 429)
def get_batch(batch_id: str):
    """Counts of the batch's checks per status and per verdict."""
    record = _found(batch_id)
    return batch_view(record, size=len(record.check_ids))


@blp.route("/<batch_id:batch_id>", methods=["DELETE"])
@blp.doc(operationId="cancelBatch")
@blp.response(200, BatchSchema, description="The batch after cancelling its unfinished checks")
@document_errors(blp, 401, 404, 429)
def cancel_batch(batch_id: str):
    """Cancel every check of the batch that has not finished."""
    _found(batch_id)
    record = check_store().cancel_batch(tenant(), batch_id)
    if record is None:
        abort_problem(404, f"no batch {batch_id!r}", kind="not-found")
    if record.counts_by_status.get("cancelled"):
        withdraw_cancelled(list(record.check_ids))
    return batch_view(record, size=len(record.check_ids))


def encode_cursor(after: str) -> str:
    raw = json.dumps({"after": after}, separators=(",", ":")).encode()
    return base64.urlsafe_b64encode(raw).decode().rstrip("=")


# A cursor holds a position within one batch (at most BALLAST_MAX_VARIANTS); anything at or past
# 2**53 (exact in a Redis score, inside SQLite's and LRANGE's 64-bit integers) was not given out.
MAX_CURSOR_POSITION = 2**53


def decode_cursor(cursor: str) -> str:
    try:
        raw = base64.urlsafe_b64decode(cursor + "=" * (-len(cursor) % 4))
        after = json.loads(raw)["after"]
        if not (isinstance(after, str) and after.isascii() and after.isdigit()
                and len(after) <= 16 and int(after) < MAX_CURSOR_POSITION):
            raise ValueError(after)
    except (binascii.Error, ValueError, KeyError, TypeError, RecursionError):
        abort_problem(400, "the cursor is not one this API gave out", kind="invalid-cursor",
                      errors=field_errors([("cursor", "unknown cursor")]))
    return after


def item_view(record: CheckRecord) -> dict[str, Any]:
    summary = record.summary
    return {
        "id": record.id,
        "label": record.label,
        "status": record.status,
        "verdict": summary.verdict if summary else None,
        "unstable_count": summary.unstable_count if summary else None,
        "first_unstable_frequency_hz": summary.first_frequency_hz if summary else None,
        "first_unstable_node": summary.first_node if summary else None,
    }


@blp.route("/<batch_id:batch_id>/checks", methods=["GET"])
@blp.doc(operationId="listBatchChecks")
@blp.arguments(BatchChecksQuerySchema, location="query", as_kwargs=True, unknown=RAISE)
@blp.response(200, BatchChecksPageSchema, headers={"Link": {
    "schema": {"type": "string"}, "description": 'RFC 8288 link to the next page, rel="next"'}})
@document_errors(blp, 400, 401, 404, 422, 429)
def list_batch_checks(batch_id: str, **query: Any):
    """One page of the batch's checks in submission order, optionally filtered."""
    if check_store().get_batch(tenant(), batch_id) is None:
        abort_problem(404, f"no batch {batch_id!r}", kind="not-found")
    cfg = current_app.config
    limit = min(int(query.get("limit") or cfg["BALLAST_PAGE_SIZE"]),
                int(cfg["BALLAST_MAX_PAGE_SIZE"]))
    after = decode_cursor(query["cursor"]) if query.get("cursor") else None
    page, next_after = check_store().list_batch_checks(
        tenant(), batch_id, after=after, limit=limit,
        status=query.get("status"), verdict=query.get("verdict"),
    )
    body = {"items": [item_view(r) for r in page], "next_cursor": None}
    headers: dict[str, str] = {}
    if next_after is not None:
        cursor = encode_cursor(next_after)
        body["next_cursor"] = cursor
        params = {k: v for k, v in query.items() if k in ("status", "verdict") and v}
        url = url_for("batches.list_batch_checks", batch_id=batch_id, cursor=cursor,
                      limit=limit, _external=True, **params)
        headers["Link"] = f'<{url}>; rel="next"'
    return body, 200, headers
