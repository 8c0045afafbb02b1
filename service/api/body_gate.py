"""WSGI middleware that admits a request body, or refuses it, before anything reads it.

Before a single byte of a body is read: a ``Content-Length`` that is not a number answers 400, one
above the cap 413, and a request under ``/v1/`` with a body but without a valid bearer token 401
(``service.api.tenancy.bearer_tenant``), so an unauthenticated client never holds a thread or
memory with a body. A chunked body on a server that does not de-chunk (no
``wsgi.input_terminated``) answers 411. Refusals close the connection (the body stays unread).

What passes is read here and handed on in memory with an exact ``Content-Length``: a chunked body
up to the cap plus one byte (413 when longer: Werkzeug under gunicorn would otherwise cut it at
``MAX_CONTENT_LENGTH`` and parse the truncated text), a large body with a ``Content-Length`` in
one call. A body read here is left in the environ under ``BODY_BYTES_KEY`` for
``service.api.common.json_body_bytes``.

The API's HTTP front (``service.front``) reads bodies itself, asynchronously and with a deadline,
and asks first, the way HTTP's ``Expect: 100-continue`` does (RFC 9110 §10.1.1): it calls the
application with the headers only and ``HEADERS_ONLY_KEY`` set, and this middleware answers
``100 Continue`` to admit the body, or the refusal. The front then calls the application again
with the whole body in memory and ``ADMITTED_KEY`` set.
"""

from __future__ import annotations

import io
from collections.abc import Callable, Iterable
from typing import Any

from flask import Response

from service.api.tenancy import bearer_tenant
from service.problems import Problem, problem_response
from workers.store import AccessStore

_READ_SIZE = 1 << 16
_ONE_READ_BYTES = 1 << 20
BODY_BYTES_KEY = "ballast.body_bytes"  # environ key: the body as bytes, when read whole
HEADERS_ONLY_KEY = "ballast.headers_only"  # the front asks: may the body come?
ADMITTED_KEY = "ballast.admitted"  # the front: admitted, and the whole body is in memory
AUTHENTICATED_PREFIX = "/v1/"  # every route below it authenticates its tenant
CONTINUE = "100 Continue"


class BodyGateMiddleware:
    def __init__(self, app: Callable[..., Iterable[bytes]], limit: int,
                 access: AccessStore) -> None:
        self.app = app
        self.limit = int(limit)
        self.access = access

    def _problem(self, status: int, detail: str) -> Response:
        response = problem_response(status, detail, kind="body-size" if status == 413 else None)
        response.headers["Connection"] = "close"
        return response

    def refusal(self, environ: dict[str, Any]) -> Response | None:
        """Why the body may not come (a response to send with the connection closed), or
        None; reads nothing but the headers."""
        length = environ.get("CONTENT_LENGTH", "").strip()
        chunked = "chunked" in environ.get("HTTP_TRANSFER_ENCODING", "").lower()
        if length and not chunked:
            if not length.isascii() or not length.isdigit():
                return self._problem(400, "invalid Content-Length")
            if int(length) > self.limit:
                return self._problem(413, f"the request body exceeds the limit of {self.limit} "
                                          "bytes")
        if chunked and not environ.get("wsgi.input_terminated"):
            return self._problem(411, "chunked bodies are not accepted here: send "
                                      "Content-Length")
        has_body = chunked or (bool(length) and int(length) > 0)
        if has_body and environ.get("PATH_INFO", "").startswith(AUTHENTICATED_PREFIX):
            try:
                bearer_tenant(environ.get("HTTP_AUTHORIZATION", ""), self.access)
            except Problem as problem:
                response = problem.get_response()
                response.headers["Connection"] = "close"
                return response
        return None

    def __call__(self, environ: dict[str, Any], start_response: Callable[..., Any]
                 ) -> Iterable[bytes]:
        if environ.get(ADMITTED_KEY):
            return self.app(environ, start_response)
        refused = self.refusal(environ)
        if refused is not None:
            return refused(environ, start_response)
        if environ.get(HEADERS_ONLY_KEY):
            start_response(CONTINUE, [])
            return []
        length = environ.get("CONTENT_LENGTH", "").strip()
        if "chunked" not in environ.get("HTTP_TRANSFER_ENCODING", "").lower():
            if length and int(length) >= _ONE_READ_BYTES:
                # One read of the whole body: Werkzeug's 64 KiB reads through gunicorn's body
                # reader cost ~3 s for 227 MB, one read ~0.3 s. Content-Length is kept, so a
                # short body (client gone) is still detected by Werkzeug.
                # The bytes are also kept under BODY_BYTES_KEY, so that the endpoint does not copy
                # them again out of the stream (Werkzeug's get_data: ~0.8 s for 227 MB).
                environ = dict(environ)
                body = environ["wsgi.input"].read(int(length))
                environ["wsgi.input"] = io.BytesIO(body)
                if len(body) == int(length):
                    environ[BODY_BYTES_KEY] = body
            return self.app(environ, start_response)
        stream = environ["wsgi.input"]
        body = bytearray()
        while len(body) <= self.limit:
            piece = stream.read(min(_READ_SIZE, self.limit + 1 - len(body)))
            if not piece:
                break
            body += piece
        if len(body) > self.limit:
            return self._problem(413, f"the request body exceeds the limit of {self.limit} "
                                      "bytes")(environ, start_response)
        environ = dict(environ)
        environ[BODY_BYTES_KEY] = data = bytes(body)
        environ["wsgi.input"] = io.BytesIO(data)
        environ["CONTENT_LENGTH"] = str(len(body))
        environ.pop("HTTP_TRANSFER_ENCODING", None)
        environ.pop("wsgi.input_terminated", None)
        return self.app(environ, start_response)
