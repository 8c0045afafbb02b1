"""/v1/checks: submit one check, read its state and verdict, cancel it."""

from __future__ import annotations

from typing import Any

from flask import current_app, g, url_for
from flask_smorest import Blueprint
from marshmallow import ValidationError

from service.api.admission import submission, withdraw_cancelled
from service.api.common import (
    IDEMPOTENCY_HEADER,
    accept_once,
    check_view,
    document_errors,
    idempotency_key,
    json_object_body,
    store_checks,
    validation_problem,
)
from service.api.jsonbody import parse_body
from service.api.path_ids import require_path_ids
from service.api.request_reader import read_request
from service.api.tenancy import authenticate, check_store, tenant
from service.intake import load_request, new_check
from service.problems import abort_problem
from service.schemas.api import CheckAcceptedSchema, CheckSchema
from service.schemas.request import CheckRequestSchema
from service.schemas.samples import SamplesSchema, merged_request
from service.schemas.submission import CheckSubmissionSchema, load_priority
from workers.collector import collector_paused
from workers.engine.request import CheckRequest
from workers.intake import StoredRequestError
from workers.store import UNFINISHED_STATUSES

blp = Blueprint("checks", __name__, url_prefix="/v1/checks",
                description="Single stability checks")
blp.before_request(authenticate)
blp.before_request(require_path_ids)  # after the token: 401 first

IDEMPOTENCY_PARAMETER = {
    "in": "header", "name": IDEMPOTENCY_HEADER, "required": False,
    "schema": {"type": "string", "minLength": 1, "maxLength": 255},
    "description": "a retry with the same key and body returns the first response",
}
ACCEPTED_HEADERS = {
    "Location": {"schema": {"type": "string"}, "description": "where to poll"},
    "Retry-After": {"schema": {"type": "integer"}, "description": "seconds before polling"},
}


def accepted(check_id: str) -> tuple[dict[str, Any], int, dict[str, str]]:
    location = url_for("checks.get_check", check_id=check_id)
    return (
        {"id": check_id, "status": "queued", "location": location},
        202,
        {"Location": location,
         "Retry-After": str(current_app.config["BALLAST_RETRY_AFTER_S"])},
    )


def validate_request(body: dict[str, Any]) -> CheckRequest:
    """The request validated (Touchstone text parsed), or the 422 naming every field."""
    try:
        return CheckRequestSchema().load(body)
    except ValidationError as exc:
        validation_problem(exc)


@blp.route("", methods=["POST"])
@blp.doc(
    operationId="submitCheck",
    parameters=[IDEMPOTENCY_PARAMETER],
    requestBody={"required": True,
                 "content": {"application/json": {"schema": CheckSubmissionSchema}}},
)
@blp.response(202, CheckAcceptedSchema, headers=ACCEPTED_HEADERS,
              description="Accepted: the check is queued")
@document_errors(blp, 400, 401, 409, 413, 415, 422, 429)
def submit_check():
    """Queue one check request."""
    with collector_paused():  # see submit_batch
        return _submit_check()


def _submit_check() -> tuple[dict[str, Any], int, dict[str, str]]:
    body = json_object_body(lambda raw: read_request(raw, parse_body))
    try:  # how it is queued is not part of the check request
        priority = load_priority(body.pop("priority", "normal"))
    except ValidationError as exc:
        validation_problem(exc)
    check = new_check(validate_request(body))  # stored as validated
    del body  # the parsed arrays: only the stored form is kept while the store writes it

    def create() -> str:
        _, (check_id,) = store_checks([check], submission(priority))
        return check_id

    check_id = accept_once(idempotency_key(), g.body_digest, create, replay=lambda found: found)
    return accepted(check_id)


@blp.route("/<check_id:check_id>/samples", methods=["POST"])
@blp.doc(
    operationId="addSamples",
    parameters=[IDEMPOTENCY_PARAMETER],
    requestBody={"required": True,
                 "content": {"application/json": {"schema": SamplesSchema}}},
)
@blp.response(202, CheckAcceptedSchema, headers=ACCEPTED_HEADERS,
              description="Accepted: a new check on the union of the check's frequencies and "
                          "the new ones (the check itself is unchanged)")
@document_errors(blp, 400, 401, 404, 409, 413, 415, 422, 429)
def add_samples(check_id: str):
    """Merge new frequency samples (e.g. where a verdict's next_sweep asks) into a new check.

    A frequency given twice must agree within the check's options.consistency_tolerance, else
    422 naming it."""
    with collector_paused():
        return _add_samples(check_id)


def _add_samples(check_id: str) -> tuple[dict[str, Any], int, dict[str, str]]:
    record = _found(check_id)  # the tenant must own it
    stored = check_store().get_request(check_id)
    if stored is None:
        abort_problem(404, f"no check {check_id!r}", kind="not-found")
    try:
        old = load_request(stored)
    except StoredRequestError as exc:
        abort_problem(409, f"check {check_id!r} cannot be extended: {exc}", kind="conflict")
    body = json_object_body()
    try:  # queued like the check it extends unless the body says otherwise
        priority = load_priority(body.pop("priority", record.priority))
        merged = merged_request(body, old)
    except ValidationError as exc:
        validation_problem(exc)
    check = new_check(merged, record.label, extends=check_id)

    def create() -> str:
        _, (new_id,) = store_checks([check], submission(priority))
        return new_id

    new_id = accept_once(idempotency_key(), g.body_digest, create, replay=lambda found: found)
    body, status, headers = accepted(new_id)
    return {**body, "extends": check_id}, status, headers


def _found(check_id: str):
    record = check_store().get_check(tenant(), check_id)
    if record is None:
        abort_problem(404, f"no check {check_id!r}", kind="not-found")
    return record


@blp.route("/<check_id:check_id>", methods=["GET"])
@blp.doc(operationId="getCheck")
@blp.response(200, CheckSchema, headers={"Retry-After": {
    "schema": {"type": "integer"}, "description": "while unfinished: seconds before polling"}})
@document_errors(blp, 401, 404, 429)
def get_check(check_id: str):
    """A check's status, timestamps, attempts, and its verdict when done."""
    record = _found(check_id)
    if record.status in UNFINISHED_STATUSES:
        return check_view(record), 200, {
            "Retry-After": str(current_app.config["BALLAST_RETRY_AFTER_S"])}
    return check_view(record)


@blp.route("/<check_id:check_id>", methods=["DELETE"])
@blp.doc(operationId="cancelCheck")
@blp.response(200, CheckSchema, description="The check after cancellation (a finished check "
                                            "is left as it was)")
@document_errors(blp, 401, 404, 429)
def cancel_check(check_id: str):
    """Cancel a check that has not finished."""
    _found(check_id)
    record = check_store().cancel_check(tenant(), check_id)
    if record is None:
        abort_problem(404, f"no check {check_id!r}", kind="not-found")
    if record.status == "cancelled":
        withdraw_cancelled([check_id])
    return check_view(record)
