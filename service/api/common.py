"""Helpers shared by the endpoints: JSON bodies, validation errors, idempotency, views."""

from __future__ import annotations

import hashlib
from collections.abc import Callable
from datetime import UTC, datetime
from typing import Any

from flask import current_app, g, request
from flask_smorest import Blueprint
from marshmallow import ValidationError

from service.api.body_gate import BODY_BYTES_KEY
from service.api.jsonbody import parse_body, reject_constant
from service.api.jsontext import stdlib_loads
from service.api.tenancy import access_store, retry_after, tenant
from service.problems import PROBLEM_CONTENT_TYPE, ProblemSchema, abort_problem, field_errors
from service.schemas.errors import flatten_errors
from workers.store import CheckRecord, CheckSource, QuotaExceededError, Submission

IDEMPOTENCY_HEADER = "Idempotency-Key"
_RETRY_AFTER = {"Retry-After": {"schema": {"type": "integer"},
                                "description": "seconds to wait before trying again"}}
_ERROR_HEADERS: dict[int, dict[str, Any]] = {
    401: {"WWW-Authenticate": {"schema": {"type": "string"},
                               "description": "Bearer challenge (RFC 6750)"}},
    409: _RETRY_AFTER,
    429: _RETRY_AFTER,
}
_ERROR_MEANING = {
    400: "Malformed JSON, header, cursor or query value",
    401: "No valid bearer token",
    404: "No such check or batch for this tenant",
    409: "A request with this Idempotency-Key is still being accepted, or (plots) the check "
         "has no verdict yet",
    411: "Chunked body on a server that does not de-chunk",
    413: "Request body above the configured limit",
    415: "Body is not application/json (or multipart/form-data for batches)",
    422: "Invalid request; `errors` names each field",
    429: "Request rate or unfinished-check limit of the tenant reached",
}
MAX_IDEMPOTENCY_KEY = 255


def document_errors(blp: Blueprint, *codes: int) -> Callable[[Any], Any]:
    """Document problem+json answers of an operation (the OpenAPI ``default`` covers the rest)."""

    def decorate(func: Any) -> Any:
        for code in codes:
            func = blp.alt_response(
                code, schema=ProblemSchema, content_type=PROBLEM_CONTENT_TYPE,
                description=_ERROR_MEANING[code], headers=_ERROR_HEADERS.get(code),
            )(func)
        return func

    return decorate


def iso(ts: float | None) -> str | None:
    """RFC 3339 UTC timestamp with milliseconds."""
    if ts is None:
        return None
    text = datetime.fromtimestamp(ts, UTC).isoformat(timespec="milliseconds")
    return text.replace("+00:00", "Z")


def parse_json(data: bytes | str, what: str = "the request body") -> Any:
    try:
        return stdlib_loads(data, parse_constant=reject_constant)
    except ValueError as exc:  # JSONDecodeError, UnicodeDecodeError, nesting too deep
        abort_problem(400, f"{what} is not valid JSON: {exc}", kind="malformed-json")


def json_body_bytes() -> bytes:
    """The request's JSON body as bytes, or a problem: 415 (not JSON). Also sets
    ``g.body_digest``: the SHA-256 of the bytes (the idempotency fingerprint) when the request
    carries an ``Idempotency-Key``, else None (hashing a 100 MB batch costs ~0.1 s)."""
    if not request.mimetype or not (
        request.mimetype == "application/json" or request.mimetype.endswith("+json")
    ):
        abort_problem(415, "send the body as application/json", kind="unsupported-media-type")
    raw = request.environ.get(BODY_BYTES_KEY)
    if not isinstance(raw, bytes):
        raw = request.get_data(cache=False)
    g.body_digest = (hashlib.sha256(raw).hexdigest()
                     if request.headers.get(IDEMPOTENCY_HEADER) is not None else None)
    return raw


def json_object_body(parse: Callable[[bytes], Any] = parse_body) -> dict[str, Any]:
    """The request's JSON object as ``parse`` reads its bytes, or a problem: 415 (not JSON),
    400 (malformed), 422 (not an object). Also sets ``g.body_digest`` (see
    :func:`json_body_bytes`)."""
    raw = json_body_bytes()
    try:
        value = parse(raw)
    except (ValueError, RecursionError) as exc:
        abort_problem(400, f"the request body is not valid JSON: {exc}", kind="malformed-json")
    del raw
    if not isinstance(value, dict):
        abort_problem(422, "the request body must be a JSON object", kind="invalid-request",
                      errors=field_errors([("body", "must be a JSON object")]))
    return value


def validation_problem(exc: ValidationError, prefix: str = "", detail: str | None = None
                       ) -> None:
    pairs = flatten_errors(exc.messages, prefix)
    first = f"{pairs[0][0]}: {pairs[0][1]}" if pairs else "invalid request"
    abort_problem(422, detail or first, kind="invalid-request", errors=field_errors(pairs))


def idempotency_key() -> str | None:
    key = request.headers.get(IDEMPOTENCY_HEADER)
    if key is None:
        return None
    key = key.strip()
    if len(key) >= 2 and key[0] == key[-1] == '"':  # structured-field string form
        key = key[1:-1]
    if not key or len(key) > MAX_IDEMPOTENCY_KEY or not key.isprintable():
        abort_problem(400, f"{IDEMPOTENCY_HEADER} must be 1-{MAX_IDEMPOTENCY_KEY} printable "
                      "characters", kind="invalid-idempotency-key")
    return key


def accept_once(key: str | None, fingerprint: str | None, create: Callable[[], str],
                replay: Callable[[str], Any]) -> Any:
    """Run ``create`` (which stores and returns an id) at most once per idempotency key.

    ``fingerprint`` identifies the payload (the SHA-256 of the body; only needed with a key).
    Same key and same payload → ``replay(id)``; same key, other payload → 422; the first request
    with that key still being accepted → 409.
    """
    if key is None:
        return create_with_quota(create)
    if fingerprint is None:
        raise ValueError("an idempotent request needs the fingerprint of its payload")
    cfg = current_app.config
    state, existing = access_store().idempotency_begin(
        tenant(), key, fingerprint, float(cfg["BALLAST_IDEMPOTENCY_PENDING_S"]))
    if state == "done" and existing is not None:
        return replay(existing)
    if state == "mismatch":
        abort_problem(422, f"this {IDEMPOTENCY_HEADER} was already used with another body",
                      kind="idempotency-key-reused")
    if state == "pending":
        abort_problem(409, f"a request with this {IDEMPOTENCY_HEADER} is still being accepted",
                      kind="idempotency-key-in-use", headers={"Retry-After": "1"})
    try:
        created = create_with_quota(create)
    except BaseException:
        access_store().idempotency_release(tenant(), key)
        raise
    access_store().idempotency_finish(tenant(), key, created)
    return created


def create_with_quota(create: Callable[[], str]) -> str:
    try:
        return create()
    except QuotaExceededError as exc:
        abort_problem(429, f"too many unfinished checks: {exc}", kind="too-many-unfinished",
                      headers={"Retry-After": retry_after(30)})


def store_checks(checks: CheckSource, submission: Submission | None = None, **kwargs: Any
                 ) -> tuple[str | None, list[str]]:
    """Store for the current tenant under its quotas and rate of checks, and queue the ids as
    the store reports them stored (``service.api.admission``)."""
    from service.api.admission import admit

    return admit(checks, submission or Submission(), **kwargs)


def check_view(record: CheckRecord) -> dict[str, Any]:
    return {
        "id": record.id,
        "status": record.status,
        "batch_id": record.batch_id,
        "label": record.label,
        "attempts": record.attempts,
        "created_at": iso(record.created_at),
        "updated_at": iso(record.updated_at),
        "started_at": iso(record.started_at),
        "finished_at": iso(record.finished_at),
        "verdict": record.verdict if record.status == "done" else None,
        "reason": record.error if record.status == "failed" else None,
        "extends": record.extends,
        "priority": record.priority,
    }
