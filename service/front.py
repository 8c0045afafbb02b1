"""The API's HTTP front: a gunicorn worker that receives every request whole, on an event loop,
before one of its threads runs the WSGI application.

    worker_class = "service.front.FrontWorker"          (service/gunicorn_conf.py)

tornado's HTTP/1.1 server (the server of gunicorn's own tornado worker) reads all connections of
the process on one event loop; a thread pool of gunicorn's ``threads`` runs the application
(``tornado.wsgi.WSGIContainer`` with an executor). Per request:

1. the request line and headers must arrive within ``BALLAST_HEADER_TIMEOUT_S`` (tornado's
   ``idle_connection_timeout``, also how long an idle kept-alive connection stays open), in at
   most 64 KiB, else the connection is closed;
2. a request with a body is first put to the application with its headers only
   (``service.api.body_gate``: answered ``100 Continue`` to admit the body, else the refusal:
   400, 401 without a valid token, 411, 413 over the limit), and a refusal is sent without
   reading the body;
3. the body must arrive within ``BALLAST_BODY_TIMEOUT_S`` of its headers (else 408) and stay
   within the limit (a chunked body: 413 once it passes it); the bodies a process holds (being
   received, waiting for a thread, being handled) are together at most
   ``BALLAST_RECEIVE_BUDGET_BYTES`` (a declared length is reserved at admission, the limit for a
   chunked one; 503 with Retry-After above);
4. the application then runs on the thread pool with the whole body in memory (no copy: the
   bytes received are its ``wsgi.input`` and ``ballast.body_bytes``).

A client that stalls holds a socket and the bytes it has sent, never a thread: ``/healthz`` and
every other request keep being answered. Why this worker and not gthread, gevent or a buffering
proxy: deploy/README.md.
"""

from __future__ import annotations

import contextlib
import io
import logging
import time
from collections.abc import Iterable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import Any

import tornado.httpserver
from gunicorn.sock import ssl_context
from gunicorn.workers.gtornado import TornadoWorker
from tornado import httputil, iostream
from tornado.ioloop import IOLoop, PeriodicCallback
from tornado.wsgi import WSGIContainer

from service.api.body_gate import ADMITTED_KEY, BODY_BYTES_KEY, CONTINUE, HEADERS_ONLY_KEY
from service.api.security_headers import security_headers
from service.problems import problem_response

log = logging.getLogger("ballast.front")

MAX_HEADER_BYTES = 64 * 1024
READ_CHUNK_BYTES = 1 << 20
BUSY_RETRY_AFTER_S = 5
Answer = tuple[int, list[tuple[str, str]], bytes]


@dataclass(frozen=True)
class FrontSettings:
    """The front's limits (``service.config``: BALLAST_HEADER_TIMEOUT_S, BALLAST_BODY_TIMEOUT_S,
    BALLAST_RECEIVE_BUDGET_BYTES; the body limit is BALLAST_MAX_BODY_BYTES)."""

    header_timeout_s: float
    body_timeout_s: float
    max_body_bytes: int
    receive_budget_bytes: int

    @classmethod
    def of(cls, config: Any) -> FrontSettings:
        limit = int(config["BALLAST_MAX_BODY_BYTES"])
        budget = config.get("BALLAST_RECEIVE_BUDGET_BYTES") or 4 * limit
        return cls(float(config["BALLAST_HEADER_TIMEOUT_S"]),
                   float(config["BALLAST_BODY_TIMEOUT_S"]), limit, max(int(budget), limit))


def _problem(status: int, detail: str, kind: str, headers: dict[str, str] | None = None
             ) -> Answer:
    """A problem document as the API would send it (security headers, connection closed)."""
    response = problem_response(status, detail, kind=kind, headers=headers)
    body = response.get_data()
    listed = [*response.headers.to_wsgi_list(), ("Connection", "close")]
    present = {name.lower() for name, _ in listed}
    listed += [(k, v) for k, v in security_headers(response.mimetype).items()
               if k.lower() not in present]
    return status, listed, body


def _carries_body(headers: httputil.HTTPHeaders) -> bool:
    length = headers.get("Content-Length", "").strip()
    return "chunked" in headers.get("Transfer-Encoding", "").lower() or (length not in ("", "0"))


class _Container(WSGIContainer):
    """tornado's WSGI container, with the environ the body gate expects and gunicorn's access
    log."""

    def __init__(self, app: Any, executor: ThreadPoolExecutor, access: logging.Logger | None
                 ) -> None:
        super().__init__(app, executor=executor)
        self.access = access

    def environ(self, request: httputil.HTTPServerRequest) -> dict[str, Any]:
        original = request.headers  # the server still reads the body by them
        request.headers = httputil.HTTPHeaders(original)  # tornado pops Content-Type, -Length
        try:
            environ = super().environ(request)
        finally:
            request.headers = original
        if getattr(request, "ballast_probe", False):  # headers only: may the body come?
            environ.update({HEADERS_ONLY_KEY: True, "wsgi.input": io.BytesIO(b""),
                            "wsgi.input_terminated": True})  # the front de-chunks bodies
        elif getattr(request, "ballast_admitted", False):  # the whole body, already admitted
            environ.pop("HTTP_TRANSFER_ENCODING", None)
            environ.update({ADMITTED_KEY: True, BODY_BYTES_KEY: request.body,
                            "CONTENT_LENGTH": str(len(request.body))})
        return environ

    def _log(self, status_code: int, request: httputil.HTTPServerRequest) -> None:
        if self.access is not None:
            self.access.info('%s - "%s %s %s" %d %.1fms', request.remote_ip, request.method,
                             request.uri, request.version, status_code,
                             1000.0 * request.request_time())

    def ask(self, request: httputil.HTTPServerRequest) -> Answer | None:
        """On a pool thread: the application's answer to the headers only (None: 100)."""
        seen: dict[str, Any] = {}

        def start_response(status: str, headers: list[tuple[str, str]], exc_info: Any = None
                           ) -> Any:
            seen.update(status=status, headers=headers)
            return lambda _: None

        request.ballast_probe = True  # type: ignore[attr-defined]
        try:
            result: Iterable[bytes] = self.wsgi_application(self.environ(request),
                                                            start_response)
            try:
                body = b"".join(result)
            finally:
                close = getattr(result, "close", None)
                if close is not None:
                    close()
        finally:
            request.ballast_probe = False  # type: ignore[attr-defined]
        if seen["status"] == CONTINUE:
            return None
        return int(seen["status"].split(" ", 1)[0]), list(seen["headers"]), body


class Front(httputil.HTTPServerConnectionDelegate):
    """What the server hands each request to; counts what is in hand and what is reserved."""

    def __init__(self, app: Any, settings: FrontSettings, threads: int,
                 access: logging.Logger | None, on_request_done: Any = None) -> None:
        self.settings = settings
        self.executor = ThreadPoolExecutor(max_workers=threads, thread_name_prefix="ballast-api")
        self.container = _Container(app, self.executor, access)
        self.reserved = 0
        self.active = 0
        self.on_request_done = on_request_done

    def start_request(self, server_conn: object, request_conn: httputil.HTTPConnection
                      ) -> httputil.HTTPMessageDelegate:
        return _Exchange(self, request_conn)

    def reserve(self, size: int) -> bool:
        if self.reserved + size > self.settings.receive_budget_bytes:
            return False
        self.reserved += size
        return True

    async def run(self, request: httputil.HTTPServerRequest, release: int) -> None:
        """The application on the thread pool with the whole request; then the reservation is
        given back."""
        self.active += 1
        try:
            await self.container.handle_request(request)
        except iostream.StreamClosedError:  # the client left before the answer
            log.debug("client gone before the answer to %s %s", request.method, request.path)
        except Exception:
            log.exception("the application failed on %s %s", request.method, request.path)
            with contextlib.suppress(Exception):
                _send(request.connection, _problem(
                    500, "the server could not complete the request", "server-error"))
        finally:
            self.active -= 1
            self.reserved -= release
            if self.on_request_done is not None:
                self.on_request_done()


def _send(connection: httputil.HTTPConnection | None, answer: Answer) -> None:
    status, headers, body = answer
    header_obj = httputil.HTTPHeaders()
    for name, value in headers:
        if name.lower() != "content-length":
            header_obj.add(name, value)
    header_obj["Content-Length"] = str(len(body))
    assert connection is not None
    connection.write_headers(httputil.ResponseStartLine("HTTP/1.1", status, ""), header_obj,
                             chunk=body)
    connection.finish()


class _Exchange(httputil.HTTPMessageDelegate):
    """One request on one connection: admission, the body under its deadline, the run."""

    def __init__(self, front: Front, connection: httputil.HTTPConnection) -> None:
        self.front = front
        self.connection = connection
        self.request: httputil.HTTPServerRequest | None = None
        self.chunks: list[bytes] = []
        self.size = 0
        self.reserved = 0
        self.answered = False
        self.deadline: object | None = None

    async def headers_received(self, start_line: Any, headers: httputil.HTTPHeaders) -> None:
        self.request = httputil.HTTPServerRequest(connection=self.connection,
                                                  start_line=start_line, headers=headers)
        if not _carries_body(headers):
            return
        loop = IOLoop.current()
        try:
            answer = await loop.run_in_executor(self.front.executor, self.front.container.ask,
                                                self.request)
        except Exception:
            log.exception("admitting %s %s failed", self.request.method, self.request.path)
            answer = _problem(500, "the server could not complete the request", "server-error")
        if answer is not None:
            self._answer(answer)
            return
        limit = self.front.settings.max_body_bytes
        length = headers.get("Content-Length", "").strip()
        wanted = int(length) if length.isdigit() else limit  # chunked: up to the limit
        if not self.front.reserve(wanted):
            self._answer(_problem(503, "the server is receiving other uploads; try again",
                                  "busy", {"Retry-After": str(BUSY_RETRY_AFTER_S)}))
            return
        self.reserved = wanted
        self.request.ballast_admitted = True  # type: ignore[attr-defined]
        self.deadline = loop.call_later(self.front.settings.body_timeout_s, self._too_slow)

    def data_received(self, chunk: bytes) -> None:
        if self.answered:
            return
        self.size += len(chunk)
        if self.size > self.front.settings.max_body_bytes:
            self._answer(_problem(413, "the request body exceeds the limit of "
                                       f"{self.front.settings.max_body_bytes} bytes",
                                  "body-size"))
            return
        self.chunks.append(chunk)

    def finish(self) -> None:
        self._stop_clock()
        if self.answered or self.request is None:
            return
        self.request.body = b"".join(self.chunks)
        self.chunks = []
        release, self.reserved = self.reserved, 0
        IOLoop.current().spawn_callback(self.front.run, self.request, release)

    def on_connection_close(self) -> None:
        self._stop_clock()
        self.chunks = []
        self._release()

    def _too_slow(self) -> None:
        self.deadline = None
        self._answer(_problem(
            408, f"the body did not arrive within {self.front.settings.body_timeout_s:g} s",
            "body-timeout"))

    def _answer(self, answer: Answer) -> None:
        """Answer before the body has been read: the connection closes after the answer."""
        self.answered = True
        self.chunks = []
        self._stop_clock()
        self._release()
        with contextlib.suppress(Exception):  # the client may be gone already
            _send(self.connection, answer)
        if self.request is not None:
            self.front.container._log(answer[0], self.request)

    def _stop_clock(self) -> None:
        if self.deadline is not None:
            IOLoop.current().remove_timeout(self.deadline)  # type: ignore[arg-type]
            self.deadline = None

    def _release(self) -> None:
        self.front.reserved -= self.reserved
        self.reserved = 0


class FrontWorker(TornadoWorker):
    """gunicorn's tornado worker with the front above: the server's limits, the thread pool,
    and a graceful stop that lets requests in hand finish (up to ``graceful_timeout``)."""

    def run(self) -> None:
        self.ioloop = IOLoop.current()
        self.alive = True
        self.server_alive = False
        self.stop_by = float("inf")
        self.callbacks = [PeriodicCallback(self.watchdog, 1000),
                          PeriodicCallback(self.heartbeat, 1000)]
        for callback in self.callbacks:
            callback.start()
        settings = FrontSettings.of(self.wsgi.config)
        access = self.log.access_log if self.cfg.accesslog else None
        self.front = Front(self.wsgi, settings, self.cfg.threads, access, self.handle_request)
        options: dict[str, Any] = {
            "no_keep_alive": self.cfg.keepalive <= 0,
            "idle_connection_timeout": settings.header_timeout_s,
            "max_header_size": MAX_HEADER_BYTES,
            "max_body_size": 1 << 62,  # the front counts (413 from it, not a bare 400)
            "chunk_size": READ_CHUNK_BYTES,
            "decompress_request": False,
        }
        if self.cfg.is_ssl:
            options["ssl_options"] = ssl_context(self.cfg)
        self.server = tornado.httpserver.HTTPServer(self.front, **options)
        self.server_alive = True
        for listener in self.sockets:
            listener.setblocking(False)
            self.server.add_socket(listener)
        self.ioloop.start()
        self.front.executor.shutdown(wait=False, cancel_futures=True)

    def heartbeat(self) -> None:
        if self.alive:
            return
        if self.server_alive:  # stop accepting; requests in hand may finish
            with contextlib.suppress(Exception):
                self.server.stop()
            self.server_alive = False
            self.stop_by = time.monotonic() + float(self.cfg.graceful_timeout)
        elif self.front.active == 0 or time.monotonic() > self.stop_by:
            for callback in self.callbacks:
                callback.stop()
            self.ioloop.stop()
