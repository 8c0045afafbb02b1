"""/v1/batches: many variants of one circuit sharing a port/device map.

A JSON batch is ``{"label"?, "map"?, "variants": [...]}``; each variant's members are merged over
the map (``service.store.base.merge_request``) and the result must be a valid check request.
A multipart batch carries the map as a JSON part named ``map`` and one Touchstone file per variant
in parts named ``files`` (the file name is the variant's label). Every variant is validated before
anything is stored; the map is stored once.
"""

from __future__ import annotations

import base64
import binascii
import json
from collections.abc import Iterator
from typing import Any

from flask import current_app, g, request, url_for
from flask_smorest import Blueprint
from marshmallow import RAISE, ValidationError

from service.api.checks import IDEMPOTENCY_PARAMETER
from service.api.common import (
    IDEMPOTENCY_HEADER,
    accept_once,
    document_errors,
    idempotency_key,
    iso,
    json_body_bytes,
    json_object_body,
    parse_json,
    store_checks,
)
from service.api.jsonbody import BatchOutline, outline_batch
from service.api.tenancy import authenticate, store, tenant
from service.problems import abort_problem, field_errors
from service.schemas.api import (
    MAX_LABEL,
    REQUEST_FIELDS,
    BatchAcceptedSchema,
    BatchChecksPageSchema,
    BatchChecksQuerySchema,
    BatchListQuerySchema,
    BatchListSchema,
    BatchRequestSchema,
    BatchSchema,
    BatchUploadSchema,
)
from service.schemas.errors import flatten_errors
from service.schemas.request import CheckRequestSchema
from service.store.base import (
    CHECK_STATUSES,
    UNFINISHED_STATUSES,
    VERDICT_NAMES,
    BatchRecord,
    CheckRecord,
    CheckSource,
    NewCheck,
    content_hash,
    merge_request,
)
from service.store.jsontext import collector_paused, loads_json
from service.store.payload import encode_binary, with_packed_bytes
from workers.engine.errors import TouchstoneError
from workers.engine.touchstone import decode_text

blp = Blueprint("batches", __name__, url_prefix="/v1/batches",
                description="Batches of variants sharing one port/device map")
blp.before_request(authenticate)

MAX_REPORTED_ERRORS = 100
_BATCH_KEYS = {"label", "map", "variants"}
_VARIANT_KEYS = {*REQUEST_FIELDS, "label"}

Variant = tuple[str | None, dict[str, Any]]


class _Invalid:
    """Collects (field, message) pairs across the whole batch."""

    def __init__(self) -> None:
        self.pairs: list[tuple[str, str]] = []
        self.bad_variants = 0

    def add(self, field: str, message: str) -> None:
        self.pairs.append((field, message))

    def raise_if_any(self, n_variants: int) -> None:
        if not self.pairs:
            return
        first = f"{self.pairs[0][0]}: {self.pairs[0][1]}"
        detail = (f"{self.bad_variants} of {n_variants} variants are invalid; nothing was stored."
                  f" First: {first}" if self.bad_variants else first)
        more = len(self.pairs) - MAX_REPORTED_ERRORS
        errors = field_errors(self.pairs[:MAX_REPORTED_ERRORS])
        if more > 0:
            detail += f" ({more} further errors not listed)"
        abort_problem(422, detail, kind="invalid-request", errors=errors)


def _check_keys(value: Any, allowed: set[str], where: str, invalid: _Invalid) -> bool:
    if not isinstance(value, dict):
        invalid.add(where or "body", "must be a JSON object")
        return False
    for key in sorted(set(value) - allowed):
        invalid.add(f"{where}.{key}" if where else key, "Unknown field.")
    return True


def _check_label(value: Any, where: str, invalid: _Invalid) -> None:
    if value is not None and (not isinstance(value, str) or len(value) > MAX_LABEL):
        invalid.add(where, f"must be a string of at most {MAX_LABEL} characters")


def _parse_json_batch(body: dict[str, Any]) -> tuple[str | None, dict[str, Any], list[Variant]]:
    invalid = _Invalid()
    _check_keys(body, _BATCH_KEYS, "", invalid)
    _check_label(body.get("label"), "label", invalid)
    shared = body.get("map", {})
    _check_keys(shared, set(REQUEST_FIELDS), "map", invalid)
    raw_variants = body.get("variants")
    if not isinstance(raw_variants, list) or not raw_variants:
        invalid.add("variants", "must be a non-empty list of variants")
        raw_variants = []
    variants: list[Variant] = []
    for i, raw in enumerate(raw_variants):
        if _check_keys(raw, _VARIANT_KEYS, f"variants.{i}", invalid):
            _check_label(raw.get("label"), f"variants.{i}.label", invalid)
            member = {k: v for k, v in raw.items() if k != "label"}
            variants.append((raw.get("label"), member))
    invalid.raise_if_any(len(raw_variants))
    return body.get("label"), shared, variants


def _parse_multipart_batch() -> tuple[str | None, dict[str, Any], list[Variant]]:
    invalid = _Invalid()
    if "map" in request.files:
        map_text: Any = request.files["map"].read()
    else:
        map_text = request.form.get("map")
    shared: dict[str, Any] = {}
    if map_text is None:
        invalid.add("map", "missing: send the shared map as a JSON part named 'map'")
    else:
        parsed = parse_json(map_text, "the 'map' part")
        if _check_keys(parsed, set(REQUEST_FIELDS), "map", invalid):
            shared = parsed
    label = request.form.get("label")
    _check_label(label, "label", invalid)
    unknown = (set(request.form) | set(request.files)) - {"map", "label", "files"}
    for name in sorted(unknown):
        invalid.add(name, "Unknown field.")
    variants: list[Variant] = []
    files = request.files.getlist("files")
    if not files:
        invalid.add("files", "send one Touchstone file per variant in parts named 'files'")
    for i, upload in enumerate(files):
        try:  # Touchstone bytes: BOM dropped, comments in any 8-bit encoding (decode_text)
            text = decode_text(upload.read())
        except TouchstoneError as exc:
            invalid.add(f"files.{i}", exc.message)
            continue
        name = upload.filename or None
        _check_label(name, f"files.{i}", invalid)
        variants.append((name, {"touchstone": text}))
    invalid.raise_if_any(len(files))
    return label, shared, variants


def _validate_variant(schema: CheckRequestSchema, shared: dict[str, Any], index: int,
                      label: str | None, member: dict[str, Any], where: str,
                      invalid: _Invalid) -> None:
    """One merged variant through CheckRequestSchema; errors name the variant and the field."""
    try:
        schema.load(merge_request(shared, member))
    except ValidationError as exc:
        invalid.bad_variants += 1
        name = f" ({label!r})" if label else ""
        for field, message in flatten_errors(exc.messages):
            top = field.split(".", 1)[0]
            if top in member or top not in shared:
                invalid.add(f"{where}.{index}.{field}" if field != "body" else f"{where}.{index}",
                            f"variant {index}{name}: {message}")
            else:
                invalid.add(f"map.{field}", f"variant {index}{name}: {message}")


def _validate_variants(shared: dict[str, Any], variants: list[Variant], where: str) -> None:
    """Every merged variant through CheckRequestSchema; errors name the variant and the field."""
    schema = CheckRequestSchema()
    invalid = _Invalid()
    for i, (label, member) in enumerate(variants):
        _validate_variant(schema, shared, i, label, member, where, invalid)
    invalid.raise_if_any(len(variants))


def _check_variant_count(n_variants: int, where: str) -> None:
    limit = int(current_app.config["BALLAST_MAX_VARIANTS"])
    if n_variants > limit:
        abort_problem(422, f"{n_variants} variants; the limit is {limit} per batch",
                      kind="invalid-request",
                      errors=field_errors([(where, f"at most {limit} variants")]))


def _outline_head(outline: BatchOutline) -> tuple[str | None, dict[str, Any]]:
    """The batch's label and shared map, checked, and the number of variants checked."""
    invalid = _Invalid()
    label = loads_json(outline.label) if outline.label is not None else None
    _check_label(label, "label", invalid)
    shared = loads_json(outline.map) if outline.map is not None else {}
    if not _check_keys(shared, set(REQUEST_FIELDS), "map", invalid):
        shared = {}
    if not outline.variants:
        invalid.add("variants", "must be a non-empty list of variants")
    invalid.raise_if_any(len(outline.variants))
    _check_variant_count(len(outline.variants), "variants")
    return label, shared


class _OutlineChecks:
    """The outline's variants as checks to store, each parsed and validated when it is reached
    and dropped before the next (the same checks and error fields as the whole-body path).

    Iterating yields the valid variants in order until the first invalid one; it then validates
    the rest without yielding them and raises the 422 that names every problem, so the store
    (``Store.create_checks``, which takes a lazy ``CheckSource``) can write and queue the first
    variants while later ones are still being validated, and deletes them again if one fails.
    """

    def __init__(self, outline: BatchOutline, shared: dict[str, Any]) -> None:
        self._texts = outline.variants
        self._shared = shared

    def __len__(self) -> int:
        return len(self._texts)

    def __iter__(self) -> Iterator[NewCheck]:
        schema = CheckRequestSchema()
        invalid = _Invalid()
        for i in range(len(self._texts)):
            check = self._check(i, schema, invalid)
            if check is not None and not invalid.pairs:
                yield check
        invalid.raise_if_any(len(self._texts))

    def _check(self, i: int, schema: CheckRequestSchema, invalid: _Invalid) -> NewCheck | None:
        text = self._texts[i]
        before = len(invalid.pairs)
        raw = loads_json(text)
        if _check_keys(raw, _VARIANT_KEYS, f"variants.{i}", invalid):
            _check_label(raw.get("label"), f"variants.{i}.label", invalid)
        name = raw.get("label") if isinstance(raw, dict) else None
        label = name if isinstance(name, str) else None
        if len(invalid.pairs) != before:  # not an object, unknown members or a bad label
            invalid.bad_variants += 1
            return None
        member = {k: v for k, v in raw.items() if k != "label"}
        try:  # packed arrays decoded once: the schema then checks their bytes
            member, packed = with_packed_bytes(member)
        except ValueError:  # not base64 (binascii.Error) or not ASCII: the schema names it
            packed = 0
        bad_before = invalid.bad_variants
        _validate_variant(schema, self._shared, i, label, member, "variants", invalid)
        if invalid.bad_variants != bad_before:
            return None
        # stored as MessagePack with the bytes, a quarter smaller, when its arrays came packed
        binary = encode_binary(member) if packed else None
        if binary is not None:
            return NewCheck(None, label=label, request_binary=binary)
        return NewCheck(None, label=label, request_json=text)


def _accepted(batch_id: str) -> tuple[dict[str, Any], int, dict[str, str]]:
    record = store().get_batch(tenant(), batch_id)
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
    checks: CheckSource
    if request.mimetype == "multipart/form-data":
        label, shared, variants = _parse_multipart_batch()
        fingerprint = content_hash({"label": label, "map": shared,
                                    "variants": [[n, m] for n, m in variants]}) \
            if request.headers.get(IDEMPOTENCY_HEADER) is not None else None
        _check_variant_count(len(variants), "files")
        _validate_variants(shared, variants, "files")
        checks = [NewCheck(member, label=name) for name, member in variants]
    else:
        raw = json_body_bytes()
        fingerprint = g.body_digest
        outline = outline_batch(raw)
        if outline is not None:
            del raw
            label, shared = _outline_head(outline)
            checks = _OutlineChecks(outline, shared)  # validated while being stored
        else:  # not of the usual shape: parsed whole, so that every problem is named
            body = json_object_body(raw)
            del raw
            label, shared, variants = _parse_json_batch(body)
            _check_variant_count(len(variants), "variants")
            _validate_variants(shared, variants, "variants")
            texts = g.variant_texts
            checks = [NewCheck(member, label=name, request_json=texts[i] if texts else None)
                      for i, (name, member) in enumerate(variants)]

    def create() -> str:
        batch_id, _ = store_checks(checks, as_batch=True, batch_label=label, shared=shared)
        assert batch_id is not None
        return batch_id

    batch_id = accept_once(idempotency_key(), fingerprint, create, replay=lambda b: b)
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
    }


@blp.route("", methods=["GET"])
@blp.doc(operationId="listBatches")
@blp.arguments(BatchListQuerySchema, location="query", as_kwargs=True, unknown=RAISE)
@blp.response(200, BatchListSchema)
@document_errors(blp, 401, 422, 429)
def list_batches(limit: int = 50):
    """The tenant's most recent batches, newest first."""
    return {"items": [batch_view(b) for b in store().list_batches(tenant(), limit=limit)]}


def _found(batch_id: str) -> BatchRecord:
    record = store().get_batch(tenant(), batch_id)
    if record is None:
        abort_problem(404, f"no batch {batch_id!r}", kind="not-found")
    return record


@blp.route("/<string:batch_id>", methods=["GET"])
@blp.doc(operationId="getBatch")
@blp.response(200, BatchSchema)
@document_errors(blp, 401, 404, 429)
def get_batch(batch_id: str):
    """Counts of the batch's checks per status and per verdict."""
    record = _found(batch_id)
    return batch_view(record, size=len(record.check_ids))


@blp.route("/<string:batch_id>", methods=["DELETE"])
@blp.doc(operationId="cancelBatch")
@blp.response(200, BatchSchema, description="The batch after cancelling its unfinished checks")
@document_errors(blp, 401, 404, 429)
def cancel_batch(batch_id: str):
    """Cancel every check of the batch that has not finished."""
    _found(batch_id)
    record = store().cancel_batch(tenant(), batch_id)
    if record is None:
        abort_problem(404, f"no batch {batch_id!r}", kind="not-found")
    return batch_view(record, size=len(record.check_ids))


def encode_cursor(after: str) -> str:
    raw = json.dumps({"after": after}, separators=(",", ":")).encode()
    return base64.urlsafe_b64encode(raw).decode().rstrip("=")


def decode_cursor(cursor: str) -> str:
    try:
        raw = base64.urlsafe_b64decode(cursor + "=" * (-len(cursor) % 4))
        after = json.loads(raw)["after"]
        if not isinstance(after, str) or not after.isdigit():
            raise ValueError(after)
    except (binascii.Error, ValueError, KeyError, TypeError, UnicodeDecodeError):
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


@blp.route("/<string:batch_id>/checks", methods=["GET"])
@blp.doc(operationId="listBatchChecks")
@blp.arguments(BatchChecksQuerySchema, location="query", as_kwargs=True, unknown=RAISE)
@blp.response(200, BatchChecksPageSchema, headers={"Link": {
    "schema": {"type": "string"}, "description": 'RFC 8288 link to the next page, rel="next"'}})
@document_errors(blp, 400, 401, 404, 422, 429)
def list_batch_checks(batch_id: str, **query: Any):
    """One page of the batch's checks in submission order, optionally filtered."""
    if store().get_batch(tenant(), batch_id) is None:
        abort_problem(404, f"no batch {batch_id!r}", kind="not-found")
    cfg = current_app.config
    limit = min(int(query.get("limit") or cfg["BALLAST_PAGE_SIZE"]),
                int(cfg["BALLAST_MAX_PAGE_SIZE"]))
    after = decode_cursor(query["cursor"]) if query.get("cursor") else None
    page, next_after = store().list_batch_checks(
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
