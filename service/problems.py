"""Errors as RFC 9457 problem details (``application/problem+json``).

Every error the API returns has ``type``, ``title``, ``status`` and ``detail``; validation errors
add ``errors``, a list of ``{"field", "pointer", "detail"}`` naming each offending field (the
pointer is a JSON Pointer, RFC 6901, into the request body, as in RFC 9457 §3's example).
Werkzeug's own HTTP errors keep their headers (``Allow`` on 405, ``WWW-Authenticate`` on 401).
"""

from __future__ import annotations

import json
from collections.abc import Iterable
from http import HTTPStatus
from typing import Any, NoReturn

from flask import Response
from marshmallow import Schema, fields
from werkzeug.exceptions import HTTPException

PROBLEM_CONTENT_TYPE = "application/problem+json"
PROBLEM_TYPE_BASE = "urn:ballast:problem:"


class ProblemErrorSchema(Schema):
    field = fields.String(required=True, metadata={"description": "dotted path, e.g. data.re"})
    pointer = fields.String(required=True, metadata={"description": "JSON Pointer (RFC 6901)"})
    detail = fields.String(required=True)


class ProblemSchema(Schema):
    """RFC 9457 problem details."""

    type = fields.String(required=True, metadata={"description": "problem type URI"})
    title = fields.String(required=True)
    status = fields.Integer(required=True)
    detail = fields.String(required=True)
    instance = fields.String()
    errors = fields.List(fields.Nested(ProblemErrorSchema))


def json_pointer(field: str) -> str:
    """``variants.3.data.re`` → ``#/variants/3/data/re`` (RFC 6901 escaping of ~ and /)."""
    if field in ("", "body"):
        return "#"
    parts = [p.replace("~", "~0").replace("/", "~1") for p in field.split(".")]
    return "#/" + "/".join(parts)


def field_errors(pairs: Iterable[tuple[str, str]]) -> list[dict[str, str]]:
    return [{"field": f, "pointer": json_pointer(f), "detail": d} for f, d in pairs]


def problem_response(
    status: int, detail: str, *, kind: str | None = None, title: str | None = None,
    errors: list[dict[str, str]] | None = None, headers: dict[str, str] | None = None,
) -> Response:
    phrase = HTTPStatus(status).phrase
    body: dict[str, Any] = {
        "type": PROBLEM_TYPE_BASE + kind if kind else "about:blank",
        "title": title or phrase,
        "status": status,
        "detail": detail,
    }
    if errors:
        body["errors"] = errors
    response = Response(json.dumps(body), status=status, mimetype=PROBLEM_CONTENT_TYPE)
    for name, value in (headers or {}).items():
        response.headers[name] = value
    return response


class Problem(HTTPException):
    """Raise to answer with a problem document; carries its own headers."""

    def __init__(
        self, status: int, detail: str, *, kind: str | None = None, title: str | None = None,
        errors: list[dict[str, str]] | None = None, headers: dict[str, str] | None = None,
    ) -> None:
        super().__init__(description=detail)
        self.code = status
        self.kind = kind
        self.title = title
        self.errors = errors
        self.extra_headers = headers or {}

    def get_response(self, environ: Any = None, scope: Any = None) -> Response:
        return problem_response(
            self.code or 500, self.description or "", kind=self.kind, title=self.title,
            errors=self.errors, headers=self.extra_headers,
        )


def abort_problem(status: int, detail: str, **kwargs: Any) -> NoReturn:
    raise Problem(status, detail, **kwargs)


def from_http_exception(error: HTTPException) -> Response:
    """Any Werkzeug/Flask HTTP error as a problem document, keeping its headers (Allow …)."""
    if isinstance(error, Problem):
        return error.get_response()
    status = error.code or 500
    headers = {
        name: value for name, value in error.get_headers()
        if name.lower() not in ("content-type", "content-length")
    }
    if getattr(error, "response", None) is not None and error.response is not None:
        for name, value in error.response.headers.items():
            if name.lower() not in ("content-type", "content-length"):
                headers[name] = value
    detail = error.description or HTTPStatus(status).description
    if status >= 500:
        detail = "the server could not complete the request"
    errors = None
    data = getattr(error, "data", None)  # webargs/flask-smorest validation errors
    if isinstance(data, dict) and data.get("messages"):
        from service.schemas.errors import flatten_errors

        errors = field_errors(flatten_errors(data["messages"]))
    return problem_response(status, detail, errors=errors, headers=headers)
