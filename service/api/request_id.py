"""The request id: taken from ``X-Request-ID`` when it is a short token (letters, digits,
``._:-``, at most 64), else made (``req_`` + 16 hex digits); answered in ``X-Request-ID``, put
in every log line of the request (``workers.logs.REQUEST_ID``) and stored with the checks it
creates, so that the worker's lines for those checks carry it too."""

from __future__ import annotations

import re
import secrets

from flask import Flask, Response, g, request

from workers.logs import REQUEST_ID

HEADER = "X-Request-ID"
_SHAPE = re.compile(r"^[A-Za-z0-9._:-]{1,64}$")


def _begin() -> None:
    given = request.headers.get(HEADER, "")
    g.request_id = given if _SHAPE.match(given) else "req_" + secrets.token_hex(8)
    g.request_id_token = REQUEST_ID.set(g.request_id)


def _answer(response: Response) -> Response:
    request_id = getattr(g, "request_id", None)
    if request_id:
        response.headers[HEADER] = request_id
    return response


def _end(_: BaseException | None) -> None:
    token = g.pop("request_id_token", None)
    if token is not None:
        REQUEST_ID.reset(token)


def install(app: Flask) -> None:
    app.before_request(_begin)
    app.after_request(_answer)
    app.teardown_request(_end)
