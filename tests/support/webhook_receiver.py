"""A real HTTP server on loopback that records the callbacks it receives (tests and the load
test; loopback targets are allowed by their configuration)."""

from __future__ import annotations

import threading
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer


class Receiver:
    """Records each POST (headers, body); answers with the next of ``answers`` (then 200)."""

    def __init__(self, answers: list[tuple[int, dict[str, str]]] | None = None) -> None:
        self.calls: list[tuple[str, dict[str, str], bytes]] = []
        self.answers = list(answers or [])
        receiver = self

        class Handler(BaseHTTPRequestHandler):
            def do_POST(self) -> None:
                body = self.rfile.read(int(self.headers.get("Content-Length", 0)))
                receiver.calls.append((self.path, dict(self.headers), body))
                status, headers = receiver.answers.pop(0) if receiver.answers else (200, {})
                self.send_response(status)
                for name, value in headers.items():
                    self.send_header(name, value)
                self.send_header("Content-Length", "0")
                self.end_headers()

            def log_message(self, *args: object) -> None:
                pass

        self.server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
        self.thread = threading.Thread(target=self.server.serve_forever, daemon=True)

    @property
    def url(self) -> str:
        return f"http://127.0.0.1:{self.server.server_address[1]}/hooks/ballast"

    def __enter__(self) -> Receiver:
        self.thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.server.shutdown()
        self.server.server_close()
