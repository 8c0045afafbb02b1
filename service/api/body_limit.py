"""WSGI middleware that caps request bodies before Flask reads them.

A ``Content-Length`` above the cap answers 413 without reading. A chunked body is read here, up to
the cap plus one byte, and answered 413 when longer: Werkzeug under gunicorn would otherwise cut a
chunked body at ``MAX_CONTENT_LENGTH`` without an error and parse the truncated text. A chunked
body on a server that does not de-chunk (no ``wsgi.input_terminated``) answers 411. What passes
is handed on as an in-memory body with an exact ``Content-Length``. A large body with a
``Content-Length`` is read in one call and handed on in memory too. A body read here is also
left in the environ under ``BODY_BYTES_KEY`` for ``service.api.common.json_body_bytes``.
"""

from __future__ import annotations

import io
from collections.abc import Callable, Iterable
from typing import Any

from service.problems import problem_response

_READ_SIZE = 1 << 16
_ONE_READ_BYTES = 1 << 20
BODY_BYTES_KEY = "ballast.body_bytes"  # environ key: the body as bytes, when read here


class BodyLimitMiddleware:
    def __init__(self, app: Callable[..., Iterable[bytes]], limit: int) -> None:
        self.app = app
        self.limit = int(limit)

    def _refuse(self, environ: dict[str, Any], start_response: Callable[..., Any],
                status: int, detail: str) -> Iterable[bytes]:
        response = problem_response(status, detail, kind="body-size" if status == 413 else None)
        response.headers["Connection"] = "close"
        return response(environ, start_response)

    def __call__(self, environ: dict[str, Any], start_response: Callable[..., Any]
                 ) -> Iterable[bytes]:
        length = environ.get("CONTENT_LENGTH", "").strip()
        chunked = "chunked" in environ.get("HTTP_TRANSFER_ENCODING", "").lower()
        if length and not chunked:
            if not length.isdigit():
                return self._refuse(environ, start_response, 400, "invalid Content-Length")
            if int(length) > self.limit:
                return self._refuse(environ, start_response, 413,
                                    f"the request body exceeds the limit of {self.limit} bytes")
            if int(length) >= _ONE_READ_BYTES:
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
        if not chunked:
            return self.app(environ, start_response)
        if not environ.get("wsgi.input_terminated"):
            return self._refuse(environ, start_response, 411,
                                "chunked bodies are not accepted here: send Content-Length")
        stream = environ["wsgi.input"]
        body = bytearray()
        while len(body) <= self.limit:
            piece = stream.read(min(_READ_SIZE, self.limit + 1 - len(body)))
            if not piece:
                break
            body += piece
        if len(body) > self.limit:
            return self._refuse(environ, start_response, 413,
                                f"the request body exceeds the limit of {self.limit} bytes")
        environ = dict(environ)
        environ[BODY_BYTES_KEY] = data = bytes(body)
        environ["wsgi.input"] = io.BytesIO(data)
        environ["CONTENT_LENGTH"] = str(len(body))
        environ.pop("HTTP_TRANSFER_ENCODING", None)
        environ.pop("wsgi.input_terminated", None)
        return self.app(environ, start_response)
